"""Which participants each outcome's analysis leaves out, and why.

A reviewer who finds that 11 participants lack a follow-up value will want to know which ones, to
query the data manager. Identifiers are personal data, so this list enters an audit only when the
user asks for it (``auditor run --list-left-out``), and then only in the report's appendix and in
``findings.json``; never in the terminal summary, the CSV or a figure.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .results import LeftOut
from .study import OutcomeData


def missing_reasons(data: OutcomeData) -> list[tuple[str, str]]:
    """(column, reason) pairs whose missing value removes a participant from this outcome's analyses."""
    spec = data.spec
    frame = data.frame
    reasons = []
    if "baseline" in frame.columns:
        reasons.append(("baseline", f"no value at baseline ({spec.baseline_visit})"))
    reasons.append(("followup", f"no value at the main follow-up ({spec.main_followup})"))
    if "event" in frame.columns:
        reasons.append(("event", f"no value of the risk endpoint {spec.risk_endpoint}"))
    return reasons


NO_RECORD = "no record of this outcome in the visit data"


def left_out(data: OutcomeData, participants) -> list[LeftOut]:
    """Every participant that the outcome's analyses cannot use, sorted by identifier.

    ``participants`` are the identifiers of the participant file: one with no row at all for this
    outcome is listed as having no record; one with rows but a missing value the analyses need is
    listed once, with every such reason joined by "; ".
    """
    frame = data.frame
    why = pd.Series("", index=frame.index, dtype=object)
    for column, reason in missing_reasons(data):
        gone = frame[column].isna().to_numpy()
        why[gone] = np.where(why[gone] == "", reason, why[gone] + "; " + reason)
    keep = (why != "").to_numpy()
    rows = dict(zip(frame["subject"][keep].astype(str), why[keep]))
    present = set(frame["subject"].astype(str))
    rows.update({s: NO_RECORD for s in map(str, participants) if s not in present})
    return [LeftOut(data.spec.param, s, rows[s]) for s in sorted(rows)]
