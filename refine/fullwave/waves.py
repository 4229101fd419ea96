"""From probed port voltages and currents to two-port parameters; gap capacitances; mesh
extrapolation. Pure functions of arrays, frequency on the leading axis.

Each port gives the total voltage V and current I (flowing into the two-port) at its
measurement plane. With the line's impedance Zc and propagation constant γ = jβ taken from a
thru run on the same mesh (a matched line, where the port's own estimate is well conditioned;
with the filter in place nearly everything reflects and that estimate is not), the
transmission-line equations carry (V, I) a distance d along the line to the reference plane:

    V_ref = V cosh(γd) - Zc I sinh(γd),   I_ref = I cosh(γd) - (V/Zc) sinh(γd)

Two independent excitations give the ABCD matrix from [V1; I1] = T [V2; -I2]; for a mirror-
symmetric structure the second excitation is the mirror image of the first (ports swapped), so
one run suffices. The S-matrix then follows for any real reference impedance (Pozar,
*Microwave Engineering*, 4th ed., Table 4.2) — the port lines' own impedance never enters it, so
nothing has to be renormalised.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine.circuit.cascade import Abcd


class PortState(NamedTuple):
    """Voltage and current (into the two-port) at each port, each ``(nf,)``."""

    v1: NDArray[np.complex128]
    i1: NDArray[np.complex128]
    v2: NDArray[np.complex128]
    i2: NDArray[np.complex128]


def move_to_plane(
    v: ArrayLike, i: ArrayLike, zc: ArrayLike, beta: ArrayLike, d: float
) -> tuple[NDArray, NDArray]:
    """(V, I) moved a distance ``d`` along the line in the direction of I (positive d: towards
    the two-port). beta may be complex (loss in its imaginary part, as the engine reports)."""
    v, i, zc = (np.asarray(x, complex) for x in (v, i, zc))
    gd = 1j * np.asarray(beta, complex) * d
    ch, sh = np.cosh(gd), np.sinh(gd)
    return v * ch - zc * i * sh, i * ch - v / zc * sh


def abcd_from_states(states: Sequence[PortState]) -> Abcd:
    """ABCD matrix from two independent excitations, or one plus its mirror image."""
    if len(states) == 1:
        s = states[0]
        states = [s, PortState(s.v2, s.i2, s.v1, s.i1)]
    if len(states) != 2:
        raise ValueError(f"need one (mirror-symmetric) or two port states, got {len(states)}")
    p, q = states
    m1 = np.stack([np.stack([p.v1, q.v1], -1), np.stack([p.i1, q.i1], -1)], -2)
    m2 = np.stack([np.stack([p.v2, q.v2], -1), np.stack([-p.i2, -q.i2], -1)], -2)
    t = m1 @ np.linalg.inv(m2)
    return Abcd(t[..., 0, 0], t[..., 0, 1], t[..., 1, 0], t[..., 1, 1])


class PiCapacitances(NamedTuple):
    """Capacitances (F) of a π-network read off an ABCD matrix at each frequency."""

    c_series: NDArray[np.float64]
    c_shunt_in: NDArray[np.float64]
    c_shunt_out: NDArray[np.float64]


def pi_capacitances(abcd: Abcd, f: ArrayLike) -> PiCapacitances:
    """Series and shunt capacitances of a (lossless, reciprocal) π of capacitors:
    Y12 = -1/B = -jωCs, Y11 = D/B = jω(C1 + Cs), Y22 = A/B = jω(C2 + Cs)."""
    w = 2.0 * np.pi * np.asarray(f, float)
    a, b, _, d = (np.asarray(x, complex) for x in abcd)
    cs = np.imag(1.0 / b) / w
    return PiCapacitances(cs, np.imag(d / b) / w - cs, np.imag(a / b) / w - cs)


class Extrapolated(NamedTuple):
    """A mesh-extrapolated value. order: the observed convergence order (NaN if the three
    values do not converge monotonically, in which case first order is assumed); error: the
    distance from the finest mesh's value, a fair measure of what the extrapolation adds."""

    value: float
    order: float
    error: float


def richardson(cells: Sequence[float], values: Sequence[float]) -> Extrapolated:
    """Richardson extrapolation to zero cell size from three meshes refined by a constant
    factor (Richardson 1911; Roache, *Verification and Validation in Computational Science and
    Engineering*, 1998, §5). The observed order is clamped to [0.5, 3]."""
    h = np.asarray(cells, float)
    y = np.asarray(values, float)
    if h.shape != (3,) or y.shape != (3,):
        raise ValueError("richardson needs exactly three meshes and three values")
    order_idx = np.argsort(-h)
    h, y = h[order_idx], y[order_idx]
    r = h[0] / h[1]
    if not np.isclose(h[1] / h[2], r, rtol=1e-6) or r <= 1:
        raise ValueError(f"meshes must be refined by a constant factor, got cells {h.tolist()}")
    d1, d2 = y[1] - y[0], y[2] - y[1]
    p = float("nan")
    p_use = 1.0
    if d1 != 0 and d2 != 0 and d1 * d2 > 0:
        p = float(np.log(abs(d1 / d2)) / np.log(r))
        p_use = float(np.clip(p, 0.5, 3.0))
    value = y[2] + d2 / (r**p_use - 1.0)
    return Extrapolated(float(value), p, float(abs(value - y[2])))
