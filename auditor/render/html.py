"""audit.html: one self-contained page (CSS and figures inline), autoescaped everywhere."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import jinja2

from ..results import Audit
from .view import audit_view


def _template_dir() -> Path:
    try:
        return Path(str(resources.files("auditor.templates")))
    except (ModuleNotFoundError, TypeError):  # running from a source tree without install
        return Path(__file__).resolve().parents[2] / "templates"


def environment() -> jinja2.Environment:
    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(_template_dir())),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )


def stylesheet(paper: str = "A4") -> str:
    css = (_template_dir() / "report.css").read_text(encoding="utf-8")
    return css.replace("size: A4;", f"size: {paper};")


def render_view(template: str, view: dict, paper: str = "A4") -> str:
    return environment().get_template(template).render(v=view, css=stylesheet(paper))


def report_html(audit: Audit, paper: str = "A4") -> str:
    return render_view("report.html.j2", audit_view(audit), paper)
