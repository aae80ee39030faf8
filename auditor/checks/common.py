"""Small helpers shared by checks: building results, complete pairs, formatting numbers."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..results import CheckResult, Estimate, Figure, SubFinding, Table, Verdict
from ..study import OutcomeData
from .registry import CheckContext, NotAssessable


@dataclass
class Sections:
    """What the sections of a check accumulate, in report order, before its result is composed."""

    subfindings: list[SubFinding] = field(default_factory=list)
    estimates: list[Estimate] = field(default_factory=list)
    tables: list[Table] = field(default_factory=list)
    figures: list[Figure] = field(default_factory=list)
    caveats: list[str] = field(default_factory=list)
    references: list[str] = field(default_factory=list)

    def sub(self, id_, question, verdict, evidence, by_arm=False) -> None:
        self.subfindings.append(SubFinding(id_, question, verdict, evidence, by_arm))

    def cite(self, *keys: str) -> None:
        """Add reference keys not yet cited, in the order first cited."""
        self.references += [k for k in keys if k not in self.references]


def fmt(x: float | None, digits: int = 2) -> str:
    """A number for a headline: fixed decimals for moderate values, 3 significant digits otherwise."""
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    if x != 0 and (abs(x) >= 10_000 or abs(x) < 10 ** -digits):
        return f"{x:.3g}"
    return f"{x:.{digits}f}"


def fmt_ci(est: float, lo: float, hi: float, digits: int = 2) -> str:
    return f"{fmt(est, digits)} ({fmt(lo, digits)} to {fmt(hi, digits)})"


def fmt_p(p: float | None) -> str:
    if p is None or not math.isfinite(p):
        return "p n/a"
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def complete_pairs(data: OutcomeData, min_n: int = 10) -> pd.DataFrame:
    """Participants with both a baseline and a main follow-up value (and an arm)."""
    if "baseline" not in data.frame.columns:
        raise NotAssessable("the outcome has no baseline visit")
    df = data.frame.dropna(subset=["baseline", "followup", "arm"])
    if len(df) < min_n:
        raise NotAssessable(f"only {len(df)} participants have both a baseline and a follow-up value "
                            f"(at least {min_n} are needed)")
    if np.ptp(df["baseline"].to_numpy()) == 0:
        raise NotAssessable("the baseline value is the same for every participant")
    if np.ptp(df["followup"].to_numpy()) == 0:
        raise NotAssessable("the follow-up value is the same for every participant")
    return df.reset_index(drop=True)


def arms_present(df: pd.DataFrame, data: OutcomeData, ctx: CheckContext) -> list[str]:
    """Arms with at least 2 participants in ``df``, in metadata order; empty when blinded."""
    if ctx.blinded or data.design == "single-arm":
        return []
    counts = df["arm"].value_counts()
    return [a for a in data.arms if counts.get(a, 0) >= 2]


MAX_FIGURE_POINTS = 2000
"""Scatter figures draw at most this many participants (a seeded random subset beyond it), so that
reports of large trials stay readable and quick to render; every statistic uses all participants."""


def thin(df: pd.DataFrame, seed: int, limit: int = MAX_FIGURE_POINTS) -> tuple[pd.DataFrame, str]:
    """A reproducible random subset of rows for drawing, and a caption note when one was taken."""
    if len(df) <= limit:
        return df, ""
    idx = np.sort(np.random.default_rng(seed).choice(len(df), size=limit, replace=False))
    return df.iloc[idx], f" Points: a random {limit:,} of {len(df):,} participants."


def estimate(name: str, est: float, lo: float | None = None, hi: float | None = None,
             p: float | None = None, unit: str = "", note: str = "", by_arm: bool = False, key: str = "",
             arm: str = "") -> Estimate:
    """One estimate row; ``key`` is its stable identifier (see :attr:`auditor.results.Estimate.key`)."""
    return Estimate(name, est, lo, hi, p, unit, note, by_arm, key, arm)


def result(check, data: OutcomeData, verdict: Verdict, headline: str, **kw) -> CheckResult:
    return CheckResult(check_id=check.id, check_title=check.title, outcome=data.spec.param,
                       outcome_label=data.spec.display_name, verdict=verdict, headline=headline, **kw)


def not_assessable(check, spec, reason: str) -> CheckResult:
    return CheckResult(check_id=check.id, check_title=check.title, outcome=spec.param,
                       outcome_label=spec.display_name, verdict=Verdict.NOT_ASSESSABLE,
                       headline=f"Not assessable: {reason}.", reason=reason)
