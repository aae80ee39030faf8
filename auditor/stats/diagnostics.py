"""Diagnostics of a pre-post relationship: spread against baseline, Box-Cox scale, bounds, heaping."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from .linear import fit_ols
from .lrtest import likelihood_ratio


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
    w = fit.wald("x")
    return TrendTest(w.estimate, w.z, w.p_value, len(x))


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


AT_BOUND_RTOL = 1e-9
"""Relative tolerance (to the bound's own magnitude) for a value to count as equal to a bound: float
rounding only (a convention of this tool)."""


def at_bound_tolerance(values, bound: float) -> float:
    """How close a value must be to ``bound`` to count as sitting at it.

    Equality up to float rounding (AT_BOUND_RTOL times the bound's magnitude), never more than half
    the smallest gap between the data's distinct values: a value one recorded step from the bound is
    off it. The tolerance is tied to the bound and the data's resolution, not to the width of the
    bound range, so declared bounds far wider than the data (0 to 1e12 on a 1-5 scale) do not put
    every value "at the floor".
    """
    v = np.unique(np.asarray(values, dtype=float))
    tol = AT_BOUND_RTOL * max(1.0, abs(float(bound)))
    if len(v) > 1:
        tol = min(tol, 0.5 * float(np.min(np.diff(v))))
    return tol


def share_at_bound(values, bound: float | None) -> float:
    """Share of ``values`` equal to ``bound`` (within :func:`at_bound_tolerance`); 0 for an open or
    infinite bound, which no finite value reaches."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if bound is None or not np.isfinite(bound) or len(v) == 0:
        return 0.0
    return float(np.mean(np.abs(v - bound) <= at_bound_tolerance(v, bound)))


def bound_shares(values, lower: float | None, upper: float | None) -> BoundShares:
    """Share of observations at the scale's lower and upper bounds (declared, else observed extremes).

    A value is at a bound when it equals it (:func:`share_at_bound`), not when it lies within some
    share of the bound range.
    """
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    declared = lower is not None or upper is not None
    lo = float(np.min(v)) if lower is None else float(lower)
    hi = float(np.max(v)) if upper is None else float(upper)
    return BoundShares(lo, hi, share_at_bound(v, lo), share_at_bound(v, hi), declared)


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


def holm_adjust(p_values) -> list[float]:
    """Holm step-down adjusted p-values (Holm, Scand J Stat 1979;6:65-70): rejecting where the
    adjusted p is below alpha keeps the family-wise error at alpha. None entries (tests not run) are
    passed through and do not count towards the family."""
    idx = [i for i, p in enumerate(p_values) if p is not None]
    out: list = list(p_values)
    order = sorted(idx, key=lambda i: p_values[i])
    m, running = len(order), 0.0
    for k, i in enumerate(order):
        running = max(running, min(1.0, (m - k) * float(p_values[i])))
        out[i] = running
    return out


def boxcox_lr_pvalue(profile: BoxCoxProfile, value: float = 1.0) -> float:
    """Likelihood-ratio p-value of the Box-Cox power ``value`` from a profile: chi-square on 1 df of
    2 (max loglik - loglik at value), the loglik at ``value`` interpolated on the profile's grid."""
    grid, ll = np.asarray(profile.grid), np.asarray(profile.loglik)
    at = float(np.interp(value, grid, ll))
    return likelihood_ratio(at, float(np.max(ll)), 1).p_value


@dataclass(frozen=True)
class SlopeTest:
    estimate: float
    se: float
    lower: float
    upper: float
    p_value: float
    """Two-sided t test of slope = ``null``."""
    null: float


def slope_test(baseline, followup, other_columns: dict, null: float = 1.0, level: float = 0.95) -> SlopeTest:
    """Least-squares slope of follow-up on baseline (other terms kept), its t CI and the t test of
    slope = ``null`` (1: the slope a change score assumes)."""
    fit = fit_ols(np.asarray(followup, dtype=float), {"baseline": np.asarray(baseline, dtype=float),
                                                        **other_columns})
    est, lo, hi = fit.ci("baseline", level)
    se = fit.std_error("baseline")
    return SlopeTest(est, se, lo, hi, fit.two_sided_p((est - null) / se), null)


def category_columns(baseline, levels) -> dict[str, np.ndarray]:
    """A baseline with few distinct levels entered as categories: the linear term plus an indicator
    for each level from the third on. These columns span the same space as one indicator per level
    beyond the first, so the fit is the saturated one, and the linear-only model is nested in it
    (the F test of the indicators is the test of nonlinearity, on levels - 2 df; none with 2 levels).
    Values equal to none of ``levels`` get zero indicators."""
    b = np.asarray(baseline, dtype=float)
    levels = [float(v) for v in levels]
    return {"baseline": b, **{f"baseline={v:g}": (b == v).astype(float) for v in levels[2:]}}
