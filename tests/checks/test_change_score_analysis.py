"""Change-score analysis: the numbers the check judges by, read from ``analyse`` without a sentence.

Each value is checked against known truth of the simulation or an outside fit of the same model
(statsmodels OLS and its F test, scipy's Pearson correlation, statsmodels' Holm adjustment); the
source is named beside each check.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.multitest import multipletests

from auditor.checks.change_score import analyse
from auditor.checks.registry import CheckContext
from auditor.stats.linear import fit_ols, predict
from auditor.validation.change_score_cases import bivariate, outcome_data_for, true_cost

CTX = CheckContext(seed=11, blinded=False, quick=True)


def _trial(make, n, seed, **kw):
    b, f, a = make(np.random.default_rng(seed), n)
    return outcome_data_for(b, f, a, **kw), b, f, a


def _ols(y, *columns):
    return sm.OLS(np.asarray(y, dtype=float), sm.add_constant(np.column_stack(columns))).fit()


def test_slope_cost_and_correlation_match_outside_fits():
    """Slope 0.5, r 0.5, 2,000 participants: the slope of follow-up on baseline adjusted for arm and its
    t test of slope 1 equal statsmodels OLS of the same model; Pearson r equals scipy.stats.pearsonr;
    the cost of change contains the true 4/3 = 1 + (slope - 1)^2 r^2 / (slope^2 (1 - r^2)) (Frison and
    Pocock 1992, unequal variances; known truth of the simulation) and lies wholly above the 10%
    materiality; ANCOVA's saving against follow-up only is r^2 (Frison and Pocock 1992)."""
    data, b, f, a = _trial(bivariate(0.5, 0.5), 2000, seed=3)
    an = analyse(data, CTX)

    ref = _ols(f, b, a)  # statsmodels OLS: follow-up ~ baseline + arm
    lo, hi = ref.conf_int(0.05)[1]
    assert an.slope.adjusted
    assert an.slope.test.estimate == pytest.approx(ref.params[1], rel=1e-10)
    assert (an.slope.test.lower, an.slope.test.upper) == pytest.approx((lo, hi), rel=1e-10)
    t_one = ref.t_test(([0, 1, 0], 1.0))  # statsmodels t test of slope = 1
    assert an.slope.test.p_value == pytest.approx(float(t_one.pvalue), rel=1e-8)

    r_ref = stats.pearsonr(b, f)  # scipy
    assert an.efficiency.r.r == pytest.approx(r_ref.statistic, rel=1e-12)
    assert an.efficiency.followup_saving == pytest.approx(r_ref.statistic ** 2, rel=1e-12)

    cost = an.efficiency.cost
    assert true_cost(0.5, 0.5) == pytest.approx(4 / 3)
    assert cost.lower < 4 / 3 < cost.upper  # known truth
    assert an.efficiency.material and an.efficiency.above
    # Known truth: the follow-up SD is slope sd_b / r = sd_b, so the variance ratio is 1 (its SE here is
    # about 0.045: sqrt(2 (1 + r^2) / n) on the log scale for correlated variances; allow more than 3).
    assert cost.variance_ratio == pytest.approx(1.0, abs=0.15)


def test_cost_is_the_within_arm_variance_ratio():
    """The trial's own cost equals var(change) / residual variance of ANCOVA, both within arm, computed
    here from the centred data and statsmodels' residuals (Frison and Pocock 1992 without equal
    variances); with slope 1 the truth is no cost at all, so the interval reaches 1."""
    data, b, f, a = _trial(bivariate(1.0, 0.8), 600, seed=8)
    an = analyse(data, CTX)
    x, y = b.astype(float).copy(), f.astype(float).copy()
    for g in (0, 1):
        x[a == g] -= x[a == g].mean()
        y[a == g] -= y[a == g].mean()
    resid_var = np.mean(_ols(y, x).resid ** 2)  # statsmodels OLS on within-arm centred data
    assert an.efficiency.cost.ratio == pytest.approx(np.mean((y - x) ** 2) / resid_var, rel=1e-9)
    assert an.efficiency.cost.variance_ratio == pytest.approx(np.mean(y ** 2) / np.mean(x ** 2), rel=1e-12)
    assert an.efficiency.cost.lower == pytest.approx(1.0)  # known truth: slope 1 costs nothing
    assert not an.efficiency.material


def test_nonlinearity_f_matches_statsmodels_and_flags_a_curve():
    """Follow-up quadratic in baseline: the spline-against-line F test equals statsmodels'
    compare_f_test of the same two OLS fits, and its Holm-adjusted p (statsmodels multipletests,
    method "holm", over the same five raw p-values) is far below 0.05 (known truth: the curve is
    strong), so linearity is flagged; a straight line in the same design is not flagged."""
    rng = np.random.default_rng(21)
    n = 400
    a = np.arange(n) % 2
    b = rng.normal(50, 10, n)
    f = 0.05 * (b - 50) ** 2 + b + 2 * a + rng.normal(0, 3, n)
    an = analyse(outcome_data_for(b, f, a), CTX)

    cols = an.model.columns(b)
    full = _ols(f, *cols.values(), a)
    reduced = _ols(f, b, a)
    fstat, p, df_num = full.compare_f_test(reduced)  # statsmodels
    assert an.linearity.test.statistic == pytest.approx(fstat, rel=1e-8)
    assert an.linearity.test.p_value == pytest.approx(p, rel=1e-6, abs=1e-300)
    assert an.linearity.test.df_num == int(df_num)

    raw = [an.selection.edge.test.p_value, an.linearity.test.p_value, an.scale.trend.p_value,
           an.scale.p_boxcox, an.slope.test.p_value]
    holm = multipletests(raw, method="holm")[1]  # statsmodels
    got = [an.selection.p_adj, an.linearity.p_adj, an.scale.p_trend, an.scale.p_boxcox_adj, an.slope.p_adj]
    assert got == pytest.approx(list(holm), rel=1e-12)
    assert an.linearity.flagged and an.flagged("linearity")

    straight = analyse(outcome_data_for(b, b + 2 * a + rng.normal(0, 3, n), a), CTX)
    assert not straight.linearity.flagged


def test_three_level_baseline_enters_as_categories():
    """Baseline on three levels: the flexible ANCOVA is the saturated one (one mean a level), and the
    F test of it against the line equals statsmodels' compare_f_test with level indicators, on 1 df;
    with two levels there is nothing to test (the line fits both levels exactly)."""
    rng = np.random.default_rng(4)
    n = 300
    a = np.arange(n) % 2
    b = rng.integers(0, 3, n).astype(float)
    f = b ** 2 + a + rng.normal(0, 1, n)
    an = analyse(outcome_data_for(b, f, a), CTX)
    assert an.model.levels == (0.0, 1.0, 2.0)
    full = _ols(f, (b == 1).astype(float), (b == 2).astype(float), a)
    fstat, p, df_num = full.compare_f_test(_ols(f, b, a))  # statsmodels
    assert an.linearity.test.statistic == pytest.approx(fstat, rel=1e-8)
    assert an.linearity.test.df_num == int(df_num) == 1

    two = analyse(outcome_data_for(rng.integers(0, 2, n).astype(float), f, a), CTX)
    assert two.linearity.test is None and not two.linearity.flagged


def test_comparison_ratios_interaction_and_heterogeneity_match_outside_fits():
    """Two arms: the empirical sample-size ratio of change against follow-up only is (SE change /
    SE follow-up)^2 of the two statsmodels OLS fits on arm; the arm x baseline interaction F equals
    statsmodels' compare_f_test; each arm's r of change with baseline equals scipy.stats.pearsonr.
    Without any interaction in the simulation the control arm's change still falls with baseline
    (regression to the mean, slope 0.5 < 1: known truth), which the analysis marks as the artefact."""
    data, b, f, a = _trial(bivariate(0.5, 0.5), 800, seed=9)
    an = analyse(data, CTX)
    cmp = an.comparison
    se_change = _ols(f - b, a).bse[1]
    se_fu = _ols(f, a).bse[1]
    assert cmp.ratio_vs_followup == pytest.approx((se_change / se_fu) ** 2, rel=1e-9)

    centred = b - b.mean()
    inter_full = _ols(f, centred, a, a * centred)
    fstat, p, _ = inter_full.compare_f_test(_ols(f, centred, a))  # statsmodels
    assert cmp.heterogeneity.interaction.statistic == pytest.approx(fstat, rel=1e-8)
    assert cmp.heterogeneity.interaction.p_value == pytest.approx(p, rel=1e-8)

    for arm, n_arm, r in cmp.heterogeneity.rows:
        sel = data.frame["arm"].to_numpy() == arm
        assert n_arm == sel.sum() == 400
        assert r.r == pytest.approx(stats.pearsonr(b[sel], (f - b)[sel]).statistic, rel=1e-12)  # scipy
    assert cmp.heterogeneity.regression_artefact == (p >= 0.05)


def test_bound_shares_and_levels_are_counted_from_the_data():
    """A 0-100 scale with many values at 0: each share at a bound is the count at that bound over n
    (definition; counted here with numpy), the largest is the baseline or follow-up floor, and it is
    flagged above the 15% share (McHorney and Tarlov 1995); a declared 0-4 ordinal score is ordinal."""
    rng = np.random.default_rng(12)
    n = 300
    a = np.arange(n) % 2
    b = np.clip(rng.normal(5, 8, n), 0, 100)
    f = np.clip(b + rng.normal(0, 5, n) - 2 * a, 0, 100)
    an = analyse(outcome_data_for(b, f, a, (0.0, 100.0)), CTX)
    shares = {(name, side): share for name, side, _, share in an.bounds.rows}
    assert shares[("baseline", "lower")] == pytest.approx(np.mean(b == 0))
    assert shares[("followup", "lower")] == pytest.approx(np.mean(f == 0))
    assert shares[("baseline", "upper")] == shares[("followup", "upper")] == 0
    assert an.bounds.worst == max(np.mean(b == 0), np.mean(f == 0)) > 0.15
    assert an.bounds.worst_at[0] == "floor" and an.bounds.flagged and an.awkward
    pooled = np.concatenate([b, f])  # the levels are read from baseline and follow-up together
    assert an.levels.granularity.n_distinct == len(np.unique(pooled))
    assert an.levels.granularity.top_share == pytest.approx(np.mean(pooled == 0))

    levels = [0, 1, 2, 3, 4]
    bo = rng.integers(0, 5, n).astype(float)
    fo = np.clip(bo + rng.integers(-1, 2, n) + a, 0, 4).astype(float)
    ordinal = analyse(outcome_data_for(bo, fo, a, scale="ordinal", levels=levels), CTX)
    assert ordinal.levels.declared_ordinal and ordinal.levels.ordinal
    assert ordinal.levels.granularity.n_distinct == len(np.unique(np.concatenate([bo, fo])))


def test_fitted_curve_is_the_fit_at_new_rows():
    """``predict`` at the rows a fit was made on returns statsmodels' fitted values; the check's
    curves (one an arm) equal statsmodels' prediction of the same flexible ANCOVA over the baseline
    grid, which spans the observed baselines."""
    rng = np.random.default_rng(2)
    x, g = rng.normal(0, 1, 50), (np.arange(50) % 2).astype(float)
    y = 1 + 2 * x - g + rng.normal(0, 0.5, 50)
    fit = fit_ols(y, {"x": x, "g": g})
    assert predict(fit, {"g": g, "x": x}) == pytest.approx(_ols(y, x, g).fittedvalues, rel=1e-10)  # statsmodels

    data, b, f, a = _trial(bivariate(1.0, 0.8), 200, seed=1)
    an = analyse(data, CTX)
    ref = _ols(f, *an.model.columns(b).values(), *an.coding.columns.values())  # statsmodels OLS
    assert [c[0] for c in an.curves] == an.arms
    for arm, grid, fitted in an.curves:
        arm_cols = [np.full(len(grid), v) for v in an.coding.indicator_values(arm).values()]
        X = sm.add_constant(np.column_stack([*an.model.columns(grid).values(), *arm_cols]), has_constant="add")
        assert fitted == pytest.approx(ref.predict(X), rel=1e-9)
        assert grid.min() == pytest.approx(b.min()) and grid.max() == pytest.approx(b.max())
