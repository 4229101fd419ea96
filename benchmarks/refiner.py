"""Refiner speed over the bundled problem set, ours vs a derivative-free baseline, in one run.

    python benchmarks/refiner.py                # every problem (several minutes)
    python benchmarks/refiner.py --only ms-      # problems whose file name starts with "ms-"

For every problem whose file says it is feasible, both strategies start from the same
closed-form seed: refine's default (``gradient``: SLSQP with analytic gradients, restarts and a
CCSA polish) and nlopt's COBYLA on the same epigraph formulation with no gradients
(``derivative-free``), given a larger budget. Printed per problem: evaluations and wall time
until the mask is first met on the optimiser's grid ("to meet"), evaluations used in all (a
design that already meets the mask keeps buying margin), wall time, and whether the verified
result meets the mask. Then medians and the ratio of evaluations-to-meet on the problems both
met. Nothing is asserted here; the figures go in the README.
"""

from __future__ import annotations

import argparse
import re
import statistics
import sys
import warnings
from pathlib import Path

from readme_block import replace_block

from refine.optimise.minimax import Stopping, Strategy
from refine.optimise.refiner import Status, refine_problem
from refine.spec.problem import load_problem
from refine.validity import ModelRangeWarning

ROOT = Path(__file__).resolve().parent.parent


TARGET = Stopping().target_margin_db


def first_met(history: tuple[float, ...]) -> int | None:
    """Evaluations until the worst margin on the optimiser grid first reached the target."""
    for k, m in enumerate(history, start=1):
        if m >= TARGET:
            return k
    return None


def run(path: Path, strategy: Strategy, budget: int):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        return refine_problem(load_problem(path), strategy, Stopping(max_evaluations=budget))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", default="", help="run only problems whose file name starts with this")
    ap.add_argument(
        "--baseline-budget", type=int, default=2000, help="evaluations allowed to COBYLA"
    )
    ap.add_argument(
        "--readme", action="store_true", help="rewrite the refiner-speed block in README.md"
    )
    args = ap.parse_args(argv)
    paths = [p for p in sorted((ROOT / "problems").glob("*.toml")) if p.stem.startswith(args.only)]
    paths = [p for p in paths if re.search(r"Expected outcome: feasible", p.read_text())]
    print(
        f"{'problem':<36}{'ours: to meet':>14}{'used':>6}{'time':>8}{'met':>5}"
        f"{'COBYLA: to meet':>17}{'used':>6}{'time':>8}{'met':>5}"
    )
    ours_e, base_e, ratio, ours_t, base_t = [], [], [], [], []
    slowest: tuple[float, str, int, bool, bool] = (0.0, "", 0, False, False)
    met_ours = met_base = 0
    for p in paths:
        a = run(p, Strategy.GRADIENT, 300)
        b = run(p, Strategy.DERIVATIVE_FREE, args.baseline_budget)
        am, bm = a.status is Status.MET, b.status is Status.MET
        ka, kb = first_met(a.history), first_met(b.history)
        met_ours += am
        met_base += bm
        if am and ka:
            ours_e.append(ka)
            ours_t.append(a.wall_time)
        if bm and kb:
            base_e.append(kb)
            base_t.append(b.wall_time)
        if am and bm and ka and kb:
            ratio.append(ka / kb)
        if a.wall_time > slowest[0]:
            slowest = (a.wall_time, p.stem, a.evaluations, am, bm)
        print(
            f"{p.stem:<36}{ka or '-':>14}{a.evaluations:>6}{a.wall_time:>7.1f}s{'yes' if am else 'no':>5}"
            f"{kb or '-':>17}{b.evaluations:>6}{b.wall_time:>7.1f}s{'yes' if bm else 'no':>5}",
            flush=True,
        )
    n = len(paths)
    print()
    print(f"met: ours {met_ours}/{n}, COBYLA {met_base}/{n}")
    if ours_e:
        print(
            f"median evaluations to meet: ours {statistics.median(ours_e):.0f}, "
            f"COBYLA {statistics.median(base_e) if base_e else float('nan'):.0f}"
        )
        print(
            f"median wall time to meet: ours {statistics.median(ours_t):.2f} s, "
            f"COBYLA {statistics.median(base_t) if base_t else float('nan'):.2f} s"
        )
    if ratio:
        print(
            f"median ratio of evaluations (ours/COBYLA) on the {len(ratio)} problems both met: "
            f"{statistics.median(ratio):.3f} (1/{1 / statistics.median(ratio):.1f})"
        )
    if args.readme and ours_e and ratio:
        mr = statistics.median(ratio)
        rows = [
            "| | refine (`gradient`) | COBYLA |",
            "|---|---|---|",
            f"| problems met | {met_ours} / {n} | {met_base} / {n} |",
            f"| median evaluations until the mask is first met | "
            f"{statistics.median(ours_e):.0f} | "
            f"{statistics.median(base_e) if base_e else float('nan'):.0f} |",
            f"| median ratio of evaluations, problems both met | {mr:.2f} (1/{1 / mr:.1f}) | 1 |",
            f"| slowest for refine: {slowest[1]} | {slowest[2]} evaluations, {slowest[0]:.1f} s, "
            f"{'met' if slowest[3] else 'not met'} | {'met' if slowest[4] else 'not met'} |",
        ]
        stamp = f"`python benchmarks/refiner.py --readme` wrote this table ({n} feasible problems)"
        replace_block("refiner-speed", f"{stamp}:\n\n" + "\n".join(rows))
    return 0


if __name__ == "__main__":
    sys.exit(main())
