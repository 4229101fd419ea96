"""Yield under fab tolerances: batched Monte Carlo equals the per-sample evaluation, is
reproducible, and its sensitivities agree with finite differences; the yield verb's files."""

import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from refine.circuit.layout import Layout
from refine.cli import main
from refine.optimise.space import fab_violations
from refine.spec.problem import load_problem
from refine.tolerance import centring
from refine.tolerance import montecarlo as tolerance
from refine.validity import ModelRangeWarning

ROOT = Path(__file__).parent.parent
# The README problem under a lid (no radiation) on the Garg-Bahl gap model: the layout below was
# refined for it so, and these tests are about the yield machinery, which needs a layout that
# meets its mask with a small margin.
# LAY's end gaps sit at s/W 0.02, beyond Garg–Bahl's fitted range (0.1-1): centring may move
# them only where the problem lets the gaps leave the model's range
ALUMINA = replace(
    load_problem(ROOT / "problems/microstrip-x-band-alumina-n3.toml"),
    enclosure="shielded",
    gap_model="garg-bahl",
    gaps="beyond-range",
)
LAY = Layout(
    "gap",
    623e-6,
    (1869e-6, 1795.5e-6, 1869e-6),
    (37e-6, 500e-6, 500e-6, 37e-6),
    (4.8735e-3, 4.9745e-3, 4.8735e-3),
)


def _quiet():
    w = warnings.catch_warnings()
    w.__enter__()
    warnings.simplefilter("ignore", ModelRangeWarning)
    return w


def test_batched_margins_equal_one_sample_at_a_time():
    tol = tolerance.Tolerances.from_problem(ALUMINA, correlated=True)
    s = tolerance.sample(LAY, tol, 40, seed=3)
    f = tolerance.yield_grid(ALUMINA, 41)
    batch = tolerance.worst_margins(ALUMINA, s, f)
    for k in range(0, 40, 7):
        one = tolerance.Samples(s.feed[[k]], s.widths[[k]], s.gaps[[k]], s.lengths[[k]], None)
        assert tolerance.worst_margins(ALUMINA, one, f)[0] == pytest.approx(batch[k], abs=1e-10)


def test_yield_is_reproducible_and_sensible():
    a = tolerance.estimate_yield(ALUMINA, LAY, 600, seed=5, model_error=False)
    b = tolerance.estimate_yield(ALUMINA, LAY, 600, seed=5, model_error=False)
    c = tolerance.estimate_yield(ALUMINA, LAY, 600, seed=6, model_error=False)
    np.testing.assert_array_equal(a.margins, b.margins)
    assert not np.array_equal(a.margins, c.margins)
    assert a.nominal_margin > 0 and 0 < a.yield_fraction < 1
    lo, hi = a.interval
    assert lo < a.yield_fraction < hi
    # a correlated over-etch on top of the independent errors cannot help here
    assert (
        tolerance.estimate_yield(
            ALUMINA, LAY, 600, seed=5, correlated=True, model_error=False
        ).yield_fraction
        <= a.yield_fraction + 0.05
    )


def test_tighter_shop_gives_higher_yield():
    from dataclasses import replace

    tight = replace(ALUMINA, fab=replace(ALUMINA.fab, gap_tolerance=0.5e-6, width_tolerance=0.5e-6))
    assert (
        tolerance.estimate_yield(tight, LAY, 400, 1, model_error=False).yield_fraction
        > tolerance.estimate_yield(ALUMINA, LAY, 400, 1, model_error=False).yield_fraction
    )


def test_correlated_etch_moves_every_edge_together():
    tol = tolerance.Tolerances(0.0, 2e-6, correlated=True)
    s = tolerance.sample(LAY, tol, 2000, seed=0)
    # with no independent gap error, every gap moves by the same +2δ and every length by -2δ
    dg = s.gaps - np.array(LAY.gaps)
    dl = s.lengths - np.array(LAY.lengths)
    np.testing.assert_allclose(dg, np.broadcast_to(dg[:, [0]], dg.shape), atol=1e-18)
    np.testing.assert_allclose(dl, -dg[:, :3], atol=1e-18)
    assert np.std(dg[:, 0]) == pytest.approx(2e-6, rel=0.1)  # 2δ with σ_δ = σ_width/2


def test_wilson_interval():
    # Wilson 1927 score interval, 81 of 100 at 95 % (z = 1.96): centre (0.81 + z²/200)/(1 + z²/100)
    # = 0.79853, half-width 0.07632, so 0.7222..0.8749 (worked by hand from the formula).
    lo, hi = tolerance.wilson_interval(81, 100)
    assert lo == pytest.approx(0.7222, abs=1e-4) and hi == pytest.approx(0.8749, abs=1e-4)
    assert tolerance.wilson_interval(0, 50)[0] == 0.0
    assert tolerance.wilson_interval(50, 50)[1] == pytest.approx(1.0, abs=1e-12)


def test_sensitivity_matches_finite_difference_of_the_worst_margin():
    tol = tolerance.Tolerances.from_problem(ALUMINA)
    f = tolerance.yield_grid(ALUMINA)
    w = _quiet()
    try:
        sens = {s.name: s for s in tolerance.sensitivities(ALUMINA, LAY, tol, f)}
        h = 1e-9
        gaps_up = list(LAY.gaps)
        gaps_up[0] += h
        gaps_dn = list(LAY.gaps)
        gaps_dn[0] -= h
        from dataclasses import replace

        up = tolerance.worst_margins(
            ALUMINA, tolerance.nominal_samples(replace(LAY, gaps=tuple(gaps_up))), f
        )[0]
        dn = tolerance.worst_margins(
            ALUMINA, tolerance.nominal_samples(replace(LAY, gaps=tuple(gaps_dn))), f
        )[0]
    finally:
        w.__exit__(None, None, None)
    assert sens["gap 0"].db_per_m == pytest.approx((up - dn) / (2 * h), rel=1e-4)
    assert max(sens.values(), key=lambda s: s.db_per_sigma).name == "gap 0"  # the narrowest gap


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--samples", "0"], "--samples = 0 is outside the allowed range 1..1000000"),
        (["--samples", "-5"], "--samples = -5 is outside the allowed range 1..1000000"),
    ],
)
def test_yield_verb_bad_input(tmp_path, capsys, args, message):
    lay = tmp_path / "layout.json"
    from refine.outputs.export import layout_dict, write_json

    write_json(lay, layout_dict(LAY))
    assert (
        main(
            [
                "yield",
                str(lay),
                "--problem",
                str(ROOT / "problems/microstrip-x-band-alumina-n3.toml"),
                *args,
            ]
        )
        == 2
    )
    assert message in capsys.readouterr().err
    assert not (tmp_path / "yield.csv").exists()


def test_yield_verb_writes_csv_and_histogram(tmp_path, capsys):
    from refine.outputs.export import layout_dict, write_json

    lay = tmp_path / "layout.json"
    write_json(lay, layout_dict(LAY))
    prob = str(ROOT / "problems/microstrip-x-band-alumina-n3.toml")
    assert main(["yield", str(lay), "--problem", prob, "--samples", "300", "--seed", "2"]) == 0
    out = capsys.readouterr().out
    assert "yield " in out and "95 % interval" in out and "dB per 1-sigma" in out
    import pandas as pd

    frame = pd.read_csv(tmp_path / "yield.csv")
    assert len(frame) == 300 and {"worst_margin_db", "gap_0_m", "width_1_m", "length_3_m"} <= set(
        frame.columns
    )
    assert (tmp_path / "yield.png").read_bytes()[:4] == b"\x89PNG"
    assert main(["yield", str(lay), "--problem", prob, "--samples", "300"]) == 2  # no overwrite
    assert "use --force" in capsys.readouterr().err


def test_ideal_medium_has_no_yield():
    with pytest.raises(ValueError, match="yield needs a strip medium"):
        tolerance.estimate_yield(load_problem(ROOT / "problems/ideal-s-band-n5.toml"), LAY, 10)


@pytest.mark.slow
def test_yield_centring_raises_yield_on_independent_samples():
    w = _quiet()
    try:
        c = centring.centre_for_yield(
            ALUMINA, LAY, design_samples=12, check_samples=600, seed=4, max_evaluations=80
        )
        fresh_before = tolerance.estimate_yield(
            ALUMINA, LAY, 1500, seed=77, model_error=False
        ).yield_fraction
        fresh_after = tolerance.estimate_yield(
            ALUMINA, c.layout, 1500, seed=77, model_error=False
        ).yield_fraction
    finally:
        w.__exit__(None, None, None)
    assert c.layout is not LAY and c.yield_after.yield_fraction > c.yield_before.yield_fraction
    assert fresh_after > fresh_before + 0.05  # judged on samples neither step has seen
    assert c.yield_after.nominal_margin >= 0  # still meets the mask at nominal

    assert not fab_violations(ALUMINA.fab, c.layout)
    steps = np.array([*c.layout.gaps, *c.layout.widths, *c.layout.lengths]) / ALUMINA.fab.grid
    np.testing.assert_allclose(steps, np.round(steps), atol=1e-6)  # on the shop's grid


@pytest.mark.slow
def test_design_with_centre_yield(tmp_path, capsys):
    out = tmp_path / "c"
    assert (
        main(
            [
                "design",
                str(ROOT / "problems/microstrip-x-band-alumina-n3.toml"),
                "--centre-yield",
                "--out",
                str(out),
            ]
        )
        == 5  # met on the nominal model only, before and after centring
    )
    text = capsys.readouterr().out
    assert "centring for yield" in text and "% ->" in text
    assert "yield-centred" in (out / "report.md").read_text()


def _with_substrate_tolerances(eps_tol=0.05, h_tol=10e-6):
    return replace(
        ALUMINA,
        substrate=replace(ALUMINA.substrate, eps_r_tolerance=eps_tol, height_tolerance=h_tol),
    )


@pytest.mark.parametrize("enclosure", ["shielded", "open"])
def test_substrate_tolerances_batched_equal_one_board_at_a_time(enclosure):
    # open: each board's radiation follows its own height (the batch keeps the enclosure)
    p = replace(_with_substrate_tolerances(), enclosure=enclosure)
    tol = tolerance.Tolerances.from_problem(p)
    assert tol.eps_r_sigma == 0.05 and tol.height_sigma == 10e-6
    s = tolerance.sample(LAY, tol, 30, seed=8, substrate=p.substrate)
    assert np.std(s.eps_r) > 0 and np.std(s.height) > 0
    f = tolerance.yield_grid(p, 41)
    batch = tolerance.worst_margins(p, s, f)
    for k in (0, 13, 29):  # one board: the nominal (scalar) substrate set to that board's values
        one = replace(
            p, substrate=replace(p.substrate, eps_r=float(s.eps_r[k]), height=float(s.height[k]))
        )
        single = tolerance.Samples(s.feed[[k]], s.widths[[k]], s.gaps[[k]], s.lengths[[k]], None)
        assert tolerance.worst_margins(one, single, f)[0] == pytest.approx(batch[k], abs=1e-9)


def test_substrate_tolerances_lower_yield_and_show_in_sensitivities():
    p = _with_substrate_tolerances(eps_tol=0.08)
    with_sub = tolerance.estimate_yield(p, LAY, 500, seed=3, model_error=False)
    without = tolerance.estimate_yield(ALUMINA, LAY, 500, seed=3, model_error=False)
    assert with_sub.yield_fraction < without.yield_fraction
    names = {s.name for s in with_sub.sensitivities}
    assert {"substrate eps_r", "substrate height"} <= names
    eps = next(s for s in with_sub.sensitivities if s.name == "substrate eps_r")
    assert eps.db_per_sigma > 0.1  # a permittivity error detunes a 3 % filter noticeably


def test_substrate_tolerance_keys_in_problem_files(tmp_path):
    text = (ROOT / "problems/microstrip-x-band-alumina-n3.toml").read_text()
    text = text.replace(
        'roughness = "0.05 um"',
        'roughness = "0.05 um"\neps_r_tolerance = 0.05\nheight_tolerance = "10 um"',
    )
    f = tmp_path / "p.toml"
    f.write_text(text)
    p = load_problem(f)
    assert p.substrate.eps_r_tolerance == 0.05 and p.substrate.height_tolerance == pytest.approx(
        10e-6
    )
    f.write_text(text.replace("eps_r_tolerance = 0.05", "eps_r_tolerance = 5"))
    from refine.spec.problem import ProblemError

    with pytest.raises(
        ProblemError, match=r"medium.eps_r_tolerance = 5: outside the allowed range \[0, 1.96\]"
    ):
        load_problem(f)


def test_a_gaps_etch_error_shortens_the_resonators_either_side():
    # gap k lies between resonators k-1 and k (gap coupling); each edge takes half its error
    tol = tolerance.Tolerances(3e-6, 0.0)
    s = tolerance.sample(LAY, tol, 500, seed=3)
    dg = s.gaps - np.array(LAY.gaps)
    dl = s.lengths - np.array(LAY.lengths)
    np.testing.assert_allclose(dl, -0.5 * (dg[:, :-1] + dg[:, 1:]), atol=1e-15)
    assert np.std(dg) == pytest.approx(3e-6, rel=0.05)


def test_a_tapped_filters_outer_open_ends_recede_on_their_own_and_carry_the_taps():
    tapped = Layout(
        "tap", 0.6e-3, (0.6e-3,) * 3, (0.3e-3, 0.3e-3), (5e-3, 5.2e-3, 5e-3), (1e-3, 1e-3)
    )
    s = tolerance.sample(tapped, tolerance.Tolerances(0.0, 4e-6), 4000, seed=1)
    d_first = s.lengths[:, 0] - 5e-3
    np.testing.assert_allclose(s.taps[:, 0] - 1e-3, d_first, atol=1e-15)  # tap moves with its end
    np.testing.assert_allclose(s.lengths[:, 1], 5.2e-3, atol=1e-15)  # no gap error, no outer end
    assert np.std(d_first) == pytest.approx(2e-6, rel=0.1)  # σ_width/2 per edge


def test_yield_samples_the_models_uncertainty_once_per_chunk_of_boards():
    from refine.circuit.response import model_uncertainty

    unc = model_uncertainty(ALUMINA, LAY)
    tol = tolerance.Tolerances.from_problem(ALUMINA)
    s = tolerance.sample(LAY, tol, 450, seed=2, model=unc)
    c = tolerance.CHUNK
    for a in range(0, 450, c):  # constant within a chunk (a systematic error), new per chunk
        assert np.all(s.model[a : a + c] == s.model[a])
    bounds = np.array(unc.spread)  # gap series, shunt, radiation, line ε_eff, line Z0
    assert s.model.shape == (450, 5)
    # each gap's series error is the worst gap's scaled by its own ± over the largest
    assert s.series_weights is not None and unc.series_gaps is not None
    assert s.series_weights == pytest.approx(np.array(unc.series_gaps) / unc.series, rel=1e-12)
    assert np.all(np.abs(s.model - 1.0) <= bounds + 1e-15)
    assert len({tuple(row) for row in s.model}) == -(-450 // c)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        with_model = tolerance.estimate_yield(ALUMINA, LAY, 400, seed=4)
        etch_only = tolerance.estimate_yield(ALUMINA, LAY, 400, seed=4, model_error=False)
    assert with_model.model == unc and etch_only.model is None
    assert with_model.nominal_margin == etch_only.nominal_margin  # the nominal model either way
    assert not np.array_equal(with_model.margins, etch_only.margins)
