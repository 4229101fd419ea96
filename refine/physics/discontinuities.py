"""Strip discontinuities as capacitances and inductances: series gap, open end, width step.

All lengths in metres, capacitances in farads, inductances in henries. The gap functions accept
complex gap widths so that derivatives can be taken by complex step (d C/ds = Im C(s + ih)/h);
their branch decisions use the real part only.

Microstrip series gap (π-network: series C_series, shunt C_shunt on each side, reference planes
at the strip ends)
    * :func:`garg_bahl_gap` — Garg & Bahl, "Microstrip discontinuities", Int. J. Electronics
      45(1), 81–87, 1978 (also Gupta, Garg, Bahl & Bhartia 1996 §3.4; Hong & Lancaster 2001
      §4.3.1.3). Fitted for 0.5 ≤ W/h ≤ 2, 2.5 ≤ eps_r ≤ 15, 0.1 ≤ s/W ≤ 1, about 7 %.
    * :func:`kirschning_jansen_koster_gap` — Kirschning, Jansen & Koster, "Measurement and
      computer-aided modeling of microstrip discontinuities by an improved resonator method",
      IEEE MTT-S Digest 1983, 495–497. About 0.1 ≤ W/h ≤ 3, 1 ≤ W2/W1 ≤ 3, 6 ≤ eps_r ≤ 13,
      s/h ≥ 0.1 (as transcribed in docs/references.md §6.2; the paper itself was not read).
Microstrip open end
    * :func:`kirschning_jansen_koster_open_end` — Kirschning, Jansen & Koster, "Accurate model for
      open end effect of microstrip lines", Electronics Letters 17(3), 123–125, 1981.
      0.01 ≤ W/h ≤ 100, eps_r ≤ 50; about 2.5 %.
Microstrip width step
    * :func:`garg_bahl_step` — Garg & Bahl 1978 (same paper): shunt capacitance and series
      inductances of a step W1 > W2. Formula recalled from memory (Gupta et al. 1996 §3.3 form),
      not read from the paper. Fitted for eps_r ≤ 10, 1.5 ≤ W1/W2 ≤ 3.5.
Stripline gap and open end
    * :func:`stripline_gap` — a quasi-static approximation in the form recalled (from memory, not
      read) from Altschuler & Oliner, "Discontinuities in the center conductor of symmetric strip
      transmission line", IRE Trans. MTT-8(3), 328–339, 1960: the two-dimensional (wide,
      zero-thickness strip) solution, with reference planes at the centre of the gap. Its
      large-gap limit is exactly the open end Δl = b ln 2/π of :func:`stripline_open_end`, and
      the series capacitance grows without bound as s → 0. Stated range: W/b ≥ 0.5 (wide
      strip), t = 0, b ≤ 0.1 λ.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import validity
from refine.physics.constants import C0
from refine.physics.microstrip import hammerstad_jensen

PF = 1e-12

# The Garg–Bahl even-mode fit changes branch at s/W = 0.3 with a 30 % step in C_even. refine
# blends the two branches in ln(s/W) with a smoothstep over s/W in [0.3/1.1, 0.3·1.1], which
# keeps C_even and its derivative continuous. Inside the blend the result lies between the two
# published branches; outside it each branch is used exactly as published.
GB_BLEND_CENTRE = 0.3
GB_BLEND_FACTOR = 1.1
# Garg-Bahl's series capacitance is held at least at this fraction of C_odd/2 (see
# garg_bahl_gap: the fit goes negative for wide strips, outside its W/h range)
GB_SERIES_FLOOR = 1e-3
GB_GAP_WH = (0.5, 2.0)  # Garg–Bahl gap: the W/h range of its fit
KJK_GAP_WH = (0.1, 3.0)  # Kirschning–Jansen–Koster gap: its stated W/h range
GB_GAP_SW = (0.1, 1.0)  # Garg–Bahl gap: the s/W range of its fit
KJK_GAP_SH = (0.1, math.inf)  # Kirschning–Jansen–Koster gap: its stated s/h range (no upper)


class GapCapacitances(NamedTuple):
    """π-network of a series gap: series capacitance and the shunt capacitance at each side."""

    c_series: NDArray
    c_shunt_in: NDArray
    c_shunt_out: NDArray


def _smoothstep(t: NDArray) -> NDArray:
    tr = np.real(t)
    return np.where(tr <= 0.0, 0.0, np.where(tr >= 1.0, 1.0, t * t * (3.0 - 2.0 * t)))


def _garg_bahl_raw(
    w: ArrayLike, s: ArrayLike, h: ArrayLike, eps_r: ArrayLike
) -> tuple[NDArray, NDArray]:
    """(C_odd, C_even) in farads from Garg & Bahl's fits, with the smoothed branch join."""
    w = np.asarray(w)
    u = np.real(w / np.asarray(h, float))
    x = np.asarray(s) / w  # s/W, possibly complex for complex-step derivatives
    lu = np.log10(u)
    m_o = u * (0.619 * lu - 0.3853)
    k_o = 4.26 - 1.453 * lu
    c_odd = w * x**m_o * np.exp(k_o) * (np.asarray(eps_r) / 9.6) ** 0.8
    lo_me, lo_ke = 0.8675, 2.043 * u**0.12
    hi_me, hi_ke = 1.565 / u**0.16 - 1.0, 1.97 - 0.03 / u
    ln_x = np.log(x)
    ln_lo = lo_ke + lo_me * ln_x  # ln(C_even/(12 W)) of each branch
    ln_hi = hi_ke + hi_me * ln_x
    a = math.log(GB_BLEND_CENTRE / GB_BLEND_FACTOR)
    b = math.log(GB_BLEND_CENTRE * GB_BLEND_FACTOR)
    wgt = _smoothstep((ln_x - a) / (b - a))
    c_even = 12.0 * w * np.exp((1.0 - wgt) * ln_lo + wgt * ln_hi) * (np.asarray(eps_r) / 9.6) ** 0.9
    return c_odd * PF, c_even * PF


def garg_bahl_gap(w: ArrayLike, s: ArrayLike, h: ArrayLike, eps_r: ArrayLike) -> GapCapacitances:
    """Symmetric microstrip gap π-network (Garg & Bahl 1978), in farads.

    C_odd/W = (s/W)^m_o exp(k_o) (eps_r/9.6)^0.8, C_even/W = 12 (s/W)^m_e exp(k_e) (eps_r/9.6)^0.9
    (pF/m), m_o = u (0.619 log u - 0.3853), k_o = 4.26 - 1.453 log u, and for the even mode
    m_e = 0.8675, k_e = 2.043 u^0.12 (0.1 ≤ s/W ≤ 0.3) or m_e = 1.565/u^0.16 - 1,
    k_e = 1.97 - 0.03/u (0.3 ≤ s/W ≤ 1); log is log10. C_shunt = C_even/2,
    C_series = C_odd/2 - C_even/4.

    Beyond s/W = 1 the fit's C_series turns negative near s/W ≈ 1.6; refine continues C_series
    as the power law that matches its value and slope at s/W = 1 (positive, C¹), and warns.
    """
    w = np.asarray(w)
    s = np.asarray(s)
    h = np.asarray(h, float)
    validity.check("Garg-Bahl gap", "W/h", np.real(w) / h, *GB_GAP_WH)
    validity.check("Garg-Bahl gap", "eps_r", eps_r, 2.5, 15.0)
    validity.check("Garg-Bahl gap", "s/W", np.real(s / w), *GB_GAP_SW)
    c_odd, c_even = _garg_bahl_raw(w, s, h, eps_r)
    c_series = 0.5 * c_odd - 0.25 * c_even
    x = np.real(s / w)
    if np.any(x > 1.0):
        # power-law continuation from s/W = 1: ln C = ln C1 + p ln(s/W), p = dlnC/dln(s/W)|_1
        hstep = 1e-20
        w_c = np.asarray(w, complex)
        co1, ce1 = _garg_bahl_raw(w_c, w_c * (1.0 + 1j * hstep), h, eps_r)
        cs1c = 0.5 * co1 - 0.25 * ce1
        cs1 = np.real(cs1c)
        p = np.imag(cs1c) / hstep / cs1  # d ln C / d (s/W) at 1 = d ln C / d ln(s/W) at 1
        # only where s/W > 1 (elsewhere 1: a steep p would overflow on the unused branch)
        cont = cs1 * np.where(x > 1.0, s / w, 1.0) ** p
        c_series = np.where(x > 1.0, cont, c_series)
    floor = GB_SERIES_FLOOR * 0.5 * c_odd
    if np.any(np.real(c_series) < np.real(floor)):
        # outside the fitted W/h (wide strips) the even-mode term overtakes the odd one and
        # the fit's series capacitance falls through zero: hold it at a small positive floor
        validity.warn(
            "Garg-Bahl gap: the fit's series capacitance falls below "
            f"{GB_SERIES_FLOOR:g} of C_odd/2 (non-physical) at W/h up to "
            f"{float(np.max(np.real(w) / h)):.3g}; held at that floor"
        )
        c_series = np.where(np.real(c_series) < np.real(floor), floor, c_series)
    c_shunt = 0.5 * c_even
    return GapCapacitances(c_series, c_shunt, c_shunt)


def kirschning_jansen_koster_open_end(
    u: ArrayLike, eps_r: ArrayLike, eps_eff: ArrayLike
) -> NDArray:
    """Open-end length extension Δl/h of Kirschning, Jansen & Koster 1981.

    ξ1 = 0.434907 (εe^0.81 + 0.26)/(εe^0.81 - 0.189) · (u^0.8544 + 0.236)/(u^0.8544 + 0.87),
    ξ2 = 1 + u^0.371/(2.358 εr + 1), ξ3 = 1 + 0.5274 atan(0.084 u^(1.9413/ξ2))/εe^0.9236,
    ξ4 = 1 + 0.0377 atan(0.067 u^1.456)·(6 - 5 exp(0.036 (1 - εr))), ξ5 = 1 - 0.218 exp(-7.5 u),
    Δl/h = ξ1 ξ3 ξ5/ξ4, with the quasi-static eps_eff.
    """
    u = np.asarray(u)
    er = np.asarray(eps_r, float)
    ee = np.asarray(eps_eff)
    validity.check("Kirschning-Jansen-Koster open end", "W/h", np.real(u), 0.01, 100.0)
    validity.check("Kirschning-Jansen-Koster open end", "eps_r", er, 1.0, 50.0)
    e81 = ee**0.81
    u8544 = u**0.8544
    xi1 = 0.434907 * (e81 + 0.26) / (e81 - 0.189) * (u8544 + 0.236) / (u8544 + 0.87)
    xi2 = 1.0 + u**0.371 / (2.358 * er + 1.0)
    xi3 = 1.0 + 0.5274 * np.arctan(0.084 * u ** (1.9413 / xi2)) / ee**0.9236
    xi4 = 1.0 + 0.0377 * np.arctan(0.067 * u**1.456) * (6.0 - 5.0 * np.exp(0.036 * (1.0 - er)))
    xi5 = 1.0 - 0.218 * np.exp(-7.5 * u)
    return xi1 * xi3 * xi5 / xi4


def microstrip_open_end_capacitance(w: ArrayLike, h: float, eps_r: float) -> NDArray:
    """Open-end capacitance C_oc = Δl sqrt(eps_eff)/(c Z0) (farads) with KJK 1981 Δl and the
    quasi-static Hammerstad–Jensen eps_eff and Z0 of a zero-thickness strip."""
    u = np.asarray(w) / h
    z0, ee, _ = hammerstad_jensen(np.real(u), eps_r)
    dl = kirschning_jansen_koster_open_end(u, eps_r, ee) * h
    return dl * np.sqrt(ee) / (C0 * z0)


def kirschning_jansen_koster_gap(
    w1: ArrayLike, w2: ArrayLike, s: ArrayLike, h: float, eps_r: float
) -> GapCapacitances:
    """Microstrip gap between widths W1 (input side) and W2 (output side), in farads
    (Kirschning, Jansen & Koster 1983, as transcribed in docs/references.md §6.2).

    Q1 = 0.04598 (0.03 + (W1/h)^Q5)(0.272 + 0.07 εr), Q5 = 1.23/(1 + 0.12 (W2/W1 - 1)^0.9),
    Q2 = 0.107 (W1/h + 9)(s/h)^3.23 + 2.09 (s/h)^1.05 (1.5 + 0.3 W1/h)/(1 + 0.5 W1/h),
    Q3 = exp(-0.5978 (W2/W1)^1.35) - 0.55, Q4 = exp(-0.5978 (W1/W2)^1.35) - 0.55,
    C_s = 500 h exp(-1.86 s/h) Q1 {1 + 4.19 [1 - exp(-0.785 sqrt(h/W1) W2/W1)]} pF (h in m),
    C_p1 = C_oc(W1)(Q2 + Q3)/(Q2 + 1), C_p2 = C_oc(W2)(Q2 + Q4)/(Q2 + 1).
    The model is written for W2 ≥ W1; for W2 < W1 it is applied mirrored.
    """
    w1 = np.asarray(w1, float)
    w2 = np.asarray(w2, float)
    s = np.asarray(s)
    validity.check(
        "Kirschning-Jansen-Koster gap",
        "W/h",
        np.concatenate([np.ravel(w1), np.ravel(w2)]) / h,
        *KJK_GAP_WH,
    )
    validity.check("Kirschning-Jansen-Koster gap", "eps_r", eps_r, 6.0, 13.0)
    validity.check("Kirschning-Jansen-Koster gap", "s/h", np.real(s) / h, KJK_GAP_SH[0], None)
    wide = np.maximum(w1, w2)
    narrow = np.minimum(w1, w2)
    validity.check("Kirschning-Jansen-Koster gap", "W2/W1", wide / narrow, 1.0, 3.0)
    ratio = wide / narrow
    un = narrow / h
    sh = s / h
    q5 = 1.23 / (1.0 + 0.12 * (ratio - 1.0) ** 0.9)
    q1 = 0.04598 * (0.03 + un**q5) * (0.272 + 0.07 * eps_r)
    q2 = 0.107 * (un + 9.0) * sh**3.23 + 2.09 * sh**1.05 * (1.5 + 0.3 * un) / (1.0 + 0.5 * un)
    q3 = np.exp(-0.5978 * ratio**1.35) - 0.55  # narrow side
    q4 = np.exp(-0.5978 * (1.0 / ratio) ** 1.35) - 0.55  # wide side
    cs = (
        500.0
        * h
        * np.exp(-1.86 * sh)
        * q1
        * (1.0 + 4.19 * (1.0 - np.exp(-0.785 * np.sqrt(h / narrow) * ratio)))
        * PF
    )
    c_narrow = microstrip_open_end_capacitance(narrow, h, eps_r) * (q2 + q3) / (q2 + 1.0)
    c_wide = microstrip_open_end_capacitance(wide, h, eps_r) * (q2 + q4) / (q2 + 1.0)
    if np.any(np.real(c_narrow) < 0.0) or np.any(np.real(c_wide) < 0.0):
        # for unequal widths and small gaps (inside the stated range) the fit's narrow-side
        # shunt capacitance goes negative; a shunt capacitance to ground cannot: hold it at 0
        validity.warn(
            "Kirschning-Jansen-Koster gap: the fit's shunt capacitance is negative (unequal "
            f"widths, s/h down to {float(np.min(np.real(sh))):.3g}); held at 0"
        )
        c_narrow = np.where(np.real(c_narrow) < 0.0, 0.0 * c_narrow, c_narrow)
        c_wide = np.where(np.real(c_wide) < 0.0, 0.0 * c_wide, c_wide)
    input_is_narrow = w1 <= w2
    c_in = np.where(input_is_narrow, c_narrow, c_wide)
    c_out = np.where(input_is_narrow, c_wide, c_narrow)
    return GapCapacitances(cs, c_in, c_out)


class StepElements(NamedTuple):
    """T-network of a width step: series L on the wide side, shunt C, series L on the narrow side."""

    l_wide: NDArray
    c_shunt: NDArray
    l_narrow: NDArray


def garg_bahl_step(w_wide: ArrayLike, w_narrow: ArrayLike, h: float, eps_r: float) -> StepElements:
    """Microstrip width step W1 > W2 (Garg & Bahl 1978; formula from memory, see module).

    C/sqrt(W1 W2) = (10.1 log εr + 2.33) W1/W2 - 12.6 log εr - 3.17 pF/m (εr ≤ 10,
    1.5 ≤ W1/W2 ≤ 3.5); Ls/h = 40.5 (W1/W2 - 1) - 75 log(W1/W2) + 0.2 (W1/W2 - 1)² nH/m,
    split as L_i = Ls · Lw_i/(Lw1 + Lw2) with Lw = Z0 sqrt(eps_eff)/c the inductance per unit
    length of each line. Between W1/W2 = 1 (no step) and 1.5 the capacitance, which the fit
    makes negative there, is interpolated linearly from 0 to its value at 1.5 (and warned).
    """
    w1 = np.asarray(w_wide, float)
    w2 = np.asarray(w_narrow, float)
    if np.any(w1 < w2):
        raise ValueError("garg_bahl_step needs w_wide >= w_narrow")
    r = w1 / w2
    validity.check("Garg-Bahl step", "W1/W2", r, 1.5, 3.5)
    validity.check("Garg-Bahl step", "eps_r", eps_r, 1.0, 10.0)
    le = math.log10(eps_r)

    def c_fit(ratio: NDArray) -> NDArray:
        return ((10.1 * le + 2.33) * ratio - 12.6 * le - 3.17) * np.sqrt(w1 * w2) * PF

    c = np.where(r >= 1.5, c_fit(r), c_fit(np.full_like(r, 1.5)) * (r - 1.0) / 0.5)
    c = np.maximum(c, 0.0)
    ls = (40.5 * (r - 1.0) - 75.0 * np.log10(r) + 0.2 * (r - 1.0) ** 2) * h * 1e-9
    ls = np.maximum(ls, 0.0)
    z1, e1, _ = hammerstad_jensen(w1 / h, eps_r)
    z2, e2, _ = hammerstad_jensen(w2 / h, eps_r)
    lw1, lw2 = z1 * np.sqrt(e1) / C0, z2 * np.sqrt(e2) / C0
    return StepElements(ls * lw1 / (lw1 + lw2), c, ls * lw2 / (lw1 + lw2))


def stripline_open_end(b: float) -> float:
    """Open-end length extension Δl = b ln 2/π of a wide, zero-thickness stripline strip
    (Altschuler & Oliner 1960; Matthaei, Young & Jones 1964 ch. 5 — from memory)."""
    return b * math.log(2.0) / math.pi


def stripline_gap(
    s: ArrayLike, b: float, eps_r: float, z0: ArrayLike, w: ArrayLike | None = None
) -> GapCapacitances:
    """Quasi-static π-network of a gap in a stripline strip, reference planes at the gap centre.

    With Y0 = 1/Z0 and v = c/sqrt(eps_r) (form recalled from Altschuler & Oliner 1960; see the
    module docstring for its standing):
        C_series = Y0 b/(2π v) · ln coth(π s/2b)
        C_shunt  = -Y0 2b/(2π v) · ln cosh(π s/2b)      (each side; negative: it removes the
                                                           strip length s/2 up to the centre)
    As s → ∞, C_shunt → Y0 (b ln 2/π)/v - Y0 (s/2)/v: the open end Δl = b ln2/π minus the line
    s/2 between the strip end and the centre plane. Circuits using it must add a line of length
    s/2 on each side (see :mod:`refine.circuit.builder`).
    """
    s = np.asarray(s)
    if w is not None:
        validity.check("stripline gap (quasi-static)", "W/b", np.asarray(w, float) / b, 0.5, None)
    y0 = 1.0 / np.asarray(z0, float)
    v = C0 / np.sqrt(eps_r)
    x = np.pi * s / (2.0 * b)
    # for wide gaps ln coth x and ln cosh x are taken in forms that keep their digits
    # (coth x rounds to 1 beyond x ≈ 19 and cosh overflows beyond x ≈ 710)
    # the direct forms keep about 1e-9 relative accuracy up to x = 8 (s/b ≈ 5)
    wide = np.real(x) > 8.0
    if not np.any(wide):
        ln_coth, ln_cosh = np.log(1.0 / np.tanh(x)), np.log(np.cosh(x))
    else:
        xs = np.where(wide, 1.0, x)  # each form only sees where it is accurate
        xw = np.where(wide, x, 9.0)
        ln_coth = np.where(wide, np.log1p(2.0 / np.expm1(2.0 * xw)), np.log(1.0 / np.tanh(xs)))
        ln_cosh = np.where(
            wide, xw + np.log1p(np.exp(-2.0 * xw)) - math.log(2.0), np.log(np.cosh(xs))
        )
    c_series = y0 * b / (2.0 * np.pi * v) * ln_coth
    c_shunt = -y0 * 2.0 * b / (2.0 * np.pi * v) * ln_cosh
    return GapCapacitances(c_series, c_shunt, c_shunt)
