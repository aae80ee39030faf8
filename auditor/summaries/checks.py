"""The questions a reviewer can answer from a paper's summaries, one function per question.

Each takes an outcome's declaration, its per-arm summaries and the context, and returns a
:class:`~auditor.results.CheckResult` plus, when the verdict is caution or unsupported, the draft
comment to the authors (concern, number, analysis to ask for). Formulas are in
:mod:`auditor.stats.summary_formulas`; thresholds are those of the data checks, reused.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..checks.change_score import MATERIAL_RATIO
from ..checks.common import fmt
from ..checks.percent_change import RECODE_CHANGE
from ..checks.regression_to_mean import BIASED_BY_RTM, MATERIAL_SD
from ..references import add_reference
from ..results import CheckResult, Estimate, SubFinding, Table, Verdict, interval_words, level_label
from ..stats import summary_formulas as sf
from ..stats.relative_change import recoding_shift
from .reader import ArmSummary
from .spec import SummaryOutcome

add_reference("cochrane-handbook-6", "Higgins JPT, Li T, Deeks JJ (eds). Chapter 6: Choosing effect measures and "
              "computing estimates of effect. In: Cochrane Handbook for Systematic Reviews of Interventions, "
              "version 6. Cochrane, 2019 (section 6.5.2.8, imputing standard deviations for changes from baseline).")
add_reference("wan-2014", "Wan X, Wang W, Liu J, Tong T. Estimating the sample mean and standard deviation from "
              "the sample size, median, range and/or interquartile range. BMC Med Res Methodol 2014;14:135.")
add_reference("altman-bland-1996", "Altman DG, Bland JM. Detecting skewness from summary information. BMJ "
              "1996;313:1200.")

AGREE_SD = 0.10
"""Two reported numbers for the same quantity (a mean change and the difference of the means) agree
when they differ by at most this many SDs (a convention of this tool, no source)."""
AGREE_R = 0.10
"""A reported and an implied correlation agree within this distance (a convention of this tool)."""
AGREE_SD_RATIO = 0.10
"""An SD of change reported and one implied by an interval agree within this relative distance
(a convention of this tool)."""
NEAR_BOUND_SD = 1.0
"""A mean within this many SDs of a declared bound puts many participants at or near it (a
convention of this tool: for a normal variable, about 16% would lie beyond the bound)."""
R_GRID = (0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9)
"""Correlations over which a cost is shown when the paper lets none be computed."""
PLAUSIBLE_R = (0.3, 0.8)
"""The range of pre-post correlations usual in trials (Frison and Pocock 1992 report 0.3 to 0.8 as
typical; from memory), over which a cost without a reported correlation is graded."""
PERCENT_GAP = 1.0
"""Percentage points by which the mean of percent changes and the percent change of the means may
differ before the paper must say which it reports (a convention of this tool, no source)."""
DRAWS = 4000
QUICK_DRAWS = 1000

CHECKS = {
    "summary-consistency": ("Agreement among the reported numbers", 10,
                            "Whether the paper's means, SDs, changes, intervals and effects describe one set of "
                            "participants: the implied pre-post correlation and cross-checks between numbers "
                            "given twice."),
    "summary-efficiency": ("Reported analysis against ANCOVA", 20,
                           "The sample-size cost of the reported analysis against ANCOVA of follow-up on "
                           "baseline, from the SDs and the pre-post correlation (Frison and Pocock 1992, "
                           "unequal variances), and the ANCOVA estimate the summaries imply."),
    "summary-responder": ("Responder rule against the continuous analysis", 30,
                          "The efficiency lost by counting responders instead of analysing the change or "
                          "ANCOVA, for a normal change at the rule's cut (Altman and Royston 2006)."),
    "summary-shape": ("Skewness and bounds from means and SDs", 40,
                      "Whether the means and SDs imply a skewed distribution or many values at a bound "
                      "(Altman and Bland 1996), and what that does to change and percent change."),
    "summary-rtm": ("Regression to the mean from the entry criterion", 50,
                    "The change regression to the mean alone would produce after entry on the baseline "
                    "reading, over a grid of assumed population means and reliabilities (Barnett et al. "
                    "2005), and what it biases in this design."),
}


@dataclass(frozen=True)
class Context:
    design: str
    arms: list[str]
    control_arm: str | None
    seed: int
    quick: bool = False
    level: float = 0.95
    """Two-sided confidence level of every interval (study.toml's confidence_level, or --level)."""


@dataclass(frozen=True)
class Draft:
    """A result and the comment to the authors it calls for (None when it calls for none)."""

    result: CheckResult
    evidence: str = ""
    request: str = ""


def _result(check_id: str, spec: SummaryOutcome, verdict: Verdict, headline: str, **kw) -> CheckResult:
    return CheckResult(check_id=check_id, check_title=CHECKS[check_id][0], outcome=spec.param,
                       outcome_label=spec.display_name, verdict=verdict, headline=headline, **kw)


def not_assessable(check_id: str, spec: SummaryOutcome, reason: str) -> Draft:
    return Draft(_result(check_id, spec, Verdict.NOT_ASSESSABLE, f"Not assessable: {reason}.", reason=reason))


def _worst(verdicts) -> Verdict:
    order = (Verdict.SOUND, Verdict.CAUTION, Verdict.UNSUPPORTED)
    vs = [v for v in verdicts if v in order]
    return max(vs, key=order.index) if vs else Verdict.NOT_ASSESSABLE


def _sd_gap(gap: float) -> str:
    """A gap in SDs at two fixed decimals: agreement to rounding reads 0.00, never as 7.28e-17."""
    return f"{gap:.2f}"


def _pct(ratio: float) -> str:
    return f"{100 * (ratio - 1):.0f}%"


@dataclass(frozen=True)
class Pooled:
    n: int
    sd_b: float
    sd_f: float
    r: float | None
    sd_c: float | None
    df: int


def pooled(arms: list[ArmSummary]) -> Pooled:
    """Pooled within-arm SDs and correlation (None when some arm lets no correlation be computed)."""
    ns = [a.n for a in arms]
    sd_b = sf.pooled_sd([a.sd["baseline"] for a in arms], ns)
    sd_f = sf.pooled_sd([a.sd["followup"] for a in arms], ns)
    r = None
    if all(a.r is not None for a in arms):
        r = sf.pooled_correlation([a.r for a in arms], [a.sd["baseline"] for a in arms],
                                  [a.sd["followup"] for a in arms], ns)
    sd_c = None if r is None else sf.change_sd(sd_b, sd_f, r)
    return Pooled(sum(ns), sd_b, sd_f, r, sd_c, max(sum(ns) - len(arms), 2))


# ---------------------------------------------------------------------------------- consistency


def consistency(spec: SummaryOutcome, arms: list[ArmSummary], ctx: Context) -> Draft:
    cid = "summary-consistency"
    subs, ests, problems = [], [], []
    for a in arms:
        v = a.values
        if a.r is not None:
            lo, hi = sf.fisher_interval(a.r, a.n, ctx.level)
            ests.append(Estimate(f"Pre-post correlation, {a.arm}", a.r, lo, hi,
                                 note=a.sources.get("r", ""), by_arm=True,
                                 key=f"{cid}.correlation.arm-{arms.index(a) + 1}", arm=a.arm))
        if v["r_prepost"] is not None and v["sd_change"] is not None:
            implied = sf.implied_correlation(a.sd["baseline"], a.sd["followup"], v["sd_change"])
            gap = abs(implied - v["r_prepost"])
            verdict = Verdict.CAUTION if gap > AGREE_R else Verdict.SOUND
            subs.append(SubFinding(f"r-{a.arm}", f"Does the reported correlation match the SDs ({a.arm})?", verdict,
                                   f"reported r = {fmt(v['r_prepost'])}, implied by the three SDs "
                                   f"{fmt(implied)} (agreement within {AGREE_R:g}, a convention)", by_arm=True))
            if verdict is Verdict.CAUTION:
                problems.append(f"in arm {a.arm} the reported correlation {fmt(v['r_prepost'])} does not match "
                                f"the {fmt(implied)} implied by the SDs of baseline, follow-up and change")
        if v["mean_change"] is not None and "reported" in a.sources["baseline"] and "reported" in a.sources["followup"]:
            diff = a.mean["followup"] - a.mean["baseline"]
            scale = a.sd_change or a.sd["baseline"]
            gap = abs(v["mean_change"] - diff) / scale
            verdict = Verdict.CAUTION if gap > AGREE_SD else Verdict.SOUND
            subs.append(SubFinding(f"change-{a.arm}", f"Is the mean change the difference of the means ({a.arm})?",
                                   verdict, f"mean change {fmt(v['mean_change'])} against follow-up minus baseline "
                                   f"{fmt(diff)}: {_sd_gap(gap)} SD apart (agreement within {AGREE_SD:g} SD, a "
                                   "convention)", by_arm=True))
            if verdict is Verdict.CAUTION:
                problems.append(f"in arm {a.arm} the mean change {fmt(v['mean_change'])} differs from follow-up "
                                f"minus baseline ({fmt(diff)}) by {_sd_gap(gap)} SD, so the two visits may describe "
                                "different participants (completers only at follow-up?)")
        if v["sd_change"] is not None and v["change_lower"] is not None and v["change_upper"] is not None:
            from_ci = sf.se_from_ci(v["change_lower"], v["change_upper"]) * math.sqrt(a.n)
            gap = abs(from_ci / v["sd_change"] - 1)
            verdict = Verdict.CAUTION if gap > AGREE_SD_RATIO else Verdict.SOUND
            subs.append(SubFinding(f"ci-{a.arm}", f"Does the CI of the mean change match its SD ({a.arm})?", verdict,
                                   f"SD of change {fmt(v['sd_change'])}; implied by the CI and n: {fmt(from_ci)} "
                                   f"({100 * gap:.0f}% apart; agreement within {100 * AGREE_SD_RATIO:.0f}%, a "
                                   "convention)", by_arm=True))
            if verdict is Verdict.CAUTION:
                problems.append(f"in arm {a.arm} the CI of the mean change implies an SD of change of "
                                f"{fmt(from_ci)}, not the {fmt(v['sd_change'])} reported")
    effect = _effect_check(spec, arms, ctx)
    if effect is not None:
        subs.append(effect[0])
        if effect[1]:
            problems.append(effect[1])
    if not subs and not ests:
        return not_assessable(cid, spec, "the paper gives no number twice (no SD of change, correlation, "
                                         "interval or effect to cross-check against the means and SDs)")
    verdict = _worst([s.verdict for s in subs]) if subs else Verdict.NOT_ASSESSABLE
    rs = [e for e in ests]
    r_text = "; ".join(f"{e.name.split(', ', 1)[1]} {fmt(e.value)} ({fmt(e.lower)} to {fmt(e.upper)})" for e in rs)
    agree = sum(s.verdict is Verdict.SOUND for s in subs)
    headline = (f"Pre-post correlation {r_text}; " if rs else "No correlation can be computed; ") + \
        (f"{agree} of {len(subs)} cross-checks agree." if subs else
         "no number is given twice, so agreement cannot be checked.")
    res = _result(cid, spec, verdict, headline, subfindings=subs, estimates=ests,
                  references=["cochrane-handbook-6"],
                  reason="" if subs else "no number is given twice to cross-check",
                  method="r = (SDb^2 + SDf^2 - SDc^2) / (2 SDb SDf) per arm, "
                         f"{interval_words('Fisher-z', ctx.level)}; SD of change "
                         "from an SE as SE x sqrt(n) and from a 95% CI as sqrt(n) x width / 3.92.")
    if verdict is not Verdict.CAUTION:
        return Draft(res)
    return Draft(res, _sentence("; ".join(problems)),
                 "Please state which participants each summary describes (all randomised, completers), give the "
                 "SD of change or the pre-post correlation for each arm, and reconcile the numbers above.")


def _effect_check(spec: SummaryOutcome, arms: list[ArmSummary], ctx: Context):
    """Does the reported effect lie where the summaries put it under the reported analysis?"""
    if len(arms) != 2:
        return None
    treated = arms[1]
    v = treated.values
    if v["effect"] is None:
        return None
    c, t = arms
    analysis = spec.reported_analysis
    if analysis == "change":
        dc = lambda a: a.values["mean_change"] if a.values["mean_change"] is not None else a.mean["followup"] - a.mean["baseline"]
        implied, what = dc(t) - dc(c), "difference in mean change"
    elif analysis == "follow-up-only":
        implied, what = t.mean["followup"] - c.mean["followup"], "difference in follow-up means"
    elif analysis == "follow-up-adjusted":
        p = pooled(arms)
        if p.r is None:
            return None
        implied = sf.implied_ancova([c.mean["baseline"], t.mean["baseline"]], [c.mean["followup"], t.mean["followup"]],
                                    p.sd_b, p.sd_f, p.r, [c.n, t.n]).effect
        what = "ANCOVA effect implied by the summaries"
    elif analysis == "percent-change":
        implied = (sf.percent_change_of_means(t.mean["baseline"], t.mean["followup"])
                   - sf.percent_change_of_means(c.mean["baseline"], c.mean["followup"]))
        what = "difference in the percent change of the means (not the mean of percent changes)"
    else:
        return None
    lo, hi = v["effect_lower"], v["effect_upper"]
    if lo is None or hi is None:
        gap = abs(implied - v["effect"]) / (treated.sd_change or treated.sd["followup"])
        ok = gap <= AGREE_SD
        evidence = (f"reported effect {fmt(v['effect'])}; {what} {fmt(implied)} ({_sd_gap(gap)} SD apart, no interval "
                    "reported)")
    else:
        ok = lo <= implied <= hi
        evidence = f"reported effect {fmt(v['effect'])} ({fmt(lo)} to {fmt(hi)}); {what} {fmt(implied)}"
    verdict = Verdict.SOUND if ok else Verdict.CAUTION
    sub = SubFinding("effect", "Does the reported effect follow from the reported summaries?", verdict,
                     evidence, by_arm=True)
    problem = "" if ok else (f"the reported effect {fmt(v['effect'])} does not follow from the arm summaries "
                             f"({what}: {fmt(implied)})")
    return sub, problem


# ---------------------------------------------------------------------------------- efficiency


def _graded_cost(fn, p: Pooled, ctx: Context, approx: bool):
    """(interval, verdict) of a sample-size ratio ``fn`` from the pooled summaries: the seeded Wishart
    interval at the audit's level, graded by :func:`_grade_ratio`; a first-order approximation
    (``approx``) is graded at most caution."""
    iv = sf.simulated_interval(fn, p.sd_b, p.sd_f, p.r, p.df, ctx.seed, QUICK_DRAWS if ctx.quick else DRAWS,
                               ctx.level)
    verdict = _grade_ratio(iv.value, iv.lower)
    return iv, (Verdict.CAUTION if approx and verdict is Verdict.UNSUPPORTED else verdict)


def _grade_ratio(value: float, lower: float | None) -> Verdict:
    if lower is not None and lower > MATERIAL_RATIO:
        return Verdict.UNSUPPORTED
    return Verdict.CAUTION if value > MATERIAL_RATIO else Verdict.SOUND


ANALYSIS_TEXT = {"change": "change from baseline", "follow-up-only": "follow-up alone",
                 "percent-change": "percent change from baseline", "responder": "a responder rule",
                 "follow-up-adjusted": "ANCOVA of follow-up on baseline"}


def efficiency(spec: SummaryOutcome, arms: list[ArmSummary], ctx: Context) -> Draft:
    cid = "summary-efficiency"
    analysis = spec.reported_analysis
    if len(arms) != 2:
        return not_assessable(cid, spec, "the comparison of analyses needs two randomised arms")
    p = pooled(arms)
    c, t = arms
    mean_b = (c.n * c.mean["baseline"] + t.n * t.mean["baseline"]) / p.n
    mean_f = (c.n * c.mean["followup"] + t.n * t.mean["followup"]) / p.n
    if analysis == "percent-change":
        fn = lambda r, b, f: float(sf.percent_change_ratio(r, b, f, mean_b, mean_f))
        approx = True
    else:
        fn = lambda r, b, f: float(sf.ratio_to_ancova(analysis, r, b, f))
        approx = False
    grid = Table("r-grid", f"Sample-size ratio of {ANALYSIS_TEXT[analysis]} to ANCOVA (participants needed per "
                 "participant of ANCOVA), by pre-post correlation", ["pre-post correlation", "sample-size ratio", "extra participants (%)"],
                 [[r, fn(r, p.sd_b, p.sd_f), 100 * (fn(r, p.sd_b, p.sd_f) - 1)] for r in R_GRID],
                 note=f"Pooled within-arm SDs: baseline {fmt(p.sd_b)}, follow-up {fmt(p.sd_f)}.")
    ests, subs = [], []
    refs = ["frison-pocock-1992"] + (["vickers-2001"] if approx else [])
    if p.r is None:
        lo_r, hi_r = PLAUSIBLE_R
        span = [fn(r, p.sd_b, p.sd_f) for r in (lo_r, hi_r)]
        verdict = Verdict.CAUTION if max(span) > MATERIAL_RATIO else Verdict.SOUND
        headline = (f"With no correlation reported or computable, {ANALYSIS_TEXT[analysis]} needs "
                    f"{_pct(min(span))} to {_pct(max(span))} more participants than ANCOVA for r from "
                    f"{lo_r:g} to {hi_r:g}; no interval can be computed, so the grade is at most caution.")
        evidence = (f"at r = {lo_r:g} to {hi_r:g}, {ANALYSIS_TEXT[analysis]} needs {_pct(min(span))} to "
                    f"{_pct(max(span))} more participants than ANCOVA (pooled SDs {fmt(p.sd_b)} and {fmt(p.sd_f)})")
        subs.append(SubFinding("cost", f"What does {ANALYSIS_TEXT[analysis]} cost against ANCOVA (material above "
                               f"{_pct(MATERIAL_RATIO)})?", verdict, evidence + "; no correlation, so no interval"))
    else:
        iv, verdict = _graded_cost(fn, p, ctx, approx)
        ests.append(Estimate("Sample-size ratio against ANCOVA", iv.value, iv.lower, iv.upper, key=f"{cid}.ratio",
                             note=f"pooled r = {fmt(p.r)}; {interval_words('', ctx.level)} by Wishart simulation of the SDs and r "
                                  f"({iv.draws} draws, seed {iv.seed})" + ("; first-order approximation" if approx else "")))
        evidence = (f"{ANALYSIS_TEXT[analysis]} needs {_pct(iv.value)} more participants than ANCOVA "
                    f"({level_label(ctx.level)} interval {_pct(iv.lower)} to {_pct(iv.upper)}) at pooled r = {fmt(p.r)}")
        headline = (evidence[0].upper() + evidence[1:]
                    + (f"; material above {_pct(MATERIAL_RATIO)}." if verdict is not Verdict.SOUND else
                       f"; below the {_pct(MATERIAL_RATIO)} threshold." if iv.upper <= MATERIAL_RATIO else
                       f"; the interval reaches above {_pct(MATERIAL_RATIO)} only at its upper end."))
        if approx:
            headline += " (First-order approximation for percent change: graded at most caution.)"
        subs.append(SubFinding("cost", f"What does {ANALYSIS_TEXT[analysis]} cost against ANCOVA (material above "
                               f"{_pct(MATERIAL_RATIO)})?", verdict, evidence))
        z_level = sf.normal_quantile(ctx.level)
        anc = sf.implied_ancova([c.mean["baseline"], t.mean["baseline"]], [c.mean["followup"], t.mean["followup"]],
                                p.sd_b, p.sd_f, p.r, [c.n, t.n])
        ests.append(Estimate(f"ANCOVA effect implied by the summaries ({t.arm} minus {c.arm})", anc.effect,
                             anc.effect - z_level * anc.se, anc.effect + z_level * anc.se, unit=spec.unit,
                             note=f"beta = {fmt(anc.beta)}, approximate SE {fmt(anc.se)}", by_arm=True,
                             key=f"{cid}.ancova-effect.contrast-1", arm=f"{t.arm} minus {c.arm}"))
        dchg = (t.mean["followup"] - t.mean["baseline"]) - (c.mean["followup"] - c.mean["baseline"])
        se_chg = p.sd_c * math.sqrt(1 / c.n + 1 / t.n)
        ests.append(Estimate(f"Change-score effect from the summaries ({t.arm} minus {c.arm})", dchg,
                             dchg - z_level * se_chg, dchg + z_level * se_chg, unit=spec.unit,
                             note=f"SE {fmt(se_chg)} from the pooled SD of change", by_arm=True,
                             key=f"{cid}.change-effect.contrast-1", arm=f"{t.arm} minus {c.arm}"))
    res = _result(cid, spec, verdict, headline, subfindings=subs, estimates=ests, tables=[grid],
                  references=refs,
                  method="var(change) = SDb^2 + SDf^2 - 2 r SDb SDf, var(ANCOVA) = SDf^2 (1 - r^2), var(follow-up) "
                         "= SDf^2 (pooled within-arm SDs); percent change linearised as follow-up minus (mf/mb) "
                         "baseline. ANCOVA effect = (mf1 - mf0) - beta (mb1 - mb0), beta = r SDf / SDb.")
    if verdict is Verdict.SOUND:
        return Draft(res)
    ask = ("the ANCOVA of the follow-up value with baseline as covariate (on the log scale for a positive, "
           "skewed variable), with its estimate and CI" if analysis == "percent-change" else
           "the ANCOVA of the follow-up value with baseline as covariate, with its estimate and CI, as the "
           "primary or a sensitivity analysis")
    if p.r is None:
        ask += ", and the pre-post correlation or the SD of change in each arm"
    return Draft(res, _sentence(evidence), f"Please report {ask}.")


# ---------------------------------------------------------------------------------- responder


def responder(spec: SummaryOutcome, arms: list[ArmSummary], ctx: Context) -> Draft:
    cid = "summary-responder"
    rule = spec.responder
    p = pooled(arms)
    mean_b = sum(a.n * a.mean["baseline"] for a in arms) / p.n
    mean_c = sum(a.n * (a.mean["followup"] - a.mean["baseline"]) for a in arms) / p.n
    approx = rule.basis == "percent-change"
    cut = rule.threshold / 100 * mean_b if approx else rule.threshold
    fn = lambda r, b, f: sf.responder_ratio(r, b, f, cut, mean_c)
    refs = ["altman-royston-2006", "frison-pocock-1992"]
    rule_text = (f"{rule.basis} {'at least' if rule.direction == 'at-least' else 'at most'} {rule.threshold:g}"
                 + ("%" if approx else ""))
    subs, ests, tables = [], [], []
    if p.r is None:
        span = [fn(r, p.sd_b, p.sd_f) for r in PLAUSIBLE_R]
        verdict = Verdict.CAUTION if max(span) > MATERIAL_RATIO else Verdict.SOUND
        evidence = (f"responders ({rule_text}) need {_pct(min(span))} to {_pct(max(span))} more participants than "
                    f"ANCOVA for r from {PLAUSIBLE_R[0]:g} to {PLAUSIBLE_R[1]:g}; no correlation, so no interval")
        headline = evidence[0].upper() + evidence[1:] + "; graded at most caution."
    else:
        iv, verdict = _graded_cost(fn, p, ctx, approx)
        z = (cut - mean_c) / p.sd_c
        ests.append(Estimate("Sample-size ratio, responders against ANCOVA", iv.value, iv.lower, iv.upper, key=f"{cid}.ratio",
                             note=f"cut {fmt(cut)} on change, z = {fmt(z)}; "
                                  f"{interval_words('Wishart-simulation', ctx.level, 'Wishart simulation')} ({iv.draws} draws, "
                                  f"seed {iv.seed})"))
        eff = sf.simulated_interval(lambda r, b, f: sf.dichotomisation_efficiency((cut - mean_c) / sf.change_sd(b, f, r)),
                                    p.sd_b, p.sd_f, p.r, p.df, ctx.seed, QUICK_DRAWS if ctx.quick else DRAWS,
                                    level=ctx.level)
        ests.append(Estimate("Efficiency of dichotomising change at the cut", eff.value, eff.lower, eff.upper,
                             note=f"normal change; 2/pi = 0.637 at the median; {interval_words('', ctx.level)} from the same Wishart draws "
                                  "(mean change held at its reported value)", key=f"{cid}.dichotomisation-efficiency"))
        evidence = (f"counting responders ({rule_text}) needs {_pct(iv.value)} more participants than ANCOVA "
                    f"({level_label(ctx.level)} interval {_pct(iv.lower)} to {_pct(iv.upper)}); the cut lies {fmt(abs(z))} SD from the "
                    f"mean change")
        headline = evidence[0].upper() + evidence[1:] + "."
        if approx:
            headline += " (A percent-change cut converted at the mean baseline: graded at most caution.)"
    subs.append(SubFinding("cost", f"What does the responder rule cost (material above {_pct(MATERIAL_RATIO)})?",
                           verdict, evidence))
    if spec.scale == "ordinal":
        subs.append(SubFinding("ordinal", "Is a change of an ordinal score a measured amount?", Verdict.CAUTION,
                               "a change on an ordinal scale counts every step as the same amount; whether the "
                               "rule's cut means the same at every starting level cannot be judged from summaries"))
        verdict = _worst([verdict, Verdict.CAUTION])
    res = _result(cid, spec, verdict, headline, subfindings=subs, estimates=ests, tables=tables, references=refs,
                  method="Ratio = 1 / (E(z) x e_change), E(z) = phi(z)^2 / (Phi(z)(1 - Phi(z))), z = (cut - mean "
                         "change) / SD of change, e_change = SDf^2 (1 - r^2) / var(change).")
    if verdict is Verdict.SOUND:
        return Draft(res)
    return Draft(res, _sentence(evidence), "Please report the continuous analysis (ANCOVA of follow-up on baseline) beside "
                 "the responder analysis, and justify the cut.")


# ---------------------------------------------------------------------------------- shape


QUARTILE_SKEW = 0.2
"""Bowley's quartile skewness beyond this (either sign) reads as a skewed distribution where only
medians and quartiles are reported (a convention of this tool, no source)."""


def _shape_rows(spec: SummaryOutcome, arms: list[ArmSummary]):
    """Per arm and visit: mean, SD, (mean - lower)/SD, SDs to the nearer bound, quartile skewness,
    and whether the mean and SD were reported (else estimated from quartiles)."""
    lo, hi = spec.lower_bound, spec.upper_bound
    for a in arms:
        for visit, word in (("baseline", "baseline"), ("followup", "follow-up")):
            m, s = a.mean[visit], a.sd[visit]
            ab = None if lo is None else sf.mean_to_sd_above_bound(m, s, lo)
            dist = sf.distance_to_bound_in_sd(m, s, lo, hi)
            q = [a.values[f"q1_{visit}"], a.values[f"median_{visit}"], a.values[f"q3_{visit}"]]
            bowley = sf.quartile_skewness(*q) if None not in q else None
            yield a, word, m, s, ab, (None if math.isinf(dist) else dist), bowley, \
                a.sources[visit].startswith("reported")


NO_R_NOTE = ("no interval: the paper reports no pre-post correlation and its SDs imply none, so the covariance of "
             "the two means is unknown")


_PERCENT_METHOD = ("; the mean of percent changes by the delta method, E[f/b] ~ mf/mb - cov/mb^2 + mf var(b)/mb^3; "
                   "the percent change of the means 100 (mf/mb - 1) with a delta-method {level} interval, "
                   "SE = (100/mb) sqrt((SDf^2 + k^2 SDb^2 - 2 k r SDb SDf)/n), k = mf/mb, where the pre-post "
                   "correlation r is reported or implied by the SDs")


def _percent_change_of_means(cid: str, a: ArmSummary, index: int, level: float) -> Estimate:
    """One arm's percent change of the means, with its delta-method interval when the pre-post
    correlation is reported or implied (the covariance of the two means needs it), else none, said so."""
    name, key = f"Percent change of the means, {a.arm}", f"{cid}.percent-change-of-means.arm-{index}"
    if a.r is None:
        return Estimate(name, sf.percent_change_of_means(a.mean["baseline"], a.mean["followup"]), unit="%",
                        note=NO_R_NOTE, by_arm=True, key=key, arm=a.arm)
    pc = sf.percent_change_of_means_interval(a.mean["baseline"], a.mean["followup"], a.sd["baseline"],
                                             a.sd["followup"], a.r, a.n, level)
    return Estimate(name, pc.value, pc.lower, pc.upper, unit="%", by_arm=True, key=key, arm=a.arm,
                    note=f"delta method, n = {a.n}, r = {fmt(a.r)} ({a.sources.get('r', 'reported')})")


def shape(spec: SummaryOutcome, arms: list[ArmSummary], ctx: Context) -> Draft:
    cid = "summary-shape"
    if spec.lower_bound is None and spec.upper_bound is None:
        return not_assessable(cid, spec, "no bound is declared (bounds or levels), so means and SDs say nothing "
                                         "about skewness or floors")
    rows, subs, problems, asks = [], [], [], []
    ab_low, near, bowley_high = [], [], []
    for a, word, m, s, ab, dist, bowley, reported in _shape_rows(spec, arms):
        rows.append([a.arm, word, m, s, ab, dist, bowley, "reported" if reported else "from quartiles"])
        if reported and ab is not None and ab < sf.SKEW_RATIO:
            ab_low.append((ab, f"{a.arm} {word}"))
        if reported and dist is not None and dist < NEAR_BOUND_SD:
            near.append((dist, f"{a.arm} {word}"))
        if bowley is not None and abs(bowley) > QUARTILE_SKEW:
            bowley_high.append((bowley, f"{a.arm} {word}"))
    table = Table("shape", "Means and SDs against the declared bounds", ["arm", "visit", "mean", "SD",
                  "(mean - lower bound) / SD", "SDs to nearer bound", "quartile skewness", "mean and SD"], rows,
                  by_arm=True,
                  note="Altman and Bland (1996): for a variable bounded below, (mean - bound) / SD under 2 suggests "
                       "skew (judged only on reported means and SDs). Quartile skewness (Bowley) where medians and "
                       "quartiles are given; means and SDs estimated from quartiles (Wan et al. 2014) assume normality.")
    any_reported = any(r[-1] == "reported" for r in rows)
    if spec.lower_bound is not None:
        if ab_low:
            worst = min(ab_low)
            ev = (f"{len(ab_low)} of {len(rows)} arm-visits have a mean under 2 SD above the lower bound "
                  f"{spec.lower_bound:g} (lowest {fmt(worst[0])} SD, {worst[1]})")
            problems.append(ev.replace("arm-visits have", "arm-visit means lie").replace("a mean under", "under")
                            + ": the distribution is probably skewed")
        else:
            ev = "no evidence of skew: every reported mean lies at least 2 SD above the lower bound" if any_reported \
                else "no reported mean and SD to judge (quartiles only)"
        subs.append(SubFinding("skew", "Do the means and SDs imply skew (mean under 2 SD above the lower bound)?",
                               Verdict.CAUTION if ab_low else Verdict.SOUND if any_reported else
                               Verdict.NOT_ASSESSABLE, ev))
    if any(r[6] is not None for r in rows):
        ev = (f"quartile skewness beyond {QUARTILE_SKEW:g} in {len(bowley_high)} arm-visits, largest "
              f"{fmt(max(bowley_high, key=lambda t: abs(t[0]))[0])}" if bowley_high else
              f"no evidence of skew: quartile skewness within {QUARTILE_SKEW:g} everywhere")
        subs.append(SubFinding("quartiles", "Do the medians and quartiles imply skew?",
                               Verdict.CAUTION if bowley_high else Verdict.SOUND, ev))
        if bowley_high:
            problems.append("the medians sit off-centre in their quartiles (" + ev + ")")
    if (ab_low or bowley_high) and spec.scale != "ordinal":
        asks.append("report the analysis on the log scale (ANCOVA of log follow-up on log baseline, effect as a ratio "
                    "of geometric means) and medians with quartiles by arm")
    ev = (f"{len(near)} arm-visit means lie within {NEAR_BOUND_SD:g} SD of a bound (nearest {fmt(min(near)[0])} SD, "
          f"{min(near)[1]})" if near else f"no evidence of a floor or ceiling: no reported mean within "
          f"{NEAR_BOUND_SD:g} SD of a bound" if any_reported else "no reported mean and SD to judge (quartiles only)")
    subs.append(SubFinding("bound", f"Are the means within {NEAR_BOUND_SD:g} SD of a bound (a floor or ceiling)?",
                           Verdict.CAUTION if near else Verdict.SOUND if any_reported else Verdict.NOT_ASSESSABLE, ev))
    if near:
        problems.append(ev + ": change is limited for participants who start near the bound")
        asks.append("report the number of participants at the bound at each visit")
    ests = []
    if spec.reported_analysis == "percent-change":
        gaps = []
        for a in arms:
            ests.append(_percent_change_of_means(cid, a, arms.index(a) + 1, ctx.level))
            if a.r is None:
                continue
            pm = ests[-1].value
            mp = sf.mean_percent_change_second_order(a.mean["baseline"], a.mean["followup"], a.sd["baseline"],
                                                     a.sd["followup"], a.r)
            ests.append(Estimate(f"Mean of the percent changes (second-order approximation), {a.arm}", mp,
                                 unit="%", by_arm=True, note="an approximation from the means and SDs: no interval",
                                 key=f"{cid}.mean-percent-change.arm-{arms.index(a) + 1}", arm=a.arm))
            gaps.append(abs(mp - pm))
        if gaps:
            verdict = Verdict.CAUTION if max(gaps) > PERCENT_GAP else Verdict.SOUND
            ev = (f"the mean of the percent changes and the percent change of the means differ by up to "
                  f"{fmt(max(gaps))} percentage points (second-order approximation; material beyond "
                  f"{PERCENT_GAP:g}, a convention)")
            subs.append(SubFinding("percent", "Does the mean of percent changes differ from the percent change of "
                                   "the means?", verdict, ev, by_arm=True))
            if verdict is Verdict.CAUTION:
                problems.append(ev)
                asks.append("state whether the reported percent change is the mean of the participants' percent changes "
                            "or the percent change of the arm means")
    if spec.scale == "ordinal" and spec.reported_analysis in ("change", "percent-change"):
        shift = recoding_shift(spec.levels)
        if spec.reported_analysis == "percent-change":
            moved = []
            for a in arms:
                p0, p1 = sf.percent_change_under_recoding(a.mean["baseline"], a.mean["followup"], shift)
                moved.append(abs(p1 - p0) / max(abs(p0), 1e-12))
            verdict = Verdict.CAUTION if max(moved) > RECODE_CHANGE else Verdict.SOUND
            ev = (f"coding the levels from {spec.levels[0] + shift:g} instead of {spec.levels[0]:g} moves the percent "
                  f"change of the means by up to {100 * max(moved):.0f}% of its value")
            subs.append(SubFinding("coding", "Does the percent change depend on how the ordinal levels are coded?",
                                   verdict, ev))
            if verdict is Verdict.CAUTION:
                problems.append(ev)
        room = [(a.arm, a.mean["baseline"] - spec.levels[0], spec.levels[-1] - a.mean["baseline"]) for a in arms]
        subs.append(SubFinding("interval", "Does subtracting ordinal scores measure an amount?", Verdict.CAUTION,
                               f"the scale has {len(spec.levels)} ordered levels; a change of one step is counted the "
                               "same at every level, which summaries cannot check; room to move from the mean "
                               "baseline: " + "; ".join(f"{arm} down {fmt(d)}, up {fmt(u)} levels" for arm, d, u in room),
                               by_arm=True))
        problems.append(f"a change of a {len(spec.levels)}-level ordinal score counts every step as the same amount")
        asks.append("report a proportional-odds analysis of the follow-up score adjusted for baseline")
    verdict = _worst([s.verdict for s in subs])
    if problems:
        headline = (_sentence("; ".join(problems))
                    + " None of these judgements has an interval, so the grade is at most caution.")
    else:
        headline = "No evidence of skew or of a floor or ceiling in the reported means, SDs and quartiles."
    res = _result(cid, spec, verdict, headline, subfindings=subs, estimates=ests, tables=[table],
                  references=["altman-bland-1996", "wan-2014"] + (["vickers-2001"] if spec.reported_analysis ==
                                                                 "percent-change" else []),
                  method="(mean - lower bound) / SD < 2 suggests skew (Altman and Bland 1996); a mean within 1 SD of "
                         "a bound suggests a floor or ceiling (convention); quartile skewness (q3 + q1 - 2 median) / "
                         "(q3 - q1)" + (_PERCENT_METHOD.format(level=level_label(ctx.level))
                                        if spec.reported_analysis == "percent-change" else "") + ".")
    if verdict is Verdict.SOUND:
        return Draft(res)
    return Draft(res, _sentence("; ".join(problems)), "Please " + "; and ".join(asks) + ".")


def _sentence(text: str) -> str:
    """``text`` with a capital first letter and a closing full stop."""
    text = text.strip()
    return (text[:1].upper() + text[1:]).rstrip(".") + "." if text else text


# ---------------------------------------------------------------------------------- regression to the mean


def observed_change_interval(arm: ArmSummary, level: float = 0.95) -> tuple[float | None, float | None, str]:
    """t interval for an arm's mean change, mean +/- t(n - 1) SDc / sqrt(n), with SDc as reported or
    derived, else from the two SDs and the arm's correlation (sqrt(SDb^2 + SDf^2 - 2 r SDb SDf));
    (None, None, why) when neither is available."""
    from scipy import stats

    sd_c = arm.sd_change
    how = f"{interval_words('', level)} from the SD of change"
    if sd_c is None and arm.r is not None:
        sd_c, how = (sf.change_sd(arm.sd["baseline"], arm.sd["followup"], arm.r),
                     f"{interval_words('', level)} from the SDs and r")
    if sd_c is None or arm.n < 2:
        return None, None, "no interval: neither an SD of change nor a correlation is reported"
    mean = arm.mean["followup"] - arm.mean["baseline"]
    half = float(stats.t.ppf(0.5 + level / 2, arm.n - 1)) * sd_c / math.sqrt(arm.n)
    return mean - half, mean + half, f"{how} (t, {arm.n - 1} df)"


def rtm(spec: SummaryOutcome, arms: list[ArmSummary], ctx: Context) -> Draft:
    cid = "summary-rtm"
    e = spec.entry_criterion
    grid = sf.rtm_grid(e.assumed_mean, e.assumed_sd, e.reliability, e.lower, e.upper)
    shifts = [g[2] / e.assumed_sd for g in grid]
    largest = max(abs(s) for s in shifts)
    # signed, like the change in units beside it, so the two ranges read in the same direction
    sd_span = f"{fmt(min(shifts))} to {fmt(max(shifts))} population SDs"
    material = largest > MATERIAL_SD
    within = ctx.design == "single-arm" or spec.within_arm_claims
    rows = [[m, rel, v, v / e.assumed_sd] for m, rel, v in grid]
    table = Table("rtm-grid", f"Expected change from regression to the mean alone ({e.text})",
                  ["assumed population mean", "reliability", f"expected change{f' ({spec.unit})' if spec.unit else ''}",
                   "in population SDs"], rows,
                  note=f"Assumed population SD {e.assumed_sd:g}. A sensitivity grid under assumptions, not an interval.")
    control = next((a for a in arms if a.arm == ctx.control_arm), arms[0])
    observed = control.mean["followup"] - control.mean["baseline"]
    lo_v, hi_v = min(g[2] for g in grid), max(g[2] for g in grid)
    lo_o, hi_o, how = observed_change_interval(control, ctx.level)
    ests = [Estimate(f"Observed mean change, {control.arm}", observed, lo_o, hi_o, unit=spec.unit, by_arm=True,
                     key=f"{cid}.observed-change.control", arm=control.arm,
                     note=f"regression to the mean alone predicts {fmt(lo_v)} to {fmt(hi_v)}; {how}")]
    subs = [SubFinding("size", f"Is the expected shift material (beyond {MATERIAL_SD:g} population SD)?",
                       Verdict.CAUTION if material else Verdict.SOUND,
                       f"{sd_span} over the grid ({fmt(lo_v)} to {fmt(hi_v)} {spec.unit}); at most "
                       f"{fmt(largest)} SD in size".rstrip()),
            SubFinding("design", "What does it bias in this design?",
                       Verdict.CAUTION if material and within else Verdict.SOUND,
                       ("a single-arm before-after claim carries it in full" if ctx.design == "single-arm" else
                        "between randomised arms the contrast is not biased (both arms regress alike); it biases "
                        + BIASED_BY_RTM + (", and the paper draws conclusions from within-arm change"
                                           if spec.within_arm_claims else "")))]
    verdict = Verdict.CAUTION if material else Verdict.SOUND
    span = f"{fmt(lo_v)} to {fmt(hi_v)}{' ' + spec.unit if spec.unit else ''}"
    if material:
        headline = (f"Entry on {e.text} would by itself shift the baseline-to-follow-up mean by {span} "
                    f"({sd_span}) over the assumed grid; "
                    + ("this is a before-after design, which it biases in full" if ctx.design == "single-arm" else
                       "the randomised contrast is not biased, within-arm changes are")
                    + ". A grid, not an interval: graded at most caution.")
    else:
        headline = (f"Entry on {e.text} would shift the mean by at most {fmt(largest)} population SD over the assumed "
                    f"grid ({span}), below the {MATERIAL_SD:g} SD threshold.")
    res = _result(cid, spec, verdict, headline, subfindings=subs, estimates=ests, tables=[table],
                  references=["barnett-2005"],
                  method="RTM = -(1 - rho) sigma C(z), z = (c - mu) / sigma, C(z) = phi(z)/(1 - Phi(z)) for a one-sided "
                         "entry (Barnett et al. 2005); for a window the doubly truncated normal mean, sigma (phi(a) - "
                         "phi(b)) / (Phi(b) - Phi(a)), times -(1 - rho).")
    if verdict is Verdict.SOUND:
        return Draft(res)
    request = ("Please present the comparison between randomised arms as the evidence of effect, not the change "
               "within an arm, and report the entry readings and a second baseline reading if taken."
               if ctx.design != "single-arm" else
               "Please discuss regression to the mean explicitly: a before-after change after entry on this reading "
               "is expected without any effect; a concurrent control or a second baseline reading would separate them.")
    share = ""
    if lo_o is not None and lo_o <= 0 <= hi_o:
        share = (", an interval that includes no change, so the share of it regression to the mean could explain "
                 "cannot be bounded")
    elif observed != 0 and all(g[2] / observed > 0 for g in grid):
        ends = sorted(abs(g[2] / observed) for g in grid)
        share = (f", so regression to the mean alone could account for {100 * ends[0]:.0f}% to {100 * ends[-1]:.0f}% "
                 "of it" if ends[-1] <= 1 else f": regression to the mean alone predicts {fmt(ends[0])} to "
                 f"{fmt(ends[-1])} times that change")
    return Draft(res, f"Regression to the mean alone predicts a change of {span} after entry on {e.text}; the "
                      f"{control.arm} arm changed by {fmt(observed)}"
                      + ("" if lo_o is None else f" ({level_label(ctx.level)} interval {fmt(lo_o)} to {fmt(hi_o)})")
                      + f"{share}.", request)


def applicable(spec: SummaryOutcome, design: str) -> list[tuple[str, object]]:
    """The questions that apply to an outcome, in report order."""
    out = [("summary-consistency", consistency)]
    if spec.reported_analysis in ("change", "follow-up-only", "percent-change") and design == "parallel":
        out.append(("summary-efficiency", efficiency))
    if spec.reported_analysis == "responder" and spec.responder is not None:
        out.append(("summary-responder", responder))
    out.append(("summary-shape", shape))
    if spec.entry_criterion is not None:
        out.append(("summary-rtm", rtm))
    return out
