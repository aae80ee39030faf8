"""Drawing functions for the regression-to-the-mean figures.

Values arrive on the analysis scale (log values when ``data["log"]`` is true); axes are then
labelled on the original scale at round values, so points and lines stay in the units the data
were modelled in while the reader sees the units the outcome is measured in.
"""

from __future__ import annotations

import numpy as np
from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator
from scipy import stats

from . import PALETTE, drawer
from .panels import dots

_CUTOFF_COLOUR = "#922b21"
_GREY = "#555555"


def _round_ticks(lo: float, hi: float) -> list[float]:
    """Original-scale values 1, 2, 5 x 10^k whose logs fall inside [lo, hi] (log-scale axes)."""
    a, b = np.exp(lo), np.exp(hi)
    out = [m * 10.0 ** k for k in range(int(np.floor(np.log10(a))) - 1, int(np.ceil(np.log10(b))) + 1)
           for m in (1, 2, 5)]
    ticks = [t for t in out if a <= t <= b]
    if len(ticks) < 3:
        ticks = sorted(set(ticks) | {float(f"{v:.2g}") for v in np.exp(np.linspace(lo, hi, 4))})
    return [float(np.log(t)) for t in ticks if a <= t <= b]


def _original_axis(axis, lo: float, hi: float) -> None:
    """Label a log-valued axis on the original scale."""
    axis.set_major_locator(FixedLocator(_round_ticks(lo, hi)))
    axis.set_minor_locator(NullLocator())
    axis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{np.exp(v):.3g}"))


def _limits(values, pad_share: float = 0.05) -> tuple[float, float]:
    v = np.asarray([x for x in values if x is not None and np.isfinite(x)], dtype=float)
    lo, hi = float(v.min()), float(v.max())
    pad = pad_share * (hi - lo or 1.0)
    return lo - pad, hi + pad


def _label_axes(ax, data, lims_x, lims_y) -> None:
    ax.set_xlabel(data["xlabel"])
    ax.set_ylabel(data["ylabel"])
    if data.get("log"):
        _original_axis(ax.xaxis, *lims_x)
        _original_axis(ax.yaxis, *lims_y)


@drawer("rtm_pairs", size=(4.6, 4.0))
def rtm_pairs(data, fig):
    """Two pre-treatment readings of the same participants, the identity line, the cutoff on the
    reading that decided entry (vertical when it is on x, horizontal when on y) and the regression
    line of the other reading on it, whose slope is the selection-corrected reliability."""
    ax = fig.add_subplot(1, 1, 1)
    x, y = np.asarray(data["x"], float), np.asarray(data["y"], float)
    lo, hi = _limits(np.concatenate([x, y, [data["cutoff"]]]))
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    ax.plot([lo, hi], [lo, hi], ls="--", lw=0.9, color=_GREY, label="identity")
    line = data.get("line")
    if line:
        ax.plot(line["x"], line["y"], lw=1.4, color=PALETTE[2], label=line["label"])
    if data["cutoff_axis"] == "x":
        ax.axvline(data["cutoff"], ls=":", lw=1.2, color=_CUTOFF_COLOUR, label="entry cutoff")
        if data.get("upper") is not None:
            ax.axvline(data["upper"], ls=":", lw=1.2, color=_CUTOFF_COLOUR)
    else:
        ax.axhline(data["cutoff"], ls=":", lw=1.2, color=_CUTOFF_COLOUR, label="entry cutoff")
        if data.get("upper") is not None:
            ax.axhline(data["upper"], ls=":", lw=1.2, color=_CUTOFF_COLOUR)
    dots(ax, x, y, PALETTE[0])
    _label_axes(ax, data, (lo, hi), (lo, hi))
    ax.legend(loc="upper left")
    return ax


@drawer("rtm_truncation", size=(4.6, 3.0))
def rtm_truncation(data, fig):
    """Histogram of the reading that decided entry, the cutoff, the fitted truncated normal over
    the selected range (solid) and the whole unselected population it implies (dashed), both
    scaled to the number of selected participants."""
    ax = fig.add_subplot(1, 1, 1)
    v = np.asarray(data["values"], float)
    mu, sigma, cut = data["mu"], data["sigma"], data["cutoff"]
    above = data["direction"] == "above"
    lo = min(v.min(), mu - 3 * sigma)
    hi = max(v.max(), mu + 3 * sigma)
    bins = min(40, max(10, int(np.sqrt(len(v)) * 1.5)))
    counts, edges, _ = ax.hist(v, bins=bins, color=PALETTE[0], alpha=0.75, label="selected participants")
    width = edges[1] - edges[0]
    kept = stats.norm.sf(cut, mu, sigma) if above else stats.norm.cdf(cut, mu, sigma)
    top = data.get("upper")
    if top is not None:  # a two-sided entry window [cutoff, upper]
        kept = stats.norm.cdf(top, mu, sigma) - stats.norm.cdf(cut, mu, sigma)
        ax.axvline(top, ls=":", lw=1.2, color=_CUTOFF_COLOUR)
    grid = np.linspace(lo, hi, 300)
    population = len(v) * width * stats.norm.pdf(grid, mu, sigma) / kept
    ax.plot(grid, population, ls="--", lw=1.1, color=_GREY, label="unselected population (fitted)")
    side = (grid >= cut) & (grid <= top) if top is not None else (grid >= cut if above else grid <= cut)
    ax.plot(grid[side], population[side], lw=1.6, color=PALETTE[1], label="fitted truncated normal")
    ax.axvline(cut, ls=":", lw=1.2, color=_CUTOFF_COLOUR, label="entry cutoff")
    ax.axvline(mu, lw=0.8, color=PALETTE[2], label="population mean")
    ax.set_xlim(lo, hi)
    ax.set_yticks([])
    ax.set_xlabel(data["xlabel"])
    ax.set_ylabel("participants")
    if data.get("log"):
        _original_axis(ax.xaxis, lo, hi)
    ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0))
    return ax


@drawer("rtm_shrinkage", size=(4.6, 4.0))
def rtm_shrinkage(data, fig):
    """Each participant's observed entry reading against its shrunk value (the best estimate of the
    true level), with the identity line, the population mean the values are pulled toward, the
    cutoff, and the selected group's mean before and after shrinkage joined by an arrow: the
    vertical gap between the two is the expected regression to the mean."""
    ax = fig.add_subplot(1, 1, 1)
    x, y = np.asarray(data["observed"], float), np.asarray(data["shrunk"], float)
    lo, hi = _limits(np.concatenate([x, y, [data["cutoff"], data["mu"]]]))
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    ax.plot([lo, hi], [lo, hi], ls="--", lw=0.9, color=_GREY, label="identity (no shrinkage)")
    ax.axhline(data["mu"], lw=0.8, color=PALETTE[2], label="population mean")
    ax.axvline(data["cutoff"], ls=":", lw=1.2, color=_CUTOFF_COLOUR, label="entry cutoff")
    if data.get("upper") is not None:
        ax.axvline(data["upper"], ls=":", lw=1.2, color=_CUTOFF_COLOUR)
    dots(ax, x, y, PALETTE[0])
    mx, my = float(np.mean(x)), float(np.mean(y))
    ax.annotate("", xy=(mx, my), xytext=(mx, mx),
                arrowprops={"arrowstyle": "-|>", "color": PALETTE[4], "lw": 1.8, "shrinkA": 0, "shrinkB": 0})
    ax.plot([mx], [mx], "o", color=PALETTE[4], ms=6, label="group mean, observed")
    ax.plot([mx], [my], "s", color=PALETTE[4], ms=6, label="group mean, shrunk")
    _label_axes(ax, data, (lo, hi), (lo, hi))
    ax.legend(loc="upper left")
    return ax
