"""Hand-over files of a parallel-coupled design (:mod:`refine.optimise.parallel`).

Written into one folder, each atomically, under the same lock and overwrite rules as the
end-coupled design's files (:func:`refine.outputs.files.locked_folder`):

* ``summary.json``: status, margins on the nominal model and at the worst model-uncertainty
  corner, the layout, notes;
* ``layout.json``: the layout in SI metres (``topology = "parallel-coupled"``, per section its
  strip width, spacing and length);
* ``response.s2p``: S-parameters over the hand-over sweep on the coupled-line model with loss;
* the artwork (DXF, SVG, GDSII, KiCad footprint, Gerber X2: :mod:`refine.outputs.artwork`);
* ``response.png``: |S21|, |S11| with the mask, refined and closed-form seed;
* ``report.md``: the verdict, the sections' dimensions, what the model leaves out, cautions.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from refine.circuit.layout import ParallelLayout
from refine.circuit.response import evaluate_parallel
from refine.optimise.parallel import UNCERTAINTY_SOURCE, ParallelResult
from refine.optimise.refiner import Status
from refine.outputs import artwork, export, plot
from refine.outputs.files import CLI_NAMES, locked_folder, sweep

FILES = (
    "summary.json",
    "layout.json",
    "response.s2p",
    *artwork.FILES,
    "response.png",
    "report.md",
)

STATUS_WORDS = {
    Status.MET: "meets the mask at every corner of the model's uncertainty",
    Status.MET_NOMINAL_ONLY: "meets the mask on the nominal model only",
    Status.NOT_MET: "DOES NOT MEET THE MASK",
    Status.INFEASIBLE: "INFEASIBLE: DOES NOT MEET THE MASK",
}


def s_matrix(r: ParallelResult, layout: ParallelLayout, f: np.ndarray) -> np.ndarray:
    """S-matrix ``(nf, 2, 2)`` of ``layout`` on the problem's coupled-line model with loss."""
    return evaluate_parallel(r.problem, layout, f)


def summary(r: ParallelResult) -> dict:
    return {
        "problem": r.problem.name,
        "topology": "parallel-coupled",
        "status": r.status.value,
        "meets_mask": r.status is Status.MET,
        "meets_mask_on_nominal_model": r.met,
        "worst_margin_db": r.verdict.worst_margin,
        "margins_db": dict(r.verdict.worst),
        "seed_worst_margin_db": r.seed_verdict.worst_margin,
        "model_uncertainty": {
            "source": UNCERTAINTY_SOURCE,
            "worst_corner_margin_db": r.corners.worst_margin,
            "corner_margins_db": dict(r.corners.worst),
        },
        "fab_violations": list(r.violations),
        "evaluations": r.evaluations,
        "robust_evaluations": r.robust_evaluations,
        "layout": export.parallel_layout_dict(r.layout),
        "notes": list(r.notes),
    }


def report_md(r: ParallelResult) -> str:
    p = r.problem
    lay = r.layout
    lines = [
        f"# {export.one_line(p.name)}: parallel-coupled half-wave filter",
        "",
        "## Verdict",
        "",
        f"The refined design {STATUS_WORDS[r.status]}: worst margin "
        f"{r.verdict.worst_margin:+.2f} dB on the nominal circuit model, "
        f"{r.corners.worst_margin:+.2f} dB at the worst corner of its uncertainty "
        f"({UNCERTAINTY_SOURCE}); closed-form seed {r.seed_verdict.worst_margin:+.2f} dB.",
        "",
        "| mask region | refined (dB) | worst corner (dB) |",
        "|---|---|---|",
        *(
            f"| {k} | {m:+.2f} | {r.corners.worst.get(k, float('nan')):+.2f} |"
            for k, m in r.verdict.worst.items()
        ),
        "",
    ]
    if r.violations:
        lines += ["**Fab rule violations:** " + "; ".join(r.violations), ""]
    lines += [
        "## Sections",
        "",
        f"Feed lines {lay.feed_width * 1e6:.1f} um wide, each joining its end section through "
        f"a {lay.feed_stub * 1e6:.1f} um stub of that section's strip width; total length "
        f"{lay.total_length * 1e3:.3f} mm along the filter.",
        "",
        "| section | strip width (um) | spacing (um) | length (mm) |",
        "|---|---|---|---|",
        *(
            f"| {k + 1} | {w * 1e6:.1f} | {s * 1e6:.1f} | {ln * 1e3:.4f} |"
            for k, (w, s, ln) in enumerate(zip(lay.widths, lay.spacings, lay.lengths, strict=True))
        ),
        "",
        "## Model",
        "",
        "Coupled sections on the coupled-line model of refine.physics.coupled (Kirschning & "
        "Jansen 1984 on microstrip, Cohn 1955 on stripline), zero metal thickness; each "
        "section lengthened by the single strip's open-end extension.",
        "",
        *(f"- {n}" for n in r.notes),
        "",
        CAUTIONS,
    ]
    return "\n".join(lines)


CAUTIONS = """## Cautions

- The coupled-line model is approximate (its stated uncertainty above covers the static
  impedances and permittivities, not dispersion, the feeds' width steps or the open ends'
  radiation). Before fabrication, verify this layout with an electromagnetic simulation and a
  measured prototype.
- Narrow spacings at high RF power can arc; this report does not compute the coupled sections'
  voltages yet: check the spacings against your power, environment and margin.
- Transmitters must meet local radio regulations and RF-exposure limits. Defer to local codes and
  licensed practice.
"""


def write_parallel_outputs(
    r: ParallelResult, out: str | Path, force: bool = False, said: tuple[str, str] = CLI_NAMES
) -> list[Path]:
    """Every hand-over file of ``r`` into ``out`` (see the module docstring)."""
    p = r.problem
    f = sweep(p)
    s_ref = s_matrix(r, r.layout, f)
    s_seed = s_matrix(r, r.seed_layout, f)
    title = export.one_line(p.name)
    status = STATUS_WORDS[r.status]
    assert p.fab is not None
    with locked_folder(out, force, FILES, said) as folder:
        written = [
            export.write_json(folder / "summary.json", summary(r)),
            export.write_json(folder / "layout.json", export.parallel_layout_dict(r.layout)),
            export.write_touchstone(
                folder / "response.s2p",
                f,
                s_ref,
                p.z_ref,
                [f"{export.GENERATOR}: {title}", f"status: {status}", "parallel-coupled"],
            ),
            *artwork.write_artwork(folder, r.layout, p.fab.etch_bias, f"{title} ({status})"),
            plot.response_png(
                folder / "response.png",
                f,
                s_ref,
                s_seed,
                p.mask,
                title.replace("$", r"\$"),
                status,
            ),
            export.write_text_atomic(folder / "report.md", report_md(r)),
        ]
    return written


__all__ = ["FILES", "report_md", "s_matrix", "summary", "write_parallel_outputs"]
