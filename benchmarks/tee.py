"""Does the planar-waveguide T-junction explain the tapped filters' field-solver results?

    python benchmarks/tee.py            # print the table (about a minute per filter)
    python benchmarks/tee.py --readme   # the table as the README block planar-tee

The circuit model joins a tapped feed to its resonator at a point (three lines meeting at the
feed's centreline). refine.fullwave.planar solves the junction as a planar waveguide (the
published route to the classical T-junction models: each line a parallel-plate guide as wide as
makes its Z0 and ε_eff the line's) and gives its three-port at the junction's centre. Here each
tapped filter of the field-solver validation set (benchmarks/em_filters.py, its layout) is
evaluated on the circuit model as it is and with both junctions replaced by the planar tee (the
tee's other main arm ended by the same open stub, radiation and loss included as in the circuit
model), and both are set beside the field solver's finest mesh (of the box with the most meshes, with
its mesh uncertainty). The tee is solved without loss at 12 cells across the narrower guide (within 1 %
of 24 cells, tests/test_planar.py).
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from refine.circuit import cascade
from refine.circuit.layout import Layout
from refine.circuit.response import layout_build, strip_medium_for
from refine.fullwave import compare, planar, verify
from refine.physics.microstrip import Microstrip
from refine.spec.problem import Problem, load_problem
from refine.validity import ModelRangeWarning

sys.path.insert(0, str(Path(__file__).resolve().parent))
import em_filters
from em_filters import layout_of
from readme_block import replace_block

ROOT = Path(__file__).resolve().parent.parent
ACROSS = 12


@dataclass(frozen=True, eq=False)
class FixedTwoPort:
    """A cascade element with a given ABCD matrix per frequency (no derivatives: for judging,
    not for refining)."""

    abcd: cascade.Abcd
    kind: cascade.Kind = cascade.Kind.GENERAL

    def value(self, omega: np.ndarray) -> cascade.Abcd:
        return self.abcd

    def derivatives(self, omega: np.ndarray, wrt=None) -> dict:
        return {}


def with_tees(problem: Problem, layout: Layout, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(S as the circuit model has it, S with the planar tee at both taps)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        els = list(layout_build(layout, strip_medium_for(problem), problem.gap_model, f).elements)
        plain = cascade.s_parameters(els, f, problem.z_ref)
        ms = Microstrip(problem.strip_substrate, loss=False)
        side = ms.dispersive(layout.feed_width, f)
        stubs = [i for i, e in enumerate(els) if isinstance(e, cascade.ShuntOpenStub)]
        assert len(stubs) == 2, "a tapped layout has a stub at each end"
        for k, i in enumerate(stubs):
            w = layout.widths[0] if k == 0 else layout.widths[-1]
            tee = planar.solve_tee(
                f, ms.dispersive(w, f), side, problem.strip_substrate.height, ACROSS
            )
            stub = els[i]
            a, b, c, d = planar.tapped_two_port(tee, stub.gamma, stub.z_c, stub.length)
            # the output tap is the same two-port turned round (reciprocal: A and D swap)
            els[i] = FixedTwoPort(cascade.Abcd(a, b, c, d) if k == 0 else cascade.Abcd(d, b, c, a))
        return plain, cascade.s_parameters(els, f, problem.z_ref)


def rows() -> list[dict]:
    runs = em_filters.load()
    out = []
    for name in em_filters.FILTERS:
        problem = load_problem(ROOT / "problems" / f"{name}.toml")
        lay = layout_of(name, problem, runs)
        if not isinstance(lay, Layout) or lay.taps is None:
            continue
        keys = [k for k in em_filters.sequences(runs) if k[0] == name]
        if not keys:
            continue
        # the sequence with the most meshes (the latest box on a tie)
        best = max(keys, key=lambda k: (em_filters.summary(runs, k)["meshes"], keys.index(k)))
        field = em_filters.summary(runs, best)
        f = verify.em_frequencies(problem)
        t0 = time.perf_counter()
        plain, teed = with_tees(problem, lay, f)
        figs = [
            compare.band_figures(f, s[:, 0, 0], s[:, 1, 0], problem.mask) for s in (plain, teed)
        ]
        out.append(
            {
                "filter": name,
                "box": field["box"],
                "meshes": field["meshes"],
                "field": field,
                "circuit": figs[0],
                "tee": figs[1],
                "seconds": time.perf_counter() - t0,
            }
        )
    return out


def table(data: list[dict]) -> str:
    lines = [
        "| filter (field solver: box, meshes) | centre (GHz): circuit / with planar tee / field | "
        "3 dB bandwidth (MHz): circuit / with tee / field | worst in-band RL (dB): circuit / "
        "with tee / field |",
        "|---|---|---|---|",
    ]
    for r in data:
        c, t, fl = r["circuit"], r["tee"], r["field"]
        fc, dfc = fl["centre_hz"]
        bw, dbw = fl["bandwidth_hz"]
        rl, drl = fl["worst_return_loss_db"]
        lines.append(
            f"| {r['filter']} ({r['box']}, {r['meshes']}) | {c.centre / 1e9:.3f} / "
            f"{t.centre / 1e9:.3f} / {fc / 1e9:.3f}{em_filters._pm(dfc, 1e-9, '.3f')} | "
            f"{c.bandwidth / 1e6:.0f} / {t.bandwidth / 1e6:.0f} / {bw / 1e6:.0f}"
            f"{em_filters._pm(dbw, 1e-6, '.0f')} | {c.worst_return_loss:.1f} / "
            f"{t.worst_return_loss:.1f} / {rl:.1f}{em_filters._pm(drl, 1, '.1f')} |"
        )
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readme", action="store_true", help="write the README block planar-tee")
    args = ap.parse_args(argv)
    data = rows()
    text = table(data)
    if args.readme:
        replace_block(
            "planar-tee",
            "`python benchmarks/tee.py --readme` wrote this table (the field solver's finest "
            "mesh in the box with the most meshes, with its mesh uncertainty; the tee at "
            f"{ACROSS} cells across the narrower guide):\n\n" + text + "\n",
        )
    print(text)
    print(f"({sum(r['seconds'] for r in data):.0f} s)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
