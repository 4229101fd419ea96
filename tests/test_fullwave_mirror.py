"""The half box (magnetic wall on the strips' centre line) against the whole box, from the
field-solver fixture ``tests/data/fullwave-mirror.json`` that benchmarks/em_mirror.py wrote
(openEMS, coarse preset mesh, lossless). Reads data only: no engine needed.

The bounds are ours: the half box must change a line's ε_eff and Z0 and a gap's S-parameters
by far less than the coarse mesh's own uncertainty (about 1 % in ε_eff and a few % in Z0 between
neighbouring meshes, benchmarks/em_lines.py), at about half the cells.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "benchmarks"))
import em_mirror  # noqa: E402

DOC = json.loads(em_mirror.DATA.read_text())
RUNS = DOC["runs"]
NAMES = sorted({r["substrate"] for r in RUNS})


def test_fixture_has_provenance_and_every_run():
    assert "benchmarks/em_mirror.py" in DOC["what"]
    assert len(NAMES) >= 2  # alumina and laminate at least
    for name in NAMES:
        for box in em_mirror.LINE_BOXES:
            assert em_mirror.find(RUNS, "line", name, box) is not None, (name, box)
        for box in ("whole", "half"):
            assert em_mirror.find(RUNS, "gap", name, box) is not None, (name, box)
    for r in RUNS:
        assert r["engine"].startswith("openEMS") and r["date"] and r["cells"] > 0


@pytest.mark.parametrize("name", NAMES)
def test_the_half_box_solves_the_same_line_and_gap(name):
    de, dz = em_mirror.line_change(RUNS, name, "half")
    assert de < 1e-3 and dz < 3e-3  # measured 0.02-0.06 % and 0.09-0.18 %
    assert em_mirror.gap_change(RUNS, name) < 3e-3  # measured 3e-4 to 2.1e-3


@pytest.mark.parametrize("name", NAMES)
def test_the_half_box_has_about_half_the_cells(name):
    whole = em_mirror.find(RUNS, "gap", name, "whole")
    half = em_mirror.find(RUNS, "gap", name, "half")
    assert half["cells"] < 0.55 * whole["cells"]


@pytest.mark.parametrize("name", NAMES)
def test_a_box_edge_on_the_centre_line_misplaces_the_wall(name):
    """The engine's magnetic wall sits half a cell inside the box edge: put the edge itself on
    the centre line and the wall cuts into the strip (a narrower strip: higher Z0, lower
    ε_eff) by far more than the half box as refine builds it."""
    de, dz = em_mirror.signed_line_change(RUNS, name, "half, edge on the centre line")
    assert dz > 0.04 and de < -0.003  # measured Z0 +5 to +11 %, eps_eff -0.5 to -1.5 %
