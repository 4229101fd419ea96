"""Stripline (strip centred between two ground planes, spacing b): a TEM line.

Models
------
* Cohn, "Characteristic impedance of the shielded-strip transmission line", IRE Trans. MTT-2(2),
  52–57, 1954: exact Z0 of a zero-thickness strip,
  Z0 = η0/(4 sqrt(eps_r)) · K(k)/K(k'), k = sech(πW/2b), k' = tanh(πW/2b). Exact for t = 0.
* Finite thickness: Wheeler, "Transmission-line properties of a strip line between parallel
  planes", IEEE Trans. MTT-26(11), 866–876, 1978 (formula from memory, cross-checked against
  Cohn's exact form within 0.4 % at t = 0 and Cohn's 1955 thick-strip formula within 0.5 % for
  t/b ≤ 0.05). refine applies Wheeler's thickness effect as a ratio on Cohn's exact value,
  Z0(W, t) = Z0_Cohn(W) · Z_W(W, t)/Z_W(W, 0), so t = 0 stays exact. Stated range t/b ≤ 0.1,
  0.05 ≤ W/b ≤ 10.
* Loss: dielectric α_d = k tan δ / 2 (TEM); conductor α_c from Pozar, *Microwave Engineering*,
  4th ed., eq. 3.181 (sqrt(eps_r) Z0 < 120) and 3.182 (otherwise), which need t > 0.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine import validity
from refine.physics.constants import C0
from refine.physics.microstrip import ETA0, solve_log_width, surface_resistance
from refine.physics.substrate import Substrate


def cohn_z0(w_b: ArrayLike, eps_r: ArrayLike) -> NDArray:
    """Exact Z0 (ohm) of a zero-thickness centred strip, W/b = ``w_b`` (Cohn 1954).

    scipy's ``ellipk`` takes the parameter m = k². Near m = 1 the parameter itself has lost
    the digits of 1 − m, so there each K is evaluated as ``ellipkm1`` of the complementary
    parameter (1 − k² = k'² computed as tanh², 1 − k'² = k² as sech², each to full relative
    precision). That keeps the ratio exact at both ends of the width range: a narrow strip
    (k → 1, W/b ≲ 0.006) and a wide one (k' → 1, W/b ≳ 3.4, where the direct form loses every
    digit by W/b ≈ 12). In between, the direct form is used (both are the same function).
    """
    from scipy.special import ellipk, ellipkm1  # loaded for stripline only (start-up time)

    x = np.pi * np.asarray(w_b, float) / 2.0
    sech2 = 1.0 / np.cosh(x) ** 2  # k²
    tanh2 = np.tanh(x) ** 2  # k'²
    near_one = 1.0 - 1e-4
    k_k = np.where(sech2 < near_one, ellipk(sech2), ellipkm1(tanh2))
    k_kp = np.where(tanh2 < near_one, ellipk(tanh2), ellipkm1(sech2))
    return ETA0 / (4.0 * np.sqrt(np.asarray(eps_r, float))) * k_k / k_kp


def wheeler_z0(w_b: ArrayLike, t_b: ArrayLike, eps_r: ArrayLike) -> NDArray:
    """Wheeler 1978 Z0 (ohm) of a strip of thickness t in stripline (from memory, see module)."""
    wb = np.asarray(w_b, float)
    x = np.asarray(t_b, float)
    one_minus = 1.0 - x
    w_bt = wb / one_minus
    safe_x = np.where(x > 0, x, 1.0)
    m = 2.0 / (1.0 + (2.0 / 3.0) * safe_x / one_minus)
    dw = np.where(
        x > 0,
        safe_x
        / np.pi
        * (
            1.0
            - 0.5
            * np.log((safe_x / (2.0 - safe_x)) ** 2 + (0.0796 * safe_x / (wb + 1.1 * safe_x)) ** m)
        ),
        0.0,
    )
    wp = w_bt + dw
    a = 4.0 / (np.pi * wp)
    return (
        30.0
        / np.sqrt(np.asarray(eps_r, float))
        * np.log(1.0 + a * (2.0 * a + np.sqrt((2.0 * a) ** 2 + 6.27)))
    )


def pozar_stripline_conductor_loss(
    rs: ArrayLike, eps_r: float, z0: ArrayLike, w: ArrayLike, b: float, t: float
) -> NDArray:
    """Conductor attenuation (Np/m) of stripline, Pozar 4th ed. eqs. 3.181–3.182 (t > 0).

    sqrt(eps_r) Z0 < 120: α_c = 2.7e-3 Rs eps_r Z0 A / (30π (b - t)),
    A = 1 + 2W/(b - t) + (1/π)(b + t)/(b - t) ln((2b - t)/t);
    otherwise α_c = 0.16 Rs B / (Z0 b),
    B = 1 + b/(0.5W + 0.7t) (0.5 + 0.414 t/W + (1/2π) ln(4πW/t)).
    """
    rs = np.asarray(rs, float)
    z0 = np.asarray(z0, float)
    w = np.asarray(w, float)
    a_fac = 1.0 + 2.0 * w / (b - t) + (b + t) / (np.pi * (b - t)) * np.log((2.0 * b - t) / t)
    low = 2.7e-3 * rs * eps_r * z0 * a_fac / (30.0 * np.pi * (b - t))
    b_fac = 1.0 + b / (0.5 * w + 0.7 * t) * (
        0.5 + 0.414 * t / w + np.log(4.0 * np.pi * w / t) / (2.0 * np.pi)
    )
    high = 0.16 * rs / (z0 * b) * b_fac
    return np.where(np.sqrt(eps_r) * z0 < 120.0, low, high)


@dataclass(frozen=True)
class Stripline:
    """Centred stripline; ``substrate.height`` is the ground-plane spacing b."""

    substrate: Substrate
    loss: bool = True

    def _wb(self, width: ArrayLike) -> NDArray:
        wb = v.positive_array("width", width) / self.substrate.height
        validity.check("Cohn stripline", "W/b", wb, 0.05, 10.0, stacklevel=4)
        validity.check(
            "Wheeler stripline",
            "t/b",
            self.substrate.metal_thickness / self.substrate.height,
            0.0,
            0.1,
            stacklevel=4,
        )
        return wb

    def z0(self, width: ArrayLike) -> NDArray:
        """Characteristic impedance (ohm), real and frequency independent (TEM)."""
        s = self.substrate
        wb = self._wb(width)
        z = cohn_z0(wb, s.eps_r)
        if s.metal_thickness > 0:
            tb = s.metal_thickness / s.height
            z = z * wheeler_z0(wb, tb, s.eps_r) / wheeler_z0(wb, 0.0, s.eps_r)
        return z

    def attenuation(self, width: ArrayLike, f: ArrayLike) -> tuple[NDArray, NDArray]:
        """(α_c, α_d) in Np/m (Pozar 4th ed. eqs. 3.181–3.182 and α_d = k tan δ/2)."""
        s = self.substrate
        f = v.frequencies("f", f)
        z0 = self.z0(width)
        shape = np.broadcast_shapes(np.shape(z0), f.shape)
        if not self.loss:
            return np.zeros(shape), np.zeros(shape)
        k = 2.0 * np.pi * f * np.sqrt(s.eps_r) / C0
        alpha_d = np.broadcast_to(k * s.loss_tangent / 2.0, shape)
        b, t = s.height, s.metal_thickness
        w = np.asarray(width, float)
        if s.conductivity is None or t <= 0:
            return np.zeros(shape), alpha_d
        rs = surface_resistance(f, s.conductivity, t)
        alpha_c = pozar_stripline_conductor_loss(rs, s.eps_r, z0, w, b, t)
        return np.broadcast_to(alpha_c, shape), alpha_d

    def line_properties(self, width: ArrayLike, f: ArrayLike) -> tuple[NDArray, NDArray]:
        """(gamma, z_c): gamma = α + j 2π f sqrt(eps_r)/c, z_c = Z0 (TEM, no dispersion)."""
        f = v.frequencies("f", f)
        z0 = self.z0(width)
        beta = 2.0 * np.pi * f * np.sqrt(self.substrate.eps_r) / C0
        ac, ad = self.attenuation(width, f)
        gamma = (ac + ad) + 1j * beta
        return gamma, np.broadcast_to(z0, gamma.shape).astype(complex)

    def width_for_z0(self, z0: float, f: float | None = None) -> float:
        """Strip width (m) whose Z0 is ``z0`` (ohm); ``f`` is accepted for interface symmetry."""
        z0 = v.positive("z0", z0)
        b = self.substrate.height

        def z_of(lnw: float) -> float:
            return float(self.z0(b * math.exp(lnw)))

        w = b * solve_log_width(z_of, z0, 0.05, 10.0, "this stripline", "W/b")
        self.z0(w)  # warn for the answer only
        return w

    def dispersive(self, width: ArrayLike, f: ArrayLike) -> tuple[NDArray, NDArray]:
        """(Z0, eps_eff) at ``f``: TEM, so eps_eff = eps_r at every frequency."""
        f = v.frequencies("f", f)
        z0 = self.z0(width)
        shape = np.broadcast_shapes(np.shape(z0), f.shape)
        return np.broadcast_to(z0, shape), np.broadcast_to(
            np.asarray(self.substrate.eps_r, float), shape
        )

    def guided_wavelength(self, width: ArrayLike, f: ArrayLike) -> NDArray:
        f = v.frequencies("f", f)
        return np.broadcast_to(
            C0 / (f * np.sqrt(self.substrate.eps_r)),
            np.broadcast_shapes(np.shape(width), f.shape),
        )

    def electrical_length(self, width: ArrayLike, length: ArrayLike, f0: float) -> NDArray:
        f0 = v.positive("f0", f0)
        return 2.0 * np.pi * f0 * np.sqrt(self.substrate.eps_r) / C0 * np.asarray(length, float)
