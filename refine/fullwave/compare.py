"""Field-solver response against the circuit model: the figures an engineer reads first.

centre : midpoint of the 3 dB points of |S21| around the best transmission (Hz);
bandwidth : distance between those points (Hz); worst in-band return loss over the mask's
passband (dB); rejection at each stopband's edge nearest the passband (dB). All from the
sampled response, the 3 dB points by linear interpolation in dB.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from refine.spec.mask import Mask, MaskResult, Stopband


def _db(x: NDArray) -> NDArray:
    return -20.0 * np.log10(np.maximum(np.abs(x), 1e-15))


def _crossing(f: NDArray, il: NDArray, k: int, step: int, level: float) -> float:
    """First frequency, walking from index k in direction step, where il rises past level."""
    j = k
    while 0 <= j + step < len(f):
        if il[j + step] >= level:
            a, b = il[j], il[j + step]
            t = (level - a) / (b - a) if b != a else 0.0
            return float(f[j] + t * (f[j + step] - f[j]))
        j += step
    return math.nan


@dataclass(frozen=True)
class BandFigures:
    centre: float
    bandwidth: float
    worst_return_loss: float
    rejection: tuple[tuple[str, float, float], ...]  # (stopband label, edge Hz, loss dB)


def band_figures(f: NDArray, s11: NDArray, s21: NDArray, mask: Mask) -> BandFigures:
    f = np.asarray(f, float)
    il = _db(s21)
    rl = _db(s11)
    inband = (f >= mask.passband_start) & (f <= mask.passband_stop)
    k = int(np.flatnonzero(inband)[np.argmin(il[inband])]) if inband.any() else int(np.argmin(il))
    level = il[k] + 3.0
    lo, hi = _crossing(f, il, k, -1, level), _crossing(f, il, k, +1, level)
    rej = []
    for sb in mask.stopbands:
        edge = sb.stop if sb.stop <= mask.passband_start else sb.start
        rej.append((sb.label, edge, float(np.interp(edge, f, il))))
    worst_rl = float(rl[inband].min()) if inband.any() else math.nan
    return BandFigures(0.5 * (lo + hi), hi - lo, worst_rl, tuple(rej))


def clip_mask(mask: Mask, lo: float, hi: float) -> Mask:
    """The mask with its stopbands cut to [lo, hi] (a stopband wholly outside is dropped)."""
    bands = []
    for sb in mask.stopbands:
        a, b = max(sb.start, lo), min(sb.stop, hi)
        if b > a:
            bands.append(Stopband(a, b, sb.rejection_db))
    return Mask(
        mask.passband_start,
        mask.passband_stop,
        mask.min_return_loss_db,
        mask.max_ripple_db,
        mask.max_insertion_loss_db,
        tuple(bands),
    )


@dataclass(frozen=True)
class Comparison:
    """Field solver (em) against the circuit model (model) on the same frequencies."""

    em: BandFigures
    model: BandFigures
    em_mask: MaskResult
    model_mask: MaskResult

    @property
    def centre_shift(self) -> float:
        return self.em.centre - self.model.centre

    @property
    def bandwidth_ratio(self) -> float:
        return self.em.bandwidth / self.model.bandwidth

    def rows(self) -> list[tuple[str, str, str]]:
        """(figure, EM, circuit model) rows, formatted."""
        out = [
            ("centre (3 dB) GHz", f"{self.em.centre / 1e9:.4f}", f"{self.model.centre / 1e9:.4f}"),
            (
                "3 dB bandwidth MHz",
                f"{self.em.bandwidth / 1e6:.1f}",
                f"{self.model.bandwidth / 1e6:.1f}",
            ),
            (
                "worst in-band return loss dB",
                f"{self.em.worst_return_loss:.2f}",
                f"{self.model.worst_return_loss:.2f}",
            ),
        ]
        for (label, edge, a), (_, _, b) in zip(
            self.em.rejection, self.model.rejection, strict=True
        ):
            out.append((f"loss at {edge / 1e9:.4g} GHz ({label}) dB", f"{a:.2f}", f"{b:.2f}"))
        out.append(
            (
                "worst mask margin dB",
                f"{self.em_mask.worst_margin:+.2f}",
                f"{self.model_mask.worst_margin:+.2f}",
            )
        )
        return out

    def summary_line(self) -> str:
        return (
            f"centre shift {self.centre_shift / 1e6:+.1f} MHz "
            f"({100 * self.centre_shift / self.model.centre:+.2f} %), bandwidth ratio "
            f"{self.bandwidth_ratio:.3f}, worst in-band return loss "
            f"{self.em.worst_return_loss:.2f} dB (model {self.model.worst_return_loss:.2f} dB), "
            f"mask {'met' if self.em_mask.passed else 'NOT met'} on the field solver "
            f"(worst margin {self.em_mask.worst_margin:+.2f} dB)"
        )


def compare(f: NDArray, s_em: NDArray, s_model: NDArray, mask: Mask) -> Comparison:
    """Figures and mask verdicts of both responses (``(nf, 2, 2)`` each) on the band ``f``
    covers; mask regions outside it are cut away."""
    m = clip_mask(mask, float(f.min()), float(f.max()))
    em = band_figures(f, s_em[:, 0, 0], s_em[:, 1, 0], m)
    mo = band_figures(f, s_model[:, 0, 0], s_model[:, 1, 0], m)
    return Comparison(
        em,
        mo,
        m.evaluate(f, s_em[:, 0, 0], s_em[:, 1, 0]),
        m.evaluate(f, s_model[:, 0, 0], s_model[:, 1, 0]),
    )
