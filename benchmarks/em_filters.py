"""Filter-level validation: refined bundled filters on the field solver at converged meshes.

    python benchmarks/em_filters.py [--threads N]   # run what is missing, then print the table
    python benchmarks/em_filters.py --table         # the table from the data file only
    python benchmarks/em_filters.py --only NAME     # run one filter's missing meshes
    python benchmarks/em_filters.py --readme        # the table as the README block em-filters

Each filter of :data:`FILTERS` (bundled problems) is refined by refine's default (the calibrated
circuit model with robust refinement) and its layout field-solved on three meshes, every cell
refined by refine.fullwave.geometry.REFINE_RATIO from one to the next, with the thirds rule at
metal edges (the field check's "converged" preset). Each finished (filter, mesh) solve is
appended to ``tests/data/fullwave-filters.json`` at once with the layout, the figures of the
field solver and of the circuit model, and provenance (engine, mesh, cells, seconds, date), so a
killed campaign resumes where it stopped. The table gives, per filter, the field solver's centre
shift from the circuit model (in % and in units of the fractional bandwidth), the 3 dB bandwidth
ratio, the worst in-band return loss and the midband loss, each at the finest mesh with its mesh
uncertainty (refine.fullwave.uncertainty.mesh_uncertainty over the three meshes).
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

from refine.circuit.layout import ParallelLayout
from refine.fullwave import geometry, verify
from refine.fullwave.uncertainty import mesh_uncertainty
from refine.optimise.parallel import refine_parallel
from refine.optimise.refiner import refine_problem
from refine.outputs.export import parallel_layout_dict
from refine.spec.problem import load_problem
from refine.validity import ModelRangeWarning

sys.path.insert(0, str(Path(__file__).resolve().parent))
import campaign_data
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT / "tests" / "data" / "fullwave-filters.json"
#: the bundled filters checked, cheapest first (the wide tapped ones solve in minutes)
FILTERS = (
    "ms-alumina-tap-10g-n3-8pct",
    "ms-alumina-tap-10g-n3-10pct",
    "ms-pcb-tap-5g8-n3-3pct",
    "parallel/pcb-5g8-n3-6pct",
    # the 3 % gap-coupled thin-film filter: 15 um end gaps, hours per mesh (benchmarks/em_cost.py)
    "microstrip-x-band-alumina-n3",
)
MESHES = 3


def _midband_loss(f: np.ndarray, s: np.ndarray, f0: float) -> float:
    s21 = np.abs(s[:, 1, 0])
    return float(-20 * np.log10(np.interp(f0, f, s21)))


def sequence(run: dict) -> tuple[str, str]:
    """A record's mesh sequence: its filter and the box its campaign asked for (a name of
    :data:`campaign_data.BOXES`; records from before the key: the first box). Each sequence is
    one row of the table, labelled with the box that ran (:func:`campaign_data.box_name`: a
    tapped layout has no mirror line and is solved whole where the half box was asked for)."""
    return run["filter"], campaign_data.box_asked(run)


def run_one(
    name: str, k: int, threads: int, earlier: list[dict], box: str = campaign_data.DEFAULT_BOX
) -> dict:
    """One filter on mesh ``k`` in ``box``; the layout is the one the filter's earlier records
    solved, in any box (so that a change of the refiner between sessions never mixes two
    layouts, and two boxes compare like for like)."""
    problem = load_problem(ROOT / "problems" / f"{name}.toml")
    if problem.topology == "parallel-coupled":
        return _run_parallel(name, problem, k, threads, earlier, box)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        r = refine_problem(problem)
    lay = r.strip_layouts[0]
    status = r.status.value
    mine = [e for e in earlier if e["filter"] == name]
    if mine:
        d = mine[0]["layout"]
        lay = replace(
            lay,
            gaps=tuple(d["gaps"]),
            lengths=tuple(d["lengths"]),
            widths=tuple(d["widths"]),
            taps=None if d["taps"] is None else tuple(d["taps"]),
        )
        status = mine[0]["status"]
    res, seq = in_box(verify.resolutions("converged", lay)[k], mine, box)
    t0 = time.perf_counter()
    c = _check(problem, lay, res, threads, seq)
    layout = {
        "gaps": list(lay.gaps),
        "lengths": list(lay.lengths),
        "widths": list(lay.widths),
        "taps": None if lay.taps is None else list(lay.taps),
    }
    return _record(name, k, res, status, layout, problem, c, t0, box)


def in_box(
    res: geometry.Resolution, earlier: list[dict], box: str
) -> tuple[geometry.Resolution, list[dict]]:
    """``res`` with the walls and box named ``box``, and the filter's earlier records of that
    box (its sequence so far)."""
    return replace(res, **campaign_data.BOXES[box]), [e for e in earlier if sequence(e)[1] == box]


def _check(problem, lay, res: geometry.Resolution, threads: int, mine: list[dict]):
    """The field check of one mesh, in the set-up the sequence's earlier meshes used."""
    return verify.check_layout(
        problem,
        lay,
        threads=threads,
        meshes=[res],
        progress=lambda s: print(f"  {s}", flush=True),
        continue_ringdown=continued(mine),
    )


def continued(earlier: list[dict]) -> bool:
    """Whether the filter's records continue their ring-down (the field check's default since
    benchmarks/em_ringdown.py; a sequence begun without it goes on without it)."""
    return bool(earlier[0].get("ringdown_continued", False)) if earlier else True


def _record(name, k, res, status, layout: dict, problem, c, t0: float, box: str) -> dict:
    """One finished (filter, mesh) solve as the data file stores it; ``box``: the box its
    campaign asked for (what ran: ``open_walls`` and ``half_box``)."""
    cmp_ = c.comparison
    return {
        "filter": name,
        "box": box,
        "mesh_index": k,
        "edge_cell_m": res.edge_cell,
        "cells_per_wavelength": res.cells_per_wavelength,
        "edge_rule": res.edge_rule,
        "open_walls": res.open_walls,
        "half_box": c.solves[-1].mesh.mirror is not None,
        "ringdown_continued": c.solves[-1].ringdown_check is not None,
        "ringdown_fit_check": c.solves[-1].ringdown_check,
        "status": status,
        "layout": layout,
        "fbw": problem.fbw,
        "f0_hz": problem.f0,
        "em": {
            "centre_hz": cmp_.em.centre,
            "bandwidth_hz": cmp_.em.bandwidth,
            "worst_return_loss_db": cmp_.em.worst_return_loss,
            "midband_loss_db": _midband_loss(c.f, c.s_em, problem.f0),
            "worst_margin_db": cmp_.em_mask.worst_margin,
        },
        "model": {
            "centre_hz": cmp_.model.centre,
            "bandwidth_hz": cmp_.model.bandwidth,
            "worst_return_loss_db": cmp_.model.worst_return_loss,
            "midband_loss_db": _midband_loss(c.f, c.s_model, problem.f0),
            "worst_margin_db": cmp_.model_mask.worst_margin,
        },
        "cells": c.solves[-1].mesh.cells,
        "seconds": time.perf_counter() - t0,
        "engine": c.solves[-1].engine,
        "date": datetime.date.today().isoformat(),
    }


def _run_parallel(name: str, problem, k: int, threads: int, earlier: list[dict], box: str) -> dict:
    """:func:`run_one` for a parallel-coupled problem (refine.optimise.parallel)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        r = refine_parallel(problem)
    lay, status = r.layout, r.status.value
    mine = [e for e in earlier if e["filter"] == name]
    if mine:
        d = mine[0]["layout"]
        lay = ParallelLayout(
            d["feed_width"], d["widths"], d["spacings"], d["lengths"], d["feed_stub"]
        )
        status = mine[0]["status"]
    res, seq = in_box(verify.resolutions("converged", lay)[k], mine, box)
    t0 = time.perf_counter()
    c = _check(problem, lay, res, threads, seq)
    return _record(name, k, res, status, parallel_layout_dict(lay), problem, c, t0, box)


def load() -> list[dict]:
    return campaign_data.load_runs(DATA)


def save(runs: list[dict]) -> None:
    doc = {
        "what": "refined bundled filters on the field solver, three meshes each (every cell "
        "refined), thirds rule at metal edges, zero-thickness lossy sheets; written by "
        "benchmarks/em_filters.py",
        "runs": runs,
    }
    campaign_data.save_doc(DATA, doc, key=lambda r: (*sequence(r), r["mesh_index"]))


def sequences(runs: list[dict]) -> list[tuple[str, str]]:
    """The data's mesh sequences, filters in :data:`FILTERS` order, the old box first."""
    keys = {sequence(r) for r in runs if r["filter"] in FILTERS}
    return sorted(keys, key=lambda k: (FILTERS.index(k[0]), list(campaign_data.BOXES).index(k[1])))


def summary(runs: list[dict], key: tuple[str, str]) -> dict | None:
    """Finest-mesh figures of one sequence with their mesh uncertainty (None with one mesh:
    with two, the uncertainty is their difference; with three, from the observed order), or
    None before any mesh ran."""
    mine = sorted((r for r in runs if sequence(r) == key), key=lambda r: r["mesh_index"])
    if not mine:
        return None
    cells = [r["edge_cell_m"] for r in mine]
    out: dict = {
        "fbw": mine[0]["fbw"],
        "model": mine[-1]["model"],
        "status": mine[0]["status"],
        "meshes": len(mine),
        "box": campaign_data.box_name(mine[0]),  # what ran
    }
    for key in ("centre_hz", "bandwidth_hz", "worst_return_loss_db", "midband_loss_db"):
        values = [r["em"][key] for r in mine]
        out[key] = (values[-1], mesh_uncertainty(cells, values) if len(mine) > 1 else None)
    out["seconds"] = sum(r["seconds"] for r in mine)
    return out


def _pm(x: float | None, scale: float, fmt: str) -> str:
    return "" if x is None else f" ± {format(x * scale, fmt)}"


def table(runs: list[dict]) -> str:
    rows = [
        "| filter (status on the circuit model; box) | centre shift | in units of the FBW | 3 dB "
        "bandwidth ratio | worst in-band RL, field (circuit) | midband loss, field (circuit) | "
        "meshes, engine time |",
        "|---|---|---|---|---|---|---|",
    ]
    for key in sequences(runs):
        s = summary(runs, key)
        if s is None:
            continue
        name = key[0]
        m = s["model"]
        fc, dfc = s["centre_hz"]
        shift = fc / m["centre_hz"] - 1
        bw, dbw = s["bandwidth_hz"]
        rl, drl = s["worst_return_loss_db"]
        il, dil = s["midband_loss_db"]
        rows.append(
            f"| {name} ({s['status']}; {s['box']}) | {100 * shift:+.2f}{_pm(dfc, 100 / m['centre_hz'], '.2f')} % "
            f"| {shift / s['fbw']:+.2f}{_pm(dfc, 1 / (m['centre_hz'] * s['fbw']), '.2f')} | "
            f"{bw / m['bandwidth_hz']:.3f}{_pm(dbw, 1 / m['bandwidth_hz'], '.3f')} | "
            f"{rl:.1f}{_pm(drl, 1, '.1f')} dB ({m['worst_return_loss_db']:.1f}) | "
            f"{il:.2f}{_pm(dil, 1, '.2f')} dB ({m['midband_loss_db']:.2f}) | "
            f"{s['meshes']}{' (no uncertainty yet)' if s['meshes'] == 1 else ''}, "
            f"{s['seconds'] / 60:.0f} min |"
        )
    return "\n".join(rows)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--table", action="store_true", help="print the table only, run nothing")
    ap.add_argument("--readme", action="store_true", help="write the README block")
    ap.add_argument("--threads", type=int, default=0, help="engine threads (0: all cores)")
    ap.add_argument("--only", help="run this filter only (a name of FILTERS)")
    ap.add_argument(
        "--box", choices=list(campaign_data.BOXES), default=campaign_data.DEFAULT_BOX,
        help=f"the box to solve in (default: {campaign_data.DEFAULT_BOX!r}, the field check's)",
    )  # fmt: skip
    args = ap.parse_args(argv)
    if args.only is not None and args.only not in FILTERS:
        ap.error(f"--only {args.only!r}: not one of {', '.join(FILTERS)}")
    runs = load()
    if not (args.table or args.readme):
        done = {(*sequence(r), r["mesh_index"]) for r in runs}
        for k in range(MESHES):  # every filter's coarser meshes first: a table sooner
            for name in FILTERS:
                if (name, args.box, k) in done or (args.only is not None and name != args.only):
                    continue
                print(f"{name}, {args.box}, mesh {k + 1} of {MESHES} ...", flush=True)
                rec = run_one(name, k, args.threads, runs, args.box)
                runs.append(rec)
                save(runs)
                print(
                    f"  centre {rec['em']['centre_hz'] / 1e9:.4f} GHz, RL "
                    f"{rec['em']['worst_return_loss_db']:.2f} dB ({rec['cells']} cells, "
                    f"{rec['seconds']:.0f} s)",
                    flush=True,
                )
    text = table(runs)
    if args.readme:
        mesh = geometry.REFINE_RATIO
        replace_block(
            "em-filters",
            f"`python benchmarks/em_filters.py --readme` wrote this table (meshes with every "
            f"cell refined by {mesh:.3g} from one to the next, thirds rule at metal edges; the "
            f"campaign runs three per filter and resumes where it stopped):\n\n" + text + "\n",
        )
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
