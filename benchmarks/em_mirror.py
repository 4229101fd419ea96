"""Half the box for a mirror-symmetric layout: the magnetic wall on the strips' centre line.

    python benchmarks/em_mirror.py            # run what is missing, then print the table
    python benchmarks/em_mirror.py --table    # the table from the data file only
    python benchmarks/em_mirror.py --readme   # and rewrite the README block

A gap-coupled layout is mirror-symmetric across the strips' centre line, and the quasi-TEM
fields the microstrip ports launch are even about it: the electric field normal to that plane
and the magnetic field along it vanish there. A magnetic wall on the line therefore leaves the
solution unchanged, and the field model (refine.fullwave.geometry.Resolution.mirror, on by
default) solves only the half box above it, with half the cells at the same time step.

The engine places its magnetic wall where the tangential magnetic field lives, half a cell
inside the box edge: the half box's first cell must straddle the centre line. This study
measures, on the coarse preset mesh for the three substrates of benchmarks/em_lines.py:

- a straight 50 ohm line's ε_eff and Z0 from the thru run: the whole box, the half box, and a
  half box whose edge (a mesh line) is put on the centre line instead (the placement the
  engine's convention punishes);
- a gap of 0.2 substrate heights between two such lines (the structure of the gap
  calibration): the largest change of any S-parameter between the whole and the half box.

Each finished run is appended to ``tests/data/fullwave-mirror.json`` at once with provenance;
``tests/test_fullwave_mirror.py`` reads that file.
"""

from __future__ import annotations

import argparse
import datetime
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

from refine.fullwave import calibration, engine, geometry, solve
from refine.physics.constants import C0

sys.path.insert(0, str(Path(__file__).resolve().parent))
import campaign_data
from em_lines import SUBSTRATES
from em_open_ends import width_of
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT / "tests" / "data" / "fullwave-mirror.json"
#: the coarse preset mesh in the box the study ran in (first-order walls, before the matched
#: layers became the default; the half box's wall is on the other side)
RES = replace(geometry.MESHES["coarse"], open_walls="first-order")
GAP_OVER_H = 0.2
FREQUENCIES = 21
PICKS = (0, FREQUENCIES // 2, FREQUENCIES - 1)
#: the line runs: the whole box, the half box as refine builds it, and the half box with its
#: edge (and so the engine's wall, half a cell further in) misplaced onto the centre line
LINE_BOXES = ("whole", "half", "half, edge on the centre line")


def _band(name: str) -> tuple[np.ndarray, float]:
    sub, _ = SUBSTRATES[name]
    lo, hi = calibration.extraction_band(sub.height)
    return np.linspace(lo, hi, FREQUENCIES), hi


def run_line(name: str, box: str) -> dict:
    sub, band = SUBSTRATES[name]
    width = width_of(sub, band)
    f, hi = _band(name)
    res = replace(RES, mirror=box != "whole")
    gap = GAP_OVER_H * sub.height
    st = geometry.gap_structure(width, gap, geometry.feed_length(sub, width, hi, res))
    mesh = geometry.build_mesh(st, sub, hi, res)
    thru = st.thru()
    max_time = geometry.pulse_length((f[0], hi)) + 6.0 * solve.transit_time(mesh, sub)
    job = geometry.job(thru, mesh, sub, (f[0], hi), f, max_time, 1, 0, lossy=False)
    if box == "half, edge on the centre line":
        y = np.asarray(job["mesh"]["y"])
        job["mesh"]["y"] = [0.0, *y[y > 0].tolist()]
        job["strips"] = [[x0, max(y0, 0.0), x1, y1] for x0, y0, x1, y1 in job["strips"]]
        for p in job["ports"]:
            p["start"][1] = max(p["start"][1], 0.0)
    cells, _ = engine.job_size(job)
    t0 = time.perf_counter()
    r = engine.run(job)
    return {
        "kind": "line",
        "substrate": name,
        "box": box,
        "width_m": width,
        "f_hz": [float(f[k]) for k in PICKS],
        "eps_eff": [float((np.real(r["beta1"][k]) * C0 / (2 * np.pi * f[k])) ** 2) for k in PICKS],
        "z0_ohm": [float(np.real(r["zc1"][k])) for k in PICKS],
        "cells": cells,
        "seconds": time.perf_counter() - t0,
        "engine": str(r["engine"]),
        "date": datetime.date.today().isoformat(),
    }


def run_gap(name: str, box: str) -> dict:
    sub, band = SUBSTRATES[name]
    width = width_of(sub, band)
    f, hi = _band(name)
    res = replace(RES, mirror=box == "half")
    gap = GAP_OVER_H * sub.height
    st = geometry.gap_structure(width, gap, geometry.feed_length(sub, width, hi, res))
    r = solve.solve(st, sub, f, 50.0, res, lossy=False)
    return {
        "kind": "gap",
        "substrate": name,
        "box": box,
        "width_m": width,
        "gap_m": GAP_OVER_H * sub.height,
        "f_hz": f.tolist(),
        "s_re": np.real(r.s).tolist(),
        "s_im": np.imag(r.s).tolist(),
        "cells": r.mesh.cells,
        "seconds": r.seconds,
        "engine": r.engine,
        "date": datetime.date.today().isoformat(),
    }


def load() -> list[dict]:
    return campaign_data.load_runs(DATA)


def save(runs: list[dict]) -> None:
    doc = {
        "what": "whole box against half box (magnetic wall on the strips' centre line) on the "
        f"coarse preset mesh ({RES.edge_cell * 1e6:g} um edge cells, {RES.cells_per_wavelength:g} "
        f"cells per wavelength, {RES.edge_rule} rule, {RES.open_walls} walls), lossless, "
        "zero-thickness strips; written "
        "by benchmarks/em_mirror.py",
        "runs": runs,
    }
    campaign_data.save_doc(DATA, doc)


def find(runs: list[dict], kind: str, name: str, box: str) -> dict | None:
    return next(
        (r for r in runs if (r["kind"], r["substrate"], r["box"]) == (kind, name, box)), None
    )


def s_matrix(run: dict) -> np.ndarray:
    return np.asarray(run["s_re"]) + 1j * np.asarray(run["s_im"])


def line_change(runs: list[dict], name: str, box: str) -> tuple[float, float] | None:
    """Worst relative change of (ε_eff, Z0) from the whole box to ``box``."""
    a, b = find(runs, "line", name, "whole"), find(runs, "line", name, box)
    if a is None or b is None:
        return None
    de = max(abs(y / x - 1) for x, y in zip(a["eps_eff"], b["eps_eff"], strict=True))
    dz = max(abs(y / x - 1) for x, y in zip(a["z0_ohm"], b["z0_ohm"], strict=True))
    return de, dz


def signed_line_change(runs: list[dict], name: str, box: str) -> tuple[float, float] | None:
    """Mean signed relative change of (ε_eff, Z0) from the whole box to ``box``."""
    a, b = find(runs, "line", name, "whole"), find(runs, "line", name, box)
    if a is None or b is None:
        return None
    de = float(np.mean([y / x - 1 for x, y in zip(a["eps_eff"], b["eps_eff"], strict=True)]))
    dz = float(np.mean([y / x - 1 for x, y in zip(a["z0_ohm"], b["z0_ohm"], strict=True)]))
    return de, dz


def gap_change(runs: list[dict], name: str) -> float | None:
    """Largest |ΔS| of the gap between the whole and the half box."""
    a, b = find(runs, "gap", name, "whole"), find(runs, "gap", name, "half")
    if a is None or b is None:
        return None
    return float(np.abs(s_matrix(a) - s_matrix(b)).max())


def table(runs: list[dict]) -> str:
    rows = [
        "| substrate | line: half box vs whole, worst ε_eff / Z0 change | line: edge on the "
        "centre line instead, ε_eff / Z0 change | gap (0.2 h): largest \\|ΔS\\| | cells, whole "
        "→ half | engine s, whole → half (gap) |",
        "|---|---|---|---|---|---|",
    ]
    for name in SUBSTRATES:
        half = line_change(runs, name, "half")
        wrong = signed_line_change(runs, name, "half, edge on the centre line")
        ds = gap_change(runs, name)
        gw, gh = find(runs, "gap", name, "whole"), find(runs, "gap", name, "half")
        if half is None or wrong is None or ds is None or gw is None or gh is None:
            continue
        rows.append(
            f"| {name} | {100 * half[0]:.3f} % / {100 * half[1]:.3f} % | "
            f"{100 * wrong[0]:+.2f} % / {100 * wrong[1]:+.2f} % | {ds:.1e} | "
            f"{gw['cells']:,} → {gh['cells']:,} | {gw['seconds']:.0f} → {gh['seconds']:.0f} |"
        )
    return "\n".join(rows)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--table", action="store_true", help="print the table only, run nothing")
    ap.add_argument("--readme", action="store_true", help="and rewrite the README block")
    args = ap.parse_args(argv)
    runs = load()
    if not (args.table or args.readme):
        for name in SUBSTRATES:
            for box in LINE_BOXES:
                if find(runs, "line", name, box) is None:
                    print(f"{name}: line, {box} box ...", flush=True)
                    runs.append(run_line(name, box))
                    save(runs)
            for box in ("whole", "half"):
                if find(runs, "gap", name, box) is None:
                    print(f"{name}: gap, {box} box ...", flush=True)
                    runs.append(run_gap(name, box))
                    save(runs)
    text = table(runs)
    if args.readme:
        replace_block(
            "em-mirror",
            "`python benchmarks/em_mirror.py --readme` wrote this table (coarse preset mesh, "
            "lossless):\n\n" + text,
        )
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
