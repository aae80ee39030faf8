"""Checks: each module registers one check with :func:`auditor.checks.registry.register`."""
