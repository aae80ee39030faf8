"""What a fitting library warned about, kept as plain-words notes instead of being silenced.

A fit that warns (did not converge, an information matrix that could not be inverted, an overflow)
may still return numbers; whoever uses them must say so. :func:`fit_notes` records the warnings
raised inside its block and turns each kind into one sentence; the caller puts them in its result
(a caveat) or refuses the fit.
"""

from __future__ import annotations

import warnings
from contextlib import contextmanager
from typing import Iterator


def _describe(w: warnings.WarningMessage) -> str:
    name = w.category.__name__
    if name == "ConvergenceWarning":
        return "the fitting routine reported that it did not fully converge"
    if name == "HessianInversionWarning":
        return "the fit's information matrix could not be inverted reliably (standard errors doubtful)"
    if "Separation" in name:
        return "the outcome is (almost) perfectly predicted by the covariates (separation)"
    if issubclass(w.category, RuntimeWarning):
        return "an overflow or an invalid value occurred during the fit"
    return f"the fitting library issued a warning ({name})"


@contextmanager
def fit_notes() -> Iterator[list[str]]:
    """Record warnings raised in the block; on exit the yielded list holds one sentence per kind,
    in the order first seen. Deprecation and future warnings (about the library, not the fit) are
    left to the usual filters."""
    notes: list[str] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        warnings.simplefilter("default", DeprecationWarning)
        warnings.simplefilter("default", FutureWarning)
        yield notes
    for w in caught:
        if issubclass(w.category, (DeprecationWarning, FutureWarning, PendingDeprecationWarning)):
            continue
        text = _describe(w)
        if text not in notes:
            notes.append(text)
