"""Design studies: validation, identical rows from every executor (serial, process pool, a Dask
LocalCluster on loopback), nothing lost when a running study is killed and resumed."""

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from refine import study
from refine.cli import main

ROOT = Path(__file__).parent.parent
IDEAL = ROOT / "problems/ideal-s-band-n5.toml"
ALUMINA_BASE = ROOT / "problems/studies/base-alumina-10g.toml"


def _write(tmp_path, text, name="s.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def _small(tmp_path):
    # the refiner's budget per design is bounded: the N=3 8 % design cannot be met and would
    # otherwise spend about 30 s proving it
    return _write(
        tmp_path,
        f'''name = "small"
base = "{IDEAL}"
[axes]
"response.fractional_bandwidth" = [0.04, 0.08]
"response.order" = [3, 5]
[options]
max_evaluations = 60
''',
    )


def _rows(frame):
    return frame.drop(columns=["wall_time_s"]).to_dict("records")


def test_bundled_study_loads():
    st = study.load_study(ROOT / "problems/studies/alumina-bandwidth.toml")
    assert len(st.designs) == 84 and len(st.labels) == 84
    assert st.labels[0] == {
        "response.fractional_bandwidth": 0.01,
        "response.order": 3,
        "fab.min_gap": "10 um",
        "coupling.external": "gap",
    }


@pytest.mark.parametrize(
    ("text", "message"),
    [
        (
            'name = "x"\nbase = "{b}"\ncolour = 1\n[axes]\n"response.order" = [3]\n',
            "colour = 1: unknown key",
        ),
        (
            'name = "x"\nbase = "{b}"\n[axes]\n"response.order" = []\n',
            "axes.response.order = []: must be a non-empty list",
        ),
        ('name = "x"\nbase = "{b}"\n[axes]\n', "[axes] must name at least one axis"),
        (
            'name = "x"\nbase = "{b}"\n[axes]\n"response.colour" = ["red"]\n',
            "response.colour = 'red': unknown key",
        ),
        (
            'name = "x"\nbase = "{b}"\n[axes]\n"response.order" = [0]\n',
            "response.order = 0: must be an integer in 1..15",
        ),
        (
            'name = "x"\nbase = "missing.toml"\n[axes]\n"response.order" = [3]\n',
            "base = 'missing.toml': cannot be read",
        ),
        (
            'name = "x"\nbase = "{b}"\n[axes]\n"response.order" = [3]\n[options]\nyield_samples = -1\n',
            "options.yield_samples = -1: must be an integer in 0..100000",
        ),
        (
            'name = "x"\nbase = "{b}"\n[axes]\n"response.order" = [3]\n[options]\nmax_evaluations = 0\n',
            "options.max_evaluations = 0: must be an integer in 1..100000",
        ),
        (
            'name = "x"\nbase = "{b}"\n[axes]\n"response.order.x" = [1]\n',
            "axes.response.order.x: response.order is a value in the problem file, not a table",
        ),
    ],
)
def test_bad_study_files(tmp_path, text, message):
    p = _write(tmp_path, text.replace("{b}", str(IDEAL)))
    with pytest.raises(study.StudyError) as exc:
        study.load_study(p)
    assert message in str(exc.value)


def test_too_many_designs_need_yes(tmp_path):
    orders = ", ".join(str(n) for n in range(1, 16))
    fbws = ", ".join(f"0.0{k}" for k in range(1, 10))
    p = _write(
        tmp_path,
        f'name = "big"\nbase = "{IDEAL}"\n[axes]\n"response.order" = [{orders}]\n"response.fractional_bandwidth" = [{fbws}]\n"response.ripple_db" = [0.01, 0.1, 0.5, 1.0]\n',
    )
    with pytest.raises(study.StudyError, match="540 designs, more than 500; pass --yes"):
        study.load_study(p)
    assert len(study.load_study(p, allow_many=True).designs) == 540


@pytest.mark.slow
def test_every_executor_gives_the_same_rows(tmp_path):
    st = study.load_study(_small(tmp_path))
    serial = study.run_study(st, tmp_path / "serial", workers=1)
    pool = study.run_study(st, tmp_path / "pool", workers=2)
    assert _rows(serial) == _rows(pool)
    from distributed import Client, LocalCluster

    with (
        LocalCluster(
            n_workers=2,
            threads_per_worker=1,
            processes=True,
            host="127.0.0.1",
            dashboard_address=None,
        ) as cluster,
        Client(cluster) as client,
    ):
        dask_frame = study.run_study(st, tmp_path / "dask", client=client)
    assert _rows(serial) == _rows(dask_frame)
    # N=3 at 8 % cannot reach the base problem's fixed 30 dB stopbands; the other three can
    assert list(serial["status"]) == ["met", "met", "not met", "met"]
    assert list(serial["axis response.order"]) == [3, 5, 3, 5]
    back = pd.read_parquet(tmp_path / "serial" / "results.parquet")
    assert _rows(back) == _rows(serial)


@pytest.mark.slow
def test_killed_study_resumes_without_losing_or_repeating_designs(tmp_path):
    p = _write(
        tmp_path,
        f'''name = "resumable"
base = "{ALUMINA_BASE}"
[axes]
"response.fractional_bandwidth" = [0.01, 0.02, 0.03, 0.05]
"response.order" = [3, 5]
''',
    )
    out = tmp_path / "out"
    store = out / "results.jsonl"
    proc = subprocess.Popen(
        [sys.executable, "-m", "refine.cli", "study", str(p), "--out", str(out), "--workers", "1"],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )
    deadline = time.time() + 120
    while time.time() < deadline:
        if store.exists() and len(store.read_text().splitlines()) >= 2:
            break
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)  # as a power cut would: no chance to clean up
    proc.wait()
    done = [json.loads(line) for line in store.read_text().splitlines() if line.strip()]
    assert 2 <= len(done) < 8, "the kill must land while the study is running"
    assert not (out / "results.csv").exists()
    with pytest.raises(study.StudyError, match="use --resume"):
        study.run_study(study.load_study(p), out, workers=1)
    resumed = study.run_study(study.load_study(p), out, workers=1, resume=True)
    lines = [json.loads(line) for line in store.read_text().splitlines() if line.strip()]
    assert sorted(r["index"] for r in lines) == list(
        range(8)
    )  # every design once: none lost, none repeated
    fresh = study.run_study(study.load_study(p), tmp_path / "fresh", workers=1)
    assert _rows(resumed) == _rows(fresh)


@pytest.mark.slow
def test_unreachable_scheduler_is_refused_and_nothing_is_written(tmp_path, capsys):
    out = tmp_path / "out"
    code = main(
        ["study", str(_small(tmp_path)), "--out", str(out), "--scheduler", "tcp://127.0.0.1:9"]
    )
    assert code == 2
    err = capsys.readouterr().err
    assert "--scheduler tcp://127.0.0.1:9: no Dask scheduler answers there" in err
    assert not out.exists()


@pytest.mark.slow
def test_study_verb_writes_table_and_plots(tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["study", str(_small(tmp_path)), "--out", str(out), "--workers", "1"]) == 0
    for name in (
        "results.parquet",
        "results.csv",
        "results.jsonl",
        "study.json",
        "study-return-loss.png",
        "study-feasibility.png",
    ):
        assert (out / name).exists(), name
    said = capsys.readouterr().out
    assert "3 met, 0 met on the nominal model only, 1 not met, 0 infeasible" in said
    assert main(["study", str(_small(tmp_path)), "--out", str(out), "--workers", "0"]) == 2


def test_a_torn_last_line_is_repaired_on_resume(tmp_path):
    """A kill while a row is being written leaves a partial last line; resume drops it (and
    says so) instead of gluing the next row onto it."""
    p = _write(
        tmp_path,
        f'''name = "quick"
base = "{IDEAL}"
[axes]
"response.fractional_bandwidth" = [0.06, 0.08, 0.1, 0.12]
''',
    )
    out = tmp_path / "out"
    full = study.run_study(study.load_study(p), out, workers=1)
    store = out / "results.jsonl"
    lines = store.read_text().splitlines()
    store.write_text("\n".join(lines[:2]) + "\n" + lines[2][: len(lines[2]) // 2])  # torn
    notes = []
    again = study.run_study(study.load_study(p), out, workers=1, resume=True, say=notes.append)
    rows = [json.loads(line) for line in store.read_text().splitlines()]  # every line parses
    assert sorted(r["index"] for r in rows) == [0, 1, 2, 3]
    assert notes and "dropped 1 line" in notes[0]
    assert _rows(again) == _rows(full)


def test_a_symbolic_link_in_the_study_folder_is_refused(tmp_path):
    p = _small(tmp_path)
    out = tmp_path / "out"
    out.mkdir()
    target = tmp_path / "elsewhere.jsonl"
    target.write_text("")
    (out / "results.jsonl").symlink_to(target)
    with pytest.raises(study.StudyError, match=r"results\.jsonl is a symbolic link"):
        study.run_study(study.load_study(p), out, workers=1)
    assert target.read_text() == ""


@pytest.mark.slow
def test_pool_workers_do_not_outlive_a_killed_study(tmp_path):
    """SIGKILL of the study process alone (not its group): its pool workers see their parent
    gone and exit within a few seconds."""
    psutil = pytest.importorskip("psutil")
    p = _write(
        tmp_path,
        f'''name = "orphans"
base = "{ALUMINA_BASE}"
[axes]
"response.fractional_bandwidth" = [0.01, 0.02, 0.03, 0.05, 0.08, 0.12]
"response.order" = [3, 5]
''',
    )
    proc = subprocess.Popen(
        [
            *[sys.executable, "-m", "refine.cli", "study", str(p)],
            "--out",
            str(tmp_path / "o"),
            "--workers",
            "2",
        ],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )
    parent = psutil.Process(proc.pid)
    deadline = time.time() + 60
    workers = []
    while time.time() < deadline and len(workers) < 2:
        workers = [c for c in parent.children(recursive=True) if c.is_running()]
        time.sleep(0.1)
    assert len(workers) >= 2, "the pool must be running before the kill"
    time.sleep(1.0)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    _, alive = psutil.wait_procs(workers, timeout=10)
    for w in alive:  # clean up before failing
        w.kill()
    assert not alive, f"{len(alive)} worker(s) outlived the killed study"


def test_study_plots_tell_twelve_series_apart(tmp_path, monkeypatch):
    """Twelve series (3 gaps x 2 orders x 2 couplings): every series has its own colour and
    marker pair, the legend sits beside the axes (not on the data) and names the seed's and
    the refined design's line kinds; the feasibility plot marks the swept bandwidth range."""
    from refine.outputs import plot

    rows = []
    for order in (3, 5):
        for ext in ("gap", "tap"):
            for gap in (10e-6, 25e-6, 50e-6):
                for fbw in (0.02, 0.05, 0.1):
                    rows.append(
                        {
                            "order": order,
                            "external": ext,
                            "min_gap_m": gap,
                            "fbw": fbw,
                            "status": "met" if fbw < 0.1 else "infeasible",
                            "seed_return_loss_margin_db": -3.0,
                            "refined_return_loss_margin_db": 1.0,
                        }
                    )
    figures = []
    monkeypatch.setattr(plot, "_save", lambda fig, path, dpi: figures.append(fig) or Path(path))
    plot.study_pngs(tmp_path, pd.DataFrame(rows), "demo")
    rl, feas = figures
    ax = rl.axes[0]
    solid = [
        ln
        for ln in ax.lines
        if ln.get_linestyle() == "-" and len(ln.get_xdata()) > 0 and ln.get_marker() != "None"
    ]
    styles = {(ln.get_color(), ln.get_marker()) for ln in solid}
    assert len(solid) == 12 and len(styles) == 12
    legend = ax.get_legend()
    texts = [t.get_text() for t in legend.get_texts()]
    assert "closed-form seed (dashed)" in texts and "refined (solid)" in texts
    assert legend.get_bbox_to_anchor().transformed(ax.transAxes.inverted()).x0 >= 1.0
    flabels = [t.get_text() for t in feas.axes[0].get_legend().get_texts()]
    assert any(t.startswith("widest swept: 10 %") for t in flabels)
    assert any(t.startswith("narrowest swept: 2 %") for t in flabels)


@pytest.mark.slow
def test_a_topology_axis_runs_both_topologies(tmp_path):
    """A study axis over coupling.topology: one row per topology, the parallel-coupled rows from
    the parallel-coupled refiner (their smallest gap is a coupled section's spacing)."""
    base = tmp_path / "base.toml"
    base.write_text(
        (
            Path(__file__).parent.parent / "problems" / "studies" / "base-laminate-5g8.toml"
        ).read_text()
    )
    spec = tmp_path / "topo.toml"
    spec.write_text(
        'name = "topology pair"\nbase = "base.toml"\n[axes]\n'
        '"coupling.topology" = ["end-coupled", "parallel-coupled"]\n'
        '"response.fractional_bandwidth" = [0.06]\n'
    )
    st = study.load_study(spec)
    rows = [study.run_design(i, d, str(spec), 0) for i, d in enumerate(st.designs)]
    by = {r["topology"]: r for r in rows}
    assert by["end-coupled"]["status"] == "infeasible"
    assert by["parallel-coupled"]["status"] in ("met", "met on the nominal model only")
    assert by["parallel-coupled"]["smallest_gap_m"] >= 100e-6 - 1e-12
