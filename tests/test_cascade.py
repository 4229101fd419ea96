"""Cascade engine: agreement with scikit-rf, facts of the trade, contracts, gradients."""

import numpy as np
import pytest
from conftest import ROOT
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.constants import c as C0
from skrf import Frequency
from skrf.media import DefinedGammaZ0

from refine.circuit import builder, cascade
from refine.physics import IdealTEM
from refine.synthesis import inverters as synthesis


def _skrf_chain(d, f):
    """The same ideal filter assembled from scikit-rf's own line and series-capacitor networks."""
    freq = Frequency.from_f(f, unit="Hz")
    tem = DefinedGammaZ0(frequency=freq, z0=d.z_ref, gamma=1j * 2 * np.pi * freq.f / C0)
    ntw = tem.capacitor(d.capacitance[0])
    for th, cap in zip(d.theta, d.capacitance[1:], strict=True):
        length = th * C0 / (2 * np.pi * d.f0)
        ntw = ntw ** tem.line(length, unit="m") ** tem.capacitor(cap)
    return ntw.s


@pytest.mark.parametrize(
    ("order", "ripple", "fbw"), [(3, 0.5, 0.10), (5, 0.1, 0.05), (8, 0.01, 0.2)]
)
def test_ideal_filter_equals_scikit_rf_chain(order, ripple, fbw):
    # Outside reference: scikit-rf's DefinedGammaZ0 line and capacitor networks, cascaded with
    # its own ** operator, over 0.5–5 GHz (includes the spurious band near 2 f0 = 4 GHz).
    d = synthesis.design("chebyshev", order, 2.0e9, fbw, 50.0, ripple)
    f = np.linspace(0.5e9, 5e9, 901)
    ours = synthesis.ideal_response(d, f)
    theirs = _skrf_chain(d, f)
    np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-9)


def test_half_wave_open_resonator_slope_is_pi_over_two_y0():
    # A half-wave open-circuited line has susceptance slope b = (ω0/2) dB/dω = Y0 π/2 at its
    # resonance. Common practice, no source (Matthaei, Young & Jones 1964 §5.08 tabulate it).
    z_c, f0 = 50.0, 3e9
    med = IdealTEM(z_c)
    length = med.length_for_angle(np.pi, f0)
    h = 1e-6 * f0
    f = np.array([f0 - h, f0, f0 + h])
    gamma, zc = med.line_properties(f)
    m = cascade.chain_abcd([cascade.Line(gamma, zc, length)], f)
    y_in = m.c / m.a  # far end open: I2 = 0 -> Y_in = C/A
    assert abs(y_in[1]) < 1e-12
    slope = (f0 / 2) * (y_in[2].imag - y_in[0].imag) / (2 * h)
    assert slope == pytest.approx(np.pi / 2 / z_c, rel=1e-8)


def test_batched_evaluation_equals_loop():
    rng = np.random.default_rng(1)
    d = synthesis.design("chebyshev", 5, 2e9, 0.1, 50.0, 0.1)
    caps = np.array(d.capacitance) * rng.uniform(0.8, 1.2, (7, 6))
    thetas = np.array(d.theta) * rng.uniform(0.95, 1.05, (7, 5))
    f = np.linspace(1e9, 3e9, 301)
    batched = cascade.s_parameters(builder.ideal_elements(caps, thetas, d.f0, 50.0, f), f, 50.0)
    assert batched.shape == (7, 301, 2, 2)
    for k in range(7):
        single = cascade.s_parameters(
            builder.ideal_elements(caps[k], thetas[k], d.f0, 50.0, f), f, 50.0
        )
        np.testing.assert_allclose(batched[k], single, rtol=1e-13, atol=1e-15)


def _random_lossless_chain(draw_vals, f):
    """A chain of every element kind with values from ``draw_vals``: all lossless."""
    gamma = 1j * 2 * np.pi * f / C0 * draw_vals[0]
    zc = np.full(f.shape, draw_vals[1] + 0j)
    return [
        cascade.SeriesCapacitor(draw_vals[2] * 1e-12),
        cascade.Line(gamma, zc, draw_vals[3]),
        cascade.PiNetwork(draw_vals[4] * 1e-12, draw_vals[5] * 1e-12, draw_vals[6] * 1e-12),
        cascade.ShuntOpenStub(gamma, zc, draw_vals[7]),
        cascade.ShuntCapacitor(draw_vals[5] * 1e-12),
        cascade.Line(gamma, zc * 1.7, draw_vals[3] * 0.3),
    ]


_vals = st.tuples(
    st.floats(1.0, 10.0),  # sqrt(eps_eff)
    st.floats(10.0, 150.0),  # z_c
    st.floats(0.01, 5.0),  # C (pF)
    st.floats(1e-3, 0.1),  # length (m)
    st.floats(0.01, 5.0),
    st.floats(0.0, 2.0),
    st.floats(0.0, 2.0),
    st.floats(1e-3, 0.05),
)


@settings(max_examples=60, deadline=None)
@given(_vals)
def test_lossless_chain_is_passive_reciprocal_unitary(vals):
    # Common practice, no source: a lossless reciprocal two-port has S = Sᵀ and S^H S = I.
    f = np.linspace(0.3e9, 12e9, 57)
    s = cascade.s_parameters(_random_lossless_chain(vals, f), f, 50.0)
    assert np.all(np.isfinite(s))
    np.testing.assert_allclose(s[:, 0, 1], s[:, 1, 0], rtol=1e-9, atol=1e-12)
    eye = np.einsum("fji,fjk->fik", s.conj(), s)
    np.testing.assert_allclose(eye, np.broadcast_to(np.eye(2), eye.shape), atol=1e-8)


def test_lossy_line_is_strictly_passive():
    f = np.linspace(1e9, 3e9, 11)
    gamma = 0.5 + 1j * 2 * np.pi * f / C0
    s = cascade.s_parameters([cascade.Line(gamma, np.full(f.shape, 60 - 2j), 0.2)], f, 50.0)
    power = np.sum(np.abs(s) ** 2, axis=-2)  # column sums: power out per unit power in
    assert np.all(power < 1.0)


def test_a_very_long_lossy_line_transmits_nothing_and_stays_finite():
    # alpha * l = 2000 Np: exp overflows at about 710 Np; the engine holds each element at
    # MAX_NEPERS, so S21 is "nothing" (< -250 dB) and every figure stays finite and passive
    f = np.linspace(1e9, 3e9, 11)
    gamma = 20.0 + 1j * 2 * np.pi * f / C0
    for els in (
        [cascade.Line(gamma, np.full(f.shape, 50.0 + 0j), 100.0)],
        [cascade.SeriesCapacitor(1e-12), cascade.Line(gamma, np.full(f.shape, 50.0), 100.0)] * 3,
        [cascade.ShuntOpenStub(gamma, np.full(f.shape, 50.0), 100.0)],
    ):
        s = cascade.s_parameters(els, f, 50.0)
        assert np.all(np.isfinite(s))
        power = np.sum(np.abs(s) ** 2, axis=-2)
        assert np.all(power <= 1.0 + 1e-9)
        if not isinstance(els[0], cascade.ShuntOpenStub):
            assert np.all(np.abs(s[:, 1, 0]) < 10 ** (-250 / 20))
        g = cascade.s11_s21_gradient(els, f, 50.0)
        assert all(np.all(np.isfinite(v)) for d in g.ds21 for v in d.values())


def _fd_check(build, params, f, rel=1e-5):
    """Compare the analytic gradient with central finite differences for each named parameter."""
    base = build(params)
    g = cascade.s11_s21_gradient(base, f, 50.0)
    for (i, name), value in params.items():
        h = 1e-6 * abs(value) if np.isscalar(value) else None
        up = dict(params)
        dn = dict(params)
        up[(i, name)] = value + h
        dn[(i, name)] = value - h
        t_up = cascade.s11_s21(build(up), f, 50.0)
        t_dn = cascade.s11_s21(build(dn), f, 50.0)
        for ours, p, m in (
            (g.ds21[i][name], t_up.s21, t_dn.s21),
            (g.ds11[i][name], t_up.s11, t_dn.s11),
        ):
            fd = (p - m) / (2 * h)
            scale = np.max(np.abs(fd)) + 1e-30
            np.testing.assert_allclose(ours, fd, rtol=0, atol=rel * scale, err_msg=f"{i}:{name}")


def test_gradient_matches_finite_differences_for_every_element_kind():
    f = np.linspace(1.5e9, 2.5e9, 41)
    gamma = (0.3 + 1j * 2 * np.pi * f / C0 * 1.6) * np.ones_like(f)
    zc = np.full(f.shape, 48.0 - 0.5j)

    def build(p):
        return [
            cascade.SeriesCapacitor(p[(0, "capacitance")]),
            cascade.Line(gamma, zc, p[(1, "length")]),
            cascade.PiNetwork(p[(2, "c_series")], p[(2, "c_shunt_in")], p[(2, "c_shunt_out")]),
            cascade.ShuntOpenStub(gamma, zc, p[(3, "length")]),
            cascade.ShuntCapacitor(p[(4, "capacitance")]),
            cascade.Line(gamma, zc, p[(5, "length")]),
            cascade.SeriesCapacitor(p[(6, "capacitance")]),
        ]

    params = {
        (0, "capacitance"): 0.5e-12,
        (1, "length"): 0.045,
        (2, "c_series"): 0.12e-12,
        (2, "c_shunt_in"): 0.03e-12,
        (2, "c_shunt_out"): 0.05e-12,
        (3, "length"): 0.011,
        (4, "capacitance"): 0.2e-12,
        (5, "length"): 0.05,
        (6, "capacitance"): 0.6e-12,
    }
    _fd_check(build, params, f)


def test_gradient_with_respect_to_gamma_and_zc():
    f = np.linspace(1.5e9, 2.5e9, 5)
    beta = 2 * np.pi * f / C0 * 1.6
    g0 = 0.2 + 1j * beta

    def s21_for(gamma, zc):
        els = [
            cascade.SeriesCapacitor(0.4e-12),
            cascade.Line(gamma, zc, 0.05),
            cascade.SeriesCapacitor(0.3e-12),
        ]
        return cascade.s11_s21(els, f, 50.0).s21

    els = [
        cascade.SeriesCapacitor(0.4e-12),
        cascade.Line(g0, np.full(5, 52.0 + 0j), 0.05),
        cascade.SeriesCapacitor(0.3e-12),
    ]
    g = cascade.s11_s21_gradient(els, f, 50.0)
    h = 1e-4
    fd_gamma = (s21_for(g0 + h, 52.0) - s21_for(g0 - h, 52.0)) / (2 * h)  # holomorphic in gamma
    np.testing.assert_allclose(g.ds21[1]["gamma"], fd_gamma, rtol=1e-6)
    fd_zc = (s21_for(g0, 52.0 + 1e-4) - s21_for(g0, 52.0 - 1e-4)) / 2e-4
    np.testing.assert_allclose(g.ds21[1]["z_c"], fd_zc, rtol=1e-6)


def test_gradient_values_equal_plain_evaluation():
    d = synthesis.design("chebyshev", 4, 2e9, 0.1, 50.0, 0.5)
    f = np.linspace(1.5e9, 2.5e9, 31)
    els = builder.ideal_elements(d.capacitance, d.theta, d.f0, 50.0, f)
    g = cascade.s11_s21_gradient(els, f, 50.0)
    s = cascade.s_parameters(els, f, 50.0)
    np.testing.assert_allclose(g.s11, s[:, 0, 0], rtol=1e-12)
    np.testing.assert_allclose(g.s21, s[:, 1, 0], rtol=1e-12)


def test_element_matrices_chain_equals_engine():
    d = synthesis.design("chebyshev", 3, 2e9, 0.1, 50.0, 0.5)
    f = np.linspace(1.5e9, 2.5e9, 21)
    els = builder.ideal_elements(d.capacitance, d.theta, d.f0, 50.0, f)
    m = np.broadcast_to(np.eye(2, dtype=complex), (21, 2, 2))
    for e in els:
        m = m @ cascade.element_matrices(e, f)
    ours = cascade.chain_abcd(els, f)
    np.testing.assert_allclose(m[:, 0, 0], ours.a, rtol=1e-12)
    np.testing.assert_allclose(m[:, 1, 0], ours.c, rtol=1e-12)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (
            lambda: cascade.s_parameters([cascade.SeriesCapacitor(1e-12)], [1e9, -1.0], 50.0),
            "f must be > 0 everywhere, got -1",
        ),
        (
            lambda: cascade.s_parameters([cascade.SeriesCapacitor(1e-12)], [np.nan], 50.0),
            "f must be finite everywhere, got nan",
        ),
        (
            lambda: cascade.s_parameters([cascade.SeriesCapacitor(1e-12)], [1e9], 0.0),
            "z_ref = 0 is outside the allowed range (0, inf)",
        ),
        (lambda: cascade.s_parameters([], [1e9], 50.0), "elements must hold at least one element"),
        (
            lambda: cascade.s_parameters([3.0], [1e9], 50.0),
            "elements[0] = 3.0 is not a cascade element",
        ),
        (
            lambda: cascade.s_parameters([cascade.SeriesCapacitor(1e-12)], [[1e9]], 50.0),
            "f must be a non-empty 1-D array",
        ),
    ],
)
def test_bad_input(call, message):
    with pytest.raises(ValueError) as exc:
        call()
    assert message in str(exc.value)


def test_group_delay_of_a_matched_line_is_its_length_over_the_phase_velocity():
    # a matched lossless TEM line: S21 = exp(-j beta l), so tau = l sqrt(eps_r) / c exactly
    # (common practice, no source)
    f = np.linspace(1e9, 10e9, 7)
    eps_r, length = 2.2, 0.037

    def line(g):
        beta = 2 * np.pi * g * np.sqrt(eps_r) / C0
        return [cascade.Line(1j * beta, np.full(g.shape, 50.0 + 0j), length)]

    tau = cascade.group_delay(line, f, 50.0)
    np.testing.assert_allclose(tau, length * np.sqrt(eps_r) / C0, rtol=1e-9)


def test_group_delay_matches_the_phase_slope_of_a_dispersive_filter():
    # the chain-rule derivative against central differences of the unwrapped phase on a fine
    # grid (where unwrapping is safe): they agree to the differences' own error
    import warnings

    from refine import design, load_problem
    from refine.circuit.response import layout_group_delay, layout_response, strip_medium_for

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        p = load_problem(ROOT / "problems" / "microstrip-x-band-alumina-n3.toml")
        lay = design(p).layout
        med = strip_medium_for(p)
        f = np.linspace(p.mask.passband_start, p.mask.passband_stop, 4001)
        tau = layout_group_delay(lay, med, p.gap_model, f, p.z_ref)
        s21 = layout_response(lay, med, p.gap_model, f, p.z_ref)[:, 1, 0]
        # on a coarse grid the exact delay is the same numbers, where differences would fail
        coarse = layout_group_delay(lay, med, p.gap_model, f[::400], p.z_ref)
    slope = -np.gradient(np.unwrap(np.angle(s21)), 2 * np.pi * f)
    np.testing.assert_allclose(tau[1:-1], slope[1:-1], rtol=1e-5)
    np.testing.assert_allclose(coarse, tau[::400], rtol=1e-12)
