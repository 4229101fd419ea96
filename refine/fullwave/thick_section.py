"""Quasi-static Z0 and ε_eff of one microstrip of finite thickness: a 2-D finite-volume
Laplace solve of its cross-section.

The circuit model applies the metal's thickness through Hammerstad and Jensen's effective-width
correction ("Accurate models for microstrip computer-aided design", IEEE MTT-S Digest 1980,
407–409, eqs. 6–7), which rests on Wheeler's thickness term. This module is refine's
independent check of that correction: a different method (the potential of a strip held at
1 V over a grounded slab, on a graded tensor grid), not a transcription. The capacitance per
unit length comes from the field energy, C = ε0 Σ ε_edge (Δφ)² a/ℓ over the grid's edges, once
with the slab's ε_r and once with air, and

    ε_eff = C / C_air,    Z0 = 1 / (c0 sqrt(C · C_air))

(the usual quasi-TEM definitions; Pozar, *Microwave Engineering*, 4th ed., §3.8). The strip is
solid from the substrate top z = h to h + t (a sheet when t = 0); the half cross-section x ≥ 0
is solved (the strip's centre plane is a symmetry plane, zero normal field); the ground is
z = 0, and the box is closed by grounded walls :data:`BOX` substrate heights to the side and
above, far enough that moving them changes C by well under 0.1 % (see the test). Each value is
extrapolated over three grids refined by 2 (Richardson) and carries the finest grid's distance
from it as its uncertainty.

Range: ε_r ≥ 1, 0.05 ≤ W/h ≤ 20, 0 ≤ t/h ≤ 0.1. Static (f → 0): no dispersion.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numpy.typing import NDArray

from refine import _validate as v
from refine.fullwave.mesh import graded_lines
from refine.fullwave.waves import richardson
from refine.physics.constants import C0, EPS0

#: the grounded box's walls, in substrate heights beside the strip's edge and above the slab
BOX = 30.0
#: the grid's cell at the strip's edges and faces on the coarsest of the three grids, in
#: substrate heights (or the metal's thickness, whichever is smaller), and its largest cell
EDGE_CELL = 0.02
MAX_CELL = 1.0
GROWTH = 1.2


@dataclass(frozen=True)
class Section:
    """A strip's quasi-static figures: capacitance per unit length with the slab and in air
    (F/m), and their extrapolation uncertainty (relative, of ε_eff and of Z0)."""

    c: float
    c_air: float
    eps_eff_uncertainty: float
    z0_uncertainty: float

    @property
    def eps_eff(self) -> float:
        return self.c / self.c_air

    @property
    def z0(self) -> float:
        return 1.0 / (C0 * math.sqrt(self.c * self.c_air))


def _lines(
    width: float, height: float, t: float, cell: float, d_max: float
) -> tuple[NDArray, NDArray]:
    half = 0.5 * width
    x = graded_lines([(half, cell), (0.0, 4 * cell)], 0.0, half + BOX * height, d_max, GROWTH)
    z_pts = [(height, cell)] + ([(height + t, cell)] if t > 0 else [])
    z = graded_lines(z_pts, 0.0, height + t + BOX * height, d_max, GROWTH)
    return x, z


def capacitance(
    eps_r: float,
    width: float,
    height: float,
    t: float,
    cell: float,
    d_max: float,
    grid_t: float | None = None,
) -> float:
    """Capacitance per unit length (F/m) of the whole strip at 1 V on one grid; grid_t: the
    thickness the grid is drawn for (default t), so that a sheet can be solved on a solid
    strip's grid."""
    x, z = _lines(width, height, t if grid_t is None else grid_t, cell, d_max)
    half = 0.5 * width
    tol = 1e-9 * height
    in_strip = (x[:, None] <= half + tol) & (z[None, :] >= height - tol)
    in_strip &= z[None, :] <= height + t + tol
    fixed = np.zeros((x.size, z.size), bool)
    fixed[:, 0] = fixed[-1, :] = fixed[:, -1] = True
    fixed |= in_strip
    return 2.0 * EPS0 * field_energy(x, z, eps_r, height, fixed, np.where(in_strip, 1.0, 0.0))


def field_energy(
    x: NDArray, z: NDArray, eps_r: float, height: float, fixed: NDArray, phi_fixed: NDArray
) -> float:
    """Σ ε_edge (Δφ)² a/ℓ over a tensor grid's edges (x, z lines; the slab ε_r below z =
    height, air above): twice the field energy over ε0 of the potential that is ``phi_fixed``
    on the ``fixed`` nodes (nx, nz) and solves Laplace's equation elsewhere. Nodes not fixed on
    the grid's boundary see zero normal field (a symmetry plane)."""
    nx, nz = x.size, z.size
    dx, dz = np.diff(x), np.diff(z)
    # cell permittivity (cells between lines): the slab below z = height
    zc = 0.5 * (z[:-1] + z[1:])
    eps_cell = np.where(zc < height, eps_r, 1.0)[None, :] * np.ones((nx - 1, 1))
    idx = np.arange(nx * nz).reshape(nx, nz)
    # edge coefficients ε_edge · (dual length) / (edge length)
    # x-edges between (i, j) and (i+1, j): the cells above and below share the dual length
    eps_below = np.zeros((nx - 1, nz))
    eps_above = np.zeros((nx - 1, nz))
    h_below = np.zeros(nz)
    h_above = np.zeros(nz)
    h_below[1:] = 0.5 * dz
    h_above[:-1] = 0.5 * dz
    eps_below[:, 1:] = eps_cell
    eps_above[:, :-1] = eps_cell
    ax = (eps_below * h_below[None, :] + eps_above * h_above[None, :]) / dx[:, None]
    # z-edges between (i, j) and (i, j+1): cells left and right (none beyond x[0]: symmetry)
    w_left = np.zeros(nx)
    w_right = np.zeros(nx)
    w_left[1:] = 0.5 * dx
    w_right[:-1] = 0.5 * dx
    eps_left = np.zeros((nx, nz - 1))
    eps_right = np.zeros((nx, nz - 1))
    eps_left[1:, :] = eps_cell
    eps_right[:-1, :] = eps_cell
    az = (eps_left * w_left[:, None] + eps_right * w_right[:, None]) / dz[None, :]
    rows, cols, vals = [], [], []
    for a, i0, i1 in (
        (ax, idx[:-1, :], idx[1:, :]),
        (az, idx[:, :-1], idx[:, 1:]),
    ):
        a, i0, i1 = a.ravel(), i0.ravel(), i1.ravel()
        rows += [i0, i1, i0, i1]
        cols += [i0, i1, i1, i0]
        vals += [a, a, -a, -a]
    k = sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
        shape=(nx * nz, nx * nz),
    )
    free = ~fixed.ravel()
    pf = phi_fixed.ravel().astype(float)
    rhs = -k[free][:, ~free] @ pf[~free]
    phi = pf.copy()
    phi[free] = spla.spsolve(k[free][:, free].tocsc(), rhs)
    return float(phi @ (k @ phi))


def _grids(height: float, t: float) -> list[tuple[float, float]]:
    """(edge cell, largest cell) of the three grids, each every cell smaller by 2."""
    cell0 = EDGE_CELL * height if t == 0 else min(EDGE_CELL * height, t)
    return [(cell0 / k, MAX_CELL * height / k) for k in (1, 2, 4)]


def _check(eps_r: float, width: float, height: float, t: float) -> None:
    v.real_in_range("eps_r", eps_r, 1.0, math.inf)
    v.positive("height", height)
    v.real_in_range("W/h", width / height, 0.05, 20.0)
    v.real_in_range("t/h", t / height, 0.0, 0.1)


def section(eps_r: float, width: float, height: float, t: float = 0.0) -> Section:
    """A strip's quasi-static figures, extrapolated over three grids refined by 2."""
    _check(eps_r, width, height, t)
    grids = _grids(height, t)
    cells = [c for c, _ in grids]
    caps = [[capacitance(e, width, height, t, c, d) for c, d in grids] for e in (eps_r, 1.0)]
    c = richardson(cells, caps[0])
    c_air = richardson(cells, caps[1])
    eps_list = [a / b for a, b in zip(caps[0], caps[1], strict=True)]
    z_list = [1.0 / (C0 * math.sqrt(a * b)) for a, b in zip(caps[0], caps[1], strict=True)]
    e = richardson(cells, eps_list)
    zz = richardson(cells, z_list)
    return Section(
        c.value,
        c_air.value,
        e.error / abs(e.value),
        zz.error / abs(zz.value),
    )


@dataclass(frozen=True)
class ThicknessChange:
    """What a metal thickness t does to a strip of width W: the relative change of ε_eff and
    of Z0 from the zero-thickness strip (solid over sheet, each pair solved on one grid, then
    extrapolated), with their uncertainties."""

    eps_eff: float
    z0: float
    eps_eff_uncertainty: float
    z0_uncertainty: float


def thickness_change(eps_r: float, width: float, height: float, t: float) -> ThicknessChange:
    """The relative change of ε_eff and Z0 that a thickness t makes, solid strip against sheet
    on the solid strip's grids (so the grid's own error largely cancels)."""
    _check(eps_r, width, height, t)
    v.positive("t", t)
    grids = _grids(height, t)
    cells = [c for c, _ in grids]
    de, dz = [], []
    for c, d in grids:
        solid = [capacitance(e, width, height, t, c, d) for e in (eps_r, 1.0)]
        sheet = [capacitance(e, width, height, 0.0, c, d, grid_t=t) for e in (eps_r, 1.0)]
        de.append((solid[0] / solid[1]) / (sheet[0] / sheet[1]) - 1.0)
        dz.append(math.sqrt((sheet[0] * sheet[1]) / (solid[0] * solid[1])) - 1.0)
    e = richardson(cells, de)
    z = richardson(cells, dz)
    return ThicknessChange(e.value, z.value, e.error, z.error)
