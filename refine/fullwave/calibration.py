"""Gap capacitances from the field solver, and how the closed-form gap models compare.

A single symmetric gap (two strips of width W, gap s, on ε_r and h) is field-solved with its
reference planes at the two strip ends; its π-network (series Cg, shunt Cp per side) is read
off the ABCD matrix at each frequency (:func:`refine.fullwave.waves.pi_capacitances`) and
reduced to one quasi-static value by a least-squares fit ``C(f) = C0 + k f²`` over the
extraction band (f·h from 0.8 to 5 GHz·mm), evaluated at f = 0. Three meshes, each with half
the edge cell of the one before, give the value extrapolated to zero cell size (Richardson).

The fixture dataset (``gap_calibration.json`` beside this module; ``tests/data`` links to it)
holds those values for the geometries in :data:`GEOMETRIES`, with the engine version, meshes
and date; ``python -m refine.fullwave.calibration`` regenerates it (about 40 minutes on two
cores).
"""

from __future__ import annotations

import datetime
import json
import math
import sys
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine import validity
from refine.circuit import builder as circuit
from refine.fullwave import engine, geometry, solve, waves
from refine.physics.microstrip import Microstrip
from refine.physics.substrate import Substrate

FIXTURE = Path(__file__).with_name("gap_calibration.json")


@dataclass(frozen=True)
class GapGeometry:
    """A symmetric microstrip gap, SI units."""

    eps_r: float
    height: float
    width: float
    gap: float

    def __post_init__(self) -> None:
        v.real_in_range("eps_r", self.eps_r, 1.0, 100.0)
        v.positive("height", self.height)
        v.positive("width", self.width)
        v.positive("gap", self.gap)

    @property
    def label(self) -> str:
        return (
            f"eps_r {self.eps_r:g}, h {self.height * 1e3:g} mm, W {self.width * 1e3:g} mm, "
            f"s {self.gap * 1e3:g} mm"
        )


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


def solve_gap(g: GapGeometry, edge_cell: float, workdir: str | Path | None = None) -> GapSolve:
    """Field-solve one gap on one mesh (lossless: capacitances only)."""
    sub = Substrate(g.eps_r, g.height)
    res = geometry.Resolution(f"edge {edge_cell * 1e6:g} um", edge_cell)
    lo, hi = extraction_band(g.height)
    f = np.linspace(lo, hi, 21)
    st = geometry.gap_structure(g.width, g.gap, geometry.feed_length(sub, g.width, hi, res))
    r = solve.solve(st, sub, f, 50.0, res, workdir=workdir, lossy=False)
    pc = waves.pi_capacitances(r.abcd, f)
    cp = 0.5 * (pc.c_shunt_in + pc.c_shunt_out)
    return GapSolve(
        edge_cell, quasi_static(f, pc.c_series), quasi_static(f, cp), r.mesh.cells, r.seconds
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


@dataclass(frozen=True)
class Fixture:
    provenance: dict
    records: tuple[dict, ...]

    def geometries(self) -> list[GapGeometry]:
        return [GapGeometry(**r["geometry"]) for r in self.records]


def load_fixture(path: str | Path = FIXTURE) -> Fixture:
    data = json.loads(Path(path).read_text())
    return Fixture(data["provenance"], tuple(data["gaps"]))


def model_values(g: GapGeometry) -> dict[str, tuple[float, float]]:
    """(Cg, Cp) of every closed-form microstrip gap model at a geometry (warnings muted:
    the comparison itself is the point)."""
    med = Microstrip(Substrate(g.eps_r, g.height))
    out = {}
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        for model in circuit.GAP_MODELS["microstrip"]:
            c = circuit.gap_capacitances(med, model, g.width, g.width, g.gap)
            out[model] = (float(c.c_series), float(c.c_shunt_in))
    return out


def comparison(fx: Fixture) -> list[dict]:
    """Per fixture geometry: EM Cg, Cp and each model's relative error."""
    rows = []
    for r in fx.records:
        g = GapGeometry(**r["geometry"])
        row = {"geometry": g, "em": (r["c_series"], r["c_shunt"]), "models": {}}
        for model, (cg, cp) in model_values(g).items():
            row["models"][model] = (cg / r["c_series"] - 1.0, cp / r["c_shunt"] - 1.0)
        rows.append(row)
    return rows


def _distance(a: GapGeometry, b: GapGeometry) -> float:
    """Closeness in the ratios the models depend on: log W/h, log s/W, log eps_r."""
    da = math.log((a.width / a.height) / (b.width / b.height))
    ds = math.log((a.gap / a.width) / (b.gap / b.width))
    de = math.log(a.eps_r / b.eps_r)
    return math.sqrt(da**2 + ds**2 + de**2)


@dataclass(frozen=True)
class ModelVerdict:
    """Which gap model the EM data favour near a geometry. errors: the model's relative error
    in Cg at the nearest fixture geometry; distance: how far that geometry is (0 = same W/h,
    s/W and eps_r; 0.7 is about a factor of two in one of them)."""

    nearest: GapGeometry
    distance: float
    errors: dict[str, float]

    @property
    def closest(self) -> str:
        return min(self.errors, key=lambda m: abs(self.errors[m]))

    def sentence(self) -> str:
        parts = ", ".join(f"{m} {100 * e:+.1f} %" for m, e in self.errors.items())
        far = (
            " No calibrated gap is close to this one (distance above 0.7): indicative only."
            if self.distance > 0.7
            else ""
        )
        return (
            f"Series gap capacitance against the field solver at the nearest calibrated gap "
            f"({self.nearest.label}; distance {self.distance:.2f}): {parts}. "
            f"Closest: {self.closest}.{far}"
        )


def verdict(w: float, s: float, substrate: Substrate, fx: Fixture | None = None) -> ModelVerdict:
    """The nearest fixture geometry to a gap of the user's and how each model does there."""
    fx = fx if fx is not None else load_fixture()
    g = GapGeometry(substrate.eps_r, substrate.height, w, s)
    best = min(comparison(fx), key=lambda row: _distance(g, row["geometry"]))
    errors = {m: e[0] for m, e in best["models"].items()}
    return ModelVerdict(best["geometry"], _distance(g, best["geometry"]), errors)


def regenerate(path: str | Path = FIXTURE, geometries=GEOMETRIES) -> Path:
    """Run the whole calibration and write the fixture (atomically)."""
    from refine.outputs.export import write_text_atomic

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


def layout_verdicts(layout, substrate: Substrate, fx: Fixture | None = None) -> list[dict]:
    """For each distinct gap of a layout (mirror copies once): the gap, the width it sees (the
    geometric mean of its two sides: the fixture holds symmetric gaps) and the verdict."""
    fx = fx if fx is not None else load_fixture()
    if layout.external == "gap":
        sides = [layout.feed_width, *layout.widths, layout.feed_width]
        first = 0
    else:
        sides = list(layout.widths)
        first = 1
    seen = {}
    for k, s in enumerate(layout.gaps):
        w = math.sqrt(sides[k] * sides[k + 1])
        key = (round(w, 9), round(s, 9))
        if key not in seen:
            seen[key] = (k + first, w, s)
    out = []
    for k, w, s in seen.values():
        vd = verdict(w, s, substrate, fx)
        out.append(
            {
                "gap": k,
                "width_m": w,
                "gap_m": s,
                "nearest": asdict(vd.nearest),
                "distance": vd.distance,
                "series_capacitance_error": vd.errors,
                "closest": vd.closest,
                "sentence": vd.sentence(),
            }
        )
    return out
