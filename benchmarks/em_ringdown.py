"""How early a filter's field solve may stop when its ring-down is continued.

    python benchmarks/em_ringdown.py              # solve what is missing, print the table
    python benchmarks/em_ringdown.py --readme     # the table as the README block em-ringdown

A narrowband filter's port signals ring long after the pulse. refine's field check simulates
eight of the circuit model's largest passband group delays after the pulse (or until the
engine's energy criterion, -50 dB); refine.fullwave.ringdown can instead fit the late record
with damped exponentials (matrix pencil) and continue it. This study measures what that buys.

For each filter below, one long record is solved on the coarsest mesh of the converged ladder
or a coarser one (the field check's defaults otherwise: thirds rule, matched layers, half
box; a record's ringing is the filter's, not the mesh's): ten or sixteen group delays of
ringing and the engine's energy criterion at -90 dB instead of -50 dB. The record is then cut
after 1 to 16 group delays and each cut turned into S-parameters twice, as recorded and with
the ring-down continued from the pulse's end on. The reference is the whole record, continued.
Each cut's centre, 3 dB bandwidth, worst in-band return loss and midband loss are compared
with the reference's; a continued cut whose figures sit on the reference's is as good as the
long run, at a fraction of its time steps.

The engine runs are kept in a scratch folder (``--scratch``, outside git) and reused, so a
killed study resumes; only the figures are committed, to ``tests/data/fullwave-ringdown.json``.
"""

from __future__ import annotations

import argparse
import datetime
import sys
import time
import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np

from refine.circuit.response import evaluate_layout
from refine.fullwave import compare, engine, geometry, solve, verify
from refine.spec.problem import load_problem
from refine.validity import ModelRangeWarning

sys.path.insert(0, str(Path(__file__).resolve().parent))
import campaign_data
import em_filters
from em_filters import layout_of
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT / "tests" / "data" / "fullwave-ringdown.json"
#: filters of the validation set, widest first, and the edge cell of the mesh their record is
#: solved on (None: the coarsest mesh of the converged ladder). How long a record rings is the
#: filter's, not the mesh's, so the narrow filter is solved on a coarser mesh than a field
#: check would use, to keep its long record affordable.
FILTERS = {"ms-alumina-tap-10g-n3-8pct": None, "ms-pcb-tap-5g8-n3-3pct": 100e-6}
#: the reference record's ringing, in the circuit model's largest passband group delays (the
#: first record ran to 16; ten leave the recorded signals some 70 dB down, and the continued
#: reference needs no more)
LONG = 10.0
#: the cuts studied, in the same unit, after the pulse and six box transits
CUTS = (1.0, 1.5, 2.0, 3.0, 4.0, 6.0, 8.0, 12.0, 16.0)
#: the reference record's energy criterion (-90 dB)
LONG_END = 1e-9


def group_delay(s21: np.ndarray, f: np.ndarray) -> float:
    """The circuit model's largest group delay where |S21| > -10 dB (s), the unit of
    refine.fullwave.verify.ringing_time."""
    return verify.ringing_time(s21, f, delays=1.0)


def _figures(problem, f, s) -> dict:
    b = compare.band_figures(f, s[:, 0, 0], s[:, 1, 0], problem.mask)
    s21 = float(np.interp(problem.f0, f, np.abs(s[:, 1, 0])))
    return {
        "centre_hz": b.centre,
        "bandwidth_hz": b.bandwidth,
        "worst_return_loss_db": b.worst_return_loss,
        "midband_loss_db": -20.0 * float(np.log10(s21)),
    }


def _runs_path(scratch: Path, name: str) -> Path:
    return scratch / f"{name.replace('/', '_')}.npz"


def _save_runs(path: Path, r: solve.Runs) -> None:
    arrays = {f"thru_{k}": np.asarray(v) for k, v in r.thru.items()}
    for n, e in enumerate(r.excitations):
        arrays |= {f"ex{n}_{k}": np.asarray(v) for k, v in e.items()}
    tmp = path.with_suffix(".part.npz")
    np.savez(tmp, ring_from=r.ring_from, **arrays)
    tmp.replace(path)


def _load_runs(path: Path, mesh: geometry.Mesh) -> solve.Runs:
    with np.load(path) as d:
        data = {k: d[k] for k in d.files}
    thru = {k[5:]: v for k, v in data.items() if k.startswith("thru_")}
    exs = []
    for n in range(2):
        e = {k[len(f"ex{n}_") :]: v for k, v in data.items() if k.startswith(f"ex{n}_")}
        if e:
            exs.append(e)
    return solve.Runs(thru, exs, float(data["ring_from"]), mesh)


def study(name: str, scratch: Path, threads: int) -> dict:
    problem = load_problem(ROOT / "problems" / f"{name}.toml")
    lay = layout_of(name, problem, em_filters.load())
    f = verify.em_frequencies(problem)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        s_model = evaluate_layout(problem, lay, f)
    gd = group_delay(s_model[:, 1, 0], f)
    band = verify.em_band(problem)
    sub = problem.strip_substrate
    edge = FILTERS.get(name)
    res = (
        replace(verify.resolutions("converged", lay)[0], open_walls="pml", mirror=True)
        if edge is None
        else geometry.Resolution("ring-down study", edge, edge_rule="thirds")
    )
    st = geometry.layout_structure(
        lay, sub, geometry.feed_length(sub, lay.feed_width, band[1], res)
    )
    mesh = geometry.build_mesh(st, sub, band[1], res)
    path = _runs_path(scratch, name)
    t0 = time.perf_counter()
    if path.exists():
        runs = _load_runs(path, mesh)
    else:
        runs = solve.run_engine(
            st,
            sub,
            f,
            res,
            LONG * gd,
            band,
            threads=threads,
            progress=lambda s: print(f"  {s}", flush=True),
            enclosure=problem.enclosure,
            end_criterion=LONG_END,
        )
        _save_runs(path, runs)
    seconds = float(runs.thru["seconds"]) + sum(float(e["seconds"]) for e in runs.excitations)
    record_end = float(max(e["tv1"][-1] for e in runs.excitations))
    ref = solve.two_port(st, f, problem.z_ref, res, runs, fit_from=runs.ring_from)
    reference = _figures(problem, f, ref.s)
    whole = _figures(problem, f, solve.two_port(st, f, problem.z_ref, res, runs).s)
    cuts = []
    for k in CUTS:
        cut = runs.ring_from + k * gd
        if cut > record_end * (1 + 1e-9):
            break  # the engine stopped on its energy criterion before this cut
        plain = solve.two_port(st, f, problem.z_ref, res, runs, cut=cut)
        cont = solve.two_port(st, f, problem.z_ref, res, runs, fit_from=runs.ring_from, cut=cut)
        cuts.append(
            {
                "group_delays": k,
                "recorded": _figures(problem, f, plain.s),
                "continued": _figures(problem, f, cont.s),
                "fit_check": cont.ringdown_check,
                "late_level": plain.tail,
            }
        )
    return {
        "filter": name,
        "fbw": problem.fbw,
        "f0_hz": problem.f0,
        "edge_cell_m": res.edge_cell,
        "open_walls": res.open_walls,
        "half_box": True,
        "cells": mesh.cells,
        "group_delay_s": gd,
        "ring_from_s": runs.ring_from,
        "record_end_s": record_end,
        "record_group_delays": (record_end - runs.ring_from) / gd,
        "reference": reference,
        "whole_record_not_continued": whole,
        "cuts": cuts,
        "seconds": seconds,
        "study_seconds": time.perf_counter() - t0,
        "engine": str(runs.thru["engine"]),
        "date": datetime.date.today().isoformat(),
    }


def table(runs: list[dict]) -> str:
    lines = [
        "| filter | cut after (group delays) | centre, recorded / continued (% of FBW) "
        "| 3 dB bandwidth, recorded / continued | worst in-band RL, recorded / continued (dB) "
        "| midband loss, recorded / continued (dB) | fit check |",
        "|---|---|---|---|---|---|---|",
    ]
    for r in runs:
        ref = r["reference"]
        for c in r["cuts"]:
            row = [r["filter"], f"{c['group_delays']:g}"]
            parts = {"centre": [], "bw": [], "rl": [], "loss": []}
            for kind in ("recorded", "continued"):
                x = c[kind]
                dc = (x["centre_hz"] - ref["centre_hz"]) / (r["fbw"] * r["f0_hz"]) * 100
                parts["centre"].append(f"{dc:+.2f}")
                parts["bw"].append(f"×{x['bandwidth_hz'] / ref['bandwidth_hz']:.3f}")
                parts["rl"].append(
                    f"{x['worst_return_loss_db'] - ref['worst_return_loss_db']:+.2f}"
                )
                parts["loss"].append(f"{x['midband_loss_db'] - ref['midband_loss_db']:+.2f}")
            row += [" / ".join(parts[k]) for k in ("centre", "bw", "rl", "loss")]
            row.append(f"{c['fit_check']:.1e}" if c["fit_check"] is not None else "–")
            lines.append("| " + " | ".join(row) + " |")
    return "\n".join(lines)


def _save(runs: list[dict]) -> None:
    campaign_data.save_doc(
        DATA,
        {
            "what": "a filter's field-solve record cut early, as recorded and with its "
            "ring-down continued (benchmarks/em_ringdown.py)",
            "runs": runs,
        },
    )


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readme", action="store_true", help="write the README block")
    ap.add_argument("--threads", type=int, default=1, help="engine threads (default 1)")
    ap.add_argument(
        "--scratch",
        type=Path,
        default=ROOT.parent / "ringdown-scratch",
        help="where the engine runs are kept between sessions (default: beside the project)",
    )
    ap.add_argument(
        "--reanalyse",
        action="store_true",
        help="recompute every record whose engine runs are in the scratch folder (no solving)",
    )
    args = ap.parse_args(argv)
    runs = campaign_data.load_runs(DATA)
    if args.reanalyse:
        runs = [
            study(r["filter"], args.scratch, args.threads)
            if _runs_path(args.scratch, r["filter"]).exists()
            else r
            for r in runs
        ]
        _save(runs)
    if not (args.readme or args.reanalyse):
        if not engine.available():
            print("the field solver is not installed", file=sys.stderr)
            return 2
        args.scratch.mkdir(parents=True, exist_ok=True)
        for name in FILTERS:
            if any(r["filter"] == name for r in runs):
                continue
            print(f"{name} ...", flush=True)
            runs.append(study(name, args.scratch, args.threads))
            _save(runs)
    text = table(runs)
    print(text)
    if args.readme:
        head = (
            "`python benchmarks/em_ringdown.py --readme` wrote this table from "
            "`tests/data/fullwave-ringdown.json` (each figure's change from the whole record "
            "continued; centre in % of the filter's fractional bandwidth):\n\n"
        )
        replace_block("em-ringdown", head + text + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
