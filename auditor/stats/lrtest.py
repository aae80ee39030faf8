"""The one likelihood-ratio test of nested models, for every model family of the tool.

For a reduced model nested in a full one, fitted by maximum likelihood to the same observations,
the statistic 2 (l_full - l_reduced) is asymptotically chi-square on df = the difference in the
number of free parameters when the reduced model is true (Wilks SS, Ann Math Stat 1938;9:60-62).
Every caller passes the reduced model first and the full model second.
"""

from __future__ import annotations

from dataclasses import dataclass

from scipy import stats

NESTING_TOLERANCE = 1e-8
"""A reduced log-likelihood above the full one by more than this share of (1 + |l_full|) means the
models are not nested (or a fit did not reach its maximum); smaller excesses are rounding and count
as a statistic of 0 (a convention of this tool, no source)."""


@dataclass(frozen=True)
class LRTest:
    """A likelihood-ratio chi-square: 2 (l_full - l_reduced) on ``df`` degrees of freedom."""

    statistic: float
    df: int
    p_value: float

    @property
    def chi2(self) -> float:
        """The statistic under its distribution's name."""
        return self.statistic


def likelihood_ratio(reduced_loglik: float, full_loglik: float, df: int) -> LRTest:
    """LR chi-square 2 (l_full - l_reduced) on ``df`` and its upper-tail p-value (Wilks 1938).

    ``df`` is the number of parameters the full model adds and must be positive. A statistic that
    rounding made slightly negative is 0; a clearly negative one is refused (the models are not
    nested as the caller claims).
    """
    if df <= 0:
        raise ValueError("the full model must have more parameters than the reduced one")
    stat = 2.0 * (float(full_loglik) - float(reduced_loglik))
    if stat < 0:
        if stat < -NESTING_TOLERANCE * (1.0 + abs(float(full_loglik))):
            raise ValueError("the reduced fit has the higher log-likelihood, so the models are not nested")
        stat = 0.0
    return LRTest(float(stat), int(df), float(stats.chi2.sf(stat, df)))
