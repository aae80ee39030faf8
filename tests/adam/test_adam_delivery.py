"""A multi-file ADaM delivery end to end: ``auditor init FOLDER``, the draft confirmed, the audit, the
records each rule removes (checked against an independent pandas computation), the mixed-unit
refusal, and one test per record rule and per located problem."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from auditor.cli import app
from auditor.errors import StudyInputError
from auditor.pipeline import AuditOptions, audit_study
from auditor.study import load_study
from tests.adam.skin_trial import convert_eos_to_one_unit, generate

runner = CliRunner()


def _stderr(res) -> str:
    return res.output + (res.stderr if res.stderr_bytes is not None else "")


def _confirmed(text: str) -> str:
    """The draft as a statistician confirms it: CHECK comments removed, the study named, the entry
    window declared for the lesion score, and the questionnaire's planned analysis set."""
    out = []
    for line in text.splitlines():
        if line.startswith("#"):
            out.append(line)  # whole-line comments (a commented-out outcome stays commented out)
            continue
        line = re.sub(r"\s*# CHECK:.*$", "", line)
        out.append(line)
    text = "\n".join(out) + "\n"
    text = text.replace('id = "DRAFT"', 'id = "SKN-204"')
    text = text.replace('followup_visits = ["Week 4", "Week 12"]',
                        'followup_visits = ["Week 4", "Week 12"]\n'
                        'entry_criterion = { visit = "Screening", between = [12, 60] }')
    head, tail = text.split('param = "ITCHQ"')
    tail = tail.replace('planned_analysis = "change"', 'planned_analysis = "follow-up-adjusted"', 1)
    return head + 'param = "ITCHQ"' + tail


def _uncomment_eos(text: str) -> str:
    """Remove the leading '# ' of the drafted, commented-out eosinophil outcome."""
    lines, inside = [], False
    for line in text.splitlines():
        if line.startswith("# CHECK: parameter EOS"):
            inside = True
            continue
        if inside and line.startswith("# "):
            line = line[2:]
        elif inside and not line.strip():
            inside = False
        lines.append(line)
    return "\n".join(lines) + "\n"


@pytest.fixture(scope="module")
def delivery(tmp_path_factory) -> Path:
    folder = generate(tmp_path_factory.mktemp("skn") / "study")
    res = runner.invoke(app, ["init", str(folder)])
    assert res.exit_code == 0, _stderr(res)
    return folder


def test_init_on_the_folder_finds_the_files_flags_units_and_scales(delivery):
    text = (delivery / "study.toml").read_text()
    assert 'visits = ["data/adeff.csv", "data/adlb.csv", "data/adqs.csv"]' in text
    assert 'participants = "data/adsl.csv"' in text          # recognised by one row per participant
    assert text.count("[[outcomes]]") == 4
    assert "blinded = true" in text                           # blinded unless told otherwise
    assert 'population = "FASFL"' in text and 'dtype = "drop"' in text and "LOCF (" in text
    assert 'records = { analysis_flag = "ANL01FL" }' in text
    assert 'screening_visit = "Screening"' in text and 'baseline_visit = "Baseline"' in text
    assert "baseline_visit = 0" in text and "followup_visits = [12]" in text    # AVISITN numbers only
    assert 'unit = "kU/L"' in text and "RESCUEFL" in text
    # Neither the concentration (IgE, integer-valued) nor the questionnaire total is called a count.
    assert 'scale = "count"' not in text
    assert re.search(r'param = "IGE".*?bounds = \[0, inf\]', text, re.S)
    assert re.search(r'param = "ITCHQ".*?bounds = \[0, 29\]', text, re.S)
    # The mixed-unit parameter is drafted commented out, and says why.
    assert re.search(r"# CHECK: parameter EOS of data/adlb\.csv mixes units: '10\^9/L' \(\d+ records\), "
                     r"'cells/uL' \(\d+ records\)", text)
    assert "\n# param = \"EOS\"" in text
    every = [ln for ln in text.splitlines() if ln and not ln.startswith("#") and not ln.startswith("[")]
    guessed = [ln for ln in every if ln.split("=")[0].strip() in ("scale", "bounds", "unit", "baseline_visit",
                                                                   "screening_visit", "population", "dtype")]
    assert guessed and all("# CHECK:" in ln for ln in guessed)


def test_init_unblinded_drafts_blinded_false(tmp_path):
    folder = generate(tmp_path / "study", n=40)
    assert runner.invoke(app, ["init", str(folder), "--unblinded"]).exit_code == 0
    assert "blinded = false" in (folder / "study.toml").read_text()


def _expected_counts(folder: Path, file: str, param: str, analysis_flag: bool) -> list[tuple]:
    """(rule column, records removed, participants removed) computed directly with pandas."""
    df = pd.read_csv(folder / "data" / file, dtype=str, keep_default_na=False)
    adsl = pd.read_csv(folder / "data" / "adsl.csv", dtype=str, keep_default_na=False)
    rows = df[df["PARAMCD"] == param]
    out = []

    def step(column, keep):
        nonlocal rows
        after = rows[keep]
        out.append((column, int((~keep).sum()), rows["USUBJID"].nunique() - after["USUBJID"].nunique()))
        rows = after

    step("FASFL", rows["USUBJID"].isin(adsl.loc[adsl["FASFL"] == "Y", "USUBJID"]))
    step("DTYPE", rows["DTYPE"] == "")
    if analysis_flag:
        step("ANL01FL", rows["ANL01FL"] == "Y")
    return out


@pytest.fixture(scope="module")
def confirmed(delivery, tmp_path_factory) -> Path:
    (delivery / "study.toml").write_text(_confirmed((delivery / "study.toml").read_text()))
    return delivery


def test_confirmed_draft_audits_and_counts_the_records_each_rule_removes(confirmed):
    study = load_study(confirmed)
    audit = audit_study(study, AuditOptions(quick=True))
    by_param = {o["param"]: o for o in audit.outcomes}
    assert set(by_param) == {"LESION", "IGE", "ITCHQ"}
    for param, file, flag in (("LESION", "adeff.csv", True), ("IGE", "adlb.csv", False),
                              ("ITCHQ", "adqs.csv", False)):
        got = [(c["column"], c["records_removed"], c["participants_removed"])
               for c in by_param[param]["record_selection"]]
        assert got == _expected_counts(confirmed, file, param, flag), param
        assert by_param[param]["file"] == f"data/{file}"
    lesion = dict((c[0], c[1]) for c in _expected_counts(confirmed, "adeff.csv", "LESION", True))
    assert lesion["DTYPE"] > 0 and lesion["ANL01FL"] > 0 and lesion["FASFL"] > 0  # each rule removes something
    assert by_param["IGE"]["unit"] == "kU/L"
    rtm = next(r for r in audit.results if r.outcome == "LESION" and r.check_id == "regression-to-mean")
    assert rtm.verdict.value != "not assessable", rtm.reason
    assert "between 12 and 60" in rtm.headline
    assert audit.blinded and not any(e.by_arm for r in audit.results for e in r.estimates)


def test_report_and_findings_show_the_record_rules(confirmed, tmp_path):
    out = tmp_path / "audit"
    res = runner.invoke(app, ["run", str(confirmed), "-o", str(out), "--check", "pre-post"])
    assert res.exit_code == 0, _stderr(res)
    findings = json.loads((out / "findings.json").read_text())
    lesion = next(o for o in findings["outcomes"] if o["param"] == "LESION")
    assert [c["column"] for c in lesion["record_selection"]] == ["FASFL", "DTYPE", "ANL01FL"]
    html = (out / "audit.html").read_text()
    assert "Records analysed" in html and "analysis flag ANL01FL = Y" in html


def test_the_mixed_unit_parameter_is_refused_where_it_is_until_its_units_are_fixed(confirmed, tmp_path):
    folder = tmp_path / "mixed"
    generate(folder)
    (folder / "study.toml").write_text(_uncomment_eos((confirmed / "study.toml").read_text()))
    res = runner.invoke(app, ["validate", str(folder)])
    assert res.exit_code == 2
    text = _stderr(res)
    assert re.search(r"data/adlb\.csv: rows? \d+.* column AVALU: parameter 'EOS' mixes units: '10\^9/L' "
                     r"\(\d+ records\), 'cells/uL' \(\d+ records\)", text), text
    assert "convert its values" in text
    convert_eos_to_one_unit(folder)
    res = runner.invoke(app, ["validate", str(folder)])
    assert res.exit_code == 0, _stderr(res)


def test_blinded_audit_needs_no_arm_column(tmp_path):
    folder = generate(tmp_path / "study", n=80, arm_column=False)
    res = runner.invoke(app, ["init", str(folder)])
    assert res.exit_code == 0, _stderr(res)
    text = (folder / "study.toml").read_text()
    assert "arms =" not in text and "blinded = true" in text
    audit = audit_study(load_study(folder, _confirmed(text).encode()), AuditOptions(quick=True))
    assert audit.blinded and audit.arms == []
    assert {r.outcome for r in audit.results} == {"LESION", "IGE", "ITCHQ"}
    pre_post = [r for r in audit.results if r.check_id == "pre-post"]
    assert pre_post and all(r.verdict.value != "not assessable" for r in pre_post)
    # Asking for an unblinded audit of a pooled study is refused, not run with empty arms.
    (folder / "study.toml").write_text(_confirmed(text))
    res = runner.invoke(app, ["run", str(folder), "-o", str(tmp_path / "out"), "--unblinded"])
    assert res.exit_code == 2 and "the study is pooled" in _stderr(res)
    assert not (tmp_path / "out").exists()


# --------------------------------------------------------------------------- one rule at a time


MINIMAL = """
[study]
id = "SKN-204"
design = "parallel"
arms = ["Cream", "Vehicle"]
control_arm = "Vehicle"

[files]
visits = ["data/adeff.csv", "data/adlb.csv", "data/adqs.csv"]
participants = "data/adsl.csv"

[columns]
arm = "TRT01P"
{records}
[[outcomes]]
param = "LESION"
scale = "continuous"
baseline_visit = "Baseline"
followup_visits = ["Week 4", "Week 12"]
planned_analysis = "change"
{outcome}
"""


@pytest.fixture(scope="module")
def small(tmp_path_factory) -> Path:
    return generate(tmp_path_factory.mktemp("small") / "study", n=60)


def _load(folder: Path, records: str = "", outcome: str = ""):
    text = MINIMAL.format(records=records, outcome=outcome)
    return load_study(folder, text.encode())


def _rules(study, param="LESION"):
    return {c.column: c for c in study.record_selection[param]}


def test_derived_records_are_left_out_by_default(small):
    df = pd.read_csv(small / "data" / "adeff.csv", dtype=str, keep_default_na=False)
    locf = int((df["DTYPE"] == "LOCF").sum())
    assert locf > 0
    # The analysis flag leaves out the Week 4 repeat readings, which would otherwise be duplicates.
    study = _load(small, outcome='records = { analysis_flag = "ANL01FL" }')
    dropped = _rules(study)["DTYPE"]
    assert dropped.records_removed == locf and dropped.participants_removed == 0
    assert "LOCF" in dropped.rule
    assert not (study.visits["dtype"] == "LOCF").any()


def test_dtype_keep_analyses_the_carried_forward_records(small):
    study = _load(small, records='[records]\ndtype = "keep"\nanalysis_flag = "ANL01FL"\n')
    rule = _rules(study)["DTYPE"]
    assert rule.records_removed == 0 and "kept" in rule.rule
    rows = study.visits[(study.visits["param"] == "LESION") & (study.visits["dtype"] == "LOCF")]
    df = pd.read_csv(small / "data" / "adeff.csv", dtype=str, keep_default_na=False)
    assert len(rows) == int((df["DTYPE"] == "LOCF").sum())


def test_without_the_analysis_flag_the_repeat_readings_are_refused_where_they_are(small):
    with pytest.raises(StudyInputError) as exc:
        _load(small)
    text = "\n".join(p.one_line() for p in exc.value.problems)
    assert re.search(r"data/adeff\.csv.*more than one value for the same participant and visit", text), text


def test_an_outcome_level_rule_overrides_the_study_rule(small):
    df = pd.read_csv(small / "data" / "adeff.csv", dtype=str, keep_default_na=False)
    adsl = pd.read_csv(small / "data" / "adsl.csv", dtype=str, keep_default_na=False)
    study = _load(small, records='[records]\npopulation = "FASFL"\nanalysis_flag = "ANL01FL"\n',
                  outcome='records = { population = "PPROTFL" }')
    rule = _rules(study)["PPROTFL"]
    lesion = df[df["PARAMCD"] == "LESION"]
    out = ~lesion["USUBJID"].isin(adsl.loc[adsl["PPROTFL"] == "Y", "USUBJID"])
    assert rule.records_removed == int(out.sum()) > 0
    assert rule.participants_removed == int((adsl["PPROTFL"] != "Y").sum())
    assert "FASFL" not in _rules(study) and "ANL01FL" in _rules(study)


def test_a_missing_flag_column_is_a_located_problem(small):
    with pytest.raises(StudyInputError) as exc:
        _load(small, records='[records]\npopulation = "MITTFL"\nanalysis_flag = "ANL02FL"\n')
    text = "\n".join(p.one_line() for p in exc.value.problems)
    assert re.search(r"data/adsl\.csv: row 1 column MITTFL: population flag column is missing", text), text
    assert re.search(r"data/adeff\.csv: row 1 column ANL02FL: analysis flag column for 'LESION' is missing", text)


def test_a_category_keeps_only_its_records(small):
    study = _load(small, records='[records]\nanalysis_flag = "ANL01FL"\n', outcome='category = "EFFICACY"')
    assert _rules(study)["PARCAT1"].records_removed == 0
    with pytest.raises(StudyInputError) as exc:
        _load(small, records='[records]\nanalysis_flag = "ANL01FL"\n', outcome='category = "SAFETY"')
    assert any("no record of 'LESION' has category 'SAFETY'" in p.one_line() for p in exc.value.problems)


def test_a_parameter_in_two_files_needs_its_file_named(small, tmp_path):
    folder = generate(tmp_path / "twice", n=30)
    qs = pd.read_csv(folder / "data" / "adqs.csv", dtype=str, keep_default_na=False)
    qs.loc[qs.index[:2], "PARAMCD"] = "IGE"
    qs.to_csv(folder / "data" / "adqs.csv", index=False)
    text = MINIMAL.format(records="", outcome="").replace(
        'param = "LESION"', 'param = "IGE"').replace('followup_visits = ["Week 4", "Week 12"]',
                                                     'followup_visits = ["Week 12"]')
    with pytest.raises(StudyInputError) as exc:
        load_study(folder, text.encode())
    assert any("outcomes[0].file" in p.one_line() and "more than one visit file" in p.one_line() for p in exc.value.problems)
    fixed = text.replace('param = "IGE"', 'param = "IGE"\nfile = "data/adlb.csv"')
    assert load_study(folder, fixed.encode()).outcome_files["IGE"] == "data/adlb.csv"


def test_a_declared_unit_that_differs_from_avalu_is_a_located_problem(small):
    text = MINIMAL.format(records="", outcome="").replace(
        'param = "LESION"', 'param = "IGE"\nunit = "mg/L"').replace(
        'followup_visits = ["Week 4", "Week 12"]', 'followup_visits = ["Week 12"]')
    with pytest.raises(StudyInputError) as exc:
        load_study(small, text.encode())
    assert any("outcomes[0].unit" in p.one_line() and "differs from the data's AVALU 'kU/L'" in p.one_line()
               for p in exc.value.problems)


def test_one_file_as_text_still_reads(small):
    text = MINIMAL.format(records="", outcome="").replace(
        'visits = ["data/adeff.csv", "data/adlb.csv", "data/adqs.csv"]', 'visits = "data/adqs.csv"').replace(
        'param = "LESION"', 'param = "ITCHQ"').replace('baseline_visit = "Baseline"', "baseline_visit = 0").replace(
        'followup_visits = ["Week 4", "Week 12"]', "followup_visits = [12]")
    study = load_study(small, text.encode())
    assert study.outcome_files == {"ITCHQ": "data/adqs.csv"}


def test_population_flag_read_from_the_records_without_a_participant_file(tmp_path):
    """ADaM repeats ADSL flags on BDS records: with no participant file the records' own copy is used."""
    folder = generate(tmp_path / "study", n=40)
    adsl = pd.read_csv(folder / "data" / "adsl.csv", dtype=str, keep_default_na=False)
    eff = pd.read_csv(folder / "data" / "adeff.csv", dtype=str, keep_default_na=False)
    eff = eff.merge(adsl[["USUBJID", "TRT01P", "PPROTFL"]], on="USUBJID")
    eff.to_csv(folder / "data" / "adeff.csv", index=False)
    text = MINIMAL.format(records='[records]\npopulation = "PPROTFL"\nanalysis_flag = "ANL01FL"\n', outcome="")
    text = text.replace('visits = ["data/adeff.csv", "data/adlb.csv", "data/adqs.csv"]\n'
                        'participants = "data/adsl.csv"', 'visits = "data/adeff.csv"')
    rule = _rules(load_study(folder, text.encode()))["PPROTFL"]
    lesion = eff[eff["PARAMCD"] == "LESION"]
    assert rule.records_removed == int((lesion["PPROTFL"] != "Y").sum()) > 0
    assert rule.participants_removed == int((adsl["PPROTFL"] != "Y").sum())
