"""The contract pipelines build on: stable estimate keys, keyed comparison of two data cuts, the
identifying columns of findings.csv and summary.csv, and the refusal to compare audits that are not
comparable."""

from __future__ import annotations

import copy
import csv
import io
import json
import re
import shutil

import pandas as pd
import pytest
from typer.testing import CliRunner

from auditor.batch import SUMMARY_COLUMNS, run_batch, summary_csv
from auditor.cli import app
from auditor.compare import compare_findings
from auditor.pipeline import AuditOptions, audit_study
from auditor.render.csvout import COLUMNS, findings_csv
from auditor.render.jsonout import findings_json
from auditor.results import ESTIMATE_KEY, estimate_key_problems
from auditor.study import load_study
from tests.conftest import EXAMPLE

runner = CliRunner()
PRE_POST = {"checks": ("pre-post",), "quick": True}


def _earlier_cut(src, dst, share: float = 0.85):
    """The example study as an earlier data cut: only the first ``share`` of participants (by
    identifier) and an earlier analysis date."""
    shutil.copytree(src, dst, ignore=shutil.ignore_patterns("__pycache__"))
    subjects = sorted(pd.read_csv(dst / "data" / "adsl.csv", dtype=str)["USUBJID"])
    keep = set(subjects[: int(len(subjects) * share)])
    for name in ("adeff.csv", "adsl.csv"):
        df = pd.read_csv(dst / "data" / name, dtype=str, keep_default_na=False)
        df[df["USUBJID"].isin(keep)].to_csv(dst / "data" / name, index=False)
    toml = dst / "study.toml"
    toml.write_text(toml.read_text().replace('analysis_date = "2026-11-20"', 'analysis_date = "2026-08-14"'))
    return len(keep)


def _with_pairs(folder, param: str) -> int:
    """Participants with both a Baseline and a Week 12 value of ``param``, counted here with pandas,
    independently of the tool (Week 12 is the main follow-up visit in example_study/study.toml)."""
    df = pd.read_csv(folder / "data" / "adeff.csv")
    df = df[(df["PARAMCD"] == param) & df["AVAL"].notna()]
    have = df.groupby("USUBJID")["AVISIT"].agg(set)
    return int(sum({"Baseline", "Week 12"} <= v for v in have))


# ----------------------------------------------------------------------------- two data cuts


@pytest.fixture(scope="module")
def two_cuts(tmp_path_factory):
    """Two cuts of one study audited by one batch: cut1 (85% of participants), cut2 (all)."""
    root = tmp_path_factory.mktemp("cuts")
    _earlier_cut(EXAMPLE, root / "cut1")
    shutil.copytree(EXAMPLE, root / "cut2", ignore=shutil.ignore_patterns("__pycache__"))
    results = run_batch([root / "cut1", root / "cut2"], root / "out", PRE_POST, jobs=1)
    assert [r.status for r in results] == ["ok", "ok"], [r.error for r in results]
    return root, results


def test_two_cuts_through_batch_and_compare_give_a_keyed_json_diff(two_cuts):
    root, _ = two_cuts
    old, new = root / "out" / "cut1" / "findings.json", root / "out" / "cut2" / "findings.json"
    res = runner.invoke(app, ["compare", str(old), str(new), "--json", str(root / "diff.json"),
                              "--html", str(root / "diff.html")])
    assert res.exit_code == 0, res.output
    diff = json.loads((root / "diff.json").read_text())
    assert diff["matched_on"] == "key" and diff["unchanged"] is False
    assert diff["old"]["analysis_date"] == "2026-08-14" and diff["new"]["analysis_date"] == "2026-11-20"
    # The same checks ran on the same outcomes: nothing added or removed, only numbers moved.
    assert diff["estimates_added"] == [] and diff["estimates_removed"] == []
    assert diff["outcomes_added"] == [] and diff["checks_added"] == []
    moved = {(m["outcome"], m["key"], m["field"]): (m["before"], m["after"]) for m in diff["numbers_moved"]}
    assert all(re.match(ESTIMATE_KEY, k) for _, k, _ in moved)
    # The participant counts moved from the earlier cut's to the later cut's, each counted here.
    for param in ("FEV1", "FENO"):
        assert moved[(param, "pre-post.n-participants", "value")] == (
            _with_pairs(root / "cut1", param), _with_pairs(root / "cut2", param))
    assert _with_pairs(root / "cut1", "FEV1") < _with_pairs(root / "cut2", "FEV1")
    assert ("FEV1", "pre-post.pearson", "value") in moved
    assert "Estimates matched on stable estimate keys" in (root / "diff.html").read_text()


def test_comparison_page_reads_one_row_per_estimate_with_both_audits_named(two_cuts, tmp_path):
    from auditor.compare import comparison_view
    from auditor.render.html import render_marked
    from auditor.render.view import CLOSED_MARK, OPEN_MARK

    root, _ = two_cuts
    old, new = (json.loads((root / "out" / c / "findings.json").read_text()) for c in ("cut1", "cut2"))
    res = runner.invoke(app, ["compare", str(root / "out" / "cut1" / "findings.json"),
                              str(root / "out" / "cut2" / "findings.json"), "--html", str(tmp_path / "c.html")])
    assert res.exit_code == 0, res.output
    page = (tmp_path / "c.html").read_text(encoding="utf-8")
    assert CLOSED_MARK in page and "screening aid for a qualified statistician" in page
    assert "2026-08-14" in page and "2026-11-20" in page  # the two data cuts (study.toml and _earlier_cut)
    assert "Forced expiratory volume in 1 second (FEV1): Pre-post relationship" in page
    # The Pearson correlation is one row, value and interval read from the two files (formatted to 3
    # significant digits, as the report does), not three rows for value, lower and upper.
    est = {c: next(e for r in d["results"] if (r["outcome"], r["check_id"]) == ("FEV1", "pre-post")
                   for e in r["estimates"] if e["key"] == "pre-post.pearson") for c, d in (("old", old), ("new", new))}
    for side in est.values():
        assert f"{side['value']:.3g} ({side['lower']:.3g} to {side['upper']:.3g})" in page
    view = comparison_view(compare_findings(old, new), old, new)
    fev1 = next(g for g in view["number_groups"] if g["ident"] == ("FEV1", "pre-post"))
    assert len([r for r in fev1["rows"] if r[0].startswith("Pearson")]) == 1
    # FEV1 comes first, as study.toml declares it, though ACS sorts first by name.
    assert view["number_groups"][0]["ident"][0] == "FEV1"
    n_before = _with_pairs(root / "cut1", "FEV1")
    n_after = _with_pairs(root / "cut2", "FEV1")
    assert [str(n_before), str(n_after), f"+{n_after - n_before}", "value"] == fev1["rows"][0][1:]
    # Two blinded audits give an open page; one unblinded audit makes it closed.
    both = comparison_view(compare_findings(old, new), {**old, "blinded": True}, {**new, "blinded": True})
    page = render_marked("compare.html.j2", both)
    assert OPEN_MARK in page and CLOSED_MARK not in page
    assert comparison_view(compare_findings(old, new), {**old, "blinded": True}, new)["marking"] == CLOSED_MARK


def test_an_estimate_whose_interval_alone_moved_shows_its_unchanged_value():
    from auditor.compare import comparison_view

    old = _findings(_finding("sound", {}, [("change-score.slope.slope", "Slope", 1.0)]))
    old["results"][0]["estimates"][0].update(lower=0.9, upper=1.1)
    new = copy.deepcopy(old)
    new["results"][0]["estimates"][0]["upper"] = 1.5
    view = comparison_view(compare_findings(old, new), old, new)
    (group,) = view["number_groups"]
    assert group["rows"] == [["Slope", "1 (0.9 to 1.1)", "1 (0.9 to 1.5)", "0", "upper end"]]


def test_compare_of_a_cut_with_itself_says_nothing_changed(two_cuts, tmp_path):
    root, _ = two_cuts
    f = root / "out" / "cut2" / "findings.json"
    res = runner.invoke(app, ["compare", str(f), str(f), "--json", str(tmp_path / "same.json")])
    assert res.exit_code == 0, res.output
    assert "Nothing changed" in res.output
    assert json.loads((tmp_path / "same.json").read_text())["unchanged"] is True


def test_summary_csv_identifies_each_audit(two_cuts):
    root, results = two_cuts
    rows = list(csv.DictReader(io.StringIO((summary_csv(results)))))
    assert list(rows[0]) == SUMMARY_COLUMNS
    by_folder = {r["folder_name"]: r for r in rows}
    assert by_folder["cut1"]["analysis_date"] == "2026-08-14" and by_folder["cut2"]["analysis_date"] == "2026-11-20"
    assert by_folder["cut1"]["blinded"] == "false" and by_folder["cut1"]["tool_version"]
    # The hashes are those of the files read (computed here with hashlib).
    import hashlib

    for cut in ("cut1", "cut2"):
        digest = hashlib.sha256((root / cut / "data" / "adeff.csv").read_bytes()).hexdigest()
        assert f"visits={digest}" in by_folder[cut]["data_sha256"].split()
        assert by_folder[cut]["metadata_sha256"] == hashlib.sha256((root / cut / "study.toml").read_bytes()).hexdigest()
    assert by_folder["cut1"]["data_sha256"] != by_folder["cut2"]["data_sha256"]
    assert all(re.fullmatch(r"([a-z0-9-]+=[a-z ]+)(; [a-z0-9-]+=[a-z ]+)*", r["subfinding_verdicts"])
               for r in rows)


def test_a_failed_study_keeps_its_id_in_summary_csv(tmp_path):
    broken = tmp_path / "broken"
    shutil.copytree(EXAMPLE, broken, ignore=shutil.ignore_patterns("__pycache__"))
    (broken / "data" / "adeff.csv").unlink()
    (res,) = run_batch([broken], tmp_path / "out", PRE_POST, jobs=1)
    assert res.status == "failed"
    (row,) = csv.DictReader(io.StringIO(summary_csv([res])))
    assert row["study"] == "TQ-ASTH-02" and row["status"] == "failed" and row["analysis_date"] == "2026-11-20"
    assert row["blinded"] == "false" and row["error"].startswith("invalid input")


# ----------------------------------------------------------------------------- estimate keys


def _keys(audit) -> dict[tuple[str, str], list[str]]:
    return {(r.outcome, r.check_id): [e.key for e in r.estimates] for r in audit.results}


@pytest.fixture(scope="module")
def renamed_audit(tmp_path_factory):
    """A different study with the same design: fewer participants, other arm labels and values."""
    folder = tmp_path_factory.mktemp("renamed") / "study"
    _earlier_cut(EXAMPLE, folder, share=0.7)
    for name in ("adeff.csv", "adsl.csv", "../study.toml"):
        p = folder / "data" / name
        p.write_text(p.read_text().replace("TQ-4417 200 ug", "Arm Q 75").replace("Placebo", "Vehicle Z9"))
    return audit_study(load_study(folder), AuditOptions(quick=True))


def test_estimate_keys_are_unique_well_formed_and_free_of_data_values(example_audit, renamed_audit):
    for audit in (example_audit, renamed_audit):
        for r in audit.results:
            assert estimate_key_problems(r) == [], (r.outcome, r.check_id)
            keys = [e.key for e in r.estimates]
            assert len(keys) == len(set(keys))
            for k in keys:
                assert re.match(r"^[a-z0-9-]+(\.[a-z0-9-]+)+$", k), k
                low = k.lower()
                assert not any(a.lower().replace(" ", "-") in low for a in ("Placebo", "TQ-4417 200 ug",
                                                                            "Vehicle Z9", "Arm Q 75"))
                assert r.outcome.lower() not in low.split(".")
    # Other numbers, other arm names: the same keys for every outcome and check.
    assert _keys(example_audit) == _keys(renamed_audit)
    by_arm = [e for r in example_audit.results for e in r.estimates if e.key.endswith((".by-arm", "contrast-1"))]
    assert by_arm and all(e.arm for e in by_arm)
    assert {e.arm for e in by_arm} != {e.arm for r in renamed_audit.results for e in r.estimates
                                         if e.key.endswith((".by-arm", "contrast-1"))}


def test_findings_json_carries_the_keys(example_audit):
    d = json.loads(findings_json(example_audit))
    assert d["schema_version"] == "1.2"
    assert all(e["key"] for r in d["results"] for e in r["estimates"])


def test_a_missing_or_repeated_key_is_a_defect_of_the_tool(example_audit):
    from dataclasses import replace

    r = next(r for r in example_audit.results if len(r.estimates) >= 2)
    twice = replace(r, estimates=[r.estimates[0], r.estimates[0]])
    assert any("used twice" in p for p in estimate_key_problems(twice))
    blank = replace(r, estimates=[replace(r.estimates[0], key="")])
    assert estimate_key_problems(blank)
    foreign = replace(r, estimates=[replace(r.estimates[0], key="other-check.n")])
    assert any("does not start with" in p for p in estimate_key_problems(foreign))


def test_findings_csv_carries_identity_and_subfinding_verdicts(example_audit):
    rows = list(csv.DictReader(io.StringIO(findings_csv(example_audit))))
    assert list(rows[0]) == COLUMNS
    r0 = rows[0]
    assert r0["analysis_date"] == example_audit.provenance.analysis_date and r0["blinded"] == "false"
    assert r0["metadata_sha256"] == example_audit.provenance.metadata_sha256
    first = example_audit.results[0]
    assert r0["subfinding_verdicts"] == "; ".join(f"{s.id}={s.verdict.value}" for s in first.subfindings)


def test_findings_csv_carries_each_findings_recommendation(example_audit):
    rows = list(csv.DictReader(io.StringIO(findings_csv(example_audit))))
    assert COLUMNS[-1] == "recommendation"  # added at the end: earlier columns keep their positions
    by_finding = {(r["outcome"], r["check_id"]): r["recommendation"] for r in rows}
    assert len(by_finding) == len(example_audit.results)
    for r in example_audit.results:
        assert by_finding[(r.outcome, r.check_id)] == r.recommendation
    # The count-time check recommends a rate model for RESC (docs/memo.md's table), and the
    # descriptive pre-post check recommends nothing.
    assert by_finding[("RESC", "count-time")].startswith("a rate model")
    assert by_finding[("FEV1", "pre-post")] == ""


def test_findings_json_reference_names_every_key_the_file_has(example_audit):
    """docs/findings-json.md is the reference for the file: every key written is named there."""
    from tests.conftest import ROOT

    doc = (ROOT / "docs" / "findings-json.md").read_text(encoding="utf-8")
    named = set(re.findall(r"`([a-z_0-9]+)`", doc))
    d = json.loads(findings_json(example_audit))
    r = d["results"][0]
    groups = {"top level": d, "provenance": d["provenance"], "report": d["report"], "outcome": d["outcomes"][0],
              "result": r, "estimate": r["estimates"][0], "sub-finding": r["subfindings"][0],
              "file": d["provenance"]["files"][0], "check": d["checks"][0]}
    groups |= {"table": next(x for x in d["results"] if x["tables"])["tables"][0],
               "figure": next(x for x in d["results"] if x["figures"])["figures"][0]}
    missing = {g: sorted(set(obj) - named) for g, obj in groups.items() if set(obj) - named}
    assert not missing, missing
    assert f"**{d['schema_version']}**" in doc


# ----------------------------------------------------------------------------- compare, on findings dicts


def _finding(verdict: str, subs: dict[str, str], estimates: list[tuple[str, str, float]], keyed: bool = True):
    return {"outcome": "X1", "check_id": "change-score", "verdict": verdict,
            "subfindings": [{"id": i, "verdict": v} for i, v in subs.items()],
            "estimates": [{"name": n, "value": v, "lower": None, "upper": None, **({"key": k} if keyed else {})}
                          for k, n, v in estimates]}


def _findings(result, study="S-1", blinded=False, schema="1.2"):
    return {"schema_version": schema, "study_id": study, "blinded": blinded, "outcomes": [{"param": "X1"}],
            "results": [result]}


def test_compare_names_the_subfinding_that_moved_a_verdict_and_matches_on_keys():
    old = _findings(_finding("sound", {"slope": "sound", "bounds": "sound"},
                             [("change-score.slope.slope", "Slope (adjusted for arm)", 1.0),
                              ("change-score.scale.box-cox-power", "Box-Cox power", 0.5)]))
    # The display name changed wording, the key did not; one estimate went, one came.
    new = _findings(_finding("unsupported", {"slope": "unsupported", "bounds": "sound"},
                             [("change-score.slope.slope", "Slope (pooled)", 0.6),
                              ("change-score.n-participants", "Participants", 30.0)]))
    cmp = compare_findings(old, new)
    assert cmp.matched_on == "key"
    assert cmp.verdicts_moved == [("X1", "change-score", "sound", "unsupported")]
    assert [(m.id, m.old, m.new) for m in cmp.subfindings_of("X1", "change-score")] == [
        ("slope", "sound", "unsupported")]
    assert [(m.key, m.old, m.new) for m in cmp.numbers_moved] == [("change-score.slope.slope", 1.0, 0.6)]
    assert [e.key for e in cmp.estimates_added] == ["change-score.n-participants"]
    assert [e.key for e in cmp.estimates_removed] == ["change-score.scale.box-cox-power"]


def test_compare_reads_findings_of_the_previous_schema_by_name():
    est = [("", "Slope", 1.0)]
    old = _findings(_finding("sound", {}, est, keyed=False), schema="1.1")
    new = _findings(_finding("sound", {}, [("", "Slope", 1.5)], keyed=False), schema="1.1")
    cmp = compare_findings(old, new)
    assert cmp.matched_on == "name" and [m.name for m in cmp.numbers_moved] == ["Slope"]


@pytest.mark.parametrize("change, words", [({"study": "S-2"}, "different studies"),
                                           ({"blinded": True}, "is blinded")])
def test_compare_refuses_audits_that_are_not_comparable_unless_forced(tmp_path, change, words):
    f = _finding("sound", {}, [("change-score.slope.slope", "Slope", 1.0)])
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    a.write_text(json.dumps(_findings(f)))
    b.write_text(json.dumps(_findings(f, **change)))
    res = runner.invoke(app, ["compare", str(a), str(b)])
    assert res.exit_code == 2
    assert words in res.output and "--force" in res.output
    res = runner.invoke(app, ["compare", str(a), str(b), "--force", "--json", str(tmp_path / "c.json")])
    assert res.exit_code == 0, res.output
    assert words in json.loads((tmp_path / "c.json").read_text())["compared_despite"][0]
