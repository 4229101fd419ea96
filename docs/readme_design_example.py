"""Regenerate the README's example run of `refine design` from the command itself.

    python docs/readme_design_example.py          # rewrites the block in README.md

Runs the README's main command on its bundled problem into a temporary folder and puts the
console output from the status line to the end of the dimension table between the markers
``<!-- design-example:start -->`` and ``<!-- design-example:end -->`` in README.md, so the
figures the README shows are the ones the code gives (the wall time varies from run to run).
The run's response and layout pictures are copied to ``docs/x-band-response.png`` and
``docs/x-band-layout.png``, which the README shows.
"""

from __future__ import annotations

import contextlib
import io
import re
import shutil
import sys
import tempfile
from pathlib import Path

from refine.cli import main

ROOT = Path(__file__).resolve().parent.parent
PROBLEM = "problems/microstrip-x-band-alumina-n3.toml"
START, END = "<!-- design-example:start -->", "<!-- design-example:end -->"


def example_output() -> str:
    """The console lines of the example run, status line to the last dimension; its four
    pictures are copied into docs/."""
    buf = io.StringIO()
    with tempfile.TemporaryDirectory() as tmp, contextlib.redirect_stdout(buf):
        out = Path(tmp) / "out"
        code = main(["design", str(ROOT / PROBLEM), "--out", str(out)])
        if code not in (0, 5):  # met, or met on the nominal model only
            raise SystemExit(f"the example run exited {code}; the README block was not changed")
        for name, target in (
            ("response.png", "x-band-response.png"),
            ("layout.png", "x-band-layout.png"),
            ("passband.png", "x-band-passband.png"),
            ("smith.png", "x-band-smith.png"),
        ):
            shutil.copyfile(out / name, ROOT / "docs" / target)
    text = buf.getvalue()
    start = text.index("status:")
    end = text.index("\nwrote ", start)
    return text[start:end].rstrip("\n")


def main_() -> int:
    readme = ROOT / "README.md"
    text = readme.read_text(encoding="utf-8")
    block = f"{START}\n```\n{example_output()}\n```\n{END}"
    new, n = re.subn(re.escape(START) + r".*?" + re.escape(END), lambda _: block, text, flags=re.S)
    if n != 1:
        raise SystemExit(f"README.md must hold the markers {START} ... {END} once")
    readme.write_text(new, encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main_())
