"""Where users wait: the figures the README's speed table quotes, measured in one run.

    python benchmarks/waits.py            # print the table (about 2 minutes)
    python benchmarks/waits.py --readme   # and rewrite the block in README.md

Measured, each as the best of a few runs (this shared 2-core machine varies by ±30 % between
runs; the best run is the least disturbed):

* the slowest bundled problem (N=9 on alumina, 15 variables) through the whole refiner;
* the exact gradient of S11 and S21 (free resonator widths) against one evaluation, for an
  N=5 and the N=9 problem on the optimiser's grid (the refiner's inner loop), at the closed-form
  seed (all resonators one width, the cheapest evaluation) and at the refined design;
* an N=5 and an N=9 lossy, dispersive microstrip filter at 1001 points, against the same
  circuit assembled from scikit-rf networks (MLine and capacitor networks): refine's model
  (fixed widths: its line properties are computed once per model, as a model whose widths do
  not move can) and the one-shot ``layout_response`` that computes them every call;
* the inner-loop figures again in a fresh process with glibc's default allocator settings
  (``REFINE_MALLOC=system``, see ``refine/allocator.py``), side by side;
* one robust-refinement step on the README problem (the nominal design and its eight
  model-uncertainty corners, with the gradient): the corners' models one by one against the
  one batched call refine makes;
* the commands as a user runs them (a fresh process each): ``refine --help``, ``refine design
  --out`` and ``refine design --centre-yield`` on the README's problem.

The README block lies between ``<!-- speed:start -->`` and ``<!-- speed:end -->``. Nothing is
asserted here: the issue's targets are printed beside the figures, and the README says which
are met.
"""

from __future__ import annotations

import argparse
import json
import os
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
from refine.circuit.response import layout_response, strip_medium_for
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


def inner() -> dict[str, float]:
    """The refiner's inner loop and the 1001-point evaluation, seconds per call."""
    import cascade as bench  # benchmarks/cascade.py: the scikit-rf chain and the test layouts

    warnings.simplefilter("ignore")
    t: dict[str, float] = {}
    for stem in ("ms-alumina-10g-n5-2pct", "ms-alumina-8g-n9-3pct"):
        p = load_problem(ROOT / "problems" / f"{stem}.toml")
        lay = seed(p).strip_realisation.layout
        f = optimiser_grid(p.mask, lay.order)
        m = strip_model_for(strip_medium_for(p), p.gap_model, p.z_ref, lay, f, True)
        n = lay.order
        t[f"nf{n}"] = f.size
        # at the seed (every resonator the same width) and at the refined design (the widths
        # differ, as they do wherever the optimiser works); interleaved rounds, best of each: a
        # disturbance hits both figures alike
        refined = refine_problem(p).layout
        for point, at in (("seed", lay), ("refined", refined)):
            x = m.vector(at)
            s_best, g_best = np.inf, np.inf
            for _ in range(15):
                s_best = min(s_best, best(lambda m=m, x=x: m.response(x), 20, 1))
                g_best = min(g_best, best(lambda m=m, x=x: m.response(x, True), 10, 1))
            t[f"eval{n}{point}"], t[f"grad{n}{point}"] = s_best, g_best
    f = np.linspace(2e9, 22e9, 1001)
    for n in (5, 9):
        sub, med, lay = bench._microstrip_layout(n)
        m = strip_model_for(med, "garg-bahl", 50.0, lay, f, False)
        x = m.vector(lay)
        t[f"model{n}"] = best(lambda m=m, x=x: m.response(x), 20, 15)
        t[f"oneshot{n}"] = best(
            lambda med=med, lay=lay: layout_response(lay, med, "garg-bahl", f, 50.0), 10, 15
        )
        t[f"skrf{n}"] = best(
            lambda sub=sub, lay=lay: bench.skrf_microstrip_chain(sub, lay, f), 2, 3
        )
    return t


def corner_step() -> tuple[float, float, int]:
    """One robust-refinement step on the README problem (the nominal design and every
    model-uncertainty corner, with the gradient, on the optimiser's grid): each corner's model
    called in turn vs the one batched call refine makes. Seconds per step, and the copies."""
    from dataclasses import replace

    from refine.optimise.robust import corner_models

    warnings.simplefilter("ignore")
    p = load_problem(README_PROBLEM)
    lay = refine_problem(p).layout
    f = optimiser_grid(p.mask, lay.order)
    nominal, every, unc = corner_models(p, lay, f, p.free_widths)
    x = nominal.vector(lay)
    singles = [nominal] + [replace(nominal, adjust=a) for a in unc.corners(len(lay.gaps))]
    batch = np.tile(x, (len(singles), 1))
    one = best(lambda: [m.response(x, True) for m in singles], 5, 7)
    batched = best(lambda: every.response(batch, True), 5, 7)
    return one, batched, len(singles)


def inner_without_tuning() -> dict[str, float]:
    """:func:`inner` in a fresh process with glibc's default allocator settings."""
    env = {**os.environ, "REFINE_MALLOC": "system"}
    res = subprocess.run(
        [sys.executable, str(Path(__file__)), "--inner-json"],
        check=True,
        capture_output=True,
        text=True,
        cwd=ROOT,
        env=env,
    )
    return json.loads(res.stdout.strip().splitlines()[-1])


def rows() -> list[tuple[str, str, str]]:
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
    t = inner()
    u = inner_without_tuning()
    note = " (glibc defaults: {})"
    for n in (5, 9):
        for point in ("seed", "refined"):
            g, e = t[f"grad{n}{point}"], t[f"eval{n}{point}"]
            gu, eu = u[f"grad{n}{point}"], u[f"eval{n}{point}"]
            out.append(
                (
                    f"gradient, free widths, N={n} ({t[f'nf{n}']:.0f} points), at the {point}",
                    f"{g * 1e3:.2f} ms = {g / e:.1f}× one evaluation ({e * 1e3:.2f} ms)"
                    + note.format(f"{gu / eu:.1f}×, {gu * 1e3:.2f} / {eu * 1e3:.2f} ms"),
                    "≤ 3×",
                )
            )
    for n in (5, 9):
        m, o, k = t[f"model{n}"], t[f"oneshot{n}"], t[f"skrf{n}"]
        out.append(
            (
                f"N={n} microstrip, 1001 points, vs scikit-rf",
                f"{m * 1e3:.2f} ms vs {k * 1e3:.0f} ms: {k / m:.0f}×"
                + note.format(f"{u[f'skrf{n}'] / u[f'model{n}']:.0f}×")
                + f"; one-shot with the line physics {o * 1e3:.2f} ms: {k / o:.0f}×",
                "≥ 60× (N=5)" if n == 5 else "",
            )
        )
    one, batched, k = corner_step()
    out.append(
        (
            f"robust refinement step, README problem (nominal + {k - 1} corners, gradient)",
            f"{batched * 1e3:.1f} ms batched vs {one * 1e3:.1f} ms one by one: {one / batched:.1f}×",
            "",
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
    ap.add_argument("--inner-json", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.inner_json:  # one half of the allocator comparison, in its own process
        print(json.dumps(inner()))
        return 0
    text = table(rows())
    print(text)
    if args.readme:
        stamp = "`python benchmarks/waits.py --readme` wrote this table"
        replace_block("speed", f"{stamp}:\n\n{text}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
