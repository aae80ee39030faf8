"""Input problems, collected together and reported at once.

Every problem names the file, the row or key, the column, what is wrong and how to fix it, so that a
user can mend a study folder in one pass instead of one error per run.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field


@dataclass(frozen=True)
class InputProblem:
    """One thing wrong with the study folder."""

    file: str
    where: str
    """The row (``row 14``), the metadata key (``outcomes[2].scale``) or ``-`` for the whole file."""
    column: str
    problem: str
    fix: str
    severity: str = "error"
    """``error`` stops the audit; ``warning`` is reported and the audit goes on."""

    def one_line(self) -> str:
        col = f" column {self.column}:" if self.column and self.column != "-" else ""
        where = f" {self.where}" if self.where and self.where != "-" else ""
        return f"{self.file}:{where}{col} {self.problem}. Fix: {self.fix}."


class StudyInputError(Exception):
    """Raised when a study folder has problems; carries all of them."""

    def __init__(self, problems: list[InputProblem]):
        self.problems = sorted(problems, key=_problem_sort_key)
        super().__init__("\n".join(p.one_line() for p in self.problems))


def _problem_sort_key(p: InputProblem):
    return (p.file, p.where, p.column, p.problem)


@dataclass
class ProblemLog:
    """Accumulates problems while a study is read; raise once at the end."""

    problems: list[InputProblem] = field(default_factory=list)

    def add(self, file: str, where: str, column: str, problem: str, fix: str,
            severity: str = "error") -> None:
        self.problems.append(InputProblem(file, where, column, problem, fix, severity))

    @property
    def errors(self) -> list[InputProblem]:
        return [p for p in self.problems if p.severity == "error"]

    @property
    def warnings(self) -> list[InputProblem]:
        return [p for p in self.problems if p.severity == "warning"]

    def raise_if_errors(self) -> None:
        if self.errors:
            raise StudyInputError(self.errors)


def did_you_mean(word: str, choices) -> str:
    """A short suggestion naming the closest valid choice, or listing the valid choices."""
    choices = sorted(str(c) for c in choices)
    close = difflib.get_close_matches(str(word), choices, n=1, cutoff=0.6)
    if close:
        return f"did you mean '{close[0]}'?"
    shown = ", ".join(f"'{c}'" for c in choices[:12])
    more = " ..." if len(choices) > 12 else ""
    return f"valid choices are {shown}{more}"


def rows_text(rows, limit: int = 5) -> str:
    """'rows 3, 8, 12 and 4 more' from 0-based data-row positions (reported 1-based, header = row 1)."""
    rows = [int(r) + 2 for r in rows]
    head = ", ".join(str(r) for r in rows[:limit])
    extra = f" and {len(rows) - limit} more" if len(rows) > limit else ""
    return ("row " if len(rows) == 1 else "rows ") + head + extra
