"""Formulas that work from a paper's published summaries (per-arm n, means, SDs), not participant data.

Each function takes numbers and returns numbers or frozen dataclasses; none knows about reports.
Where a formula already exists in this package it is reused: the Frison-Pocock variance factors
(:mod:`auditor.stats.efficiency`), the dichotomisation efficiency and the change-against-ANCOVA
efficiency (:mod:`auditor.stats.relative_change`), and the expected regression to the mean
(:mod:`auditor.stats.rtm`). Formulas and sources are on docs/summaries.md.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy import stats

from .efficiency import variance_factor_unequal
from .relative_change import change_vs_ancova_efficiency, dichotomisation_efficiency
from .rtm import _mills, expected_rtm



def normal_quantile(level: float = 0.95) -> float:
    """z_{(1+level)/2}, the normal quantile of a two-sided interval at ``level`` (1.96 at 0.95)."""
    return float(stats.norm.ppf(0.5 + level / 2))


# ------------------------------------------------------------------------------ correlation and SDs


def implied_correlation(sd_baseline: float, sd_followup: float, sd_change: float) -> float:
    """The pre-post correlation implied by the SDs of baseline, follow-up and change.

    ``r = (SDb^2 + SDf^2 - SDc^2) / (2 SDb SDf)``: the identity var(f - b) = var(b) + var(f) -
    2 cov(b, f) solved for the correlation (Cochrane Handbook, chapter 6, "imputing a change-from-
    baseline standard deviation using a correlation coefficient"). It holds exactly for sample SDs
    computed on the same participants; a value outside [-1, 1] means the three SDs cannot describe
    one set of participants (a typing error, an SE printed as an SD, or different samples).
    """
    return float((sd_baseline**2 + sd_followup**2 - sd_change**2) / (2 * sd_baseline * sd_followup))


def change_sd(sd_baseline: float, sd_followup: float, r: float) -> float:
    """The SD of change from the two SDs and a correlation: ``sqrt(SDb^2 + SDf^2 - 2 r SDb SDf)``
    (Cochrane Handbook, chapter 6, the imputation formula the implied correlation inverts)."""
    return float(math.sqrt(max(sd_baseline**2 + sd_followup**2 - 2 * r * sd_baseline * sd_followup, 0.0)))


def fisher_interval(r: float, n: int, level: float = 0.95) -> tuple[float, float]:
    """Interval for a correlation from ``n`` pairs by Fisher's z: ``tanh(atanh r -/+ z / sqrt(n - 3))``
    (Fisher, Metron 1921; normal theory). ``n`` is the number of pairs less the extra means fitted."""
    if n <= 3 or not -1 < r < 1:
        return (math.nan, math.nan)
    q = float(stats.norm.ppf(0.5 + level / 2)) / math.sqrt(n - 3)
    z = math.atanh(r)
    return (math.tanh(z - q), math.tanh(z + q))


def pooled_sd(sds: Sequence[float], ns: Sequence[int]) -> float:
    """Pooled within-arm SD: ``sqrt(sum (n_i - 1) s_i^2 / sum (n_i - 1))``."""
    sds, ns = np.asarray(sds, float), np.asarray(ns, float)
    return float(np.sqrt(np.sum((ns - 1) * sds**2) / np.sum(ns - 1)))


def pooled_correlation(rs: Sequence[float], sd_b: Sequence[float], sd_f: Sequence[float],
                       ns: Sequence[int]) -> float:
    """Pooled within-arm correlation: the pooled covariance ``sum (n_i - 1) r_i s_bi s_fi`` over the
    pooled SDs, as the within-arm moments of an ANCOVA with arm as a factor use it."""
    rs, b, f, ns = (np.asarray(x, float) for x in (rs, sd_b, sd_f, ns))
    w = ns - 1
    cov = np.sum(w * rs * b * f) / np.sum(w)
    return float(cov / (pooled_sd(b, ns) * pooled_sd(f, ns)))


SE_FACTOR = 2.0
"""An SD times sqrt(n) within this factor of the spread other numbers imply reads as an SE printed
as an SD (a convention of this tool, no source)."""
SMALL_SD_FACTOR = 3.0
"""...provided the SD itself is at least this many times smaller than that spread (a convention of
this tool, no source)."""


def looks_like_se(sd: float, n: int, expected_sd: float) -> bool:
    """True when ``sd`` is implausibly small against ``expected_sd`` (the spread implied by other
    reported numbers) and ``sd * sqrt(n)`` is consistent with it: probably a standard error.

    Consistent means within a factor SE_FACTOR; implausibly small means below expected_sd /
    SMALL_SD_FACTOR (SE = SD / sqrt(n); both factors are conventions of this tool)."""
    if not (sd > 0 and expected_sd > 0 and n > 1):
        return False
    scaled = sd * math.sqrt(n)
    return sd < expected_sd / SMALL_SD_FACTOR and expected_sd / SE_FACTOR <= scaled <= expected_sd * SE_FACTOR


def se_from_ci(lower: float, upper: float, level: float = 0.95) -> float:
    """The SE behind a symmetric normal interval: ``(upper - lower) / (2 z)``."""
    return float((upper - lower) / (2 * stats.norm.ppf(0.5 + level / 2)))


# ------------------------------------------------------------------------------ medians and IQRs


def mean_sd_from_quartiles(q1: float, median: float, q3: float, n: int) -> tuple[float, float]:
    """Mean and SD estimated from the median and quartiles (Wan, Wang, Liu and Tong, BMC Med Res
    Methodol 2014;14:135, scenario 3): mean = (q1 + m + q3) / 3, SD = (q3 - q1) / eta(n) with
    ``eta(n) = 2 Phi^-1((0.75 n - 0.125) / (n + 0.25))`` (tending to 1.349 for large n).
    Normal theory: for a skewed variable both are rough."""
    eta = 2 * float(stats.norm.ppf((0.75 * n - 0.125) / (n + 0.25)))
    return float((q1 + median + q3) / 3), float((q3 - q1) / eta)


def quartile_skewness(q1: float, median: float, q3: float) -> float:
    """Bowley's quartile skewness ``(q3 + q1 - 2 m) / (q3 - q1)``: 0 for a symmetric distribution,
    positive when the upper quarter is stretched (Bowley, Elements of Statistics, 1901)."""
    return float((q3 + q1 - 2 * median) / (q3 - q1))


# ------------------------------------------------------------------------------ efficiency


ANALYSES = ("change", "follow-up-only", "ancova")


def ratio_to_ancova(analysis: str, r, sd_baseline: float, sd_followup: float):
    """Participants the analysis needs per participant of ANCOVA for equal power, without assuming
    equal variances (Frison and Pocock, Stat Med 1992;11:1685-1704):

    var(change) = SDb^2 + SDf^2 - 2 r SDb SDf, var(ANCOVA residual) = SDf^2 (1 - r^2),
    var(follow-up) = SDf^2; the ratio is var(analysis) / var(ANCOVA). Accepts an array of r.
    """
    return (variance_factor_unequal(analysis, r, sd_baseline, sd_followup)
            / variance_factor_unequal("ancova", r, sd_baseline, sd_followup))


def percent_change_ratio(r, sd_baseline: float, sd_followup: float, mean_baseline: float,
                         mean_followup: float):
    """First-order sample-size ratio of percent change against ANCOVA from summaries.

    Linearised about the means, 100 (f - b) / b ~ (100 / mb) (f - k b) with k = mf / mb, so
    percent change behaves like follow-up minus k times baseline; its variance against the ANCOVA
    residual is (SDf^2 + k^2 SDb^2 - 2 k r SDb SDf) / (SDf^2 (1 - r^2)). The skewness a ratio adds
    (Vickers, BMC Med Res Methodol 2001;1:6) makes the true cost larger than this.
    """
    r = np.asarray(r, dtype=float)
    k = mean_followup / mean_baseline
    var_pc = sd_followup**2 + k**2 * sd_baseline**2 - 2 * k * r * sd_baseline * sd_followup
    return var_pc / (sd_followup**2 * (1 - r**2))


def responder_ratio(r: float, sd_baseline: float, sd_followup: float, cut: float, mean_change: float) -> float:
    """Sample-size ratio of a responder rule on change (responders beyond ``cut``) against ANCOVA,
    normal approximation: 1 / (E(z) x efficiency of change against ANCOVA), with
    E(z) = phi(z)^2 / (Phi(z)(1 - Phi(z))) at z = (cut - mean change) / SD of change (2/pi at the
    median; Altman and Royston, BMJ 2006;332:1080) and the change efficiency of Frison and Pocock."""
    sd_c = change_sd(sd_baseline, sd_followup, r)
    e = dichotomisation_efficiency((cut - mean_change) / sd_c) * change_vs_ancova_efficiency(
        sd_baseline, sd_followup, r)
    return math.inf if e <= 0 else float(1 / e)


@dataclass(frozen=True)
class RatioInterval:
    value: float
    lower: float
    upper: float
    draws: int
    seed: int


def simulated_interval(fn, sd_baseline: float, sd_followup: float, r: float, df: int, seed: int,
                       draws: int = 4000, level: float = 0.95) -> RatioInterval:
    """Interval for ``fn(r, sd_b, sd_f)`` carrying the sampling error of the pooled within-arm SDs
    and correlation: sample covariance matrices are drawn from a Wishart distribution with ``df``
    degrees of freedom (total n less the number of arms) centred on the reported ones, which is
    their exact sampling distribution for normal data (Anderson, An Introduction to Multivariate
    Statistical Analysis, ch. 7); percentiles of ``fn`` over the draws. Deterministic given ``seed``."""
    cov = np.array([[sd_baseline**2, r * sd_baseline * sd_followup],
                    [r * sd_baseline * sd_followup, sd_followup**2]])
    rng = np.random.default_rng(seed)
    mats = stats.wishart(df=df, scale=cov / df).rvs(size=draws, random_state=rng)
    sb = np.sqrt(mats[:, 0, 0])
    sf = np.sqrt(mats[:, 1, 1])
    rr = mats[:, 0, 1] / (sb * sf)
    values = np.array([fn(float(a), float(b), float(c)) for a, b, c in zip(rr, sb, sf)])
    tail = (1 - level) / 2 * 100
    lo, hi = np.percentile(values, [tail, 100 - tail])
    return RatioInterval(float(fn(r, sd_baseline, sd_followup)), float(lo), float(hi), draws, seed)


@dataclass(frozen=True)
class ImpliedAncova:
    """The ANCOVA treatment effect the summaries imply, with its approximate SE."""

    effect: float
    se: float
    beta: float
    baseline_difference: float
    followup_difference: float


def implied_ancova(mean_b: Sequence[float], mean_f: Sequence[float], sd_b: float, sd_f: float, r: float,
                   n: Sequence[int]) -> ImpliedAncova:
    """Two arms (control first): effect = (mf1 - mf0) - beta (mb1 - mb0), beta = r SDf / SDb from the
    pooled within-arm moments (Frison and Pocock 1992). SE^2 = SDf^2 (1 - r^2) (1/n0 + 1/n1) + (mb1 - mb0)^2 var(beta), var(beta) =
    SDf^2 (1 - r^2) / (SDb^2 (N - 3)); large-sample normal theory."""
    beta = r * sd_f / sd_b
    db = mean_b[1] - mean_b[0]
    df_ = mean_f[1] - mean_f[0]
    resid = sd_f**2 * (1 - r**2)
    total = sum(n)
    var = resid * (1 / n[0] + 1 / n[1]) + db**2 * resid / (sd_b**2 * max(total - 3, 1))
    return ImpliedAncova(float(df_ - beta * db), float(math.sqrt(var)), float(beta), float(db), float(df_))


# ------------------------------------------------------------------------------ shape and floors


SKEW_RATIO = 2.0
"""Altman and Bland ("Detecting skewness from summary information", BMJ 1996;313:1200): for a
variable that cannot go below a bound, a mean less than twice the SD above it suggests skew."""


def mean_to_sd_above_bound(mean: float, sd: float, lower: float) -> float:
    """(mean - lower bound) / SD: below SKEW_RATIO (2) the distribution of a variable bounded below
    is likely skewed (Altman and Bland, BMJ 1996;313:1200); below 1 markedly so."""
    return float((mean - lower) / sd)


def distance_to_bound_in_sd(mean: float, sd: float, lower: float | None, upper: float | None) -> float:
    """How many SDs the mean lies from the nearer declared bound (inf when none)."""
    out = math.inf
    if lower is not None:
        out = min(out, (mean - lower) / sd)
    if upper is not None:
        out = min(out, (upper - mean) / sd)
    return float(out)


def percent_change_of_means(mean_baseline: float, mean_followup: float) -> float:
    """100 (mf - mb) / mb: the percent change of the means, which is not the mean of the percent
    changes (the latter weights each participant by 1 / baseline and is larger when baselines vary)."""
    return float(100 * (mean_followup - mean_baseline) / mean_baseline)


@dataclass(frozen=True)
class PercentChangeOfMeans:
    """The percent change of one arm's means, 100 (mf / mb - 1), with its delta-method SE and interval."""

    value: float
    se: float
    lower: float
    upper: float


def percent_change_of_means_interval(mean_baseline: float, mean_followup: float, sd_baseline: float,
                                     sd_followup: float, r: float, n: int,
                                     level: float = 0.95) -> PercentChangeOfMeans:
    """The percent change of the means of one arm's ``n`` participants, with a normal interval by the
    first-order delta method.

    g = 100 (mf / mb - 1) has gradient (dg/dmb, dg/dmf) = (-100 mf / mb^2, 100 / mb). The two means
    are of the same participants, so var(mb) = SDb^2 / n, var(mf) = SDf^2 / n and cov(mb, mf) =
    r SDb SDf / n, r the pre-post correlation (reported or implied by the SDs). Hence, with
    k = mf / mb,

        SE = (100 / |mb|) sqrt((SDf^2 + k^2 SDb^2 - 2 k r SDb SDf) / n),

    and the interval is value -/+ z SE, z the normal quantile of ``level``. Without r the covariance,
    and so the SE, is unknown: the caller gives no interval then. The ratio of means is near normal
    when the baseline mean is many of its SEs from zero (SDb / (mb sqrt(n)) small).
    """
    k = mean_followup / mean_baseline
    var = (sd_followup**2 + k**2 * sd_baseline**2 - 2 * k * r * sd_baseline * sd_followup) / n
    se = 100 / abs(mean_baseline) * math.sqrt(max(var, 0.0))
    value = percent_change_of_means(mean_baseline, mean_followup)
    q = normal_quantile(level) * se
    return PercentChangeOfMeans(value, float(se), float(value - q), float(value + q))


def mean_percent_change_second_order(mean_b: float, mean_f: float, sd_b: float, sd_f: float, r: float) -> float:
    """Second-order (delta method) approximation of the mean of the percent changes,
    E[100 (f / b - 1)] ~ 100 (mf/mb (1 + cv_b^2) - r sd_f sd_b / mb^2 - 1), with cv_b = SDb / mb:
    E[f/b] ~ mf/mb - cov(f,b)/mb^2 + mf var(b)/mb^3 (Kendall and Stuart, ratio estimators). Shows
    how far the two percent changes part when baselines vary."""
    ratio = mean_f / mean_b - r * sd_f * sd_b / mean_b**2 + mean_f * sd_b**2 / mean_b**3
    return float(100 * (ratio - 1))


# ------------------------------------------------------------------------------ regression to the mean


def window_selection_shift(mu: float, sd: float, lower: float | None, upper: float | None) -> float:
    """E[X - mu | lower < X < upper] for X ~ N(mu, sd^2): the mean of a doubly truncated normal,
    sd (phi(a) - phi(b)) / (Phi(b) - Phi(a)), a = (lower - mu)/sd, b = (upper - mu)/sd (Johnson,
    Kotz and Balakrishnan, Continuous Univariate Distributions, vol. 1, ch. 13). Either end may be
    None (one-sided)."""
    a = -math.inf if lower is None else (lower - mu) / sd
    b = math.inf if upper is None else (upper - mu) / sd
    mass = stats.norm.cdf(b) - stats.norm.cdf(a)
    if mass <= 0:
        raise ValueError("the entry window has no probability under the assumed population")
    if b == math.inf:
        return float(sd * _mills(a))
    if a == -math.inf:
        return float(-sd * _mills(-b))
    return float(sd * (stats.norm.pdf(a) - stats.norm.pdf(b)) / mass)


def window_rtm(mu: float, sigma: float, reliability: float, lower: float | None, upper: float | None) -> float:
    """Expected regression to the mean (follow-up minus baseline, signed) of a group selected by
    lower < baseline < upper, nothing else changing: -(1 - reliability) x the selection shift.

    One-sided windows reduce to Barnett, van der Pols and Dobson (Int J Epidemiol 2005;34:215-220),
    -(sigma_w^2 / sigma) phi(z) / (1 - Phi(z)) with sigma_w^2 = (1 - rho) sigma^2, which is computed
    by :func:`auditor.stats.rtm.expected_rtm` and used here for that case."""
    if upper is None and lower is not None:
        return expected_rtm(mu, sigma, reliability, lower, "above")
    if lower is None and upper is not None:
        return expected_rtm(mu, sigma, reliability, upper, "below")
    return float(-(1 - reliability) * window_selection_shift(mu, sigma, lower, upper))


def rtm_grid(mus: Sequence[float], sigma: float, reliabilities: Sequence[float], lower: float | None,
             upper: float | None) -> list[tuple[float, float, float]]:
    """(mu, reliability, expected RTM) over an assumption grid: a sensitivity analysis, not an interval."""
    return [(float(m), float(rel), window_rtm(m, sigma, rel, lower, upper)) for m in mus for rel in reliabilities]


# ------------------------------------------------------------------------------ ordinal scales


def percent_change_under_recoding(mean_b: float, mean_f: float, shift: float) -> tuple[float, float]:
    """Percent change of the means with the codes as reported and with every code moved by
    ``shift`` (1..k read as 0..k-1, say): the change itself does not move, the percent does, so a
    percent change of an ordinal score measures its coding as well as the participants."""
    return (percent_change_of_means(mean_b, mean_f), percent_change_of_means(mean_b + shift, mean_f + shift))
