"""What each field solve says about the circuit model: the correction that makes the circuit model
reproduce it, mesh by mesh.

    python benchmarks/em_extract.py            # print the table (a few seconds per record)
    python benchmarks/em_extract.py --readme   # the table as the README block em-extract

For every record of the filter-level validation set (benchmarks/em_filters.py) that stores the
field solver's S-parameters, the implicit-space-mapping extraction (refine.fullwave.correction)
(bounded least squares on |S11| and |S21| over the passband and 1.5 bandwidths either side) finds
the preassigned parameters the circuit model lacks: a factor on each gap's series capacitance,
an offset on each resonator's electrical length (open ends, dispersion, the tee), an offset on
each tap, and a factor on the line attenuation; mirror copies tied. Like the extraction, the
circuit model here has the field model's zero-thickness strips (refine.fullwave.correction.
sheet_problem), whatever metal thickness the problem gives: like for like, the correction is
what the field solver finds the circuit model missing. The table sets the figures of the
corrected circuit model beside the field solver's and the uncorrected model's, so that it
shows whether the correction explains the field response, and it gives the share of the
incident power the filter dissipates or radiates at the design centre, 1 − |S11|² − |S21|².
That share falls as the match worsens (less power enters the resonators), so the field solver's
is to be set beside the corrected model's, which has the field solver's match, more than beside
the uncorrected one's. A parameter the fit pushed to its bound is marked so: there the
correction could not follow the field.

Read a correction from one mesh with the mesh's own bias in mind: the coarse meshes of the
nine-gap fixture read the series capacitance of a gap 16–33 % high (README, gap calibration).
Where a filter has records on two or more meshes the trend of each parameter says how much of it
is the mesh.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np

from refine.circuit.layout import Layout
from refine.fullwave import correction
from refine.spec.problem import Problem, load_problem
from refine.validity import ModelRangeWarning

sys.path.insert(0, str(Path(__file__).resolve().parent))
import campaign_data
import em_filters
from em_filters import layout_of
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent


def lost_power(f: np.ndarray, s: np.ndarray, f0: float) -> float:
    """1 − |S11|² − |S21|² at ``f0`` (linear interpolation of the powers): the share of the
    incident power a two-port dissipates or radiates there (it depends on the match)."""
    p = 1.0 - np.abs(s[:, 0, 0]) ** 2 - np.abs(s[:, 1, 0]) ** 2
    return float(np.interp(f0, f, p))


def band_and_loss(problem: Problem, f: np.ndarray, s: np.ndarray) -> dict:
    """Centre, 3 dB bandwidth, worst in-band return loss and the power lost at f0."""
    return {**em_filters.band(problem, f, s), "lost_power": lost_power(f, s, problem.f0)}


def extract_record(problem: Problem, layout: Layout, rec: dict) -> dict:
    """The correction one stored solve implies, its misfit, and the figures it reproduces."""
    got = em_filters.stored_s(rec)
    assert got is not None
    f, s_em = got
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        corr, misfit = correction.extract_correction(
            problem, [correction.StoredSolve(layout, f, s_em)]
        )
        sheet = correction.sheet_problem(problem)  # the field model's zero-thickness strips
        s_model = correction.corrected_response(
            sheet, layout, correction.ModelCorrection.none(layout), f
        )
        s_corr = correction.corrected_response(sheet, layout, corr, f)
    figs = {
        key: band_and_loss(problem, f, s)
        for key, s in (("field", s_em), ("circuit", s_model), ("corrected", s_corr))
    }
    return {
        "filter": rec["filter"],
        "box": campaign_data.box_name(rec),
        "mesh_index": rec["mesh_index"],
        "edge_cell_m": rec["edge_cell_m"],
        "correction": corr,
        "bound": correction.bounded_fields(corr, layout),
        "misfit": misfit,
        "figures": figs,
        "seconds": time.perf_counter() - t0,
    }


def rows(runs: list[dict] | None = None) -> list[dict]:
    """One row per record that stores its S-parameters, in the validation table's order."""
    runs = em_filters.load() if runs is None else runs
    out = []
    for key in em_filters.sequences(runs):
        name = key[0]
        mine = sorted(
            (r for r in runs if em_filters.sequence(r) == key and "s_em" in r),
            key=lambda r: r["mesh_index"],
        )
        if not mine:
            continue
        problem = load_problem(ROOT / "problems" / f"{name}.toml")
        layout = layout_of(name, problem, runs)
        if not isinstance(layout, Layout):
            continue  # the extraction corrects end-coupled layouts only
        out.extend(extract_record(problem, layout, rec) for rec in mine)
    return out


def _half(values: tuple[float, ...]) -> tuple[float, ...]:
    """The first half (with the middle) of a mirror-tied tuple: input end to middle."""
    return values[: (len(values) + 1) // 2]


def _three(figs: dict, key: str, scale: float, fmt: str) -> str:
    """A figure as field / circuit / corrected."""
    return " / ".join(format(figs[k][key] * scale, fmt) for k in ("field", "circuit", "corrected"))


def _mark(row: dict, field: str) -> str:
    return " (at bound)" if field in row["bound"] else ""


def table(data: list[dict]) -> str:
    lines = [
        "| filter (box), mesh (edge cell) | gap capacitance factors, input end to middle | "
        "resonator length offsets (µm), input end to middle | tap offset (µm) | attenuation "
        "factor | misfit (RMS of \\|S\\|) | centre (GHz): field / circuit / corrected | 3 dB "
        "bandwidth (MHz): field / circuit / corrected | worst in-band RL (dB): field / circuit / "
        "corrected | power lost at f0: field / circuit / corrected |",
        "|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in data:
        c: correction.ModelCorrection = r["correction"]
        fg = r["figures"]

        gaps = ", ".join(f"{g:.3f}" for g in _half(c.gap_factors))
        lengths = ", ".join(f"{x * 1e6:+.0f}" for x in _half(c.length_offsets))
        tap = "–" if c.tap_offsets is None else f"{c.tap_offsets[0] * 1e6:+.0f}"
        lines.append(
            f"| {r['filter']} ({r['box']}), {r['mesh_index'] + 1} "
            f"({r['edge_cell_m'] * 1e6:.1f} µm) | {gaps}{_mark(r, 'gap_factors')} | "
            f"{lengths}{_mark(r, 'length_offsets')} | {tap}{_mark(r, 'tap_offsets')} | "
            f"{c.loss_factor[0]:.2f}{_mark(r, 'loss_factor')} | {r['misfit']:.3f} | "
            f"{_three(fg, 'centre_hz', 1e-9, '.3f')} | {_three(fg, 'bandwidth_hz', 1e-6, '.0f')} | "
            f"{_three(fg, 'worst_return_loss_db', 1, '.1f')} | {_three(fg, 'lost_power', 1, '.2f')} |"
        )
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readme", action="store_true", help="write the README block em-extract")
    args = ap.parse_args(argv)
    data = rows()
    text = table(data)
    if args.readme:
        replace_block(
            "em-extract",
            "`python benchmarks/em_extract.py --readme` wrote this table (every validation "
            "record that stores the field solver's S-parameters; the correction fitted to that "
            "one solve):\n\n" + text + "\n",
        )
    print(text)
    print(f"({sum(r['seconds'] for r in data):.0f} s)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
