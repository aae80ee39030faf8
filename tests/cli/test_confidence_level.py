"""One confidence level for the whole audit: refused out of range on the command line and in
study.toml (exit 2, nothing written), carried to every interval and caption, and recorded.
"""

from __future__ import annotations

import html
import json
import re

import pytest
from scipy import stats

from auditor.cli import app
from auditor.pipeline import AuditOptions, audit_study
from auditor.render.html import report_html
from auditor.results import level_label
from auditor.study import load_study
from tests.cli.test_hostile_inputs import FAST, Synthetic, assert_nothing_written
from tests.cli.test_options import assert_refused
from tests.cli.test_validate_broken import _stderr, runner
from tests.conftest import EXAMPLE


@pytest.fixture(scope="module")
def audit_90():
    """The example study audited at level 0.90 (quick mode), beside the session's audit at 0.95."""
    return audit_study(load_study(EXAMPLE), AuditOptions(quick=True, level=0.90))


def _estimates(audit) -> dict:
    return {(r.outcome, e.key): e for r in audit.results for e in r.estimates}


def _text(page: str) -> str:
    """The words a reader sees: tags and embedded images dropped, entities decoded."""
    return html.unescape(re.sub(r"<[^>]+>", " ", re.sub(r"<img[^>]*>", "", page)))


def test_level_labels():
    assert [level_label(x) for x in (0.95, 0.9, 0.975, 0.8)] == ["95%", "90%", "97.5%", "80%"]


@pytest.mark.parametrize("value", ["1.2", "0.3", "1", "nan"])
def test_run_and_batch_refuse_a_level_out_of_range(tmp_path, value):
    folder = Synthetic().write(tmp_path / "study")
    out = tmp_path / "audit"
    assert_refused(runner.invoke(app, ["run", str(folder), "-o", str(out), "--level", value]),
                   [r"^--level: .* is not a confidence level\. Fix: give a proportion from 0\.5 to 0\.999"])
    assert_nothing_written(tmp_path, out)
    assert_refused(runner.invoke(app, ["batch", str(folder), "-o", str(tmp_path / "b"), "--level", value]),
                   [r"^--level: .* is not a confidence level"])
    assert not (tmp_path / "b").exists()


def test_study_toml_level_out_of_range_is_refused(example_copy):
    toml = example_copy / "study.toml"
    toml.write_text(toml.read_text().replace('seed = 20261201', 'seed = 20261201\nconfidence_level = 1.5'))
    res = runner.invoke(app, ["validate", str(example_copy)])
    assert res.exit_code == 2, _stderr(res)
    assert "confidence_level" in _stderr(res)


def test_study_toml_level_is_used_and_the_option_overrides_it(tmp_path):
    syn = Synthetic(params=("SBP",))
    syn.meta["study"]["confidence_level"] = 0.8
    folder = syn.write(tmp_path / "study")
    for args, expected in (([], 0.8), (["--level", "0.99"], 0.99)):
        out = tmp_path / f"audit{expected}"
        res = runner.invoke(app, ["run", str(folder), "-o", str(out), *FAST, "--formats", "json", "--quiet", *args])
        assert res.exit_code == 0, _stderr(res)
        found = json.loads((out / "findings.json").read_text())
        assert found["provenance"]["confidence_level"] == expected
        assert "level" not in found["provenance"]["options"]


def test_provenance_records_the_level(example_audit, audit_90):
    assert example_audit.provenance.confidence_level == 0.95
    assert audit_90.provenance.confidence_level == 0.90


def test_level_090_gives_narrower_intervals_than_095(example_audit, audit_90):
    """Every two-sided interval narrows from 95% to 90%; a few interval-based estimates must narrow
    strictly (the Box-Cox interval is read off a grid of powers and may not move)."""
    e95, e90 = _estimates(example_audit), _estimates(audit_90)
    shared = [k for k in e95 if k in e90 and e95[k].lower is not None and e90[k].lower is not None]
    assert len(shared) > 30
    for k in shared:
        w95, w90 = e95[k].upper - e95[k].lower, e90[k].upper - e90[k].lower
        assert w90 <= w95 + 1e-9, (k, w90, w95)
    for key in ("pre-post.slope", "change-score.slope.slope", "change-score.efficiency.correlation",
                "regression-to-mean.shift-sd"):
        pairs = [(e95[k], e90[k]) for k in shared if k[1] == key]
        assert pairs, key
        for a, b in pairs:
            assert b.upper - b.lower < a.upper - a.lower, key


def test_t_interval_width_ratio_is_the_ratio_of_t_quantiles(example_audit, audit_90):
    """The pre-post slope's interval is est -/+ t_{(1+level)/2, df} SE: the width ratio of the 90%
    to the 95% interval is t_{0.95,df} / t_{0.975,df} (quantiles from scipy.stats.t)."""
    from auditor.checks.prepost import baseline_slope
    from auditor.checks.common import complete_pairs
    from auditor.study import outcome_data

    e95, e90 = _estimates(example_audit), _estimates(audit_90)
    k = next(k for k in e95 if k[1] == "pre-post.slope")
    study = load_study(EXAMPLE)
    spec = next(o for o in study.metadata.outcomes if o.param == k[0])
    data = outcome_data(study, spec)
    df = complete_pairs(data)
    df_resid = baseline_slope(df, list(study.metadata.study.arms), study.metadata.study.control_arm)[4]
    ratio = (e90[k].upper - e90[k].lower) / (e95[k].upper - e95[k].lower)
    assert ratio == pytest.approx(stats.t.ppf(0.95, df_resid) / stats.t.ppf(0.975, df_resid), rel=1e-9)


def test_report_at_090_says_90_and_never_95_percent(audit_90):
    text = _text(report_html(audit_90))
    assert "90% interval" in text and "90% confidence interval" in text
    assert "Points and 90% intervals" in text or "pointwise 90% interval" in text
    leftover = [m.group(0) for m in re.finditer(r".{40}95 ?%.{20}", text)
                if not re.search(r"95 ?% tied|\d95 ?%", m.group(0))]
    assert not leftover, leftover


def test_compare_refuses_audits_at_different_levels_unless_forced(example_audit, audit_90, tmp_path):
    from auditor.compare import comparability_problems
    from auditor.render.jsonout import findings_dict

    a95, a90 = findings_dict(example_audit), findings_dict(audit_90)
    assert comparability_problems(a95, a95) == []
    problems = comparability_problems(a95, a90)
    assert [what for what, _ in problems] == ["confidence_level"]
    old = {k: v for k, v in a95.items()}
    old["provenance"] = {k: v for k, v in a95["provenance"].items() if k != "confidence_level"}
    assert comparability_problems(old, a95) == []  # findings without the field were at 0.95
    (tmp_path / "old.json").write_text(json.dumps(a95))
    (tmp_path / "new.json").write_text(json.dumps(a90))
    res = runner.invoke(app, ["compare", str(tmp_path / "old.json"), str(tmp_path / "new.json")])
    assert res.exit_code == 2 and "confidence level" in _stderr(res)


def test_summaries_audit_carries_the_level():
    """The audit from published summaries: the simulated cost intervals narrow at 0.90, the implied
    ANCOVA effect's half-width scales by z_0.95 / z_0.975 (scipy.stats.norm), the comments say 90%."""
    from auditor.summaries.audit import audit_from_summaries
    from tests.conftest import ROOT

    a95 = audit_from_summaries(ROOT / "example_manuscript", quick=True)
    a90 = audit_from_summaries(ROOT / "example_manuscript", quick=True, level=0.90)
    assert (a95.provenance.confidence_level, a90.provenance.confidence_level) == (0.95, 0.90)
    e95, e90 = _estimates(a95), _estimates(a90)
    ancova = [k for k in e95 if k[1].endswith(".ancova-effect.contrast-1")]
    assert ancova
    for k in ancova:
        ratio = (e90[k].upper - e90[k].lower) / (e95[k].upper - e95[k].lower)
        assert ratio == pytest.approx(stats.norm.ppf(0.95) / stats.norm.ppf(0.975), rel=1e-12)
    ratios = [k for k in e95 if k[1].endswith(".ratio") and e95[k].lower is not None]
    assert ratios and all(e90[k].upper - e90[k].lower < e95[k].upper - e95[k].lower for k in ratios)
    said = " ".join(c.evidence for c in a90.comments)
    assert "90% interval" in said and "95% interval" not in said


# ------------------------------------------------------------ every interval wording names the level

TEXT_FIELDS = {"method", "headline", "caption", "note", "evidence", "question", "recommendation", "reason",
               "caveats", "columns", "concern", "request"}
"""The findings.json fields a reader sees as words (docs/findings-json.md); keys and ids are not words."""

INTERVAL_WORD = re.compile(r"\b(CI|[Ii]ntervals?|[Bb]ootstrap|Wald)\b")
"""A word that names an interval or how it was built."""

LEVEL_BEFORE = re.compile(r"90% (\S+ ){0,2}\S*$")
"""The level right before it, at most two words away ("90% robust (sandwich) intervals",
"90% parametric-bootstrap interval")."""

BACK_REFERENCE = re.compile(r"\b(its|that|the|the whole|the expected|its odds-ratio|an|no|not an|has an) $")
"""Words that point back to an interval already named with its level, or deny that there is one
("its interval excludes 1", "the whole interval lies beyond", "no interval can be computed")."""

NOT_THE_AUDITS = {
    "Is the scale interval with": "'interval' as a kind of scale, not a confidence interval",
    "from a 95% CI as sqrt(n)": "the CI a paper printed, from which an SD is recovered",
    "with its estimate and CI, as the": "a request to the authors to print their own interval",
}
"""Interval words that name no interval of the audit, and why."""

FACTS_95 = {
    "95% tied": "the share of tied readings of an outcome (a fact about the data)",
    "from a 95% CI as sqrt(n) x width / 3.92": "how a 95% CI printed by a paper gives an SD (a fact about the paper)",
}
"""Every '95%' that may stand in an audit at level 0.90, and why."""


def _texts(node, field=""):
    """(field, text) of every string under the reader-facing fields of a findings dictionary."""
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _texts(v, k if k in TEXT_FIELDS else field if not isinstance(v, str) else "")
            if isinstance(v, str) and k in TEXT_FIELDS:
                yield k, v
    elif isinstance(node, list):
        for v in node:
            if isinstance(v, str) and field:
                yield field, v
            else:
                yield from _texts(v, field)


def _unlevelled(findings: dict) -> tuple[list[str], list[str]]:
    """(interval wordings without 90% before them, '95%' that is no listed fact) in a findings dict."""
    bare, stray = [], []
    for _, text in _texts(findings):
        words = text
        for phrase in NOT_THE_AUDITS:
            words = words.replace(phrase, INTERVAL_WORD.sub("~", phrase))
        for m in INTERVAL_WORD.finditer(words):
            before = words[:m.start()]
            if not (LEVEL_BEFORE.search(before) or BACK_REFERENCE.search(before)):
                bare.append(words[max(0, m.start() - 50):m.end() + 10])
        rest = text
        for fact in FACTS_95:
            rest = rest.replace(fact, "")
        stray += [rest[max(0, m.start() - 50):m.end() + 20] for m in re.finditer(r"95 ?%", rest)]
    return bare, stray


def test_every_interval_wording_names_the_level_at_090(audit_90):
    """At --level 0.9 every method, headline, caption, note, evidence and table header that names an
    interval names 90% with it, and no '95%' is left but the listed facts about the data."""
    from auditor.render.jsonout import findings_dict

    findings = findings_dict(audit_90)
    bare, stray = _unlevelled(findings)
    assert not bare, bare
    assert not stray, stray
    assert any("90% delta-method interval" in r["method"] for r in findings["results"])
    assert any("95% tied" in text for _, text in _texts(findings))  # the allowed fact is really there


def test_every_interval_wording_names_the_level_in_the_summaries_audit_at_090():
    from auditor.render.jsonout import findings_dict
    from auditor.summaries.audit import audit_from_summaries
    from tests.conftest import ROOT

    findings = findings_dict(audit_from_summaries(ROOT / "example_manuscript", quick=True, level=0.90))
    bare, stray = _unlevelled(findings)
    assert not bare, bare
    assert not stray, stray


def test_interval_words_keep_the_usual_wording_at_the_default_level():
    from auditor.results import DEFAULT_LEVEL, interval_words

    assert interval_words("delta-method", DEFAULT_LEVEL, "delta-method CI") == "delta-method CI"
    assert interval_words("Wald", DEFAULT_LEVEL) == "Wald interval"
    assert interval_words("delta-method", 0.9, "delta-method CI") == "90% delta-method interval"
    assert interval_words("", 0.975, noun="CI") == "97.5% CI"
    assert interval_words("percentile bootstrap", 0.8, noun="") == "80% percentile bootstrap"
