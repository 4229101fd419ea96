"""refine's version: the one place it is written (pyproject.toml reads it from here)."""

VERSION = "0.2.0"
