"""The usual analyses of a trial with a baseline, fitted side by side on the same participants.

- follow-up only:      Y1 = a + d*arm + e
- change score:        Y1 - Y0 = a + d*arm + e
- ANCOVA, linear:      Y1 = a + b*Y0 + d*arm + e
- ANCOVA, spline:      Y1 = a + s(Y0) + d*arm + e, s a restricted cubic spline (or a quadratic)

(Vickers and Altman, BMJ 2001;323:1123; Frison and Pocock, Stat Med 1992;11:1685.) The treatment effect d is
reported for each non-control arm against the control.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .linear import LinearFit, arm_indicators, f_test, fit_ols
from .splines import SplinePlan, flexible_basis


@dataclass(frozen=True)
class Effect:
    analysis: str
    contrast: str
    estimate: float
    se: float
    lower: float
    upper: float
    p_value: float
    df: float


def _effects(fit: LinearFit, analysis: str, arm_cols: dict) -> list[Effect]:
    out = []
    for name in arm_cols:
        est, lo, hi = fit.ci(name)
        out.append(Effect(analysis, name[4:-1], est, float(fit.se[fit.index(name)]), lo, hi, fit.p_value(name),
                          fit.df_resid))
    return out


def spline_columns(baseline, plan: SplinePlan) -> dict:
    basis = flexible_basis(baseline, plan)
    return {"baseline": basis[:, 0], **{f"baseline~{j}": basis[:, j] for j in range(1, basis.shape[1])}}


@dataclass(frozen=True)
class AnalysisSet:
    effects: list[Effect]
    linear: LinearFit
    spline: LinearFit


def fit_analyses(baseline, followup, arm, arms: list[str], control: str, plan: SplinePlan) -> AnalysisSet:
    """Fit the four analyses; arms must have at least two levels present."""
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    cols = arm_indicators(arm, arms, control)
    fu = fit_ols(f, dict(cols))
    ch = fit_ols(f - b, dict(cols))
    lin = fit_ols(f, {"baseline": b, **cols})
    spl = fit_ols(f, {**spline_columns(b, plan), **cols})
    effects = (_effects(fu, "follow-up only", cols) + _effects(ch, "change score", cols)
               + _effects(lin, "ANCOVA, linear baseline", cols) + _effects(spl, "ANCOVA, spline baseline", cols))
    return AnalysisSet(effects, lin, spl)


def linearity_test(baseline, followup, other_columns: dict, plan: SplinePlan):
    """F test of the spline (or quadratic) in baseline against the linear term, other terms kept.

    Returns (test, linear fit, flexible fit)."""
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    lin = fit_ols(f, {"baseline": b, **other_columns})
    flex = fit_ols(f, {**spline_columns(b, plan), **other_columns})
    return f_test(lin, flex), lin, flex


def interaction_test(baseline, followup, arm, arms, control):
    """Treatment-by-baseline interaction in the ANCOVA: F test of arm x baseline product terms."""
    b = np.asarray(baseline, dtype=float)
    cols = arm_indicators(arm, arms, control)
    centred = b - b.mean()
    main = fit_ols(followup, {"baseline": centred, **cols})
    inter = fit_ols(followup, {"baseline": centred, **cols,
                               **{f"{k} x baseline": v * centred for k, v in cols.items()}})
    return f_test(main, inter)
