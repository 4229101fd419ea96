"""Layout + medium -> cascade elements -> S-parameters.

A gap-coupled filter is the chain::

    gap_0 · line_1 · gap_1 · line_2 · ... · line_n · gap_n

with the port reference planes at the outer edges of the end gaps (the feed lines are matched
to ``z_ref`` and not part of the two-port). Every array argument may carry leading batch axes:
``widths`` and ``lengths`` are ``(..., n)``, ``gaps`` ``(..., n + 1)``; the elements then
broadcast against ``(..., nf)`` and one cascade call evaluates the whole batch.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Union

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine.circuit import cascade
from refine.circuit.layout import Layout
from refine.physics import discontinuities
from refine.physics.microstrip import Microstrip
from refine.physics.stripline import Stripline

StripMedium = Union[Microstrip, Stripline]  # noqa: UP007 (a runtime alias)

GAP_MODELS: dict[str, tuple[str, ...]] = {
    "microstrip": ("garg-bahl", "kirschning-jansen-koster"),
    "stripline": ("altschuler-oliner",),
}


def medium_kind(medium: StripMedium) -> str:
    if isinstance(medium, Microstrip):
        return "microstrip"
    if isinstance(medium, Stripline):
        return "stripline"
    raise ValueError(f"medium must be a Microstrip or Stripline, got {type(medium).__name__}")


def check_gap_model(medium: StripMedium, model: str) -> str:
    kind = medium_kind(medium)
    return v.one_of(f"gap model for {kind}", model, GAP_MODELS[kind])


def gap_capacitances(
    medium: StripMedium, model: str, w_in: ArrayLike, w_out: ArrayLike, s: ArrayLike
) -> discontinuities.GapCapacitances:
    """π-network capacitances of a gap of width ``s`` between strips ``w_in`` and ``w_out``.

    Garg–Bahl is a symmetric-gap model: for unequal widths its series capacitance is taken at
    the geometric-mean width and each shunt capacitance at its own side's width. For stripline
    the reference planes are at the gap centre (see :func:`gap_elements`).
    """
    sub = medium.substrate
    if model == "garg-bahl":
        w_in = np.asarray(w_in, float)
        w_out = np.asarray(w_out, float)
        mid = discontinuities.garg_bahl_gap(np.sqrt(w_in * w_out), s, sub.height, sub.eps_r)
        if np.array_equal(w_in, w_out):
            return mid
        c_in = discontinuities.garg_bahl_gap(w_in, s, sub.height, sub.eps_r).c_shunt_in
        c_out = discontinuities.garg_bahl_gap(w_out, s, sub.height, sub.eps_r).c_shunt_out
        return discontinuities.GapCapacitances(mid.c_series, c_in, c_out)
    if model == "kirschning-jansen-koster":
        return discontinuities.kirschning_jansen_koster_gap(w_in, w_out, s, sub.height, sub.eps_r)
    if model == "altschuler-oliner":
        w_mean = np.sqrt(np.asarray(w_in, float) * np.asarray(w_out, float))
        z0 = medium.z0(w_mean)
        return discontinuities.stripline_gap(s, sub.height, sub.eps_r, z0, w_mean)
    raise ValueError(f"gap model = {model!r} is not one of the allowed values {GAP_MODELS}")


def gap_elements(
    medium: StripMedium,
    model: str,
    w_in: ArrayLike,
    w_out: ArrayLike,
    s: ArrayLike,
    f: NDArray,
    line_in: tuple[NDArray, NDArray] | None = None,
    line_out: tuple[NDArray, NDArray] | None = None,
) -> list[cascade.Element]:
    """Cascade elements of one series gap (reference planes at the two strip ends)."""
    caps = gap_capacitances(medium, model, w_in, w_out, s)
    pi = cascade.PiNetwork(caps.c_series, caps.c_shunt_in, caps.c_shunt_out)
    if model != "altschuler-oliner":
        return [pi]
    # centre-referenced model: add the half-gap line on each side to move the planes to the ends
    g_in, z_in = line_in if line_in is not None else medium.line_properties(w_in, f)
    g_out, z_out = line_out if line_out is not None else medium.line_properties(w_out, f)
    half = 0.5 * np.asarray(s)
    return [cascade.Line(g_in, z_in, half), pi, cascade.Line(g_out, z_out, half)]


def filter_elements(
    medium: StripMedium,
    model: str,
    feed_width: ArrayLike,
    widths: ArrayLike,
    gaps: ArrayLike,
    lengths: ArrayLike,
    f: ArrayLike,
) -> list[cascade.Element]:
    """Elements of a gap-coupled filter (see the module docstring for shapes)."""
    check_gap_model(medium, model)
    f = v.frequencies("f", f)
    widths = v.positive_array("widths", widths)
    gaps = v.positive_array("gaps", gaps)
    lengths = v.positive_array("lengths", lengths)
    n = widths.shape[-1]
    if lengths.shape[-1] != n or gaps.shape[-1] != n + 1:
        raise ValueError(
            f"a gap-coupled filter with {n} resonators needs {n} lengths and {n + 1} gaps, got "
            f"{lengths.shape[-1]} and {gaps.shape[-1]}"
        )
    feed = np.asarray(v.positive_array("feed_width", feed_width))[..., None]
    w = [widths[..., j, None] for j in range(n)]
    props = _line_properties_shared(medium, w, f)
    out: list[cascade.Element] = []
    sides = [feed, *w, feed]
    for k in range(n + 1):
        line_in = props[k - 1] if k > 0 else None
        line_out = props[k] if k < n else None
        out += gap_elements(
            medium, model, sides[k], sides[k + 1], gaps[..., k, None], f, line_in, line_out
        )
        if k < n:
            out.append(cascade.Line(props[k][0], props[k][1], lengths[..., k, None]))
    return out


def _line_properties_shared(
    medium: StripMedium, widths: Sequence[NDArray], f: NDArray
) -> list[tuple[NDArray, NDArray]]:
    """Line properties per resonator, computed once per distinct width (the common case is one
    width for every resonator of an unbatched layout)."""
    out: list[tuple[NDArray, NDArray]] = []
    cache: dict[float, tuple[NDArray, NDArray]] = {}
    for w in widths:
        if w.size == 1:
            key = float(w.ravel()[0])
            if key not in cache:
                cache[key] = medium.line_properties(w, f)
            out.append(cache[key])
        else:
            out.append(medium.line_properties(w, f))
    return out


def layout_elements(
    layout: Layout, medium: StripMedium, model: str, f: ArrayLike
) -> list[cascade.Element]:
    """Elements of a :class:`Layout`, gap or tapped coupling."""
    if layout.external == "tap":
        return tapped_filter_elements(
            medium, model, layout.widths, layout.gaps, layout.lengths, layout.taps, f
        )
    return filter_elements(
        medium, model, layout.feed_width, layout.widths, layout.gaps, layout.lengths, f
    )


def layout_response(
    layout: Layout, medium: StripMedium, model: str, f: ArrayLike, z_ref: float
) -> NDArray[np.complex128]:
    """S-matrix ``(nf, 2, 2)`` of a layout on a medium with a gap model."""
    f = v.frequencies("f", f)
    return cascade.s_parameters(layout_elements(layout, medium, model, f), f, z_ref)


def model_spread(
    layout: Layout, medium: StripMedium, f: ArrayLike, z_ref: float
) -> dict[str, NDArray[np.complex128]]:
    """The same layout's S-matrix under every gap model available for its medium."""
    return {
        m: layout_response(layout, medium, m, f, z_ref) for m in GAP_MODELS[medium_kind(medium)]
    }


def tapped_filter_elements(
    medium: StripMedium,
    model: str,
    widths: ArrayLike,
    gaps: ArrayLike,
    lengths: ArrayLike,
    taps: ArrayLike,
    f: ArrayLike,
) -> list[cascade.Element]:
    """Elements of a tapped-feed filter (see :mod:`refine.circuit.model` for the circuit), batched like
    :func:`filter_elements`: ``widths``, ``lengths`` ``(..., n)``, ``gaps`` ``(..., n - 1)``,
    ``taps`` ``(..., 2)``."""
    from refine.circuit.model import open_end_extensions

    check_gap_model(medium, model)
    f = v.frequencies("f", f)
    widths = v.positive_array("widths", widths)
    gaps = v.positive_array("gaps", gaps)
    lengths = v.positive_array("lengths", lengths)
    taps = v.positive_array("taps", taps)
    n = widths.shape[-1]
    if lengths.shape[-1] != n or gaps.shape[-1] != n - 1 or taps.shape[-1] != 2:
        raise ValueError(
            f"a tapped filter with {n} resonators needs {n} lengths, {n - 1} gaps and 2 taps, got "
            f"{lengths.shape[-1]}, {gaps.shape[-1]} and {taps.shape[-1]}"
        )
    w = [widths[..., j, None] for j in range(n)]
    props = _line_properties_shared(medium, w, f)
    dl_in = open_end_extensions(medium, w[0])
    dl_out = open_end_extensions(medium, w[-1])
    t_in, t_out = taps[..., 0, None], taps[..., 1, None]
    out: list[cascade.Element] = [cascade.ShuntOpenStub(props[0][0], props[0][1], t_in + dl_in)]
    for j in range(n):
        ln = lengths[..., j, None]
        if j == 0:
            ln = ln - t_in
        if j == n - 1:
            ln = ln - t_out
        out.append(cascade.Line(props[j][0], props[j][1], ln))
        if j < n - 1:
            out += gap_elements(
                medium, model, w[j], w[j + 1], gaps[..., j, None], f, props[j], props[j + 1]
            )
    out.append(cascade.ShuntOpenStub(props[-1][0], props[-1][1], t_out + dl_out))
    return out
