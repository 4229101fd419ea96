"""The README's static-calibration tables, from the bundled calibration files (no solve run).

    python benchmarks/calibration_table.py            # print them
    python benchmarks/calibration_table.py --readme   # and rewrite the README block

1. For each bundled calibration, at a selection of its grid points: the electrostatic series
   and shunt capacitance (with its uncertainty) and each closed-form gap model's relative
   error against it, and the open end's Δl/h against Kirschning–Jansen–Koster.
2. Where a calibration's ε_r matches a geometry of the field solver's nine-gap fixture: the
   calibrated values (interpolated) against the field solver's mesh-extrapolated ones.
3. The stripline calibration, at a selection of its grid points, against the quasi-static
   stripline gap and the wide-strip open end b ln 2/π.
4. The cost per point of each route.

``python -m refine.fullwave.static_calibration --eps-r E --out F`` regenerates a calibration.
"""

from __future__ import annotations

import argparse
import json
import sys
import warnings

import numpy as np
from readme_block import replace_block

from refine import validity
from refine.physics import calibrated, discontinuities
from refine.physics.constants import EPS0
from refine.physics.gap_fixture import FIXTURE, comparison, load_fixture
from refine.physics.microstrip import Microstrip, hammerstad_jensen
from refine.physics.strip import gap_capacitances
from refine.physics.stripline import Stripline
from refine.physics.substrate import Substrate

ROWS_W_H = (0.45, 1.0, 2.2)
ROWS_S_H = (0.01, 0.04, 0.1, 0.4, 1.0)
H = 1e-3  # values are per ε0·h; any height gives the same ratios


def _raw(name: str) -> dict:
    return json.loads((calibrated.BUNDLED / f"{name}.json").read_text())


def gap_rows(name: str) -> list[str]:
    data = _raw(name)
    eps_r = data["eps_r"]
    med = Microstrip(Substrate(eps_r, H))
    gaps = {(g["w_h"], g["s_h"]): g for g in data["gaps"]}
    out = []
    for w_h in ROWS_W_H:
        for s_h in ROWS_S_H:
            g = gaps.get((w_h, s_h))
            if g is None:
                continue
            cs, cp = g["c_series"], g["c_shunt"]
            errs = []
            for model in ("garg-bahl", "kirschning-jansen-koster"):
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", validity.ModelRangeWarning)
                    c = gap_capacitances(med, model, w_h * H, w_h * H, s_h * H)
                errs.append(
                    (
                        float(c.c_series) / (EPS0 * H) / cs["value"] - 1,
                        float(c.c_shunt_in) / (EPS0 * H) / cp["value"] - 1,
                    )
                )
            out.append(
                f"| {eps_r:g} | {w_h:g} | {s_h:g} | {cs['value']:.3f} ± {cs['uncertainty']:.3f} "
                f"| {100 * errs[0][0]:+.0f} % | {100 * errs[1][0]:+.0f} % "
                f"| {cp['value']:.4f} ± {cp['uncertainty']:.4f} "
                f"| {100 * errs[0][1]:+.0f} % | {100 * errs[1][1]:+.0f} % |"
            )
    return out


def end_rows(name: str) -> list[str]:
    data = _raw(name)
    eps_r = data["eps_r"]
    out = []
    for e in data["open_ends"]:
        u = e["w_h"]
        dl = e["c_end"]["value"] / e["c_line"]["value"]
        unc = e["c_end"]["uncertainty"] / e["c_line"]["value"]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", validity.ModelRangeWarning)
            ee = float(hammerstad_jensen(u, eps_r, 0.0)[1])
            kjk = float(discontinuities.kirschning_jansen_koster_open_end(u, eps_r, ee))
        out.append(
            f"| {eps_r:g} | {u:g} | {dl:.4f} ± {unc:.4f} | {kjk:.4f} | {100 * (kjk / dl - 1):+.1f} % |"
        )
    return out


def stripline_rows(name: str) -> tuple[list[str], list[str]]:
    """Gap rows (W/b, s/b, Cg and Cp per ε0·εr·b with the quasi-static form's errors, its shunt
    capacitance taken to the strip ends) and open-end rows (Δl/b against ln 2/π)."""
    data = _raw(name)
    med = Stripline(Substrate(1.0, H), loss=False)
    gaps = {(g["w_h"], g["s_h"]): g for g in data["gaps"]}
    rows = []
    for w_b in ROWS_W_H:
        for s_b in ROWS_S_H:
            g = gaps.get((w_b, s_b))
            if g is None:
                continue
            cs, cp = g["c_series"], g["c_shunt"]
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", validity.ModelRangeWarning)
                z0 = med.z0(np.array(w_b * H))
                c = discontinuities.stripline_gap(np.array(s_b * H), H, 1.0, z0)
            c_line = 1.0 / (float(z0) * 299_792_458.0)
            qs = float(c.c_series) / (EPS0 * H)
            qp = (float(c.c_shunt_in) + c_line * s_b * H / 2) / (EPS0 * H)
            rows.append(
                f"| {w_b:g} | {s_b:g} | {cs['value']:.3f} ± {cs['uncertainty']:.3f} "
                f"| {100 * (qs / cs['value'] - 1):+.0f} % "
                f"| {cp['value']:.4f} ± {cp['uncertainty']:.4f} "
                f"| {100 * (qp / cp['value'] - 1):+.0f} % |"
            )
    ends = []
    wide = np.log(2) / np.pi
    for e in data["open_ends"]:
        dl = e["c_end"]["value"] / e["c_line"]["value"]
        unc = e["c_end"]["uncertainty"] / e["c_line"]["value"]
        ends.append(
            f"| {e['w_h']:g} | {dl:.4f} ± {unc:.4f} | {wide:.4f} | {100 * (wide / dl - 1):+.1f} % |"
        )
    return rows, ends


def fixture_rows() -> list[str]:
    fx = load_fixture()
    out = []
    for rec, row in zip(fx.records, comparison(fx), strict=True):
        g = row["geometry"]
        name = calibrated.nearest(g.eps_r)
        if name is None:
            continue
        cal = calibrated.load(name)
        c = calibrated.gap(cal, g.width, g.width, g.gap, g.height, g.eps_r)
        cs, cp = float(c.c_series), float(c.c_shunt_in)
        us, up = calibrated.relative_uncertainty(cal, g.width, g.gap, g.height)
        em_s, em_p = rec["c_series"], rec["c_shunt"]
        out.append(
            f"| εr {g.eps_r:g}, h {g.height * 1e3:g}, W {g.width * 1e3:g}, s {g.gap * 1e3:g} mm "
            f"| {cs * 1e15:.2f} ± {float(us) * cs * 1e15:.2f} "
            f"| {em_s * 1e15:.2f} ± {rec['c_series_extrapolation'] * 1e15:.2f} "
            f"| {100 * (em_s / cs - 1):+.1f} % "
            f"| {cp * 1e15:.2f} ± {float(up) * cp * 1e15:.2f} "
            f"| {em_p * 1e15:.2f} ± {rec['c_shunt_extrapolation'] * 1e15:.2f} "
            f"| {100 * (em_p / cp - 1):+.0f} % |"
        )
    return out


def cost_line() -> str:
    parts = []
    for name in calibrated.bundled_names():
        data = _raw(name)
        rows = data["gaps"]
        secs = np.array([r["seconds"] for r in rows])
        parts.append(
            f"{name}: {len(rows)} gaps and {len(data['open_ends'])} open ends, "
            f"{np.median(secs):.0f} s per gap (median; {secs.min():.0f}–{secs.max():.0f} s, "
            f"three panel densities on one core), {data['provenance']['cpu_seconds'] / 3600:.1f} "
            "CPU-hours in all"
        )
    fx = json.loads(FIXTURE.read_text())
    fixture_cost = fx["provenance"].get("wall_seconds")
    tail = (
        f"; the field solver's nine-gap fixture took {fixture_cost / 60:.0f} minutes"
        if fixture_cost
        else ""
    )
    return "Cost: " + "; ".join(parts) + tail + "."


def tables() -> str:
    every = calibrated.bundled_names()
    names = [n for n in every if not calibrated.load(n).stripline]
    striplines = [n for n in every if calibrated.load(n).stripline]
    out = [
        f"`python benchmarks/calibration_table.py --readme` wrote these tables from "
        f"{', '.join(f'`{n}`' for n in every)}.",
        "",
        "Gap capacitances per ε0·h from the electrostatic solve (extrapolated, ± its "
        "uncertainty) and each closed form's error against them:",
        "",
        "| εr | W/h | s/h | Cg/(ε0 h) | Garg–Bahl Cg | KJK Cg | Cp/(ε0 h) | Garg–Bahl Cp | KJK Cp |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for n in names:
        out += gap_rows(n)
    out += [
        "",
        "Open-end length extension Δl/h, electrostatic against Kirschning–Jansen–Koster:",
        "",
        "| εr | W/h | Δl/h (electrostatic) | Δl/h (KJK) | KJK error |",
        "|---|---|---|---|---|",
    ]
    for n in names:
        out += end_rows(n)
    fx = fixture_rows()
    if fx:
        out += [
            "",
            "Against the field solver's nine-gap fixture (the nearest calibration interpolated to "
            "each geometry; εr 3.5 from the 3.55 one, scaled by Garg–Bahl's εr exponents):",
            "",
            "| geometry | Cg calibrated (fF) | Cg field solver (fF) | difference "
            "| Cp calibrated (fF) | Cp field solver (fF) | difference |",
            "|---|---|---|---|---|---|---|",
            *fx,
        ]
    for n in striplines:
        gap_lines, end_lines = stripline_rows(n)
        out += [
            "",
            f"Stripline (`{n}`, one file for every ε_r): gap capacitances per ε0·ε_r·b and the "
            "quasi-static stripline gap's error against them (its shunt capacitance taken to the "
            "strip ends):",
            "",
            "| W/b | s/b | Cg/(ε0 εr b) | quasi-static Cg | Cp/(ε0 εr b) | quasi-static Cp |",
            "|---|---|---|---|---|---|",
            *gap_lines,
            "",
            "Stripline open end Δl/b against the wide-strip b ln 2/π:",
            "",
            "| W/b | Δl/b (electrostatic) | ln 2/π | its error |",
            "|---|---|---|---|",
            *end_lines,
        ]
    out += ["", cost_line()]
    return "\n".join(out)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--readme", action="store_true", help="rewrite the README block")
    a = ap.parse_args(argv)
    text = tables()
    print(text)
    if a.readme:
        replace_block("static-calibration", text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
