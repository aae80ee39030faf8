"""auditor: screening audits of planned clinical-trial analyses against the trial's own data."""

__version__ = "0.1.0"
