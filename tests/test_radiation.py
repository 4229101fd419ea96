"""Radiation of open microstrip (refine.physics.radiation) and how the circuit carries it."""

from __future__ import annotations

import math
import re
import warnings

import numpy as np
import pytest
from conftest import PROBLEMS, fd_gradient_check, microstrip_problem

from refine import validity
from refine.circuit.builder import build
from refine.circuit.cascade import PiNetwork, s11_s21
from refine.circuit.response import loss_budget, lossless_verdict
from refine.optimise import seed as job
from refine.physics import radiation
from refine.physics.microstrip import Microstrip
from refine.physics.substrate import Substrate
from refine.spec.problem import ProblemError, load_problem, parse_problem

ALUMINA = Substrate(9.8, 0.635e-3)


def test_f_factor_limits():
    # F(1) = 2 (air) and F → 8/(3ε) for large ε: the series of Belohoubek & Denlinger's F
    # (common practice, no source: the limits follow from the formula)
    assert float(radiation.f_factor(1.0)) == pytest.approx(2.0)
    assert float(radiation.f_factor(1e4)) == pytest.approx(8 / 3e4, rel=1e-3)
    e = np.linspace(1.5, 20, 40)
    assert np.all(np.diff(radiation.f_factor(e)) < 0)


def test_alumina_resonator_radiation_q_is_about_190():
    # Belohoubek & Denlinger 1975 [from memory]: on 0.635 mm alumina at 10 GHz a 50 Ω
    # half-wave resonator radiates with Q about 190 (the figure quoted when the issue was filed).
    med = Microstrip(ALUMINA)
    w = med.width_for_z0(50.0)
    z0, e_eff = med.dispersive(w, np.array([10e9]))
    q = float(radiation.radiation_q(z0[0], e_eff[0], ALUMINA.height, 10e9))
    assert 170 < q < 210


def test_end_conductance_gives_back_the_radiation_q():
    # G = π Y0/(4 Q_r): two ends on a half-wave resonator of slope b = π Y0/2, Q = b/(2G)
    z0, e_eff, h, f = 48.0, 6.7, 0.635e-3, 12e9
    g = radiation.end_conductance(z0, e_eff, h, f)
    q = radiation.radiation_q(z0, e_eff, h, f)
    assert float((math.pi / (2 * z0)) / (2 * g)) == pytest.approx(float(q))


def test_thick_substrates_warn():
    with pytest.warns(validity.ModelRangeWarning, match="h/lambda0"):
        radiation.end_conductance(50.0, 3.0, 1.6e-3, 20e9)


def _isolated_resonator_q(medium: Microstrip) -> tuple[float, float]:
    """(resonance, unloaded Q) of one half-wave resonator between two very weak gaps, from the
    circuit's 3 dB width of transmission (loaded Q ≈ unloaded Q at such weak coupling)."""
    w, length, gap = 0.6e-3, 5.6e-3, 1.5e-3
    f = np.linspace(9.0e9, 11.5e9, 20001)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        b = build("gap", medium, "garg-bahl", w, [w], [gap, gap], [length], None, f)
    s21 = np.abs(s11_s21(b.elements, f, 50.0).s21) ** 2
    k = int(np.argmax(s21))
    half = s21 > s21[k] / 2
    lo, hi = f[np.flatnonzero(half)[0]], f[np.flatnonzero(half)[-1]]
    return f[k], f[k] / (hi - lo)


def test_the_circuit_radiates_like_the_formula():
    # with conductor and dielectric loss absent, a weakly coupled resonator's Q is its
    # radiation Q: the gap conductances add up to Belohoubek & Denlinger's Q_r
    sub = Substrate(9.8, 0.635e-3)  # lossless metal and dielectric
    f0, q = _isolated_resonator_q(Microstrip(sub))
    z0, e_eff = Microstrip(sub).dispersive(0.6e-3, np.array([f0]))
    want = float(radiation.radiation_q(z0[0], e_eff[0], sub.height, f0))
    assert q == pytest.approx(want, rel=0.05)
    _, shielded = _isolated_resonator_q(Microstrip(sub, enclosure="shielded"))
    assert shielded > 20 * q


def test_gap_carries_radiation_as_complex_capacitance():
    f = np.array([10e9])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        open_ = build(
            "gap", Microstrip(ALUMINA), "garg-bahl", 0.6e-3, [0.6e-3], [0.1e-3] * 2, [5e-3], None, f
        )
        shut = build(
            "gap",
            Microstrip(ALUMINA, enclosure="shielded"),
            "garg-bahl",
            0.6e-3,
            [0.6e-3],
            [0.1e-3] * 2,
            [5e-3],
            None,
            f,
        )
    a, b = open_.elements[0], shut.elements[0]
    assert isinstance(a, PiNetwork) and isinstance(b, PiNetwork)
    assert np.all(np.imag(a.c_series) < 0)
    assert np.all(np.real(a.c_series) == pytest.approx(b.c_series))


def test_problem_enclosure_key():
    base = microstrip_problem("enclosure")
    assert parse_problem(base).enclosure == "open"
    base["medium"]["enclosure"] = "shielded"
    assert parse_problem(base).enclosure == "shielded"
    base["medium"]["enclosure"] = "lidded"
    with pytest.raises(
        ProblemError,
        match=re.escape("medium.enclosure = 'lidded': must be one of 'open', 'shielded'"),
    ):
        parse_problem(base)
    base["medium"] = {"kind": "stripline", "eps_r": 2.2, "height": "1.6 mm", "enclosure": "open"}
    with pytest.raises(ProblemError, match="applies to microstrip only"):
        parse_problem(base)


def test_loss_budget_and_the_lossless_check_on_the_readme_problem():
    path = next(p for p in PROBLEMS if p.stem == "microstrip-x-band-alumina-n3")
    p = load_problem(path)
    sd = job.seed(p)
    lay = sd.realisation.layout
    b = loss_budget(p, lay, sd.design.g[1:-1])
    assert len(b.q_unloaded) == p.order or len(b.q_unloaded) == sd.design.order
    for qc, qd, qr, qu in zip(
        b.q_conductor, b.q_dielectric, b.q_radiation, b.q_unloaded, strict=True
    ):
        assert qu < min(qc, qd, qr)
        assert 100 < qr < 300  # alumina at 10 GHz, as above
    assert b.midband_db["radiation"] > b.midband_db["dielectric"]
    lossless = lossless_verdict(p, lay)
    assert set(lossless.worst) == {k for k in lossless.worst}


def test_model_uncertainty_corners_and_the_verdict_they_give():
    from dataclasses import replace

    from conftest import refined

    from refine.circuit.response import MICROSTRIP_LINE, model_uncertainty, uncertainty_verdict

    path = next(p for p in PROBLEMS if p.stem == "microstrip-x-band-alumina-n3")
    r = refined(path)
    p = r.problem
    unc = model_uncertainty(p, r.layout)
    # the calibration's floor (its largest difference from the field solver's gap fixture),
    # and on top, gap by gap, the unequal-gap table's and the metal thickness increment's own
    assert unc.series_gaps is not None and min(unc.series_gaps) > 0.05 and unc.shunt > 0.05
    assert unc.series == max(unc.series_gaps) < 0.15
    assert unc.radiation == pytest.approx(0.5) and "static-er9.8" in unc.source
    # the lines' ε_eff and Z0: the field solver's converged line (tests/test_fullwave_lines.py)
    assert (unc.eps_eff, unc.z0) == MICROSTRIP_LINE
    assert len(unc.corners(len(r.layout.gaps))) == 32  # every sign of five terms
    worst, _ = uncertainty_verdict(p, r.layout)
    assert worst.worst_margin < r.worst_margin  # the corners can only be worse than nominal
    assert worst.worst_margin < 0.0  # this 3 % design is met on the nominal model only
    shielded = model_uncertainty(replace(p, enclosure="shielded"), r.layout)
    assert shielded.radiation == 0.0 and len(shielded.corners(4)) == 16
    gb = model_uncertainty(replace(p, gap_model="garg-bahl"), r.layout)
    # Garg-Bahl's largest series error against the fixture (README gap-calibration table)
    assert 0.15 < gb.series < 0.25 and gb.source.startswith("garg-bahl")


def test_report_headline_says_met_on_the_nominal_model_only(tmp_path):
    import json

    from conftest import refined

    import refine

    path = next(p for p in PROBLEMS if p.stem == "microstrip-x-band-alumina-n3")
    r = refined(path)
    sd = job.seed(r.problem)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        refine.write_outputs(r, sd, tmp_path / "o")
    text = (tmp_path / "o/report.md").read_text()
    assert "MET ON THE NOMINAL CIRCUIT MODEL ONLY" in text
    s = json.loads((tmp_path / "o/summary.json").read_text())
    assert s["status"] == "met on the nominal model only" and not s["meets_mask"]
    assert s["meets_mask_on_nominal_model"]
    assert s["model_uncertainty"]["met_across_uncertainty"] is False
    assert s["model_uncertainty"]["worst_margin_db"] < 0 < s["worst_margin_db"]


@pytest.mark.parametrize("external", ["gap", "tap"])
def test_gradients_with_shunt_radiation_and_line_factors(external):
    # the uncertainty corners' factors enter the refiner's exact gradient too
    from refine.circuit.builder import Adjustments
    from refine.circuit.model import StripFilterModel

    med = Microstrip(Substrate(9.8, 0.635e-3, 4e-6, 1e-4, 4.1e7))
    f = np.linspace(9e9, 11e9, 21)
    n = 3
    adj = Adjustments(
        c_shunt_factor=1.2, radiation_factor=1.5, eps_eff_factor=1.005, z0_factor=0.9925
    )
    m = StripFilterModel(med, "garg-bahl", 50.0, external, n, 0.6e-3, f, True, None, adj)
    ng = n + 1 if external == "gap" else n - 1
    p = [*np.linspace(60e-6, 200e-6, ng), 5.1e-3, 5.3e-3, 5.1e-3]
    if external == "tap":
        p += [1.0e-3, 1.2e-3]
    p = np.array([*p, 0.7e-3, 0.8e-3, 0.7e-3])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        fd_gradient_check(m, p)
