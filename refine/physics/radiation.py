"""Radiation from microstrip open ends and gaps, as conductances for the circuit.

**Source.** The space-wave radiation Q of an open-circuited half-wave microstrip resonator,
Belohoubek & Denlinger, "Loss considerations for microstrip resonators", IEEE Trans. MTT-23(6),
522–526, 1975 (also in Gupta, Garg, Bahl & Bhartia, *Microstrip Lines and Slotlines*, 1996)
[from memory]:

    Q_r = Z0 / (480 π (h/λ0)² F(ε_eff)),
    F(ε) = (ε + 1)/ε − (ε − 1)² / (2 ε^{3/2}) · ln((√ε + 1)/(√ε − 1)).

F falls from 2 (air, ε = 1) towards 8/(3ε) for large ε. On 0.635 mm alumina at 10 GHz a 50 Ω
resonator has Q_r ≈ 190 (tests/test_radiation.py), next to Q_c ≈ 320 for its conductor loss.

**As conductances.** A half-wave open resonator has susceptance slope b = π Y0/2 at either end,
and its two ends radiate alike, so Q_r = b/(2 G) gives each open end the conductance

    G_end = π Y0 / (4 Q_r) = 120 π² (h/λ0)² F(ε_eff) / Z0².

An open end is an open circuit whose admittance jB is represented by the length extension Δl;
its radiation adds G. refine carries it in the same place, as an imaginary part of the extension:
Y0 tanh(γ(Δl − j δ)) ≈ jB + G for δ = G Z0/β (first order in G/Y0, which is below 1 % here).

**Gaps (our derivation).** The two facing ends of a gap much narrower than a wavelength radiate
as one aperture driven by the voltage across the gap: their equivalent magnetic currents are
opposed, so what radiates is V1 − V2 (a gap between equal voltages is a continuous line and does
not radiate; a very wide gap is two open ends). refine puts one conductance G_end (at the
geometric mean of the two sides' values) across the gap, in parallel with its series
capacitance. For an isolated resonator between two weak gaps this gives back Q_r above. Surface
waves are not included.

**Range.** Thin substrates, h/λ0 ≲ 0.05 (the Q formula is the leading term in h/λ0); above that
radiation grows faster and surface waves join in: warned.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import validity
from refine.physics.constants import C0

H_LAMBDA_MAX = 0.05  # h/λ0 up to which the leading-order radiation Q is used without warning


def f_factor(eps_eff: ArrayLike) -> NDArray:
    """Belohoubek & Denlinger's F(ε_eff) (2 in air; real, positive and falling for ε > 1)."""
    e = np.asarray(eps_eff, float)
    r = np.sqrt(e)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_term = np.where(
            e > 1.0, (e - 1.0) ** 2 / (2.0 * e * r) * np.log((r + 1.0) / (r - 1.0)), 0.0
        )
    return (e + 1.0) / e - log_term


def radiation_q(z0: ArrayLike, eps_eff: ArrayLike, height: float, f: ArrayLike) -> NDArray:
    """Q_r of an open-circuited half-wave resonator of impedance ``z0`` (Ω)."""
    h_l = height * np.asarray(f, float) / C0
    return np.asarray(z0, float) / (480.0 * np.pi * h_l**2 * f_factor(eps_eff))


def end_conductance(z0: ArrayLike, eps_eff: ArrayLike, height: float, f: ArrayLike) -> NDArray:
    """Radiation conductance (S) of one open end of a strip of impedance ``z0`` at ``f``."""
    h_l = height * np.asarray(f, float) / C0
    validity.check("open-end radiation", "h/lambda0", h_l, None, H_LAMBDA_MAX)
    z = np.asarray(z0, float)
    return 120.0 * np.pi**2 * h_l**2 * f_factor(eps_eff) / (z * z)


def from_line(
    gamma: ArrayLike, z_c: ArrayLike, height: float, f: ArrayLike
) -> tuple[NDArray, NDArray]:
    """(G_end in S, the extension's imaginary part δ = G Z0/β in m) of a line given by its
    propagation constant and impedance at ``f`` (ε_eff from β)."""
    f = np.asarray(f, float)
    beta = np.imag(np.asarray(gamma))
    z0 = np.real(np.asarray(z_c))
    eps_eff = (beta * C0 / (2.0 * np.pi * f)) ** 2
    g = end_conductance(z0, eps_eff, height, f)
    return g, g * z0 / beta
