"""comments.md: the numbered draft comments to a paper's authors, as Markdown ready to paste."""

from __future__ import annotations

from ..results import SummaryAudit
from .bidi import contained


def comments_markdown(audit: SummaryAudit) -> str:
    """One numbered point per concern: the outcome, the number behind it and the analysis to ask for.

    Plain words for the reviewer to edit; the cautions close the file, as they close every report.
    """
    lines = [f"# Draft comments to the authors: {contained(audit.study_id)}", "",
             f"Prepared from {audit.source_label} (analysis date {audit.provenance.analysis_date}). "
             "Edit before sending; every number is recomputed from the paper's reported summaries.", ""]
    if not audit.comments:
        lines += ["No concern was raised by the questions this audit can answer from summaries.", ""]
    for c in audit.comments:
        lines.append(contained(f"{c.number}. **{c.outcome_label}.** {c.evidence} {c.request}"))
        lines.append("")
    lines += ["---", "", "Cautions:", ""] + [f"- {c}" for c in audit.cautions] + [""]
    return "\n".join(lines)
