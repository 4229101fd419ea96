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

**Metal thickness.** The field model's strips are zero-thickness sheets; the circuit model's
have the problem's thickness. The implicit method extracts its correction against the circuit
model with zero thickness and re-refines the circuit model with the problem's thickness and
that correction; it ranks and stops its rounds on each field solve carried to the problem's
thickness (refine.fullwave.correction, where the extraction lives). The aggressive map compares
each field solve with the problem's own circuit model, thickness included: it designs for the
field model's sheets, which only a problem without a thickness makes right.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from refine.circuit.builder import Adjustments
from refine.circuit.layout import Layout
from refine.circuit.model import StripFilterModel, strip_model_for
from refine.circuit.response import strip_medium_for, verification_grid
from refine.fullwave import verify
from refine.fullwave.correction import (
    ModelCorrection,
    extract_correction,
    fit_band,
)
from refine.fullwave.uncertainty import MeshVerdict
from refine.optimise.minimax import Stopping, minimax
from refine.optimise.space import DesignSpace, snap_layout, step_space
from refine.outputs import artwork, export
from refine.outputs.files import locked_folder
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


def extract(
    problem: Problem, check: verify.FieldCheck, start: Layout, others: tuple[Layout, ...] = ()
) -> Layout:
    """The layout whose circuit-model response best matches the field-solver response: a
    bounded least-squares fit from ``start`` and from each of ``others`` (the best one wins),
    within exp(±1.5) in each gap and ±25 % in each length and tap."""
    sel = fit_band(problem, check.f)
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
# (refine.fullwave.correction)
# --------------------------------------------------------------------------------------------


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
    #: each round's verdict margin (dB): its field solve carried to the problem's metal
    #: thickness (refine.fullwave.verify.FieldCheck.carried), the field margin itself on a
    #: problem without a thickness
    margins_at_thickness: tuple[float, ...] = ()

    @property
    def best(self) -> int:
        """Index of the round whose field-solver response has the largest worst margin, carried
        to the problem's metal thickness (the last round is not always the best when the map is
        poor)."""
        return max(range(len(self.checks)), key=lambda k: self._ranked(k))

    def _ranked(self, k: int) -> float:
        if self.margins_at_thickness:
            return self.margins_at_thickness[k]
        return self.checks[k].comparison.em_mask.worst_margin

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
                f"field solve {k}: worst mask margin {c.comparison.em_mask.worst_margin:+.2f} dB"
                + _at_thickness(c, self._ranked(k - 1))
                + f" (circuit model {c.comparison.model_mask.worst_margin:+.2f} dB), "
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


def _at_thickness(c: verify.FieldCheck, margin: float) -> str:
    """ ", +x.xx dB at the problem's metal thickness" where the problem has one."""
    t = c.problem.strip_substrate.metal_thickness * 1e6
    return "" if t == 0 else f", {margin:+.2f} dB at the problem's {t:g} um metal thickness"


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
    at_t: list[float] = []
    for k in range(max_runs):
        wd = Path(workdir) / f"round-{k + 1}" if workdir is not None else None
        c = verify.check_layout(problem, cur, mesh, wd, progress=progress)
        checks.append(c)
        # the round's own verdict margin: its field solve carried to the problem's metal
        # thickness where there is one (refine.fullwave.verify.FieldCheck.carried), so that the
        # rounds are ranked and stopped on the number their verdicts report
        m_t = c.judged_margin().value
        at_t.append(m_t)
        say(
            f"field solve {k + 1}: worst mask margin {c.comparison.em_mask.worst_margin:+.2f} dB"
            f"{_at_thickness(c, m_t)}, {c.comparison.summary_line()}"
        )
        # a round decides only beyond its mesh uncertainty; one mesh cannot bound its error,
        # so there the mask met on that mesh (at the problem's metal thickness) ends the rounds
        # (an explicitly undecided result)
        done = c.verdict is MeshVerdict.MET or (len(c.solves) <= 1 and m_t >= 0)
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
        tuple(at_t),
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
            "field_solver_margin_at_thickness_db": sm._ranked(k),
            "circuit_model_worst_margin_db": c.comparison.model_mask.worst_margin,
            "engine_seconds": c.seconds,
        }
        for k, (ly, c) in enumerate(zip(sm.layouts, sm.checks, strict=False))
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
