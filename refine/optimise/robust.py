"""Robust refinement: maximise the worst mask margin over the circuit model's uncertainty.

The corners are those of :func:`refine.circuit.response.model_uncertainty`: the gaps' series and
shunt capacitance at ± their stated uncertainty and radiation at ± its spread, every
combination (eight corners on open microstrip, four shielded). Each corner is a circuit model
of its own (the builder's :class:`~refine.circuit.builder.Adjustments`, exact gradients); the
nominal model and every corner are evaluated at each optimiser step and laid end to end on one
frequency axis, each mask region of each model entering as one smooth-maximum constraint: the
same minimax entry, stacked mask and settings as yield centring
(:mod:`refine.tolerance.centring`). Because the nominal model is one of the stacked copies, the
worst margin over all of them is what is maximised; the result is kept only when, verified on
the dense grid, it still meets the mask on the nominal model and its worst corner margin is
higher than the start's.

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
from refine.circuit.layout import Layout
from refine.circuit.model import StripFilterModel, strip_model_for
from refine.circuit.response import (
    ModelUncertainty,
    layout_verdict,
    model_uncertainty,
    strip_medium_for,
    uncertainty_verdict,
)
from refine.optimise.minimax import Stopping, minimax, optimiser_grid
from refine.optimise.space import fab_violations, layout_space, snap
from refine.optimise.stacked import StackedMask
from refine.spec.mask import MaskResult
from refine.spec.problem import Problem


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
) -> tuple[list[StripFilterModel], ModelUncertainty]:
    """The nominal circuit model followed by one per uncertainty corner, shaped like
    ``layout``, on frequencies ``f``."""
    medium = strip_medium_for(problem)
    unc = model_uncertainty(problem, layout)
    adjust = [None, *unc.corners(len(layout.gaps))]
    models = [
        strip_model_for(medium, problem.gap_model, problem.z_ref, layout, f, free_widths, a)
        for a in adjust
    ]
    return models, unc


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
    models, unc = corner_models(problem, layout, f, free_widths)
    start_nominal = _nominal(problem, layout)
    start_corners, _ = uncertainty_verdict(problem, layout)
    if not (unc.series or unc.shunt or unc.radiation) or start_corners.passed:
        # no stated uncertainty (every corner is the nominal model), or already robust
        return RobustResult(
            layout, start_nominal, start_corners, unc, start_corners.worst_margin, 0
        )
    space = layout_space(
        fab, problem.strip_substrate.height, models[0], layout, width_range=problem.width_range
    )
    at_corners = models[1:]
    nominal_model = models[0]

    def fn(p: NDArray, grad: bool):
        rs = [m.response(p, grad) for m in at_corners]
        s11 = np.concatenate([r.s11 for r in rs])
        s21 = np.concatenate([r.s21 for r in rs])
        if not grad:
            return s11, s21, None, None
        ds11 = np.concatenate([r.ds11 for r in rs], axis=1)
        ds21 = np.concatenate([r.ds21 for r in rs], axis=1)
        return s11, s21, ds11, ds21

    cache: dict[bytes, tuple[NDArray, NDArray]] = {}

    def nominal_met(z: NDArray) -> tuple[NDArray, NDArray]:
        """The nominal model's mask as hard constraints (g <= 0), with their Jacobian in z."""
        key = z.tobytes()
        if key not in cache:
            p = space.to_physical(z)
            r = nominal_model.response(p, True)
            g, jac = problem.mask.constraints(f, r.s11, r.s21, r.ds11, r.ds21)
            assert jac is not None
            cache.clear()
            cache[key] = (g, space.chain(p, jac.T).T)
        return cache[key]

    z0 = space.to_free(space.clip(nominal_model.vector(layout)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        rec = minimax(
            space,
            StackedMask(problem.mask, f, len(at_corners)),
            np.tile(f, len(at_corners)),
            fn,
            z0,
            Stopping(max_evaluations, None, 100.0, 1e-7),
            extra=nominal_met,
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
