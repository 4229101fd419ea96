"""Shared argument validators.

Every public function of refine checks its inputs with these helpers so that a bad value
always produces the same kind of message: the field's name, the value received and the
allowed range, e.g. ``order = 0 is outside the allowed range 1..15``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray


def _interval(lo: float | None, hi: float | None, lo_open: bool, hi_open: bool) -> str:
    left = "(" if lo_open or lo is None else "["
    right = ")" if hi_open or hi is None else "]"
    lo_s = "-inf" if lo is None else f"{lo:g}"
    hi_s = "inf" if hi is None else f"{hi:g}"
    return f"{left}{lo_s}, {hi_s}{right}"


def real_in_range(
    name: str,
    value: object,
    lo: float | None = None,
    hi: float | None = None,
    *,
    lo_open: bool = False,
    hi_open: bool = False,
) -> float:
    """Return ``value`` as a float after checking it is finite and inside the interval."""
    try:
        x = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a real number, got {value!r}") from None
    if not math.isfinite(x):
        raise ValueError(f"{name} must be finite, got {value!r}")
    bad_lo = lo is not None and (x <= lo if lo_open else x < lo)
    bad_hi = hi is not None and (x >= hi if hi_open else x > hi)
    if bad_lo or bad_hi:
        raise ValueError(
            f"{name} = {x:g} is outside the allowed range {_interval(lo, hi, lo_open, hi_open)}"
        )
    return x


def positive(name: str, value: object) -> float:
    """A finite real number > 0."""
    return real_in_range(name, value, 0.0, None, lo_open=True)


def integer_in_range(name: str, value: object, lo: int, hi: int) -> int:
    """Return ``value`` as an int after checking it is an integer in ``lo..hi``."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        if isinstance(value, (float, np.floating)) and float(value).is_integer():
            value = int(value)
        else:
            raise ValueError(f"{name} must be an integer in {lo}..{hi}, got {value!r}")
    v = int(value)
    if not lo <= v <= hi:
        raise ValueError(f"{name} = {v} is outside the allowed range {lo}..{hi}")
    return v


def finite_array(name: str, value: ArrayLike, *, dtype: type = float) -> NDArray:
    """Return ``value`` as an array after checking every entry is finite."""
    arr: NDArray = np.asarray(value, dtype=dtype)
    if not np.all(np.isfinite(arr)):
        bad = arr[~np.isfinite(arr)].ravel()[0]
        raise ValueError(f"{name} must be finite everywhere, got {bad}")
    return arr


def positive_array(name: str, value: ArrayLike) -> NDArray[np.float64]:
    """A finite real array whose entries are all > 0."""
    arr = finite_array(name, value)
    if arr.size and np.min(arr) <= 0:
        raise ValueError(
            f"{name} must be > 0 everywhere, got {float(np.min(arr)):g} (allowed range (0, inf))"
        )
    return arr


def frequencies(name: str, f: ArrayLike) -> NDArray[np.float64]:
    """A 1-D array of frequencies in hertz, all finite and > 0."""
    arr = positive_array(name, f)
    if arr.ndim != 1 or arr.size == 0:
        raise ValueError(
            f"{name} must be a non-empty 1-D array of frequencies in Hz, got shape {arr.shape}"
        )
    return arr


def one_of(name: str, value: object, allowed: Sequence[str]) -> str:
    """A string from a fixed list of choices."""
    if value not in allowed:
        choices = ", ".join(repr(a) for a in allowed)
        raise ValueError(f"{name} = {value!r} is not one of the allowed values {choices}")
    return str(value)
