"""The command line: parse options, call the library, map problems to exit codes.

Exit codes: 0 success; 1 an internal failure (a bug: please report it); 2 a problem with the input or
the command line, with every problem listed; 3 a gate reached (``batch --fail-on``, a failing
``selfcheck`` case); 4 a batch in which at least one study failed (outranks 3). One table of them in
README.md and docs/pipelines.md.
"""

from __future__ import annotations

import contextlib
import sys
import traceback
import warnings
from pathlib import Path
from typing import TYPE_CHECKING, List, Optional

import typer

from . import __version__
from .errors import StudyInputError, option_problem

if TYPE_CHECKING:  # rich is imported where a styled line is printed
    from rich.text import Text

app = typer.Typer(add_completion=False, no_args_is_help=True, rich_markup_mode=None,
                  help="Audit whether a clinical trial's planned analyses are supported by its own data.")


class _Console:
    """A terminal console made on first need, so that a command printing only plain lines (``validate``
    of a valid study) never imports the terminal library (about a tenth of a second).

    A plain line (one printable ASCII string, markup off) is written as the console would write it:
    the text and a newline, no styles, no wrapping (``soft_wrap``). Anything else (markup, tables,
    progress, width) goes to the real console, made once."""

    def __init__(self, stderr: bool = False):
        self._stderr = stderr
        self._console = None

    @property
    def console(self):
        if self._console is None:
            from rich.console import Console

            self._console = Console(stderr=self._stderr, highlight=False, soft_wrap=True, emoji=False)
        return self._console

    def print(self, *objects, **options) -> None:
        if (self._console is None and len(objects) == 1 and options == {"markup": False}
                and isinstance(objects[0], str) and objects[0].isascii() and objects[0].isprintable()):
            stream = sys.stderr if self._stderr else sys.stdout
            stream.write(objects[0] + "\n")
            stream.flush()
            return
        self.console.print(*objects, **options)

    def __getattr__(self, name):
        return getattr(self.console, name)

    def __setattr__(self, name, value):
        if name in ("_stderr", "_console"):
            object.__setattr__(self, name, value)
        else:
            setattr(self.console, name, value)


out = _Console()
err = _Console(stderr=True)

EXIT_INPUT = 2
EXIT_INTERNAL = 1
EXIT_GATE = 3
EXIT_STUDIES_FAILED = 4
_STATE = {"debug": False}


def _cells(*values) -> list[Text]:
    """Table cells as plain text, so brackets or colons in study codes are never read as markup, and
    with control and bidirectional characters shown as escapes, so a label's right-to-left override
    cannot reverse the table around it."""
    from rich.text import Text

    from .errors import one_line_text

    return [Text(one_line_text(v, 10_000)) for v in values]


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
    err.print(f"[bold]{len(exc.problems)} problem(s) {exc.heading}:[/bold]", markup=True)
    for p in exc.problems:
        err.print(p.one_line(), markup=False)


def _print_study_warnings(study, blinded: Optional[bool] = None) -> None:
    """Print the study's warnings, one line each; in a blinded run (``blinded``, else study.toml's
    setting) a warning about an arm could reveal allocations, so those are counted, never shown."""
    is_blinded = study.metadata.study.blinded if blinded is None else blinded
    withheld = [w for w in study.warnings if is_blinded and w.by_arm]
    for w in study.warnings:
        if w not in withheld:
            err.print("warning: " + w.one_line(), markup=False)
    if withheld:
        err.print(f"warning: {len(withheld)} warning(s) concern arms and are withheld in a blinded run.",
                  markup=False)


@contextlib.contextmanager
def _python_warnings_hidden():
    """A context in which numpy, scipy and statsmodels warnings are not printed (their text means
    nothing to a reader of the audit, whose findings carry the caveats); with --debug they show."""
    with warnings.catch_warnings():
        if not _STATE["debug"]:
            warnings.simplefilter("ignore")
        yield


def _guard(fn):
    """Run a command body, turning user errors into exit 2 and bugs into exit 1, with library
    warnings kept off the terminal unless --debug."""
    from .writeguard import OutputRefused

    try:
        with _python_warnings_hidden():
            return fn()
    except StudyInputError as exc:
        _report_problems(exc)
        raise typer.Exit(EXIT_INPUT)
    except OutputRefused as exc:
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
        if _summaries_folder(study_dir):
            return _validate_summaries(study_dir)
        study = load_study(study_dir)
        _print_study_warnings(study)
        n_out = len(study.metadata.outcomes)
        out.print(f"{study_dir}: valid ({n_out} outcome(s), {study.participants.shape[0]} participants, "
                  f"{len(study.visits)} visit rows).", markup=False)

    _guard(body)


def _warn_defects(audit) -> None:
    """Say on the terminal when a defect of the tool, not the data, stopped some findings."""
    from .results import Verdict

    n = sum(r.verdict is Verdict.TOOL_DEFECT for r in audit.results)
    if n:
        err.print(f"warning: {n} finding(s) could not be computed because of a defect in auditor (verdict "
                  f"'tool defect'); please report it with the output of --debug --strict.", markup=False)


def _report_recovery(recovery, folder: Path) -> None:
    """Say what was finished or cleaned up of an interrupted earlier write into ``folder``."""
    message = recovery.message(folder)
    if message:
        err.print(f"note: {message}.", markup=False)


def _note_files_left(folder: Path, formats) -> None:
    """Say which audit files of an earlier run stay in ``folder`` untouched, because ``--formats``
    did not ask for them: they describe that earlier audit, not this one."""
    from .render.output import FORMATS

    left = [name for fmt, name in FORMATS.items() if fmt not in formats and (folder / name).is_file()]
    if left:
        err.print(f"note: {', '.join(left)} in {folder} are from an earlier audit and were left as they were "
                  f"(not in --formats).", markup=False)


def _summary_table(audit):
    from rich.table import Table
    from rich.text import Text

    table = Table(title=Text(f"{audit.study_id}: findings"), show_lines=False)
    table.add_column("Outcome")
    table.add_column("Check")
    table.add_column("Verdict")
    table.add_column("Finding", overflow="fold")
    for r in audit.results:
        table.add_row(*_cells(r.outcome, r.check_id, r.verdict.value, r.headline))
    return table


PROGRESS_MIN_OUTCOMES = 20
"""From this many outcomes a run reports its progress even when stderr is not a terminal (a log
file, a CI job): a line per outcome. A convention of this tool."""


@contextlib.contextmanager
def _outcome_progress(total: int, quiet: bool):
    """A ``progress(done, total, param)`` callback for :func:`~auditor.pipeline.audit_study`, shown
    on stderr only (never in an output file): a progress bar on a terminal, one line per outcome in
    a long run elsewhere, nothing for a short run that is not on a terminal or with --quiet."""
    if quiet or total == 0 or not (err.is_terminal or total >= PROGRESS_MIN_OUTCOMES):
        yield None
        return
    if not err.is_terminal:
        def line(done, n, param):
            err.print(f"outcome {done} of {n} audited ({one_line_text(param, 80)})", markup=False)

        from .errors import one_line_text

        yield line
        return
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
    from rich.text import Text

    with Progress(TextColumn("outcomes"), BarColumn(), MofNCompleteColumn(), TextColumn("{task.fields[last]}"),
                  TimeElapsedColumn(), console=err.console, transient=True, auto_refresh=False) as progress:
        # No refresh thread: outcomes may be audited in forked processes, and a fork should not copy
        # a thread that holds the console's lock.
        task = progress.add_task("outcomes", total=total, last="")

        def tick(done, n, param):
            progress.update(task, completed=done, last=Text(param))
            progress.refresh()

        yield tick


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
    level: Optional[float] = typer.Option(None, "--level", help="Two-sided confidence level of every interval, "
                                                                 "e.g. 0.9; default: study.toml's confidence_level, else 0.95."),
    paper: str = typer.Option("A4", "--paper", help="PDF page size: A4 or letter."),
    check: List[str] = typer.Option([], "--check", help="Run only this check id (repeatable)."),
    strict: bool = typer.Option(False, "--strict", help="Stop with exit 1 at the first defect of the tool "
                                                        "instead of reporting it as a 'tool defect' finding."),
    quiet: bool = typer.Option(False, "--quiet", help="Print only the paths written."),
    list_left_out: bool = typer.Option(
        False, "--list-left-out",
        help="Name, in the report's appendix and findings.json, the participants each outcome's analysis "
             "leaves out and why. This writes participant identifiers: off by default."),
    memo: bool = typer.Option(False, "--memo", help="Also write memo.html and memo.pdf: a 2-4 page summary "
                                                     "(cover, verdict grid, one paragraph per outcome, cautions)."),
    withhold_pooled: Optional[bool] = typer.Option(
        None, "--withhold-pooled/--show-pooled",
        help="In a blinded audit, withhold the pooled numbers as well (verdicts and questions only); "
             "default: as study.toml's withhold_pooled says."),
    formats: str = typer.Option("html,pdf,json,csv", "--formats",
                                help="Which files to write, comma-separated: html, pdf, json, csv."),
    figure_data: bool = typer.Option(False, "--figure-data",
                                     help="Keep in findings.json the data arrays every figure is drawn from."),
    jobs: int = typer.Option(0, "--jobs", "-j", help="Processes across outcomes (default: the number of cores)."),
):
    """Audit a study folder: write audit.html, audit.pdf, findings.json and findings.csv (and the memo)."""
    from .options import (check_id_problems, date_problems, formats_problems, jobs_problems, output_formats,
                          level_problems, paper_problems, paper_size, refuse_if_any, registered_check_ids,
                          seed_problems)
    from .pipeline import AuditOptions, audit_study
    from .render.output import check_target, write_audit
    from .study import load_study

    def body():
        if _summaries_folder(study_dir):
            refuse_if_any([option_problem(o, "an audit from published summaries has no participant data to pool "
                                             "or list", "leave the option out for a summaries folder")
                           for o, given in (("--blinded" if blinded else "--unblinded", blinded is not None),
                                            ("--list-left-out", list_left_out),
                                            ("--withhold-pooled" if withhold_pooled else "--show-pooled",
                                             withhold_pooled is not None)) if given]
                          + ([option_problem("--memo", "an audit from published summaries has no memo (its short "
                                                       "text for the authors is comments.md)",
                                             "leave the option out for a summaries folder")] if memo else []))
            return _run_summaries(study_dir, output, force, analysis_date, today, seed, paper, check, strict, quiet,
                                  formats, level)
        refuse_if_any(seed_problems(seed), level_problems(level), date_problems(analysis_date, "--analysis-date"),
                      check_id_problems(check, registered_check_ids()), paper_problems(paper),
                      formats_problems(formats), jobs_problems(jobs))
        chosen = output_formats(formats)
        check_target(output, force, protected=[study_dir], memo=memo)
        study = load_study(study_dir)
        _print_study_warnings(study, blinded)
        from .batch import default_jobs

        opts = AuditOptions(blinded=blinded, analysis_date=analysis_date, use_clock=today, seed=seed, level=level,
                            checks=tuple(check), list_left_out=list_left_out, withhold_pooled=withhold_pooled,
                            draw=bool({"html", "pdf"} & set(chosen)), jobs=jobs or default_jobs(),
                            **({"strict": True} if strict else {}))
        with _outcome_progress(len(study.metadata.outcomes), quiet) as tick:
            a = audit_study(study, opts, progress=tick)
        _warn_defects(a)
        paths, recovery = write_audit(a, output, force=force, paper=paper_size(paper), protected=[study_dir],
                                      formats=chosen, figure_data=figure_data, memo=memo)
        _report_recovery(recovery, output)
        _note_files_left(output, chosen)
        if not quiet:
            out.print(_summary_table(a))
        for p in paths:
            out.print(str(p), markup=False)

    _guard(body)


def _summaries_folder(study_dir: Path) -> bool:
    """True when study.toml declares ``source = "summaries"``: an audit from published summaries."""
    from .metadata import declared_source

    return declared_source(study_dir) == "summaries"


def _validate_summaries(study_dir: Path) -> None:
    from .summaries.audit import load_summary_study

    study = load_summary_study(study_dir)
    out.print(f"{study_dir}: valid published summaries ({len(study.metadata.outcomes)} outcome(s), "
              f"{study.summaries.rows} summary rows).", markup=False)


def _run_summaries(study_dir, output, force, analysis_date, today, seed, paper, check, strict, quiet,
                   formats="html,pdf,json,csv", level=None) -> None:
    """`run` on a folder of published summaries: the same options, checks and write guard, plus comments.md."""
    from .options import (date_problems, formats_problems, level_problems, output_formats, paper_problems,
                          paper_size, refuse_if_any, seed_problems)
    from .pipeline import AuditOptions
    from .summaries.audit import load_summary_study, audit_summaries
    from .summaries.checks import CHECKS
    from .summaries.output import check_summary_target, write_summary_audit

    unknown = [c for c in check if c not in CHECKS]
    refuse_if_any(seed_problems(seed), level_problems(level), date_problems(analysis_date, "--analysis-date"),
                  paper_problems(paper), formats_problems(formats),
                  [option_problem("--check", f"'{c}' is not a check of an audit from published summaries",
                                  f"use one of {', '.join(CHECKS)}") for c in unknown])
    check_summary_target(output, force, protected=[study_dir])
    study = load_summary_study(study_dir)
    opts = AuditOptions(analysis_date=analysis_date, use_clock=today, seed=seed, level=level, checks=tuple(check),
                        **({"strict": True} if strict else {}))
    a = audit_summaries(study, opts)
    _warn_defects(a)
    paths, recovery = write_summary_audit(a, output, force=force, paper=paper_size(paper), protected=[study_dir],
                                          formats=output_formats(formats))
    _report_recovery(recovery, output)
    if not quiet:
        out.print(f"{a.study_id}: {a.source_label} (no participant data); {len(a.comments)} draft comment(s) "
                  "to the authors in comments.md.", markup=False)
        out.print(_summary_table(a))
    for p in paths:
        out.print(str(p), markup=False)


@app.command()
def init(
    data_files: List[Path] = typer.Argument(..., help="The visit-level data file, and optionally the "
                                                      "participant-level file."),
    output: Optional[Path] = typer.Option(None, "-o", "--output",
                                          help="Where to write the draft (default: study.toml beside the "
                                               "first data file)."),
    force: bool = typer.Option(False, "--force", help="Replace an existing study.toml."),
    blinded: Optional[bool] = typer.Option(None, "--blinded/--unblinded",
                                           help="Draft blinded = true or false (default: true for a folder, "
                                                "false for data files)."),
):
    """Draft a study.toml from the data (a study folder, or data files), with a comment on every guess to confirm."""
    from .draft import checked_draft, checked_folder_draft, data_files_in
    from .options import data_file_problems, new_file_problems, refuse_if_any
    from .writeguard import write_one_file

    def body():
        if len(data_files) == 1 and data_files[0].is_dir():
            folder_body(data_files[0])
            return
        target = output or (data_files[0].parent / "study.toml")
        refuse_if_any(data_file_problems(data_files),
                      new_file_problems(target, "-o/--output" if output else "study.toml", force))
        text = checked_draft(data_files, target.parent, blinded=bool(blinded))
        write_one_file(target, text.encode("utf-8"), force=force, inputs=data_files)
        out.print(f"wrote {target}: confirm every line marked 'CHECK'.", markup=False)

    def folder_body(folder: Path):
        """``init FOLDER``: the draft of a whole ADaM delivery, written as FOLDER/study.toml."""
        target = output or (folder / "study.toml")
        refuse_if_any(new_file_problems(target, "-o/--output" if output else "study.toml", force))
        text = checked_folder_draft(folder, blinded=True if blinded is None else blinded)
        write_one_file(target, text.encode("utf-8"), force=force, inputs=data_files_in(folder))
        out.print(f"wrote {target}: confirm every line marked 'CHECK'.", markup=False)

    _guard(body)


@app.command()
def batch(
    inputs: List[Path] = typer.Argument(..., help="Study folders, or text files listing one study folder per line."),
    output: Path = typer.Option(..., "-o", "--output", help="Folder for the batch (one sub-folder per study)."),
    jobs: int = typer.Option(0, "--jobs", "-j", help="Parallel processes (default: the number of cores)."),
    force: bool = typer.Option(False, "--force", help="Replace a batch already in the output folder."),
    fail_on: Optional[str] = typer.Option(None, "--fail-on",
                                          help="Exit 3 if any verdict is at least this bad: failed (a tool "
                                               "defect), not assessable, caution or unsupported. A failed study "
                                               "always gives exit 4."),
    blinded: Optional[bool] = typer.Option(None, "--blinded/--unblinded",
                                           help="Force pooled (blinded) or by-arm audits for every study."),
    analysis_date: Optional[str] = typer.Option(None, "--analysis-date", help="Date printed on every report."),
    seed: Optional[int] = typer.Option(None, "--seed", help="Seed for every resampling (default: each study's)."),
    level: Optional[float] = typer.Option(None, "--level", help="Two-sided confidence level of every interval "
                                                                 "(default: each study's confidence_level, else 0.95)."),
    paper: str = typer.Option("A4", "--paper", help="PDF page size: A4 or letter."),
    memo: bool = typer.Option(False, "--memo", help="Also write each study's memo.html and memo.pdf."),
    formats: str = typer.Option("html,pdf,json,csv", "--formats",
                                help="Which files to write for each study, comma-separated: html, pdf, json, csv."),
    figure_data: bool = typer.Option(False, "--figure-data",
                                     help="Keep in each findings.json the data arrays every figure is drawn from."),
):
    """Audit many studies in parallel: OUT/<study>/, OUT/index.html and OUT/summary.csv."""
    from .batch import batch_exit_code, default_jobs, expand_inputs, index_view, refuse_unsafe_batch, summary_csv
    from .options import (date_problems, fail_on_problems, formats_problems, jobs_problems, output_formats,
                          level_problems, paper_problems, paper_size, refuse_if_any, seed_problems)
    from .pipeline import CAUTIONS
    from .render.html import render_marked
    from .writeguard import write_file_set

    def body():
        refuse_if_any(jobs_problems(jobs), fail_on_problems(fail_on), seed_problems(seed), level_problems(level),
                      date_problems(analysis_date, "--analysis-date"), paper_problems(paper),
                      formats_problems(formats))
        folders = expand_inputs(inputs)
        missing = [f for f in folders if not f.is_dir()]
        if missing:
            for f in missing:
                err.print(f"{f}: is not a folder. Fix: give study folders or a manifest listing them.", markup=False)
            raise typer.Exit(EXIT_INPUT)
        refuse_unsafe_batch(folders, output, force, memo)
        options = {"blinded": blinded, "analysis_date": analysis_date, "seed": seed, **({"memo": True} if memo else {}),
                   **({"level": level} if level is not None else {})}
        if formats != "html,pdf,json,csv" or figure_data:
            options.update(formats=",".join(output_formats(formats)), figure_data=figure_data)
        n_jobs = jobs or default_jobs()
        results = _run_with_progress(folders, output, options, n_jobs, paper_size(paper), force)
        view = {**index_view(results, {**options, "paper": paper}), "cautions": CAUTIONS}
        _, recovery = write_file_set({"index.html": render_marked("batch_index.html.j2", view).encode("utf-8"),
                                      "summary.csv": summary_csv(results).encode("utf-8")},
                                     output, force=force, protected=folders, what="a batch")
        _report_recovery(recovery, output)
        from rich.table import Table

        table = Table(title=f"batch: {len(results)} studies")
        table.add_column("Study")
        table.add_column("Status")
        table.add_column("Findings")
        for s in results:
            table.add_row(*_cells(s.study_id or s.name, s.status, s.error if s.status != "ok" else len(s.rows)))
        out.print(table)
        out.print(str(output / "index.html"), markup=False)
        code = batch_exit_code(results, fail_on)
        if code:
            n_failed = sum(s.status != "ok" for s in results)
            err.print(f"{n_failed} of {len(results)} studies failed (exit {code})." if code == EXIT_STUDIES_FAILED
                      else f"gate reached: a verdict at least as bad as '{fail_on}' (exit {code}).", markup=False)
            raise typer.Exit(code)

    _guard(body)


def _run_with_progress(folders, output, options, n_jobs, paper, force):
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn

    from .batch import run_batch

    outcomes_done = [0]
    with Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TextColumn("{task.fields[extra]}"),
                  TimeElapsedColumn(), TimeRemainingColumn(), console=err.console, transient=False) as progress:
        task = progress.add_task("studies", total=len(folders), extra="")

        def tick(result):
            outcomes_done[0] += result.n_outcomes
            progress.update(task, advance=1, extra=f"{outcomes_done[0]} outcomes")

        return run_batch(folders, output, options, n_jobs, paper=paper, progress=tick, force=force)


@app.command()
def compare(
    old: Path = typer.Argument(..., help="findings.json of the earlier audit."),
    new: Path = typer.Argument(..., help="findings.json of the later audit."),
    html: Optional[Path] = typer.Option(None, "--html", help="Also write the comparison as an HTML page here."),
    json_path: Optional[Path] = typer.Option(None, "--json", help="Also write the comparison as JSON here "
                                                                   "(keyed by outcome, check id and estimate key)."),
    tolerance: float = typer.Option(1e-6, "--tolerance", help="Relative change below which a number has not moved."),
    force: bool = typer.Option(False, "--force", help="Compare even audits of different studies, or a blinded "
                                                      "with an unblinded one; replace the files --html and "
                                                      "--json name if they exist."),
):
    """What changed between two audits of a study: verdicts, sub-findings, estimates, outcomes and checks."""
    from .compare import comparability_problems, compare_findings, load_findings
    from .errors import ProblemLog
    from .options import new_file_problems, option_problem, refuse_if_any, tolerance_problems
    from .writeguard import refuse_existing_file

    def body():
        same = ([option_problem("--json", "names the same file as --html", "give two different files")]
                if html is not None and json_path is not None and Path(html).resolve() == Path(json_path).resolve()
                else [])
        refuse_if_any(tolerance_problems(tolerance), new_file_problems(html, "--html"),
                      new_file_problems(json_path, "--json"), same)
        for target in (html, json_path):
            if target is not None:
                refuse_existing_file(target, force, inputs=[old, new])
        log = ProblemLog()
        a, b = load_findings(old, log), load_findings(new, log)
        log.raise_if_errors("in the findings files")
        forced = _refuse_incomparable(comparability_problems(a, b), old, new, force)
        cmp = compare_findings(a, b, tolerance)
        _print_comparison(cmp, a, b)
        _write_comparison(cmp, a, b, forced, html, json_path, force, [old, new])

    _guard(body)


def _refuse_incomparable(problems, old: Path, new: Path, force: bool) -> list[str]:
    """Stop (exit 2, with the fix) when the two audits are not comparable, unless ``force``; with
    ``force`` each reason is printed as a warning and returned for the comparison's record."""
    from .errors import InputProblem

    if problems and not force:
        raise StudyInputError([InputProblem(f"{old} and {new}", what, "-", why,
                                            "compare two audits of the same study made with the same blinding, "
                                            "or give --force to compare them anyway")
                               for what, why in problems], "in comparing the findings files")
    for _, why in problems:
        err.print(f"warning: compared although {why} (--force).", markup=False)
    return [why for _, why in problems]


def _print_comparison(cmp, old: dict, new: dict) -> None:
    """The comparison on the terminal: a plain sentence when nothing changed, else every change, each
    outcome, check id and estimate key whole whatever the terminal's width."""
    from .compare import estimate_rows, moved_number_lines, subfinding_text, unchanged_sentence

    if cmp.unchanged:
        out.print(unchanged_sentence(cmp), markup=False)
        return
    if cmp.matched_on == "name":
        out.print("note: estimates matched on names (a findings file of an earlier schema has no keys).",
                  markup=False)
    for label, items in (("outcome added", cmp.outcomes_added), ("outcome removed", cmp.outcomes_removed)):
        for o in items:
            out.print(f"{label}: {o}", markup=False)
    for label, items in (("check added", cmp.checks_added), ("check removed", cmp.checks_removed)):
        for o, c in items:
            out.print(f"{label}: {o} / {c}", markup=False)
    for label, items in (("estimate added", cmp.estimates_added), ("estimate removed", cmp.estimates_removed)):
        for e in items:
            out.print(f"{label}: {e.outcome} / {e.check_id} / {e.key or e.name}", markup=False)
    if cmp.verdicts_moved:
        from rich.table import Table

        t = Table(title="verdicts that moved")
        widest_check = max(len(c) for _, c, _, _ in cmp.verdicts_moved)
        for col in ("Outcome", "Check", "Before", "After", "Moved by"):  # folded, never cut short
            t.add_column(col, overflow="fold", min_width=widest_check if col == "Check" else None)
        for o, c, a, b in cmp.verdicts_moved:
            t.add_row(*_cells(o, c, a, b, subfinding_text(cmp.subfindings_of(o, c))))
        out.print(t)
    moved = {(o, c) for o, c, _, _ in cmp.verdicts_moved}
    for m in cmp.subfindings_moved:
        if (m.outcome, m.check_id) not in moved:
            out.print(f"sub-finding moved: {m.outcome} / {m.check_id} / {m.id}: {m.old} -> {m.new}", markup=False)
    if cmp.numbers_moved:
        out.print(f"numbers that moved (relative tolerance {cmp.tolerance:g})", markup=False)
        for line in moved_number_lines(estimate_rows(cmp, old, new), out.width):
            out.print(line, markup=False)


def _write_comparison(cmp, a, b, forced, html, json_path, force, inputs) -> None:
    """Write the HTML page and the JSON file asked for, each through the write guard."""
    from .compare import comparison_json, comparison_view
    from .render.html import render_marked
    from .writeguard import write_one_file

    if html is not None:
        write_one_file(html, render_marked("compare.html.j2", comparison_view(cmp, a, b, forced)).encode("utf-8"),
                       force=force, inputs=inputs)
        out.print(str(html), markup=False)
    if json_path is not None:
        write_one_file(json_path, comparison_json(cmp, a, b, forced).encode("utf-8"), force=force, inputs=inputs)
        out.print(str(json_path), markup=False)


@app.command()
def selfcheck(
    output: Path = typer.Option(..., "-o", "--output", help="Folder for the validation report."),
    full: bool = typer.Option(False, "--full", help="At least 200 replicates per simulation and calibration row "
                              "(slow); default: quick."),
    seed: int = typer.Option(20261201, "--seed", help="Base seed of the simulations."),
    date: Optional[str] = typer.Option(None, "--date", help="Date printed on the report (default: today)."),
    only: str = typer.Option("", "--only", help="Run only the cases whose id starts with this."),
    force: bool = typer.Option(False, "--force", help="Replace a report already in the output folder."),
    jobs: int = typer.Option(1, "--jobs", "-j", help="Processes across cases (0: the number of cores); the "
                             "report is the same at any number."),
):
    """Run the validation suite on the installed tool: validation.html, validation.pdf, validation.json."""
    from .render.html import render_view
    from .render.pdf import html_to_pdf
    from .options import date_problems, jobs_problems, only_problems, refuse_if_any, seed_problems
    from .selfcheck import case_ids, run_selfcheck, selfcheck_view
    from .writeguard import refuse_existing, refuse_unsafe_folder, write_file_set

    names = ("validation.html", "validation.pdf", "validation.json")

    def body():
        refuse_if_any(seed_problems(seed), date_problems(date, "--date"), only_problems(only, case_ids()),
                      jobs_problems(jobs))
        target = refuse_unsafe_folder(output)
        if target.is_dir():
            refuse_existing(target, names, force, "a validation report")
        with err.status("running validation cases") as status:
            from .batch import default_jobs

            rep = run_selfcheck(full=full, seed=seed, date=date, only=only, jobs=jobs or default_jobs(),
                                progress=lambda cid: status.update(f"done: {cid}"))
        html = render_view("selfcheck.html.j2", selfcheck_view(rep))
        files = dict(zip(names, (html.encode("utf-8"), html_to_pdf(html), rep.to_json().encode("utf-8"))))
        _, recovery = write_file_set(files, output, force=force, what="a validation report")
        _report_recovery(recovery, output)
        out.print(f"{rep.n_pass} of {rep.n_all} cases pass ({rep.mode} mode).", markup=False)
        if rep.simulation:
            out.print(f"Pass rule: {rep.pass_rule}", markup=False)
        if rep.calibration:
            out.print(f"Verdict calibration: {rep.calibration_rule}", markup=False)
        for c in rep.reference + rep.simulation:
            if not c.passed:
                out.print(f"FAIL {c.id}: expected {c.expected}, obtained {c.obtained} ({c.detail})", markup=False)
        for r in rep.calibration:
            if not r.passed:
                out.print(f"FAIL {r.id}: {r.judged} ({r.detail})", markup=False)
        out.print(str(output / "validation.html"), markup=False)
        if not rep.passed:
            raise typer.Exit(EXIT_GATE)

    _guard(body)


def main():  # console-script entry point
    app()


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
