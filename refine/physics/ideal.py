"""Ideal TEM medium: lossless, dispersionless, vacuum-filled line of a stated impedance.

Used for electrical (circuit-level) designs, where only electrical length and impedance
matter. Phase velocity is c exactly, so a physical length l has electrical length
θ(f) = 2π f l / c; :meth:`IdealTEM.length_for_angle` converts the other way at an explicit
reference frequency.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine.physics.constants import C0


@dataclass(frozen=True)
class IdealTEM:
    """Lossless TEM line with real characteristic impedance ``z_c`` (ohm) and v_p = c."""

    z_c: float

    def __post_init__(self) -> None:
        v.positive("z_c", self.z_c)

    def line_properties(
        self, f: ArrayLike
    ) -> tuple[NDArray[np.complex128], NDArray[np.complex128]]:
        """(gamma, z_c) at frequencies ``f`` (Hz): gamma = j 2π f/c, z_c constant."""
        f = v.frequencies("f", f)
        gamma: NDArray[np.complex128] = np.asarray(1j * 2.0 * np.pi * f / C0, complex)
        return gamma, np.full(f.shape, complex(self.z_c), dtype=complex)

    @staticmethod
    def length_for_angle(theta: ArrayLike, f0: float) -> NDArray[np.float64]:
        """Physical length (m) whose electrical length is ``theta`` (rad) at ``f0`` (Hz)."""
        f0 = v.positive("f0", f0)
        return np.asarray(theta, dtype=float) * C0 / (2.0 * np.pi * f0)
