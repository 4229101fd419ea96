"""Field-solver validation on a weakly coupled half-wave resonator against the circuit model.

    python benchmarks/em_resonators.py [--threads N]   # run what is missing, print the table
    python benchmarks/em_resonators.py --only NAME     # one substrate's missing meshes
    python benchmarks/em_resonators.py --table         # the table from the data file only
    python benchmarks/em_resonators.py --readme        # the table as the README block

A 50 ohm half-wave resonator between two 50 ohm feeds, coupled through end gaps one substrate
height wide (s/h = 1: the feed loads the resonator so little that its resonance is that of the
line and its two ends), solved on three meshes with every cell refined by
refine.fullwave.geometry.REFINE_RATIO from one to the next and the thirds rule at metal edges
(the field check's "converged" preset). The resonance is the peak of |S21|, located by a
parabola through the three highest points in dB on a grid of 0.02 % steps; the loaded Q is the
peak's 3 dB width. The circuit model is refine's own for that layout on the same substrate
(its default gap model: the bundled calibration where there is one, with radiation), with zero
metal thickness as in the field model. What it checks is the engine and the circuit model's
line and open-end physics together before any coupling gap is judged: the field-check issue's
bar is 0.2 %.

Each finished (substrate, mesh) solve is appended to ``tests/data/fullwave-resonators.json`` at
once with the layout, both responses' figures and provenance (engine, mesh, cells, seconds,
ringing left at the time cap, date), so a killed campaign resumes where it stopped.
``tests/test_fullwave_resonators.py`` reads that file.
"""

from __future__ import annotations

import argparse
import datetime
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from refine.circuit.layout import Layout
from refine.circuit.response import evaluate_layout, loss_budget
from refine.fullwave import geometry, solve, verify
from refine.fullwave.uncertainty import mesh_uncertainty
from refine.physics.microstrip import Microstrip
from refine.physics.strip import open_end_extension
from refine.spec.coupling import Coupling
from refine.spec.problem import Problem, load_problem

sys.path.insert(0, str(Path(__file__).resolve().parent))
import campaign_data
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT / "tests" / "data" / "fullwave-resonators.json"
#: substrate name -> (bundled problem whose substrate, metal and loss are used, resonance aimed at)
CASES = {
    "alumina 9.8, 0.635 mm": ("microstrip-x-band-alumina-n3", 10e9),
    "laminate 3.55, 0.508 mm": ("inf-pcb-gap-5g8-n3-3pct", 5.8e9),
}
GAP_OVER_H = 1.0
SPAN = 0.12  # the excitation band: f0 (1 ± SPAN)
STEP = 2e-4  # frequency grid step, relative to f0
MESHES = 3
RING_DELAYS = 8.0  # simulated ringing: this many of the model's group delays at resonance


def problem_for(name: str) -> Problem:
    """The bundled problem with zero metal thickness (the field model's sheets)."""
    stem, _ = CASES[name]
    p = load_problem(ROOT / "problems" / f"{stem}.toml")
    return replace(p, substrate=replace(p.strip_substrate, metal_thickness=0.0))


def layout_for(name: str) -> Layout:
    """The resonator: 50 ohm throughout, its length the half wavelength at the aimed resonance
    less Kirschning-Jansen-Koster's open-end extension at each end (so that the resonance falls
    near it; the check compares the two solvers on this one layout, wherever it resonates)."""
    p = problem_for(name)
    f0 = CASES[name][1]
    sub = p.strip_substrate
    line = Microstrip(sub, loss=False)
    w = line.width_for_z0(p.z_ref, f0)
    half = 0.5 * float(np.asarray(line.guided_wavelength(w, np.array([f0]))).ravel()[0])
    dl = open_end_extension(line, w)
    gap = GAP_OVER_H * sub.height
    return Layout(Coupling.GAP, w, (w,), (gap, gap), (half - 2 * dl,))


def frequencies(name: str) -> NDArray[np.float64]:
    f0 = CASES[name][1]
    n = round(2 * SPAN / STEP) + 1
    return np.linspace(f0 * (1 - SPAN), f0 * (1 + SPAN), n)


def peak(f: NDArray, s21: NDArray) -> tuple[float, float, float]:
    """(resonance, loaded Q, peak |S21| in dB) of a single resonance: the parabola through the
    three highest points of |S21| in dB; Q from the 3 dB width, linearly interpolated."""
    db = 20 * np.log10(np.abs(s21))
    k = int(np.argmax(db))
    if k in (0, len(f) - 1):
        raise ValueError("the resonance lies at the edge of the frequency grid")
    y0, y1, y2 = db[k - 1], db[k], db[k + 1]
    df = f[k + 1] - f[k]
    offset = 0.5 * (y0 - y2) / (y0 - 2 * y1 + y2)
    fr = float(f[k] + offset * df)
    top = float(y1 - 0.25 * (y0 - y2) * offset)
    level = top - 3.0
    lo = k
    while lo > 0 and db[lo] > level:
        lo -= 1
    hi = k
    while hi < len(f) - 1 and db[hi] > level:
        hi += 1
    f_lo = float(np.interp(level, [db[lo], db[lo + 1]], [f[lo], f[lo + 1]]))
    f_hi = float(np.interp(level, [db[hi], db[hi - 1]], [f[hi], f[hi - 1]]))
    return fr, fr / (f_hi - f_lo), top


def group_delay_at_peak(f: NDArray, s21: NDArray) -> float:
    phase = np.unwrap(np.angle(s21))
    gd = -np.gradient(phase, 2.0 * np.pi * f)
    return float(gd[int(np.argmax(np.abs(s21)))])


#: the box every new sequence is solved in: the field check's defaults
DEFAULT_BOX = {"open_walls": "pml", "mirror": True}


def sequence(run: dict) -> tuple[str, str, bool]:
    """A record's mesh sequence: its substrate and the box it was solved in (records before
    the box keys: first-order walls, whole box). Each sequence is one row of the table."""
    box = campaign_data.box_of(run)
    return run["substrate"], box["open_walls"], box["mirror"]


def run_one(name: str, k: int, threads: int, earlier: list[dict] | None = None) -> dict:
    """Mesh ``k`` of one resonator in the field check's default box (:data:`DEFAULT_BOX`). A
    sequence continues as it began: records of the same sequence that ran to
    :data:`RING_DELAYS` group delays without continuing the ring-down keep doing so; a new
    sequence continues it (refine.fullwave.ringdown) after
    refine.fullwave.verify.CONTINUED_RING_DELAYS."""
    p = problem_for(name)
    lay = layout_for(name)
    f = frequencies(name)
    s_model = evaluate_layout(p, lay, f)
    d = min(geometry.MESHES["coarse"].edge_cell, 0.5 * min(lay.gaps))
    res = replace(geometry.Resolution("converged", d, edge_rule="thirds").refined(k), **DEFAULT_BOX)
    key = (name, res.open_walls, res.mirror)
    mine = [r for r in earlier or [] if sequence(r) == key]
    continued = bool(mine[0].get("ringdown_continued", False)) if mine else True
    delays = verify.CONTINUED_RING_DELAYS if continued else RING_DELAYS
    ring = delays * group_delay_at_peak(f, s_model[:, 1, 0])
    sub = p.strip_substrate
    band = (float(f[0]), float(f[-1]))
    length = geometry.feed_length(sub, lay.feed_width, band[1], res)
    st = geometry.layout_structure(lay, sub, length)
    t0 = time.perf_counter()
    fs = solve.solve(
        st, sub, f, p.z_ref, res, ring, band, None, threads, True,
        lambda s: print(f"  {s}", flush=True), p.enclosure, continued,
    )  # fmt: skip
    fe, qe, pe = peak(f, fs.s[:, 1, 0])
    fm, qm, pm = peak(f, s_model[:, 1, 0])
    return {
        "substrate": name,
        "mesh_index": k,
        "edge_cell_m": res.edge_cell,
        "cells_per_wavelength": res.cells_per_wavelength,
        "edge_rule": res.edge_rule,
        "open_walls": res.open_walls,
        "half_box": fs.mesh.mirror is not None,
        "problem": CASES[name][0],
        "gap_model": p.gap_model,
        "layout": {"width": lay.feed_width, "gap": lay.gaps[0], "length": lay.lengths[0]},
        "em": {"resonance_hz": fe, "loaded_q": qe, "peak_s21_db": pe},
        "model": {"resonance_hz": fm, "loaded_q": qm, "peak_s21_db": pm},
        "ringing_s": ring,
        "ringdown_continued": continued,
        "ringdown_fit_check": fs.ringdown_check,
        "tail": fs.tail,
        "cells": fs.mesh.cells,
        "seconds": time.perf_counter() - t0,
        "engine": fs.engine,
        "date": datetime.date.today().isoformat(),
    }


def load() -> list[dict]:
    return campaign_data.load_runs(DATA)


def save(runs: list[dict]) -> None:
    doc = {
        "what": "weakly coupled (s/h = 1) 50 ohm half-wave resonators on the field solver, "
        "three meshes each (every cell refined), thirds rule at metal edges, zero-thickness "
        "perfectly conducting strips on the lossy substrate, against refine's circuit model "
        "(zero metal thickness, its conductor loss kept); written by benchmarks/em_resonators.py",
        "runs": runs,
    }
    campaign_data.save_doc(DATA, doc)


def sequences(runs: list[dict]) -> list[tuple[str, str, bool]]:
    """The data's mesh sequences, by substrate in :data:`CASES` order, oldest box first."""
    keys = {sequence(r) for r in runs}
    return sorted(keys, key=lambda k: (list(CASES).index(k[0]), k[1] == "pml", k[2]))


def summary(runs: list[dict], key: tuple[str, str, bool]) -> dict | None:
    """One sequence's finest-mesh figures with their mesh uncertainty (None while one mesh has
    run), or None before any."""
    mine = sorted((r for r in runs if sequence(r) == key), key=lambda r: r["mesh_index"])
    if not mine:
        return None
    cells = [r["edge_cell_m"] for r in mine]
    out: dict = {"model": mine[-1]["model"], "meshes": len(mine), "gap_model": mine[0]["gap_model"]}
    for key in ("resonance_hz", "loaded_q"):
        values = [r["em"][key] for r in mine]
        out[key] = (values[-1], mesh_uncertainty(cells, values) if len(mine) > 1 else None)
    out["per_mesh_shift"] = [r["em"]["resonance_hz"] / r["model"]["resonance_hz"] - 1 for r in mine]
    out["finest_em"] = mine[-1]["em"]
    out["seconds"] = sum(r["seconds"] for r in mine)
    out["tail"] = max(r["tail"] for r in mine)
    box = campaign_data.box_of(mine[0])
    walls = "matched layers" if box["open_walls"] == "pml" else "first-order walls"
    out["box"] = f"{walls}, {'half' if box['mirror'] else 'whole'} box"
    out["continued"] = bool(mine[0].get("ringdown_continued", False))
    return out


def radiation_qs(name: str, field: dict) -> tuple[float, float]:
    """(field, circuit) Q of what the open resonator radiates. Field: its unloaded Q (lossless
    metal) with the circuit model's dielectric Q taken out, so radiation and surface waves;
    circuit: Belohoubek and Denlinger's space-wave Q (refine.circuit.response.loss_budget)."""
    budget = loss_budget(problem_for(name), layout_for(name), [1.0])
    qu, _ = unloaded_and_external_q(field)
    return 1.0 / (1.0 / qu - 1.0 / budget.q_dielectric[0]), budget.q_radiation[0]


def unloaded_and_external_q(side: dict) -> tuple[float, float]:
    """(Q_u, Q_e per port) of a symmetric resonator from its loaded Q and peak |S21|:
    |S21| = 1 - Q_L/Q_u = 2 Q_L/Q_e (common practice, no source)."""
    s = 10 ** (side["peak_s21_db"] / 20)
    return side["loaded_q"] / (1 - s), 2 * side["loaded_q"] / s


def table(runs: list[dict]) -> str:
    rows = [
        "| substrate (circuit gap model) | resonance, circuit | field solver's shift | "
        "shift per mesh, coarse to fine | loaded Q, field (circuit) | unloaded Q, field "
        "(circuit) | external Q per port, field (circuit) | radiation Q, field "
        "(Belohoubek–Denlinger) | meshes, engine time |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for key in sequences(runs):
        name = key[0]
        s = summary(runs, key)
        if s is None:
            continue
        qr_e, qr_m = radiation_qs(name, s["finest_em"])
        fm = s["model"]["resonance_hz"]
        fe, dfe = s["resonance_hz"]
        q, dq = s["loaded_q"]
        per = " / ".join(f"{100 * x:+.2f}" for x in s["per_mesh_shift"])
        qu_e, qe_e = unloaded_and_external_q(s["finest_em"])
        qu_m, qe_m = unloaded_and_external_q(s["model"])
        pm_f = "(one mesh)" if dfe is None else f"± {100 * dfe / fm:.2f} %"
        pm_q = "(one mesh)" if dq is None else f"± {dq:.0f}"
        rows.append(
            f"| {name} ({s['gap_model']}; {s['box']}) | {fm / 1e9:.4f} GHz | "
            f"{100 * (fe / fm - 1):+.2f} % {pm_f} | {per} % | {q:.0f} {pm_q} "
            f"({s['model']['loaded_q']:.0f}) | {qu_e:.0f} ({qu_m:.0f}) | {qe_e:.0f} ({qe_m:.0f}) | "
            f"{qr_e:.0f} ({qr_m:.0f}) | {s['meshes']}{', continued' if s['continued'] else ''}, "
            f"{s['seconds'] / 60:.0f} min |"
        )
    return "\n".join(rows)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--table", action="store_true", help="print the table only, run nothing")
    ap.add_argument("--readme", action="store_true", help="write the README block")
    ap.add_argument("--threads", type=int, default=0, help="engine threads (0: all cores)")
    ap.add_argument("--only", help="run this substrate only (a name of CASES)")
    args = ap.parse_args(argv)
    runs = load()
    if args.only is not None and args.only not in CASES:
        print(f"--only {args.only!r}: not one of {', '.join(CASES)}", file=sys.stderr)
        return 2
    if not (args.table or args.readme):
        for name in [args.only] if args.only else list(CASES):
            key = (name, DEFAULT_BOX["open_walls"], DEFAULT_BOX["mirror"])
            for k in range(MESHES):
                if any(sequence(r) == key and r["mesh_index"] == k for r in runs):
                    continue
                print(f"{name}, mesh {k + 1} of {MESHES} ...", flush=True)
                runs.append(run_one(name, k, args.threads, runs))
                save(runs)
    text = table(runs)
    if args.readme:
        replace_block(
            "em-resonators",
            "`python benchmarks/em_resonators.py --readme` wrote this table (a 50 Ω half-wave "
            "resonator coupled through gaps of one substrate height; meshes with every cell "
            f"refined by {geometry.REFINE_RATIO:.2f} from one to the next, thirds rule at metal "
            "edges):\n\n" + text,
        )
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
