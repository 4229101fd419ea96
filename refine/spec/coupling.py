"""How the feed lines couple to the end resonators, and what that means for a layout's gaps.

==========  =====================================================================  ===========
coupling    circuit, input to output                                               gaps
==========  =====================================================================  ===========
``gap``     feed · gap 0 · resonator 1 · gap 1 · ... · resonator n · gap n · feed  n + 1
``tap``     feed tapped onto resonator 1 · gap 1 · ... · gap n-1 · resonator n     n - 1
==========  =====================================================================  ===========

Gaps are labelled by the inverter they realise (``gap k`` sits between resonators k and k+1,
resonator 0 and n+1 being the feeds), so a tapped layout's first gap is ``gap 1``.
"""

from __future__ import annotations

import enum


class Coupling(enum.StrEnum):
    """The external coupling of an end-coupled filter (its value is the problem-file word)."""

    GAP = "gap"
    TAP = "tap"

    def n_gaps(self, order: int) -> int:
        """Number of series gaps of a filter of ``order`` resonators."""
        return order + 1 if self is Coupling.GAP else order - 1

    @property
    def first_gap(self) -> int:
        """Label of the first series gap (0 for gap coupling, 1 for a tapped feed)."""
        return 0 if self is Coupling.GAP else 1

    def gap_label(self, position: int) -> int:
        """Label k of the gap at ``position`` in a layout's gap list."""
        return self.first_gap + position

    def sides(self, position: int, order: int) -> tuple[int | None, int | None]:
        """Resonator index (0-based) on the input and the output side of the gap at
        ``position``; None where the side is a feed line."""
        k = self.gap_label(position)
        return (k - 1 if k > 0 else None, k if k < order else None)
