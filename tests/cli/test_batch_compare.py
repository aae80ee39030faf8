"""Batch isolation and job-count independence, compare, and the blinded leak search."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pytest
from typer.testing import CliRunner

from auditor.batch import gate_reached, run_batch
from auditor.cli import app
from auditor.compare import compare_findings
from auditor.pipeline import AuditOptions, audit_study
from auditor.render.csvout import findings_csv
from auditor.render.html import report_html
from auditor.render.jsonout import findings_json
from auditor.study import load_study, outcome_data
from tests.conftest import EXAMPLE

runner = CliRunner()
QUICK = {"checks": ("pre-post",), "quick": True}
NO_PDF = "html,json,csv"
"""For the tests that are not about the PDF: it is laid out from the same HTML, at most of the cost."""


@pytest.fixture(scope="module")
def studies(tmp_path_factory):
    root = tmp_path_factory.mktemp("batch")
    for name in ("alpha", "beta"):
        shutil.copytree(EXAMPLE, root / name)
    (root / "broken").mkdir()
    (root / "broken" / "study.toml").write_text("[study\n")
    return root


def test_failing_study_is_recorded_and_others_complete(studies, tmp_path):
    res = run_batch([studies / "alpha", studies / "broken", studies / "beta"], tmp_path / "out",
                    {**QUICK, "formats": "json,csv"}, jobs=2)
    assert [r.status for r in res] == ["ok", "failed", "ok"]
    assert "not valid TOML" in res[1].error
    assert (tmp_path / "out" / "alpha" / "findings.json").exists()
    assert not (tmp_path / "out" / "broken").exists()
    assert gate_reached(res, "failed")


def test_outputs_do_not_depend_on_the_number_of_jobs(studies, tmp_path):
    folders = [studies / "alpha", studies / "beta"]
    one = run_batch(folders, tmp_path / "j1", QUICK, jobs=1)
    two = run_batch(folders, tmp_path / "j2", QUICK, jobs=2)
    assert [r.rows for r in one] == [r.rows for r in two]
    for name in ("alpha", "beta"):
        for f in ("findings.json", "audit.html", "findings.csv", "audit.pdf"):
            assert (tmp_path / "j1" / name / f).read_bytes() == (tmp_path / "j2" / name / f).read_bytes(), f


def test_batch_command_writes_index_and_summary_and_gates(studies, tmp_path):
    manifest = tmp_path / "studies.txt"
    manifest.write_text(f"# two studies\n{studies / 'alpha'}\n{studies / 'broken'}\n")
    out = tmp_path / "out"
    res = runner.invoke(app, ["batch", str(manifest), "-o", str(out), "--jobs", "1", "--formats", NO_PDF])
    assert res.exit_code == 4, res.output  # a study failed, gate or no gate
    index = (out / "index.html").read_text()
    assert 'href="alpha/audit.html"' in index and "failed" in index
    assert "screening aid for a qualified statistician" in index
    summary = (out / "summary.csv").read_text().splitlines()
    assert summary[0].startswith("study,folder_name,status")
    assert any(",broken,failed," in line for line in summary)
    res = runner.invoke(app, ["batch", str(manifest), "-o", str(out), "--jobs", "1", "--force",
                              "--fail-on", "failed", "--formats", "json"])
    assert res.exit_code == 4  # a failed study outranks the gate


def test_compare_reports_moves(example_copy, tmp_path):
    before = audit_study(load_study(example_copy), AuditOptions(**QUICK))
    # A later data cut: drop a tenth of the visit rows.
    p = example_copy / "data" / "adeff.csv"
    lines = p.read_text().splitlines()
    p.write_text("\n".join(lines[:1] + [ln for i, ln in enumerate(lines[1:]) if i % 10]) + "\n")
    after = audit_study(load_study(example_copy), AuditOptions(**QUICK))
    a, b = json.loads(findings_json(before)), json.loads(findings_json(after))
    same = compare_findings(a, a)
    assert same.unchanged
    moved = compare_findings(a, b)
    assert not moved.unchanged
    assert any(m.name.startswith("Participants with baseline") for m in moved.numbers_moved)
    old, new = tmp_path / "old.json", tmp_path / "new.json"
    old.write_text(json.dumps(a))
    new.write_text(json.dumps(b))
    res = runner.invoke(app, ["compare", str(old), str(new), "--html", str(tmp_path / "c.html")])
    assert res.exit_code == 0, res.output
    assert "numbers that moved" in res.output and "pre-post.n-participants" in res.output
    assert "Estimates that moved" in (tmp_path / "c.html").read_text()
    res = runner.invoke(app, ["compare", str(old), str(tmp_path / "missing.json")])
    assert res.exit_code == 2


# ----------------------------------------------------------------------------- blinding


def _by_arm_numbers(study) -> list[float]:
    """Arm-level summaries and between-arm contrasts computed here, independently of the checks."""
    nums = []
    for spec in study.metadata.outcomes:
        df = outcome_data(study, spec).frame.dropna(subset=["baseline", "followup"])
        change = df["followup"] - df["baseline"]
        for arm in study.metadata.study.arms:
            sel = df["arm"] == arm
            nums += [df.loc[sel, "followup"].mean(), df.loc[sel, "baseline"].mean(), change[sel].mean(),
                     float(np.corrcoef(df.loc[sel, "baseline"], df.loc[sel, "followup"])[0, 1])]
        active = df["arm"] != study.metadata.study.control_arm
        nums.append(change[active].mean() - change[~active].mean())
        nums.append(df.loc[active, "followup"].mean() - df.loc[~active, "followup"].mean())
    return [float(x) for x in nums if np.isfinite(x) and not float(x).is_integer()]


def _json_numbers(obj):
    if isinstance(obj, bool):
        return
    if isinstance(obj, (int, float)):
        yield float(obj)
    elif isinstance(obj, dict):
        for v in obj.values():
            yield from _json_numbers(v)
    elif isinstance(obj, list):
        if _is_grid(obj):
            return  # an evenly spaced plotting grid carries no data
        for v in obj:
            yield from _json_numbers(v)


def _is_grid(values) -> bool:
    if len(values) < 20 or not all(isinstance(v, float) for v in values):
        return False
    steps = np.diff(values)
    return bool(np.allclose(steps, steps[0], rtol=1e-6, atol=1e-9))


def _leaks(audit, study):
    text = {"json": findings_json(audit, figure_data=True), "html": report_html(audit), "csv": findings_csv(audit)}
    labels = [a for a in study.metadata.study.arms]
    label_hits = [(k, a) for k, t in text.items() for a in labels if a in t]
    numbers = list(_json_numbers(json.loads(text["json"])))
    secret = _by_arm_numbers(study)
    number_hits = [s for s in secret if any(abs(n - s) <= 1e-9 * max(1, abs(s)) for n in numbers)]
    return label_hits, number_hits


@pytest.fixture(scope="module")
def example_study_loaded():
    return load_study(EXAMPLE)


def test_blinded_audit_leaks_no_arm_label_or_by_arm_number(example_study_loaded):
    audit = audit_study(example_study_loaded, AuditOptions(blinded=True, quick=True))
    labels, numbers = _leaks(audit, example_study_loaded)
    assert labels == []
    assert numbers == []
    # Checks that need the arms are withheld; every other check is still answered from pooled data.
    for r in audit.results:
        if r.verdict.value == "not assessable":
            assert r.reason == "not assessed in a blinded report", (r.outcome, r.check_id, r.reason)
    assert any(r.verdict.value != "not assessable" for r in audit.results)


def test_leak_search_finds_leaks_in_an_unblinded_audit(example_study_loaded):
    # The search must be able to fail: the unblinded audit shows arm labels and by-arm effects.
    audit = audit_study(example_study_loaded, AuditOptions(blinded=False, quick=True, checks=("change-score",)))
    labels, numbers = _leaks(audit, example_study_loaded)
    assert labels and numbers


def test_blinded_terminal_output_has_no_arm_label(tmp_path):
    res = runner.invoke(app, ["run", str(EXAMPLE), "-o", str(tmp_path / "b"), "--blinded", "--check", "pre-post",
                              "--formats", "json,csv"])
    assert res.exit_code == 0, res.output
    assert "Placebo" not in res.output and "TQ-4417 200 ug" not in res.output
