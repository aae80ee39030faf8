"""Figures drawn from result data: ``draw(data, ax) -> ax`` functions registered by kind.

Rendering knows nothing about models: a :class:`~auditor.results.Figure` carries the numbers, a
drawing function turns them into axes, and :func:`to_svg` produces deterministic vector SVG (fixed
hash salt, no timestamps). The report embeds each figure as a PNG raster at a fixed resolution
(:func:`to_png`, no timestamp or software tag), drawn once and shared by the HTML and the PDF: the PDF
engine places a raster in microseconds, while laying out a vector drawing of hundreds of markers and
glyph outlines took most of the PDF's time.
"""

from __future__ import annotations

import gc
import io
import re
import struct
import zlib
from contextlib import contextmanager
from typing import Callable

import matplotlib
import numpy as np

matplotlib.use("Agg")
from matplotlib.backends.backend_agg import FigureCanvasAgg, RendererAgg  # noqa: E402
from matplotlib.figure import Figure as MplFigure  # noqa: E402
from matplotlib.ticker import FixedFormatter, FixedLocator, NullLocator  # noqa: E402

from ..errors import BIDI_CONTROL_CHARS  # noqa: E402
from ..results import Figure  # noqa: E402

PALETTE = ("#1b4f72", "#b9770e", "#1e8449", "#6c3483", "#922b21", "#5d6d7e")
_DRAWERS: dict[str, Callable] = {}

STYLE = {
    "svg.hashsalt": "auditor",
    "svg.fonttype": "path",
    "font.family": "DejaVu Sans",
    "font.size": 8.5,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.titlesize": 9,
    "axes.labelsize": 8.5,
    "legend.fontsize": 7.5,
    "legend.frameon": False,
    "figure.dpi": 100,
    # Labels come from the user's files: a `$` must print as a dollar sign, never switch on mathtext
    # or LaTeX. Every Text (titles, axis labels, legends, tick labels) reads these at creation.
    "text.parse_math": False,
    "text.usetex": False,
}

_BIDI = re.compile(f"[{BIDI_CONTROL_CHARS}]")


def plain_labels(value):
    """The figure data with bidirectional controls removed from every string.

    Matplotlib lays text out in the order it is stored and draws a control as a missing glyph, so a
    right-to-left override in a label would only print as a box; removing it keeps the label as
    written. Numbers and the structure of the data are returned unchanged.
    """
    if isinstance(value, str):
        return _BIDI.sub("", value)
    if isinstance(value, dict):
        return {k: plain_labels(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)) and any(isinstance(v, (str, dict, list, tuple)) for v in value):
        return type(value)(plain_labels(v) for v in value)
    return value


def drawer(kind: str, size: tuple[float, float] = (5.2, 3.4)):
    """Register a drawing function for a figure kind (and its size in inches)."""

    def wrap(fn):
        fn.size = size
        _DRAWERS[kind] = fn
        return fn

    return wrap


def kinds() -> list[str]:
    _load()
    return sorted(_DRAWERS)


_LOADED: list[bool] = []


def _load():
    """Import every drawing module in this package (each registers its kinds with @drawer), once
    per process: listing the package's folder again for every figure only costs time."""
    if _LOADED:
        return
    _LOADED.append(True)
    import importlib
    import pkgutil

    for info in sorted(pkgutil.iter_modules(__path__), key=lambda m: m.name):
        importlib.import_module(f"{__name__}.{info.name}")


@contextmanager
def _drawing(fig: Figure, dpi: float | None = None):
    """The matplotlib figure of ``fig``, drawn by its registered drawing function in the house style
    (which stays in force while the caller saves it).

    A bare matplotlib figure on an Agg canvas rather than one made through pyplot: nothing is
    displayed, so pyplot's registry of open figures and its window managers are only overhead, and
    nothing needs closing: the figure is freed with its last reference.
    """
    _load()
    fn = _DRAWERS[fig.kind]
    with matplotlib.rc_context(STYLE):
        mfig = MplFigure(figsize=fn.size, dpi=dpi or STYLE["figure.dpi"])
        FigureCanvasAgg(mfig)
        fn(plain_labels(fig.data), mfig)
        for ax in mfig.axes:
            _settle_ticks(ax.xaxis)
            _settle_ticks(ax.yaxis)
        yield mfig


def _settle_ticks(axis) -> None:
    """Fix an axis's major ticks at the positions and labels its locator and formatter give now.

    Matplotlib asks the locator and the formatter again each time the axis is measured or drawn
    (three to four times per axis in a drawing: the axis, its label's place, its neighbour's), and
    makes a tick object, five artists, for every position the locator returns, including those just
    outside the view that are never drawn. Once the drawing function has set the limits, the same
    positions and labels (and the formatter's offset, e.g. "1e3") are handed over once, only those
    inside the view, so the figure prints the same ticks. An axis whose ticks are already fixed, or
    switched off, is left alone.
    """
    if isinstance(axis.get_major_locator(), (FixedLocator, NullLocator)):
        return
    locs = np.asarray(axis.get_majorticklocs(), dtype=float)
    formatter = axis.get_major_formatter()
    labels = formatter.format_ticks(locs)
    offset = formatter.get_offset()
    scale = axis.get_transform()
    lo, hi = sorted(scale.transform(np.asarray(axis.get_view_interval(), dtype=float)))
    slack = (hi - lo) * 1e-10  # matplotlib's own tolerance for a tick at the view's edge
    with np.errstate(invalid="ignore"):
        at = scale.transform(locs)
        inside = (at >= lo - slack) & (at <= hi + slack)
    fixed = FixedFormatter([label for label, keep in zip(labels, inside) if keep])
    fixed.set_offset_string(offset)
    axis.set_major_locator(FixedLocator(locs[inside]))
    axis.set_major_formatter(fixed)


def _drawn(fig: Figure, buf, dpi: float | None = None, **save):
    """Draw ``fig`` and save it into ``buf`` cropped to its measured content box plus
    :data:`PAD_INCHES` (matplotlib's ``savefig`` options in ``save``). Returns the box (inches)."""
    with _drawing(fig, dpi) as mfig:
        return _save_measured(mfig, buf, **save)


def _save_measured(mfig, buf, **save):
    """Save ``mfig`` into ``buf`` cropped to its content box as matplotlib measures it, plus
    :data:`PAD_INCHES`; returns the box (inches).

    The box is measured once and handed to ``savefig`` as a fixed box: asked for a "tight" box,
    ``savefig`` would lay the whole figure out once more only to measure it. The measurement is made
    at the resolution of the output, so text extents are those of the drawing. This is the vector
    path (SVG), and the raster path's fallback when a figure's content reaches past its canvas.
    """
    box = mfig.get_tightbbox(mfig.canvas.get_renderer()).padded(PAD_INCHES)
    mfig.savefig(buf, bbox_inches=box, dpi=mfig.dpi, **save)
    return box


PAD_INCHES = 0.1
"""White margin around a figure's content (matplotlib's default for a tight box)."""


def to_svg(fig: Figure) -> str:
    """Draw a figure and return its SVG markup (no XML prolog), byte-identical for equal data."""
    buf = io.StringIO()
    _drawn(fig, buf, format="svg", metadata={"Date": None, "Creator": None})
    svg = buf.getvalue()
    return svg[svg.find("<svg"):]


PNG_DPI = 150
"""Resolution of the embedded rasters: 1.5 device pixels per CSS pixel on screen, and finer than the
eye resolves on an A4 page printed at the figure's size (5.2 x 3.4 in). A convention of this tool."""

PNG_COMPRESS_LEVEL = 6
"""zlib level of the embedded PNGs (0 none .. 9 smallest). Measured on the example audit's 46 figures
(docs/benchmarks.md, "figures and imports"): unfiltered rows at level 6 encode in about half the time
of the adaptive-filter encoder used before, and come out smaller (1.5 MB against 1.9 MB), because a
figure is mostly runs of identical pixels that a row filter only breaks up. zlib is deterministic at
a fixed level, so the bytes repeat on reruns with the same libraries."""


CANVAS_MARGINS = (2.0, 0.8, 2.0, 0.6)
"""Inches of canvas beyond a figure's own box (left, bottom, right, top) that a raster is drawn on
before it is cropped to its content: room for what a figure draws outside its box (long row labels
on the left, a legend placed to the right, axis labels below). On the example audit's 46 figures
content reached at most 1.7 in past the box, left or right; a figure that reaches the canvas edge
all the same is measured and drawn again (:func:`_save_measured`)."""


def to_png(fig: Figure, dpi: int = PNG_DPI) -> bytes:
    """Draw a figure and return PNG bytes, byte-identical for equal data with the same libraries.

    The figure is drawn once onto a canvas with :data:`CANVAS_MARGINS` around its box and cropped
    to the pixels that are not background plus :data:`PAD_INCHES` (:func:`_ink_crop`), which
    replaces measuring every artist's extent (tick labels above all) before drawing: measuring cost
    about as much as the drawing itself. Only when content touches the canvas edge is the figure
    measured and drawn again to its measured box. :func:`encode_png` writes the raster as an opaque
    RGB PNG with no time and no software tag, so reruns give the same bytes.
    """
    with _collector_paused(), _drawing(fig, dpi) as mfig:
        rgb = _ink_crop(_canvas_raster(mfig), round(PAD_INCHES * dpi))
        if rgb is None:
            rgb = _measured_raster(mfig)
        return encode_png(rgb)  # before the shared canvas is drawn over by another figure


@contextmanager
def _collector_paused():
    """Python's cycle collector held off while one figure is built and drawn, then restored.

    A figure is thousands of small matplotlib objects linked in cycles (each artist points to its
    figure and axes); building one set the collector off dozens of times, each pass also walking
    whatever the audit keeps alive, and promoted the figure's objects to older generations that are
    scanned again later. Held off, the whole figure is collected in one pass after it is dropped.
    Nothing drawn depends on it. A collector the caller had switched off stays off.
    """
    was_on = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_on:
            gc.enable()


_RENDERERS: dict[tuple[int, int, float], RendererAgg] = {}
"""One Agg renderer per canvas size and resolution, kept for the process: matplotlib caches text
extents per renderer, and the same tick labels, axis labels and legend entries recur from one
figure to the next. The cache holds measurements only (a pure function of text, font and
resolution), and the canvas is cleared before each drawing, so a figure's pixels do not depend
on what was drawn before it."""


def _canvas_raster(mfig) -> np.ndarray:
    """``mfig`` drawn at its own resolution onto its box widened by :data:`CANVAS_MARGINS`, as an
    RGBA view of the shared renderer's buffer (valid until the next drawing).

    The figure is enlarged to the canvas and each axes moved so that it keeps its size and its
    place relative to the others in inches: what the figure drew is unchanged, only the margin
    around it grows.
    """
    left, bottom, right, top = CANVAS_MARGINS
    width, height = mfig.get_size_inches()
    canvas_w, canvas_h = width + left + right, height + bottom + top
    for ax in mfig.axes:
        x0, y0, w, h = ax.get_position().bounds
        ax.set_position([(left + x0 * width) / canvas_w, (bottom + y0 * height) / canvas_h,
                         w * width / canvas_w, h * height / canvas_h])
    mfig.set_size_inches(canvas_w, canvas_h)
    w_px, h_px = (int(v) for v in mfig.bbox.size)
    key = (w_px, h_px, float(mfig.dpi))
    renderer = _RENDERERS.get(key)
    if renderer is None:
        renderer = _RENDERERS[key] = RendererAgg(w_px, h_px, mfig.dpi)
    renderer.clear()
    mfig.draw(renderer)
    return np.asarray(renderer.buffer_rgba())


def _ink_crop(rgba: np.ndarray, pad: int) -> np.ndarray | None:
    """The RGB pixels of the smallest box holding every pixel whose colour differs from the canvas
    corner's (the background; opacity is not compared, so a cleared pixel and the figure's white
    face are both background), widened by ``pad`` pixels on each side; None when that box would
    reach past the canvas (content cut off at its edge) or nothing is drawn."""
    height, width, _ = rgba.shape
    opaque = np.uint32(0xFF000000)  # the alpha byte of a little-endian RGBA word
    pixels = rgba.view("<u4").reshape(height, width) | opaque
    ink = pixels != pixels[0, 0]
    rows = np.flatnonzero(ink.any(axis=1))
    if rows.size == 0:
        return None
    cols = np.flatnonzero(ink[rows[0]:rows[-1] + 1].any(axis=0))
    r0, r1, c0, c1 = rows[0] - pad, rows[-1] + 1 + pad, cols[0] - pad, cols[-1] + 1 + pad
    if r0 < 0 or c0 < 0 or r1 > height or c1 > width:
        return None
    return rgba[r0:r1, c0:c1, :3]


def _measured_raster(mfig) -> np.ndarray:
    """``mfig`` as RGB, cropped to its content box as matplotlib measures it (:func:`_save_measured`)."""
    buf = io.BytesIO()
    box = _save_measured(mfig, buf, format="raw")
    width, height = int(box.width * mfig.dpi), int(box.height * mfig.dpi)
    raw = buf.getvalue()
    if len(raw) != 4 * width * height:
        raise ValueError(f"the raster holds {len(raw)} bytes, not 4 x {width} x {height}")
    return np.frombuffer(raw, np.uint8).reshape(height, width, 4)[:, :, :3]


def encode_png(rgb: np.ndarray, level: int = PNG_COMPRESS_LEVEL) -> bytes:
    """An 8-bit RGB PNG of an (height, width, 3) array: signature, IHDR, one IDAT, IEND (PNG
    specification, sections 5 and 11), each row with filter type 0 (none), deflated at zlib ``level``.

    Opaque RGB because the figure's background is opaque white anyway, and the PDF engine stores an
    image with transparency as two images (colour and mask), each decoded and compressed again. No
    text, time or physical-size chunk is written.
    """
    height, width, _ = rgb.shape
    rows = np.zeros((height, 1 + 3 * width), np.uint8)
    rows[:, 1:] = rgb.reshape(height, 3 * width)
    header = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    return b"".join([b"\x89PNG\r\n\x1a\n", _png_chunk(b"IHDR", header),
                     _png_chunk(b"IDAT", zlib.compress(rows.tobytes(), level)), _png_chunk(b"IEND", b"")])


def _png_chunk(kind: bytes, data: bytes) -> bytes:
    """One PNG chunk: length, type, data and the CRC-32 of type and data."""
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))


def png_size(png: bytes) -> tuple[int, int]:
    """Width and height in pixels, read from the PNG's IHDR chunk (bytes 16 to 24)."""
    return int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")
