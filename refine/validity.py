"""Validity ranges of closed-form models.

Every closed-form model in refine states the range its authors fitted or verified it over.
Outside it the model still returns a finite value (it extrapolates the formula, or clamps as its
docstring says) and raises a :class:`ModelRangeWarning`; :func:`range_violations` lets a design
report list which dimensions are outside which model's range without raising anything.
"""

from __future__ import annotations

import contextlib
import warnings
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike


class ModelRangeWarning(UserWarning):
    """A closed-form model was evaluated outside its stated validity range."""


@dataclass(frozen=True)
class RangeViolation:
    """``quantity`` of ``model`` took values in [lowest, highest], outside [lo, hi]."""

    model: str
    quantity: str
    lowest: float
    highest: float
    lo: float | None
    hi: float | None

    def __str__(self) -> str:
        lo = "-inf" if self.lo is None else f"{self.lo:g}"
        hi = "inf" if self.hi is None else f"{self.hi:g}"
        span = (
            f"{self.lowest:.4g}"
            if self.lowest == self.highest
            else f"{self.lowest:.4g}..{self.highest:.4g}"
        )
        return f"{self.model}: {self.quantity} = {span} is outside its validity range [{lo}, {hi}]"


def outside(
    model: str, quantity: str, values: ArrayLike, lo: float | None, hi: float | None
) -> RangeViolation | None:
    """The violation, if any value of ``values`` lies outside [lo, hi]; otherwise None."""
    x = np.asarray(values, dtype=float)
    if x.size == 0:
        return None
    xmin, xmax = float(np.min(x)), float(np.max(x))
    if (lo is not None and xmin < lo * (1 - 1e-12)) or (hi is not None and xmax > hi * (1 + 1e-12)):
        return RangeViolation(model, quantity, xmin, xmax, lo, hi)
    return None


_quiet = [0]  # depth of nested `unchecked` blocks


@contextlib.contextmanager
def unchecked() -> Iterator[None]:
    """Skip range checks inside the block: the optimiser's inner loop, whose every point is
    checked again on the verification grid, where the warnings and the report's range list come
    from. Not thread-safe by design: refine evaluates in one thread per process."""
    _quiet[0] += 1
    try:
        yield
    finally:
        _quiet[0] -= 1


def check(
    model: str,
    quantity: str,
    values: ArrayLike,
    lo: float | None,
    hi: float | None,
    *,
    stacklevel: int = 3,
) -> RangeViolation | None:
    """Like :func:`outside`, and warn with :class:`ModelRangeWarning` when violated (nothing is
    checked inside an :func:`unchecked` block)."""
    if _quiet[0]:
        return None
    v = outside(model, quantity, values, lo, hi)
    if v is not None:
        warnings.warn(str(v), ModelRangeWarning, stacklevel=stacklevel)
    return v


def warn(message: str, *, stacklevel: int = 3) -> None:
    """Raise a :class:`ModelRangeWarning` with ``message`` (nothing inside :func:`unchecked`):
    for a model that clamps or extrapolates a value rather than a range its inputs left."""
    if not _quiet[0]:
        warnings.warn(message, ModelRangeWarning, stacklevel=stacklevel)


class InternalError(RuntimeError):
    """Something refine computed is not a number where a number must be: a defect of refine,
    never a verdict. The command reports it (exit 3) instead of printing a NaN status."""


def require_finite(what: str, values: ArrayLike) -> None:
    """Raise :class:`InternalError` naming ``what`` if any of ``values`` is NaN or infinite."""
    arr = np.asarray(values)
    if not np.all(np.isfinite(arr)):
        bad = int(np.size(arr) - np.count_nonzero(np.isfinite(arr)))
        raise InternalError(
            f"{what}: {bad} of {np.size(arr)} values are not finite numbers; this is a defect "
            "of refine, not a verdict on the design (please report it with the problem file)"
        )
