"""Contracts of the one element builder: the batched and the single-design paths agree, and
every layout it builds is passive, for every bundled problem and for random valid layouts
(gap and tapped coupling, one resonator included), lossless and lossy."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from conftest import PROBLEMS, ROOT

import refine
from refine.circuit import cascade
from refine.circuit.builder import build
from refine.circuit.layout import Layout
from refine.circuit.model import strip_model_for
from refine.physics.microstrip import Microstrip
from refine.physics.stripline import Stripline
from refine.physics.substrate import Substrate
from refine.validity import ModelRangeWarning

STRIP = [p for p in PROBLEMS if refine.load_problem(p).medium != "ideal"]
MEDIA = [
    ("microstrip", "garg-bahl", Substrate(9.8, 0.635e-3, 4e-6, 1e-3, 4.1e7, 0.1e-6)),
    ("microstrip", "kirschning-jansen-koster", Substrate(6.15, 0.635e-3, 17e-6, 2e-3, 5.8e7)),
    ("stripline", "altschuler-oliner", Substrate(2.2, 1.6e-3, 17.5e-6, 9e-4, 5.8e7)),
]


def _power(s11, s21):
    return np.abs(s11) ** 2 + np.abs(s21) ** 2


def _random_layout(rng, coupling, n, w0):
    widths = tuple(rng.uniform(0.5, 2.0, n) * w0)
    lengths = tuple(rng.uniform(3e-3, 8e-3, n))
    gaps = tuple(rng.uniform(10e-6, 600e-6, n + 1 if coupling == "gap" else n - 1))
    taps = None
    if coupling == "tap":
        lo = 0.05 * min(lengths[0], lengths[-1])
        taps = (
            float(rng.uniform(lo, 0.45 * lengths[0])),
            float(rng.uniform(lo, 0.45 * lengths[-1])),
        )
    return Layout(coupling, w0, widths, gaps, lengths, taps)


@pytest.mark.parametrize("path", STRIP, ids=lambda p: p.stem)
def test_bundled_seeds_are_passive_lossless_and_lossy(path):
    problem = refine.load_problem(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        lay = refine.seed(problem).strip_realisation.layout
        f = problem.mask.sample(61, 21)
        for loss in (False, True):
            sub = problem.strip_substrate
            medium = (Microstrip if problem.medium == "microstrip" else Stripline)(sub, loss)
            els = build(
                lay.external,
                medium,
                problem.gap_model,
                lay.feed_width,
                lay.widths,
                lay.gaps,
                lay.lengths,
                lay.taps,
                f,
            ).elements
            t = cascade.s11_s21(els, f, problem.z_ref)
            assert np.all(_power(t.s11, t.s21) <= 1 + 1e-9)


@pytest.mark.parametrize(("kind", "gap_model", "sub"), MEDIA, ids=[m[1] for m in MEDIA])
@pytest.mark.parametrize("coupling", ["gap", "tap"])
def test_random_layouts_are_passive_and_both_paths_agree(kind, gap_model, sub, coupling):
    rng = np.random.default_rng(7)
    f = np.linspace(2e9, 18e9, 61) if kind == "microstrip" else np.linspace(0.5e9, 4e9, 61)
    w0 = 0.6e-3 if kind == "microstrip" else 1.3e-3
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        for trial in range(8):
            n = 1 + trial % 4 if coupling == "tap" else 1 + trial % 5
            lay = _random_layout(rng, coupling, n, w0)
            for loss in (False, True):
                medium = (Microstrip if kind == "microstrip" else Stripline)(sub, loss)
                batched = build(
                    lay.external,
                    medium,
                    gap_model,
                    [lay.feed_width],
                    [lay.widths],
                    [lay.gaps],
                    [lay.lengths],
                    None if lay.taps is None else [lay.taps],
                    f,
                ).elements
                t_b = cascade.s11_s21(batched, f, 50.0)
                model = strip_model_for(medium, gap_model, 50.0, lay, f, True)
                r = model.response(model.vector(lay))
                np.testing.assert_allclose(r.s11, t_b.s11[0], rtol=0, atol=1e-12)
                np.testing.assert_allclose(r.s21, t_b.s21[0], rtol=0, atol=1e-12)
                assert np.all(_power(r.s11, r.s21) <= 1 + 1e-9), (n, loss)


def test_one_resonator_tapped_filter_subtracts_both_taps():
    """A single tapped resonator: the line between the taps is l - t_in - t_out; a layout whose
    taps leave no line between them is refused."""
    with pytest.raises(ValueError, match=r"taps\[0\] \+ taps\[1\] < lengths\[0\]"):
        Layout("tap", 0.6e-3, (0.6e-3,), (), (5e-3,), (3e-3, 2.5e-3))
    lay = Layout("tap", 0.6e-3, (0.6e-3,), (), (5e-3,), (1e-3, 1.5e-3))
    medium = Microstrip(MEDIA[0][2], False)
    els = build(
        lay.external,
        medium,
        "garg-bahl",
        lay.feed_width,
        lay.widths,
        lay.gaps,
        lay.lengths,
        lay.taps,
        np.array([10e9]),
    ).elements
    lines = [e for e in els if isinstance(e, cascade.Line)]
    assert len(lines) == 1 and float(np.asarray(lines[0].length)) == pytest.approx(2.5e-3)


@pytest.mark.parametrize(
    "stem", ["ms-alumina-8g-n9-3pct", "ms-pcb-tap-3g5-n4-2pct", "sl-ptfe-tap-1g6-n3-1pct"]
)
@pytest.mark.parametrize("free", [False, True])
def test_a_batch_of_designs_gives_each_designs_response_and_gradient(stem, free):
    """Yield centring evaluates its perturbed designs as one batch: the batch must give, design
    by design, what one design alone gives (S and the exact gradient)."""
    from refine import load_problem, seed
    from refine.circuit.model import strip_model_for
    from refine.circuit.response import strip_medium_for
    from refine.optimise.minimax import optimiser_grid

    p = load_problem(ROOT / "problems" / f"{stem}.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        lay = seed(p).strip_realisation.layout
    f = optimiser_grid(p.mask, lay.order)
    m = strip_model_for(strip_medium_for(p), p.gap_model, p.z_ref, lay, f, free)
    x = m.vector(lay)
    batch = x * (1 + 0.01 * np.random.default_rng(1).standard_normal((4, x.size)))
    rb = m.response(batch, True)
    assert rb.ds11 is not None and rb.ds21 is not None
    assert rb.s11.shape == (4, f.size) and rb.ds11.shape == (4, x.size, f.size)
    for b in range(4):
        r = m.response(batch[b], True)
        assert r.ds11 is not None and r.ds21 is not None
        np.testing.assert_allclose(rb.s11[b], r.s11, rtol=0, atol=1e-13)
        np.testing.assert_allclose(rb.s21[b], r.s21, rtol=0, atol=1e-13)
        np.testing.assert_allclose(rb.ds11[b], r.ds11, rtol=0, atol=1e-12 * np.abs(r.ds11).max())
        np.testing.assert_allclose(rb.ds21[b], r.ds21, rtol=0, atol=1e-12 * np.abs(r.ds21).max())


def test_per_design_adjustments_need_a_batch_and_alike_offsets():
    from refine.circuit.builder import Adjustments, per_design

    med = Microstrip(Substrate(9.8, 0.635e-3))
    one = Adjustments(c_series_factors=(1.1, 1.1), c_shunt_factor=0.9)
    adj = per_design([None, one])
    assert adj.c_series_factors.shape == (2, 2) and list(adj.c_shunt_factor) == [1.0, 0.9]
    with pytest.raises(ValueError, match="batch of designs"):
        build("gap", med, "garg-bahl", 0.6e-3, [0.6e-3], [0.1e-3] * 2, [5e-3], None, [1e10], adj)
    with pytest.raises(ValueError, match="loss_factor must be the same"):
        per_design([Adjustments(loss_factor=2.0), None])
    with pytest.raises(ValueError, match="different lengths"):
        per_design([Adjustments(c_series_factors=(1.0,)), one])


def test_line_factors_scale_the_phase_constant_by_the_root_and_the_impedance_as_given():
    """An uncertainty corner's line factors: ε_eff × k_e puts β × sqrt(k_e) on every line (the
    attenuation is the loss factor's), z_c × k_z; per-design factors give each design of a
    batch its own lines, the same as that design built alone."""
    from refine.circuit.builder import Adjustments, line_properties, per_design

    med = Microstrip(Substrate(9.8, 0.635e-3, 4e-6, 1e-4, 4.1e7))
    f = np.linspace(8e9, 12e9, 5)
    g0, z0 = line_properties(med, 0.6e-3, f)
    g1, z1 = line_properties(med, 0.6e-3, f, Adjustments(eps_eff_factor=1.01, z0_factor=0.98))
    np.testing.assert_allclose(g1.imag, g0.imag * np.sqrt(1.01), rtol=1e-14)
    np.testing.assert_allclose(g1.real, g0.real, rtol=1e-14)
    np.testing.assert_allclose(z1, 0.98 * z0, rtol=1e-14)
    corner = Adjustments(eps_eff_factor=1.005, z0_factor=1.0075)
    both = per_design([None, corner])
    args = (0.6e-3, [[0.6e-3] * 3] * 2, [[0.1e-3, 0.3e-3, 0.3e-3, 0.1e-3]] * 2, [[5e-3] * 3] * 2)
    batch = cascade.s11_s21(build("gap", med, "garg-bahl", *args, None, f, both).elements, f, 50.0)
    for k, adj in enumerate((None, corner)):
        alone = build("gap", med, "garg-bahl", 0.6e-3, *(a[0] for a in args[1:]), None, f, adj)
        t = cascade.s11_s21(alone.elements, f, 50.0)
        np.testing.assert_allclose(batch.s21[k], t.s21, rtol=0, atol=1e-13)
    assert np.abs(batch.s21[0] - batch.s21[1]).max() > 1e-3  # the corner does move the response
