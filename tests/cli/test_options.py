"""Command-line options checked before any work, input problems that are exit 2 (never 1), the batch
manifest's comment rule, warnings in blinded runs, library warnings kept off the terminal, and
``init`` never drafting a study.toml that ``validate`` refuses.
"""

from __future__ import annotations

import dataclasses
import json
import re
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import auditor.checks.registry as registry
from auditor.batch import expand_inputs, read_manifest
from auditor.cli import app
from auditor.metadata import MAX_SEED
from auditor.options import registered_check_ids
from auditor.pipeline import AuditOptions, audit_study
from auditor.render.jsonout import findings_json
from auditor.study import load_study
from tests.cli.test_hostile_inputs import FAST, Synthetic, assert_nothing_written
from tests.cli.test_validate_broken import _stderr, runner

LINE = re.compile(r"^\S.*?: .*\. Fix: .+\.$")


def problem_lines(res) -> list[str]:
    """The problem lines under the ``N problem(s) ...:`` heading, checked to number N, one line each."""
    lines = _stderr(res).splitlines()
    head = next(i for i, ln in enumerate(lines) if re.match(r"^\d+ problem\(s\) .*:$", ln))
    count = int(lines[head].split()[0])
    problems = [ln for ln in lines[head + 1:] if ln.strip() and not ln.startswith("warning:")]
    assert len(problems) == count, _stderr(res)
    for ln in problems:
        assert LINE.match(ln), ln
    return problems


def assert_refused(res, patterns, heading: str | None = None) -> str:
    """Exit 2, no traceback and no internal error, every pattern among the one-line problems."""
    text = _stderr(res)
    assert res.exit_code == 2, (res.exit_code, text, res.exception)
    assert "Traceback" not in text and "internal error" not in text, text
    joined = "\n".join(problem_lines(res))
    for pat in patterns:
        assert re.search(pat, joined, re.MULTILINE), f"{pat!r} not in:\n{joined}"
    if heading is not None:
        assert heading in text, text
    return joined


# --------------------------------------------------------------------------- 1. options up front


def test_run_reports_every_bad_option_together_and_writes_nothing(tmp_path):
    folder = Synthetic().write(tmp_path / "study")
    out = tmp_path / "audit"
    res = runner.invoke(app, ["run", str(folder), "-o", str(out), "--seed", "-1", "--check", "pre-pst",
                              "--check", "nonsense", "--analysis-date", "2026-13-45", "--paper", "A5"])
    joined = assert_refused(res, [
        r"^--seed: -1 is not a seed\. Fix: give a whole number from 0 to 4294967295\.$",
        r"--check: 'pre-pst' is not a check id\. Fix: use one of .*pre-post.* \(did you mean 'pre-post'\?\)",
        r"--check: 'nonsense' is not a check id\. Fix: use one of change-score, ",
        r"--analysis-date: '2026-13-45' is not a calendar date written YYYY-MM-DD",
        r"--paper: 'A5' is not a page size",
    ], heading="5 problem(s) on the command line:")
    for cid in registered_check_ids():
        assert cid in joined
    assert_nothing_written(tmp_path, out)


@pytest.mark.parametrize("args,pattern", [
    (["--seed", str(MAX_SEED + 1)], r"--seed: 4294967296 is not a seed"),
    (["--analysis-date", "20260102"], r"--analysis-date: '20260102' is not a calendar date"),
    (["--analysis-date", "2026-02-29"], r"--analysis-date: '2026-02-29'"),  # 2026 is not a leap year
    (["--check", "prepost"], r"did you mean 'pre-post'"),
], ids=["seed-too-large", "date-without-dashes", "date-feb-29-2026", "check-typo"])
def test_run_refuses_one_bad_option(tmp_path, args, pattern):
    folder = Synthetic().write(tmp_path / "study")
    out = tmp_path / "audit"
    assert_refused(runner.invoke(app, ["run", str(folder), "-o", str(out), *args]), [pattern])
    assert_nothing_written(tmp_path, out)


def test_good_options_still_run_and_reach_the_report(tmp_path):
    folder = Synthetic(params=("SBP",)).write(tmp_path / "study")
    out = tmp_path / "audit"
    res = runner.invoke(app, ["run", str(folder), "-o", str(out), "--check", "pre-post", "--seed", str(MAX_SEED),
                              "--analysis-date", "2028-02-29", "--paper", "letter", "--quiet"])
    assert res.exit_code == 0, _stderr(res)
    findings = json.loads((out / "findings.json").read_text())
    assert findings["provenance"]["analysis_date"] == "2028-02-29"
    assert findings["provenance"]["seed"] == MAX_SEED
    assert {r["check_id"] for r in findings["results"]} == {"pre-post"}


def test_seed_rule_matches_numpy_at_both_ends():
    """Refused below 0 because numpy's SeedSequence refuses negative seeds (ValueError "expected
    non-negative integer", numpy.random documentation); the largest seed we accept numpy accepts."""
    with pytest.raises(ValueError):
        np.random.default_rng(-1)
    np.random.default_rng(MAX_SEED).random()
    assert MAX_SEED == 2**32 - 1


def _validate_with_study_key(tmp_path, key, value, ok: bool, refusal: str) -> None:
    """``auditor validate`` on a small study whose ``[study]`` table sets ``key`` to ``value``: valid
    when ``ok``, else refused with a problem matching ``refusal``."""
    s = Synthetic(params=("SBP",))
    s.meta["study"][key] = value
    res = runner.invoke(app, ["validate", str(s.write(tmp_path / "study"))])
    if ok:
        assert res.exit_code == 0, _stderr(res)
    else:
        assert_refused(res, [refusal])


@pytest.mark.parametrize("seed,ok", [(-1, False), (MAX_SEED + 1, False), (0, True), (MAX_SEED, True)])
def test_study_toml_seed_follows_the_same_rule(tmp_path, seed, ok):
    _validate_with_study_key(tmp_path, "seed", seed, ok, r"study\.toml: study\.seed")


@pytest.mark.parametrize("value,ok", [("2026-13-45", False), ("20260102", False), (0, False),
                                      ("2026-01-02", True)])
def test_study_toml_analysis_date_follows_the_date_rule(tmp_path, value, ok):
    _validate_with_study_key(tmp_path, "analysis_date", value, ok,
                             r"study\.toml: study\.analysis_date .*is not a calendar date written YYYY-MM-DD")


def test_study_toml_analysis_date_as_a_toml_date_is_read(tmp_path):
    s = Synthetic(params=("SBP",))
    s.meta["study"]["analysis_date"] = None
    folder = s.write(tmp_path / "study")
    toml = folder / "study.toml"
    toml.write_text(toml.read_text().replace("[study]\n", "[study]\nanalysis_date = 2026-03-04\n", 1))
    assert str(load_study(folder).metadata.study.analysis_date) == "2026-03-04"


def test_batch_reports_every_bad_option_together(tmp_path):
    folder = Synthetic(params=("SBP",)).write(tmp_path / "study")
    out = tmp_path / "batch"
    res = runner.invoke(app, ["batch", str(folder), "-o", str(out), "--jobs", "-2", "--fail-on", "cautoin",
                              "--seed", "-5", "--analysis-date", "2026-00-10", "--paper", "legal"])
    assert_refused(res, [r"--jobs: -2 is not a number of processes", r"--fail-on: 'cautoin' is not a level\. "
                         r"Fix: use one of failed, not assessable, caution, unsupported \(did you mean 'caution'\?\)",
                         r"--seed: -5", r"--analysis-date: '2026-00-10'", r"--paper: 'legal'"],
                   heading="5 problem(s) on the command line:")
    assert not out.exists()


@pytest.mark.parametrize("tolerance", ["-0.1", "nan", "inf"])
def test_compare_refuses_a_bad_tolerance(tmp_path, tolerance):
    res = runner.invoke(app, ["compare", str(tmp_path / "a.json"), str(tmp_path / "b.json"),
                              "--tolerance", tolerance, "--html", str(tmp_path / "no" / "c.html")])
    assert_refused(res, [r"^--tolerance: .* is not a relative tolerance", r"--html: folder .* does not exist"])
    assert not (tmp_path / "no").exists()


def test_selfcheck_reports_every_bad_option_together(tmp_path):
    out = tmp_path / "validation"
    res = runner.invoke(app, ["selfcheck", "-o", str(out), "--seed", "-3", "--date", "2026-02-30",
                              "--only", "no-such-case"])
    assert_refused(res, [r"--seed: -3", r"--date: '2026-02-30' is not a calendar date",
                         r"--only: no validation case id starts with 'no-such-case'"],
                   heading="3 problem(s) on the command line:")
    assert not out.exists()


def test_init_reports_bad_arguments_together(tmp_path):
    folder = Synthetic(params=("SBP",)).write(tmp_path / "study")
    data = folder / "data"
    res = runner.invoke(app, ["init", str(data / "adeff.csv"), str(data / "adsl.csv"), str(data / "nope.csv"),
                              "-o", str(data)])
    assert_refused(res, [r"DATA_FILES: 3 files given, but init reads two at most", r"nope\.csv: does not exist",
                         r"-o/--output: .*data is a folder"])
    assert not (data / "study.toml").exists()


# --------------------------------------------------------------------------- 2. exit 2, never 1


def _refuse_under(monkeypatch, refused: Path) -> None:
    """Make every look at ``refused`` or anything under it fail with a permission error, as the
    system does for any user but root when the folder lacks read and search permission."""
    refused = refused.resolve()

    def blocked(p) -> bool:
        p = Path(p).absolute()
        return p == refused or refused in p.parents

    real_stat, real_open, real_read = Path.stat, Path.open, Path.read_bytes

    def stat(self, *a, **k):
        if blocked(self) and self.absolute() != refused:
            raise PermissionError(13, "Permission denied", str(self))
        return real_stat(self, *a, **k)

    def open_(self, *a, **k):
        if blocked(self):
            raise PermissionError(13, "Permission denied", str(self))
        return real_open(self, *a, **k)

    def read_bytes(self):
        if blocked(self):
            raise PermissionError(13, "Permission denied", str(self))
        return real_read(self)

    monkeypatch.setattr(Path, "stat", stat)
    monkeypatch.setattr(Path, "open", open_)
    monkeypatch.setattr(Path, "read_bytes", read_bytes)


def test_unreadable_study_folder_is_exit_2(tmp_path, monkeypatch):
    folder = Synthetic(params=("SBP",)).write(tmp_path / "study")
    _refuse_under(monkeypatch, folder)
    assert_refused(runner.invoke(app, ["validate", str(folder)]), [r"^study\.toml: cannot be read \(permission denied\)\. Fix: give read permission"])
    out = tmp_path / "audit"
    assert_refused(runner.invoke(app, ["run", str(folder), "-o", str(out), *FAST]), ["permission denied"])
    assert_nothing_written(tmp_path, out)


def test_unreadable_data_folder_is_exit_2_and_named(tmp_path, monkeypatch):
    folder = Synthetic(params=("SBP",)).write(tmp_path / "study")
    _refuse_under(monkeypatch, folder / "data")
    assert_refused(runner.invoke(app, ["validate", str(folder)]), [r"^data/adeff\.csv: cannot be read \(permission denied\)"])


def test_unreadable_data_folder_for_real(tmp_path):
    """The same with real permissions; root reads anything, so this half runs only for other users."""
    import os

    if os.geteuid() == 0:
        pytest.skip("root ignores file permissions")
    folder = Synthetic(params=("SBP",)).write(tmp_path / "study")
    (folder / "data").chmod(0)
    try:
        res = runner.invoke(app, ["validate", str(folder)])
    finally:
        (folder / "data").chmod(0o755)
    assert_refused(res, ["permission denied"])


@pytest.fixture(scope="module")
def findings_text(tmp_path_factory) -> str:
    """A real findings.json of a small audit (one outcome, one check)."""
    folder = Synthetic(params=("SBP",)).write(tmp_path_factory.mktemp("cmp") / "study")
    return findings_json(audit_study(load_study(folder), AuditOptions(checks=("pre-post",), quick=True)))


def _edited(text: str, fn) -> str:
    d = json.loads(text)
    fn(d)
    return json.dumps(d)


def _first_estimate(d) -> dict:
    return d["results"][0]["estimates"][0]


COMPARE_CASES = [
    ("not-json", lambda t: t[: len(t) // 2], [r"new\.json: line \d+ is not JSON"]),
    ("a-list", lambda t: "[1, 2]", [r"new\.json: holds a JSON list, not an object"]),
    ("a-number", lambda t: "3", [r"new\.json: holds a JSON number"]),
    ("no-results", lambda t: _edited(t, lambda d: d.pop("results")), [r"new\.json: results is missing"]),
    ("no-schema", lambda t: _edited(t, lambda d: d.pop("schema_version")), [r"schema_version is missing"]),
    ("results-object", lambda t: _edited(t, lambda d: d.update(results={})), [r"results is a object, not a list"]),
    ("result-text", lambda t: _edited(t, lambda d: d["results"].append("x")), [r"results\[1\] is a text, not an object"]),
    ("no-check-id", lambda t: _edited(t, lambda d: d["results"][0].pop("check_id")), [r"results\[0\]\.check_id is missing"]),
    ("verdict-number", lambda t: _edited(t, lambda d: d["results"][0].update(verdict=3)),
     [r"results\[0\]\.verdict is a number, not text"]),
    ("estimates-text", lambda t: _edited(t, lambda d: d["results"][0].update(estimates="none")),
     [r"results\[0\]\.estimates is a text, not a list"]),
    ("estimate-no-name", lambda t: _edited(t, lambda d: _first_estimate(d).pop("name")),
     [r"results\[0\]\.estimates\[0\]\.name is missing"]),
    ("value-text", lambda t: _edited(t, lambda d: _first_estimate(d).update(value="0.5")),
     [r"results\[0\]\.estimates\[0\]\.value is a text, not a number or null"]),
    ("upper-boolean", lambda t: _edited(t, lambda d: _first_estimate(d).update(upper=True)),
     [r"estimates\[0\]\.upper is a boolean"]),
    ("outcome-no-param", lambda t: _edited(t, lambda d: d["outcomes"][0].pop("param")), [r"outcomes\[0\]\.param is missing"]),
    ("study-id-list", lambda t: _edited(t, lambda d: d.update(study_id=[1])), [r"study_id is a list, not text"]),
    ("deep-nesting", lambda t: "[" * 100000 + "]" * 100000, [r"new\.json: nests arrays or objects too deeply"]),
]


@pytest.mark.parametrize("name,damage,patterns", COMPARE_CASES, ids=[c[0] for c in COMPARE_CASES])
def test_compare_on_malformed_findings_is_exit_2(tmp_path, findings_text, name, damage, patterns):
    old, new = tmp_path / "old.json", tmp_path / "new.json"
    old.write_text(findings_text)
    new.write_text(damage(findings_text))
    res = runner.invoke(app, ["compare", str(old), str(new), "--html", str(tmp_path / "c.html")])
    assert_refused(res, patterns, heading="in the findings files:")
    assert not (tmp_path / "c.html").exists()


def test_compare_on_a_folder_or_latin1_file_is_exit_2(tmp_path, findings_text):
    old = tmp_path / "old.json"
    old.write_text(findings_text)
    latin = tmp_path / "latin.json"
    latin.write_bytes('{"study_id": "Hämoglobin"}'.encode("latin-1"))
    assert_refused(runner.invoke(app, ["compare", str(old), str(tmp_path)]), [r"is a folder, not a file"])
    assert_refused(runner.invoke(app, ["compare", str(old), str(latin)]), [r"latin\.json: is not UTF-8 text"])


def test_compare_of_well_formed_findings_still_works(tmp_path, findings_text):
    old, new = tmp_path / "old.json", tmp_path / "new.json"
    old.write_text(findings_text)
    new.write_text(_edited(findings_text, lambda d: _first_estimate(d).update(value=_first_estimate(d)["value"] + 1)))
    res = runner.invoke(app, ["compare", str(old), str(new)])
    assert res.exit_code == 0, _stderr(res)
    assert "numbers that moved" in res.stdout


# --------------------------------------------------------------------------- 3. batch manifest


def test_manifest_hash_inside_a_path_is_part_of_the_path(tmp_path):
    (tmp_path / "trial#2").mkdir()
    (tmp_path / "trial").mkdir()
    manifest = tmp_path / "studies.txt"
    manifest.write_text("# studies of the spring cut\n   # an indented comment\n\ntrial#2\n  trial  \n")
    assert read_manifest(manifest) == [tmp_path / "trial#2", tmp_path / "trial"]
    assert expand_inputs([manifest]) == [tmp_path / "trial#2", tmp_path / "trial"]


def test_batch_audits_the_folder_with_a_hash_in_its_name(tmp_path, monkeypatch):
    """End to end: the study in 'trial#2' is audited, not the one in 'trial' (which the old rule
    read the line as). One cheap check keeps the batch fast."""
    import auditor.pipeline as pipeline

    only = [registry.get_check("pre-post")]
    monkeypatch.setattr(pipeline, "all_checks", lambda: only)
    decoy = Synthetic(params=("SBP",))
    decoy.meta["study"]["id"] = "DECOY"
    decoy.write(tmp_path / "trial")
    wanted = Synthetic(params=("SBP",))
    wanted.meta["study"]["id"] = "WANTED"
    wanted.write(tmp_path / "trial#2")
    manifest = tmp_path / "studies.txt"
    manifest.write_text("trial#2\n")
    res = runner.invoke(app, ["batch", str(manifest), "-o", str(tmp_path / "out"), "--jobs", "1"])
    assert res.exit_code == 0, _stderr(res)
    summary = pd.read_csv(tmp_path / "out" / "summary.csv")
    assert set(summary["study"]) == {"WANTED"}


def test_unreadable_manifest_is_exit_2(tmp_path):
    manifest = tmp_path / "studies.txt"
    manifest.write_bytes(b"\xff\xfe\xfa not text \x00\x81")
    res = runner.invoke(app, ["batch", str(manifest), "-o", str(tmp_path / "out")])
    assert_refused(res, [r"studies\.txt: is not UTF-8 text"], heading="in the batch manifest:")
    assert not (tmp_path / "out").exists()


# --------------------------------------------------------------------------- 4. blinded runs


def _lone_arm_study(tmp_path: Path, blinded: bool) -> Path:
    """Two arms of 20 plus an arm 'Solitaire' holding one participant: its warning would reveal the
    allocation of that participant (the warning names the arm and the row)."""
    s = Synthetic(params=("SBP",))
    s.adsl.loc[3, "TRT01P"] = "Solitaire"
    s.meta["study"]["arms"] = ["Control", "Active", "Solitaire"]
    s.meta["study"]["blinded"] = blinded
    return s.write(tmp_path / "study")


def test_blinded_run_prints_no_arm_in_any_warning(tmp_path):
    folder = _lone_arm_study(tmp_path, blinded=True)
    for args in (["validate", str(folder)],
                 ["run", str(folder), "-o", str(tmp_path / "audit"), "--check", "pre-post"]):
        res = runner.invoke(app, args)
        assert res.exit_code == 0, _stderr(res)
        terminal = res.stdout + _stderr(res)
        for arm in ("Solitaire", "Control", "Active"):
            assert arm not in terminal, terminal
        assert "warning: 1 warning(s) concern arms and are withheld in a blinded run." in _stderr(res)


def test_blinded_option_withholds_warnings_of_an_unblinded_study(tmp_path):
    folder = _lone_arm_study(tmp_path, blinded=False)
    res = runner.invoke(app, ["validate", str(folder)])
    assert res.exit_code == 0 and "arm 'Solitaire' has a single participant" in _stderr(res)
    res = runner.invoke(app, ["run", str(folder), "-o", str(tmp_path / "audit"), "--check", "pre-post", "--blinded"])
    assert res.exit_code == 0, _stderr(res)
    assert "Solitaire" not in res.stdout + _stderr(res)
    assert "withheld in a blinded run" in _stderr(res)


# --------------------------------------------------------------------------- 5. library warnings


def _warning_check(monkeypatch):
    """pre-post made to raise the warnings numpy and statsmodels raise on awkward data."""
    check = registry.get_check("pre-post")
    original = check.run

    def noisy(data, ctx):
        np.log(np.zeros(1))  # numpy: RuntimeWarning divide by zero encountered in log
        warnings.warn("Maximum Likelihood optimization failed to converge", UserWarning)
        return original(data, ctx)

    monkeypatch.setitem(registry._REGISTRY, "pre-post", dataclasses.replace(check, run=noisy))


@pytest.fixture
def printed_warnings():
    """Warnings printed to the current sys.stderr, every time, as a plain Python process prints them
    (pytest otherwise records them itself, so none would ever reach the command's terminal)."""
    import sys

    def show(message, category, filename, lineno, file=None, line=None):
        sys.stderr.write(warnings.formatwarning(message, category, filename, lineno, line))

    with warnings.catch_warnings():
        warnings.simplefilter("always")
        warnings.showwarning = show
        yield


def test_library_warnings_stay_off_the_terminal(tmp_path, monkeypatch, printed_warnings):
    _warning_check(monkeypatch)
    folder = Synthetic(params=("SBP",)).write(tmp_path / "study")
    res = runner.invoke(app, ["run", str(folder), "-o", str(tmp_path / "audit"), "--check", "pre-post"])
    assert res.exit_code == 0, _stderr(res)
    terminal = res.stdout + _stderr(res)
    assert "RuntimeWarning" not in terminal and "divide by zero" not in terminal
    assert "converge" not in terminal


def test_library_warnings_show_with_debug(tmp_path, monkeypatch, printed_warnings):
    _warning_check(monkeypatch)
    folder = Synthetic(params=("SBP",)).write(tmp_path / "study")
    res = runner.invoke(app, ["--debug", "run", str(folder), "-o", str(tmp_path / "audit"), "--check", "pre-post"])
    assert res.exit_code == 0, _stderr(res)
    assert "divide by zero" in _stderr(res)


# --------------------------------------------------------------------------- 6. init then validate


VISITS = (("Baseline", 0), ("Week 4", 4), ("Week 8", 8))


def _long(params: dict, visits=VISITS, arm=True, flag=True, n: int = 30) -> pd.DataFrame:
    """A long visit file: one row per participant, visit and parameter; ``params`` maps each code to
    a function (rng, n) -> values."""
    rng = np.random.default_rng(5)
    rows = []
    for code, values_of in params.items():
        for k, (visit, number) in enumerate(visits):
            values = values_of(rng, n)
            for i in range(n):
                row = {"USUBJID": f"P{i:03d}", "PARAMCD": code, "PARAM": f"{code} label", "AVISIT": visit,
                       "AVISITN": number, "AVAL": values[i]}
                if arm:
                    row["TRTP"] = "Placebo" if i % 2 else "Active"
                if flag:
                    row["ABLFL"] = "Y" if k == 0 else ""
                rows.append(row)
    return pd.DataFrame(rows)


def _normal(rng, n):
    return rng.normal(120, 10, n)


def _wide(_):
    rng = np.random.default_rng(2)
    return pd.DataFrame({"USUBJID": [f"P{i}" for i in range(20)], "TRTP": ["A", "B"] * 10,
                         "SBP_Baseline": rng.normal(120, 10, 20), "SBP_Week 4": rng.normal(120, 10, 20)})


INIT_SHAPES = [
    ("ordinal-0-4", lambda _: _long({"PAIN": lambda r, n: r.integers(0, 5, n)})),
    ("two-codes-1-2", lambda _: _long({"RESP": lambda r, n: r.integers(1, 3, n)})),
    ("wide", _wide),
    ("no-arm-column", lambda _: _long({"SBP": _normal}, arm=False)),
    ("odd-visit-names", lambda _: _long({"SBP": _normal}, visits=(('Day -1 "pre"', 0), ("Wk 2 / EOT", 2),
                                                                  ("Follow-up #1", 9)), flag=False)),
    ("numbers-as-visit-names", lambda _: _long({"SBP": _normal}, visits=(("1", 1), ("2", 2), ("3", 3)), flag=False)),
    ("one-visit", lambda _: _long({"SBP": _normal}, visits=VISITS[:1])),
    ("visit-numbers-only", lambda _: _long({"SBP": _normal}).drop(columns=["AVISIT"])),
    ("no-visit-column", lambda _: _long({"SBP": _normal}).drop(columns=["AVISIT", "AVISITN"])),
    ("no-identifier", lambda _: _long({"SBP": _normal}).drop(columns=["USUBJID"])),
    ("constant", lambda _: _long({"C": lambda r, n: np.full(n, 7.0)})),
    ("count", lambda _: _long({"EXAC": lambda r, n: r.poisson(6, n)})),
]


@pytest.mark.parametrize("name,make", INIT_SHAPES, ids=[c[0] for c in INIT_SHAPES])
def test_init_never_drafts_what_validate_refuses(tmp_path, name, make):
    folder = tmp_path / "study"
    folder.mkdir()
    make(None).to_csv(folder / "adeff.csv", index=False)
    res = runner.invoke(app, ["init", str(folder / "adeff.csv")])
    if res.exit_code == 2:
        problem_lines(res)
        assert not (folder / "study.toml").exists()
        return
    assert res.exit_code == 0, _stderr(res)
    check = runner.invoke(app, ["validate", str(folder)])
    assert check.exit_code == 0, (folder / "study.toml").read_text() + _stderr(check)


def test_init_drafts_two_codes_other_than_0_1_as_ordinal(tmp_path):
    """A draft calling 1/2 binary was refused by validate (binary needs 0/1)."""
    folder = tmp_path / "study"
    folder.mkdir()
    _long({"RESP": lambda r, n: r.integers(1, 3, n)}).to_csv(folder / "adeff.csv", index=False)
    assert runner.invoke(app, ["init", str(folder / "adeff.csv")]).exit_code == 0
    text = (folder / "study.toml").read_text()
    assert 'scale = "ordinal"' in text and "levels = [1, 2]" in text


def test_init_refuses_a_draft_whose_data_lie_outside_its_folder(tmp_path):
    _long({"SBP": _normal}).to_csv(tmp_path / "adeff.csv", index=False)
    (tmp_path / "elsewhere").mkdir()
    target = tmp_path / "elsewhere" / "study.toml"
    res = runner.invoke(app, ["init", str(tmp_path / "adeff.csv"), "-o", str(target)])
    assert_refused(res, [r"files\.visits .*leaves the study folder"], heading="in the drafted study.toml")
    assert not target.exists()
