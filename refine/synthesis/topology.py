"""Which half-wave topology can build a spec on this substrate for this shop: a comparison.

For the same prototype (family, order, ripple) and centre frequency, each topology's largest
fractional bandwidth whose closed-form couplings the shop's minimum gap reaches (a floor: the
refiner can reach further by changing strip widths), its footprint and its predicted midband
loss:

* **end-coupled, gap-fed**: every inverter a series gap (the largest bandwidth from the
  end-coupled diagnosis, :func:`refine.synthesis.diagnose.max_fbw`); n half-wave resonators in
  a row, n λg/2 long;
* **end-coupled, tapped**: the end inverters replaced by tapped feeds, so only the inner gaps
  limit the bandwidth; the same length;
* **parallel-coupled**: every inverter a quarter-wave coupled section
  (:mod:`refine.synthesis.parallel`); n + 1 sections staggered, about (n + 1) λg/4 long and
  two strip widths plus a spacing wider per section.

The midband loss is Cohn's estimate ΔL = 4.343 Σ g_k / (FBW Q_u) (Cohn, "Dissipative loss in
multiple-coupled-resonator filters", Proc. IRE 47, 1342-1348, 1959) with the unloaded Q of a
half-wave resonator of the feed width from its conductor and dielectric loss, Q_u = β/(2α)
(radiation is not included here): the same resonators in every topology, so the same figure at
the same bandwidth; it says what the bandwidth costs in loss, not which topology loses less.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from refine import validity
from refine.physics.strip import StripMedium
from refine.synthesis.inverters import ElectricalDesign
from refine.synthesis.parallel import max_fbw as parallel_max_fbw

GAP_FED = "end-coupled, gap-fed"
TAPPED = "end-coupled, tapped"
PARALLEL = "parallel-coupled"
TOPOLOGIES = (GAP_FED, TAPPED, PARALLEL)
SEARCH_LIMIT = 0.6  # the widest fractional bandwidth the comparison looks for


@dataclass(frozen=True)
class TopologyFigures:
    """One topology for the spec: the largest bandwidth the shop's minimum gap allows (None when
    not computed), the footprint length along the filter (m) and the predicted midband loss (dB)
    at the asked bandwidth."""

    name: str
    max_fbw: float | None
    length: float
    midband_loss_db: float

    def reaches(self, fbw: float) -> bool:
        return self.max_fbw is not None and self.max_fbw >= fbw * (1 - 1e-9)


@dataclass(frozen=True)
class TopologyComparison:
    """Every topology's figures and the recommendation (the first that reaches the asked
    bandwidth, in the order gap-fed, tapped, parallel-coupled: simplest first; when none does,
    the one that comes closest)."""

    fbw: float
    figures: tuple[TopologyFigures, ...]

    @property
    def recommended(self) -> TopologyFigures:
        for t in self.figures:
            if t.reaches(self.fbw):
                return t
        return max(self.figures, key=lambda t: t.max_fbw or 0.0)

    def sentence(self) -> str:
        def reach(t: TopologyFigures) -> str:
            if t.max_fbw is None:
                return "not computed"
            if t.max_fbw >= SEARCH_LIMIT * (1 - 1e-9):
                return f"{100 * SEARCH_LIMIT:.0f} % or more"
            return f"up to {100 * t.max_fbw:.3g} %"

        parts = [f"{t.name} {reach(t)} ({t.length * 1e3:.1f} mm long)" for t in self.figures]
        best = self.recommended
        verdict = (
            f"recommended: {best.name}"
            if best.reaches(self.fbw)
            else f"none reaches {100 * self.fbw:.3g} %; {best.name} comes closest"
        )
        return (
            f"topologies for {100 * self.fbw:.3g} % with this substrate and minimum gap "
            "(closed-form reach): "
            + "; ".join(parts)
            + f"; {verdict} (midband loss about {self.figures[0].midband_loss_db:.2f} dB in "
            "each at this bandwidth, Cohn's estimate without radiation)"
        )


def midband_loss_db(design: ElectricalDesign, medium: StripMedium, width: float) -> float:
    """Cohn's midband dissipation loss (dB) with Q_u = β/(2α) of a strip of ``width``."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        gamma, _ = medium.line_properties(width, np.array([design.f0]))
    g = complex(np.ravel(gamma)[0])
    if g.real <= 0.0:
        return 0.0
    qu = g.imag / (2.0 * g.real)
    return 4.343 * sum(design.g[1:-1]) / (design.fbw * qu)


def compare(
    design: ElectricalDesign,
    medium: StripMedium,
    min_gap: float,
    feed_width: float,
    gap_fed_max: float,
    tapped_max: float,
) -> TopologyComparison:
    """The three topologies for ``design`` on ``medium`` with a shop minimum gap ``min_gap``;
    the end-coupled largest bandwidths are the caller's (its diagnosis computed them)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        lam = 2.0 * math.pi / float(medium.electrical_length(feed_width, 1.0, design.f0))
        par = parallel_max_fbw(design.g, design.f0, design.z_ref, medium, min_gap, SEARCH_LIMIT)
    n = design.order
    loss = midband_loss_db(design, medium, feed_width)
    return TopologyComparison(
        design.fbw,
        (
            TopologyFigures(GAP_FED, gap_fed_max, n * lam / 2.0, loss),
            TopologyFigures(TAPPED, tapped_max, n * lam / 2.0, loss),
            TopologyFigures(PARALLEL, par, (n + 1) * lam / 4.0, loss),
        ),
    )


__all__ = [
    "GAP_FED",
    "PARALLEL",
    "TAPPED",
    "TOPOLOGIES",
    "TopologyComparison",
    "TopologyFigures",
    "compare",
    "midband_loss_db",
]
