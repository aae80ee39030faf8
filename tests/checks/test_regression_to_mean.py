"""Regression-to-the-mean check: known truth in simulation, the published worked example, the example
study's intended verdicts, blinding, and the cases it must refuse."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from auditor.checks.regression_to_mean import CHECK_ID, run
from auditor.checks.registry import CheckContext, NotAssessable
from auditor.figures import to_svg
from auditor.metadata import OutcomeSpec
from auditor.stats.rtm import expected_rtm
from auditor.study import OutcomeData, load_study, outcome_data

EXAMPLE = Path(__file__).resolve().parents[2] / "example_study"
CTX = CheckContext(seed=11, blinded=False, quick=True)
BLINDED = CheckContext(seed=11, blinded=True, quick=True)

# Simulation truth: true level N(50, 8^2), each reading adds N(0, 5^2) error, so one reading has
# SD sqrt(89) and reliability 64 / 89 = 0.719 (variance components, by construction).
MU, SD_TRUE, SD_ERR = 50.0, 8.0, 5.0
SIGMA = float(np.hypot(SD_TRUE, SD_ERR))
RHO = SD_TRUE**2 / SIGMA**2


def simulate(rng, n=240, cut=52.0, entry="baseline", design="parallel", effect=-2.0, declare=True,
             screening=True, reliability=None, planned="change", direction="above"):
    """Readings of participants who entered on one reading beyond ``cut``: screening S, baseline B and
    follow-up F of a stable true level, with an additive treatment effect in the active arm."""
    kept: list[tuple] = []
    while len(kept) < n:
        t = rng.normal(MU, SD_TRUE, 4 * n)
        s, b, f = (t + rng.normal(0, SD_ERR, 4 * n) for _ in range(3))
        key = b if entry == "baseline" else s
        ok = key >= cut if direction == "above" else key <= cut
        kept += list(zip(s[ok], b[ok], f[ok]))
    s, b, f = np.array(kept[:n]).T
    active = rng.permutation(np.arange(n) % 2) if design == "parallel" else np.ones(n, int)
    f = f + effect * active
    visit = "B" if entry == "baseline" else "S"
    criterion = {"visit": visit, "operator": ">=" if direction == "above" else "<=", "value": cut}
    spec = OutcomeSpec(param="SIM", label="simulated outcome", scale="continuous", unit="u",
                       baseline_visit="B", screening_visit="S" if screening else None, followup_visits=["F"],
                       planned_analysis=planned, reliability=reliability,
                       entry_criterion=criterion if declare else None)
    return _data(spec, s if screening else None, b, f, active, design)


def _data(spec, s, b, f, active, design="parallel"):
    frame = pd.DataFrame({"subject": [f"P{i:05d}" for i in range(len(b))],
                          "arm": np.where(np.asarray(active) == 1, "Active", "Control"),
                          "baseline": b, "followup": f, "fu:F": f})
    if s is not None:
        frame["screening"] = s
    arms = ["Control", "Active"] if design == "parallel" else ["Active"]
    return OutcomeData(spec, frame, arms, "Control" if design == "parallel" else None, design, [])


def _estimate(res, prefix):
    return next(e for e in res.estimates if e.name.startswith(prefix))


# ----------------------------------------------------------------------------- known truth


def test_interval_covers_the_true_expected_rtm_in_simulated_selection():
    """50 replicates (the stats module's 200-replicate calibration is in tests/stats/test_rtm.py)."""
    true = expected_rtm(MU, SIGMA, RHO, 52.0, "above")  # closed form of Barnett et al. (2005)
    rng = np.random.default_rng(2024)
    covered, rhos, iccs, verdicts = 0, [], [], []
    for _ in range(50):
        res = run(simulate(rng), CTX)
        e = _estimate(res, "Expected change from regression to the mean")
        covered += e.lower <= true <= e.upper
        rhos.append(_estimate(res, "Reliability of one reading used").value)
        iccs.append(_estimate(res, "ICC(1) of the same selected pairs").value)
        sd = _estimate(res, "Expected shift in the analysed change, in SDs")
        verdicts.append((res.verdict.value, sd.upper < -0.1))
    # Nominal 95%: 43 of 50 or more happens with probability > 0.99 when coverage is 95%.
    assert covered >= 43, covered
    # The slope on the entry reading is unbiased under selection (Pearson 1903); the ICC is attenuated.
    assert np.mean(rhos) == pytest.approx(RHO, abs=0.03)
    assert np.mean(iccs) < RHO - 0.15
    # Entry on baseline, change planned, expected RTM about -2.5 u (0.26 SD) with a wide interval (the
    # cut lies near the mean, so the fitted population is uncertain). In a randomised parallel trial it
    # biases within-arm change, not the contrast: caution exactly when the interval lies wholly beyond
    # 0.1 SD, else sound; never unsupported (20 of 50 cautions in the last run).
    assert all(v == ("caution" if beyond else "sound") for v, beyond in verdicts), verdicts
    assert 5 <= sum(beyond for _, beyond in verdicts) < 50


def test_no_selection_is_not_flagged():
    rng = np.random.default_rng(77)
    spec = OutcomeSpec(param="SIM", label="simulated outcome", scale="continuous", baseline_visit="B",
                       screening_visit="S", followup_visits=["F"], planned_analysis="change")
    sound = 0
    for _ in range(40):
        t = rng.normal(MU, SD_TRUE, 200)
        s, b, f = (t + rng.normal(0, SD_ERR, 200) for _ in range(3))
        res = run(_data(spec, s, b, f, rng.permutation(np.arange(200) % 2)), CTX)
        sound += res.verdict.value == "sound"
    # The edge tests share a 5% family-wise level; at least 36 of 40 clean (convention of this test).
    assert sound >= 36, sound


def test_undeclared_truncation_is_found_and_sized():
    rng = np.random.default_rng(5)
    flagged = 0
    for _ in range(15):
        res = run(simulate(rng, declare=False), CTX)
        # Found: the selection sub-finding is a caution and the headline's evidence names the edge (the
        # verdict itself depends on whether the sized shift is material; parallel trial, so never unsupported).
        flagged += _sub(res, "selection").verdict.value == "caution" and "sharp lower edge" in res.headline
        assert res.verdict.value != "unsupported"
    assert flagged >= 12, flagged


def test_selection_below_a_cutoff_predicts_a_rise():
    res = run(simulate(np.random.default_rng(8), cut=46.0, direction="below"), CTX)
    e = _estimate(res, "Expected change from regression to the mean")
    assert e.value > 0 and e.lower > 0
    # Closed form, Barnett et al. (2005): about +2.35 u here; the interval must contain it.
    assert e.lower <= expected_rtm(MU, SIGMA, RHO, 46.0, "below") <= e.upper
    assert "a rise of" in res.headline


def test_a_later_second_baseline_removes_the_bias():
    """Entry decided at screening, change taken from a later baseline: under a stable true level the
    residual bias is zero (bias_after_second_baseline), so the check must not call it material."""
    rng = np.random.default_rng(31)
    verdicts, covered = [], 0
    for _ in range(20):
        res = run(simulate(rng, entry="screening"), CTX)
        resid = _estimate(res, "Expected bias of change from B")
        covered += resid.lower <= 0 <= resid.upper
        verdicts.append(res.verdict.value)
    assert covered >= 17, covered
    # No material bias left in the change from the later baseline, in a parallel trial: sound.
    assert verdicts.count("sound") >= 17 and "unsupported" not in verdicts, verdicts


def test_single_arm_makes_material_rtm_unsupported_whatever_the_plan():
    data = simulate(np.random.default_rng(3), design="single-arm", planned="follow-up-adjusted")
    res = run(data, CTX)
    assert res.verdict.value == "unsupported"
    assert "without a control arm" in res.headline
    parallel = run(simulate(np.random.default_rng(3), planned="follow-up-adjusted"), CTX)
    assert parallel.verdict.value == "caution"


# ----------------------------------------------------------------------------- published example


def _exact_truncated_sample(mu, sigma, cut, n):
    """Quantiles (i - 1/2)/n of N(mu, sigma^2) restricted to values below ``cut``: a sample whose
    empirical distribution is the truncated normal itself."""
    p = (np.arange(n) + 0.5) / n * stats.norm.cdf((cut - mu) / sigma)
    return mu + sigma * stats.norm.ppf(p)


def test_published_worked_example_through_the_check():
    # Barnett, van der Pols and Dobson (Int J Epidemiol 2005;34:215-220): mean 60, SD 15, selected
    # below 40, correlation 0.5 -> expected regression to the mean of 13.49.
    b = _exact_truncated_sample(60.0, 15.0, 40.0, 4000)
    rng = np.random.default_rng(1)
    f = 60.0 + 0.5 * (b - 60.0) + rng.normal(0, 15.0 * np.sqrt(0.75), len(b))
    spec = OutcomeSpec(param="SIM", scale="continuous", baseline_visit="B", followup_visits=["F"],
                       planned_analysis="change", reliability=0.5,
                       entry_criterion={"visit": "B", "operator": "<", "value": 40.0})
    res = run(_data(spec, None, b, f, np.ones(len(b)), design="single-arm"), CTX)
    e = _estimate(res, "Expected change from regression to the mean")
    assert e.value == pytest.approx(13.49, abs=0.05)
    assert _estimate(res, "Mean of the unselected population").value == pytest.approx(60.0, abs=0.2)
    assert _estimate(res, "SD of the unselected population").value == pytest.approx(15.0, abs=0.1)
    assert _estimate(res, "Reliability of one reading used").note == ""  # declared, not a lower bound
    # Follow-up was drawn from the same model, so the observed rise lies inside the interval.
    obs = _estimate(res, "Observed mean change from baseline")
    assert e.lower <= obs.value <= e.upper
    assert res.verdict.value == "unsupported"


# ----------------------------------------------------------------------------- example study


@pytest.fixture(scope="module")
def example():
    study = load_study(EXAMPLE)
    ctx = CheckContext(seed=study.metadata.study.seed, blinded=False, quick=True)
    return {s.param: outcome_data(study, s) for s in study.metadata.outcomes}, ctx


def test_example_study_feno_is_flagged_and_fev1_is_not(example):
    data, ctx = example
    feno = run(data["FENO"], ctx)
    assert feno.check_id == CHECK_ID
    # Before: unsupported. FENO is a randomised parallel outcome (study.toml design = "parallel"), so
    # its material expected fall (0.25 SD of log values, interval beyond 0.1 SD) biases within-arm
    # change but not the randomised contrast: caution.
    assert feno.verdict.value == "caution", feno.headline
    assert feno.headline.startswith("Regression to the mean alone is expected to shift the change from "
                                    "baseline by a fall of")
    assert "the randomised comparison between arms is not biased by it" in feno.headline
    assert "Evidence: entry required FENO >= 35 ppb at Baseline" in feno.headline
    assert "second, later baseline" in feno.headline
    subs = {s.id: s for s in feno.subfindings}
    assert "log scale" in subs["scale"].evidence  # FeNO is log-normal by construction (generate.py)
    # generate.py: test-retest correlation 0.77 on the log scale; the interval must include it.
    rel = _estimate(feno, "Reliability of one reading used")
    assert rel.lower <= 0.77 <= rel.upper
    # generate.py: log FeNO true level N(log 30, 0.55^2) plus N(0, 0.30^2) error, entry at 35 ppb.
    true = expected_rtm(np.log(30), np.hypot(0.55, 0.30), 0.77, np.log(35), "above")
    e = _estimate(feno, "Expected change from regression to the mean")
    assert e.lower <= true <= e.upper
    # Internal identity: mean Kelley shrinkage equals the expected change at the ML fit.
    assert _estimate(feno, "Mean shrinkage").value == pytest.approx(e.value, abs=1e-9)
    for param in ("FEV1", "EOS", "NSS", "K", "ACS"):
        res = run(data[param], ctx)
        assert res.verdict.value == "sound", (param, res.headline)
        assert res.headline.startswith("No selection on this outcome")


def test_example_figures_render_and_carry_no_identifiers(example):
    data, ctx = example
    res = run(data["FENO"], ctx)
    kinds = {f.kind for f in res.figures}
    assert {"rtm_pairs", "rtm_truncation", "rtm_shrinkage", "interval_rows"} <= kinds
    text = json.dumps(res.to_dict())
    assert "TQA02-" not in text  # participant identifiers of generate.py
    for fig in res.figures:
        assert to_svg(fig).startswith("<svg")


def test_blinded_run_has_no_arm_content(example):
    data, _ = example
    feno = data["FENO"]
    unreadable = OutcomeData(feno.spec, feno.frame.assign(arm=None), feno.arms, feno.control_arm, feno.design, [])
    res = run(unreadable, BLINDED)  # the arm column is not read when blinded
    assert not any(e.by_arm for e in res.estimates)
    assert not any(s.by_arm for s in res.subfindings)
    assert not any(f.by_arm for f in res.figures)
    text = json.dumps(res.to_dict())
    assert "Placebo" not in text and "TQ-4417" not in text
    assert "pooled" in res.headline and "blinded audit" in res.headline
    assert res.verdict.value == "caution"  # parallel design: caution at most (was unsupported)


def test_unblinded_run_marks_control_arm_content(example):
    data, ctx = example
    res = run(data["FENO"], ctx)
    observed = _estimate(res, "Observed mean change from baseline on Placebo")
    assert observed.by_arm
    assert _estimate(res, "Share of the observed change on Placebo").by_arm
    assert next(f for f in res.figures if f.id == "rtm-expected-observed").by_arm


# ----------------------------------------------------------------------------- refusals


def test_too_few_participants_is_not_assessable():
    with pytest.raises(NotAssessable, match="at least 20"):
        run(simulate(np.random.default_rng(2), n=15), CTX)


def test_constant_entry_reading_is_not_assessable():
    data = simulate(np.random.default_rng(2))
    frame = data.frame.assign(baseline=60.0)
    with pytest.raises(NotAssessable, match="same for every participant"):
        run(OutcomeData(data.spec, frame, data.arms, data.control_arm, data.design, []), CTX)


def test_fit_that_does_not_converge_is_not_assessable():
    # Values more skewed than the exponential limit of the truncated normal (Cohen 1991): no MLE.
    rng = np.random.default_rng(4)
    b = 35.0 + rng.lognormal(1.0, 1.2, 200)
    spec = OutcomeSpec(param="SIM", scale="continuous", baseline_visit="B", followup_visits=["F"],
                       planned_analysis="change", reliability=0.6, log_scale=False,
                       entry_criterion={"visit": "B", "operator": ">=", "value": 35.0})
    with pytest.raises(NotAssessable, match="did not converge"):
        run(_data(spec, None, b, b + rng.normal(0, 1, 200), rng.permutation(np.arange(200) % 2)), CTX)


# ----------------------------------------------------------------------------- design-correct verdicts


def simulate_percentile(rng, n=300, rho=0.6, percentile=0.70, design="parallel", declare=True, mu=50.0,
                        sigma=10.0, planned="change"):
    """Entry on baseline at or above its ``percentile`` in a population N(mu, sigma^2) whose readings
    have reliability ``rho`` (true level variance rho sigma^2, error variance (1 - rho) sigma^2), with a
    screening reading for the reliability and an additive effect of -2 in the active arm."""
    cut = mu + sigma * stats.norm.ppf(percentile)
    kept: list[tuple] = []
    while len(kept) < n:
        t = rng.normal(mu, np.sqrt(rho) * sigma, 4 * n)
        s, b, f = (t + rng.normal(0, np.sqrt(1 - rho) * sigma, 4 * n) for _ in range(3))
        kept += list(zip(s[b >= cut], b[b >= cut], f[b >= cut]))
    s, b, f = np.array(kept[:n]).T
    active = rng.permutation(np.arange(n) % 2) if design == "parallel" else np.ones(n, int)
    spec = OutcomeSpec(param="SIM", label="simulated outcome", scale="continuous", unit="u", baseline_visit="B",
                       screening_visit="S", followup_visits=["F"], planned_analysis=planned,
                       entry_criterion={"visit": "B", "operator": ">=", "value": float(cut)} if declare else None)
    return _data(spec, s, b, f - 2.0 * active, active, design), cut


def test_parallel_trial_entry_at_70th_percentile_is_caution_never_unsupported():
    # Known truth: rho 0.6, entry at the 70th percentile, so the expected shift is
    # -(1 - 0.6) sigma phi(z)/(1 - Phi(z)) = -0.46 sigma (Barnett et al. 2005), material (beyond 0.1 SD).
    true = expected_rtm(50.0, 10.0, 0.6, 50.0 + 10.0 * stats.norm.ppf(0.7), "above")
    assert true == pytest.approx(-4.64, abs=0.01)
    rng = np.random.default_rng(70)
    verdicts = []
    for _ in range(10):
        data, _ = simulate_percentile(rng, n=600)
        res = run(data, CTX)
        verdicts.append(res.verdict.value)
        assert res.verdict.value != "unsupported", res.headline
        assert res.headline.startswith("Regression to the mean alone is expected to shift")
        assert "the randomised comparison between arms is not biased by it" in res.headline
        e = _estimate(res, "Expected shift in the analysed change, in SDs")
        if res.verdict.value == "caution":
            assert "within-arm change" in res.headline and "responder shares" in res.headline
            assert e.upper < -0.1  # its whole interval beyond the threshold
    # 20 of 20 cautions at n = 600 during development (18 of 20 at n = 300, where the fit is looser).
    assert verdicts.count("caution") >= 9, verdicts


def test_single_arm_entry_at_70th_percentile_is_unsupported():
    rng = np.random.default_rng(71)
    verdicts = []
    for _ in range(10):
        data, _ = simulate_percentile(rng, n=600, design="single-arm")
        res = run(data, CTX)
        verdicts.append(res.verdict.value)
        assert "randomised comparison" not in res.headline
    assert verdicts.count("unsupported") >= 9, verdicts


def test_parallel_trial_with_no_material_shift_is_sound():
    # rho 0.98 at the 70th percentile: expected shift -0.02 x 1.16 sigma = -0.023 sigma (Barnett et al.
    # 2005), inside the 0.1 SD threshold: a real selection, but nothing material to bias.
    rng = np.random.default_rng(72)
    data, _ = simulate_percentile(rng, rho=0.98)
    res = run(data, CTX)
    assert res.verdict.value == "sound", res.headline
    assert "not wholly beyond the 0.1 SD threshold" in res.headline
    assert _sub(res, "selection").verdict.value == "caution"  # the selection itself is still reported


def test_no_entry_criterion_and_no_selection_is_sound():
    rng = np.random.default_rng(73)
    spec = OutcomeSpec(param="SIM", label="simulated outcome", scale="continuous", baseline_visit="B",
                       screening_visit="S", followup_visits=["F"], planned_analysis="change")
    t = rng.normal(MU, SD_TRUE, 300)
    s, b, f = (t + rng.normal(0, SD_ERR, 300) for _ in range(3))
    res = run(_data(spec, s, b, f, rng.permutation(np.arange(300) % 2)), CTX)
    assert res.verdict.value == "sound", res.headline
    assert res.headline.startswith("No selection on this outcome was declared or detected")


@pytest.mark.parametrize("mu, sigma, percentile, declare", [(300.0, 20.0, 0.6, True), (140.0, 18.0, 0.75, True),
                                                              (300.0, 20.0, 0.5, False)])
def test_upper_quarter_to_half_of_a_normal_screening_is_assessable(mu, sigma, percentile, declare):
    # Before: the Box-Cox power of the edge test's scale came out at -9 to -14 for these selections and
    # the check failed with "the values are all equal". Now the power is bounded and the check sizes the
    # shift; with no criterion declared, the cut is found in the data.
    data, cut = simulate_percentile(np.random.default_rng(74), mu=mu, sigma=sigma, percentile=percentile,
                                    declare=declare)
    res = run(data, CTX)
    assert res.verdict.value in ("caution", "sound"), res.headline
    e = _estimate(res, "Expected change from regression to the mean")
    assert np.isfinite([e.value, e.lower, e.upper]).all() and e.upper < 0  # selection above: a fall
    finds = [x for x in res.estimates if x.name.startswith("Truncation-edge test")]
    assert finds and all(np.isfinite(x.value) for x in finds)  # the edge test ran on these values
    if not declare:
        assert "sharp lower edge" in res.headline


def _sub(res, id_):
    return next(s for s in res.subfindings if s.id == id_)


def test_analysis_holds_the_judged_numbers_before_any_wording():
    """The analysis alone, no sentences: with entry on baseline the change expected in the analysed
    change is the whole expected regression to the mean, equal to Barnett et al.'s (2005) closed form
    at the fitted mean, SD and reliability (stats.rtm.expected_rtm, checked against the published
    worked example in tests/stats/test_rtm.py); with entry at screening it is the residual bias of
    the later baseline, estimated in a named comparison group; materiality is the rule of
    ``is_material`` on that interval."""
    from auditor.checks.regression_to_mean import Readings, analyse, find_selection, is_material

    def analysis(data):
        everyone = Readings.of(data, CTX)
        sel, finds = find_selection(data.spec, everyone, CTX)
        return analyse(data, CTX, everyone, sel, finds)

    an = analysis(simulate(np.random.default_rng(5), n=400))
    fit = an.scale.fit
    assert an.residual_group is None and an.sel.column == "baseline"
    assert an.target.estimate == pytest.approx(an.rtm.estimate)
    assert an.rtm.estimate == pytest.approx(expected_rtm(fit.mu, fit.sigma, an.rho, 52.0, "above"), rel=1e-6)
    assert an.material == is_material(an.target, fit.sigma, 0.1)
    assert an.second is not None and 0 < an.second.share <= 1

    later = analysis(simulate(np.random.default_rng(6), n=400, entry="screening"))
    assert later.residual_group is not None and later.second is None
    assert later.target.lower <= 0 <= later.target.upper  # stable true level: no residual bias (truth)
