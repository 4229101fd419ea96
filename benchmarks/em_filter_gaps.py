"""A filter's own gaps on the filter's own field-solver meshes, against the calibration.

    python benchmarks/em_filter_gaps.py [--threads N] [--meshes K]   # run what is missing
    python benchmarks/em_filter_gaps.py --table                      # the table only
    python benchmarks/em_filter_gaps.py --readme                     # the README block

A field solve of a gap-coupled filter on one mesh reads every gap as that mesh reads it, and
the coarse meshes of the nine-gap fixture read a gap's series capacitance 16–33 % high. So
before a filter's field response is blamed on the circuit model, the gaps are solved alone on
the very meshes the filter ran on: each distinct gap of the layout as a symmetric gap
(refine.fullwave.calibration.solve_gap_on: lossless, quasi-static Cg and Cp from the π-network
over f·h 0.8–5 GHz·mm) at the width the circuit model uses for its series capacitance (the
geometric mean of the two sides), with the filter's mesh preset (edge cell, thirds rule, half
box, matched layers) and its largest cell (the wavelength limit scaled from the filter's band
top to the gap's). The table sets each mesh's Cg and Cp beside the calibration the circuit model
reads (refine.physics.calibrated: electrostatic, extrapolated) and gives the ratio; then it
puts the mesh's ratios into the circuit model as gap factors and compares that model's response
with the filter's field solve on the same mesh (the circuit model with the field model's
zero-thickness strips, like for like): where the two agree, the mesh's reading of the gaps
explains the filter's departure from the circuit model.

Each finished (filter, gap, mesh) solve is appended at once to
``tests/data/fullwave-filter-gaps.json`` with provenance; a killed run resumes.
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

from refine.circuit.layout import Layout
from refine.circuit.response import strip_medium_for
from refine.fullwave import calibration, correction, engine, verify, waves
from refine.physics import strip
from refine.physics.constants import C0
from refine.physics.gap_fixture import GapGeometry
from refine.spec.problem import Problem, load_problem
from refine.validity import ModelRangeWarning

sys.path.insert(0, str(Path(__file__).resolve().parent))
import campaign_data
import em_filters
from em_extract import band_and_loss
from em_filters import layout_of
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT / "tests" / "data" / "fullwave-filter-gaps.json"
FILTER = "microstrip-x-band-alumina-n3"


def distinct_gaps(layout: Layout) -> list[tuple[int, float, float]]:
    """(index, symmetric gap) of each gap up to the middle (a mirror layout's others repeat
    them), at the geometric-mean width of its two sides; the feed's side is the feed width."""
    w = [layout.feed_width, *layout.widths, layout.feed_width]
    n = len(layout.gaps)
    picks = range((n + 1) // 2) if layout.is_mirror else range(n)
    return [(i, float(np.sqrt(w[i] * w[i + 1])), layout.gaps[i]) for i in picks]


def gap_geometries(problem: Problem, layout: Layout) -> list[tuple[int, GapGeometry]]:
    sub = problem.strip_substrate
    return [(i, GapGeometry(sub.eps_r, sub.height, w, s)) for i, w, s in distinct_gaps(layout)]


def filter_meshes(problem: Problem, layout: Layout, box: str) -> list:
    """The filter's mesh presets in ``box``, with the wavelength limit scaled so that the gap's
    solve (band top f·h 5 GHz·mm) has the filter's largest cell."""
    top_filter = verify.em_band(problem)[1]
    top_gap = calibration.extraction_band(problem.strip_substrate.height)[1]
    out = []
    for res in verify.resolutions("converged", layout):
        res = replace(res, **campaign_data.BOXES[box])
        out.append(
            replace(res, cells_per_wavelength=res.cells_per_wavelength * top_filter / top_gap)
        )
    return out


def static_values(problem: Problem, g: GapGeometry) -> tuple[float, float]:
    """(Cg, Cp) the circuit model reads for a symmetric gap (the gap model the problem names:
    by default the bundled calibration for its ε_r) between zero-thickness strips, like the
    field model's sheets."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        c = strip.sheet_gap_capacitances(
            strip_medium_for(problem), problem.gap_model, g.width, g.width, g.gap
        )
    return float(np.real(c.c_series)), float(np.real(c.c_shunt_in))


def load() -> list[dict]:
    return campaign_data.load_runs(DATA)


def save(runs: list[dict]) -> None:
    doc = {
        "what": "a filter's own gaps, solved alone on the filter's own field-solver meshes "
        "(symmetric gap at the geometric-mean width; lossless; quasi-static Cg, Cp); written "
        "by benchmarks/em_filter_gaps.py",
        "runs": runs,
    }
    campaign_data.save_doc(DATA, doc, key=lambda r: (r["filter"], r["gap_index"], r["mesh_index"]))


def run(name: str, meshes: int, threads: int) -> list[dict]:
    runs = load()
    problem = load_problem(ROOT / "problems" / f"{name}.toml")
    layout = layout_of(name, problem, em_filters.load())
    assert isinstance(layout, Layout)
    done = {(r["filter"], r["gap_index"], r["mesh_index"]) for r in runs}
    presets = filter_meshes(problem, layout, campaign_data.DEFAULT_BOX)
    for k in range(meshes):
        for i, g in gap_geometries(problem, layout):
            if (name, i, k) in done:
                continue
            print(f"{name}: gap {i + 1} (s {g.gap * 1e6:g} um, W {g.width * 1e6:.0f} um), "
                  f"mesh {k + 1} ...", flush=True)  # fmt: skip
            t0 = time.perf_counter()
            r = calibration.solve_gap_on(
                g, presets[k], threads=threads, progress=lambda s: print(f"  {s}", flush=True)
            )
            runs.append(
                {
                    "filter": name,
                    "gap_index": i,
                    "geometry": {
                        "eps_r": g.eps_r,
                        "height": g.height,
                        "width": g.width,
                        "gap": g.gap,
                    },
                    "mesh_index": k,
                    "box": campaign_data.DEFAULT_BOX,
                    "edge_cell_m": presets[k].edge_cell,
                    "cells_per_wavelength": presets[k].cells_per_wavelength,
                    "c_series": r.c_series,
                    "c_shunt": r.c_shunt,
                    "cells": r.cells,
                    "seconds": time.perf_counter() - t0,
                    "engine": engine.find_engine().version,
                    "date": datetime.date.today().isoformat(),
                }
            )
            save(runs)
            print(f"  Cg {r.c_series * 1e15:.2f} fF, Cp {r.c_shunt * 1e15:.2f} fF", flush=True)
    return runs


def ladder(runs: list[dict], name: str, i: int) -> list[dict]:
    """One gap's records, coarsest mesh first."""
    return sorted(
        (r for r in runs if r["filter"] == name and r["gap_index"] == i),
        key=lambda r: r["mesh_index"],
    )


def gap_table(runs: list[dict], name: str = FILTER) -> str:
    """Each gap on each of the filter's meshes against the circuit model's values, and the
    Richardson value where three meshes ran."""
    problem = load_problem(ROOT / "problems" / f"{name}.toml")
    lines = [
        "| gap (s, W) | mesh (edge cell) | Cg (fF): field / circuit model | ratio | Cp (fF): "
        "field / circuit model | ratio |",
        "|---|---|---|---|---|---|",
    ]
    for i in sorted({r["gap_index"] for r in runs if r["filter"] == name}):
        mine = ladder(runs, name, i)
        g = GapGeometry(**mine[0]["geometry"])
        cg0, cp0 = static_values(problem, g)
        label = f"{i + 1} ({g.gap * 1e6:g} µm, {g.width * 1e6:.0f} µm)"
        rows = [
            (
                f"{r['mesh_index'] + 1} ({r['edge_cell_m'] * 1e6:.2f} µm)",
                r["c_series"],
                r["c_shunt"],
            )
            for r in mine
        ]
        if len(mine) >= 3:
            cells = [r["edge_cell_m"] for r in mine]
            cg = waves.richardson(cells, [r["c_series"] for r in mine])
            cp = waves.richardson(cells, [r["c_shunt"] for r in mine])
            rows.append((f"extrapolated (order {cg.order:.1f})", cg.value, cp.value))
        for mesh, cg_f, cp_f in rows:
            lines.append(
                f"| {label} | {mesh} | {cg_f * 1e15:.2f} / {cg0 * 1e15:.2f} | {cg_f / cg0:.3f} | "
                f"{cp_f * 1e15:.2f} / {cp0 * 1e15:.2f} | {cp_f / cp0:.3f} |"
            )
    return "\n".join(lines)


def mesh_correction(
    problem: Problem, layout: Layout, runs: list[dict], k: int, name: str = FILTER
) -> correction.ModelCorrection | None:
    """The circuit model's correction that makes its gaps read as mesh ``k`` reads them: each
    gap's series capacitance times the mesh's ratio to the circuit model's, and each
    resonator's length offset by the shunt capacitance the mesh adds at its two ends (ΔCp as
    an open-end extension, ΔCp·Z0·v at the design centre); None until every distinct gap has
    run on that mesh."""
    got = {r["gap_index"]: r for r in runs if r["filter"] == name and r["mesh_index"] == k}
    picks = [i for i, _ in gap_geometries(problem, layout)]
    if any(i not in got for i in picks):
        return None
    n = len(layout.gaps)
    factors, d_cp = [1.0] * n, [0.0] * n
    for i, g in gap_geometries(problem, layout):
        cg0, cp0 = static_values(problem, g)
        for j in {i, n - 1 - i} if layout.is_mirror else {i}:
            factors[j] = got[i]["c_series"] / cg0
            d_cp[j] = got[i]["c_shunt"] - cp0
    medium = strip_medium_for(correction.sheet_problem(problem))
    offsets = []
    for j, w in enumerate(layout.widths):
        z0, eps = (float(np.real(x[0])) for x in medium.dispersive(w, np.array([problem.f0])))
        offsets.append((d_cp[j] + d_cp[j + 1]) * z0 * C0 / np.sqrt(eps))
    base = correction.ModelCorrection.none(layout)
    return replace(base, gap_factors=tuple(factors), length_offsets=tuple(offsets))


def misfit(problem: Problem, f: np.ndarray, s_a: np.ndarray, s_b: np.ndarray) -> float:
    """RMS difference of |S11| and |S21| over the space-mapping fit band."""
    sel = correction.fit_band(problem, f)
    d = [np.abs(s_a[sel, i, 0]) - np.abs(s_b[sel, i, 0]) for i in (0, 1)]
    return float(np.sqrt(np.mean(np.concatenate(d) ** 2)))


def explain_rows(gap_runs: list[dict], name: str = FILTER) -> list[dict]:
    """Per mesh with the filter's field solve stored and all its gaps solved: the circuit
    model as it is and with the mesh's gaps, each against the field solve."""
    filter_runs = em_filters.load()
    problem = load_problem(ROOT / "problems" / f"{name}.toml")
    layout = layout_of(name, problem, filter_runs)
    assert isinstance(layout, Layout)
    out = []
    for rec in sorted(filter_runs, key=lambda r: r["mesh_index"]):
        if rec["filter"] != name or em_filters.sequence(rec)[1] != campaign_data.DEFAULT_BOX:
            continue
        corr = mesh_correction(problem, layout, gap_runs, rec["mesh_index"], name)
        got = em_filters.stored_s(rec)
        if corr is None or got is None:
            continue
        f, s_em = got
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ModelRangeWarning)
            sheet = correction.sheet_problem(problem)  # like for like with the field model
            plain = correction.corrected_response(
                sheet, layout, correction.ModelCorrection.none(layout), f
            )
            meshed = correction.corrected_response(sheet, layout, corr, f)
        row = {
            "mesh_index": rec["mesh_index"],
            "edge_cell_m": rec["edge_cell_m"],
            "correction": corr,
        }
        for key, s in (("field", s_em), ("circuit", plain), ("with the mesh's gaps", meshed)):
            row[key] = {**band_and_loss(problem, f, s), "misfit": misfit(problem, f, s, s_em)}
        out.append(row)
    return out


def explain_table(data: list[dict]) -> str:
    lines = [
        "| filter mesh (edge cell) | model | gap factors, input end to middle | length offsets "
        "(µm) | centre (GHz) | 3 dB bandwidth (MHz) | worst in-band RL (dB) | power lost at f0 | "
        "misfit to the field solve (RMS of \\|S\\|) |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for r in data:
        c = r["correction"]
        half = (len(c.gap_factors) + 1) // 2
        for key in ("field", "circuit", "with the mesh's gaps"):
            x = r[key]
            mesh_gaps = key == "with the mesh's gaps"
            gf = ", ".join(f"{g:.3f}" for g in c.gap_factors[:half]) if mesh_gaps else "–"
            lo = (
                ", ".join(
                    f"{o * 1e6:+.0f}" for o in c.length_offsets[: (len(c.length_offsets) + 1) // 2]
                )
                if mesh_gaps
                else "–"
            )
            lines.append(
                f"| {r['mesh_index'] + 1} ({r['edge_cell_m'] * 1e6:.2f} µm) | {key} | {gf} | {lo} | "
                f"{x['centre_hz'] / 1e9:.3f} | {x['bandwidth_hz'] / 1e6:.0f} | "
                f"{x['worst_return_loss_db']:.1f} | {x['lost_power']:.2f} | "
                + ("–" if key == "field" else f"{x['misfit']:.3f}")
                + " |"
            )
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--table", action="store_true", help="print the table only, run nothing")
    ap.add_argument("--readme", action="store_true", help="write the README block em-filter-gaps")
    ap.add_argument("--threads", type=int, default=0, help="engine threads (0: all cores)")
    ap.add_argument(
        "--meshes", type=int, default=em_filters.MESHES,
        help=f"run the filter's meshes up to this one (1 to {em_filters.MESHES})",
    )  # fmt: skip
    args = ap.parse_args(argv)
    if not 1 <= args.meshes <= em_filters.MESHES:
        ap.error(f"--meshes {args.meshes}: allowed 1 to {em_filters.MESHES}")
    if not (args.table or args.readme):
        run(FILTER, args.meshes, args.threads)
    runs = load()
    text = (
        f"`python benchmarks/em_filter_gaps.py --readme` wrote these tables ({FILTER}: its "
        "gaps alone on its own meshes, against the calibration the circuit model reads; then "
        "the circuit model given each mesh's gaps, against the filter's field solve on that "
        "mesh):\n\n" + gap_table(runs) + "\n\n" + explain_table(explain_rows(runs)) + "\n"
    )
    if args.readme:
        replace_block("em-filter-gaps", text)
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
