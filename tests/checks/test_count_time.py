"""Counts over unequal observation time: the rate model, the check's verdicts and the loader rules."""

from __future__ import annotations

import math

import numpy as np
import pytest
from typer.testing import CliRunner

from auditor.cli import app
from auditor.results import Verdict
from auditor.stats.rates import fit_log_linear, time_spread
from auditor.study import load_study
from auditor.validation import count_time_cases as cases

runner = CliRunner()
ARMS = cases.ARMS
simulate = cases.simulate


def _spec(example_copy):
    return next(s for s in load_study(example_copy).metadata.outcomes if s.param == "RESC")


def _run(spec, frame, blinded=False):
    return cases.run_check(frame, blinded=blinded, spec=spec)


def _est(res, start):
    return next(e for e in res.estimates if e.name.startswith(start))


# --------------------------------------------------------------------------- the rate model


def test_two_group_rate_ratio_and_robust_se_equal_their_closed_forms():
    # Poisson MLE identity (Cameron and Trivedi 2013, section 3.2): with only a group indicator and
    # log time as offset, each group's fitted rate is its total count over its total time, and the
    # HC0 sandwich variance of its log rate is sum (y - mu)^2 / (sum mu)^2.
    rng = np.random.default_rng(3)
    g = np.repeat([0.0, 1.0], 80)
    t = rng.uniform(5, 30, 160)
    y = rng.poisson(rng.gamma(2.0, 0.5, 160) * t * np.where(g == 1, 0.6, 1.0)).astype(float)
    fit = fit_log_linear(y, {"g": g}, offset=np.log(t))
    r0, r1 = y[g == 0].sum() / t[g == 0].sum(), y[g == 1].sum() / t[g == 1].sum()
    rr, lo, hi, _ = fit.ratio("g")
    assert rr == pytest.approx(r1 / r0, rel=1e-8)
    mu = np.where(g == 1, r1, r0) * t
    var = sum(((y - mu)[g == k] ** 2).sum() / mu[g == k].sum() ** 2 for k in (0, 1))
    assert fit.se[fit.names.index("g")] == pytest.approx(math.sqrt(var), rel=1e-6)


def test_rate_ratio_interval_covers_the_truth():
    # Known truth: rate ratio 0.75 with overdispersed counts and arm-dependent times. Robust
    # intervals should cover in about 95% of replicates; at least 88 of 100 (0.95 minus about three
    # Monte Carlo standard errors, a convention of this test).
    rng = np.random.default_rng(11)
    covered = 0
    for _ in range(100):
        df = simulate(rng, days_active=(10, 22))
        cols = {"base": np.log((df["baseline"] + 0.5) / df["baseline_time"]),
                "arm": (df["arm"] == ARMS[1]).astype(float)}
        _, lo, hi, _ = fit_log_linear(df["followup"], cols, offset=np.log(df["followup_time"])).ratio("arm")
        covered += lo <= 0.75 <= hi
    assert covered >= 88


def test_time_spread_summary():
    s = time_spread([10, 20, 20, 30])
    assert (s.median, s.minimum, s.maximum) == (20, 10, 30)
    assert s.cv == pytest.approx(np.std([10, 20, 20, 30], ddof=1) / 20)
    assert s.share_short == 0.25 and not s.equal


# --------------------------------------------------------------------------- the check


def test_arm_dependent_time_is_unsupported_and_the_rate_ratio_recovers_the_truth(example_copy):
    res = _run(_spec(example_copy), simulate(np.random.default_rng(5), n=400, days_active=(10, 20)))
    assert res.verdict == Verdict.UNSUPPORTED
    rr = _est(res, "Rate ratio")
    assert rr.lower <= 0.75 <= rr.upper
    assert _est(res, "Count ratio,").value < 0.75 / 1.1  # time ignored: the shorter diaries look like benefit
    assert {s.id: s.verdict for s in res.subfindings}["time-by-arm"] == Verdict.UNSUPPORTED


def test_equal_times_are_sound(example_copy):
    df = simulate(np.random.default_rng(6))
    df["followup_time"] = 28.0
    res = _run(_spec(example_copy), df)
    assert res.verdict == Verdict.SOUND
    assert _est(res, "Rate ratio").value == pytest.approx(_est(res, "Count ratio,").value, rel=0.02)


def test_unequal_times_balanced_across_arms_are_a_caution_only(example_copy):
    res = _run(_spec(example_copy), simulate(np.random.default_rng(7), days_control=(8, 28), days_active=(8, 28)))
    assert res.verdict == Verdict.CAUTION
    assert {s.id: s.verdict for s in res.subfindings}["time-by-arm"] != Verdict.UNSUPPORTED


def test_false_alarm_and_detection_rates(example_copy):
    # Known truth, 30 replicates each: times balanced across arms (never unsupported: at most 1 of
    # 30 allowed, a convention of this test) and the active arm's diaries shorter (always found: at
    # least 28 of 30). 60 replicates of each gave 0 false alarms and 60 detections.
    spec = _spec(example_copy)
    rng = np.random.default_rng(2026)
    false_alarms = sum(_run(spec, simulate(rng, days_control=(8, 28), days_active=(8, 28))).verdict
                       == Verdict.UNSUPPORTED for _ in range(30))
    found = sum(_run(spec, simulate(rng, days_active=(10, 20))).verdict == Verdict.UNSUPPORTED for _ in range(30))
    assert false_alarms <= 1 and found >= 28


def test_blinded_run_keeps_pooled_time_findings_only(example_copy):
    res = _run(_spec(example_copy), simulate(np.random.default_rng(8), days_active=(10, 20)), blinded=True)
    assert res.verdict == Verdict.CAUTION  # unequal times are visible pooled; the arm question is not asked
    assert not any(e.by_arm for e in res.estimates) and not res.tables
    assert all(g["label"] == "All participants" for f in res.figures for g in f.data["groups"])


def test_no_declared_time_is_not_assessable_with_the_fix(example_copy):
    spec = _spec(example_copy).model_copy(update={"exposure": None})
    from auditor.checks.registry import NotAssessable

    with pytest.raises(NotAssessable, match="exposure"):
        _run(spec, simulate(np.random.default_rng(9)))


def test_example_study_count_is_unsupported(example_audit):
    res = next(r for r in example_audit.results if r.outcome == "RESC" and r.check_id == "count-time")
    assert res.verdict == Verdict.UNSUPPORTED  # the generator shortens the active arm's diaries


# --------------------------------------------------------------------------- the loader


def _validate(folder):
    res = runner.invoke(app, ["validate", str(folder)])
    return res.exit_code, res.stderr if hasattr(res, "stderr") else res.output


@pytest.mark.parametrize("edit, message", [
    (lambda toml, csv: (toml.replace('param = "RESC"\nlabel = "Rescue-inhaler puffs"\nscale = "count"',
                                     'param = "RESC"\nlabel = "Rescue-inhaler puffs"\nscale = "continuous"'), csv),
     "applies only to an outcome with scale 'count'"),
    (lambda toml, csv: (toml.replace('exposure = "DIARYD"', 'exposure = "DIARYDAYS"'), csv),
     "column DIARYDAYS: observation-time column of 'RESC' is missing"),
    (lambda toml, csv: (toml, csv.replace(",Y,91,,28\n", ",Y,91,,0\n", 1)),
     "observation time of 'RESC' is zero or negative"),
    (lambda toml, csv: (toml, csv.replace(",Y,91,,28\n", ",Y,91,,\n", 1)),
     "'RESC' record has a count but no observation time"),
])
def test_observation_time_errors_are_reported(example_copy, edit, message):
    toml_path, csv_path = example_copy / "study.toml", example_copy / "data" / "adeff.csv"
    toml, csv = edit(toml_path.read_text(), csv_path.read_text())
    toml_path.write_text(toml)
    csv_path.write_text(csv)
    code, text = _validate(example_copy)
    assert code == 2
    assert message in text


def test_a_warning_from_the_rate_fit_becomes_a_caveat(monkeypatch):
    # The fitting library's warnings are not silenced: one raised inside the fit reaches the finding.
    import warnings

    import statsmodels.api as sm
    from statsmodels.tools.sm_exceptions import ConvergenceWarning

    real_fit = sm.GLM.fit

    def warning_fit(self, *a, **k):
        warnings.warn("iteration limit reached", ConvergenceWarning)
        return real_fit(self, *a, **k)

    monkeypatch.setattr(sm.GLM, "fit", warning_fit)
    rng = np.random.default_rng(1)
    fit = fit_log_linear(rng.poisson(3, 50), {"x": rng.normal(size=50)})
    assert fit.notes == ("the fitting routine reported that it did not fully converge",)
    res = cases.run_check(cases.simulate(np.random.default_rng(2), days_active=(8, 28)))
    warned = [c for c in res.caveats if "did not fully converge" in c]
    assert len(warned) == 1, res.caveats


# --------------------------------------------------------------------------- verdicts on the consequence


def test_headline_states_the_shift_with_its_interval():
    # Known truth: diaries of 10-20 days on the active arm against 16-28: without time the comparison
    # moves by about 15 / 22 = 0.68 (mean days, by construction), wholly beyond 1/1.1.
    res = cases.run_check(cases.simulate(np.random.default_rng(31), n=400, days_active=(10, 20)))
    s = _est(res, "Count ratio over rate ratio")
    assert res.verdict == Verdict.UNSUPPORTED and s.upper < 1 / 1.1 and s.lower <= 15 / 22 <= s.upper
    assert res.headline.startswith("Ignoring observation time moves the treatment comparison (Active vs Placebo) "
                                   f"by a factor of {s.value:.2f} ({s.lower:.2f} to {s.upper:.2f})")
    assert "wholly beyond the materiality threshold (1.1 or 1/1.1)" in res.headline


def test_balanced_times_say_no_evidence_of_a_shift():
    res = cases.run_check(cases.simulate(np.random.default_rng(32), days_control=(8, 28), days_active=(8, 28)))
    assert res.verdict == Verdict.CAUTION
    assert "no evidence that ignoring time moves the comparison" in res.headline
    assert "no evidence that observation time differs between arms" in res.headline


def test_changed_count_ratio_threshold_changes_the_verdict_on_the_same_data():
    # The same trial (shift about 0.68): unsupported at the default 1.1, caution when the threshold is a
    # factor of 2 (the interval cannot lie wholly beyond 1/2).
    from auditor.checks.count_time import run
    from auditor.checks.registry import CheckContext
    from auditor.metadata import Thresholds

    frame = cases.simulate(np.random.default_rng(33), n=400, days_active=(10, 20))
    data = cases.outcome_data_for(frame)
    default = run(data, CheckContext(seed=1, blinded=False, quick=True))
    loose = run(data, CheckContext(seed=1, blinded=False, quick=True, thresholds=Thresholds(count_ratio=2.0)))
    assert default.verdict == Verdict.UNSUPPORTED and loose.verdict == Verdict.CAUTION
    assert "not wholly beyond the materiality threshold (2 or 1/2)" in loose.headline
    assert "beyond a factor of 2 or its inverse" in loose.method


def test_analysis_numbers_come_before_any_wording_and_match_statsmodels(example_copy):
    # The check's analysis alone (no sentences): its rate ratio equals a Poisson GLM with log time as
    # offset fitted by statsmodels (reference library) on the same participants, and its flags agree
    # with the verdict the wording then reaches.
    import statsmodels.api as sm

    from auditor.checks.count_time import analyse
    from auditor.checks.registry import CheckContext

    frame = simulate(np.random.default_rng(5), n=400, days_active=(10, 20))
    data = cases.outcome_data_for(frame, _spec(example_copy))
    an = analyse(data, CheckContext(seed=1, blinded=False, quick=True))
    df = an.df
    x = sm.add_constant(np.column_stack([an.cols[k] for k in an.cols]))
    ref = sm.GLM(df["followup"].to_numpy(float), x, family=sm.families.Poisson(),
                 offset=np.log(df["followup_time"].to_numpy(float))).fit(cov_type="HC0")
    arm_col = [i for i, k in enumerate(an.cols) if k != "log baseline rate"][0] + 1
    assert an.comparisons[0]["rate"][0] == pytest.approx(math.exp(ref.params[arm_col]), rel=1e-6)
    assert not an.spread.equal and an.material and an.times_by_arm.differs
    assert _run(_spec(example_copy), frame).verdict == Verdict.UNSUPPORTED
