"""Audits of many studies at once, in parallel processes, one failing study never stopping the rest.

Each study is audited and rendered in a worker process; results come back in input order, so no
output depends on the number of jobs. The batch writes OUT/<study folder name>/ for each study,
OUT/index.html (links and a cross-study summary) and OUT/summary.csv.
"""

from __future__ import annotations

import csv
import io
import os
import re
import warnings
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from .errors import InputProblem, StudyInputError
from .results import Verdict


@dataclass(frozen=True)
class StudyOutcome:
    """What happened to one study of a batch."""

    folder: str
    name: str
    status: str
    """``ok`` or ``failed``."""
    study_id: str = ""
    error: str = ""
    n_outcomes: int = 0
    rows: list[dict] = field(default_factory=list)
    """One row per outcome and check: outcome, check_id, verdict, headline, subfinding_verdicts."""
    analysis_date: str = ""
    blinded: str = ""
    """``true`` or ``false`` as audited (for a failed study: as asked or declared, when known)."""
    tool_version: str = ""
    metadata_sha256: str = ""
    data_sha256: str = ""
    """``role=sha256`` of each data file, space-separated (see :func:`auditor.render.csvout.data_hashes`)."""
    source: str = "participant data"
    """What the study's numbers come from: ``participant data`` or ``published summaries``."""


def read_manifest(path: Path) -> list[Path]:
    """Study folders listed one per line, relative to the file.

    A blank line, or a line whose first non-blank character is ``#``, is skipped; any other line is
    a path, whole once stripped of surrounding spaces. There are no comments after a path, so a
    folder whose name holds ``#`` is audited under its own name, never cut short into another one.
    A manifest that cannot be read is an input problem (exit 2) naming the file.
    """
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        reason = "is not UTF-8 text" if isinstance(exc, UnicodeDecodeError) else (
            f"cannot be read ({exc.strerror or type(exc).__name__})")
        raise StudyInputError([InputProblem(str(path), "-", "-", reason,
                                            "give a text file listing one study folder per line")],
                              "in the batch manifest") from None
    out = []
    for line in text.splitlines():
        line = line.strip()
        if line and not line.startswith("#"):
            p = Path(line)
            out.append(p if p.is_absolute() else path.parent / p)
    return out


def expand_inputs(items: list[Path]) -> list[Path]:
    """Folders as given; a file is read as a manifest of folders."""
    out: list[Path] = []
    for item in items:
        out.extend(read_manifest(item) if item.is_file() else [item])
    return out


def output_names(folders: list[Path]) -> list[str]:
    """A safe, unique sub-folder name per study: the folder's name, then _2, _3... for repeats.

    Uniqueness is checked against every name already given, case-insensitively (so folders ``a``,
    ``a`` and ``a_2`` get ``a``, ``a_2`` and ``a_2_2``, and no two studies share an output folder on
    a case-insensitive filesystem either)."""
    taken: set[str] = set()
    names = []
    for f in folders:
        base = re.sub(r"[^A-Za-z0-9._-]+", "_", Path(f).resolve().name or "study").strip("._") or "study"
        name, k = base, 1
        while name.lower() in taken:
            k += 1
            name = f"{base}_{k}"
        taken.add(name.lower())
        names.append(name)
    return names


BATCH_FILES = ("index.html", "summary.csv")


def refuse_unsafe_batch(folders: list[Path], out_dir: Path, force: bool, memo: bool = False) -> None:
    """Before any work: the batch folder and every study's sub-folder must be safe to write to
    (never a study folder or one holding one) and, without ``force``, hold no earlier batch or
    audit (nor, with ``memo``, an earlier memo). Raises :class:`auditor.writeguard.OutputRefused`
    naming every occupied place at once."""
    from .render.output import MEMO_FILES, OUTPUT_FILES
    from .writeguard import OutputRefused, refuse_existing, refuse_unsafe_folder

    resolved = refuse_unsafe_folder(out_dir, folders, what="batch folder")
    problems = []
    try:
        refuse_existing(resolved, BATCH_FILES, force, "a batch")
    except OutputRefused as exc:
        problems.append(str(exc))
    for folder, name in zip(folders, output_names(folders)):
        try:
            target = refuse_unsafe_folder(resolved / name, folders)
            if target.is_dir():
                refuse_existing(target, study_output_files(folder, OUTPUT_FILES + (MEMO_FILES if memo else ())), force)
        except OutputRefused as exc:
            problems.append(str(exc))
    if problems:
        raise OutputRefused(".\n".join(problems))


def audit_one(args: tuple) -> StudyOutcome:
    """Worker: audit one study folder into ``target`` (all four files or none)."""
    folder, name, target, options, paper, force = args
    from .pipeline import AuditOptions, audit_study
    from .render.output import FORMATS, write_audit
    from .study import load_study
    from .writeguard import OutputRefused

    from .render.csvout import audit_identity, subfinding_verdicts

    def failed(error: str) -> StudyOutcome:
        return StudyOutcome(str(folder), name, "failed", error=error, source=declared_kind(Path(folder)),
                            **declared_identity(Path(folder), options))

    options = dict(options)
    formats = tuple(options.pop("formats", ",".join(FORMATS)).split(","))
    figure_data = bool(options.pop("figure_data", False))
    memo = bool(options.pop("memo", False))
    try:
        if is_summaries_folder(Path(folder)):
            audit = audit_summaries_into(Path(folder), Path(target), options, paper, force, formats, figure_data,
                                         memo)
        else:
            study = load_study(folder)
            audit = audit_study(study, AuditOptions(**options, draw=bool({"html", "pdf"} & set(formats))))
            write_audit(audit, Path(target), force=force, paper=paper, protected=[Path(folder)],
                        formats=formats, figure_data=figure_data, memo=memo)
    except StudyInputError as exc:
        first = exc.problems[0].one_line()
        more = f" (and {len(exc.problems) - 1} more)" if len(exc.problems) > 1 else ""
        return failed(f"invalid input: {first}{more}")
    except OutputRefused as exc:
        return failed(f"not written: {exc}")
    except Exception as exc:  # a model or rendering failure confined to this study
        return failed(f"{type(exc).__name__}: {exc}")
    rows = [{"outcome": r.outcome, "check_id": r.check_id, "verdict": r.verdict.value, "headline": r.headline,
             "subfinding_verdicts": subfinding_verdicts(r)}
            for r in audit.results]
    return StudyOutcome(str(folder), name, "ok", audit.study_id, n_outcomes=len(audit.outcomes), rows=rows,
                        source=audit.source, **audit_identity(audit))


def is_summaries_folder(folder: Path) -> bool:
    """True when the folder's study.toml declares ``source = "summaries"`` (published summaries)."""
    from .metadata import declared_source

    return declared_source(folder) == "summaries"


def declared_kind(folder: Path) -> str:
    """``published summaries`` or ``participant data``, as the folder's study.toml declares."""
    return "published summaries" if is_summaries_folder(folder) else "participant data"


def study_output_files(folder: Path, data_files: tuple[str, ...]) -> tuple[str, ...]:
    """The files a study's sub-folder may hold: a summaries folder's also include comments.md."""
    if is_summaries_folder(Path(folder)):
        from .summaries.output import SUMMARY_OUTPUT_FILES

        return tuple(dict.fromkeys(data_files + SUMMARY_OUTPUT_FILES))
    return data_files


def audit_summaries_into(folder: Path, target: Path, options: dict, paper: str, force: bool,
                         formats: tuple[str, ...], figure_data: bool, memo: bool = False):
    """Audit a folder of published summaries and write its files (comments.md included) into
    ``target``, as ``auditor run`` does. ``--blinded``/``--unblinded`` have no meaning without
    participant data, and such an audit has no memo (comments.md is its short text): asking for
    either fails this study, naming the option, as ``run`` refuses it."""
    from .pipeline import AuditOptions
    from .summaries.audit import audit_summaries, load_summary_study
    from .summaries.output import write_summary_audit

    if options.get("blinded") is not None:
        raise StudyInputError([InputProblem(str(folder / "study.toml"), "-", "source",
                                            "--blinded/--unblinded do not apply to published summaries",
                                            "leave the option out, or list this folder in a separate batch")],
                              "in the batch options")
    if memo:
        raise StudyInputError([InputProblem(str(folder / "study.toml"), "-", "source",
                                            "--memo does not apply to published summaries (comments.md is their "
                                            "short text for the authors)",
                                            "leave the option out, or list this folder in a separate batch")],
                              "in the batch options")
    opts = {k: options.get(k) for k in ("analysis_date", "seed", "quick", "level") if options.get(k) is not None}
    audit = audit_summaries(load_summary_study(folder), AuditOptions(**opts))
    write_summary_audit(audit, target, force=force, paper=paper, protected=[folder], formats=formats,
                        figure_data=figure_data)
    return audit


def declared_identity(folder: Path, options: dict) -> dict:
    """What a study that failed can still be identified by: the study id, analysis date and blinding
    its study.toml declares (read leniently, since it may be the invalid part) or the options asked
    for, and the tool version; empty where unknown. So a failed study keeps its id in summary.csv."""
    import tomllib

    from . import __version__

    try:
        declared = tomllib.loads((folder / "study.toml").read_text(encoding="utf-8")).get("study", {})
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        declared = {}
    declared = declared if isinstance(declared, dict) else {}
    sid = declared.get("id")
    date = options.get("analysis_date") or declared.get("analysis_date")
    blinded = options.get("blinded")
    blinded = declared.get("blinded") if blinded is None else blinded
    return {"study_id": sid if isinstance(sid, str) else "",
            "analysis_date": str(date) if date is not None else "",
            "blinded": str(blinded).lower() if isinstance(blinded, bool) else "",
            "tool_version": __version__}


def run_batch(folders: list[Path], out_dir: Path, options: dict, jobs: int, paper: str = "A4",
              progress: Callable[[StudyOutcome], None] | None = None, force: bool = False) -> list[StudyOutcome]:
    """Audit every folder; results in input order whatever the number of jobs. Without ``force``
    a study whose sub-folder already holds an audit fails rather than replacing it."""
    names = output_names(folders)
    tasks = [(str(f), n, str(out_dir / n), options, paper, force) for f, n in zip(folders, names)]
    results: list[StudyOutcome | None] = [None] * len(tasks)
    if jobs <= 1:
        for i, t in enumerate(tasks):
            results[i] = audit_one(t)
            if progress:
                progress(results[i])
    else:
        with ProcessPoolExecutor(max_workers=jobs, initializer=_use_warning_filters,
                                 initargs=(list(warnings.filters),)) as pool:
            futures = {pool.submit(audit_one, t): i for i, t in enumerate(tasks)}
            from concurrent.futures import as_completed

            for fut in as_completed(futures):
                i = futures[fut]
                results[i] = fut.result()
                if progress:
                    progress(results[i])
    return [r for r in results if r is not None]


def _use_warning_filters(filters: list) -> None:
    """Worker start-up: apply the caller's warning filters, so that a command that keeps library
    warnings off the terminal does so in every worker too, whatever the process start method."""
    warnings.resetwarnings()
    warnings.filters.extend(filters)


SUMMARY_COLUMNS = ["study", "folder_name", "status", "source", "outcome", "check_id", "verdict", "headline", "error",
                   "analysis_date", "blinded", "tool_version", "metadata_sha256", "data_sha256",
                   "subfinding_verdicts"]
"""summary.csv's columns; those after ``error`` identify the audit (see docs/pipelines.md)."""


def summary_csv(results: list[StudyOutcome]) -> str:
    from .render.csvout import neutralise

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(SUMMARY_COLUMNS)
    for s in results:
        ident = [s.analysis_date, s.blinded, s.tool_version, s.metadata_sha256, s.data_sha256]
        if s.status != "ok":
            w.writerow([neutralise(c) for c in [s.study_id, s.name, s.status, s.source, "", "", "", "", s.error, *ident, ""]])
        for r in s.rows:
            w.writerow([neutralise(c) for c in [s.study_id, s.name, s.status, s.source, r["outcome"], r["check_id"],
                                                r["verdict"], r["headline"], "", *ident,
                                                r.get("subfinding_verdicts", "")]])
    return buf.getvalue()


SHORT_HASH_DIGITS = 8
"""Hex digits of each SHA-256 shown on the index page: the start of the full hash in summary.csv."""


def short_hashes(s: StudyOutcome) -> list[str]:
    """The study's inputs as ``file hash`` pairs with each SHA-256 cut to its first
    :data:`SHORT_HASH_DIGITS` digits (study.toml first, then each data file by role), so a reader can
    match the page against summary.csv; empty when nothing was read."""
    out = [f"study.toml {s.metadata_sha256[:SHORT_HASH_DIGITS]}"] if s.metadata_sha256 else []
    for pair in s.data_sha256.split():
        role, _, digest = pair.partition("=")
        out.append(f"{role} {digest[:SHORT_HASH_DIGITS]}")
    return out


def blinding_text(blinded: str) -> str:
    """``true``/``false`` of summary.csv as the page says it; unknown for a failed study whose
    study.toml could not say."""
    return {"true": "blinded (pooled)", "false": "unblinded (by arm)"}.get(blinded, "not known")


def batch_marking(results: list[StudyOutcome]) -> tuple[str, str]:
    """The index page's marking and its class: open only when every study is known to be blinded;
    closed as soon as one is unblinded, or its blinding is not known (a failed study whose study.toml
    could not be read), since the page links to and summarises every study's audit."""
    from .render.view import marking

    blinded = bool(results) and all(s.blinded == "true" for s in results)
    return marking(blinded), "open" if blinded else "closed"


def index_view(results: list[StudyOutcome], options: dict) -> dict:
    """Display strings for OUT/index.html: one row per study, verdict counts by check (a study is
    linked to its audit.html only when the batch wrote one, see ``--formats``, and to its memo.html
    with ``--memo``), what identifies each
    audit (the columns of summary.csv: analysis date, blinding, tool version, input hashes cut short)
    and the closed or open marking of the batch (:func:`batch_marking`)."""
    with_html = "html" in str(options.get("formats", "html")).split(",")
    with_memo = bool(options.get("memo"))
    checks = sorted({r["check_id"] for s in results for r in s.rows})
    verdicts = [v.value for v in Verdict]
    studies = []
    for s in results:
        cells = []
        for c in checks:
            counts = {v: 0 for v in verdicts}
            for r in s.rows:
                if r["check_id"] == c:
                    counts[r["verdict"]] += 1
            cells.append(", ".join(f"{n} {v}" for v, n in counts.items() if n) or "–")
        studies.append({"name": s.name, "study_id": s.study_id or "–", "status": s.status, "error": s.error,
                        "from_summaries": s.source == "published summaries",
                        "link": f"{s.name}/audit.html" if s.status == "ok" and with_html else "", "cells": cells,
                        "memo_link": f"{s.name}/memo.html" if s.status == "ok" and with_memo
                        and s.source != "published summaries" else "",
                        "n_outcomes": s.n_outcomes, "analysis_date": s.analysis_date or "not known",
                        "blinded": blinding_text(s.blinded), "tool_version": s.tool_version or "not known",
                        "hashes": short_hashes(s)})
    totals = {v: sum(1 for s in results for r in s.rows if r["verdict"] == v) for v in verdicts}
    mark, mark_class = batch_marking(results)
    return {"studies": studies, "checks": checks, "totals": list(totals.items()),
            "marking": mark, "marking_class": mark_class, "hash_digits": SHORT_HASH_DIGITS,
            "n_ok": sum(s.status == "ok" for s in results), "n_failed": sum(s.status != "ok" for s in results),
            "options": sorted((k, "as each study declares" if v is None else str(v)) for k, v in options.items())}


def gate_reached(results: list[StudyOutcome], level: str) -> bool:
    """True when any study failed (level 'failed' or any verdict level) or any verdict is at least
    as bad as ``level`` (ranks: sound < not assessable < caution < unsupported)."""
    if any(s.status != "ok" for s in results):
        return True
    if level == "failed":
        return any(r["verdict"] == Verdict.TOOL_DEFECT.value for s in results for r in s.rows)
    threshold = Verdict(level).rank
    return any(Verdict(r["verdict"]).rank >= threshold for s in results for r in s.rows)


EXIT_STUDIES_FAILED = 4
"""Exit code of a batch in which at least one study failed (see :func:`batch_exit_code`)."""
EXIT_GATE = 3


def batch_exit_code(results: list[StudyOutcome], fail_on: str | None) -> int:
    """The batch's exit code: 4 when any study failed, whatever ``--fail-on`` says (the batch is
    incomplete, so no gate can be judged on it: a failure outranks a gate); else 3 when the
    ``--fail-on`` gate is reached; else 0."""
    if any(s.status != "ok" for s in results):
        return EXIT_STUDIES_FAILED
    if fail_on is not None and gate_reached(results, fail_on):
        return EXIT_GATE
    return 0


def default_jobs() -> int:
    return max(1, os.cpu_count() or 1)
