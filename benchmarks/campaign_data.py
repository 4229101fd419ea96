"""Reading and writing a field-solver campaign's data file (``tests/data/fullwave-*.json``).

Every campaign script appends each finished solve to its file at once, so a killed campaign
resumes where it stopped; the write goes to a temporary file first and replaces the old one in
one step, so an interrupted write never leaves a half-written file.
"""

from __future__ import annotations

import fcntl
import json
from collections.abc import Callable, Hashable
from pathlib import Path


def load_runs(path: Path) -> list[dict]:
    """The file's finished runs (none when it does not exist yet)."""
    return json.loads(path.read_text())["runs"] if path.exists() else []


#: The boxes the campaigns solve in, by name, as ``Resolution`` fields: the first one (whole,
#: first-order absorbing walls at the margins), and the field check's defaults since the
#: boundary study (the centre-line half box, matched layers).
BOXES: dict[str, dict] = {
    "whole, first-order walls": {"open_walls": "first-order", "mirror": False},
    "half, matched layers": {"open_walls": "pml", "mirror": True},
}
OLD_BOX, DEFAULT_BOX = BOXES


def box_asked(record: dict) -> str:
    """The name in :data:`BOXES` of the box a record's campaign asked for (records from before
    that key: the first box)."""
    return str(record.get("box", OLD_BOX))


def box_name(record: dict) -> str:
    """The box a record was solved in, in the words of :data:`BOXES` ("half" or "whole",
    then the walls). A layout without the mirror symmetry is solved whole even where the half
    box was asked for: this names what ran."""
    box = box_of(record)
    walls = "matched layers" if box["open_walls"] == "pml" else "first-order walls"
    return f"{'half' if box['mirror'] else 'whole'}, {walls}"


def box_of(record: dict) -> dict:
    """The box a campaign record was solved in, as ``Resolution`` fields (``open_walls`` and
    ``mirror``); records from before those keys were solved whole with first-order walls.
    A campaign resumes in the box it started in: ``replace(res, **box_of(first_record))``."""
    return {
        "open_walls": str(record.get("open_walls", "first-order")),
        "mirror": bool(record.get("half_box", False)),
    }


def save_doc(path: Path, doc: dict, key: Callable[[dict], Hashable] | None = None) -> None:
    """Write ``doc`` (its "what", its "runs" and anything else) to ``path`` atomically.

    With ``key`` (what names a run: its case, box and mesh), the file's runs whose key none of
    ``doc``'s runs has are kept, ahead of them: two campaigns writing one file (say two filters
    at once) never drop each other's runs, and a run this campaign replaced stays replaced. The
    read and the write hold an exclusive lock on a hidden file beside ``path``."""
    with open(path.with_name(f".{path.name}.lock"), "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        if key is not None and path.exists():
            mine = {key(r) for r in doc["runs"]}
            others = [r for r in load_runs(path) if key(r) not in mine]
            doc = {**doc, "runs": others + list(doc["runs"])}
        tmp = path.with_suffix(".tmp")
        tmp.write_text(json.dumps(doc, indent=1) + "\n")
        tmp.replace(path)
