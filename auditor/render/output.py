"""Writing an audit's four files all together, or not at all, without touching anything else.

The rules (refusing unsafe folders, the lock, the journal, renaming only the tool's own files) live
in :mod:`auditor.writeguard`; this module only names the files and renders their bytes.
"""

from __future__ import annotations

from pathlib import Path
from typing import Iterable

from ..results import Audit
from ..writeguard import OutputRefused, Recovery, refuse_existing, refuse_unsafe_folder, write_file_set

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


FORMATS = {"html": "audit.html", "pdf": "audit.pdf", "json": "findings.json", "csv": "findings.csv"}
"""The ``--formats`` names and the file each one writes."""


def render_all(audit: Audit, paper: str = "A4", formats: Iterable[str] = tuple(FORMATS),
               figure_data: bool = False, memo: bool = False) -> dict[str, bytes]:
    """The bytes of the files ``formats`` names (default all four), from the one audit record, and
    with ``memo`` the memo's two files.

    Only what is asked for is rendered: the PDF engine is not even imported for an HTML, JSON or
    CSV run. ``figure_data`` keeps the figures' point arrays in findings.json.
    """
    formats = set(formats)
    out: dict[str, bytes] = {}
    if formats & {"html", "pdf"}:
        from .html import report_html

        html = report_html(audit, paper)
        if "html" in formats:
            out["audit.html"] = html.encode("utf-8")
        if "pdf" in formats:
            from .pdf import html_to_pdf

            out["audit.pdf"] = html_to_pdf(html)
    if "json" in formats:
        from .jsonout import findings_json

        out["findings.json"] = findings_json(audit, figure_data).encode("utf-8")
    if "csv" in formats:
        from .csvout import findings_csv

        out["findings.csv"] = findings_csv(audit).encode("utf-8")
    if memo:
        from .html import memo_html
        from .pdf import html_to_pdf

        short = memo_html(audit, paper)
        out.update({"memo.html": short.encode("utf-8"), "memo.pdf": html_to_pdf(short)})
    return out


def write_audit(audit: Audit, out_dir: Path, force: bool = False, paper: str = "A4",
                protected: Iterable[Path] = (), formats: Iterable[str] = tuple(FORMATS),
                figure_data: bool = False, memo: bool = False) -> tuple[list[Path], Recovery]:
    """Render and write the audit's files (those ``formats`` names, and with ``memo`` the memo's two)
    into ``out_dir``; the paths and any recovery made of an interrupted earlier write."""
    protected = list(protected)
    check_target(Path(out_dir), force, protected, memo)
    return write_file_set(render_all(audit, paper, formats, figure_data, memo), Path(out_dir), force, protected)
