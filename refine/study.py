"""Design studies: one base problem, axes to sweep, every combination through the full design
path, one row per design.

Study file (TOML)::

    name = "free text"
    base = "../microstrip-x-band-alumina-n3.toml"        # relative to the study file
    [axes]                                              # dotted problem keys -> lists of values
    "response.fractional_bandwidth" = [0.01, 0.02, 0.03]
    "response.order" = [3, 5]
    "fab.min_gap" = ["10 um", "25 um"]
    "coupling.external" = ["gap", "tap"]
    "coupling.topology" = ["end-coupled", "parallel-coupled"]   # with external "gap"
    medium = [{kind = "microstrip", eps_r = 9.8, height = "0.635 mm"}, ...]   # a whole table
    [options]
    yield_samples = 0                                   # > 0 adds a Monte Carlo yield per design
    max_evaluations = 300                               # the refiner's budget per design

Execution: a local process pool (all cores) by default, or an existing Dask distributed cluster
given its scheduler address. The design path is deterministic, so the rows are identical
whichever executor ran them (wall times aside).

Nothing lost: every finished design is appended to ``results.jsonl`` (flushed and synced) as it
completes; ``--resume`` skips the designs already there, so a study killed at any moment loses at
most the designs that were running. The final table is written as Parquet and CSV.
"""

from __future__ import annotations

import copy
import hashlib
import itertools
import json
import math
import os
import sys
import threading
import time
import tomllib
import warnings
from collections.abc import Callable, Iterator
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from refine.optimise.minimax import Stopping
from refine.optimise.parallel import refine_parallel
from refine.optimise.refiner import refine_problem
from refine.outputs.export import write_atomic, write_json, write_text_atomic
from refine.outputs.files import OutputError, locked_folder
from refine.spec.limits import MAX_DESIGNS
from refine.spec.problem import ProblemError, parse_problem
from refine.tolerance import montecarlo as tolerance
from refine.validity import ModelRangeWarning

_TOP = {"name", "base", "axes", "options"}
_OPTIONS = {"yield_samples", "max_evaluations"}


class StudyError(ValueError):
    """A study file that cannot be used, or an executor that cannot be reached."""


@dataclass(frozen=True)
class Study:
    name: str
    source: str
    axes: dict[str, list]
    designs: list[dict]  # one problem dict per combination
    labels: list[dict]  # the axis values of each combination, for the table
    yield_samples: int
    max_evaluations: int | None = None  # the refiner's budget per design; None: its default

    @property
    def fingerprint(self) -> str:
        """Identifies the combination list, so --resume refuses a changed study."""
        parts: list[Any] = [self.labels, self.designs, self.yield_samples]
        if self.max_evaluations is not None:
            parts.append(self.max_evaluations)
        text = json.dumps(parts, sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()[:16]


def _set(d: dict, dotted: str, value: Any) -> None:
    """Set the problem-file key ``dotted`` ("medium.eps_r") in ``d``; a ValueError when a part
    of the path is a value, not a table ("response.order.x")."""
    *path, last = dotted.split(".")
    t = d
    for depth, k in enumerate(path):
        t = t.setdefault(k, {})
        if not isinstance(t, dict):
            where = ".".join(path[: depth + 1])
            raise ValueError(f"{where} is a value in the problem file, not a table of keys")
    t[last] = copy.deepcopy(value)


def load_study(path: str | Path, allow_many: bool = False) -> Study:
    """Read a study file and expand its combinations, each validated as a problem up front."""
    p = Path(path)
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except OSError as e:
        raise StudyError(f"{p}: cannot be read ({e.strerror})") from None
    except tomllib.TOMLDecodeError as e:
        raise StudyError(f"{p}: is not valid TOML ({e})") from None
    for k in data:
        if k not in _TOP:
            raise StudyError(
                f"{p}: {k} = {data[k]!r}: unknown key; allowed keys are {', '.join(sorted(_TOP))}"
            )
    name = data.get("name")
    if not isinstance(name, str) or not name.strip():
        raise StudyError(f"{p}: name = {name!r}: must be a non-empty string")
    base_rel = data.get("base")
    if not isinstance(base_rel, str):
        raise StudyError(f"{p}: base = {base_rel!r}: must name the base problem file")
    base_path = (p.parent / base_rel).resolve()
    try:
        base = tomllib.loads(base_path.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError) as e:
        raise StudyError(
            f"{p}: base = {base_rel!r}: cannot be read as a problem file ({e})"
        ) from None
    axes = data.get("axes")
    if not isinstance(axes, dict) or not axes:
        raise StudyError(f"{p}: [axes] must name at least one axis to sweep")
    for key, values in axes.items():
        if not isinstance(values, list) or not values:
            raise StudyError(f"{p}: axes.{key} = {values!r}: must be a non-empty list of values")
    opts = data.get("options", {})
    for k in opts:
        if k not in _OPTIONS:
            raise StudyError(
                f"{p}: options.{k} = {opts[k]!r}: unknown key; allowed keys are {', '.join(sorted(_OPTIONS))}"
            )
    ys = opts.get("yield_samples", 0)
    if isinstance(ys, bool) or not isinstance(ys, int) or not 0 <= ys <= 100_000:
        raise StudyError(f"{p}: options.yield_samples = {ys!r}: must be an integer in 0..100000")
    me = opts.get("max_evaluations")
    if me is not None and (
        isinstance(me, bool) or not isinstance(me, int) or not 1 <= me <= 100_000
    ):
        raise StudyError(f"{p}: options.max_evaluations = {me!r}: must be an integer in 1..100000")
    keys = list(axes)
    n = math.prod(len(axes[k]) for k in keys)
    if n > MAX_DESIGNS and not allow_many:
        raise StudyError(
            f"{p}: the axes give {n} designs, more than {MAX_DESIGNS}; pass --yes to run them"
        )
    designs: list[dict] = []
    labels: list[dict] = []
    for combo in itertools.product(*(axes[k] for k in keys)):
        d = copy.deepcopy(base)
        label = {}
        for key, value in zip(keys, combo, strict=True):
            if key == "response.fractional_bandwidth":
                d.get("response", {}).pop("bandwidth", None)
            if key == "response.bandwidth":
                d.get("response", {}).pop("fractional_bandwidth", None)
            try:
                _set(d, key, value)
            except ValueError as e:
                raise StudyError(f"{p}: axes.{key}: {e}") from None
            label[key] = value
        d["name"] = f"{name} #{len(designs)}"
        try:
            parse_problem(d, f"{p}#{len(designs)}")
        except ProblemError as e:
            raise StudyError(f"{p}: the combination {label} is not a valid problem: {e}") from None
        designs.append(d)
        labels.append(label)
    return Study(name.strip(), str(p), axes, designs, labels, ys, me)


def run_design(
    index: int,
    problem_dict: dict,
    source: str,
    yield_samples: int,
    max_evaluations: int | None = None,
) -> dict:
    """One design through the full path; a plain function of plain data, so any executor can
    run it. Returns the table row (without the axis labels)."""
    t0 = time.perf_counter()
    problem = parse_problem(problem_dict, source)
    stopping = None if max_evaluations is None else Stopping(max_evaluations=max_evaluations)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        if problem.topology == "parallel-coupled":
            return _parallel_row(index, problem, stopping, t0)
        r = refine_problem(problem, stopping=stopping)
        row = {
            "index": index,
            "status": r.status.value,
            "seed_margin_db": r.seed_worst_margin,
            "refined_margin_db": r.worst_margin,
            "seed_return_loss_margin_db": r.seed_worst.get("passband return loss", float("nan")),
            "refined_return_loss_margin_db": r.worst.get("passband return loss", float("nan")),
            "evaluations": r.evaluations,
            "order": len(r.electrical[1]) if r.layout is None else r.layout.order,
            "fbw": problem.fbw,
            "min_gap_m": problem.strip_fab.min_gap if problem.fab else None,
            "external": problem.external,
            "topology": problem.topology,
        }
        if r.layout is not None:
            row |= {
                "corner_margin_db": r.corner_margin,
                "smallest_gap_m": min(r.layout.gaps),
                "total_length_m": r.layout.total_length,
                "end_resonator_width_m": r.layout.widths[0],
            }
        if (
            yield_samples
            and r.layout is not None
            and r.status.value in ("met", "met on the nominal model only")
            and problem.fab is not None
        ):
            try:
                row["yield"] = tolerance.estimate_yield(
                    problem, r.layout, yield_samples, seed=index
                ).yield_fraction
            except ValueError:
                row["yield"] = None
    row["wall_time_s"] = time.perf_counter() - t0
    return row


def _parallel_row(index: int, problem, stopping: Stopping | None, t0: float) -> dict:
    """:func:`run_design`'s row for a parallel-coupled design (no yield yet)."""
    r = refine_parallel(problem, stopping)
    lay = r.layout
    return {
        "index": index,
        "status": r.status.value,
        "seed_margin_db": r.seed_verdict.worst_margin,
        "refined_margin_db": r.verdict.worst_margin,
        "seed_return_loss_margin_db": r.seed_verdict.worst.get(
            "passband return loss", float("nan")
        ),
        "refined_return_loss_margin_db": r.verdict.worst.get("passband return loss", float("nan")),
        "evaluations": r.evaluations,
        "order": lay.order,
        "fbw": problem.fbw,
        "min_gap_m": problem.strip_fab.min_gap,
        "external": problem.external,
        "topology": problem.topology,
        "corner_margin_db": r.corners.worst_margin,
        "smallest_gap_m": min(lay.spacings),
        "total_length_m": lay.total_length,
        "end_resonator_width_m": lay.widths[0],
        "wall_time_s": time.perf_counter() - t0,
    }


PARENT_POLL_S = 1.0  # how often a pool worker checks that the study that started it is alive


def watch_parent(parent_pid: int) -> None:
    """Run in each pool worker as it starts: a daemon thread ends the worker when the study
    process that started it is gone (killed with SIGKILL, say, which gives the pool no chance
    to stop its workers); otherwise they would run on, orphaned, until their queue is empty."""

    def watch() -> None:
        while True:
            time.sleep(PARENT_POLL_S)
            if os.getppid() != parent_pid:
                os._exit(1)

    threading.Thread(target=watch, name="refine-parent-watch", daemon=True).start()


def append_row(store: Path, row: dict) -> None:
    with open(store, "a", encoding="utf-8") as fh:
        fh.write(json.dumps(row, default=str) + "\n")
        fh.flush()
        os.fsync(fh.fileno())


def repair_store(store: Path) -> int:
    """Rewrite the store (atomically) without lines that do not parse, such as the last line
    of a run killed while writing it; returns how many were dropped. Appending after a torn
    line would otherwise glue the next row onto it."""
    if not store.exists():
        return 0
    text = store.read_text(encoding="utf-8")
    good, bad = [], 0
    for line in text.splitlines():
        try:
            json.loads(line)
            good.append(line)
        except json.JSONDecodeError:
            bad += 1
    torn_end = bool(text) and not text.endswith("\n")
    if bad or torn_end:
        write_text_atomic(store, "".join(x + "\n" for x in good))
    return bad


def _read_store(store: Path) -> dict[int, dict]:
    rows: dict[int, dict] = {}
    if not store.exists():
        return rows
    for line in store.read_text(encoding="utf-8").splitlines():
        try:
            row = json.loads(line)
        except json.JSONDecodeError:  # a line cut short by a kill: that design runs again
            continue
        rows[int(row["index"])] = row
    return rows


def unordered(
    fn: Callable[..., Any], args: list[tuple], workers: int | None, client: Any = None
) -> Iterator[Any]:
    """``fn(*a)`` for every ``a`` in ``args``, yielded as each finishes: on a Dask ``client``,
    in this process (``workers == 1``), or on a local pool whose workers end with this process."""
    if client is not None:
        from distributed import as_completed as dask_completed

        for fut in dask_completed([client.submit(fn, *a, pure=False) for a in args]):
            yield fut.result()
    elif workers == 1:
        for a in args:
            yield fn(*a)
    else:
        with ProcessPoolExecutor(
            max_workers=workers or os.cpu_count(),
            initializer=watch_parent,
            initargs=(os.getpid(),),
        ) as pool:
            for fut in as_completed([pool.submit(fn, *a) for a in args]):
                yield fut.result()


def check_scheduler(address: str, timeout: float = 5.0):
    """A connected Dask client, or StudyError if nothing answers at ``address``."""
    try:
        from distributed import Client
    except ImportError:
        raise StudyError(
            "--scheduler needs dask.distributed: pip install 'refine[cluster]'"
        ) from None
    try:
        return Client(address, timeout=timeout)
    except (OSError, TimeoutError) as e:
        raise StudyError(f"--scheduler {address}: no Dask scheduler answers there ({e})") from None


def run_study(
    study: Study,
    out: str | Path,
    workers: int | None = None,
    client=None,
    resume: bool = False,
    force: bool = False,
    progress: Callable[[int, int, dict], None] | None = None,
    say: Callable[[str], None] | None = None,
):
    """Run every design not yet in the store; return the full results table (pandas).

    The folder is locked for the run (a second run into it stops at once); a results store or
    header that is a symbolic link is refused, never written through; on ``resume`` a last line
    cut short by a kill is dropped from the store (``say`` is told) and that design runs again."""
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise StudyError(f"--out {out}: exists and is not a folder")
    for name in ("results.jsonl", "study.json", "results.csv", "results.parquet"):
        if (out / name).is_symlink():
            raise StudyError(
                f"--out {out}: {name} is a symbolic link; refine never writes through a link "
                "(remove it or choose another folder)"
            )
    try:
        with locked_folder(out, True, ()) as folder:
            return _run_study(study, folder, workers, client, resume, force, progress, say)
    except OutputError as e:
        raise StudyError(str(e)) from None


def _run_study(
    study: Study,
    out: Path,
    workers: int | None,
    client: Any,
    resume: bool,
    force: bool,
    progress: Callable[[int, int, dict], None] | None,
    say: Callable[[str], None] | None,
) -> Any:
    import pandas as pd  # deferred: pandas costs start-up time to every other verb

    store = out / "results.jsonl"
    header = out / "study.json"
    if header.exists():
        old = json.loads(header.read_text())
        if not resume and not force:
            raise StudyError(
                f"--out {out}: already holds a study; use --resume to continue it or --force to start again"
            )
        if resume and old.get("fingerprint") != study.fingerprint:
            raise StudyError(
                f"--out {out}: holds a different study (its combinations differ); use another folder"
            )
        if force and not resume:
            store.unlink(missing_ok=True)
    out.mkdir(parents=True, exist_ok=True)
    write_json(
        header,
        {
            "name": study.name,
            "source": study.source,
            "fingerprint": study.fingerprint,
            "designs": len(study.designs),
            "axes": study.axes,
        },
    )
    if resume:
        dropped = repair_store(store)
        if dropped and say is not None:
            say(
                f"results.jsonl: dropped {dropped} line(s) cut short by an interrupted run; "
                "those designs run again"
            )
    done = _read_store(store) if resume else {}
    todo = [k for k in range(len(study.designs)) if k not in done]
    counts = {"met": 0, "not met": 0, "infeasible": 0}
    for row in done.values():
        counts[row["status"]] = counts.get(row["status"], 0) + 1
    total = len(study.designs)

    def finish(row: dict) -> None:
        append_row(store, row)
        done[row["index"]] = row
        counts[row["status"]] = counts.get(row["status"], 0) + 1
        if progress is not None:
            progress(len(done), total, counts)

    args = [
        (k, study.designs[k], f"{study.source}#{k}", study.yield_samples, study.max_evaluations)
        for k in todo
    ]
    for row in unordered(run_design, args, workers, client):
        finish(row)
    rows = []
    for k in range(total):
        row = {
            "index": k,
            **{f"axis {key}": _plain(v) for key, v in study.labels[k].items()},
            **done[k],
        }
        rows.append(row)
    frame = pd.DataFrame(rows)
    write_atomic(out / "results.csv", lambda p: frame.to_csv(p, index=False))
    write_atomic(out / "results.parquet", lambda p: frame.to_parquet(p, index=False))
    return frame


def _plain(v: Any) -> Any:
    """A table cell for an axis value (tables such as a whole [medium] become JSON text)."""
    return json.dumps(v, sort_keys=True) if isinstance(v, (dict, list)) else v


STATUS_ORDER = ("met", "met on the nominal model only", "not met", "infeasible")


def status_counts(counts: dict) -> str:
    """ "4 met, 1 met on the nominal model only, 0 not met, 2 infeasible" (every status named,
    so that the counts add up to the designs done)."""
    return ", ".join(f"{counts.get(s, 0)} {s}" for s in STATUS_ORDER)


def progress_printer():
    tty = sys.stderr.isatty()

    def show(n: int, total: int, counts: dict) -> None:
        text = f"designs {n}/{total}: " + status_counts(counts)
        if tty:
            width = 30
            bar = "#" * int(width * n / total) + "-" * (width - int(width * n / total))
            print(f"\r[{bar}] {text}", end="" if n < total else "\n", file=sys.stderr, flush=True)
        else:
            print(text, file=sys.stderr, flush=True)

    return show
