"""A longitudinal model with post-baseline visits as responses and baseline as a covariate only.

    Y_iv = a_v + b_v [arm_i] + c Y_i0 + u_i + e_iv,   u_i ~ N(0, tau^2), e_iv ~ N(0, sigma^2)

fitted by restricted maximum likelihood (statsmodels MixedLM, random intercept per participant).
Baseline is never a response, so its information is used once (the constrained
longitudinal alternatives are discussed by Liu et al., Stat Med 2009;28:2509-2530).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats


@dataclass(frozen=True)
class VisitEffect:
    visit: str
    contrast: str
    estimate: float
    se: float
    lower: float
    upper: float
    p_value: float


def fit_post_baseline_model(frame: pd.DataFrame, visit_columns: list[str], arms: list[str], control: str
                            ) -> list[VisitEffect]:
    """Arm-versus-control effect at each post-baseline visit. ``frame`` holds ``baseline``, ``arm``
    and one column per visit (names in ``visit_columns``)."""
    import statsmodels.api as sm

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
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = sm.MixedLM(long["y"].to_numpy(dtype=float), X, groups=long["pid"].to_numpy()).fit(reml=True)
    params, bse = np.asarray(res.fe_params), np.asarray(res.bse_fe)
    q = stats.norm.ppf(0.975)
    out = []
    for v in visit_columns:
        for a in others:
            i = names.index(f"{a}@{v}")
            est, se = float(params[i]), float(bse[i])
            out.append(VisitEffect(v.removeprefix("fu:"), a, est, se, est - q * se, est + q * se,
                                   float(2 * stats.norm.sf(abs(est / se)))))
    return out
