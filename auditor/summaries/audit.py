"""The audit from published summaries: read the folder, answer each question, number the comments.

It returns the same record a data audit does (:class:`~auditor.results.SummaryAudit`, a subclass of
:class:`~auditor.results.Audit`), so the same renderers write it, labelled as an audit from
published summaries, with the draft comments to the authors alongside.
"""

from __future__ import annotations

import platform
from dataclasses import dataclass
from pathlib import Path

from .. import __version__
from ..errors import ProblemLog, StudyInputError, option_problem
from ..failures import ToolDefect, defect_reason, is_defect
from ..pipeline import CAUTIONS, AuditOptions, library_versions
from ..results import CheckInfo, CheckResult, InputFile, Provenance, ReviewComment, SummaryAudit, Verdict
from .checks import ANALYSIS_TEXT, CHECKS, Context, Draft, applicable, not_assessable
from .reader import Summaries, read_summaries
from .spec import SummaryMetadata, read_summary_metadata

SUMMARY_CAUTIONS = [
    "This is an audit from published summaries: it uses the numbers a paper reports, not participant data. "
    "What needs participant data (linearity, floors per participant, the shape of the entry selection, "
    "non-monotone risk, outliers) cannot be judged here, and every number depends on the summaries being "
    "transcribed correctly.",
]


@dataclass(frozen=True)
class SummaryStudy:
    folder: Path
    metadata: SummaryMetadata
    metadata_sha256: str
    summaries: Summaries


def load_summary_study(folder: str | Path) -> SummaryStudy:
    """Read and validate study.toml and the summaries file, raising every problem together."""
    folder = Path(folder)
    log = ProblemLog()
    meta, digest = read_summary_metadata(folder, log)
    summaries = read_summaries(folder, meta, log) if meta is not None else None
    log.raise_if_errors()
    return SummaryStudy(folder, meta, digest, summaries)


SUMMARY_BLINDING = (
    "Blinded data must stay blinded: published summaries are by arm, so audit only summaries already made "
    "public; never enter the unpublished by-arm results of a trial that is still blinded, and do not "
    "circulate this audit beyond those entitled to see them.")
"""Takes the place of the data audit's blinding caution, which points to a blinded mode this one has not."""


def summary_cautions() -> list[str]:
    """The cautions of an audit from published summaries: its own, then the data audit's with the
    blinding caution worded for summaries."""
    return SUMMARY_CAUTIONS + [SUMMARY_BLINDING if c.startswith("Blinded data must stay blinded") else c
                               for c in CAUTIONS]


def summary_thresholds() -> dict[str, float]:
    """The materiality conventions the summaries checks grade by, under the names study.toml's
    ``[thresholds]`` gives them in a data audit (here fixed: a summaries folder declares none)."""
    from ..checks.change_score import MATERIAL_RATIO
    from ..checks.percent_change import RECODE_CHANGE
    from ..checks.regression_to_mean import MATERIAL_SD

    return {"recoding_change": float(RECODE_CHANGE), "rtm_shift_sd": float(MATERIAL_SD),
            "sample_size_ratio": float(MATERIAL_RATIO)}


SUMMARY_OPTIONS = ("analysis_date", "use_clock", "seed", "quick", "checks")
"""The recorded options (:meth:`AuditOptions.as_record`) that bear on an audit from published
summaries. The others (``blinded``, ``withhold_pooled``, ``list_left_out``) need participant data:
`run` refuses them for a summaries folder, so the provenance does not list them."""


def summary_options_record(options: AuditOptions) -> dict:
    """The provenance's options of an audit from published summaries: those that apply to it, and its source."""
    record = options.as_record()
    return {**{k: record[k] for k in SUMMARY_OPTIONS}, "source": "summaries"}


def _run(check_id: str, fn, spec, arms, ctx: Context, strict: bool) -> Draft:
    try:
        return fn(spec, arms, ctx)
    except Exception as exc:  # confined to this question, like a data check
        if is_defect(exc):
            if strict:
                raise ToolDefect(f"{check_id} on {spec.param}: {type(exc).__name__}: {exc}") from exc
            reason = defect_reason(exc)
            return Draft(CheckResult(check_id=check_id, check_title=CHECKS[check_id][0], outcome=spec.param,
                                     outcome_label=spec.display_name, verdict=Verdict.TOOL_DEFECT,
                                     headline=f"Not computed: {reason}.", reason=reason))
        return not_assessable(check_id, spec, f"the summaries do not allow it ({exc})")


def _facts(spec, study: SummaryStudy) -> list[tuple[str, str]]:
    lo, hi = spec.lower_bound, spec.upper_bound
    rule = spec.responder
    return [
        ("Scale", spec.scale + (f" (levels {', '.join(f'{v:g}' for v in spec.levels)})" if spec.levels else "")),
        ("Unit", spec.unit or "–"),
        ("Bounds", "none declared" if lo is None and hi is None else
         f"{'no lower bound' if lo is None else f'{lo:g}'} to {'no upper bound' if hi is None else f'{hi:g}'}"),
        ("Follow-up summarised", spec.timepoint or "as reported"),
        ("Reported analysis", ANALYSIS_TEXT[spec.reported_analysis]
         + ("" if rule is None else f" ({rule.basis} {rule.direction} {rule.threshold:g})")),
        ("Entry criterion", spec.entry_criterion.text if spec.entry_criterion else "none declared"),
        ("Source of the numbers", f"{study.summaries.file}, published summaries (no participant data)"),
    ]


def _outcome_record(spec, study: SummaryStudy) -> dict:
    return {"param": spec.param, "label": spec.display_name, "scale": spec.scale, "unit": spec.unit,
            "levels": list(spec.levels) if spec.levels else None,
            "bounds": [spec.lower_bound, spec.upper_bound], "reported_analysis": spec.reported_analysis,
            "entry_criterion": spec.entry_criterion.text if spec.entry_criterion else None,
            "facts": _facts(spec, study)}


def participant_option_problems(options: AuditOptions) -> list:
    """The options asked for that only an audit of participant data has (``blinded``,
    ``withhold_pooled``, ``list_left_out``): published summaries have no participants to blind,
    withhold or list, so asking for one is refused rather than silently ignored."""
    asked = [(name, value) for name, value, given in (
        ("blinded", options.blinded, options.blinded is not None),
        ("withhold_pooled", options.withhold_pooled, options.withhold_pooled is not None),
        ("list_left_out", options.list_left_out, options.list_left_out)) if given]
    return [option_problem(f"{name}={value!r}", "an audit from published summaries has no participant data to "
                           "blind, withhold or list", f"leave {name} out for a summaries folder")
            for name, value in asked]


def audit_summaries(study: SummaryStudy, options: AuditOptions | None = None) -> SummaryAudit:
    """Every applicable question on every outcome, and the numbered draft comments. Options that only
    an audit of participant data has are refused (:class:`~auditor.errors.StudyInputError`)."""
    options = options or AuditOptions()
    problems = participant_option_problems(options)
    if problems:
        raise StudyInputError(problems, "in the audit options")
    meta = study.metadata
    seed = meta.study.seed if options.seed is None else options.seed
    level = meta.study.confidence_level if options.level is None else options.level
    ctx = Context(meta.study.design, list(meta.study.arms), meta.study.control_arm, seed, options.quick, level)
    results, comments = [], []
    for spec in meta.outcomes:
        by_arm = study.summaries.arms[spec.param]
        order = ([meta.study.control_arm] if meta.study.control_arm else []) + \
            [a for a in meta.study.arms if a != meta.study.control_arm]
        arms = [by_arm[a] for a in order]
        for check_id, fn in applicable(spec, meta.study.design):
            if options.checks and check_id not in options.checks:
                continue
            draft = _run(check_id, fn, spec, arms, ctx, options.strict)
            results.append(draft.result)
            if draft.request and draft.result.verdict in (Verdict.CAUTION, Verdict.UNSUPPORTED):
                comments.append(ReviewComment(len(comments) + 1, spec.param, spec.display_name, check_id,
                                              draft.result.headline, draft.evidence, draft.request))
    present = {r.check_id for r in results}
    checks = [CheckInfo(cid, t, order, summary) for cid, (t, order, summary) in CHECKS.items() if cid in present]
    if options.analysis_date:
        date = options.analysis_date
    elif meta.study.analysis_date is not None:
        date = meta.study.analysis_date.isoformat()
    else:
        import datetime as dt

        date = dt.date.today().isoformat() if options.use_clock else "not stated"
    s = study.summaries
    prov = Provenance(tool_version=__version__, library_versions=library_versions(),
                      metadata_sha256=study.metadata_sha256,
                      files=[InputFile("summaries", s.file, s.sha256, s.rows)],
                      options=summary_options_record(options), analysis_date=date, seed=seed,
                      confidence_level=level,
                      platform=f"Python {platform.python_version()} on {platform.system()} {platform.machine()}",
                      thresholds=summary_thresholds())
    return SummaryAudit(study_id=meta.study.id, title=meta.study.title, design=meta.study.design,
                        arms=list(meta.study.arms), control_arm=meta.study.control_arm, blinded=False,
                        outcomes=[_outcome_record(o, study) for o in meta.outcomes], results=results,
                        provenance=prov, cautions=summary_cautions(), checks=checks,
                        comments=comments)


def audit_from_summaries(folder: str | Path, **options) -> SummaryAudit:
    """Audit a folder of published summaries: the one call for notebooks.

    >>> a = audit_from_summaries("example_manuscript")   # doctest: +SKIP
    >>> [c.request for c in a.comments]                  # doctest: +SKIP
    """
    return audit_summaries(load_summary_study(folder), AuditOptions(**options))
