"""Graded rectilinear mesh lines for the field solver (one axis at a time, metres).

Every strip edge and gap edge is a fixed line with its own local cell size; between fixed lines
the cells grow geometrically (by at most ``ratio`` from one cell to the next) up to ``d_max``.
The usual FDTD rules behind it: about 20 cells per wavelength in the densest dielectric, cells
no larger than a few tenths of the smallest feature at metal edges, and neighbour cells within
a factor of about 1.5 (common practice, no source). Pure functions of arrays.
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence

import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine.physics.constants import C0


def max_cell(f_max: float, eps_r: float, cells_per_wavelength: float = 20) -> float:
    """Largest cell: the shortest wavelength in the dielectric over ``cells_per_wavelength``."""
    v.positive("f_max", f_max)
    return C0 / (f_max * np.sqrt(eps_r)) / cells_per_wavelength


def _merge(points: list[tuple[float, float]]) -> list[tuple[float, float]]:
    """Sort fixed points and merge any two closer than half their smaller cell (a sliver cell
    would only shrink the time step); the merged point keeps the smaller cell size."""
    pts = sorted(points)
    out: list[tuple[float, float]] = []
    group: list[tuple[float, float]] = []
    for p in pts:
        if group and p[0] - group[-1][0] < 0.5 * min(p[1], group[-1][1]):
            group.append(p)
            continue
        if group:
            out.append((float(np.mean([g[0] for g in group])), min(g[1] for g in group)))
        group = [p]
    if group:
        out.append((float(np.mean([g[0] for g in group])), min(g[1] for g in group)))
    return out


def graded_lines(
    points: Sequence[tuple[float, float]],
    lo: float,
    hi: float,
    d_max: float,
    ratio: float = 1.3,
) -> NDArray[np.float64]:
    """Mesh lines on ``[lo, hi]`` through every fixed point.

    points : (position, local cell size) pairs; positions outside ``[lo, hi]`` are dropped.
    d_max : the largest cell anywhere. ratio : the largest growth from one cell to the next
        (1 < ratio ≤ 2).

    The allowed cell size at x is ``min(d_max, min_p(d_p + (ratio - 1)|x - p|))``; each
    interval between fixed lines gets the fewest cells that respect it on average, spread so
    that the cell count per unit of allowed size is uniform; the cell touching a fixed point is
    therefore up to ``1/(1 - (ratio - 1)/2)`` times its nominal size (1.18 for ratio 1.3).
    """
    if not hi > lo:
        raise ValueError(f"mesh interval must have hi > lo, got [{lo}, {hi}]")
    v.positive("d_max", d_max)
    v.real_in_range("ratio", ratio, 1.0, 2.0, lo_open=True)
    inner = [(float(p), min(float(d), d_max)) for p, d in points if lo < p < hi]
    for p, d in inner:
        v.positive(f"mesh cell at {p}", d)
    fixed = _merge([(lo, d_max), (hi, d_max), *inner])
    # the domain ends are fixed exactly
    fixed[0] = (lo, fixed[0][1])
    fixed[-1] = (hi, fixed[-1][1])
    pos = np.array([p for p, _ in fixed])
    size = np.array([d for _, d in fixed])

    def allowed(x: NDArray) -> NDArray:
        return np.minimum(
            d_max, np.min(size[:, None] + (ratio - 1.0) * np.abs(x[None, :] - pos[:, None]), 0)
        )

    lines = [pos[:1]]
    for a, b in itertools.pairwise(pos):
        # uniform samples plus geometric ones towards both ends, so that the allowed size is
        # resolved next to a fine fixed point even on a long interval
        ends = (b - a) * np.geomspace(1e-4, 1.0, 200)
        x = np.unique(np.concatenate([np.linspace(a, b, 801), a + ends, b - ends]))
        x = x[(x >= a) & (x <= b)]
        dens = 1.0 / allowed(x)
        cum = np.concatenate(([0.0], np.cumsum(0.5 * (dens[1:] + dens[:-1]) * np.diff(x))))
        n = max(1, int(np.ceil(cum[-1] - 1e-6)))
        inner_x = np.interp(np.arange(1, n) * cum[-1] / n, cum, x)
        lines.append(inner_x)
        lines.append(np.array([b]))
    return np.concatenate(lines)


def symmetric(lines: NDArray, centre: float) -> NDArray:
    """Mirror the lines at or above ``centre`` onto the other side, so that a mirror-symmetric
    structure gets a mirror-symmetric mesh to the last bit."""
    tol = 1e-3 * float(np.min(np.diff(lines)))
    upper = lines[lines > centre + tol]
    mid = [centre] if np.any(np.abs(lines - centre) <= tol) else []
    return np.concatenate((2.0 * centre - upper[::-1], mid, upper))
