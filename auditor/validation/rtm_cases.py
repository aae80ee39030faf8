"""Known-truth trials for the regression-to-the-mean check, shared by the calibration benchmark and
the per-outcome calibration.

Screening, baseline and follow-up are three readings of a true level T ~ N(50, rho sigma^2), with
sigma 10 and reliability rho 0.6, each reading T plus an independent error of variance
(1 - rho) sigma^2, so that a reading has SD sigma; the active arm (half the participants, at random) has a treatment
effect of -2 on follow-up. ``selected``: only people whose baseline reaches its 70th percentile in
the population enter, and the trial reports within-arm change as the effect, which regression to the
mean biases by an expected -(1 - rho) sigma phi(z) / (1 - Phi(z)) = -0.46 SD at z = Phi^-1(0.7)
(Barnett, van der Pols and Dobson 2005): the violation. Not selected: the same trial without an
entry criterion and a between-arm effect: the null.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

MU, SIGMA, RELIABILITY = 50.0, 10.0, 0.6
ENTRY_QUANTILE = 0.7
EFFECT = -2.0


def entry_trial(rng, total: int, selected: bool, planned: str):
    """One simulated two-arm trial of ``total`` participants (``OutcomeData``), as described above,
    with ``planned`` as its planned analysis. Participants are drawn in batches of 4 x ``total``
    until enough pass the entry criterion."""
    from ..metadata import OutcomeSpec
    from ..study import OutcomeData

    cut = MU + SIGMA * stats.norm.ppf(ENTRY_QUANTILE)
    kept: list[np.ndarray] = []
    count = 0
    while count < total:
        t = rng.normal(MU, math.sqrt(RELIABILITY) * SIGMA, 4 * total)
        s, b, f = (t + rng.normal(0, math.sqrt(1 - RELIABILITY) * SIGMA, 4 * total) for _ in range(3))
        keep = b >= cut if selected else np.ones(len(b), bool)
        kept.append(np.column_stack([s[keep], b[keep], f[keep]]))
        count += int(keep.sum())
    s, b, f = np.vstack(kept)[:total].T
    active = rng.permutation(np.arange(total) % 2)
    f = f + EFFECT * active
    spec = OutcomeSpec(param="SIM", scale="continuous", baseline_visit="B", screening_visit="S",
                       followup_visits=["F"], planned_analysis=planned,
                       effect_basis="within-arm-change" if selected else "between-arm",
                       entry_criterion={"visit": "B", "operator": ">=", "value": float(cut)} if selected else None)
    frame = pd.DataFrame({"subject": [f"S{i:05d}" for i in range(total)],
                          "arm": np.where(active == 1, "Active", "Control"),
                          "baseline": b, "followup": f, "fu:F": f, "screening": s})
    return OutcomeData(spec=spec, frame=frame, arms=["Control", "Active"], control_arm="Control",
                       design="parallel", derived_columns=[])
