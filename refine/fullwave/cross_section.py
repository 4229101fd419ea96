"""Quasi-static even- and odd-mode parameters of a coupled microstrip cross-section.

A two-dimensional boundary-element solve of two equal zero-thickness strips (width W, edge
spacing s) on a grounded slab (ε_r, h), with the slab Green's function and panel integrals of
:mod:`refine.fullwave.electrostatic` (:func:`~refine.fullwave.electrostatic.mirrored_line_charge`):
the plane midway between the strips is one of even symmetry (both strips at +1 V) or odd symmetry
(+1 V and −1 V, an electric wall). The charge per unit length on one strip at 1 V is the mode's
capacitance C; the same solve with ε_r = 1 gives C_air, and

    ε_eff = C / C_air,    Z = 1 / (c0 sqrt(C · C_air))

(the usual quasi-TEM definitions; Pozar, *Microwave Engineering*, 4th ed., §7.1 for the even and
odd modes). This is refine's independent check of the coupled-line closed forms
(:mod:`refine.physics.coupled`): a different method, not a transcription. Each value is
extrapolated over three panel densities (Richardson) and carries the densest solve's distance from
it as its uncertainty.

Range: any ε_r ≥ 1, W/h ≥ 0.02, s/h ≥ 0.005. Zero thickness, f → 0 (no dispersion).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine.fullwave.electrostatic import GRADING, graded_sizes, mirrored_line_charge
from refine.fullwave.waves import richardson
from refine.physics.constants import C0

DENSITIES = (1.0, 2.0, 4.0)


@dataclass(frozen=True)
class ModeSolve:
    """One mode's quasi-static capacitance per unit length (F/m, one strip at 1 V), with and
    without the dielectric, and what follows from them."""

    c: float
    c_air: float

    @property
    def eps_eff(self) -> float:
        return self.c / self.c_air

    @property
    def z(self) -> float:
        return 1.0 / (C0 * math.sqrt(self.c * self.c_air))


def strip_edges(x0: float, width: float, first: float, largest: float) -> NDArray:
    """Panel edges across one strip [x0, x0 + width], graded geometrically (ratio
    :data:`~refine.fullwave.electrostatic.GRADING`) from ``first`` at both edges up to
    ``largest``, uniform in the middle."""
    half = 0.5 * width
    sizes = graded_sizes(half, first, largest, GRADING)
    rest = half - sum(sizes)
    n_rest = max(1, math.ceil(rest / largest - 1e-9))
    one_side = sizes + [rest / n_rest] * n_rest  # from an edge to the middle
    steps = one_side + one_side[::-1]
    return x0 + np.concatenate([[0.0], np.cumsum(steps)])


def _solve(eps_r: float, height: float, width: float, spacing: float, density: float) -> tuple:
    edges = strip_edges(
        0.5 * spacing,
        width,
        min(width, spacing) / 80.0 / density,
        width / 10.0 / density,
    )
    dy = np.diff(edges)
    out = []
    for mirror in (1.0, -1.0):
        c = float(np.sum(mirrored_line_charge(edges, eps_r, height, mirror) * dy))
        c_air = float(np.sum(mirrored_line_charge(edges, 1.0, height, mirror) * dy))
        out.append((c, c_air))
    return tuple(out)


@dataclass(frozen=True)
class CoupledSolve:
    """Even- and odd-mode quasi-static parameters (extrapolated) and their uncertainties
    (absolute: ohm, and ε_eff units)."""

    even: ModeSolve
    odd: ModeSolve
    z_even_unc: float
    z_odd_unc: float
    eps_even_unc: float
    eps_odd_unc: float


def coupled_pair(eps_r: float, height: float, width: float, spacing: float) -> CoupledSolve:
    """The quasi-static even- and odd-mode impedance and ε_eff of a coupled microstrip pair
    (see the module docstring), extrapolated over :data:`DENSITIES`."""
    v.real_in_range("eps_r", eps_r, 1.0, 100.0)
    h = v.positive("height", height)
    v.real_in_range("width", width, 0.02 * h, 100.0 * h)
    v.real_in_range("spacing", spacing, 0.005 * h, 100.0 * h)
    runs = [_solve(eps_r, h, width, spacing, d) for d in DENSITIES]
    modes, unc = [], []
    for m in range(2):
        cells = [1.0 / d for d in DENSITIES]
        c = richardson(cells, [r[m][0] for r in runs])
        ca = richardson(cells, [r[m][1] for r in runs])
        solve = ModeSolve(c.value, ca.value)
        last = ModeSolve(runs[-1][m][0], runs[-1][m][1])
        modes.append(solve)
        unc.append((abs(solve.z - last.z), abs(solve.eps_eff - last.eps_eff)))
    return CoupledSolve(modes[0], modes[1], unc[0][0], unc[1][0], unc[0][1], unc[1][1])


__all__ = ["DENSITIES", "CoupledSolve", "ModeSolve", "coupled_pair", "strip_edges"]
