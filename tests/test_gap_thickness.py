"""The metal thickness at gaps and open ends: the 2-D lengthwise-section solve
(refine.fullwave.thick_gap), the bundled table it wrote (refine/physics/gap_thickness.json) and
how the circuit model adds it (refine.physics.gap_thickness via refine.physics.strip)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from refine.fullwave import thick_gap as tg
from refine.physics import calibrated, gap_thickness, strip
from refine.physics.constants import EPS0
from refine.physics.microstrip import Microstrip
from refine.physics.substrate import Substrate


@pytest.mark.parametrize("s_h", [0.025, 0.065, 0.16])
def test_the_section_reproduces_the_three_dimensional_series_capacitance(s_h):
    """The premise: across a gap much narrower than the strips, the series capacitance per unit
    width is the lengthwise section's. The 2-D finite-volume solve of sheets and the bundled
    3-D boundary-element calibration (a different method, on different discretisations)
    agree within 4 % at W/h 1.5 and 3.2 (measured: 2D above 3D by 1.2-3.5 %)."""
    cs2, _ = tg.sheet_gap(9.8, s_h)
    cal = calibrated.load("static-er9.8")
    for w_h in (1.5, 3.2):
        c3 = float(calibrated.gap(cal, w_h, w_h, s_h, 1.0).c_series) / EPS0 / w_h
        assert c3 == pytest.approx(cs2, rel=0.04), w_h


def test_narrow_gaps_tend_to_parallel_plates():
    """Where the gap is narrow against the metal, the increment is the faces' parallel-plate
    capacitance t/s (per unit width, over ε0; common practice, no source) plus a little
    fringing, and never less than it: measured 1.06x at s/h 0.02, t/h 0.0157."""
    t_h = 0.0157
    for s_h, hi in ((0.01, 1.08), (0.02, 1.12), (0.2, 1.6)):
        r = tg.gap_increment(9.8, s_h, t_h)
        assert 1.0 < r.series / (t_h / s_h) < hi, s_h
        assert r.series_uncertainty < 0.06 * r.series  # measured: up to 5.3 %


def test_the_faces_field_is_in_the_air():
    """The faces stand above the slab: the series increment changes by under 4 % from air to
    ε_r 9.8 (measured: 2.3 % at s/h 0.02, 9.6 % at s/h 0.2 is not asked), so the table's
    linear interpolation in log ε_r is gentle."""
    a = tg.gap_increment(1.0, 0.02, 0.0157).series
    b = tg.gap_increment(9.8, 0.02, 0.0157).series
    assert abs(b / a - 1.0) < 0.04


def test_the_shunt_and_open_end_increments_are_small_and_positive():
    """The face adds a little capacitance to ground (measured c_p 0 to 0.013 over s/h
    0.02-1, c_e 0.029 at t/h 0.0157 on ε_r 9.8): a fraction of a per cent of an open end's."""
    for s_h in (0.02, 0.2, 1.0):
        r = tg.gap_increment(9.8, s_h, 0.0157)
        assert -1e-3 < r.shunt < 0.02
    end, unc = tg.open_end_increment(9.8, 0.0157)
    assert 0.01 < end < 0.05 and unc < 0.2 * end


def test_the_bundled_table_matches_fresh_solves_between_its_nodes():
    """The table read back: at a point between nodes in every axis, the interpolated
    increment agrees with a fresh solve there within 3 % (series) and 0.003 (shunt, per
    unit width over ε0)."""
    eps_r, s_h, t_h, h = 6.15, 0.09, 0.013, 0.5e-3
    fresh = tg.gap_increment(eps_r, s_h, t_h)
    w = 1e-3
    ds, di, do = gap_thickness.gap_increment(w, w, s_h * h, h, t_h * h, eps_r)
    assert float(ds) / (EPS0 * w) == pytest.approx(fresh.series, rel=0.03)
    assert float(di) / (EPS0 * w) == pytest.approx(fresh.shunt, abs=3e-3)
    assert float(di) == float(do)
    tab = gap_thickness.table()
    assert tab.provenance["command"].startswith("python -m refine.fullwave.thick_gap")


def test_the_increment_takes_complex_steps():
    """The refiner differentiates gap widths by complex steps: the imaginary part of a
    complex-step evaluation is the derivative (to the finite difference's accuracy)."""
    h, t, w, s = 0.635e-3, 10e-6, 0.6e-3, 40e-6
    step = 1e-12
    ds_c, _, _ = gap_thickness.gap_increment(w, w, s + 1j * step, h, t, 9.8)
    d = 1e-9
    hi, _, _ = gap_thickness.gap_increment(w, w, s + d, h, t, 9.8)
    lo, _, _ = gap_thickness.gap_increment(w, w, s - d, h, t, 9.8)
    assert float(np.imag(ds_c)) / step == pytest.approx(float(hi - lo) / (2 * d), rel=1e-4)


def test_the_circuit_model_adds_it_for_the_problems_metal_only():
    """A gap on 10 um of metal over 0.635 mm alumina: the series capacitance rises by the
    table's increment over the narrow strip's width; with zero thickness nothing changes;
    stripline is left at zero thickness (documented)."""
    sub = Substrate(9.8, 0.635e-3, metal_thickness=10e-6)
    thick = Microstrip(sub, loss=False)
    sheet = Microstrip(replace(sub, metal_thickness=0.0), loss=False)
    model = "calibrated:static-er9.8"
    w_in, w_out, s = 0.6e-3, 0.3e-3, 0.12e-3
    a = strip.gap_capacitances(thick, model, w_in, w_out, s)
    b = strip.gap_capacitances(sheet, model, w_in, w_out, s)
    c = strip.sheet_gap_capacitances(thick, model, w_in, w_out, s)
    assert float(b.c_series) == float(c.c_series)
    ds, di, do = gap_thickness.gap_increment(w_in, w_out, s, sub.height, 10e-6, 9.8)
    assert float(a.c_series - b.c_series) == pytest.approx(float(ds), rel=1e-12)
    assert float(do) == pytest.approx(float(di) / 2)  # each side's own width
    # a tapped alumina filter's gap: about 1 % more series capacitance (measured 1.14 %)
    assert 0.008 < float(a.c_series / b.c_series) - 1.0 < 0.015
    # the open end grows by the face's capacitance over the line's, well under 1 %
    dl_t = strip.open_end_extension(thick, 0.6e-3, model)
    dl_0 = strip.open_end_extension(sheet, 0.6e-3, model)
    assert 0 < dl_t / dl_0 - 1.0 < 0.01


def test_outside_the_table_it_warns_and_holds():
    with pytest.warns(UserWarning, match="metal thickness at gaps"):
        gap_thickness.gap_increment(1e-3, 1e-3, 10e-6, 0.2e-3, 0.03e-3, 9.8)  # t/h 0.15


def test_bad_input_names_the_value():
    with pytest.raises(ValueError, match="s/h"):
        tg.gap_increment(9.8, 5.0, 0.01)
    with pytest.raises(ValueError, match="t/h"):
        tg.gap_increment(9.8, 0.1, 0.0)


def test_the_facing_width_is_the_narrower_one_rounded_where_widths_cross():
    """The refiner needs a smooth model: the series increment's width is the narrower strip's
    or up to the rounding (5 % of the mean) above it and exactly it at equal widths; its slope is
    continuous where the widths cross (the plain min's jumps from 0 to 1)."""
    w = np.array(1e-3)
    assert float(gap_thickness.facing_width(w, w)) == pytest.approx(1e-3, rel=1e-15)
    for ratio in (1.02, 1.2, 3.0):
        f = float(gap_thickness.facing_width(w, ratio * w))
        assert 1e-3 <= f <= 1e-3 + 0.05 * 1e-3 * (1 + ratio) / 2
    d = 1e-9
    slope = [
        float(gap_thickness.facing_width(w, w + x + d) - gap_thickness.facing_width(w, w + x - d))
        / (2 * d)
        for x in (-1e-7, 0.0, 1e-7)
    ]
    assert abs(slope[0] - slope[2]) < 0.01 and slope[1] == pytest.approx(0.5, abs=1e-6)
