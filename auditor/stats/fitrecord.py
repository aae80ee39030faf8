"""The one fit record: named parameters, their standard errors, and Wald inference written once.

Every fitted model in :mod:`auditor.stats` (least squares, logistic, proportional odds, log-linear
rates, the longitudinal model, the truncated-normal fits) inherits :class:`FitRecord`, which reads
three things from the fit: ``names``, ``params`` (the estimates, in the order of ``names``) and
``se`` (their standard errors). A fit whose intervals use Student's t states its degrees of freedom
in ``reference_df``; the others use the standard normal. For parameter b with standard error s,

    statistic = b / s,   p = 2 P(T > |b / s|),   interval b -/+ q_{(1+level)/2} s,

with T and q from the fit's reference distribution (the Wald test; any text, e.g. Casella and
Berger, Statistical Inference, 2nd ed., 2002, section 10.3.2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats


@dataclass(frozen=True)
class WaldTest:
    """Wald test and interval for one parameter, on the fit's reference distribution."""

    name: str
    estimate: float
    se: float
    z: float
    """estimate / se: a z statistic, or a t statistic when the fit's reference is Student's t."""
    p_value: float
    lower: float
    upper: float
    level: float


class FitRecord:
    """Wald inference for a fit that provides ``names``, ``params`` and ``se`` (see the module)."""

    names: tuple[str, ...] | list[str]
    params: np.ndarray
    se: np.ndarray

    @property
    def reference_df(self) -> float | None:
        """Degrees of freedom of the t reference distribution; None for the standard normal."""
        return None

    def index(self, name: str) -> int:
        """Position of parameter ``name``."""
        return self.names.index(name)

    def quantile(self, level: float) -> float:
        """The two-sided critical value q_{(1+level)/2} of the reference distribution."""
        df = self.reference_df
        return float(stats.norm.ppf(0.5 + level / 2) if df is None else stats.t.ppf(0.5 + level / 2, df))

    def two_sided_p(self, statistic: float) -> float:
        """2 P(T > |statistic|) on the reference distribution (NaN for a NaN statistic)."""
        df = self.reference_df
        tail = stats.norm.sf(abs(statistic)) if df is None else stats.t.sf(abs(statistic), df)
        return float(2 * tail)

    def wald(self, name, level: float = 0.95) -> WaldTest:
        """Estimate, SE, statistic, two-sided p and interval of one parameter (NaN p for a zero SE)."""
        i = self.index(name)
        est, se = float(self.params[i]), float(self.se[i])
        z = est / se if se > 0 else math.nan
        q = self.quantile(level)
        return WaldTest(self.names[i], est, se, z, self.two_sided_p(z), est - q * se, est + q * se, level)

    def ci(self, name, level: float = 0.95) -> tuple[float, float, float]:
        """(estimate, lower, upper) at two-sided ``level``."""
        w = self.wald(name, level)
        return w.estimate, w.lower, w.upper

    def p_value(self, name) -> float:
        """Two-sided p-value of the Wald test that the parameter is zero."""
        return self.wald(name).p_value

    def std_error(self, name) -> float:
        return float(self.se[self.index(name)])
