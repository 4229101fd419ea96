"""Copper, substrate, mesh, ports and excitation of one field-solver run, as a plain job.

The copper comes from :func:`refine.outputs.export.copper`, the same rectangles the DXF and SVG
drawings are made of, so the field solver sees exactly the drawing that is handed over. Strips
are zero-thickness sheets on the substrate top (z = h) by default (lossy sheets with the problem's
conductivity and thickness); with the "thick" metal model (:data:`METAL_MODELS`) they are solid
perfect conductors from z = h to h + t, the problem's metal thickness, with mesh lines on both
faces (one cell through the metal: common practice, no source) and the port current probes
around the whole conductor. The ground is the PEC floor of the box.

Ports are microstrip ports on the feeds: the wave is launched ``feed_shift`` in from the box edge
(past the absorbing layer), voltages and currents are probed at a measurement plane a distance
``D_ref`` short of the filter's reference plane, and the waves are moved to the reference plane
afterwards with the propagation constant from a thru run on the same mesh (see
:mod:`refine.fullwave.waves`). Reference planes: the feed ends at the outer edges of the end
gaps (gap coupling, as in :mod:`refine.circuit.builder`), or the end resonator's centre line for a tapped
feed, where the circuit model joins it (the last half resonator width is de-embedded as feed
line, the usual junction-centre convention; the tee itself is not in the circuit model, so its
parasitics show up as EM-vs-model difference).
Microstrip only: the port probes assume a strip over one ground plane.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import NDArray

from refine import _validate as v
from refine.circuit.layout import Layout, ParallelLayout
from refine.fullwave import mesh as meshing
from refine.outputs.export import Strip, copper, parallel_copper
from refine.physics.substrate import Substrate
from refine.spec.coupling import Coupling

PML_CELLS = 8
#: the engine's energy end criterion: a run may stop once the field energy has fallen this far
#: below its peak (-50 dB). A narrowband filter's port signals can still ring well above the
#: noise there; its ring-down is continued instead (refine.fullwave.ringdown).
END_CRITERION = 1e-5
FEED_SHIFT_CELLS = 10  # launch past the absorbing layer (PML_CELLS) with two cells to spare


#: the ratio between neighbouring meshes of a converged field check (every cell refined)
REFINE_RATIO = 2**0.5

#: Mesh lines at a metal edge. "on-edge": one line on the edge itself. "thirds": no line on the
#: edge, one a third of the edge cell inside the metal and one two thirds outside, the usual FDTD
#: rule for thin conductors (common practice, no source): the field's edge singularity then falls
#: between two lines, where a staircased sheet edge effectively sits, instead of on a line where
#: the engine's sheet ends a fraction of a cell short or long.
EDGE_RULES = ("on-edge", "thirds")

#: The open enclosure's walls. "first-order": the engine's first-order absorbing boundary
#: (Mur), exact only for waves meeting it head-on; "pml" (the default): a perfectly matched
#: layer of :data:`PML_CELLS` cells added beyond the side margin and the air height, which
#: absorbs at any angle. benchmarks/em_boundaries.py measured both on a line and an open end:
#: matched layers at 6 substrate heights and at 12 agree within 0.07 % in ε_eff and Z0 and
#: 0.1 % in the open end's Δl; first-order walls at 6 h move ε_eff by up to 0.7 % (alumina) and
#: 1.1 % (laminate) at the bottom of the band and the open end's radiated conductance by +9 % and
#: +70 %, and on the laminate have not caught up even at 24 h.
OPEN_WALLS = ("first-order", "pml")

#: The strips' metal. "sheet": zero-thickness sheets, lossy with the problem's conductivity and
#: thickness through the engine's conducting-sheet model (what every stored solve before this
#: key used); "thick": solid perfect conductors as thick as the problem's metal (the geometry
#: the circuit model's thickness correction describes; lossless metal, because the skin depth,
#: 0.66 um in copper at 10 GHz, is far below any cell here). benchmarks/em_thick_metal.py
#: measures the one against the other.
METAL_MODELS = ("sheet", "thick")


@dataclass(frozen=True)
class Resolution:
    """A mesh preset. edge_cell: the cell at strip and gap edges (m), never more than half the
    smallest gap; cells_per_wavelength: in the substrate at the top of the band; ratio: the
    largest growth between neighbouring cells; side_margin, air_above: the box beyond the copper
    on its open sides and above the substrate, in substrate heights; edge_rule: where the mesh
    lines sit at a metal edge (:data:`EDGE_RULES`); open_walls: the absorbing walls of an open
    enclosure (:data:`OPEN_WALLS`); metal: the strips' model (:data:`METAL_MODELS`)."""

    name: str
    edge_cell: float
    cells_per_wavelength: float = 20
    ratio: float = 1.3
    side_margin: float = 6.0
    air_above: float = 8.0
    edge_rule: str = "on-edge"
    open_walls: str = "pml"
    mirror: bool = True
    metal: str = "sheet"

    def __post_init__(self) -> None:
        v.positive("mesh edge_cell", self.edge_cell)
        v.real_in_range("mesh cells_per_wavelength", self.cells_per_wavelength, 10.0, 160.0)
        v.real_in_range("mesh ratio", self.ratio, 1.05, 1.6)
        if self.edge_rule not in EDGE_RULES:
            raise ValueError(
                f"mesh edge_rule must be one of {', '.join(EDGE_RULES)}, got {self.edge_rule!r}"
            )
        v.one_of("mesh open_walls", self.open_walls, OPEN_WALLS)
        v.one_of("mesh metal", self.metal, METAL_MODELS)

    def halved(self, times: int = 1) -> Resolution:
        return replace(self, name=f"{self.name}/{2**times}", edge_cell=self.edge_cell / 2**times)

    def refined(self, times: int = 1, ratio: float = REFINE_RATIO) -> Resolution:
        """Every cell smaller by ``ratio**times``: the edge cell and the wavelength limit both
        (refining the edges alone leaves the coarse cells' error in place)."""
        k = ratio**times
        return replace(
            self,
            name=f"{self.name}/{k:.3g}",
            edge_cell=self.edge_cell / k,
            cells_per_wavelength=self.cells_per_wavelength * k,
        )


#: mesh presets; every preset uses the thirds rule at metal edges, which converges where lines
#: on the edges do not (benchmarks/em_open_ends.py: open-end Δl within 1 % between the last two
#: meshes against 2-5 % per halving)
MESHES: dict[str, Resolution] = {
    "coarse": Resolution("coarse", 50e-6, edge_rule="thirds"),
    "fine": Resolution("fine", 25e-6, edge_rule="thirds"),
}


@dataclass(frozen=True)
class Feed:
    """A microstrip feed of the field model. axis: "x" or "y", the feed's direction;
    outward: +1 or -1, from the filter towards the box edge; ref: the reference-plane
    coordinate on that axis; edge: where the feed meets the box edge; centre: the feed's centre
    line on the other axis; width: strip width."""

    axis: str
    outward: int
    ref: float
    edge: float
    centre: float
    width: float

    @property
    def length(self) -> float:
        return abs(self.edge - self.ref)


@dataclass(frozen=True)
class Structure:
    """Copper of a two-port on a substrate, with its two feeds and the gaps to mesh finely.

    openings : (axis, lo, hi) of every gap between strips, along the coupling axis.
    symmetric : True when the copper maps onto itself with the ports exchanged (a mirror image
        across the middle between the two reference planes, or a half turn about the middle of
        a staggered parallel-coupled filter): then one excitation gives the whole S-matrix.
    y_centre : the line across the filter the copper is symmetric about, or None (a staggered
        parallel-coupled filter that is not): the mesh across is made symmetric about it.
    """

    strips: tuple[Strip, ...]
    feeds: tuple[Feed, Feed]
    openings: tuple[tuple[str, float, float], ...]
    symmetric: bool
    y_centre: float | None = 0.0

    def mirror_line(self) -> float | None:
        """The line y = y_c along the feeds that the copper is mirror-symmetric across, with
        both feeds running along x on it, or None. Across such a line the quasi-TEM fields are
        even (E normal to it and H along it vanish on it): a magnetic wall there leaves the
        solution unchanged, so half the box suffices."""
        yc = self.y_centre
        if yc is None or any(f.axis != "x" or f.centre != yc for f in self.feeds):
            return None
        key = lambda s: (round(s.x0, 12), round(s.x1, 12), round(s.y0, 12), round(s.y1, 12))  # noqa: E731
        own = sorted(key(s) for s in self.strips)
        mirrored = sorted(
            key(Strip(s.x0, 2 * yc - s.y1, s.x1, 2 * yc - s.y0, s.name)) for s in self.strips
        )
        return yc if own == mirrored else None

    def thru(self, far_edge: float | None = None) -> Structure:
        """A straight line of the first feed's width along its axis from box edge to box edge,
        with the same feeds: the calibration run for the ports' line impedance and
        propagation constant. far_edge: for tapped feeds, the box edge the line runs to."""
        f1, f2 = self.feeds
        half = f1.width / 2
        if f1.axis == "x":
            lo, hi = min(f1.edge, f2.edge), max(f1.edge, f2.edge)
            st = Strip(lo, f1.centre - half, hi, f1.centre + half, "thru")
            if f2.centre != f1.centre:  # staggered feeds: both ports on the one straight line
                f2 = replace(f2, centre=f1.centre)
                return Structure((st,), (f1, f2), (), self.symmetric, f1.centre)
        else:  # tapped feeds: the first feed's line carried straight across the box
            top = far_edge if far_edge is not None else max(s.y1 for s in self.strips)
            st = Strip(f1.centre - half, f1.edge, f1.centre + half, top, "thru")
        return Structure(
            (st,), self.feeds, (), self.symmetric, f1.centre if f1.axis == "x" else 0.0
        )


def feed_length(substrate: Substrate, feed_width: float, f_max: float, res: Resolution) -> float:
    """Feed line inside the box: the launch past the absorbing layer, then ``D_ref`` of settled
    line before the measurement plane and ``D_ref`` from it to the reference plane, where
    ``D_ref = max(4 h, 3 W)`` lets the discontinuity's evanescent fields die out (common
    practice, no source)."""
    d_max = meshing.max_cell(f_max, substrate.eps_r, res.cells_per_wavelength)
    return FEED_SHIFT_CELLS * d_max + 2.0 * reference_distance(substrate, feed_width)


def reference_distance(substrate: Substrate, feed_width: float) -> float:
    return max(4.0 * substrate.height, 3.0 * feed_width)


def layout_structure(
    layout: Layout | ParallelLayout, substrate: Substrate, length: float
) -> Structure:
    """The field model's copper for a layout, feeds ``length`` long (see :func:`feed_length`)."""
    v.positive("feed length", length)
    if isinstance(layout, ParallelLayout):
        return _parallel_structure(layout, length)
    strips = copper(layout, feed_length=length)
    wf = layout.feed_width
    if layout.external is Coupling.GAP:
        fin = next(s for s in strips if s.name == "feed in")
        fout = next(s for s in strips if s.name == "feed out")
        feeds = (
            Feed("x", -1, fin.x1, fin.x0, 0.0, wf),
            Feed("x", +1, fout.x0, fout.x1, 0.0, wf),
        )
        res = [s for s in strips if s.name.startswith("resonator")]
        edges = [fin.x1, *[e for r in res for e in (r.x0, r.x1)], fout.x0]
        openings = tuple(("x", a, b) for a, b in zip(edges[0::2], edges[1::2], strict=True))
        return Structure(tuple(strips), feeds, openings, layout.is_mirror)
    # tapped feeds arrive from -y; bring both to one box edge
    y_edge = min(s.y0 for s in strips)
    out = []
    tap_feeds: list[Feed] = []
    for s in strips:
        if s.name.startswith("feed"):
            s = Strip(s.x0, y_edge, s.x1, s.y1, s.name)
            tap_feeds.append(Feed("y", -1, 0.0, y_edge, 0.5 * (s.x0 + s.x1), wf))
        out.append(s)
    res = [s for s in out if s.name.startswith("resonator")]
    openings = tuple(("x", a.x1, b.x0) for a, b in itertools.pairwise(res))
    return Structure(tuple(out), (tap_feeds[0], tap_feeds[1]), openings, layout.is_mirror)


def _parallel_structure(layout: ParallelLayout, length: float) -> Structure:
    """A parallel-coupled layout's copper (:func:`refine.outputs.export.parallel_copper`): the
    feeds along x on their own centre lines, the coupled sections' spacings as openings across
    (y), half-turn symmetric when its sections read the same both ways."""
    strips = parallel_copper(layout, feed_length=length)
    wf = layout.feed_width
    fin = next(s for s in strips if s.name == "feed in")
    fout = next(s for s in strips if s.name == "feed out")
    c_in, c_out = 0.5 * (fin.y0 + fin.y1), 0.5 * (fout.y0 + fout.y1)
    feeds = (
        Feed("x", -1, fin.x1, fin.x0, c_in, wf),
        Feed("x", +1, fout.x0, fout.x1, c_out, wf),
    )
    rows = [s for s in strips if not s.name.startswith("feed")]
    openings = []
    for a, b in itertools.combinations(rows, 2):  # strips side by side: the spacing between
        overlap = min(a.x1, b.x1) - max(a.x0, b.x0)
        if overlap > 1e-12:
            lo, hi = (a, b) if a.y1 <= b.y0 else (b, a)
            if hi.y0 > lo.y1:
                openings.append(("y", lo.y1, hi.y0))
    same = all(
        math.isclose(x, y, rel_tol=1e-12, abs_tol=1e-15)
        for seq in (layout.widths, layout.spacings, layout.lengths)
        for x, y in zip(seq, seq[::-1], strict=True)
    )
    return Structure(
        tuple(strips), feeds, tuple(openings), same, 0.5 * (c_in + c_out) if same else None
    )


def gap_structure(width: float, gap: float, length: float) -> Structure:
    """A single symmetric gap of width ``gap`` between two strips of ``width``; reference
    planes at the two strip ends (x = 0 and x = gap)."""
    v.positive("gap width", width)
    v.positive("gap", gap)
    v.positive("feed length", length)
    strips = (
        Strip(-length, -width / 2, 0.0, width / 2, "feed in"),
        Strip(gap, -width / 2, gap + length, width / 2, "feed out"),
    )
    feeds = (Feed("x", -1, 0.0, -length, 0.0, width), Feed("x", +1, gap, gap + length, 0.0, width))
    return Structure(strips, feeds, (("x", 0.0, gap),), True)


@dataclass(frozen=True)
class Mesh:
    x: NDArray[np.float64]
    y: NDArray[np.float64]
    z: NDArray[np.float64]
    edge_cell: float
    d_max: float
    #: the magnetic wall's line when the mesh is the half box above it (the engine's magnetic
    #: wall sits half a cell inside the box edge, so the first cell straddles this line)
    mirror: float | None = None
    #: the open enclosure's walls the box was padded for (:data:`OPEN_WALLS`)
    open_walls: str = "pml"
    #: the thickness of solid strips (the "thick" metal model), 0 for sheets
    metal_thickness: float = 0.0

    @property
    def span(self) -> float:
        """The whole box's diagonal in the strip plane (both halves of a mirrored box)."""
        y_lo = self.y[0] if self.mirror is None else 2.0 * self.mirror - self.y[-1]
        return math.dist((self.x[0], y_lo), (self.x[-1], self.y[-1]))

    @property
    def cells(self) -> int:
        return (len(self.x) - 1) * (len(self.y) - 1) * (len(self.z) - 1)

    @property
    def smallest(self) -> float:
        return float(min(np.diff(a).min() for a in (self.x, self.y, self.z)))


def build_mesh(st: Structure, substrate: Substrate, f_max: float, res: Resolution) -> Mesh:
    """Graded mesh: ``edge_cell`` (at most half the gap) at every strip edge, growing to the
    wavelength limit in open regions; the box reaches ``side_margin`` (6) substrate heights
    beyond the copper on its open sides and ``air_above`` (8) above the substrate (common
    practice, no source). With ``open_walls`` "pml" the matched layers' :data:`PML_CELLS`
    cells are added beyond those distances, so that the layers do not eat into them."""
    h = substrate.height
    d_max = meshing.max_cell(f_max, substrate.eps_r, res.cells_per_wavelength)
    edge = min(res.edge_cell, d_max)
    margin = res.side_margin * h
    pts = edge_points(st, edge, res.edge_rule)
    box = {
        "x": [min(s.x0 for s in st.strips), max(s.x1 for s in st.strips)],
        "y": [min(s.y0 for s in st.strips), max(s.y1 for s in st.strips)],
    }
    feed_axes = {f.axis for f in st.feeds}
    pad = PML_CELLS if res.open_walls == "pml" else 0  # matched layers beyond the margin
    lines = {}
    for axis in ("x", "y"):
        lo, hi = box[axis]
        open_lo = open_hi = True
        if axis in feed_axes:
            out = {f.outward for f in st.feeds if f.axis == axis}
            open_lo, open_hi = -1 not in out, +1 not in out
        lo = lo - margin if open_lo else lo
        hi = hi + margin if open_hi else hi
        lines[axis] = _padded(
            meshing.graded_lines(pts[axis], lo, hi, d_max, res.ratio),
            pad if open_lo else 0,
            pad if open_hi else 0,
        )
    if st.symmetric:
        f1, f2 = st.feeds
        if f1.axis == f2.axis == "x":
            lines["x"] = meshing.symmetric(lines["x"], 0.5 * (f1.ref + f2.ref))
        elif f1.axis == f2.axis == "y":
            lines["x"] = meshing.symmetric(lines["x"], 0.5 * (f1.centre + f2.centre))
    if "y" not in feed_axes and st.y_centre is not None:
        lines["y"] = meshing.symmetric(lines["y"], st.y_centre)
    mirror = st.mirror_line() if res.mirror else None
    if mirror is not None:
        # the half box above the centre line, its first cell straddling the line: the engine's
        # magnetic wall falls half a cell inside the box edge, so it then lies on the line (a
        # box edge on the line instead gives eps_eff -1 %, Z0 +5 %: benchmarks/em_mirror.py);
        # a line on the centre, if the whole box had one, is dropped
        tol = 1e-3 * float(np.min(np.diff(lines["y"])))
        upper = lines["y"][lines["y"] > mirror + tol]
        lines["y"] = np.concatenate(([2.0 * mirror - upper[0]], upper))
    t = substrate.metal_thickness if res.metal == "thick" else 0.0
    if res.metal == "thick" and not t > 0:
        raise ValueError("mesh metal 'thick' needs the substrate's metal_thickness > 0, got 0")
    # solid strips: a line on both faces, the cell through the metal its thickness
    z_pts = [(0.0, min(h / 4.0, d_max)), (h, min(edge, t) if t else edge)]
    if t:
        z_pts.append((h + t, t))
    lines["z"] = _padded(
        meshing.graded_lines(z_pts, 0.0, h + res.air_above * h, d_max, res.ratio), 0, pad
    )
    # guarantee a line exactly at the substrate top (and the metal's)
    assert np.any(lines["z"] == h) and (not t or np.any(lines["z"] == h + t))
    return Mesh(lines["x"], lines["y"], lines["z"], edge, d_max, mirror, res.open_walls, t)


def _padded(lines: NDArray, lo: int, hi: int) -> NDArray:
    """``lines`` with ``lo`` and ``hi`` more cells of the outermost size beyond each end."""
    d_lo, d_hi = lines[1] - lines[0], lines[-1] - lines[-2]
    before = lines[0] - d_lo * np.arange(lo, 0, -1)
    after = lines[-1] + d_hi * np.arange(1, hi + 1)
    return np.concatenate([before, lines, after])


def edge_points(st: Structure, edge: float, rule: str) -> dict[str, list[tuple[float, float]]]:
    """Fixed mesh points (position, cell) per axis at every metal edge under ``rule``
    (:data:`EDGE_RULES`). A gap's two edges take a cell of at most half the gap."""
    # (axis, position, side of the metal: +1 above the position, -1 below) -> cell
    edges: dict[tuple[str, float, int], float] = {}
    for s in st.strips:
        for axis, lo, hi in (("x", s.x0, s.x1), ("y", s.y0, s.y1)):
            edges[(axis, lo, +1)] = edge
            edges[(axis, hi, -1)] = edge
    for axis, a, b in st.openings:
        cell = min(edge, 0.5 * (b - a))
        for key in ((axis, a, -1), (axis, b, +1)):
            edges[key] = min(edges.get(key, edge), cell)
    pts: dict[str, list[tuple[float, float]]] = {"x": [], "y": []}
    for (axis, pos, side), cell in edges.items():
        if rule == "thirds":
            pts[axis] += [(pos + side * cell / 3.0, cell), (pos - side * 2.0 * cell / 3.0, cell)]
        else:
            pts[axis].append((pos, cell))
    return pts


ENCLOSURES = ("open", "shielded")  # the problem's [medium] enclosure, as the field model builds it


def boundaries(
    st: Structure, enclosure: str = "open", open_walls: str = "pml", mirror: bool = False
) -> list[str]:
    """Absorbing layers where the feeds leave the box, PEC floor as the ground plane, and on
    the other sides: absorbing walls for an "open" enclosure (radiation leaves; first-order or
    matched layers, :data:`OPEN_WALLS`), or metal walls and lid for a "shielded" one (the
    housing the problem states; the box's side margin and air height place them). mirror: the
    box is the half above the strips' centre line, which is a magnetic wall."""
    v.one_of("enclosure", enclosure, ENCLOSURES)
    v.one_of("open_walls", open_walls, OPEN_WALLS)
    pml = f"PML_{PML_CELLS}"
    if enclosure != "open":
        wall = "PEC"
    else:
        wall = "MUR" if open_walls == "first-order" else pml
    axes = {f.axis for f in st.feeds}
    bx = [pml, pml] if "x" in axes else [wall, wall]
    by = [pml, pml] if "y" in axes else [wall, wall]
    if mirror:
        by[0] = "PMC"
    return [*bx, *by, "PEC", wall]


def job(
    st: Structure,
    mesh: Mesh,
    substrate: Substrate,
    band: tuple[float, float],
    f: NDArray,
    max_time: float,
    excite: int,
    threads: int = 0,
    lossy: bool = True,
    enclosure: str = "open",
    open_walls: str | None = None,
) -> dict:
    """The plain-data job the solver script runs (all lengths in metres). open_walls: the
    mesh's own (:attr:`Mesh.open_walls`, what its box was padded for) unless given."""
    open_walls = mesh.open_walls if open_walls is None else open_walls
    f_lo, f_hi = band
    f0 = 0.5 * (f_lo + f_hi)
    fc = min(0.55 * (f_hi - f_lo), 0.8 * f0)  # keep DC out of the pulse: floating strips
    h = substrate.height
    y_lo = float(mesh.y[0]) if mesh.mirror is not None else -math.inf  # the half box's edge
    ports = []
    for k, fd in enumerate(st.feeds, start=1):
        lines = {"x": mesh.x, "y": mesh.y}[fd.axis]
        cell = float(np.max(np.diff(lines)))
        if fd.axis == "x":
            start = [fd.edge, max(fd.centre - fd.width / 2, y_lo), h]
            stop = [fd.ref, fd.centre + fd.width / 2, 0.0]
        else:
            start = [fd.centre - fd.width / 2, fd.edge, h]
            stop = [fd.centre + fd.width / 2, fd.ref, 0.0]
        d_ref = reference_distance(substrate, fd.width)
        ports.append(
            {
                "number": k,
                "start": start,
                "stop": stop,
                "direction": fd.axis,
                "excite": k == excite,
                "feed_shift": FEED_SHIFT_CELLS * cell,
                "meas_shift": fd.length - d_ref,
            }
        )
    metal = {"conductivity": None, "thickness": 0.0, "solid": mesh.metal_thickness}
    if (
        lossy
        and not mesh.metal_thickness
        and substrate.conductivity is not None
        and substrate.metal_thickness > 0
    ):
        metal = {
            "conductivity": substrate.conductivity,
            "thickness": substrate.metal_thickness,
            "solid": 0.0,
        }
    return {
        "substrate": {
            "eps_r": substrate.eps_r,
            "height": h,
            "loss_tangent": substrate.loss_tangent if lossy else 0.0,
        },
        "metal": metal,
        "mesh": {"x": mesh.x.tolist(), "y": mesh.y.tolist(), "z": mesh.z.tolist()},
        "strips": [[s.x0, max(s.y0, y_lo), s.x1, s.y1] for s in st.strips if s.y1 > y_lo],
        "ports": ports,
        "boundaries": boundaries(st, enclosure, open_walls, mesh.mirror is not None),
        # a half box's port currents are half the whole structure's: engine.run doubles them
        "mirror": mesh.mirror is not None,
        "excitation": {"f0": f0, "fc": fc},
        "frequencies": np.asarray(f, float).tolist(),
        "max_time": float(max_time),
        "max_steps": 50_000_000,
        "end_criterion": END_CRITERION,
        "threads": int(threads),
    }


def pulse_length(band: tuple[float, float]) -> float:
    """Duration of the engine's Gaussian pulse for this band (its 9/(2π fc) delay, twice)."""
    f_lo, f_hi = band
    f0 = 0.5 * (f_lo + f_hi)
    fc = min(0.55 * (f_hi - f_lo), 0.8 * f0)
    return 2.0 * 9.0 / (2.0 * math.pi * fc)
