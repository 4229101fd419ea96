"""A field check's mesh uncertainty and its three-way verdict.

A field solve on one mesh cannot bound its own discretisation error, so a check judged on one
mesh is never called met or not met: it is undecided. With two meshes whose edge cells differ
by a factor r (2 here), the change of a figure between them estimates the finer mesh's error:
for a method converging at order p, error(fine) ≈ |X_fine − X_coarse| / (r^p − 1). FDTD with
staircased metal edges converges at first order in the edge cell (Taflove & Hagness,
*Computational Electrodynamics*, 3rd ed., 2005, ch. 3 and 10, from memory), so for halved
cells the estimate is the change itself. With three meshes the observed order is used instead
(Richardson, :func:`refine.fullwave.waves.richardson`) and the uncertainty is the distance of
the finest mesh's figure from the extrapolated one; where the three do not converge
monotonically the largest change between neighbours is used.

Verdicts (our names):

``met``        worst mask margin on the finest mesh minus its uncertainty ≥ 0
``not met``    worst margin plus its uncertainty < 0
``undecided``  the mesh cannot tell (or there is only one mesh): the next halving would decide
"""

from __future__ import annotations

import enum
import math
from collections.abc import Sequence
from dataclasses import dataclass


class MeshVerdict(enum.Enum):
    MET = "met beyond the mesh uncertainty"
    NOT_MET = "not met beyond the mesh uncertainty"
    UNDECIDED = "undecided at this mesh"


@dataclass(frozen=True)
class Figure:
    """One comparison figure on each mesh (coarsest first), its value on the finest mesh and
    the estimated error of that value (None with one mesh)."""

    name: str
    unit: str
    per_mesh: tuple[float, ...]
    uncertainty: float | None

    @property
    def value(self) -> float:
        return self.per_mesh[-1]


def mesh_uncertainty(cells: Sequence[float], values: Sequence[float]) -> float | None:
    """Estimated error of the finest mesh's value (see the module docstring); None for one mesh.

    ``cells`` are the edge cells, coarsest first (the refinement ratio is read from them). With
    three meshes the observed order is capped at :data:`MAX_ORDER`: a much higher observed
    order (two nearly equal finer values) would give an estimate far below the last change,
    which three meshes cannot support (the usual cap of grid-convergence practice, from memory).
    For the same reason the last change is taken as at least the one the capped order predicts
    from the change before it (|d1| / r^MAX_ORDER): a last change near zero is a coincidence of
    two meshes (a figure oscillating about its limit), not proof of convergence."""
    if len(values) != len(cells):
        raise ValueError(f"{len(values)} values for {len(cells)} meshes")
    if len(values) < 2:
        return None
    if not all(math.isfinite(x) for x in values):
        return math.inf
    if len(values) == 2:
        r = cells[0] / cells[1]
        return abs(values[1] - values[0]) / (r - 1.0)  # first order
    d1, d2 = values[-2] - values[-3], values[-1] - values[-2]
    if d1 == 0.0 or d2 == 0.0 or d1 * d2 < 0 or abs(d2) >= abs(d1):
        return max(abs(d1), abs(d2))  # not converging monotonically: the largest change
    r = cells[-2] / cells[-1]
    p = min(math.log(abs(d1 / d2)) / math.log(r), MAX_ORDER)
    return max(abs(d2), abs(d1) / r**MAX_ORDER) / (r**p - 1.0)


#: the highest observed order a three-mesh estimate trusts: twice the first order of FDTD with
#: staircased metal edges
MAX_ORDER = 2.0


def verdict(margin: Figure) -> MeshVerdict:
    """Three-way verdict from the worst mask margin (dB) and its mesh uncertainty."""
    if margin.uncertainty is None or not math.isfinite(margin.uncertainty):
        return MeshVerdict.UNDECIDED
    if margin.value - margin.uncertainty >= 0.0:
        return MeshVerdict.MET
    if margin.value + margin.uncertainty < 0.0:
        return MeshVerdict.NOT_MET
    return MeshVerdict.UNDECIDED


def sentence(margin: Figure, finest_cell: float, ratio: float = 2**0.5) -> str:
    """The verdict as the report says it, with both numbers and what would decide it (a mesh
    with every cell ``ratio`` smaller, the field check's refinement ratio)."""
    v = verdict(margin)
    finer = finest_cell / ratio * 1e6
    if margin.uncertainty is None:
        return (
            f"{v.value}: worst mask margin {margin.value:+.2f} dB on one mesh, whose error a "
            f"single mesh cannot estimate; a second mesh with every cell {ratio:.3g} times "
            f"smaller (edge cells {finer:.3g} um) would bound it"
        )
    text = f"{v.value}: worst mask margin {margin.value:+.2f} ± {margin.uncertainty:.2f} dB"
    if v is MeshVerdict.UNDECIDED:
        text += (
            f"; a mesh with every cell {ratio:.3g} times smaller (edge cells {finer:.3g} um) "
            "would narrow the interval"
        )
    return text
