"""Largest bandwidth each half-wave topology reaches against the shop's minimum gap, two substrates.

    python benchmarks/topologies.py            # print the table
    python benchmarks/topologies.py --readme   # and write docs/topologies.png,
                                               # docs/parallel-example.png and the README block
                                               # ``topologies``

For a three-pole 0.1 dB Chebyshev filter on the PCB laminate of the bundled 5.8 GHz problems
(ε_r 3.55, 0.508 mm) and on the thin-film alumina of the README problem (ε_r 9.8, 0.635 mm, at
10 GHz), each with its bundled problem's gap model (the electrostatic calibration): the largest
fractional bandwidth whose closed-form couplings the minimum gap reaches, per topology, from
refine's own diagnosis (:mod:`refine.synthesis.diagnose` for the end-coupled ones, resonators
up to three feed widths; :mod:`refine.synthesis.parallel` for parallel-coupled sections). These
are closed-form figures: the refiner can reach somewhat further by changing widths (the bundled
problem ``par-inf-pcb-5g8-n3-20pct`` and the README say where). Nothing is asserted here.
"""

from __future__ import annotations

import argparse
import sys
import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np

from refine.circuit.response import strip_medium_for
from refine.spec.coupling import Coupling
from refine.spec.problem import load_problem
from refine.synthesis import diagnose, inverters
from refine.synthesis.parallel import max_fbw as parallel_max_fbw
from refine.synthesis.topology import GAP_FED, PARALLEL, SEARCH_LIMIT, TAPPED
from refine.validity import ModelRangeWarning

sys.path.insert(0, str(Path(__file__).resolve().parent))
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent
SUBSTRATES = (
    ("PCB laminate ε_r 3.55, 0.508 mm, 5.8 GHz", "ms-pcb-tap-5g8-n3-3pct"),
    ("thin-film alumina ε_r 9.8, 0.635 mm, 10 GHz", "microstrip-x-band-alumina-n3"),
)
MIN_GAPS = (10e-6, 25e-6, 50e-6, 100e-6, 150e-6, 200e-6, 300e-6)


def curves(stem: str) -> dict[str, list[float]]:
    """Largest fractional bandwidth per topology at every minimum gap of :data:`MIN_GAPS`."""
    problem = load_problem(ROOT / "problems" / f"{stem}.toml")
    medium = strip_medium_for(problem)
    d = inverters.design("chebyshev", 3, problem.f0, 0.05, problem.z_ref, 0.1)
    feed = medium.width_for_z0(problem.z_ref, problem.f0)
    out: dict[str, list[float]] = {GAP_FED: [], TAPPED: [], PARALLEL: []}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        for gap in MIN_GAPS:
            fab = replace(problem.strip_fab, min_gap=gap, grid=None)
            diag = diagnose.diagnose(
                d, medium, fab, problem.gap_model, feed, Coupling.GAP, (feed, 3.0 * feed)
            )
            limits = [c.j_max for c in diag.couplings]
            inner = [1.0, *limits[1:-1], 1.0]
            out[GAP_FED].append(diagnose.max_fbw(d, limits, hi=SEARCH_LIMIT))
            out[TAPPED].append(diagnose.max_fbw(d, inner, hi=SEARCH_LIMIT))
            out[PARALLEL].append(parallel_max_fbw(d.g, d.f0, d.z_ref, medium, gap, SEARCH_LIMIT))
    return out


def table(all_curves: dict[str, dict[str, list[float]]]) -> str:
    head = "| substrate | topology | " + " | ".join(f"{g * 1e6:g} um" for g in MIN_GAPS) + " |"
    rows = [head, "|---|---|" + "---|" * len(MIN_GAPS)]
    for name, cs in all_curves.items():
        for topo, values in cs.items():
            cells = [
                f"≥ {100 * SEARCH_LIMIT:.0f} %"
                if x >= SEARCH_LIMIT * (1 - 1e-9)
                else f"{100 * x:.3g} %"
                for x in values
            ]
            rows.append(f"| {name} | {topo} | " + " | ".join(cells) + " |")
    return "\n".join(rows)


def plot(all_curves: dict[str, dict[str, list[float]]], path: Path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, 2, figsize=(11, 4.2), sharey=True, layout="constrained")
    styles = {GAP_FED: ("tab:red", "o"), TAPPED: ("tab:blue", "s"), PARALLEL: ("tab:green", "^")}
    gaps_um = np.array(MIN_GAPS) * 1e6
    for ax, (name, cs) in zip(axes, all_curves.items(), strict=True):
        for topo, values in cs.items():
            colour, marker = styles[topo]
            ax.plot(gaps_um, 100 * np.array(values), marker=marker, color=colour, label=topo)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("shop's minimum gap (um)")
        ax.set_title(name, fontsize=10)
        ax.grid(True, which="both", alpha=0.3)
    axes[0].set_ylabel("largest fractional bandwidth (%)")
    for ax in axes:
        ax.axhline(100 * SEARCH_LIMIT, color="grey", lw=0.8, ls=":")
        ax.text(11, 100 * SEARCH_LIMIT * 0.8, "search limit", fontsize=7, color="grey")
    axes[0].legend(fontsize=8)
    fig.suptitle(
        "Three-pole 0.1 dB Chebyshev: the widest band each topology's closed form couples",
        fontsize=11,
    )
    fig.savefig(path, dpi=110)
    plt.close(fig)


EXAMPLE = ROOT / "problems" / "parallel" / "pcb-5g8-n3-6pct.toml"


def example(picture: Path | None) -> str:
    """The bundled 6 % laminate problem designed parallel-coupled: its verdict and sections as
    Markdown, and (given ``picture``) its response against the mask."""
    from refine.circuit.response import evaluate_parallel
    from refine.optimise.parallel import refine_parallel
    from refine.outputs import plot
    from refine.outputs.files import sweep
    from refine.outputs.parallel_files import STATUS_WORDS

    p = load_problem(EXAMPLE)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        r = refine_parallel(p)
        if picture is not None:
            f = sweep(p)
            plot.response_png(
                picture,
                f,
                evaluate_parallel(p, r.layout, f),
                evaluate_parallel(p, r.seed_layout, f),
                p.mask,
                p.name,
                STATUS_WORDS[r.status],
            )
    lay = r.layout
    rows = [
        f"`refine design problems/parallel/{EXAMPLE.name}`: {r.status.value}, worst margin "
        f"{r.verdict.worst_margin:+.2f} dB on the nominal model, {r.corners.worst_margin:+.2f} dB "
        f"at the worst model-uncertainty corner (closed-form seed {r.seed_verdict.worst_margin:+.2f}"
        " dB).",
        "",
        "| section | strip width (um) | spacing (um) | length (mm) |",
        "|---|---|---|---|",
    ]
    rows += [
        f"| {k + 1} | {w * 1e6:.0f} | {s * 1e6:.0f} | {ln * 1e3:.3f} |"
        for k, (w, s, ln) in enumerate(zip(lay.widths, lay.spacings, lay.lengths, strict=True))
    ]
    return "\n".join(rows)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readme", action="store_true", help="write the picture and README block")
    args = ap.parse_args(argv)
    all_curves = {name: curves(stem) for name, stem in SUBSTRATES}
    text = table(all_curves)
    print(text)
    shown = example(ROOT / "docs" / "parallel-example.png" if args.readme else None)
    print(shown)
    if args.readme:
        plot(all_curves, ROOT / "docs" / "topologies.png")
        replace_block(
            "topologies",
            "`python benchmarks/topologies.py --readme` wrote this table and "
            "`docs/topologies.png`:\n\n" + text + "\n\n![largest bandwidth per topology against "
            "the minimum gap](docs/topologies.png)\n\nThe parallel-coupled example:\n\n"
            + shown
            + "\n\n![the parallel-coupled example against its mask](docs/parallel-example.png)\n",
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
