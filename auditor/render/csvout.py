"""findings.csv: one row per outcome and check, safe to open in a spreadsheet."""

from __future__ import annotations

import csv
import io

from ..results import Audit

FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")
COLUMNS = ["study_id", "outcome", "outcome_label", "check_id", "check_title", "verdict", "headline",
           "reason", "n_estimates", "caveats"]


def neutralise(cell):
    """Prefix text that a spreadsheet would run as a formula with an apostrophe (OWASP advice on
    CSV injection); numbers are left as they are."""
    if isinstance(cell, str) and cell.startswith(FORMULA_PREFIXES):
        return "'" + cell
    return cell


def rows(audit: Audit) -> list[list]:
    out = []
    for r in audit.results:
        out.append([audit.study_id, r.outcome, r.outcome_label, r.check_id, r.check_title,
                    r.verdict.value, r.headline, r.reason, len(r.estimates), " | ".join(r.caveats)])
    return out


def findings_csv(audit: Audit) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(COLUMNS)
    for row in rows(audit):
        w.writerow([neutralise(c) for c in row])
    return buf.getvalue()
