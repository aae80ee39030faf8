"""Shared fixtures: the example study, copied so that tests may break it."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

# Every audit in the tests raises a defect of the tool instead of reporting it as a finding, so that a
# programming error can never pass for a data limitation (tests of the non-strict path unset it).
os.environ["AUDITOR_STRICT"] = "1"

import pytest

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "example_study"


@pytest.fixture
def example_copy(tmp_path) -> Path:
    """A private copy of example_study (data and study.toml)."""
    dst = tmp_path / "study"
    shutil.copytree(EXAMPLE, dst, ignore=shutil.ignore_patterns("__pycache__"))
    return dst


@pytest.fixture(scope="session")
def example_audit():
    """The example study audited once per test session (quick mode)."""
    from auditor.pipeline import AuditOptions, audit_study
    from auditor.study import load_study

    return audit_study(load_study(EXAMPLE), AuditOptions(quick=True))
