"""Cascade engine speed, measured side by side in one run.

    python benchmarks/cascade.py            # full run (~1 min)
    python benchmarks/cascade.py --quick    # fewer repeats

Compares, for end-coupled filters at 1001 frequency points:
  * refine's fused cascade (elements -> S),
  * the same elements as stacked (nf, 2, 2) matrices chained with np.matmul,
  * the same chain assembled from scikit-rf networks (one Network per element, ``**``),
    for ideal elements and for lossy, dispersive microstrip layouts (scikit-rf's MLine);
and reports batched evaluation of 1000 designs and the cost of the analytic gradient.
Prints median wall times and ratios. Nothing here is asserted: the figures go in the README.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
import warnings
from collections.abc import Callable
from pathlib import Path

import numpy as np
from scipy.constants import c as C0

from refine.circuit import builder, cascade
from refine.circuit.response import layout_response
from refine.physics.discontinuities import garg_bahl_gap
from refine.physics.microstrip import Microstrip
from refine.physics.substrate import Substrate
from refine.synthesis import inverters as synthesis
from refine.synthesis.realise import realise


def median_time(fn: Callable[[], object], repeats: int, inner: int = 1) -> float:
    fn()  # warm-up
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        for _ in range(inner):
            fn()
        times.append((time.perf_counter() - t0) / inner)
    return statistics.median(times)


def matmul_chain(elements, f, z_ref):
    m = cascade.element_matrices(elements[0], f)
    for e in elements[1:]:
        m = m @ cascade.element_matrices(e, f)
    return cascade.abcd_to_s(
        cascade.Abcd(m[..., 0, 0], m[..., 0, 1], m[..., 1, 0], m[..., 1, 1]), z_ref, reciprocal=True
    )


def skrf_ideal_chain(d, f):
    from skrf import Frequency
    from skrf.media import DefinedGammaZ0

    freq = Frequency.from_f(f, unit="Hz")
    tem = DefinedGammaZ0(frequency=freq, z0=d.z_ref, gamma=1j * 2 * np.pi * freq.f / C0)
    ntw = tem.capacitor(d.capacitance[0])
    for th, cap in zip(d.theta, d.capacitance[1:], strict=True):
        ntw = ntw ** tem.line(th * C0 / (2 * np.pi * d.f0), unit="m") ** tem.capacitor(cap)
    return ntw.s


def ideal_section(repeats: int) -> list[str]:
    f = np.linspace(0.5e9, 5e9, 1001)
    rows = [
        "ideal elements, 1001 points: median time per evaluation",
        f"{'case':<10}{'refine':>12}{'matmul':>12}{'scikit-rf':>12}{'vs matmul':>11}{'vs skrf':>10}",
    ]
    for n in (5, 9):
        d = synthesis.design("chebyshev", n, 2e9, 0.1, 50.0, 0.1)

        def ours(d=d):
            return cascade.s_parameters(
                builder.ideal_elements(d.capacitance, d.theta, d.f0, 50.0, f), f, 50.0
            )

        def mm(d=d):
            return matmul_chain(
                builder.ideal_elements(d.capacitance, d.theta, d.f0, 50.0, f), f, 50.0
            )

        np.testing.assert_allclose(ours(), mm(), atol=1e-9)
        t_ours = median_time(ours, repeats, 20)
        t_mm = median_time(mm, repeats, 20)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            t_skrf = median_time(lambda d=d: skrf_ideal_chain(d, f), max(3, repeats // 3))
        rows.append(
            f"{'N=' + str(n):<10}{t_ours * 1e6:>10.0f}us{t_mm * 1e6:>10.0f}us"
            f"{t_skrf * 1e3:>10.1f}ms{t_mm / t_ours:>10.1f}x{t_skrf / t_ours:>9.0f}x"
        )
    return rows


def _microstrip_layout(n: int):
    """A realised N-resonator X-band layout on lossy thin-film alumina (our own scenario),
    shielded: the scikit-rf chain it is compared with has no radiation, so neither has ours."""
    sub = Substrate(9.8, 0.635e-3, 4e-6, 1e-4, 4.1e7, 0.05e-6)
    med = Microstrip(sub, enclosure="shielded")
    d = synthesis.design("chebyshev", n, 10e9, 0.03, 50.0, 0.1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return sub, med, realise(d, med, None, "garg-bahl").layout


def skrf_microstrip_chain(sub, lay, f):
    from skrf import Frequency
    from skrf.media import DefinedGammaZ0, MLine

    freq = Frequency.from_f(f, unit="Hz")
    ms = MLine(
        frequency=freq,
        z0_port=50,
        w=lay.widths[0],
        h=sub.height,
        t=sub.metal_thickness,
        ep_r=sub.eps_r,
        rho=1 / sub.conductivity,
        tand=sub.loss_tangent,
        rough=sub.roughness,
        diel="frequencyinvariant",
    )
    lumped = DefinedGammaZ0(frequency=freq, z0=50)
    h, er, w = sub.height, sub.eps_r, lay.widths[0]
    ntw = None
    for k, gap in enumerate(lay.gaps):
        c = garg_bahl_gap(w, gap, h, er)
        pi = (
            lumped.shunt_capacitor(float(c.c_shunt_in))
            ** lumped.capacitor(float(c.c_series))
            ** lumped.shunt_capacitor(float(c.c_shunt_out))
        )
        ntw = pi if ntw is None else ntw**pi
        if k < lay.order:
            ntw = ntw ** ms.line(lay.lengths[k], unit="m")
    return ntw.s


def microstrip_section(repeats: int) -> list[str]:
    f = np.linspace(2e9, 22e9, 1001)
    rows = [
        "",
        "microstrip layouts (HJ + KJ/JK dispersion, conductor and dielectric loss), 1001 points",
        f"{'case':<10}{'refine':>12}{'scikit-rf':>12}{'vs skrf':>10}",
    ]
    for n in (5, 9):
        sub, med, lay = _microstrip_layout(n)

        def ours(med=med, lay=lay):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                return layout_response(lay, med, "garg-bahl", f, 50.0)

        def theirs(sub=sub, lay=lay):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                return skrf_microstrip_chain(sub, lay, f)

        t_ours = median_time(ours, repeats, 5)
        t_skrf = median_time(theirs, max(3, repeats // 3))
        rows.append(
            f"{'N=' + str(n):<10}{t_ours * 1e3:>10.2f}ms{t_skrf * 1e3:>10.1f}ms{t_skrf / t_ours:>9.0f}x"
        )
    return rows


def batch_and_gradient_section(repeats: int) -> list[str]:
    f = np.linspace(0.5e9, 5e9, 1001)
    d = synthesis.design("chebyshev", 5, 2e9, 0.1, 50.0, 0.1)
    rng = np.random.default_rng(0)
    caps = np.array(d.capacitance) * rng.uniform(0.9, 1.1, (1000, 6))
    th = np.array(d.theta) * rng.uniform(0.98, 1.02, (1000, 5))
    t_batch = median_time(
        lambda: cascade.s11_s21(builder.ideal_elements(caps, th, d.f0, 50.0, f), f, 50.0),
        max(3, repeats // 5),
    )

    def build():  # fresh elements every call: elements cache their cosh/sinh
        return builder.ideal_elements(d.capacitance, d.theta, d.f0, 50.0, f)

    t_one = median_time(lambda: cascade.s11_s21(build(), f, 50.0), repeats, 20)
    wrt = {"length", "capacitance"}  # what the refiner moves
    t_grad = median_time(lambda: cascade.s11_s21_gradient(build(), f, 50.0, wrt), repeats, 20)
    t_all = median_time(lambda: cascade.s11_s21_gradient(build(), f, 50.0), repeats, 20)
    n_par = sum(len(e.derivatives(2 * np.pi * f, wrt)) for e in build())
    n_all = sum(len(e.derivatives(2 * np.pi * f)) for e in build())
    return [
        "",
        "batched: 1000 perturbed N=5 designs x 1001 points in one call",
        f"  batch {t_batch * 1e3:.1f} ms = {t_batch / 1000 * 1e6:.1f} us per design; one design alone "
        f"{t_one * 1e6:.0f} us; per-design cost of the batch = 1/{t_one / (t_batch / 1000):.1f} of a single call",
        "",
        f"gradient of S11, S21 (N=5, 1001 points); evaluation alone {t_one * 1e6:.0f} us",
        f"  w.r.t. the {n_par} lengths and capacitances: {t_grad * 1e6:.0f} us, ratio {t_grad / t_one:.2f}x",
        f"  w.r.t. all {n_all} parameters (incl. per-frequency gamma, z_c): {t_all * 1e6:.0f} us, "
        f"ratio {t_all / t_one:.2f}x",
    ]


def refiner_loop_section(repeats: int) -> list[str]:
    """The refiner's inner loop: one design through the one element builder, on the optimiser's
    grid, S-parameters alone and with the exact gradient (fixed and free resonator widths)."""
    from refine import load_problem, seed
    from refine.circuit.model import strip_model_for
    from refine.circuit.response import strip_medium_for
    from refine.optimise.minimax import optimiser_grid

    root = Path(__file__).resolve().parent.parent / "problems"
    rows = [
        "",
        "refiner's inner loop: one design on the optimiser grid (the one element builder)",
        f"{'problem':<32}{'widths':>7}{'points':>7}{'S':>10}{'S + gradient':>14}{'ratio':>8}",
    ]
    for stem in ("microstrip-x-band-alumina-n3", "ms-alumina-8g-n9-3pct", "ms-pcb-tap-3g5-n4-2pct"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            p = load_problem(root / f"{stem}.toml")
            lay = seed(p).strip_realisation.layout
            f = optimiser_grid(p.mask, lay.order)
            for free in (False, True):
                m = strip_model_for(strip_medium_for(p), p.gap_model, p.z_ref, lay, f, free)
                x = m.vector(lay)
                t_s = median_time(lambda m=m, x=x: m.response(x), repeats, 20)
                t_g = median_time(lambda m=m, x=x: m.response(x, True), repeats, 10)
                rows.append(
                    f"{stem:<32}{'free' if free else 'fixed':>7}{f.size:>7}"
                    f"{t_s * 1e3:>8.3f}ms{t_g * 1e3:>12.3f}ms{t_g / t_s:>7.1f}x"
                )
    return rows


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repeats")
    args = ap.parse_args(argv)
    repeats = 5 if args.quick else 15
    rows = (
        ideal_section(repeats)
        + microstrip_section(repeats)
        + batch_and_gradient_section(repeats)
        + refiner_loop_section(repeats)
    )
    print("\n".join(rows))
    return 0


if __name__ == "__main__":
    sys.exit(main())
