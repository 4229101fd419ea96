"""Field-solve worker: runs under the interpreter that has the openEMS bindings.

This file is executed as a script (``python3 _solver_script.py job.json result.npz``), never
imported by refine: it needs only numpy and the engine's own CSXCAD/openEMS modules, so refine's
environment and the engine's can differ. The job file holds everything, already decided on the
refine side (mesh lines, copper, ports, excitation, time cap), all lengths in metres; this script
only turns it into engine calls, runs the engine, and writes the port voltages and currents in
the frequency domain.
"""

import json
import os
import sys
import time
from typing import Any

import numpy as np

# The engine's port code (2019 snapshot) uses aliases that numpy 1.24 removed.
for _alias, _builtin in (("float", float), ("int", int)):
    if not hasattr(np, _alias):
        setattr(np, _alias, _builtin)

from CSXCAD import ContinuousStructure  # noqa: E402
from openEMS import openEMS  # noqa: E402
from openEMS.physical_constants import EPS0  # noqa: E402

UNIT = 1e-6  # drawing unit handed to the engine: micrometres


def um(x):
    return [float(v) / UNIT for v in x]


def enclose_conductor(csx, port, spec, t):
    """Replace a microstrip port's current probes, which the engine draws in the strip's bottom
    plane (their loop then cuts a solid strip and misses the current on its top and sides), by
    probes at the same positions whose loop encloses the whole conductor, from its bottom face
    (z = h) to its top (z = h + t), one dual line beyond each. The port's strip plane, voltage probes (strip bottom to
    ground) and excitation (in the substrate) are right as the engine draws them."""
    ny = {"x": 0, "y": 1, "z": 2}[spec["direction"]]
    lines = np.asarray(csx.GetGrid().GetLines(ny), float)
    start = np.asarray(um(spec["start"]), float)
    stop = np.asarray(um(spec["stop"]), float)
    # the engine's own placement (ports.MSLPort): three voltage probes on the lines around the
    # measurement plane, two current probes midway between them
    idx = int(np.argmin(np.abs(lines - (start[ny] + port.direction * port.measplane_shift))))
    idx = min(max(idx, 1), len(lines) - 2)
    u_pos = lines[[idx - 1, idx, idx + 1]]
    if port.direction < 0:
        u_pos = u_pos[::-1]
    # the loop's bottom and top run on the dual lines just below the bottom face and just above
    # the top face, where the engine's own loop runs below and above a sheet; given exactly, so
    # that the engine's snapping to the dual mesh cannot pick the one inside the metal
    zs = np.asarray(csx.GetGrid().GetLines(2), float)
    i_bottom = int(np.argmin(np.abs(zs - start[2])))
    i_top = int(np.argmin(np.abs(zs - (start[2] + t / UNIT))))
    z_lo = 0.5 * (zs[i_bottom - 1] + zs[i_bottom])
    z_hi = 0.5 * (zs[i_top] + zs[i_top + 1])
    names = []
    for k, pos in enumerate(u_pos[:2] + np.diff(u_pos) / 2.0):
        a, b = start.copy(), stop.copy()
        a[ny] = b[ny] = pos
        a[2], b[2] = z_lo, z_hi
        name = f"port_it_solid_{spec['number']}{'AB'[k]}"
        probe = csx.AddProbe(name, p_type=1, weight=port.direction, norm_dir=ny)
        probe.AddBox(a, b)
        names.append(name)
    port.I_filenames = names


def main(job_path, out_path):
    with open(job_path) as fh:
        job = json.load(fh)
    work = os.path.dirname(os.path.abspath(out_path))
    sim_path = os.path.join(work, "engine-run")

    fdtd = openEMS(NrTS=int(job["max_steps"]), EndCriteria=float(job["end_criterion"]))
    fdtd.SetMaxTime(float(job["max_time"]))
    exc = job["excitation"]
    fdtd.SetGaussExcite(float(exc["f0"]), float(exc["fc"]))
    fdtd.SetBoundaryCond(job["boundaries"])

    csx = ContinuousStructure()
    fdtd.SetCSX(csx)
    grid = csx.GetGrid()
    grid.SetDeltaUnit(UNIT)
    for axis in ("x", "y", "z"):
        grid.SetLines(axis, um(job["mesh"][axis]))

    sub = job["substrate"]
    f0 = float(exc["f0"])
    kappa = 2 * np.pi * f0 * EPS0 * float(sub["eps_r"]) * float(sub["loss_tangent"])
    diel = csx.AddMaterial("substrate", epsilon=float(sub["eps_r"]), kappa=kappa)
    xs, ys = job["mesh"]["x"], job["mesh"]["y"]
    diel.AddBox(um([xs[0], ys[0], 0.0]), um([xs[-1], ys[-1], sub["height"]]), priority=0)

    metal = job["metal"]
    solid = float(metal.get("solid", 0.0))  # > 0: solid strips this thick (perfect conductor)
    if metal.get("conductivity"):
        cu = csx.AddConductingSheet(
            "copper", conductivity=float(metal["conductivity"]), thickness=float(metal["thickness"])
        )
    else:
        cu = csx.AddMetal("copper")
    h = float(sub["height"])
    for x0, y0, x1, y1 in job["strips"]:
        cu.AddBox(um([x0, y0, h]), um([x1, y1, h + solid]), priority=10)

    ports = []
    for p in job["ports"]:
        kw = {"MeasPlaneShift": float(p["meas_shift"]) / UNIT, "priority": 10}
        if p["excite"]:
            kw["FeedShift"] = float(p["feed_shift"]) / UNIT
        ports.append(
            fdtd.AddMSLPort(
                int(p["number"]),
                cu,
                um(p["start"]),
                um(p["stop"]),
                p["direction"],
                "z",
                excite=1 if p["excite"] else 0,
                **kw,
            )
        )
        if solid and metal.get("enclose", True):  # False: the engine's probes (a diagnostic)
            enclose_conductor(csx, ports[-1], p, solid)

    # optional: the raw E and H fields on a few neighbouring cross-sections, from mesh line x0
    # to mesh line x1, transformed at a few frequencies (refine.fullwave.cross_plane)
    plane = job.get("field_plane")
    if plane:
        zs = job["mesh"]["z"]
        for name, kind in (("plane-e", 10), ("plane-h", 11)):
            dump = csx.AddDump(
                name, dump_type=kind, dump_mode=0, file_type=1, frequency=plane["frequencies"]
            )
            dump.AddBox(um([plane["x0"], ys[0], zs[0]]), um([plane["x1"], ys[-1], zs[-1]]))

    t0 = time.time()
    fdtd.Run(sim_path, cleanup=True, verbose=0, numThreads=int(job.get("threads", 0)))
    elapsed = time.time() - t0

    freq = np.asarray(job["frequencies"], float)
    out: dict[str, Any] = {"f": freq, "elapsed": np.array(elapsed)}
    for spec, port in zip(job["ports"], ports, strict=True):
        port.ReadUIData(sim_path, freq)
        n = int(spec["number"])
        i_axis = {"x": 0, "y": 1, "z": 2}[spec["direction"]]
        start = float(spec["start"][i_axis])
        meas = start + port.direction * port.measplane_shift * UNIT
        out[f"v{n}"] = np.asarray(port.uf_tot, complex)
        out[f"i{n}"] = np.asarray(port.if_tot, complex)
        out[f"beta{n}"] = np.asarray(port.beta, complex)  # already per metre
        out[f"zc{n}"] = np.asarray(port.Z_ref, complex)
        out[f"meas{n}"] = np.array(meas)
        # the time records behind v and i, for continuing a record's ring-down on the refine
        # side: the middle voltage probe, and the mean of the two current probes (the engine's
        # own v and i are their transforms)
        out[f"tv{n}"] = np.asarray(port.u_data.ui_time[1], float)
        out[f"yv{n}"] = np.asarray(port.u_data.ui_val[1], float)
        out[f"ti{n}"] = np.asarray(port.i_data.ui_time[0], float)
        out[f"yi{n}"] = 0.5 * (
            np.asarray(port.i_data.ui_val[0], float) + np.asarray(port.i_data.ui_val[1], float)
        )
        t = np.asarray(port.u_data.ui_time[1], float)
        out["sim_time"] = np.array(t[-1] if len(t) else 0.0)
        tail = np.abs(np.asarray(port.u_data.ui_val[1], float))
        peak = float(tail.max()) if tail.size else 0.0
        out[f"tail{n}"] = np.array(
            float(tail[-max(1, tail.size // 20) :].max()) / peak if peak else 0.0
        )
    if plane:
        import h5py  # the engine's own dumps are HDF5; only needed with a field plane

        for name, key in (("plane-e", "plane_e"), ("plane-h", "plane_h")):
            with h5py.File(os.path.join(sim_path, name + ".h5"), "r") as fh:
                fd = fh["FieldData/FD"]
                n_f = len(plane["frequencies"])
                # (3, nz, ny, nx) per frequency
                out[key] = np.stack(
                    [
                        np.asarray(fd[f"f{k}_real"]) + 1j * np.asarray(fd[f"f{k}_imag"])
                        for k in range(n_f)
                    ]
                )
                if key == "plane_h":  # H's own (dual) planes along the line
                    out["plane_hx"] = np.asarray(fh["Mesh/x"], float)
                if key == "plane_e":  # the primary lines (the H dump lists the dual ones)
                    out["plane_x"] = np.asarray(fh["Mesh/x"], float)
                    out["plane_y"] = np.asarray(fh["Mesh/y"], float)
                    out["plane_z"] = np.asarray(fh["Mesh/z"], float)
        out["plane_f"] = np.asarray(plane["frequencies"], float)
    tmp = out_path + ".part.npz"
    np.savez(tmp, **out)
    os.replace(tmp, out_path)


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2])
