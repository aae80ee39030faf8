"""Correlation coefficients with confidence intervals."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats


@dataclass(frozen=True)
class Correlation:
    method: str
    r: float
    lower: float
    upper: float
    p_value: float
    n: int


def _fisher_ci(r: float, se: float, level: float) -> tuple[float, float]:
    z = np.arctanh(np.clip(r, -0.999999999, 0.999999999))
    q = stats.norm.ppf(0.5 + level / 2)
    return float(np.tanh(z - q * se)), float(np.tanh(z + q * se))


def pearson(x, y, level: float = 0.95) -> Correlation:
    """Pearson r with the Fisher z interval, SE(z) = 1/sqrt(n - 3) (Fisher 1921)."""
    x, y = _paired(x, y)
    n = len(x)
    res = stats.pearsonr(x, y)
    lo, hi = _fisher_ci(res.statistic, 1 / np.sqrt(n - 3), level)
    return Correlation("pearson", float(res.statistic), lo, hi, float(res.pvalue), n)


def spearman(x, y, level: float = 0.95) -> Correlation:
    """Spearman rho with the Fisher z interval using SE(z) = sqrt(1.06 / (n - 3))
    (Fieller, Hartley and Pearson, Biometrika 1957;44:470-481)."""
    x, y = _paired(x, y)
    n = len(x)
    res = stats.spearmanr(x, y)
    lo, hi = _fisher_ci(res.statistic, np.sqrt(1.06 / (n - 3)), level)
    return Correlation("spearman", float(res.statistic), lo, hi, float(res.pvalue), n)


def _paired(x, y):
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    if len(x) < 4:
        raise ValueError(f"a correlation needs at least 4 complete pairs, not {len(x)}")
    if np.ptp(x) == 0 or np.ptp(y) == 0:
        raise ValueError("a correlation is undefined when one variable is constant")
    return x, y
