"""Files of a field-solver check: EM Touchstone, overlay plot, comparison (JSON and Markdown),
and the field-solver section of a design's report.md / summary.json when the check is written
into a design's output folder. Every file is written atomically."""

from __future__ import annotations

import json
import re
from pathlib import Path

from refine.fullwave import ringdown
from refine.fullwave.compare import compare
from refine.fullwave.uncertainty import MeshVerdict
from refine.fullwave.verify import FieldCheck
from refine.outputs import export, plot
from refine.outputs.files import locked_folder
from refine.outputs.report import VERDICT_END, VERDICT_START, combined_verdict

FIELD_STATE = {
    MeshVerdict.MET: "met",
    MeshVerdict.NOT_MET: "not met",
    MeshVerdict.UNDECIDED: "undecided",
}
FILES = ("fullwave.s2p", "fullwave.png", "fullwave.json", "fullwave.md")
SECTION = "## Field-solver check"


def check_dict(c: FieldCheck) -> dict:
    comp = c.comparison
    sol = c.solves[-1]
    return {
        "engine": sol.engine,
        "mesh": c.mesh,
        "edge_cells_m": [s.resolution.edge_cell for s in c.solves],
        "cells": [s.mesh.cells for s in c.solves],
        "engine_runs": c.runs,
        "engine_seconds": c.seconds,
        "late_time_residual": max(s.tail for s in c.solves),
        "ringdown_fit_check": ringdown_check(c),
        "centre_hz": {"field_solver": comp.em.centre, "circuit_model": comp.model.centre},
        "centre_shift_hz": comp.centre_shift,
        "bandwidth_3db_hz": {
            "field_solver": comp.em.bandwidth,
            "circuit_model": comp.model.bandwidth,
        },
        "bandwidth_ratio": comp.bandwidth_ratio,
        "worst_inband_return_loss_db": {
            "field_solver": comp.em.worst_return_loss,
            "circuit_model": comp.model.worst_return_loss,
        },
        "stopband_edge_loss_db": [
            {"stopband": lab, "edge_hz": e, "field_solver": a, "circuit_model": b}
            for (lab, e, a), (_, _, b) in zip(comp.em.rejection, comp.model.rejection, strict=True)
        ],
        "mask": {
            "field_solver": {"passed": comp.em_mask.passed, "worst": comp.em_mask.worst},
            "circuit_model": {"passed": comp.model_mask.passed, "worst": comp.model_mask.worst},
        },
        "extrapolated": c.extrapolated,
        "mesh_verdict": c.verdict.name.lower().replace("_", " "),
        # the field model's strips: zero-thickness sheets, or solid as thick as the metal
        "metal": "thick" if c.solid else "sheet",
        # what the metal thickness (not in the field model) moves the margin on the circuit model
        "thickness_margin_shift_db": c.thickness_shift,
        # the worst mask margin of each mesh's field solve carried to the problem's metal
        # thickness, which the verdict judges (None: no thickness, or a parallel-coupled layout)
        "margin_at_thickness_db": None
        if c.carried is None
        else {"per_mesh": list(c.carried.per_mesh), "uncertainty": c.carried.uncertainty},
        "mesh_figures": [
            {
                "figure": fig.name,
                "unit": fig.unit,
                "per_mesh": list(fig.per_mesh),
                "uncertainty": fig.uncertainty,
            }
            for fig in c.figures
        ],
    }


ENCLOSURE_WORDS = {
    "open": "Enclosure: open, as the problem states ({walls} 6 substrate heights beside "
    "the copper and 8 above it: radiation leaves).",
    "shielded": "Enclosure: shielded, as the problem states (metal side walls 6 substrate "
    "heights beside the copper and a metal lid 8 above it).",
}


def thickness_words(c: FieldCheck) -> str:
    """What the field model's zero-thickness strips leave out, by the circuit model."""
    if c.solid:
        t = c.problem.strip_substrate.metal_thickness * 1e6
        return (
            f" The field model's strips are solid, {t:g} um thick as the problem's metal, and "
            "perfectly conducting: like for like with the circuit model but for conductor loss."
        )
    if c.s_model_sheet is None or c.thickness_shift is None:
        return ""
    sheet = compare(c.f, c.s_em, c.s_model_sheet, c.problem.mask).model
    model = c.comparison.model
    t = c.problem.strip_substrate.metal_thickness * 1e6
    return (
        f" The problem's {t:g} um metal thickness is not in the field model: on the circuit "
        f"model it moves the centre by {100 * (model.centre / sheet.centre - 1):+.2f} %, the "
        f"worst in-band return loss from {sheet.worst_return_loss:.2f} to "
        f"{model.worst_return_loss:.2f} dB and the worst mask margin by "
        f"{c.thickness_shift:+.2f} dB; "
        + (
            "the verdict judges each field solve carried to the thickness (the correction it "
            "implies for the circuit model with sheets, applied with the thickness): "
            f"{c.carried.value:+.2f} dB."
            if c.carried is not None
            else "the verdict counts that as uncertainty."
        )
    )


#: the open box's walls (refine.fullwave.geometry.OPEN_WALLS) in the report's words
WALL_WORDS = {"pml": "matched absorbing layers", "first-order": "first-order absorbing walls"}

#: said of a mesh that is the half box above the strips' centre line
HALF_WORDS = (
    ": the half box above the strips' centre line, a magnetic wall on it, as the layout is "
    "mirror-symmetric across it"
)


def section_md(c: FieldCheck) -> str:
    """The report section: what was solved, how long it took, and the comparison table."""
    comp = c.comparison
    sol = c.solves[-1]
    cells = ", ".join(f"{s.resolution.edge_cell * 1e6:g}" for s in c.solves)
    lines = [
        SECTION,
        "",
        f"{sol.engine} (FDTD), mesh `{c.mesh}` (edge cells {cells} um, {sol.mesh.cells} cells on "
        f"the finest{HALF_WORDS if sol.mesh.mirror is not None else ''}), {c.runs} engine runs "
        f"in {c.seconds:.0f} s. Strips are zero-thickness "
        "sheets; dielectric loss at the band centre; reference planes as in the circuit model. "
        + ENCLOSURE_WORDS[c.problem.enclosure].format(walls=WALL_WORDS[sol.resolution.open_walls])
        + thickness_words(c),
        "",
        f"**Verdict: {c.verdict_sentence()}.**",
        "",
        f"{comp.summary_line()}.",
        "",
        "| figure | field solver | circuit model |",
        "|---|---|---|",
    ]
    lines += [f"| {a} | {b} | {m} |" for a, b, m in comp.rows()]
    if len(c.figures) and len(c.figures[0].per_mesh) > 1:
        scale = {"Hz": (1e-6, "MHz"), "dB": (1.0, "dB")}
        lines += [
            "",
            "Mesh uncertainty (edge cells " + cells + " um, coarsest first; the uncertainty is "
            "the finest mesh's estimated error):",
            "",
            "| figure | per mesh | uncertainty |",
            "|---|---|---|",
        ]
        for fig in c.figures:
            k, unit = scale.get(fig.unit, (1.0, fig.unit))
            per = ", ".join(f"{x * k:.2f}" for x in fig.per_mesh)
            unc = "—" if fig.uncertainty is None else f"± {fig.uncertainty * k:.2f} {unit}"
            lines.append(f"| {fig.name} | {per} {unit} | {unc} |")
    if c.extrapolated:
        lines += [
            "",
            "Extrapolated to zero cell size (three meshes, Richardson): centre "
            f"{c.extrapolated['centre'] / 1e9:.4f} GHz, 3 dB bandwidth "
            f"{c.extrapolated['bandwidth'] / 1e6:.1f} MHz, worst in-band return loss "
            f"{c.extrapolated['worst_return_loss']:.2f} dB.",
        ]
    tail = max(s.tail for s in c.solves)
    fit = ringdown_check(c)
    if fit is not None:
        lines += [
            "",
            "Each record's ring-down was continued past its end (matrix-pencil fit of the ports' "
            "late signals); continuing it from two thirds of the fit's window instead moved the "
            f"port spectra by {fit:.1e} of their peak at worst.",
        ]
        if fit > ringdown.CHECK_LIMIT:
            lines += [
                "",
                f"Caution: that misfit is above {ringdown.CHECK_LIMIT:.0e}: the continued "
                "ring-down is not reliable; solve again with a longer record.",
            ]
    elif tail > 1e-2:
        lines += [
            "",
            f"Caution: the port voltage had only decayed to {tail:.1e} of its peak when the "
            "simulated time ran out; the sharpest features may carry truncation ripple.",
        ]
    lines += [
        "",
        "The circuit model and the field solver are both models: build and measure a prototype "
        "before production.",
        "",
    ]
    return "\n".join(lines)


def ringdown_check(c: FieldCheck) -> float | None:
    """The worst ring-down fit check over the check's solves (None: no record continued)."""
    checks = [s.ringdown_check for s in c.solves if s.ringdown_check is not None]
    return max(checks) if checks else None


def write_check(c: FieldCheck, out: str | Path, force: bool = False) -> list[Path]:
    """Write the check's files into ``out``; refresh report.md and summary.json there if a
    design was written to the same folder (the folder is locked meanwhile)."""
    with locked_folder(out, force, FILES) as folder:
        return _write_check(c, folder)


def _write_check(c: FieldCheck, out: Path) -> list[Path]:
    p = c.problem
    comp = c.comparison
    status = (
        "mask met on the field solver"
        if comp.em_mask.passed
        else "mask NOT met on the field solver"
    )
    comments = [
        f"{export.GENERATOR}: {p.name}",
        f"field solver: {c.solves[-1].engine}, mesh {c.mesh}",
        f"status: {status}",
    ]
    written = [
        export.write_touchstone(out / "fullwave.s2p", c.f, c.s_em, p.z_ref, comments),
        plot.response_png(
            out / "fullwave.png",
            c.f,
            c.s_em,
            c.s_model,
            p.mask,
            f"{p.name}: field solver vs circuit model",
            status,
            ("field solver", "circuit model"),
        ),
        export.write_json(out / "fullwave.json", check_dict(c)),
    ]
    md = section_md(c)
    written.append(export.write_text_atomic(out / "fullwave.md", f"# {p.name}\n\n{md}"))
    report = out / "report.md"
    summary = out / "summary.json"
    data = json.loads(summary.read_text()) if summary.exists() else None
    if report.exists():
        text = report.read_text()
        pattern = re.compile(rf"^{re.escape(SECTION)}\n.*?(?=^## |\Z)", re.S | re.M)
        text = pattern.sub("", text).rstrip("\n") + "\n\n" + md
        if data is not None and VERDICT_START in text and VERDICT_END in text:
            # one verdict at the top, circuit model and field solver side by side
            head, rest = text.split(VERDICT_START, 1)
            _, tail = rest.split(VERDICT_END, 1)
            margin = c.judged_margin()
            both = combined_verdict(
                bool(data.get("meets_mask_on_nominal_model", data["meets_mask"])),
                float(data["worst_margin_db"]),
                FIELD_STATE[c.verdict],
                f"{margin.value:+.2f} dB"
                + ("" if margin.uncertainty is None else f" ± {margin.uncertainty:.2f} dB"),
                c.mesh,
                str(data.get("status", "")),
            )
            text = f"{head}{VERDICT_START}\n{both}\n{VERDICT_END}{tail}"
        written.append(export.write_text_atomic(report, text))
    if data is not None:
        data["field_solver"] = check_dict(c)
        data["meets_mask_on_field_solver"] = FIELD_STATE[c.verdict]
        written.append(export.write_json(summary, data))
    return written
