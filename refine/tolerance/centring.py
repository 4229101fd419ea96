"""Yield centring: move a layout that meets the mask so that it keeps meeting it under the
shop's etch errors.

Design centring as a minimax: maximise the worst margin over the nominal layout and
``design_samples`` fixed perturbations of it (drawn once from the fab tolerances, so the
problem is deterministic and smooth), each sample's mask regions entering as one smooth-maximum
constraint. It runs on the one optimiser entry (:func:`refine.optimise.minimax.minimax`) in the
refiner's design space (:func:`refine.optimise.space.problem_space`); the result is snapped to
the shop's grid and kept only if its Monte Carlo yield, on samples independent of the design
samples, is higher. Centring is for the shop's tolerances: its yields leave the model's own
uncertainty out (robust refinement, :mod:`refine.optimise.robust`, deals with that).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from refine.circuit.builder import Dim
from refine.circuit.layout import Layout
from refine.circuit.model import strip_model_for
from refine.circuit.response import strip_medium_for
from refine.optimise.minimax import Stopping, minimax
from refine.optimise.space import fab_violations, gap_ratio_constraint, problem_space, snap
from refine.optimise.stacked import StackedMask
from refine.spec.problem import Problem
from refine.tolerance.montecarlo import (
    Tolerances,
    YieldResult,
    estimate_yield,
    sample,
    yield_grid,
)


@dataclass(frozen=True)
class CentringResult:
    """Outcome of :func:`centre_for_yield`: the moved layout and the yields before and after,
    both estimated on the same independent Monte Carlo samples."""

    layout: Layout
    yield_before: YieldResult
    yield_after: YieldResult
    evaluations: int


def centre_for_yield(
    problem: Problem,
    layout: Layout,
    design_samples: int = 24,
    check_samples: int = 2000,
    seed: int = 0,
    correlated: bool = False,
    max_evaluations: int = 150,
    free_widths: bool | None = None,
) -> CentringResult:
    """Move ``layout`` for yield (see the module docstring); ``free_widths`` None follows the
    problem's ``[resonators] width``."""
    fab = problem.fab
    assert fab is not None  # a strip problem (Tolerances.from_problem refuses the ideal medium)
    tol = Tolerances.from_problem(problem, correlated)
    before = estimate_yield(problem, layout, check_samples, seed + 1, correlated, False)
    medium = strip_medium_for(problem)
    f = yield_grid(problem, 41)
    if free_widths is None:
        free_widths = problem.free_widths
    model = strip_model_for(medium, problem.gap_model, problem.z_ref, layout, f, free_widths)
    space = problem_space(problem, model, layout)
    p0 = model.vector(layout)
    smp = sample(layout, tol, design_samples, seed, problem.substrate)  # its geometry is used below
    offsets = np.zeros((design_samples + 1, len(model.dims)))  # row 0: the nominal layout itself
    drawn = {
        Dim.GAP: (smp.gaps, layout.gaps),
        Dim.WIDTH: (smp.widths, layout.widths),
        Dim.LENGTH: (smp.lengths, layout.lengths),
        Dim.TAP: (smp.taps, layout.taps),
    }
    for i, (kind, k) in enumerate(model.dims):
        perturbed, nominal = drawn[kind]
        if perturbed is not None and nominal is not None:
            offsets[1:, i] = perturbed[:, k] - nominal[k]

    f_all = np.tile(f, design_samples + 1)

    def fn(p: NDArray, grad: bool):
        # the nominal design and every sample in one batched evaluation, laid end to end
        r = model.response(np.maximum(p + offsets, 1e-9), grad)
        s11, s21 = r.s11.reshape(-1), r.s21.reshape(-1)
        if r.ds11 is None or r.ds21 is None:
            return s11, s21, None, None
        n_p = len(p)  # (B, n_p, nf) -> (n_p, B·nf)
        ds11 = np.moveaxis(r.ds11, 1, 0).reshape(n_p, -1)
        ds21 = np.moveaxis(r.ds21, 1, 0).reshape(n_p, -1)
        return s11, s21, ds11, ds21

    stacked_mask = StackedMask(problem.mask, f, design_samples + 1)
    z0 = space.to_free(space.clip(p0))
    rec = minimax(
        space,
        stacked_mask,
        f_all,
        fn,
        z0,
        Stopping(max_evaluations, None, 100.0, 1e-7),
        extra=gap_ratio_constraint(space, model, problem.gap_sw_range),
        polish=False,
        aggregate=True,
    )
    p = space.to_physical(rec.z)
    if fab.grid is not None:
        p = snap(p, model, fab)
    moved = model.layout(p)
    after = estimate_yield(problem, moved, check_samples, seed + 1, correlated, False)
    if fab_violations(fab, moved) or after.yield_fraction <= before.yield_fraction:
        return CentringResult(layout, before, before, rec.evaluations)
    return CentringResult(moved, before, after, rec.evaluations)
