"""Tests for auditor.stats.logistic: a published fit, agreement with statsmodels Logit to 1e-8,
the chi-square partition against fits done by hand, risk bands, separation, the spline basis it is
used with, and the calibration of the adjusted turning-point test."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import special, stats

from auditor.stats.logistic import (
    INTERCEPT,
    LogisticFit,
    SeparationError,
    block_columns,
    chi_square_partition,
    contrast,
    fit_logistic,
    interior_extremum,
    log_likelihood,
    lr_test,
    risk_band,
)
from auditor.stats.splines import choose_knots, spline_basis


def _simulated(seed: int, n: int = 400):
    rng = np.random.default_rng(seed)
    x1 = rng.normal(50, 10, n)
    x2 = rng.gamma(2.0, 3.0, n)
    x3 = (rng.uniform(size=n) < 0.4).astype(float)
    eta = -6 + 0.09 * x1 + 0.15 * x2 - 0.7 * x3
    y = (rng.uniform(size=n) < special.expit(eta)).astype(float)
    return y, {"x1": x1, "x2": x2, "x3": x3}


def _sm(y, cols: dict):
    X = np.column_stack([np.ones(len(y))] + list(cols.values())) if cols else np.ones((len(y), 1))
    return sm.Logit(y, X).fit(disp=0, method="newton", tol=1e-12, maxiter=100)


# --------------------------------------------------------------------------- published values


def test_spector_mazzeo_published_fit():
    # Spector and Mazzeo data as shipped with statsmodels; coefficients and log-likelihood as printed
    # in the statsmodels documentation and Greene, Econometric Analysis (values from memory).
    data = sm.datasets.spector.load_pandas()
    fit = fit_logistic(data.endog.to_numpy(), {c: data.exog[c].to_numpy() for c in ("GPA", "TUCE", "PSI")})
    expected = {INTERCEPT: -13.021347, "GPA": 2.826113, "TUCE": 0.095158, "PSI": 2.378688}
    for name, value in expected.items():
        assert fit.params[fit.index(name)] == pytest.approx(value, abs=5e-6)
    assert fit.loglik == pytest.approx(-12.890, abs=5e-4)
    assert fit.n == 32 and fit.n_events == int(data.endog.sum())


# --------------------------------------------------------------------------- against statsmodels


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_agrees_with_statsmodels_logit(seed):
    y, cols = _simulated(seed)
    mine = fit_logistic(y, cols)
    ref = _sm(y, cols)
    assert mine.loglik == pytest.approx(ref.llf, abs=1e-8)
    np.testing.assert_allclose(mine.params, ref.params, rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(mine.se, ref.bse, rtol=1e-6)
    np.testing.assert_allclose(mine.cov, ref.cov_params(), rtol=1e-6, atol=1e-12)
    assert mine.aic == pytest.approx(ref.aic, abs=1e-8)
    # The intercept-only log-likelihood has the closed form n [p log p + (1 - p) log(1 - p)];
    # statsmodels' llnull comes from its own iterative fit, so it agrees only to its tolerance.
    null = fit_logistic(y, None)
    p = y.mean()
    closed = len(y) * (p * np.log(p) + (1 - p) * np.log(1 - p))
    assert null.loglik == pytest.approx(closed, abs=1e-9)
    assert null.loglik == pytest.approx(ref.llnull, abs=1e-6)
    t = lr_test(null, mine)
    assert t.statistic == pytest.approx(2 * (ref.llf - closed), abs=1e-8)
    assert t.statistic == pytest.approx(ref.llr, abs=1e-6)
    assert t.df == 3 and t.p_value == pytest.approx(ref.llr_pvalue, rel=1e-4)


def test_nested_lr_equals_statsmodels():
    y, cols = _simulated(9)
    full, reduced = fit_logistic(y, cols), fit_logistic(y, {"x1": cols["x1"]})
    ref_full, ref_red = _sm(y, cols), _sm(y, {"x1": cols["x1"]})
    t = lr_test(reduced, full)
    assert t.statistic == pytest.approx(2 * (ref_full.llf - ref_red.llf), abs=1e-8)
    assert t.df == 2
    assert t.p_value == pytest.approx(stats.chi2.sf(t.statistic, 2), rel=1e-12)


def test_log_likelihood_is_exact_and_overflow_free():
    eta = np.array([-800.0, -3.0, 0.0, 2.5, 900.0])
    y = np.array([0.0, 1.0, 0.0, 1.0, 1.0])
    expected = sum(yi * e - np.log1p(np.exp(e)) if abs(e) < 50 else (yi * e - max(e, 0.0))
                   for yi, e in zip(y, eta))
    assert log_likelihood(y, eta) == pytest.approx(expected, abs=1e-12)


def test_scale_of_columns_does_not_change_the_fit():
    y, cols = _simulated(4)
    a = fit_logistic(y, cols)
    b = fit_logistic(y, {**cols, "x1": cols["x1"] * 1000.0 + 5e4})
    assert a.loglik == pytest.approx(b.loglik, abs=1e-9)
    assert b.params[b.index("x1")] * 1000.0 == pytest.approx(a.params[a.index("x1")], rel=1e-8)


# --------------------------------------------------------------------------- refusals


def test_complete_separation_is_refused():
    x = np.linspace(-2, 2, 40)
    y = (x > 0.1).astype(float)
    with pytest.raises(SeparationError):
        fit_logistic(y, {"x": x})


def test_quasi_complete_separation_is_refused():
    rng = np.random.default_rng(3)
    x = rng.normal(size=120)
    group = (x > 0.8).astype(float)
    y = np.where(group == 1, 1.0, (rng.uniform(size=120) < 0.3).astype(float))
    with pytest.raises(SeparationError):
        fit_logistic(y, {"x": rng.normal(size=120), "group": group})


def test_singular_design_and_bad_outcome_are_refused():
    y, cols = _simulated(5)
    with pytest.raises(ValueError, match="singular"):
        fit_logistic(y, {**cols, "twice": 2 * cols["x1"] - cols["x2"], "x2copy": cols["x2"]})
    with pytest.raises(ValueError, match="0/1"):
        fit_logistic(y * 2, cols)
    with pytest.raises(ValueError, match="constant"):
        fit_logistic(y, {"c": np.ones(len(y))})


def test_an_extreme_but_finite_fit_is_accepted():
    # One outlying covariate value gives a fitted logit far below -25, but the maximum exists.
    rng = np.random.default_rng(11)
    x = np.append(rng.normal(0, 1, 299), -40.0)
    y = (rng.uniform(size=300) < special.expit(-1 + 0.8 * x)).astype(float)
    y[-1] = 0.0
    fit = fit_logistic(y, {"x": x})
    ref = _sm(y, {"x": x})
    assert fit.loglik == pytest.approx(ref.llf, abs=1e-8)


# --------------------------------------------------------------------------- partition


def test_partition_matches_fits_done_by_hand():
    rng = np.random.default_rng(21)
    n = 500
    a, b, age = rng.normal(0, 1, n), rng.normal(0, 1, n), rng.normal(50, 10, n)
    y = (rng.uniform(size=n) < special.expit(-1 + 0.8 * a ** 2 - 0.5 * b + 0.02 * (age - 50))).astype(float)
    ka, kb = choose_knots(a, 4).knots, choose_knots(b, 4).knots
    Ba, Bb = spline_basis(a, ka), spline_basis(b, kb)
    part = chi_square_partition(y, {"a": Ba, "b": Bb}, {"age": age})

    def ll(*mats):
        return _sm(y, {str(i): c for i, c in enumerate(np.column_stack(mats).T)}).llf

    full = ll(Ba, Bb, age)
    assert part.full.loglik == pytest.approx(full, abs=1e-8)
    assert part.total["a"].statistic == pytest.approx(2 * (full - ll(Bb, age)), abs=1e-7)
    assert part.total["a"].df == 3
    assert part.nonlinear["a"].statistic == pytest.approx(2 * (full - ll(Ba[:, :1], Bb, age)), abs=1e-7)
    assert part.nonlinear["a"].df == 2
    assert part.total["b"].statistic == pytest.approx(2 * (full - ll(Ba, age)), abs=1e-7)
    assert part.joint.statistic == pytest.approx(2 * (full - ll(age)), abs=1e-7)
    assert part.adjustment.statistic == pytest.approx(2 * (full - ll(Ba, Bb)), abs=1e-7)
    assert part.whole.statistic == pytest.approx(2 * (full - _sm(y, {}).llf), abs=1e-7)
    assert part.share("a") == pytest.approx(part.total["a"].statistic / part.joint.statistic)
    # a is U-shaped by construction: its nonlinear part is overwhelming; b enters linearly.
    assert part.nonlinear["a"].p_value < 1e-6 and part.nonlinear["b"].p_value > 0.001
    names = [r.name for r in part.rows()]
    assert names[:2] == ["a", "a, nonlinear part"] and names[-1] == "whole model"


def test_block_columns_names_linear_first():
    cols = block_columns("v", np.arange(12.0).reshape(4, 3))
    assert list(cols) == ["v", "v'1", "v'2"]
    np.testing.assert_array_equal(cols["v'2"], [2.0, 5.0, 8.0, 11.0])


# --------------------------------------------------------------------------- prediction


def test_risk_band_is_the_delta_method_on_the_logit_scale():
    y, cols = _simulated(6)
    fit = fit_logistic(y, cols)
    ref = _sm(y, cols)
    rows = np.array([[1, 45, 4, 0], [1, 60, 10, 1], [1, 30, 1, 0]], dtype=float)
    band = risk_band(fit, rows, level=0.90)
    se = np.sqrt(np.diag(rows @ ref.cov_params() @ rows.T))
    np.testing.assert_allclose(band.logit, rows @ ref.params, rtol=1e-8)
    np.testing.assert_allclose(band.se, se, rtol=1e-6)
    z = stats.norm.ppf(0.95)
    np.testing.assert_allclose(band.lower, special.expit(rows @ ref.params - z * se), rtol=1e-6)
    assert np.all((band.lower < band.risk) & (band.risk < band.upper))
    est, s = contrast(fit, {"x1": 10.0})
    assert est == pytest.approx(10 * ref.params[1], rel=1e-8)
    assert s == pytest.approx(10 * ref.bse[1], rel=1e-6)


# --------------------------------------------------------------------------- spline basis


def test_restricted_cubic_spline_is_linear_beyond_the_outer_knots():
    knots = (1.0, 2.0, 3.5, 5.0)
    B = spline_basis(np.linspace(5.0, 9.0, 41), knots)
    np.testing.assert_allclose(np.diff(B, 2, axis=0), 0.0, atol=1e-10)
    below = spline_basis(np.linspace(-3.0, 1.0, 41), knots)
    np.testing.assert_allclose(below[:, 1:], 0.0, atol=1e-14)
    # Inside, the nonlinear columns do bend.
    inside = spline_basis(np.linspace(1.5, 4.5, 31), knots)
    assert np.max(np.abs(np.diff(inside[:, 1:], 2, axis=0))) > 1e-4


# --------------------------------------------------------------------------- turning point


def _quadratic_fit(b, cov) -> LogisticFit:
    return LogisticFit(("u", "u2"), np.asarray(b, float), np.asarray(cov, float), -100.0, 200, 40, 5)


def test_interior_minimum_located_and_contrasts_by_hand():
    # f(u) = -2u + u^2 has its minimum at u = 1.
    grid = np.linspace(-1.0, 3.0, 81)
    basis = np.column_stack([grid, grid ** 2])
    V = np.array([[0.04, -0.01], [-0.01, 0.01]])
    t = interior_extremum(_quadratic_fit([-2.0, 1.0], V), ["u", "u2"], grid, basis, "minimum", seed=1)
    assert t.interior and t.at == pytest.approx(1.0)
    c = basis[0] - basis[40]
    assert t.low_end.difference == pytest.approx(4.0)
    assert t.low_end.se == pytest.approx(np.sqrt(c @ V @ c))
    assert t.low_end.p_value == pytest.approx(stats.norm.sf(4.0 / np.sqrt(c @ V @ c)))
    assert t.p_value == max(t.low_end.p_adjusted, t.high_end.p_adjusted) < 0.01
    mx = interior_extremum(_quadratic_fit([-2.0, 1.0], V), ["u", "u2"], grid, basis, "maximum", seed=1)
    assert not mx.interior and mx.p_value is None


def test_monotone_curve_has_its_minimum_at_an_end():
    grid = np.linspace(0.0, 1.0, 51)
    basis = np.column_stack([grid, grid ** 2])
    t = interior_extremum(_quadratic_fit([1.0, 0.5], np.eye(2) * 0.01), ["u", "u2"], grid, basis, seed=2)
    assert t.index == 0 and not t.interior and t.p_value is None and t.low_end.p_value is None


def test_adjusted_end_test_holds_its_level_on_a_flat_curve():
    # With a flat true curve, b_hat ~ N(0, V) and every end test is a false alarm: the max-t adjusted
    # test should reject in about 5% of replicates (Monte Carlo, seeded; 300 replicates, so the bounds
    # are about 2 binomial standard errors either side).
    knots = (0.0, 1.0, 2.0, 3.0)
    grid = np.linspace(0.0, 3.0, 61)
    basis = spline_basis(grid, knots)
    V = np.diag([0.05, 0.2, 0.2])
    rng = np.random.default_rng(5)
    adjusted = 0
    reps = 300
    for r in range(reps):
        b = rng.multivariate_normal(np.zeros(3), V)
        fit = LogisticFit(("x", "x'1", "x'2"), b, V, -1.0, 100, 30, 4)
        t = interior_extremum(fit, ["x", "x'1", "x'2"], grid, basis, "minimum", draws=1000, seed=r)
        if t.low_end.p_adjusted is not None:
            adjusted += t.low_end.p_adjusted < 0.05
    assert 0.025 < adjusted / reps < 0.075


def test_coefficient_ratio_delta_method_matches_statsmodels_covariance():
    """The delta-method SE of b1/b2 computed from statsmodels Logit's coefficients and covariance
    (gradient [1/b2, -b1/b2^2]; Casella and Berger 2002, 5.5.4)."""
    import statsmodels.api as sm
    from scipy import stats as st

    from auditor.stats.logistic import coefficient_ratio

    rng = np.random.default_rng(12)
    x1, x2 = rng.normal(size=400), rng.normal(size=400)
    y = (rng.random(400) < 1 / (1 + np.exp(-(-0.3 + 0.6 * x1 + 1.1 * x2)))).astype(float)
    ref = sm.Logit(y, sm.add_constant(np.column_stack([x1, x2]))).fit(disp=0)
    b, V = ref.params, ref.cov_params()
    g = np.array([0.0, 1 / b[2], -b[1] / b[2] ** 2])
    se = float(np.sqrt(g @ V @ g))
    r, lo, hi = coefficient_ratio(fit_logistic(y, {"x1": x1, "x2": x2}), "x1", "x2", 0.9)
    assert r == pytest.approx(b[1] / b[2], rel=1e-6)
    assert (hi - lo) / 2 == pytest.approx(st.norm.ppf(0.95) * se, rel=1e-5)


def test_bootstrap_lowest_point_brackets_a_known_minimum():
    """Known truth: risk lowest at x = 0 on a quadratic logit; the 90% percentile interval of the
    resampled minimiser contains 0 and is narrower than the 99% one from the same resamples."""
    from auditor.stats.logistic import bootstrap_lowest_point

    rng = np.random.default_rng(13)
    x = rng.uniform(-2, 2, 1500)
    y = (rng.random(1500) < 1 / (1 + np.exp(-(-1.5 + 0.9 * x ** 2)))).astype(float)
    grid = np.linspace(-1.5, 1.5, 61)
    basis = np.column_stack([grid, grid ** 2])
    cols = {"x": x, "x2": x ** 2}
    lo90, hi90, failed = bootstrap_lowest_point(y, cols, ["x", "x2"], basis, grid, 60, seed=1, level=0.9)
    lo99, hi99, _ = bootstrap_lowest_point(y, cols, ["x", "x2"], basis, grid, 60, seed=1, level=0.99)
    assert failed == 0 and lo90 <= 0.0 <= hi90
    assert lo99 <= lo90 and hi90 <= hi99 and hi90 - lo90 < 1.0
    assert bootstrap_lowest_point(y, cols, ["x", "x2"], basis, grid, 60, seed=1, level=0.9) == (lo90, hi90, 0)
