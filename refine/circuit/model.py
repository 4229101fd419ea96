"""Parameterised filter models: a vector of physical dimensions -> S11, S21 and their gradient.

These are what the refiner moves. Each model fixes the medium, the gap model, the coupling kind,
the reference impedance and the frequency grid, and maps a parameter vector ``p`` (SI units)
to the cascade.

Parameters
----------
gap coupling, strip media:   gaps s_0..s_n, lengths l_1..l_n [, widths w_1..w_n]
tap coupling, strip media:   gaps s_1..s_(n-1), lengths l_1..l_n, taps t_in, t_out [, widths]
ideal medium:                capacitances C_0..C_n (F), electrical lengths θ_1..θ_n (rad at f0)

Tapped feed
-----------
The feed joins the first resonator at distance t from its outer open end. Seen from the feed,
the resonator is an open stub of length t (plus the open-end extension Δl of
Kirschning–Jansen–Koster 1981) in shunt, followed by a line of length l - t to the first
gap; mirrored at the output. The T-junction's own parasitics are omitted (stated in the
report); the port reference plane is at the tap.

Gradient
--------
Lengths and taps enter line lengths directly; gap widths through the gap model's capacitances,
differentiated by complex step (exact); widths through the line's γ(f), z_c(f) and the adjacent
gaps' capacitances, differentiated by a central difference (relative step 1e-6) and chained
through the cascade's analytic derivatives.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray
from scipy.constants import c as C0

from refine import validity
from refine.circuit import cascade
from refine.circuit.builder import StripMedium, check_gap_model, gap_capacitances, medium_kind
from refine.circuit.layout import Layout
from refine.physics.discontinuities import kirschning_jansen_koster_open_end, stripline_open_end
from refine.physics.microstrip import hammerstad_jensen
from refine.physics.stripline import Stripline

_CSTEP = 1e-30  # complex-step size relative to the gap width
_FD = 1e-6  # relative central-difference step for widths


def open_end_extensions(medium: StripMedium, width) -> NDArray:
    """Open-end length extension Δl (m) of strips of ``width`` (any array shape) on ``medium``:
    Kirschning–Jansen–Koster 1981 on microstrip, b ln 2/π on stripline."""
    sub = medium.substrate
    w = np.asarray(width, float)
    if isinstance(medium, Stripline):
        return np.broadcast_to(stripline_open_end(sub.height), w.shape)
    u = w / sub.height
    _, ee, _ = hammerstad_jensen(u, sub.eps_r, sub.metal_thickness / sub.height)
    return kirschning_jansen_koster_open_end(u, sub.eps_r, ee) * sub.height


def open_end_extension(medium: StripMedium, width: float) -> float:
    """Open-end length extension Δl (m) of one strip of ``width`` on ``medium``."""
    return float(open_end_extensions(medium, width))


@dataclass
class Response:
    """S11, S21 ``(nf,)`` and, when asked, their derivatives ``(n_params, nf)``."""

    s11: NDArray[np.complex128]
    s21: NDArray[np.complex128]
    ds11: NDArray[np.complex128] | None = None
    ds21: NDArray[np.complex128] | None = None


@dataclass
class StripFilterModel:
    """End-coupled filter on a strip medium with ``external`` = "gap" or "tap" coupling."""

    medium: StripMedium
    gap_model: str
    z_ref: float
    external: str
    order: int
    feed_width: float
    f: NDArray[np.float64]
    free_widths: bool = False
    fixed_width: float | None = None  # resonator width when widths are not free
    names: list[str] = field(init=False)

    def __post_init__(self) -> None:
        check_gap_model(self.medium, self.gap_model)
        medium_kind(self.medium)
        n = self.order
        n_gaps = n + 1 if self.external == "gap" else n - 1
        first_gap = 0 if self.external == "gap" else 1
        self.names = [f"gap {k}" for k in range(first_gap, first_gap + n_gaps)]
        self.names += [f"length {j + 1}" for j in range(n)]
        if self.external == "tap":
            self.names += ["tap in", "tap out"]
        if self.free_widths:
            self.names += [f"width {j + 1}" for j in range(n)]
        if not self.free_widths and self.fixed_width is None:
            raise ValueError("fixed_width is needed when widths are not free")
        self._n_gaps = n_gaps

    # -- mapping between vectors and layouts -------------------------------------------------

    def split(self, p: NDArray) -> tuple[NDArray, NDArray, NDArray | None, NDArray]:
        n, g = self.order, self._n_gaps
        gaps = p[:g]
        lengths = p[g : g + n]
        k = g + n
        taps = None
        if self.external == "tap":
            taps = p[k : k + 2]
            k += 2
        widths = p[k : k + n] if self.free_widths else np.full(n, self.fixed_width)
        return gaps, lengths, taps, widths

    def layout(self, p: NDArray) -> Layout:
        gaps, lengths, taps, widths = self.split(np.asarray(p, float))
        return Layout(
            self.external,
            self.feed_width,
            tuple(widths),
            tuple(gaps),
            tuple(lengths),
            None if taps is None else (float(taps[0]), float(taps[1])),
        )

    def vector(self, layout: Layout) -> NDArray:
        parts = [layout.gaps, layout.lengths]
        if self.external == "tap":
            parts.append(layout.taps)
        if self.free_widths:
            parts.append(layout.widths)
        return np.concatenate([np.asarray(x, float) for x in parts])

    # -- circuit ------------------------------------------------------------------------------

    def _gap_pi(self, w_in: float, w_out: float, s: complex) -> tuple[complex, complex, complex]:
        c = gap_capacitances(self.medium, self.gap_model, w_in, w_out, s)
        return (
            complex(np.asarray(c.c_series)),
            complex(np.asarray(c.c_shunt_in)),
            complex(np.asarray(c.c_shunt_out)),
        )

    def _build(self, gaps, lengths, taps, widths):
        """Elements plus, per element, how its parameters depend on p (index, param, factor)."""
        f = self.f
        n = self.order
        med = self.medium
        props = {}

        def line(w):
            key = float(w)
            if key not in props:
                props[key] = med.line_properties(key, f)
            return props[key]

        els: list[cascade.Element] = []
        deps: list[list[tuple[int, str, float]]] = []  # per element: (p index, param, dparam/dp)
        gap_slots: list[tuple[int, int, float, float]] = []  # (element index, p index, w_in, w_out)
        line_slots: list[tuple[int, int]] = []  # (element index, resonator j)
        strip_centre = self.gap_model == "altschuler-oliner"
        n_g = self._n_gaps
        i_len = n_g
        i_tap = n_g + n
        i_w = n_g + n + (2 if self.external == "tap" else 0)

        def add_gap(
            k_gap: int,
            p_index: int,
            w_in: float,
            w_out: float,
            s: float,
            j_in: int | None,
            j_out: int | None,
        ):
            if strip_centre:  # half-gap lines on each side, see refine.circuit.builder.gap_elements
                g_in, z_in = line(w_in)
                els.append(cascade.Line(g_in, z_in, 0.5 * s))
                deps.append([(p_index, "length", 0.5)])
                if j_in is not None:
                    line_slots.append((len(els) - 1, j_in))
            cs, ci, co = self._gap_pi(w_in, w_out, s)
            els.append(cascade.PiNetwork(cs.real, ci.real, co.real))
            deps.append([])
            gap_slots.append((len(els) - 1, p_index, w_in, w_out))
            if strip_centre:
                g_out, z_out = line(w_out)
                els.append(cascade.Line(g_out, z_out, 0.5 * s))
                deps.append([(p_index, "length", 0.5)])
                if j_out is not None:
                    line_slots.append((len(els) - 1, j_out))

        def add_line(j: int, length: float, dep: list[tuple[int, str, float]]):
            g, z = line(widths[j])
            els.append(cascade.Line(g, z, length))
            deps.append(dep)
            line_slots.append((len(els) - 1, j))

        if self.external == "gap":
            sides = [self.feed_width, *widths, self.feed_width]
            for k in range(n + 1):
                add_gap(
                    k,
                    k,
                    sides[k],
                    sides[k + 1],
                    gaps[k],
                    k - 1 if k > 0 else None,
                    k if k < n else None,
                )
                if k < n:
                    add_line(k, lengths[k], [(i_len + k, "length", 1.0)])
        else:
            dl_in = open_end_extension(med, widths[0])
            dl_out = open_end_extension(med, widths[-1])
            g0, z0 = line(widths[0])
            els.append(cascade.ShuntOpenStub(g0, z0, taps[0] + dl_in))
            deps.append([(i_tap, "length", 1.0)])
            line_slots.append((len(els) - 1, 0))
            for j in range(n):
                if j == 0:
                    add_line(
                        0, lengths[0] - taps[0], [(i_len, "length", 1.0), (i_tap, "length", -1.0)]
                    )
                elif j == n - 1:
                    add_line(
                        j,
                        lengths[j] - taps[1],
                        [(i_len + j, "length", 1.0), (i_tap + 1, "length", -1.0)],
                    )
                else:
                    add_line(j, lengths[j], [(i_len + j, "length", 1.0)])
                if j < n - 1:
                    add_gap(j + 1, j, widths[j], widths[j + 1], gaps[j], j, j + 1)
            gl, zl = line(widths[-1])
            els.append(cascade.ShuntOpenStub(gl, zl, taps[1] + dl_out))
            deps.append([(i_tap + 1, "length", 1.0)])
            line_slots.append((len(els) - 1, n - 1))
        return els, deps, gap_slots, line_slots, i_w

    def response(self, p: NDArray, gradient: bool = False) -> Response:
        """S11, S21 at the model's frequencies; with ``gradient`` also d/dp of both."""
        gaps, lengths, taps, widths = self.split(np.asarray(p, float))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", validity.ModelRangeWarning)  # reported separately
            els, deps, gap_slots, line_slots, i_w = self._build(gaps, lengths, taps, widths)
            if not gradient:
                t = cascade.s11_s21(els, self.f, self.z_ref)
                return Response(t.s11, t.s21)
            wrt = {"length", "c_series", "c_shunt_in", "c_shunt_out"}
            if self.free_widths:
                wrt |= {"gamma", "z_c"}
            g = cascade.s11_s21_gradient(els, self.f, self.z_ref, wrt)
            n_p = len(self.names)
            ds11 = np.zeros((n_p, self.f.size), complex)
            ds21 = np.zeros((n_p, self.f.size), complex)
            for e, dep in enumerate(deps):
                for idx, name, fac in dep:
                    ds11[idx] += fac * g.ds11[e][name]
                    ds21[idx] += fac * g.ds21[e][name]
            names = ("c_series", "c_shunt_in", "c_shunt_out")
            for e, idx, w_in, w_out in gap_slots:
                s = gaps[idx]
                h = _CSTEP * s
                dc = [x.imag / h for x in self._gap_pi(w_in, w_out, s + 1j * h)]
                for name, d in zip(names, dc, strict=True):
                    ds11[idx] += d * g.ds11[e][name]
                    ds21[idx] += d * g.ds21[e][name]
            if self.free_widths:
                self._width_gradient(widths, gaps, g, gap_slots, line_slots, i_w, ds11, ds21)
        return Response(g.s11, g.s21, ds11, ds21)

    def _width_gradient(self, widths, gaps, g, gap_slots, line_slots, i_w, ds11, ds21) -> None:
        med, f = self.medium, self.f
        for j in range(self.order):
            w = float(widths[j])
            h = _FD * w
            gp, zp = med.line_properties(w + h, f)
            gm, zm = med.line_properties(w - h, f)
            dgam, dz = (gp - gm) / (2 * h), (zp - zm) / (2 * h)
            for e, jj in line_slots:
                if jj == j:
                    ds11[i_w + j] += g.ds11[e]["gamma"] * dgam + g.ds11[e]["z_c"] * dz
                    ds21[i_w + j] += g.ds21[e]["gamma"] * dgam + g.ds21[e]["z_c"] * dz
            for e, idx, w_in, w_out in gap_slots:
                sides = self._gap_side_resonators(idx)
                for side, jj in enumerate(sides):
                    if jj != j:
                        continue
                    args_p = [w_in, w_out]
                    args_m = [w_in, w_out]
                    args_p[side] = w + h
                    args_m[side] = w - h
                    cp_ = self._gap_pi(args_p[0], args_p[1], gaps[idx])
                    cm_ = self._gap_pi(args_m[0], args_m[1], gaps[idx])
                    for name, a, b in zip(
                        ("c_series", "c_shunt_in", "c_shunt_out"), cp_, cm_, strict=True
                    ):
                        d = (a.real - b.real) / (2 * h)
                        ds11[i_w + j] += d * g.ds11[e][name]
                        ds21[i_w + j] += d * g.ds21[e][name]
            if self.external == "tap" and j in (0, self.order - 1):
                # the open-end extension of a tapped end resonator's stub depends on its width
                dl = (open_end_extension(med, w + h) - open_end_extension(med, w - h)) / (2 * h)
                e_stub = 0 if j == 0 else len(g.ds11) - 1
                ds11[i_w + j] += dl * g.ds11[e_stub]["length"]
                ds21[i_w + j] += dl * g.ds21[e_stub]["length"]

    def _gap_side_resonators(self, idx: int) -> tuple[int | None, int | None]:
        """Resonator index on the input and output side of gap parameter ``idx``."""
        if self.external == "gap":
            return (idx - 1 if idx > 0 else None, idx if idx < self.order else None)
        return (idx, idx + 1)


@dataclass
class IdealFilterModel:
    """End-coupled filter on ideal elements: series capacitances and electrical lengths at f0."""

    f0: float
    z_ref: float
    order: int
    f: NDArray[np.float64]
    names: list[str] = field(init=False)

    def __post_init__(self) -> None:
        self.names = [f"C {k}" for k in range(self.order + 1)] + [
            f"theta {j + 1}" for j in range(self.order)
        ]

    def split(self, p: NDArray) -> tuple[NDArray, NDArray]:
        return p[: self.order + 1], p[self.order + 1 :]

    def response(self, p: NDArray, gradient: bool = False) -> Response:
        from refine.synthesis.inverters import ideal_elements

        caps, th = self.split(np.asarray(p, float))
        els = ideal_elements(caps, th, self.f0, self.z_ref, self.f)
        if not gradient:
            t = cascade.s11_s21(els, self.f, self.z_ref)
            return Response(t.s11, t.s21)
        g = cascade.s11_s21_gradient(els, self.f, self.z_ref, {"length", "capacitance"})
        n = self.order
        dl_dth = C0 / (2 * np.pi * self.f0)
        ds11 = np.array(
            [g.ds11[2 * k]["capacitance"] for k in range(n + 1)]
            + [g.ds11[2 * j + 1]["length"] * dl_dth for j in range(n)]
        )
        ds21 = np.array(
            [g.ds21[2 * k]["capacitance"] for k in range(n + 1)]
            + [g.ds21[2 * j + 1]["length"] * dl_dth for j in range(n)]
        )
        return Response(g.s11, g.s21, ds11, ds21)


def strip_model_for(
    medium: StripMedium,
    gap_model: str,
    z_ref: float,
    layout: Layout,
    f: NDArray,
    free_widths: bool = False,
) -> StripFilterModel:
    """A :class:`StripFilterModel` shaped like ``layout``."""
    return StripFilterModel(
        medium,
        gap_model,
        z_ref,
        layout.external,
        layout.order,
        layout.feed_width,
        np.asarray(f, float),
        free_widths,
        None if free_widths else layout.widths[0],
    )


__all__ = [
    "IdealFilterModel",
    "Response",
    "StripFilterModel",
    "open_end_extension",
    "strip_model_for",
]
