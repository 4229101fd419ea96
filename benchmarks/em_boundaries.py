"""How far the field model's walls must be: a boundary-distance study on a line and an open end.

    python benchmarks/em_boundaries.py [--threads N]   # run what is missing, print the table
    python benchmarks/em_boundaries.py --table         # the table from the data file only
    python benchmarks/em_boundaries.py --readme        # the table as the README block

The open ("open" enclosure) field model ends in absorbing walls ``side_margin`` substrate
heights beside the copper and ``air_above`` heights above the substrate
(refine.fullwave.geometry.Resolution: 6 and 8 by default), first-order ones or matched layers.
Walls that reflect what meets them at a slant are part of the model: this study moves them and measures what moves with
them, on the structure of benchmarks/em_open_ends.py (two 50 ohm strips facing across a gap of
two substrate heights, lossless, so that whatever leaves the open end is radiation): the line's
ε_eff and Z0 from the thru run at the bottom, middle and top of the band, the open end's
quasi-static length extension, and the open end's conductance at the top of the band (the real
part of the pi-network's mean shunt admittance; with lossless metal and dielectric it is what
the open end radiates or launches as surface waves).

One mesh (the 50 µm edge cell of benchmarks/em_open_ends.py's middle mesh, thirds rule): the
walls' effect is compared with that mesh's own change to the next mesh, which the open-end and
line studies measured. Each finished (substrate, walls) solve is appended to
``tests/data/fullwave-boundaries.json`` at once with provenance, so a killed study resumes;
``tests/test_fullwave_boundaries.py`` reads that file.
"""

from __future__ import annotations

import argparse
import datetime
import sys
import time
from pathlib import Path

import numpy as np

from refine.fullwave import calibration, geometry
from refine.physics import radiation

sys.path.insert(0, str(Path(__file__).resolve().parent))
import campaign_data
import em_open_ends
from em_lines import SUBSTRATES
from em_open_ends import solve_open_end, width_of
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT / "tests" / "data" / "fullwave-boundaries.json"
#: substrates of the line and open-end studies this one reuses (PTFE left out: the widest box)
CASES = ("alumina 9.8, 0.635 mm", "laminate 3.55, 0.508 mm")
#: (side margin, air above) in substrate heights, and the walls (geometry.OPEN_WALLS); the
#: first is refine's default since this study (first-order walls at 6 h and 8 h before it)
WALLS = (
    (6.0, 8.0, "pml"),
    (6.0, 8.0, "first-order"),
    (3.0, 4.0, "first-order"),
    (12.0, 8.0, "first-order"),
    (6.0, 16.0, "first-order"),
    (12.0, 16.0, "first-order"),
    (18.0, 8.0, "first-order"),
    (24.0, 8.0, "first-order"),
    (12.0, 8.0, "pml"),
)
EDGE_CELL = 50e-6
CELLS_PER_WAVELENGTH = 40
FREQUENCIES = em_open_ends.FREQUENCIES  # the solve is em_open_ends.solve_open_end


def run_one(name: str, side: float, above: float, walls: str, threads: int = 0) -> dict:
    sub, band = SUBSTRATES[name]
    width = width_of(sub, band)
    res = geometry.Resolution(
        f"{walls} walls {side:g}h/{above:g}h",
        EDGE_CELL,
        CELLS_PER_WAVELENGTH,
        side_margin=side,
        air_above=above,
        edge_rule="thirds",
        open_walls=walls,
        mirror=False,  # the whole box: the walls on both sides are what is studied
    )
    t0 = time.perf_counter()
    o = solve_open_end(name, res, threads)
    r, f, gap, z0, eps_eff, dl = o.solve, o.f, o.gap, o.z0, o.eps_eff, o.extension
    a, b, _c, d = (np.asarray(x, complex) for x in r.abcd)
    # pi network from ABCD: series Z = B, shunt Y_in = (D - 1)/B, Y_out = (A - 1)/B
    g_shunt = 0.5 * np.real((d - 1) / b + (a - 1) / b)
    picks = [0, FREQUENCIES // 2, FREQUENCIES - 1]
    return {
        "substrate": name,
        "side_margin_h": side,
        "air_above_h": above,
        "open_walls": walls,
        "edge_cell_m": EDGE_CELL,
        "cells_per_wavelength": CELLS_PER_WAVELENGTH,
        "edge_rule": "thirds",
        "width_m": width,
        "gap_m": gap,
        "f_hz": [float(f[k]) for k in picks],
        "eps_eff": [float(eps_eff[k]) for k in picks],
        "z0_ohm": [float(z0[k]) for k in picks],
        "extension_quasi_static_m": calibration.quasi_static(f, dl),
        "end_conductance_s": float(g_shunt[-1]),
        "cells": r.mesh.cells,
        "seconds": time.perf_counter() - t0,
        "engine": r.engine,
        "date": datetime.date.today().isoformat(),
    }


def load() -> list[dict]:
    return campaign_data.load_runs(DATA)


def save(runs: list[dict]) -> None:
    doc = {
        "what": "the open-end structure of benchmarks/em_open_ends.py (lossless, zero-thickness "
        "strips) with the absorbing walls moved; one mesh (50 um edge cells, thirds rule); "
        "written by benchmarks/em_boundaries.py",
        "runs": runs,
    }
    campaign_data.save_doc(DATA, doc)


def find(runs: list[dict], name: str, walls: tuple[float, float, str]) -> dict | None:
    for r in runs:
        key = (r["side_margin_h"], r["air_above_h"], r.get("open_walls", "first-order"))
        if r["substrate"] == name and key == walls:
            return r
    return None


def changes(base: dict, other: dict) -> dict[str, list[float] | float]:
    """Relative change of each figure from the default walls to ``other`` (ε_eff and Z0 at
    the bottom, middle and top of the band)."""
    return {
        "eps_eff": [o / b - 1 for b, o in zip(base["eps_eff"], other["eps_eff"], strict=True)],
        "z0": [o / b - 1 for b, o in zip(base["z0_ohm"], other["z0_ohm"], strict=True)],
        "extension": other["extension_quasi_static_m"] / base["extension_quasi_static_m"] - 1,
        "conductance": other["end_conductance_s"] / base["end_conductance_s"] - 1,
    }


def _three(xs: list[float]) -> str:
    return " / ".join(f"{100 * x:+.2f}" for x in xs) + " %"


def table(runs: list[dict]) -> str:
    rows = [
        "| substrate | walls | beside / above (h) | cells | ε_eff change, band bottom / middle / "
        "top | Z0 change | open-end Δl (change) | open-end conductance at band top (change) | "
        "Belohoubek–Denlinger |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for name in CASES:
        base = find(runs, name, WALLS[0])
        if base is None:
            continue
        for walls in sorted(WALLS, key=lambda w: (w != WALLS[0], w[2], w[0], w[1])):
            r = find(runs, name, walls)
            if r is None:
                continue
            ch = changes(base, r)
            dflt = " (default)" if walls == WALLS[0] else ""
            g_bd = radiation.end_conductance(
                r["z0_ohm"][-1], r["eps_eff"][-1], SUBSTRATES[name][0].height, r["f_hz"][-1]
            )
            rows.append(
                f"| {name} | {walls[2]} | {walls[0]:g} / {walls[1]:g}{dflt} | "
                f"{r['cells'] / 1e3:.0f}k | "
                f"{_three(ch['eps_eff'])} | {_three(ch['z0'])} | "
                f"{r['extension_quasi_static_m'] * 1e6:.1f} µm ({100 * ch['extension']:+.1f} %) | "
                f"{r['end_conductance_s'] * 1e6:.1f} µS ({100 * ch['conductance']:+.0f} %) | "
                f"{float(g_bd) * 1e6:.1f} µS |"
            )
    return "\n".join(rows)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--table", action="store_true", help="print the table only, run nothing")
    ap.add_argument("--readme", action="store_true", help="write the README block")
    ap.add_argument("--threads", type=int, default=0, help="engine threads (0: all cores)")
    args = ap.parse_args(argv)
    runs = load()
    if not (args.table or args.readme):
        for name in CASES:
            for side, above, walls in WALLS:
                if find(runs, name, (side, above, walls)) is not None:
                    continue
                print(f"{name}, {walls} walls {side:g}h beside, {above:g}h above ...", flush=True)
                runs.append(run_one(name, side, above, walls, args.threads))
                save(runs)
    text = table(runs)
    if args.readme:
        replace_block(
            "em-boundaries",
            "`python benchmarks/em_boundaries.py --readme` wrote this table (the open-end "
            f"structure, lossless, one mesh: {EDGE_CELL * 1e6:g} µm edge cells, thirds rule; "
            "changes from the default walls):\n\n" + text,
        )
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
