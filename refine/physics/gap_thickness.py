"""What the metal's thickness adds to a microstrip gap and to an open end.

Every gap and open-end model refine has (Garg–Bahl, Kirschning–Jansen–Koster, the
electrostatic calibrations) is for strips of zero thickness. A gap between real strips is also
two metal faces t high facing each other across s, a parallel-plate capacitance ε0·W·t/s with
fringing at the corners. This module adds that increment, read from a bundled table
(``gap_thickness.json``, written by ``python -m refine.fullwave.thick_gap``): the 2-D
finite-volume solve of the gap's lengthwise section, solid strips against sheets, per unit
width of the facing strips and over ε0, on a grid of ε_r, t/h and s/h. It is taken to the
strips' widths as

    ΔC_series = ε0 · min(W1, W2) · c_s(s/h, t/h, ε_r),   ΔC_shunt,i = ε0 · W_i · c_p(…),
    ΔC_end = ε0 · W · c_e(t/h, ε_r),   Δ(Δl) = ΔC_end / C_line(W),

the min rounded where the widths cross (:func:`facing_width`) so that the refiner sees a
smooth model (see :mod:`refine.fullwave.thick_gap` for the method and why the 2-D section carries it where
W ≫ s, t). Measured sizes (ε_r 9.8, t/h 0.0157): c_s = 0.84 at s/h 0.02 (the parallel plates
alone give 0.79), 0.11 at s/h 0.2, 0.023 at s/h 1; c_p under 0.013; c_e 0.029. c_s depends on
ε_r by under 4 % from 1 to 9.8: the faces' field is in the air above the slab.

**Interpolation.** log of c_s·(s/t) (the increment over the parallel plates', near 1 at small
gaps) by the C¹ cubic Hermite scheme of :mod:`refine.physics.calibrated` in log s/h (complex s
accepted, for complex-step derivatives); c_p by the same scheme on its values; both linear in
log t/h and log ε_r between the nodes. Outside the table, t/h, ε_r and s/h are held at its
edge with a :class:`refine.validity.ModelRangeWarning` (beyond s/h 3 the increment is a
fraction of a per cent of the gap's capacitance).

Range: t/h 0.002–0.1, ε_r 1–16, s/h 0.005–3, static; W ≫ s, t (the side edges' share of the
increment, of order (s + t)/W of it, is left out). Microstrip only: a stripline's strip has
ground on both sides and this section has one; stripline gaps stay at zero thickness.
"""

from __future__ import annotations

import functools
import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import validity
from refine.physics.calibrated import clamped, hermite_weights
from refine.physics.constants import EPS0

TABLE = Path(__file__).with_name("gap_thickness.json")
FORMAT = "refine-gap-thickness/1"
#: the rounding of the narrower-width rule where two strips' widths cross, over their mean
FACE_ROUNDING = 0.05
#: the increment's relative uncertainty from its 2-D premise: on sheets the section's series
#: capacitance per unit width agrees with the 3-D calibration within 4 % at W/h 1.5-3.2
#: (``tests/test_gap_thickness.py``) and within 8.3 % at s/h 0.4 (README block
#: ``gap-thickness``); the side edges' share, of order (s + t)/W, comes on top
#: (:func:`increment_uncertainty`)
SECTION_SPREAD = 0.1


def increment_uncertainty(w_in: ArrayLike, w_out: ArrayLike, s: ArrayLike, t: float) -> NDArray:
    """The increment's relative uncertainty for a gap ``s`` between strips ``w_in`` and
    ``w_out`` of metal ``t``: :data:`SECTION_SPREAD` plus the side edges' share (s + t)/W of
    the narrower strip, which the section leaves out; at most 1 (a gap as wide as its strips,
    where the section's premise W ≫ s fails, keeps the increment's size as its uncertainty)."""
    narrow = np.minimum(np.asarray(w_in, float), np.asarray(w_out, float))
    return np.minimum(SECTION_SPREAD + (np.asarray(s, float) + t) / narrow, 1.0)


@dataclass(frozen=True, eq=False)
class Table:
    """The bundled table in log coordinates: ``e`` log ε_r, ``t`` log t/h, ``s`` log s/h;
    ``series`` log(c_s·s/t), ``shunt`` c_p (ne, nt, ns); ``end`` c_e (ne, nt)."""

    e: NDArray
    t: NDArray
    s: NDArray
    series: NDArray
    shunt: NDArray
    end: NDArray
    provenance: dict


@functools.lru_cache(maxsize=1)
def table() -> Table:
    data = json.loads(TABLE.read_text(encoding="utf-8"))
    if data.get("format") != FORMAT:
        raise ValueError(f"{TABLE}: not a {FORMAT} file (format {data.get('format')!r})")
    t_h = np.asarray(data["t_h"], float)
    s_h = np.asarray(data["s_h"], float)
    series = np.asarray(data["series"], float)
    plates = t_h[None, :, None] / s_h[None, None, :]
    return Table(
        np.log(np.asarray(data["eps_r"], float)),
        np.log(t_h),
        np.log(s_h),
        np.log(series / plates),
        np.asarray(data["shunt"], float),
        np.asarray(data["end"], float),
        data["provenance"],
    )


def _linear(nodes: NDArray, q: NDArray) -> tuple[NDArray, NDArray]:
    """(lower node index, weight of the upper node) for linear interpolation, held at the
    edges."""
    qc = np.clip(q, nodes[0], nodes[-1])
    k = np.clip(np.searchsorted(nodes, qc, side="right") - 1, 0, nodes.size - 2)
    return k, (qc - nodes[k]) / (nodes[k + 1] - nodes[k])


def _bilinear(grid: NDArray, le: NDArray, lt: NDArray) -> NDArray:
    """(n, ...): ``grid`` (ne, nt, ...) bilinear in (log ε_r, log t/h) for each element, held at
    the table's edges."""
    tab = table()
    ke, we = _linear(tab.e, le)
    kt, wt = _linear(tab.t, lt)
    tail = (1,) * (grid.ndim - 2)
    out = np.zeros((le.size, *grid.shape[2:]))
    for de, fe in ((0, 1.0 - we), (1, we)):
        for dt, ft in ((0, 1.0 - wt), (1, wt)):
            out += (fe * ft).reshape(-1, *tail) * grid[ke + de, kt + dt]
    return out


def _logs(h: NDArray, eps_r: NDArray, t: float) -> tuple[NDArray, NDArray]:
    """(log ε_r, log t/h) per element."""
    return np.log(eps_r.astype(float)), np.log(t) - np.log(h.astype(float))


def _warn_outside(le: NDArray, lt: NDArray, ls: NDArray | None) -> None:
    if le.size == 0:
        return
    tab = table()
    parts = []
    for name, q, nodes in (("eps_r", le, tab.e), ("t/h", lt, tab.t)) + (
        (("s/h", ls, tab.s),) if ls is not None else ()
    ):
        lo, hi = float(np.min(np.real(q))), float(np.max(np.real(q)))
        if lo < nodes[0] - 1e-12 or hi > nodes[-1] + 1e-12:
            parts.append(
                f"{name} {np.exp(lo):.3g}..{np.exp(hi):.3g} (tabulated "
                f"{np.exp(nodes[0]):.3g}..{np.exp(nodes[-1]):.3g})"
            )
    if parts:
        validity.warn(
            "metal thickness at gaps and open ends: "
            + ", ".join(parts)
            + " leave the table; held at its edge"
        )


def _flat(*xs: ArrayLike) -> tuple[tuple[int, ...], list[NDArray]]:
    shape = np.broadcast_shapes(*(np.shape(x) for x in xs))
    return shape, [np.broadcast_to(np.asarray(x), shape).ravel() for x in xs]


def gap_increment(
    w_in: ArrayLike,
    w_out: ArrayLike,
    s: ArrayLike,
    h: ArrayLike,
    t: float,
    eps_r: ArrayLike,
) -> tuple[NDArray, NDArray, NDArray]:
    """(ΔC_series, ΔC_shunt_in, ΔC_shunt_out), farads, that a metal thickness ``t`` adds to a
    gap ``s`` between strips ``w_in`` and ``w_out`` on a slab (``h``, ``eps_r``); any
    broadcastable shapes; ``s`` may be complex. Zero when t = 0."""
    shape, (wi, wo, sv, hv, ev) = _flat(w_in, w_out, s, h, eps_r)
    if t <= 0:
        z = np.zeros(shape)
        return z, z, z
    tab = table()
    le, lt = _logs(hv, ev, t)
    ls = np.log(sv / hv.astype(float))
    _warn_outside(le, lt, ls)
    w = hermite_weights(tab.s, clamped(tab.s, ls))
    series_ratio = np.exp(np.einsum("qi,qi->q", w, _bilinear(tab.series, le, lt)))
    shunt = np.einsum("qi,qi->q", w, _bilinear(tab.shunt, le, lt))
    c_s = series_ratio * t / sv
    d_series = EPS0 * facing_width(wi.astype(float), wo.astype(float)) * c_s
    return (
        d_series.reshape(shape),
        (EPS0 * wi * shunt).reshape(shape),
        (EPS0 * wo * shunt).reshape(shape),
    )


def facing_width(w1: NDArray, w2: NDArray) -> NDArray:
    """The width across which two strips' end faces look at each other: the narrower one's,
    with the corner where the widths cross rounded over :data:`FACE_ROUNDING` of their mean
    (mean - sqrt(half-difference² + ε²) + ε), so that the gap's series capacitance is smooth in
    both widths for the refiner; between the narrower width and ε above it, equal to it at
    equal widths."""
    mean = 0.5 * (w1 + w2)
    eps = FACE_ROUNDING * mean
    return mean - np.sqrt((0.5 * (w1 - w2)) ** 2 + eps**2) + eps


def open_end_increment(w: ArrayLike, h: ArrayLike, t: float, eps_r: ArrayLike) -> NDArray:
    """ΔC_end, farads, that a metal thickness ``t`` adds to an open end of strip ``w``."""
    shape, (wv, hv, ev) = _flat(w, h, eps_r)
    if t <= 0:
        return np.zeros(shape)
    le, lt = _logs(hv, ev, t)
    _warn_outside(le, lt, None)
    return (EPS0 * wv * _bilinear(table().end, le, lt)).reshape(shape)
