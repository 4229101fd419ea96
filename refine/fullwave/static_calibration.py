"""Substrate calibration by the electrostatic solve: a symmetric gap's series and shunt
capacitance over a grid of W/h and s/h, and the open end's excess capacitance over W/h, for one
ε_r, saved as a versioned data file that the circuit model reads
(:mod:`refine.physics.calibrated`).

Static capacitances scale with size, so values are stored divided by ε0·h (dimensionless) and
one file serves every substrate height of that ε_r. Zero metal thickness, open environment (no
lid), f → 0 (see :mod:`refine.fullwave.electrostatic` for the method and its checks).

Each point is solved at three panel densities and extrapolated (its uncertainty is stored with
it). Points run on a local process pool or a Dask cluster and are appended to a scratch file
``<out>.runs.jsonl`` as they finish, so a killed campaign resumes where it stopped; the data
file is written, atomically, only when every point is in.

    python -m refine.fullwave.static_calibration --eps-r 9.8 --out refine/physics/calibrations/static-er9.8.json

Stripline (``--stripline``): the strips midway between two ground planes b apart in a
homogeneous dielectric. There every capacitance is exactly ε_r times its value in air, so one
file, solved at ε_r = 1 and stored divided by ε0·b (read: by ε0·ε_r·b), serves every ε_r and
every b; its grid is over W/b and s/b.

    python -m refine.fullwave.static_calibration --stripline --out refine/physics/calibrations/static-stripline.json

Gaps between strips of unequal width (``--unequal``): the electrostatic solve of the unequal gap
against the symmetric gaps the circuit model's rule takes, over the narrow strip's W/h, the
width ratio and s/h, added to an existing microstrip calibration file:

    python -m refine.fullwave.static_calibration --eps-r 9.8 --unequal --out refine/physics/calibrations/static-er9.8.json
"""

from __future__ import annotations

import argparse
import datetime
import json
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from refine import _validate as v
from refine.fullwave import electrostatic as es
from refine.outputs.export import write_text_atomic
from refine.physics.constants import EPS0
from refine.study import append_row, check_scheduler, repair_store, unordered
from refine.version import VERSION

FORMAT = "refine-static-calibration/1"
# Our own grid: W/h from 0.2 to 3.2 (50 Ω lines span about 0.7-3.3 on ε_r 2-10; resonators are
# widened up to about 3x a feed) and s/h from 0.01 (a 10 µm gap on 1 mm; 6 µm on 0.635 mm) to
# 1.6 (where the series capacitance has fallen to a few % of the shunt).
W_H = (0.2, 0.3, 0.45, 0.65, 1.0, 1.5, 2.2, 3.2)
S_H = (0.01, 0.015, 0.025, 0.04, 0.065, 0.1, 0.16, 0.25, 0.4, 0.65, 1.0, 1.6)
HEIGHT = 1e-3  # the solves run at h = 1 mm; values are stored per ε0·h


def _plain(c: es.Converged, per_length: bool = False) -> dict[str, Any]:
    scale = EPS0 if per_length else EPS0 * HEIGHT
    return {
        "value": c.value / scale,
        "uncertainty": c.uncertainty / scale,
        "order": None if c.order != c.order else c.order,
        "raw": [x / scale for x in c.raw],
    }


def solve_point(
    eps_r: float, kind: str, w_h: float, s_h: float | None, stripline: bool = False
) -> dict[str, Any]:
    """One calibration point as a plain row (runs in a worker)."""
    t0 = time.perf_counter()
    if kind == "gap":
        assert s_h is not None
        got = es.converged_gap(eps_r, HEIGHT, w_h * HEIGHT, s_h * HEIGHT, stripline)
        keys = ("c_series", "c_shunt")
    else:
        got = es.converged_open_end(eps_r, HEIGHT, w_h * HEIGHT, stripline)
        keys = ("c_end", "c_line")
    row: dict[str, Any] = {"kind": kind, "w_h": w_h, "s_h": s_h}
    for key in keys:
        row[key] = _plain(got[key], per_length=key == "c_line")
    row["seconds"] = time.perf_counter() - t0
    return row


def points(w_h: tuple[float, ...] = W_H, s_h: tuple[float, ...] = S_H) -> list[tuple]:
    return [("end", w, None) for w in w_h] + [("gap", w, s) for w in w_h for s in s_h]


def _key(kind: str, w_h: float, s_h: float | None) -> str:
    return f"{kind} {w_h:g} {s_h if s_h is None else format(s_h, 'g')}"


def calibrate(
    eps_r: float,
    out: str | Path,
    workers: int | None = 2,
    client: Any = None,
    w_h: tuple[float, ...] = W_H,
    s_h: tuple[float, ...] = S_H,
    progress: Callable[[int, int, dict], None] | None = None,
    stripline: bool = False,
) -> Path:
    """Run (or resume) the campaign for ``eps_r`` (microstrip) or for stripline (solved at
    ε_r = 1, ``eps_r`` ignored) and write the data file ``out``."""
    if stripline:
        eps_r = 1.0
    v.real_in_range("eps_r", eps_r, 1.0, 100.0)
    out = Path(out)
    store = out.with_name(out.name + ".runs.jsonl")
    out.parent.mkdir(parents=True, exist_ok=True)
    repair_store(store)
    done: dict[str, dict] = {}
    if store.exists():
        for line in store.read_text(encoding="utf-8").splitlines():
            row = json.loads(line)
            if row.get("eps_r") == eps_r:
                done[_key(row["kind"], row["w_h"], row["s_h"])] = row
    todo = [p for p in points(w_h, s_h) if _key(*p) not in done]
    total = len(points(w_h, s_h))

    def finish(row: dict) -> None:
        row["eps_r"] = eps_r
        append_row(store, row)
        done[_key(row["kind"], row["w_h"], row["s_h"])] = row
        if progress is not None:
            progress(len(done), total, row)

    for row in unordered(solve_point, [(eps_r, *p, stripline) for p in todo], workers, client):
        finish(row)
    rows = [done[_key(*p)] for p in points(w_h, s_h)]
    data = {
        "format": FORMAT,
        "medium": "stripline" if stripline else "microstrip",
        "eps_r": eps_r,
        "metal_thickness": 0.0,
        "environment": (
            "two ground planes b apart, homogeneous dielectric, strips midway, no side walls"
            if stripline
            else "open (no lid, no side walls)"
        ),
        "units": (
            "capacitance / (eps0 * eps_r * b), dimensionless; c_line per unit length / "
            "(eps0 * eps_r); w_h and s_h are W/b and s/b"
            if stripline
            else "capacitance / (eps0 * h), dimensionless; c_line per unit length / eps0"
        ),
        "w_h": list(w_h),
        "s_h": list(s_h),
        "provenance": {
            "method": (
                "electrostatic boundary-element solve (refine.fullwave.electrostatic): "
                + (
                    "zero-thickness strips midway between two ground planes, image-series "
                    "Green's function (Euler-summed)"
                    if stripline
                    else "zero-thickness strips on a grounded slab, image-series Green's function"
                )
                + ", semi-infinite strips, three panel densities and Richardson extrapolation"
            ),
            "densities": list(es.DENSITIES),
            "length_spread": es.LENGTH_SPREAD,
            "refine_version": VERSION,
            "created": datetime.date.today().isoformat(),
            "command": "python -m refine.fullwave.static_calibration "
            + ("--stripline" if stripline else f"--eps-r {eps_r:g}"),
            "cpu_seconds": round(sum(r["seconds"] for r in rows), 1),
        },
        "open_ends": [_strip(r) for r in rows if r["kind"] == "end"],
        "gaps": [_strip(r) for r in rows if r["kind"] == "gap"],
    }
    write_text_atomic(out, json.dumps(data, indent=1) + "\n")
    return out


#: The unequal-gap grid (our own): the narrow strip's W/h, the wide strip's width over it, and
#: s/h. It covers the validation filters' unequal gaps (narrow W/h 0.58-1.1, ratios to 2.9, s/h
#: 0.17-0.52) with room either side; at ratio 1 the correction is zero by definition.
UNEQUAL_W_H = (0.3, 0.65, 1.5)
UNEQUAL_RATIO = (1.5, 2.2, 3.2)
UNEQUAL_S_H = (0.025, 0.065, 0.16, 0.4, 1.0)


def solve_unequal_point(eps_r: float, w_h: float, ratio: float, s_h: float) -> dict[str, Any]:
    """One unequal-gap point as a plain row: the electrostatic solve of the gap between a strip
    of W/h ``w_h`` and one ``ratio`` times wider, against the symmetric gaps the circuit
    model's rule takes (series at the geometric-mean width, each shunt at its own side's
    width), each converged over three panel densities. Stored: the series capacitance's ratio
    to the rule's and each shunt capacitance's difference from the rule's, over ε0·h."""
    t0 = time.perf_counter()
    w_n, w_w, s = w_h * HEIGHT, ratio * w_h * HEIGHT, s_h * HEIGHT
    u = es.converged_unequal_gap(eps_r, HEIGHT, w_w, w_n, s)  # strip 1 is the wide one
    mean = es.converged_gap(eps_r, HEIGHT, (w_n * w_w) ** 0.5, s)
    wide = es.converged_gap(eps_r, HEIGHT, w_w, s)
    narrow = es.converged_gap(eps_r, HEIGHT, w_n, s)
    scale = EPS0 * HEIGHT

    def diff(a: es.Converged, b: es.Converged) -> dict[str, float]:
        return {
            "value": (a.value - b.value) / scale,
            "uncertainty": (a.uncertainty + b.uncertainty) / scale,
        }

    ratio_unc = u["c_series"].uncertainty / u["c_series"].value
    ratio_unc += mean["c_series"].uncertainty / mean["c_series"].value
    return {
        "w_h": w_h,
        "ratio": ratio,
        "s_h": s_h,
        "series_ratio": {
            "value": u["c_series"].value / mean["c_series"].value,
            "uncertainty": ratio_unc,
        },
        "shunt_wide_shift": diff(u["c_shunt_1"], wide["c_shunt"]),
        "shunt_narrow_shift": diff(u["c_shunt_2"], narrow["c_shunt"]),
        "seconds": time.perf_counter() - t0,
    }


def unequal_points() -> list[tuple[float, float, float]]:
    return [(w, r, s) for w in UNEQUAL_W_H for r in UNEQUAL_RATIO for s in UNEQUAL_S_H]


def calibrate_unequal(
    eps_r: float,
    out: str | Path,
    workers: int | None = 2,
    client: Any = None,
    progress: Callable[[int, int, dict], None] | None = None,
) -> Path:
    """Run (or resume) the unequal-gap campaign for ``eps_r`` and add its table, as the key
    ``unequal_gaps``, to the existing calibration file ``out`` of the same ε_r (written
    atomically once every point is in; rows collect in ``<out>.unequal.runs.jsonl``)."""
    v.real_in_range("eps_r", eps_r, 1.0, 100.0)
    out = Path(out)
    data = json.loads(out.read_text(encoding="utf-8"))
    if data.get("medium", "microstrip") != "microstrip" or data["eps_r"] != eps_r:
        raise ValueError(
            f"{out}: a calibration of eps_r = {data['eps_r']:g} ({data.get('medium', 'microstrip')}), "
            f"not of microstrip eps_r = {eps_r:g}"
        )
    store = out.with_name(out.name + ".unequal.runs.jsonl")
    repair_store(store)
    done: dict[tuple, dict] = {}
    if store.exists():
        for line in store.read_text(encoding="utf-8").splitlines():
            row = json.loads(line)
            if row.get("eps_r") == eps_r:
                done[(row["w_h"], row["ratio"], row["s_h"])] = row
    todo = [p for p in unequal_points() if p not in done]
    total = len(unequal_points())
    for row in unordered(solve_unequal_point, [(eps_r, *p) for p in todo], workers, client):
        row["eps_r"] = eps_r
        append_row(store, row)
        done[(row["w_h"], row["ratio"], row["s_h"])] = row
        if progress is not None:
            progress(len(done), total, row)
    rows = [done[p] for p in unequal_points()]
    data["unequal_gaps"] = {
        "w_narrow_h": list(UNEQUAL_W_H),
        "ratio": list(UNEQUAL_RATIO),
        "s_h": list(UNEQUAL_S_H),
        "meaning": "series_ratio: the unequal gap's series capacitance over the symmetric gap's "
        "at the geometric-mean width; shunt_wide_shift, shunt_narrow_shift: each side's shunt "
        "capacitance minus the symmetric gap's at that side's width, over eps0 * h",
        "provenance": {
            "method": "electrostatic boundary-element solve of the unequal gap "
            "(refine.fullwave.electrostatic.unequal_gap) and of the symmetric gaps, three panel "
            "densities and Richardson extrapolation each",
            "refine_version": VERSION,
            "created": datetime.date.today().isoformat(),
            "command": f"python -m refine.fullwave.static_calibration --eps-r {eps_r:g} "
            f"--unequal --out {out.name}",
            "cpu_seconds": round(sum(r["seconds"] for r in rows), 1),
        },
        "points": [
            {k: r[k] for k in r if k not in ("eps_r", "seconds")}
            | {"seconds": round(r["seconds"], 1)}
            for r in rows
        ],
    }
    write_text_atomic(out, json.dumps(data, indent=1) + "\n")
    return out


def _strip(row: dict) -> dict:
    keep = {k: row[k] for k in row if k not in ("kind", "eps_r", "seconds")}
    if row["kind"] == "end":
        keep.pop("s_h")
    keep["seconds"] = round(row["seconds"], 1)
    return keep


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(
        prog="python -m refine.fullwave.static_calibration",
        description="Electrostatic gap and open-end calibration for one substrate permittivity.",
    )
    which = ap.add_mutually_exclusive_group(required=True)
    which.add_argument("--eps-r", type=float, help="microstrip: relative permittivity, 1-100")
    which.add_argument(
        "--stripline", action="store_true", help="stripline (one file serves every eps_r)"
    )
    ap.add_argument("--out", required=True, help="the data file to write (JSON)")
    ap.add_argument("--workers", type=int, default=2, help="local processes (default 2)")
    ap.add_argument("--scheduler", help="a Dask scheduler address instead of local processes")
    ap.add_argument(
        "--unequal",
        action="store_true",
        help="add the unequal-width gap table to the existing calibration file --out",
    )
    a = ap.parse_args(argv)
    try:
        if not a.stripline:
            v.real_in_range("--eps-r", a.eps_r, 1.0, 100.0)
        v.integer_in_range("--workers", a.workers, 1, 256)
    except ValueError as e:
        print(f"error: {e}", file=sys.stderr)
        return 2
    client = check_scheduler(a.scheduler) if a.scheduler else None

    def say(k: int, n: int, row: dict) -> None:
        print(
            f"[{k}/{n}] {row['kind']} W/h {row['w_h']:g}"
            + (f" s/h {row['s_h']:g}" if row["s_h"] is not None else "")
            + f": {row['seconds']:.1f} s",
            flush=True,
        )

    if a.unequal:
        if a.stripline:
            print("error: --unequal: microstrip only (with --eps-r)", file=sys.stderr)
            return 2

        def said(k: int, n: int, row: dict) -> None:
            print(
                f"[{k}/{n}] unequal gap W/h {row['w_h']:g} x{row['ratio']:g} s/h "
                f"{row['s_h']:g}: {row['seconds']:.1f} s",
                flush=True,
            )

        try:
            path = calibrate_unequal(a.eps_r, a.out, a.workers, client, progress=said)
        except (OSError, ValueError, KeyError) as e:
            print(f"error: --out {a.out}: {e}", file=sys.stderr)
            return 2
        print(f"wrote {path}")
        return 0
    eps_r = 1.0 if a.stripline else a.eps_r
    path = calibrate(eps_r, a.out, a.workers, client, progress=say, stripline=a.stripline)
    print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
