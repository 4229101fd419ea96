"""Shared paths and fixtures of the test suite.

``PROBLEMS`` is every bundled problem file; :func:`refined` refines one of them once per test
session (the problem-set tests and the golden-output test share the result). Tests that take
more than a few seconds carry the ``slow`` marker: ``pytest -m "not slow"`` is the quick run.
"""

from __future__ import annotations

import re
import warnings
from functools import cache
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
DATA = ROOT / "tests" / "data"
PROBLEMS = sorted((ROOT / "problems").glob("*.toml"))


def problem_path(stem: str) -> Path:
    """The bundled problem file called ``stem``."""
    return ROOT / "problems" / f"{stem}.toml"


def expected_outcome(path: Path) -> str:
    """The outcome a bundled problem file promises in its header ("feasible" or "infeasible")."""
    m = re.search(r"Expected outcome: (\w+)", path.read_text())
    assert m is not None, f"{path.name} states no expected outcome"
    return m.group(1)


def expected_status(path: Path) -> str:
    """The status a feasible bundled problem file promises ("met", or "met on the nominal model
    only" when its mask does not hold at every corner of the circuit model's uncertainty)."""
    m = re.search(r"Expected status: ([a-z ]+)", path.read_text())
    return "met" if m is None else m.group(1).strip()


@cache
def refined(path: Path):
    """The refiner's result for a bundled problem file (computed once per session)."""
    from refine import design, load_problem
    from refine.validity import ModelRangeWarning

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelRangeWarning)  # listed in the report instead
        return design(load_problem(path))


def fd_gradient_check(model, p, rel=1e-5):
    """A model's exact gradient of S11 and S21 against central differences (relative step 1e-6)."""
    r = model.response(p, True)
    for i in range(len(p)):
        h = 1e-6 * p[i]
        up, dn = p.copy(), p.copy()
        up[i] += h
        dn[i] -= h
        for ours, attr in ((r.ds21[i], "s21"), (r.ds11[i], "s11")):
            fd = (getattr(model.response(up), attr) - getattr(model.response(dn), attr)) / (2 * h)
            np.testing.assert_allclose(
                ours, fd, rtol=0, atol=rel * np.max(np.abs(fd)), err_msg=model.names[i]
            )


def microstrip_problem(name: str = "a-test-problem", eps_r: float = 9.8, **tables) -> dict:
    """A small valid microstrip problem as parsed TOML (our own scenario: N=3, 5 % at 10 GHz
    on 0.635 mm); ``tables`` add or replace top-level tables."""
    return {
        "name": name,
        "response": {
            "family": "chebyshev",
            "ripple_db": 0.1,
            "order": 3,
            "center": "10 GHz",
            "fractional_bandwidth": 0.05,
            "z_ref": "50 ohm",
        },
        "medium": {"kind": "microstrip", "eps_r": eps_r, "height": "0.635 mm"},
        "fab": {"min_gap": "20 um"},
        "mask": {"passband_return_loss_db": 15.0},
        **tables,
    }
