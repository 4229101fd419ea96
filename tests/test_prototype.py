"""Lowpass prototypes: pinned published values, properties, and exact bad-input messages."""

import math

import numpy as np
import pytest

from refine.synthesis import prototype as p

# Chebyshev g-values. Matthaei, Young & Jones 1964, Table 4.05-2(a); the same values are in
# Pozar, Microwave Engineering 4th ed., Table 8.4 and Hong & Lancaster 2001, Table 3.2.
# From memory: the values were collected without the books at hand (docs/references.md §1.2);
# the closed form reproduces each of them to 1 in the 4th decimal.
CHEBYSHEV_TABLE = [
    (0.01, 3, [0.6292, 0.9703, 0.6292, 1.0000]),
    (0.01, 5, [0.7563, 1.3049, 1.5773, 1.3049, 0.7563, 1.0000]),
    (0.1, 3, [1.0316, 1.1474, 1.0316, 1.0000]),
    (0.1, 4, [1.1088, 1.3062, 1.7704, 0.8181, 1.3554]),
    (0.1, 5, [1.1468, 1.3712, 1.9750, 1.3712, 1.1468, 1.0000]),
    (0.5, 2, [1.4029, 0.7071, 1.9841]),
    (0.5, 3, [1.5963, 1.0967, 1.5963, 1.0000]),
    (0.5, 4, [1.6703, 1.1926, 2.3661, 0.8419, 1.9841]),
    (0.5, 5, [1.7058, 1.2296, 2.5408, 1.2296, 1.7058, 1.0000]),
    (1.0, 3, [2.0236, 0.9941, 2.0236, 1.0000]),
]


@pytest.mark.parametrize(("ripple", "n", "expected"), CHEBYSHEV_TABLE)
def test_chebyshev_g_matches_myj_table(ripple, n, expected):
    g = p.chebyshev_g(n, ripple)
    assert g[0] == 1.0
    np.testing.assert_allclose(g[1:], expected, atol=1e-4)


def test_chebyshev_3db_matches_table_to_1e3():
    # MYJ 1964 Table 4.05-2(a), 3 dB ripple, n = 3 and n = 5 (from memory); the tables were
    # computed with the rounded constant, hence the looser tolerance (docs/references.md §1.2).
    np.testing.assert_allclose(p.chebyshev_g(3, 3.0)[1:4], [3.3487, 0.7117, 3.3487], atol=1e-3)
    np.testing.assert_allclose(p.chebyshev_g(5, 3.0)[1:4], [3.4817, 0.7618, 4.5381], atol=1e-3)
    assert p.chebyshev_g(4, 3.0)[-1] == pytest.approx(5.8095, abs=1e-3)


def test_even_order_load_is_coth_squared():
    # 1.0 dB, even n: g_{n+1} = 2.6597. MYJ 1964 Table 4.05-2(a), from memory.
    for n in (2, 4, 6, 8):
        assert p.chebyshev_g(n, 1.0)[-1] == pytest.approx(2.6597, abs=1e-4)


@pytest.mark.parametrize(
    ("n", "expected"),
    [  # Butterworth: MYJ 1964 Table 4.05-1(a); Pozar 4th ed. Table 8.3 (from memory)
        (3, [1.0, 2.0, 1.0]),
        (4, [0.7654, 1.8478, 1.8478, 0.7654]),
        (5, [0.6180, 1.6180, 2.0000, 1.6180, 0.6180]),
    ],
)
def test_butterworth_g(n, expected):
    g = p.butterworth_g(n)
    np.testing.assert_allclose(g[1:-1], expected, atol=1e-4)
    assert g[0] == g[-1] == 1.0


@pytest.mark.parametrize("n", range(1, 16))
@pytest.mark.parametrize("ripple", [0.001, 0.04321, 0.5, 3.0, 6.0])
def test_chebyshev_all_orders_finite_positive_symmetric(n, ripple):
    g = p.chebyshev_g(n, ripple)
    assert g.shape == (n + 2,)
    assert np.all(np.isfinite(g)) and np.all(g > 0)
    # Odd orders are symmetric, g_k = g_{n+1-k}; even orders are antimetric (the reversed
    # network is the dual scaled by g_{n+1}): g_{n+1-k} = g_k / g_{n+1} for odd k.
    # Common practice, no source.
    inner = g[1:-1]
    if n % 2:
        np.testing.assert_allclose(inner, inner[::-1], rtol=1e-12)
    else:
        np.testing.assert_allclose(inner[::2] / g[-1], inner[::-1][::2], rtol=1e-10)


def test_chebyshev_ripple_of_prototype_is_exact():
    # The prototype's response at its own passband edge is the ripple; common practice, no source.
    for n in (2, 3, 7):
        assert p.attenuation_db("chebyshev", n, 1.0, 0.5)[()] == pytest.approx(0.5, rel=1e-12)
    assert p.attenuation_db("butterworth", 4, 1.0)[()] == pytest.approx(
        10 * math.log10(2), rel=1e-12
    )


def test_attenuation_check_values():
    # Recomputed from the Chebyshev response formula (docs/references.md §1.3), no published
    # source: 0.5 dB ripple at Ω = 1.9091 (2.2 GHz for f0 = 2 GHz, FBW = 0.1, lumped mapping).
    assert p.attenuation_db("chebyshev", 3, 1.9091, 0.5)[()] == pytest.approx(17.83, abs=0.01)
    assert p.attenuation_db("chebyshev", 4, 1.9091, 0.5)[()] == pytest.approx(28.72, abs=0.01)
    assert p.attenuation_db("chebyshev", 5, 1.9091, 0.5)[()] == pytest.approx(39.69, abs=0.01)


def test_minimum_order():
    # Recomputed from Hong & Lancaster 2001 eqs. 3.4 and 3.11 (docs/references.md §1.3).
    assert p.minimum_order("chebyshev", 40.0, 2.0, 0.1) == pytest.approx(5.450, abs=1e-3)
    assert p.minimum_order("butterworth", 40.0, 2.0) == pytest.approx(6.644, abs=1e-3)


def test_return_loss_ripple_round_trip():
    # ε = 0.1 is L_Ar = 10 log(1 + ε²) = 0.043214 dB and RL = 10 log(1 + 1/ε²) = 20.0432 dB
    # (docs/references.md §1.2 rounds this to "20 dB"); 0.1 dB is 16.43 dB (recomputed there).
    # Common practice, no source.
    assert p.ripple_to_return_loss(10 * math.log10(1.01)) == pytest.approx(10 * math.log10(101))
    assert p.ripple_to_return_loss(0.1) == pytest.approx(16.43, abs=0.01)
    assert p.return_loss_to_ripple(p.ripple_to_return_loss(0.37)) == pytest.approx(0.37, rel=1e-12)


def test_mappings():
    # Lumped mapping, f0 = 2 GHz, FBW = 0.1 (Pozar §8.4): recomputed check values,
    # docs/references.md §1.4.
    om = p.lumped_omega([2.2e9, 1.8e9, 2.1e9, 1.9e9], 2e9, 0.1)
    np.testing.assert_allclose(om, [1.90909, -2.11111, 0.97619, -1.02632], atol=1e-5)
    # Half-wave slope mapping: linear near f0 (MYJ §8.04 narrow-band form 2 δ / FBW) and
    # periodic in f0, so |Ω| returns below 1 at 2 f0: the spurious passband.
    assert p.halfwave_omega(2.0001e9, 2e9, 0.1)[()] == pytest.approx(2 * 0.00005 / 0.1, rel=1e-6)
    assert abs(p.halfwave_omega(4e9, 2e9, 0.1)[()]) < 1e-9
    spur = p.spurious_passbands(3e9, 7e9, 2e9, 0.1)
    assert len(spur) == 2 and spur[0][0] < 4e9 < spur[0][1] and spur[1][0] < 6e9 < spur[1][1]


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: p.chebyshev_g(0, 0.5), "order = 0 is outside the allowed range 1..15"),
        (lambda: p.chebyshev_g(16, 0.5), "order = 16 is outside the allowed range 1..15"),
        (lambda: p.chebyshev_g(2.5, 0.5), "order must be an integer in 1..15, got 2.5"),
        (lambda: p.chebyshev_g(3, 0.0), "ripple_db = 0 is outside the allowed range (0, inf)"),
        (lambda: p.chebyshev_g(3, -1), "ripple_db = -1 is outside the allowed range (0, inf)"),
        (lambda: p.chebyshev_g(3, float("nan")), "ripple_db must be finite, got nan"),
        (lambda: p.g_values("elliptic", 3), "family = 'elliptic' is not one of the allowed values"),
        (lambda: p.g_values("chebyshev", 3), "ripple_db is required for family 'chebyshev'"),
        (lambda: p.lumped_omega([1e9], 2e9, 1.0), "fbw = 1 is outside the allowed range (0, 1)"),
        (
            lambda: p.lumped_omega([1e9], -2e9, 0.1),
            "f0 = -2e+09 is outside the allowed range (0, inf)",
        ),
        (
            lambda: p.minimum_order("chebyshev", 40, 0.9, 0.1),
            "omega_s = 0.9 is outside the allowed range (1, inf)",
        ),
    ],
)
def test_bad_input_messages(call, message):
    with pytest.raises(ValueError) as exc:
        call()
    assert message in str(exc.value)
