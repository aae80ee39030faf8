"""Outcomes x checks: runs every applicable check on every outcome and assembles the audit.

An exception inside one check becomes a "not assessable" result with its reason, so one awkward
outcome never costs the rest of the audit. In a blinded audit every by-arm item is removed here,
whatever a check returned, so blinding does not rest on each check's good behaviour alone.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import platform
from dataclasses import dataclass, field, replace
from importlib import metadata as importlib_metadata
from pathlib import Path

from . import __version__
from .checks.common import not_assessable
from .checks.registry import CheckContext, NotAssessable, all_checks
from .results import Audit, CheckResult, Provenance, Verdict
from .study import Study, load_study, outcome_data

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
    quick: bool = False
    checks: tuple[str, ...] = field(default_factory=tuple)
    """Run only these check ids (default: all)."""

    def as_record(self) -> dict:
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in dataclasses.asdict(self).items()}


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


def run_checks_for_outcome(study: Study, spec, ctx: CheckContext, only: tuple[str, ...] = ()) -> list[CheckResult]:
    """Every applicable check on one outcome, failures isolated."""
    data = outcome_data(study, spec)
    out = []
    for check in all_checks():
        if only and check.id not in only:
            continue
        if not check.applies(spec, data.design):
            continue
        if ctx.blinded and check.needs_arms:
            out.append(not_assessable(check, spec, "not assessed in a blinded report"))
            continue
        try:
            res = check.run(data, ctx)
        except NotAssessable as exc:
            res = not_assessable(check, spec, str(exc))
        except (ValueError, ArithmeticError, RuntimeError, KeyError, IndexError, TypeError) as exc:
            res = not_assessable(check, spec, f"the computation failed ({type(exc).__name__}: {exc})")
        out.append(blind(res) if ctx.blinded else res)
    return out


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
        "unit": spec.unit,
        "levels": list(spec.levels) if spec.levels else None,
        "bounds": [spec.lower_bound, spec.upper_bound],
        "baseline_visit": None if spec.baseline_visit is None else str(spec.baseline_visit),
        "screening_visit": None if spec.screening_visit is None else str(spec.screening_visit),
        "followup_visits": [str(v) for v in spec.followup_visits],
        "main_followup": str(spec.main_followup),
        "planned_analysis": spec.planned_analysis,
        "entry_criterion": (None if spec.entry_criterion is None else
                            f"{spec.entry_criterion.visit} {spec.entry_criterion.operator} "
                            f"{spec.entry_criterion.value:g}"),
        "risk_endpoint": spec.risk_endpoint,
        "derived_columns": list(study.derived_columns),
    }


def audit_study(study: Study, options: AuditOptions | None = None) -> Audit:
    """Audit an already loaded study."""
    options = options or AuditOptions()
    meta = study.metadata
    blinded = meta.study.blinded if options.blinded is None else options.blinded
    seed = meta.study.seed if options.seed is None else options.seed
    ctx = CheckContext(seed=seed, blinded=blinded, quick=options.quick)
    results: list[CheckResult] = []
    for spec in meta.outcomes:
        results.extend(run_checks_for_outcome(study, spec, ctx, options.checks))
    prov = Provenance(
        tool_version=__version__,
        library_versions=library_versions(),
        metadata_sha256=study.metadata_sha256,
        files=study.files,
        options=options.as_record(),
        analysis_date=_analysis_date(study, options),
        seed=seed,
        platform=f"Python {platform.python_version()} on {platform.system()} {platform.machine()}",
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
        cautions=list(CAUTIONS),
    )


def audit(folder: str | Path, **options) -> Audit:
    """Audit a study folder: the one call for notebooks.

    >>> a = audit("example_study")          # doctest: +SKIP
    >>> a.findings_frame().head()           # doctest: +SKIP
    """
    return audit_study(load_study(folder), AuditOptions(**options))


def verdict_counts(a: Audit) -> dict[str, int]:
    counts = {v.value: 0 for v in Verdict}
    for r in a.results:
        counts[r.verdict.value] += 1
    return counts
