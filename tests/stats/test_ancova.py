"""The ANCOVA with baseline as categories, against statsmodels OLS on one indicator per level."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from auditor.stats.ancova import fit_analyses_categorical
from auditor.stats.diagnostics import category_columns


@pytest.mark.parametrize("level", [0.95, 0.90])
def test_categorical_ancova_matches_statsmodels_dummies(level):
    rng = np.random.default_rng(11)
    n = 120
    base = rng.integers(0, 5, size=n).astype(float)
    arm = np.where(np.arange(n) % 2 == 0, "Control", "Active")
    follow = 1 + np.sqrt(base) + 0.7 * (arm == "Active") + rng.normal(size=n)
    levels = sorted(set(base))
    effects = fit_analyses_categorical(base, follow, arm, ["Control", "Active"], "Control",
                                       category_columns(base, levels), level)
    assert [e.analysis for e in effects] == ["follow-up only", "change score", "ANCOVA, linear baseline",
                                            "ANCOVA, baseline as categories"]
    # Reference: statsmodels OLS, one indicator per baseline level after the first, plus the arm.
    dummies = pd.get_dummies(pd.Series(base), prefix="b", drop_first=True, dtype=float)
    X = sm.add_constant(np.column_stack([dummies.to_numpy(), (arm == "Active").astype(float)]))
    ref = sm.OLS(follow, X).fit()
    lo, hi = ref.conf_int(alpha=1 - level)[-1]
    cat = effects[-1]
    assert cat.estimate == pytest.approx(ref.params[-1], rel=1e-10)  # statsmodels OLS params
    assert cat.se == pytest.approx(ref.bse[-1], rel=1e-10)
    assert (cat.lower, cat.upper) == pytest.approx((lo, hi), rel=1e-10)  # statsmodels conf_int
    assert cat.p_value == pytest.approx(ref.pvalues[-1], rel=1e-8)
    # The change score: OLS of follow-up minus baseline on the arm alone.
    ch = sm.OLS(follow - base, sm.add_constant((arm == "Active").astype(float))).fit()
    assert effects[1].estimate == pytest.approx(ch.params[-1], rel=1e-10)
