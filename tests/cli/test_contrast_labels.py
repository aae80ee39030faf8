"""A three-arm study whose arm label holds brackets and spaces: the label reaches findings.json's
estimates exactly as written, because contrasts carry their labels instead of column names."""

from __future__ import annotations

import json

import pandas as pd
from typer.testing import CliRunner

from auditor.cli import app

runner = CliRunner()
BRACKETED = "Dose [high] 2"
ACTIVE = "TQ-4417 200 ug"


def _three_arms(study):
    """Move every other participant of the active arm to a third arm named ``BRACKETED``."""
    adsl = pd.read_csv(study / "data" / "adsl.csv", dtype=str, keep_default_na=False)
    active = adsl.loc[adsl["TRT01P"] == ACTIVE, "USUBJID"].sort_values().tolist()
    moved = set(active[::2])
    adsl.loc[adsl["USUBJID"].isin(moved), "TRT01P"] = BRACKETED
    adsl.to_csv(study / "data" / "adsl.csv", index=False)
    adeff = pd.read_csv(study / "data" / "adeff.csv", dtype=str, keep_default_na=False)
    adeff.loc[adeff["USUBJID"].isin(moved), "TRTP"] = BRACKETED
    adeff.to_csv(study / "data" / "adeff.csv", index=False)
    toml = study / "study.toml"
    toml.write_text(toml.read_text().replace(f'arms = ["Placebo", "{ACTIVE}"]',
                                             f'arms = ["Placebo", "{BRACKETED}", "{ACTIVE}"]'))


def test_a_bracketed_arm_label_survives_into_findings_json(example_copy, tmp_path):
    _three_arms(example_copy)
    out = tmp_path / "audit"
    res = runner.invoke(app, ["run", str(example_copy), "-o", str(out), "--formats", "json", "--quiet",
                              "--check", "change-score", "--check", "percent-change", "--check", "count-time"])
    assert res.exit_code == 0, res.output
    results = json.loads((out / "findings.json").read_text())["results"]
    arms: dict[str, set[str]] = {}
    for r in results:
        arms.setdefault(r["check_id"], set()).update(e["arm"] for e in r["estimates"] if e["arm"])
    assert BRACKETED in arms["change-score"]
    assert {f"{BRACKETED} vs Placebo", f"{ACTIVE} vs Placebo"} <= arms["percent-change"]
    assert {f"{BRACKETED} vs Placebo", f"{ACTIVE} vs Placebo"} <= arms["count-time"]
    every = set().union(*arms.values())
    assert not any("arm[" in a for a in every), every
    rows = [row for r in results if r["check_id"] == "change-score" for t in r["tables"] if t["id"] == "analyses"
            for row in t["rows"]]
    assert {row[1] for row in rows} >= {BRACKETED, ACTIVE}
