"""The physical layout of an end-coupled filter (all lengths in metres)."""

from __future__ import annotations

from dataclasses import dataclass

from refine import _validate as v


@dataclass(frozen=True)
class Layout:
    """Copper of an end-coupled half-wave filter, input to output.

    external : "gap" (feed coupled through an end gap) or "tap" (feed joined to the end
        resonators at a tap point).
    feed_width : width of the input and output feed lines.
    widths : width of each of the n resonators.
    gaps : every series gap in order: n + 1 of them for gap coupling, n - 1 for tap coupling.
    lengths : physical strip length of each resonator, open end to open end.
    taps : for tap coupling, the distance from the outer open end of the first and of the last
        resonator to the tap's centre line; None for gap coupling.
    """

    external: str
    feed_width: float
    widths: tuple[float, ...]
    gaps: tuple[float, ...]
    lengths: tuple[float, ...]
    taps: tuple[float, float] | None = None

    def __post_init__(self) -> None:
        v.one_of("layout.external", self.external, ("gap", "tap"))
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
        want = n + 1 if self.external == "gap" else n - 1
        if len(self.gaps) != want:
            raise ValueError(
                f"layout with {self.external} coupling and {n} resonators needs {want} gaps, "
                f"got {len(self.gaps)}"
            )
        if self.external == "tap":
            if self.taps is None or len(self.taps) != 2:
                raise ValueError("layout.taps must give two tap positions for tap coupling")
            taps = (float(self.taps[0]), float(self.taps[1]))
            for i, (t, ln) in enumerate(
                zip(taps, (self.lengths[0], self.lengths[-1]), strict=True)
            ):
                v.real_in_range(f"layout.taps[{i}]", t, 0.0, ln, lo_open=True, hi_open=True)
            object.__setattr__(self, "taps", taps)
        elif self.taps is not None:
            raise ValueError("layout.taps must be None for gap coupling")

    @property
    def order(self) -> int:
        return len(self.widths)

    @property
    def total_length(self) -> float:
        """End-to-end length of the resonators and gaps (feeds excluded)."""
        return sum(self.lengths) + sum(self.gaps)
