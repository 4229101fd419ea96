"""The one element builder: copper dimensions + medium + gap model -> cascade elements.

Every circuit refine evaluates is built here: the seed's check, the refiner's model and its
gradient, Monte Carlo yield, yield centring, gap voltages, the report, the gap-model spread and
the EM-corrected model. A new element kind is added in this one place.

A gap-coupled filter is the chain::

    gap_0 · line_1 · gap_1 · line_2 · ... · line_n · gap_n

with the port reference planes at the outer edges of the end gaps (the feed lines are matched
to ``z_ref`` and not part of the two-port). A tapped filter is::

    stub(t_in + Δl) ‖ line_1(l_1 - t_in) · gap_1 · ... · gap_(n-1) · line_n(l_n - t_out) ‖ stub(t_out + Δl)

the feed joining the first resonator at distance t from its outer open end: seen from the feed
the resonator is an open stub of length t (plus the open-end extension Δl of
Kirschning–Jansen–Koster 1981) in shunt, followed by the rest of the resonator to the first
gap; mirrored at the output (for one resonator, both taps on the same line). The T-junction's
own parasitics are omitted (stated in the report); the port reference plane is at the tap.
A gap model referenced to the gap centre (stripline) gets a half-gap line on each side.

On microstrip in an open enclosure (:attr:`refine.physics.microstrip.Microstrip.radiates`) the
copper radiates (:mod:`refine.physics.radiation`): every gap's series capacitance becomes the
admittance jωC_g + G (G the radiation conductance across the gap, at the geometric mean of its
sides'), carried as the complex capacitance C_g − jG/ω; every open end of a tapped resonator
gets the imaginary extension −jG·Z0/β beside its Δl.

Shapes: ``widths`` and ``lengths`` are ``(..., n)``, ``gaps`` ``(..., n_gaps)``, ``taps``
``(..., 2)``, ``feed`` ``(...)``; the elements broadcast against ``(..., nf)`` and one cascade
call evaluates the whole batch. With ``track`` the builder also returns an :class:`ElementMap`:
which dimension moves which element, for the exact gradient of :mod:`refine.circuit.model`.
"""

from __future__ import annotations

import enum
import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine._typing import Values
from refine.circuit import cascade
from refine.physics import radiation
from refine.physics.coupled import coupled_medium
from refine.physics.ideal import IdealTEM
from refine.physics.microstrip import Microstrip
from refine.physics.strip import (
    CENTRE_REFERENCED,
    StripMedium,
    check_gap_model,
    gap_capacitances,
    open_end_extensions,
)
from refine.spec.coupling import Coupling


class Dim(enum.Enum):
    """The kinds of copper dimension a layout has."""

    GAP = "gap"
    LENGTH = "length"
    TAP = "tap"
    WIDTH = "width"


@dataclass(frozen=True)
class Adjustments:
    """Corrections applied to the circuit model on top of its closed forms: the preassigned
    parameters of implicit space mapping (:mod:`refine.fullwave.spacemap`), and the place a
    calibration enters.

    c_series_factors : multiply each gap's series capacitance (per gap position).
    gap_offsets : metres taken off each drawn gap before the gap model sees it; the effective
        gap never falls below a tenth of the drawn one.
    length_offsets : metres added to each resonator's length; tap_offsets : to each tap.
    loss_factor : multiplies every line's attenuation constant.
    c_shunt_factor : multiplies every gap's shunt capacitances.
    radiation_factor : multiplies every radiation conductance (open microstrip).
    eps_eff_factor : multiplies every line's effective permittivity (its phase constant by the
        square root; the attenuation constant is left alone: ``loss_factor`` scales that).
    z0_factor : multiplies every line's characteristic impedance.

    For a batch of B designs the five factors of the model's uncertainty may differ per
    design (:func:`per_design`): ``c_series_factors`` ``(B, n_gaps)``, ``c_shunt_factor``,
    ``radiation_factor``, ``eps_eff_factor`` and ``z0_factor`` ``(B,)``; the uncertainty
    corners of one design are then one batched evaluation of B copies of it
    (:mod:`refine.optimise.robust`).
    """

    c_series_factors: tuple[float, ...] | NDArray | None = None
    gap_offsets: tuple[float, ...] | None = None
    length_offsets: tuple[float, ...] | None = None
    tap_offsets: tuple[float, float] | None = None
    loss_factor: float = 1.0
    c_shunt_factor: float | NDArray = 1.0
    radiation_factor: float | NDArray = 1.0
    eps_eff_factor: float | NDArray = 1.0
    z0_factor: float | NDArray = 1.0

    @property
    def varies_per_design(self) -> bool:
        """Whether any factor differs per design of a batch (an array, not a number)."""
        return bool(
            np.ndim(self.c_shunt_factor)
            or np.ndim(self.radiation_factor)
            or np.ndim(self.eps_eff_factor)
            or np.ndim(self.z0_factor)
            or (self.c_series_factors is not None and np.ndim(self.c_series_factors) > 1)
        )


#: the factors of :class:`Adjustments` that may differ per design of a batch (besides the
#: gaps' series factors)
PER_DESIGN = ("c_shunt_factor", "radiation_factor", "eps_eff_factor", "z0_factor")


def per_design(adjustments: Sequence[Adjustments | None]) -> Adjustments:
    """One :class:`Adjustments` for a batch whose design ``b`` carries ``adjustments[b]``'s
    series, shunt, radiation and line factors (None: the nominal model). The others (offsets,
    loss) must be alike: they are the same for every design of a batch."""
    adj = [a or Adjustments() for a in adjustments]
    if not adj:
        raise ValueError("per_design needs at least one design's adjustments")
    shared = ("gap_offsets", "length_offsets", "tap_offsets", "loss_factor")
    for name in shared:
        if any(getattr(a, name) != getattr(adj[0], name) for a in adj[1:]):
            raise ValueError(f"per_design: {name} must be the same for every design")
    n_gaps = {len(a.c_series_factors) for a in adj if a.c_series_factors is not None}
    if len(n_gaps) > 1:
        raise ValueError(f"per_design: c_series_factors of different lengths {sorted(n_gaps)}")
    series = None
    if n_gaps:
        g = n_gaps.pop()
        series = np.array(
            [np.ones(g) if a.c_series_factors is None else a.c_series_factors for a in adj], float
        )
    first = adj[0]
    return Adjustments(
        c_series_factors=series,
        gap_offsets=first.gap_offsets,
        length_offsets=first.length_offsets,
        tap_offsets=first.tap_offsets,
        loss_factor=first.loss_factor,
        **{k: np.array([float(getattr(a, k)) for a in adj]) for k in PER_DESIGN},
    )


def column(x: float | NDArray) -> Values:
    """A per-design factor ``(B,)`` as a column ``(B, 1)`` against ``(B, nf)`` spectra; a
    number stays a number."""
    a = np.asarray(x, float)
    return float(a) if a.ndim == 0 else a[:, None]


@dataclass(frozen=True)
class GapSlot:
    """One series gap of a tracked build: its π-network element, its position in the gap list,
    the strip widths on its two sides, the resonators there (None for a feed), the gap width the
    model saw and d(that width)/d(drawn gap), and the factor on its series capacitance."""

    element: int
    position: int
    w_in: Values  # a number for one design, ``(B,)`` for a batch of B designs
    w_out: Values
    resonators: tuple[int | None, int | None]
    s_model: Values
    ds_model: Values
    c_series_factor: Values  # a number, or ``(B,)`` for per-design factors


@dataclass
class ElementMap:
    """Which dimension moves which element of a tracked build.

    lengths : per element, ``(kind, index, d length / d dimension)`` for each dimension its
        physical length follows.
    gaps : one :class:`GapSlot` per series gap.
    lines : ``(element, resonator)`` for every line or stub whose γ and z_c are those of the
        resonator's width.
    open_ends : ``(element, resonator)`` for every stub whose length includes the resonator's
        open-end extension.
    """

    lengths: list[list[tuple[Dim, int, Values]]] = field(default_factory=list)
    gaps: list[GapSlot] = field(default_factory=list)
    lines: list[tuple[int, int]] = field(default_factory=list)
    open_ends: list[tuple[int, int]] = field(default_factory=list)


@dataclass
class Built:
    """Elements of a circuit and, for a tracked build, its :class:`ElementMap`."""

    elements: list[cascade.Element]
    map: ElementMap | None = None


def line_properties(
    medium: StripMedium, width: ArrayLike, f: NDArray, adjust: Adjustments | None = None
) -> tuple[NDArray, NDArray]:
    """γ(f), z_c(f) of a strip of ``width`` with ``adjust``'s line factors (the attenuation
    scaled by its ``loss_factor``, ε_eff and z_c by its line factors: per-design factors
    ``(B,)`` act on spectra ``(..., B, nf)``)."""
    gamma, z_c = medium.line_properties(width, f)
    return scale_line(gamma, z_c, adjust)


def scale_line(gamma: NDArray, z_c: NDArray, adjust: Adjustments | None) -> tuple[NDArray, NDArray]:
    """(γ, z_c) with ``adjust``'s loss and line factors applied (see :class:`Adjustments`)."""
    if adjust is None:
        return gamma, z_c
    kl, ke, kz = adjust.loss_factor, column(adjust.eps_eff_factor), column(adjust.z0_factor)
    if kl != 1.0 or np.any(np.asarray(ke) != 1.0):
        gamma = kl * gamma.real + 1j * gamma.imag * np.sqrt(ke)
    if np.any(np.asarray(kz) != 1.0):
        z_c = z_c * kz
    return gamma, z_c


def build(
    coupling: Coupling | str,
    medium: StripMedium,
    gap_model: str,
    feed: ArrayLike,
    widths: ArrayLike,
    gaps: ArrayLike,
    lengths: ArrayLike,
    taps: ArrayLike | None,
    f: ArrayLike,
    adjust: Adjustments | None = None,
    track: bool = False,
    validate: bool = True,
    line_props: Sequence[tuple[NDArray, NDArray]] | None = None,
) -> Built:
    """The cascade elements of an end-coupled filter (see the module docstring for the circuit
    and the shapes). ``track`` (one design, or a 1-D batch) also returns the :class:`ElementMap`;
    ``validate`` False skips the argument checks for a caller that made them once;
    ``line_props`` are the resonators' (γ, z_c) when the caller computed them already (with the
    loss and line factors of ``adjust`` applied: :func:`scale_line`)."""
    coupling = Coupling(coupling)
    f = v.frequencies("f", f) if validate else np.asarray(f, float)
    check_gap_model(medium, gap_model)
    widths_a = v.positive_array("widths", widths) if validate else np.asarray(widths, float)
    gaps_a = v.positive_array("gaps", gaps) if validate else np.asarray(gaps, float)
    lengths_a = v.positive_array("lengths", lengths) if validate else np.asarray(lengths, float)
    n = widths_a.shape[-1]
    n_gaps = coupling.n_gaps(n)
    if lengths_a.shape[-1] != n or gaps_a.shape[-1] != n_gaps:
        raise ValueError(
            f"a {coupling}-coupled filter with {n} resonators needs {n} lengths and {n_gaps} "
            f"gaps, got {lengths_a.shape[-1]} and {gaps_a.shape[-1]}"
        )
    taps_a: NDArray | None = None
    if coupling is Coupling.TAP:
        if taps is None:
            raise ValueError("a tapped filter needs two tap positions")
        taps_a = v.positive_array("taps", taps) if validate else np.asarray(taps, float)
        if taps_a.shape[-1] != 2:
            raise ValueError(f"a tapped filter needs 2 taps, got {taps_a.shape[-1]}")
    if track and widths_a.ndim > 2:
        raise ValueError("a tracked build is for one design or a 1-D batch: widths (n,) or (B, n)")
    adj = adjust or Adjustments()
    if adj.length_offsets is not None:
        lengths_a = lengths_a + np.asarray(adj.length_offsets, float)
    if taps_a is not None and adj.tap_offsets is not None:
        taps_a = taps_a + np.asarray(adj.tap_offsets, float)
    s_model, ds_model = gaps_a, None
    if adj.gap_offsets is not None:
        shrunk = gaps_a - np.asarray(adj.gap_offsets, float)
        floor = 0.1 * gaps_a
        s_model = np.maximum(shrunk, floor)
        ds_model = np.where(shrunk > floor, 1.0, 0.1)
    if widths_a.ndim == 1 and adj.varies_per_design:
        raise ValueError("per-design adjustments need a batch of designs: widths (B, n)")
    # one design: scalars (the numbers of the optimiser's inner loop); a batch: (..., 1) columns
    batched = widths_a.ndim > 1

    def pick(x: NDArray, j: int) -> Values:
        return x[..., j, None] if batched else x[j]

    def per_design(x: Values) -> Values:  # a column (B, 1) -> (B,); a number stays a number
        if batched:
            return np.broadcast_to(np.asarray(x, float), (*widths_a.shape[:-1], 1))[..., 0]
        return float(np.asarray(x).ravel()[0])

    w = [pick(widths_a, j) for j in range(n)]
    props = (
        list(line_props)
        if line_props is not None
        else _line_properties_all(medium, widths_a, f, adj)
    )
    radiates = isinstance(medium, Microstrip) and medium.radiates
    f_arr = np.asarray(f, float)
    omega = 2 * np.pi * f_arr
    rad_cache: dict[object, tuple[NDArray, NDArray]] = {}

    def rad(j: int | None) -> tuple[NDArray, NDArray]:  # (G, δ) of resonator j, or the feed
        # one computation per distinct strip width (resonators often share one)
        key: object = "feed" if j is None else (j if batched else float(np.asarray(w[j], float)))
        if key not in rad_cache:
            g, zc = feed_props() if j is None else props[j]
            g_end, delta = radiation.from_line(g, zc, medium.substrate.height, f_arr)
            k = column(adj.radiation_factor)
            rad_cache[key] = (k * g_end, k * delta)
        return rad_cache[key]

    # every gap's π-network from one call of the gap model (the sides' widths stacked)
    feed_a = np.asarray(v.positive_array("feed_width", feed) if validate else feed, float)
    if coupling is Coupling.GAP:
        feed_col = np.broadcast_to(feed_a[..., None], (*widths_a.shape[:-1], 1))
        sides_w_a = np.concatenate([feed_col, widths_a, feed_col], axis=-1)
    else:
        sides_w_a = widths_a
    caps = gap_capacitances(medium, gap_model, sides_w_a[..., :-1], sides_w_a[..., 1:], s_model)
    c_series_all = np.asarray(caps.c_series)
    if adj.c_series_factors is not None:
        c_series_all = c_series_all * np.asarray(adj.c_series_factors, float)
    shunt = column(adj.c_shunt_factor)
    c_in_all = np.asarray(caps.c_shunt_in) * shunt
    c_out_all = np.asarray(caps.c_shunt_out) * shunt
    els: list[cascade.Element] = []
    emap = ElementMap() if track else None

    def add(e: cascade.Element, moves: list[tuple[Dim, int, Values]], line_of: int | None) -> None:
        els.append(e)
        if emap is not None:
            emap.lengths.append(moves)
            if line_of is not None:
                emap.lines.append((len(els) - 1, line_of))

    def add_gap(
        pos: int, w_in: Values, w_out: Values, sides: tuple[int | None, int | None]
    ) -> None:
        s = pick(s_model, pos)
        ds = 1.0 if ds_model is None else pick(ds_model, pos)
        factor: Values = (
            1.0 if adj.c_series_factors is None else np.asarray(adj.c_series_factors)[..., pos]
        )
        c_series: Values = pick(c_series_all, pos)
        if radiates:
            c_series = c_series - 1j * np.sqrt(rad(sides[0])[0] * rad(sides[1])[0]) / omega
        pi = cascade.PiNetwork(c_series, pick(c_in_all, pos), pick(c_out_all, pos))
        centred = gap_model in CENTRE_REFERENCED  # half-gap lines on each side of the π-network
        if centred:
            g_in, z_in = props[sides[0]] if sides[0] is not None else feed_props()
            add(cascade.Line(g_in, z_in, 0.5 * s), [(Dim.GAP, pos, 0.5 * ds)], sides[0])
        add(pi, [], None)
        if emap is not None:
            emap.gaps.append(
                GapSlot(
                    len(els) - 1,
                    pos,
                    per_design(w_in),
                    per_design(w_out),
                    sides,
                    per_design(s),
                    per_design(ds),
                    factor,
                )
            )
        if centred:
            g_out, z_out = props[sides[1]] if sides[1] is not None else feed_props()
            add(cascade.Line(g_out, z_out, 0.5 * s), [(Dim.GAP, pos, 0.5 * ds)], sides[1])

    feed_cache: list[tuple[NDArray, NDArray]] = []

    def feed_props() -> tuple[NDArray, NDArray]:
        if not feed_cache:
            fw = feed_a[..., None] if batched else float(feed_a)
            feed_cache.append(line_properties(medium, fw, f, adj))
        return feed_cache[0]

    def add_line(j: int, length: Values, moves: list[tuple[Dim, int, Values]]) -> None:
        add(cascade.Line(props[j][0], props[j][1], length), moves, j)

    def add_stub(j: int, t: Values, i: int) -> None:
        dl: Values = open_end_extensions(medium, w[j], gap_model)
        if radiates:
            dl = dl - 1j * rad(j)[1]
        add(cascade.ShuntOpenStub(props[j][0], props[j][1], t + dl), [(Dim.TAP, i, 1.0)], j)
        if emap is not None:
            emap.open_ends.append((len(els) - 1, j))

    if coupling is Coupling.GAP:
        feed_w = feed_a[..., None] if batched else float(feed_a)
        sides_w = [feed_w, *w, feed_w]
        for k in range(n + 1):
            add_gap(k, sides_w[k], sides_w[k + 1], coupling.sides(k, n))
            if k < n:
                add_line(k, pick(lengths_a, k), [(Dim.LENGTH, k, 1.0)])
    else:
        assert taps_a is not None
        t_in, t_out = pick(taps_a, 0), pick(taps_a, 1)
        add_stub(0, t_in, 0)
        for j in range(n):
            ln = pick(lengths_a, j)
            moves: list[tuple[Dim, int, Values]] = [(Dim.LENGTH, j, 1.0)]
            if j == 0:
                ln = ln - t_in
                moves.append((Dim.TAP, 0, -1.0))
            if j == n - 1:
                ln = ln - t_out
                moves.append((Dim.TAP, 1, -1.0))
            add_line(j, ln, moves)
            if j < n - 1:
                add_gap(j, w[j], w[j + 1], coupling.sides(j, n))
        add_stub(n - 1, t_out, 1)
    return Built(els, emap)


def scale_modes(
    props: tuple[NDArray, NDArray, NDArray, NDArray],
    factors: tuple[float, float, float, float] | None,
) -> tuple[NDArray, NDArray, NDArray, NDArray]:
    """(γ_even, γ_odd, z_even, z_odd) with the impedances times ``factors[0:2]`` and the
    effective permittivities times ``factors[2:4]`` (β ∝ sqrt ε_eff; the attenuation kept)."""
    if factors is None:
        return props
    ge, go, ze, zo = props
    fze, fzo, fee, feo = factors
    return (
        ge.real + 1j * ge.imag * math.sqrt(fee),
        go.real + 1j * go.imag * math.sqrt(feo),
        ze * fze,
        zo * fzo,
    )


def parallel_build(
    medium: StripMedium,
    gap_model: str,
    widths: ArrayLike,
    spacings: ArrayLike,
    lengths: ArrayLike,
    f: ArrayLike,
    factors: tuple[float, float, float, float] | None = None,
    feed_stub: float = 0.0,
) -> Built:
    """The cascade elements of a parallel-coupled filter: one
    :class:`~refine.circuit.cascade.CoupledSection` per section, input to output, with the
    port reference planes at the outer ends of the first and last sections. ``widths``,
    ``spacings`` and ``lengths`` are ``(..., n + 1)``; each section's even- and odd-mode
    properties come from the medium's coupled-line model (:mod:`refine.physics.coupled`, one
    call for every section), and its length is extended by the single strip's open-end Δl
    (Kirschning-Jansen-Koster on microstrip, or the calibration ``gap_model`` names): each of
    its two strips has one open end, so over the filter every resonator gets its two ends'
    extensions. The feeds' width steps onto the first and last sections are not modelled (the
    report says so). ``factors`` scale every section's (Z_even, Z_odd, ε_eff even, ε_eff odd)
    (:func:`scale_modes`): a corner of the coupled-line model's uncertainty. A ``feed_stub``
    adds that length of single strip at the end section's width before the first section and
    after the last (the port reference planes then sit at the feeds' width steps)."""
    f_a = v.frequencies("f", f)
    w = v.positive_array("widths", widths)
    s = v.positive_array("spacings", spacings)
    ln = v.positive_array("lengths", lengths)
    if not (w.shape[-1] == s.shape[-1] == ln.shape[-1]) or w.shape[-1] < 2:
        raise ValueError(
            "a parallel-coupled filter needs one width, spacing and length per section and at "
            f"least two sections, got {w.shape[-1]}, {s.shape[-1]} and {ln.shape[-1]}"
        )
    cm = coupled_medium(medium)
    cols = np.moveaxis(np.stack(np.broadcast_arrays(w, s, ln)), -1, 1)  # (3, sections, ...)
    ge, go, ze, zo = scale_modes(
        cm.mode_properties(cols[0][..., None], cols[1][..., None], f_a), factors
    )
    dl = open_end_extensions(medium, cols[0], gap_model)
    total = cols[2] + dl
    els: list[cascade.Element] = [
        cascade.CoupledSection(ge[k], go[k], ze[k], zo[k], total[k][..., None])
        for k in range(w.shape[-1])
    ]
    if feed_stub > 0.0:
        for at, wk in ((0, cols[0][0]), (len(els) + 1, cols[0][-1])):
            g1, z1 = line_properties(medium, wk[..., None], f_a)
            els.insert(at, cascade.Line(g1, z1, feed_stub))
    return Built(els)


def gap_elements(
    medium: StripMedium,
    gap_model: str,
    w_in: ArrayLike,
    w_out: ArrayLike,
    s: ArrayLike,
    f: NDArray,
    line_in: tuple[NDArray, NDArray] | None = None,
    line_out: tuple[NDArray, NDArray] | None = None,
    adjust: Adjustments | None = None,
    c_series_factor: float = 1.0,
) -> list[cascade.Element]:
    """Cascade elements of one series gap, reference planes at the two strip ends: its
    π-network, between half-gap lines for a model referenced to the gap centre. ``line_in``,
    ``line_out`` are the strips' (γ, z_c) when the caller has them already."""
    caps = gap_capacitances(medium, gap_model, w_in, w_out, s)
    c_series = caps.c_series
    if c_series_factor != 1.0:
        c_series = np.asarray(c_series) * c_series_factor
    pi = cascade.PiNetwork(c_series, caps.c_shunt_in, caps.c_shunt_out)
    if gap_model not in CENTRE_REFERENCED:
        return [pi]
    g_in, z_in = line_in if line_in is not None else line_properties(medium, w_in, f, adjust)
    g_out, z_out = line_out if line_out is not None else line_properties(medium, w_out, f, adjust)
    half = 0.5 * np.asarray(s)
    return [cascade.Line(g_in, z_in, half), pi, cascade.Line(g_out, z_out, half)]


def _line_properties_all(
    medium: StripMedium, widths: NDArray, f: NDArray, adjust: Adjustments
) -> list[tuple[NDArray, NDArray]]:
    """Line properties of every resonator, ``(..., nf)`` each: for one design from one call of
    the medium's model (for one width when the resonators share it, the common case)."""
    n = widths.shape[-1]
    if widths.ndim > 1:  # a batch (whose substrate may be a batch too): one call per resonator
        return [line_properties(medium, widths[..., j, None], f, adjust) for j in range(n)]
    if np.all(widths == widths[0]):
        one = line_properties(medium, float(widths[0]), f, adjust)
        return [one] * n
    gamma, z_c = line_properties(medium, widths[:, None], f, adjust)
    return [(gamma[j], z_c[j]) for j in range(n)]


def ideal_elements(
    capacitance: ArrayLike, theta: ArrayLike, f0: float, z_c: float, f: ArrayLike
) -> list[cascade.Element]:
    """Ideal-element chain C01 – line θ1 – C12 – ... – line θn – Cn,n+1 on an :class:`IdealTEM`.

    ``capacitance`` is ``(..., n+1)`` and ``theta`` ``(..., n)`` (leading axes are designs); the
    returned elements broadcast against ``(..., nf)``.
    """
    cap = v.positive_array("capacitance", capacitance)
    th = v.positive_array("theta", theta)
    if cap.shape[-1] != th.shape[-1] + 1:
        raise ValueError(
            f"capacitance must have one more entry than theta on the last axis, got "
            f"{cap.shape[-1]} and {th.shape[-1]}"
        )
    medium = IdealTEM(z_c)
    gamma, zc = medium.line_properties(f)
    lengths = medium.length_for_angle(th, f0)
    out: list[cascade.Element] = []
    n = th.shape[-1]
    for i in range(n):
        out.append(cascade.SeriesCapacitor(cap[..., i, None]))
        out.append(cascade.Line(gamma, zc, lengths[..., i, None]))
    out.append(cascade.SeriesCapacitor(cap[..., n, None]))
    return out
