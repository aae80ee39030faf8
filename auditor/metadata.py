"""The study metadata file (``study.toml``): its schema and its validation.

The schema is strict: unknown keys are refused with a did-you-mean suggestion, because a misspelt
optional key (``entry_critrion``) would otherwise silently switch a check off.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import math
import re
import string
import sys
from pathlib import Path
from typing import Annotated, ClassVar, Literal, Optional, Union

from pydantic import (BaseModel, ConfigDict, Field, PlainValidator, StrictBool, StrictFloat, StrictInt, StrictStr,
                      ValidationError, field_validator, model_validator)

from . import results
from .errors import ProblemLog, did_you_mean

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

METADATA_FILE = "study.toml"

Scale = Literal["continuous", "ordinal", "count", "binary"]
PlannedAnalysis = Literal[
    "change",
    "percent-change",
    "follow-up-adjusted",
    "follow-up-only",
    "responder",
    "repeated-with-baseline-response",
]
DEFAULT_MAX_ROWS = 20_000_000
"""Data rows a data file may hold unless ``files.max_rows`` raises the limit: checked from the file's
header or footer before it is parsed, so that a small file that expands to a huge table is refused
in a second instead of taking minutes and gigabytes."""
MAX_NAME_CHARS = 200
"""Longest code, arm, column or visit name accepted (labels and titles may run to 2000 characters)."""


def _visit_name(value):
    """A visit is a non-empty name or a finite visit number; booleans and NaN are refused."""
    if isinstance(value, str) and 0 < len(value.strip()) <= MAX_NAME_CHARS:
        return value
    if isinstance(value, int) and not isinstance(value, bool):
        return value
    if isinstance(value, float) and math.isfinite(value):
        return value
    raise ValueError(f"a visit is a name in quotes (1 to {MAX_NAME_CHARS} characters) or a finite visit "
                     f"number, not {value!r:.60}")


VisitName = Annotated[Union[str, int, float], PlainValidator(_visit_name)]
Name = Annotated[StrictStr, Field(min_length=1, max_length=MAX_NAME_CHARS)]
Finite = Annotated[StrictFloat, Field(allow_inf_nan=False)]
"""A finite number (integers accepted; booleans, NaN and infinities refused)."""


def _bound(value):
    """A bound is a number; ``inf`` or ``-inf`` (or None, from Python) means none; NaN is refused."""
    if value is None:
        return None
    if isinstance(value, (int, float)) and not isinstance(value, bool) and not math.isnan(value):
        return float(value)
    raise ValueError(f"a bound is a number, or inf / -inf for none, not {value!r:.60}")


Bound = Annotated[Optional[float], PlainValidator(_bound)]

MAX_SEED = 2**32 - 1
"""Largest seed accepted, in study.toml and on the command line alike: seeds are handed to
``numpy.random.default_rng``, which accepts any non-negative integer; the upper limit keeps a seed
recordable as an unsigned 32-bit number in every output."""

DEFAULT_LEVEL = results.DEFAULT_LEVEL
"""Two-sided confidence level of every interval of an audit unless study.toml's ``[study]
confidence_level`` or ``--level`` says otherwise (the customary 95%; a convention, no source)."""
MIN_LEVEL, MAX_LEVEL = 0.5, 0.999
"""Levels accepted, in study.toml and on the command line alike: below 0.5 an interval covers less
often than it misses, and at 1 it is unbounded (a convention of this tool, no source)."""

_ISO_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")


def iso_date(value) -> dt.date | None:
    """The calendar date ``value`` stands for (a ``datetime.date``, or text written YYYY-MM-DD), or
    None when it is neither. One rule for study.toml's analysis_date and the date options, so that a
    date refused in one place is refused everywhere (``2026-13-45``, ``20260102``, a number)."""
    if isinstance(value, dt.date) and not isinstance(value, dt.datetime):
        return value
    if isinstance(value, str) and _ISO_DATE.fullmatch(value):
        try:
            return dt.date.fromisoformat(value)
        except ValueError:
            return None
    return None


def _calendar_date(key: str, example: str):
    """A validator for a study.toml date key: a TOML date or the text YYYY-MM-DD of a real calendar
    date (None when absent), refused with the key's name and an example otherwise."""
    def check(value):
        if value is None:
            return None
        date = iso_date(value)
        if date is None:
            raise ValueError(f"{key} {value!r:.60} is not a calendar date written YYYY-MM-DD "
                             f"(for example {example})")
        return date
    return check


AnalysisDate = Annotated[Optional[dt.date], PlainValidator(_calendar_date("analysis_date", "2026-11-20"))]
DataCut = Annotated[Optional[dt.date], PlainValidator(_calendar_date("data_cut", "2026-10-31"))]
"""study.toml's data_cut: the date the data were frozen for this report, written as analysis_date is."""


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class StudyInfo(_Strict):
    id: StrictStr = Field(min_length=1, max_length=200)
    title: str = Field(default="", max_length=2000)
    design: Literal["parallel", "single-arm"] = "parallel"
    arms: list[Name] = Field(default_factory=list)
    control_arm: Optional[Name] = None
    blinded: StrictBool = False
    analysis_date: AnalysisDate = None
    seed: StrictInt = Field(default=20240101, ge=0, le=MAX_SEED)
    confidence_level: StrictFloat = Field(default=DEFAULT_LEVEL, ge=MIN_LEVEL, le=MAX_LEVEL)
    """Two-sided confidence level of every interval, caption and interval-based verdict of the audit."""
    source: Literal["data", "summaries"] = "data"
    """What the folder holds: participant data (``data``) or a paper's published summaries
    (``summaries``, audited by :mod:`auditor.summaries`; see docs/summaries.md)."""
    data_cut: DataCut = None
    """Date of the data cut the report is made from (printed on the cover of the audit and the memo)."""
    report_version: StrictStr = Field(default="", max_length=200)
    """The report's own version, as the reader's records name it (for example "2.0, closed session")."""
    author: StrictStr = Field(default="", max_length=2000)
    """Who prepared the report (a role or a name), printed on the cover."""
    interim: StrictBool = False
    """The data are from an interim look: the cautions then say that p-values are not the final analysis's."""
    withhold_pooled: StrictBool = False
    """In a blinded audit, withhold the pooled numbers as well (verdicts and questions only)."""

    @model_validator(mode="after")
    def _arms_consistent(self):
        if len(set(self.arms)) != len(self.arms):
            raise ValueError("arms are listed more than once")
        if self.design == "parallel" and self.blinded and not self.arms and self.control_arm is None:
            return self  # a blinded audit of pooled data needs no arms (the data may carry no arm column)
        if self.design == "parallel":
            if len(self.arms) < 2:
                raise ValueError("a parallel-group study needs at least two arms in 'arms'")
            if self.control_arm is None:
                raise ValueError("a parallel-group study needs 'control_arm'")
        if self.control_arm is not None and self.control_arm not in self.arms:
            raise ValueError(f"control_arm '{self.control_arm}' is not one of arms {self.arms}")
        return self


VisitFile = Annotated[StrictStr, Field(min_length=1, max_length=1000)]


class FilesInfo(_Strict):
    visits: Union[VisitFile, list[VisitFile]]
    """One visit-level (BDS) file, or a list of them (e.g. efficacy, laboratory and questionnaire
    datasets); each outcome names its file with ``outcomes.file`` when its parameter code is in more
    than one of them."""
    participants: Optional[StrictStr] = Field(default=None, min_length=1, max_length=1000)
    layout: Literal["long", "wide"] = "long"
    wide_pattern: StrictStr = Field(default="{param}_{visit}", max_length=MAX_NAME_CHARS)
    """In a wide file, how a column name is built from a parameter code and a visit name."""
    max_rows: StrictInt = Field(default=DEFAULT_MAX_ROWS, ge=1, le=2**40)
    """Most data rows accepted in any one data file (checked before the file is parsed)."""

    @field_validator("wide_pattern")
    @classmethod
    def _pattern_fields(cls, v):
        """Only ``{param}`` and ``{visit}``, once each: anything else would fail, or reach into the
        values' attributes, when the column names are built."""
        try:
            fields = [(name, spec, conv) for _, name, spec, conv in string.Formatter().parse(v) if name is not None]
        except ValueError as exc:
            raise ValueError(f"wide_pattern is not a valid pattern ({exc})") from None
        plain = all(not spec and not conv for _, spec, conv in fields)
        if not plain or sorted(name for name, _, _ in fields) != ["param", "visit"]:
            raise ValueError("wide_pattern must contain {param} and {visit} once each and no other {...} field")
        return v

    @model_validator(mode="after")
    def _visit_files_valid(self):
        files = self.visit_files
        if not files:
            raise ValueError("visits lists no file")
        if len(set(files)) != len(files):
            raise ValueError("visits lists a file more than once")
        if self.participants is not None and self.participants in files:
            raise ValueError("the participant file is also listed among the visit files")
        if self.layout == "wide" and len(files) > 1:
            raise ValueError("the wide layout reads a single visit file; list one file, or use the long layout")
        return self

    @property
    def visit_files(self) -> list[str]:
        """The visit-level files, in the order given."""
        return [self.visits] if isinstance(self.visits, str) else list(self.visits)


class ColumnMap(_Strict):
    """Column names in the data files; defaults follow the CDISC ADaM conventions."""

    subject: Name = "USUBJID"
    arm: Optional[Name] = None
    """Default: TRTP if present, else TRT01P, else ARM."""
    param: Name = "PARAMCD"
    param_label: Name = "PARAM"
    visit: Name = "AVISIT"
    visit_number: Name = "AVISITN"
    value: Name = "AVAL"
    baseline_flag: Name = "ABLFL"
    unit: Name = "AVALU"
    """Unit of each record's value; one parameter must use one unit."""
    dtype: Name = "DTYPE"
    """Derivation type of a record (empty for an observed record; LOCF, WOCF, BOCF... for imputed ones)."""
    category: Name = "PARCAT1"
    """Parameter category (chosen per outcome with ``outcomes.category``)."""


def _one_condition(cond) -> None:
    """A condition is a one-sided cutoff (operator and value) or a two-sided window (between)."""
    one_sided = cond.operator is not None or cond.value is not None
    if cond.between is not None:
        if one_sided:
            raise ValueError("give either operator and value (one cutoff) or between (a window), not both")
        if not cond.between[0] < cond.between[1]:
            raise ValueError("between must be [lower, upper] with lower < upper")
    elif cond.operator is None or cond.value is None:
        raise ValueError("an entry condition needs operator and value (e.g. \">=\", 24), or between = [24, 73]")


class EntryCondition(_Strict):
    """A further entry condition, on this outcome's parameter or another one (all conditions had to hold)."""

    param: Optional[Name] = None
    """Default: the outcome's own parameter."""
    visit: VisitName
    operator: Optional[Literal[">", ">=", "<", "<="]] = None
    value: Optional[Finite] = None
    between: Optional[tuple[Finite, Finite]] = None

    @model_validator(mode="after")
    def _shape(self):
        _one_condition(self)
        return self

    @property
    def text(self) -> str:
        if self.between is not None:
            return f"{self.between[0]:g} <= {self.visit} <= {self.between[1]:g}"
        return f"{self.visit} {self.operator} {self.value:g}"


class EntryCriterion(_Strict):
    visit: VisitName
    operator: Optional[Literal[">", ">=", "<", "<="]] = None
    value: Optional[Finite] = None
    between: Optional[tuple[Finite, Finite]] = None
    """A two-sided window [lower, upper] (both ends kept), in place of operator and value."""
    also: list[EntryCondition] = Field(default_factory=list)
    """Further conditions that entry required as well (all of them), possibly on other parameters."""

    @model_validator(mode="after")
    def _shape(self):
        _one_condition(self)
        return self

    @property
    def direction(self) -> str:
        """``above`` when high values were selected, ``below`` when low values were, ``window`` for a
        two-sided window."""
        if self.between is not None:
            return "window"
        return "above" if self.operator.startswith(">") else "below"

    @property
    def is_window(self) -> bool:
        return self.between is not None

    @property
    def text(self) -> str:
        """The criterion as the report writes it, further conditions included."""
        own = (f"{self.between[0]:g} <= {self.visit} <= {self.between[1]:g}" if self.between is not None
               else f"{self.visit} {self.operator} {self.value:g}")
        more = [f"{c.param + ' ' if c.param else ''}{c.text}" for c in self.also]
        return " and ".join([own] + more)


class ResponderRule(_Strict):
    basis: Literal["change", "percent-change"]
    threshold: Finite
    direction: Literal["at-least", "at-most"]
    """A responder has change (or percent change) at least / at most the threshold."""


class RecordRules(_Strict):
    """Which records are analysed (``[records]`` for the study, ``[outcomes.records]`` per outcome;
    an outcome's keys override the study's)."""

    dtype: Literal["drop", "keep"] = "drop"
    """Derived or imputed records (DTYPE not empty: LOCF, WOCF, BOCF...): left out and counted
    (``drop``) or analysed (``keep``)."""
    analysis_flag: Optional[Name] = None
    """A record-level flag column (ANL01FL, ANL02FL...): only records flagged Y are analysed."""
    population: Optional[Name] = None
    """A population flag column of the participant file (ITTFL, FASFL, SAFFL, PPROTFL): only
    participants flagged Y are analysed."""


class OutcomeDeclaration(_Strict):
    """The keys an outcome declares in both schemas, the data's (:class:`OutcomeSpec`) and the
    published summaries' (``SummaryOutcome``), what they say about its name and range, and the rules
    its scale and analysis obey. Each schema words the levels rule its own way (the two class
    variables) and adds its analysis key and ``responder`` rule."""

    param: Name
    label: StrictStr = Field(default="", max_length=2000)
    scale: Scale
    levels: Optional[list[Finite]] = None
    bounds: Optional[tuple[Bound, Bound]] = None
    unit: StrictStr = Field(default="", max_length=100)

    LEVELS_TOO_FEW: ClassVar[str] = "an ordinal scale needs at least two levels"
    """The problem of fewer than two levels, in this schema's words."""
    LEVELS_UNORDERED: ClassVar[str] = "levels must be distinct and listed in increasing order"
    """The problem of repeated or out-of-order levels, in this schema's words."""

    @field_validator("levels")
    @classmethod
    def _levels_sorted(cls, v):
        """Two or more distinct codes in increasing order."""
        if v is not None:
            if len(v) < 2:
                raise ValueError(cls.LEVELS_TOO_FEW)
            if sorted(set(v)) != list(v):
                raise ValueError(cls.LEVELS_UNORDERED)
        return v

    @property
    def display_name(self) -> str:
        return self.label or self.param

    @property
    def lower_bound(self) -> Optional[float]:
        """The declared lower bound (``-inf`` counts as none), else the lowest ordinal level."""
        if self.bounds is not None and self.bounds[0] is not None and math.isfinite(self.bounds[0]):
            return self.bounds[0]
        return self.levels[0] if self.levels else None

    @property
    def upper_bound(self) -> Optional[float]:
        """The declared upper bound (``inf`` counts as none), else the highest ordinal level."""
        if self.bounds is not None and self.bounds[1] is not None and math.isfinite(self.bounds[1]):
            return self.bounds[1]
        return self.levels[-1] if self.levels else None

    def _check_scale_and_analysis(self, analysis_key: str, responder_rule: str) -> None:
        """The rules both schemas hold for an outcome (a ValueError, worded for the schema, at the first
        broken): an ordinal scale lists its levels, bounds are [lower, upper] with lower < upper, and a
        responder analysis gives its rule. ``analysis_key`` is the schema's key for the analysis
        (``planned_analysis``, ``reported_analysis``); ``responder_rule`` names the rule as its
        messages do."""
        if self.scale == "ordinal" and self.levels is None:
            raise ValueError("an ordinal outcome needs 'levels' (its ordered codes)")
        if self.bounds is not None:
            lo, hi = self.bounds
            if lo is not None and hi is not None and lo >= hi:
                raise ValueError("bounds must be [lower, upper] with lower < upper")
        if getattr(self, analysis_key) == "responder" and self.responder is None:
            raise ValueError(f"{analysis_key} 'responder' needs {responder_rule}")


class OutcomeSpec(OutcomeDeclaration):
    baseline_visit: Optional[VisitName] = None
    screening_visit: Optional[VisitName] = None
    followup_visits: list[VisitName] = Field(min_length=1)
    primary_followup: Optional[VisitName] = None
    planned_analysis: PlannedAnalysis
    responder: Optional[ResponderRule] = None
    entry_criterion: Optional[EntryCriterion] = None
    reliability: Optional[Finite] = Field(default=None, gt=0, lt=1)
    risk_endpoint: Optional[Name] = None
    risk_endpoint_label: Optional[StrictStr] = Field(default=None, min_length=1, max_length=200)
    """How the report names the risk endpoint's event in sentences ("the odds of <label>"), for
    example "a cardiac rhythm event"; default: the endpoint's column name. Needs ``risk_endpoint``."""
    risk_definition: Optional[Literal["change", "ratio", "latest"]] = None
    """How the risk endpoint, or an entry rule tied to it, uses the two measurements of the value as
    the protocol or SAP defines it: by the change (latest minus earlier), by the ratio (latest /
    earlier) or by the latest value alone. Default: no such definition (the later-risk check then
    describes the relation and judges no definition). Needs ``risk_endpoint``."""
    covariates: list[Name] = Field(default_factory=list)
    log_scale: Optional[StrictBool] = None
    """Analyse on the log scale where a check offers it; default: decided from the data."""
    exposure: Optional[Name] = None
    """For a count: the visit-file column holding each record's observation time (days, weeks...),
    the period over which that record's count was accumulated."""
    file: Optional[VisitFile] = None
    """The visit file the parameter is read from (one of files.visits); needed only when the code
    is in more than one of them."""
    category: Optional[Name] = None
    """Only records whose parameter category (PARCAT1) is this value."""
    records: Optional[RecordRules] = None
    """Record selection for this outcome, overriding the study's [records] key by key."""
    effect_basis: Literal["between-arm", "within-arm-change"] = "between-arm"
    """What the trial reports as the treatment effect: the contrast between arms (default) or the
    change within an arm from baseline (a before-after claim, which regression to the mean biases)."""

    @model_validator(mode="after")
    def _consistent(self):
        self._check_scale_and_analysis("planned_analysis", "a [outcomes.responder] rule")
        if self.planned_analysis in ("change", "percent-change", "follow-up-adjusted",
                                     "responder", "repeated-with-baseline-response") \
                and self.baseline_visit is None:
            raise ValueError(f"planned_analysis '{self.planned_analysis}' needs 'baseline_visit'")
        if self.primary_followup is not None and self.primary_followup not in self.followup_visits:
            raise ValueError("primary_followup must be one of followup_visits")
        self._visits_distinct()
        if len(set(self.covariates)) != len(self.covariates):
            raise ValueError("covariates are listed more than once")
        if self.risk_definition is not None and self.risk_endpoint is None:
            raise ValueError("'risk_definition' describes how the risk endpoint uses the value; give "
                             "'risk_endpoint' too, or remove 'risk_definition'")
        if self.risk_endpoint_label is not None and self.risk_endpoint is None:
            raise ValueError("'risk_endpoint_label' names the risk endpoint's event; give 'risk_endpoint' too, "
                             "or remove 'risk_endpoint_label'")
        if self.risk_endpoint_label is not None and not self.risk_endpoint_label.strip():
            raise ValueError("'risk_endpoint_label' is blank; write how the report should name the event, "
                             "or remove the key")
        if self.exposure is not None and self.scale != "count":
            raise ValueError("'exposure' (observation time) applies only to an outcome with scale 'count'")
        return self

    def _visits_distinct(self) -> None:
        """Each visit plays one role: a repeated follow-up, or a baseline that is also a follow-up,
        would compare a visit with itself."""
        keys = [_key(v) for v in self.followup_visits]
        if len(set(keys)) != len(keys):
            raise ValueError("followup_visits lists a visit more than once")
        if self.baseline_visit is not None and _key(self.baseline_visit) in keys:
            raise ValueError("the baseline visit is also listed in followup_visits")
        if self.screening_visit is not None and _key(self.screening_visit) in keys + [
                _key(self.baseline_visit) if self.baseline_visit is not None else None]:
            raise ValueError("the screening visit is also the baseline or a follow-up visit")

    @property
    def main_followup(self) -> VisitName:
        return self.primary_followup if self.primary_followup is not None else self.followup_visits[-1]



def _key(visit) -> str:
    """A visit as text, whole-number floats written as integers (4.0 and 4 are the same visit)."""
    if isinstance(visit, float) and visit.is_integer():
        visit = int(visit)
    return str(visit).strip()


class Thresholds(_Strict):
    """The materiality conventions the checks grade consequences by (``[thresholds]`` in study.toml).

    Each default is a convention of this tool (docs/methods/verdicts.md); a statistician may set the
    trial's own, and the values used are printed in every finding's method text and in the provenance."""

    sample_size_ratio: Finite = Field(default=1.10, gt=1, le=10)
    """Extra participants an analysis needs against the better one (change or percent change against
    ANCOVA, a responder rule against the continuous analysis): material above this ratio."""
    rtm_shift_sd: Finite = Field(default=0.10, gt=0, le=5)
    """Expected shift from regression to the mean, in SDs of the unselected population."""
    odds_ratio: Finite = Field(default=2.0, gt=1, le=1000)
    """Odds ratio of the later event that a declared change or ratio definition ignores (or its inverse)."""
    count_ratio: Finite = Field(default=1.10, gt=1, le=10)
    """Factor by which the count ratio (time ignored) may differ from the rate ratio (or its inverse)."""
    recoding_change: Finite = Field(default=0.10, gt=0, le=10)
    """Relative change of a percent-change effect when equally valid ordinal codes are shifted by one."""

    def as_record(self) -> dict:
        return {k: float(v) for k, v in self.model_dump().items()}


class StudyMetadata(_Strict):
    study: StudyInfo
    files: FilesInfo
    columns: ColumnMap = Field(default_factory=ColumnMap)
    outcomes: list[OutcomeSpec] = Field(min_length=1)
    records: RecordRules = Field(default_factory=RecordRules)
    thresholds: Thresholds = Field(default_factory=Thresholds)

    def record_rules(self, spec: OutcomeSpec) -> RecordRules:
        """The record rules of one outcome: the study's, with the outcome's own keys in their place."""
        if spec.records is None:
            return self.records
        return self.records.model_copy(update={k: getattr(spec.records, k) for k in spec.records.model_fields_set})

    @field_validator("study")
    @classmethod
    def _data_source(cls, study):
        if study.source != "data":
            raise ValueError("study.source 'summaries' is read by the audit from published summaries, "
                             "not as a data folder (run 'auditor run' or 'auditor validate' on it)")
        return study

    @model_validator(mode="after")
    def _unique_params(self):
        seen = [o.param for o in self.outcomes]
        dup = sorted({p for p in seen if seen.count(p) > 1})
        if dup:
            raise ValueError(f"outcome param listed more than once: {', '.join(dup)}")
        files = self.files.visit_files
        for o in self.outcomes:
            if o.file is not None and o.file not in files:
                raise ValueError(f"outcome '{o.param}': file '{o.file}' is not one of files.visits {files}")
        return self


_FIELDS_BY_SECTION = {
    (): StudyMetadata.model_fields,
    ("study",): StudyInfo.model_fields,
    ("files",): FilesInfo.model_fields,
    ("columns",): ColumnMap.model_fields,
    ("outcomes",): OutcomeSpec.model_fields,
    ("outcomes", "entry_criterion"): EntryCriterion.model_fields,
    ("outcomes", "entry_criterion", "also"): EntryCondition.model_fields,
    ("records",): RecordRules.model_fields,
    ("outcomes", "records"): RecordRules.model_fields,
    ("outcomes", "responder"): ResponderRule.model_fields,
    ("thresholds",): Thresholds.model_fields,
}


def _location_text(loc: tuple) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out or "(top level)"


def _section_of(loc: tuple) -> tuple:
    return tuple(p for p in loc[:-1] if isinstance(p, str))


def _fix_for(err: dict) -> str:
    kind = err["type"]
    loc = err["loc"]
    if kind == "extra_forbidden":
        fields = _FIELDS_BY_SECTION.get(_section_of(loc), {})
        return f"remove or rename the key ({did_you_mean(loc[-1], fields)})"
    if kind == "missing":
        return "add this key"
    if kind == "literal_error":
        return f"use one of {err.get('ctx', {}).get('expected', 'the allowed values')}"
    if kind.endswith("_type") or kind.endswith("_parsing"):
        return "give a value of the right type (see docs/study-folder.md)"
    return "correct the value (see docs/study-folder.md)"


def read_metadata(folder: Path, log: ProblemLog, raw: bytes | None = None) -> tuple[StudyMetadata | None, str]:
    """Read and validate ``study.toml``; problems go to ``log``. Returns (metadata, sha256).

    ``raw``: the bytes of a study.toml not yet written (``auditor init`` validating its draft), read
    in place of the folder's file.
    """
    if raw is not None:
        return _parsed_metadata(raw, log)
    path = folder / METADATA_FILE
    if path.is_dir():
        log.add(METADATA_FILE, "-", "-", "is a folder, not a file", f"replace it with the study's {METADATA_FILE}")
        return None, ""
    if not path.is_file():
        log.add(METADATA_FILE, "-", "-", f"no {METADATA_FILE} in {folder}",
                "create one, for example with 'auditor init DATA_FILE'")
        return None, ""
    try:
        raw = path.read_bytes()
    except OSError as exc:
        log.add(METADATA_FILE, "-", "-", f"cannot be read ({exc.strerror})", "check the file permissions")
        return None, ""
    return _parsed_metadata(raw, log)


def _parsed_metadata(raw: bytes, log: ProblemLog) -> tuple[StudyMetadata | None, str]:
    """The metadata held by the bytes of a study.toml, validated; problems go to ``log``."""
    digest = hashlib.sha256(raw).hexdigest()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        log.add(METADATA_FILE, "-", "-", "is not UTF-8 text", "save the file as UTF-8")
        return None, digest
    try:
        data = tomllib.loads(text)
        return StudyMetadata.model_validate(data), digest
    except tomllib.TOMLDecodeError as exc:
        log.add(METADATA_FILE, _toml_line(str(exc)), "-", f"is not valid TOML ({exc})",
                "correct the syntax at that line")
    except ValidationError as exc:
        for err in exc.errors():
            msg = err["msg"].removeprefix("Value error, ")
            log.add(METADATA_FILE, _location_text(err["loc"]), "-", msg, _fix_for(err))
    except RecursionError:
        log.add(METADATA_FILE, "-", "-", "nests arrays or tables too deeply to be read",
                "write the metadata as in docs/study-folder.md")
    return None, digest


def declared_source(folder: Path) -> str:
    """``[study] source`` of the folder's study.toml, read leniently: ``summaries`` only when the
    file says so, else ``data`` (whose reader then reports any problem with the file in full)."""
    try:
        data = tomllib.loads((Path(folder) / METADATA_FILE).read_bytes().decode("utf-8-sig"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, RecursionError):
        return "data"
    study = data.get("study")
    return "summaries" if isinstance(study, dict) and study.get("source") == "summaries" else "data"


def _toml_line(message: str) -> str:
    import re

    m = re.search(r"line (\d+)", message)
    return f"line {m.group(1)}" if m else "-"
