"""Microstrip line: quasi-static impedance and permittivity, dispersion, loss.

Symbols
-------
=============  ===========================================================
u              W/h, strip width over substrate height
t_h            t/h, strip thickness over substrate height
eps_r          substrate relative permittivity
eps_eff        effective permittivity (quasi-static ``eps_eff0``, dispersive ``eps_eff_f``)
z01            impedance of the same strip in air (ohm)
fn             f·h in GHz·mm (the normalised frequency of Kirschning & Jansen)
=============  ===========================================================

Models
------
* Hammerstad & Jensen, "Accurate models for microstrip computer-aided design", IEEE MTT-S
  Digest 1980, 407–409: quasi-static Z0 and eps_eff with strip-thickness correction.
  Claimed accuracy 0.01 % (Z01, u ≤ 1), 0.2 % (eps_eff, 0.01 ≤ u ≤ 100, eps_r ≤ 128).
* Kirschning & Jansen, "Accurate model for effective dielectric constant of microstrip with
  validity up to millimetre-wave frequencies", Electronics Letters 18(6), 272–273, 1982:
  eps_eff(f). Valid 0.1 ≤ u ≤ 100, 1 ≤ eps_r ≤ 20, h/λ0 ≤ 0.13 (fn ≤ 39 GHz·mm).
* Jansen & Kirschning, "Arguments and an accurate model for the power-current formulation of
  microstrip characteristic impedance", AEÜ 37, 108–112, 1983: Z0(f). Valid about
  0.1 ≤ u ≤ 10, 1 ≤ eps_r ≤ 18, fn ≤ 25 GHz·mm.
* Conductor loss: α_c = Rs/(Z0 W)·Ki·Kr with the current-distribution factor
  Ki = exp(-1.2 (Z0/η0)^0.7) and Hammerstad's roughness factor Kr = 1 + (2/π) atan(1.4 (Δ/δ)²)
  (Hammerstad & Jensen 1980; the same form as scikit-rf's microstrip model).
* Dielectric loss: α_d = k0 eps_r (eps_eff - 1) tan δ / (2 sqrt(eps_eff) (eps_r - 1))
  (Pozar, *Microwave Engineering*, 4th ed., eq. 3.198).

Like scikit-rf's model, the dispersion formulas take the thickness-corrected width u_r, and the
loss formulas take the dispersive Z0(f) and eps_eff(f). All functions are elementwise over
broadcastable arrays.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine import validity
from refine._roots import bracketed_root
from refine.physics.constants import C0, ETA0, MU0
from refine.physics.substrate import Substrate


def hammerstad_jensen_z01(u: ArrayLike) -> NDArray:
    """Impedance (ohm) of a zero-thickness strip over ground in air (HJ 1980 eq. 1)."""
    u = np.asarray(u, dtype=float)
    fu = 6.0 + (2.0 * np.pi - 6.0) * np.exp(-((30.666 / u) ** 0.7528))
    return ETA0 / (2.0 * np.pi) * np.log(fu / u + np.sqrt(1.0 + (2.0 / u) ** 2))


def hammerstad_jensen_eps_eff(u: ArrayLike, eps_r: ArrayLike) -> NDArray:
    """Quasi-static effective permittivity of a zero-thickness strip (HJ 1980 eqs. 3–5)."""
    u = np.asarray(u, dtype=float)
    eps_r = np.asarray(eps_r, dtype=float)
    a = (
        1.0
        + np.log((u**4 + (u / 52.0) ** 2) / (u**4 + 0.432)) / 49.0
        + np.log(1.0 + (u / 18.1) ** 3) / 18.7
    )
    b = 0.564 * ((eps_r - 0.9) / (eps_r + 3.0)) ** 0.053
    return (eps_r + 1.0) / 2.0 + (eps_r - 1.0) / 2.0 * (1.0 + 10.0 / u) ** (-a * b)


def hammerstad_jensen_thickness(
    u: ArrayLike, t_h: ArrayLike, eps_r: ArrayLike
) -> tuple[NDArray, NDArray]:
    """Thickness-corrected widths (u1, ur) of HJ 1980 eqs. 6–7 (air and dielectric-loaded).

    Δu1 = (t/π) ln(1 + 4e/(t coth²(sqrt(6.517 u)))), Δur = ½ (1 + sech(sqrt(eps_r - 1))) Δu1,
    with t normalised by h. For t = 0 both equal u.
    """
    u = np.asarray(u, dtype=float)
    t = np.asarray(t_h, dtype=float)
    safe_t = np.where(t > 0, t, 1.0)
    du1 = np.where(
        t > 0,
        safe_t / np.pi * np.log1p(4.0 * math.e * np.tanh(np.sqrt(6.517 * u)) ** 2 / safe_t),
        0.0,
    )
    dur = 0.5 * (1.0 + 1.0 / np.cosh(np.sqrt(np.asarray(eps_r, float) - 1.0))) * du1
    return u + du1, u + dur


def hammerstad_jensen(
    u: ArrayLike, eps_r: ArrayLike, t_h: ArrayLike = 0.0
) -> tuple[NDArray, NDArray, NDArray]:
    """Quasi-static (Z0, eps_eff, ur) with thickness correction (HJ 1980 eqs. 1–7).

    Z0 = Z01(ur)/sqrt(eps_eff(ur)), eps_eff = eps_eff(ur)·(Z01(u1)/Z01(ur))².
    """
    u1, ur = hammerstad_jensen_thickness(u, t_h, eps_r)
    zr = hammerstad_jensen_z01(ur)
    z1 = hammerstad_jensen_z01(u1)
    e = hammerstad_jensen_eps_eff(ur, eps_r)
    return zr / np.sqrt(e), e * (z1 / zr) ** 2, ur


def kirschning_jansen_eps_eff(
    u: ArrayLike, eps_r: ArrayLike, eps_eff0: ArrayLike, fn: ArrayLike
) -> NDArray:
    """Dispersive eps_eff(f) of Kirschning & Jansen 1982, fn = f·h in GHz·mm.

    The letter writes fn in GHz·cm (0.157 fn, fn/3.87, 10 fn); the GHz·mm form used here is
    the same model rescaled.
    """
    u = np.asarray(u, dtype=float)
    eps_r = np.asarray(eps_r, dtype=float)
    fn = np.asarray(fn, dtype=float)
    p1 = 0.27488 + (0.6315 + 0.525 / (1.0 + 0.0157 * fn) ** 20) * u - 0.065683 * np.exp(-8.7513 * u)
    p2 = 0.33622 * (1.0 - np.exp(-0.03442 * eps_r))
    p3 = 0.0363 * np.exp(-4.6 * u) * (1.0 - np.exp(-((fn / 38.7) ** 4.97)))
    p4 = 1.0 + 2.751 * (1.0 - np.exp(-((eps_r / 15.916) ** 8)))
    p = p1 * p2 * ((0.1844 + p3 * p4) * fn) ** 1.5763
    return eps_r - (eps_r - eps_eff0) / (1.0 + p)


def jansen_kirschning_z0(
    u: ArrayLike,
    eps_r: ArrayLike,
    eps_eff0: ArrayLike,
    eps_eff_f: ArrayLike,
    z0_0: ArrayLike,
    fn: ArrayLike,
) -> NDArray:
    """Dispersive Z0(f) of Jansen & Kirschning 1983 (power-current definition), fn in GHz·mm."""
    u = np.asarray(u, dtype=float)
    er = np.asarray(eps_r, dtype=float)
    fn = np.asarray(fn, dtype=float)
    r1 = np.minimum(0.03891 * er**1.4, 20.0)
    r2 = np.minimum(0.2671 * u**7, 20.0)
    r3 = 4.766 * np.exp(-3.228 * u**0.641)
    r4 = 0.016 + (0.0514 * er) ** 4.524
    r5 = (fn / 28.843) ** 12
    r6 = np.minimum(22.20 * u**1.92, 20.0)
    r7 = 1.206 - 0.3144 * np.exp(-r1) * (1.0 - np.exp(-r2))
    r8 = 1.0 + 1.275 * (1.0 - np.exp(-0.004625 * r3 * er**1.674 * (fn / 18.365) ** 2.745))
    r9 = (
        5.086
        * r4
        * r5
        / (0.3838 + 0.386 * r4)
        * np.exp(-r6)
        / (1.0 + 1.2992 * r5)
        * (er - 1.0) ** 6
        / (1.0 + 10.0 * (er - 1.0) ** 6)
    )
    r10 = 0.00044 * er**2.136 + 0.0184
    x = (fn / 19.47) ** 6
    r11 = x / (1.0 + 0.0962 * x)
    r12 = 1.0 / (1.0 + 0.00245 * u**2)
    r13 = 0.9408 * np.asarray(eps_eff_f) ** r8 - 0.9603
    r14 = (0.9408 - r9) * np.asarray(eps_eff0) ** r8 - 0.9603
    r15 = 0.707 * r10 * (fn / 12.3) ** 1.097
    r16 = 1.0 + 0.0503 * er**2 * r11 * (1.0 - np.exp(-((u / 15.0) ** 6)))
    r17 = r7 * (1.0 - 1.1241 * r12 / r16 * np.exp(-0.026 * fn**1.15656 - r15))
    return np.asarray(z0_0) * (r13 / r14) ** r17


def skin_depth(f: ArrayLike, conductivity: float) -> NDArray:
    """δ = 1/sqrt(π f μ0 σ) in metres (non-magnetic conductor). Common practice, no source."""
    return 1.0 / np.sqrt(np.pi * np.asarray(f, float) * MU0 * conductivity)


def surface_resistance(f: ArrayLike, conductivity: float, thickness: float = 0.0) -> NDArray:
    """Rs = 1/(σ δ) (ohm per square); with a strip thickness t > 0, Rs/(1 - exp(-t/δ)) so that a
    strip thinner than the skin depth tends to its DC sheet resistance 1/(σ t). Common practice,
    no source (the correction is a one-dimensional current-crowding approximation)."""
    d = skin_depth(f, conductivity)
    rs = 1.0 / (conductivity * d)
    if thickness > 0:
        rs = rs / -np.expm1(-thickness / d)
    return rs


def hammerstad_roughness_factor(f: ArrayLike, conductivity: float, rms: float) -> NDArray:
    """Kr = 1 + (2/π) atan(1.4 (Δ/δ)²), Δ the RMS roughness (Hammerstad & Jensen 1980)."""
    return 1.0 + 2.0 / np.pi * np.arctan(1.4 * (rms / skin_depth(f, conductivity)) ** 2)


def solve_log_width(z_of, z0: float, lo: float, hi: float, what: str, ratio: str) -> float:
    """The width ratio x in [lo, hi] with z_of(ln x) = z0 (impedance falls as x grows), by
    Brent's method on ln x; trial widths outside the models' ranges do not warn."""
    a, b = math.log(lo), math.log(hi)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        z_hi, z_lo = z_of(a), z_of(b)
        if not z_lo < z0 < z_hi:
            raise ValueError(
                f"z0 = {z0:g} ohm is outside the range {what} can give, "
                f"({z_lo:.4g}, {z_hi:.4g}) ohm for {lo:g} <= {ratio} <= {hi:g}"
            )
        return math.exp(bracketed_root(lambda x: z_of(x) - z0, a, b, xtol=1e-14, rtol=1e-13))


@dataclass(frozen=True)
class Microstrip:
    """Microstrip on ``substrate``; ``loss`` switches conductor and dielectric loss on or off.
    ``enclosure`` is ``"open"`` (the strips radiate at their open ends and gaps,
    :mod:`refine.physics.radiation`) or ``"shielded"`` (a lid and walls far enough away not to
    change the line properties, which is all the circuit models of a lid: no radiation).

    Strip widths are in metres and broadcast against the frequency array: a single width is a
    float, a batch of widths has shape ``(..., 1)``.
    """

    substrate: Substrate
    loss: bool = True
    enclosure: str = "open"

    @property
    def radiates(self) -> bool:
        """Whether the circuit adds radiation conductances (open enclosure, losses on)."""
        return self.loss and self.enclosure == "open"

    def _u(self, width: ArrayLike) -> NDArray:
        w = v.positive_array("width", width)
        u = w / self.substrate.height
        validity.check("Hammerstad-Jensen", "W/h", u, 0.01, 100.0, stacklevel=4)
        return u

    def quasi_static(self, width: ArrayLike) -> tuple[NDArray, NDArray]:
        """Quasi-static (Z0, eps_eff) of a strip of ``width`` (m)."""
        s = self.substrate
        z0, e0, _ = hammerstad_jensen(self._u(width), s.eps_r, s.metal_thickness / s.height)
        return z0, e0

    def dispersive(self, width: ArrayLike, f: ArrayLike) -> tuple[NDArray, NDArray]:
        """(Z0(f), eps_eff(f)) of a strip of ``width`` (m) at ``f`` (Hz), lossless."""
        s = self.substrate
        f = v.frequencies("f", f)
        u = self._u(width)
        z0, e0, ur = hammerstad_jensen(u, s.eps_r, s.metal_thickness / s.height)
        fn = f * s.height * 1e-6  # GHz·mm
        validity.check("Kirschning-Jansen", "W/h", ur, 0.1, 100.0, stacklevel=4)
        validity.check("Kirschning-Jansen", "eps_r", s.eps_r, 1.0, 20.0, stacklevel=4)
        validity.check("Kirschning-Jansen", "f*h (GHz*mm)", fn, None, 39.0, stacklevel=4)
        ef = kirschning_jansen_eps_eff(ur, s.eps_r, e0, fn)
        zf = jansen_kirschning_z0(ur, s.eps_r, e0, ef, z0, fn)
        return zf, ef

    def attenuation(self, width: ArrayLike, f: ArrayLike) -> tuple[NDArray, NDArray]:
        """(α_c, α_d) in Np/m; zeros when ``loss`` is off or the data are missing."""
        f = v.frequencies("f", f)
        zf, ef = self.dispersive(width, f)
        return self._attenuation(width, f, zf, ef)

    def _attenuation(
        self, width: ArrayLike, f: NDArray, zf: NDArray, ef: NDArray
    ) -> tuple[NDArray, NDArray]:
        s = self.substrate
        w = np.asarray(width, dtype=float)
        if not self.loss:
            zero = np.zeros(np.broadcast_shapes(zf.shape, f.shape))
            return zero, zero
        if s.conductivity is not None:
            ki = np.exp(-1.2 * (zf / ETA0) ** 0.7)
            kr = hammerstad_roughness_factor(f, s.conductivity, s.roughness)
            alpha_c = surface_resistance(f, s.conductivity, s.metal_thickness) / (zf * w) * ki * kr
        else:
            alpha_c = np.zeros_like(zf)
        k0 = 2.0 * np.pi * f / C0
        # the filling factor (eps_eff - 1)/(eps_r - 1) is 0/0 for an air substrate (eps_r = 1):
        # there is no dielectric there, and no dielectric loss
        er = np.asarray(s.eps_r, float)
        excess = np.where(er > 1.0, er - 1.0, 1.0)
        alpha_d = np.where(
            er > 1.0, k0 * er * (ef - 1.0) * s.loss_tangent / (2.0 * np.sqrt(ef) * excess), 0.0
        )
        return np.broadcast_to(alpha_c, zf.shape), np.broadcast_to(alpha_d, zf.shape)

    def line_properties(self, width: ArrayLike, f: ArrayLike) -> tuple[NDArray, NDArray]:
        """(gamma, z_c) at ``f`` (Hz): gamma = α + j 2π f sqrt(eps_eff(f))/c, z_c = Z0(f).

        z_c is the real Jansen–Kirschning impedance; for the low-loss lines of interest the
        imaginary part a loss tangent adds to it is below 0.1 % and is neglected.
        """
        f = v.frequencies("f", f)
        zf, ef = self.dispersive(width, f)
        beta = 2.0 * np.pi * f * np.sqrt(ef) / C0
        if self.loss:
            ac, ad = self._attenuation(width, f, zf, ef)
            gamma = (ac + ad) + 1j * beta
        else:
            gamma = 1j * beta
        return gamma, zf.astype(complex)

    def width_for_z0(self, z0: float, f: float | None = None) -> float:
        """Strip width (m) whose Z0 is ``z0`` (ohm): quasi-static, or dispersive at ``f`` (Hz).

        Solved by Brent's method on ln(W/h) over [0.01, 100] h (the Hammerstad–Jensen range).
        """
        z0 = v.positive("z0", z0)
        h = self.substrate.height

        def z_of(lnu: float) -> float:
            w = h * math.exp(lnu)
            if f is None:
                return float(self.quasi_static(w)[0])
            return float(self.dispersive(w, np.array([f]))[0][0])

        w = h * solve_log_width(z_of, z0, 0.01, 100.0, "this substrate", "W/h")
        self.dispersive(w, np.array([f if f is not None else 1e9]))  # warn for the answer only
        return w

    def guided_wavelength(self, width: ArrayLike, f: ArrayLike) -> NDArray:
        """λg = c/(f sqrt(eps_eff(f))) in metres."""
        f = v.frequencies("f", f)
        return C0 / (f * np.sqrt(self.dispersive(width, f)[1]))

    def electrical_length(self, width: ArrayLike, length: ArrayLike, f0: float) -> NDArray:
        """β(f0)·length in radians, at the explicit reference frequency ``f0`` (Hz)."""
        f0 = v.positive("f0", f0)
        ef = self.dispersive(width, np.array([f0]))[1][..., 0]
        return 2.0 * np.pi * f0 * np.sqrt(ef) / C0 * np.asarray(length, float)
