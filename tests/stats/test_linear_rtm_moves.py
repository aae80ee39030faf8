"""Formulas the regression-to-the-mean check takes from stats: the slope with its SE, the mean with
its t interval, the selection shift with its delta-method SE and Goodman's product SE, each against
an outside reference."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from auditor.stats.linear import adjusted_slope, mean_t_interval, slope_with_se
from auditor.stats.rtm import fit_truncated_normal, product_interval, product_se, selection_shift_with_se


@pytest.mark.parametrize("level", [0.95, 0.9])
def test_slope_with_se_matches_statsmodels(level):
    rng = np.random.default_rng(2)
    x = rng.normal(size=60)
    y = 0.4 + 0.7 * x + rng.normal(size=60)
    ref = sm.OLS(y, sm.add_constant(x)).fit()
    est, se, lo, hi, n = slope_with_se(y, x, level)
    assert (est, se) == pytest.approx((ref.params[1], ref.bse[1]), rel=1e-10)  # statsmodels OLS
    assert (lo, hi) == pytest.approx(tuple(ref.conf_int(alpha=1 - level)[1]), rel=1e-10)  # conf_int
    assert n == 60


def test_adjusted_slope_matches_statsmodels_with_a_covariate():
    rng = np.random.default_rng(4)
    x, z = rng.normal(size=80), (rng.random(80) < 0.5).astype(float)
    y = 1 + 0.5 * x + 0.8 * z + rng.normal(size=80)
    ref = sm.OLS(y, sm.add_constant(np.column_stack([x, z]))).fit()
    est, lo, hi, p, df = adjusted_slope(y, x, {"z": z}, 0.9)
    assert est == pytest.approx(ref.params[1], rel=1e-10)  # statsmodels OLS
    assert (lo, hi) == pytest.approx(tuple(ref.conf_int(alpha=0.1)[1]), rel=1e-10)
    assert p == pytest.approx(ref.pvalues[1], rel=1e-8) and df == 77


@pytest.mark.parametrize("level", [0.95, 0.8])
def test_mean_t_interval_matches_scipy_ttest(level):
    d = np.random.default_rng(6).normal(1.0, 2.0, size=25)
    m, lo, hi, se, n = mean_t_interval(d, level)
    ci = stats.ttest_1samp(d, 0.0).confidence_interval(level)  # scipy TtestResult.confidence_interval
    assert (lo, hi) == pytest.approx((ci.low, ci.high), rel=1e-12)
    assert se == pytest.approx(stats.sem(d), rel=1e-12) and m == pytest.approx(d.mean()) and n == 25


def test_product_se_is_goodmans_exact_variance():
    # Goodman 1960: var(ab) = a^2 var(b) + b^2 var(a) + var(a) var(b); a Monte Carlo check (independent
    # normals, 400 000 draws) agrees within 1%.
    a, sa, b, sb = 0.3, 0.1, -2.0, 0.5
    rng = np.random.default_rng(8)
    draws = rng.normal(a, sa, 400_000) * rng.normal(b, sb, 400_000)
    assert product_se(a, sa, b, sb) == pytest.approx(float(np.std(draws)), rel=0.01)
    lo, hi = product_interval(a * b, a, sa, b, sb, 0.9)
    assert (hi - lo) / 2 == pytest.approx(stats.norm.ppf(0.95) * product_se(a, sa, b, sb), rel=1e-12)


def test_selection_shift_is_the_truncated_normal_mean():
    """E[S - mu | S > c] = sigma phi(z) / (1 - Phi(z)), z = (c - mu) / sigma (scipy.stats.truncnorm
    mean as the reference); its delta-method SE is positive and shrinks with the sample."""
    rng = np.random.default_rng(9)
    x = rng.normal(50, 10, 20_000)
    small = fit_truncated_normal(x[x > 55][:300], lower=55.0)
    large = fit_truncated_normal(x[x > 55], lower=55.0)
    e, se = selection_shift_with_se(large, 55.0, "above")
    z = (55.0 - large.mu) / large.sigma
    ref = stats.truncnorm.mean(z, math.inf, loc=large.mu, scale=large.sigma) - large.mu
    assert e == pytest.approx(ref, rel=1e-8)
    assert 0 < se < selection_shift_with_se(small, 55.0, "above")[1]
