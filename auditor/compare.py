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


def load_findings(path: Path, log: ProblemLog) -> dict | None:
    label = str(path)
    try:
        d = json.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        log.add(label, "-", "-", "does not exist", "give the path of a findings.json")
        return None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        log.add(label, "-", "-", f"is not readable JSON ({exc})", "give a findings.json written by auditor")
        return None
    if not isinstance(d, dict) or "schema_version" not in d or "results" not in d:
        log.add(label, "-", "-", "is not an auditor findings file", "give a findings.json written by auditor")
        return None
    return d


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
