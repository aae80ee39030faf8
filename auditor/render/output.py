"""Writing an audit's four files all at once, or not at all.

Everything is written into a temporary folder beside the target and moved into place at the end, so
an interrupted or failed run never leaves a half-finished report behind.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

from ..results import Audit
from .csvout import findings_csv
from .html import report_html
from .jsonout import findings_json
from .pdf import html_to_pdf

OUTPUT_FILES = ("audit.html", "audit.pdf", "findings.json", "findings.csv")


class OutputExists(Exception):
    pass


def existing_audit(out_dir: Path) -> bool:
    return out_dir.exists() and any((out_dir / name).exists() for name in OUTPUT_FILES)


def check_target(out_dir: Path, force: bool) -> None:
    """Refuse an existing audit without ``force`` (before any work is done)."""
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputExists(f"{out_dir} exists and is not a folder")
    if existing_audit(out_dir) and not force:
        raise OutputExists(f"{out_dir} already holds an audit; use --force to replace it")


def render_all(audit: Audit, paper: str = "A4") -> dict[str, bytes]:
    """The four files' bytes, from the one audit record."""
    html = report_html(audit, paper)
    return {
        "audit.html": html.encode("utf-8"),
        "audit.pdf": html_to_pdf(html),
        "findings.json": findings_json(audit).encode("utf-8"),
        "findings.csv": findings_csv(audit).encode("utf-8"),
    }


def write_files_atomically(files: dict[str, bytes], out_dir: Path, force: bool = False) -> list[Path]:
    """Write ``files`` into ``out_dir`` through a temporary sibling folder, then swap it into place."""
    out_dir = Path(out_dir)
    check_target(out_dir, force)
    parent = out_dir.resolve().parent
    parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.partial-", dir=parent))
    try:
        for name, content in files.items():
            (tmp / name).write_bytes(content)
        if out_dir.exists():
            keep = [p for p in out_dir.iterdir() if p.name not in files]
            for p in keep:  # files the user put there survive a --force rerun
                shutil.move(str(p), str(tmp / p.name))
            old = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.old-", dir=parent))
            os.replace(out_dir, old / "previous")
            os.replace(tmp, out_dir)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(tmp, out_dir)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return [out_dir / name for name in files]


def write_file_atomically(path: Path, content: bytes) -> None:
    """Write one file through a temporary sibling and an atomic rename."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.partial-", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(content)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_audit(audit: Audit, out_dir: Path, force: bool = False, paper: str = "A4") -> list[Path]:
    check_target(Path(out_dir), force)
    return write_files_atomically(render_all(audit, paper), Path(out_dir), force)
