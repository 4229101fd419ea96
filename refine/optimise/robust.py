"""Robust refinement: maximise the worst mask margin over the circuit model's uncertainty.

The corners are those of :func:`refine.circuit.response.model_uncertainty`: the gaps' series and
shunt capacitance at ± their stated uncertainty, radiation at ± its spread and the lines' ε_eff
and Z0 at ± theirs, every combination (32 corners on open microstrip, 16 on a shielded one, 8
on a stripline with metal, 4 on one without). Each corner is the circuit
model with the builder's :class:`~refine.circuit.builder.Adjustments` (exact gradients); at each
optimiser step every corner is evaluated in one batched call (B copies of the design, copy k at
corner k: :func:`~refine.circuit.builder.per_design`) and the results are laid end to end on one
frequency axis, each mask region of each corner entering as one smooth-maximum constraint: the
same minimax entry, stacked mask and settings as yield centring
(:mod:`refine.tolerance.centring`). The nominal model's mask enters as hard constraints, so the
worst corner margin is maximised without giving up the nominal mask. The constraints hold back
:data:`NOMINAL_HOLD` dB of nominal margin (or half the start's, if that is less): held at zero
on the optimiser's grid, the nominal margin came out a few hundredths of a dB short on the
dense verification grid or after snapping to the shop's grid, and the move was thrown away
(the x-band thin-film filter: worst corner -5.84 -> -2.16 dB rejected for a nominal -0.008 dB).
The result is kept only
when, verified on the dense grid, it still meets the mask on the nominal model and its worst
corner margin is higher than the start's.

Robust design of this kind (maximising the worst case over a box of model parameters) is the
usual worst-case design centring (Bandler, "Optimization of design tolerances using nonlinear
programming", J. Optimization Theory and Applications 14(1), 1974; from memory).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from refine import validity
from refine.circuit.builder import Adjustments, per_design
from refine.circuit.layout import Layout
from refine.circuit.model import Response, StripFilterModel, strip_model_for
from refine.circuit.response import (
    ModelUncertainty,
    layout_verdict,
    model_uncertainty,
    strip_medium_for,
    uncertainty_verdict,
)
from refine.optimise.minimax import Stopping, minimax, optimiser_grid
from refine.optimise.space import (
    all_of,
    fab_violations,
    gap_ratio_constraint,
    problem_space,
    snap,
)
from refine.optimise.stacked import StackedMask
from refine.spec.mask import MaskResult
from refine.spec.problem import Problem

#: the nominal margin (dB) robust refinement keeps in hand on its optimiser grid
NOMINAL_HOLD = 0.1


@dataclass(frozen=True)
class RobustResult:
    """Outcome of :func:`robust_refine`: the layout (moved, or the start when nothing better
    was found), its nominal and worst-corner verdicts on the dense grid, the uncertainty judged,
    the start's worst-corner margin, the optimiser's evaluations, and (moved, on a shop grid)
    the nominal margin before snapping."""

    layout: Layout
    nominal: MaskResult
    corners: MaskResult
    uncertainty: ModelUncertainty
    start_corner_margin: float
    evaluations: int
    unsnapped_margin: float | None = None  # nominal margin before snapping to the shop's grid

    @property
    def moved(self) -> bool:
        return self.corners.worst_margin != self.start_corner_margin


def corner_models(
    problem: Problem, layout: Layout, f: NDArray, free_widths: bool
) -> tuple[StripFilterModel, StripFilterModel, ModelUncertainty]:
    """The nominal circuit model, and one model of the nominal and every uncertainty corner at
    once, shaped like ``layout``, on frequencies ``f``: the second evaluates a batch of
    ``1 + len(corners)`` copies of a design, copy 0 nominal and copy ``k`` at corner ``k - 1``
    (:func:`refine.circuit.builder.per_design`)."""
    medium = strip_medium_for(problem)
    unc = model_uncertainty(problem, layout)
    every = per_design([None, *unc.corners(len(layout.gaps))])

    def model(a: Adjustments | None) -> StripFilterModel:
        return strip_model_for(medium, problem.gap_model, problem.z_ref, layout, f, free_widths, a)

    return model(None), model(every), unc


def robust_refine(
    problem: Problem,
    layout: Layout,
    max_evaluations: int = 120,
    free_widths: bool | None = None,
) -> RobustResult:
    """Move ``layout`` (which meets the mask on the nominal model) to maximise its worst margin
    over the model-uncertainty corners (see the module docstring)."""
    fab = problem.strip_fab
    if free_widths is None:
        free_widths = problem.free_widths
    f = optimiser_grid(problem.mask, layout.order)
    nominal_model, every, unc = corner_models(problem, layout, f, free_widths)
    start_nominal = _nominal(problem, layout)
    start_corners, _ = uncertainty_verdict(problem, layout)
    if not unc.any or start_corners.passed:
        # no stated uncertainty (every corner is the nominal model), or already robust
        return RobustResult(
            layout, start_nominal, start_corners, unc, start_corners.worst_margin, 0
        )
    space = problem_space(problem, nominal_model, layout)
    copies = 1 + len(unc.corners(len(layout.gaps)))  # the nominal design and each corner
    last: dict[tuple[bytes, bool], Response] = {}

    def at(p: NDArray, grad: bool) -> Response:
        """The nominal design and every corner in one batched evaluation (the optimiser asks
        for the corners' margins and the nominal constraints at the same point: one call)."""
        for key in ((p.tobytes(), grad), (p.tobytes(), True)):
            if key in last:
                return last[key]
        r = every.response(np.tile(p, (copies, 1)), grad)
        last.clear()
        last[(p.tobytes(), grad)] = r
        return r

    def fn(p: NDArray, grad: bool):
        # the corners laid end to end on the frequency axis
        r = at(p, grad)
        s11, s21 = r.s11[1:].reshape(-1), r.s21[1:].reshape(-1)
        if not grad or r.ds11 is None or r.ds21 is None:
            return s11, s21, None, None
        n_p = len(p)  # (corners, n_p, nf) -> (n_p, corners·nf)
        ds11 = np.moveaxis(r.ds11[1:], 1, 0).reshape(n_p, -1)
        ds21 = np.moveaxis(r.ds21[1:], 1, 0).reshape(n_p, -1)
        return s11, s21, ds11, ds21

    def nominal_met(z: NDArray) -> tuple[NDArray, NDArray]:
        """The nominal model's mask as hard constraints (g <= 0), with their Jacobian in z."""
        p = space.to_physical(z)
        r = at(p, True)
        assert r.ds11 is not None and r.ds21 is not None
        g, jac = problem.mask.constraints(f, r.s11[0], r.s21[0], r.ds11[0], r.ds21[0])
        assert jac is not None
        return g + hold, space.chain(p, jac.T).T

    hold = min(NOMINAL_HOLD, 0.5 * start_nominal.worst_margin)
    z0 = space.to_free(space.clip(nominal_model.vector(layout)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        rec = minimax(
            space,
            StackedMask(problem.mask, f, copies - 1),
            np.tile(f, copies - 1),
            fn,
            z0,
            Stopping(max_evaluations, None, 100.0, 1e-7),
            extra=all_of(
                nominal_met, gap_ratio_constraint(space, nominal_model, problem.gap_sw_range)
            ),
            polish=False,
            aggregate=True,
        )
    p = space.to_physical(rec.z)
    unsnapped = None
    if fab.grid is not None:
        unsnapped = _nominal(problem, nominal_model.layout(p)).worst_margin
        p = snap(p, nominal_model, fab)
    moved = nominal_model.layout(p)
    nominal = _nominal(problem, moved)
    corners, unc_moved = uncertainty_verdict(problem, moved)
    better = corners.worst_margin > start_corners.worst_margin
    if fab_violations(fab, moved) or not nominal.passed or not better:
        return RobustResult(
            layout,
            start_nominal,
            start_corners,
            unc,
            start_corners.worst_margin,
            rec.evaluations,
        )
    return RobustResult(
        moved, nominal, corners, unc_moved, start_corners.worst_margin, rec.evaluations, unsnapped
    )


def _nominal(problem: Problem, layout: Layout) -> MaskResult:
    return layout_verdict(problem, layout, strip_medium_for(problem), problem.gap_model)
