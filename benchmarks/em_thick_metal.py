"""Solid strips against sheets on the field solver: what the metal's thickness does to a line.

    python benchmarks/em_thick_metal.py            # run what is missing, then print the table
    python benchmarks/em_thick_metal.py --table    # print the table from the data file only

The circuit model applies the problem's metal thickness to its lines through the
Hammerstad-Jensen thickness correction (a wider effective strip: lower Z0, lower eps_eff) and
nowhere else; the field check's default strips are zero-thickness sheets. This campaign asks
the field solver how much a solid strip of the problem's thickness (refine.fullwave.geometry's
"thick" metal model: perfect conductor from the substrate top to h + t, current probes around
the whole conductor) changes a straight 50 ohm line's eps_eff and Z0 from the same line as a
sheet on the same mesh (the solid strip's, with its fine cells at both faces), over a mesh
sequence, and sets that beside the closed form's own change. The ratio thick/sheet cancels
most of what the mesh gets wrong about both.

A third run on the two coarser meshes uses the engine's own port current probes (drawn in the
strip's bottom plane) on the solid strip: it shows what the enclosing probes are for.

Each finished (substrate, mesh, metal) run is appended to ``tests/data/fullwave-thick-metal.json``
at once with its provenance, so a killed campaign resumes where it stopped; the fast test
``tests/test_fullwave_thick_metal.py`` reads that file.

    python benchmarks/em_thick_metal.py --filter NAME [--mesh K]

solves one filter of the validation set (benchmarks/em_filters.py) with solid strips, on the
mesh and in the box of its stored sheet solve, and stores the record beside the sheet solve's
own verdict carried to the metal (refine.fullwave.correction.carried_margin), in
``tests/data/fullwave-thick-filters.json``: the direct test of the field check's carried
verdict. The solid strips are perfect conductors, so the record also gives the circuit model's
margin at the metal without conductor loss.
"""

from __future__ import annotations

import argparse
import datetime
import sys
import time
from dataclasses import replace
from pathlib import Path

import campaign_data
import em_filters
import numpy as np
from em_lines import line_structure
from readme_block import replace_block

from refine.fullwave import compare, engine, geometry, solve, thick_section, verify
from refine.fullwave.uncertainty import mesh_uncertainty
from refine.physics.constants import C0
from refine.physics.microstrip import Microstrip
from refine.physics.substrate import Substrate
from refine.spec.problem import load_problem

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT / "tests" / "data" / "fullwave-thick-metal.json"

#: the bundled problems' two metals: 10 um on 0.635 mm alumina (the tapped 10 GHz filters) and
#: 17.5 um (half-ounce copper) on a 0.508 mm laminate (the 5.8 GHz tapped filter)
SUBSTRATES = {
    "alumina 9.8, 0.635 mm, 10 um": (Substrate(9.8, 0.635e-3, metal_thickness=10e-6), (2e9, 18e9)),
    "laminate 3.55, 0.508 mm, 17.5 um": (
        Substrate(3.55, 0.508e-3, metal_thickness=17.5e-6),
        (2e9, 12e9),
    ),
}
#: every cell refined by 2 from one mesh to the next (as benchmarks/em_lines.py)
MESHES = ((100e-6, 20), (50e-6, 40), (25e-6, 80))
FREQUENCIES = 21
#: (metal model, port current probes): sheets; solid strips with enclosing probes; solid strips
#: with the engine's own probes
VARIANTS = (("sheet", "engine"), ("thick", "enclosing"), ("thick", "engine"))


def run_one(name: str, edge: float, metal: str, probes: str) -> dict:
    sub, band = SUBSTRATES[name]
    flat = replace(sub, metal_thickness=0.0)
    width = Microstrip(flat, loss=False).width_for_z0(50.0, 0.5 * sum(band))
    per_wavelength = dict(MESHES)[edge]
    res = geometry.Resolution(
        f"edge {edge * 1e6:g} um", edge, per_wavelength, edge_rule="thirds", metal="thick"
    )
    st = line_structure(width, sub, res, band[1])
    # one mesh for both metals, the solid strip's (its fine cells on both faces): the sheet's
    # own mesh has a cell of the edge size above the substrate, and the difference between two
    # meshes would pass for the metal's
    mesh = geometry.build_mesh(st, sub, band[1], res)
    if metal == "sheet":
        mesh = replace(mesh, metal_thickness=0.0)
    f = np.linspace(band[0], band[1], FREQUENCIES)
    max_time = geometry.pulse_length(band) + 6.0 * solve.transit_time(mesh, sub)
    job = geometry.job(st, mesh, sub, band, f, max_time, 1, 1, lossy=False)
    job["metal"]["enclose"] = probes == "enclosing"
    cells, steps = engine.job_size(job)
    t0 = time.perf_counter()
    r = engine.run(job, progress=lambda s: print(f"  {name}, {res.name}, {metal}: {s}", flush=True))
    beta = np.asarray(r["beta1"])
    return {
        "substrate": name,
        "eps_r": sub.eps_r,
        "height_m": sub.height,
        "metal_thickness_m": sub.metal_thickness,
        "width_m": width,
        "edge_cell_m": edge,
        "cells_per_wavelength": per_wavelength,
        "edge_rule": "thirds",
        "open_walls": res.open_walls,
        "half_box": mesh.mirror is not None,
        "metal": metal,
        "probes": probes,
        "f_hz": f.tolist(),
        "eps_eff": ((np.real(beta) * C0 / (2 * np.pi * f)) ** 2).tolist(),
        "z0_ohm": np.real(np.asarray(r["zc1"])).tolist(),
        "cells": cells,
        "time_steps_at_most": steps,
        "seconds": time.perf_counter() - t0,
        "engine": str(r["engine"]),
        "date": datetime.date.today().isoformat(),
    }


FILTER_DATA = ROOT / "tests" / "data" / "fullwave-thick-filters.json"


def run_filter(name: str, k: int, threads: int) -> dict:
    """One filter of the validation set with solid strips on mesh ``k`` of its stored sequence
    in the field check's box, against that mesh's sheet solve carried to the metal."""
    runs = em_filters.load()
    box = campaign_data.DEFAULT_BOX
    mine = [r for r in runs if r["filter"] == name]
    sheet = next(r for r in mine if em_filters.sequence(r) == (name, box) and r["mesh_index"] == k)
    problem = load_problem(ROOT / "problems" / f"{name}.toml")
    lay = em_filters.record_layout(sheet)
    res, seq = em_filters.in_box(verify.resolutions("converged", lay)[k], mine, box)
    res = replace(res, metal="thick")
    t0 = time.perf_counter()
    c = em_filters._check(name, problem, lay, res, threads, seq)
    rec = em_filters._record(
        name, k, res, sheet["status"], sheet["layout"], problem, c, t0, box, seq
    )
    return {**rec, "metal": "thick", "metal_thickness_m": problem.strip_substrate.metal_thickness}


def filter_figures(rec: dict) -> dict:
    """What a solid-strip filter record is judged against: the same mesh's sheet solve (its
    field figures and its margin carried to the metal) and the circuit model's margin at the
    metal with lossless metal, as the solid strips are."""
    sheet = next(
        r
        for r in em_filters.load()
        if em_filters.sequence(r) == (rec["filter"], rec["box"])
        and r["mesh_index"] == rec["mesh_index"]
    )
    problem = load_problem(ROOT / "problems" / f"{rec['filter']}.toml")
    lay = em_filters.record_layout(rec)
    lossless = replace(problem, substrate=replace(problem.strip_substrate, conductivity=None))
    f = verify.em_frequencies(problem)
    s_model = em_filters.circuit_response(lossless, lay, f)
    return {
        "sheet_em": sheet["em"],
        "carried_margin_db": em_filters.margin_at_thickness(sheet),
        "model_lossless_metal_margin_db": compare.compare(
            f, s_model, s_model, problem.mask
        ).model_mask.worst_margin,
    }


def load() -> list[dict]:
    return campaign_data.load_runs(DATA)


def save(runs: list[dict]) -> None:
    doc = {
        "what": "straight 50 ohm microstrip lines on the field solver (thru runs), lossless, as "
        "zero-thickness sheets and as solid strips of the metal's thickness; written by "
        "benchmarks/em_thick_metal.py",
        "runs": runs,
    }
    campaign_data.save_doc(
        DATA,
        doc,
        key=lambda r: (r["substrate"], -r["edge_cell_m"], r["metal"], r["probes"]),
    )


def _pick(runs: list[dict], name: str, edge: float, metal: str, probes: str) -> dict | None:
    for r in runs:
        key = (r["substrate"], r["edge_cell_m"], r["metal"], r["probes"])
        if key == (name, edge, metal, probes):
            return r
    return None


def shifts(runs: list[dict], name: str, probes: str = "enclosing") -> dict | None:
    """For one substrate: per mesh (coarsest first) the field solver's relative change of
    eps_eff and Z0 from sheet to solid strip over frequency (solid strips measured with
    ``probes``), the closed form's own change, and at the finest mesh the band-averaged changes
    with their mesh uncertainty. None before a sheet and a solid run share a mesh."""
    rows = []
    for edge, _ in MESHES:
        a = _pick(runs, name, edge, "sheet", "engine")
        b = _pick(runs, name, edge, "thick", probes)
        if a is not None and b is not None:
            rows.append((edge, a, b))
    if not rows:
        return None
    f = np.asarray(rows[0][1]["f_hz"])
    sub = SUBSTRATES[name][0]
    width = rows[0][1]["width_m"]
    z_t, e_t = Microstrip(sub, loss=False).dispersive(width, f)
    z_0, e_0 = Microstrip(replace(sub, metal_thickness=0.0), loss=False).dispersive(width, f)
    de = np.array([np.asarray(b["eps_eff"]) / np.asarray(a["eps_eff"]) - 1 for _, a, b in rows])
    dz = np.array([np.asarray(b["z0_ohm"]) / np.asarray(a["z0_ohm"]) - 1 for _, a, b in rows])
    cells = [edge for edge, _, _ in rows]

    def mean(d: np.ndarray) -> tuple[float, float | None]:
        m = d.mean(axis=1)
        return float(m[-1]), mesh_uncertainty(cells, list(m))

    return {
        "meshes": cells,
        "f": f,
        "eps_eff": de,
        "z0": dz,
        "model_eps_eff": e_t / e_0 - 1,
        "model_z0": z_t / z_0 - 1,
        "mean_eps_eff": mean(de),
        "mean_z0": mean(dz),
        "seconds": [b["seconds"] for _, _, b in rows],
    }


def _pm(value: float, unc: float | None) -> str:
    return f"{100 * value:+.2f} %" + (" (one mesh)" if unc is None else f" ± {100 * unc:.2f}")


def table(runs: list[dict]) -> str:
    """Per substrate and figure: the field solver's change from sheet to solid strip (band
    mean, finest mesh, with its mesh uncertainty), the circuit model's over the same band, the
    static cross-section solve's (refine.fullwave.thick_section) and the circuit model's static
    one beside it, and what the engine's own port probes make of the solid strip."""
    rows = [
        "| substrate, metal | figure | field solver, band mean | circuit model, band mean | "
        "static solve (2-D) | circuit model, static | field solver, the engine's own probes |",
        "|---|---|---|---|---|---|---|",
    ]
    for name in SUBSTRATES:
        s = shifts(runs, name)
        if s is None:
            continue
        e = shifts(runs, name, "engine")
        sub = SUBSTRATES[name][0]
        width = runs_width(runs, name)
        st = thick_section.thickness_change(sub.eps_r, width, sub.height, sub.metal_thickness)
        flat = replace(sub, metal_thickness=0.0)
        z0, e0 = Microstrip(flat, loss=False).quasi_static(width)
        z1, e1 = Microstrip(sub, loss=False).quasi_static(width)
        for label, key, static, unc, model in (
            ("ε_eff", "eps_eff", st.eps_eff, st.eps_eff_uncertainty, float(e1 / e0 - 1)),
            ("Z0", "z0", st.z0, st.z0_uncertainty, float(z1 / z0 - 1)),
        ):
            eng = _pm(*e[f"mean_{key}"]) if e is not None else "not run"
            rows.append(
                f"| {name} | {label} | {_pm(*s[f'mean_{key}'])} | "
                f"{100 * s[f'model_{key}'].mean():+.2f} % | {_pm(static, unc)} | "
                f"{100 * model:+.2f} % | {eng} |"
            )
    return "\n".join(rows)


def runs_width(runs: list[dict], name: str) -> float:
    return float(next(r["width_m"] for r in runs if r["substrate"] == name))


def filter_table(recs: list[dict]) -> str:
    """Per solid-strip filter solve: the field solver's margin at the metal against what the
    sheet solve of the same mesh, carried to the metal, said; centre and worst RL of both."""
    rows = [
        "| filter | mesh | margin, solid strips | sheet solve carried to the metal | "
        "circuit model at the metal (lossless metal) | centre, sheet → solid | "
        "worst RL, sheet → solid |",
        "|---|---|---|---|---|---|---|",
    ]
    for r in recs:
        fig = filter_figures(r)
        sh = {"em": fig["sheet_em"]}
        carried = fig["carried_margin_db"]
        rows.append(
            f"| {r['filter']} | {r['mesh_index'] + 1} | {r['em']['worst_margin_db']:+.2f} dB | "
            + ("not carried" if carried is None else f"{carried:+.2f} dB")
            + f" | {fig['model_lossless_metal_margin_db']:+.2f} dB | "
            f"{sh['em']['centre_hz'] / 1e9:.4f} → {r['em']['centre_hz'] / 1e9:.4f} GHz | "
            f"{sh['em']['worst_return_loss_db']:.2f} → {r['em']['worst_return_loss_db']:.2f} dB |"
        )
    return "\n".join(rows)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--table", action="store_true", help="print the table only, run nothing")
    ap.add_argument("--readme", action="store_true", help="write the README block, run nothing")
    ap.add_argument("--filter", help="solve this validation filter with solid strips")
    ap.add_argument("--mesh", type=int, default=1, help="its mesh (1: the coarsest; default 1)")
    ap.add_argument("--threads", type=int, default=0, help="engine threads (0: all cores)")
    ap.add_argument("--only", help="run the lines of this substrate only (a name of SUBSTRATES)")
    args = ap.parse_args(argv)
    if args.only is not None and args.only not in SUBSTRATES:
        ap.error(f"--only {args.only!r}: not one of {', '.join(SUBSTRATES)}")
    if args.filter is not None:
        if args.filter not in em_filters.FILTERS:
            ap.error(f"--filter {args.filter!r}: not one of {', '.join(em_filters.FILTERS)}")
        rec = run_filter(args.filter, args.mesh - 1, args.threads)
        done = [
            r
            for r in campaign_data.load_runs(FILTER_DATA)
            if (r["filter"], r["mesh_index"]) != (rec["filter"], rec["mesh_index"])
        ]
        campaign_data.save_doc(
            FILTER_DATA,
            {
                "what": "validation filters on the field solver with solid strips of the "
                "problem's metal (perfect conductor), beside their sheet solves carried to the "
                "metal; written by benchmarks/em_thick_metal.py --filter",
                "runs": [*done, rec],
            },
        )
        print(filter_table(campaign_data.load_runs(FILTER_DATA)))
        return 0
    runs = load()
    if args.readme:
        filters = campaign_data.load_runs(FILTER_DATA)
        replace_block(
            "em-thick-metal",
            "`python benchmarks/em_thick_metal.py --readme` wrote these tables (a straight 50 ohm "
            "line, lossless, each change the solid strip's figure over the sheet's on the same "
            "mesh, averaged over the band; edge cells "
            + ", ".join(f"{e * 1e6:g}" for e, _ in MESHES)
            + " um, every cell refined by 2; the model's change is Hammerstad-Jensen's "
            "thickness correction with the Kirschning-Jansen dispersion):\n\n"
            + table(runs)
            + "\n"
            + (
                "\nA filter of the validation set solved with solid strips on the mesh of its "
                "stored sheet solve, beside that solve carried to the metal:\n\n"
                + filter_table(filters)
                + "\n"
                if filters
                else ""
            ),
        )
        print(table(runs))
        return 0
    if not args.table:
        for edge, _ in MESHES:
            for name in SUBSTRATES:
                if args.only is not None and name != args.only:
                    continue
                for metal, probes in VARIANTS:
                    if _pick(runs, name, edge, metal, probes) is not None:
                        continue
                    if (metal, probes) == ("thick", "engine") and edge < MESHES[1][0]:
                        continue  # the diagnostic needs no third mesh
                    print(f"{name}, edge {edge * 1e6:g} um, {metal}, {probes} probes ...")
                    runs.append(run_one(name, edge, metal, probes))
                    save(runs)
                    print(f"  {runs[-1]['seconds']:.0f} s", flush=True)
    print(table(runs))
    return 0


if __name__ == "__main__":
    sys.exit(main())
