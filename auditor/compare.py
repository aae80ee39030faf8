"""What changed between two audits of the same study (a re-audit after a data cut, say).

Reads two findings.json files and lists: outcomes and checks added or removed, estimates added or
removed, verdicts that moved (with the sub-findings whose verdicts moved with them), and estimates
(value or interval ends) that moved by more than a relative tolerance. Estimates are matched on their
stable ``key`` (schema 1.2 on); a findings.json of an earlier schema, which has no keys, is matched on
the estimates' display names instead. Two audits of different studies, or a blinded with an unblinded
audit, are not comparable: :func:`comparability_problems` names why, and the command refuses them
unless forced.
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
    key: str = ""
    """The estimate's stable key (empty when matched on names, for an earlier schema)."""


@dataclass(frozen=True)
class EstimateChange:
    """An estimate present in one audit of a finding and not in the other."""

    outcome: str
    check_id: str
    key: str
    name: str


@dataclass(frozen=True)
class SubfindingMove:
    """A sub-finding whose verdict differs between the audits (``absent`` where it is missing)."""

    outcome: str
    check_id: str
    id: str
    old: str
    new: str


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
    estimates_added: list[EstimateChange] = field(default_factory=list)
    estimates_removed: list[EstimateChange] = field(default_factory=list)
    subfindings_moved: list[SubfindingMove] = field(default_factory=list)
    matched_on: str = "key"
    """``key`` (both files carry estimate keys) or ``name`` (either is of an earlier schema)."""

    @property
    def unchanged(self) -> bool:
        return not (self.outcomes_added or self.outcomes_removed or self.checks_added or self.checks_removed
                    or self.verdicts_moved or self.numbers_moved or self.estimates_added
                    or self.estimates_removed or self.subfindings_moved)

    def subfindings_of(self, outcome: str, check_id: str) -> list[SubfindingMove]:
        """The sub-findings that moved inside one finding (those behind a verdict that moved)."""
        return [m for m in self.subfindings_moved if (m.outcome, m.check_id) == (outcome, check_id)]


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
    """A result's estimates: objects with a text name (and text key, when present) and numbers (or
    null) as value, lower, upper."""
    out = _list_of_objects(estimates, where, ("name",))
    for j, e in enumerate(estimates if isinstance(estimates, list) else []):
        if not isinstance(e, dict):
            continue
        if "key" in e and not isinstance(e["key"], str):
            out.append((f"{where}[{j}].key", f"is a {_json_kind(e['key'])}, not text"))
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


def comparability_problems(old: dict, new: dict) -> list[tuple[str, str]]:
    """(what, why) for each reason the two audits should not be compared: different study ids, one
    blinded and the other not (a difference would then reveal by-arm results, or be meaningless), or
    intervals at different confidence levels."""
    out = []
    a, b = old.get("study_id", ""), new.get("study_id", "")
    if a != b:
        out.append(("study_id", f"the audits are of different studies ('{a}' and '{b}')"))
    ba, bb = old.get("blinded"), new.get("blinded")
    if isinstance(ba, bool) and isinstance(bb, bool) and ba != bb:
        which = "the first" if ba else "the second"
        out.append(("blinded", f"{which} audit is blinded and the other is not"))
    la, lb = _level(old), _level(new)
    if la != lb:
        out.append(("confidence_level", f"the audits' intervals are at different confidence levels "
                                        f"({la:g} and {lb:g}), so every interval would move for that alone"))
    return out


def _level(d: dict) -> float:
    """The audit's confidence level (findings written before it was recorded used 0.95)."""
    prov = d.get("provenance") if isinstance(d.get("provenance"), dict) else {}
    level = prov.get("confidence_level", 0.95)
    return float(level) if isinstance(level, (int, float)) and not isinstance(level, bool) else 0.95


def _has_keys(d: dict) -> bool:
    """True when every estimate of the findings carries a non-empty key (schema 1.2 on)."""
    return all(isinstance(e.get("key"), str) and e["key"] for r in d["results"] for e in r.get("estimates", []))


def _by_id(estimates: list[dict], on: str) -> dict[str, dict]:
    """A finding's estimates by key (or by name, for findings of an earlier schema)."""
    return {e[on]: e for e in estimates}


def compare_findings(old: dict, new: dict, tolerance: float = 1e-6) -> Comparison:
    """Differences between two findings dicts; estimates matched on keys (names for an earlier
    schema), numbers compared with a relative tolerance."""
    on = "key" if _has_keys(old) and _has_keys(new) else "name"
    cmp = Comparison(old.get("study_id", ""), new.get("study_id", ""), tolerance=tolerance, matched_on=on)
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
        cmp.subfindings_moved += _subfinding_moves(key, a, b)
        a_est, b_est = _by_id(a.get("estimates", []), on), _by_id(b.get("estimates", []), on)
        cmp.estimates_added += [EstimateChange(*key, e.get("key", ""), e["name"]) for i, e in b_est.items()
                                if i not in a_est]
        cmp.estimates_removed += [EstimateChange(*key, e.get("key", ""), e["name"]) for i, e in a_est.items()
                                  if i not in b_est]
        for i, e in b_est.items():
            prev = a_est.get(i)
            if prev is None:
                continue
            for fld in ESTIMATE_NUMBERS:
                if _moved(prev.get(fld), e.get(fld), tolerance):
                    cmp.numbers_moved.append(NumberMove(key[0], key[1], e["name"], fld, prev.get(fld), e.get(fld),
                                                        e.get("key", "")))
    return cmp


def _subfinding_moves(key: tuple[str, str], a: dict, b: dict) -> list[SubfindingMove]:
    """The sub-findings of one finding whose verdicts differ, in the later audit's order then the
    earlier's (``absent`` for a sub-finding in one audit only)."""
    def verdicts(r):
        return {s["id"]: s.get("verdict", "") for s in r.get("subfindings", [])
                if isinstance(s, dict) and isinstance(s.get("id"), str)}

    va, vb = verdicts(a), verdicts(b)
    ids = list(vb) + [i for i in va if i not in vb]
    return [SubfindingMove(key[0], key[1], i, va.get(i, "absent"), vb.get(i, "absent")) for i in ids
            if va.get(i, "absent") != vb.get(i, "absent")]


COMPARISON_SCHEMA = "1.0"
"""Version of the comparison JSON written by ``auditor compare --json``."""


def _side(d: dict) -> dict:
    """What identifies one of the two audits in the comparison JSON."""
    prov = d.get("provenance") if isinstance(d.get("provenance"), dict) else {}
    return {"study_id": d.get("study_id", ""), "schema_version": d.get("schema_version", ""),
            "blinded": d.get("blinded"), "analysis_date": prov.get("analysis_date", ""),
            "tool_version": prov.get("tool_version", "")}


def comparison_dict(cmp: Comparison, old: dict, new: dict, forced: list[str] = ()) -> dict:
    """The comparison as plain data (``auditor compare --json``): every change keyed by outcome, check id
    and estimate key, so a pipeline can act on it without reading display names."""
    def move(m: NumberMove) -> dict:
        return {"outcome": m.outcome, "check_id": m.check_id, "key": m.key, "name": m.name, "field": m.field,
                "before": m.old, "after": m.new}

    def change(c: EstimateChange) -> dict:
        return {"outcome": c.outcome, "check_id": c.check_id, "key": c.key, "name": c.name}

    return {
        "comparison_schema": COMPARISON_SCHEMA, "old": _side(old), "new": _side(new),
        "tolerance": cmp.tolerance, "matched_on": cmp.matched_on, "unchanged": cmp.unchanged,
        "compared_despite": list(forced),
        "outcomes_added": cmp.outcomes_added, "outcomes_removed": cmp.outcomes_removed,
        "checks_added": [{"outcome": o, "check_id": c} for o, c in cmp.checks_added],
        "checks_removed": [{"outcome": o, "check_id": c} for o, c in cmp.checks_removed],
        "estimates_added": [change(c) for c in cmp.estimates_added],
        "estimates_removed": [change(c) for c in cmp.estimates_removed],
        "verdicts_moved": [{"outcome": o, "check_id": c, "before": a, "after": b,
                            "subfindings_moved": [{"id": m.id, "before": m.old, "after": m.new}
                                                  for m in cmp.subfindings_of(o, c)]}
                           for o, c, a, b in cmp.verdicts_moved],
        "subfindings_moved": [{"outcome": m.outcome, "check_id": m.check_id, "id": m.id, "before": m.old,
                               "after": m.new} for m in cmp.subfindings_moved],
        "numbers_moved": [move(m) for m in cmp.numbers_moved],
    }


def comparison_json(cmp: Comparison, old: dict, new: dict, forced: list[str] = ()) -> str:
    """Stable JSON of :func:`comparison_dict` (sorted keys, fixed indentation)."""
    return json.dumps(_clean(comparison_dict(cmp, old, new, forced)), indent=2, sort_keys=True,
                      ensure_ascii=False) + "\n"


def _clean(v):
    from .results import _clean as clean

    return clean(v)


def unchanged_sentence(cmp: Comparison) -> str:
    """The plain statement that nothing changed (terminal and HTML say the same)."""
    return (f"Nothing changed: the same outcomes, checks, estimates, verdicts and sub-finding verdicts, and no "
            f"number moved by more than a relative tolerance of {cmp.tolerance:g}.")


def subfinding_text(moves: list[SubfindingMove]) -> str:
    """The sub-findings behind a verdict's move, as one line: ``slope: sound -> caution; ...``."""
    return "; ".join(f"{m.id}: {m.old} -> {m.new}" for m in moves) or "no sub-finding verdict moved"


def _titles(d: dict | None) -> tuple[dict[str, str], dict[str, str]]:
    """Outcome labels by parameter code and check titles by check id, from a findings dict (empty for
    what it does not carry)."""
    d = d if isinstance(d, dict) else {}
    labels = {o["param"]: o.get("label") for o in d.get("outcomes", []) if isinstance(o.get("label"), str)}
    titles = {c.get("id"): c.get("title") for c in d.get("checks", []) if isinstance(c, dict)
              and isinstance(c.get("id"), str) and isinstance(c.get("title"), str)}
    return {k: v for k, v in labels.items() if v}, {k: v for k, v in titles.items() if v}


def _estimates_by_id(d: dict | None, on: str) -> dict[tuple[str, str, str], dict]:
    """Every estimate of a findings dict by (outcome, check id, key or name)."""
    if not isinstance(d, dict):
        return {}
    return {(r["outcome"], r["check_id"], e.get(on, "")): e for r in d.get("results", []) for e in r.get("estimates", [])}


def estimate_text(values: dict, number) -> str:
    """One side of an estimate for display: ``value (lower to upper)``, the interval only when known."""
    v, lo, hi = (values.get(f) for f in ESTIMATE_NUMBERS)
    interval = f" ({number(lo)} to {number(hi)})" if lo is not None or hi is not None else ""
    return number(v) + interval


def estimate_rows(cmp: Comparison, old: dict | None = None, new: dict | None = None) -> list[dict]:
    """The numbers that moved, one row per estimate rather than per number: its value and interval
    before and after (ends that did not move are filled in from the findings when given), and which
    of value, lower and upper moved. In the comparison's order (outcome, check, the later audit's
    estimate order)."""
    from .render.view import number

    on = cmp.matched_on
    before_all, after_all = _estimates_by_id(old, on), _estimates_by_id(new, on)
    rows: dict[tuple[str, str, str], dict] = {}
    for m in cmp.numbers_moved:
        ident = (m.outcome, m.check_id, m.key if on == "key" else m.name)
        row = rows.setdefault(ident, {"outcome": m.outcome, "check_id": m.check_id, "name": m.name, "key": m.key,
                                      "before": dict(before_all.get(ident, {})), "after": dict(after_all.get(ident, {})),
                                      "moved": []})
        row["before"][m.field], row["after"][m.field] = m.old, m.new
        row["moved"].append(m.field)
    return [{**r, "before": estimate_text(r["before"], number), "after": estimate_text(r["after"], number),
             "change": value_change(r["before"].get("value"), r["after"].get("value"), number),
             "moved": moved_text(r["moved"])} for r in rows.values()]


def moved_number_lines(rows: list[dict], width: int = 80) -> list[str]:
    """The numbers that moved as terminal lines no wider than ``width`` where the text allows, every
    key whole (a key is what a pipeline matches on, so it is never cut short).

    ``rows`` are :func:`estimate_rows`. Under a heading line per outcome and check, each estimate
    takes one line, ``key: before -> after (what moved)``, when that fits in ``width``; otherwise
    its key has a line of its own and the numbers follow on the next, indented. A key longer than
    the width is still printed whole, on its own line. Without keys (an earlier schema) the display
    name stands in for the key."""
    from .errors import one_line_text

    lines, heading = [], None
    for r in rows:
        if (r["outcome"], r["check_id"]) != heading:
            heading = (r["outcome"], r["check_id"])
            lines.append(one_line_text(f"{r['outcome']} / {r['check_id']}", 10_000))
        label = one_line_text(r["key"] or r["name"], 10_000)
        numbers = f"{r['before']} -> {r['after']} ({r['moved']} moved)"
        one = f"  {label}: {numbers}"
        lines += [one] if len(one) <= width else [f"  {label}", f"      {numbers}"]
    return lines


def value_change(old, new, number) -> str:
    """The value's change (later minus earlier) with its sign; a dash when either side has none."""
    if not (_is_number(old) and _is_number(new)) or not (math.isfinite(old) and math.isfinite(new)):
        return "–"
    d = new - old
    return "0" if d == 0 else ("+" if d > 0 else "-") + number(abs(d))


def moved_text(fields: list[str]) -> str:
    """Which parts of an estimate moved, in words: ``value``, ``interval`` (both ends), ``lower end``..."""
    parts = ["value"] if "value" in fields else []
    ends = [f for f in ("lower", "upper") if f in fields]
    parts += ["interval"] if len(ends) == 2 else [f"{e} end" for e in ends]
    return " and ".join(parts)


def report_order(old: dict | None, new: dict | None):
    """A sort key putting findings in the order the reports show them: outcomes as the later audit
    (then the earlier) declares them, checks in report order; what neither file orders goes last,
    in the comparison's own (alphabetical) order, since sorting is stable."""
    outcomes: list[str] = []
    checks: dict[str, float] = {}
    for d in (new, old):
        d = d if isinstance(d, dict) else {}
        outcomes += [o["param"] for o in d.get("outcomes", []) if o["param"] not in outcomes]
        for c in d.get("checks", []):
            if isinstance(c, dict) and isinstance(c.get("id"), str) and _is_number(c.get("order")):
                checks.setdefault(c["id"], c["order"])
    at = {o: i for i, o in enumerate(outcomes)}
    return lambda outcome, check_id: (at.get(outcome, len(at)), checks.get(check_id, math.inf))


def tolerance_text(tol: float) -> str:
    """What the relative tolerance means, as :func:`_moved` applies it."""
    return (f"a number counts as moved when it changed by more than {tol:g} of its earlier size "
            f"(or by more than {tol:g} when that size is below 1)")


def _side_text(d: dict | None) -> dict:
    side = _side(d) if isinstance(d, dict) else {}
    blinded = side.get("blinded")
    return {"analysis_date": side.get("analysis_date") or "not stated",
            "blinded": {True: "blinded (pooled)", False: "unblinded (by arm)"}.get(blinded, "not stated"),
            "tool_version": side.get("tool_version") or "not stated",
            "schema_version": side.get("schema_version") or "not stated"}


def comparison_marking(old: dict | None, new: dict | None) -> tuple[str, str]:
    """The page's marking and its class: open only when both audits are blinded, since a comparison
    of unblinded audits shows their by-arm numbers; closed otherwise (also when not known)."""
    from .render.view import marking

    blinded = all(isinstance(d, dict) and d.get("blinded") is True for d in (old, new))
    return marking(blinded), "open" if blinded else "closed"


def comparison_view(cmp: Comparison, old: dict | None = None, new: dict | None = None,
                    forced: list[str] = ()) -> dict:
    """Display strings for the comparison page: the two audits side by side, a count of what moved,
    then each kind of change, with outcome labels and check titles from the findings when given."""
    from .pipeline import CAUTIONS

    labels, titles = _titles(new)
    old_labels, old_titles = _titles(old)
    labels, titles = {**old_labels, **labels}, {**old_titles, **titles}

    def outcome(o: str) -> str:
        from .render.view import outcome_heading

        return outcome_heading(labels.get(o, o), o)

    def check(c: str) -> str:
        return titles.get(c, c)

    place = report_order(old, new)
    numbers = sorted(estimate_rows(cmp, old, new), key=lambda r: place(r["outcome"], r["check_id"]))
    verdicts = [[outcome(o), check(c), a, b, subfinding_text(cmp.subfindings_of(o, c))]
                for o, c, a, b in sorted(cmp.verdicts_moved, key=lambda v: place(v[0], v[1]))]
    with_verdict = {(o, c) for o, c, _, _ in cmp.verdicts_moved}
    quiet = [[outcome(m.outcome), check(m.check_id), m.id, m.old, m.new]
             for m in sorted(cmp.subfindings_moved, key=lambda m: place(m.outcome, m.check_id))
             if (m.outcome, m.check_id) not in with_verdict]
    counts = [(len(cmp.verdicts_moved), "verdict moved", "verdicts moved"),
              (len(quiet), "sub-finding moved under an unchanged verdict", "sub-findings moved under an unchanged verdict"),
              (len(numbers), "estimate moved", "estimates moved"),
              (len(cmp.estimates_added) + len(cmp.estimates_removed), "estimate added or removed",
               "estimates added or removed"),
              (len(cmp.outcomes_added) + len(cmp.outcomes_removed), "outcome added or removed",
               "outcomes added or removed"),
              (len(cmp.checks_added) + len(cmp.checks_removed), "finding added or removed",
               "findings added or removed")]
    mark, mark_class = comparison_marking(old, new)
    groups: list[dict] = []
    for r in numbers:
        if not groups or groups[-1]["ident"] != (r["outcome"], r["check_id"]):
            groups.append({"ident": (r["outcome"], r["check_id"]), "outcome": outcome(r["outcome"]),
                           "check": check(r["check_id"]), "rows": []})
        groups[-1]["rows"].append([r["name"], r["before"], r["after"], r["change"], r["moved"]])
    return {
        "old_study": cmp.old_study, "new_study": cmp.new_study, "tolerance": f"{cmp.tolerance:g}",
        "tolerance_text": tolerance_text(cmp.tolerance),
        "unchanged": cmp.unchanged, "unchanged_sentence": unchanged_sentence(cmp),
        "matched_on": "stable estimate keys" if cmp.matched_on == "key" else
                      "estimate names (a findings file of an earlier schema has no keys)",
        "sides": [("Earlier", _side_text(old)), ("Later", _side_text(new))],
        "summary": "; ".join(f"{n} {one if n == 1 else many}" for n, one, many in counts if n),
        "forced": list(forced), "marking": mark, "marking_class": mark_class, "cautions": list(CAUTIONS),
        "outcomes_added": [outcome(o) for o in cmp.outcomes_added],
        "outcomes_removed": [outcome(o) for o in cmp.outcomes_removed],
        "checks_added": [f"{outcome(o)}: {check(c)}" for o, c in cmp.checks_added],
        "checks_removed": [f"{outcome(o)}: {check(c)}" for o, c in cmp.checks_removed],
        "estimates_added": [(f"{outcome(c.outcome)}: {check(c.check_id)}: {c.name}", c.key) for c in cmp.estimates_added],
        "estimates_removed": [(f"{outcome(c.outcome)}: {check(c.check_id)}: {c.name}", c.key)
                              for c in cmp.estimates_removed],
        "verdicts": verdicts, "subfindings": quiet, "number_groups": groups,
        "n_numbers": len(cmp.numbers_moved),
    }
