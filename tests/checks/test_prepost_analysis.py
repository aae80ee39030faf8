"""Pre-post analysis: the pooled smooth its figure draws, checked on the Analysis itself."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from auditor.checks.prepost import analyse
from auditor.checks.registry import CheckContext
from auditor.metadata import OutcomeSpec
from auditor.study import OutcomeData

CTX = CheckContext(seed=1, blinded=False, quick=True)
SPEC = OutcomeSpec(param="SIM", scale="continuous", baseline_visit="B", followup_visits=["F"],
                   planned_analysis="follow-up-adjusted")


def _data(b, f):
    n = len(b)
    arm = np.where(np.arange(n) % 2 == 1, "B", "A")
    frame = pd.DataFrame({"subject": [f"S{i}" for i in range(n)], "arm": arm, "baseline": b, "followup": f,
                          "fu:F": f})
    return OutcomeData(SPEC, frame, ["A", "B"], "A", "parallel", [])


def test_smooth_of_an_exact_line_is_that_line_on_a_grid_over_the_baseline_range():
    """Known truth: a local linear smoother reproduces a straight line exactly (each local weighted
    least-squares fit of exact linear data is the line itself; Cleveland 1979, from memory)."""
    b = np.random.default_rng(3).uniform(5, 15, 200)
    an = analyse(_data(b, 3 + 0.6 * b), CTX)
    sx, sy = an.smooth
    assert len(sx) == 60 and sx[0] == pytest.approx(b.min()) and sx[-1] == pytest.approx(b.max())
    np.testing.assert_allclose(sy, 3 + 0.6 * np.array(sx), atol=1e-9)


def test_smooth_matches_statsmodels_lowess_on_noisy_data():
    """Reference library: statsmodels' lowess with frac 2/3 and 3 robustness iterations at the grid."""
    from statsmodels.nonparametric.smoothers_lowess import lowess

    rng = np.random.default_rng(4)
    b = rng.normal(10, 2, 300)
    f = 3 + 0.6 * b + 0.1 * (b - 10) ** 2 + rng.normal(0, 1, 300)
    sx, sy = analyse(_data(b, f), CTX).smooth
    np.testing.assert_allclose(sy, lowess(f, b, frac=2 / 3, it=3, xvals=np.linspace(b.min(), b.max(), 60)),
                               rtol=1e-12)


def test_no_smooth_with_fewer_than_four_distinct_baselines():
    # Four distinct baselines is the least the smooth is drawn from: a convention of this tool, no source.
    b = np.tile([1.0, 2.0, 3.0], 20)
    assert analyse(_data(b, b + np.random.default_rng(5).normal(0, 1, 60)), CTX).smooth == ([], [])
