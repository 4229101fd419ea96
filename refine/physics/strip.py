"""Strip media as the circuit sees them: which medium a strip is on, its gap models, and its
open-end extension.

The gap-model names are the published models of :mod:`refine.physics.discontinuities`; this
module only dispatches to them and says which apply on which medium.
"""

from __future__ import annotations

from typing import Union

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine.physics import calibrated, discontinuities, gap_thickness
from refine.physics.constants import C0
from refine.physics.microstrip import Microstrip, hammerstad_jensen
from refine.physics.stripline import Stripline

StripMedium = Union[Microstrip, Stripline]  # noqa: UP007 (a runtime alias)

GAP_MODELS: dict[str, tuple[str, ...]] = {
    "microstrip": ("garg-bahl", "kirschning-jansen-koster"),
    "stripline": ("altschuler-oliner",),
}

# the strip widths (W/h) each gap model was fitted over: the refiner keeps resonators inside
GAP_MODEL_WH: dict[str, tuple[float, float]] = {
    "garg-bahl": discontinuities.GB_GAP_WH,
    "kirschning-jansen-koster": discontinuities.KJK_GAP_WH,
}

# the gap widths each closed-form gap model states its range in: Kirschning–Jansen–Koster in s/h
# (from 0.1, no upper limit), Garg–Bahl in s/W (0.1 to 1, against each strip the gap faces);
# a calibration states s/h (calibrated.Calibration.s_h_range). The refiner keeps gaps inside.
GAP_MODEL_SH: dict[str, tuple[float, float]] = {
    "kirschning-jansen-koster": discontinuities.KJK_GAP_SH,
}
GAP_MODEL_SW: dict[str, tuple[float, float]] = {
    "garg-bahl": discontinuities.GB_GAP_SW,
}

# gap models whose reference planes are at the gap centre (the circuit adds a half-gap line on
# each side to move them to the strip ends)
CENTRE_REFERENCED = frozenset({"altschuler-oliner"})


def medium_kind(medium: StripMedium) -> str:
    """ "microstrip" or "stripline"."""
    if isinstance(medium, Microstrip):
        return "microstrip"
    if isinstance(medium, Stripline):
        return "stripline"
    raise ValueError(f"medium must be a Microstrip or Stripline, got {type(medium).__name__}")


def calibration_of(model: str) -> calibrated.Calibration | None:
    """The calibration a gap-model name ``calibrated:<name or path>`` refers to, else None."""
    if model.startswith(calibrated.PREFIX):
        return calibrated.load(model[len(calibrated.PREFIX) :])
    return None


def gap_model_wh(model: str) -> tuple[float, float] | None:
    """The strip widths (W/h) a gap model was fitted or calibrated over (None: no range)."""
    cal = calibration_of(model)
    if cal is not None:
        return cal.w_h_range
    return GAP_MODEL_WH.get(model)


def gap_model_sh(model: str) -> tuple[float, float] | None:
    """The gap widths (s/h) a gap model was calibrated or fitted over (None: no range stated in
    s/h; the upper limit may be inf)."""
    cal = calibration_of(model)
    return GAP_MODEL_SH.get(model) if cal is None else cal.s_h_range


def gap_model_sw(model: str) -> tuple[float, float] | None:
    """The gap widths (s/W, W each strip the gap faces) a gap model was fitted over (None: no
    range stated in s/W)."""
    return None if calibration_of(model) is not None else GAP_MODEL_SW.get(model)


def check_gap_model(medium: StripMedium, model: str) -> str:
    """``model`` if it is a gap model of ``medium``'s kind; a ValueError naming both otherwise.
    A calibration must be for the medium's kind (and, on microstrip, of its ε_r)."""
    kind = medium_kind(medium)
    cal = calibration_of(model)
    if cal is None:
        return v.one_of(f"gap model for {kind}", model, GAP_MODELS[kind])
    cal_kind = "stripline" if cal.stripline else "microstrip"
    if kind != cal_kind:
        raise ValueError(f"gap model {model!r}: a calibration for {cal_kind}, not {kind}")
    calibrated.check_eps_r(cal, medium.substrate.eps_r)
    return model


def gap_capacitances(
    medium: StripMedium, model: str, w_in: ArrayLike, w_out: ArrayLike, s: ArrayLike
) -> discontinuities.GapCapacitances:
    """π-network capacitances of a gap of width ``s`` between strips ``w_in`` and ``w_out``:
    the gap model's (zero-thickness strips), plus on microstrip what the substrate's metal
    thickness adds (:mod:`refine.physics.gap_thickness`). ``s`` may be complex."""
    sheets = sheet_gap_capacitances(medium, model, w_in, w_out, s)
    sub = medium.substrate
    if not isinstance(medium, Microstrip) or sub.metal_thickness <= 0:
        return sheets
    ds, di, do = gap_thickness.gap_increment(
        w_in, w_out, s, sub.height, sub.metal_thickness, sub.eps_r
    )
    return discontinuities.GapCapacitances(
        sheets.c_series + ds, sheets.c_shunt_in + di, sheets.c_shunt_out + do
    )


def sheet_gap_capacitances(
    medium: StripMedium, model: str, w_in: ArrayLike, w_out: ArrayLike, s: ArrayLike
) -> discontinuities.GapCapacitances:
    """π-network capacitances of a gap of width ``s`` between strips ``w_in`` and ``w_out`` of
    zero thickness, by the gap model ``model``.

    Garg–Bahl is a symmetric-gap model: for unequal widths its series capacitance is taken at
    the geometric-mean width and each shunt capacitance at its own side's width. For stripline
    the reference planes are at the gap centre (see :data:`CENTRE_REFERENCED`). ``s`` may be
    complex (complex-step derivatives).
    """
    sub = medium.substrate
    cal = calibration_of(model)
    if cal is not None:
        return calibrated.gap(cal, w_in, w_out, s, sub.height, sub.eps_r)
    if model == "garg-bahl":
        w_in = np.asarray(w_in, float)
        w_out = np.asarray(w_out, float)
        if np.array_equal(w_in, w_out):
            return discontinuities.garg_bahl_gap(w_in, s, sub.height, sub.eps_r)
        # the mean, input and output widths in one call of the model
        shape = np.broadcast_shapes(w_in.shape, w_out.shape, np.shape(s))
        w3 = np.stack([np.broadcast_to(x, shape) for x in (np.sqrt(w_in * w_out), w_in, w_out)])
        c = discontinuities.garg_bahl_gap(w3, np.broadcast_to(s, shape), sub.height, sub.eps_r)
        return discontinuities.GapCapacitances(c.c_series[0], c.c_shunt_in[1], c.c_shunt_out[2])
    if model == "kirschning-jansen-koster":
        return discontinuities.kirschning_jansen_koster_gap(w_in, w_out, s, sub.height, sub.eps_r)
    if model == "altschuler-oliner":
        assert isinstance(medium, Stripline)
        w_mean = np.sqrt(np.asarray(w_in, float) * np.asarray(w_out, float))
        z0 = medium.z0(w_mean)
        return discontinuities.stripline_gap(s, sub.height, sub.eps_r, z0, w_mean)
    raise ValueError(f"gap model = {model!r} is not one of the allowed values {GAP_MODELS}")


def open_end_extensions(
    medium: StripMedium, width: ArrayLike, model: str = ""
) -> NDArray[np.float64]:
    """Open-end length extension Δl (m) of strips of ``width`` (any array shape) on ``medium``:
    Kirschning–Jansen–Koster 1981 on microstrip (or the calibration that the gap model
    ``model`` names) plus what the metal's thickness adds (its end face's capacitance over the
    line's capacitance per length, :mod:`refine.physics.gap_thickness`), b ln 2/π on
    stripline."""
    sub = medium.substrate
    w = np.asarray(width, float)
    if isinstance(medium, Stripline):
        cal = calibration_of(model)
        if cal is not None:
            return calibrated.open_end_extension(cal, w, sub.height, sub.eps_r)
        return np.broadcast_to(discontinuities.stripline_open_end(sub.height), w.shape)
    t = sub.metal_thickness
    u = w / sub.height
    z0, ee, _ = hammerstad_jensen(u, sub.eps_r, t / sub.height)
    cal = calibration_of(model)
    if cal is not None:
        dl = calibrated.open_end_extension(cal, w, sub.height, sub.eps_r)
    else:
        dl = discontinuities.kirschning_jansen_koster_open_end(u, sub.eps_r, ee) * sub.height
    if t > 0:
        c_line = np.sqrt(ee) / (C0 * z0)
        dl = dl + gap_thickness.open_end_increment(w, sub.height, t, sub.eps_r) / c_line
    return np.asarray(dl)


def open_end_extension(medium: StripMedium, width: float, model: str = "") -> float:
    """Open-end length extension Δl (m) of one strip of ``width`` on ``medium``."""
    return float(open_end_extensions(medium, width, model))
