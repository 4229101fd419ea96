"""Field-solver check of a layout against its problem: EM response, circuit-model response on
the same frequencies, and the comparison figures.

Mesh choices: "pair" (the default: the coarse mesh and one with every cell smaller by
:data:`~refine.fullwave.geometry.REFINE_RATIO`, whose difference estimates the finer one's
error), "converged" (three such meshes, the comparison figures extrapolated to zero cell size
by Richardson), or one mesh alone,
"coarse" (50 µm edge cells, or half the smallest gap) or "fine" (25 µm), whose verdict is then
always undecided (see :mod:`refine.fullwave.uncertainty`). The S-parameters are the finest
mesh's.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine.circuit.layout import Layout, ParallelLayout
from refine.circuit.response import evaluate_parallel
from refine.fullwave import compare, engine, geometry, solve, uncertainty, waves
from refine.fullwave.correction import StoredSolve, carried_margin, sheet_problem
from refine.outputs.files import evaluate_layout
from refine.spec.problem import Problem

MESH_CHOICES = ("pair", "converged", "coarse", "fine")


class FieldCheckError(ValueError):
    """A layout or problem the field solver cannot take."""


def em_band(problem: Problem) -> tuple[float, float]:
    """The excitation band: the mask's span (2 % beyond its top), from at least 0.25 f0 (a
    stopband reaching lower is judged there by the circuit model alone)."""
    m = problem.mask
    lo = min([m.passband_start, *(sb.start for sb in m.stopbands)])
    hi = max([m.passband_stop, *(sb.stop for sb in m.stopbands)])
    return max(0.98 * lo, 0.25 * problem.f0), 1.02 * hi


def em_frequencies(problem: Problem, n: int = 401) -> NDArray[np.float64]:
    lo, hi = em_band(problem)
    m = problem.mask
    edges = [m.passband_start, m.passband_stop, m.midband]
    edges += [x for sb in m.stopbands for x in (sb.start, sb.stop) if lo <= x <= hi]
    return np.unique(np.concatenate([np.linspace(lo, hi, n), edges]))


#: a record's ringing after the pulse, in the circuit model's largest passband group delays:
#: as recorded, long enough for a Chebyshev filter's slowest pole to ring down by about 60 dB
#: (common practice, no source)
RING_DELAYS = 8.0
#: the same with the ring-down continued past the record's end (refine.fullwave.ringdown);
#: benchmarks/em_ringdown.py measured how early a record may stop
CONTINUED_RING_DELAYS = 3.0


def ringing_time(s21: NDArray, f: NDArray, delays: float = RING_DELAYS) -> float:
    """``delays`` times the circuit model's largest group delay where |S21| > -10 dB (s)."""
    phase = np.unwrap(np.angle(s21))
    gd = -np.gradient(phase, 2.0 * np.pi * f)
    passing = np.abs(s21) > 10 ** (-10 / 20)
    return delays * float(gd[passing].max()) if passing.any() else 0.0


@dataclass(frozen=True)
class FieldCheck:
    """A layout's field-solver check. solves: one per mesh (three for "converged");
    extrapolated: the mesh-extrapolated figures for "converged" (name -> value), else None."""

    problem: Problem
    layout: Layout | ParallelLayout
    mesh: str
    f: NDArray[np.float64]
    s_em: NDArray[np.complex128]
    s_model: NDArray[np.complex128]
    comparison: compare.Comparison
    solves: tuple[solve.FieldSolve, ...]
    extrapolated: dict[str, float] | None
    figures: tuple[uncertainty.Figure, ...] = ()  # per mesh, with the finest mesh's uncertainty
    #: the circuit model's response with zero metal thickness (the field model's sheets), when
    #: the problem gives a thickness; None otherwise
    s_model_sheet: NDArray[np.complex128] | None = None
    #: the worst mask margin of each mesh's field solve carried to the problem's metal thickness
    #: (refine.fullwave.correction.carried_margin), with its mesh uncertainty; None where the
    #: problem has no thickness or the layout is parallel-coupled (whose circuit model has none)
    carried: uncertainty.Figure | None = None

    @property
    def solid(self) -> bool:
        """Whether the field model's strips were solid, as thick as the problem's metal
        (geometry's "thick" metal model): then the field solver's margin is like for like with
        the circuit model's and nothing is carried."""
        return bool(self.solves) and all(s.resolution.metal == "thick" for s in self.solves)

    @property
    def thickness_shift(self) -> float | None:
        """How much the problem's metal thickness moves the worst mask margin (dB) on the circuit
        model: margin with it minus margin without it. The field model's strips are
        zero-thickness sheets (the engine's microstrip port measures a sheet's current), so
        the field solver's figures leave this out; the verdict counts it as uncertainty."""
        if self.s_model_sheet is None:
            return None
        sheet = compare.compare(self.f, self.s_em, self.s_model_sheet, self.problem.mask)
        return self.comparison.model_mask.worst_margin - sheet.model_mask.worst_margin

    def judged_margin(self) -> uncertainty.Figure:
        """The worst mask margin the verdict rests on: the field solves carried to the
        problem's metal thickness (:attr:`carried`) where there is one; else the finest mesh's
        margin, its uncertainty the mesh's plus the magnitude of :attr:`thickness_shift` (when
        there are two meshes)."""
        if self.carried is not None:
            return self.carried
        fig = self.figure("worst mask margin")
        shift = self.thickness_shift
        if shift is None or fig.uncertainty is None:
            return fig
        return replace(fig, uncertainty=fig.uncertainty + abs(shift))

    def figure(self, name: str) -> uncertainty.Figure:
        """A comparison figure with its mesh uncertainty ("worst mask margin", "centre",
        "3 dB bandwidth", "worst in-band return loss"); one mesh's value, no uncertainty, when
        the check did not record it."""
        for fig in self.figures:
            if fig.name == name:
                return fig
        em = self.comparison.em
        value = {
            "worst mask margin": self.comparison.em_mask.worst_margin,
            "centre": em.centre,
            "3 dB bandwidth": em.bandwidth,
            "worst in-band return loss": em.worst_return_loss,
        }[name]
        return uncertainty.Figure(name, "", (value,), None)

    @property
    def verdict(self) -> uncertainty.MeshVerdict:
        """Met / not met beyond the mesh uncertainty, or undecided at this mesh."""
        return uncertainty.verdict(self.judged_margin())

    def verdict_sentence(self) -> str:
        cell = self.solves[-1].resolution.edge_cell if self.solves else 50e-6
        text = uncertainty.sentence(self.judged_margin(), cell)
        shift = self.thickness_shift
        t = self.problem.strip_substrate.metal_thickness * 1e6
        if self.solid:
            text += (
                f" (the field model's strips are solid, {t:g} um thick as the problem's metal, "
                "and perfectly conducting: the margin leaves out conductor loss)"
            )
        elif self.carried is not None:
            text += (
                f" (carried to the problem's {t:g} um metal thickness, which the field model's "
                "zero-thickness sheets lack: the correction each field solve implies for the "
                "circuit model with sheets, applied to the circuit model with the thickness; "
                f"on its sheets the field solver's margin is "
                f"{self.comparison.em_mask.worst_margin:+.2f} dB)"
            )
        elif shift is not None:
            text += (
                f" (the uncertainty includes {abs(shift):.2f} dB, what the {t:g} um metal "
                "thickness moves the margin on the circuit model: the field model's strips are "
                "zero-thickness sheets)"
            )
        return text

    @property
    def seconds(self) -> float:
        return sum(s.seconds for s in self.solves)

    @property
    def runs(self) -> int:
        return sum(s.runs for s in self.solves)


def resolutions(mesh: str, layout: Layout | ParallelLayout) -> list[geometry.Resolution]:
    v.one_of("mesh", mesh, MESH_CHOICES)
    if mesh in ("pair", "converged"):
        gaps = layout.spacings if isinstance(layout, ParallelLayout) else layout.gaps
        d = min(geometry.MESHES["coarse"].edge_cell, 0.5 * min(gaps))
        base = geometry.Resolution(mesh, d, edge_rule="thirds")
        return [base.refined(k) for k in range(2 if mesh == "pair" else 3)]
    return [geometry.MESHES[mesh]]


def check_layout(
    problem: Problem,
    layout: Layout | ParallelLayout,
    mesh: str = "coarse",
    workdir: str | Path | None = None,
    threads: int = 0,
    lossy: bool = True,
    progress: engine.Progress | None = None,
    meshes: list[geometry.Resolution] | None = None,
    continue_ringdown: bool = True,
    ring_delays: float | None = None,
    metal: str | None = None,
) -> FieldCheck:
    """Field-solve a layout on its problem's substrate and compare with the circuit model;
    ``progress`` receives a line before each engine run and while it runs.

    lossy False: PEC strips on a lossless substrate in the field solver (a diagnostic: the
    circuit model keeps its losses). ``meshes`` overrides the preset ``mesh`` names (a campaign
    that runs one mesh at a time). continue_ringdown: continue each record's ring-down past its
    end (:mod:`refine.fullwave.ringdown`): the engine stops on its energy criterion while a
    narrowband filter's port signals still ring. ring_delays: the ringing simulated after the
    pulse, in the circuit model's largest passband group delays (default
    :data:`CONTINUED_RING_DELAYS` continued, :data:`RING_DELAYS` not). metal: the strips'
    model on every mesh (refine.fullwave.geometry.METAL_MODELS; default: each mesh's own,
    "sheet" for the presets); "thick" needs the problem's metal thickness, and then the field
    solver's margin is judged as it is, like for like with the circuit model."""
    if ring_delays is not None:
        v.positive("ring_delays", ring_delays)
    if problem.medium != "microstrip":
        raise FieldCheckError(
            f"medium.kind = {problem.medium!r}: the field check handles microstrip only "
            "(its ports assume a strip over one ground plane)"
        )
    f = em_frequencies(problem)
    s_model = (
        evaluate_parallel(problem, layout, f)
        if isinstance(layout, ParallelLayout)
        else evaluate_layout(problem, layout, f)
    )
    if ring_delays is None:
        ring_delays = CONTINUED_RING_DELAYS if continue_ringdown else RING_DELAYS
    ring = ringing_time(s_model[:, 1, 0], f, ring_delays)
    sub = problem.strip_substrate
    s_sheet = None
    if sub.metal_thickness > 0:
        sheet = sheet_problem(problem)
        s_sheet = (
            evaluate_parallel(sheet, layout, f)
            if isinstance(layout, ParallelLayout)
            else evaluate_layout(sheet, layout, f)
        )
    band = em_band(problem)
    chosen = meshes if meshes is not None else resolutions(mesh, layout)
    if metal is not None:
        v.one_of("metal", metal, geometry.METAL_MODELS)
        chosen = [replace(r, metal=metal) for r in chosen]
    kinds = {r.metal for r in chosen}
    if len(kinds) > 1:
        raise FieldCheckError("the meshes of one field check must share one metal model")
    if "thick" in kinds and sub.metal_thickness == 0:
        raise FieldCheckError(
            "metal 'thick': the problem gives no metal thickness ([substrate] metal_thickness "
            "= 0); solid strips need one"
        )
    if "thick" in kinds:
        s_sheet = None  # the circuit model with the metal is like for like with solid strips
    solves = []
    for k, res in enumerate(chosen):
        length = geometry.feed_length(sub, layout.feed_width, band[1], res)
        st = geometry.layout_structure(layout, sub, length)
        wd = Path(workdir) / f"mesh-{k}" if workdir is not None else None
        solves.append(
            solve.solve(
                st,
                sub,
                f,
                problem.z_ref,
                res,
                ring,
                band,
                wd,
                threads,
                lossy,
                progress,
                problem.enclosure,
                continue_ringdown,
            )
        )
    s_em = solves[-1].s
    comp = compare.compare(f, s_em, s_model, problem.mask)
    extra = None
    figs = [compare.compare(f, s.s, s_model, problem.mask) for s in solves]
    cells = [s.resolution.edge_cell for s in solves]
    figures = mesh_figures(cells, figs)
    if len(solves) == 3:
        extra = {
            "centre": waves.richardson(cells, [c.em.centre for c in figs]).value,
            "bandwidth": waves.richardson(cells, [c.em.bandwidth for c in figs]).value,
            "worst_return_loss": waves.richardson(
                cells, [c.em.worst_return_loss for c in figs]
            ).value,
        }
    carried = None if "thick" in kinds else carried_figure(problem, layout, f, solves)
    return FieldCheck(
        problem,
        layout,
        mesh,
        f,
        s_em,
        s_model,
        comp,
        tuple(solves),
        extra,
        figures,
        s_sheet,
        carried,
    )


def carried_figure(
    problem: Problem,
    layout: Layout | ParallelLayout,
    f: NDArray[np.float64],
    solves: tuple[solve.FieldSolve, ...] | list[solve.FieldSolve],
) -> uncertainty.Figure | None:
    """Each mesh's worst mask margin carried to the problem's metal thickness
    (refine.fullwave.correction.carried_margin), with the finest mesh's uncertainty from them;
    None where the problem has no thickness or the layout is parallel-coupled."""
    if problem.strip_substrate.metal_thickness == 0 or not isinstance(layout, Layout):
        return None
    values = [carried_margin(problem, StoredSolve(layout, f, s.s)) for s in solves]
    kept = tuple(float(x) for x in values if x is not None)
    cells = [s.resolution.edge_cell for s in solves]
    return uncertainty.Figure(
        "worst mask margin", "dB", kept, uncertainty.mesh_uncertainty(cells, list(kept))
    )


def mesh_figures(
    cells: list[float], comparisons: list[compare.Comparison]
) -> tuple[uncertainty.Figure, ...]:
    """The figures a verdict rests on, per mesh (coarsest first), with the finest mesh's
    uncertainty estimated from them."""
    pick = {
        "centre": ("Hz", lambda c: c.em.centre),
        "3 dB bandwidth": ("Hz", lambda c: c.em.bandwidth),
        "worst in-band return loss": ("dB", lambda c: c.em.worst_return_loss),
        "worst mask margin": ("dB", lambda c: c.em_mask.worst_margin),
    }
    out = []
    for name, (unit, get) in pick.items():
        values = tuple(float(get(c)) for c in comparisons)
        out.append(
            uncertainty.Figure(name, unit, values, uncertainty.mesh_uncertainty(cells, values))
        )
    return tuple(out)
