"""``auditor init``: a draft study.toml guessed from the data, every guess marked for the user to confirm.

Scale guesses (a convention of this tool): two distinct values, binary; integers with 3 to 10
distinct values, ordinal; non-negative integers with more than 10 distinct values, count; anything
else, continuous.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import ProblemLog, StudyInputError
from .study import ARM_DEFAULTS, load_study, read_table

CHECK = "# CHECK:"


def guess_scale(values: pd.Series) -> tuple[str, list[float] | None, str]:
    """(scale, levels, reason) for a parameter's values."""
    v = pd.to_numeric(values, errors="coerce").dropna().to_numpy(dtype=float)
    distinct = np.unique(v)
    integer = bool(np.all(np.equal(np.mod(v, 1), 0)))
    if set(distinct) <= {0.0, 1.0}:
        return "binary", None, f"{len(distinct)} distinct values, coded 0/1"
    if len(distinct) == 2 and integer:  # a binary outcome must be coded 0/1: two other codes are ordered levels
        return "ordinal", [float(x) for x in distinct], "2 integer codes other than 0/1"
    if len(distinct) <= 2:
        return "continuous", None, f"{len(distinct)} distinct values, not all integers"
    if integer and len(distinct) <= 10:
        return "ordinal", [float(x) for x in distinct], f"{len(distinct)} integer levels"
    if integer and distinct.min() >= 0:
        return "count", None, f"{len(distinct)} distinct non-negative integers"
    return "continuous", None, f"{len(distinct)} distinct values, not all integers"


def _q(s) -> str:
    return json.dumps(str(s), ensure_ascii=False)


def _num(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else repr(float(x))


def _visits_in_order(df: pd.DataFrame) -> list[str]:
    if "AVISITN" in df.columns and "AVISIT" in df.columns:
        order = (df[["AVISIT", "AVISITN"]].dropna().assign(n=lambda d: pd.to_numeric(d["AVISITN"], errors="coerce"))
                 .groupby("AVISIT")["n"].min().sort_values())
        return [str(v) for v in order.index]
    if "AVISIT" in df.columns:
        return [str(v) for v in pd.unique(df["AVISIT"].dropna())]
    numbers = pd.to_numeric(df["AVISITN"], errors="coerce").dropna()
    return [_num(v) for v in sorted(pd.unique(numbers))]


def _visit_column(df: pd.DataFrame) -> str:
    """The column the visits are read from: AVISIT, else AVISITN (visits then given as numbers)."""
    return "AVISIT" if "AVISIT" in df.columns else "AVISITN"


def _visit_text(v: str, numbered: bool) -> str:
    """A visit as study.toml writes it: a quoted name, or a bare number when the visits come from
    AVISITN (validation matches numbers to AVISITN and names to AVISIT)."""
    return v if numbered else _q(v)


def _visits_of_rows(rows: pd.DataFrame, order: list[str]) -> list[str]:
    """The visits, in study order, at which a parameter has rows."""
    col = _visit_column(rows)
    cells = rows[col] if col == "AVISIT" else pd.to_numeric(rows[col], errors="coerce").dropna().map(_num)
    present = set(cells.dropna().astype(str))
    return [v for v in order if v in present]


def _baseline_visit(rows: pd.DataFrame, visits: list[str]) -> str:
    if "ABLFL" in rows.columns and "AVISIT" in rows.columns:
        flagged = rows.loc[rows["ABLFL"].astype(str).str.upper() == "Y", "AVISIT"].dropna().astype(str)
        if len(flagged):
            return flagged.mode().iloc[0]
    named = [v for v in visits if "base" in v.lower()]
    return named[0] if named else visits[0]


def _visit_lines(base: str | None, later: list[str], visits: list[str], numbered: bool) -> list[str]:
    """The visit keys of one outcome's draft. With visits after the baseline: the baseline, those
    follow-ups and a change analysis. With a single visit there is nothing to compare it with, so
    the draft names it as the follow-up with a follow-up-only analysis and no baseline (a visit
    cannot be its own baseline, which validation refuses)."""
    if base is not None and later:
        return [f"baseline_visit = {_visit_text(base, numbered)}  {CHECK}",
                f"followup_visits = [{', '.join(_visit_text(v, numbered) for v in later)}]  {CHECK} the main one is the last",
                f'planned_analysis = "change"  {CHECK} as the protocol or SAP states it', ""]
    only = visits[-1:]
    return [f"followup_visits = [{', '.join(_visit_text(v, numbered) for v in only)}]  {CHECK} no visit after it was found, "
            "so no baseline is named",
            f'planned_analysis = "follow-up-only"  {CHECK} as the protocol or SAP states it', ""]


def draft_metadata(data_files: list[Path], folder: Path, blinded: bool = False) -> str:
    log = ProblemLog()
    tables = {}
    for path in data_files:
        df = read_table(Path(path), Path(path).name, log)
        if df is not None:
            tables[Path(path)] = df
    log.raise_if_errors()
    visits_path = next((p for p, d in tables.items() if {"PARAMCD", "AVAL"} <= set(d.columns)), None)
    if visits_path is None:
        log.add(Path(data_files[0]).name, "row 1", "PARAMCD", "no visit-level file (with PARAMCD and AVAL) "
                "among the files given", "give the ADaM-style visit-level file first")
        raise StudyInputError(log.problems)
    visits = tables[visits_path]
    if not {"AVISIT", "AVISITN"} & set(visits.columns):
        log.add(visits_path.name, "row 1", "AVISIT", "no visit column (AVISIT or AVISITN) in the visit-level file",
                "add the visit of each row, or write study.toml by hand with [columns] visit = ...")
        raise StudyInputError(log.problems)
    part_path = next((p for p in tables if p != visits_path), None)
    part = tables.get(part_path)
    arm_source = part if part is not None else visits
    arm_col = next((c for c in ARM_DEFAULTS if c in arm_source.columns), None)
    arms = sorted(str(a) for a in arm_source[arm_col].dropna().unique()) if arm_col else []
    control = next((a for a in arms if any(w in a.lower() for w in ("placebo", "control", "standard"))),
                   arms[0] if arms else None)
    n_subj = visits["USUBJID"].nunique() if "USUBJID" in visits.columns else len(visits)
    rel = lambda p: os.path.relpath(Path(p).resolve(), Path(folder).resolve()).replace(os.sep, "/")
    lines = [
        "# Draft study metadata written by 'auditor init'. Confirm every line marked CHECK.",
        f"# {n_subj} participants and {visits['PARAMCD'].nunique()} parameters found.",
        "",
        "[study]",
        f'id = "DRAFT"  {CHECK} the study identifier',
        'title = ""',
        f'design = "{"parallel" if len(arms) > 1 else "single-arm"}"  {CHECK} parallel or single-arm',
        f"arms = [{', '.join(_q(a) for a in arms)}]  {CHECK} arms found in column {arm_col}",
    ]
    if control is not None and len(arms) > 1:
        lines.append(f"control_arm = {_q(control)}  {CHECK} guessed from the labels")
    lines += [
        f"blinded = {'true' if blinded else 'false'}  # CHECK: true for a pooled report that shows nothing by arm",
        '# analysis_date = 2026-01-31  # CHECK: the date to print on the report',
        "",
        "[files]",
        f"visits = {_q(rel(visits_path))}",
    ]
    if part_path is not None:
        lines.append(f"participants = {_q(rel(part_path))}")
    lines += ['layout = "long"', ""]
    if arm_col and arm_col != "TRTP":
        lines += ["[columns]", f"arm = {_q(arm_col)}", ""]
    order = _visits_in_order(visits)
    for param in sorted(visits["PARAMCD"].dropna().astype(str).unique()):
        rows = visits[visits["PARAMCD"].astype(str) == param]
        scale, levels, why = guess_scale(rows["AVAL"])
        pv = _visits_of_rows(rows, order)
        base = _baseline_visit(rows, pv) if pv else None
        later = [v for v in pv if base is None or pv.index(v) > pv.index(base)]
        label = rows["PARAM"].dropna().astype(str).iloc[0] if "PARAM" in rows.columns and rows["PARAM"].notna().any() else ""
        lines += [
            "[[outcomes]]",
            f"param = {_q(param)}",
            f"label = {_q(label)}",
            f"scale = {_q(scale)}  {CHECK} guessed from {why}",
        ]
        if levels:
            lines.append(f"levels = [{', '.join(_num(x) for x in levels)}]  {CHECK} the ordered codes")
        if scale == "count":
            lines.append(f'# exposure = "COLUMN"  {CHECK} the visit-file column with each count\'s observation '
                         "time, if it varied")
        lines += _visit_lines(base, later, pv, _visit_column(visits) == "AVISITN")
    return "\n".join(lines) + "\n"


def checked_draft(data_files: list[Path], folder: Path, blinded: bool = False) -> str:
    """The draft study.toml for ``folder``, loaded as ``auditor validate`` would load it.

    A draft that validation would refuse is never handed out: its problems are raised instead
    (exit 2), so ``init`` writes nothing rather than a file its own ``validate`` rejects.
    Validation warnings are allowed, as they are for ``validate``.
    """
    return _validated_draft(folder, draft_metadata(data_files, folder, blinded))


# --------------------------------------------------------------------------- a whole folder

DATA_SUFFIXES = (".csv", ".parquet", ".xpt")
POPULATION_FLAGS = ("FASFL", "ITTFL", "MITTFL", "PPROTFL", "SAFFL")
"""ADSL population flags, in the order the draft prefers one for the analysis population (the full
analysis set first; a convention of this tool)."""
RATING_WORDS = ("score", "scale", "questionnaire", "index", "total", "item", "rating", "grade")
COUNT_WORDS = ("count", "number", "episodes", "events", "lesions", "attacks")


def data_files_in(folder: Path) -> list[Path]:
    """Data files in the folder and its sub-folders (hidden folders skipped), in name order."""
    out = []
    for p in sorted(folder.rglob("*")):
        rel = p.relative_to(folder)
        if p.is_file() and p.suffix.lower() in DATA_SUFFIXES and not any(part.startswith(".") for part in rel.parts):
            out.append(p)
    return out


def _is_bds(df: pd.DataFrame) -> bool:
    return {"USUBJID", "PARAMCD", "AVAL"} <= set(df.columns)


def _is_participant_level(df: pd.DataFrame) -> bool:
    """One row per participant: the mark of ADSL whatever the file is called."""
    return "USUBJID" in df.columns and "PARAMCD" not in df.columns and not df["USUBJID"].duplicated().any()


def _flag_columns(df: pd.DataFrame) -> list[str]:
    """Columns coded Y/N (or Y/empty): ADaM flags."""
    out = []
    for c in df.columns:
        cells = set(df[c].dropna().astype(str).str.strip().str.upper()) - {""}
        if cells and cells <= {"Y", "N"} and str(c).upper().endswith("FL"):
            out.append(str(c))
    return out


def _units(rows: pd.DataFrame) -> dict[str, int]:
    if "AVALU" not in rows.columns:
        return {}
    u = rows["AVALU"].dropna().astype(str).str.strip()
    return {k: int(v) for k, v in u[u != ""].value_counts().sort_index().items()}


def _is_concentration(unit: str) -> bool:
    """A unit per volume or mass (mg/L, 10^9/L, kU/L, mmol/mol): a concentration, never a count."""
    return "/" in unit


def guess_scale_in_context(values: pd.Series, unit: str, words: str) -> tuple[str, list[float] | None, str]:
    """:func:`guess_scale`, except that a bounded rating scale (a score, a questionnaire total) or a
    concentration is never called a count: many distinct non-negative integers are a count only when
    nothing else says what they are (a convention of this tool)."""
    scale, levels, why = guess_scale(values)
    text = words.lower()
    if scale == "count":
        if unit and _is_concentration(unit):
            return "continuous", None, f"{why}, but the unit {unit} is a concentration"
        if any(w in text for w in RATING_WORDS) and not any(w in text for w in COUNT_WORDS) \
                and not (unit and _is_concentration(unit)):
            return "continuous", None, f"{why}, but the label names a rating scale (bounded, not a count)"
    return scale, levels, why


def _suggested_bounds(values: pd.Series, scale: str, unit: str, words: str) -> str | None:
    """A ``bounds`` line from the data: a rating scale's observed range, or a lower bound of 0 for
    non-negative measurements (concentrations, counts). Guesses only, marked CHECK."""
    v = pd.to_numeric(values, errors="coerce").dropna()
    if v.empty or scale in ("binary", "ordinal"):
        return None
    lo, hi = float(v.min()), float(v.max())
    concentration = bool(unit) and _is_concentration(unit)
    rating = any(w in words.lower() for w in RATING_WORDS) and not concentration
    if rating and lo >= 0 and scale == "continuous":
        top = _num(math.ceil(hi))
        return (f"bounds = [0, {top}]  {CHECK} the scale's range; guessed from the data ({_num(lo)} to {_num(hi)}): "
                "write the instrument's own minimum and maximum")
    if lo >= 0:
        why = f"a concentration ({unit})" if concentration else "no value below 0 in the data"
        return f"bounds = [0, inf]  {CHECK} {why}: 0 is the natural lower bound"
    return None


def _screening_visit(rows: pd.DataFrame, visits: list[str], base: str | None) -> str | None:
    """The visit before the baseline named as screening (or the last visit before the baseline)."""
    if base is None or base not in visits:
        return None
    before = visits[:visits.index(base)]
    named = [v for v in before if "screen" in v.lower()]
    return named[-1] if named else (before[-1] if before else None)


def _outcome_block(param: str, rows: pd.DataFrame, rel_file: str, many_files: bool, order: list[str],
                   numbered: bool, file_words: str) -> list[str]:
    """The [[outcomes]] lines of one parameter of one BDS file."""
    label = rows["PARAM"].dropna().astype(str).iloc[0] if "PARAM" in rows.columns and rows["PARAM"].notna().any() else ""
    category = (rows["PARCAT1"].dropna().astype(str).iloc[0]
                if "PARCAT1" in rows.columns and rows["PARCAT1"].notna().any() else "")
    units = _units(rows)
    unit = next(iter(units)) if len(units) == 1 else ""
    observed = rows
    if "DTYPE" in rows.columns:
        observed = rows[rows["DTYPE"].isna() | (rows["DTYPE"].astype(str).str.strip() == "")]
    words = " ".join([param, label, category, file_words])
    scale, levels, why = guess_scale_in_context(observed["AVAL"], unit, words)
    pv = _visits_of_rows(observed, order)
    base = _baseline_visit(observed, pv) if pv else None
    later = [v for v in pv if base is None or pv.index(v) > pv.index(base)]
    lines = ["[[outcomes]]", f"param = {_q(param)}", f"label = {_q(label)}"]
    if many_files:
        lines.append(f"file = {_q(rel_file)}")
    if category:
        lines.append(f"# parameter category (PARCAT1): {category}")
    lines.append(f"scale = {_q(scale)}  {CHECK} guessed from {why}")
    if levels:
        lines.append(f"levels = [{', '.join(_num(x) for x in levels)}]  {CHECK} the ordered codes")
    if unit:
        lines.append(f"unit = {_q(unit)}  {CHECK} from AVALU")
    bounds = _suggested_bounds(observed["AVAL"], scale, unit, words)
    if bounds:
        lines.append(bounds)
    screening = _screening_visit(observed, pv, base) if later else None
    if screening is not None:
        lines.append(f"screening_visit = {_visit_text(screening, numbered)}  {CHECK} the visit before the "
                     "baseline")
        later = [v for v in later if v != screening]
    if "ANL01FL" in rows.columns:
        lines.append(f'records = {{ analysis_flag = "ANL01FL" }}  {CHECK} only records flagged Y are analysed')
    if scale == "count":
        lines.append(f'# exposure = "COLUMN"  {CHECK} the visit-file column with each count\'s observation '
                     "time, if it varied")
    lines += _visit_lines(base, later, pv, numbered)
    if len(units) > 1:
        listed = ", ".join(f"'{u}' ({n} records)" for u, n in units.items())
        return ([f"{CHECK} parameter {param} of {rel_file} mixes units: {listed}. Convert its values to one "
                 "unit, then remove the leading '# ' of the lines below to audit it."]
                + [f"# {line}" if line else "" for line in lines])
    return lines


def draft_folder(folder: Path, blinded: bool = True) -> str:
    """A draft study.toml for a whole ADaM delivery: the participant file (one row per participant),
    every BDS file (USUBJID, PARAMCD, AVAL) with one outcome per parameter, record rules (DTYPE,
    ANL01FL, a population flag), units, screening and baseline visits and bounds. Every guess is
    marked CHECK; a parameter that mixes units is drafted commented out."""
    folder = Path(folder)
    log = ProblemLog()
    tables = {}
    for path in data_files_in(folder):
        df = read_table(path, path.relative_to(folder).as_posix(), log)
        if df is not None:
            tables[path] = df
    log.raise_if_errors()
    rel = lambda p: p.relative_to(folder).as_posix()  # noqa: E731
    bds = [p for p, d in tables.items() if _is_bds(d)]
    if not bds:
        log.add(str(folder), "-", "PARAMCD", "no visit-level (BDS) file with USUBJID, PARAMCD and AVAL in the folder",
                "put the ADaM datasets (.csv, .parquet or .xpt) in the folder")
        raise StudyInputError(log.problems)
    for p in bds:
        if not {"AVISIT", "AVISITN"} & set(tables[p].columns):
            log.add(rel(p), "row 1", "AVISIT", "no visit column (AVISIT or AVISITN) in this BDS file",
                    "add the visit of each row, or write study.toml by hand with [columns] visit = ...")
    log.raise_if_errors()
    people = [p for p, d in tables.items() if p not in bds and _is_participant_level(d)]
    part_path = (sorted(people, key=lambda p: ("adsl" not in p.name.lower(), -len(tables[p].columns), p.name))[0]
                 if people else None)
    part = tables.get(part_path)
    arm_source = part if part is not None else tables[bds[0]]
    arm_col = next((c for c in ARM_DEFAULTS if c in arm_source.columns), None)
    arms = sorted(str(a) for a in arm_source[arm_col].dropna().unique()) if arm_col else []
    control = next((a for a in arms if any(w in a.lower() for w in ("placebo", "control", "standard", "vehicle"))),
                   arms[0] if arms else None)
    subjects = part["USUBJID"].nunique() if part is not None else tables[bds[0]]["USUBJID"].nunique()
    n_params = sum(tables[p]["PARAMCD"].nunique() for p in bds)
    lines = [
        "# Draft study metadata written by 'auditor init'. Confirm every line marked CHECK.",
        f"# {subjects} participants, {len(bds)} visit-level file(s) and {n_params} parameters found.",
        "",
        "[study]",
        f'id = "DRAFT"  {CHECK} the study identifier',
        'title = ""',
    ]
    if arms:
        lines += [f'design = "{"parallel" if len(arms) > 1 else "single-arm"}"  {CHECK} parallel or single-arm',
                  f"arms = [{', '.join(_q(a) for a in arms)}]  {CHECK} arms found in column {arm_col}"]
        if control is not None and len(arms) > 1:
            lines.append(f"control_arm = {_q(control)}  {CHECK} guessed from the labels")
    elif blinded:
        lines.append(f'design = "parallel"  {CHECK} no arm column found: the audit is pooled (blinded)')
    else:
        lines += [f'design = "single-arm"  {CHECK} no arm column found', 'arms = ["All"]']
    lines += [
        f"blinded = {'true' if blinded else 'false'}  {CHECK} true: a pooled report that shows nothing by arm"
        + ("" if blinded else " (drafted false because --unblinded was given)"),
        '# analysis_date = 2026-01-31  # CHECK: the date to print on the report',
        "",
        "[files]",
    ]
    if len(bds) == 1:
        lines.append(f"visits = {_q(rel(bds[0]))}")
    else:
        lines.append(f"visits = [{', '.join(_q(rel(p)) for p in bds)}]")
    if part_path is not None:
        lines.append(f"participants = {_q(rel(part_path))}  {CHECK} the file with one row per participant")
    lines += ['layout = "long"', ""]
    if arm_col and arm_col != "TRTP":
        lines += ["[columns]", f"arm = {_q(arm_col)}", ""]
    lines += _records_lines(tables, bds, part)
    for p in bds:
        df = tables[p]
        order = _visits_in_order(df)
        numbered = _visit_column(df) == "AVISITN"
        for param in sorted(df["PARAMCD"].dropna().astype(str).unique()):
            rows = df[df["PARAMCD"].astype(str) == param]
            lines += _outcome_block(param, rows, rel(p), len(bds) > 1, order, numbered, p.stem)
    return "\n".join(lines) + "\n"


def _records_lines(tables: dict, bds: list[Path], part: pd.DataFrame | None) -> list[str]:
    """The [records] section: derived records found, the population flag chosen, the binary flags seen."""
    kinds: dict[str, int] = {}
    for p in bds:
        if "DTYPE" in tables[p].columns:
            d = tables[p]["DTYPE"].dropna().astype(str).str.strip()
            for k, n in d[d != ""].value_counts().sort_index().items():
                kinds[k] = kinds.get(k, 0) + int(n)
    flags = _flag_columns(part) if part is not None else []
    population = next((f for f in POPULATION_FLAGS if f in flags), None)
    lines = ["[records]"]
    found = ", ".join(f"{k} ({n} records)" for k, n in kinds.items()) or "none found"
    lines.append(f'dtype = "drop"  {CHECK} derived or imputed records (DTYPE: {found}) are left out; "keep" '
                 "analyses them")
    if population:
        lines.append(f"population = {_q(population)}  {CHECK} population flags in the participant file: "
                     f"{', '.join(f for f in flags if f in POPULATION_FLAGS)}")
    others = [f for f in flags if f not in POPULATION_FLAGS]
    if others:
        lines.append(f"{CHECK} other binary flags in the participant file (possible risk_endpoint of an "
                     f"outcome): {', '.join(others)}")
    return lines + [""]


def checked_folder_draft(folder: Path, blinded: bool = True) -> str:
    """:func:`draft_folder`, validated as ``auditor validate`` would validate it (see :func:`checked_draft`)."""
    return _validated_draft(folder, draft_folder(folder, blinded))


def _validated_draft(folder: Path, text: str) -> str:
    """``text``, a drafted study.toml, once it loads with the folder's data as ``validate`` would
    load it; its problems otherwise, said to be in the draft (which is then not written)."""
    try:
        load_study(folder, text.encode("utf-8"))
    except StudyInputError as exc:
        raise StudyInputError(exc.problems, "in the drafted study.toml, which was not written "
                              "(mend the data, or write study.toml by hand)") from None
    return text
