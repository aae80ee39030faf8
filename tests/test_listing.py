"""The optional appendix naming participants each outcome's analysis leaves out (--list-left-out)."""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
from typer.testing import CliRunner

from auditor.cli import app
from auditor.listing import NO_RECORD, left_out
from auditor.study import OutcomeData, load_study

runner = CliRunner()


def _expected_from_csv(folder) -> dict[str, set[str]]:
    """Independent of the loader: participants of adsl.csv lacking a baseline or a main follow-up
    value (or the risk endpoint) in the raw ADaM files, per parameter."""
    study = load_study(folder)
    visits = pd.read_csv(folder / "data" / "adeff.csv", dtype={"AVAL": float})
    adsl = pd.read_csv(folder / "data" / "adsl.csv", dtype=str, keep_default_na=False)
    everyone = set(adsl["USUBJID"])
    out = {}
    for spec in study.metadata.outcomes:
        rows = visits[(visits["PARAMCD"] == spec.param) & visits["AVAL"].notna()]
        has = lambda visit: set(rows.loc[rows["AVISIT"] == str(visit), "USUBJID"])  # noqa: E731
        usable = has(spec.baseline_visit) & has(spec.main_followup)
        if spec.risk_endpoint:
            usable &= set(adsl.loc[adsl[spec.risk_endpoint].str.strip() != "", "USUBJID"])
        out[spec.param] = everyone - usable
    return out


def test_listing_matches_an_independent_count_and_stays_in_its_appendix(example_copy, tmp_path):
    out = tmp_path / "out"
    res = runner.invoke(app, ["run", str(example_copy), "-o", str(out), "--list-left-out", "--quiet",
                              "--formats", "html,json,csv"])
    assert res.exit_code == 0, res.output
    findings = json.loads((out / "findings.json").read_text())
    got: dict[str, set[str]] = {}
    for row in findings["left_out"]:
        got.setdefault(row["outcome"], set()).add(row["subject"])
    expected = _expected_from_csv(example_copy)
    assert {k: v for k, v in expected.items() if v} == got
    # Each outcome's count agrees with the report's own "participants with baseline and follow-up".
    n_all = len(pd.read_csv(example_copy / "data" / "adsl.csv"))
    prepost = {r["outcome"]: r for r in findings["results"] if r["check_id"] == "pre-post"}
    for param, ids in got.items():
        n_both = next(e["value"] for e in prepost[param]["estimates"]
                      if e["name"].startswith("Participants with baseline and follow-up"))
        assert len(ids) == n_all - n_both

    ids = sorted(set().union(*got.values()))
    html = (out / "audit.html").read_text()
    appendix_at = html.index("Participants left out of each outcome")
    assert all(html.find(i) > appendix_at for i in ids)  # identifiers only in the appendix
    assert not any(i in (out / "findings.csv").read_text() for i in ids)
    assert not any(i in res.output for i in ids)
    without_listing = json.dumps({k: v for k, v in findings.items() if k != "left_out"})
    assert not any(i in without_listing for i in ids)


def test_without_the_option_no_identifier_and_no_listing_key(example_copy, tmp_path):
    out = tmp_path / "out"
    assert runner.invoke(app, ["run", str(example_copy), "-o", str(out), "--quiet",
                                     "--formats", "html,json,csv"]).exit_code == 0
    findings = json.loads((out / "findings.json").read_text())
    assert "left_out" not in findings
    ids = set(pd.read_csv(example_copy / "data" / "adsl.csv")["USUBJID"])
    text = (out / "audit.html").read_text() + (out / "findings.json").read_text()
    assert not ids & set(re.findall(r"TQA02-\d{3}-\d{4}", text))


def test_reasons_are_joined_once_per_participant(example_copy):
    study = load_study(example_copy)
    spec = study.metadata.outcomes[0]
    frame = pd.DataFrame({"subject": ["A", "B", "C"], "arm": ["x", "x", "y"],
                          "baseline": [1.0, np.nan, np.nan], "followup": [2.0, 3.0, np.nan]})
    data = OutcomeData(spec=spec, frame=frame, arms=["x", "y"], control_arm="x", design="parallel",
                       derived_columns=[])
    rows = left_out(data, ["A", "B", "C", "D"])
    assert [(r.subject, r.reason) for r in rows] == [
        ("B", f"no value at baseline ({spec.baseline_visit})"),
        ("C", f"no value at baseline ({spec.baseline_visit}); no value at the main follow-up "
              f"({spec.main_followup})"),
        ("D", NO_RECORD),
    ]
