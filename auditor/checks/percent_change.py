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
from ..stats.correlation import spearman
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


@dataclass(frozen=True)
class _Inputs:
    b: np.ndarray
    f: np.ndarray
    arm: np.ndarray | None
    """Arm labels, only in an unblinded parallel-group audit with at least two arms."""
    arms: list[str]
    coding: ArmCoding
    control: str | None
    uses_percent: bool


def _applies(spec, design) -> bool:
    return spec.planned_analysis in ("percent-change", "responder") and spec.baseline_visit is not None


def _inputs(data, ctx: CheckContext) -> _Inputs:
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
        return _Inputs(df["baseline"].to_numpy(float), df["followup"].to_numpy(float), None, [], NO_ARMS, None,
                       uses_percent)
    df = df[df["arm"].isin(arms)].reset_index(drop=True)
    control = data.control_arm if data.control_arm in arms else arms[0]
    arm = df["arm"].to_numpy(object)
    return _Inputs(df["baseline"].to_numpy(float), df["followup"].to_numpy(float), arm, arms,
                   arm_coding(arm, arms, control), control, uses_percent)


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


def _definedness_verdict(ins: rc.Instability) -> Verdict:
    """Caution: any baseline at or below zero, any near zero, or a change of 1000% or more; sound
    otherwise. Never unsupported on its own: what an unstable percent change costs the treatment
    comparison is sized by the efficiency finding, which alone can make the check unsupported."""
    extreme = max(abs(ins.largest_rise), abs(ins.largest_fall)) if math.isfinite(ins.largest_rise) else 0.0
    if ins.n_undefined or ins.n_near_zero or extreme >= EXTREME_PERCENT:
        return Verdict.CAUTION
    return Verdict.SOUND


def _definedness(inp: _Inputs, spec, out: _Collect) -> Verdict:
    ins = rc.instability(inp.b, inp.f)
    floor_zero = spec.lower_bound is not None and spec.lower_bound <= 0
    verdict = _definedness_verdict(ins)
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
    out.tables.append(_extremes_table(inp, ins))
    out.figures.append(_scatter(inp, ins, spec))
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


def _extremes_table(inp: _Inputs, ins: rc.Instability) -> Table:
    pc = rc.percent_change(inp.b, inp.f)
    order = np.argsort(-np.where(np.isfinite(pc), np.abs(pc), np.inf), kind="mergesort")[:TOP_EXTREMES]
    rows = []
    for i in order:
        near = bool(inp.b[i] > 0 and math.isfinite(ins.threshold) and inp.b[i] < ins.threshold)
        rows.append([float(inp.b[i]), float(inp.f[i]),
                     float(pc[i]) if math.isfinite(pc[i]) else "undefined", "yes" if near else "no"])
    return Table("percent-change-extremes", "Largest percent changes (pooled)",
                 ["Baseline", "Follow-up", "Percent change", "Baseline near zero"], rows,
                 note="Undefined: baseline at or below zero.")


# --------------------------------------------------------------------------- coding of ordinal scales


def _recoding(inp: _Inputs, spec, ctx: CheckContext, out: _Collect) -> Verdict:
    """Shift the codes by one and compare the planned percent-change summary under both codings."""
    shift = rc.recoding_shift(spec.levels)
    b2, f2 = inp.b + shift, inp.f + shift
    rows = []
    codings = (("declared codes", 0.0, inp.b, inp.f), (f"codes shifted by {shift:+g}", shift, b2, f2))
    for label, s, bb, ff in codings:
        pc = rc.percent_change(bb, ff)
        codes = f"{min(spec.levels) + s:g} to {max(spec.levels) + s:g}"
        rows.append([label, codes, int(np.sum(~np.isfinite(pc))),
                     float(np.nanmean(pc)) if np.isfinite(pc).any() else None])
    out.tables.append(Table("percent-change-recoding", "Percent change under two equally valid codings (pooled)",
                            ["Coding", "Codes", "Undefined", "Mean percent change"], rows))
    by_arm = bool(inp.coding.contrasts) and rows[1][3] is not None
    if by_arm:
        e1 = rc.ols_effects(rc.percent_change_design(inp.b, inp.f, inp.coding), ctx.level)[0]
        e2 = rc.ols_effects(rc.percent_change_design(b2, f2, inp.coding), ctx.level)[0]
        a, c = e1.estimate, e2.estimate
        what = f"difference in mean percent change, {e1.label}"
        out.estimates += [estimate("Percent-change effect, declared codes", a, e1.lower, e1.upper, e1.p_value,
                                   unit="%", by_arm=True, key="percent-change.code-shift.declared",
                                   arm=e1.label),
                          estimate(f"Percent-change effect, codes shifted by {shift:+g}", c, e2.lower, e2.upper,
                                   e2.p_value, unit="%", by_arm=True, key="percent-change.code-shift.shifted",
                                   arm=e1.label)]
    else:
        a, c = rows[0][3], rows[1][3]
        what = "pooled mean percent change"
    undefined = rows[0][2] + rows[1][2]
    rel = abs(c - a) / abs(a) if (a is not None and c is not None and a != 0) else math.inf
    flipped = a is not None and c is not None and np.sign(a) != np.sign(c)
    # Caution either way: percent change of ordinal codes depends on an arbitrary origin; the size of
    # that dependence (against the study's recoding_change) is stated, and only the efficiency finding
    # can make the check unsupported.
    material = bool(undefined or rel >= ctx.thresholds.recoding_change or flipped)
    verdict = Verdict.CAUTION
    evidence = (f"{what}: {fmt(a)}% with the declared codes, "
                + (f"{fmt(c)}%" if c is not None else "undefined") + f" with codes shifted by {shift:+g}"
                + (f" ({rel:.0%} relative change" + (f", at or above the {ctx.thresholds.recoding_change:.0%} this "
                                                       "tool treats as material)" if material else ")")
                   if math.isfinite(rel) else "")
                + (f"; {rows[1][2]} participant(s) undefined after the shift" if rows[1][2] else ""))
    out.sub("coding", "Does percent change of the ordinal codes survive an equally valid coding?", verdict,
            evidence, by_arm=by_arm)
    out.clauses["coding"] = (f"shifting the ordinal codes by one changes the {what.split(',')[0]} from "
                             f"{fmt(a)}% to " + (f"{fmt(c)}%" if c is not None else "undefined"))
    return verdict


# --------------------------------------------------------------------------- asymmetry


def _asymmetry(inp: _Inputs, spec, out: _Collect) -> Verdict:
    pc = rc.percent_change(inp.b, inp.f)
    lr = rc.log_ratio(inp.b, inp.f)
    s_pc = rc.shape(pc, floor=-100.0)
    s_lr = rc.shape(lr) if np.isfinite(lr).sum() >= 3 else None
    at_floor = s_pc.n_at_floor / s_pc.n
    if abs(s_pc.skewness) > HIGH_SKEW or at_floor >= FLOOR_SHARE:
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


def _baseline_dependence(inp: _Inputs, spec, ctx: CheckContext, out: _Collect) -> Verdict:
    pc = rc.percent_change(inp.b, inp.f)
    ok = np.isfinite(pc)
    rho = spearman(inp.b[ok], pc[ok], ctx.level)
    out.estimates.append(estimate("Spearman correlation of percent change with baseline, pooled", rho.r,
                                  rho.lower, rho.upper, rho.p_value, key="percent-change.baseline-spearman"))
    rows = []
    for a in inp.arms:
        sel = ok & (inp.arm == a)
        if sel.sum() >= 4 and np.ptp(pc[sel]) > 0 and np.ptp(inp.b[sel]) > 0:
            ra = spearman(inp.b[sel], pc[sel], ctx.level)
            rows.append([a, int(sel.sum()), ra.r, ra.lower, ra.upper])
    if rows:
        out.tables.append(Table("percent-change-baseline-by-arm",
                                "Spearman correlation of percent change with baseline within arm",
                                ["Arm", "N", "Spearman rho", "Lower", "Upper"], rows, by_arm=True))
    if rows:
        worst = max(rows, key=lambda r: abs(r[2]))
        r, lo, hi, where = worst[2], worst[3], worst[4], f"within {worst[0]}"
    else:
        r, lo, hi, where = rho.r, rho.lower, rho.upper, "pooled"
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


def _scatter(inp: _Inputs, ins: rc.Instability, spec) -> Figure:
    pc = rc.percent_change(inp.b, inp.f)
    ok = np.isfinite(pc)
    if inp.arms:
        groups = [{"label": a, "x": inp.b[ok & (inp.arm == a)].tolist(), "y": pc[ok & (inp.arm == a)].tolist()}
                  for a in inp.arms]
    else:
        groups = [{"label": "All participants", "x": inp.b[ok].tolist(), "y": pc[ok].tolist()}]
    positive = inp.b[ok] > 0
    xlog = bool(positive.all() and inp.b[ok].max() / inp.b[ok].min() >= 20)
    data = {"groups": groups, "hlines": [0.0, -100.0], "xlog": xlog,
            "vlines": [{"x": ins.threshold, "label": f"{ins.fraction:.0%} of median"}]
            if math.isfinite(ins.threshold) else [],
            "xlabel": _axis(spec, "Baseline") + (" (log scale)" if xlog else ""), "ylabel": "Percent change (%)"}
    return Figure("percent-change-vs-baseline", "relative_scatter",
                  f"{spec.display_name}: percent change against baseline", data,
                  caption="Dashed lines: no change and the -100% bound. Dotted line: the near-zero threshold "
                          f"({ins.fraction:.0%} of the median baseline).", by_arm=bool(inp.arms))


# --------------------------------------------------------------------------- what it costs


@dataclass(frozen=True)
class _Fits:
    """Every analysis of the treatment effect, fitted on the trial's data."""

    planned_design: rc.RefitDesign
    reference_design: rc.RefitDesign
    planned: list[ArmEffect]
    reference: list[ArmEffect]
    others: list[list[ArmEffect]]
    ordinal_note: str
    """Why the proportional-odds row is missing ('' when it is present)."""


@dataclass(frozen=True)
class _Cost:
    """The planned analysis against its reference, for the most informative contrast."""

    contrast: ArmContrast
    reference: ArmEffect
    efficiency: float
    interval: rc.EfficiencyInterval
    informative: bool


def _designs(inp: _Inputs, spec, responder: np.ndarray | None):
    """(planned design, least-squares reference design, other designs) for the effect comparison.
    The reference of an ordinal outcome is the proportional-odds ANCOVA (:func:`_ordinal_reference`),
    tried in :func:`_fit_analyses`; the least-squares reference here stands in when it cannot be
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


def _ordinal_reference(inp: _Inputs, spec, level: float):
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


def _fit_analyses(inp: _Inputs, spec, ctx: CheckContext, responder, out: _Collect) -> _Fits:
    planned_d, ref_d, other_ds = _designs(inp, spec, responder)
    others = [rc.ols_effects(d, ctx.level) for d in other_ds]
    note = ""
    reason = _po_reason()
    if reason is None:
        from ..stats.ordinal import OrdinalFitError

        try:
            if spec.scale == "ordinal":
                po_d, po_effects = _ordinal_reference(inp, spec, ctx.level)
                others.insert(0, rc.ols_effects(ref_d, ctx.level))
                out.cite("mccullagh-1980")
                return _Fits(planned_d, po_d, rc.ols_effects(planned_d, ctx.level), po_effects, others, "")
            others.append(rc.proportional_odds_effects(inp.b, inp.f, inp.coding, ctx.level))
            out.cite("mccullagh-1980")
        except (OrdinalFitError, ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
            note = f"The proportional-odds ANCOVA could not be fitted: {getattr(exc, 'reason', exc)}"
            if spec.scale == "ordinal":
                note += f"; the {ref_d.analysis} is the reference instead."
    else:
        note = f"The proportional-odds ANCOVA is left out: {reason}."
    return _Fits(planned_d, ref_d, rc.ols_effects(planned_d, ctx.level), rc.ols_effects(ref_d, ctx.level),
                 others, note)


def _measure_cost(fits: _Fits, inp: _Inputs, ctx: CheckContext) -> _Cost:
    """Efficiency of the planned analysis for the contrast the reference shows most clearly."""
    k = int(np.argmax([abs(e.statistic) for e in fits.reference]))
    contrast = fits.reference_design.contrasts[k]
    j = fits.planned_design.contrasts.index(contrast)

    def statistics(rows):
        return (rc.t_statistics(fits.planned_design, rows)[j],
                rc.design_statistics(fits.reference_design, rows)[j])

    n_boot = BOOT_QUICK if ctx.quick else BOOT_FULL
    interval = rc.bootstrap_efficiency(statistics, inp.arm, n_boot, ctx.seed, ctx.level)
    eff = rc.relative_efficiency(fits.planned[k].statistic, fits.reference[k].statistic)
    return _Cost(contrast, fits.reference[k], eff, interval, abs(fits.reference[k].statistic) >= INFORMATIVE_Z)


def _report_effects(fits: _Fits, cost: _Cost, inp: _Inputs, spec, out: _Collect, level: float = 0.95) -> None:
    rows = []
    for effects in [fits.planned, fits.reference, *fits.others]:
        for e in effects:
            ref = next(r for r in fits.reference if r.arm == e.arm)
            rows.append(_effect_row(e, rc.relative_efficiency(e.statistic, ref.statistic), e is ref))
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
        return "n/a" if not (e > 0 and math.isfinite(e)) else f"{100 * (1 / e - 1):+.0f}%"
    more = 100 * (1 / eff - 1) if eff > 0 else math.inf
    word = (f"{more:.0f}% more participants" if more >= 0.5 else
            f"{-more:.0f}% fewer participants" if more <= -0.5 else "as many participants")
    return f"{word} ({pct(interval.upper)} to {pct(interval.lower)})"


def _rate_cost(fits: _Fits, cost: _Cost, inp: _Inputs, out: _Collect,
               ratio: float = MATERIAL_SAMPLE_RATIO, level: float = 0.95) -> Verdict | None:
    """The efficiency sub-finding and headline clause for a percent-change plan (None: not rated).
    The consequence is the sample-size cost of percent change against the reference analysis, judged
    against the study's ``sample_size_ratio`` (see :func:`_efficiency_verdict`)."""
    ref_name = fits.reference_design.analysis
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


def _effect_row(e: ArmEffect, efficiency: float, is_reference: bool) -> list:
    name, exponentiate = _EFFECT_NAMES[e.analysis]
    est, lo, hi = e.exp() if exponentiate else (e.estimate, e.lower, e.upper)
    needed = 1 / efficiency if efficiency > 0 else None
    return [e.analysis + (" (reference)" if is_reference else ""), e.label, name,
            est, lo, hi, e.statistic, efficiency, needed]


# --------------------------------------------------------------------------- responder rules


def _responder(inp: _Inputs, spec, ctx: CheckContext, resp: np.ndarray, cost: _Cost | None,
               out: _Collect) -> Verdict:
    rule = spec.responder
    try:
        c = rc.responder_cost(inp.b, inp.f, rule.basis, rule.threshold, rule.direction)
    except ValueError as exc:
        out.sub("dichotomy", "Does the responder rule keep most of the information?", Verdict.NOT_ASSESSABLE,
                f"the normal-theory cost cannot be computed: {exc}")
        return _responder_baseline(inp, spec, ctx, resp, out)
    normal_ok = abs(c.share_observed - c.share_normal) <= NORMAL_SHARE_TOLERANCE
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
    ratio = ctx.thresholds.sample_size_ratio
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
    return _worst(verdict, _responder_baseline(inp, spec, ctx, resp, out))


def _empirical_comparator(cost: _Cost) -> str:
    """The name of the analysis the responder rule was measured against in the trial's own data."""
    name = cost.reference.analysis
    return "continuous ANCOVA" if name == "ANCOVA" else name


def _dichotomy_verdict(inflation: float, normal_ok: bool, empirical: _Cost | None,
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


def _responder_baseline(inp: _Inputs, spec, ctx: CheckContext, resp: np.ndarray, out: _Collect) -> Verdict:
    try:
        curve = rc.responder_on_baseline(inp.b, resp, ctx.level)
    except ValueError as exc:
        # The question stays visibly unanswered; it adds nothing to the check's verdict either way.
        out.sub("responder-baseline", "Is the chance of responding free of baseline?", Verdict.NOT_ASSESSABLE,
                f"not assessable: {exc}")
        out.caveats.append(f"The responder probability could not be related to baseline: {exc}.")
        return Verdict.SOUND
    spread = curve.prob_high - curve.prob_low
    material = curve.p_value < 0.05 and abs(spread) >= RESPONDER_PROB_RANGE
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
         "rug": inp.b.tolist(), "xlabel": _axis(spec, "Baseline"), "ylabel": "Probability of responding",
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
    inp = _inputs(data, ctx)
    out = _Collect()
    out.estimates.append(estimate("Participants with baseline and follow-up", float(len(inp.b)),
                                  key="percent-change.n-participants"))
    verdicts = []
    out.cite("vickers-2001")
    if inp.uses_percent:
        out.cite("tornqvist-1985", "bulmer-1979", "tukey-1977")
        verdicts.append(_definedness(inp, spec, out))
        if spec.scale == "ordinal" and spec.levels:
            verdicts.append(_recoding(inp, spec, ctx, out))
        if np.isfinite(rc.percent_change(inp.b, inp.f)).sum() >= MIN_DEFINED:
            verdicts.append(_asymmetry(inp, spec, out))
            verdicts.append(_baseline_dependence(inp, spec, ctx, out))
    responder = None
    if spec.planned_analysis == "responder":
        r = spec.responder
        responder = rc.responder_indicator(inp.b, inp.f, r.basis, r.threshold, r.direction)
    cost = None
    if inp.coding.contrasts:
        out.cite("durrleman-simon-1989", "noether-1955", "efron-tibshirani-1993")
        fits = _fit_analyses(inp, spec, ctx, responder, out)
        cost = _measure_cost(fits, inp, ctx)
        _report_effects(fits, cost, inp, spec, out, ctx.level)
        rated = (_rate_cost(fits, cost, inp, out, ctx.thresholds.sample_size_ratio, ctx.level)
                 if spec.planned_analysis != "responder" else None)
        if rated is not None:
            verdicts.append(rated)
    if responder is not None:
        out.cite("altman-royston-2006")
        verdicts.append(_responder(inp, spec, ctx, responder, cost, out))
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
                         f"{ctx.thresholds.sample_size_ratio:g} (sample_size_ratio; default a convention of this "
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
