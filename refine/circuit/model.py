"""Parameterised filter models: a vector of physical dimensions -> S11, S21 and their gradient.

These are what the optimiser moves. Each model fixes the medium, the gap model, the coupling,
the reference impedance and the frequency grid, and maps a parameter vector ``p`` (SI units)
to the circuit of :func:`refine.circuit.builder.build`.

Parameters
----------
gap coupling, strip media:   gaps s_0..s_n, lengths l_1..l_n [, widths w_1..w_n]
tap coupling, strip media:   gaps s_1..s_(n-1), lengths l_1..l_n, taps t_in, t_out [, widths]
ideal medium:                capacitances C_0..C_n (F), electrical lengths θ_1..θ_n (rad at f0)

Gradient
--------
Lengths and taps enter line lengths directly; gap widths through the gap model's capacitances,
differentiated by complex step (exact); widths through the line's γ(f), z_c(f), the adjacent
gaps' capacitances and the tapped stubs' open-end extensions, differentiated by a central
difference (relative step 1e-6) and chained through the cascade's analytic derivatives. The
builder's :class:`~refine.circuit.builder.ElementMap` says which dimension moves which element.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from refine import validity
from refine._typing import Values
from refine.circuit import cascade
from refine.circuit.builder import (
    Adjustments,
    Dim,
    ElementMap,
    build,
    ideal_elements,
    line_properties,
)
from refine.circuit.layout import Layout
from refine.physics.constants import C0
from refine.physics.strip import (
    StripMedium,
    check_gap_model,
    gap_capacitances,
    medium_kind,
    open_end_extensions,
)
from refine.spec.coupling import Coupling

_CSTEP = 1e-30  # complex-step size relative to the gap width
_FD = 1e-6  # relative central-difference step for widths


@dataclass
class Response:
    """S11, S21 ``(nf,)`` and, when asked, their derivatives ``(n_params, nf)``."""

    s11: NDArray[np.complex128]
    s21: NDArray[np.complex128]
    ds11: NDArray[np.complex128] | None = None
    ds21: NDArray[np.complex128] | None = None


@dataclass
class StripFilterModel:
    """End-coupled filter on a strip medium; ``adjust`` applies model corrections
    (:class:`~refine.circuit.builder.Adjustments`) with exact gradients."""

    medium: StripMedium
    gap_model: str
    z_ref: float
    external: Coupling
    order: int
    feed_width: float
    f: NDArray[np.float64]
    free_widths: bool = False
    fixed_widths: tuple[float, ...] | None = None  # resonator widths when widths are not free
    adjust: Adjustments | None = None
    dims: list[tuple[Dim, int]] = field(init=False)
    names: list[str] = field(init=False)

    def __post_init__(self) -> None:
        check_gap_model(self.medium, self.gap_model)
        medium_kind(self.medium)
        self.external = Coupling(self.external)
        n = self.order
        n_gaps = self.external.n_gaps(n)
        dims = [(Dim.GAP, k) for k in range(n_gaps)] + [(Dim.LENGTH, j) for j in range(n)]
        if self.external is Coupling.TAP:
            dims += [(Dim.TAP, 0), (Dim.TAP, 1)]
        if self.free_widths:
            dims += [(Dim.WIDTH, j) for j in range(n)]
        if not self.free_widths and (self.fixed_widths is None or len(self.fixed_widths) != n):
            raise ValueError(f"fixed_widths needs {n} resonator widths when widths are not free")
        self.dims = dims
        self.names = [self.label(d) for d in dims]
        self._position = {d: i for i, d in enumerate(dims)}
        self._n_gaps = n_gaps

    def label(self, dim: tuple[Dim, int]) -> str:
        """The reader's name of a dimension: "gap 1", "length 2", "tap in", "width 3"."""
        kind, i = dim
        if kind is Dim.GAP:
            return f"gap {self.external.gap_label(i)}"
        if kind is Dim.TAP:
            return ("tap in", "tap out")[i]
        return f"{kind.value} {i + 1}"

    # -- mapping between vectors and layouts -------------------------------------------------

    def split(self, p: NDArray) -> tuple[NDArray, NDArray, NDArray | None, NDArray]:
        """Gaps, lengths, taps (or None) and widths of ``p`` (one design, or ``(B, n)``)."""
        n, g = self.order, self._n_gaps
        gaps = p[..., :g]
        lengths = p[..., g : g + n]
        k = g + n
        taps = None
        if self.external is Coupling.TAP:
            taps = p[..., k : k + 2]
            k += 2
        if self.free_widths:
            widths = p[..., k : k + n]
        else:
            widths = np.broadcast_to(np.asarray(self.fixed_widths, float), (*p.shape[:-1], n))
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
        if self.external is Coupling.TAP:
            assert layout.taps is not None
            parts.append(layout.taps)
        if self.free_widths:
            parts.append(layout.widths)
        return np.concatenate([np.asarray(x, float) for x in parts])

    # -- circuit ------------------------------------------------------------------------------

    def _build(self, p: NDArray, track: bool) -> tuple[list[cascade.Element], ElementMap | None]:
        gaps, lengths, taps, widths = self.split(np.asarray(p, float))
        b = build(
            self.external,
            self.medium,
            self.gap_model,
            self.feed_width,
            widths,
            gaps,
            lengths,
            taps,
            self.f,
            self.adjust,
            track=track,
            validate=False,
        )
        return b.elements, b.map

    def elements(self, p: NDArray) -> list[cascade.Element]:
        """The cascade elements of the design ``p`` (range warnings are the caller's)."""
        return self._build(p, False)[0]

    def _gap_pis(self, w_in: NDArray, w_out: NDArray, s: NDArray) -> tuple[NDArray, ...]:
        """(C_series, C_shunt_in, C_shunt_out) of many gaps from one gap-model call."""
        c = gap_capacitances(self.medium, self.gap_model, w_in, w_out, s)
        shape = np.broadcast_shapes(np.shape(w_in), np.shape(w_out), np.shape(s))
        return tuple(
            np.broadcast_to(np.asarray(x), shape) for x in (c.c_series, c.c_shunt_in, c.c_shunt_out)
        )

    def response(self, p: NDArray, gradient: bool = False) -> Response:
        """S11, S21 at the model's frequencies; with ``gradient`` also d/dp of both.

        ``p`` is one design ``(n_params,)``, giving ``(nf,)`` and ``(n_params, nf)``, or a batch
        ``(B, n_params)`` evaluated in one pass, giving ``(B, nf)`` and ``(B, n_params, nf)``."""
        p = np.asarray(p, float)
        if p.ndim not in (1, 2):
            raise ValueError(f"p must be (n_params,) or (B, n_params), got shape {p.shape}")
        with validity.unchecked():  # the verification grid checks ranges and reports them
            els, emap = self._build(p, gradient)
            if not gradient:
                t = cascade.s11_s21(els, self.f, self.z_ref)
                return Response(t.s11, t.s21)
            assert emap is not None
            wrt = {"length", "c_series", "c_shunt_in", "c_shunt_out"}
            if self.free_widths:
                wrt |= {"gamma", "z_c"}
            g = cascade.s11_s21_gradient(els, self.f, self.z_ref, wrt)
            acc = _Chain(g.rows, None if p.ndim == 1 else p.shape[0])
            pos = self._position
            for e, moves in enumerate(emap.lengths):
                for kind, i, fac in moves:
                    acc.add(pos[(kind, i)], e, "length", fac)
            if emap.gaps:  # every gap's complex-step derivative from one gap-model call
                slots = emap.gaps
                s_m = np.array([sl.s_model for sl in slots])
                h = _CSTEP * s_m
                dcaps = self._gap_pis(
                    np.array([sl.w_in for sl in slots]),
                    np.array([sl.w_out for sl in slots]),
                    s_m + 1j * h,
                )
                for k, slot in enumerate(slots):
                    idx = pos[(Dim.GAP, slot.position)]
                    for q, name in enumerate(_PI_NAMES):
                        d = np.imag(dcaps[q][k]) / h[k] * slot.ds_model
                        acc.add(
                            idx, slot.element, name, d * (slot.c_series_factor if q == 0 else 1.0)
                        )
            if self.free_widths:
                _, _, _, widths = self.split(p)
                self._width_gradient(widths, emap, acc)
            ds11, ds21 = acc.total(len(self.dims), g.stacked11, g.stacked21)
        return Response(g.s11, g.s21, ds11, ds21)

    def _width_gradient(self, widths: NDArray, emap: ElementMap, acc: _Chain) -> None:
        med, f = self.medium, self.f
        kl = 1.0 if self.adjust is None else self.adjust.loss_factor
        n = self.order
        w = np.asarray(widths, float)  # (n,) or (B, n)
        h = _FD * w
        # γ, z_c at every width ± its step: one call of the line model, (2n, [B,] nf)
        steps = np.moveaxis(np.concatenate([w + h, w - h], axis=-1), -1, 0)[..., None]
        gam, zc = line_properties(med, steps, f, kl)
        hh = np.moveaxis(h, -1, 0)[..., None]
        dgam = (gam[:n] - gam[n:]) / (2 * hh)
        dz = (zc[:n] - zc[n:]) / (2 * hh)
        col = [self._position[(Dim.WIDTH, j)] for j in range(n)]
        for e, j in emap.lines:
            acc.add_spectrum(col[j], e, "gamma", dgam[j])
            acc.add_spectrum(col[j], e, "z_c", dz[j])
        # every gap side that is a resonator, both steps: one call of the gap model
        moves = [
            (slot, side, res)
            for slot in emap.gaps
            for side, res in enumerate(slot.resonators)
            if res is not None
        ]
        if moves:
            w_in = np.array([m[0].w_in for m in moves] * 2)
            w_out = np.array([m[0].w_out for m in moves] * 2)
            s_m = np.array([m[0].s_model for m in moves] * 2)
            k = len(moves)
            for i, (_, side, res) in enumerate(moves):
                target = w_in if side == 0 else w_out
                target[i] = w[..., res] + h[..., res]
                target[k + i] = w[..., res] - h[..., res]
            caps = self._gap_pis(w_in, w_out, s_m)
            for i, (slot, _, res) in enumerate(moves):
                for q, name in enumerate(_PI_NAMES):
                    d = (np.real(caps[q][i]) - np.real(caps[q][k + i])) / (2 * h[..., res])
                    acc.add(
                        col[res], slot.element, name, d * (slot.c_series_factor if q == 0 else 1.0)
                    )
        if emap.open_ends:  # a tapped stub's open-end extension follows its resonator's width
            dl = (open_end_extensions(med, w + h) - open_end_extensions(med, w - h)) / (2 * h)
            for e, j in emap.open_ends:
                acc.add(col[j], e, "length", dl[..., j])


_PI_NAMES = ("c_series", "c_shunt_in", "c_shunt_out")


class _Chain:
    """The chain rule from element parameters to design dimensions, assembled in a few array
    operations: d S / d dim = Σ (d param / d dim) · d S / d param, where each factor is a number
    (a length, a capacitance's derivative) or a spectrum (a line's γ or z_c per frequency); for
    a batch of B designs, one of each per design."""

    def __init__(self, index: dict[tuple[int, str], int], batch: int | None = None) -> None:
        self.index = index
        self.batch = batch
        self.dims: list[int] = []
        self.rows: list[int] = []
        self.factors: list[Values] = []
        self.s_dims: list[int] = []
        self.s_rows: list[int] = []
        self.spectra: list[NDArray] = []

    def add(self, dim: int, element: int, name: str, factor: Values) -> None:
        self.dims.append(dim)
        self.rows.append(self.index[(element, name)])
        self.factors.append(np.real(factor) if self.batch else float(np.real(factor)))

    def add_spectrum(self, dim: int, element: int, name: str, factor: NDArray) -> None:
        self.s_dims.append(dim)
        self.s_rows.append(self.index[(element, name)])
        self.spectra.append(factor)

    def total(
        self, n_dims: int, d11: NDArray, d21: NDArray
    ) -> tuple[NDArray[np.complex128], NDArray[np.complex128]]:
        """d S11, d S21 per dimension: ``(n_dims, nf)``, or ``(B, n_dims, nf)`` for a batch."""
        both = np.stack([d11, d21])  # (2, P, [B,] nf)
        if self.batch is None:
            weights = np.zeros((n_dims, both.shape[1]))
            np.add.at(weights, (self.dims, self.rows), np.asarray(self.factors, float))
            out = weights @ both  # (2, n_dims, nf)
            if self.spectra:
                part = np.stack(self.spectra) * both[:, self.s_rows]
                for k in range(2):
                    np.add.at(out[k], self.s_dims, part[k])
            return out[0], out[1]
        b, nf = self.batch, both.shape[-1]
        factors = np.array([np.broadcast_to(x, (b,)) for x in self.factors])  # (M, B)
        wts = np.zeros((n_dims, both.shape[1], b))
        np.add.at(wts, (self.dims, self.rows), factors)
        out = np.einsum("dpb,kpbf->kbdf", wts, both)  # (2, B, n_dims, nf)
        if self.spectra:
            spectra = np.array([np.broadcast_to(x, (b, nf)) for x in self.spectra])
            part = spectra * both[:, self.s_rows]  # (2, M, B, nf)
            for k in range(2):
                np.add.at(np.moveaxis(out[k], 1, 0), self.s_dims, part[k])
        return out[0], out[1]


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
    adjust: Adjustments | None = None,
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
        None if free_widths else layout.widths,
        adjust,
    )


__all__ = [
    "IdealFilterModel",
    "Response",
    "StripFilterModel",
    "strip_model_for",
]
