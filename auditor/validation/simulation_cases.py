"""Simulation cases: each check's false-alarm rate under null scenarios and detection rate under
the violations it exists to find (N = 200 per simulated trial)."""

from __future__ import annotations

from .cases import SimulationCase, simulation
from .change_score_cases import SCENARIOS, SUBFINDINGS, run_scenario

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
                "<= 0.05 + 2 MCSE", _rate(_sc, _sub), "false-alarm", 0.05))
    else:
        simulation(SimulationCase(
            f"change-score/{_sc.target}", "change-score", f"{_sc.name}: {_sc.target} flagged ({_sc.description})",
            ">= 0.80", _rate(_sc, _sc.target), "detection", 0.80))


def _gmr_coverage(replicates: int, seed: int) -> float:
    """Share of simulated multiplicative trials whose ratio-of-geometric-means CI covers the truth (0.7)."""
    import numpy as np

    from ..stats.linear import arm_indicators
    from ..stats.relative_change import geometric_mean_ratio

    rng = np.random.default_rng(seed)
    covered = 0
    for _ in range(replicates):
        arm = np.where(rng.permutation(np.arange(N) % 2) == 1, "T", "C")
        true = rng.normal(np.log(200), 0.6, N)
        b = np.exp(true + rng.normal(0, 0.3, N))
        f = np.exp(true + np.log(0.7) * (arm == "T") + rng.normal(0, 0.3, N))
        (e,) = geometric_mean_ratio(b, f, arm_indicators(arm, ["C", "T"], "C"))
        _, lo, hi = e.exp()
        covered += lo < 0.7 < hi
    return covered / replicates


simulation(SimulationCase(
    "percent-change/gmr-coverage", "percent-change", "95% CI of the ratio of geometric means covers the "
    "simulated ratio 0.7 (log-normal, multiplicative effect)", ">= 0.90", _gmr_coverage, "coverage", 0.90,
    quick_replicates=40))
