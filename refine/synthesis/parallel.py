"""Closed-form design of the parallel-coupled (edge-coupled) half-wave filter.

Structure (n resonators, n + 1 coupled sections, each a quarter wave at f0)::

    port ─ section 1 ─ section 2 ─ ... ─ section n+1 ─ port

Each resonator is the second line of one section and the first of the next, half a wavelength
end to end; each section is a J-inverter with a quarter-wave line either side (Cohn, "Parallel-
coupled transmission-line-resonator filters", IRE Trans. MTT-6(2), 223-231, 1958; Matthaei,
Young & Jones 1964, §10.02; Pozar, *Microwave Engineering*, 4th ed., §8.8; Hong & Lancaster 2001,
§5.2.2). With Z0 the port impedance::

    J_1 Z0       = sqrt(π FBW / (2 g0 g1))
    J_k Z0       = (π FBW / 2) / sqrt(g_k-1 g_k)            k = 2..n
    J_n+1 Z0     = sqrt(π FBW / (2 g_n g_n+1))
    Z_0e         = Z0 [1 + J Z0 + (J Z0)²]
    Z_0o         = Z0 [1 − J Z0 + (J Z0)²]

The same J values as the end-coupled filter's inverters (:func:`refine.synthesis.inverters.
inverter_j`); the design is exact only in the narrow-band limit, as there.

Realisation: each section's strip width W and spacing s are found from its (Z_0e, Z_0o) at f0
on the coupled-line model of the medium (:mod:`refine.physics.coupled`) by two-dimensional
Newton iteration in (ln W, ln s); a spacing below the shop's minimum is recorded as that
section's shortfall with the coupling the minimum spacing gives. Each section's length is a
quarter of the guided wavelength at the mean of the even- and odd-mode phase constants, less the
single strip's open-end extension (Kirschning-Jansen-Koster on microstrip), which each line of a
section has at its one open end (Hong & Lancaster 2001, §5.2.2, do the same).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine import validity
from refine._roots import largest_passing
from refine.physics.coupled import CoupledMicrostrip, CoupledStripline, coupled_medium
from refine.physics.strip import StripMedium, open_end_extensions
from refine.synthesis.inverters import inverter_j

CoupledMedium = CoupledMicrostrip | CoupledStripline


def even_odd_impedances(jz0: ArrayLike, z0: float) -> tuple[NDArray, NDArray]:
    """(Z_0e, Z_0o) of coupled sections realising inverters ``jz0`` = J·Z0 (Cohn 1958)."""
    j = np.asarray(jz0, float)
    z0 = v.positive("z0", z0)
    return z0 * (1.0 + j + j * j), z0 * (1.0 - j + j * j)


def section_inverters(g: ArrayLike, fbw: float) -> NDArray[np.float64]:
    """J·Z0 of the n + 1 coupled sections (the end-coupled filter's J/Y0, the same formulas)."""
    return inverter_j(g, fbw)


@dataclass(frozen=True)
class SectionRealisation:
    """One coupled section at f0: the impedances wanted, the width and spacing found (the
    spacing held at the shop's minimum when less is needed), and what they give."""

    index: int  # 1-based: section k couples resonator k-1 to resonator k (0 and n+1: ports)
    jz0: float
    z_even: float
    z_odd: float
    width: float
    spacing: float
    length: float
    needed_spacing: float  # the spacing the impedances need (below the minimum: a shortfall)
    jz0_reached: float  # J·Z0 the realised section gives, (Z_0e − Z_0o)/(2 Z0)

    @property
    def short(self) -> bool:
        return self.needed_spacing < self.spacing * (1 - 1e-9)


def _modes_at(cm: CoupledMedium, w: float, s: float, f0: float) -> tuple[float, float, NDArray]:
    with validity.unchecked():
        m = cm.modes(w, s, np.array([f0]))
    eps = np.array([float(np.ravel(m.eps_even)[0]), float(np.ravel(m.eps_odd)[0])])
    return float(np.ravel(m.z_even)[0]), float(np.ravel(m.z_odd)[0]), eps


def _impedances(cm: CoupledMedium, ws: NDArray, f0: float) -> NDArray:
    ze, zo, _ = _modes_at(cm, float(ws[0]), float(ws[1]), f0)
    return np.array([ze, zo])


def solve_section(
    cm: CoupledMedium, z_even: float, z_odd: float, f0: float, w0: float, s0: float
) -> tuple[float, float]:
    """Width and spacing (m) whose even/odd impedances at f0 are ``z_even``, ``z_odd``: Newton
    iteration in (ln W, ln s) with a central-difference Jacobian, from (w0, s0), steps limited
    to a factor of 2. Raises ValueError when it does not converge (the impedances are out of the
    model's reach, e.g. Z_0o above the single strip's)."""
    x = np.log([w0, s0])
    target = np.log([z_even, z_odd])
    for _ in range(60):
        w, s = np.exp(x)
        ze, zo, _ = _modes_at(cm, float(w), float(s), f0)
        r = np.log([ze, zo]) - target
        if np.max(np.abs(r)) < 1e-11:
            return float(np.exp(x[0])), float(np.exp(x[1]))
        jac = np.empty((2, 2))
        for k in range(2):
            dx = np.zeros(2)
            dx[k] = 1e-6
            up = np.log(_impedances(cm, np.exp(x + dx), f0))
            dn = np.log(_impedances(cm, np.exp(x - dx), f0))
            jac[:, k] = (up - dn) / 2e-6
        step = np.linalg.solve(jac, -r)
        x = x + np.clip(step, -math.log(2.0), math.log(2.0))
    raise ValueError(
        f"no coupled-line width and spacing give Z_0e = {z_even:.2f} ohm, Z_0o = {z_odd:.2f} ohm "
        f"at {f0 / 1e9:g} GHz on this substrate"
    )


def section_length(cm: CoupledMedium, medium: StripMedium, w: float, s: float, f0: float) -> float:
    """Quarter of the guided wavelength at the mean even/odd phase constant, less the single
    strip's open-end extension (see the module docstring)."""
    _, _, eps = _modes_at(cm, w, s, f0)
    beta = 2.0 * math.pi * f0 * float(np.mean(np.sqrt(eps))) / 299792458.0
    with validity.unchecked():
        dl = float(open_end_extensions(medium, w))
    return math.pi / 2.0 / beta - dl


def realise_sections(
    g: ArrayLike,
    fbw: float,
    f0: float,
    z0: float,
    medium: StripMedium,
    min_spacing: float = 0.0,
) -> tuple[SectionRealisation, ...]:
    """Every section of the parallel-coupled filter of prototype ``g`` at ``fbw`` around
    ``f0``: impedances, width, spacing (at least ``min_spacing``) and length."""
    cm = coupled_medium(medium)
    jz0 = section_inverters(g, fbw)
    ze, zo = even_odd_impedances(jz0, z0)
    w_single = medium.width_for_z0(z0, f0)
    h = medium.substrate.height
    out = []
    for k, (j, e, o) in enumerate(zip(jz0, ze, zo, strict=True)):
        w, s = solve_section(cm, float(e), float(o), f0, w_single, max(0.5 * h, min_spacing))
        needed = s
        if s < min_spacing:  # the shop's minimum: keep the width, give the coupling it allows
            s = min_spacing
        ze_r, zo_r, _ = _modes_at(cm, w, s, f0)
        out.append(
            SectionRealisation(
                k + 1,
                float(j),
                float(e),
                float(o),
                w,
                s,
                section_length(cm, medium, w, s, f0),
                needed,
                (ze_r - zo_r) / (2.0 * z0),
            )
        )
    return tuple(out)


def max_fbw(
    g: ArrayLike, f0: float, z0: float, medium: StripMedium, min_spacing: float, hi: float = 0.6
) -> float:
    """Largest fractional bandwidth whose every section is realisable with spacings of at least
    ``min_spacing`` (bisection on the first and last sections, the tightest: J ∝ sqrt(FBW)
    there, ∝ FBW inside)."""
    v.positive("min_spacing", min_spacing)

    def ok(fbw: float) -> bool:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", validity.ModelRangeWarning)
                secs = realise_sections(g, fbw, f0, z0, medium, 0.0)
        except ValueError:
            return False
        return min(s.needed_spacing for s in secs) >= min_spacing

    return largest_passing(ok, hi, steps=30)


__all__ = [
    "CoupledMedium",
    "SectionRealisation",
    "coupled_medium",
    "even_odd_impedances",
    "max_fbw",
    "realise_sections",
    "section_inverters",
    "section_length",
    "solve_section",
]
