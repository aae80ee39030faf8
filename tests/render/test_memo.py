"""The memo, the closed/open marking of every page, the report fields of study.toml and the blinded
audit that withholds pooled numbers too. Expected values here are properties of the tool's own output
(which page carries which marking, one paragraph per outcome), not numbers from outside sources."""

from __future__ import annotations

import dataclasses
import json
import re

import pytest
import weasyprint
from weasyprint.formatting_structure import boxes

from auditor.errors import StudyInputError
from auditor.pipeline import (CAUTIONS, INTERIM_CAUTION, WITHHELD_TEXT, AuditOptions, audit_cautions, audit_study,
                              withheld_items)
from auditor.render.html import memo_html, report_html
from auditor.render.output import MEMO_FILES, OUTPUT_FILES, render_all
from auditor.render.pdf import html_to_pdf, make_fetcher
from auditor.render.view import CLOSED_MARK, OPEN_MARK, memo_view, outcome_heading
from auditor.results import ReportInfo, Verdict
from auditor.study import load_study


def _texts(box):
    if isinstance(box, boxes.TextBox):
        yield box.text
    for child in getattr(box, "children", None) or []:
        yield from _texts(child)


def page_texts(html: str) -> list[dict]:
    """Per PDF page: the text of its top-centre margin box and the text of the whole page."""
    doc = weasyprint.HTML(string=html, base_url="about:blank", url_fetcher=make_fetcher()).render()
    out = []
    for page in doc.pages:
        top = [c for c in page._page_box.children
               if isinstance(c, boxes.MarginBox) and c.at_keyword == "@top-center"]
        out.append({"top": "".join(t for b in top for t in _texts(b)),
                    "all": " ".join(_texts(page._page_box))})
    return out


@pytest.fixture(scope="module")
def blinded_audit(example_copy_module):
    return audit_study(load_study(example_copy_module), AuditOptions(quick=True, blinded=True,
                                                                     checks=("pre-post",)))


@pytest.fixture(scope="module")
def example_copy_module(tmp_path_factory):
    import shutil

    from tests.conftest import EXAMPLE

    dst = tmp_path_factory.mktemp("memo") / "study"
    shutil.copytree(EXAMPLE, dst, ignore=shutil.ignore_patterns("__pycache__"))
    return dst


def first_outcomes(audit, n: int):
    """The audit cut down to its first ``n`` outcomes (a shorter PDF, same layout)."""
    keep = [o["param"] for o in audit.outcomes[:n]]
    return dataclasses.replace(audit, outcomes=audit.outcomes[:n], results=[r for r in audit.results if r.outcome in keep])


def test_unblinded_audit_marks_every_pdf_page_closed(example_audit):
    pages = page_texts(report_html(first_outcomes(example_audit, 2)))
    assert len(pages) > 5
    assert all(p["top"] == CLOSED_MARK for p in pages), [i for i, p in enumerate(pages) if p["top"] != CLOSED_MARK]
    assert all(OPEN_MARK not in p["all"] for p in pages)
    assert CLOSED_MARK in report_html(example_audit).split("<header", 1)[0]  # top of the HTML page


def test_blinded_audit_marks_every_page_open_and_never_closed(blinded_audit):
    html = report_html(blinded_audit)
    pages = page_texts(html)
    assert len(pages) > 3
    assert all(p["top"] == OPEN_MARK for p in pages)
    assert not any("CLOSED" in p["all"] or "CONFIDENTIAL" in p["all"] for p in pages)
    assert "What this blinded audit withholds" in html
    for item in withheld_items(True, False):
        assert item in html


def test_memo_marks_every_page_and_runs_two_to_four_pages(example_audit):
    pages = page_texts(memo_html(example_audit))
    assert 2 <= len(pages) <= 4
    assert all(p["top"] == CLOSED_MARK for p in pages)


def test_memo_grid_matches_the_results(example_audit):
    v = memo_view(example_audit)
    assert [row["param"] for row in v["grid"]] == [o["param"] for o in example_audit.outcomes]
    by_key = {(r.outcome, r.check_id): r.verdict.value for r in example_audit.results}
    for row in v["grid"]:
        for check, cell in zip(v["checks"], row["cells"]):
            expected = by_key.get((row["param"], check["id"]))
            assert (cell["verdict"] if cell else None) == expected


def test_memo_has_one_paragraph_per_outcome_led_by_its_worst_finding(example_audit):
    v = memo_view(example_audit)
    html = memo_html(example_audit)
    assert len(v["paragraphs"]) == len(example_audit.outcomes)
    assert html.count('class="memo-para"') == len(example_audit.outcomes)
    for p in v["paragraphs"]:
        results = [r for r in example_audit.results if r.outcome == p["param"]]
        worst = max(r.verdict.rank for r in results)
        assert p["lead"]["verdict"] in {r.verdict.value for r in results if r.verdict.rank == worst}
        assert p["lead"]["headline"] in {r.headline for r in results}
        assert p["recommendation"]
    fen = next(p for p in v["paragraphs"] if p["param"] == "FENO")
    assert fen["lead"]["verdict"] == "unsupported"
    assert fen["recommendation"].startswith("ANCOVA on follow-up with a flexible (spline) baseline")
    assert fen["heading"] == "Fractional exhaled nitric oxide (FENO)"
    fev = next(p for p in v["paragraphs"] if p["param"] == "FEV1")
    assert fev["recommendation"] == "The planned change-from-baseline analysis."


def test_memo_keeps_the_cautions_and_cites_its_sources(example_audit):
    v = memo_view(example_audit)
    html = memo_html(example_audit)
    for c in CAUTIONS:
        assert c in v["cautions"]
    assert "Sources cited" in html and v["references"]
    assert INTERIM_CAUTION not in html


def test_memo_pdf_is_the_same_bytes_on_rerun(example_audit):
    assert html_to_pdf(memo_html(example_audit)) == html_to_pdf(memo_html(example_audit))


def test_render_all_writes_the_memo_only_when_asked(example_audit):
    short = first_outcomes(example_audit, 1)
    assert set(render_all(short, memo=True)) == set(OUTPUT_FILES + MEMO_FILES)
    assert set(render_all(short)) == set(OUTPUT_FILES)


def test_outcome_heading_puts_the_code_in_brackets():
    assert outcome_heading("Serum potassium", "K") == "Serum potassium (K)"
    assert outcome_heading("K", "K") == "K"


def test_recommendation_in_findings_json(example_audit):
    d = json.loads(json.dumps(example_audit.to_dict()))
    assert d["schema_version"] == "1.2"
    recs = {(r["outcome"], r["check_id"]): r["recommendation"] for r in d["results"]}
    assert recs[("RESC", "count-time")].startswith("a rate model")
    assert d["report"]["withheld"] == []


def _with_study_keys(folder, text: str):
    toml = folder / "study.toml"
    toml.write_text(toml.read_text().replace("seed = 20261201", "seed = 20261201\n" + text))
    return load_study(folder)


def test_report_fields_and_interim_caution(example_copy):
    study = _with_study_keys(example_copy, 'data_cut = 2026-10-31\nreport_version = "2.1"\n'
                                            'author = "Independent statistical centre"\ninterim = true')
    a = audit_study(study, AuditOptions(quick=True, checks=("pre-post",)))
    assert a.report == ReportInfo(data_cut="2026-10-31", report_version="2.1",
                                  author="Independent statistical centre", interim=True)
    assert INTERIM_CAUTION in a.cautions and "alpha-spending" in INTERIM_CAUTION
    html = memo_html(a)
    for text in ("2026-10-31", "2.1", "Independent statistical centre", "interim look", "alpha-spending"):
        assert text in html
    assert audit_cautions(False) == CAUTIONS


@pytest.mark.parametrize("line, pattern", [
    ('data_cut = "2026-02-30"', r"data_cut"),
    ("interim = 1", r"interim"),
    ("report_version = 2", r"report_version"),
    ("withold_pooled = true", r"withold_pooled"),
])
def test_report_fields_are_validated(example_copy, line, pattern):
    with pytest.raises(StudyInputError) as err:
        _with_study_keys(example_copy, line)
    assert any(re.search(pattern, p.one_line()) for p in err.value.problems)


def test_blinded_audit_can_withhold_pooled_numbers(example_copy):
    study = _with_study_keys(example_copy, "withhold_pooled = true")
    a = audit_study(study, AuditOptions(quick=True, blinded=True, checks=("pre-post", "regression-to-mean")))
    assert withheld_items(True, True)[-1] in a.report.withheld
    assessed = [r for r in a.results if r.verdict not in (Verdict.NOT_ASSESSABLE, Verdict.TOOL_DEFECT)]
    assert assessed
    for r in assessed:
        assert r.headline == WITHHELD_TEXT and not r.estimates and not r.tables and not r.figures
        assert all(s.evidence == "withheld" for s in r.subfindings)
        assert not re.search(r"\d", r.recommendation)
    # The option overrides study.toml; an unblinded audit never withholds.
    shown = audit_study(study, AuditOptions(quick=True, blinded=True, withhold_pooled=False, checks=("pre-post",)))
    assert all(r.estimates for r in shown.results)
    unblinded = audit_study(study, AuditOptions(quick=True, blinded=False, checks=("pre-post",)))
    assert unblinded.report.withheld == [] and all(r.headline != WITHHELD_TEXT for r in unblinded.results)


def test_memo_escapes_and_isolates_user_labels(example_audit):
    label = "<script>alert(1)</script>\u202eevil"
    first = example_audit.outcomes[0]["param"]
    audit = dataclasses.replace(
        first_outcomes(example_audit, 1),
        outcomes=[{**example_audit.outcomes[0], "label": label}],
        results=[dataclasses.replace(r, outcome_label=label) for r in example_audit.results if r.outcome == first])
    html = memo_html(audit)
    assert "<script>" not in html and "&lt;script&gt;" in html
    assert "\u2068&lt;script&gt;alert(1)&lt;/script&gt;\u202eevil\u2069" in html  # inside a first-strong isolate


def test_run_memo_writes_six_files_with_the_same_bytes_on_rerun(tmp_path):
    from typer.testing import CliRunner

    from auditor.cli import app
    from tests.conftest import EXAMPLE

    runner = CliRunner()
    args = ["run", str(EXAMPLE), "--check", "pre-post", "--memo", "--blinded", "--withhold-pooled", "--quiet"]
    first, second = tmp_path / "a", tmp_path / "b"
    for out in (first, second):
        res = runner.invoke(app, args + ["-o", str(out)])
        assert res.exit_code == 0, res.output
    assert sorted(p.name for p in first.iterdir()) == sorted(OUTPUT_FILES + MEMO_FILES)
    for name in OUTPUT_FILES + MEMO_FILES:
        assert (first / name).read_bytes() == (second / name).read_bytes(), name
    memo = (first / "memo.html").read_text()
    assert OPEN_MARK in memo and WITHHELD_TEXT in memo and withheld_items(True, True)[-1] in memo
    d = json.loads((first / "findings.json").read_text())
    assert d["report"]["withheld"] == withheld_items(True, True)
    # An existing memo is not replaced without --force.
    res = runner.invoke(app, args + ["-o", str(first)])
    assert res.exit_code == 2 and "memo.html" in res.output
