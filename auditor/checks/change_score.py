"""Change-score audit: every assumption that subtracting baseline needs, tested on the trial's data.

Seven sub-findings (selection, linearity, scale, floor and ceiling, interval scale, slope, efficiency),
then the consequences: the analyses fitted side by side, the efficiency lost against ANCOVA, and
whether an apparent "those who start worse benefit more" is an artefact of the change scale. For a
planned change the verdict follows the trial's own cost of change against ANCOVA (its interval
against a 10% materiality), then the assumptions that matter to change; the assumption tests are
Holm-adjusted together.
Thresholds are module constants documented in docs/methods/change-score.md.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..references import add_reference, cite
from ..results import Figure, SubFinding, Table, Verdict, interval_words, level_label
from ..stats.ancova import (categorical_linearity_test, fit_analyses, fit_analyses_categorical, interaction_test,
                           linearity_test, spline_columns)
from ..stats.correlation import pearson
from ..stats.diagnostics import (at_bound_tolerance, bound_shares, boxcox_lr_pvalue, boxcox_profile, category_columns,
                                 granularity,
                                 holm_adjust, share_at_bound, skewness, slope_test, spread_trend_test)
from ..stats.efficiency import ancova_saving, compare_with_ci, empirical_ratio, own_cost
from ..stats.effects import NO_ARMS, ArmCoding, arm_coding
from ..stats.linear import predict
from ..stats.rtm import edge_test_scale, truncation_edge_test
from ..stats.splines import choose_knots
from .common import arms_present, complete_pairs, estimate, fmt, fmt_ci, fmt_p, result, thin
from .registry import CheckContext, register

CHECK_ID = "change-score"
ALPHA = 0.05
"""Family-wise level of the assumption tests behind a caution (truncation edge, linearity, spread
trend, Box-Cox power, slope 1), Holm-adjusted together; also the level of the interaction test
(convention of this tool)."""
MATERIAL_RATIO = 1.10
"""Materiality of a sample-size cost: 10% more participants for the same power, i.e. an efficiency
below 1/1.10 (a convention of this tool). The default of ``sample_size_ratio`` in study.toml's
``[thresholds]``; a check reads the study's value from ``ctx.thresholds``."""
BOUND_SHARE = 0.15
"""Share at a bound above which a floor or ceiling is flagged (McHorney and Tarlov 1995; Terwee et al. 2007)."""
HEAP_SHARE = 0.20
"""Share at one value above which heaping is reported (convention of this tool)."""
FEW_LEVELS = 10
"""Integer-valued outcomes with at most this many distinct values are treated as ordinal (convention)."""
EDGE_MIN_DISTINCT = 20
"""The truncation-edge test is run only when baseline has at least this many distinct values."""
EDGE_NEAR_BOUND = 0.02
"""A baseline extreme within this share of a finite declared bound range from the bound (or at an
infinite range's finite end) is the scale's edge, not a selection: the edge test skips that side
(convention of this tool)."""
CATEGORY_LEVELS = 4
"""A baseline with at most this many distinct values enters the flexible ANCOVA as categories, not a
spline or quadratic (which is singular on two levels; convention of this tool)."""
SKEW_FOR_LOG = 1.0
"""Positive values with skewness above this are examined on the log scale (convention)."""

add_reference("holm-1979", "Holm S. A simple sequentially rejective multiple test procedure. Scand J Stat "
              "1979;6:65-70.")
add_reference("mchorney-tarlov-1995", "McHorney CA, Tarlov AR. Individual-patient monitoring in clinical "
              "practice: are available health status surveys adequate? Qual Life Res 1995;4:293-307.")
add_reference("terwee-2007", "Terwee CB, Bot SDM, de Boer MR, et al. Quality criteria were proposed for "
              "measurement properties of health status questionnaires. J Clin Epidemiol 2007;60:34-42.")
add_reference("box-cox-1964", "Box GEP, Cox DR. An analysis of transformations. J R Stat Soc B "
              "1964;26:211-252.")
add_reference("glejser-1969", "Glejser H. A new test for heteroskedasticity. J Am Stat Assoc "
              "1969;64:316-323.")


def _applies(spec, design) -> bool:
    return spec.baseline_visit is not None


@dataclass(frozen=True)
class BaselineModel:
    """How baseline enters the flexible ANCOVA: the spline plan, or categories for few levels."""

    plan: object
    levels: tuple | None = None
    """The distinct baseline values when entered as categories (at most CATEGORY_LEVELS), else None."""

    @property
    def what(self) -> str:
        if self.levels is not None:
            return f"baseline as {len(self.levels)} categories"
        return ("quadratic term" if self.plan.kind == "quadratic"
                else f"restricted cubic spline, {len(self.plan.knots)} knots")

    def columns(self, x) -> dict:
        x = np.asarray(x, dtype=float)
        return category_columns(x, self.levels) if self.levels is not None else spline_columns(x, self.plan)

    def grid(self, b):
        return (np.asarray(self.levels, dtype=float) if self.levels is not None
                else np.linspace(np.min(b), np.max(b), 80))

    def reference(self, b) -> float:
        """The baseline value the translations are taken at: the median (the nearest level for categories)."""
        med = float(np.median(b))
        if self.levels is None:
            return med
        lv = np.asarray(self.levels, dtype=float)
        return float(lv[np.argmin(np.abs(lv - med))])


def baseline_model(b) -> BaselineModel:
    levels = np.unique(np.asarray(b, dtype=float))
    if len(levels) <= CATEGORY_LEVELS:
        return BaselineModel(choose_knots(b), tuple(float(v) for v in levels))
    return BaselineModel(choose_knots(b))


def flexible_linearity(b, f, arm_cols, model: BaselineModel):
    """(test or None, flexible fit): the nonlinearity F test of the flexible baseline against the linear one.
    None when the flexible model adds nothing (two baseline levels: the line fits each level exactly)."""
    if model.levels is None:
        test, _, flex = linearity_test(b, f, arm_cols, model.plan)
        return test, flex
    return categorical_linearity_test(b, f, arm_cols, model.columns(b))


def linearity_on_plan_scale(b, f, arm_cols, model: BaselineModel, planned: str):
    """The nonlinearity test on the scale the planned analysis works on, or None to keep the raw one.

    A percent-change plan is a multiplicative analysis: its baseline-adjusted alternative is the ANCOVA of
    log follow-up on log baseline, so linearity is judged there when every value is positive (a log-normal
    pair is curved on the raw scale and straight on the log scale). Other plans keep the raw-scale test."""
    if planned != "percent-change" or model.levels is not None or not (np.all(b > 0) and np.all(f > 0)):
        return None
    lb, lf = np.log(b), np.log(f)
    test, _ = flexible_linearity(lb, lf, arm_cols, baseline_model(lb))
    return test


# ----------------------------------------------------------------------------- the analysis


@dataclass(frozen=True)
class Edge:
    """The truncation-edge test of baseline, where it may run (``test`` None otherwise): the scale it
    ran on (``raw`` or the transformed scale's name), the baseline extreme at the edge it examined,
    and a note on what it did not examine and why."""

    test: object | None
    scale_name: str = ""
    edge: float | None = None
    note: str = ""


@dataclass(frozen=True)
class Selection:
    """Did baseline select the participants: the edge test with its Holm-adjusted p, and for a declared
    entry criterion the share of the fitted population it leaves out (None with the reason when that
    share could not be estimated)."""

    edge: Edge
    p_adj: float | None
    declared: bool
    share_out: float | None = None
    reach_failure: str = ""

    @property
    def edge_flagged(self) -> bool:
        """A sharp edge: the Holm-adjusted p of the edge test below ALPHA."""
        return self.edge.test is not None and self.p_adj < ALPHA

    @property
    def no_one_out(self) -> bool:
        """The declared criterion, as declared, selects no one out (share below NEGLIGIBLE_EXCLUDED)."""
        from .regression_to_mean import NEGLIGIBLE_EXCLUDED

        return self.share_out is not None and self.share_out < NEGLIGIBLE_EXCLUDED

    @property
    def flagged(self) -> bool:
        return (self.declared and not self.no_one_out) or self.edge_flagged


@dataclass(frozen=True)
class Linearity:
    """The nonlinearity F test of the flexible baseline (None with two baseline levels), its Holm-adjusted
    p, the flexible fit on the raw scale, and whether the test was taken on the log scale."""

    test: object | None
    p_adj: float | None
    flex_fit: object
    log_scale: bool

    @property
    def flagged(self) -> bool:
        return self.test is not None and not self.p_adj >= ALPHA


@dataclass(frozen=True)
class ScaleTests:
    """The Glejser-type trend of |residual| with baseline, the Box-Cox profile (None unless every value
    is positive) with the likelihood-ratio p of power 1, and their Holm-adjusted p-values."""

    trend: object
    p_trend: float
    profile: object | None
    p_boxcox: float | None
    p_boxcox_adj: float | None

    @property
    def spread_flagged(self) -> bool:
        return self.p_trend < ALPHA

    @property
    def power_flagged(self) -> bool:
        return self.profile is not None and self.p_boxcox_adj < ALPHA

    @property
    def flagged(self) -> bool:
        return self.spread_flagged or self.power_flagged


@dataclass(frozen=True)
class Bounds:
    """The share of baseline and follow-up at each bound (declared, else observed): rows of (variable,
    side, bound, share), and the largest share with where it sits (side, bound, variable)."""

    rows: tuple
    worst: float
    worst_at: tuple | None
    declared: bool

    @property
    def flagged(self) -> bool:
        return not self.worst <= BOUND_SHARE


@dataclass(frozen=True)
class Levels:
    """The granularity of baseline and follow-up pooled, and whether the scale is declared ordinal."""

    granularity: object
    declared_ordinal: bool

    @property
    def few(self) -> bool:
        g = self.granularity
        return g.integer_valued and g.n_distinct <= FEW_LEVELS

    @property
    def ordinal(self) -> bool:
        return self.declared_ordinal or self.few

    @property
    def heaping(self) -> bool:
        return self.granularity.top_share > HEAP_SHARE

    @property
    def flagged(self) -> bool:
        return self.ordinal or self.heaping


@dataclass(frozen=True)
class Slope:
    """The slope of follow-up on baseline (adjusted for arm with two or more arms) with the t test of
    slope 1 and its Holm-adjusted p."""

    test: object
    p_adj: float
    adjusted: bool

    @property
    def flagged(self) -> bool:
        return not self.p_adj >= ALPHA


@dataclass(frozen=True)
class Efficiency:
    """The trial's own cost of change against ANCOVA (:func:`own_cost`), Pearson r, the equal-variance
    ratios against ANCOVA and follow-up only with intervals from r's, and the materiality threshold."""

    r: object
    cost: object
    equal_variance: object
    versus_followup: object
    material_ratio: float
    within_arm: bool

    @property
    def material(self) -> bool:
        """The whole interval of the cost above the threshold."""
        return self.cost.lower > self.material_ratio

    @property
    def above(self) -> bool:
        """The cost's point estimate above the threshold."""
        return self.cost.ratio > self.material_ratio

    @property
    def followup_saving(self) -> float:
        """The share of participants ANCOVA saves against follow-up only (r squared)."""
        return ancova_saving(self.r.r)


@dataclass(frozen=True)
class OrdinalContrast:
    """One arm against control in the proportional-odds ANCOVA: the log odds ratio (Wald), the
    concordance probability at the reference baseline and the descriptive proportional-odds check."""

    arm: str
    label: str
    wald: object
    concordance: object
    po_check: object


@dataclass(frozen=True)
class OrdinalArm:
    """One arm's predicted follow-up at the reference baseline: mean, median and the probabilities of
    exceeding the follow-up quartiles."""

    arm: str
    mean: object
    median: object
    exceeds: object


@dataclass(frozen=True)
class OrdinalAlternative:
    """The proportional-odds ANCOVA and its translations, or the reason it could not be fitted."""

    failure: str
    contrasts: tuple = ()
    arms: tuple = ()


@dataclass(frozen=True)
class Heterogeneity:
    """Within-arm correlation of change with baseline (arms with at least 10 pairs: arm, n, correlation)
    and the ANCOVA F test of arm x baseline interaction."""

    rows: tuple
    interaction: object
    control: str

    @property
    def control_r(self):
        """The control arm's correlation of change with baseline (None when it has fewer than 10 pairs)."""
        return next((r for arm, _, r in self.rows if arm == self.control), None)

    @property
    def regression_artefact(self) -> bool:
        """Change correlates negatively with baseline in the control arm (p below ALPHA) while the
        interaction test finds nothing: the pattern regression to the mean alone produces."""
        ctrl = self.control_r
        return ctrl is not None and ctrl.p_value < ALPHA and ctrl.r < 0 and self.interaction.p_value >= ALPHA


@dataclass(frozen=True)
class Comparison:
    """With two or more arms: the four analyses on the same participants, the empirical sample-size
    ratios of change against the flexible ANCOVA and follow-up only for the first contrast, the
    proportional-odds alternative where the scale calls for it, and the heterogeneity on change."""

    effects: tuple
    contrast: str
    ratio_vs_ancova: float
    ratio_vs_followup: float
    ordinal: OrdinalAlternative | None
    heterogeneity: Heterogeneity


def awkward_scale(bounds: Bounds, levels: Levels, scale: ScaleTests) -> bool:
    """A bound, interval or scale departure (:attr:`Analysis.awkward`), read before the analysis is whole."""
    return bounds.flagged or levels.flagged or scale.flagged


@dataclass(frozen=True)
class Analysis:
    """Every number the check judges by, before any wording: the complete pairs, arms and baseline
    model, each assumption's tests (Holm-adjusted together), the cost of change, the analyses side by
    side (two or more arms), the post-baseline model of a longitudinal plan and the fitted curves the
    follow-up figure draws (one per arm: label arm or None, baseline grid, fitted follow-up)."""

    df: object
    arms: list
    control: str | None
    coding: ArmCoding
    model: BaselineModel
    planned: str
    selection: Selection
    linearity: Linearity
    scale: ScaleTests
    bounds: Bounds
    levels: Levels
    slope: Slope
    efficiency: Efficiency
    comparison: Comparison | None
    repeated: object | None
    curves: tuple

    @property
    def n(self) -> int:
        return len(self.df)

    @property
    def awkward(self) -> bool:
        """A bound, interval or scale departure: the baseline-adjusted alternative needs care."""
        return awkward_scale(self.bounds, self.levels, self.scale)

    def flagged(self, key: str) -> bool:
        """Whether the assumption ``key`` (a sub-finding id) shows a departure."""
        return {"selection": self.selection, "linearity": self.linearity, "scale": self.scale,
                "bounds": self.bounds, "interval": self.levels, "slope": self.slope}[key].flagged


def edge_sides(b, spec) -> tuple[str | None, str]:
    """Which ends of baseline the truncation-edge test may examine: never an end that sits at a declared
    bound or a natural one (0 for a count), where a sharp edge is the scale's own, not a selection.
    Returns (side for :func:`truncation_edge_test` or None, a note on what was skipped)."""
    lo_b = spec.lower_bound if spec.lower_bound is not None else (0.0 if spec.scale == "count" else None)
    hi_b = spec.upper_bound
    width = (hi_b - lo_b) if lo_b is not None and hi_b is not None and np.isfinite(hi_b - lo_b) else None

    def at(extreme, bound):
        if bound is None or not np.isfinite(bound):
            return False
        if share_at_bound(np.array([extreme]), bound) > 0 or abs(extreme - bound) <= at_bound_tolerance(b, bound):
            return True
        return width is not None and abs(extreme - bound) <= EDGE_NEAR_BOUND * width

    skip_lo, skip_hi = at(float(np.min(b)), lo_b), at(float(np.max(b)), hi_b)
    skipped = [f"{name} end at the scale bound {fmt(bound)}" for name, bound, skip in
               (("lower", lo_b, skip_lo), ("upper", hi_b, skip_hi)) if skip]
    note = f"not tested at the {' or the '.join(skipped)} (a scale's bound is not a selection)" if skipped else ""
    side = None if skip_lo and skip_hi else ("upper" if skip_lo else ("lower" if skip_hi else "either"))
    return side, note


def edge_test(data, df, ctx) -> Edge:
    """The truncation-edge test on baseline where it may run.

    With a declared entry criterion it runs on the unselected side only (criterion ">= c": the upper
    edge), since the values the criterion selected would confirm it. Not run with too few distinct
    values, when more than BOUND_SHARE of baseline sits at a declared bound, or when every side it may
    examine sits at the scale's bounds."""
    b = df["baseline"].to_numpy()
    if len(np.unique(b)) < EDGE_MIN_DISTINCT:
        return Edge(None, note="too few distinct values for an edge test")
    s = bound_shares(b, data.spec.lower_bound, data.spec.upper_bound)
    if s.declared and max(s.share_lower, s.share_upper) > BOUND_SHARE:
        return Edge(None, note=(f"{100 * max(s.share_lower, s.share_upper):.0f}% of baseline values sit at a scale "
                                f"bound, so the edge test's continuous reference does not apply (see the floor and "
                                f"ceiling sub-finding)"))
    side, note = edge_sides(b, data.spec)
    side, note = unselected_side(side, note, data.spec.entry_criterion)
    if side is None:
        return Edge(None, note=note)
    tested = edge_test_scale(b, data.spec.log_scale)  # the same scale as the regression-to-the-mean check
    test = truncation_edge_test(tested.values, side=side, n_null=499 if ctx.quick else 999, seed=ctx.seed)
    return Edge(test, tested.name, float(np.min(b) if test.edge_side == "lower" else np.max(b)), note)


def unselected_side(side: str | None, note: str, criterion) -> tuple[str | None, str]:
    """The sides the edge test may examine, less the side a declared criterion selected on: a
    criterion ">= c" (or "> c") truncates the lower end, so only the upper edge is tested, and vice
    versa. Returns (side or None, note)."""
    if criterion is None or side is None:
        return side, note
    if criterion.direction == "window":
        skipped = "not tested at either end, both of which the declared window selected"
        return None, f"{skipped}; {note}" if note else skipped
    free = "upper" if criterion.direction == "above" else "lower"
    skipped = f"not tested at the {'lower' if free == 'upper' else 'upper'} end, which the declared criterion selected"
    note = f"{skipped}; {note}" if note else skipped
    return (free if side in ("either", free) else None), note


def criterion_reach(data, ctx) -> tuple[float | None, str]:
    """The share of the fitted population a declared entry criterion leaves out, as the
    regression-to-the-mean check estimates it: (share, "") or (None, why it could not be estimated)."""
    from .regression_to_mean import declared_criterion_reach
    from .registry import NotAssessable

    try:
        return declared_criterion_reach(data, ctx), ""
    except NotAssessable as exc:
        return None, str(exc)


def bound_rows(df, spec) -> Bounds:
    """The shares at each bound of baseline and follow-up, and the largest (floor before ceiling,
    baseline before follow-up on a tie)."""
    rows, worst, at = [], 0.0, None
    for name in ("baseline", "followup"):
        s = bound_shares(df[name], spec.lower_bound, spec.upper_bound)
        rows += [(name, "lower", s.lower, s.share_lower), (name, "upper", s.upper, s.share_upper)]
        for side, share in (("floor", s.share_lower), ("ceiling", s.share_upper)):
            if share > worst:
                worst, at = share, (side, s.lower if side == "floor" else s.upper, name)
    return Bounds(tuple(rows), worst, at, spec.lower_bound is not None or spec.upper_bound is not None)


def fit_ordinal_alternative(df, arms, coding: ArmCoding, model: BaselineModel,
                            level: float = 0.95) -> OrdinalAlternative:
    """Proportional-odds ANCOVA of follow-up on the flexible baseline plus arm (McCullagh 1980), with
    its translations at the median baseline: mean and median follow-up by arm, the probability of
    exceeding the follow-up quartiles, the concordance probability, and the descriptive
    proportional-odds check against binary fits at cut points."""
    from ..stats import ordinal as po

    cols = {**model.columns(df["baseline"].to_numpy()), **coding.columns}
    names = list(cols)
    X = np.column_stack([cols[k] for k in names])
    y = df["followup"].to_numpy()
    try:
        fit = po.fit_proportional_odds(y, X, names=names)
    except po.OrdinalFitError as exc:
        return OrdinalAlternative(exc.reason)
    ref = {k: v[0] for k, v in model.columns(np.array([model.reference(df["baseline"])])).items()}
    quartiles = sorted(set(np.quantile(y, [0.25, 0.5, 0.75]).tolist()))
    contrasts = []
    for contrast in coding.contrasts:
        arm_name = contrast.column
        w = fit.wald(arm_name, level)
        conc = po.concordance_exact(fit, _vector(names, ref, coding, None), arm_name, level)
        check = po.proportional_odds_check(y, X, arm_name, names=names, fit=fit)
        contrasts.append(OrdinalContrast(contrast.arm, contrast.label, w, conc, check))
    by_arm = []
    for arm in arms:
        x = _vector(names, ref, coding, arm)
        mean, med = po.predicted_mean(fit, x, level), po.predicted_median(fit, x, level)
        by_arm.append(OrdinalArm(arm, mean, med, po.prob_exceeds(fit, x, quartiles, level)))
    return OrdinalAlternative("", tuple(contrasts), tuple(by_arm))


def _vector(names, ref, coding: ArmCoding, arm):
    """The design row of a participant at the reference baseline on ``arm`` (None: the control)."""
    values = {**ref, **coding.indicator_values(arm)}
    return np.array([values[k] for k in names])


def _analyses(df, arms, control, model: BaselineModel, level: float = 0.95):
    """The four analyses side by side; with a categorical baseline the flexible ANCOVA uses categories."""
    if model.levels is None:
        return fit_analyses(df["baseline"], df["followup"], df["arm"].to_numpy(), arms, control, model.plan,
                            level).effects
    b = df["baseline"].to_numpy(dtype=float)
    return fit_analyses_categorical(b, df["followup"], df["arm"].to_numpy(), arms, control, model.columns(b), level)


FLEXIBLE_ROWS = ("ANCOVA, spline baseline", "ANCOVA, baseline as categories")


def empirical_ratios(effects) -> tuple[str, float, float]:
    """(first contrast, change / flexible ANCOVA, change / follow-up only): the empirical sample-size
    ratios (SE_change / SE_reference)^2 of the fitted analyses."""
    se = {(e.analysis, e.arm): e.se for e in effects}
    contrast = effects[0].arm
    flexible = next(a for a in FLEXIBLE_ROWS if (a, contrast) in se)
    return (contrast, empirical_ratio(se[("change score", contrast)], se[(flexible, contrast)]),
            empirical_ratio(se[("change score", contrast)], se[("follow-up only", contrast)]))


def heterogeneity(df, arms, control, level: float = 0.95) -> Heterogeneity:
    """Apparent heterogeneity on the change scale (within-arm r of change with baseline) against the
    ANCOVA interaction test."""
    rows = []
    for arm in arms:
        sub = df[df["arm"] == arm]
        if len(sub) >= 10:
            rows.append((arm, len(sub), pearson(sub["baseline"], sub["followup"] - sub["baseline"], level)))
    inter = interaction_test(df["baseline"].to_numpy(), df["followup"].to_numpy(), df["arm"].to_numpy(), arms, control)
    return Heterogeneity(tuple(rows), inter, control)


def compare_analyses(data, df, arms, control, coding: ArmCoding, model: BaselineModel, awkward: bool,
                     level: float) -> Comparison:
    """The analyses side by side, the proportional-odds alternative when the scale is ordinal or
    awkward (a bound, interval or scale departure, or follow-up skewed beyond SKEW_FOR_LOG), and the
    heterogeneity on change."""
    effects = _analyses(df, arms, control, model, level)
    contrast, ratio_anc, ratio_fu = empirical_ratios(effects)
    awkward = awkward or abs(skewness(df["followup"])) > SKEW_FOR_LOG
    ordinal = (fit_ordinal_alternative(df, arms, coding, model, level)
               if awkward or data.spec.scale == "ordinal" else None)
    return Comparison(tuple(effects), contrast, ratio_anc, ratio_fu, ordinal, heterogeneity(df, arms, control, level))


def fitted_curves(model: BaselineModel, flex_fit, coding: ArmCoding, arms, b) -> tuple:
    """The flexible ANCOVA's fitted follow-up over a baseline grid, one curve an arm (one pooled curve,
    arm None, without arms): (arm, grid, fitted)."""
    grid = model.grid(b)
    basis = model.columns(grid)
    curves = []
    for arm in (arms or [None]):
        design = dict(basis)
        design.update({k: np.full(len(grid), v) for k, v in coding.indicator_values(arm).items()})
        curves.append((arm, grid, predict(flex_fit, design)))
    return tuple(curves)


def analyse(data, ctx: CheckContext) -> Analysis:
    """Fit and test everything the check reports, in the order each step needs the one before (a step
    the data cannot answer raises NotAssessable). The assumption tests behind a caution (edge,
    linearity, spread, Box-Cox, slope) are Holm-adjusted together at the family-wise level ALPHA."""
    from ..stats.repeated import fit_post_baseline_model

    spec = data.spec
    df = complete_pairs(data, min_n=20)
    arms = arms_present(df, data, ctx)
    control = data.control_arm if data.control_arm in arms else (arms[0] if arms else None)
    coding = arm_coding(df["arm"].to_numpy(), arms, control) if len(arms) > 1 else NO_ARMS
    arm_cols = coding.columns
    model = baseline_model(df["baseline"].to_numpy())
    b, f = df["baseline"].to_numpy(), df["followup"].to_numpy()
    edge = edge_test(data, df, ctx)
    lin_test, flex_fit = flexible_linearity(b, f, arm_cols, model)
    log_test = linearity_on_plan_scale(b, f, arm_cols, model, spec.planned_analysis)
    lin_test = log_test if log_test is not None else lin_test
    trend = spread_trend_test(flex_fit.resid, b)
    prof = boxcox_profile(f, b, arm_cols, level=ctx.level) if np.all(b > 0) and np.all(f > 0) else None
    p_boxcox = boxcox_lr_pvalue(prof, 1.0) if prof is not None else None
    slope = slope_test(b, f, arm_cols, 1.0, ctx.level)
    raw = [edge.test.p_value if edge.test is not None else None, lin_test.p_value if lin_test is not None else None,
           trend.p_value, p_boxcox, slope.p_value]
    p_edge, p_lin, p_trend, p_bc, p_slope = holm_adjust(raw)
    r = pearson(df["baseline"], df["followup"], ctx.level)
    cost = own_cost(df["baseline"], df["followup"], df["arm"].to_numpy() if len(arms) > 1 else None, ctx.level)
    efficiency = Efficiency(r, cost, compare_with_ci("change", "ancova", r.r, r.lower, r.upper),
                            compare_with_ci("change", "follow-up-only", r.r, r.lower, r.upper),
                            ctx.thresholds.sample_size_ratio, len(arms) > 1)
    declared = spec.entry_criterion is not None
    share_out, failure = criterion_reach(data, ctx) if declared else (None, "")
    selection = Selection(edge, p_edge, declared, share_out, failure)
    linearity = Linearity(lin_test, p_lin, flex_fit, log_test is not None)
    scale = ScaleTests(trend, p_trend, prof, p_boxcox, p_bc)
    bounds = bound_rows(df, spec)
    levels = Levels(granularity(np.concatenate([b, f])), spec.scale == "ordinal")
    comparison = None
    if len(arms) > 1:
        comparison = compare_analyses(data, df, arms, control, coding, model, awkward_scale(bounds, levels, scale),
                                      ctx.level)
    repeated = None
    if spec.planned_analysis == "repeated-with-baseline-response" and len(arms) > 1:
        visits = [c for c in data.frame.columns if c.startswith("fu:")]
        repeated = fit_post_baseline_model(data.frame, visits, arms, data.control_arm, ctx.level)
    return Analysis(df, arms, control, coding, model, spec.planned_analysis, selection, linearity, scale, bounds,
                    levels, Slope(slope, p_slope, len(arms) > 1), efficiency, comparison, repeated,
                    fitted_curves(model, flex_fit, coding, arms, b))


# ----------------------------------------------------------------------------- sub-findings


@dataclass
class Part:
    """One sub-finding plus the estimates and short phrase it contributes to the headline."""

    sub: SubFinding
    estimates: list
    phrase: str = ""


def _verdict(ok: bool, soft: bool = False) -> Verdict:
    return Verdict.SOUND if ok else (Verdict.CAUTION if soft else Verdict.UNSUPPORTED)


def _scale_words(edge: Edge) -> str:
    return "" if edge.scale_name == "raw" else f" ({edge.scale_name} scale)"


def unselected_edge(part: Part, sel: Selection) -> Part:
    """The declared-criterion selection finding with the edge test of the unselected side added: a
    sharp edge there (Holm-adjusted p below ALPHA) suggests selection beyond the declared criterion
    and raises a caution; otherwise the evidence says no edge was found there."""
    test, note, p_adj = sel.edge.test, sel.edge.note, sel.p_adj
    if test is None:
        return Part(replace(part.sub, evidence=f"{part.sub.evidence}; {note}") if note else part.sub,
                    part.estimates, part.phrase)
    edge, scale = sel.edge.edge, _scale_words(sel.edge)
    ps = f"{fmt_p(test.p_value)}, Holm-adjusted {fmt_p(p_adj)}"
    est = [estimate(f"Truncation-edge test{scale} on the unselected side, likelihood-ratio statistic",
                    test.statistic, p=test.p_value,
                    note=f"{test.edge_side} edge at {fmt(edge)}; Holm-adjusted p {p_adj:.3g}",
                    key="change-score.selection.unselected-edge-statistic")]
    if sel.edge_flagged:
        ev = (f"{part.sub.evidence}; the unselected {test.edge_side} end also has a sharp edge at {fmt(edge)}{scale} "
              f"({ps}): possible selection beyond the declared criterion")
        phrase = f"a sharp {test.edge_side} edge in baseline beyond the declared criterion ({ps})"
        return Part(replace(part.sub, verdict=Verdict.CAUTION, evidence=ev), part.estimates + est,
                    part.phrase or phrase)
    ev = f"{part.sub.evidence}; no evidence of a sharp edge at the unselected {test.edge_side} end ({ps})"
    return Part(replace(part.sub, evidence=ev), part.estimates + est, part.phrase)


SELECTION_Q = "Did the baseline value select the participants?"


def selection_part(spec, sel: Selection) -> Part:
    if sel.declared:
        return unselected_edge(declared_selection_part(spec, sel), sel)
    test, note, p_adj = sel.edge.test, sel.edge.note, sel.p_adj
    if test is None:
        return Part(SubFinding("selection", SELECTION_Q, Verdict.SOUND, f"no entry criterion declared; {note}"), [])
    edge, scale = sel.edge.edge, _scale_words(sel.edge)
    extra = f"; {note}" if note else ""
    est = [estimate(f"Truncation-edge test{scale}, likelihood-ratio statistic", test.statistic,
                    p=test.p_value, note=f"{test.edge_side} edge at {fmt(edge)}; Holm-adjusted p {p_adj:.3g}",
                    key="change-score.selection.edge-test")]
    ps = f"{fmt_p(test.p_value)}, Holm-adjusted {fmt_p(p_adj)}"
    if sel.edge_flagged:
        return Part(SubFinding("selection", SELECTION_Q, Verdict.CAUTION,
                               f"no entry criterion declared, but the baseline distribution has a sharp "
                               f"{test.edge_side} edge at {fmt(edge)}{scale} ({ps}): possible selection{extra}"),
                    est, f"a sharp {test.edge_side} edge in baseline ({ps})")
    return Part(SubFinding("selection", SELECTION_Q, Verdict.SOUND,
                           f"no entry criterion declared; no evidence of a sharp edge in baseline ({ps}){extra}"),
                est)


def declared_selection_part(spec, sel: Selection) -> Part:
    """The selection sub-finding for a declared entry criterion: caution (regression to the mean is
    expected) unless the criterion, as declared, selects no one out, judged as in the
    regression-to-the-mean check by the share of the fitted population beyond the cutoff."""
    from .regression_to_mean import NEGLIGIBLE_EXCLUDED, share_text

    ec = spec.entry_criterion
    lead = f"entry criterion {ec.text}"
    if sel.share_out is None:
        return Part(SubFinding("selection", SELECTION_Q, Verdict.CAUTION,
                               f"{lead}: regression to the mean is expected (its reach could not be estimated: "
                               f"{sel.reach_failure})"), [],
                    "participants were selected on this measurement, so regression to the mean is expected")
    share_out = sel.share_out
    est = [estimate("Share of the fitted population the entry criterion leaves out", 100 * share_out, unit="%",
                    note="truncated-normal fit of the entry reading, as in the regression-to-the-mean check",
                    key="change-score.selection.share-excluded")]
    reach = (f"the population fitted to the entry readings puts {share_text(share_out)} "
             f"{'outside the window' if ec.is_window else 'beyond the cutoff'}")
    if sel.no_one_out:
        return Part(SubFinding("selection", SELECTION_Q, Verdict.SOUND,
                               f"{lead}, but {reach} (below {NEGLIGIBLE_EXCLUDED:.0%}, a convention of this "
                               f"tool): as declared, the criterion selects no one out"), est)
    return Part(SubFinding("selection", SELECTION_Q, Verdict.CAUTION,
                           f"{lead}: {reach}, so regression to the mean is expected (sized in the "
                           f"regression-to-the-mean check)"), est,
                "participants were selected on this measurement, so regression to the mean is expected")


def linearity_part(lin: Linearity, model: BaselineModel) -> Part:
    q = "Is follow-up linear in baseline?"
    test, p_adj = lin.test, lin.p_adj
    what = f"{model.what}; log scale, as the percent-change plan assumes" if lin.log_scale else model.what
    if test is None:
        return Part(SubFinding("linearity", q, Verdict.SOUND,
                               f"baseline takes {len(model.levels)} values, so a line fits each of them exactly: "
                               f"there is no nonlinearity to test ({what})"), [])
    ps = f"{fmt_p(test.p_value)}, Holm-adjusted {fmt_p(p_adj)}"
    ev = f"F = {fmt(test.statistic)} on {test.df_num} and {fmt(test.df_den, 0)} df, {ps} ({what})"
    ok = not lin.flagged
    est = [estimate(f"Nonlinearity in baseline ({what}), F statistic", test.statistic, p=test.p_value,
                    note=f"Holm-adjusted p {p_adj:.3g}", key="change-score.linearity.nonlinearity-f")]
    return Part(SubFinding("linearity", q, _verdict(ok, soft=True),
                           ev if not ok else f"no evidence of nonlinearity: {ev}"), est,
                "" if ok else f"follow-up is nonlinear in baseline ({ps})")


def scale_part(sc: ScaleTests, level: float = 0.95) -> Part:
    q = "Is the scale right (constant spread, additive relation)?"
    trend, prof, p_adj_trend = sc.trend, sc.profile, sc.p_trend
    grows = "grows" if trend.slope > 0 else "shrinks"
    parts = [f"trend of the residual spread with baseline: {fmt_p(trend.p_value)}, Holm-adjusted "
             f"{fmt_p(p_adj_trend)}"]
    est = [estimate("Trend of |residual| with baseline (slope)", trend.slope, p=trend.p_value,
                    note=f"Holm-adjusted p {p_adj_trend:.3g}", key="change-score.scale.residual-trend")]
    phrase = f"the spread of change {grows} with baseline" if sc.spread_flagged else ""
    if prof is not None:
        parts.append(f"Box-Cox power {fmt(prof.lam)} ({fmt(prof.lower)} to {fmt(prof.upper)}, {level_label(level)} CI); test of "
                     f"the raw scale (power 1): {fmt_p(sc.p_boxcox)}, Holm-adjusted {fmt_p(sc.p_boxcox_adj)}")
        est.append(estimate("Box-Cox power for baseline and follow-up (1 = raw scale, 0 = log)", prof.lam,
                            prof.lower, prof.upper, p=sc.p_boxcox,
                            note=f"{level_label(level)} profile-likelihood interval; Holm-adjusted p of power 1: "
                                 f"{sc.p_boxcox_adj:.3g}",
                            key="change-score.scale.box-cox-power"))
        if sc.power_flagged:
            phrase = ("a log scale fits better than the raw scale" if prof.includes(0.0)
                      else f"a power of {fmt(prof.lam)} fits better than the raw scale")
    ev = "; ".join(parts)
    bad = sc.flagged
    return Part(SubFinding("scale", q, _verdict(not bad, soft=True), ev if bad else f"no evidence of a wrong scale: {ev}"),
                est, phrase)


def bounds_part(bd: Bounds) -> Part:
    q = "Are there floor or ceiling effects?"
    src = "declared" if bd.declared else "observed"
    ok = not bd.flagged
    worst_side = bd.worst_at[0] if bd.worst_at else ""
    where = f"{worst_side} at {fmt(bd.worst_at[1])} ({bd.worst_at[2]})" if bd.worst_at else ""
    at = f"{100 * bd.worst:.0f}%, {where}" if bd.worst > 0 else "0%, no value equals either bound"
    ev = (f"largest share at a bound ({src} bounds; a value is at a bound when it equals it): {at}; "
          f"threshold {100 * BOUND_SHARE:.0f}%")
    est = [estimate(f"Share at the {side} bound, {name.replace('followup', 'follow-up')}", share,
                    note=f"bound {fmt(bound)}",
                    key=f"change-score.bounds.{name}.{side}") for name, side, bound, share in bd.rows]
    return Part(SubFinding("bounds", q, _verdict(ok, soft=True), ev), est,
                "" if ok else f"{100 * bd.worst:.0f}% of values sit at the {worst_side}")


def interval_part(lv: Levels) -> Part:
    q = "Is the scale interval with a smooth distribution?"
    g = lv.granularity
    ev = (f"{g.n_distinct} distinct values; {100 * g.tie_share:.0f}% tied; {100 * g.top_share:.0f}% at "
          f"{fmt(g.top_value)}")
    est = [estimate("Distinct values (baseline and follow-up)", float(g.n_distinct),
                    key="change-score.interval.distinct-values"),
           estimate("Share at the most common value", g.top_share, note=f"value {fmt(g.top_value)}",
                    key="change-score.interval.top-share")]
    if lv.ordinal:
        why = "declared ordinal" if lv.declared_ordinal else f"only {g.n_distinct} integer levels"
        return Part(SubFinding("interval", q, Verdict.CAUTION,
                               f"{why}: the difference of two ordinal values is not ordinal and equal steps "
                               f"need not mean equal amounts; {ev}"), est, f"the scale is ordinal ({why})")
    if lv.heaping:
        return Part(SubFinding("interval", q, Verdict.CAUTION, f"heaping: {ev}"), est,
                    f"{100 * g.top_share:.0f}% of values heap at {fmt(g.top_value)}")
    return Part(SubFinding("interval", q, Verdict.SOUND, ev), est)


def _adjusted_words(adjusted: bool) -> str:
    return "adjusted for arm" if adjusted else "pooled"


def slope_part(sl: Slope) -> Part:
    q = "Is the slope of follow-up on baseline near 1?"
    test, p_adj, adj = sl.test, sl.p_adj, _adjusted_words(sl.adjusted)
    ok = not sl.flagged
    ps = f"{fmt_p(test.p_value)}, Holm-adjusted {fmt_p(p_adj)}"
    ev = (f"slope {fmt_ci(test.estimate, test.lower, test.upper)} ({adj}); test of slope 1: {ps}"
          f"{'' if ok else ', a detectable departure'}; what a slope other than 1 costs a change analysis is "
          f"sized in the efficiency sub-finding, which decides the verdict")
    e = [estimate(f"Slope of follow-up on baseline ({adj})", test.estimate, test.lower, test.upper, test.p_value,
                  note=f"p: t test of slope 1; Holm-adjusted p {p_adj:.3g}", key="change-score.slope.slope")]
    return Part(SubFinding("slope", q, _verdict(ok, soft=True), ev if not ok else f"no evidence against slope 1: {ev}"),
                e, "" if ok else f"slope {fmt_ci(test.estimate, test.lower, test.upper)}")


def _ci_from_r(level: float) -> str:
    """How the equal-variance ratios' intervals are found: mapped from the interval of r."""
    ci = interval_words("", level, noun="CI")
    return f"{ci} from the {ci} of r"


def efficiency_part(eff: Efficiency, level: float) -> Part:
    """The trial's own cost of change against ANCOVA (variance-aware Frison-Pocock ratio) and its CI,
    graded against the study's sample-size threshold the analysis carries (``sample_size_ratio``)."""
    material_ratio, r, cost = eff.material_ratio, eff.r, eff.cost
    eq, change_vs_fu = eff.equal_variance, eff.versus_followup
    q = f"What does subtracting baseline cost against ANCOVA (material above {_pct(material_ratio)} more participants)?"
    within = "within arm" if eff.within_arm else "pooled"
    ev = (f"in this trial change needs {_cost_ci(cost)} than ANCOVA, from its own variances ({within}: baseline SD "
          f"{fmt(cost.sd_baseline)}, follow-up SD {fmt(cost.sd_followup)}, r {fmt(cost.r)}, slope {fmt(cost.slope)}); "
          f"the equal-variance formula 2/(1 + r) would say {_pct(eq.ratio)} more, which holds only when the two "
          f"variances are equal (here their ratio is {fmt(cost.variance_ratio)})")
    est = [
        estimate("Sample-size ratio, change / ANCOVA (this trial's variances)", cost.ratio, cost.lower, cost.upper,
                 note="var(change) / residual variance of ANCOVA, within arm (Frison and Pocock 1992); "
                      + interval_words("delta-method", level, "CI by the delta method"),
                 key="change-score.efficiency.ratio-vs-ancova"),
        estimate("Correlation of baseline with follow-up (Pearson r)", r.r, r.lower, r.upper, r.p_value,
                 key="change-score.efficiency.correlation"),
        estimate("Sample-size ratio, change / ANCOVA (equal variances)", eq.ratio, eq.lower, eq.upper,
                 note=f"2/(1+r); {_ci_from_r(level)}; assumes equal variances",
                 key="change-score.efficiency.ratio-vs-ancova-equal-var"),
        estimate("Sample-size ratio, change / follow-up only (equal variances)", change_vs_fu.ratio,
                 change_vs_fu.lower, change_vs_fu.upper, note=f"2(1-r); {_ci_from_r(level)}",
                 key="change-score.efficiency.ratio-vs-followup-equal-var"),
    ]
    if eff.material:
        verdict, phrase = Verdict.UNSUPPORTED, f"change needs {_cost_ci(cost)} than ANCOVA"
    elif eff.above:
        verdict, phrase = Verdict.CAUTION, f"change needs {_cost_ci(cost)} than ANCOVA"
    else:
        verdict, phrase = Verdict.SOUND, ""
    return Part(SubFinding("efficiency", q, verdict, ev), est, phrase)


def _pct(ratio: float) -> str:
    pct = 100 * (ratio - 1)
    return f"{pct:.1f}%" if abs(pct) < 10 else f"{pct:.0f}%"


def _cost_ci(cost) -> str:
    return f"{_pct(cost.ratio)} more participants ({_pct(cost.lower)} to {_pct(cost.upper)})"


def sub_findings(data, an: Analysis, level: float) -> dict[str, Part]:
    """Each assumption's sub-finding, in the report's order."""
    return {
        "selection": selection_part(data.spec, an.selection),
        "linearity": linearity_part(an.linearity, an.model),
        "scale": scale_part(an.scale, level),
        "bounds": bounds_part(an.bounds),
        "interval": interval_part(an.levels),
        "slope": slope_part(an.slope),
        "efficiency": efficiency_part(an.efficiency, level),
    }


# ----------------------------------------------------------------------------- consequences


def analyses_table(cmp: Comparison):
    """The analyses side by side and the empirical sample-size ratios of the first contrast."""
    rows = [[e.analysis, e.arm, e.estimate, e.se, e.lower, e.upper, e.p_value] for e in cmp.effects]
    table = Table("analyses", "Treatment effect under each analysis, fitted on the same participants",
                  ["Analysis", "Arm vs control", "Effect", "SE", "lower", "upper", "p"], rows,
                  note="Effects on the outcome's scale (follow-up difference); ANCOVA with spline baseline is "
                       "the recommended reference.", by_arm=True)
    contrast = cmp.contrast
    ests = [
        estimate(f"Empirical sample-size ratio, change / spline ANCOVA ({contrast})", cmp.ratio_vs_ancova,
                 note="(SE change / SE ANCOVA)^2 from the fitted analyses", by_arm=True,
                 key="change-score.efficiency.empirical-ratio-vs-ancova.by-arm", arm=contrast),
        estimate(f"Empirical sample-size ratio, change / follow-up only ({contrast})", cmp.ratio_vs_followup,
                 note="(SE change / SE follow-up)^2 from the fitted analyses", by_arm=True,
                 key="change-score.efficiency.empirical-ratio-vs-followup.by-arm", arm=contrast),
    ]
    return table, ests


def ordinal_words(alt: OrdinalAlternative, level: float = 0.95):
    """The proportional-odds ANCOVA worded: (rows for the analyses table, a table of clinician-scale
    translations, a reason when it could not be fitted)."""
    if alt.failure:
        return [], None, f"the proportional-odds ANCOVA could not be fitted: {alt.failure}"
    rows, trans = [], []
    for c in alt.contrasts:
        w, conc, check = c.wald, c.concordance, c.po_check
        rows.append(["proportional-odds ANCOVA (log odds ratio)", c.arm, w.estimate, w.se, w.lower, w.upper,
                     w.p_value])
        trans.append([c.label, "concordance probability", conc.estimate, conc.lower, conc.upper])
        trans.append([c.label, "proportional-odds check: heterogeneity chi-square "
                      f"on {check.df} df (p {check.p_value:.3f}, approximate)", check.heterogeneity_chi2, None, None])
    for a in alt.arms:
        mean, med, ex = a.mean, a.median, a.exceeds
        trans.append([a.arm, "mean follow-up at median baseline", mean.estimate, mean.lower, mean.upper])
        trans.append([a.arm, "median follow-up at median baseline", med.estimate, med.lower, med.upper])
        for t, pr, lo, hi in zip(ex.thresholds, ex.probability, ex.lower, ex.upper):
            trans.append([a.arm, f"P(follow-up > {fmt(float(t))}) at median baseline", pr, lo, hi])
    table = Table("ordinal-translation", "Proportional-odds ANCOVA on the outcome's own scale",
                  ["Group", "Quantity", "Estimate", "lower", "upper"], trans,
                  note="Model: P(follow-up >= y) = expit(alpha_y + s(baseline) + d arm); a positive log odds ratio "
                       "means higher follow-up values on the active arm. "
                       + interval_words("delta-method", level, "Intervals by the delta method", "intervals") + ".",
                  by_arm=True)
    return rows, table, ""


def heterogeneity_words(het: Heterogeneity):
    """Apparent heterogeneity on the change scale against the ANCOVA interaction test: (table,
    estimates, caveat or "")."""
    rows = [[arm, n, r.r, r.lower, r.upper, r.p_value] for arm, n, r in het.rows]
    inter = het.interaction
    table = Table("heterogeneity", "Correlation of change with baseline within arm",
                  ["Arm", "N", "r (change, baseline)", "lower", "upper", "p"], rows,
                  note=f"ANCOVA test of arm x baseline interaction: F = {fmt(inter.statistic)} on {inter.df_num} "
                       f"and {fmt(inter.df_den, 0)} df, {fmt_p(inter.p_value)}.", by_arm=True)
    est = [estimate("Arm x baseline interaction in ANCOVA (F)", inter.statistic, p=inter.p_value, by_arm=True,
                    key="change-score.arm-interaction.f")]
    caveat = ""
    if het.regression_artefact:
        caveat = (f"Change correlates with baseline even in the control arm (r {fmt(het.control_r.r)}), while the "
                  f"ANCOVA shows no arm x baseline interaction ({fmt_p(inter.p_value)}): an apparent "
                  f"'those who start worse benefit more' on the change scale is regression to the mean, "
                  f"not a larger treatment effect.")
    return table, est, caveat


def comparison_words(cmp: Comparison, level: float, estimates: list, tables: list, caveats: list) -> None:
    """The analyses table (with the proportional-odds rows), its translations, the heterogeneity table
    and their estimates and caveats."""
    table, ests = analyses_table(cmp)
    po_table = None
    if cmp.ordinal is not None:
        rows, po_table, why = ordinal_words(cmp.ordinal, level)
        table.rows.extend(rows)
        if why:
            caveats.append(why[0].upper() + why[1:] + ".")
    tables.append(table)
    if po_table is not None:
        tables.append(po_table)
    estimates += ests
    het_table, het_est, het_caveat = heterogeneity_words(cmp.heterogeneity)
    tables.append(het_table)
    estimates += het_est
    if het_caveat:
        caveats.append(het_caveat)


def repeated_table(fit):
    """For plans that put baseline on both sides: the model with post-baseline visits as responses."""
    rows = [[row.visit, row.arm, row.estimate, row.se, row.lower, row.upper, row.p_value] for row in fit.effects]
    notes = [f"The longitudinal model's fit warned: {n}." for n in fit.notes]
    return Table("repeated", "Post-baseline visits as responses, baseline as a covariate only",
                 ["Visit", "Arm vs control", "Effect", "SE", "lower", "upper", "p"], rows, by_arm=True), notes


# ----------------------------------------------------------------------------- figures


def _figures(spec, an: Analysis, seed):
    flex_fit, df, arms = an.linearity.flex_fit, an.df, an.arms
    shown, note = thin(df.assign(fitted=flex_fit.fitted, resid=flex_fit.resid), seed)
    unit = f" ({spec.unit})" if spec.unit else ""
    b, f = df["baseline"].to_numpy(), df["followup"].to_numpy()
    groups_fu = _groups(shown, arms, "baseline", "followup")
    curves = [{"label": f"fit: {arm}" if arm else "flexible fit", "x": grid.tolist(), "y": fitted.tolist()}
              for arm, grid, fitted in an.curves]
    by_arm = bool(arms)
    figs = [
        Figure("fu-vs-baseline", "scatter_identity", f"{spec.display_name}: follow-up against baseline",
               {"groups": groups_fu, "curves": curves, "smooth": {},
                "xlabel": f"Baseline{unit}", "ylabel": f"Follow-up{unit}"},
               caption="Dashed: identity (the line a change score assumes, shifted by the effect). Solid: "
                       "ANCOVA with a flexible baseline." + note, by_arm=by_arm),
        Figure("change-vs-baseline", "scatter_xy", f"{spec.display_name}: change against baseline",
               {"groups": _groups(shown.assign(change=shown["followup"] - shown["baseline"]), arms, "baseline",
                                  "change"), "hline": 0, "xlabel": f"Baseline{unit}", "ylabel": f"Change{unit}"},
               caption="A downward trend in both arms is expected from regression to the mean." + note,
               by_arm=by_arm),
        Figure("residuals", "scatter_xy", f"{spec.display_name}: residuals against fitted values",
               {"groups": [{"label": "all", "x": shown["fitted"].tolist(), "y": shown["resid"].tolist()}],
                "hline": 0, "xlabel": "Fitted follow-up (flexible ANCOVA)", "ylabel": "Residual"},
               caption="A funnel shape suggests the wrong scale; a curve, a missed nonlinearity." + note),
    ]
    markers = [{"x": v} for v in (spec.lower_bound, spec.upper_bound) if v is not None]
    figs.append(Figure("distributions", "histograms", f"{spec.display_name}: distributions",
                       {"panels": [{"title": "Baseline", "values": b.tolist(), "markers": markers},
                                   {"title": "Follow-up", "values": f.tolist(), "markers": markers},
                                   {"title": "Change", "values": (f - b).tolist(), "markers": []}]},
                       caption="Dotted lines: the scale's declared bounds."))
    return figs


def _groups(df, arms, xcol, ycol):
    if arms:
        return [{"label": a, "x": df.loc[df["arm"] == a, xcol].tolist(), "y": df.loc[df["arm"] == a, ycol].tolist()}
                for a in arms]
    return [{"label": "All participants", "x": df[xcol].tolist(), "y": df[ycol].tolist()}]


# ----------------------------------------------------------------------------- verdict


CHANGE_PLANS = ("change", "responder", "repeated-with-baseline-response")
ASSUMPTIONS = ("interval", "bounds", "linearity", "selection", "scale")
"""The sub-findings whose detectable departure matters to a change analysis and so raises caution."""


def awkward_for(planned: str) -> tuple[str, ...]:
    """The sub-findings whose departure makes the baseline-adjusted alternative need care.

    For a percent-change plan the scale sub-finding is left out: a log scale fitting better than the
    raw one is what a multiplicative (percent) analysis assumes, not a departure from it, and the
    percent-change check sizes what percent change costs against the log-scale and raw ANCOVA with an
    interval; the finding stays in the report."""
    return ("bounds", "interval") if planned == "percent-change" else ("bounds", "interval", "scale")


def decide(an: Analysis, parts: dict[str, Part]) -> tuple[Verdict, str]:
    """Overall verdict and headline for the planned analysis: the verdict read from the analysis, the
    headline from the sub-findings' phrases.

    For a change plan the verdict follows the trial's own cost of change against ANCOVA: unsupported
    only when its whole interval lies above the materiality (``sample_size_ratio``); caution when the
    point estimate does, or when an assumption that matters to change shows a departure (Holm-adjusted
    tests, bound shares, an ordinal scale); sound otherwise. A slope that differs from 1 is sized by
    that cost, not by its p-value, so it never decides the verdict alone."""
    planned, eff, r, cost = an.planned, an.efficiency, an.efficiency.r, an.efficiency.cost
    soft = [parts[k].phrase for k in ASSUMPTIONS if an.flagged(k) and parts[k].phrase]
    material = f"{_pct(eff.material_ratio)} this tool treats as material"
    lead = f"Change from baseline needs {_cost_ci(cost)} than ANCOVA in this trial"
    if planned in CHANGE_PLANS:
        ordinal = an.levels.ordinal
        alt = f"adjust for baseline instead (ANCOVA{', proportional odds' if ordinal else ''})"
        if eff.material:
            why = "; ".join([f"slope {fmt(cost.slope)}, r {fmt(cost.r)}"] + soft[:2])
            return Verdict.UNSUPPORTED, f"{lead}, wholly above the {material}: {why}; {alt}."
        if eff.above or soft:
            where = ("above" if eff.above else "below")
            why = "; ".join(soft[:3])
            tail = f"; {why}" if why else "; its interval reaches below that threshold"
            return Verdict.CAUTION, (f"{lead}, {where} the {material}{tail}"
                                     f"{'; consider ANCOVA or proportional odds instead' if ordinal else ''}.")
        slope = an.slope.test
        note = (f"; the slope {fmt_ci(slope.estimate, slope.lower, slope.upper)} differs detectably from 1 but costs "
                f"no more than this" if an.slope.flagged else "")
        return Verdict.SOUND, (f"{lead}, below the {material}; no evidence of selection, nonlinearity, a wrong scale, "
                               f"floor or ceiling{note}.")
    if planned == "follow-up-only":
        if r.r >= 0.3:
            return Verdict.CAUTION, (f"Ignoring baseline wastes information: r {fmt(r.r)}, so ANCOVA would need "
                                     f"{100 * eff.followup_saving:.0f}% fewer participants for the same power.")
        return Verdict.SOUND, f"Baseline is weakly prognostic (r {fmt(r.r)}); ignoring it costs little."
    prefix = ("The recommended baseline-adjusted alternative" if planned == "percent-change"
              else "The baseline-adjusted analysis")
    nonlin = an.linearity.flagged
    awkward = [p.phrase for k, p in parts.items() if k in awkward_for(planned) and an.flagged(k)]
    if nonlin or awkward:
        extra = "; ".join(([parts["linearity"].phrase] if nonlin else []) + awkward)
        return Verdict.CAUTION, (f"{prefix} needs care: {extra}; use a flexible baseline"
                                 f"{' and consider the proportional-odds ANCOVA' if awkward else ''}.")
    return Verdict.SOUND, f"{prefix} suits these data (r {fmt(r.r)}, no evidence of nonlinearity in baseline)."


def recommended_analysis(planned: str, verdict: Verdict, ordinal: bool = False, awkward: bool = False) -> str:
    """The analysis this check recommends, from its verdict: for a change-type plan, ANCOVA on follow-up
    with a flexible baseline once change costs materially or an assumption fails (proportional odds for
    an ordinal scale), the planned analysis when sound; for other plans, the baseline-adjusted analysis
    it judged (proportional odds offered for a bound, interval or scale departure: ``awkward``)."""
    flexible = "ANCOVA on follow-up with a flexible (spline) baseline" + (
        ", or a proportional-odds ANCOVA" if ordinal else "")
    if planned in CHANGE_PLANS:
        if verdict is Verdict.SOUND:
            return f"the planned {PLAN_WORDS.get(planned, planned)} analysis"
        return flexible if verdict is Verdict.UNSUPPORTED else f"{flexible}; or the planned analysis with its cost stated"
    if planned == "follow-up-only":
        return ("ANCOVA on follow-up adjusted for baseline" if verdict is not Verdict.SOUND
                else "the planned follow-up-only analysis")
    if verdict is Verdict.SOUND:
        return ("ANCOVA on follow-up adjusted for baseline, rather than percent change" if planned == "percent-change"
                else "the planned baseline-adjusted analysis (ANCOVA)")
    return "ANCOVA on follow-up with a flexible (spline) baseline" + (
        ", or a proportional-odds ANCOVA" if awkward else "")


PLAN_WORDS = {"change": "change-from-baseline", "responder": "change-based responder",
              "repeated-with-baseline-response": "longitudinal"}

REPEATED_CAVEAT = ("The planned longitudinal model puts baseline on both sides (as a response time point and "
                   "as a covariate): the baseline response then carries the covariate's information twice and "
                   "the treatment effect is distorted. Model post-baseline visits as responses with baseline "
                   "as a covariate only.")


@register(CHECK_ID, "Change-score assumptions", _applies, order=20,
          summary="Tests each assumption that subtracting baseline needs and what the planned analysis "
                  "costs against ANCOVA with a flexible baseline.")
def run(data, ctx: CheckContext):
    from .registry import get_check

    check = get_check(CHECK_ID)
    an = analyse(data, ctx)
    parts = sub_findings(data, an, ctx.level)
    estimates = [estimate("Participants with baseline and follow-up", float(an.n),
                          key="change-score.n-participants")]
    for p in parts.values():
        estimates += p.estimates
    tables, caveats = [], []
    if an.comparison is not None:
        comparison_words(an.comparison, ctx.level, estimates, tables, caveats)
    if an.planned == "repeated-with-baseline-response":
        caveats.append(REPEATED_CAVEAT)
        if an.repeated is not None:
            table, notes = repeated_table(an.repeated)
            tables.append(table)
            caveats += notes
    verdict, headline = decide(an, parts)
    return result(check, data, verdict, headline, subfindings=[p.sub for p in parts.values()],
                  estimates=estimates, tables=tables, figures=_figures(data.spec, an, ctx.seed),
                  caveats=caveats,
                  recommendation=recommended_analysis(an.planned, verdict, an.levels.ordinal, an.awkward),
                  references=cite(["frison-pocock-1992", "clifton-2019", "vickers-altman-2001",
                                   "durrleman-simon-1989", "stone-koo-1985", "box-cox-1964", "glejser-1969", "mchorney-tarlov-1995",
                                   "terwee-2007", "barnett-2005", "mccullagh-1980", "holm-1979"]),
                  method="Restricted cubic spline (knots at quantiles) or quadratic for discrete baselines, F test against "
                         "linear; Glejser-type trend of absolute residuals; Box-Cox profile likelihood (likelihood-ratio "
                         "test of the raw scale); truncation-edge test of baseline away from the scale's bounds; these "
                         "tests and the t test of slope 1 Holm-adjusted together at a family-wise 5%; shares at bounds "
                         "(15% threshold); the trial's own sample-size ratio of change to ANCOVA, "
                         "var(change) / residual variance of ANCOVA within arm (Frison and Pocock 1992), with a "
                         f"{interval_words('delta-method', ctx.level, 'delta-method CI')}, material above "
                         f"{_pct(an.efficiency.material_ratio)} more participants (sample_size_ratio "
                         f"{an.efficiency.material_ratio:g}; study.toml [thresholds], default a convention of "
                         "this tool); the four analyses fitted on the same participants.")
