"""Packaging guard: every sub-package of auditor is listed in pyproject.toml, so a plain
(non-editable) install ships it, and the templates ship with the package."""

from __future__ import annotations

import sys
from pathlib import Path

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

ROOT = Path(__file__).resolve().parents[1]


def test_every_subpackage_is_listed():
    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    found = {".".join(p.parent.relative_to(ROOT).parts) for p in (ROOT / "auditor").rglob("__init__.py")}
    assert found <= listed, sorted(found - listed)
    assert "auditor.templates" in listed


def test_template_files_match_package_data():
    data = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["package-data"]
    patterns = data["auditor.templates"]
    for f in (ROOT / "templates").rglob("*"):
        if f.is_file() and f.suffix in (".j2", ".css"):
            rel = f.relative_to(ROOT / "templates")
            assert any(rel.match(p) for p in patterns), rel


def test_rendering_knows_nothing_about_checks_or_models():
    # The layers call downwards only: importing every renderer loads no check, no statistics module,
    # no pipeline and no model library.
    import subprocess

    code = ("import sys, auditor.render.html, auditor.render.pdf, auditor.render.jsonout, auditor.render.csvout; "
            "print(sorted(m for m in sys.modules if m.startswith(('auditor.checks', 'auditor.stats', "
            "'auditor.pipeline', 'statsmodels'))))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "[]"
