"""The longitudinal model with post-baseline visits as responses and baseline as a covariate only."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from auditor.stats.fitnotes import fit_notes
from auditor.stats.repeated import fit_post_baseline_model


def _trial(n: int = 120, effects=(2.0, 4.0), seed: int = 3) -> pd.DataFrame:
    """Two arms, two post-baseline visits, a participant effect shared by every visit (the model's
    own truth), baseline slope 0.6."""
    rng = np.random.default_rng(seed)
    arm = np.where(np.arange(n) % 2 == 0, "Control", "Active")
    base = rng.normal(50, 10, n)
    u = rng.normal(0, 4, n)
    frame = pd.DataFrame({"arm": arm, "baseline": base})
    for k, (visit, eff) in enumerate(zip(("fu:Week 4", "fu:Week 8"), effects)):
        frame[visit] = 10 + 2 * k + 0.6 * base + (arm == "Active") * eff + u + rng.normal(0, 3, n)
    return frame


def test_effects_match_the_same_model_specified_through_formulas():
    # Reference: statsmodels' formula interface (patsy builds the design independently of the tool's
    # hand-built columns); REML fixed effects and their SEs must agree.
    import statsmodels.formula.api as smf

    frame = _trial()
    fit = fit_post_baseline_model(frame, ["fu:Week 4", "fu:Week 8"], ["Control", "Active"], "Control")
    long = frame.assign(pid=np.arange(len(frame))).melt(id_vars=["pid", "arm", "baseline"], var_name="visit",
                                                          value_name="y")
    long["active"] = (long["arm"] == "Active").astype(float)
    ref = smf.mixedlm("y ~ 0 + C(visit) + C(visit):active + baseline", long, groups=long["pid"]).fit(reml=True)
    for e in fit.effects:
        key = f"C(visit)[fu:{e.visit}]:active"
        assert e.estimate == pytest.approx(ref.fe_params[key], abs=1e-6)
        assert e.se == pytest.approx(ref.bse_fe[key], rel=1e-4)


def test_the_interval_follows_the_level_and_covers_the_truth():
    frame = _trial(n=400)
    f95 = fit_post_baseline_model(frame, ["fu:Week 4", "fu:Week 8"], ["Control", "Active"], "Control", 0.95)
    f80 = fit_post_baseline_model(frame, ["fu:Week 4", "fu:Week 8"], ["Control", "Active"], "Control", 0.80)
    for e95, e80, truth in zip(f95.effects, f80.effects, (2.0, 4.0)):
        # Normal quantiles 1.959964 and 1.281552 (scipy.stats.norm.ppf(0.975), ppf(0.9)).
        assert (e95.upper - e95.lower) / (2 * e95.se) == pytest.approx(1.959964, abs=1e-5)
        assert (e80.upper - e80.lower) / (2 * e80.se) == pytest.approx(1.281552, abs=1e-5)
        assert e95.lower < truth < e95.upper


def test_fit_notes_keep_what_a_fit_warned_about_instead_of_silencing_it():
    import warnings

    from statsmodels.tools.sm_exceptions import ConvergenceWarning

    with fit_notes() as notes:
        warnings.warn("no convergence", ConvergenceWarning)
        warnings.warn("no convergence again", ConvergenceWarning)
        warnings.warn("overflow", RuntimeWarning)
    assert notes == ["the fitting routine reported that it did not fully converge",
                     "an overflow or an invalid value occurred during the fit"]


def test_a_plan_with_baseline_as_a_response_gets_the_alternative_model_in_its_audit(tmp_path):
    from auditor.pipeline import AuditOptions, audit_study
    from auditor.study import load_study
    from tests.cli.test_hostile_inputs import Synthetic

    s = Synthetic(n_per_arm=40, params=("SBP",))
    s.outcome("SBP")["planned_analysis"] = "repeated-with-baseline-response"
    audit = audit_study(load_study(s.write(tmp_path / "study")), AuditOptions(checks=("change-score",), quick=True))
    (res,) = audit.results
    table = next(t for t in res.tables if t.id == "repeated")
    assert [row[0] for row in table.rows] == ["Week 4", "Week 8"]
    assert all(row[4] < row[2] < row[5] for row in table.rows)
    assert any("baseline on both sides" in c for c in res.caveats)
