"""One mask applied to several designs (or several models of one design) laid end to end on one
frequency axis: the constraint set of yield centring and of robust refinement."""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from refine.spec.mask import Mask


class StackedMask:
    """A mask applied to several designs laid end to end on one axis of length ``copies × nf``:
    constraints per copy, and one region per copy and mask region (so that aggregation is per
    sample)."""

    def __init__(self, mask: Mask, f: NDArray, copies: int):
        self.mask, self.f, self.copies = mask, f, copies

    def region_indices(self, f_all: NDArray) -> list[NDArray[np.intp]]:
        n = self.f.size
        out = []
        for k in range(self.copies):
            for idx in self.mask.region_indices(self.f):
                out.append(idx + k * n)
        return out

    def constraints(
        self,
        f_all: NDArray,
        s11: NDArray,
        s21: NDArray,
        ds11: NDArray | None = None,
        ds21: NDArray | None = None,
    ) -> tuple[NDArray, NDArray | None]:
        n = self.f.size
        gs: list[NDArray] = []
        jacs: list[NDArray] = []
        for k in range(self.copies):
            sl = slice(k * n, (k + 1) * n)
            g, jac = self.mask.constraints(
                self.f,
                s11[sl],
                s21[sl],
                None if ds11 is None else ds11[:, sl],
                None if ds21 is None else ds21[:, sl],
            )
            gs.append(g)
            if jac is not None:
                jacs.append(jac)
        g = np.concatenate(gs)
        return g, (None if ds11 is None else np.concatenate(jacs, axis=0))
