"""The refine command: verbs run on bundled problems; bad input exits 2 with a message."""

import json
from pathlib import Path

import pytest

from refine.cli import main

ROOT = Path(__file__).parent.parent


def test_synth_json(capsys):
    assert main(["synth", str(ROOT / "problems/ideal-s-band-n5.toml"), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["order"] == 5 and len(out["capacitance_f"]) == 6 and len(out["theta_rad"]) == 5


def test_synth_table(capsys):
    assert main(["synth", str(ROOT / "problems/ideal-s-band-n5.toml")]) == 0
    out = capsys.readouterr().out
    assert "J/Y0" in out and "passband return loss" in out


def test_bad_problem_exits_2_without_traceback(tmp_path, capsys):
    p = tmp_path / "p.toml"
    p.write_text('name = "x"\n[response]\nfamily = "elliptic"\n')
    assert main(["synth", str(p)]) == 2
    err = capsys.readouterr().err
    assert "response.family = 'elliptic'" in err and "Traceback" not in err


def test_help_for_every_verb(capsys):
    for verb in ("synth", "design"):
        with pytest.raises(SystemExit) as exc:
            main([verb, "--help"])
        assert exc.value.code == 0


def test_design_on_microstrip_prints_layout_shortfall_and_spread(capsys):
    code = main(["design", str(ROOT / "problems/microstrip-c-band-n4.toml")])
    out = capsys.readouterr().out
    assert code == 1  # the closed form cannot meet this mask with a 100 um minimum gap
    assert "realised seed (garg-bahl gaps)" in out
    assert "gap 1: needs 7.6 um, the shop's minimum is 100.0 um" in out
    assert "gap-model spread" in out and "kirschning-jansen-koster" in out
    assert "model range: gap 0" in out


def test_design_feasible_alumina_meets_mask(capsys):
    assert main(["design", str(ROOT / "problems/microstrip-x-band-alumina-n3.toml")]) == 0
    out = capsys.readouterr().out
    assert "status: MET" in out and "refined (dB)" in out and "resonator 1 length" in out
    assert "snapped to the shop's 0.5 um grid" in out


def test_design_infeasible_prints_diagnosis(capsys):
    assert main(["design", str(ROOT / "problems/inf-pcb-gap-5g8-n3-3pct.toml")]) == 1
    out = capsys.readouterr().out
    assert (
        "status: INFEASIBLE" in out
        and "can give at most" in out
        and "remedy: use a tapped feed" in out
    )


def test_design_stripline(capsys):
    assert main(["design", str(ROOT / "problems/stripline-l-band.toml")]) == 1
    out = capsys.readouterr().out
    assert "order chosen from the stopbands: N = 4" in out and "altschuler-oliner" in out


def test_tapped_problem_shows_a_tapped_seed(capsys):
    assert main(["design", str(ROOT / "problems/ms-pcb-tap-5g8-n3-3pct.toml")]) == 0
    out = capsys.readouterr().out
    seed_part = out[out.index("realised seed") : out.index("refining")]
    assert "tap in" in seed_part and "tap out" in seed_part and "gap 1" in seed_part
    assert "gap 0" not in seed_part and "none works" not in seed_part  # no end gaps with a tap


@pytest.mark.slow
def test_fixed_widths_keeps_every_resonator_at_the_feed_width(tmp_path):
    out = tmp_path / "fw"
    prob = str(ROOT / "problems/microstrip-x-band-alumina-n3.toml")
    assert main(["design", prob, "--fixed-widths", "--centre-yield", "--out", str(out)]) == 0
    lay = json.loads((out / "layout.json").read_text())
    assert all(w == lay["feed_width"] for w in lay["widths"])


def test_centre_yield_takes_either_spelling():
    from refine.cli import build_parser

    for flag in ("--centre-yield", "--center-yield"):
        args = build_parser().parse_args(["design", "p.toml", flag])
        assert args.centre_yield is True
