"""The planar-waveguide solve of a microstrip T-junction (refine.fullwave.planar): a straight
guide against the transmission line it stands for, the tee's losslessness, reciprocity and
symmetry, its low-frequency limit, and the tapped two-port against the circuit's shunt stub."""

from __future__ import annotations

import math

import numpy as np
import pytest

from refine.circuit import cascade
from refine.fullwave import planar as pl
from refine.physics.constants import C0
from refine.physics.microstrip import Microstrip
from refine.physics.substrate import Substrate

H = 0.635e-3
SUB = Substrate(eps_r=9.8, height=H)  # invented demo substrate (alumina-like)


def _line_z(zc: float, beta_l: float) -> np.ndarray:
    # A lossless line's impedance matrix (Pozar, Microwave Engineering, 4th ed., 2012, from
    # the ABCD matrix of Table 4.1 converted by Table 4.2; from memory)
    return np.array(
        [
            [-1j * zc / math.tan(beta_l), -1j * zc / math.sin(beta_l)],
            [-1j * zc / math.sin(beta_l), -1j * zc / math.tan(beta_l)],
        ]
    )


def test_a_straight_guide_is_its_transmission_line_to_second_order():
    # 50 ohm, eps_eff 6.6, 10 GHz, three widths long: each halving of the cells cuts the error
    # by about 4 (measured 1.3e-2, 3.2e-3, 8.0e-4 at 8, 16, 32 cells across)
    z0, ee, f = 50.0, 6.6, 10e9
    w = float(pl.effective_width(z0, ee, H))
    length = 3 * w
    k = 2 * math.pi * f / C0 * math.sqrt(ee)
    exact = _line_z(z0, k * length)
    errors = []
    for across in (8, 16, 32):
        z = pl.impedance_matrix(
            pl.straight_grid(w, length, across), (k * k, k * k), 2 * math.pi * f, H, ("-x", "+x")
        )
        errors.append(np.abs(z - exact).max() / np.abs(exact).max())
    assert errors[-1] < 1e-3
    assert 3.5 < errors[0] / errors[1] < 4.5 and 3.5 < errors[1] / errors[2] < 4.5


def _tee(f: np.ndarray, w_main: float, w_side: float, across: int = 12) -> pl.Tee:
    ms = Microstrip(SUB, loss=False)
    return pl.solve_tee(f, ms.dispersive(w_main, f), ms.dispersive(w_side, f), H, across)


def test_the_tee_is_lossless_reciprocal_and_symmetric_in_its_main_arms():
    t = _tee(np.array([5e9, 10e9]), 0.8e-3, 0.6e-3)
    for s in t.s:
        assert np.allclose(s.conj().T @ s, np.eye(3), atol=1e-12)
        assert np.allclose(s, s.T, atol=1e-12)
        assert s[0, 0] == pytest.approx(s[1, 1], abs=1e-12)
        assert s[0, 2] == pytest.approx(s[1, 2], abs=1e-12)


def test_at_low_frequency_the_tee_is_three_lines_meeting_at_a_point():
    # the junction is a fraction of a wavelength: its deviation from the ideal junction
    # falls in proportion to frequency (measured 3.2e-4, 3.2e-3, 3.2e-2 at 0.01, 0.1, 1 GHz)
    f = np.array([0.01e9, 0.1e9])
    t = _tee(f, 0.8e-3, 0.6e-3)
    dev = np.abs(t.s - pl.ideal_junction(t.z0[:, 0], t.z0[:, 1])).max(axis=(1, 2))
    assert dev[0] < 5e-4 and dev[1] / dev[0] == pytest.approx(10.0, rel=0.1)


def test_the_tapped_two_port_of_an_ideal_junction_is_the_circuits_shunt_open_stub():
    f = np.linspace(8e9, 12e9, 9)
    ms = Microstrip(SUB, loss=False)
    zm, em = ms.dispersive(0.8e-3, f)
    zs, _ = ms.dispersive(0.6e-3, f)
    ideal = pl.Tee(f, pl.ideal_junction(zm, zs), np.stack([zm, zs], -1), 1j * np.zeros((9, 2)))
    gamma = 1j * 2 * np.pi * f / C0 * np.sqrt(em)
    abcd = pl.tapped_two_port(ideal, gamma, zm, 2.1e-3)
    y = cascade.ShuntOpenStub(gamma, zm, 2.1e-3).value(2 * np.pi * f)
    assert np.allclose(abcd[0], 1.0) and np.allclose(abcd[1], 0.0, atol=1e-12)
    assert np.allclose(abcd[2], y) and np.allclose(abcd[3], 1.0)


def test_a_coarser_grid_changes_the_tee_by_under_one_percent():
    # 12 cells across (the benchmark's) against 24, at 10 GHz on alumina (measured 0.0066)
    f = np.array([10e9])
    a, b = _tee(f, 0.617e-3, 0.617e-3, 12), _tee(f, 0.617e-3, 0.617e-3, 24)
    assert np.abs(a.s - b.s).max() < 0.01


@pytest.mark.slow
def test_the_planar_tee_moves_the_8_percent_filter_where_the_field_solver_does_not():
    """benchmarks/tee.py on the 8 % tapped alumina filter (the layout the field solver ran):
    the planar tee moves the circuit model's centre up by about 2 % and widens its 3 dB
    bandwidth by about 19 %, while the field solver's finest mesh (three meshes, old box) has the
    centre -0.4 +- 1.2 % and the bandwidth within 3 % of the circuit model's (measured 2.7 %
    since the gap faces' capacitance, 1.5 % before); so the planar tee is not taken into the
    circuit model (README)."""
    import sys

    from conftest import DATA

    sys.path.insert(0, str(DATA.parent.parent / "benchmarks"))
    import em_filters
    import tee
    from em_filters import layout_of

    from refine.fullwave import compare, verify
    from refine.spec.problem import load_problem

    name = "ms-alumina-tap-10g-n3-8pct"
    problem = load_problem(tee.ROOT / "problems" / f"{name}.toml")
    runs = em_filters.load()
    lay = layout_of(name, problem, runs)
    f = verify.em_frequencies(problem, 121)
    plain, teed = tee.with_tees(problem, lay, f)
    c, t = (compare.band_figures(f, s[:, 0, 0], s[:, 1, 0], problem.mask) for s in (plain, teed))
    assert t.centre / c.centre - 1 > 0.015 and t.bandwidth / c.bandwidth > 1.15
    field = em_filters.summary(runs, (name, em_filters.campaign_data.OLD_BOX))  # three meshes
    assert field is not None and field["meshes"] == 3
    assert abs(field["bandwidth_hz"][0] / c.bandwidth - 1) < 0.03
    assert abs(field["centre_hz"][0] / c.centre - 1) <= field["centre_hz"][1] / c.centre
