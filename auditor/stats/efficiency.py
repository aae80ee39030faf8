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


def empirical_ratio(se_planned: float, se_reference: float) -> float:
    """Sample-size ratio implied by two fitted analyses on the same data: (SE_planned / SE_reference)^2."""
    return float((se_planned / se_reference) ** 2)
