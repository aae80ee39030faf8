"""Input problems, collected together and reported at once.

Every problem names the file, the row or key, the column, what is wrong and how to fix it, so that a
user can mend a study folder in one pass instead of one error per run.
"""

from __future__ import annotations

import difflib
import re
from dataclasses import dataclass, field

MAX_PART_CHARS = 400
"""A problem or fix longer than this is clipped in its one-line form (a 100,000-character cell
quoted in a message would bury every other problem)."""

BIDI_CONTROL_CHARS = "\u061c\u200e\u200f\u202a-\u202e\u2066-\u2069"
"""The bidirectional formatting characters (marks, embeddings, overrides, isolates) as a regex
character range. Quoted from a label, one of them can reverse the tool's own text that follows."""
_CONTROL = re.compile(f"[\x00-\x1f\x7f-\x9f\u2028\u2029{BIDI_CONTROL_CHARS}]")


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
    by_arm: bool = False
    """The message names an arm or describes one (a lone participant's allocation, say): in a blinded
    run it must not reach the terminal, so the command line prints a pooled count instead."""

    def one_line(self) -> str:
        """``file: where column X: problem. Fix: how.`` on a single line, whatever the data held."""
        file, where, column = (one_line_text(x, 200) for x in (self.file, self.where, self.column))
        col = f" column {column}:" if column and column != "-" else ""
        where = f" {where}" if where and where != "-" else ""
        return f"{file}:{where}{col} {one_line_text(self.problem)}. Fix: {one_line_text(self.fix)}."


def one_line_text(text, limit: int = MAX_PART_CHARS) -> str:
    """``text`` with line breaks, bidirectional controls and other control characters shown as escapes
    (``\\u202e``), clipped to ``limit``.

    Messages quote cells and labels from the user's files; a quoted newline must not split a problem
    over two lines, a quoted right-to-left override must not reverse the rest of the message, and a
    huge cell must not flood the terminal.
    """
    text = _CONTROL.sub(lambda m: m.group().encode("unicode_escape").decode("ascii"), str(text))
    return text if len(text) <= limit else text[: limit - 1] + "…"


class StudyInputError(Exception):
    """Raised when a study folder has problems; carries all of them."""

    heading = "in the study folder"
    """What the problems concern, for the line printed above them."""

    def __init__(self, problems: list[InputProblem], heading: str | None = None):
        self.problems = sorted(problems, key=_problem_sort_key)
        if heading is not None:
            self.heading = heading
        super().__init__("\n".join(p.one_line() for p in self.problems))


class CommandLineError(StudyInputError):
    """Raised when options of a command are invalid; carries every option problem at once.

    A subclass of :class:`StudyInputError` so that every command maps it to exit code 2 the same way,
    with its own heading, since the study folder is not at fault.
    """

    heading = "on the command line"


def option_problem(option: str, problem: str, fix: str) -> InputProblem:
    """A problem with one command-line option, printed ``--option: problem. Fix: how.``"""
    return InputProblem(option, "-", "-", problem, fix)


def _problem_sort_key(p: InputProblem):
    """File, then place with row numbers compared as numbers (row 9 before row 10)."""
    where = [int(t) if t.isdigit() else t for t in re.split(r"(\d+)", p.where)]
    return (p.file, [(0, t) if isinstance(t, int) else (1, t) for t in where], p.column, p.problem)


@dataclass
class ProblemLog:
    """Accumulates problems while a study is read; raise once at the end."""

    problems: list[InputProblem] = field(default_factory=list)
    row_offsets: dict[str, int] = field(default_factory=dict)
    """Lines before the header of a file (a spreadsheet's ``sep=,`` line, say), by file label: row
    numbers counted from the header are moved down by this much so that they match the file's lines."""

    def add(self, file: str, where: str, column: str, problem: str, fix: str,
            severity: str = "error", by_arm: bool = False) -> None:
        offset = self.row_offsets.get(file, 0)
        if offset:
            where = shifted_rows(where, offset)
        self.problems.append(InputProblem(file, where, column, problem, fix, severity, by_arm))

    def skip_lines(self, file: str, lines: int) -> None:
        """Record that ``file``'s header is preceded by ``lines`` lines that were not read."""
        self.row_offsets[file] = self.row_offsets.get(file, 0) + lines

    @property
    def errors(self) -> list[InputProblem]:
        return [p for p in self.problems if p.severity == "error"]

    @property
    def warnings(self) -> list[InputProblem]:
        return [p for p in self.problems if p.severity == "warning"]

    def raise_if_errors(self, heading: str | None = None) -> None:
        """Raise one :class:`StudyInputError` carrying every error so far (``heading``: what they
        concern, when not the study folder)."""
        if self.errors:
            raise StudyInputError(self.errors, heading)


def shifted_rows(where: str, offset: int) -> str:
    """``rows 2, 5 and 3 more`` with every row number (not the count of further rows) moved by
    ``offset``; a place that is not a row reference is returned unchanged."""
    if not re.match(r"^rows? \d", where):
        return where
    head, sep, tail = where.partition(" and ")
    return re.sub(r"\d+", lambda m: str(int(m.group()) + offset), head) + sep + tail


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
