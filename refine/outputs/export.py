"""Hand-over files: Touchstone, layout JSON, copper drawing (DXF, SVG), written atomically.

Every file is written to a temporary file in the target folder and renamed into place, so a
reader never sees a half-written file and an interrupted run leaves the previous file intact.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
import unicodedata
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape as xml_escape

import numpy as np
from numpy.typing import NDArray

from refine.circuit.layout import Layout
from refine.spec.coupling import Coupling
from refine.version import VERSION


def write_atomic(path: str | Path, writer: Callable[[Path], None]) -> Path:
    """Run ``writer(tmp_path)`` then rename the temporary file onto ``path``."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        writer(tmp_path)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp_path, 0o666 & ~umask)  # mkstemp makes 0600; give the usual file mode
        os.replace(tmp_path, path)
    except BaseException:
        tmp_path.unlink(missing_ok=True)
        raise
    return path


def write_text_atomic(path: str | Path, text: str) -> Path:
    def write(p: Path) -> None:
        p.write_text(text, encoding="utf-8")

    return write_atomic(path, write)


# --------------------------------------------------------------------------------------------
# Touchstone
# --------------------------------------------------------------------------------------------


def touchstone_text(f: NDArray, s: NDArray, z_ref: float, comments: Sequence[str] = ()) -> str:
    """Touchstone 1.1 two-port text: ``# Hz S RI R z_ref``, columns f, S11, S21, S12, S22 as
    real/imaginary pairs (the two-port column order of the Touchstone specification)."""
    lines = [f"! {one_line(c, 1000)}" for c in comments]
    lines.append(f"# Hz S RI R {z_ref:.10g}")
    order = ((0, 0), (1, 0), (0, 1), (1, 1))
    for k, fk in enumerate(np.asarray(f, float)):
        vals = " ".join(f"{s[k, i, j].real:.17g} {s[k, i, j].imag:.17g}" for i, j in order)
        lines.append(f"{fk:.17g} {vals}")
    return "\n".join(lines) + "\n"


def write_touchstone(
    path: str | Path, f: NDArray, s: NDArray, z_ref: float, comments: Sequence[str] = ()
) -> Path:
    return write_text_atomic(path, touchstone_text(f, s, z_ref, list(comments)))


# --------------------------------------------------------------------------------------------
# Layout JSON
# --------------------------------------------------------------------------------------------


def layout_dict(layout: Layout) -> dict:
    """The layout in SI metres under the documented keys (what ``refine check`` reads back)."""
    return {
        "units": "m",
        "external": layout.external,
        "feed_width": layout.feed_width,
        "widths": list(layout.widths),
        "gaps": list(layout.gaps),
        "lengths": list(layout.lengths),
        "taps": None if layout.taps is None else list(layout.taps),
    }


def electrical_dict(capacitances, thetas, f0: float) -> dict:
    """An ideal-medium (electrical) layout: series capacitances and electrical lengths at f0."""
    return {
        "medium": "ideal",
        "series_capacitances_farad": list(map(float, capacitances)),
        "electrical_lengths_rad_at_f0": list(map(float, thetas)),
        "f0_hz": float(f0),
    }


class LayoutFileError(ValueError):
    """A layout file that cannot be used; the message names the file, the key and the value."""


def read_layout(path: str | Path) -> Layout | dict:
    """Read a ``layout.json``: a :class:`Layout`, or the electrical dict for the ideal medium."""
    p = Path(path)
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except OSError as e:
        raise LayoutFileError(f"{p}: cannot be read ({e.strerror})") from None
    except json.JSONDecodeError as e:
        raise LayoutFileError(f"{p}: is not valid JSON ({e})") from None
    if not isinstance(data, dict):
        raise LayoutFileError(f"{p}: must hold a JSON object")
    if data.get("medium") == "ideal":
        for key in ("series_capacitances_farad", "electrical_lengths_rad_at_f0", "f0_hz"):
            if key not in data:
                raise LayoutFileError(f"{p}: missing key {key!r}")
        return data
    if data.get("units", "m") != "m":
        raise LayoutFileError(f"{p}: units = {data.get('units')!r}: only 'm' (metres) is used")
    for key in ("external", "feed_width", "widths", "gaps", "lengths"):
        if key not in data:
            raise LayoutFileError(f"{p}: missing key {key!r}")
    try:
        taps = data.get("taps")
        return Layout(
            data["external"],
            float(data["feed_width"]),
            tuple(data["widths"]),
            tuple(data["gaps"]),
            tuple(data["lengths"]),
            None if taps is None else tuple(taps),
        )
    except (TypeError, ValueError) as e:
        raise LayoutFileError(f"{p}: {e}") from None


# --------------------------------------------------------------------------------------------
# Copper geometry, drawn once for every drawing format
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Strip:
    """An axis-aligned copper rectangle (metres) and what it is."""

    x0: float
    y0: float
    x1: float
    y1: float
    name: str


def copper(layout: Layout, feed_length: float | None = None) -> list[Strip]:
    """Copper rectangles of the layout, input at the left, strip axis on y = 0.

    Gap coupling: feed, gap, resonator 1, gap, ..., resonator n, gap, feed along x. Tapped feed:
    the resonators along x; each feed arrives from below (-y) and joins the end resonator with
    its centre line at the tap distance from that resonator's outer open end.
    """
    fl = feed_length if feed_length is not None else 4.0 * layout.feed_width
    wf = layout.feed_width
    out: list[Strip] = []
    x = 0.0
    if layout.external is Coupling.GAP:
        out.append(Strip(-fl, -wf / 2, 0.0, wf / 2, "feed in"))
        x = layout.gaps[0]
        for j, (ln, w) in enumerate(zip(layout.lengths, layout.widths, strict=True)):
            out.append(Strip(x, -w / 2, x + ln, w / 2, f"resonator {j + 1}"))
            x += ln + layout.gaps[j + 1]
        out.append(Strip(x, -wf / 2, x + fl, wf / 2, "feed out"))
        return out
    starts = []
    for j, (ln, w) in enumerate(zip(layout.lengths, layout.widths, strict=True)):
        starts.append(x)
        out.append(Strip(x, -w / 2, x + ln, w / 2, f"resonator {j + 1}"))
        x += ln + (layout.gaps[j] if j < layout.order - 1 else 0.0)
    assert layout.taps is not None  # a tapped layout (gap coupling returned above)
    t_in, t_out = layout.taps
    x_in = starts[0] + t_in
    x_out = starts[-1] + layout.lengths[-1] - t_out
    w0, wn = layout.widths[0], layout.widths[-1]
    out.append(Strip(x_in - wf / 2, -w0 / 2 - fl, x_in + wf / 2, -w0 / 2, "feed in"))
    out.append(Strip(x_out - wf / 2, -wn / 2 - fl, x_out + wf / 2, -wn / 2, "feed out"))
    return out


def write_dxf(path: str | Path, layout: Layout, title: str = "") -> Path:
    """Copper outline in millimetres: layer ``copper`` (closed polylines, the gaps are real
    openings between them) and layer ``labels`` (names and the gap widths)."""
    import ezdxf
    from ezdxf import units

    def writer(tmp: Path) -> None:
        doc = ezdxf.new("R2010")
        doc.units = units.MM
        doc.layers.add("copper", color=1)
        doc.layers.add("labels", color=7)
        msp = doc.modelspace()
        strips = copper(layout)
        for st in strips:
            pts = [
                (st.x0 * 1e3, st.y0 * 1e3),
                (st.x1 * 1e3, st.y0 * 1e3),
                (st.x1 * 1e3, st.y1 * 1e3),
                (st.x0 * 1e3, st.y1 * 1e3),
            ]
            msp.add_lwpolyline(pts, close=True, dxfattribs={"layer": "copper"})
        h = max(layout.feed_width, max(layout.widths)) * 1e3
        for st in strips:
            msp.add_text(st.name, height=0.15 * h, dxfattribs={"layer": "labels"}).set_placement(
                ((st.x0 + st.x1) / 2 * 1e3, st.y1 * 1e3 + 0.3 * h)
            )
        if title:
            msp.add_text(
                one_line(title), height=0.25 * h, dxfattribs={"layer": "labels"}
            ).set_placement((strips[0].x0 * 1e3, -3 * h))
        doc.header["$INSUNITS"] = 4  # millimetres
        doc.saveas(tmp)

    return write_atomic(path, writer)


def one_line(text: str, limit: int = 200) -> str:
    """``text`` as a single printable line of at most ``limit`` characters: control characters
    (line breaks included) become spaces, and a longer text is cut with an ellipsis. Every
    writer passes free text (the problem's name) through it, so no name can start a new line
    in a Touchstone header or a DXF text."""
    flat = "".join(" " if unicodedata.category(c) in ("Cc", "Zl", "Zp") else c for c in text)
    return flat if len(flat) <= limit else flat[: limit - 1] + "…"


def svg_text(layout: Layout, title: str = "") -> str:
    """The same copper as an SVG drawing in millimetres (y up in the layout, down in SVG)."""
    strips = copper(layout)
    xs = [v for s in strips for v in (s.x0, s.x1)]
    ys = [v for s in strips for v in (s.y0, s.y1)]
    pad = 0.1 * (max(xs) - min(xs))
    x0, x1 = (min(xs) - pad) * 1e3, (max(xs) + pad) * 1e3
    y0, y1 = (min(ys) - pad) * 1e3, (max(ys) + pad) * 1e3
    w, h = x1 - x0, y1 - y0
    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{w:.4f}mm" height="{h:.4f}mm" viewBox="{x0:.5f} {-y1:.5f} {w:.5f} {h:.5f}">',
        f"<title>{xml_escape(one_line(title or 'refine layout'))}</title>",
        f'<rect x="{x0:.5f}" y="{-y1:.5f}" width="{w:.5f}" height="{h:.5f}" fill="white"/>',
        '<g id="copper" fill="#b87333" stroke="none">',
    ]
    for s in strips:
        parts.append(
            f'<rect x="{s.x0 * 1e3:.5f}" y="{-s.y1 * 1e3:.5f}" width="{(s.x1 - s.x0) * 1e3:.5f}" '
            f'height="{(s.y1 - s.y0) * 1e3:.5f}"><title>{xml_escape(s.name)}</title></rect>'
        )
    parts.append("</g></svg>")
    return "\n".join(parts) + "\n"


def write_svg(path: str | Path, layout: Layout, title: str = "") -> Path:
    return write_text_atomic(path, svg_text(layout, title))


def json_safe(o: Any) -> Any:
    """JSON-safe copy: numpy scalars to Python, non-finite floats to None, tuples to lists."""
    if isinstance(o, dict):
        return {str(k): json_safe(v) for k, v in o.items()}
    if isinstance(o, (list, tuple)):
        return [json_safe(v) for v in o]
    if isinstance(o, (np.floating, np.integer)):
        o = o.item()
    if isinstance(o, float) and not math.isfinite(o):
        return None
    return o


def write_json(path: str | Path, data: dict) -> Path:
    return write_text_atomic(path, json.dumps(json_safe(data), indent=2, allow_nan=False) + "\n")


GENERATOR = f"refine {VERSION}"
