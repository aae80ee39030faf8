"""The exit-code table of README.md and docs/pipelines.md, command by command.

0 success; 1 an internal defect; 2 a problem with the input or the command line (nothing written);
3 a gate reached (batch --fail-on, a failing selfcheck case); 4 a batch in which a study failed,
which outranks 3.
"""

from __future__ import annotations

import json
import shutil

import pytest
from typer.testing import CliRunner

from auditor.cli import app
from tests.conftest import EXAMPLE

runner = CliRunner()


def _boom(*args, **kwargs):
    raise TypeError("a defect planted by the test")


def _one_outcome_study(dst, param: str = "FENO"):
    """example_study with only one outcome in study.toml (a short audit)."""
    shutil.copytree(EXAMPLE, dst, ignore=shutil.ignore_patterns("__pycache__"))
    head, *blocks = (dst / "study.toml").read_text().split("[[outcomes]]")
    keep = [b for b in blocks if f'param = "{param}"' in b]
    (dst / "study.toml").write_text(head + "[[outcomes]]" + keep[0])
    return dst


@pytest.fixture(scope="module")
def folders(tmp_path_factory):
    root = tmp_path_factory.mktemp("codes")
    _one_outcome_study(root / "feno")
    (root / "broken").mkdir()
    (root / "broken" / "study.toml").write_text("[study\n")
    return root


# ----------------------------------------------------------------------------- validate


def test_validate_codes(folders, monkeypatch):
    assert runner.invoke(app, ["validate", str(folders / "feno")]).exit_code == 0
    assert runner.invoke(app, ["validate", str(folders / "broken")]).exit_code == 2
    monkeypatch.setattr("auditor.study.load_study", _boom)
    assert runner.invoke(app, ["validate", str(folders / "feno")]).exit_code == 1


# ----------------------------------------------------------------------------- run


def test_run_codes(folders, tmp_path, monkeypatch):
    res = runner.invoke(app, ["run", str(folders / "feno"), "-o", str(tmp_path / "a"), "--check", "pre-post"])
    assert res.exit_code == 0, res.output
    assert runner.invoke(app, ["run", str(folders / "broken"), "-o", str(tmp_path / "b")]).exit_code == 2
    assert runner.invoke(app, ["run", str(folders / "feno"), "-o", str(tmp_path / "c"), "--seed", "-1"]).exit_code == 2
    # An existing audit is not replaced without --force: an input problem, nothing written.
    assert runner.invoke(app, ["run", str(folders / "feno"), "-o", str(tmp_path / "a")]).exit_code == 2
    monkeypatch.setattr("auditor.pipeline.audit_study", _boom)
    assert runner.invoke(app, ["run", str(folders / "feno"), "-o", str(tmp_path / "d")]).exit_code == 1
    assert not (tmp_path / "d").exists()


# ----------------------------------------------------------------------------- init


def test_init_codes(tmp_path, monkeypatch):
    for name in ("adeff.csv", "adsl.csv"):
        shutil.copy(EXAMPLE / "data" / name, tmp_path / name)
    data = [str(tmp_path / "adeff.csv"), str(tmp_path / "adsl.csv")]
    res = runner.invoke(app, ["init", *data, "-o", str(tmp_path / "study.toml")])
    assert res.exit_code == 0, res.output
    assert runner.invoke(app, ["init", str(tmp_path / "missing.csv"), "-o", str(tmp_path / "x.toml")]).exit_code == 2
    assert runner.invoke(app, ["init", *data, "-o", str(tmp_path / "study.toml")]).exit_code == 2  # exists
    monkeypatch.setattr("auditor.draft.checked_draft", _boom)
    assert runner.invoke(app, ["init", *data, "-o", str(tmp_path / "y.toml")]).exit_code == 1


# ----------------------------------------------------------------------------- batch


@pytest.fixture
def audit_once(monkeypatch):
    """Each study folder audited for real once per test; later batches of the test reuse the result
    (the exit code depends only on the studies' outcomes)."""
    import auditor.batch as batch

    real, seen = batch.audit_one, {}

    def once(args):
        if args[0] not in seen:
            seen[args[0]] = real(args)
        return seen[args[0]]

    monkeypatch.setattr(batch, "audit_one", once)
    return seen


def test_batch_codes(folders, tmp_path, audit_once, monkeypatch):
    good, broken = str(folders / "feno"), str(folders / "broken")

    def batch(name, *args):
        return runner.invoke(app, ["batch", *args, "-o", str(tmp_path / name), "--jobs", "1"])

    res = batch("ok", good)
    assert res.exit_code == 0, res.output
    # FENO's change-score verdict is unsupported and its regression-to-mean verdict caution.
    assert batch("gate", good, "--fail-on", "caution").exit_code == 3
    assert batch("below-gate", good, "--fail-on", "failed").exit_code == 0
    res = batch("failed", good, broken)
    assert res.exit_code == 4 and "1 of 2 studies failed" in res.output
    assert (tmp_path / "failed" / "summary.csv").exists()  # the batch is still written
    # A failure outranks a gate: the batch is incomplete.
    assert batch("both", good, broken, "--fail-on", "caution").exit_code == 4
    assert batch("bad-option", good, "--fail-on", "worst").exit_code == 2
    assert batch("no-folder", str(tmp_path / "nowhere")).exit_code == 2
    monkeypatch.setattr("auditor.batch.run_batch", _boom)
    assert batch("defect", good).exit_code == 1


# ----------------------------------------------------------------------------- compare


def _findings(study="S-1"):
    return {"schema_version": "1.2", "study_id": study, "blinded": False, "outcomes": [{"param": "X1"}],
            "results": [{"outcome": "X1", "check_id": "pre-post", "verdict": "sound",
                         "estimates": [{"key": "pre-post.slope", "name": "Slope", "value": 1.0}]}]}


def test_compare_codes(tmp_path, monkeypatch):
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    a.write_text(json.dumps(_findings()))
    b.write_text(json.dumps(_findings("S-2")))
    assert runner.invoke(app, ["compare", str(a), str(a)]).exit_code == 0
    assert runner.invoke(app, ["compare", str(a), str(tmp_path / "missing.json")]).exit_code == 2
    assert runner.invoke(app, ["compare", str(a), str(b)]).exit_code == 2  # different studies
    assert runner.invoke(app, ["compare", str(a), str(b), "--force"]).exit_code == 0
    assert runner.invoke(app, ["compare", str(a), str(a), "--tolerance", "-1"]).exit_code == 2
    monkeypatch.setattr("auditor.compare.compare_findings", _boom)
    assert runner.invoke(app, ["compare", str(a), str(a)]).exit_code == 1


# ----------------------------------------------------------------------------- selfcheck


def test_selfcheck_codes(tmp_path, monkeypatch):
    import auditor.selfcheck as sc

    one = ["--only", "anorexia-correlation", "--date", "2026-01-01"]
    res = runner.invoke(app, ["selfcheck", "-o", str(tmp_path / "ok"), *one])
    assert res.exit_code == 0, res.output
    assert runner.invoke(app, ["selfcheck", "-o", str(tmp_path / "x"), "--seed", "-5"]).exit_code == 2
    real = sc.run_reference

    def failing(case):
        from dataclasses import replace

        return replace(real(case), passed=False, detail="failed by the test")

    monkeypatch.setattr(sc, "run_reference", failing)
    res = runner.invoke(app, ["selfcheck", "-o", str(tmp_path / "fail"), *one])
    assert res.exit_code == 3 and "FAIL anorexia-correlation" in res.output
    monkeypatch.setattr(sc, "run_selfcheck", _boom)
    assert runner.invoke(app, ["selfcheck", "-o", str(tmp_path / "defect"), *one]).exit_code == 1
