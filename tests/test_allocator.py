"""The process-wide settings for speed: the allocator's kept memory and the drawing workers.
Both change how fast, never what: the results are the same either way."""

from __future__ import annotations

import os
import subprocess
import sys

import pytest
from conftest import ROOT

from refine import allocator


def _in_fresh_process(code: str, **env: str) -> str:
    return subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        check=True,
        cwd=ROOT,
        env={**os.environ, **env},
    ).stdout.strip()


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's mallopt")
def test_the_allocator_keeps_freed_memory_unless_told_not_to():
    code = "import refine.circuit.cascade; from refine import allocator; print(allocator.allocator_tuned())"
    assert _in_fresh_process(code) == "True"
    assert _in_fresh_process(code, REFINE_MALLOC="system") == "False"
    assert allocator.keep_freed_memory() == allocator.allocator_tuned()  # once per process


def test_the_same_numbers_with_either_allocator_setting():
    code = (
        "import warnings; warnings.simplefilter('ignore'); import numpy as np; import refine; "
        "r = refine.design(refine.load_problem('problems/microstrip-x-band-alumina-n3.toml')); "
        "print(repr(r.worst_margin), r.evaluations, np.array(r.layout.gaps).tobytes().hex())"
    )
    assert _in_fresh_process(code) == _in_fresh_process(code, REFINE_MALLOC="system")


def test_pictures_drawn_in_process_are_the_same_files(tmp_path):
    from refine.cli import main

    problem = str(ROOT / "problems" / "microstrip-x-band-alumina-n3.toml")
    out_inline = tmp_path / "inline"
    code = f"from refine.cli import main; raise SystemExit(main(['design', {problem!r}, '--out', {str(out_inline)!r}]))"
    inline = subprocess.run(
        [sys.executable, "-c", code],
        cwd=ROOT,
        capture_output=True,
        env={**os.environ, "REFINE_PICTURES": "inline"},
    )
    out_workers = tmp_path / "workers"
    workers = main(["design", problem, "--out", str(out_workers)])
    assert inline.returncode == workers == 5  # met on the nominal model only, both ways
    assert sorted(p.name for p in out_inline.iterdir()) == sorted(
        p.name for p in out_workers.iterdir()
    )
    for name in ("layout.gds", "layout-copper.gbr", "layout.kicad_mod"):
        a, b = (out_inline / name).read_bytes(), (out_workers / name).read_bytes()
        assert len(a) == len(b)  # the same artwork (dates inside the files may differ)
