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

from .effects import ArmContrast, ArmEffect, arm_coding, arm_effect
from .fitnotes import fit_notes
from .fitrecord import FitRecord


@dataclass(frozen=True)
class VisitContrast:
    """The fixed-effect column of one arm-versus-control contrast at one post-baseline visit."""

    column: str
    visit: str
    contrast: ArmContrast


@dataclass(frozen=True)
class PostBaselineFit(FitRecord):
    """The REML fit's fixed effects (normal-theory Wald inference) and its arm contrasts by visit."""

    names: tuple[str, ...]
    params: np.ndarray
    se: np.ndarray
    visit_contrasts: tuple[VisitContrast, ...]
    level: float
    notes: tuple[str, ...]
    """What the fitting routine warned about (see :mod:`auditor.stats.fitnotes`)."""

    @property
    def effects(self) -> list[ArmEffect]:
        """Arm-versus-control effect at each visit, with Wald intervals at ``level``."""
        return [arm_effect("post-baseline visits as responses", v.contrast, self, self.level, visit=v.visit,
                           column=v.column) for v in self.visit_contrasts]


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
    others = arm_coding(long["arm"].to_numpy(), arms, control).contrasts
    cols = {"baseline": long["baseline"].to_numpy(dtype=float)}
    visit_contrasts = []
    for v in visit_columns:
        cols[f"visit[{v}]"] = (long["visit"] == v).to_numpy(dtype=float)
        for c in others:
            column = f"{c.arm}@{v}"
            cols[column] = ((long["visit"] == v) & (long["arm"] == c.arm)).to_numpy(dtype=float)
            visit_contrasts.append(VisitContrast(column, v.removeprefix("fu:"), c))
    names = list(cols)
    X = np.column_stack([cols[k] for k in names])
    with fit_notes() as notes:
        res = MixedLM(long["y"].to_numpy(dtype=float), X, groups=long["pid"].to_numpy()).fit(reml=True)
    params, bse = np.asarray(res.fe_params), np.asarray(res.bse_fe)
    if not bool(getattr(res, "converged", True)) or not (np.all(np.isfinite(params)) and np.all(np.isfinite(bse))):
        raise ArithmeticError("the longitudinal model (post-baseline visits as responses) did not converge")
    return PostBaselineFit(tuple(names), params, bse, tuple(visit_contrasts), level, tuple(notes))
