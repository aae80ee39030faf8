"""Figures drawn from result data: ``draw(data, ax) -> ax`` functions registered by kind.

Rendering knows nothing about models: a :class:`~auditor.results.Figure` carries the numbers, a
drawing function turns them into axes, and :func:`to_svg` produces deterministic vector SVG (fixed
hash salt, no timestamps). The report embeds each figure as a PNG raster at a fixed resolution
(:func:`to_png`, no timestamp or software tag), drawn once and shared by the HTML and the PDF: the PDF
engine places a raster in microseconds, while laying out a vector drawing of hundreds of markers and
glyph outlines took most of the PDF's time.
"""

from __future__ import annotations

import io
import re
import struct
import zlib
from typing import Callable

import matplotlib
import numpy as np

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

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


def _load():
    """Import every drawing module in this package (each registers its kinds with @drawer)."""
    import importlib
    import pkgutil

    for info in sorted(pkgutil.iter_modules(__path__), key=lambda m: m.name):
        importlib.import_module(f"{__name__}.{info.name}")


def _drawn(fig: Figure, buf, dpi: float | None = None, **save):
    """Draw ``fig`` with its registered drawing function and save it into ``buf``, cropped to its
    content plus :data:`PAD_INCHES` (matplotlib's ``savefig`` options in ``save``), closing the
    matplotlib figure whatever happens.

    The crop is measured once, before the drawing, and handed to ``savefig`` as a fixed box: asked for
    a "tight" box, ``savefig`` would lay the whole figure out once more (every tick and label) only to
    measure it, and then draw it, so each figure was laid out two times and drawn once besides. The
    measurement is made at the resolution of the output, so text extents are those of the drawing.
    Returns the box (inches).
    """
    _load()
    fn = _DRAWERS[fig.kind]
    with plt.rc_context(STYLE):
        mfig = plt.figure(figsize=fn.size, dpi=dpi or STYLE["figure.dpi"])
        try:
            fn(plain_labels(fig.data), mfig)
            box = mfig.get_tightbbox(mfig.canvas.get_renderer()).padded(PAD_INCHES)
            mfig.savefig(buf, bbox_inches=box, dpi=mfig.dpi, **save)
            return box
        finally:
            plt.close(mfig)


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


def to_png(fig: Figure, dpi: int = PNG_DPI) -> bytes:
    """Draw a figure and return PNG bytes, byte-identical for equal data with the same libraries.

    Matplotlib renders the cropped figure into a raw RGBA buffer and :func:`encode_png` writes it as
    an opaque RGB PNG with no time and no software tag, so reruns give the same bytes.
    """
    buf = io.BytesIO()
    box = _drawn(fig, buf, dpi=dpi, format="raw")
    width, height = int(box.width * dpi), int(box.height * dpi)
    raw = buf.getvalue()
    if len(raw) != 4 * width * height:
        raise ValueError(f"the raster holds {len(raw)} bytes, not 4 x {width} x {height}")
    return encode_png(np.frombuffer(raw, np.uint8).reshape(height, width, 4)[:, :, :3])


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
