"""Two-sided entry windows: the doubly truncated normal against scipy, the window fit, and the
regression-to-the-mean and change-score checks on a simulated window selection with known truth."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from auditor.checks.registry import CheckContext
from auditor.checks.regression_to_mean import run as run_rtm
from auditor.metadata import OutcomeSpec
from auditor.stats.rtm import expected_rtm, expected_rtm_window, fit_window_normal, window_mean_shift
from auditor.study import OutcomeData

CTX = CheckContext(seed=5, blinded=False, quick=True)


@pytest.mark.parametrize("mu, sigma, a, b", [(50, 12, 24, 73), (0, 1, 5, 6), (0, 1, -6, -5), (10, 3, -40, 11),
                                             (40, 10, 45, 200), (0, 1, -0.5, 0.5)])
def test_doubly_truncated_mean_matches_scipy_truncnorm(mu, sigma, a, b):
    """E[X | a < X < b] against scipy.stats.truncnorm.mean (an outside reference implementation)."""
    ref = stats.truncnorm.mean((a - mu) / sigma, (b - mu) / sigma, loc=mu, scale=sigma)
    assert mu + float(window_mean_shift(mu, sigma, a, b)) == pytest.approx(ref, rel=1e-10, abs=1e-12)


def test_window_reduces_to_the_one_sided_formula_when_the_far_end_is_remote():
    """With the upper end 40 SD away the window is a one-sided cutoff: Barnett et al. (2005) closed form."""
    assert float(expected_rtm_window(50, 9, 0.7, 52, 50 + 40 * 9)) == pytest.approx(
        expected_rtm(50, 9, 0.7, 52, "above"), rel=1e-9)


def test_window_symmetric_about_the_mean_gives_no_regression_to_the_mean():
    """A window centred on mu keeps a group whose mean is mu: no RTM (symmetry of the normal)."""
    assert float(expected_rtm_window(30, 5, 0.5, 22, 38)) == pytest.approx(0.0, abs=1e-12)


def test_window_fit_recovers_mu_and_sigma():
    """ML fit of a doubly truncated normal against scipy's generic ML fit of truncnorm (location and
    scale free, shape fixed by the known window)."""
    mu, sigma, a, b = 45.0, 14.0, 24.0, 73.0
    x = stats.truncnorm.rvs((a - mu) / sigma, (b - mu) / sigma, loc=mu, scale=sigma, size=3000,
                            random_state=np.random.default_rng(7))
    fit = fit_window_normal(x, a, b)
    assert fit.converged
    assert abs(fit.mu - mu) < 3 * fit.se_mu and abs(fit.sigma - sigma) < 3 * fit.se_sigma
    nll = lambda m, s: -np.sum(stats.truncnorm.logpdf(x, (a - m) / s, (b - m) / s, loc=m, scale=s))  # noqa: E731
    assert nll(fit.mu, fit.sigma) <= nll(fit.mu + 0.05, fit.sigma) and nll(fit.mu, fit.sigma) <= nll(fit.mu, fit.sigma * 1.01)
    assert -nll(fit.mu, fit.sigma) == pytest.approx(fit.loglik, rel=1e-9)


def test_window_fit_refuses_values_outside_the_window():
    with pytest.raises(ValueError):
        fit_window_normal([1.0, 2.0, 9.0], 0.0, 5.0)


# Known truth: true level N(40, 9^2), reading error N(0, 5^2); entry on baseline in [45, 62].
MU, SD_T, SD_E = 40.0, 9.0, 5.0
SIGMA = float(np.hypot(SD_T, SD_E))
RHO = SD_T**2 / SIGMA**2


def _window_data(rng, n=500, lo=45.0, hi=62.0, design="single-arm"):
    kept = []
    while len(kept) < n:
        t = rng.normal(MU, SD_T, 4 * n)
        s, b, f = (t + rng.normal(0, SD_E, 4 * n) for _ in range(3))
        ok = (b >= lo) & (b <= hi)
        kept += list(zip(s[ok], b[ok], f[ok]))
    s, b, f = np.array(kept[:n]).T
    spec = OutcomeSpec(param="SKN", label="lesion score", scale="continuous", baseline_visit="B",
                       screening_visit="S", followup_visits=["F"], planned_analysis="change",
                       entry_criterion={"visit": "B", "between": [lo, hi]})
    frame = pd.DataFrame({"subject": [f"S{i:04d}" for i in range(n)], "arm": "Open", "baseline": b,
                          "screening": s, "followup": f, "fu:F": f})
    return OutcomeData(spec, frame, ["Open"], None, design, [])


def test_rtm_check_sizes_a_two_sided_window_against_the_known_truth():
    """The expected change's interval covers the closed-form truth -(1 - rho) E[X - mu | window] in
    most replicates, and a one-sided reading of the window (lower end only) would be wrong."""
    truth = float(expected_rtm_window(MU, SIGMA, RHO, 45.0, 62.0))
    one_sided = expected_rtm(MU, SIGMA, RHO, 45.0, "above")
    assert abs(truth - one_sided) > 0.15  # the upper end matters in this scenario (-2.56 against -2.75)
    rng = np.random.default_rng(31)
    covered = 0
    for _ in range(12):
        res = run_rtm(_window_data(rng), CTX)
        e = next(x for x in res.estimates if x.name.startswith("Expected change from regression to the mean"))
        covered += e.lower <= truth <= e.upper
    assert covered >= 10
    assert "between 45 and 62" in res.headline


def test_window_criterion_outside_readings_is_reported_and_left_out():
    data = _window_data(np.random.default_rng(3))
    data.frame.loc[:9, "baseline"] = 70.0  # ten readings above the window's upper end
    res = run_rtm(data, CTX)
    left = next(e for e in res.estimates if e.name.startswith("Entry readings on the excluded side"))
    assert left.value == 10


def test_further_condition_on_another_parameter_is_stated_as_not_used():
    data = _window_data(np.random.default_rng(4))
    raw = data.spec.model_dump(exclude_none=True)
    raw["entry_criterion"]["also"] = [{"param": "ITCH", "visit": "B", "operator": ">=", "value": 4}]
    spec = OutcomeSpec.model_validate(raw)
    res = run_rtm(OutcomeData(spec, data.frame, data.arms, None, data.design, []), CTX)
    assert any("ITCH" in c and "not included" in c for c in res.caveats)


def test_change_score_selection_part_uses_the_window():
    """The change-score check's selection sub-finding reads the window, and its share left out is the
    two-tailed mass of the same doubly truncated fit."""
    from auditor.checks.change_score import run as run_change
    from auditor.checks.regression_to_mean import declared_criterion_reach

    data = _window_data(np.random.default_rng(8))
    res = run_change(data, CTX)
    sub = next(s for s in res.subfindings if s.id == "selection")
    assert "45 <= B <= 62" in sub.evidence and "outside the window" in sub.evidence
    share = declared_criterion_reach(data, CTX)
    fit = fit_window_normal(data.frame["baseline"].to_numpy(), 45.0, 62.0)
    assert share == pytest.approx(stats.norm.cdf(45, fit.mu, fit.sigma) + stats.norm.sf(62, fit.mu, fit.sigma),
                                  rel=1e-6)


def _toml_value(v) -> str:
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return f'"{v}"' if isinstance(v, str) else str(v)


@pytest.mark.parametrize("criterion, message", [
    ({"visit": "B", "operator": ">=", "value": 3, "between": [1, 2]}, "not both"),
    ({"visit": "B", "between": [5, 2]}, "lower < upper"),
    ({"visit": "B"}, "needs operator and value"),
    ({"visit": "B", "between": [1, 2], "also": [{"visit": "B"}]}, "needs operator and value"),
])
def test_malformed_entry_criteria_are_refused_with_their_location(criterion, message):
    from auditor.errors import ProblemLog
    from auditor.metadata import read_metadata

    text = f"""
[study]
id = "X"
design = "single-arm"
[files]
visits = "v.csv"
[[outcomes]]
param = "P"
scale = "continuous"
baseline_visit = "A"
followup_visits = ["B"]
planned_analysis = "change"
entry_criterion = {_toml_value(criterion)}
"""
    log = ProblemLog()
    meta, _ = read_metadata(None, log, text.encode())
    assert meta is None
    lines = [p.one_line() for p in log.errors]
    assert any("outcomes[0].entry_criterion" in ln and message in ln for ln in lines), lines


def test_a_misspelt_records_key_is_refused_with_a_suggestion():
    from auditor.errors import ProblemLog
    from auditor.metadata import read_metadata

    text = """
[study]
id = "X"
design = "single-arm"
[files]
visits = ["a.csv", "b.csv"]
[records]
dtpye = "keep"
[[outcomes]]
param = "P"
scale = "continuous"
followup_visits = ["B"]
planned_analysis = "follow-up-only"
"""
    log = ProblemLog()
    assert read_metadata(None, log, text.encode())[0] is None
    line = log.errors[0].one_line()
    assert "records.dtpye" in line and "dtype" in line
