"""Relative change, its instability, and what percent change and responder rules cost.

Pure functions: arrays in, small frozen dataclasses out. The formulas, with their derivations, are in
docs/methods/percent-change.md; each function's docstring states the one it computes.

Conventions used throughout: ``baseline`` and ``followup`` are paired arrays (one entry per
participant); treatment arms enter a model as the 0/1 indicator columns of an
:class:`~auditor.stats.effects.ArmCoding`, whose contrasts carry the arm and control labels; a
treatment effect is an :class:`~auditor.stats.effects.ArmEffect` whose ``statistic`` is its estimate
divided by its standard error, the currency in which analyses on different scales are compared.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np
from scipy import stats

from .effects import ArmCoding, ArmContrast, ArmEffect, arm_effect
from .linear import fit_ols
from .splines import SplinePlan, choose_knots, flexible_basis

NEAR_ZERO_FRACTION = 0.05
"""A baseline below this fraction of the median baseline counts as near zero: a relative change from
it is dominated by measurement error in a small denominator (convention of this tool)."""

FAR_OUT_IQR = 3.0
"""Values beyond the quartiles by 3 interquartile ranges are 'far out' (Tukey 1977)."""

TIE_TOLERANCE = 1e-8
"""Relative tolerance when comparing a change with a responder threshold, so that a change of
exactly -0.5 computed in floating point as -0.49999999999 still meets 'at most -0.5'."""


# --------------------------------------------------------------------------- relative change


def percent_change(baseline, followup) -> np.ndarray:
    """100 (followup - baseline) / baseline, NaN where baseline <= 0.

    A percent change is undefined at a zero baseline and reverses its meaning below zero (a rise
    from -2 to -1 would be reported as -50%), so both are returned as NaN and counted by
    :func:`instability`.
    """
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    out = np.full(b.shape, np.nan)
    ok = np.isfinite(b) & np.isfinite(f) & (b > 0)
    out[ok] = 100.0 * (f[ok] - b[ok]) / b[ok]
    return out


def log_ratio(baseline, followup) -> np.ndarray:
    """log(followup / baseline), NaN unless both values are positive.

    The log ratio is symmetric (a doubling and a halving are +log 2 and -log 2) and additive over
    successive periods, which no percentage is (Tornqvist, Vartia and Vartia, Am Stat 1985;39:43).
    """
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    out = np.full(b.shape, np.nan)
    ok = np.isfinite(b) & np.isfinite(f) & (b > 0) & (f > 0)
    out[ok] = np.log(f[ok] / b[ok])
    return out


@dataclass(frozen=True)
class Instability:
    """Where a percent change is undefined or dominated by a small denominator."""

    n: int
    n_zero: int
    """Baselines exactly 0: percent change undefined."""
    n_negative: int
    """Baselines below 0: percent change reverses its sign convention."""
    n_near_zero: int
    """Positive baselines below ``fraction`` times the median baseline."""
    fraction: float
    median_baseline: float
    threshold: float
    """``fraction`` times the median baseline (NaN when the median is not positive)."""
    n_followup_nonpositive: int
    """Follow-up values at or below 0: the log ratio is undefined for them."""
    largest_rise: float
    largest_fall: float
    near_zero_largest: float
    """Largest absolute percent change among near-zero baselines (NaN when there are none)."""
    mean_shift_without_near_zero: float
    """Mean percent change minus the mean without the near-zero baselines (0 when there are none)."""

    @property
    def n_undefined(self) -> int:
        return self.n_zero + self.n_negative


def instability(baseline, followup, fraction: float = NEAR_ZERO_FRACTION) -> Instability:
    """Counts of zero, negative and near-zero baselines and the extreme percent changes.

    Near zero: 0 < baseline < fraction x median(baseline). The influence of those participants is
    reported as the shift in the mean percent change when they are left out.
    """
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    ok = np.isfinite(b) & np.isfinite(f)
    b, f = b[ok], f[ok]
    if len(b) == 0:
        raise ValueError("no complete baseline and follow-up pairs")
    med = float(np.median(b))
    threshold = fraction * med if med > 0 else math.nan
    near = (b > 0) & (b < threshold) if med > 0 else np.zeros(len(b), dtype=bool)
    pc = percent_change(b, f)
    defined = np.isfinite(pc)
    rise = float(np.max(pc[defined])) if defined.any() else math.nan
    fall = float(np.min(pc[defined])) if defined.any() else math.nan
    near_largest = float(np.max(np.abs(pc[near]))) if near.any() else math.nan
    shift = 0.0
    if near.any() and (defined & ~near).any():
        shift = float(np.mean(pc[defined]) - np.mean(pc[defined & ~near]))
    return Instability(
        n=int(len(b)), n_zero=int(np.sum(b == 0)), n_negative=int(np.sum(b < 0)),
        n_near_zero=int(near.sum()), fraction=fraction, median_baseline=med, threshold=threshold,
        n_followup_nonpositive=int(np.sum(f <= 0)), largest_rise=rise, largest_fall=fall,
        near_zero_largest=near_largest, mean_shift_without_near_zero=shift)


@dataclass(frozen=True)
class Shape:
    """The distribution of a change variable."""

    n: int
    skewness: float
    """Adjusted Fisher-Pearson coefficient G1 = g1 sqrt(n(n-1)) / (n-2)."""
    skew_p: float
    """D'Agostino's test of zero skewness (NaN below 8 values)."""
    n_far_out: int
    """Values beyond Q1 - 3 IQR or Q3 + 3 IQR (Tukey 1977)."""
    n_at_floor: int
    """Values at a stated floor (-100% for a percent change; 0 when no floor is given)."""
    minimum: float
    median: float
    maximum: float

    @property
    def floor_share(self) -> float:
        """The share of values at the floor, ``n_at_floor / n``."""
        return self.n_at_floor / self.n


def shape(values, floor: float | None = None) -> Shape:
    """Skewness, far-out values and the count at a floor, ignoring NaN.

    G1 is scipy's ``skew(bias=False)``; the test of zero skewness is D'Agostino's (scipy
    ``skewtest``), which needs at least 8 values.
    """
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if len(v) < 3:
        raise ValueError(f"a distribution needs at least 3 values, not {len(v)}")
    if np.ptp(v) == 0:
        skew = 0.0
        p = math.nan
    else:
        skew = float(stats.skew(v, bias=False))
        p = float(stats.skewtest(v).pvalue) if len(v) >= 8 else math.nan
    q1, q3 = np.quantile(v, [0.25, 0.75])
    iqr = q3 - q1
    far = int(np.sum((v < q1 - FAR_OUT_IQR * iqr) | (v > q3 + FAR_OUT_IQR * iqr))) if iqr > 0 else 0
    at_floor = int(np.sum(np.isclose(v, floor, rtol=0, atol=1e-9))) if floor is not None else 0
    return Shape(int(len(v)), skew, p, far, at_floor, float(v.min()), float(np.median(v)), float(v.max()))


def largest_changes(percent, top: int) -> np.ndarray:
    """Indices of the ``top`` largest |percent change|, undefined (NaN) values first, ties in input
    order (a stable sort), so that the participants who dominate a mean of percentages are listed."""
    pc = np.asarray(percent, dtype=float)
    return np.argsort(-np.where(np.isfinite(pc), np.abs(pc), np.inf), kind="mergesort")[:top]


# --------------------------------------------------------------------------- treatment effects


LEAST_SQUARES = "least squares"
PROPORTIONAL_ODDS = "proportional odds"


@dataclass(frozen=True)
class RefitDesign:
    """An analysis laid out for refitting on resampled rows.

    ``model`` is :data:`LEAST_SQUARES` (``X`` starts with the constant) or :data:`PROPORTIONAL_ODDS`
    (no constant: the cut-points are the intercepts); then come the baseline columns and last the arm
    indicators, one per entry of ``contrasts``. ``valid`` marks the participants the analysis can use
    (finite response and covariates); the arrays are full length so that a bootstrap index over all
    participants applies. ``plan`` is the spline of baseline where one was chosen; ``baseline_terms``
    says how baseline enters a proportional-odds design: ``categories`` (one indicator per observed
    value above the lowest) or ``spline`` (a restricted cubic spline).
    """

    analysis: str
    model: str
    y: np.ndarray
    X: np.ndarray
    names: tuple[str, ...]
    contrasts: tuple[ArmContrast, ...]
    valid: np.ndarray
    plan: SplinePlan | None = None
    baseline_terms: str | None = None

    @property
    def arm_columns(self) -> tuple[str, ...]:
        return tuple(c.column for c in self.contrasts)


def ols_design(analysis: str, y, covariates: dict[str, np.ndarray], coding: ArmCoding,
               plan: SplinePlan | None = None) -> RefitDesign:
    """Intercept, covariates, then arm indicators; rows with any non-finite entry marked invalid."""
    y = np.asarray(y, dtype=float)
    cols = {**covariates, **coding.columns}
    parts = [np.ones(len(y))] + [np.asarray(c, dtype=float) for c in cols.values()]
    X = np.column_stack(parts)
    valid = np.isfinite(y) & np.all(np.isfinite(X), axis=1)
    return RefitDesign(analysis, LEAST_SQUARES, y, X, ("(intercept)",) + tuple(cols), coding.contrasts, valid, plan)


def ols_effects(design: RefitDesign, level: float = 0.95) -> list[ArmEffect]:
    """Fit the design by least squares (:func:`fit_ols`) and return one effect per arm contrast.

    CIs are t-based on the residual degrees of freedom.
    """
    v = design.valid
    cols = {name: design.X[v, i] for i, name in enumerate(design.names) if i > 0}
    fit = fit_ols(design.y[v], cols)
    return [arm_effect(design.analysis, c, fit, level, n=int(v.sum())) for c in design.contrasts]


def t_statistics(design: RefitDesign, rows: np.ndarray | None = None) -> np.ndarray:
    """t statistics of the arm columns on the given rows (all valid rows by default).

    The same least-squares fit as :func:`ols_effects`, done with plain linear algebra so that a
    bootstrap of a thousand refits stays fast: beta = (X'X)^-1 X'y, s^2 = RSS/(n - p),
    t_j = beta_j / sqrt(s^2 [(X'X)^-1]_jj). Returns NaN where the resampled design is singular.
    """
    idx = np.flatnonzero(design.valid) if rows is None else rows[design.valid[rows]]
    X, y = design.X[idx], design.y[idx]
    n, p = X.shape
    arm_idx = [design.names.index(a) for a in design.arm_columns]
    if n <= p:
        return np.full(len(arm_idx), np.nan)
    xtx = X.T @ X
    if np.linalg.matrix_rank(xtx) < p:
        return np.full(len(arm_idx), np.nan)
    inv = np.linalg.inv(xtx)
    beta = inv @ (X.T @ y)
    resid = y - X @ beta
    s2 = float(resid @ resid) / (n - p)
    return np.array([beta[j] / math.sqrt(s2 * inv[j, j]) if s2 > 0 else np.nan for j in arm_idx])


def spline_columns(x, plan: SplinePlan, prefix: str) -> dict[str, np.ndarray]:
    """The columns of :func:`flexible_basis` named ``prefix1``, ``prefix2``, ...

    Non-finite x are given NaN rows (so that :func:`ols_design` marks them invalid).
    """
    x = np.asarray(x, dtype=float)
    ok = np.isfinite(x)
    basis = np.full((len(x), plan.nonlinear_df + 1), np.nan)
    basis[ok] = flexible_basis(x[ok], plan)
    return {f"{prefix}{j + 1}": basis[:, j] for j in range(basis.shape[1])}


def percent_change_design(baseline, followup, coding: ArmCoding) -> RefitDesign:
    """Percent change regressed on arm alone: the coefficient is the difference in mean percent
    change between an arm and the control (the usual planned analysis of percent change)."""
    return ols_design("percent change by arm", percent_change(baseline, followup), {}, coding)


def log_ancova_design(baseline, followup, coding: ArmCoding, plan: SplinePlan | None = None) -> RefitDesign:
    """ANCOVA on the log scale: log f = a + s(log b) + sum_k c_k [arm = k] + e.

    s is the restricted cubic spline of :mod:`auditor.stats.splines` with knots chosen by
    :func:`choose_knots` on log baseline. exp(c_k) is the ratio of geometric means of follow-up,
    arm k over control, at equal baseline.
    """
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        lb = np.where(b > 0, np.log(np.where(b > 0, b, 1.0)), np.nan)
        lf = np.where(f > 0, np.log(np.where(f > 0, f, 1.0)), np.nan)
    plan = plan or choose_knots(lb[np.isfinite(lb) & np.isfinite(lf)])
    return ols_design("log-scale ANCOVA", lf, spline_columns(lb, plan, "log baseline s"), coding, plan)


def raw_ancova_design(baseline, followup, coding: ArmCoding, plan: SplinePlan | None = None) -> RefitDesign:
    """ANCOVA on the measured scale: f = a + s(b) + sum_k c_k [arm = k] + e."""
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    plan = plan or choose_knots(b[np.isfinite(b) & np.isfinite(f)])
    return ols_design("ANCOVA", f, spline_columns(b, plan, "baseline s"), coding, plan)


def responder_design(responder, coding: ArmCoding) -> RefitDesign:
    """The 0/1 responder indicator on arm: the coefficient is the difference in responder
    proportions; its SE is the pooled within-arm one (least squares on a binary response)."""
    return ols_design("responders by arm", responder, {}, coding)


def geometric_mean_ratio(baseline, followup, coding: ArmCoding, level: float = 0.95) -> list[ArmEffect]:
    """Log-scale ANCOVA effects (back-transform with :meth:`ArmEffect.exp` for the ratio and its CI)."""
    return ols_effects(log_ancova_design(baseline, followup, coding), level)


def proportional_odds_effects(baseline, followup, coding: ArmCoding, level: float = 0.95,
                              plan: SplinePlan | None = None) -> list[ArmEffect]:
    """Proportional-odds ANCOVA of follow-up on a spline of baseline plus arm.

    logit P(F >= y_j | b, arm) = alpha_j + s(b) + sum_k c_k [arm = k] (McCullagh 1980), every
    distinct follow-up value a level, so the effect does not depend on the scale of follow-up:
    exp(c_k) is the odds ratio of a higher follow-up, arm k against control. Raises the fitter's
    OrdinalFitError when the model cannot be fitted.
    """
    from .ordinal import fit_proportional_odds

    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    ok = np.isfinite(b) & np.isfinite(f)
    plan = plan or choose_knots(b[ok])
    cols = {**spline_columns(b[ok], plan, "baseline s"),
            **coding.subset(ok).columns}
    names = list(cols)
    fit = fit_proportional_odds(f[ok], np.column_stack(list(cols.values())), names=names)
    return [arm_effect("proportional-odds ANCOVA", c, fit, level, n=int(ok.sum())) for c in coding.contrasts]


def ordinal_ancova_design(baseline, followup, coding: ArmCoding, categorical_baseline: bool) -> RefitDesign:
    """Proportional-odds ANCOVA logit P(F >= y_j | b, arm) = alpha_j + g(b) + sum_k c_k [arm = k]
    (McCullagh 1980), the reference analysis of an ordinal outcome: it uses only the order of the
    follow-up levels, so no coding of them matters. g(b) is one indicator per observed baseline value
    above the lowest when ``categorical_baseline`` (a declared ordinal scale: no shape assumed for
    the baseline), else a restricted cubic spline of baseline."""
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    valid = np.isfinite(b) & np.isfinite(f)
    if categorical_baseline:
        values = np.unique(b[valid])
        cols = {f"baseline = {v:g}": (b == v).astype(float) for v in values[1:]}
        terms = "categories"
    else:
        cols = spline_columns(b, choose_knots(b[valid]), "baseline s")
        terms = "spline"
    cols.update({k: np.asarray(v, dtype=float) for k, v in coding.columns.items()})
    X = np.column_stack(list(cols.values()))
    valid &= np.all(np.isfinite(X), axis=1)
    return RefitDesign("proportional-odds ANCOVA", PROPORTIONAL_ODDS, f, X, tuple(cols), coding.contrasts, valid,
                       baseline_terms=terms)


def _ordinal_fit(design: RefitDesign, idx: np.ndarray):
    """Fit on the rows ``idx``, leaving out baseline columns that are constant there (a baseline
    category that a resample happens to miss); an arm column must vary."""
    from .ordinal import fit_proportional_odds

    X = design.X[idx]
    keep = [j for j, name in enumerate(design.names)
            if name in design.arm_columns or np.ptp(X[:, j]) > 0]
    return fit_proportional_odds(design.y[idx], X[:, keep], names=[design.names[j] for j in keep])


def ordinal_effects(design: RefitDesign, level: float = 0.95) -> list[ArmEffect]:
    """One effect per arm contrast: the log odds ratio of a higher follow-up with its Wald interval.
    Raises the fitter's OrdinalFitError when the model cannot be fitted."""
    idx = np.flatnonzero(design.valid)
    fit = _ordinal_fit(design, idx)
    return [arm_effect(design.analysis, c, fit, level, n=int(idx.size)) for c in design.contrasts]


def ordinal_z_statistics(design: RefitDesign, rows: np.ndarray | None = None) -> np.ndarray:
    """Wald z of the arm columns refitted on the given rows (all valid rows by default); NaN where the
    resampled model cannot be fitted (a level missing from an arm, separation), which the bootstrap
    counts as a failed replicate."""
    from .ordinal import OrdinalFitError

    idx = np.flatnonzero(design.valid) if rows is None else rows[design.valid[rows]]
    try:
        fit = _ordinal_fit(design, idx)
    except (OrdinalFitError, ArithmeticError, np.linalg.LinAlgError):
        return np.full(len(design.contrasts), np.nan)
    return np.array([fit.wald(name).z for name in design.arm_columns])


def design_statistics(design: RefitDesign, rows: np.ndarray | None = None) -> np.ndarray:
    """Standardised arm effects of either kind of design on the given rows."""
    return ordinal_z_statistics(design, rows) if design.model == PROPORTIONAL_ODDS else t_statistics(design, rows)


def design_effects(design: RefitDesign, level: float = 0.95) -> list[ArmEffect]:
    """One effect per arm contrast, by the design's own model."""
    return ordinal_effects(design, level) if design.model == PROPORTIONAL_ODDS else ols_effects(design, level)


# --------------------------------------------------------------------------- efficiency


def relative_efficiency(statistic: float, reference_statistic: float) -> float:
    """Empirical relative efficiency of an analysis against a reference: (z / z_ref)^2.

    For two consistent tests of the same null hypothesis, the ratio of the sample sizes they need
    for equal power is the ratio of their squared noncentrality parameters (Pitman efficiency;
    Noether 1955). The observed standardised effects (estimate / SE) estimate those noncentralities
    in the trial at hand, so (z / z_ref)^2 < 1 means the analysis needs 1 / (z / z_ref)^2 times the
    reference's participants. It is noisy when the reference effect is small.
    """
    if not (math.isfinite(statistic) and math.isfinite(reference_statistic)) or reference_statistic == 0:
        return math.nan
    return (statistic / reference_statistic) ** 2


def extra_participants(efficiency: float) -> float:
    """The sample-size cost of an analysis with relative efficiency E: 1/E - 1, the fraction more
    participants it needs than the reference for equal power (negative: fewer); infinite when E is not
    positive (Noether 1955, as in :func:`relative_efficiency`)."""
    return 1 / efficiency - 1 if efficiency > 0 else math.inf


@dataclass(frozen=True)
class EfficiencyInterval:
    lower: float
    upper: float
    replicates: int
    failed: int


def bootstrap_efficiency(statistics: Callable[[np.ndarray], tuple[float, float]], strata: Sequence,
                         n_boot: int, seed: int, level: float = 0.95) -> EfficiencyInterval:
    """Percentile bootstrap interval for (z / z_ref)^2, resampling participants within strata.

    ``statistics(rows)`` returns (z, z_ref) computed on the participant indices ``rows``. Resampling
    within arm keeps each arm's size fixed, as randomisation did (Efron and Tibshirani 1993,
    section 6.9 on stratified two-sample resampling). Replicates where a statistic is not finite
    are dropped and counted.
    """
    strata = np.asarray(strata, dtype=object)
    groups = [np.flatnonzero(strata == s) for s in dict.fromkeys(strata.tolist())]
    rng = np.random.default_rng(seed)
    values = []
    failed = 0
    for _ in range(n_boot):
        rows = np.concatenate([g[rng.integers(0, len(g), len(g))] for g in groups])
        z, z_ref = statistics(rows)
        e = relative_efficiency(z, z_ref)
        if math.isfinite(e):
            values.append(e)
        else:
            failed += 1
    if len(values) < max(10, n_boot // 2):
        return EfficiencyInterval(math.nan, math.nan, len(values), failed)
    lo, hi = np.quantile(values, [0.5 - level / 2, 0.5 + level / 2])
    return EfficiencyInterval(float(lo), float(hi), len(values), failed)


# --------------------------------------------------------------------------- responder rules


def responder_indicator(baseline, followup, basis: str, threshold: float, direction: str) -> np.ndarray:
    """1 for a responder, 0 otherwise, NaN where the rule cannot be evaluated.

    basis ``change``: d = f - b; ``percent-change``: d = 100 (f - b) / b (NaN for b <= 0).
    direction ``at-least``: d >= threshold; ``at-most``: d <= threshold; equality within
    TIE_TOLERANCE x max(1, |threshold|).
    """
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    d = f - b if basis == "change" else percent_change(b, f)
    tol = TIE_TOLERANCE * max(1.0, abs(threshold))
    out = np.full(d.shape, np.nan)
    ok = np.isfinite(d)
    if direction == "at-least":
        out[ok] = (d[ok] >= threshold - tol).astype(float)
    elif direction == "at-most":
        out[ok] = (d[ok] <= threshold + tol).astype(float)
    else:
        raise ValueError(f"unknown responder direction '{direction}'")
    return out


def dichotomisation_efficiency(z_cut: float) -> float:
    """Efficiency of comparing proportions above a cut, against comparing means, for a normal outcome.

    Two arms, outcome N(mu_g, sigma^2), responders are those beyond c; z = (c - mu)/sigma. For a
    small shift delta the proportion moves by phi(z) delta / sigma with variance Phi(z)(1 - Phi(z))/n,
    the mean moves by delta with variance sigma^2/n, so the ratio of squared noncentralities is

        E(z) = phi(z)^2 / [Phi(z) (1 - Phi(z))],

    2/pi = 0.637 at the median (z = 0) and smaller for any other cut (Altman and Royston, BMJ
    2006;332:1080 give the median case). The sample size needed for equal power is 1/E(z) times
    that of the comparison of means.
    """
    p = stats.norm.cdf(z_cut)
    q = stats.norm.sf(z_cut)
    if p * q == 0:
        return 0.0
    return float(stats.norm.pdf(z_cut) ** 2 / (p * q))


def change_vs_ancova_efficiency(sd_baseline: float, sd_followup: float, rho: float) -> float:
    """Efficiency of analysing the change d = f - b against ANCOVA of f on b, normal theory.

    Var(d) = s_b^2 + s_f^2 - 2 rho s_b s_f; the ANCOVA residual variance is s_f^2 (1 - rho^2);
    the efficiency is their ratio s_f^2 (1 - rho^2) / Var(d), at most 1 (equal to 1 when the slope
    rho s_f / s_b is 1). With equal SDs it is (1 + rho) / 2.
    """
    var_d = sd_baseline**2 + sd_followup**2 - 2 * rho * sd_baseline * sd_followup
    if var_d <= 0:
        return math.nan
    return float(sd_followup**2 * (1 - rho**2) / var_d)


@dataclass(frozen=True)
class ResponderCost:
    """The normal-theory cost of a responder rule against the continuous ANCOVA (pooled data)."""

    scale: str
    """``change`` (d = f - b) or ``log ratio`` (d = log f - log b, for a percent-change rule)."""
    n: int
    cut: float
    """The cut on the d scale: the threshold, moved to midway between adjacent observed values
    when d is discrete, and log(1 + threshold/100) for a percent-change rule."""
    mean: float
    sd: float
    z_cut: float
    share_observed: float
    share_normal: float
    """The responder share a normal d with this mean and SD predicts."""
    dichotomy_efficiency: float
    change_efficiency: float
    efficiency: float
    """dichotomy_efficiency x change_efficiency: responder comparison against ANCOVA."""

    @property
    def inflation(self) -> float:
        """Sample size for the responder comparison over that for ANCOVA, for equal power."""
        return 1.0 / self.efficiency if self.efficiency > 0 else math.inf


def _effective_cut(d: np.ndarray, responder: np.ndarray, threshold: float, direction: str) -> float:
    """The threshold, or the midpoint between the closest responder and non-responder values.

    A continuous approximation to a discrete d should put the cut between the support points it
    separates (a continuity correction): with d on steps of 1/6, 'at most -0.5' is d < -5/12.
    """
    yes, no = d[responder == 1], d[responder == 0]
    if len(yes) == 0 or len(no) == 0:
        return threshold
    if direction == "at-most":
        inner, outer = float(np.max(yes)), float(np.min(no))
    else:
        inner, outer = float(np.min(yes)), float(np.max(no))
    return 0.5 * (inner + outer)


def responder_cost(baseline, followup, basis: str, threshold: float, direction: str) -> ResponderCost:
    """Sample-size inflation of a responder comparison relative to ANCOVA, from pooled data.

    With d the change (or the log ratio for a percent-change rule), normally distributed with the
    pooled mean m and SD s, the responder rule is a cut of d at c, z = (c - m)/s, and

        efficiency = [phi(z)^2 / (Phi(z)(1 - Phi(z)))] x [s_f^2 (1 - rho^2) / s_d^2],

    the dichotomisation efficiency times the efficiency of change against ANCOVA (both on the log
    scale for a percent-change rule). Pooling over arms adds the treatment effect to the SDs, which
    moves z toward 0 and so understates the loss slightly; no arm label is used.
    """
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    resp = responder_indicator(b, f, basis, threshold, direction)
    if basis == "change":
        x, y, scale = b, f, "change"
        cut_threshold = threshold
    else:
        if threshold <= -100:
            raise ValueError("a percent-change threshold must exceed -100%")
        with np.errstate(divide="ignore", invalid="ignore"):
            x = np.where(b > 0, np.log(np.where(b > 0, b, 1.0)), np.nan)
            y = np.where(f > 0, np.log(np.where(f > 0, f, 1.0)), np.nan)
        scale = "log ratio"
        cut_threshold = math.log1p(threshold / 100.0)
    ok = np.isfinite(x) & np.isfinite(y) & np.isfinite(resp)
    if ok.sum() < 10:
        raise ValueError(f"only {int(ok.sum())} participants have a responder status on the {scale} scale")
    x, y, resp = x[ok], y[ok], resp[ok]
    d = y - x
    cut = _effective_cut(d, resp, cut_threshold, direction)
    m, s = float(np.mean(d)), float(np.std(d, ddof=1))
    if s == 0:
        raise ValueError("the change is the same for every participant")
    z = (cut - m) / s
    below = stats.norm.cdf(z)
    share_normal = float(below if direction == "at-most" else 1 - below)
    rho = float(np.corrcoef(x, y)[0, 1])
    e_dich = dichotomisation_efficiency(z)
    e_change = change_vs_ancova_efficiency(float(np.std(x, ddof=1)), float(np.std(y, ddof=1)), rho)
    return ResponderCost(scale, int(ok.sum()), float(cut), m, s, float(z), float(np.mean(resp)),
                         share_normal, e_dich, e_change, e_dich * e_change)


@dataclass(frozen=True)
class SimulatedEfficiency:
    value: float
    mc_se: float
    reps: int


def simulate_dichotomisation_efficiency(z_cut: float, rho: float, n_per_arm: int, reps: int, seed: int,
                                        noncentrality: float = 3.0) -> SimulatedEfficiency:
    """Monte Carlo efficiency of a responder-on-change comparison against ANCOVA.

    (B, F) standard bivariate normal with correlation rho in each arm; the arms' follow-up means
    are -delta/2 and +delta/2, delta = noncentrality x sqrt(2 (1 - rho^2) / n) so that ANCOVA has
    the stated noncentrality; responders have F - B above z_cut x sqrt(2 (1 - rho)). Centring the
    arms on the cut keeps the second-order bias of the local approximation out. Each replicate
    gives the two-proportion z (pooled variance) and the ANCOVA t (pooled within-arm slope); the
    efficiency is (mean z / mean t)^2 with a delta-method Monte Carlo SE over replicates.
    """
    rng = np.random.default_rng(seed)
    n = n_per_arm
    delta = noncentrality * math.sqrt(2 * (1 - rho**2) / n)
    cut = z_cut * math.sqrt(2 * (1 - rho))
    arms = []
    for shift in (-delta / 2, delta / 2):
        b = rng.standard_normal((reps, n))
        f = rho * b + math.sqrt(1 - rho**2) * rng.standard_normal((reps, n)) + shift
        arms.append((b, f))
    (b0, f0), (b1, f1) = arms
    p0 = np.mean(f0 - b0 > cut, axis=1)
    p1 = np.mean(f1 - b1 > cut, axis=1)
    pbar = 0.5 * (p0 + p1)
    z_resp = (p1 - p0) / np.sqrt(pbar * (1 - pbar) * 2 / n)
    t_anc = _two_arm_ancova_t(b0, f0, b1, f1)
    mr, ma = float(np.mean(z_resp)), float(np.mean(t_anc))
    ratio = mr / ma
    cov = np.cov(z_resp, t_anc)
    var_ratio = (cov[0, 0] - 2 * ratio * cov[0, 1] + ratio**2 * cov[1, 1]) / (ma**2 * reps)
    return SimulatedEfficiency(ratio**2, float(2 * abs(ratio) * math.sqrt(max(var_ratio, 0.0))), reps)


def _two_arm_ancova_t(b0, f0, b1, f1) -> np.ndarray:
    """ANCOVA t for arm 1 against arm 0, row by row (each row one replicate).

    Estimate (F1 - F0) - beta (B1 - B0), beta the pooled within-arm slope Sbf/Sbb; variance
    s^2 (1/n0 + 1/n1 + (B1 - B0)^2 / Sbb) with s^2 = (Sff - Sbf^2/Sbb)/(n0 + n1 - 3).
    """
    n0, n1 = b0.shape[1], b1.shape[1]

    def centred(a):
        return a - a.mean(axis=1, keepdims=True)

    cb0, cf0, cb1, cf1 = centred(b0), centred(f0), centred(b1), centred(f1)
    sbb = np.sum(cb0**2, axis=1) + np.sum(cb1**2, axis=1)
    sbf = np.sum(cb0 * cf0, axis=1) + np.sum(cb1 * cf1, axis=1)
    sff = np.sum(cf0**2, axis=1) + np.sum(cf1**2, axis=1)
    beta = sbf / sbb
    db = b1.mean(axis=1) - b0.mean(axis=1)
    est = (f1.mean(axis=1) - f0.mean(axis=1)) - beta * db
    s2 = (sff - sbf**2 / sbb) / (n0 + n1 - 3)
    return est / np.sqrt(s2 * (1 / n0 + 1 / n1 + db**2 / sbb))


# --------------------------------------------------------------------------- responder and baseline


@dataclass(frozen=True)
class ResponderCurve:
    """Logistic regression of responder status on baseline: logit P = a + g x baseline."""

    n: int
    slope: float
    slope_lower: float
    slope_upper: float
    p_value: float
    x_low: float
    x_high: float
    """The 10th and 90th percentiles of baseline."""
    prob_low: float
    prob_high: float
    grid: list[float]
    prob: list[float]
    lower: list[float]
    upper: list[float]


def responder_on_baseline(baseline, responder, level: float = 0.95, points: int = 60) -> ResponderCurve:
    """Maximum-likelihood logistic fit (statsmodels Logit) with Wald intervals.

    The curve's band is expit(eta +/- q se(eta)) with se(eta) from the covariance of (a, g), so it
    stays inside (0, 1). Raises ValueError when every participant has the same status or the fit
    separates perfectly.
    """
    from statsmodels.discrete.discrete_model import Logit
    from statsmodels.tools.sm_exceptions import PerfectSeparationError
    from statsmodels.tools.tools import add_constant

    x = np.asarray(baseline, dtype=float)
    r = np.asarray(responder, dtype=float)
    ok = np.isfinite(x) & np.isfinite(r)
    x, r = x[ok], r[ok]
    if len(np.unique(r)) < 2:
        raise ValueError("every participant has the same responder status")
    if np.ptp(x) == 0:
        raise ValueError("baseline is the same for every participant")
    X = add_constant(x)
    try:
        res = Logit(r, X).fit(disp=0, maxiter=100)
    except (PerfectSeparationError, np.linalg.LinAlgError) as exc:
        raise ValueError(f"the logistic fit failed ({exc})") from None
    if not res.mle_retvals.get("converged", False):
        raise ValueError("the logistic fit did not converge (responder status is almost separated by baseline)")
    q = stats.norm.ppf(0.5 + level / 2)
    coef, cov = np.asarray(res.params), np.asarray(res.cov_params())
    g, se_g = float(coef[1]), float(math.sqrt(cov[1, 1]))
    grid = np.linspace(x.min(), x.max(), points)
    G = np.column_stack([np.ones(points), grid])
    eta = G @ coef
    se = np.sqrt(np.einsum("ij,jk,ik->i", G, cov, G))
    x_low, x_high = np.quantile(x, [0.1, 0.9])
    p_low, p_high = (float(v) for v in _expit(coef[0] + coef[1] * np.array([x_low, x_high])))
    return ResponderCurve(int(len(x)), g, g - q * se_g, g + q * se_g, float(2 * stats.norm.sf(abs(g / se_g))),
                          float(x_low), float(x_high), p_low, p_high, grid.tolist(),
                          _expit(eta).tolist(), _expit(eta - q * se).tolist(), _expit(eta + q * se).tolist())


def _expit(v):
    return 1.0 / (1.0 + np.exp(-np.asarray(v, dtype=float)))


# --------------------------------------------------------------------------- coding of ordinal scales


def recoding_shift(levels: Sequence[float]) -> float:
    """The shift that moves an ordinal scale's codes by one: -1 when its lowest code is 1 or more
    (1..k becomes 0..k-1), +1 otherwise (0..k-1 becomes 1..k). Both codings are equally valid
    labels of the same ordered categories, so a summary that changes between them measures the
    coding, not the participants."""
    return -1.0 if min(levels) >= 1 else 1.0


@dataclass(frozen=True)
class CodingSummary:
    """The pooled percent change of ordinal codes under one coding."""

    n_undefined: int
    """Participants whose percent change is undefined under this coding (baseline code at or below 0)."""
    mean: float | None
    """Mean of the defined percent changes; None when none is defined."""


def coding_summary(baseline, followup) -> CodingSummary:
    """Count of undefined percent changes (:func:`percent_change`) and the mean of the rest."""
    pc = percent_change(baseline, followup)
    defined = np.isfinite(pc)
    return CodingSummary(int(np.sum(~defined)), float(np.nanmean(pc)) if defined.any() else None)


def relative_difference(before: float | None, after: float | None) -> float:
    """|after - before| / |before|: how far a summary moves when the coding changes; infinite when
    either is missing or ``before`` is 0 (no finite relative change exists)."""
    if before is None or after is None or before == 0:
        return math.inf
    return abs(after - before) / abs(before)
