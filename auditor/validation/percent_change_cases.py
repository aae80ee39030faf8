"""Known-truth scenarios for the percent-change check, shared by the self-check, the tests and the
calibration benchmark.

Two arms of equal size. ``multiplicative``: log baseline N(log 100, 0.5^2), follow-up = baseline x
0.8 on the active arm x a log-normal error of SD 0.05, so percent change and the log ratio carry
the same information and percent change costs nothing material against the log-scale ANCOVA (the
null). ``additive``: baseline uniform on 2 to 30, follow-up = baseline - 3 on the active arm +
N(0, 2^2): dividing an additive change by a baseline that varies fifteenfold throws information away
(Vickers 2001), so the cost is material (the violation). ``responder``: a normal outcome with
follow-up = 0.4 baseline + 1.8 - 0.3 on the active arm + N(0, 0.45^2) and a responder rule "change at
most -0.5", which by normal theory needs about three times the participants of ANCOVA (Altman and
Royston 2006).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

ARMS = ["C", "T"]


def simulate(rng, scenario: str, n: int = 200):
    """(baseline, follow-up, arm labels) of one simulated trial."""
    arm = np.where(rng.permutation(np.arange(n) % 2) == 1, ARMS[1], ARMS[0])
    active = arm == ARMS[1]
    if scenario == "multiplicative":
        lb = rng.normal(np.log(100), 0.5, n)
        return np.exp(lb), np.exp(lb + np.log(0.8) * active + rng.normal(0, 0.05, n)), arm
    if scenario == "additive":
        b = rng.uniform(2, 30, n)
        return b, b - 3.0 * active + rng.normal(0, 2, n), arm
    if scenario == "responder":
        b = rng.normal(3, 0.7, n)
        return b, 0.4 * b + 1.8 - 0.3 * active + rng.normal(0, 0.45, n), arm
    raise ValueError(f"unknown scenario {scenario!r}")


def outcome_data_for(b, f, arm, scenario: str):
    from ..metadata import OutcomeSpec, ResponderRule
    from ..study import OutcomeData

    responder = scenario == "responder"
    spec = OutcomeSpec(param="PC", label="simulated", scale="continuous", baseline_visit="B", followup_visits=["F"],
                       planned_analysis="responder" if responder else "percent-change",
                       responder=ResponderRule(basis="change", threshold=-0.5, direction="at-most")
                       if responder else None)
    frame = pd.DataFrame({"subject": [f"S{i:05d}" for i in range(len(b))], "arm": arm, "baseline": b,
                          "followup": f, "fu:F": f})
    return OutcomeData(spec=spec, frame=frame, arms=ARMS, control_arm=ARMS[0], design="parallel",
                       derived_columns=[])


def verdict_rates(scenario: str, replicates: int, seed: int, n: int = 200, thresholds=None) -> dict[str, float]:
    """Share of simulated trials given each verdict by the percent-change check (quick mode)."""
    from ..checks.percent_change import run
    from ..checks.registry import CheckContext
    from ..metadata import Thresholds

    rng = np.random.default_rng(seed)
    counts = {"sound": 0, "caution": 0, "unsupported": 0, "not assessable": 0}
    for rep in range(replicates):
        b, f, arm = simulate(rng, scenario, n)
        ctx = CheckContext(seed=seed + rep, blinded=False, quick=True, thresholds=thresholds or Thresholds())
        counts[run(outcome_data_for(b, f, arm, scenario), ctx).verdict.value] += 1
    return {k: v / replicates for k, v in counts.items()}
