"""Substrate of a strip medium (microstrip or stripline)."""

from __future__ import annotations

from dataclasses import dataclass

from refine import _validate as v

COPPER_CONDUCTIVITY = 5.8e7  # S/m, annealed copper; common practice, no source


@dataclass(frozen=True)
class Substrate:
    """Dielectric and metal of a strip medium, SI units.

    eps_r : relative permittivity (≥ 1).
    height : substrate height h for microstrip; ground-plane spacing b for stripline (m, > 0).
    metal_thickness : strip thickness t (m), 0 for an infinitely thin strip; at most h/4
        (a thicker strip is outside every closed-form model used here).
    loss_tangent : tan δ (≥ 0, < 0.1).
    conductivity : of the strip metal (S/m, > 0), or None for a lossless conductor.
    roughness : RMS surface roughness (m, ≥ 0), used by the Hammerstad roughness factor.
    eps_r_tolerance, height_tolerance : the laminate's 1-sigma tolerances (absolute; the height
        one in m), used for yield; at most a fifth of the nominal value.
    """

    eps_r: float
    height: float
    metal_thickness: float = 0.0
    loss_tangent: float = 0.0
    conductivity: float | None = None
    roughness: float = 0.0
    eps_r_tolerance: float = 0.0
    height_tolerance: float = 0.0

    def __post_init__(self) -> None:
        v.real_in_range("eps_r", self.eps_r, 1.0, 100.0)
        h = v.positive("height", self.height)
        v.real_in_range("metal_thickness", self.metal_thickness, 0.0, h / 4.0)
        v.real_in_range("loss_tangent", self.loss_tangent, 0.0, 0.1, hi_open=True)
        if self.conductivity is not None:
            v.positive("conductivity", self.conductivity)
        v.real_in_range("roughness", self.roughness, 0.0, h)
        v.real_in_range("eps_r_tolerance", self.eps_r_tolerance, 0.0, self.eps_r / 5.0)
        v.real_in_range("height_tolerance", self.height_tolerance, 0.0, h / 5.0)
