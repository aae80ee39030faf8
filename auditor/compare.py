"""What changed between two audits of the same study (a re-audit after a data cut, say).

Reads two findings.json files and lists: outcomes and checks added or removed, verdicts that moved,
and estimates (value or interval ends) that moved by more than a relative tolerance.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

from .errors import ProblemLog


@dataclass(frozen=True)
class NumberMove:
    outcome: str
    check_id: str
    name: str
    field: str
    old: float | None
    new: float | None


@dataclass
class Comparison:
    old_study: str
    new_study: str
    outcomes_added: list[str] = field(default_factory=list)
    outcomes_removed: list[str] = field(default_factory=list)
    checks_added: list[tuple[str, str]] = field(default_factory=list)
    checks_removed: list[tuple[str, str]] = field(default_factory=list)
    verdicts_moved: list[tuple[str, str, str, str]] = field(default_factory=list)
    numbers_moved: list[NumberMove] = field(default_factory=list)
    tolerance: float = 1e-6

    @property
    def unchanged(self) -> bool:
        return not (self.outcomes_added or self.outcomes_removed or self.checks_added or self.checks_removed
                    or self.verdicts_moved or self.numbers_moved)


MAX_SHAPE_PROBLEMS = 20
"""Shape problems reported one by one per file; beyond this they are counted (a file of another
kind could otherwise give one line per element)."""

FINDING_KEYS = ("outcome", "check_id", "verdict")
ESTIMATE_NUMBERS = ("value", "lower", "upper")


def load_findings(path: Path, log: ProblemLog) -> dict | None:
    """A findings.json as a dict, or None with every problem in ``log``: a file that cannot be read,
    is not JSON, or does not have the shape :func:`compare_findings` relies on."""
    label = str(path)
    d = _read_json(Path(path), label, log)
    if d is None:
        return None
    problems = shape_problems(d)
    for where, problem in problems[:MAX_SHAPE_PROBLEMS]:
        log.add(label, where, "-", problem, "give a findings.json written by auditor")
    if len(problems) > MAX_SHAPE_PROBLEMS:
        log.add(label, "-", "-", f"{len(problems) - MAX_SHAPE_PROBLEMS} more shape problems "
                f"({len(problems)} in all)", "give a findings.json written by auditor")
    return None if problems else d


def _read_json(path: Path, label: str, log: ProblemLog):
    """The parsed JSON of ``path``, or None with the reason (missing, a folder, refused, not UTF-8,
    not JSON, nested too deeply) in ``log``."""
    fix = "give the path of a findings.json written by auditor"
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        log.add(label, "-", "-", "does not exist", fix)
    except IsADirectoryError:
        log.add(label, "-", "-", "is a folder, not a file", fix)
    except PermissionError:
        log.add(label, "-", "-", "cannot be read (permission denied)", "check the file permissions")
    except UnicodeDecodeError:
        log.add(label, "-", "-", "is not UTF-8 text", fix)
    except json.JSONDecodeError as exc:
        log.add(label, f"line {exc.lineno}", "-", f"is not JSON ({exc.msg}, column {exc.colno})", fix)
    except RecursionError:
        log.add(label, "-", "-", "nests arrays or objects too deeply to be read", fix)
    except OSError as exc:
        log.add(label, "-", "-", f"cannot be read ({exc.strerror or type(exc).__name__})", fix)
    return None


def _is_number(v) -> bool:
    """A JSON number (booleans are not numbers here, though Python counts them as integers)."""
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def shape_problems(d) -> list[tuple[str, str]]:
    """(where, problem) for every departure from the findings shape that the comparison reads:
    an object with schema_version, a text study_id, a list of outcomes each with a text param, and a
    list of results each with text outcome, check_id and verdict and a list of estimates, each with
    a text name and value, lower and upper that are numbers or null."""
    if not isinstance(d, dict):
        return [("-", f"holds a JSON {_json_kind(d)}, not an object (not an auditor findings file)")]
    out = []
    if "schema_version" not in d:
        out.append(("schema_version", "is missing (not an auditor findings file)"))
    if "study_id" in d and not isinstance(d["study_id"], str):
        out.append(("study_id", f"is a {_json_kind(d['study_id'])}, not text"))
    out += _list_of_objects(d.get("outcomes", []), "outcomes", ("param",))
    if "results" not in d:
        out.append(("results", "is missing (not an auditor findings file)"))
    else:
        out += _list_of_objects(d["results"], "results", FINDING_KEYS)
        for i, r in enumerate(d["results"] if isinstance(d["results"], list) else []):
            if isinstance(r, dict):
                out += _estimate_problems(r.get("estimates", []), f"results[{i}].estimates")
    return out


def _list_of_objects(items, where: str, text_keys) -> list[tuple[str, str]]:
    """A list whose elements are objects each holding ``text_keys`` as text."""
    if not isinstance(items, list):
        return [(where, f"is a {_json_kind(items)}, not a list")]
    out = []
    for i, item in enumerate(items):
        if not isinstance(item, dict):
            out.append((f"{where}[{i}]", f"is a {_json_kind(item)}, not an object"))
            continue
        for key in text_keys:
            if key not in item:
                out.append((f"{where}[{i}].{key}", "is missing"))
            elif not isinstance(item[key], str):
                out.append((f"{where}[{i}].{key}", f"is a {_json_kind(item[key])}, not text"))
    return out


def _estimate_problems(estimates, where: str) -> list[tuple[str, str]]:
    """A result's estimates: objects with a text name and numbers (or null) as value, lower, upper."""
    out = _list_of_objects(estimates, where, ("name",))
    for j, e in enumerate(estimates if isinstance(estimates, list) else []):
        if not isinstance(e, dict):
            continue
        for fld in ESTIMATE_NUMBERS:
            v = e.get(fld)
            if v is not None and not _is_number(v):
                out.append((f"{where}[{j}].{fld}", f"is a {_json_kind(v)}, not a number or null"))
    return out


def _json_kind(v) -> str:
    """What a parsed JSON value is, in JSON's own words (for messages)."""
    if v is None:
        return "null"
    if isinstance(v, bool):
        return "boolean"
    if _is_number(v):
        return "number"
    if isinstance(v, str):
        return "text"
    return "list" if isinstance(v, list) else "object"


def _moved(old, new, tol: float) -> bool:
    if old is None or new is None:
        return old is not new
    if not (math.isfinite(old) and math.isfinite(new)):
        return old != new
    return abs(new - old) > tol * max(1.0, abs(old))


def compare_findings(old: dict, new: dict, tolerance: float = 1e-6) -> Comparison:
    """Differences between two findings dicts; numbers compared with a relative tolerance."""
    cmp = Comparison(old.get("study_id", ""), new.get("study_id", ""), tolerance=tolerance)
    o_out = [o["param"] for o in old.get("outcomes", [])]
    n_out = [o["param"] for o in new.get("outcomes", [])]
    cmp.outcomes_added = [p for p in n_out if p not in o_out]
    cmp.outcomes_removed = [p for p in o_out if p not in n_out]
    o_res = {(r["outcome"], r["check_id"]): r for r in old["results"]}
    n_res = {(r["outcome"], r["check_id"]): r for r in new["results"]}
    cmp.checks_added = sorted(k for k in n_res if k not in o_res and k[0] not in cmp.outcomes_added)
    cmp.checks_removed = sorted(k for k in o_res if k not in n_res and k[0] not in cmp.outcomes_removed)
    for key in sorted(set(o_res) & set(n_res)):
        a, b = o_res[key], n_res[key]
        if a["verdict"] != b["verdict"]:
            cmp.verdicts_moved.append((key[0], key[1], a["verdict"], b["verdict"]))
        a_est = {e["name"]: e for e in a.get("estimates", [])}
        for e in b.get("estimates", []):
            prev = a_est.get(e["name"])
            if prev is None:
                continue
            for fld in ("value", "lower", "upper"):
                if _moved(prev.get(fld), e.get(fld), tolerance):
                    cmp.numbers_moved.append(NumberMove(key[0], key[1], e["name"], fld, prev.get(fld), e.get(fld)))
    return cmp


def comparison_view(cmp: Comparison) -> dict:
    from .render.view import number

    return {
        "old_study": cmp.old_study, "new_study": cmp.new_study, "tolerance": f"{cmp.tolerance:g}",
        "unchanged": cmp.unchanged,
        "outcomes_added": cmp.outcomes_added, "outcomes_removed": cmp.outcomes_removed,
        "checks_added": [f"{o} / {c}" for o, c in cmp.checks_added],
        "checks_removed": [f"{o} / {c}" for o, c in cmp.checks_removed],
        "verdicts": [list(v) for v in cmp.verdicts_moved],
        "numbers": [[m.outcome, m.check_id, m.name, m.field, number(m.old), number(m.new)] for m in cmp.numbers_moved],
    }
