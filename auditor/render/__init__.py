"""Rendering: JSON, CSV, HTML and PDF, all from an :class:`~auditor.results.Audit`. No statistics here."""
