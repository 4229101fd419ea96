"""One field solve of a two-port: mesh, thru calibration run, excitation run(s), S-parameters."""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine.circuit.cascade import Abcd, abcd_to_s
from refine.fullwave import engine, geometry, waves
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
    1e-2 means the ringing had died down before the time cap).
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


def transit_time(mesh: geometry.Mesh, substrate: Substrate) -> float:
    """Time for a wave in the substrate to cross the box diagonal once (s)."""
    return mesh.span * math.sqrt(substrate.eps_r) / C0


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
) -> FieldSolve:
    """Field-solve a structure; see :mod:`refine.fullwave.geometry` for the model.

    ringing : how long (s) the structure rings after the pulse (for a filter, several of its
        largest group delays); the simulated time is the pulse, six box transits and this.
    band : the excitation band (Hz), the span of ``f`` by default.
    enclosure : "open" (absorbing walls and top) or "shielded" (metal walls and lid), see
        :func:`refine.fullwave.geometry.boundaries`.
    """
    f = v.frequencies("f", f)
    band = band if band is not None else (float(f.min()), float(f.max()))
    mesh = geometry.build_mesh(st, substrate, band[1], res)
    base = geometry.pulse_length(band) + 6.0 * transit_time(mesh, substrate)
    work = Path(workdir) if workdir is not None else None

    def sub(name: str) -> Path | None:
        return work / name if work is not None else None

    thru_st = st.thru(far_edge=float(mesh.y[-1]))
    jt = geometry.job(thru_st, mesh, substrate, band, f, base, 1, threads, lossy, enclosure)
    rt = engine.run(jt, sub("thru"), progress=progress, label="thru run")
    zc = {1: rt["zc1"], 2: rt["zc2"]}
    beta = {1: rt["beta1"], 2: rt["beta2"]}
    if st.feeds[0].axis != st.feeds[1].axis or st.feeds[1].axis == "y":
        zc[2], beta[2] = zc[1], beta[1]  # tapped: the thru runs along the first feed only
    runs, seconds, tail = 1, float(rt["seconds"]), 0.0
    states = []
    for k in (1,) if st.symmetric else (1, 2):
        jd = geometry.job(
            st, mesh, substrate, band, f, base + ringing, k, threads, lossy, enclosure
        )
        r = engine.run(jd, sub(f"excite-{k}"), progress=progress, label=f"excitation {k}")
        runs += 1
        seconds += float(r["seconds"])
        tail = max(tail, float(r[f"tail{k}"]))
        planes = []
        for p, fd in enumerate(st.feeds, start=1):
            d = abs(float(r[f"meas{p}"]) - fd.ref)
            planes += list(waves.move_to_plane(r[f"v{p}"], r[f"i{p}"], zc[p], beta[p], d))
        states.append(waves.PortState(*planes))
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
        mesh,
        res,
        runs,
        seconds,
        tail,
        str(rt["engine"]),
    )
