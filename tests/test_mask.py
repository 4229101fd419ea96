"""Masks: design → evaluate → assert the mask holds → pin numbers; constraint Jacobian; bad input."""

import numpy as np
import pytest

from refine.circuit import builder, cascade
from refine.spec.mask import Mask, Stopband
from refine.synthesis import inverters as synthesis
from refine.synthesis import prototype


@pytest.fixture(scope="module")
def n4():
    # Closed-form N = 4, 0.5 dB, 2 GHz, 10 % (Pozar 4th ed. §8.8 spec with N = 4).
    return synthesis.design("chebyshev", 4, 2.0e9, 0.10, 50.0, 0.5)


def _mask():
    return Mask(
        passband_start=1.92e9,
        passband_stop=2.08e9,
        min_return_loss_db=9.0,
        max_ripple_db=0.6,
        max_insertion_loss_db=0.6,
        stopbands=(Stopband(0.5e9, 1.8e9, 30.0), Stopband(2.25e9, 3.0e9, 30.0)),
    )


def test_closed_form_n4_meets_a_mask_it_should(n4):
    m = _mask()
    f = m.sample(201, 201)
    s = synthesis.ideal_response(n4, f)
    res = m.evaluate(f, s[:, 0, 0], s[:, 1, 0])
    assert res.passed
    # Pinned (computed by this code, checked for plausibility against docs/references.md §2.2:
    # S21 = -34.4 dB at 1.8 GHz and -25.6 dB at 2.2 GHz). Equal-ripple return loss of 0.5 dB is
    # 9.636 dB (Chebyshev identity, common practice), so the return-loss margin is ~0.64 dB.
    assert res.worst["stopband 0.5-1.8 GHz"] == pytest.approx(34.4 - 30.0, abs=0.1)
    assert res.where["stopband 0.5-1.8 GHz"] == pytest.approx(1.8e9)
    assert res.where["stopband 2.25-3 GHz"] == pytest.approx(2.25e9)
    assert res.worst["passband return loss"] == pytest.approx(
        prototype.ripple_to_return_loss(0.5) - 9.0, abs=0.01
    )


def test_a_stricter_mask_fails_where_it_should(n4):
    m = Mask(1.92e9, 2.08e9, min_return_loss_db=15.0, stopbands=(Stopband(2.2e9, 3e9, 30.0),))
    f = m.sample(201, 201)
    s = synthesis.ideal_response(n4, f)
    res = m.evaluate(f, s[:, 0, 0], s[:, 1, 0])
    assert not res.passed
    assert res.worst["passband return loss"] < 0 and res.worst["stopband 2.2-3 GHz"] < 0
    assert res.worst["stopband 2.2-3 GHz"] == pytest.approx(25.6 - 30.0, abs=0.1)  # §2.2: 25.6 dB


def test_sample_has_exact_edges_and_avoids_dc():
    m = Mask(1.9e9, 2.1e9, min_return_loss_db=10, stopbands=(Stopband(0.0, 1.5e9, 20),))
    f = m.sample(11, 11)
    for edge in (1.9e9, 2.1e9, 2.0e9, 1.5e9):
        assert np.any(f == edge)
    assert f.min() == pytest.approx(1.5e6) and np.all(np.diff(f) > 0)


def test_constraint_jacobian_matches_finite_differences(n4):
    m = _mask()
    f = m.sample(31, 21)
    caps = np.array(n4.capacitance) * 1.03
    th = np.array(n4.theta) * 0.99

    def g_of(x):
        els = builder.ideal_elements(x[:5], x[5:], n4.f0, 50.0, f)
        t = cascade.s11_s21(els, f, 50.0)
        return m.constraints(f, t.s11, t.s21)[0]

    x0 = np.concatenate([caps, th])
    els = builder.ideal_elements(caps, th, n4.f0, 50.0, f)
    gr = cascade.s11_s21_gradient(els, f, 50.0)
    # element order: C, line, C, line, ..., C; d/dθ = d/dlength · dlength/dθ
    dl_dth = 1.0 / (2 * np.pi * n4.f0 / 299792458.0)
    ds11 = [gr.ds11[2 * i]["capacitance"] for i in range(5)] + [
        gr.ds11[2 * i + 1]["length"] * dl_dth for i in range(4)
    ]
    ds21 = [gr.ds21[2 * i]["capacitance"] for i in range(5)] + [
        gr.ds21[2 * i + 1]["length"] * dl_dth for i in range(4)
    ]
    g, jac = m.constraints(f, gr.s11, gr.s21, np.array(ds11), np.array(ds21))
    np.testing.assert_allclose(g, g_of(x0), rtol=1e-12)
    for k in range(9):
        h = 1e-6 * x0[k]
        xp, xm = x0.copy(), x0.copy()
        xp[k] += h
        xm[k] -= h
        fd = (g_of(xp) - g_of(xm)) / (2 * h)
        np.testing.assert_allclose(jac[:, k], fd, rtol=1e-4, atol=1e-5 * np.max(np.abs(fd)))


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        (
            dict(passband_stop=1.8e9),
            "passband_stop = 1.8e+09 Hz must be above passband_start = 1.9e+09 Hz",
        ),
        (dict(min_return_loss_db=None), "mask needs at least one passband requirement"),
        (
            dict(min_return_loss_db=-3),
            "min_return_loss_db = -3 is outside the allowed range (0, inf)",
        ),
        (
            dict(stopbands=(Stopband(2.0e9, 2.5e9, 20),)),
            "stopband 2-2.5 GHz overlaps the passband 1.9-2.1 GHz",
        ),
    ],
)
def test_mask_bad_input(kwargs, message):
    args = dict(passband_start=1.9e9, passband_stop=2.1e9, min_return_loss_db=10.0) | kwargs
    with pytest.raises(ValueError) as exc:
        Mask(**args)
    assert message in str(exc.value)


def test_stopband_bad_input():
    with pytest.raises(
        ValueError, match=r"stopband.stop = 1e\+09 Hz must be above stopband.start = 2e\+09 Hz"
    ):
        Stopband(2e9, 1e9, 20)
    with pytest.raises(
        ValueError, match=r"stopband.rejection_db = 0 is outside the allowed range \(0, inf\)"
    ):
        Stopband(1e9, 2e9, 0)


def test_grid_without_points_in_a_region_is_refused():
    m = Mask(1.9e9, 2.1e9, min_return_loss_db=10.0, stopbands=(Stopband(3e9, 4e9, 20),))
    with pytest.raises(ValueError, match="no point in the mask region 'stopband 3-4 GHz'"):
        m.margins(np.array([2.0e9]), np.array([0.1]), np.array([0.9]))
