"""Telling a defect of the tool from a computation that the data cannot support.

A check that fails on a singular design or a model that will not converge has met a property of the
data: the finding is "not assessable", with the reason in the user's terms. A check that fails with a
``TypeError`` or a ``KeyError`` has met a bug: that is reported as a defect of the tool (its own
verdict, and an exception in strict mode), never dressed up as a data limitation.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

_PACKAGE = Path(__file__).resolve().parent

DEFECT_TYPES: tuple[type[BaseException], ...] = (
    TypeError, LookupError, AttributeError, NameError, AssertionError, ImportError, NotImplementedError,
    RecursionError, SyntaxError, UnicodeError, MemoryError,
)
"""Exceptions that only a programming error (or an exhausted machine) produces inside a check.
``LookupError`` covers ``KeyError`` and ``IndexError``; ``UnicodeError`` is listed before the
numerical ``ValueError`` it derives from."""


class ToolDefect(Exception):
    """Raised in strict mode when a check or a figure hits a defect of the tool."""


def _separation_error() -> type[BaseException] | None:
    try:
        from statsmodels.tools.sm_exceptions import PerfectSeparationError
    except ImportError:  # pragma: no cover - older or newer statsmodels
        return None
    return PerfectSeparationError


def is_defect(exc: BaseException) -> bool:
    """True for an exception that only a bug in the tool explains (see :data:`DEFECT_TYPES`)."""
    return isinstance(exc, DEFECT_TYPES)


def _raised_by_the_tool(exc: BaseException) -> bool:
    """True when the exception was raised by this package's own code, whose messages are written
    for the user ("the design matrix is singular ..."), not by a library."""
    tb = exc.__traceback__
    if tb is None:
        return False
    while tb.tb_next is not None:
        tb = tb.tb_next
    return _PACKAGE in Path(tb.tb_frame.f_code.co_filename).resolve().parents


def data_reason(exc: BaseException) -> str:
    """Why a computation failed on these data, in the user's terms: the tool's own message when the
    tool raised it, a plain description of the kind of failure when a library did (never a
    library's exception text)."""
    from .errors import one_line_text

    if _raised_by_the_tool(exc) and str(exc).strip():
        return one_line_text(str(exc), 300)
    sep = _separation_error()
    if isinstance(exc, np.linalg.LinAlgError):
        return "a model has no unique fit on these data (a singular or ill-conditioned design)"
    if sep is not None and isinstance(exc, sep):
        return "the event is perfectly predicted by the values (separation), so the risk model has no finite fit"
    if isinstance(exc, (ZeroDivisionError, OverflowError, FloatingPointError)):
        return "a computation overflowed or divided by zero on these data (extreme or constant values?)"
    if isinstance(exc, RuntimeError):
        return "a model did not converge on these data"
    return "a model could not be fitted to these data"


def defect_reason(exc: BaseException) -> str:
    """The one-line statement of a defect, naming the exception type so that it can be reported."""
    return (f"a defect in auditor stopped this computation ({type(exc).__name__}); this says nothing "
            "about the data. Please report it with the output of --debug --strict")
