"""Materiality thresholds set in study.toml, the within-arm effect basis, the truncation-edge test on
the unselected side of a declared criterion, and the "for information" verdict.

Every threshold default is a convention of this tool, no source (docs/methods/verdicts.md); the tests
check that a changed threshold changes the verdict on the same data, by the rule the threshold sets.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from auditor.checks import change_score, count_time, later_risk, regression_to_mean
from auditor.checks.registry import CheckContext
from auditor.errors import ProblemLog
from auditor.metadata import OutcomeSpec, Thresholds, read_metadata
from auditor.results import Verdict
from auditor.stats.rtm import expected_rtm
from auditor.study import OutcomeData
from tests.checks.test_regression_to_mean import simulate_percentile

CTX = CheckContext(seed=11, blinded=False, quick=True)


def _ctx(**thresholds) -> CheckContext:
    return CheckContext(seed=11, blinded=False, quick=True, thresholds=Thresholds(**thresholds))


# ----------------------------------------------------------------------------- the [thresholds] section


def test_threshold_defaults_are_the_check_constants():
    # One set of defaults (conventions of this tool, no source): the study.toml model and the constants
    # the check modules document must agree.
    t = Thresholds()
    assert t.sample_size_ratio == change_score.MATERIAL_RATIO == 1.10
    assert t.rtm_shift_sd == regression_to_mean.MATERIAL_SD == 0.10
    assert t.odds_ratio == later_risk.MATERIAL_ODDS_RATIO == 2.0
    assert t.count_ratio == count_time.MATERIAL_RATIO == 1.10


def _toml(extra: str) -> bytes:
    return ("[study]\nid = \"T\"\ndesign = \"single-arm\"\narms = [\"A\"]\n[files]\nvisits = \"v.csv\"\n"
            "[[outcomes]]\nparam = \"X\"\nscale = \"continuous\"\nbaseline_visit = 1\nfollowup_visits = [2]\n"
            "planned_analysis = \"change\"\n" + extra).encode()


def test_thresholds_read_from_study_toml():
    log = ProblemLog()
    meta, _ = read_metadata(None, log, raw=_toml("[thresholds]\nrtm_shift_sd = 0.25\nodds_ratio = 3\n"))
    assert not log.problems, log.problems
    assert meta.thresholds.rtm_shift_sd == 0.25 and meta.thresholds.odds_ratio == 3.0
    assert meta.thresholds.sample_size_ratio == 1.10  # the rest keep their defaults
    meta, _ = read_metadata(None, ProblemLog(), raw=_toml(""))
    assert meta.thresholds == Thresholds()


@pytest.mark.parametrize("body, where, says", [
    ("[thresholds]\nrtm_shift = 0.2\n", "thresholds.rtm_shift", "did you mean 'rtm_shift_sd'"),
    ("[thresholds]\nsample_size_ratio = 0.9\n", "thresholds.sample_size_ratio", "greater than 1"),
    ("[thresholds]\nodds_ratio = \"2\"\n", "thresholds.odds_ratio", ""),
    ("[thresholds]\nrtm_shift_sd = nan\n", "thresholds.rtm_shift_sd", ""),
])
def test_bad_thresholds_are_refused_with_the_key_named(body, where, says):
    log = ProblemLog()
    meta, _ = read_metadata(None, log, raw=_toml(body))
    assert meta is None
    texts = [f"{p.where} {p.problem} {p.fix}" for p in log.problems]
    assert any(t.startswith(where) and says in t for t in texts), texts


def test_changed_rtm_threshold_changes_the_verdict_on_the_same_data():
    # Known truth: rho 0.6, entry at the 70th percentile: expected shift -0.46 SD (Barnett et al. 2005).
    # Single-arm: unsupported when the whole interval lies beyond the threshold. At 0.1 SD it does; at
    # 1 SD (a threshold above the shift itself) it cannot, so the same data give caution.
    assert expected_rtm(50.0, 10.0, 0.6, 50.0 + 10.0 * stats.norm.ppf(0.7), "above") / 10 == pytest.approx(-0.464, abs=1e-3)
    data, _ = simulate_percentile(np.random.default_rng(71), n=600, design="single-arm")
    default = regression_to_mean.run(data, CTX)
    loose = regression_to_mean.run(data, _ctx(rtm_shift_sd=1.0))
    assert default.verdict is Verdict.UNSUPPORTED, default.headline
    assert loose.verdict is Verdict.CAUTION, loose.headline
    assert "not wholly beyond the 1 SD threshold" in loose.headline
    assert "beyond 1 SD" in loose.method and "beyond 0.1 SD" in default.method


def _change_data(slope=0.5, n=300, seed=5):
    from auditor.validation.change_score_cases import outcome_data_for

    rng = np.random.default_rng(seed)
    a = rng.permutation(np.arange(n) % 2)
    b = rng.normal(50, 10, n)
    f = 25 + slope * b + 2.0 * a + rng.normal(0, 6, n)
    return outcome_data_for(b, f, a)


def test_changed_sample_size_threshold_changes_the_change_score_verdict():
    # Known truth: slope 0.5, SD 10 at baseline and residual SD 6, so var(change) = 0.25*100 + 36 = 61
    # against the ANCOVA residual 36: change needs about 69% more participants (Frison and Pocock 1992).
    data = _change_data()
    default = change_score.run(data, CTX)
    loose = change_score.run(data, _ctx(sample_size_ratio=3.0))
    cost = next(e for e in default.estimates if e.name.startswith("Sample-size ratio, change / ANCOVA (this"))
    assert 1.3 < cost.lower and cost.upper < 2.2
    assert default.verdict is Verdict.UNSUPPORTED, default.headline
    assert loose.verdict is not Verdict.UNSUPPORTED, loose.headline
    assert "200% this tool treats as material" in loose.headline
    assert "sample_size_ratio 3" in loose.method


def test_changed_odds_ratio_threshold_is_carried_to_the_later_risk_analysis():
    from auditor.validation.later_risk_cases import SCENARIOS, simulate

    sc = next(s for s in SCENARIOS if s.name == "linear-change-declared")
    y, latest, earlier = simulate(sc, 600, np.random.default_rng(3))
    strict = later_risk.analyse(y, latest, earlier, definition="change", material_odds_ratio=1.01)
    loose = later_risk.analyse(y, latest, earlier, definition="change", material_odds_ratio=1000.0)
    _, lo, hi = strict.same_value.interval(0.95)
    assert lo > 1.01 or hi < 1 / 1.01  # the same-value contrast is detectable in this scenario
    assert strict.same_value.material(0.95, 1.01) and not loose.same_value.material(0.95, 1000.0)
    assert later_risk.overall_verdict(loose) is not Verdict.UNSUPPORTED


# ----------------------------------------------------------------------------- within-arm effect basis


def _within(data: OutcomeData) -> OutcomeData:
    spec = data.spec.model_copy(update={"effect_basis": "within-arm-change"})
    return OutcomeData(spec, data.frame, data.arms, data.control_arm, data.design, data.derived_columns)


def test_within_arm_change_in_a_parallel_trial_is_unsupported_when_rtm_is_material():
    # The same parallel trial (rho 0.6, 70th percentile): caution when the effect is the contrast between
    # arms, unsupported when the trial reports within-arm change as the effect.
    data, _ = simulate_percentile(np.random.default_rng(70), n=600)
    between = regression_to_mean.run(data, CTX)
    within = regression_to_mean.run(_within(data), CTX)
    assert between.verdict is Verdict.CAUTION, between.headline
    assert within.verdict is Verdict.UNSUPPORTED, within.headline
    assert "within-arm change, reported here as the treatment effect, is biased by regression to the mean" \
        in within.headline
    assert "report the randomised contrast between arms" in within.headline.lower()
    e = next(e for e in within.estimates if e.name.startswith("Expected shift in the analysed change, in SDs"))
    assert e.upper < -0.1  # the whole interval beyond the threshold


def test_within_arm_change_is_caution_when_the_shift_is_not_material():
    # rho 0.98: expected shift -0.023 SD (Barnett et al. 2005), inside the 0.1 SD threshold.
    data, _ = simulate_percentile(np.random.default_rng(72), rho=0.98)
    res = regression_to_mean.run(_within(data), CTX)
    assert res.verdict is Verdict.CAUTION, res.headline
    assert "still includes part of it" in res.headline


def test_within_arm_basis_in_a_single_arm_trial_says_so():
    data, _ = simulate_percentile(np.random.default_rng(71), n=600, design="single-arm")
    res = regression_to_mean.run(_within(data), CTX)
    assert res.verdict is Verdict.UNSUPPORTED
    assert "is biased by regression to the mean" in res.headline


def test_effect_basis_is_checked_in_study_toml():
    log = ProblemLog()
    meta, _ = read_metadata(None, log, raw=_toml("").replace(b'planned_analysis = "change"\n',
                                                             b'planned_analysis = "change"\neffect_basis = "within"\n'))
    assert meta is None and any("effect_basis" in p.where for p in log.problems)


# ----------------------------------------------------------------------------- edge test, unselected side


def _selected(rng, n=400, upper_cut=None):
    """Baseline N(50, 10^2) kept at >= 45 (the declared criterion) and, when ``upper_cut`` is given,
    also at <= upper_cut (an undeclared second selection)."""
    kept = []
    while len(kept) < n:
        t = rng.normal(50, 8, 4 * n)
        b = t + rng.normal(0, 6, 4 * n)
        f = t + rng.normal(0, 6, 4 * n)
        ok = (b >= 45) & (b <= (upper_cut if upper_cut is not None else np.inf))
        kept += list(zip(b[ok], f[ok]))
    b, f = np.array(kept[:n]).T
    a = rng.permutation(np.arange(n) % 2)
    spec = OutcomeSpec(param="SIM", scale="continuous", baseline_visit="B", followup_visits=["F"],
                       planned_analysis="change", entry_criterion={"visit": "B", "operator": ">=", "value": 45.0})
    frame = pd.DataFrame({"subject": [f"S{i}" for i in range(n)], "arm": np.where(a == 1, "Active", "Control"),
                          "baseline": b, "followup": f, "fu:F": f})
    return OutcomeData(spec, frame, ["Control", "Active"], "Control", "parallel", [])


def test_edge_test_runs_on_the_unselected_side_of_a_declared_criterion():
    # Declared ">= 45": the lower edge is the criterion's own and is never tested; an undeclared cut at
    # 60 makes a sharp upper edge, which the test on the unselected (upper) side finds.
    res = change_score.run(_selected(np.random.default_rng(4), upper_cut=60.0), CTX)
    sel = next(s for s in res.subfindings if s.id == "selection")
    assert sel.verdict is Verdict.CAUTION
    assert "the unselected upper end also has a sharp edge" in sel.evidence
    e = next(e for e in res.estimates if "on the unselected side" in e.name)
    assert e.p_value < 0.05 and "upper edge" in e.note


def test_edge_test_on_the_unselected_side_finds_nothing_without_a_second_selection():
    res = change_score.run(_selected(np.random.default_rng(6)), CTX)
    sel = next(s for s in res.subfindings if s.id == "selection")
    assert "no evidence of a sharp edge at the unselected upper end" in sel.evidence
    e = next(e for e in res.estimates if "on the unselected side" in e.name)
    assert "upper edge" in e.note


def test_unselected_side_rule():
    below = OutcomeSpec(param="S", scale="continuous", baseline_visit="B", followup_visits=["F"],
                        planned_analysis="change", entry_criterion={"visit": "B", "operator": "<", "value": 1.0})
    assert change_score.unselected_side("either", "", below.entry_criterion)[0] == "lower"
    assert change_score.unselected_side("upper", "", below.entry_criterion)[0] is None
    assert change_score.unselected_side("either", "", None) == ("either", "")


# ----------------------------------------------------------------------------- "for information"


def test_for_information_ranks_like_sound_for_gates():
    from auditor.batch import StudyOutcome, gate_reached

    assert Verdict.FOR_INFORMATION.rank == Verdict.SOUND.rank
    rows = [{"outcome": "X", "check_id": "pre-post", "verdict": "for information", "headline": "h"}]
    kw = {"folder": "s", "name": "s", "status": "ok", "rows": rows}
    study = StudyOutcome(**kw)
    for level in ("not assessable", "caution", "unsupported", "failed"):
        assert not gate_reached([study], level)
    bad = StudyOutcome(**{**kw, "rows": rows + [{"outcome": "X", "check_id": "c", "verdict": "caution",
                                                 "headline": "h"}]})
    assert gate_reached([bad], "caution")


def test_thresholds_reach_the_report_and_provenance(example_copy, tmp_path):
    from auditor.pipeline import AuditOptions, audit_study
    from auditor.render.view import audit_view
    from auditor.study import load_study

    toml = example_copy / "study.toml"
    toml.write_text(toml.read_text() + "\n[thresholds]\nrtm_shift_sd = 0.25\n")
    audit = audit_study(load_study(example_copy), AuditOptions(quick=True, checks=("regression-to-mean",)))
    d = json.loads(json.dumps(audit.to_dict()))
    assert d["provenance"]["thresholds"]["rtm_shift_sd"] == 0.25
    assert d["provenance"]["thresholds"]["sample_size_ratio"] == 1.1
    feno = next(r for r in d["results"] if r["outcome"] == "FENO")  # entry criterion declared on FENO
    assert "beyond 0.25 SD" in feno["method"] and "0.25 SD" in feno["headline"]
    view = audit_view(audit)
    assert ("rtm_shift_sd", "0.25") in view["provenance"]["thresholds"]
