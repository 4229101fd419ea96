"""What a mesh-converged field check costs, filter by filter, before it runs.

    python benchmarks/em_cost.py            # print the table
    python benchmarks/em_cost.py --readme   # the table as the README block em-cost

For each filter the field check's "converged" ladder (three meshes, every cell refined by
refine.fullwave.geometry.REFINE_RATIO, edge cells at most half the smallest gap) is built
exactly as ``refine fullwave --mesh converged`` builds it, and each run's size is read off its
job: cells, and time steps at most (simulated time over the Courant step of the smallest
cell). The runs are the thru calibration and one excitation (mirror-symmetric layouts) or two.
The engine time is estimated from the cell-steps at the engine rate measured on the finished
solves of ``tests/data/fullwave-filters.json`` (their bound cell-steps over their seconds, one
engine thread; the engine's energy criterion often stops a run before its bound, and the
measured rate absorbs that on average). Nothing is solved: this runs in seconds.

The filters are the filter-level validation set (benchmarks/em_filters.py) and the bundled
gap-coupled three-pole 3 % filter on alumina at 10 GHz, the case the field-check issue's
30-minute target names. Layouts are the ones the validation set solved, or refine's default
refinement for a filter not yet solved.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
from dataclasses import replace
from pathlib import Path

from refine.circuit.layout import Layout, ParallelLayout
from refine.circuit.response import evaluate_layout, evaluate_parallel
from refine.fullwave import engine, geometry, solve, verify
from refine.spec.problem import Problem, load_problem

sys.path.insert(0, str(Path(__file__).resolve().parent))
import campaign_data
from em_filters import DATA, FILTERS, layout_of
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent
#: the gap-coupled filter of the field-check issue's cost target, then the validation set
COST_FILTERS = (
    "microstrip-x-band-alumina-n3",
    *(f for f in FILTERS if f != "microstrip-x-band-alumina-n3"),
)


def ladder(
    problem: Problem,
    lay: Layout | ParallelLayout,
    like: dict | None = None,
    delays: float | None = None,
) -> list[dict]:
    """Per mesh of the converged ladder: its smallest cell, cells, and the bound cell-steps of
    all its runs (thru and excitations), as refine.fullwave.solve.solve would set them up.
    like: a campaign record whose walls, box and ringing to use (the field check's defaults if
    None; records before those keys: first-order walls, whole box, the record not continued).
    delays: the ringing in group delays, overriding both."""
    f = verify.em_frequencies(problem)
    s = (
        evaluate_parallel(problem, lay, f)
        if isinstance(lay, ParallelLayout)
        else evaluate_layout(problem, lay, f)
    )
    if delays is None:
        continued = like is None or bool(like.get("ringdown_continued", False))
        delays = verify.CONTINUED_RING_DELAYS if continued else verify.RING_DELAYS
    ringing = verify.ringing_time(s[:, 1, 0], f, delays)
    band = verify.em_band(problem)
    sub = problem.strip_substrate
    out = []
    for res in verify.resolutions("converged", lay):
        if like is not None:
            res = replace(res, **campaign_data.box_of(like))
        length = geometry.feed_length(sub, lay.feed_width, band[1], res)
        st = geometry.layout_structure(lay, sub, length)
        mesh = geometry.build_mesh(st, sub, band[1], res)
        base = geometry.pulse_length(band) + 6.0 * solve.transit_time(mesh, sub)
        thru = geometry.job(st.thru(far_edge=float(mesh.y[-1])), mesh, sub, band, f, base, 1)
        cells, thru_steps = engine.job_size(thru)
        excite = geometry.job(st, mesh, sub, band, f, base + ringing, 1)
        _, steps = engine.job_size(excite)
        runs = 1 if st.symmetric else 2
        out.append(
            {
                "edge_cell": res.edge_cell,
                "smallest": mesh.smallest,
                "cells": engine.job_size(excite)[0],
                "steps": steps,
                "excitations": runs,
                "cell_steps": float(cells) * thru_steps + float(cells) * steps * runs,
            }
        )
    return out


def measured_rate(runs: list[dict]) -> float:
    """Median bound cell-steps per second of the validation set's finished solves."""
    rates = []
    for r in runs:
        problem = load_problem(ROOT / "problems" / f"{r['filter']}.toml")
        lay = layout_of(r["filter"], problem, runs)
        mesh = ladder(problem, lay, r)[r["mesh_index"]]
        rates.append(mesh["cell_steps"] / r["seconds"])
    return statistics.median(rates)


def table(runs: list[dict]) -> str:
    rate = measured_rate(runs)
    rows = [
        f"Engine rate from the {len(runs)} finished solves of the validation set: "
        f"{rate / 1e6:.0f} million bound cell-steps per second on one thread (median).\n",
        "| filter | smallest gap | smallest cell | cells, mesh 1 / 2 / 3 | time steps at most, "
        "mesh 1 / 2 / 3 | runs per mesh | engine time, three meshes (estimated) | the same, "
        f"record not continued ({verify.RING_DELAYS:g} group delays) | measured (the "
        "campaign's set-up) |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for name in COST_FILTERS:
        problem = load_problem(ROOT / "problems" / f"{name}.toml")
        lay = layout_of(name, problem, runs)
        gaps = lay.spacings if isinstance(lay, ParallelLayout) else lay.gaps
        m = ladder(problem, lay)
        est = sum(x["cell_steps"] for x in m) / rate
        plain = ladder(problem, lay, delays=verify.RING_DELAYS)
        est_plain = sum(x["cell_steps"] for x in plain) / rate
        done = [r for r in runs if r["filter"] == name]
        meas = (
            f"{sum(r['seconds'] for r in done) / 60:.0f} min ({len(done)} meshes)"
            if done
            else "not run"
        )
        rows.append(
            f"| {name} | {min(gaps) * 1e6:.1f} µm | {m[0]['smallest'] * 1e6:.1f} µm | "
            f"{_per_mesh(m, 'cells')} | {_per_mesh(m, 'steps')} | "
            f"1 + {m[0]['excitations']} | {_duration(est)} | {_duration(est_plain)} | {meas} |"
        )
    return "\n".join(rows)


def _per_mesh(m: list[dict], key: str) -> str:
    return " / ".join(f"{x[key] / 1e3:.0f}k" for x in m)


def _duration(seconds: float) -> str:
    return f"{seconds / 60:.0f} min" if seconds < 5400 else f"{seconds / 3600:.1f} h"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readme", action="store_true", help="write the README block em-cost")
    args = ap.parse_args(argv)
    runs = json.loads(DATA.read_text())["runs"]
    text = table(runs)
    if args.readme:
        replace_block(
            "em-cost",
            "`python benchmarks/em_cost.py --readme` wrote this table (the converged ladder's "
            "job sizes, nothing solved; time estimated at the measured engine rate):\n\n" + text,
        )
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
