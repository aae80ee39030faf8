"""The scale and analysis rules the data and summaries schemas share, each worded for its schema."""

from __future__ import annotations

import pytest
from pydantic import ValidationError

from auditor.metadata import OutcomeSpec
from auditor.summaries.spec import SummaryOutcome

DATA = {"param": "Y", "scale": "continuous", "baseline_visit": "B", "followup_visits": ["W12"],
        "planned_analysis": "change"}
SUMMARY = {"param": "Y", "scale": "continuous", "reported_analysis": "change"}
RESPONDER = {"basis": "change", "threshold": -3, "direction": "at-most"}


def _message(model, fields: dict) -> str:
    with pytest.raises(ValidationError) as exc:
        model.model_validate(fields)
    return exc.value.errors()[0]["msg"].removeprefix("Value error, ")


@pytest.mark.parametrize("model, base, analysis_key, rule", [
    (OutcomeSpec, DATA, "planned_analysis", "a [outcomes.responder] rule"),
    (SummaryOutcome, SUMMARY, "reported_analysis", "a responder rule"),
])
def test_shared_rules_in_both_schemas(model, base, analysis_key, rule):
    assert _message(model, {**base, "scale": "ordinal"}) == "an ordinal outcome needs 'levels' (its ordered codes)"
    assert _message(model, {**base, "bounds": [5, 5]}) == "bounds must be [lower, upper] with lower < upper"
    assert _message(model, {**base, analysis_key: "responder"}) == f"{analysis_key} 'responder' needs {rule}"
    ok = model.model_validate({**base, analysis_key: "responder", "responder": RESPONDER,
                               "scale": "ordinal", "levels": [0, 1, 2], "bounds": [0, 2]})
    assert ok.lower_bound == 0 and ok.upper_bound == 2


@pytest.mark.parametrize("levels, data_message", [
    ([1], "an ordinal scale needs at least two levels"),
    ([0, 2, 1], "levels must be distinct and listed in increasing order"),
    ([0, 1, 1], "levels must be distinct and listed in increasing order"),
])
def test_levels_worded_for_each_schema(levels, data_message):
    assert _message(OutcomeSpec, {**DATA, "scale": "ordinal", "levels": levels}) == data_message
    assert (_message(SummaryOutcome, {**SUMMARY, "scale": "ordinal", "levels": levels})
            == "levels must be two or more distinct codes in increasing order")
