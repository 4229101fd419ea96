"""Filter-level field-solver validation, from the fixture benchmarks/em_filters.py writes.

Refined bundled filters (refine's defaults: calibrated circuit model, robust refinement) solved
on meshes with every cell refined by the field check's ratio from one to the next, thirds rule
at metal edges. The campaign resumes mesh by mesh; these tests read whatever meshes have run
(at least two per filter, so each figure has a mesh uncertainty) and pin what the data show:
the field solver's worst in-band return loss is below the circuit model's by more than its
mesh uncertainty on every filter checked so far (the circuit model overstates the match).
"""

from __future__ import annotations

import itertools
import json
import math

import pytest
from conftest import DATA

from refine.fullwave import geometry
from refine.fullwave.uncertainty import mesh_uncertainty

DOC = json.loads((DATA / "fullwave-filters.json").read_text())
FILTERS = sorted({r["filter"] for r in DOC["runs"]})


def _meshes(name: str) -> list[dict]:
    return sorted((r for r in DOC["runs"] if r["filter"] == name), key=lambda r: r["mesh_index"])


def test_the_campaign_covers_two_filters_on_at_least_two_meshes():
    assert len(FILTERS) >= 2
    for name in FILTERS:
        assert len(_meshes(name)) >= 2, name


@pytest.mark.parametrize("name", FILTERS)
def test_meshes_refine_every_cell_and_carry_provenance(name):
    runs = _meshes(name)
    assert [r["mesh_index"] for r in runs] == list(range(len(runs)))
    for a, b in itertools.pairwise(runs):
        assert a["edge_cell_m"] / b["edge_cell_m"] == pytest.approx(geometry.REFINE_RATIO)
        assert b["cells_per_wavelength"] / a["cells_per_wavelength"] == pytest.approx(
            geometry.REFINE_RATIO
        )
    for r in runs:
        assert r["edge_rule"] == "thirds" and r["engine"] and r["date"] and r["cells"] > 0
        assert r["layout"] == runs[0]["layout"]  # one layout, solved on every mesh
        for side in ("em", "model"):
            assert all(math.isfinite(v) for v in r[side].values())


@pytest.mark.parametrize("name", FILTERS)
def test_the_field_solver_finds_the_match_worse_than_the_circuit_model(name):
    runs = _meshes(name)
    cells = [r["edge_cell_m"] for r in runs]
    rl = [r["em"]["worst_return_loss_db"] for r in runs]
    unc = mesh_uncertainty(cells, rl)
    assert unc is not None and math.isfinite(unc)
    assert rl[-1] + unc < runs[-1]["model"]["worst_return_loss_db"]
