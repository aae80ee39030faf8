"""Bad summaries give located errors (file, row, column, what, how to fix), exit 2 and nothing written."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from typer.testing import CliRunner

from auditor.cli import app
from auditor.errors import StudyInputError
from auditor.summaries.audit import load_summary_study

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = ROOT / "example_manuscript"
HEADER = ("outcome,arm,n,mean_baseline,sd_baseline,mean_followup,sd_followup,sd_change,r_prepost,mean_change,"
          "se_change\n")


@pytest.fixture
def manuscript(tmp_path) -> Path:
    dst = tmp_path / "ms"
    shutil.copytree(EXAMPLE, dst)
    return dst


def _write(folder: Path, rows: list[str], header: str = HEADER) -> None:
    toml = folder / "study.toml"
    text = toml.read_text()
    cut = text.index("[[outcomes]]")
    toml.write_text(text[:cut] + '[[outcomes]]\nparam = "LDL"\nscale = "continuous"\nbounds = [0, inf]\n'
                    'reported_analysis = "change"\n')
    (folder / "summaries.csv").write_text(header + "\n".join(rows) + "\n")


GOOD_C = "LDL,Control bar,84,3.42,0.78,3.38,0.80,0.48,,,"
GOOD_T = "LDL,Fibre bar 12 g,86,3.47,0.81,3.21,0.79,0.47,,,"


def _problems(folder: Path):
    with pytest.raises(StudyInputError) as exc:
        load_summary_study(folder)
    return exc.value.problems


def test_clean_rows_load(manuscript):
    _write(manuscript, [GOOD_C, GOOD_T])
    study = load_summary_study(manuscript)
    assert study.summaries.arms["LDL"]["Control bar"].r == pytest.approx(
        (0.78**2 + 0.80**2 - 0.48**2) / (2 * 0.78 * 0.80))


@pytest.mark.parametrize("row,column,words", [
    ("LDL,Fibre bar 12 g,86,3.47,-0.81,3.21,0.79,0.47,,,", "sd_baseline", "must be positive"),
    ("LDL,Fibre bar 12 g,0,3.47,0.81,3.21,0.79,0.47,,,", "n", "not a whole number of participants"),
    ("LDL,Fibre bar 12 g,12.5,3.47,0.81,3.21,0.79,0.47,,,", "n", "not a whole number of participants"),
    ("LDL,Fibre bar 12 g,86,3.47,0.81,3.21,0.79,,1.2,,", "r_prepost", "outside -1 to 1"),
    ("LDL,Fibre bar 12 g,86,3.47,0.81,,,0.47,,,", "mean_followup", "follow-up mean and SD is missing"),
    ("LDL,Fibre bar 12 g,86,3.47,0.81,3.21,0.79,0.051,,,", "sd_change", "probably an SE"),
    ("LDL,Fibre bar 12 g,86,3.47,0.087,3.21,0.79,0.47,,,", "sd_baseline", "probably an SE"),
    ("LDL,Fibre bar 12 g,86,3.47,0.81,3.21,0.79,0.051,,,0.051", "sd_change", "probably an SE"),
    ("LDL,Fibre bar 12 g,86,3.47,0.81,3.21,0.79,3.0,,,", "sd_change", "no sample can have"),
    ("LDL,Fibre bar 12 g,eighty,3.47,0.81,3.21,0.79,0.47,,,", "n", "not a finite number"),
    ("LDL,Fibre arm,86,3.47,0.81,3.21,0.79,0.47,,,", "arm", "not one of the study's arms"),
    ("HDL,Fibre bar 12 g,86,3.47,0.81,3.21,0.79,0.47,,,", "outcome", "not an outcome of study.toml"),
])
def test_bad_row_is_located(manuscript, row, column, words):
    _write(manuscript, [GOOD_C, row])
    problems = _problems(manuscript)
    hit = [p for p in problems if p.column == column and words in p.problem]
    assert hit, [p.one_line() for p in problems]
    assert hit[0].file == "summaries.csv" and hit[0].where == "row 3" and hit[0].fix


def test_every_problem_collected_together(manuscript):
    _write(manuscript, ["LDL,Control bar,0,3.42,0.78,3.38,0.80,0.48,,,",
                        "LDL,Fibre bar 12 g,86,3.47,-0.81,3.21,0.79,0.47,1.5,,"])
    problems = _problems(manuscript)
    assert {(p.where, p.column) for p in problems} >= {("row 2", "n"), ("row 3", "sd_baseline"), ("row 3", "r_prepost")}


def test_unknown_column_and_missing_arm(manuscript):
    _write(manuscript, [GOOD_C + ",1"], header=HEADER.strip() + ",sd_chnage\n")
    lines = [p.one_line() for p in _problems(manuscript)]
    assert any("sd_chnage" in l and "did you mean 'sd_change'" in l for l in lines)


def test_missing_arm_row(manuscript):
    _write(manuscript, [GOOD_C])
    assert any("no row for arm 'Fibre bar 12 g'" in p.problem for p in _problems(manuscript))


def test_cli_exit_2_and_nothing_written(manuscript, tmp_path):
    _write(manuscript, [GOOD_C, "LDL,Fibre bar 12 g,86,3.47,-0.81,3.21,0.79,0.47,,,"])
    out = tmp_path / "out"
    res = CliRunner().invoke(app, ["run", str(manuscript), "-o", str(out)])
    assert res.exit_code == 2
    assert "summaries.csv: row 3 column sd_baseline:" in res.output
    assert not out.exists()


def test_bad_study_toml_is_located(manuscript):
    toml = manuscript / "study.toml"
    toml.write_text(toml.read_text().replace('reported_analysis = "change"', 'reported_analysis = "changes"', 1))
    lines = [p.one_line() for p in _problems(manuscript)]
    assert any("outcomes[1].reported_analysis" in l for l in lines), lines


def test_data_folder_refuses_summaries_source(tmp_path):
    # The data-folder reader keeps working unchanged and names the mix-up when asked to read summaries.
    from auditor.errors import ProblemLog
    from auditor.metadata import read_metadata

    raw = (EXAMPLE / "study.toml").read_bytes().replace(b'[files]\nsummaries = "summaries.csv"',
                                                        b'[files]\nvisits = "v.csv"')
    log = ProblemLog()
    meta, _ = read_metadata(tmp_path, log, raw=raw)
    assert meta is None and any("summaries" in p.problem for p in log.problems)


def test_path_leaving_the_folder_is_refused(manuscript):
    toml = manuscript / "study.toml"
    toml.write_text(toml.read_text().replace('summaries = "summaries.csv"', 'summaries = "../summaries.csv"'))
    lines = [p.one_line() for p in _problems(manuscript)]
    assert any("files.summaries" in l and "leaves the study folder" in l for l in lines), lines


def test_extra_cells_and_unreadable_csv(manuscript):
    _write(manuscript, [GOOD_C, GOOD_T + ",9,9"])
    assert any(p.where == "row 3" and "cells" in p.problem for p in _problems(manuscript))
    (manuscript / "summaries.csv").write_text(HEADER + 'LDL,"' + "x" * 200_000 + '"\n')
    assert any("not readable CSV" in p.problem for p in _problems(manuscript))
