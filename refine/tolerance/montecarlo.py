"""Yield under the shop's etch tolerances: batched Monte Carlo and gradient sensitivities.

Tolerance model
---------------
* Independent etch error: every gap width ~ N(s, σ_gap) and every strip width (feed and
  resonators) ~ N(w, σ_width), from the problem's ``fab.gap_tolerance`` and
  ``fab.width_tolerance`` (1-sigma). A gap's error moves its two edges by half each, so the
  resonators on either side lose that half in length (a gap etched wider leaves shorter
  resonators); an open end that faces no gap (a tapped filter's outer ends) recedes by its own
  edge error ~ N(0, σ_width/2), and a tap measured from it moves with it.
* Correlated over-etch (optional): a shop's etch moves every copper edge of a board together.
  One edge shift δ ~ N(0, σ_width/2) per board widens every gap by 2δ and narrows every strip by
  2δ in width and in length (its open ends recede), on top of the independent errors.

All perturbed layouts are evaluated in one batched cascade call per chunk of samples, never a
Python loop per sample. The yield is the fraction of samples whose worst margin on the yield
grid is ≥ 0, with a Wilson 95 % confidence interval (Wilson, J. Am. Stat. Assoc. 22, 209–212,
1927).

* Model error: the circuit model's own uncertainty (the ± of
  :func:`refine.circuit.response.model_uncertainty` on the gaps' series and shunt capacitance,
  on radiation and on the lines' ε_eff and Z0) is systematic, the same for every board of a design, so it is drawn once per
  chunk of :data:`CHUNK` boards, uniformly within its ±: the yield then averages over what the
  model does not know as well as over the etch (``model_error=False`` leaves it out).
* Substrate: eps_r ~ N(eps_r, σ_εr) and height ~ N(h, σ_h) per board, from the problem's
  ``medium.eps_r_tolerance`` and ``medium.height_tolerance``. Each chunk of samples is evaluated
  with a batched substrate whose values are arrays, through the same line and gap formulas.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, replace
from typing import cast

import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine import validity
from refine.circuit import cascade
from refine.circuit.builder import Adjustments, Dim, build
from refine.circuit.layout import Layout
from refine.circuit.model import strip_model_for
from refine.circuit.response import ModelUncertainty, model_uncertainty, strip_medium_for
from refine.physics.substrate import Substrate
from refine.spec.problem import Problem
from refine.validity import require_finite

MAX_SAMPLES = 10**6
CHUNK = (
    100  # samples per batched call: small enough to stay in cache, large enough to amortise Python
)


@dataclass(frozen=True)
class Tolerances:
    """1-sigma etch tolerances in metres; ``correlated`` adds the common edge shift."""

    gap_sigma: float
    width_sigma: float
    correlated: bool = False
    eps_r_sigma: float = 0.0
    height_sigma: float = 0.0

    def __post_init__(self) -> None:
        for name in ("gap_sigma", "width_sigma", "eps_r_sigma", "height_sigma"):
            v.real_in_range(name, getattr(self, name), 0.0, None)
        if not any((self.gap_sigma, self.width_sigma, self.eps_r_sigma, self.height_sigma)):
            raise ValueError(
                "tolerances: every sigma is 0; there is nothing to sample (give "
                "fab.gap_tolerance, fab.width_tolerance, medium.eps_r_tolerance or "
                "medium.height_tolerance in the problem)"
            )

    @classmethod
    def from_problem(cls, problem: Problem, correlated: bool = False) -> Tolerances:
        fab = problem.fab
        if fab is None:
            raise ValueError(
                "yield needs a strip medium with [fab] tolerances; the ideal medium has none"
            )
        return cls(
            fab.gap_tolerance or 0.0,
            fab.width_tolerance or 0.0,
            correlated,
            problem.strip_substrate.eps_r_tolerance,
            problem.strip_substrate.height_tolerance,
        )


@dataclass(frozen=True)
class Samples:
    """Perturbed dimensions, one row per sample (metres)."""

    feed: NDArray
    widths: NDArray
    gaps: NDArray
    lengths: NDArray
    taps: NDArray | None
    eps_r: NDArray | None = None  # per-board substrate, or None for the nominal substrate
    height: NDArray | None = None
    # (n, 5) factors on the gaps' series and shunt capacitance, on radiation and on the lines'
    # eps_eff and Z0 (ModelUncertainty.spread's order), constant over each chunk of CHUNK
    # samples; None for the nominal model. The series factor is the worst gap's: gap k's is
    # 1 + (factor - 1) * series_weights[k] (its own ± over the largest)
    model: NDArray | None = None
    series_weights: NDArray | None = None


@dataclass(frozen=True)
class SubstrateBatch:
    """A substrate whose eps_r and height are arrays of shape (n, 1), one row per board, for
    batched evaluation through the line and gap formulas (which are elementwise). Not validated:
    only :func:`worst_margins` builds it, from a validated :class:`Substrate`."""

    eps_r: NDArray
    height: NDArray
    metal_thickness: float
    loss_tangent: float
    conductivity: float | None
    roughness: float


def sample(
    layout: Layout,
    tol: Tolerances,
    n: int,
    seed: int,
    substrate=None,
    model: ModelUncertainty | None = None,
) -> Samples:
    """``n`` perturbed copies of ``layout`` (reproducible for a given ``seed``); with substrate
    tolerances, also ``n`` boards' eps_r and height around ``substrate``'s nominal values; with
    ``model``, one model error per chunk of boards (see the module docstring)."""
    if (tol.eps_r_sigma or tol.height_sigma) and substrate is None:
        raise ValueError("sample: substrate tolerances need the nominal substrate")
    n = v.integer_in_range("samples", n, 1, MAX_SAMPLES)
    rng = np.random.default_rng(seed)
    nw, ng = layout.order, len(layout.gaps)
    feed = layout.feed_width + rng.normal(0.0, tol.width_sigma, n)
    widths = np.array(layout.widths) + rng.normal(0.0, tol.width_sigma, (n, nw))
    gap_error = rng.normal(0.0, tol.gap_sigma, (n, ng))
    gaps = np.array(layout.gaps) + gap_error
    lengths = np.tile(np.array(layout.lengths), (n, 1))
    taps = None if layout.taps is None else np.tile(np.array(layout.taps), (n, 1))
    # every gap's error is shared by its two edges: the strips either side recede by half
    # (gap coupling: gap k lies between resonators k-1 and k; tapped: between k and k+1)
    first = 1 if len(layout.gaps) == nw + 1 else 0
    for k in range(ng):
        for j in (k - first, k - first + 1):
            if 0 <= j < nw:
                lengths[:, j] -= 0.5 * gap_error[:, k]
    if tol.correlated:
        delta = rng.normal(0.0, tol.width_sigma / 2.0, n)[:, None]
        feed = feed - 2 * delta[:, 0]
        widths = widths - 2 * delta
        gaps = gaps + 2 * delta
        lengths = lengths - 2 * delta
        if taps is not None:
            taps = taps - delta  # the tap's centre line moves with the receding open end
    eps_r = height = None
    if tol.eps_r_sigma or tol.height_sigma:  # drawn after the etch errors: same seed, same etch
        eps_r = np.maximum(substrate.eps_r + rng.normal(0.0, tol.eps_r_sigma, n), 1.0)
        height = np.maximum(
            substrate.height + rng.normal(0.0, tol.height_sigma, n), 0.5 * substrate.height
        )
    if first == 0 and tol.width_sigma:  # open ends that face no gap: their own edge error
        outer = rng.normal(0.0, tol.width_sigma / 2.0, (n, 2))
        lengths[:, 0] -= outer[:, 0]
        lengths[:, -1] -= outer[:, 1]
        if taps is not None:  # each tap is measured from its resonator's outer open end
            taps[:, 0] -= outer[:, 0]
            taps[:, -1] -= outer[:, 1]
    factors = weights = None
    if model is not None and model.any:
        chunks = -(-n // CHUNK)
        spread = np.array(model.spread)
        draws = 1.0 + rng.uniform(-1.0, 1.0, (chunks, spread.size)) * spread
        factors = np.repeat(draws, CHUNK, axis=0)[:n]
        if model.series:
            weights = np.array(model.series_of(len(layout.gaps))) / model.series
    floor = 1e-9  # an etch error cannot make a dimension vanish or go negative
    clip = lambda x: np.maximum(x, floor)  # noqa: E731
    return Samples(
        clip(feed),
        clip(widths),
        clip(gaps),
        clip(lengths),
        None if taps is None else clip(taps),
        eps_r,
        height,
        factors,
        weights,
    )


def nominal_samples(layout: Layout) -> Samples:
    """The nominal layout as a batch of one."""
    return Samples(
        np.array([layout.feed_width]),
        np.array([layout.widths]),
        np.array([layout.gaps]),
        np.array([layout.lengths]),
        None if layout.taps is None else np.array([layout.taps]),
    )


def yield_grid(problem: Problem, points_per_region: int = 121) -> NDArray:
    """The grid yield is judged on (every mask region, exact edges)."""
    return problem.mask.sample(points_per_region, points_per_region)


def worst_margins(problem: Problem, samples: Samples, f: NDArray) -> NDArray:
    """Worst margin (dB) of every sample, evaluated in batched cascade calls of ``CHUNK``."""
    nominal = strip_medium_for(problem)
    n = samples.widths.shape[0]
    ng = samples.gaps.shape[1]
    out = np.empty(n)
    sub = problem.strip_substrate
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        for a in range(0, n, CHUNK):
            sl = slice(a, min(a + CHUNK, n))
            medium = nominal
            if samples.eps_r is not None and samples.height is not None:
                batch = SubstrateBatch(
                    samples.eps_r[sl, None],
                    samples.height[sl, None],
                    sub.metal_thickness,
                    sub.loss_tangent,
                    sub.conductivity,
                    sub.roughness,
                )
                # a substrate whose values are arrays: the line formulas are elementwise
                medium = replace(nominal, substrate=cast(Substrate, batch))
            els = build(
                problem.external,
                medium,
                problem.gap_model,
                samples.feed[sl],
                samples.widths[sl],
                samples.gaps[sl],
                samples.lengths[sl],
                None if samples.taps is None else samples.taps[sl],
                f,
                None
                if samples.model is None
                else _adjustments(samples.model[a], ng, samples.series_weights),
            ).elements
            t = cascade.s11_s21(els, f, problem.z_ref)
            margins = problem.mask.margins(f, t.s11, t.s21)
            out[sl] = np.min(np.concatenate(list(margins.values()), axis=-1), axis=-1)
    return out


def _adjustments(factors: NDArray, n_gaps: int, weights: NDArray | None = None) -> Adjustments:
    """One chunk's model error as the builder's adjustments (``weights``: each gap's series ±
    over the largest; None: all alike)."""
    series, shunt, radiation, eps_eff, z0 = (float(x) for x in factors)
    w = np.ones(n_gaps) if weights is None else weights
    return Adjustments(
        c_series_factors=tuple(float(x) for x in 1.0 + (series - 1.0) * w),
        c_shunt_factor=shunt,
        radiation_factor=radiation,
        eps_eff_factor=eps_eff,
        z0_factor=z0,
    )


def wilson_interval(k: int, n: int, z: float = 1.959964) -> tuple[float, float]:
    """Wilson score interval for k successes in n trials (95 % for the default z)."""
    p = k / n
    den = 1.0 + z * z / n
    centre = (p + z * z / (2 * n)) / den
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / den
    return max(0.0, centre - half), min(1.0, centre + half)


@dataclass(frozen=True)
class Sensitivity:
    """How much one dimension moves the nominal worst margin: dB per metre and per 1-sigma."""

    name: str
    db_per_m: float
    db_per_sigma: float


@dataclass(frozen=True)
class YieldResult:
    samples: int
    seed: int
    tolerances: Tolerances
    yield_fraction: float
    interval: tuple[float, float]
    nominal_margin: float
    margins: NDArray
    sensitivities: tuple[Sensitivity, ...]
    model: ModelUncertainty | None = None  # the model error sampled, None when left out

    def quantiles(self) -> dict[str, float]:
        q = np.quantile(self.margins, [0.05, 0.5, 0.95])
        return {"p05": float(q[0]), "median": float(q[1]), "p95": float(q[2])}


def sensitivities(
    problem: Problem, layout: Layout, tol: Tolerances, f: NDArray
) -> tuple[Sensitivity, ...]:
    """d(worst margin)/d(dimension) at the nominal layout from the analytic gradient of the
    binding constraint, ranked by the effect of a 1-sigma error."""
    medium = strip_medium_for(problem)
    model = strip_model_for(medium, problem.gap_model, problem.z_ref, layout, f, True)
    p = model.vector(layout)
    r = model.response(p, True)
    g, jac = problem.mask.constraints(f, r.s11, r.s21, r.ds11, r.ds21)
    assert jac is not None  # asked for with the derivatives
    row = -jac[int(np.argmax(g))]  # d(worst margin)/dp = -d(max g)/dp
    out = []
    for name, (kind, _), d in zip(model.names, model.dims, row, strict=True):
        if kind is Dim.GAP:
            sigma = tol.gap_sigma
        elif kind is Dim.WIDTH:
            sigma = tol.width_sigma
        elif kind is Dim.LENGTH:  # half of each neighbouring gap's error (about σ_gap/√2 for
            # two neighbours), and 2δ with σ_δ = σ_width/2 under the correlated etch
            sigma = math.hypot(
                tol.gap_sigma / math.sqrt(2.0), tol.width_sigma if tol.correlated else 0.0
            )
        else:  # a tap: its open end's own edge error, and δ under the correlated etch
            sigma = math.hypot(
                tol.width_sigma / 2.0, tol.width_sigma / 2.0 if tol.correlated else 0.0
            )
        out.append(Sensitivity(name, float(d), float(abs(d) * sigma)))
    for name, sigma in (("eps_r", tol.eps_r_sigma), ("height", tol.height_sigma)):
        if sigma:  # not a layout dimension: a central difference of the nominal worst margin
            base = getattr(problem.substrate, name)
            h = 1e-4 * base
            one = nominal_samples(layout)
            wm = []
            for x in (base + h, base - h):
                er = np.array([x if name == "eps_r" else problem.strip_substrate.eps_r])
                hh = np.array([x if name == "height" else problem.strip_substrate.height])
                wm.append(
                    worst_margins(
                        problem,
                        Samples(one.feed, one.widths, one.gaps, one.lengths, one.taps, er, hh),
                        f,
                    )[0]
                )
            d = (wm[0] - wm[1]) / (2 * h)
            out.append(Sensitivity(f"substrate {name}", float(d), float(abs(d) * sigma)))
    return tuple(sorted(out, key=lambda s: -s.db_per_sigma))


def estimate_yield(
    problem: Problem,
    layout: Layout,
    samples: int = 2000,
    seed: int = 0,
    correlated: bool = False,
    model_error: bool = True,
) -> YieldResult:
    """Monte Carlo yield of ``layout`` against ``problem``'s mask under its fab tolerances and,
    with ``model_error``, the circuit model's stated uncertainty."""
    if problem.medium == "ideal":
        raise ValueError(
            "yield needs a strip medium with [fab] tolerances; the ideal medium has none"
        )
    tol = Tolerances.from_problem(problem, correlated)
    unc = model_uncertainty(problem, layout) if model_error else None
    s = sample(layout, tol, samples, seed, problem.substrate, unc)
    f = yield_grid(problem)
    m = worst_margins(problem, s, f)
    nominal = worst_margins(problem, nominal_samples(layout), f)[0]
    require_finite(f"{problem.name}: Monte Carlo margins", m)
    k = int(np.sum(m >= 0.0))
    return YieldResult(
        samples,
        seed,
        tol,
        k / samples,
        wilson_interval(k, samples),
        float(nominal),
        m,
        sensitivities(problem, layout, tol, f),
        unc if s.model is not None else None,
    )


__all__ = [
    "Samples",
    "Sensitivity",
    "Tolerances",
    "YieldResult",
    "estimate_yield",
    "sample",
    "wilson_interval",
    "worst_margins",
]
