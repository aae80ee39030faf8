"""Treatment arms in a design, and the one record of an arm-versus-control effect.

Arms enter a model as 0/1 indicator columns against the control arm (treatment coding). The column
names are made here and nowhere else, and :class:`ArmCoding` keeps, beside the columns, one
:class:`ArmContrast` per column saying which arm it compares with which control, so that every
consumer reads the labels from the record and never from a column's name.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class ArmContrast:
    """One indicator column of a design: ``arm`` against ``control``."""

    column: str
    arm: str
    control: str

    @property
    def label(self) -> str:
        """``<arm> vs <control>``."""
        return f"{self.arm} vs {self.control}"


@dataclass(frozen=True)
class ArmCoding:
    """Treatment-coded arm columns (full length, in the order of ``contrasts``) and their contrasts."""

    columns: dict[str, np.ndarray]
    contrasts: tuple[ArmContrast, ...]

    def contrast(self, column: str) -> ArmContrast:
        """The contrast of indicator column ``column``."""
        return next(c for c in self.contrasts if c.column == column)

    def column_of(self, arm: str | None) -> str | None:
        """The indicator column of ``arm``; None for the control (or no arm)."""
        return next((c.column for c in self.contrasts if c.arm == arm), None)

    def subset(self, rows) -> ArmCoding:
        """The same coding restricted to ``rows`` (a boolean mask or an index array)."""
        return ArmCoding({k: np.asarray(v, dtype=float)[rows] for k, v in self.columns.items()}, self.contrasts)

    def indicator_values(self, arm: str | None) -> dict[str, float]:
        """Each column's value for a participant on ``arm`` (all 0 for the control)."""
        return {c.column: float(c.arm == arm) for c in self.contrasts}


NO_ARMS = ArmCoding({}, ())
"""The coding of a pooled (single-arm or blinded) analysis: no arm columns."""


def arm_coding(arm, arms: list[str], control: str | None) -> ArmCoding:
    """0/1 columns for each non-control arm against the control (the first arm when none is named)."""
    arm = np.asarray(arm, dtype=object)
    ref = control if control is not None else arms[0]
    contrasts = tuple(ArmContrast(f"arm[{a}]", a, ref) for a in arms if a != ref)
    return ArmCoding({c.column: (arm == c.arm).astype(float) for c in contrasts}, contrasts)


@dataclass(frozen=True)
class ArmEffect:
    """One arm-versus-control effect under one analysis, on that analysis's own scale.

    ``statistic`` is estimate / se (a t statistic for least squares, a Wald z otherwise), the currency
    in which analyses on different scales are compared; ``df`` is the residual degrees of freedom of a
    t-based interval (None for a normal one); ``visit`` names the visit of a longitudinal effect.
    """

    analysis: str
    arm: str
    control: str
    estimate: float
    se: float
    lower: float
    upper: float
    statistic: float
    p_value: float
    n: int | None = None
    df: float | None = None
    visit: str | None = None

    @property
    def label(self) -> str:
        """``<arm> vs <control>``."""
        return f"{self.arm} vs {self.control}"

    def exp(self) -> tuple[float, float, float]:
        """(exp(estimate), exp(lower), exp(upper)): a ratio from a log-scale effect."""
        return math.exp(self.estimate), math.exp(self.lower), math.exp(self.upper)


def arm_effect(analysis: str, contrast: ArmContrast, fit, level: float, n: int | None = None,
               visit: str | None = None, column: str | None = None) -> ArmEffect:
    """The effect of ``contrast`` read from a :class:`~auditor.stats.fitrecord.FitRecord` by its Wald test
    (parameter ``column``, by default the contrast's own column)."""
    w = fit.wald(column or contrast.column, level)
    return ArmEffect(analysis, contrast.arm, contrast.control, w.estimate, w.se, w.lower, w.upper, w.z,
                     w.p_value, n, fit.reference_df, visit)
