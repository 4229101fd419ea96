"""The ``refine`` command: its argument parser, and the dispatch to :mod:`refine.commands`.

Verbs
-----
``refine synth PROBLEM``   closed-form design only (g, J/Y0, B/Y0, C, θ) and its ideal response.
``refine design PROBLEM``  the main job (see ``refine design --help``).
``refine fullwave LAYOUT --problem PROBLEM``  full-wave check of a layout (needs openEMS).

Exit codes: 0 mask met; 1 completed but the mask is not met; 2 bad input (message, no
traceback); 3 internal error; 4 a field-solver check that cannot tell within its mesh
uncertainty; 130 interrupted.

Only the parser is loaded at start-up; a verb's modules (numpy, scipy, nlopt, matplotlib, the
models) load when it runs, so ``refine --help`` and a mistyped option answer at once.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from contextlib import nullcontext

from refine.optimise.strategy import Strategy
from refine.outputs.painters import Painters
from refine.spec.limits import MAX_DESIGNS
from refine.validity import InternalError
from refine.version import VERSION


def build_parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(
        prog="refine",
        description="Design end-coupled (series-gap) half-wave line bandpass filters that meet a "
        "ripple/rejection mask under a shop's fab rules.",
    )
    ap.add_argument("--version", action="version", version=f"refine {VERSION}")
    sub = ap.add_subparsers(dest="verb", required=True, metavar="VERB")
    p = sub.add_parser(
        "synth",
        help="closed-form inverter design only",
        description="Closed-form admittance-inverter design of the problem: g, J/Y0, "
        "B/Y0, C and theta, and how its ideal-element response meets the mask.",
    )
    p.add_argument("problem", help="problem file (TOML)")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(run="synth")
    p = sub.add_parser(
        "design",
        help="the main job: seed, diagnose, refine, verify",
        description="Closed-form seed, feasibility diagnosis, refinement under the fab rules, "
        "verification on a dense grid; prints the summary. Exit code 0 when the mask is met, 1 "
        "when it is not (with the diagnosis) or when --fullwave's field-solver check shows it not "
        "met beyond its mesh uncertainty, 4 when that check cannot tell, 2 on bad input.",
    )
    p.add_argument("problem", help="problem file (TOML)")
    p.add_argument(
        "--strategy",
        choices=[s.value for s in Strategy],
        default=Strategy.GRADIENT.value,
        help="refinement strategy (default: %(default)s)",
    )
    p.add_argument(
        "--max-evaluations",
        type=int,
        default=300,
        help="evaluation budget of the refiner (default: %(default)s)",
    )
    p.add_argument(
        "--margin",
        type=float,
        default=0.05,
        help="worst margin in dB the refiner aims for before it stops (default: %(default)s)",
    )
    p.add_argument(
        "--out",
        metavar="DIR",
        help="folder for the hand-over files (summary.json, layout.json, response.s2p, the "
        "artwork as layout.dxf, layout.svg, layout.gds, layout.kicad_mod and Gerber X2 "
        "layout-copper.gbr, layout-outline.gbr, layout-ports.gbr; response.png, passband.png, "
        "smith.png, layout.png, report.md)",
    )
    p.add_argument(
        "--touchstone-2",
        action="store_true",
        help="also write response.ts, the response as Touchstone 2.0",
    )
    p.add_argument(
        "--dxf-r12",
        action="store_true",
        help="write layout.dxf as DXF R12 (the oldest widely read DXF) instead of R2010",
    )
    p.add_argument("--force", action="store_true", help="replace output files already in DIR")
    p.add_argument(
        "--fixed-widths",
        action="store_true",
        help="keep every resonator at the feed (z_ref) width; refine gaps, lengths and taps "
        'only (as [resonators] width = "feed" in the problem file)',
    )
    p.add_argument(
        "--centre-yield",
        "--center-yield",
        dest="centre_yield",
        action="store_true",
        help="after the mask is met, move the design to maximise its worst margin over "
        "samples of the fab tolerances, and report the yield before and after",
    )
    p.add_argument(
        "--correlated",
        action="store_true",
        help="with --centre-yield: include a correlated over-etch in the tolerances",
    )
    p.add_argument(
        "--try-recommended",
        action="store_true",
        help="when the end-coupled design is not met and the diagnosis recommends the "
        "parallel-coupled topology, design that too (its files replace the end-coupled ones "
        "in --out; the exit code is its status)",
    )
    p.add_argument(
        "--power",
        type=float,
        default=1.0,
        help="input power in W for the peak gap voltage in the report (default: %(default)s)",
    )
    p.add_argument(
        "--fullwave",
        choices=["pair", "converged", "coarse", "fine"],
        help="after writing the outputs, check the layout with the field solver (openEMS) on "
        "these meshes and add the comparison to the report (see refine fullwave --help; "
        "minutes to hours)",
    )
    p.set_defaults(run="design")
    p = sub.add_parser(
        "yield",
        help="Monte Carlo yield of a layout under the fab tolerances",
        description="Yield of a layout.json against a problem's mask under its fab.gap_tolerance "
        "and fab.width_tolerance (1-sigma), all samples evaluated in batched calls; prints yield, "
        "interval, margin spread and the dimensions that matter most; writes yield.csv and "
        "yield.png.",
    )
    p.add_argument("layout", help="layout file (JSON)")
    p.add_argument("--problem", required=True, help="problem file (TOML)")
    p.add_argument(
        "--samples", type=int, default=2000, help="Monte Carlo samples (default: %(default)s)"
    )
    p.add_argument(
        "--seed", type=int, default=0, help="random seed; the same seed gives the same samples"
    )
    p.add_argument(
        "--correlated",
        action="store_true",
        help="add a correlated over-etch: one edge shift per board moving every edge together",
    )
    p.add_argument(
        "--without-model-error",
        action="store_true",
        help="sample the shop's tolerances only, not the circuit model's stated uncertainty",
    )
    p.add_argument(
        "--out",
        metavar="DIR",
        help="folder for yield.csv and yield.png (default: the layout's folder)",
    )
    p.add_argument("--force", action="store_true", help="replace yield.csv and yield.png")
    p.set_defaults(run="yield")
    p = sub.add_parser(
        "study",
        help="run a design study: every combination of the axes through the full design path",
        description="Run every combination of a study file's axes through seed, refine and "
        "verify; one row per design in results.parquet and results.csv; each design is "
        "appended to results.jsonl as it finishes, so --resume continues a killed study.",
    )
    p.add_argument("study", help="study file (TOML)")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for the results and plots")
    p.add_argument("--workers", type=int, help="local worker processes (default: all cores)")
    p.add_argument(
        "--scheduler", metavar="ADDRESS", help="run on an existing Dask distributed cluster"
    )
    p.add_argument("--resume", action="store_true", help="skip the designs DIR already holds")
    p.add_argument("--force", action="store_true", help="start again in a DIR that holds a study")
    p.add_argument("--yes", action="store_true", help=f"allow more than {MAX_DESIGNS} designs")
    p.set_defaults(run="study")
    p = sub.add_parser(
        "check",
        help="evaluate a layout file against a problem's mask",
        description="Evaluate a layout.json (as written by refine design, possibly "
        "edited by hand) against the mask of a problem; no optimisation.",
    )
    p.add_argument("layout", help="layout file (JSON)")
    p.add_argument("--problem", required=True, help="problem file (TOML)")
    p.set_defaults(run="check")
    p = sub.add_parser(
        "fullwave",
        help="check a layout with the full-wave field solver (openEMS)",
        description="Field-solve a layout.json on its problem's substrate with the open FDTD "
        "engine openEMS and compare with the circuit model: writes fullwave.s2p, fullwave.png "
        "(overlay with the mask), fullwave.json and fullwave.md, and adds the comparison to "
        "report.md and summary.json when DIR holds a design. Exit code 0 when the field-solver "
        "response meets the mask beyond its mesh uncertainty, 1 when it does not beyond it, 4 "
        "when the meshes cannot tell, 2 on bad input or a missing engine.",
    )
    p.add_argument("layout", help="layout file (JSON)")
    p.add_argument("--problem", required=True, help="problem file (TOML)")
    p.add_argument(
        "--mesh",
        choices=["pair", "converged", "coarse", "fine"],
        default="pair",
        help="pair: two meshes (edge cells 50 um, or half the smallest gap, then every cell "
        "smaller by sqrt 2), whose difference estimates the error; converged: three such "
        "meshes, extrapolated; coarse "
        "(50 um) or fine (25 um): one mesh, whose verdict is always undecided; default: "
        "%(default)s",
    )
    p.add_argument(
        "--metal",
        choices=["sheet", "thick"],
        default="sheet",
        help="the field model's strips: zero-thickness lossy sheets, judged carried to the "
        "problem's metal through the circuit model; or thick: solid perfect conductors as "
        "thick as the problem's metal, judged as they are (slower: a cell through the metal; a "
        "cross-check that shows only part of the metal's effect at the meshes a check "
        "affords, see the README); default: %(default)s",
    )
    p.add_argument(
        "--correct",
        action="store_true",
        help="EM-corrected refinement: map the field-solver response back onto the circuit "
        "model and move the layout until the field-solver response meets the mask",
    )
    p.add_argument(
        "--max-runs",
        type=int,
        default=3,
        help="with --correct: field solves allowed, the first included (default: %(default)s)",
    )
    p.add_argument(
        "--method",
        choices=["implicit", "aggressive"],
        default="implicit",
        help="with --correct: implicit space mapping (extract model corrections from all "
        "field solves so far, re-refine) or aggressive space mapping (input-space map); "
        "default: %(default)s",
    )
    p.add_argument("--out", metavar="DIR", help="output folder (default: the layout's folder)")
    p.add_argument("--force", action="store_true", help="replace the field-check files in DIR")
    p.set_defaults(run="fullwave")
    return ap


def main(argv: Sequence[str] | None = None) -> int:
    ap = build_parser()
    args = ap.parse_args(argv)
    try:
        # the hand-over's drawing processes start first: their imports overlap refine's own
        drawing = args.run == "design" and getattr(args, "out", None) is not None
        with Painters() if drawing else nullcontext() as painters:
            args.painters = painters
            from refine import commands  # the numerical stack loads here, once the input parsed

            return int(commands.COMMANDS[args.run](args))
    except InternalError as e:
        print(f"refine: internal error: {e}", file=sys.stderr)
        return 3
    except (ValueError, OSError) as e:  # bad input: problem, layout, options, files
        print(f"refine: error: {e}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(
            "refine: interrupted; every file already written is complete (each is written "
            "whole or not at all), the rest were not written",
            file=sys.stderr,
        )
        return 130


if __name__ == "__main__":
    sys.exit(main())
