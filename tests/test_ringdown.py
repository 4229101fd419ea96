"""Continuing a field solve's ring-down past the end of its record (refine.fullwave.ringdown).

The signals here are made up (damped sinusoids of our own choosing, like a three-pole filter's
port signal after the pulse); the checks are exact properties: a record that ends early and is
continued must transform like the whole record.
"""

from __future__ import annotations

import numpy as np
import pytest

from refine.fullwave import geometry, ringdown, solve
from refine.physics.substrate import Substrate

DT = 1.5e-11  # s, a typical probe interval of the engine at 12 GHz
POLES = ((9.8e9, 2.0e-9, 1.0, 0.3), (10.0e9, 1.0e-9, 0.7, 1.1), (10.2e9, 2.5e-9, 0.5, -0.4))


def ringing(t: np.ndarray) -> np.ndarray:
    """Three damped sinusoids (frequency, decay time, amplitude, phase)."""
    return sum(a * np.exp(-t / tau) * np.cos(2 * np.pi * fr * t + ph) for fr, tau, a, ph in POLES)


T = np.arange(40_000) * DT  # 600 ns: every pole has decayed by more than 100 time constants
F = np.linspace(9e9, 11e9, 81)


def test_the_spectrum_is_the_engines_single_sided_pulse_convention():
    """2 Δt Σ y_n exp(-j2πf t_n); for one sampled exponential the infinite sum is a geometric
    series, which a long record must reproduce."""
    z = np.exp((-1 / 2e-9 + 2j * np.pi * 10e9) * DT)
    y = np.real(z ** np.arange(T.size))
    q = np.exp(-2j * np.pi * F * DT)
    exact = 2 * DT * 0.5 * (1 / (1 - z * q) + 1 / (1 - np.conj(z) * q))
    np.testing.assert_allclose(ringdown.record_spectrum(T, y, F), exact, rtol=1e-9)


@pytest.mark.parametrize("cut", [3e-9, 5e-9, 8e-9])
def test_a_record_cut_early_and_continued_transforms_like_the_whole_record(cut):
    rng = np.random.default_rng(1)
    y = ringing(T) + 1e-7 * rng.standard_normal(T.size)  # the engine's single-precision noise
    whole = ringdown.record_spectrum(T, y, F)
    keep = T <= cut
    cont = ringdown.continued_spectrum(T[keep], y[keep], F, fit_from=0.4 * cut)
    cut_only = ringdown.record_spectrum(T[keep], y[keep], F)
    peak = np.abs(whole).max()
    error = np.abs(cont.spectrum - whole).max() / peak
    assert error < 1e-4
    assert np.abs(cut_only - whole).max() / peak > 1e-2  # the cut alone is visibly wrong
    assert cont.tail.residual < 1e-5 and np.all(np.abs(cont.tail.poles) < 1)
    # the continuation's own check (a shorter window's) is not far below its real error
    assert cont.check < ringdown.CHECK_LIMIT and cont.check > 0.01 * error


def test_a_continuation_that_cannot_be_checked_says_so():
    t = np.arange(100) * DT
    cont = ringdown.continued_spectrum(t, ringing(t), F, fit_from=t[60])  # 40 samples
    assert cont.check == np.inf  # two thirds of the window are too few to fit again


def test_growing_or_empty_records_give_no_tail_and_no_nan():
    t = np.arange(300) * DT
    grow = ringdown.fit_tail(t, 1.001 ** np.arange(300), fit_from=0.0)
    assert grow.poles.size == 0
    zero = ringdown.fit_tail(t, np.zeros(300), fit_from=0.0)
    assert zero.poles.size == 0 and zero.level == 0.0
    for tail in (grow, zero):
        spec = ringdown.tail_spectrum(tail, F)
        assert np.all(spec == 0)


def test_a_window_too_short_to_fit_is_refused_with_the_counts():
    t = np.arange(100) * DT
    with pytest.raises(ValueError, match=r"ring-down fit: 10 samples after .* need at least 30"):
        ringdown.fit_tail(t, np.ones(100), fit_from=t[90])


def _fake_runs(st: geometry.Structure) -> solve.Runs:
    """A mirror-symmetric two-port's engine runs, built from made-up port signals: the engine's
    spectra are the whole records' transforms, as the real engine's are."""
    ones = np.ones(F.size, complex)
    thru = {"zc1": 50 * ones, "zc2": 50 * ones, "beta1": 300 * ones, "beta2": 300 * ones}
    thru |= {"seconds": np.array(1.0), "engine": np.array("fake")}
    ex: dict = {"seconds": np.array(1.0), "tail1": np.array(0.0)}
    shapes = {"v1": (1.0, 0.0), "i1": (0.02, 0.4), "v2": (0.6, 1.3), "i2": (-0.012, 2.0)}
    for key, (amp, ph) in shapes.items():
        y = amp * ringing(T + ph * 1e-10)
        ex[key] = ringdown.record_spectrum(T, y, F)
        ex[f"t{key[0]}{key[1]}"] = T
        ex[f"y{key[0]}{key[1]}"] = y
    for p, fd in enumerate(st.feeds, start=1):
        ex[f"meas{p}"] = np.array(fd.ref)
    mesh = geometry.build_mesh(st, Substrate(9.8, 0.635e-3), 11e9, geometry.MESHES["coarse"])
    return solve.Runs(thru, [ex], 0.0, mesh)


@pytest.mark.filterwarnings("ignore::refine.fullwave.solve.FieldSolveWarning")  # made-up signals
def test_two_port_from_a_cut_record_continued_matches_the_whole_record():
    st = geometry.gap_structure(0.6e-3, 0.1e-3, 3e-3)
    runs = _fake_runs(st)
    res = geometry.MESHES["coarse"]
    whole = solve.two_port(st, F, 50.0, res, runs)
    assert whole.ringdown_check is None
    again = solve.two_port(st, F, 50.0, res, runs, fit_from=0.0)
    np.testing.assert_allclose(again.s, whole.s, atol=1e-8)  # nothing left to continue
    cont = solve.two_port(st, F, 50.0, res, runs, fit_from=1e-9, cut=3e-9)
    cut = solve.two_port(st, F, 50.0, res, runs, cut=3e-9)
    assert np.abs(cont.s - whole.s).max() < 1e-4
    assert np.abs(cut.s - whole.s).max() > 1e-2
    assert cont.ringdown_check is not None and cont.ringdown_check < 1e-3
