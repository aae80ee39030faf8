"""The study metadata file (``study.toml``): its schema and its validation.

The schema is strict: unknown keys are refused with a did-you-mean suggestion, because a misspelt
optional key (``entry_critrion``) would otherwise silently switch a check off.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import math
import sys
from pathlib import Path
from typing import Literal, Optional, Union

from pydantic import (BaseModel, ConfigDict, Field, StrictBool, StrictStr, ValidationError, field_validator,
                      model_validator)

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
VisitName = Union[str, int, float]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class StudyInfo(_Strict):
    id: StrictStr = Field(min_length=1, max_length=200)
    title: str = Field(default="", max_length=2000)
    design: Literal["parallel", "single-arm"] = "parallel"
    arms: list[str] = Field(default_factory=list)
    control_arm: Optional[str] = None
    blinded: StrictBool = False
    analysis_date: Optional[dt.date] = None
    seed: int = Field(default=20240101, ge=0, le=2**32 - 1)

    @model_validator(mode="after")
    def _arms_consistent(self):
        if len(set(self.arms)) != len(self.arms):
            raise ValueError("arms are listed more than once")
        if self.design == "parallel":
            if len(self.arms) < 2:
                raise ValueError("a parallel-group study needs at least two arms in 'arms'")
            if self.control_arm is None:
                raise ValueError("a parallel-group study needs 'control_arm'")
        if self.control_arm is not None and self.control_arm not in self.arms:
            raise ValueError(f"control_arm '{self.control_arm}' is not one of arms {self.arms}")
        return self


class FilesInfo(_Strict):
    visits: str = Field(min_length=1)
    participants: Optional[str] = None
    layout: Literal["long", "wide"] = "long"
    wide_pattern: str = "{param}_{visit}"
    """In a wide file, how a column name is built from a parameter code and a visit name."""


class ColumnMap(_Strict):
    """Column names in the data files; defaults follow the CDISC ADaM conventions."""

    subject: str = "USUBJID"
    arm: Optional[str] = None
    """Default: TRTP if present, else TRT01P, else ARM."""
    param: str = "PARAMCD"
    param_label: str = "PARAM"
    visit: str = "AVISIT"
    visit_number: str = "AVISITN"
    value: str = "AVAL"
    baseline_flag: str = "ABLFL"


class EntryCriterion(_Strict):
    visit: VisitName
    operator: Literal[">", ">=", "<", "<="]
    value: float

    @property
    def direction(self) -> str:
        """``above`` when high values were selected, ``below`` when low values were."""
        return "above" if self.operator.startswith(">") else "below"


class ResponderRule(_Strict):
    basis: Literal["change", "percent-change"]
    threshold: float
    direction: Literal["at-least", "at-most"]
    """A responder has change (or percent change) at least / at most the threshold."""


class OutcomeSpec(_Strict):
    param: StrictStr = Field(min_length=1, max_length=200)
    label: str = Field(default="", max_length=2000)
    scale: Scale
    levels: Optional[list[float]] = None
    bounds: Optional[tuple[Optional[float], Optional[float]]] = None
    unit: str = Field(default="", max_length=100)
    baseline_visit: Optional[VisitName] = None
    screening_visit: Optional[VisitName] = None
    followup_visits: list[VisitName] = Field(min_length=1)
    primary_followup: Optional[VisitName] = None
    planned_analysis: PlannedAnalysis
    responder: Optional[ResponderRule] = None
    entry_criterion: Optional[EntryCriterion] = None
    reliability: Optional[float] = Field(default=None, gt=0, lt=1)
    risk_endpoint: Optional[str] = None
    covariates: list[str] = Field(default_factory=list)
    log_scale: Optional[StrictBool] = None
    """Analyse on the log scale where a check offers it; default: decided from the data."""

    @field_validator("levels")
    @classmethod
    def _levels_sorted(cls, v):
        if v is not None:
            if len(v) < 2:
                raise ValueError("an ordinal scale needs at least two levels")
            if sorted(v) != list(v) or len(set(v)) != len(v):
                raise ValueError("levels must be distinct and listed in increasing order")
        return v

    @model_validator(mode="after")
    def _consistent(self):
        if self.scale == "ordinal" and self.levels is None:
            raise ValueError("an ordinal outcome needs 'levels' (its ordered codes)")
        if self.bounds is not None:
            lo, hi = self.bounds
            if lo is not None and hi is not None and lo >= hi:
                raise ValueError("bounds must be [lower, upper] with lower < upper")
        if self.planned_analysis == "responder" and self.responder is None:
            raise ValueError("planned_analysis 'responder' needs a [outcomes.responder] rule")
        if self.planned_analysis in ("change", "percent-change", "follow-up-adjusted",
                                     "responder", "repeated-with-baseline-response") \
                and self.baseline_visit is None:
            raise ValueError(f"planned_analysis '{self.planned_analysis}' needs 'baseline_visit'")
        if self.primary_followup is not None and self.primary_followup not in self.followup_visits:
            raise ValueError("primary_followup must be one of followup_visits")
        return self

    @property
    def main_followup(self) -> VisitName:
        return self.primary_followup if self.primary_followup is not None else self.followup_visits[-1]

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


class StudyMetadata(_Strict):
    study: StudyInfo
    files: FilesInfo
    columns: ColumnMap = Field(default_factory=ColumnMap)
    outcomes: list[OutcomeSpec] = Field(min_length=1)

    @model_validator(mode="after")
    def _unique_params(self):
        seen = [o.param for o in self.outcomes]
        dup = sorted({p for p in seen if seen.count(p) > 1})
        if dup:
            raise ValueError(f"outcome param listed more than once: {', '.join(dup)}")
        return self


_FIELDS_BY_SECTION = {
    (): StudyMetadata.model_fields,
    ("study",): StudyInfo.model_fields,
    ("files",): FilesInfo.model_fields,
    ("columns",): ColumnMap.model_fields,
    ("outcomes",): OutcomeSpec.model_fields,
    ("outcomes", "entry_criterion"): EntryCriterion.model_fields,
    ("outcomes", "responder"): ResponderRule.model_fields,
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


def read_metadata(folder: Path, log: ProblemLog) -> tuple[StudyMetadata | None, str]:
    """Read and validate ``study.toml``; problems go to ``log``. Returns (metadata, sha256)."""
    path = folder / METADATA_FILE
    if not path.is_file():
        log.add(METADATA_FILE, "-", "-", f"no {METADATA_FILE} in {folder}",
                f"create one, for example with 'auditor init DATA_FILE'")
        return None, ""
    try:
        raw = path.read_bytes()
    except OSError as exc:
        log.add(METADATA_FILE, "-", "-", f"cannot be read ({exc.strerror})", "check the file permissions")
        return None, ""
    digest = hashlib.sha256(raw).hexdigest()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        log.add(METADATA_FILE, "-", "-", "is not UTF-8 text", "save the file as UTF-8")
        return None, digest
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        log.add(METADATA_FILE, _toml_line(str(exc)), "-", f"is not valid TOML ({exc})",
                "correct the syntax at that line")
        return None, digest
    try:
        return StudyMetadata.model_validate(data), digest
    except ValidationError as exc:
        for err in exc.errors():
            msg = err["msg"].removeprefix("Value error, ")
            log.add(METADATA_FILE, _location_text(err["loc"]), "-", msg, _fix_for(err))
        return None, digest


def _toml_line(message: str) -> str:
    import re

    m = re.search(r"line (\d+)", message)
    return f"line {m.group(1)}" if m else "-"
