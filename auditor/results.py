"""The one record every output renders from.

A check returns a :class:`CheckResult`; an audit is a list of them plus the provenance of the inputs.
JSON, CSV, HTML and PDF are all produced from these records and nothing else, so a number shown in a
report is always a number that is also in ``findings.json``.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from enum import Enum
from typing import Any

SCHEMA_VERSION = "1.2"
"""1.1: the ``checks`` list (id, title, order, summary of every check in the audit).
1.2: every estimate carries a stable ``key`` (and ``arm`` when it describes one of several contrasts);
each result's ``recommendation`` and the audit's ``report`` block (data cut, version, author,
interim, what a blinded audit withholds); the verdict "for information" (descriptive checks); the
materiality thresholds used (``provenance.thresholds``); each outcome's ``record_selection``. All are
additions, so a reader of 1.1 files can ignore them; and a figure's ``data`` arrays only with
``--figure-data`` (docs/findings-json.md)."""


class Verdict(str, Enum):
    """How far the trial's own data support the planned analysis, for one outcome and one check.

    Ordered from best to worst by :attr:`rank`; ``--fail-on`` compares ranks.
    """

    SOUND = "sound"
    """The assumptions this check examines hold in the data."""
    CAUTION = "caution"
    """Some assumption is doubtful or a consequence is material; read the finding."""
    UNSUPPORTED = "unsupported"
    """The data contradict the planned analysis; an alternative is recommended."""
    NOT_ASSESSABLE = "not assessable"
    """The check could not be computed (too little data, a model that would not fit, blinding)."""
    TOOL_DEFECT = "tool defect"
    """A defect of the tool stopped the check; it says nothing about the data (please report it)."""
    FOR_INFORMATION = "for information"
    """A descriptive check that judges no analysis (it informs the others); ranked like sound."""

    @property
    def rank(self) -> int:
        return _VERDICT_RANK[self]


_VERDICT_RANK = {Verdict.SOUND: 0, Verdict.NOT_ASSESSABLE: 1, Verdict.CAUTION: 2, Verdict.UNSUPPORTED: 3,
                 Verdict.TOOL_DEFECT: 4, Verdict.FOR_INFORMATION: 0}


def _clean(value: Any) -> Any:
    """Make a value JSON-safe and stable: numpy scalars to Python, NaN/inf to None, floats rounded.

    Rounding to 12 significant digits keeps outputs byte-identical across BLAS builds that differ
    in the last bits, while keeping far more precision than any report shows.
    """
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, Enum):
        return value.value
    if hasattr(value, "item") and not isinstance(value, (list, tuple, dict)):
        try:
            value = value.item()
        except (ValueError, AttributeError):
            pass
    if isinstance(value, int):
        return value
    if isinstance(value, float):
        if not math.isfinite(value):
            return None
        return float(f"{value:.12g}")
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if hasattr(value, "tolist"):
        return _clean(value.tolist())
    return str(value)


def level_label(level: float) -> str:
    """A confidence level as printed everywhere: 0.95 -> "95%", 0.9 -> "90%", 0.975 -> "97.5%"."""
    return f"{round(100 * level, 6):g}%"


DEFAULT_LEVEL = 0.95
"""The audit's level when neither ``--level`` nor study.toml's ``confidence_level`` names one (the
customary 95%; a convention, no source); ``metadata.DEFAULT_LEVEL`` is this value, read from here."""


def interval_words(kind: str, level: float, usual: str | None = None, noun: str = "interval") -> str:
    """How a text names an interval of one construction, so that no text reads as if 95% were meant
    when the audit's level is another.

    At the default level the customary wording is kept (``usual``, else "<kind> <noun>": "Wald
    interval", "delta-method CI"), so a report at 95% reads as it always has and its level is stated
    once, in the report's level statement. At any other level the level is named in front:
    "90% delta-method interval", "90% Wald interval"; ``noun`` may be "intervals", "CI" or empty
    ("90% percentile bootstrap, 1000 replicates")."""
    words = " ".join(w for w in (kind, noun) if w)
    if math.isclose(level, DEFAULT_LEVEL, rel_tol=0.0, abs_tol=1e-12):
        return words if usual is None else usual
    return f"{level_label(level)} {words}" if words else level_label(level)


@dataclass(frozen=True)
class Estimate:
    """One estimated quantity with its uncertainty: a tidy row of a result."""

    name: str
    value: float | None
    lower: float | None = None
    upper: float | None = None
    p_value: float | None = None
    unit: str = ""
    note: str = ""
    by_arm: bool = False
    """True when the number describes an arm or a contrast between arms (dropped in blinded audits)."""
    key: str = ""
    """Stable identifier of the quantity, ``<check-id>.<part>[.<part>...]`` (:data:`ESTIMATE_KEY`):
    the same from one data cut to the next, whatever the numbers, arm names or display wording, so
    that pipelines and ``auditor compare`` match estimates on it. An arm or contrast is a role or an
    index (``contrast-1``), never its label; the label is in :attr:`arm`."""
    arm: str = ""
    """The arm or contrast (as labelled in the data) the number describes, when it is one of several."""


ESTIMATE_KEY = r"^[a-z0-9-]+(\.[a-z0-9-]+)+$"
"""The pattern every estimate key matches: dot-separated lower-case words of letters, digits, hyphens."""


def estimate_key_problems(res: "CheckResult") -> list[str]:
    """Why a result's estimate keys break the contract, if they do: a key missing, not matching
    :data:`ESTIMATE_KEY`, not starting with the check id, or used twice in the result."""
    import re

    problems, seen = [], set()
    for e in res.estimates:
        if not re.match(ESTIMATE_KEY, e.key):
            problems.append(f"estimate '{e.name}' has key '{e.key}', which does not match {ESTIMATE_KEY}")
        elif not e.key.startswith(res.check_id + "."):
            problems.append(f"estimate key '{e.key}' does not start with the check id '{res.check_id}.'")
        if e.key in seen:
            problems.append(f"estimate key '{e.key}' is used twice")
        seen.add(e.key)
    return problems


@dataclass(frozen=True)
class Table:
    """A small table: column headers and rows of plain values."""

    id: str
    title: str
    columns: list[str]
    rows: list[list[Any]]
    note: str = ""
    by_arm: bool = False


@dataclass(frozen=True)
class Figure:
    """The data a figure is drawn from, plus the name of the drawing function that draws it.

    ``data`` holds only JSON-serialisable lists and numbers; :mod:`auditor.figures` turns it into SVG.
    """

    id: str
    kind: str
    title: str
    data: dict[str, Any]
    caption: str = ""
    by_arm: bool = False
    svg: str = ""
    """A vector drawing, when one was made (not written to findings.json)."""
    png: bytes = b""
    """The drawing as a PNG raster, made once by the pipeline and shared by the HTML and the PDF (not
    written to findings.json)."""
    problem: str = ""
    """Why the figure could not be drawn, when it could not."""


@dataclass(frozen=True)
class SubFinding:
    """One assumption or question examined inside a check, with its own verdict and evidence."""

    id: str
    question: str
    verdict: Verdict
    evidence: str
    by_arm: bool = False


@dataclass(frozen=True)
class CheckResult:
    """Everything one check says about one outcome."""

    check_id: str
    check_title: str
    outcome: str
    outcome_label: str
    verdict: Verdict
    headline: str
    subfindings: list[SubFinding] = field(default_factory=list)
    estimates: list[Estimate] = field(default_factory=list)
    tables: list[Table] = field(default_factory=list)
    figures: list[Figure] = field(default_factory=list)
    caveats: list[str] = field(default_factory=list)
    references: list[str] = field(default_factory=list)
    method: str = ""
    reason: str = ""
    """Why the check is not assessable, when it is not."""
    recommendation: str = ""
    """The analysis this check recommends for the outcome, from what it concluded ("" when it has none)."""

    def to_dict(self) -> dict[str, Any]:
        return _without_drawings(_clean(asdict(self)))


def _without_drawings(d: dict[str, Any]) -> dict[str, Any]:
    """A result's dictionary without the figures' SVG markup (findings.json carries their data)."""
    for f in d.get("figures", []):
        f.pop("svg", None)
        f.pop("png", None)
    return d


def without_figure_data(d: dict[str, Any]) -> dict[str, Any]:
    """An audit's dictionary with each figure's ``data`` (the point arrays it is drawn from) removed.

    findings.json is compact by default: every number a reader or ``compare`` needs is in the
    estimates and tables, while the arrays behind the scatter panels are most of the file and grow
    with the participants. ``--figure-data`` keeps them.
    """
    for r in d.get("results", []):
        for f in r.get("figures", []):
            f.pop("data", None)
    return d


@dataclass(frozen=True)
class CheckInfo:
    """What the report says about a check: its stable id, title, place in the report and summary."""

    id: str
    title: str
    order: int
    summary: str = ""


@dataclass(frozen=True)
class InputFile:
    """An input file and its content hash, for the provenance block."""

    role: str
    path: str
    sha256: str
    rows: int | None = None


@dataclass(frozen=True)
class LeftOut:
    """A participant that an outcome's analysis cannot use, and why (listed only when asked)."""

    outcome: str
    subject: str
    reason: str


@dataclass(frozen=True)
class ReportInfo:
    """What the cover of a report says about the report itself (from study.toml's [study] table)."""

    data_cut: str = ""
    report_version: str = ""
    author: str = ""
    interim: bool = False
    withheld: list[str] = field(default_factory=list)
    """What a blinded audit leaves out, one phrase each (empty in an unblinded audit)."""


@dataclass(frozen=True)
class Provenance:
    """What the audit was computed from and with: enough to reproduce it byte for byte."""

    tool_version: str
    library_versions: dict[str, str]
    metadata_sha256: str
    files: list[InputFile]
    options: dict[str, Any]
    analysis_date: str
    seed: int
    platform: str
    thresholds: dict[str, float] = field(default_factory=dict)
    """The materiality conventions every verdict was graded by (study.toml ``[thresholds]`` or defaults)."""
    confidence_level: float = 0.95
    """Two-sided level of every interval, caption and interval-based verdict (``--level`` or study.toml)."""


@dataclass(frozen=True)
class Audit:
    """A whole audit of one study: what the report, JSON and CSV are rendered from."""

    study_id: str
    title: str
    design: str
    arms: list[str]
    control_arm: str | None
    blinded: bool
    outcomes: list[dict[str, Any]]
    results: list[CheckResult]
    provenance: Provenance
    cautions: list[str]
    left_out: list[LeftOut] | None = None
    """Participants each outcome's analysis leaves out, with identifiers; None unless asked for."""
    checks: list[CheckInfo] = field(default_factory=list)
    """The checks that produced ``results``, in report order (so that rendering needs no registry)."""
    schema_version: str = SCHEMA_VERSION
    report: ReportInfo = field(default_factory=ReportInfo)
    """The cover fields and, in a blinded audit, what it withholds."""
    source: str = "participant data"
    """What the numbers were computed from: ``participant data`` or ``published summaries``."""

    def to_dict(self) -> dict[str, Any]:
        d = _clean(asdict(self))
        for r in d["results"]:
            _without_drawings(r)
        if self.left_out is None:
            del d["left_out"]  # identifiers are never written unless asked for, not even as an empty key
        return d

    def findings_frame(self):
        """One row per outcome and check, as a pandas DataFrame (for notebooks)."""
        import pandas as pd

        rows = [
            {
                "study_id": self.study_id,
                "outcome": r.outcome,
                "outcome_label": r.outcome_label,
                "check_id": r.check_id,
                "check_title": r.check_title,
                "verdict": r.verdict.value,
                "headline": r.headline,
                "reason": r.reason,
            }
            for r in self.results
        ]
        return pd.DataFrame(rows, columns=["study_id", "outcome", "outcome_label", "check_id",
                                           "check_title", "verdict", "headline", "reason"])


@dataclass(frozen=True)
class ReviewComment:
    """One numbered point of the draft letter to a paper's authors: the concern, the number behind
    it and the analysis to ask for."""

    number: int
    outcome: str
    outcome_label: str
    check_id: str
    concern: str
    evidence: str
    request: str


@dataclass(frozen=True)
class SummaryAudit(Audit):
    """An audit computed from a paper's published summaries instead of participant data: the same
    record, labelled as such, with the draft comments to the authors."""

    source: str = "published summaries"
    source_label: str = "an audit from published summaries"
    comments: list[ReviewComment] = field(default_factory=list)
