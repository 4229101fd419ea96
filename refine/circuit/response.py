"""A problem's circuit, evaluated: its medium, the grid "met" is decided on, the S-parameters of
a layout (with or without model corrections), and the gap-model spread.

Everything here goes through the one builder (:mod:`refine.circuit.builder`).
"""

from __future__ import annotations

import warnings

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine import validity
from refine.circuit import cascade
from refine.circuit.builder import Adjustments, Built, build, ideal_elements
from refine.circuit.layout import Layout
from refine.physics.microstrip import Microstrip
from refine.physics.strip import GAP_MODELS, StripMedium, medium_kind
from refine.physics.stripline import Stripline
from refine.spec.mask import MaskResult
from refine.spec.problem import Problem


def medium_for(problem: Problem, loss: bool = True) -> StripMedium | None:
    """The strip medium of a problem, or None for the ideal medium."""
    if problem.medium == "microstrip":
        return Microstrip(problem.strip_substrate, loss=loss)
    if problem.medium == "stripline":
        return Stripline(problem.strip_substrate, loss=loss)
    return None


def strip_medium_for(problem: Problem, loss: bool = True) -> StripMedium:
    """The strip medium of a problem; a ValueError for the ideal medium, which has no copper."""
    medium = medium_for(problem, loss)
    if medium is None:
        raise ValueError(f"problem {problem.name!r}: the ideal medium has no strip layout")
    return medium


def verification_grid(problem: Problem, points_per_region: int = 401) -> NDArray[np.float64]:
    """The dense grid "met" is decided on: every mask region, exact edges included."""
    return problem.mask.sample(points_per_region, points_per_region)


def layout_build(
    layout: Layout,
    medium: StripMedium,
    gap_model: str,
    f: ArrayLike,
    adjust: Adjustments | None = None,
    track: bool = False,
) -> Built:
    """The builder's elements (and, with ``track``, its element map) of a :class:`Layout`."""
    return build(
        layout.external,
        medium,
        gap_model,
        layout.feed_width,
        layout.widths,
        layout.gaps,
        layout.lengths,
        layout.taps,
        f,
        adjust,
        track,
    )


def layout_response(
    layout: Layout,
    medium: StripMedium,
    gap_model: str,
    f: ArrayLike,
    z_ref: float,
    adjust: Adjustments | None = None,
) -> NDArray[np.complex128]:
    """S-matrix ``(nf, 2, 2)`` of a layout on a medium with a gap model."""
    f = v.frequencies("f", f)
    return cascade.s_parameters(
        layout_build(layout, medium, gap_model, f, adjust).elements, f, z_ref
    )


def layout_group_delay(
    layout: Layout,
    medium: StripMedium,
    gap_model: str,
    f: ArrayLike,
    z_ref: float,
    adjust: Adjustments | None = None,
) -> NDArray[np.float64]:
    """Group delay of S21 (seconds) of a layout, exact through the cascade
    (:func:`refine.circuit.cascade.group_delay`)."""
    return cascade.group_delay(
        lambda g: layout_build(layout, medium, gap_model, g, adjust).elements, f, z_ref
    )


def evaluate_layout(
    problem: Problem, layout: Layout, f: ArrayLike, adjust: Adjustments | None = None
) -> NDArray[np.complex128]:
    """S-matrix of a layout on the problem's medium with loss (range warnings go to the report)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        return layout_response(
            layout, strip_medium_for(problem), problem.gap_model, f, problem.z_ref, adjust
        )


def evaluate_electrical(
    caps: ArrayLike, thetas: ArrayLike, f0: float, z_ref: float, f: ArrayLike
) -> NDArray[np.complex128]:
    """S-matrix of an ideal-element design (series capacitances, electrical lengths at f0)."""
    return cascade.s_parameters(ideal_elements(caps, thetas, f0, z_ref, f), f, z_ref)


def model_spread(
    layout: Layout, medium: StripMedium, f: ArrayLike, z_ref: float
) -> dict[str, NDArray[np.complex128]]:
    """The same layout's S-matrix under every gap model available for its medium."""
    return {
        m: layout_response(layout, medium, m, f, z_ref) for m in GAP_MODELS[medium_kind(medium)]
    }


def spread_verdicts(problem: Problem, layout: Layout) -> dict[str, MaskResult]:
    """The layout's mask verdict on the verification grid under every gap model of its medium
    (empty where the medium has only one)."""
    medium = medium_for(problem)
    if medium is None or len(GAP_MODELS[medium_kind(medium)]) < 2:
        return {}
    f = verification_grid(problem)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)  # listed in the report
        spread = model_spread(layout, medium, f, problem.z_ref)
    return {m: problem.mask.evaluate(f, s[:, 0, 0], s[:, 1, 0]) for m, s in spread.items()}
