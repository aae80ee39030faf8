"""User text kept from reordering the report's own text: bidirectional isolates.

A label, arm or visit name may carry right-to-left letters or explicit bidirectional controls (a
right-to-left override, U+202E, say). Printed inside the tool's sentences, such a control reverses
everything after it up to the end of the paragraph. Each user string is therefore wrapped in
FIRST STRONG ISOLATE ... POP DIRECTIONAL ISOLATE (Unicode Bidirectional Algorithm, UAX #9), which
confines its direction to itself, and any explicit control found outside a user string is shown as a
visible escape. Rendering only: JSON and CSV keep the text as written.
"""

from __future__ import annotations

import re
import unicodedata

from ..errors import BIDI_CONTROL_CHARS

FSI, PDI = "\u2068", "\u2069"
_INITIATORS = frozenset("\u2066\u2067\u2068")
"""LEFT-TO-RIGHT, RIGHT-TO-LEFT and FIRST STRONG ISOLATE: each is closed by one PDI."""
_EXPLICIT = re.compile("[\u202a-\u202e\u2066-\u2069]")
"""Embeddings, overrides, their pop, isolates and their pop: the controls that change the
direction of text after them."""
_RTL_CLASSES = frozenset({"R", "AL", "AN", "LRE", "RLE", "LRO", "RLO", "PDF", "LRI", "RLI", "FSI", "PDI"})
_ANY_BIDI = re.compile(f"[{BIDI_CONTROL_CHARS}]")


def needs_isolation(text: str) -> bool:
    """True when ``text`` holds a bidirectional control or right-to-left content, which could reorder
    the text printed around it; plain left-to-right text needs no isolate."""
    return bool(_ANY_BIDI.search(text)) or any(unicodedata.bidirectional(c) in _RTL_CLASSES for c in text)


def escaped(char: str) -> str:
    """A control character as the visible escape the terminal messages use (``\\u202e``)."""
    return char.encode("unicode_escape").decode("ascii")


def balanced(text: str, escape_outside: bool = False) -> str:
    """``text`` with its own isolates balanced: a PDI with no initiator before it is shown as an
    escape (it would close the isolate around the string), and initiators left open are closed at
    the end (they would swallow the isolate's own PDI). With ``escape_outside``, every other
    explicit control outside an isolate is shown as an escape too."""
    out, depth = [], 0
    for c in text:
        if c in _INITIATORS:
            depth += 1
        elif c == PDI:
            if depth == 0:
                out.append(escaped(c))
                continue
            depth -= 1
        elif escape_outside and depth == 0 and _EXPLICIT.match(c):
            out.append(escaped(c))
            continue
        out.append(c)
    return "".join(out) + PDI * depth


def isolate(text: str) -> str:
    """``text`` in a first-strong isolate, so that nothing in it reorders the text around it."""
    return f"{FSI}{balanced(text)}{PDI}"


def neutralised(text: str) -> str:
    """``text`` with every explicit bidirectional control shown as a visible escape: for text outside
    any known user string, where a control can only have come from user input the tool could not
    delimit."""
    return _EXPLICIT.sub(lambda m: escaped(m.group()), text)


def contained(text: str) -> str:
    """A last line of defence for any printed string: explicit controls outside an isolate are shown as
    escapes and the string's own isolates are balanced, so no control reaches past the string.
    Text inside balanced isolates (the user strings :class:`UserText` wrapped) is left as it is."""
    if not _EXPLICIT.search(text):
        return text
    return balanced(text, escape_outside=True)


class UserText:
    """Knows the user-supplied strings of one audit and isolates them wherever they are printed."""

    def __init__(self, strings):
        risky = sorted({s for s in strings if isinstance(s, str) and s and needs_isolation(s)},
                       key=lambda s: (-len(s), s))
        self._pattern = re.compile("|".join(re.escape(s) for s in risky)) if risky else None

    def text(self, value: str) -> str:
        """A display string with each user string in it isolated and any other explicit control
        escaped (longest user strings first, so a label that contains an arm name stays whole)."""
        if not (self._pattern or _EXPLICIT.search(value)):
            return value
        if self._pattern is None:
            return neutralised(value)
        out, last = [], 0
        for m in self._pattern.finditer(value):
            out += [neutralised(value[last:m.start()]), isolate(m.group())]
            last = m.end()
        out.append(neutralised(value[last:]))
        return "".join(out)

    def view(self, value, skip=frozenset({"src", "verdict_class"})):
        """Every string of a view (dicts, lists and tuples of display strings) through :meth:`text`,
        leaving the keys in ``skip`` (inline figure data, CSS class names) untouched."""
        if isinstance(value, str):
            return self.text(value)
        if isinstance(value, dict):
            return {k: v if k in skip else self.view(v, skip) for k, v in value.items()}
        if isinstance(value, (list, tuple)):
            return type(value)(self.view(v, skip) for v in value)
        return value


def audit_user_strings(audit) -> list[str]:
    """The strings of an audit that came from the user: study id and title, arms, and each outcome's
    code, label, unit, visit names and endpoint."""
    out = [audit.study_id, audit.title, audit.control_arm, *audit.arms]
    for o in audit.outcomes:
        out += [o.get("param"), o.get("label"), o.get("unit"), o.get("baseline_visit"), o.get("main_followup"),
                o.get("screening_visit"), o.get("risk_endpoint"), o.get("risk_endpoint_label"),
                *(o.get("followup_visits") or [])]
    out += [r.outcome_label for r in audit.results]
    report = getattr(audit, "report", None)
    if report is not None:
        out += [report.author, report.report_version]
    return [str(s) for s in out if s is not None]
