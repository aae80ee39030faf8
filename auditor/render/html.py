"""audit.html: one self-contained page (CSS and figures inline), autoescaped everywhere."""

from __future__ import annotations

import re
from importlib import resources
from pathlib import Path

import jinja2
import markupsafe

from ..results import Audit
from .bidi import contained
from .view import audit_view, memo_view


def _template_dir() -> Path:
    try:
        return Path(str(resources.files("auditor.templates")))
    except (ModuleNotFoundError, TypeError):  # running from a source tree without install
        return Path(__file__).resolve().parents[2] / "templates"


LONG_WORD_CHARS = 72
"""A run of this many characters without a space gets break opportunities (longer than a SHA-256)."""
SOFT_BREAK_EVERY = 24
_LONG_WORD = re.compile(r"[^\s\u200b]{%d,}" % LONG_WORD_CHARS)


def soft_breaks(value):
    """Every printed value, with a zero-width space every SOFT_BREAK_EVERY characters inside very
    long unbroken words.

    Labels come from the user's files and may be one 2000-character word. Breaking them here lets the
    stylesheet wrap only at break opportunities, which the PDF engine lays out about a third faster
    than breaking anywhere. The tool's own markup (the stylesheet) and inline data URIs are left whole.
    """
    if not isinstance(value, str) or isinstance(value, markupsafe.Markup) or value.startswith("data:"):
        return value
    if len(value) < LONG_WORD_CHARS:
        return value
    return _LONG_WORD.sub(lambda m: "\u200b".join(m.group()[i:i + SOFT_BREAK_EVERY]
                                                   for i in range(0, len(m.group()), SOFT_BREAK_EVERY)), value)


def printed(value):
    """What every template expression goes through: bidirectional controls contained
    (:func:`~auditor.render.bidi.contained`), then soft breaks in very long words."""
    if isinstance(value, str) and not isinstance(value, markupsafe.Markup) and not value.startswith("data:"):
        value = contained(value)
    return soft_breaks(value)


def environment() -> jinja2.Environment:
    return jinja2.Environment(
        finalize=printed,
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


def css_string(text: str) -> str:
    """``text`` as a CSS string literal (backslash, quote and line breaks escaped)."""
    body = text.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\a ")
    return f'"{body}"'


MARK_COLOUR = {"closed": "#a93226", "open": "#566573"}


def marking_css(text: str, kind: str = "closed") -> str:
    """The page rule that prints the report's marking (closed or open) at the top of every PDF page."""
    return ("\n@page { @top-center { content: " + css_string(text) + "; font-family: \"DejaVu Sans\", sans-serif; "
            f"font-size: 8pt; font-weight: bold; color: {MARK_COLOUR[kind]}; }} }}\n")


def render_marked(template: str, view: dict, paper: str = "A4") -> str:
    """A report template rendered with the view's marking on every printed page."""
    css = stylesheet(paper) + marking_css(view["marking"], view["marking_class"])
    return environment().get_template(template).render(v=view, css=css)


def report_html(audit: Audit, paper: str = "A4") -> str:
    return render_marked("report.html.j2", audit_view(audit), paper)


def memo_html(audit: Audit, paper: str = "A4") -> str:
    """memo.html: the short report (cover, verdict grid, one paragraph per outcome, cautions, sources)."""
    return render_marked("memo.html.j2", memo_view(audit), paper)
