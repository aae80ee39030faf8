"""Drawing functions for modelled risk curves."""

from __future__ import annotations

import numpy as np

from . import PALETTE, drawer


def _floats(values) -> np.ndarray:
    """A list that may hold None (a gap in the curve) as a float array with NaN for the gaps."""
    return np.asarray([np.nan if v is None else v for v in values], dtype=float)


@drawer("risk_compare")
def risk_compare(data, fig):
    """Several risk curves on one axis, each solid or dashed, with optional bands and a rug.

    Each curve: ``x``, ``y`` (None for a gap), optional ``lower``/``upper``, ``label``, ``style``
    (``solid`` or ``dashed``), and either ``color`` or ``palette`` (an index into the palette).
    """
    ax = fig.add_subplot(1, 1, 1)
    for i, c in enumerate(data["curves"]):
        color = c.get("color") or PALETTE[c.get("palette", i) % len(PALETTE)]
        x, y = _floats(c["x"]), _floats(c["y"])
        ax.plot(x, y, lw=1.5, color=color, ls="--" if c.get("style") == "dashed" else "-", label=c.get("label"))
        if c.get("lower") and c.get("upper"):
            ax.fill_between(x, _floats(c["lower"]), _floats(c["upper"]), color=color, alpha=0.12, linewidth=0)
    if data.get("rug"):
        ymin = ax.get_ylim()[0]
        ax.plot(data["rug"], np.full(len(data["rug"]), ymin), "|", color="#333333", ms=6, alpha=0.4)
    ax.set_xlabel(data["xlabel"])
    ax.set_ylabel(data["ylabel"])
    if any(c.get("label") for c in data["curves"]):
        ax.legend(loc="best")
    return ax
