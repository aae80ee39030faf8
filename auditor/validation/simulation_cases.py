"""Simulation cases: each check's false-alarm rate under null scenarios and detection rate under
the violations it exists to find (N = 200 per simulated trial)."""

from __future__ import annotations

from .cases import SimulationCase, simulation
from .change_score_cases import SCENARIOS, SUBFINDINGS, VERDICT_SCENARIOS, run_scenario, verdict_rates

N = 200


def _rate(scenario, sub):
    def compute(replicates: int, seed: int) -> float:
        return run_scenario(scenario, N, replicates, seed)[sub]
    return compute


for _sc in SCENARIOS:
    if _sc.target is None:
        for _sub in SUBFINDINGS:
            simulation(SimulationCase(
                f"change-score/null/{_sub}", "change-score", f"{_sc.name}: {_sub} flagged ({_sc.description})",
                "<= 0.05 + 2 MCSE", _rate(_sc, _sub), "false-alarm", 0.05, quick_replicates=40))
    else:
        simulation(SimulationCase(
            f"change-score/{_sc.target}", "change-score", f"{_sc.name}: {_sc.target} flagged ({_sc.description})",
            ">= 0.80", _rate(_sc, _sc.target), "detection", 0.80))



def _verdict_rate(key: str, *outcomes: str):
    def compute(replicates: int, seed: int) -> float:
        rates = verdict_rates(VERDICT_SCENARIOS[key], replicates, seed)
        return sum(rates[o] for o in outcomes)
    return compute


# Verdict-level known truth of the change-score check (each scenario's design in its description).
for _id, _key, _outs, _what, _kind, _target, _quick in [
    ("null/verdict-unsupported", "null-slope1-r08", ("unsupported",), "called unsupported", "false-alarm", 0.05, None),
    ("null/verdict-caution", "null-slope1-r08", ("caution",), "called caution", "false-alarm", 0.15, None),
    ("null/unequal-variances", "null-slope1-r045", ("unsupported",), "called unsupported", "false-alarm", 0.05, None),
    ("null/ancova-planned", "ancova-slope05", ("caution", "unsupported"), "called other than sound", "false-alarm",
     0.15, None),
    ("large-trial-small-slope", "large-slope097", ("unsupported",), "called unsupported", "false-alarm", 0.05, 6),
    ("verdict/slope-half", "change-slope05", ("unsupported",), "called unsupported", "detection", 0.80, None),
    ("verdict/floor", "floor40", ("caution", "unsupported"), "called caution or unsupported", "detection", 0.80, None),
    ("verdict/ordinal", "ordinal04", ("caution", "unsupported"), "called caution or unsupported", "detection", 0.80,
     None),
]:
    _sc = VERDICT_SCENARIOS[_key]
    simulation(SimulationCase(
        f"change-score/{_id}", "change-score", f"{_sc.description}: {_what}",
        ("<= " if _kind == "false-alarm" else ">= ") + (f"{_target:.2f} + 2 MCSE" if _kind == "false-alarm" else f"{_target:.2f}"),
        _verdict_rate(_key, *_outs), _kind, _target, **({"quick_replicates": _quick} if _quick else {})))

def _gmr_coverage(replicates: int, seed: int) -> float:
    """Share of simulated multiplicative trials whose ratio-of-geometric-means CI covers the truth (0.7)."""
    import numpy as np

    from ..stats.effects import arm_coding
    from ..stats.relative_change import geometric_mean_ratio

    rng = np.random.default_rng(seed)
    covered = 0
    for _ in range(replicates):
        arm = np.where(rng.permutation(np.arange(N) % 2) == 1, "T", "C")
        true = rng.normal(np.log(200), 0.6, N)
        b = np.exp(true + rng.normal(0, 0.3, N))
        f = np.exp(true + np.log(0.7) * (arm == "T") + rng.normal(0, 0.3, N))
        (e,) = geometric_mean_ratio(b, f, arm_coding(arm, ["C", "T"], "C"))
        _, lo, hi = e.exp()
        covered += lo < 0.7 < hi
    return covered / replicates


simulation(SimulationCase(
    "percent-change/gmr-coverage", "percent-change", "95% CI of the ratio of geometric means covers the "
    "simulated ratio 0.7 (log-normal, multiplicative effect)", "nominal 0.95", _gmr_coverage, "coverage", 0.95,
    quick_replicates=40))


def _rtm_coverage(replicates: int, seed: int) -> float:
    """Coverage of the regression-to-the-mean CI with mu and sigma from the truncated-normal MLE of the
    selected screening values and rho from 100 test-retest pairs (true: mu 140, sigma 18, rho 0.6,
    selection above the 70th percentile)."""
    import numpy as np
    from scipy import stats

    from ..stats.rtm import expected_rtm, fit_truncated_normal, icc_oneway, rtm_with_ci

    rng = np.random.default_rng(seed)
    mu, sigma, rho = 140.0, 18.0, 0.6
    cutoff = mu + sigma * stats.norm.ppf(0.7)
    truth = expected_rtm(mu, sigma, rho, cutoff, "above")
    hits = 0
    for rep in range(replicates):
        u = rng.uniform(stats.norm.cdf((cutoff - mu) / sigma), 1, N)
        screening = mu + sigma * stats.norm.ppf(u)
        pairs = np.sqrt(rho) * rng.standard_normal((100, 1)) + np.sqrt(1 - rho) * rng.standard_normal((100, 2))
        fit = fit_truncated_normal(screening, lower=cutoff)
        ci = rtm_with_ci(fit.mu, fit.sigma, icc_oneway(pairs).estimate, cutoff, "above", mu_se=fit.se_mu,
                         sigma_se=fit.se_sigma, mu_sigma_cov=fit.cov_mu_sigma, n_rho=100, n_draws=1000,
                         seed=seed + rep)
        hits += ci.lower <= truth <= ci.upper
    return hits / replicates


def _rtm_null_flag(replicates: int, seed: int) -> float:
    """Share of unselected simulated trials in which the regression-to-the-mean check flags anything
    (a verdict other than sound)."""
    import numpy as np

    from ..checks.regression_to_mean import run
    from ..checks.registry import CheckContext
    from .change_score_cases import outcome_data_for

    rng = np.random.default_rng(seed)
    ctx = CheckContext(seed=seed, blinded=False, quick=True)
    flagged = 0
    for _ in range(replicates):
        b, f, a = SCENARIOS[0].make(rng, N)
        flagged += run(outcome_data_for(b, f, a), ctx).verdict.value != "sound"
    return flagged / replicates


def _rtm_detect(replicates: int, seed: int) -> float:
    """Share of simulated trials truncated at baseline > 55 (no criterion declared) in which the check
    finds the selection (its selection sub-finding is a caution). The verdict itself is not the measure:
    in a randomised parallel trial it is sound when the sized shift is not material."""
    import numpy as np

    from ..checks.regression_to_mean import run
    from ..checks.registry import CheckContext
    from .change_score_cases import outcome_data_for

    truncated = next(s for s in SCENARIOS if s.target == "selection")
    rng = np.random.default_rng(seed)
    ctx = CheckContext(seed=seed, blinded=False, quick=True)
    flagged = 0
    for _ in range(replicates):
        b, f, a = truncated.make(rng, N)
        res = run(outcome_data_for(b, f, a), ctx)
        flagged += next(s for s in res.subfindings if s.id == "selection").verdict.value == "caution"
    return flagged / replicates


simulation(SimulationCase(
    "regression-to-mean/coverage", "regression-to-mean", "95% CI of the expected regression to the mean covers "
    "the truth (selection above the 70th percentile, estimated mu, sigma, rho)", "nominal 0.95", _rtm_coverage,
    "coverage", 0.95))
simulation(SimulationCase(
    "regression-to-mean/null", "regression-to-mean", "no selection: the check flags nothing",
    "<= 0.05 + 2 MCSE", _rtm_null_flag, "false-alarm", 0.05))
simulation(SimulationCase(
    "regression-to-mean/truncated", "regression-to-mean", "baseline truncated at 55 with no criterion declared: "
    "selection detected", ">= 0.80", _rtm_detect, "detection", 0.80))


def _later_risk_rate(name: str, key: str, n: int | None = None):
    def compute(replicates: int, seed: int) -> float:
        from .later_risk_cases import SCENARIOS as LR, rate, run_scenario as lr_run

        i, sc = next((i, s) for i, s in enumerate(LR) if s.name == name)
        return rate(lr_run(sc, replicates, n or sc.n or 300, seed, i), key)
    return compute


simulation(SimulationCase(
    "later-risk/null-linear", "later-risk", "monotone linear risk (N = 300): flagged as non-monotone",
    "<= 0.05 + 2 MCSE", _later_risk_rate("monotone-linear", "flagged"), "false-alarm", 0.05))
simulation(SimulationCase(
    "later-risk/null-threshold", "later-risk", "monotone threshold risk (N = 300): flagged as non-monotone",
    "<= 0.05 + 2 MCSE", _later_risk_rate("monotone-threshold", "flagged"), "false-alarm", 0.05))
simulation(SimulationCase(
    "later-risk/u-shape", "later-risk", "U-shaped risk (N = 900): flagged as non-monotone", ">= 0.80",
    _later_risk_rate("u-shaped-n900", "flagged"), "detection", 0.80, quick_replicates=10))
simulation(SimulationCase(
    "later-risk/undeclared-latest-risk", "later-risk", "risk linear in the latest value, no change- or "
    "ratio-based definition declared (N = 300): called unsupported", "<= 0.05 + 2 MCSE",
    _later_risk_rate("monotone-linear", "unsupported"), "false-alarm", 0.05))
simulation(SimulationCase(
    "later-risk/declared-change-fits", "later-risk", "risk linear in the change, change declared (N = 300): "
    "called unsupported", "<= 0.05 + 2 MCSE", _later_risk_rate("change-linear", "unsupported"), "false-alarm",
    0.05))
simulation(SimulationCase(
    "later-risk/declared-change-latest-risk", "later-risk", "risk linear in the latest value, change declared "
    "(N = 600): called unsupported", ">= 0.80", _later_risk_rate("linear-change-declared", "unsupported", 600),
    "detection", 0.80))
simulation(SimulationCase(
    "later-risk/declared-change-u-shape", "later-risk", "U-shaped risk, change declared (N = 900): called "
    "caution or unsupported", ">= 0.80", _later_risk_rate("u-shaped-n900-change-declared", "not_sound"),
    "detection", 0.80, quick_replicates=10))
simulation(SimulationCase(
    "later-risk/earlier-irrelevant", "later-risk", "earlier value irrelevant: its partial chi-square rejects "
    "at 5%", "<= 0.05 + 2 MCSE", _later_risk_rate("monotone-linear", "earlier"), "false-alarm", 0.05))


def _count_time(kind: str):
    from . import count_time_cases as ct

    if kind == "coverage":
        return ct.rate_ratio_coverage
    days = {"null": {"days_control": (8, 28), "days_active": (8, 28)}, "detect": {"days_active": (10, 20)}}[kind]
    return lambda replicates, seed: ct.unsupported_rate(replicates, seed, **days)


simulation(SimulationCase(
    "count-time/coverage", "count-time", "overdispersed counts, shorter diaries on the active arm, true rate "
    "ratio 0.75: the robust 95% CI of the rate ratio covers it", "nominal 0.95", _count_time("coverage"),
    "coverage", 0.95))
simulation(SimulationCase(
    "count-time/null", "count-time", "observation time unequal but balanced between arms: called unsupported",
    "<= 0.05 + 2 MCSE", _count_time("null"), "false-alarm", 0.05))
simulation(SimulationCase(
    "count-time/shorter-active", "count-time", "the active arm observed for fewer days: called unsupported",
    ">= 0.80", _count_time("detect"), "detection", 0.80))


def _percent_change_rate(scenario: str, n: int, *verdicts: str):
    def compute(replicates: int, seed: int) -> float:
        from .percent_change_cases import verdict_rates

        rates = verdict_rates(scenario, replicates, seed, n)
        return sum(rates[v] for v in verdicts)
    return compute


simulation(SimulationCase(
    "percent-change/null-multiplicative", "percent-change", "multiplicative effect, log-normal error (N = 200): "
    "percent change called unsupported", "<= 0.05 + 2 MCSE", _percent_change_rate("multiplicative", 200, "unsupported"),
    "false-alarm", 0.05))
simulation(SimulationCase(
    "percent-change/additive-costly", "percent-change", "additive effect, baseline varying fifteenfold (N = 200): "
    "percent change called unsupported", ">= 0.80", _percent_change_rate("additive", 200, "unsupported"),
    "detection", 0.80))
