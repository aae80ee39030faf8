"""The validation cases shared with `auditor selfcheck`: every reference case passes, every
simulation case passes in quick mode (20 to 40 replicates, with a 2-MCSE allowance), and the
self-check command runs."""

from __future__ import annotations

import json

import pytest
from typer.testing import CliRunner

from auditor.cli import app
from auditor.validation.cases import case_seed, reference_cases, run_reference, run_simulation, simulation_cases


@pytest.mark.parametrize("case", reference_cases(), ids=lambda c: c.id)
def test_reference_case(case):
    out = run_reference(case)
    assert out.passed, out


@pytest.mark.parametrize("case", simulation_cases(), ids=lambda c: c.id)
def test_simulation_case_in_quick_mode(case):
    # The seeds of `auditor selfcheck` in its default quick run (base seed 20261201, fixed per case id).
    out = run_simulation(case, full=False, seed=case_seed(20261201, case.id))
    assert out.passed, out


def test_selfcheck_quick_writes_report(tmp_path):
    res = CliRunner().invoke(app, ["selfcheck", "-o", str(tmp_path / "v"), "--date", "2026-01-01",
                                   "--only", "change-score/null/slope"])
    assert res.exit_code == 0, res.output
    d = json.loads((tmp_path / "v" / "validation.json").read_text())
    assert d["mode"] == "quick" and d["date"] == "2026-01-01"
    assert [c["id"] for c in d["simulation"]] == ["change-score/null/slope"]
    assert (tmp_path / "v" / "validation.pdf").read_bytes().startswith(b"%PDF")
