"""The rules for command-line options, checked before a command does any work.

Each function takes the value of one option and returns the problems with it (an empty list when it
is fine), so that a command can collect every option problem, report them together with exit code 2
and write nothing. The rules shared with ``study.toml`` (seeds, dates) come from
:mod:`auditor.metadata`, so a value refused in one place is refused in the other.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Iterable

from .errors import CommandLineError, InputProblem, did_you_mean, option_problem
from .metadata import MAX_LEVEL, MAX_SEED, MIN_LEVEL, iso_date

PAPER_SIZES = ("A4", "letter")
FAIL_ON_LEVELS = ("failed", "not assessable", "caution", "unsupported")


def refuse_if_any(*groups: Iterable[InputProblem]) -> None:
    """Raise one :class:`CommandLineError` carrying every problem of every group, if there is any."""
    problems = [p for group in groups for p in group]
    if problems:
        raise CommandLineError(problems)


def seed_problems(seed: int | None, option: str = "--seed") -> list[InputProblem]:
    """A seed must be a whole number from 0 to MAX_SEED, as in study.toml (numpy refuses negatives)."""
    if seed is None or 0 <= seed <= MAX_SEED:
        return []
    return [option_problem(option, f"{seed} is not a seed", f"give a whole number from 0 to {MAX_SEED}")]


def level_problems(level: float | None, option: str = "--level") -> list[InputProblem]:
    """A confidence level is a number from MIN_LEVEL to MAX_LEVEL, as study.toml's confidence_level."""
    if level is None or (math.isfinite(level) and MIN_LEVEL <= level <= MAX_LEVEL):
        return []
    return [option_problem(option, f"{level:g} is not a confidence level",
                           f"give a proportion from {MIN_LEVEL:g} to {MAX_LEVEL:g}, such as 0.9 or 0.95")]


def date_problems(text: str | None, option: str) -> list[InputProblem]:
    """A date option must be a real calendar date written YYYY-MM-DD, as study.toml's analysis_date."""
    if text is None or iso_date(text) is not None:
        return []
    return [option_problem(option, f"'{text}' is not a calendar date written YYYY-MM-DD",
                           "give a date such as 2026-11-20")]


def check_id_problems(ids: Iterable[str], known: Iterable[str], option: str = "--check") -> list[InputProblem]:
    """Every ``--check`` must name a registered check; an unknown one would give an empty audit."""
    known = sorted(known)
    problems = []
    for cid in ids:
        if cid in known:
            continue
        hint = did_you_mean(cid, known)
        close = f" ({hint})" if hint.startswith("did you mean") else ""
        problems.append(option_problem(option, f"'{cid}' is not a check id",
                                       f"use one of {', '.join(known)}{close}"))
    return problems


def registered_check_ids() -> list[str]:
    """The ids of the checks this installation knows, in report order."""
    from .checks.registry import all_checks

    return [c.id for c in all_checks()]


def paper_problems(paper: str, option: str = "--paper") -> list[InputProblem]:
    """The PDF page size must be A4 or letter (either case)."""
    if paper.lower() in (p.lower() for p in PAPER_SIZES):
        return []
    return [option_problem(option, f"'{paper}' is not a page size", f"use {' or '.join(PAPER_SIZES)}")]


def paper_size(paper: str) -> str:
    """The page size as the renderer names it (``A4`` or ``letter``), from an accepted option value."""
    return next(p for p in PAPER_SIZES if p.lower() == paper.lower())


def fail_on_problems(level: str | None, option: str = "--fail-on") -> list[InputProblem]:
    """The batch gate must be one of the levels the gate knows."""
    if level is None or level in FAIL_ON_LEVELS:
        return []
    hint = did_you_mean(level, FAIL_ON_LEVELS)
    close = f" ({hint})" if hint.startswith("did you mean") else ""
    return [option_problem(option, f"'{level}' is not a level", f"use one of {', '.join(FAIL_ON_LEVELS)}{close}")]


def jobs_problems(jobs: int, option: str = "--jobs") -> list[InputProblem]:
    """A number of parallel processes cannot be negative (0 means one per core)."""
    if jobs >= 0:
        return []
    return [option_problem(option, f"{jobs} is not a number of processes",
                           "give 1 or more, or 0 for one per core")]


def tolerance_problems(tolerance: float, option: str = "--tolerance") -> list[InputProblem]:
    """A relative tolerance must be a finite number of at least 0 (NaN would hide every change)."""
    if math.isfinite(tolerance) and tolerance >= 0:
        return []
    return [option_problem(option, f"{tolerance:g} is not a relative tolerance",
                           "give a finite number of 0 or more, such as 1e-6")]


def only_problems(prefix: str, case_ids: Iterable[str], option: str = "--only") -> list[InputProblem]:
    """``selfcheck --only`` must select at least one case; otherwise the report would be empty."""
    case_ids = sorted(case_ids)
    if not prefix or any(c.startswith(prefix) for c in case_ids):
        return []
    return [option_problem(option, f"no validation case id starts with '{prefix}'",
                           f"give the start of a case id ({did_you_mean(prefix, case_ids)})")]


def new_file_problems(path: Path | None, option: str, force: bool | None = None) -> list[InputProblem]:
    """A file a command will create must not be a folder and its folder must exist; an existing file
    is refused unless ``force`` is True (``force`` None: replacing is allowed)."""
    if path is None:
        return []
    if path.is_dir():
        return [option_problem(option, f"{path} is a folder", "give the path of a file to write")]
    if not path.parent.is_dir():
        return [option_problem(option, f"folder {path.parent} does not exist", "create it first or give another path")]
    if force is False and path.exists():
        return [option_problem(option, f"{path} already exists", "use --force or give another path")]
    return []


def data_file_problems(paths: list[Path], option: str = "DATA_FILES") -> list[InputProblem]:
    """``init`` reads one visit-level file and at most one participant-level file, each an existing file."""
    problems = []
    if len(paths) > 2:
        problems.append(option_problem(option, f"{len(paths)} files given, but init reads two at most",
                                       "give the visit-level file and, optionally, the participant-level file"))
    for p in paths:
        if p.is_dir():
            problems.append(option_problem(str(p), "is a folder", "give a data file (.csv, .parquet or .xpt)"))
        elif not p.exists():
            problems.append(option_problem(str(p), "does not exist", "correct the path"))
    return problems


OUTPUT_FORMATS = ("html", "pdf", "json", "csv")
"""What ``--formats`` may name: audit.html, audit.pdf, findings.json, findings.csv."""


def formats_problems(text: str, option: str = "--formats") -> list[InputProblem]:
    """``--formats`` is a comma-separated list of html, pdf, json and csv, at least one of them."""
    names = [n.strip().lower() for n in text.split(",")]
    if not any(names):
        return [option_problem(option, "names no output", f"give one or more of {','.join(OUTPUT_FORMATS)}")]
    problems = []
    for name in names:
        if name in OUTPUT_FORMATS:
            continue
        shown = name or "(empty)"
        hint = did_you_mean(name, OUTPUT_FORMATS) if name else ""
        close = f" ({hint})" if hint.startswith("did you mean") else ""
        problems.append(option_problem(option, f"'{shown}' is not an output format",
                                       f"use a comma-separated list of {', '.join(OUTPUT_FORMATS)}{close}"))
    return problems


def output_formats(text: str) -> tuple[str, ...]:
    """The accepted ``--formats`` value as format names, in the fixed order html, pdf, json, csv."""
    names = {n.strip().lower() for n in text.split(",")}
    return tuple(f for f in OUTPUT_FORMATS if f in names)
