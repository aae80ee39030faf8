"""The study folder: locating and reading the data files, mapping columns, validating the data.

``load_study`` returns a :class:`Study` or raises :class:`~auditor.errors.StudyInputError` carrying
every problem found. ``outcome_data`` turns the visit-level rows of one outcome into one row per
participant (baseline, screening, each follow-up visit, arm, endpoint, covariates) for the checks.
"""

from __future__ import annotations

import hashlib
import io
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputProblem, ProblemLog, StudyInputError, did_you_mean, rows_text
from .metadata import METADATA_FILE, OutcomeSpec, StudyMetadata, read_metadata
from .results import InputFile

MAX_FILE_BYTES = 2 * 1024**3
DERIVED_COLUMNS = ("BASE", "CHG", "PCHG")
ARM_DEFAULTS = ("TRTP", "TRT01P", "TRTA", "TRT01A", "ARM")
TRUE_CODES = {"1", "1.0", "y", "yes", "true", "t"}
FALSE_CODES = {"0", "0.0", "n", "no", "false", "f"}


@dataclass
class Study:
    """A validated study folder, ready for the checks."""

    folder: Path
    metadata: StudyMetadata
    metadata_sha256: str
    visits: pd.DataFrame
    """Long rows: subject, arm, param, visit (string), value (float)."""
    participants: pd.DataFrame
    """One row per participant: subject, arm, plus the endpoint and covariate columns."""
    files: list[InputFile]
    derived_columns: list[str]
    warnings: list[InputProblem] = field(default_factory=list)


@dataclass
class OutcomeData:
    """One outcome's data, one row per participant.

    ``frame`` columns: ``subject``, ``arm``, ``baseline``, ``screening`` (if a screening visit is
    named), ``followup`` (the main follow-up visit), ``fu:<visit>`` for every follow-up visit,
    ``event`` (the risk endpoint, if named) and each covariate by its own name.
    """

    spec: OutcomeSpec
    frame: pd.DataFrame
    arms: list[str]
    control_arm: str | None
    design: str
    derived_columns: list[str]


# --------------------------------------------------------------------------- files


def _inside(folder: Path, rel: str, key: str, log: ProblemLog) -> Path | None:
    """Resolve a metadata path; refuse absolute paths and anything that leaves the folder."""
    if Path(rel).is_absolute() or rel.startswith(("/", "\\")) or (len(rel) > 1 and rel[1] == ":"):
        log.add(METADATA_FILE, key, "-", f"path '{rel}' is absolute",
                "give the path relative to the study folder")
        return None
    root = folder.resolve()
    target = (folder / rel).resolve()
    if target != root and root not in target.parents:
        log.add(METADATA_FILE, key, "-", f"path '{rel}' leaves the study folder",
                "keep data files inside the study folder (links that point outside are refused)")
        return None
    if not target.is_file():
        log.add(METADATA_FILE, key, "-", f"file '{rel}' does not exist",
                "correct the path or add the file")
        return None
    return target


def _decode(raw: bytes) -> str:
    """UTF-8 (with or without a byte-order mark), else Latin-1, which decodes any byte."""
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        return raw.decode("latin-1")


def read_table(path: Path, label: str, log: ProblemLog) -> pd.DataFrame | None:
    """Read a CSV, Parquet or SAS transport file into a DataFrame of the file's own columns."""
    try:
        size = path.stat().st_size
        if size == 0:
            log.add(label, "-", "-", "is empty", "export the data again")
            return None
        if size > MAX_FILE_BYTES:
            log.add(label, "-", "-", "is larger than 2 GiB", "split the study or remove unused parameters")
            return None
        suffix = path.suffix.lower()
        if suffix == ".parquet":
            df = pd.read_parquet(path)
        elif suffix == ".xpt":
            df = pd.read_sas(path, format="xport", encoding="latin-1")
        elif suffix in (".csv", ".txt"):
            df = _read_csv(path.read_bytes(), label, log)
            if df is None:
                return None
        else:
            log.add(label, "-", "-", f"has an unsupported type '{suffix}'",
                    "use .csv, .parquet or .xpt")
            return None
    except PermissionError:
        log.add(label, "-", "-", "cannot be read (permission denied)", "check the file permissions")
        return None
    except Exception as exc:  # malformed files of any format
        log.add(label, "-", "-", f"cannot be parsed ({type(exc).__name__}: {str(exc)[:160]})",
                "export the file again in a supported format")
        return None
    df.columns = [str(c).strip() for c in df.columns]
    if df.empty:
        log.add(label, "-", "-", "has a header but no data rows", "export the data again")
        return None
    dup = sorted({c for c in df.columns if list(df.columns).count(c) > 1})
    if dup:
        log.add(label, "row 1", dup[0], "column name appears more than once", "rename the duplicate column")
        return None
    return df


def _read_csv(raw: bytes, label: str, log: ProblemLog) -> pd.DataFrame | None:
    text = _decode(raw)
    df = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False, na_values=[""])
    if df.shape[1] == 1:
        header = df.columns[0]
        for sep, name in ((";", "semicolons"), ("\t", "tabs"), ("|", "vertical bars")):
            if sep in header:
                log.add(label, "row 1", "-", f"uses {name} between columns, not commas",
                        "save it as comma-separated CSV")
                return None
    return df


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


# --------------------------------------------------------------------------- columns


def _need_column(df: pd.DataFrame, col: str, label: str, key: str, log: ProblemLog) -> bool:
    if col in df.columns:
        return True
    log.add(label, "row 1", col, "required column is missing",
            f"add it, or map it in study.toml [columns] {key} = ... ({did_you_mean(col, df.columns)})")
    return False


def _arm_column(df: pd.DataFrame, explicit: str | None) -> str | None:
    if explicit:
        return explicit if explicit in df.columns else None
    return next((c for c in ARM_DEFAULTS if c in df.columns), None)


def _as_numbers(series: pd.Series, label: str, column: str, log: ProblemLog,
                what: str = "value") -> pd.Series:
    """Numeric conversion that reports non-numeric and infinite cells by row instead of failing."""
    if pd.api.types.is_numeric_dtype(series):
        values = series.astype(float)
        bad_text = pd.Series(False, index=series.index)
    else:
        text = series.astype("string").str.strip()
        values = pd.to_numeric(text, errors="coerce").astype(float)
        bad_text = text.notna() & values.isna() & ~text.str.lower().isin(["nan", "na", "."])
        nan_text = text.str.lower().isin(["nan"])
        if nan_text.any():
            log.add(label, rows_text(np.flatnonzero(nan_text)), column, f"{what} is the text 'NaN'",
                    "leave missing values empty")
    if bad_text.any():
        pos = np.flatnonzero(bad_text.to_numpy())
        example = str(series.iloc[pos[0]])[:40]
        log.add(label, rows_text(pos), column, f"{what} is not a number (e.g. '{example}')",
                "correct the cell or leave it empty if missing")
    inf = np.isinf(values.to_numpy())
    if inf.any():
        log.add(label, rows_text(np.flatnonzero(inf)), column, f"{what} is infinite",
                "correct the cell or leave it empty if missing")
        values = values.where(~np.isinf(values), np.nan)
    return values


def _visit_key(v) -> str:
    if isinstance(v, float) and v.is_integer():
        v = int(v)
    return str(v).strip()


# --------------------------------------------------------------------------- loading


def load_study(folder: str | Path) -> Study:
    """Read and validate a study folder. Raises StudyInputError with every problem found."""
    folder = Path(folder)
    log = ProblemLog()
    if not folder.is_dir():
        log.add(str(folder), "-", "-", "is not a folder", "give the path of a study folder")
        log.raise_if_errors()
    meta, meta_hash = read_metadata(folder, log)
    if meta is None:
        log.raise_if_errors()
    files: list[InputFile] = []
    visits_path = _inside(folder, meta.files.visits, "files.visits", log)
    part_path = (_inside(folder, meta.files.participants, "files.participants", log)
                 if meta.files.participants else None)
    log.raise_if_errors()

    visits_label = meta.files.visits
    raw_visits = read_table(visits_path, visits_label, log)
    raw_part = None
    if part_path is not None:
        raw_part = read_table(part_path, meta.files.participants, log)
    log.raise_if_errors()

    files.append(InputFile("visits", meta.files.visits, _sha256(visits_path), int(len(raw_visits))))
    if part_path is not None:
        files.append(InputFile("participants", meta.files.participants, _sha256(part_path),
                               int(len(raw_part))))

    if meta.files.layout == "wide":
        long = _wide_to_long(raw_visits, meta, visits_label, log)
    else:
        long = _normalise_long(raw_visits, meta, visits_label, log)
    participants = _participants(raw_part, long, meta, log)
    log.raise_if_errors()

    _check_arms(long, participants, meta, log)
    for i, spec in enumerate(meta.outcomes):
        _check_outcome(long, participants, spec, i, meta, visits_label, log)
    log.raise_if_errors()

    derived = sorted(c for c in DERIVED_COLUMNS if c in raw_visits.columns)
    return Study(folder=folder, metadata=meta, metadata_sha256=meta_hash, visits=long,
                 participants=participants, files=files, derived_columns=derived,
                 warnings=log.warnings)


def _normalise_long(df: pd.DataFrame, meta: StudyMetadata, label: str, log: ProblemLog) -> pd.DataFrame:
    cm = meta.columns
    ok = all([
        _need_column(df, cm.subject, label, "subject", log),
        _need_column(df, cm.param, label, "param", log),
        _need_column(df, cm.value, label, "value", log),
    ])
    has_visit = cm.visit in df.columns or cm.visit_number in df.columns
    if not has_visit:
        log.add(label, "row 1", cm.visit, "no visit column (neither the visit name nor its number)",
                f"add {cm.visit} or {cm.visit_number}, or map it in [columns] visit = ...")
    if not ok or not has_visit:
        return pd.DataFrame()
    arm_col = _arm_column(df, cm.arm)
    visit_col = cm.visit if cm.visit in df.columns else cm.visit_number
    out = pd.DataFrame({
        "row": np.arange(len(df)),
        "subject": df[cm.subject].astype("string").str.strip(),
        "param": df[cm.param].astype("string").str.strip(),
        "visit": df[visit_col].map(lambda v: _visit_key(v) if pd.notna(v) else pd.NA).astype("string"),
        "value": _as_numbers(df[cm.value], label, cm.value, log),
    })
    if cm.visit_number in df.columns and visit_col != cm.visit_number:
        out["visit_number"] = df[cm.visit_number].map(
            lambda v: _visit_key(v) if pd.notna(v) and str(v).strip() else pd.NA).astype("string")
    if arm_col is not None:
        out["arm"] = df[arm_col].astype("string").str.strip()
    missing_id = out["subject"].isna() | (out["subject"] == "")
    if missing_id.any():
        log.add(label, rows_text(np.flatnonzero(missing_id)), cm.subject, "participant identifier is empty",
                "fill in the identifier or drop the row")
    return out


def _wide_to_long(df: pd.DataFrame, meta: StudyMetadata, label: str, log: ProblemLog) -> pd.DataFrame:
    cm = meta.columns
    if not _need_column(df, cm.subject, label, "subject", log):
        return pd.DataFrame()
    arm_col = _arm_column(df, cm.arm)
    pieces = []
    for spec in meta.outcomes:
        for visit in _visits_of(spec):
            col = meta.files.wide_pattern.format(param=spec.param, visit=_visit_key(visit))
            if col not in df.columns:
                log.add(label, "row 1", col, f"no column for parameter '{spec.param}' at visit "
                        f"'{_visit_key(visit)}'", f"add it or change files.wide_pattern "
                        f"({did_you_mean(col, df.columns)})")
                continue
            piece = pd.DataFrame({
                "row": np.arange(len(df)),
                "subject": df[cm.subject].astype("string").str.strip(),
                "param": spec.param,
                "visit": _visit_key(visit),
                "value": _as_numbers(df[col], label, col, log),
            })
            if arm_col is not None:
                piece["arm"] = df[arm_col].astype("string").str.strip()
            pieces.append(piece)
    if not pieces:
        return pd.DataFrame()
    out = pd.concat(pieces, ignore_index=True)
    out["param"] = out["param"].astype("string")
    out["visit"] = out["visit"].astype("string")
    return out


def _participants(raw: pd.DataFrame | None, long: pd.DataFrame, meta: StudyMetadata,
                  log: ProblemLog) -> pd.DataFrame:
    """One row per participant with arm, endpoints and covariates, from the participant file if
    given, otherwise from the visit file (arm only)."""
    cm = meta.columns
    if long.empty:
        return pd.DataFrame()
    if raw is None:
        if "arm" not in long.columns:
            if meta.study.design == "single-arm":
                subj = sorted(long["subject"].dropna().unique())
                return pd.DataFrame({"subject": subj, "arm": meta.study.arms[0] if meta.study.arms else "All"})
            log.add(meta.files.visits, "row 1", cm.arm or "TRT01P", "no arm column",
                    "add TRTP or TRT01P, map it in [columns] arm = ..., or give files.participants")
            return pd.DataFrame()
        arms = long.dropna(subset=["subject"]).groupby("subject")["arm"].agg(lambda s: sorted(set(s.dropna())))
        multi = arms[arms.map(len) > 1]
        if len(multi):
            log.add(meta.files.visits, "-", cm.arm or "TRT01P",
                    f"{len(multi)} participant(s) have more than one arm",
                    "give each participant a single planned arm")
        return pd.DataFrame({"subject": arms.index.astype(str),
                             "arm": [a[0] if a else pd.NA for a in arms]}).reset_index(drop=True)
    label = meta.files.participants
    if not _need_column(raw, cm.subject, label, "subject", log):
        return pd.DataFrame()
    arm_col = _arm_column(raw, cm.arm)
    out = pd.DataFrame({"subject": raw[cm.subject].astype("string").str.strip()})
    if arm_col is None:
        if meta.study.design == "single-arm":
            out["arm"] = meta.study.arms[0] if meta.study.arms else "All"
        else:
            log.add(label, "row 1", cm.arm or "TRT01P", "no arm column",
                    "add TRTP or TRT01P, or map it in [columns] arm = ...")
            return pd.DataFrame()
    else:
        out["arm"] = raw[arm_col].astype("string").str.strip()
    dup = out["subject"].duplicated(keep=False) & out["subject"].notna()
    if dup.any():
        log.add(label, rows_text(np.flatnonzero(dup)), cm.subject,
                "participant appears on more than one row", "keep one row per participant")
    extra_cols = set()
    for spec in meta.outcomes:
        extra_cols.update(spec.covariates)
        if spec.risk_endpoint:
            extra_cols.add(spec.risk_endpoint)
    for col in sorted(extra_cols):
        if col not in raw.columns:
            continue  # reported per outcome
        out[col] = raw[col].reset_index(drop=True)
    return out


def _check_arms(long: pd.DataFrame, part: pd.DataFrame, meta: StudyMetadata, log: ProblemLog) -> None:
    label = meta.files.participants or meta.files.visits
    arm_name = meta.columns.arm or "TRT01P"
    declared = set(meta.study.arms)
    present = set(part["arm"].dropna().unique())
    if declared:
        for arm in sorted(present - declared):
            rows = np.flatnonzero((part["arm"] == arm).to_numpy())
            log.add(label, rows_text(rows), arm_name, f"arm '{arm}' is not in study.arms",
                    f"add it to [study] arms or correct the label ({did_you_mean(arm, declared)})")
        for arm in sorted(declared - present):
            log.add(METADATA_FILE, "study.arms", "-", f"arm '{arm}' has no participants in the data",
                    "remove it from [study] arms or check the arm column")
    no_arm = part["arm"].isna() | (part["arm"] == "")
    if no_arm.any():
        log.add(label, rows_text(np.flatnonzero(no_arm)), arm_name, "arm is empty",
                "fill in the planned arm")
    in_visits = set(long["subject"].dropna().unique())
    in_part = set(part["subject"].dropna().unique())
    if meta.files.participants:
        orphans = sorted(in_visits - in_part)
        if orphans:
            rows = np.flatnonzero(long["subject"].isin(orphans).to_numpy())
            log.add(meta.files.visits, rows_text(rows), meta.columns.subject,
                    f"{len(orphans)} participant(s) are not in the participant file",
                    f"add them to {meta.files.participants} or drop their rows")
        silent = sorted(in_part - in_visits)
        if silent:
            rows = np.flatnonzero(part["subject"].isin(silent).to_numpy())
            log.add(meta.files.participants, rows_text(rows), meta.columns.subject,
                    f"{len(silent)} participant(s) have no visit data", "they are left out of every check",
                    severity="warning")


def _visits_of(spec: OutcomeSpec) -> list:
    out = []
    for v in [spec.screening_visit, spec.baseline_visit, *spec.followup_visits]:
        if v is not None and v not in out:
            out.append(v)
    if spec.entry_criterion is not None and spec.entry_criterion.visit not in out:
        out.append(spec.entry_criterion.visit)
    return out


def _visit_rows(rows: pd.DataFrame, visit) -> pd.Series:
    key = _visit_key(visit)
    mask = rows["visit"] == key
    if "visit_number" in rows.columns and isinstance(visit, (int, float)):
        mask = mask | (rows["visit_number"] == key)
    return mask.fillna(False)


def _check_outcome(long: pd.DataFrame, part: pd.DataFrame, spec: OutcomeSpec, i: int,
                   meta: StudyMetadata, label: str, log: ProblemLog) -> None:
    cm = meta.columns
    key = f"outcomes[{i}]"
    rows = long[long["param"] == spec.param]
    if rows.empty:
        log.add(METADATA_FILE, f"{key}.param", "-", f"parameter '{spec.param}' is not in the data",
                f"correct the code ({did_you_mean(spec.param, long['param'].dropna().unique())})")
        return
    known_visits = set(rows["visit"].dropna().unique())
    if "visit_number" in rows.columns:
        known_visits |= set(rows["visit_number"].dropna().unique())
    for name, visit in (("baseline_visit", spec.baseline_visit), ("screening_visit", spec.screening_visit),
                        *[(f"followup_visits[{j}]", v) for j, v in enumerate(spec.followup_visits)]):
        if visit is not None and not _visit_rows(rows, visit).any():
            log.add(METADATA_FILE, f"{key}.{name}", "-",
                    f"visit '{_visit_key(visit)}' has no rows for '{spec.param}'",
                    f"correct the visit name ({did_you_mean(_visit_key(visit), known_visits)})")
    if spec.entry_criterion is not None and not _visit_rows(rows, spec.entry_criterion.visit).any():
        log.add(METADATA_FILE, f"{key}.entry_criterion.visit", "-",
                f"visit '{_visit_key(spec.entry_criterion.visit)}' has no rows for '{spec.param}'",
                f"correct the visit name ({did_you_mean(_visit_key(spec.entry_criterion.visit), known_visits)})")
    used = rows[rows["visit"].isin([_visit_key(v) for v in _visits_of(spec)]) |
                np.logical_or.reduce([_visit_rows(rows, v) for v in _visits_of(spec)])]
    dup = used.duplicated(subset=["subject", "visit"], keep=False)
    if dup.any():
        log.add(label, rows_text(used.loc[dup, "row"].to_numpy()), cm.value,
                f"more than one value for the same participant and visit of '{spec.param}'",
                "keep one record per participant, visit and parameter (e.g. the analysis record, ANL01FL)")
    values = used["value"]
    lo, hi = spec.lower_bound, spec.upper_bound
    if spec.bounds is not None:
        outside = (values < (lo if lo is not None else -math.inf)) | (values > (hi if hi is not None else math.inf))
        if outside.any():
            log.add(label, rows_text(used.loc[outside, "row"].to_numpy()), cm.value,
                    f"'{spec.param}' value outside its declared bounds [{lo}, {hi}]",
                    "correct the value or the outcome's bounds")
    if spec.scale == "ordinal":
        bad = values.notna() & ~values.isin(spec.levels)
        if bad.any():
            log.add(label, rows_text(used.loc[bad, "row"].to_numpy()), cm.value,
                    f"'{spec.param}' value {values[bad].iloc[0]:g} is not one of the declared levels",
                    "correct the value or the outcome's levels")
    if spec.scale == "binary":
        bad = values.notna() & ~values.isin([0, 1])
        if bad.any():
            log.add(label, rows_text(used.loc[bad, "row"].to_numpy()), cm.value,
                    f"binary outcome '{spec.param}' has a value other than 0 or 1", "code it 0/1")
    if spec.baseline_visit is not None:
        with_base = set(rows.loc[_visit_rows(rows, spec.baseline_visit) & rows["value"].notna(), "subject"])
        lacking = sorted(set(rows["subject"].dropna()) - with_base)
        if lacking:
            log.add(label, "-", cm.value, f"{len(lacking)} participant(s) have no baseline value for "
                    f"'{spec.param}'", "they are left out of the baseline-adjusted checks",
                    severity="warning")
    plabel = meta.files.participants or meta.files.visits
    for cov in spec.covariates:
        if cov not in part.columns:
            log.add(plabel, "row 1", cov, f"covariate of '{spec.param}' is missing",
                    "add the column to the participant file or remove it from covariates")
        else:
            _as_numbers(part[cov], plabel, cov, log, what="covariate")
    if spec.risk_endpoint:
        if spec.risk_endpoint not in part.columns:
            log.add(plabel, "row 1", spec.risk_endpoint, f"risk endpoint of '{spec.param}' is missing",
                    "add the column to the participant file or remove risk_endpoint")
        else:
            coded = part[spec.risk_endpoint].map(_binary_code)
            bad = part[spec.risk_endpoint].notna() & coded.isna()
            if bad.any():
                log.add(plabel, rows_text(np.flatnonzero(bad.to_numpy())), spec.risk_endpoint,
                        "event endpoint is not binary", "code it 0/1 or Y/N")


def _binary_code(v):
    if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA:
        return np.nan
    s = str(v).strip().lower()
    if s in TRUE_CODES:
        return 1.0
    if s in FALSE_CODES:
        return 0.0
    return np.nan


# --------------------------------------------------------------------------- per outcome


def outcome_data(study: Study, spec: OutcomeSpec) -> OutcomeData:
    """One row per participant for one outcome (participants with no data for it are dropped)."""
    rows = study.visits[study.visits["param"] == spec.param]
    part = study.participants
    frame = part[["subject", "arm"]].copy()
    frame = frame[frame["subject"].isin(set(rows["subject"]))]

    def values_at(visit, name):
        sel = rows[_visit_rows(rows, visit)][["subject", "value"]].rename(columns={"value": name})
        return sel.drop_duplicates("subject")

    if spec.baseline_visit is not None:
        frame = frame.merge(values_at(spec.baseline_visit, "baseline"), on="subject", how="left")
    if spec.screening_visit is not None:
        frame = frame.merge(values_at(spec.screening_visit, "screening"), on="subject", how="left")
    if spec.entry_criterion is not None and spec.entry_criterion.visit not in (
            spec.baseline_visit, spec.screening_visit):
        frame = frame.merge(values_at(spec.entry_criterion.visit, "entry_value"), on="subject", how="left")
    for v in spec.followup_visits:
        frame = frame.merge(values_at(v, f"fu:{_visit_key(v)}"), on="subject", how="left")
    frame["followup"] = frame[f"fu:{_visit_key(spec.main_followup)}"]
    if spec.risk_endpoint:
        ev = part[["subject", spec.risk_endpoint]].copy()
        ev["event"] = ev[spec.risk_endpoint].map(_binary_code).astype(float)
        frame = frame.merge(ev[["subject", "event"]], on="subject", how="left")
    for cov in spec.covariates:
        cv = part[["subject", cov]].copy()
        cv[cov] = pd.to_numeric(cv[cov], errors="coerce").astype(float)
        frame = frame.merge(cv, on="subject", how="left")
    frame = frame.sort_values("subject", kind="mergesort").reset_index(drop=True)
    meta = study.metadata.study
    arms = list(meta.arms) if meta.arms else sorted(frame["arm"].dropna().unique())
    return OutcomeData(spec=spec, frame=frame, arms=arms, control_arm=meta.control_arm,
                       design=meta.design, derived_columns=study.derived_columns)
