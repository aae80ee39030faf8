"""The report's view: the audit turned into display strings. Templates only print what is here."""

from __future__ import annotations

import base64
import math
import re

from ..references import REFERENCES
from ..results import Audit, CheckResult, SummaryAudit, Verdict, level_label
from .bidi import UserText, audit_user_strings

VERDICT_CLASS = {
    Verdict.SOUND: "v-sound",
    Verdict.CAUTION: "v-caution",
    Verdict.UNSUPPORTED: "v-unsupported",
    Verdict.NOT_ASSESSABLE: "v-na",
    Verdict.TOOL_DEFECT: "v-defect",
    Verdict.FOR_INFORMATION: "v-info",
}

PLANNED_TEXT = {
    "change": "change from baseline",
    "percent-change": "percent change from baseline",
    "follow-up-adjusted": "follow-up adjusted for baseline",
    "follow-up-only": "follow-up only",
    "responder": "responder definition",
    "repeated-with-baseline-response": "longitudinal model with baseline as a response",
}


CLOSED_MARK = "CLOSED REPORT – CONFIDENTIAL: results by arm. Closed session only; do not circulate."
OPEN_MARK = "OPEN REPORT: pooled data only, no results by arm."
SUMMARIES_MARK = "AUDIT FROM PUBLISHED SUMMARIES: the paper's reported numbers only, no participant data."


def marking(blinded: bool) -> str:
    """The marking every page of the report carries: closed (confidential, by arm) for an unblinded
    audit, open (pooled) for a blinded one."""
    return OPEN_MARK if blinded else CLOSED_MARK


def audit_marking(audit: Audit) -> tuple[str, str]:
    """The marking and its class for an audit: an audit from published summaries holds nothing
    confidential (the numbers are the paper's), so it is marked as what it is instead."""
    if isinstance(audit, SummaryAudit):
        return SUMMARIES_MARK, "open"
    return marking(audit.blinded), "open" if audit.blinded else "closed"


def outcome_heading(label: str, param: str) -> str:
    """How an outcome is named in headings and captions: its label, with the code in brackets when the
    label is not the code itself."""
    return label if not label or label == param else f"{label} ({param})"


def number(x, digits: int = 3) -> str:
    """A value for display: integers with thousands separators, other numbers to 3 significant digits."""
    if x is None:
        return "–"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, int):
        return f"{x:,}"
    if isinstance(x, float):
        if not math.isfinite(x):
            return "–"
        if x.is_integer() and abs(x) < 1e9:
            return f"{int(x):,}"
        if abs(x) >= 1000:
            return f"{x:,.0f}"
        return f"{x:.{digits}g}"
    return str(x)


def p_text(p) -> str:
    if p is None:
        return "–"
    return "< 0.001" if p < 0.001 else f"{p:.3f}"


def _ci(lo, hi) -> str:
    if lo is None or hi is None:
        return "–"
    return f"{number(lo)} to {number(hi)}"


UNDRAWN_SVG = ('<svg xmlns="http://www.w3.org/2000/svg" width="320" height="40" viewBox="0 0 320 40">'
               '<text x="8" y="24" font-family="sans-serif" font-size="12">Figure not drawn</text></svg>')


def _svg_data_uri(svg: str) -> str:
    return "data:image/svg+xml;base64," + base64.b64encode(svg.encode("utf-8")).decode("ascii")


def _png_data_uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def _is_p_column(name: str) -> bool:
    return name.strip().lower() in ("p", "p value", "p-value") or name.strip().lower().startswith("p (")


def table_view(t) -> dict:
    """A table's cells as display strings, with its column widths; columns headed p are shown as
    p-values."""
    fmt = [p_text if _is_p_column(c) else number for c in t.columns]
    rows = [[fmt[i](c) if i < len(fmt) and _is_number(c) else number(c)
             for i, c in enumerate(row)] for row in t.rows]
    numeric = [_numeric_column(t.rows, i) for i in range(len(t.columns))]
    return {"title": t.title, "columns": t.columns, "numeric": numeric, "note": t.note, "rows": rows,
            "widths": column_widths(t.columns, rows, numeric)}


TABLE_WIDTH_CH = 89
"""A report table's width in digit widths (CSS ``ch``) of its 8.8 pt type: 91 across the A4 text
block (180 mm), 94 across Letter's, 89 across the screen page's 52 em; column widths are planned
against the narrowest."""
CELL_PADDING_CH = 2.0
"""A cell's left and right padding (5 px each, 1.34 ch) and a margin for the rounding of the widths
and for a browser's own glyph positioning, in ``ch``."""
HEADER_WIDEN = 1.1
"""How much wider a header prints than body text: headers are bold (the bold face's digit is 1.09
times the regular one's, its letters in about the same proportion)."""
TEXT_COLUMN_CAP_CH = 26
"""A text column needs room for its longest word up to this width; a longer word breaks."""
_ASCII_WIDTHS = (
    ("'IJijl", 0.45),
    (' ,.', 0.5),
    ('-/:;\\f|', 0.55),
    ('()[]t', 0.6),
    ('!r', 0.65),
    ('"', 0.7),
    ('*_`s', 0.8),
    ('?cz', 0.85),
    ('FLk', 0.9),
    ('PTYaeovxy', 0.95),
    ('$0123456789ESbdghnpqu{}', 1.0),
    ('K', 1.05),
    ('ABCRVXZ', 1.1),
    ('U', 1.15),
    ('DGHN', 1.2),
    ('&OQ', 1.25),
    ('#+<=>^w~', 1.3),
    ('M', 1.35),
    ('%', 1.5),
    ('@Wm', 1.55),
)
"""The printable ASCII characters by advance width in the report's face (DejaVu Sans, regular), in
widths of its digit zero, to the nearest 0.05: read from the font's horizontal metrics (hmtx)."""
CHAR_WIDTH_CH = {c: w for chars, w in _ASCII_WIDTHS for c in chars}
_ZERO_WIDTH = frozenset("\u200b\u2066\u2067\u2068\u2069")
"""The soft breaks and bidirectional isolates the renderer adds: they print nothing."""
_WORD_BREAK = re.compile("[\\s\u200b]+")


def text_width_ch(text: str) -> float:
    """About how wide ``text`` prints in body type, in widths of the digit zero (CSS ``ch``): each
    ASCII character at its width in the report's face (CHAR_WIDTH_CH), anything else as wide as a
    digit, the renderer's invisible marks as nothing."""
    return sum(0.0 if c in _ZERO_WIDTH else CHAR_WIDTH_CH.get(c, 1.0) for c in text)


def _longest_word(text: str) -> float:
    return max((text_width_ch(w) for w in _WORD_BREAK.split(text)), default=0.0)


def column_widths(columns: list[str], rows: list[list[str]], numeric: list[bool]) -> list[str] | None:
    """Each column's share of the table width ("31.8%"), so that the PDF engine can lay the table out
    with fixed column widths instead of measuring every cell's narrowest and widest size (automatic
    layout); None when the columns cannot all fit, and the table is then laid out automatically.

    Sizes are estimated from the characters (:func:`text_width_ch`; headers are bold, HEADER_WIDEN
    wider). A column needs its longest word (at most TEXT_COLUMN_CAP_CH: a longer word breaks, as it
    would anyway), and a numeric column, never wrapped, its longest value in full; it would like its
    longest cell and its header on one line. This is how automatic layout shares a table's width
    (CSS 2.1, 17.5.2.2): when every column gets what it would like, the space left over goes to all
    columns in proportion to it; otherwise each gets what it needs and the rest is shared in
    proportion to how much more each would like. The result depends only on the strings, so it is
    the same for the HTML and the PDF and from run to run."""
    n = len(columns)
    if n == 0 or any(len(row) != n for row in rows):
        return None
    needs, likes = [], []
    for i in range(n):
        head, body = str(columns[i]), [row[i] for row in rows]
        word = max([HEADER_WIDEN * _longest_word(head)] + [_longest_word(c) for c in body])
        need = min(word, TEXT_COLUMN_CAP_CH)
        if numeric[i]:
            need = max([need] + [text_width_ch(c) for c in body])
        like = max([need, HEADER_WIDEN * text_width_ch(head)] + [text_width_ch(c) for c in body])
        needs.append(need + CELL_PADDING_CH)
        likes.append(like + CELL_PADDING_CH)
    if sum(likes) <= TABLE_WIDTH_CH:
        widths = likes
    else:
        spare = TABLE_WIDTH_CH - sum(needs)
        if spare < 0:
            return None
        extra = sum(likes) - sum(needs)
        widths = [need + spare * (like - need) / extra for need, like in zip(needs, likes)]
    total = sum(widths)
    return [f"{100 * w / total:.1f}%" for w in widths]


def _is_number(c) -> bool:
    return isinstance(c, (int, float)) and not isinstance(c, bool)


def _numeric_column(rows, i: int) -> bool:
    """True when every filled cell of column ``i`` is a number: it is then right-aligned and unbroken."""
    cells = [row[i] for row in rows if i < len(row) and row[i] is not None]
    return bool(cells) and all(_is_number(c) for c in cells)


def _figure_drawing(f) -> tuple[str | None, str]:
    """The figure's data URI and its printed width (CSS, "" for the drawing's own size).

    A PNG is printed at its drawing size (pixels at :data:`~auditor.figures.PNG_DPI` per inch, the
    width a vector drawing of the same figure had), never scaled by the screen's pixel density."""
    if f.problem:
        return None, ""
    if f.png:
        return _png_data_uri(f.png), _png_width(f.png)
    if f.svg:
        return _svg_data_uri(f.svg), ""
    try:
        from ..figures import to_png

        png = to_png(f)
        return _png_data_uri(png), _png_width(png)
    except Exception:  # confined to this figure; the pipeline path records the reason
        return None, ""


def _png_width(png: bytes) -> str:
    from ..figures import PNG_DPI, png_size

    return f"{png_size(png)[0] / PNG_DPI:.3f}in"


SUBFINDING_COLUMNS = ("Question", "Answer", "Evidence")
"""The headers of a finding's table of questions, for its column widths."""
ESTIMATE_COLUMNS = ("Quantity", "Estimate", "95% interval", "p")
"""The estimates table's headers at the default level; the interval's heading is replaced by the one
the report prints (``interval_heading``, naming the audit's level) when widths are planned."""


def estimate_widths(estimates: list[dict], interval_heading: str = ESTIMATE_COLUMNS[2]) -> list[str] | None:
    """The column widths of a finding's estimates table (:func:`column_widths`): the quantity, with
    its unit, is text, and so is its note, on a line of its own (a row of its own here); the estimate,
    interval and p are numbers."""
    rows = [[text, e["value"], e["ci"], e["p"]] for e in estimates
            for text in (e["name"] + (f" ({e['unit']})" if e["unit"] else ""), e["note"] or "")]
    columns = [ESTIMATE_COLUMNS[0], ESTIMATE_COLUMNS[1], interval_heading, ESTIMATE_COLUMNS[3]]
    return column_widths(columns, rows, [False, True, True, True])


def level_heading(audit: Audit) -> str:
    """The estimates tables' interval heading, naming the audit's level ("90% interval")."""
    return f"{level_label(audit.provenance.confidence_level)} interval"


def result_view(r: CheckResult, figure_no: list[int], interval_heading: str = ESTIMATE_COLUMNS[2]) -> dict:
    figs = []
    for f in r.figures:
        figure_no[0] += 1
        src, width = _figure_drawing(f)
        caption = f.caption if src else f"This figure could not be drawn: {f.problem or 'drawing failed'}."
        figs.append({"number": figure_no[0], "title": f.title, "caption": caption,
                     "src": src or _svg_data_uri(UNDRAWN_SVG), "width": width})
    subfindings = [{"question": s.question, "verdict": s.verdict.value,
                    "verdict_class": VERDICT_CLASS[s.verdict], "evidence": s.evidence} for s in r.subfindings]
    estimates = [{"name": e.name, "value": number(e.value), "ci": _ci(e.lower, e.upper),
                  "p": p_text(e.p_value), "unit": e.unit, "note": e.note} for e in r.estimates]
    return {
        "check_id": r.check_id,
        "check_title": r.check_title,
        "verdict": r.verdict.value,
        "verdict_class": VERDICT_CLASS[r.verdict],
        "headline": r.headline,
        "reason": r.reason,
        "recommendation": r.recommendation,
        "method": r.method,
        "subfindings": subfindings,
        "subfinding_widths": column_widths(list(SUBFINDING_COLUMNS),
                                           [[s["question"], s["verdict"], s["evidence"]] for s in subfindings],
                                           [False, False, False]),
        "estimates": estimates,
        "estimate_widths": estimate_widths(estimates, interval_heading),
        "tables": [table_view(t) for t in r.tables],
        "figures": figs,
        "caveats": r.caveats,
        "references": r.references,
    }


def audit_view(audit: Audit) -> dict:
    """Everything the HTML template prints, as display strings, with every user-supplied string in a
    bidirectional isolate (:mod:`auditor.render.bidi`) wherever it appears."""
    return UserText(audit_user_strings(audit)).view(_audit_strings(audit))


def _audit_strings(audit: Audit) -> dict:
    """The report's display strings before user text is isolated."""
    checks = sorted(audit.checks, key=lambda c: (c.order, c.id))
    by_key = {(r.outcome, r.check_id): r for r in audit.results}
    grid = []
    for o in audit.outcomes:
        cells = []
        for c in checks:
            r = by_key.get((o["param"], c.id))
            cells.append(None if r is None else {"verdict": r.verdict.value,
                                                 "verdict_class": VERDICT_CLASS[r.verdict],
                                                 "anchor": f"{o['param']}--{c.id}"})
        grid.append({"param": o["param"], "label": o["label"], "heading": outcome_heading(o["label"], o["param"]),
                     "cells": cells})
    figure_no = [0]
    sections = []
    for o in audit.outcomes:
        results = [result_view(r, figure_no, level_heading(audit)) for r in audit.results
                   if r.outcome == o["param"]]
        sections.append({
            "param": o["param"], "label": o["label"], "heading": outcome_heading(o["label"], o["param"]),
            "facts": o.get("facts") or [
                ("Scale", o["scale"] + (f" (levels {', '.join(number(v) for v in o['levels'])})"
                                        if o["levels"] else "")),
                ("Unit", o["unit"] or "–"),
                ("Bounds", _ci(*o["bounds"]) if any(b is not None for b in o["bounds"]) else "none declared"),
                ("Visits", f"baseline {o['baseline_visit'] or '–'}; follow-up {', '.join(o['followup_visits'])}"
                           f" (main: {o['main_followup']})"
                           + (f"; screening {o['screening_visit']}" if o["screening_visit"] else "")),
                ("Planned analysis", PLANNED_TEXT.get(o["planned_analysis"], o["planned_analysis"])),
                ("Entry criterion", o["entry_criterion"] or "none declared"),
                ("Risk endpoint", (outcome_heading(o.get("risk_endpoint_label") or o["risk_endpoint"],
                                                   o["risk_endpoint"]) if o["risk_endpoint"] else "none declared")),
            ],
            "records": [{"rule": c["rule"], "records": f"{c['records_removed']:,}",
                         "participants": f"{c['participants_removed']:,}", "left": f"{c['records_after']:,}"}
                        for c in o.get("record_selection") or []],
            "results": results,
        })
    headlines = [{"param": r.outcome, "label": r.outcome_label, "check": r.check_title,
                  "verdict": r.verdict.value, "verdict_class": VERDICT_CLASS[r.verdict],
                  "headline": r.headline, "anchor": f"{r.outcome}--{r.check_id}"} for r in audit.results]
    cited = sorted({k for r in audit.results for k in r.references})
    p = audit.provenance
    return {
        "study_id": audit.study_id,
        "title": audit.title,
        "design": "parallel-group randomised" if audit.design == "parallel" else "single-arm before-after",
        "arms": audit.arms,
        "control_arm": audit.control_arm,
        "blinded": audit.blinded,
        "checks": [{"id": c.id, "title": c.title} for c in checks],
        "methods": [{"id": c.id, "title": c.title, "summary": c.summary,
                     "method": next((r.method for r in audit.results if r.check_id == c.id and r.method), "")}
                    for c in checks],
        "grid": grid,
        "headlines": headlines,
        "sections": sections,
        "references": [{"key": k, "text": REFERENCES[k]} for k in cited],
        "cautions": audit.cautions,
        "provenance": {
            "analysis_date": p.analysis_date,
            "tool_version": p.tool_version,
            "libraries": sorted(p.library_versions.items()),
            "metadata_sha256": p.metadata_sha256,
            "files": [{"role": f.role, "path": f.path, "sha256": f.sha256, "rows": number(f.rows)} for f in p.files],
            "options": sorted((k, str(v)) for k, v in p.options.items()),
            "seed": p.seed,
            "platform": p.platform,
            "thresholds": sorted((k, number(v)) for k, v in p.thresholds.items()),
            "confidence_level": level_label(p.confidence_level),
        },
        "interval_heading": level_heading(audit),
        "level_statement": (f"Every interval in this audit is a two-sided {level_label(p.confidence_level)} "
                            "confidence interval, and every verdict that rests on an interval is judged at that "
                            "level (--level, or confidence_level in study.toml)."),
        "left_out": None if audit.left_out is None else left_out_view(audit),
        "schema_version": audit.schema_version,
        **summary_view(audit),
        "marking": audit_marking(audit)[0],
        "marking_class": audit_marking(audit)[1],
        "cover": cover_view(audit),
        "withheld": list(audit.report.withheld),
    }


def summary_view(audit: Audit) -> dict:
    """The label and the numbered draft comments of an audit from published summaries (empty
    label and no comments for a data audit)."""
    if not isinstance(audit, SummaryAudit):
        return {"source_label": "", "comments": []}
    return {"source_label": audit.source_label,
            "comments": [{"number": c.number, "label": c.outcome_label, "concern": c.concern,
                          "evidence": c.evidence, "request": c.request} for c in audit.comments]}


def cover_view(audit: Audit) -> list[tuple[str, str]]:
    """The report's own fields for the cover (data cut, version, author, interim look), those given only."""
    r = audit.report
    rows = [("Data cut", r.data_cut), ("Report version", r.report_version), ("Prepared by", r.author)]
    out = [(k, v) for k, v in rows if v]
    if r.interim:
        out.append(("Look", "interim analysis (not the final analysis)"))
    return out


VERDICT_WORST_FIRST = sorted(Verdict, key=lambda v: -v.rank)


def outcome_paragraph(o: dict, results: list[CheckResult], order: dict[str, int]) -> dict:
    """One outcome's memo paragraph, assembled from its results: the planned analysis, the worst finding's
    verdict and headline (which states the consequence with its interval), the recommended analysis of
    that finding, the other findings that are not sound (verdict and headline), and the sound ones by title
    (descriptive "for information" findings are not listed). Ties between equally bad findings go to a
    judging check before a descriptive one, to one that recommends an analysis, then to the check that
    comes first in the report."""
    quiet = (Verdict.SOUND, Verdict.FOR_INFORMATION)
    ranked = sorted(results, key=lambda r: (-r.verdict.rank, r.verdict is Verdict.FOR_INFORMATION,
                                            not r.recommendation, order.get(r.check_id, 0)))
    advised = [r for r in ranked if r.recommendation]
    lead = ranked[0] if ranked else None
    advice = advised[0].recommendation if advised else ""
    others = [r for r in ranked[1:] if r.verdict not in quiet]
    sound = [r.check_title for r in ranked[1:] if r.verdict is Verdict.SOUND]
    return {
        "param": o["param"],
        "heading": outcome_heading(o["label"], o["param"]),
        "planned": PLANNED_TEXT.get(o["planned_analysis"], o["planned_analysis"]),
        "lead": None if lead is None else {"check": lead.check_title, "verdict": lead.verdict.value,
                                            "verdict_class": VERDICT_CLASS[lead.verdict],
                                            "headline": lead.headline},
        "recommendation": _sentence(advice) if advice else "",
        "recommended_by": advised[0].check_title if advised else "",
        "others": [{"check": r.check_title, "verdict": r.verdict.value, "verdict_class": VERDICT_CLASS[r.verdict],
                    "headline": r.headline} for r in others],
        "sound": ", ".join(sound),
        "cited": sorted({k for r in ranked if r is lead or r in others for k in r.references}),
    }


def _sentence(text: str) -> str:
    """``text`` with a capital first letter and a closing full stop."""
    text = text.strip()
    return text[:1].upper() + text[1:] + ("" if text.endswith(".") else ".")


def memo_view(audit: Audit) -> dict:
    """What the short memo prints: the cover, the verdict grid, one paragraph per outcome, the cautions and
    the sources cited, as display strings (user text isolated as in the full report)."""
    full = _audit_strings(audit)
    order = {c.id: c.order for c in audit.checks}
    paragraphs = [outcome_paragraph(o, [r for r in audit.results if r.outcome == o["param"]], order)
                  for o in audit.outcomes]
    keys = ("study_id", "title", "design", "arms", "control_arm", "blinded", "checks", "grid", "references",
            "cautions", "marking", "marking_class", "cover", "withheld", "schema_version")
    view = {k: full[k] for k in keys}
    cited = sorted({k for p in paragraphs for k in p.pop("cited")})
    view["references"] = [{"key": k, "text": REFERENCES[k]} for k in cited]
    view.update(paragraphs=paragraphs, analysis_date=full["provenance"]["analysis_date"],
                tool_version=full["provenance"]["tool_version"],
                counts=verdict_tally(audit))
    return UserText(audit_user_strings(audit)).view(view)


def verdict_tally(audit: Audit) -> str:
    """'3 unsupported, 4 caution, 19 sound': how many findings have each verdict, worst first."""
    counts = [(v, sum(r.verdict is v for r in audit.results)) for v in VERDICT_WORST_FIRST]
    return ", ".join(f"{n} {v.value}" for v, n in counts if n)


def left_out_view(audit: Audit) -> list[dict]:
    """The participant listing grouped by outcome, in the report's outcome order."""
    labels = {o["param"]: o["label"] for o in audit.outcomes}
    return [{"param": p, "label": labels[p], "heading": outcome_heading(labels[p], p),
             "rows": [{"subject": x.subject, "reason": x.reason} for x in audit.left_out if x.outcome == p]}
            for p in labels]
