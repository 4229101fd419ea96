"""A problem's circuit, evaluated: its medium, the grid "met" is decided on, the S-parameters of
a layout (with or without model corrections), and the gap-model spread.

Everything here goes through the one builder (:mod:`refine.circuit.builder`).
"""

from __future__ import annotations

import itertools
import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import ArrayLike, NDArray

from refine import _validate as v
from refine import validity
from refine.circuit import cascade
from refine.circuit.builder import (
    Adjustments,
    Built,
    build,
    ideal_elements,
    parallel_build,
    per_design,
)
from refine.circuit.layout import Layout, ParallelLayout
from refine.physics import calibrated, discontinuities, gap_thickness, radiation
from refine.physics.constants import C0, EPS0
from refine.physics.gap_fixture import comparison, load_fixture
from refine.physics.microstrip import Microstrip
from refine.physics.strip import (
    GAP_MODELS,
    StripMedium,
    calibration_of,
    medium_kind,
    sheet_gap_capacitances,
)
from refine.physics.stripline import Stripline
from refine.spec.coupling import Coupling
from refine.spec.mask import MaskResult
from refine.spec.problem import Problem


def medium_for(problem: Problem, loss: bool = True) -> StripMedium | None:
    """The strip medium of a problem, or None for the ideal medium."""
    if problem.medium == "microstrip":
        return Microstrip(problem.strip_substrate, loss=loss, enclosure=problem.enclosure)
    if problem.medium == "stripline":
        return Stripline(problem.strip_substrate, loss=loss)
    return None


def strip_medium_for(problem: Problem, loss: bool = True) -> StripMedium:
    """The strip medium of a problem; a ValueError for the ideal medium, which has no copper."""
    medium = medium_for(problem, loss)
    if medium is None:
        raise ValueError(f"problem {problem.name!r}: the ideal medium has no strip layout")
    return medium


def verification_grid(problem: Problem, points_per_region: int = 401) -> NDArray[np.float64]:
    """The dense grid "met" is decided on: every mask region, exact edges included."""
    return problem.mask.sample(points_per_region, points_per_region)


def layout_build(
    layout: Layout,
    medium: StripMedium,
    gap_model: str,
    f: ArrayLike,
    adjust: Adjustments | None = None,
    track: bool = False,
) -> Built:
    """The builder's elements (and, with ``track``, its element map) of a :class:`Layout`."""
    return build(
        layout.external,
        medium,
        gap_model,
        layout.feed_width,
        layout.widths,
        layout.gaps,
        layout.lengths,
        layout.taps,
        f,
        adjust,
        track,
    )


def layout_response(
    layout: Layout,
    medium: StripMedium,
    gap_model: str,
    f: ArrayLike,
    z_ref: float,
    adjust: Adjustments | None = None,
) -> NDArray[np.complex128]:
    """S-matrix ``(nf, 2, 2)`` of a layout on a medium with a gap model."""
    f = v.frequencies("f", f)
    return cascade.s_parameters(
        layout_build(layout, medium, gap_model, f, adjust).elements, f, z_ref
    )


def layout_group_delay(
    layout: Layout,
    medium: StripMedium,
    gap_model: str,
    f: ArrayLike,
    z_ref: float,
    adjust: Adjustments | None = None,
) -> NDArray[np.float64]:
    """Group delay of S21 (seconds) of a layout, exact through the cascade
    (:func:`refine.circuit.cascade.group_delay`)."""
    return cascade.group_delay(
        lambda g: layout_build(layout, medium, gap_model, g, adjust).elements, f, z_ref
    )


def evaluate_layout(
    problem: Problem, layout: Layout, f: ArrayLike, adjust: Adjustments | None = None
) -> NDArray[np.complex128]:
    """S-matrix of a layout on the problem's medium with loss (range warnings go to the report)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        return layout_response(
            layout, strip_medium_for(problem), problem.gap_model, f, problem.z_ref, adjust
        )


def evaluate_parallel(problem: Problem, layout: ParallelLayout, f: ArrayLike) -> NDArray:
    """S-matrix ``(nf, 2, 2)`` of a parallel-coupled layout on the problem's coupled-line model
    with loss (range warnings go to the report)."""
    f = v.frequencies("f", f)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        els = parallel_build(
            strip_medium_for(problem),
            problem.gap_model,
            layout.widths,
            layout.spacings,
            layout.lengths,
            f,
            feed_stub=layout.feed_stub,
        ).elements
        return cascade.s_parameters(els, f, problem.z_ref)


def evaluate_electrical(
    caps: ArrayLike, thetas: ArrayLike, f0: float, z_ref: float, f: ArrayLike
) -> NDArray[np.complex128]:
    """S-matrix of an ideal-element design (series capacitances, electrical lengths at f0)."""
    return cascade.s_parameters(ideal_elements(caps, thetas, f0, z_ref, f), f, z_ref)


def spread_models(medium: StripMedium) -> tuple[str, ...]:
    """The gap models a layout is shown under: every closed form of its medium and the bundled
    electrostatic calibration for it (on microstrip for its ε_r) if there is one."""
    models = GAP_MODELS[medium_kind(medium)]
    name = calibrated.for_eps_r(medium.substrate.eps_r, isinstance(medium, Stripline))
    if name is not None:
        models = (*models, f"{calibrated.PREFIX}{name}")
    return models


def layout_verdict(
    problem: Problem,
    layout: Layout,
    medium: StripMedium,
    gap_model: str,
    adjust: Adjustments | None = None,
) -> MaskResult:
    """The layout's mask verdict on the verification grid for one choice of medium, gap model
    and model adjustments (range warnings muted: the report lists them)."""
    f = verification_grid(problem)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        s = layout_response(layout, medium, gap_model, f, problem.z_ref, adjust)
    return problem.mask.evaluate(f, s[:, 0, 0], s[:, 1, 0])


def spread_verdicts(problem: Problem, layout: Layout) -> dict[str, MaskResult]:
    """The layout's mask verdict on the verification grid under every gap model of its medium
    (empty where the medium has only one)."""
    medium = medium_for(problem)
    if medium is None or len(spread_models(medium)) < 2:
        return {}
    return {m: layout_verdict(problem, layout, medium, m) for m in spread_models(medium)}


@dataclass(frozen=True)
class LossBudget:
    """Unloaded Q of each resonator at f0 by mechanism (conductor, dielectric, radiation; inf
    where the mechanism is absent), and Cohn's midband dissipation loss split the same way."""

    q_conductor: tuple[float, ...]
    q_dielectric: tuple[float, ...]
    q_radiation: tuple[float, ...]
    midband_db: dict[str, float]

    @property
    def q_unloaded(self) -> tuple[float, ...]:
        return tuple(
            1.0 / (1.0 / c + 1.0 / d + 1.0 / r)
            for c, d, r in zip(self.q_conductor, self.q_dielectric, self.q_radiation, strict=True)
        )


def loss_budget(problem: Problem, layout: Layout, g: Sequence[float]) -> LossBudget:
    """The resonators' Q at f0 from their lines (Q = β/(2α) for conductor and dielectric
    loss, Pozar §6.3 [from memory]) and, on open microstrip, Belohoubek & Denlinger's radiation
    Q (:mod:`refine.physics.radiation`), with Cohn's estimate of the midband loss,
    ΔL = 4.343 Σ g_k/(FBW·Q_k) dB (Cohn 1959; Matthaei, Young & Jones §4.13 [from memory]),
    for each mechanism. ``g`` are the prototype's g1..gn."""
    medium = strip_medium_for(problem)
    f0 = np.array([problem.f0])
    qc, qd, qr = [], [], []
    for w in layout.widths:
        gamma, _ = medium.line_properties(w, f0)
        beta = float(np.imag(gamma[0]))
        ac, ad = (float(np.ravel(x)[0]) for x in medium.attenuation(w, f0))
        qc.append(beta / (2 * ac) if ac > 0 else math.inf)
        qd.append(beta / (2 * ad) if ad > 0 else math.inf)
        if isinstance(medium, Microstrip) and medium.radiates:
            z0, e_eff = (float(np.ravel(x)[0]) for x in medium.dispersive(w, f0))
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", validity.ModelRangeWarning)
                qr.append(float(radiation.radiation_q(z0, e_eff, medium.substrate.height, f0)[0]))
        else:
            qr.append(math.inf)
    g_k = np.asarray(g, float)
    per = {"conductor": qc, "dielectric": qd, "radiation": qr}
    midband = {
        k: float(4.343 * np.sum(g_k / (problem.fbw * np.asarray(q)))) for k, q in per.items()
    }
    return LossBudget(tuple(qc), tuple(qd), tuple(qr), midband)


def lossless_verdict(problem: Problem, layout: Layout) -> MaskResult:
    """The layout's mask verdict with every loss switched off (conductor, dielectric,
    radiation): a return loss met only with loss on is met by absorbing power."""
    medium = strip_medium_for(problem, loss=False)
    return layout_verdict(problem, layout, medium, problem.gap_model)


RADIATION_SPREAD = 0.5  # ± on the radiation conductances: unvalidated against a converged solve

#: ± on a microstrip line's ε_eff and Z0: the bounds within which the field solver's converged
#: 50 ohm line agrees with the closed forms (Hammerstad-Jensen, Kirschning-Jansen ε_eff(f),
#: Jansen-Kirschning power-current Z0(f)) on three substrates over each band, in the field
#: check's defaults: the two-port ε_eff within 0.5 %, the power-current Z0 within 0.75 % below
#: the top of each band (``tests/test_fullwave_lines.py`` pins both from its fixture). The
#: closed forms' own published accuracy is of the same order (Kirschning & Jansen 1982 state
#: 0.6 % for ε_eff(f); from memory).
MICROSTRIP_LINE = (0.005, 0.0075)
#: ± on a stripline's Z0 with a metal thickness: Wheeler's thickness ratio on Cohn's exact
#: zero-thickness value, checked within 0.5 % (:mod:`refine.physics.stripline`); its ε_eff is
#: ε_r exactly (a TEM line) and Cohn's Z0 is exact at zero thickness
STRIPLINE_THICK_Z0 = 0.005


@dataclass(frozen=True)
class ModelUncertainty:
    """Relative ± on the gap's series and shunt capacitance, on radiation and on the lines'
    ε_eff and Z0, with where each comes from."""

    series: float
    shunt: float
    radiation: float
    source: str
    eps_eff: float = 0.0
    z0: float = 0.0
    #: each gap's own ± on its series capacitance, where the gaps differ (``series`` is then
    #: the largest); None: ``series`` for every gap
    series_gaps: tuple[float, ...] | None = None

    def series_of(self, n_gaps: int) -> tuple[float, ...]:
        """Each gap's ± on its series capacitance."""
        return self.series_gaps if self.series_gaps is not None else (self.series,) * n_gaps

    @property
    def spread(self) -> tuple[float, float, float, float, float]:
        """The five ± in the order of :meth:`corners`: series, shunt, radiation, ε_eff, Z0."""
        return (self.series, self.shunt, self.radiation, self.eps_eff, self.z0)

    @property
    def any(self) -> bool:
        """Whether any ± is stated (else every corner is the nominal model)."""
        return any(self.spread)

    def corners(self, n_gaps: int) -> list[Adjustments]:
        """Every sign combination of the ± that are not zero (32 corners on open microstrip,
        fewer where a term is zero: 4 on a zero-thickness stripline)."""
        out = []
        signs = [(-1.0, 1.0) if u else (0.0,) for u in self.spread]
        per_gap = self.series_of(n_gaps)
        for a, b, c, d, e in itertools.product(*signs):
            out.append(
                Adjustments(
                    c_series_factors=tuple(1.0 + a * u for u in per_gap),
                    c_shunt_factor=1.0 + b * self.shunt,
                    radiation_factor=1.0 + c * self.radiation,
                    eps_eff_factor=1.0 + d * self.eps_eff,
                    z0_factor=1.0 + e * self.z0,
                )
            )
        return out

    def words(self) -> str:
        """The ± in words, for reports and consoles."""
        series = f"gap series ±{100 * self.series:.2g} %"
        if self.series_gaps is not None and min(self.series_gaps) < self.series:
            series = f"gap series ±{100 * min(self.series_gaps):.2g}–{100 * self.series:.2g} %"
        parts = [series, f"shunt ±{100 * self.shunt:.2g} %"]
        if self.radiation:
            parts.append(f"radiation ±{100 * self.radiation:.0f} %")
        if self.eps_eff:
            parts.append(f"line ε_eff ±{100 * self.eps_eff:.2g} %")
        if self.z0:
            parts.append(f"line Z0 ±{100 * self.z0:.2g} %")
        return ", ".join(parts)


def line_uncertainty(medium: StripMedium) -> tuple[float, float]:
    """± on the lines' (ε_eff, Z0) for this medium (:data:`MICROSTRIP_LINE`,
    :data:`STRIPLINE_THICK_Z0`)."""
    if isinstance(medium, Microstrip):
        return MICROSTRIP_LINE
    if isinstance(medium, Stripline) and medium.substrate.metal_thickness > 0:
        return (0.0, STRIPLINE_THICK_Z0)
    return (0.0, 0.0)


def model_uncertainty(problem: Problem, layout: Layout) -> ModelUncertainty:
    """The circuit model's uncertainty for this layout. A calibration: twice its own largest
    uncertainty over the layout's gaps, at least its largest difference from the field solver's
    gap fixture (5 %, ``tests/test_calibrated.py``; kept for stripline, which has no field
    fixture yet). A microstrip closed form: its largest series and RMS shunt error against that
    fixture. The stripline closed form: its largest series and shunt error against the bundled
    stripline calibration at the layout's own gaps (shunt capacitance taken to the strip ends).
    Radiation: ±:data:`RADIATION_SPREAD` on open microstrip. The lines: :func:`line_uncertainty`."""
    medium = strip_medium_for(problem)
    rad = RADIATION_SPREAD if isinstance(medium, Microstrip) and medium.radiates else 0.0
    line = line_uncertainty(medium)
    model = problem.gap_model
    h = medium.substrate.height
    widths = (
        [layout.feed_width, *layout.widths, layout.feed_width]
        if layout.external is Coupling.GAP
        else list(layout.widths)
    )
    # gap k lies between widths k and k + 1; its series capacitance is taken at their mean
    means = [math.sqrt(widths[k] * widths[k + 1]) for k in range(len(layout.gaps))]
    extra_s, extra_p, extra_what = added_uncertainty(medium, model, widths, layout.gaps)
    if model.startswith(calibrated.PREFIX):
        cal = calibrated.load(model[len(calibrated.PREFIX) :])
        us, up = 0.0, 0.0
        for w, s in zip(means, layout.gaps, strict=True):
            a, b = calibrated.relative_uncertainty(cal, w, s, h)
            us, up = max(us, float(a)), max(up, float(b))
        return _with_gaps(
            max(2 * us, FIXTURE_AGREEMENT),
            max(2 * up, FIXTURE_AGREEMENT) + extra_p,
            rad,
            f"calibration {cal.name}{extra_what}",
            line,
            extra_s,
        )
    if model in GAP_MODELS["microstrip"]:
        rows = comparison(load_fixture())
        series = max(abs(r["models"][model][0]) for r in rows)
        shunt = math.sqrt(sum(r["models"][model][1] ** 2 for r in rows) / len(rows))
        return _with_gaps(
            series,
            shunt + extra_p,
            rad,
            f"{model} against the field solver's gap fixture{extra_what}",
            line,
            extra_s,
        )
    name = calibrated.for_eps_r(medium.substrate.eps_r, stripline=True)
    if isinstance(medium, Stripline) and name is not None and layout.gaps:
        series, shunt = stripline_closed_form_error(medium, name, means, list(layout.gaps))
        return ModelUncertainty(
            series, shunt, rad, f"{model} against the stripline calibration {name}", *line
        )
    return ModelUncertainty(0.0, 0.0, rad, f"{model}: no gap uncertainty data", *line)


def _with_gaps(
    series: float,
    shunt: float,
    rad: float,
    source: str,
    line: tuple[float, float],
    extra_series: NDArray,
) -> ModelUncertainty:
    """A :class:`ModelUncertainty` whose gaps carry ``series`` plus each its own extra."""
    per_gap = tuple(float(series + x) for x in extra_series)
    return ModelUncertainty(
        max(per_gap, default=series),
        shunt,
        rad,
        source,
        *line,
        series_gaps=per_gap if per_gap and max(per_gap) > min(per_gap) else None,
    )


def added_uncertainty(
    medium: StripMedium, model: str, widths: Sequence[float], gaps: Sequence[float]
) -> tuple[NDArray, float, str]:
    """What the gap model's corrections add to its uncertainty: relative, on each gap's series
    capacitance and on the shunt capacitance at the worst gap, and in words: twice the unequal-gap table's own uncertainty where the
    strips' widths differ (a calibration's rule: twice its own), and on microstrip with metal
    the thickness increment times its uncertainty
    (:func:`refine.physics.gap_thickness.increment_uncertainty`). The shunt terms are taken
    relative to the larger side's shunt capacitance. Gap ``k`` lies between ``widths[k]`` and
    ``widths[k + 1]``."""
    if not gaps:
        return np.zeros(0), 0.0, ""
    sub = medium.substrate
    h = sub.height
    w_in = np.asarray(widths[:-1], float)
    w_out = np.asarray(widths[1:], float)
    s = np.asarray(gaps, float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        caps = sheet_gap_capacitances(medium, model, w_in, w_out, s)
        c_s = np.real(np.asarray(caps.c_series))
        # the larger side's shunt capacitance: the narrow side's can be near zero or negative
        # (an excess over the line), where a relative figure means nothing
        c_p = np.maximum(np.abs(np.real(caps.c_shunt_in)), np.abs(np.real(caps.c_shunt_out)))
        series = np.zeros(s.shape)
        shunt = np.zeros(s.shape)
        words = []
        cal = calibration_of(model)
        if cal is not None and cal.unequal is not None and np.any(w_in != w_out):
            a, b = calibrated.unequal_uncertainty(cal.unequal, w_in, w_out, s, h)
            series = series + 2 * a
            shunt = shunt + 2 * b * EPS0 * h / c_p
            words.append("its unequal-gap table's")
        t = sub.metal_thickness
        if isinstance(medium, Microstrip) and t > 0:
            ds, di, do = gap_thickness.gap_increment(w_in, w_out, s, h, t, sub.eps_r)
            k = gap_thickness.increment_uncertainty(w_in, w_out, s, t)
            series = series + k * ds / (c_s + ds)
            shunt = shunt + k * np.maximum(di, do) / c_p
            words.append("the metal thickness increment's")
    if not words:
        return np.zeros(s.shape), 0.0, ""
    return series, float(np.max(shunt)), "; " + " and ".join(words) + " added"


def stripline_closed_form_error(
    medium: Stripline, name: str, widths: Sequence[float], gaps: Sequence[float]
) -> tuple[float, float]:
    """The quasi-static stripline gap's largest relative (series, shunt) error against the
    calibration ``name`` at symmetric gaps of these widths and spacings (shunt capacitance taken
    to the strip ends: the closed form's centre-referenced value plus the line's s/2)."""
    cal = calibrated.load(name)
    sub = medium.substrate
    w = np.asarray(widths, float)
    s = np.asarray(gaps, float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        with validity.unchecked():
            ref = calibrated.gap(cal, w, w, s, sub.height, sub.eps_r)
            closed = discontinuities.stripline_gap(s, sub.height, sub.eps_r, medium.z0(w))
            c_line = math.sqrt(sub.eps_r) / (C0 * medium.z0(w))
    shunt = closed.c_shunt_in + c_line * s / 2
    return (
        float(np.max(np.abs(closed.c_series / ref.c_series - 1.0))),
        float(np.max(np.abs(shunt / ref.c_shunt_in - 1.0))),
    )


FIXTURE_AGREEMENT = 0.05  # the calibrations' largest series difference from the gap fixture


def uncertainty_verdict(
    problem: Problem, layout: Layout, unc: ModelUncertainty | None = None
) -> tuple[MaskResult, ModelUncertainty]:
    """The layout's worst mask margin per region over the model-uncertainty corners (every
    corner in one batched evaluation on the verification grid); ``unc``: other ± than the
    model's stated ones (None: :func:`model_uncertainty`)."""
    if unc is None:
        unc = model_uncertainty(problem, layout)
    corners = unc.corners(len(layout.gaps))
    f = verification_grid(problem)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", validity.ModelRangeWarning)
        t = cascade.s11_s21(corner_batch(problem, layout, corners, f).elements, f, problem.z_ref)
    worst: dict[str, float] = {}
    where: dict[str, float] = {}
    for k in range(len(corners)):
        res = problem.mask.evaluate(f, t.s11[k], t.s21[k])
        for name, m in res.worst.items():
            if name not in worst or m < worst[name]:
                worst[name], where[name] = m, res.where[name]
    return MaskResult(worst, where), unc


#: the groups of uncertainty terms :func:`worst_by_term` judges one at a time
TERM_GROUPS = ("gaps", "radiation", "lines")


def worst_by_term(problem: Problem, layout: Layout, unc: ModelUncertainty) -> dict[str, float]:
    """The worst corner margin (dB) with one group of ``unc``'s terms at its ± and the rest at
    zero: "gaps" (series and shunt), "radiation", "lines" (ε_eff and Z0); a group whose terms
    are all zero is left out. Says which part of the model's uncertainty costs the margin."""
    groups = {
        "gaps": replace(unc, radiation=0.0, eps_eff=0.0, z0=0.0),
        "radiation": replace(unc, series=0.0, shunt=0.0, series_gaps=None, eps_eff=0.0, z0=0.0),
        "lines": replace(unc, series=0.0, shunt=0.0, series_gaps=None, radiation=0.0),
    }
    return {
        name: uncertainty_verdict(problem, layout, g)[0].worst_margin
        for name, g in groups.items()
        if g.any
    }


def corner_batch(
    problem: Problem, layout: Layout, corners: Sequence[Adjustments | None], f: NDArray
) -> Built:
    """The elements of ``layout`` once per entry of ``corners``, as one batch of designs each
    with its own model adjustments (:func:`refine.circuit.builder.per_design`)."""
    k = len(corners)

    def tile(x: Sequence[float]) -> NDArray:
        return np.tile(np.asarray(x, float), (k, 1))

    return build(
        layout.external,
        strip_medium_for(problem),
        problem.gap_model,
        np.full(k, layout.feed_width),
        tile(layout.widths),
        tile(layout.gaps),
        tile(layout.lengths),
        None if layout.taps is None else tile(layout.taps),
        f,
        per_design(corners),
        validate=False,
    )
