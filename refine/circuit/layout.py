"""The physical layout of a half-wave filter (all lengths in metres): end-coupled
(:class:`Layout`) or parallel-coupled (:class:`ParallelLayout`)."""

from __future__ import annotations

import math
from dataclasses import dataclass

from refine import _validate as v
from refine.spec.coupling import Coupling


@dataclass(frozen=True)
class Layout:
    """Copper of an end-coupled half-wave filter, input to output.

    external : :class:`Coupling` ``GAP`` (feed coupled through an end gap) or ``TAP`` (feed
        joined to the end resonators at a tap point); the words "gap" and "tap" are accepted.
    feed_width : width of the input and output feed lines.
    widths : width of each of the n resonators.
    gaps : every series gap in order: n + 1 of them for gap coupling, n - 1 for tap coupling.
    lengths : physical strip length of each resonator, open end to open end.
    taps : for tap coupling, the distance from the outer open end of the first and of the last
        resonator to the tap's centre line; None for gap coupling.
    """

    external: Coupling
    feed_width: float
    widths: tuple[float, ...]
    gaps: tuple[float, ...]
    lengths: tuple[float, ...]
    taps: tuple[float, float] | None = None

    def __post_init__(self) -> None:
        v.one_of("layout.external", self.external, tuple(c.value for c in Coupling))
        object.__setattr__(self, "external", Coupling(self.external))
        v.positive("layout.feed_width", self.feed_width)
        for name in ("widths", "gaps", "lengths"):
            vals = tuple(float(x) for x in getattr(self, name))
            object.__setattr__(self, name, vals)
            for i, x in enumerate(vals):
                v.positive(f"layout.{name}[{i}]", x)
        n = len(self.widths)
        if n < 1 or len(self.lengths) != n:
            raise ValueError(
                f"layout needs one length per resonator: {n} widths and {len(self.lengths)} lengths"
            )
        want = self.external.n_gaps(n)
        if len(self.gaps) != want:
            raise ValueError(
                f"layout with {self.external} coupling and {n} resonators needs {want} gaps, "
                f"got {len(self.gaps)}"
            )
        if self.external is Coupling.TAP:
            if self.taps is None or len(self.taps) != 2:
                raise ValueError("layout.taps must give two tap positions for tap coupling")
            taps = (float(self.taps[0]), float(self.taps[1]))
            for i, (t, ln) in enumerate(
                zip(taps, (self.lengths[0], self.lengths[-1]), strict=True)
            ):
                v.real_in_range(f"layout.taps[{i}]", t, 0.0, ln, lo_open=True, hi_open=True)
            if n == 1 and taps[0] + taps[1] >= self.lengths[0]:
                raise ValueError(
                    f"layout.taps = ({taps[0]:g}, {taps[1]:g}) m: on a single resonator of length "
                    f"{self.lengths[0]:g} m the two taps must leave line between them "
                    "(taps[0] + taps[1] < lengths[0])"
                )
            object.__setattr__(self, "taps", taps)
        elif self.taps is not None:
            raise ValueError("layout.taps must be None for gap coupling")

    @property
    def order(self) -> int:
        return len(self.widths)

    @property
    def is_mirror(self) -> bool:
        """Whether the layout is its own mirror image (widths, gaps, lengths, taps)."""

        def same(a: tuple[float, ...], b: tuple[float, ...]) -> bool:
            return all(
                math.isclose(x, y, rel_tol=1e-12, abs_tol=1e-12) for x, y in zip(a, b, strict=True)
            )

        sym = (
            same(self.widths, self.widths[::-1])
            and same(self.gaps, self.gaps[::-1])
            and same(self.lengths, self.lengths[::-1])
        )
        if self.taps is not None:
            sym = sym and math.isclose(self.taps[0], self.taps[1], rel_tol=1e-12)
        return sym

    @property
    def total_length(self) -> float:
        """End-to-end length of the resonators and gaps (feeds excluded)."""
        return sum(self.lengths) + sum(self.gaps)


@dataclass(frozen=True)
class ParallelLayout:
    """Copper of a parallel-coupled (edge-coupled) half-wave filter, input to output: n + 1
    coupled sections, each two equal strips side by side.

    feed_width : width of the input and output feed lines.
    widths : strip width of each section.
    spacings : edge-to-edge spacing of the two strips of each section.
    lengths : physical length of each section (its strips' overlap).
    feed_stub : length of strip at the end section's width between each feed and its section
        (the feed's width step sits that far out, so that a feed wider than the section's
        strip keeps its distance from the next row of copper); 0 for none.

    Resonator k (1..n) is the second strip of section k joined to the first strip of section
    k + 1, half a wavelength end to end.
    """

    feed_width: float
    widths: tuple[float, ...]
    spacings: tuple[float, ...]
    lengths: tuple[float, ...]
    feed_stub: float = 0.0

    def __post_init__(self) -> None:
        v.positive("layout.feed_width", self.feed_width)
        for name in ("widths", "spacings", "lengths"):
            vals = tuple(float(x) for x in getattr(self, name))
            object.__setattr__(self, name, vals)
            for i, x in enumerate(vals):
                v.positive(f"layout.{name}[{i}]", x)
        v.real_in_range("layout.feed_stub", self.feed_stub, 0.0, math.inf)
        n = len(self.widths)
        if n < 2 or len(self.spacings) != n or len(self.lengths) != n:
            raise ValueError(
                "a parallel-coupled layout needs at least two sections and one width, spacing "
                f"and length per section: got {n} widths, {len(self.spacings)} spacings and "
                f"{len(self.lengths)} lengths"
            )

    @property
    def order(self) -> int:
        """Number of resonators (one fewer than the sections)."""
        return len(self.widths) - 1

    @property
    def total_length(self) -> float:
        """End-to-end length along the filter's axis (sections and feed stubs, feeds excluded)."""
        return sum(self.lengths) + 2.0 * self.feed_stub
