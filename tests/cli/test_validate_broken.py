"""`auditor validate` and `auditor run` on broken variants of the example study.

Each case breaks one thing, and the test asserts the exit code 2, the one-line message that names
the file, the place and the fix, and that `run` wrote nothing at all.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from typer.testing import CliRunner

from auditor.cli import app

runner = CliRunner()


def _edit_toml(folder: Path, old: str, new: str, count: int = 1) -> None:
    p = folder / "study.toml"
    text = p.read_text()
    assert old in text, old
    p.write_text(text.replace(old, new, count))


def _edit_csv(folder: Path, name: str, fn) -> None:
    p = folder / "data" / name
    lines = p.read_text().splitlines()
    p.write_text("\n".join(fn(lines)) + "\n")


def _set_cell(lines, row: int, column: str, value: str):
    header = lines[0].split(",")
    cells = lines[row].split(",")
    cells[header.index(column)] = value
    lines[row] = ",".join(cells)
    return lines


CASES = [
    ("missing-metadata", lambda f: (f / "study.toml").unlink(), [r"study\.toml:", r"no study\.toml"]),
    ("bad-toml", lambda f: _edit_toml(f, 'id = "TQ-ASTH-02"', 'id = "TQ-ASTH-02'),
     [r"study\.toml: line \d+", "not valid TOML"]),
    ("unknown-key", lambda f: _edit_toml(f, 'planned_analysis = "percent-change"',
                                         'planned_analysis = "percent-change"\nentry_critrion = 3'),
     [r"outcomes\[2\]\.entry_critrion", "did you mean 'entry_criterion'"]),
    ("bad-scale", lambda f: _edit_toml(f, 'scale = "ordinal"', 'scale = "ordered"'),
     [r"outcomes\[3\]\.scale", "use one of"]),
    ("unknown-param", lambda f: _edit_toml(f, 'param = "FENO"', 'param = "FENOX"'),
     [r"outcomes\[1\]\.param", "'FENOX' is not in the data", "did you mean 'FENO'"]),
    ("unknown-visit", lambda f: _edit_toml(f, 'followup_visits = ["Week 4", "Week 12"]',
                                           'followup_visits = ["Week 4", "Week 13"]'),
     [r"outcomes\[0\]\.followup_visits\[1\]", "visit 'Week 13' has no rows", "did you mean 'Week 12'"]),
    ("file-missing", lambda f: (f / "data" / "adsl.csv").unlink(),
     [r"files\.participants", "does not exist"]),
    ("path-escapes", lambda f: _edit_toml(f, 'visits = "data/adeff.csv"', 'visits = "../adeff.csv"'),
     [r"files\.visits", "leaves the study folder"]),
    ("absolute-path", lambda f: _edit_toml(f, 'visits = "data/adeff.csv"', 'visits = "/etc/passwd"'),
     [r"files\.visits", "is absolute"]),
    ("non-numeric", lambda f: _edit_csv(f, "adeff.csv", lambda L: _set_cell(L, 5, "AVAL", "high")),
     [r"data/adeff\.csv: row 6 column AVAL", "not a number"]),
    ("duplicate-row", lambda f: _edit_csv(f, "adeff.csv", lambda L: L[:3] + [L[2]] + L[3:]),
     [r"data/adeff\.csv: rows 3, 4 column AVAL", "more than one value"]),
    ("arm-not-declared", lambda f: _edit_csv(f, "adsl.csv", lambda L: _set_cell(L, 4, "TRT01P", "Plaecbo")),
     [r"data/adsl\.csv: row 5 column TRT01P", "arm 'Plaecbo' is not in study.arms", "did you mean 'Placebo'"]),
    ("outside-bounds", lambda f: _edit_toml(f, "bounds = [0, 6]", "bounds = [0, 3]"),
     [r"data/adeff\.csv: rows .* column AVAL", r"'ACS' value outside its declared bounds \[0\.0, 3\.0\]"]),
    ("ordinal-level", lambda f: _edit_toml(f, "levels = [0, 1, 2, 3, 4]", "levels = [0, 1, 2, 3]"),
     [r"column AVAL", "not one of the declared levels"]),
    ("missing-column", lambda f: _edit_toml(f, "[columns]", '[columns]\nvalue = "AVALX"'),
     [r"data/adeff\.csv: row 1 column AVALX", "required column is missing", "did you mean 'AVAL'"]),
    ("orphan-participant", lambda f: _edit_csv(f, "adsl.csv", lambda L: L[:2] + L[3:]),
     [r"data/adeff\.csv: rows .* column USUBJID", "not in the participant file"]),
    ("semicolons", lambda f: _edit_csv(f, "adsl.csv", lambda L: [x.replace(",", ";") for x in L]),
     [r"data/adsl\.csv: row 1", "semicolons"]),
    ("empty-file", lambda f: (f / "data" / "adsl.csv").write_text(""), [r"data/adsl\.csv:", "is empty"]),
    ("control-not-an-arm", lambda f: _edit_toml(f, 'control_arm = "Placebo"', 'control_arm = "Vehicle"'),
     [r"study:? ", "control_arm 'Vehicle' is not one of arms"]),
    ("responder-without-rule", lambda f: _edit_toml(
        f, 'responder = { basis = "change", threshold = -0.5, direction = "at-most" }', ""),
     [r"outcomes\[5\]", "needs a \\[outcomes.responder\\] rule"]),
    ("risk-endpoint-missing", lambda f: _edit_toml(f, 'risk_endpoint = "CRHYTHFL"', 'risk_endpoint = "ARRFL"'),
     [r"data/adsl\.csv: row 1 column ARRFL", "risk endpoint of 'K' is missing"]),
    ("wrong-type", lambda f: _edit_toml(f, "blinded = false", 'blinded = "no"'),
     [r"study\.blinded", "right type|valid boolean"]),
]


def _stderr(result) -> str:
    try:
        return result.stderr
    except (ValueError, AttributeError):
        return result.output


@pytest.mark.parametrize("name,breaker,patterns", CASES, ids=[c[0] for c in CASES])
def test_validate_reports_problem(example_copy, name, breaker, patterns):
    breaker(example_copy)
    res = runner.invoke(app, ["validate", str(example_copy)])
    text = _stderr(res)
    assert res.exit_code == 2, text
    assert "Traceback" not in text
    lines = [ln for ln in text.splitlines() if "Fix:" in ln]
    assert lines, text
    joined = "\n".join(lines)
    for pat in patterns:
        assert re.search(pat, joined), f"{pat!r} not in:\n{joined}"
    for ln in lines:  # every message says how to fix it, on one line
        assert ln.rstrip().endswith(".")


@pytest.mark.parametrize("name,breaker,patterns", CASES[:8], ids=[c[0] for c in CASES[:8]])
def test_run_writes_nothing_when_invalid(example_copy, tmp_path, name, breaker, patterns):
    breaker(example_copy)
    target = tmp_path / "audit"
    res = runner.invoke(app, ["run", str(example_copy), "-o", str(target)])
    assert res.exit_code == 2
    assert not target.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".audit")]


def test_several_problems_reported_together(example_copy):
    _edit_toml(example_copy, 'scale = "ordinal"', 'scale = "ordered"')
    _edit_toml(example_copy, "blinded = false", 'blinded = "no"')
    res = runner.invoke(app, ["validate", str(example_copy)])
    assert res.exit_code == 2
    assert "2 problem(s)" in _stderr(res)


def test_validate_clean_example_exits_zero():
    from tests.conftest import EXAMPLE

    res = runner.invoke(app, ["validate", str(EXAMPLE)])
    assert res.exit_code == 0, res.output
    assert "valid (7 outcome(s), 320 participants" in res.output
