"""Microstrip gap and open-end models read from a calibration data file.

A calibration (written by :mod:`refine.fullwave.static_calibration`) holds, for one ε_r and zero
metal thickness, a symmetric gap's series and shunt capacitance over a grid of W/h and s/h and
the open end's excess capacitance over W/h, each divided by ε0·h, with its uncertainty. Static
capacitances scale with size, so one file serves every substrate height of that ε_r.

**Interpolation.** log C over (log W/h, log s/h) by tensor-product cubic Hermite interpolation
with three-point slopes (C¹; a linear operator on the grid values, so it accepts the complex gap
widths of complex-step derivatives). The values vary smoothly and nearly as power laws on the
grid (ratios of 1.4–1.65 between neighbours), where this is accurate to a fraction of the
values' own uncertainty (checked against solves between the grid points in
tests/test_calibrated.py).

**Unequal widths.** The main table is of symmetric gaps. Between strips W1 ≠ W2 the series
capacitance is taken at the geometric-mean width and each shunt capacitance at its own side's
width (the same rule as Garg–Bahl's in :mod:`refine.physics.strip`). That rule misplaces the
shunt capacitance: the wide strip's end overhangs the narrow one and carries more of it, the
narrow strip's less (benchmarks/unequal_gaps.py: tens of micrometres of resonator length at the
validation filters' gaps). A calibration with an ``unequal_gaps`` table (written by
``static_calibration --unequal``) corrects the rule by the electrostatic solve of the unequal
gap itself: the series capacitance times its ratio to the rule's, each shunt capacitance plus
its difference from the rule's, interpolated over (log narrow W/h, log width ratio, log s/h)
by the same C¹ Hermite scheme, zero at equal widths by construction (a node at ratio 1). The
correction is continuous where the widths cross but its slope is not (the wide side's shift
and the narrow side's differ by about 20 % near equal widths). Outside its grid the
correction is held at the grid's edge, with a warning.

**Outside the calibrated grid** the value at the nearest grid edge is carried on by the
Kirschning–Jansen–Koster closed form's trend (its ratio between the requested and the clamped
geometry), with a :class:`refine.validity.ModelRangeWarning`.

**A substrate whose ε_r differs a little** from the calibration's (a tolerance study, a
stand-in substrate, within :data:`EPS_SPREAD`) is carried by Garg–Bahl's ε_r exponents: the
series capacitance scales as (ε_r/ε_cal)^0.8 (their odd mode), the shunt capacitance as
(ε_r/ε_cal)^0.9 (their even mode), the open end's Δl by Kirschning–Jansen–Koster's ratio.

**Stripline.** A stripline calibration (``"medium": "stripline"`` in the file) is over W/b and
s/b, solved at ε_r = 1: in the homogeneous dielectric between the ground planes every
capacitance is exactly ε_r times its value in air and Δl does not depend on ε_r, so it serves
every ε_r. Outside its grid the value at the edge is carried on by the quasi-static stripline
gap's trend (:func:`refine.physics.discontinuities.stripline_gap`), the open end held at the
edge.

Calibrations bundled with refine live in ``refine/physics/calibrations``; a problem names one by
its file stem (``static-er9.8``) or by a path.
"""

from __future__ import annotations

import functools
import json
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import validity
from refine.physics import discontinuities
from refine.physics.constants import C0, EPS0
from refine.physics.microstrip import hammerstad_jensen
from refine.physics.stripline import cohn_z0

BUNDLED = Path(__file__).with_name("calibrations")
PREFIX = "calibrated:"
EPS_SPREAD = 0.05  # relative ε_r difference from the calibration's that is carried by scaling
FORMAT = "refine-static-calibration/1"


@dataclass(frozen=True, eq=False)
class UnequalTable:
    """The unequal-gap correction on its grid: ``x`` log narrow W/h, ``r`` log width ratio
    (its first node 0, equal widths), ``y`` log s/h; ``series`` log of the series capacitance's
    ratio to the rule's, ``wide`` and ``narrow`` each side's shunt shift over ε0·h; each
    (nx, nr, ny), zero at r = 0; ``series_unc`` the series ratio's relative uncertainty and
    ``shunt_unc`` the larger side's shift uncertainty over ε0·h, zero at r = 0."""

    x: NDArray
    r: NDArray
    y: NDArray
    series: NDArray
    wide: NDArray
    narrow: NDArray
    series_unc: NDArray
    shunt_unc: NDArray


def _unequal_table(data: dict) -> UnequalTable | None:
    t = data.get("unequal_gaps")
    if t is None:
        return None
    pts = {(p["w_h"], p["ratio"], p["s_h"]): p for p in t["points"]}
    shape = (len(t["w_narrow_h"]), len(t["ratio"]) + 1, len(t["s_h"]))
    out = {k: np.zeros(shape) for k in ("series", "wide", "narrow", "series_unc", "shunt_unc")}
    for i, w in enumerate(t["w_narrow_h"]):
        for j, r in enumerate(t["ratio"], start=1):
            for k, sh in enumerate(t["s_h"]):
                p = pts[(w, r, sh)]
                ratio = p["series_ratio"]
                out["series"][i, j, k] = np.log(ratio["value"])
                out["wide"][i, j, k] = p["shunt_wide_shift"]["value"]
                out["narrow"][i, j, k] = p["shunt_narrow_shift"]["value"]
                out["series_unc"][i, j, k] = ratio["uncertainty"] / ratio["value"]
                out["shunt_unc"][i, j, k] = max(
                    p["shunt_wide_shift"]["uncertainty"], p["shunt_narrow_shift"]["uncertainty"]
                )
    return UnequalTable(
        np.log(np.asarray(t["w_narrow_h"], float)),
        np.log(np.concatenate([[1.0], np.asarray(t["ratio"], float)])),
        np.log(np.asarray(t["s_h"], float)),
        out["series"],
        out["wide"],
        out["narrow"],
        out["series_unc"],
        out["shunt_unc"],
    )


@dataclass(frozen=True, eq=False)
class Calibration:
    """One calibration, in log coordinates: ``x`` = log W/h, ``y`` = log s/h; ``series`` and
    ``shunt`` (nx, ny) and ``end``, ``line`` (nx,) hold log of the values over ε0·h (ε0 for the
    line capacitance per length); ``*_unc`` the relative uncertainties."""

    name: str
    eps_r: float
    x: NDArray
    y: NDArray
    series: NDArray
    shunt: NDArray
    end: NDArray
    line: NDArray
    series_unc: NDArray
    shunt_unc: NDArray
    end_unc: NDArray
    provenance: dict
    stripline: bool = False
    #: the unequal-width correction (:class:`UnequalTable`), when the file has one
    unequal: UnequalTable | None = None

    @property
    def w_h_range(self) -> tuple[float, float]:
        return float(np.exp(self.x[0])), float(np.exp(self.x[-1]))

    @property
    def s_h_range(self) -> tuple[float, float]:
        return float(np.exp(self.y[0])), float(np.exp(self.y[-1]))

    @property
    def label(self) -> str:
        return f"{PREFIX}{self.name}"


def bundled_names() -> list[str]:
    return sorted(p.stem for p in BUNDLED.glob("*.json"))


def _path(ref: str) -> Path:
    if ref in bundled_names():
        return BUNDLED / f"{ref}.json"
    return Path(ref)


@functools.lru_cache(maxsize=16)
def load(ref: str) -> Calibration:
    """The calibration named ``ref`` (a bundled name or a path); ValueError naming the
    reference and what is available when it cannot be read."""
    path = _path(ref)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as e:
        raise ValueError(
            f"calibration = {ref!r}: cannot be read ({e}); bundled calibrations: "
            f"{', '.join(bundled_names()) or 'none'}"
        ) from None
    if data.get("format") != FORMAT:
        raise ValueError(
            f"calibration = {ref!r}: not a {FORMAT} file (format {data.get('format')!r})"
        )
    w_h = np.asarray(data["w_h"], float)
    s_h = np.asarray(data["s_h"], float)
    gaps = {(g["w_h"], g["s_h"]): g for g in data["gaps"]}
    ends = {e["w_h"]: e for e in data["open_ends"]}

    def grid(key: str) -> tuple[NDArray, NDArray]:
        val = np.array([[gaps[(w, s)][key]["value"] for s in data["s_h"]] for w in data["w_h"]])
        unc = np.array(
            [[gaps[(w, s)][key]["uncertainty"] for s in data["s_h"]] for w in data["w_h"]]
        )
        return np.log(val), unc / val

    series, series_unc = grid("c_series")
    shunt, shunt_unc = grid("c_shunt")
    end = np.array([ends[w]["c_end"]["value"] for w in data["w_h"]])
    end_unc = np.array([ends[w]["c_end"]["uncertainty"] for w in data["w_h"]]) / end
    line = np.array([ends[w]["c_line"]["value"] for w in data["w_h"]])
    name = ref if ref in bundled_names() else str(path.resolve())
    return Calibration(
        name,
        float(data["eps_r"]),
        np.log(w_h),
        np.log(s_h),
        series,
        shunt,
        np.log(end),
        np.log(line),
        series_unc,
        shunt_unc,
        end_unc,
        data["provenance"],
        data.get("medium", "microstrip") == "stripline",
        _unequal_table(data),
    )


def for_eps_r(eps_r: float, stripline: bool = False) -> str | None:
    """The bundled microstrip calibration for ``eps_r`` (equal to 1 part in 10⁶), or with
    ``stripline`` the bundled stripline one (it serves every ε_r), if there is one."""
    for name in bundled_names():
        cal = load(name)
        if cal.stripline != stripline:
            continue
        if stripline or abs(cal.eps_r - eps_r) <= 1e-6 * eps_r:
            return name
    return None


def nearest(eps_r: float) -> str | None:
    """The bundled microstrip calibration closest in ε_r to ``eps_r`` within
    :data:`EPS_SPREAD`, if any."""
    best = None
    for name in bundled_names():
        if load(name).stripline:
            continue
        d = abs(load(name).eps_r / eps_r - 1.0)
        if d <= EPS_SPREAD and (best is None or d < best[0]):
            best = (d, name)
    return None if best is None else best[1]


@functools.lru_cache(maxsize=64)
def _slopes(nodes: bytes) -> NDArray:
    """(n, n): the three-point slope at each node (given as the bytes of a float64 array, to be
    hashable) as weights on the node values."""
    x = np.frombuffer(nodes, dtype=np.float64)
    n = x.size
    h = np.diff(x)
    slope = np.zeros((n, n))
    slope[0, :2] = [-1 / h[0], 1 / h[0]]
    slope[-1, -2:] = [-1 / h[-1], 1 / h[-1]]
    for i in range(1, n - 1):
        a, b = h[i - 1], h[i]
        slope[i, i - 1 : i + 2] = [-b / (a * (a + b)), (b - a) / (a * b), a / (b * (a + b))]
    return slope


def hermite_weights(nodes: NDArray, q: NDArray) -> NDArray:
    """(len(q), len(nodes)): the C¹ cubic Hermite interpolant with three-point slopes as weights
    on the node values; ``q`` may be complex (the cell is chosen by its real part) and must lie
    within the nodes."""
    n = nodes.size
    slope = _slopes(nodes.tobytes())
    k = np.searchsorted(nodes, np.real(q), side="right") - 1
    np.clip(k, 0, n - 2, out=k)
    dx = nodes[k + 1] - nodes[k]
    t = (q - nodes[k]) / dx
    t2 = t * t
    h01 = t2 * (3.0 - 2.0 * t)
    h10 = (t2 * t - 2.0 * t2 + t) * dx
    h11 = (t2 * t - t2) * dx
    out = h10[:, None] * slope[k] + h11[:, None] * slope[k + 1]
    rows = np.arange(q.size)
    out[rows, k] += 1.0 - h01
    out[rows, k + 1] += h01
    return out


def clamped(nodes: NDArray, q: NDArray) -> NDArray:
    return (
        np.clip(np.real(q), nodes[0], nodes[-1]) + 1j * np.imag(q)
        if np.iscomplexobj(q)
        else np.clip(q, nodes[0], nodes[-1])
    )


def _bicubic(cal: Calibration, table: NDArray, lx: NDArray, ly: NDArray) -> NDArray:
    wx = hermite_weights(cal.x, lx)
    wy = hermite_weights(cal.y, ly)
    return np.einsum("qi,ij,qj->q", wx, table, wy)


def check_eps_r(cal: Calibration, eps_r: ArrayLike) -> None:
    """ValueError unless every ``eps_r`` is within :data:`EPS_SPREAD` of the calibration's (a
    stripline calibration serves every ε_r)."""
    if cal.stripline:
        return
    e = np.asarray(eps_r, float)
    worst = float(np.max(np.abs(e / cal.eps_r - 1.0)))
    if worst > EPS_SPREAD:
        raise ValueError(
            f"gap model {cal.label!r}: calibrated for eps_r = {cal.eps_r:g}, the substrate has "
            f"eps_r = {float(np.max(e)) if e.size > 1 else float(e):g} (allowed: within "
            f"{100 * EPS_SPREAD:g} % of it)"
        )


def gap(
    cal: Calibration,
    w_in: ArrayLike,
    w_out: ArrayLike,
    s: ArrayLike,
    h: ArrayLike,
    eps_r: ArrayLike | None = None,
) -> discontinuities.GapCapacitances:
    """π-network (series, shunt in, shunt out; farads) of a gap ``s`` between strips ``w_in``
    and ``w_out`` on height ``h`` (ε_r ``eps_r``, default the calibration's) from calibration
    ``cal``. A substrate batch (arrays of ``h``, ``eps_r``) is taken per element."""
    if np.ndim(h) or (eps_r is not None and np.ndim(eps_r)):
        return _gap_batched_substrate(cal, w_in, w_out, s, h, eps_r)
    h = float(np.asarray(h))
    w_in = np.asarray(w_in, float)
    w_out = np.asarray(w_out, float)
    s = np.asarray(s)
    shape = np.broadcast_shapes(w_in.shape, w_out.shape, s.shape)
    wi, wo = (np.broadcast_to(x, shape).ravel() for x in (w_in, w_out))
    sv = np.broadcast_to(s, shape).ravel()
    w_mean = np.sqrt(wi * wo)
    ls = np.log(sv / h)
    lw = np.log(np.concatenate([w_mean, wi, wo]) / h)
    ls3 = np.concatenate([ls, ls, ls])
    lw_c = clamped(cal.x, lw)
    ls_c = clamped(cal.y, ls3)
    scale = EPS0 * h
    series = np.exp(_bicubic(cal, cal.series, lw_c[: sv.size], ls_c[: sv.size])) * scale
    shunt = np.exp(_bicubic(cal, cal.shunt, lw_c[sv.size :], ls_c[sv.size :])) * scale
    outside = (np.real(lw) != np.real(lw_c)) | (np.real(ls3) != np.real(ls_c))
    if np.any(outside):
        lo_w, hi_w = cal.w_h_range
        lo_s, hi_s = cal.s_h_range
        validity.warn(
            f"gap model {cal.label}: W/h {float(np.exp(np.min(np.real(lw)))):.3g}.."
            f"{float(np.exp(np.max(np.real(lw)))):.3g}, s/h {float(np.exp(np.min(np.real(ls)))):.3g}.."
            f"{float(np.exp(np.max(np.real(ls)))):.3g} leave the calibrated range (W/h {lo_w:g}..{hi_w:g}, "
            f"s/h {lo_s:g}..{hi_s:g}); carried on by the "
            + ("quasi-static stripline gap's" if cal.stripline else "Kirschning-Jansen-Koster")
            + " trend"
        )
        trend = _trend(cal, lw, ls3, lw_c, ls_c, h)
        series = series * trend[0][: sv.size]
        shunt = shunt * trend[1][sv.size :]
    n = sv.size
    if cal.unequal is not None:
        k_series, d_in, d_out = unequal_correction(cal, cal.unequal, wi / h, wo / h, sv / h)
        series = series * k_series
        shunt = shunt + np.concatenate([d_in, d_out]) * scale
    if eps_r is not None:
        ratio = float(np.asarray(eps_r)) / cal.eps_r
        a, b = _eps_exponents(cal)
        series, shunt = series * ratio**a, shunt * ratio**b
    return discontinuities.GapCapacitances(
        series.reshape(shape), shunt[:n].reshape(shape), shunt[n:].reshape(shape)
    )


def unequal_correction(
    cal: Calibration, t: UnequalTable, u_in: NDArray, u_out: NDArray, s_h: NDArray
) -> tuple[NDArray, NDArray, NDArray]:
    """(series factor, shunt shift at the input side, at the output side; the shifts over
    ε0·h) of gaps between strips u_in = W_in/h and u_out = W_out/h, s/h ``s_h`` (may be
    complex): the unequal table interpolated, zero shifts and factor 1 at equal widths."""
    narrow = np.minimum(u_in, u_out)
    lr = np.log(np.maximum(u_in, u_out) / narrow)
    lx = np.log(narrow)
    ly = np.log(s_h)
    lx_c, lr_c, ly_c = clamped(t.x, lx), clamped(t.r, lr), clamped(t.y, ly)
    unequal = lr > 0
    outside = unequal & (
        (np.real(lx) != np.real(lx_c)) | (lr != lr_c) | (np.real(ly) != np.real(ly_c))
    )
    if np.any(outside):
        validity.warn(
            f"gap model {cal.label}: unequal widths (narrow W/h "
            f"{float(np.exp(np.min(np.real(lx[outside])))):.3g}.."
            f"{float(np.exp(np.max(np.real(lx[outside])))):.3g}, width ratio up to "
            f"{float(np.exp(np.max(lr[outside]))):.3g}, s/h "
            f"{float(np.exp(np.min(np.real(ly[outside])))):.3g}..) leave the unequal-gap grid "
            f"(narrow W/h {np.exp(t.x[0]):g}..{np.exp(t.x[-1]):g}, ratio up to "
            f"{np.exp(t.r[-1]):g}, s/h {np.exp(t.y[0]):g}..{np.exp(t.y[-1]):g}); its correction "
            "is held at the grid's edge"
        )
    wx, wr, wy = hermite_weights(t.x, lx_c), hermite_weights(t.r, lr_c), hermite_weights(t.y, ly_c)

    def at(table: NDArray) -> NDArray:
        return np.einsum("qi,qj,qk,ijk->q", wx, wr, wy, table)

    factor = np.exp(at(t.series))
    wide, thin = at(t.wide), at(t.narrow)
    in_is_wide = u_in >= u_out
    return factor, np.where(in_is_wide, wide, thin), np.where(in_is_wide, thin, wide)


def unequal_uncertainty(
    t: UnequalTable, w_in: ArrayLike, w_out: ArrayLike, s: ArrayLike, h: float
) -> tuple[NDArray, NDArray]:
    """The unequal-gap correction's own uncertainty near each gap: (relative, on the series
    capacitance; over ε0·h, on either side's shunt capacitance), the largest of the
    surrounding grid points', taken linearly in log width ratio from zero at equal widths to
    the first tabulated ratio (held at the grid's edge outside it)."""
    wi, wo = np.asarray(w_in, float) / h, np.asarray(w_out, float) / h
    narrow = np.minimum(wi, wo)
    lr = np.clip(np.log(np.maximum(wi, wo) / narrow), t.r[0], t.r[-1])
    lx = np.clip(np.log(narrow), t.x[0], t.x[-1])
    ly = np.clip(np.log(np.asarray(s, float) / h), t.y[0], t.y[-1])
    i = np.clip(np.searchsorted(t.x, lx, side="right") - 1, 0, t.x.size - 2)
    j = np.clip(np.searchsorted(t.r, lr, side="right") - 1, 0, t.r.size - 2)
    k = np.clip(np.searchsorted(t.y, ly, side="right") - 1, 0, t.y.size - 2)
    # between equal widths (no correction, no uncertainty) and the first ratio: in proportion
    ramp = np.where(j == 0, lr / t.r[1], 1.0)

    def pick(u: NDArray) -> NDArray:  # the eight surrounding points (zero at equal widths)
        near = [u[i + a, j + b, k + c] for a in (0, 1) for b in (0, 1) for c in (0, 1)]
        return ramp * np.maximum.reduce(near)

    return pick(t.series_unc), pick(t.shunt_unc)


def _gap_batched_substrate(
    cal: Calibration,
    w_in: ArrayLike,
    w_out: ArrayLike,
    s: ArrayLike,
    h: ArrayLike,
    eps_r: ArrayLike | None,
) -> discontinuities.GapCapacitances:
    """:func:`gap` where the substrate's height and ε_r are arrays (one board per element):
    the capacitances scale with height at fixed ratios, so the look-up runs on W/h and s/h."""
    e = cal.eps_r if eps_r is None else eps_r
    shape = np.broadcast_shapes(
        np.shape(w_in), np.shape(w_out), np.shape(s), np.shape(h), np.shape(e)
    )
    hb = np.broadcast_to(np.asarray(h, float), shape)
    eb = np.broadcast_to(np.asarray(e, float), shape)
    unit = gap(
        cal,
        np.broadcast_to(w_in, shape) / hb,
        np.broadcast_to(w_out, shape) / hb,
        np.broadcast_to(s, shape) / hb,
        1.0,
    )
    ratio = eb / cal.eps_r
    a, b = _eps_exponents(cal)
    return discontinuities.GapCapacitances(
        unit.c_series * hb * ratio**a,
        unit.c_shunt_in * hb * ratio**b,
        unit.c_shunt_out * hb * ratio**b,
    )


def _eps_exponents(cal: Calibration) -> tuple[float, float]:
    """How (series, shunt) capacitance scale with ε_r: exactly as ε_r in stripline's
    homogeneous dielectric; on microstrip by Garg–Bahl's odd- and even-mode exponents."""
    return (1.0, 1.0) if cal.stripline else (0.8, 0.9)


def _trend(
    cal: Calibration, lw: NDArray, ls: NDArray, lw_c: NDArray, ls_c: NDArray, h: float
) -> tuple[NDArray, NDArray]:
    """Kirschning–Jansen–Koster's (series, shunt) ratio between the requested and the clamped
    symmetric geometries (on stripline the quasi-static stripline gap's, with reference planes
    moved to the strip ends)."""
    if cal.stripline:
        return _stripline_trend(lw, ls, lw_c, ls_c)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        with validity.unchecked():
            w, wc = np.exp(np.real(lw)) * h, np.exp(np.real(lw_c)) * h
            a = discontinuities.kirschning_jansen_koster_gap(w, w, np.exp(ls) * h, h, cal.eps_r)
            b = discontinuities.kirschning_jansen_koster_gap(wc, wc, np.exp(ls_c) * h, h, cal.eps_r)
    return a.c_series / b.c_series, a.c_shunt_in / b.c_shunt_in


def _stripline_trend(
    lw: NDArray, ls: NDArray, lw_c: NDArray, ls_c: NDArray
) -> tuple[NDArray, NDArray]:
    """The quasi-static stripline gap's (series, shunt) ratio between the requested and the
    clamped geometries, b = 1, in air (its shunt capacitance taken to the strip ends)."""

    def pair(lw_: NDArray, ls_: NDArray) -> tuple[NDArray, NDArray]:
        w, s = np.exp(np.real(lw_)), np.exp(ls_)
        with validity.unchecked():
            z0 = cohn_z0(w, 1.0)
            g = discontinuities.stripline_gap(s, 1.0, 1.0, z0)
        c_line = 1.0 / (z0 * C0)
        return g.c_series, g.c_shunt_in + c_line * s / 2

    a, b = pair(lw, ls), pair(lw_c, ls_c)
    return a[0] / b[0], a[1] / b[1]


def open_end_extension(
    cal: Calibration, width: ArrayLike, h: ArrayLike, eps_r: ArrayLike | None = None
) -> NDArray:
    """Open-end length extension Δl (m) of strips ``width`` on height ``h`` (ε_r ``eps_r``,
    default the calibration's): the calibrated excess capacitance over the calibrated line
    capacitance per length."""
    if np.ndim(h) or (eps_r is not None and np.ndim(eps_r)):
        e = cal.eps_r if eps_r is None else eps_r
        shape = np.broadcast_shapes(np.shape(width), np.shape(h), np.shape(e))
        hb = np.broadcast_to(np.asarray(h, float), shape)
        eb = np.broadcast_to(np.asarray(e, float), shape)
        unit = open_end_extension(cal, np.broadcast_to(width, shape) / hb, 1.0)
        if cal.stripline:
            return unit * hb
        return unit * hb * _kjk_eps_ratio(cal, np.broadcast_to(width, shape) / hb, eb)
    h = float(np.asarray(h))
    w = np.asarray(width, float)
    e = cal.eps_r if eps_r is None else float(np.asarray(eps_r))
    if e != cal.eps_r and not cal.stripline:
        return open_end_extension(cal, w, h) * _kjk_eps_ratio(cal, w / h, e)
    lw = np.log(w.ravel() / h)
    lw_c = np.clip(lw, cal.x[0], cal.x[-1])
    wx = hermite_weights(cal.x, lw_c)
    dl = np.exp(wx @ cal.end - wx @ cal.line) * h
    if np.any(lw != lw_c) and cal.stripline:
        validity.warn(
            f"open end {cal.label}: W/b {float(np.exp(lw.min())):.3g}..{float(np.exp(lw.max())):.3g} "
            f"leaves the calibrated range ({cal.w_h_range[0]:g}..{cal.w_h_range[1]:g}); held at "
            "its edge"
        )
    elif np.any(lw != lw_c):
        validity.warn(
            f"open end {cal.label}: W/h {float(np.exp(lw.min())):.3g}..{float(np.exp(lw.max())):.3g} "
            f"leaves the calibrated range ({cal.w_h_range[0]:g}..{cal.w_h_range[1]:g}); carried "
            "on by the Kirschning-Jansen-Koster trend"
        )
        with validity.unchecked():
            u, uc = np.exp(lw), np.exp(lw_c)
            ee = hammerstad_jensen(u, cal.eps_r, 0.0)[1]
            eec = hammerstad_jensen(uc, cal.eps_r, 0.0)[1]
            kjk = discontinuities.kirschning_jansen_koster_open_end
            dl = dl * kjk(u, cal.eps_r, ee) / kjk(uc, cal.eps_r, eec)
    return dl.reshape(w.shape)


def _kjk_eps_ratio(cal: Calibration, u: ArrayLike, eps_r: ArrayLike) -> NDArray:
    """Kirschning–Jansen–Koster's Δl at ``eps_r`` over its Δl at the calibration's ε_r."""
    kjk = discontinuities.kirschning_jansen_koster_open_end
    with validity.unchecked():
        a = kjk(u, eps_r, hammerstad_jensen(u, eps_r, 0.0)[1])
        b = kjk(u, cal.eps_r, hammerstad_jensen(u, cal.eps_r, 0.0)[1])
    return np.asarray(a / b)


def relative_uncertainty(
    cal: Calibration, w: ArrayLike, s: ArrayLike, h: float
) -> tuple[NDArray, NDArray]:
    """The calibration's own (series, shunt) relative uncertainty near (W, s), from its grid
    (the largest of the four surrounding points)."""
    lw = np.clip(np.log(np.asarray(w, float) / h), cal.x[0], cal.x[-1])
    ls = np.clip(np.log(np.asarray(s, float) / h), cal.y[0], cal.y[-1])
    i = np.clip(np.searchsorted(cal.x, lw, side="right") - 1, 0, cal.x.size - 2)
    j = np.clip(np.searchsorted(cal.y, ls, side="right") - 1, 0, cal.y.size - 2)
    pick = lambda t: np.maximum.reduce([t[i, j], t[i + 1, j], t[i, j + 1], t[i + 1, j + 1]])  # noqa: E731
    return pick(cal.series_unc), pick(cal.shunt_unc)
