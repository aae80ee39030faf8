"""The validation cases shared with `auditor selfcheck`: every reference case passes, every
simulation case passes in quick mode (20 to 40 replicates, judged by the one-sided exact binomial
test at alpha 0.001), and the self-check command runs."""

from __future__ import annotations

import json

import pytest
from typer.testing import CliRunner

from auditor.cli import app
import math

from auditor.validation.cases import (PASS_ALPHA, binomial_pass_rule, case_seed, reference_cases, run_reference,
                                     run_simulation, simulation_cases)


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
    assert res.exit_code != 3, f"a validation case failed (exit 3):\n{res.output}"
    assert res.exit_code == 0, res.output
    assert "one-sided exact binomial test" in res.output and "alpha 0.001" in res.output
    d = json.loads((tmp_path / "v" / "validation.json").read_text())
    assert d["mode"] == "quick" and d["date"] == "2026-01-01"
    assert [c["id"] for c in d["simulation"]] == ["change-score/null/slope"]
    assert (tmp_path / "v" / "validation.pdf").read_bytes().startswith(b"%PDF")


def _upper_tail(k: int, n: int, p: float) -> float:
    """P(X >= k) for X ~ Binomial(n, p), summed from the binomial formula (independent of scipy)."""
    return sum(math.comb(n, i) * p ** i * (1 - p) ** (n - i) for i in range(k, n + 1))


def _lower_tail(k: int, n: int, p: float) -> float:
    return sum(math.comb(n, i) * p ** i * (1 - p) ** (n - i) for i in range(0, k + 1))


def test_pass_rule_is_the_exact_binomial_tail():
    # P(X >= 3 | 20, 0.05) = 1 - 0.95^20 - 20(0.05)0.95^19 - 190(0.05^2)0.95^18 = 0.0754837 (by hand).
    r = binomial_pass_rule("false-alarm", 0.05, 3, 20)
    assert abs(r.p_value - 0.0754837) < 1e-6 and r.passed
    for kind, bound, n in (("false-alarm", 0.05, 40), ("false-alarm", 0.15, 20), ("detection", 0.80, 20),
                           ("coverage", 0.95, 200)):
        tail = _upper_tail if kind == "false-alarm" else _lower_tail
        results = [binomial_pass_rule(kind, bound, k, n) for k in range(n + 1)]
        for k, r in enumerate(results):
            assert math.isclose(r.p_value, min(1.0, tail(k, n, bound)), rel_tol=1e-9, abs_tol=1e-15)
            assert r.passed == (tail(k, n, bound) >= PASS_ALPHA)
        assert not all(r.passed for r in results)  # the rule can fail


def test_pass_rule_fails_a_clearly_broken_case():
    # 6 false alarms in 20 at a nominal 5%: P(X >= 6) = 0.0003 < 0.001.
    assert not binomial_pass_rule("false-alarm", 0.05, 6, 20).passed
    # 9 detections in 20 against a minimum power of 0.80: P(X <= 9) = 0.00056 < 0.001.
    assert not binomial_pass_rule("detection", 0.80, 9, 20).passed
    assert binomial_pass_rule("detection", 0.80, 10, 20).passed


@pytest.mark.parametrize("only", ["percent-change/", "housing-cut"])
def test_selfcheck_report_is_the_same_at_any_number_of_jobs(tmp_path, only):
    # Every case is seeded by its own id, and results go back in case order: --jobs 2 must give the
    # bytes of --jobs 1 (same date, seed and installation).
    paths = []
    for jobs in ("1", "2"):
        out = tmp_path / f"j{jobs}"
        res = CliRunner().invoke(app, ["selfcheck", "-o", str(out), "--date", "2026-01-01", "--only", only,
                                       "--jobs", jobs])
        assert res.exit_code == 0, res.output
        paths.append(out / "validation.json")
    one, two = (p.read_bytes() for p in paths)
    assert one == two
    assert len(json.loads(one)["simulation"] + json.loads(one)["reference"]) >= 2


def test_selfcheck_refuses_a_negative_number_of_jobs(tmp_path):
    res = CliRunner().invoke(app, ["selfcheck", "-o", str(tmp_path / "v"), "--jobs", "-1"])
    assert res.exit_code == 2 and "--jobs: -1 is not a number of processes" in res.output
    assert not (tmp_path / "v").exists()
