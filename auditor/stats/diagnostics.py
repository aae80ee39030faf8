"""Diagnostics of a pre-post relationship: spread against baseline, Box-Cox scale, bounds, heaping."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from .linear import fit_ols


@dataclass(frozen=True)
class TrendTest:
    slope: float
    statistic: float
    p_value: float
    n: int


def spread_trend_test(resid, x) -> TrendTest:
    """Does the spread of residuals change with x? Least-squares slope of |residual| on x, t test.

    A Glejser-type test (Glejser, J Am Stat Assoc 1969;64:316-323): under constant variance the
    absolute residuals do not trend with x. Positive slope: spread grows with x (as with
    multiplicative error).
    """
    resid = np.asarray(resid, dtype=float)
    x = np.asarray(x, dtype=float)
    fit = fit_ols(np.abs(resid), {"x": x})
    est = float(fit.coef[1])
    t = est / float(fit.se[1])
    return TrendTest(est, t, float(2 * stats.t.sf(abs(t), fit.df_resid)), len(x))


def boxcox_transform(y, lam: float):
    y = np.asarray(y, dtype=float)
    return np.log(y) if abs(lam) < 1e-12 else (y**lam - 1) / lam


@dataclass(frozen=True)
class BoxCoxProfile:
    lam: float
    lower: float
    upper: float
    grid: list[float]
    loglik: list[float]

    def includes(self, value: float) -> bool:
        return self.lower <= value <= self.upper


def boxcox_profile(followup, baseline, other_columns: dict, grid=None, level: float = 0.95) -> BoxCoxProfile:
    """Profile likelihood of a common Box-Cox power for baseline and follow-up in the ANCOVA model

        h(follow-up) = a + b h(baseline) + arm terms + e,  h(y) = (y^lambda - 1)/lambda (log at 0),

    l(lambda) = -n/2 log(RSS(lambda)/n) + (lambda - 1) sum log(follow-up) (Box and Cox, J R Stat Soc B
    1964;26:211-252; the Jacobian is that of the response only). CI: lambdas within
    chi2_1(level)/2 of the maximum. lambda = 1 is the raw scale, 0 the log scale.
    """
    f = np.asarray(followup, dtype=float)
    b = np.asarray(baseline, dtype=float)
    if np.any(f <= 0) or np.any(b <= 0):
        raise ValueError("Box-Cox needs positive values")
    grid = np.round(np.arange(-1.0, 2.0001, 0.05), 4) if grid is None else np.asarray(grid, dtype=float)
    n = len(f)
    slog = float(np.sum(np.log(f)))
    ll = []
    for lam in grid:
        fit = fit_ols(boxcox_transform(f, lam), {"baseline": boxcox_transform(b, lam), **other_columns})
        ll.append(-n / 2 * np.log(fit.rss / n) + (lam - 1) * slog)
    ll = np.asarray(ll)
    best = int(np.argmax(ll))
    cut = ll[best] - stats.chi2.ppf(level, 1) / 2
    inside = grid[ll >= cut]
    return BoxCoxProfile(float(grid[best]), float(inside.min()), float(inside.max()), grid.tolist(), ll.tolist())


@dataclass(frozen=True)
class BoundShares:
    lower: float | None
    upper: float | None
    share_lower: float
    share_upper: float
    declared: bool


def bound_shares(values, lower: float | None, upper: float | None) -> BoundShares:
    """Share of observations at the scale's lower and upper bounds (declared, else observed extremes)."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    declared = lower is not None or upper is not None
    lo = float(np.min(v)) if lower is None else float(lower)
    hi = float(np.max(v)) if upper is None else float(upper)
    tol = 1e-9 * max(1.0, abs(hi - lo))
    return BoundShares(lo, hi, float(np.mean(v <= lo + tol)), float(np.mean(v >= hi - tol)), declared)


@dataclass(frozen=True)
class Granularity:
    n: int
    n_distinct: int
    integer_valued: bool
    top_value: float
    top_share: float
    """Share of observations at the single most common value (heaping)."""
    tie_share: float
    """Share of observations that share their value with another."""


def granularity(values) -> Granularity:
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    uniq, counts = np.unique(v, return_counts=True)
    top = int(np.argmax(counts))
    return Granularity(len(v), len(uniq), bool(np.all(np.mod(v, 1) == 0)), float(uniq[top]),
                       float(counts[top] / len(v)), float(counts[counts > 1].sum() / len(v)))


def skewness(values) -> float:
    v = np.asarray(values, dtype=float)
    return float(stats.skew(v[np.isfinite(v)], bias=False))
