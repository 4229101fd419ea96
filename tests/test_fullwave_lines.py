"""The field solver on a straight 50 ohm microstrip line, read from the fixture that
``benchmarks/em_lines.py`` writes (three substrates of our own choosing, three meshes each,
every cell halved from one mesh to the next), against the closed forms (Hammerstad-Jensen
with the Kirschning-Jansen and Jansen-Kirschning dispersion, zero metal thickness as in the
field model) and scikit-rf's microstrip line.

What the fixture shows, and these tests pin. eps_eff taken as the thru's two-port (beta L from
the ABCD matrix between the measurement planes, several millimetres apart) converges with the
mesh at every frequency, and on the finest mesh lies within 1 % of the closed forms from
f*h = 4 GHz*mm up and within 2 % everywhere, highest (1.5-1.9 %) at the bottom of each band.
The port's own beta (measured across one cell) is 2-3 % high at the bottom of the band, within
1 % only from 7 GHz*mm. Z0 (the port's voltage-current impedance) agrees within 2 % up to
f*h = 5 GHz*mm and drifts upward with the mesh above. The field-check issue's bar (1 % in
eps_eff, 2 % in Z0 over the whole band) is not met in that first set-up (lines on the strip
edges, first-order walls at 6 h).

The campaign ran twice more (em_lines.SETUPS): with the thirds rule, and with the thirds rule,
matched-layer walls and the half box, the field check's defaults. In the last the two-port
eps_eff is within 0.4 % over the whole band (the bar holds); the port's own eps_eff is still
high at the bottom of the band, and its voltage-current Z0 meets 2 % only up to f*h = 3 GHz*mm,
while the power-current Z0 from the engine's own fields (the definition Jansen-Kirschning's
dispersion uses) meets it below the top of each band. The README's table (written by the same
script) gives all three set-ups.
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

from refine.circuit.response import MICROSTRIP_LINE
from refine.physics.microstrip import Microstrip
from refine.physics.substrate import Substrate

sys.path.insert(0, str(ROOT / "benchmarks"))
import em_lines  # the campaign's own reading of its data

RUNS = json.loads((DATA / "fullwave-lines.json").read_text())["runs"]


def test_the_fixture_holds_every_substrate_on_every_mesh_with_its_provenance():
    have = {
        (r["substrate"], r["edge_cell_m"], em_lines.rule_of(r), em_lines.walls_of(r)) for r in RUNS
    }
    want = {(s, e) for s in em_lines.SUBSTRATES for e in em_lines.EDGE_CELLS}
    for setup in em_lines.SETUPS:
        assert {(s, e) for s, e, *su in have if tuple(su) == setup} == want, setup
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
def test_two_port_eps_eff_converges_and_is_within_one_percent_from_4_ghz_mm(name):
    d = em_lines.deviations(RUNS, name)
    fh = d["f"] * 1e-9 * _height(name) * 1e3  # GHz*mm
    dev = np.abs(d["eps_eff_two_port"])
    assert np.all(np.diff(dev, axis=0) < 5e-4)  # every refinement brings it closer
    assert np.all(dev[-1][fh >= 4.0] < 0.01)
    assert np.all(dev[-1] < 0.02)
    assert 0.012 < d["eps_eff_two_port"][-1][0] < 0.02  # the bottom of the band: still high


@pytest.mark.parametrize("name", list(em_lines.SUBSTRATES))
def test_port_eps_eff_is_within_one_percent_only_from_7_ghz_mm(name):
    d = em_lines.deviations(RUNS, name)
    fh = d["f"] * 1e-9 * _height(name) * 1e3
    assert np.all(np.abs(d["eps_eff"][-1][fh >= 7.0]) < 0.01)
    assert 0.015 < d["eps_eff"][-1][0] < 0.035  # 2-3 % high at the bottom of the band


@pytest.mark.parametrize("name", list(em_lines.SUBSTRATES))
def test_z0_is_within_two_percent_up_to_5_ghz_mm(name):
    d = em_lines.deviations(RUNS, name)
    fh = d["f"] * 1e-9 * _height(name) * 1e3
    assert np.all(np.abs(d["z0"][-1][fh <= 5.0]) < 0.02)


# ------------------------------------------------- the field check's defaults (thirds, matched layers)
#
# The same lines with the thirds rule at the strip edges, matched-layer walls and the half box
# (refine.fullwave.geometry.Resolution's defaults since benchmarks/em_boundaries.py and
# em_mirror.py). The bounds are the field-check issue's (1 % in eps_eff, 2 % in Z0) where they
# hold, and what was measured where they do not.

DEFAULTS = ("thirds", "pml")


@pytest.mark.parametrize("name", list(em_lines.SUBSTRATES))
def test_default_set_up_two_port_eps_eff_is_within_half_a_percent_over_the_whole_band(name):
    """With matched-layer walls the two-port eps_eff lies within 0.4 % of the closed forms from
    the bottom of the band to its top (the 1.4-1.8 % at the bottom with first-order walls was
    the walls)."""
    d = em_lines.deviations(RUNS, name, *DEFAULTS)
    assert d["meshes"] == list(em_lines.EDGE_CELLS)
    # the circuit model's stated ± on a microstrip line's ε_eff is this bound
    assert MICROSTRIP_LINE[0] == 0.005
    assert np.all(np.abs(d["eps_eff_two_port"][-1]) < MICROSTRIP_LINE[0])
    old = em_lines.deviations(RUNS, name, "thirds", "first-order")
    assert old["eps_eff_two_port"][-1][0] - d["eps_eff_two_port"][-1][0] > 0.008


@pytest.mark.parametrize("name", list(em_lines.SUBSTRATES))
def test_default_set_up_port_eps_eff_is_high_at_the_bottom_of_the_band(name):
    """The port's own beta (across one cell) stays 1-2.5 % high at the bottom of the band and is
    within 1 % from f*h = 5.5 GHz*mm: a two-port figure, not the port's, is the one to trust
    there."""
    d = em_lines.deviations(RUNS, name, *DEFAULTS)
    fh = d["f"] * 1e-9 * _height(name) * 1e3
    assert np.all(np.abs(d["eps_eff"][-1][fh >= 5.5]) < 0.01)
    assert 0.008 < d["eps_eff"][-1][0] < 0.03


@pytest.mark.parametrize("name", list(em_lines.SUBSTRATES))
def test_default_set_up_z0_is_within_two_percent_only_at_low_f_h(name):
    """The port's voltage-current Z0 agrees within 2 % up to f*h = 3 GHz*mm and then rises
    faster than the Jansen-Kirschning dispersion (a power-current impedance), to 2.4-5.4 % at
    the top of the band: the issue's 2 % bar for Z0 is not met there."""
    d = em_lines.deviations(RUNS, name, *DEFAULTS)
    fh = d["f"] * 1e-9 * _height(name) * 1e3
    assert np.all(np.abs(d["z0"][-1][fh <= 3.0]) < 0.02)
    assert 0.02 < d["z0"][-1][-1] < 0.06


def _height(name: str) -> float:
    return em_lines.SUBSTRATES[name][0].height


@pytest.mark.parametrize("name", list(em_lines.SUBSTRATES))
def test_default_set_up_power_current_z0_meets_two_percent_below_the_top_of_the_band(name):
    """Like for like: the power-current impedance from the engine's own fields (Poynting flux
    and loop current on a cross-section, forward and backward waves separated;
    refine.fullwave.cross_plane) against Jansen-Kirschning's power-current Z0. On the finest
    mesh it is within 0.7 % at every frequency below the top of each band (the issue's bar is
    2 %), and within 2 % beyond the mesh uncertainty at 9 or 10 of 11 frequencies; what stays
    undecided is the top of each band, where the field dump's transform does not converge with
    the mesh (on the laminate +0.9, +2.8, +7.0 %), and on alumina the bottom (three meshes
    that converge slowly: +-3 %). The port's voltage-current impedance drifting 2.5-5.4 % high
    at the top of the band (the test above) is the definition, not the engine: the wave's
    voltage-current impedance on the same cross-section rises the same way."""
    d = em_lines.deviations(RUNS, name, *DEFAULTS)
    dp, unc = d["z0_power_current"], d["z0_power_current_unc"]
    # the circuit model's stated ± on a microstrip line's Z0 is this bound
    assert MICROSTRIP_LINE[1] == 0.0075
    assert np.all(np.abs(dp[-1][:-1]) < MICROSTRIP_LINE[1])
    within = [
        u is not None and abs(x) + u <= em_lines.TOL_Z0 for x, u in zip(dp[-1], unc, strict=True)
    ]
    assert sum(within) >= 9 and all(within[1:-1])
    assert not within[-1]  # the top of the band: undecided
    # the same cross-section's voltage-current impedance rises with f*h as the port's does
    assert d["z0_plane_vi"][-1][-2] - dp[-1][-2] > 0.015
