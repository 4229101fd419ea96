"""The field solver on a straight 50 ohm microstrip line, read from the fixture that
``benchmarks/em_lines.py`` writes (three substrates of our own choosing, three meshes each,
every cell halved from one mesh to the next), against the closed forms (Hammerstad-Jensen
with the Kirschning-Jansen and Jansen-Kirschning dispersion, zero metal thickness as in the
field model) and scikit-rf's microstrip line.

What the fixture shows, and these tests pin: the engine's eps_eff is converged with the mesh
(the two finest meshes differ by under 1 %) and agrees with the closed forms within 1 % from
f*h = 7 GHz*mm up, but sits 2-3 % above them at the bottom of each band; its Z0 agrees within
2 % up to f*h = 5 GHz*mm on every substrate and drifts upward with the mesh at the top of the
band. The field-check issue's bar (1 % in eps_eff, 2 % in Z0 over the whole band) is not met;
the README's table (written by the same script) says so.
"""

from __future__ import annotations

import json
import sys
import warnings

import numpy as np
import pytest
from conftest import DATA, ROOT
from skrf import Frequency
from skrf.media import MLine

from refine.physics.microstrip import Microstrip
from refine.physics.substrate import Substrate

sys.path.insert(0, str(ROOT / "benchmarks"))
import em_lines  # the campaign's own reading of its data

RUNS = json.loads((DATA / "fullwave-lines.json").read_text())["runs"]


def test_the_fixture_holds_every_substrate_on_every_mesh_with_its_provenance():
    have = {(r["substrate"], r["edge_cell_m"]) for r in RUNS}
    assert have == {(s, e) for s in em_lines.SUBSTRATES for e in em_lines.EDGE_CELLS}
    for r in RUNS:
        assert r["engine"].startswith("openEMS") and r["date"] and r["cells"] > 10_000
        assert len(r["f_hz"]) == len(r["eps_eff"]) == len(r["z0_ohm"]) == em_lines.FREQUENCIES
        assert all(np.isfinite(r["eps_eff"])) and all(np.isfinite(r["z0_ohm"]))


@pytest.mark.parametrize("name", list(em_lines.SUBSTRATES))
def test_the_closed_forms_compared_with_are_scikit_rfs_microstrip_line(name):
    # Outside reference: scikit-rf's MLine with the same published models, zero thickness.
    r = next(r for r in RUNS if r["substrate"] == name)
    f = np.asarray(r["f_hz"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ms = MLine(
            frequency=Frequency.from_f(f, unit="Hz"),
            z0_port=50,
            w=r["width_m"],
            h=r["height_m"],
            t=None,
            ep_r=r["eps_r"],
            rho=1.7e-8,
            tand=0.0,
            rough=0.0,
            diel="frequencyinvariant",
            model="hammerstadjensen",
            disp="kirschningjansen",
        )
    z, e = Microstrip(Substrate(r["eps_r"], r["height_m"]), loss=False).dispersive(r["width_m"], f)
    np.testing.assert_allclose(e, np.real(ms.ep_reff_f), rtol=1e-8)
    np.testing.assert_allclose(z, np.real(ms.z0_characteristic), rtol=1e-8)
    assert np.interp(f[len(f) // 2], f, z) == pytest.approx(50.0, rel=0.01)  # a 50 ohm line


@pytest.mark.parametrize("name", list(em_lines.SUBSTRATES))
def test_eps_eff_is_mesh_converged_and_within_one_percent_from_7_ghz_mm(name):
    d = em_lines.deviations(RUNS, name)
    fh = d["f"] * 1e-9 * _height(name) * 1e3  # GHz*mm
    assert np.max(np.abs(d["eps_eff"][-1] - d["eps_eff"][-2])) < 0.01  # converged
    assert np.all(np.abs(d["eps_eff"][-1][fh >= 7.0]) < 0.01)
    # and where it is not: 2-3 % above the closed forms at the bottom of the band, every mesh
    assert 0.015 < d["eps_eff"][-1][0] < 0.035


@pytest.mark.parametrize("name", list(em_lines.SUBSTRATES))
def test_z0_is_within_two_percent_up_to_5_ghz_mm(name):
    d = em_lines.deviations(RUNS, name)
    fh = d["f"] * 1e-9 * _height(name) * 1e3
    assert np.all(np.abs(d["z0"][-1][fh <= 5.0]) < 0.02)


def _height(name: str) -> float:
    return em_lines.SUBSTRATES[name][0].height
