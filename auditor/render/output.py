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
from .html import memo_html, report_html
from .jsonout import findings_json
from .pdf import html_to_pdf

OUTPUT_FILES = ("audit.html", "audit.pdf", "findings.json", "findings.csv")
MEMO_FILES = ("memo.html", "memo.pdf")
"""Written beside the audit's four files when the short memo is asked for."""

OutputExists = OutputRefused
"""The name earlier versions used for a refused output target."""


def check_target(out_dir: Path, force: bool, protected: Iterable[Path] = (), memo: bool = False) -> None:
    """Refuse, before any work is done, a folder that is unsafe to write to or that already holds an
    audit (or, with ``memo``, a memo) without ``force``."""
    resolved = refuse_unsafe_folder(Path(out_dir), protected)
    if resolved.is_dir():
        refuse_existing(resolved, OUTPUT_FILES + (MEMO_FILES if memo else ()), force)


def render_all(audit: Audit, paper: str = "A4", memo: bool = False) -> dict[str, bytes]:
    """The four files' bytes, from the one audit record, and with ``memo`` the memo's two files."""
    html = report_html(audit, paper)
    files = {
        "audit.html": html.encode("utf-8"),
        "audit.pdf": html_to_pdf(html),
        "findings.json": findings_json(audit).encode("utf-8"),
        "findings.csv": findings_csv(audit).encode("utf-8"),
    }
    if memo:
        short = memo_html(audit, paper)
        files.update({"memo.html": short.encode("utf-8"), "memo.pdf": html_to_pdf(short)})
    return files


def write_audit(audit: Audit, out_dir: Path, force: bool = False, paper: str = "A4",
                protected: Iterable[Path] = (), memo: bool = False) -> tuple[list[Path], Recovery]:
    """Render and write the audit's four files (and with ``memo`` the memo's two) into ``out_dir``; the
    paths and any recovery made of an interrupted earlier write."""
    protected = list(protected)
    check_target(Path(out_dir), force, protected, memo)
    return write_file_set(render_all(audit, paper, memo), Path(out_dir), force, protected)
