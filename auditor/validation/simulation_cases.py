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
