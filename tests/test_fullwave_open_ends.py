"""The field solver on open ends, from the fixture benchmarks/em_open_ends.py writes.

Three 50 ohm lines (alumina 9.8/0.635 mm, laminate 3.55/0.508 mm, PTFE 2.2/0.787 mm; our own
choice), three meshes with every cell halved each time. In the first box (whole, first-order
walls at 6 h and 8 h) both mesh rules at metal edges ran; in the field check's defaults (half
box, matched layers) the thirds rule. What the data show, pinned here:

- the "thirds" rule converges (the last two meshes within 1 %) where lines on the edges do not
  (2-5 % per halving, at least twice the thirds rule's change);
- in the defaults' box the field solver's length extension agrees with refine's electrostatic
  solve (an independent method: a boundary-element solve with the grounded slab's Green's
  function) within 0.5 % on all three substrates, and both lie 7-11 % above
  Kirschning-Jansen-Koster's open end, far beyond the mesh uncertainty (under 0.5 %): the
  field-check issue's 5 % bar against that closed form is not met, and two independent solves
  say the closed form is what is short at these widths (refine's calibrations replace it on
  their substrates);
- the old box's walls lengthened the open end by 1.6-5.4 %.
"""

from __future__ import annotations

import json

import pytest
from conftest import DATA

DOC = json.loads((DATA / "fullwave-open-ends.json").read_text())
SUBSTRATES = sorted(DOC["references_m"])


OLD_BOX, DEFAULT_BOX = "whole, first-order walls", "half, matched layers"


def _series(name: str, rule: str, box: str = OLD_BOX) -> list[float]:
    runs = [
        r
        for r in DOC["runs"]
        if r["substrate"] == name and r["rule"] == rule and r.get("box", OLD_BOX) == box
    ]
    runs.sort(key=lambda r: -r["edge_cell_m"])
    assert [r["edge_cell_m"] for r in runs] == [100e-6, 50e-6, 25e-6]
    for r in runs:  # provenance on every run
        assert r["engine"] and r["date"] and r["cells"] > 0 and r["seconds"] > 0
    return [r["extension_quasi_static_m"] for r in runs]


@pytest.mark.parametrize("name", SUBSTRATES)
def test_thirds_rule_converges_where_lines_on_the_edges_do_not(name):
    thirds = _series(name, "thirds")
    on_edge = _series(name, "on-edge")
    assert abs(thirds[2] / thirds[1] - 1) < 0.01
    assert abs(on_edge[2] / on_edge[1] - 1) > 0.02
    assert abs(on_edge[2] / on_edge[1] - 1) > 2 * abs(thirds[2] / thirds[1] - 1)


@pytest.mark.parametrize("name", SUBSTRATES)
def test_open_end_agrees_with_the_electrostatic_solve_not_with_kjk(name):
    dl = _series(name, "thirds")[2]
    refs = DOC["references_m"][name]
    assert abs(dl / refs["static"] - 1) < 0.06  # two independent methods
    assert 0.05 < dl / refs["kjk"] - 1 < 0.20  # the closed form is short by more than 5 %


@pytest.mark.parametrize("name", SUBSTRATES)
def test_in_the_defaults_box_two_independent_solves_agree_and_kjk_is_short(name):
    field = _series(name, "thirds", DEFAULT_BOX)
    assert abs(field[2] / field[1] - 1) < 0.005  # converged: the last halving moves it < 0.5 %
    refs = DOC["references_m"][name]
    assert abs(field[2] / refs["static"] - 1) < 0.005  # field solver and electrostatic solve
    assert 0.06 < field[2] / refs["kjk"] - 1 < 0.11  # both well above the closed form
    assert 0.06 < refs["static"] / refs["kjk"] - 1 < 0.11


@pytest.mark.parametrize("name", SUBSTRATES)
def test_the_old_boxs_walls_lengthened_the_open_end(name):
    old, new = _series(name, "thirds")[2], _series(name, "thirds", DEFAULT_BOX)[2]
    assert 0.01 < old / new - 1 < 0.06
