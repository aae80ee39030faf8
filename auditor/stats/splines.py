"""Restricted cubic spline bases and the rule that chooses their knots.

A restricted (natural) cubic spline is cubic between knots and linear beyond the outer knots, so it
bends where the data are and does not flail at the ends (Stone and Koo 1985;
Durrleman and Simon, Stat Med 1989;8:551-561).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Quantiles at which knots are placed, by number of knots: spread evenly over the central mass,
#: with the outer knots near the 5th and 95th percentiles so that few points lie beyond them
#: (a convention of this tool; Durrleman and Simon 1989 place knots at percentiles in the same way).
KNOT_QUANTILES = {
    3: (0.10, 0.50, 0.90),
    4: (0.05, 0.35, 0.65, 0.95),
    5: (0.05, 0.275, 0.50, 0.725, 0.95),
    6: (0.05, 0.23, 0.41, 0.59, 0.77, 0.95),
    7: (0.025, 0.1833, 0.3417, 0.50, 0.6583, 0.8167, 0.975),
}


@dataclass(frozen=True)
class SplinePlan:
    """How a baseline enters a model: a restricted cubic spline with ``knots``, or a quadratic."""

    kind: str
    """``spline`` or ``quadratic``."""
    knots: tuple[float, ...]
    reason: str
    center: float = 0.0
    """For a quadratic: the value the square is centred on (the sample mean), fixed with the plan."""

    @property
    def nonlinear_df(self) -> int:
        return 1 if self.kind == "quadratic" else len(self.knots) - 2


def knot_count(n: int, n_distinct: int) -> int:
    """Number of knots for a sample of ``n`` with ``n_distinct`` distinct values.

    Convention of this tool (3 to 5 knots fit most smooth relations in trial-sized samples; more
    spend degrees of freedom on noise): 3 knots below 30 observations, 4 below 100, 5 otherwise; never more than
    ``n_distinct - 2`` so that each knot sits between distinct values.
    """
    k = 3 if n < 30 else 4 if n < 100 else 5
    return max(3, min(k, n_distinct - 2))


def choose_knots(x: np.ndarray, n_knots: int | None = None) -> SplinePlan:
    """Knots at the quantiles of :data:`KNOT_QUANTILES`, or a quadratic when the values are too discrete for a spline.

    With fewer than 6 distinct values (a short ordinal scale, for example) quantile knots coincide,
    so the nonlinearity is carried by a quadratic term instead (a convention of this tool).
    """
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    distinct = np.unique(x)
    if len(distinct) < 6:
        return SplinePlan("quadratic", (), f"{len(distinct)} distinct values: quadratic term", float(np.mean(x)))
    k = n_knots or knot_count(len(x), len(distinct))
    knots = np.quantile(x, KNOT_QUANTILES[k], method="linear")
    knots = np.unique(knots)
    if len(knots) < 3:
        return SplinePlan("quadratic", (), "quantile knots coincide: quadratic term", float(np.mean(x)))
    return SplinePlan("spline", tuple(float(v) for v in knots),
                      f"{len(knots)} knots at quantiles of {len(x)} values")


def spline_basis(x: np.ndarray, knots) -> np.ndarray:
    """The restricted cubic spline basis (the truncated-power form of Durrleman and Simon 1989): columns x, s_1..s_{k-2}.

    s_j(x) = [(x - t_j)+^3 - (x - t_{k-1})+^3 (t_k - t_j)/(t_k - t_{k-1})
              + (x - t_k)+^3 (t_{k-1} - t_j)/(t_k - t_{k-1})] / (t_k - t_1)^2

    The division by (t_k - t_1)^2 keeps the columns on the scale of x (it does not change fits).
    Every s_j is linear for x > t_k and zero for x < t_1.
    """
    x = np.asarray(x, dtype=float)
    t = np.asarray(knots, dtype=float)
    k = len(t)
    if k < 3:
        raise ValueError("a restricted cubic spline needs at least 3 knots")
    scale = (t[-1] - t[0]) ** 2

    def cube(u):
        return np.maximum(u, 0.0) ** 3

    cols = [x]
    for j in range(k - 2):
        s = (cube(x - t[j])
             - cube(x - t[k - 2]) * (t[k - 1] - t[j]) / (t[k - 1] - t[k - 2])
             + cube(x - t[k - 1]) * (t[k - 2] - t[j]) / (t[k - 1] - t[k - 2]))
        cols.append(s / scale)
    return np.column_stack(cols)


def flexible_basis(x: np.ndarray, plan: SplinePlan) -> np.ndarray:
    """Columns for a baseline under ``plan``: the spline basis, or x and a centred x squared."""
    x = np.asarray(x, dtype=float)
    if plan.kind == "quadratic":
        return np.column_stack([x, (x - plan.center) ** 2])
    return spline_basis(x, plan.knots)
