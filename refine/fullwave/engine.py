"""Finding and running the open FDTD engine (openEMS with CSXCAD) in a subprocess.

The engine's Python bindings are usually a system package (Debian/Ubuntu: ``python3-openems``)
that imports under the system interpreter only, so refine never imports them: it writes a job
file, runs :mod:`refine.fullwave._solver_script` under an interpreter that has the bindings, and
reads the result file back. The interpreter is, in order: ``$REFINE_OPENEMS_PYTHON``, this
interpreter, ``/usr/bin/python3``.
"""

from __future__ import annotations

import functools
import json
import math
import os
import re
import signal
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from refine.physics.constants import C0

SCRIPT = Path(__file__).with_name("_solver_script.py")

INSTALL_HINT = (
    "the field solver needs the openEMS FDTD engine with its Python bindings. On Debian or "
    "Ubuntu: 'sudo apt-get install python3-openems' (about 700 MB); elsewhere build openEMS and "
    "CSXCAD with their Python bindings, then point REFINE_OPENEMS_PYTHON at a Python interpreter "
    "that can 'import openEMS'. The rest of refine works without it."
)


class EngineMissing(RuntimeError):
    """No interpreter with the openEMS bindings was found."""


class EngineFailed(RuntimeError):
    """The engine ran but did not produce a result."""


@dataclass(frozen=True)
class Engine:
    python: str
    version: str


def _probe(python: str) -> str | None:
    code = (
        "import numpy as np\n"
        "np.float = float; np.int = int\n"
        "import openEMS, CSXCAD, subprocess\n"
        "print(getattr(openEMS, '__version__', ''))\n"
    )
    try:
        out = subprocess.run(
            [python, "-c", code], capture_output=True, text=True, timeout=60, check=False
        )
    except (OSError, subprocess.TimeoutExpired):
        return None
    return out.stdout.strip() if out.returncode == 0 else None


def _engine_version() -> str:
    try:
        out = subprocess.run(
            ["openEMS", "--help"], capture_output=True, text=True, timeout=30, check=False
        )
    except (OSError, subprocess.TimeoutExpired):
        return "openEMS (version unknown)"
    for line in (out.stdout + out.stderr).splitlines():
        if "version" in line:
            return "openEMS " + line.split("version", 1)[1].strip()
    return "openEMS (version unknown)"


@functools.cache
def find_engine() -> Engine:
    """The interpreter that runs the field solve, or :class:`EngineMissing` saying what to
    install."""
    candidates = []
    env = os.environ.get("REFINE_OPENEMS_PYTHON")
    if env:
        candidates.append(env)
    candidates += [sys.executable, "/usr/bin/python3"]
    for py in dict.fromkeys(candidates):
        if _probe(py) is not None:
            return Engine(py, _engine_version())
    tried = ", ".join(dict.fromkeys(candidates))
    raise EngineMissing(f"{INSTALL_HINT} (tried: {tried})")


def available() -> bool:
    try:
        find_engine()
    except EngineMissing:
        return False
    return True


Progress = Callable[[str], None]
PROGRESS_EVERY = 20.0  # seconds between progress lines while the engine runs
_STEP = re.compile(r"Timestep:\s*(\d+)")


def job_size(job: dict) -> tuple[int, int]:
    """(cells, time steps at most) of a job: the mesh's cell count, and its simulated time over
    the Courant time step of its smallest cells (the engine may stop sooner, on its energy
    criterion)."""
    axes = [np.diff(np.asarray(job["mesh"][a], float)) for a in ("x", "y", "z")]
    cells = int(np.prod([d.size for d in axes]))
    dt = 1.0 / (C0 * math.sqrt(sum(1.0 / float(d.min()) ** 2 for d in axes)))
    return cells, math.ceil(float(job["max_time"]) / dt)


def _die_with_parent() -> None:
    """Run in the engine's process before it starts (Linux): have the kernel send it SIGTERM
    when the process that started it dies, so that a campaign killed mid-solve leaves no engine
    running on (``prctl(PR_SET_PDEATHSIG)``, Linux man-pages prctl(2)). Elsewhere nothing."""
    import ctypes

    try:
        ctypes.CDLL(None, use_errno=True).prctl(1, int(signal.SIGTERM))  # 1: PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass


def run(
    job: dict,
    workdir: str | Path | None = None,
    timeout: float = 6 * 3600,
    progress: Progress | None = None,
    label: str = "field solve",
) -> dict:
    """Run one job; returns the result arrays (see the solver script) plus ``seconds``.

    workdir : keep the engine's files there (a fresh temporary folder otherwise, removed after).
    progress : told the job's size before it starts, then every :data:`PROGRESS_EVERY` seconds
        the time step reached and an estimate of the time left (an upper bound: the engine
        stops early once the fields have decayed).
    """
    engine = find_engine()
    cells, steps = job_size(job)
    if progress is not None:
        progress(f"{label}: {cells:,} cells, at most {steps:,} time steps")
    with tempfile.TemporaryDirectory(prefix="refine-fdtd-") as tmp:
        work = Path(workdir) if workdir is not None else Path(tmp)
        work.mkdir(parents=True, exist_ok=True)
        job_path = work / "job.json"
        out_path = work / "result.npz"
        job_path.write_text(json.dumps(job))
        out_path.unlink(missing_ok=True)
        t0 = time.perf_counter()
        log: list[str] = []
        with subprocess.Popen(
            [engine.python, str(SCRIPT), str(job_path), str(out_path)],
            stdout=subprocess.PIPE,
            stderr=subprocess.STDOUT,
            text=True,
            cwd=work,
            preexec_fn=_die_with_parent if sys.platform.startswith("linux") else None,
        ) as proc:
            assert proc.stdout is not None
            last = t0
            try:
                for line in proc.stdout:
                    log.append(line)
                    now = time.perf_counter()
                    if now - t0 > timeout:
                        raise EngineFailed(f"the field solve took longer than {timeout:.0f} s")
                    m = _STEP.search(line)
                    if progress is not None and m and now - last >= PROGRESS_EVERY:
                        last = now
                        done = int(m.group(1))
                        left = (now - t0) * max(steps - done, 0) / max(done, 1)
                        progress(
                            f"  {label}: time step {done:,} of at most {steps:,} "
                            f"({100 * done / max(steps, 1):.0f} %), {now - t0:.0f} s, "
                            f"at most about {left:.0f} s left"
                        )
            except BaseException:  # timed out or interrupted: the engine stops with us
                proc.kill()
                raise
            returncode = proc.wait()
        seconds = time.perf_counter() - t0
        text = "".join(log)
        (work / "engine.log").write_text(text)
        if returncode != 0 or not out_path.exists():
            tail = "\n".join(text.strip().splitlines()[-15:])
            raise EngineFailed(f"the field solve failed (exit {returncode}):\n{tail}")
        with np.load(out_path) as data:
            result = {k: data[k] for k in data.files}
    if job.get("mirror"):
        # a half box (magnetic wall on the centre line) carries half of every strip's current
        # at the same voltage: the whole structure's current is twice, its impedance half
        for p in job["ports"]:
            n = int(p["number"])
            result[f"i{n}"] = 2.0 * result[f"i{n}"]
            if f"yi{n}" in result:
                result[f"yi{n}"] = 2.0 * result[f"yi{n}"]
            result[f"zc{n}"] = 0.5 * result[f"zc{n}"]
    result["seconds"] = seconds
    result["engine"] = engine.version
    return result
