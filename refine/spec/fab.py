"""Fabrication rules of a shop: the hard limits a returned layout must obey."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v


@dataclass(frozen=True)
class FabRules:
    """Shop rules, all lengths in metres.

    min_gap : smallest etchable gap (> 0).
    min_width : narrowest etchable strip, or None for no rule.
    grid : dimension grid the shop draws on, or None.
    gap_tolerance, width_tolerance : 1-sigma etch tolerances, or None (used for yield).
    max_total_length : longest allowed filter (end to end), or None.
    etch_bias : what the shop's etch removes from every copper edge (>= 0, below half the
        minimum gap): the artwork is drawn that much larger per edge, strips 2·etch_bias wider
        and gaps 2·etch_bias narrower; every other dimension in refine is as built.
    """

    min_gap: float
    min_width: float | None = None
    grid: float | None = None
    gap_tolerance: float | None = None
    width_tolerance: float | None = None
    max_total_length: float | None = None
    etch_bias: float = 0.0

    def __post_init__(self) -> None:
        v.positive("fab.min_gap", self.min_gap)
        for name in ("min_width", "grid", "max_total_length"):
            val = getattr(self, name)
            if val is not None:
                v.positive(f"fab.{name}", val)
        v.real_in_range("fab.etch_bias", self.etch_bias, 0.0, 0.5 * self.min_gap, hi_open=True)
        for name in ("gap_tolerance", "width_tolerance"):
            val = getattr(self, name)
            if val is not None:
                v.real_in_range(f"fab.{name}", val, 0.0, None)

    def on_grid(self, x: ArrayLike) -> NDArray[np.float64]:
        """``x`` (metres) rounded to the nearest point of the shop's grid (unchanged without
        a grid); the one rounding rule of refine."""
        x = np.asarray(x, float)
        return x if self.grid is None else np.round(x / self.grid) * self.grid
