"""Problem files: TOML in, validated frozen dataclasses out.

Units are strings parsed once, here, with pint ("10.5 GHz", "0.635 mm", "25 um", "4.1e7 S/m");
everything past this module is SI. Every rejection raises :class:`ProblemError` naming the file,
the key, the value and what is allowed.

Schema (keys marked * are required)::

    name = "free text"                       *
    [response]                               *
    family = "chebyshev" | "butterworth"     *
    ripple_db = 0.1                          (chebyshev only; required for it)
    order = 5                                (1..15; optional when [[mask.stopband]] is given)
    center = "10.5 GHz"                      * (or centre)
    bandwidth = "300 MHz" | fractional_bandwidth = 0.0286     * (exactly one)
    z_ref = "50 ohm"                         *
    [medium]                                 *
    kind = "microstrip" | "stripline" | "ideal"               *
    eps_r, height                            * for microstrip and stripline
    metal_thickness, loss_tangent, conductivity, roughness    optional
    eps_r_tolerance, height_tolerance                         optional, 1-sigma, for yield
    enclosure = "open" (default: microstrip radiates at open ends and gaps) | "shielded"
                                             (microstrip under a lid far enough away not to change
                                              the lines: no radiation)
    [fab]                                    * for microstrip and stripline
    min_gap *, min_width, grid, gap_tolerance, width_tolerance, max_total_length,
    etch_bias (per copper edge: the artwork is drawn that much larger; default 0)
    [coupling]  external = "gap" | "tap"     (default "gap")
                topology = "end-coupled" (default: resonators in a row, coupled through end
                      gaps) | "parallel-coupled" (quarter-wave coupled sections; strip media,
                      external "gap" only: the first and last sections couple the ports)
    [resonators] width = "free" | "feed" | "free-beyond-models"
                                             (default "free": the refiner may change them within
                                              the gap model's stated W/h range; "feed": every
                                              resonator at the feed line width; the last: up to
                                              three feed widths, outside the model's range)
    [models]    gap = microstrip: "calibrated" (default where refine bundles a calibration for
                      the substrate's eps_r) | "garg-bahl" (default elsewhere) |
                      "kirschning-jansen-koster"; stripline: "calibrated" (default: the bundled
                      stripline calibration serves every eps_r) | "altschuler-oliner";
                      not for "ideal"
                calibration = a bundled calibration name or a file path (implies gap =
                      "calibrated"; default: the bundled one for the substrate's eps_r, or the
                      stripline one)
                uncertainty = "robust" (default: after meeting the mask, refine for the worst
                      corner of the model's stated uncertainty) | "judge" (judge the corners
                      only); either way "met" needs the mask met at every corner
                gaps = "in-range" (default: the refiner keeps every gap inside the gap
                      model's range: a calibration's s/h, Kirschning-Jansen-Koster's s/h >=
                      0.1, Garg-Bahl's s/W 0.1-1 on both sides) | "beyond-range" (it may leave
                      it; the model then carries on by a trend and warns)
    [mask]                                   *
    passband_return_loss_db, passband_ripple_db, midband_insertion_loss_db   (at least one)
    [[mask.stopband]]  start, stop, rejection_db
"""

from __future__ import annotations

import math
import re
import tomllib
import unicodedata
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import Any

from refine.physics import calibrated, strip
from refine.physics.substrate import Substrate
from refine.spec import families
from refine.spec.coupling import Coupling
from refine.spec.fab import FabRules
from refine.spec.mask import Mask, Stopband

MEDIUM_KINDS = ("microstrip", "stripline", "ideal")
MAX_NAME = 200  # characters of a problem's name (it titles every output file)
EXTERNAL_KINDS = tuple(c.value for c in Coupling)
RESONATOR_WIDTHS = ("free", "feed", "free-beyond-models")
GAP_MODELS = {**strip.GAP_MODELS, "ideal": ()}


class ProblemError(ValueError):
    """A problem file that cannot be used; the message names file, key, value and range."""


@dataclass(frozen=True)
class Problem:
    """A design problem: spec, medium, fab rules, coupling kind and mask (SI units)."""

    name: str
    family: str
    ripple_db: float | None
    order: int | None
    f0: float
    fbw: float
    z_ref: float
    medium: str
    substrate: Substrate | None
    fab: FabRules | None
    external: Coupling
    gap_model: str
    mask: Mask
    source: str = "<memory>"
    resonator_width: str = "free"  # refinable within the gap model's range; "feed": z_ref width
    # ("free-beyond-models": refinable outside the gap model's range too)
    enclosure: str = "open"  # microstrip: "open" (radiates) or "shielded"
    uncertainty: str = "robust"  # "robust": refine for the worst model corner; "judge": only judge
    topology: str = "end-coupled"  # or "parallel-coupled"
    gaps: str = "in-range"  # the refiner keeps gaps in the calibration's s/h range; "beyond-range"

    @property
    def strip_substrate(self) -> Substrate:
        """The substrate of a strip problem; a ValueError for the ideal medium, which has none."""
        if self.substrate is None:
            raise ValueError(f"problem {self.name!r}: the ideal medium has no substrate")
        return self.substrate

    @property
    def strip_fab(self) -> FabRules:
        """The fab rules of a strip problem; a ValueError for the ideal medium, which has none."""
        if self.fab is None:
            raise ValueError(f"problem {self.name!r}: the ideal medium has no fab rules")
        return self.fab

    @property
    def free_widths(self) -> bool:
        """Whether the refiner may change the resonator widths (strip media)."""
        return self.resonator_width in ("free", "free-beyond-models")

    @property
    def width_range(self) -> tuple[float, float] | None:
        """The W/h range refinable resonator widths stay in: the gap model's stated range, or
        None with ``[resonators] width = "free-beyond-models"`` (or a model without one)."""
        if self.resonator_width == "free-beyond-models":
            return None
        return strip.gap_model_wh(self.gap_model)

    @property
    def gap_range(self) -> tuple[float, float] | None:
        """The s/h range refinable gaps stay in: the gap calibration's or closed-form model's
        (the upper limit may be inf), or None with ``[models] gaps = "beyond-range"`` (or a
        model that states no s/h range)."""
        if self.gaps == "beyond-range":
            return None
        return strip.gap_model_sh(self.gap_model)

    @property
    def gap_sw_range(self) -> tuple[float, float] | None:
        """The s/W range refinable gaps stay in (W each strip a gap faces): the closed-form gap
        model's, or None with ``[models] gaps = "beyond-range"`` (or a model that states none)."""
        if self.gaps == "beyond-range":
            return None
        return strip.gap_model_sw(self.gap_model)

    @property
    def band_edges(self) -> tuple[float, float]:
        """Specified passband edges f0 (1 ∓ FBW/2) in Hz."""
        return self.f0 * (1.0 - self.fbw / 2.0), self.f0 * (1.0 + self.fbw / 2.0)


@lru_cache(maxsize=1)
def _ureg():
    """pint's unit registry, built once, on first use. Building it parses pint's definition
    files (0.3–0.6 s); pint keeps the parsed result in the user's cache folder, so later runs
    load it in a few tens of milliseconds. Without a usable cache folder it is built afresh."""
    import pint

    try:
        return pint.UnitRegistry(cache_folder=":auto:")
    except OSError:
        return pint.UnitRegistry()


_SI = {"frequency": "Hz", "length": "m", "impedance": "ohm", "conductivity": "S/m"}

# The common spellings, read without pint (whose import and registry cost 0.4–0.7 s a
# command): a plain decimal number, then an SI prefix and the kind's own unit. Anything else
# ("0.025 in", "20 mil", "3 GHz + 10 MHz", "1/cm") goes to pint; the tests check that both
# read every bundled problem file alike.
_PLAIN = re.compile(r"\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-zµμΩ/]+)\s*")
_PREFIX = {"G": 1e9, "M": 1e6, "k": 1e3, "": 1.0, "c": 1e-2, "m": 1e-3, "u": 1e-6, "µ": 1e-6}
_PREFIX["μ"] = 1e-6
_PREFIX["n"] = 1e-9
_UNITS = {
    "frequency": ("Hz",),
    "length": ("m",),
    "impedance": ("ohm", "Ω"),
    "conductivity": ("S/m",),
}


def plain_si(text: str, kind: str) -> float | None:
    """``text`` in SI units when it is a plain number with an SI-prefixed unit of ``kind``
    (for example "10 GHz", "0.635 mm", "50 ohm", "5.8e7 S/m"); None otherwise."""
    m = _PLAIN.fullmatch(text)
    if m is None:
        return None
    number, unit = m.groups()
    for base in _UNITS[kind]:
        if unit.endswith(base) and unit[: -len(base)] in _PREFIX:
            if kind == "conductivity" and unit != base:
                return None  # a prefixed S/m is rare and ambiguous: leave it to pint
            return float(number) * _PREFIX[unit[: -len(base)]]
    return None


class _Reader:
    def __init__(self, source: str):
        self.source = source

    def fail(self, key: str, value: object, why: str) -> ProblemError:
        return ProblemError(f"{self.source}: {key} = {value!r}: {why}")

    def table(self, data: dict, key: str, allowed: set[str], required: bool = True) -> dict:
        if key not in data:
            if required:
                raise ProblemError(f"{self.source}: missing required table [{key}]")
            return {}
        t = data[key]
        if not isinstance(t, dict):
            raise self.fail(key, t, "must be a table")
        for k in t:
            if k not in allowed:
                raise self.fail(
                    f"{key}.{k}",
                    t[k],
                    f"unknown key; allowed keys are {', '.join(sorted(allowed))}",
                )
        return t

    def number(
        self,
        t: dict,
        prefix: str,
        key: str,
        lo: float | None,
        hi: float | None,
        *,
        lo_open: bool = False,
        hi_open: bool = False,
        required: bool = False,
        default: float | None = None,
    ) -> float | None:
        full = f"{prefix}.{key}"
        if key not in t:
            if required:
                raise ProblemError(f"{self.source}: missing required key {full}")
            return default
        x = t[key]
        if isinstance(x, bool) or not isinstance(x, (int, float)):
            raise self.fail(full, x, "must be a number")
        return self._range(full, x, float(x), lo, hi, lo_open, hi_open, "")

    def need_number(self, t: dict, prefix: str, key: str, *args: Any, **kw: Any) -> float:
        """:meth:`number` of a required key."""
        x = self.number(t, prefix, key, *args, required=True, **kw)
        assert x is not None  # number() raises for a missing required key
        return x

    def number_or(
        self, t: dict, prefix: str, key: str, *args: Any, default: float, **kw: Any
    ) -> float:
        """:meth:`number` of an optional key with a default."""
        x = self.number(t, prefix, key, *args, default=default, **kw)
        return default if x is None else x

    def need_quantity(self, t: dict, prefix: str, key: str, *args: Any, **kw: Any) -> float:
        """:meth:`quantity` of a required key (or one known to be present)."""
        x = self.quantity(t, prefix, key, *args, required=True, **kw)
        assert x is not None  # quantity() raises for a missing required key
        return x

    def _range(
        self, full: str, raw: object, x: float, lo, hi, lo_open, hi_open, unit: str
    ) -> float:
        if not math.isfinite(x):
            raise self.fail(full, raw, "must be finite")
        bad = (lo is not None and (x <= lo if lo_open else x < lo)) or (
            hi is not None and (x >= hi if hi_open else x > hi)
        )
        if bad:
            left = "(" if lo_open or lo is None else "["
            right = ")" if hi_open or hi is None else "]"
            lo_s = "-inf" if lo is None else f"{lo:g}"
            hi_s = "inf" if hi is None else f"{hi:g}"
            u = f" {unit}" if unit else ""
            raise self.fail(full, raw, f"outside the allowed range {left}{lo_s}, {hi_s}{right}{u}")
        return x

    def quantity(
        self,
        t: dict,
        prefix: str,
        key: str,
        kind: str,
        lo: float | None,
        hi: float | None,
        *,
        lo_open: bool = False,
        hi_open: bool = False,
        required: bool = False,
    ) -> float | None:
        """A string with units, converted to SI; range limits are in SI units."""
        full = f"{prefix}.{key}"
        if key not in t:
            if required:
                raise ProblemError(f"{self.source}: missing required key {full}")
            return None
        raw = t[key]
        if not isinstance(raw, str):
            raise self.fail(
                full, raw, f'must be a string with a unit of {kind}, e.g. "1 {_SI[kind]}"'
            )
        x = plain_si(raw, kind)
        if x is not None:
            return self._range(full, raw, x, lo, hi, lo_open, hi_open, _SI[kind])
        import pint

        ureg = _ureg()
        # The trade's "mil" is a thousandth of an inch; pint reads "mil" as a plain ratio.
        text = re.sub(r"\bmils?\b", "thou", raw)
        try:
            q = ureg.Quantity(text)
        except (pint.errors.PintError, ValueError, TypeError, AttributeError, SyntaxError):
            raise self.fail(
                full, raw, f"cannot be read as a quantity with a unit of {kind}"
            ) from None
        if (
            isinstance(q, (int, float))
            or q.dimensionality != ureg.Quantity(1, _SI[kind]).dimensionality
        ):
            raise self.fail(full, raw, f"must have a unit of {kind} (like {_SI[kind]})")
        x = float(q.to(_SI[kind]).magnitude)
        return self._range(full, raw, x, lo, hi, lo_open, hi_open, _SI[kind])

    def choice(
        self, t: dict, prefix: str, key: str, allowed: tuple[str, ...], default: str | None = None
    ) -> str:
        full = f"{prefix}.{key}"
        if key not in t:
            if default is None:
                raise ProblemError(f"{self.source}: missing required key {full}")
            return default
        x = t[key]
        if x not in allowed:
            raise self.fail(full, x, f"must be one of {', '.join(repr(a) for a in allowed)}")
        return str(x)


CALIBRATED = "calibrated"  # [models] gap: the circuit reads a calibration data file
ENCLOSURES = ("open", "shielded")
UNCERTAINTY_USES = ("robust", "judge")  # [models] uncertainty
GAP_RANGES = ("in-range", "beyond-range")  # [models] gaps
TOPOLOGY_KINDS = ("end-coupled", "parallel-coupled")  # [coupling] topology


def _calibration_model(
    r: _Reader, models: dict, eps_r: float, source: str, stripline: bool = False
) -> str:
    """The gap-model name ``calibrated:<bundled name or absolute path>`` for ``[models]``: the
    named calibration (a bundled name, or a path relative to the problem file), or the bundled
    one for the substrate's ε_r (on stripline: the bundled stripline one, which serves every
    ε_r)."""
    bundled = ", ".join(
        f"{n} ("
        + ("stripline" if calibrated.load(n).stripline else f"eps_r {calibrated.load(n).eps_r:g}")
        + ")"
        for n in calibrated.bundled_names()
    )
    ref = models.get("calibration")
    if ref is None:
        found = calibrated.for_eps_r(eps_r, stripline)
        if found is None:
            raise r.fail(
                "models.gap",
                CALIBRATED,
                (
                    "no bundled stripline calibration"
                    if stripline
                    else f"no bundled calibration for eps_r = {eps_r:g}"
                )
                + f" (bundled: {bundled or 'none'}); "
                "name a file with models.calibration, made by "
                "python -m refine.fullwave.static_calibration",
            )
        ref = found
    elif not isinstance(ref, str) or not ref.strip():
        raise r.fail("models.calibration", ref, "must be a bundled calibration name or a file path")
    elif ref not in calibrated.bundled_names():
        path = Path(ref)
        if not path.is_absolute() and source != "<memory>":
            path = Path(source).parent / path
        ref = str(path.resolve())
    try:
        cal = calibrated.load(ref)
    except ValueError as e:
        raise r.fail("models.calibration", models.get("calibration", ref), str(e)) from None
    if cal.stripline != stripline:
        raise r.fail(
            "models.calibration",
            models.get("calibration", ref),
            f"a calibration for {'stripline' if cal.stripline else 'microstrip'}, "
            f"but medium.kind = {'stripline' if stripline else 'microstrip'}",
        )
    if not cal.stripline and abs(cal.eps_r - eps_r) > 1e-6 * eps_r:
        raise r.fail(
            "models.calibration",
            models.get("calibration", ref),
            f"calibrated for eps_r = {cal.eps_r:g}, but medium.eps_r = {eps_r:g}",
        )
    return cal.label


def parse_problem(data: dict[str, Any], source: str = "<memory>") -> Problem:
    """Validate a problem given as a dict (the parsed TOML) and return a :class:`Problem`."""
    r = _Reader(source)
    top = {"name", "response", "medium", "fab", "coupling", "resonators", "models", "mask"}
    for k in data:
        if k not in top:
            raise r.fail(k, data[k], f"unknown key; allowed keys are {', '.join(sorted(top))}")
    name = data.get("name")
    if not isinstance(name, str) or not name.strip():
        raise r.fail("name", name, "must be a non-empty string")
    if len(name) > MAX_NAME:
        raise ProblemError(
            f"{source}: name = {name[:40]!r}... ({len(name)} characters): must be at most "
            f"{MAX_NAME} characters"
        )
    if any(unicodedata.category(c) in ("Cc", "Zl", "Zp") for c in name):
        raise r.fail(
            "name", name, "must be one line of text (no line breaks or control characters)"
        )

    resp = r.table(
        data,
        "response",
        {
            "family",
            "ripple_db",
            "order",
            "center",
            "centre",
            "bandwidth",
            "fractional_bandwidth",
            "z_ref",
        },
    )
    if "centre" in resp:  # both spellings are accepted; one of them, once
        if "center" in resp:
            raise r.fail("response.centre", resp["centre"], "is given twice (also as 'center')")
        resp = {**resp, "center": resp["centre"]}
    family = r.choice(resp, "response", "family", families.FAMILIES)
    if family == "chebyshev":
        ripple = r.need_number(resp, "response", "ripple_db", 0.0, 10.0, lo_open=True)
    else:
        if "ripple_db" in resp:
            raise r.fail(
                "response.ripple_db",
                resp["ripple_db"],
                "only applies to family 'chebyshev' (butterworth is 3.0103 dB)",
            )
        ripple = None
    order = None
    if "order" in resp:
        o = resp["order"]
        if isinstance(o, bool) or not isinstance(o, int) or not 1 <= o <= families.MAX_ORDER:
            raise r.fail("response.order", o, f"must be an integer in 1..{families.MAX_ORDER}")
        order = int(o)
    f0 = r.need_quantity(resp, "response", "center", "frequency", 0.0, None, lo_open=True)
    has_bw, has_fbw = "bandwidth" in resp, "fractional_bandwidth" in resp
    if has_bw == has_fbw:
        raise ProblemError(
            f"{source}: [response] needs exactly one of bandwidth or fractional_bandwidth"
        )
    if has_bw:
        bw = r.need_quantity(resp, "response", "bandwidth", "frequency", 0.0, None, lo_open=True)
        if bw >= f0:
            raise r.fail(
                "response.bandwidth",
                resp["bandwidth"],
                f"must be below the centre frequency {f0:g} Hz (allowed range (0, {f0:g}) Hz)",
            )
        fbw = bw / f0
    else:
        fbw = r.need_number(
            resp, "response", "fractional_bandwidth", 0.0, 1.0, lo_open=True, hi_open=True
        )
    z_ref = r.need_quantity(resp, "response", "z_ref", "impedance", 1.0, 1000.0)

    med = r.table(
        data,
        "medium",
        {
            "kind",
            "eps_r",
            "height",
            "metal_thickness",
            "loss_tangent",
            "conductivity",
            "roughness",
            "eps_r_tolerance",
            "height_tolerance",
            "enclosure",
        },
    )
    kind = r.choice(med, "medium", "kind", MEDIUM_KINDS)
    enclosure = "open"
    if "enclosure" in med:
        if kind != "microstrip":
            raise r.fail(
                "medium.enclosure",
                med["enclosure"],
                "applies to microstrip only (stripline is enclosed)",
            )
        enclosure = r.choice(med, "medium", "enclosure", ENCLOSURES)
    substrate = None
    fab = None
    if kind == "ideal":
        extra = set(med) - {"kind"}
        if extra:
            k = sorted(extra)[0]
            raise r.fail(f"medium.{k}", med[k], "does not apply to medium kind 'ideal'")
        if "fab" in data:
            raise r.fail("fab", data["fab"], "does not apply to medium kind 'ideal'")
    else:
        eps_r = r.need_number(med, "medium", "eps_r", 1.0, 100.0)
        h = r.need_quantity(med, "medium", "height", "length", 0.0, 0.1, lo_open=True)
        t = r.quantity(med, "medium", "metal_thickness", "length", 0.0, h / 4.0) or 0.0
        tand = r.number_or(med, "medium", "loss_tangent", 0.0, 0.1, hi_open=True, default=0.0)
        sigma = r.quantity(med, "medium", "conductivity", "conductivity", 0.0, None, lo_open=True)
        rough = r.quantity(med, "medium", "roughness", "length", 0.0, h) or 0.0
        er_tol = r.number_or(med, "medium", "eps_r_tolerance", 0.0, eps_r / 5.0, default=0.0)
        h_tol = r.quantity(med, "medium", "height_tolerance", "length", 0.0, h / 5.0) or 0.0
        substrate = Substrate(eps_r, h, t, tand, sigma, rough, er_tol, h_tol)
        fab_t = r.table(
            data,
            "fab",
            {
                "min_gap",
                "min_width",
                "grid",
                "gap_tolerance",
                "width_tolerance",
                "max_total_length",
                "etch_bias",
            },
        )
        min_gap = r.need_quantity(fab_t, "fab", "min_gap", "length", 0.0, 1.0, lo_open=True)
        lengths: dict[str, float | None] = {}
        for key, lo, lo_open in (
            ("min_width", 0.0, True),
            ("grid", 0.0, True),
            ("gap_tolerance", 0.0, False),
            ("width_tolerance", 0.0, False),
            ("max_total_length", 0.0, True),
        ):
            lengths[key] = r.quantity(fab_t, "fab", key, "length", lo, 1.0, lo_open=lo_open)
        # drawn gaps are 2 biases narrower than built ones: below half the minimum gap
        grid = lengths["grid"]
        if grid is not None and grid > min_gap:
            raise r.fail(
                "fab.grid",
                fab_t["grid"],
                f"coarser than fab.min_gap = {fab_t['min_gap']!r}: the shop could not draw its "
                f"own minimum gap (allowed: a grid at most the minimum gap, {min_gap * 1e6:g} um)",
            )
        bias = r.quantity(fab_t, "fab", "etch_bias", "length", 0.0, min_gap / 2, hi_open=True)
        fab = FabRules(min_gap, **lengths, etch_bias=bias or 0.0)

    coup = r.table(data, "coupling", {"external", "topology"}, required=False)
    external = r.choice(coup, "coupling", "external", EXTERNAL_KINDS, default="gap")
    topology = r.choice(coup, "coupling", "topology", TOPOLOGY_KINDS, default="end-coupled")
    if topology == "parallel-coupled" and kind == "ideal":
        raise r.fail(
            "coupling.topology",
            topology,
            "a parallel-coupled filter needs a strip medium, not 'ideal'",
        )
    if topology == "parallel-coupled" and external == "tap":
        raise r.fail(
            "coupling.external",
            "tap",
            'a parallel-coupled filter\'s end sections couple its ports; use external = "gap" '
            "or leave it out",
        )
    if kind == "ideal" and external == "tap":
        raise r.fail(
            "coupling.external", "tap", "tapped coupling needs a strip medium, not 'ideal'"
        )
    res_t = r.table(data, "resonators", {"width"}, required=False)
    resonator_width = r.choice(res_t, "resonators", "width", RESONATOR_WIDTHS, default="free")
    if kind == "ideal" and "width" in res_t:
        raise r.fail("resonators.width", res_t["width"], "does not apply to medium kind 'ideal'")
    models = r.table(data, "models", {"gap", "calibration", "uncertainty", "gaps"}, required=False)
    uncertainty = r.choice(models, "models", "uncertainty", UNCERTAINTY_USES, default="robust")
    gaps = r.choice(models, "models", "gaps", GAP_RANGES, default="in-range")
    if kind == "ideal":
        for key in ("gap", "calibration", "uncertainty", "gaps"):
            if key in models:
                raise r.fail(f"models.{key}", models[key], "does not apply to medium kind 'ideal'")
        gap_model = "ideal"
    else:
        choices = (*GAP_MODELS[kind], CALIBRATED)
        assert substrate is not None
        on_stripline = kind == "stripline"
        bundled = calibrated.for_eps_r(substrate.eps_r, on_stripline) is not None
        default = CALIBRATED if "calibration" in models or bundled else GAP_MODELS[kind][0]
        gap_model = r.choice(models, "models", "gap", choices, default=default)
        if gap_model == CALIBRATED:
            gap_model = _calibration_model(r, models, substrate.eps_r, source, on_stripline)
        elif "calibration" in models:
            raise r.fail(
                "models.calibration",
                models["calibration"],
                f"applies only with models.gap = {CALIBRATED!r} (got {gap_model!r})",
            )

    mask_t = r.table(
        data,
        "mask",
        {"passband_return_loss_db", "passband_ripple_db", "midband_insertion_loss_db", "stopband"},
    )
    rl = r.number(mask_t, "mask", "passband_return_loss_db", 0.0, 60.0, lo_open=True)
    rip = r.number(mask_t, "mask", "passband_ripple_db", 0.0, 10.0, lo_open=True)
    il = r.number(mask_t, "mask", "midband_insertion_loss_db", 0.0, 60.0, lo_open=True)
    if rl is None and rip is None and il is None:
        raise ProblemError(
            f"{source}: [mask] needs at least one of passband_return_loss_db, "
            "passband_ripple_db or midband_insertion_loss_db"
        )
    lo_edge, hi_edge = f0 * (1 - fbw / 2), f0 * (1 + fbw / 2)
    stopbands = []
    raw_sbs = mask_t.get("stopband", [])
    if not isinstance(raw_sbs, list):
        raise r.fail("mask.stopband", raw_sbs, "must be an array of tables ([[mask.stopband]])")
    for i, sb in enumerate(raw_sbs):
        pre = f"mask.stopband[{i}]"
        if not isinstance(sb, dict):
            raise r.fail(pre, sb, "must be a table")
        for k in sb:
            if k not in {"start", "stop", "rejection_db"}:
                raise r.fail(
                    f"{pre}.{k}", sb[k], "unknown key; allowed keys are rejection_db, start, stop"
                )
        start = r.need_quantity(sb, pre, "start", "frequency", 0.0, None)
        stop = r.need_quantity(sb, pre, "stop", "frequency", start, None, lo_open=True)
        rej = r.need_number(sb, pre, "rejection_db", 0.0, 200.0, lo_open=True)
        if start < hi_edge and stop > lo_edge:
            raise r.fail(
                f"{pre}",
                f"{sb['start']} .. {sb['stop']}",
                f"overlaps the passband {lo_edge / 1e9:.6g}-{hi_edge / 1e9:.6g} GHz",
            )
        stopbands.append(Stopband(start, stop, rej))
    if order is None and not stopbands:
        raise ProblemError(
            f"{source}: response.order is missing and there is no [[mask.stopband]] "
            "to choose it from; give one of them"
        )
    mask = Mask(lo_edge, hi_edge, rl, rip, il, tuple(stopbands))
    return Problem(
        name.strip(),
        family,
        ripple,
        order,
        f0,
        fbw,
        z_ref,
        kind,
        substrate,
        fab,
        Coupling(external),
        gap_model,
        mask,
        source,
        resonator_width,
        enclosure,
        uncertainty,
        topology,
        gaps,
    )


def load_problem(path: str | Path) -> Problem:
    """Read and validate a TOML problem file (see the module docstring for the schema)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as e:
        raise ProblemError(f"{p}: cannot be read ({e.strerror})") from None
    except UnicodeDecodeError as e:
        raise ProblemError(
            f"{p}: is not UTF-8 text (byte {e.object[e.start]:#04x} at position {e.start}); "
            "a problem file is TOML in UTF-8"
        ) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise ProblemError(f"{p}: is not valid TOML ({e})") from None
    return parse_problem(data, str(p))
