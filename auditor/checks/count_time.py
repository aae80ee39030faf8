"""Counts over unequal observation time: is comparing counts the same as comparing rates?

A count outcome (exacerbations, rescue-medication uses, lesions) is accumulated over some time. Every
planned analysis that subtracts, divides or adjusts the counts themselves assumes that time was the
same for everyone. When it was not, the count mixes the rate with the time observed; when the time
differs between arms (one arm stops its diary early, say) the treatment comparison is biased. With
an observation-time column declared (``exposure`` in study.toml) this check measures how unequal
the times are, whether they differ between arms, whether counts grow in proportion to time, and how
far the count comparison moves from the rate comparison fitted on the same participants.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..references import add_reference, cite
from ..results import Figure, SubFinding, Table, Verdict, interval_words
from ..stats.effects import NO_ARMS, ArmCoding, arm_coding
from ..stats.rates import (TimeSpread, coefficient_shift, fit_log_linear, group_times, log_baseline_rate,
                           time_spread, times_differ_by_arm)
from .common import arms_present, estimate, fmt, fmt_ci, fmt_p, result, thin
from .registry import CheckContext, NotAssessable, register

CHECK_ID = "count-time"
TITLE = "Counts over unequal observation time"
MIN_PARTICIPANTS = 10
MATERIAL_RATIO = 1.10
"""A count ratio that differs from the rate ratio by this factor or more is material (a convention of
this tool; the default of ``count_ratio`` in study.toml's ``[thresholds]``). Unsupported needs the
whole interval of that factor beyond it."""
ARM_TIME_ALPHA = 0.05

add_reference("cameron-trivedi-2013", "Cameron AC, Trivedi PK. Regression Analysis of Count Data, 2nd ed. "
                                      "Cambridge University Press, 2013.")
add_reference("wedderburn-1974", "Wedderburn RWM. Quasi-likelihood functions, generalized linear models, "
                                 "and the Gauss-Newton method. Biometrika 1974;61:439-447.")
add_reference("stefanski-boos-2002", "Stefanski LA, Boos DD. The calculus of M-estimation. Am Stat "
                                     "2002;56:29-38.")
add_reference("kruskal-wallis-1952", "Kruskal WH, Wallis WA. Use of ranks in one-criterion variance "
                                     "analysis. J Am Stat Assoc 1952;47:583-621.")


def _applies(spec, design) -> bool:
    return spec.scale == "count"


def _participants(data):
    """Participants with a follow-up count, its observation time and an arm (and the baseline count
    with its time, when the outcome has a baseline)."""
    if not data.spec.exposure:
        raise NotAssessable("no observation time is declared for this count (set exposure to the "
                            "visit-file column holding each record's time); if the time over which "
                            "counts were made varied, they should be analysed as rates")
    need = ["followup", "followup_time", "arm"]
    if "baseline" in data.frame.columns:
        need += ["baseline", "baseline_time"]
    df = data.frame.dropna(subset=need).reset_index(drop=True)
    if len(df) < MIN_PARTICIPANTS:
        raise NotAssessable(f"only {len(df)} participants have a follow-up count with its observation "
                            f"time (at least {MIN_PARTICIPANTS} are needed)")
    return df


def _design(df, arms, control, with_baseline: bool) -> tuple[dict[str, np.ndarray], ArmCoding]:
    """The rate model's columns (log baseline rate, then the arm indicators) and the arms' coding."""
    cols = {}
    if with_baseline:
        cols["log baseline rate"] = log_baseline_rate(df["baseline"], df["baseline_time"])
    coding = arm_coding(df["arm"].to_numpy(), arms, control) if len(arms) > 1 else NO_ARMS
    cols.update(coding.columns)
    return cols, coding


def _scaling(df, cols, ctx):
    """The log-linear model without offset and with log time as a covariate: its coefficient of log
    time is 1 when counts grow in proportion to time (the rate model's assumption)."""
    return fit_log_linear(df["followup"], {"log observation time": np.log(df["followup_time"]), **cols},
                          level=ctx.level)


def arm_times(df, arms, pooled_median: float) -> list[tuple[str, object]]:
    """Each arm's observation times (:func:`auditor.stats.rates.group_times`) against the pooled median
    (:attr:`auditor.stats.rates.TimeSpread.median`)."""
    return [(a, group_times(df.loc[df["arm"] == a, "followup_time"].to_numpy(), pooled_median)) for a in arms]


def _time_table(times: list[tuple[str, object]]) -> Table:
    rows = [[a, g.n, g.median, g.lower_quartile, g.upper_quartile, g.share_short] for a, g in times]
    return Table("time-by-arm", "Observation time of the follow-up count by arm",
                 ["Arm", "N", "Median", "Lower quartile", "Upper quartile", "Share below 80% of pooled median"],
                 rows, by_arm=True)


def _rate_model(df, cols, ctx):
    """The rate model: log E[y] = log t + a + b'arm (+ g log baseline rate)."""
    return fit_log_linear(df["followup"], cols, offset=np.log(df["followup_time"]), level=ctx.level)


def _comparisons(df, coding: ArmCoding, cols, rate, ctx) -> tuple[list[dict], tuple[str, ...]]:
    """Each active arm against control: the rate ratio (from ``rate``, the rate model) and the count
    ratio (the same model without the offset), fitted on the same participants; and what the count
    model's fit warned about."""
    counts_cols = dict(cols)
    if "log baseline rate" in counts_cols:  # the analysis that ignores time adjusts for the baseline count
        counts_cols["log baseline rate"] = np.log(df["baseline"].to_numpy() + 0.5)
    count = fit_log_linear(df["followup"], counts_cols, level=ctx.level)
    offset = np.log(df["followup_time"].to_numpy(dtype=float))
    return [{"name": c.label, "rate": rate.ratio(c.column), "count": count.ratio(c.column),
             "shift": coefficient_shift(df["followup"], counts_cols, cols, c.column, offset_b=offset,
                                        level=ctx.level)}
            for c in coding.contrasts], count.notes


def _fit_caveats(notes: list[str]) -> list[str]:
    """One caveat per kind of warning the log-linear fits gave (the numbers above came from them)."""
    seen = list(dict.fromkeys(notes))
    return [f"A log-linear fit behind these numbers warned: {n}; read its intervals with care." for n in seen]


def _figure(df, arms, spec, ctx, expected: list["ExpectedCounts"]) -> Figure:
    shown, note = thin(df, ctx.seed)
    groups = ([{"label": a, "x": shown.loc[shown["arm"] == a, "followup_time"].tolist(),
                "y": shown.loc[shown["arm"] == a, "followup"].tolist()} for a in arms] if arms else
              [{"label": "All participants", "x": shown["followup_time"].tolist(), "y": shown["followup"].tolist()}])
    curves = [{"label": f"rate model: {c.label}", "x": c.time.tolist(), "y": c.count.tolist()} for c in expected]
    return Figure("count-time-scatter", "scatter_xy", f"{spec.display_name}: follow-up count against observation time",
                  {"groups": groups, "curves": curves, "xlabel": f"Observation time ({spec.exposure})",
                   "ylabel": "Follow-up count"},
                  caption="Lines: the expected count at each observation time under the rate model (log time as "
                          "offset), at the median baseline rate. A count that grows along the lines is a rate." + note,
                  by_arm=bool(arms))


@dataclass(frozen=True)
class ExpectedCounts:
    """One arm's expected count along a grid of observation times under the rate model, at the median
    baseline rate: ``count = time x rate``."""
    label: str
    rate: float
    time: np.ndarray
    count: np.ndarray


def expected_counts(spread: TimeSpread, fit, arms, cols, coding: ArmCoding, points: int = 40) -> list[ExpectedCounts]:
    """Each arm's expected count over ``points`` observation times from the shortest to the longest
    (``spread``'s range): the rate model ``fit``'s rate for the arm at the median log baseline rate,
    times each time."""
    grid = np.linspace(spread.minimum, spread.maximum, points)
    base = float(np.median(cols["log baseline rate"])) if "log baseline rate" in cols else 0.0
    coef = dict(zip(fit.names, fit.params))
    lin0 = coef["intercept"] + coef.get("log baseline rate", 0.0) * base
    out = []
    for a in (arms if arms else ["all participants"]):
        column = coding.column_of(a)
        rate = math.exp(lin0 + (coef[column] if column is not None else 0.0))
        out.append(ExpectedCounts(a, rate, grid, grid * rate))
    return out


@dataclass(frozen=True)
class Proportionality:
    """The log-log slope of the count on observation time (1 when counts grow in proportion to time)."""
    slope: float
    lower: float
    upper: float

    @property
    def holds(self) -> bool:
        return self.lower <= 1.0 <= self.upper


@dataclass(frozen=True)
class TimesByArm:
    """Kruskal-Wallis comparison of observation time across arms (chi-square on ``df`` degrees of
    freedom, the number of arms less one), with each arm's times."""
    statistic: float
    p: float
    differs: bool
    """Times differ between arms (p below ARM_TIME_ALPHA) and are unequal at all."""
    arms: list
    """(arm, :class:`auditor.stats.rates.GroupTimes`) for each arm."""

    @property
    def df(self) -> int:
        return len(self.arms) - 1


def moves(shift, threshold: float) -> bool:
    """A count-over-rate ratio that matters short of materiality: its interval excludes 1, or its
    estimate reaches ``threshold`` or its inverse."""
    return shift.detectable or max(shift.estimate, 1 / shift.estimate) >= threshold


@dataclass(frozen=True)
class Analysis:
    """Every number the check judges by, before any wording: the participants and arms analysed, the
    spread of observation time, the rate model, the proportionality slope (unequal times only), the
    time-by-arm test with each arm's times and each arm's count-versus-rate comparison (two or more arms
    only), and the counts the rate model expects along observation time (the figure's lines)."""
    df: object
    arms: list
    with_baseline: bool
    spread: object
    rate: object
    cols: dict
    coding: ArmCoding
    threshold: float
    proportionality: Proportionality | None
    times_by_arm: TimesByArm | None
    comparisons: list
    fit_notes: tuple
    expected: list

    @property
    def largest(self) -> dict | None:
        """The comparison whose count ratio over rate ratio lies furthest from 1 on the log scale (the one
        the headline quotes), or None with no comparison."""
        if not self.comparisons:
            return None
        return max(self.comparisons, key=lambda c: abs(math.log(c["shift"].estimate)))

    @property
    def material(self) -> bool:
        """Ignoring time moves some comparison wholly beyond the threshold (unequal times only)."""
        return not self.spread.equal and any(c["shift"].beyond(self.threshold) for c in self.comparisons)

    @property
    def detectable(self) -> bool:
        """Some comparison moves detectably, or by the threshold at its estimate (unequal times only)."""
        return not self.spread.equal and any(moves(c["shift"], self.threshold) for c in self.comparisons)

    @property
    def scale_ok(self) -> bool:
        return self.proportionality is None or self.proportionality.holds


def analyse(data, ctx: CheckContext) -> Analysis:
    """Fit everything the check reports: the rate model (log time as offset), the log-log scaling
    model when times are unequal, and, with two or more arms, the Kruskal-Wallis test of time by arm
    and the count model beside the rate model for each arm against control."""
    df = _participants(data)
    arms = arms_present(df, data, ctx)
    with_baseline = "baseline" in df.columns
    cols, coding = _design(df, arms, data.control_arm, with_baseline)
    spread = time_spread(df["followup_time"])
    rate = _rate_model(df, cols, ctx)
    notes = list(rate.notes)
    proportionality = None
    if not spread.equal:
        scaling = _scaling(df, cols, ctx)
        notes += scaling.notes
        proportionality = Proportionality(*scaling.coefficient("log observation time"))
    times_by_arm, comparisons = None, []
    if len(arms) > 1:
        h, p = times_differ_by_arm(df["followup_time"], df["arm"])
        times_by_arm = TimesByArm(h, p, p < ARM_TIME_ALPHA and not spread.equal, arm_times(df, arms, spread.median))
        comparisons, count_notes = _comparisons(df, coding, cols, rate, ctx)
        notes += count_notes
    return Analysis(df, arms, with_baseline, spread, rate, cols, coding, ctx.thresholds.count_ratio,
                    proportionality, times_by_arm, comparisons, tuple(notes),
                    expected_counts(spread, rate, arms, cols, coding))


def _spread_estimates(spread, unit) -> list:
    return [
        estimate("Participants with a follow-up count and its time", float(spread.n), key="count-time.n-participants"),
        estimate("Median observation time", spread.median, unit=unit, key="count-time.time.median"),
        estimate("Shortest observation time", spread.minimum, unit=unit, key="count-time.time.min"),
        estimate("Longest observation time", spread.maximum, unit=unit, key="count-time.time.max"),
        estimate("Coefficient of variation of observation time", spread.cv, key="count-time.time.cv"),
        estimate("Share observed for less than 80% of the median time", spread.share_short,
                 key="count-time.time.share-short"),
    ]


def _spread_text(spread) -> str:
    return (f"median {fmt(spread.median)} (range {fmt(spread.minimum)} to {fmt(spread.maximum)}), "
            f"coefficient of variation {fmt(spread.cv)}; {100 * spread.share_short:.0f}% observed "
            f"for less than 80% of the median")


def _proportionality_words(prop: Proportionality, estimates, subs, caveats) -> None:
    estimates.append(estimate("Growth of the count with observation time (log-log slope)", prop.slope, prop.lower,
                              prop.upper, note="1 when the count is proportional to time",
                              key="count-time.proportional.log-log-slope"))
    subs.append(SubFinding("proportional", "Does the count grow in proportion to observation time?",
                           Verdict.SOUND if prop.holds else Verdict.CAUTION,
                           f"log-log slope {fmt_ci(prop.slope, prop.lower, prop.upper)}; "
                           f"{'includes' if prop.holds else 'excludes'} 1"))
    if not prop.holds:
        caveats.append("The count does not grow in proportion to observation time: the shorter periods may "
                       "not be typical of the whole (early withdrawal of the sickest, say). A rate model "
                       "still removes the time imbalance but its rate ratio should be read with that in mind.")


def _comparison_words(an: Analysis, level: float, estimates, subs, tables) -> None:
    """The time-by-arm table, each contrast's three ratios, the side-by-side table and the sub-finding."""
    threshold, tba = an.threshold, an.times_by_arm
    tables.append(_time_table(tba.arms))
    rows = []
    for i, c in enumerate(an.comparisons, 1):
        (rr, rl, ru, rp), (cr, cl, cu, cp) = c["rate"], c["count"]
        s = c["shift"]
        estimates += [estimate(f"Rate ratio, {c['name']} (log time as offset)", rr, rl, ru, rp, by_arm=True,
                               key=f"count-time.rate-ratio.contrast-{i}", arm=c["name"]),
                      estimate(f"Count ratio, {c['name']} (time ignored)", cr, cl, cu, cp, by_arm=True,
                               key=f"count-time.count-ratio.contrast-{i}", arm=c["name"]),
                      estimate(f"Count ratio over rate ratio, {c['name']}", s.estimate, s.lower, s.upper,
                               by_arm=True,
                               note=f"material when the whole interval lies beyond {threshold:g} or its "
                                    f"inverse (count_ratio); {interval_words('', level)} from the stacked "
                                    "sandwich of both fits",
                               key=f"count-time.count-over-rate.contrast-{i}", arm=c["name"])]
        rows += [["rate model (reference)", c["name"], "ratio of rates", rr, rl, ru],
                 ["counts, time ignored", c["name"], "ratio of counts", cr, cl, cu]]
    sandwich = interval_words("robust (sandwich)", level, noun="intervals")
    tables.append(Table("rate-vs-count", "The treatment comparison with and without observation time, "
                                         "same participants",
                        ["Analysis", "Contrast", "Effect", "Estimate", "Lower", "Upper"], rows,
                        note=f"Both are Poisson log-linear models with {sandwich}, adjusted for the baseline rate "
                             "(rate model) or the log baseline count (counts)." if an.with_baseline
                        else f"Both are Poisson log-linear models with {sandwich}.",
                        by_arm=True))
    h, p, k = fmt(tba.statistic), fmt_p(tba.p), tba.df
    differs = (f"observation time differs between arms (Kruskal-Wallis chi-square {h} on {k} df, {p})"
               if tba.p < ARM_TIME_ALPHA else
               f"no evidence that observation time differs between arms (Kruskal-Wallis chi-square {h} on {k} "
               f"df, {p})")
    subs.append(SubFinding("time-by-arm", "Does observation time differ between arms enough to move the "
                                          "treatment comparison?",
                           Verdict.UNSUPPORTED if an.material else
                           Verdict.CAUTION if tba.differs or an.detectable else Verdict.SOUND,
                           f"{differs}; count ratio over rate ratio "
                           f"{', '.join(_shift_text(c['shift']) for c in an.comparisons)} (material when the "
                           f"whole interval lies beyond {threshold:g} or 1/{threshold:g})", by_arm=True))


@register(CHECK_ID, TITLE, _applies, order=50, needs_arms=False,
          summary="Whether a count outcome was observed over equal times, and what comparing counts "
                  "rather than rates does to the treatment comparison.")
def run(data, ctx: CheckContext):
    from .registry import get_check

    check = get_check(CHECK_ID)
    an = analyse(data, ctx)
    spec, spread, threshold = data.spec, an.spread, an.threshold
    estimates = _spread_estimates(spread, spec.exposure)
    spread_text = _spread_text(spread)
    subs = [SubFinding("equal-time", "Was every follow-up count made over about the same time?",
                       Verdict.SOUND if spread.equal else Verdict.CAUTION,
                       f"{spread_text}; times count as equal below a coefficient of variation of 0.10")]
    tables, caveats = [], []
    if an.proportionality is not None:
        _proportionality_words(an.proportionality, estimates, subs, caveats)
    if an.times_by_arm is not None:
        _comparison_words(an, ctx.level, estimates, subs, tables)
    if ctx.blinded and not spread.equal:
        subs.append(SubFinding("time-by-arm", "Does observation time differ between arms enough to move the "
                                              "treatment comparison?", Verdict.NOT_ASSESSABLE,
                               "withheld: a blinded audit does not read the arms, so whether the unequal times "
                               "differ between arms, and what ignoring them does to the treatment comparison, "
                               "cannot be judged without unblinding"))
    arm_differs = an.times_by_arm is not None and an.times_by_arm.differs
    verdict, headline = _verdict(spread, spread_text, arm_differs, an.material, an.largest, an.scale_ok,
                                 _arm_view(ctx, data, an.arms), threshold)
    figure = _figure(an.df, an.arms, spec, ctx, an.expected)
    return result(check, data, verdict, headline, subfindings=subs, estimates=estimates, tables=tables,
                  figures=[figure], caveats=caveats + _fit_caveats(list(an.fit_notes)),
                  recommendation=recommended_analysis(verdict),
                  references=cite(["cameron-trivedi-2013", "wedderburn-1974", "kruskal-wallis-1952",
                                   "stefanski-boos-2002"]),
                  method="Observation time summarised by its coefficient of variation (equal below 0.10, a "
                         "convention); Kruskal-Wallis test of time across arms; Poisson log-linear models of the "
                         "follow-up count with robust (HC0) standard errors: with log time as offset (the rate "
                         "ratio), without it (the count ratio), and with log time as a covariate (its slope is 1 "
                         "when counts are proportional to time); the count ratio over the rate ratio with a "
                         f"{interval_words('Wald', ctx.level)} from the stacked sandwich of the two fits (Stefanski and Boos 2002). "
                         "Unsupported when that interval lies wholly beyond a factor of "
                         f"{threshold:g} or its inverse (count_ratio; default a convention of this tool).")


def recommended_analysis(verdict: Verdict) -> str:
    """The analysis this check recommends: the planned count comparison when observation times are
    nearly equal (sound), a rate model otherwise."""
    if verdict is Verdict.SOUND:
        return "the planned comparison of counts (observation times are nearly equal)"
    return "a rate model of the counts with log observation time as offset (Poisson or negative binomial)"


def _arm_view(ctx, data, arms) -> str:
    """What this audit can say about the arms: ``blinded`` (withheld), ``single`` (no comparison
    between arms exists) or ``compared``."""
    if ctx.blinded:
        return "blinded"
    return "compared" if len(arms) > 1 else "single"


def _shift_text(s) -> str:
    """'0.68 (0.62 to 0.75)': the count ratio over the rate ratio with its interval."""
    return fmt_ci(s.estimate, s.lower, s.upper)


def _verdict(spread, spread_text, arm_differs, material, largest, scale_ok,
             arm_view: str = "compared", threshold: float = MATERIAL_RATIO) -> tuple[Verdict, str]:
    """Verdict and headline, consequence first: how far ignoring observation time moves the treatment
    comparison (``largest``, :attr:`Analysis.largest`: the count ratio over the rate ratio, with its
    interval, of the comparison it moves most; None with no comparison).

    Sound when the times are nearly equal. Unsupported when the interval of that factor lies wholly
    beyond ``threshold`` or its inverse (the study's ``count_ratio``); caution when the times vary
    otherwise (a detectable or uncertain shift, or none). Only an audit that compared the arms may say
    the unequal times leave the comparison unchanged; a blinded one says that consequence is withheld."""
    if spread.equal:
        return Verdict.SOUND, (f"Observation time is nearly equal ({spread_text}): comparing the counts "
                               "compares rates.")
    tail = "" if scale_ok else "; the count does not grow in proportion to time, so read rates with care"
    if largest is not None:
        c, s = largest, largest["shift"]
        lead = (f"Ignoring observation time moves the treatment comparison ({c['name']}) by a factor of "
                f"{_shift_text(s)}: count ratio {fmt(c['count'][0])} against rate ratio {fmt_ci(*c['rate'][:3])}")
        times = ("observation time differs between arms" if arm_differs else
                 "no evidence that observation time differs between arms")
        if material:
            return Verdict.UNSUPPORTED, (f"{lead}, wholly beyond the materiality threshold ({threshold:g} or "
                                         f"1/{threshold:g}); {times} ({spread_text}): analyse rates (log time as "
                                         f"offset){tail}.")
        if moves(s, threshold):
            return Verdict.CAUTION, (f"{lead}, a shift that is detectable or large at its estimate but not wholly "
                                     f"beyond the materiality threshold ({threshold:g} or 1/{threshold:g}); "
                                     f"{times} ({spread_text}): analyse rates (log time as offset){tail}.")
        return Verdict.CAUTION, (f"{lead}: no evidence that ignoring time moves the comparison; {times}, but "
                                 f"observation time varies ({spread_text}), so a rate model (log time as offset) "
                                 f"is still the analysis that matches how the counts were made{tail}.")
    return _without_comparison(spread_text, tail, arm_view)


def _without_comparison(spread_text: str, tail: str, arm_view: str) -> tuple[Verdict, str]:
    """Unequal times with no comparison between arms to size: blinded (withheld) or a single arm."""
    if arm_view == "blinded":
        return Verdict.CAUTION, (f"Observation time varies ({spread_text}); whether it differs between arms, "
                                 f"and so what ignoring it does to the treatment comparison, is withheld in this "
                                 f"blinded audit and cannot be judged without unblinding: analyse rates (log "
                                 f"time as offset){tail}.")
    return Verdict.CAUTION, (f"Observation time varies ({spread_text}); with a single arm there is no "
                             f"comparison between arms, but each count mixes the rate with the time "
                             f"observed: analyse rates (log time as offset){tail}.")
