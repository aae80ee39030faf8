"""``auditor init``: a draft study.toml guessed from the data, every guess marked for the user to confirm.

Scale guesses (a convention of this tool): two distinct values, binary; integers with 3 to 10
distinct values, ordinal; non-negative integers with more than 10 distinct values, count; anything
else, continuous.
"""

from __future__ import annotations

import json
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


def draft_metadata(data_files: list[Path], folder: Path) -> str:
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
        "blinded = false  # CHECK: true for a pooled report that shows nothing by arm",
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


def checked_draft(data_files: list[Path], folder: Path) -> str:
    """The draft study.toml for ``folder``, loaded as ``auditor validate`` would load it.

    A draft that validation would refuse is never handed out: its problems are raised instead
    (exit 2), so ``init`` writes nothing rather than a file its own ``validate`` rejects.
    Validation warnings are allowed, as they are for ``validate``.
    """
    text = draft_metadata(data_files, folder)
    try:
        load_study(folder, text.encode("utf-8"))
    except StudyInputError as exc:
        raise StudyInputError(exc.problems, "in the drafted study.toml, which was not written "
                              "(mend the data, or write study.toml by hand)") from None
    return text
