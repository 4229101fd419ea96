"""The electrostatic solve between two ground planes (stripline): its accelerated image series,
its line capacitance against Cohn's exact zero-thickness result, its exact ε_r scaling, and its
gap and open end against their limits."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import ellipk

from refine import validity
from refine.fullwave import electrostatic as es
from refine.physics import discontinuities as dc
from refine.physics.constants import EPS0

B = 1e-3  # ground-plane spacing


def cohn_line_capacitance(w_b: float) -> float:
    # Cohn, "Characteristic impedance of the shielded-strip transmission line", IRE Trans.
    # MTT-2(2), 52-57, 1954: exact for a zero-thickness centred strip, Z0 = η0/(4 sqrt(εr))
    # K(k)/K(k'), k = sech(πW/2b) (docs/references.md §7.1), so C = 4 ε0 εr K(k')/K(k).
    k = 1.0 / math.cosh(math.pi * w_b / 2)
    kp = math.tanh(math.pi * w_b / 2)
    return 4 * EPS0 * ellipk(kp * kp) / ellipk(k * k)


def test_alternating_image_series_is_summed_to_its_limit():
    # Between two planes every image has the same magnitude of charge, so the series alternates
    # with terms falling only as 1/n; the Euler-weighted sum against a two-million-term one whose
    # last two partial sums are averaged (common practice, no source).
    where = es.Surroundings(1.0, 2.0, stripline=True)  # unit 1: image n at 2n
    rho = np.array([0.0, 0.7, 3.0, 40.0])
    got = es.image_tail(rho, where)
    n = np.arange(es.EXACT_IMAGES + 1, 2_000_001, dtype=float)
    for r, g in zip(rho, got, strict=True):
        s = np.cumsum((-1.0) ** (n - 1) / np.sqrt(r * r + (2 * n) ** 2))
        assert g == pytest.approx(0.5 * (s[-1] + s[-2]), abs=1e-9)


@pytest.mark.parametrize("w_b", [0.2, 1.0, 3.2])
def test_line_capacitance_matches_cohn_exactly(w_b):
    # Extrapolated over the three panel densities, the two-dimensional solve reproduces Cohn's
    # exact result within 3e-4 (measured: 2e-5 at W/b 0.2 and 1.0, 2e-4 at 3.2); the coarsest
    # density alone within 0.5 %.
    got = es.converged_open_end(1.0, B, w_b * B, stripline=True)["c_line"]
    exact = cohn_line_capacitance(w_b)
    assert got.value == pytest.approx(exact, rel=3e-4)
    assert got.raw[0] == pytest.approx(exact, rel=5e-3)


def test_capacitances_scale_exactly_with_eps_r():
    # A homogeneous dielectric between the planes: every capacitance is ε_r times its value in
    # air and Δl does not change (common practice, no source).
    a = es.gap(1.0, B, 0.8 * B, 0.1 * B, 0.67, stripline=True)
    b = es.gap(2.2, B, 0.8 * B, 0.1 * B, 0.67, stripline=True)
    assert b.c_series == pytest.approx(2.2 * a.c_series, rel=1e-9)
    assert b.c_shunt == pytest.approx(2.2 * a.c_shunt, rel=1e-9)


def test_wide_gap_tends_to_two_open_ends():
    # Between two planes the strips decouple exponentially (as exp(−πs/b)): at s = 2b the series
    # capacitance is a fraction of a percent of the shunt, which is the open end's excess
    # capacitance (common practice, no source).
    w = 0.8 * B
    end = es.open_end(1.0, B, w, stripline=True)
    g = es.gap(1.0, B, w, 2 * B, stripline=True)
    assert g.c_series < 0.01 * g.c_shunt
    assert g.c_shunt == pytest.approx(end.c_end, rel=0.01)


def test_open_end_tends_to_the_wide_strip_value():
    # The wide-strip open end Δl = b ln 2/π (Altschuler & Oliner 1960, from memory; docs/
    # references.md §7.5). Measured: Δl/b = 0.122, 0.179, 0.204 at W/b = 0.2, 1, 3.2 against
    # 0.2206: shorter for narrow strips, approaching the wide-strip value from below.
    wide = B * math.log(2) / math.pi
    ext = [es.open_end(1.0, B, w_b * B, stripline=True).extension for w_b in (0.2, 1.0, 3.2)]
    assert ext[0] < ext[1] < ext[2] < wide
    assert ext[2] == pytest.approx(wide, rel=0.1)


def test_series_capacitance_tends_to_the_wide_strip_closed_form():
    # The quasi-static stripline gap (Altschuler & Oliner 1960, as recalled from memory;
    # refine.physics.discontinuities.stripline_gap) is a wide-strip form scaled by the whole
    # line's Y0. Measured: the three-dimensional series capacitance is 0.44, 0.70, 0.88 and
    # 0.93 of it at W/b 0.3, 1, 3.2 and 6 (s/b 0.05): the form holds only for wide strips, and
    # reads 40 % high at W/b = 1.
    s = 0.05 * B
    ratios = []
    for w_b in (0.3, 1.0, 6.0):
        g = es.gap(1.0, B, w_b * B, s, stripline=True)
        with validity.unchecked():
            z0 = 1.0 / (g.c_line * 299_792_458.0)
            closed = dc.stripline_gap(np.array(s), B, 1.0, z0).c_series
        ratios.append(g.c_series / float(closed))
    assert ratios[0] < ratios[1] < ratios[2] < 1.0
    assert ratios[1] == pytest.approx(0.70, abs=0.04)
    assert ratios[2] > 0.88


@pytest.mark.slow
@pytest.mark.parametrize("s_b", [0.05, 0.5])
def test_series_capacitance_per_width_of_wide_strips_is_the_two_dimensional_gaps(s_b):
    # A gap across a strip much wider than b is, away from the strip's two edges, the
    # two-dimensional gap between two half-planes midway between the ground planes, whose
    # series capacitance per width is (2 ε0 εr/π) ln coth(π s/2b) (Altschuler & Oliner 1960, the
    # wide-strip limit of their gap; from memory, docs/references.md §7.5). The edges' share
    # cancels in the difference between two wide strips. Measured: 0.989 of it at s/b 0.05 and
    # 0.988 at 0.5 (density 2.25; 0.993-0.997 at 3.4), where at density 1 the same difference is
    # 6-14 % off at s/b 0.5: the calibration's extrapolation over three densities is needed.
    s = s_b * B
    two_d = 2 * EPS0 / math.pi * math.log(1 / math.tanh(math.pi * s / (2 * B)))
    c = [es.gap(1.0, B, w_b * B, s, 2.25, stripline=True).c_series for w_b in (3.0, 5.0)]
    assert (c[1] - c[0]) / (2 * B) == pytest.approx(two_d, rel=0.02)
