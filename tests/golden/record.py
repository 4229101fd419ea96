"""Record the golden outputs of every bundled problem (status, margins, evaluations, layout).

Run from the project folder: ``python tests/golden/record.py``. The file it writes,
``tests/data/golden-outputs.json``, is what ``tests/test_golden.py`` compares against. It was
recorded before the one-circuit-layer restructuring and is re-recorded only for an intended change
of behaviour, said in the commit and in CHANGELOG.md (the last: the batched gradient and the polish
rounds of the speed work, which move optimiser paths by round-off; then the radiation model of
open microstrip, after which inf-alumina-20g-n4-3pct-gap is infeasible again and the quartz case
states a shielded housing; then the uncertainty-aware status with robust refinement, after which
a strip design met on the nominal model but not at every model corner is "met on the nominal
model only", and robust refinement moves the designs it can improve; then the batched
uncertainty corners, whose round-off moved two robust paths; then the unequal-gap correction
of the eps_r 9.8 calibration, recorded on numpy 2.4.6 / scipy 1.17.1, whose round-off also moved
the optimiser paths of two problems the correction does not touch: the ceramic laminate and the
thin stripline, which had stopped matching the record on this machine before the change; then
the metal's thickness at gaps and open ends, with the unequal-gap tables of the eps_r 3.55, 4.4
and 6.15 calibrations, which move every microstrip design on metal, and robust refinement's
nominal margin held in hand, which lets it keep moves it used to throw away; then the lines'
eps_eff and Z0 as terms of the model's uncertainty, which leave one strip design met at every
corner and move every robust path; then each gap's own uncertainty from the unequal-gap table
and the metal thickness, and the refiner's gaps held inside the calibration's s/h range, which
brings the N = 7 Butterworth case back inside the model and met at every corner).
"""

from __future__ import annotations

import json
import sys
import warnings
from pathlib import Path

import refine
from refine.validity import ModelRangeWarning

ROOT = Path(__file__).resolve().parents[2]
OUT = ROOT / "tests" / "data" / "golden-outputs.json"


def outcome(path: Path) -> dict:
    """What the golden test pins for one problem file."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        r = refine.design(refine.load_problem(path))
    lay = r.layout
    return {
        "status": r.status.value,
        "worst_db": r.worst,
        "seed_worst_db": r.seed_worst,
        "unsnapped_db": r.unsnapped_margin,
        "snapped_db": r.snapped_margin,
        "evaluations": r.evaluations,
        "corners_db": None if r.corners is None else r.corners.worst,
        "robust_evaluations": r.robust_evaluations,
        "binding": list(r.binding),
        "notes": list(r.notes),
        "layout": None
        if lay is None
        else {
            "external": str(lay.external),
            "feed_width": lay.feed_width,
            "widths": list(lay.widths),
            "gaps": list(lay.gaps),
            "lengths": list(lay.lengths),
            "taps": None if lay.taps is None else list(lay.taps),
        },
        "capacitances": None if r.capacitances is None else list(r.capacitances),
        "thetas": None if r.thetas is None else list(r.thetas),
    }


def main() -> None:
    """Record every problem, or with ``--only STEM ...`` those problems only, keeping the rest of
    the file as it is."""
    paths = sorted((ROOT / "problems").glob("*.toml"))
    data = {}
    if "--only" in sys.argv:
        only = set(sys.argv[sys.argv.index("--only") + 1 :])
        paths = [p for p in paths if p.stem in only]
        data = json.loads(OUT.read_text())
    for p in paths:
        data[p.stem] = outcome(p)
        print(p.stem, data[p.stem]["status"], data[p.stem]["evaluations"], file=sys.stderr)
    OUT.write_text(json.dumps(data, indent=1, sort_keys=True) + "\n")


if __name__ == "__main__" and "--circuits" not in sys.argv:
    main()


def circuits() -> dict[str, object]:
    """S and the exact gradient of each strip problem's seed layout on a 31-point grid through
    the single-design path (free and fixed widths), and S through the batched path."""
    import numpy as np

    from refine.circuit.model import strip_model_for
    from refine.circuit.response import layout_response, medium_for

    out: dict[str, object] = {}
    only = set(sys.argv[sys.argv.index("--only") + 1 :]) if "--only" in sys.argv else None
    for path in sorted((ROOT / "problems").glob("*.toml")):
        if only is not None and path.stem not in only:
            continue
        problem = refine.load_problem(path)
        if problem.medium == "ideal":
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ModelRangeWarning)
            lay = refine.seed(problem).realisation.layout
            medium = medium_for(problem)
            f = np.linspace(problem.mask.passband_start * 0.9, problem.mask.passband_stop * 1.1, 11)
            out[f"{path.stem}/batched"] = layout_response(
                lay, medium, problem.gap_model, f, problem.z_ref
            )
            for free in (False, True):
                m = strip_model_for(medium, problem.gap_model, problem.z_ref, lay, f, free)
                r = m.response(m.vector(lay), True)
                tag = f"{path.stem}/{'free' if free else 'fixed'}"
                out[f"{tag}/s11"], out[f"{tag}/s21"] = r.s11, r.s21
                out[f"{tag}/ds11"], out[f"{tag}/ds21"] = r.ds11, r.ds21
    return out


if __name__ == "__main__" and "--circuits" in sys.argv:
    import numpy as np

    target = ROOT / "tests" / "data" / "golden-circuits.npz"
    keep = dict(np.load(target)) if "--only" in sys.argv else {}
    np.savez_compressed(target, **{**keep, **circuits()})
