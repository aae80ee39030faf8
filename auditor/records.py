"""Which visit-level records each outcome analyses, and how many each rule leaves out.

The rules are applied to an outcome's records in a fixed order, each to what the previous ones kept,
so that every record left out is counted once, under the first rule that removed it:

1. ``category``: only records whose parameter category (PARCAT1) is the outcome's ``category``;
2. ``population``: only participants flagged ``Y`` in the population flag column (ITTFL, FASFL,
   SAFFL, PPROTFL...) of the participant file (or, without one, of the visit records);
3. ``dtype``: derived or imputed records (a non-empty DTYPE such as LOCF, WOCF, BOCF) left out,
   unless ``records.dtype = "keep"``;
4. ``analysis_flag``: only records flagged ``Y`` in the record-level analysis flag (ANL01FL...).

A rule whose column the data lack is a located input problem, never a silent pass.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from .errors import ProblemLog, rows_text
from .metadata import METADATA_FILE, OutcomeSpec, RecordRules, StudyMetadata

YES = "Y"
_SOURCES = {"dtype": "dtype", "category": "category", "unit": "unit"}
"""Internal long-frame columns and the [columns] key naming the file column each is read from."""


@dataclass(frozen=True)
class RuleCount:
    """One record rule applied to one outcome: what it kept and how many records and participants it
    left out (participants removed: those with records before the rule and none after it)."""

    rule: str
    column: str
    records_removed: int
    participants_removed: int
    records_after: int
    participants_after: int

    def to_dict(self) -> dict:
        return asdict(self)


def flag_column(name: str) -> str:
    """Internal name, in the long visit frame, of the record-level flag column ``name``."""
    return f"flag:{name}"


def flag_names(meta: StudyMetadata) -> set[str]:
    """Every flag column any rule of the study or of an outcome names (analysis and population)."""
    names = set()
    for rules in [meta.records] + [o.records for o in meta.outcomes if o.records is not None]:
        names.update(n for n in (rules.analysis_flag, rules.population) if n)
    return names


def is_yes(series: pd.Series) -> np.ndarray:
    """A flag cell counts as set when it is ``Y`` (any case, spaces ignored), as ADaM codes flags."""
    return (series.astype("string").str.strip().str.upper() == YES).fillna(False).to_numpy(dtype=bool)


def _count(rule: str, column: str, before: pd.DataFrame, keep: np.ndarray) -> tuple[pd.DataFrame, RuleCount]:
    after = before[keep]
    gone = before["subject"].nunique() - after["subject"].nunique()
    return after, RuleCount(rule, column, int((~keep).sum()), int(gone), int(len(after)),
                            int(after["subject"].nunique()))


def _population_keep(rows: pd.DataFrame, flag: str, part_flags: pd.Series | None) -> np.ndarray:
    """Records of participants flagged Y: from the participant file when it has the flag, else from
    the record's own copy of it (ADaM repeats ADSL flags on BDS records)."""
    if part_flags is not None:
        members = set(part_flags.index[is_yes(part_flags)])
        return rows["subject"].isin(members).to_numpy(dtype=bool)
    return is_yes(rows[flag_column(flag)])


def select_outcome_records(rows: pd.DataFrame, spec: OutcomeSpec, rules: RecordRules, key: str,
                           label: str, meta: StudyMetadata, part_raw: pd.DataFrame | None,
                           part_label: str | None, log: ProblemLog,
                           file_columns: set[str] | None = None) -> tuple[pd.DataFrame, list[RuleCount]]:
    """The records of one outcome that its rules keep, and one :class:`RuleCount` per rule applied.

    ``file_columns``: the columns of the outcome's own visit file (when several files are stacked, a
    column of another file must not count as present in this one)."""
    cm = meta.columns
    if file_columns is not None:
        rows = rows.drop(columns=[c for c, src in _SOURCES.items()
                                  if c in rows.columns and getattr(cm, src, src) not in file_columns]
                         + [c for c in rows.columns if c.startswith("flag:") and c[5:] not in file_columns])
    counts: list[RuleCount] = []
    if spec.category is not None:
        if "category" not in rows.columns:
            log.add(label, "row 1", cm.category, f"'{spec.param}' names a category but the file has no "
                    "parameter category column", f"add {cm.category}, map [columns] category = ..., or remove "
                    f"{key}.category")
        else:
            rows, c = _count(f"parameter category {cm.category} = {spec.category}", cm.category, rows,
                             (rows["category"] == spec.category).fillna(False).to_numpy(dtype=bool))
            counts.append(c)
            if c.records_after == 0:
                log.add(METADATA_FILE, f"{key}.category", cm.category, f"no record of '{spec.param}' has "
                        f"category '{spec.category}'", "correct the category or remove it")
    if rules.population:
        flag = rules.population
        part_flags = None
        if part_raw is not None and flag in part_raw.columns:
            part_flags = pd.Series(part_raw[flag].to_numpy(), index=part_raw[cm.subject].astype("string").str.strip())
        if part_flags is None and flag_column(flag) not in rows.columns:
            log.add(part_label or label, "row 1", flag, "population flag column is missing",
                    "add the flag (Y for members) to the participant file, or correct records.population")
        else:
            rows, c = _count(f"population {flag} = Y", flag, rows, _population_keep(rows, flag, part_flags))
            counts.append(c)
    if "dtype" in rows.columns:
        derived = rows["dtype"].notna().to_numpy(dtype=bool) & (rows["dtype"] != "").fillna(False).to_numpy(dtype=bool)
        kinds = ", ".join(sorted(rows.loc[derived, "dtype"].dropna().unique())) or "none found"
        if rules.dtype == "drop":
            rows, c = _count(f"derived or imputed records left out ({cm.dtype}: {kinds})", cm.dtype, rows, ~derived)
        else:
            rows, c = _count(f"derived or imputed records kept ({cm.dtype}: {kinds}; {int(derived.sum())} records)",
                             cm.dtype, rows, np.ones(len(rows), dtype=bool))
        counts.append(c)
    if rules.analysis_flag:
        flag = rules.analysis_flag
        if flag_column(flag) not in rows.columns:
            log.add(label, "row 1", flag, f"analysis flag column for '{spec.param}' is missing",
                    f"add the flag (Y for analysed records) or correct records.analysis_flag ({key})")
        else:
            rows, c = _count(f"analysis flag {flag} = Y", flag, rows, is_yes(rows[flag_column(flag)]))
            counts.append(c)
    return rows, counts


def outcome_unit(rows: pd.DataFrame, spec: OutcomeSpec, key: str, label: str, meta: StudyMetadata,
                 log: ProblemLog) -> str:
    """The unit of an outcome's analysed records (AVALU): one unit, or a located refusal naming the
    rows of every unit but the commonest, since values in two units cannot be analysed together."""
    column = meta.columns.unit
    if "unit" not in rows.columns:
        return spec.unit
    units = rows["unit"].where(rows["unit"] != "").dropna()
    found = units.value_counts()
    if len(found) > 1:
        common = sorted(found.index, key=lambda u: (-found[u], u))
        listed = ", ".join(f"'{u}' ({found[u]} records)" for u in common)
        other = rows["unit"].isin(common[1:]).fillna(False).to_numpy(dtype=bool)
        log.add(label, rows_text(rows.loc[other, "row"].to_numpy()), column,
                f"parameter '{spec.param}' mixes units: {listed}",
                f"convert its values (and {column}) to one unit, or remove the outcome from study.toml")
        return spec.unit
    if len(found) == 1:
        unit = str(found.index[0])
        if spec.unit and spec.unit != unit:
            log.add(METADATA_FILE, f"{key}.unit", column, f"unit '{spec.unit}' differs from the data's "
                    f"{column} '{unit}' for '{spec.param}'", f"write unit = \"{unit}\", or convert the data")
        return spec.unit or unit
    return spec.unit
