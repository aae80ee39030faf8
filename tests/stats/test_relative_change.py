"""Tests for auditor.stats.relative_change: known truths in simulation, independent fits, closed forms
against textbook formulas, and the dichotomisation efficiency against Monte Carlo."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from scipy import stats

from auditor.stats import relative_change as rc
from auditor.stats.effects import arm_coding


def _trial(rng, n, ratio=0.6, sd_true=0.8, sd_error=0.3, centre=250.0):
    """Two arms, log-normal outcome: log f = true + log(ratio) [active] + error, log b = true + error."""
    arm = np.where(np.arange(n) % 2 == 0, "C", "T")
    true = rng.normal(math.log(centre), sd_true, n)
    b = np.exp(true + rng.normal(0, sd_error, n))
    f = np.exp(true + math.log(ratio) * (arm == "T") + rng.normal(0, sd_error, n))
    return b, f, arm


def _natural_spline(x, knots):
    """Natural cubic spline basis in the truncated-power form of Hastie, Tibshirani and Friedman
    (Elements of Statistical Learning, 2nd ed., eqs. 5.4-5.5): x, d_k - d_{K-1}, k = 1..K-2, with
    d_k = [(x - t_k)+^3 - (x - t_K)+^3] / (t_K - t_k). Written here independently of the package."""
    t = np.asarray(knots)
    K = len(t)

    def d(k):
        return (np.clip(x - t[k], 0, None) ** 3 - np.clip(x - t[K - 1], 0, None) ** 3) / (t[K - 1] - t[k])

    return np.column_stack([x] + [d(k) - d(K - 2) for k in range(K - 2)])


# --------------------------------------------------------------------------- relative change


def test_percent_change_and_log_ratio_values():
    b = np.array([50.0, 100.0, 0.0, -2.0, 10.0])
    f = np.array([100.0, 50.0, 5.0, -1.0, 0.0])
    pc = rc.percent_change(b, f)
    assert pc[:2] == pytest.approx([100.0, -50.0])
    assert np.isnan(pc[2]) and np.isnan(pc[3])
    assert pc[4] == pytest.approx(-100.0)
    lr = rc.log_ratio(b, f)
    assert lr[:2] == pytest.approx([math.log(2), -math.log(2)])
    assert np.isnan(lr[2:]).all()


def test_log_ratio_is_symmetric_and_additive_where_percent_change_is_not():
    # Tornqvist, Vartia and Vartia (Am Stat 1985;39:43): the log ratio is the only symmetric,
    # additive indicator of relative change; percent change is neither.
    assert rc.log_ratio(40, 80) == pytest.approx(-rc.log_ratio(80, 40))
    assert rc.percent_change(40, 80) == pytest.approx(100.0)
    assert rc.percent_change(80, 40) == pytest.approx(-50.0)
    a, b, c = 30.0, 45.0, 27.0
    assert rc.log_ratio(a, c) == pytest.approx(rc.log_ratio(a, b) + rc.log_ratio(b, c))
    assert rc.percent_change(a, c) != pytest.approx(rc.percent_change(a, b) + rc.percent_change(b, c))


def test_instability_counts_and_threshold():
    b = np.array([0.0, -1.0, 2.0, 4.0] + [100.0] * 36)
    f = np.array([5.0, 1.0, 30.0, 2.0] + [110.0] * 36)
    ins = rc.instability(b, f)
    assert ins.n == 40 and ins.n_zero == 1 and ins.n_negative == 1 and ins.n_undefined == 2
    assert ins.median_baseline == 100.0 and ins.threshold == pytest.approx(5.0)
    assert ins.n_near_zero == 2  # 2 and 4 are below 5% of 100
    assert ins.largest_rise == pytest.approx(1400.0) and ins.largest_fall == pytest.approx(-50.0)
    assert ins.near_zero_largest == pytest.approx(1400.0)
    pc = rc.percent_change(b, f)
    ok = np.isfinite(pc)
    assert ins.mean_shift_without_near_zero == pytest.approx(np.mean(pc[ok]) - 10.0)


def test_shape_matches_scipy_and_the_log_normal_formula():
    rng = np.random.default_rng(11)
    x = rng.lognormal(0, 0.5, 200_000)
    s = rc.shape(x)
    assert s.skewness == pytest.approx(stats.skew(x, bias=False), rel=1e-12)
    # Skewness of a log-normal with log-SD sigma: (e^{s^2} + 2) sqrt(e^{s^2} - 1) (from memory;
    # = 1.750 for sigma 0.5).
    w = math.exp(0.25)
    assert s.skewness == pytest.approx((w + 2) * math.sqrt(w - 1), abs=0.1)
    floor = rc.shape(np.array([-100.0, -100.0, -20.0, 5.0, 10.0, 30.0, 60.0, 400.0]), floor=-100.0)
    assert floor.n_at_floor == 2
    assert floor.n_far_out == 1  # 400 is beyond Q3 + 3 IQR
    assert floor.floor_share == pytest.approx(2 / 8)  # 2 of the 8 values at -100% (counted by hand)


def test_largest_changes_lists_undefined_first_then_by_size():
    # By hand: |pc| = 10, undefined, 50, 5, 200, 50 -> undefined (1), 200 (4), then the tie 50 in
    # input order (2 before 5).
    pc = np.array([10.0, np.nan, -50.0, 5.0, 200.0, 50.0])
    assert rc.largest_changes(pc, 4).tolist() == [1, 4, 2, 5]
    assert rc.largest_changes(pc, 10).tolist() == [1, 4, 2, 5, 0, 3]


# --------------------------------------------------------------------------- treatment effects


def test_geometric_mean_ratio_recovers_the_simulated_ratio():
    rng = np.random.default_rng(2)
    b, f, arm = _trial(rng, 4000, ratio=0.6)
    (e,) = rc.geometric_mean_ratio(b, f, arm_coding(arm, ["C", "T"], "C"))
    r, lo, hi = e.exp()
    assert lo < 0.6 < hi
    assert r == pytest.approx(0.6, rel=0.03)


def test_geometric_mean_ratio_interval_covers_in_about_95_percent():
    rng = np.random.default_rng(3)
    reps, covered = 100, 0
    for _ in range(reps):
        b, f, arm = _trial(rng, 80, ratio=0.7)
        (e,) = rc.geometric_mean_ratio(b, f, arm_coding(arm, ["C", "T"], "C"))
        _, lo, hi = e.exp()
        covered += lo < 0.7 < hi
    # Nominal 95%; with 100 replicates the Monte Carlo SE is about 2.2 points, so >= 88 is a
    # 3-SE lower bound.
    assert covered >= 88


def test_geometric_mean_ratio_equals_an_independent_statsmodels_fit():
    rng = np.random.default_rng(5)
    b, f, arm = _trial(rng, 150, ratio=0.75)
    cols = arm_coding(arm, ["C", "T"], "C")
    design = rc.log_ancova_design(b, f, cols)
    (e,) = rc.ols_effects(design)
    assert design.plan.kind == "spline"
    basis = _natural_spline(np.log(b), design.plan.knots)
    df = pd.DataFrame(basis, columns=[f"n{j}" for j in range(basis.shape[1])])
    df["lf"], df["arm"] = np.log(f), arm
    formula = "lf ~ " + " + ".join(df.columns[:basis.shape[1]]) + " + C(arm, Treatment('C'))"
    ref = smf.ols(formula, df).fit()
    name = "C(arm, Treatment('C'))[T.T]"
    lo, hi = ref.conf_int().loc[name]
    assert e.estimate == pytest.approx(ref.params[name], abs=1e-8)
    assert (e.lower, e.upper) == pytest.approx((lo, hi), abs=1e-8)
    assert e.exp() == pytest.approx((math.exp(ref.params[name]), math.exp(lo), math.exp(hi)), rel=1e-8)
    assert e.p_value == pytest.approx(ref.pvalues[name], rel=1e-6)


def test_fast_t_statistics_equal_the_least_squares_fit():
    rng = np.random.default_rng(6)
    b, f, arm = _trial(rng, 120)
    cols = arm_coding(arm, ["C", "T"], "C")
    for design in (rc.log_ancova_design(b, f, cols), rc.percent_change_design(b, f, cols),
                   rc.raw_ancova_design(b, f, cols)):
        (e,) = rc.ols_effects(design)
        assert rc.t_statistics(design)[0] == pytest.approx(e.statistic, rel=1e-9)


def test_percent_change_is_less_efficient_than_the_log_ancova_on_multiplicative_data():
    # Vickers (BMC Med Res Methodol 2001;1:6): percent change is the least powerful common analysis,
    # markedly so when baseline and follow-up correlate weakly (here 0.5 on the log scale).
    rng = np.random.default_rng(8)
    effs = []
    for _ in range(40):
        b, f, arm = _trial(rng, 200, ratio=0.7, sd_true=0.5, sd_error=0.5)
        cols = arm_coding(arm, ["C", "T"], "C")
        (p,) = rc.ols_effects(rc.percent_change_design(b, f, cols))
        (g,) = rc.ols_effects(rc.log_ancova_design(b, f, cols))
        effs.append(rc.relative_efficiency(p.statistic, g.statistic))
    assert np.median(effs) < 0.85


def test_proportional_odds_effect_has_the_right_sign_and_is_invariant_to_a_monotone_transform():
    pytest.importorskip("auditor.stats.ordinal")
    rng = np.random.default_rng(9)
    b, f, arm = _trial(rng, 200, ratio=0.6)
    cols = arm_coding(arm, ["C", "T"], "C")
    (e,) = rc.proportional_odds_effects(b, f, cols)
    assert e.upper < 0  # a fall in the active arm: lower follow-up more likely
    (e2,) = rc.proportional_odds_effects(b, np.log(f), cols)
    assert e2.estimate == pytest.approx(e.estimate, rel=1e-6)


def test_bootstrap_efficiency_is_seeded_and_brackets_the_estimate():
    rng = np.random.default_rng(10)
    b, f, arm = _trial(rng, 200, ratio=0.6)
    cols = arm_coding(arm, ["C", "T"], "C")
    pc, lg = rc.percent_change_design(b, f, cols), rc.log_ancova_design(b, f, cols)

    def z(rows):
        return rc.t_statistics(pc, rows)[0], rc.t_statistics(lg, rows)[0]

    one = rc.bootstrap_efficiency(z, arm, 200, seed=4)
    two = rc.bootstrap_efficiency(z, arm, 200, seed=4)
    assert one == two and one.replicates == 200
    point = rc.relative_efficiency(*z(np.arange(len(b))))
    assert one.lower < point < one.upper


# --------------------------------------------------------------------------- dichotomisation


def test_dichotomising_at_the_median_keeps_two_over_pi():
    # Altman and Royston (BMJ 2006;332:1080): dichotomising a normal variable at the median keeps
    # about 64% (= 2/pi) of the information (from memory).
    assert rc.dichotomisation_efficiency(0.0) == pytest.approx(2 / math.pi, rel=1e-12)
    for z in (0.3, 1.0, 2.0):
        assert rc.dichotomisation_efficiency(z) == pytest.approx(rc.dichotomisation_efficiency(-z))
        assert rc.dichotomisation_efficiency(z) < 2 / math.pi


@pytest.mark.parametrize("z", [0.0, 0.8, -1.5])
def test_dichotomisation_efficiency_is_the_limit_of_textbook_sample_sizes(z):
    # Per-arm sample sizes for 90% power at two-sided 5% (standard normal-approximation formulas):
    # means n = 2 (z_a + z_b)^2 sigma^2 / delta^2; proportions n = (z_a + z_b)^2 [p1 q1 + p2 q2] /
    # (p1 - p2)^2. As delta -> 0 their ratio tends to 1 / efficiency.
    k = (stats.norm.ppf(0.975) + stats.norm.ppf(0.9)) ** 2
    delta = 1e-3
    n_means = 2 * k / delta**2
    p1, p2 = stats.norm.sf(z - delta / 2), stats.norm.sf(z + delta / 2)
    n_props = k * (p1 * (1 - p1) + p2 * (1 - p2)) / (p1 - p2) ** 2
    assert n_means / n_props == pytest.approx(rc.dichotomisation_efficiency(z), rel=1e-5)


def test_change_against_ancova_with_equal_sds_is_one_plus_rho_over_two():
    # Frison and Pocock (Stat Med 1992;11:1685): Var(change) = 2 s^2 (1 - rho), Var(ANCOVA) = s^2 (1 - rho^2).
    for rho in (0.2, 0.5, 0.9):
        assert rc.change_vs_ancova_efficiency(1.3, 1.3, rho) == pytest.approx((1 + rho) / 2)
    assert rc.change_vs_ancova_efficiency(1.0, 2.0, 0.5) == pytest.approx(4 * 0.75 / (1 + 4 - 2))


@pytest.mark.parametrize("z,rho", [(0.0, 0.5), (1.0, 0.8), (-1.5, 0.3)])
def test_analytic_efficiency_agrees_with_simulation(z, rho):
    sim = rc.simulate_dichotomisation_efficiency(z, rho, n_per_arm=1000, reps=800, seed=17, noncentrality=5.0)
    analytic = rc.dichotomisation_efficiency(z) * (1 + rho) / 2
    # Within 3 Monte Carlo SEs, plus 2% for the O(delta^2) error of the local approximation; the
    # simulation is precise enough to tell the formula from one without the (1 + rho)/2 factor.
    assert abs(sim.value - analytic) <= 3 * sim.mc_se + 0.02 * analytic
    assert 3 * sim.mc_se + 0.02 * analytic < analytic * (1 - (1 + rho) / 2) / ((1 + rho) / 2)


def test_responder_cost_on_large_normal_data_matches_the_formula():
    rng = np.random.default_rng(12)
    n, rho = 40_000, 0.7
    b = rng.normal(3, 1, n)
    f = 3 + rho * (b - 3) + math.sqrt(1 - rho**2) * rng.normal(0, 1, n)
    cost = rc.responder_cost(b, f, "change", -0.5, "at-most")
    z_true = -0.5 / math.sqrt(2 * (1 - rho))
    assert cost.z_cut == pytest.approx(z_true, abs=0.02)
    expected = rc.dichotomisation_efficiency(z_true) * (1 + rho) / 2
    assert cost.efficiency == pytest.approx(expected, rel=0.02)
    assert cost.share_observed == pytest.approx(cost.share_normal, abs=0.01)
    assert cost.inflation == pytest.approx(1 / cost.efficiency)


def test_percent_change_rule_is_costed_on_the_log_scale():
    rng = np.random.default_rng(13)
    b, f, _ = _trial(rng, 20_000, ratio=1.0, sd_error=0.3)
    cost = rc.responder_cost(b, f, "percent-change", -30.0, "at-most")
    assert cost.scale == "log ratio"
    assert cost.cut == pytest.approx(math.log(0.7), abs=1e-3)
    z_true = math.log(0.7) / (0.3 * math.sqrt(2))
    assert cost.z_cut == pytest.approx(z_true, abs=0.03)


def test_continuity_cut_and_tie_tolerance_on_a_grid():
    base = np.array([3.0, 3.0, 3.0, 3.0, 3.0] * 4)
    change = np.array([-4, -3, -2, -1, 0] * 4) / 6
    follow = base + change
    resp = rc.responder_indicator(base, follow, "change", -0.5, "at-most")
    assert resp.tolist() == [1.0, 1.0, 0.0, 0.0, 0.0] * 4  # -3/6 meets "at most -0.5" despite rounding
    cost = rc.responder_cost(base + np.linspace(0, 1, 20), follow + np.linspace(0, 1, 20), "change", -0.5,
                             "at-most")
    assert cost.cut == pytest.approx(-5 / 12)


def test_responder_on_baseline_matches_statsmodels_and_recovers_a_known_slope():
    rng = np.random.default_rng(14)
    x = rng.normal(0, 1, 3000)
    r = (rng.uniform(size=3000) < 1 / (1 + np.exp(-(-0.5 + 0.8 * x)))).astype(float)
    curve = rc.responder_on_baseline(x, r)
    ref = sm.GLM(r, sm.add_constant(x), family=sm.families.Binomial()).fit()
    assert curve.slope == pytest.approx(ref.params[1], rel=1e-6)
    assert curve.slope_lower < 0.8 < curve.slope_upper
    assert np.all(np.diff(curve.prob) > 0)
    assert all(lo <= p <= hi for lo, p, hi in zip(curve.lower, curve.prob, curve.upper))
    with pytest.raises(ValueError, match="same responder status"):
        rc.responder_on_baseline(x, np.ones_like(x))


def test_recoding_shift_moves_codes_by_one():
    assert rc.recoding_shift([1, 2, 3, 4, 5]) == -1.0
    assert rc.recoding_shift([0, 1, 2, 3, 4]) == 1.0


def test_coding_summary_counts_undefined_and_averages_the_rest():
    # By hand: codes 1..3 shifted by -1 give baselines 0, 1, 2 and follow-ups 1, 0, 2: the first is
    # undefined, the others are -100% and 0%, so the mean is -50%.
    declared = rc.coding_summary([1.0, 2.0, 3.0], [2.0, 1.0, 3.0])
    assert declared.n_undefined == 0 and declared.mean == pytest.approx((100.0 - 50.0 + 0.0) / 3)
    shifted = rc.coding_summary([0.0, 1.0, 2.0], [1.0, 0.0, 2.0])
    assert shifted.n_undefined == 1 and shifted.mean == pytest.approx(-50.0)
    assert rc.coding_summary([0.0, -1.0], [1.0, 1.0]) == rc.CodingSummary(2, None)


def test_relative_difference_of_two_codings():
    assert rc.relative_difference(10.0, 12.0) == pytest.approx(0.2)  # |12 - 10| / 10, by hand
    assert rc.relative_difference(-4.0, 2.0) == pytest.approx(1.5)  # |2 + 4| / 4, by hand
    assert rc.relative_difference(0.0, 1.0) == math.inf
    assert rc.relative_difference(None, 1.0) == math.inf and rc.relative_difference(1.0, None) == math.inf


def test_extra_participants_is_the_inverse_efficiency_less_one():
    # Noether (1955): relative efficiency E means 1/E times the participants; E = 0.8 needs 25% more.
    assert rc.extra_participants(0.8) == pytest.approx(0.25)
    assert rc.extra_participants(1.25) == pytest.approx(-0.2)
    assert rc.extra_participants(0.0) == math.inf and rc.extra_participants(math.nan) == math.inf


def test_ordinal_ancova_refit_on_rows_matches_orderedmodel():
    # Reference: statsmodels OrderedModel (logit) fitted on the same rows and columns. The resample
    # leaves out every participant with baseline 5, so that category's indicator is constant there
    # and must be dropped, as the bootstrap does.
    import pandas as pd
    from statsmodels.miscmodels.ordinal_model import OrderedModel

    from auditor.stats.relative_change import ordinal_ancova_design, ordinal_effects, ordinal_z_statistics

    rng = np.random.default_rng(11)
    n = 240
    arm = (np.arange(n) % 2).astype(float)
    b = rng.integers(1, 6, n).astype(float)
    f = np.clip(np.round(0.7 * b + 0.6 * arm + rng.logistic(0, 1, n)), 1, 5)
    coding = arm_coding(np.where(arm == 1, "T", "C"), ["C", "T"], "C")
    design = ordinal_ancova_design(b, f, coding, categorical_baseline=True)
    assert design.names == ("baseline = 2", "baseline = 3", "baseline = 4", "baseline = 5", "arm[T]")
    full = OrderedModel(pd.Series(f), design.X, distr="logit").fit(method="newton", disp=False, maxiter=200)
    e = ordinal_effects(design)[0]
    assert abs(e.estimate - full.params.iloc[4]) < 1e-5 and abs(e.se - full.bse.iloc[4]) < 1e-4
    rows = np.flatnonzero(b < 5)
    sub = OrderedModel(pd.Series(f[rows]), design.X[rows][:, [0, 1, 2, 4]], distr="logit").fit(
        method="newton", disp=False, maxiter=200)
    z = ordinal_z_statistics(design, rows)[0]
    assert abs(z - sub.params.iloc[3] / sub.bse.iloc[3]) < 1e-3
    spline = ordinal_ancova_design(b + rng.normal(0, 0.3, n), f, coding, categorical_baseline=False)
    assert spline.baseline_terms == "spline" and spline.names[-1] == "arm[T]"
