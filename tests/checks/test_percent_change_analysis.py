"""The percent-change check's numbers, read from its Analysis (no sentence is parsed): counts planted
in simulated data, and fits of the same models by statsmodels and scipy, the source beside each value."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from auditor.checks.percent_change import TOP_EXTREMES, analyse
from auditor.metadata import ResponderRule
from tests.checks.test_percent_change import (BLINDED, UNBLINDED, _additive_with_small_baselines, _arms, _data,
                                              _multiplicative, _ordinal_trial)


def _ols_arm_effect(y, arm, level=0.95):
    """statsmodels OLS of y on an intercept and the T indicator: (estimate, lower, upper, t)."""
    fit = sm.OLS(np.asarray(y, float), sm.add_constant((np.asarray(arm) == "T").astype(float))).fit()
    lo, hi = fit.conf_int(alpha=1 - level)[1]
    return fit.params[1], lo, hi, fit.tvalues[1]


def _ordinal_codes(seed=5, n=300):
    """A 5-level ordinal outcome coded 1..5 whose follow-up falls by half a level in arm T."""
    rng = np.random.default_rng(seed)
    arm = _arms(n)
    latent = rng.normal(0, 1, n)
    b = np.clip(np.round(3 + latent + rng.normal(0, 0.5, n)), 1, 5)
    f = np.clip(np.round(3 + latent - 0.5 * (arm == "T") + rng.normal(0, 0.5, n)), 1, 5)
    return b, f, arm


def test_definedness_counts_the_planted_baselines_and_lists_the_largest_changes():
    # Known truth: one baseline at 0, one below 0 and one at 1 (below 5% of a median near 100) are
    # planted into log-normal data; the extremes are recomputed here by sorting |percent change|.
    b, f, arm = _multiplicative()
    b = b.copy()
    b[0], b[1], b[2] = 0.0, -2.0, 1.0
    an = analyse(_data(b, f, arm), UNBLINDED)
    ins = an.defined.instability
    assert (ins.n_zero, ins.n_negative, ins.n_undefined) == (1, 1, 2)
    assert ins.threshold == pytest.approx(0.05 * np.median(b))
    assert ins.n_near_zero == int(np.sum((b > 0) & (b < 0.05 * np.median(b)))) == 1
    with np.errstate(divide="ignore"):
        pc = 100 * (f - b) / b
    assert an.percent[2] == pytest.approx(pc[2]) and np.isnan(an.percent[:2]).all()
    extremes = an.defined.extremes
    assert len(extremes) == TOP_EXTREMES
    assert [x.baseline for x in extremes[:2]] == [0.0, -2.0] and all(np.isnan(x.percent) for x in extremes[:2])
    defined = np.flatnonzero(b > 0)
    by_size = defined[np.argsort(-np.abs(pc[defined]), kind="stable")][:TOP_EXTREMES - 2]
    assert [x.percent for x in extremes[2:]] == pytest.approx(pc[by_size].tolist())
    assert extremes[2].baseline == 1.0 and extremes[2].near_zero
    assert not any(x.near_zero for x in extremes[3:])
    assert an.defined.extreme == pytest.approx(np.max(np.abs(pc[defined])))


def test_recoding_effects_match_statsmodels_ols_under_both_codings():
    # Reference: statsmodels OLS of percent change on the arm indicator, with the declared codes
    # 1..5 and with the codes 0..4 (the rows whose shifted baseline is 0 left out, as undefined).
    b, f, arm = _ordinal_codes()
    an = analyse(_data(b, f, arm, scale="ordinal", levels=[1, 2, 3, 4, 5]), UNBLINDED)
    rec = an.recoding
    assert rec.shift == -1.0 and rec.by_arm
    est, lo, hi, _ = _ols_arm_effect(100 * (f - b) / b, arm)
    e1 = rec.declared_effect
    assert (e1.estimate, e1.lower, e1.upper) == pytest.approx((est, lo, hi), rel=1e-9)
    b0, f0 = b - 1, f - 1
    ok = b0 > 0
    est0, lo0, hi0, _ = _ols_arm_effect(100 * (f0[ok] - b0[ok]) / b0[ok], arm[ok])
    e2 = rec.shifted_effect
    assert (e2.estimate, e2.lower, e2.upper) == pytest.approx((est0, lo0, hi0), rel=1e-9)
    assert rec.shifted.n_undefined == int(np.sum(~ok)) > 0 and rec.declared.n_undefined == 0
    assert rec.shifted.mean == pytest.approx(np.mean(100 * (f0[ok] - b0[ok]) / b0[ok]))
    assert rec.relative_change == pytest.approx(abs(est0 - est) / abs(est))
    assert rec.material  # undefined participants after the shift, at the default recoding_change


def test_baseline_dependence_matches_scipy_spearman_and_the_fieller_interval():
    # Reference: scipy.stats.spearmanr, with the interval tanh(atanh(rho) -/+ z sqrt(1.06 / (n - 3)))
    # (Fieller, Hartley and Pearson, Biometrika 1957;44:470). Additive data: percent change = -3/b in T,
    # so the within-arm dependence is strongest in T (known truth of the simulation).
    b, f, arm = _additive_with_small_baselines()
    an = analyse(_data(b, f, arm), UNBLINDED)
    pc = 100 * (f - b) / b
    dep = an.baseline

    def fieller(x, y):
        r = stats.spearmanr(x, y).statistic
        half = stats.norm.ppf(0.975) * math.sqrt(1.06 / (len(x) - 3))
        return r, math.tanh(math.atanh(r) - half), math.tanh(math.atanh(r) + half)

    assert (dep.pooled.r, dep.pooled.lower, dep.pooled.upper) == pytest.approx(fieller(b, pc), rel=1e-9)
    assert [x.arm for x in dep.within] == ["C", "T"] and [x.n for x in dep.within] == [150, 150]
    for x in dep.within:
        sel = arm == x.arm
        assert (x.rho.r, x.rho.lower, x.rho.upper) == pytest.approx(fieller(b[sel], pc[sel]), rel=1e-9)
    assert dep.strongest.arm == "T" and dep.judged is dep.strongest.rho
    assert abs(dep.judged.r) >= 0.3 and dep.judged.lower > 0


def test_asymmetry_matches_scipy_skewness_and_the_planted_floor():
    # Known truth: 40 of 300 follow-ups set to 0 sit at -100% and leave the log ratio undefined.
    # Reference: scipy.stats.skew(bias=False) (the adjusted G1) and scipy.stats.skewtest.
    b, f, arm = _multiplicative(noise=0.4)
    f = f.copy()
    f[:40] = 0.0
    an = analyse(_data(b, f, arm), UNBLINDED)
    s_pc, s_lr = an.asymmetry.percent_shape, an.asymmetry.log_ratio_shape
    pc = 100 * (f - b) / b
    assert s_pc.n_at_floor == 40 and s_pc.floor_share == pytest.approx(40 / 300)
    assert s_pc.skewness == pytest.approx(stats.skew(pc, bias=False), rel=1e-12)
    assert s_pc.skew_p == pytest.approx(stats.skewtest(pc).pvalue, rel=1e-12)
    lr = np.log(f[40:] / b[40:])
    assert s_lr.n == 260 and s_lr.skewness == pytest.approx(stats.skew(lr, bias=False), rel=1e-12)
    assert np.isnan(an.asymmetry.log_ratio[:40]).all()


def test_planned_effect_and_efficiency_match_statsmodels_on_an_ordinal_outcome():
    # Reference: statsmodels OLS for the planned percent change by arm and statsmodels OrderedModel
    # (logit link) for the proportional-odds ANCOVA with baseline as categories, the reference
    # analysis of an ordinal outcome; the efficiency is (t_planned / z_ref)^2 (Noether 1955).
    from statsmodels.miscmodels.ordinal_model import OrderedModel

    b, f, arm = _ordinal_trial()
    an = analyse(_data(b, f, arm, scale="ordinal", levels=[1, 2, 3, 4, 5]), UNBLINDED)
    fits, cost = an.effects.fits, an.effects.cost
    assert fits.reference_design.analysis == "proportional-odds ANCOVA" and fits.proportional_odds
    est, lo, hi, t_pc = _ols_arm_effect(100 * (f - b) / b, arm)
    planned = fits.planned[0]
    assert (planned.estimate, planned.lower, planned.upper, planned.statistic) == pytest.approx(
        (est, lo, hi, t_pc), rel=1e-9)
    X = pd.DataFrame({**{f"b{v:g}": (b == v).astype(float) for v in (2, 3, 4, 5)},
                      "T": (arm == "T").astype(float)})
    ref = OrderedModel(pd.Series(f), X, distr="logit").fit(method="newton", disp=False, maxiter=200)
    z_ref = ref.params["T"] / ref.bse["T"]
    assert fits.reference[0].estimate == pytest.approx(ref.params["T"], abs=1e-4)
    assert cost.reference.statistic == pytest.approx(z_ref, rel=1e-3)
    assert cost.efficiency == pytest.approx((t_pc / z_ref) ** 2, rel=2e-3)
    assert cost.informative == (abs(z_ref) >= 2)
    assert cost.interval.replicates + cost.interval.failed == 200  # quick mode
    reference_rows = [x for x in an.effects.compared if x.is_reference]
    assert len(reference_rows) == 1 and reference_rows[0].efficiency == pytest.approx(1.0)
    planned_row = an.effects.compared[0]
    assert planned_row.effect is planned and planned_row.needed == pytest.approx(1 / cost.efficiency)


def test_the_log_scale_reference_recovers_the_simulated_ratio_and_the_bootstrap_is_seeded():
    # Known truth: follow-up = baseline x 0.8 in arm T with a log-scale SD of 0.05, so the ratio of
    # geometric means is 0.8 and the log-scale ANCOVA is the reference.
    b, f, arm = _multiplicative()
    an = analyse(_data(b, f, arm), UNBLINDED)
    ref = an.effects.fits.reference[0]
    assert an.effects.fits.reference_design.analysis == "log-scale ANCOVA"
    ratio, lo, hi = ref.exp()
    assert lo < 0.8 < hi and ratio == pytest.approx(0.8, abs=0.01)
    again = analyse(_data(b, f, arm), UNBLINDED).effects.cost
    assert again.interval == an.effects.cost.interval
    interval = an.effects.cost.interval
    assert interval.lower <= an.effects.cost.efficiency <= interval.upper


def test_responder_cost_and_curve_match_the_closed_form_and_statsmodels_logit():
    # References: the dichotomisation efficiency phi(z)^2 / (Phi(z)(1 - Phi(z))) (Altman and Royston,
    # BMJ 2006;332:1080), via scipy.stats.norm; statsmodels Logit of responder status on baseline.
    rng = np.random.default_rng(9)
    n = 400
    arm = _arms(n)
    b = rng.normal(3, 0.7, n)
    f = 0.4 * b + 1.8 - 0.3 * (arm == "T") + rng.normal(0, 0.45, n)
    rule = ResponderRule(basis="change", threshold=-0.5, direction="at-most")
    an = analyse(_data(b, f, arm, planned="responder", responder=rule), UNBLINDED)
    part = an.responder
    responder = (f - b <= -0.5).astype(float)
    assert part.indicator.tolist() == responder.tolist()
    c = part.cost
    assert c.share_observed == pytest.approx(responder.mean())
    z = c.z_cut
    assert c.dichotomy_efficiency == pytest.approx(
        stats.norm.pdf(z) ** 2 / (stats.norm.cdf(z) * stats.norm.sf(z)), rel=1e-12)
    logit = sm.Logit(responder, sm.add_constant(b)).fit(disp=0)
    assert part.curve.slope == pytest.approx(logit.params[1], rel=1e-6)
    lo, hi = logit.conf_int()[1]
    assert (part.curve.slope_lower, part.curve.slope_upper) == pytest.approx((lo, hi), rel=1e-6)
    # Follow-up regresses towards the mean, so responding depends on baseline (known truth).
    assert part.baseline_material
    assert an.effects.fits.planned_design.analysis == "responders by arm"
    assert an.cost is an.effects.cost


def test_a_blinded_analysis_holds_only_pooled_parts():
    b, f, arm = _ordinal_codes()
    an = analyse(_data(b, f, arm, scale="ordinal", levels=[1, 2, 3, 4, 5], drop_arm=True), BLINDED)
    assert an.inputs.arm is None and an.inputs.arms == [] and not an.inputs.coding.contrasts
    assert an.effects is None and an.cost is None and an.baseline.within == ()
    assert an.recoding.declared_effect is None and not an.recoding.by_arm
    pc = 100 * (f - b) / b
    assert an.recoding.before == pytest.approx(pc.mean())  # the pooled mean percent change
