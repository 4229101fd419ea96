"""The design job as plain function calls: problem -> electrical design -> physical seed ->
response on the physical model -> mask verdict.

This is what ``refine design`` runs; every step is also usable on its own.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from refine.circuit.response import evaluate_layout, medium_for, spread_verdicts, verification_grid
from refine.physics.strip import StripMedium
from refine.spec.coupling import Coupling
from refine.spec.mask import MaskResult
from refine.spec.problem import Problem
from refine.synthesis import inverters
from refine.synthesis.realise import Realisation, realise, realise_tapped


def electrical_design(
    problem: Problem,
) -> tuple[inverters.ElectricalDesign, inverters.OrderChoice | None]:
    """Closed-form design for a problem, choosing the order from the stopbands when not given."""
    choice = None
    order = problem.order
    if order is None:
        choice = inverters.select_order(
            problem.family,
            problem.f0,
            problem.fbw,
            problem.z_ref,
            problem.mask.stopbands,
            problem.ripple_db,
        )
        order = choice.order
    d = inverters.design(
        problem.family, order, problem.f0, problem.fbw, problem.z_ref, problem.ripple_db
    )
    return d, choice


@dataclass(frozen=True)
class Seed:
    """The closed-form seed of a problem and how it fares.

    realisation is None for the ideal medium. check is the mask verdict on the verification
    grid (physical model with loss for strip media; ideal elements otherwise). spread holds, for
    strip media with more than one gap model, the verdict of the same layout under each model.
    warnings lists model-range and other notes raised while evaluating.
    """

    problem: Problem
    design: inverters.ElectricalDesign
    order_choice: inverters.OrderChoice | None
    realisation: Realisation | None
    f: NDArray[np.float64]
    s: NDArray[np.complex128]
    check: MaskResult
    spread: dict[str, MaskResult]
    warnings: tuple[str, ...]

    @property
    def strip_realisation(self) -> Realisation:
        """The realised layout of a strip problem; a ValueError for the ideal medium."""
        if self.realisation is None:
            raise ValueError("the ideal medium's seed has no layout")
        return self.realisation


def realisation_for(
    problem: Problem, design: inverters.ElectricalDesign, medium: StripMedium
) -> Realisation:
    """The closed-form design as copper, with the problem's coupling, fab rules and gap model."""
    realiser = realise_tapped if problem.external is Coupling.TAP else realise
    return realiser(design, medium, problem.fab, problem.gap_model)


def seed(problem: Problem) -> Seed:
    """Closed-form design, realised on the problem's medium, checked against its mask."""
    d, choice = electrical_design(problem)
    f = verification_grid(problem)
    medium = medium_for(problem)
    notes: list[str] = []
    spread: dict[str, MaskResult] = {}
    if medium is None:
        s = inverters.ideal_response(d, f)
        real = None
    else:
        real = realisation_for(problem, d, medium)
        notes += list(real.range_notes)
        s = evaluate_layout(problem, real.layout, f)
        spread = spread_verdicts(problem, real.layout)
    check = problem.mask.evaluate(f, s[:, 0, 0], s[:, 1, 0])
    return Seed(problem, d, choice, real, f, s, check, spread, tuple(notes))
