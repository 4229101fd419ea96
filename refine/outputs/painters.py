"""Worker processes for the hand-over's slow, independent files (pictures, artwork).

Kept free of refine's own imports and of anything heavy, so the command line can start the
workers before it imports the rest of refine: their imports (matplotlib's takes half a second)
then overlap the parent's.
"""

from __future__ import annotations

import multiprocessing
import os
import threading
from collections.abc import Callable
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path
from typing import Any


class Painters:
    """Processes that draw the hand-over's pictures while the rest is computed and written.

    Where forking is safe (Linux and similar, one thread, more than one core, and not turned
    off with ``REFINE_PICTURES=inline``) two worker processes start at once and import
    matplotlib, which takes about half a second, while the caller goes on (the command starts
    them before it refines); :meth:`draw` hands them the pictures and :meth:`collect` waits.
    Elsewhere the pictures are drawn in this process when collected. Use as a context manager
    (the workers are shut down on leaving, also on Ctrl-C or an error)."""

    def __init__(self) -> None:
        self._pool: ProcessPoolExecutor | None = None
        self._jobs: list[tuple[Callable[..., Any], tuple]] = []
        self._futures: list[Future] = []
        if (
            "fork" in multiprocessing.get_all_start_methods()
            and (os.cpu_count() or 1) > 1
            and threading.active_count() == 1
            and os.environ.get("REFINE_PICTURES", "").strip().lower() != "inline"
        ):
            self._pool = ProcessPoolExecutor(2, mp_context=multiprocessing.get_context("fork"))
            for _ in range(2):
                self._pool.submit(_warm)

    def __enter__(self) -> Painters:
        return self

    def __exit__(self, *exc: object) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=exc[0] is None, cancel_futures=True)
            self._pool = None

    def draw(self, pictures: list[tuple[Callable[..., Any], tuple]]) -> None:
        """Start the jobs ``pictures``: each ``(function, arguments)`` returning the path (or
        paths) it wrote; the functions and arguments must pickle (module-level functions)."""
        if self._pool is None:
            self._jobs += pictures
        else:
            self._futures += [self._pool.submit(fn, *args) for fn, args in pictures]

    def collect(self) -> list[Path]:
        """The paths every job wrote (a job returns a path or a list of paths), in the order
        the jobs were given, once all are done; a job's error is raised here."""
        done: list[Path | list[Path]] = [fn(*args) for fn, args in self._jobs]
        self._jobs = []
        try:
            done += [fut.result() for fut in self._futures]
        except BrokenProcessPool as e:
            raise RuntimeError(f"a drawing process ended unexpectedly: {e}") from None
        finally:
            self._futures = []
        return [Path(x) for d in done for x in (d if isinstance(d, list) else [d])]


def _warm() -> None:
    """A worker's first task: matplotlib's import (about half a second, the slow part of a
    first picture), while the parent is still refining. (ezdxf's import here as well was
    measured slower: three processes then share two cores during the refinement.)"""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot


__all__ = ["Painters"]
