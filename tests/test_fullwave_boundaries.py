"""How far the open box's walls must be, from the field-solver fixture
``tests/data/fullwave-boundaries.json`` that benchmarks/em_boundaries.py wrote (openEMS, the
open-end structure of benchmarks/em_open_ends.py, lossless, one 50 µm thirds-rule mesh). Reads
data only: no engine needed.

The reference is the matched-layer box, whose figures stop moving when its walls move; the
bounds are ours, set against the mesh's own uncertainty (about 1 % in Δl and a fraction of a
percent in ε_eff between neighbouring meshes, benchmarks/em_open_ends.py and em_lines.py).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "benchmarks"))
import em_boundaries as eb  # noqa: E402

from refine.fullwave import geometry  # noqa: E402

DOC = json.loads(eb.DATA.read_text())
RUNS = DOC["runs"]
FIRST_ORDER_6 = (6.0, 8.0, "first-order")
PML_6 = (6.0, 8.0, "pml")
PML_12 = (12.0, 8.0, "pml")


def _get(name: str, walls: tuple[float, float, str]) -> dict:
    r = eb.find(RUNS, name, walls)
    assert r is not None, (name, walls)
    return r


def _worst(a: dict, b: dict) -> dict[str, float]:
    ch = eb.changes(a, b)
    return {
        "eps_eff": max(abs(x) for x in ch["eps_eff"]),
        "z0": max(abs(x) for x in ch["z0"]),
        "extension": abs(ch["extension"]),
        "conductance": abs(ch["conductance"]),
    }


def test_fixture_has_provenance_and_every_wall_setting():
    assert "benchmarks/em_boundaries.py" in DOC["what"]
    for name in eb.CASES:
        for walls in eb.WALLS:
            r = _get(name, walls)
            assert r["engine"].startswith("openEMS") and r["date"] and r["cells"] > 0
            assert r["edge_rule"] == "thirds" and r["edge_cell_m"] == eb.EDGE_CELL


@pytest.mark.parametrize("name", eb.CASES)
def test_matched_layers_at_six_heights_are_as_good_as_at_twelve(name):
    """Moving the matched layers from 6 to 12 substrate heights changes nothing measurable:
    the default box is far enough."""
    w = _worst(_get(name, PML_6), _get(name, PML_12))
    assert w["eps_eff"] < 1e-3 and w["z0"] < 1e-3  # measured <= 0.07 %
    assert w["extension"] < 2e-3 and w["conductance"] < 0.02  # measured <= 0.1 %, 0 %


@pytest.mark.parametrize("name", eb.CASES)
def test_first_order_walls_at_six_heights_are_not_far_enough(name):
    """The first-order walls (the previous default) reflect what meets them at a slant: at 6 h
    they move the open end's radiated conductance by 9 % (alumina) and 70 % (laminate) and
    the line's ε_eff by up to 0.7-1.1 % at the bottom of the band, against the matched layers."""
    w = _worst(_get(name, PML_12), _get(name, FIRST_ORDER_6))
    assert w["eps_eff"] > 5e-3 and w["conductance"] > 0.05
    # ... and even at 24 h they do not reach the matched layers' open-end conductance on the
    # laminate (23.5 against 21.7 uS)
    far = _worst(_get(name, PML_12), _get(name, (24.0, 8.0, "first-order")))
    assert far["eps_eff"] < 3e-3 and far["extension"] < 5e-3


@pytest.mark.parametrize("name", eb.CASES)
def test_air_above_eight_heights_is_enough(name):
    w = _worst(_get(name, FIRST_ORDER_6), _get(name, (6.0, 16.0, "first-order")))
    assert w["eps_eff"] < 2e-3 and w["z0"] < 2e-3 and w["extension"] < 0.01  # measured <= 0.2 %


@pytest.mark.parametrize("name", eb.CASES)
def test_walls_at_three_heights_change_everything(name):
    """A box a third of the size: ε_eff up by 1.6-4 %, the open end's conductance by 37-113 %:
    the wall distance is part of the model, not a detail."""
    w = _worst(_get(name, FIRST_ORDER_6), _get(name, (3.0, 4.0, "first-order")))
    assert w["eps_eff"] > 0.015 and w["conductance"] > 0.3


def test_the_field_model_defaults_to_the_converged_walls():
    res = geometry.Resolution("t", 50e-6)
    assert (res.side_margin, res.air_above, res.open_walls) == PML_6
    assert all(r.open_walls == "pml" for r in geometry.MESHES.values())
