"""Where users wait: the figures the README's speed table quotes, measured in one run.

    python benchmarks/waits.py            # print the table (about 2 minutes)
    python benchmarks/waits.py --readme   # and rewrite the block in README.md

Measured, each as the best of a few runs (this shared 2-core machine varies by ±30 % between
runs; the best run is the least disturbed):

* the slowest bundled problem (N=9 on alumina, 15 variables) through the whole refiner;
* the exact gradient of S11 and S21 (free resonator widths) against one evaluation, for an
  N=5 and the N=9 problem on the optimiser's grid (the refiner's inner loop);
* an N=5 and an N=9 lossy, dispersive microstrip filter at 1001 points, against the same
  circuit assembled from scikit-rf networks (MLine and capacitor networks);
* the commands as a user runs them (a fresh process each): ``refine --help``, ``refine design
  --out`` and ``refine design --centre-yield`` on the README's problem.

The README block lies between ``<!-- speed:start -->`` and ``<!-- speed:end -->``. Nothing is
asserted here: the issue's targets are printed beside the figures, and the README says which
are met.
"""

from __future__ import annotations

import argparse
import re
import subprocess
import sys
import tempfile
import time
import timeit
import warnings
from pathlib import Path

import numpy as np
from readme_block import replace_block

from refine import load_problem, seed
from refine.circuit.model import strip_model_for
from refine.circuit.response import strip_medium_for
from refine.optimise.minimax import optimiser_grid
from refine.optimise.refiner import refine_problem

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "benchmarks"))
README_PROBLEM = ROOT / "problems" / "microstrip-x-band-alumina-n3.toml"


def best(fn, number: int, repeat: int = 5) -> float:
    """Seconds per call, best of ``repeat`` rounds of ``number`` calls."""
    fn()
    return min(timeit.repeat(fn, number=number, repeat=repeat)) / number


def command(args: list[str], repeat: int = 3) -> float:
    """Best wall time (s) of ``refine ARGS`` in a fresh process."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        subprocess.run(
            [sys.executable, "-m", "refine.cli", *args],
            check=False,
            capture_output=True,
            cwd=ROOT,
        )
        times.append(time.perf_counter() - t0)
    return min(times)


def rows() -> list[tuple[str, str, str]]:
    import cascade as bench  # benchmarks/cascade.py: the scikit-rf chain and the test layouts

    out: list[tuple[str, str, str]] = []
    warnings.simplefilter("ignore")
    p9 = load_problem(ROOT / "problems" / "ms-alumina-8g-n9-3pct.toml")
    times = []
    for _ in range(2):
        t0 = time.perf_counter()
        r9 = refine_problem(p9)
        times.append(time.perf_counter() - t0)
    out.append(
        (
            "N=9 alumina problem, whole refiner",
            f"{min(times):.1f} s ({r9.status.value}, {min(r9.worst.values()):+.2f} dB)",
            "≤ 6 s",
        )
    )
    for stem in ("ms-alumina-10g-n5-2pct", "ms-alumina-8g-n9-3pct"):
        p = load_problem(ROOT / "problems" / f"{stem}.toml")
        lay = seed(p).strip_realisation.layout
        f = optimiser_grid(p.mask, lay.order)
        m = strip_model_for(strip_medium_for(p), p.gap_model, p.z_ref, lay, f, True)
        x = m.vector(lay)
        t_s = best(lambda m=m, x=x: m.response(x), 50)
        t_g = best(lambda m=m, x=x: m.response(x, True), 20)
        out.append(
            (
                f"gradient, free widths, N={lay.order} ({f.size} points)",
                f"{t_g * 1e3:.2f} ms = {t_g / t_s:.1f}× one evaluation ({t_s * 1e3:.2f} ms)",
                "≤ 3×",
            )
        )
    f = np.linspace(2e9, 22e9, 1001)
    for n in (5, 9):
        sub, med, lay = bench._microstrip_layout(n)
        m = strip_model_for(med, "garg-bahl", 50.0, lay, f, False)
        x = m.vector(lay)
        t_ours = best(lambda m=m, x=x: m.response(x), 20)
        t_skrf = best(lambda sub=sub, lay=lay: bench.skrf_microstrip_chain(sub, lay, f), 2, 3)
        out.append(
            (
                f"N={n} microstrip, 1001 points, vs scikit-rf",
                f"{t_ours * 1e3:.2f} ms vs {t_skrf * 1e3:.0f} ms: {t_skrf / t_ours:.0f}×",
                "≥ 60× (N=5)" if n == 5 else "",
            )
        )
    out.append(("`refine --help`", f"{command(['--help']):.2f} s", "≤ 0.4 s"))
    with tempfile.TemporaryDirectory() as tmp:
        t_out = command(["design", str(README_PROBLEM), "--out", tmp, "--force"])
    out.append(("`refine design --out` (README problem)", f"{t_out:.1f} s", "≤ 2 s"))
    t_cy = command(["design", str(README_PROBLEM), "--centre-yield"], repeat=2)
    res = subprocess.run(
        [sys.executable, "-m", "refine.cli", "design", str(README_PROBLEM), "--centre-yield"],
        capture_output=True,
        text=True,
        cwd=ROOT,
    )
    m_y = re.search(r"yield ([0-9.]+ %) -> ([0-9.]+ %)", res.stdout)
    yields = f", yield {m_y.group(1)} → {m_y.group(2)}" if m_y else ""
    out.append(
        ("`refine design --centre-yield` (README problem)", f"{t_cy:.1f} s{yields}", "≤ 5 s")
    )
    return out


def table(data: list[tuple[str, str, str]]) -> str:
    lines = ["| what | measured | target |", "|---|---|---|"]
    lines += [f"| {a} | {b} | {c} |" for a, b, c in data]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readme", action="store_true", help="rewrite the block in README.md")
    args = ap.parse_args(argv)
    text = table(rows())
    print(text)
    if args.readme:
        stamp = "`python benchmarks/waits.py --readme` wrote this table"
        replace_block("speed", f"{stamp}:\n\n{text}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
