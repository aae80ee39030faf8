"""Known-truth scenarios for the count-time check, shared by the self-check and the tests.

Counts are gamma-Poisson (each participant's own rate, gamma with shape 2 and mean 1.6 a day, so
overdispersed), observed over whole days: 24 to 28 at baseline, a uniform range of days at follow-up
that may differ by arm. The active arm's true rate ratio is ``ratio``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

ARMS = ["Placebo", "Active"]


def simulate(rng, n: int = 300, ratio: float = 0.75, days_control=(16, 28), days_active=(16, 28)) -> pd.DataFrame:
    """One trial's participant frame: subject, arm, baseline, followup, baseline_time, followup_time."""
    arm = np.where(np.arange(n) % 2 == 0, ARMS[0], ARMS[1])
    active = arm == ARMS[1]
    rate = rng.gamma(2.0, 0.8, n)
    t0 = rng.integers(24, 29, n).astype(float)
    t1 = rng.integers(np.where(active, days_active[0], days_control[0]),
                      np.where(active, days_active[1], days_control[1]) + 1).astype(float)
    y0 = rng.poisson(rate * t0).astype(float)
    y1 = rng.poisson(rate * np.where(active, ratio, 1.0) * t1).astype(float)
    return pd.DataFrame({"subject": [f"S{i:04d}" for i in range(n)], "arm": arm, "baseline": y0,
                         "followup": y1, "baseline_time": t0, "followup_time": t1})


def count_spec(exposure: str | None = "DAYS"):
    from ..metadata import OutcomeSpec

    return OutcomeSpec(param="CNT", label="simulated count", scale="count", bounds=(0, None),
                       baseline_visit="Baseline", followup_visits=["Week 12"], planned_analysis="change",
                       exposure=exposure)


def outcome_data_for(frame: pd.DataFrame, spec=None):
    from ..study import OutcomeData

    return OutcomeData(spec=spec or count_spec(), frame=frame, arms=ARMS, control_arm=ARMS[0],
                       design="parallel", derived_columns=[])


def run_check(frame: pd.DataFrame, seed: int = 1, blinded: bool = False, spec=None):
    from ..checks.count_time import run
    from ..checks.registry import CheckContext

    return run(outcome_data_for(frame, spec), CheckContext(seed=seed, blinded=blinded, quick=True))


def unsupported_rate(replicates: int, seed: int, **scenario) -> float:
    """Share of simulated trials that the check calls unsupported."""
    rng = np.random.default_rng(seed)
    return sum(run_check(simulate(rng, **scenario)).verdict.value == "unsupported"
               for _ in range(replicates)) / replicates


def rate_ratio_coverage(replicates: int, seed: int, ratio: float = 0.75) -> float:
    """Share of simulated trials (active arm's diaries shorter) whose rate-ratio CI covers ``ratio``."""
    rng = np.random.default_rng(seed)
    hits = 0
    for _ in range(replicates):
        res = run_check(simulate(rng, ratio=ratio, days_active=(10, 22)))
        rr = next(e for e in res.estimates if e.name.startswith("Rate ratio"))
        hits += rr.lower <= ratio <= rr.upper
    return hits / replicates
