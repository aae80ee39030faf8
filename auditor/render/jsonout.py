"""findings.json: every number, verdict, caveat and reference of the audit, with a schema version."""

from __future__ import annotations

import json

from ..references import REFERENCES
from ..results import Audit


def findings_dict(audit: Audit) -> dict:
    d = audit.to_dict()
    keys = sorted({k for r in audit.results for k in r.references})
    d["references"] = {k: REFERENCES[k] for k in keys}
    return d


def findings_json(audit: Audit) -> str:
    """Stable JSON: sorted keys, fixed indentation, floats already rounded in the record."""
    return json.dumps(findings_dict(audit), indent=2, sort_keys=True, ensure_ascii=False) + "\n"
