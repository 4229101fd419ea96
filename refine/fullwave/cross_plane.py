"""A line's characteristic impedance from the fields on its cross-section, three ways.

On a dispersive microstrip the voltage, the current and the power of the quasi-TEM mode no
longer fix one impedance: the voltage between strip and ground depends on the path, so
Z_VI = V/I, Z_PI = 2P/|I|² and Z_PV = |V|²/(2P) part as frequency rises (Z_PV > Z_VI > Z_PI),
and agree only in the quasi-static limit. The engine's line port measures Z_VI (voltage on the
strip's centre line, current around the strip). Jansen & Kirschning's dispersive Z0(f) is the
power-current one (R. H. Jansen and M. Kirschning, "Arguments and an accurate model for the
power-current formulation of microstrip characteristic impedance", AEÜ 37, 1983), so the like-
for-like check of the engine against it needs P, which the port does not give: it is the flux
of the Poynting vector through the cross-section, computed here from the engine's field dump.

**The dump.** Raw Yee components on three neighbouring planes x_0, x_1, x_2 (the engine's
frequency-domain dump without interpolation): E_y at (y_j+½, z_k), E_z at (y_j, z_k+½) on each
plane, and on the dual planes x_0+½, x_1+½ H_y at (y_j, z_k+½), H_z at (y_j+½, z_k). So E_y
pairs with H_z and E_z with H_y at the same (y, z). On the middle plane x_1 (H averaged from the
two dual planes on either side, as the engine's line port does):

    P = ½ Re Σ [E_y H_z* Δy_j Δz̃_k − E_z H_y* Δỹ_j Δz_k]     (Δ primary, Δ̃ dual cell)
    I = the loop sum of H around the strip,  V = the sum of E_z under the strip's centre.

**Reflections.** The line is never perfectly matched, and a backward wave of a few per cent
makes V/I on one plane ripple by twice that over frequency. So the waves are separated first,
as the engine's port does with its probes: from V on the three planes and I on the two dual
ones, Z_w = √(V V'/(I I')) (the wave impedance, voltage-current, free of the standing wave) and
V± = (V ± Z_w I)/2; the net power of the two waves is (|V+|² − |V−|²)/(2 Z_PV) and
Z_PI (|I+|² − |I−|²)/2 (their cross terms carry no net power on a lossless line), which gives
Z_PI and Z_PV.

All quantities come from the one dump, so its own scaling cancels in every impedance (the
engine's dump and its port probes are not transformed with the same normalisation). In a half
box (a magnetic wall on the strip's centre line, which the engine puts half a cell inside the
box edge, so on the first cell's centre) the sums start at that line, and the whole structure
carries twice the power and twice the current.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray


class PlaneImpedances(NamedTuple):
    """Per frequency (Ω): voltage-current (the wave's), power-current and power-voltage
    impedance, and the backward wave's size |V−/V+| on the middle plane."""

    z_vi: NDArray[np.float64]
    z_pi: NDArray[np.float64]
    z_pv: NDArray[np.float64]
    reflection: NDArray[np.float64]


def _dual(lines: NDArray) -> NDArray:
    """Dual-cell widths around each line (half cells at the ends)."""
    d = np.diff(lines)
    w = np.zeros(lines.size)
    w[:-1] += d / 2
    w[1:] += d / 2
    return w


def impedances(
    e: ArrayLike,
    h: ArrayLike,
    x: ArrayLike,
    hx: ArrayLike,
    y: ArrayLike,
    z: ArrayLike,
    strip_edge: float,
    strip_z: float,
    mirror: bool,
) -> PlaneImpedances:
    """Z_VI, Z_PI and Z_PV of a strip's quasi-TEM wave from a dumped slab of cross-sections.

    e, h : ``(nf, 3, nz, ny, nx)`` complex field components (x, y, z): E on the three planes
        ``x``, H on its dual planes ``hx`` (the two between those three are used; the engine's
        dump adds one before the first), indexed in y and z by the primary mesh lines ``y``,
        ``z`` (m) as described in the module docstring.
    strip_edge : the strip's outer edge (m); the strip runs from the box's magnetic wall (the
        centre of its first cell) to it. The current's loop passes beyond the first line at or
        past it.
    strip_z : the strip's height (m), a line of ``z``.
    mirror : must be True: only the half box is handled (the field check's default for a line).
    """
    if not mirror:
        raise NotImplementedError("only the half box (a magnetic wall on the centre line)")
    e, h = np.asarray(e, complex), np.asarray(h, complex)
    x, hx, y, z = (np.asarray(a, float) for a in (x, hx, y, z))
    if x.size != 3:
        raise ValueError(f"need E on three planes, got {x.size}")
    ha, hb = (int(np.argmin(np.abs(hx - 0.5 * (x[k] + x[k + 1])))) for k in (0, 1))
    ks = int(np.argmin(np.abs(z - strip_z)))
    # the loop's side runs beyond the first line at or past the edge: with the thirds rule
    # (no line on the edge) the sheet ends between two lines, and the loop must enclose it
    js = int(np.searchsorted(y, strip_edge - 1e-9))
    wall = 0.5 * (y[0] + y[1])
    # cells and dual cells of the half above the wall: the first cell's lower half, and the
    # first line (below the wall) are outside
    dy = np.append(np.diff(y), 0.0)
    dy[0] = y[1] - wall
    wy = _dual(y)
    wy[0], wy[1] = 0.0, 0.5 * (y[1] + y[2]) - wall
    dz = np.append(np.diff(z), 0.0)
    wz = _dual(z)

    def voltage(p: int) -> NDArray:  # on plane p, along the line nearest the centre
        return np.sum(e[:, 2, :ks, 1, p] * dz[:ks], axis=1)

    def current(hp: NDArray) -> NDArray:  # whole strip, from H on one (dual) plane
        hy, hz = hp[:, 1], hp[:, 2]
        loop = np.sum((hy[:, ks - 1, 1 : js + 1] - hy[:, ks, 1 : js + 1]) * wy[1 : js + 1], 1)
        return 2.0 * (loop + hz[:, ks, js] * wz[ks])

    v0, v1, v2 = voltage(0), voltage(1), voltage(2)
    ia, ib = current(h[..., ha]), current(h[..., hb])  # at x0 + ½ and x1 + ½
    d_v = (v2 - v0) / (x[2] - x[0])
    d_i = (ib - ia) / (0.5 * (x[2] - x[0]))  # the dual planes' spacing, centred on x1
    i1 = 0.5 * (ia + ib)
    z_w = np.sqrt(v1 * d_v / (i1 * d_i))
    z_w = np.where(np.real(z_w) < 0, -z_w, z_w)
    v_fwd, v_bwd = 0.5 * (v1 + z_w * i1), 0.5 * (v1 - z_w * i1)
    # the flux on the middle plane, H averaged from its two dual planes
    hm = 0.5 * (h[..., ha] + h[..., hb])
    ey, ez = e[:, 1, :, :, 1], e[:, 2, :, :, 1]
    flux = np.real(ey * np.conj(hm[:, 2])) * (wz[:, None] * dy[None, :]) - np.real(
        ez * np.conj(hm[:, 1])
    ) * (dz[:, None] * wy[None, :])
    power = np.abs(2.0 * 0.5 * flux.sum(axis=(1, 2)))  # both halves; its sign: the direction
    net_v = np.abs(np.abs(v_fwd) ** 2 - np.abs(v_bwd) ** 2)
    net_i = net_v / np.abs(z_w) ** 2
    return PlaneImpedances(
        np.abs(z_w),
        2.0 * power / net_i,
        net_v / (2.0 * power),
        # which wave is "forward" depends on the loop's orientation: the smaller one is the
        # reflection
        np.minimum(np.abs(v_fwd), np.abs(v_bwd)) / np.maximum(np.abs(v_fwd), np.abs(v_bwd)),
    )
