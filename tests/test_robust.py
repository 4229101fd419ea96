"""The uncertainty-aware status and robust refinement (refine.optimise.robust).

"Met" means met at every corner of the circuit model's stated uncertainty; a design met on the
nominal model alone has its own status and exit code. The problems are bundled ones; the
uncertainty they are judged at is refine's own (refine.circuit.response.model_uncertainty).
"""

from __future__ import annotations

import itertools
import warnings
from dataclasses import replace

import numpy as np
import pytest
from conftest import problem_path, refined

from refine.circuit.response import uncertainty_verdict
from refine.cli import main
from refine.optimise.refiner import Status, refine_problem
from refine.optimise.robust import corner_models, robust_refine
from refine.spec.problem import load_problem
from refine.validity import ModelRangeWarning


def _refine(problem, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        return refine_problem(problem, **kw)


def _loose_tap(tmp_path):
    """The 8 % tapped alumina filter with a 10 dB return-loss mask instead of 14 dB (our own
    variant): a strip design that holds its mask at every corner of the model's uncertainty."""
    src = problem_path("ms-alumina-tap-10g-n3-8pct").read_text()
    loose = tmp_path / "loose-tap.toml"
    loose.write_text(
        src.replace("passband_return_loss_db = 14", "passband_return_loss_db = 10").replace(
            'name = "ms-alumina-tap-10g-n3-8pct"', 'name = "loose-tap"'
        )
    )
    return loose


def test_met_means_met_at_every_corner_and_nominal_only_says_so(tmp_path):
    r = refined(problem_path("microstrip-x-band-alumina-n3"))
    assert r.status is Status.MET_NOMINAL_ONLY
    assert r.worst_margin >= 0.0 > r.corner_margin  # both numbers are carried
    again, _ = uncertainty_verdict(r.problem, r.layout)  # the carried corners are the layout's
    assert again.worst_margin == pytest.approx(r.corner_margin, abs=1e-9)
    loose = refined(_loose_tap(tmp_path))
    assert loose.status is Status.MET and loose.corner_margin >= 0.0


def test_robust_refinement_raises_the_worst_corner_and_keeps_the_nominal_mask():
    p = load_problem(problem_path("ms-alumina-tap-10g-n3-8pct"))
    judged = _refine(replace(p, uncertainty="judge"))
    assert judged.robust_evaluations == 0 and judged.status is Status.MET_NOMINAL_ONLY
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        rr = robust_refine(p, judged.layout)
    assert rr.moved and rr.evaluations > 0
    assert rr.start_corner_margin == pytest.approx(judged.corner_margin, abs=1e-9)
    assert rr.corners.worst_margin > rr.start_corner_margin + 1.0
    assert rr.nominal.passed  # robustness is never bought with the nominal mask


def test_robust_refinement_keeps_nominal_margin_in_hand():
    """Robust refinement holds back robust.NOMINAL_HOLD dB of nominal margin on its optimiser
    grid. Held at zero, the x-band thin-film filter's move (worst corner -5.84 -> -2.16 dB,
    measured) came out 0.008 dB short of the nominal mask on the dense grid and was thrown
    away; with the hold it is kept, nominal margin still positive after snapping."""
    from refine.optimise import robust

    p = load_problem(problem_path("microstrip-x-band-alumina-n3"))
    judged = _refine(replace(p, uncertainty="judge"))
    assert judged.status is Status.MET_NOMINAL_ONLY
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        rr = robust_refine(p, judged.layout)
    assert rr.moved and rr.nominal.passed
    assert rr.corners.worst_margin > rr.start_corner_margin + 2.0
    assert 0.0 < rr.nominal.worst_margin <= judged.worst_margin
    assert 0.0 < robust.NOMINAL_HOLD <= 0.2


def test_corner_models_are_the_stated_uncertainty():
    r = refined(problem_path("microstrip-x-band-alumina-n3"))
    f = np.linspace(9.5e9, 10.5e9, 11)
    nominal, every, unc = corner_models(r.problem, r.layout, f, True)
    assert nominal.adjust is None
    adj = every.adjust
    assert adj is not None and len(adj.c_shunt_factor) == 1 + 32  # nominal, every sign of five
    columns = (
        adj.c_series_factors[:, 0],
        adj.c_shunt_factor,
        adj.radiation_factor,
        adj.eps_eff_factor,
        adj.z0_factor,
    )
    factors = list(zip(*columns, strict=True))
    assert factors[0] == (1.0,) * 5
    first_gap = (unc.series_of(len(r.layout.gaps))[0], *unc.spread[1:])
    assert set(factors[1:]) == {
        tuple(1 + sign * u for sign, u in zip(signs, first_gap, strict=True))
        for signs in itertools.product((-1, 1), repeat=5)
    }


def test_batched_corners_equal_the_corners_one_by_one():
    """The per-design adjustments of one batch give each corner's S and exact gradient as the
    corner's own model does (the batch only saves time)."""
    r = refined(problem_path("ms-alumina-tap-10g-n3-10pct"))
    f = np.linspace(8.5e9, 11.5e9, 31)
    nominal, every, unc = corner_models(r.problem, r.layout, f, True)
    p = nominal.vector(r.layout)
    one_by_one = [None, *unc.corners(len(r.layout.gaps))]
    batch = every.response(np.tile(p, (len(one_by_one), 1)), True)
    for k, adj in enumerate(one_by_one):
        alone = replace(nominal, adjust=adj).response(p, True)
        np.testing.assert_allclose(batch.s21[k], alone.s21, rtol=0, atol=1e-12)
        np.testing.assert_allclose(batch.s11[k], alone.s11, rtol=0, atol=1e-12)
        scale = np.abs(alone.ds21).max()
        np.testing.assert_allclose(batch.ds21[k], alone.ds21, rtol=0, atol=1e-10 * scale)
    assert np.abs(batch.s21[0] - batch.s21[-1]).max() > 1e-3  # the corners do differ


@pytest.mark.parametrize(
    ("key", "value", "allowed"),
    [
        ("uncertainty", "hope", "'robust', 'judge'"),
        ("gaps", "anywhere", "'in-range', 'beyond-range'"),
    ],
)
def test_models_keys_are_checked(tmp_path, capsys, key, value, allowed):
    src = problem_path("microstrip-x-band-alumina-n3").read_text()
    bad = tmp_path / "bad.toml"
    bad.write_text(src + f'\n[models]\n{key} = "{value}"\n')
    assert main(["design", str(bad)]) == 2
    err = capsys.readouterr().err
    assert f"models.{key}" in err and allowed in err and value in err
    ideal = tmp_path / "ideal.toml"
    ok = {"uncertainty": "judge", "gaps": "in-range"}[key]
    ideal.write_text(problem_path("ideal-s-band-n5").read_text() + f'\n[models]\n{key} = "{ok}"\n')
    assert main(["design", str(ideal)]) == 2
    assert "does not apply to medium kind 'ideal'" in capsys.readouterr().err


def test_design_exit_code_and_console_say_the_same_as_the_status(capsys, tmp_path):
    assert main(["design", str(_loose_tap(tmp_path))]) == 0
    out = capsys.readouterr().out
    assert "status: MET —" in out
    assert "worst margin over the model-uncertainty corners +" in out


def test_the_gap_models_corrections_carry_their_own_uncertainty_gap_by_gap():
    """The unequal-gap table's own uncertainty (twice it, the calibrations' rule) where the
    strips' widths differ, and the thickness increment times its uncertainty (the 2-D section's
    10 % plus the side edges' (s + t)/W) on microstrip with metal: each gap gets its own ± on
    its series capacitance, the corners and yield take it per gap, and neither term appears
    where its correction does not (equal widths, zero thickness)."""
    from refine.circuit.layout import Layout
    from refine.circuit.response import added_uncertainty, model_uncertainty, strip_medium_for
    from refine.physics import calibrated, gap_thickness
    from refine.physics.strip import sheet_gap_capacitances

    p = load_problem(problem_path("ms-alumina-tap-10g-n3-10pct"))
    h, t = p.strip_substrate.height, p.strip_substrate.metal_thickness
    widths, gaps = (1.2 * h, 0.6 * h, 0.6 * h), (0.1 * h, 0.3 * h)
    lay = Layout("tap", 0.6 * h, widths, gaps, (5e-3, 5.2e-3, 5e-3), (1e-3, 1e-3))
    medium = strip_medium_for(p)
    extra, _, words = added_uncertainty(medium, p.gap_model, widths, gaps)
    assert "unequal-gap" in words and "thickness" in words
    # gap 0 (widths 2:1): both terms, computed here from their parts
    cal = calibrated.load(p.gap_model.split(":")[1])
    a, _ = calibrated.unequal_uncertainty(cal.unequal, widths[0], widths[1], gaps[0], h)
    ds, _, _ = gap_thickness.gap_increment(widths[0], widths[1], gaps[0], h, t, 9.8)
    c_s = float(np.real(sheet_gap_capacitances(medium, p.gap_model, *widths[:2], gaps[0]).c_series))
    k = 0.1 + (gaps[0] + t) / widths[1]
    assert extra[0] == pytest.approx(2 * float(a) + k * float(ds) / (c_s + float(ds)), rel=1e-9)
    assert 0.0 < 2 * float(a) < 0.15 and 0.0 < extra[0] < 0.2
    # gap 1 (equal widths): the thickness term alone
    ds1, _, _ = gap_thickness.gap_increment(widths[1], widths[2], gaps[1], h, t, 9.8)
    assert 0.0 < extra[1] < extra[0] and extra[1] == pytest.approx(
        float(gap_thickness.increment_uncertainty(widths[1], widths[2], gaps[1], t))
        * float(ds1)
        / (
            float(
                np.real(sheet_gap_capacitances(medium, p.gap_model, *widths[1:], gaps[1]).c_series)
            )
            + float(ds1)
        ),
        rel=1e-9,
    )
    unc = model_uncertainty(p, lay)
    assert unc.series_gaps is not None and unc.series == max(unc.series_gaps)
    assert unc.series_gaps == pytest.approx(tuple(0.05 + x for x in extra), rel=1e-12)
    for corner in unc.corners(2):  # each gap at its own ±
        assert corner.c_series_factors is not None
        steps = [abs(f - 1.0) for f in corner.c_series_factors]
        assert steps == pytest.approx(list(unc.series_gaps), rel=1e-12)
    # no metal, equal widths: nothing added
    bare = replace(p, substrate=replace(p.strip_substrate, metal_thickness=0.0))
    flat = (0.6 * h,) * 3
    none, shunt, words = added_uncertainty(strip_medium_for(bare), p.gap_model, flat, gaps)
    assert not np.any(none) and shunt == 0.0 and words == ""


def test_a_design_met_on_the_nominal_model_only_says_which_terms_cost_its_margin(tmp_path):
    """Judged with one group of terms (gaps, radiation, lines) at its ± and the rest at zero,
    each worst margin lies between the full corners' worst and the nominal margin; console,
    report and summary.json carry them, and a design met at every corner does not need them."""
    import json

    from refine.circuit.response import worst_by_term

    for stem in ("microstrip-x-band-alumina-n3", "ms-alumina-tap-10g-n3-8pct"):
        r = refined(problem_path(stem))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ModelRangeWarning)
            terms = worst_by_term(r.problem, r.layout, r.uncertainty)
        assert list(terms) == ["gaps", "radiation", "lines"]
        assert all(r.corner_margin - 1e-9 <= m <= r.worst_margin + 1e-9 for m in terms.values())
    shielded = replace(r.problem, enclosure="shielded")
    from refine.circuit.response import model_uncertainty

    unc = model_uncertainty(shielded, r.layout)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        assert list(worst_by_term(shielded, r.layout, unc)) == ["gaps", "lines"]
    out = tmp_path / "out"
    assert (
        main(["design", str(problem_path("microstrip-x-band-alumina-n3")), "--out", str(out)]) == 5
    )
    summary = json.loads((out / "summary.json").read_text())["model_uncertainty"]
    assert set(summary["worst_margin_by_term_db"]) == {"gaps", "radiation", "lines"}
    assert "with one group of terms alone: gaps" in (out / "report.md").read_text()
    loose = tmp_path / "loose"
    assert main(["design", str(_loose_tap(tmp_path)), "--out", str(loose)]) == 0
    met = json.loads((loose / "summary.json").read_text())["model_uncertainty"]
    assert met["worst_margin_by_term_db"] is None
