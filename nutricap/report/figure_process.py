"""A second process that draws some of the report's figures while this one draws the others.

Drawing a figure (laying out text and ticks, rendering patches) is Python code that holds the
GIL, so a thread cannot share the work: with figure files, the six figures of a raster run
cost 4–6 s of one core, most of it after the density pass has ended and the other core is
idle (benchmarks/README.md). A spawned process (not forked: this process has threads running)
receives a figure pickled (matplotlib figures pickle with their artists), draws it with the
same functions as this process (:func:`draw_files`) and returns the bytes of its three images:
the report's PNG, the print PNG and the SVG.

Anything that keeps the process from working (it cannot start, a figure does not pickle, it
dies) leaves the figure to be drawn here; the files are the same either way (tested).
"""

from __future__ import annotations

import multiprocessing
import pickle
from concurrent.futures import Future, ProcessPoolExecutor
from dataclasses import dataclass

from matplotlib.collections import Collection
from matplotlib.figure import Figure

from nutricap.report.figure_style import (
    RenderOnlyCanvas,
    figure_pixels,
    figure_svg,
    print_png,
    screen_png,
)


@dataclass(frozen=True)
class DrawnFigure:
    """The bytes of a figure's three images."""

    screen_png: bytes  # the report's image (PNG_DPI)
    print_png: bytes  # the figure file (PRINT_DPI)
    svg: bytes


def draw_files(figure: Figure) -> DrawnFigure:
    """``figure`` drawn once at the print resolution (both PNGs from that drawing) and as SVG
    (after :func:`plain_collections`)."""
    plain_collections(figure)
    image = figure_pixels(figure)
    return DrawnFigure(screen_png(image), print_png(image), figure_svg(figure))


def _ready() -> None:
    """The first task of the process: nothing (importing this module is the work)."""


def _draw_pickled(data: bytes) -> DrawnFigure:
    """:func:`draw_files` of a pickled figure (runs in the second process)."""
    figure = pickle.loads(data)
    RenderOnlyCanvas(figure)  # an unpickled figure has matplotlib's base canvas
    return draw_files(figure)


class FigureProcess:
    """One spawned worker process that draws figures (see the module's notes).

    Use as a context manager; :meth:`draw` returns None when the figure cannot be handed
    over, and the caller draws it itself.
    """

    def __init__(self) -> None:
        self._pool: ProcessPoolExecutor | None = None
        self.handed = 0  # figures handed over so far

    def __enter__(self) -> FigureProcess:
        """Start the process now (it imports matplotlib while this one works on)."""
        try:
            context = multiprocessing.get_context("spawn")
            self._pool = ProcessPoolExecutor(max_workers=1, mp_context=context)
            self._pool.submit(_ready)  # the pool starts its process at the first task
        except (OSError, ValueError, RuntimeError):  # no processes on this platform or sandbox
            self._pool = None
        return self

    def __exit__(self, exc_type, *_exc) -> None:
        if self._pool is None:
            return
        if exc_type is not None:  # the run failed: no figures to wait for
            _stop_workers(self._pool)
        self._pool.shutdown(wait=True, cancel_futures=True)

    def draw(self, figure: Figure) -> Future[DrawnFigure] | None:
        """Hand ``figure`` over (pickled now: it must not be changed afterwards)."""
        if self._pool is None:
            return None
        try:
            plain_collections(figure)
            data = pickle.dumps(figure)
            future = self._pool.submit(_draw_pickled, data)
        except Exception:  # noqa: BLE001 - any failure means: draw it here
            self._pool = None
            return None
        self.handed += 1
        return future


def _stop_workers(pool: ProcessPoolExecutor) -> None:
    """Terminate the pool's process at once (it may still be importing matplotlib), so that a
    run that fails does not wait for it; the pool's own method where Python has one (3.14)."""
    terminate = getattr(pool, "terminate_workers", None)
    if terminate is not None:
        terminate()
        return
    for process in list((getattr(pool, "_processes", None) or {}).values()):
        process.terminate()


def plain_collections(figure: Figure) -> None:
    """Give the figure's collections of classes defined inside a function (which do not
    pickle) their nearest importable base class, for good: every figure of a run with figure
    files gets this before it is drawn, here or in the second process, so that the files do
    not depend on where it was drawn (an SVG names each group after its artist's class).

    geopandas draws polygons as a ``PatchCollection`` subclass defined inside its plotting
    function, only so that a legend made from it finds a handler; it draws as its base class.
    """
    for artist in figure.findobj(Collection):
        local = type(artist)
        if "<locals>" in local.__qualname__:
            artist.__class__ = next(c for c in local.__mro__ if "<locals>" not in c.__qualname__)
