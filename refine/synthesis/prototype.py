"""Lowpass prototypes: g-values, attenuation functions, order selection and frequency mappings.

Symbols
-------
=========  ============================================================
n          filter order (number of resonators), 1..15
g_k        prototype element values, g_0 = 1, g_1..g_n, g_{n+1} = load
L_Ar       Chebyshev passband ripple in dB (> 0)
Ω          normalised lowpass frequency (passband edge at Ω = 1)
FBW        fractional bandwidth (f2 - f1) / f0, in (0, 1)
=========  ============================================================

Sources: Matthaei, Young & Jones, *Microwave Filters, Impedance-Matching Networks and Coupling
Structures* (1964), §4.05; Pozar, *Microwave Engineering*, 4th ed., §8.3; Hong & Lancaster,
*Microstrip Filters for RF/Microwave Applications* (2001), §3.1.

Frequency mapping for half-wave resonator filters
-------------------------------------------------
Order selection needs Ω at a stopband frequency. refine uses the *reactance-slope mapping* of a
half-wave line resonator (:func:`halfwave_omega`): between two admittance inverters a line of
electrical length θ = π f/f0 presents a susceptance Y0 tan(π f/f0) whose slope parameter is
b = Y0 π/2, so Ω(f) = tan(π f/f0) / (FBW π/2). Near f0 this is the narrow-band mapping of
MYJ §8.04, Ω ≈ 2 (f - f0)/(FBW f0); unlike the lumped mapping it is periodic, so it shows the
spurious passband of the half-wave filter at 2 f0 (|Ω| < 1 again around f = 2 f0) instead of
promising ever-growing rejection there. The real gap-coupled filter is additionally asymmetric
(its couplings grow with frequency) — :func:`refine.synthesis.inverters.select_order` therefore confirms
the mapping's choice on the ideal-element circuit itself.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine.spec.families import FAMILIES, MAX_ORDER

Family = Literal["chebyshev", "butterworth"]

__all__ = ["FAMILIES", "MAX_ORDER"]

_DB_PER_NEPER_X2 = 40.0 / math.log(10.0)  # 17.3718..., the "17.37" of MYJ eq. 4.05-2


def _check_order(n: object) -> int:
    return v.integer_in_range("order", n, 1, MAX_ORDER)


def _check_ripple(ripple_db: object) -> float:
    return v.real_in_range("ripple_db", ripple_db, 0.0, None, lo_open=True)


def butterworth_g(n: int) -> NDArray[np.float64]:
    """Butterworth (maximally flat, 3.0103 dB at Ω = 1) g-values g_0..g_{n+1}.

    g_k = 2 sin((2k-1)π/(2n)), g_0 = g_{n+1} = 1 (MYJ 1964 eq. 4.05-1; Pozar §8.3).
    """
    n = _check_order(n)
    k = np.arange(1, n + 1)
    g = np.empty(n + 2)
    g[0] = g[-1] = 1.0
    g[1:-1] = 2.0 * np.sin((2 * k - 1) * np.pi / (2 * n))
    return g


def chebyshev_g(n: int, ripple_db: float) -> NDArray[np.float64]:
    """Chebyshev (equal-ripple) g-values g_0..g_{n+1} for a passband ripple ``ripple_db`` > 0.

    Closed form of MYJ 1964 eq. 4.05-2 (also Hong & Lancaster 2001 eq. 3.12): with
    β = ln coth(L_Ar/17.37), γ = sinh(β/2n), a_k = sin((2k-1)π/2n), b_k = γ² + sin²(kπ/n):
    g_1 = 2a_1/γ, g_k = 4 a_{k-1} a_k / (b_{k-1} g_{k-1}); g_{n+1} = 1 for odd n and
    coth²(β/4) for even n. The constant 17.37 is used exactly, as 40/ln 10.
    """
    n = _check_order(n)
    ripple_db = _check_ripple(ripple_db)
    beta = math.log(1.0 / math.tanh(ripple_db / _DB_PER_NEPER_X2))
    gamma = math.sinh(beta / (2 * n))
    k = np.arange(1, n + 1)
    a = np.sin((2 * k - 1) * np.pi / (2 * n))
    b = gamma**2 + np.sin(k * np.pi / n) ** 2
    g = np.empty(n + 2)
    g[0] = 1.0
    g[1] = 2.0 * a[0] / gamma
    for j in range(2, n + 1):
        g[j] = 4.0 * a[j - 2] * a[j - 1] / (b[j - 2] * g[j - 1])
    g[n + 1] = 1.0 if n % 2 else 1.0 / math.tanh(beta / 4.0) ** 2
    return g


def g_values(family: str, n: int, ripple_db: float | None = None) -> NDArray[np.float64]:
    """g_0..g_{n+1} for ``family`` 'chebyshev' (needs ``ripple_db``) or 'butterworth'."""
    family = v.one_of("family", family, FAMILIES)
    if family == "butterworth":
        return butterworth_g(n)
    if ripple_db is None:
        raise ValueError("ripple_db is required for family 'chebyshev' (allowed range (0, inf))")
    return chebyshev_g(n, ripple_db)


def ripple_to_return_loss(ripple_db: float) -> float:
    """Return loss in dB at the ripple peaks of a lossless filter: RL = -10 log(1 - 10^(-L_Ar/10)).

    Common practice, no source (it is |S11|² = 1 - |S21|²).
    """
    ripple_db = _check_ripple(ripple_db)
    return -10.0 * math.log10(-math.expm1(-ripple_db * math.log(10.0) / 10.0))


def return_loss_to_ripple(return_loss_db: float) -> float:
    """Inverse of :func:`ripple_to_return_loss`."""
    rl = v.real_in_range("return_loss_db", return_loss_db, 0.0, None, lo_open=True)
    return -10.0 * math.log10(-math.expm1(-rl * math.log(10.0) / 10.0))


def attenuation_db(
    family: str, n: int, omega: ArrayLike, ripple_db: float | None = None
) -> NDArray[np.float64]:
    """Prototype insertion loss L_A(Ω) in dB.

    Chebyshev: 10 log(1 + ε² T_n²(Ω)), ε² = 10^(L_Ar/10) - 1; Butterworth: 10 log(1 + Ω^(2n))
    (MYJ 1964 eqs. 4.03-3 and 4.03-4; Pozar §8.3).
    """
    family = v.one_of("family", family, FAMILIES)
    n = _check_order(n)
    x = np.abs(v.finite_array("omega", omega))
    if family == "butterworth":
        return 10.0 * np.log10(1.0 + x ** (2 * n))
    if ripple_db is None:
        raise ValueError("ripple_db is required for family 'chebyshev' (allowed range (0, inf))")
    eps2 = math.expm1(_check_ripple(ripple_db) * math.log(10.0) / 10.0)
    inside = x <= 1.0
    tn = np.where(
        inside,
        np.cos(n * np.arccos(np.minimum(x, 1.0))),
        np.cosh(n * np.arccosh(np.maximum(x, 1.0))),
    )
    return 10.0 * np.log10(1.0 + eps2 * tn**2)


def minimum_order(
    family: str, rejection_db: float, omega_s: float, ripple_db: float | None = None
) -> float:
    """Real-valued minimum order for ``rejection_db`` at ``|Ω| = omega_s`` > 1 (round it up).

    Chebyshev: n = acosh(sqrt((10^(L_As/10) - 1)/(10^(L_Ar/10) - 1))) / acosh(Ω_s);
    Butterworth: n = log(10^(L_As/10) - 1) / (2 log Ω_s) (Hong & Lancaster 2001 eqs. 3.4, 3.11;
    MYJ §4.03).
    """
    family = v.one_of("family", family, FAMILIES)
    las = v.positive("rejection_db", rejection_db)
    ws = v.real_in_range("omega_s", omega_s, 1.0, None, lo_open=True)
    num = math.expm1(las * math.log(10.0) / 10.0)
    if family == "butterworth":
        return math.log10(num) / (2.0 * math.log10(ws)) if num > 1 else 0.0
    if ripple_db is None:
        raise ValueError("ripple_db is required for family 'chebyshev' (allowed range (0, inf))")
    den = math.expm1(_check_ripple(ripple_db) * math.log(10.0) / 10.0)
    ratio = num / den
    return math.acosh(math.sqrt(ratio)) / math.acosh(ws) if ratio > 1 else 0.0


def lumped_omega(f: ArrayLike, f0: float, fbw: float) -> NDArray[np.float64]:
    """Lumped (geometric) bandpass mapping Ω = (f/f0 - f0/f)/FBW (Pozar §8.4)."""
    f = v.positive_array("f", f)
    f0 = v.positive("f0", f0)
    fbw = v.real_in_range("fbw", fbw, 0.0, 1.0, lo_open=True, hi_open=True)
    return (f / f0 - f0 / f) / fbw


def halfwave_omega(f: ArrayLike, f0: float, fbw: float) -> NDArray[np.float64]:
    """Reactance-slope mapping of a half-wave line resonator, Ω = tan(π f/f0)/(FBW π/2).

    Derived from the resonator susceptance Y0 tan(π f/f0) and its slope parameter b = Y0 π/2
    (MYJ 1964 §8.02 and §8.05 use its narrow-band linearisation 2 (f - f0)/(FBW f0)). It is
    periodic in f0: |Ω| < 1 recurs around 2 f0, 3 f0, ... (the spurious passbands), and Ω has
    poles at f0/2, 3 f0/2, ... where the mapping predicts unbounded rejection; between a pole
    and the next passband the magnitude falls again, so callers must look at whole intervals.
    """
    f = v.positive_array("f", f)
    f0 = v.positive("f0", f0)
    fbw = v.real_in_range("fbw", fbw, 0.0, 1.0, lo_open=True, hi_open=True)
    return np.tan(np.pi * f / f0) / (fbw * np.pi / 2.0)


def spurious_passbands(
    f_lo: float, f_hi: float, f0: float, fbw: float
) -> list[tuple[float, float]]:
    """Spurious passbands of a half-wave resonator filter (k f0, k = 2, 3, ...) that overlap
    the interval [f_lo, f_hi], each as (start, stop) in Hz where the mapping gives |Ω| ≤ 1.

    Common practice, no source: the resonators are again half-wave multiples at k f0; the
    inverters' own frequency dependence shifts and widens these bands in the real circuit.
    """
    out: list[tuple[float, float]] = []
    half = math.atan(fbw * math.pi / 2.0) / math.pi  # |Ω| ≤ 1 for |f/f0 - k| ≤ half
    k = 2
    while (k - half) * f0 <= f_hi:
        lo, hi = (k - half) * f0, (k + half) * f0
        if hi >= f_lo:
            out.append((max(lo, f_lo), min(hi, f_hi)))
        k += 1
    return out
