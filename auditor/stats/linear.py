"""Least-squares fits on explicit design matrices, and nested-model tests.

Thin, well-defined wrappers over statsmodels OLS so that checks speak of named coefficients, their
CIs and F tests, never of a fitted-model object.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from .fitrecord import FitRecord


@dataclass(frozen=True)
class LinearFit(FitRecord):
    """A least-squares fit: named coefficients with t inference on the residual degrees of freedom."""

    names: tuple[str, ...]
    params: np.ndarray
    se: np.ndarray
    df_resid: float
    rss: float
    n: int
    fitted: np.ndarray
    resid: np.ndarray
    loglik: float

    @property
    def reference_df(self) -> float:
        return self.df_resid

    @property
    def sigma(self) -> float:
        return float(np.sqrt(self.rss / self.df_resid))


def fit_ols(y, columns: dict[str, np.ndarray], intercept: bool = True) -> LinearFit:
    """Ordinary least squares of ``y`` on named columns (an intercept is added first)."""
    y = np.asarray(y, dtype=float)
    names = (["(intercept)"] if intercept else []) + list(columns)
    parts = ([np.ones(len(y))] if intercept else []) + [np.asarray(c, dtype=float) for c in columns.values()]
    X = np.column_stack(parts)
    if np.linalg.matrix_rank(X) < X.shape[1]:
        raise ValueError("the design matrix is singular (a covariate is constant or collinear)")
    if len(y) <= X.shape[1]:
        raise ValueError(f"{len(y)} observations are too few for {X.shape[1]} parameters")
    from statsmodels.regression.linear_model import OLS  # deferred: only fits need it

    res = OLS(y, X).fit()
    return LinearFit(tuple(names), np.asarray(res.params), np.asarray(res.bse), float(res.df_resid),
                     float(res.ssr), len(y), np.asarray(res.fittedvalues), np.asarray(res.resid),
                     float(res.llf))


def predict(fit: LinearFit, columns: dict[str, np.ndarray]) -> np.ndarray:
    """The fitted mean at new rows: the intercept plus each named column (in the fit's order) times
    its coefficient, X b. ``columns`` names every covariate of ``fit``; extra names are ignored."""
    n = len(next(iter(columns.values())))
    X = np.column_stack([np.ones(n)] + [columns[k] for k in fit.names[1:]])
    return X @ fit.params


@dataclass(frozen=True)
class NestedTest:
    statistic: float
    df_num: int
    df_den: float
    p_value: float


def f_test(reduced: LinearFit, full: LinearFit) -> NestedTest:
    """F test of a reduced model nested in a full one: ((RSS0 - RSS1)/q) / (RSS1/df1)."""
    q = int(round(reduced.df_resid - full.df_resid))
    if q <= 0:
        raise ValueError("the full model must have more parameters than the reduced one")
    f = ((reduced.rss - full.rss) / q) / (full.rss / full.df_resid)
    f = max(f, 0.0)
    return NestedTest(float(f), q, full.df_resid, float(stats.f.sf(f, q, full.df_resid)))


def adjusted_slope(y, x, covariates: dict[str, np.ndarray] | None = None,
                   level: float = 0.95) -> tuple[float, float, float, float, int]:
    """Least-squares slope of ``y`` on ``x`` adjusted for other columns: (estimate, lower, upper, p, df).

    y = a + b x + sum_k c_k z_k + e; b-hat with the t interval b-hat -/+ t_{(1+level)/2, n-p} SE(b-hat)
    and the two-sided t-test of b = 0 (any regression text, e.g. Draper and Smith, Applied Regression
    Analysis, 3rd ed., 1998, ch. 3). With ``covariates`` empty it is the simple regression slope.
    """
    fit = fit_ols(y, {"x": np.asarray(x, dtype=float), **(covariates or {})})
    est, lo, hi = fit.ci("x", level)
    return est, lo, hi, fit.p_value("x"), int(fit.df_resid)


def slope_with_se(y, x, level: float = 0.95) -> tuple[float, float, float, float, int]:
    """Least-squares slope of ``y`` on ``x`` alone: (estimate, SE, lower, upper, n), t interval at ``level``.

    b-hat = Sxy / Sxx, SE = s / sqrt(Sxx) with s^2 = RSS / (n - 2), interval b-hat -/+ t_{(1+level)/2, n-2} SE
    (Draper and Smith, Applied Regression Analysis, 3rd ed., 1998, ch. 1).
    """
    fit = fit_ols(np.asarray(y, float), {"x": np.asarray(x, float)})
    est, lo, hi = fit.ci("x", level)
    return est, fit.std_error("x"), lo, hi, fit.n


def mean_t_interval(d, level: float = 0.95) -> tuple[float, float, float, float, int]:
    """Mean of ``d`` with its one-sample t interval: (mean, lower, upper, SE, n).

    SE = sd(d) / sqrt(n) (n - 1 divisor), interval mean -/+ t_{(1+level)/2, n-1} SE (Student 1908;
    any text, e.g. Altman, Practical Statistics for Medical Research, 1991, ch. 9).
    """
    d = np.asarray(d, dtype=float)
    n = len(d)
    se = float(np.std(d, ddof=1) / np.sqrt(n))
    q = stats.t.ppf(0.5 + level / 2, n - 1)
    m = float(np.mean(d))
    return m, m - q * se, m + q * se, se, n

