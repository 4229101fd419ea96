"""Field-solver validation on the simplest structure: a straight 50 ohm microstrip line.

    python benchmarks/em_lines.py            # run what is missing, then print the table
    python benchmarks/em_lines.py --table    # print the table from the data file only

For three substrates of our own choosing (thin-film alumina, a ceramic-filled laminate, PTFE),
the field solver's thru run (the ports' own line calibration, see refine.fullwave.solve) gives
the line's propagation constant and impedance over frequency on a sequence of meshes whose
strip-edge cell halves each time. Each finished (substrate, mesh) run is appended to
``tests/data/fullwave-lines.json`` at once, with its provenance (engine, mesh, cells, time
steps, seconds, date), so a killed campaign resumes where it stopped; only the data is
committed, never the engine's scratch files. The fast test ``tests/test_fullwave_lines.py``
reads that file and checks the engine against the closed forms (Hammerstad-Jensen with the
Kirschning-Jansen dispersion, zero metal thickness as in the field model) and scikit-rf's
microstrip line, at the finest mesh and with the mesh's own uncertainty.

The strips are zero-thickness sheets (the field model's metal) and lossless here: the line's
phase and impedance are what is checked.
"""

from __future__ import annotations

import argparse
import datetime
import sys
import time
from pathlib import Path

import campaign_data
import numpy as np

from refine.circuit.layout import Layout
from refine.fullwave import cross_plane, engine, geometry, solve, waves
from refine.fullwave.uncertainty import mesh_uncertainty
from refine.physics.constants import C0
from refine.physics.microstrip import Microstrip
from refine.physics.substrate import Substrate
from refine.spec.coupling import Coupling

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT / "tests" / "data" / "fullwave-lines.json"

#: our own choice of three substrates spanning the permittivities refine is used on; the band
#: of each keeps f*h well inside Kirschning-Jansen's range
SUBSTRATES = {
    "alumina 9.8, 0.635 mm": (Substrate(9.8, 0.635e-3), (2e9, 18e9)),
    "laminate 3.55, 0.508 mm": (Substrate(3.55, 0.508e-3), (2e9, 18e9)),
    "PTFE 2.2, 0.787 mm": (Substrate(2.2, 0.787e-3), (2e9, 14e9)),
}
#: the mesh sequence: the strip-edge cell halved and the cells per wavelength doubled each time,
#: so that every cell (not only the edge cells) is refined by a constant ratio of 2, the
#: premise of the mesh-uncertainty estimate (refining the edges alone leaves the coarse cells'
#: error in place)
MESHES = ((100e-6, 20), (50e-6, 40), (25e-6, 80))
EDGE_CELLS = tuple(edge for edge, _ in MESHES)
FREQUENCIES = 41
#: the campaign's set-ups, (mesh rule at the strip edges, open walls), in the order they ran:
#: lines on the edges in a whole box with first-order walls; the thirds rule in the same box;
#: the thirds rule with matched-layer walls in the half box above the strip's centre line, the
#: field check's defaults (refine.fullwave.geometry.Resolution; benchmarks/em_boundaries.py
#: and em_mirror.py say why)
SETUPS = (("on-edge", "first-order"), ("thirds", "first-order"), ("thirds", "pml"))
RULES = ("on-edge", "thirds")


def rule_of(run: dict) -> str:
    """A run's edge rule (the first campaign's records predate the key: lines on the edges)."""
    return str(run.get("edge_rule", "on-edge"))


def walls_of(run: dict) -> str:
    """A run's open walls (records before the key: first-order walls, whole box)."""
    return campaign_data.box_of(run)["open_walls"]


def line_structure(width: float, sub: Substrate, res: geometry.Resolution, f_max: float):
    """The straight line of the field model: the thru of a one-resonator layout with this feed
    width (its feeds set the box, the launch and the measurement planes)."""
    lay = Layout(Coupling.GAP, width, (width,), (width, width), (4 * width,))
    length = geometry.feed_length(sub, width, f_max, res)
    return geometry.layout_structure(lay, sub, length).thru()


def run_one(name: str, edge: float, rule: str = "on-edge", walls: str = "first-order") -> dict:
    sub, band = SUBSTRATES[name]
    width = Microstrip(sub, loss=False).width_for_z0(50.0, 0.5 * sum(band))
    per_wavelength = dict(MESHES)[edge]
    res = geometry.Resolution(
        f"edge {edge * 1e6:g} um",
        edge,
        per_wavelength,
        edge_rule=rule,
        open_walls=walls,
        mirror=walls == "pml",  # the defaults together; the earlier set-ups solved whole boxes
    )
    st = line_structure(width, sub, res, band[1])
    mesh = geometry.build_mesh(st, sub, band[1], res)
    f = np.linspace(band[0], band[1], FREQUENCIES)
    max_time = geometry.pulse_length(band) + 6.0 * solve.transit_time(mesh, sub)
    job = geometry.job(st, mesh, sub, band, f, max_time, 1, 0, lossy=False)
    if mesh.mirror is not None:  # the cross-section's fields, for the power-current impedance
        job["field_plane"] = field_plane(st, mesh, f[::PLANE_EVERY])
    cells, steps = engine.job_size(job)
    t0 = time.perf_counter()
    r = engine.run(job, progress=lambda s: print(f"  {name}, {res.name}: {s}", flush=True))
    beta = np.asarray(r["beta1"])
    zc = np.asarray(r["zc1"])
    two = two_port_eps_eff(r, f)
    plane = {}
    if "plane_e" in r:
        strip = st.strips[0]
        z = cross_plane.impedances(
            r["plane_e"],
            r["plane_h"],
            r["plane_x"],
            r["plane_hx"],
            r["plane_y"],
            r["plane_z"],
            strip.y1,
            sub.height,
            True,
        )
        plane = {
            "plane_f_hz": np.asarray(r["plane_f"]).tolist(),
            "z0_plane_vi_ohm": z.z_vi.tolist(),
            "z0_power_current_ohm": z.z_pi.tolist(),
            "z0_power_voltage_ohm": z.z_pv.tolist(),
            "plane_reflection": z.reflection.tolist(),
        }
    return {
        "substrate": name,
        "eps_r": sub.eps_r,
        "height_m": sub.height,
        "width_m": width,
        "edge_cell_m": edge,
        "cells_per_wavelength": per_wavelength,
        "edge_rule": rule,
        "open_walls": walls,
        "half_box": mesh.mirror is not None,
        "f_hz": f.tolist(),
        "eps_eff": ((np.real(beta) * C0 / (2 * np.pi * f)) ** 2).tolist(),
        "z0_ohm": np.real(zc).tolist(),
        "eps_eff_two_port": two.tolist(),
        **plane,
        "cells": cells,
        "time_steps_at_most": steps,
        "seconds": time.perf_counter() - t0,
        "engine": str(r["engine"]),
        "date": datetime.date.today().isoformat(),
    }


#: the cross-section's fields are transformed at every PLANE_EVERY-th frequency
PLANE_EVERY = 4


def field_plane(st: geometry.Structure, mesh: geometry.Mesh, f: np.ndarray) -> dict:
    """The job's cross-sections for refine.fullwave.cross_plane: the mesh line nearest the
    middle of the line between its two feeds' reference planes and its two neighbours."""
    middle = 0.5 * (st.feeds[0].ref + st.feeds[1].ref)
    k = int(np.argmin(np.abs(mesh.x - middle)))
    return {"x0": float(mesh.x[k - 1]), "x1": float(mesh.x[k + 1]), "frequencies": f.tolist()}


def two_port_eps_eff(r: dict, f: np.ndarray) -> np.ndarray:
    """eps_eff from the thru as a two-port: the line between the two measurement planes (L
    apart, several millimetres) has A = cosh(gamma L), so beta L = |Im acosh A| up to the
    branch, which is taken nearest the port's own estimate. Where the port's estimate rests on
    one cell (beta dx of a hundredth of a radian at the bottom of a band), this rests on L."""
    length = abs(float(r["meas2"]) - float(r["meas1"]))
    state = waves.PortState(r["v1"], r["i1"], r["v2"], r["i2"])
    a = np.asarray(waves.abcd_from_states([state]).a, complex)
    folded = np.abs(np.imag(np.arccosh(a)))  # in [0, pi]
    guide = np.real(np.asarray(r["beta1"])) * length
    turns = np.arange(0, int(guide.max() / (2 * np.pi)) + 2)
    cands = np.concatenate(
        [2 * np.pi * turns[:, None] + folded, 2 * np.pi * turns[1:, None] - folded]
    )
    bl = cands[np.argmin(np.abs(cands - guide), axis=0), np.arange(f.size)]
    return (bl / length * C0 / (2 * np.pi * f)) ** 2


def load() -> list[dict]:
    return campaign_data.load_runs(DATA)


def save(runs: list[dict]) -> None:
    doc = {
        "what": "straight 50 ohm microstrip lines on the field solver (thru runs), zero-"
        "thickness lossless strips; written by benchmarks/em_lines.py",
        "runs": runs,
    }
    campaign_data.save_doc(DATA, doc)


#: the engine's tolerances against the closed forms (the field-check issue's bar)
TOL_EPS_EFF = 0.01
TOL_Z0 = 0.02


def deviations(
    runs: list[dict], name: str, rule: str = "on-edge", walls: str = "first-order"
) -> dict:
    """For one substrate: per mesh (coarsest first) the relative deviation of the field
    solver's eps_eff and Z0 from the closed forms over frequency; for the finest mesh the
    largest deviation and its mesh uncertainty (per frequency, from the mesh sequence)."""
    mine = sorted(
        (r for r in runs if r["substrate"] == name and (rule_of(r), walls_of(r)) == (rule, walls)),
        key=lambda r: -r["edge_cell_m"],
    )
    if not mine:
        return {}
    f = np.asarray(mine[0]["f_hz"])
    sub = Substrate(mine[0]["eps_r"], mine[0]["height_m"])
    z_cf, e_cf = Microstrip(sub, loss=False).dispersive(mine[0]["width_m"], f)
    de = np.array([np.asarray(r["eps_eff"]) / e_cf - 1 for r in mine])
    dz = np.array([np.asarray(r["z0_ohm"]) / z_cf - 1 for r in mine])
    dt = np.array([np.asarray(r["eps_eff_two_port"]) / e_cf - 1 for r in mine])
    cells = [r["edge_cell_m"] for r in mine]

    def worst(d: np.ndarray) -> tuple[float, float | None]:
        k = int(np.argmax(np.abs(d[-1])))
        unc = [mesh_uncertainty(cells, list(d[:, j])) for j in range(d.shape[1])]
        return float(d[-1, k]), (None if unc[k] is None else float(unc[k]))

    out_pi: dict = {}
    if all("z0_power_current_ohm" in r for r in mine):
        fp = np.asarray(mine[0]["plane_f_hz"])
        z_fp, _ = Microstrip(sub, loss=False).dispersive(mine[0]["width_m"], fp)
        dp = np.array([np.asarray(r["z0_power_current_ohm"]) / z_fp - 1 for r in mine])
        dv = np.array([np.asarray(r["z0_plane_vi_ohm"]) / z_fp - 1 for r in mine])
        unc_p = [mesh_uncertainty(cells, list(dp[:, j])) for j in range(dp.shape[1])]
        out_pi = {
            "f_plane": fp,
            "z0_power_current": dp,
            "z0_power_current_unc": unc_p,
            "z0_plane_vi": dv,
            "worst_z0_power_current": worst(dp),
        }
    return {
        "meshes": cells,
        "f": f,
        "eps_eff": de,
        "z0": dz,
        "eps_eff_two_port": dt,
        "worst_eps_eff": worst(de),
        "worst_eps_eff_two_port": worst(dt),
        "worst_z0": worst(dz),
        **out_pi,
        "seconds": [r["seconds"] for r in mine],
        "cells": [r["cells"] for r in mine],
    }


def _judge(value: float, unc: float | None, tol: float) -> str:
    if unc is None:
        return "one mesh"
    if abs(value) + unc <= tol:
        return "within"
    if abs(value) - unc > tol:
        return "outside"
    return "undecided"


def table(runs: list[dict]) -> str:
    lines = [
        "| substrate (50 ohm line) | edge rule, walls | meshes (edge cell, um) | eps_eff (port): "
        "worst deviation, finest mesh | eps_eff (two-port): worst deviation | Z0 (port): worst "
        "deviation | Z0 (power-current, from the fields): worst deviation | cells, finest "
        "| engine s, finest |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for name, (rule, walls) in ((n, su) for su in SETUPS for n in SUBSTRATES):
        d = deviations(runs, name, rule, walls)
        if not d:
            continue
        (e, ue), (z, uz) = d["worst_eps_eff"], d["worst_z0"]
        t, ut = d["worst_eps_eff_two_port"]
        fmt = lambda x, u: f"{100 * x:+.2f} %" + ("" if u is None else f" ± {100 * u:.2f} %")  # noqa: E731
        box = ", half box" if walls == "pml" else ""
        pi = "–"
        if "worst_z0_power_current" in d:
            p, up = d["worst_z0_power_current"]
            verdicts = [
                _judge(x, u, TOL_Z0)
                for x, u in zip(d["z0_power_current"][-1], d["z0_power_current_unc"], strict=True)
            ]
            pi = (
                f"{fmt(p, up)}; within 2 % beyond the mesh uncertainty at "
                f"{verdicts.count('within')} of {len(verdicts)} frequencies"
            )
        lines.append(
            f"| {name} | {rule}, {walls}{box} | {', '.join(f'{c * 1e6:g}' for c in d['meshes'])} "
            f"| {fmt(e, ue)} ({_judge(e, ue, TOL_EPS_EFF)} 1 %) | {fmt(t, ut)} "
            f"({_judge(t, ut, TOL_EPS_EFF)} 1 %) | {fmt(z, uz)} ({_judge(z, uz, TOL_Z0)} 2 %) | "
            f"{pi} | {d['cells'][-1]:,} | {d['seconds'][-1]:.0f} |"
        )
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--table", action="store_true", help="print the table only")
    ap.add_argument("--readme", action="store_true", help="and rewrite the README block")
    ap.add_argument("--substrate", choices=list(SUBSTRATES), help="only this substrate")
    args = ap.parse_args(argv)
    runs = load()
    if not args.table:
        # a half-box run without its cross-section (solved before the power-current impedance
        # was measured) is solved again and replaced
        done = {
            (r["substrate"], r["edge_cell_m"], rule_of(r), walls_of(r))
            for r in runs
            if not (r.get("half_box") and "z0_power_current_ohm" not in r)
        }
        for rule, walls in SETUPS:
            for edge in EDGE_CELLS:  # every substrate's coarser mesh first
                for name in SUBSTRATES:
                    if args.substrate and name != args.substrate:
                        continue
                    if (name, edge, rule, walls) in done:
                        continue
                    print(
                        f"{name}, {rule}, {walls} walls, edge cell {edge * 1e6:g} um ...",
                        flush=True,
                    )
                    new = run_one(name, edge, rule, walls)
                    key = (name, edge, rule, walls)
                    runs = [
                        r
                        for r in runs
                        if (r["substrate"], r["edge_cell_m"], rule_of(r), walls_of(r)) != key
                    ]
                    runs.append(new)
                    save(runs)
    text = table(runs)
    print(text)
    if args.readme:
        from readme_block import replace_block

        stamp = "`python benchmarks/em_lines.py --readme` wrote this table"
        replace_block("fullwave-lines", f"{stamp}:\n\n{text}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
