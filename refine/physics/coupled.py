"""Coupled strip lines: even- and odd-mode effective permittivity, impedance and loss.

Two equal strips of width W, edge-to-edge spacing s. The even mode drives both strips at the same
voltage, the odd mode at opposite voltages; each mode is a TEM (stripline) or quasi-TEM
(microstrip) line of its own, with impedance Z_e or Z_o (per strip, to ground) and its own
propagation constant.

Symbols: u = W/h, g = s/h, fn = f·h in GHz·mm.

Models
------
* **Microstrip, static.** Kirschning & Jansen, "Accurate wide-range design equations for the
  frequency-dependent characteristic of parallel coupled microstrip lines", IEEE Trans. MTT-32(1),
  83-90, 1984, with the corrections of MTT-33(3), 288, 1985 [from memory]: the even- and
  odd-mode ε_eff(0) built on Hammerstad & Jensen's single-strip ε_eff (their 1980 forms), and the
  even- and odd-mode impedances from the single strip's Z_L(0) through the coefficients
  Q1..Q10. Checked against refine's two-dimensional boundary-element solve of the same
  cross-section (:mod:`refine.fullwave.cross_section`, ``tests/test_coupled.py``), and tending to
  the single strip as s grows.
* **Microstrip, dispersion of ε_eff**: the same paper's even- and odd-mode forms (P1..P15)
  [from memory].
* **Microstrip, dispersion of the impedances**: *not* Kirschning & Jansen's (their coefficients
  Q11..Q29 could not be confirmed from a source here). Each mode's static impedance is scaled
  by the single strip's own dispersion, Z_mode(f) = Z_mode(0)·Z_L(f)/Z_L(0) with Z_L(f) of
  Jansen & Kirschning 1983 (:func:`refine.physics.microstrip.jansen_kirschning_z0`): exact in
  the limit of wide spacing, an approximation for tight coupling (where the even mode
  disperses like a wider strip). Measured against the alternative of Bianco et al.'s form
  Z(0)·sqrt(ε_eff(0)/ε_eff(f))·(ε_eff(f) − 1)/(ε_eff(0) − 1) applied per mode (Alta Frequenza
  1974, from memory): that form puts widely spaced 0.6 mm strips on 0.635 mm alumina 2.7 %
  above Jansen & Kirschning's single strip at 10 GHz, where the two should agree.
* **Loss, per mode**: dielectric α_d = k0 ε_r (ε_eff − 1) tan δ / (2 sqrt(ε_eff) (ε_r − 1))
  with the mode's ε_eff (Pozar, *Microwave Engineering*, 4th ed., eq. 3.198); conductor
  α_c = R_s K_i K_r / (Z_mode W), the single strip's Hammerstad-Jensen form with the mode's
  impedance (an approximation: it gives the odd mode, whose current crowds at the inner edges,
  the larger loss through its lower impedance, not through its current distribution).
* **Stripline**: Cohn, "Shielded coupled-strip transmission line", IRE Trans. MTT-3(5), 29-38,
  1955, exact for zero-thickness strips centred between the ground planes (spacing b):
  k_e = tanh(πW/2b)·tanh(π(W+s)/2b), k_o = tanh(πW/2b)·coth(π(W+s)/2b),
  Z_e,o = (η0/4 sqrt(ε_r))·K(k')/K(k) (Pozar, 4th ed., gives the same in its coupled-line
  chapter; equation numbers not at hand). Both modes travel at c/sqrt(ε_r). The problem's metal thickness is not applied to
  coupled strips (neither medium): a stated limitation.

Ranges (warned, :mod:`refine.validity`): microstrip 0.1 ≤ u ≤ 10, 0.1 ≤ g ≤ 10, 1 ≤ ε_r ≤ 18,
fn ≤ 25 GHz·mm (Kirschning & Jansen's stated range); stripline 0.05 ≤ W/b ≤ 10, s/b ≥ 0.01.

Widths, spacings and frequencies broadcast: a batch of sections is ``(..., 1)`` against ``(nf,)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine import validity
from refine.physics.constants import C0, ETA0
from refine.physics.microstrip import (
    Microstrip,
    hammerstad_jensen_eps_eff,
    hammerstad_jensen_z01,
    hammerstad_roughness_factor,
    jansen_kirschning_z0,
    kirschning_jansen_eps_eff,
    surface_resistance,
)
from refine.physics.stripline import Stripline
from refine.physics.substrate import Substrate

#: Kirschning & Jansen's stated range for coupled microstrip
KJ_COUPLED_RANGE = {"W/h": (0.1, 10.0), "s/h": (0.1, 10.0), "eps_r": (1.0, 18.0)}
KJ_COUPLED_FN_MAX = 25.0  # GHz·mm


@dataclass(frozen=True)
class Modes:
    """Even- and odd-mode impedance (ohm) and effective permittivity, broadcast shapes."""

    z_even: NDArray
    z_odd: NDArray
    eps_even: NDArray
    eps_odd: NDArray


def kirschning_jansen_static(u: ArrayLike, g: ArrayLike, eps_r: ArrayLike) -> Modes:
    """Quasi-static even/odd impedances and ε_eff of zero-thickness coupled microstrip
    (Kirschning & Jansen 1984, static part; from memory, see the module docstring)."""
    u = np.asarray(u, float)
    g = np.asarray(g, float)
    er = np.asarray(eps_r, float)
    # the single strip (Hammerstad & Jensen 1980)
    e_single = hammerstad_jensen_eps_eff(u, er)
    z_single = hammerstad_jensen_z01(u) / np.sqrt(e_single)
    # even-mode ε_eff: the single-strip form at the effective width v
    vv = u * (20.0 + g * g) / (10.0 + g * g) + g * np.exp(-g)
    a_e = (
        1.0
        + np.log((vv**4 + (vv / 52.0) ** 2) / (vv**4 + 0.432)) / 49.0
        + np.log(1.0 + (vv / 18.1) ** 3) / 18.7
    )
    b_e = 0.564 * ((er - 0.9) / (er + 3.0)) ** 0.053
    eps_even = 0.5 * (er + 1.0) + 0.5 * (er - 1.0) * (1.0 + 10.0 / vv) ** (-a_e * b_e)
    # odd-mode ε_eff
    a_o = 0.7287 * (e_single - 0.5 * (er + 1.0)) * (1.0 - np.exp(-0.179 * u))
    b_o = 0.747 * er / (0.15 + er)
    c_o = b_o - (b_o - 0.207) * np.exp(-0.414 * u)
    d_o = 0.593 + 0.694 * np.exp(-0.562 * u)
    eps_odd = (0.5 * (er + 1.0) + a_o - e_single) * np.exp(-c_o * g**d_o) + e_single
    # impedances
    q1 = 0.8695 * u**0.194
    q2 = 1.0 + 0.7519 * g + 0.189 * g**2.31
    q3 = (
        0.1975 + (16.6 + (8.4 / g) ** 6) ** -0.387 + np.log(g**10 / (1.0 + (g / 3.4) ** 10)) / 241.0
    )
    q4 = 2.0 * q1 / q2 / (np.exp(-g) * u**q3 + (2.0 - np.exp(-g)) * u**-q3)
    q5 = 1.794 + 1.14 * np.log(1.0 + 0.638 / (g + 0.517 * g**2.43))
    q6 = (
        0.2305
        + np.log(g**10 / (1.0 + (g / 5.8) ** 10)) / 281.3
        + np.log(1.0 + 0.598 * g**1.154) / 5.1
    )
    q7 = (10.0 + 190.0 * g * g) / (1.0 + 82.3 * g**3)
    q8 = np.exp(-6.5 - 0.95 * np.log(g) - (g / 0.15) ** 5)
    q9 = np.log(q7) * (q8 + 1.0 / 16.5)
    q10 = q4 - q5 / q2 * np.exp(q6 * np.log(u) / u**q9)
    root = np.sqrt(e_single) * z_single / ETA0
    z_even = z_single * np.sqrt(e_single / eps_even) / (1.0 - root * q4)
    z_odd = z_single * np.sqrt(e_single / eps_odd) / (1.0 - root * q10)
    return Modes(z_even, z_odd, eps_even, eps_odd)


def kirschning_jansen_dispersion(
    u: ArrayLike,
    g: ArrayLike,
    eps_r: ArrayLike,
    eps_even0: ArrayLike,
    eps_odd0: ArrayLike,
    fn: ArrayLike,
) -> tuple[NDArray, NDArray]:
    """Even- and odd-mode ε_eff(f) of coupled microstrip (Kirschning & Jansen 1984; from
    memory), ``fn`` = f·h in GHz·mm."""
    u = np.asarray(u, float)
    g = np.asarray(g, float)
    er = np.asarray(eps_r, float)
    fn = np.asarray(fn, float)
    p1 = 0.27488 + (0.6315 + 0.525 / (1.0 + 0.0157 * fn) ** 20) * u - 0.065683 * np.exp(-8.7513 * u)
    p2 = 0.33622 * (1.0 - np.exp(-0.03442 * er))
    p3 = 0.0363 * np.exp(-4.6 * u) * (1.0 - np.exp(-((fn / 38.7) ** 4.97)))
    p4 = 1.0 + 2.751 * (1.0 - np.exp(-((er / 15.916) ** 8)))
    p5 = 0.334 * np.exp(-3.3 * (er / 15.0) ** 3) + 0.746
    p6 = p5 * np.exp(-((fn / 18.0) ** 0.368))
    p7 = 1.0 + 4.069 * p6 * g**0.479 * np.exp(-1.347 * g**0.595 - 0.17 * g**2.5)
    f_even = p1 * p2 * ((p3 * p4 + 0.1844 * p7) * fn) ** 1.5763
    p8 = 0.7168 * (1.0 + 1.076 / (1.0 + 0.0576 * (er - 1.0)))
    p9 = p8 - 0.7913 * (1.0 - np.exp(-((fn / 20.0) ** 1.424))) * np.arctan(
        2.481 * (er / 8.0) ** 0.946
    )
    p10 = 0.242 * (er - 1.0) ** 0.55
    p11 = 0.6366 * (np.exp(-0.3401 * fn) - 1.0) * np.arctan(1.263 * (u / 3.0) ** 1.629)
    p12 = p9 + (1.0 - p9) / (1.0 + 1.183 * u**1.376)
    p13 = 1.695 * p10 / (0.414 + 1.605 * p10)
    p14 = 0.8928 + 0.1072 * (1.0 - np.exp(-0.42 * (fn / 20.0) ** 3.215))
    p15 = np.abs(1.0 - 0.8928 * (1.0 + p11) * p12 * np.exp(-p13 * g**1.092) / p14)
    f_odd = p1 * p2 * ((p3 * p4 + 0.1844) * fn * p15) ** 1.5763
    eps_even = er - (er - np.asarray(eps_even0)) / (1.0 + f_even)
    eps_odd = er - (er - np.asarray(eps_odd0)) / (1.0 + f_odd)
    return eps_even, eps_odd


def cohn_coupled_stripline(w_b: ArrayLike, s_b: ArrayLike, eps_r: ArrayLike) -> Modes:
    """Exact even/odd impedances of zero-thickness coupled stripline (Cohn 1955)."""
    from scipy.special import ellipk  # loaded for stripline only (start-up time)

    a = np.pi * np.asarray(w_b, float) / 2.0
    b = np.pi * (np.asarray(w_b, float) + np.asarray(s_b, float)) / 2.0
    k_e = np.tanh(a) * np.tanh(b)
    k_o = np.tanh(a) / np.tanh(b)
    er = np.asarray(eps_r, float)

    def z(k: NDArray) -> NDArray:  # η0/(4 sqrt εr) K(k')/K(k), parameters m = k², 1 − k²
        return ETA0 / (4.0 * np.sqrt(er)) * ellipk(1.0 - k * k) / ellipk(k * k)

    eps = np.broadcast_to(er, np.broadcast_shapes(np.shape(k_e), er.shape)).astype(float)
    return Modes(z(k_e), z(k_o), eps, eps.copy())


def _mode_losses(
    substrate: Substrate, width: NDArray, f: NDArray, z_mode: NDArray, eps_mode: NDArray
) -> NDArray:
    """α_c + α_d (Np/m) of one mode (see the module docstring)."""
    s = substrate
    alpha = np.zeros(np.broadcast_shapes(z_mode.shape, f.shape))
    if s.conductivity is not None:
        ki = np.exp(-1.2 * (z_mode / ETA0) ** 0.7)
        kr = hammerstad_roughness_factor(f, s.conductivity, s.roughness)
        alpha = (
            alpha
            + surface_resistance(f, s.conductivity, s.metal_thickness) / (z_mode * width) * ki * kr
        )
    if s.eps_r > 1.0 and s.loss_tangent > 0.0:
        k0 = 2.0 * np.pi * f / C0
        alpha = alpha + k0 * s.eps_r * (eps_mode - 1.0) * s.loss_tangent / (
            2.0 * np.sqrt(eps_mode) * (s.eps_r - 1.0)
        )
    return alpha


@dataclass(frozen=True)
class CoupledMicrostrip:
    """Two equal coupled microstrips on ``substrate`` (zero-thickness model, see the module);
    ``loss`` switches conductor and dielectric loss on or off."""

    substrate: Substrate
    loss: bool = True

    def _ug(self, width: ArrayLike, spacing: ArrayLike) -> tuple[NDArray, NDArray]:
        h = self.substrate.height
        u = v.positive_array("width", width) / h
        g = v.positive_array("spacing", spacing) / h
        for name, x in (("W/h", u), ("s/h", g), ("eps_r", self.substrate.eps_r)):
            lo, hi = KJ_COUPLED_RANGE[name]
            validity.check("Kirschning-Jansen coupled", name, x, lo, hi, stacklevel=5)
        return u, g

    def static(self, width: ArrayLike, spacing: ArrayLike) -> Modes:
        """Quasi-static even/odd impedances and ε_eff."""
        u, g = self._ug(width, spacing)
        return kirschning_jansen_static(u, g, self.substrate.eps_r)

    def modes(self, width: ArrayLike, spacing: ArrayLike, f: ArrayLike) -> Modes:
        """Even/odd impedances and ε_eff at ``f`` (Hz), lossless."""
        f = v.frequencies("f", f)
        u, g = self._ug(width, spacing)
        s = self.substrate
        fn = f * s.height * 1e-6
        validity.check(
            "Kirschning-Jansen coupled", "f*h (GHz*mm)", fn, None, KJ_COUPLED_FN_MAX, stacklevel=4
        )
        m0 = kirschning_jansen_static(u, g, s.eps_r)
        ee, eo = kirschning_jansen_dispersion(u, g, s.eps_r, m0.eps_even, m0.eps_odd, fn)
        # the single strip's impedance dispersion (zero thickness, like the coupled model)
        z_l0 = hammerstad_jensen_z01(u) / np.sqrt(hammerstad_jensen_eps_eff(u, s.eps_r))
        e_l0 = hammerstad_jensen_eps_eff(u, s.eps_r)
        e_lf = kirschning_jansen_eps_eff(u, s.eps_r, e_l0, fn)
        ratio = jansen_kirschning_z0(u, s.eps_r, e_l0, e_lf, z_l0, fn) / z_l0
        return Modes(m0.z_even * ratio, m0.z_odd * ratio, ee, eo)

    def mode_properties(
        self, width: ArrayLike, spacing: ArrayLike, f: ArrayLike
    ) -> tuple[NDArray, NDArray, NDArray, NDArray]:
        """(γ_even, γ_odd, z_even, z_odd) at ``f``: γ = α + j 2π f sqrt(ε_eff)/c per mode."""
        f = v.frequencies("f", f)
        m = self.modes(width, spacing, f)
        w = np.asarray(width, float)
        out = []
        for z, e in ((m.z_even, m.eps_even), (m.z_odd, m.eps_odd)):
            beta = 2.0 * np.pi * f * np.sqrt(e) / C0
            alpha = _mode_losses(self.substrate, w, f, z, e) if self.loss else 0.0
            out.append(alpha + 1j * beta)
        shape = out[0].shape
        return (
            out[0],
            out[1],
            np.broadcast_to(m.z_even, shape).astype(complex),
            np.broadcast_to(m.z_odd, shape).astype(complex),
        )


@dataclass(frozen=True)
class CoupledStripline:
    """Two equal coupled strips centred between ground planes ``substrate.height`` = b apart
    (Cohn 1955, zero thickness); ``loss`` switches dielectric and conductor loss."""

    substrate: Substrate
    loss: bool = True

    def modes(self, width: ArrayLike, spacing: ArrayLike, f: ArrayLike | None = None) -> Modes:
        """Even/odd impedances and ε_eff (TEM: independent of frequency)."""
        b = self.substrate.height
        wb = v.positive_array("width", width) / b
        sb = v.positive_array("spacing", spacing) / b
        validity.check("Cohn coupled stripline", "W/b", wb, 0.05, 10.0, stacklevel=4)
        validity.check("Cohn coupled stripline", "s/b", sb, 0.01, None, stacklevel=4)
        return cohn_coupled_stripline(wb, sb, self.substrate.eps_r)

    def mode_properties(
        self, width: ArrayLike, spacing: ArrayLike, f: ArrayLike
    ) -> tuple[NDArray, NDArray, NDArray, NDArray]:
        """(γ_even, γ_odd, z_even, z_odd) at ``f``. Each mode's conductor loss is the single
        strip's (:class:`~refine.physics.stripline.Stripline`, Pozar's form) times Z_strip/Z_mode,
        the scaling of the microstrip approximation (see the module); dielectric loss is the
        TEM line's k tan δ / 2 for both modes."""
        f = v.frequencies("f", f)
        m = self.modes(width, spacing)
        beta = 2.0 * np.pi * f * math.sqrt(self.substrate.eps_r) / C0
        single = Stripline(self.substrate, self.loss)
        alpha_c: ArrayLike = 0.0
        alpha_d: ArrayLike = 0.0
        z_strip: ArrayLike = 1.0
        if self.loss:
            alpha_c, alpha_d = single.attenuation(width, f)
            z_strip = single.z0(width)
        out = []
        for z in (m.z_even, m.z_odd):
            alpha = np.asarray(alpha_d) + np.asarray(alpha_c) * np.asarray(z_strip) / z
            out.append(alpha + 1j * beta)
        shape = np.broadcast_shapes(np.shape(out[0]), np.shape(out[1]), np.shape(m.z_even))
        return (
            np.broadcast_to(out[0], shape).astype(complex),
            np.broadcast_to(out[1], shape).astype(complex),
            np.broadcast_to(m.z_even, shape).astype(complex),
            np.broadcast_to(m.z_odd, shape).astype(complex),
        )


def coupled_medium(medium: object) -> CoupledMicrostrip | CoupledStripline:
    """The coupled-line model of a strip medium (the same substrate and loss switch)."""
    if isinstance(medium, Microstrip):
        return CoupledMicrostrip(medium.substrate, medium.loss)
    if isinstance(medium, Stripline):
        return CoupledStripline(medium.substrate, medium.loss)
    raise TypeError(f"no coupled-line model for {type(medium).__name__}")


__all__ = [
    "KJ_COUPLED_FN_MAX",
    "KJ_COUPLED_RANGE",
    "CoupledMicrostrip",
    "CoupledStripline",
    "Modes",
    "cohn_coupled_stripline",
    "coupled_medium",
    "kirschning_jansen_dispersion",
    "kirschning_jansen_static",
]
