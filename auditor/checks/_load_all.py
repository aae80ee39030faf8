"""Import every check module so that each registers itself. New checks are added here."""

from . import prepost  # noqa: F401
