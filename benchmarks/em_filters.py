"""Filter-level validation: refined bundled filters on the field solver at converged meshes.

    python benchmarks/em_filters.py [--threads N]   # run what is missing, then print the table
    python benchmarks/em_filters.py --table         # the table from the data file only
    python benchmarks/em_filters.py --only NAME     # run one filter's missing meshes
    python benchmarks/em_filters.py --readme        # the table as the README block em-filters
    python benchmarks/em_filters.py --only NAME --meshes 2   # its first two meshes only
    python benchmarks/em_filters.py --only NAME --fill-s     # re-solve records kept without S

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
import functools
import json
import sys
import time
import warnings
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

import numpy as np

from refine.circuit.layout import Layout, ParallelLayout
from refine.circuit.response import evaluate_layout, evaluate_parallel
from refine.fullwave import compare, correction, geometry, ringdown, verify
from refine.fullwave.uncertainty import Figure, MeshVerdict, mesh_uncertainty, verdict
from refine.optimise.parallel import refine_parallel
from refine.optimise.refiner import refine_problem
from refine.outputs.export import parallel_layout_dict
from refine.spec.problem import Problem, load_problem
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
#: ringing simulated after the pulse, in the circuit model's largest passband group delays, where
#: a filter departs from the field check's default (refine.fullwave.verify.CONTINUED_RING_DELAYS,
#: 3): the gap-coupled 3 % filter's 4 um cells make each group delay about 190k time steps (an
#: hour), so it simulates 1.5, half the default. benchmarks/em_ringdown.py found records
#: continued after one group delay within 0.01 % of the bandwidth, 0.1 % and 0.01 dB of the
#: whole record on both filters it solved; each record still carries its fit's own check.
RING_DELAYS = {"microstrip-x-band-alumina-n3": 1.5}


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
    c = _check(name, problem, lay, res, threads, seq)
    layout = {
        "gaps": list(lay.gaps),
        "lengths": list(lay.lengths),
        "widths": list(lay.widths),
        "taps": None if lay.taps is None else list(lay.taps),
    }
    return _record(name, k, res, status, layout, problem, c, t0, box, seq)


def layout_of(name: str, problem: Problem, runs: list[dict]) -> Layout | ParallelLayout:
    """The layout the validation set solved, else refine's default refinement."""
    mine = [r for r in runs if r["filter"] == name]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        if problem.topology == "parallel-coupled":
            if mine:
                d = mine[0]["layout"]
                return ParallelLayout(
                    d["feed_width"], d["widths"], d["spacings"], d["lengths"], d["feed_stub"]
                )
            return refine_parallel(problem).layout
        lay = refine_problem(problem).strip_layouts[0]
    if mine:
        d = mine[0]["layout"]
        return replace(
            lay,
            gaps=tuple(d["gaps"]),
            lengths=tuple(d["lengths"]),
            widths=tuple(d["widths"]),
            taps=None if d["taps"] is None else tuple(d["taps"]),
        )
    return lay


def strip_layouts() -> list[tuple[str, Problem, Layout]]:
    """(name, problem, layout) of every end-coupled strip filter of the validation set, as
    :func:`layout_of` gives it (the parallel-coupled ones left out)."""
    out = []
    for name in FILTERS:
        problem = load_problem(ROOT / "problems" / f"{name}.toml")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ModelRangeWarning)
            layout = layout_of(name, problem, load())
        if isinstance(layout, Layout):
            out.append((name, problem, layout))
    return out


def in_box(
    res: geometry.Resolution, earlier: list[dict], box: str
) -> tuple[geometry.Resolution, list[dict]]:
    """``res`` with the walls and box named ``box``, and the filter's earlier records of that
    box (its sequence so far)."""
    return replace(res, **campaign_data.BOXES[box]), [e for e in earlier if sequence(e)[1] == box]


def _check(name: str, problem, lay, res: geometry.Resolution, threads: int, mine: list[dict]):
    """The field check of one mesh, in the set-up the sequence's earlier meshes used."""
    return verify.check_layout(
        problem,
        lay,
        threads=threads,
        meshes=[res],
        progress=lambda s: print(f"  {s}", flush=True),
        continue_ringdown=continued(mine),
        ring_delays=ring_delays(name, mine),
    )


def ring_delays(name: str, earlier: list[dict]) -> float | None:
    """The ringing a filter's record simulates (None: the field check's default): what the
    sequence's first record simulated, else :data:`RING_DELAYS`."""
    if earlier:
        return earlier[0].get("ring_delays")
    return RING_DELAYS.get(name)


def continued(earlier: list[dict]) -> bool:
    """Whether the filter's records continue their ring-down (the field check's default since
    benchmarks/em_ringdown.py; a sequence begun without it goes on without it)."""
    return bool(earlier[0].get("ringdown_continued", False)) if earlier else True


def s_parameters(f: np.ndarray, s: np.ndarray) -> dict:
    """A two-port's S-parameters as the data file stores them: frequencies (Hz) and the real
    and imaginary parts of S11, S21, S12, S22, each to seven significant digits."""

    def part(x: np.ndarray) -> list[float]:
        return [float(f"{v:.7g}") for v in x]

    out: dict = {"f_hz": part(f)}
    for i, j in ((0, 0), (1, 0), (0, 1), (1, 1)):
        out[f"s{i + 1}{j + 1}"] = {"re": part(s[:, i, j].real), "im": part(s[:, i, j].imag)}
    return out


def stored_s(rec: dict) -> tuple[np.ndarray, np.ndarray] | None:
    """(f, S) of a record that stores its field solve's S-parameters (None before the key)."""
    d = rec.get("s_em")
    if d is None:
        return None
    s = np.zeros((len(d["f_hz"]), 2, 2), complex)
    for i, j in ((0, 0), (1, 0), (0, 1), (1, 1)):
        e = d[f"s{i + 1}{j + 1}"]
        s[:, i, j] = np.asarray(e["re"]) + 1j * np.asarray(e["im"])
    return np.asarray(d["f_hz"], float), s


def band(problem: Problem, f: np.ndarray, s: np.ndarray) -> dict:
    """Centre, 3 dB bandwidth and worst in-band return loss of a two-port on the problem's mask
    (refine.fullwave.compare.band_figures), under the data file's keys."""
    b = compare.band_figures(f, s[:, 0, 0], s[:, 1, 0], problem.mask)
    return {
        "centre_hz": b.centre,
        "bandwidth_hz": b.bandwidth,
        "worst_return_loss_db": b.worst_return_loss,
    }


def _figures(problem: Problem, f: np.ndarray, s: np.ndarray) -> dict:
    return {
        **band(problem, f, s),
        "midband_loss_db": _midband_loss(f, s, problem.f0),
        "worst_margin_db": compare.compare(f, s, s, problem.mask).model_mask.worst_margin,
    }


@functools.cache
def _layout_cached(name: str, layout_json: str) -> Layout | ParallelLayout:
    problem = load_problem(ROOT / "problems" / f"{name}.toml")
    return layout_of(name, problem, [{"filter": name, "layout": json.loads(layout_json)}])


def record_layout(rec: dict) -> Layout | ParallelLayout:
    """The layout a record solved (refine's refinement of its problem for the rest)."""
    return _layout_cached(rec["filter"], json.dumps(rec["layout"], sort_keys=True))


@functools.cache
def _model_figures(name: str, layout_json: str, sheets: bool) -> dict:
    """Today's circuit model's figures for a layout, with zero-thickness strips (``sheets``)
    or with the problem's metal."""
    problem = load_problem(ROOT / "problems" / f"{name}.toml")
    lay = _layout_cached(name, layout_json)
    f = verify.em_frequencies(problem)
    if sheets:
        problem = correction.sheet_problem(problem)
    return _figures(problem, f, circuit_response(problem, lay, f))


def circuit_response(problem: Problem, lay: Layout | ParallelLayout, f: np.ndarray) -> np.ndarray:
    """The circuit model's S-matrix of either topology's layout (range warnings silenced)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        if isinstance(lay, ParallelLayout):
            return evaluate_parallel(problem, lay, f)
        return evaluate_layout(problem, lay, f)


def sheet_figures(rec: dict) -> dict:
    """The circuit model's figures for a record's layout with the field model's zero-thickness
    strips (refine.fullwave.correction.sheet_problem): like for like with the field solver. The
    record's ``model`` figures have the problem's metal thickness, which the field model lacks
    and which by itself moves the circuit model's response (10 um took the tapped alumina
    filters' worst in-band return loss from about 10 to 15 dB)."""
    return _model_figures(rec["filter"], json.dumps(rec["layout"], sort_keys=True), True)


def metal_figures(rec: dict) -> dict:
    """Today's circuit model's figures for a record's layout with the problem's metal (the
    record's own ``model`` figures are the circuit model's as it was when the solve ran)."""
    return _model_figures(rec["filter"], json.dumps(rec["layout"], sort_keys=True), False)


def margin_at_thickness(rec: dict) -> float | None:
    """A record's field solve carried to the problem's metal thickness
    (refine.fullwave.correction.margin_at_thickness: the worst margin of the circuit model with
    the problem's thickness under the correction extracted from this solve against the circuit
    model with sheets); the field margin itself on a problem without a thickness and on a
    parallel-coupled layout (its coupled-line model has zero-thickness strips, so carrying it
    changes nothing: refine.physics.coupled); None for a record kept without its
    S-parameters."""
    problem = load_problem(ROOT / "problems" / f"{rec['filter']}.toml")
    lay = record_layout(rec)
    if problem.strip_substrate.metal_thickness == 0 or not isinstance(lay, Layout):
        return rec["em"]["worst_margin_db"]
    got = stored_s(rec)
    if got is None:
        return None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        m, _, _ = correction.margin_at_thickness(problem, [correction.StoredSolve(lay, *got)])
    return m


def _record(
    name, k, res, status, layout: dict, problem, c, t0: float, box: str, earlier: list[dict]
) -> dict:
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
        # the ringing simulated, in group delays (None: the field check's default)
        "ring_delays": ring_delays(name, earlier),
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
        # the field solver's S-parameters themselves, so that later model work (a tee, a
        # correction) can be fitted to this solve without running it again
        "s_em": s_parameters(c.f, c.s_em),
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
    c = _check(name, problem, lay, res, threads, seq)
    return _record(name, k, res, status, parallel_layout_dict(lay), problem, c, t0, box, seq)


#: the most a re-solved record's figures may move for its S-parameters to be stored with it (a
#: re-solve of the same layout, mesh and engine is deterministic; anything more means the set-up
#: has changed since, and the S-parameters would not be the record's)
REPRODUCE_TOLERANCE = 1e-6


def figure_change(old: dict, new: dict) -> float:
    """The largest change between two records' field-solver figures: relative for the centre
    and bandwidth, in dB/100 for return loss, midband loss and margin (so that 1e-6 means a
    part per million or 1e-4 dB)."""
    rel = [abs(new["em"][k] / old["em"][k] - 1) for k in ("centre_hz", "bandwidth_hz")]
    db = [
        abs(new["em"][k] - old["em"][k]) / 100
        for k in ("worst_return_loss_db", "midband_loss_db", "worst_margin_db")
    ]
    return max(rel + db)


def fill_s(runs: list[dict], name: str, threads: int, box: str, replace: bool = False) -> None:
    """Re-solve each of ``name``'s records in ``box`` kept without S-parameters (from before the
    key) and store its S-parameters when the re-solve reproduces the record's figures within
    :data:`REPRODUCE_TOLERANCE`; the record says when and how closely. With ``replace``, a
    re-solve that does not reproduce (the set-up, such as the ringing time the circuit model
    sets, has changed since) replaces the record whole, and the new record names the one it
    replaced and how far their figures differ."""
    for i, rec in enumerate(runs):
        if sequence(rec) != (name, box) or "s_em" in rec:
            continue
        k = rec["mesh_index"]
        print(f"{name}, {box}, mesh {k + 1}: re-solving for its S-parameters ...", flush=True)
        # its sequence's set-up (ring-down, ringing) comes from its first record, as it did
        new = run_one(name, k, threads, runs, box)
        change = figure_change(rec, new)
        print(f"  figures reproduced to {change:.1e} ({new['seconds']:.0f} s)", flush=True)
        if change > REPRODUCE_TOLERANCE and replace:
            print(f"  beyond {REPRODUCE_TOLERANCE:g}: the re-solve replaces the record", flush=True)
            runs[i] = {
                **new,
                "replaces": {"date": rec["date"], "figure_change": change, "em": rec["em"]},
            }
            save(runs)
            continue
        if change > REPRODUCE_TOLERANCE:
            print(f"  not stored: beyond {REPRODUCE_TOLERANCE:g}", flush=True)
            continue
        runs[i] = {
            **rec,
            "s_em": new["s_em"],
            "s_em_resolved": {
                "date": new["date"],
                "figure_change": change,
                "engine": new["engine"],
            },
        }
        save(runs)


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
        "model": metal_figures(mine[-1]),
        "sheet": sheet_figures(mine[-1]),
        "thickness_um": _thickness_um(mine[-1]["filter"]),
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


def _fit_caution(runs: list[dict], key: tuple[str, str]) -> str:
    """A caution for a sequence whose ring-down continuation checked itself above the limit
    (refine.fullwave.ringdown.CHECK_LIMIT), with the worst check."""
    checks = [r.get("ringdown_fit_check") for r in runs if sequence(r) == key]
    worst = max((c for c in checks if c is not None), default=None)
    if worst is None or worst < ringdown.CHECK_LIMIT:
        return ""
    return f" (ring-down fit check {worst:.1e}, above the {ringdown.CHECK_LIMIT:g} caution)"


@functools.cache
def _thickness_um(name: str) -> float:
    return load_problem(ROOT / "problems" / f"{name}.toml").strip_substrate.metal_thickness * 1e6


def table(runs: list[dict]) -> str:
    """Per mesh sequence, the finest mesh's figures with their mesh uncertainty, against the
    circuit model with the field model's zero-thickness strips (like for like: centre, 3 dB
    bandwidth, return loss, loss) and, for return loss and loss, with the problem's metal."""
    rows = [
        "| filter (status on the circuit model when solved; box) | centre shift | in units of the FBW | 3 dB "
        "bandwidth ratio | worst in-band RL, field (circuit with sheets; with the metal) | "
        "midband loss, field (circuit with sheets; with the metal) | meshes, engine time |",
        "|---|---|---|---|---|---|---|",
    ]
    for key in sequences(runs):
        s = summary(runs, key)
        if s is None:
            continue
        name = key[0]
        m, t = s["sheet"], s["model"]  # like for like: the circuit model with sheets
        fc, dfc = s["centre_hz"]
        shift = fc / m["centre_hz"] - 1
        bw, dbw = s["bandwidth_hz"]
        rl, drl = s["worst_return_loss_db"]
        il, dil = s["midband_loss_db"]
        rows.append(
            f"| {name} ({s['status']}; {s['box']}) | {100 * shift:+.2f}{_pm(dfc, 100 / m['centre_hz'], '.2f')} % "
            f"| {shift / s['fbw']:+.2f}{_pm(dfc, 1 / (m['centre_hz'] * s['fbw']), '.2f')} | "
            f"{bw / m['bandwidth_hz']:.3f}{_pm(dbw, 1 / m['bandwidth_hz'], '.3f')} | "
            f"{rl:.1f}{_pm(drl, 1, '.1f')} dB ({m['worst_return_loss_db']:.1f}; "
            f"{t['worst_return_loss_db']:.1f} at {s['thickness_um']:g} µm) | "
            f"{il:.2f}{_pm(dil, 1, '.2f')} dB ({m['midband_loss_db']:.2f}; "
            f"{t['midband_loss_db']:.2f}) | "
            f"{s['meshes']}{' (no uncertainty yet)' if s['meshes'] == 1 else ''}"
            f"{_fit_caution(runs, key)}, "
            f"{s['seconds'] / 60:.0f} min |"
        )
    return "\n".join(rows)


#: the calibrated-model issue's bars for a circuit model that closed the gap to the field
#: solver: the centre within this fraction of the fractional bandwidth, the 3 dB bandwidth
#: within this fraction, and a refined design meeting its mask on the field solver at the first
#: solve for at least BAR_MET of BAR_FILTERS filters
BAR_CENTRE_FBW = 0.15
BAR_BANDWIDTH = 0.10
BAR_MET, BAR_FILTERS = 3, 4
#: the bars' verdicts in the scoreboard (a margin and its mesh uncertainty)
WORDS = {
    MeshVerdict.MET: "within",
    MeshVerdict.NOT_MET: "outside",
    MeshVerdict.UNDECIDED: "undecided",
}


def bar_figures(
    runs: list[dict],
    key: tuple[str, str],
    like: Callable[[dict], dict] | None = None,
    carry: Callable[[dict], float | None] | None = None,
) -> dict[str, Figure | None]:
    """One sequence's margins to the bars, per mesh, with their mesh uncertainty (None with one
    mesh): ``centre`` (in units of the FBW: the bar less the centre's distance from the circuit
    model's), ``bandwidth`` (the bar less the 3 dB bandwidth's relative distance), both against
    the circuit model with the field model's zero-thickness strips (:func:`sheet_figures`: like
    for like), and ``mask``: the field solve carried to the problem's metal thickness
    (:func:`margin_at_thickness`, dB) on the meshes whose records keep their S-parameters, None
    where none does. A distance's uncertainty is its signed figure's (taking the size of a
    figure cannot widen its interval). Each is judged by
    :func:`refine.fullwave.uncertainty.verdict`: beyond its uncertainty or not. ``like`` and
    ``carry`` replace :func:`sheet_figures` and :func:`margin_at_thickness` (invented records in
    tests)."""
    like = sheet_figures if like is None else like
    carry = margin_at_thickness if carry is None else carry
    mine = sorted((r for r in runs if sequence(r) == key), key=lambda r: r["mesh_index"])

    def figure(name: str, unit: str, recs: list[dict], signed: list[float], bar: float | None):
        cells = [r["edge_cell_m"] for r in recs]
        unc = mesh_uncertainty(cells, signed) if len(signed) > 1 else None
        values = signed if bar is None else [bar - abs(x) for x in signed]
        return Figure(name, unit, tuple(values), unc)

    sheet = [like(r) for r in mine]
    centre = [
        (r["em"]["centre_hz"] / m["centre_hz"] - 1) / r["fbw"]
        for r, m in zip(mine, sheet, strict=True)
    ]
    bandwidth = [
        r["em"]["bandwidth_hz"] / m["bandwidth_hz"] - 1 for r, m in zip(mine, sheet, strict=True)
    ]
    carried = [(r, carry(r)) for r in mine]
    kept = [(r, m) for r, m in carried if m is not None]
    mask = figure("mask", "dB", [r for r, _ in kept], [m for _, m in kept], None) if kept else None
    return {
        "centre": figure("centre", "FBW", mine, centre, BAR_CENTRE_FBW),
        "bandwidth": figure("bandwidth", "", mine, bandwidth, BAR_BANDWIDTH),
        "mask": mask,
    }


def _bar_cell(f: Figure, v: MeshVerdict, bar: float, scale: float, unit: str, fmt: str) -> str:
    """A distance (the bar less the margin), its uncertainty and the verdict, as a table cell."""
    pm = "" if f.uncertainty is None else f" ± {format(f.uncertainty * scale, fmt)}"
    return f"{format((bar - f.value) * scale, fmt)}{pm}{unit}: {WORDS[v]}"


def scoreboard(runs: list[dict]) -> str:
    """The calibrated-model issue's bars on every sequence, the finest mesh of each: how far
    the field solver's centre and 3 dB bandwidth lie from the circuit model's (like for like:
    both with zero-thickness strips), and whether the refined design meets its mask on the
    field solver carried to the problem's metal thickness, each as within / outside the bar
    beyond the mesh uncertainty, or undecided; then a count per bar over the filters (a
    filter's latest box)."""
    rows = [
        f"| filter (box) | meshes | centre, distance from the circuit model's (bar "
        f"{BAR_CENTRE_FBW:g} of the FBW) | 3 dB bandwidth, distance (bar {100 * BAR_BANDWIDTH:g} %) "
        "| worst mask margin, field solver (dB): with sheets; carried to the problem's metal | "
        "status on the circuit model when solved |",
        "|---|---|---|---|---|---|",
    ]
    latest: dict[str, dict[str, MeshVerdict | None]] = {}
    for key in sequences(runs):
        fig = bar_figures(runs, key)
        mine = sorted((r for r in runs if sequence(r) == key), key=lambda r: r["mesh_index"])
        verdicts = {k: (None if f is None else verdict(f)) for k, f in fig.items()}
        latest[key[0]] = verdicts  # sequences() lists a filter's old box first
        centre, bandwidth, m = fig["centre"], fig["bandwidth"], fig["mask"]
        assert centre is not None and bandwidth is not None
        raw = [r["em"]["worst_margin_db"] for r in mine]
        cells = [r["edge_cell_m"] for r in mine]
        raw_u = mesh_uncertainty(cells, raw) if len(raw) > 1 else None
        sheets = f"{raw[-1]:+.2f}{_pm(raw_u, 1, '.2f')}"
        if m is None:
            carried = "not carried (no stored S-parameters)"
        else:
            met = {MeshVerdict.MET: "met", MeshVerdict.NOT_MET: "not met"}.get(
                verdicts["mask"], "undecided"
            )
            carried = f"{m.value:+.2f}{_pm(m.uncertainty, 1, '.2f')} ({len(m.per_mesh)} mesh"
            carried += f"{'es' if len(m.per_mesh) > 1 else ''}): {met}"
        rows.append(
            f"| {key[0]} ({campaign_data.box_name(mine[0])}) | {len(mine)} | "
            f"{_bar_cell(centre, verdicts['centre'], BAR_CENTRE_FBW, 1, '', '.2f')} | "
            f"{_bar_cell(bandwidth, verdicts['bandwidth'], BAR_BANDWIDTH, 100, ' %', '.1f')}"
            f" | {sheets}; {carried} | {mine[0]['status']} |"
        )

    def count(k: str, v: MeshVerdict | None) -> int:
        return sum(1 for x in latest.values() if x[k] is v)

    n = len(latest)
    lines = [
        "",
        f"Over the {n} filters solved (each in its latest box): centre within the bar beyond the "
        f"mesh uncertainty for {count('centre', MeshVerdict.MET)}, outside it for "
        f"{count('centre', MeshVerdict.NOT_MET)}; 3 dB bandwidth within for "
        f"{count('bandwidth', MeshVerdict.MET)}, outside for "
        f"{count('bandwidth', MeshVerdict.NOT_MET)}; the mask met on the field solver carried to "
        f"the problem's metal for {count('mask', MeshVerdict.MET)}, not met for "
        f"{count('mask', MeshVerdict.NOT_MET)}, not carried for {count('mask', None)} (the bar: "
        f"met for {BAR_MET} of {BAR_FILTERS}). The rest are undecided at their meshes.",
    ]
    return "\n".join(rows + lines)


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
    ap.add_argument(
        "--meshes", type=int, default=MESHES,
        help=f"run each filter's meshes up to this one (1 to {MESHES}; default {MESHES})",
    )  # fmt: skip
    ap.add_argument(
        "--fill-s", action="store_true",
        help="re-solve the --only filter's records kept without S-parameters, then stop",
    )  # fmt: skip
    ap.add_argument(
        "--replace-changed", action="store_true",
        help="with --fill-s: a re-solve whose figures moved replaces its record whole",
    )  # fmt: skip
    args = ap.parse_args(argv)
    if args.only is not None and args.only not in FILTERS:
        ap.error(f"--only {args.only!r}: not one of {', '.join(FILTERS)}")
    if not 1 <= args.meshes <= MESHES:
        ap.error(f"--meshes {args.meshes}: allowed 1 to {MESHES}")
    if args.fill_s and args.only is None:
        ap.error("--fill-s needs --only NAME")
    if args.replace_changed and not args.fill_s:
        ap.error("--replace-changed needs --fill-s")
    runs = load()
    if args.fill_s:
        fill_s(runs, args.only, args.threads, args.box, args.replace_changed)
        return 0
    if not (args.table or args.readme):
        done = {(*sequence(r), r["mesh_index"]) for r in runs}
        for k in range(args.meshes):  # every filter's coarser meshes first: a table sooner
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
    board = scoreboard(runs)
    if args.readme:
        mesh = geometry.REFINE_RATIO
        replace_block(
            "em-filters",
            f"`python benchmarks/em_filters.py --readme` wrote this table (meshes with every "
            f"cell refined by {mesh:.3g} from one to the next, thirds rule at metal edges; the "
            f"campaign runs three per filter and resumes where it stopped):\n\n" + text + "\n",
        )
        replace_block(
            "closed-gap",
            "`python benchmarks/em_filters.py --readme` wrote this table from the same records "
            "(finest mesh of each; a distance's verdict is judged beyond the mesh uncertainty "
            "of its margin to the bar):\n\n" + board + "\n",
        )
    print(text)
    print()
    print(board)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
