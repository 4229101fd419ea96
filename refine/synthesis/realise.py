"""Electrical design -> physical layout on a strip medium, honestly reporting what the shop cannot
make.

At the centre frequency f0, on the dispersive line:

1. The feed width gives Z0(f0) = z_ref; the resonators use the same width (or the shop's
   minimum width, if wider).
2. Each gap width s is solved so that the gap's **full** two-port — series C with its shunt C
   on each side, and for centre-referenced models the half-gap lines — is an inverter of the
   designed J/Y0 (Y0 of the resonator line at f0). The two-port's series and shunt
   susceptances are read from its Y-parameters (Bg = -Im Y21, Bp = Im(Y11 + Y21)) and
   converted with :func:`refine.synthesis.inverters.pi_to_inverter`.
3. Each resonator's electrical length is θ_j = π + (φ_j-1,j + φ_j,j+1)/2 with the negative
   inverter phases φ of the actual gaps (this absorbs the shunt capacitances, i.e. the open-end
   fringing), and its physical length is θ_j/β(f0).

When a gap would have to be narrower than the shop's minimum gap, it is set to the minimum and
the shortfall is recorded (required vs allowed gap, designed vs achievable J). Nothing is
clipped silently.
"""

from __future__ import annotations

import math
import sys
import warnings
from dataclasses import dataclass

import numpy as np

from refine import validity
from refine._roots import bracketed_root
from refine.circuit import cascade
from refine.circuit.builder import gap_elements
from refine.circuit.layout import Layout
from refine.physics.strip import StripMedium, check_gap_model, medium_kind, open_end_extension
from refine.spec.coupling import Coupling
from refine.spec.fab import FabRules
from refine.synthesis.inverters import ElectricalDesign, pi_to_inverter, resonator_angles


@dataclass(frozen=True)
class GapRealisation:
    """How one gap was realised.

    j_target, j_achieved : J/Y0 designed and obtained at f0.
    gap_required : the width that would give j_target (m), or None when no gap width the model
        can describe (down to 1e-3 of the strip width) couples strongly enough.
    gap : the width used (m): gap_required, or the shop's minimum when that is wider.
    limited : True when the shop's minimum gap stopped the solve.
    """

    index: int
    j_target: float
    j_achieved: float
    gap_required: float | None
    gap: float
    limited: bool

    @property
    def coupling_shortfall(self) -> float:
        """Fraction of the designed J/Y0 that is missing (0 when realised exactly)."""
        return max(0.0, 1.0 - self.j_achieved / self.j_target)


@dataclass(frozen=True)
class Realisation:
    """A layout and the record of how it was obtained from the electrical design."""

    layout: Layout
    design: ElectricalDesign
    gap_model: str
    gaps: tuple[GapRealisation, ...]
    range_notes: tuple[str, ...]
    notes: tuple[str, ...]

    @property
    def feasible(self) -> bool:
        return not any(g.limited or g.gap_required is None for g in self.gaps)


def gap_inverter(
    medium: StripMedium, model: str, w_in: float, w_out: float, s: float, f0: float, y0: float
) -> tuple[float, float]:
    """(J/Y0, φ) at f0 of the gap of width ``s`` between strips ``w_in`` and ``w_out``."""
    f = np.array([f0])
    m = cascade.chain_abcd(gap_elements(medium, model, w_in, w_out, s, f), f)
    a, b, d = (complex(np.asarray(x)[..., 0].ravel()[0]) for x in (m.a, m.b, m.d))
    y11, y22, y21 = d / b, a / b, -1.0 / b
    bg = -y21.imag / y0
    bp = 0.5 * ((y11 + y21).imag + (y22 + y21).imag) / y0
    j, phi = pi_to_inverter(bg, bp)
    return float(j), float(phi)


def _solve_gap(
    medium: StripMedium,
    model: str,
    w_in: float,
    w_out: float,
    f0: float,
    y0: float,
    j_target: float,
) -> float | None:
    """Gap width giving J/Y0 = j_target, or None if even a vanishing gap is too weak."""
    w = min(w_in, w_out)
    lo, hi = math.log(1e-3 * w), math.log(10.0 * medium.substrate.height)

    def err(lns: float) -> float:
        return math.log(
            gap_inverter(medium, model, w_in, w_out, math.exp(lns), f0, y0)[0] / j_target
        )

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        e_lo, e_hi = err(lo), err(hi)
        if e_lo < 0:
            return None
        if e_hi > 0:
            return math.exp(hi)
        return math.exp(bracketed_root(err, lo, hi, xtol=1e-10, rtol=4 * sys.float_info.epsilon))


def realise(
    design: ElectricalDesign,
    medium: StripMedium,
    fab: FabRules | None = None,
    gap_model: str = "garg-bahl",
) -> Realisation:
    """Physical layout of ``design`` on ``medium`` under ``fab`` rules (see module docstring)."""
    check_gap_model(medium, gap_model)
    f0 = design.f0
    notes: list[str] = []
    feed_w = medium.width_for_z0(design.z_ref, f0)
    res_w = feed_w
    if fab is not None and fab.min_width is not None and feed_w < fab.min_width:
        notes.append(
            f"the {design.z_ref:g} ohm width {feed_w * 1e6:.1f} um is below the shop's minimum "
            f"width {fab.min_width * 1e6:.1f} um; the minimum is used"
        )
        feed_w = res_w = fab.min_width
    if fab is not None and fab.grid is not None:  # strips are drawn on the shop's grid
        feed_w = res_w = max(float(fab.on_grid(feed_w)), fab.grid)
    y0 = 1.0 / float(medium.dispersive(res_w, np.array([f0]))[0][..., 0])
    n = design.order
    sides = [feed_w] + [res_w] * n + [feed_w]
    min_gap = fab.min_gap if fab is not None else 0.0
    gaps: list[GapRealisation] = []
    phis: list[float] = []
    for k, j_t in enumerate(design.j_norm):
        w_in, w_out = sides[k], sides[k + 1]
        required = _solve_gap(medium, gap_model, w_in, w_out, f0, y0, j_t)
        limited = required is None or required < min_gap
        s = max(required if required is not None else 0.0, min_gap)
        if s <= 0:  # no fab rule and no realisable gap: use the smallest gap the solve tried
            s = 1e-3 * min(w_in, w_out)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", validity.ModelRangeWarning)
            j_a, phi = gap_inverter(medium, gap_model, w_in, w_out, s, f0, y0)
        gaps.append(GapRealisation(k, j_t, j_a, required, s, limited))
        phis.append(phi)
    theta = resonator_angles(np.array(phis))
    beta0 = medium.electrical_length(res_w, 1.0, f0)
    lengths = tuple(float(t / beta0) for t in theta)
    layout = Layout(Coupling.GAP, feed_w, (res_w,) * n, tuple(g.gap for g in gaps), lengths)
    for g in gaps:
        if g.gap_required is None:
            notes.append(
                f"gap {g.index}: J/Y0 = {g.j_target:.4f} needs a stronger coupling than any gap "
                f"the {gap_model} model describes; at the minimum gap it gives {g.j_achieved:.4f}"
            )
        elif g.limited:
            notes.append(
                f"gap {g.index}: needs {g.gap_required * 1e6:.1f} um, the shop's minimum is "
                f"{min_gap * 1e6:.1f} um; coupling J/Y0 {g.j_achieved:.4f} of {g.j_target:.4f} "
                f"({100 * g.coupling_shortfall:.0f} % short)"
            )
    return Realisation(
        layout,
        design,
        gap_model,
        tuple(gaps),
        tuple(range_report(layout, medium, gap_model, f0)),
        tuple(notes),
    )


def range_report(layout: Layout, medium: StripMedium, gap_model: str, f_max: float) -> list[str]:
    """Which dimensions of ``layout`` lie outside which model's validity range (no warnings)."""
    f = np.array([f_max])
    out: list[str] = []

    def collect(label: str, fn) -> None:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", validity.ModelRangeWarning)
            fn()
        for w in caught:
            if issubclass(w.category, validity.ModelRangeWarning):
                msg = f"{label}: {w.message}"
                if msg not in out:
                    out.append(msg)
            else:
                warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)

    kind = medium_kind(medium)
    if layout.external is Coupling.GAP:
        sides, first = [layout.feed_width, *layout.widths, layout.feed_width], 0
    else:  # tapped: the gaps are the inner ones, between resonators
        sides, first = list(layout.widths), 1
    for k, s in enumerate(layout.gaps):
        collect(
            f"gap {k + first} (s = {s * 1e6:.1f} um)",
            lambda k=k, s=s: gap_elements(medium, gap_model, sides[k], sides[k + 1], s, f),
        )
    for j, w in enumerate(layout.widths):
        collect(
            f"{kind} line {j + 1} (W = {w * 1e6:.1f} um)", lambda w=w: medium.line_properties(w, f)
        )
    collect(
        f"{kind} feed (W = {layout.feed_width * 1e6:.1f} um)",
        lambda: medium.line_properties(layout.feed_width, f),
    )
    return out


def tap_angle(design: ElectricalDesign, z_res: float) -> float | None:
    """Electrical distance θ (rad) from a half-wave resonator's open end to the tap that gives
    the external Q the design needs, Q_e = g0 g1 / FBW.

    From the reactance slope of a half-wave resonator tapped at θ from an open end,
    b = (Y_r π/2)/cos²θ, so Q_e = b z_ref = (π/2)(z_ref/Z_r)/cos²θ (the same argument as
    Wong, "Microstrip tapped-line filter design", IEEE Trans. MTT-27(1), 44–50, 1979, where
    it is derived for the tapped combline/hairpin case). Returns None when even a tap at the
    open end couples too weakly (Q_e needed < (π/2) z_ref/Z_r).
    """
    qe = design.g[0] * design.g[1] / design.fbw
    c2 = (math.pi / 2.0) * (design.z_ref / z_res) / qe
    if c2 > 1.0:
        return None
    return math.acos(math.sqrt(c2))


def realise_tapped(
    design: ElectricalDesign,
    medium: StripMedium,
    fab: FabRules | None = None,
    gap_model: str = "garg-bahl",
) -> Realisation:
    """Layout with a tapped feed: the n - 1 inner gaps as in :func:`realise`, the end resonators
    open at their outer ends (length reduced by the open-end extension Δl) and tapped at the
    position :func:`tap_angle` gives. The T-junction's own parasitics are not modelled."""

    if design.order < 2:
        raise ValueError(
            "order = 1 cannot use a tapped feed on both sides (needs at least 2 resonators)"
        )
    inner = realise(design, medium, fab, gap_model)
    lay = inner.layout
    f0 = design.f0
    res_w = lay.widths[0]
    z_res = float(medium.dispersive(res_w, np.array([f0]))[0][..., 0])
    beta0 = float(medium.electrical_length(res_w, 1.0, f0))
    phis = [-0.0] + [0.0] * (design.order - 1) + [0.0]
    for g in inner.gaps[1:-1]:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", validity.ModelRangeWarning)
            y0 = 1.0 / z_res
            phis[g.index] = gap_inverter(medium, gap_model, res_w, res_w, g.gap, f0, y0)[1]
    theta = resonator_angles(np.array(phis))
    dl = open_end_extension(medium, res_w, gap_model)
    lengths = [float(t / beta0) for t in theta]
    lengths[0] -= dl
    lengths[-1] -= dl
    notes = [n for n in inner.notes if not n.startswith(("gap 0:", f"gap {design.order}:"))]
    ang = tap_angle(design, z_res)
    if ang is None:
        ang = 0.05
        notes.append(
            "even a tap at the open end couples too weakly for this bandwidth; the tap "
            "starts near the open end"
        )
    tap = max(ang / beta0 - dl, 0.02 * lengths[0])
    layout = Layout(
        Coupling.TAP, lay.feed_width, lay.widths, lay.gaps[1:-1], tuple(lengths), (tap, tap)
    )
    gaps = inner.gaps[1:-1]
    ranges = tuple(range_report(layout, medium, gap_model, f0))
    return Realisation(layout, design, gap_model, gaps, ranges, tuple(notes))
