"""Keep freed memory for reuse instead of returning it to the system at once.

The circuit engine's arrays of a few hundred kilobytes are allocated and freed thousands of
times a second. With glibc's default settings each free that leaves more than 128 KiB at the
top of the heap gives it back to the kernel, and the next allocation takes the pages again
one page fault at a time: on this project's benchmarks that costs a third to a half of an
evaluation at 1001 frequencies and of a gradient (measured by ``benchmarks/waits.py``, which
prints both settings side by side). :func:`keep_freed_memory` raises glibc's trim threshold,
top pad and mmap threshold (``mallopt``, the same settings as the ``MALLOC_TRIM_THRESHOLD_``,
``MALLOC_TOP_PAD_`` and ``MALLOC_MMAP_THRESHOLD_`` environment variables), so the process
keeps up to :data:`TRIM_THRESHOLD` bytes of freed memory for reuse.

It acts once per process, only where the C library has ``mallopt`` (glibc), and not at all
when the environment says ``REFINE_MALLOC=system``.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import os

#: freed memory kept at the top of the heap before any is returned to the system (bytes)
TRIM_THRESHOLD = 64 * 2**20
#: extra memory asked of the system whenever the heap grows (bytes)
TOP_PAD = 16 * 2**20
#: arrays up to this size come from the heap (and its kept memory), not fresh mappings (bytes)
MMAP_THRESHOLD = 16 * 2**20
#: glibc's mallopt parameter numbers (malloc.h)
_M_TRIM_THRESHOLD = -1
_M_TOP_PAD = -2
_M_MMAP_THRESHOLD = -3

_state = {"done": False, "applied": False}


def keep_freed_memory() -> bool:
    """Raise the C library's trim threshold and top pad once; True when they were set."""
    if _state["done"]:
        return _state["applied"]
    _state["done"] = True
    if os.environ.get("REFINE_MALLOC", "").strip().lower() == "system":
        return False
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or None)
        mallopt = libc.mallopt
    except (OSError, AttributeError):  # not glibc (macOS, Windows, musl without mallopt)
        return False
    mallopt.argtypes = [ctypes.c_int, ctypes.c_int]
    mallopt.restype = ctypes.c_int
    ok = all(
        mallopt(param, value) == 1
        for param, value in (
            (_M_TRIM_THRESHOLD, TRIM_THRESHOLD),
            (_M_TOP_PAD, TOP_PAD),
            (_M_MMAP_THRESHOLD, MMAP_THRESHOLD),
        )
    )
    _state["applied"] = ok
    return ok


def allocator_tuned() -> bool:
    """Whether :func:`keep_freed_memory` changed the allocator in this process."""
    return _state["applied"]
