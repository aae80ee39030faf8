"""Drawing functions for relative-change figures."""

from __future__ import annotations

from matplotlib import ticker

from . import PALETTE, drawer


def plain_log_labels(axis) -> None:
    """Label a logarithmic axis in plain numbers (10, 20, 50, 100). Matplotlib's own log labels are
    mathtext (``$\\mathdefault{10^{1}}$``), which would print literally because mathtext is off for
    every text in these figures (user labels may hold a ``$``)."""
    axis.set_major_formatter(ticker.LogFormatter(10))
    axis.set_minor_formatter(ticker.LogFormatter(10, labelOnlyBase=False))


@drawer("relative_scatter")
def relative_scatter(data, fig):
    """A change variable against baseline by group, with horizontal reference lines (no change, a
    bound), labelled vertical markers (a threshold) and an optional logarithmic baseline axis, so
    that small baselines, where relative changes blow up, are spread out rather than crowded."""
    ax = fig.add_subplot(1, 1, 1)
    groups = data["groups"]
    for i, g in enumerate(groups):
        ax.scatter(g["x"], g["y"], s=9, alpha=0.55, color=PALETTE[i % len(PALETTE)], linewidths=0,
                   label=g["label"] if len(groups) > 1 else None)
    for y in data.get("hlines", []):
        ax.axhline(y, ls="--", lw=0.9, color="#555555")
    for m in data.get("vlines", []):
        ax.axvline(m["x"], ls=":", lw=1.0, color="#922b21", label=m.get("label"))
    if data.get("xlog"):
        ax.set_xscale("log")
        plain_log_labels(ax.xaxis)
    ax.set_xlabel(data["xlabel"])
    ax.set_ylabel(data["ylabel"])
    if len(groups) > 1 or any(m.get("label") for m in data.get("vlines", [])):
        ax.legend(loc="best")
    return ax
