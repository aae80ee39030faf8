"""findings.json: every number, verdict, caveat and reference of the audit, with a schema version."""

from __future__ import annotations

import json

from ..references import REFERENCES
from ..results import Audit, without_figure_data


def findings_dict(audit: Audit, figure_data: bool = False) -> dict:
    """The audit as findings.json holds it; without ``figure_data`` the figures keep their id, kind,
    title and caption but not the arrays they are drawn from."""
    d = audit.to_dict()
    if not figure_data:
        without_figure_data(d)
    keys = sorted({k for r in audit.results for k in r.references})
    d["references"] = {k: REFERENCES[k] for k in keys}
    return d


def findings_json(audit: Audit, figure_data: bool = False) -> str:
    """Stable JSON: sorted keys, fixed indentation, floats already rounded in the record."""
    return json.dumps(findings_dict(audit, figure_data), indent=2, sort_keys=True, ensure_ascii=False) + "\n"
