"""Change-score audit: every assumption that subtracting baseline needs, tested on the trial's data.

Seven sub-findings (selection, linearity, scale, floor and ceiling, interval scale, slope, correlation),
then the consequences: the analyses fitted side by side, the efficiency lost against ANCOVA, and
whether an apparent "those who start worse benefit more" is an artefact of the change scale.
Thresholds are module constants documented in docs/methods/change-score.md.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..references import add_reference, cite
from ..results import Figure, SubFinding, Table, Verdict
from ..stats.ancova import fit_analyses, interaction_test, linearity_test, spline_columns
from ..stats.correlation import pearson
from ..stats.diagnostics import bound_shares, boxcox_profile, granularity, skewness, spread_trend_test
from ..stats.efficiency import compare_with_ci, empirical_ratio
from ..stats.linear import arm_indicators, fit_ols
from ..stats.rtm import edge_test_scale, truncation_edge_test
from ..stats.splines import choose_knots
from .common import arms_present, complete_pairs, estimate, fmt, fmt_ci, fmt_p, result, thin
from .prepost import baseline_slope
from .registry import CheckContext, register

CHECK_ID = "change-score"
ALPHA = 0.05
"""Level of the linearity, interaction and truncation tests (convention)."""
SCALE_ALPHA = 0.025
"""Level of each of the two scale tests (spread trend, Box-Cox), Bonferroni so the pair errs at 5%."""
BOUND_SHARE = 0.15
"""Share at a bound above which a floor or ceiling is flagged (McHorney and Tarlov 1995; Terwee et al. 2007)."""
HEAP_SHARE = 0.20
"""Share at one value above which heaping is reported (convention of this tool)."""
FEW_LEVELS = 10
"""Integer-valued outcomes with at most this many distinct values are treated as ordinal (convention)."""
EDGE_MIN_DISTINCT = 20
"""The truncation-edge test is run only when baseline has at least this many distinct values."""
RHO_HALF = 0.5
"""Below this correlation, change is less precise than ignoring baseline (Frison and Pocock 1992)."""
SKEW_FOR_LOG = 1.0
"""Positive values with skewness above this are examined on the log scale (convention)."""

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


@dataclass
class Part:
    """One sub-finding plus the estimates and short phrase it contributes to the headline."""

    sub: SubFinding
    estimates: list
    phrase: str = ""


def _verdict(ok: bool, soft: bool = False) -> Verdict:
    return Verdict.SOUND if ok else (Verdict.CAUTION if soft else Verdict.UNSUPPORTED)


# ----------------------------------------------------------------------------- sub-findings


def selection_part(data, df, ctx) -> Part:
    q = "Did the baseline value select the participants?"
    if data.spec.entry_criterion is not None:
        return declared_selection_part(data, ctx)
    b = df["baseline"].to_numpy()
    if len(np.unique(b)) < EDGE_MIN_DISTINCT:
        return Part(SubFinding("selection", q, Verdict.SOUND,
                               "no entry criterion declared; too few distinct values for an edge test"), [])
    tested = edge_test_scale(b, data.spec.log_scale)  # the same scale as the regression-to-the-mean check
    test = truncation_edge_test(tested.values, side="either", n_null=499 if ctx.quick else 999, seed=ctx.seed)
    edge = float(np.min(b) if test.edge_side == "lower" else np.max(b))
    scale = "" if tested.name == "raw" else f" ({tested.name} scale)"
    est = [estimate(f"Truncation-edge test{scale}, likelihood-ratio statistic", test.statistic,
                    p=test.p_value, note=f"{test.edge_side} edge at {fmt(edge)}")]
    if test.p_value < ALPHA:
        return Part(SubFinding("selection", q, Verdict.CAUTION,
                               f"no entry criterion declared, but the baseline distribution has a sharp "
                               f"{test.edge_side} edge at {fmt(edge)}{scale} ({fmt_p(test.p_value)}): "
                               f"possible selection"), est, f"a sharp {test.edge_side} edge in baseline")
    return Part(SubFinding("selection", q, Verdict.SOUND,
                           f"no entry criterion declared; no sharp edge in baseline ({fmt_p(test.p_value)})"), est)


def declared_selection_part(data, ctx) -> Part:
    """The selection sub-finding for a declared entry criterion: caution (regression to the mean is
    expected) unless the criterion, as declared, selects no one out, judged as in the
    regression-to-the-mean check by the share of the fitted population beyond the cutoff."""
    from .regression_to_mean import NEGLIGIBLE_EXCLUDED, declared_criterion_reach, share_text
    from .registry import NotAssessable

    q = "Did the baseline value select the participants?"
    ec = data.spec.entry_criterion
    lead = f"entry criterion {ec.visit} {ec.operator} {ec.value:g}"
    try:
        share_out = declared_criterion_reach(data, ctx)
    except NotAssessable as exc:
        return Part(SubFinding("selection", q, Verdict.CAUTION,
                               f"{lead}: regression to the mean is expected (its reach could not be estimated: "
                               f"{exc})"), [],
                    "participants were selected on this measurement, so regression to the mean is expected")
    est = [estimate("Share of the fitted population the entry criterion leaves out", 100 * share_out, unit="%",
                    note="truncated-normal fit of the entry reading, as in the regression-to-the-mean check")]
    reach = f"the population fitted to the entry readings puts {share_text(share_out)} beyond the cutoff"
    if share_out < NEGLIGIBLE_EXCLUDED:
        return Part(SubFinding("selection", q, Verdict.SOUND,
                               f"{lead}, but {reach} (below {NEGLIGIBLE_EXCLUDED:.0%}, a convention of this "
                               f"tool): as declared, the criterion selects no one out"), est)
    return Part(SubFinding("selection", q, Verdict.CAUTION,
                           f"{lead}: {reach}, so regression to the mean is expected (sized in the "
                           f"regression-to-the-mean check)"), est,
                "participants were selected on this measurement, so regression to the mean is expected")


def linearity_part(df, arm_cols, plan) -> tuple[Part, object]:
    q = "Is follow-up linear in baseline?"
    test, lin, flex = linearity_test(df["baseline"], df["followup"], arm_cols, plan)
    what = "quadratic term" if plan.kind == "quadratic" else f"restricted cubic spline, {len(plan.knots)} knots"
    ev = f"F = {fmt(test.statistic)} on {test.df_num} and {fmt(test.df_den, 0)} df, {fmt_p(test.p_value)} ({what})"
    ok = test.p_value >= ALPHA
    est = [estimate(f"Nonlinearity in baseline ({what}), F statistic", test.statistic, p=test.p_value)]
    return Part(SubFinding("linearity", q, _verdict(ok, soft=True), ev), est,
                "" if ok else f"follow-up is nonlinear in baseline ({fmt_p(test.p_value)})"), flex


def scale_part(df, arm_cols, flex_fit) -> Part:
    q = "Is the scale right (constant spread, additive relation)?"
    b = df["baseline"].to_numpy()
    f = df["followup"].to_numpy()
    trend = spread_trend_test(flex_fit.resid, b)
    parts = [f"spread of residuals {'grows' if trend.slope > 0 else 'shrinks'} with baseline: "
             f"{fmt_p(trend.p_value)}"]
    est = [estimate("Trend of |residual| with baseline (slope)", trend.slope, p=trend.p_value)]
    bad = trend.p_value < SCALE_ALPHA
    phrase = f"the spread of change {'grows' if trend.slope > 0 else 'shrinks'} with baseline" if bad else ""
    if np.all(b > 0) and np.all(f > 0):
        prof = boxcox_profile(f, b, arm_cols, level=1 - 2 * SCALE_ALPHA)
        parts.append(f"Box-Cox power {fmt(prof.lam)} ({fmt(prof.lower)} to {fmt(prof.upper)}, "
                     f"{100 * (1 - 2 * SCALE_ALPHA):.0f}% CI)")
        est.append(estimate("Box-Cox power for baseline and follow-up (1 = raw scale, 0 = log)", prof.lam,
                            prof.lower, prof.upper, note=f"{100 * (1 - 2 * SCALE_ALPHA):.0f}% profile-likelihood interval"))
        if not prof.includes(1.0):
            bad = True
            phrase = ("a log scale fits better than the raw scale" if prof.includes(0.0)
                      else f"a power of {fmt(prof.lam)} fits better than the raw scale")
    return Part(SubFinding("scale", q, _verdict(not bad, soft=True), "; ".join(parts)), est, phrase)


def bounds_part(df, spec) -> Part:
    q = "Are there floor or ceiling effects?"
    rows, worst, where = [], 0.0, ""
    for name in ("baseline", "followup"):
        s = bound_shares(df[name], spec.lower_bound, spec.upper_bound)
        rows += [(name, "lower", s.lower, s.share_lower), (name, "upper", s.upper, s.share_upper)]
        for side, share in (("floor", s.share_lower), ("ceiling", s.share_upper)):
            if share > worst:
                worst, where = share, f"{side} at {fmt(s.lower if side == 'floor' else s.upper)} ({name})"
    src = "declared" if spec.lower_bound is not None or spec.upper_bound is not None else "observed"
    ok = worst <= BOUND_SHARE
    at = f"{100 * worst:.0f}%, {where}" if worst > 0 else "0%, no value equals either bound"
    ev = (f"largest share at a bound ({src} bounds; a value is at a bound when it equals it): {at}; "
          f"threshold {100 * BOUND_SHARE:.0f}%")
    est = [estimate(f"Share at the {side} bound, {name.replace('followup', 'follow-up')}", share,
                    note=f"bound {fmt(bound)}") for name, side, bound, share in rows]
    return Part(SubFinding("bounds", q, _verdict(ok, soft=True), ev), est,
                "" if ok else f"{100 * worst:.0f}% of values sit at the {where.split(' at ')[0]}")


def interval_part(df, spec) -> Part:
    q = "Is the scale interval with a smooth distribution?"
    g = granularity(np.concatenate([df["baseline"].to_numpy(), df["followup"].to_numpy()]))
    few = g.integer_valued and g.n_distinct <= FEW_LEVELS
    ev = (f"{g.n_distinct} distinct values; {100 * g.tie_share:.0f}% tied; {100 * g.top_share:.0f}% at "
          f"{fmt(g.top_value)}")
    est = [estimate("Distinct values (baseline and follow-up)", float(g.n_distinct)),
           estimate("Share at the most common value", g.top_share, note=f"value {fmt(g.top_value)}")]
    if spec.scale == "ordinal" or few:
        why = "declared ordinal" if spec.scale == "ordinal" else f"only {g.n_distinct} integer levels"
        return Part(SubFinding("interval", q, Verdict.UNSUPPORTED,
                               f"{why}: the difference of two ordinal values is not ordinal and equal steps "
                               f"need not mean equal amounts; {ev}"), est, f"the scale is ordinal ({why})")
    if g.top_share > HEAP_SHARE:
        return Part(SubFinding("interval", q, Verdict.CAUTION, f"heaping: {ev}"), est,
                    f"{100 * g.top_share:.0f}% of values heap at {fmt(g.top_value)}")
    return Part(SubFinding("interval", q, Verdict.SOUND, ev), est)


def slope_part(df, arms, control) -> tuple[Part, tuple]:
    q = "Is the slope of follow-up on baseline near 1?"
    est, lo, hi, p, _ = baseline_slope(df, arms, control)
    ok = lo <= 1.0 <= hi
    adj = "adjusted for arm" if len(arms) > 1 else "pooled"
    ev = f"slope {fmt_ci(est, lo, hi)} ({adj}); the CI {'includes' if ok else 'excludes'} 1"
    e = [estimate(f"Slope of follow-up on baseline ({adj})", est, lo, hi)]
    return Part(SubFinding("slope", q, _verdict(ok), ev), e,
                "" if ok else f"slope {fmt_ci(est, lo, hi)}"), (est, lo, hi)


def correlation_part(df, ctx) -> tuple[Part, object]:
    q = "Is baseline prognostic enough for subtraction to help (r >= 0.5)?"
    r = pearson(df["baseline"], df["followup"], ctx.level)
    ok = r.r >= RHO_HALF
    change_vs_anc = compare_with_ci("change", "ancova", r.r, r.lower, r.upper)
    change_vs_fu = compare_with_ci("change", "follow-up-only", r.r, r.lower, r.upper)
    ev = (f"r = {fmt_ci(r.r, r.lower, r.upper)}; with equal variances the change analysis needs "
          f"{_more(change_vs_anc.ratio)} than ANCOVA and {_more(change_vs_fu.ratio)} than follow-up alone")
    est = [
        estimate("Correlation of baseline with follow-up (Pearson r)", r.r, r.lower, r.upper, r.p_value),
        estimate("Sample-size ratio, change / ANCOVA (equal variances)", change_vs_anc.ratio,
                 change_vs_anc.lower, change_vs_anc.upper, note="2/(1+r); CI from the CI of r"),
        estimate("Sample-size ratio, change / follow-up only (equal variances)", change_vs_fu.ratio,
                 change_vs_fu.lower, change_vs_fu.upper, note="2(1-r); CI from the CI of r"),
    ]
    phrase = "" if ok else f"r {fmt(r.r)}, so change is less efficient than ignoring baseline"
    return Part(SubFinding("correlation", q, _verdict(ok), ev), est, phrase), r


def _more(ratio: float) -> str:
    pct = 100 * (ratio - 1)
    return f"{pct:.0f}% more participants" if pct >= 0 else f"{-pct:.0f}% fewer participants"


# ----------------------------------------------------------------------------- consequences


def analyses_table(df, arms, control, plan):
    fits = fit_analyses(df["baseline"], df["followup"], df["arm"].to_numpy(), arms, control, plan)
    rows = [[e.analysis, e.contrast, e.estimate, e.se, e.lower, e.upper, e.p_value] for e in fits.effects]
    table = Table("analyses", "Treatment effect under each analysis, fitted on the same participants",
                  ["Analysis", "Arm vs control", "Effect", "SE", "lower", "upper", "p"], rows,
                  note="Effects on the outcome's scale (follow-up difference); ANCOVA with spline baseline is "
                       "the recommended reference.", by_arm=True)
    se = {(e.analysis, e.contrast): e.se for e in fits.effects}
    contrast = fits.effects[0].contrast
    ratio_anc = empirical_ratio(se[("change score", contrast)], se[("ANCOVA, spline baseline", contrast)])
    ratio_fu = empirical_ratio(se[("change score", contrast)], se[("follow-up only", contrast)])
    ests = [
        estimate(f"Empirical sample-size ratio, change / spline ANCOVA ({contrast})", ratio_anc,
                 note="(SE change / SE ANCOVA)^2 from the fitted analyses", by_arm=True),
        estimate(f"Empirical sample-size ratio, change / follow-up only ({contrast})", ratio_fu,
                 note="(SE change / SE follow-up)^2 from the fitted analyses", by_arm=True),
    ]
    return table, ests, ratio_anc, fits


def ordinal_alternative(df, arms, control, plan):
    """Proportional-odds ANCOVA of follow-up on the flexible baseline plus arm (McCullagh 1980).

    Returns (rows for the analyses table, a table of clinician-scale translations, a reason when it
    could not be fitted). Translations are taken at the median baseline: mean and median follow-up by
    arm, the probability of exceeding the follow-up quartiles, the concordance probability, and the
    descriptive proportional-odds check against binary fits at cut points.
    """
    from ..stats import ordinal as po

    cols = {**spline_columns(df["baseline"].to_numpy(), plan), **arm_indicators(df["arm"].to_numpy(), arms, control)}
    names = list(cols)
    X = np.column_stack([cols[k] for k in names])
    y = df["followup"].to_numpy()
    try:
        fit = po.fit_proportional_odds(y, X, names=names)
    except po.OrdinalFitError as exc:
        return [], None, f"the proportional-odds ANCOVA could not be fitted: {exc.reason}"
    ref = {k: v[0] for k, v in spline_columns(np.array([float(np.median(df["baseline"]))]), plan).items()}
    rows, trans = [], []
    quartiles = sorted(set(np.quantile(y, [0.25, 0.5, 0.75]).tolist()))
    for arm_name in [k for k in names if k.startswith("arm[")]:
        w = fit.wald(arm_name)
        rows.append(["proportional-odds ANCOVA (log odds ratio)", arm_name[4:-1], w.estimate, w.se, w.lower, w.upper,
                     w.p_value])
        conc = po.concordance_exact(fit, _vector(names, ref, None), arm_name)
        trans.append([f"{arm_name[4:-1]} vs {control}", "concordance probability", conc.estimate, conc.lower,
                      conc.upper])
        check = po.proportional_odds_check(y, X, arm_name, names=names, fit=fit)
        trans.append([f"{arm_name[4:-1]} vs {control}", "proportional-odds check: heterogeneity chi-square "
                      f"on {check.df} df (p {check.p_value:.3f}, approximate)", check.heterogeneity_chi2, None, None])
    for arm in arms:
        x = _vector(names, ref, arm)
        mean, med = po.predicted_mean(fit, x), po.predicted_median(fit, x)
        trans.append([arm, "mean follow-up at median baseline", mean.estimate, mean.lower, mean.upper])
        trans.append([arm, "median follow-up at median baseline", med.estimate, med.lower, med.upper])
        ex = po.prob_exceeds(fit, x, quartiles)
        for t, pr, lo, hi in zip(ex.thresholds, ex.probability, ex.lower, ex.upper):
            trans.append([arm, f"P(follow-up > {fmt(float(t))}) at median baseline", pr, lo, hi])
    table = Table("ordinal-translation", "Proportional-odds ANCOVA on the outcome's own scale",
                  ["Group", "Quantity", "Estimate", "lower", "upper"], trans,
                  note="Model: P(follow-up >= y) = expit(alpha_y + s(baseline) + d arm); a positive log odds ratio "
                       "means higher follow-up values on the active arm. Intervals by the delta method.",
                  by_arm=True)
    return rows, table, ""


def _vector(names, ref, arm):
    return np.array([ref[k] if not k.startswith("arm[") else float(arm is not None and k == f"arm[{arm}]")
                     for k in names])


def heterogeneity_part(df, arms, control):
    """Apparent heterogeneity on the change scale against the ANCOVA interaction test."""
    rows = []
    for arm in arms:
        sub = df[df["arm"] == arm]
        if len(sub) >= 10:
            r = pearson(sub["baseline"], sub["followup"] - sub["baseline"])
            rows.append([arm, len(sub), r.r, r.lower, r.upper, r.p_value])
    inter = interaction_test(df["baseline"].to_numpy(), df["followup"].to_numpy(), df["arm"].to_numpy(), arms, control)
    table = Table("heterogeneity", "Correlation of change with baseline within arm",
                  ["Arm", "N", "r (change, baseline)", "lower", "upper", "p"], rows,
                  note=f"ANCOVA test of arm x baseline interaction: F = {fmt(inter.statistic)} on {inter.df_num} "
                       f"and {fmt(inter.df_den, 0)} df, {fmt_p(inter.p_value)}.", by_arm=True)
    est = [estimate("Arm x baseline interaction in ANCOVA (F)", inter.statistic, p=inter.p_value, by_arm=True)]
    caveat = ""
    ctrl = next((r for r in rows if r[0] == control), None)
    if ctrl is not None and ctrl[5] < ALPHA and ctrl[2] < 0 and inter.p_value >= ALPHA:
        caveat = (f"Change correlates with baseline even in the control arm (r {fmt(ctrl[2])}), while the "
                  f"ANCOVA shows no arm x baseline interaction ({fmt_p(inter.p_value)}): an apparent "
                  f"'those who start worse benefit more' on the change scale is regression to the mean, "
                  f"not a larger treatment effect.")
    return table, est, caveat


def repeated_caveat_and_fit(data, ctx, arms):
    """For plans that put baseline on both sides: the model with post-baseline visits as responses."""
    from ..stats.repeated import fit_post_baseline_model

    visits = [c for c in data.frame.columns if c.startswith("fu:")]
    fit = fit_post_baseline_model(data.frame, visits, arms, data.control_arm, ctx.level)
    rows = [[row.visit, row.contrast, row.estimate, row.se, row.lower, row.upper, row.p_value] for row in fit.effects]
    notes = [f"The longitudinal model's fit warned: {n}." for n in fit.notes]
    return Table("repeated", "Post-baseline visits as responses, baseline as a covariate only",
                 ["Visit", "Arm vs control", "Effect", "SE", "lower", "upper", "p"], rows, by_arm=True), notes


# ----------------------------------------------------------------------------- figures


def _figures(data, df, arms, flex_fit, plan, seed):
    spec = data.spec
    shown, note = thin(df.assign(fitted=flex_fit.fitted, resid=flex_fit.resid), seed)
    unit = f" ({spec.unit})" if spec.unit else ""
    b, f = df["baseline"].to_numpy(), df["followup"].to_numpy()
    grid = np.linspace(b.min(), b.max(), 80)
    groups_fu = _groups(shown, arms, "baseline", "followup")
    basis = spline_columns(grid, plan)
    names = flex_fit.names[1:]
    curves = []
    for arm in (arms or [None]):
        design = dict(basis)
        for k in names:
            if k.startswith("arm["):
                design[k] = np.full(len(grid), 1.0 if k == f"arm[{arm}]" else 0.0)
        X = np.column_stack([np.ones(len(grid))] + [design[k] for k in names])
        curves.append({"label": f"fit: {arm}" if arm else "flexible fit", "x": grid.tolist(),
                       "y": (X @ flex_fit.coef).tolist()})
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


def decide(planned: str, parts: dict[str, Part], r) -> tuple[Verdict, str]:
    """Overall verdict and headline from the sub-findings, for the planned analysis."""
    hard = [p for k, p in parts.items() if p.sub.verdict == Verdict.UNSUPPORTED]
    soft = [p for k, p in parts.items() if p.sub.verdict == Verdict.CAUTION]
    failing = [p.phrase for p in hard + soft if p.phrase]
    if planned in ("change", "responder", "repeated-with-baseline-response"):
        if hard:
            return Verdict.UNSUPPORTED, (f"Change from baseline is not supported: {'; '.join(failing[:3])}; "
                                         f"adjust for baseline instead (ANCOVA"
                                         f"{', proportional odds' if 'interval' in [k for k, p in parts.items() if p in hard] else ''}).")
        if soft:
            return Verdict.CAUTION, f"Change from baseline is doubtful: {'; '.join(failing[:3])}."
        return Verdict.SOUND, (f"The assumptions of a change analysis hold (r {fmt(r.r)}, slope compatible with 1, "
                               f"linear, no floor or ceiling); ANCOVA remains at least as efficient.")
    if planned == "follow-up-only":
        if r.r >= 0.3:
            return Verdict.CAUTION, (f"Ignoring baseline wastes information: r {fmt(r.r)}, so ANCOVA would need "
                                     f"{100 * r.r ** 2:.0f}% fewer participants for the same power.")
        return Verdict.SOUND, f"Baseline is weakly prognostic (r {fmt(r.r)}); ignoring it costs little."
    prefix = ("The recommended baseline-adjusted alternative" if planned == "percent-change"
              else "The baseline-adjusted analysis")
    nonlin = parts["linearity"].sub.verdict != Verdict.SOUND
    awkward = [p.phrase for k, p in parts.items() if k in ("bounds", "interval", "scale") and p.sub.verdict != Verdict.SOUND]
    if nonlin or awkward:
        extra = "; ".join(([parts["linearity"].phrase] if nonlin else []) + awkward)
        return Verdict.CAUTION, (f"{prefix} needs care: {extra}; use a flexible baseline"
                                 f"{' and consider the proportional-odds ANCOVA' if awkward else ''}.")
    return Verdict.SOUND, f"{prefix} suits these data (r {fmt(r.r)}, linear in baseline)."


@register(CHECK_ID, "Change-score assumptions", _applies, order=20,
          summary="Tests each assumption that subtracting baseline needs and what the planned analysis "
                  "costs against ANCOVA with a flexible baseline.")
def run(data, ctx: CheckContext):
    from .registry import get_check

    check = get_check(CHECK_ID)
    df = complete_pairs(data, min_n=20)
    arms = arms_present(df, data, ctx)
    control = data.control_arm if data.control_arm in arms else (arms[0] if arms else None)
    arm_cols = arm_indicators(df["arm"].to_numpy(), arms, control) if len(arms) > 1 else {}
    plan = choose_knots(df["baseline"].to_numpy())

    lin_part, flex_fit = linearity_part(df, arm_cols, plan)
    slope_p, _ = slope_part(df, arms, control)
    corr_p, r = correlation_part(df, ctx)
    parts = {
        "selection": selection_part(data, df, ctx),
        "linearity": lin_part,
        "scale": scale_part(df, arm_cols, flex_fit),
        "bounds": bounds_part(df, data.spec),
        "interval": interval_part(df, data.spec),
        "slope": slope_p,
        "correlation": corr_p,
    }
    estimates = [estimate("Participants with baseline and follow-up", float(len(df)))]
    for p in parts.values():
        estimates += p.estimates
    tables, caveats = [], []
    if len(arms) > 1:
        table, ests, ratio_anc, _ = analyses_table(df, arms, control, plan)
        awkward = (any(parts[k].sub.verdict != Verdict.SOUND for k in ("bounds", "interval", "scale"))
                   or abs(skewness(df["followup"])) > SKEW_FOR_LOG)
        po_table = None
        if awkward or data.spec.scale == "ordinal":
            rows, po_table, why = ordinal_alternative(df, arms, control, plan)
            table.rows.extend(rows)
            if why:
                caveats.append(why[0].upper() + why[1:] + ".")
        tables.append(table)
        if po_table is not None:
            tables.append(po_table)
        estimates += ests
        het_table, het_est, het_caveat = heterogeneity_part(df, arms, control)
        tables.append(het_table)
        estimates += het_est
        if het_caveat:
            caveats.append(het_caveat)
    if data.spec.planned_analysis == "repeated-with-baseline-response":
        caveats.append("The planned longitudinal model puts baseline on both sides (as a response time point and "
                       "as a covariate): the baseline response then carries the covariate's information twice and "
                       "the treatment effect is distorted. Model post-baseline visits as responses with baseline "
                       "as a covariate only.")
        if len(arms) > 1:
            table, notes = repeated_caveat_and_fit(data, ctx, arms)
            tables.append(table)
            caveats += notes
    verdict, headline = decide(data.spec.planned_analysis, parts, r)
    return result(check, data, verdict, headline, subfindings=[p.sub for p in parts.values()],
                  estimates=estimates, tables=tables, figures=_figures(data, df, arms, flex_fit, plan, ctx.seed),
                  caveats=caveats,
                  references=cite(["frison-pocock-1992", "clifton-2019", "vickers-altman-2001",
                                   "durrleman-simon-1989", "stone-koo-1985", "box-cox-1964", "glejser-1969", "mchorney-tarlov-1995",
                                   "terwee-2007", "barnett-2005", "mccullagh-1980"]),
                  method="Restricted cubic spline (knots at quantiles) or quadratic for discrete baselines, F test against "
                         "linear; Glejser-type trend of absolute residuals and a Box-Cox profile likelihood (each at "
                         "2.5%); shares at bounds (15% threshold); slope CI against 1; Frison-Pocock efficiency with "
                         "CI from the Fisher interval of r; the four analyses fitted on the same participants.")
