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

SUBFINDINGS = ("selection", "linearity", "scale", "bounds", "interval", "slope", "efficiency")


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


def _censored_at_zero(rng, n, centre, spread, noise, effect):
    """Baseline and follow-up from a shared latent normal, each with its own noise, censored at 0;
    the active arm lowers the follow-up by ``effect``."""
    a = _arm(rng, n)
    latent = rng.normal(centre, spread, n)
    b = np.maximum(0, latent + rng.normal(0, noise, n))
    f = np.maximum(0, latent - effect * a + rng.normal(0, noise, n))
    return b, f, a


def _floor(rng, n):
    return _censored_at_zero(rng, n, centre=1.0, spread=2.0, noise=0.7, effect=0.5)


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
    Scenario("weak correlation", "efficiency", _weak, description="slope 0.3, r 0.3: change needs about 54% more "
             "participants than ANCOVA"),
    Scenario("concave relation", "linearity", _concave, description="follow-up = baseline - 0.02 (baseline - 50)^2"),
    Scenario("multiplicative error", "scale", _multiplicative, description="log-normal, error proportional to level"),
    Scenario("floor effect", "bounds", _floor, bounds=(0.0, float("inf")), description="about a third at 0"),
    Scenario("truncated baseline", "selection", _truncated, description="only baseline > 55 kept; no criterion declared"),
    Scenario("ordinal scale", "interval", _ordinal, description="five integer levels"),
]


def outcome_data_for(b, f, a, bounds=None, planned="change", scale="continuous", levels=None) -> OutcomeData:
    spec = OutcomeSpec(param="SIM", label="simulated", scale=scale, bounds=None if levels else bounds, levels=levels,
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


# ----------------------------------------------------------------------------- verdict-level scenarios


def bivariate(slope: float, r: float, sd_baseline: float = 10.0, effect: float = 2.0):
    """Bivariate-normal trial: follow-up = 50 + slope (baseline - 50) + effect arm + e, with the error SD
    chosen so that corr(baseline, follow-up) = r within arm. The follow-up SD is then slope sd_b / r, so
    slope 1 with r < 1 means follow-up more variable than baseline; the change/ANCOVA sample-size ratio
    is 1 + (slope - 1)^2 r^2 / (slope^2 (1 - r^2)) (Frison and Pocock 1992 with unequal variances)."""
    sd_e = abs(slope) * sd_baseline * np.sqrt(1 - r * r) / r

    def make(rng, n):
        a = _arm(rng, n)
        b = rng.normal(50, sd_baseline, n)
        return b, 50 + slope * (b - 50) + effect * a + rng.normal(0, sd_e, n), a
    return make


def true_cost(slope: float, r: float) -> float:
    """The population change/ANCOVA sample-size ratio of :func:`bivariate`."""
    return 1 + (slope - 1) ** 2 * r * r / (slope * slope * (1 - r * r))


def _floor40(rng, n):
    """About 40% of baseline and follow-up values at a floor of 0 (a latent normal censored at 0)."""
    return _censored_at_zero(rng, n, centre=0.35, spread=1.4, noise=0.5, effect=0.3)


@dataclass(frozen=True)
class VerdictScenario:
    name: str
    make: Callable[[np.random.Generator, int], tuple[np.ndarray, np.ndarray, np.ndarray]]
    n: int
    """Participants in total (two arms of n / 2)."""
    planned: str = "change"
    bounds: tuple | None = None
    levels: list | None = None
    description: str = ""


VERDICT_SCENARIOS = {
    "null-slope1-r08": VerdictScenario("null-slope1-r08", bivariate(1.0, 0.8), 200,
                                       description="change planned, every assumption true: bivariate normal, slope 1, "
                                                   "r 0.8, 100 per arm (true cost 0%)"),
    "null-slope1-r045": VerdictScenario("null-slope1-r045", bivariate(1.0, 0.45), 200,
                                        description="change planned, slope 1, r 0.45, follow-up SD 2.2 times baseline "
                                                    "SD, 100 per arm: change as efficient as ANCOVA (true cost 0%)"),
    "ancova-slope05": VerdictScenario("ancova-slope05", bivariate(0.5, 0.5), 200, planned="follow-up-adjusted",
                                      description="ANCOVA planned, slope 0.5, r 0.5, 100 per arm"),
    "change-slope05": VerdictScenario("change-slope05", bivariate(0.5, 0.5), 800,
                                      description="change planned, slope 0.5, r 0.5, 400 per arm (true cost 33%)"),
    "floor40": VerdictScenario("floor40", _floor40, 200, bounds=(0.0, float("inf")),
                               description="change planned, about 40% of values at a floor of 0, 100 per arm"),
    "ordinal04": VerdictScenario("ordinal04", _ordinal, 200, levels=[0, 1, 2, 3, 4],
                                 description="change planned on a declared 0-4 ordinal score, 100 per arm"),
    "large-slope097": VerdictScenario("large-slope097", bivariate(0.97, 0.8), 4000,
                                      description="change planned, slope 0.97, r 0.8, 2,000 per arm (true cost 0.2%)"),
}


def verdict_rates(scenario: VerdictScenario, replicates: int, seed: int, n: int | None = None) -> dict[str, float]:
    """Share of replicates with each overall verdict, and with each sub-finding flagged ("flag:<id>")."""
    from ..checks.change_score import run

    rng = np.random.default_rng(seed)
    ctx = CheckContext(seed=seed, blinded=False, quick=True)
    counts: dict[str, float] = {"sound": 0, "caution": 0, "unsupported": 0, "not assessable": 0,
                                **{f"flag:{k}": 0 for k in SUBFINDINGS}}
    for _ in range(replicates):
        b, f, a = scenario.make(rng, n or scenario.n)
        res = run(outcome_data_for(b, f, a, scenario.bounds, scenario.planned,
                                   "ordinal" if scenario.levels else "continuous", scenario.levels), ctx)
        counts[res.verdict.value] += 1
        for s in res.subfindings:
            counts[f"flag:{s.id}"] += s.verdict.value != "sound"
    return {k: v / replicates for k, v in counts.items()}
