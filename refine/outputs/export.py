"""Hand-over files: Touchstone, layout JSON and the copper rectangles every drawing starts
from (:mod:`refine.outputs.artwork` draws them), written atomically.

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

import numpy as np
from numpy.typing import NDArray

from refine.circuit.layout import Layout, ParallelLayout
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


def touchstone2_text(f: NDArray, s: NDArray, z_ref: float, comments: Sequence[str] = ()) -> str:
    """Touchstone 2.0 two-port text: the keyword header ([Version] 2.0, [Number of Ports],
    [Two-Port Data Order] 21_12, [Number of Frequencies], [Reference]), then the same data
    lines as :func:`touchstone_text` under [Network Data], and [End]."""
    f = np.asarray(f, float)
    body = touchstone_text(f, s, z_ref).splitlines()[1:]  # the data lines, without the option line
    lines = [f"! {one_line(c, 1000)}" for c in comments]
    lines += [
        "[Version] 2.0",
        f"# Hz S RI R {z_ref:.10g}",
        "[Number of Ports] 2",
        "[Two-Port Data Order] 21_12",
        f"[Number of Frequencies] {f.size}",
        f"[Reference] {z_ref:.10g} {z_ref:.10g}",
        "[Network Data]",
        *body,
        "[End]",
    ]
    return "\n".join(lines) + "\n"


def write_touchstone(
    path: str | Path,
    f: NDArray,
    s: NDArray,
    z_ref: float,
    comments: Sequence[str] = (),
    version: str = "1.1",
) -> Path:
    """A two-port Touchstone file, ``version`` "1.1" (``.s2p``) or "2.0" (``.ts``)."""
    if version not in ("1.1", "2.0"):
        raise ValueError(f"Touchstone version = {version!r} is not one of '1.1', '2.0'")
    text = (touchstone_text if version == "1.1" else touchstone2_text)(f, s, z_ref, list(comments))
    return write_text_atomic(path, text)


# --------------------------------------------------------------------------------------------
# Layout JSON
# --------------------------------------------------------------------------------------------


def parallel_layout_dict(layout: ParallelLayout) -> dict:
    """A parallel-coupled layout in SI metres: ``topology``, the feed width and, per coupled
    section, its strip width, edge-to-edge spacing and length."""
    return {
        "units": "m",
        "topology": "parallel-coupled",
        "feed_width": layout.feed_width,
        "widths": list(layout.widths),
        "spacings": list(layout.spacings),
        "lengths": list(layout.lengths),
        "feed_stub": layout.feed_stub,
    }


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


def read_layout(path: str | Path) -> Layout | ParallelLayout | dict:
    """Read a ``layout.json``: a :class:`Layout`, a :class:`ParallelLayout` (``topology =
    "parallel-coupled"``), or the electrical dict for the ideal medium."""
    p = Path(path)
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except OSError as e:
        raise LayoutFileError(f"{p}: cannot be read ({e.strerror})") from None
    except UnicodeDecodeError as e:
        raise LayoutFileError(
            f"{p}: is not UTF-8 text (byte {e.object[e.start]:#04x} at position {e.start}); "
            "a layout file is JSON in UTF-8"
        ) from None
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
    if data.get("topology") == "parallel-coupled":
        return _read_parallel(p, data)
    for key in ("external", "feed_width", "widths", "gaps", "lengths"):
        if key not in data:
            raise LayoutFileError(f"{p}: missing key {key!r}")
    for key in ("feed_width", "widths", "gaps", "lengths", "taps"):
        value = data.get(key)
        if value is None and key == "taps":
            continue
        items = [value] if key == "feed_width" else value
        if not isinstance(items, list):
            raise LayoutFileError(f"{p}: {key} = {value!r} must be a list of numbers in metres")
        for i, x in enumerate(items):
            if isinstance(x, bool) or not isinstance(x, (int, float)):
                where = key if key == "feed_width" else f"{key}[{i}]"
                raise LayoutFileError(
                    f"{p}: {where} = {x!r} is not a number; a layout file holds plain numbers "
                    "in metres (for example 3.7e-05 for 37 um)"
                )
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


def _read_parallel(p: Path, data: dict) -> ParallelLayout:
    for key in ("feed_width", "widths", "spacings", "lengths"):
        if key not in data:
            raise LayoutFileError(f"{p}: missing key {key!r}")
    for key in ("feed_width", "feed_stub", "widths", "spacings", "lengths"):
        value = data.get(key, 0.0)
        items = value if isinstance(value, list) else [value]
        for i, x in enumerate(items):
            if isinstance(x, bool) or not isinstance(x, (int, float)):
                where = key if not isinstance(value, list) else f"{key}[{i}]"
                raise LayoutFileError(
                    f"{p}: {where} = {x!r} is not a number; a layout file holds plain numbers "
                    "in metres"
                )
    try:
        return ParallelLayout(
            float(data["feed_width"]),
            tuple(data["widths"]),
            tuple(data["spacings"]),
            tuple(data["lengths"]),
            float(data.get("feed_stub", 0.0)),
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


def parallel_copper(layout: ParallelLayout, feed_length: float | None = None) -> list[Strip]:
    """Copper rectangles of a parallel-coupled layout, input at the left on y = 0.

    Section k's two strips overlap over its length, the second one (s_k + W_k) centre to centre
    below the first; resonator k is section k's second strip and section k + 1's first strip
    end to end on one centre line (a width step where the sections' widths differ). The feeds
    continue the first section's first strip to the left and the last section's second strip
    to the right, each through its stub of the end section's width (``feed_stub`` long).
    """
    fl = feed_length if feed_length is not None else 4.0 * layout.feed_width
    wf = layout.feed_width
    m = len(layout.widths)
    y = [0.0]  # centre lines: the input row, then one per resonator, then the output row
    for w, s in zip(layout.widths, layout.spacings, strict=True):
        y.append(y[-1] - (w + s))
    x = [0.0]
    for ln in layout.lengths:
        x.append(x[-1] + ln)
    st = layout.feed_stub
    out = [Strip(-fl - st, -wf / 2, -st, wf / 2, "feed in")]
    w0 = layout.widths[0]
    if st > 0.0:
        out.append(Strip(-st, -w0 / 2, 0.0, w0 / 2, "feed in stub"))
    out.append(Strip(0.0, -w0 / 2, x[1], w0 / 2, "section 1 first strip"))
    for k in range(1, m):  # resonator k: section k's second strip, section k+1's first strip
        wa, wb = layout.widths[k - 1], layout.widths[k]
        yc = y[k]
        out.append(Strip(x[k - 1], yc - wa / 2, x[k], yc + wa / 2, f"resonator {k}"))
        out.append(Strip(x[k], yc - wb / 2, x[k + 1], yc + wb / 2, f"resonator {k}"))
    wl = layout.widths[-1]
    yl = y[m]
    out.append(Strip(x[m - 1], yl - wl / 2, x[m], yl + wl / 2, f"section {m} second strip"))
    if st > 0.0:
        out.append(Strip(x[m], yl - wl / 2, x[m] + st, yl + wl / 2, "feed out stub"))
    out.append(Strip(x[m] + st, yl - wf / 2, x[m] + st + fl, yl + wf / 2, "feed out"))
    return out


def one_line(text: str, limit: int = 200) -> str:
    """``text`` as a single printable line of at most ``limit`` characters: control characters
    (line breaks included) become spaces, and a longer text is cut with an ellipsis. Every
    writer passes free text (the problem's name) through it, so no name can start a new line
    in a Touchstone header or a DXF text."""
    flat = "".join(" " if unicodedata.category(c) in ("Cc", "Zl", "Zp") else c for c in text)
    return flat if len(flat) <= limit else flat[: limit - 1] + "…"


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
