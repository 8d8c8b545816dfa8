"""What every figure of the report shares: palette, resolution, rendering, labels, ticks.

Figures are built without pyplot (no global state) on an Agg canvas (:func:`new_figure`) and
rendered to PNG or SVG bytes (:func:`figure_png`, :func:`figure_svg`), trimmed to what they
draw. Colours are the Okabe & Ito (2008) colour-blind-safe set and the ``cividis`` colour map
(Nuñez, Anderton & Renslow 2018); every series also differs by marker or line style, so no
figure relies on colour alone.

References
----------
Okabe, M. & Ito, K. 2008. Color Universal Design (CUD): how to make figures and
    presentations that are friendly to colorblind people. Online guide (citation and hex
    codes from memory).
Nuñez, J.R., Anderton, C.R. & Renslow, R.S. 2018. Optimizing colormaps with consideration
    for color vision deficiency. PLoS ONE 13(7):e0199239 (citation from memory; the colour
    map itself is matplotlib's ``cividis``).
"""

from __future__ import annotations

import io
import weakref
from collections.abc import Sequence

import numpy as np
import pandas as pd
from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import Formatter, FuncFormatter
from matplotlib.transforms import Bbox
from PIL import Image

from nutricap.errors import printable

#: Okabe & Ito (2008) colour-blind-safe palette (hex codes from memory).
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}

#: Colours of the scenarios of a compare run, in order, on every figure.
SCENARIO_COLOURS = ("vermillion", "blue", "orange", "reddish_purple", "bluish_green", "sky_blue")

#: Colour map of every map shaded by a value (perceptually uniform, colour-vision-deficiency
#: safe).
DENSITY_CMAP = "cividis"

#: Resolution of the PNG files in the output's figures/ folder [dots per inch] (print).
PRINT_DPI = 300
#: Pixels of the print PNG averaged (a side) into one pixel of the report's PNG.
SCREEN_REDUCTION = 3
#: Resolution of the PNGs embedded in the report [dots per inch].
PNG_DPI = PRINT_DPI // SCREEN_REDUCTION
#: zlib level of the print PNGs: about 40 % less time than the default 6 for files 5–65 %
#: larger (measured on a raster run's six figures; level 6 for the report's small images).
PRINT_PNG_LEVEL = 1
#: Alpha of an opaque pixel (8-bit).
OPAQUE = 255
#: Margin left around what a figure draws when it is rendered [inches].
PAD_IN = 0.06


def thousands(value: float, _position: int | None = None) -> str:
    """A tick label with thousands separators and no decimals (module-level, so that a
    figure using it pickles, see :mod:`nutricap.report.figure_process`)."""
    return f"{value:,.0f}"


def kilometres(value_m: float, _position: int | None = None) -> str:
    """A tick label of metres in whole kilometres, with thousands separators."""
    return f"{value_m / 1000:,.0f}"


THOUSANDS = FuncFormatter(thousands)


def new_figure(width_in: float, height_in: float) -> Figure:
    """A figure of ``width_in`` × ``height_in`` [inches], constrained layout, Agg canvas that
    draws only when rendered (:class:`RenderOnlyCanvas`)."""
    figure = Figure(figsize=(width_in, height_in), layout="constrained")
    RenderOnlyCanvas(figure)
    return figure


class RenderOnlyCanvas(FigureCanvasAgg):
    """The Agg canvas without ``draw_idle``: there is no screen to refresh. geopandas' ``plot``
    calls ``draw_idle`` after each layer, which on Agg is a whole drawing of the figure
    (about 0.2 s for a map of 200 units, measured); the figures here are drawn only when they
    are rendered to PNG or SVG."""

    def draw_idle(self, *args, **kwargs) -> None:
        return None


def figure_png(figure: Figure, *, dpi: int = PNG_DPI) -> bytes:
    """Render ``figure`` to PNG bytes with the Agg canvas, trimmed to what it draws.

    Parameters
    ----------
    figure : matplotlib.figure.Figure
    dpi : int, default :data:`PNG_DPI`
        Resolution [dots per inch], written into the file's pHYs chunk.

    Returns
    -------
    bytes
        The PNG file's bytes.
    """
    buffer = io.BytesIO()
    box = laid_out(figure)
    figure.savefig(buffer, format="png", dpi=dpi, bbox_inches=box, metadata={"Software": None})
    return buffer.getvalue()


def figure_pixels(figure: Figure, dpi: int = PRINT_DPI) -> Image.Image:
    """``figure`` drawn at ``dpi`` [dots per inch] with the Agg canvas, trimmed as
    :func:`figure_png`, as an image (not encoded: see :func:`print_png`, :func:`screen_png`):
    RGB when every pixel is opaque (the figures have a white background; a quarter fewer bytes
    to filter and compress, the same picture), else RGBA.
    """
    sink = _PixelSink()
    figure.savefig(sink, format="raw", dpi=dpi, bbox_inches=laid_out(figure))
    pixels = sink.pixels
    if pixels is None or pixels.ndim != 3 or pixels.shape[2] != 4:
        raise RuntimeError("matplotlib's raw output is not a (rows, columns, 4) RGBA buffer")
    image = Image.fromarray(pixels, "RGBA")
    if pixels.size and pixels[..., 3].min() == OPAQUE:
        return image.convert("RGB")
    return image


class _PixelSink:
    """File-like target of matplotlib's ``raw`` format, which writes the canvas's RGBA buffer
    (a (rows, columns, 4) memoryview) in one call: keeps a copy of it as an array."""

    pixels: np.ndarray | None = None

    def write(self, data) -> int:
        self.pixels = np.array(data, dtype=np.uint8)  # a copy: the canvas's buffer is freed
        return self.pixels.nbytes

    def seek(self, *_args) -> int:  # matplotlib takes an object with seek for a file handle
        return 0


def print_png(image: Image.Image) -> bytes:
    """The figure file's PNG of an image drawn at :data:`PRINT_DPI` (:func:`figure_pixels`),
    compressed at zlib level :data:`PRINT_PNG_LEVEL`."""
    return _png_bytes(image, PRINT_DPI, PRINT_PNG_LEVEL)


def screen_png(image: Image.Image) -> bytes:
    """The report's PNG (:data:`PNG_DPI`) of an image drawn at :data:`PRINT_DPI`: every
    :data:`SCREEN_REDUCTION` × :data:`SCREEN_REDUCTION` pixels averaged into one
    (``PIL.Image.reduce``), about a tenth of the cost of drawing the figure again."""
    return _png_bytes(image.reduce(SCREEN_REDUCTION), PNG_DPI)


def _png_bytes(image: Image.Image, dpi: int, level: int = 6) -> bytes:
    """``image`` as PNG bytes with its resolution [dots per inch] in the pHYs chunk (Pillow's
    encoder releases the GIL, so this may run beside the drawing of the next figure)."""
    buffer = io.BytesIO()
    image.save(buffer, format="png", dpi=(dpi, dpi), compress_level=level)
    return buffer.getvalue()


def figure_svg(figure: Figure) -> bytes:
    """Render ``figure`` to SVG bytes, trimmed as :func:`figure_png`; text stays text (a report
    author can edit it); no date and fixed ids (``svg.hashsalt``), so that a rerun writes the
    same file."""
    buffer = io.BytesIO()
    with rc_context({"svg.fonttype": "none", "svg.hashsalt": "nutricap"}):
        figure.savefig(buffer, format="svg", bbox_inches=laid_out(figure), metadata={"Date": None})
    return buffer.getvalue()


def laid_out(figure: Figure) -> Bbox:
    """Lay ``figure`` out once and return what it draws [inches] plus :data:`PAD_IN`.

    The constrained layout is solved on the first call and then kept (the layout engine is
    set aside), so that each later rendering (embedded PNG, PNG file, SVG file) draws the
    figure once, without solving the layout or measuring the tight box again.
    """
    box = _BOXES.get(figure)
    if box is None:
        figure.draw_without_rendering()
        box = figure.get_tightbbox(figure.canvas.get_renderer()).padded(PAD_IN)
        figure.set_layout_engine("none")
        _BOXES[figure] = box
    return box


_BOXES: weakref.WeakKeyDictionary[Figure, Bbox] = weakref.WeakKeyDictionary()


def scenario_colour(index: int) -> str:
    """The colour of the ``index``-th scenario (:data:`SCENARIO_COLOURS`)."""
    return OKABE_ITO[SCENARIO_COLOURS[index % len(SCENARIO_COLOURS)]]


def label(text: object) -> str:
    """An id as chart text: unprintable characters escaped, ``$`` not read as mathtext."""
    return printable(text).replace("$", r"\$")


def signed_animals(value: float, _position: int | None = None) -> str:
    """A change in animals with its sign and thousands separators: '+1,200', '-35', '0'."""
    return "0" if round(value) == 0 else f"{value:+,.0f}"


class DistinctTicks(Formatter):
    """Tick labels with thousands separators and the fewest decimals (0 to ``max_decimals``)
    that write the ticks drawn apart and as they are (0.25 as '0.25', not '0.2'); chosen when
    the ticks are drawn, so that a later change of the axis's size or limits is followed.

    ``signed``: changes, written with their sign ('+12', '-3.5'; zero as '0').
    """

    def __init__(self, max_decimals: int = 4, *, signed: bool = False) -> None:
        self.max_decimals = max_decimals
        self.signed = signed
        self.digits = 0

    def choose(self, ticks) -> int:
        """The decimals for ``ticks`` (kept for later single labels); returned."""
        ticks = np.asarray(ticks, dtype=float)
        scale = max(float(np.abs(ticks).max()), 1.0) if ticks.size else 1.0
        for digits in range(self.max_decimals + 1):
            labels = {self.text(tick, digits) for tick in ticks}
            exact = np.all(np.abs(np.round(ticks, digits) - ticks) <= 1e-9 * scale)
            if exact and len(labels) == ticks.size:
                break
        self.digits = digits
        return digits

    def text(self, value: float, digits: int) -> str:
        if self.signed and round(value, digits) == 0:
            return "0"
        return f"{value:{'+' if self.signed else ''},.{digits}f}"

    def format_ticks(self, values) -> list[str]:
        digits = self.choose(values)
        return [self.text(value, digits) for value in values]

    def __call__(self, value: float, position: int | None = None) -> str:
        return self.text(value, self.digits)


def distinct_tick_labels(axis, max_decimals: int = 4, *, signed: bool = False) -> int:
    """Give ``axis`` a :class:`DistinctTicks` formatter; return the decimals its present
    ticks get."""
    formatter = DistinctTicks(max_decimals, signed=signed)
    axis.set_major_formatter(formatter)
    return formatter.choose(axis.get_majorticklocs())


def require_columns(table: pd.DataFrame, columns: Sequence[str], what: str) -> None:
    """Raise ValueError naming the ``columns`` that ``table`` (called ``what``) lacks."""
    missing = [column for column in columns if column not in table.columns]
    if missing:
        raise ValueError(
            f"{what} lacks column(s) {', '.join(missing)}; "
            f"found {', '.join(map(str, table.columns))}"
        )
