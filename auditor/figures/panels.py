"""Drawing functions, one per figure kind. Each takes the figure's data dict and a matplotlib figure."""

from __future__ import annotations

import numpy as np
from matplotlib.patches import PathPatch
from matplotlib.path import Path

from . import PALETTE, drawer

_DIAMOND = np.linspace(0, 2 * np.pi, 5)[:-1]


MAX_DISCRETE_LEVELS = 12
"""An axis whose values take at most this many distinct values is drawn jittered (a convention)."""
JITTER_SEED = 20261201
"""Fixed, so that the same data draw the same figure byte for byte."""
_JITTER_NOTE = "points jittered: discrete values"


def _level_gap(v: np.ndarray) -> float | None:
    """The smallest step between distinct values when there are 2..MAX_DISCRETE_LEVELS of them."""
    levels = np.unique(v)
    if not 2 <= len(levels) <= MAX_DISCRETE_LEVELS:
        return None
    return float(np.min(np.diff(levels)))


def _jittered(v: np.ndarray, lo: float, hi: float, rng) -> tuple[np.ndarray, bool]:
    """``v`` spread by up to 0.3 of its level step when it is discrete, kept inside (lo, hi).

    Hundreds of participants on a 0-4 scale otherwise print as a handful of dots; the spread
    stays well inside half a step, so each point still reads as its level.
    """
    gap = _level_gap(v)
    if gap is None:
        return v, False
    return np.clip(v + rng.uniform(-0.3, 0.3, len(v)) * gap, lo, hi), True


def dots(ax, x, y, color, label=None, radius_pt: float = 2.0, alpha: float = 0.55):
    """Scatter points drawn as one compound path of small diamonds.

    One SVG path with many sub-paths renders several times faster in the PDF engine than one
    element per point, and stays vector. An axis with few distinct values is jittered (seeded) and
    the panel says so. Call after the axis limits are final.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    fig = ax.figure
    w_in, h_in = ax.get_position().width * fig.get_figwidth(), ax.get_position().height * fig.get_figheight()
    (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
    rx = radius_pt / 72 / w_in * (x1 - x0)
    ry = radius_pt / 72 / h_in * (y1 - y0)
    n = len(x)
    if n == 0:
        return
    rng = np.random.default_rng(JITTER_SEED)
    x, jx = _jittered(x, min(x0, x1) + rx, max(x0, x1) - rx, rng)
    y, jy = _jittered(y, min(y0, y1) + ry, max(y0, y1) - ry, rng)
    if (jx or jy) and not any(t.get_text() == _JITTER_NOTE for t in ax.texts):
        ax.text(0.99, 0.01, _JITTER_NOTE, transform=ax.transAxes, ha="right", va="bottom",
                fontsize=6.5, color="#555555")
    verts = np.empty((n, 5, 2))
    verts[:, :4, 0] = x[:, None] + rx * np.cos(_DIAMOND)
    verts[:, :4, 1] = y[:, None] + ry * np.sin(_DIAMOND)
    verts[:, 4] = verts[:, 0]
    codes = np.tile([Path.MOVETO] + [Path.LINETO] * 3 + [Path.CLOSEPOLY], n)
    _add_fixed_patch(ax, PathPatch(Path(verts.reshape(-1, 2), codes), facecolor=color, edgecolor="none",
                                   alpha=alpha, label=label))


def _add_fixed_patch(ax, patch) -> None:
    """Add a patch in data coordinates without updating the data limits.

    ``Axes.add_patch`` walks every Bezier segment of the path to widen the limits, which for a
    compound path of thousands of diamonds cost more than drawing it; the limits are already final
    here, so the patch is attached as an artist clipped to the axes, which draws the same.
    """
    patch.set_transform(ax.transData)
    patch.set_clip_path(ax.patch)
    ax.add_artist(patch)


def _limits(values):
    """Axis limits with a margin: 4% of the range, or 0.4 of the level step for discrete values so
    that jittered points at the extreme levels stay inside."""
    v = np.asarray([x for x in values if x is not None], dtype=float)
    v = v[np.isfinite(v)]
    lo, hi = float(np.min(v)), float(np.max(v))
    gap = _level_gap(v)
    pad = max(0.04 * (hi - lo or 1.0), 0.4 * gap if gap else 0.0)
    return lo - pad, hi + pad


@drawer("scatter_identity")
def scatter_identity(data, fig):
    """Follow-up against baseline by group, with the identity line and an optional smooth."""
    ax = fig.add_subplot(1, 1, 1)
    allx = [x for g in data["groups"] for x in g["x"]]
    ally = [y for g in data["groups"] for y in g["y"]]
    lo, hi = _limits(allx + ally)
    n_groups = len(data["groups"])
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    for i, g in enumerate(data["groups"]):
        dots(ax, g["x"], g["y"], PALETTE[i % len(PALETTE)], label=g["label"] if n_groups > 1 else None)
    ax.plot([lo, hi], [lo, hi], ls="--", lw=0.9, color="#555555", label="identity")
    for j, curve in enumerate(data.get("curves", [])):
        ax.plot(curve["x"], curve["y"], lw=1.4, color=PALETTE[(j + 3) % len(PALETTE)], label=curve["label"])
    smooth = data.get("smooth") or {}
    if smooth.get("x"):
        ax.plot(smooth["x"], smooth["y"], lw=1.6, color="#222222", label="smooth")
    ax.set_ylim(lo, hi)
    ax.set_xlabel(data["xlabel"])
    ax.set_ylabel(data["ylabel"])
    ax.legend(loc="upper left")
    return ax


@drawer("scatter_xy")
def scatter_xy(data, fig):
    """A plain scatter by group with optional horizontal reference line and curves."""
    ax = fig.add_subplot(1, 1, 1)
    n_groups = len(data["groups"])
    ax.set_xlim(*_limits([x for g in data["groups"] for x in g["x"]]))
    ax.set_ylim(*_limits([y for g in data["groups"] for y in g["y"]] +
                         ([data["hline"]] if data.get("hline") is not None else [])))
    for i, g in enumerate(data["groups"]):
        dots(ax, g["x"], g["y"], PALETTE[i % len(PALETTE)], label=g["label"] if n_groups > 1 else None)
    if data.get("hline") is not None:
        ax.axhline(data["hline"], ls="--", lw=0.9, color="#555555")
    for j, curve in enumerate(data.get("curves", [])):
        ax.plot(curve["x"], curve["y"], lw=1.4, color=PALETTE[(j + 3) % len(PALETTE)], label=curve["label"])
    ax.set_xlabel(data["xlabel"])
    ax.set_ylabel(data["ylabel"])
    if n_groups > 1 or data.get("curves"):
        ax.legend(loc="best")
    return ax


HISTOGRAM_GAP = 0.15
"""Gap between histogram panels, as a share of a panel's width: room for the tick labels at two
facing panel edges (the panels have no y axis labels). A convention of this tool."""


@drawer("histograms", size=(6.4, 2.4))
def histograms(data, fig):
    """Side-by-side histograms (one panel each) with optional vertical markers (bounds, cut-offs).

    The panels are placed at fixed positions (outer margins do not matter: the figure is cropped to
    its content) and each histogram is one filled outline rather than a rectangle per bin, which
    prints the same bars without one artist per bin to lay out and draw.
    """
    panels = data["panels"]
    fig.subplots_adjust(left=0.02, right=0.98, bottom=0.15, top=0.87, wspace=HISTOGRAM_GAP)
    for i, p in enumerate(panels):
        ax = fig.add_subplot(1, len(panels), i + 1)
        vals = np.asarray(p["values"], dtype=float)
        bins = p.get("bins") or min(40, max(8, int(np.sqrt(len(vals)))))
        ax.hist(vals, bins=bins, histtype="stepfilled", color=PALETTE[i % len(PALETTE)], alpha=0.8, linewidth=0)
        for m in p.get("markers", []):
            ax.axvline(m["x"], ls=":", lw=1.0, color="#922b21")
        ax.set_title(p["title"])
        ax.set_xlabel(p.get("xlabel", ""))
        ax.set_yticks([])
    return fig


@drawer("curve_band")
def curve_band(data, fig):
    """Curves with CI bands and an optional rug of observed x values."""
    ax = fig.add_subplot(1, 1, 1)
    for i, c in enumerate(data["curves"]):
        color = PALETTE[i % len(PALETTE)]
        ax.plot(c["x"], c["y"], lw=1.5, color=color, label=c.get("label"))
        if c.get("lower") and c.get("upper"):
            ax.fill_between(c["x"], c["lower"], c["upper"], color=color, alpha=0.18, linewidth=0)
    if data.get("rug"):
        ymin = ax.get_ylim()[0]
        ax.plot(data["rug"], np.full(len(data["rug"]), ymin), "|", color="#333333", ms=6, alpha=0.4)
    for m in data.get("vlines", []):
        ax.axvline(m["x"], ls=":", lw=1.0, color="#922b21")
    ax.set_xlabel(data["xlabel"])
    ax.set_ylabel(data["ylabel"])
    if any(c.get("label") for c in data["curves"]):
        ax.legend(loc="best")
    return ax


@drawer("interval_rows", size=(5.6, 2.6))
def interval_rows(data, fig):
    """Estimates with CIs as horizontal intervals, one row each, with an optional reference line."""
    ax = fig.add_subplot(1, 1, 1)
    rows = data["rows"]
    ys = np.arange(len(rows))[::-1]
    for y, r in zip(ys, rows):
        ax.plot([r["lower"], r["upper"]], [y, y], color=PALETTE[0], lw=1.8)
        ax.plot([r["value"]], [y], "o", color=PALETTE[0], ms=4)
    if data.get("reference") is not None:
        ax.axvline(data["reference"], ls="--", lw=0.9, color="#555555")
    ax.set_yticks(ys)
    ax.set_yticklabels([r["label"] for r in rows])
    ax.set_xlabel(data.get("xlabel", ""))
    return ax
