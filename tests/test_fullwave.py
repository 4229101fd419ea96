"""The field-solver backend: mesh rules, geometry from the layout drawing, the wave algebra
(checked against refine's own cascade), comparison figures, the gap-calibration fixture against
every closed-form gap model, space mapping on a stand-in fine model, and (with the engine
installed) one coarse end-to-end single-gap solve against the fixture."""

import itertools
import json
import math
import os
import subprocess
import sys
import time
import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from refine.circuit import cascade
from refine.circuit.layout import Layout
from refine.circuit.response import evaluate_layout
from refine.cli import main
from refine.fullwave import (
    calibration,
    compare,
    correction,
    engine,
    geometry,
    handover,
    mesh,
    spacemap,
    uncertainty,
    verify,
    waves,
)
from refine.outputs import export
from refine.physics import gap_fixture
from refine.physics.strip import GAP_MODELS
from refine.physics.substrate import Substrate
from refine.spec.mask import Mask, Stopband
from refine.spec.problem import load_problem
from refine.synthesis import inverters as synthesis

ROOT = Path(__file__).parent.parent
NOMINAL_ONLY = 5  # the design exit code for a mask met on the nominal model only
TAP_PROBLEM = ROOT / "problems/ms-alumina-tap-10g-n3-10pct.toml"
ALUMINA = Substrate(9.8, 0.635e-3)

# ---------------------------------------------------------------------------------- mesh


@settings(max_examples=60, deadline=None)
@given(
    pts=st.lists(st.tuples(st.floats(-4e-3, 4e-3), st.floats(5e-6, 1e-4)), min_size=0, max_size=12),
    d_max=st.floats(1e-4, 1e-3),
    ratio=st.floats(1.1, 1.5),
)
def test_graded_lines_respect_the_size_rules(pts, d_max, ratio):
    pts = sorted(pts)
    # points closer than half a cell are merged by design; here they are kept apart (and off
    # the domain ends) so each must be a line
    assume(all(b[0] - a[0] > max(a[1], b[1]) for a, b in itertools.pairwise(pts)))
    lines = mesh.graded_lines(pts, -5e-3, 5e-3, d_max, ratio)
    d = np.diff(lines)
    assert lines[0] == -5e-3 and lines[-1] == 5e-3
    assert np.all(d > 0)
    assert d.max() <= d_max * (1 + 1e-6)
    for p, c in pts:
        assert np.min(np.abs(lines - p)) < 1e-15
        # the cells touching a fixed point: at most 1/(1 - (ratio-1)/2) times its cell size
        # (5 % slack for the sampled allowed-size integral)
        k = int(np.argmin(np.abs(lines - p)))
        around = d[max(0, k - 1) : k + 1]
        assert around.max() <= min(c, d_max) / (1 - (ratio - 1) / 2) * 1.05


def test_graded_lines_grow_smoothly_away_from_a_fine_edge():
    lines = mesh.graded_lines([(0.0, 25e-6)], -8e-3, 8e-3, 0.4e-3, 1.3)
    d = np.diff(lines)
    assert 0.0 in lines
    assert np.max(np.maximum(d[1:] / d[:-1], d[:-1] / d[1:])) < 1.36
    # the cell touching the edge averages the allowed size over itself: at most
    # 1/(1 - (r-1)/2) = 1.18 times the nominal edge cell
    assert 25e-6 <= d.min() <= 25e-6 * 1.18


def test_symmetric_mesh_is_an_exact_mirror():
    lines = mesh.graded_lines([(0.0, 5e-5), (1e-4, 5e-5)], -9e-3, 9.1e-3, 4e-4)
    sym = mesh.symmetric(lines, 5e-5)
    assert np.all(np.diff(sym) > 1e-9)
    # a mirror to the rounding of 2c - x (one unit in the last place of a line position)
    np.testing.assert_allclose(2 * 5e-5 - sym[::-1], sym, rtol=0, atol=np.spacing(9.1e-3))


def test_max_cell_is_twenty_per_wavelength_in_the_dielectric():
    # 10 GHz in eps_r 9: wavelength 10 mm (recomputed from c), twenty cells of 0.5 mm
    assert mesh.max_cell(10e9, 9.0) == pytest.approx(299_792_458 / 10e9 / 3 / 20)


# ------------------------------------------------------------------------------ geometry


def _gap_layout():
    return Layout(
        "gap", 0.6e-3, (0.6e-3,) * 3, (0.04e-3, 0.3e-3, 0.3e-3, 0.04e-3), (5e-3, 5.1e-3, 5e-3)
    )


def _tap_layout():
    return Layout(
        "tap",
        0.6e-3,
        (1.2e-3, 0.7e-3, 1.2e-3),
        (0.12e-3, 0.12e-3),
        (4.9e-3, 5e-3, 4.9e-3),
        (1.5e-3, 1.5e-3),
    )


def test_the_field_model_builds_the_problems_enclosure():
    """Open: absorbing side walls and top (matched layers by default, benchmarks/
    em_boundaries.py); shielded: metal ones (the feeds always end in absorbing layers, the floor
    is the ground plane)."""
    gap_st = geometry.gap_structure(0.6e-3, 0.1e-3, 3e-3)
    pml = f"PML_{geometry.PML_CELLS}"
    assert geometry.boundaries(gap_st) == [pml] * 4 + ["PEC", pml]
    assert geometry.boundaries(gap_st, "open", "first-order") == [
        pml, pml, "MUR", "MUR", "PEC", "MUR",
    ]  # fmt: skip
    assert geometry.boundaries(gap_st, "shielded") == [pml, pml, "PEC", "PEC", "PEC", "PEC"]
    with pytest.raises(ValueError, match="enclosure"):
        geometry.boundaries(gap_st, "lidded")
    m = geometry.build_mesh(gap_st, ALUMINA, 14e9, geometry.MESHES["coarse"])
    j = geometry.job(
        gap_st, m, ALUMINA, (4e9, 14e9), np.linspace(4e9, 14e9, 3), 1e-9, 1, enclosure="shielded"
    )
    assert j["boundaries"][2:] == ["PMC", "PEC", "PEC", "PEC"]  # the half box's centre line


def test_matched_layers_as_open_walls_sit_beyond_the_margins():
    """open_walls "pml": matched layers on the open sides and the top, their cells added beyond
    the side margin and the air height (the box within them is the first-order one's); a
    shielded box keeps its metal walls whatever the choice."""
    gap_st = geometry.gap_structure(0.6e-3, 0.1e-3, 3e-3)
    pml = f"PML_{geometry.PML_CELLS}"
    assert geometry.boundaries(gap_st, "open", "pml") == [pml] * 4 + ["PEC", pml]
    assert geometry.boundaries(gap_st, "shielded", "pml")[2:] == ["PEC"] * 4
    with pytest.raises(ValueError, match="open_walls"):
        geometry.boundaries(gap_st, "open", "matched")
    with pytest.raises(ValueError, match="open_walls"):
        replace(geometry.MESHES["coarse"], open_walls="matched")
    whole = replace(geometry.MESHES["coarse"], mirror=False, open_walls="first-order")
    first = geometry.build_mesh(gap_st, ALUMINA, 14e9, whole)
    res = replace(whole, open_walls="pml")
    padded = geometry.build_mesh(gap_st, ALUMINA, 14e9, res)
    n = geometry.PML_CELLS
    np.testing.assert_array_equal(padded.x, first.x)  # the feeds' axis: layers there already
    np.testing.assert_allclose(padded.y[n:-n], first.y)
    np.testing.assert_allclose(padded.z[:-n], first.z)
    assert np.allclose(np.diff(padded.y[: n + 1]), first.y[1] - first.y[0])
    assert np.allclose(np.diff(padded.z[-n - 1 :]), first.z[-1] - first.z[-2])
    j = geometry.job(
        gap_st, padded, ALUMINA, (4e9, 14e9), np.linspace(4e9, 14e9, 3), 1e-9, 1,
        open_walls="pml",
    )  # fmt: skip
    assert j["boundaries"] == [pml] * 4 + ["PEC", pml]


def test_thirds_rule_puts_the_edge_between_two_lines():
    """Each metal edge: a line a third of the edge cell inside the metal, one two thirds outside,
    none on the edge (common practice, no source); a gap's cell is at most half the gap."""
    gap, width = 40e-6, 0.6e-3
    st_ = geometry.gap_structure(width, gap, 3e-3)
    res = geometry.Resolution("t", 50e-6, edge_rule="thirds", mirror=False)
    m = geometry.build_mesh(st_, ALUMINA, 14e9, res)
    d = gap / 2  # the gap's edges take half the gap
    for x, inside in ((0.0, -1), (gap, +1)):  # feed-in end (metal below), feed-out start
        assert np.min(np.abs(m.x - x)) > d / 10
        assert np.min(np.abs(m.x - (x + inside * d / 3))) < 1e-12
        assert np.min(np.abs(m.x - (x - inside * 2 * d / 3))) < 1e-12
    for y, inside in ((-width / 2, +1), (width / 2, -1)):
        assert np.min(np.abs(m.y - y)) > 50e-6 / 10
        assert np.min(np.abs(m.y - (y + inside * 50e-6 / 3))) < 1e-12
    with pytest.raises(ValueError, match="edge_rule must be one of on-edge, thirds"):
        geometry.Resolution("t", 50e-6, edge_rule="middle")


def test_a_mirror_symmetric_layout_is_solved_as_the_half_box_above_its_centre_line():
    """Gap-coupled copper is symmetric across the strips' centre line: the default mesh is the
    half box above it, its first cell straddling the line (the engine's magnetic wall sits half
    a cell inside the box edge), a magnetic wall there, the copper and ports cut at the box
    edge; tapped feeds break the symmetry and keep the whole box."""
    lay = _gap_layout()
    length = geometry.feed_length(ALUMINA, lay.feed_width, 14e9, geometry.MESHES["coarse"])
    st_ = geometry.layout_structure(lay, ALUMINA, length)
    assert st_.mirror_line() == 0.0
    assert geometry.layout_structure(_tap_layout(), ALUMINA, length).mirror_line() is None
    shifted = replace(st_, strips=(*st_.strips[:-1], replace(st_.strips[-1], y1=1e-3)))
    assert shifted.mirror_line() is None
    whole_res = replace(geometry.MESHES["coarse"], mirror=False)
    whole = geometry.build_mesh(st_, ALUMINA, 14e9, whole_res)
    half = geometry.build_mesh(st_, ALUMINA, 14e9, geometry.MESHES["coarse"])
    assert whole.mirror is None and half.mirror == 0.0
    assert half.y[0] == pytest.approx(-half.y[1], abs=1e-15) and half.y[1] > 0
    np.testing.assert_array_equal(half.y[1:], whole.y[whole.y > 1e-12])
    assert half.cells < 0.55 * whole.cells
    assert half.span == pytest.approx(whole.span, rel=1e-12)  # the simulated time: whole box's
    band, f = (4e9, 14e9), np.linspace(4e9, 14e9, 3)
    jw = geometry.job(st_, whole, ALUMINA, band, f, 1e-9, 1)
    jh = geometry.job(st_, half, ALUMINA, band, f, 1e-9, 1)
    assert jh["boundaries"][2] == "PMC" and jw["boundaries"][2] == f"PML_{geometry.PML_CELLS}"
    assert jh["mirror"] and not jw["mirror"]
    assert len(jh["strips"]) == len(jw["strips"])
    for (x0, y0, x1, y1), (a0, b0, a1, b1) in zip(jh["strips"], jw["strips"], strict=True):
        assert (x0, x1, y1) == (a0, a1, b1) and y0 == max(b0, half.y[0])
    for p in jh["ports"]:
        assert p["start"][1] == half.y[0]


def test_the_half_box_solve_reports_the_whole_structures_currents(monkeypatch, tmp_path):
    """A half box carries half of each strip's current at the same voltage: engine.run hands
    back the whole structure's current and line impedance."""
    script = tmp_path / "fake_engine.py"
    script.write_text(
        "import json, sys, numpy as np\n"
        "job = json.load(open(sys.argv[1]))\n"
        "n = len(job['frequencies'])\n"
        "arrays = {}\n"
        "for k in (1, 2):\n"
        "    arrays.update({f'v{k}': np.ones(n, complex), f'i{k}': np.full(n, 0.01 + 0j),\n"
        "                   f'zc{k}': np.full(n, 100 + 0j), f'yi{k}': np.full(5, 0.01)})\n"
        "np.savez(sys.argv[2], **arrays)\n"
    )
    monkeypatch.setattr(engine, "SCRIPT", script)
    monkeypatch.setattr(engine, "find_engine", lambda: engine.Engine(sys.executable, "fake"))
    st_ = geometry.gap_structure(0.6e-3, 0.1e-3, 3e-3)
    f = np.linspace(4e9, 14e9, 3)
    for mirror, scale in ((True, 2.0), (False, 1.0)):
        res = replace(geometry.MESHES["coarse"], mirror=mirror)
        m = geometry.build_mesh(st_, ALUMINA, 14e9, res)
        r = engine.run(geometry.job(st_, m, ALUMINA, (4e9, 14e9), f, 1e-9, 1))
        np.testing.assert_allclose(r["i1"], 0.01 * scale)
        np.testing.assert_allclose(r["yi1"], 0.01 * scale)  # the time record behind i1 too
        np.testing.assert_allclose(r["zc1"], 100 / scale)
        np.testing.assert_allclose(r["v1"], 1.0)


_SLOW_ENGINE = (
    "import os, sys, time\n"
    "open(sys.argv[1] + '.pid', 'w').write(str(os.getpid()))\n"
    "for k in range(600):\n"
    "    try:  # like the engine's own output, carry on when no one reads it any more\n"
    "        print(f'Timestep: {k}', flush=True)\n"
    "    except OSError:\n"
    "        pass\n"
    "    time.sleep(0.1)\n"
)


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    # a zombie is dead too
    stat = Path(f"/proc/{pid}/stat")
    return not (stat.exists() and stat.read_text().split()[2] == "Z")


def _wait_gone(pid: int, seconds: float = 10.0) -> bool:
    t0 = time.monotonic()
    while time.monotonic() - t0 < seconds:
        if not _alive(pid):
            return True
        time.sleep(0.1)
    return False


def test_a_timed_out_solve_stops_the_engine(monkeypatch, tmp_path):
    script = tmp_path / "slow_engine.py"
    script.write_text(_SLOW_ENGINE)
    monkeypatch.setattr(engine, "SCRIPT", script)
    monkeypatch.setattr(engine, "find_engine", lambda: engine.Engine(sys.executable, "slow"))
    with pytest.raises(engine.EngineFailed, match="took longer than"):
        engine.run({"mesh": {"x": [0, 1], "y": [0, 1], "z": [0, 1]}, "max_time": 1e-9},
                   workdir=tmp_path / "work", timeout=0.5)  # fmt: skip
    pid = int((tmp_path / "work" / "job.json.pid").read_text())
    assert _wait_gone(pid)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="parent-death signal: Linux")
def test_a_killed_campaign_leaves_no_engine_running(tmp_path):
    """A campaign killed mid-solve (SIGKILL: no clean-up of its own runs) takes its engine
    process with it, instead of leaving it to run for hours on the machine's cores."""
    script = tmp_path / "slow_engine.py"
    script.write_text(_SLOW_ENGINE)
    work = tmp_path / "work"
    parent = subprocess.Popen(
        [sys.executable, "-c",
         "import sys\n"
         "from refine.fullwave import engine\n"
         f"engine.SCRIPT = engine.Path({str(script)!r})\n"
         "engine.find_engine = lambda: engine.Engine(sys.executable, 'slow')\n"
         "engine.run({'mesh': {'x': [0, 1], 'y': [0, 1], 'z': [0, 1]}, 'max_time': 1e-9},\n"
         f"           workdir={str(work)!r})\n"],
    )  # fmt: skip
    pid_file = work / "job.json.pid"
    t0 = time.monotonic()
    while not pid_file.exists() and time.monotonic() - t0 < 30:
        time.sleep(0.1)
    time.sleep(0.2)
    pid = int(pid_file.read_text())
    assert _alive(pid)
    parent.kill()
    parent.wait()
    assert _wait_gone(pid)


@pytest.mark.parametrize("make", [_gap_layout, _tap_layout])
def test_field_model_copper_is_the_drawing(make):
    lay = make()
    length = geometry.feed_length(ALUMINA, lay.feed_width, 14e9, geometry.MESHES["coarse"])
    st_ = geometry.layout_structure(lay, ALUMINA, length)
    drawn = export.copper(lay, feed_length=length)
    res = [s for s in st_.strips if s.name.startswith("resonator")]
    assert res == [s for s in drawn if s.name.startswith("resonator")]
    assert st_.symmetric
    m = geometry.build_mesh(st_, ALUMINA, 14e9, geometry.MESHES["coarse"])
    d = geometry.MESHES["coarse"].edge_cell
    for s in st_.strips:  # every strip edge inside the box lies between two lines (thirds rule)
        for lines, edges in ((m.x, (s.x0, s.x1)), (m.y, (s.y0, s.y1))):
            for e in edges:
                if lines[0] < e < lines[-1]:
                    # a third of a cell, or half where two edges' lines merge
                    assert 1e-9 < np.min(np.abs(lines - e)) <= d / 2 + 1e-12
    for _, a, b in st_.openings:  # at least two cells across every gap
        assert np.count_nonzero((m.x > a + 1e-12) & (m.x < b - 1e-12)) >= 1
    assert np.any(m.z == ALUMINA.height)
    j = geometry.job(st_, m, ALUMINA, (4e9, 14e9), np.linspace(4e9, 14e9, 5), 1e-9, 1)
    json.dumps(j)
    for p, fd in zip(j["ports"], st_.feeds, strict=True):
        assert 0 < p["feed_shift"] < p["meas_shift"] < fd.length
    assert j["excitation"]["fc"] < j["excitation"]["f0"]  # little DC in the pulse


def test_gap_feeds_reference_the_end_gaps_and_tap_feeds_the_centre_line():
    lay = _gap_layout()
    st_ = geometry.layout_structure(lay, ALUMINA, 5e-3)
    assert st_.feeds[0].ref == 0.0
    assert st_.feeds[1].ref == pytest.approx(lay.total_length)
    tap = geometry.layout_structure(_tap_layout(), ALUMINA, 5e-3)
    assert [f.ref for f in tap.feeds] == [0.0, 0.0]
    want = [(4.9e-3, 4.9e-3 + 0.12e-3), (9.9e-3 + 0.12e-3, 9.9e-3 + 0.24e-3)]
    assert [o[0] for o in tap.openings] == ["x", "x"]
    np.testing.assert_allclose([o[1:] for o in tap.openings], want, rtol=1e-12)


def test_asymmetric_layout_is_not_marked_symmetric():
    lay = replace(_gap_layout(), gaps=(0.04e-3, 0.3e-3, 0.31e-3, 0.04e-3))
    assert not geometry.layout_structure(lay, ALUMINA, 5e-3).symmetric


# ----------------------------------------------------------------------------- wave algebra


def _outer_states(inner: cascade.Abcd, zc, beta, d1, d2, z_load, f):
    """Port states a field solver would see at measurement planes d1, d2 outside a two-port,
    built with refine's cascade (an independent path from waves.move_to_plane)."""
    gamma = 1j * beta
    lines1 = cascade.chain_abcd([cascade.Line(gamma, zc, d1)], f)
    lines2 = cascade.chain_abcd([cascade.Line(gamma, zc, d2)], f)

    def mul(p, q):
        return cascade.Abcd(
            p.a * q.a + p.b * q.c,
            p.a * q.b + p.b * q.d,
            p.c * q.a + p.d * q.c,
            p.c * q.b + p.d * q.d,
        )

    t = mul(mul(lines1, inner), lines2)
    states = []
    for tt in (t, cascade.Abcd(t.d, t.b, t.c, t.a)):  # port 1 driven, then port 2 driven
        v2, i2 = z_load, -1.0  # load at the far port: V = Z_L * (current into the load)
        v1 = tt.a * v2 + tt.b * 1.0
        i1 = tt.c * v2 + tt.d * 1.0
        states.append((v1, i1, v2 * np.ones_like(v1), i2 * np.ones_like(v1)))
    p, q = states
    return p, (q[2], q[3], q[0], q[1])


def test_deembedded_two_port_recovers_a_known_gap():
    f = np.linspace(2e9, 12e9, 11)
    cg, c1, c2 = 41e-15, 6e-15, 9e-15  # an asymmetric π of capacitors (invented values)
    inner = cascade.chain_abcd([cascade.PiNetwork(cg, c1, c2)], f)
    zc = 49.0 + 0.3j
    beta = 2 * np.pi * f * np.sqrt(6.6) / 299_792_458 * (1 - 1e-3j)
    d1, d2 = 3.1e-3, 2.7e-3
    p, q = _outer_states(inner, zc, beta, d1, d2, 57.0, f)
    states = []
    for s in (p, q):
        v1, i1 = waves.move_to_plane(s[0], s[1], zc, beta, d1)
        v2, i2 = waves.move_to_plane(s[2], s[3], zc, beta, d2)
        states.append(waves.PortState(v1, i1, v2, i2))
    got = waves.abcd_from_states(states)
    for a, b in zip(got, inner, strict=True):
        np.testing.assert_allclose(a, np.broadcast_to(b, a.shape), rtol=1e-9, atol=1e-12)
    pc = waves.pi_capacitances(got, f)
    np.testing.assert_allclose(pc.c_series, cg, rtol=1e-9)
    np.testing.assert_allclose(pc.c_shunt_in, c1, rtol=1e-8)
    np.testing.assert_allclose(pc.c_shunt_out, c2, rtol=1e-8)


def test_one_excitation_suffices_for_a_mirror_symmetric_two_port():
    f = np.linspace(2e9, 12e9, 7)
    inner = cascade.chain_abcd([cascade.PiNetwork(41e-15, 6e-15, 6e-15)], f)
    beta = 2 * np.pi * f * 2.57 / 299_792_458
    p, _ = _outer_states(inner, 50.0, beta, 2e-3, 2e-3, 63.0, f)
    v1, i1 = waves.move_to_plane(p[0], p[1], 50.0, beta, 2e-3)
    v2, i2 = waves.move_to_plane(p[2], p[3], 50.0, beta, 2e-3)
    got = waves.abcd_from_states([waves.PortState(v1, i1, v2, i2)])
    np.testing.assert_allclose(waves.pi_capacitances(got, f).c_series, 41e-15, rtol=1e-9)


def test_richardson_recovers_a_first_order_limit():
    cells = [50e-6, 25e-6, 12.5e-6]
    r = waves.richardson(cells, [41.2 + 0.3 * h * 1e6 for h in cells])
    assert r.value == pytest.approx(41.2)
    assert r.order == pytest.approx(1.0)
    r = waves.richardson(cells, [10.0 + 4e6 * h**1.5 * 1e3 for h in cells])
    assert r.value == pytest.approx(10.0, abs=1e-9)
    assert r.order == pytest.approx(1.5)
    r = waves.richardson(cells, [5.0, 4.0, 4.5])  # not monotone: no order, first order assumed
    assert math.isnan(r.order) and r.value == pytest.approx(5.0)
    with pytest.raises(ValueError, match="constant factor"):
        waves.richardson([50e-6, 25e-6, 10e-6], [1, 2, 3])


# ----------------------------------------------------------------------- comparison figures


def test_band_figures_of_a_chebyshev_filter():
    d = synthesis.design("chebyshev", 3, 10e9, 0.02, 50.0, 0.1)
    f = np.linspace(9.5e9, 10.5e9, 4001)
    s = synthesis.ideal_response(d, f)
    m = Mask(9.9e9, 10.1e9, min_return_loss_db=10.0, stopbands=(Stopband(9.5e9, 9.7e9, 20),))
    fig = compare.band_figures(f, s[:, 0, 0], s[:, 1, 0], m)
    # the ideal half-wave filter's 3 dB band sits near f0 (1 -+ FBW/2) scaled by the ripple
    # band's 3 dB factor cosh(acosh(1/eps)/3) = 1.389 for 0.1 dB ripple (recomputed)
    assert fig.centre == pytest.approx(10e9, rel=0.01)
    assert fig.bandwidth == pytest.approx(1.389 * 0.2e9, rel=0.02)
    # 0.1 dB ripple: RL = -10 log10(1 - 10^(-0.01)) = 16.4 dB (recomputed)
    assert fig.worst_return_loss == pytest.approx(16.4, abs=0.3)
    assert fig.rejection[0][1] == 9.7e9
    c = compare.compare(f, s, s, m)
    assert c.centre_shift == 0 and c.bandwidth_ratio == 1


def test_clip_mask_cuts_stopbands_to_the_band():
    p = load_problem(TAP_PROBLEM)
    m = compare.clip_mask(p.mask, 6e9, 12.5e9)
    assert [(sb.start, sb.stop) for sb in m.stopbands] == [(6e9, 8.6e9), (11.8e9, 12.5e9)]
    assert compare.clip_mask(p.mask, 9e9, 11e9).stopbands == ()


def test_em_band_covers_the_mask_from_a_quarter_of_f0():
    p = load_problem(ROOT / "problems/microstrip-x-band-alumina-n3.toml")
    lo, hi = verify.em_band(p)
    assert lo == pytest.approx(2.5e9) and hi == pytest.approx(12.24e9)


# --------------------------------------------------------------------- calibration fixture


FIXTURE_PATH = Path(__file__).parent / "data/gap-calibration.json"


@pytest.fixture(scope="module")
def fx():
    return gap_fixture.load_fixture(FIXTURE_PATH)


def test_fixture_has_provenance_and_enough_geometries(fx):
    prov = fx.provenance
    assert {"engine", "created", "method", "script"} <= set(prov)
    geoms = fx.geometries()
    assert len(geoms) >= 8
    assert len({g.eps_r for g in geoms}) >= 3
    wh = [g.width / g.height for g in geoms]
    sw = [g.gap / g.width for g in geoms]
    assert min(wh) <= 0.6 and max(wh) >= 1.8 and min(sw) <= 0.15 and max(sw) >= 0.45
    for r in fx.records:
        assert len(r["meshes"]) == 3
        cg = [m["c_series"] for m in r["meshes"]]
        assert cg[0] > cg[1] > cg[2] > r["c_series"] > 0  # converging from above


def test_every_gap_model_against_the_fixture(fx):
    rows = gap_fixture.comparison(fx)
    err = {m: [row["models"][m][0] for row in rows] for m in GAP_MODELS["microstrip"]}
    # Observed on the fixture of this release (table in the README): both models read low;
    # Garg-Bahl's series capacitance is within 20 % of the mesh-extrapolated field solution
    # at every calibrated gap, Kirschning-Jansen-Koster within 27 %; on alumina (eps_r 9.8)
    # Garg-Bahl is the closer one at every gap, at eps_r <= 3.5 Kirschning-Jansen-Koster is.
    assert all(-0.21 < e < 0.0 for e in err["garg-bahl"])
    assert all(-0.28 < e < 0.0 for e in err["kirschning-jansen-koster"])
    for row in rows:
        gb, kjk = (abs(row["models"][m][0]) for m in ("garg-bahl", "kirschning-jansen-koster"))
        if row["geometry"].eps_r > 9:
            assert gb < kjk
        if row["geometry"].eps_r < 4:
            assert kjk < gb


def test_verdict_names_the_closer_model_for_a_geometry(fx):
    v = gap_fixture.verdict(0.6e-3, 0.1e-3, ALUMINA, fx)
    assert v.distance == pytest.approx(0.0, abs=1e-9)
    assert v.closest in GAP_MODELS["microstrip"]
    assert v.closest in v.sentence() and "%" in v.sentence()


# -------------------------------------------------------------------------- engine missing


def test_missing_engine_says_what_to_install(monkeypatch, tmp_path, capsys):
    monkeypatch.setattr(engine, "_probe", lambda python: None)
    engine.find_engine.cache_clear()
    try:
        with pytest.raises(engine.EngineMissing, match="apt-get install python3-openems"):
            engine.find_engine()
        lay = tmp_path / "layout.json"
        export.write_json(lay, export.layout_dict(_tap_layout()))
        assert main(["fullwave", str(lay), "--problem", str(TAP_PROBLEM)]) == 2
        assert "python3-openems" in capsys.readouterr().err
        assert sorted(p.name for p in tmp_path.iterdir()) == ["layout.json"]
    finally:
        engine.find_engine.cache_clear()


@pytest.mark.parametrize("delays", [0.0, -1.0, float("nan")])
def test_a_ringing_that_is_not_positive_is_refused_before_anything_runs(delays):
    p = load_problem(TAP_PROBLEM)
    with pytest.raises(ValueError, match="ring_delays"):
        verify.check_layout(p, _tap_layout(), ring_delays=delays)


def test_stripline_is_refused_with_a_clear_message(tmp_path):
    p = load_problem(ROOT / "problems/sl-ptfe-tap-1g6-n3-1pct.toml")
    with pytest.raises(verify.FieldCheckError, match="microstrip only"):
        verify.check_layout(p, _tap_layout())


# ------------------------------------------------------------ space mapping (stand-in model)


@pytest.mark.parametrize("method", spacemap.METHODS)
def test_space_mapping_meets_the_mask_on_a_stand_in_fine_model(monkeypatch, method):
    """The fine model here is the circuit model on a substrate of eps_r 10.1 instead of 9.8
    (about a 1.5 % frequency shift, invented for the test), with zero-thickness strips like the
    field model's, so the map has a known error to remove and a thickness to leave alone; it
    must not touch the fab rules."""
    p = load_problem(TAP_PROBLEM)
    from refine.optimise import seed as job
    from refine.optimise.refiner import refine_problem

    r = refine_problem(p, seed=job.seed(p))
    assert r.worst_margin >= 0.0  # met on the nominal model (not at every model corner)
    assert p.substrate.metal_thickness > 0
    fine = replace(p, substrate=replace(p.substrate, eps_r=10.1, metal_thickness=0.0))

    def fake_check(problem, layout, mesh="coarse", workdir=None, threads=0, progress=None):
        f = verify.em_frequencies(problem)
        s_f = evaluate_layout(fine, layout, f)
        s_c = evaluate_layout(problem, layout, f)
        s_sheet = evaluate_layout(correction.sheet_problem(problem), layout, f)
        comp = compare.compare(f, s_f, s_c, problem.mask)
        # carried to the problem's metal as check_layout carries each mesh's solve
        m = correction.carried_margin(problem, correction.StoredSolve(layout, f, s_f))
        carried = uncertainty.Figure("worst mask margin", "dB", (m,), None)
        return verify.FieldCheck(
            problem, layout, mesh, f, s_f, s_c, comp, (), None, (), s_sheet, carried
        )

    monkeypatch.setattr(verify, "check_layout", fake_check)
    first = fake_check(p, r.layout)
    assert not first.comparison.em_mask.passed  # the stand-in fine model breaks the design
    sm = spacemap.correct(p, r.layout, max_runs=3, method=method)
    # the stand-in is one "mesh" without an error estimate: the mask met on it ends the rounds,
    # but the corrected design is not called met beyond a mesh uncertainty it does not have
    assert sm.runs <= 3 and not sm.met
    # judged at the problem's metal thickness, which the stand-in (like the field model) lacks:
    # the implicit map extracts against the circuit model with sheets and meets the mask at the
    # problem's thickness; the aggressive map designs for the sheets, and comes within 1.5 dB
    # (measured: -1.16 dB since the unequal-gap correction; within 1 dB before it)
    thick_fine = replace(fine, substrate=replace(fine.substrate, metal_thickness=10e-6))
    f = verify.em_frequencies(p)
    s = evaluate_layout(thick_fine, sm.layouts[sm.best], f)
    truth = compare.compare(f, s, s, p.mask).em_mask.worst_margin
    assert sm.margins_at_thickness[sm.best] == pytest.approx(truth, abs=0.05)
    # ranked on the number each round's verdict reports
    assert sm.margins_at_thickness[sm.best] == sm.checks[sm.best].judged_margin().value
    assert truth >= (0.0 if method == "implicit" else -1.5)
    if method == "implicit":  # the extracted correction is mostly a length change
        corr = sm.extracted[0]
        # the denser substrate makes every drawn line electrically longer
        assert all(d > 0 for d in corr.length_offsets)
        assert sm.misfits[0] < 0.02
    final = sm.layouts[-1]
    assert min(final.gaps) >= p.fab.min_gap
    assert all(abs(g / p.fab.grid - round(g / p.fab.grid)) < 1e-6 for g in final.gaps)


def _stand_in_check(problem, layout, corr):
    """A 'field solve' that is the circuit model under a known correction, with the field
    model's zero-thickness strips."""
    f = verify.em_frequencies(problem, 201)
    s_f = correction.corrected_response(correction.sheet_problem(problem), layout, corr, f)
    s_c = evaluate_layout(problem, layout, f)
    comp = compare.compare(f, s_f, s_c, problem.mask)
    return verify.FieldCheck(problem, layout, "coarse", f, s_f, s_c, comp, (), None)


def test_multipoint_extraction_recovers_a_known_gap_offset():
    """One solve cannot tell a gap factor from a gap offset, so only the factor is fitted; two
    solves with different gaps recover both (the known correction is invented for the test)."""
    p = load_problem(TAP_PROBLEM)
    lay = _tap_layout()
    truth = correction.ModelCorrection(
        (1.1, 1.1), (20e-6, -10e-6, 20e-6), (15e-6, 15e-6), (2.0,), (25e-6, 25e-6)
    )
    wide = replace(lay, gaps=tuple(1.5 * g for g in lay.gaps))
    one, misfit_one = correction.extract_correction(p, [_stand_in_check(p, lay, truth)])
    assert one.gap_offsets == (0.0, 0.0) and misfit_one < 0.02
    two, misfit_two = correction.extract_correction(
        p, [_stand_in_check(p, lay, truth), _stand_in_check(p, wide, truth)]
    )
    assert two.gap_offsets == pytest.approx(truth.gap_offsets, rel=0.1)
    assert two.gap_factors == pytest.approx(truth.gap_factors, rel=0.03)
    assert two.length_offsets == pytest.approx(truth.length_offsets, abs=3e-6)
    assert misfit_two < 1e-3
    # the single-solve fit matches its own solve but not the wider layout's
    s = correction.corrected_response(
        correction.sheet_problem(p), wide, one, verify.em_frequencies(p, 201)
    )
    s_true = _stand_in_check(p, wide, truth).s_em
    assert np.sqrt(np.mean((np.abs(s) - np.abs(s_true)) ** 2)) > 10 * misfit_two


def test_rerefine_stays_inside_its_step_bound():
    p = load_problem(TAP_PROBLEM)
    lay = _tap_layout()
    big = correction.ModelCorrection((1.6, 1.6), (-300e-6,) * 3, (0.0, 0.0), (1.0,), (0.0, 0.0))
    step = spacemap.IMPLICIT_STEP
    new = spacemap.rerefine(p, lay, big, step)
    for a, b in zip(new.gaps, lay.gaps, strict=True):
        assert abs(math.log(a / b)) <= step[0] + 1e-9
    for a, b in zip(new.lengths + new.taps, lay.lengths + lay.taps, strict=True):
        assert abs(a / b - 1) <= step[1] + 1e-9
    assert new != lay  # a correction this large must move the layout


# ------------------------------------------------------------------ the engine, end to end

needs_engine = pytest.mark.skipif(
    not engine.available() and not os.environ.get("CI"),
    reason="openEMS not installed (CI installs it and runs this test)",
)


@pytest.mark.slow
@needs_engine
def test_coarse_single_gap_end_to_end_against_the_fixture(fx, tmp_path):
    """The whole pipeline on one gap at the coarse mesh (about 25 s): the same engine and
    mesh must reproduce the fixture's coarse value, and the coarse value must lie within the
    coarse-mesh error (+10 to +40 %, see the fixture's mesh ladders) of the extrapolated one."""
    rec = fx.records[0]
    g = gap_fixture.GapGeometry(**rec["geometry"])
    coarse = rec["meshes"][0]
    got = calibration.solve_gap(
        g, coarse["edge_cell"], workdir=tmp_path, mirror=False, open_walls="first-order"
    )
    assert got.cells == coarse["cells"]
    assert got.c_series == pytest.approx(coarse["c_series"], rel=0.01)
    assert got.c_shunt == pytest.approx(coarse["c_shunt"], rel=0.05)
    assert 1.10 < got.c_series / rec["c_series"] < 1.40
    assert (tmp_path / "thru" / "engine.log").exists()
    # the half box (magnetic wall on the centre line): half the cells, the same gap
    half = calibration.solve_gap(g, coarse["edge_cell"], open_walls="first-order")
    assert half.cells < 0.55 * got.cells
    assert half.c_series == pytest.approx(got.c_series, rel=0.005)
    assert half.c_shunt == pytest.approx(got.c_shunt, rel=0.02)


# ------------------------------------------------- command and hand-over (stand-in solver)


def _stand_in(monkeypatch):
    """Replace the engine by the circuit model on eps_r 10.1 (see the space-mapping test), with
    a real mesh and FieldSolve record, so the command's files can be checked in seconds."""
    from refine.fullwave import solve

    monkeypatch.setattr(engine, "find_engine", lambda: engine.Engine("python3", "openEMS test"))

    def fake_check(
        problem, layout, mesh="pair", workdir=None, threads=0, progress=None, metal=None
    ):
        # two "meshes": eps_r 10.102 on the coarse one, 10.1 on the fine one (a small mesh
        # uncertainty, so that the verdicts are decided)
        f = verify.em_frequencies(problem)
        s_c = evaluate_layout(problem, layout, f)
        comps, solves = [], []
        for eps, res in ((10.102, geometry.MESHES["coarse"]), (10.1, geometry.MESHES["fine"])):
            # with zero-thickness strips, like the field model's
            other = replace(
                problem, substrate=replace(problem.substrate, eps_r=eps, metal_thickness=0.0)
            )
            s_f = evaluate_layout(other, layout, f)
            st_ = geometry.layout_structure(layout, problem.substrate, 5e-3)
            m = geometry.build_mesh(st_, problem.substrate, f.max(), res)
            solves.append(
                solve.FieldSolve(
                    f,
                    s_f,
                    None,
                    problem.z_ref,
                    None,
                    None,
                    m,
                    res,
                    2,
                    1.5,
                    1e-4,
                    "openEMS test",
                    ringdown_check=2e-5,
                )
            )
            comps.append(compare.compare(f, s_f, s_c, problem.mask))
        figures = verify.mesh_figures([50e-6, 25e-6], comps)
        sheet = replace(problem, substrate=replace(problem.substrate, metal_thickness=0.0))
        s_sheet = evaluate_layout(sheet, layout, f)  # as check_layout: the field model's sheets
        carried = verify.carried_figure(problem, layout, f, solves)
        return verify.FieldCheck(
            problem,
            layout,
            mesh,
            f,
            s_f,
            s_c,
            comps[-1],
            tuple(solves),
            None,
            figures,
            s_sheet,
            carried,
        )

    monkeypatch.setattr(verify, "check_layout", fake_check)


def test_fullwave_command_writes_its_files_and_extends_the_report(monkeypatch, tmp_path, capsys):
    from skrf import Network

    out = tmp_path / "out"
    assert (
        main(["design", str(TAP_PROBLEM), "--out", str(out)]) == NOMINAL_ONLY
    )  # met, not at every model corner
    _stand_in(monkeypatch)
    lay = out / "layout.json"
    code = main(["fullwave", str(lay), "--problem", str(TAP_PROBLEM)])
    assert code == 1  # the stand-in "field solver" detunes the design: mask not met
    text = capsys.readouterr().out
    assert "centre shift" in text and "engine runs" in text
    for name in ("fullwave.s2p", "fullwave.png", "fullwave.json", "fullwave.md"):
        assert (out / name).stat().st_size > 0
    net = Network(str(out / "fullwave.s2p"))
    assert net.f[0] == pytest.approx(verify.em_band(load_problem(TAP_PROBLEM))[0])
    report = (out / "report.md").read_text()
    assert report.count("## Field-solver check") == 1
    assert "| centre (3 dB) GHz |" in report
    assert "Enclosure: open, as the problem states (matched absorbing layers" in report
    assert handover.HALF_WORDS not in report  # tapped feeds: the whole box
    # the metal thickness the field model's sheets leave out, by the circuit model
    assert "10 um metal thickness is not in the field model" in report
    data = json.loads((out / "summary.json").read_text())
    shift = data["field_solver"]["thickness_margin_shift_db"]
    assert shift is not None and shift != 0.0
    # the verdict judges each mesh's field solve carried to the thickness
    carried = data["field_solver"]["margin_at_thickness_db"]
    assert len(carried["per_mesh"]) == 2 and carried["uncertainty"] is not None
    assert (
        f"worst mask margin {carried['per_mesh'][-1]:+.2f} ± {carried['uncertainty']:.2f} dB"
        in report
    )
    assert "carried to the problem's 10 um metal thickness" in report
    assert data["field_solver"]["mask"]["field_solver"]["passed"] is False
    assert data["field_solver"]["centre_shift_hz"] < 0  # higher eps_r: lower centre
    assert data["field_solver"]["ringdown_fit_check"] == 2e-5
    assert "ring-down was continued" in report and "by 2.0e-05 of their peak" in report
    assert "not reliable" not in report
    # again, with --force: the section is replaced, not repeated; without it, refused
    assert main(["fullwave", str(lay), "--problem", str(TAP_PROBLEM)]) == 2
    assert main(["fullwave", str(lay), "--problem", str(TAP_PROBLEM), "--force"]) == 1
    assert (out / "report.md").read_text().count("## Field-solver check") == 1


def test_fullwave_correct_meets_the_mask_on_the_stand_in(monkeypatch, tmp_path, capsys):
    out = tmp_path / "out"
    assert (
        main(["design", str(TAP_PROBLEM), "--out", str(out)]) == NOMINAL_ONLY
    )  # met, not at every model corner
    _stand_in(monkeypatch)
    code = main(["fullwave", str(out / "layout.json"), "--problem", str(TAP_PROBLEM), "--correct"])
    assert code == 0
    out_text = capsys.readouterr().out
    assert (
        "2 field solves" in out_text
        and "best: field solve 2: met beyond the mesh uncertainty" in out_text
    )
    corrected = export.read_layout(out / "fullwave-layout.json")
    rounds = json.loads((out / "fullwave-rounds.json").read_text())
    assert rounds["met"] and rounds["runs"] == 2 and rounds["best_round"] == 2
    assert corrected.lengths != export.read_layout(out / "layout.json").lengths


def test_design_with_fullwave_refuses_early_without_the_engine(monkeypatch, tmp_path, capsys):
    monkeypatch.setattr(engine, "_probe", lambda python: None)
    engine.find_engine.cache_clear()
    try:
        out = tmp_path / "out"
        code = main(["design", str(TAP_PROBLEM), "--out", str(out), "--fullwave", "coarse"])
        assert code == 2
        assert "python3-openems" in capsys.readouterr().err
        assert not out.exists()
    finally:
        engine.find_engine.cache_clear()


def test_design_with_fullwave_puts_the_comparison_in_the_report(monkeypatch, tmp_path, capsys):
    """The stand-in field solver detunes the design: the command exits 1 (not met), and the
    report has one verdict at its top, both models side by side, that the rest agrees with."""
    _stand_in(monkeypatch)
    out = tmp_path / "out"
    assert main(["design", str(TAP_PROBLEM), "--out", str(out), "--fullwave", "coarse"]) == 1
    assert "field solver, mesh coarse: not met beyond the mesh uncertainty" in (
        capsys.readouterr().out
    )
    report = (out / "report.md").read_text()
    assert "## Field-solver check" in report and "mask NOT met on the field solver" in report
    top = report.split("## Specification")[0]
    assert "NOT MET ON THE FIELD SOLVER" in top and "The refined design meets the mask" not in top
    assert "| circuit model | met on the nominal model only |" in top
    assert "| field solver (mesh `coarse`) | NOT met |" in top
    assert json.loads((out / "summary.json").read_text())["meets_mask_on_field_solver"] == "not met"
    assert "## Gap models against the field solver" in report
    assert (out / "fullwave.s2p").exists()


def test_the_report_says_when_the_half_box_was_solved(monkeypatch):
    _stand_in(monkeypatch)
    problem = load_problem(TAP_PROBLEM)
    text = handover.section_md(verify.check_layout(problem, _gap_layout()))
    assert handover.HALF_WORDS in text


def test_job_size_counts_cells_and_courant_steps():
    """The size announced before a field solve: cells of the mesh, and the simulated time over
    the Courant step of its smallest cells, 1/(c·sqrt(Σ 1/Δ²)) (the usual 3-D FDTD stability
    limit; common practice, no source)."""
    job = {
        "mesh": {"x": [0.0, 1e-4, 3e-4], "y": [0.0, 2e-4, 4e-4, 6e-4], "z": [0.0, 5e-5]},
        "max_time": 1e-9,
    }
    cells, steps = engine.job_size(job)
    assert cells == 2 * 3 * 1
    dt = 1.0 / (299_792_458.0 * (1 / 1e-4**2 + 1 / 2e-4**2 + 1 / 5e-5**2) ** 0.5)
    assert steps == pytest.approx(1e-9 / dt, abs=1)


def test_mesh_uncertainty_and_the_three_way_verdict():
    """Two halved meshes: the change is the finer one's error (first order). Three meshes: the
    observed order (here exactly 1 and 2) gives Richardson's error estimate; a non-monotone
    ladder gives its largest change. The verdict is decided only outside margin ± uncertainty."""
    from refine.fullwave import uncertainty as u

    assert u.mesh_uncertainty([50e-6], [1.0]) is None
    assert u.mesh_uncertainty([50e-6, 25e-6], [1.3, 1.0]) == pytest.approx(0.3)
    # X(h) = X0 + a h: changes 0.4, 0.2 -> p = 1, error of the finest 0.2
    assert u.mesh_uncertainty([4.0, 2.0, 1.0], [1.8, 1.4, 1.2]) == pytest.approx(0.2)
    # X(h) = X0 + a h²: changes 0.48, 0.12 -> p = 2, error 0.12 / 3
    assert u.mesh_uncertainty([4.0, 2.0, 1.0], [1.64, 1.16, 1.04]) == pytest.approx(0.04)
    assert u.mesh_uncertainty([4.0, 2.0, 1.0], [1.0, 1.5, 1.2]) == pytest.approx(0.5)
    # an observed order far above the cap (here about 13) is taken as 2, and the near-zero last
    # change as the one order 2 predicts from the change before (0.9 / 2**2): 0.225 / (2**2 - 1)
    assert u.mesh_uncertainty([4.0, 2.0, 1.0], [2.0, 1.1, 1.0999]) == pytest.approx(0.075)
    # below the cap nothing changes: observed order 1.5 -> |d2| / (2**1.5 - 1)
    d2 = 0.8 / 2**1.5
    assert u.mesh_uncertainty([4.0, 2.0, 1.0], [2.0, 1.2, 1.2 - d2]) == pytest.approx(
        d2 / (2**1.5 - 1)
    )
    fig = lambda m, unc: u.Figure("worst mask margin", "dB", (m,), unc)  # noqa: E731
    assert u.verdict(fig(0.5, 0.3)) is u.MeshVerdict.MET
    assert u.verdict(fig(-0.5, 0.3)) is u.MeshVerdict.NOT_MET
    assert u.verdict(fig(0.2, 0.3)) is u.MeshVerdict.UNDECIDED
    assert u.verdict(fig(-0.2, 0.3)) is u.MeshVerdict.UNDECIDED
    assert u.verdict(fig(5.0, None)) is u.MeshVerdict.UNDECIDED  # one mesh never decides
    assert "17.7 um" in u.sentence(fig(0.2, 0.3), 25e-6)


def test_one_mesh_check_is_undecided_and_exits_4(monkeypatch, tmp_path, capsys):
    """A check on one mesh cannot bound its error: the command says undecided, names the mesh
    that would decide, and exits 4 (neither met nor not met)."""
    out = tmp_path / "out"
    assert (
        main(["design", str(TAP_PROBLEM), "--out", str(out)]) == NOMINAL_ONLY
    )  # met, not at every model corner
    _stand_in(monkeypatch)
    inner = verify.check_layout

    def one_mesh(*args, **kwargs):
        c = inner(*args, **kwargs)
        one = c.solves[-1:]
        return replace(
            c,
            figures=(),
            solves=one,
            carried=verify.carried_figure(c.problem, c.layout, c.f, one),
        )

    monkeypatch.setattr(verify, "check_layout", one_mesh)
    code = main(
        ["fullwave", str(out / "layout.json"), "--problem", str(TAP_PROBLEM), "--mesh", "fine"]
    )
    assert code == 4
    text = capsys.readouterr().out
    assert "undecided at this mesh" in text and "17.7 um" in text
    data = json.loads((out / "summary.json").read_text())
    assert data["meets_mask_on_field_solver"] == "undecided"


def test_the_readmes_field_solver_block_starts_from_todays_circuit_model_optimum():
    """benchmarks/em.py writes the README block fullwave-filter from a field solve of the
    circuit-model optimum; the optimum's margin it quotes must still be what refine's circuit
    model gives (the field-solver half needs the engine and is regenerated by the script)."""
    import re

    from refine.optimise import seed as job
    from refine.optimise.minimax import Stopping
    from refine.optimise.refiner import refine_problem
    from refine.validity import ModelRangeWarning

    readme = (ROOT / "README.md").read_text()
    block = readme.split("<!-- fullwave-filter:start -->")[1].split("<!-- fullwave-filter:end")[0]
    quoted = float(re.search(r"meets the mask with ([+-][0-9.]+) dB", block).group(1))
    name = re.search(r"space mapping, ([\w-]+)\)", block).group(1)
    problem = load_problem(ROOT / "problems" / f"{name}.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        stop = Stopping(max_evaluations=300, target_margin_db=100.0)  # as benchmarks/em.py
        r = refine_problem(problem, stopping=stop, seed=job.seed(problem))
    assert r.worst_margin == pytest.approx(quoted, abs=0.005)
