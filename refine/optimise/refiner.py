"""From the closed-form seed to dimensions that meet the mask under the fab rules, or a
quantified statement that none exist.

Path: seed (gap or tapped feed) -> diagnosis -> refine on the optimiser grid -> verify on the
dense grid (exact band edges; if a violation hid between optimiser samples, those frequencies
join the optimiser grid and the run continues, at most three rounds) -> snap to the shop's
grid (lengths re-refined once if snapping costs the mask) -> every fab rule re-checked.
"""

from __future__ import annotations

import enum
import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np
from numpy.typing import NDArray

from refine.circuit.builder import Dim
from refine.circuit.layout import Layout
from refine.circuit.model import IdealFilterModel, StripFilterModel, strip_model_for
from refine.circuit.response import (
    ModelUncertainty,
    strip_medium_for,
    uncertainty_verdict,
    verification_grid,
)
from refine.optimise import seed as job
from refine.optimise.minimax import Stopping, Strategy, minimax, optimiser_grid
from refine.optimise.robust import robust_refine
from refine.optimise.space import (
    DesignSpace,
    Variable,
    all_of,
    fab_violations,
    gap_ratio_constraint,
    gap_sides,
    mirror_ties,
    on_grid,
    problem_space,
    snap,
)
from refine.physics.constants import C0
from refine.spec.coupling import Coupling
from refine.spec.mask import MaskResult
from refine.spec.problem import Problem
from refine.synthesis.diagnose import Diagnosis, diagnose
from refine.synthesis.realise import Realisation
from refine.validity import require_finite


class Status(enum.Enum):
    """MET: the mask is met on the circuit model and at every corner of its stated uncertainty
    (:func:`refine.circuit.response.model_uncertainty`); MET_NOMINAL_ONLY: met on the nominal
    model, not at every corner (both margins are reported); NOT_MET; INFEASIBLE: not met, and
    the closed-form couplings are beyond the fab rules."""

    MET = "met"
    MET_NOMINAL_ONLY = "met on the nominal model only"
    NOT_MET = "not met"
    INFEASIBLE = "infeasible"


@dataclass(frozen=True)
class RefineResult:
    """Outcome of :func:`refine_problem`.

    layout : refined layout (strip media), or None for the ideal medium, whose design is
        ``capacitances`` (F) and ``thetas`` (rad at f0) instead.
    worst, where : verified worst margin (dB) per mask region and its frequency (Hz).
    binding : the constraints that limit the design (regions at the worst margin, variables at
        their bounds).
    evaluations, wall_time : model evaluations used by the optimiser, and seconds.
    history : worst margin on the optimiser grid after each evaluation.
    seed_worst : verified worst margin per region of the closed-form seed.
    diagnosis : couplings needed vs what the fab rules can give, and remedies (strip media).
    unsnapped_margin, snapped_margin : verified worst margin before and after snapping to the
        shop's grid (snapped_margin is None without a grid).
    fab_violations : fab rules the returned layout breaks (always empty; checked, not assumed).
    corners : worst margin per region over the model-uncertainty corners (strip media; None
        for the ideal medium), with ``uncertainty`` the ± judged; robust_evaluations: the
        robust refinement's model evaluations (0 when it did not run).
    """

    problem: Problem
    status: Status
    strategy: str
    layout: Layout | None
    capacitances: tuple[float, ...] | None
    thetas: tuple[float, ...] | None
    seed_layout: Layout | None
    worst: dict[str, float]
    where: dict[str, float]
    binding: tuple[str, ...]
    evaluations: int
    wall_time: float
    history: tuple[float, ...]
    seed_worst: dict[str, float]
    diagnosis: Diagnosis | None
    unsnapped_margin: float
    snapped_margin: float | None
    fab_violations: tuple[str, ...]
    notes: tuple[str, ...] = field(default=())
    corners: MaskResult | None = None
    uncertainty: ModelUncertainty | None = None
    robust_evaluations: int = 0

    @property
    def corner_margin(self) -> float | None:
        """Worst margin (dB) over the model-uncertainty corners, None for the ideal medium."""
        return None if self.corners is None else self.corners.worst_margin

    @property
    def worst_margin(self) -> float:
        return min(self.worst.values())

    @property
    def strip_layouts(self) -> tuple[Layout, Layout]:
        """(refined, seed) layout of a strip result; a ValueError for the ideal medium."""
        if self.layout is None or self.seed_layout is None:
            raise ValueError("the ideal medium's result has no layout (see capacitances, thetas)")
        return self.layout, self.seed_layout

    @property
    def electrical(self) -> tuple[tuple[float, ...], tuple[float, ...]]:
        """(series capacitances in F, electrical lengths in rad at f0) of an ideal result."""
        if self.capacitances is None or self.thetas is None:
            raise ValueError("a strip result has a layout, not capacitances and angles")
        return self.capacitances, self.thetas

    @property
    def seed_worst_margin(self) -> float:
        return min(self.seed_worst.values())


MAX_ADDED = 40  # most verification frequencies one round adds to the optimiser's grid


def _verify(
    problem: Problem, model_factory, p: NDArray, short_of: float | None = None
) -> tuple[MaskResult, NDArray]:
    """The design's verdict on the dense verification grid and, when ``short_of`` is given, the
    verification frequencies where its margin is below it (the worst :data:`MAX_ADDED`)."""
    f = verification_grid(problem)
    r = model_factory(f).response(p)
    mask = problem.mask
    res = mask.evaluate(f, r.s11, r.s21)
    if short_of is None:
        return res, f[:0]
    g, _ = mask.constraints(f, r.s11, r.s21)
    at = np.concatenate(mask.region_indices(f))
    short = np.flatnonzero(g > -short_of)
    worst_first = short[np.argsort(g[short])[::-1]][:MAX_ADDED]
    return res, np.unique(f[at[worst_first]])


def _binding(res: MaskResult, space: DesignSpace, z: NDArray) -> tuple[str, ...]:
    worst = res.worst_margin
    regions = [
        f"{name} (worst {m:+.2f} dB at {res.where[name] / 1e9:.4f} GHz)"
        for name, m in res.worst.items()
        if m <= worst + 0.1
    ]
    return tuple(regions + space.at_bounds(z))


def refine_problem(
    problem: Problem,
    strategy: Strategy = Strategy.GRADIENT,
    stopping: Stopping | None = None,
    seed: job.Seed | None = None,
    progress: Callable[[int, float], None] | None = None,
    free_widths: bool | None = None,
) -> RefineResult:
    """Refine a problem's closed-form seed until the mask is met under the fab rules.

    ``progress(evaluations, best_worst_margin_db)`` is called after every model evaluation.
    With ``free_widths`` False the resonators keep the seed's width (the z_ref line width);
    None follows the problem's ``[resonators] width``."""
    if problem.topology != "end-coupled":
        raise ValueError(
            f"{problem.name}: coupling.topology = {problem.topology!r}: refine_problem designs "
            "end-coupled filters; use refine.design_parallel (refine.optimise.parallel) for a "
            "parallel-coupled one"
        )
    if free_widths is None:
        free_widths = problem.free_widths
    stopping = stopping or Stopping()
    t0 = time.perf_counter()
    sd = seed or job.seed(problem)
    d = sd.design
    notes: list[str] = []
    if problem.medium == "ideal":
        return _refine_ideal(problem, sd, strategy, stopping, t0, progress)

    medium = strip_medium_for(problem)
    fab = problem.fab
    assert fab is not None  # every strip problem has fab rules (see refine.spec.problem)
    real: Realisation | None = sd.realisation  # the job's seed already follows problem.external
    if real is None or real.layout.external is not problem.external:
        real = job.realisation_for(problem, d, medium)
    if problem.external is Coupling.TAP:
        notes.append("tapped feed: the T-junction's own parasitics are not modelled")
    seed_layout = real.layout
    # resonator widths are refinable dimensions (bounded by the fab rules) unless held fixed

    def factory(f: NDArray, fw: bool = free_widths) -> StripFilterModel:
        return strip_model_for(medium, problem.gap_model, problem.z_ref, seed_layout, f, fw)

    f_opt = optimiser_grid(problem.mask, d.order)
    if problem.mask.max_insertion_loss_db is not None:
        f_opt = np.unique(np.append(f_opt, problem.mask.midband))
    model = factory(f_opt)
    space = problem_space(problem, model, seed_layout)
    width_vars = [
        v for v, dim in zip(space.variables, model.dims, strict=True) if dim[0] is Dim.WIDTH
    ]
    widths = (
        (min(v.lower for v in width_vars), max(v.upper for v in width_vars))
        if width_vars
        else (min(seed_layout.widths), max(seed_layout.widths))
    )
    diag = diagnose(
        d, medium, fab, problem.gap_model, seed_layout.feed_width, problem.external, widths
    )
    p_seed = model.vector(seed_layout)
    seed_res, _ = _verify(problem, factory, p_seed)
    too_short = length_rule_unmeetable(problem)
    if too_short is not None:  # no half-wave filter fits: said before any refinement
        return RefineResult(
            problem,
            Status.INFEASIBLE,
            strategy.value,
            seed_layout,
            None,
            None,
            seed_layout,
            dict(seed_res.worst),
            dict(seed_res.where),
            ("fab.max_total_length: shorter than any half-wave filter of this order",),
            0,
            time.perf_counter() - t0,
            (),
            dict(seed_res.worst),
            replace(diag, remedies=(too_short, *diag.remedies)),
            seed_res.worst_margin,
            None,
            tuple(fab_violations(fab, seed_layout)),
            tuple(notes + list(real.notes)),
        )
    extra = all_of(
        _length_constraint(problem, model, space),
        gap_ratio_constraint(space, model, problem.gap_sw_range),
    )
    z = z_seed = space.start()
    stopping = _aim(stopping, seed_res)
    rounds = _refine_rounds(
        problem,
        factory,
        space,
        f_opt,
        z,
        seed_res,
        strategy,
        stopping,
        extra,
        diag.couplings_reachable,
        progress,
    )
    res, z, f_opt, evaluations, history = (
        rounds.res,
        rounds.z,
        rounds.f_opt,
        rounds.evaluations,
        rounds.history,
    )
    notes += rounds.notes
    model = factory(f_opt)
    p = space.to_physical(z)
    unsnapped = res.worst_margin
    snapped_margin = None
    if fab.grid is not None:
        q = snap(p, model, fab)
        res_q, _ = _verify(problem, factory, q)
        if res.passed and not res_q.passed:
            # aim for enough margin to survive the grid (twice what snapping cost), from the
            # seed again (the first run stopped at its target, often a point that cannot
            # climb further), then snap
            lost = res.worst_margin - res_q.worst_margin
            aim = Stopping(
                stopping.max_evaluations,
                stopping.max_seconds,
                max(stopping.target_margin_db, res.worst_margin) + 2.0 * lost,
                stopping.xtol_rel,
            )
            again = _refine_rounds(
                problem,
                factory,
                space,
                f_opt,
                z_seed,
                seed_res,
                strategy,
                aim,
                extra,
                diag.couplings_reachable,
                _offset(progress, evaluations),
            )
            evaluations += again.evaluations
            history += again.history
            p2 = space.to_physical(again.z)
            q2 = snap(p2, model, fab)
            res_q2, _ = _verify(problem, factory, q2)
            if res_q2.worst_margin > res_q.worst_margin:
                p, z, q, res, res_q = p2, again.z, q2, again.res, res_q2
                unsnapped = res.worst_margin
            notes.append(
                f"snapping to the shop's grid cost {lost:.2f} dB of margin; refined again for "
                f"{aim.target_margin_db:+.2f} dB before snapping"
            )
        if res.passed and not res_q.passed:  # re-refine lengths with the gaps held at the grid
            space2 = space.with_fixed(q, [kind is not Dim.GAP for kind, _ in model.dims])
            model2 = factory(f_opt)

            def fn2(pp, grad, model=model2):
                r = model.response(pp, grad)
                return r.s11, r.s21, r.ds11, r.ds21

            rec2 = minimax(
                space2,
                problem.mask,
                f_opt,
                fn2,
                space2.start(),
                Stopping(100, None, stopping.target_margin_db, stopping.xtol_rel),
            )
            evaluations += rec2.evaluations
            q = snap(space2.to_physical(rec2.z), model, fab)
            res_q, _ = _verify(problem, factory, q)
            notes.append(
                "snapping to the shop's grid cost the mask; lengths were re-refined with gaps on the grid"
            )
        p, res, snapped_margin = q, res_q, res_q.worst_margin
    layout = factory(f_opt).layout(p)
    seed_legal = not fab_violations(fab, seed_layout) and on_grid(p_seed, model, fab)
    if res.worst_margin < seed_res.worst_margin and seed_legal:
        notes.append(
            "the refiner found nothing better than the closed-form seed; the seed is returned"
        )
        layout, res, z = seed_layout, seed_res, space.to_free(space.clip(p_seed))
    require_finite(f"{problem.name}: refined margins", list(res.worst.values()))
    require_finite(f"{problem.name}: closed-form seed margins", list(seed_res.worst.values()))
    require_finite(
        f"{problem.name}: refined layout", [*layout.gaps, *layout.lengths, *layout.widths]
    )
    violations = fab_violations(fab, layout)
    robust_evaluations = 0
    if res.passed and not violations and problem.uncertainty == "robust":
        rr = robust_refine(problem, layout, free_widths=free_widths)
        robust_evaluations = rr.evaluations
        if rr.moved:
            notes.append(
                f"refined for the model's uncertainty: worst corner margin "
                f"{rr.start_corner_margin:+.2f} dB -> {rr.corners.worst_margin:+.2f} dB, "
                f"nominal {res.worst_margin:+.2f} dB -> {rr.nominal.worst_margin:+.2f} dB"
            )
            layout, res = rr.layout, rr.nominal
            z = space.to_free(space.clip(model.vector(layout)))
            if fab.grid is not None:  # the snapping figures are the robust result's
                snapped_margin = res.worst_margin
                unsnapped = res.worst_margin if rr.unsnapped_margin is None else rr.unsnapped_margin
            else:
                unsnapped = res.worst_margin
            violations = fab_violations(fab, layout)
        corners, unc = rr.corners, rr.uncertainty
    else:
        corners, unc = uncertainty_verdict(problem, layout)
    if res.passed and not violations:
        status = Status.MET if corners.passed else Status.MET_NOMINAL_ONLY
    elif not diag.couplings_reachable:
        status = Status.INFEASIBLE
    else:
        status = Status.NOT_MET
    if not corners.passed:
        notes += gaps_at_model_range(problem, layout)
    return RefineResult(
        problem,
        status,
        strategy.value,
        layout,
        None,
        None,
        seed_layout,
        dict(res.worst),
        dict(res.where),
        _binding(res, space, z),
        evaluations,
        time.perf_counter() - t0,
        tuple(history),
        dict(seed_res.worst),
        diag,
        unsnapped,
        snapped_margin,
        tuple(violations),
        tuple(notes + list(real.notes)),
        corners,
        unc,
        robust_evaluations,
    )


def gaps_at_model_range(problem: Problem, layout: Layout) -> list[str]:
    """A note naming the gaps that sit at an end of the gap model's stated range (s/h or s/W,
    within half a per cent or one grid step) where the shop's minimum gap does not hold them,
    and what lifts the range: empty when none does."""
    fab = problem.strip_fab
    h = problem.strip_substrate.height
    slack = max(0.005, (fab.grid or 0.0) / min(layout.gaps))

    def width(j: int | None) -> float:
        return layout.feed_width if j is None else layout.widths[j]

    sides = gap_sides(layout.external, layout.order)
    held: list[str] = []
    for k, s in enumerate(layout.gaps):
        if s <= fab.min_gap * (1.0 + slack):
            continue  # the shop's minimum holds it, not the model's range
        rng = problem.gap_range
        if rng is not None and (s / h <= rng[0] * (1 + slack) or s / h >= rng[1] * (1 - slack)):
            upper = "and up" if math.isinf(rng[1]) else f"to {rng[1]:.3g}"
            held.append(f"gap {k} (s/h {s / h:.3g}; range {rng[0]:.3g} {upper})")
            continue
        sw = problem.gap_sw_range
        ratios = (s / width(sides[k][0]), s / width(sides[k][1]))
        if sw is not None and (
            min(ratios) <= sw[0] * (1 + slack) or max(ratios) >= sw[1] * (1 - slack)
        ):
            held.append(
                f"gap {k} (s/W {min(ratios):.3g} to {max(ratios):.3g}; range {sw[0]:g} to "
                f"{sw[1]:g})"
            )
    if not held:
        return []
    return [
        f"{', '.join(held)} at the end of the {problem.gap_model} gap model's stated range, "
        "where the refiner keeps them: the mask may need gaps beyond it. [models] gaps = "
        '"beyond-range" lets the refiner leave the range (the model then extrapolates and '
        "warns), or a calibration of this substrate extends it"
    ]


@dataclass
class _Rounds:
    res: MaskResult
    z: NDArray
    f_opt: NDArray
    evaluations: int
    history: list[float]
    notes: list[str]


def _refine_rounds(
    problem: Problem,
    factory,
    space: DesignSpace,
    f_opt: NDArray,
    z: NDArray,
    seed_res: MaskResult,
    strategy: Strategy,
    stopping: Stopping,
    extra=None,
    thorough: bool = True,
    progress=None,
) -> _Rounds:
    """Refine on the optimiser grid, verify on the dense grid, and, when a violation hid between
    the optimiser's samples, add those frequencies to its grid and go on (at most 3 rounds).
    Returns the best verified point (the seed's, if nothing beat it)."""
    evaluations, history, notes = 0, [], []
    best_res, best_z = seed_res, z
    for _round in range(3):
        model = factory(f_opt)

        def fn(p, grad, model=model):
            r = model.response(p, grad)
            return r.s11, r.s21, r.ds11, r.ds21

        budget = (
            None
            if stopping.max_evaluations is None
            else max(stopping.max_evaluations - evaluations, 1)
        )
        rec = minimax(
            space,
            problem.mask,
            f_opt,
            fn,
            z,
            Stopping(budget, stopping.max_seconds, stopping.target_margin_db, stopping.xtol_rel),
            strategy,
            extra=extra,
            thorough=thorough,
            progress=_offset(progress, evaluations),
        )
        evaluations += rec.evaluations
        history += rec.history
        res_new, short = _verify(
            problem, factory, space.to_physical(rec.z), max(stopping.target_margin_db, 0.0)
        )
        if res_new.worst_margin > best_res.worst_margin:
            best_res, best_z = res_new, rec.z
        z = best_z
        if (
            best_res.passed
            or rec.worst_margin < min(stopping.target_margin_db, 0.0)
            or (stopping.max_evaluations is not None and evaluations >= stopping.max_evaluations)
        ):
            break
        # the optimiser's grid met the mask but the dense grid did not: add what it missed
        # (every dense-grid frequency short of the target, not only each region's worst: a
        # narrow spurious peak otherwise moves to the next gap between samples)
        f_opt = np.unique(np.concatenate([f_opt, list(res_new.where.values()), short]))
        notes.append(
            f"verification found {res_new.worst_margin:+.3f} dB between optimiser samples; the grid was refined"
        )
    return _Rounds(best_res, best_z, f_opt, evaluations, history, notes)


def _offset(progress, done: int):
    """A progress callback that counts on from ``done`` evaluations of earlier rounds."""
    if progress is None:
        return None
    return lambda n, worst: progress(done + n, worst)


def _aim(stopping: Stopping, seed_res: MaskResult) -> Stopping:
    """When the seed already meets the mask with the requested margin there is no reason to stop
    at it: aim for as much margin as the budget buys (better yield)."""
    if seed_res.worst_margin >= stopping.target_margin_db:
        return Stopping(stopping.max_evaluations, stopping.max_seconds, 100.0, stopping.xtol_rel)
    return stopping


def shortest_filter(problem: Problem) -> float:
    """A lower bound (m) on the end-to-end length of any filter of the problem's order: each
    half-wave resonator is at least half a wavelength in the substrate itself, c / (2 f0
    sqrt(eps_r)) (the effective permittivity of a strip is below eps_r), less its two open-end
    extensions (each below the substrate height), and every gap at least the minimum gap."""
    sub, fab = problem.strip_substrate, problem.strip_fab
    half = C0 / (2.0 * problem.f0 * math.sqrt(sub.eps_r)) - 2.0 * sub.height
    n = problem.order or 1
    gaps = problem.external.n_gaps(n)
    return max(n * half, 0.0) + gaps * fab.min_gap


def length_rule_unmeetable(problem: Problem) -> str | None:
    """Why the shop's ``max_total_length`` cannot be met by any half-wave filter of the problem,
    or None when it can (or there is no such rule)."""
    if problem.fab is None or problem.fab.max_total_length is None or problem.order is None:
        return None
    lmax, floor = problem.fab.max_total_length, shortest_filter(problem)
    if lmax >= floor:
        return None
    return (
        f"fab.max_total_length = {lmax * 1e3:.4g} mm: no {problem.order}-resonator half-wave "
        f"filter at {problem.f0 / 1e9:.4g} GHz on eps_r {problem.strip_substrate.eps_r:g} is "
        f"that short (each resonator is at least c/(2 f0 sqrt(eps_r)) less two open ends below "
        f"the substrate height: the filter at least {floor * 1e3:.4g} mm); allow at least "
        f"{floor * 1e3:.4g} mm, or a higher permittivity"
    )


def _length_constraint(problem: Problem, model: StripFilterModel, space: DesignSpace):
    """Optional max-total-length rule as an extra inequality (in % of the limit)."""
    lmax = problem.strip_fab.max_total_length
    if lmax is None:
        return None
    ng_n = len(model.split(np.zeros(len(model.names)))[0]) + model.order

    def extra(z: NDArray) -> tuple[NDArray, NDArray]:
        p = space.to_physical(z)
        total = float(np.sum(p[:ng_n]))
        dp = np.zeros((len(p), 1))
        dp[:ng_n, 0] = 100.0 / lmax
        return np.array([100.0 * (total - lmax) / lmax]), space.chain(p, dp).T

    return extra


def _refine_ideal(
    problem: Problem, sd: job.Seed, strategy: Strategy, stopping: Stopping, t0: float, progress=None
) -> RefineResult:
    d = sd.design
    n = d.order

    def factory(f: NDArray) -> IdealFilterModel:
        return IdealFilterModel(d.f0, d.z_ref, n, f)

    variables = [Variable(f"C {k}", c, 0.2 * c, 5.0 * c) for k, c in enumerate(d.capacitance)]
    variables += [
        Variable(f"theta {j + 1}", t, 0.8 * t, min(1.25 * t, 2 * math.pi))
        for j, t in enumerate(d.theta)
    ]
    space = DesignSpace(variables, mirror_ties(n + 1, 0) + mirror_ties(n, n + 1))
    p_seed = np.array([*d.capacitance, *d.theta])
    seed_res, _ = _verify(problem, factory, p_seed)
    stopping = _aim(stopping, seed_res)
    f_opt = optimiser_grid(problem.mask, n)
    z = space.to_free(p_seed)
    rounds = _refine_rounds(
        problem, factory, space, f_opt, z, seed_res, strategy, stopping, progress=progress
    )
    res, z, evaluations, history, notes = (
        rounds.res,
        rounds.z,
        rounds.evaluations,
        rounds.history,
        rounds.notes,
    )
    p = space.to_physical(z)
    if res.worst_margin < seed_res.worst_margin:
        notes.append(
            "the refiner found nothing better than the closed-form seed; the seed is returned"
        )
        p, res, z = p_seed, seed_res, space.to_free(p_seed)
    require_finite(f"{problem.name}: refined margins", list(res.worst.values()))
    status = Status.MET if res.passed else Status.NOT_MET
    return RefineResult(
        problem,
        status,
        strategy.value,
        None,
        tuple(p[: n + 1]),
        tuple(p[n + 1 :]),
        None,
        dict(res.worst),
        dict(res.where),
        _binding(res, space, z),
        evaluations,
        time.perf_counter() - t0,
        tuple(history),
        dict(seed_res.worst),
        None,
        res.worst_margin,
        None,
        (),
        tuple(notes),
    )
