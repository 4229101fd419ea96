"""Write every hand-over file of a refined design into one folder.

Files: summary.json, layout.json, response.s2p, the artwork (:data:`refine.outputs.artwork.FILES`:
DXF, SVG, GDSII, KiCad footprint, three Gerber X2 layers), response.png, layout.png, report.md
(the ideal medium has no copper, so no artwork or layout picture). Each file is written
atomically; an existing output file is never replaced unless ``force``.
"""

from __future__ import annotations

import fcntl
import os
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np

from refine.circuit.response import (
    evaluate_electrical,
    evaluate_layout,
    spread_verdicts,
    strip_medium_for,
)
from refine.optimise import seed as job
from refine.optimise.refiner import RefineResult
from refine.outputs import artwork, export, plot, report
from refine.outputs.painters import Painters
from refine.spec.coupling import Coupling
from refine.spec.problem import Problem
from refine.synthesis import inverters
from refine.synthesis.realise import range_report
from refine.validity import require_finite

OUTPUT_FILES = (
    "summary.json",
    "layout.json",
    "response.s2p",
    "response.ts",
    *artwork.FILES,
    "response.png",
    "passband.png",
    "smith.png",
    "layout.png",
    "report.md",
)


class OutputError(ValueError):
    """The output folder cannot be used as asked."""


# how the folder and the replace switch are named in messages: the command line's options, or
# the Python API's parameters
CLI_NAMES = ("--out {}", "use --force")
API_NAMES = ("out = {!r}", "pass force=True")


def prepare_folder(
    out: str | Path,
    force: bool,
    names: tuple[str, ...] = OUTPUT_FILES,
    said: tuple[str, str] = CLI_NAMES,
) -> Path:
    """Check (before anything is computed or written) that ``out`` may receive the files
    ``names`` (the design's outputs by default). A symbolic link where an output goes is never
    written through: without ``force`` it is refused like any other clash; with ``force`` the
    link itself is replaced by the new file (its target is left alone). ``said`` names the
    folder and the replace switch in messages (:data:`CLI_NAMES` or :data:`API_NAMES`)."""
    out = Path(out)
    where, replace = said[0].format(str(out)), said[1]
    if out.is_symlink() and not out.is_dir():
        raise OutputError(f"{where}: is a symbolic link that leads to no folder")
    if out.exists() and not out.is_dir():
        raise OutputError(f"{where}: exists and is not a folder")
    if not out.exists():  # the nearest existing folder above must take a new folder
        above = out.absolute().parent
        while not above.exists() and above != above.parent:
            above = above.parent
        if not above.is_dir():
            raise OutputError(f"{where}: cannot be created: {above} is not a folder")
        if not os.access(above, os.W_OK | os.X_OK):
            raise OutputError(f"{where}: cannot be created: {above} is not writable")
    elif not os.access(out, os.W_OK | os.X_OK):
        raise OutputError(f"{where}: is not writable")
    if out.is_dir() and not force:
        clash = [n for n in names if (out / n).exists() or (out / n).is_symlink()]
        links = [n for n in clash if (out / n).is_symlink()]
        if clash:
            link_note = (
                f" ({', '.join(links)} {'is a symbolic link' if len(links) == 1 else 'are symbolic links'}: "
                f"refine never writes through a link; {replace.split(' ', 1)[1]} replaces the "
                "link itself)"
                if links
                else ""
            )
            raise OutputError(
                f"{where}: already holds {', '.join(clash)}; {replace} to replace them" + link_note
            )
    return out


@contextmanager
def locked_folder(
    out: str | Path,
    force: bool,
    names: tuple[str, ...] = OUTPUT_FILES,
    said: tuple[str, str] = CLI_NAMES,
) -> Iterator[Path]:
    """``out``, created and held under an exclusive lock while a set of files is written into
    it, so that two runs can never leave a mix of each other's files there. A second run that
    finds the folder locked stops at once with :class:`OutputError`; one that gets the lock
    after another run finished checks the folder again (:func:`prepare_folder`) and refuses to
    replace what that run wrote unless ``force``. (POSIX ``flock`` on the folder itself: no lock
    file is left behind.)"""
    out = prepare_folder(out, force, names, said)
    out.mkdir(parents=True, exist_ok=True)
    fd = os.open(out, os.O_RDONLY)
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise OutputError(
                f"{said[0].format(str(out))}: another refine run is writing there now; wait for "
                "it to finish or choose another folder"
            ) from None
        yield prepare_folder(out, force, names, said)
    finally:
        os.close(fd)


def sweep(problem: Problem, n: int = 2001) -> np.ndarray:
    """The hand-over sweep: 0.2 f0 to 2.5 f0 (past the spurious band at 2 f0), widened to every
    mask region, each region's edges included."""
    m = problem.mask
    lo = min([0.2 * problem.f0, *(max(sb.start, 1e-3 * sb.stop) for sb in m.stopbands)])
    hi = max([2.5 * problem.f0, *(sb.stop for sb in m.stopbands)])
    edges = [m.passband_start, m.passband_stop]
    edges += [x for sb in m.stopbands for x in (max(sb.start, 1e-3 * sb.stop), sb.stop)]
    return np.unique(np.concatenate([np.linspace(lo, hi, n), edges]))


def responses(r: RefineResult, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(refined, seed) S-matrices over ``f`` on the physical model with loss."""
    p = r.problem
    if r.layout is None:
        caps, thetas = r.electrical
        d = inverters.design(p.family, len(thetas), p.f0, p.fbw, p.z_ref, p.ripple_db)
        ref = evaluate_electrical(caps, thetas, p.f0, p.z_ref, f)
        return ref, inverters.ideal_response(d, f)
    lay, seed = r.strip_layouts
    return evaluate_layout(p, lay, f), evaluate_layout(p, seed, f)


def passband_sweep(r: RefineResult, n: int = 601) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Frequencies (the passband and half its width either side), the refined design's
    S-matrix and its exact group delay there."""
    p = r.problem
    lo, hi = p.mask.passband_start, p.mask.passband_stop
    f = np.linspace(max(lo - 0.5 * (hi - lo), 1e-3 * lo), hi + 0.5 * (hi - lo), n)
    s, tau = report.response_and_delay(r, f)
    return f, s, tau


def write_outputs(
    r: RefineResult,
    sd: job.Seed,
    out: str | Path,
    power_w: float = 1.0,
    force: bool = False,
    said: tuple[str, str] = API_NAMES,
    dxf_version: str = "R2010",
    painters: Painters | None = None,
    touchstone2: bool = False,
    computed: report.Figures | None = None,
) -> list[Path]:
    """Write every hand-over file; returns the paths written. A clash in ``out`` is refused
    unless ``force``; ``said`` names them in messages (the command passes its options).
    ``dxf_version`` is "R2010" or "R12" (for shops that ask for the oldest DXF). ``painters``
    are drawing processes started earlier (see :class:`Painters`); by default they start here.
    ``touchstone2`` adds ``response.ts``, the same response as Touchstone 2.0. ``computed``:
    :func:`refine.outputs.report.figures` of this design at ``power_w``, if the caller has it."""
    with locked_folder(out, force, said=said) as folder:
        if painters is not None:
            return _write_all(r, sd, folder, power_w, dxf_version, painters, touchstone2, computed)
        with Painters() as own:
            return _write_all(r, sd, folder, power_w, dxf_version, own, touchstone2, computed)


def _write_all(
    r: RefineResult,
    sd: job.Seed,
    out: Path,
    power_w: float,
    dxf_version: str,
    painters: Painters,
    touchstone2: bool = False,
    computed: report.Figures | None = None,
) -> list[Path]:
    p = r.problem
    f = sweep(p)
    s_ref, s_seed = responses(r, f)
    require_finite(f"{p.name}: refined response", s_ref)
    require_finite(f"{p.name}: closed-form seed response", s_seed)
    status = {
        "met": "meets the mask",
        "met on the nominal model only": "meets the mask on the nominal model only",
        "not met": "DOES NOT MEET THE MASK",
        "infeasible": "INFEASIBLE: DOES NOT MEET THE MASK",
    }[r.status.value]
    title = export.one_line(p.name)
    plot_title = title.replace("$", r"\$")  # a name is text, never matplotlib mathtext
    f_pb, s_pb, tau = passband_sweep(r)
    pictures: list[tuple[Callable[..., Any], tuple]] = []
    if r.layout is not None:
        pictures.append((plot.layout_png, (out / "layout.png", r.layout, plot_title)))
    pictures += [
        (plot.response_png, (out / "response.png", f, s_ref, s_seed, p.mask, plot_title, status)),
        (plot.passband_png, (out / "passband.png", f_pb, s_pb, tau, p.mask, plot_title, status)),
        (plot.smith_png, (out / "smith.png", f, s_ref[:, 0, 0], p.mask, plot_title)),
    ]
    if r.layout is not None:  # the artwork too goes to the workers: ezdxf's import is slow
        assert p.fab is not None  # a strip layout has fab rules
        pictures.insert(
            0,
            (
                artwork.write_artwork,
                (out, r.layout, p.fab.etch_bias, f"{title} ({status})", dxf_version),
            ),
        )
    written = []
    painters.draw(pictures)  # the workers draw while the rest is computed here
    spread = spread_verdicts(p, r.layout) if r.layout is not None else {}
    notes: list[str] = []
    if r.layout is not None:
        medium = strip_medium_for(p)
        if r.layout.external is Coupling.GAP:
            notes = range_report(r.layout, medium, p.gap_model, float(f[-1]))
        else:
            notes = [
                "tapped feed: the gap and line models were used; the T-junction is not modelled"
            ]
    if computed is None:  # quoted by both the summary and the report
        computed = report.figures(r, power_w, sd.design.g)
    for note in (report.through_loss_note(r, computed.lossless), report.loss_note(r)):
        if note is not None:
            notes = [note, *notes]
    written.append(
        export.write_json(
            out / "summary.json", report.summary(r, sd, spread, power_w, notes, computed)
        )
    )
    if r.layout is not None:
        written.append(export.write_json(out / "layout.json", export.layout_dict(r.layout)))
    else:
        written.append(
            export.write_json(
                out / "layout.json", export.electrical_dict(r.capacitances, r.thetas, p.f0)
            )
        )
    comments = [
        f"{export.GENERATOR}: {title}",
        f"status: {status}",
        f"gap model: {p.gap_model}; medium: {p.medium}",
    ]
    written.append(export.write_touchstone(out / "response.s2p", f, s_ref, p.z_ref, comments))
    if touchstone2:
        written.append(
            export.write_touchstone(out / "response.ts", f, s_ref, p.z_ref, comments, "2.0")
        )
    report_text = report.report_md(r, sd, spread, power_w, notes, computed)
    written += painters.collect()
    written.append(export.write_text_atomic(out / "report.md", report_text))
    return written
