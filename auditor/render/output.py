"""Writing an audit's four files all together, or not at all, without touching anything else.

The rules (refusing unsafe folders, the lock, the journal, renaming only the tool's own files) live
in :mod:`auditor.writeguard`; this module only names the files and renders their bytes.
"""

from __future__ import annotations

from pathlib import Path
from typing import Iterable

from ..results import Audit
from ..writeguard import OutputRefused, Recovery, refuse_existing, refuse_unsafe_folder, write_file_set
from .csvout import findings_csv
from .html import report_html
from .jsonout import findings_json
from .pdf import html_to_pdf

OUTPUT_FILES = ("audit.html", "audit.pdf", "findings.json", "findings.csv")

OutputExists = OutputRefused
"""The name earlier versions used for a refused output target."""


def check_target(out_dir: Path, force: bool, protected: Iterable[Path] = ()) -> None:
    """Refuse, before any work is done, a folder that is unsafe to write to or that already holds an
    audit (without ``force``)."""
    resolved = refuse_unsafe_folder(Path(out_dir), protected)
    if resolved.is_dir():
        refuse_existing(resolved, OUTPUT_FILES, force)


def render_all(audit: Audit, paper: str = "A4") -> dict[str, bytes]:
    """The four files' bytes, from the one audit record."""
    html = report_html(audit, paper)
    return {
        "audit.html": html.encode("utf-8"),
        "audit.pdf": html_to_pdf(html),
        "findings.json": findings_json(audit).encode("utf-8"),
        "findings.csv": findings_csv(audit).encode("utf-8"),
    }


def write_audit(audit: Audit, out_dir: Path, force: bool = False, paper: str = "A4",
                protected: Iterable[Path] = ()) -> tuple[list[Path], Recovery]:
    """Render and write the audit's four files into ``out_dir``; the paths and any recovery made of
    an interrupted earlier write."""
    protected = list(protected)
    check_target(Path(out_dir), force, protected)
    return write_file_set(render_all(audit, paper), Path(out_dir), force, protected)
