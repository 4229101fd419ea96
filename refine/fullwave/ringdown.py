"""A field solve's ring-down, continued past the end of its record.

A narrowband filter rings for a long time after the pulse: its slowest poles decay with a time
constant of about Q_L / (π f0), and the record must run until they have died away, or the
Fourier transform of the truncated record widens and shifts the passband. After the pulse and a
few box transits the port signals are a sum of the structure's own damped resonances, so the
rest of the record can be estimated instead of simulated: fit the late record with damped
complex exponentials by the matrix-pencil method and add the fitted tail's transform, in closed
form, to the transform of the record.

Matrix pencil: Y. Hua and T. K. Sarkar, "Matrix pencil method for estimating parameters of
exponentially damped/undamped sinusoids in noise", IEEE Trans. Acoust., Speech, Signal Process.
38(5), 1990; T. K. Sarkar and O. Pereira, "Using the matrix pencil method to estimate the
parameters of a sum of complex exponentials", IEEE Antennas Propag. Mag. 37(1), 1995 (pencil
parameter between N/3 and N/2, model order from the singular values). Continuing an FDTD record
this way is the usual remedy for slowly decaying structures (common practice, no source).

Each continuation carries its own check, on the quantity that matters: the record is also
continued from two thirds of the way through its fit window (the last third dropped), and the
largest difference between the two continued spectra, over the largest spectrum value in the
band, is reported (:attr:`Continued.check`). benchmarks/em_ringdown.py measures how early a
record can be cut before the figures of a filter move.

Spectra follow the engine's convention for a pulse, F(f) = 2 Δt Σ_n y_n exp(-j 2π f t_n) (the
single-sided spectrum of the sampled record), so a continued spectrum can stand in for the
engine's own.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view
from numpy.typing import ArrayLike, NDArray

#: singular values kept in the pencil: those above this fraction of the largest
ORDER_TOL = 1e-7
#: the most exponentials a tail may carry
MAX_ORDER = 60
#: the most samples fitted (the window's latest are used beyond this)
MAX_SAMPLES = 2400
#: a continuation whose own check (:attr:`Continued.check`) moves the spectrum by more than this
#: fraction of its largest value is reported as unreliable
CHECK_LIMIT = 1e-3


class Tail(NamedTuple):
    """Damped exponentials fitted to a record's late part, from its last sample on.

    y(t_last + m Δt) ≈ Re Σ_k a_k z_k^m for m ≥ 0. poles z_k per sample (all |z_k| < 1);
    amplitudes a_k at the last sample; residual: the fit's RMS misfit over the window relative
    to the window's peak; level: the window's peak over the whole record's peak.
    """

    t_last: float
    dt: float
    poles: NDArray[np.complex128]
    amplitudes: NDArray[np.complex128]
    residual: float
    level: float


class Continued(NamedTuple):
    """A record's spectrum with its ring-down continued, the fit, and the continuation's own
    check: the largest change of the spectrum when the record is continued from two thirds of
    its fit window instead, over the spectrum's largest value (inf where the window is too
    short to check)."""

    spectrum: NDArray[np.complex128]
    tail: Tail
    check: float


def record_spectrum(t: ArrayLike, y: ArrayLike, f: ArrayLike) -> NDArray[np.complex128]:
    """The engine's spectrum of a sampled pulse record: 2 Δt Σ y_n exp(-j2πf t_n), ``(nf,)``."""
    t, y, f = (np.asarray(x, float) for x in (t, y, f))
    dt = float(t[1] - t[0])
    return 2.0 * dt * (np.exp(-2j * np.pi * f[:, None] * t[None, :]) @ y)


def pencil(y: ArrayLike, tol: float = ORDER_TOL, max_order: int = MAX_ORDER) -> NDArray:
    """Poles z_k (per sample) of uniformly sampled ``y`` by the matrix-pencil method (Hua and
    Sarkar 1990): pencil parameter N/3, order = singular values above ``tol`` of the largest
    (at most ``max_order``)."""
    y = np.asarray(y, float)
    n = y.size
    pencil_len = max(2, n // 3)
    hankel = sliding_window_view(y, pencil_len + 1)  # (n - L, L + 1)
    _, sv, vh = np.linalg.svd(hankel, full_matrices=False)
    if sv[0] <= 0.0:
        return np.zeros(0, complex)
    order = min(max_order, int(np.count_nonzero(sv > tol * sv[0])), pencil_len)
    v = vh[:order].conj().T  # (L + 1, M): the signal subspace
    return np.asarray(np.linalg.eigvals(np.linalg.pinv(v[:-1]) @ v[1:]), complex)


def _amplitudes(y: NDArray, z: NDArray) -> NDArray[np.complex128]:
    """Least-squares a_k with y_n = Re Σ a_k z_k^n, n from 0 (complex pairs fitted as such)."""
    n = np.arange(y.size)[:, None]
    basis = z[None, :] ** n
    a, *_ = np.linalg.lstsq(basis, y.astype(complex), rcond=None)
    return np.asarray(a, complex)


def _fit(y: NDArray, tol: float, max_order: int) -> tuple[NDArray, NDArray, float]:
    """Decaying poles, their amplitudes at the window's first sample, and the RMS misfit."""
    z = pencil(y, tol, max_order)
    z = z[(np.abs(z) < 1.0) & (np.abs(z) > 1e-9)]  # growing or undamped: not a ring-down
    if z.size == 0:
        return z, np.zeros(0, complex), float(np.sqrt(np.mean(y**2)))
    a = _amplitudes(y, z)
    model = np.real((z[None, :] ** np.arange(y.size)[:, None]) @ a)
    return z, a, float(np.sqrt(np.mean((model - y) ** 2)))


def fit_tail(
    t: ArrayLike,
    y: ArrayLike,
    fit_from: float,
    tol: float = ORDER_TOL,
    max_order: int = MAX_ORDER,
) -> Tail:
    """Fit the record's samples at or after ``fit_from`` (s) and continue them past its end.

    The window must hold at least 30 samples (a ValueError names the counts otherwise)."""
    t, y = np.asarray(t, float), np.asarray(y, float)
    dt = float(t[1] - t[0])
    late = t >= fit_from
    if np.count_nonzero(late) < 30:
        raise ValueError(
            f"ring-down fit: {np.count_nonzero(late)} samples after {fit_from:.4g} s "
            f"(record ends at {t[-1]:.4g} s); need at least 30"
        )
    w = y[late][-MAX_SAMPLES:]
    peak = float(np.max(np.abs(w)))
    level = peak / max(float(np.max(np.abs(y))), 1e-300)
    if peak == 0.0:
        return Tail(float(t[-1]), dt, np.zeros(0, complex), np.zeros(0, complex), 0.0, 0.0)
    z, a, rms = _fit(w / peak, tol, max_order)
    a_last = peak * a * z ** (w.size - 1)
    return Tail(float(t[-1]), dt, z, np.asarray(a_last, complex), rms, level)


def tail_spectrum(tail: Tail, f: ArrayLike) -> NDArray[np.complex128]:
    """The fitted tail's spectrum past the record's last sample, in the engine's convention:
    2 Δt Σ_{m≥1} y(t_last + mΔt) exp(-j2πf (t_last + mΔt)), summed in closed form (each
    exponential's terms form a geometric series), ``(nf,)``."""
    f = np.asarray(f, float)
    if tail.poles.size == 0:
        return np.zeros(f.shape, complex)
    rot = np.exp(-2j * np.pi * f * tail.dt)[:, None]
    out = np.zeros(f.shape, complex)
    # y = Re Σ a z^m = ½ Σ (a z^m + conj(a) conj(z)^m): both halves, so the tail stays real
    for a, z in ((tail.amplitudes, tail.poles), (tail.amplitudes.conj(), tail.poles.conj())):
        q = z[None, :] * rot
        out += 0.5 * (q / (1.0 - q)) @ a
    return np.asarray(2.0 * tail.dt * np.exp(-2j * np.pi * f * tail.t_last) * out, complex)


def continued_spectrum(t: ArrayLike, y: ArrayLike, f: ArrayLike, fit_from: float) -> Continued:
    """The record's spectrum with its fitted ring-down added, the fit, and its check."""
    t, y, f = (np.asarray(x, float) for x in (t, y, f))
    tail = fit_tail(t, y, fit_from)
    spec = record_spectrum(t, y, f) + tail_spectrum(tail, f)
    short = t <= t[-1] - (t[-1] - fit_from) / 3.0
    check = math.inf
    if np.count_nonzero(short & (t >= fit_from)) >= 30:
        other = record_spectrum(t[short], y[short], f) + tail_spectrum(
            fit_tail(t[short], y[short], fit_from), f
        )
        scale = float(np.max(np.abs(spec)))
        check = float(np.max(np.abs(spec - other))) / scale if scale > 0 else 0.0
    return Continued(spec, tail, check)
