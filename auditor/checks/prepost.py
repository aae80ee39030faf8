"""Pre-post relationship: how follow-up relates to baseline, pooled and within arm.

Reports the Pearson and Spearman correlations of baseline with follow-up (with CIs), the slope of
follow-up on baseline adjusted for arm, and the number of complete pairs. Subtracting baseline is
the same as ANCOVA only when that slope is 1 (Clifton and Clifton 2019), and it helps precision only
when the correlation exceeds 0.5 (Frison and Pocock 1992), so this check already says whether a change
score is plausible; the change-score check examines every assumption in depth.
"""

from __future__ import annotations

import warnings

import numpy as np
from statsmodels.nonparametric.smoothers_lowess import lowess

from ..references import cite
from ..results import Figure, SubFinding, Table, Verdict
from ..stats.correlation import pearson, spearman
from ..stats.linear import arm_indicators, fit_ols
from .common import arms_present, complete_pairs, estimate, fmt, fmt_ci, result, thin
from .registry import CheckContext, register

CHECK_ID = "pre-post"
RHO_HALF = 0.5
"""Below this correlation a change score is less precise than ignoring baseline (Frison and Pocock 1992,
equal variances)."""


def _applies(spec, design) -> bool:
    return spec.baseline_visit is not None


def baseline_slope(df, arms, control) -> tuple[float, float, float, float, int]:
    """Slope of follow-up on baseline adjusted for arm: (estimate, lower, upper, p, residual df).

    followup = a + b * baseline + sum_k c_k [arm = k] + error, fitted by least squares; the CI is
    t-based. With no arms (blinded or single-arm) the arm terms are omitted.
    """
    cols = {"baseline": df["baseline"].to_numpy()}
    if len(arms) > 1:
        cols.update(arm_indicators(df["arm"].to_numpy(), arms, control))
    fit = fit_ols(df["followup"].to_numpy(), cols)
    est, lo, hi = fit.ci("baseline")
    return est, lo, hi, fit.p_value("baseline"), int(fit.df_resid)


def smooth_curve(x: np.ndarray, y: np.ndarray, points: int = 60) -> tuple[list[float], list[float]]:
    """A LOWESS smooth (Cleveland 1979, frac 2/3; 3 robustness iterations, none for very discrete x)."""
    grid = np.linspace(np.min(x), np.max(x), points)
    if len(np.unique(x)) < 4:
        return [], []
    with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        fitted = lowess(y, x, frac=2 / 3, it=3 if len(np.unique(x)) >= 10 else 0, xvals=grid)
    if not np.all(np.isfinite(fitted)):
        return [], []
    return grid.tolist(), np.asarray(fitted).tolist()


@register(CHECK_ID, "Pre-post relationship", _applies, order=10,
          summary="Correlation of baseline with follow-up and the arm-adjusted slope.")
def run(data, ctx: CheckContext):
    from .registry import get_check

    check = get_check(CHECK_ID)
    df = complete_pairs(data)
    arms = arms_present(df, data, ctx)
    b, f = df["baseline"].to_numpy(), df["followup"].to_numpy()
    pr, sp = pearson(b, f, ctx.level), spearman(b, f, ctx.level)
    slope, s_lo, s_hi, s_p, _ = baseline_slope(df, arms, data.control_arm)
    adjusted = "adjusted for arm" if len(arms) > 1 else "pooled"

    estimates = [
        estimate("Participants with baseline and follow-up", float(len(df))),
        estimate("Pearson correlation, pooled", pr.r, pr.lower, pr.upper, pr.p_value),
        estimate("Spearman correlation, pooled", sp.r, sp.lower, sp.upper, sp.p_value),
        estimate(f"Slope of follow-up on baseline ({adjusted})", slope, s_lo, s_hi, s_p),
    ]
    rows = []
    for arm in arms:
        sub = df[df["arm"] == arm]
        if len(sub) < 4:
            continue
        pa, sa = pearson(sub["baseline"], sub["followup"], ctx.level), spearman(sub["baseline"], sub["followup"], ctx.level)
        rows.append([arm, len(sub), pa.r, pa.lower, pa.upper, sa.r, sa.lower, sa.upper])
    tables = []
    if rows:
        tables.append(Table("by-arm-correlation", "Correlation of baseline with follow-up within arm",
                            ["Arm", "N", "Pearson r", "lower", "upper", "Spearman rho", "lower", "upper"],
                            rows, by_arm=True))

    slope_ok = s_lo <= 1.0 <= s_hi
    rho_ok = pr.r >= RHO_HALF
    subs = [
        SubFinding("slope-one", "Is the slope of follow-up on baseline compatible with 1?",
                   Verdict.SOUND if slope_ok else Verdict.CAUTION,
                   f"slope {fmt_ci(slope, s_lo, s_hi)}; {'includes' if slope_ok else 'excludes'} 1"),
        SubFinding("correlation-half", "Is baseline correlated with follow-up at 0.5 or more?",
                   Verdict.SOUND if rho_ok else Verdict.CAUTION,
                   f"Pearson r {fmt_ci(pr.r, pr.lower, pr.upper)}"),
    ]
    change_planned = data.spec.planned_analysis in ("change", "responder")
    if slope_ok and rho_ok:
        verdict = Verdict.SOUND
        headline = (f"Follow-up tracks baseline: slope {fmt_ci(slope, s_lo, s_hi)} and r {fmt(pr.r)} "
                    f"in {len(df)} participants, consistent with analysing change.")
    elif not rho_ok and not slope_ok and change_planned:
        verdict = Verdict.UNSUPPORTED
        headline = (f"Baseline predicts follow-up weakly (r {fmt(pr.r)}) and the slope "
                    f"{fmt_ci(slope, s_lo, s_hi)} excludes 1: subtracting baseline adds noise.")
    else:
        verdict = Verdict.CAUTION
        why = []
        if not slope_ok:
            why.append(f"slope {fmt_ci(slope, s_lo, s_hi)} excludes 1")
        if not rho_ok:
            why.append(f"r {fmt(pr.r)} is below 0.5")
        headline = f"Pre-post relationship departs from what a change score needs: {'; '.join(why)}."

    shown, note = thin(df, ctx.seed)
    if arms:
        groups = [{"label": a, "x": shown.loc[shown["arm"] == a, "baseline"].tolist(),
                   "y": shown.loc[shown["arm"] == a, "followup"].tolist()} for a in arms]
    else:
        groups = [{"label": "All participants", "x": shown["baseline"].tolist(), "y": shown["followup"].tolist()}]
    sx, sy = smooth_curve(b, f)
    figure = Figure("prepost-scatter", "scatter_identity",
                    f"{data.spec.display_name}: follow-up against baseline",
                    {"groups": groups, "smooth": {"x": sx, "y": sy},
                     "xlabel": _axis(data.spec, "Baseline"), "ylabel": _axis(data.spec, "Follow-up")},
                    caption="Dashed: identity line (follow-up = baseline). Solid: LOWESS smooth, pooled." + note,
                    by_arm=bool(arms))
    return result(check, data, verdict, headline, subfindings=subs, estimates=estimates, tables=tables,
                  figures=[figure],
                  references=cite(["frison-pocock-1992", "clifton-2019", "fieller-1957", "cleveland-1979"]),
                  method="Pearson r with Fisher z interval; Spearman rho with the Fieller-Hartley-Pearson "
                         "interval; least-squares slope of follow-up on baseline with arm as a factor; "
                         "t-based 95% CI.")


def _axis(spec, what: str) -> str:
    unit = f" ({spec.unit})" if spec.unit else ""
    return f"{what}{unit}"
