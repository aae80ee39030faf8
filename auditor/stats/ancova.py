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

from .effects import ArmCoding, ArmEffect, arm_coding, arm_effect
from .linear import LinearFit, f_test, fit_ols
from .splines import SplinePlan, flexible_basis


def _effects(fit: LinearFit, analysis: str, coding: ArmCoding, level: float = 0.95) -> list[ArmEffect]:
    return [arm_effect(analysis, c, fit, level) for c in coding.contrasts]


def spline_columns(baseline, plan: SplinePlan) -> dict:
    basis = flexible_basis(baseline, plan)
    return {"baseline": basis[:, 0], **{f"baseline~{j}": basis[:, j] for j in range(1, basis.shape[1])}}


@dataclass(frozen=True)
class AnalysisSet:
    effects: list[ArmEffect]
    linear: LinearFit
    spline: LinearFit


def fit_analyses(baseline, followup, arm, arms: list[str], control: str, plan: SplinePlan,
                 level: float = 0.95) -> AnalysisSet:
    """Fit the four analyses; arms must have at least two levels present; t intervals at ``level``."""
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    coding = arm_coding(arm, arms, control)
    cols = coding.columns
    fu = fit_ols(f, dict(cols))
    ch = fit_ols(f - b, dict(cols))
    lin = fit_ols(f, {"baseline": b, **cols})
    spl = fit_ols(f, {**spline_columns(b, plan), **cols})
    effects = (_effects(fu, "follow-up only", coding, level) + _effects(ch, "change score", coding, level)
               + _effects(lin, "ANCOVA, linear baseline", coding, level)
               + _effects(spl, "ANCOVA, spline baseline", coding, level))
    return AnalysisSet(effects, lin, spl)


def fit_analyses_categorical(baseline, followup, arm, arms: list[str], control: str, category_cols: dict,
                             level: float = 0.95) -> list[ArmEffect]:
    """The four analyses with the flexible ANCOVA taking baseline as categories instead of a spline.

    For a baseline with few distinct values, Y1 = a + sum_j g_j [Y0 = v_j] + d*arm + e (one indicator
    per baseline value after the first, or columns spanning the same space, ``category_cols``) makes no assumption about the shape of the
    baseline relation at all; the other three analyses are as in :func:`fit_analyses`. Effects in
    the order follow-up only, change score, linear ANCOVA, categorical ANCOVA (Frison and Pocock,
    Stat Med 1992;11:1685; the categorical adjustment is ordinary least squares with a factor for
    baseline, which spans any function of a baseline with that many values).
    """
    b, f = np.asarray(baseline, dtype=float), np.asarray(followup, dtype=float)
    coding = arm_coding(arm, arms, control)
    cols = coding.columns
    out: list[ArmEffect] = []
    for name, y, extra in (("follow-up only", f, {}), ("change score", f - b, {}),
                           ("ANCOVA, linear baseline", f, {"baseline": b}),
                           ("ANCOVA, baseline as categories", f, category_cols)):
        out += _effects(fit_ols(y, {**extra, **cols}), name, coding, level)
    return out


def linearity_test(baseline, followup, other_columns: dict, plan: SplinePlan):
    """F test of the spline (or quadratic) in baseline against the linear term, other terms kept.

    Returns (test, linear fit, flexible fit)."""
    b = np.asarray(baseline, dtype=float)
    f = np.asarray(followup, dtype=float)
    lin = fit_ols(f, {"baseline": b, **other_columns})
    flex = fit_ols(f, {**spline_columns(b, plan), **other_columns})
    return f_test(lin, flex), lin, flex


def categorical_linearity_test(baseline, followup, other_columns: dict, category_cols: dict):
    """F test of baseline entered as categories against the linear term, other terms kept.

    ``category_cols``: the columns of :func:`.diagnostics.category_columns` (the linear term and one
    indicator a level from the third on). Returns (test, flexible fit); the test is None when they are
    the linear term alone (two levels: the line fits each level exactly, so the models coincide)."""
    b = np.asarray(baseline, dtype=float)
    lin = fit_ols(followup, {"baseline": b, **other_columns})
    flex = fit_ols(followup, {**category_cols, **other_columns})
    return (f_test(lin, flex) if len(category_cols) > 1 else None), flex


def interaction_test(baseline, followup, arm, arms, control):
    """Treatment-by-baseline interaction in the ANCOVA: F test of arm x baseline product terms."""
    b = np.asarray(baseline, dtype=float)
    coding = arm_coding(arm, arms, control)
    cols = coding.columns
    centred = b - b.mean()
    main = fit_ols(followup, {"baseline": centred, **cols})
    inter = fit_ols(followup, {"baseline": centred, **cols,
                               **{f"{k} x baseline": v * centred for k, v in cols.items()}})
    return f_test(main, inter)
