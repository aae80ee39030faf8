"""docs/robustness.md states how many round-two hostile-input cases each file holds; keep it true."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
FILES = ("test_output_safety", "test_hostile_reading", "test_options", "test_hostile_results")


def _collected(name: str) -> int:
    out = subprocess.run([sys.executable, "-m", "pytest", "--collect-only", "-q", "-p", "no:cacheprovider",
                          "-o", "addopts=", str(ROOT / "tests" / "cli" / f"{name}.py")],
                         capture_output=True, text=True, cwd=ROOT, timeout=300).stdout
    return sum("::" in line for line in out.splitlines())


def test_the_documented_counts_are_the_collected_counts():
    doc = (ROOT / "docs" / "robustness.md").read_text(encoding="utf-8")
    stated = {m.group(1): int(m.group(2)) for m in re.finditer(r"tests/cli/(test_\w+)\.py` (\d+)", doc)}
    assert set(stated) == set(FILES)
    collected = {name: _collected(name) for name in FILES}
    assert stated == collected
    total = int(re.search(r"(\d+) test cases in four files", doc).group(1))
    assert total == sum(collected.values())
