"""Reading and validating the summaries file: one row per outcome and arm, as a paper reports them.

Every problem is collected with its file, row and column, what is wrong and how to fix it; nothing is
audited while one remains. Numbers that cannot describe one set of participants (an impossible
implied correlation, an SD far too small for the spread other numbers imply) are refused, and where
the SD times sqrt(n) would fit they are named "probably an SE".
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import ProblemLog, did_you_mean
from ..study import _inside
from ..stats.summary_formulas import (change_sd, implied_correlation, looks_like_se, mean_sd_from_quartiles,
                                      se_from_ci)
from .spec import SummaryMetadata

REQUIRED = ("outcome", "arm", "n")
NUMERIC = ("n", "mean_baseline", "sd_baseline", "mean_followup", "sd_followup", "sd_change", "r_prepost",
           "mean_change", "se_change", "change_lower", "change_upper", "effect", "effect_lower",
           "effect_upper", "median_baseline", "q1_baseline", "q3_baseline", "median_followup",
           "q1_followup", "q3_followup")
COLUMNS = ("outcome", "arm") + NUMERIC + ("note",)
VISITS = ("baseline", "followup")
VISIT_WORD = {"baseline": "baseline", "followup": "follow-up"}
MAX_ROWS = 1000
MAX_BYTES = 5_000_000
PLAUSIBLE_MAX_R = 0.98
"""An implied pre-post correlation above this, where reading one SD as an SE would give a usual one,
marks that SD as probably an SE (a convention of this tool, no source)."""


@dataclass
class ArmSummary:
    """One arm's reported numbers for one outcome, and what was derived from them (with how)."""

    outcome: str
    arm: str
    row: int
    n: int
    mean: dict[str, float]
    sd: dict[str, float]
    values: dict[str, float | None]
    sources: dict[str, str] = field(default_factory=dict)
    """How each derived quantity was obtained (``reported``, ``from the SE``, ``from medians`` ...)."""
    sd_change: float | None = None
    r: float | None = None
    """The pre-post correlation: reported, else implied by the three SDs, else None."""


@dataclass
class Summaries:
    file: str
    sha256: str
    rows: int
    arms: dict[str, dict[str, ArmSummary]]
    """outcome -> arm -> summary."""


def _number(text: str):
    try:
        v = float(text)
    except ValueError:
        return None
    return v


def read_summaries(folder: Path, meta: SummaryMetadata, log: ProblemLog) -> Summaries | None:
    """Read and validate the summaries file; every problem goes to ``log``."""
    name = meta.files.summaries
    path = _inside(Path(folder), name, "files.summaries", log)
    if path is None:
        return None
    if not path.is_file():
        log.add(name, "-", "-", f"the summaries file named in study.toml (files.summaries) is not in {folder}",
                "put the file there or correct files.summaries")
        return None
    if path.stat().st_size > MAX_BYTES:
        log.add(name, "-", "-", f"is larger than {MAX_BYTES // 1_000_000} MB, far more than a paper's summaries",
                "give one row per outcome and arm")
        return None
    raw = path.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        log.add(name, "-", "-", "is not UTF-8 text", "save the file as UTF-8 CSV")
        return None
    try:
        rows = list(csv.reader(io.StringIO(text)))
    except csv.Error as exc:
        log.add(name, "-", "-", f"is not readable CSV ({exc})", "save the file as plain comma-separated text")
        return None
    if not rows:
        log.add(name, "-", "-", "is empty", "give a header line and one row per outcome and arm")
        return None
    header = [h.strip() for h in rows[0]]
    for i, h in enumerate(header):
        if h not in COLUMNS:
            log.add(name, "row 1", h or f"#{i + 1}", "is not a column of a summaries file",
                    f"rename or remove it ({did_you_mean(h, COLUMNS)})")
    for h in REQUIRED:
        if h not in header:
            log.add(name, "row 1", h, "required column is missing", f"add a column '{h}'")
    dup = sorted({h for h in header if header.count(h) > 1})
    for h in dup:
        log.add(name, "row 1", h, "column appears more than once", "keep one")
    if any(h not in header for h in REQUIRED) or dup:
        return None
    if len(rows) - 1 > MAX_ROWS:
        log.add(name, "-", "-", f"holds {len(rows) - 1} rows, more than {MAX_ROWS}", "give one row per outcome and arm")
        return None
    out: dict[str, dict[str, ArmSummary]] = {o.param: {} for o in meta.outcomes}
    specs = {o.param: o for o in meta.outcomes}
    for k, cells in enumerate(rows[1:], start=2):
        if not any(c.strip() for c in cells):
            continue
        if len(cells) > len(header):
            log.add(name, f"row {k}", "-", f"has {len(cells)} cells but the header names {len(header)} columns",
                    "remove the extra cells or quote a cell that holds a comma")
            continue
        rec = {h: (cells[i].strip() if i < len(cells) else "") for i, h in enumerate(header)}
        summary = _row(name, k, rec, meta, specs, log)
        if summary is None:
            continue
        if summary.arm in out[summary.outcome]:
            log.add(name, f"row {k}", "arm", f"outcome '{summary.outcome}', arm '{summary.arm}' is given a "
                    f"second time (first at row {out[summary.outcome][summary.arm].row})", "keep one row per outcome and arm")
            continue
        out[summary.outcome][summary.arm] = summary
    for param, by_arm in out.items():
        for arm in meta.study.arms:
            if arm not in by_arm:
                log.add(name, "-", "arm", f"outcome '{param}' has no row for arm '{arm}'",
                        "add the arm's numbers as the paper reports them")
    _check_across_arms(name, out, log)
    return Summaries(name, hashlib.sha256(raw).hexdigest(), len(rows) - 1, out)


def _row(name: str, k: int, rec: dict, meta: SummaryMetadata, specs, log: ProblemLog) -> ArmSummary | None:
    """One row validated on its own: names, numbers, ranges, each visit described, SDs coherent."""
    where = f"row {k}"
    bad = False
    param, arm = rec.get("outcome", ""), rec.get("arm", "")
    if param not in specs:
        log.add(name, where, "outcome", f"'{param}' is not an outcome of study.toml",
                f"use a declared param ({did_you_mean(param, specs)})")
        bad = True
    if arm not in meta.study.arms:
        log.add(name, where, "arm", f"'{arm}' is not one of the study's arms",
                f"use an arm listed in study.toml ({did_you_mean(arm, meta.study.arms)})")
        bad = True
    values: dict[str, float | None] = {}
    for col in NUMERIC:
        cell = rec.get(col, "")
        if cell == "":
            values[col] = None
            continue
        v = _number(cell)
        if v is None or not math.isfinite(v):
            log.add(name, where, col, f"'{cell[:40]}' is not a finite number", "write a plain number, or leave it empty")
            bad = True
            values[col] = None
        else:
            values[col] = v
    n = values["n"]
    if rec.get("n", "") == "":
        log.add(name, where, "n", "the number of participants is missing", "give the arm's n for this outcome")
        bad = True
    elif n is not None and (n < 2 or not float(n).is_integer()):
        log.add(name, where, "n", f"n = {n:g} is not a whole number of participants of at least 2 (an SD needs two)",
                "give the number analysed in this arm")
        bad = True
    for col in NUMERIC:
        v = values[col]
        if v is None:
            continue
        if col.startswith(("sd_", "se_")) and v <= 0:
            log.add(name, where, col, f"{col} = {v:g}: a standard deviation or error must be positive",
                    "copy the value from the paper (an SD is never negative or zero)")
            bad = True
    r = values["r_prepost"]
    if r is not None and not -1 <= r <= 1:
        log.add(name, where, "r_prepost", f"correlation {r:g} lies outside -1 to 1",
                "give the pre-post correlation as a number from -1 to 1 (not a percentage or a covariance)")
        bad = True
    for lo, hi in (("change_lower", "change_upper"), ("effect_lower", "effect_upper")):
        if values[lo] is not None and values[hi] is not None and values[lo] >= values[hi]:
            log.add(name, where, hi, f"the interval's upper end {values[hi]:g} is not above its lower end {values[lo]:g}",
                    "give the interval as lower and upper limits")
            bad = True
    if bad or param not in specs:
        return None
    spec = specs[param]
    means, sds = {}, {}
    sources = {}
    for visit in VISITS:
        m, s = values[f"mean_{visit}"], values[f"sd_{visit}"]
        q1, med, q3 = values[f"q1_{visit}"], values[f"median_{visit}"], values[f"q3_{visit}"]
        if m is not None and s is not None:
            means[visit], sds[visit] = m, s
            sources[visit] = "reported mean and SD"
        elif None not in (q1, med, q3):
            if not q1 <= med <= q3 or q1 == q3:
                log.add(name, where, f"median_{visit}", f"quartiles {q1:g}, {med:g}, {q3:g} are not in order "
                        "(q1 <= median <= q3, q1 < q3)", "copy the median and IQR from the paper")
                return None
            means[visit], sds[visit] = mean_sd_from_quartiles(q1, med, q3, int(n))
            sources[visit] = "estimated from the median and IQR (Wan et al. 2014)"
        else:
            missing = "SD" if m is not None else ("mean" if s is not None else "mean and SD")
            log.add(name, where, f"mean_{visit}" if m is None else f"sd_{visit}",
                    f"the {VISIT_WORD[visit]} {missing} is missing (and no median with quartiles either)",
                    f"give mean_{visit} and sd_{visit}, or median_{visit}, q1_{visit} and q3_{visit}")
            return None
        lo, hi = spec.lower_bound, spec.upper_bound
        if (lo is not None and means[visit] < lo) or (hi is not None and means[visit] > hi):
            log.add(name, where, f"mean_{visit}", f"mean {means[visit]:g} lies outside the outcome's bounds "
                    f"({'-' if lo is None else f'{lo:g}'} to {'-' if hi is None else f'{hi:g}'})",
                    "check the value and the bounds declared in study.toml")
            return None
    s = ArmSummary(param, arm, k, int(n), means, sds, values, sources)
    return s if _coherent(name, where, s, log) else None


def _coherent(name: str, where: str, s: ArmSummary, log: ProblemLog) -> bool:
    """Derive the SD of change and the correlation, refusing combinations no sample can have."""
    v, n, sb, sf = s.values, s.n, s.sd["baseline"], s.sd["followup"]
    sd_c, how = v["sd_change"], "reported"
    if v["se_change"] is not None:
        from_se = v["se_change"] * math.sqrt(n)
        if sd_c is not None and abs(sd_c - v["se_change"]) <= 0.1 * v["se_change"] and n >= 4:
            log.add(name, where, "sd_change", f"sd_change {sd_c:g} equals the SE of the mean change "
                    f"({v['se_change']:g}); it is probably an SE", f"enter the SD, SE x sqrt(n) = {from_se:.4g}")
            return False
        if sd_c is None:
            sd_c, how = from_se, "from the SE of the mean change (SD = SE x sqrt(n))"
    if sd_c is None and v["change_lower"] is not None and v["change_upper"] is not None:
        sd_c = se_from_ci(v["change_lower"], v["change_upper"]) * math.sqrt(n)
        how = "from the 95% CI of the mean change (SD = sqrt(n) x width / 3.92)"
    r = v["r_prepost"]
    if sd_c is not None:
        implied = implied_correlation(sb, sf, sd_c)
        if not -1 <= implied <= 1 or (implied > PLAUSIBLE_MAX_R and _probable_se(sb, sf, sd_c, n)):
            log.add(name, where, *_impossible(sb, sf, sd_c, n, implied, how))
            return False
        if r is None:
            r, s.sources["r"] = implied, "implied by the SDs of baseline, follow-up and change"
        else:
            s.sources["r"] = "reported"
    elif r is not None:
        sd_c, how = change_sd(sb, sf, r), "from the reported correlation (Cochrane imputation)"
        s.sources["r"] = "reported"
    s.sd_change, s.r = sd_c, r
    if sd_c is not None:
        s.sources["sd_change"] = how
    return True


def _impossible(sb: float, sf: float, sd_c: float, n: int, implied: float, how: str) -> tuple[str, str, str]:
    """Column, problem and fix for three SDs that imply a correlation outside -1 to 1 (or above
    PLAUSIBLE_MAX_R), naming the SD that is probably an SE when its SE-to-SD rescaling fits."""
    base = (f"the SDs of baseline ({sb:g}), follow-up ({sf:g}) and change ({sd_c:.4g}, {how}) imply a "
            f"pre-post correlation of {implied:.3g}, which " +
            ("no sample can have" if abs(implied) > 1 else "is implausibly close to 1 for a trial outcome"))
    col = _probable_se(sb, sf, sd_c, n)
    if col is not None:
        sd = {"sd_baseline": sb, "sd_followup": sf, "sd_change": sd_c}[col]
        return (col, base + f"; {col} is probably an SE (x sqrt(n) = {sd * math.sqrt(n):.4g} fits the other SDs)",
                f"enter the SD ({col} x sqrt(n) if the paper printed an SE), or correct the value")
    if implied > 1:
        return ("sd_change", base + " (the change SD is smaller than the difference of the two SDs)",
                "check sd_change, sd_baseline and sd_followup against the paper")
    if implied > -1:
        return ("sd_change", base, "check sd_change against the paper; give r_prepost if the paper reports it")
    return ("sd_change", base + " (the change SD exceeds the sum of the two SDs)",
            "check sd_change, sd_baseline and sd_followup against the paper")


def _probable_se(sb: float, sf: float, sd_c: float, n: int) -> str | None:
    """The column whose value, read as an SE and multiplied by sqrt(n), makes the three SDs coherent
    and is implausibly small beside the spread the other two imply; None when no column fits."""
    root = math.sqrt(n)
    trials = (("sd_change", (sb, sf, sd_c * root), change_sd(sb, sf, 0.5), sd_c),
              ("sd_baseline", (sb * root, sf, sd_c), sf, sb),
              ("sd_followup", (sb, sf * root, sd_c), sb, sf))
    for col, sds, expected, value in trials:
        r = implied_correlation(*sds)
        if -1 <= r <= PLAUSIBLE_MAX_R and looks_like_se(value, n, expected):
            return col
    return None


def _check_across_arms(name: str, out: dict[str, dict[str, ArmSummary]], log: ProblemLog) -> None:
    """An SD implausibly small against the same outcome's SD in the other arm or at the other visit,
    with SD x sqrt(n) consistent: probably an SE (see :func:`looks_like_se`)."""
    for by_arm in out.values():
        arms = list(by_arm.values())
        for s in arms:
            for visit in VISITS:
                if not s.sources.get(visit, "").startswith("reported"):
                    continue
                others = [o.sd[visit] for o in arms if o is not s] + [s.sd[v] for v in VISITS if v != visit]
                ref = max(others) if others else None
                sd = s.sd[visit]
                if ref is not None and looks_like_se(sd, s.n, ref):
                    log.add(name, f"row {s.row}", f"sd_{visit}",
                            f"SD {sd:g} is implausibly small beside the other SDs of this outcome (up to {ref:g}), "
                            f"while SD x sqrt(n) = {sd * math.sqrt(s.n):.4g} fits them: probably an SE",
                            f"enter the SD ({sd:g} x sqrt({s.n}) if the paper printed an SE), or correct the value")
