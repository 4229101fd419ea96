"""One field solve of a two-port: mesh, thru calibration run, excitation run(s), S-parameters."""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine.circuit.cascade import Abcd, abcd_to_s
from refine.fullwave import engine, geometry, ringdown, waves
from refine.physics.constants import C0
from refine.physics.substrate import Substrate


class FieldSolveWarning(UserWarning):
    """A field solve whose result looks untrustworthy (not passive)."""


@dataclass(frozen=True)
class FieldSolve:
    """S-parameters of a structure from the field solver, on the caller's frequencies.

    s : ``(nf, 2, 2)`` for ``z_ref`` at the structure's reference planes; abcd the same two-port;
    zc, beta : the feed line's impedance and propagation constant on this mesh (thru run);
    runs : engine runs made (thru included); seconds : their wall time in all;
    tail : the largest late-time port voltage over its peak (a truncation check: well under
    1e-2 means the ringing had died down before the time cap);
    ringdown_check : with the ring-down continued, the worst of its fits' own checks
    (:attr:`refine.fullwave.ringdown.Continued.check`), else None.
    """

    f: NDArray[np.float64]
    s: NDArray[np.complex128]
    abcd: Abcd
    z_ref: float
    zc: NDArray[np.complex128]
    beta: NDArray[np.complex128]
    mesh: geometry.Mesh
    resolution: geometry.Resolution
    runs: int
    seconds: float
    tail: float
    engine: str
    ringdown_check: float | None = None


def transit_time(mesh: geometry.Mesh, substrate: Substrate) -> float:
    """Time for a wave in the substrate to cross the box diagonal once (s)."""
    return mesh.span * math.sqrt(substrate.eps_r) / C0


class Runs(NamedTuple):
    """The engine runs of one field solve, as :func:`refine.fullwave.engine.run` returned them:
    the thru run, the excitation runs (one for a mirror-symmetric structure), and the time
    (s) after which the pulse and six box transits have passed (where a ring-down fit may
    start)."""

    thru: dict
    excitations: list[dict]
    ring_from: float
    mesh: geometry.Mesh


def solve(
    st: geometry.Structure,
    substrate: Substrate,
    f: NDArray,
    z_ref: float,
    res: geometry.Resolution,
    ringing: float = 0.0,
    band: tuple[float, float] | None = None,
    workdir: str | Path | None = None,
    threads: int = 0,
    lossy: bool = True,
    progress: engine.Progress | None = None,
    enclosure: str = "open",
    continue_ringdown: bool = False,
) -> FieldSolve:
    """Field-solve a structure; see :mod:`refine.fullwave.geometry` for the model.

    ringing : how long (s) the structure rings after the pulse (for a filter, several of its
        largest group delays); the simulated time is the pulse, six box transits and this.
    band : the excitation band (Hz), the span of ``f`` by default.
    enclosure : "open" (absorbing walls and top) or "shielded" (metal walls and lid), see
        :func:`refine.fullwave.geometry.boundaries`.
    continue_ringdown : continue the excitation runs' port signals past the end of their
        records from a fit of their ring-down after the pulse and six box transits
        (:mod:`refine.fullwave.ringdown`), so ``ringing`` may be shorter than a full decay.
    """
    f = v.frequencies("f", f)
    r = run_engine(
        st, substrate, f, res, ringing, band, workdir, threads, lossy, progress, enclosure
    )
    return two_port(st, f, z_ref, res, r, r.ring_from if continue_ringdown else None)


def run_engine(
    st: geometry.Structure,
    substrate: Substrate,
    f: NDArray,
    res: geometry.Resolution,
    ringing: float = 0.0,
    band: tuple[float, float] | None = None,
    workdir: str | Path | None = None,
    threads: int = 0,
    lossy: bool = True,
    progress: engine.Progress | None = None,
    enclosure: str = "open",
    end_criterion: float = geometry.END_CRITERION,
) -> Runs:
    """The engine runs behind :func:`solve` (same arguments); end_criterion: the engine's
    energy level, relative to its peak, at which a run may stop before its time cap."""
    f = v.frequencies("f", f)
    band = band if band is not None else (float(f.min()), float(f.max()))
    mesh = geometry.build_mesh(st, substrate, band[1], res)
    base = geometry.pulse_length(band) + 6.0 * transit_time(mesh, substrate)
    work = Path(workdir) if workdir is not None else None

    def sub(name: str) -> Path | None:
        return work / name if work is not None else None

    def job(s: geometry.Structure, max_time: float, k: int) -> dict:
        j = geometry.job(s, mesh, substrate, band, f, max_time, k, threads, lossy, enclosure)
        return {**j, "end_criterion": float(end_criterion)}

    thru_st = st.thru(far_edge=float(mesh.y[-1]))
    rt = engine.run(job(thru_st, base, 1), sub("thru"), progress=progress, label="thru run")
    runs = [
        engine.run(
            job(st, base + ringing, k),
            sub(f"excite-{k}"),
            progress=progress,
            label=f"excitation {k}",
        )
        for k in ((1,) if st.symmetric else (1, 2))
    ]
    return Runs(rt, runs, base, mesh)


def two_port(
    st: geometry.Structure,
    f: NDArray,
    z_ref: float,
    res: geometry.Resolution,
    runs: Runs,
    fit_from: float | None = None,
    cut: float | None = None,
) -> FieldSolve:
    """S-parameters from a solve's engine runs; fit_from, cut: see :func:`port_state`."""
    rt = runs.thru
    zc = {1: rt["zc1"], 2: rt["zc2"]}
    beta = {1: rt["beta1"], 2: rt["beta2"]}
    if st.feeds[0].axis != st.feeds[1].axis or st.feeds[1].axis == "y":
        zc[2], beta[2] = zc[1], beta[1]  # tapped: the thru runs along the first feed only
    seconds = float(rt["seconds"]) + sum(float(r["seconds"]) for r in runs.excitations)
    tail = max(float(r[f"tail{k}"]) for k, r in enumerate(runs.excitations, start=1))
    states, fits = [], []
    for r in runs.excitations:
        state, fit = port_state(st, r, f, zc, beta, fit_from, cut)
        states.append(state)
        fits += fit
    with np.errstate(all="ignore"):
        abcd = waves.abcd_from_states(states)
        s = abcd_to_s(abcd, z_ref)
    if not np.all(np.isfinite(s)):
        raise engine.EngineFailed(
            "the field solve returned non-finite S-parameters (a diverged or empty run); "
            "run again with a workdir and read its engine.log"
        )
    power = np.abs(s[:, 0, 0]) ** 2 + np.abs(s[:, 1, 0]) ** 2
    if power.max() > 1.05:
        warnings.warn(
            f"field solve: |S11|^2 + |S21|^2 reaches {power.max():.3f} (> 1: not passive) at "
            f"{f[int(np.argmax(power))] / 1e9:.4g} GHz; the mesh or the simulated time is too "
            "short for this structure",
            FieldSolveWarning,
            stacklevel=2,
        )
    return FieldSolve(
        f,
        s,
        abcd,
        z_ref,
        np.asarray(zc[1]),
        np.asarray(beta[1]),
        runs.mesh,
        res,
        1 + len(runs.excitations),
        seconds,
        tail,
        str(rt["engine"]),
        max((t.check for t in fits), default=None),
    )


def port_state(
    st: geometry.Structure,
    run: dict,
    f: NDArray,
    zc: dict[int, NDArray],
    beta: dict[int, NDArray],
    fit_from: float | None = None,
    cut: float | None = None,
) -> tuple[waves.PortState, list[ringdown.Continued]]:
    """Both ports' (V, I) of one excitation run, moved to the structure's reference planes.

    fit_from : continue each port signal's ring-down from a fit of its record after this time
        (s; :mod:`refine.fullwave.ringdown`); None takes the engine's transforms as they are.
    cut : use the record only up to this time (s): a study of how early a record may end.
    Returns the state and the continuations made (four, or none)."""
    planes, fits = [], []
    for p, fd in enumerate(st.feeds, start=1):
        vi = [run[f"v{p}"], run[f"i{p}"]]
        if fit_from is not None or cut is not None:
            vi = []
            for q in ("v", "i"):
                t, y = np.asarray(run[f"t{q}{p}"]), np.asarray(run[f"y{q}{p}"])
                if cut is not None:
                    t, y = t[t <= cut], y[t <= cut]
                if fit_from is not None:
                    cont = ringdown.continued_spectrum(t, y, f, fit_from)
                    fits.append(cont)
                    vi.append(cont.spectrum)
                else:
                    vi.append(ringdown.record_spectrum(t, y, f))
        d = abs(float(run[f"meas{p}"]) - fd.ref)
        planes += list(waves.move_to_plane(vi[0], vi[1], zc[p], beta[p], d))
    return waves.PortState(*planes), fits
