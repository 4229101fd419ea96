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


def test_met_means_met_at_every_corner_and_nominal_only_says_so():
    r = refined(problem_path("microstrip-x-band-alumina-n3"))
    assert r.status is Status.MET_NOMINAL_ONLY
    assert r.worst_margin >= 0.0 > r.corner_margin  # both numbers are carried
    again, _ = uncertainty_verdict(r.problem, r.layout)  # the carried corners are the layout's
    assert again.worst_margin == pytest.approx(r.corner_margin, abs=1e-9)
    # the one bundled strip design met at every corner (README robust-status block)
    wide = refined(problem_path("ms-alumina-12g-n7-butter"))
    assert wide.status is Status.MET and wide.corner_margin >= 0.0


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
    assert set(factors[1:]) == {
        tuple(1 + sign * u for sign, u in zip(signs, unc.spread, strict=True))
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


def test_uncertainty_key_is_checked(tmp_path, capsys):
    src = problem_path("microstrip-x-band-alumina-n3").read_text()
    bad = tmp_path / "bad.toml"
    bad.write_text(src + '\n[models]\nuncertainty = "hope"\n')
    assert main(["design", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "models.uncertainty" in err and "'robust', 'judge'" in err and "hope" in err
    ideal = tmp_path / "ideal.toml"
    ideal.write_text(
        problem_path("ideal-s-band-n5").read_text() + '\n[models]\nuncertainty = "judge"\n'
    )
    assert main(["design", str(ideal)]) == 2
    assert "does not apply to medium kind 'ideal'" in capsys.readouterr().err


def test_design_exit_code_and_console_say_the_same_as_the_status(capsys):
    assert main(["design", str(problem_path("ms-alumina-12g-n7-butter"))]) == 0
    out = capsys.readouterr().out
    assert "status: MET —" in out
    assert "worst margin over the model-uncertainty corners +" in out
