"""Each question can reach each of its verdicts, by the rules of docs/methods/verdicts.md."""

from __future__ import annotations

from pathlib import Path

import pytest

from auditor.pipeline import AuditOptions
from auditor.results import Verdict
from auditor.summaries.audit import audit_summaries, load_summary_study

HEAD = "outcome,arm,n,mean_baseline,sd_baseline,mean_followup,sd_followup,sd_change,r_prepost,mean_change,effect,effect_lower,effect_upper\n"


def _audit(tmp_path: Path, outcome_toml: str, rows: list[str]):
    d = tmp_path / "s"
    d.mkdir(exist_ok=True)
    (d / "study.toml").write_text('[study]\nid = "V"\nsource = "summaries"\narms = ["A", "B"]\ncontrol_arm = "A"\n'
                                  'seed = 3\n\n[files]\nsummaries = "s.csv"\n\n[[outcomes]]\nparam = "Y"\n'
                                  + outcome_toml)
    (d / "s.csv").write_text(HEAD + "\n".join(rows) + "\n")
    a = audit_summaries(load_summary_study(d), AuditOptions(quick=True))
    return {r.check_id: r for r in a.results}, a


CHANGE = 'scale = "continuous"\nbounds = [0, inf]\nreported_analysis = "change"\n'


@pytest.mark.parametrize("r,n,expected", [
    (0.3, 400, Verdict.UNSUPPORTED),   # 2 / 1.3 = 1.54: the whole interval lies above 1.10 (Frison-Pocock)
    (0.7, 40, Verdict.CAUTION),        # 2 / 1.7 = 1.18 above 1.10, but with 80 participants the interval reaches below
    (0.95, 100, Verdict.SOUND),        # 2 / 1.95 = 1.026 below 1.10
])
def test_efficiency_verdicts(tmp_path, r, n, expected):
    sd_f = 10
    rows = [f"Y,A,{n},50,10,48,{sd_f},,{r},,,,", f"Y,B,{n},50,10,45,{sd_f},,{r},,,,"]
    res, _ = _audit(tmp_path, CHANGE, rows)
    eff = res["summary-efficiency"]
    assert eff.verdict is expected, eff.headline
    est = eff.estimates[0]
    assert est.value == pytest.approx(2 / (1 + r))
    if expected is Verdict.UNSUPPORTED:
        assert est.lower > 1.10
    if expected is Verdict.CAUTION:
        assert est.lower < 1.10 < est.value


def test_consistency_catches_an_effect_that_does_not_follow(tmp_path):
    rows = ["Y,A,60,50,10,48,10,6,,,,,", "Y,B,60,50,10,45,10,6,,,-9,-11,-7"]
    res, audit = _audit(tmp_path, CHANGE, rows)
    c = res["summary-consistency"]
    assert c.verdict is Verdict.CAUTION and "does not follow" in audit.comments[0].evidence
    rows[1] = "Y,B,60,50,10,45,10,6,,,-3,-5,-1"
    res, _ = _audit(tmp_path, CHANGE, rows)
    assert res["summary-consistency"].verdict is Verdict.SOUND


def test_consistency_not_assessable_when_nothing_is_given_twice(tmp_path):
    rows = ["Y,A,60,50,10,48,10,6,,,,,", "Y,B,60,50,10,45,10,6,,,,,"]
    res, _ = _audit(tmp_path, CHANGE, rows)
    c = res["summary-consistency"]
    assert c.verdict is Verdict.NOT_ASSESSABLE and c.estimates  # the implied correlations are still shown


def test_mean_change_from_other_participants(tmp_path):
    rows = ["Y,A,60,50,10,48,10,6,,-0.5,,,", "Y,B,60,50,10,45,10,6,,-5,,,"]
    res, _ = _audit(tmp_path, CHANGE, rows)
    assert res["summary-consistency"].verdict is Verdict.CAUTION


def test_shape_verdicts(tmp_path):
    skewed = ["Y,A,60,3,4,2.5,3.5,3,,,,,", "Y,B,60,3,4,2,3.2,3,,,,,"]
    res, _ = _audit(tmp_path, CHANGE, skewed)
    assert res["summary-shape"].verdict is Verdict.CAUTION
    fine = ["Y,A,60,50,10,48,10,6,,,,,", "Y,B,60,50,10,45,10,6,,,,,"]
    res, _ = _audit(tmp_path, CHANGE, fine)
    assert res["summary-shape"].verdict is Verdict.SOUND
    res, _ = _audit(tmp_path, 'scale = "continuous"\nreported_analysis = "change"\n', fine)
    assert res["summary-shape"].verdict is Verdict.NOT_ASSESSABLE


def test_rtm_sound_when_selection_removes_almost_no_one(tmp_path):
    toml = CHANGE + 'entry_criterion = { lower = 10, assumed_mean = [50], assumed_sd = 10, reliability = [0.7] }\n'
    res, _ = _audit(tmp_path, toml, ["Y,A,60,50,10,48,10,6,,,,,", "Y,B,60,50,10,45,10,6,,,,,"])
    assert res["summary-rtm"].verdict is Verdict.SOUND


PERCENT = 'scale = "continuous"\nbounds = [0, inf]\nreported_analysis = "percent-change"\n'


def test_percent_change_of_the_means_carries_its_interval_where_r_is_known(tmp_path):
    # Arm A reports r = 0.6; arm B gives no correlation and no SD of change, so none is implied.
    # Arm A's SE by hand: k = 40/50 = 0.8, (100/50) sqrt((8^2 + 0.64 x 10^2 - 2 x 0.8 x 0.6 x 10 x 8) / 100)
    # = 2 sqrt((64 + 64 - 76.8) / 100) = 2 sqrt(0.512) = 1.43108; interval -20 -/+ 1.959964 x 1.43108.
    rows = ["Y,A,100,50,10,40,8,,0.6,,,,", "Y,B,100,50,10,45,9,,,,,,"]
    res, _ = _audit(tmp_path, PERCENT, rows)
    est = {e.key: e for e in res["summary-shape"].estimates}
    a = est["summary-shape.percent-change-of-means.arm-1"]
    assert a.value == pytest.approx(-20.0)
    assert (a.lower, a.upper) == pytest.approx((-20 - 1.959964 * 1.43108, -20 + 1.959964 * 1.43108), abs=1e-4)
    assert "r = 0.60 (reported)" in a.note
    b = est["summary-shape.percent-change-of-means.arm-2"]
    assert b.value == pytest.approx(-10.0) and b.lower is None and b.upper is None
    assert b.note.startswith("no interval") and "correlation" in b.note
    # the mean of the percent changes needs r too: given for arm A only
    assert "summary-shape.mean-percent-change.arm-1" in est and "summary-shape.mean-percent-change.arm-2" not in est
    assert "delta-method 95% interval" in res["summary-shape"].method


def test_percent_change_interval_follows_the_level(tmp_path):
    rows = ["Y,A,100,50,10,40,8,,0.6,,,,", "Y,B,100,50,10,45,9,,0.6,,,,"]
    d = tmp_path / "s"
    _audit(tmp_path, PERCENT, rows)
    a = audit_summaries(load_summary_study(d), AuditOptions(quick=True, level=0.9))
    est = next(e for r in a.results if r.check_id == "summary-shape" for e in r.estimates
               if e.key == "summary-shape.percent-change-of-means.arm-1")
    # 1.644854: the normal 0.95 quantile (scipy.stats.norm.ppf; from memory to 6 decimals)
    assert est.upper - est.value == pytest.approx(1.644854 * 1.43108, abs=1e-4)
