"""Batched ABCD cascade of two-port elements, S-parameters and their analytic gradient.

Shapes
------
Frequency is the last data axis; design (batch) axes lead. Every element parameter must
broadcast against ``(..., nf)``: a per-design scalar carries a trailing axis of length 1
(shape ``(nd, 1)``), a per-frequency quantity such as a line's ``gamma`` has shape
``(..., nf)``. Results are ``(..., nf)`` for single parameters and ``(..., nf, 2, 2)`` for
full S-matrices.

Structure
---------
Each element is one of three kinds, and the chain product exploits it::

    series  [[1, z], [0, 1]]   (series capacitor)            2 complex multiply-adds per product
    shunt   [[1, 0], [y, 1]]   (shunt capacitor, open stub)  2 complex multiply-adds per product
    general [[A, B], [C, D]]   (line, π-network)             8 multiplies, 4 adds

The four ABCD entries are carried as separate arrays (fused elementwise arithmetic) instead of
stacks of 2×2 matrices, which numpy multiplies slowly.

Gradient
--------
With a real reference impedance z_ref, S21 = 2/Δ and S11 = N/Δ where
Δ = [1, z_ref]·M·[1, 1/z_ref]ᵀ and N = [1, -z_ref]·M·[1, 1/z_ref]ᵀ (Pozar, *Microwave
Engineering*, 4th ed., Table 4.2). For M = E_1 ⋯ E_k and a parameter p of E_i,
∂Δ/∂p = (l·E_1⋯E_{i-1}) (∂E_i/∂p) (E_{i+1}⋯E_k·r): a bilinear form of one prefix row vector
and one suffix column vector. One forward and one backward pass of 2-vectors therefore give
the derivative with respect to every parameter, at a cost independent of their number.
"""

from __future__ import annotations

import enum
import itertools
from collections.abc import Callable, Collection, Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property
from typing import Any, NamedTuple, Protocol, runtime_checkable

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine import allocator
from refine._typing import Values

Array = NDArray[np.complex128]

allocator.keep_freed_memory()  # the engine's temporaries reuse freed memory (see refine.allocator)


class Abcd(NamedTuple):
    """The four entries of an ABCD matrix, each broadcastable to ``(..., nf)``."""

    a: Values
    b: Values
    c: Values
    d: Values


class Kind(enum.Enum):
    """Structure of an element's ABCD matrix."""

    SERIES = "series"  # [[1, z], [0, 1]]: the element provides z
    SHUNT = "shunt"  # [[1, 0], [y, 1]]: the element provides y
    GENERAL = "general"  # full matrix: the element provides Abcd


@runtime_checkable
class Element(Protocol):
    """A two-port circuit element.

    ``value(omega)`` returns z (series), y (shunt) or an :class:`Abcd` (general);
    ``derivatives(omega, wrt)`` returns, per parameter name (all, or those named in ``wrt``),
    the derivative of that value.
    """

    @property
    def kind(self) -> Kind: ...

    def value(self, omega: NDArray[np.float64]) -> Values | Abcd: ...

    def derivatives(
        self, omega: NDArray[np.float64], wrt: Collection[str] | None = None
    ) -> Mapping[str, Values | Abcd]: ...


# --------------------------------------------------------------------------------------------
# Elements
# --------------------------------------------------------------------------------------------


#: the most attenuation one element is given (Np, about 260 dB): beyond it a line transmits
#: nothing either way, and a chain of twenty such elements stays inside floating point
MAX_NEPERS = 30.0


def _cosh_sinh(x: ArrayLike) -> tuple[NDArray, Array]:
    """cosh and sinh of a complex array from real exp/cos/sin (several times faster than
    complex exp); for a lossless argument (Re x = 0) cosh is returned as a real array. The real
    part is held within ±:data:`MAX_NEPERS`, so an absurdly long lossy line gives "no
    transmission" instead of an overflow and NaN."""
    x = np.asarray(x)
    a, b = x.real, x.imag
    cb, sb = np.cos(b), np.sin(b)
    largest = np.abs(a).max() if a.size else 0.0  # one pass: lossless test and overflow guard
    if largest == 0.0:
        return cb, 1j * sb
    if largest > MAX_NEPERS:
        a = np.clip(a, -MAX_NEPERS, MAX_NEPERS)
    ea = np.exp(a)
    eai = 1.0 / ea
    cha, sha = 0.5 * (ea + eai), 0.5 * (ea - eai)
    ch = np.empty(x.shape, complex)
    sh = np.empty(x.shape, complex)
    ch.real, ch.imag = cha * cb, sha * sb
    sh.real, sh.imag = sha * cb, cha * sb
    return ch, sh


@dataclass(frozen=True, eq=False)
class SeriesCapacitor:
    """Ideal series capacitor, ``capacitance`` in farads (> 0), z = 1/(jωC)."""

    capacitance: Values
    kind: Kind = Kind.SERIES

    def value(self, omega: NDArray[np.float64]) -> Array:
        return -1j / (omega * np.asarray(self.capacitance))

    def derivatives(
        self, omega: NDArray[np.float64], wrt: Collection[str] | None = None
    ) -> dict[str, Array]:
        if wrt is not None and "capacitance" not in wrt:
            return {}
        c = np.asarray(self.capacitance)
        return {"capacitance": 1j / (omega * (c * c))}


@dataclass(frozen=True, eq=False)
class ShuntCapacitor:
    """Ideal shunt capacitor to ground, ``capacitance`` in farads (≥ 0), y = jωC."""

    capacitance: Values
    kind: Kind = Kind.SHUNT

    def value(self, omega: NDArray[np.float64]) -> Array:
        return 1j * omega * np.asarray(self.capacitance)

    def derivatives(
        self, omega: NDArray[np.float64], wrt: Collection[str] | None = None
    ) -> dict[str, Array]:
        if wrt is not None and "capacitance" not in wrt:
            return {}
        return {"capacitance": 1j * omega * np.ones_like(np.asarray(self.capacitance, float))}


@dataclass(frozen=True, eq=False)
class Line:
    """Uniform transmission line: propagation constant ``gamma`` (1/m, complex, α + jβ),
    characteristic impedance ``z_c`` (ohm, complex) and ``length`` (m).

    ABCD = [[cosh γl, z_c sinh γl], [sinh γl / z_c, cosh γl]] (Pozar 4th ed., Table 4.1).
    Derivatives are given for ``length``, ``gamma`` and ``z_c`` (the last two per frequency).
    """

    gamma: Values
    z_c: Values
    length: Values
    kind: Kind = Kind.GENERAL

    @cached_property
    def _ch_sh(self) -> tuple[NDArray, Array]:
        return _cosh_sinh(np.asarray(self.gamma) * np.asarray(self.length))

    def value(self, omega: NDArray[np.float64]) -> Abcd:
        ch, sh = self._ch_sh
        zc = np.asarray(self.z_c)
        return Abcd(ch, zc * sh, sh / zc, ch)

    def derivatives(
        self, omega: NDArray[np.float64], wrt: Collection[str] | None = None
    ) -> dict[str, Abcd]:
        ch, sh = self._ch_sh
        zc = np.asarray(self.z_c)
        out: dict[str, Abcd] = {}
        if wrt is None or "length" in wrt:
            g = np.asarray(self.gamma)
            gsh = g * sh
            out["length"] = Abcd(gsh, g * zc * ch, g * ch / zc, gsh)
        if wrt is None or "gamma" in wrt:
            ln = np.asarray(self.length)
            lsh = ln * sh
            out["gamma"] = Abcd(lsh, ln * zc * ch, ln * ch / zc, lsh)
        if wrt is None or "z_c" in wrt:
            zero = np.zeros_like(sh)
            out["z_c"] = Abcd(zero, sh, -sh / (zc * zc), zero)
        return out


@dataclass(frozen=True, eq=False)
class PiNetwork:
    """Capacitive π-network: shunt ``c_shunt_in``, series ``c_series``, shunt ``c_shunt_out``
    (farads). The usual equivalent circuit of a series gap in a strip line.

    With y1 = jωC_in, y2 = jωC_out, z = 1/(jωC_series):
    ABCD = [[1 + z y2, z], [y1 + y2 + y1 y2 z, 1 + z y1]].
    """

    c_series: Values
    c_shunt_in: Values
    c_shunt_out: Values
    kind: Kind = Kind.GENERAL

    def _parts(self, omega: NDArray[np.float64]) -> tuple[Array, Array, Array]:
        jw = 1j * omega
        return (
            -1j / (omega * np.asarray(self.c_series)),
            jw * np.asarray(self.c_shunt_in),
            jw * np.asarray(self.c_shunt_out),
        )

    def value(self, omega: NDArray[np.float64]) -> Abcd:
        z, y1, y2 = self._parts(omega)
        return Abcd(1.0 + z * y2, z, y1 + y2 + y1 * y2 * z, 1.0 + z * y1)

    def derivatives(
        self, omega: NDArray[np.float64], wrt: Collection[str] | None = None
    ) -> dict[str, Abcd]:
        z, y1, y2 = self._parts(omega)
        jw = 1j * omega * np.ones_like(z)
        zero = np.zeros_like(z)
        out: dict[str, Abcd] = {}
        if wrt is None or "c_series" in wrt:
            dz = -z / np.asarray(self.c_series)
            out["c_series"] = Abcd(y2 * dz, dz, y1 * y2 * dz, y1 * dz)
        if wrt is None or "c_shunt_in" in wrt:
            out["c_shunt_in"] = Abcd(zero, zero, jw * (1.0 + y2 * z), jw * z)
        if wrt is None or "c_shunt_out" in wrt:
            out["c_shunt_out"] = Abcd(jw * z, zero, jw * (1.0 + y1 * z), zero)
        return out


@dataclass(frozen=True, eq=False)
class ShuntOpenStub:
    """Open-circuited stub in shunt: y = tanh(γl)/z_c (Pozar 4th ed., eq. 2.77 with Z_L = ∞).

    Parameters as for :class:`Line`. Derivatives for ``length``, ``gamma`` and ``z_c``.
    """

    gamma: Values
    z_c: Values
    length: Values
    kind: Kind = Kind.SHUNT

    @cached_property
    def _tanh(self) -> Array:
        ch, sh = _cosh_sinh(np.asarray(self.gamma) * np.asarray(self.length))
        return sh / ch

    def value(self, omega: NDArray[np.float64]) -> Array:
        return self._tanh / np.asarray(self.z_c)

    def derivatives(
        self, omega: NDArray[np.float64], wrt: Collection[str] | None = None
    ) -> dict[str, Array]:
        g = np.asarray(self.gamma)
        ln = np.asarray(self.length)
        zc = np.asarray(self.z_c)
        th = self._tanh
        sech2_zc = (1.0 - th * th) / zc
        out = {"length": g * sech2_zc, "gamma": ln * sech2_zc, "z_c": -th / (zc * zc)}
        return out if wrt is None else {k: x for k, x in out.items() if k in wrt}


@dataclass(frozen=True, eq=False)
class CoupledSection:
    """A pair of coupled lines of ``length`` (m) used as a two-port: in at one end of the first
    line, out at the far end of the second, the other two ends open (the section of a
    parallel-coupled filter). Each mode has its own propagation constant and impedance
    (``gamma_even``, ``gamma_odd``, ``z_even``, ``z_odd``; per frequency), so the medium may be
    inhomogeneous (unequal even/odd phase velocities, as on microstrip).

    From the mode lines' impedance matrices (self Z coth γl, transfer Z/sinh γl) the two-port's
    are Z11 = Z22 = (Z_e coth x_e + Z_o coth x_o)/2 and Z21 = (Z_e/sinh x_e − Z_o/sinh x_o)/2,
    x = γl (Pozar, *Microwave Engineering*, 4th ed., coupled-line chapter, section number from
    memory, for the homogeneous case, where it is Z11 = −j(Z_e + Z_o) cot θ/2,
    Z21 = −j(Z_e − Z_o) csc θ/2). Written without dividing by a sinh (finite at every length),
    with Δ = Z_e sinh x_o − Z_o sinh x_e:

        A = D = (Z_e cosh x_e sinh x_o + Z_o cosh x_o sinh x_e) / Δ
        B = [(Z_e² + Z_o²) sinh x_e sinh x_o + 2 Z_e Z_o (1 + cosh x_e cosh x_o)] / (2Δ)
        C = 2 sinh x_e sinh x_o / Δ

    (derived here; AD − BC = 1). Checked against a four-port built from the two mode lines with
    two ports left open in scikit-rf (``tests/test_coupled.py``). Derivatives for ``length``,
    ``gamma_even``, ``gamma_odd``, ``z_even`` and ``z_odd``.
    """

    gamma_even: Values
    gamma_odd: Values
    z_even: Values
    z_odd: Values
    length: Values
    kind: Kind = Kind.GENERAL

    @cached_property
    def _parts(self) -> tuple:
        ln = np.asarray(self.length)
        ce, se = _cosh_sinh(np.asarray(self.gamma_even) * ln)
        co, so = _cosh_sinh(np.asarray(self.gamma_odd) * ln)
        ze, zo = np.asarray(self.z_even), np.asarray(self.z_odd)
        delta = ze * so - zo * se
        na = ze * ce * so + zo * co * se
        nb = 0.5 * ((ze * ze + zo * zo) * se * so + 2.0 * ze * zo * (1.0 + ce * co))
        nc = 2.0 * se * so
        return ce, se, co, so, ze, zo, delta, na, nb, nc

    def value(self, omega: NDArray[np.float64]) -> Abcd:
        *_, delta, na, nb, nc = self._parts
        a = na / delta
        return Abcd(a, nb / delta, nc / delta, a)

    def derivatives(
        self, omega: NDArray[np.float64], wrt: Collection[str] | None = None
    ) -> dict[str, Abcd]:
        ce, se, co, so, ze, zo, delta, na, nb, nc = self._parts
        a, b, c = na / delta, nb / delta, nc / delta
        z2 = ze * ze + zo * zo
        # d(delta, na, nb, nc) with respect to x_e = γ_e l, x_o = γ_o l, z_e and z_o
        partial = {
            "x_even": (
                -zo * ce,
                ze * se * so + zo * co * ce,
                0.5 * z2 * ce * so + ze * zo * se * co,
                2.0 * ce * so,
            ),
            "x_odd": (
                ze * co,
                ze * ce * co + zo * so * se,
                0.5 * z2 * se * co + ze * zo * ce * so,
                2.0 * se * co,
            ),
            "z_even": (so, ce * so, ze * se * so + zo * (1.0 + ce * co), 0.0),
            "z_odd": (-se, co * se, zo * se * so + ze * (1.0 + ce * co), 0.0),
        }

        def abcd(d: tuple) -> Abcd:
            dd, dna, dnb, dnc = d
            da = (dna - a * dd) / delta
            return Abcd(da, (dnb - b * dd) / delta, (dnc - c * dd) / delta, da)

        def combine(*terms: tuple[Values, tuple]) -> tuple:
            return tuple(sum(k * t[i] for k, t in terms) for i in range(4))

        ln = np.asarray(self.length)
        ge, go = np.asarray(self.gamma_even), np.asarray(self.gamma_odd)
        want = {
            "length": lambda: combine((ge, partial["x_even"]), (go, partial["x_odd"])),
            "gamma_even": lambda: combine((ln, partial["x_even"])),
            "gamma_odd": lambda: combine((ln, partial["x_odd"])),
            "z_even": lambda: partial["z_even"],
            "z_odd": lambda: partial["z_odd"],
        }
        return {k: abcd(fn()) for k, fn in want.items() if wrt is None or k in wrt}


# --------------------------------------------------------------------------------------------
# Products
# --------------------------------------------------------------------------------------------


def _matrix_times(m: tuple, kind: Kind, e: Any) -> tuple:
    a, b, c, d = m
    if kind is Kind.SERIES:
        return a, a * e + b, c, c * e + d
    if kind is Kind.SHUNT:
        return a + b * e, b, c + d * e, d
    ea, eb, ec, ed = e
    return a * ea + b * ec, a * eb + b * ed, c * ea + d * ec, c * eb + d * ed


def _row_times(row: tuple, kind: Kind, e: Any) -> tuple:
    l1, l2 = row
    if kind is Kind.SERIES:
        return l1, l1 * e + l2
    if kind is Kind.SHUNT:
        return l1 + l2 * e, l2
    ea, eb, ec, ed = e
    return l1 * ea + l2 * ec, l1 * eb + l2 * ed


def _times_column(kind: Kind, e: Any, col: tuple) -> tuple:
    r1, r2 = col
    if kind is Kind.SERIES:
        return r1 + e * r2, r2
    if kind is Kind.SHUNT:
        return r1, e * r1 + r2
    ea, eb, ec, ed = e
    return ea * r1 + eb * r2, ec * r1 + ed * r2


def _omega(f: ArrayLike) -> NDArray[np.float64]:
    return 2.0 * np.pi * v.frequencies("f", f)


def _check_elements(elements: Sequence[Element]) -> None:
    if len(elements) == 0:
        raise ValueError("elements must hold at least one element, got an empty sequence")
    for i, e in enumerate(elements):
        if not isinstance(getattr(e, "kind", None), Kind):
            raise ValueError(
                f"elements[{i}] = {e!r} is not a cascade element (needs .kind, .value)"
            )


def chain_abcd(elements: Sequence[Element], f: ArrayLike) -> Abcd:
    """ABCD matrix of the chain ``elements[0] · elements[1] · ...`` at frequencies ``f`` (Hz).

    Returns an :class:`Abcd` whose entries are complex arrays of the broadcast shape
    ``(..., nf)``.
    """
    _check_elements(elements)
    omega = _omega(f)
    m: tuple = (1.0, 0.0, 0.0, 1.0)
    for e, val in zip(elements, _values(elements, omega).vals, strict=True):
        m = _matrix_times(m, e.kind, val)
    shape = np.broadcast_shapes(*(np.shape(x) for x in m), omega.shape)
    return Abcd(*(np.broadcast_to(np.asarray(x, dtype=complex), shape) for x in m))


def abcd_to_s(abcd: Abcd, z_ref: float, *, reciprocal: bool = False) -> NDArray[np.complex128]:
    """S-matrix ``(..., nf, 2, 2)`` of an ABCD matrix for a real reference impedance ``z_ref``.

    Pozar, *Microwave Engineering*, 4th ed., Table 4.2. With ``reciprocal`` (AD - BC = 1 known
    exactly) S12 is set to S21 instead of 2(AD - BC)/Δ, which loses all its digits to
    cancellation deep in a stopband.
    """
    z = v.positive("z_ref", z_ref)
    a, b, c, d = (np.asarray(x) for x in abcd)
    bz, cz = b / z, c * z
    den = a + bz + cz + d
    s = np.empty((*np.broadcast_shapes(a.shape, b.shape, c.shape, d.shape), 2, 2), dtype=complex)
    s[..., 0, 0] = (a + bz - cz - d) / den
    s[..., 0, 1] = 2.0 / den if reciprocal else 2.0 * (a * d - b * c) / den
    s[..., 1, 0] = 2.0 / den
    s[..., 1, 1] = (-a + bz - cz + d) / den
    return s


def s_parameters(elements: Sequence[Element], f: ArrayLike, z_ref: float) -> NDArray[np.complex128]:
    """S-matrix ``(..., nf, 2, 2)`` of a chain of elements at ``f`` (Hz) for ``z_ref`` (ohm).

    Every element kind here is reciprocal (unit determinant), so S12 = S21 exactly.
    """
    return abcd_to_s(chain_abcd(elements, f), z_ref, reciprocal=True)


class Transmission(NamedTuple):
    """S11 and S21 of a chain, each ``(..., nf)``."""

    s11: Array
    s21: Array


def s11_s21(elements: Sequence[Element], f: ArrayLike, z_ref: float) -> Transmission:
    """S11 and S21 only, the cheapest evaluation (what a mask needs)."""
    _check_elements(elements)
    z = v.positive("z_ref", z_ref)
    omega = _omega(f)
    ev = _values(elements, omega)
    # the rows [1, z]·M (for Δ) and [1, -z]·M (for N) together: half the work of the full M
    lead = np.array([1.0, 1.0]).reshape(2, *([1] * len(ev.shape)))
    row: tuple = (lead, np.array([z, -z]).reshape(lead.shape))
    for e, val in zip(elements, ev.vals, strict=True):
        row = _row_times(row, e.kind, val)
    den_num = np.broadcast_to(row[0] + row[1] / z, (2, *ev.shape))
    den = den_num[0]
    return Transmission(np.asarray(den_num[1] / den, complex), np.asarray(2.0 / den, complex))


class Gradient(NamedTuple):
    """S11, S21 ``(..., nf)`` and their derivatives: ``ds11[i][name]``, ``ds21[i][name]`` are
    the derivatives with respect to parameter ``name`` of ``elements[i]``, each ``(..., nf)``;
    ``stacked11[rows[(i, name)]]`` is the same array (for vectorised assembly)."""

    s11: Array
    s21: Array
    ds11: list[dict[str, Array]]
    ds21: list[dict[str, Array]]
    stacked11: Array  # the same derivatives stacked, (P, ..., nf) ...
    stacked21: Array
    rows: dict[tuple[int, str], int]  # ... with row rows[(element, name)]
    stacked: Array | None = None  # (2, P, ..., nf): stacked11 and stacked21 in one array


def s11_s21_gradient(
    elements: Sequence[Element], f: ArrayLike, z_ref: float, wrt: Collection[str] | None = None
) -> Gradient:
    """S11, S21 and their analytic derivatives with respect to every element parameter (or
    only the parameters whose names are in ``wrt``, e.g. ``{"length", "capacitance"}``).

    Prefix row vectors (l·E_1⋯E_{i-1}, for l = [1, z_ref] and [1, -z_ref]) and suffix column
    vectors (E_{i+1}⋯E_k·r, r = [1, 1/z_ref]) are formed once; each parameter then costs one
    2×2 bilinear form (see the module docstring).
    """
    _check_elements(elements)
    z = v.positive("z_ref", z_ref)
    omega = _omega(f)
    ev = _values(elements, omega)
    vals = ev.vals
    k = len(elements)

    # forward pass: the prefix rows for Δ and N together, as one 2-vector of (2, ..., nf) arrays,
    # written into rows (2 [Δ, N], 2, k, ...) as they are formed; backward pass: the suffix
    # columns into colv (2, k, ...)
    lead = np.array([1.0, 1.0]).reshape(2, *([1] * len(ev.shape)))
    row: tuple = (lead, np.array([z, -z]).reshape(lead.shape))
    rows = np.empty((2, 2, k, *ev.shape), complex)
    for i, (e, val) in enumerate(zip(elements, vals, strict=True)):
        rows[:, 0, i], rows[:, 1, i] = row
        row = _row_times(row, e.kind, val)
    den_num = row[0] + row[1] / z
    colv = np.empty((2, k, *ev.shape), complex)
    col: tuple = (1.0, 1.0 / z)
    for i in range(k - 1, -1, -1):
        colv[0, i], colv[1, i] = col
        col = _times_column(elements[i].kind, vals[i], col)

    shape = ev.shape
    den = np.broadcast_to(np.asarray(den_num[0], dtype=complex), shape)
    s21 = np.asarray(2.0 / den, complex)
    s11 = np.broadcast_to(np.asarray(den_num[1], dtype=complex), shape) / den
    # The rows are turned from (Δ, N) into (S21, S11) once: ∂S21 = -S21/Δ ∂Δ and
    # ∂S11 = (∂N - S11 ∂Δ)/Δ are linear in the row, so every derivative below is S's directly.
    inv = 1.0 / den
    rows_s = np.empty(rows.shape, complex)
    rows_s[0] = rows[0] * (-s21 * inv)
    rows_s[1] = (rows[1] - rows[0] * s11) * inv
    index: dict[tuple[int, str], int] = {}
    parts: list[NDArray] = []
    cached: dict[bytes, tuple] = {}
    for at, name, (da, db, dc, dd) in _derivative_groups(elements, omega, wrt, ev):
        # ∂S = l1 (dA r1 + dB r2) + l2 (dC r1 + dD r2); the column part is shared by S21, S11
        key = at.tobytes()
        if key not in cached:
            sel = _selector(at)
            cached[key] = (colv[0, sel], colv[1, sel], rows_s[:, 0, sel], rows_s[:, 1, sel])
        r1, r2, l1, l2 = cached[key]
        u = _sum_of(da, r1, db, r2)
        w = _sum_of(dc, r1, dd, r2)
        d = _sum_of(u, l1, w, l2)  # (2, n, ...): ∂S21, ∂S11
        parts.append(np.broadcast_to(d, (2, len(at), *shape)))
        for i in at:
            index[(int(i), name)] = len(index)
    both = np.concatenate(parts, axis=1) if parts else np.zeros((2, 0, *shape), complex)
    both = both[::-1]  # (S11, S21)
    d11, d21 = both[0], both[1]
    ds11: list[dict[str, Array]] = [{} for _ in elements]
    ds21: list[dict[str, Array]] = [{} for _ in elements]
    for (i, name), r in index.items():
        ds11[i][name] = d11[r]
        ds21[i][name] = d21[r]
    return Gradient(s11, s21, ds11, ds21, d11, d21, index, both)


#: element parameters through which a value depends on ω as the product ωC (capacitors and
#: π-networks of capacitances): at fixed C, ω ∂/∂ω = C ∂/∂C
CAPACITIVE = frozenset({"capacitance", "c_series", "c_shunt_in", "c_shunt_out"})
#: parameters that do not depend on frequency at all
FIXED_IN_FREQUENCY = frozenset({"length"})


def frequency_derivative(
    elements_at: Callable[[NDArray[np.float64]], Sequence[Element]],
    f: ArrayLike,
    z_ref: float,
    rel_step: float = 1e-6,
) -> tuple[Array, Array, Array, Array]:
    """S11, S21 and their derivatives with respect to angular frequency ω, ``(..., nf)`` each.

    ``elements_at(f)`` builds the circuit at any frequency grid (the same elements each time,
    in the same order). The derivative is the chain rule through the cascade's exact
    parameter derivatives (:func:`s11_s21_gradient`): dS/dω = Σ ∂S/∂p · dp/dω over every
    element parameter, where a capacitance enters as ωC (so its explicit part is (C/ω) ∂S/∂C)
    and a per-frequency parameter (a line's γ and z_c from a dispersive model) has dp/dω from a
    central difference of the element values at f(1 ± ``rel_step``) (error ~1e-12 relative).
    No phase is unwrapped, so the result holds however coarse ``f`` is."""
    f = v.frequencies("f", f)
    els = list(elements_at(f))
    g = s11_s21_gradient(els, f, z_ref)
    omega = 2.0 * np.pi * f
    h = rel_step * f
    up, down = list(elements_at(f + h)), list(elements_at(f - h))
    if len(up) != len(els) or len(down) != len(els):
        raise ValueError("elements_at must build the same elements at every frequency grid")
    d11: Any = 0.0
    d21: Any = 0.0
    for i, e in enumerate(els):
        for name, s11_p in g.ds11[i].items():
            s21_p = g.ds21[i][name]
            if name in FIXED_IN_FREQUENCY:
                continue
            p_up = np.asarray(getattr(up[i], name))
            p_down = np.asarray(getattr(down[i], name))
            dp = (p_up - p_down) / (4.0 * np.pi * h)  # d p / d ω, zero for a fixed capacitance
            if name in CAPACITIVE:
                dp = dp + np.asarray(getattr(e, name)) / omega
            d11 = d11 + s11_p * dp
            d21 = d21 + s21_p * dp
    shape = g.s11.shape
    return (
        g.s11,
        g.s21,
        np.broadcast_to(np.asarray(d11, complex), shape),
        np.broadcast_to(np.asarray(d21, complex), shape),
    )


def group_delay(
    elements_at: Callable[[NDArray[np.float64]], Sequence[Element]],
    f: ArrayLike,
    z_ref: float,
) -> NDArray[np.float64]:
    """Group delay of S21 in seconds, τ = -d(arg S21)/dω = -Im(dS21/dω / S21), from
    :func:`frequency_derivative` (exact through the chain; no unwrapped phase differences)."""
    _, s21, _, d21 = frequency_derivative(elements_at, f, z_ref)
    return np.asarray(-np.imag(d21 / s21), float)


_Entries = tuple[Any, Any, Any, Any]  # the four ABCD entries of a derivative; None is zero


def _selector(at: NDArray[np.intp]) -> slice | NDArray[np.intp]:
    """``at`` as a slice when it is evenly spaced (a view instead of a copy: lines and
    π-networks alternate in a gap-coupled chain)."""
    idx = at.tolist()
    if len(idx) == 1:
        return slice(idx[0], idx[0] + 1)
    step = idx[1] - idx[0]
    if step > 0 and all(b - a == step for a, b in itertools.pairwise(idx)):
        return slice(idx[0], idx[-1] + 1, step)
    return at


def _sum_of(a: Any, x: NDArray, b: Any, y: NDArray) -> Any:
    """a·x + b·y where None stands for a zero coefficient (both None: 0)."""
    if a is None:
        return 0.0 if b is None else b * y
    return a * x if b is None else a * x + b * y


@dataclass
class _Values:
    """Every element's value at ``omega``, lines and π-networks computed together (one
    vectorised pass per kind instead of one per element), with the stacked intermediates their
    derivatives reuse."""

    vals: list[Any]
    shape: tuple[int, ...]
    lines: list[int]
    pis: list[int]
    line_parts: tuple[NDArray, ...] = ()  # ch, sh, z_c, gamma, length: (n_lines, *shape)
    pi_parts: tuple[NDArray, ...] = ()  # c_series, z, y1, y2: (n_pis, ...)


def _values(elements: Sequence[Element], omega: NDArray[np.float64]) -> _Values:
    lines = [i for i, e in enumerate(elements) if type(e) is Line]
    pis = [i for i, e in enumerate(elements) if type(e) is PiNetwork]
    vals: list[Any] = [None] * len(elements)
    shapes = [omega.shape]
    grouped = set(lines) | set(pis)
    for i, e in enumerate(elements):  # every other element on its own, its shape counted
        if i not in grouped:
            vals[i] = e.value(omega)
            parts = vals[i] if isinstance(vals[i], Abcd) else (vals[i],)
            shapes += [np.shape(x) for x in parts]
    for i in lines:
        e = elements[i]
        assert isinstance(e, Line)
        shapes += [np.shape(e.gamma), np.shape(e.z_c), np.shape(e.length)]
    for i in pis:
        e = elements[i]
        assert isinstance(e, PiNetwork)
        shapes += [np.shape(e.c_series), np.shape(e.c_shunt_in), np.shape(e.c_shunt_out)]
    shape = np.broadcast_shapes(*shapes)
    out = _Values(vals, shape, lines, pis)

    def stack(idx: list[int], name: str) -> NDArray:
        arr = np.empty((len(idx), *shape), complex)
        for j, i in enumerate(idx):
            arr[j] = getattr(elements[i], name)
        return arr

    if lines:
        gamma, length, zc = stack(lines, "gamma"), stack(lines, "length"), stack(lines, "z_c")
        ch, sh = _cosh_sinh(gamma * length)
        b, c = zc * sh, sh / zc
        for j, i in enumerate(lines):
            vals[i] = Abcd(ch[j], b[j], c[j], ch[j])
        out.line_parts = (ch, sh, zc, gamma, length)
    if pis:

        def column(name: str) -> NDArray:  # per-design values: (n,) or (n, ..., 1)
            col = np.asarray([np.asarray(getattr(elements[i], name)) for i in pis])
            return col[:, None] if col.ndim == 1 else col

        # Z = -j zs and Y = j b are pure imaginary, so A = 1 + zs b2 and D = 1 + zs b1 are
        # real, B and C pure imaginary: formed in real arithmetic, then packed
        cs = column("c_series")
        zs = 1.0 / (omega * cs)
        b1 = omega * column("c_shunt_in")
        b2 = omega * column("c_shunt_out")
        if np.iscomplexobj(zs) or np.iscomplexobj(b1) or np.iscomplexobj(b2):
            abcd = np.stack(
                np.broadcast_arrays(
                    1.0 + zs * b2, -1j * zs, 1j * (b1 + b2 + b1 * b2 * zs), 1.0 + zs * b1
                )
            )
        else:
            abcd = np.zeros((4, *np.broadcast_shapes(zs.shape, b1.shape, b2.shape)), complex)
            abcd[0].real = 1.0 + zs * b2
            abcd[1].imag = -zs
            abcd[2].imag = b1 + b2 + b1 * b2 * zs
            abcd[3].real = 1.0 + zs * b1
        for j, i in enumerate(pis):
            vals[i] = Abcd(abcd[0, j], abcd[1, j], abcd[2, j], abcd[3, j])
        out.pi_parts = (cs, zs, b1, b2)
    return out


def _derivative_groups(
    elements: Sequence[Element],
    omega: NDArray[np.float64],
    wrt: Collection[str] | None,
    ev: _Values,
) -> list[tuple[NDArray[np.intp], str, _Entries]]:
    """Every element parameter's derivative as ABCD entries stacked over elements, ``(n,
    *shape)``: all lines' (and all π-networks') derivatives in one vectorised pass per
    parameter, any other element on its own."""
    out: list[tuple[NDArray[np.intp], str, _Entries]] = []
    shape = ev.shape

    def want(name: str) -> bool:
        return wrt is None or name in wrt

    if ev.lines:
        at = np.array(ev.lines)
        ch, sh, zc, g, ln = ev.line_parts
        if want("length"):
            gsh = g * sh
            out.append((at, "length", (gsh, g * zc * ch, g * ch / zc, gsh)))
        if want("gamma"):
            lsh = ln * sh
            out.append((at, "gamma", (lsh, ln * zc * ch, ln * ch / zc, lsh)))
        if want("z_c"):
            out.append((at, "z_c", (None, sh, -sh / (zc * zc), None)))
    if ev.pis:
        at = np.array(ev.pis)
        cs, zs, b1, b2 = ev.pi_parts  # Z = -j zs, Y1 = j b1, Y2 = j b2
        if want("c_series"):  # d zs / d C_series = -zs / C_series
            q = zs / cs
            out.append((at, "c_series", (-b2 * q, 1j * q, -1j * (b1 * b2 * q), -b1 * q)))
        if want("c_shunt_in"):  # d b1 / d C_in = omega
            out.append((at, "c_shunt_in", (None, None, 1j * (omega * (1.0 + b2 * zs)), omega * zs)))
        if want("c_shunt_out"):
            out.append(
                (at, "c_shunt_out", (omega * zs, None, 1j * (omega * (1.0 + b1 * zs)), None))
            )
    grouped = set(ev.lines) | set(ev.pis)
    for i, e in enumerate(elements):
        if i in grouped:
            continue
        for name, de_ in e.derivatives(omega, wrt).items():
            de: Any = de_
            if e.kind is Kind.SERIES:
                entries: _Entries = (None, np.broadcast_to(de, shape)[None], None, None)
            elif e.kind is Kind.SHUNT:
                entries = (None, None, np.broadcast_to(de, shape)[None], None)
            else:
                da, db, dc, dd = (np.broadcast_to(np.asarray(x, complex), shape)[None] for x in de)
                entries = (da, db, dc, dd)
            out.append((np.array([i]), name, entries))
    return out


def element_matrices(element: Element, f: ArrayLike) -> NDArray[np.complex128]:
    """ABCD of one element stacked as ``(..., nf, 2, 2)`` (for export, debugging, baselines)."""
    omega = _omega(f)
    val = element.value(omega)
    if isinstance(val, Abcd):
        m = val
    elif element.kind is Kind.SERIES:
        m = Abcd(1.0, val, 0.0, 1.0)
    else:
        m = Abcd(1.0, 0.0, val, 1.0)
    shape = np.broadcast_shapes(*(np.shape(x) for x in m), omega.shape)
    out = np.empty((*shape, 2, 2), dtype=complex)
    out[..., 0, 0], out[..., 0, 1], out[..., 1, 0], out[..., 1, 1] = m
    return out


def node_states(
    elements: Sequence[Element], f: ArrayLike, z_ref: float
) -> list[tuple[Array, Array]]:
    """Voltage and current (V, I) at the input of every element, and after the last one, for a
    load ``z_ref`` driven so that the load voltage is 1 V. Scale by the source to get absolute
    values. Each entry is a pair of ``(..., nf)`` arrays; ``len(elements) + 1`` entries."""
    _check_elements(elements)
    z = v.positive("z_ref", z_ref)
    omega = _omega(f)
    col: tuple = (np.ones(omega.shape, complex), np.full(omega.shape, 1.0 / z, complex))
    out = [col]
    for e in reversed(elements):
        col = _times_column(e.kind, e.value(omega), col)
        out.append(col)
    return out[::-1]
