"""A filter's own gaps on its own field-solver meshes (benchmarks/em_filter_gaps.py): the
bookkeeping on invented layouts, and what the README says of the data
(tests/data/fullwave-filter-gaps.json)."""

from __future__ import annotations

import json
import sys

import numpy as np
import pytest
from conftest import DATA

sys.path.insert(0, str(DATA.parent.parent / "benchmarks"))
import em_filter_gaps as efg

from refine.circuit.layout import Layout
from refine.spec.coupling import Coupling

PATH = DATA / "fullwave-filter-gaps.json"
RUNS = json.loads(PATH.read_text())["runs"] if PATH.exists() else []


def _layout() -> Layout:
    """An invented mirror-symmetric three-resonator gap-coupled layout."""
    return Layout(
        feed_width=0.6e-3,
        widths=(0.64e-3, 0.37e-3, 0.64e-3),
        lengths=(5.1e-3, 5.4e-3, 5.1e-3),
        gaps=(15e-6, 330e-6, 330e-6, 15e-6),
        external=Coupling.GAP,
    )


def test_distinct_gaps_are_the_first_half_at_the_geometric_mean_width():
    got = efg.distinct_gaps(_layout())
    assert [i for i, _, _ in got] == [0, 1]
    assert got[0][1] == pytest.approx(np.sqrt(0.6e-3 * 0.64e-3))
    assert got[1][1] == pytest.approx(np.sqrt(0.64e-3 * 0.37e-3))
    assert [s for _, _, s in got] == [15e-6, 330e-6]


def test_the_mesh_correction_puts_the_meshs_gaps_into_the_circuit_model():
    """Invented gap records: Cg 20 % and 10 % above the circuit model's, Cp 1 fF above at the
    inner gaps only. The factors are the ratios, mirrored; each resonator's length offset is the
    extra shunt capacitance at its two ends as an open-end extension, ΔCp·Z0·v (on the line
    with the field model's zero-thickness strips)."""
    from refine.spec.problem import load_problem

    problem = load_problem(efg.ROOT / "problems" / f"{efg.FILTER}.toml")
    lay = _layout()
    runs = []
    for i, g in efg.gap_geometries(problem, lay):
        cg, cp = efg.static_values(problem, g)
        runs.append(
            {
                "filter": efg.FILTER,
                "gap_index": i,
                "mesh_index": 0,
                "c_series": cg * (1.2 if i == 0 else 1.1),
                "c_shunt": cp + (1e-15 if i == 1 else 0.0),
            }
        )
    corr = efg.mesh_correction(problem, lay, runs, 0)
    assert corr is not None
    assert corr.gap_factors == pytest.approx((1.2, 1.1, 1.1, 1.2))
    from refine.circuit.response import strip_medium_for
    from refine.fullwave import correction
    from refine.physics.constants import C0

    z_end, e_end = strip_medium_for(correction.sheet_problem(problem)).dispersive(
        0.64e-3, np.array([problem.f0])
    )
    z_mid, e_mid = strip_medium_for(correction.sheet_problem(problem)).dispersive(
        0.37e-3, np.array([problem.f0])
    )
    end = 1e-15 * float(np.real(z_end[0])) * C0 / np.sqrt(float(np.real(e_end[0])))
    mid = 2e-15 * float(np.real(z_mid[0])) * C0 / np.sqrt(float(np.real(e_mid[0])))
    assert corr.length_offsets == pytest.approx((end, mid, end))
    assert efg.mesh_correction(problem, lay, runs[:1], 0) is None  # a gap still missing


@pytest.mark.skipif(not RUNS, reason="no filter-gap records yet")
def test_records_carry_provenance_and_the_filters_mesh():
    for r in RUNS:
        assert r["engine"].startswith("openEMS") and r["date"] and r["cells"] > 0
        assert r["box"] == "half, matched layers"
        assert r["edge_cell_m"] <= 0.5 * r["geometry"]["gap"] + 1e-12
        assert np.isfinite(r["c_series"]) and r["c_series"] > 0


@pytest.mark.skipif(not RUNS, reason="no filter-gap records yet")
def test_the_readme_filter_gap_tables_are_the_scripts():
    readme = (DATA.parent.parent / "README.md").read_text()
    block = readme.split("<!-- em-filter-gaps:start -->", 1)[1].split(
        "<!-- em-filter-gaps:end -->"
    )[0]
    assert efg.gap_table(RUNS) in block
    assert efg.explain_table(efg.explain_rows(RUNS)) in block
