"""The one likelihood-ratio test: against statsmodels' own LR test of nested logit models."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from auditor.stats.logistic import fit_logistic, lr_test
from auditor.stats.lrtest import likelihood_ratio


def test_matches_statsmodels_compare_lr_test():
    """statsmodels' ``compare_lr_test`` (OLS) gives 2 (llf_full - llf_reduced), its df and p."""
    rng = np.random.default_rng(3)
    x1, x2 = rng.normal(size=80), rng.normal(size=80)
    y = 1 + 0.5 * x1 + 0.3 * x2 + rng.normal(size=80)
    full = sm.OLS(y, sm.add_constant(np.column_stack([x1, x2]))).fit()
    reduced = sm.OLS(y, sm.add_constant(x1)).fit()
    stat, p, df = full.compare_lr_test(reduced)
    mine = likelihood_ratio(reduced.llf, full.llf, 1)
    assert mine.statistic == pytest.approx(stat, rel=1e-12)  # statsmodels RegressionResults.compare_lr_test
    assert mine.p_value == pytest.approx(p, rel=1e-10)
    assert mine.df == int(df) == 1


def test_logistic_lr_test_agrees_with_statsmodels_logit_llr():
    """Against the intercept-only model, statsmodels Logit's ``llr`` and ``llr_pvalue``."""
    rng = np.random.default_rng(5)
    x = rng.normal(size=200)
    y = (rng.random(200) < 1 / (1 + np.exp(-(0.2 + 0.8 * x)))).astype(float)
    ref = sm.Logit(y, sm.add_constant(x)).fit(disp=0)
    t = lr_test(fit_logistic(y, {}), fit_logistic(y, {"x": x}))
    assert t.statistic == pytest.approx(ref.llr, rel=1e-7)  # statsmodels LogitResults.llr
    assert t.p_value == pytest.approx(ref.llr_pvalue, rel=1e-6)


def test_rounding_below_zero_is_zero_and_a_clear_reversal_is_refused():
    assert likelihood_ratio(-100.0, -100.0 - 1e-12, 2).statistic == 0.0
    with pytest.raises(ValueError, match="not nested"):
        likelihood_ratio(-90.0, -100.0, 1)
    with pytest.raises(ValueError, match="more parameters"):
        likelihood_ratio(-90.0, -80.0, 0)
