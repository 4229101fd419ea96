"""EM-corrected refinement by space mapping: the circuit model is the coarse model, the field
solver the fine one.

Two methods; each round starts with one field solve of the current layout and stops as soon as
its response meets the mask.

**implicit** (the default; Bandler, Cheng, Nikolova and Ismail, "Implicit space mapping
optimization exploiting preassigned parameters", IEEE Trans. MTT 52(1), 378-385, 2004): the
circuit model gets preassigned parameters it otherwise lacks (:class:`ModelCorrection`: a
factor and an offset on each gap, an offset on each resonator's length and each tap position,
a factor on the line attenuation). One correction is extracted so that the corrected circuit
model reproduces every field solve made so far at once (multipoint extraction, as surveyed in
Bandler, Cheng, Dakroury, Mohamed, Bakr, Madsen and Sondergaard, "Space mapping: the state of
the art", IEEE Trans. MTT 52(1), 337-361, 2004, from memory); the gap offsets join once two
solves with different gaps pin them down. Then the layout is re-refined on the corrected model
for the largest worst margin, within a step bound (:data:`IMPLICIT_STEP`), the shop's minimum
gap and grid applied, and solved again. Measured on the field solver (README): a factor alone,
fitted to one solve, under-predicts how fast the coupling falls as a gap opens, so the first
unbounded move overshoots; from two solves the factor-and-offset fit predicted the third
solve's margin to about 0.1 dB. A shunt capacitance at each tee was tried as a further
parameter and dropped: it fitted one solve better and predicted the next one worse.

**aggressive** (Bandler, Biernacki, Chen, Grobelny and Hemmers, "Space mapping technique for
electromagnetic optimization", IEEE Trans. MTT 42(12), 2536-2544, 1994; Bandler, Biernacki,
Chen, Hemmers and Madsen, "Electromagnetic optimization exploiting aggressive space mapping",
IEEE Trans. MTT 43(12), 2874-2882, 1995): with x* the circuit-model optimum, extract the
layout x_c whose circuit-model response best matches the field solve of x_f, and move
x_f <- x_f - (x_c - x*): the unit-Jacobian step of the 1995 paper; gaps on a log scale,
lengths and taps in metres. Two Jacobian updates were tried on the field solver and dropped:
the paper's Broyden rank-one update and a per-parameter secant of the diagonal. From one or two
noisy extractions both made the next move worse than the unit step.

Gaps, resonator lengths and tap positions are what moves (mirror-tied when the layout is
symmetric); widths stay as refined.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from refine.circuit.builder import Adjustments
from refine.circuit.layout import Layout
from refine.circuit.model import StripFilterModel, strip_model_for
from refine.circuit.response import evaluate_layout, strip_medium_for, verification_grid
from refine.fullwave import verify
from refine.fullwave.uncertainty import MeshVerdict
from refine.optimise.minimax import Stopping, minimax
from refine.optimise.space import DesignSpace, mirror_ties, snap_layout, step_space
from refine.outputs import artwork, export
from refine.outputs.files import locked_folder
from refine.spec.coupling import Coupling
from refine.spec.problem import Problem

FILES = ("fullwave-layout.json", "fullwave-layout.dxf", "fullwave-rounds.json")


def _model(
    problem: Problem, layout: Layout, f: NDArray, adjust: Adjustments | None = None
) -> StripFilterModel:
    """The circuit model the map moves: gaps, lengths and taps free, widths as drawn."""
    return strip_model_for(
        strip_medium_for(problem), problem.gap_model, problem.z_ref, layout, f, False, adjust
    )


def _mapped(model: StripFilterModel, layout: Layout) -> DesignSpace:
    """The mapped parameters of a layout in the one design space (gaps, lengths and taps as
    logarithms, mirror-tied when the layout is symmetric) with wide bounds: the map's own step
    bounds apply where it moves."""
    return step_space(model, layout, 3.0, 0.9, None)


def _fit_band(problem: Problem, f: NDArray) -> NDArray[np.bool_]:
    m = problem.mask
    bw = m.passband_stop - m.passband_start
    return (f >= m.passband_start - 1.5 * bw) & (f <= m.passband_stop + 1.5 * bw)


def extract(
    problem: Problem, check: verify.FieldCheck, start: Layout, others: tuple[Layout, ...] = ()
) -> Layout:
    """The layout whose circuit-model response best matches the field-solver response: a
    bounded least-squares fit from ``start`` and from each of ``others`` (the best one wins),
    within exp(±1.5) in each gap and ±25 % in each length and tap."""
    sel = _fit_band(problem, check.f)
    f = check.f[sel]
    model = _model(problem, start, f)
    sp = step_space(model, start, 1.5, 0.25, None)
    target = np.concatenate([np.abs(check.s_em[sel, 0, 0]), np.abs(check.s_em[sel, 1, 0])])

    def resid(z: NDArray) -> NDArray:
        r = model.response(sp.to_physical(z))
        return np.concatenate([np.abs(r.s11), np.abs(r.s21)]) - target

    lo, hi = sp.lower + 1e-9, sp.upper - 1e-9
    best = None
    for other in (start, *others):
        z0 = np.clip(sp.to_free(sp.clip(model.vector(other))), lo, hi)
        from scipy.optimize import least_squares  # loaded on first use (start-up time)

        sol = least_squares(resid, z0, bounds=(sp.lower, sp.upper), x_scale=0.01, diff_step=1e-4)
        if best is None or sol.cost < best.cost:
            best = sol
    assert best is not None
    return model.layout(sp.to_physical(best.x))


# --------------------------------------------------------------------------------------------
# Implicit space mapping: preassigned model parameters extracted from the field solves
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ModelCorrection:
    """Corrections to the circuit model, extracted from field solves (the preassigned
    parameters of implicit space mapping).

    gap_factors : multiply each gap's series capacitance; gap_offsets : metres taken off each
    drawn gap before the gap model sees it (with the factor, this lets the correction follow
    how fast the field solver's coupling changes with the gap, which a factor alone misses);
    length_offsets : metres added to each resonator's electrical length (open ends,
    dispersion, the tee); tap_offsets : metres added to each tap position (where the tee
    really joins; None for gap coupling); loss_factor : multiplies every line's attenuation
    (radiation and the field solver's own metal loss are not in the circuit model).
    """

    gap_factors: tuple[float, ...]
    length_offsets: tuple[float, ...]
    tap_offsets: tuple[float, float] | None = None
    loss_factor: tuple[float] = (1.0,)
    gap_offsets: tuple[float, ...] | None = None

    def adjustments(self) -> Adjustments:
        """The correction as the circuit builder's :class:`Adjustments`."""
        return Adjustments(
            self.gap_factors,
            self.gap_offsets,
            self.length_offsets,
            self.tap_offsets,
            self.loss_factor[0],
        )

    @classmethod
    def none(cls, layout: Layout) -> ModelCorrection:
        tap = layout.external is Coupling.TAP
        return cls(
            (1.0,) * len(layout.gaps),
            (0.0,) * layout.order,
            (0.0, 0.0) if tap else None,
            (1.0,),
            (0.0,) * len(layout.gaps),
        )


def corrected_response(
    problem: Problem, layout: Layout, corr: ModelCorrection, f: NDArray
) -> NDArray[np.complex128]:
    """S-matrix ``(nf, 2, 2)`` of the circuit model with a correction applied."""
    return evaluate_layout(problem, layout, f, corr.adjustments())


_Q_SCALE = {
    "gap_factors": 1.0,
    "gap_offsets": 1e-5,
    "length_offsets": 1e-4,
    "tap_offsets": 1e-4,
    "loss_factor": 1.0,
}
_Q_LOG = ("gap_factors", "loss_factor")  # extracted as logs
_Q_BOUNDS = {
    "gap_factors": (-0.7, 0.7),  # log of the factor: 0.5 to 2
    "gap_offsets": (-6.0, 6.0),  # +-60 um
    "length_offsets": (-5.0, 5.0),  # +-0.5 mm
    "tap_offsets": (-5.0, 5.0),
    "loss_factor": (-0.1, 4.0),  # log: 0.9 to 55
}


def _q_groups(layout: Layout, with_gap_offsets: bool) -> list[tuple[str, tuple[int, ...]]]:
    """(field, tied indices) of every extracted correction parameter, mirror copies sharing one
    entry when the layout is symmetric."""
    fields = [("gap_factors", len(layout.gaps))]
    if with_gap_offsets:
        fields.append(("gap_offsets", len(layout.gaps)))
    fields.append(("length_offsets", layout.order))
    if layout.external is Coupling.TAP:
        fields.append(("tap_offsets", 2))
    fields.append(("loss_factor", 1))
    groups: list[tuple[str, tuple[int, ...]]] = []
    for name, n in fields:
        ties = {i: j for i, j in mirror_ties(n, 0)} if layout.is_mirror else {}
        mirrored = set(ties.values())
        for i in range(n):
            if i not in mirrored:
                groups.append((name, (i, ties[i]) if i in ties else (i,)))
    return groups


def _q_to_correction(layout: Layout, groups, q: NDArray) -> ModelCorrection:
    base = ModelCorrection.none(layout)
    vals = {
        f: list(getattr(base, f))
        for f in ("gap_factors", "gap_offsets", "length_offsets", "loss_factor")
    }
    if layout.external is Coupling.TAP:
        vals["tap_offsets"] = [0.0, 0.0]
    for (field, idx), qi in zip(groups, q, strict=True):
        val = float(np.exp(qi)) if field in _Q_LOG else float(qi) * _Q_SCALE[field]
        for i in idx:
            vals[field][i] = val
    return ModelCorrection(**{k: tuple(v) for k, v in vals.items()})


def _correction_to_q(groups, corr: ModelCorrection) -> NDArray:
    out = []
    for field, idx in groups:
        x = getattr(corr, field)[idx[0]]
        out.append(np.log(x) if field in _Q_LOG else x / _Q_SCALE[field])
    return np.array(out)


def extract_correction(
    problem: Problem, checks: Sequence[verify.FieldCheck], start: ModelCorrection | None = None
) -> tuple[ModelCorrection, float]:
    """The one correction that makes the circuit model reproduce every field solve so far
    (multipoint extraction: bounded least squares on |S11| and |S21| around the passband, all
    solves at once), and the RMS misfit left. With one solve only the gap factors are fitted;
    from two solves with different gaps, the gap offsets as well."""
    lay = checks[-1].layout
    if not isinstance(lay, Layout):
        raise TypeError("space mapping corrects end-coupled layouts only")
    distinct = len({c.layout.gaps for c in checks if isinstance(c.layout, Layout)}) >= 2
    groups = _q_groups(lay, distinct)
    data: list[tuple[Layout, NDArray, NDArray]] = []
    for c in checks:
        assert isinstance(c.layout, Layout)
        sel = _fit_band(problem, c.f)
        target = np.concatenate([np.abs(c.s_em[sel, 0, 0]), np.abs(c.s_em[sel, 1, 0])])
        data.append((c.layout, c.f[sel], target))

    def resid(q: NDArray) -> NDArray:
        corr = _q_to_correction(lay, groups, q)
        out = []
        for layout, f, target in data:
            s = corrected_response(problem, layout, corr, f)
            out.append(np.concatenate([np.abs(s[:, 0, 0]), np.abs(s[:, 1, 0])]) - target)
        return np.concatenate(out)

    lo = np.array([_Q_BOUNDS[g][0] for g, _ in groups])
    hi = np.array([_Q_BOUNDS[g][1] for g, _ in groups])
    starts = [np.zeros(len(groups))]
    if start is not None:
        starts.append(np.clip(_correction_to_q(groups, start), lo + 1e-9, hi - 1e-9))
    best = None
    for q0 in starts:
        from scipy.optimize import least_squares  # loaded on first use (start-up time)

        sol = least_squares(resid, q0, bounds=(lo, hi), x_scale=0.1, diff_step=1e-4)
        if best is None or sol.cost < best.cost:
            best = sol
    assert best is not None
    rms = float(np.sqrt(np.mean(best.fun**2)))
    return _q_to_correction(lay, groups, best.x), rms


# the most one round of implicit space mapping moves: 0.3 in log gap (35 %), 2 % in length and
# tap; the extracted correction holds near the solves it came from, not across the whole space
IMPLICIT_STEP = (0.3, 0.02)


def rerefine(
    problem: Problem,
    layout: Layout,
    corr: ModelCorrection,
    step: tuple[float, float] = IMPLICIT_STEP,
) -> Layout:
    """The layout with the largest worst margin on the corrected circuit model, from
    ``layout``: the one optimiser entry with exact gradients, over the gaps (at or above the
    shop's minimum), resonator lengths and taps, mirror-tied; widths fixed. ``step`` bounds the
    move either way: (log gap, relative length or tap)."""
    assert problem.fab is not None
    f = verification_grid(problem, 201)
    model = _model(problem, layout, f, corr.adjustments())
    space = step_space(model, layout, step[0], step[1], problem.strip_fab.min_gap)

    def fn(p: NDArray, grad: bool):
        r = model.response(p, grad)
        return r.s11, r.s21, r.ds11, r.ds21

    rec = minimax(space, problem.mask, f, fn, space.start(), Stopping(200, None, 100.0, 1e-7))
    return model.layout(space.to_physical(rec.z))


@dataclass(frozen=True)
class Correction:
    """Rounds of EM-corrected refinement: the layout, its field check and (where a further
    round followed) the circuit-model layout extracted from that check."""

    problem: Problem
    target: Layout
    method: str
    layouts: tuple[Layout, ...]
    checks: tuple[verify.FieldCheck, ...]
    extracted: tuple  # ModelCorrection per round (implicit) or the extracted Layout (aggressive)
    misfits: tuple[float, ...]  # implicit: RMS |S| misfit left after each extraction
    notes: tuple[str, ...]
    seconds: float

    @property
    def best(self) -> int:
        """Index of the round whose field-solver response has the largest worst margin (the
        last round is not always the best when the map is poor)."""
        return max(
            range(len(self.checks)), key=lambda k: self.checks[k].comparison.em_mask.worst_margin
        )

    @property
    def met(self) -> bool:
        """The best round meets the mask beyond its mesh uncertainty."""
        return self.checks[self.best].verdict is MeshVerdict.MET

    @property
    def runs(self) -> int:
        return len(self.checks)

    def summary(self) -> str:
        lines = []
        for k, c in enumerate(self.checks, start=1):
            lines.append(
                f"field solve {k}: worst mask margin {c.comparison.em_mask.worst_margin:+.2f} dB "
                f"(circuit model {c.comparison.model_mask.worst_margin:+.2f} dB), "
                f"{c.seconds:.0f} s"
            )
        for k, m in enumerate(self.misfits, start=1):
            lines.append(f"  correction from field solve {k}: RMS |S| misfit left {m:.3f}")
        best = self.checks[self.best]
        lines.append(
            f"EM-corrected refinement ({self.method} space mapping), {self.runs} field solves, "
            f"{self.seconds:.0f} s in all; best: field solve {self.best + 1}: "
            f"{best.verdict_sentence()}"
        )
        return "\n".join(lines + [f"  note: {n}" for n in self.notes])


METHODS = ("implicit", "aggressive")


def correct(
    problem: Problem,
    layout: Layout,
    mesh: str = "coarse",
    max_runs: int = 3,
    progress: Callable[[str], None] | None = None,
    workdir: str | Path | None = None,
    method: str = "implicit",
) -> Correction:
    """EM-corrected refinement from a circuit-model optimum ``layout`` (see the module doc).

    method "implicit": extract one :class:`ModelCorrection` from all field solves so far and
    re-refine the corrected circuit model; "aggressive": the unit-step input-space map."""
    if not 1 <= max_runs <= 10:
        raise ValueError(f"max_runs = {max_runs} is outside the allowed range [1, 10]")
    if method not in METHODS:
        raise ValueError(f"method = {method!r} is not one of the allowed values {METHODS}")
    t0 = time.perf_counter()
    say = progress or (lambda s: None)
    fab = problem.fab
    assert fab is not None
    model = _model(problem, layout, verification_grid(problem, 3))
    sp = _mapped(model, layout)
    z_star = sp.to_free(model.vector(layout))
    corr: ModelCorrection | None = None
    cur = layout
    layouts: list[Layout] = [layout]
    checks: list[verify.FieldCheck] = []
    corrections: list[ModelCorrection] = []
    maps: list[Layout] = []
    misfits: list[float] = []
    notes: list[str] = []
    for k in range(max_runs):
        wd = Path(workdir) / f"round-{k + 1}" if workdir is not None else None
        c = verify.check_layout(problem, cur, mesh, wd, progress=progress)
        checks.append(c)
        say(
            f"field solve {k + 1}: worst mask margin {c.comparison.em_mask.worst_margin:+.2f} dB, "
            f"{c.comparison.summary_line()}"
        )
        # a round decides only beyond its mesh uncertainty; one mesh cannot bound its error,
        # so there the mask met on that mesh ends the rounds (an explicitly undecided result)
        done = c.verdict is MeshVerdict.MET or (len(c.solves) <= 1 and c.comparison.em_mask.passed)
        if done or k == max_runs - 1:
            break
        if method == "implicit":
            corr, misfit = extract_correction(problem, checks, corr)
            corrections.append(corr)
            misfits.append(misfit)
            cur_new = rerefine(problem, cur, corr)
        else:
            xc = extract(problem, c, cur, (layout, *maps[-1:]))
            maps.append(xc)
            z_cur, z_c = sp.to_free(model.vector(cur)), sp.to_free(model.vector(xc))
            cur_new = model.layout(sp.to_physical(z_cur - (z_c - z_star)))
        cur, fab_notes = snap_layout(fab, model, cur_new)
        notes += fab_notes
        layouts.append(cur)
    return Correction(
        problem,
        layout,
        method,
        tuple(layouts),
        tuple(checks),
        tuple(corrections) if method == "implicit" else tuple(maps),
        tuple(misfits),
        tuple(notes),
        time.perf_counter() - t0,
    )


def write_corrected(sm: Correction, out: str | Path, force: bool = False) -> list[Path]:
    """The best layout found (JSON, DXF: the round with the largest field-solver margin) and
    the history of the rounds."""
    with locked_folder(out, force, FILES) as folder:
        return _write_corrected(sm, folder)


def _write_corrected(sm: Correction, out: Path) -> list[Path]:
    names = FILES
    lay = sm.layouts[sm.best]
    rounds = [
        {
            "layout": export.layout_dict(ly),
            "field_solver_worst_margin_db": c.comparison.em_mask.worst_margin,
            "circuit_model_worst_margin_db": c.comparison.model_mask.worst_margin,
            "engine_seconds": c.seconds,
        }
        for ly, c in zip(sm.layouts, sm.checks, strict=False)
    ]
    return [
        export.write_json(out / names[0], export.layout_dict(lay)),
        artwork.write_dxf_artwork(
            out / names[1],
            artwork.artwork(lay, sm.problem.fab.etch_bias if sm.problem.fab else 0.0),
            title=f"{sm.problem.name} (EM-corrected)",
        ),
        export.write_json(
            out / names[2],
            {
                "met": sm.met,
                "runs": sm.runs,
                "best_round": sm.best + 1,
                "seconds": sm.seconds,
                "rounds": rounds,
            },
        ),
    ]
