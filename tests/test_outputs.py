"""End to end: `refine design --out` on bundled problems, the hand-over files read back by outside
tools (scikit-rf for Touchstone, ezdxf's audit for DXF), `refine check`, and the bad-input corpus."""

import json
import warnings
from pathlib import Path

import ezdxf
import matplotlib.image
import numpy as np
import pytest
from skrf import Network

from refine.cli import main
from refine.optimise.minimax import Stopping
from refine.outputs import export
from refine.validity import ModelRangeWarning

ROOT = Path(__file__).parent.parent
NOMINAL_ONLY = 5  # the design exit code for a mask met on the nominal model only
ALUMINA = ROOT / "problems/microstrip-x-band-alumina-n3.toml"
BAD = sorted((Path(__file__).parent / "bad_problems").glob("*.toml"))


@pytest.fixture(scope="module")
def alumina_out(tmp_path_factory):
    out = tmp_path_factory.mktemp("alumina") / "out"
    assert (
        main(["design", str(ALUMINA), "--out", str(out), "--power", "2"]) == NOMINAL_ONLY
    )  # met, not at every model corner
    return out


def test_every_output_file_is_written(alumina_out):
    names = sorted(p.name for p in alumina_out.iterdir())
    assert names == sorted(
        [
            "summary.json",
            "layout.json",
            "response.s2p",
            "layout.dxf",
            "layout.svg",
            "layout.gds",
            "layout.kicad_mod",
            "layout-copper.gbr",
            "layout-outline.gbr",
            "layout-ports.gbr",
            "response.png",
            "passband.png",
            "smith.png",
            "layout.png",
            "report.md",
        ]
    )


def test_summary_json(alumina_out):
    s = json.loads((alumina_out / "summary.json").read_text())
    assert s["status"] == "met on the nominal model only" and s["meets_mask"] is False
    assert s["meets_mask_on_nominal_model"] is True
    assert s["worst_margin_db"] >= 0 and s["worst_margin_db"] > s["seed"]["worst_margin_db"]
    lay = s["layout_m"]
    assert (
        len(lay["gaps"]) == 4
        and len(lay["lengths"]) == 3
        and all(g >= 15e-6 * (1 - 1e-12) for g in lay["gaps"])
    )
    assert set(s["gap_model_spread_db"]) == {
        "garg-bahl",
        "kirschning-jansen-koster",
        "calibrated:static-er9.8",
    }
    assert len(s["peak_gap_voltage_v"]) == 4 and s["input_power_w"] == 2
    assert s["models"]["gap"] == "calibrated:static-er9.8" and s["medium"]["eps_r"] == 9.8
    assert s["fab_violations"] == []


def test_touchstone_reads_back_in_scikit_rf_identically(alumina_out):
    # Outside reference: scikit-rf's Touchstone reader.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ntw = Network(str(alumina_out / "response.s2p"))
    lay = export.read_layout(alumina_out / "layout.json")
    from refine.circuit.response import evaluate_layout
    from refine.outputs.files import sweep
    from refine.spec.problem import load_problem

    p = load_problem(ALUMINA)
    f = sweep(p)
    ours = evaluate_layout(p, lay, f)
    np.testing.assert_allclose(ntw.f, f, rtol=1e-15)
    np.testing.assert_allclose(ntw.s, ours, rtol=1e-12, atol=1e-15)
    assert np.allclose(ntw.z0, 50.0)
    assert ntw.f[-1] > 2 * p.f0  # the sweep runs past the spurious band near 2 f0


def test_dxf_passes_ezdxf_audit(alumina_out):
    doc = ezdxf.readfile(alumina_out / "layout.dxf")
    auditor = doc.audit()
    assert not auditor.has_errors
    copper = [e for e in doc.modelspace() if e.dxf.layer == "copper"]
    assert len(copper) == 5  # two feeds and three resonators, separated by real openings
    assert {e.dxf.layer for e in doc.modelspace()} >= {"copper", "outline", "ports"}
    xs = sorted(
        (min(p[0] for p in e.get_points()), max(p[0] for p in e.get_points())) for e in copper
    )
    lay = export.read_layout(alumina_out / "layout.json")
    for (_, a1), (b0, _), s in zip(xs[:-1], xs[1:], lay.gaps, strict=True):
        assert b0 - a1 == pytest.approx(s * 1e3, abs=1e-9)  # the gaps, in millimetres


def test_pictures_are_valid_png(alumina_out):
    for name in ("response.png", "layout.png", "passband.png", "smith.png"):
        data = (alumina_out / name).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n"
        img = matplotlib.image.imread(alumina_out / name)
        assert img.shape[0] > 300 and img.shape[1] > 500
    svg = (alumina_out / "layout.svg").read_text()
    # background, then one copper path per piece (five), the outline and two port markers
    assert svg.startswith("<svg") and svg.count("<rect") == 1 and svg.count("<path") == 8


def test_report_carries_the_job_and_the_cautions(alumina_out):
    text = (alumina_out / "report.md").read_text()
    for part in (
        "meets the mask",
        "## Specification",
        "## Dimensions",
        "## Margins",
        "Peak gap voltage at 2 W",
        "Gap-model spread",
        "electromagnetic simulation",
        "arc",
        "RF-exposure",
    ):
        assert part in text, part


def test_check_reads_the_layout_back(alumina_out, capsys):
    code = main(["check", str(alumina_out / "layout.json"), "--problem", str(ALUMINA)])
    assert code == NOMINAL_ONLY  # the design's own status, read back
    out = capsys.readouterr().out
    assert "status: mask MET ON THE NOMINAL MODEL ONLY" in out
    assert "model-uncertainty corners: -" in out
    edited = json.loads((alumina_out / "layout.json").read_text())
    edited["lengths"] = [x * 1.03 for x in edited["lengths"]]  # a hand edit that detunes it
    bad = alumina_out.parent / "edited.json"
    bad.write_text(json.dumps(edited))
    assert main(["check", str(bad), "--problem", str(ALUMINA)]) == 1


def test_outputs_are_not_overwritten_without_force(alumina_out, capsys):
    before = {p.name: p.read_bytes() for p in alumina_out.iterdir()}
    assert main(["design", str(ALUMINA), "--out", str(alumina_out)]) == 2
    assert "use --force" in capsys.readouterr().err
    assert {p.name: p.read_bytes() for p in alumina_out.iterdir()} == before


def test_infeasible_problem_still_writes_marked_outputs(tmp_path):
    out = tmp_path / "inf"
    assert (
        main(["design", str(ROOT / "problems/inf-pcb-gap-5g8-n3-3pct.toml"), "--out", str(out)])
        == 1
    )
    s = json.loads((out / "summary.json").read_text())
    assert s["status"] == "infeasible" and s["meets_mask"] is False and s["diagnosis"]["remedies"]
    assert "INFEASIBLE" in (out / "report.md").read_text()
    assert "DOES NOT MEET THE MASK" in (out / "response.s2p").read_text().splitlines()[1]


def test_ideal_problem_writes_electrical_layout(tmp_path):
    out = tmp_path / "ideal"
    assert main(["design", str(ROOT / "problems/ideal-s-band-n5.toml"), "--out", str(out)]) == 0
    lay = json.loads((out / "layout.json").read_text())
    assert lay["medium"] == "ideal" and len(lay["series_capacitances_farad"]) == 6
    assert not (out / "layout.dxf").exists()  # no copper on the ideal medium
    assert (
        main(
            [
                "check",
                str(out / "layout.json"),
                "--problem",
                str(ROOT / "problems/ideal-s-band-n5.toml"),
            ]
        )
        == 0
    )


def test_bad_input_corpus_is_large():
    assert len(BAD) >= 40


@pytest.mark.parametrize("path", BAD, ids=lambda p: p.stem)
def test_bad_problem_is_refused_and_nothing_is_written(path, tmp_path, capsys):
    expect = path.read_bytes().splitlines()[0].decode("utf-8").removeprefix("# expect: ")
    out = tmp_path / "out"
    assert main(["design", str(path), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert expect in err and str(path) in err and "Traceback" not in err
    assert not out.exists()


def test_bad_power_is_refused_before_anything_is_written(tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["design", str(ALUMINA), "--out", str(out), "--power", "-1"]) == 2
    assert "--power = -1 W is outside the allowed range (0, inf)" in capsys.readouterr().err
    assert not out.exists()


def test_atomic_write_leaves_old_file_on_failure(tmp_path):
    target = tmp_path / "x.txt"
    target.write_text("old")

    def failing(p):
        p.write_text("half")
        raise RuntimeError("disk full")

    with pytest.raises(RuntimeError):
        export.write_atomic(target, failing)
    assert target.read_text() == "old" and [p.name for p in tmp_path.iterdir()] == ["x.txt"]


def test_tapped_layout_drawing(tmp_path):
    out = tmp_path / "tap"
    assert (
        main(["design", str(ROOT / "problems/ms-pcb-tap-5g8-n3-3pct.toml"), "--out", str(out)])
        == NOMINAL_ONLY
    )
    lay = export.read_layout(out / "layout.json")
    assert lay.external == "tap" and len(lay.gaps) == 2 and lay.taps is not None
    doc = ezdxf.readfile(out / "layout.dxf")
    assert not doc.audit().has_errors
    strips = export.copper(lay)
    feed_in = next(s for s in strips if s.name == "feed in")
    res1 = next(s for s in strips if s.name == "resonator 1")
    assert (feed_in.x0 + feed_in.x1) / 2 - res1.x0 == pytest.approx(
        lay.taps[0]
    )  # centre line at the tap
    assert feed_in.y1 == pytest.approx(res1.y0)  # the feed touches the resonator's edge


HOSTILE_NAMES = [
    "demo\n# Hz S MA R 1",  # a second Touchstone option line
    'x"/><script>alert(1)</script><title>',  # markup in SVG and Markdown
    "\r\n0\nSECTION\n2\nENTITIES",  # DXF group codes
    "$\\frac{$ 100 % & <b>",  # unbalanced matplotlib mathtext, entities
    "y" * 5000,  # long
]


@pytest.mark.parametrize("name", HOSTILE_NAMES, ids=range(len(HOSTILE_NAMES)))
def test_hostile_names_cannot_break_an_output_file(name, tmp_path):
    """The problem-file reader refuses such names (see the bad-input corpus); a caller of the
    API can still set one, so every writer escapes or flattens it. Each file is read back by an
    independent reader: scikit-rf (Touchstone), an XML parser (SVG), ezdxf's audit (DXF)."""
    import xml.etree.ElementTree as ET
    from dataclasses import replace

    import refine

    p = replace(refine.load_problem(ALUMINA), name=name)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        sd = refine.seed(p)
        r = refine.design(p, seed=sd, stopping=Stopping(max_evaluations=5))
        refine.write_outputs(r, sd, tmp_path / "out")
    out = tmp_path / "out"
    net = Network(str(out / "response.s2p"))
    np.testing.assert_allclose(net.z0, 50.0)
    text = (out / "response.s2p").read_text()
    assert sum(line.startswith("#") for line in text.splitlines()) == 1
    root = ET.parse(out / "layout.svg").getroot()
    title = root.find("{http://www.w3.org/2000/svg}title").text
    assert title.startswith(export.one_line(name)[:50])
    assert "<script" not in (out / "layout.svg").read_text()
    doc = ezdxf.readfile(out / "layout.dxf")
    assert not doc.audit().has_errors
    report = (out / "report.md").read_text()
    assert report.splitlines()[0].startswith("# ") and "<script" not in report
    assert len(report.splitlines()[0]) < 250


def test_output_links_are_never_written_through(tmp_path, capsys):
    out = tmp_path / "out"
    out.mkdir()
    target = tmp_path / "precious.json"
    target.write_text("keep me")
    (out / "summary.json").symlink_to(target)
    (out / "report.md").symlink_to(tmp_path / "nowhere.md")  # dangling
    assert main(["design", str(ALUMINA), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "summary.json" in err and "report.md" in err and "symbolic link" in err
    assert main(["design", str(ALUMINA), "--out", str(out), "--force"]) == NOMINAL_ONLY
    assert target.read_text() == "keep me"  # the link was replaced, not followed
    assert not (out / "summary.json").is_symlink() and not (out / "report.md").is_symlink()
    assert not (tmp_path / "nowhere.md").exists()


@pytest.mark.slow
def test_two_runs_into_one_folder_never_leave_a_mixed_set(tmp_path):
    """Two real processes design two different problems into the same folder at once: the
    folder is locked while a set is written, and the second run re-checks it under the lock,
    so the folder always holds one problem's complete set and the other run says why not."""
    import subprocess
    import sys

    other = ROOT / "problems/ms-alumina-tap-10g-n3-8pct.toml"
    for trial in range(2):
        out = tmp_path / f"out{trial}"
        cmd = [sys.executable, "-m", "refine.cli", "design"]
        procs = [
            subprocess.Popen(
                [*cmd, str(p), "--out", str(out)],
                stdout=subprocess.DEVNULL,
                stderr=subprocess.PIPE,
                text=True,
            )
            for p in (ALUMINA, other)
        ]
        errs = [p.communicate(timeout=300)[1] for p in procs]
        codes = [p.returncode for p in procs]
        # one run wrote its set (met, or met on the nominal model only), the other was refused
        assert codes.count(2) == 1 and set(codes) - {2} <= {0, NOMINAL_ONLY}, (codes, errs)
        loser = errs[codes.index(2)]
        assert "already holds" in loser or "another refine run is writing there" in loser
        summary = json.loads((out / "summary.json").read_text())
        layout = json.loads((out / "layout.json").read_text())
        assert summary["layout_m"]["gaps"] == layout["gaps"]
        report = (out / "report.md").read_text().splitlines()[0]
        assert report == f"# {summary['problem']}"
        assert summary["problem"] in (out / "response.s2p").read_text().splitlines()[0]


def test_a_nan_anywhere_is_an_internal_error_never_a_status(tmp_path, capsys, monkeypatch):
    from refine.spec.mask import Mask, MaskResult

    original = Mask.evaluate

    def poisoned(self, f, s11, s21):
        res = original(self, f, s11, s21)
        return MaskResult({k: float("nan") for k in res.worst}, res.where)

    monkeypatch.setattr(Mask, "evaluate", poisoned)
    out = tmp_path / "out"
    assert main(["design", str(ALUMINA), "--out", str(out)]) == 3
    captured = capsys.readouterr()
    assert "internal error" in captured.err and "not finite numbers" in captured.err
    assert "status:" not in captured.out and not out.exists()


def test_an_air_substrate_designs_without_nan(tmp_path, capsys):
    text = ALUMINA.read_text().replace("eps_r = 9.8", "eps_r = 1.0")
    assert "eps_r = 1.0" in text
    p = tmp_path / "air.toml"
    p.write_text(text)
    out = tmp_path / "out"
    code = main(["design", str(p), "--out", str(out)])
    assert code in (0, 1)
    summary = json.loads((out / "summary.json").read_text())
    assert all(np.isfinite(v) for v in summary["worst_margins_db"].values())
    assert "nan" not in (out / "response.s2p").read_text().lower()


def test_a_mask_without_an_insertion_loss_limit_gets_the_passband_loss_said(tmp_path):
    """A mask that limits return loss but not insertion loss would pass a matched absorber:
    the report states the design's passband loss, and warns above 3 dB."""
    from dataclasses import replace

    import refine
    from refine.outputs import report

    # under a lid (no radiation) the design's loss stays below the 3 dB warning
    p = replace(
        refine.load_problem(ROOT / "problems/ms-alumina-10g-n3-auto.toml"), enclosure="shielded"
    )
    assert p.mask.max_insertion_loss_db is None and p.mask.min_return_loss_db is not None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)
        sd = refine.seed(p)
        r = refine.design(p, seed=sd)
        note = report.loss_note(r)
        assert note is not None and "no insertion-loss limit" in note and "WARNING" not in note
        refine.write_outputs(r, sd, tmp_path / "out")
        assert note in json.loads((tmp_path / "out/summary.json").read_text())["warnings"]
        # the same copper on a lossy board (loss tangent 0.05, poor metal): more than 3 dB
        lossy = replace(
            p, substrate=replace(p.strip_substrate, loss_tangent=0.05, conductivity=1e6)
        )
        loud = report.loss_note(replace(r, problem=lossy))
    assert loud is not None and loud.startswith("WARNING") and "absorbing power" in loud


def test_the_api_names_its_own_parameters_when_it_refuses_a_folder(tmp_path):
    """write_outputs called from Python says out=... and force=True, not the command's options."""
    import refine

    p = refine.load_problem(ROOT / "problems" / "ideal-cheb-n3-20pct.toml")
    sd = refine.seed(p)
    r = refine.design(p, seed=sd)
    refine.write_outputs(r, sd, tmp_path / "o")
    with pytest.raises(ValueError, match=r"out = '.*': already holds .*; pass force=True") as e:
        refine.write_outputs(r, sd, tmp_path / "o")
    assert "--force" not in str(e.value)


def test_the_touchstone_sweep_covers_every_mask_region():
    """A stopband from 0.1 f0 is swept from there (the sweep used to start at 0.2 f0)."""
    from dataclasses import replace

    import refine
    from refine.outputs.files import sweep
    from refine.spec.mask import Stopband

    p = refine.load_problem(ROOT / "problems" / "microstrip-x-band-alumina-n3.toml")
    low = replace(p.mask, stopbands=(Stopband(1e9, 8e9, 30.0), *p.mask.stopbands[1:]))
    f = sweep(replace(p, mask=low))
    assert f[0] == pytest.approx(1e9) and 8e9 in f
    assert f[-1] >= max(sb.stop for sb in p.mask.stopbands)


def test_summary_gives_vswr_group_delay_and_the_safe_power(alumina_out):
    from refine.circuit.response import evaluate_layout
    from refine.outputs import report
    from refine.spec.problem import load_problem

    s = json.loads((alumina_out / "summary.json").read_text())
    p = load_problem(ALUMINA)
    lay = export.read_layout(alumina_out / "layout.json")
    f = np.linspace(p.mask.passband_start, p.mask.passband_stop, 401)
    g = np.abs(evaluate_layout(p, lay, f)[:, 0, 0]).max()
    pb = s["passband"]
    assert pb["worst_vswr"] == pytest.approx((1 + g) / (1 - g), rel=1e-9)
    assert pb["worst_return_loss_db"] >= 14.0  # the mask's requirement, met
    assert 0.5e-9 < pb["midband_group_delay_s"] < 5e-9 and pb["group_delay_spread_s"] > 0
    # at the safe power the highest gap voltage is exactly at its limit: V scales as sqrt(P)
    p_max = s["max_safe_input_power_w"]
    ratio = max(
        v * np.sqrt(p_max / s["input_power_w"]) / (report.BREAKDOWN_V_PER_M * gap)
        for v, gap in zip(s["peak_gap_voltage_v"], lay.gaps, strict=True)
    )
    assert ratio == pytest.approx(1.0, rel=1e-9)
    text = (alumina_out / "report.md").read_text()
    assert "Largest safe input power" in text and "## Passband" in text and "worst VSWR" in text


def test_touchstone_2_reads_back_in_scikit_rf(tmp_path):
    # Outside reference: scikit-rf's Touchstone reader, which parses the 2.0 keywords.
    out = tmp_path / "out"
    assert main(["design", str(ALUMINA), "--out", str(out), "--touchstone-2"]) == NOMINAL_ONLY
    text = (out / "response.ts").read_text()
    assert "[Version] 2.0" in text and "[Two-Port Data Order] 21_12" in text
    assert text.rstrip().endswith("[End]")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        v1 = Network(str(out / "response.s2p"))
        v2 = Network(str(out / "response.ts"))
    np.testing.assert_allclose(v2.f, v1.f, rtol=1e-15)
    np.testing.assert_allclose(v2.s, v1.s, rtol=1e-12, atol=1e-15)
    assert np.allclose(v2.z0, 50.0)
