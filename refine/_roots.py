"""A bracketed root of a smooth monotone scalar function, without scipy.optimize.

The models' inversions (strip width for an impedance, a coupling's gap) are smooth and
monotone on a bracket; importing ``scipy.optimize`` for them cost 0.4–0.5 s at the start of
every command. The Illinois variant of regula falsi (Dowell & Jarratt, BIT 11, 1971) keeps the
bracket and converges superlinearly on such functions; ``tests/test_media.py`` checks it
against scipy's ``brentq``.
"""

from __future__ import annotations

import math
from collections.abc import Callable


def bracketed_root(
    fn: Callable[[float], float],
    a: float,
    b: float,
    xtol: float = 1e-12,
    rtol: float = 1e-12,
    max_iterations: int = 200,
) -> float:
    """x in [a, b] with fn(x) = 0, to within ``xtol + rtol·|x|``; fn(a) and fn(b) must have
    opposite signs (a ValueError says so otherwise)."""
    fa, fb = fn(a), fn(b)
    if fa == 0.0:
        return a
    if fb == 0.0:
        return b
    if math.copysign(1.0, fa) == math.copysign(1.0, fb):
        raise ValueError(f"no sign change on [{a:g}, {b:g}]: f = {fa:g}, {fb:g}")
    side = 0
    x = a
    for _ in range(max_iterations):
        x = (a * fb - b * fa) / (fb - fa)
        if not a < x < b and not b < x < a:  # round-off at a converged bracket
            x = 0.5 * (a + b)
        fx = fn(x)
        if fx == 0.0 or abs(b - a) <= 2.0 * (xtol + rtol * abs(x)):
            return x
        if math.copysign(1.0, fx) == math.copysign(1.0, fb):
            b, fb = x, fx
            if side == 1:
                fa *= 0.5  # Illinois: halve the stale end's value
            side = 1
        else:
            a, fa = x, fx
            if side == -1:
                fb *= 0.5
            side = -1
    return x


def largest_passing(ok: Callable[[float], bool], hi: float, steps: int = 40) -> float:
    """The largest x in [0, hi] for which ``ok(x)`` holds, by bisection (``ok`` assumed to hold
    below some x and fail above it); ``hi`` itself when it passes, 0 when nothing does."""
    if ok(hi):
        return hi
    lo = 0.0
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if ok(mid) else (lo, mid)
    return lo
