"""Closed-form admittance-inverter design of the end-coupled (series-gap) half-wave filter.

Structure (n resonators, n + 1 gaps)::

    port ─┤C01├─ line θ1 ─┤C12├─ line θ2 ─ ... ─ line θn ─┤Cn,n+1├─ port

Design equations (Cohn, "Direct-coupled-resonator filters", Proc. IRE 45(2), 1957; Matthaei,
Young & Jones 1964, §8.05; Pozar, *Microwave Engineering*, 4th ed., §8.8; Hong & Lancaster
2001, §5.2.1), with Y0 = 1/z_ref::

    J01/Y0       = sqrt(π FBW / (2 g0 g1))
    J_j,j+1/Y0   = (π FBW / 2) / sqrt(g_j g_j+1)           j = 1..n-1
    J_n,n+1/Y0   = sqrt(π FBW / (2 g_n g_n+1))
    B/Y0         = (J/Y0) / (1 - (J/Y0)²)                   series susceptance of each gap
    C            = B / ω0
    θ_j          = π - [atan(2 B_j-1,j/Y0) + atan(2 B_j,j+1/Y0)] / 2

Each series-C inverter carries a negative line length -atan(2B/Y0)/2 on each side, which the
resonators absorb: hence θ_j < π. The design is exact only in the narrow-band limit; its
passband drifts up and narrows as FBW grows, which the refiner corrects.

The same inverter view applies to a gap's full π-network (series Bg, shunt Bp each side):
:func:`pi_to_inverter` gives its J and its (negative) electrical length φ.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine.circuit import cascade
from refine.circuit.builder import ideal_elements
from refine.spec.mask import Stopband
from refine.synthesis import prototype


@dataclass(frozen=True)
class ElectricalDesign:
    """Closed-form electrical design of an end-coupled half-wave filter.

    Attributes
    ----------
    family, order, ripple_db : prototype (ripple_db is None for Butterworth).
    f0 : centre frequency (Hz).  fbw : fractional bandwidth.  z_ref : port and line impedance (ohm).
    g : g_0..g_{n+1}.
    j_norm, b_norm : J/Y0 and B/Y0 of the n + 1 inverters / gaps, input to output.
    capacitance : series capacitances of the n + 1 gaps (F).
    theta : electrical lengths of the n resonators at f0 (rad).
    """

    family: str
    order: int
    ripple_db: float | None
    f0: float
    fbw: float
    z_ref: float
    g: tuple[float, ...]
    j_norm: tuple[float, ...]
    b_norm: tuple[float, ...]
    capacitance: tuple[float, ...]
    theta: tuple[float, ...]

    @property
    def band_edges(self) -> tuple[float, float]:
        """Design band edges (Hz) by the geometric mapping f0·(sqrt(1 + FBW²/4) ∓ FBW/2)."""
        r = math.sqrt(1.0 + self.fbw**2 / 4.0)
        return self.f0 * (r - self.fbw / 2.0), self.f0 * (r + self.fbw / 2.0)


def inverter_j(g: ArrayLike, fbw: float) -> NDArray[np.float64]:
    """J/Y0 of the n + 1 admittance inverters from g_0..g_{n+1} (MYJ 1964 eq. 8.05-1)."""
    g = v.positive_array("g", g)
    if g.ndim != 1 or g.size < 3:
        raise ValueError(f"g must be a 1-D array g_0..g_(n+1) with n >= 1, got shape {g.shape}")
    fbw = v.real_in_range("fbw", fbw, 0.0, 1.0, lo_open=True, hi_open=True)
    n = g.size - 2
    j = np.empty(n + 1)
    j[0] = math.sqrt(math.pi * fbw / (2.0 * g[0] * g[1]))
    j[1:n] = (math.pi * fbw / 2.0) / np.sqrt(g[1:n] * g[2 : n + 1])
    j[n] = math.sqrt(math.pi * fbw / (2.0 * g[n] * g[n + 1]))
    return j


def series_b_from_j(j_norm: ArrayLike) -> NDArray[np.float64]:
    """Series susceptance B/Y0 = (J/Y0)/(1 - (J/Y0)²) of a series-C inverter, 0 < J/Y0 < 1."""
    j = v.finite_array("j_norm", j_norm)
    if j.size and (np.min(j) <= 0 or np.max(j) >= 1):
        bad = j[(j <= 0) | (j >= 1)].ravel()[0]
        raise ValueError(
            f"j_norm = {bad:g} is outside the allowed range (0, 1) for a series-capacitor inverter"
        )
    return j / (1.0 - j * j)


def inverter_phase(b_norm: ArrayLike) -> NDArray[np.float64]:
    """Electrical length φ = -atan(2B/Y0) (rad, negative) of a series-C inverter, split ±φ/2."""
    return -np.arctan(2.0 * v.finite_array("b_norm", b_norm))


def pi_to_inverter(bg_norm: ArrayLike, bp_norm: ArrayLike) -> tuple[NDArray, NDArray]:
    """Inverter equivalent of a symmetric capacitive π-network.

    A π-network of series susceptance Bg and shunt Bp on each side, between two lines of
    electrical length φ/2, is an ideal admittance inverter when (MYJ 1964 §8.05; Hong &
    Lancaster 2001 §5.2.1)::

        φ    = -atan(2 Bg/Y0 + Bp/Y0) - atan(Bp/Y0)        (rad, negative)
        J/Y0 = |tan(φ/2 + atan(Bp/Y0))|

    With Bp = 0 it reduces to B/Y0 = (J/Y0)/(1 - (J/Y0)²). Returns ``(j_norm, phi)``.
    """
    bg = v.finite_array("bg_norm", bg_norm)
    bp = v.finite_array("bp_norm", bp_norm)
    phi = -np.arctan(2.0 * bg + bp) - np.arctan(bp)
    return np.abs(np.tan(phi / 2.0 + np.arctan(bp))), phi


def resonator_angles(phi: ArrayLike) -> NDArray[np.float64]:
    """Electrical lengths θ_j = π + (φ_j-1,j + φ_j,j+1)/2 of the n resonators between n + 1
    inverters of phase φ (each inverter lends φ/2 to each neighbour)."""
    p = v.finite_array("phi", phi)
    return np.pi + 0.5 * (p[:-1] + p[1:])


def design(
    family: str,
    order: int,
    f0: float,
    fbw: float,
    z_ref: float,
    ripple_db: float | None = None,
) -> ElectricalDesign:
    """Closed-form design of an end-coupled half-wave filter (equations in the module docstring).

    Parameters
    ----------
    family : 'chebyshev' or 'butterworth'.
    order : number of resonators, 1..15.
    f0 : centre frequency in Hz (> 0).
    fbw : fractional bandwidth, (0, 1).
    z_ref : port and resonator line impedance in ohm (> 0).
    ripple_db : Chebyshev passband ripple in dB (> 0); must be None for Butterworth.
    """
    family = v.one_of("family", family, prototype.FAMILIES)
    if family == "butterworth" and ripple_db is not None:
        raise ValueError(
            "ripple_db must be None for family 'butterworth' (it is 3.0103 dB by definition)"
        )
    f0 = v.positive("f0", f0)
    fbw = v.real_in_range("fbw", fbw, 0.0, 1.0, lo_open=True, hi_open=True)
    z_ref = v.positive("z_ref", z_ref)
    g = prototype.g_values(family, order, ripple_db)
    j = inverter_j(g, fbw)
    if np.max(j) >= 1.0:
        raise ValueError(
            f"fbw = {fbw:g} needs J/Y0 = {np.max(j):.3f} >= 1, which a series capacitor cannot "
            "realise; reduce fbw"
        )
    b = series_b_from_j(j)
    theta = resonator_angles(inverter_phase(b))
    cap = b / (z_ref * 2.0 * math.pi * f0)
    return ElectricalDesign(
        family=family,
        order=int(order),
        ripple_db=None if ripple_db is None else float(ripple_db),
        f0=f0,
        fbw=fbw,
        z_ref=z_ref,
        g=tuple(float(x) for x in g),
        j_norm=tuple(float(x) for x in j),
        b_norm=tuple(float(x) for x in b),
        capacitance=tuple(float(x) for x in cap),
        theta=tuple(float(x) for x in theta),
    )


def ideal_response(d: ElectricalDesign, f: ArrayLike) -> NDArray[np.complex128]:
    """S-matrix ``(nf, 2, 2)`` of the design realised with ideal series capacitors and TEM lines."""
    f = v.frequencies("f", f)
    return cascade.s_parameters(
        ideal_elements(d.capacitance, d.theta, d.f0, d.z_ref, f), f, d.z_ref
    )


# --------------------------------------------------------------------------------------------
# Order selection
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class OrderChoice:
    """Outcome of :func:`select_order`.

    ``order`` is the smallest order whose ideal-element circuit meets every reachable stopband
    (or the largest tried, with ``met`` False). ``mapping_order`` is what the half-wave
    reactance-slope mapping alone predicts. ``rejection_db`` holds, per stopband, the worst
    rejection of the ideal circuit at ``order``. ``spurious`` lists, per stopband, the spurious
    passbands (Hz) inside it that no order can reject.
    """

    order: int
    met: bool
    mapping_order: int
    rejection_db: tuple[float, ...]
    spurious: tuple[tuple[tuple[float, float], ...], ...] = field(default=())
    notes: tuple[str, ...] = field(default=())


def _stopband_grid(sb: Stopband, f0: float, n: int = 801) -> NDArray[np.float64]:
    lo = max(sb.start, 1e-3 * f0)  # the gap-coupled filter blocks DC; f = 0 itself is excluded
    return np.unique(np.concatenate([np.linspace(lo, sb.stop, n), [lo, sb.stop]]))


def select_order(
    family: str,
    f0: float,
    fbw: float,
    z_ref: float,
    stopbands: Sequence[Stopband],
    ripple_db: float | None = None,
    max_order: int = prototype.MAX_ORDER,
) -> OrderChoice:
    """Smallest order meeting the stopband rejections, judged on the ideal-element circuit.

    First the half-wave reactance-slope mapping (:func:`refine.synthesis.prototype.halfwave_omega`) gives
    a prediction from the prototype attenuation over each stopband; then the closed-form design
    of each order from 1 up is evaluated with ideal elements over every stopband, because the
    gap-coupled circuit's skirts are asymmetric and the mapping is only approximate. Spurious
    passbands (near 2 f0, 3 f0, ...) inside a stopband cannot be rejected by any order: they are
    reported, and the order is chosen for the remaining frequencies.
    """
    if not stopbands:
        raise ValueError("stopbands must hold at least one stopband to choose an order from")
    max_order = v.integer_in_range("max_order", max_order, 1, prototype.MAX_ORDER)
    lo_edge, hi_edge = f0 * (1 - fbw / 2), f0 * (1 + fbw / 2)
    for sb in stopbands:
        if sb.start < hi_edge and sb.stop > lo_edge:
            raise ValueError(
                f"stopband {sb.start:g}..{sb.stop:g} Hz overlaps the passband "
                f"{lo_edge:g}..{hi_edge:g} Hz"
            )
    spurious = tuple(
        tuple(prototype.spurious_passbands(sb.start, sb.stop, f0, fbw)) for sb in stopbands
    )
    grids = []
    for sb, spur in zip(stopbands, spurious, strict=True):
        grid = _stopband_grid(sb, f0)
        keep = np.ones(grid.shape, bool)
        for a, b in spur:  # exclude each spurious band widened by one passband width either side
            keep &= (grid < a - fbw * f0) | (grid > b + fbw * f0)
        grids.append(grid[keep])

    mapping_order = max_order
    for n in range(1, max_order + 1):
        ok = True
        for sb, grid in zip(stopbands, grids, strict=True):
            if grid.size:
                om = prototype.halfwave_omega(grid, f0, fbw)
                if np.min(prototype.attenuation_db(family, n, om, ripple_db)) < sb.rejection_db:
                    ok = False
        if ok:
            mapping_order = n
            break

    notes: list[str] = []
    for sb, spur in zip(stopbands, spurious, strict=True):
        for a, b in spur:
            notes.append(
                f"stopband {sb.start / 1e9:.4g}-{sb.stop / 1e9:.4g} GHz contains the spurious "
                f"passband of the half-wave resonators at {a / 1e9:.4g}-{b / 1e9:.4g} GHz; no "
                "order rejects it (add a lowpass or use stepped-impedance resonators)"
            )
    last: tuple[float, ...] = ()
    for n in range(1, max_order + 1):
        try:
            d = design(family, n, f0, fbw, z_ref, ripple_db)
        except ValueError:
            continue
        worst = []
        for grid in grids:
            if grid.size == 0:
                worst.append(float("inf"))
                continue
            s21 = ideal_response(d, grid)[:, 1, 0]
            worst.append(float(np.min(-20.0 * np.log10(np.maximum(np.abs(s21), 1e-300)))))
        last = tuple(worst)
        if all(w >= sb.rejection_db for w, sb in zip(worst, stopbands, strict=True)):
            return OrderChoice(n, not any(spurious), mapping_order, last, spurious, tuple(notes))
    notes.append(f"no order up to {max_order} meets the stopband rejection on the ideal circuit")
    return OrderChoice(max_order, False, mapping_order, last, spurious, tuple(notes))
