"""Results that were silently wrong, and user text that could subvert the report.

Each test injects one fault: bounds far wider than the data, an entry criterion that excludes no one,
a blinded audit asked about the arms, a `$` in a label (matplotlib mathtext), and bidirectional
controls in labels (HTML, PDF input, terminal messages, figures).
"""

from __future__ import annotations

import re

import numpy as np
import pytest

import auditor.figures as figures
from auditor.checks.change_score import run as change_score
from auditor.checks.percent_change import run as percent_change
from auditor.checks.regression_to_mean import run as regression_to_mean
from auditor.checks.registry import CheckContext
from auditor.errors import InputProblem, one_line_text
from auditor.metadata import OutcomeSpec
from auditor.render.bidi import FSI, PDI, contained
from auditor.render.html import report_html
from auditor.results import Figure, Verdict
from auditor.stats.diagnostics import bound_shares
from auditor.validation import change_score_cases, count_time_cases
from tests.checks.test_percent_change import _data as pc_data
from tests.checks.test_percent_change import _multiplicative
from tests.checks.test_regression_to_mean import MU, SD_ERR, SD_TRUE, _data, simulate
from tests.cli.test_hostile_inputs import _audit_with_labels

CTX = CheckContext(seed=11, blinded=False, quick=True)
BLINDED = CheckContext(seed=11, blinded=True, quick=True)


def _sub(res, id_):
    return next(s for s in res.subfindings if s.id == id_)


def _est(res, start):
    return next(e for e in res.estimates if e.name.startswith(start))


# --------------------------------------------------------------------------- 1. floor and ceiling


def test_bounds_far_wider_than_the_data_put_no_value_at_the_floor():
    # Values 1-5 under declared bounds [0, 1e12]: before the fix the tolerance was 1e-9 of the bound
    # range (1000 here), so 100% sat "at the floor".
    v = np.tile(np.arange(1.0, 6.0), 20)
    s = bound_shares(v, 0.0, 1e12)
    assert s.share_lower == 0.0 and s.share_upper == 0.0
    # An open upper bound (inf) made the tolerance infinite: every value was "at the floor".
    assert bound_shares(v, 0.0, float("inf")).share_lower == 0.0


def test_a_true_floor_is_still_found_under_wide_bounds():
    rng = np.random.default_rng(4)
    v = np.concatenate([np.zeros(40), rng.integers(1, 6, 60).astype(float)])  # 40% at 0 by construction
    assert bound_shares(v, 0.0, 1e12).share_lower == pytest.approx(0.40)
    assert bound_shares(v, 0.0, float("inf")).share_lower == pytest.approx(0.40)


def _bounded_study(b, f, bounds):
    a = np.arange(len(b)) % 2
    return change_score_cases.outcome_data_for(b, f, a, bounds=bounds)


def test_change_score_bounds_sub_finding_under_wide_bounds():
    rng = np.random.default_rng(9)
    latent = rng.normal(3.0, 1.0, 200)
    b = np.clip(np.round(latent + rng.normal(0, 0.5, 200)), 1, 5)
    f = np.clip(np.round(latent + rng.normal(0, 0.5, 200)), 1, 5)
    res = change_score(_bounded_study(b, f, (0.0, 1e12)), CTX)
    sub = _sub(res, "bounds")
    assert sub.verdict == Verdict.SOUND, sub.evidence
    assert "0%, no value equals either bound" in sub.evidence
    assert _est(res, "Share at the lower bound, baseline").value == 0.0
    assert "sit at the floor" not in res.headline
    # The same data with 40% set to the declared floor 0: flagged.
    b2, f2 = b.copy(), f.copy()
    b2[:80], f2[:80] = 0.0, 0.0
    res2 = change_score(_bounded_study(b2, f2, (0.0, 1e12)), CTX)
    assert _sub(res2, "bounds").verdict == Verdict.CAUTION
    assert _est(res2, "Share at the lower bound, baseline").value == pytest.approx(0.40)


def test_the_floor_scenario_reports_its_own_share():
    # The self-check's floor scenario (bounds [0, inf], about a third at 0) used to report 100%.
    rng = np.random.default_rng(1)
    scenario = next(s for s in change_score_cases.SCENARIOS if s.name == "floor effect")
    b, f, a = scenario.make(rng, 300)
    res = change_score(change_score_cases.outcome_data_for(b, f, a, scenario.bounds), CTX)
    assert _est(res, "Share at the lower bound, baseline").value == pytest.approx(np.mean(b == 0))
    assert 0.2 < np.mean(b == 0) < 0.45


# --------------------------------------------------------------------------- 2. an entry criterion that excludes no one


def _unselected(cut: float, seed: int = 3, n: int = 240):
    """Readings of an unselected population (true level N(50, 8^2) plus N(0, 5^2) error), declared
    as entered on baseline >= ``cut``."""
    rng = np.random.default_rng(seed)
    t = rng.normal(MU, SD_TRUE, n)
    s, b, f = (t + rng.normal(0, SD_ERR, n) for _ in range(3))
    spec = OutcomeSpec(param="SIM", label="simulated outcome", scale="continuous", unit="u", baseline_visit="B",
                       screening_visit="S", followup_visits=["F"], planned_analysis="change",
                       entry_criterion={"visit": "B", "operator": ">=", "value": cut})
    return _data(spec, s, b, f, rng.permutation(np.arange(n) % 2))


def test_a_criterion_beyond_the_data_selects_no_one_and_is_not_a_caution():
    data = _unselected(0.0)  # every baseline is about 10 SDs above 0
    res = regression_to_mean(data, CTX)
    assert res.verdict == Verdict.SOUND, res.headline
    assert "selects no one out" in res.headline
    sel = _sub(res, "selection")
    assert sel.verdict == Verdict.SOUND and "selects no one out" in sel.evidence
    assert _est(res, "Share of the unselected population meeting the cutoff").value > 99.0
    # The expected shift is computed from the fit, not asserted: tiny, and equal (within 0.05 u) to
    # the mean Kelley shrinkage, computed separately from the readings.
    e = _est(res, "Expected change from regression to the mean")
    assert abs(e.value) < 0.01 * SD_TRUE and e.value != 0.0
    assert e.value == pytest.approx(_est(res, "Mean shrinkage").value, abs=0.05)
    cs = change_score(data, CTX)
    assert _sub(cs, "selection").verdict == Verdict.SOUND
    assert "regression to the mean is expected" not in cs.headline


def test_a_real_criterion_is_still_a_selection():
    data = simulate(np.random.default_rng(8))  # entry on baseline >= 52 in a population of mean 50
    res = regression_to_mean(data, CTX)
    assert res.verdict in (Verdict.CAUTION, Verdict.UNSUPPORTED)
    assert "selects no one out" not in res.headline
    assert _sub(res, "selection").verdict == Verdict.CAUTION
    assert _est(res, "Expected change from regression to the mean").upper < 0
    cs = change_score(data, CTX)
    assert _sub(cs, "selection").verdict == Verdict.CAUTION
    assert _est(cs, "Share of the fitted population the entry criterion leaves out").value > 10


# --------------------------------------------------------------------------- 3. blinded audits say what they cannot know


def _count_study():
    # Times unequal but balanced across arms: unblinded, the comparison is examined and unchanged.
    return count_time_cases.simulate(np.random.default_rng(1), days_control=(8, 28), days_active=(8, 28))


def test_count_time_blinded_headline_withholds_the_arm_consequence():
    open_res = count_time_cases.run_check(_count_study(), blinded=False)
    # The unblinded check examined the comparison: it states the shift with its interval.
    assert "no evidence that ignoring time moves the comparison" in open_res.headline
    res = count_time_cases.run_check(_count_study(), blinded=True)
    assert res.verdict == Verdict.CAUTION
    assert "without changing" not in res.headline and "unchanged" not in res.headline
    assert "no evidence that ignoring time" not in res.headline and "moves the treatment comparison" not in res.headline
    assert "withheld" in res.headline and "unblinding" in res.headline
    sub = _sub(res, "time-by-arm")
    assert sub.verdict == Verdict.NOT_ASSESSABLE and not sub.by_arm


def test_percent_change_blinded_headline_does_not_call_the_comparison_harmless():
    b, f, arm = _multiplicative()
    assert percent_change(pc_data(b, f, arm), CTX).headline.startswith("Percent change is harmless here")
    res = percent_change(pc_data(b, f, arm, drop_arm=True), BLINDED)
    assert "harmless" not in res.headline
    assert "withheld in this blinded audit" in res.headline


# --------------------------------------------------------------------------- 4. `$` in labels


def _label_figure(label: str) -> Figure:
    return Figure("t", "interval_rows", "t", {"rows": [{"label": label, "value": 1.0, "lower": 0.0, "upper": 2.0}],
                                              "xlabel": f"Change in {label}"})


def test_a_dollar_label_draws_literally(monkeypatch):
    svg = figures.to_svg(_label_figure("$x^2$ arm"))
    # The SVG backend writes each text as a comment; mathtext would set x in the oblique face.
    assert "<!-- $x^2$ arm -->" in svg and "<!-- Change in $x^2$ arm -->" in svg
    assert "Oblique" not in svg
    # Control: with mathtext switched back on the same label is typeset (so the test can fail).
    monkeypatch.setitem(figures.STYLE, "text.parse_math", True)
    assert "Oblique" in figures.to_svg(_label_figure("$x^2$ arm"))


def test_figure_style_turns_mathtext_and_tex_off():
    import matplotlib

    with matplotlib.rc_context(figures.STYLE):
        assert matplotlib.rcParams["text.parse_math"] is False and matplotlib.rcParams["text.usetex"] is False


# --------------------------------------------------------------------------- 5. bidirectional controls

RLO = "\u202e"
HOSTILE = f"Dose{RLO}evil"


def _outside_isolates(text: str) -> list[str]:
    """Explicit bidi controls at isolate depth 0 (those that would reach the tool's own text)."""
    depth, found = 0, []
    for c in text:
        if c in "\u2066\u2067\u2068":
            depth += 1
        elif c == "\u2069":
            depth = max(depth - 1, 0)
        elif depth == 0 and c in "\u202a\u202b\u202c\u202d\u202e":
            found.append(c)
    return found


def test_bidi_controls_in_labels_are_isolated_in_the_html(tmp_path):
    audit = _audit_with_labels(tmp_path, f"Pressure {RLO}reversed", HOSTILE, checks=("pre-post", "change-score"))
    html = report_html(audit)
    assert RLO in html  # the label is kept as written ...
    assert _outside_isolates(html) == []  # ... but never reaches past its own isolate
    assert f"{FSI}Pressure {RLO}reversed{PDI}" in html
    assert f"{FSI}{HOSTILE}{PDI}" in html


def test_a_stray_isolate_in_a_label_cannot_close_the_tools_isolate(tmp_path):
    label = "A\u2069\u202eB\u2067"  # a lone PDI, an override, an isolate never closed
    html = report_html(_audit_with_labels(tmp_path, label, "Active"))
    assert _outside_isolates(html) == []
    assert contained("tool \u202etext") == "tool \\u202etext"


def test_bidi_controls_are_escapes_on_the_terminal():
    assert one_line_text(f"arm {HOSTILE} here") == "arm Dose\\u202eevil here"
    for c in "\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069\u200e\u200f\u061c":
        assert c not in one_line_text(f"x{c}y")
    line = InputProblem("adsl.csv", "row 3", "TRT01P", f"arm '{HOSTILE}' is not in study.arms", "fix it").one_line()
    assert RLO not in line and "\\u202e" in line


def test_bidi_controls_are_removed_from_figures():
    svg = figures.to_svg(_label_figure(HOSTILE))
    assert RLO not in svg and "<!-- Doseevil -->" in svg
    assert not re.search("[\u202a-\u202e\u2066-\u2069\u200e\u200f\u061c]", svg)


def test_the_pdf_is_laid_out_from_the_isolated_html(tmp_path):
    # The PDF is WeasyPrint's layout of report_html (render/output.py), so the isolates above are what
    # it lays out; this checks that a hostile label still gives a PDF.
    from auditor.render.pdf import html_to_pdf

    html = report_html(_audit_with_labels(tmp_path, f"Pressure {RLO}reversed", HOSTILE))
    assert _outside_isolates(html) == []
    assert html_to_pdf(html).startswith(b"%PDF")


def test_bidi_controls_are_escapes_in_the_terminal_tables():
    from auditor.cli import _cells

    (cell,) = _cells("Arm \u202eevil\u202c")
    assert cell.plain == "Arm \\u202eevil\\u202c"
