"""Later-risk analysis: the numbers its wording prints beyond the tests (Analysis.reported), checked
without reading a sentence against statsmodels' logistic regression on the same columns (reference
library) and by hand."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special, stats

from auditor.checks.later_risk import EARLIER, INTERCEPT, LATEST, analyse, display_digits
from auditor.validation import later_risk_cases as lc

sm = pytest.importorskip("statsmodels.api")


@pytest.fixture(scope="module")
def u_shaped():
    """A U-shaped risk in the latest value, 900 participants, change declared (validation scenario)."""
    sc = next(s for s in lc.SCENARIOS if s.name == "u-shaped-n900-change-declared")
    y, latest, earlier = lc.simulate(sc, sc.n, np.random.default_rng(20))
    return analyse(y, latest, earlier, definition="change", seed=1)


def _design(an, latest, earlier):
    """Columns in the full model's order (after the intercept) at the given values."""
    cols = {**an.latest_term.columns(np.atleast_1d(latest)), **an.earlier_term.columns(np.atleast_1d(earlier))}
    return np.column_stack([cols[k] for k in an.full.names if k != INTERCEPT])


def _statsmodels(an):
    x = sm.add_constant(_design(an, an.latest, an.earlier))
    return sm.Logit(an.y, x).fit(disp=0, tol=1e-12, maxiter=200)


def test_modelled_risk_at_the_lowest_point_matches_statsmodels(u_shaped):
    """Risk at (lowest point, median earlier value): expit of statsmodels' linear predictor there; the
    band is expit(eta -/+ z SE) with SE from statsmodels' covariance (delta method)."""
    an, ref = u_shaped, _statsmodels(u_shaped)
    row = np.r_[1.0, _design(an, an.lowest.at, np.median(an.earlier))[0]]
    eta, se = row @ ref.params, math.sqrt(row @ ref.cov_params() @ row)
    z = stats.norm.ppf(0.975)
    assert an.reported.lowest_risk == pytest.approx(
        (special.expit(eta), special.expit(eta - z * se), special.expit(eta + z * se)), rel=1e-5)


def test_odds_ratios_of_the_ends_against_the_turning_point_match_statsmodels(u_shaped):
    """Supported U: odds at the 5th and 95th percentiles against the lowest point are exp of the
    difference of statsmodels' logits there (the earlier value cancels), with Wald intervals."""
    an, ref = u_shaped, _statsmodels(u_shaped)
    assert an.shape.flagged == "U-shaped" and an.reported.turning_ends == an.reported.minimum_ends
    z = stats.norm.ppf(0.975)
    at_min = _design(an, an.turning.at, 0.0)[0]
    for at, ratio, lo, hi in an.reported.turning_ends:
        c = np.r_[0.0, _design(an, at, 0.0)[0] - at_min]
        d, se = c @ ref.params, math.sqrt(c @ ref.cov_params() @ c)
        assert (ratio, lo, hi) == pytest.approx((math.exp(d), math.exp(d - z * se), math.exp(d + z * se)),
                                                rel=1e-5)
        assert ratio > 1  # a U: both ends riskier than its bottom (truth of the scenario)


def test_partition_shares_and_aic_gaps_match_statsmodels_fits(u_shaped):
    """Each value's share is its LR chi-square given the other over the chi-square of both values
    (LR = 2 x log-likelihood difference of statsmodels fits); AIC gaps are statsmodels' AIC of the
    latest-only and earlier-only models minus that of both values."""
    an = u_shaped
    lt, et = an.latest_term.columns(an.latest), an.earlier_term.columns(an.earlier)

    def fit(cols):
        return sm.Logit(an.y, sm.add_constant(np.column_stack(list(cols.values())))).fit(disp=0, tol=1e-12)

    full, only_l, only_e = fit({**lt, **et}), fit(lt), fit(et)
    null = sm.Logit(an.y, np.ones((len(an.y), 1))).fit(disp=0)
    joint = 2 * (full.llf - null.llf)
    by_name = {r.name: r for r in an.reported.partition}
    assert by_name[LATEST].share == pytest.approx(100 * 2 * (full.llf - only_e.llf) / joint, rel=1e-6)
    assert by_name[EARLIER].share == pytest.approx(100 * 2 * (full.llf - only_l.llf) / joint, rel=1e-6)
    assert by_name["all blocks together"].share == pytest.approx(100.0)
    assert by_name["whole model"].share is None
    assert an.reported.shares[LATEST] == pytest.approx(by_name[LATEST].share / 100)
    gaps = dict(zip([name for name, _ in an.models()], an.reported.aic_gaps))
    assert gaps["Latest value only"] == pytest.approx(only_l.aic - full.aic, rel=1e-6)
    assert gaps["Earlier value only"] == pytest.approx(only_e.aic - full.aic, rel=1e-6)
    assert gaps["Both values"] == 0.0


def test_no_change_rows_give_the_model_of_both_values_at_latest_equal_earlier(u_shaped):
    """Same-change table, no-change rows: latest = earlier at the 10th..90th percentiles of the earlier
    value, risk from both values = statsmodels' expit there, in percent."""
    an, ref = u_shaped, _statsmodels(u_shaped)
    rows = [r for r in an.reported.same_change_rows if r[2] == 0.0]
    starts = np.quantile(an.earlier, [0.10, 0.25, 0.50, 0.75, 0.90])
    assert len(rows) == 5
    for r, e in zip(rows, starts):
        eta = np.r_[1.0, _design(an, e, e)[0]] @ ref.params
        assert r[0] == r[1] == round(float(e), an.reported.digits)
        assert r[3] == pytest.approx(100 * special.expit(eta), rel=1e-5)


def test_compare_curves_stop_where_the_latest_value_leaves_the_observed_range(u_shaped):
    """For a change, latest = start + change: NaN exactly where that lies outside [min, max] of latest."""
    an = u_shaped
    c = an.reported.compare
    lo, hi = an.latest.min(), an.latest.max()
    assert [s for s, _ in c.starts] == pytest.approx(list(np.quantile(an.earlier, [0.1, 0.5, 0.9])))
    for start, risk in c.starts:
        outside = (start + c.own.x < lo) | (start + c.own.x > hi)
        assert np.array_equal(np.isnan(risk), outside)


@pytest.mark.parametrize("sd, digits", [(0.4, 2), (3.0, 1), (40.0, 0), (0.0004, 4), (0.0, 2)])
def test_display_digits_show_two_significant_digits_of_the_sd(sd, digits):
    """By hand: two values a +/- sd apart have population SD sd; 1 - floor(log10 sd) decimals, 0 to 4
    (a convention of this tool)."""
    assert display_digits(np.array([10.0 - sd]), np.array([10.0 + sd])) == digits


def test_a_copy_at_another_level_works_out_its_own_reported_numbers(u_shaped):
    """The reported numbers follow the analysis they belong to: a copy made with dataclasses.replace at
    level 0.90 gives the lowest-point band at z = 1.645 (scipy), narrower than the original's at 1.96,
    around the same risk; the original's numbers are untouched."""
    from dataclasses import replace

    before = u_shaped.reported.lowest_risk
    narrower = replace(u_shaped, level=0.90).reported.lowest_risk
    assert narrower[0] == pytest.approx(before[0], rel=1e-12)
    assert before[1] < narrower[1] < narrower[0] < narrower[2] < before[2]
    assert u_shaped.reported.lowest_risk == before
