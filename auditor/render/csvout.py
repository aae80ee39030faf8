"""findings.csv: one row per outcome and check, safe to open in a spreadsheet."""

from __future__ import annotations

import csv
import io

from ..results import Audit

FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")
COLUMNS = ["study_id", "source", "outcome", "outcome_label", "check_id", "check_title", "verdict", "headline",
           "reason", "n_estimates", "caveats", "analysis_date", "blinded", "tool_version", "metadata_sha256",
           "data_sha256", "subfinding_verdicts", "recommendation"]
"""findings.csv's columns; ``analysis_date`` to ``data_sha256`` identify the audit, and the last two
describe the finding again: its sub-findings' verdicts and the analysis it recommends (see
docs/pipelines.md). New columns are added at the end, so a column keeps its position."""
IDENTITY_COLUMNS = ("analysis_date", "blinded", "tool_version", "metadata_sha256", "data_sha256")


def data_hashes(audit: Audit) -> str:
    """The data files' SHA-256 as ``role=hash`` pairs separated by spaces, in the order read."""
    return " ".join(f"{f.role}={f.sha256}" for f in audit.provenance.files)


def audit_identity(audit: Audit) -> dict:
    """What identifies an audit in a pipeline: analysis date (the data cut's date as recorded), blinding,
    tool version and the hashes of study.toml and of each data file."""
    return {"analysis_date": audit.provenance.analysis_date, "blinded": "true" if audit.blinded else "false",
            "tool_version": audit.provenance.tool_version, "metadata_sha256": audit.provenance.metadata_sha256,
            "data_sha256": data_hashes(audit)}


def subfinding_verdicts(r) -> str:
    """A result's sub-finding verdicts as ``id=verdict`` pairs separated by ``; ``, in report order."""
    return "; ".join(f"{s.id}={s.verdict.value}" for s in r.subfindings)


def neutralise(cell):
    """Prefix text that a spreadsheet would run as a formula with an apostrophe (OWASP advice on
    CSV injection); numbers are left as they are."""
    if isinstance(cell, str) and cell.startswith(FORMULA_PREFIXES):
        return "'" + cell
    return cell


def rows(audit: Audit) -> list[list]:
    out = []
    ident = audit_identity(audit)
    for r in audit.results:
        out.append([audit.study_id, audit.source, r.outcome, r.outcome_label, r.check_id, r.check_title,
                    r.verdict.value, r.headline, r.reason, len(r.estimates), " | ".join(r.caveats),
                    *(ident[c] for c in IDENTITY_COLUMNS), subfinding_verdicts(r), r.recommendation])
    return out


def findings_csv(audit: Audit) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(COLUMNS)
    for row in rows(audit):
        w.writerow([neutralise(c) for c in row])
    return buf.getvalue()
