"""Gap capacitances from the field solver, and how the closed-form gap models compare.

A single symmetric gap (two strips of width W, gap s, on ε_r and h) is field-solved with its
reference planes at the two strip ends; its π-network (series Cg, shunt Cp per side) is read
off the ABCD matrix at each frequency (:func:`refine.fullwave.waves.pi_capacitances`) and
reduced to one quasi-static value by a least-squares fit ``C(f) = C0 + k f²`` over the
extraction band (f·h from 0.8 to 5 GHz·mm), evaluated at f = 0. Three meshes, each with half
the edge cell of the one before, give the value extrapolated to zero cell size (Richardson).

The fixture dataset (``refine/physics/gap_calibration.json``, read by
:mod:`refine.physics.gap_fixture`; ``tests/data`` links to it)
holds those values for the geometries in :data:`GEOMETRIES`, with the engine version, meshes
and date; ``python -m refine.fullwave.calibration`` regenerates it (about 40 minutes on two
cores).
"""

from __future__ import annotations

import datetime
import json
import sys
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from refine.fullwave import engine, geometry, solve, waves
from refine.outputs.export import write_text_atomic
from refine.physics.gap_fixture import FIXTURE, GapGeometry
from refine.physics.substrate import Substrate

# Spanning W/h 0.55-2, s/W 0.13-0.5 and eps_r 2.94-9.8, inside Garg-Bahl's stated range
# (0.5 <= W/h <= 2, 0.1 <= s/W <= 1, 2.5 <= eps_r <= 15); our own choice of points.
GEOMETRIES: tuple[GapGeometry, ...] = (
    GapGeometry(9.8, 0.635e-3, 0.60e-3, 0.10e-3),
    GapGeometry(9.8, 0.635e-3, 0.60e-3, 0.30e-3),
    GapGeometry(9.8, 0.635e-3, 0.60e-3, 0.08e-3),
    GapGeometry(9.8, 0.635e-3, 1.20e-3, 0.20e-3),
    GapGeometry(9.8, 0.635e-3, 0.35e-3, 0.10e-3),
    GapGeometry(6.15, 0.635e-3, 0.90e-3, 0.15e-3),
    GapGeometry(3.5, 0.508e-3, 1.00e-3, 0.15e-3),
    GapGeometry(3.5, 0.508e-3, 0.50e-3, 0.25e-3),
    GapGeometry(2.94, 0.762e-3, 1.20e-3, 0.20e-3),
)

F_H_BAND = (0.8e9 * 1e-3, 5e9 * 1e-3)  # f·h, Hz·m: 0.8-5 GHz·mm


def extraction_band(height: float) -> tuple[float, float]:
    return F_H_BAND[0] / height, F_H_BAND[1] / height


def quasi_static(f: NDArray, c: NDArray) -> float:
    """C0 of the least-squares fit C(f) = C0 + k f²."""
    a = np.stack([np.ones_like(f), (f / f.max()) ** 2], -1)
    coef, *_ = np.linalg.lstsq(a, c, rcond=None)
    return float(coef[0])


@dataclass(frozen=True)
class GapSolve:
    """One mesh: quasi-static Cg and Cp (F), the edge cell (m), cells, engine seconds."""

    edge_cell: float
    c_series: float
    c_shunt: float
    cells: int
    seconds: float


def solve_gap(
    g: GapGeometry,
    edge_cell: float,
    workdir: str | Path | None = None,
    mirror: bool = True,
    open_walls: str = "pml",
) -> GapSolve:
    """Field-solve one gap on one mesh (lossless: capacitances only). mirror, open_walls: the
    half box above the strips' centre line, and the open box's walls
    (:class:`refine.fullwave.geometry.Resolution`); the fixture's records were solved in the
    whole box with first-order walls."""
    res = geometry.Resolution(
        f"edge {edge_cell * 1e6:g} um", edge_cell, mirror=mirror, open_walls=open_walls
    )
    return solve_gap_on(g, res, workdir)


def solve_gap_on(
    g: GapGeometry,
    res: geometry.Resolution,
    workdir: str | Path | None = None,
    threads: int = 0,
    progress: engine.Progress | None = None,
) -> GapSolve:
    """:func:`solve_gap` on a given mesh preset (a filter's own meshes, say): the quasi-static
    Cg and Cp of one gap, lossless, over the extraction band."""
    sub = Substrate(g.eps_r, g.height)
    lo, hi = extraction_band(g.height)
    f = np.linspace(lo, hi, 21)
    st = geometry.gap_structure(g.width, g.gap, geometry.feed_length(sub, g.width, hi, res))
    r = solve.solve(
        st, sub, f, 50.0, res, workdir=workdir, lossy=False, threads=threads, progress=progress
    )
    pc = waves.pi_capacitances(r.abcd, f)
    cp = 0.5 * (pc.c_shunt_in + pc.c_shunt_out)
    return GapSolve(
        res.edge_cell, quasi_static(f, pc.c_series), quasi_static(f, cp), r.mesh.cells, r.seconds
    )


def ladder(g: GapGeometry, coarse: float = 50e-6) -> list[float]:
    """Three edge cells, halving, the coarsest at most ``coarse`` and half the gap."""
    d = min(coarse, 0.5 * g.gap)
    return [d, d / 2, d / 4]


def calibrate(g: GapGeometry, coarse: float = 50e-6) -> dict:
    """Three meshes and the extrapolated Cg, Cp of one geometry, as a fixture record."""
    solves = [solve_gap(g, d) for d in ladder(g, coarse)]
    cells = [s.edge_cell for s in solves]
    cg = waves.richardson(cells, [s.c_series for s in solves])
    cp = waves.richardson(cells, [s.c_shunt for s in solves])
    return {
        "geometry": asdict(g),
        "meshes": [asdict(s) for s in solves],
        "c_series": cg.value,
        "c_series_order": cg.order,
        "c_series_extrapolation": cg.error,
        "c_shunt": cp.value,
        "c_shunt_order": cp.order,
        "c_shunt_extrapolation": cp.error,
    }


def regenerate(path: str | Path = FIXTURE, geometries=GEOMETRIES) -> Path:
    """Run the whole calibration and write the fixture (atomically)."""
    eng = engine.find_engine()
    records = []
    for g in geometries:
        rec = calibrate(g)
        print(
            f"{g.label}: Cg {rec['c_series'] * 1e15:.2f} fF (order {rec['c_series_order']:.2f}), "
            f"Cp {rec['c_shunt'] * 1e15:.2f} fF",
            flush=True,
        )
        records.append(rec)
    prov = {
        "engine": eng.version,
        "bindings": "Debian python3-openems (CSXCAD/openEMS Python bindings)",
        "created": datetime.date.today().isoformat(),
        "method": (
            "single symmetric gap, zero-thickness PEC strips, lossless substrate; reference "
            "planes at the strip ends; port line impedance and propagation constant from a "
            "thru run on the same mesh; pi-network from the ABCD matrix; quasi-static value "
            "from a C0 + k f^2 fit over f*h = 0.8-5 GHz*mm; three meshes halving the edge "
            "cell (50 um or half the gap, then /2, /4) and Richardson extrapolation"
        ),
        "script": "python -m refine.fullwave.calibration",
    }
    text = json.dumps({"provenance": prov, "gaps": records}, indent=1) + "\n"
    return write_text_atomic(path, text)


if __name__ == "__main__":
    regenerate(sys.argv[1] if len(sys.argv) > 1 else FIXTURE)
