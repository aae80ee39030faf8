"""Percent change and responder definitions: whether a relative change or a dichotomy is defensible.

For an outcome planned as percent change from baseline, the check asks whether percent change is
defined and stable (baselines at or near zero, negative values, a scale starting at 0), whether it
depends on an arbitrary coding (ordinal scales), how asymmetric it is beside the log ratio
(Tornqvist, Vartia and Vartia 1985), whether it still depends on baseline, and what it costs against
the log-scale ANCOVA whose back-transformed effect is a ratio of geometric means (Vickers 2001 found
percent change the least powerful of the common choices). For a responder definition it gives the
normal-theory sample-size inflation of dichotomising against the continuous ANCOVA (Altman and
Royston 2006) and how the responder probability depends on baseline.

Blinded audits compute only pooled diagnostics; the arm column is not read. Every threshold is a
named constant below with its source or "convention of this tool"; docs/methods/percent-change.md
derives the formulas.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..references import REFERENCES, add_reference, cite
from ..results import Figure, Table, Verdict, interval_words, level_label
from ..stats import relative_change as rc
from ..stats.correlation import Correlation, spearman
from ..stats.effects import NO_ARMS, ArmCoding, ArmContrast, ArmEffect, arm_coding
from .common import Sections, arms_present, estimate, fmt, fmt_ci, result
from .registry import CheckContext, NotAssessable, register

CHECK_ID = "percent-change"
TITLE = "Percent change and responder definitions"

EXTREME_PERCENT = 1000.0
"""A percent change of this size (a elevenfold rise) from one participant dominates a mean of percent
changes; it raises a caution (convention of this tool)."""
HIGH_SKEW = 1.0
"""|skewness| above 1: a highly skewed distribution (Bulmer 1979)."""
FLOOR_SHARE = 0.10
"""At least this share of percent changes at the -100% bound is a floor effect (convention of this tool)."""
BASELINE_RHO = 0.3
"""|Spearman rho| of percent change with baseline at or above this, with a CI excluding 0, is a
material dependence (Cohen 1988 calls 0.3 a medium correlation)."""
MATERIAL_SAMPLE_RATIO = 1.10
"""Materiality of a sample-size cost against the reference analysis (10% more participants; a
convention of this tool, the default of ``sample_size_ratio`` in study.toml's ``[thresholds]``)."""
INFORMATIVE_Z = 2.0
"""An empirical efficiency is used only when the reference analysis shows |effect / SE| >= 2;
below that the ratio of two noisy statistics says little (convention of this tool)."""
RECODE_CHANGE = 0.10
"""A relative change of 10% or more in the estimate when ordinal codes are shifted by one is material
(convention of this tool; the default of ``recoding_change`` in study.toml's ``[thresholds]``)."""
NORMAL_SHARE_TOLERANCE = 0.05
"""The normal-theory inflation is trusted when the normal distribution fitted to the change predicts
the observed responder share within 5 percentage points (convention of this tool)."""
RESPONDER_PROB_RANGE = 0.10
"""A responder probability that moves by 10 percentage points or more between the 10th and 90th
baseline percentiles (with p < 0.05) is a material dependence on baseline (convention of this tool)."""
BOOT_FULL, BOOT_QUICK = 1000, 200
"""Bootstrap replicates for the efficiency interval (quick mode uses fewer)."""
TOP_EXTREMES = 5
MIN_DEFINED = 10
"""Percent changes needed before their distribution and baseline dependence are described."""


def _reference(key: str, text: str) -> str:
    """Use a reference already registered under ``key`` (by any module), else register it."""
    return key if key in REFERENCES else add_reference(key, text)


_reference("bulmer-1979", "Bulmer MG. Principles of Statistics. Dover, 1979.")
_reference("tukey-1977", "Tukey JW. Exploratory Data Analysis. Addison-Wesley, 1977.")
_reference("cohen-1988", "Cohen J. Statistical Power Analysis for the Behavioral Sciences, 2nd ed. "
                         "Lawrence Erlbaum, 1988.")
_reference("noether-1955", "Noether GE. On a theorem of Pitman. Ann Math Stat 1955;26:64-68.")
_reference("efron-tibshirani-1993", "Efron B, Tibshirani RJ. An Introduction to the Bootstrap. "
                                    "Chapman & Hall, 1993.")

_VERDICT_ORDER = (Verdict.SOUND, Verdict.CAUTION, Verdict.UNSUPPORTED)


def _worst(*verdicts: Verdict) -> Verdict:
    return max(verdicts, key=_VERDICT_ORDER.index)


@dataclass
class _Collect(Sections):
    """What the sections of the check accumulate, and the headline phrases they contribute."""

    clauses: dict[str, str] = field(default_factory=dict)
    """Headline phrases by section, composed at the end."""


# --------------------------------------------------------------------------- the analysis (numbers only)


@dataclass(frozen=True)
class Inputs:
    """The complete baseline/follow-up pairs the check analyses."""

    b: np.ndarray
    f: np.ndarray
    arm: np.ndarray | None
    """Arm labels, only in an unblinded parallel-group audit with at least two arms."""
    arms: list[str]
    coding: ArmCoding
    control: str | None
    uses_percent: bool
    """The plan uses a percent change (planned percent change, or a responder rule on percent change)."""


@dataclass(frozen=True)
class Extreme:
    """One of the largest percent changes (pooled): its values, and whether its baseline is near zero."""

    baseline: float
    followup: float
    percent: float
    """NaN when the percent change is undefined."""
    near_zero: bool


@dataclass(frozen=True)
class Definedness:
    """Where percent change is undefined or unstable, and the largest percent changes."""

    instability: rc.Instability
    extremes: tuple[Extreme, ...]

    @property
    def extreme(self) -> float:
        """The largest |percent change| (0 when none is defined)."""
        ins = self.instability
        return max(abs(ins.largest_rise), abs(ins.largest_fall)) if math.isfinite(ins.largest_rise) else 0.0


@dataclass(frozen=True)
class Recoding:
    """The planned percent-change summary of an ordinal outcome under its declared codes and under the
    codes shifted by one (:func:`rc.recoding_shift`): pooled means, and the effect of the first arm
    contrast when there are arms and the shifted summary is defined."""

    shift: float
    declared: rc.CodingSummary
    shifted: rc.CodingSummary
    declared_effect: ArmEffect | None
    shifted_effect: ArmEffect | None
    material_change: float
    """The relative change this audit treats as material (``recoding_change``)."""

    @property
    def by_arm(self) -> bool:
        return self.declared_effect is not None

    @property
    def before(self) -> float | None:
        """The summary with the declared codes (the effect when by arm, else the pooled mean)."""
        return self.declared_effect.estimate if self.by_arm else self.declared.mean

    @property
    def after(self) -> float | None:
        """The summary with the codes shifted."""
        return self.shifted_effect.estimate if self.by_arm else self.shifted.mean

    @property
    def n_undefined(self) -> int:
        return self.declared.n_undefined + self.shifted.n_undefined

    @property
    def relative_change(self) -> float:
        return rc.relative_difference(self.before, self.after)

    @property
    def flipped(self) -> bool:
        a, c = self.before, self.after
        return bool(a is not None and c is not None and np.sign(a) != np.sign(c))

    @property
    def material(self) -> bool:
        """Any percent change undefined, a relative change at or above the threshold, or a sign flip."""
        return bool(self.n_undefined or self.relative_change >= self.material_change or self.flipped)


@dataclass(frozen=True)
class Asymmetry:
    """The shape of percent change beside that of the log ratio (None when fewer than 3 are defined)."""

    log_ratio: np.ndarray
    percent_shape: rc.Shape
    log_ratio_shape: rc.Shape | None


@dataclass(frozen=True)
class ArmSpearman:
    """Spearman's rho of percent change with baseline within one arm."""

    arm: str
    n: int
    rho: Correlation


@dataclass(frozen=True)
class BaselineDependence:
    """Spearman's rho of percent change with baseline, pooled and within each arm (arms with at least 4
    defined percent changes that vary)."""

    pooled: Correlation
    within: tuple[ArmSpearman, ...]

    @property
    def strongest(self) -> ArmSpearman | None:
        """The within-arm correlation largest in absolute value (the first on a tie); None without arms."""
        return max(self.within, key=lambda x: abs(x.rho.r)) if self.within else None

    @property
    def judged(self) -> Correlation:
        """The correlation the verdict reads: the strongest within arm, else the pooled one."""
        return self.strongest.rho if self.within else self.pooled


@dataclass(frozen=True)
class Fits:
    """Every analysis of the treatment effect, fitted on the trial's data."""

    planned_design: rc.RefitDesign
    reference_design: rc.RefitDesign
    planned: list[ArmEffect]
    reference: list[ArmEffect]
    others: list[list[ArmEffect]]
    ordinal_note: str
    """Why the proportional-odds row is missing ('' when it is present)."""
    proportional_odds: bool
    """The proportional-odds ANCOVA was fitted (as the reference or beside it)."""


@dataclass(frozen=True)
class Cost:
    """The planned analysis against its reference, for the most informative contrast."""

    contrast: ArmContrast
    reference: ArmEffect
    efficiency: float
    interval: rc.EfficiencyInterval
    informative: bool


@dataclass(frozen=True)
class Compared:
    """One effect of the effects table with its efficiency against the reference for its contrast."""

    effect: ArmEffect
    efficiency: float
    is_reference: bool

    @property
    def needed(self) -> float | None:
        """Participants needed against the reference, 1 / efficiency (None when not positive)."""
        return 1 / self.efficiency if self.efficiency > 0 else None


@dataclass(frozen=True)
class Effects:
    """The treatment effect under each analysis and what the planned one costs (two or more arms)."""

    fits: Fits
    cost: Cost
    compared: tuple[Compared, ...]


@dataclass(frozen=True)
class Responder:
    """A responder rule: each participant's status, its normal-theory cost against ANCOVA and the
    logistic curve of responding on baseline (each None, with the reason, when it cannot be computed)."""

    indicator: np.ndarray
    cost: rc.ResponderCost | None
    cost_error: str
    curve: rc.ResponderCurve | None
    curve_error: str

    @property
    def normal_ok(self) -> bool:
        """The normal distribution fitted to the change predicts the observed responder share."""
        c = self.cost
        return abs(c.share_observed - c.share_normal) <= NORMAL_SHARE_TOLERANCE

    @property
    def baseline_material(self) -> bool:
        """The responder probability moves by RESPONDER_PROB_RANGE or more across the 10th to 90th
        baseline percentiles, with p < 0.05."""
        curve = self.curve
        return curve.p_value < 0.05 and abs(curve.prob_high - curve.prob_low) >= RESPONDER_PROB_RANGE


@dataclass(frozen=True)
class Analysis:
    """Every number the check judges by, before any wording: the pairs analysed and their percent
    changes; where percent change is undefined or unstable, its dependence on an ordinal coding, its
    asymmetry and its dependence on baseline (percent-change plans); the effects under every analysis
    and the planned analysis's efficiency with its bootstrap interval (two or more arms); and the
    responder rule's cost and dependence on baseline (responder plans). A part the plan or the data do
    not call for is None."""

    inputs: Inputs
    percent: np.ndarray
    """100 (f - b) / b per participant, NaN where undefined."""
    defined: Definedness | None
    recoding: Recoding | None
    asymmetry: Asymmetry | None
    baseline: BaselineDependence | None
    effects: Effects | None
    responder: Responder | None
    sample_size_ratio: float
    """The sample-size cost this audit treats as material (``sample_size_ratio``)."""

    @property
    def cost(self) -> Cost | None:
        return self.effects.cost if self.effects is not None else None

    @property
    def log_axis(self) -> bool:
        """The baselines with a defined percent change span a factor of 20 or more (all positive), so
        a figure against baseline is drawn on a log axis (convention of this tool)."""
        b = self.inputs.b[np.isfinite(self.percent)]
        return bool((b > 0).all() and b.max() / b.min() >= 20)


def _applies(spec, design) -> bool:
    return spec.planned_analysis in ("percent-change", "responder") and spec.baseline_visit is not None


def _inputs(data, ctx: CheckContext) -> Inputs:
    """Complete baseline/follow-up pairs; arm labels only when unblinded (the column is not read otherwise)."""
    frame = data.frame
    if "baseline" not in frame.columns:
        raise NotAssessable("the outcome has no baseline visit")
    keep = ["baseline", "followup"] if ctx.blinded else ["baseline", "followup", "arm"]
    df = frame[keep].dropna(subset=keep).reset_index(drop=True)
    if len(df) < 10:
        raise NotAssessable(f"only {len(df)} participants have both a baseline and a follow-up value "
                            "(at least 10 are needed)")
    if np.ptp(df["baseline"].to_numpy()) == 0 or np.ptp(df["followup"].to_numpy()) == 0:
        raise NotAssessable("baseline or follow-up is the same for every participant")
    arms = arms_present(df, data, ctx)
    spec = data.spec
    uses_percent = spec.planned_analysis == "percent-change" or (
        spec.responder is not None and spec.responder.basis == "percent-change")
    if len(arms) < 2:
        return Inputs(df["baseline"].to_numpy(float), df["followup"].to_numpy(float), None, [], NO_ARMS, None,
                      uses_percent)
    df = df[df["arm"].isin(arms)].reset_index(drop=True)
    control = data.control_arm if data.control_arm in arms else arms[0]
    arm = df["arm"].to_numpy(object)
    return Inputs(df["baseline"].to_numpy(float), df["followup"].to_numpy(float), arm, arms,
                  arm_coding(arm, arms, control), control, uses_percent)


def definedness(inp: Inputs, pc: np.ndarray) -> Definedness:
    """Counts of undefined and near-zero baselines (:func:`rc.instability`) and the TOP_EXTREMES
    largest |percent change|."""
    ins = rc.instability(inp.b, inp.f)
    extremes = []
    for i in rc.largest_changes(pc, TOP_EXTREMES):
        near = bool(inp.b[i] > 0 and math.isfinite(ins.threshold) and inp.b[i] < ins.threshold)
        extremes.append(Extreme(float(inp.b[i]), float(inp.f[i]), float(pc[i]), near))
    return Definedness(ins, tuple(extremes))


def recoding(inp: Inputs, levels, level: float, material_change: float) -> Recoding:
    """Shift the codes by one and recompute the planned percent-change summary under both codings."""
    shift = rc.recoding_shift(levels)
    b2, f2 = inp.b + shift, inp.f + shift
    declared, shifted = rc.coding_summary(inp.b, inp.f), rc.coding_summary(b2, f2)
    e1 = e2 = None
    if inp.coding.contrasts and shifted.mean is not None:
        e1 = rc.ols_effects(rc.percent_change_design(inp.b, inp.f, inp.coding), level)[0]
        e2 = rc.ols_effects(rc.percent_change_design(b2, f2, inp.coding), level)[0]
    return Recoding(shift, declared, shifted, e1, e2, material_change)


def asymmetry(inp: Inputs, pc: np.ndarray) -> Asymmetry:
    """The shape of percent change (floor -100%) and of the log ratio (:func:`rc.shape`)."""
    lr = rc.log_ratio(inp.b, inp.f)
    s_lr = rc.shape(lr) if np.isfinite(lr).sum() >= 3 else None
    return Asymmetry(lr, rc.shape(pc, floor=-100.0), s_lr)


def baseline_dependence(inp: Inputs, pc: np.ndarray, level: float) -> BaselineDependence:
    """Spearman's rho of percent change with baseline, pooled and within each arm."""
    ok = np.isfinite(pc)
    within = []
    for a in inp.arms:
        sel = ok & (inp.arm == a)
        if sel.sum() >= 4 and np.ptp(pc[sel]) > 0 and np.ptp(inp.b[sel]) > 0:
            within.append(ArmSpearman(a, int(sel.sum()), spearman(inp.b[sel], pc[sel], level)))
    return BaselineDependence(spearman(inp.b[ok], pc[ok], level), tuple(within))


def _designs(inp: Inputs, spec, responder: np.ndarray | None):
    """(planned design, least-squares reference design, other designs) for the effect comparison.
    The reference of an ordinal outcome is the proportional-odds ANCOVA (:func:`_ordinal_reference`),
    tried in :func:`fit_analyses`; the least-squares reference here stands in when it cannot be
    fitted."""
    cols = inp.coding
    positive = bool(np.all(inp.b > 0) and np.all(inp.f > 0))
    log_d = rc.log_ancova_design(inp.b, inp.f, cols) if positive else None
    raw_d = rc.raw_ancova_design(inp.b, inp.f, cols)
    pc_d = rc.percent_change_design(inp.b, inp.f, cols) if inp.uses_percent else None
    if spec.planned_analysis == "responder":
        planned = rc.responder_design(responder, cols)
        reference = log_d if (spec.responder.basis == "percent-change" and log_d) else raw_d
        others = [d for d in (pc_d, log_d, raw_d) if d is not None and d is not reference]
    else:
        planned = pc_d
        reference = log_d or raw_d
        others = [d for d in (log_d, raw_d) if d is not None and d is not reference]
    return planned, reference, others


def _ordinal_reference(inp: Inputs, spec, level: float):
    """(design, effects) of the proportional-odds ANCOVA, the reference analysis of an outcome
    declared ordinal: it uses only the order of the follow-up levels, which is all an ordinal scale
    gives. Baseline enters as categories when the levels are declared, else as a spline. Raises the
    fitter's OrdinalFitError when the model cannot be fitted."""
    design = rc.ordinal_ancova_design(inp.b, inp.f, inp.coding, categorical_baseline=bool(spec.levels))
    return design, rc.ordinal_effects(design, level)


def _po_reason() -> str | None:
    """Why the proportional-odds row is left out, or None when the fitter is available."""
    try:
        from ..stats.ordinal import fit_proportional_odds  # noqa: F401
    except Exception as exc:  # any failure to import leaves the row out, with its reason
        return f"the proportional-odds fitter could not be imported ({type(exc).__name__}: {exc})"
    return None


def fit_analyses(inp: Inputs, spec, level: float, responder) -> Fits:
    """The planned analysis, its reference and the other analyses, each fitted on the trial's data."""
    planned_d, ref_d, other_ds = _designs(inp, spec, responder)
    others = [rc.ols_effects(d, level) for d in other_ds]
    note = ""
    fitted = False
    reason = _po_reason()
    if reason is None:
        from ..stats.ordinal import OrdinalFitError

        try:
            if spec.scale == "ordinal":
                po_d, po_effects = _ordinal_reference(inp, spec, level)
                others.insert(0, rc.ols_effects(ref_d, level))
                return Fits(planned_d, po_d, rc.ols_effects(planned_d, level), po_effects, others, "", True)
            others.append(rc.proportional_odds_effects(inp.b, inp.f, inp.coding, level))
            fitted = True
        except (OrdinalFitError, ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
            note = f"The proportional-odds ANCOVA could not be fitted: {getattr(exc, 'reason', exc)}"
            if spec.scale == "ordinal":
                note += f"; the {ref_d.analysis} is the reference instead."
    else:
        note = f"The proportional-odds ANCOVA is left out: {reason}."
    return Fits(planned_d, ref_d, rc.ols_effects(planned_d, level), rc.ols_effects(ref_d, level),
                others, note, fitted)


def measure_cost(fits: Fits, inp: Inputs, ctx: CheckContext) -> Cost:
    """Efficiency of the planned analysis for the contrast the reference shows most clearly, with a
    percentile bootstrap interval resampling within arm (:func:`rc.bootstrap_efficiency`)."""
    k = int(np.argmax([abs(e.statistic) for e in fits.reference]))
    contrast = fits.reference_design.contrasts[k]
    j = fits.planned_design.contrasts.index(contrast)

    def statistics(rows):
        return (rc.t_statistics(fits.planned_design, rows)[j],
                rc.design_statistics(fits.reference_design, rows)[j])

    n_boot = BOOT_QUICK if ctx.quick else BOOT_FULL
    interval = rc.bootstrap_efficiency(statistics, inp.arm, n_boot, ctx.seed, ctx.level)
    eff = rc.relative_efficiency(fits.planned[k].statistic, fits.reference[k].statistic)
    return Cost(contrast, fits.reference[k], eff, interval, abs(fits.reference[k].statistic) >= INFORMATIVE_Z)


def compare_effects(fits: Fits) -> tuple[Compared, ...]:
    """Every effect (planned, reference, others) with its efficiency against the reference effect of the
    same arm (:func:`rc.relative_efficiency`)."""
    rows = []
    for effects in [fits.planned, fits.reference, *fits.others]:
        for e in effects:
            ref = next(r for r in fits.reference if r.arm == e.arm)
            rows.append(Compared(e, rc.relative_efficiency(e.statistic, ref.statistic), e is ref))
    return tuple(rows)


def responder_analysis(inp: Inputs, rule, level: float) -> Responder:
    """Responder status, its normal-theory cost (:func:`rc.responder_cost`) and the logistic curve of
    responding on baseline (:func:`rc.responder_on_baseline`); a ValueError of either is kept as the
    reason it is not assessable."""
    resp = rc.responder_indicator(inp.b, inp.f, rule.basis, rule.threshold, rule.direction)
    cost, cost_error = None, ""
    try:
        cost = rc.responder_cost(inp.b, inp.f, rule.basis, rule.threshold, rule.direction)
    except ValueError as exc:
        cost_error = str(exc)
    curve, curve_error = None, ""
    try:
        curve = rc.responder_on_baseline(inp.b, resp, level)
    except ValueError as exc:
        curve_error = str(exc)
    return Responder(resp, cost, cost_error, curve, curve_error)


def analyse(data, ctx: CheckContext) -> Analysis:
    """Compute every part the plan calls for, at the audit's confidence level and thresholds (the
    pairs raise NotAssessable when too few or constant)."""
    spec = data.spec
    inp = _inputs(data, ctx)
    pc = rc.percent_change(inp.b, inp.f)
    defined = recoded = asym = base = None
    if inp.uses_percent:
        defined = definedness(inp, pc)
        if spec.scale == "ordinal" and spec.levels:
            recoded = recoding(inp, spec.levels, ctx.level, ctx.thresholds.recoding_change)
        if np.isfinite(pc).sum() >= MIN_DEFINED:
            asym = asymmetry(inp, pc)
            base = baseline_dependence(inp, pc, ctx.level)
    responder = responder_analysis(inp, spec.responder, ctx.level) if spec.planned_analysis == "responder" else None
    effects = None
    if inp.coding.contrasts:
        fits = fit_analyses(inp, spec, ctx.level, responder.indicator if responder else None)
        effects = Effects(fits, measure_cost(fits, inp, ctx), compare_effects(fits))
    return Analysis(inp, pc, defined, recoded, asym, base, effects, responder, ctx.thresholds.sample_size_ratio)


# --------------------------------------------------------------------------- wording helpers


def _pct(x: float) -> str:
    if x is None or not math.isfinite(x):
        return "n/a"
    return f"{x:+,.0f}%"


def _g(x: float) -> str:
    """A measured value for prose: 3 significant digits, thousands separated."""
    if x is None or not math.isfinite(x):
        return "n/a"
    return f"{x:,.0f}" if abs(x) >= 100 else f"{x:.3g}"


def _n(count: int, noun: str) -> str:
    return f"{count} {noun}" + ("" if count == 1 else "s")


def _axis(spec, what: str) -> str:
    return f"{what} ({spec.unit})" if spec.unit else what


# --------------------------------------------------------------------------- undefined or unstable


def recommended_analysis(spec, verdict: Verdict) -> str:
    """The analysis this check recommends: the planned one when sound; otherwise, for percent change, the
    log-scale ANCOVA (a ratio of geometric means), and for a responder rule, ANCOVA on the continuous
    outcome with the responder shares derived from it."""
    responder = spec.planned_analysis == "responder"
    if verdict is Verdict.SOUND:
        return "the planned responder analysis" if responder else "the planned percent-change analysis"
    if responder:
        return "ANCOVA on the continuous follow-up adjusted for baseline, with responder shares derived from it"
    return "ANCOVA of log follow-up adjusted for log baseline (a ratio of geometric means)"


def _definedness_verdict(part: Definedness) -> Verdict:
    """Caution: any baseline at or below zero, any near zero, or a change of 1000% or more; sound
    otherwise. Never unsupported on its own: what an unstable percent change costs the treatment
    comparison is sized by the efficiency finding, which alone can make the check unsupported."""
    ins = part.instability
    if ins.n_undefined or ins.n_near_zero or part.extreme >= EXTREME_PERCENT:
        return Verdict.CAUTION
    return Verdict.SOUND


def _definedness(an: Analysis, spec, out: _Collect) -> Verdict:
    ins = an.defined.instability
    floor_zero = spec.lower_bound is not None and spec.lower_bound <= 0
    verdict = _definedness_verdict(an.defined)
    parts = [f"{_n(ins.n_zero, 'baseline')} at 0 and {ins.n_negative} below 0",
             f"{ins.n_near_zero} below {ins.fraction:.0%} of the median baseline ({_g(ins.median_baseline)}; "
             f"threshold {_g(ins.threshold)})",
             f"percent changes from {_pct(ins.largest_fall)} to {_pct(ins.largest_rise)}"]
    if ins.n_near_zero:
        parts.append(f"the largest change from a near-zero baseline is {_pct(ins.near_zero_largest).lstrip('+')} "
                     f"in absolute value; leaving those baselines out moves the mean percent change by "
                     f"{fmt(ins.mean_shift_without_near_zero)} points")
    if floor_zero:
        parts.append("the scale's lowest value is 0, so percent change is undefined for anyone who starts there")
    out.sub("defined", "Is percent change defined and stable for every participant (no baseline at, below "
            "or near zero)?", verdict, "; ".join(parts))
    out.estimates += [
        estimate("Baselines at or below zero (percent change undefined)", float(ins.n_undefined),
                 key="percent-change.undefined-baselines"),
        estimate(f"Baselines below {ins.fraction:.0%} of the median", float(ins.n_near_zero),
                 note=f"threshold {_g(ins.threshold)}{' ' + spec.unit if spec.unit else ''}",
                 key="percent-change.near-zero-baselines"),
        estimate("Largest percent rise", ins.largest_rise, unit="%", key="percent-change.largest-rise"),
        estimate("Largest percent fall", ins.largest_fall, unit="%", key="percent-change.largest-fall"),
    ]
    out.tables.append(_extremes_table(an.defined))
    out.figures.append(_scatter(an, spec))
    if ins.n_undefined:
        out.clauses["defined"] = (f"percent change is undefined for {_n(ins.n_undefined, 'participant')} with "
                                  f"a baseline at or below zero")
    elif ins.n_near_zero:
        unit = f" {spec.unit}" if spec.unit else ""
        out.clauses["defined"] = (f"{_n(ins.n_near_zero, 'baseline')} below {ins.fraction:.0%} of the median "
                                  f"({_g(ins.median_baseline)}{unit}) and changes from {_pct(ins.largest_fall)} "
                                  f"to {_pct(ins.largest_rise)}")
    elif verdict is Verdict.CAUTION:
        out.clauses["defined"] = f"percent changes reach {_pct(ins.largest_rise)}"
    return verdict


def _extremes_table(part: Definedness) -> Table:
    rows = [[x.baseline, x.followup, x.percent if math.isfinite(x.percent) else "undefined",
             "yes" if x.near_zero else "no"] for x in part.extremes]
    return Table("percent-change-extremes", "Largest percent changes (pooled)",
                 ["Baseline", "Follow-up", "Percent change", "Baseline near zero"], rows,
                 note="Undefined: baseline at or below zero.")


# --------------------------------------------------------------------------- coding of ordinal scales


def _recoding(rec: Recoding, spec, out: _Collect) -> Verdict:
    """The planned percent-change summary under the declared and the shifted codes."""
    shift = rec.shift
    rows = [[label, f"{min(spec.levels) + s:g} to {max(spec.levels) + s:g}", summary.n_undefined, summary.mean]
            for label, s, summary in (("declared codes", 0.0, rec.declared),
                                      (f"codes shifted by {shift:+g}", shift, rec.shifted))]
    out.tables.append(Table("percent-change-recoding", "Percent change under two equally valid codings (pooled)",
                            ["Coding", "Codes", "Undefined", "Mean percent change"], rows))
    if rec.by_arm:
        e1, e2 = rec.declared_effect, rec.shifted_effect
        what = f"difference in mean percent change, {e1.label}"
        out.estimates += [estimate("Percent-change effect, declared codes", e1.estimate, e1.lower, e1.upper,
                                   e1.p_value, unit="%", by_arm=True, key="percent-change.code-shift.declared",
                                   arm=e1.label),
                          estimate(f"Percent-change effect, codes shifted by {shift:+g}", e2.estimate, e2.lower,
                                   e2.upper, e2.p_value, unit="%", by_arm=True,
                                   key="percent-change.code-shift.shifted", arm=e1.label)]
    else:
        what = "pooled mean percent change"
    a, c, rel, material = rec.before, rec.after, rec.relative_change, rec.material
    # Caution either way: percent change of ordinal codes depends on an arbitrary origin; the size of
    # that dependence (against the study's recoding_change) is stated, and only the efficiency finding
    # can make the check unsupported.
    verdict = Verdict.CAUTION
    evidence = (f"{what}: {fmt(a)}% with the declared codes, "
                + (f"{fmt(c)}%" if c is not None else "undefined") + f" with codes shifted by {shift:+g}"
                + (f" ({rel:.0%} relative change" + (f", at or above the {rec.material_change:.0%} this "
                                                       "tool treats as material)" if material else ")")
                   if math.isfinite(rel) else "")
                + (f"; {rec.shifted.n_undefined} participant(s) undefined after the shift"
                   if rec.shifted.n_undefined else ""))
    out.sub("coding", "Does percent change of the ordinal codes survive an equally valid coding?", verdict,
            evidence, by_arm=rec.by_arm)
    out.clauses["coding"] = (f"shifting the ordinal codes by one changes the {what.split(',')[0]} from "
                             f"{fmt(a)}% to " + (f"{fmt(c)}%" if c is not None else "undefined"))
    return verdict


# --------------------------------------------------------------------------- asymmetry


def _asymmetry(an: Analysis, spec, out: _Collect) -> Verdict:
    pc, lr = an.percent, an.asymmetry.log_ratio
    s_pc, s_lr = an.asymmetry.percent_shape, an.asymmetry.log_ratio_shape
    if abs(s_pc.skewness) > HIGH_SKEW or s_pc.floor_share >= FLOOR_SHARE:
        verdict = Verdict.CAUTION
    else:
        verdict = Verdict.SOUND
    lr_text = (f"log ratio skewness {fmt(s_lr.skewness)} with {s_lr.n_far_out} far-out value(s)"
               if s_lr else "log ratio undefined (values at or below zero)")
    out.sub("asymmetry", "Is percent change roughly symmetric (|skewness| at most 1, no pile at -100%)?", verdict,
            f"percent change skewness {fmt(s_pc.skewness)} with {s_pc.n_far_out} far-out value(s) and "
            f"{s_pc.n_at_floor} at -100%; {lr_text}")
    out.estimates += [estimate("Skewness of percent change", s_pc.skewness, p=s_pc.skew_p,
                               note="p: D'Agostino test of zero skewness", key="percent-change.skewness")]
    if s_lr:
        out.estimates.append(estimate("Skewness of the log ratio log(follow-up/baseline)", s_lr.skewness,
                                      p=s_lr.skew_p, key="percent-change.skewness-log-ratio"))
    out.estimates.append(estimate("Percent changes at the -100% bound", float(s_pc.n_at_floor),
                                  key="percent-change.at-floor"))
    panels = [{"title": "Percent change", "values": pc[np.isfinite(pc)].tolist(), "xlabel": "percent change (%)",
               "markers": [{"x": -100.0}, {"x": 0.0}]}]
    if s_lr:
        panels.append({"title": "Log ratio", "values": lr[np.isfinite(lr)].tolist(),
                       "xlabel": "log(follow-up / baseline)", "markers": [{"x": 0.0}]})
    out.figures.append(Figure("percent-change-histograms", "histograms",
                              f"{spec.display_name}: percent change beside the log ratio", {"panels": panels},
                              caption="Pooled over arms. Dotted lines: no change, and the -100% bound of "
                                      "percent change."))
    if verdict is not Verdict.SOUND:
        out.clauses["asymmetry"] = (f"percent change has skewness {fmt(s_pc.skewness)}"
                                    + (f" against {fmt(s_lr.skewness)} for the log ratio" if s_lr else ""))
    return verdict


# --------------------------------------------------------------------------- dependence on baseline


def _baseline_dependence(dep: BaselineDependence, out: _Collect) -> Verdict:
    rho = dep.pooled
    out.estimates.append(estimate("Spearman correlation of percent change with baseline, pooled", rho.r,
                                  rho.lower, rho.upper, rho.p_value, key="percent-change.baseline-spearman"))
    rows = [[x.arm, x.n, x.rho.r, x.rho.lower, x.rho.upper] for x in dep.within]
    if rows:
        out.tables.append(Table("percent-change-baseline-by-arm",
                                "Spearman correlation of percent change with baseline within arm",
                                ["Arm", "N", "Spearman rho", "Lower", "Upper"], rows, by_arm=True))
    judged = dep.judged
    r, lo, hi = judged.r, judged.lower, judged.upper
    where = f"within {dep.strongest.arm}" if rows else "pooled"
    material = abs(r) >= BASELINE_RHO and not (lo <= 0 <= hi)
    verdict = Verdict.CAUTION if material else Verdict.SOUND
    lead = ("" if material else "no evidence that percent change depends on baseline: " if lo <= 0 <= hi
            else f"a dependence on baseline below |rho| {BASELINE_RHO:g} ({where}): ")
    out.sub("baseline", "Is percent change free of baseline (|Spearman rho| below 0.3, pooled and within each "
            "arm)?", verdict, f"{lead}pooled rho {fmt_ci(rho.r, rho.lower, rho.upper)}"
            + ("; within arm " + ", ".join(f"{x[0]} {fmt_ci(x[2], x[3], x[4])}" for x in rows) if rows else ""),
            by_arm=bool(rows))
    if material:
        out.clauses["baseline"] = f"percent change still correlates with baseline (rho {fmt(r)} {where})"
    out.cite("fieller-1957", "cohen-1988")
    return verdict


def _scatter(an: Analysis, spec) -> Figure:
    inp, pc, ins = an.inputs, an.percent, an.defined.instability
    ok = np.isfinite(pc)
    if inp.arms:
        groups = [{"label": a, "x": inp.b[ok & (inp.arm == a)].tolist(), "y": pc[ok & (inp.arm == a)].tolist()}
                  for a in inp.arms]
    else:
        groups = [{"label": "All participants", "x": inp.b[ok].tolist(), "y": pc[ok].tolist()}]
    xlog = an.log_axis
    data = {"groups": groups, "hlines": [0.0, -100.0], "xlog": xlog,
            "vlines": [{"x": ins.threshold, "label": f"{ins.fraction:.0%} of median"}]
            if math.isfinite(ins.threshold) else [],
            "xlabel": _axis(spec, "Baseline") + (" (log scale)" if xlog else ""), "ylabel": "Percent change (%)"}
    return Figure("percent-change-vs-baseline", "relative_scatter",
                  f"{spec.display_name}: percent change against baseline", data,
                  caption="Dashed lines: no change and the -100% bound. Dotted line: the near-zero threshold "
                          f"({ins.fraction:.0%} of the median baseline).", by_arm=bool(inp.arms))


# --------------------------------------------------------------------------- what it costs


def _report_effects(effects: Effects, spec, out: _Collect, level: float = 0.95) -> None:
    fits, cost = effects.fits, effects.cost
    rows = [_effect_row(x) for x in effects.compared]
    ref_name = fits.reference_design.analysis
    out.tables.append(Table(
        "percent-change-effects", "The treatment effect under each analysis",
        ["Analysis", "Contrast", "Effect", "Estimate", "Lower", "Upper", "Estimate / SE", "Efficiency vs reference",
         "Participants needed vs reference"], rows,
        note=(f"Reference: {ref_name}. Efficiency: (z / z_ref)^2, the squared ratio of standardised effects; "
              "participants needed is its inverse. " + fits.ordinal_note).strip(), by_arm=True))
    for i, e in enumerate(fits.reference, 1):
        label = e.label
        if ref_name == "log-scale ANCOVA":
            r, lo, hi = e.exp()
            out.estimates.append(estimate(f"Ratio of geometric means, {label} (log-scale ANCOVA)", r, lo, hi,
                                          e.p_value, by_arm=True,
                                          key=f"percent-change.reference-ratio.contrast-{i}", arm=label))
        elif ref_name == "proportional-odds ANCOVA":
            r, lo, hi = e.exp()
            out.estimates.append(estimate(f"Odds ratio of a higher follow-up, {label} (proportional-odds ANCOVA, "
                                          f"baseline as {fits.reference_design.baseline_terms})", r, lo, hi,
                                          e.p_value, by_arm=True,
                                          key=f"percent-change.reference-odds-ratio.contrast-{i}", arm=label))
        else:
            out.estimates.append(estimate(f"Difference in follow-up, {label} ({ref_name})", e.estimate, e.lower,
                                          e.upper, e.p_value, unit=spec.unit, by_arm=True,
                                          key=f"percent-change.reference-difference.contrast-{i}", arm=label))
    out.estimates.append(estimate(
        f"Efficiency of {fits.planned_design.analysis} vs {ref_name}, {cost.contrast.label}",
        cost.efficiency, cost.interval.lower, cost.interval.upper,
        note=f"{interval_words('percentile bootstrap', level, noun='')} within arm, {cost.interval.replicates} "
             "replicates", by_arm=True,
        key="percent-change.planned-efficiency", arm=cost.contrast.label))


def _cost_text(eff: float, interval: rc.EfficiencyInterval) -> str:
    """'45% more participants (20% to 80%)': the sample-size cost 1/efficiency - 1 with the interval
    from the efficiency's bootstrap interval (the cost is its inverse, so the ends swap)."""
    def pct(e):
        return "n/a" if not (e > 0 and math.isfinite(e)) else f"{100 * rc.extra_participants(e):+.0f}%"
    more = 100 * rc.extra_participants(eff)
    word = (f"{more:.0f}% more participants" if more >= 0.5 else
            f"{-more:.0f}% fewer participants" if more <= -0.5 else "as many participants")
    return f"{word} ({pct(interval.upper)} to {pct(interval.lower)})"


def _rate_cost(effects: Effects, out: _Collect, ratio: float = MATERIAL_SAMPLE_RATIO,
               level: float = 0.95) -> Verdict | None:
    """The efficiency sub-finding and headline clause for a percent-change plan (None: not rated).
    The consequence is the sample-size cost of percent change against the reference analysis, judged
    against the study's ``sample_size_ratio`` (see :func:`_efficiency_verdict`)."""
    cost = effects.cost
    ref_name = effects.fits.reference_design.analysis
    eff = cost.efficiency
    question = (f"What does the planned analysis cost against the {ref_name} (material above "
                f"{100 * (ratio - 1):.0f}% more participants)?")
    if not cost.informative:
        out.sub("efficiency", question, Verdict.NOT_ASSESSABLE,
                f"the {ref_name} effect is small (estimate / SE {fmt(cost.reference.statistic)}), so the "
                f"efficiency {fmt(eff)} is not informative", by_arm=True)
        return None
    verdict = _efficiency_verdict(eff, cost.interval, ratio)
    judged = _cost_judgement(verdict, cost.interval, ratio)
    out.sub("efficiency", question, verdict,
            f"percent change needs {_cost_text(eff, cost.interval)} than the {ref_name}, {judged}: efficiency "
            f"{fmt(eff)} ({interval_words('bootstrap', level, noun='')} {fmt(cost.interval.lower)} to "
            f"{fmt(cost.interval.upper)}), "
            f"{cost.contrast.label}", by_arm=True)
    effect = (f"whose ratio of geometric means is {fmt_ci(*cost.reference.exp())}" if ref_name == "log-scale ANCOVA"
              else f"whose odds ratio of a higher follow-up is {fmt_ci(*cost.reference.exp())}"
              if ref_name == "proportional-odds ANCOVA" else "of follow-up on baseline")
    out.clauses["cost"] = f"it needs {_cost_text(eff, cost.interval)} than the {ref_name} {effect}, {judged}"
    return verdict


def _efficiency_verdict(eff: float, interval: rc.EfficiencyInterval, ratio: float = MATERIAL_SAMPLE_RATIO) -> Verdict:
    """The rule the change-score efficiency sub-finding uses, on the sample-size cost 1/efficiency:
    unsupported when the cost's whole interval lies above ``ratio`` (the efficiency's upper bound below
    1/ratio); caution when the cost is above ``ratio`` at its estimate (efficiency below 1/ratio);
    sound otherwise. A loss that is detectable (the efficiency's interval wholly below 1) but whose
    estimate is under the threshold is immaterial and stays sound; the evidence says so
    (:func:`_cost_judgement`)."""
    upper = interval.upper
    if math.isfinite(upper) and upper < 1 / ratio:
        return Verdict.UNSUPPORTED
    if eff < 1 / ratio:
        return Verdict.CAUTION
    return Verdict.SOUND


def _cost_judgement(verdict: Verdict, interval: rc.EfficiencyInterval, ratio: float) -> str:
    """The words beside the cost: where it lies against the threshold of materiality, and, for a sound
    verdict, whether a loss is detectable at all (the efficiency's interval wholly below 1)."""
    threshold = f"{100 * (ratio - 1):.0f}% threshold of materiality"
    if verdict is Verdict.UNSUPPORTED:
        return f"wholly above the {threshold}"
    if verdict is Verdict.CAUTION:
        return f"above the {threshold} at its estimate, but its interval reaches below it"
    if math.isfinite(interval.upper) and interval.upper < 1:
        return f"a detectable loss, but below the {threshold}, so immaterial"
    return f"no evidence of a cost above the {threshold.removesuffix(' of materiality')}"


_EFFECT_NAMES = {
    "percent change by arm": ("difference in mean percent change", False),
    "log-scale ANCOVA": ("ratio of geometric means", True),
    "ANCOVA": ("difference in follow-up", False),
    "responders by arm": ("difference in responder proportion", False),
    "proportional-odds ANCOVA": ("odds ratio of a higher follow-up", True),
}


def _effect_row(x: Compared) -> list:
    e = x.effect
    name, exponentiate = _EFFECT_NAMES[e.analysis]
    est, lo, hi = e.exp() if exponentiate else (e.estimate, e.lower, e.upper)
    return [e.analysis + (" (reference)" if x.is_reference else ""), e.label, name,
            est, lo, hi, e.statistic, x.efficiency, x.needed]


# --------------------------------------------------------------------------- responder rules


def _responder(an: Analysis, spec, ctx: CheckContext, out: _Collect) -> Verdict:
    rule, part, cost = spec.responder, an.responder, an.cost
    c = part.cost
    if c is None:
        out.sub("dichotomy", "Does the responder rule keep most of the information?", Verdict.NOT_ASSESSABLE,
                f"the normal-theory cost cannot be computed: {part.cost_error}")
        return _responder_baseline(an, spec, ctx, out)
    normal_ok = part.normal_ok
    basis = "change" if rule.basis == "change" else "percent change"
    rule_text = f"{basis} {'at least' if rule.direction == 'at-least' else 'at most'} {rule.threshold:g}" + (
        "%" if rule.basis == "percent-change" else "")
    out.estimates += [
        estimate("Responders (pooled)", c.share_observed, note=f"rule: {rule_text}; {c.n} participants",
                 key="percent-change.responders"),
        estimate("Responder share predicted by a normal change", c.share_normal,
                 note=f"cut {fmt(c.cut, 3)} on the {c.scale} scale, mean {fmt(c.mean, 3)}, SD {fmt(c.sd, 3)}, "
                      f"z = {fmt(c.z_cut)}", key="percent-change.responders-normal"),
        estimate("Efficiency of dichotomising (normal theory)", c.dichotomy_efficiency,
                 note="phi(z)^2 / (Phi(z)(1 - Phi(z)))", key="percent-change.dichotomy-efficiency"),
        estimate("Efficiency of change against ANCOVA (normal theory)", c.change_efficiency,
                 key="percent-change.change-efficiency"),
        estimate("Sample-size inflation of the responder comparison against ANCOVA", c.inflation,
                 note="normal theory, pooled data; 1 / (product of the two efficiencies)",
                 key="percent-change.responder-inflation"),
    ]
    empirical = cost if cost is not None and cost.informative else None
    ratio = an.sample_size_ratio
    verdict = _dichotomy_verdict(c.inflation, normal_ok, empirical, ratio)
    comparator = "ANCOVA" if c.scale == "change" else "the log-scale ANCOVA"
    evidence = (f"responders {c.share_observed:.0%} (normal theory predicts {c.share_normal:.0%}); the cut lies "
                f"at z = {fmt(c.z_cut)}, so dichotomising keeps {c.dichotomy_efficiency:.0%} of the information "
                f"and the comparison of responders needs {fmt(c.inflation)} times the participants of {comparator}")
    if not normal_ok:
        evidence += "; the normal approximation misses the observed share, so this figure is rough"
    clause = (f"the responder rule ({rule_text}) needs about {fmt(c.inflation, 1)} times the participants of "
              f"{'the continuous ANCOVA' if c.scale == 'change' else comparator} (normal theory)")
    if empirical is not None:
        evidence += (f"; in the trial's own data the efficiency is {fmt(empirical.efficiency)} "
                     f"({interval_words('bootstrap', ctx.level, noun='')} {fmt(empirical.interval.lower)} to "
                     f"{fmt(empirical.interval.upper)})")
        if empirical.efficiency > 0:
            clause = (f"the responder rule ({rule_text}) needs {_cost_text(empirical.efficiency, empirical.interval)} "
                      f"than the {_empirical_comparator(empirical)} "
                      f"in the trial's own data"
                      + (f", wholly above the {100 * (ratio - 1):.0f}% threshold of materiality"
                         if verdict is Verdict.UNSUPPORTED else "")
                      + f" (about {fmt(c.inflation, 1)} times by normal theory)")
    elif c.inflation > ratio:
        clause += ("; its interval is not sized here (no informative comparison between arms), so it is not "
                   "judged unsupported")
    out.sub("dichotomy", "Does the responder rule keep most of the information (sample-size inflation below "
            f"{ratio:g} against ANCOVA)?", verdict, evidence, by_arm=empirical is not None)
    out.clauses["dichotomy"] = clause
    return _worst(verdict, _responder_baseline(an, spec, ctx, out))


def _empirical_comparator(cost: Cost) -> str:
    """The name of the analysis the responder rule was measured against in the trial's own data."""
    name = cost.reference.analysis
    return "continuous ANCOVA" if name == "ANCOVA" else name


def _dichotomy_verdict(inflation: float, normal_ok: bool, empirical: Cost | None,
                       ratio: float = MATERIAL_SAMPLE_RATIO) -> Verdict:
    """The normal-theory inflation is a point value with no interval, so on its own it raises caution
    at most (above ``ratio``); the trial's own efficiency, when informative, is graded by
    :func:`_efficiency_verdict` and alone can make the rule unsupported (its whole cost interval above
    ``ratio``). The worse of the two. ``normal_ok`` (the normal fit predicts the responder share) is
    reported in the evidence; it no longer changes the verdict, since the analytic tier is already
    caution at most."""
    analytic = Verdict.CAUTION if inflation > ratio else Verdict.SOUND
    if empirical is None:
        return analytic
    return _worst(analytic, _efficiency_verdict(empirical.efficiency, empirical.interval, ratio))


def _responder_baseline(an: Analysis, spec, ctx: CheckContext, out: _Collect) -> Verdict:
    part = an.responder
    curve = part.curve
    if curve is None:
        # The question stays visibly unanswered; it adds nothing to the check's verdict either way.
        out.sub("responder-baseline", "Is the chance of responding free of baseline?", Verdict.NOT_ASSESSABLE,
                f"not assessable: {part.curve_error}")
        out.caveats.append(f"The responder probability could not be related to baseline: {part.curve_error}.")
        return Verdict.SOUND
    material = part.baseline_material
    verdict = Verdict.CAUTION if material else Verdict.SOUND
    out.estimates += [
        estimate("Log odds of responding per unit of baseline (pooled logistic)", curve.slope, curve.slope_lower,
                 curve.slope_upper, curve.p_value, unit=f"per {spec.unit}" if spec.unit else "",
                 key="percent-change.responder-baseline-slope"),
        estimate(f"Responder probability at the 10th baseline percentile ({_g(curve.x_low)})", curve.prob_low,
                 key="percent-change.responder-probability.p10"),
        estimate(f"Responder probability at the 90th baseline percentile ({_g(curve.x_high)})", curve.prob_high,
                 key="percent-change.responder-probability.p90"),
    ]
    out.sub("responder-baseline", "Is the chance of responding free of baseline (less than 10 points across the "
            "10th to 90th baseline percentiles)?", verdict,
            ("" if curve.p_value < 0.05 else "no evidence that the chance of responding depends on baseline: ")
            + f"probability {curve.prob_low:.0%} at baseline {_g(curve.x_low)} and {curve.prob_high:.0%} at "
            f"{_g(curve.x_high)} (log odds per unit "
            f"{fmt_ci(curve.slope, curve.slope_lower, curve.slope_upper, 3)})")
    if material:
        out.clauses["responder-baseline"] = (f"the chance of responding moves from {curve.prob_low:.0%} to "
                                             f"{curve.prob_high:.0%} between the 10th and 90th baseline "
                                             "percentiles")
    out.figures.append(Figure(
        "responder-vs-baseline", "curve_band", f"{spec.display_name}: responder probability against baseline",
        {"curves": [{"x": curve.grid, "y": curve.prob, "lower": curve.lower, "upper": curve.upper,
                     "label": "logistic fit, pooled"}],
         "rug": an.inputs.b.tolist(), "xlabel": _axis(spec, "Baseline"), "ylabel": "Probability of responding",
         "vlines": [{"x": curve.x_low}, {"x": curve.x_high}]},
        caption=f"Pooled over arms; band: {level_label(ctx.level)} pointwise interval. Dotted lines: 10th and 90th baseline "
                "percentiles."))
    return verdict


# --------------------------------------------------------------------------- the check


@register(CHECK_ID, TITLE, _applies, order=40, needs_arms=False,
          summary="Whether percent change is defined, stable, symmetric and efficient, and what a responder "
                  "dichotomy costs against the continuous ANCOVA.")
def run(data, ctx: CheckContext):
    from .registry import get_check

    check = get_check(CHECK_ID)
    spec = data.spec
    an = analyse(data, ctx)
    inp = an.inputs
    out = _Collect()
    out.estimates.append(estimate("Participants with baseline and follow-up", float(len(inp.b)),
                                  key="percent-change.n-participants"))
    verdicts = []
    out.cite("vickers-2001")
    if inp.uses_percent:
        out.cite("tornqvist-1985", "bulmer-1979", "tukey-1977")
        verdicts.append(_definedness(an, spec, out))
        if an.recoding is not None:
            verdicts.append(_recoding(an.recoding, spec, out))
        if an.asymmetry is not None:
            verdicts.append(_asymmetry(an, spec, out))
            verdicts.append(_baseline_dependence(an.baseline, out))
    if an.effects is not None:
        out.cite("durrleman-simon-1989", "noether-1955", "efron-tibshirani-1993")
        if an.effects.fits.proportional_odds:
            out.cite("mccullagh-1980")
        _report_effects(an.effects, spec, out, ctx.level)
        rated = (_rate_cost(an.effects, out, an.sample_size_ratio, ctx.level)
                 if spec.planned_analysis != "responder" else None)
        if rated is not None:
            verdicts.append(rated)
    if an.responder is not None:
        out.cite("altman-royston-2006")
        verdicts.append(_responder(an, spec, ctx, out))
    if spec.scale == "count":
        out.caveats.append("Counts observed over unequal follow-up times call for rates (a model with the "
                           "exposure time as offset); no exposure time is available, so this check treats the "
                           "count as measured over a common period.")
    if not inp.coding.contrasts:
        out.caveats.append("No treatment effects are estimated: the audit is blinded or has fewer than two arms, "
                           "so only pooled diagnostics are shown.")
    verdict = _worst(*verdicts)
    withheld = ctx.blinded and data.design == "parallel" and spec.planned_analysis != "responder"
    return result(check, data, verdict, _headline(spec, verdict, out.clauses, withheld), subfindings=out.subfindings,
                  estimates=out.estimates, tables=out.tables, figures=out.figures, caveats=out.caveats,
                  recommendation=recommended_analysis(spec, verdict),
                  references=cite(out.references),
                  method="Percent change 100(f - b)/b and log ratio log(f/b) per participant; near zero: baseline "
                         "below 5% of the median. Effects: percent change on arm; ANCOVA of log follow-up on a "
                         "restricted cubic spline of log baseline plus arm, back-transformed to a ratio of "
                         "geometric means; proportional-odds ANCOVA on a spline of baseline plus arm (for an outcome "
                         "declared ordinal the reference analysis, with baseline as categories when the levels are "
                         "declared); efficiency "
                         f"(z / z_ref)^2 with a stratified "
                         f"{interval_words('percentile bootstrap', ctx.level, noun='')}. Responder rules: normal-theory "
                         "inflation phi(z)^2/(Phi(z)(1-Phi(z))) times the efficiency of change against ANCOVA; "
                         "logistic regression of responder status on baseline. Unsupported only when the whole "
                         "interval of the sample-size cost (1 / efficiency) lies above "
                         f"{an.sample_size_ratio:g} (sample_size_ratio; default a convention of this "
                         "tool).")


_LEAD = {
    Verdict.UNSUPPORTED: "Percent change is unsupported here",
    Verdict.CAUTION: "Percent change needs care here",
    Verdict.SOUND: "Percent change is harmless here",
}


BLINDED_SOUND_LEAD = "Percent change shows no problem in the pooled data"
"""The sound lead of a blinded audit, which cannot call percent change harmless: its cost to the
treatment comparison against ANCOVA needs the arms."""
WITHHELD_CLAUSE = "its cost to the treatment comparison is withheld in this blinded audit (it needs the arms)"


def _headline(spec, verdict: Verdict, clauses: dict[str, str], withheld: bool = False) -> str:
    """One sentence: the leading judgement and up to three quantitative clauses. In a blinded audit
    (``withheld``) the sentence says that the cost to the treatment comparison is not judged."""
    text = _headline_text(spec, verdict, clauses, withheld)
    return text[:-1] + f"; {WITHHELD_CLAUSE}." if withheld else text


def _headline_text(spec, verdict: Verdict, clauses: dict[str, str], withheld: bool) -> str:
    """The headline before any blinded-audit clause."""
    if spec.planned_analysis == "responder":
        order = ["dichotomy", "responder-baseline", "defined", "coding", "asymmetry"]
        lead = {Verdict.UNSUPPORTED: "The responder definition discards information",
                Verdict.CAUTION: "The responder definition costs precision",
                Verdict.SOUND: "The responder definition is harmless here"}[verdict]
    else:
        order = ["cost", "defined", "coding", "asymmetry", "baseline"]
        lead = BLINDED_SOUND_LEAD if withheld and verdict is Verdict.SOUND else _LEAD[verdict]
        if verdict is Verdict.CAUTION and "defined" in clauses:
            lead = "Percent change is unstable here" if "undefined" not in clauses["defined"] else \
                "Percent change is undefined here"
    picked = [clauses[k] for k in order if k in clauses][:3]
    if not picked and spec.planned_analysis == "responder":
        return f"{lead}."
    if not picked:
        return f"{lead}: no baseline near zero, little skewness, and no material dependence on baseline."
    return f"{lead}: " + "; ".join(picked) + "."
