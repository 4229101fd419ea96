"""Yield Monte Carlo: batched evaluation vs a per-sample loop over the same engine, in one run.

    python benchmarks/yield.py

The bundled X-band thin-film problem's refined layout (written by ``refine design``; recomputed
here if absent), 10,000 samples of the fab tolerances on the yield grid. The batched path
evaluates ``refine.tolerance.montecarlo.CHUNK`` samples per cascade call; the baseline calls the same
engine once per sample (timed on 300 samples). Prints the per-sample cost of each and the ratio.
"""

from __future__ import annotations

import statistics
import sys
import time
import warnings
from pathlib import Path

from refine.optimise.refiner import refine_problem
from refine.spec.problem import load_problem
from refine.tolerance import montecarlo as tolerance
from refine.validity import ModelRangeWarning

ROOT = Path(__file__).resolve().parent.parent


def main() -> int:
    warnings.simplefilter("ignore", ModelRangeWarning)
    problem = load_problem(ROOT / "problems/microstrip-x-band-alumina-n3.toml")
    layout = refine_problem(problem).layout
    tol = tolerance.Tolerances.from_problem(problem)
    f = tolerance.yield_grid(problem)
    big = tolerance.sample(layout, tol, 10_000, seed=1)
    times = []
    for _ in range(3):
        t0 = time.perf_counter()
        margins = tolerance.worst_margins(problem, big, f)
        times.append(time.perf_counter() - t0)
    t_batch = statistics.median(times) / 10_000
    small = tolerance.sample(layout, tol, 300, seed=2)
    t0 = time.perf_counter()
    for k in range(300):
        one = tolerance.Samples(
            small.feed[[k]], small.widths[[k]], small.gaps[[k]], small.lengths[[k]], None
        )
        tolerance.worst_margins(problem, one, f)
    t_single = (time.perf_counter() - t0) / 300
    print(
        f"yield grid {f.size} points; 10,000 samples batched ({tolerance.CHUNK} per call): "
        f"{statistics.median(times):.2f} s, {t_batch * 1e3:.3f} ms per sample"
    )
    print(f"one sample per call (300 samples): {t_single * 1e3:.3f} ms per sample")
    print(
        f"per-sample cost of the batch = 1/{t_single / t_batch:.1f} of a single call; "
        f"yield {100 * (margins >= 0).mean():.1f} %"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
