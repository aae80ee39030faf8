"""A folder of published summaries in a batch: its own sub-folder with comments.md, labelled rows."""

from __future__ import annotations

import csv
import io
import json
import shutil
from pathlib import Path

from typer.testing import CliRunner

from auditor.batch import index_view, run_batch, summary_csv
from auditor.cli import app
from auditor.render.csvout import COLUMNS
from tests.conftest import EXAMPLE

MANUSCRIPT = Path(__file__).resolve().parents[2] / "example_manuscript"
QUICK = {"checks": ("pre-post",), "quick": True, "formats": "json,csv"}


def _rows(text: str) -> list[dict]:
    return list(csv.DictReader(io.StringIO(text)))


def test_mixed_batch_labels_each_study_by_its_source(tmp_path):
    shutil.copytree(EXAMPLE, tmp_path / "trial")
    res = run_batch([MANUSCRIPT, tmp_path / "trial"], tmp_path / "out", QUICK, jobs=1)
    assert [r.status for r in res] == ["ok", "ok"], [r.error for r in res]
    assert [r.source for r in res] == ["published summaries", "participant data"]
    paper = tmp_path / "out" / "example_manuscript"
    assert sorted(p.name for p in paper.iterdir()) == ["comments.md", "findings.csv", "findings.json"]
    assert not (tmp_path / "out" / "trial" / "comments.md").exists()
    rows = _rows(summary_csv(res))
    by_study = {(r["folder_name"], r["source"]) for r in rows}
    assert by_study == {("example_manuscript", "published summaries"), ("trial", "participant data")}
    assert {r["check_id"] for r in rows if r["folder_name"] == "example_manuscript"} <= {
        "summary-consistency", "summary-efficiency", "summary-responder", "summary-shape", "summary-rtm"}
    # the summaries' single file is named by a role without spaces, so data_sha256 stays space-separated
    manuscript_rows = [r for r in rows if r["folder_name"] == "example_manuscript"]
    assert all(r["data_sha256"].startswith("summaries=") and " " not in r["data_sha256"] for r in manuscript_rows)
    view = index_view(res, QUICK)
    assert [s["from_summaries"] for s in view["studies"]] == [True, False]
    # findings.csv and findings.json of each sub-folder carry the same source label
    for name, source in (("example_manuscript", "published summaries"), ("trial", "participant data")):
        found = _rows((tmp_path / "out" / name / "findings.csv").read_text(encoding="utf-8"))
        assert list(found[0]) == COLUMNS and {r["source"] for r in found} == {source}
        assert json.loads((tmp_path / "out" / name / "findings.json").read_text())["source"] == source


def test_batch_command_on_a_summaries_folder_writes_comments_and_refuses_blinding(tmp_path):
    out = tmp_path / "b"
    res = CliRunner().invoke(app, ["batch", str(MANUSCRIPT), "-o", str(out), "-j", "1", "--formats", "csv"])
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in (out / "example_manuscript").iterdir()) == ["comments.md", "findings.csv"]
    assert "1. " in (out / "example_manuscript" / "comments.md").read_text(encoding="utf-8")
    assert "published summaries" in (out / "index.html").read_text(encoding="utf-8")
    # a second batch into the same folder is refused before any work, comments.md included
    again = CliRunner().invoke(app, ["batch", str(MANUSCRIPT), "-o", str(out), "-j", "1"])
    assert again.exit_code == 2
    res = CliRunner().invoke(app, ["batch", str(MANUSCRIPT), "-o", str(tmp_path / "c"), "-j", "1",
                                   "--blinded", "--formats", "csv"])
    assert res.exit_code == 4
    row = _rows((tmp_path / "c" / "summary.csv").read_text(encoding="utf-8"))[0]
    assert row["status"] == "failed" and "--blinded" in row["error"] and row["source"] == "published summaries"
    assert row["study"] == "FIB-TG-07"


def test_batch_memo_fails_a_summaries_study_and_names_the_option(tmp_path):
    """`batch --memo` over a summaries folder: that study fails naming --memo (exit 4), as --blinded does,
    and nothing is written for it."""
    res = CliRunner().invoke(app, ["batch", str(MANUSCRIPT), "-o", str(tmp_path / "m"), "-j", "1", "--memo",
                                   "--formats", "csv"])
    assert res.exit_code == 4, res.output
    row = _rows((tmp_path / "m" / "summary.csv").read_text(encoding="utf-8"))[0]
    assert row["status"] == "failed" and "--memo" in row["error"] and row["source"] == "published summaries"
    assert not (tmp_path / "m" / "example_manuscript" / "findings.csv").exists()
