"""Monte Carlo yield of a parallel-coupled layout under the shop's tolerances.

What is sampled, per board: every section's spacing with an independent normal error of the
shop's ``gap_tolerance`` and every section's strip width with one of its ``width_tolerance``
(the same independent model as the end-coupled yield's default, :mod:`refine.tolerance.
montecarlo`; no correlated over-etch, no substrate tolerances, lengths as drawn); and, unless
told not to, the coupled-line model's own uncertainty (:data:`refine.optimise.parallel.
UNCERTAINTY`), drawn once per :data:`~refine.tolerance.montecarlo.CHUNK` boards uniformly within
its ±, as the end-coupled yield does. A board passes when every mask region's margin is ≥ 0 on
the yield grid; the yield carries its Wilson 95 % interval. Every chunk of boards is one batched
cascade call (:func:`refine.circuit.builder.parallel_build`).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from refine import validity
from refine.circuit import cascade
from refine.circuit.builder import parallel_build
from refine.circuit.layout import ParallelLayout
from refine.circuit.response import strip_medium_for
from refine.optimise.parallel import UNCERTAINTY
from refine.spec.problem import Problem
from refine.tolerance.montecarlo import CHUNK, MAX_SAMPLES, wilson_interval, yield_grid


@dataclass(frozen=True)
class ParallelYield:
    """Yield of a parallel-coupled layout: boards, seed, the fraction passing with its 95 %
    interval, the nominal worst margin and every board's worst margin (dB)."""

    samples: int
    seed: int
    yield_fraction: float
    interval: tuple[float, float]
    nominal_margin: float
    margins: np.ndarray
    gap_sigma: float
    width_sigma: float
    model_error: bool
    widths: np.ndarray  # (samples, sections) as sampled
    spacings: np.ndarray

    def percentiles(self) -> tuple[float, float, float]:
        """The sampled worst margin's 5 %, 50 % and 95 % points (dB)."""
        p5, p50, p95 = np.percentile(self.margins, [5, 50, 95])
        return float(p5), float(p50), float(p95)


def estimate_parallel_yield(
    problem: Problem,
    layout: ParallelLayout,
    samples: int,
    seed: int = 0,
    model_error: bool = True,
) -> ParallelYield:
    """The yield of ``layout`` (see the module docstring)."""
    if not 1 <= samples <= MAX_SAMPLES:
        raise ValueError(f"samples = {samples} is outside the allowed range 1..{MAX_SAMPLES}")
    fab = problem.strip_fab
    sg, sw = fab.gap_tolerance or 0.0, fab.width_tolerance or 0.0
    rng = np.random.default_rng(seed)
    m = len(layout.widths)
    w0, s0 = np.array(layout.widths), np.array(layout.spacings)
    widths = np.maximum(w0 + sw * rng.standard_normal((samples, m)), 0.05 * w0)
    spacings = np.maximum(s0 + sg * rng.standard_normal((samples, m)), 0.05 * s0)
    lengths = np.broadcast_to(np.array(layout.lengths), (samples, m))
    n_chunks = -(-samples // CHUNK)
    corners = rng.uniform(-1.0, 1.0, (n_chunks, 4)) * np.array(UNCERTAINTY)
    f = yield_grid(problem)
    medium = strip_medium_for(problem)

    def worst(w, s, ln, factors) -> np.ndarray:
        els = parallel_build(
            medium, problem.gap_model, w, s, ln, f, factors, feed_stub=layout.feed_stub
        ).elements
        t = cascade.s11_s21(els, f, problem.z_ref)
        margins = problem.mask.margins(f, t.s11, t.s21)
        return np.min(np.concatenate(list(margins.values()), axis=-1), axis=-1)

    out = np.empty(samples)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        nominal = float(worst(w0[None], s0[None], np.array(layout.lengths)[None], None)[0])
        for k in range(n_chunks):
            sl = slice(k * CHUNK, min((k + 1) * CHUNK, samples))
            fac = tuple(1.0 + corners[k]) if model_error else None
            out[sl] = worst(widths[sl], spacings[sl], lengths[sl], fac)
    passed = int(np.sum(out >= 0.0))
    return ParallelYield(
        samples,
        seed,
        passed / samples,
        wilson_interval(passed, samples),
        nominal,
        out,
        sg,
        sw,
        model_error,
        widths,
        spacings,
    )


__all__ = ["ParallelYield", "estimate_parallel_yield"]
