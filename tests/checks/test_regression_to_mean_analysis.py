"""Regression-to-mean analysis: the numbers the report shows, checked on the Analysis itself (no
sentence read) against closed forms and outside implementations (scipy, numpy)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from auditor.checks.registry import CheckContext
from auditor.checks.regression_to_mean import Readings, analyse, find_selection
from auditor.metadata import OutcomeSpec
from auditor.study import OutcomeData
from tests.adam.test_entry_window import _window_data
from tests.checks.test_regression_to_mean import simulate

CTX = CheckContext(seed=11, blinded=False, quick=True)


def _analysis(data, ctx=CTX):
    everyone = Readings.of(data, ctx)
    sel, finds = find_selection(data.spec, everyone, ctx)
    return analyse(data, ctx, everyone, sel, finds)


def _declare(data, **changes):
    raw = data.spec.model_dump(exclude_none=True)
    raw.update(changes)
    return OutcomeData(OutcomeSpec.model_validate(raw), data.frame, data.arms, data.control_arm, data.design, [])


def _barnett(mu, sigma, rho, cut):
    """Expected change after selection above ``cut``: -(1 - rho) sigma phi(z) / (1 - Phi(z)),
    z = (cut - mu) / sigma (Barnett, van der Pols and Dobson 2005; written out here with scipy)."""
    z = (cut - mu) / sigma
    return -(1 - rho) * sigma * stats.norm.pdf(z) / stats.norm.sf(z)


def test_shrunk_values_are_the_closed_form_and_their_mean_shift_the_expected_change():
    """Shrunk value rho x + (1 - rho) mu (Kelley 1947; the standard regression-to-the-mean formula,
    from memory) for every entry reading, sorted; the mean shrinkage is -(1 - rho)(mean x - mu), which
    at the truncated-normal MLE (whose fitted truncated mean equals the sample mean, a property of
    the exponential-family MLE) is Barnett's expected change."""
    data = simulate(np.random.default_rng(5), n=400)
    an = _analysis(data)
    fit, rho, sh = an.scale.fit, an.rho, an.shrinkage
    x = np.sort(data.frame["baseline"].to_numpy(float))
    assert np.array_equal(sh.observed, x)
    np.testing.assert_allclose(sh.shrunk, rho * x + (1 - rho) * fit.mu, rtol=0, atol=1e-12)
    assert sh.mean_shift == pytest.approx(-(1 - rho) * (x.mean() - fit.mu), abs=1e-12)
    assert sh.mean_shift == pytest.approx(_barnett(fit.mu, fit.sigma, rho, 52.0), rel=1e-3)


def test_change_with_the_declared_reliability_is_barnett_at_the_fitted_population():
    """One-sided cutoff: Barnett's closed form (above) at the fitted mean and SD and the declared 0.5;
    a second pre-treatment reading is used for the reliability, so the declared one is a sensitivity."""
    an = _analysis(simulate(np.random.default_rng(8), reliability=0.5))
    fit = an.scale.fit
    assert an.rel.source == "pre-treatment pair"
    assert an.declared_change == pytest.approx(_barnett(fit.mu, fit.sigma, 0.5, 52.0), rel=1e-9)


def test_change_with_the_declared_reliability_in_a_window_uses_scipy_truncnorm():
    """Two-sided window: -(1 - rho)(E[X | a <= X <= b] - mu), the truncated mean from
    scipy.stats.truncnorm (an outside implementation) at the fitted mean and SD."""
    an = _analysis(_declare(_window_data(np.random.default_rng(16)), reliability=0.6))
    fit = an.scale.fit
    a, b = (45.0 - fit.mu) / fit.sigma, (62.0 - fit.mu) / fit.sigma
    truth = -(1 - 0.6) * (stats.truncnorm.mean(a, b, loc=fit.mu, scale=fit.sigma) - fit.mu)
    assert an.declared_change == pytest.approx(truth, rel=1e-9)


def test_no_declared_sensitivity_without_a_declared_reliability_or_when_it_is_the_one_used():
    assert _analysis(simulate(np.random.default_rng(5))).declared_change is None
    used = _analysis(simulate(np.random.default_rng(7), reliability=0.7, screening=False))
    assert used.rel.source == "declared" and used.declared_change is None


def test_unexplained_change_and_share_from_the_control_arm_data():
    """Observed mean change of the control arm computed here from the frame (numpy); the unexplained
    change is that minus the expected one, with a normal interval whose SE is
    hypot(SD / sqrt(n), half-width of the expected interval / z) (independent errors, from memory);
    the share is 100 x expected / observed."""
    data = simulate(np.random.default_rng(5), n=400)
    an = _analysis(data)
    control = data.frame[data.frame["arm"] == "Control"]
    d = (control["followup"] - control["baseline"]).to_numpy(float)
    assert an.obs.mean == pytest.approx(d.mean(), rel=1e-12)
    z = stats.norm.ppf(0.975)
    se = np.hypot(d.std(ddof=1) / np.sqrt(len(d)), (an.target.upper - an.target.lower) / (2 * z))
    gap = an.unexplained
    assert gap.estimate == pytest.approx(d.mean() - an.target.estimate, rel=1e-12)
    assert (gap.lower, gap.upper) == pytest.approx((gap.estimate - z * se, gap.estimate + z * se), rel=1e-10)
    assert an.share_explained == pytest.approx(100 * an.target.estimate / d.mean(), rel=1e-12)


def test_pairs_line_is_the_least_squares_regression_of_screening_on_baseline():
    """Entry on baseline: the line has the reliability's slope, numpy.polyfit's least-squares slope of
    screening on baseline, and passes through the two means (a property of least squares)."""
    data = simulate(np.random.default_rng(5), n=400)
    an = _analysis(data)
    s, b = data.frame["screening"].to_numpy(float), data.frame["baseline"].to_numpy(float)
    p = an.pairs
    assert np.all(np.diff(p.x) >= 0) and sorted(zip(s, b)) == list(zip(p.x, p.y))
    bx, sy = p.line_y, p.line_x  # baseline decided entry: it is on the y axis, screening fitted on x
    slope = (sy[1] - sy[0]) / (bx[1] - bx[0])
    assert slope == pytest.approx(np.polyfit(b, s, 1)[0], rel=1e-9) == pytest.approx(an.rel.value)
    assert (bx[0], bx[1]) == (b.min(), b.max())
    assert sy[0] + slope * (b.mean() - bx[0]) == pytest.approx(s.mean(), rel=1e-12)


def test_entry_counts_population_share_and_shift_in_sds():
    """Ten readings moved outside the window are counted as left out (10 of 500); the share of the
    fitted population meeting the window is Phi(b) - Phi(a) (scipy); the shift in SDs is the
    expected shift over the fitted SD; the mean's Wald interval is mu -/+ z se."""
    data = _window_data(np.random.default_rng(17))
    data.frame.loc[:9, "baseline"] = 70.0
    an = _analysis(data)
    assert (an.counts.kept, an.counts.excluded, an.counts.share_excluded) == (490, 10, pytest.approx(0.02))
    fit = an.scale.fit
    inside = stats.norm.cdf(62.0, fit.mu, fit.sigma) - stats.norm.cdf(45.0, fit.mu, fit.sigma)
    assert an.population.share_meeting == pytest.approx(inside, rel=1e-9)
    z = stats.norm.ppf(0.975)
    assert an.population.mu_ci == pytest.approx((fit.mu, fit.mu - z * fit.se_mu, fit.mu + z * fit.se_mu), rel=1e-9)
    sd = an.shift_sd
    assert (sd.estimate, sd.lower, sd.upper) == pytest.approx(
        (an.target.estimate / fit.sigma, an.target.lower / fit.sigma, an.target.upper / fit.sigma))


def test_log_scale_back_transforms_are_exp_of_the_fitted_values():
    """Declared log scale: the geometric mean is exp of the fitted mean of the logs and of its Wald
    limits, the expected ratio later / entry exp of the expected change and of its limits (the
    back-transform of a log-scale difference, from memory); on the raw scale there are none."""
    an = _analysis(_declare(simulate(np.random.default_rng(18)), log_scale=True))
    fit, z = an.scale.fit, stats.norm.ppf(0.975)
    assert an.scale.log
    assert an.population.geometric == pytest.approx(
        tuple(np.exp([fit.mu, fit.mu - z * fit.se_mu, fit.mu + z * fit.se_mu])), rel=1e-9)
    assert (an.ratio.estimate, an.ratio.lower, an.ratio.upper) == pytest.approx(
        tuple(np.exp([an.rtm.estimate, an.rtm.lower, an.rtm.upper])), rel=1e-12)
    assert an.ratio.estimate < 1  # selection above the cutoff: later readings lower (truth of the design)
    raw = _analysis(simulate(np.random.default_rng(5)))
    assert raw.ratio is None and raw.population.geometric is None
