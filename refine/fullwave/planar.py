"""A microstrip T-junction as a planar waveguide: its three-port at the junction's centre.

The tapped feed of an end-coupled filter joins a resonator in a T-junction, which the circuit
model takes as three lines meeting at a point. The junction's own parasitics follow from the
planar-waveguide model of microstrip discontinuities (Wolff, Kompa and Mehran, "Calculation
method for microstrip discontinuities and T-junctions", Electronics Letters 8(7), 177-179, 1972;
Menzel and Wolff, "A method for calculating the frequency-dependent properties of microstrip
discontinuities", IEEE Trans. MTT-25(2), 107-112, 1977; both from memory): each line is replaced
by a parallel-plate guide of height h with magnetic side walls, as wide as makes its
characteristic impedance and effective permittivity the line's at that frequency,

    W_eff(f) = η0 h / (Z0(f) sqrt(ε_eff(f))),

filled with ε0 ε_eff(f); the fields under the junction then obey the two-dimensional Helmholtz
equation for the strip voltage V (Okoshi's planar circuit, *Planar circuits for microwaves and
lightwaves*, Springer, 1985, from memory)

    ∇²V + k² V = 0 inside,   ∂V/∂ν = 0 on the magnetic walls,
    ∂V/∂ν = jωμ0 h I_p / W_p on port p (current I_p flowing in, uniform across it),

with ν the outward normal (for a uniform guide this is the telegrapher's equation with
L' = μ0 h / W, C' = ε W / h). Each arm keeps its own line's ε_eff; the square where the arms
meet belongs to the main line.

**Solve.** Finite volumes on a rectilinear grid with lines on every wall (cell-centred V; a
face's flux is the difference of its two cells' V over their distance; the port voltage is the
face value, V plus half a cell times the prescribed normal derivative). Injecting a unit current
at each port in turn gives the impedance matrix at the arm ends; it is turned into S-parameters
on each arm's own Z0(f) and the reference planes moved to the junction's centre (the main arms
to the side arm's centreline, the side arm to the main line's centreline) by removing each arm's
line length, which is exact once the higher-order modes the junction excites have died out along
the arms (their cutoff is π/W_eff, so arms three widths long leave exp(-3π) of them).

Checked (tests/test_planar.py): a straight guide reproduces the transmission line's impedance
matrix (to 8e-4 at 32 cells across, at second order); the junction is lossless and reciprocal
to 1e-12; as f → 0 it tends to three lines meeting at a point, its deviation proportional to f.

Not adopted by the circuit model: in the tapped filters of the field-solver validation set it
moves the centre up 1.2–2.0 % and widens the 3 dB bandwidth 13–37 %, which the field solver
does not show (benchmarks/tee.py, README). On alumina the effective widths are about three
times the strips', so the planar junction is much larger than the copper's.

Range: quasi-TEM lines (below the first transverse resonance of the wider guide, f·W_eff·sqrt(ε_eff)
< c/2); zero metal thickness; no radiation (the planar model has none).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine.physics.constants import C0, ETA0, MU0

#: cells across the narrower guide (the grid's density); the tests measure what it costs
CELLS_ACROSS = 24
#: arm lengths in widths of the wider guide (higher-order modes die as exp(-π L/W))
ARM_WIDTHS = 3.0


@dataclass(frozen=True)
class Grid:
    """A rectilinear grid of the tee: cell edges along x and y, the cells inside the region,
    and for each cell its ε_eff index (0 main line, 1 side arm)."""

    x: NDArray[np.float64]
    y: NDArray[np.float64]
    inside: NDArray[np.bool_]
    arm: NDArray[np.int_]


def _edges(*segments: tuple[float, float, int]) -> NDArray[np.float64]:
    """Edges of consecutive uniform segments (start, stop, cells)."""
    parts = [np.linspace(a, b, n + 1)[:-1] for a, b, n in segments]
    return np.concatenate([*parts, [segments[-1][1]]])


def tee_grid(main: float, side: float, arm: float, side_arm: float, across: int) -> Grid:
    """The tee's grid: the main guide (width ``main``) along x from -arm to +arm, the side guide
    (width ``side``) along +y from the main guide's edge for ``side_arm``."""
    d = min(main, side) / across
    nx_arm = max(2, round((arm - side / 2) / d))
    nx_mid = max(2, round(side / d))
    ny_main = max(2, round(main / d))
    ny_side = max(2, round(side_arm / d))
    x = _edges((-arm, -side / 2, nx_arm), (-side / 2, side / 2, nx_mid), (side / 2, arm, nx_arm))
    y = _edges((-main / 2, main / 2, ny_main), (main / 2, main / 2 + side_arm, ny_side))
    xc, yc = 0.5 * (x[1:] + x[:-1]), 0.5 * (y[1:] + y[:-1])
    X, Y = np.meshgrid(xc, yc, indexing="ij")
    in_main = np.abs(Y) < main / 2
    in_side = (np.abs(X) < side / 2) & (Y > main / 2)
    return Grid(x, y, in_main | in_side, np.where(in_side, 1, 0))


def _laminar(
    grid: Grid, k2: tuple[float, float]
) -> tuple[sp.csc_matrix, NDArray[np.int_], NDArray[np.float64], NDArray[np.float64]]:
    """(L + k² A) on the grid's inside cells, their indices, cell widths dx, dy."""
    dx, dy = np.diff(grid.x), np.diff(grid.y)
    nx, ny = len(dx), len(dy)
    index = -np.ones((nx, ny), int)
    index[grid.inside] = np.arange(int(grid.inside.sum()))
    rows, cols, vals = [], [], []
    diag = np.zeros(int(grid.inside.sum()), complex)
    ii, jj = np.nonzero(grid.inside)
    for i, j in zip(ii, jj, strict=True):
        n = index[i, j]
        area = dx[i] * dy[j]
        diag[n] += k2[grid.arm[i, j]] * area
        for di, dj in ((1, 0), (-1, 0), (0, 1), (0, -1)):
            a, b = i + di, j + dj
            if not (0 <= a < nx and 0 <= b < ny) or not grid.inside[a, b]:
                continue
            if di:
                t = dy[j] / (0.5 * (dx[i] + dx[a]))
            else:
                t = dx[i] / (0.5 * (dy[j] + dy[b]))
            rows.append(n)
            cols.append(index[a, b])
            vals.append(t)
            diag[n] -= t
    m = sp.coo_matrix((vals, (rows, cols)), shape=(len(diag), len(diag))) + sp.diags(diag)
    return m.tocsc(), index, dx, dy


@dataclass(frozen=True)
class Tee:
    """A T-junction's three-port (ports: 1 main arm towards -x, 2 main arm towards +x, 3 the
    side arm) at the junction's centre, each port on its own line's Z0(f).

    f : frequencies (Hz); s : (nf, 3, 3); z0 : (nf, 2) the main and side lines' Z0(f);
    gamma : (nf, 2) their propagation constants (lossless: jβ)."""

    f: NDArray[np.float64]
    s: NDArray[np.complex128]
    z0: NDArray[np.float64]
    gamma: NDArray[np.complex128]


def ideal_junction(z_main: ArrayLike, z_side: ArrayLike) -> NDArray[np.complex128]:
    """S-matrix (…, 3, 3) of three lines meeting at a point (ports 1, 2 on ``z_main``, 3 on
    ``z_side``): S_ij = 2 sqrt(Y_i Y_j)/ΣY − δ_ij."""
    y1 = 1.0 / np.asarray(z_main, float)
    y3 = 1.0 / np.asarray(z_side, float)
    ys = np.stack([y1, y1, y3], axis=-1)
    r = np.sqrt(ys)
    total = ys.sum(axis=-1)[..., None, None]
    return 2.0 * r[..., :, None] * r[..., None, :] / total - np.eye(3)


def z_to_s(z: NDArray[np.complex128], z0: NDArray[np.float64]) -> NDArray[np.complex128]:
    """S of an impedance matrix (…, n, n) on real port impedances z0 (…, n): power waves,
    S = F (Z − Z0)(Z + Z0)⁻¹ F⁻¹ with F = diag(1/sqrt(Z0)) (Kurokawa, "Power waves and the
    scattering matrix", IEEE Trans. MTT-13(2), 194-202, 1965, real reference impedances)."""
    n = z.shape[-1]
    eye = np.eye(n)
    zr = z0[..., :, None] * eye
    f = (1.0 / np.sqrt(z0))[..., :, None] * eye
    fi = np.sqrt(z0)[..., :, None] * eye
    out = np.asarray(f @ (z - zr) @ np.linalg.inv(z + zr) @ fi, dtype=complex)
    return out


def impedance_matrix(
    grid: Grid, k2: tuple[float, float], omega: float, height: float, sides: tuple[str, ...]
) -> NDArray[np.complex128]:
    """Impedance matrix of the planar region ``grid`` between ports on its outer faces
    (``sides``: "-x", "+x", "+y"), each port a uniform current across the inside cells of
    that side, its voltage the average over the port of the face value."""
    a, index, dx, dy = _laminar(grid, k2)
    nx, ny = len(dx), len(dy)

    def faces(side: str) -> list[tuple[int, float, float]]:
        if side == "-x":
            return [(index[0, j], dy[j], dx[0]) for j in range(ny) if grid.inside[0, j]]
        if side == "+x":
            return [(index[-1, j], dy[j], dx[-1]) for j in range(ny) if grid.inside[-1, j]]
        return [(index[i, -1], dx[i], dy[-1]) for i in range(nx) if grid.inside[i, -1]]

    ports = [faces(side) for side in sides]
    widths = [sum(w for _, w, _ in p) for p in ports]
    g = [1j * omega * MU0 * height / w for w in widths]  # ∂V/∂ν for a unit current in
    n = len(sides)
    rhs = np.zeros((a.shape[0], n), complex)
    for p, fs in enumerate(ports):
        for cell, length, _ in fs:
            rhs[cell, p] -= length * g[p]
    sol = spla.splu(a).solve(rhs)
    z = np.empty((n, n), complex)
    for q, fs in enumerate(ports):
        for p in range(n):
            own = 0.5 * g[q] if p == q else 0.0
            z[q, p] = sum((sol[c, p] + own * d) * ln for c, ln, d in fs) / widths[q]
    return z


def straight_grid(width: float, length: float, across: int) -> Grid:
    """A straight guide of ``width`` along x from 0 to ``length`` (the checks' reference)."""
    d = width / across
    x = np.linspace(0.0, length, max(2, round(length / d)) + 1)
    y = np.linspace(-width / 2, width / 2, across + 1)
    inside = np.ones((len(x) - 1, len(y) - 1), bool)
    return Grid(x, y, inside, np.zeros(inside.shape, int))


def effective_width(z0: ArrayLike, eps_eff: ArrayLike, height: float) -> NDArray[np.float64]:
    """The planar guide's width: η0 h / (Z0 sqrt(ε_eff))."""
    return ETA0 * height / (np.asarray(z0, float) * np.sqrt(np.asarray(eps_eff, float)))


def solve_tee(
    f: ArrayLike,
    main: tuple[ArrayLike, ArrayLike],
    side: tuple[ArrayLike, ArrayLike],
    height: float,
    across: int = CELLS_ACROSS,
    arm_widths: float = ARM_WIDTHS,
) -> Tee:
    """The tee's three-port at its centre (see the module docstring).

    main, side : each line's (Z0(f), ε_eff(f)), arrays over ``f`` (refine's line model, e.g.
    :meth:`refine.physics.microstrip.Microstrip.dispersive`); height : h (m)."""
    f = v.frequencies("f", f)
    h = v.positive("height", height)
    z_m, e_m = (np.broadcast_to(np.asarray(a, float), f.shape) for a in main)
    z_s, e_s = (np.broadcast_to(np.asarray(a, float), f.shape) for a in side)
    s_out = np.empty((len(f), 3, 3), complex)
    for n, fk in enumerate(f):
        wm = float(effective_width(z_m[n], e_m[n], h))
        ws = float(effective_width(z_s[n], e_s[n], h))
        wide = max(wm, ws)
        arm = ws / 2 + arm_widths * wide
        side_arm = arm_widths * wide
        k0 = 2 * np.pi * fk / C0
        grid = tee_grid(wm, ws, arm, side_arm, across)
        z = impedance_matrix(
            grid, (k0**2 * e_m[n], k0**2 * e_s[n]), 2 * np.pi * fk, h, ("-x", "+x", "+y")
        )
        s = z_to_s(z, np.array([z_m[n], z_m[n], z_s[n]]))
        beta = k0 * np.sqrt(np.array([e_m[n], e_m[n], e_s[n]]))
        shift = np.exp(1j * beta * np.array([arm, arm, wm / 2 + side_arm]))
        s_out[n] = s * shift[:, None] * shift[None, :]
    gamma = 1j * (2 * np.pi * f / C0)[:, None] * np.sqrt(np.stack([e_m, e_s], axis=-1))
    return Tee(f, s_out, np.stack([z_m, z_s], axis=-1), gamma)


def s_to_abcd(
    s: NDArray[np.complex128], z1: ArrayLike, z2: ArrayLike
) -> tuple[NDArray, NDArray, NDArray, NDArray]:
    """ABCD entries of a two-port's S (…, 2, 2) on real port impedances z1, z2 (Frickey,
    "Conversions between S, Z, Y, h, ABCD, and T parameters which are valid for complex source
    and load impedances", IEEE Trans. MTT-42(2), 205-211, 1994, Table I, real case)."""
    s11, s12, s21, s22 = s[..., 0, 0], s[..., 0, 1], s[..., 1, 0], s[..., 1, 1]
    r1, r2 = np.asarray(z1, float), np.asarray(z2, float)
    den = 2.0 * s21
    return (
        ((1 + s11) * (1 - s22) + s12 * s21) / den * np.sqrt(r1 / r2),
        ((1 + s11) * (1 + s22) - s12 * s21) / den * np.sqrt(r1 * r2),
        ((1 - s11) * (1 - s22) - s12 * s21) / den / np.sqrt(r1 * r2),
        ((1 - s11) * (1 + s22) + s12 * s21) / den * np.sqrt(r2 / r1),
    )


def tapped_two_port(
    tee: Tee, stub_gamma: ArrayLike, stub_z: ArrayLike, stub_length: ArrayLike
) -> tuple[NDArray, NDArray, NDArray, NDArray]:
    """ABCD entries, from the feed (port 3) to the main arm (port 2), of the tee with its other
    main arm (port 1) ended by an open stub of ``stub_length`` from the junction's centre on a
    line (γ, z_c): the element that replaces the ideal junction's shunt open stub in a tapped
    resonator (:class:`refine.circuit.cascade.ShuntOpenStub`)."""
    g = np.asarray(stub_gamma) * np.asarray(stub_length)
    z_in = np.asarray(stub_z) * np.cosh(g) / np.sinh(g)
    z_m, z_s = tee.z0[:, 0], tee.z0[:, 1]
    load = (z_in - z_m) / (z_in + z_m)
    s = tee.s
    keep = (2, 1)
    out = np.empty((*np.broadcast_shapes(load.shape, z_m.shape), 2, 2), complex)
    for a_, a in enumerate(keep):
        for b_, b in enumerate(keep):
            out[..., a_, b_] = s[:, a, b] + s[:, a, 0] * load * s[:, 0, b] / (1 - s[:, 0, 0] * load)
    return s_to_abcd(out, z_s, z_m)
