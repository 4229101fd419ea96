"""Rewrite one generated block of README.md: the text between ``<!-- NAME:start -->`` and
``<!-- NAME:end -->``. Used by the benchmarks' ``--readme`` options, so that every figure the
README quotes is written by the script that measured it."""

from __future__ import annotations

from pathlib import Path

README = Path(__file__).resolve().parent.parent / "README.md"


def replace_block(name: str, text: str) -> None:
    """Put ``text`` in the README's block ``name``; refuse (nothing written) without one."""
    old = README.read_text()
    a, b = f"<!-- {name}:start -->", f"<!-- {name}:end -->"
    if a not in old or b not in old:
        raise SystemExit(f"README.md has no {a} ... {b} block; nothing was changed")
    head, rest = old.split(a, 1)
    _, tail = rest.split(b, 1)
    README.write_text(f"{head}{a}\n{text}\n{b}{tail}")
