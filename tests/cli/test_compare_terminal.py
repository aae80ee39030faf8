"""`auditor compare` on a terminal of 80 columns: every outcome code, check id and estimate key whole."""

from __future__ import annotations

import json

import pytest
from typer.testing import CliRunner

from auditor import cli
from auditor.cli import app
from auditor.compare import compare_findings, estimate_rows, moved_number_lines

LONG_KEY = "regression-to-mean.expected-shift.grid.reliability-upper.population-mean-2"
"""72 characters: with its numbers it cannot share an 80-column line, and no table column holds it."""
SHORT_KEY = "regression-to-mean.n-participants"


def _findings(shift: float, verdict: str) -> dict:
    """A findings dict of one invented outcome with one long and one short estimate key."""
    return {"schema_version": "1.2", "study_id": "T", "blinded": False,
            "outcomes": [{"param": "FEV1PRE"}],
            "results": [{"outcome": "FEV1PRE", "check_id": "regression-to-mean", "verdict": verdict,
                         "subfindings": [{"id": "selection-on-baseline", "verdict": verdict}],
                         "estimates": [
                             {"key": LONG_KEY, "name": "Expected shift", "value": -0.41 * shift,
                              "lower": -0.52, "upper": -0.30},
                             {"key": SHORT_KEY, "name": "Participants", "value": 310 * shift,
                              "lower": None, "upper": None}]}]}


def test_a_long_key_gets_a_line_of_its_own_and_a_short_one_shares_it():
    old, new = _findings(1.0, "caution"), _findings(1.1, "sound")
    lines = moved_number_lines(estimate_rows(compare_findings(old, new), old, new), width=80)
    assert lines[0] == "FEV1PRE / regression-to-mean"
    assert lines[1] == f"  {LONG_KEY}"
    assert lines[2].startswith("      -0.41 (-0.52 to -0.3) -> -0.451 (-0.52 to -0.3)")
    assert lines[3] == f"  {SHORT_KEY}: 310 -> 341 (value moved)"
    assert all(len(line) <= 80 for line in lines)
    # on a wide terminal the long key shares its line too
    wide = moved_number_lines(estimate_rows(compare_findings(old, new), old, new), width=200)
    assert wide[1].startswith(f"  {LONG_KEY}: -0.41") and len(wide) == 3


def test_terminal_output_at_80_columns_keeps_every_key_whole(tmp_path, monkeypatch):
    monkeypatch.setattr(cli.out.console, "_width", 80)
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    a.write_text(json.dumps(_findings(1.0, "caution")))
    b.write_text(json.dumps(_findings(1.1, "sound")))
    res = CliRunner().invoke(app, ["compare", str(a), str(b)])
    assert res.exit_code == 0, res.output
    lines = res.output.splitlines()
    assert f"  {LONG_KEY}" in lines and any(line.startswith(f"  {SHORT_KEY}: ") for line in lines)
    assert "…" not in res.output
    # the verdict table folds rather than cuts: the check id stays on one line of its cell
    assert any("regression-to-mean" in line and "caution" in line for line in lines)
    assert all(len(line) <= 80 for line in lines)


@pytest.mark.parametrize("width", [60, 80, 120])
def test_no_line_wider_than_the_terminal_for_ordinary_keys(width):
    old, new = _findings(1.0, "caution"), _findings(1.1, "caution")
    lines = moved_number_lines(estimate_rows(compare_findings(old, new), old, new), width=width)
    assert all(len(line) <= max(width, len(LONG_KEY) + 2) for line in lines)
    assert sum(LONG_KEY in line for line in lines) == 1
