"""The design job as plain function calls: problem -> electrical design -> physical seed ->
response on the physical model -> mask verdict.

This is what ``refine design`` runs; every step is also usable on its own.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from refine import validity
from refine.circuit import builder as circuit
from refine.physics.microstrip import Microstrip
from refine.physics.stripline import Stripline
from refine.spec.mask import MaskResult
from refine.spec.problem import Problem
from refine.synthesis import inverters as synthesis
from refine.synthesis.realise import Realisation, realise, realise_tapped


def medium_for(problem: Problem, loss: bool = True) -> circuit.StripMedium | None:
    """The strip medium of a problem, or None for the ideal medium."""
    if problem.medium == "microstrip":
        return Microstrip(problem.substrate, loss=loss)
    if problem.medium == "stripline":
        return Stripline(problem.substrate, loss=loss)
    return None


def electrical_design(
    problem: Problem,
) -> tuple[synthesis.ElectricalDesign, synthesis.OrderChoice | None]:
    """Closed-form design for a problem, choosing the order from the stopbands when not given."""
    choice = None
    order = problem.order
    if order is None:
        choice = synthesis.select_order(
            problem.family,
            problem.f0,
            problem.fbw,
            problem.z_ref,
            problem.mask.stopbands,
            problem.ripple_db,
        )
        order = choice.order
    d = synthesis.design(
        problem.family, order, problem.f0, problem.fbw, problem.z_ref, problem.ripple_db
    )
    return d, choice


def verification_grid(problem: Problem, points_per_region: int = 401) -> NDArray[np.float64]:
    """The dense grid "met" is decided on: every mask region, exact edges included."""
    return problem.mask.sample(points_per_region, points_per_region)


@dataclass(frozen=True)
class Seed:
    """The closed-form seed of a problem and how it fares.

    realisation is None for the ideal medium. check is the mask verdict on the verification
    grid (physical model with loss for strip media; ideal elements otherwise). spread holds, for
    strip media with more than one gap model, the verdict of the same layout under each model.
    warnings lists model-range and other notes raised while evaluating.
    """

    problem: Problem
    design: synthesis.ElectricalDesign
    order_choice: synthesis.OrderChoice | None
    realisation: Realisation | None
    f: NDArray[np.float64]
    s: NDArray[np.complex128]
    check: MaskResult
    spread: dict[str, MaskResult]
    warnings: tuple[str, ...]


def seed(problem: Problem) -> Seed:
    """Closed-form design, realised on the problem's medium, checked against its mask."""
    d, choice = electrical_design(problem)
    f = verification_grid(problem)
    medium = medium_for(problem)
    notes: list[str] = []
    spread: dict[str, MaskResult] = {}
    if medium is None:
        s = synthesis.ideal_response(d, f)
        real = None
    else:
        if problem.external == "tap":
            real = realise_tapped(d, medium, problem.fab, problem.gap_model)
        else:
            real = realise(d, medium, problem.fab, problem.gap_model)
        notes += list(real.range_notes)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", validity.ModelRangeWarning)  # listed in range_notes
            s = circuit.layout_response(real.layout, medium, problem.gap_model, f, problem.z_ref)
            for model, sm in circuit.model_spread(real.layout, medium, f, problem.z_ref).items():
                spread[model] = problem.mask.evaluate(f, sm[:, 0, 0], sm[:, 1, 0])
        if len(spread) < 2:
            spread = {}
    check = problem.mask.evaluate(f, s[:, 0, 0], s[:, 1, 0])
    return Seed(problem, d, choice, real, f, s, check, spread, tuple(notes))
