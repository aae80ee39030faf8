"""Outcomes x checks: runs every applicable check on every outcome and assembles the audit.

A computation that the data cannot support becomes a "not assessable" result with its reason, so one
awkward outcome never costs the rest of the audit; a defect of the tool inside a check or a figure
becomes a "tool defect" result (or, in strict mode, an exception), never a data limitation. In a blinded audit every by-arm item is removed here,
whatever a check returned, so blinding does not rest on each check's good behaviour alone.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import os
import platform
from dataclasses import dataclass, field, replace
from importlib import metadata as importlib_metadata
from pathlib import Path

from . import __version__
from .checks.common import not_assessable
from .checks.registry import CheckContext, NotAssessable, all_checks
from .errors import one_line_text
from .failures import ToolDefect, data_reason, defect_reason, is_defect
from .listing import left_out
from .results import (Audit, CheckInfo, CheckResult, LeftOut, Provenance, ReportInfo, Verdict,
                      estimate_key_problems)
from .study import MIN_PER_ARM, Study, load_study, outcome_data

CAUTIONS = [
    "This audit is a screening aid for a qualified statistician. It is not a regulatory or clinical "
    "determination, and no decision should rest on it alone.",
    "Its conclusions depend on the metadata supplied (scales, bounds, visits, planned analyses, entry "
    "criteria). Wrong metadata give wrong conclusions.",
    "The trial's statistical analysis plan, local standard operating procedures and the guidance of the "
    "regulators concerned govern; where they differ from this audit, they prevail.",
    "Blinded data must stay blinded: run a blinded audit (blinded = true or --blinded) for anyone who "
    "must not see results by arm, and do not circulate an unblinded audit beyond those entitled to it.",
]

INTERIM_CAUTION = (
    "These data are from an interim look. A p-value or interval computed here is not the final analysis's: "
    "the trial's alpha-spending (group-sequential) rules govern what may be concluded at an interim look, "
    "and nothing in this audit is a stopping recommendation.")

BLINDED_WITHHOLDS = [
    "arm labels and the control arm",
    "counts, estimates, tables and figures by arm or comparing arms",
    "checks that need the arms (not assessed)",
    "warnings that concern an arm",
]
POOLED_WITHHELD = "every pooled number (estimates, tables, figures, and numbers in headlines and evidence)"
WITHHELD_TEXT = "Withheld in this blinded audit: the pooled numbers behind this verdict."


def audit_cautions(interim: bool) -> list[str]:
    """The cautions every report keeps, plus the interim-look caution when the data are an interim look."""
    return list(CAUTIONS) + ([INTERIM_CAUTION] if interim else [])


def withheld_items(blinded: bool, withhold_pooled: bool) -> list[str]:
    """What a blinded audit leaves out, one phrase each, for its cover (empty when unblinded)."""
    if not blinded:
        return []
    return BLINDED_WITHHOLDS + ([POOLED_WITHHELD] if withhold_pooled else [])


def withhold_pooled_numbers(res: CheckResult) -> CheckResult:
    """A blinded result with every pooled number removed as well: the verdict, the questions examined and
    their verdicts stay; estimates, tables, figures and caveats go, and the headline and evidence (which
    quote numbers) are replaced by a statement that they are withheld. Results that are not assessable
    keep their reason, which quotes no outcome data."""
    if res.verdict in (Verdict.NOT_ASSESSABLE, Verdict.TOOL_DEFECT):
        return res
    return replace(res, headline=WITHHELD_TEXT, estimates=[], tables=[], figures=[], caveats=[],
                   subfindings=[replace(s, evidence="withheld") for s in res.subfindings],
                   recommendation=without_numbers(res.recommendation))


def without_numbers(text: str) -> str:
    """``text`` without its clauses (separated by semicolons) that quote a number."""
    return "; ".join(c for c in text.split("; ") if not any(ch.isdigit() for ch in c))


LIBRARIES = ("numpy", "pandas", "scipy", "statsmodels", "matplotlib", "jinja2", "weasyprint", "pydantic")


@dataclass(frozen=True)
class AuditOptions:
    """Options of one audit; all of them are recorded in the provenance block."""

    blinded: bool | None = None
    """Force a blinded audit (None: as the metadata say)."""
    analysis_date: str | None = None
    """ISO date printed on the report (default: the metadata's, else 'not stated')."""
    use_clock: bool = False
    """Take today's date when neither the option nor the metadata give one."""
    seed: int | None = None
    """Seed for every resampling (default: the metadata's)."""
    level: float | None = None
    """Two-sided confidence level of every interval (default: the metadata's ``confidence_level``).
    Recorded resolved, as the provenance's ``confidence_level``."""
    quick: bool = False
    checks: tuple[str, ...] = field(default_factory=tuple)
    """Run only these check ids (default: all)."""
    list_left_out: bool = False
    """Name, in an appendix, the participants each outcome's analysis leaves out (identifiers)."""
    withhold_pooled: bool | None = None
    """In a blinded audit, withhold the pooled numbers too (None: as the metadata say)."""
    strict: bool = field(default_factory=lambda: os.environ.get("AUDITOR_STRICT") == "1")
    """Raise :class:`~auditor.failures.ToolDefect` at the first defect instead of reporting it as a
    "tool defect" finding (the test suite sets AUDITOR_STRICT=1). Not recorded: it changes no number."""

    draw: bool = True
    """Draw the figures (only the HTML and the PDF show them). Not recorded: it changes no number."""
    jobs: int = 1
    """Processes across which outcomes are audited (results in outcome order whatever the number).
    Not recorded: it changes no number."""

    def as_record(self) -> dict:
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in dataclasses.asdict(self).items()
                if k not in UNRECORDED_OPTIONS}


UNRECORDED_OPTIONS = ("strict", "draw", "jobs", "level")
"""Options that change how an audit is computed or shown, never a number of it; and ``level``, which
is recorded once, resolved, as the provenance's ``confidence_level``."""


def library_versions() -> dict[str, str]:
    out = {}
    for name in LIBRARIES:
        try:
            out[name] = importlib_metadata.version(name)
        except importlib_metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def _analysis_date(study: Study, options: AuditOptions) -> str:
    if options.analysis_date:
        return options.analysis_date
    if study.metadata.study.analysis_date is not None:
        return study.metadata.study.analysis_date.isoformat()
    if options.use_clock:
        return dt.date.today().isoformat()
    return "not stated"


MAX_REASON_CHARS = 300


def assemble_outcome(study: Study, spec, ctx: CheckContext):
    """The outcome's data and, when no check can use them, the reason; (None, reason) if they cannot
    be assembled at all (confined to this outcome, like a failing check)."""
    try:
        data = outcome_data(study, spec)
        return data, outcome_screen(data, ctx)
    except Exception as exc:
        if is_defect(exc):
            if ctx.strict:
                raise ToolDefect(f"assembling outcome {spec.param}: {type(exc).__name__}: {exc}") from exc
            return None, defect_reason(exc)
        return None, f"its data could not be assembled: {data_reason(exc)}"


def run_checks_for_outcome(study: Study, spec, ctx: CheckContext, only: tuple[str, ...] = (),
                           assembled=None, draw: bool = True) -> list[CheckResult]:
    """Every applicable check on one outcome, failures isolated.

    An outcome whose data cannot be assembled, or that fails :func:`outcome_screen`, gets a "not
    assessable" finding from every check with the same reason; any exception inside a check becomes a
    "not assessable" finding for that check alone. ``assembled`` is :func:`assemble_outcome`'s
    result when the caller already has it.
    """
    data, reason = assembled if assembled is not None else assemble_outcome(study, spec, ctx)
    return run_applicable_checks(spec, study.metadata.study.design, data, reason, ctx, only, draw)


def run_applicable_checks(spec, design: str, data, reason: str | None, ctx: CheckContext,
                          only: tuple[str, ...] = (), draw: bool = True) -> list[CheckResult]:
    """Every check that applies to ``spec`` in ``design``, run on assembled ``data`` (or each given
    ``reason`` as "not assessable"); blinding and figures as in an audit. The self-check's verdict
    calibration calls this directly on simulated outcomes, so it judges the checks as an audit does."""
    checks = [c for c in all_checks() if (not only or c.id in only) and c.applies(spec, design)]
    out = []
    for check in checks:
        if ctx.blinded and check.needs_arms:
            res = not_assessable(check, spec, "not assessed in a blinded report")
        elif reason is not None:
            res = not_assessable(check, spec, reason)
        else:
            res = run_one_check(check, data, ctx)
        res = blind(res) if ctx.blinded else res
        out.append(draw_figures(res, ctx.strict) if draw else res)
    return out


def run_one_check(check, data, ctx: CheckContext) -> CheckResult:
    """One check on one outcome; a failure the data explain becomes "not assessable" with the reason
    in the user's terms, a defect of the tool becomes "tool defect" (raised in strict mode)."""
    try:
        return keys_checked(check.run(data, ctx), ctx)
    except NotAssessable as exc:
        return not_assessable(check, data.spec, one_line_text(exc, MAX_REASON_CHARS))
    except Exception as exc:  # a model that fails on these data must not cost the rest of the audit
        if is_defect(exc):
            if ctx.strict:
                raise ToolDefect(f"check {check.id} on {data.spec.param}: {type(exc).__name__}: {exc}") from exc
            return tool_defect(check, data.spec, exc)
        return not_assessable(check, data.spec, data_reason(exc))


def keys_checked(res: CheckResult, ctx: CheckContext) -> CheckResult:
    """The result, once its estimate keys are known to keep the contract (present, well formed,
    unique); a broken key is a defect of the tool (raised, so that it is reported as one)."""
    problems = estimate_key_problems(res)
    if problems:
        raise KeyError(f"{res.check_id} on {res.outcome}: " + "; ".join(problems))
    return res


def tool_defect(check, spec, exc: BaseException) -> CheckResult:
    reason = defect_reason(exc)
    return CheckResult(check_id=check.id, check_title=check.title, outcome=spec.param,
                       outcome_label=spec.display_name, verdict=Verdict.TOOL_DEFECT,
                       headline=f"Not computed: {reason}.", reason=reason)


def draw_figures(res: CheckResult, strict: bool) -> CheckResult:
    """Draw each of a result's figures once, keeping the PNG in the record (the HTML and the PDF
    embed the same bytes); a figure that fails is recorded in the figure (and as a caveat) rather
    than blamed silently on the data."""
    from .figures import to_png

    figures, caveats = [], list(res.caveats)
    for f in res.figures:
        try:
            figures.append(replace(f, png=to_png(f)))
        except Exception as exc:
            if strict and is_defect(exc):
                raise ToolDefect(f"figure {f.id} of {res.check_id} on {res.outcome}: "
                                 f"{type(exc).__name__}: {exc}") from exc
            why = defect_reason(exc) if is_defect(exc) else "its data could not be drawn"
            figures.append(replace(f, problem=why))
            caveats.append(f"Figure '{f.title}' could not be drawn: {why}. The numbers above are unaffected.")
    return replace(res, figures=figures, caveats=caveats)


def outcome_screen(data, ctx: CheckContext) -> str | None:
    """Why no check can use this outcome's data, found before any model is fitted; None if none.

    Two conditions are screened here rather than in each check because every check would fail on
    them, some of them obscurely (an exact fit has no residual variance): a follow-up identical to
    baseline for everyone, and, in an unblinded parallel-group audit, an arm with fewer than
    MIN_PER_ARM participants with data while another arm has enough.
    """
    frame = data.frame
    with_base = "baseline" in frame.columns
    pairs = frame.dropna(subset=["baseline", "followup"] if with_base else ["followup"])
    if with_base and len(pairs) > 1 and (pairs["followup"] == pairs["baseline"]).all():
        return (f"the follow-up value equals the baseline value for all {len(pairs)} participants with both "
                "(a copied or carried-forward baseline?)")
    if data.design != "parallel" or ctx.blinded:
        return None
    counts = pairs["arm"].value_counts()
    thin = [a for a in data.arms if counts.get(a, 0) < MIN_PER_ARM]
    if thin and len(thin) < len(data.arms):
        what = "a baseline and a follow-up value" if with_base else "a follow-up value"
        arm = thin[0]
        return (f"arm '{arm}' has {counts.get(arm, 0)} of the {len(pairs)} participants with {what} "
                f"(at least {MIN_PER_ARM} per arm are needed to compare arms)")
    return None


def blind(res: CheckResult) -> CheckResult:
    """Drop every by-arm estimate, table, figure and sub-finding from a result."""
    return replace(
        res,
        estimates=[e for e in res.estimates if not e.by_arm],
        tables=[t for t in res.tables if not t.by_arm],
        figures=[f for f in res.figures if not f.by_arm],
        subfindings=[s for s in res.subfindings if not s.by_arm],
    )


def outcome_summary(study: Study, spec) -> dict:
    """What the report says about an outcome before its findings (no by-arm numbers)."""
    return {
        "param": spec.param,
        "label": spec.display_name,
        "scale": spec.scale,
        "unit": study.units.get(spec.param) or spec.unit,
        "levels": list(spec.levels) if spec.levels else None,
        "bounds": [spec.lower_bound, spec.upper_bound],
        "baseline_visit": None if spec.baseline_visit is None else str(spec.baseline_visit),
        "screening_visit": None if spec.screening_visit is None else str(spec.screening_visit),
        "followup_visits": [str(v) for v in spec.followup_visits],
        "main_followup": str(spec.main_followup),
        "planned_analysis": spec.planned_analysis,
        "entry_criterion": None if spec.entry_criterion is None else spec.entry_criterion.text,
        "risk_endpoint": spec.risk_endpoint,
        "risk_endpoint_label": spec.risk_endpoint_label,
        "derived_columns": list(study.derived_columns),
        "file": study.outcome_files.get(spec.param),
        "record_selection": [c.to_dict() for c in study.record_selection.get(spec.param, [])],
    }


def audit_one_outcome(study: Study, spec, ctx: CheckContext, options: AuditOptions):
    """One outcome's results and, when asked for, the participants its analysis leaves out."""
    assembled = assemble_outcome(study, spec, ctx)
    results = run_checks_for_outcome(study, spec, ctx, options.checks, assembled, options.draw)
    gone = []
    if options.list_left_out and assembled[0] is not None:
        gone = left_out(assembled[0], study.participants["subject"])
    return results, gone


_WORKER: dict = {}
"""A pool worker's study, context and options, set once per process by :func:`_start_worker`."""


def _start_worker(study: Study, ctx: CheckContext, options: AuditOptions, filters: list) -> None:
    import warnings

    warnings.resetwarnings()
    warnings.filters.extend(filters)
    _WORKER.update(study=study, ctx=ctx, options=options)


def _worker_outcome(index: int):
    w = _WORKER
    return audit_one_outcome(w["study"], w["study"].metadata.outcomes[index], w["ctx"], w["options"])


def outcome_results(study: Study, ctx: CheckContext, options: AuditOptions):
    """Each outcome's (results, left-out participants), in outcome order.

    With ``options.jobs`` above 1 and more than one outcome, outcomes are audited in a pool of
    processes (the study is sent to each worker once); results are taken in outcome order, so the
    audit is the same whatever the number of processes. Each outcome's figures are drawn in the
    process that computed it, so drawing is parallel too. Results are yielded as they come, and only
    one outcome's inputs are in flight per worker, so memory grows with the results alone.
    """
    outcomes = study.metadata.outcomes
    jobs = min(options.jobs, len(outcomes))
    if jobs <= 1:
        for spec in outcomes:
            yield audit_one_outcome(study, spec, ctx, options)
        return
    import warnings
    from concurrent.futures import ProcessPoolExecutor

    with ProcessPoolExecutor(max_workers=jobs, initializer=_start_worker,
                             initargs=(study, ctx, options, list(warnings.filters))) as pool:
        yield from pool.map(_worker_outcome, range(len(outcomes)))


def audit_study(study: Study, options: AuditOptions | None = None, progress=None) -> Audit:
    """Audit an already loaded study; ``progress(done, total, param)`` is called after each outcome."""
    options = options or AuditOptions()
    meta = study.metadata
    blinded = meta.study.blinded if options.blinded is None else options.blinded
    _refuse_unblinding_a_pooled_study(study, blinded)
    seed = meta.study.seed if options.seed is None else options.seed
    level = meta.study.confidence_level if options.level is None else options.level
    ctx = CheckContext(seed=seed, blinded=blinded, level=level, quick=options.quick, strict=options.strict,
                       thresholds=meta.thresholds)
    withhold = blinded and (meta.study.withhold_pooled if options.withhold_pooled is None else options.withhold_pooled)
    results: list[CheckResult] = []
    listing: list[LeftOut] | None = [] if options.list_left_out else None
    for i, (res, gone) in enumerate(outcome_results(study, ctx, options)):
        results.extend([withhold_pooled_numbers(r) for r in res] if withhold else res)
        if listing is not None:
            listing.extend(gone)
        if progress is not None:
            progress(i + 1, len(meta.outcomes), meta.outcomes[i].param)
    prov = Provenance(
        tool_version=__version__,
        library_versions=library_versions(),
        metadata_sha256=study.metadata_sha256,
        files=study.files,
        options=options.as_record(),
        analysis_date=_analysis_date(study, options),
        seed=seed,
        platform=f"Python {platform.python_version()} on {platform.system()} {platform.machine()}",
        thresholds=meta.thresholds.as_record(),
        confidence_level=level,
    )
    return Audit(
        study_id=meta.study.id,
        title=meta.study.title,
        design=meta.study.design,
        arms=[] if blinded else list(meta.study.arms),
        control_arm=None if blinded else meta.study.control_arm,
        blinded=blinded,
        outcomes=[outcome_summary(study, s) for s in meta.outcomes],
        results=results,
        provenance=prov,
        cautions=audit_cautions(meta.study.interim),
        left_out=listing,
        checks=checks_in(results),
        report=report_info(meta.study, blinded, withhold),
    )


def _refuse_unblinding_a_pooled_study(study: Study, blinded: bool) -> None:
    """A study declared blinded with no arms has no arm to compare: an unblinded audit of it is refused
    (exit 2) rather than run with every comparison between arms empty."""
    from .errors import InputProblem, StudyInputError

    info = study.metadata.study
    if not blinded and info.design == "parallel" and not info.arms:
        raise StudyInputError([InputProblem("study.toml", "study.arms", "-", "an unblinded audit was asked for, "
                                            "but the study is pooled (blinded, with no arms)",
                                            "audit it blinded, or declare arms and control_arm and give the "
                                            "arm column")])


def report_info(info, blinded: bool, withhold: bool) -> ReportInfo:
    """The cover fields of the report, from study.toml's [study] table, and what a blinded audit withholds."""
    return ReportInfo(data_cut="" if info.data_cut is None else info.data_cut.isoformat(),
                      report_version=info.report_version, author=info.author, interim=info.interim,
                      withheld=withheld_items(blinded, withhold))


def checks_in(results: list[CheckResult]) -> list[CheckInfo]:
    """The registered checks that gave at least one of ``results``, in report order."""
    present = {r.check_id for r in results}
    return [CheckInfo(c.id, c.title, c.order, c.summary) for c in all_checks() if c.id in present]


def audit(folder: str | Path, **options) -> Audit:
    """Audit a study folder: the one call for notebooks.

    >>> a = audit("example_study")          # doctest: +SKIP
    >>> a.findings_frame().head()           # doctest: +SKIP
    """
    return audit_study(load_study(folder), AuditOptions(**options))
