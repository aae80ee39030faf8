"""Writing an audit from published summaries: the report files plus comments.md, all together or not
at all, through the same write guard as a data audit."""

from __future__ import annotations

from pathlib import Path
from typing import Iterable

from ..render.comments_md import comments_markdown
from ..render.output import FORMATS, OUTPUT_FILES, render_all
from ..results import SummaryAudit
from ..writeguard import Recovery, refuse_existing, refuse_unsafe_folder, write_file_set

SUMMARY_OUTPUT_FILES = OUTPUT_FILES + ("comments.md",)


def check_summary_target(out_dir: Path, force: bool, protected: Iterable[Path] = ()) -> None:
    """Refuse an unsafe folder, or one already holding an audit (without ``force``), before any work."""
    resolved = refuse_unsafe_folder(Path(out_dir), protected)
    if resolved.is_dir():
        refuse_existing(resolved, SUMMARY_OUTPUT_FILES, force)


def write_summary_audit(audit: SummaryAudit, out_dir: Path, force: bool = False, paper: str = "A4",
                        protected: Iterable[Path] = (), formats: Iterable[str] = tuple(FORMATS),
                        figure_data: bool = False) -> tuple[list[Path], Recovery]:
    """Write the files ``formats`` names and, always, comments.md (the draft letter is the point of
    this mode, so no format choice leaves it out)."""
    protected = list(protected)
    check_summary_target(Path(out_dir), force, protected)
    files = {**render_all(audit, paper, tuple(formats), figure_data),
             "comments.md": comments_markdown(audit).encode("utf-8")}
    return write_file_set(files, Path(out_dir), force, protected)
