"""Relative efficiency of the common analyses of a trial with a baseline and one follow-up.

With equal variances at baseline and follow-up and correlation rho between them, the variance of the
treatment-effect estimate, relative to analysing follow-up alone, is (Frison and Pocock, Stat Med
1992;11:1685-1704):

    follow-up only     1
    change score       2 (1 - rho)
    ANCOVA             1 - rho^2

so the change analysis needs 2(1 - rho) / (1 - rho^2) = 2 / (1 + rho) times the participants of
ANCOVA for the same power, and is worse than ignoring baseline when rho < 0.5.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def variance_factor(analysis: str, rho):
    """Variance of the effect estimate relative to follow-up only, equal variances (Frison-Pocock)."""
    rho = np.asarray(rho, dtype=float)
    if analysis == "follow-up-only":
        return np.ones_like(rho)
    if analysis == "change":
        return 2 * (1 - rho)
    if analysis == "ancova":
        return 1 - rho**2
    raise ValueError(f"unknown analysis '{analysis}'")


def variance_factor_unequal(analysis: str, rho, sd_baseline, sd_followup):
    """The same, without assuming equal variances (variances of the per-arm means, up to 2/n):

    follow-up only  s_f^2;  change  s_b^2 + s_f^2 - 2 rho s_b s_f;  ANCOVA  s_f^2 (1 - rho^2),
    all divided by s_f^2.
    """
    sb, sf = float(sd_baseline), float(sd_followup)
    rho = np.asarray(rho, dtype=float)
    if analysis == "follow-up-only":
        return np.ones_like(rho)
    if analysis == "change":
        return (sb**2 + sf**2 - 2 * rho * sb * sf) / sf**2
    if analysis == "ancova":
        return 1 - rho**2
    raise ValueError(f"unknown analysis '{analysis}'")


def sample_size_ratio(planned: str, reference: str, rho):
    """Participants the planned analysis needs per participant of the reference, for equal power."""
    return variance_factor(planned, rho) / variance_factor(reference, rho)


@dataclass(frozen=True)
class EfficiencyComparison:
    planned: str
    reference: str
    ratio: float
    """Sample-size ratio planned / reference (> 1: the planned analysis needs more participants)."""
    lower: float
    upper: float
    """The ratio evaluated at the ends of the CI of rho (the ratio is monotone in rho)."""


def compare_with_ci(planned: str, reference: str, rho: float, rho_lower: float, rho_upper: float
                    ) -> EfficiencyComparison:
    """Sample-size ratio with a CI carried from the CI of rho (monotone transformation)."""
    ends = sorted(float(sample_size_ratio(planned, reference, r)) for r in (rho_lower, rho_upper))
    return EfficiencyComparison(planned, reference, float(sample_size_ratio(planned, reference, rho)),
                                ends[0], ends[1])


def ancova_saving(rho: float) -> float:
    """The share of participants ANCOVA saves against the follow-up-only analysis for the same power:
    1 - (1 - rho^2) = rho^2 (equal variances; Frison and Pocock 1992)."""
    return rho ** 2


def empirical_ratio(se_planned: float, se_reference: float) -> float:
    """Sample-size ratio implied by two fitted analyses on the same data: (SE_planned / SE_reference)^2."""
    return float((se_planned / se_reference) ** 2)


@dataclass(frozen=True)
class OwnCost:
    """The trial's own sample-size ratio of change against ANCOVA, from its observed moments.

    ``ratio`` = var(follow-up - baseline) / residual variance of the ANCOVA of follow-up on baseline
    (Frison and Pocock 1992 without assuming equal variances), all moments within arm. It equals
    ``1 + delta^2`` with ``delta = (slope - 1) s_b / s_e``, so it is never below 1 and is 1 exactly
    when the slope is 1, whatever the correlation. ``lower``/``upper``: the interval for ``delta``
    by the delta method with empirical influence functions (robust to non-normality), mapped to the
    ratio (an interval for delta that contains 0 gives a lower limit of 1).
    """

    ratio: float
    lower: float
    upper: float
    delta: float
    delta_lower: float
    delta_upper: float
    slope: float
    r: float
    sd_baseline: float
    sd_followup: float
    n: int
    level: float

    @property
    def variance_ratio(self) -> float:
        """var(follow-up) / var(baseline) within arm: the equal-variance ratio 2/(1 + r) holds only
        when this is 1."""
        return (self.sd_followup / self.sd_baseline) ** 2


def _delta(m):
    sbb, sff, sbf = m
    resid = sff - sbf**2 / sbb
    return (sbf - sbb) / np.sqrt(sbb * resid)


def own_cost(baseline, followup, groups=None, level: float = 0.95) -> OwnCost:
    """Variance-aware sample-size ratio change / ANCOVA with its CI (see :class:`OwnCost`).

    ``groups`` (e.g. the arm of each participant) are centred separately so the treatment effect
    does not inflate the variances; with None the whole sample is centred once.
    """
    from scipy import stats

    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    g = np.zeros(len(b)) if groups is None else np.asarray(groups)
    x, y = b.copy(), f.copy()
    for level_value in np.unique(g):
        sel = g == level_value
        x[sel] -= x[sel].mean()
        y[sel] -= y[sel].mean()
    n = len(x)
    m = np.array([np.mean(x * x), np.mean(y * y), np.mean(x * y)])
    if m[0] <= 0 or m[1] - m[2] ** 2 / m[0] <= 0:
        raise ValueError("baseline is constant within arms or follow-up is an exact linear function of it")
    d = float(_delta(m))
    grad = np.empty(3)
    for j in range(3):
        h = 1e-6 * max(abs(m[j]), np.sqrt(m[0] * m[1]))
        up, dn = m.copy(), m.copy()
        up[j] += h
        dn[j] -= h
        grad[j] = (_delta(up) - _delta(dn)) / (2 * h)
    infl = np.column_stack([x * x - m[0], y * y - m[1], x * y - m[2]]) @ grad
    se = float(np.sqrt(np.sum(infl**2)) / n)
    z = float(stats.norm.ppf(0.5 + level / 2))
    lo, hi = d - z * se, d + z * se
    if lo <= 0 <= hi:
        r_lo, r_hi = 1.0, 1.0 + max(lo**2, hi**2)
    else:
        r_lo, r_hi = 1.0 + min(lo**2, hi**2), 1.0 + max(lo**2, hi**2)
    return OwnCost(1.0 + d**2, r_lo, r_hi, d, lo, hi, float(m[2] / m[0]), float(m[2] / np.sqrt(m[0] * m[1])),
                   float(np.sqrt(m[0])), float(np.sqrt(m[1])), n, level)
