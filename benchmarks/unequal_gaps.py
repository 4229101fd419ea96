"""Gaps between strips of unequal width: what the circuit model's rule misses, and what that
explains of the field solver's filters.

    python benchmarks/unequal_gaps.py            # print the tables (a few minutes)
    python benchmarks/unequal_gaps.py --readme   # the tables as the README block unequal-gaps

The circuit model's gap data (the calibrations, and the Garg-Bahl and Kirschning-Jansen-Koster
closed forms as refine uses them) are of symmetric gaps; between strips W1 != W2 it takes the
series capacitance at the geometric-mean width and each side's shunt capacitance at that
side's own width (refine.physics.calibrated). refine's electrostatic solve
(refine.fullwave.electrostatic.unequal_gap) solves the unequal gap itself. The first table
sets the two side by side for every unequal gap of the filter-level validation set
(benchmarks/em_filters.py), each difference also as the resonator length it is worth (a shunt
capacitance at an open end is line length ΔC / C', C' the line's capacitance per length).

The second table asks what that explains: for every stored field solve of those filters, the
implicit-space-mapping extraction (benchmarks/em_extract.py) is run on the circuit model with
the rule alone, with the electrostatic solve of these very gaps put in place of the rule (as
corrections on it: the series capacitance scaled, each shunt shifted, by what the solve finds
against its own symmetric gaps), and as refine now has it (the calibration's unequal-gap
table, refine.physics.calibrated). If the rule is what the circuit model was missing, the
length offsets the field solve needs shrink.
"""

from __future__ import annotations

import argparse
import contextlib
import dataclasses
import functools
import math
import sys
import warnings
from collections.abc import Iterator
from dataclasses import replace
from pathlib import Path

import numpy as np

from refine.circuit import builder, model
from refine.circuit.layout import Layout
from refine.fullwave import electrostatic as es
from refine.physics import discontinuities, strip
from refine.physics.microstrip import Microstrip
from refine.physics.substrate import Substrate
from refine.spec.problem import load_problem
from refine.validity import ModelRangeWarning

sys.path.insert(0, str(Path(__file__).resolve().parent))
import em_extract
import em_filters
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent


@functools.cache
def solved(eps_r: float, h: float, w1: float, w2: float, s: float) -> dict[str, float]:
    """The electrostatic solve's unequal gap and its symmetric gaps at the rule's widths
    (series at sqrt(W1 W2), shunts at W1 and W2), each extrapolated over three densities."""
    u = es.converged_unequal_gap(eps_r, h, w1, w2, s)
    mean = es.converged_gap(eps_r, h, math.sqrt(w1 * w2), s)
    g1 = es.converged_gap(eps_r, h, w1, s)
    g2 = es.converged_gap(eps_r, h, w2, s)
    return {
        "c_series": u["c_series"].value,
        "c_shunt_1": u["c_shunt_1"].value,
        "c_shunt_2": u["c_shunt_2"].value,
        "rule_series": mean["c_series"].value,
        "rule_shunt_1": g1["c_shunt"].value,
        "rule_shunt_2": g2["c_shunt"].value,
    }


def unequal_gaps(layout: Layout, feed_width: float) -> list[tuple[float, float, float]]:
    """(W_in, W_out, s) of each gap of a layout between strips of unequal width."""
    widths = list(layout.widths)
    if layout.taps is None:  # gap-coupled: the feeds face the end resonators
        widths = [feed_width, *widths, feed_width]
    out = []
    for k, s in enumerate(layout.gaps):
        a, b = widths[k], widths[k + 1]
        if not math.isclose(a, b, rel_tol=1e-9):
            out.append((a, b, s))
    return out


def line_capacitance(sub: Substrate, width: float, f0: float) -> float:
    """C' (F/m) of a strip: sqrt(ε_eff)/(c0 Z0) at f0, the zero-thickness line."""
    z0, ee = Microstrip(sub, loss=False).dispersive(width, np.array([f0]))
    return float(np.sqrt(ee[0]) / (299_792_458.0 * z0[0]))


@contextlib.contextmanager
def rule_only() -> Iterator[None]:
    """The circuit model with its calibrations' unequal-gap tables set aside: the rule alone."""
    original = strip.calibration_of

    def without(name: str):
        cal = original(name)
        return None if cal is None else dataclasses.replace(cal, unequal=None)

    try:
        strip.calibration_of = without  # type: ignore[assignment]
        yield
    finally:
        strip.calibration_of = original  # type: ignore[assignment]


@contextlib.contextmanager
def solved_unequal_gaps(problem, gaps: list[tuple[float, float, float]]) -> Iterator[None]:
    """The circuit model with the electrostatic solve's unequal gaps: every gap between the
    width pairs of ``gaps`` has its series capacitance scaled and each shunt shifted by what
    the solve finds against the rule (for a gap width in between, the nearest solved one's
    correction)."""
    sub = problem.strip_substrate
    table: dict[tuple[float, float], list[tuple[float, dict]]] = {}
    for a, b, s in gaps:
        d = solved(sub.eps_r, sub.height, a, b, s)
        table.setdefault((round(a, 10), round(b, 10)), []).append((s, d))
        # the same gap seen from the other side
        flip = {
            **d,
            "c_shunt_1": d["c_shunt_2"],
            "c_shunt_2": d["c_shunt_1"],
            "rule_shunt_1": d["rule_shunt_2"],
            "rule_shunt_2": d["rule_shunt_1"],
        }
        table.setdefault((round(b, 10), round(a, 10)), []).append((s, flip))
    originals = {m: m.gap_capacitances for m in (builder, model)}

    def patched(medium, gap_model, w_in, w_out, s):
        c = originals[builder](medium, gap_model, w_in, w_out, s)
        shape = np.shape(c.c_series)
        wi = np.broadcast_to(np.asarray(w_in, float), shape)
        wo = np.broadcast_to(np.asarray(w_out, float), shape)
        sv = np.broadcast_to(np.real(np.asarray(s)), shape)
        series = np.array(c.c_series, dtype=np.result_type(c.c_series, float), copy=True)
        shunt_in = np.array(c.c_shunt_in, dtype=series.dtype, copy=True)
        shunt_out = np.array(c.c_shunt_out, dtype=series.dtype, copy=True)
        for idx in np.ndindex(shape):
            key = (round(float(wi[idx]), 10), round(float(wo[idx]), 10))
            if key not in table:
                continue
            _, d = min(table[key], key=lambda e: abs(e[0] - float(sv[idx])))
            series[idx] *= d["c_series"] / d["rule_series"]
            shunt_in[idx] += d["c_shunt_1"] - d["rule_shunt_1"]
            shunt_out[idx] += d["c_shunt_2"] - d["rule_shunt_2"]
        return discontinuities.GapCapacitances(series, shunt_in, shunt_out)

    try:
        for m in originals:
            m.gap_capacitances = patched  # type: ignore[attr-defined]
        yield
    finally:
        for m, fn in originals.items():
            m.gap_capacitances = fn  # type: ignore[attr-defined]


def _records() -> list[tuple[str, object, Layout, dict]]:
    """(name, problem, layout, record) of every stored field solve with S of a validation
    filter that has unequal gaps, in the validation table's order."""
    runs = em_filters.load()
    out = []
    for key in em_filters.sequences(runs):
        name = key[0]
        problem = load_problem(ROOT / "problems" / f"{name}.toml")
        layout = em_filters.layout_of(name, problem, runs)
        if not isinstance(layout, Layout) or not unequal_gaps(layout, layout.feed_width):
            continue
        for rec in sorted(
            (r for r in runs if em_filters.sequence(r) == key and "s_em" in r),
            key=lambda r: r["mesh_index"],
        ):
            out.append((name, problem, layout, rec))
    return out


def gap_table() -> str:
    rows = [
        "| filter | W_in / W_out (µm), s (µm) | series C, solve / rule | shunt C in: solve / rule "
        "(fF), worth in length | shunt C out: solve / rule (fF), worth in length |",
        "|---|---|---|---|---|",
    ]
    seen = set()
    for name, problem, layout in em_filters.strip_layouts():
        sub = problem.strip_substrate
        for a, b, s in unequal_gaps(layout, layout.feed_width):
            key = (name, round(min(a, b), 10), round(max(a, b), 10), round(s, 10))
            if key in seen:
                continue  # a mirror-image gap
            seen.add(key)
            d = solved(sub.eps_r, sub.height, a, b, s)
            worth = []
            for side, w in ((1, a), (2, b)):
                dc = d[f"c_shunt_{side}"] - d[f"rule_shunt_{side}"]
                dl = dc / line_capacitance(replace(sub, metal_thickness=0.0), w, problem.f0)
                worth.append(
                    f"{d[f'c_shunt_{side}'] * 1e15:.2f} / {d[f'rule_shunt_{side}'] * 1e15:.2f}, "
                    f"{dl * 1e6:+.0f} µm"
                )
            rows.append(
                f"| {name} | {a * 1e6:.0f} / {b * 1e6:.0f}, {s * 1e6:.1f} | "
                f"{d['c_series'] * 1e15:.2f} / {d['rule_series'] * 1e15:.2f} fF "
                f"({100 * (d['c_series'] / d['rule_series'] - 1):+.1f} %) | {worth[0]} | {worth[1]} |"
            )
    return "\n".join(rows)


def extraction_table() -> str:
    rows = [
        "| filter (box), mesh | circuit model's gaps | gap capacitance factors | resonator length "
        "offsets (µm), input end to middle | tap offset (µm) | misfit | worst in-band RL (dB): "
        "field / circuit / corrected |",
        "|---|---|---|---|---|---|---|",
    ]
    for name, problem, layout, rec in _records():
        gaps = unequal_gaps(layout, layout.feed_width)
        for label, ctx in (
            ("the rule", [rule_only()]),
            ("the rule, these gaps solved", [rule_only(), solved_unequal_gaps(problem, gaps)]),
            ("the calibration's unequal-gap table", []),
        ):
            with contextlib.ExitStack() as stack, warnings.catch_warnings():
                for c in ctx:
                    stack.enter_context(c)
                warnings.simplefilter("ignore", ModelRangeWarning)
                r = em_extract.extract_record(problem, layout, rec)
            c = r["correction"]
            fg = r["figures"]
            tap = "–" if c.tap_offsets is None else f"{c.tap_offsets[0] * 1e6:+.0f}"
            rows.append(
                f"| {name} ({r['box']}), {rec['mesh_index'] + 1} | {label} | "
                + ", ".join(f"{g:.3f}" for g in em_extract._half(c.gap_factors))
                + " | "
                + ", ".join(f"{x * 1e6:+.0f}" for x in em_extract._half(c.length_offsets))
                + f" | {tap} | {r['misfit']:.3f} | "
                + em_extract._three(fg, "worst_return_loss_db", 1, ".1f")
                + " |"
            )
    return "\n".join(rows)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readme", action="store_true", help="write the README block")
    args = ap.parse_args(argv)
    first = gap_table()
    second = extraction_table()
    print(first)
    print()
    print(second)
    if args.readme:
        replace_block(
            "unequal-gaps",
            "`python benchmarks/unequal_gaps.py --readme` wrote these tables (the "
            "electrostatic solve extrapolated over three panel densities; lengths at the "
            "design centre on the zero-thickness line):\n\n"
            + first
            + "\n\nWhat the field solves then ask of the circuit model (the extraction of "
            "`benchmarks/em_extract.py`, on the circuit model with the rule and with the solved "
            "unequal gaps):\n\n" + second + "\n",
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
