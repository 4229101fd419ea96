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
radiation conductances (open microstrip) follow the widths through the same line properties.
The builder's :class:`~refine.circuit.builder.ElementMap` says which dimension moves which
element.
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
    column,
    ideal_elements,
    line_properties,
    parallel_build,
    scale_line,
    scale_modes,
)
from refine.circuit.layout import Layout, ParallelLayout
from refine.physics import radiation
from refine.physics.constants import C0
from refine.physics.coupled import coupled_medium
from refine.physics.microstrip import Microstrip
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
        self._fixed_props: list[tuple[NDArray, NDArray]] | None = None

    def _fixed_line_props(self) -> list[tuple[NDArray, NDArray]]:
        """The resonators' (γ, z_c) when widths are not free: they depend on the widths and
        the frequencies only, so they are computed once per model, each distinct width once."""
        if self._fixed_props is None:
            u, back = np.unique(np.asarray(self.fixed_widths, float), return_inverse=True)
            gam, zc = self.medium.line_properties(u[:, None], self.f)
            # the factors after the pick: per-design factors (B,) make each line (B, nf)
            self._fixed_props = [scale_line(gam[j], zc[j], self.adjust) for j in back]
        return self._fixed_props

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

    def _build(
        self,
        p: NDArray,
        track: bool,
        line_props: list[tuple[NDArray, NDArray]] | None = None,
    ) -> tuple[list[cascade.Element], ElementMap | None]:
        gaps, lengths, taps, widths = self.split(np.asarray(p, float))
        if line_props is None and not self.free_widths:
            line_props = self._fixed_line_props()
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
            line_props=line_props,
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
            if not gradient:
                els, _ = self._build(p, False)
                t = cascade.s11_s21(els, self.f, self.z_ref)
                return Response(t.s11, t.s21)
            steps = self._width_steps(p) if self.free_widths else None
            els, emap = self._build(p, True, None if steps is None else steps.props)
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
            self._gap_gradient(emap, acc, steps)
            if steps is not None:
                self._width_gradient(steps, emap, acc)
                if self._radiates:
                    self._radiation_gradient(steps, emap, els, acc)
            ds11, ds21 = acc.total(len(self.dims), g.stacked11, g.stacked21, g.stacked)
        return Response(g.s11, g.s21, ds11, ds21)

    def _width_steps(self, p: NDArray) -> _WidthSteps:
        """Every resonator's width and its two central-difference steps, with the line
        properties of all three from one call of the line model (the nominal ones build the
        circuit, the steps give d γ/d w and d z_c/d w)."""
        _, _, _, widths = self.split(p)
        w = np.asarray(widths, float)  # (n,) or (B, n)
        h = _FD * w
        n = self.order
        adj = self.adjust
        if w.ndim == 1:  # one design: each distinct width once (resonators often share one)
            u, back = np.unique(w, return_inverse=True)
            hu = _FD * u
            gam, zc = line_properties(
                self.medium, np.concatenate([u, u + hu, u - hu])[:, None], self.f, adj
            )
            m = u.size
            dgam = (gam[m : 2 * m] - gam[2 * m :]) / (2 * hu[:, None])
            dz = (zc[m : 2 * m] - zc[2 * m :]) / (2 * hu[:, None])
            return _WidthSteps(w, h, [(gam[j], zc[j]) for j in back], dgam[back], dz[back])
        all_w = np.moveaxis(np.concatenate([w, w + h, w - h], axis=-1), -1, 0)[..., None]
        gam, zc = line_properties(self.medium, all_w, self.f, adj)  # (3n, B, nf)
        hh = np.moveaxis(h, -1, 0)[..., None]
        return _WidthSteps(
            w,
            h,
            [(gam[j], zc[j]) for j in range(n)],
            (gam[n : 2 * n] - gam[2 * n :]) / (2 * hh),
            (zc[n : 2 * n] - zc[2 * n :]) / (2 * hh),
        )

    def _gap_gradient(self, emap: ElementMap, acc: _Chain, steps: _WidthSteps | None) -> None:
        """Every gap's derivatives from one gap-model call: with respect to its width by complex
        step, and (free widths) to the widths on its two sides by central difference."""
        slots = emap.gaps
        if not slots:
            return
        s_m = np.array([sl.s_model for sl in slots])
        w_in = np.array([sl.w_in for sl in slots])
        w_out = np.array([sl.w_out for sl in slots])
        h = _CSTEP * s_m
        parts_in, parts_out, parts_s = [w_in], [w_out], [s_m + 1j * h]
        # every gap side that is a resonator, stepped up and down in width
        moves = [
            (slot, side, res)
            for slot in emap.gaps
            for side, res in enumerate(slot.resonators)
            if res is not None
        ]
        if steps is not None and moves:
            k = len(moves)
            m_in = np.array([m[0].w_in for m in moves] * 2)
            m_out = np.array([m[0].w_out for m in moves] * 2)
            m_s = np.array([m[0].s_model for m in moves] * 2)
            w, hw = steps.w, steps.h
            for i, (_, side, res) in enumerate(moves):
                target = m_in if side == 0 else m_out
                target[i] = w[..., res] + hw[..., res]
                target[k + i] = w[..., res] - hw[..., res]
            parts_in.append(m_in)
            parts_out.append(m_out)
            parts_s.append(m_s.astype(complex))
        caps = self._gap_pis(
            np.concatenate(parts_in), np.concatenate(parts_out), np.concatenate(parts_s)
        )
        pos = self._position
        g = len(slots)
        elements = [sl.element for sl in slots]
        dims = [pos[(Dim.GAP, sl.position)] for sl in slots]
        ds = np.array([sl.ds_model for sl in slots])
        factor = np.array([sl.c_series_factor for sl in slots])  # (g,), or (g, B) per design
        if ds.ndim > 1 and factor.ndim == 1:
            factor = factor[:, None]
        shunt = 1.0 if self.adjust is None else self.adjust.c_shunt_factor  # a number or (B,)
        for q, name in enumerate(_PI_NAMES):
            d = np.imag(caps[q][:g]) / h * ds
            acc.add_many(dims, elements, name, d * factor if q == 0 else d * shunt)
        if steps is None or not moves:
            return
        k = len(moves)
        owners = np.array([m[2] for m in moves])  # the resonator each stepped side belongs to
        hw = np.moveaxis(steps.h, -1, 0)[owners]  # (k,) or (k, B)
        elements = [m[0].element for m in moves]
        dims = [pos[(Dim.WIDTH, int(j))] for j in owners]
        factor = np.array([m[0].c_series_factor for m in moves])
        if hw.ndim > 1 and factor.ndim == 1:
            factor = factor[:, None]
        for q, name in enumerate(_PI_NAMES):
            d = (np.real(caps[q][g : g + k]) - np.real(caps[q][g + k :])) / (2 * hw)
            acc.add_many(dims, elements, name, d * factor if q == 0 else d * shunt)

    def _width_gradient(self, steps: _WidthSteps, emap: ElementMap, acc: _Chain) -> None:
        """The widths' derivatives through the lines' γ, z_c and the stubs' open ends (the gaps'
        part is :meth:`_gap_gradient`'s)."""
        col = [self._position[(Dim.WIDTH, j)] for j in range(self.order)]
        if emap.lines:
            elements = [e for e, _ in emap.lines]
            owners = [j for _, j in emap.lines]
            dims = [col[j] for j in owners]
            acc.add_spectra(dims, elements, "gamma", steps.dgamma[owners])
            acc.add_spectra(dims, elements, "z_c", steps.dz_c[owners])
        if emap.open_ends:  # a tapped stub's open-end extension follows its resonator's width
            med, w, h = self.medium, steps.w, steps.h
            m = self.gap_model
            dl = (open_end_extensions(med, w + h, m) - open_end_extensions(med, w - h, m)) / (2 * h)
            for e, j in emap.open_ends:
                acc.add(col[j], e, "length", dl[..., j])

    @property
    def _radiates(self) -> bool:
        return isinstance(self.medium, Microstrip) and self.medium.radiates

    def _radiation_gradient(
        self, steps: _WidthSteps, emap: ElementMap, els: list[cascade.Element], acc: _Chain
    ) -> None:
        """The widths' derivatives through the radiation conductances: a gap's conductance is
        the geometric mean of its sides' (d ln G_gap = ½ d ln G_side), a tapped open end's
        imaginary extension δ is its own resonator's."""
        h_sub = self.medium.substrate.height
        hh = np.moveaxis(steps.h, -1, 0)[..., None]  # (n, [B,] 1)
        gam = np.stack([g for g, _ in steps.props])
        zc = np.stack([z for _, z in steps.props])
        dg, dz = steps.dgamma, steps.dz_c
        back: slice | NDArray = slice(None)
        if steps.w.ndim == 1:  # one design: each distinct width once (resonators often share one)
            _, first, inverse = np.unique(steps.w, return_index=True, return_inverse=True)
            gam, zc, dg, dz, hh, back = (
                gam[first],
                zc[first],
                dg[first],
                dz[first],
                hh[first],
                inverse,
            )
        m = gam.shape[0]
        g3, d3 = radiation.from_line(
            np.concatenate([gam, gam + dg * hh, gam - dg * hh]),
            np.concatenate([zc, zc + dz * hh, zc - dz * hh]),
            h_sub,
            self.f,
        )
        dlog_g = ((g3[m : 2 * m] - g3[2 * m :]) / (2 * hh * g3[:m]))[back]  # (n, [B,] nf)
        k_rad = 1.0 if self.adjust is None else column(self.adjust.radiation_factor)
        d_delta = (k_rad * (d3[m : 2 * m] - d3[2 * m :]) / (2 * hh))[back]
        omega = 2 * np.pi * self.f
        dims, elements, spectra = [], [], []
        for slot in emap.gaps:
            pi = els[slot.element]
            assert isinstance(pi, cascade.PiNetwork)
            g_gap = -omega * np.imag(np.asarray(pi.c_series))
            for res in slot.resonators:
                if res is not None:
                    dims.append(self._position[(Dim.WIDTH, res)])
                    elements.append(slot.element)
                    spectra.append(-1j * 0.5 * g_gap * dlog_g[res] / omega)
        if dims:
            acc.add_spectra(dims, elements, "c_series", np.stack(spectra))
        if emap.open_ends:
            dims = [self._position[(Dim.WIDTH, j)] for _, j in emap.open_ends]
            elements = [e for e, _ in emap.open_ends]
            acc.add_spectra(
                dims, elements, "length", np.stack([-1j * d_delta[j] for _, j in emap.open_ends])
            )


@dataclass(frozen=True)
class _WidthSteps:
    """Resonator widths ``w``, their central-difference steps ``h`` (both ``(n,)`` or ``(B,
    n)``), the nominal line properties per resonator, and d γ/d w, d z_c/d w ``(n, [B,] nf)``."""

    w: NDArray
    h: NDArray
    props: list[tuple[NDArray, NDArray]]
    dgamma: NDArray
    dz_c: NDArray


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

    def add_many(self, dims: list[int], elements: list[int], name: str, factors: NDArray) -> None:
        """:meth:`add` for many (dimension, element) pairs of one parameter ``name``; ``factors``
        is ``(m,)``, or ``(m, B)`` for a batch."""
        self.dims.extend(dims)
        self.rows.extend(self.index[(e, name)] for e in elements)
        f = np.real(factors)
        self.factors.extend(list(f) if self.batch else f.tolist())

    def add_spectra(
        self, dims: list[int], elements: list[int], name: str, factors: NDArray
    ) -> None:
        """Like :meth:`add_many`, with a spectrum per pair: ``factors`` is ``(m, [B,] nf)``."""
        self.s_dims.extend(dims)
        self.s_rows.extend(self.index[(e, name)] for e in elements)
        self.spectra.append(factors)

    def total(
        self, n_dims: int, d11: NDArray, d21: NDArray, both: NDArray | None = None
    ) -> tuple[NDArray[np.complex128], NDArray[np.complex128]]:
        """d S11, d S21 per dimension: ``(n_dims, nf)``, or ``(B, n_dims, nf)`` for a batch.
        ``both`` is ``d11`` and ``d21`` stacked, when the caller has them so.

        Every term (a factor, or a spectrum, times one parameter's derivative) is formed in
        one product, sorted by dimension and summed per dimension: the
        chain rule's matrix is sparse (a parameter moves one or two dimensions)."""
        if both is None:
            both = np.stack([d11, d21])  # (2, P, [B,] nf)
        tail = both.shape[2:]
        if self.batch is None:  # the factors as a column against the (.., nf) rows
            coef = np.asarray(self.factors, float).reshape(-1, *([1] * len(tail)))
        else:
            fac = np.array([np.broadcast_to(x, (self.batch,)) for x in self.factors])
            coef = fac.reshape(len(self.factors), self.batch, 1)
        dims = np.asarray(self.dims + self.s_dims, np.intp)
        rows = np.asarray(self.rows + self.s_rows, np.intp)
        if dims.size == 0:
            out = np.zeros((2, *tail[:-1], n_dims, tail[-1]), complex)
            return out[0], out[1]
        m = len(self.dims)
        terms = np.empty((2, dims.size, *tail), complex)
        terms[:, :m] = coef * both[:, rows[:m]]
        if self.spectra:
            block = np.concatenate([np.broadcast_to(x, (x.shape[0], *tail)) for x in self.spectra])
            terms[:, m:] = block * both[:, rows[m:]]
        order = np.argsort(dims, kind="stable")
        d_sorted = dims[order]
        starts = np.flatnonzero(np.r_[True, d_sorted[1:] != d_sorted[:-1]])
        terms = terms[:, order]
        out = np.zeros((2, n_dims, *tail), complex)
        ends = [*starts[1:].tolist(), dims.size]
        for a, b in zip(starts.tolist(), ends, strict=True):  # faster than np.add.reduceat here
            out[:, d_sorted[a]] = terms[:, a] if b == a + 1 else terms[:, a:b].sum(axis=1)
        if self.batch is not None:
            out = np.moveaxis(out, 2, 1)  # (2, B, n_dims, nf)
        return out[0], out[1]


_SECTION_NAMES = ("gamma_even", "gamma_odd", "z_even", "z_odd")


@dataclass
class ParallelFilterModel:
    """Parallel-coupled filter on a strip medium (:func:`refine.circuit.builder.parallel_build`):
    parameters ``p`` = spacings s_1..s_n+1, lengths l_1..l_n+1, widths w_1..w_n+1 (SI).

    Gradient: lengths exactly through the cascade; widths and spacings through each section's
    even/odd γ and impedance (central differences, relative step 1e-6, all sections and steps in
    one call of the coupled-line model) and, for widths, the open-end extension, chained
    through the cascade's analytic derivatives. One design at a time (a batch is evaluated
    design by design)."""

    medium: StripMedium
    gap_model: str
    z_ref: float
    order: int
    feed_width: float
    f: NDArray[np.float64]
    #: factors on (Z_even, Z_odd, ε_eff even, ε_eff odd) of every section: a corner of the
    #: coupled-line model's uncertainty (None: the nominal model)
    factors: tuple[float, float, float, float] | None = None
    feed_stub: float = 0.0  # single strip at the end sections' widths beyond them (fixed)
    dims: list[tuple[Dim, int]] = field(init=False)
    names: list[str] = field(init=False)

    def __post_init__(self) -> None:
        m = self.order + 1
        self.dims = (
            [(Dim.GAP, k) for k in range(m)]
            + [(Dim.LENGTH, k) for k in range(m)]
            + [(Dim.WIDTH, k) for k in range(m)]
        )
        self.names = [
            {Dim.GAP: "spacing", Dim.LENGTH: "length", Dim.WIDTH: "width"}[kind] + f" {k + 1}"
            for kind, k in self.dims
        ]

    @property
    def sections(self) -> int:
        return self.order + 1

    def split(self, p: NDArray) -> tuple[NDArray, NDArray, NDArray]:
        """Spacings, lengths and widths of ``p``."""
        m = self.sections
        return p[..., :m], p[..., m : 2 * m], p[..., 2 * m :]

    def vector(self, layout: ParallelLayout) -> NDArray:
        return np.concatenate(
            [np.asarray(x, float) for x in (layout.spacings, layout.lengths, layout.widths)]
        )

    def layout(self, p: NDArray) -> ParallelLayout:
        s, ln, w = self.split(np.asarray(p, float))
        return ParallelLayout(self.feed_width, tuple(w), tuple(s), tuple(ln), self.feed_stub)

    def response(self, p: NDArray, gradient: bool = False) -> Response:
        """S11, S21 ``(nf,)`` and, with ``gradient``, their derivatives ``(n_params, nf)``;
        a batch ``(B, n_params)`` gives ``(B, nf)`` and ``(B, n_params, nf)``."""
        p = np.asarray(p, float)
        if p.ndim == 2:
            rs = [self.response(q, gradient) for q in p]
            if not gradient:
                return Response(np.stack([r.s11 for r in rs]), np.stack([r.s21 for r in rs]))
            return Response(
                np.stack([r.s11 for r in rs]),
                np.stack([r.s21 for r in rs]),
                np.stack([r.ds11 for r in rs]),  # type: ignore[misc]
                np.stack([r.ds21 for r in rs]),  # type: ignore[misc]
            )
        s, ln, w = self.split(p)
        m = self.sections
        with validity.unchecked():
            if not gradient:
                chain = parallel_build(
                    self.medium, self.gap_model, w, s, ln, self.f, self.factors, self.feed_stub
                ).elements
                t = cascade.s11_s21(chain, self.f, self.z_ref)
                return Response(t.s11, t.s21)
            hw, hs = _FD * w, _FD * s
            # nominal, width up/down, spacing up/down: 5 m sections in one model call
            ws = np.concatenate([w, w + hw, w - hw, w, w])
            ss = np.concatenate([s, s, s, s + hs, s - hs])
            props = scale_modes(
                coupled_medium(self.medium).mode_properties(ws[:, None], ss[:, None], self.f),
                self.factors,
            )
            dl3 = open_end_extensions(
                self.medium, np.concatenate([w, w + hw, w - hw]), self.gap_model
            )
            dl, ddl = dl3[:m], (dl3[m : 2 * m] - dl3[2 * m :]) / (2 * hw)
            nominal = [x[:m] for x in props]
            ge, go, ze, zo = nominal
            els: list[cascade.Element] = [
                cascade.CoupledSection(ge[k], go[k], ze[k], zo[k], ln[k] + dl[k]) for k in range(m)
            ]
            wrt = {"length", *_SECTION_NAMES}
            first = 0
            if self.feed_stub > 0.0:  # the stubs follow the end sections' widths
                ends = np.array([w[0], w[0] + hw[0], w[0] - hw[0], w[-1], w[-1] + hw[-1]])
                ends = np.append(ends, w[-1] - hw[-1])
                g1, z1 = line_properties(self.medium, ends[:, None], self.f)
                els.insert(0, cascade.Line(g1[0], z1[0], self.feed_stub))
                els.append(cascade.Line(g1[3], z1[3], self.feed_stub))
                wrt |= {"gamma", "z_c"}
                first = 1
            g = cascade.s11_s21_gradient(els, self.f, self.z_ref, wrt)
        ds11 = np.zeros((3 * m, self.f.size), complex)
        ds21 = np.zeros((3 * m, self.f.size), complex)
        for k in range(m):
            d11, d21 = g.ds11[k + first], g.ds21[k + first]
            # lengths
            ds11[m + k], ds21[m + k] = d11["length"], d21["length"]
            # widths: the mode properties and the open-end extension
            ds11[2 * m + k] = d11["length"] * ddl[k]
            ds21[2 * m + k] = d21["length"] * ddl[k]
            for q, name in enumerate(_SECTION_NAMES):
                x = props[q]
                dw = (x[m + k] - x[2 * m + k]) / (2 * hw[k])
                dsp = (x[3 * m + k] - x[4 * m + k]) / (2 * hs[k])
                ds11[2 * m + k] += d11[name] * dw
                ds21[2 * m + k] += d21[name] * dw
                ds11[k] += d11[name] * dsp
                ds21[k] += d21[name] * dsp
        if first:
            for e, (row, base) in ((0, (2 * m, 0)), (len(els) - 1, (3 * m - 1, 3))):
                k = 0 if e == 0 else m - 1
                for name, x in (("gamma", g1), ("z_c", z1)):
                    d = (x[base + 1] - x[base + 2]) / (2 * hw[k])
                    ds11[row] += g.ds11[e][name] * d
                    ds21[row] += g.ds21[e][name] * d
        return Response(g.s11, g.s21, ds11, ds21)


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
    "ParallelFilterModel",
    "Response",
    "StripFilterModel",
    "strip_model_for",
]
