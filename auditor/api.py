"""The Python API for notebooks: one call audits a folder.

    >>> import auditor.api as aud
    >>> a = aud.audit("example_study")        # doctest: +SKIP
    >>> a.findings_frame()                    # doctest: +SKIP
    >>> s = aud.audit_from_summaries("example_manuscript")   # a paper's published summaries  # doctest: +SKIP
"""

from __future__ import annotations

from .errors import InputProblem, StudyInputError
from .pipeline import AuditOptions, audit, audit_study
from .render.output import render_all, write_audit
from .results import Audit, CheckResult, Verdict
from .study import load_study
from .summaries.audit import audit_from_summaries

__all__ = ["audit", "audit_study", "AuditOptions", "load_study", "write_audit", "render_all", "Audit",
           "CheckResult", "Verdict", "InputProblem", "StudyInputError", "audit_from_summaries"]
