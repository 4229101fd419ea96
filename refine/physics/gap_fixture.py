"""The field-solver gap calibration as data: the nine-gap fixture (series and shunt
capacitance of single symmetric microstrip gaps, mesh-extrapolated; provenance inside the file)
and which closed-form gap model it favours near a user's gap.

The fixture is ``gap_calibration.json`` beside this module; ``tests/data`` links to it, and
``python -m refine.fullwave.calibration`` regenerates it with the field solver.
"""

from __future__ import annotations

import json
import math
import warnings
from dataclasses import dataclass
from pathlib import Path

from refine import _validate as v
from refine import validity
from refine.physics.microstrip import Microstrip
from refine.physics.strip import GAP_MODELS, gap_capacitances
from refine.physics.substrate import Substrate

FIXTURE = Path(__file__).with_name("gap_calibration.json")


@dataclass(frozen=True)
class GapGeometry:
    """A symmetric microstrip gap, SI units."""

    eps_r: float
    height: float
    width: float
    gap: float

    def __post_init__(self) -> None:
        v.real_in_range("eps_r", self.eps_r, 1.0, 100.0)
        v.positive("height", self.height)
        v.positive("width", self.width)
        v.positive("gap", self.gap)

    @property
    def label(self) -> str:
        return (
            f"eps_r {self.eps_r:g}, h {self.height * 1e3:g} mm, W {self.width * 1e3:g} mm, "
            f"s {self.gap * 1e3:g} mm"
        )


@dataclass(frozen=True)
class Fixture:
    provenance: dict
    records: tuple[dict, ...]

    def geometries(self) -> list[GapGeometry]:
        return [GapGeometry(**r["geometry"]) for r in self.records]


def load_fixture(path: str | Path = FIXTURE) -> Fixture:
    data = json.loads(Path(path).read_text())
    return Fixture(data["provenance"], tuple(data["gaps"]))


def model_values(g: GapGeometry) -> dict[str, tuple[float, float]]:
    """(Cg, Cp) of every closed-form microstrip gap model at a geometry (warnings muted:
    the comparison itself is the point)."""
    med = Microstrip(Substrate(g.eps_r, g.height))
    out = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        for model in GAP_MODELS["microstrip"]:
            c = gap_capacitances(med, model, g.width, g.width, g.gap)
            out[model] = (float(c.c_series), float(c.c_shunt_in))
    return out


def comparison(fx: Fixture) -> list[dict]:
    """Per fixture geometry: EM Cg, Cp and each model's relative error."""
    rows = []
    for r in fx.records:
        g = GapGeometry(**r["geometry"])
        models = {
            model: (cg / r["c_series"] - 1.0, cp / r["c_shunt"] - 1.0)
            for model, (cg, cp) in model_values(g).items()
        }
        row = {"geometry": g, "em": (r["c_series"], r["c_shunt"]), "models": models}
        rows.append(row)
    return rows


def _distance(a: GapGeometry, b: GapGeometry) -> float:
    """Closeness in the ratios the models depend on: log W/h, log s/W, log eps_r."""
    da = math.log((a.width / a.height) / (b.width / b.height))
    ds = math.log((a.gap / a.width) / (b.gap / b.width))
    de = math.log(a.eps_r / b.eps_r)
    return math.sqrt(da**2 + ds**2 + de**2)


@dataclass(frozen=True)
class ModelVerdict:
    """Which gap model the EM data favour near a geometry. errors: the model's relative error
    in Cg at the nearest fixture geometry; distance: how far that geometry is (0 = same W/h,
    s/W and eps_r; 0.7 is about a factor of two in one of them)."""

    nearest: GapGeometry
    distance: float
    errors: dict[str, float]

    @property
    def closest(self) -> str:
        return min(self.errors, key=lambda m: abs(self.errors[m]))

    def sentence(self) -> str:
        parts = ", ".join(f"{m} {100 * e:+.1f} %" for m, e in self.errors.items())
        far = (
            " No calibrated gap is close to this one (distance above 0.7): indicative only."
            if self.distance > 0.7
            else ""
        )
        return (
            f"Series gap capacitance against the field solver at the nearest calibrated gap "
            f"({self.nearest.label}; distance {self.distance:.2f}): {parts}. "
            f"Closest: {self.closest}.{far}"
        )


def verdict(w: float, s: float, substrate: Substrate, fx: Fixture | None = None) -> ModelVerdict:
    """The nearest fixture geometry to a gap of the user's and how each model does there."""
    fx = fx if fx is not None else load_fixture()
    g = GapGeometry(substrate.eps_r, substrate.height, w, s)
    best = min(comparison(fx), key=lambda row: _distance(g, row["geometry"]))
    errors = {m: e[0] for m, e in best["models"].items()}
    return ModelVerdict(best["geometry"], _distance(g, best["geometry"]), errors)
