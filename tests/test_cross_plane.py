"""Line impedance from dumped cross-sections (refine.fullwave.cross_plane).

The fields are made up: a field confined under the strip and uniform there (a parallel-plate
line, no fringing), travelling along x, for which voltage-current, power-current and
power-voltage impedance are one number, E h / (2 H W) with W the half strip's width up to its
edge's dual cell; a backward wave on top must not change them.
"""

from __future__ import annotations

import numpy as np
import pytest

from refine.fullwave import cross_plane

X = np.array([0.0, 25e-6, 50e-6])
XH = np.array([-12.5e-6, 12.5e-6, 37.5e-6, 62.5e-6])  # H's planes, as the engine dumps them
Y = np.array([-50e-6, 50e-6, 150e-6, 240e-6, 300e-6, 380e-6, 500e-6, 800e-6])
Z = np.array([0.0, 200e-6, 400e-6, 635e-6, 700e-6, 900e-6, 1500e-6])
EDGE, TOP = 300e-6, 635e-6
BETA = np.array([200.0, 900.0])  # rad/m, two frequencies


def _fields(e0: float, h0: float, gamma: complex = 0.0):
    """Forward wave (E0, H0) and a backward one gamma times its size, on three planes."""
    js, ks = int(np.flatnonzero(Y == EDGE)[0]), int(np.flatnonzero(Z == TOP)[0])
    xh = XH  # the dual planes, where H lives
    nf = BETA.size
    e = np.zeros((nf, 3, Z.size, Y.size, X.size), complex)
    h = np.zeros((nf, 3, Z.size, Y.size, XH.size), complex)
    for k, b in enumerate(BETA):
        ae = np.exp(-1j * b * X) + gamma * np.exp(1j * b * X)
        ah = np.exp(-1j * b * xh) - gamma * np.exp(1j * b * xh)
        e[k, 2, :ks, 1 : js + 1, :] = e0 * ae  # E_z under the strip, lines above the wall
        h[k, 1, :ks, 1 : js + 1, :] = h0 * ah  # H_y there too
    return e, h


def _expect(e0: float, h0: float) -> float:
    wall = 0.5 * (Y[0] + Y[1])
    width = 0.5 * (Y[4] + Y[5]) - wall  # to the strip edge's dual cell
    return abs(e0) * TOP / (2 * abs(h0) * width)


def test_a_parallel_plate_wave_gives_one_impedance_three_ways():
    z = cross_plane.impedances(*_fields(-1000.0, 8.0), X, XH, Y, Z, EDGE, TOP, mirror=True)
    for name in ("z_vi", "z_pi", "z_pv"):
        # H averaged across the middle plane reads cos(βΔx/2) low: 3e-4 at the larger β
        np.testing.assert_allclose(getattr(z, name), _expect(-1000.0, 8.0), rtol=1e-4)
    np.testing.assert_allclose(z.reflection, 0.0, atol=1e-4)  # (βΔx)² of the differences


def test_a_backward_wave_leaves_the_impedances_and_is_reported():
    clean = cross_plane.impedances(*_fields(-1000.0, 8.0), X, XH, Y, Z, EDGE, TOP, mirror=True)
    mixed = cross_plane.impedances(
        *_fields(-1000.0, 8.0, 0.1 * np.exp(0.7j)), X, XH, Y, Z, EDGE, TOP, mirror=True
    )
    for name in ("z_vi", "z_pi", "z_pv"):
        np.testing.assert_allclose(getattr(mixed, name), getattr(clean, name), rtol=1e-4)
    np.testing.assert_allclose(mixed.reflection, 0.1, rtol=1e-3)


def test_a_wave_travelling_the_other_way_gives_the_same_impedances():
    ahead = cross_plane.impedances(*_fields(-1000.0, 8.0), X, XH, Y, Z, EDGE, TOP, mirror=True)
    back = cross_plane.impedances(*_fields(-1000.0, -8.0), X, XH, Y, Z, EDGE, TOP, mirror=True)
    np.testing.assert_allclose(back.z_pi, ahead.z_pi, rtol=1e-12)


def test_only_the_half_box_is_handled():
    with pytest.raises(NotImplementedError, match="half box"):
        cross_plane.impedances(*_fields(1.0, 1.0), X, XH, Y, Z, EDGE, TOP, mirror=False)
