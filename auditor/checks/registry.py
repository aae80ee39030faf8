"""The one place where checks are registered.

A check is a function ``run(data: OutcomeData, ctx: CheckContext) -> CheckResult`` plus a predicate
that says to which outcomes it applies. The pipeline is then "for each outcome, for each applicable
check"; adding a check means one new module that calls :func:`register`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

from ..metadata import OutcomeSpec, Thresholds


class NotAssessable(Exception):
    """Raised inside a check when the data cannot answer its question; the reason is reported."""


@dataclass(frozen=True)
class CheckContext:
    """Options every check may consult."""

    seed: int
    blinded: bool
    level: float = 0.95
    quick: bool = False
    """Fewer resamples (used by tests and the quick self-check)."""
    strict: bool = False
    """Raise defects of the tool instead of reporting them (see :mod:`auditor.failures`)."""
    thresholds: Thresholds = field(default_factory=Thresholds)
    """The materiality conventions of the study (``[thresholds]`` in study.toml, else the defaults)."""


@dataclass(frozen=True)
class CheckDef:
    id: str
    title: str
    applies: Callable[[OutcomeSpec, str], bool]
    """Given the outcome's spec and the design ("parallel" or "single-arm")."""
    run: Callable
    order: int
    needs_arms: bool = False
    """A check that cannot run at all without the arms (not assessed in a blinded report)."""
    summary: str = ""


_REGISTRY: dict[str, CheckDef] = {}


def register(id: str, title: str, applies: Callable[[OutcomeSpec, str], bool], order: int,
             needs_arms: bool = False, summary: str = ""):
    """Decorator that registers a check function under a stable id."""

    def wrap(fn):
        if id in _REGISTRY:
            raise ValueError(f"check id '{id}' registered twice")
        _REGISTRY[id] = CheckDef(id, title, applies, fn, order, needs_arms, summary)
        return fn

    return wrap


def all_checks() -> list[CheckDef]:
    """Registered checks in report order."""
    from . import _load_all  # noqa: F401  (imports every check module once)

    return sorted(_REGISTRY.values(), key=lambda c: (c.order, c.id))


def get_check(check_id: str) -> CheckDef:
    for c in all_checks():
        if c.id == check_id:
            return c
    raise KeyError(check_id)
