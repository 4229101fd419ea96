"""Field solver against the circuit model on a refined 3-pole filter, and EM-corrected
refinement, in one run.

    python benchmarks/em.py [--problem P] [--mesh coarse|fine] [--method M] [--docs]

The bundled problem (default ``ms-alumina-tap-10g-n3-8pct``, our own scenario: 10 GHz, 8 %,
tapped, alumina, 50 um minimum gap, resonators at the feed width) is refined on the circuit
model for its largest worst margin, then field-solved with openEMS; the circuit model's
evaluation on the same frequencies is timed beside it, so the cost of one field solve is
printed as a ratio. Then EM-corrected refinement (default: implicit space mapping) runs from
that optimum with at most three field solves. ``--docs`` writes the overlay plots of the first
and the best field solve to docs/. Needs the engine (see the README); takes about 10 minutes
on two cores at the coarse mesh.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
import warnings
from pathlib import Path

from refine.circuit.response import evaluate_layout
from refine.fullwave import engine, spacemap, verify
from refine.optimise import seed as job
from refine.optimise.minimax import Stopping
from refine.optimise.refiner import refine_problem
from refine.outputs import plot
from refine.spec.problem import load_problem
from refine.validity import ModelRangeWarning

ROOT = Path(__file__).resolve().parent.parent
PROBLEM = ROOT / "problems/ms-alumina-tap-10g-n3-8pct.toml"


def _overlay(path: Path, c: verify.FieldCheck, what: str) -> None:
    status = (
        f"{what}: worst mask margin {c.comparison.em_mask.worst_margin:+.2f} dB on the field solver"
    )
    plot.response_png(
        path,
        c.f,
        c.s_em,
        c.s_model,
        c.problem.mask,
        c.problem.name,
        status,
        ("field solver", "circuit model"),
    )


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--problem", type=Path, default=PROBLEM)
    ap.add_argument("--mesh", choices=["coarse", "fine"], default="coarse")
    ap.add_argument("--docs", action="store_true")
    ap.add_argument(
        "--readme", action="store_true", help="write the figures into the README's block"
    )
    ap.add_argument("--method", choices=spacemap.METHODS, default=spacemap.METHODS[0])
    args = ap.parse_args()
    warnings.simplefilter("ignore", ModelRangeWarning)
    eng = engine.find_engine()
    problem = load_problem(args.problem)
    t0 = time.perf_counter()
    # the space-mapping target: the circuit-model optimum with the largest worst margin
    stop = Stopping(max_evaluations=300, target_margin_db=100.0)
    r = refine_problem(problem, stopping=stop, seed=job.seed(problem))
    t_refine = time.perf_counter() - t0
    f = verify.em_frequencies(problem)
    times = []
    for _ in range(20):
        t0 = time.perf_counter()
        evaluate_layout(problem, r.layout, f)
        times.append(time.perf_counter() - t0)
    t_model = statistics.median(times)
    print(f"{eng.version}; problem {problem.name}; mesh {args.mesh}; {f.size} frequencies")
    print(
        f"circuit-model refinement: {r.status.value}, worst margin {r.worst_margin:+.2f} dB, "
        f"{r.evaluations} evaluations, {t_refine:.2f} s"
    )
    sm = spacemap.correct(problem, r.layout, args.mesh, 3, progress=print, method=args.method)
    first = sm.checks[0]
    print()
    print(
        f"one circuit-model evaluation: {t_model * 1e3:.2f} ms; one field solve (thru + "
        f"filter): {first.seconds:.0f} s on {first.solves[-1].mesh.cells} cells: ratio "
        f"{first.seconds / t_model:.2e}"
    )
    print("first field solve against the circuit model:")
    for row in first.comparison.rows():
        print(f"  {row[0]:>45}  {row[1]:>10}  {row[2]:>10}")
    print(sm.summary())
    for k, lay in enumerate(sm.layouts, start=1):
        taps = f", taps {[round(t * 1e6) for t in lay.taps]} um" if lay.taps else ""
        print(
            f"  layout {k}: gaps {[round(g * 1e6) for g in lay.gaps]} um, lengths "
            f"{[round(x * 1e6) for x in lay.lengths]} um{taps}"
        )
    if args.readme:
        rows = "\n".join(
            f"| {name} | {em} | {model} |" for name, em, model in first.comparison.rows()
        )
        rounds = "\n".join(
            f"| {k} | {c.comparison.em_mask.worst_margin:+.2f} dB | "
            f"{c.comparison.model_mask.worst_margin:+.2f} dB | {c.seconds:.0f} s |"
            for k, c in enumerate(sm.checks, start=1)
        )
        text = (
            f"`python benchmarks/em.py --readme` wrote this block ({eng.version}, mesh "
            f"{args.mesh}, {args.method} space mapping, {problem.name}):\n\n"
            f"The circuit-model optimum meets the mask with {r.worst_margin:+.2f} dB. One field "
            f"solve (thru and filter) took {first.seconds:.0f} s on "
            f"{first.solves[-1].mesh.cells:,} cells, {first.seconds / t_model:.2g} times one "
            f"circuit-model evaluation ({t_model * 1e3:.2f} ms, measured beside it).\n\n"
            "| first field solve | field solver | circuit model |\n|---|---|---|\n"
            f"{rows}\n\n"
            "| field solve | worst mask margin, field solver | circuit model | engine time |\n"
            f"|---|---|---|---|\n{rounds}\n\n{sm.summary().splitlines()[-1]}"
        )
        from readme_block import replace_block

        replace_block("fullwave-filter", text)
    if args.docs:
        _overlay(ROOT / "docs/fullwave-first.png", first, "circuit-model optimum")
        best = sm.checks[sm.best]
        _overlay(
            ROOT / "docs/fullwave-corrected.png", best, f"field solve {sm.best + 1} of {sm.runs}"
        )
    return 0 if sm.met else 1


if __name__ == "__main__":
    sys.exit(main())
