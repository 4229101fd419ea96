"""Which bundled designs are met across the circuit model's stated uncertainty, in one run.

    python benchmarks/robustness.py             # print the table
    python benchmarks/robustness.py --readme    # and write it as the README block ``robust-status``

For every bundled strip problem: the status refine gives it (met only when the mask holds at
every corner of the model's uncertainty, see refine.circuit.response.model_uncertainty), the
worst margin on the nominal model, the worst margin over the corners before robust refinement
(the same problem with ``[models] uncertainty = "judge"``) and after it (the default), the ±
judged, the worst corner with each group of terms alone (gaps, radiation, lines: which of them
costs the margin), and the robust refinement's evaluations. Nothing is asserted here; the tests pin the
statuses through the golden record.
"""

from __future__ import annotations

import argparse
import time
import warnings
from dataclasses import replace
from pathlib import Path

from readme_block import replace_block

from refine.circuit.response import TERM_GROUPS, worst_by_term
from refine.optimise.refiner import Status, refine_problem
from refine.spec.problem import load_problem
from refine.validity import ModelRangeWarning

ROOT = Path(__file__).resolve().parent.parent


def rows() -> tuple[list[str], float]:
    out = [
        "| problem | status | nominal margin (dB) | worst corner, judged only (dB) | "
        "worst corner, robust refinement (dB) | ± series (worst gap) / shunt / radiation / line ε_eff / line Z0 | "
        "worst corner by term alone: gaps / radiation / lines (dB) | evaluations |",
        "|---|---|---|---|---|---|---|---|",
    ]
    t0 = time.perf_counter()
    for path in sorted((ROOT / "problems").glob("*.toml")):
        p = load_problem(path)
        if p.medium == "ideal":
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ModelRangeWarning)
            judged = refine_problem(replace(p, uncertainty="judge"))
            r = refine_problem(p)
        u = r.uncertainty
        assert u is not None and r.corner_margin is not None and judged.corner_margin is not None
        spread = (
            f"{100 * u.series:.0f} / {100 * u.shunt:.0f} / {100 * u.radiation:.0f} / "
            f"{100 * u.eps_eff:.2g} / {100 * u.z0:.2g} %"
        )
        alone = "–"
        if r.status is not Status.INFEASIBLE:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", ModelRangeWarning)
                terms = worst_by_term(p, r.layout, u)
            alone = " / ".join(f"{terms[k]:+.2f}" if k in terms else "–" for k in TERM_GROUPS)
        out.append(
            f"| {path.stem} | {r.status.value} | {r.worst_margin:+.2f} | "
            f"{judged.corner_margin:+.2f} | {r.corner_margin:+.2f} | {spread} | {alone} | "
            f"{r.robust_evaluations} |"
        )
        print(out[-1], flush=True)
    return out, time.perf_counter() - t0


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readme", action="store_true", help="write the README block")
    args = ap.parse_args(argv)
    table, seconds = rows()
    met = sum(1 for r in table[2:] if "| met |" in r)
    nominal = sum(1 for r in table[2:] if "| met on the nominal model only |" in r)
    text = (
        f"`python benchmarks/robustness.py --readme` wrote this table ({seconds:.0f} s): "
        f"{met} strip design{'' if met == 1 else 's'} met across the model's uncertainty, "
        f"{nominal} met on the "
        "nominal model only.\n\n" + "\n".join(table)
    )
    if args.readme:
        replace_block("robust-status", text + "\n")
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
