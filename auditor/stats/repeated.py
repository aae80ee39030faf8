"""A longitudinal model with post-baseline visits as responses and baseline as a covariate only.

    Y_iv = a_v + b_v [arm_i] + c Y_i0 + u_i + e_iv,   u_i ~ N(0, tau^2), e_iv ~ N(0, sigma^2)

fitted by restricted maximum likelihood (statsmodels MixedLM, random intercept per participant).
Baseline is never a response, so its information is used once (the constrained
longitudinal alternatives are discussed by Liu et al., Stat Med 2009;28:2509-2530).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from .fitnotes import fit_notes


@dataclass(frozen=True)
class VisitEffect:
    visit: str
    contrast: str
    estimate: float
    se: float
    lower: float
    upper: float
    p_value: float


@dataclass(frozen=True)
class PostBaselineFit:
    effects: list[VisitEffect]
    notes: tuple[str, ...]
    """What the fitting routine warned about (see :mod:`auditor.stats.fitnotes`)."""


def fit_post_baseline_model(frame: pd.DataFrame, visit_columns: list[str], arms: list[str], control: str,
                            level: float = 0.95) -> PostBaselineFit:
    """Arm-versus-control effect at each post-baseline visit, with Wald intervals at ``level``.
    ``frame`` holds ``baseline``, ``arm`` and one column per visit (names in ``visit_columns``).

    Raises ``ArithmeticError`` when the REML fit does not converge or gives non-finite effects;
    other warnings of the fitting routine are kept in ``notes``."""
    from statsmodels.regression.mixed_linear_model import MixedLM

    long = frame[["arm", "baseline", *visit_columns]].copy()
    long["pid"] = np.arange(len(long))
    long = long.melt(id_vars=["pid", "arm", "baseline"], value_vars=visit_columns, var_name="visit",
                     value_name="y").dropna()
    others = [a for a in arms if a != control]
    cols = {"baseline": long["baseline"].to_numpy(dtype=float)}
    for v in visit_columns:
        cols[f"visit[{v}]"] = (long["visit"] == v).to_numpy(dtype=float)
        for a in others:
            cols[f"{a}@{v}"] = ((long["visit"] == v) & (long["arm"] == a)).to_numpy(dtype=float)
    names = list(cols)
    X = np.column_stack([cols[k] for k in names])
    with fit_notes() as notes:
        res = MixedLM(long["y"].to_numpy(dtype=float), X, groups=long["pid"].to_numpy()).fit(reml=True)
    params, bse = np.asarray(res.fe_params), np.asarray(res.bse_fe)
    if not bool(getattr(res, "converged", True)) or not (np.all(np.isfinite(params)) and np.all(np.isfinite(bse))):
        raise ArithmeticError("the longitudinal model (post-baseline visits as responses) did not converge")
    q = stats.norm.ppf(0.5 + level / 2)
    out = []
    for v in visit_columns:
        for a in others:
            i = names.index(f"{a}@{v}")
            est, se = float(params[i]), float(bse[i])
            out.append(VisitEffect(v.removeprefix("fu:"), a, est, se, est - q * se, est + q * se,
                                   float(2 * stats.norm.sf(abs(est / se)))))
    return PostBaselineFit(out, tuple(notes))
