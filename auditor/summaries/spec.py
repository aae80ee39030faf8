"""study.toml of a study folder holding a paper's published summaries (``[study] source = "summaries"``).

The ``[study]`` table is the one data folders use (:class:`auditor.metadata.StudyInfo`); ``[files]``
names the summaries file; each ``[[outcomes]]`` entry says what the paper reports about the outcome
(scale, bounds, the analysis it used, a responder rule, the entry criterion and the assumptions under
which to grade regression to the mean). The per-arm numbers live in the summaries file
(:mod:`auditor.summaries.reader`). Strict like the data schema: unknown keys are refused.
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import ClassVar, Literal, Optional

from pydantic import Field, StrictBool, ValidationError, field_validator, model_validator

from ..errors import ProblemLog
from ..metadata import (METADATA_FILE, Finite, Name, OutcomeDeclaration, ResponderRule, StudyInfo, _fix_for,
                        _location_text, _Strict, _toml_line, tomllib)

ReportedAnalysis = Literal["change", "percent-change", "follow-up-adjusted", "follow-up-only", "responder"]
"""The analysis the paper reports (``follow-up-adjusted`` is ANCOVA of follow-up on baseline)."""

DEFAULT_RELIABILITIES = (0.5, 0.7, 0.9)
"""Reliabilities of one reading graded when the paper gives none (a convention of this tool)."""


class SummaryFiles(_Strict):
    summaries: Name = Field(max_length=1000)
    """The summaries file (CSV), relative to the study folder."""


class EntryWindow(_Strict):
    """The entry criterion on the baseline reading, one- or two-sided (``lower < baseline < upper``),
    with the population the trial sampled from, which the paper seldom reports: an assumption."""

    lower: Optional[Finite] = None
    upper: Optional[Finite] = None
    assumed_mean: list[Finite] = Field(min_length=1)
    """Mean of the unselected population (one value, or several for a sensitivity grid)."""
    assumed_sd: Finite = Field(gt=0)
    """SD of one reading in the unselected population."""
    reliability: list[Finite] = Field(default_factory=lambda: list(DEFAULT_RELIABILITIES))
    """Reliability (test-retest correlation) of one reading: one value or several for the grid."""

    @field_validator("reliability")
    @classmethod
    def _in_unit_interval(cls, v):
        if not v or any(not (0 < x < 1) for x in v):
            raise ValueError("reliability values must lie strictly between 0 and 1")
        return v

    @model_validator(mode="after")
    def _one_end(self):
        if self.lower is None and self.upper is None:
            raise ValueError("an entry criterion needs 'lower', 'upper' or both")
        if self.lower is not None and self.upper is not None and self.lower >= self.upper:
            raise ValueError("entry criterion: 'lower' must be below 'upper'")
        return self

    @property
    def text(self) -> str:
        if self.lower is not None and self.upper is not None:
            return f"baseline from {self.lower:g} to {self.upper:g}"
        if self.lower is not None:
            return f"baseline at least {self.lower:g}"
        return f"baseline at most {self.upper:g}"


class SummaryOutcome(OutcomeDeclaration):
    reported_analysis: ReportedAnalysis
    responder: Optional[ResponderRule] = None
    entry_criterion: Optional[EntryWindow] = None
    within_arm_claims: StrictBool = False
    """The paper draws conclusions from change within an arm (which regression to the mean biases)."""
    timepoint: str = Field(default="", max_length=200)
    """The follow-up the summaries describe (e.g. "week 12"), printed in the report."""

    LEVELS_TOO_FEW: ClassVar[str] = "levels must be two or more distinct codes in increasing order"
    LEVELS_UNORDERED: ClassVar[str] = LEVELS_TOO_FEW

    @model_validator(mode="after")
    def _consistent(self):
        self._check_scale_and_analysis("reported_analysis", "a responder rule")
        return self



class SummaryMetadata(_Strict):
    study: StudyInfo
    files: SummaryFiles
    outcomes: list[SummaryOutcome] = Field(min_length=1)

    @model_validator(mode="after")
    def _checks(self):
        if self.study.source != "summaries":
            raise ValueError("this reader needs study.source = 'summaries'")
        seen = [o.param for o in self.outcomes]
        dup = sorted({p for p in seen if seen.count(p) > 1})
        if dup:
            raise ValueError(f"outcome param listed more than once: {', '.join(dup)}")
        if self.study.design == "parallel" and len(self.study.arms) != 2:
            raise ValueError("an audit from published summaries compares two arms: list exactly two in 'arms'")
        return self


def read_summary_metadata(folder: Path, log: ProblemLog) -> tuple[SummaryMetadata | None, str]:
    """Read and validate the study.toml of a summaries folder; problems go to ``log``."""
    path = Path(folder) / METADATA_FILE
    try:
        raw = path.read_bytes()
    except OSError as exc:
        log.add(METADATA_FILE, "-", "-", f"cannot be read ({exc.strerror})", "check the file permissions")
        return None, ""
    digest = hashlib.sha256(raw).hexdigest()
    try:
        return SummaryMetadata.model_validate(tomllib.loads(raw.decode("utf-8-sig"))), digest
    except UnicodeDecodeError:
        log.add(METADATA_FILE, "-", "-", "is not UTF-8 text", "save the file as UTF-8")
    except tomllib.TOMLDecodeError as exc:
        log.add(METADATA_FILE, _toml_line(str(exc)), "-", f"is not valid TOML ({exc})",
                "correct the syntax at that line")
    except ValidationError as exc:
        for err in exc.errors():
            log.add(METADATA_FILE, _location_text(err["loc"]), "-", err["msg"].removeprefix("Value error, "),
                    _fix_for(err).replace("docs/study-folder.md", "docs/summaries.md"))
    return None, digest
