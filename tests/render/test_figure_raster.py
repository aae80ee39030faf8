"""The figures' rasters: cropped to what was drawn plus a fixed white margin, measured again only
when content reaches past the canvas, the same bytes whatever was drawn before, and the settled
ticks printing what matplotlib's own locators and formatters print."""

from __future__ import annotations

import io

import numpy as np
import pytest
from PIL import Image

import auditor.figures as figures
from auditor.figures import CANVAS_MARGINS, PAD_INCHES, PNG_DPI, to_png
from auditor.results import Figure


def _rgb(png: bytes) -> np.ndarray:
    with Image.open(io.BytesIO(png)) as im:  # an independent decoder
        return np.asarray(im.convert("RGB"))


def _ink_box(rgb: np.ndarray) -> tuple[int, int, int, int]:
    """Rows and columns (first, last) holding a pixel that is not white."""
    ink = (rgb != 255).any(axis=2)
    rows, cols = np.flatnonzero(ink.any(axis=1)), np.flatnonzero(ink.any(axis=0))
    return rows[0], rows[-1], cols[0], cols[-1]


def _scatter(n: int = 40, shift: float = 0.0, seed: int = 3) -> Figure:
    rng = np.random.default_rng(seed)
    x = rng.normal(50, 10, n) + shift
    return Figure("s", "scatter_xy", "t", {"groups": [{"label": "a", "x": list(x), "y": list(rng.normal(0, 1, n))}],
                                           "xlabel": "baseline", "ylabel": "change", "hline": 0.0})


def _rows(label: str) -> Figure:
    return Figure("r", "interval_rows", "t", {"rows": [{"label": label, "value": 1.0, "lower": 0.2, "upper": 1.8},
                                                       {"label": "short", "value": 0.5, "lower": 0.1, "upper": 0.9}],
                                              "xlabel": "effect", "reference": 0.0})


def test_the_raster_is_cropped_to_the_drawing_plus_the_pad():
    rgb = _rgb(to_png(_scatter()))
    pad = round(PAD_INCHES * PNG_DPI)
    r0, r1, c0, c1 = _ink_box(rgb)
    assert (r0, c0) == (pad, pad)
    assert (rgb.shape[0] - 1 - r1, rgb.shape[1] - 1 - c1) == (pad, pad)


def test_content_past_the_canvas_is_measured_and_drawn_whole(monkeypatch):
    measured = []
    real = figures._measured_raster
    monkeypatch.setattr(figures, "_measured_raster", lambda mfig: measured.append(1) or real(mfig))
    long_label = "a row label long enough to reach past the canvas margin " * 2
    rgb = _rgb(to_png(_rows(long_label)))
    assert measured == [1]  # the pixel crop saw ink at the canvas edge and gave way
    width_in = figures._DRAWERS["interval_rows"].size[0]
    assert rgb.shape[1] > (width_in + CANVAS_MARGINS[0] + CANVAS_MARGINS[2]) * PNG_DPI
    r0, r1, c0, c1 = _ink_box(rgb)
    assert c0 > 0 and r0 > 0 and c1 < rgb.shape[1] - 1 and r1 < rgb.shape[0] - 1  # nothing cut off
    # Control: a label that fits is cropped from the pixels, never measured.
    to_png(_rows("short label"))
    assert measured == [1]


def test_the_shared_canvas_keeps_nothing_from_an_earlier_figure():
    first = to_png(_scatter())
    to_png(_rows("a different figure in between"))
    to_png(_scatter(400, shift=1e5, seed=9))
    assert to_png(_scatter()) == first


@pytest.mark.parametrize("fig", [
    _scatter(60, shift=1e5),  # ticks share an offset, printed beside the axis ("+1e5")
    Figure("l", "relative_scatter", "t", {"groups": [{"label": "a", "x": [0.3, 2.0, 15.0, 140.0], "y": [1, -2, 3, 0]},
                                                     {"label": "b", "x": [0.5, 9.0, 60.0, 300.0], "y": [0, 2, -1, 1]}],
                                          "xlabel": "baseline", "ylabel": "change", "xlog": True, "hlines": [0]}),
    Figure("h", "histograms", "t", {"panels": [{"title": "a", "values": list(np.linspace(-3, 3, 50))},
                                               {"title": "b", "values": list(np.linspace(0, 0.004, 50))}]}),
], ids=["offset", "log-axis", "histograms"])
def test_settled_ticks_print_what_matplotlib_prints(fig, monkeypatch):
    settled = to_png(fig)
    monkeypatch.setattr(figures, "_settle_ticks", lambda axis: None)
    assert to_png(fig) == settled


@pytest.mark.parametrize("low, high", [(0.0, 5.0), (3.0, 4.3)])
def test_a_log_axis_is_labelled_in_plain_numbers(low, high):
    # Mathtext is off for every text (user labels may hold a "$"), so matplotlib's own log labels,
    # "$\mathdefault{10^{1}}$", would print literally. Over several decades the decades are labelled;
    # within one decade the intermediate ticks carry the labels.
    rng = np.random.default_rng(1)
    x = np.exp(rng.uniform(low, high, 200)).tolist()
    fig = Figure("log", "relative_scatter", "log axis", {"groups": [{"label": "A", "x": x, "y": x}],
                                                          "hlines": [0.0], "xlog": True, "xlabel": "Baseline",
                                                          "ylabel": "Change"})
    with figures._drawing(fig) as mfig:
        axis = mfig.axes[0].xaxis
        labels = [t.get_text() for t in axis.get_majorticklabels() + axis.get_minorticklabels()]
    shown = [s for s in labels if s]
    assert len(shown) >= 2
    assert all(s.replace(".", "", 1).isdigit() for s in shown), shown
