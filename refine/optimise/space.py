"""The one design space: variables with bounds from the fab rules, mirror ties, the log map the
optimiser works in, snapping to the shop's grid, and the fab-rule check.

The refiner, yield centring and EM-corrected refinement all move a layout through a
:class:`DesignSpace` built here; the shop's minimum gap and grid are applied only here.

Variables are the physical dimensions of :class:`refine.circuit.model.StripFilterModel` (gaps,
lengths, taps, widths, in metres) or the ideal design's capacitances and electrical lengths.
The optimiser works in z = log(p) so that one tolerance fits gaps of a few micrometres and
lengths of centimetres.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine.circuit.builder import Dim
from refine.circuit.layout import Layout
from refine.circuit.model import StripFilterModel
from refine.spec.coupling import Coupling
from refine.spec.fab import FabRules
from refine.spec.problem import Problem


@dataclass(frozen=True)
class Variable:
    """One physical dimension: name, value, bounds (SI), and whether the refiner may move it.

    Bounds must satisfy 0 < lower < upper and lower <= value <= upper; reversed or empty bounds
    are an error, never swapped or clipped.
    """

    name: str
    value: float
    lower: float
    upper: float
    free: bool = True

    def __post_init__(self) -> None:
        for k in ("value", "lower", "upper"):
            v.positive(f"{self.name}.{k}", getattr(self, k))
        if not self.lower < self.upper:
            raise ValueError(
                f"{self.name}: bounds [{self.lower:g}, {self.upper:g}] are reversed or empty "
                "(lower must be below upper)"
            )
        if not self.lower <= self.value <= self.upper:
            raise ValueError(
                f"{self.name} = {self.value:g} is outside its bounds [{self.lower:g}, {self.upper:g}]"
            )


class DesignSpace:
    """Variables, mirror ties and the map between free log-variables z and physical values p.

    ``ties`` lists groups of variable indices that share one free variable (mirror symmetry).
    p_i = exp(z_k(i)) for free variables; fixed ones keep their value.
    """

    def __init__(self, variables: Sequence[Variable], ties: Sequence[Sequence[int]] = ()):
        self.variables = list(variables)
        self.ties = [list(t) for t in ties]
        n = len(self.variables)
        group = list(range(n))
        for tie in ties:
            tie = list(tie)
            for i in tie:
                v.integer_in_range("tie index", i, 0, n - 1)
            for i in tie[1:]:
                group[i] = group[tie[0]]
        free_groups: list[int] = []
        for i, var in enumerate(self.variables):
            if var.free and group[i] not in free_groups:
                free_groups.append(group[i])
        self._index = [
            free_groups.index(group[i]) if self.variables[i].free else -1 for i in range(n)
        ]
        self.n_free = len(free_groups)
        lo = np.full(self.n_free, -np.inf)
        hi = np.full(self.n_free, np.inf)
        for i, var in enumerate(self.variables):
            k = self._index[i]
            if k >= 0:
                lo[k] = max(lo[k], math.log(var.lower))
                hi[k] = min(hi[k], math.log(var.upper))
        if np.any(lo >= hi):
            k = int(np.argmax(lo >= hi))
            raise ValueError(f"tied variables of free variable {k} have no common range")
        self.lower, self.upper = lo, hi
        self._fixed = np.array([var.value for var in self.variables])

    def to_physical(self, z: NDArray) -> NDArray:
        p = self._fixed.copy()
        for i, k in enumerate(self._index):
            if k >= 0:
                p[i] = math.exp(z[k])
        return p

    def to_free(self, p: NDArray) -> NDArray:
        z = np.zeros(self.n_free)
        count = np.zeros(self.n_free)
        for i, k in enumerate(self._index):
            if k >= 0:
                z[k] += math.log(p[i])
                count[k] += 1
        return z / count

    def chain(self, p: NDArray, dp: NDArray) -> NDArray:
        """d/dz from d/dp (rows = physical parameters) for p = exp(z)."""
        out = np.zeros((self.n_free, *dp.shape[1:]), dp.dtype)
        for i, k in enumerate(self._index):
            if k >= 0:
                out[k] += p[i] * dp[i]
        return out

    def at_bounds(self, z: NDArray, tol: float = 1e-6) -> list[str]:
        names = []
        for i, k in enumerate(self._index):
            if k >= 0 and (z[k] <= self.lower[k] + tol or z[k] >= self.upper[k] - tol):
                side = "lower" if z[k] <= self.lower[k] + tol else "upper"
                names.append(f"{self.variables[i].name} at its {side} bound")
        return names

    def values(self) -> NDArray:
        """The variables' values (physical units)."""
        return np.array([var.value for var in self.variables])

    def clip(self, p: NDArray) -> NDArray:
        """``p`` clipped into every variable's bounds."""
        lo = [var.lower for var in self.variables]
        hi = [var.upper for var in self.variables]
        return np.clip(p, lo, hi)

    def start(self) -> NDArray:
        """The free variables z of the variables' values."""
        return self.to_free(self.values())

    def with_fixed(self, p: NDArray, keep_free: Sequence[bool]) -> DesignSpace:
        """The same space at ``p`` (clipped into the bounds), with only the variables flagged in
        ``keep_free`` still free."""
        q = self.clip(p)
        fixed = [
            Variable(var.name, float(x), var.lower, var.upper, free=bool(k) and var.free)
            for var, x, k in zip(self.variables, q, keep_free, strict=True)
        ]
        return DesignSpace(fixed, self.ties)


def mirror_ties(n_items: int, offset: int) -> list[list[int]]:
    """Index pairs (i, n-1-i) of ``n_items`` variables starting at ``offset``."""
    return [[offset + i, offset + n_items - 1 - i] for i in range(n_items // 2)]


def layout_ties(model: StripFilterModel) -> list[list[int]]:
    """Mirror ties of a symmetric strip layout: gap k with gap -k, length j with length -j, the
    two taps, width j with width -j."""
    out: list[list[int]] = []
    for kind in Dim:
        idx = [i for i, (k, _) in enumerate(model.dims) if k is kind]
        if idx:
            out += mirror_ties(len(idx), idx[0])
    return sorted(out, key=lambda t: t[0])


Constraint = Callable[[NDArray], tuple[NDArray, NDArray]]


def gap_sides(external: Coupling, n: int) -> list[tuple[int | None, int | None]]:
    """The two strips each gap of an ``n``-resonator layout with ``external`` coupling faces,
    input side first: a resonator's index, or None for a feed line (the end gaps of a
    gap-coupled layout)."""
    if external is Coupling.GAP:
        return [(None if k == 0 else k - 1, None if k == n else k) for k in range(n + 1)]
    return [(k, k + 1) for k in range(n - 1)]


def _width_bounds(
    fab: FabRules, height: float, seed: Layout, width_range: tuple[float, float] | None
) -> tuple[float, float]:
    """The refinable resonator widths' bounds (see :func:`layout_space`)."""
    lo_w = max(0.5 * seed.feed_width, fab.min_width or 0.0)
    hi_w = 3.0 * seed.feed_width
    if width_range is not None:  # inside the model's range, but the feed width stays legal
        lo_w = max(lo_w, min(width_range[0] * height, seed.feed_width))
        hi_w = min(hi_w, max(width_range[1] * height, seed.feed_width))
        if fab.grid is not None:  # bounds on the grid, so that snapping stays inside them
            g = fab.grid
            lo_w, hi_w = math.ceil(lo_w / g - 1e-9) * g, math.floor(hi_w / g + 1e-9) * g
    return lo_w, max(hi_w, 1.01 * lo_w)


def layout_space(
    fab: FabRules,
    height: float,
    model: StripFilterModel,
    seed: Layout,
    symmetric: bool = True,
    width_range: tuple[float, float] | None = None,
    gap_range: tuple[float, float] | None = None,
    gap_sw_range: tuple[float, float] | None = None,
) -> DesignSpace:
    """The refiner's variables for a strip layout: gaps from the shop's minimum to
    max(4 s, 2 h, 2 s_min), and inside ``gap_range`` (s/h, the gap model's range; the upper
    limit may be inf) and ``gap_sw_range`` (s/W against each strip the gap faces) when given,
    though never below the shop's minimum; lengths ±25/30 %, taps inside the end resonators,
    widths from max(W_feed/2, W_min) to 3 W_feed, and inside ``width_range`` (W/h, the gap
    model's stated range) when given, though never narrower than the feed allows; mirror-tied
    when ``symmetric``. With refinable widths a gap's s/W bounds hold for every width the box
    allows on a fixed side and only as far as the box can say on a refinable one (s at least
    the floor times the larger of the two strips' narrowest widths, at most the ceiling times
    the smaller of their widest):
    :func:`gap_ratio_constraint` then holds the ratio itself."""
    p0 = model.vector(seed)
    variables: list[Variable] = []
    gaps, lengths, taps, widths = model.split(p0)
    ng, n = len(gaps), len(lengths)
    lo_w, hi_w = _width_bounds(fab, height, seed, width_range)

    def side(j: int | None) -> tuple[float, float]:  # a strip's narrowest and widest width
        if j is None:
            return seed.feed_width, seed.feed_width
        if model.free_widths:
            return lo_w, hi_w
        return float(widths[j]), float(widths[j])

    sides = gap_sides(model.external, model.order)
    for k, s in enumerate(gaps):
        s = max(s, fab.min_gap)
        lo_s, hi_s = fab.min_gap, max(4.0 * s, 2.0 * height, 2.0 * fab.min_gap)
        inside = gap_range is not None or gap_sw_range is not None
        if gap_range is not None:  # inside the model's range, above the shop's minimum
            lo_s = max(lo_s, gap_range[0] * height)
            hi_s = min(hi_s, gap_range[1] * height)
        if gap_sw_range is not None:
            (a_lo, a_hi), (b_lo, b_hi) = side(sides[k][0]), side(sides[k][1])
            lo_s = max(lo_s, gap_sw_range[0] * max(a_lo, b_lo))
            hi_s = min(hi_s, gap_sw_range[1] * min(a_hi, b_hi))
        if inside:
            hi_s = max(hi_s, 1.01 * lo_s)
            if fab.grid is not None:  # bounds on the grid, so that snapping stays inside them
                g = fab.grid
                lo_s = math.ceil(lo_s / g - 1e-9) * g
                hi_s = max(math.floor(hi_s / g + 1e-9) * g, lo_s + g)
        variables.append(Variable(model.names[k], min(max(s, lo_s), hi_s), lo_s, hi_s))
    for j, ln in enumerate(lengths):
        variables.append(Variable(model.names[ng + j], ln, 0.75 * ln, 1.3 * ln))
    k = ng + n
    if taps is not None:
        lo_len = 0.75 * min(lengths[0], lengths[-1])  # the shortest the end resonators may become
        for i, t in enumerate(taps):
            variables.append(
                Variable(
                    model.names[k + i], t, min(0.01 * lo_len, 0.5 * t), max(0.9 * lo_len, 1.01 * t)
                )
            )
        k += 2
    if model.free_widths:
        for j, w in enumerate(widths):
            variables.append(Variable(model.names[k + j], min(max(w, lo_w), hi_w), lo_w, hi_w))
    return DesignSpace(variables, layout_ties(model) if symmetric else ())


def gap_ratio_constraint(
    space: DesignSpace,
    model: StripFilterModel,
    gap_sw_range: tuple[float, float] | None,
) -> Constraint | None:
    """A gap model's s/W range as inequalities g(z) <= 0 with their Jacobian in z, for a layout
    whose widths are refinable (with fixed widths :func:`layout_space`'s bounds already hold
    it; then None, as with no range): for each gap and each refinable strip it faces,
    100 ln(floor·W/s) and 100 ln(s/(ceiling·W)) (about the excess in %)."""
    if gap_sw_range is None or not model.free_widths:
        return None
    lo, hi = gap_sw_range
    n_gaps = len(model.split(np.zeros(len(model.names)))[0])
    w0 = n_gaps + model.order + (2 if model.external is Coupling.TAP else 0)
    # (gap, width) index pairs; a feed's side is a fixed bound of layout_space
    pairs = [
        (k, w0 + j)
        for k, ab in enumerate(gap_sides(model.external, model.order))
        for j in ab
        if j is not None
    ]

    def extra(z: NDArray) -> tuple[NDArray, NDArray]:
        p = space.to_physical(z)
        g = np.empty(2 * len(pairs))
        dp = np.zeros((len(p), 2 * len(pairs)))
        for i, (ks, kw) in enumerate(pairs):
            r = math.log(p[ks] / p[kw])
            g[2 * i], g[2 * i + 1] = 100.0 * (math.log(lo) - r), 100.0 * (r - math.log(hi))
            dp[ks, 2 * i], dp[kw, 2 * i] = -100.0 / p[ks], 100.0 / p[kw]
            dp[ks, 2 * i + 1], dp[kw, 2 * i + 1] = 100.0 / p[ks], -100.0 / p[kw]
        return g, space.chain(p, dp).T

    return extra


def all_of(*constraints: Constraint | None) -> Constraint | None:
    """Inequality constraints g(z) <= 0 (each with its Jacobian in z) as one, skipping None;
    None when there are none."""
    kept = [c for c in constraints if c is not None]
    if not kept:
        return None
    if len(kept) == 1:
        return kept[0]

    def extra(z: NDArray) -> tuple[NDArray, NDArray]:
        parts = [c(z) for c in kept]
        return np.concatenate([g for g, _ in parts]), np.vstack([j for _, j in parts])

    return extra


def problem_space(problem: Problem, model: StripFilterModel, seed: Layout) -> DesignSpace:
    """:func:`layout_space` with a problem's shop rules, substrate height and the gap model's
    W/h, s/h and s/W ranges (as the problem allows them)."""
    return layout_space(
        problem.strip_fab,
        problem.strip_substrate.height,
        model,
        seed,
        width_range=problem.width_range,
        gap_range=problem.gap_range,
        gap_sw_range=problem.gap_sw_range,
    )


def step_space(
    model: StripFilterModel,
    layout: Layout,
    log_gap: float,
    rel_length: float,
    min_gap: float | None,
) -> DesignSpace:
    """A trust region around ``layout``: each gap within a factor exp(±``log_gap``) and at or
    above ``min_gap`` (None: no floor, for fitting rather than building), each length, tap or
    width within ±``rel_length``; mirror-tied when the layout is symmetric."""
    variables = []
    for name, (kind, _), x in zip(model.names, model.dims, model.vector(layout), strict=True):
        if kind is Dim.GAP:
            lo, hi = x * math.exp(-log_gap), x * math.exp(log_gap)
            if min_gap is not None:
                lo = max(lo, min_gap)
        else:
            lo, hi = x * (1.0 - rel_length), x * (1.0 + rel_length)
        variables.append(Variable(name, min(max(x, lo), hi), lo, max(hi, lo * (1 + 1e-9))))
    return DesignSpace(variables, layout_ties(model) if layout.is_mirror else ())


def snap(p: NDArray, model: StripFilterModel, fab: FabRules) -> NDArray:
    """Every dimension of ``p`` on the shop's grid; a gap that would round below the minimum
    goes up to the first grid point at or above it."""
    q = fab.on_grid(p).copy()
    if fab.grid is not None:
        is_gap = np.array([kind is Dim.GAP for kind, _ in model.dims])
        below = is_gap & (q < fab.min_gap - 1e-15)
        q[below] = np.ceil(fab.min_gap / fab.grid - 1e-9) * fab.grid
    return q


def snap_layout(fab: FabRules, model: StripFilterModel, layout: Layout) -> tuple[Layout, list[str]]:
    """``layout`` with every gap at or above the shop's minimum and every dimension the model
    moves on the shop's grid; a note for each gap raised to the minimum."""
    p = model.vector(layout)
    notes = []
    for (kind, _), name, x in zip(model.dims, model.names, p, strict=True):
        if kind is Dim.GAP and x < fab.min_gap:
            notes.append(
                f"{name}: asked for {x * 1e6:.1f} um, held at the shop's minimum "
                f"{fab.min_gap * 1e6:g} um"
            )
    is_gap = np.array([kind is Dim.GAP for kind, _ in model.dims])
    p = np.where(is_gap, np.maximum(p, fab.min_gap), p)
    if fab.grid is not None:
        p = snap(p, model, fab)
    return model.layout(p), notes


def on_grid(p: NDArray, model: StripFilterModel, fab: FabRules) -> bool:
    """Whether snapping would leave ``p`` where it is."""
    if fab.grid is None:
        return True
    return bool(np.allclose(snap(p, model, fab), p, rtol=0, atol=1e-12))


def fab_violations(fab: FabRules, layout: Layout) -> list[str]:
    """Every fab rule the layout breaks (an empty list is the only acceptable answer)."""
    out = []
    for k, s in enumerate(layout.gaps):
        if s < fab.min_gap * (1 - 1e-12):
            out.append(
                f"gap {k} = {s * 1e6:.3f} um is below the minimum gap {fab.min_gap * 1e6:.3f} um"
            )
    if fab.min_width is not None:
        for j, w in enumerate((layout.feed_width, *layout.widths)):
            if w < fab.min_width * (1 - 1e-12):
                out.append(
                    f"width {j} = {w * 1e6:.3f} um is below the minimum width {fab.min_width * 1e6:.3f} um"
                )
    if fab.max_total_length is not None and layout.total_length > fab.max_total_length * (
        1 + 1e-12
    ):
        out.append(
            f"total length {layout.total_length * 1e3:.3f} mm exceeds {fab.max_total_length * 1e3:.3f} mm"
        )
    return out
