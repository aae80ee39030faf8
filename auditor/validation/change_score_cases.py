"""Simulated two-arm trials where each change-score assumption holds or fails by construction.

Each scenario names the sub-finding it exists to trip (``target``); the null scenario trips none.
Used by tests/checks/test_change_score.py (a few replicates), benchmarks/validate_change_score.py
(>= 200 replicates) and the self-check, so all three share one definition.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from ..checks.registry import CheckContext
from ..metadata import OutcomeSpec
from ..study import OutcomeData

SUBFINDINGS = ("selection", "linearity", "scale", "bounds", "interval", "slope", "correlation")


@dataclass(frozen=True)
class Scenario:
    name: str
    target: str | None
    """The sub-finding that should fail (None: every sub-finding should hold)."""
    make: Callable[[np.random.Generator, int], tuple[np.ndarray, np.ndarray, np.ndarray]]
    """(baseline, follow-up, arm 0/1) for n participants."""
    bounds: tuple | None = None
    description: str = ""


def _arm(rng, n):
    return rng.permutation(np.arange(n) % 2)


def _holds(rng, n):
    a = _arm(rng, n)
    b = rng.normal(50, 10, n)
    return b, b + 2 * a + rng.normal(0, 4, n), a


def _weak(rng, n):
    a = _arm(rng, n)
    b = rng.normal(50, 10, n)
    return b, 50 + 0.3 * (b - 50) + 2 * a + rng.normal(0, 9.5, n), a


def _concave(rng, n):
    a = _arm(rng, n)
    b = rng.normal(50, 10, n)
    return b, b - 0.02 * (b - 50) ** 2 + 2 * a + rng.normal(0, 4, n), a


def _multiplicative(rng, n):
    a = _arm(rng, n)
    b = np.exp(rng.normal(np.log(50), 0.5, n))
    return b, b * np.exp(0.1 * a + rng.normal(0, 0.25, n)), a


def _floor(rng, n):
    a = _arm(rng, n)
    latent = rng.normal(1.0, 2.0, n)
    b = np.maximum(0, latent + rng.normal(0, 0.7, n))
    f = np.maximum(0, latent - 0.5 * a + rng.normal(0, 0.7, n))
    return b, f, a


def _truncated(rng, n):
    a = _arm(rng, n)
    out_b, out_f = [], []
    while len(out_b) < n:
        t = rng.normal(50, 10, 4 * n)
        b = t + rng.normal(0, 4, 4 * n)
        keep = b > 55
        out_b.extend(b[keep])
        out_f.extend(t[keep] + rng.normal(0, 4, keep.sum()))
    b, f = np.array(out_b[:n]), np.array(out_f[:n])
    return b, f + 2 * a, a


def _ordinal(rng, n):
    a = _arm(rng, n)
    latent = rng.normal(0, 1, n)
    cuts = np.array([-1.0, -0.3, 0.4, 1.1])
    b = np.searchsorted(cuts, latent + rng.normal(0, 0.4, n)).astype(float)
    f = np.searchsorted(cuts, latent - 0.3 * a + rng.normal(0, 0.4, n)).astype(float)
    return b, f, a


SCENARIOS = [
    Scenario("assumptions hold", None, _holds, description="follow-up = baseline + effect + noise; r 0.93"),
    Scenario("weak correlation", "correlation", _weak, description="slope 0.3, r 0.3"),
    Scenario("concave relation", "linearity", _concave, description="follow-up = baseline - 0.02 (baseline - 50)^2"),
    Scenario("multiplicative error", "scale", _multiplicative, description="log-normal, error proportional to level"),
    Scenario("floor effect", "bounds", _floor, bounds=(0.0, float("inf")), description="about a third at 0"),
    Scenario("truncated baseline", "selection", _truncated, description="only baseline > 55 kept; no criterion declared"),
    Scenario("ordinal scale", "interval", _ordinal, description="five integer levels"),
]


def outcome_data_for(b, f, a, bounds=None, planned="change") -> OutcomeData:
    spec = OutcomeSpec(param="SIM", label="simulated", scale="continuous", bounds=bounds,
                       baseline_visit="B", followup_visits=["F"], planned_analysis=planned)
    frame = pd.DataFrame({"subject": [f"S{i:05d}" for i in range(len(b))],
                          "arm": np.where(np.asarray(a) == 1, "Active", "Control"),
                          "baseline": b, "followup": f, "fu:F": f})
    return OutcomeData(spec=spec, frame=frame, arms=["Control", "Active"], control_arm="Control",
                       design="parallel", derived_columns=[])


def run_scenario(scenario: Scenario, n: int, replicates: int, seed: int) -> dict[str, float]:
    """Share of replicates in which each sub-finding was flagged (verdict other than sound)."""
    from ..checks.change_score import run

    rng = np.random.default_rng(seed)
    ctx = CheckContext(seed=seed, blinded=False, quick=True)
    flagged = {k: 0 for k in SUBFINDINGS}
    for _ in range(replicates):
        b, f, a = scenario.make(rng, n)
        res = run(outcome_data_for(b, f, a, scenario.bounds), ctx)
        for s in res.subfindings:
            flagged[s.id] += s.verdict.value != "sound"
    return {k: v / replicates for k, v in flagged.items()}
