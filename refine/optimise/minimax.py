"""The refiner: minimax of mask violation under fab rules, on nlopt.

Formulation (epigraph): with z the free variables (logarithms of the dimensions) and g_i(z)
the mask constraint values in dB (g = -margin, see :mod:`refine.spec.mask`)::

    minimise t   subject to   g_i(z) - t <= 0  for every mask sample i,   lower <= z <= upper

so that t* = -(worst margin). Gradients come from the analytic cascade gradient. The run stops
as soon as the worst margin reaches the requested target, or on the evaluation budget.

Strategies (our names, one mapping to nlopt):

=====================  =============================================================
``gradient``           nlopt LD_SLSQP on the epigraph, analytic gradients; if it stalls
                       short of the target, nlopt LD_CCSAQ continues from its best point
                       (slower per step with many constraints, but it does not stall); if
                       that stalls too, up to two restarts from perturbed points, within
                       the evaluation budget (default)
``derivative-free``    nlopt LN_COBYLA on the epigraph, no gradients (the baseline)
``multistart``         ``gradient`` with up to four perturbed restarts until met
=====================  =============================================================

One entry, :func:`minimax`, serves every caller: the refiner, yield centring and EM-corrected
refinement. Failure policy of the adapter (:func:`_run_nlopt`): x0 is clipped into the bounds; nlopt's
round-off-limited, forced-stop and budget ends return the best point seen with its status;
the returned point is clipped into the bounds again (bounded methods can end a hair outside)
and re-evaluated.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Protocol

import nlopt
import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine.optimise.space import DesignSpace
from refine.optimise.strategy import Strategy
from refine.spec.mask import Mask

_NLOPT_ALGORITHM = {Strategy.GRADIENT: nlopt.LD_SLSQP, Strategy.DERIVATIVE_FREE: nlopt.LN_COBYLA}
_POLISH = nlopt.LD_CCSAQ
POLISH_BELOW_DB = 0.05  # restarts and polish only for runs that end below this worst margin
SLSQP_RESTARTS = 2
STALL_EVALUATIONS = 40  # a run that gains less than STALL_DB in this many evaluations has stalled
STALL_DB = 0.01
POLISH_EVALUATIONS = 80
POLISH_ROUNDS = 3  # a polish that used its whole budget and still gained goes on, this many times
GRADIENT_RESTARTS = 2  # the gradient strategy restarts from a perturbed point when it stalls
# CCSAQ solves a dual subproblem at every step; nlopt's default lets that inner solve run to
# 1e-14 relative or 100 000 evaluations, which on a 150–180-sample grid cost ~0.4 s a step
# (85–92 % of the N=9 alumina problem's time). A few hundred inner evaluations give the
# same outcomes over the problem set (benchmarks/refiner.py) at a fraction of the cost.
POLISH_DUAL_EVALUATIONS = 500


@dataclass(frozen=True)
class Stopping:
    """Stopping conditions; each applies when it is not None (a deliberate 0 is honoured)."""

    max_evaluations: int | None = 300
    max_seconds: float | None = None
    target_margin_db: float = 0.05
    xtol_rel: float | None = 1e-7

    def __post_init__(self) -> None:
        if self.max_evaluations is not None:
            v.integer_in_range("max_evaluations", self.max_evaluations, 1, 10**7)
        if self.max_seconds is not None:
            v.positive("max_seconds", self.max_seconds)
        v.real_in_range("target_margin_db", self.target_margin_db, -100.0, 100.0)
        if self.xtol_rel is not None:
            v.real_in_range("xtol_rel", self.xtol_rel, 0.0, 1.0)


ProgressFn = Callable[[int, float], None]


@dataclass
class RunRecord:
    """What one optimiser run did."""

    z: NDArray
    worst_margin: float
    evaluations: int
    status: str
    history: list[float] = field(default_factory=list)


ResponseFn = Callable[[NDArray, bool], tuple[NDArray, NDArray, NDArray | None, NDArray | None]]


KS_RHO = 20.0  # 1/dB: the smooth maximum overestimates a region's max by at most ln(m)/20 dB


def _aggregate(g: NDArray, jac: NDArray | None, sizes: list[int]) -> tuple[NDArray, NDArray | None]:
    """Kreisselmeier–Steinhauser smooth maximum per mask region: KS = max + ln Σ exp(ρ(g - max))/ρ,
    gradient Σ softmax(ρ g)·∇g. Conservative (KS ≥ max)."""
    out, rows, k = [], [], 0
    for m in sizes:
        gi = g[k : k + m]
        top = float(np.max(gi))
        w = np.exp(KS_RHO * (gi - top))
        out.append(top + math.log(float(np.sum(w))) / KS_RHO)
        if jac is not None:
            rows.append((w / np.sum(w)) @ jac[k : k + m])
        k += m
    return np.array(out), (np.array(rows) if jac is not None else None)


def _constraint_values(
    mask: MaskLike, f: NDArray, fn: ResponseFn, p: NDArray, space: DesignSpace, grad: bool
) -> tuple[NDArray, NDArray | None]:
    s11, s21, ds11, ds21 = fn(p, grad)
    if not grad:
        return mask.constraints(f, s11, s21)[0], None
    g, jac_p = mask.constraints(f, s11, s21, ds11, ds21)
    assert jac_p is not None  # asked for with the derivatives
    return g, space.chain(p, jac_p.T).T  # (n_constraints, n_free)


@dataclass
class _Best:
    """The best point an nlopt run has seen, and the stall bookkeeping."""

    z: NDArray
    worst: float = -np.inf
    n: int = 0
    n_at_best: int = 0
    last_best: float = -np.inf
    stalled: bool = False


def _run_nlopt(
    strategy: Strategy,
    space: DesignSpace,
    mask: MaskLike,
    f: NDArray,
    fn: ResponseFn,
    z0: NDArray,
    stopping: Stopping,
    extra: Callable[[NDArray], tuple[NDArray, NDArray]] | None = None,
    algo: int | None = None,
    aggregate: bool = False,
    progress: ProgressFn | None = None,
) -> RunRecord:
    """One epigraph run; returns the best point seen (see the module's failure policy).

    With ``aggregate`` each mask region enters as one smooth-maximum constraint
    (:func:`_aggregate`) instead of one constraint per frequency sample."""
    algo = _NLOPT_ALGORITHM[strategy] if algo is None else algo
    sizes = [len(i) for i in mask.region_indices(f)] if aggregate else None
    z0 = np.clip(z0, space.lower, space.upper)
    nz = space.n_free
    best = _Best(z0.copy())
    history: list[float] = []
    cache: dict[bytes, tuple[NDArray, NDArray | None]] = {}

    def evaluate(z: NDArray, want_grad: bool):
        key = z.tobytes() + bytes([want_grad])
        if key not in cache:
            p = space.to_physical(z)
            g, jac = _constraint_values(mask, f, fn, p, space, want_grad)
            worst = -float(np.max(g))  # the true worst sample, whatever the optimiser sees
            if sizes is not None:
                g, jac = _aggregate(g, jac, sizes)
            cache.clear()
            cache[key] = (g, jac)
            best.n += 1
            history.append(worst)
            feasible_extra = True
            if extra is not None:
                feasible_extra = bool(np.all(extra(z)[0] <= 1e-9))
            if worst > best.worst and feasible_extra:
                best.worst, best.z = worst, z.copy()
            if progress is not None:
                progress(best.n, best.worst)
            if worst >= stopping.target_margin_db and feasible_extra:
                opt.force_stop()
            elif best.n - best.n_at_best >= STALL_EVALUATIONS:
                best.stalled = True
                opt.force_stop()
            if worst > best.last_best + STALL_DB:
                best.last_best, best.n_at_best = worst, best.n
        return cache[key]

    opt = nlopt.opt(algo, nz + 1)
    opt.set_lower_bounds(np.append(space.lower, -1e3))
    opt.set_upper_bounds(np.append(space.upper, 1e3))

    def objective(y: NDArray, grad: NDArray) -> float:
        if grad.size:
            grad[:] = 0.0
            grad[-1] = 1.0
        return float(y[-1])

    n_con = evaluate(z0, False)[0].size

    def constraints(result: NDArray, y: NDArray, grad: NDArray) -> None:
        z, t = y[:-1], y[-1]
        g, jac = evaluate(z, grad.size > 0)
        result[:] = g - t
        if grad.size:
            grad[:, :-1] = jac
            grad[:, -1] = -1.0

    opt.set_min_objective(objective)
    opt.add_inequality_mconstraint(constraints, np.full(n_con, 1e-9))
    if extra is not None:
        n_extra = extra(z0)[0].size

        def extra_c(result: NDArray, y: NDArray, grad: NDArray) -> None:
            e, je = extra(y[:-1])
            result[:] = e
            if grad.size:
                grad[:, :-1] = je
                grad[:, -1] = 0.0

        opt.add_inequality_mconstraint(extra_c, np.full(n_extra, 1e-9))
    if stopping.max_evaluations is not None:
        opt.set_maxeval(int(stopping.max_evaluations))
    if stopping.max_seconds is not None:
        opt.set_maxtime(float(stopping.max_seconds))
    if stopping.xtol_rel is not None:
        opt.set_xtol_rel(float(stopping.xtol_rel))
    if strategy is Strategy.DERIVATIVE_FREE:
        opt.set_initial_step(np.append(np.full(nz, 0.02), 1.0))
    if algo == _POLISH:
        opt.set_param("dual_maxeval", POLISH_DUAL_EVALUATIONS)
    g0 = evaluate(z0, False)[0]
    y0 = np.append(z0, float(np.max(g0)) + 1e-6)
    status = "stopped"
    try:
        opt.optimize(y0)
        code = opt.last_optimize_result()
        status = {
            nlopt.STOPVAL_REACHED: "target reached",
            nlopt.FTOL_REACHED: "converged",
            nlopt.XTOL_REACHED: "converged",
            nlopt.MAXEVAL_REACHED: "evaluation budget used",
            nlopt.MAXTIME_REACHED: "time budget used",
            nlopt.SUCCESS: "converged",
        }.get(code, f"nlopt code {code}")
    except nlopt.ForcedStop:
        status = "stalled" if best.stalled else "target reached"
    except nlopt.RoundoffLimited:
        status = "round-off limited"
    except (RuntimeError, ValueError) as e:  # nlopt's generic failure: keep the best point
        status = f"optimiser failure ({e})"
    z = np.clip(best.z, space.lower, space.upper)
    g = _constraint_values(mask, f, fn, space.to_physical(z), space, False)[0]
    return RunRecord(z, -float(np.max(g)), best.n, status, history)


class MaskLike(Protocol):
    """What the adapter needs of a mask: constraint values (with their Jacobian) and, for
    aggregation, which samples belong to which region."""

    def constraints(
        self,
        f: NDArray,
        s11: NDArray,
        s21: NDArray,
        ds11: NDArray | None = None,
        ds21: NDArray | None = None,
    ) -> tuple[NDArray, NDArray | None]: ...

    def region_indices(self, f: NDArray) -> list[NDArray[np.intp]]: ...


def minimax(
    space: DesignSpace,
    mask: MaskLike,
    f: NDArray,
    fn: ResponseFn,
    z0: NDArray,
    stopping: Stopping,
    strategy: Strategy = Strategy.GRADIENT,
    *,
    extra: Callable[[NDArray], tuple[NDArray, NDArray]] | None = None,
    polish: bool = True,
    aggregate: bool = False,
    restarts: int = 4,
    seed: int = 0,
    thorough: bool = True,
    progress: ProgressFn | None = None,
) -> RunRecord:
    """Maximise the worst mask margin over ``space`` from ``z0``: the one optimiser entry.

    ``strategy`` picks the method (see the module docstring). With ``polish`` False the
    gradient strategy is one SLSQP run, without restarts or the CCSAQ polish; ``aggregate``
    then lets each mask region enter as one smooth-maximum constraint. ``extra`` adds
    inequality constraints c(z) <= 0 with their Jacobian. Returns the best point seen (see the
    failure policy)."""
    if not polish or strategy is Strategy.DERIVATIVE_FREE:
        return _run_nlopt(
            strategy,
            space,
            mask,
            f,
            fn,
            z0,
            stopping,
            extra,
            aggregate=aggregate,
            progress=progress,
        )
    if strategy not in (Strategy.GRADIENT, Strategy.MULTISTART):
        return _run_nlopt(strategy, space, mask, f, fn, z0, stopping, extra, progress=progress)
    t0 = time.perf_counter()
    rec = _gradient_then_polish(space, mask, f, fn, z0, stopping, extra, thorough, progress)
    rng = np.random.default_rng(seed)
    total, hist = rec.evaluations, list(rec.history)
    for k in range(restarts if strategy is Strategy.MULTISTART else GRADIENT_RESTARTS):
        left = None if stopping.max_evaluations is None else stopping.max_evaluations - total
        if rec.worst_margin >= min(stopping.target_margin_db, POLISH_BELOW_DB) or (
            left is not None and left < STALL_EVALUATIONS
        ):
            break
        if stopping.max_seconds is not None and time.perf_counter() - t0 > stopping.max_seconds:
            break
        # alternately near the start and near the best point: a stall point perturbed by a few
        # per cent mostly falls back into the same trap
        base = z0 if k % 2 == 0 else rec.z
        start = np.clip(base + rng.normal(0.0, 0.03, rec.z.size), space.lower, space.upper)
        rest = Stopping(left, stopping.max_seconds, stopping.target_margin_db, stopping.xtol_rel)
        done = total

        def report(n: int, worst: float, done: int = done) -> None:
            if progress is not None:
                progress(done + n, worst)

        r = _gradient_then_polish(space, mask, f, fn, start, rest, extra, thorough, report)
        total += r.evaluations
        hist += r.history
        if r.worst_margin > rec.worst_margin:
            rec = r
    return RunRecord(rec.z, rec.worst_margin, total, rec.status, hist)


def _gradient_then_polish(
    space,
    mask,
    f,
    fn,
    z0,
    stopping: Stopping,
    extra,
    thorough: bool = True,
    progress: ProgressFn | None = None,
) -> RunRecord:
    """SLSQP; while the mask is still violated, SLSQP again from its best point (a fresh
    quasi-Newton model, up to ``SLSQP_RESTARTS`` times), then CCSAQ from the best point for at
    most ``POLISH_EVALUATIONS`` evaluations, again (up to ``POLISH_ROUNDS`` rounds) while a
    round uses its whole budget and still gains. The polish rescues stalled runs; it is not used to
    buy extra margin, where it is slow (its dual subproblem grows with the constraint count).
    Unless ``thorough``, the polish sees each mask region as one smooth-maximum constraint,
    which is much faster and somewhat less effective."""

    def report(n: int, worst: float) -> None:
        if progress is not None:
            progress(total_box[0] + n, worst)

    total_box = [0]
    best = _run_nlopt(Strategy.GRADIENT, space, mask, f, fn, z0, stopping, extra, progress=report)
    total, hist = best.evaluations, list(best.history)

    def budget_left() -> int | None:
        return None if stopping.max_evaluations is None else stopping.max_evaluations - total

    stages = [(None, SLSQP_RESTARTS), (_POLISH, POLISH_ROUNDS)]
    for algo, times in stages:
        for _ in range(times):
            left = budget_left()
            if best.worst_margin >= min(stopping.target_margin_db, POLISH_BELOW_DB) or (
                left is not None and left < 2
            ):
                return RunRecord(best.z, best.worst_margin, total, best.status, hist)
            cap = (
                left
                if algo is None
                else (POLISH_EVALUATIONS if left is None else min(left, POLISH_EVALUATIONS))
            )
            rest = Stopping(cap, stopping.max_seconds, stopping.target_margin_db, stopping.xtol_rel)
            r = _run_nlopt(
                Strategy.GRADIENT,
                space,
                mask,
                f,
                fn,
                best.z,
                rest,
                extra,
                algo=algo,
                aggregate=algo is not None and not thorough,
            )
            total += r.evaluations
            hist += r.history
            gain = r.worst_margin - best.worst_margin
            if gain > 1e-6:
                best = r
            if algo is None and gain <= 1e-6:
                break  # a restart that finds nothing new will not find it the next time either
            if algo is not None and (gain < STALL_DB or (cap is not None and r.evaluations < cap)):
                break  # the polish converged, or stopped gaining: another round buys nothing
    return RunRecord(best.z, best.worst_margin, total, best.status, hist)


def optimiser_grid(mask: Mask, order: int) -> NDArray[np.float64]:
    """The optimiser's sampling: the passband with ~8 points per resonator, every stopband
    uniformly plus a cluster at its edge nearest the passband, every edge exactly."""
    n_pass = max(41, 8 * order + 9)
    parts: list[NDArray] = [
        np.linspace(mask.passband_start, mask.passband_stop, n_pass),
        np.array([mask.midband]),
    ]
    for sb in mask.stopbands:
        lo = max(sb.start, 1e-3 * sb.stop)
        parts.append(np.linspace(lo, sb.stop, 41))
        width = sb.stop - lo
        if sb.stop <= mask.passband_start:  # below the passband: cluster at the top edge
            parts.append(sb.stop - width * np.geomspace(1e-3, 0.1, 8))
        else:
            parts.append(lo + width * np.geomspace(1e-3, 0.1, 8))
    return np.unique(np.concatenate(parts))
