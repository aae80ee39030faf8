"""Regression to the mean: was the group selected on this outcome, and how much change does that alone produce?

When participants enter because one reading lay beyond a cutoff, their mean on any later reading is
expected to move back toward the population mean even with no treatment (Barnett, van der Pols and
Dobson 2005). The check finds the selection (the entry criterion in study.toml, or a truncation edge
in the screening or baseline distribution), chooses the scale on which the reading is close to
normal, estimates the unselected population's mean and SD by the truncated-normal MLE and the
reliability of one reading, computes the expected change with a confidence interval, and sets it
beside the change actually observed (control arm; all participants in a single-arm audit; both arms
pooled in a blinded one). The formulas live in :mod:`auditor.stats.rtm`; the rules and thresholds are
module constants documented in docs/methods/regression-to-mean.md.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..references import REFERENCES, add_reference, cite
from ..results import Figure, Verdict, interval_words, level_label
from ..stats.linear import mean_t_interval, slope_with_se
from ..stats.rtm import (bias_after_second_baseline, expected_rtm, fit_truncated_normal, icc_oneway,
                         edge_test_scale, rtm_with_ci, shrunk_values, truncation_edge_test)
from ..stats.rtm import (fit_window_normal, product_interval, rtm_window_with_ci, selection_shift_with_se,
                         window_mean_shift)
from .common import Sections, estimate, fmt, fmt_p, result
from .registry import CheckContext, NotAssessable, register

CHECK_ID = "regression-to-mean"
TITLE = "Regression to the mean"

ALPHA = 0.05
"""Family-wise level of the truncation-edge tests when no criterion is declared, split equally
(Bonferroni) over the readings tested (convention)."""
EDGE_MIN_DISTINCT = 20
"""An edge test is run only on a reading with at least this many distinct values (as in the
change-score check; convention of this tool)."""
LOG_MARGIN = 2.0
"""For sizing, the log scale is chosen only when its truncated-normal log-likelihood (with the
Jacobian) beats the raw one by more than this, a likelihood ratio above e^2 = 7.4; near-ties stay on
the raw scale, where the two give practically the same answer (convention of this tool)."""
MIN_SELECTED = 20
"""Fewest participants with the reading that decided entry for the truncated-normal fit (convention)."""
MIN_PAIRS = 10
"""Fewest complete pairs for a slope, an ICC or an observed mean change (convention)."""
MATERIAL_SHARE = 0.10
"""The descriptive ``observed`` sub-finding is a caution when the expected shift is at least this share
of the observed change (convention of this tool); it does not set the check's verdict."""
MATERIAL_SD = 0.10
"""The one materiality threshold of the check: an expected shift is material when its whole confidence
interval lies beyond this many SDs of the unselected population (sigma, on the analysis scale), on the
side of the shift (convention of this tool)."""
WITHIN_ARM_DESIGNS = ("single-arm",)
"""Designs whose effect is a within-arm (before-after) change, which carries regression to the mean
in full; in a randomised parallel design it affects both arms alike and the contrast is not biased."""
WITHIN_ARM_EFFECT = "within-arm-change"
"""The judged design of a parallel trial whose outcome declares ``effect_basis = "within-arm-change"``:
it reports within-arm change as the treatment effect, which carries regression to the mean in full
although the design has a control arm."""
WITHIN_ARM_BIAS = ("within-arm change, reported here as the treatment effect, is biased by regression to "
                   "the mean")
BIASED_BY_RTM = ("within-arm change, before-after claims, readings of baseline subgroups (those who start "
                 "worse seeming to benefit more) and responder shares")
"""What regression to the mean biases in a randomised parallel trial."""
NEGLIGIBLE_EXCLUDED = 0.01
"""A declared criterion whose cutoff leaves less than this share of the fitted unselected population
on its excluded side selects no one out (convention of this tool)."""
VIOLATION_SHARE = 0.05
"""More than this share of entry readings on the wrong side of the criterion is reported as the
criterion not being honoured (convention of this tool)."""
RHO_CAP = 0.99
"""A reliability estimate above this (possible by chance when it is near 1) is capped here."""
DRAWS_FULL, DRAWS_QUICK = 4000, 1000
"""Parametric bootstrap draws for the CI of the expected RTM."""
NULL_FULL, NULL_QUICK = 999, 499
"""Null samples for the Monte Carlo p-value of the edge test."""

_READINGS = ("screening", "entry_value", "baseline", "followup")

def _reference(key: str, text: str) -> str:
    """Use a reference already registered under ``key`` (by any module), else register it."""
    return key if key in REFERENCES else add_reference(key, text)


_reference("pearson-1903", "Pearson K. Mathematical contributions to the theory of evolution. XI. On the "
           "influence of natural selection on the variability and correlation of organs. Philos Trans R Soc "
           "Lond A 1903;200:1-66.")
_reference("cohen-1991", "Cohen AC. Truncated and Censored Samples: Theory and Applications. Marcel Dekker, "
           "1991.")
_reference("goodman-1960", "Goodman LA. On the exact variance of products. J Am Stat Assoc 1960;55:708-713.")
_reference("kelley-1947", "Kelley TL. Fundamentals of Statistics. Harvard University Press, 1947.")


def _applies(spec, design) -> bool:
    return spec.baseline_visit is not None


# ----------------------------------------------------------------------------- records


@dataclass(frozen=True)
class Readings:
    """One row per participant: each reading as a float array (NaN where missing), and the arm only
    when the audit may read it (unblinded, parallel-group)."""

    cols: dict[str, np.ndarray]
    arm: np.ndarray | None

    @classmethod
    def of(cls, data, ctx) -> "Readings":
        frame = data.frame
        cols = {c: frame[c].to_numpy(float) for c in _READINGS if c in frame.columns}
        arm = None if ctx.blinded or data.design == "single-arm" else frame["arm"].to_numpy(object)
        return cls(cols, arm)

    def has(self, column: str) -> bool:
        return column in self.cols

    def present(self, column: str) -> np.ndarray:
        v = self.cols.get(column, np.array([]))
        return v[np.isfinite(v)]

    def subset(self, keep: np.ndarray) -> "Readings":
        return Readings({c: v[keep] for c, v in self.cols.items()}, None if self.arm is None else self.arm[keep])

    def complete(self, *columns: str, rows: np.ndarray | None = None) -> list[np.ndarray]:
        """The named readings of participants who have all of them (within ``rows``)."""
        ok = np.ones(len(next(iter(self.cols.values()))), bool) if rows is None else rows.copy()
        for c in columns:
            ok &= np.isfinite(self.cols[c])
        return [self.cols[c][ok] for c in columns]


@dataclass(frozen=True)
class EdgeFinding:
    """One truncation-edge test of one pre-treatment reading."""

    column: str
    visit: str
    scale: str
    """The scale the test was run on (:func:`edge_test_scale`)."""
    test: object
    level: float
    edge: float
    """The edge on the original scale (the sample minimum or maximum itself)."""

    @property
    def flagged(self) -> bool:
        return self.test.p_value < self.level

    @property
    def scale_note(self) -> str:
        return "" if self.scale == "raw" else f" ({self.scale} scale)"


@dataclass(frozen=True)
class Selection:
    """The reading that decided entry, its cutoff (original scale) and the side that was kept."""

    column: str
    visit: str
    cutoff: float
    direction: str
    source: str
    """``criterion`` (declared in study.toml) or ``edge`` (found in the data)."""
    operator: str
    upper: float | None = None
    """The upper end of a two-sided entry window (``cutoff`` is then its lower end and ``direction``
    is ``window``); None for a one-sided cutoff."""

    @property
    def is_window(self) -> bool:
        return self.upper is not None

    @property
    def text(self) -> str:
        """The selection as the report writes it: ``Screening >= 24`` or ``24 <= Screening <= 73``."""
        if self.is_window:
            return f"{self.cutoff:g} <= {self.visit} <= {self.upper:g}"
        return f"{self.visit} {self.operator} {self.cutoff:g}"

    def keeps(self, s: np.ndarray) -> np.ndarray:
        """Readings on the kept side of the cutoff, or inside the window (both ends kept)."""
        if self.is_window:
            return (s >= self.cutoff) & (s <= self.upper)
        return (s >= self.cutoff) if self.direction == "above" else (s <= self.cutoff)


@dataclass(frozen=True)
class Scale:
    """The analysis scale (log or raw), the reason for it and the truncated-normal fit on it."""

    log: bool
    reason: str
    fit: object

    def to(self, x):
        x = np.asarray(x, dtype=float)
        return np.log(x) if self.log else x


@dataclass(frozen=True)
class Reliability:
    """Reliability of one reading used for the expected RTM, with where it came from."""

    value: float
    se: float | None
    lower: float | None
    upper: float | None
    source: str
    evidence: str
    lower_bound: bool
    by_arm: bool
    other: str | None = None
    """The second pre-treatment reading it was estimated from, if any."""
    icc: object = None


@dataclass(frozen=True)
class Change:
    """A mean change on the analysis scale with its t interval."""

    mean: float
    lower: float
    upper: float
    se: float
    n: int
    where: str
    by_arm: bool


@dataclass(frozen=True)
class Interval:
    """An expected change with its interval, on the analysis scale."""

    estimate: float
    lower: float
    upper: float


@dataclass(frozen=True)
class Group:
    """The participants whose change is compared: a row mask, how to name them, whether by arm."""

    rows: np.ndarray
    where: str
    by_arm: bool


# ----------------------------------------------------------------------------- selection


def _visit_of(spec, column: str) -> str:
    visit = {"screening": spec.screening_visit, "baseline": spec.baseline_visit,
             "entry_value": spec.entry_criterion.visit if spec.entry_criterion else None}[column]
    return str(visit)


def criterion_column(spec) -> str:
    """The column holding the reading the entry criterion was applied to (as study.outcome_data names it)."""
    visit = spec.entry_criterion.visit
    if visit == spec.baseline_visit:
        return "baseline"
    if spec.screening_visit is not None and visit == spec.screening_visit:
        return "screening"
    return "entry_value"


def _testable(values: np.ndarray) -> bool:
    return len(values) >= MIN_PAIRS and len(np.unique(values)) >= EDGE_MIN_DISTINCT


def edge_finding(values, column, spec, side, level, ctx) -> EdgeFinding | None:
    """The truncation-edge likelihood-ratio test of one reading (None with too few distinct values)."""
    if not _testable(values):
        return None
    scale = edge_test_scale(values, spec.log_scale)
    test = truncation_edge_test(scale.values, side=side, n_null=NULL_QUICK if ctx.quick else NULL_FULL,
                                seed=ctx.seed)
    edge = float(np.min(values) if test.edge_side == "lower" else np.max(values))
    return EdgeFinding(column, _visit_of(spec, column), scale.name, test, level, edge)


def declared_selection(spec) -> Selection:
    """The declared entry criterion as a selection: its reading, cutoff and kept side."""
    ec = spec.entry_criterion
    column = criterion_column(spec)
    if ec.is_window:
        return Selection(column, _visit_of(spec, column), float(ec.between[0]), "window", "criterion", "between",
                         float(ec.between[1]))
    return Selection(column, _visit_of(spec, column), float(ec.value), ec.direction, "criterion", ec.operator)


def _declared_selection(spec, rd: Readings, ctx) -> tuple[Selection, list[EdgeFinding]]:
    """The declared criterion, with an edge test of the kept readings as corroboration."""
    ec = spec.entry_criterion
    column = criterion_column(spec)
    values = rd.present(column)
    if len(values) < MIN_SELECTED:
        raise NotAssessable(f"only {len(values)} participants have the {_visit_of(spec, column)} reading the "
                            f"entry criterion was applied to (at least {MIN_SELECTED} are needed)")
    if ec.is_window:
        sel = declared_selection(spec)
        found = edge_finding(values[sel.keeps(values)], column, spec, "either", ALPHA, ctx)
        return sel, [found] if found else []
    kept = values[values >= ec.value] if ec.direction == "above" else values[values <= ec.value]
    side = "lower" if ec.direction == "above" else "upper"
    found = edge_finding(kept, column, spec, side, ALPHA, ctx)
    return declared_selection(spec), [found] if found else []


def find_selection(spec, rd: Readings, ctx) -> tuple[Selection | None, list[EdgeFinding]]:
    """The declared entry criterion; else the pre-treatment reading with a significant truncation edge
    (smallest p), each testable reading of screening and baseline tested at ALPHA / (number tested)."""
    if spec.entry_criterion is not None:
        return _declared_selection(spec, rd, ctx)
    n_base = len(rd.present("baseline"))
    if n_base < MIN_SELECTED:
        raise NotAssessable(f"only {n_base} participants have a baseline value (at least {MIN_SELECTED} "
                            f"are needed)")
    columns = [c for c in ("screening", "baseline") if _testable(rd.present(c))]
    level = ALPHA / max(len(columns), 1)
    found = [edge_finding(rd.present(c), c, spec, "either", level, ctx) for c in columns]
    flagged = sorted((f for f in found if f.flagged), key=lambda f: f.test.p_value)
    if not flagged:
        return None, found
    f = flagged[0]
    direction = "above" if f.test.edge_side == "lower" else "below"
    return Selection(f.column, f.visit, f.edge, direction, "edge", ">=" if direction == "above" else "<="), found


def selected(rd: Readings, sel: Selection) -> tuple[Readings, int]:
    """Participants whose entry reading is on the kept side of the cutoff (a reading equal to the cutoff
    counts as kept, since readings are rounded), and how many lie on the excluded side."""
    s = rd.cols[sel.column]
    has = np.isfinite(s)
    ok = has & sel.keeps(s)
    work = rd.subset(ok)
    if ok.sum() < MIN_SELECTED:
        raise NotAssessable(f"only {int(ok.sum())} participants meet the entry cutoff (at least {MIN_SELECTED} "
                            f"are needed)")
    if np.ptp(work.cols[sel.column]) == 0:
        raise NotAssessable("the entry reading is the same for every participant")
    return work, int((has & ~ok).sum())


# ----------------------------------------------------------------------------- scale and population


def _fit_selection(values_t: np.ndarray, sel: Selection, to):
    """The truncated-normal fit of the entry readings (already on the analysis scale ``to``): one-sided
    at the cutoff, or doubly truncated to a window."""
    if sel.is_window:
        return fit_window_normal(values_t, float(to(sel.cutoff)), float(to(sel.upper)))
    return _fit(values_t, float(to(sel.cutoff)), sel.direction)


def _fit(values_t: np.ndarray, cutoff_t: float, direction: str):
    if direction == "above":
        return fit_truncated_normal(values_t, lower=cutoff_t)
    return fit_truncated_normal(values_t, upper=cutoff_t)


def _positive(rd: Readings) -> bool:
    return all(bool(np.all(rd.present(c) > 0)) for c in rd.cols)


def choose_scale(spec, rd: Readings, sel: Selection) -> Scale:
    """Log or raw scale for the normal model, and the truncated-normal fit of the entry reading on it.

    Declared ``log_scale`` wins. Otherwise, when every reading and the cutoff are positive, the
    truncated normal is fitted to the raw and to the log readings and compared on the original
    scale: ``l_log - sum(log x)`` (the Jacobian of the log) against ``l_raw``; the log scale needs a
    lead of more than LOG_MARGIN. Skewness alone cannot decide, because truncation skews a normal
    sample (a normal cut at its mean has skewness 1.0).
    """
    s = rd.cols[sel.column]
    can_log = _positive(rd) and sel.cutoff > 0
    if spec.log_scale is not None:
        if spec.log_scale and not can_log:
            raise NotAssessable("log_scale is set but some readings or the cutoff are not positive")
        scale = Scale(bool(spec.log_scale), "declared in study.toml", None)
        return Scale(scale.log, scale.reason, _fit_selection(scale.to(s), sel, scale.to))
    raw = _fit_selection(s, sel, lambda x: x)
    if not can_log:
        return Scale(False, "raw scale (not every reading is positive)", raw)
    logged = _fit_selection(np.log(s), sel, np.log)
    l_log = logged.loglik - float(np.sum(np.log(s)))
    if logged.converged and (not raw.converged or l_log > raw.loglik + LOG_MARGIN):
        why = ("the truncated normal fits only on the log scale" if not raw.converged else
               f"log-likelihood {fmt(l_log, 1)} on the log scale against {fmt(raw.loglik, 1)} raw")
        return Scale(True, why, logged)
    why = (f"log-likelihood {fmt(raw.loglik, 1)} raw against {fmt(l_log, 1)} on the log scale"
           if logged.converged else "the truncated normal fits only on the raw scale")
    return Scale(False, why, raw)


def excluded_share(scale: Scale, sel: Selection) -> float:
    """Share of the fitted unselected population on the excluded side of the cutoff: how many the
    criterion leaves out of the population the selected readings imply."""
    fit, cut = scale.fit, float(scale.to(sel.cutoff))
    if sel.is_window:
        top = float(scale.to(sel.upper))
        return float(stats.norm.cdf(cut, fit.mu, fit.sigma) + stats.norm.sf(top, fit.mu, fit.sigma))
    side = stats.norm.cdf if sel.direction == "above" else stats.norm.sf
    return float(side(cut, fit.mu, fit.sigma))


def selects_no_one(sel: Selection, share_out: float) -> bool:
    """A declared criterion that, as declared, excludes no one: its cutoff lies where the fitted
    population has less than NEGLIGIBLE_EXCLUDED of its mass (beyond the range of the readings, say).
    A selection found in the data always excludes someone, since its cutoff is the data's own edge."""
    return sel.source == "criterion" and share_out < NEGLIGIBLE_EXCLUDED


def declared_criterion_reach(data, ctx) -> float:
    """The fitted share of the unselected population that the declared entry criterion leaves out,
    on the scale this check uses (for the change-score check's selection sub-finding). Raises
    NotAssessable when the share cannot be estimated."""
    spec = data.spec
    sel = declared_selection(spec)
    if sel.column not in data.frame.columns:
        raise NotAssessable(f"the {sel.visit} reading the entry criterion was applied to is missing")
    rd, _ = selected(Readings.of(data, ctx), sel)
    scale = choose_scale(spec, rd, sel)
    if not scale.fit.converged:
        raise NotAssessable(f"the truncated-normal fit of {sel.visit} did not converge")
    return excluded_share(scale, sel)


# ----------------------------------------------------------------------------- reliability


def other_reading(rd: Readings, sel: Selection) -> str | None:
    """A pre-treatment reading other than the one that decided entry, nearest the analysis baseline."""
    order = {"baseline": ("screening",), "screening": ("baseline",), "entry_value": ("baseline", "screening")}
    for column in order[sel.column]:
        if rd.has(column) and len(rd.complete(column, sel.column)[0]) >= MIN_PAIRS:
            return column
    return None


def comparison_group(data, ctx, rd: Readings) -> Group:
    """Participants whose change is compared with the expected RTM: the control arm (parallel,
    unblinded; by arm), both arms pooled (blinded; the arm is not read) or everyone (single-arm)."""
    everyone = np.ones(len(rd.cols["baseline"]), bool)
    if data.design == "single-arm":
        return Group(everyone, "in all participants", False)
    if ctx.blinded:
        return Group(everyone, "in both arms pooled", False)
    return Group(rd.arm == data.control_arm, f"on {data.control_arm}", True)


def _pair_reliability(rd, scale, sel, other, spec, level) -> Reliability:
    """The reliability as the slope of the other pre-treatment reading on the entry reading.

    Under a bivariate normal with equal SDs that slope is the correlation, and selection on the
    regressor leaves the regression of the other reading on it unchanged (Pearson 1903), so the slope
    is unbiased in a selected sample where the correlation itself is attenuated."""
    s, o = (scale.to(v) for v in rd.complete(sel.column, other))
    est, se, lo, hi, n = slope_with_se(o, s, level)
    icc = icc_oneway(s, o, level=level)
    evidence = (f"slope of {_visit_of(spec, other)} on {sel.visit} in {n} selected participants "
                f"{fmt(est)} ({fmt(lo)} to {fmt(hi)}), unbiased under selection on {sel.visit}; "
                f"ICC(1) of the same pairs {fmt(icc.estimate)} ({fmt(icc.lower)} to {fmt(icc.upper)}), "
                f"a lower bound because selection narrows the range")
    return Reliability(est, se, lo, hi, "pre-treatment pair", evidence, False, False, other, icc)


def _followup_reliability(data, ctx, rd, scale, sel) -> Reliability:
    group = comparison_group(data, ctx, rd)
    s, f = rd.complete(sel.column, "followup", rows=group.rows)
    if len(s) < MIN_PAIRS:
        raise NotAssessable(f"no second pre-treatment reading, no declared reliability, and only {len(s)} "
                            f"participants {group.where} with a follow-up value to estimate it from")
    est, se, lo, hi, n = slope_with_se(scale.to(f), scale.to(s), ctx.level)
    extra = "" if group.by_arm else " and any variation between participants in the response to treatment"
    evidence = (f"slope of follow-up on {sel.visit} {group.where} ({n} participants) {fmt(est)} ({fmt(lo)} to "
                f"{fmt(hi)}): a lower bound for the reliability, since it also includes true change over "
                f"follow-up{extra}")
    return Reliability(est, se, lo, hi, f"follow-up {group.where}", evidence, True, group.by_arm)


def choose_reliability(data, ctx, rd, scale, sel) -> Reliability:
    """A second pre-treatment reading (selection-corrected slope), else the declared value, else the
    slope of follow-up on the entry reading (a lower bound)."""
    spec = data.spec
    other = other_reading(rd, sel)
    if other is not None:
        rel = _pair_reliability(rd, scale, sel, other, spec, ctx.level)
    elif spec.reliability is not None:
        rel = Reliability(float(spec.reliability), None, None, None, "declared",
                          f"declared in study.toml: {fmt(spec.reliability)} (treated as known)", False, False)
    else:
        rel = _followup_reliability(data, ctx, rd, scale, sel)
    if rel.value <= 0:
        raise NotAssessable(f"the reliability estimate is {fmt(rel.value)}: the readings share no stable "
                            f"level, so the normal model of regression to the mean does not apply")
    return rel


def capped(rel: Reliability) -> float:
    """The reliability the expected change uses: the estimate, capped at RHO_CAP."""
    return RHO_CAP if rel.value > RHO_CAP else rel.value


def capped_caveat(rel: Reliability, out: Sections) -> None:
    if rel.value > RHO_CAP:
        out.caveats.append(f"The reliability estimate {fmt(rel.value, 3)} was capped at {RHO_CAP} for the "
                           f"expected change and its interval.")


# ----------------------------------------------------------------------------- expected and observed


def expected_change(fit, rho: float, rho_se: float | None, cutoff_t: float, direction: str, ctx):
    """Barnett et al. (2005) expected change with a parametric-bootstrap CI carrying the uncertainty
    of the truncated-normal fit (mu, sigma and their covariance) and of the reliability."""
    kw = {} if rho_se is None else {"rho_se": rho_se}
    return rtm_with_ci(fit.mu, fit.sigma, rho, cutoff_t, direction, mu_se=fit.se_mu, sigma_se=fit.se_sigma,
                       mu_sigma_cov=fit.cov_mu_sigma, level=ctx.level,
                       n_draws=DRAWS_QUICK if ctx.quick else DRAWS_FULL, seed=ctx.seed, **kw)


def expected_window_change(fit, rho: float, rho_se: float | None, ctx):
    """Expected change for a two-sided entry window, ``-(1 - rho) E[X - mu | a <= X <= b]``, with a
    parametric-bootstrap CI over the doubly truncated fit and the reliability."""
    return rtm_window_with_ci(fit, rho, rho_se, level=ctx.level, n_draws=DRAWS_QUICK if ctx.quick else DRAWS_FULL,
                              seed=ctx.seed)


def further_conditions_caveat(spec, out: Sections) -> None:
    """Further entry conditions (``entry_criterion.also``) are not used in sizing this outcome's
    regression to the mean: a condition on another parameter selects on a correlated variable, whose
    effect on this outcome depends on a correlation the audit does not model; one on this parameter
    at another visit is a second selection the single-reading model does not carry."""
    ec = spec.entry_criterion
    if ec is None or not ec.also:
        return
    listed = "; ".join(f"{c.param or spec.param} {c.text}" for c in ec.also)
    out.caveats.append(f"Entry also required {listed}. Selection on these further conditions (on a correlated "
                       f"variable, or on this one at another visit) also pulls this outcome toward its mean, by an "
                       f"amount that depends on their correlation with it; it is not included in the expected "
                       f"change above, which sizes the selection on {ec.visit} alone.")


def mean_change(d, where: str, by_arm: bool, level: float) -> Change:
    """Mean of the differences ``d`` with its t interval (:func:`auditor.stats.linear.mean_t_interval`)."""
    m, lo, hi, se, n = mean_t_interval(d, level)
    return Change(m, lo, hi, se, n, where, by_arm)


def observed_change(data, ctx, rd, scale) -> Change:
    group = comparison_group(data, ctx, rd)
    b, f = rd.complete("baseline", "followup", rows=group.rows)
    if len(b) < MIN_PAIRS:
        raise NotAssessable(f"only {len(b)} participants {group.where} have a baseline and a follow-up value "
                            f"(at least {MIN_PAIRS} are needed)")
    d = scale.to(f) - scale.to(b)
    if np.ptp(d) == 0:
        raise NotAssessable("the change from baseline is the same for every participant")
    return mean_change(d, group.where, group.by_arm, ctx.level)


def pre_treatment_change(rd, scale, sel, rel, spec, level) -> Change | None:
    """Mean of (other pre-treatment reading - entry reading): RTM with no treatment at all. Not
    independent of the slope-based reliability; it checks the fitted population mean."""
    if rel.other is None:
        return None
    s, o = rd.complete(sel.column, rel.other)
    return mean_change(scale.to(o) - scale.to(s), f"{_visit_of(spec, rel.other)} minus {sel.visit}", False, level)


def residual_bias(data, ctx, rd, scale, sel) -> tuple[Interval, Group]:
    """Expected bias of change from a baseline taken after the entry reading S.

    ``E[F - B | S selected] = (rho_SF - rho_SB) e`` (bias_after_second_baseline, m = 1), with the two
    correlations estimated as slopes on S (unbiased under selection on S); their difference is the
    slope of ``F - B`` on S, with its OLS SE. The CI is normal with the product variance
    ``e^2 var(b) + b^2 var(e) + var(b) var(e)`` (Goodman 1960).
    """
    group = comparison_group(data, ctx, rd)
    s, b, f = (scale.to(v) for v in rd.complete(sel.column, "baseline", "followup", rows=group.rows))
    if len(s) < MIN_PAIRS:
        raise NotAssessable(f"only {len(s)} participants {group.where} have the entry reading, a baseline and a "
                            f"follow-up value (at least {MIN_PAIRS} are needed)")
    rho_sb, rho_sf = slope_with_se(b, s)[0], slope_with_se(f, s)[0]
    diff, diff_se = slope_with_se(f - b, s)[:2]
    fit, cut = scale.fit, float(scale.to(sel.cutoff))
    e, e_se = selection_shift_with_se(fit, cut, sel.direction)
    if sel.is_window:  # the same relation, (rho_SF - rho_SB) e, with e the doubly truncated mean shift
        bias = float((np.clip(rho_sf, -1, 1) - np.clip(rho_sb, -1, 1)) * e)
    else:
        bias = bias_after_second_baseline(fit.mu, fit.sigma, cut, rho_screen_second=float(np.clip(rho_sb, -1, 1)),
                                          rho_screen_followup=float(np.clip(rho_sf, -1, 1)),
                                          direction=sel.direction).second_baseline_bias
    lower, upper = product_interval(bias, diff, diff_se, e, e_se, ctx.level)
    return Interval(bias, lower, upper), group


@dataclass(frozen=True)
class SecondBaseline:
    """Share of the RTM bias a second, later baseline would remove (bias_after_second_baseline):
    ``stable``, all of it under stable true levels; ``carried``, ``(1 - rho) / (1 - rho_BF)``-type share
    when the follow-up correlates less with the entry reading than a repeat reading does (rho_BF, the
    slope of follow-up on it in ``group``), else None."""

    stable: float
    stable_by_arm: bool
    carried: float | None = None
    rho_bf: float | None = None
    group: Group | None = None

    @property
    def share(self) -> float:
        return self.stable if self.carried is None else self.carried

    @property
    def by_arm(self) -> bool:
        return self.stable_by_arm or (self.carried is not None and self.group.by_arm)


def second_baseline(data, ctx, rd, scale, sel, rel, rho) -> SecondBaseline | None:
    """The second-baseline shares, for a one-sided criterion on the analysis baseline (None otherwise)."""
    if sel.column != "baseline" or sel.is_window:
        return None
    fit, cut = scale.fit, float(scale.to(sel.cutoff))
    stable = bias_after_second_baseline(fit.mu, fit.sigma, cut, rho_screen_second=rho, direction=sel.direction)
    group = comparison_group(data, ctx, rd)
    b, f = rd.complete("baseline", "followup", rows=group.rows)
    if not rel.lower_bound and len(b) >= MIN_PAIRS:
        rho_bf = slope_with_se(scale.to(f), scale.to(b))[0]
        if 0 < rho_bf < rho:
            decay = bias_after_second_baseline(fit.mu, fit.sigma, cut, rho_screen_second=rho,
                                               rho_screen_followup=rho_bf, direction=sel.direction)
            return SecondBaseline(stable.share_removed, rel.by_arm, decay.share_removed, rho_bf, group)
    return SecondBaseline(stable.share_removed, rel.by_arm)


def second_baseline_section(sb: SecondBaseline | None, sel, rho: float, out: Sections) -> float | None:
    """The second-baseline estimates; returns the share the headline and recommendation quote."""
    if sb is None:
        return None
    note = "true levels stable between the entry reading and follow-up"
    if sb.carried is not None:
        out.estimates.append(estimate("Share of the bias a second baseline removes, true levels stable",
                                      100 * sb.stable, unit="%", by_arm=sb.stable_by_arm,
                                      key="regression-to-mean.second-baseline-share-stable"))
        note = (f"with the slope of follow-up on {sel.visit} {sb.group.where}, {fmt(sb.rho_bf)}, below the "
                f"reliability {fmt(rho)}: part of the selection carries over to a second baseline")
    out.estimates.append(estimate("Share of the bias a second, later baseline would remove", 100 * sb.share,
                                  unit="%", note=note, by_arm=sb.by_arm, key="regression-to-mean.second-baseline-share"))
    return float(sb.share)


# ----------------------------------------------------------------------------- formatting


def _pct(x: float) -> float:
    return 100.0 * (math.exp(x) - 1.0)


def amount(x: float, lo: float, hi: float, scale: Scale, unit: str) -> str:
    """'a fall of 13% (7% to 29%)' on the log scale, 'a rise of 2.10 mmHg (1.20 to 3.00)' on the raw
    one; an interval that includes no change is written signed."""
    conv = _pct if scale.log else float
    v, a, b = conv(x), conv(lo), conv(hi)
    u = "" if scale.log or not unit else f" {unit}"
    if a <= 0 <= b:
        if scale.log:
            return f"a change of {v:+.0f}% ({a:+.0f}% to {b:+.0f}%)"
        return f"a change of {fmt(v)}{u} ({fmt(a)} to {fmt(b)})"
    word = "fall" if v < 0 else "rise"
    m1, m2 = sorted((abs(a), abs(b)))
    if scale.log:
        return f"a {word} of {abs(v):.0f}% ({m1:.0f}% to {m2:.0f}%)"
    return f"a {word} of {fmt(abs(v))}{u} ({fmt(m1)} to {fmt(m2)})"


def value_text(x: float, scale: Scale, unit: str) -> str:
    """A signed change for prose: a percentage on the log scale, else the value and unit."""
    if scale.log:
        return f"{_pct(x):+.0f}%"
    return f"{x:+.3g}" + (f" {unit}" if unit else "")


def _criterion_text(spec, sel: Selection, finds: list[EdgeFinding]) -> str:
    unit = f" {spec.unit}" if spec.unit else ""
    if sel.source == "criterion":
        where = ", the analysis baseline" if sel.column == "baseline" else ""
        if sel.is_window:
            return (f"Entry required {spec.param} between {sel.cutoff:g} and {sel.upper:g}{unit} at "
                    f"{sel.visit}{where}")
        return f"Entry required {spec.param} {sel.operator} {sel.cutoff:g}{unit} at {sel.visit}{where}"
    f = next(x for x in finds if x.column == sel.column)
    return (f"{sel.visit} has a sharp {f.test.edge_side} edge at {fmt(sel.cutoff)}{unit} "
            f"({fmt_p(f.test.p_value)}), as if entry required {spec.param} {sel.operator} {fmt(sel.cutoff)}")


def _unit_label(spec, visit) -> str:
    return f"{visit}{f' ({spec.unit})' if spec.unit else ''}"


# ----------------------------------------------------------------------------- sections


def selection_section(sel, finds, counts: "EntryCounts | None", out: Sections,
                      share_out: float | None = None) -> None:
    """The selection sub-finding (and the criterion-honoured one); ``counts`` are the entry readings
    kept and left out (None with no selection), ``share_out`` the fitted population share on the
    excluded side of the cutoff, when known."""
    q = "Were participants selected on this outcome?"
    tests = "; ".join(f"{f.visit}{f.scale_note}: edge LR {fmt(f.test.statistic)}, "
                      f"{fmt_p(f.test.p_value)}, {f.test.edge_side} edge at {fmt(f.edge)}" for f in finds)
    for f in finds:
        out.estimates.append(estimate(f"Truncation-edge test of {f.visit}{f.scale_note}, "
                                      f"likelihood-ratio statistic", f.test.statistic, p=f.test.p_value,
                                      note=f"{f.test.edge_side} edge at {fmt(f.edge)}; tested at level "
                                           f"{f.level:g}",
                                      key=f"regression-to-mean.edge-test.{f.column.replace('_', '-')}"))
    if sel is None:
        out.sub("selection", q, Verdict.SOUND,
                f"no entry criterion declared; no truncation edge ({tests or 'too few distinct values to test'})")
        return
    verdict = Verdict.CAUTION
    if sel.source == "criterion":
        ev = f"entry criterion {sel.text}" + (f"; in the data: {tests}" if tests else "")
        if share_out is not None:
            ev += (f"; the population fitted to the entry readings puts {share_text(share_out)} on the "
                   f"excluded side of the cutoff")
        if share_out is not None and selects_no_one(sel, share_out):
            verdict = Verdict.SOUND
            ev += (f" (below {NEGLIGIBLE_EXCLUDED:.0%}, a convention of this tool): as declared, the criterion "
                   f"selects no one out")
    else:
        ev = f"no entry criterion declared, but {tests}"
    out.sub("selection", q, verdict, ev)
    n_kept, n_excluded = counts.kept, counts.excluded
    out.estimates.append(estimate(f"Participants with the entry reading ({sel.visit}) meeting the cutoff",
                                  float(n_kept), key="regression-to-mean.entry-met"))
    if n_excluded:
        out.estimates.append(estimate("Entry readings on the excluded side of the cutoff (left out)",
                                      float(n_excluded), key="regression-to-mean.entry-excluded"))
        out.sub("criterion-honoured", "Do the entry readings honour the criterion?",
                Verdict.CAUTION if counts.share_excluded > VIOLATION_SHARE else Verdict.SOUND,
                f"{n_excluded} of {counts.total} ({counts.share_excluded:.0%}) lie on the excluded side; they are "
                f"left out of this check")


def population_section(spec, an: "Analysis", out: Sections, level: float = 0.95) -> None:
    scale, fit = an.scale, an.scale.fit
    _, lo, hi = an.population.mu_ci
    _, s_lo, s_hi = an.population.sigma_ci
    if scale.log:
        out.estimates += [
            estimate("Geometric mean of the unselected population (truncated-normal MLE)",
                     *an.population.geometric, unit=spec.unit, note=interval_words("Wald", level) + " on the log scale",
                     key="regression-to-mean.population-geometric-mean"),
            estimate("SD of log values in the unselected population", fit.sigma, s_lo, s_hi,
                     key="regression-to-mean.population-log-sd")]
    else:
        out.estimates += [
            estimate("Mean of the unselected population (truncated-normal MLE)", fit.mu, lo, hi, unit=spec.unit,
                     note=interval_words("Wald", level), key="regression-to-mean.population-mean"),
            estimate("SD of the unselected population", fit.sigma, s_lo, s_hi, unit=spec.unit,
                     key="regression-to-mean.population-sd")]
    out.estimates.append(estimate("Share of the unselected population meeting the cutoff (fitted)",
                                  100 * an.population.share_meeting, unit="%",
                                  key="regression-to-mean.population-share-meeting"))
    out.sub("scale", "On which scale is the reading close to normal?", Verdict.SOUND,
            f"{'log' if scale.log else 'raw'} scale: {scale.reason}")


def reliability_section(spec, rel: Reliability, out: Sections) -> None:
    out.estimates.append(estimate(f"Reliability of one reading used ({rel.source})", rel.value, rel.lower,
                                  rel.upper, note="a lower bound" if rel.lower_bound else "", by_arm=rel.by_arm,
                                  key="regression-to-mean.reliability"))
    if rel.icc is not None:
        out.estimates.append(estimate("ICC(1) of the same selected pairs (attenuated by selection)",
                                      rel.icc.estimate, rel.icc.lower, rel.icc.upper,
                                      note="one-way random effects (Shrout and Fleiss 1979); a lower bound",
                                      key="regression-to-mean.reliability-icc"))
    if spec.reliability is not None and rel.source != "declared":
        out.estimates.append(estimate("Reliability declared in study.toml", float(spec.reliability),
                                      key="regression-to-mean.reliability-declared"))
    out.sub("reliability", "How reliable is one reading?", Verdict.CAUTION if rel.lower_bound else Verdict.SOUND,
            rel.evidence, by_arm=rel.by_arm)


def expected_section(spec, scale, rtm, rel, ratio: Interval | None, declared_change: float | None,
                     out: Sections, level: float = 0.95) -> None:
    unit = "" if scale.log else spec.unit
    out.estimates.append(estimate(f"Expected change from regression to the mean "
                                  f"({'log scale' if scale.log else 'analysis scale'})", rtm.estimate, rtm.lower,
                                  rtm.upper, unit=unit,
                                  note=f"Barnett et al. formula; {interval_words('parametric bootstrap', level, noun='')}, "
                                       f"{rtm.n_draws} draws, seed {rtm.seed}",
                                  by_arm=rel.by_arm, key="regression-to-mean.expected-change"))
    if ratio is not None:
        out.estimates.append(estimate("Expected ratio later / entry reading from regression to the mean",
                                      ratio.estimate, ratio.lower, ratio.upper,
                                      note=f"{_pct(rtm.estimate):+.1f}% on the original scale", by_arm=rel.by_arm,
                                      key="regression-to-mean.expected-ratio"))
    if declared_change is not None:
        out.estimates.append(estimate("Expected change with the declared reliability instead (sensitivity)",
                                      declared_change, unit=unit,
                                      key="regression-to-mean.expected-change-declared-reliability"))


def shrinkage_section(spec, scale, rho, sel, rel, shrink: "Shrinkage", out: Sections) -> None:
    """Shrunk entry readings ``mu + rho (x - mu)`` (Kelley 1947); their mean shift is the expected RTM."""
    x, shrunk = shrink.observed, shrink.shrunk
    out.estimates.append(estimate("Mean shrinkage of the entry reading toward the population mean",
                                  shrink.mean_shift, unit="" if scale.log else spec.unit,
                                  note="equals the expected change at the maximum-likelihood fit",
                                  by_arm=rel.by_arm, key="regression-to-mean.mean-shrinkage"))
    label = _unit_label(spec, sel.visit)
    out.figures.append(Figure(
        "rtm-shrinkage", "rtm_shrinkage", f"{spec.display_name}: observed entry reading against its shrunk value",
        {"observed": x.tolist(), "shrunk": shrunk.tolist(), "mu": scale.fit.mu,
         "cutoff": float(scale.to(sel.cutoff)), "log": scale.log, "xlabel": f"Observed {label}",
         **({"upper": float(scale.to(sel.upper))} if sel.is_window else {}),
         "ylabel": f"Shrunk {label} (estimated true level)"},
        caption=f"One point per participant, in order of value. Each reading is pulled toward the population "
                f"mean by 1 - reliability = {fmt(1 - rho)}: the further beyond the cutoff, the more the reading "
                f"overstates the true level. The gap between the two red markers (the group's mean before and "
                f"after shrinkage) is its expected regression to the mean.",
        by_arm=rel.by_arm))


def pairs_figure(spec, pairs: "Pairs | None", scale, sel, rel) -> Figure | None:
    """Screening against baseline with the cutoff, when the entry reading is one of them."""
    if pairs is None:
        return None
    data = {"x": pairs.x.tolist(), "y": pairs.y.tolist(), "cutoff": float(scale.to(sel.cutoff)),
            **({"upper": float(scale.to(sel.upper))} if sel.is_window else {}),
            "cutoff_axis": "x" if sel.column == "screening" else "y", "log": scale.log,
            "xlabel": _unit_label(spec, spec.screening_visit), "ylabel": _unit_label(spec, spec.baseline_visit)}
    if pairs.line_x is not None:
        data["line"] = {"x": pairs.line_x.tolist(), "y": pairs.line_y.tolist(),
                        "label": f"regression on {sel.visit} (slope {fmt(rel.value)})"}
    return Figure("rtm-screening-baseline", "rtm_pairs",
                  f"{spec.display_name}: {spec.baseline_visit} against {spec.screening_visit}", data,
                  caption=f"Dotted: the entry cutoff on {sel.visit}. Dashed: identity. Solid (when shown): the "
                          f"regression of the other reading on {sel.visit}, whose slope is the reliability. "
                          f"Participants selected on one reading sit, on average, nearer the population mean on "
                          f"the other.")


def truncation_figure(spec, entry: np.ndarray, scale, sel) -> Figure:
    """The entry readings (``entry``: sorted, analysis scale) with the fitted truncated normal."""
    return Figure("rtm-entry-distribution", "rtm_truncation",
                  f"{spec.display_name}: distribution of the entry reading ({sel.visit})",
                  {"values": entry.tolist(), "mu": scale.fit.mu, "sigma": scale.fit.sigma,
                   "cutoff": float(scale.to(sel.cutoff)), "direction": sel.direction, "log": scale.log,
                   **({"upper": float(scale.to(sel.upper))} if sel.is_window else {}),
                   "xlabel": _unit_label(spec, sel.visit)},
                  caption="Dotted: the cutoff. Solid curve: the truncated normal fitted by maximum likelihood; "
                          "dashed: the unselected population it implies"
                          f"{' (log scale, labelled in original units)' if scale.log else ''}.")


def comparison_figure(spec, scale, rows: list[dict], by_arm: bool, level: float = 0.95) -> Figure:
    conv = _pct if scale.log else float
    data_rows = [{"label": r["label"], "value": conv(r["value"]), "lower": conv(r["lower"]),
                  "upper": conv(r["upper"])} for r in rows]
    xlabel = "Change (%)" if scale.log else f"Change{f' ({spec.unit})' if spec.unit else ''}"
    return Figure("rtm-expected-observed", "interval_rows",
                  f"{spec.display_name}: change expected from regression to the mean and change observed",
                  {"rows": data_rows, "reference": 0.0, "xlabel": xlabel},
                  caption=f"Points and {level_label(level)} intervals. An observed change inside the expected interval could be "
                          "produced by regression to the mean alone.", by_arm=by_arm)


def figure_rows(sel, rtm, target, obs, pre) -> list[dict]:
    def row(label, x):
        return {"label": label, "value": x.mean if isinstance(x, Change) else x.estimate,
                "lower": x.lower, "upper": x.upper}

    rows = [row("expected from RTM" if sel.column == "baseline" else f"expected from RTM, from {sel.visit}", rtm)]
    if pre is not None:
        rows.append(row(f"observed, {pre.where}", pre))
    if sel.column != "baseline":
        rows.append(row("expected bias of change", target))
    rows.append(row(f"observed change, {obs.where.split(' ', 1)[1]}", obs))
    return rows


def observed_section(spec, an: "Analysis", ctx, out: Sections) -> None:
    """The observed mean change beside the change expected in it, their difference and the share."""
    scale, target, obs, pre, by_arm = an.scale, an.target, an.obs, an.pre, an.by_arm
    what = "pooled over arms (blinded)" if ctx.blinded and obs.where == "in both arms pooled" else obs.where
    unit = "" if scale.log else spec.unit
    log = " (log scale)" if scale.log else ""
    out.estimates.append(estimate(f"Observed mean change from baseline {what}{log}", obs.mean, obs.lower,
                                  obs.upper, unit=unit, note=f"{obs.n} participants; {interval_words('t', ctx.level)}",
                                  by_arm=obs.by_arm, key="regression-to-mean.observed-change"))
    if pre is not None:
        out.estimates.append(estimate(f"Observed mean {pre.where}{log} (before treatment)", pre.mean, pre.lower,
                                      pre.upper, unit=unit, note=f"{pre.n} participants; {interval_words('t', ctx.level)}",
                                      key="regression-to-mean.observed-pre-treatment"))
    gap = an.unexplained
    out.estimates.append(estimate(f"Observed change {what} not explained by regression to the mean", gap.estimate,
                                  gap.lower, gap.upper, unit=unit,
                                  note=interval_words("normal-approximation", ctx.level, "normal approximation"),
                                  by_arm=by_arm, key="regression-to-mean.unexplained-change"))
    if an.share_explained is not None:
        out.estimates.append(estimate(f"Share of the observed change {what} that regression to the mean "
                                      f"predicts", an.share_explained, unit="%", by_arm=by_arm,
                                      key="regression-to-mean.share-explained"))
    within = target.lower <= obs.mean <= target.upper

    def t(v):
        return value_text(v, scale, spec.unit)

    out.sub("observed", "How much of the observed change would regression to the mean alone produce?",
            Verdict.CAUTION if abs(target.estimate) >= MATERIAL_SHARE * abs(obs.mean) else Verdict.SOUND,
            f"observed {t(obs.mean)} {what} ({t(obs.lower)} to {t(obs.upper)}); expected from regression to "
            f"the mean {t(target.estimate)} ({t(target.lower)} to {t(target.upper)}); the observed change lies "
            f"{'inside' if within else 'outside'} that interval", by_arm=by_arm)


def model_check_sub(spec, scale, rtm, pre: Change | None, out: Sections) -> None:
    """Set the change between the two pre-treatment readings (no treatment possible) beside the
    expected RTM: a direct check of the normal model and of the fitted population mean."""
    if pre is None:
        return

    def t(v):
        return value_text(v, scale, spec.unit)

    inside = rtm.lower <= pre.mean <= rtm.upper
    out.sub("model-check", "Does the change between the two pre-treatment readings agree with the model?",
            Verdict.SOUND if inside else Verdict.CAUTION,
            f"{pre.where}: {t(pre.mean)} ({t(pre.lower)} to {t(pre.upper)}), before any treatment; expected from "
            f"regression to the mean {t(rtm.estimate)} ({t(rtm.lower)} to {t(rtm.upper)})"
            + ("" if inside else "; outside it, so the fitted population mean or the normal model is doubtful"))


def expected_in_change(data, ctx, rd, scale, sel, rtm, rel) -> tuple[Interval, bool, Group | None]:
    """The change expected in the analysed change from baseline: the whole RTM when baseline decided
    entry, else the residual bias of the later baseline (with the group it was estimated in)."""
    if sel.column == "baseline":
        return Interval(rtm.estimate, rtm.lower, rtm.upper), rel.by_arm, None
    target, group = residual_bias(data, ctx, rd, scale, sel)
    return target, group.by_arm, group


def residual_bias_section(spec, scale, sel, target: Interval, group: Group | None, out: Sections) -> None:
    if group is None:
        return
    out.estimates.append(estimate(f"Expected bias of change from {spec.baseline_visit} (entry decided at "
                                  f"{sel.visit}), {group.where}", target.estimate, target.lower, target.upper,
                                  unit="" if scale.log else spec.unit,
                                  note="(rho_SF - rho_SB) e, both correlations as slopes on the entry reading",
                                  by_arm=group.by_arm, key="regression-to-mean.residual-bias"))


# ----------------------------------------------------------------------------- verdict and headline


def judged_design(data) -> str:
    """The design as the verdict reads it: ``WITHIN_ARM_EFFECT`` for a parallel trial that reports
    within-arm change as the treatment effect (``effect_basis``), else the declared design."""
    if data.design == "parallel" and getattr(data.spec, "effect_basis", "between-arm") == WITHIN_ARM_EFFECT:
        return WITHIN_ARM_EFFECT
    return data.design


def is_material(target: Interval, sigma: float, material_sd: float = MATERIAL_SD) -> bool:
    """The whole interval of the expected shift lies beyond ``material_sd`` population SDs on one side
    (the study's ``rtm_shift_sd``, default MATERIAL_SD)."""
    threshold = material_sd * sigma
    return bool(target.upper < -threshold or target.lower > threshold)


def decide(design, material: bool, no_one_out: bool = False) -> Verdict:
    """Single-arm (before-after) design: unsupported when the shift is material, else caution.
    Randomised parallel design: caution when material, else sound, since the randomised contrast is
    not biased by it. A declared criterion that selects no one out, with no material shift: sound."""
    if no_one_out and not material:
        return Verdict.SOUND
    if design in WITHIN_ARM_DESIGNS or design == WITHIN_ARM_EFFECT:
        return Verdict.UNSUPPORTED if material else Verdict.CAUTION
    return Verdict.CAUTION if material else Verdict.SOUND


def sd_text(shift_sd: Interval, log: bool = False) -> str:
    """'0.46 SD (0.38 to 0.55)': the size of a shift already in SDs of the unselected population
    (:attr:`Analysis.shift_sd`)."""
    a, b = sorted((abs(shift_sd.lower), abs(shift_sd.upper)))
    unit = "SD of log values" if log else "SD"
    if shift_sd.lower <= 0 <= shift_sd.upper:
        return f"{shift_sd.estimate:+.2f} {unit} ({shift_sd.lower:+.2f} to {shift_sd.upper:+.2f})"
    return f"{abs(shift_sd.estimate):.2f} {unit} ({a:.2f} to {b:.2f})"


def material_rule(design, material_sd: float = MATERIAL_SD) -> str:
    rule = (f"material when the whole interval lies beyond {material_sd:g} SD of the unselected population "
            f"(rtm_shift_sd; default a convention of this tool)")
    if design == WITHIN_ARM_EFFECT:
        return f"{rule}; within-arm change is reported as the treatment effect, so it carries it in full"
    if design in WITHIN_ARM_DESIGNS:
        return f"{rule}; single-arm design: the before-after change carries it in full"
    return f"{rule}; randomised parallel design: it affects both arms alike, so caution at most"


def bias_sub(spec, design, sel, target: Interval, shift_sd: Interval, scale, material: bool, verdict: Verdict,
             by_arm: bool, out: Sections, material_sd: float = MATERIAL_SD) -> None:
    def t(v):
        return value_text(v, scale, spec.unit)

    size = f"{t(target.estimate)} ({t(target.lower)} to {t(target.upper)}), {sd_text(shift_sd, scale.log)}"
    judged = f"{'material' if material else 'not material'} ({material_rule(design, material_sd)})"
    if sel.column == "baseline":
        out.sub("bias", "Is the analysis baseline the reading that decided entry?", verdict,
                f"yes: the change from baseline carries the whole expected regression to the mean, {size}: {judged}",
                by_arm=by_arm)
    else:
        out.sub("bias", "Does the change from baseline still carry the selection?", verdict,
                f"entry was decided at {sel.visit}, the analysis baseline is {spec.baseline_visit}: expected bias "
                f"of the change {size}: {judged}", by_arm=by_arm)


def share_clause(share: float, obs: Change) -> str:
    """'64% of the fall seen on Placebo': ``share`` (:attr:`Analysis.share_explained`, in percent) of an
    observed change of the same sign."""
    return f"{share:.0f}% of the {'fall' if obs.mean < 0 else 'rise'} seen {obs.where}"


def recommendation(design, second_share: float | None) -> str:
    """What would reduce the shift: a second, later baseline; without a control arm, a concurrent control."""
    second = (f"a second, later baseline would remove about {100 * second_share:.0f}% of it"
              if second_share is not None else "")
    if design == WITHIN_ARM_EFFECT:
        contrast = "report the randomised contrast between arms (ANCOVA) as the treatment effect"
        return f"{contrast}; {second}" if second else contrast
    if design in WITHIN_ARM_DESIGNS:
        return f"{second}, or add a concurrent control" if second else "add a concurrent control"
    return second


def recommended_analysis(design, verdict: Verdict, second_share: float | None = None) -> str:
    """The analysis this check recommends: with no material shift, no change of plan; with one, the
    randomised comparison adjusted for baseline rather than within-arm change (parallel design), or a
    concurrent control or second baseline (single-arm design)."""
    if verdict is Verdict.SOUND:
        return "no change of plan for regression to the mean"
    extra = recommendation(design, second_share)
    if design in WITHIN_ARM_DESIGNS:
        return f"do not read the before-after change as an effect; {extra}"
    lead = ("the comparison between arms, adjusted for baseline (ANCOVA); do not read within-arm change, "
            "baseline subgroups or responder shares as effects")
    return f"{lead}; {extra}" if extra else lead


def no_one_out_headline(spec, sel, finds, scale, rtm, target, share_out: float) -> str:
    """Headline for a declared criterion that excludes no one: says so, with the computed size."""
    lead = _criterion_text(spec, sel, finds)
    size = amount(target.estimate, target.lower, target.upper, scale, spec.unit)
    return (f"{lead}, but as declared the criterion selects no one out: the population fitted to the "
            f"entry readings puts {share_text(share_out)} on the excluded side of the cutoff, and regression to "
            f"the mean alone is expected to move the change from baseline by {size}.")


def share_text(share: float) -> str:
    """A small share as a percentage that does not round a positive share to a flat 0%."""
    pct = 100 * share
    return f"{pct:.1f}%" if pct >= 0.05 or pct == 0 else "less than 0.1%"


def consequence(spec, design, sel, scale, target: Interval, shift_sd: Interval, material: bool,
                material_sd: float = MATERIAL_SD) -> str:
    """The first sentence of the headline: the expected shift in the analysed change with its interval,
    its size in SDs, and what it does and does not bias in this design."""
    size = amount(target.estimate, target.lower, target.upper, scale, spec.unit)
    where = ("the change from baseline" if sel.column == "baseline" else
             f"the change from baseline ({spec.baseline_visit}, after entry was decided at {sel.visit})")
    lead = f"Regression to the mean alone is expected to shift {where} by {size}, {sd_text(shift_sd, scale.log)}"
    beyond = (f"wholly beyond the {material_sd:g} SD threshold of materiality" if material else
              f"not wholly beyond the {material_sd:g} SD threshold of materiality")
    if design == WITHIN_ARM_EFFECT:
        if material:
            return (f"{lead}, {beyond}: {WITHIN_ARM_BIAS}; the randomised comparison between arms is not "
                    f"biased by it.")
        return (f"{lead}, {beyond}; the within-arm change reported as the treatment effect still includes "
                f"part of it.")
    if design in WITHIN_ARM_DESIGNS:
        if material and getattr(spec, "effect_basis", "between-arm") == WITHIN_ARM_EFFECT:
            return (f"{lead}, {beyond}: {WITHIN_ARM_BIAS}, and without a control arm the before-after change "
                    f"cannot be told apart from it.")
        if material:
            return f"{lead}, {beyond}: without a control arm the before-after change cannot be told apart from it."
        return (f"{lead}, {beyond}; without a control arm a before-after change may still include part of "
                f"it.")
    if material:
        return (f"{lead}, {beyond}, in every arm alike: it biases {BIASED_BY_RTM}; the randomised comparison "
                f"between arms is not biased by it.")
    return f"{lead}, {beyond}; the randomised comparison between arms is not biased by it in any case."


def evidence(spec, design, sel, finds, scale, rtm, target, obs, second, ctx, share: float | None) -> str:
    """The second part of the headline: the selection, the expected change from the entry reading when
    it is not the baseline, the share ``share`` of the observed change (:attr:`Analysis.share_explained`),
    and what would reduce the shift."""
    lead = _criterion_text(spec, sel, finds)
    inside = "inside" if target.lower <= obs.mean <= target.upper else "outside"
    seen = ("blinded audit: " if ctx.blinded else "") + value_text(obs.mean, scale, spec.unit)
    parts = [lead[0].lower() + lead[1:] if sel.source == "criterion" else lead]
    if sel.column != "baseline":
        parts.append(f"regression to the mean from {sel.visit} is "
                     f"{amount(rtm.estimate, rtm.lower, rtm.upper, scale, spec.unit)}")
    if obs.mean == 0 or np.sign(obs.mean) != np.sign(target.estimate):
        parts.append(f"the change seen {obs.where} went the other way ({seen}, {inside} its interval)")
    else:
        parts.append(f"the expected shift is {share_clause(share, obs)} ({seen}, {inside} its interval)")
    advice = recommendation(design, second)
    return "Evidence: " + "; ".join(parts) + (f". {advice[0].upper()}{advice[1:]}." if advice else ".")


def headline(spec, design, sel, finds, scale, rtm, target, obs, second, ctx, shift_sd, material,
             material_sd: float = MATERIAL_SD, share: float | None = None) -> str:
    """Consequence first, with its interval; then the evidence."""
    return (f"{consequence(spec, design, sel, scale, target, shift_sd, material, material_sd)} "
            f"{evidence(spec, design, sel, finds, scale, rtm, target, obs, second, ctx, share)}")


def caveats(ctx, rel, out: Sections) -> None:
    if ctx.blinded:
        out.caveats.append("Blinded audit: the observed change is pooled over arms, so it includes any treatment "
                           "effect; the share attributed to regression to the mean is a share of that pooled change.")
    if rel.lower_bound:
        out.caveats.append("The reliability comes from the entry reading and follow-up, which also differ by true "
                           "change over follow-up: it is a lower bound, so the expected regression to the mean is "
                           "an upper bound for measurement error alone.")


def method_text(level: float) -> str:
    """The finding's method, every interval named with the audit's level (:func:`interval_words`)."""
    return ("Selection: the declared entry criterion, else a truncation-edge likelihood-ratio test with a Monte "
            "Carlo null on screening and baseline (Bonferroni). Scale: raw or log by the truncated-normal "
            "likelihood with the Jacobian. Population mean and SD: truncated-normal MLE of the entry reading. "
            "Reliability: slope of a second pre-treatment reading on the entry reading (unbiased under "
            "selection), else the declared value, else the slope of follow-up on it (a lower bound). Expected "
            f"change: Barnett et al. (2005) formula with a "
            f"{interval_words('parametric-bootstrap', level, 'parametric-bootstrap CI')}, set beside the observed "
            f"mean change ({interval_words('t', level)}); second-baseline bias from the trivariate-normal relation; "
            "Kelley shrinkage.")


# ----------------------------------------------------------------------------- the check


def no_selection_result(check, data, finds, out: Sections, level: float = 0.95):
    tested = ", ".join(f"{f.visit} {fmt_p(f.test.p_value)}" for f in finds)
    why = (f"no entry criterion declared; no truncation edge: {tested}" if finds else
           "no entry criterion declared; too few distinct values to look for a truncation edge")
    return result(check, data, Verdict.SOUND,
                  f"No selection on this outcome was declared or detected: regression to the mean is not expected "
                  f"to bias within-arm change or the comparison ({why}).", subfindings=out.subfindings, estimates=out.estimates,
                  recommendation=recommended_analysis(data.design, Verdict.SOUND),
                  references=cite(["barnett-2005"]), method=method_text(level))


# ----------------------------------------------------------------------------- reported quantities


@dataclass(frozen=True)
class EntryCounts:
    """Entry readings on the kept side of the cutoff and on the excluded side (left out)."""

    kept: int
    excluded: int

    @property
    def total(self) -> int:
        return self.kept + self.excluded

    @property
    def share_excluded(self) -> float:
        """Share of the entry readings on the excluded side: the criterion not honoured when above
        VIOLATION_SHARE."""
        return self.excluded / self.total


@dataclass(frozen=True)
class Population:
    """The fitted unselected population: (estimate, lower, upper) of its mean and SD (Wald, at the
    audit's level), on the log scale also the geometric mean (exp of the mean and its interval), and
    the share of it meeting the cutoff (``1 - share_out``)."""

    mu_ci: tuple[float, float, float]
    sigma_ci: tuple[float, float, float]
    share_meeting: float
    geometric: tuple[float, float, float] | None = None


def population(scale: Scale, share_out: float, level: float) -> Population:
    """The truncated-normal fit's Wald intervals of the mean and SD at ``level`` (the geometric mean
    their back-transform on the log scale) and the share meeting the cutoff, ``1 - share_out``."""
    fit = scale.fit
    mu_ci = fit.ci("mu", level)
    geometric = (math.exp(fit.mu), math.exp(mu_ci[1]), math.exp(mu_ci[2])) if scale.log else None
    return Population(mu_ci, fit.ci("sigma", level), 1 - share_out, geometric)


def expected_ratio(rtm, scale: Scale) -> Interval | None:
    """On the log scale, the expected ratio later / entry reading: exp of the expected change and its
    interval (None on the raw scale)."""
    if not scale.log:
        return None
    return Interval(math.exp(rtm.estimate), math.exp(rtm.lower), math.exp(rtm.upper))


@dataclass(frozen=True)
class Shrinkage:
    """The entry readings in order of value (analysis scale), their shrunk values
    ``mu + rho (x - mu)`` (Kelley 1947) and the mean of ``shrunk - observed``, which equals the
    expected change at the maximum-likelihood fit."""

    observed: np.ndarray
    shrunk: np.ndarray
    mean_shift: float


def shrinkage(rd: Readings, scale: Scale, sel: Selection, rho: float) -> Shrinkage:
    """The entry readings sorted on the analysis scale, shrunk toward the fitted mean by ``rho``."""
    x = np.sort(scale.to(rd.present(sel.column)))
    shrunk = shrunk_values(x, scale.fit.mu, rho)
    return Shrinkage(x, shrunk, float(np.mean(shrunk - x)))


def declared_reliability_change(spec, scale: Scale, sel: Selection, rel: Reliability) -> float | None:
    """The expected change with the reliability declared in study.toml in place of the one estimated
    (a sensitivity; None when none is declared or the declared one is the one used): Barnett et al.
    (2005), or ``-(1 - rho) E[X - mu | a <= X <= b]`` for a window, at the same fitted mean and SD."""
    if spec.reliability is None or rel.source == "declared":
        return None
    fit = scale.fit
    if sel.is_window:
        return -(1 - float(spec.reliability)) * float(window_mean_shift(fit.mu, fit.sigma, fit.lower, fit.upper))
    return expected_rtm(fit.mu, fit.sigma, float(spec.reliability), float(scale.to(sel.cutoff)), sel.direction)


def unexplained_change(obs: Change, target: Interval, level: float) -> Interval:
    """Observed minus expected change, with a normal interval whose SE combines the observed change's
    SE with the expected change's, recovered from its interval's half-width: ``hypot(se_obs,
    (upper - lower) / (2 z))``."""
    q = stats.norm.ppf(0.5 + level / 2)
    diff = obs.mean - target.estimate
    se = math.hypot(obs.se, (target.upper - target.lower) / (2 * q))
    return Interval(diff, diff - q * se, diff + q * se)


def share_explained(target: Interval, obs: Change) -> float | None:
    """The expected change as a percentage of the observed one (None when nothing changed)."""
    return 100 * target.estimate / obs.mean if obs.mean != 0 else None


@dataclass(frozen=True)
class Pairs:
    """Screening and baseline of the participants with both (analysis scale, sorted by screening then
    baseline) and, when the reliability is their slope, the fitted regression line of the other
    reading on the entry reading through the two means, as (x, y) end points on the plot's axes."""

    x: np.ndarray
    y: np.ndarray
    line_x: np.ndarray | None = None
    line_y: np.ndarray | None = None


def pairs(rd: Readings, scale: Scale, sel: Selection, rel: Reliability) -> Pairs | None:
    """The screening-baseline pairs, when the entry reading is one of them (None otherwise or with
    fewer than MIN_PAIRS)."""
    if not rd.has("screening") or sel.column not in ("screening", "baseline"):
        return None
    xs, ys = rd.complete("screening", "baseline")
    if len(xs) < MIN_PAIRS:
        return None
    order = np.lexsort((ys, xs))
    xs, ys = scale.to(xs[order]), scale.to(ys[order])
    if rel.other not in ("screening", "baseline"):
        return Pairs(xs, ys)
    s, o = (xs, ys) if sel.column == "screening" else (ys, xs)
    grid = np.array([s.min(), s.max()])
    fitted = float(np.mean(o)) + rel.value * (grid - float(np.mean(s)))
    line_x, line_y = (grid, fitted) if sel.column == "screening" else (fitted, grid)
    return Pairs(xs, ys, line_x, line_y)


@dataclass(frozen=True)
class Analysis:
    """Every number the check judges by, before any wording: the selection found or declared and
    the readings it kept, the analysis scale with its truncated-normal fit, the fitted share the
    criterion leaves out, the reliability (and the value used, capped), the expected regression to
    the mean, the observed and pre-treatment changes, the change expected in the analysed change
    from baseline (``target``, with the group a residual bias was estimated in), the second-baseline
    shares, and whether the expected shift is material for the design as judged; and what the report
    shows of them: the entry counts, the fitted population's intervals, the shrunk entry readings,
    the expected ratio (log scale), the change with the declared reliability instead, the change not
    explained by regression to the mean and the share it explains, the shift in SDs and the
    screening-baseline pairs."""

    sel: Selection
    finds: list
    rd: Readings
    scale: Scale
    share_out: float
    no_one_out: bool
    rel: Reliability
    rho: float
    rtm: object
    obs: Change
    pre: Change | None
    target: Interval
    target_by_arm: bool
    residual_group: Group | None
    second: SecondBaseline | None
    design: str
    material_sd: float
    counts: EntryCounts
    population: Population
    shrinkage: Shrinkage
    ratio: Interval | None
    declared_change: float | None
    unexplained: Interval
    share_explained: float | None
    pairs: Pairs | None

    @property
    def sigma(self) -> float:
        return self.scale.fit.sigma

    @property
    def shift_sd(self) -> Interval:
        """The change expected in the analysed change, in SDs of the unselected population."""
        t, sigma = self.target, self.sigma
        return Interval(t.estimate / sigma, t.lower / sigma, t.upper / sigma)

    @property
    def material(self) -> bool:
        return is_material(self.target, self.sigma, self.material_sd)

    @property
    def by_arm(self) -> bool:
        return self.obs.by_arm or self.target_by_arm


def analyse(data, ctx: CheckContext, everyone: Readings, sel: Selection, finds) -> Analysis:
    """Fit and estimate everything, in the order each step needs the one before (a step the data
    cannot answer raises NotAssessable)."""
    spec = data.spec
    rd, n_excluded = selected(everyone, sel)
    scale = choose_scale(spec, rd, sel)
    if not scale.fit.converged:
        raise NotAssessable(f"the truncated-normal fit of {sel.visit} did not converge (the selected values are "
                            f"more skewed than a truncated normal allows)")
    share_out = excluded_share(scale, sel)
    rel = choose_reliability(data, ctx, rd, scale, sel)
    rho = capped(rel)
    rtm = (expected_window_change(scale.fit, rho, rel.se, ctx) if sel.is_window else
           expected_change(scale.fit, rho, rel.se, float(scale.to(sel.cutoff)), sel.direction, ctx))
    obs = observed_change(data, ctx, rd, scale)
    pre = pre_treatment_change(rd, scale, sel, rel, spec, ctx.level)
    target, target_by_arm, group = expected_in_change(data, ctx, rd, scale, sel, rtm, rel)
    second = second_baseline(data, ctx, rd, scale, sel, rel, rho)
    return Analysis(sel, finds, rd, scale, share_out, selects_no_one(sel, share_out), rel, rho, rtm,
                    obs, pre, target, target_by_arm, group, second, judged_design(data),
                    ctx.thresholds.rtm_shift_sd, EntryCounts(len(rd.present(sel.column)), n_excluded),
                    population(scale, share_out, ctx.level), shrinkage(rd, scale, sel, rho),
                    expected_ratio(rtm, scale),
                    declared_reliability_change(spec, scale, sel, rel), unexplained_change(obs, target, ctx.level),
                    share_explained(target, obs), pairs(rd, scale, sel, rel))


@register(CHECK_ID, TITLE, _applies, order=30, needs_arms=False,
          summary="Whether entry on this outcome selected an extreme group, how much change regression to "
                  "the mean alone would produce, and how that compares with the change observed.")
def run(data, ctx: CheckContext):
    from .registry import get_check

    check = get_check(CHECK_ID)
    spec = data.spec
    if "baseline" not in data.frame.columns:
        raise NotAssessable("the outcome has no baseline visit")
    out = Sections()
    everyone = Readings.of(data, ctx)
    sel, finds = find_selection(spec, everyone, ctx)
    if sel is None:
        selection_section(None, finds, None, out)
        return no_selection_result(check, data, finds, out, ctx.level)
    an = analyse(data, ctx, everyone, sel, finds)
    scale, rel, rho, rtm, target = an.scale, an.rel, an.rho, an.rtm, an.target
    obs, pre, material, material_sd, design = an.obs, an.pre, an.material, an.material_sd, an.design
    share_out, no_one_out, target_by_arm, by_arm = an.share_out, an.no_one_out, an.target_by_arm, an.by_arm
    selection_section(sel, finds, an.counts, out, share_out)
    population_section(spec, an, out, ctx.level)
    reliability_section(spec, rel, out)
    capped_caveat(rel, out)
    expected_section(spec, scale, rtm, rel, an.ratio, an.declared_change, out, ctx.level)
    residual_bias_section(spec, scale, sel, target, an.residual_group, out)
    observed_section(spec, an, ctx, out)
    model_check_sub(spec, scale, rtm, pre, out)
    shrinkage_section(spec, scale, rho, sel, rel, an.shrinkage, out)
    second = second_baseline_section(an.second, sel, rho, out)
    verdict = decide(design, material, no_one_out)
    shift_sd = an.shift_sd
    out.estimates.append(estimate("Expected shift in the analysed change, in SDs of the unselected population",
                                  shift_sd.estimate, shift_sd.lower, shift_sd.upper,
                                  note=f"material when the whole interval lies beyond {material_sd:g} SD "
                                       f"(rtm_shift_sd; default a convention of this tool)", by_arm=target_by_arm,
                                  key="regression-to-mean.shift-sd"))
    bias_sub(spec, design, sel, target, shift_sd, scale, material, verdict, target_by_arm, out, material_sd)
    figures = [f for f in (pairs_figure(spec, an.pairs, scale, sel, rel),
                           truncation_figure(spec, an.shrinkage.observed, scale, sel)) if f]
    out.figures = figures + out.figures + [
        comparison_figure(spec, scale, figure_rows(sel, rtm, target, obs, pre), by_arm, ctx.level)]
    caveats(ctx, rel, out)
    further_conditions_caveat(spec, out)
    text = (no_one_out_headline(spec, sel, finds, scale, rtm, target, share_out) if no_one_out and not material
            else headline(spec, design, sel, finds, scale, rtm, target, obs, second, ctx, shift_sd, material,
                          material_sd, an.share_explained))
    return result(check, data, verdict, text,
                  subfindings=out.subfindings, estimates=out.estimates, figures=out.figures, caveats=out.caveats,
                  recommendation=recommended_analysis(data.design, verdict, second),
                  references=cite(["barnett-2005", "shrout-fleiss-1979", "pearson-1903", "cohen-1991",
                                   "kelley-1947"] + (["goodman-1960"] if sel.column != "baseline" else [])),
                  method=method_text(ctx.level) + f" Material: the whole interval of the expected shift beyond {material_sd:g} "
                                   f"SD of the unselected population (rtm_shift_sd).")
