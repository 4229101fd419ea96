"""What the metal's thickness adds to a gap's capacitances and to an open end: a 2-D
finite-volume Laplace solve of the gap's lengthwise section.

The gap models (Garg–Bahl, Kirschning–Jansen–Koster, refine's electrostatic calibrations) are
all for strips of zero thickness. A real gap is two metal faces, each W wide and t high, facing
each other across s: a parallel-plate capacitance ε0·W·t/s in air, plus the fringing its
corners add, on top of the sheets' series capacitance. At the narrow end gaps of thin-film
filters (s of 15 µm under 5 µm of gold) that is a few per cent of the series capacitance,
the same size as the margins it decides.

**Method.** The lengthwise section of a gap between two strips much wider than the gap is a
2-D problem in (x, z): each strip is a solid block from the gap's face at x = s/2 out along
the line, from the substrate top z = h to h + t, over a grounded slab (ε_r, h). The half
section x ≥ 0 is solved (the gap's centre plane: zero normal field for the even excitation,
zero potential for the odd one) on the graded tensor grid and with the finite-volume operator
of :mod:`refine.fullwave.thick_section`; the strip runs into the far wall, which is a symmetry
plane, so it carries the uniform line's charge far from the gap, and a grounded lid sits
:data:`LID` substrate heights above the metal. Per unit width, with E the solve's field
energy over ε0 at 1 V,

    C_series' = ε0 (E_odd − E_even)/2,    C_shunt' = ε0 E_even − c_u (X − s/2),

c_u the uniform strip's capacitance per area to the ground and the lid (parallel plates: the
tensor grid reproduces a uniform field exactly), X the far wall: the π-network of the gap
(Maeda 1972, the excess-charge definition, as in :mod:`refine.fullwave.electrostatic`) per
unit width. The open end is the even solve with the far strip's face 15 h from the centre
plane (the gap is then open on both sides).

**What is taken to three dimensions.** Only the *thickness increment* per unit width,
solid strip minus sheet on the same grid (so the grid's own error largely cancels), times
the width across which the faces look at each other: the narrow strip's width for the series
capacitance, each side's own width for its shunt capacitance and for the open end. The
sheets' capacitances stay those of the gap model in use. The increment lives at the faces
and their corners, within a few s and t of them, so the 2-D section carries it wherever
the strip is much wider than the gap and the metal (W ≫ s, t); what it misses is the field
around the faces' side edges, a fraction of order (s + t)/W of the increment (under 10 %
of it at s, t < W/20).

Each value is extrapolated over three grids refined by 2 (Richardson) and carries the finest
grid's distance from it as its uncertainty.

Range: ε_r ≥ 1, 0.005 ≤ s/h ≤ 3, 0 < t/h ≤ 0.1; static (f → 0).
"""

from __future__ import annotations

import argparse
import datetime
import json
import math
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine.fullwave.mesh import graded_lines
from refine.fullwave.thick_section import field_energy
from refine.fullwave.waves import richardson
from refine.outputs.export import write_text_atomic
from refine.version import VERSION

#: the grounded lid above the metal, and the strip's length beyond the gap's face, in
#: substrate heights
LID = 20.0
LENGTH = 15.0
#: the open end: the strip's face this many substrate heights from the centre plane
OPEN_END_OFFSET = 15.0
#: the coarsest grid's cell at the faces and corners (a fraction of the smallest of h, t and
#: the half gap) and its largest cell, in substrate heights
EDGE_FRACTION = 0.5
EDGE_CELL = 0.02
MAX_CELL = 0.5
GROWTH = 1.2


def _grid(
    half_gap: float, height: float, t: float, cell: float, d_max: float
) -> tuple[NDArray, NDArray]:
    far = half_gap + LENGTH * height
    x = graded_lines([(0.0, cell), (half_gap, cell)], 0.0, far, d_max, GROWTH)
    z = graded_lines([(height, cell), (height + t, cell)], 0.0, height + t + LID * height, d_max)
    return x, z


def _energies(
    eps_r: float,
    half_gap: float,
    height: float,
    t: float,
    grid_t: float,
    cell: float,
    d_max: float,
) -> tuple[float, float, float]:
    """(E_even, E_odd, c_u (X - s/2)/ε0) per unit width of the strip block of thickness t
    (a sheet when t = 0) on the grid drawn for ``grid_t``."""
    x, z = _grid(half_gap, height, grid_t, cell, d_max)
    tol = 1e-9 * height
    strip = (x[:, None] >= half_gap - tol) & (z[None, :] >= height - tol)
    strip &= z[None, :] <= height + t + tol
    fixed = np.zeros((x.size, z.size), bool)
    fixed[:, 0] = fixed[:, -1] = True  # ground and lid
    fixed |= strip
    phi = np.where(strip, 1.0, 0.0)
    even = field_energy(x, z, eps_r, height, fixed, phi)
    fixed_odd = fixed.copy()
    fixed_odd[0, :] = True  # the centre plane at zero potential
    odd = field_energy(x, z, eps_r, height, fixed_odd, phi)
    uniform = (eps_r / height + 1.0 / (z[-1] - height - t)) * (x[-1] - half_gap)
    return even, odd, uniform


def _cell0(half_gap: float, height: float, t: float) -> float:
    sizes = [EDGE_CELL * height, EDGE_FRACTION * 2.0 * half_gap]
    if t > 0:
        sizes.append(EDGE_FRACTION * t)
    return min(sizes)


@dataclass(frozen=True)
class ThicknessIncrement:
    """Per unit width and over ε0 (dimensionless): what a metal thickness adds to a gap's
    series capacitance and to each side's shunt capacitance, with their uncertainties."""

    series: float
    shunt: float
    series_uncertainty: float
    shunt_uncertainty: float


def _check(eps_r: float, s_h: float | None, t_h: float | None) -> None:
    v.real_in_range("eps_r", eps_r, 1.0, math.inf)
    if s_h is not None:
        v.real_in_range("s/h", s_h, 0.005, 3.0)
    if t_h is not None:
        v.real_in_range("t/h", t_h, 0.0, 0.1, lo_open=True)


def _increment(eps_r: float, half_gap_h: float, t_h: float) -> ThicknessIncrement:
    height = 1.0
    cell0 = _cell0(half_gap_h, height, t_h)
    cells = [cell0 / k for k in (1, 2, 4)]
    ds, dp = [], []
    for c in cells:
        d_max = MAX_CELL * height * c / cell0
        e1, o1, u1 = _energies(eps_r, half_gap_h, height, t_h, t_h, c, d_max)
        e0, o0, u0 = _energies(eps_r, half_gap_h, height, 0.0, t_h, c, d_max)
        ds.append(0.5 * (o1 - e1) - 0.5 * (o0 - e0))
        dp.append((e1 - u1) - (e0 - u0))
    s = richardson(cells, ds)
    p = richardson(cells, dp)
    return ThicknessIncrement(s.value, p.value, s.error, p.error)


def gap_increment(eps_r: float, s_h: float, t_h: float) -> ThicknessIncrement:
    """The thickness increment of a gap's series and (each side's) shunt capacitance, per unit
    width over ε0, at gap s/h and metal t/h on a slab of ε_r."""
    _check(eps_r, s_h, t_h)
    return _increment(eps_r, 0.5 * s_h, t_h)


def open_end_increment(eps_r: float, t_h: float) -> tuple[float, float]:
    """The thickness increment of an open end's excess capacitance per unit width over ε0, and
    its uncertainty."""
    _check(eps_r, None, t_h)
    r = _increment(eps_r, OPEN_END_OFFSET, t_h)
    return r.shunt, r.shunt_uncertainty


# ---- the bundled table ------------------------------------------------------------------

#: the table's nodes: ε_r, t/h and s/h (geometric in s/h, from the thin-film end gaps to gaps
#: far wider than the slab)
TABLE_EPS_R = (1.0, 2.2, 4.4, 9.8, 16.0)
TABLE_T_H = (0.002, 0.005, 0.01, 0.02, 0.04, 0.1)
TABLE_S_H = (0.005, 0.01, 0.02, 0.04, 0.07, 0.12, 0.2, 0.35, 0.6, 1.0, 1.7, 3.0)
TABLE_FORMAT = "refine-gap-thickness/1"


def _point(args: tuple[str, float, float, float | None]) -> dict:
    kind, eps_r, t_h, s_h = args
    t0 = time.process_time()
    if kind == "gap":
        assert s_h is not None
        r = gap_increment(eps_r, s_h, t_h)
        row = {
            "series": r.series,
            "series_uncertainty": r.series_uncertainty,
            "shunt": r.shunt,
            "shunt_uncertainty": r.shunt_uncertainty,
        }
    else:
        end, unc = open_end_increment(eps_r, t_h)
        row = {"end": end, "end_uncertainty": unc}
    return {"kind": kind, "eps_r": eps_r, "t_h": t_h, "s_h": s_h, **row} | {
        "seconds": time.process_time() - t0
    }


def write_table(out: Path, workers: int = 2) -> Path:
    """Solve every node of the table and write it (JSON, atomically) to ``out``."""
    jobs: list[tuple[str, float, float, float | None]] = [
        ("gap", e, t, s) for e in TABLE_EPS_R for t in TABLE_T_H for s in TABLE_S_H
    ] + [("end", e, t, None) for e in TABLE_EPS_R for t in TABLE_T_H]
    with ProcessPoolExecutor(max_workers=workers) as pool:
        rows = list(pool.map(_point, jobs, chunksize=4))
    key = {(r["kind"], r["eps_r"], r["t_h"], r["s_h"]): r for r in rows}

    def grid(name: str) -> list:
        return [
            [[key[("gap", e, t, s)][name] for s in TABLE_S_H] for t in TABLE_T_H]
            for e in TABLE_EPS_R
        ]

    data = {
        "format": TABLE_FORMAT,
        "description": (
            "what a metal thickness t adds to a microstrip gap's series capacitance and to "
            "each side's shunt capacitance, and to an open end's excess capacitance: per unit "
            "width of the facing strips, over eps0 (dimensionless); solid strip minus sheet"
        ),
        "eps_r": list(TABLE_EPS_R),
        "t_h": list(TABLE_T_H),
        "s_h": list(TABLE_S_H),
        "series": grid("series"),
        "series_uncertainty": grid("series_uncertainty"),
        "shunt": grid("shunt"),
        "shunt_uncertainty": grid("shunt_uncertainty"),
        "end": [[key[("end", e, t, None)]["end"] for t in TABLE_T_H] for e in TABLE_EPS_R],
        "end_uncertainty": [
            [key[("end", e, t, None)]["end_uncertainty"] for t in TABLE_T_H] for e in TABLE_EPS_R
        ],
        "provenance": {
            "method": (
                "2-D finite-volume Laplace solve of the gap's lengthwise section "
                "(refine.fullwave.thick_gap): solid strips against sheets on one graded grid, "
                "three grids refined by 2, Richardson extrapolation"
            ),
            "lid_h": LID,
            "length_h": LENGTH,
            "edge_cell_h": EDGE_CELL,
            "refine_version": VERSION,
            "created": datetime.date.today().isoformat(),
            "command": "python -m refine.fullwave.thick_gap --out " + out.name,
            "cpu_seconds": round(sum(r["seconds"] for r in rows), 1),
        },
    }
    write_text_atomic(out, json.dumps(data, indent=1) + "\n")
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(
        prog="python -m refine.fullwave.thick_gap",
        description="Tabulate the metal thickness's increment to gap and open-end capacitances.",
    )
    ap.add_argument("--out", required=True, help="the table to write (JSON)")
    ap.add_argument("--workers", type=int, default=2, help="local processes (default 2)")
    a = ap.parse_args(argv)
    try:
        v.integer_in_range("--workers", a.workers, 1, 256)
    except ValueError as e:
        print(f"error: {e}", file=sys.stderr)
        return 2
    print(f"wrote {write_table(Path(a.out), a.workers)}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())


def sheet_gap(eps_r: float, s_h: float) -> tuple[float, float]:
    """A gap between zero-thickness strips of unbounded width: its series and (each side's)
    shunt capacitance per unit width over ε0, extrapolated over three grids. The 2-D limit of
    the electrostatic calibrations' gaps, by which the section's premise is checked."""
    _check(eps_r, s_h, None)
    half = 0.5 * s_h
    cell0 = _cell0(half, 1.0, 0.0)
    cells = [cell0 / k for k in (1, 2, 4)]
    series, shunt = [], []
    for c in cells:
        e, o, u = _energies(eps_r, half, 1.0, 0.0, 0.0, c, MAX_CELL * c / cell0)
        series.append(0.5 * (o - e))
        shunt.append(e - u)
    return richardson(cells, series).value, richardson(cells, shunt).value
