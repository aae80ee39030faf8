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
from typing import Callable

import matplotlib

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


def _drawn(fig: Figure, buf, **save) -> None:
    """Draw ``fig`` with its registered drawing function and save it into ``buf`` (matplotlib's
    ``savefig`` options in ``save``), closing the matplotlib figure whatever happens."""
    _load()
    fn = _DRAWERS[fig.kind]
    with plt.rc_context(STYLE):
        mfig = plt.figure(figsize=fn.size)
        try:
            fn(plain_labels(fig.data), mfig)
            mfig.savefig(buf, bbox_inches="tight", **save)
        finally:
            plt.close(mfig)


def to_svg(fig: Figure) -> str:
    """Draw a figure and return its SVG markup (no XML prolog), byte-identical for equal data."""
    buf = io.StringIO()
    _drawn(fig, buf, format="svg", metadata={"Date": None, "Creator": None})
    svg = buf.getvalue()
    return svg[svg.find("<svg"):]


PNG_DPI = 150
"""Resolution of the embedded rasters: 1.5 device pixels per CSS pixel on screen, and finer than the
eye resolves on an A4 page printed at the figure's size (5.2 x 3.4 in). A convention of this tool."""


def to_png(fig: Figure, dpi: int = PNG_DPI) -> bytes:
    """Draw a figure and return PNG bytes, byte-identical for equal data with the same libraries.

    The PNG carries no time and no software tag (matplotlib writes no time in PNGs; its
    ``Software`` entry is removed), so reruns give the same bytes.
    """
    buf = io.BytesIO()
    _drawn(fig, buf, format="png", dpi=dpi, metadata={"Software": None})
    return _opaque_png(buf.getvalue())


def _opaque_png(png: bytes) -> bytes:
    """The PNG without its alpha channel (the figure's background is opaque white anyway).

    The PDF engine stores an image with transparency as two images, colour and mask, each decoded
    and compressed again; an RGB image is one. Pillow writes no time or software tag.
    """
    from PIL import Image

    with Image.open(io.BytesIO(png)) as im:
        rgb = im.convert("RGB")
    out = io.BytesIO()
    rgb.save(out, format="PNG")
    return out.getvalue()


def png_size(png: bytes) -> tuple[int, int]:
    """Width and height in pixels, read from the PNG's IHDR chunk (bytes 16 to 24)."""
    return int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")
