"""The command line: parse options, call the library, map problems to exit codes.

Exit codes: 0 success; 1 an internal failure (a bug: please report it); 2 a problem with the input or
the command line, with every problem listed; 3 a ``--fail-on`` gate that was reached.
"""

from __future__ import annotations

import sys
import traceback
from pathlib import Path
from typing import List, Optional

import typer
from rich.console import Console
from rich.table import Table

from . import __version__
from .errors import StudyInputError

app = typer.Typer(add_completion=False, no_args_is_help=True, rich_markup_mode=None,
                  help="Audit whether a clinical trial's planned analyses are supported by its own data.")
out = Console(highlight=False, soft_wrap=True)
err = Console(stderr=True, highlight=False, soft_wrap=True)

EXIT_INPUT = 2
EXIT_INTERNAL = 1
_STATE = {"debug": False}


def _version(value: bool):
    if value:
        out.print(f"auditor {__version__}")
        raise typer.Exit()


@app.callback()
def main_options(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                 help="Print the version and exit."),
    debug: bool = typer.Option(False, "--debug", help="Show full tracebacks for internal errors."),
):
    """Audit whether a clinical trial's planned analyses are supported by its own data."""
    _STATE["debug"] = debug


def _report_problems(exc: StudyInputError) -> None:
    err.print(f"[bold]{len(exc.problems)} problem(s) in the study folder:[/bold]", markup=True)
    for p in exc.problems:
        err.print(p.one_line(), markup=False)


def _guard(fn):
    """Run a command body, turning user errors into exit 2 and bugs into exit 1."""
    from .render.output import OutputExists

    try:
        return fn()
    except StudyInputError as exc:
        _report_problems(exc)
        raise typer.Exit(EXIT_INPUT)
    except OutputExists as exc:
        err.print(f"{exc}.", markup=False)
        raise typer.Exit(EXIT_INPUT)
    except typer.Exit:
        raise
    except Exception as exc:  # a defect: say so plainly
        if _STATE["debug"]:
            traceback.print_exc()
        else:
            err.print(f"internal error: {type(exc).__name__}: {exc}. Rerun with --debug for details.",
                      markup=False)
        raise typer.Exit(EXIT_INTERNAL)


@app.command()
def validate(study_dir: Path = typer.Argument(..., help="The study folder (holding study.toml).")):
    """Check the metadata and the data and list every problem at once (exit 0 clean, 2 not)."""
    from .study import load_study

    def body():
        study = load_study(study_dir)
        for w in study.warnings:
            err.print("warning: " + w.one_line(), markup=False)
        n_out = len(study.metadata.outcomes)
        out.print(f"{study_dir}: valid ({n_out} outcome(s), {study.participants.shape[0]} participants, "
                  f"{len(study.visits)} visit rows).", markup=False)

    _guard(body)


def _summary_table(audit) -> Table:
    table = Table(title=f"{audit.study_id}: findings", show_lines=False)
    table.add_column("Outcome")
    table.add_column("Check")
    table.add_column("Verdict")
    table.add_column("Finding", overflow="fold")
    for r in audit.results:
        table.add_row(r.outcome, r.check_id, r.verdict.value, r.headline)
    return table


@app.command()
def run(
    study_dir: Path = typer.Argument(..., help="The study folder (holding study.toml)."),
    output: Path = typer.Option(..., "-o", "--output", help="Folder to write the audit into."),
    force: bool = typer.Option(False, "--force", help="Replace an audit already in the output folder."),
    blinded: Optional[bool] = typer.Option(None, "--blinded/--unblinded",
                                           help="Force a pooled (blinded) or by-arm audit; default: as study.toml says."),
    analysis_date: Optional[str] = typer.Option(None, "--analysis-date",
                                                help="Date printed on the report (YYYY-MM-DD); default: study.toml's."),
    today: bool = typer.Option(False, "--today", help="Use today's date when no analysis date is given."),
    seed: Optional[int] = typer.Option(None, "--seed", help="Seed for every resampling; default: study.toml's."),
    paper: str = typer.Option("A4", "--paper", help="PDF page size: A4 or letter."),
    check: List[str] = typer.Option([], "--check", help="Run only this check id (repeatable)."),
    quiet: bool = typer.Option(False, "--quiet", help="Print only the paths written."),
):
    """Audit a study folder: write audit.html, audit.pdf, findings.json and findings.csv."""
    from .pipeline import AuditOptions, audit_study
    from .render.output import check_target, write_audit
    from .study import load_study

    def body():
        if paper.lower() not in ("a4", "letter"):
            err.print(f"--paper: '{paper}' is not a page size. Fix: use A4 or letter.", markup=False)
            raise typer.Exit(EXIT_INPUT)
        check_target(output, force)
        study = load_study(study_dir)
        for w in study.warnings:
            err.print("warning: " + w.one_line(), markup=False)
        opts = AuditOptions(blinded=blinded, analysis_date=analysis_date, use_clock=today, seed=seed,
                            checks=tuple(check))
        a = audit_study(study, opts)
        paths = write_audit(a, output, force=force, paper="A4" if paper.lower() == "a4" else "letter")
        if not quiet:
            out.print(_summary_table(a))
        for p in paths:
            out.print(str(p), markup=False)

    _guard(body)


@app.command()
def init(
    data_files: List[Path] = typer.Argument(..., help="The visit-level data file, and optionally the "
                                                      "participant-level file."),
    output: Optional[Path] = typer.Option(None, "-o", "--output",
                                          help="Where to write the draft (default: study.toml beside the "
                                               "first data file)."),
    force: bool = typer.Option(False, "--force", help="Replace an existing study.toml."),
):
    """Draft a study.toml from the data, with a comment on every guess to confirm."""
    from .draft import draft_metadata

    def body():
        target = output or (data_files[0].parent / "study.toml")
        if target.exists() and not force:
            err.print(f"{target} already exists. Fix: use --force or -o another path.", markup=False)
            raise typer.Exit(EXIT_INPUT)
        text = draft_metadata(data_files, target.parent)
        target.write_text(text, encoding="utf-8")
        out.print(f"wrote {target}: confirm every line marked 'CHECK'.", markup=False)

    _guard(body)


def main():  # console-script entry point
    app()


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
