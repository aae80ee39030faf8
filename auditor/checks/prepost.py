"""Pre-post relationship: how follow-up relates to baseline, pooled and within arm.

Reports the Pearson and Spearman correlations of baseline with follow-up (with CIs), the slope of
follow-up on baseline adjusted for arm, and the number of complete pairs. The check is descriptive:
it judges nothing about the planned analysis, so its verdict is "for information" whenever the
numbers can be computed (ranked like sound by every gate). Whether a change score suits the data (slope 1, Clifton and Clifton 2019; correlation
above 0.5, Frison and Pocock 1992) is judged by the change-score check, and selection on baseline by
the regression-to-the-mean check. The two descriptive sub-findings set these numbers beside 1 and 0.5
as reading aids only.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from ..references import cite
from ..results import Figure, SubFinding, Table, Verdict, interval_words, level_label
from ..stats.correlation import pearson, spearman
from ..stats.effects import arm_coding
from ..stats.linear import adjusted_slope
from .common import arms_present, complete_pairs, estimate, fmt_ci, result, thin
from .registry import CheckContext, register

CHECK_ID = "pre-post"
RHO_HALF = 0.5
"""Reference value shown beside r: below it a change score is less precise than ignoring baseline
(Frison and Pocock 1992, equal variances). Descriptive here; the change-score check judges it."""


def _applies(spec, design) -> bool:
    return spec.baseline_visit is not None


def baseline_slope(df, arms, control, level: float = 0.95) -> tuple[float, float, float, float, int]:
    """Slope of follow-up on baseline adjusted for arm: (estimate, lower, upper, p, residual df).

    followup = a + b * baseline + sum_k c_k [arm = k] + error, fitted by least squares; the CI is
    t-based. With no arms (blinded or single-arm) the arm terms are omitted.
    """
    cols = arm_coding(df["arm"].to_numpy(), arms, control).columns if len(arms) > 1 else {}
    return adjusted_slope(df["followup"].to_numpy(), df["baseline"].to_numpy(), cols, level)


def smooth_curve(x: np.ndarray, y: np.ndarray, points: int = 60) -> tuple[list[float], list[float]]:
    """A LOWESS smooth (Cleveland 1979, frac 2/3; 3 robustness iterations, none for very discrete x)."""
    from statsmodels.nonparametric.smoothers_lowess import lowess  # deferred: only this smooth needs it

    grid = np.linspace(np.min(x), np.max(x), points)
    if len(np.unique(x)) < 4:
        return [], []
    with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        fitted = lowess(y, x, frac=2 / 3, it=3 if len(np.unique(x)) >= 10 else 0, xvals=grid)
    if not np.all(np.isfinite(fitted)):
        return [], []
    return grid.tolist(), np.asarray(fitted).tolist()


@dataclass(frozen=True)
class ArmCorrelation:
    arm: str
    n: int
    pearson: object
    spearman: object


@dataclass(frozen=True)
class Analysis:
    """The numbers the check reports, before any wording: the complete pairs and arms, the pooled
    Pearson and Spearman correlations, the arm-adjusted slope (estimate, lower, upper, p), the
    within-arm correlations (arms with at least 4 pairs) and the pooled LOWESS smooth of follow-up on
    baseline that the figure draws (grid and fitted values; both empty when it cannot be drawn)."""
    df: object
    arms: list
    pearson: object
    spearman: object
    slope: tuple
    by_arm: list
    smooth: tuple[list[float], list[float]]


def analyse(data, ctx: CheckContext) -> Analysis:
    """Correlations and the slope of follow-up on baseline at the audit's confidence level."""
    df = complete_pairs(data)
    arms = arms_present(df, data, ctx)
    b, f = df["baseline"].to_numpy(), df["followup"].to_numpy()
    slope = baseline_slope(df, arms, data.control_arm, ctx.level)[:4]
    by_arm = []
    for arm in arms:
        sub = df[df["arm"] == arm]
        if len(sub) >= 4:
            by_arm.append(ArmCorrelation(arm, len(sub), pearson(sub["baseline"], sub["followup"], ctx.level),
                                         spearman(sub["baseline"], sub["followup"], ctx.level)))
    return Analysis(df, arms, pearson(b, f, ctx.level), spearman(b, f, ctx.level), slope, by_arm,
                    smooth_curve(b, f))


def _scatter(data, an: Analysis, seed) -> Figure:
    df, arms = an.df, an.arms
    shown, note = thin(df, seed)
    if arms:
        groups = [{"label": a, "x": shown.loc[shown["arm"] == a, "baseline"].tolist(),
                   "y": shown.loc[shown["arm"] == a, "followup"].tolist()} for a in arms]
    else:
        groups = [{"label": "All participants", "x": shown["baseline"].tolist(), "y": shown["followup"].tolist()}]
    sx, sy = an.smooth
    return Figure("prepost-scatter", "scatter_identity",
                  f"{data.spec.display_name}: follow-up against baseline",
                  {"groups": groups, "smooth": {"x": sx, "y": sy},
                   "xlabel": _axis(data.spec, "Baseline"), "ylabel": _axis(data.spec, "Follow-up")},
                  caption="Dashed: identity line (follow-up = baseline). Solid: LOWESS smooth, pooled." + note,
                  by_arm=bool(arms))


@register(CHECK_ID, "Pre-post relationship", _applies, order=10,
          summary="Correlation of baseline with follow-up and the arm-adjusted slope.")
def run(data, ctx: CheckContext):
    from .registry import get_check

    check = get_check(CHECK_ID)
    an = analyse(data, ctx)
    df, arms, pr, sp = an.df, an.arms, an.pearson, an.spearman
    slope, s_lo, s_hi, s_p = an.slope
    adjusted = "adjusted for arm" if len(arms) > 1 else "pooled"

    estimates = [
        estimate("Participants with baseline and follow-up", float(len(df)), key="pre-post.n-participants"),
        estimate("Pearson correlation, pooled", pr.r, pr.lower, pr.upper, pr.p_value, key="pre-post.pearson"),
        estimate("Spearman correlation, pooled", sp.r, sp.lower, sp.upper, sp.p_value, key="pre-post.spearman"),
        estimate(f"Slope of follow-up on baseline ({adjusted})", slope, s_lo, s_hi, s_p, key="pre-post.slope"),
    ]
    rows = [[c.arm, c.n, c.pearson.r, c.pearson.lower, c.pearson.upper, c.spearman.r, c.spearman.lower,
             c.spearman.upper] for c in an.by_arm]
    tables = []
    if rows:
        tables.append(Table("by-arm-correlation", "Correlation of baseline with follow-up within arm",
                            ["Arm", "N", "Pearson r", "lower", "upper", "Spearman rho", "lower", "upper"],
                            rows, by_arm=True))

    subs = descriptive_subfindings(slope, s_lo, s_hi, pr)
    kind = "arm-adjusted slope" if len(arms) > 1 else "slope"
    headline = (f"Follow-up relates to baseline with {kind} {fmt_ci(slope, s_lo, s_hi)} and Pearson r "
                f"{fmt_ci(pr.r, pr.lower, pr.upper)} in {len(df)} participants.")
    return result(check, data, Verdict.FOR_INFORMATION, headline, subfindings=subs, estimates=estimates, tables=tables,
                  figures=[_scatter(data, an, ctx.seed)],
                  references=cite(["frison-pocock-1992", "clifton-2019", "fieller-1957", "cleveland-1979"]),
                  method=f"Pearson r with {interval_words('Fisher z', ctx.level)}; Spearman rho with the "
                         f"{interval_words('Fieller-Hartley-Pearson', ctx.level)}; least-squares slope of follow-up on baseline with arm as a factor; "
                         f"t-based {level_label(ctx.level)} CI.")


def descriptive_subfindings(slope: float, s_lo: float, s_hi: float, pr) -> list[SubFinding]:
    """Where the slope stands against 1 and r against 0.5, as description ("for information"): what a
    change score would need is judged by the change-score check, not here."""
    inside = "includes" if s_lo <= 1.0 <= s_hi else "excludes"
    side = "at or above" if pr.r >= RHO_HALF else "below"
    return [
        SubFinding("slope-one", "Where does the slope of follow-up on baseline stand against 1?",
                   Verdict.FOR_INFORMATION,
                   f"slope {fmt_ci(slope, s_lo, s_hi)}; its interval {inside} 1 (descriptive; the change-score "
                   f"check judges what this means for the planned analysis)"),
        SubFinding("correlation-half", "Where does the correlation of baseline with follow-up stand against 0.5?",
                   Verdict.FOR_INFORMATION,
                   f"Pearson r {fmt_ci(pr.r, pr.lower, pr.upper)}, {side} {RHO_HALF:g} (descriptive; the "
                   f"change-score check judges what this means for the planned analysis)"),
    ]


def _axis(spec, what: str) -> str:
    unit = f" ({spec.unit})" if spec.unit else ""
    return f"{what}{unit}"
