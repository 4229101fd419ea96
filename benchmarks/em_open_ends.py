"""Field-solver validation on an open end, and which mesh rule at metal edges converges.

    python benchmarks/em_open_ends.py              # run what is missing, then print the table
    python benchmarks/em_open_ends.py --table      # print the table from the data file only
    python benchmarks/em_open_ends.py --readme     # the table as the README block ``em-open-ends``

An open end is field-solved as two 50 ohm strips facing each other across a gap of two substrate
heights, reference planes at the strip ends. The input capacitance of one end with the other
held at zero volts, C_p + C_g of the gap's pi-network, is the open end's excess capacitance to
within 0.1 % at that spacing (the electrostatic solve of refine.fullwave.electrostatic gives
C_p + C_g = C_oc to 0.1 % from s/h = 2 on alumina, where C_g itself is still 7 % of C_p), so
the structure and extraction of the gap fixture (refine.fullwave.calibration) serve unchanged.
The length extension is Δl = C_oc Z0 c / sqrt(eps_eff), with Z0 and eps_eff from the thru
run of the same mesh, reduced to its quasi-static value by the fit C0 + k f^2 over
f*h = 0.8-5 GHz*mm.

Three substrates (those of benchmarks/em_lines.py), the same mesh sequence (every cell halved
each time). In the first box (whole, first-order walls) both mesh rules at metal edges ran
(refine.fullwave.geometry.EDGE_RULES): the comparison of the rules' convergence is what the
field check's mesh rule rests on. ``--box`` names the box (campaign_data.BOXES); by default the
field check's own (half box, matched layers), with the thirds rule only. Each
finished (substrate, rule, mesh) solve is appended to ``tests/data/fullwave-open-ends.json`` at
once with its provenance, so a killed campaign resumes where it stopped; only the data is
committed. The fast test ``tests/test_fullwave_open_ends.py`` reads that file, with the
Kirschning-Jansen-Koster and electrostatic Δl the script stores beside the runs.
"""

from __future__ import annotations

import argparse
import datetime
import itertools
import json
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from refine.fullwave import calibration, electrostatic, geometry, solve, waves
from refine.fullwave.uncertainty import mesh_uncertainty
from refine.physics.constants import C0
from refine.physics.microstrip import Microstrip
from refine.physics.strip import open_end_extension
from refine.physics.substrate import Substrate

sys.path.insert(0, str(Path(__file__).resolve().parent))
import campaign_data
from em_lines import MESHES, SUBSTRATES
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT / "tests" / "data" / "fullwave-open-ends.json"
GAP_OVER_H = 2.0
FREQUENCIES = 21
RULES = geometry.EDGE_RULES


def width_of(sub: Substrate, band: tuple[float, float]) -> float:
    return Microstrip(sub, loss=False).width_for_z0(50.0, 0.5 * sum(band))


@dataclass(frozen=True)
class OpenEnd:
    """One solve of the open-end structure: the field solve, its frequencies, the gap, the
    open end's capacitance (π-network shunt plus series), the line's Z0 and ε_eff from the thru
    run, and the length extension Δl = C_end Z0 c / √ε_eff."""

    solve: solve.FieldSolve
    f: np.ndarray
    gap: float
    c_end: np.ndarray
    z0: np.ndarray
    eps_eff: np.ndarray
    extension: np.ndarray


def solve_open_end(name: str, res: geometry.Resolution, threads: int = 0) -> OpenEnd:
    """Field-solve the open-end structure of substrate ``name`` (lossless) on mesh ``res``."""
    sub, band = SUBSTRATES[name]
    width = width_of(sub, band)
    lo, hi = calibration.extraction_band(sub.height)
    f = np.linspace(lo, hi, FREQUENCIES)
    gap = GAP_OVER_H * sub.height
    st = geometry.gap_structure(width, gap, geometry.feed_length(sub, width, hi, res))
    r = solve.solve(st, sub, f, 50.0, res, lossy=False, threads=threads)
    pc = waves.pi_capacitances(r.abcd, f)
    c_end = 0.5 * (pc.c_shunt_in + pc.c_shunt_out) + pc.c_series
    z0 = np.real(r.zc)
    eps_eff = (np.real(r.beta) * C0 / (2 * np.pi * f)) ** 2
    dl = c_end * z0 * C0 / np.sqrt(eps_eff)
    return OpenEnd(r, f, gap, c_end, z0, eps_eff, dl)


BOXES, OLD_BOX, DEFAULT_BOX = campaign_data.BOXES, campaign_data.OLD_BOX, campaign_data.DEFAULT_BOX


def run_one(name: str, rule: str, edge: float, threads: int = 0, box: str = DEFAULT_BOX) -> dict:
    sub, band = SUBSTRATES[name]
    width = width_of(sub, band)
    per_wavelength = dict(MESHES)[edge]
    res = geometry.Resolution(
        f"edge {edge * 1e6:g} um", edge, per_wavelength, edge_rule=rule, **BOXES[box]
    )
    t0 = time.perf_counter()
    o = solve_open_end(name, res, threads)
    r, f, gap, c_end, dl = o.solve, o.f, o.gap, o.c_end, o.extension
    return {
        "substrate": name,
        "rule": rule,
        "box": box,
        "eps_r": sub.eps_r,
        "height_m": sub.height,
        "width_m": width,
        "gap_m": gap,
        "edge_cell_m": edge,
        "cells_per_wavelength": per_wavelength,
        "f_hz": f.tolist(),
        "c_end_f": c_end.tolist(),
        "extension_m": dl.tolist(),
        "extension_quasi_static_m": calibration.quasi_static(f, dl),
        "cells": r.mesh.cells,
        "seconds": time.perf_counter() - t0,
        "engine": r.engine,
        "date": datetime.date.today().isoformat(),
    }


def load() -> list[dict]:
    return campaign_data.load_runs(DATA)


def save(runs: list[dict], refs: dict | None = None) -> None:
    doc: dict = {
        "what": "open ends of 50 ohm microstrip lines on the field solver (a gap of two "
        "substrate heights, C_p + C_g), zero-thickness lossless strips, both mesh rules at "
        "metal edges; written by benchmarks/em_open_ends.py",
        "runs": runs,
    }
    if refs is not None:
        doc["references_m"] = refs
    elif DATA.exists():
        doc["references_m"] = json.loads(DATA.read_text()).get("references_m", {})
    campaign_data.save_doc(DATA, doc)


#: the field-check issue's bar for the open end against Kirschning-Jansen-Koster
TOL_EXTENSION = 0.05


def references(name: str) -> dict[str, float]:
    """Δl of the substrate's 50 ohm line by Kirschning-Jansen-Koster (zero thickness) and by
    refine's converged electrostatic solve (m)."""
    sub, band = SUBSTRATES[name]
    w = width_of(sub, band)
    static = electrostatic.converged_open_end(sub.eps_r, sub.height, w)
    return {
        "kjk": open_end_extension(Microstrip(sub, loss=False), w, "kirschning-jansen-koster"),
        "static": static["c_end"].value / static["c_line"].value,
    }


def summary(runs: list[dict], name: str, rule: str, box: str = OLD_BOX) -> dict:
    """Per mesh (coarsest first) the quasi-static Δl; the finest value with its mesh
    uncertainty (from the last three meshes)."""
    mine = sorted(
        (
            r
            for r in runs
            if r["substrate"] == name and r["rule"] == rule and campaign_data.box_asked(r) == box
        ),
        key=lambda r: -r["edge_cell_m"],
    )
    if not mine:
        return {}
    cells = [r["edge_cell_m"] for r in mine]
    values = [r["extension_quasi_static_m"] for r in mine]
    unc = mesh_uncertainty(cells, values) if len(mine) >= 2 else None
    return {"cells": cells, "values": values, "finest": values[-1], "uncertainty": unc}


def table(runs: list[dict], with_static: bool = True) -> str:
    stored = json.loads(DATA.read_text()).get("references_m", {}) if DATA.exists() else {}
    head = (
        "| substrate | mesh rule | box | Δl/h per mesh (edge cell 100 / 50 / 25 µm) "
        "| finest vs KJK |"
    )
    rows = [head, "|---|---|---|---|---|"]
    if with_static:
        rows[0] = head + " finest vs electrostatic |"
        rows[1] = "|---|---|---|---|---|---|"
    for name in SUBSTRATES:
        if not any(r["substrate"] == name for r in runs):
            continue
        refs = stored.get(name) or references(name)  # the electrostatic solve takes ~30 s
        for box, rule in itertools.product(BOXES, RULES):
            s = summary(runs, name, rule, box)
            if not s:
                continue
            h = SUBSTRATES[name][0].height
            per = " / ".join(f"{x / h:.4f}" for x in s["values"])
            unc = f" ± {100 * s['uncertainty'] / refs['kjk']:.1f}" if s["uncertainty"] else ""
            row = (
                f"| {name} | {rule} | {box} | {per} "
                f"| {100 * (s['finest'] / refs['kjk'] - 1):+.1f}{unc} % |"
            )
            if with_static:
                row += f" {100 * (s['finest'] / refs['static'] - 1):+.1f} % |"
            rows.append(row)
    return "\n".join(rows)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--table", action="store_true", help="print the table only, run nothing")
    ap.add_argument("--readme", action="store_true", help="write the README block")
    ap.add_argument("--rule", choices=RULES, action="append", help="run only these rules")
    ap.add_argument(
        "--box", choices=list(BOXES), default=DEFAULT_BOX,
        help=f"the box to solve in (default: {DEFAULT_BOX!r}, the field check's)",
    )  # fmt: skip
    ap.add_argument("--threads", type=int, default=0, help="engine threads (0: all cores)")
    args = ap.parse_args(argv)
    runs = load()
    if not (args.table or args.readme):
        done = {
            (r["substrate"], r["rule"], campaign_data.box_asked(r), r["edge_cell_m"]) for r in runs
        }
        # in the defaults' box only the rule every field-check preset uses, unless asked
        rules = args.rule or (RULES if args.box == OLD_BOX else ["thirds"])
        for edge, _ in MESHES:
            for rule in rules:
                for name in SUBSTRATES:
                    if (name, rule, args.box, edge) in done:
                        continue
                    print(f"{name}, {rule}, {args.box}, edge {edge * 1e6:g} um ...", flush=True)
                    rec = run_one(name, rule, edge, args.threads, args.box)
                    runs.append(rec)
                    save(runs)
                    print(
                        f"  Δl/h {rec['extension_quasi_static_m'] / rec['height_m']:.4f} "
                        f"({rec['cells']} cells, {rec['seconds']:.0f} s)",
                        flush=True,
                    )
    if not (args.table or args.readme):  # the closed form and the static solve, for the test
        save(runs, {name: references(name) for name in SUBSTRATES})
    text = table(runs)
    if args.readme:
        replace_block("em-open-ends", text + "\n")
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
