"""What each verb of the ``refine`` command does, once :mod:`refine.cli` has parsed its
arguments (the parser lives there, apart from the numerical stack, so that ``refine --help``
starts at once)."""

from __future__ import annotations

import argparse
import json
import math
import os
import re
import sys
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path

from refine import study
from refine.circuit.layout import Layout, ParallelLayout
from refine.circuit.response import (
    evaluate_electrical,
    evaluate_layout,
    strip_medium_for,
    uncertainty_verdict,
    verification_grid,
)
from refine.fullwave import engine, handover, spacemap, verify
from refine.fullwave.uncertainty import MeshVerdict
from refine.optimise import seed as job
from refine.optimise.minimax import Stopping, Strategy
from refine.optimise.parallel import UNCERTAINTY_SOURCE, refine_parallel
from refine.optimise.refiner import RefineResult, Status, length_rule_unmeetable, refine_problem
from refine.optimise.space import fab_violations
from refine.outputs import export, parallel_files, plot, report
from refine.outputs import files as outputs
from refine.outputs.painters import Painters
from refine.spec.coupling import Coupling
from refine.spec.mask import MaskResult
from refine.spec.problem import load_problem
from refine.synthesis import inverters as synthesis
from refine.synthesis import topology
from refine.synthesis.realise import range_report
from refine.tolerance import centring
from refine.tolerance import montecarlo as tolerance
from refine.tolerance.parallel import estimate_parallel_yield


class UsageError(ValueError):
    """Bad command-line input: printed as one line, exit code 2."""


def _table(headers: Sequence[str], rows: Sequence[Sequence[object]]) -> str:
    cells = [[str(h) for h in headers]] + [[str(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    lines = ["  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)) for r in cells]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def design_table(d: synthesis.ElectricalDesign) -> str:
    """The closed-form design from input to output: each coupling with its inverter, each
    resonator with its prototype value g and electrical length at f0, then the load's g."""
    rows = []
    for k in range(d.order + 1):
        rows.append(
            [
                f"coupling {k},{k + 1}",
                "",
                f"{d.j_norm[k]:.5f}",
                f"{d.b_norm[k]:.5f}",
                f"{d.capacitance[k] * 1e12:.4f}",
                "",
            ]
        )
        if k < d.order:
            rows.append(
                [
                    f"resonator {k + 1}",
                    f"{d.g[k + 1]:.4f}",
                    "",
                    "",
                    "",
                    f"{math.degrees(d.theta[k]):.3f}",
                ]
            )
    rows.append(["load", f"{d.g[d.order + 1]:.4f}", "", "", "", ""])
    return _table(["element", "g", "J/Y0", "B/Y0", "C (pF)", "theta at f0 (deg)"], rows)


def margins_table(res: MaskResult) -> str:
    rows = [[name, f"{m:+.2f}", f"{res.where[name] / 1e9:.4f}"] for name, m in res.worst.items()]
    return _table(["mask region", "worst margin (dB)", "at (GHz)"], rows)


def layout_table(seed: job.Seed) -> str:
    """Resonators and gaps in order from input to output, with each gap's fab shortfall."""
    real = seed.strip_realisation
    lay = real.layout
    by_gap = {g.index: g for g in real.gaps}
    rows = []
    if lay.taps is not None:
        rows.append(["tap in", f"{lay.taps[0] * 1e3:.4f} mm from the open end", "", "", "", ""])
    # gap j sits before resonator j + 1 (gap coupling has gaps 0..n, a tapped feed 1..n-1)
    for j in range(lay.order + (1 if lay.external is Coupling.GAP else 0)):
        if j in by_gap:
            g = by_gap[j]
            req = "none works" if g.gap_required is None else f"{g.gap_required * 1e6:.1f} um"
            short = f"{100 * g.coupling_shortfall:.0f} %" if g.limited else ""
            rows.append(
                [
                    f"gap {g.index}",
                    f"s {g.gap * 1e6:.1f} um",
                    req,
                    f"{g.j_target:.4f}",
                    f"{g.j_achieved:.4f}",
                    short,
                ]
            )
        if j < lay.order:
            rows.append(
                [
                    f"resonator {j + 1}",
                    f"L {lay.lengths[j] * 1e3:.4f} mm, W {lay.widths[j] * 1e6:.1f} um",
                    "",
                    "",
                    "",
                    "",
                ]
            )
    if lay.taps is not None:
        rows.append(["tap out", f"{lay.taps[1] * 1e3:.4f} mm from the open end", "", "", "", ""])
    return _table(
        ["element", "used", "gap required", "J/Y0 designed", "J/Y0 achieved", "shortfall"],
        rows,
    )


def _print_seed(sd: job.Seed) -> None:
    p, d = sd.problem, sd.design
    print(
        f"{p.name}: {d.family} N={d.order}"
        + (f", {d.ripple_db:g} dB ripple" if d.ripple_db else "")
        + f", f0 = {d.f0 / 1e9:.6g} GHz, FBW = {d.fbw * 100:.4g} %, z_ref = {d.z_ref:g} ohm, "
        f"medium {p.medium}"
    )
    if sd.order_choice:
        print(
            f"order chosen from the stopbands: N = {sd.order_choice.order} (half-wave mapping "
            f"alone: {sd.order_choice.mapping_order})"
        )
        for note in sd.order_choice.notes:
            print(f"  note: {note}")
    print()
    print(design_table(d))
    if sd.realisation is not None:
        lay = sd.strip_realisation.layout
        print()
        print(
            f"realised seed ({p.gap_model} gaps), feed width {lay.feed_width * 1e6:.1f} um, "
            f"total length {lay.total_length * 1e3:.3f} mm:"
        )
        print(layout_table(sd))
        for note in sd.strip_realisation.notes:
            print(f"  fab: {note}")
    print()
    where = "physical model with loss" if sd.realisation is not None else "ideal elements"
    print(f"closed-form seed on the {where}, against the mask ({sd.f.size} points):")
    print(margins_table(sd.check))
    if sd.spread:
        print()
        print("gap-model spread (same layout, worst margin in dB per region):")
        names = list(sd.check.worst)
        rows = [[m, *(f"{r.worst[n]:+.2f}" for n in names)] for m, r in sd.spread.items()]
        print(_table(["gap model", *names], rows))
    for w in sd.warnings:
        print(f"  model range: {w}")


def _cmd_synth(args: argparse.Namespace) -> int:
    problem = load_problem(args.problem)
    d, choice = job.electrical_design(problem)
    f = verification_grid(problem)
    s = synthesis.ideal_response(d, f)
    res = problem.mask.evaluate(f, s[:, 0, 0], s[:, 1, 0])
    if args.json:
        out = {
            "problem": problem.name,
            "family": d.family,
            "order": d.order,
            "ripple_db": d.ripple_db,
            "f0_hz": d.f0,
            "fbw": d.fbw,
            "z_ref_ohm": d.z_ref,
            "g": list(d.g),
            "j_norm": list(d.j_norm),
            "b_norm": list(d.b_norm),
            "capacitance_f": list(d.capacitance),
            "theta_rad": list(d.theta),
            "ideal_margins_db": res.worst,
            "ideal_mask_met": res.passed,
            "order_notes": list(choice.notes) if choice else [],
        }
        if problem.medium != "ideal":
            real = job.seed(problem).strip_realisation
            out["seed_layout_m"] = export.layout_dict(real.layout)
            out["gaps"] = [
                {
                    "index": g.index,
                    "j_target": g.j_target,
                    "j_achieved": g.j_achieved,
                    "gap_required_m": g.gap_required,
                    "gap_m": g.gap,
                    "limited_by_min_gap": g.limited,
                    "coupling_shortfall": g.coupling_shortfall,
                }
                for g in real.gaps
            ]
        print(json.dumps(export.json_safe(out), indent=2))
        return 0
    print(
        f"{problem.name}: {d.family} N={d.order}"
        + (f", {d.ripple_db:g} dB ripple" if d.ripple_db else "")
        + f", f0 = {d.f0 / 1e9:.6g} GHz, FBW = {d.fbw * 100:.4g} %, z_ref = {d.z_ref:g} ohm"
    )
    if choice:
        print(
            f"order chosen from the stopbands: N = {choice.order} (half-wave mapping alone: "
            f"{choice.mapping_order})"
        )
        for note in choice.notes:
            print(f"  note: {note}")
    print()
    print(design_table(d))
    print()
    print("closed-form design on ideal elements against the mask:")
    print(margins_table(res))
    print(f"mask {'met' if res.passed else 'NOT met'} by the closed-form seed on ideal elements")
    if problem.medium != "ideal":
        sd = job.seed(problem)
        lay = sd.strip_realisation.layout
        print()
        print(
            f"realised seed ({problem.gap_model} gaps), feed width {lay.feed_width * 1e6:.1f} um:"
        )
        print(layout_table(sd))
        for note in sd.strip_realisation.notes:
            print(f"  fab: {note}")
    return 0


def refined_table(r: RefineResult) -> str:
    if r.layout is None:
        caps, thetas = r.electrical
        rows = [[f"C {k}", f"{c * 1e12:.5f} pF", ""] for k, c in enumerate(caps)]
        rows += [
            [f"theta {j + 1}", f"{math.degrees(t):.3f} deg at f0", ""] for j, t in enumerate(thetas)
        ]
        return _table(["element", "refined", ""], rows)
    lay, seed = r.strip_layouts
    rows = []
    first_gap = lay.external.first_gap
    for k, s in enumerate(lay.gaps):
        rows.append([f"gap {k + first_gap}", f"{s * 1e6:.2f} um", f"{seed.gaps[k] * 1e6:.2f} um"])
    for j, (ln, w) in enumerate(zip(lay.lengths, lay.widths, strict=True)):
        rows.append(
            [f"resonator {j + 1} length", f"{ln * 1e3:.4f} mm", f"{seed.lengths[j] * 1e3:.4f} mm"]
        )
        rows.append(
            [f"resonator {j + 1} width", f"{w * 1e6:.2f} um", f"{seed.widths[j] * 1e6:.2f} um"]
        )
    if lay.taps is not None and seed.taps is not None:
        for i, t in enumerate(lay.taps):
            rows.append(
                [
                    f"tap {'in' if i == 0 else 'out'} (from outer open end)",
                    f"{t * 1e3:.4f} mm",
                    f"{seed.taps[i] * 1e3:.4f} mm",
                ]
            )
    rows.append(["feed width", f"{lay.feed_width * 1e6:.2f} um", f"{seed.feed_width * 1e6:.2f} um"])
    return _table(["dimension", "refined", "closed-form seed"], rows)


def _progress_printer():
    """Evaluations and best worst margin so far: one rewritten line on a terminal, a line every
    50 evaluations otherwise (logs, CI)."""
    tty = sys.stderr.isatty()

    def show(n: int, worst: float) -> None:
        if tty:
            print(
                f"\r  {n:5d} evaluations, best worst margin {worst:+8.3f} dB",
                end="",
                file=sys.stderr,
                flush=True,
            )
        elif n % 50 == 0:
            print(
                f"  {n} evaluations, best worst margin {worst:+.3f} dB", file=sys.stderr, flush=True
            )

    return show


def _centre(problem, r: RefineResult, args: argparse.Namespace) -> RefineResult:
    """Yield-centred refinement after the mask is met (see refine.tolerance.centring.centre_for_yield)."""
    from dataclasses import replace

    print()
    if r.status not in NOMINALLY_MET or r.layout is None:
        print(
            "yield centring skipped: it starts from a design that meets the mask on a strip medium"
        )
        return r
    fab = problem.fab
    if not (fab.gap_tolerance or fab.width_tolerance):
        print(
            "yield centring skipped: the problem gives no fab.gap_tolerance or fab.width_tolerance"
        )
        return r
    print("centring for yield ...", flush=True)
    c = centring.centre_for_yield(
        problem, r.layout, correlated=args.correlated, free_widths=_free_widths(args)
    )
    b, a = c.yield_before, c.yield_after
    print(
        f"yield {100 * b.yield_fraction:.1f} % -> {100 * a.yield_fraction:.1f} % "
        f"({b.samples} Monte Carlo samples independent of the {c.evaluations}-evaluation centring); "
        f"nominal worst margin {b.nominal_margin:+.2f} -> {a.nominal_margin:+.2f} dB"
    )
    if c.layout is r.layout:
        print("  the centred layout was no better; the refined layout is kept")
        return r
    f = verification_grid(problem)
    s = evaluate_layout(problem, c.layout, f)
    res = problem.mask.evaluate(f, s[:, 0, 0], s[:, 1, 0])
    if not res.passed:
        print("  the centred layout misses the mask at nominal; the refined layout is kept")
        return r
    corners, unc = uncertainty_verdict(problem, c.layout)
    if r.status is Status.MET and not corners.passed:
        print(
            "  the centred layout misses the mask at a corner of the model's uncertainty "
            f"({corners.worst_margin:+.2f} dB); the refined layout is kept"
        )
        return r
    note = (
        f"yield-centred: {100 * b.yield_fraction:.1f} % -> {100 * a.yield_fraction:.1f} % under the fab "
        f"tolerances ({'with' if args.correlated else 'without'} correlated over-etch)"
    )
    return replace(
        r,
        layout=c.layout,
        worst=dict(res.worst),
        where=dict(res.where),
        notes=(*r.notes, note),
        corners=corners,
        uncertainty=unc,
        status=Status.MET if corners.passed else Status.MET_NOMINAL_ONLY,
    )


def _cmd_design(args: argparse.Namespace) -> int:
    problem = load_problem(args.problem)
    if args.power <= 0 or not math.isfinite(args.power):
        raise UsageError(f"--power = {args.power:g} W is outside the allowed range (0, inf)")
    if not (math.isfinite(args.margin) and -100.0 <= args.margin <= 100.0):
        raise UsageError(f"--margin = {args.margin:g} dB is outside the allowed range [-100, 100]")
    if not 1 <= args.max_evaluations <= 10**7:
        raise UsageError(
            f"--max-evaluations = {args.max_evaluations} is outside the allowed range 1..10000000"
        )
    if problem.topology == "parallel-coupled":
        return _design_parallel(problem, args)
    if args.out is not None:
        outputs.prepare_folder(args.out, args.force)  # refuse before any work or any write
    if args.try_recommended and (args.fullwave is not None or args.centre_yield):
        raise UsageError(
            "--try-recommended: not with --fullwave or --centre-yield (the recommended "
            "parallel-coupled design has neither yet)"
        )
    if args.fullwave is not None:
        _fullwave_ready(problem, args)
    # the drawing processes (started by the command line, or now): their imports overlap
    # the refinement
    given = getattr(args, "painters", None)
    if given is not None or args.out is None:
        return _design(problem, args, given)
    with Painters() as painters:
        return _design(problem, args, painters)


def _design(problem, args: argparse.Namespace, painters) -> int:
    stopping = Stopping(max_evaluations=args.max_evaluations, target_margin_db=args.margin)
    sd = job.seed(problem)
    _print_seed(sd)
    print()
    short = length_rule_unmeetable(problem)
    if short is not None:
        print(f"not refined: the fab rules cannot be met. {short}")
    else:
        print(f"refining ({args.strategy}) ...", flush=True)
    r = refine_problem(
        problem, Strategy(args.strategy), stopping, sd, _progress_printer(), _free_widths(args)
    )
    print()
    print(
        f"status: {r.status.value.upper()} — worst margin {r.worst_margin:+.2f} dB on the "
        f"verification grid (closed-form seed {r.seed_worst_margin:+.2f} dB); "
        f"{r.evaluations} evaluations"
        + (
            f" (+{r.robust_evaluations} for the model's uncertainty)"
            if r.robust_evaluations
            else ""
        )
        + f", {r.wall_time:.1f} s"
    )
    rows = [
        [name, f"{m:+.2f}", f"{r.seed_worst[name]:+.2f}", f"{r.where[name] / 1e9:.4f}"]
        for name, m in r.worst.items()
    ]
    print(_table(["mask region", "refined (dB)", "seed (dB)", "worst at (GHz)"], rows))
    grid = problem.fab.grid if problem.fab is not None else None
    if r.snapped_margin is not None and grid is not None:
        print(
            f"snapped to the shop's {grid * 1e6:g} um grid: worst margin "
            f"{r.unsnapped_margin:+.2f} dB before, {r.snapped_margin:+.2f} dB after"
        )
    loss = report.loss_note(r)
    if loss is not None:
        print(loss)
    # computed once: printed here and quoted by the hand-over files of this same design
    computed = report.figures(r, args.power, sd.design.g) if r.layout is not None else None
    if computed is not None and computed.corners is not None:
        through = report.through_loss_note(r, computed.lossless)
        if through is not None:
            print(through)
        print(report.uncertainty_sentence(computed))
    print()
    print(refined_table(r))
    outside = model_range_line(r)
    if outside:
        print(outside)
    if r.status is not Status.MET:
        print()
        print("binding: " + "; ".join(r.binding))
        if r.status is Status.MET_NOMINAL_ONLY and r.corners is not None:
            print(
                "model-uncertainty corners: "
                + "; ".join(f"{k} {m:+.2f} dB" for k, m in r.corners.worst.items())
            )
    if r.diagnosis is not None and (
        r.status is not Status.MET or not r.diagnosis.couplings_reachable
    ):
        print()
        print("diagnosis (closed-form couplings vs the fab rules):")
        for c in r.diagnosis.couplings:
            print(f"  {c}")
        for rem in r.diagnosis.remedies:
            print(f"  remedy: {rem}")
    for note in r.notes:
        print(f"  note: {note}")
    if r.fab_violations:
        print("FAB RULE VIOLATIONS: " + "; ".join(r.fab_violations))
    topo = r.diagnosis.topologies if r.diagnosis is not None else None
    if (
        args.try_recommended
        and r.status not in NOMINALLY_MET
        and topo is not None
        and topo.recommended.name == topology.PARALLEL
        and topo.recommended.reaches(topo.fbw)
    ):
        print()
        print("trying the recommended topology (--try-recommended): parallel-coupled")
        return _design_parallel(replace(problem, topology="parallel-coupled"), args, force=True)
    if args.centre_yield:
        r = _centre(problem, r, args)
        computed = None  # a new layout
    if args.out is not None:
        written = outputs.write_outputs(
            r,
            sd,
            args.out,
            args.power,
            args.force,
            said=outputs.CLI_NAMES,
            dxf_version="R12" if args.dxf_r12 else "R2010",
            painters=painters,
            touchstone2=args.touchstone_2,
            computed=computed,
        )
        _say_written(written, args.out, r.status)
        if args.fullwave is not None:
            print()
            print(f"field solver check (mesh {args.fullwave}) ...", flush=True)
            check = verify.check_layout(problem, r.strip_layouts[0], args.fullwave, progress=_say)
            written = handover.write_check(check, args.out, force=True)
            print(
                f"{check.runs} engine runs, {check.seconds:.0f} s: {check.comparison.summary_line()}"
            )
            print("wrote " + ", ".join(w.name for w in written))
            print(
                f"verdict: circuit model {r.status.value} ({r.worst_margin:+.2f} dB); field "
                f"solver, mesh {args.fullwave}: {check.verdict_sentence()}"
            )
            if r.status in NOMINALLY_MET:  # the field solver's verdict decides a met design
                return FIELD_EXIT[check.verdict]
    return STATUS_EXIT[r.status]


def _design_parallel(problem, args: argparse.Namespace, force: bool = False) -> int:
    """``design`` of a parallel-coupled problem (:mod:`refine.optimise.parallel`); ``force``:
    the folder was checked for the end-coupled files already (--try-recommended)."""
    unsupported = [
        name
        for name, on in (
            ("--fullwave", args.fullwave is not None),
            ("--centre-yield", args.centre_yield),
            ("--touchstone-2", args.touchstone_2),
            ("--dxf-r12", args.dxf_r12),
            ("--strategy", args.strategy != Strategy.GRADIENT.value),
        )
        if on and not force
    ]
    if unsupported:
        raise UsageError(
            f"{', '.join(unsupported)}: not available for a parallel-coupled problem yet "
            "(coupling.topology = 'parallel-coupled'); allowed there: --out, --force, "
            "--max-evaluations, --margin"
        )
    if args.out is not None and not force:
        outputs.prepare_folder(args.out, args.force, parallel_files.FILES)
    print(f"{problem.name}: parallel-coupled half-wave filter, refining ...", flush=True)
    r = refine_parallel(
        problem, Stopping(max_evaluations=args.max_evaluations, target_margin_db=args.margin)
    )
    print()
    print(
        f"status: {r.status.value.upper()} — worst margin {r.verdict.worst_margin:+.2f} dB on "
        f"the verification grid (closed-form seed {r.seed_verdict.worst_margin:+.2f} dB); "
        f"{r.evaluations} evaluations"
        + (
            f" (+{r.robust_evaluations} for the model's uncertainty)"
            if r.robust_evaluations
            else ""
        )
        + f", {r.seconds:.1f} s"
    )
    print(
        f"worst margin over the model-uncertainty corners {r.corners.worst_margin:+.2f} dB "
        f"({UNCERTAINTY_SOURCE})"
    )
    rows = [
        [name, f"{m:+.2f}", f"{r.corners.worst[name]:+.2f}", f"{r.verdict.where[name] / 1e9:.4f}"]
        for name, m in r.verdict.worst.items()
    ]
    print(_table(["mask region", "refined (dB)", "worst corner (dB)", "worst at (GHz)"], rows))
    lay = r.layout
    print()
    print(
        _table(
            ["section", "width (um)", "spacing (um)", "length (mm)"],
            [
                [str(k + 1), f"{w * 1e6:.1f}", f"{sp * 1e6:.1f}", f"{ln * 1e3:.4f}"]
                for k, (w, sp, ln) in enumerate(
                    zip(lay.widths, lay.spacings, lay.lengths, strict=True)
                )
            ],
        )
    )
    for note in r.notes:
        print(f"  note: {note}")
    if r.violations:
        print("FAB RULE VIOLATIONS: " + "; ".join(r.violations))
    if args.out is not None:
        written = parallel_files.write_parallel_outputs(r, args.out, args.force or force)
        _say_written(written, args.out, r.status)
    return STATUS_EXIT[r.status]


def _say_written(written: list[Path], out: str, status: Status) -> None:
    """The console's line for the hand-over files, and what they describe."""
    print()
    print(f"wrote {len(written)} files to {out}: " + ", ".join(w.name for w in written))
    if status is Status.MET_NOMINAL_ONLY:
        print(
            "  (they describe a design that meets the mask on the nominal circuit model, "
            "not at every corner of its uncertainty)"
        )
    elif status is not Status.MET:
        print("  (they describe the best design found, which does NOT meet the mask)")


def model_range_line(r) -> str | None:
    """One console line for everything of the refined layout outside a model's validity range,
    grouped by model and quantity (report.md lists each dimension)."""
    if r.layout is None:
        return None
    p = r.problem
    found = range_report(r.layout, strip_medium_for(p), p.gap_model, float(outputs.sweep(p)[-1]))
    groups: dict[str, list[str]] = {}
    for msg in found:
        m = re.match(r"^(.*?): (.*?): (.*?) = (.*?) is outside its validity range (.*)$", msg)
        if m is None:
            groups.setdefault(msg, [])
            continue
        where, model, qty, _, allowed = m.groups()
        groups.setdefault(f"{model} {qty} outside {allowed}", []).append(where.split(" (")[0])
    parts = [f"{k} at {', '.join(v)}" if v else k for k, v in groups.items()]
    if not parts:
        return None
    return "WARNING: the refined layout leaves a model's stated range (report.md lists each): " + (
        "; ".join(parts)
    )


# exit codes of a field check: met / not met beyond the mesh uncertainty, undecided at the mesh
FIELD_EXIT = {MeshVerdict.MET: 0, MeshVerdict.NOT_MET: 1, MeshVerdict.UNDECIDED: 4}
#: the design verb's exit code per status: met (also at every model-uncertainty corner) 0; met on
#: the nominal model only 5; not met or infeasible 1
STATUS_EXIT = {Status.MET: 0, Status.MET_NOMINAL_ONLY: 5, Status.NOT_MET: 1, Status.INFEASIBLE: 1}
NOMINALLY_MET = (Status.MET, Status.MET_NOMINAL_ONLY)


def _say(line: str) -> None:
    """A progress line of a long run, printed at once."""
    print(line, flush=True)


def _fullwave_ready(problem, args: argparse.Namespace) -> None:
    """Refuse --fullwave before any work when it cannot run."""
    if args.out is None:
        raise UsageError("--fullwave needs --out DIR for its files")
    if problem.medium != "microstrip":
        raise UsageError(
            f"--fullwave: medium.kind = {problem.medium!r}; the field check handles microstrip only"
        )
    _field_engine()


def _field_engine():
    """The field-solver engine, or a UsageError saying what to install."""

    try:
        return engine.find_engine()
    except engine.EngineMissing as e:
        raise UsageError(str(e)) from None


def _cmd_yield(args: argparse.Namespace) -> int:
    problem = load_problem(args.problem)
    read = export.read_layout(args.layout)
    if isinstance(read, ParallelLayout):
        return _yield_parallel(problem, read, args)
    lay = _not_parallel(read, args)
    if isinstance(lay, dict) or problem.medium == "ideal":
        raise UsageError("yield needs a physical layout on a strip medium with [fab] tolerances")
    if not 1 <= args.samples <= tolerance.MAX_SAMPLES:
        raise UsageError(
            f"--samples = {args.samples} is outside the allowed range 1..{tolerance.MAX_SAMPLES}"
        )
    out = Path(args.out) if args.out else Path(args.layout).resolve().parent
    names = ("yield.csv", "yield.png")
    if not args.force and any((out / n).exists() for n in names):
        raise UsageError(
            f"--out {out}: already holds yield.csv or yield.png; use --force to replace them"
        )
    if not 0 <= args.seed < 2**63:
        raise UsageError(f"--seed = {args.seed} is outside the allowed range 0..2**63-1")
    res = tolerance.estimate_yield(
        problem, lay, args.samples, args.seed, args.correlated, not args.without_model_error
    )
    tol = res.tolerances
    kind = "independent + correlated over-etch" if tol.correlated else "independent"
    lo, hi = res.interval
    q = res.quantiles()
    print(
        f"{args.layout} against {problem.name}: {res.samples} samples, seed {res.seed}, "
        f"gap sigma {tol.gap_sigma * 1e6:g} um, width sigma {tol.width_sigma * 1e6:g} um ({kind})"
        + (
            f", eps_r sigma {tol.eps_r_sigma:g}, height sigma {tol.height_sigma * 1e6:g} um"
            if tol.eps_r_sigma or tol.height_sigma
            else ""
        )
    )
    print(
        f"yield {100 * res.yield_fraction:.1f} % (95 % interval {100 * lo:.1f}-{100 * hi:.1f} %); "
        f"nominal worst margin {res.nominal_margin:+.2f} dB; sampled worst margin 5 % {q['p05']:+.2f}, "
        f"median {q['median']:+.2f}, 95 % {q['p95']:+.2f} dB"
    )
    rows = [
        [s_.name, f"{s_.db_per_sigma:.3f}", f"{s_.db_per_m * 1e-6:+.4f}"]
        for s_ in res.sensitivities
    ]
    print(_table(["dimension", "dB per 1-sigma", "dB per um"], rows))
    if res.model is not None:
        u = res.model
        print(
            f"model error sampled too (one draw per {tolerance.CHUNK} boards, uniform within "
            f"{u.words()}; --without-model-error leaves it out)"
        )
    out.mkdir(parents=True, exist_ok=True)
    smp = tolerance.sample(lay, tol, res.samples, res.seed, problem.substrate, res.model)
    cols = {
        "worst_margin_db": res.margins,
        "meets_mask": res.margins >= 0,
        "feed_width_m": smp.feed,
    }
    first = lay.external.first_gap
    cols |= {f"gap_{k + first}_m": smp.gaps[:, k] for k in range(smp.gaps.shape[1])}
    cols |= {f"width_{j + 1}_m": smp.widths[:, j] for j in range(smp.widths.shape[1])}
    cols |= {f"length_{j + 1}_m": smp.lengths[:, j] for j in range(smp.lengths.shape[1])}
    if smp.taps is not None:
        cols |= {"tap_in_m": smp.taps[:, 0], "tap_out_m": smp.taps[:, 1]}
    if smp.eps_r is not None and smp.height is not None:
        cols |= {"eps_r": smp.eps_r, "height_m": smp.height}
    _write_yield(
        out,
        cols,
        res.margins,
        res.nominal_margin,
        problem.name,
        res.samples,
        res.yield_fraction,
        kind,
    )
    print(f"wrote {out / 'yield.csv'} and {out / 'yield.png'}")
    return 0


def _cmd_study(args: argparse.Namespace) -> int:
    st = study.load_study(args.study, allow_many=args.yes)
    if args.workers is not None and not 1 <= args.workers <= 1024:
        raise UsageError(f"--workers = {args.workers} is outside the allowed range 1..1024")
    client = study.check_scheduler(args.scheduler) if args.scheduler else None  # before any write
    where = (
        f"the Dask scheduler at {args.scheduler}"
        if client
        else f"{args.workers or os.cpu_count()} local worker(s)"
    )
    print(f"{st.name}: {len(st.designs)} designs over {', '.join(st.axes)} on {where}", flush=True)
    try:
        frame = study.run_study(
            st,
            args.out,
            args.workers,
            client,
            args.resume,
            args.force,
            study.progress_printer(),
            lambda note: print(f"note: {note}", file=sys.stderr, flush=True),
        )
    finally:
        if client is not None:
            client.close()
    counts = frame["status"].value_counts().to_dict()
    print(study.status_counts(counts))
    written = plot.study_pngs(args.out, frame, st.name)
    print(
        f"wrote {Path(args.out) / 'results.parquet'}, results.csv, results.jsonl, "
        + ", ".join(w.name for w in written)
    )
    return 0


def _yield_parallel(problem, lay: ParallelLayout, args: argparse.Namespace) -> int:
    """``yield`` of a parallel-coupled layout (:mod:`refine.tolerance.parallel`)."""
    if problem.topology != "parallel-coupled":
        raise UsageError(
            f"{args.layout}: a parallel-coupled layout, but {args.problem} describes an "
            "end-coupled filter"
        )
    if args.correlated:
        raise UsageError("--correlated: not available for a parallel-coupled layout yet")
    if not 1 <= args.samples <= tolerance.MAX_SAMPLES:
        raise UsageError(
            f"--samples = {args.samples} is outside the allowed range 1..{tolerance.MAX_SAMPLES}"
        )
    if not 0 <= args.seed < 2**63:
        raise UsageError(f"--seed = {args.seed} is outside the allowed range 0..2**63-1")
    out = Path(args.out) if args.out else Path(args.layout).resolve().parent
    if not args.force and any((out / n).exists() for n in ("yield.csv", "yield.png")):
        raise UsageError(
            f"--out {out}: already holds yield.csv or yield.png; use --force to replace them"
        )
    res = estimate_parallel_yield(
        problem, lay, args.samples, args.seed, not args.without_model_error
    )
    lo, hi = res.interval
    print(
        f"{args.layout} against {problem.name} (parallel-coupled): {res.samples} samples, seed "
        f"{res.seed}, spacing sigma {res.gap_sigma * 1e6:g} um, width sigma "
        f"{res.width_sigma * 1e6:g} um (independent)"
        + (", model error sampled (one draw per 100 boards)" if res.model_error else "")
    )
    q = res.percentiles()
    print(
        f"yield {100 * res.yield_fraction:.1f} % (95 % interval {100 * lo:.1f}-{100 * hi:.1f} %); "
        f"nominal worst margin {res.nominal_margin:+.2f} dB; sampled worst margin 5 % "
        f"{q[0]:+.2f}, median {q[1]:+.2f}, 95 % {q[2]:+.2f} dB"
    )
    cols: dict = {"worst_margin_db": res.margins, "meets_mask": res.margins >= 0}
    for k in range(res.widths.shape[1]):
        cols[f"spacing_{k + 1}_m"] = res.spacings[:, k]
        cols[f"width_{k + 1}_m"] = res.widths[:, k]
    out.mkdir(parents=True, exist_ok=True)
    _write_yield(
        out,
        cols,
        res.margins,
        res.nominal_margin,
        problem.name,
        res.samples,
        res.yield_fraction,
        "parallel-coupled",
    )
    print(f"wrote {out / 'yield.csv'} and {out / 'yield.png'}")
    return 0


def _write_yield(
    out: Path,
    cols: dict,
    margins,
    nominal: float,
    name: str,
    samples: int,
    fraction: float,
    kind: str,
) -> None:
    """yield.csv (one row per board: ``cols``) and yield.png (the margins' histogram)."""
    import pandas as pd

    frame = pd.DataFrame(cols)
    export.write_atomic(out / "yield.csv", lambda p: frame.to_csv(p, index_label="sample"))
    plot.yield_png(
        out / "yield.png",
        margins,
        nominal,
        name,
        f"yield {100 * fraction:.1f} % of {samples} ({kind})",
    )


def _not_parallel(lay: Layout | ParallelLayout | dict, args: argparse.Namespace) -> Layout | dict:
    """Refuse a parallel-coupled layout in the verbs that handle end-coupled ones only."""
    if isinstance(lay, ParallelLayout):
        raise UsageError(
            f"{args.layout}: a parallel-coupled layout; refine {args.run} handles end-coupled "
            "layouts only so far (refine design judges and hands over parallel-coupled ones)"
        )
    return lay


def _cmd_check(args: argparse.Namespace) -> int:
    problem = load_problem(args.problem)
    lay = _not_parallel(export.read_layout(args.layout), args)
    f = verification_grid(problem)
    if isinstance(lay, dict):
        if problem.medium != "ideal":
            raise UsageError(
                f"{args.layout}: an electrical (ideal-medium) layout, but the problem's medium is {problem.medium!r}"
            )
        s = evaluate_electrical(
            lay["series_capacitances_farad"],
            lay["electrical_lengths_rad_at_f0"],
            float(lay["f0_hz"]),
            problem.z_ref,
            f,
        )
    else:
        if problem.medium == "ideal":
            raise UsageError(
                f"{args.layout}: a physical layout, but the problem's medium is 'ideal'"
            )
        s = evaluate_layout(problem, lay, f)
        if problem.fab is not None:
            for v_ in fab_violations(problem.fab, lay):
                print(f"fab rule: {v_}")
    res = problem.mask.evaluate(f, s[:, 0, 0], s[:, 1, 0])
    print(f"{args.layout} against {problem.name} ({f.size} points, physical model with loss):")
    print(margins_table(res))
    corners = None
    if not isinstance(lay, dict):
        corners, unc = uncertainty_verdict(problem, lay)
        print(f"model-uncertainty corners: {report.corner_sentence(corners, unc)}")
    if not res.passed:
        word, code = "NOT met", 1
    elif corners is not None and not corners.passed:
        word, code = "MET ON THE NOMINAL MODEL ONLY", STATUS_EXIT[Status.MET_NOMINAL_ONLY]
    else:
        word, code = "met", 0
    print(f"status: mask {word} (worst margin {res.worst_margin:+.2f} dB)")
    return code


def _free_widths(args: argparse.Namespace) -> bool | None:
    """--fixed-widths holds the widths; otherwise the problem file's [resonators] width."""
    return False if args.fixed_widths else None


def _cmd_fullwave(args: argparse.Namespace) -> int:

    problem = load_problem(args.problem)
    lay = _not_parallel(export.read_layout(args.layout), args)
    if isinstance(lay, dict):
        raise UsageError(
            f"{args.layout}: the field check needs a physical layout, not an electrical one"
        )
    if args.metal == "thick" and args.correct:
        raise UsageError(
            "--metal thick with --correct: EM-corrected refinement extracts its corrections "
            "against the circuit model with sheets; use --metal sheet"
        )
    if args.metal == "thick" and problem.strip_substrate.metal_thickness == 0:
        raise UsageError(
            f"--metal thick: {args.problem} gives no metal thickness ([substrate] "
            "metal_thickness = 0)"
        )
    out = Path(args.out) if args.out is not None else Path(args.layout).parent
    names = handover.FILES + (spacemap.FILES if args.correct else ())
    outputs.prepare_folder(out, args.force, names)  # refuse before any work
    eng = _field_engine()
    print(
        f"field solver: {eng.version} under {eng.python}; mesh {args.mesh}; metal {args.metal}",
        flush=True,
    )
    print(
        "solving: a thru line for the port calibration, then the layout (minutes) ...", flush=True
    )
    if args.correct:
        sm = spacemap.correct(
            problem,
            lay,
            args.mesh,
            args.max_runs,
            progress=_say,
            method=args.method,
        )
        print(sm.summary())
        check = sm.checks[sm.best]
        written = handover.write_check(check, out, args.force)
        written += spacemap.write_corrected(sm, out, args.force)
    else:
        check = verify.check_layout(problem, lay, args.mesh, progress=_say, metal=args.metal)
        written = handover.write_check(check, out, args.force)
    print(f"{check.runs} engine runs, {check.seconds:.0f} s")
    print(_table(["figure", "field solver", "circuit model"], check.comparison.rows()))
    print(check.comparison.summary_line())
    print(f"verdict: {check.verdict_sentence()}")
    print(f"wrote {len(written)} files to {out}: " + ", ".join(w.name for w in written))
    return FIELD_EXIT[check.verdict]


COMMANDS = {
    "synth": _cmd_synth,
    "design": _cmd_design,
    "yield": _cmd_yield,
    "study": _cmd_study,
    "check": _cmd_check,
    "fullwave": _cmd_fullwave,
}
