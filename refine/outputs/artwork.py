"""Fab artwork: the layout's copper as one clean set of polygons, etch-compensated, with a
board outline and the ports' reference planes, for the formats shops take.

* **Copper**: the named rectangles of :func:`refine.outputs.export.copper` (a parallel-coupled
  layout: :func:`refine.outputs.export.parallel_copper`), grown by the shop's
  etch bias on every edge (mitred corners: a rectangle stays a rectangle) and merged where they
  touch or overlap (shapely's union), so a tapped feed and its resonator are one polygon and no
  two output shapes touch. A gap narrower than twice the bias would close: refused.
* **Etch bias** (``[fab] etch_bias``, metres per edge): the shop's etch removes that much from
  every copper edge, so the artwork is drawn that much larger: strips 2·bias wider and longer,
  gaps 2·bias narrower. The layout JSON keeps the as-built dimensions; the report gives both.
* **Board outline**: the copper's bounding box grown by ``margin`` (default five feed widths) on
  every side, for the shop to cut to.
* **Ports**: a marker line across each feed at its reference plane (the outer edge of an end
  gap, the tap's junction with its resonator, or a parallel-coupled filter's outer section
  ends), on a layer of its own.

Formats: Gerber X2 (one file per layer, with file attributes; gerber-writer), GDSII (layers 1
copper, 2 outline, 3 ports; gdstk), a KiCad footprint with the copper as custom pads (kiutils),
and DXF R12 or R2010 (ezdxf). Coordinates are millimetres (GDSII: micrometre units, 1 nm
precision), input at the left, the strip axis on y = 0.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from pathlib import Path
from xml.sax.saxutils import escape as xml_escape

from refine.circuit.layout import Layout, ParallelLayout
from refine.outputs.export import (
    GENERATOR,
    Strip,
    copper,
    one_line,
    parallel_copper,
    write_atomic,
    write_text_atomic,
)
from refine.spec.coupling import Coupling

Point = tuple[float, float]

#: output coordinates are rounded to this (metres): far below any shop's grid, and it keeps the
#: union's float noise out of the files
RESOLUTION = 1e-9
#: layer numbers of the GDSII file (datatype 0)
GDS_LAYERS = {"copper": 1, "outline": 2, "ports": 3}
#: width of the outline and port-marker strokes (metres)
STROKE = 50e-6


class ArtworkError(ValueError):
    """The artwork cannot be drawn as asked (an etch bias that closes a gap)."""


@dataclass(frozen=True)
class Port:
    """A port's reference plane: a segment across its feed, from ``a`` to ``b`` (metres)."""

    name: str
    a: Point
    b: Point


@dataclass(frozen=True)
class Artwork:
    """Copper outlines (closed, counter-clockwise, first point not repeated), the board
    outline, the ports, and the etch bias they were drawn with (metres)."""

    copper: tuple[tuple[Point, ...], ...]
    outline: tuple[Point, ...]
    ports: tuple[Port, ...]
    etch_bias: float

    def bounds(self) -> tuple[float, float, float, float]:
        """(x_min, y_min, x_max, y_max) of the copper."""
        xs = [p[0] for poly in self.copper for p in poly]
        ys = [p[1] for poly in self.copper for p in poly]
        return min(xs), min(ys), max(xs), max(ys)


def _rounded(x: float) -> float:
    return round(x / RESOLUTION) * RESOLUTION


def artwork(
    layout: Layout | ParallelLayout, etch_bias: float = 0.0, margin: float | None = None
) -> Artwork:
    """The layout's artwork (see the module docstring); ``etch_bias`` in metres per edge. A
    parallel-coupled layout's copper is :func:`~refine.outputs.export.parallel_copper`."""
    from shapely import Polygon, box
    from shapely.geometry.polygon import orient
    from shapely.ops import unary_union

    if not etch_bias >= 0.0:
        raise ArtworkError(f"etch_bias = {etch_bias!r} m must be >= 0")
    gaps = layout.spacings if isinstance(layout, ParallelLayout) else layout.gaps
    smallest = min(gaps) if gaps else float("inf")
    if 2.0 * etch_bias >= smallest:
        raise ArtworkError(
            f"etch_bias = {etch_bias * 1e6:.3g} um per edge closes the {smallest * 1e6:.3g} um gap "
            f"(the drawn gap would be {(smallest - 2 * etch_bias) * 1e6:.3g} um); allowed: below "
            f"half the smallest gap, {smallest * 0.5e6:.3g} um"
        )
    strips = parallel_copper(layout) if isinstance(layout, ParallelLayout) else copper(layout)
    b = etch_bias
    shapes = [box(s.x0 - b, s.y0 - b, s.x1 + b, s.y1 + b) for s in strips]
    merged = unary_union(shapes)
    polys: list[Polygon] = list(getattr(merged, "geoms", [merged]))
    if isinstance(layout, ParallelLayout):  # feed + first strip, n resonators, last + feed
        expected = layout.order + 2
    else:
        expected = len(strips) if layout.external is Coupling.GAP else layout.order
    if len(polys) != expected:
        raise ArtworkError(
            f"the copper merged into {len(polys)} pieces, expected {expected}: two strips "
            f"touch or overlap (etch_bias = {b * 1e6:.3g} um per edge)"
        )
    out = []
    for poly in sorted(polys, key=lambda p: (p.bounds[0], p.bounds[1])):
        ring = list(orient(poly.simplify(0.0), 1.0).exterior.coords)[:-1]
        out.append(tuple((_rounded(x), _rounded(y)) for x, y in ring))
    m = margin if margin is not None else 5.0 * layout.feed_width
    x0, y0 = min(s.x0 for s in strips) - m, min(s.y0 for s in strips) - m
    x1, y1 = max(s.x1 for s in strips) + m, max(s.y1 for s in strips) + m
    outline = tuple((_rounded(x), _rounded(y)) for x, y in ((x0, y0), (x1, y0), (x1, y1), (x0, y1)))
    return Artwork(tuple(out), outline, _ports(layout, strips), b)


def _ports(layout: Layout | ParallelLayout, strips: list[Strip]) -> tuple[Port, ...]:
    feeds = {s.name: s for s in strips if s.name.startswith("feed")}
    if isinstance(layout, ParallelLayout) or layout.external is Coupling.GAP:
        # the reference planes: the feeds' inner ends
        fi, fo = feeds["feed in"], feeds["feed out"]
        return (
            Port("port 1", (fi.x1, fi.y0), (fi.x1, fi.y1)),
            Port("port 2", (fo.x0, fo.y0), (fo.x0, fo.y1)),
        )
    out = []
    for k, name in enumerate(("feed in", "feed out")):  # at the tap: the feeds' upper ends
        s = feeds[name]
        out.append(Port(f"port {k + 1}", (s.x0, s.y1), (s.x1, s.y1)))
    return tuple(out)


# --------------------------------------------------------------------------------------------
# Writers
# --------------------------------------------------------------------------------------------


def _mm(p: Point) -> Point:
    return (p[0] * 1e3, p[1] * 1e3)


def write_gerber(folder: str | Path, stem: str, art: Artwork, title: str = "") -> list[Path]:
    """Gerber X2 files ``{stem}-copper.gbr`` (top copper, positive: one region per copper
    polygon), ``{stem}-outline.gbr`` (the board profile) and ``{stem}-ports.gbr``
    (reference-plane markers), in millimetres, with the file attributes (file function,
    polarity, generation software) a CAM system reads. Written by gerber-writer."""
    from gerber_writer import DataLayer, set_generation_software
    from gerber_writer import Path as GPath

    folder = Path(folder)
    set_generation_software("refine", "refine", GENERATOR.split()[-1])

    def ring(points: list[Point], close: bool) -> GPath:
        path = GPath()
        path.moveto(_mm(points[0]))
        for q in points[1:]:
            path.lineto(_mm(q))
        if close:
            path.lineto(_mm(points[0]))
        return path

    def save(name: str, layer: DataLayer) -> Path:
        text = layer.dumps_gerber()
        if title:  # a comment line after the header, flattened to one line without '*'
            head, _, rest = text.partition("\n")
            text = f"{head}\nG04 {one_line(title).replace('*', ' ').replace('%', ' ')}*\n{rest}"
        return write_text_atomic(folder / name, text)

    copper = DataLayer("Copper,L1,Top")
    for poly in art.copper:
        copper.add_region(ring(list(poly), True), "Conductor")
    outline = DataLayer("Profile,NP")
    outline.add_traces_path(ring(list(art.outline), True), STROKE * 1e3, "Profile")
    ports = DataLayer("Other,Reference planes")
    for p in art.ports:
        ports.add_trace_line(_mm(p.a), _mm(p.b), STROKE * 1e3, "Other,Reference plane")
    return [
        save(f"{stem}-copper.gbr", copper),
        save(f"{stem}-outline.gbr", outline),
        save(f"{stem}-ports.gbr", ports),
    ]


def write_gds(path: str | Path, art: Artwork, cell: str = "FILTER") -> Path:
    """GDSII: copper polygons on layer 1, the outline on 2, port markers and names on 3
    (datatype 0), in one cell; units of 1 um with 1 nm precision."""
    import gdstk

    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    top = lib.new_cell(cell)
    um = [[(x * 1e6, y * 1e6) for x, y in poly] for poly in art.copper]
    for poly in um:
        top.add(gdstk.Polygon(poly, layer=GDS_LAYERS["copper"]))
    ring = [(x * 1e6, y * 1e6) for x, y in art.outline]
    top.add(
        gdstk.FlexPath([*ring, ring[0]], STROKE * 1e6, layer=GDS_LAYERS["outline"]).to_polygons()[0]
    )
    for p in art.ports:
        a, b = (p.a[0] * 1e6, p.a[1] * 1e6), (p.b[0] * 1e6, p.b[1] * 1e6)
        top.add(gdstk.FlexPath([a, b], STROKE * 1e6, layer=GDS_LAYERS["ports"]))
        top.add(
            gdstk.Label(p.name, ((a[0] + b[0]) / 2, (a[1] + b[1]) / 2), layer=GDS_LAYERS["ports"])
        )
    return write_atomic(path, lambda tmp: lib.write_gds(tmp))


def write_kicad_footprint(path: str | Path, art: Artwork, name: str, title: str = "") -> Path:
    """A KiCad footprint: each copper polygon a custom SMD pad on F.Cu (the feeds' pads are
    numbered 1 and 2, the resonators' are unnumbered), the outline on Edge.Cuts and the port
    markers on Dwgs.User. KiCad's y axis points down: y is mirrored."""
    from kiutils.footprint import Footprint, Pad, PadOptions
    from kiutils.items.common import Position
    from kiutils.items.fpitems import FpLine, FpText
    from kiutils.items.gritems import GrPoly

    fp = Footprint.create_new(library_id=name, value=one_line(title or name, 120), type="smd")
    fp.description = one_line(f"{GENERATOR}: {title or name}")
    port_pts = [p.a for p in art.ports]

    def contains(poly: tuple[Point, ...], pt: Point) -> bool:
        xs, ys = [q[0] for q in poly], [q[1] for q in poly]
        tol = 2 * RESOLUTION
        return min(xs) - tol <= pt[0] <= max(xs) + tol and min(ys) - tol <= pt[1] <= max(ys) + tol

    for poly in art.copper:
        number = ""
        for k, pt in enumerate(port_pts):
            if contains(poly, pt):
                number = str(k + 1)
        # the anchor: a small square at the polygon's first vertex-adjacent interior point
        xs, ys = [q[0] for q in poly], [q[1] for q in poly]
        cx, cy = (min(xs) + max(xs)) / 2, (min(ys) + max(ys)) / 2
        side = 0.1 * min(max(xs) - min(xs), max(ys) - min(ys)) * 1e3
        prim = GrPoly(
            coordinates=[Position(X=(x - cx) * 1e3, Y=-(y - cy) * 1e3) for x, y in poly],
            width=0.0,
            fill="yes",
        )
        fp.pads.append(
            Pad(
                number=number,
                type="smd",
                shape="custom",
                position=Position(X=cx * 1e3, Y=-cy * 1e3),
                size=Position(X=side, Y=side),
                layers=["F.Cu"],
                customPadOptions=PadOptions(clearance="outline", anchor="rect"),
                customPadPrimitives=[prim],
            )
        )
    ring = [*art.outline, art.outline[0]]
    for a, b in itertools.pairwise(ring):
        fp.graphicItems.append(
            FpLine(
                start=Position(X=a[0] * 1e3, Y=-a[1] * 1e3),
                end=Position(X=b[0] * 1e3, Y=-b[1] * 1e3),
                layer="Edge.Cuts",
                width=STROKE * 1e3,
            )
        )
    for p in art.ports:
        fp.graphicItems.append(
            FpLine(
                start=Position(X=p.a[0] * 1e3, Y=-p.a[1] * 1e3),
                end=Position(X=p.b[0] * 1e3, Y=-p.b[1] * 1e3),
                layer="Dwgs.User",
                width=STROKE * 1e3,
            )
        )
        fp.graphicItems.append(
            FpText(
                type="user",
                text=p.name,
                position=Position(X=p.a[0] * 1e3, Y=-p.a[1] * 1e3 + 0.5),
                layer="Dwgs.User",
            )
        )
    return write_atomic(path, lambda tmp: fp.to_file(str(tmp)))


def write_dxf_artwork(
    path: str | Path, art: Artwork, version: str = "R2010", title: str = ""
) -> Path:
    """DXF in millimetres: layers ``copper`` (closed polylines), ``outline`` and ``ports``
    (markers and names). ``version`` "R12" writes the oldest widely read DXF (POLYLINE
    entities), "R2010" lightweight polylines."""
    import ezdxf
    from ezdxf import units

    if version not in ("R12", "R2010"):
        raise ValueError(f"DXF version = {version!r} is not one of 'R12', 'R2010'")

    def writer(tmp: Path) -> None:
        doc = ezdxf.new(version)
        if version != "R12":
            doc.units = units.MM
        doc.header["$INSUNITS"] = 4  # millimetres
        for name, colour in (("copper", 1), ("outline", 3), ("ports", 5), ("labels", 7)):
            doc.layers.add(name, color=colour)
        msp = doc.modelspace()

        def closed(points: list[Point], layer: str) -> None:
            if version == "R12":
                msp.add_polyline2d(points, close=True, dxfattribs={"layer": layer})
            else:
                msp.add_lwpolyline(points, close=True, dxfattribs={"layer": layer})

        for poly in art.copper:
            closed([_mm(p) for p in poly], "copper")
        closed([_mm(p) for p in art.outline], "outline")
        x0, y0, x1, _ = art.bounds()
        h = 0.02 * (x1 - x0) * 1e3
        for p in art.ports:
            msp.add_line(_mm(p.a), _mm(p.b), dxfattribs={"layer": "ports"})
            msp.add_text(p.name, height=h, dxfattribs={"layer": "ports", "insert": _mm(p.b)})
        if title:
            msp.add_text(
                one_line(title),
                height=h,
                dxfattribs={"layer": "labels", "insert": (x0 * 1e3, (y0 * 1e3) - 4 * h)},
            )
        doc.saveas(tmp)

    return write_atomic(path, writer)


def svg_text(art: Artwork, title: str = "") -> str:
    """The artwork as an SVG drawing in millimetres (y up in the layout, down in SVG): groups
    ``copper`` (one path per polygon), ``outline`` and ``ports``."""
    xs = [p[0] for p in art.outline]
    ys = [p[1] for p in art.outline]
    x0, x1 = min(xs) * 1e3, max(xs) * 1e3
    y0, y1 = min(ys) * 1e3, max(ys) * 1e3
    w, h = x1 - x0, y1 - y0
    sw = STROKE * 1e3

    def path(poly: tuple[Point, ...] | list[Point], close: bool = True) -> str:
        pts = " L ".join(f"{x * 1e3:.5f} {-y * 1e3:.5f}" for x, y in poly)
        return f"M {pts}" + (" Z" if close else "")

    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{w:.4f}mm" height="{h:.4f}mm" '
        f'viewBox="{x0:.5f} {-y1:.5f} {w:.5f} {h:.5f}">',
        f"<title>{xml_escape(one_line(title or 'refine layout'))}</title>",
        f'<rect x="{x0:.5f}" y="{-y1:.5f}" width="{w:.5f}" height="{h:.5f}" fill="white"/>',
        '<g id="copper" fill="#b87333" stroke="none">',
        *(f'<path d="{path(poly)}"/>' for poly in art.copper),
        "</g>",
        f'<g id="outline" fill="none" stroke="#2e7d32" stroke-width="{sw:.4f}">',
        f'<path d="{path(art.outline)}"/>',
        "</g>",
        f'<g id="ports" fill="none" stroke="#1565c0" stroke-width="{sw:.4f}">',
        *(
            f'<path d="{path([p.a, p.b], close=False)}"><title>{p.name}</title></path>'
            for p in art.ports
        ),
        "</g></svg>",
    ]
    return "\n".join(parts) + "\n"


def write_svg(path: str | Path, art: Artwork, title: str = "") -> Path:
    return write_text_atomic(path, svg_text(art, title))


#: the artwork files :func:`write_artwork` writes, beside each other in one folder
FILES = (
    "layout.dxf",
    "layout.svg",
    "layout.gds",
    "layout.kicad_mod",
    "layout-copper.gbr",
    "layout-outline.gbr",
    "layout-ports.gbr",
)


def write_artwork(
    folder: str | Path,
    layout: Layout | ParallelLayout,
    etch_bias: float = 0.0,
    title: str = "",
    dxf_version: str = "R2010",
    stem: str = "layout",
) -> list[Path]:
    """Every artwork format of ``layout`` into ``folder`` (the names of :data:`FILES` with
    ``stem``): DXF, SVG, GDSII, a KiCad footprint, and the three Gerber X2 layers."""
    folder = Path(folder)
    art = artwork(layout, etch_bias)
    name = "".join(c if c.isalnum() or c in "-_." else "_" for c in one_line(title, 60)) or stem
    return [
        write_dxf_artwork(folder / f"{stem}.dxf", art, dxf_version, title),
        write_svg(folder / f"{stem}.svg", art, title),
        write_gds(folder / f"{stem}.gds", art),
        write_kicad_footprint(folder / f"{stem}.kicad_mod", art, name, title),
        *write_gerber(folder, stem, art, title),
    ]


__all__ = [
    "FILES",
    "GDS_LAYERS",
    "Artwork",
    "ArtworkError",
    "Port",
    "artwork",
    "svg_text",
    "write_artwork",
    "write_dxf_artwork",
    "write_gds",
    "write_gerber",
    "write_kicad_footprint",
    "write_svg",
]
