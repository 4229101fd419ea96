"""The refiner's strategies, by name (what ``--strategy`` and a study's axis accept); their
mapping to optimiser algorithms is :mod:`refine.optimise.minimax`'s."""

from __future__ import annotations

import enum


class Strategy(enum.Enum):
    GRADIENT = "gradient"
    DERIVATIVE_FREE = "derivative-free"
    MULTISTART = "multistart"
