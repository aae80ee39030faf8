"""Broken and hostile study folders: every one ends cleanly.

A small synthetic study is built in each test, one thing is broken or made hostile, and the test
asserts one of the three clean endings documented in docs/robustness.md:

- exit code 2 with one line per problem naming the file, the row or key, the column and the fix,
  no traceback, and (for ``run``) no output folder and no ``.partial-`` folder left behind;
- a valid study whose damaged outcome gets "not assessable" findings with the reason while the other
  outcomes are audited;
- a valid study read correctly (encodings, links inside the folder, long or hostile labels).
"""

from __future__ import annotations

import csv
import dataclasses
import io
import json
import os
import re
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import auditor.checks.registry as registry
from auditor.checks.registry import CheckContext
from auditor.cli import app
from auditor.errors import StudyInputError
from auditor.pipeline import AuditOptions, audit_study, outcome_screen
from auditor.render.csvout import findings_csv
from auditor.render.html import environment, render_view, report_html
from auditor.render.jsonout import findings_json
from auditor.study import load_study, outcome_data
from tests.cli.test_validate_broken import _stderr, runner

VISITS = (("Baseline", 0), ("Week 4", 4), ("Week 8", 8))
CENTRES = {"SBP": 140.0, "DBP": 90.0, "HR": 70.0, "RR": 16.0, "TEMP": 37.0, "WT": 80.0}
FAST = ["--check", "pre-post", "--check", "change-score"]


# --------------------------------------------------------------------------- building studies


def toml_value(v) -> str:
    """A Python value written as TOML (enough of TOML for study.toml)."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, float):
        if v != v:
            return "nan"
        if abs(v) == float("inf"):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        escaped = v.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n").replace("\r", "\\r")
        return '"' + re.sub(r"[\x00-\x08\x0b-\x1f\x7f]", lambda m: f"\\u{ord(m.group()):04x}", escaped) + '"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(type(v))


def toml_text(meta: dict) -> str:
    """study.toml from a dict: plain sections, then one [[outcomes]] block per outcome."""
    out = []
    for section, body in meta.items():
        if section == "outcomes" and isinstance(body, list) and all(isinstance(o, dict) for o in body):
            for o in body:
                out.append("[[outcomes]]")
                out += [f"{k} = {toml_value(x)}" for k, x in o.items() if x is not None]
        elif isinstance(body, dict):
            out.append(f"[{section}]")
            out += [f"{k} = {toml_value(x)}" for k, x in body.items() if x is not None]
        elif body is not None:
            out.insert(0, f"{section} = {toml_value(body)}")
    return "\n".join(out) + "\n"


class Synthetic:
    """An invented two-arm study: a participant file and a long visit file, one row per participant,
    visit and parameter. Tests change the frames or ``meta`` and then ``write`` the folder."""

    def __init__(self, n_per_arm: int = 20, params=("SBP", "DBP"), arms=("Control", "Active"), seed: int = 7):
        rng = np.random.default_rng(seed)
        n = n_per_arm * len(arms)
        self.ids = [f"SYN-{i:04d}" for i in range(1, n + 1)]
        arm_of = [arms[i % len(arms)] for i in range(n)]
        self.adsl = pd.DataFrame({"USUBJID": self.ids, "TRT01P": arm_of, "AGE": rng.integers(30, 70, n),
                                  "EVTFL": rng.choice(["Y", "N"], n)})
        rows = []
        for p in params:
            centre = CENTRES[p]
            base = rng.normal(centre, centre / 10, n)
            for visit, number in VISITS:
                noise = rng.normal(0, centre / 20, n)
                value = base if number == 0 else 0.7 * base + 0.3 * centre + noise
                rows += [(self.ids[i], arm_of[i], p, f"{p} (units)", visit, number, round(float(value[i]), 2))
                         for i in range(n)]
        self.adeff = pd.DataFrame(rows, columns=["USUBJID", "TRTP", "PARAMCD", "PARAM", "AVISIT", "AVISITN", "AVAL"])
        self.meta = {
            "study": {"id": "SYN-01", "title": "Synthetic study", "design": "parallel", "arms": list(arms),
                      "control_arm": arms[0], "analysis_date": "2026-01-02", "seed": 11},
            "files": {"visits": "data/adeff.csv", "participants": "data/adsl.csv"},
            "columns": {"arm": "TRT01P"},
            "outcomes": [{"param": p, "label": f"{p} label", "scale": "continuous", "unit": "u",
                          "bounds": [0.0, 1000.0], "baseline_visit": "Baseline",
                          "followup_visits": ["Week 4", "Week 8"], "planned_analysis": "change"}
                         for p in params],
        }
        self.encoding = "utf-8"
        self.wide = False
        self.hooks = []

    def rows(self, param: str, visit: str | None = None) -> pd.Series:
        m = self.adeff["PARAMCD"] == param
        return m if visit is None else m & (self.adeff["AVISIT"] == visit)

    def outcome(self, param: str) -> dict:
        return next(o for o in self.meta["outcomes"] if o["param"] == param)

    def then(self, fn) -> None:
        """Run ``fn(folder)`` after the files are written (for damage done to the files themselves)."""
        self.hooks.append(fn)

    def write(self, folder: Path) -> Path:
        folder = Path(folder)
        (folder / "data").mkdir(parents=True, exist_ok=True)
        visits = self.adeff
        if self.wide:
            visits = self.adeff.pivot_table(index=["USUBJID", "TRTP"], columns=["PARAMCD", "AVISIT"], values="AVAL",
                                            aggfunc="first")
            visits.columns = [f"{p}_{v}" for p, v in visits.columns]
            visits = visits.reset_index()
        visits.to_csv(folder / "data" / "adeff.csv", index=False, encoding=self.encoding)
        self.adsl.to_csv(folder / "data" / "adsl.csv", index=False, encoding=self.encoding)
        (folder / "study.toml").write_text(toml_text(self.meta), encoding="utf-8")
        for fn in self.hooks:
            fn(folder)
        return folder


def data_row(index: int) -> str:
    """How a message names the frame row ``index`` of a written file (header = row 1)."""
    return f"row {index + 2}"


def edit_file(name: str, fn):
    """A hook that rewrites ``name`` (relative to the folder) through ``fn(text) -> text``."""
    def hook(folder: Path):
        p = folder / name
        p.write_text(fn(p.read_text(encoding="utf-8")), encoding="utf-8")
    return hook


def set_line(n: int, fn):
    """A text edit that replaces line ``n`` (0 = header) by ``fn(line)``."""
    def edit(text: str) -> str:
        lines = text.splitlines()
        lines[n] = fn(lines[n])
        return "\n".join(lines) + "\n"
    return edit


def _remove_visits(s):
    s.then(lambda f: (f / "data" / "adeff.csv").unlink())


def _folder_in_place(s):
    s.then(lambda f: ((f / "data" / "adsl.csv").unlink(), (f / "data" / "adsl.csv").mkdir()))


def _toml_folder(s):
    s.then(lambda f: ((f / "study.toml").unlink(), (f / "study.toml").mkdir()))


def _binary(s):
    s.then(lambda f: (f / "data" / "adeff.csv").write_bytes(bytes(range(256)) * 40))


def _xlsx(s):
    s.meta["files"]["visits"] = "data/adeff.xlsx"
    s.then(lambda f: (f / "data" / "adeff.xlsx").write_bytes(b"PK\x03\x04 not really a workbook"))


def _bad_parquet(s):
    s.meta["files"]["participants"] = "data/adsl.parquet"
    s.then(lambda f: (f / "data" / "adsl.parquet").write_bytes(b"PAR1 truncated"))


def _bad_xpt(s):
    s.meta["files"]["visits"] = "data/adeff.xpt"
    s.then(lambda f: (f / "data" / "adeff.xpt").write_bytes(b"HEADER RECORD*******" * 8))


def _delimiter(sep, decimal_comma=False):
    def edit(text):
        text = text.replace(",", sep)
        return text.replace(".", ",") if decimal_comma else text
    return lambda s: s.then(edit_file("data/adeff.csv", edit))


def _toml_edit(fn):
    return lambda s: s.then(edit_file("study.toml", fn))


def _latin1_toml(s):
    s.outcome("SBP")["label"] = "Blutdruck systolisch, Mäßig"
    s.then(lambda f: (f / "study.toml").write_bytes((f / "study.toml").read_text("utf-8").encode("latin-1")))


def _symlink_outside(s):
    def hook(folder):
        outside = folder.parent / "elsewhere.csv"
        (folder / "data" / "adsl.csv").rename(outside)
        os.symlink(outside, folder / "data" / "adsl.csv")
    s.then(hook)


def _symlinked_data_folder(s):
    def hook(folder):
        outside = folder.parent / "shared_data"
        (folder / "data").rename(outside)
        os.symlink(outside, folder / "data", target_is_directory=True)
    s.then(hook)


def _symlink_loop(s):
    s.meta["files"]["visits"] = "data/loop_a.csv"

    def hook(folder):
        os.symlink("loop_b.csv", folder / "data" / "loop_a.csv")
        os.symlink("loop_a.csv", folder / "data" / "loop_b.csv")
    s.then(hook)


def _set(frame: str, index, column: str, value):
    def mutate(s):
        df = getattr(s, frame)
        df[column] = df[column].astype(object)
        df.loc[index, column] = value
    return mutate


def _one_arm(s):
    s.adsl["TRT01P"] = "Control"
    s.adeff["TRTP"] = "Control"


def _one_participant_parallel(s):
    s.adsl = s.adsl.iloc[:1]
    s.adeff = s.adeff[s.adeff["USUBJID"] == s.ids[0]].reset_index(drop=True)


def _arm_is_identifier(s):
    s.meta["columns"]["arm"] = "USUBJID"


def _ordinal_half(s):
    o = s.outcome("DBP")
    o.update(scale="ordinal", levels=[0, 1, 2, 3, 4], bounds=None)
    m = s.rows("DBP")
    s.adeff.loc[m, "AVAL"] = np.resize([0, 1, 2, 3, 4], int(m.sum())).astype(float)
    first = s.adeff.index[s.rows("DBP", "Week 4")][0]
    s.adeff.loc[first, "AVAL"] = 1.5


def _binary_outcome_two(s):
    o = s.outcome("DBP")
    o.update(scale="binary", bounds=None)
    m = s.rows("DBP")
    s.adeff.loc[m, "AVAL"] = np.resize([0.0, 1.0], int(m.sum()))
    s.adeff.loc[s.adeff.index[m][5], "AVAL"] = 2.0


def _negative_with_open_bound(s):
    s.outcome("SBP")["bounds"] = [0.0, float("inf")]
    s.adeff.loc[2, "AVAL"] = -5.0


def _wide_duplicate(s):
    s.wide = True
    s.meta["files"]["layout"] = "wide"
    s.then(edit_file("data/adeff.csv", lambda t: t + t.splitlines()[1] + "\n"))


def _case_mismatch(s):
    s.adeff["USUBJID"] = s.adeff["USUBJID"].astype(object)
    s.adeff.loc[s.adeff["USUBJID"] == s.ids[3], "USUBJID"] = s.ids[3].lower()


def _endpoint_maybe(s):
    s.outcome("DBP")["risk_endpoint"] = "EVTFL"
    s.adsl["EVTFL"] = s.adsl["EVTFL"].astype(object)
    s.adsl.loc[4, "EVTFL"] = "maybe"


def _covariate_identifier(s):
    s.outcome("DBP")["covariates"] = ["USUBJID"]


def _covariate_text(s):
    s.outcome("DBP")["covariates"] = ["AGE"]
    _set("adsl", 6, "AGE", "fifty")(s)


def _covariate_infinite(s):
    s.outcome("DBP")["covariates"] = ["AGE"]
    _set("adsl", 2, "AGE", "-Infinity")(s)


def _outcome_key(param, **changes):
    return lambda s: s.outcome(param).update(changes)


def _study_key(**changes):
    return lambda s: s.meta["study"].update(changes)


def _files_key(**changes):
    return lambda s: s.meta["files"].update(changes)


def _unknown_section(s):
    s.meta["sudy"] = {"id": "X"}


ROW_AVAL_5 = data_row(3)
ERROR_CASES = [
    # files: missing, empty, unreadable, of the wrong kind
    ("visits-file-missing", _remove_visits, [r"study\.toml: files\.visits", "'data/adeff.csv' does not exist"]),
    ("visits-header-only", lambda s: s.then(edit_file("data/adeff.csv", lambda t: t.splitlines()[0] + "\n")),
     [r"data/adeff\.csv:", "header but no data rows"]),
    ("participants-blank-lines", lambda s: s.then(edit_file("data/adsl.csv", lambda t: "\n\n  \n")),
     [r"data/adsl\.csv:", "no header row"]),
    ("folder-in-place-of-file", _folder_in_place, [r"files\.participants", "is a folder, not a file"]),
    ("study-toml-is-a-folder", _toml_folder, [r"study\.toml:", "is a folder, not a file"]),
    ("binary-data-file", _binary, [r"data/adeff\.csv:", "not a text file"]),
    ("unsupported-extension", _xlsx, [r"data/adeff\.xlsx:", "unsupported type '.xlsx'"]),
    ("corrupt-parquet", _bad_parquet, [r"data/adsl\.parquet:", "cannot be parsed"]),
    ("corrupt-xpt", _bad_xpt, [r"data/adeff\.xpt:", "cannot be parsed"]),
    # delimiters and CSV structure
    ("tab-delimited", _delimiter("\t"), [r"data/adeff\.csv: row 1", "uses tabs"]),
    ("semicolons-decimal-commas", _delimiter(";", decimal_comma=True), [r"data/adeff\.csv: row 1", "semicolons"]),
    ("vertical-bars", _delimiter("|"), [r"data/adeff\.csv: row 1", "vertical bars"]),
    ("ragged-row", lambda s: s.then(edit_file("data/adeff.csv", set_line(4, lambda ln: ln + ",x,y"))),
     [r"data/adeff\.csv: row 5", "has 9 cells where the header has 7"]),
    ("unclosed-quote", lambda s: s.then(edit_file("data/adeff.csv", set_line(6, lambda ln: '"' + ln))),
     [r"data/adeff\.csv: row 7", "never closed"]),
    ("repeated-column-name", lambda s: s.then(edit_file("data/adsl.csv", set_line(0, lambda ln: ln.replace("EVTFL", "AGE")))),
     [r"data/adsl\.csv: row 1 column AGE", "appears more than once"]),
    # study.toml syntax and encoding
    ("toml-unclosed-table", _toml_edit(lambda t: t.replace("[files]", "[files")), [r"study\.toml: line \d+", "not valid TOML"]),
    ("toml-duplicate-key", _toml_edit(lambda t: t.replace('id = "SYN-01"', 'id = "SYN-01"\nid = "again"')),
     [r"study\.toml: line 3", "not valid TOML"]),
    ("toml-latin1", _latin1_toml, [r"study\.toml:", "not UTF-8"]),
    ("toml-nested-too-deep", _toml_edit(lambda t: t.replace("[study]", "[study]\ndeep = " + "[" * 3000 + "]" * 3000)),
     [r"study\.toml:", "too deeply"]),
    ("toml-empty", _toml_edit(lambda t: ""), [r"study\.toml: study", "Field required", "add this key"]),
    # unknown keys
    ("unknown-section", _unknown_section, [r"study\.toml: sudy", "did you mean 'study'"]),
    ("unknown-files-key", _files_key(visit="data/adeff.csv"), [r"files\.visit ", "did you mean 'visits'"]),
    ("unknown-columns-key", lambda s: s.meta["columns"].update(subjet="USUBJID"),
     [r"columns\.subjet", "did you mean 'subject'"]),
    # wrong types and values
    ("seed-as-text", _study_key(seed="123"), [r"study\.seed", "valid integer"]),
    ("followup-not-a-list", _outcome_key("DBP", followup_visits="Week 8"), [r"outcomes\[1\]\.followup_visits", "valid list"]),
    ("visit-is-boolean", _outcome_key("SBP", baseline_visit=True), [r"outcomes\[0\]\.baseline_visit", "not True"]),
    ("bounds-as-text", _outcome_key("SBP", bounds=["0", "10"]), [r"outcomes\[0\]\.bounds\[0\]", "a bound is a number"]),
    ("bounds-nan", _outcome_key("SBP", bounds=[float("nan"), 10.0]), [r"outcomes\[0\]\.bounds\[0\]", "not nan"]),
    ("entry-value-nan", _outcome_key("SBP", entry_criterion={"visit": "Baseline", "operator": ">=", "value": float("nan")}),
     [r"outcomes\[0\]\.entry_criterion\.value", "finite number"]),
    ("arms-as-text", _study_key(arms="Control"), [r"study\.arms", "valid list"]),
    ("label-too-long", _outcome_key("DBP", label="L" * 2001), [r"outcomes\[1\]\.label", "at most 2000 characters"]),
    ("arm-name-too-long", _study_key(arms=["Control", "A" * 201]), [r"study\.arms\[1\]", "at most 200 characters"]),
    ("wide-pattern-reaches-attributes", _files_key(layout="wide", wide_pattern="{param.__class__}_{visit}"),
     [r"files\.wide_pattern", r"\{param\} and \{visit\} once each"]),
    ("wide-pattern-unknown-field", _files_key(layout="wide", wide_pattern="{param}_{visit}_{arm}"),
     [r"files\.wide_pattern", r"no other \{\.\.\.\} field"]),
    ("followup-repeated", _outcome_key("SBP", followup_visits=["Week 8", "Week 8"]),
     [r"outcomes\[0\]", "more than once"]),
    ("baseline-also-followup", _outcome_key("SBP", followup_visits=["Baseline", "Week 8"]),
     [r"outcomes\[0\]", "baseline visit is also listed"]),
    ("column-map-empty", lambda s: s.meta["columns"].update(arm=""), [r"columns\.arm", "at least 1 character"]),
    # paths that leave the folder
    ("nested-escape", _files_key(visits="data/../../elsewhere/adeff.csv"), [r"files\.visits", "leaves the study folder"]),
    ("absolute-participants", _files_key(participants="/etc/hostname"), [r"files\.participants", "is absolute"]),
    ("windows-drive", _files_key(visits="C:\\trial\\adeff.csv"), [r"files\.visits", "is absolute"]),
    ("control-character-in-path", _files_key(visits="data/\x00adeff.csv"), [r"files\.visits", "control character"]),
    ("symlink-file-outside", _symlink_outside, [r"files\.participants", "leaves the study folder"]),
    ("symlink-folder-outside", _symlinked_data_folder, [r"files\.visits", "leaves the study folder"]),
    ("symlink-loop", _symlink_loop, [r"files\.visits", "cannot be resolved"]),
    # rows and identifiers
    ("participant-twice", lambda s: setattr(s, "adsl", pd.concat([s.adsl, s.adsl.iloc[[2]]], ignore_index=True)),
     [r"data/adsl\.csv: rows 4, 42 column USUBJID", "more than one row"]),
    ("wide-row-repeated", _wide_duplicate, [r"data/adeff\.csv: rows 2, 42", "more than one value"]),
    ("identifier-case-differs", _case_mismatch, [r"data/adeff\.csv: rows 5, 45", "not in the participant file"]),
    ("identifier-na-text", _set("adsl", 0, "USUBJID", "NA"),
     [r"data/adsl\.csv: row 2 column USUBJID", "missing-value text 'NA'"]),
    ("identifier-empty", _set("adsl", 1, "USUBJID", ""), [r"data/adsl\.csv: row 3 column USUBJID", "identifier is empty"]),
    # values
    ("value-nan-text", _set("adeff", 3, "AVAL", "NaN"), [rf"data/adeff\.csv: {ROW_AVAL_5} column AVAL", "the text 'NaN'"]),
    ("value-infinite", _set("adeff", 3, "AVAL", "inf"), [rf"data/adeff\.csv: {ROW_AVAL_5} column AVAL", "infinite"]),
    ("value-overflows", _set("adeff", 3, "AVAL", "1e999"), [rf"data/adeff\.csv: {ROW_AVAL_5} column AVAL", "infinite"]),
    ("value-formula-text", _set("adeff", 3, "AVAL", "=1+1"), [rf"{ROW_AVAL_5} column AVAL", "not a number"]),
    ("below-open-bound", _negative_with_open_bound,
     [r"data/adeff\.csv: row 4 column AVAL", r"outside its declared bounds \[0\.0, inf\]"]),
    ("ordinal-half-level", _ordinal_half, [r"data/adeff\.csv: row 162 column AVAL", "1.5 is not one of the declared levels"]),
    ("binary-outcome-two", _binary_outcome_two, [r"data/adeff\.csv: row 127 column AVAL", "other than 0 or 1"]),
    ("endpoint-not-binary", _endpoint_maybe, [r"data/adsl\.csv: row 6 column EVTFL", "not binary"]),
    ("covariate-is-identifier", _covariate_identifier, [r"outcomes\[1\]\.covariates column USUBJID", "identifier"]),
    ("covariate-text", _covariate_text, [r"data/adsl\.csv: row 8 column AGE", "not a number"]),
    ("covariate-infinite", _covariate_infinite, [r"data/adsl\.csv: row 4 column AGE", "infinite"]),
    # arms
    ("single-arm-in-parallel-data", _one_arm, [r"data/adsl\.csv: column TRT01P", "every participant is in arm 'Control'"]),
    ("one-participant-parallel", _one_participant_parallel, [r"column TRT01P", "at least two arms"]),
    ("arm-label-with-newline", _set("adsl", 0, "TRT01P", "Con\ntrol"),
     [r"data/adsl\.csv: row 2 column TRT01P", r"arm 'Con\\ntrol' is not in study\.arms"]),
    ("arm-column-holds-identifiers", _arm_is_identifier, [r"column USUBJID: 35 more arm labels", r"\(40 in all\)"]),
    ("arm-empty", _set("adsl", 5, "TRT01P", ""), [r"data/adsl\.csv: row 7 column TRT01P", "arm is empty"]),
]


def _problem_lines(text: str) -> list[str]:
    """The problem lines of a failed command, checked to be one line each: the header line gives
    their number, and exactly that many lines follow it."""
    lines = text.splitlines()
    head = next(i for i, ln in enumerate(lines) if "problem(s) in the study folder" in ln)
    count = int(lines[head].split()[0])
    problems = [ln for ln in lines[head + 1:] if ln.strip() and not ln.startswith("warning:")]
    assert len(problems) == count, text
    return problems


def assert_clean_failure(res, patterns) -> None:
    text = _stderr(res)
    assert res.exit_code == 2, (res.exit_code, text, res.exception)
    assert "Traceback" not in text
    problems = _problem_lines(text)
    for ln in problems:
        assert re.match(r"^\S.*?: .*\. Fix: .+\.$", ln), ln
    joined = "\n".join(problems)
    for pat in patterns:
        assert re.search(pat, joined), f"{pat!r} not in:\n{joined}"


def assert_nothing_written(parent: Path, target: Path) -> None:
    assert not target.exists()
    assert not [p for p in parent.iterdir() if ".partial-" in p.name or ".old-" in p.name]


@pytest.mark.parametrize("name,breaker,patterns", ERROR_CASES, ids=[c[0] for c in ERROR_CASES])
def test_broken_folder_fails_cleanly(tmp_path, name, breaker, patterns):
    s = Synthetic()
    breaker(s)
    folder = s.write(tmp_path / "study")
    assert_clean_failure(runner.invoke(app, ["validate", str(folder)]), patterns)
    out = tmp_path / "audit"
    assert_clean_failure(runner.invoke(app, ["run", str(folder), "-o", str(out), *FAST]), patterns)
    assert_nothing_written(tmp_path, out)


def test_corpus_is_large_and_new():
    """At least 50 hostile folders here, none named like the earlier broken-variant cases."""
    from tests.cli.test_validate_broken import CASES

    assert len(ERROR_CASES) + len(SUCCESS_CASES) + len(NOT_ASSESSABLE_CASES) >= 50
    assert not {c[0] for c in ERROR_CASES} & {c[0] for c in CASES}


@pytest.mark.skipif(os.geteuid() == 0, reason="root reads files whatever their mode; see the simulated case")
def test_unreadable_file_mode_000(tmp_path):
    folder = Synthetic().write(tmp_path / "study")
    target = folder / "data" / "adsl.csv"
    target.chmod(0)
    try:
        res = runner.invoke(app, ["validate", str(folder)])
    finally:
        target.chmod(0o644)
    assert_clean_failure(res, [r"data/adsl\.csv:", "permission denied"])


def test_unreadable_file_simulated(tmp_path, monkeypatch):
    """Runs as root too: the read itself is refused, as chmod 000 would for anyone else."""
    folder = Synthetic().write(tmp_path / "study")
    refused = (folder / "data" / "adsl.csv").resolve()
    real = Path.read_bytes

    def read_bytes(self):
        if self.resolve() == refused:
            raise PermissionError(13, "Permission denied", str(self))
        return real(self)

    monkeypatch.setattr(Path, "read_bytes", read_bytes)
    assert_clean_failure(runner.invoke(app, ["validate", str(folder)]), [r"data/adsl\.csv:", "permission denied"])
    out = tmp_path / "audit"
    assert_clean_failure(runner.invoke(app, ["run", str(folder), "-o", str(out)]), ["permission denied"])
    assert_nothing_written(tmp_path, out)


def test_internal_error_exit_1_traceback_only_with_debug(tmp_path, monkeypatch):
    folder = Synthetic().write(tmp_path / "study")

    def broken(_folder):
        raise RuntimeError("a defect")

    monkeypatch.setattr("auditor.study.load_study", broken)
    res = runner.invoke(app, ["validate", str(folder)])
    assert res.exit_code == 1 and "Traceback" not in _stderr(res)
    assert "internal error: RuntimeError: a defect" in _stderr(res)
    res = runner.invoke(app, ["--debug", "validate", str(folder)])
    assert res.exit_code == 1 and "Traceback" in _stderr(res)


# --------------------------------------------------------------------------- read correctly


def _bom(s):
    s.encoding = "utf-8-sig"


def _latin1(s):
    s.encoding = "latin-1"
    s.adeff["PARAMCD"] = s.adeff["PARAMCD"].replace({"DBP": "Hämoglobin"})
    s.meta["outcomes"][1].update(param="Hämoglobin", label="Hämoglobin im Vollblut")
    s.adsl["TRT01P"] = s.adsl["TRT01P"].replace({"Active": "Wirkstoff Ä"})
    s.adeff["TRTP"] = s.adeff["TRTP"].replace({"Active": "Wirkstoff Ä"})
    s.meta["study"]["arms"] = ["Control", "Wirkstoff Ä"]


def _utf16(s):
    s.encoding = "utf-16"


def _symlink_inside(s):
    def hook(folder):
        (folder / "data" / "adsl.csv").rename(folder / "adsl_master.csv")
        os.symlink("../adsl_master.csv", folder / "data" / "adsl.csv")
    s.then(hook)


def _visit_numbers_as_decimals(s):
    s.adeff = s.adeff.drop(columns="AVISIT").assign(AVISITN=s.adeff["AVISITN"].astype(float))
    for o in s.meta["outcomes"]:
        o.update(baseline_visit=0, followup_visits=[4, 8])


def _participant_without_visits(s):
    extra = pd.DataFrame({"USUBJID": ["SYN-9999"], "TRT01P": ["Active"], "AGE": [40], "EVTFL": ["N"]})
    s.adsl = pd.concat([s.adsl, extra], ignore_index=True)


SUCCESS_CASES = [
    ("utf8-byte-order-mark", _bom, None),
    ("latin1-data", _latin1, None),
    ("utf16-data", _utf16, None),
    ("symlink-inside-folder", _symlink_inside, None),
    ("visit-numbers-written-4.0", _visit_numbers_as_decimals, None),
    ("participant-without-visit-data", _participant_without_visits, "1 participant(s) have no visit data"),
]


@pytest.mark.parametrize("name,changer,expect", SUCCESS_CASES, ids=[c[0] for c in SUCCESS_CASES])
def test_unusual_but_valid_folder_is_read(tmp_path, name, changer, expect):
    s = Synthetic()
    changer(s)
    folder = s.write(tmp_path / "study")
    res = runner.invoke(app, ["validate", str(folder)])
    assert res.exit_code == 0, _stderr(res)
    assert "valid (2 outcome(s)" in res.output
    if expect:
        assert expect in res.output + _stderr(res)


def test_latin1_labels_survive_into_the_audit(tmp_path):
    s = Synthetic()
    _latin1(s)
    study = load_study(s.write(tmp_path / "study"))
    assert "Hämoglobin" in set(study.visits["param"])
    assert "Wirkstoff Ä" in set(study.participants["arm"])
    audit = audit_study(study, AuditOptions(checks=("pre-post",), quick=True))
    assert [r.outcome for r in audit.results] == ["SBP", "Hämoglobin"]
    html = report_html(audit)
    assert "Hämoglobin im Vollblut" in html and "Wirkstoff Ä" in html


# --------------------------------------------------------------------------- confined to one outcome


def _constant_followup(s):
    s.adeff.loc[s.rows("DBP", "Week 8"), "AVAL"] = 80.0


def _all_followup_missing(s):
    s.adeff.loc[s.rows("DBP", "Week 8"), "AVAL"] = np.nan


def _three_with_followup(s):
    idx = s.adeff.index[s.rows("DBP", "Week 8")]
    s.adeff.loc[idx[3:], "AVAL"] = np.nan


def _followup_equals_baseline(s):
    base = s.adeff.loc[s.rows("DBP", "Baseline"), "AVAL"].to_numpy()
    for visit in ("Week 4", "Week 8"):
        s.adeff.loc[s.rows("DBP", visit), "AVAL"] = base


def _one_active_with_followup(s):
    active = s.adsl.loc[s.adsl["TRT01P"] == "Active", "USUBJID"].iloc[1:]
    s.adeff.loc[s.rows("DBP", "Week 8") & s.adeff["USUBJID"].isin(active), "AVAL"] = np.nan


def _baseline_collinear_with_arm(s):
    m = s.rows("DBP", "Baseline")
    s.adeff.loc[m, "AVAL"] = np.where(s.adeff.loc[m, "TRTP"] == "Active", 95.0, 85.0)


def _constant_baseline(s):
    s.adeff.loc[s.rows("DBP", "Baseline"), "AVAL"] = 88.0


NOT_ASSESSABLE_CASES = [
    ("constant-outcome", _constant_followup, "follow-up value is the same for every participant"),
    ("all-followup-missing", _all_followup_missing, "only 0 participants have both"),
    ("three-participants-with-followup", _three_with_followup, "of the 3 participants with a baseline and a follow-up"),
    ("followup-equals-baseline", _followup_equals_baseline, "equals the baseline value for all 40"),
    ("arm-with-one-participant", _one_active_with_followup, "arm 'Active' has 1 of the 21 participants"),
    ("singular-design", _baseline_collinear_with_arm, "design matrix is singular"),
    ("constant-baseline", _constant_baseline, "baseline value is the same for every participant"),
]


@pytest.mark.parametrize("name,damage,reason", NOT_ASSESSABLE_CASES, ids=[c[0] for c in NOT_ASSESSABLE_CASES])
def test_damaged_outcome_is_not_assessable_and_the_rest_completes(tmp_path, name, damage, reason):
    s = Synthetic()
    damage(s)
    study = load_study(s.write(tmp_path / "study"))
    audit = audit_study(study, AuditOptions(checks=("pre-post", "change-score"), quick=True))
    damaged = [r for r in audit.results if r.outcome == "DBP"]
    healthy = [r for r in audit.results if r.outcome == "SBP"]
    assert len(damaged) == 2 and len(healthy) == 2
    for r in damaged:
        assert r.verdict.value == "not assessable", (r.check_id, r.headline)
        assert reason in r.reason and "\n" not in r.reason
    assert all(r.verdict.value != "not assessable" and r.estimates for r in healthy)


def test_separation_in_a_risk_model_is_not_assessable(tmp_path):
    s = Synthetic()
    s.outcome("DBP")["risk_endpoint"] = "EVTFL"
    base = s.adeff[s.rows("DBP", "Baseline")].set_index("USUBJID")["AVAL"]
    s.adsl["EVTFL"] = np.where(s.adsl["USUBJID"].map(base) > base.median(), "Y", "N")
    audit = audit_study(load_study(s.write(tmp_path / "study")), AuditOptions(checks=("later-risk", "pre-post"), quick=True))
    risk = next(r for r in audit.results if r.check_id == "later-risk")
    assert risk.verdict.value == "not assessable" and "perfectly predicted" in risk.reason
    assert all(r.verdict.value != "not assessable" for r in audit.results if r.check_id == "pre-post")


def test_one_participant_single_arm_study_audits_to_not_assessable(tmp_path):
    s = Synthetic()
    s.adsl = s.adsl.iloc[:1]
    s.adeff = s.adeff[s.adeff["USUBJID"] == s.ids[0]].reset_index(drop=True)
    s.meta["study"] = {"id": "ONE", "design": "single-arm", "analysis_date": "2026-01-02"}
    audit = audit_study(load_study(s.write(tmp_path / "study")), AuditOptions(checks=("pre-post",), quick=True))
    assert len(audit.results) == 2
    assert all(r.verdict.value == "not assessable" and "only 1 participants" in r.reason for r in audit.results)


def _flaky_pre_post(monkeypatch, exc: BaseException) -> None:
    """Make the pre-post check raise ``exc`` on outcome DBP only."""
    check = registry.get_check("pre-post")
    original = check.run

    def flaky(data, ctx):
        if data.spec.param == "DBP":
            raise exc
        return original(data, ctx)

    monkeypatch.setitem(registry._REGISTRY, "pre-post", dataclasses.replace(check, run=flaky))


def test_a_library_failure_inside_a_check_is_confined_and_worded_for_the_user(tmp_path, monkeypatch):
    """A numerical failure raised by a library becomes that check's "not assessable" finding, with a
    reason in the user's terms rather than the library's exception text."""
    _flaky_pre_post(monkeypatch, np.linalg.LinAlgError("SVD did not converge in Linear Least Squares"))
    audit = audit_study(load_study(Synthetic().write(tmp_path / "study")), AuditOptions(checks=("pre-post",), quick=True))
    by = {r.outcome: r for r in audit.results}
    assert by["DBP"].verdict.value == "not assessable"
    assert "singular or ill-conditioned" in by["DBP"].reason and "SVD" not in by["DBP"].reason
    assert by["SBP"].verdict.value not in ("not assessable", "tool defect")


@pytest.mark.parametrize("exc", [AttributeError("'NoneType' object has no attribute 'x'\nsecond line"),
                                 KeyError("baseline"), TypeError("unsupported operand"), IndexError("out of range")],
                         ids=lambda e: type(e).__name__)
def test_a_defect_inside_a_check_is_a_tool_defect_not_a_data_limitation(tmp_path, monkeypatch, exc):
    _flaky_pre_post(monkeypatch, exc)
    folder = Synthetic().write(tmp_path / "study")
    monkeypatch.setenv("AUDITOR_STRICT", "0")
    audit = audit_study(load_study(folder), AuditOptions(checks=("pre-post",), quick=True))
    by = {r.outcome: r for r in audit.results}
    assert by["DBP"].verdict.value == "tool defect"
    assert type(exc).__name__ in by["DBP"].reason and "\n" not in by["DBP"].reason
    assert "says nothing about the data" in by["DBP"].headline
    assert by["SBP"].verdict.value not in ("not assessable", "tool defect")
    from auditor.failures import ToolDefect

    with pytest.raises(ToolDefect, match=type(exc).__name__):
        audit_study(load_study(folder), AuditOptions(checks=("pre-post",), quick=True, strict=True))


def test_run_reports_a_defect_on_the_terminal_and_strict_exits_1(tmp_path, monkeypatch):
    _flaky_pre_post(monkeypatch, KeyError("baseline"))
    monkeypatch.setenv("AUDITOR_STRICT", "0")
    folder = Synthetic().write(tmp_path / "study")
    res = runner.invoke(app, ["run", str(folder), "-o", str(tmp_path / "a"), "--check", "pre-post"])
    assert res.exit_code == 0 and "defect in auditor" in _stderr(res)
    res = runner.invoke(app, ["run", str(folder), "-o", str(tmp_path / "b"), "--check", "pre-post", "--strict"])
    assert res.exit_code == 1 and "Traceback" not in _stderr(res)
    assert not (tmp_path / "b").exists()


def test_a_figure_that_fails_to_draw_is_recorded_in_the_result(tmp_path, monkeypatch):
    import auditor.figures as figures

    monkeypatch.setenv("AUDITOR_STRICT", "0")
    real = figures.to_png
    monkeypatch.setattr(figures, "to_png", lambda f: (_ for _ in ()).throw(KeyError("x")) if f.kind else real(f))
    audit = audit_study(load_study(Synthetic().write(tmp_path / "study")), AuditOptions(checks=("pre-post",), quick=True))
    drawn = [f for r in audit.results for f in r.figures]
    assert drawn and all("defect in auditor" in f.problem for f in drawn)
    assert all(any("could not be drawn" in c for c in r.caveats) for r in audit.results if r.figures)
    assert "could not be drawn: a defect in auditor" in report_html(audit)
    assert all("svg" not in f and "png" not in f for r in json.loads(findings_json(audit))["results"]
               for f in r["figures"])


def test_run_completes_with_damaged_outcomes_end_to_end(tmp_path):
    """One ``auditor run`` over a study in which four of five outcomes are damaged in different
    ways: exit 0, all four files, each damaged outcome not assessable with its reason."""
    s = Synthetic(params=("SBP", "DBP", "HR", "RR", "TEMP"))
    s.adeff.loc[s.rows("DBP", "Week 8"), "AVAL"] = 80.0
    s.adeff.loc[s.rows("HR", "Week 8"), "AVAL"] = np.nan
    base = s.adeff.loc[s.rows("RR", "Baseline"), "AVAL"].to_numpy()
    for visit in ("Week 4", "Week 8"):
        s.adeff.loc[s.rows("RR", visit), "AVAL"] = base
    active = s.adsl.loc[s.adsl["TRT01P"] == "Active", "USUBJID"].iloc[1:]
    s.adeff.loc[s.rows("TEMP", "Week 8") & s.adeff["USUBJID"].isin(active), "AVAL"] = np.nan
    out = tmp_path / "audit"
    res = runner.invoke(app, ["run", str(s.write(tmp_path / "study")), "-o", str(out), *FAST])
    assert res.exit_code == 0, _stderr(res)
    assert sorted(p.name for p in out.iterdir()) == ["audit.html", "audit.pdf", "findings.csv", "findings.json"]
    rows = list(csv.DictReader(io.StringIO((out / "findings.csv").read_text())))
    verdicts = {(r["outcome"], r["check_id"]): (r["verdict"], r["reason"]) for r in rows}
    expected = {"DBP": "same for every participant", "HR": "only 0 participants", "RR": "equals the baseline",
                "TEMP": "arm 'Active' has 1 of the 21 participants"}
    for param, reason in expected.items():
        for check in ("pre-post", "change-score"):
            verdict, why = verdicts[(param, check)]
            assert verdict == "not assessable" and reason in why, (param, check, why)
    assert all(verdicts[("SBP", c)][0] != "not assessable" for c in ("pre-post", "change-score"))


# --------------------------------------------------------------------------- a million rows


def test_a_million_rows_validate_in_reasonable_time_and_memory(tmp_path):
    """1,000,000 visit rows of one parameter (250,000 participants x 4 visits), validated in a fresh
    process so that its peak memory can be measured. Seen on a shared 2-core machine: 8 to 16 s and
    0.5 to 0.65 GB; the limits below leave room for a loaded CI runner."""
    folder = tmp_path / "big"
    (folder / "data").mkdir(parents=True)
    n, rng = 250_000, np.random.default_rng(3)
    ids = np.char.add("BIG-", np.arange(n).astype(str))
    visits = np.array(["Baseline", "Week 4", "Week 8", "Week 12"])
    pd.DataFrame({"USUBJID": np.repeat(ids, 4), "PARAMCD": "HB", "AVISIT": np.tile(visits, n),
                  "AVAL": np.round(rng.normal(13, 1.5, 4 * n), 1)}).to_csv(folder / "data" / "adeff.csv", index=False)
    pd.DataFrame({"USUBJID": ids, "TRT01P": np.where(np.arange(n) % 2, "Active", "Control")}).to_csv(
        folder / "data" / "adsl.csv", index=False)
    meta = {"study": {"id": "BIG", "arms": ["Control", "Active"], "control_arm": "Control"},
            "files": {"visits": "data/adeff.csv", "participants": "data/adsl.csv"}, "columns": {"arm": "TRT01P"},
            "outcomes": [{"param": "HB", "scale": "continuous", "bounds": [0.0, 30.0], "baseline_visit": "Baseline",
                          "followup_visits": ["Week 4", "Week 12"], "planned_analysis": "change"}]}
    (folder / "study.toml").write_text(toml_text(meta))
    child = ("import resource, sys\nfrom auditor.cli import app\ntry:\n    app(['validate', sys.argv[1]])\n"
             "except SystemExit as exc:\n    code = exc.code\n"
             "print('MAXRSS_KB', resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, file=sys.stderr)\n"
             "sys.exit(code)\n")
    t0 = time.monotonic()
    proc = subprocess.run([sys.executable, "-c", child, str(folder)], capture_output=True, text=True, timeout=120)
    seconds = time.monotonic() - t0
    assert proc.returncode == 0, proc.stderr
    assert "1000000 visit rows" in proc.stdout
    peak_mb = int(re.search(r"MAXRSS_KB (\d+)", proc.stderr).group(1)) / 1024
    print(f"million-row validate: {seconds:.1f} s, peak {peak_mb:.0f} MB")
    assert seconds < 60, seconds
    assert peak_mb < 1500, peak_mb


# --------------------------------------------------------------------------- rendering safety


def test_autoescaping_is_on_for_every_template():
    env = environment()
    assert env.autoescape is True
    assert env.from_string("{{ x }}").render(x="<b>") == "&lt;b&gt;"
    folder = Path(env.loader.searchpath[0])
    templates = sorted(folder.rglob("*.j2"))
    assert {"report.html.j2", "batch_index.html.j2", "compare.html.j2"} <= {p.name for p in templates}
    for p in templates:
        text = p.read_text()
        assert not re.search(r"autoescape\s+false", text, re.I), p
        assert set(re.findall(r"\{\{\s*([^}]*?)\s*\|\s*safe", text)) <= {"css"}, p


HOSTILE = '<script>alert("x")</script><img src="file:///etc/passwd">'


def test_batch_index_and_comparison_escape_hostile_text():
    from auditor.batch import StudyOutcome, index_view
    from auditor.compare import Comparison, comparison_view

    ok = StudyOutcome("f", HOSTILE, "ok", study_id=HOSTILE, n_outcomes=1,
                      rows=[{"outcome": HOSTILE, "check_id": "pre-post", "verdict": "sound", "headline": HOSTILE}])
    failed = StudyOutcome("g", "g", "failed", error=HOSTILE)
    html = render_view("batch_index.html.j2", {**index_view([ok, failed], {}), "cautions": [HOSTILE]})
    cmp = Comparison(HOSTILE, HOSTILE + "2", outcomes_added=[HOSTILE], verdicts_moved=[(HOSTILE, "c", "a", "b")])
    html += render_view("compare.html.j2", comparison_view(cmp))
    assert "<script>" not in html and '<img src="file:' not in html
    assert "&lt;script&gt;" in html


def _audit_with_labels(tmp_path, label: str, arm: str, checks=("pre-post",)):
    s = Synthetic()
    s.outcome("DBP")["label"] = label
    s.adsl["TRT01P"] = s.adsl["TRT01P"].replace({"Active": arm})
    s.adeff["TRTP"] = s.adeff["TRTP"].replace({"Active": arm})
    s.meta["study"]["arms"] = ["Control", arm]
    return audit_study(load_study(s.write(tmp_path / "study")), AuditOptions(checks=checks, quick=True))


def test_script_in_a_label_is_printed_as_text(tmp_path):
    html = report_html(_audit_with_labels(tmp_path, "<script>alert(1)</script>", "<b onmouseover=x>Active</b>"))
    assert "<script>alert(1)</script>" not in html and "<b onmouseover" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "&lt;b onmouseover=x&gt;Active&lt;/b&gt;" in html


SMUGGLED = ['file:///etc/passwd', 'http://127.0.0.1:9/x.png']


def recording_fetcher():
    """The report's own fetcher, which also records in ``seen`` every URL asked of it."""
    from auditor.render.pdf import make_fetcher

    fetcher = make_fetcher()
    fetcher.seen = []
    refuse_or_serve = fetcher.fetch

    def fetch(url, headers=None):
        fetcher.seen.append(url)
        return refuse_or_serve(url, headers)

    fetcher.fetch = fetch
    return fetcher


@pytest.fixture
def no_outside_access(monkeypatch):
    """Every socket connection and every URL opened below the fetcher is recorded (and refused)."""
    attempts = []

    def connect(self, address):
        attempts.append(("socket", address))
        raise OSError("network access refused in this test")

    real_open = urllib.request.OpenerDirector.open

    def opener_open(self, req, *args, **kwargs):
        url = req if isinstance(req, str) else req.full_url
        if not url.startswith("data:"):
            attempts.append(("url", url))
        return real_open(self, req, *args, **kwargs)

    monkeypatch.setattr(socket.socket, "connect", connect)
    monkeypatch.setattr(urllib.request.OpenerDirector, "open", opener_open)
    return attempts


def test_pdf_fetcher_refuses_file_and_network_urls(no_outside_access):
    from auditor.render.pdf import html_to_pdf

    fetcher = recording_fetcher()
    raw = "<html><body><p>x</p>" + "".join(f'<img src="{u}">' for u in SMUGGLED) + "</body></html>"
    pdf = html_to_pdf(raw, fetcher=fetcher)
    assert pdf.startswith(b"%PDF-")
    assert sorted(fetcher.refused) == sorted(SMUGGLED)
    assert no_outside_access == []


def test_urls_smuggled_through_labels_are_never_requested(tmp_path, no_outside_access):
    from auditor.render.pdf import html_to_pdf

    tags = "".join(f'<img src="{u}">' for u in SMUGGLED)
    audit = _audit_with_labels(tmp_path, "Label " + tags, "Arm " + tags[:150])
    html = report_html(audit)
    assert "<img src=\"file:" not in html and "<img src=\"http:" not in html
    fetcher = recording_fetcher()
    assert html_to_pdf(html, fetcher=fetcher).startswith(b"%PDF-")
    assert fetcher.refused == []
    assert fetcher.seen and all(u.startswith("data:") for u in fetcher.seen)
    assert no_outside_access == []


def test_a_2000_character_label_stays_on_the_page(tmp_path):
    """The longest label the schema accepts, one unbroken word, wraps inside the page width."""
    import weasyprint

    audit = _audit_with_labels(tmp_path, "L" * 2000, "Active")
    doc = weasyprint.HTML(string=report_html(audit), base_url="about:blank").render()

    def boxes(box):
        yield box
        for child in getattr(box, "children", None) or []:
            yield from boxes(child)

    overflow = max(b.position_x + b.width - page.width for page in doc.pages for b in boxes(page._page_box)
                   if getattr(b, "width", None) is not None and hasattr(b, "position_x"))
    assert overflow <= 1, overflow


FORMULAS = ["=HYPERLINK(\"http://x\")", "+1+1", "-2+3", "@SUM(A1)"]


def test_formula_prefixes_are_neutralised_in_csv_outputs(tmp_path):
    from auditor.batch import audit_one, summary_csv

    s = Synthetic()
    s.meta["study"]["id"] = FORMULAS[0]
    s.adeff["PARAMCD"] = s.adeff["PARAMCD"].replace({"DBP": FORMULAS[1]})
    s.meta["outcomes"][1].update(param=FORMULAS[1], label=FORMULAS[2])
    s.meta["outcomes"][0]["label"] = FORMULAS[3]
    s.adsl["TRT01P"] = s.adsl["TRT01P"].replace({"Active": "=cmd|'/C calc'!A0"})
    s.adeff["TRTP"] = s.adeff["TRTP"].replace({"Active": "=cmd|'/C calc'!A0"})
    s.meta["study"]["arms"] = ["Control", "=cmd|'/C calc'!A0"]
    folder = s.write(tmp_path / "study")
    audit = audit_study(load_study(folder), AuditOptions(checks=("pre-post",), quick=True))
    findings = list(csv.reader(io.StringIO(findings_csv(audit))))
    outcome = audit_one((str(folder), "study", str(tmp_path / "batch" / "study"),
                         {"checks": ("pre-post",), "quick": True}, "A4", False))
    assert outcome.status == "ok", outcome.error
    summary = list(csv.reader(io.StringIO(summary_csv([outcome]))))
    for table in (findings, summary):
        cells = [c for row in table[1:] for c in row]
        assert not [c for c in cells if c[:1] in ("=", "+", "-", "@")], table
    flat = {c for row in findings[1:] for c in row}
    assert {"'" + FORMULAS[0], "'" + FORMULAS[1], "'" + FORMULAS[2], "'" + FORMULAS[3]} <= flat
    assert {"'" + FORMULAS[0], "'" + FORMULAS[1]} <= {c for row in summary[1:] for c in row}


# --------------------------------------------------------------------------- privacy


def test_participant_identifiers_appear_in_no_output(example_audit):
    """No option asks for identifiers yet, so none may appear. audit.pdf is rendered from the very
    HTML checked here (render.output.render_all), so checking the HTML covers the PDF's text."""
    from tests.conftest import EXAMPLE

    ids = set(pd.read_csv(EXAMPLE / "data" / "adsl.csv", dtype=str)["USUBJID"])
    ids |= set(pd.read_csv(EXAMPLE / "data" / "adeff.csv", dtype=str, usecols=["USUBJID"])["USUBJID"])
    assert len(ids) == 320
    outputs = {"audit.html": report_html(example_audit), "findings.json": findings_json(example_audit),
               "findings.csv": findings_csv(example_audit)}
    for name, text in outputs.items():
        leaked = sorted(i for i in ids if i in text)
        assert not leaked, (name, leaked[:3])


# --------------------------------------------------------------------------- property-based


CELLS = st.sampled_from(["", " ", "NaN", "nan", "NA", ".", "inf", "-inf", "1e999", "=1+1", "+1", "-1", "@x",
                         "a,b", 'q"uote', "line\nbreak", "Hämoglobin", "0x10", "1_000", "\x00", "9" * 400,
                         "Control", "Active", "Baseline", "Week 4", "SBP", "0", "1", "2.5", "-0"])
VALUES = st.one_of(
    st.none(), st.booleans(), st.integers(-5, 10**12), st.floats(allow_nan=True, allow_infinity=True),
    CELLS, st.lists(st.one_of(st.integers(-3, 9), CELLS, st.floats(-5, 5)), max_size=3),
    st.just({"visit": "Baseline", "operator": ">=", "value": 1}), st.just({"basis": "change"}),
    st.sampled_from(["../x.csv", "/etc/passwd", "data/adsl.csv", "data/adeff.csv", "{param}_{visit}",
                     "single-arm", "parallel", "wide", "ordinal", "binary", "responder", "follow-up-only"]))
META_KEYS = {
    "study": ["id", "title", "design", "arms", "control_arm", "blinded", "analysis_date", "seed", "colour"],
    "files": ["visits", "participants", "layout", "wide_pattern", "visit"],
    "columns": ["subject", "arm", "param", "visit", "visit_number", "value", "baseline"],
    "outcomes": ["param", "label", "scale", "levels", "bounds", "unit", "baseline_visit", "screening_visit",
                 "followup_visits", "primary_followup", "planned_analysis", "responder", "entry_criterion",
                 "reliability", "risk_endpoint", "risk_endpoint_label", "covariates", "log_scale", "extra"],
}


@st.composite
def hostile_studies(draw):
    """A small valid study with random damage to its metadata, its cells, its rows and its columns."""
    s = Synthetic(n_per_arm=draw(st.integers(1, 6)), seed=draw(st.integers(0, 3)))
    for _ in range(draw(st.integers(0, 4))):
        section = draw(st.sampled_from(sorted(META_KEYS)))
        key = draw(st.sampled_from(META_KEYS[section]))
        target = s.meta[section][draw(st.integers(0, 1))] if section == "outcomes" else s.meta[section]
        if draw(st.booleans()):
            target.pop(key, None)
        else:
            target[key] = draw(VALUES)
    for _ in range(draw(st.integers(0, 6))):
        frame = draw(st.sampled_from(["adsl", "adeff"]))
        df = getattr(s, frame)
        col = draw(st.sampled_from(list(df.columns)))
        df[col] = df[col].astype(object)
        df.iloc[draw(st.integers(0, len(df) - 1)), df.columns.get_loc(col)] = draw(CELLS)
    action = draw(st.sampled_from(["none", "drop-column", "rename-column", "repeat-rows", "keep-few-rows"]))
    df = s.adeff
    if action == "drop-column":
        s.adeff = df.drop(columns=draw(st.sampled_from(list(df.columns))))
    elif action == "rename-column":
        s.adeff = df.rename(columns={draw(st.sampled_from(list(df.columns))): draw(CELLS)})
    elif action == "repeat-rows":
        s.adeff = pd.concat([df, df.iloc[: draw(st.integers(1, 5))]], ignore_index=True)
    elif action == "keep-few-rows":
        s.adeff = df.iloc[: draw(st.integers(0, 3))]
    s.encoding = draw(st.sampled_from(["utf-8", "utf-8-sig", "latin-1"]))
    return s


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                 HealthCheck.function_scoped_fixture])
@given(study=hostile_studies())
def test_random_damage_gives_a_study_or_clean_problems(tmp_path_factory, study):
    folder = study.write(tmp_path_factory.mktemp("fuzz") / "study")
    try:
        loaded = load_study(folder)
    except StudyInputError as exc:
        assert exc.problems
        for p in exc.problems:
            line = p.one_line()
            assert "\n" not in line and "\r" not in line and len(line.splitlines()) == 1
            assert ". Fix: " in line and line.endswith(".")
    else:
        ctx = CheckContext(seed=1, blinded=False)
        for spec in loaded.metadata.outcomes:
            outcome_screen(outcome_data(loaded, spec), ctx)
    res = runner.invoke(app, ["validate", str(folder)])
    assert res.exit_code in (0, 2), (res.exit_code, res.exception, _stderr(res))
    assert "Traceback" not in _stderr(res)


# --------------------------------------------------------------------------- terminal output
# Study codes reach the terminal as plain text: no markup, no emoji codes.


def test_summary_table_prints_brackets_in_codes_as_text(tmp_path):
    from rich.console import Console

    from auditor.cli import _summary_table

    s = Synthetic()
    s.adeff["PARAMCD"] = s.adeff["PARAMCD"].replace({"DBP": "[/x]DBP"})
    s.meta["outcomes"][1]["param"] = "[/x]DBP"
    audit = audit_study(load_study(s.write(tmp_path / "study")), AuditOptions(checks=("pre-post",), quick=True))
    console = Console(file=io.StringIO(), width=200)
    console.print(_summary_table(audit))
    assert "[/x]DBP" in console.file.getvalue()


def test_problem_lines_print_emoji_codes_as_text(tmp_path):
    s = Synthetic()
    s.adsl.loc[0, "TRT01P"] = "Con:x:trol"
    res = runner.invoke(app, ["validate", str(s.write(tmp_path / "study"))])
    assert res.exit_code == 2
    assert "arm 'Con:x:trol' is not in study.arms" in _stderr(res)
