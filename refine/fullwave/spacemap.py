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
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import least_squares

from refine.circuit.layout import Layout
from refine.fullwave import geometry, verify
from refine.outputs import export
from refine.outputs import files as outputs
from refine.spec.problem import Problem

FILES = ("fullwave-layout.json", "fullwave-layout.dxf", "fullwave-rounds.json")


def _mirror_groups(
    fields: list[tuple[str, int]], symmetric: bool
) -> tuple[tuple[str, tuple[int, ...]], ...]:
    """(field, tied indices) for each free entry of each (field, length): entry i and its
    mirror n-1-i share one entry when the layout is symmetric."""
    groups = []
    for field, n in fields:
        for i in range((n + 1) // 2 if symmetric else n):
            groups.append((field, tuple(sorted({i, n - 1 - i})) if symmetric else (i,)))
    return tuple(groups)


@dataclass(frozen=True)
class _Space:
    """The mapped parameters of a layout: which entries are free and which are mirror copies."""

    layout: Layout
    groups: tuple[tuple[str, tuple[int, ...]], ...]  # (field, indices tied together)

    @classmethod
    def of(cls, layout: Layout) -> _Space:
        fields = [("gaps", len(layout.gaps)), ("lengths", layout.order)]
        if layout.external == "tap":
            fields.append(("taps", 2))
        return cls(layout, _mirror_groups(fields, geometry.is_mirror(layout)))

    def vector(self, lay: Layout) -> NDArray:
        """Gaps as log, lengths and taps in metres."""
        out = []
        for field, idx in self.groups:
            x = getattr(lay, field)[idx[0]]
            out.append(np.log(x) if field == "gaps" else x)
        return np.array(out)

    def layout_at(self, x: NDArray) -> Layout:
        vals = {f: list(getattr(self.layout, f)) for f in ("gaps", "lengths")}
        if self.layout.external == "tap":
            vals["taps"] = list(self.layout.taps)
        for (field, idx), xi in zip(self.groups, x, strict=True):
            for i in idx:
                vals[field][i] = float(np.exp(xi)) if field == "gaps" else float(xi)
        kw = {"gaps": tuple(vals["gaps"]), "lengths": tuple(vals["lengths"])}
        if "taps" in vals:
            kw["taps"] = tuple(vals["taps"])
        return replace(self.layout, **kw)


def _fit_band(problem: Problem, f: NDArray) -> NDArray[np.bool_]:
    m = problem.mask
    bw = m.passband_stop - m.passband_start
    return (f >= m.passband_start - 1.5 * bw) & (f <= m.passband_stop + 1.5 * bw)


def extract(
    problem: Problem, check: verify.FieldCheck, start: Layout, others: tuple[Layout, ...] = ()
) -> Layout:
    """The layout whose circuit-model response best matches the field-solver response: a
    bounded least-squares fit from ``start`` and from each of ``others`` (the best one wins)."""
    sp = _Space.of(start)
    sel = _fit_band(problem, check.f)
    f = check.f[sel]
    target = np.concatenate([np.abs(check.s_em[sel, 0, 0]), np.abs(check.s_em[sel, 1, 0])])
    x0 = sp.vector(start)
    scale = np.where([g == "gaps" for g, _ in sp.groups], 1.0, x0)

    def resid(u: NDArray) -> NDArray:
        s = outputs.evaluate_layout(problem, sp.layout_at(x0 + u * scale), f)
        return np.concatenate([np.abs(s[:, 0, 0]), np.abs(s[:, 1, 0])]) - target

    lo = np.where([g == "gaps" for g, _ in sp.groups], -1.5, -0.25)
    hi = np.where([g == "gaps" for g, _ in sp.groups], 1.5, 0.25)
    best = None
    for other in (start, *others):
        u0 = np.clip((sp.vector(other) - x0) / scale, lo + 1e-9, hi - 1e-9)
        sol = least_squares(resid, u0, bounds=(lo, hi), x_scale=0.01, diff_step=1e-4)
        if best is None or sol.cost < best.cost:
            best = sol
    return sp.layout_at(x0 + best.x * scale)


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

    @classmethod
    def none(cls, layout: Layout) -> ModelCorrection:
        tap = layout.external == "tap"
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
    import warnings

    from refine import validity
    from refine.circuit import builder as circuit
    from refine.circuit import cascade
    from refine.optimise import seed as job

    lengths = tuple(x + d for x, d in zip(layout.lengths, corr.length_offsets, strict=True))
    kw: dict = {"lengths": lengths}
    if layout.taps is not None:
        kw["taps"] = tuple(t + d for t, d in zip(layout.taps, corr.tap_offsets, strict=True))
    if corr.gap_offsets is not None:
        # the effective gap never closes: at least a tenth of the drawn one
        kw["gaps"] = tuple(
            max(s - d, 0.1 * s) for s, d in zip(layout.gaps, corr.gap_offsets, strict=True)
        )
    lay = replace(layout, **kw)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        els = circuit.layout_elements(lay, job.medium_for(problem), problem.gap_model, f)
    out: list = []
    k = 0
    kl = corr.loss_factor[0]
    for e in els:
        if isinstance(e, cascade.PiNetwork):
            e = replace(e, c_series=np.asarray(e.c_series) * corr.gap_factors[k])
            k += 1
        elif isinstance(e, cascade.Line | cascade.ShuntOpenStub) and kl != 1.0:
            g = np.asarray(e.gamma)
            e = replace(e, gamma=kl * g.real + 1j * g.imag)
        out.append(e)
    return cascade.s_parameters(out, f, problem.z_ref)


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
    fields = [("gap_factors", len(layout.gaps))]
    if with_gap_offsets:
        fields.append(("gap_offsets", len(layout.gaps)))
    fields.append(("length_offsets", layout.order))
    if layout.external == "tap":
        fields.append(("tap_offsets", 2))
    fields.append(("loss_factor", 1))
    return list(_mirror_groups(fields, geometry.is_mirror(layout)))


def _q_to_correction(layout: Layout, groups, q: NDArray) -> ModelCorrection:
    base = ModelCorrection.none(layout)
    vals = {
        f: list(getattr(base, f))
        for f in ("gap_factors", "gap_offsets", "length_offsets", "loss_factor")
    }
    if layout.external == "tap":
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
    distinct = len({c.layout.gaps for c in checks}) >= 2
    groups = _q_groups(lay, distinct)
    data = []
    for c in checks:
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
        sol = least_squares(resid, q0, bounds=(lo, hi), x_scale=0.1, diff_step=1e-4)
        if best is None or sol.cost < best.cost:
            best = sol
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
    ``layout``: an epigraph minimax (SLSQP, finite-difference gradients) over the gaps (log,
    at or above the shop's minimum), resonator lengths and taps, mirror-tied; widths fixed.
    ``step`` bounds the move either way: (log gap, relative length or tap)."""
    from scipy.optimize import minimize

    from refine.optimise import seed as job

    sp = _Space.of(layout)
    f = job.verification_grid(problem, 201)
    x0 = sp.vector(layout)
    isgap = np.array([g == "gaps" for g, _ in sp.groups])
    scale = np.where(isgap, 1.0, x0)

    def g_of(u: NDArray) -> NDArray:
        s = corrected_response(problem, sp.layout_at(x0 + u * scale), corr, f)
        g, _ = problem.mask.constraints(f, s[:, 0, 0], s[:, 1, 0])
        return g

    g0 = g_of(np.zeros_like(x0))
    z0 = np.append(np.zeros_like(x0), g0.max())
    lo_gap = np.log(problem.fab.min_gap) - x0
    bounds = [
        (max(lo, -step[0]), step[0]) if ig else (-step[1], step[1])
        for ig, lo in zip(isgap, np.where(isgap, lo_gap, -np.inf), strict=True)
    ] + [(None, None)]
    res = minimize(
        lambda z: z[-1],
        z0,
        jac=lambda z: np.append(np.zeros(z.size - 1), 1.0),
        method="SLSQP",
        bounds=bounds,
        constraints=[{"type": "ineq", "fun": lambda z: z[-1] - g_of(z[:-1])}],
        options={"maxiter": 200, "ftol": 1e-6, "eps": 1e-5},
    )
    u = res.x[:-1] if g_of(res.x[:-1]).max() <= g0.max() else np.zeros_like(x0)
    return sp.layout_at(x0 + u * scale)


def _fab(problem: Problem, lay: Layout) -> tuple[Layout, list[str]]:
    """The shop's minimum gap and grid applied to a mapped layout; notes for any clamp."""
    fab = problem.fab
    notes = []
    gaps = list(lay.gaps)
    for k, g in enumerate(gaps):
        if g < fab.min_gap:
            notes.append(
                f"gap {k + 1}: the map asks for {g * 1e6:.1f} um, held at the shop's minimum "
                f"{fab.min_gap * 1e6:g} um"
            )
            gaps[k] = fab.min_gap

    def snap(x: float) -> float:
        return round(x / fab.grid) * fab.grid if fab.grid else x

    kw = {
        "gaps": tuple(max(snap(g), fab.min_gap) for g in gaps),
        "lengths": tuple(snap(x) for x in lay.lengths),
    }
    if lay.taps is not None:
        kw["taps"] = tuple(snap(x) for x in lay.taps)
    return replace(lay, **kw), notes


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
        return self.checks[self.best].comparison.em_mask.passed

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
        verdict = "meets" if self.met else "does NOT meet"
        lines.append(
            f"EM-corrected refinement ({self.method} space mapping): the field-solver response "
            f"{verdict} the mask after {self.runs} field solves, {self.seconds:.0f} s in all; "
            f"best: field solve {self.best + 1}"
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
    sp = _Space.of(layout)
    x_star = sp.vector(layout)
    corr: ModelCorrection | None = None
    cur = layout
    layouts, checks, extracted, misfits, notes = [layout], [], [], [], []
    for k in range(max_runs):
        wd = Path(workdir) / f"round-{k + 1}" if workdir is not None else None
        c = verify.check_layout(problem, cur, mesh, wd)
        checks.append(c)
        say(
            f"field solve {k + 1}: worst mask margin {c.comparison.em_mask.worst_margin:+.2f} dB, "
            f"{c.comparison.summary_line()}"
        )
        if c.comparison.em_mask.passed or k == max_runs - 1:
            break
        if method == "implicit":
            corr, misfit = extract_correction(problem, checks, corr)
            extracted.append(corr)
            misfits.append(misfit)
            cur_new = rerefine(problem, cur, corr)
        else:
            xc = extract(problem, c, cur, (layout, *extracted[-1:]))
            extracted.append(xc)
            cur_new = sp.layout_at(sp.vector(cur) - (sp.vector(xc) - x_star))
        cur, fab_notes = _fab(problem, cur_new)
        notes += fab_notes
        layouts.append(cur)
    return Correction(
        problem,
        layout,
        method,
        tuple(layouts),
        tuple(checks),
        tuple(extracted),
        tuple(misfits),
        tuple(notes),
        time.perf_counter() - t0,
    )


def write_corrected(sm: Correction, out: str | Path, force: bool = False) -> list[Path]:
    """The best layout found (JSON, DXF: the round with the largest field-solver margin) and
    the history of the rounds."""
    out = outputs.prepare_folder(out, force, FILES)
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
        export.write_dxf(out / names[1], lay, f"{sm.problem.name} (EM-corrected)"),
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
