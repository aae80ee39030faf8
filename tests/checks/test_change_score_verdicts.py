"""Change-score verdicts a statistician can sign: the trial's own cost of change against ANCOVA,
multiplicity across the assumption tests, the truncation-edge test's limits, stability between data
cuts, and verdict-level known truth (Monte Carlo SE stated beside each rate)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from auditor.checks.change_score import MATERIAL_RATIO, run
from auditor.checks.registry import CheckContext
from auditor.stats.diagnostics import boxcox_lr_pvalue, boxcox_profile, holm_adjust
from auditor.stats.efficiency import own_cost
from auditor.validation.change_score_cases import (VERDICT_SCENARIOS, bivariate, outcome_data_for, true_cost,
                                                   verdict_rates)

CTX = CheckContext(seed=11, blinded=False, quick=True)


def _sub(res, sid):
    return next(s for s in res.subfindings if s.id == sid)


def _cost(res):
    return next(e for e in res.estimates if e.name.startswith("Sample-size ratio, change / ANCOVA (this trial"))


def _mcse(p, reps):
    return math.sqrt(p * (1 - p) / reps)


# --------------------------------------------------------------------------- the cost and its interval


def test_own_cost_equals_the_moment_formula_and_the_equal_variance_case():
    rng = np.random.default_rng(4)
    b, f, a = bivariate(0.8, 0.6)(rng, 300)
    c = own_cost(b, f, a)
    # Independent computation: within-arm (co)variances, var(f - b) / (var f - cov^2 / var b).
    x = b - np.where(a == 1, b[a == 1].mean(), b[a == 0].mean())
    y = f - np.where(a == 1, f[a == 1].mean(), f[a == 0].mean())
    m = np.cov(x, y, bias=True)
    assert c.ratio == pytest.approx((m[0, 0] + m[1, 1] - 2 * m[0, 1]) / (m[1, 1] - m[0, 1] ** 2 / m[0, 0]), rel=1e-12)
    # With equal variances the ratio is 2/(1 + r) (Frison and Pocock, Stat Med 1992;11:1685-1704).
    z = (y / y.std()) * x.std()
    r = np.corrcoef(x, z)[0, 1]
    assert own_cost(x, z).ratio == pytest.approx(2 / (1 + r), rel=1e-9)
    # Slope exactly 1 in the sample: change is exactly as efficient as ANCOVA, whatever r.
    e = rng.normal(0, 25, 300)
    e -= np.polyval(np.polyfit(x, e, 1), x)  # residual orthogonal to baseline: sample slope 1
    d = own_cost(x, x + e)
    assert d.ratio == pytest.approx(1.0, abs=1e-9) and d.r < 0.5


def test_own_cost_agrees_with_the_simulated_variance_ratio_of_the_two_estimators():
    # Frison and Pocock (1992) without equal variances: var(change effect) / var(ANCOVA effect) is
    # 1 + (slope - 1)^2 r^2 / (slope^2 (1 - r^2)); here slope 0.5, r 0.5: 4/3 (and 1 at slope 1, r 0.45).
    for slope, r, truth in ((0.5, 0.5, 4 / 3), (1.0, 0.45, 1.0)):
        assert true_cost(slope, r) == pytest.approx(truth)
        rng = np.random.default_rng(6)
        make = bivariate(slope, r)
        chg, anc = [], []
        for _ in range(1500):
            b, f, a = make(rng, 200)
            d = f - b
            chg.append(d[a == 1].mean() - d[a == 0].mean())
            X = np.column_stack([np.ones(200), b, a])
            anc.append(np.linalg.lstsq(X, f, rcond=None)[0][2])
        # Monte Carlo SE of a variance ratio from 1500 replicates is about 3.7%; allow 3 of them.
        assert np.var(chg) / np.var(anc) == pytest.approx(truth, rel=0.11)


def test_own_cost_interval_covers_the_truth():
    # Slope 0.7, r 0.6: true ratio 1.103. 200 replicates of 200 participants: coverage MCSE about 1.5%.
    truth = true_cost(0.7, 0.6)
    rng = np.random.default_rng(12)
    make = bivariate(0.7, 0.6)
    hits = sum(c.lower <= truth <= c.upper for c in (own_cost(*make(rng, 200)[:2]) for _ in range(200)))
    assert hits / 200 >= 0.95 - 2 * _mcse(0.95, 200)


# --------------------------------------------------------------------------- multiplicity


def test_holm_adjustment_matches_statsmodels():
    from statsmodels.stats.multitest import multipletests

    p = [0.01, 0.04, 0.03, 0.2, 0.005]
    ref = multipletests(p, method="holm")[1]  # statsmodels reference implementation
    assert holm_adjust(p) == pytest.approx(list(ref))
    assert holm_adjust([0.02, None, 0.04]) == [0.04, None, 0.04]


def test_boxcox_lr_pvalue_agrees_with_the_profile_interval():
    rng = np.random.default_rng(8)
    b = np.exp(rng.normal(3, 0.5, 400))
    f = b * np.exp(rng.normal(0, 0.25, 400))
    prof = boxcox_profile(f, b, {})
    # The 95% profile interval is the set of powers not rejected at 5% by the same likelihood ratio.
    for lam in prof.grid:
        assert (boxcox_lr_pvalue(prof, lam) >= 0.05) == prof.includes(lam)


def test_null_rates_of_the_verdict_with_change_planned():
    # Every assumption true (bivariate normal, slope 1, r 0.8, 100 per arm), 40 replicates: unsupported
    # at most 0.05 + 2 MCSE (MCSE 0.034) and caution at most 0.15 + 2 MCSE (MCSE 0.056).
    rates = verdict_rates(VERDICT_SCENARIOS["null-slope1-r08"], 40, 31)
    assert rates["unsupported"] <= 0.05 + 2 * _mcse(0.05, 40), rates
    assert rates["caution"] <= 0.15 + 2 * _mcse(0.15, 40), rates


# --------------------------------------------------------------------------- the rules of the verdict


def test_unequal_variances_with_slope_one_are_never_unsupported():
    # Slope 1, r 0.45, follow-up SD 2.2 times baseline SD: the equal-variance rule "r below 0.5" would
    # condemn change, but change is exactly as efficient as ANCOVA here (true cost 0%).
    rates = verdict_rates(VERDICT_SCENARIOS["null-slope1-r045"], 20, 32)
    assert rates["unsupported"] == 0.0, rates
    assert rates["flag:efficiency"] <= 0.05 + 2 * _mcse(0.05, 20), rates


def test_slope_half_with_change_planned_is_unsupported_on_its_cost():
    # Slope 0.5, r 0.5, 400 per arm: true cost 33% (Frison-Pocock, unequal-variance form). 10 replicates.
    rates = verdict_rates(VERDICT_SCENARIOS["change-slope05"], 10, 33)
    assert rates["unsupported"] >= 0.8 - 2 * _mcse(0.8, 10), rates


def test_ancova_planned_with_slope_half_is_sound():
    rates = verdict_rates(VERDICT_SCENARIOS["ancova-slope05"], 20, 34)
    assert rates["sound"] >= 0.85 - 2 * _mcse(0.85, 20), rates


def test_large_trial_with_a_slope_just_below_one_is_never_unsupported():
    # 2,000 per arm, slope 0.97, r 0.8: the slope's CI excludes 1 in most replicates, but the true cost
    # is 0.2%, far below 10%.
    rates = verdict_rates(VERDICT_SCENARIOS["large-slope097"], 3, 35)
    assert rates["unsupported"] == 0.0 and rates["sound"] + rates["caution"] == 1.0, rates
    assert true_cost(0.97, 0.8) < 1.01


def test_floor_and_ordinal_scores_raise_at_least_caution():
    floor = verdict_rates(VERDICT_SCENARIOS["floor40"], 10, 36)
    assert floor["flag:bounds"] == 1.0 and floor["sound"] == 0.0, floor
    ordinal = verdict_rates(VERDICT_SCENARIOS["ordinal04"], 10, 37)
    assert ordinal["flag:interval"] == 1.0 and ordinal["sound"] == 0.0, ordinal


def test_a_slope_excluding_one_with_a_small_cost_is_not_unsupported():
    rng = np.random.default_rng(1)
    b, f, a = bivariate(0.87, 0.6)(rng, 400)
    res = run(outcome_data_for(b, f, a), CTX)
    slope = next(e for e in res.estimates if e.name.startswith("Slope of follow-up"))
    assert slope.upper < 1.0  # the 95% CI excludes 1 ...
    assert _cost(res).value < MATERIAL_RATIO  # ... but change costs about 1% more participants
    assert res.verdict.value in ("sound", "caution"), res.headline
    assert res.headline.startswith("Change from baseline needs") and "more participants (" in res.headline


def test_verdict_does_not_flip_between_two_data_cuts():
    # One simulated trial (slope 0.87, r 0.6: true cost 1.3%), analysed at 150 and then 200 per arm.
    # The slope's CI includes 1 at the first cut (p 0.37) and excludes it at the second (p 0.025), which
    # under a p-value rule moved the verdict; the trial's own cost moves from 0.3% to 1.3% and the
    # verdict stays.
    rng = np.random.default_rng(1)
    b, f, a = bivariate(0.87, 0.6)(rng, 400)
    first = np.sort(np.concatenate([np.flatnonzero(a == k)[:150] for k in (0, 1)]))
    cuts = [run(outcome_data_for(b[s], f[s], a[s]), CTX) for s in (first, np.arange(400))]
    slopes = [next(e for e in r.estimates if e.name.startswith("Slope of follow-up")) for r in cuts]
    assert slopes[0].lower <= 1.0 <= slopes[0].upper and slopes[1].upper < 1.0
    assert abs(_cost(cuts[1]).value - _cost(cuts[0]).value) < 0.02
    assert cuts[0].verdict == cuts[1].verdict, [c.headline for c in cuts]


# --------------------------------------------------------------------------- the truncation-edge test


def _ceiling_scale(seed):
    """A 0-28 score with no selection: a latent normal near the top, clipped at the scale's bounds."""
    rng = np.random.default_rng(seed)
    n = 300
    a = rng.permutation(np.arange(n) % 2)
    t = rng.normal(20, 5, n)
    b = np.clip(t + rng.normal(0, 2, n), 0, 28)
    f = np.clip(t - a + rng.normal(0, 2, n), 0, 28)
    return b, f, a


def test_a_scale_bound_is_not_a_sharp_edge():
    b, f, a = _ceiling_scale(100)
    assert 0 < np.mean(b == 28) < 0.15
    # Without declared bounds the edge test reads the top of the scale as a cut ...
    undeclared = _sub(run(outcome_data_for(b, f, a), CTX), "selection")
    assert undeclared.verdict.value == "caution" and "upper edge at 28" in undeclared.evidence
    # ... with the 0-28 bounds declared it does not test that end.
    sel = _sub(run(outcome_data_for(b, f, a, (0.0, 28.0)), CTX), "selection")
    assert sel.verdict.value == "sound" and "not tested at the upper end at the scale bound 28" in sel.evidence


def test_the_edge_test_runs_only_on_the_side_the_declared_criterion_did_not_select():
    from auditor.metadata import OutcomeSpec
    from auditor.study import OutcomeData

    rng = np.random.default_rng(5)
    b, f, a = bivariate(1.0, 0.8)(rng, 600)
    keep = b >= 50
    data = outcome_data_for(b[keep], f[keep], a[keep])
    spec = OutcomeSpec(param="SIM", label="simulated", scale="continuous", baseline_visit="B",
                       followup_visits=["F"], planned_analysis="change",
                       entry_criterion={"visit": "B", "operator": ">=", "value": 50})
    res = run(OutcomeData(spec, data.frame, data.arms, data.control_arm, data.design, []), CTX)
    # The selected (lower) end is never tested; the unselected upper end is, and has no edge here.
    edge = [e for e in res.estimates if e.name.startswith("Truncation-edge")]
    assert len(edge) == 1 and "unselected side" in edge[0].name and edge[0].note.startswith("upper edge")
    sel = _sub(res, "selection")
    assert sel.verdict.value == "caution"  # from the declaration, not the edge test
    assert "no evidence of a sharp edge at the unselected upper end" in sel.evidence


def test_hidden_selection_alone_raises_caution_only():
    # Baseline hard-truncated at 55 with no criterion declared, follow-up = baseline + effect + noise
    # (slope 1: change costs nothing). The edge test finds the cut; the verdict is caution, never unsupported.
    rng = np.random.default_rng(9)
    b = rng.normal(50, 10, 2000)
    b = b[b > 55][:300]
    a = rng.permutation(np.arange(len(b)) % 2)
    f = b + 2 * a + rng.normal(0, 4, len(b))
    res = run(outcome_data_for(b, f, a), CTX)
    assert _sub(res, "selection").verdict.value == "caution"
    assert res.verdict.value == "caution", res.headline


# --------------------------------------------------------------------------- few baseline levels


def _few_level_trial(n_levels, seed=2):
    """A 0-4 ordinal score whose baseline, after entry selection, takes only the top n_levels values."""
    rng = np.random.default_rng(seed)
    n = 200
    a = rng.permutation(np.arange(n) % 2)
    lat = rng.normal(0, 1, n)
    b = np.clip(np.round(3 + 0.8 * (lat + rng.normal(0, 0.4, n))), 5 - n_levels, 4)
    f = np.clip(np.round(2.5 + 1.2 * lat - 0.4 * a + rng.normal(0, 0.6, n)), 0, 4)
    return outcome_data_for(b, f, a, scale="ordinal", levels=[0, 1, 2, 3, 4])


@pytest.mark.parametrize("n_levels", [2, 3, 4])
def test_an_ordinal_baseline_with_few_levels_enters_as_categories(n_levels):
    import statsmodels.formula.api as smf

    data = _few_level_trial(n_levels)
    assert len(np.unique(data.frame["baseline"])) == n_levels
    res = run(data, CTX)  # a quadratic in a two-level baseline made the design singular
    assert res.verdict.value in ("caution", "unsupported"), res.headline
    lin = _sub(res, "linearity")
    assert f"baseline as {n_levels} categories" in lin.evidence
    row = next(r for r in next(t for t in res.tables if t.id == "analyses").rows
               if r[0] == "ANCOVA, baseline as categories")
    # Reference: statsmodels OLS with baseline as a factor (C()), fitted here.
    df = data.frame.assign(active=(data.frame["arm"] == "Active").astype(float))
    ref = smf.ols("followup ~ C(baseline) + active", df).fit()
    assert row[2] == pytest.approx(ref.params["active"], abs=1e-9)
    assert row[3] == pytest.approx(ref.bse["active"], rel=1e-9)
    if n_levels > 2:
        ref_lin = smf.ols("followup ~ baseline + active", df).fit()
        f_stat = ((ref_lin.ssr - ref.ssr) / (n_levels - 2)) / (ref.ssr / ref.df_resid)
        assert f"F = {f_stat:.2f} on {n_levels - 2} and" in lin.evidence
    else:
        assert "no nonlinearity to test" in lin.evidence
