"""Later risk and the latest value: is a change (or ratio) between two measurements a fair summary?

Endpoints and eligibility rules defined by the change or ratio between two measurements of a lab
value assume that the risk of a binary event depends on the difference of the two values (equal and
opposite weights) and that it rises or falls monotonically. This check fits logistic models of the
participant-level event on restricted cubic splines of the latest measurement (the main follow-up)
and of the earlier one (baseline), partitions their likelihood-ratio chi-square, compares the models
a change- or ratio-based definition implies against encompassing models in which they are nested,
tests whether the risk curve of the latest value has an interior turning point the data support, and
locates the lowest risk with a bootstrap interval. The verdict concerns the definition the study
declares (``risk_definition``): a declared change or ratio is judged; with none declared the findings
are reported and only a supported turning point gives caution. Formulas and thresholds:
docs/methods/later-risk.md.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property
from typing import Callable

import numpy as np
from scipy import stats

from ..references import add_reference, cite
from ..results import Figure, SubFinding, Table, Verdict, interval_words, level_label
from ..stats.effects import arm_coding
from ..stats.logistic import (INTERCEPT, ChiSquarePartition, ExtremumTest, LogisticFit, LRTest,
                              SeparationError, block_columns, bootstrap_lowest_point, chi_square_partition,
                              coefficient_ratio, contrast, fit_logistic, interior_extremum, lr_test, risk_band)
from ..stats.splines import SplinePlan, choose_knots, flexible_basis, knot_count
from .common import estimate, fmt, fmt_p, result
from .registry import CheckContext, NotAssessable, register

CHECK_ID = "later-risk"
TITLE = "Later risk and the latest value"

ALPHA = 0.05
"""Level of every test whose failure gives caution (nonlinearity, each one-sided end test, the
information and weight tests). Convention of this tool."""
STRONG = 0.01
"""A declared derived definition losing information at p below this is one of the two conditions of
'unsupported' (the other is a material consequence, MATERIAL_ODDS_RATIO). Convention of this tool."""
MATERIAL_ODDS_RATIO = 2.0
"""Materiality threshold: an odds ratio of the event between participants a declared definition
treats alike (no change, starting at the 90th against the 10th percentile of the earlier value), or
between an end of the range and an interior turning point, is material when its interval lies wholly
beyond this factor (above 2 or below 1/2). Convention of this tool."""
SAME_START_QUANTILES = (0.10, 0.90)
"""Starting points (percentiles of the earlier value) compared at no change. Convention of this tool."""
MIN_EVENTS = 10
"""Fewer events (or non-events) than this and the check is not assessed. Convention of this tool."""
SKEW_FOR_LOG = 1.0
"""Positive values whose pooled sample skewness exceeds this are analysed on the log scale (a rule of
thumb, convention of this tool); ``log_scale`` in study.toml overrides it."""
END_QUANTILES = (0.05, 0.95)
"""The ends of the range over which a turning point is sought and tested (convention of this tool)."""
GRID_POINTS = 101
RESAMPLES, QUICK_RESAMPLES = 400, 50
MIN_BOOT_SUCCESS = 0.8
"""A bootstrap interval is reported only when at least this share of resamples could be fitted."""

LATEST, EARLIER = "latest", "earlier"

add_reference("akaike-1974", "Akaike H. A new look at the statistical model identification. IEEE Trans "
                             "Autom Control 1974;19:716-723.")
add_reference("wilks-1938", "Wilks SS. The large-sample distribution of the likelihood ratio for testing "
                            "composite hypotheses. Ann Math Stat 1938;9:60-62.")
add_reference("berger-1982", "Berger RL. Multiparameter hypothesis testing and acceptance sampling. "
                             "Technometrics 1982;24:295-300.")
add_reference("lind-mehlum-2010", "Lind JT, Mehlum H. With or without U? The appropriate test for a "
                                  "U-shaped relationship. Oxf Bull Econ Stat 2010;72:109-118.")
add_reference("hothorn-2008", "Hothorn T, Bretz F, Westfall P. Simultaneous inference in general parametric "
                             "models. Biom J 2008;50:346-363.")
add_reference("efron-tibshirani-1993", "Efron B, Tibshirani RJ. An Introduction to the Bootstrap. "
                                       "Chapman & Hall, 1993.")
add_reference("albert-anderson-1984", "Albert A, Anderson JA. On the existence of maximum likelihood "
                                      "estimates in logistic regression models. Biometrika 1984;71:1-10.")


def _applies(spec, design) -> bool:
    return spec.risk_endpoint is not None and spec.baseline_visit is not None


# ------------------------------------------------------------------------------------ model terms


@dataclass(frozen=True)
class Term:
    """One measurement as it enters a model: its scale (log or not) and its spline plan.

    The basis is :func:`flexible_basis`: the restricted cubic spline of :func:`spline_basis`, or, with
    too few distinct values, u and (u - centre)^2 with the centre fixed in the plan, so that
    predictions at new values use the same basis as the fit.
    """

    name: str
    log: bool
    plan: SplinePlan

    @classmethod
    def from_values(cls, name: str, x: np.ndarray, log: bool, effective_n: int) -> "Term":
        """Knots at the spline module's quantiles, their number from :func:`knot_count` on the
        effective sample size min(events, non-events) (events per variable: Peduzzi et al. 1996)."""
        u = _scale(x, log)
        return cls(name, log, choose_knots(u, knot_count(effective_n, len(np.unique(u)))))

    def basis(self, x) -> np.ndarray:
        return flexible_basis(_scale(x, self.log), self.plan)

    def columns(self, x) -> dict[str, np.ndarray]:
        return block_columns(self.name, self.basis(x))

    @property
    def names(self) -> list[str]:
        return [self.name] + [f"{self.name}'{j}" for j in range(1, self.df)]

    @property
    def df(self) -> int:
        return 1 + self.plan.nonlinear_df


def _scale(x, log: bool) -> np.ndarray:
    x = np.asarray(x, dtype=float)
    return np.log(x) if log else x


def decide_log_scale(latest: np.ndarray, earlier: np.ndarray, log_scale: bool | None) -> tuple[bool, str]:
    """The log scale when asked for, or when every value is positive and the pooled skewness > 1."""
    both = np.concatenate([latest, earlier])
    positive = bool(np.all(both > 0))
    if log_scale is not None:
        if log_scale and not positive:
            raise NotAssessable("log_scale is set but some values are zero or negative")
        return bool(log_scale), "as set by log_scale in study.toml"
    skew = float(stats.skew(both))
    if positive and skew > SKEW_FOR_LOG:
        return True, f"all values positive and pooled skewness {fmt(skew)} > {SKEW_FOR_LOG:g}"
    why = "some values are not positive" if not positive else f"pooled skewness {fmt(skew)} <= {SKEW_FOR_LOG:g}"
    return False, why


# -------------------------------------------------------------------------------- derived values


@dataclass(frozen=True)
class Definition:
    """A derived summary of the two values: how it is computed and how to undo it."""

    kind: str
    label: str
    log: bool
    """The scale on which it is a difference: change is latest - earlier, the log ratio log latest - log earlier."""
    value: Callable[[np.ndarray, np.ndarray], np.ndarray]
    latest_from: Callable[[np.ndarray, np.ndarray], np.ndarray]
    """latest value given (earlier, derived value)."""


CHANGE = Definition("change", "change", False, lambda l, e: l - e, lambda e, d: e + d)
LOG_RATIO = Definition("log ratio", "log ratio", True, lambda l, e: np.log(l / e), lambda e, r: e * np.exp(r))
DECLARED = {"change": CHANGE, "ratio": LOG_RATIO}
"""The derived definitions a study.toml ``risk_definition`` can declare; ``latest`` declares none."""


@dataclass(frozen=True)
class DerivedTest:
    """What a derived definition keeps of the information in the two values.

    ``information``: the model with a spline in the derived value against the encompassing model
    (splines of each value on the definition's scale plus the nonlinear terms of the derived value's
    spline), in which it is nested because the derived value's linear term is the difference of the
    two linear terms. ``weights``: the model linear in the derived value against the model linear in
    each value (1 df: equal and opposite weights). ``weight_ratio``: b_earlier / b_latest in the
    model linear in each value, which a difference fixes at -1, with a delta-method interval.
    """

    definition: Definition
    term: Term
    fit: LogisticFit
    encompassing: LogisticFit
    information: LRTest
    weights: LRTest
    weight_ratio: tuple[float, float, float]

    @property
    def aic_gap(self) -> float:
        """AIC of the derived model minus that of the encompassing model (below 0: the derived fits better)."""
        return self.fit.aic - self.encompassing.aic


def derived_test(definition: Definition, y, latest, earlier, adjust, effective_n: int,
                 level: float) -> DerivedTest:
    """Fit the derived model, its encompassing model and the two linear models (see DerivedTest).

    With d = u_l - u_e on the definition's scale, the spline basis of d is (d, N(d)); since d lies in
    the span of (u_l, u_e), the model S(d) is nested in S(u_l) + S(u_e) + N(d), with
    df = dim S(u_l) + dim S(u_e) + dim N(d) - dim S(d).
    """
    d = definition.value(latest, earlier)
    term = Term.from_values(definition.kind, d, False, effective_n)
    lt = Term.from_values(LATEST, latest, definition.log, effective_n)
    et = Term.from_values(EARLIER, earlier, definition.log, effective_n)
    own = term.columns(d)
    nonlinear = {k: v for k, v in own.items() if k != term.name}
    fit = fit_logistic(y, {**own, **adjust})
    encompassing = fit_logistic(y, {**lt.columns(latest), **et.columns(earlier), **nonlinear, **adjust})
    ul, ue = _scale(latest, definition.log), _scale(earlier, definition.log)
    linear_derived = fit_logistic(y, {term.name: ul - ue, **adjust})
    linear_both = fit_logistic(y, {LATEST: ul, EARLIER: ue, **adjust})
    return DerivedTest(definition, term, fit, encompassing, lr_test(fit, encompassing),
                       lr_test(linear_derived, linear_both), weight_ratio(linear_both, level))


def weight_ratio(fit: LogisticFit, level: float) -> tuple[float, float, float]:
    """r = b_e / b_l with var(r) = [V_ee - 2 r V_le + r^2 V_ll] / b_l^2 (delta method; stats.logistic)."""
    return coefficient_ratio(fit, EARLIER, LATEST, level)


# ------------------------------------------------------------------------------------- analysis


@dataclass(frozen=True)
class Shape:
    """The fitted risk curve of the latest value over [5th, 95th percentile]: turning points and tests."""

    grid: np.ndarray
    nonlinear: LRTest
    minimum: ExtremumTest
    maximum: ExtremumTest

    def supported(self, test: ExtremumTest) -> bool:
        """Non-monotone when the nonlinear terms are significant and both ends differ from the turning
        point (each one-sided test at ALPHA, adjusted for the choice of the turning point)."""
        return (self.nonlinear.p_value < ALPHA and test.p_value is not None and test.p_value < ALPHA)

    @property
    def flagged(self) -> str | None:
        """``U-shaped``, ``inverted-U-shaped`` or None (no turning point the data support)."""
        if self.supported(self.minimum):
            return "U-shaped"
        if self.supported(self.maximum):
            return "inverted-U-shaped"
        return None

    @property
    def suggested(self) -> ExtremumTest | None:
        """A turning point that is significant only before adjustment for its choice (weaker evidence):
        nonlinear terms significant, interior, and both pointwise one-sided p below ALPHA."""
        if self.flagged or self.nonlinear.p_value >= ALPHA:
            return None
        for t in (self.minimum, self.maximum):
            if t.interior and max(t.low_end.p_value, t.high_end.p_value) < ALPHA:
                return t
        return None


@dataclass(frozen=True)
class Lowest:
    """Where the fitted risk is lowest on the grid, with a percentile bootstrap interval."""

    at: float
    lower: float | None
    upper: float | None
    resamples: int
    failed: int


@dataclass(frozen=True)
class SameValue:
    """Participants whose value did not change (latest = earlier), starting high against low.

    ``log_or`` is the difference of the full model's fitted logits at (latest, earlier) = (h, h) and
    (l, l), h and l the 90th and 10th percentiles of the earlier value, with its delta-method SE: a
    change- or ratio-based definition gives both the same risk, so it is 0 when such a definition is
    adequate. Adjustment columns cancel from the difference.
    """

    low: float
    high: float
    log_or: float
    se: float

    def interval(self, level: float) -> tuple[float, float, float]:
        """(odds ratio, lower, upper), Wald on the logit scale."""
        z = stats.norm.ppf(0.5 + level / 2)
        return (math.exp(self.log_or), math.exp(self.log_or - z * self.se), math.exp(self.log_or + z * self.se))

    def detectable(self, level: float) -> bool:
        _, lo, hi = self.interval(level)
        return lo > 1 or hi < 1

    def material(self, level: float, threshold: float = MATERIAL_ODDS_RATIO) -> bool:
        """The interval lies wholly beyond ``threshold`` (or its inverse): the study's ``odds_ratio``,
        default MATERIAL_ODDS_RATIO."""
        _, lo, hi = self.interval(level)
        return lo > threshold or hi < 1 / threshold


def end_odds_ratios(test: ExtremumTest, level: float) -> list[tuple[float, float, float, float]]:
    """(end, odds ratio, lower, upper) of each end against an interior extremum, Wald intervals;
    oriented so that the ratio exceeds 1 when the end lies away from the extremum."""
    z = stats.norm.ppf(0.5 + level / 2)
    return [(e.at, math.exp(e.difference), math.exp(e.difference - z * e.se), math.exp(e.difference + z * e.se))
            for e in (test.low_end, test.high_end)]


@dataclass(frozen=True)
class Analysis:
    """Everything the check computes for one outcome, before any wording: data, terms, fits, tests."""

    y: np.ndarray
    latest: np.ndarray
    earlier: np.ndarray
    adjust: dict[str, np.ndarray]
    log_scale: bool
    scale_reason: str
    latest_term: Term
    earlier_term: Term
    partition: ChiSquarePartition
    shape: Shape
    lowest: Lowest
    same_value: SameValue
    derived: list[DerivedTest]
    skipped: list[str] = field(default_factory=list)
    declared: str | None = None
    """``risk_definition`` from study.toml: change, ratio, latest or None."""
    level: float = 0.95
    material_odds_ratio: float = MATERIAL_ODDS_RATIO
    """The odds ratio a consequence must clear to be material (study.toml ``odds_ratio``)."""

    @property
    def full(self) -> LogisticFit:
        return self.partition.full

    @cached_property
    def reported(self) -> "Reported":
        """What the report shows beyond the tests: curves, odds ratios, shares, table rows
        (:func:`reported_numbers`). Worked out from this analysis when first read, so a copy made with
        ``dataclasses.replace`` works out its own, and callers that only judge do not pay for it."""
        return reported_numbers(self)

    @property
    def events(self) -> int:
        return int(self.y.sum())

    @property
    def best(self) -> DerivedTest | None:
        """The derived definition that fits better (lower AIC), shown when none is declared."""
        return min(self.derived, key=lambda d: d.fit.aic) if self.derived else None

    @property
    def judged(self) -> DerivedTest | None:
        """The declared change- or ratio-based definition, the only one a verdict is about."""
        want = DECLARED.get(self.declared or "")
        return next((d for d in self.derived if d.definition is want), None) if want else None

    @property
    def shown(self) -> DerivedTest | None:
        """The definition the table and figure of a derived value show: the declared one, else the better."""
        return self.judged or self.best

    @property
    def turning(self) -> ExtremumTest | None:
        """The supported turning point's test, or None."""
        kind = self.shape.flagged
        return None if kind is None else self.shape.minimum if kind == "U-shaped" else self.shape.maximum

    @property
    def turning_material(self) -> bool:
        """A supported turning point with both ends' odds-ratio intervals wholly above MATERIAL_ODDS_RATIO."""
        t = self.turning
        return t is not None and all(lo > self.material_odds_ratio for _, _, lo, _ in end_odds_ratios(t, self.level))

    def models(self) -> list[tuple[str, LogisticFit]]:
        out = [("Latest value only", self.partition.reduced[f"-{EARLIER}"]),
               ("Earlier value only", self.partition.reduced[f"-{LATEST}"]),
               ("Both values", self.full)]
        out += [(f"{d.definition.label.capitalize()} only", d.fit) for d in self.derived]
        return out


def analyse(y, latest, earlier, adjust: dict[str, np.ndarray] | None = None, log_scale: bool | None = None,
            level: float = 0.95, resamples: int = 0, seed: int = 0, definition: str | None = None,
            material_odds_ratio: float = MATERIAL_ODDS_RATIO) -> Analysis:
    """Every model, test and estimate of the check, from arrays (no verdict).

    ``definition``: the declared ``risk_definition`` (change, ratio, latest or None). Raises
    NotAssessable for too few events or non-events, for separation, and for a declared ratio with
    values that are not all positive or a declared definition whose model cannot be fitted.
    """
    if definition not in (None, "latest", *DECLARED):
        raise ValueError(f"unknown risk definition {definition!r}")
    y = np.asarray(y, dtype=float)
    latest, earlier = np.asarray(latest, dtype=float), np.asarray(earlier, dtype=float)
    adjust = dict(adjust or {})
    events = int(y.sum())
    if min(events, len(y) - events) < MIN_EVENTS:
        raise NotAssessable(f"{events} events and {len(y) - events} non-events among {len(y)} participants "
                            f"(at least {MIN_EVENTS} of each are needed)")
    for name, x in ((LATEST, latest), (EARLIER, earlier)):
        if len(np.unique(x)) < 3:
            raise NotAssessable(f"the {name} value takes fewer than 3 distinct values")
    effective_n = min(events, len(y) - events)
    log, reason = decide_log_scale(latest, earlier, log_scale)
    lt = Term.from_values(LATEST, latest, log, effective_n)
    et = Term.from_values(EARLIER, earlier, log, effective_n)
    try:
        partition = chi_square_partition(y, {LATEST: lt.basis(latest), EARLIER: et.basis(earlier)}, adjust)
    except SeparationError as exc:
        raise NotAssessable(f"the event is perfectly predicted by the model ({exc}); "
                            "the maximum likelihood estimates do not exist") from exc
    except ValueError as exc:
        raise NotAssessable(f"the models of the two values cannot be fitted ({exc})") from exc
    grid = np.linspace(*np.quantile(latest, END_QUANTILES), GRID_POINTS)
    basis = lt.basis(grid)
    shape = Shape(grid, partition.nonlinear[LATEST],
                  interior_extremum(partition.full, lt.names, grid, basis, "minimum", seed=seed),
                  interior_extremum(partition.full, lt.names, grid, basis, "maximum", seed=seed))
    lowest = locate_lowest(y, latest, earlier, adjust, lt, et, grid, shape.minimum.at, resamples, seed, level)
    derived, skipped = [], []
    positive = bool(np.all(latest > 0) and np.all(earlier > 0))
    if definition == "ratio" and not positive:
        raise NotAssessable("risk_definition is 'ratio' but some values are zero or negative")
    for kind in [CHANGE] + ([LOG_RATIO] if positive else []):
        try:
            derived.append(derived_test(kind, y, latest, earlier, adjust, effective_n, level))
        except (ValueError, RuntimeError) as exc:
            if DECLARED.get(definition or "") is kind:
                raise NotAssessable(f"the declared {kind.label} model cannot be fitted ({exc})") from exc
            skipped.append(f"The {kind.label} model could not be fitted ({exc}).")
    same = same_value_contrast(partition.full, lt, et, earlier)
    return Analysis(y, latest, earlier, adjust, log, reason, lt, et, partition, shape, lowest, same, derived,
                    skipped, definition, level, material_odds_ratio)


def same_value_contrast(full: LogisticFit, lt: Term, et: Term, earlier) -> SameValue:
    """The full model's logit at latest = earlier = the 90th percentile of the earlier value minus that
    at the 10th (see SameValue), by :func:`auditor.stats.logistic.contrast`."""
    low, high = (float(v) for v in np.quantile(earlier, SAME_START_QUANTILES))
    at = np.array([low, high])
    cols = {**lt.columns(at), **et.columns(at)}
    c = np.array([0.0 if k == INTERCEPT or k not in cols else cols[k][1] - cols[k][0] for k in full.names])
    log_or, se = contrast(full, c)
    return SameValue(low, high, log_or, se)


def locate_lowest(y, latest, earlier, adjust, lt: Term, et: Term, grid, at: float, resamples: int,
                  seed: int, level: float) -> Lowest:
    """Percentile bootstrap of the grid point where the latest value's fitted logit is lowest.

    Participants are resampled with replacement and the model of both values refitted with the knots
    held at their full-sample positions (Efron and Tibshirani 1993, chapter 13).
    """
    if resamples <= 0:
        return Lowest(at, None, None, 0, 0)
    columns = {**lt.columns(latest), **et.columns(earlier), **adjust}
    lo, hi, failed = bootstrap_lowest_point(y, columns, list(lt.names), lt.basis(grid), grid, resamples, seed,
                                            level, MIN_BOOT_SUCCESS)
    return Lowest(at, lo, hi, resamples, failed)


def design_rows(fit: LogisticFit, n: int, given: dict[str, np.ndarray], fill: dict[str, float]) -> np.ndarray:
    """Rows in ``fit.names`` order: 1 for the intercept, ``given`` columns, ``fill`` constants elsewhere."""
    cols = []
    for name in fit.names:
        if name == INTERCEPT:
            cols.append(np.ones(n))
        elif name in given:
            cols.append(np.asarray(given[name], dtype=float))
        else:
            cols.append(np.full(n, fill[name]))
    return np.column_stack(cols)


def curve(an: Analysis, fit: LogisticFit, parts: dict[str, np.ndarray], level: float):
    """Risk and band of ``fit`` with the named columns given and the adjustment columns at their means."""
    n = len(next(iter(parts.values())))
    fill = {k: float(np.mean(v)) for k, v in an.adjust.items()}
    return risk_band(fit, design_rows(fit, n, parts, fill), level)


def full_curve(an: Analysis, latest, earlier, level: float):
    latest, earlier = np.broadcast_arrays(np.asarray(latest, float), np.asarray(earlier, float))
    return curve(an, an.full, {**an.latest_term.columns(latest), **an.earlier_term.columns(earlier)}, level)


def derived_curve(an: Analysis, test: DerivedTest, values, level: float):
    return curve(an, test.fit, test.term.columns(np.asarray(values, float)), level)


# ------------------------------------------------------------------------------- reported numbers


@dataclass(frozen=True)
class Curve:
    """A modelled risk curve: the values ``x`` it is drawn at and its pointwise band (risk_band)."""

    x: np.ndarray
    band: object


@dataclass(frozen=True)
class Compare:
    """Risk by a derived value: every participant's derived value (``values``), the derived model's
    curve along a grid over its 5th to 95th percentiles (``own``), and the model of both values for
    participants starting at the 10th, 50th and 90th percentiles of the earlier value (``starts``:
    (start, risk along the grid, NaN where the latest value would leave the observed range))."""

    values: np.ndarray
    own: Curve
    starts: list[tuple[float, np.ndarray]]


@dataclass(frozen=True)
class PartitionShare:
    """One line of the chi-square partition (:meth:`ChiSquarePartition.rows`: ``latest``, ``latest,
    nonlinear part``, ..., ``all blocks together``, ``adjustment``, ``whole model``) with its percentage
    of the chi-square of both values (None for the adjustment and the whole model, or when that
    chi-square is 0)."""

    name: str
    test: LRTest
    share: float | None


UNSHARED = ("adjustment", "whole model")
"""Partition lines that are not parts of the chi-square of both values."""


@dataclass(frozen=True)
class Reported:
    """The numbers the report shows beyond the tests, computed from an :class:`Analysis`."""

    digits: int
    """Decimals for values of the measurement: about two significant digits of its pooled SD."""
    median_earlier: float
    median_latest: float
    lowest_risk: tuple[float, float, float]
    """Modelled risk (with band) at the lowest point, earlier value at its median, covariates at their means."""
    turning_ends: list | None
    """:func:`end_odds_ratios` of the supported turning point, or None."""
    minimum_ends: list | None
    """:func:`end_odds_ratios` of the grid minimum when it is interior, or None."""
    same_value: tuple[float, float, float]
    """:meth:`SameValue.interval` at the audit's level."""
    shares: dict[str, float]
    """Share of the chi-square of both values carried by each value alone (latest, earlier)."""
    partition: list[PartitionShare]
    aic_gaps: list[float]
    """AIC of each of :meth:`Analysis.models` minus that of the model of both values."""
    same_change_rows: list[list]
    """Rows of the same-change table for the shown definition (empty when none is shown)."""
    latest_curve: Curve
    earlier_curve: Curve
    compare: Compare | None


def display_digits(latest: np.ndarray, earlier: np.ndarray) -> int:
    """Decimals that show about two significant digits of the pooled SD (0 to 4; 2 when it is 0)."""
    sd = float(np.std(np.concatenate([latest, earlier])))
    return max(0, min(4, 1 - math.floor(math.log10(sd)))) if sd > 0 else 2


def partition_shares(p: ChiSquarePartition) -> list[PartitionShare]:
    """The partition's lines, each with 100 x its chi-square over that of both values."""
    joint = p.joint.statistic
    return [PartitionShare(r.name, r.test, 100 * r.test.statistic / joint
                           if r.name not in UNSHARED and joint > 0 else None) for r in p.rows()]


def observed_latest(an: Analysis, latest) -> np.ndarray:
    """Where ``latest`` lies within the observed range of the latest value: the model of both values is
    evaluated only there."""
    return (latest >= float(np.min(an.latest))) & (latest <= float(np.max(an.latest)))


def same_change_rows(an: Analysis, d: DerivedTest, digits: int, level: float) -> list[list]:
    """Participants with the same derived value (none, and a rise of one SD) starting at the 10th, 25th,
    50th, 75th and 90th percentiles of the earlier value: (earlier, latest, derived value as stated,
    risk from both values with band, risk from the derived value alone), risks in percent; rows whose
    latest value leaves the observed range are left out."""
    starts = np.quantile(an.earlier, [0.10, 0.25, 0.50, 0.75, 0.90])
    values = _typical_steps(d.definition.value(an.latest, an.earlier), d.definition)
    rows = []
    for step in values:
        lat = d.definition.latest_from(starts, np.full(len(starts), step))
        keep = observed_latest(an, lat)
        if keep.sum() < 2:
            continue
        full = full_curve(an, lat[keep], starts[keep], level)
        own = derived_curve(an, d, np.full(int(keep.sum()), step), level)
        for i, (e, l_) in enumerate(zip(starts[keep], lat[keep])):
            rows.append([round(float(e), digits), round(float(l_), digits),
                         _step_value(step, d.definition), 100 * float(full.risk[i]),
                         100 * float(full.lower[i]), 100 * float(full.upper[i]), 100 * float(own.risk[i])])
    return rows


def compare_curves(an: Analysis, d: DerivedTest, level: float) -> Compare:
    """The data of the figure setting the derived model's risk beside the model of both values."""
    dv = d.definition.value(an.latest, an.earlier)
    grid = np.linspace(*np.quantile(dv, END_QUANTILES), 80)
    own = derived_curve(an, d, grid, level)
    starts = []
    for q in (0.10, 0.50, 0.90):
        start = float(np.quantile(an.earlier, q))
        lat = d.definition.latest_from(np.full(len(grid), start), grid)
        inside = observed_latest(an, lat)
        risk = np.full(len(grid), np.nan)
        if inside.any():
            risk[inside] = full_curve(an, lat[inside], np.full(int(inside.sum()), start), level).risk
        starts.append((start, risk))
    return Compare(dv, Curve(grid, own), starts)


def reported_numbers(an: Analysis) -> Reported:
    """Every number the wording prints that the tests above do not already hold, at ``an.level``."""
    level = an.level
    digits = display_digits(an.latest, an.earlier)
    med_e, med_l = float(np.median(an.earlier)), float(np.median(an.latest))
    band = full_curve(an, [an.lowest.at], [med_e], level)
    m, turning = an.shape.minimum, an.turning
    xl = np.linspace(np.min(an.latest), np.max(an.latest), 120)
    xe = np.linspace(np.min(an.earlier), np.max(an.earlier), 120)
    base = an.full.aic
    shown = an.shown
    return Reported(
        digits, med_e, med_l, (float(band.risk[0]), float(band.lower[0]), float(band.upper[0])),
        end_odds_ratios(turning, level) if turning is not None else None,
        end_odds_ratios(m, level) if m.interior else None,
        an.same_value.interval(level),
        {LATEST: an.partition.share(LATEST), EARLIER: an.partition.share(EARLIER)},
        partition_shares(an.partition), [f.aic - base for _, f in an.models()],
        same_change_rows(an, shown, digits, level) if shown is not None else [],
        Curve(xl, full_curve(an, xl, np.full(len(xl), med_e), level)),
        Curve(xe, full_curve(an, np.full(len(xe), med_l), xe, level)),
        compare_curves(an, shown, level) if shown is not None else None)


# ---------------------------------------------------------------------------------- check inputs


@dataclass(frozen=True)
class RiskInputs:
    y: np.ndarray
    latest: np.ndarray
    earlier: np.ndarray
    adjust: dict[str, np.ndarray]
    arm_adjusted: bool
    left_out: int
    notes: list[str]


def risk_inputs(data, ctx: CheckContext) -> RiskInputs:
    """Complete cases of event, both values and covariates; arm indicators when not blinded."""
    frame = data.frame
    for col, what in (("baseline", "a baseline value"), ("followup", "a follow-up value"),
                      ("event", "the risk endpoint")):
        if col not in frame.columns:
            raise NotAssessable(f"the outcome has no {what}")
    use_arm = not ctx.blinded and data.design == "parallel"
    cols = ["event", "baseline", "followup", *data.spec.covariates] + (["arm"] if use_arm else [])
    df = frame.dropna(subset=cols).reset_index(drop=True)
    notes = []
    adjust = {}
    for cov in data.spec.covariates:
        v = df[cov].to_numpy(dtype=float)
        if np.ptp(v) == 0:
            notes.append(f"Covariate {cov} is constant among the participants analysed and was left out.")
            continue
        adjust[cov] = v
    arm_adjusted = False
    if use_arm:
        counts = df["arm"].value_counts()
        arms = [a for a in data.arms if counts.get(a, 0) >= 2]
        if len(arms) > 1:
            df = df[df["arm"].isin(arms)].reset_index(drop=True)
            adjust = {k: df[k].to_numpy(dtype=float) for k in adjust}
            adjust.update(arm_coding(df["arm"].to_numpy(), arms, data.control_arm).columns)
            arm_adjusted = True
    return RiskInputs(df["event"].to_numpy(dtype=float), df["followup"].to_numpy(dtype=float),
                      df["baseline"].to_numpy(dtype=float), adjust, arm_adjusted, len(frame) - len(df), notes)


# ----------------------------------------------------------------------------------- the check


@register(CHECK_ID, TITLE, _applies, order=60, needs_arms=False,
          summary="Whether risk of the event follows the change between two values, or the latest value "
                  "alone, and whether it is monotone.")
def run(data, ctx: CheckContext):
    from .registry import get_check

    check = get_check(CHECK_ID)
    inputs = risk_inputs(data, ctx)
    an = analyse(inputs.y, inputs.latest, inputs.earlier, inputs.adjust, data.spec.log_scale, ctx.level,
                 QUICK_RESAMPLES if ctx.quick else RESAMPLES, ctx.seed, data.spec.risk_definition,
                 ctx.thresholds.odds_ratio)
    view = _View(an, data.spec, inputs, ctx.level)
    verdict = overall_verdict(an)
    return result(check, data, verdict, view.headline(verdict), subfindings=view.subfindings(),
                  recommendation=recommended_analysis(an, verdict),
                  estimates=view.estimates(),
                  tables=view.tables(), figures=view.figures(), caveats=view.caveats(),
                  references=cite(["durrleman-simon-1989", "peduzzi-1996", "stone-koo-1985", "wilks-1938", "akaike-1974",
                                   "berger-1982", "lind-mehlum-2010", "hothorn-2008", "efron-tibshirani-1993",
                                   "albert-anderson-1984"]),
                  method=view.method())


def _key(d: DerivedTest) -> str:
    return d.definition.kind.replace(" ", "-")


def finding_verdicts(an: Analysis) -> dict[str, Verdict]:
    """The verdict of each sub-finding, keyed by its id.

    Only a declared change- or ratio-based definition (``risk_definition``) is judged. With one:
    its information finding is unsupported when it loses information at p < STRONG and a consequence
    is material (participants it treats alike differ in odds by an interval wholly beyond
    MATERIAL_ODDS_RATIO, or a supported turning point with both ends' intervals wholly beyond it),
    caution at p < ALPHA; the same-value finding likewise (unsupported when material with the loss,
    caution when its interval excludes 1); the weights finding caution at p < ALPHA (a p-value alone
    never gives unsupported); monotone unsupported for a material turning point with the loss,
    caution for any supported or suggested one; earlier-informative caution when the latest value
    is informative and the earlier adds nothing, or the two together explain nothing.

    Without one (none declared, or ``latest``): every finding is reported for information with verdict
    sound, except monotone, which is caution for a supported turning point (it matters to any use of
    the value).
    """
    sh, p, level, judged = an.shape, an.partition, an.level, an.judged
    out: dict[str, Verdict] = {}
    if judged is None:
        out["monotone"] = Verdict.CAUTION if sh.flagged else Verdict.SOUND
        out["earlier-informative"] = Verdict.SOUND
        out["same-value"] = Verdict.SOUND
        for d in an.derived:
            out[f"{_key(d)}-information"] = out[f"{_key(d)}-weights"] = Verdict.SOUND
        return out
    lost = judged.information.p_value < STRONG
    material = an.same_value.material(level, an.material_odds_ratio) or an.turning_material
    out["monotone"] = (Verdict.UNSUPPORTED if lost and an.turning_material else
                       Verdict.CAUTION if sh.flagged or sh.suggested is not None else Verdict.SOUND)
    out["earlier-informative"] = (Verdict.CAUTION if p.joint.p_value >= ALPHA
                                  or (p.total[EARLIER].p_value >= ALPHA and p.total[LATEST].p_value < ALPHA)
                                  else Verdict.SOUND)
    out["same-value"] = (Verdict.UNSUPPORTED if lost and an.same_value.material(level, an.material_odds_ratio) else
                         Verdict.CAUTION if an.same_value.detectable(level) else Verdict.SOUND)
    for d in an.derived:
        if d is judged:
            out[f"{_key(d)}-information"] = (Verdict.UNSUPPORTED if lost and material else
                                             Verdict.CAUTION if d.information.p_value < ALPHA else Verdict.SOUND)
            out[f"{_key(d)}-weights"] = Verdict.CAUTION if d.weights.p_value < ALPHA else Verdict.SOUND
        else:
            out[f"{_key(d)}-information"] = out[f"{_key(d)}-weights"] = Verdict.SOUND
    return out


def recommended_analysis(an: Analysis, verdict: Verdict) -> str:
    """The analysis this check recommends: with no declared change or ratio definition, risk modelled on
    the latest value (flexibly when it turns); with one, the declared definition when sound, else a model
    of risk on both values."""
    if an.judged is None:
        return ("risk modelled on the latest value with a flexible (spline) term, not a one-sided cutoff"
                if verdict is not Verdict.SOUND else "risk modelled on the latest value")
    label = an.judged.definition.label
    if verdict is Verdict.SOUND:
        return f"the declared {label}-based definition"
    both = "risk modelled on the latest and the earlier value together, each with a flexible term"
    return both if verdict is Verdict.UNSUPPORTED else f"{both}, as a sensitivity analysis to the declared {label}-based definition"


def overall_verdict(an: Analysis) -> Verdict:
    """The verdict about the declared definition (see :func:`finding_verdicts`).

    Declared change or ratio: unsupported when it loses information at p < STRONG and a consequence
    is material (an interval wholly beyond MATERIAL_ODDS_RATIO); caution for any other departure
    among the monotone, earlier-value, same-value and the declared definition's two findings; sound
    otherwise. None declared (or ``latest``): caution for a supported turning point, sound otherwise;
    never unsupported.
    """
    v = finding_verdicts(an)
    if an.judged is None:
        return v["monotone"]
    if Verdict.UNSUPPORTED in v.values():
        return Verdict.UNSUPPORTED
    keys = ["monotone", "earlier-informative", "same-value",
            f"{_key(an.judged)}-information", f"{_key(an.judged)}-weights"]
    return Verdict.CAUTION if any(v[k] != Verdict.SOUND for k in keys) else Verdict.SOUND


def _odds(v: float) -> str:
    """An odds ratio to two significant digits (whole numbers from 10)."""
    return "n/a" if not math.isfinite(v) else f"{v:.0f}" if v >= 10 else f"{v:.2g}"


class _View:
    """Turns an :class:`Analysis` into the result record's sub-findings, estimates, tables and figures."""

    def __init__(self, an: Analysis, spec, inputs: RiskInputs, level: float):
        self.an, self.spec, self.inputs, self.level = an, spec, inputs, level
        self.arm = inputs.arm_adjusted
        self.verdicts = finding_verdicts(an)
        self.numbers = an.reported
        self.digits = self.numbers.digits
        self.unit = spec.unit
        self.endpoint = spec.risk_endpoint_label or spec.risk_endpoint
        """The event as sentences name it: the declared label, else the endpoint's code."""
        self.endpoint_named = (f"{spec.risk_endpoint_label} ({spec.risk_endpoint})" if spec.risk_endpoint_label
                               else spec.risk_endpoint)
        """The event with its code, where the code identifies the column modelled (method, counts)."""

    # -- formatting

    def x(self, v) -> str:
        return fmt(v, self.digits)

    def axis(self, what: str) -> str:
        return f"{what} ({self.unit})" if self.unit else what

    def chi(self, t: LRTest) -> str:
        return f"chi-square {fmt(t.statistic, 1)} on {t.df} df ({fmt_p(t.p_value)})"

    def odds_ci(self, v: float, lo: float, hi: float) -> str:
        """Hedged: the point estimate is 'an estimated' value, never stated without its interval."""
        return f"an estimated {_odds(v)} times ({self.ci} {_odds(lo)} to {_odds(hi)})"

    @property
    def ci(self) -> str:
        """"CI" at the default level, "90% CI" at another (:func:`interval_words`)."""
        return interval_words("", self.level, noun="CI")

    @property
    def declared_label(self) -> str | None:
        """``change`` or ``ratio`` when one is declared and judged."""
        return None if self.an.judged is None else self.an.declared

    def _for_information(self) -> str:
        if self.an.declared == "latest":
            return "; the declared definition uses the latest value alone, so this is reported for information"
        return ("; no change- or ratio-based definition is declared (risk_definition), so this is reported "
                "for information")

    # -- sub-findings

    def subfindings(self) -> list[SubFinding]:
        an = self.an
        subs = [self._shape_finding(), self._earlier_finding(), self._same_value_finding()]
        for d in an.derived:
            subs.append(self._information_finding(d))
            subs.append(self._weights_finding(d))
        return subs

    def _ends(self) -> str:
        """The consequence of the supported turning point: odds at each end against it, with intervals."""
        (a, ra, la, ua), (b, rb, lb, ub) = self.numbers.turning_ends
        if self.an.turning.kind == "minimum":
            return (f"the odds of {self.endpoint} are {self.odds_ci(ra, la, ua)} as high at the 5th percentile "
                    f"({self.x(a)}) and {self.odds_ci(rb, lb, ub)} as high at the 95th ({self.x(b)}) as at "
                    f"the lowest point")
        return (f"the odds of {self.endpoint} at the highest point are {self.odds_ci(ra, la, ua)} those at the "
                f"5th percentile ({self.x(a)}) and {self.odds_ci(rb, lb, ub)} those at the 95th ({self.x(b)})")

    def _shape_finding(self) -> SubFinding:
        sh = self.an.shape
        kind = sh.flagged
        q = "Does the risk change monotonically with the latest value?"
        v = self.verdicts["monotone"]
        if kind:
            t = self.an.turning
            word = "lowest" if t.kind == "minimum" else "highest"
            ev = (f"{self._ends()} ({word} point {self.x(t.at)}); nonlinear terms {self.chi(sh.nonlinear)}; "
                  f"one-sided {fmt_p(t.low_end.p_adjusted)} and {fmt_p(t.high_end.p_adjusted)} for the two "
                  f"ends, adjusted for the choice of that point")
            plain = ("risk rises on both sides of that point, so a rule that treats only high (or only low) "
                     "values as risky misses the other side" if t.kind == "minimum" else
                     "risk falls on both sides of that point, so a rule that treats only high (or only low) "
                     "values as risky misses the other side")
            return SubFinding("monotone", q, v, f"Not monotone: risk is {kind}; {ev}; {plain}", by_arm=self.arm)
        t = sh.suggested
        if t is not None:
            word = "lowest" if t.kind == "minimum" else "highest"
            return SubFinding("monotone", q, v,
                              f"A turning point is suggested but not supported: nonlinear terms "
                              f"{self.chi(sh.nonlinear)}; both ends differ from the {word} point ({self.x(t.at)}) "
                              f"pointwise (one-sided {fmt_p(t.low_end.p_value)} and {fmt_p(t.high_end.p_value)}) "
                              f"but not after adjustment for the choice of that point "
                              f"({fmt_p(t.low_end.p_adjusted)} and {fmt_p(t.high_end.p_adjusted)})",
                              by_arm=self.arm)
        if sh.nonlinear.p_value < ALPHA:
            text = f"No evidence of a turning point, though the curve bends: nonlinear terms {self.chi(sh.nonlinear)}"
        else:
            text = f"No evidence of a turning point or of curvature: nonlinear terms {self.chi(sh.nonlinear)}"
        return SubFinding("monotone", q, v, text, by_arm=self.arm)

    def _earlier_finding(self) -> SubFinding:
        p = self.an.partition
        lt, et = p.total[LATEST], p.total[EARLIER]
        shares = self.numbers.shares
        ev = (f"latest value given the earlier: {self.chi(lt)}, {fmt(100 * shares[LATEST], 0)}% of the "
              f"chi-square of both values; earlier given the latest: {self.chi(et)}, "
              f"{fmt(100 * shares[EARLIER], 0)}%")
        q = "Does the earlier value add information once the latest is known, as a change definition needs?"
        v = self.verdicts["earlier-informative"]
        if p.joint.p_value >= ALPHA:
            text = f"No evidence that either value relates to risk: the two values together {self.chi(p.joint)}; {ev}"
        elif et.p_value < ALPHA:
            text = f"Yes: {ev}"
        else:
            text = f"No evidence that it adds information: {ev}"
        if self.an.judged is None:
            text += self._for_information()
        return SubFinding("earlier-informative", q, v, text, by_arm=self.arm)

    def _same_value_phrase(self) -> str:
        sv = self.an.same_value
        o, lo, hi = self.numbers.same_value
        return (f"participants whose value did not change have {self.odds_ci(o, lo, hi)} the odds of "
                f"{self.endpoint} when they start at the 90th percentile of the earlier value ({self.x(sv.high)}) "
                f"as when they start at the 10th ({self.x(sv.low)})")

    def _same_value_finding(self) -> SubFinding:
        sv, level = self.an.same_value, self.level
        q = ("Do participants whose value did not change have the same risk whatever their starting value, as a "
             "change- or ratio-based definition assumes?")
        ev = self._same_value_phrase() + ", from the model of both values"
        m = self.an.material_odds_ratio
        if sv.material(level, m):
            text = f"No: {ev}; the interval lies wholly beyond the materiality threshold (odds ratio " \
                   f"{m:g} or 1/{m:g})"
        elif sv.detectable(level):
            text = f"Not quite: {ev}; the interval excludes 1 but not the materiality threshold (odds ratio " \
                   f"{m:g} or 1/{m:g})"
        else:
            text = f"No evidence of a difference: {ev}"
        if self.an.judged is None:
            text += self._for_information()
        return SubFinding("same-value", q, self.verdicts["same-value"], text, by_arm=self.arm)

    def _information_finding(self, d: DerivedTest) -> SubFinding:
        label = d.definition.label
        ev = (f"the model in the {label} alone against the model of both values it is nested in: "
              f"{self.chi(d.information)}; AIC {fmt(d.aic_gap, 1)} against it")
        return self._definition_finding(d, "information", d.information, ev,
                                        f"Does a {label}-based definition keep the risk information in the two values?",
                                        "It loses information", "No evidence that it loses information")

    def _weights_finding(self, d: DerivedTest) -> SubFinding:
        r, lo, hi = d.weight_ratio
        scale = "logs of the values" if d.definition.log else "values"
        ev = (f"weight of the earlier value relative to the latest {fmt(r)} ({self.ci} {fmt(lo)} to {fmt(hi)}; "
              f"a {d.definition.label} fixes it at -1), models linear in the {scale}: {self.chi(d.weights)}")
        return self._definition_finding(d, "weights", d.weights, ev,
                                        f"Do the two values carry equal and opposite weights, as a "
                                        f"{d.definition.label} assumes?",
                                        "The weights differ", "No evidence against equal and opposite weights")

    def _definition_finding(self, d: DerivedTest, part: str, test, ev: str, question: str, rejected: str,
                            kept: str) -> SubFinding:
        """The sub-finding ``<definition>-<part>`` on one derived definition: the evidence ``ev`` led by
        ``rejected`` when ``test`` rejects at ALPHA, else by ``kept``, with the for-information note
        when the definition is not the one judged."""
        text = f"{rejected if test.p_value < ALPHA else kept}: {ev}"
        if d is not self.an.judged:
            text += self._for_information()
        sid = f"{_key(d)}-{part}"
        return SubFinding(sid, question, self.verdicts[sid], text, by_arm=self.arm)

    # -- headline

    def headline(self, verdict: Verdict) -> str:
        """Consequence with its interval first, then the evidence, then what it means for the declared
        definition (or that none is declared)."""
        an = self.an
        shares = self.numbers.shares
        share = (f"the latest value carries {fmt(100 * shares[LATEST], 0)}% of the chi-square of "
                 f"both values (the earlier {fmt(100 * shares[EARLIER], 0)}%)")
        judged = an.judged
        if judged is None:
            parts = [self._shape_phrase(), share]
            if an.shape.flagged:
                parts.append("a rule that treats only high (or only low) values as risky misses the other side")
            parts.append("the declared definition uses the latest value alone, so no change- or ratio-based "
                         "definition is judged" if an.declared == "latest" else
                         "no endpoint or entry rule is declared as defined by change or ratio "
                         "(risk_definition), so no such definition is judged")
        else:
            label = self.declared_label
            t = judged.information
            parts = ([self._shape_phrase()] if an.turning is not None else []) + [self._same_value_phrase()]
            parts.append(f"the declared {label}-based definition loses {self.chi(t)} against the model of both "
                         f"values (AIC {fmt(judged.aic_gap, 1)} against it)")
            if an.turning is None:
                parts.append(self._shape_phrase())
            parts.append(share)
            parts.append({
                Verdict.UNSUPPORTED: f"the declared {label}-based definition misses risk that the two values carry",
                Verdict.CAUTION: f"the declared {label}-based definition may miss some risk: the departure is "
                                 f"detectable, but its size is uncertain or below the materiality threshold "
                                 f"(odds ratio {an.material_odds_ratio:g})",
                Verdict.SOUND: f"no evidence that the declared {label}-based definition misses risk the two "
                               f"values carry"}[verdict])
        text = "; ".join(parts) + "."
        return text[0].upper() + text[1:]

    def _shape_phrase(self) -> str:
        an, sh = self.an, self.an.shape
        unit = f" {self.unit}" if self.unit else ""
        low = an.lowest
        ci = (f", {self.ci} {self.x(low.lower)} to {self.x(low.upper)}{unit}" if low.lower is not None else unit)
        if sh.flagged == "U-shaped":
            return f"risk is U-shaped in the latest value, lowest near {self.x(low.at)}{ci}: {self._ends()}"
        if sh.flagged:
            return (f"risk is highest at an interior latest value, near {self.x(sh.maximum.at)}{unit}: "
                    f"{self._ends()}")
        if sh.suggested is not None:
            word = "lowest" if sh.suggested.kind == "minimum" else "highest"
            return (f"risk may be {word} at an interior latest value (near {self.x(sh.suggested.at)}{unit}), "
                    f"though not significantly after adjustment for the choice of that point")
        total = an.partition.total[LATEST]
        if total.p_value >= ALPHA:
            return f"no evidence that the latest value relates to risk given the earlier ({fmt_p(total.p_value)})"
        direction = "rises" if sh.minimum.index == 0 else "falls" if sh.minimum.index == len(sh.grid) - 1 else \
            "changes"
        return f"risk {direction} with the latest value, with no evidence of a turning point"

    # -- estimates

    def estimates(self):
        an, arm, unit = self.an, self.arm, self.unit
        low = an.lowest
        out = [estimate("Participants analysed", float(len(an.y)), key="later-risk.n-participants"),
               estimate(f"Participants with the event ({self.endpoint_named})", float(an.events), key="later-risk.n-events")]
        out.append(estimate("Latest value at which the modelled risk is lowest", low.at, low.lower, low.upper,
                            unit=unit, note=(f"{interval_words('percentile bootstrap', self.level, noun='')}, {low.resamples} resamples ({low.failed} "
                                             f"not fitted); searched between the 5th and 95th percentiles"
                                             if low.resamples else "searched between the 5th and 95th percentiles"),
                            by_arm=arm, key="later-risk.lowest-risk-value"))
        risk, lower, upper = self.numbers.lowest_risk
        out.append(estimate("Modelled risk at that value", 100 * risk, 100 * lower, 100 * upper, unit="%",
                            note="earlier value at its median, covariates at their means", by_arm=arm,
                            key="later-risk.lowest-risk"))
        m = an.shape.minimum
        if m.interior:
            ends = zip(("5th", "95th"), (m.low_end, m.high_end), self.numbers.minimum_ends)
            for name, e, (_, ratio, lo, hi) in ends:
                out.append(estimate(f"Odds ratio of the event, latest value at its {name} percentile "
                                    f"({self.x(e.at)}) against the lowest point", ratio, lo, hi, e.p_adjusted,
                                    note=f"one-sided p adjusted for the choice of the lowest point (pointwise "
                                         f"{fmt_p(e.p_value)})", by_arm=arm,
                                    key=f"later-risk.odds-ratio-vs-lowest.p{name[:-2]}"))
        sv = an.same_value
        o, lo, hi = self.numbers.same_value
        out.append(estimate(f"Odds ratio of the event with no change, starting at the 90th ({self.x(sv.high)}) "
                            f"against the 10th ({self.x(sv.low)}) percentile of the earlier value", o, lo, hi,
                            note="model of both values; a change- or ratio-based definition assumes 1",
                            by_arm=arm, key="later-risk.same-value-odds-ratio"))
        p = an.partition
        for block, what in ((LATEST, "latest"), (EARLIER, "earlier")):
            out.append(estimate(f"Share of the explainable chi-square carried by the {what} value alone",
                                100 * self.numbers.shares[block], p=p.total[block].p_value, unit="%",
                                note=f"partial chi-square {fmt(p.total[block].statistic, 1)} on "
                                     f"{p.total[block].df} df over the {fmt(p.joint.statistic, 1)} of both",
                                by_arm=arm, key=f"later-risk.chi-square-share.{what}"))
        for d in an.derived:
            t = d.information
            out.append(estimate(f"Chi-square lost by a {d.definition.label}-only definition", t.statistic,
                                p=t.p_value, note=f"{t.df} df; nested in the model of both values "
                                                         f"plus the {d.definition.label}'s nonlinear terms",
                                by_arm=arm, key=f"later-risk.information-lost.{d.definition.kind.replace(' ', '-')}"))
            r, lo, hi = d.weight_ratio
            out.append(estimate(f"Weight of the earlier value relative to the latest ({d.definition.label} "
                                f"assumes -1)", r, lo, hi, d.weights.p_value,
                                note="models linear in the " + ("log values" if d.definition.log else "values")
                                     + "; p tests -1 (1 df)", by_arm=arm,
                                key=f"later-risk.earlier-weight.{d.definition.kind.replace(' ', '-')}"))
        return out

    # -- tables

    def tables(self):
        out = [self._partition_table(), self._model_table()]
        if self.an.shown is not None:
            table = self._same_change_table(self.an.shown)
            if table.rows:
                out.append(table)
        return out

    def _partition_table(self) -> Table:
        labels = {LATEST: "Latest value, all its terms, given the earlier",
                  f"{LATEST}, nonlinear part": "Latest value, nonlinear terms",
                  EARLIER: "Earlier value, all its terms, given the latest",
                  f"{EARLIER}, nonlinear part": "Earlier value, nonlinear terms",
                  "all blocks together": "Both values together",
                  "adjustment": "Adjustment (" + ", ".join(self._adjust_labels()) + ")",
                  "whole model": "Whole model, against no predictor"}
        rows = [[labels[r.name], r.test.statistic, r.test.df, r.test.p_value, r.share]
                for r in self.numbers.partition]
        return Table("chi-square-partition", "Likelihood-ratio chi-square of the model of both values, by source",
                     ["Source", "LR chi-square", "df", "p", "% of the chi-square of both values"], rows,
                     note="Partial chi-squares of correlated values need not add to the joint one; the "
                          "remainder is information the two values share.", by_arm=self.arm)

    def _adjust_labels(self) -> list[str]:
        covs = [c for c in self.spec.covariates if c in self.an.adjust]
        return covs + (["arm"] if self.arm else [])

    def _model_table(self) -> Table:
        rows = [[name, f.n_params, f.loglik, f.aic, gap]
                for (name, f), gap in zip(self.an.models(), self.numbers.aic_gaps)]
        return Table("model-aic", "Models of the event: fit and AIC",
                     ["Model", "Parameters", "Log-likelihood", "AIC", "AIC minus that of both values"], rows,
                     note="Each measurement or derived value enters as a restricted cubic spline; lower AIC "
                          "is better, and a difference above 2 is usually taken as meaningful.", by_arm=self.arm)

    def _same_change_table(self, d: DerivedTest) -> Table:
        rows = self.numbers.same_change_rows
        label = d.definition.label
        return Table("same-change", f"Participants with the same {label} but different starting points",
                     ["Earlier value", "Latest value",
                      "Change" if d.definition.kind == "change" else "Ratio (latest / earlier)",
                      "Risk from both values (%)", "lower",
                      "upper", f"Risk from the {label} alone (%)"], rows,
                     note=f"Within each {label}, a {label}-based definition gives every starting point the same "
                          "risk (last column); the model of both values gives the risk in the fourth column. "
                          "Starting points at the 10th, 25th, 50th, 75th and 90th percentiles of the earlier "
                          "value; rows whose latest value falls outside the observed range are omitted.",
                     by_arm=self.arm)

    # -- figures

    def figures(self):
        an, arm, numbers = self.an, self.arm, self.numbers
        ylabel = f"Modelled risk of {self.endpoint}"
        name = self.spec.display_name
        med_e, med_l = numbers.median_earlier, numbers.median_latest
        xl, bl = numbers.latest_curve.x, numbers.latest_curve.band
        vlines = [{"x": an.lowest.at}] if an.shape.flagged == "U-shaped" else []
        figs = [Figure("risk-latest", "curve_band", f"{name}: modelled risk against the latest value",
                       {"curves": [_curve_data(xl, bl)], "rug": sorted(an.latest.tolist()), "vlines": vlines,
                        "xlabel": self.axis("Latest value"), "ylabel": ylabel},
                       caption=f"Model of both values, earlier value at its median ({self.x(med_e)}), covariates "
                               f"at their means; band: pointwise {level_label(self.level)} interval; ticks: observed "
                               f"latest values" + ("; dotted line: the lowest point." if vlines else "."),
                       by_arm=arm)]
        xe, be = numbers.earlier_curve.x, numbers.earlier_curve.band
        figs.append(Figure("risk-earlier", "curve_band", f"{name}: modelled risk against the earlier value",
                           {"curves": [_curve_data(xe, be)], "rug": sorted(an.earlier.tolist()), "vlines": [],
                            "xlabel": self.axis("Earlier value"), "ylabel": ylabel},
                           caption=f"Model of both values, latest value at its median ({self.x(med_l)}); band: "
                                   f"pointwise {level_label(self.level)} interval; ticks: observed earlier values.",
                           by_arm=arm))
        if an.shown is not None:
            figs.append(self._compare_figure(an.shown, ylabel))
        return figs

    def _compare_figure(self, d: DerivedTest, ylabel: str) -> Figure:
        c = self.numbers.compare
        dv, grid = c.values, c.own.x
        curves = [{**_curve_data(grid, c.own.band), "label": f"{d.definition.label.capitalize()} alone",
                   "style": "dashed", "color": "#222222"}]
        for i, (start, risk) in enumerate(c.starts):
            curves.append({"x": grid.tolist(), "y": risk.tolist(),
                           "label": f"Both values, earlier = {self.x(start)}", "style": "solid", "palette": i})
        label = d.definition.label
        return Figure(f"risk-{_key(d)}", "risk_compare",
                      f"{self.spec.display_name}: risk by {label}, from the {label} alone and from both values",
                      {"curves": curves, "rug": sorted(dv.tolist()), "xlabel": self.axis(label.capitalize())
                       if d.definition.kind == "change" else "Log ratio (latest / earlier)", "ylabel": ylabel},
                      caption=f"If a {label}-based definition were adequate, the solid curves (participants "
                              f"starting at the 10th, 50th and 90th percentiles of the earlier value) would lie "
                              f"on the dashed one. Solid curves stop where the latest value would leave the "
                              f"observed range.", by_arm=self.arm)

    # -- caveats and method

    def caveats(self) -> list[str]:
        an = self.an
        out = list(self.inputs.notes) + list(an.skipped)
        out.append("The models describe associations within this trial; they show which summary of the two "
                   "values tracks the risk, not that either value causes the event.")
        if self.inputs.left_out:
            out.append(f"{self.inputs.left_out} participant(s) lacking the event, either value or a covariate "
                       f"were left out.")
        out.append(f"Scale of the measurements: {'log' if an.log_scale else 'original'} ({an.scale_reason}).")
        if an.lowest.resamples and an.lowest.lower is None:
            out.append(f"Too many bootstrap resamples could not be fitted ({an.lowest.failed} of "
                       f"{an.lowest.resamples}); the location of the lowest risk has no interval.")
        if self.arm:
            out.append("The models are adjusted for arm; every model-based number here is marked as involving "
                       "arms and is recomputed without arm in a blinded audit.")
        if an.events < 10 * an.full.n_params:
            out.append(f"{an.events} events for {an.full.n_params} parameters in the model of both values: "
                       "estimates of the curves are imprecise and the tests approximate.")
        return out

    def method(self) -> str:
        an = self.an
        lt, et = an.latest_term, an.earlier_term
        knots = lambda t: (f"restricted cubic spline with {len(t.plan.knots)} knots" if t.plan.kind == "spline"
                           else "quadratic")
        return (f"Logistic regression (Newton-Raphson, exact likelihood) of {self.endpoint_named} on the latest value "
                f"({knots(lt)}) and the earlier value ({knots(et)}) on the "
                f"{'log' if an.log_scale else 'original'} scale"
                + (", adjusted for " + ", ".join(self._adjust_labels()) if an.adjust else "")
                + "; likelihood-ratio chi-square partition; AIC of the models of each value, of both values"
                + "".join(f", of the {d.definition.label}" for d in an.derived)
                + "; each derived model tested against an encompassing model it is "
                  "nested in; a turning point is supported when the nonlinear terms are significant and the "
                  "fitted logits at the 5th and 95th percentiles each differ from it (one-sided, 0.05, "
                  "max-t adjusted for the choice of the point); "
                  f"{interval_words('percentile bootstrap', self.level, noun='')} of the lowest point; a consequence is material when its odds-ratio "
                  f"interval lies wholly beyond {an.material_odds_ratio:g} or 1/{an.material_odds_ratio:g} "
                  "(odds_ratio; default a convention of this tool).")


def _typical_steps(values: np.ndarray, definition: Definition) -> list[float]:
    """No change and a rise of one SD of the derived value (rounded to 2 significant digits)."""
    sd = float(np.std(values))
    if sd <= 0:
        return [0.0]
    step = float(f"{sd:.2g}")
    return [0.0, step]


def _step_value(step: float, definition: Definition) -> float:
    """The step as a reader states it: a change as such, a log ratio as the ratio latest / earlier."""
    return step if definition.kind == "change" else float(f"{math.exp(step):.3g}")


def _curve_data(x, band) -> dict:
    return {"x": np.asarray(x, float).tolist(), "y": band.risk.tolist(), "lower": band.lower.tolist(),
            "upper": band.upper.tolist()}
