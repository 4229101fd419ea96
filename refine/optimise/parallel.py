"""Refinement of a parallel-coupled half-wave filter: closed-form seed to a design that meets
the mask under the shop's rules, with the same optimiser entry as the end-coupled refiner.

The seed is Cohn's closed form realised on the coupled-line model (:mod:`refine.synthesis.
parallel`), every spacing held at or above the shop's minimum. The variables are each section's
spacing (from the shop's minimum up), length (±25 %) and strip width (inside Kirschning &
Jansen's W/h range and above the shop's minimum width), mirror-tied for a symmetric prototype,
in the log space of :class:`~refine.optimise.space.DesignSpace`; the objective and constraints
are those of :func:`~refine.optimise.minimax.minimax` on the optimiser's grid with the exact
gradient of :class:`~refine.circuit.model.ParallelFilterModel`. The result is snapped to the
shop's grid and judged on the dense verification grid.

Model uncertainty: every section's even- and odd-mode impedance ±1 % and effective permittivity
±0.5 % (:data:`UNCERTAINTY`: the bounds within which the closed forms' static part agrees
with refine's 2-D field solve of the cross-section, ``tests/test_coupled.py``; the dispersion part
is not validated), all sixteen sign combinations. As for the end-coupled filter, "met" needs the
mask at every corner; a met nominal design is first refined for its worst corner (the corners
stacked in one minimax, the nominal mask held as hard constraints, the result kept only if the
dense grid confirms it).

Not yet (said in the result's notes): yield, the feed lines' width steps onto the end sections,
the field-solver check.
"""

from __future__ import annotations

import itertools
import math
import time
import warnings
from dataclasses import dataclass, replace

import numpy as np

from refine import validity
from refine.circuit.layout import ParallelLayout
from refine.circuit.model import ParallelFilterModel
from refine.circuit.response import strip_medium_for, verification_grid
from refine.optimise.minimax import Stopping, minimax, optimiser_grid
from refine.optimise.refiner import Status
from refine.optimise.seed import electrical_design
from refine.optimise.space import DesignSpace, Variable, mirror_ties
from refine.optimise.stacked import StackedMask
from refine.physics.coupled import KJ_COUPLED_RANGE, CoupledMicrostrip, coupled_medium
from refine.spec.mask import MaskResult
from refine.spec.problem import Problem
from refine.synthesis.parallel import realise_sections

NOT_YET = (
    "parallel-coupled: the feeds' width steps onto the end sections and radiation from the open "
    "ends are not modelled; its yield is refine yield's, its field check so far "
    "benchmarks/em_filters.py's"
)
#: relative ± on (Z_even, Z_odd, ε_eff even, ε_eff odd) of every section (see the module)
UNCERTAINTY = (0.01, 0.01, 0.005, 0.005)
UNCERTAINTY_SOURCE = (
    "coupled-line model: impedances ±1 %, effective permittivities ±0.5 % (its static part "
    "against refine's 2-D field solve; dispersion not validated)"
)


def corners() -> list[tuple[float, float, float, float]]:
    """Every sign combination of :data:`UNCERTAINTY` (sixteen factor tuples)."""
    return [
        tuple(1.0 + sgn * u for sgn, u in zip(signs, UNCERTAINTY, strict=True))  # type: ignore[misc]
        for signs in itertools.product((-1.0, 1.0), repeat=4)
    ]


@dataclass(frozen=True)
class ParallelResult:
    """A refined parallel-coupled design: ``met`` on the nominal model under the fab rules (the
    verdict on the dense grid and no rule broken), the layouts, verdicts and effort."""

    problem: Problem
    status: Status
    layout: ParallelLayout
    seed_layout: ParallelLayout
    verdict: MaskResult
    seed_verdict: MaskResult
    corners: MaskResult
    violations: tuple[str, ...]
    evaluations: int
    robust_evaluations: int
    seconds: float
    notes: tuple[str, ...]

    @property
    def met(self) -> bool:
        """Met on the nominal model under the fab rules (the status says whether also at every
        model-uncertainty corner)."""
        return self.verdict.passed and not self.violations


def model_for(
    problem: Problem,
    f: np.ndarray,
    order: int,
    feed_width: float,
    factors: tuple[float, float, float, float] | None = None,
    feed_stub: float = 0.0,
) -> ParallelFilterModel:
    return ParallelFilterModel(
        strip_medium_for(problem),
        problem.gap_model,
        problem.z_ref,
        order,
        feed_width,
        f,
        factors,
        feed_stub,
    )


def corner_verdict(problem: Problem, layout: ParallelLayout) -> MaskResult:
    """The layout's worst margin per mask region over every corner, on the verification grid."""
    f = verification_grid(problem)
    worst: dict[str, float] = {}
    where: dict[str, float] = {}
    for fac in corners():
        m = model_for(problem, f, layout.order, layout.feed_width, fac, layout.feed_stub)
        r = m.response(m.vector(layout))
        res = problem.mask.evaluate(f, r.s11, r.s21)
        for k, x in res.worst.items():
            if k not in worst or x < worst[k]:
                worst[k], where[k] = x, res.where[k]
    return MaskResult(worst, where)


def seed_layout(problem: Problem) -> tuple[ParallelLayout, tuple[str, ...]]:
    """Cohn's closed form realised with every spacing at or above the shop's minimum, and a note
    for each section whose spacing had to be raised."""
    d, _ = electrical_design(problem)
    medium = strip_medium_for(problem)
    fab = problem.strip_fab
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        secs = realise_sections(d.g, d.fbw, d.f0, d.z_ref, medium, fab.min_gap)
        feed = medium.width_for_z0(problem.z_ref, problem.f0)
    notes = tuple(
        f"section {s.index}: needs {s.needed_spacing * 1e6:.1f} um spacing, held at the shop's "
        f"minimum {fab.min_gap * 1e6:g} um (J·Z0 {s.jz0_reached:.4f} of {s.jz0:.4f})"
        for s in secs
        if s.short
    )
    # the feed and its stub on the shop's grid; the stub one minimum gap long, so that a feed
    # wider than the end section's strip keeps at least that from the next row's corner
    stub = fab.min_gap
    if fab.grid is not None:
        feed = float(fab.on_grid(feed))
        stub = math.ceil(fab.min_gap / fab.grid - 1e-9) * fab.grid
    layout = ParallelLayout(
        feed,
        tuple(s.width for s in secs),
        tuple(s.spacing for s in secs),
        tuple(s.length for s in secs),
        stub,
    )
    return layout, notes


def parallel_space(
    problem: Problem, model: ParallelFilterModel, seed: ParallelLayout
) -> DesignSpace:
    """Spacings from the shop's minimum to max(4 s, 2 h), lengths ±25 %, widths from half to
    twice the seed's and inside the coupled-line model's W/h range (and the shop's minimum
    width), mirror-tied."""
    fab = problem.strip_fab
    h = problem.strip_substrate.height
    lo_u, hi_u = KJ_COUPLED_RANGE["W/h"]
    if not isinstance(coupled_medium(model.medium), CoupledMicrostrip):
        lo_u, hi_u = 0.05, 10.0  # Cohn's coupled stripline, W/b
    lo_w = max(lo_u * h, fab.min_width or 0.0)
    hi_w = hi_u * h
    if fab.grid is not None:
        lo_w = math.ceil(lo_w / fab.grid - 1e-9) * fab.grid
    variables = []
    m = model.sections
    for k, s in enumerate(seed.spacings):
        s = max(s, fab.min_gap)
        variables.append(
            Variable(model.names[k], s, fab.min_gap, max(4.0 * s, 2.0 * h, 2.0 * fab.min_gap))
        )
    for k, ln in enumerate(seed.lengths):
        variables.append(Variable(model.names[m + k], ln, 0.75 * ln, 1.25 * ln))
    for k, w in enumerate(seed.widths):
        lo = max(lo_w, 0.5 * w)
        hi = max(min(hi_w, 2.0 * w), 1.01 * lo)
        variables.append(Variable(model.names[2 * m + k], min(max(w, lo), hi), lo, hi))
    ties = mirror_ties(m, 0) + mirror_ties(m, m) + mirror_ties(m, 2 * m)
    return DesignSpace(variables, sorted(ties, key=lambda t: t[0]))


def refine_parallel(problem: Problem, stopping: Stopping | None = None) -> ParallelResult:
    """Refine ``problem`` as a parallel-coupled filter (see the module docstring)."""
    t0 = time.perf_counter()
    seed, notes = seed_layout(problem)
    order = seed.order
    f_opt = optimiser_grid(problem.mask, order)
    f_ver = verification_grid(problem)
    model = model_for(problem, f_opt, order, seed.feed_width, None, seed.feed_stub)
    judge = model_for(problem, f_ver, order, seed.feed_width, None, seed.feed_stub)
    space = parallel_space(problem, model, seed)

    def fn(p: np.ndarray, grad: bool):
        r = model.response(p, grad)
        return r.s11, r.s21, r.ds11, r.ds21

    def verdict(p: np.ndarray) -> MaskResult:
        r = judge.response(p)
        return problem.mask.evaluate(f_ver, r.s11, r.s21)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        seed_verdict = verdict(space.clip(model.vector(seed)))
        clear = _clearance_constraints(problem, model, space)
        rec = minimax(
            space, problem.mask, f_opt, fn, space.start(), stopping or Stopping(), extra=clear
        )
        p = _snap(problem, model, space.to_physical(rec.z))
        result = verdict(p)
        layout = model.layout(p)
        violations = tuple(parallel_fab_violations(problem, layout))
        robust_evaluations = 0
        corners_now = corner_verdict(problem, layout)
        if result.passed and not violations and not corners_now.passed:
            moved, evals = _robust(problem, model, space, p)
            robust_evaluations = evals
            if moved is not None:
                after = corner_verdict(problem, model.layout(moved))
                nominal = verdict(moved)
                bad = parallel_fab_violations(problem, model.layout(moved))
                if nominal.passed and not bad and after.worst_margin > corners_now.worst_margin:
                    notes += (
                        f"refined for the model's uncertainty: worst corner margin "
                        f"{corners_now.worst_margin:+.2f} dB -> {after.worst_margin:+.2f} dB, "
                        f"nominal {result.worst_margin:+.2f} dB -> {nominal.worst_margin:+.2f} dB",
                    )
                    p, result, corners_now = moved, nominal, after
                    layout = model.layout(p)
    if result.passed and not violations:
        status = Status.MET if corners_now.passed else Status.MET_NOMINAL_ONLY
    elif any("held at the shop's minimum" in n for n in notes):
        status = Status.INFEASIBLE
    else:
        status = Status.NOT_MET
    return ParallelResult(
        problem,
        status,
        layout,
        seed,
        result,
        seed_verdict,
        corners_now,
        violations,
        rec.evaluations,
        robust_evaluations,
        time.perf_counter() - t0,
        (*notes, NOT_YET),
    )


def _snap(problem: Problem, model: ParallelFilterModel, p: np.ndarray) -> np.ndarray:
    """``p`` on the shop's grid, no spacing below the minimum."""
    fab = problem.strip_fab
    if fab.grid is None:
        return p
    q = fab.on_grid(p).copy()
    m = model.sections
    q[:m] = np.maximum(q[:m], math.ceil(fab.min_gap / fab.grid - 1e-9) * fab.grid)
    return q


def _robust(
    problem: Problem, model: ParallelFilterModel, space: DesignSpace, p: np.ndarray
) -> tuple[np.ndarray | None, int]:
    """Maximise the worst margin over the corners with the nominal mask held (see the module);
    the moved point (snapped) and the evaluations."""
    f = model.f
    at = [replace(model, factors=fac) for fac in corners()]

    def fn(q: np.ndarray, grad: bool):
        rs = [m.response(q, grad) for m in at]
        s11 = np.concatenate([r.s11 for r in rs])
        s21 = np.concatenate([r.s21 for r in rs])
        if not grad:
            return s11, s21, None, None
        return (
            s11,
            s21,
            np.concatenate([r.ds11 for r in rs], axis=1),
            np.concatenate([r.ds21 for r in rs], axis=1),
        )

    clear = _clearance_constraints(problem, model, space)

    def nominal_met(z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The nominal mask and the corner clearances as hard constraints."""
        q = space.to_physical(z)
        r = model.response(q, True)
        g, jac = problem.mask.constraints(f, r.s11, r.s21, r.ds11, r.ds21)
        assert jac is not None
        gc, jc = clear(z)
        return np.concatenate([g, gc]), np.concatenate([space.chain(q, jac.T).T, jc])

    rec = minimax(
        space,
        StackedMask(problem.mask, f, len(at)),
        np.tile(f, len(at)),
        fn,
        space.to_free(space.clip(p)),
        Stopping(120, None, 100.0, 1e-7),
        extra=nominal_met,
        polish=False,
        aggregate=True,
    )
    return _snap(problem, model, space.to_physical(rec.z)), rec.evaluations


def clearances(
    feed_width: float, widths: np.ndarray, spacings: np.ndarray, feed_stub: float = 0.0
) -> np.ndarray:
    """The copper-to-copper distances where a resonator's two halves (or a feed) meet a
    neighbouring row at a corner (:func:`refine.outputs.export.parallel_copper`'s geometry):
    per resonator k, its second half's top edge to the row above, w_k/2 + s_k − w_k+1/2, and
    its first half's bottom edge to the row below, w_k+1/2 + s_k+1 − w_k/2; and each feed
    against the row beside it, d = w/2 + s − W_feed/2, or with a stub of length t between
    feed and section the corner-to-corner distance sqrt(t² + max(d, 0)²). A half wider than
    its neighbour by more than twice the spacing would touch. ``(2 n + 2,)``: uppers, lowers,
    feed in, feed out."""
    w, s = np.asarray(widths, float), np.asarray(spacings, float)
    upper = w[:-1] / 2 + s[:-1] - w[1:] / 2
    lower = w[1:] / 2 + s[1:] - w[:-1] / 2
    feeds = np.array([w[0] / 2 + s[0] - feed_width / 2, w[-1] / 2 + s[-1] - feed_width / 2])
    if feed_stub > 0.0:
        feeds = np.hypot(feed_stub, np.maximum(feeds, 0.0))
    return np.concatenate([upper, lower, feeds])


def _clearance_constraints(problem: Problem, model: ParallelFilterModel, space: DesignSpace):
    """Every corner clearance at least the shop's minimum gap (plus one grid step), as
    constraints g(z) <= 0 with their Jacobian (linear in the widths and spacings)."""
    m = model.sections
    n = m - 1
    fab = problem.strip_fab
    # one grid step more than the minimum, so that snapping (a spacing by half a step, each
    # half width by a quarter) cannot take a clearance below it
    gap = fab.min_gap + (fab.grid or 0.0)
    # d clearance / d p: rows as in :func:`clearances`, columns (spacings, lengths, widths)
    jac = np.zeros((2 * n + 2, 3 * m))
    for k in range(n):
        jac[k, k], jac[k, 2 * m + k], jac[k, 2 * m + k + 1] = 1.0, 0.5, -0.5
        r = n + k
        jac[r, k + 1], jac[r, 2 * m + k + 1], jac[r, 2 * m + k] = 1.0, 0.5, -0.5
    jac = jac[: 2 * n]  # the feeds keep their distance through their stubs (seed_layout)

    def extra(z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        p = space.to_physical(z)
        s, _, w = model.split(p)
        g = 1.0 - clearances(model.feed_width, w, s)[: 2 * n] / gap
        return g, space.chain(p, (-jac / gap).T).T

    return extra


def parallel_fab_violations(problem: Problem, layout: ParallelLayout) -> list[str]:
    """Every fab rule the layout breaks: spacings below the minimum gap, widths below the
    minimum width."""
    fab = problem.strip_fab
    out = []
    for k, s in enumerate(layout.spacings):
        if s < fab.min_gap * (1 - 1e-12):
            out.append(
                f"spacing {k + 1} = {s * 1e6:.3f} um is below the minimum gap "
                f"{fab.min_gap * 1e6:.3f} um"
            )
    if fab.min_width is not None:
        for k, w in enumerate(layout.widths):
            if w < fab.min_width * (1 - 1e-12):
                out.append(
                    f"width {k + 1} = {w * 1e6:.3f} um is below the minimum width "
                    f"{fab.min_width * 1e6:.3f} um"
                )
    c = clearances(
        layout.feed_width, np.array(layout.widths), np.array(layout.spacings), layout.feed_stub
    )
    n = layout.order
    where = (
        [f"resonator {k + 1}'s second half to the row above" for k in range(n)]
        + [f"resonator {k + 1}'s first half to the row below" for k in range(n)]
        + ["the input feed to the row beside it", "the output feed to the row beside it"]
    )
    for what, x in zip(where, c, strict=True):
        if x < fab.min_gap * (1 - 1e-9):
            out.append(
                f"{what}: {x * 1e6:.3f} um of clearance, below the minimum gap "
                f"{fab.min_gap * 1e6:.3f} um"
            )
    return out


__all__ = [
    "UNCERTAINTY",
    "UNCERTAINTY_SOURCE",
    "ParallelResult",
    "clearances",
    "corner_verdict",
    "corners",
    "model_for",
    "parallel_fab_violations",
    "parallel_space",
    "refine_parallel",
    "seed_layout",
]
