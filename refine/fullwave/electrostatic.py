"""Quasi-static capacitances of microstrip discontinuities by a boundary-element solve.

The gap's series and shunt capacitance and the open end's excess capacitance are quasi-static
(gap, width and height all much smaller than a wavelength), so they follow from an electrostatic
solve, which converges cleanly at gaps of a few micrometres where a time-domain field solve needs
cells of that size. This is the classical route of Silvester & Benedek ("Equivalent capacitances
of microstrip open circuits", IEEE Trans. MTT-20(8), 511-516, 1972) and Maeda ("An analysis of gap
in microstrip transmission lines", IEEE Trans. MTT-20(6), 390-396, 1972) [from memory]: charge on
finite strips of zero thickness on the surface of a grounded dielectric slab, excess charge taken
against the uniform line.

**Green's function.** A unit point charge on the surface of a slab (ε_r, height h) over an
infinite ground plane gives, on that surface, the potential

    G(ρ) = 1/(2π ε0 (1 + ε_r)) · [1/ρ − (1 + K) Σ_{n≥1} (−K)^(n−1) / sqrt(ρ² + (2nh)²)],
    K = (ε_r − 1)/(ε_r + 1),

which is the image series of the spectral-domain potential 1/(ε0 k (1 + ε_r coth kh)) expanded in
powers of exp(−2kh) (derived here; for ε_r = 1 it is a charge and its image in the ground plane).

**Discretisation.** Each strip is split into rectangular panels of constant surface charge,
graded towards the strip's edges and ends where the charge density is singular; the potential is
matched to the strip voltage at the panel centres (collocation). The 1/ρ term and the first two
images are integrated over each panel exactly (closed form for a rectangle); the remaining images
(at least 6h away) are taken at the panel centre, or, for the long panels of the far strip,
exactly along the strip and at the centre across it. The strip's centreline is a plane of even
symmetry, and a symmetric gap's centre plane is one of even or odd symmetry, so only a quarter of
the copper is solved.

**Semi-infinite strips.** Each strip runs from the discontinuity to infinity. Near the
discontinuity (4h + 2W) it is meshed finely; beyond, panels grow geometrically out to
10³·(h + W), because the strip's charge approaches the uniform line's only as 1/x² (the missing
half-line of charge and its images act as a line of dipoles); beyond that the strip carries the
uniform line's charge, taken from the two-dimensional solve of the same cross-section
(:func:`line_charge`, the same discretisation across the strip, so that a uniform strip is
reproduced exactly). Truncating the strip at a finite length instead leaves errors that fall
only as 1/L: 5 % in a gap's series capacitance at L = 10h.

**Extraction (static, lossless, open environment, no lid, zero metal thickness).**

- the uniform line's capacitance per length ``q`` from the two-dimensional solve;
- an open end: its excess charge over ``q`` times its length at 1 V is ``C_end``, and its
  length extension is ``Δl = C_end / q``;
- a symmetric gap, both strips at +1 V (even): excess charge per side ``C_p``; at +1 V and
  −1 V (odd): ``C_p + 2·C_g``; so ``C_g = (Q_odd − Q_even)/2`` (the π-network with reference
  planes at the strip ends).

``density`` scales the number of panels along both axes; each value is extrapolated from three
densities (Richardson, :func:`refine.fullwave.waves.richardson`) and carries the distance of the
densest solve from it as its uncertainty, with a floor for the near strip's finite length.

Checked (tests/test_electrostatic.py): the line capacitance against Hammerstad–Jensen's ε_eff and
Z0; a gap's series capacitance against the field solver's nine-gap fixture.

Range: any ε_r ≥ 1, W/h and s/h for which the panels fit (s/h ≥ 0.005). The result is the
f → 0 limit; dispersion of the discontinuity itself is not included.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine.fullwave.waves import richardson
from refine.physics.constants import EPS0

EXACT_IMAGES = 2  # images integrated exactly over each panel; the rest at the panel centre
SERIES_TOL = 1e-10  # relative size of the last image term kept
GRADING = 1.35  # growth ratio of panel sizes away from an edge or end


@dataclass(frozen=True)
class Panels:
    """Rectangular panels of one strip piece: edges along x and along y (metres)."""

    x: NDArray  # (nx + 1,) panel edges along the strip
    y: NDArray  # (ny + 1,) panel edges across the strip (0 = centreline)

    def centres(self) -> tuple[NDArray, NDArray]:
        xc = 0.5 * (self.x[1:] + self.x[:-1])
        yc = 0.5 * (self.y[1:] + self.y[:-1])
        gx, gy = np.meshgrid(xc, yc, indexing="ij")
        return gx.ravel(), gy.ravel()

    def boxes(self) -> NDArray:
        """(n, 4): x1, x2, y1, y2 of each panel, x-major like :meth:`centres`."""
        x1, y1 = np.meshgrid(self.x[:-1], self.y[:-1], indexing="ij")
        x2, y2 = np.meshgrid(self.x[1:], self.y[1:], indexing="ij")
        return np.stack([x1.ravel(), x2.ravel(), y1.ravel(), y2.ravel()], -1)


def graded_sizes(span: float, first: float, largest: float, ratio: float) -> list[float]:
    sizes: list[float] = []
    d = first
    while d < largest and sum(sizes) + d < span:
        sizes.append(d)
        d *= ratio
    return sizes


def half_width_edges(
    half_width: float, first: float, largest: float, ratio: float = GRADING
) -> NDArray:
    """Edges on [0, W/2] (0 = centreline): sizes grow geometrically from ``first`` at the strip
    edge W/2 inwards, up to ``largest``, uniform towards the centreline."""
    sizes = graded_sizes(half_width, first, largest, ratio)
    rest = half_width - sum(sizes)
    n_rest = max(1, math.ceil(rest / largest - 1e-9))
    steps = [rest / n_rest] * n_rest + sizes[::-1]
    return np.concatenate([[0.0], np.cumsum(steps)])


def _corner(x: NDArray, y: NDArray, z: float) -> NDArray:
    """An antiderivative F(x, y) of 1/sqrt(x² + y² + z²) in x and y: the integral over a
    rectangle is F(x2, y2) − F(x1, y2) − F(x2, y1) + F(x1, y1). Terms constant in x or in y,
    which cancel in that sum, are dropped so that F stays finite on the axes."""
    x2, y2 = x * x, y * y
    rx = np.sqrt(x2 + z * z)
    ry = np.sqrt(y2 + z * z)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(rx > 0, x * np.arcsinh(y / np.where(rx > 0, rx, 1.0)), 0.0)
        out += np.where(ry > 0, y * np.arcsinh(x / np.where(ry > 0, ry, 1.0)), 0.0)
    if z > 0:
        out -= z * np.arctan2(x * y, z * np.sqrt(x2 + y2 + z * z))
    return out


def panel_integral(dx1: NDArray, dx2: NDArray, dy1: NDArray, dy2: NDArray, z: float) -> NDArray:
    """∫∫ dx dy / sqrt(x² + y² + z²) over [dx1, dx2] × [dy1, dy2] (offsets from the field
    point), exact."""
    return _corner(dx2, dy2, z) - _corner(dx1, dy2, z) - _corner(dx2, dy1, z) + _corner(dx1, dy1, z)


def _grid_integrals(xf: NDArray, yf: NDArray, ex: NDArray, ey: NDArray, z: float) -> NDArray:
    """(n_field, nx·ny): the exact integral of 1/sqrt(ρ² + z²) over every panel of the tensor
    grid with edges ``ex`` × ``ey`` (either may run backwards; the sign is then corrected), seen
    from each field point. The corner function is evaluated once per grid corner."""
    f = _corner((ex[None, :] - xf[:, None])[:, :, None], (ey[None, :] - yf[:, None])[:, None, :], z)
    rect = f[:, 1:, 1:] - f[:, :-1, 1:] - f[:, 1:, :-1] + f[:, :-1, :-1]
    orient = np.sign(ex[1] - ex[0]) * np.sign(ey[-1] - ey[0])
    return orient * rect.reshape(xf.size, -1)


@dataclass(frozen=True)
class Surroundings:
    """What the strips see. Microstrip: a grounded slab of ε_r and height h, the strips on its
    surface. Stripline (``stripline=True``): a homogeneous dielectric of ε_r between two ground
    planes ``height`` = b apart, the strips midway. Both Green's functions are image series of
    the same form (module docstring): image n at 2n·:attr:`unit` with charge (−K)^(n−1)."""

    eps_r: float
    height: float
    stripline: bool = False

    @property
    def ratio(self) -> float:
        """K: (ε_r − 1)/(ε_r + 1) on the slab; 1 between two ground planes."""
        return 1.0 if self.stripline else (self.eps_r - 1.0) / (self.eps_r + 1.0)

    @property
    def unit(self) -> float:
        """Half the spacing of successive images: h on the slab, b/2 between two planes."""
        return 0.5 * self.height if self.stripline else self.height

    @property
    def prefactor(self) -> float:
        """The point charge's 1/ρ coefficient: 1/(2π ε0 (1 + ε_r)) at the slab's surface,
        1/(4π ε0 ε_r) inside the homogeneous stripline dielectric."""
        if self.stripline:
            return 1.0 / (4 * math.pi * EPS0 * self.eps_r)
        return 1.0 / (2 * math.pi * EPS0 * (1.0 + self.eps_r))


# Between two ground planes (K = 1) the image series alternates with terms falling only as 1/n.
# It is summed directly up to EULER_START and then over EULER_TERMS + 1 more terms weighted by
# the Euler-van Wijngaarden transform (repeated averaging of successive partial sums, written as
# fixed weights): 1e-10 of the first term for every distance (measured against a 2e6-term sum).
EULER_START = 12
EULER_TERMS = 10
EULER_WEIGHTS = tuple(
    sum(math.comb(EULER_TERMS, j) for j in range(i, EULER_TERMS + 1)) / 2**EULER_TERMS
    for i in range(EULER_TERMS + 1)
)


def image_sum(term: Callable[[int], NDArray], k: float, like: NDArray) -> NDArray:
    """Σ_{n > EXACT_IMAGES} (−K)^(n−1) term(n): geometric for K < 1, summed until the terms
    fall below SERIES_TOL of the first; for K = 1 accelerated (see :data:`EULER_WEIGHTS`)."""
    out = np.zeros_like(like)
    if k == 0.0:
        return out
    n = EXACT_IMAGES + 1
    coef = (-k) ** (n - 1)
    if k < 1.0:
        while abs(coef) > SERIES_TOL * k**EXACT_IMAGES:
            out += coef * term(n)
            n += 1
            coef *= -k
        return out
    while n < EULER_START:
        out += coef * term(n)
        n += 1
        coef = -coef
    for w in EULER_WEIGHTS:
        out += w * coef * term(n)
        n += 1
        coef = -coef
    return out


def image_tail(rho: NDArray, where: Surroundings) -> NDArray:
    """Σ_{n > EXACT_IMAGES} (−K)^(n−1) / sqrt(ρ² + (2n·unit)²)."""
    u = where.unit
    return image_sum(lambda n: 1.0 / np.sqrt(rho * rho + (2 * n * u) ** 2), where.ratio, rho)


Image = tuple[float, float, float, float]


def _tail_exact_x(
    xf: NDArray, yf: NDArray, ex: NDArray, ey: NDArray, where: Surroundings
) -> NDArray:
    """Σ_{n > EXACT_IMAGES} (−K)^(n−1) ∫∫ 1/sqrt(ρ² + (2n·unit)²) over every panel of the grid
    ``ex`` × ``ey``: exact along x, panel centre across y (the images are at least 6 units
    away, the panels' widths a fraction of W). For long panels seen from afar, where each image
    term falls as 1/ρ and only their sum falls faster, integrating every term exactly along x
    keeps that cancellation."""
    yc = 0.5 * (ey[1:] + ey[:-1])
    dy = np.abs(np.diff(ey))
    ry = yc[None, :] - yf[:, None]
    tx = ex[None, :] - xf[:, None]
    u = where.unit

    def term(n: int) -> NDArray:
        c = np.sqrt(ry * ry + (2 * n * u) ** 2)[:, None, :]
        a = np.arcsinh(tx[:, :, None] / c)
        return a[:, 1:, :] - a[:, :-1, :]

    out = image_sum(term, where.ratio, np.zeros((xf.size, ex.size - 1, yc.size)))
    out *= dy[None, None, :] * np.sign(ex[1] - ex[0])
    return out.reshape(xf.size, -1)


def potential_matrix(
    field: tuple[NDArray, NDArray],
    panels: Panels,
    images: tuple[Image, ...],
    where: Surroundings,
    long_panels: bool = False,
) -> NDArray:
    """Potential at each field point per unit surface charge on each panel, summed over the
    symmetry images ``(sx, x0, sy, sign)``: a panel at x maps to ``x0 + sx·x``, y to ``sy·y``,
    with charge ``sign``. The 1/ρ term and the first EXACT_IMAGES images are integrated exactly;
    the other images at the panel centre, or (``long_panels``) exactly along x."""
    xf, yf = field
    k = where.ratio
    pref = where.prefactor
    boxes = panels.boxes()
    area = (boxes[:, 1] - boxes[:, 0]) * (boxes[:, 3] - boxes[:, 2])
    xc, yc = panels.centres()
    total = np.zeros((xf.size, area.size))
    for sx, x0, sy, sign in images:
        ex, ey = x0 + sx * panels.x, sy * panels.y
        series = np.zeros_like(total)
        coef = 1.0
        for n in range(1, EXACT_IMAGES + 1):
            series += coef * _grid_integrals(xf, yf, ex, ey, 2 * n * where.unit)
            coef *= -k
        if long_panels:
            series += _tail_exact_x(xf, yf, ex, ey, where)
        else:
            rho = np.hypot(x0 + sx * xc[None, :] - xf[:, None], sy * yc[None, :] - yf[:, None])
            series += area[None, :] * image_tail(rho, where)
        total += sign * (_grid_integrals(xf, yf, ex, ey, 0.0) - (1.0 + k) * series)
    return pref * total


def log_integral(d1: NDArray, d2: NDArray, c: float) -> NDArray:
    """∫ ln sqrt(t² + c²) dt from d1 to d2, exact (c = 0 allowed)."""

    def g(t: NDArray) -> NDArray:
        if c == 0.0:
            with np.errstate(divide="ignore", invalid="ignore"):
                return np.where(t != 0, t * np.log(np.abs(np.where(t != 0, t, 1.0))), 0.0) - t
        return 0.5 * t * np.log(t * t + c * c) - t + c * np.arctan(t / c)

    return g(d2) - g(d1)


def line_charge(
    half_edges: NDArray, eps_r: float, height: float, stripline: bool = False
) -> NDArray:
    """Surface charge density (C/m²) at 1 V on each panel [y_j, y_j+1] of the half width of an
    infinite uniform strip (the two-dimensional problem: the x-integral of the Green's function,
    2·prefactor·[−ln ρ + (1+K) Σ (−K)^(n−1) ln sqrt(ρ² + (2n·unit)²)], the logarithms'
    weights summing to zero), the strip's centreline symmetry used."""
    return mirrored_line_charge(half_edges, eps_r, height, 1.0, stripline)


def stripline_log_tail(y: NDArray) -> NDArray:
    """The two-dimensional stripline kernel's images beyond the exact ones, y in units of b/2:
    the whole kernel is ln coth(π|y|/2b) (the line charge midway between two grounded planes,
    summed in closed form), less −ln|y| + 2 ln sqrt(y² + b²) − 2 ln sqrt(y² + 4b²). Smooth,
    ln(2b/π) + … at y = 0."""
    a = np.abs(y)
    x = 0.25 * math.pi * a  # π|y|/(2b) with b = 2 units
    with np.errstate(divide="ignore", invalid="ignore"):
        near = np.where(
            a > 0, np.log(np.where(a > 0, a, 1.0) / np.tanh(np.where(a > 0, x, 1.0))), 0.0
        )
    near = np.where(a > 0, near, math.log(4.0 / math.pi))
    return near - np.log(np.sqrt(a * a + 4.0)) * 2 + np.log(np.sqrt(a * a + 16.0)) * 2


def mirrored_line_charge(
    edges: NDArray, eps_r: float, height: float, mirror: float, stripline: bool = False
) -> NDArray:
    """Like :func:`line_charge` for the panels ``edges`` (metres, y ≥ 0) of one strip and their
    mirror image in y = 0 charged ``mirror`` times as much: +1 a plane of even symmetry (one
    strip's centreline, or both strips of a coupled pair at the same voltage), −1 one of odd
    symmetry (a coupled pair at opposite voltages, the plane an electric wall)."""
    where = Surroundings(eps_r, height, stripline)
    k = where.ratio
    ey = edges / where.unit
    yf = 0.5 * (ey[1:] + ey[:-1])
    total = np.zeros((yf.size, yf.size))
    for sy, weight in ((1.0, 1.0), (-1.0, mirror)):
        a, b = np.minimum(sy * ey[:-1], sy * ey[1:]), np.maximum(sy * ey[:-1], sy * ey[1:])
        d1, d2 = a[None, :] - yf[:, None], b[None, :] - yf[:, None]
        part = -log_integral(d1, d2, 0.0)
        centre, width = 0.5 * (d1 + d2), d2 - d1
        coef = 1.0
        for n in range(1, EXACT_IMAGES + 1):
            part += (1.0 + k) * coef * log_integral(d1, d2, 2.0 * n)
            coef *= -k
        # the further images at the panel centre across y, as the three-dimensional solve takes
        # them (there, exactly along x)
        if stripline:
            part += width * stripline_log_tail(centre)
        else:
            n = EXACT_IMAGES + 1
            while abs(coef) > SERIES_TOL:
                part += (1.0 + k) * coef * width * 0.5 * np.log(centre * centre + (2.0 * n) ** 2)
                coef *= -k
                n += 1
        total += weight * part
    p = total * where.unit * 2 * where.prefactor
    return np.linalg.solve(p, np.ones(yf.size))


@dataclass(frozen=True)
class Mesh:
    """Panel sizes of one solve, all scaled by ``1/density``."""

    width: float
    height: float
    gap: float | None
    density: float = 1.0

    def across(self) -> NDArray:
        w = self.width
        return half_width_edges(0.5 * w, w / 60 / self.density, w / 6 / self.density)

    def along(self, length: float) -> NDArray:
        """Edges on [0, length]: fine at 0 (the discontinuity), growing to the largest size,
        then uniform."""
        sizes = graded_sizes(length, self.fine, self.largest, GRADING)
        rest = length - sum(sizes)
        n_rest = max(1, math.ceil(rest / self.largest - 1e-9))
        return np.concatenate([[0.0], np.cumsum(sizes + [rest / n_rest] * n_rest)])

    def beyond(self, start: float, far: float) -> NDArray:
        """Edges on [start, far], growing geometrically from the largest size: the strip's
        charge approaches the uniform line's only as 1/x², so the far strip is solved too."""
        sizes, x, d = [], start, self.largest
        while x < far:
            d *= GRADING
            sizes.append(min(d, far - x))
            x += sizes[-1]
        return start + np.concatenate([[0.0], np.cumsum(sizes)])

    @property
    def fine(self) -> float:
        fine = min(self.width, self.height) / 60
        if self.gap is not None:
            fine = min(fine, self.gap / 8)
        return fine / self.density

    @property
    def largest(self) -> float:
        small = min(self.width, self.height)
        return 0.5 * max(small, 0.25 * max(self.width, self.height)) / self.density


def near_length(width: float, height: float) -> float:
    """Length of strip next to the discontinuity meshed with the largest uniform panels."""
    return 4 * height + 2 * width


def far_length(width: float, height: float, stripline: bool = False) -> float:
    """Length of strip solved for; beyond it the strip carries the uniform line's charge. On the
    slab the strip's excess charge density falls as 1/x², so what is left beyond is about
    (h/far) of the near excess: 1e-3 here. Between two ground planes (``height`` = b/2) it falls
    as exp(−πx/b): 60 b leaves nothing measurable."""
    if stripline:
        return 120 * height + 4 * width
    return 1e3 * (height + width)


@dataclass(frozen=True)
class OpenEnd:
    """Static line capacitance per length (F/m), open-end excess capacitance (F), Δl (m)."""

    c_line: float
    c_end: float

    @property
    def extension(self) -> float:
        return self.c_end / self.c_line


def _strip_pieces(
    mesh: Mesh, start: float, where: Surroundings
) -> tuple[Panels, Panels, Panels, NDArray, float]:
    """One semi-infinite strip from ``start`` along +x: its near and far panels, the tail
    beyond (carrying the uniform line's charge), that charge, and the line's capacitance."""
    length = near_length(mesh.width, mesh.height)
    far = far_length(mesh.width, mesh.height, where.stripline)
    across = mesh.across()
    near = Panels(start + mesh.along(length), across)
    rest = Panels(start + mesh.beyond(length, far), across)
    tail = Panels(start + np.array([far, 2 * far]), across)
    sigma_line = line_charge(across, where.eps_r, where.height, where.stripline)
    return near, rest, tail, sigma_line, 2 * float(sigma_line @ np.diff(across))


def _excess(
    mesh: Mesh, start: float, images: tuple[Image, ...], where: Surroundings
) -> tuple[float, float]:
    """(excess charge at 1 V of the near strip [start, start + L] over the uniform line, line
    capacitance per length), the rest of the strip to infinity carrying the uniform charge."""
    near, rest, tail, sigma_line, c_line = _strip_pieces(mesh, start, where)
    far = far_length(mesh.width, mesh.height, where.stripline)
    xn, yn = near.centres()
    xr, yr = rest.centres()
    field = (np.concatenate([xn, xr]), np.concatenate([yn, yr]))
    p = np.hstack(
        [
            potential_matrix(field, near, images, where),
            potential_matrix(field, rest, images, where, long_panels=True),
        ]
    )
    rhs = 1.0 - potential_matrix(field, tail, images, where, long_panels=True) @ sigma_line
    sigma = np.linalg.solve(p, rhs)
    area = np.concatenate([_areas(near), _areas(rest)])
    return 2 * float(sigma @ area) - c_line * far, c_line


def _areas(panels: Panels) -> NDArray:
    b = panels.boxes()
    return (b[:, 1] - b[:, 0]) * (b[:, 3] - b[:, 2])


def _surroundings(eps_r: float, height: float, width: float, stripline: bool) -> Surroundings:
    v.real_in_range("eps_r", eps_r, 1.0, 100.0)
    v.positive("ground-plane spacing" if stripline else "height", height)
    v.positive("width", width)
    return Surroundings(eps_r, height, stripline)


def open_end(
    eps_r: float, height: float, width: float, density: float = 1.0, stripline: bool = False
) -> OpenEnd:
    """Static capacitance per length and open-end excess capacitance of a strip of width W (on
    a slab of height ``height``, or with ``stripline`` midway between planes ``height`` apart)."""
    where = _surroundings(eps_r, height, width, stripline)
    images = ((1.0, 0.0, 1.0, 1.0), (1.0, 0.0, -1.0, 1.0))
    c_end, c_line = _excess(Mesh(width, where.unit, None, density), 0.0, images, where)
    return OpenEnd(c_line, c_end)


@dataclass(frozen=True)
class Gap:
    """Static π-network of a symmetric gap: series C_g and shunt C_p per side (F)."""

    c_series: float
    c_shunt: float
    c_line: float


def gap(
    eps_r: float,
    height: float,
    width: float,
    gap: float,
    density: float = 1.0,
    stripline: bool = False,
) -> Gap:
    """Series and shunt capacitance of a symmetric gap ``gap`` between two strips of width W
    (reference planes at the strip ends)."""
    where = _surroundings(eps_r, height, width, stripline)
    v.real_in_range("gap/height", gap / height, 0.005, 10.0)
    mesh = Mesh(width, where.unit, gap, density)
    excess = {}
    for mode, sign in (("even", 1.0), ("odd", -1.0)):
        images = (
            (1.0, 0.0, 1.0, 1.0),
            (1.0, 0.0, -1.0, 1.0),
            (-1.0, 0.0, 1.0, sign),
            (-1.0, 0.0, -1.0, sign),
        )
        excess[mode], c_line = _excess(mesh, 0.5 * gap, images, where)
    return Gap(0.5 * (excess["odd"] - excess["even"]), excess["even"], c_line)


@dataclass(frozen=True)
class UnequalGap:
    """Static π-network of a gap between strips of unequal width: series C_g and the shunt
    capacitance on each side (F), and each line's capacitance per length (F/m)."""

    c_series: float
    c_shunt_1: float
    c_shunt_2: float
    c_line_1: float
    c_line_2: float


def unequal_gap(
    eps_r: float,
    height: float,
    width_1: float,
    width_2: float,
    gap: float,
    density: float = 1.0,
) -> UnequalGap:
    """Series and shunt capacitances of a gap ``gap`` between a strip of width W1 (on x > 0)
    and one of width W2 (on x < 0), both centred on one line, on a grounded slab (reference
    planes at the strip ends). Without the gap's own mirror symmetry, both strips are solved
    (the centreline's symmetry still halves each), once with strip 1 at 1 V and strip 2 at 0 V
    and once the other way: the excess charges form the Maxwell capacitance matrix, and
    C_g = −C_12, C_p,i = C_ii − C_g. Equal widths give :func:`gap`'s values (tested)."""
    where = _surroundings(eps_r, height, width_1, False)
    v.positive("width", width_2)
    v.real_in_range("gap/height", gap / height, 0.005, 10.0)
    # each strip's images: itself and its mirror across the centreline; strip 2 runs along -x
    images = {
        1: ((1.0, 0.0, 1.0, 1.0), (1.0, 0.0, -1.0, 1.0)),
        2: ((-1.0, 0.0, 1.0, 1.0), (-1.0, 0.0, -1.0, 1.0)),
    }
    pieces = {
        k: _strip_pieces(Mesh(w, where.unit, gap, density), 0.5 * gap, where)
        for k, w in ((1, width_1), (2, width_2))
    }
    fields = {}
    for k, (near, rest, _, _, _) in pieces.items():
        xn, yn = near.centres()
        xr, yr = rest.centres()
        sx = 1.0 if k == 1 else -1.0
        fields[k] = (sx * np.concatenate([xn, xr]), np.concatenate([yn, yr]))
    field = (
        np.concatenate([fields[1][0], fields[2][0]]),
        np.concatenate([fields[1][1], fields[2][1]]),
    )
    blocks, tails = [], []
    for k, (near, rest, tail, sigma_line, _) in pieces.items():
        blocks.append(potential_matrix(field, near, images[k], where))
        blocks.append(potential_matrix(field, rest, images[k], where, long_panels=True))
        tails.append(potential_matrix(field, tail, images[k], where, long_panels=True) @ sigma_line)
    p = np.hstack(blocks)
    n1 = fields[1][0].size
    on = {1: np.r_[np.ones(n1), np.zeros(field[0].size - n1)]}
    on[2] = 1.0 - on[1]
    area = {k: np.concatenate([_areas(pc[0]), _areas(pc[1])]) for k, pc in pieces.items()}
    split = area[1].size
    c_line = {k: pieces[k][4] for k in pieces}
    far = {k: far_length(w, where.unit) for k, w in ((1, width_1), (2, width_2))}
    maxwell = np.zeros((2, 2))
    for j in (1, 2):  # strip j at 1 V, the other at 0 V
        rhs = on[j] - tails[j - 1]
        sigma = np.linalg.solve(p, rhs)
        parts = {1: sigma[:split], 2: sigma[split:]}
        for i in (1, 2):
            q = 2 * float(parts[i] @ area[i])
            maxwell[i - 1, j - 1] = q - (c_line[i] * far[i] if i == j else 0.0)
    c_g = -0.5 * (maxwell[0, 1] + maxwell[1, 0])
    return UnequalGap(c_g, maxwell[0, 0] - c_g, maxwell[1, 1] - c_g, c_line[1], c_line[2])


def converged_unequal_gap(
    eps_r: float, height: float, width_1: float, width_2: float, gap_: float
) -> dict[str, Converged]:
    """:func:`unequal_gap` extrapolated over three panel densities: keys ``c_series``,
    ``c_shunt_1``, ``c_shunt_2``."""
    solves = [unequal_gap(eps_r, height, width_1, width_2, gap_, d) for d in DENSITIES]
    return {
        k: _extrapolate([getattr(s, k) for s in solves])
        for k in ("c_series", "c_shunt_1", "c_shunt_2")
    }


DENSITIES = (1.0, 1.5, 2.25)  # three panel densities, refined by a constant factor
# Relative change of the excess capacitances when the near strip is made 4x longer (measured in
# tests/test_electrostatic.py: at most 0.4 %); the floor of every value's uncertainty.
LENGTH_SPREAD = 0.005


@dataclass(frozen=True)
class Converged:
    """A value extrapolated to infinite panel density (Richardson over :data:`DENSITIES`), its
    uncertainty (distance of the densest solve from the extrapolation, at least
    :data:`LENGTH_SPREAD` of the value) and the raw values."""

    value: float
    uncertainty: float
    order: float
    raw: tuple[float, ...]


def _extrapolate(values: list[float]) -> Converged:
    cells = [1.0 / d for d in DENSITIES]
    ex = richardson(cells, values)
    spread = max(ex.error, LENGTH_SPREAD * abs(ex.value))
    return Converged(ex.value, spread, ex.order, tuple(values))


def converged_gap(
    eps_r: float, height: float, width: float, gap_: float, stripline: bool = False
) -> dict[str, Converged]:
    """Series and shunt capacitance of a symmetric gap and the line, each extrapolated over
    three panel densities: keys ``c_series``, ``c_shunt``, ``c_line``."""
    solves = [gap(eps_r, height, width, gap_, d, stripline) for d in DENSITIES]
    return {
        "c_series": _extrapolate([s.c_series for s in solves]),
        "c_shunt": _extrapolate([s.c_shunt for s in solves]),
        "c_line": _extrapolate([s.c_line for s in solves]),
    }


def converged_open_end(
    eps_r: float, height: float, width: float, stripline: bool = False
) -> dict[str, Converged]:
    """Open-end excess capacitance and line capacitance per length, each extrapolated over
    three panel densities: keys ``c_end``, ``c_line``."""
    solves = [open_end(eps_r, height, width, d, stripline) for d in DENSITIES]
    return {
        "c_end": _extrapolate([s.c_end for s in solves]),
        "c_line": _extrapolate([s.c_line for s in solves]),
    }
