"""Each check's recommended analysis follows the verdict it reached (the wording is a convention of
this tool, no source; the rules are in docs/memo.md)."""

from __future__ import annotations

from types import SimpleNamespace as NS

import pytest

from auditor.checks import change_score, count_time, later_risk, percent_change, regression_to_mean
from auditor.pipeline import without_numbers
from auditor.results import Verdict

S, C, U = Verdict.SOUND, Verdict.CAUTION, Verdict.UNSUPPORTED


def flags(ordinal=False, awkward=False):
    """An ordinal scale (an ordinal interval finding is also a departure), or a bound, interval or scale departure."""
    return {"ordinal": ordinal, "awkward": awkward or ordinal}


@pytest.mark.parametrize("planned, verdict, p, expected", [
    ("change", S, flags(), "the planned change-from-baseline analysis"),
    ("change", U, flags(), "ANCOVA on follow-up with a flexible (spline) baseline"),
    ("change", U, flags(ordinal=True),
     "ANCOVA on follow-up with a flexible (spline) baseline, or a proportional-odds ANCOVA"),
    ("change", C, flags(), "ANCOVA on follow-up with a flexible (spline) baseline; or the planned analysis with its "
                           "cost stated"),
    ("follow-up-only", C, flags(), "ANCOVA on follow-up adjusted for baseline"),
    ("follow-up-only", S, flags(), "the planned follow-up-only analysis"),
    ("follow-up-adjusted", S, flags(), "the planned baseline-adjusted analysis (ANCOVA)"),
    ("follow-up-adjusted", C, flags(awkward=True),
     "ANCOVA on follow-up with a flexible (spline) baseline, or a proportional-odds ANCOVA"),
])
def test_change_score_recommendation(planned, verdict, p, expected):
    assert change_score.recommended_analysis(planned, verdict, **p) == expected


def test_count_time_recommendation():
    assert count_time.recommended_analysis(S).startswith("the planned comparison of counts")
    assert count_time.recommended_analysis(U).startswith("a rate model")
    assert count_time.recommended_analysis(C) == count_time.recommended_analysis(U)


def test_percent_change_recommendation():
    pc, resp = NS(planned_analysis="percent-change"), NS(planned_analysis="responder")
    assert percent_change.recommended_analysis(pc, S) == "the planned percent-change analysis"
    assert percent_change.recommended_analysis(resp, S) == "the planned responder analysis"
    assert "log follow-up" in percent_change.recommended_analysis(pc, U)
    assert "continuous follow-up" in percent_change.recommended_analysis(resp, C)


def test_regression_to_mean_recommendation():
    assert regression_to_mean.recommended_analysis("parallel", S, 0.8).startswith("no change of plan")
    text = regression_to_mean.recommended_analysis("parallel", C, 0.5)
    assert text.startswith("the comparison between arms, adjusted for baseline") and "about 50% of it" in text
    single = regression_to_mean.recommended_analysis("single-arm", U, None)
    assert single.startswith("do not read the before-after change") and single.endswith("add a concurrent control")


def test_later_risk_recommendation():
    none_declared = NS(judged=None)
    declared = NS(judged=NS(definition=NS(label="change")))
    assert later_risk.recommended_analysis(none_declared, S) == "risk modelled on the latest value"
    assert "flexible" in later_risk.recommended_analysis(none_declared, C)
    assert later_risk.recommended_analysis(declared, S) == "the declared change-based definition"
    assert later_risk.recommended_analysis(declared, U).startswith("risk modelled on the latest and the earlier")
    assert later_risk.recommended_analysis(declared, C).endswith("sensitivity analysis to the declared "
                                                                  "change-based definition")


def test_withheld_recommendation_drops_clauses_with_numbers():
    assert without_numbers("the comparison between arms; a second baseline would remove about 83% of it") == \
        "the comparison between arms"
    assert without_numbers("a rate model") == "a rate model"
