"""The metal's thickness at gaps and open ends: how far the 2-D lengthwise section can be
trusted, and what the thickness adds at the filter-level validation set's gaps.

    python benchmarks/gap_thickness.py            # print the tables (under a minute)
    python benchmarks/gap_thickness.py --readme   # the tables as the README block gap-thickness

The first table checks the section's premise on sheets: the series capacitance per unit width
of a gap between strips of unbounded width (refine.fullwave.thick_gap.sheet_gap, a 2-D
finite-volume solve) against the bundled eps_r 9.8 calibration's (a 3-D boundary-element
solve of strips of finite width), over the width. The second gives, for every gap of the
validation set's layouts (benchmarks/em_filters.py), the sheets' series capacitance, what the
problem's metal adds to it (refine.physics.gap_thickness), and what it adds to each side's shunt
capacitance and to the open ends, as the resonator length it is worth (a capacitance at an open
end is line length dC / C', C' the line's capacitance per length).
"""

from __future__ import annotations

import argparse
import sys
import warnings
from dataclasses import replace
from pathlib import Path

from refine.circuit.layout import Layout
from refine.fullwave import thick_gap
from refine.physics import calibrated, gap_thickness, strip
from refine.physics.constants import C0, EPS0
from refine.physics.microstrip import Microstrip
from refine.validity import ModelRangeWarning

sys.path.insert(0, str(Path(__file__).resolve().parent))
import em_filters
from readme_block import replace_block
from unequal_gaps import line_capacitance

ROOT = Path(__file__).resolve().parent.parent
CHECK_S_H = (0.025, 0.065, 0.16, 0.4)
CHECK_W_H = (0.5, 1.5, 3.2)


def premise_table() -> str:
    cal = calibrated.load("static-er9.8")
    head = " | ".join(f"3-D, W/h {w:g}" for w in CHECK_W_H)
    rows = [
        f"| s/h | 2-D section (unbounded width) | {head} |",
        "|---|---|" + "---|" * len(CHECK_W_H),
    ]
    for s_h in CHECK_S_H:
        c2, _ = thick_gap.sheet_gap(9.8, s_h)
        cells = []
        for w_h in CHECK_W_H:
            c3 = float(calibrated.gap(cal, w_h, w_h, s_h, 1.0).c_series) / EPS0 / w_h
            cells.append(f"{c3:.2f} ({100 * (c3 / c2 - 1):+.1f} %)")
        rows.append(f"| {s_h:g} | {c2:.2f} | " + " | ".join(cells) + " |")
    return "\n".join(rows)


def _gaps(layout: Layout) -> list[tuple[float, float, float]]:
    widths = list(layout.widths)
    if layout.taps is None:
        widths = [layout.feed_width, *widths, layout.feed_width]
    return [(widths[k], widths[k + 1], s) for k, s in enumerate(layout.gaps)]


def filters_table() -> str:
    rows = [
        "| filter (metal t) | gap: W_in / W_out, s (µm) | t/s | series C, sheets → with the "
        "metal | shunt C added, as length (in / out) | open end Δl added |",
        "|---|---|---|---|---|---|",
    ]
    for name, problem, layout in em_filters.strip_layouts():
        sub = problem.strip_substrate
        t = sub.metal_thickness
        thick = Microstrip(sub, loss=False)
        sheet = Microstrip(replace(sub, metal_thickness=0.0), loss=False)
        seen = set()
        for a, b, s in _gaps(layout):
            key = (round(min(a, b), 10), round(max(a, b), 10), round(s, 10))
            if key in seen:
                continue  # a mirror-image gap
            seen.add(key)
            m = problem.gap_model
            c0 = strip.gap_capacitances(sheet, m, a, b, s)
            c1 = strip.gap_capacitances(thick, m, a, b, s)
            dl_in = float(c1.c_shunt_in - c0.c_shunt_in) / line_capacitance(sub, a, problem.f0)
            dl_out = float(c1.c_shunt_out - c0.c_shunt_out) / line_capacitance(sub, b, problem.f0)
            rows.append(
                f"| {name} ({t * 1e6:g} µm) | {a * 1e6:.0f} / {b * 1e6:.0f}, {s * 1e6:.1f} | "
                f"{t / s:.3f} | {float(c0.c_series) * 1e15:.2f} → "
                f"{float(c1.c_series) * 1e15:.2f} fF "
                f"({100 * float(c1.c_series / c0.c_series - 1):+.1f} %) | "
                f"{dl_in * 1e6:+.1f} / {dl_out * 1e6:+.1f} µm | "
                f"{_end_added(thick, layout.widths[0]) * 1e6:+.2f} µm |"
            )
    return "\n".join(rows)


def _end_added(thick: Microstrip, w: float) -> float:
    """What the metal's end face adds to an open end's Δl: its capacitance over the line's
    capacitance per length (as refine.physics.strip adds it)."""
    sub = thick.substrate
    z0, ee = thick.quasi_static(w)
    c_line = float(ee) ** 0.5 / (C0 * float(z0))
    face = float(gap_thickness.open_end_increment(w, sub.height, sub.metal_thickness, sub.eps_r))
    return face / c_line


def main(argv: list[str] | None = None) -> int:
    warnings.simplefilter("ignore", ModelRangeWarning)  # the layouts' own range notes
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readme", action="store_true", help="write the README block gap-thickness")
    args = ap.parse_args(argv)
    text = (
        "The section's premise, on sheets (ε_r 9.8): series capacitance per unit width over ε0, "
        "the 2-D section against the bundled 3-D calibration:\n\n"
        + premise_table()
        + "\n\nWhat the problem's metal adds at the validation set's gaps (the circuit model's "
        "own gap model; lengths on the line with the metal):\n\n" + filters_table()
    )
    if args.readme:
        replace_block(
            "gap-thickness",
            "`python benchmarks/gap_thickness.py --readme` wrote these tables:\n\n" + text,
        )
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
