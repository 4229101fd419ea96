"""The field solver on open ends, from the fixture benchmarks/em_open_ends.py writes.

Three 50 ohm lines (alumina 9.8/0.635 mm, laminate 3.55/0.508 mm, PTFE 2.2/0.787 mm; our own
choice), three meshes with every cell halved each time, two mesh rules at metal edges. What the
data show, pinned here: the "thirds" rule converges (the last two meshes within 1 %) where lines
on the edges do not (2-5 % per halving, at least twice the thirds rule's change); at the finest thirds mesh the field solver's length
extension is within 6 % of refine's electrostatic solve (an independent method) and 8-17 % above
Kirschning-Jansen-Koster's open end (the field-check issue's 5 % bar is not met by that closed
form: refine's calibrations replace it on their substrates).
"""

from __future__ import annotations

import json

import pytest
from conftest import DATA

DOC = json.loads((DATA / "fullwave-open-ends.json").read_text())
SUBSTRATES = sorted(DOC["references_m"])


def _series(name: str, rule: str) -> list[float]:
    runs = [r for r in DOC["runs"] if r["substrate"] == name and r["rule"] == rule]
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
