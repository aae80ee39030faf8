"""The batch index page (what identifies each audit, the closed or open marking of the batch) and
`batch --memo` (a memo beside each study's audit)."""

from __future__ import annotations

import hashlib
import json
import shutil
import tomllib

import pytest
from typer.testing import CliRunner

from auditor import __version__
from auditor.batch import SHORT_HASH_DIGITS, StudyOutcome, batch_marking, index_view, run_batch
from auditor.cli import app
from auditor.render.html import render_marked
from auditor.render.view import CLOSED_MARK, OPEN_MARK
from tests.conftest import EXAMPLE

runner = CliRunner()
QUICK_JSON = {"checks": ("pre-post",), "quick": True, "formats": "json"}


def _one_outcome_copy(dst, blinded: bool = False):
    """example_study with its first outcome only (FEV1), so that a full audit through the command
    line stays quick; ``blinded`` sets ``blinded = true`` in its study.toml."""
    shutil.copytree(EXAMPLE, dst, ignore=shutil.ignore_patterns("__pycache__"))
    toml = dst / "study.toml"
    head, first, *_ = toml.read_text(encoding="utf-8").split("[[outcomes]]")
    text = head + "[[outcomes]]" + first
    if blinded:
        text = text.replace("blinded = false", "blinded = true")
    toml.write_text(text, encoding="utf-8")
    return dst


@pytest.fixture(scope="module")
def folders(tmp_path_factory):
    root = tmp_path_factory.mktemp("index")
    return {"open": _one_outcome_copy(root / "open", blinded=True), "closed": _one_outcome_copy(root / "closed")}


def _page(results, options=QUICK_JSON) -> str:
    return render_marked("batch_index.html.j2", {**index_view(results, dict(options)), "cautions": ["c"]})


def test_index_page_shows_what_identifies_each_audit(folders, tmp_path):
    results = run_batch([folders["closed"]], tmp_path / "out", QUICK_JSON, jobs=1)
    page = _page(results)
    declared = tomllib.loads((folders["closed"] / "study.toml").read_text())["study"]
    assert str(declared["analysis_date"]) in page  # 2026-11-20, as study.toml declares it
    assert "unblinded (by arm)" in page and f"<td>{__version__}</td>" in page
    assert index_view(results, {"blinded": None})["options"] == [("blinded", "as each study declares")]
    # The short hashes are the first digits of the files' SHA-256 (computed here with hashlib).
    for label, path in (("study.toml", "study.toml"), ("visits", "data/adeff.csv"),
                        ("participants", "data/adsl.csv")):
        digest = hashlib.sha256((folders["closed"] / path).read_bytes()).hexdigest()
        assert f"{label} {digest[:SHORT_HASH_DIGITS]}" in page
        assert digest[:SHORT_HASH_DIGITS + 1] not in page  # cut short: the full hash is in summary.csv


def test_index_page_is_closed_if_any_study_is_unblinded(folders, tmp_path):
    both = run_batch([folders["open"], folders["closed"]], tmp_path / "both", QUICK_JSON, jobs=1)
    assert [s.blinded for s in both] == ["true", "false"]
    page = _page(both)
    assert CLOSED_MARK in page and OPEN_MARK not in page
    assert "blinded (pooled)" in page
    only_open = _page(both[:1])
    assert OPEN_MARK in only_open and CLOSED_MARK not in only_open
    assert "@top-center" in only_open  # the marking is also on every printed page


def test_a_study_of_unknown_blinding_makes_the_batch_closed():
    known = StudyOutcome("a", "a", "ok", "S-1", blinded="true")
    unknown = StudyOutcome("b", "b", "failed", error="invalid input", blinded="")
    assert batch_marking([known]) == (OPEN_MARK, "open")
    assert batch_marking([known, unknown]) == (CLOSED_MARK, "closed")
    assert batch_marking([]) == (CLOSED_MARK, "closed")


def test_batch_memo_writes_a_memo_beside_each_audit(folders, tmp_path):
    out = tmp_path / "out"
    res = runner.invoke(app, ["batch", str(folders["open"]), str(folders["closed"]), "-o", str(out), "--memo",
                              "--formats", "json", "--jobs", "1"])
    assert res.exit_code == 0, res.output
    for name, mark in (("open", OPEN_MARK), ("closed", CLOSED_MARK)):
        folder = out / name
        # --formats json: no audit.html or audit.pdf, but the memo's HTML and PDF are written.
        assert sorted(p.name for p in folder.iterdir()) == ["findings.json", "memo.html", "memo.pdf"]
        assert (folder / "memo.pdf").read_bytes().startswith(b"%PDF-")
        memo = (folder / "memo.html").read_text(encoding="utf-8")
        assert mark in memo and "screening aid for a qualified statistician" in memo
        findings = json.loads((folder / "findings.json").read_text())
        assert findings["blinded"] is (name == "open")
        for r in findings["results"]:
            assert r["check_title"] in memo
    index = (out / "index.html").read_text(encoding="utf-8")
    assert 'href="open/memo.html"' in index and 'href="closed/memo.html"' in index
    assert CLOSED_MARK in index
    # A second batch into the same folder does not replace the memos without --force.
    res = runner.invoke(app, ["batch", str(folders["closed"]), "-o", str(out), "--memo", "--formats", "json",
                              "--jobs", "1"])
    assert res.exit_code == 2 and "memo.html" in res.output
