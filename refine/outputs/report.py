"""The design in words and numbers: summary.json, report.md, and the peak gap voltage.

Peak gap voltage: with the source's available power P (peak EMF sqrt(8 P z_ref) behind z_ref),
the voltage across each gap's series capacitance is computed over the passband from the node
voltages of the cascade, and compared with a conservative breakdown field of 1 kV/mm (a third of
the ~3 kV/mm of dry air at sea level; common practice, no source) across the gap width.
"""

from __future__ import annotations

import html
import math
import warnings
from dataclasses import asdict
from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray

from refine import validity
from refine.circuit import cascade
from refine.circuit.builder import ideal_elements
from refine.circuit.layout import Layout
from refine.circuit.response import (
    LossBudget,
    ModelUncertainty,
    evaluate_electrical,
    evaluate_layout,
    layout_build,
    layout_group_delay,
    loss_budget,
    lossless_verdict,
    strip_medium_for,
    uncertainty_verdict,
    worst_by_term,
)
from refine.optimise import seed as job
from refine.optimise.refiner import RefineResult, Status
from refine.outputs import export
from refine.physics import gap_fixture
from refine.physics.substrate import Substrate
from refine.spec.coupling import Coupling
from refine.spec.mask import MaskResult

BREAKDOWN_V_PER_M = 1.0e6  # conservative: 1 kV/mm


ABSORBER_DB = 3.0  # passband insertion loss above which a design "meets" return loss by loss


def loss_note(r: RefineResult) -> str | None:
    """When the mask limits return loss but not insertion loss, the refined design's passband
    insertion loss in words (a matched absorber would meet such a mask); None otherwise."""
    p = r.problem
    m = p.mask
    if m.max_insertion_loss_db is not None or m.min_return_loss_db is None:
        return None
    f = np.linspace(m.passband_start, m.passband_stop, 201)
    if r.layout is None:
        caps, thetas = r.electrical
        s = evaluate_electrical(caps, thetas, p.f0, p.z_ref, f)
    else:
        s = evaluate_layout(p, r.layout, f)
    il = -20.0 * np.log10(np.maximum(np.abs(s[:, 1, 0]), 1e-300))
    mid = float(np.interp(m.midband, f, il))
    worst = float(np.max(il))
    text = (
        f"the mask sets no insertion-loss limit; the design's passband insertion loss is "
        f"{mid:.2f} dB at midband and {worst:.2f} dB at worst"
    )
    if worst > ABSORBER_DB:
        text = (
            f"WARNING: {text}: more than {ABSORBER_DB:g} dB, so much of its return loss comes "
            "from absorbing power; add mask.midband_insertion_loss_db if that matters"
        )
    return text


def gap_voltages(r: RefineResult, power_w: float) -> list[float]:
    """Peak voltage (V) across each series gap of the refined layout over the passband."""
    p = r.problem
    lay, _ = r.strip_layouts
    f = np.linspace(p.mask.passband_start, p.mask.passband_stop, 201)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        built = layout_build(lay, strip_medium_for(p), p.gap_model, f, track=True)
        states = cascade.node_states(built.elements, f, p.z_ref)
    assert built.map is not None
    v_in, i_in = states[0]
    emf = math.sqrt(8.0 * power_w * p.z_ref)
    scale = emf / (v_in + p.z_ref * i_in)
    out = []
    for slot in built.map.gaps:
        e = slot.element
        dv = (states[e][0] - states[e + 1][0]) * scale
        out.append(float(np.max(np.abs(dv))))
    return out


def safe_power(power_w: float, volts: list[float], gaps: tuple[float, ...]) -> tuple[float, int]:
    """The largest input power (W) at which no gap's peak voltage reaches the conservative
    limit (the voltages scale as the square root of the power), and the gap (index into
    ``gaps``) that sets it."""
    ratios = [
        (BREAKDOWN_V_PER_M * g / vpk) ** 2 if vpk > 0 else math.inf
        for g, vpk in zip(gaps, volts, strict=True)
    ]
    k = int(np.argmin(ratios))
    return power_w * ratios[k], k


def response_and_delay(r: RefineResult, f: NDArray) -> tuple[NDArray, NDArray]:
    """The refined design's S-matrix ``(nf, 2, 2)`` and exact group delay (s) at ``f``."""
    p = r.problem
    if r.layout is not None:
        s = evaluate_layout(p, r.layout, f)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", validity.ModelRangeWarning)
            tau = layout_group_delay(r.layout, strip_medium_for(p), p.gap_model, f, p.z_ref)
        return s, tau
    caps, thetas = r.electrical
    s = evaluate_electrical(caps, thetas, p.f0, p.z_ref, f)
    tau = cascade.group_delay(lambda g: ideal_elements(caps, thetas, p.f0, p.z_ref, g), f, p.z_ref)
    return s, tau


def passband_figures(r: RefineResult, n: int = 401) -> dict[str, float]:
    """Worst VSWR and return loss, worst and midband insertion loss, and the group delay
    (midband, and its spread max - min) over the passband, of the refined design."""
    p = r.problem
    f = np.linspace(p.mask.passband_start, p.mask.passband_stop, n)
    s, tau = response_and_delay(r, f)
    g11 = np.abs(s[:, 0, 0])
    il = -20.0 * np.log10(np.maximum(np.abs(s[:, 1, 0]), 1e-300))
    mid = int(np.argmin(np.abs(f - p.mask.midband)))
    worst = float(np.max(g11))
    return {
        "worst_vswr": (1.0 + worst) / (1.0 - worst) if worst < 1.0 else math.inf,
        "worst_return_loss_db": float(-20.0 * np.log10(max(worst, 1e-300))),
        "worst_insertion_loss_db": float(np.max(il)),
        "midband_insertion_loss_db": float(il[mid]),
        "midband_group_delay_s": float(tau[mid]),
        "group_delay_spread_s": float(np.max(tau) - np.min(tau)),
    }


def _dims(r: RefineResult) -> dict:
    if r.layout is None:
        caps, thetas = r.electrical
        return {
            "series_capacitances_farad": list(caps),
            "electrical_lengths_rad_at_f0": list(thetas),
        }
    lay = r.layout
    return {
        "external": lay.external,
        "feed_width": lay.feed_width,
        "widths": list(lay.widths),
        "gaps": list(lay.gaps),
        "lengths": list(lay.lengths),
        "taps": None if lay.taps is None else list(lay.taps),
        "total_length": lay.total_length,
    }


class Figures(NamedTuple):
    """What the summary and the report both quote, computed once: the peak voltage across each
    gap at the input power (empty without a layout), :func:`passband_figures`, and for strip
    layouts the resonators' loss budget and the mask verdict with every loss switched off."""

    volts: list[float]
    passband: dict[str, float]
    budget: LossBudget | None = None
    lossless: MaskResult | None = None
    corners: MaskResult | None = None  # worst margins over the model-uncertainty corners
    uncertainty: ModelUncertainty | None = None
    by_term: dict[str, float] | None = None  # worst corner per group of terms alone (dB)


def figures(r: RefineResult, power_w: float, g: tuple[float, ...] = ()) -> Figures:
    """``g`` are the prototype's g-values g0..g(n+1) (for the loss budget)."""
    if r.layout is None:
        return Figures([], passband_figures(r))
    p = r.problem
    budget = loss_budget(p, r.layout, g[1:-1]) if g else None
    if r.corners is not None and r.uncertainty is not None:  # judged by the refiner already
        corners, unc = r.corners, r.uncertainty
    else:
        corners, unc = uncertainty_verdict(p, r.layout)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        terms = worst_by_term(p, r.layout, unc) if corners.worst_margin < 0.0 else None
    return Figures(
        gap_voltages(r, power_w),
        passband_figures(r),
        budget,
        lossless_verdict(p, r.layout),
        corners,
        unc,
        terms,
    )


def uncertainty_sentence(computed: Figures) -> str | None:
    """The worst margin over the model-uncertainty corners, in words (None without them)."""
    c, u = computed.corners, computed.uncertainty
    if c is None or u is None:
        return None
    text = f"worst margin over the model-uncertainty corners {corner_sentence(c, u)}"
    if computed.by_term:
        each = ", ".join(f"{k} {m:+.2f} dB" for k, m in computed.by_term.items())
        text += f"; with one group of terms alone: {each}"
    return text


def corner_sentence(corners: MaskResult, u: ModelUncertainty) -> str:
    """The worst corner margin and the ± it was judged at, in words."""
    return f"{corners.worst_margin:+.2f} dB ({u.words()}; from {u.source})"


def through_loss_note(r: RefineResult, lossless: MaskResult | None) -> str | None:
    """A warning when the design meets its return-loss mask only because of its loss: without
    conductor, dielectric and radiation loss the same layout would fail it."""
    name = "passband return loss"
    if lossless is None or name not in r.worst:
        return None
    lossy, bare = r.worst[name], lossless.worst[name]
    if lossy >= 0.0 > bare:
        return (
            f"WARNING: the return loss is met only through loss: {lossy:+.2f} dB margin with "
            f"loss, {bare:+.2f} dB without (the mask sets no insertion-loss limit to stop a "
            "lossy design from passing)"
            if r.problem.mask.max_insertion_loss_db is None
            else f"WARNING: the return loss is met only through loss: {lossy:+.2f} dB margin "
            f"with loss, {bare:+.2f} dB without"
        )
    return None


def summary(
    r: RefineResult,
    sd: job.Seed,
    spread: dict,
    power_w: float,
    warnings_: list[str],
    computed: Figures | None = None,
) -> dict:
    p = r.problem
    computed = computed or figures(r, power_w, sd.design.g)
    volts = computed.volts
    out = {
        "problem": p.name,
        "source": p.source,
        "status": r.status.value,
        "meets_mask": r.status is Status.MET,
        "meets_mask_on_nominal_model": r.status in (Status.MET, Status.MET_NOMINAL_ONLY),
        "worst_margin_db": r.worst_margin,
        "worst_margins_db": r.worst,
        "worst_at_hz": r.where,
        "binding": list(r.binding),
        "layout_m": _dims(r),
        "seed": {
            "worst_margin_db": r.seed_worst_margin,
            "worst_margins_db": r.seed_worst,
            "layout_m": None
            if r.seed_layout is None
            else {
                "gaps": list(r.seed_layout.gaps),
                "lengths": list(r.seed_layout.lengths),
                "widths": list(r.seed_layout.widths),
            },
        },
        "design": {
            "family": p.family,
            "order": sd.design.order,
            "ripple_db": p.ripple_db,
            "f0_hz": p.f0,
            "fbw": p.fbw,
            "z_ref_ohm": p.z_ref,
            "g": list(sd.design.g),
            "j_norm": list(sd.design.j_norm),
        },
        "medium": {"kind": p.medium, **(asdict(p.substrate) if p.substrate else {})},
        "fab": asdict(p.fab) if p.fab else None,
        "models": {
            "gap": p.gap_model,
            "line": "Hammerstad-Jensen + Kirschning-Jansen + Jansen-Kirschning"
            if p.medium == "microstrip"
            else ("Cohn + Wheeler" if p.medium == "stripline" else "ideal TEM"),
        },
        "strategy": r.strategy,
        "evaluations": r.evaluations,
        "wall_time_s": r.wall_time,
        "snapping": {
            "grid_m": p.strip_fab.grid if p.fab else None,
            "margin_before_db": r.unsnapped_margin,
            "margin_after_db": r.snapped_margin,
        },
        "fab_violations": list(r.fab_violations),
        "gap_model_spread_db": {m: res.worst for m, res in spread.items()},
        "gap_models_vs_field_solver": [
            {k: v for k, v in d.items() if k != "sentence"} for d in field_verdicts(r)
        ],
        "peak_gap_voltage_v": volts,
        "input_power_w": power_w,
        "max_safe_input_power_w": (
            safe_power(power_w, volts, r.layout.gaps)[0] if r.layout is not None else None
        ),
        "breakdown_field_v_per_m": BREAKDOWN_V_PER_M,
        "passband": computed.passband,
        "loss_budget": None
        if computed.budget is None
        else {
            "q_conductor": list(computed.budget.q_conductor),
            "q_dielectric": list(computed.budget.q_dielectric),
            "q_radiation": list(computed.budget.q_radiation),
            "q_unloaded": list(computed.budget.q_unloaded),
            "cohn_midband_loss_db": computed.budget.midband_db,
        },
        "lossless_margins_db": None if computed.lossless is None else computed.lossless.worst,
        "met_only_through_loss": through_loss_note(r, computed.lossless) is not None,
        "model_uncertainty": None
        if computed.uncertainty is None or computed.corners is None
        else {
            "series": computed.uncertainty.series,
            "series_per_gap": computed.uncertainty.series_gaps,
            "shunt": computed.uncertainty.shunt,
            "radiation": computed.uncertainty.radiation,
            "line_eps_eff": computed.uncertainty.eps_eff,
            "line_z0": computed.uncertainty.z0,
            "source": computed.uncertainty.source,
            "worst_margins_db": computed.corners.worst,
            "worst_margin_db": computed.corners.worst_margin,
            "met_across_uncertainty": computed.corners.worst_margin >= 0.0,
            "worst_margin_by_term_db": computed.by_term,
        },
        "diagnosis": None
        if r.diagnosis is None
        else {
            "couplings": [
                {
                    "coupling": f"{c.index},{c.index + 1}",
                    "j_needed": c.j_needed,
                    "j_max": c.j_max,
                    "width_at_max_m": c.width_at_max,
                    "reachable": c.ok,
                }
                for c in r.diagnosis.couplings
            ],
            "remedies": list(r.diagnosis.remedies),
            "topologies": None
            if r.diagnosis.topologies is None
            else {
                "fractional_bandwidth": r.diagnosis.topologies.fbw,
                "recommended": r.diagnosis.topologies.recommended.name,
                "recommended_reaches": r.diagnosis.topologies.recommended.reaches(
                    r.diagnosis.topologies.fbw
                ),
                "each": [
                    {
                        "topology": t.name,
                        "max_fractional_bandwidth": t.max_fbw,
                        "length_m": t.length,
                        "midband_loss_db": t.midband_loss_db,
                    }
                    for t in r.diagnosis.topologies.figures
                ],
            },
        },
        "warnings": warnings_,
        "notes": list(r.notes),
    }
    return out


CAUTIONS = """## Cautions

- Closed-form line and gap models are approximate (a few percent; the two microstrip gap models
  differ by 20–36 % in series capacitance at small gaps). Before fabrication, verify this layout
  with an electromagnetic simulation and a measured prototype.
- Small gaps at high RF power can arc. The peak gap voltages above are for the stated input
  power against a conservative 1 kV/mm; check them against your power, environment and margin.
- Transmitters must meet local radio regulations and RF-exposure limits. Defer to local codes and
  licensed practice.
"""


def field_verdicts(r: RefineResult) -> list[dict]:
    """Per distinct gap of a microstrip layout: which closed-form gap model the bundled
    field-solver calibration favours there (empty for other media)."""
    if r.layout is None or r.problem.medium != "microstrip":
        return []
    assert r.problem.substrate is not None
    return layout_verdicts(r.layout, r.problem.substrate)


VERDICT_START = "<!-- verdict:start -->"
VERDICT_END = "<!-- verdict:end -->"


def combined_verdict(
    circuit_met: bool,
    circuit_margin: float,
    field: str,
    field_margin: str,
    mesh: str,
    circuit_status: str = "",
) -> str:
    """The report's one verdict once a field-solver check has run: both results side by side,
    and a headline that neither contradicts. ``circuit_met``: the mask met on the nominal
    circuit model; ``circuit_status`` the design's status word (``met on the nominal model
    only`` says its model-uncertainty corners fail). ``field`` is "met", "not met" or
    "undecided" (beyond or within the mesh uncertainty); ``field_margin`` its worst margin as
    text."""
    nominal_only = circuit_status == "met on the nominal model only"
    if circuit_met and field == "met":
        head = (
            "**The design meets the mask on the field solver and on the nominal circuit model "
            "(not at every corner of the model's uncertainty).**"
            if nominal_only
            else "**The design meets the mask on the circuit model and on the field solver.**"
        )
    elif circuit_met and field == "undecided":
        head = (
            "**UNDECIDED ON THE FIELD SOLVER: the circuit model meets the mask; the field-solver "
            "check cannot tell within its mesh uncertainty.** A finer mesh would decide."
        )
    elif circuit_met:
        head = (
            "**NOT MET ON THE FIELD SOLVER: the circuit model meets the mask, the field-solver "
            "check does not.** Treat the design as not met until a finer check or a measurement "
            "says otherwise."
        )
    elif field == "met":
        head = (
            "**NOT MET on the circuit model; the field-solver check meets the mask.** The two "
            "models disagree: do not rely on either alone."
        )
    else:
        head = "**NOT MET on the circuit model; the field solver does not show it met either.**"
    label = {"met": "met", "not met": "NOT met", "undecided": "undecided"}[field]
    return "\n".join(
        [
            head,
            "",
            "| model | mask | worst margin |",
            "|---|---|---|",
            f"| circuit model | {circuit_status or ('met' if circuit_met else 'NOT met')} | "
            f"{circuit_margin:+.2f} dB |",
            f"| field solver (mesh `{mesh}`) | {label} | {field_margin} |",
        ]
    )


def _inf(q: float) -> str:
    return "—" if math.isinf(q) else f"{q:.0f}"


def _budget_lines(r: RefineResult, computed: Figures) -> list[str]:
    b = computed.budget
    assert b is not None
    p = r.problem
    radiates = any(not math.isinf(q) for q in b.q_radiation)
    out = [
        "",
        f"## Loss budget (unloaded Q per resonator at {p.f0 / 1e9:.6g} GHz)",
        "",
        "| resonator | Q conductor | Q dielectric | Q radiation | Q unloaded |",
        "|---|---|---|---|---|",
    ]
    for k, (c, d, q_r, q_u) in enumerate(
        zip(b.q_conductor, b.q_dielectric, b.q_radiation, b.q_unloaded, strict=True), 1
    ):
        out.append(f"| {k} | {_inf(c)} | {_inf(d)} | {_inf(q_r)} | {_inf(q_u)} |")
    total = sum(b.midband_db.values())
    split = ", ".join(f"{k} {v:.2f} dB" for k, v in b.midband_db.items() if v > 0)
    out += [
        "",
        f"Cohn's midband estimate {total:.2f} dB ({split or 'lossless'}); the circuit gives "
        f"{computed.passband['midband_insertion_loss_db']:.2f} dB. "
        + (
            "Radiation: Belohoubek & Denlinger's open-resonator Q, open enclosure; surface waves "
            "are not included."
            if radiates
            else (
                "No radiation: the problem states a shielded enclosure."
                if p.enclosure == "shielded"
                else "No radiation term for this medium."
            )
        ),
    ]
    return out


def report_md(
    r: RefineResult,
    sd: job.Seed,
    spread: dict,
    power_w: float,
    warnings_: list[str],
    computed: Figures | None = None,
) -> str:
    p = r.problem
    computed = computed or figures(r, power_w, sd.design.g)
    lines = [f"# {html.escape(export.one_line(p.name))}", ""]
    met_text = (
        "**The refined design meets the mask.**"
        if computed.corners is None
        else "**The refined design meets the mask, also across the circuit model's stated "
        f"uncertainty** ({uncertainty_sentence(computed)})."
    )
    verdict = {
        Status.MET: met_text,
        Status.MET_NOMINAL_ONLY: "**MET ON THE NOMINAL CIRCUIT MODEL ONLY: the refined design "
        f"meets the mask with {r.worst_margin:+.2f} dB, but not across the model's stated "
        f"uncertainty** ({uncertainty_sentence(computed)}). Check it on the field solver before "
        "building it.",
        Status.NOT_MET: "**NOT MET: the best design found does not meet the mask.** The outputs describe that best design.",
        Status.INFEASIBLE: "**INFEASIBLE: no design meeting the mask exists under these fab rules** (see the diagnosis). The outputs describe the best design found.",
    }[r.status]
    lines += [
        VERDICT_START,
        verdict,
        VERDICT_END,
        "",
        f"Worst margin {r.worst_margin:+.2f} dB on the verification grid (closed-form seed {r.seed_worst_margin:+.2f} dB); "
        f"{r.evaluations} evaluations"
        + (
            f" (+{r.robust_evaluations} for the model's uncertainty)"
            if r.robust_evaluations
            else ""
        )
        + f", {r.wall_time:.1f} s, strategy `{r.strategy}`.",
        "",
    ]
    lines += [
        "## Specification",
        "",
        f"- {p.family} response, order {sd.design.order}"
        + (f", {p.ripple_db:g} dB ripple" if p.ripple_db else "")
        + f"; centre {p.f0 / 1e9:.6g} GHz, fractional bandwidth {100 * p.fbw:.4g} %, z_ref {p.z_ref:g} ohm",
    ]
    m = p.mask
    lines.append(
        f"- passband {m.passband_start / 1e9:.6g}–{m.passband_stop / 1e9:.6g} GHz"
        + (f", return loss ≥ {m.min_return_loss_db:g} dB" if m.min_return_loss_db else "")
        + (f", ripple ≤ {m.max_ripple_db:g} dB" if m.max_ripple_db else "")
        + (f", midband loss ≤ {m.max_insertion_loss_db:g} dB" if m.max_insertion_loss_db else "")
    )
    for sb in m.stopbands:
        lines.append(f"- {sb.label}: rejection ≥ {sb.rejection_db:g} dB")
    if p.substrate:
        s = p.substrate
        lines += [
            "",
            "## Substrate and fab rules",
            "",
            f"- {p.medium}: eps_r {s.eps_r:g}, height {s.height * 1e3:.4g} mm, metal {s.metal_thickness * 1e6:.3g} um, "
            f"tan δ {s.loss_tangent:g}, conductivity {s.conductivity or 0:.3g} S/m, roughness {s.roughness * 1e6:.3g} um",
            f"- gap model {p.gap_model}; coupling {p.external}",
            f"- minimum gap {p.strip_fab.min_gap * 1e6:.3g} um"
            + (
                f", minimum width {p.strip_fab.min_width * 1e6:.3g} um"
                if p.strip_fab.min_width
                else ""
            )
            + (f", grid {p.strip_fab.grid * 1e6:.3g} um" if p.strip_fab.grid else "")
            + (
                f", etch bias {p.strip_fab.etch_bias * 1e6:.3g} um per edge"
                if p.strip_fab.etch_bias
                else ""
            ),
        ]
    lines += [
        "",
        "## Margins (dB; positive passes)",
        "",
        "| region | refined | seed | worst at (GHz) |",
        "|---|---|---|---|",
    ]
    for name, val in r.worst.items():
        lines.append(
            f"| {name} | {val:+.2f} | {r.seed_worst[name]:+.2f} | {r.where[name] / 1e9:.4f} |"
        )
    grid = p.fab.grid if p.fab is not None else None
    if r.snapped_margin is not None and grid is not None:
        lines += [
            "",
            f"Snapped to the shop's {grid * 1e6:g} um grid: worst margin {r.unsnapped_margin:+.2f} dB before, {r.snapped_margin:+.2f} dB after.",
        ]
    pb = computed.passband
    lines += [
        "",
        "## Passband",
        "",
        f"- worst VSWR {pb['worst_vswr']:.3f} (return loss {pb['worst_return_loss_db']:.2f} dB)",
        f"- insertion loss {pb['midband_insertion_loss_db']:.2f} dB at midband, "
        f"{pb['worst_insertion_loss_db']:.2f} dB at worst",
        f"- group delay {pb['midband_group_delay_s'] * 1e9:.3f} ns at midband, varying by "
        f"{pb['group_delay_spread_s'] * 1e9:.3f} ns across the passband (exact, from the "
        "cascade's frequency derivative)",
    ]
    note = through_loss_note(r, computed.lossless)
    if note:
        lines += ["", f"**{note}**"]
    if computed.budget is not None:
        lines += _budget_lines(r, computed)
    lines += ["", "## Dimensions", ""]
    if r.layout is None:
        caps, thetas = r.electrical
        lines += ["| element | value |", "|---|---|"]
        lines += [f"| C {k} | {c * 1e12:.5f} pF |" for k, c in enumerate(caps)]
        lines += [f"| θ {j + 1} | {math.degrees(t):.3f}° at f0 |" for j, t in enumerate(thetas)]
    else:
        lay, seed = r.strip_layouts
        first = lay.external.first_gap
        lines += ["| dimension | refined | closed-form seed |", "|---|---|---|"]
        lines += [
            f"| gap {k + first} | {s * 1e6:.2f} µm | {seed.gaps[k] * 1e6:.2f} µm |"
            for k, s in enumerate(lay.gaps)
        ]
        for j in range(lay.order):
            lines.append(
                f"| resonator {j + 1} length | {lay.lengths[j] * 1e3:.4f} mm | {seed.lengths[j] * 1e3:.4f} mm |"
            )
            lines.append(
                f"| resonator {j + 1} width | {lay.widths[j] * 1e6:.2f} µm | {seed.widths[j] * 1e6:.2f} µm |"
            )
        if lay.taps and seed.taps:
            lines += [
                f"| tap {'in' if i == 0 else 'out'} (from the outer open end) | {t * 1e3:.4f} mm | {seed.taps[i] * 1e3:.4f} mm |"
                for i, t in enumerate(lay.taps)
            ]
        lines.append(
            f"| feed width | {lay.feed_width * 1e6:.2f} µm | {seed.feed_width * 1e6:.2f} µm |"
        )
        lines.append(
            f"| total length | {lay.total_length * 1e3:.3f} mm | {seed.total_length * 1e3:.3f} mm |"
        )
        bias = p.strip_fab.etch_bias
        if bias > 0:
            lines += [
                "",
                f"The artwork files are drawn for the shop's etch bias of {bias * 1e6:.3g} µm per "
                "edge; the table above is as built. Drawn: every strip "
                f"{2 * bias * 1e6:.3g} µm wider and longer, every gap {2 * bias * 1e6:.3g} µm "
                "narrower (drawn gaps "
                + ", ".join(f"{(g - 2 * bias) * 1e6:.2f} µm" for g in lay.gaps)
                + "; drawn resonator widths "
                + ", ".join(f"{(w + 2 * bias) * 1e6:.2f} µm" for w in lay.widths)
                + ").",
            ]
        volts = computed.volts
        lines += [
            "",
            f"## Peak gap voltage at {power_w:g} W input",
            "",
            "| gap | width | peak voltage | conservative limit (1 kV/mm) |",
            "|---|---|---|---|",
        ]
        for k, (gap, vpk) in enumerate(zip(lay.gaps, volts, strict=True)):
            lim = BREAKDOWN_V_PER_M * gap
            flag = "" if vpk < lim else " **exceeds**"
            lines.append(
                f"| gap {k + first} | {gap * 1e6:.1f} µm | {vpk:.1f} V | {lim:.0f} V{flag} |"
            )
        p_max, k_max = safe_power(power_w, volts, lay.gaps)
        lines += [
            "",
            f"Largest safe input power: **{p_max:.3g} W** (continuous wave, matched source), set "
            f"by gap {k_max + first}: there its peak voltage reaches the conservative 1 kV/mm "
            "limit. Peak voltage scales as the square root of power.",
        ]
    if r.diagnosis is not None:
        lines += ["", "## Diagnosis", ""]
        lines += [f"- {c}" for c in r.diagnosis.couplings]
        lines += [f"- remedy: {rem}" for rem in r.diagnosis.remedies]
        if r.status is not Status.MET:
            lines += [f"- binding: {b}" for b in r.binding]
    if spread:
        lines += ["", "## Gap-model spread (same refined layout, worst margin per region, dB)", ""]
        names = list(r.worst)
        lines += ["| gap model | " + " | ".join(names) + " |", "|---" * (len(names) + 1) + "|"]
        for mname, res in spread.items():
            lines.append(f"| {mname} | " + " | ".join(f"{res.worst[n]:+.2f}" for n in names) + " |")
    verdicts = field_verdicts(r)
    if verdicts:
        lines += ["", "## Gap models against the field solver", ""]
        lines += [f"- gap {d['gap']}: {d['sentence']}" for d in verdicts]
        lines += [
            "",
            "From the bundled calibration set (mesh-extrapolated openEMS solutions of single "
            "gaps); a distance above about 0.7 means no calibrated gap is close.",
        ]
    if warnings_:
        lines += ["", "## Model-range warnings", ""] + [f"- {w}" for w in warnings_]
    if r.notes:
        lines += ["", "## Notes", ""] + [f"- {n}" for n in r.notes]
    lines += ["", CAUTIONS]
    return "\n".join(lines) + "\n"


def layout_verdicts(
    layout: Layout, substrate: Substrate, fx: gap_fixture.Fixture | None = None
) -> list[dict]:
    """For each distinct gap of a layout (mirror copies once): the gap, the width it sees (the
    geometric mean of its two sides: the fixture holds symmetric gaps) and the verdict."""
    fx = fx if fx is not None else gap_fixture.load_fixture()
    if layout.external is Coupling.GAP:
        sides = [layout.feed_width, *layout.widths, layout.feed_width]
    else:
        sides = list(layout.widths)
    first = layout.external.first_gap
    seen = {}
    for k, s in enumerate(layout.gaps):
        w = math.sqrt(sides[k] * sides[k + 1])
        key = (round(w, 9), round(s, 9))
        if key not in seen:
            seen[key] = (k + first, w, s)
    out = []
    for k, w, s in seen.values():
        vd = gap_fixture.verdict(w, s, substrate, fx)
        out.append(
            {
                "gap": k,
                "width_m": w,
                "gap_m": s,
                "nearest": asdict(vd.nearest),
                "distance": vd.distance,
                "series_capacitance_error": vd.errors,
                "closest": vd.closest,
                "sentence": vd.sentence(),
            }
        )
    return out
