"""Feasibility diagnosis: can the shop's rules give the couplings the design needs, and if not,
what would.

Before refining, every coupling the closed-form design needs (J/Y0 at f0) is compared with the
strongest the fab rules allow: the coupling of a gap at the minimum gap width, over the strip
widths the refiner may use. After refining, a design that still misses the mask is reported
with its best margin, the binding constraints, and quantified remedies:

* the largest fractional bandwidth this substrate and minimum gap support at this order and
  ripple (all J/Y0 scale with the bandwidth: J_01 ∝ sqrt(FBW), J_j,j+1 ∝ FBW);
* the coupling the end gap would give on a thinner substrate, or with wider end resonators;
* a tapped feed, when the end gaps are what fails.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, replace

import numpy as np

from refine import validity
from refine._roots import largest_passing
from refine.physics.strip import StripMedium
from refine.spec.coupling import Coupling
from refine.spec.fab import FabRules
from refine.synthesis import topology
from refine.synthesis.inverters import ElectricalDesign, inverter_j
from refine.synthesis.realise import gap_inverter, tap_angle
from refine.synthesis.topology import TopologyComparison

WIDTH_FACTORS = (1.0, 1.5, 2.0, 3.0)  # resonator widths tried, as multiples of the feed width


@dataclass(frozen=True)
class CouplingCheck:
    """Coupling k: J/Y0 needed at f0 vs the most the fab rules allow (at the minimum gap)."""

    index: int
    j_needed: float
    j_max: float
    width_at_max: float

    @property
    def ok(self) -> bool:
        return self.j_max >= self.j_needed

    def __str__(self) -> str:
        verdict = "ok" if self.ok else "NOT reachable"
        return (
            f"coupling {self.index},{self.index + 1}: needs J/Y0 = {self.j_needed:.4f}, can give at "
            f"most {self.j_max:.4f} (minimum gap, resonator width {self.width_at_max * 1e6:.0f} um): {verdict}"
        )


@dataclass(frozen=True)
class Diagnosis:
    """Per-coupling checks and quantified remedies."""

    couplings: tuple[CouplingCheck, ...]
    remedies: tuple[str, ...]
    topologies: TopologyComparison | None = None  # when a coupling is out of reach

    @property
    def couplings_reachable(self) -> bool:
        return all(c.ok for c in self.couplings)

    @property
    def end_couplings_reachable(self) -> bool:
        return self.couplings[0].ok and self.couplings[-1].ok


def _j_at(
    medium: StripMedium, gap_model: str, w_in: float, w_out: float, s: float, f0: float
) -> float:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        z = float(medium.dispersive(w_out, np.array([f0]))[0][..., 0])
        return gap_inverter(medium, gap_model, w_in, w_out, s, f0, 1.0 / z)[0]


def _j_max(
    medium,
    gap_model,
    feed_w,
    min_gap,
    f0,
    end: bool,
    fab: FabRules | None,
    widths: tuple[float, float] | None = None,
) -> tuple[float, float]:
    """The largest J/Y0 a gap at the minimum can give, and the resonator width where: over the
    resonator widths the refiner may use, ``widths`` (lowest, highest; default the multiples
    :data:`WIDTH_FACTORS` of the feed width, inside the fab's minimum width)."""
    if widths is None:
        tried = [feed_w * fac for fac in WIDTH_FACTORS]
        if fab is not None and fab.min_width is not None:
            tried = [w for w in tried if w >= fab.min_width] or [fab.min_width]
    else:
        lo, hi = widths
        tried = sorted({lo, hi, *(w for w in (feed_w * f for f in WIDTH_FACTORS) if lo <= w <= hi)})
    best_j, best_w = -math.inf, tried[0]
    for w in tried:
        j = _j_at(medium, gap_model, feed_w if end else w, w, min_gap, f0)
        if j > best_j:
            best_j, best_w = j, w
    return best_j, best_w


def max_fbw(design: ElectricalDesign, j_limits: list[float], hi: float | None = None) -> float:
    """Largest fractional bandwidth whose J/Y0 all stay within ``j_limits`` (bisection), up to
    ``hi`` (default: the design's own bandwidth)."""
    g = np.array(design.g)

    def ok(fbw: float) -> bool:
        return bool(np.all(inverter_j(g, fbw) <= np.array(j_limits)))

    return largest_passing(ok, min(design.fbw if hi is None else hi, 0.99), steps=60)


def diagnose(
    design: ElectricalDesign,
    medium: StripMedium,
    fab: FabRules,
    gap_model: str,
    feed_width: float,
    external: Coupling = Coupling.GAP,
    widths: tuple[float, float] | None = None,
) -> Diagnosis:
    """Compare every needed coupling with the most the fab rules can give, and list remedies.
    ``widths`` are the lowest and highest resonator widths the refiner may use (equal when
    the resonators are held at one width); the couplings' best widths are sought there."""
    f0, n = design.f0, design.order
    checks = []
    for k, j in enumerate(design.j_norm):
        end = k in (0, n)
        if external is Coupling.TAP and end:
            continue
        jm, wm = _j_max(medium, gap_model, feed_width, fab.min_gap, f0, end, fab, widths)
        checks.append(CouplingCheck(k, j, jm, wm))
    remedies: list[str] = []
    limits = []
    for k in range(n + 1):
        found = [c for c in checks if c.index == k]
        limits.append(found[0].j_max if found else 1.0)
    fbw_max = max_fbw(design, limits)
    failing = [c for c in checks if not c.ok]
    if failing:
        remedies.append(
            f"this substrate and a {fab.min_gap * 1e6:.0f} um minimum gap support at most "
            f"{100 * fbw_max:.3g} % fractional bandwidth at order {n} with "
            f"{external} coupling (asked: {100 * design.fbw:.3g} %)"
        )
        ends_fail = any(c.index in (0, n) for c in failing)
        inner_fail = any(0 < c.index < n for c in failing)
        sub = medium.substrate
        if ends_fail:
            thin = replace(
                medium,
                substrate=replace(
                    sub,
                    height=sub.height / 2,
                    metal_thickness=min(sub.metal_thickness, sub.height / 8),
                ),
            )
            try:
                w_thin = thin.width_for_z0(design.z_ref, f0)
                j_thin = _j_max(thin, gap_model, w_thin, fab.min_gap, f0, True, fab, None)[0]
                j_now = checks[0].j_max
                helps = "helps" if j_thin > j_now else "does not help"
                remedies.append(
                    f"a thinner substrate {helps}: on {sub.height * 0.5e3:.3g} mm of the same eps_r the "
                    f"end gap at the minimum gives J/Y0 = {j_thin:.4f} (now {j_now:.4f}, needs "
                    f"{design.j_norm[0]:.4f})"
                )
            except ValueError:
                pass
            if external is Coupling.GAP:
                z_res = float(medium.dispersive(feed_width, np.array([f0]))[0][..., 0])
                ang = tap_angle(design, z_res)
                if ang is not None:
                    beta = float(medium.electrical_length(feed_width, 1.0, f0))
                    remedies.append(
                        f'use a tapped feed (external = "tap"): the end couplings then need no gap; '
                        f"the tap sits about {ang / beta * 1e3:.2f} mm from the outer open end"
                    )
        if inner_fail:
            worst = min((c for c in failing if 0 < c.index < n), key=lambda c: c.j_max / c.j_needed)
            remedies.append(
                f"inner coupling {worst.index},{worst.index + 1} reaches only "
                f"{100 * worst.j_max / worst.j_needed:.0f} % of what it needs even with resonators "
                f"{worst.width_at_max * 1e6:.0f} um wide; a shop with a smaller minimum gap, or a "
                f"narrower bandwidth (at most {100 * fbw_max:.3g} %), is needed"
            )
        if ends_fail and not inner_fail and external is Coupling.TAP:
            remedies.append("the tapped feed removes the end gaps; the inner ones are reachable")
        topologies = _compare_topologies(
            design, medium, fab, gap_model, feed_width, external, widths, limits
        )
        if topologies is not None:
            remedies.append(topologies.sentence())
        return Diagnosis(tuple(checks), tuple(remedies), topologies)
    return Diagnosis(tuple(checks), tuple(remedies))


def _compare_topologies(
    design: ElectricalDesign,
    medium: StripMedium,
    fab: FabRules,
    gap_model: str,
    feed_width: float,
    external: Coupling,
    widths: tuple[float, float] | None,
    limits: list[float],
) -> TopologyComparison | None:
    """The topology comparison for a spec some coupling of which is out of reach (None when the
    medium has no coupled-line model)."""
    n = design.order
    inner = [1.0, *limits[1:n], 1.0]
    ends = list(limits)
    if external is Coupling.TAP:  # the end gaps were not checked: their limits for the gap-fed
        for k in (0, n):
            ends[k] = _j_max(
                medium, gap_model, feed_width, fab.min_gap, design.f0, True, fab, widths
            )[0]
    try:
        return topology.compare(
            design,
            medium,
            fab.min_gap,
            feed_width,
            max_fbw(design, ends, hi=topology.SEARCH_LIMIT),
            max_fbw(design, inner, hi=topology.SEARCH_LIMIT),
        )
    except TypeError:  # a medium without a coupled-line model
        return None
