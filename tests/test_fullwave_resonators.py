"""A weakly coupled half-wave resonator on the field solver, from the fixture
benchmarks/em_resonators.py writes.

A 50 ohm half-wave resonator fed through end gaps one substrate height wide, solved on three
meshes (every cell refined by the field check's ratio, thirds rule at metal edges), against
refine's circuit model of the same layout with zero metal thickness. The field model's strips
are zero-thickness perfect conductors (its conductor loss needs a thickness) on the lossy
substrate; the circuit model keeps its conductor loss. What the data show, pinned here:

- Resonance: on 0.635 mm alumina at 10 GHz the field solver's resonance rises with each
  refinement (−0.03, +0.15, +0.25 % from the circuit model's), converging at an observed order
  of about 1.7; at the finest mesh it is +0.25 ± 0.12 %, so the field-check issue's 0.2 % bar
  holds only at the lower end of the mesh uncertainty, and the field solver sits above the
  circuit model beyond it.
- The same alumina resonator in the field check's defaults (matched layers, half box, the
  ring-down continued): −0.18, −0.00, +0.10 % over three meshes, converging; at the finest mesh
  +0.10 ± 0.14 %: inside the 0.2 % bar, though not beyond its mesh uncertainty (the upper end,
  0.24 %, is outside it), so the bar is undecided at these meshes; a fourth would decide.
- Laminate (3.55, 0.508 mm, 5.8 GHz; matched-layer walls and the half box, first mesh so
  far): resonance −0.36 %, unloaded Q about 250 with lossless metal against 140 in the circuit
  model, gaps as calibrated.
- Loss: in the old box (first-order walls at 6 h, whole box) the field solver's unloaded Q
  with lossless metal is about 75, against 138 in the circuit model with its conductor loss
  and Belohoubek–Denlinger's radiation (Q_r ≈ 190). In the defaults' box (matched layers, half
  box; first mesh) it is about 178, and the radiation Q it implies is within 10 % of
  Belohoubek–Denlinger's: the old box's loss was its walls.
- Coupling: the field solver's external Q is about 1.5 times the circuit model's, i.e. the
  s/h = 1 gaps couple about 18 % more weakly (in series capacitance) on the field solver than
  in the bundled static calibration at 10 GHz.

Unloaded and external Q follow from the loaded Q and the peak transmission of a symmetric
resonator: |S21| = 1 − Q_L/Q_u = 2 Q_L/Q_e (common practice, no source).
"""

from __future__ import annotations

import itertools
import json
import math

import pytest
from conftest import DATA

from refine.fullwave import geometry
from refine.fullwave.uncertainty import mesh_uncertainty

DOC = json.loads((DATA / "fullwave-resonators.json").read_text())
SUBSTRATES = sorted({r["substrate"] for r in DOC["runs"]})
ALUMINA = "alumina 9.8, 0.635 mm"


OLD_BOX = ("first-order", False)  # the alumina sequence solved before the boundary study
DEFAULT_BOX = ("pml", True)  # the field check's defaults: matched layers, half box


def _box(r: dict) -> tuple[str, bool]:
    return r.get("open_walls", "first-order"), bool(r.get("half_box", False))


def _meshes(name: str, box: tuple[str, bool] | None = None) -> list[dict]:
    """One mesh sequence: the substrate's runs in ``box`` (its only box if None)."""
    mine = [r for r in DOC["runs"] if r["substrate"] == name]
    boxes = {_box(r) for r in mine}
    if box is None:
        assert len(boxes) <= 1, f"{name} ran in several boxes: name one"
    else:
        mine = [r for r in mine if _box(r) == box]
    return sorted(mine, key=lambda r: r["mesh_index"])


SEQUENCES = sorted({(r["substrate"], _box(r)) for r in DOC["runs"]})


def _q(side: dict) -> tuple[float, float]:
    """(unloaded Q, external Q per port) of a symmetric resonator from its loaded Q and peak."""
    s = 10 ** (side["peak_s21_db"] / 20)
    return side["loaded_q"] / (1 - s), 2 * side["loaded_q"] / s


def test_alumina_ran_on_three_meshes():
    assert ALUMINA in SUBSTRATES
    assert len(_meshes(ALUMINA, OLD_BOX)) == 3


@pytest.mark.parametrize(("name", "box"), SEQUENCES)
def test_meshes_refine_every_cell_and_carry_provenance(name, box):
    runs = _meshes(name, box)
    assert [r["mesh_index"] for r in runs] == list(range(len(runs)))
    for a, b in itertools.pairwise(runs):
        assert a["edge_cell_m"] / b["edge_cell_m"] == pytest.approx(geometry.REFINE_RATIO)
        assert b["cells"] > a["cells"]
    for r in runs:
        assert r["edge_rule"] == "thirds" and r["engine"] and r["date"] and r["seconds"] > 0
        assert r["layout"] == runs[0]["layout"]
        assert r["edge_cell_m"] <= r["layout"]["gap"] / 2  # the gap resolved
        if r.get("ringdown_continued"):  # continued past the record: the fit checked itself
            assert r["ringdown_fit_check"] < 1e-3
        else:  # rang down: what was left at the time cap is far below the peak
            assert r["tail"] < 1e-2
        for side in ("em", "model"):
            assert all(math.isfinite(v) for v in r[side].values())


def _shift_and_unc(name: str, box: tuple[str, bool]) -> tuple[float, float]:
    runs = _meshes(name, box)
    fm = runs[-1]["model"]["resonance_hz"]
    values = [r["em"]["resonance_hz"] for r in runs]
    unc = mesh_uncertainty([r["edge_cell_m"] for r in runs], values)
    assert unc is not None
    return values[-1] / fm - 1, unc / fm


def test_alumina_resonance_within_the_bar_only_at_the_low_end_of_its_mesh_uncertainty():
    shift, unc = _shift_and_unc(ALUMINA, OLD_BOX)
    assert abs(shift) - unc <= 0.002  # the 0.2 % bar, within the mesh uncertainty
    assert shift - unc > 0.0  # but the field solver's resonance is above the circuit model's
    assert abs(shift) < 0.005 and unc < 0.002
    # converging: each refinement moves it less than the one before
    per_mesh = [r["em"]["resonance_hz"] for r in _meshes(ALUMINA, OLD_BOX)]
    d = [b - a for a, b in itertools.pairwise(per_mesh)]
    assert d[0] > 0 and 0 < d[1] < d[0]


def test_alumina_in_the_old_box_loses_far_more_than_the_circuit_models_radiation_term():
    """Field: lossless metal, so what it loses beyond the dielectric is radiation, surface
    waves and whatever the walls absorb; circuit: conductor loss plus radiation. In the old
    box (first-order walls at 6 h) the field's unloaded Q is still the lower: the walls' doing,
    as the rerun in the defaults' box shows (next test)."""
    for r in _meshes(ALUMINA, OLD_BOX):
        qu_em, _ = _q(r["em"])
        qu_model, _ = _q(r["model"])
        assert qu_em < 0.65 * qu_model, r["mesh_index"]


LAMINATE = "laminate 3.55, 0.508 mm"


def test_laminate_resonator_in_the_defaults_box_loses_less_than_the_circuit_model():
    """The laminate resonator in the field check's defaults (matched layers, half box), first
    mesh so far: resonance 0.36 % below the circuit model's (one mesh: no uncertainty yet);
    with lossless metal its unloaded Q (about 250) is above the circuit model's with conductor
    loss (about 140), so on this substrate the radiation the field solver sees is small next to
    the conductor loss; the s/h = 1 gaps couple as the calibration says (external Q within
    5 %)."""
    runs = _meshes(LAMINATE, DEFAULT_BOX)
    assert runs and runs[0]["open_walls"] == "pml" and runs[0]["half_box"]
    r = runs[0]
    shift = r["em"]["resonance_hz"] / r["model"]["resonance_hz"] - 1
    assert -0.006 < shift < 0.0
    (qu_em, qe_em), (qu_model, qe_model) = _q(r["em"]), _q(r["model"])
    assert qu_em > 1.5 * qu_model
    assert qe_em / qe_model == pytest.approx(1.0, abs=0.05)


def test_alumina_s_over_h_one_gaps_couple_more_weakly_on_the_field_solver():
    for r in _meshes(ALUMINA, OLD_BOX):
        _, qe_em = _q(r["em"])
        _, qe_model = _q(r["model"])
        assert 1.3 < qe_em / qe_model < 1.7, r["mesh_index"]


def test_radiation_q_the_field_solver_implies_against_belohoubek_denlinger():
    """The field solver's unloaded Q (lossless metal) with the circuit model's dielectric Q
    taken out leaves radiation and surface waves: on the laminate in the defaults' box about
    456 against Belohoubek and Denlinger's 391 (within the model's stated +-50 %); on alumina
    in the defaults' box about 181 against 198; in the old box 76 against 198 (2.6 times the
    loss: its first-order walls). The README quotes these figures."""
    import sys

    from conftest import ROOT

    sys.path.insert(0, str(ROOT / "benchmarks"))
    import em_resonators

    lam = em_resonators.radiation_qs(LAMINATE, _meshes(LAMINATE, DEFAULT_BOX)[-1]["em"])
    alu = em_resonators.radiation_qs(ALUMINA, _meshes(ALUMINA, OLD_BOX)[-1]["em"])
    new = em_resonators.radiation_qs(ALUMINA, _meshes(ALUMINA, DEFAULT_BOX)[-1]["em"])
    assert lam[0] == pytest.approx(456, abs=10) and lam[1] == pytest.approx(391, abs=5)
    assert alu[0] == pytest.approx(76, abs=3) and alu[1] == pytest.approx(198, abs=5)
    assert new[0] == pytest.approx(181, abs=5)
    assert 0.5 < lam[1] / lam[0] < 1.5  # within the +-50 % the model states
    assert 0.9 < new[1] / new[0] < 1.15  # alumina in the defaults' box: within 10 %
    assert alu[1] / alu[0] > 2.5  # the old box's walls: far outside it


def test_alumina_in_the_defaults_box_first_mesh():
    """Matched layers and the half box, the ring-down continued: resonance 0.18 % below the
    circuit model's (one mesh: no uncertainty yet), unloaded Q about 178 with lossless metal
    against the old box's 75, external Q 1.2 times the circuit model's."""
    runs = _meshes(ALUMINA, DEFAULT_BOX)
    assert runs and runs[0]["ringdown_continued"]
    r = runs[0]
    shift = r["em"]["resonance_hz"] / r["model"]["resonance_hz"] - 1
    assert -0.003 < shift < 0.0
    (qu_em, qe_em), (_, qe_model) = _q(r["em"]), _q(r["model"])
    assert 170 < qu_em < 190
    assert 1.1 < qe_em / qe_model < 1.3


def test_alumina_in_the_defaults_box_within_the_bar_at_the_finest_mesh_undecided_beyond_it():
    runs = _meshes(ALUMINA, DEFAULT_BOX)
    assert len(runs) == 3
    shift, unc = _shift_and_unc(ALUMINA, DEFAULT_BOX)
    assert abs(shift) < 0.002  # the 0.2 % bar, at the finest mesh
    assert abs(shift) + unc > 0.002  # but not beyond the mesh uncertainty: undecided
    assert unc < 0.002
    per_mesh = [r["em"]["resonance_hz"] for r in runs]
    d = [b - a for a, b in itertools.pairwise(per_mesh)]
    assert d[0] > 0 and 0 < d[1] < d[0]  # rising, each refinement moving it less
