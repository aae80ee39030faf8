"""Count-time analysis: the numbers its table and figure show, checked on the Analysis itself (no
sentence read) against outside implementations (pandas, scipy, statsmodels)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from auditor.checks.count_time import analyse
from auditor.checks.registry import CheckContext
from auditor.study import OutcomeData
from auditor.validation import count_time_cases as cases

CTX = CheckContext(seed=1, blinded=False, quick=True)


def _three_arms(rng):
    frame = cases.simulate(rng, n=450, days_active=(10, 20))
    frame.loc[frame.index % 3 == 2, "arm"] = "Other"
    return OutcomeData(cases.count_spec(), frame, ["Placebo", "Active", "Other"], "Placebo", "parallel", [])


def test_each_arms_times_match_pandas_quantiles_and_the_pooled_threshold():
    """Median and quartiles by pandas' groupby quantile (linear interpolation, an implementation of
    its own); the share below 80% of the pooled median counted directly; df of the Kruskal-Wallis
    test is the number of arms less one and its statistic that of scipy.stats.kruskal."""
    an = analyse(_three_arms(np.random.default_rng(8)), CTX)
    df = an.df
    pooled = df["followup_time"].median()
    by = df.groupby("arm")["followup_time"]
    tba = an.times_by_arm
    assert [a for a, _ in tba.arms] == ["Placebo", "Active", "Other"]
    for arm, g in tba.arms:
        t = by.get_group(arm)
        assert g.n == len(t)
        assert (g.median, g.lower_quartile, g.upper_quartile) == pytest.approx(
            (t.quantile(0.5), t.quantile(0.25), t.quantile(0.75)), rel=1e-12)
        assert g.share_short == pytest.approx(sum(t < 0.8 * pooled) / len(t), rel=1e-12)
    h, p = stats.kruskal(*(by.get_group(a) for a in ["Placebo", "Active", "Other"]))
    assert tba.df == 2 and (tba.statistic, tba.p) == pytest.approx((h, p), rel=1e-9)


def test_expected_counts_are_the_statsmodels_rate_models_predictions():
    """The figure's lines: the Poisson GLM with log time as offset (statsmodels, reference library)
    predicts, at the median log baseline rate and each arm, time x exp(linear predictor)."""
    import statsmodels.api as sm

    an = analyse(cases.outcome_data_for(cases.simulate(np.random.default_rng(5), n=400, days_active=(10, 20))),
                 CTX)
    names = list(an.cols)
    x = sm.add_constant(np.column_stack([an.cols[k] for k in names]))
    ref = sm.GLM(an.df["followup"].to_numpy(float), x, family=sm.families.Poisson(),
                 offset=np.log(an.df["followup_time"].to_numpy(float))).fit()
    base = float(np.median(an.cols["log baseline rate"]))
    times = an.df["followup_time"].to_numpy(float)
    for c in an.expected:
        arm_col = an.coding.column_of(c.label)
        row = [1.0] + [base if k == "log baseline rate" else float(k == arm_col) for k in names]
        assert np.array_equal(c.time, np.linspace(times.min(), times.max(), 40))
        want = ref.predict(np.tile(row, (len(c.time), 1)), offset=np.log(c.time))
        np.testing.assert_allclose(c.count, want, rtol=1e-6)
    assert [c.label for c in an.expected] == ["Placebo", "Active"]


def test_largest_is_the_comparison_moved_furthest_from_one():
    """The headline's comparison: the largest |log(count ratio / rate ratio)| over the contrasts."""
    an = analyse(_three_arms(np.random.default_rng(9)), CTX)
    logs = [abs(math.log(c["shift"].estimate)) for c in an.comparisons]
    assert len(logs) == 2 and an.largest is an.comparisons[int(np.argmax(logs))]
    single = cases.simulate(np.random.default_rng(7), days_active=(10, 28)).assign(arm="Active")
    alone = analyse(OutcomeData(cases.count_spec(), single, ["Active"], None, "single-arm", []), CTX)
    assert alone.largest is None and alone.times_by_arm is None
