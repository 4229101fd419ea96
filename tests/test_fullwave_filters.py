"""Filter-level field-solver validation, from the fixture benchmarks/em_filters.py writes.

Refined bundled filters (refine's defaults: calibrated circuit model, robust refinement) solved
on meshes with every cell refined by the field check's ratio from one to the next, thirds rule
at metal edges. A filter's records fall into one mesh sequence per box (the first box: whole,
first-order walls; the field check's defaults since: half box, matched layers), all of one
layout. The campaign resumes mesh by mesh; these tests read whatever meshes have run (the
comparisons only sequences of at least two meshes, so each figure has a mesh uncertainty) and
pin what the data show.

- End-coupled filters with tapped feeds: where the resonators share one width, the field
  solver's worst in-band return loss is below the circuit model's with the problem's metal by
  more than its mesh uncertainty, and nearer the circuit model's with zero-thickness strips,
  like the field model's own: most of that gap is the metal thickness the field model lacks.
  Where they differ in width, today's circuit model (the calibration's unequal-gap correction)
  comes within 1 dB plus the mesh uncertainty of the field solver's match.
- The parallel-coupled filter: the circuit model's centre and worst in-band return loss lie
  within the field solver's mesh uncertainty, its 3 dB bandwidth within 1 %, while the field solver's
  midband loss exceeds the circuit model's by more than it (radiation from the open ends and the
  feed width steps is not in the coupled-section model).
"""

from __future__ import annotations

import itertools
import json
import math

import pytest
from conftest import DATA

from refine.fullwave import geometry
from refine.fullwave.uncertainty import mesh_uncertainty

DOC = json.loads((DATA / "fullwave-filters.json").read_text())
FILTERS = sorted({r["filter"] for r in DOC["runs"]})
OLD_BOX = {"open_walls": "first-order", "half_box": False}  # records before those keys


def _box(r: dict) -> tuple[str, bool]:
    return r.get("open_walls", OLD_BOX["open_walls"]), r.get("half_box", OLD_BOX["half_box"])


SEQUENCES = sorted({(r["filter"], *_box(r)) for r in DOC["runs"]})


def _meshes(seq: tuple[str, str, bool]) -> list[dict]:
    runs = (r for r in DOC["runs"] if (r["filter"], *_box(r)) == seq)
    return sorted(runs, key=lambda r: r["mesh_index"])


COMPARED = [q for q in SEQUENCES if len(_meshes(q)) >= 2]


def test_the_campaign_covers_two_filters_on_at_least_two_meshes():
    assert len({q[0] for q in COMPARED}) >= 2


@pytest.mark.parametrize("name", FILTERS)
def test_one_layout_per_filter_in_every_box(name):
    layouts = [r["layout"] for r in DOC["runs"] if r["filter"] == name]
    assert all(lay == layouts[0] for lay in layouts)


@pytest.mark.parametrize("seq", SEQUENCES)
def test_meshes_refine_every_cell_and_carry_provenance(seq):
    runs = _meshes(seq)
    assert [r["mesh_index"] for r in runs] == list(range(len(runs)))
    for a, b in itertools.pairwise(runs):
        assert a["edge_cell_m"] / b["edge_cell_m"] == pytest.approx(geometry.REFINE_RATIO)
        assert b["cells_per_wavelength"] / a["cells_per_wavelength"] == pytest.approx(
            geometry.REFINE_RATIO
        )
    for r in runs:
        assert r["edge_rule"] == "thirds" and r["engine"] and r["date"] and r["cells"] > 0
        assert r["layout"] == runs[0]["layout"]  # one layout, solved on every mesh
        for side in ("em", "model"):
            assert all(math.isfinite(v) for v in r[side].values())


END_COUPLED = [q for q in COMPARED if not q[0].startswith("parallel/")]
PARALLEL = [q for q in COMPARED if q[0].startswith("parallel/")]


def _em_and_unc(seq: tuple[str, str, bool], key: str) -> tuple[float, float, float]:
    """(field solver at the finest mesh, its mesh uncertainty, circuit model) for one figure."""
    runs = _meshes(seq)
    values = [r["em"][key] for r in runs]
    unc = mesh_uncertainty([r["edge_cell_m"] for r in runs], values)
    assert unc is not None and math.isfinite(unc)
    return values[-1], unc, runs[-1]["model"][key]


def test_both_topologies_are_in_the_campaign():
    assert END_COUPLED and PARALLEL


def _equal_widths(seq: tuple[str, str, bool]) -> bool:
    widths = _meshes(seq)[0]["layout"]["widths"]
    return max(widths) - min(widths) < 1e-9


EQUAL = [q for q in END_COUPLED if _equal_widths(q)]
UNEQUAL = [q for q in END_COUPLED if not _equal_widths(q)]


def test_both_kinds_of_tapped_layout_are_in_the_campaign():
    assert EQUAL and UNEQUAL


@pytest.mark.parametrize("seq", EQUAL)
def test_the_field_solver_finds_the_match_worse_than_the_circuit_model_with_its_metal(seq):
    """Resonators of one width (the 8 % tapped filter): today's circuit model with the problem's
    metal thickness, which the field model's zero-thickness sheets lack, finds the match better
    than the field solver beyond its mesh uncertainty (benchmarks/em_filters.py metal_figures)."""
    em, unc, _ = _em_and_unc(seq, "worst_return_loss_db")
    metal = _em_filters().metal_figures(_meshes(seq)[-1])["worst_return_loss_db"]
    assert em + unc < metal


@pytest.mark.parametrize("seq", EQUAL)
def test_most_of_that_is_the_metal_thickness_the_field_model_lacks(seq):
    """There the problem's 10 um of metal raises the circuit model's worst in-band return loss
    by about 5 dB (measured: 10.3 -> 15.5 dB); the field solver's sits nearer the circuit model
    with sheets, like its own strips, than with the metal."""
    em, _, _ = _em_and_unc(seq, "worst_return_loss_db")
    last = _meshes(seq)[-1]
    sheet = _em_filters().sheet_figures(last)["worst_return_loss_db"]
    thick = _em_filters().metal_figures(last)["worst_return_loss_db"]
    assert thick - sheet > 3.5
    assert abs(em - sheet) < abs(em - thick)


@pytest.mark.parametrize("seq", UNEQUAL)
def test_with_unequal_widths_todays_circuit_model_finds_the_field_solvers_match(seq):
    """Resonators of unequal width (the 10 % tapped alumina and 3 % tapped laminate filters):
    with the calibration's unequal-gap correction the circuit model with the problem's metal
    puts the worst in-band return loss within 1 dB plus the field solver's mesh uncertainty of
    the field solver's (measured on the finest meshes: 8.8 against 10.0 ± 0.7 and 9.5 ± 0.6 dB,
    3.4 against 2.4 ± 2.4 dB), where the records' own circuit model, with the symmetric-gap
    rule, said 14.3 and 15.9 dB."""
    em, unc, stored = _em_and_unc(seq, "worst_return_loss_db")
    metal = _em_filters().metal_figures(_meshes(seq)[-1])["worst_return_loss_db"]
    assert abs(em - metal) < unc + 1.0
    if stored > metal + 3.0:  # a record made before the correction
        assert em + unc < stored


@pytest.mark.parametrize("seq", PARALLEL)
@pytest.mark.parametrize("key", ["centre_hz", "worst_return_loss_db"])
def test_parallel_coupled_circuit_model_lies_within_the_field_mesh_uncertainty(seq, key):
    em, unc, model = _em_and_unc(seq, key)
    assert abs(em - model) <= unc
    # and the uncertainty is not so wide that this says nothing: under a tenth of the bandwidth
    # in frequency, under 10 dB in return loss
    bw = _meshes(seq)[-1]["model"]["bandwidth_hz"]
    assert unc < (0.1 * bw if key != "worst_return_loss_db" else 10.0)


@pytest.mark.parametrize("seq", PARALLEL)
def test_parallel_coupled_bandwidth_is_within_one_percent_of_the_circuit_model(seq):
    """The field solver's 3 dB bandwidth settles (557.2 MHz on the two finer meshes) 0.6 %
    below the circuit model's: outside its small mesh uncertainty, but a hundredth of the
    bandwidth, a sixteenth of the 10 % that issue 20 asks of a calibrated model."""
    em, unc, model = _em_and_unc(seq, "bandwidth_hz")
    assert abs(em / model - 1.0) < 0.01
    assert unc < 0.01 * model


@pytest.mark.parametrize("seq", PARALLEL)
def test_parallel_coupled_field_loss_exceeds_the_circuit_model_beyond_mesh_uncertainty(seq):
    em, unc, model = _em_and_unc(seq, "midband_loss_db")
    assert em - unc > model


def test_the_cost_table_builds_the_meshes_the_campaign_solved():
    """benchmarks/em_cost.py estimates a converged check's engine time from job sizes it builds
    itself; on every solve the campaign finished, its mesh has the cell count the engine ran."""
    import sys

    sys.path.insert(0, str(DATA.parent.parent / "benchmarks"))
    import em_cost

    from refine.spec.problem import load_problem

    assert len(set(em_cost.COST_FILTERS)) == len(em_cost.COST_FILTERS)  # one row per filter
    for name in FILTERS:
        problem = load_problem(em_cost.ROOT / "problems" / f"{name}.toml")
        lay = em_cost.layout_of(name, problem, DOC["runs"])
        for r in (r for r in DOC["runs"] if r["filter"] == name):
            ladder = em_cost.ladder(problem, lay, r)  # in the box the campaign solved
            assert ladder[r["mesh_index"]]["cells"] == r["cells"], (name, r["mesh_index"])


def test_the_old_boxs_walls_were_part_of_the_8_percent_filters_loss():
    """The 8 % tapped filter in the old box (first-order walls at 6 h) lost more at midband
    than the circuit model beyond the mesh uncertainty. Solved again with matched layers on the
    same three meshes it loses 0.30-0.37 dB less at midband on every one of them (measured:
    1.07/1.16/1.24 against 1.45/1.49/1.54 dB), and its finest mesh lies within its mesh
    uncertainty of the circuit model's 1.21 dB (1.24 +- 0.70 dB: the loss still rises with each
    refinement, so three meshes bound it only loosely), while the return loss still falls
    short beyond it."""
    name = "ms-alumina-tap-10g-n3-8pct"
    old = (name, "first-order", False)
    new = (name, "pml", False)  # a tapped layout has no mirror line: whole box
    assert len(_meshes(new)) >= 3
    em, unc, model = _em_and_unc(old, "midband_loss_db")
    assert em - unc > model
    for a, b in zip(_meshes(old), _meshes(new), strict=True):
        drop = a["em"]["midband_loss_db"] - b["em"]["midband_loss_db"]
        assert 0.25 < drop < 0.45, (a["mesh_index"], drop)
    em, unc, model = _em_and_unc(new, "midband_loss_db")
    assert abs(em - model) <= unc
    em, unc, model = _em_and_unc(new, "worst_return_loss_db")
    assert em + unc < model


# ------------------------------------------- the calibrated-model issue's bars (scoreboard)


def _em_filters():
    import sys

    sys.path.insert(0, str(DATA.parent.parent / "benchmarks"))
    import em_filters

    return em_filters


def _synthetic(centres, widths, margins, fbw=0.05, cells=(100e-6, 70.7e-6, 50e-6)) -> list[dict]:
    """One filter's mesh sequence with the given field figures against a circuit model at
    10 GHz with a 500 MHz 3 dB bandwidth (invented numbers, only to exercise the judge)."""
    return [
        {
            "filter": "x",
            "box": "half",
            "mesh_index": k,
            "edge_cell_m": cells[k],
            "fbw": fbw,
            "em": {"centre_hz": c, "bandwidth_hz": b, "worst_margin_db": m},
            "model": {"centre_hz": 10e9, "bandwidth_hz": 500e6},
        }
        for k, (c, b, m) in enumerate(zip(centres, widths, margins, strict=True))
    ]


def _bars(ef, runs: list[dict], key: tuple[str, str]) -> dict:
    """The bars on invented records: judged against their own stored circuit-model figures and
    field margins (the script takes the circuit model with sheets and carries each solve to the
    problem's metal, which invented records have not got)."""
    return ef.bar_figures(runs, key, lambda r: r["model"], lambda r: r["em"]["worst_margin_db"])


def test_the_scoreboard_judges_each_bar_beyond_the_mesh_uncertainty():
    ef = _em_filters()
    from refine.fullwave.uncertainty import MeshVerdict, verdict

    key = ("x", "half")
    # two meshes: the centre 0.02 % off the circuit model's (0.004 of a 5 % FBW) moving by
    # 0.001 FBW: within 0.15; the bandwidth 20 % wide moving by 1 %: outside 10 %; the margin
    # +0.5 dB moving by 2 dB: undecided
    runs = _synthetic([10.001e9, 10.002e9], [590e6, 600e6], [-1.5, 0.5])
    v = {k: verdict(f) for k, f in _bars(ef, runs, key).items()}
    assert v == {
        "centre": MeshVerdict.MET,
        "bandwidth": MeshVerdict.NOT_MET,
        "mask": MeshVerdict.UNDECIDED,
    }
    # one mesh: every bar undecided, whatever the distance
    one = _bars(ef, runs[1:], key)
    assert all(verdict(f) is MeshVerdict.UNDECIDED for f in one.values())
    # a centre whose interval straddles the bar: undecided
    runs = _synthetic([10.07e9, 10.08e9], [500e6, 500e6], [1.0, 1.0])  # 0.16 +- 0.02 FBW
    assert verdict(_bars(ef, runs, key)["centre"]) is MeshVerdict.UNDECIDED


def test_the_scoreboards_distance_uncertainty_is_the_signed_figures():
    """A centre that crosses the circuit model's between meshes (-0.05 then +0.01 FBW) has the
    signed figure's uncertainty, not the smaller one of its size."""
    ef = _em_filters()
    runs = _synthetic([9.975e9, 10.005e9], [500e6, 500e6], [1.0, 1.0])
    fig = _bars(ef, runs, ("x", "half"))["centre"]
    cells = [100e-6, 70.7e-6]
    assert fig.uncertainty == pytest.approx(mesh_uncertainty(cells, [-0.05, 0.01]))
    assert fig.uncertainty > 1.4 * mesh_uncertainty(cells, [0.05, 0.01])
    assert ef.BAR_CENTRE_FBW - fig.value == pytest.approx(0.01)


def test_the_readme_scoreboard_is_the_scripts():
    ef = _em_filters()
    readme = (DATA.parent.parent / "README.md").read_text()
    block = readme.split("<!-- closed-gap:start -->", 1)[1].split("<!-- closed-gap:end -->")[0]
    assert ef.scoreboard(DOC["runs"]) in block


def test_the_table_compares_with_todays_circuit_model():
    """Each record stores the circuit model's figures of its day (provenance); the table sets
    the field solver beside today's circuit model (em_filters.metal_figures, sheet_figures).
    Where the model has not changed for a layout the two agree. The unequal-gap correction
    moved the layouts with unequal widths on eps_r 9.8 (the 10 % tapped filter's worst in-band
    return loss with the metal 14.3 -> 8.8 dB, measured); the metal's faces at gaps and open
    ends then moved every layout on metal, the parallel-coupled one through its open ends."""

    from refine.fullwave import compare, verify
    from refine.spec.problem import load_problem

    ef = _em_filters()
    moved = set()
    for name in FILTERS:
        problem = load_problem(ef.ROOT / "problems" / f"{name}.toml")
        from em_filters import layout_of

        lay = layout_of(name, problem, DOC["runs"])
        f = verify.em_frequencies(problem)
        s = ef.circuit_response(problem, lay, f)
        b = compare.band_figures(f, s[:, 0, 0], s[:, 1, 0], problem.mask)
        for r in (r for r in DOC["runs"] if r["filter"] == name):
            today = ef.metal_figures(r)
            assert today["centre_hz"] == pytest.approx(b.centre, rel=1e-9), name
            assert today["worst_return_loss_db"] == pytest.approx(b.worst_return_loss, abs=1e-6)
            if abs(r["model"]["worst_return_loss_db"] - b.worst_return_loss) > 1e-6:
                moved.add(name)
    assert moved == set(FILTERS)


def test_a_record_that_rings_less_than_the_default_stays_where_the_ringdown_study_held():
    """A filter may simulate less ringing than the field check's default
    (benchmarks/em_filters.py RING_DELAYS), never less than the shortest cut from which on the
    ring-down study (tests/data/fullwave-ringdown.json) found every continued cut of every
    filter within 0.5 % of the bandwidth in centre and 3 dB bandwidth and 0.1 dB in return loss
    of the whole record; and its fit checks itself like any continued record."""
    from test_fullwave_ringdown import RUNS as STUDY
    from test_fullwave_ringdown import _changes

    from refine.fullwave import ringdown

    def holds(g: float) -> bool:
        for r in STUDY.values():
            for c in (c for c in r["cuts"] if c["group_delays"] >= g):
                d = _changes(r, c, "continued")
                if abs(d["centre"]) >= 0.005 or abs(d["bandwidth"]) >= 0.005 or abs(d["rl"]) >= 0.1:
                    return False
        return True

    cuts = sorted({c["group_delays"] for r in STUDY.values() for c in r["cuts"]})
    shortest = next(g for g in cuts if holds(g))
    assert shortest <= 1.5  # what the x-band filter's record simulates
    for r in DOC["runs"]:
        if r.get("ring_delays") is not None:
            assert r["ring_delays"] >= shortest and r["ringdown_continued"]
            # a fit that checks itself above the caution is named in the table with its check
            # (the 3 % gap-coupled filter's first mesh: 1.4e-3 at 1.5 group delays)
            assert r["ringdown_fit_check"] < 2 * ringdown.CHECK_LIMIT
            if r["ringdown_fit_check"] >= ringdown.CHECK_LIMIT:
                row = [x for x in _em_filters().table(DOC["runs"]).splitlines() if r["filter"] in x]
                assert any("ring-down fit check" in x for x in row)


def test_stored_s_parameters_round_trip_to_seven_digits():
    import numpy as np

    ef = _em_filters()
    rng = np.random.default_rng(7)
    f = np.linspace(9e9, 11e9, 41)
    s = rng.normal(size=(41, 2, 2)) + 1j * rng.normal(size=(41, 2, 2))
    f2, s2 = ef.stored_s({"s_em": json.loads(json.dumps(ef.s_parameters(f, s)))})
    assert np.array_equal(f2, f)
    assert np.max(np.abs(s2 - s) / np.abs(s)) < 1e-6
    assert ef.stored_s({}) is None  # records from before the key


def test_a_records_stored_s_parameters_give_its_stored_figures():
    """Records that keep the field solver's S-parameters: the band figures recomputed from them
    (refine.fullwave.compare.band_figures on the problem's mask) are the record's."""
    from refine.fullwave import compare
    from refine.spec.problem import load_problem

    ef = _em_filters()
    for r in DOC["runs"]:
        fs = ef.stored_s(r)
        if fs is None:
            continue
        problem = load_problem(ef.ROOT / "problems" / f"{r['filter']}.toml")
        b = compare.band_figures(fs[0], fs[1][:, 0, 0], fs[1][:, 1, 0], problem.mask)
        assert b.centre == pytest.approx(r["em"]["centre_hz"], rel=1e-6)
        assert b.bandwidth == pytest.approx(r["em"]["bandwidth_hz"], rel=1e-5)
        assert b.worst_return_loss == pytest.approx(r["em"]["worst_return_loss_db"], abs=1e-4)
