"""Realisation and layout circuits: exactness at f0, honest fab shortfalls, agreement with a
chain built from scikit-rf's microstrip line and capacitor networks."""

import warnings

import numpy as np
import pytest
from skrf import Frequency
from skrf.media import DefinedGammaZ0, MLine

from refine.circuit.builder import build
from refine.circuit.layout import Layout
from refine.circuit.response import layout_response
from refine.physics.microstrip import Microstrip
from refine.physics.strip import gap_capacitances
from refine.physics.stripline import Stripline
from refine.physics.substrate import Substrate
from refine.spec.fab import FabRules
from refine.synthesis import inverters as synthesis
from refine.synthesis.realise import realise
from refine.validity import ModelRangeWarning

ALUMINA = Substrate(9.8, 0.635e-3)
PTFE_STRIP = Substrate(2.2, 1.6e-3)


def _quiet():
    w = warnings.catch_warnings()
    w.__enter__()
    warnings.simplefilter("ignore", ModelRangeWarning)
    return w


@pytest.mark.parametrize(
    ("medium", "model"),
    [
        (Microstrip(ALUMINA, loss=False), "garg-bahl"),
        (Microstrip(ALUMINA, loss=False), "kirschning-jansen-koster"),
        (Stripline(PTFE_STRIP, loss=False), "altschuler-oliner"),
    ],
)
@pytest.mark.parametrize("order", [2, 3, 5])
def test_realised_layout_is_exact_at_f0(medium, model, order):
    # The seed must reproduce the closed-form design exactly at f0 on the lossless physical
    # model: a perfect match there (the J-inverter design is exact at the centre frequency).
    d = synthesis.design("chebyshev", order, 10e9, 0.02, 50.0, 0.1)
    w = _quiet()
    try:
        r = realise(d, medium, None, model)
        s = layout_response(r.layout, medium, model, np.array([10e9]), 50.0)
    finally:
        w.__exit__(None, None, None)
    if all(g.gap_required is not None for g in r.gaps):
        # odd order: a reflection zero at f0; even order: the ripple trough, |S11|² = 1 - 10^(-L_Ar/10)
        expect = 0.0 if order % 2 else np.sqrt(1 - 10 ** (-0.1 / 10))
        assert abs(s[0, 0, 0]) == pytest.approx(expect, abs=1e-9)
        for g in r.gaps:
            assert g.j_achieved == pytest.approx(g.j_target, rel=1e-8)
    else:  # a model that cannot couple strongly enough must say so, gap by gap
        assert not r.feasible and any("needs a stronger coupling" in n for n in r.notes)


def test_lengths_absorb_the_gap_shunt_capacitance():
    # With the shunt capacitances counted, resonators come out shorter than θ/β of the series-C
    # design would give (the open-end fringing lengthens them electrically). Common practice.
    d = synthesis.design("chebyshev", 3, 10e9, 0.03, 50.0, 0.1)
    med = Microstrip(ALUMINA, loss=False)
    w = _quiet()
    try:
        r = realise(d, med, None, "garg-bahl")
    finally:
        w.__exit__(None, None, None)
    beta = float(med.electrical_length(r.layout.widths[0], 1.0, 10e9))
    naive = np.array(d.theta) / beta
    assert np.all(np.array(r.layout.lengths) < naive)


def test_min_gap_shortfall_is_recorded_not_hidden():
    d = synthesis.design("chebyshev", 3, 10e9, 0.03, 50.0, 0.1)
    med = Microstrip(ALUMINA)
    w = _quiet()
    try:
        r = realise(d, med, FabRules(min_gap=60e-6), "garg-bahl")
    finally:
        w.__exit__(None, None, None)
    end = r.gaps[0]
    assert end.limited and end.gap == pytest.approx(60e-6) and end.gap_required < 60e-6
    assert 0 < end.coupling_shortfall < 1 and end.j_achieved < end.j_target
    assert any("gap 0: needs" in n and "the shop's minimum is 60.0 um" in n for n in r.notes)
    inner = r.gaps[1]
    assert not inner.limited and inner.gap == inner.gap_required
    assert not r.feasible
    assert all(g >= 60e-6 for g in r.layout.gaps)  # no layout below the shop's minimum


def test_range_report_names_dimensions():
    d = synthesis.design("chebyshev", 3, 10e9, 0.03, 50.0, 0.1)
    w = _quiet()
    try:
        r = realise(d, Microstrip(ALUMINA), FabRules(min_gap=15e-6), "garg-bahl")
    finally:
        w.__exit__(None, None, None)
    s0 = r.layout.gaps[0] * 1e6
    assert (
        f"gap 0 (s = {s0:.1f} um): Garg-Bahl gap: s/W = 0.0488 is outside its validity range [0.1, 1]"
        in r.range_notes
    )


def test_layout_circuit_equals_scikit_rf_chain():
    # Outside reference: the same layout assembled in scikit-rf from its MLine (HJ + KJ
    # dispersion) lines and capacitor networks renormalised to 50 ohm; lossless.
    f = np.linspace(8e9, 12e9, 201)
    lay = Layout(
        "gap", 0.6e-3, (0.6e-3,) * 3, (40e-6, 400e-6, 400e-6, 40e-6), (5.2e-3, 5.3e-3, 5.2e-3)
    )
    med = Microstrip(ALUMINA, loss=False)
    w = _quiet()
    try:
        ours = layout_response(lay, med, "garg-bahl", f, 50.0)
        caps = [gap_capacitances(med, "garg-bahl", 0.6e-3, 0.6e-3, s) for s in lay.gaps]
    finally:
        w.__exit__(None, None, None)
    freq = Frequency.from_f(f, unit="Hz")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ms = MLine(
            frequency=freq,
            z0_port=50,
            w=0.6e-3,
            h=0.635e-3,
            t=None,
            ep_r=9.8,
            rho=1.7e-8,
            tand=0,
            rough=0,
            diel="frequencyinvariant",
        )
        lumped = DefinedGammaZ0(frequency=freq, z0=50)

        def pi(c):
            return (
                lumped.shunt_capacitor(float(c.c_shunt_in))
                ** lumped.capacitor(float(c.c_series))
                ** lumped.shunt_capacitor(float(c.c_shunt_out))
            )

        ntw = pi(caps[0])
        for length, c in zip(lay.lengths, caps[1:], strict=True):
            ntw = ntw ** ms.line(length, unit="m") ** pi(c)
    np.testing.assert_allclose(ours, ntw.s, atol=1e-7)


def test_batched_layouts_equal_single():
    med = Microstrip(Substrate(9.8, 0.635e-3, 5e-6, 1e-4, 4.1e7))
    f = np.linspace(9e9, 11e9, 51)
    rng = np.random.default_rng(3)
    widths = 0.6e-3 + rng.normal(0, 5e-6, (4, 3))
    gaps = np.array([40e-6, 400e-6, 400e-6, 40e-6]) + rng.normal(0, 2e-6, (4, 4))
    lengths = np.array([5.2e-3, 5.3e-3, 5.2e-3]) + rng.normal(0, 5e-6, (4, 3))
    feed = 0.6e-3 + rng.normal(0, 5e-6, 4)
    w = _quiet()
    try:
        from refine.circuit import cascade

        batch = cascade.s_parameters(
            build("gap", med, "garg-bahl", feed, widths, gaps, lengths, None, f).elements, f, 50.0
        )
        for k in range(4):
            one = cascade.s_parameters(
                build(
                    "gap", med, "garg-bahl", feed[k], widths[k], gaps[k], lengths[k], None, f
                ).elements,
                f,
                50.0,
            )
            np.testing.assert_allclose(batch[k], one, rtol=1e-12, atol=1e-14)
    finally:
        w.__exit__(None, None, None)


def test_lossy_layout_is_passive_and_reciprocal():
    med = Microstrip(Substrate(3.55, 0.508e-3, 17.5e-6, 0.0027, 5.8e7, 0.5e-6))
    lay = Layout("gap", 1.1e-3, (1.1e-3,) * 2, (100e-6, 300e-6, 100e-6), (15e-3, 15e-3))
    f = np.linspace(1e9, 15e9, 301)
    w = _quiet()
    try:
        s = layout_response(lay, med, "garg-bahl", f, 50.0)
    finally:
        w.__exit__(None, None, None)
    np.testing.assert_allclose(s[:, 0, 1], s[:, 1, 0], rtol=1e-12)
    assert np.all(np.abs(s[:, 0, 0]) ** 2 + np.abs(s[:, 1, 0]) ** 2 < 1.0)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        (dict(gaps=(1e-4,) * 3), "layout with gap coupling and 3 resonators needs 4 gaps, got 3"),
        (
            dict(lengths=(1e-3,) * 2),
            "layout needs one length per resonator: 3 widths and 2 lengths",
        ),
        (dict(feed_width=0.0), "layout.feed_width = 0 is outside the allowed range (0, inf)"),
        (
            dict(gaps=(1e-4, -1e-4, 1e-4, 1e-4)),
            "layout.gaps[1] = -0.0001 is outside the allowed range (0, inf)",
        ),
        (dict(external="probe"), "layout.external = 'probe' is not one of the allowed values"),
        (dict(taps=(1e-3, 1e-3)), "layout.taps must be None for gap coupling"),
    ],
)
def test_layout_bad_input(kwargs, message):
    args = (
        dict(
            external="gap",
            feed_width=6e-4,
            widths=(6e-4,) * 3,
            gaps=(1e-4,) * 4,
            lengths=(5e-3,) * 3,
        )
        | kwargs
    )
    with pytest.raises(ValueError) as exc:
        Layout(**args)
    assert message in str(exc.value)


def test_wrong_gap_model_for_medium():
    with pytest.raises(
        ValueError, match="gap model for stripline = 'garg-bahl' is not one of the allowed values"
    ):
        realise(
            synthesis.design("chebyshev", 3, 2e9, 0.05, 50.0, 0.1),
            Stripline(PTFE_STRIP),
            None,
            "garg-bahl",
        )
