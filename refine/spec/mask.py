"""Ripple / rejection masks: margins, pass/fail, and the constraint vector for the refiner.

Sign convention: a **margin** is in dB and positive where the response is better than the mask;
a **constraint value** is its negative (``g ≤ 0`` is satisfied), which is what a constrained
optimiser wants.

Regions
-------
``passband return loss``    RL(f) = -20 log|S11| ≥ ``min_return_loss_db`` over [start, stop]
``passband ripple``         IL(f) - min IL over the band ≤ ``max_ripple_db``
``midband insertion loss``  IL(f_mid) ≤ ``max_insertion_loss_db`` (f_mid = mean of the edges)
``stopband k``              IL(f) = -20 log|S21| ≥ ``rejection_db`` over [start, stop]
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v

_DB = 20.0 / math.log(10.0)
_TINY = 1e-30  # floor on |S|² so a perfect match or a transmission zero stays finite


@dataclass(frozen=True)
class Stopband:
    """A frequency interval [start, stop] (Hz) that needs at least ``rejection_db`` of loss."""

    start: float
    stop: float
    rejection_db: float

    def __post_init__(self) -> None:
        v.real_in_range("stopband.start", self.start, 0.0, None)
        v.positive("stopband.stop", self.stop)
        if self.stop <= self.start:
            raise ValueError(
                f"stopband.stop = {self.stop:g} Hz must be above stopband.start = {self.start:g} Hz"
            )
        v.positive("stopband.rejection_db", self.rejection_db)

    @property
    def label(self) -> str:
        return f"stopband {self.start / 1e9:.4g}-{self.stop / 1e9:.4g} GHz"


@dataclass(frozen=True)
class Mask:
    """Passband [passband_start, passband_stop] (Hz) with at least one of minimum return loss,
    maximum ripple, maximum midband insertion loss; and any number of stopbands.

    Stopbands may not overlap the passband.
    """

    passband_start: float
    passband_stop: float
    min_return_loss_db: float | None = None
    max_ripple_db: float | None = None
    max_insertion_loss_db: float | None = None
    stopbands: tuple[Stopband, ...] = field(default=())

    def __post_init__(self) -> None:
        v.positive("passband_start", self.passband_start)
        v.positive("passband_stop", self.passband_stop)
        if self.passband_stop <= self.passband_start:
            raise ValueError(
                f"passband_stop = {self.passband_stop:g} Hz must be above passband_start = "
                f"{self.passband_start:g} Hz"
            )
        if self.min_return_loss_db is not None:
            v.positive("min_return_loss_db", self.min_return_loss_db)
        if self.max_ripple_db is not None:
            v.positive("max_ripple_db", self.max_ripple_db)
        if self.max_insertion_loss_db is not None:
            v.positive("max_insertion_loss_db", self.max_insertion_loss_db)
        if (self.min_return_loss_db, self.max_ripple_db, self.max_insertion_loss_db) == (None,) * 3:
            raise ValueError(
                "mask needs at least one passband requirement: min_return_loss_db, "
                "max_ripple_db or max_insertion_loss_db"
            )
        object.__setattr__(self, "stopbands", tuple(self.stopbands))
        for sb in self.stopbands:
            if not isinstance(sb, Stopband):
                raise ValueError(f"stopbands must hold Stopband objects, got {sb!r}")
            if sb.start < self.passband_stop and sb.stop > self.passband_start:
                raise ValueError(
                    f"{sb.label} overlaps the passband {self.passband_start / 1e9:.6g}-"
                    f"{self.passband_stop / 1e9:.6g} GHz"
                )

    @property
    def midband(self) -> float:
        return 0.5 * (self.passband_start + self.passband_stop)

    def regions(self) -> list[str]:
        """Names of the mask regions, in the order used by margins and constraints."""
        out = []
        if self.min_return_loss_db is not None:
            out.append("passband return loss")
        if self.max_ripple_db is not None:
            out.append("passband ripple")
        if self.max_insertion_loss_db is not None:
            out.append("midband insertion loss")
        out += [sb.label for sb in self.stopbands]
        return out

    def sample(self, points_per_passband: int = 41, points_per_stopband: int = 41) -> NDArray:
        """A frequency grid (Hz, sorted, unique) covering every region, including its exact
        edges and the midband. A stopband starting at 0 Hz is sampled from 1e-3 × its stop
        frequency (the series-gap filter blocks DC, and f = 0 itself is not evaluable)."""
        n_p = v.integer_in_range("points_per_passband", points_per_passband, 2, 10**6)
        n_s = v.integer_in_range("points_per_stopband", points_per_stopband, 2, 10**6)
        parts = [
            np.linspace(self.passband_start, self.passband_stop, n_p),
            np.array([self.midband]),
        ]
        for sb in self.stopbands:
            parts.append(np.linspace(max(sb.start, 1e-3 * sb.stop), sb.stop, n_s))
        return np.unique(np.concatenate(parts))

    def region_indices(self, f: NDArray) -> list[NDArray[np.intp]]:
        pb = np.flatnonzero((f >= self.passband_start) & (f <= self.passband_stop))
        out: list[NDArray[np.intp]] = []
        if self.min_return_loss_db is not None:
            out.append(pb)
        if self.max_ripple_db is not None:
            out.append(pb)
        if self.max_insertion_loss_db is not None:
            out.append(np.array([int(np.argmin(np.abs(f - self.midband)))]))
        for sb in self.stopbands:
            out.append(np.flatnonzero((f >= sb.start) & (f <= sb.stop)))
        return out

    def margins(self, f: ArrayLike, s11: ArrayLike, s21: ArrayLike) -> dict[str, NDArray]:
        """Margins (dB, positive = passes) per region at the grid points that fall in it.

        ``s11`` and ``s21`` have shape ``(..., nf)``; each returned array ``(..., n_region)``.
        """
        f = v.frequencies("f", f)
        rl = -10.0 * np.log10(np.abs(np.asarray(s11)) ** 2 + _TINY)
        il = -10.0 * np.log10(np.abs(np.asarray(s21)) ** 2 + _TINY)
        out: dict[str, NDArray] = {}
        for name, idx in zip(self.regions(), self.region_indices(f), strict=True):
            if idx.size == 0:
                raise ValueError(f"the frequency grid has no point in the mask region '{name}'")
            if name == "passband return loss":
                out[name] = rl[..., idx] - self.min_return_loss_db
            elif name == "passband ripple":
                band = il[..., idx]
                out[name] = self.max_ripple_db - (band - np.min(band, axis=-1, keepdims=True))
            elif name == "midband insertion loss":
                out[name] = self.max_insertion_loss_db - il[..., idx]
            else:
                sb = self.stopbands[self.regions().index(name) - self._n_pass()]
                out[name] = il[..., idx] - sb.rejection_db
        return out

    def _n_pass(self) -> int:
        return sum(
            x is not None
            for x in (self.min_return_loss_db, self.max_ripple_db, self.max_insertion_loss_db)
        )

    def evaluate(self, f: ArrayLike, s11: ArrayLike, s21: ArrayLike) -> MaskResult:
        """Worst margin per region, where it occurs, and pass/fail (one design, ``(nf,)``)."""
        f = v.frequencies("f", f)
        if np.ndim(s11) != 1 or np.ndim(s21) != 1:
            raise ValueError("evaluate takes one design: s11 and s21 must be 1-D (nf,)")
        worst: dict[str, float] = {}
        where: dict[str, float] = {}
        for (name, m), idx in zip(
            self.margins(f, s11, s21).items(), self.region_indices(f), strict=True
        ):
            k = int(np.argmin(m))
            worst[name] = float(m[k])
            where[name] = float(f[idx[k]])
        return MaskResult(worst, where)

    def constraints(
        self,
        f: ArrayLike,
        s11: ArrayLike,
        s21: ArrayLike,
        ds11: ArrayLike | None = None,
        ds21: ArrayLike | None = None,
    ) -> tuple[NDArray, NDArray | None]:
        """Constraint values g = -margin (``g ≤ 0`` satisfied) for one design, concatenated over
        regions, and, given ``ds11``/``ds21`` of shape ``(n_params, nf)``, their Jacobian
        ``(n_constraints, n_params)``.

        d(-20 log|S|)/dp = -(20/ln 10) Re(S⁻¹ dS/dp).
        """
        f = v.frequencies("f", f)
        s11 = np.asarray(s11)
        s21 = np.asarray(s21)
        g = -np.concatenate(list(self.margins(f, s11, s21).values()))
        if ds11 is None or ds21 is None:
            return g, None
        ds11 = np.asarray(ds11)
        ds21 = np.asarray(ds21)
        d_rl = -_DB * np.real(ds11 * np.conj(s11) / (np.abs(s11) ** 2 + _TINY))
        d_il = -_DB * np.real(ds21 * np.conj(s21) / (np.abs(s21) ** 2 + _TINY))
        rows = []
        il = -10.0 * np.log10(np.abs(s21) ** 2 + _TINY)
        for name, idx in zip(self.regions(), self.region_indices(f), strict=True):
            if name == "passband return loss":
                rows.append(-d_rl[:, idx].T)
            elif name == "passband ripple":
                k = idx[int(np.argmin(il[idx]))]
                rows.append((d_il[:, idx] - d_il[:, [k]]).T)
            elif name == "midband insertion loss":
                rows.append(d_il[:, idx].T)
            else:
                rows.append(-d_il[:, idx].T)
        return g, np.concatenate(rows, axis=0)


@dataclass(frozen=True)
class MaskResult:
    """Worst margin (dB) per region and the frequency (Hz) where it occurs."""

    worst: dict[str, float]
    where: dict[str, float]

    @property
    def worst_margin(self) -> float:
        return min(self.worst.values())

    @property
    def passed(self) -> bool:
        return self.worst_margin >= 0.0
