"""Counts observed over unequal times: rate models and the spread of observation time.

A count accumulated over t units of time estimates a rate y / t. When t differs between participants,
and above all when it differs between arms, a count compared as if the times were equal confounds the
rate with the time observed. The standard remedy is a log-linear model with log t as an offset:

    log E[y_i] = log t_i + a + b' x_i

whose exp(b_arm) is the rate ratio (Cameron and Trivedi, Regression Analysis of Count Data, 2nd ed.
2013, section 3.2). Counts are usually overdispersed, so the variance is the robust (sandwich, HC0)
one: the rate ratio's CI stays valid whatever the dispersion, as long as the mean model holds
(the quasi-likelihood argument of Wedderburn 1974).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from .fitnotes import fit_notes
from .fitrecord import FitRecord

SPREAD_CV = 0.10
"""Observation times whose coefficient of variation is below this count as equal (a convention)."""


@dataclass(frozen=True)
class TimeSpread:
    """How unequal the observation times are."""

    n: int
    median: float
    minimum: float
    maximum: float
    cv: float
    """Standard deviation over mean."""
    share_short: float
    """Share observed for less than 80% of the median time."""

    @property
    def equal(self) -> bool:
        return self.cv < SPREAD_CV


def time_spread(t) -> TimeSpread:
    """Summary of observation times ``t`` (all > 0)."""
    t = np.asarray(t, dtype=float)
    med = float(np.median(t))
    return TimeSpread(n=len(t), median=med, minimum=float(t.min()), maximum=float(t.max()),
                      cv=float(np.std(t, ddof=1) / np.mean(t)) if len(t) > 1 else 0.0,
                      share_short=float(np.mean(t < 0.8 * med)))


@dataclass(frozen=True)
class GroupTimes:
    """Observation times of one group (an arm) set against the pooled median time."""

    n: int
    median: float
    lower_quartile: float
    upper_quartile: float
    share_short: float
    """Share of the group observed for less than 80% of the pooled median time."""


def group_times(t, pooled_median: float) -> GroupTimes:
    """Median and quartiles of one group's times ``t`` (numpy's linear-interpolation percentiles) and
    the share below 80% of ``pooled_median``, the threshold :func:`time_spread` uses for everyone."""
    t = np.asarray(t, dtype=float)
    return GroupTimes(len(t), float(np.median(t)), float(np.percentile(t, 25)), float(np.percentile(t, 75)),
                      float(np.mean(t < 0.8 * pooled_median)))


@dataclass(frozen=True)
class LogLinearFit(FitRecord):
    """A Poisson log-linear fit with robust standard errors (normal-theory Wald inference at ``level``)."""

    names: list[str]
    params: np.ndarray
    se: np.ndarray
    n: int
    level: float
    notes: tuple[str, ...] = ()
    """What the fitting routine warned about (see :mod:`auditor.stats.fitnotes`)."""

    def ratio(self, name: str) -> tuple[float, float, float, float]:
        """exp(coefficient) with its Wald CI and p-value: (ratio, lower, upper, p)."""
        w = self.wald(name, self.level)
        return math.exp(w.estimate), math.exp(w.lower), math.exp(w.upper), w.p_value

    def coefficient(self, name: str) -> tuple[float, float, float]:
        """The coefficient itself with its Wald CI: (estimate, lower, upper)."""
        return self.ci(name, self.level)

    def z(self, name: str) -> float:
        return self.wald(name).z


def fit_log_linear(y, columns: dict[str, np.ndarray], offset=None, level: float = 0.95) -> LogLinearFit:
    """Poisson log-linear model of counts ``y`` on an intercept plus ``columns``, with an optional
    offset (log observation time), by maximum likelihood; HC0 sandwich standard errors.

    Raises ``ArithmeticError`` when the fit does not converge or gives non-finite numbers; other
    warnings of the fitting routine are kept in ``notes``."""
    from statsmodels.genmod.families import Poisson
    from statsmodels.genmod.generalized_linear_model import GLM

    y = np.asarray(y, dtype=float)
    names = ["intercept", *columns]
    X = np.column_stack([np.ones(len(y)), *[np.asarray(c, dtype=float) for c in columns.values()]])
    with fit_notes() as notes:
        res = GLM(y, X, family=Poisson(),
                  offset=None if offset is None else np.asarray(offset, dtype=float)).fit(cov_type="HC0")
    converged = bool(getattr(res, "converged", True))
    if not converged or not np.all(np.isfinite(res.params)) or not np.all(np.isfinite(res.bse)):
        raise ArithmeticError("the log-linear count model did not converge")
    return LogLinearFit(names, np.asarray(res.params), np.asarray(res.bse), len(y), level, tuple(notes))


def log_baseline_rate(count, time, half: float = 0.5) -> np.ndarray:
    """log((count + half) / time): the baseline rate as a covariate, defined at a zero count.

    Adding 0.5 is the usual continuity correction for the log of a count (a convention here)."""
    return np.log((np.asarray(count, dtype=float) + half) / np.asarray(time, dtype=float))


def times_differ_by_arm(t, arms) -> tuple[float, float]:
    """Kruskal-Wallis test that observation time has the same distribution in every arm (the
    Wilcoxon-Mann-Whitney test for two arms): (statistic, p)."""
    t = np.asarray(t, dtype=float)
    arms = np.asarray(arms)
    groups = [t[arms == a] for a in sorted(set(arms.tolist()))]
    groups = [g for g in groups if len(g)]
    if len(groups) < 2 or np.ptp(t) == 0:
        return 0.0, 1.0
    h, p = stats.kruskal(*groups)
    return float(h), float(p)


@dataclass(frozen=True)
class RatioShift:
    """How far the coefficient of one term moves between two log-linear models of the same counts,
    as a ratio exp(b_a - b_b) with its Wald interval."""

    estimate: float
    lower: float
    upper: float
    se_log: float
    """Standard error of b_a - b_b (log scale), from the stacked sandwich."""

    def beyond(self, threshold: float) -> bool:
        """The whole interval lies beyond ``threshold`` or its inverse."""
        return self.lower > threshold or self.upper < 1 / threshold

    @property
    def detectable(self) -> bool:
        """The interval excludes 1."""
        return self.lower > 1 or self.upper < 1


def _poisson_scores(y, X, offset):
    """(coefficients, bread A = X' diag(mu) X, per-participant scores x_i (y_i - mu_i)) of a Poisson
    log-linear fit by maximum likelihood."""
    from statsmodels.genmod.families import Poisson
    from statsmodels.genmod.generalized_linear_model import GLM

    with fit_notes():
        res = GLM(y, X, family=Poisson(), offset=offset).fit()
    if not bool(getattr(res, "converged", True)) or not np.all(np.isfinite(res.params)):
        raise ArithmeticError("the log-linear count model did not converge")
    eta = X @ res.params + (0.0 if offset is None else offset)
    mu = np.exp(eta)
    return np.asarray(res.params), X.T @ (X * mu[:, None]), X * (y - mu)[:, None]


def coefficient_shift(y, columns_a: dict[str, np.ndarray], columns_b: dict[str, np.ndarray], name: str,
                      offset_a=None, offset_b=None, level: float = 0.95) -> RatioShift:
    """exp(b_a - b_b) for the term ``name`` of two Poisson log-linear models fitted to the same counts
    ``y`` (for example without and with log time as offset: the count ratio over the rate ratio).

    The two estimates are correlated (same participants), so the variance of their difference comes
    from the stacked estimating equations (M-estimation; Stefanski and Boos, Am Stat 2002;56:29-38):
    cov(b_a, b_b) = A_a^-1 (S_a' S_b) A_b^-1 with A the Fisher information and S the per-participant
    scores; its diagonal blocks are the HC0 sandwich variances of each fit, so the interval is robust
    to overdispersion like the rate ratio's own."""
    y = np.asarray(y, dtype=float)

    def design(cols):
        return np.column_stack([np.ones(len(y)), *[np.asarray(c, dtype=float) for c in cols.values()]])

    Xa, Xb = design(columns_a), design(columns_b)
    oa = None if offset_a is None else np.asarray(offset_a, dtype=float)
    ob = None if offset_b is None else np.asarray(offset_b, dtype=float)
    pa, Aa, Sa = _poisson_scores(y, Xa, oa)
    pb, Ab, Sb = _poisson_scores(y, Xb, ob)
    Ia, Ib = np.linalg.inv(Aa), np.linalg.inv(Ab)
    ja, jb = 1 + list(columns_a).index(name), 1 + list(columns_b).index(name)
    va = (Ia @ (Sa.T @ Sa) @ Ia)[ja, ja]
    vb = (Ib @ (Sb.T @ Sb) @ Ib)[jb, jb]
    cab = (Ia @ (Sa.T @ Sb) @ Ib)[ja, jb]
    d = float(pa[ja] - pb[jb])
    se = math.sqrt(max(va + vb - 2 * cab, 0.0))
    z = stats.norm.ppf(0.5 + level / 2)
    return RatioShift(math.exp(d), math.exp(d - z * se), math.exp(d + z * se), se)
