"""The example manuscript audited end to end: files, labels, verdicts, comments, determinism."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from auditor.cli import app
from auditor.pipeline import AuditOptions
from auditor.results import Verdict, estimate_key_problems
from auditor.summaries.audit import audit_summaries, load_summary_study

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = ROOT / "example_manuscript"


def _audit():
    return audit_summaries(load_summary_study(EXAMPLE), AuditOptions(quick=True))


def test_verdicts_follow_the_numbers():
    a = _audit()
    by = {(r.outcome, r.check_id): r for r in a.results}
    # the responder rule on waist circumference: the whole interval of its extra share lies above 10%
    resp = by[("WAIST", "summary-responder")]
    est = resp.estimates[0]
    assert est.lower > 1.10 and resp.verdict is Verdict.UNSUPPORTED
    # no correlation for CRP: no interval, so caution at most
    assert by[("CRP", "summary-efficiency")].verdict is Verdict.CAUTION
    # regression to the mean in a randomised parallel trial: caution at most, and says the contrast is unbiased
    rtm = by[("TG", "summary-rtm")]
    assert rtm.verdict is Verdict.CAUTION and "randomised contrast is not biased" in rtm.headline
    assert all(r.verdict is not Verdict.TOOL_DEFECT for r in a.results)


def test_every_estimate_has_a_stable_key():
    """The same key contract as the data audit: matched by compare, never built from a number or label."""
    a = _audit()
    assert a.results and all(not estimate_key_problems(r) for r in a.results)
    keys = {e.key for r in a.results for e in r.estimates}
    assert a.arms and not any(arm.lower() in k for k in keys for arm in a.arms)


def test_marked_as_published_summaries_not_as_a_closed_report():
    from auditor.render.view import audit_view

    v = audit_view(_audit())
    assert "PUBLISHED SUMMARIES" in v["marking"] and "CLOSED" not in v["marking"]


def test_run_writes_labelled_report_and_comments(tmp_path):
    out = tmp_path / "review_out"
    res = CliRunner().invoke(app, ["run", str(EXAMPLE), "-o", str(out), "--quiet"])
    assert res.exit_code == 0, res.output
    names = sorted(p.name for p in out.iterdir())
    assert names == ["audit.html", "audit.pdf", "comments.md", "findings.csv", "findings.json"]
    html = (out / "audit.html").read_text()
    assert "an audit from published summaries" in html and "screening aid for a qualified statistician" in html
    md = (out / "comments.md").read_text()
    assert md.count("\n1. ") == 1 and "Please report" in md and "screening aid" in md
    findings = json.loads((out / "findings.json").read_text())
    assert findings["source_label"] == "an audit from published summaries"
    first = {p.name: p.read_bytes() for p in out.iterdir() if p.suffix != ".pdf"}
    res = CliRunner().invoke(app, ["run", str(EXAMPLE), "-o", str(out), "--quiet", "--force"])
    assert res.exit_code == 0
    assert first == {p.name: p.read_bytes() for p in out.iterdir() if p.suffix != ".pdf"}


def test_refuses_existing_output_without_force(tmp_path):
    out = tmp_path / "o"
    assert CliRunner().invoke(app, ["run", str(EXAMPLE), "-o", str(out), "--quiet"]).exit_code == 0
    res = CliRunner().invoke(app, ["run", str(EXAMPLE), "-o", str(out), "--quiet"])
    assert res.exit_code == 2


def test_validate_command():
    res = CliRunner().invoke(app, ["validate", str(EXAMPLE)])
    assert res.exit_code == 0 and "valid published summaries" in res.output


def test_participant_options_refused_for_summaries(tmp_path):
    out = tmp_path / "o"
    res = CliRunner().invoke(app, ["run", str(EXAMPLE), "-o", str(out), "--blinded", "--list-left-out"])
    assert res.exit_code == 2 and "--blinded:" in res.output and "--list-left-out:" in res.output
    assert not out.exists()
    res = CliRunner().invoke(app, ["run", str(EXAMPLE), "-o", str(out), "--check", "change-score"])
    assert res.exit_code == 2 and "not a check of an audit from published summaries" in res.output


def test_only_one_check(tmp_path):
    a = audit_summaries(load_summary_study(EXAMPLE), AuditOptions(quick=True, checks=("summary-rtm",)))
    assert [(r.outcome, r.check_id) for r in a.results] == [("TG", "summary-rtm")]


def test_single_arm_before_after(tmp_path):
    # An invented single-arm study of a skin cream: entry on a severity index from 24 to 73.
    d = tmp_path / "sa"
    d.mkdir()
    (d / "study.toml").write_text(
        '[study]\nid = "SA-1"\nsource = "summaries"\ndesign = "single-arm"\narms = ["Cream"]\n\n'
        '[files]\nsummaries = "s.csv"\n\n[[outcomes]]\nparam = "SEV"\nscale = "continuous"\nbounds = [0, 72]\n'
        'reported_analysis = "change"\nentry_criterion = { lower = 24, upper = 73, assumed_mean = [18, 22], '
        'assumed_sd = 9, reliability = [0.6, 0.8] }\n')
    (d / "s.csv").write_text("outcome,arm,n,mean_baseline,sd_baseline,mean_followup,sd_followup,sd_change\n"
                             "SEV,Cream,40,31.2,6.1,22.5,8.4,7.2\n")
    a = audit_summaries(load_summary_study(d), AuditOptions(quick=True))
    assert [r.check_id for r in a.results] == ["summary-consistency", "summary-shape", "summary-rtm"]
    rtm = a.results[-1]
    assert rtm.verdict is Verdict.CAUTION and "before-after design" in rtm.headline
    assert "could account for" in a.comments[0].evidence


def test_notebook_call():
    import auditor.api as aud

    a = aud.audit_from_summaries(EXAMPLE, quick=True)
    assert a.comments and a.comments[0].number == 1
    assert set(a.findings_frame()["check_id"]) <= {"summary-consistency", "summary-efficiency", "summary-responder",
                                                  "summary-shape", "summary-rtm"}


def test_observed_change_carries_its_t_interval():
    # Control bar TG in example_manuscript/summaries.csv: n 84, means 2.46 -> 2.38, SD of change 0.69.
    # Expected: -0.08 -/+ t(0.975, 83) x 0.69 / sqrt(84), with t from scipy.stats.t (reference library).
    import math

    from scipy import stats

    a = audit_summaries(load_summary_study(EXAMPLE), AuditOptions(quick=True, checks=("summary-rtm",)))
    est = {e.key: e for e in a.results[0].estimates}["summary-rtm.observed-change.control"]
    half = stats.t.ppf(0.975, 83) * 0.69 / math.sqrt(84)
    assert est.value == pytest.approx(-0.08)
    assert (est.lower, est.upper) == pytest.approx((-0.08 - half, -0.08 + half), rel=1e-9)
    # the headline's two ranges read in the same direction: signed population SDs beside signed units
    assert "(-0.42 to -0.07 population SDs)" in a.results[0].headline


def test_blinding_caution_fits_an_audit_without_participant_data():
    a = _audit()
    blinding = [c for c in a.cautions if c.startswith("Blinded data must stay blinded")]
    assert len(blinding) == 1 and "--blinded" not in blinding[0] and "published" in blinding[0]
    assert any("screening aid for a qualified statistician" in c for c in a.cautions)


def test_run_writes_only_the_formats_asked_for_and_always_comments(tmp_path):
    out = tmp_path / "o"
    res = CliRunner().invoke(app, ["run", str(EXAMPLE), "-o", str(out), "--quiet", "--formats", "json"])
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in out.iterdir()) == ["comments.md", "findings.json"]
    bad = CliRunner().invoke(app, ["run", str(EXAMPLE), "-o", str(tmp_path / "p"), "--formats", "docx"])
    assert bad.exit_code == 2 and not (tmp_path / "p").exists()


def test_provenance_lists_only_the_options_that_apply():
    """A summaries audit has no participant data to blind, withhold or list: those options are not recorded."""
    from auditor.render.view import audit_view
    from auditor.summaries.audit import SUMMARY_OPTIONS

    a = audit_summaries(load_summary_study(EXAMPLE), AuditOptions(quick=True, seed=5))
    assert sorted(a.provenance.options) == sorted([*SUMMARY_OPTIONS, "source"])
    assert a.provenance.options["seed"] == 5 and a.provenance.options["source"] == "summaries"
    shown = dict(audit_view(a)["provenance"]["options"])
    for name in ("blinded", "withhold_pooled", "list_left_out"):
        assert name not in a.provenance.options and name not in shown
    # the data audit still records them
    assert {"blinded", "withhold_pooled", "list_left_out"} <= set(AuditOptions().as_record())


def test_unblinded_and_pooled_options_refused_for_summaries(tmp_path):
    out = tmp_path / "o"
    res = CliRunner().invoke(app, ["run", str(EXAMPLE), "-o", str(out), "--unblinded", "--show-pooled"])
    assert res.exit_code == 2 and "--unblinded:" in res.output and "--show-pooled:" in res.output
    res = CliRunner().invoke(app, ["run", str(EXAMPLE), "-o", str(out), "--withhold-pooled"])
    assert res.exit_code == 2 and "--withhold-pooled:" in res.output
    assert not out.exists()


def test_memo_refused_for_summaries(tmp_path):
    """`run --memo` on a summaries folder: refused (exit 2, one located line with a fix, nothing
    written) instead of silently writing no memo."""
    out = tmp_path / "o"
    res = CliRunner().invoke(app, ["run", str(EXAMPLE), "-o", str(out), "--memo"])
    assert res.exit_code == 2
    lines = [line for line in res.output.splitlines() if line.startswith("--memo:")]
    assert len(lines) == 1 and "comments.md" in lines[0] and "Fix: leave the option out" in lines[0]
    assert not out.exists()


@pytest.mark.parametrize("option", [{"blinded": True}, {"blinded": False}, {"withhold_pooled": True},
                                    {"list_left_out": True}])
def test_api_refuses_participant_options_for_summaries(option):
    """`audit_from_summaries(..., blinded=True)` and its kin raise the API's input error, naming the
    option, instead of returning an audit that ignored it."""
    from auditor.api import StudyInputError, audit_from_summaries

    with pytest.raises(StudyInputError) as caught:
        audit_from_summaries(EXAMPLE, quick=True, **option)
    (problem,) = caught.value.problems
    name, value = next(iter(option.items()))
    assert problem.file == f"{name}={value!r}" and f"leave {name} out" in problem.fix
