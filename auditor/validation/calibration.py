"""Calibration of the verdicts: every check under a null and a violation, at two trial sizes.

For each check one scenario where the planned analysis is supported by construction (the null) and
one where it is not (the violation), each simulated at ``n`` participants per arm; the table gives
the share of simulated trials given each verdict, with the Monte Carlo standard error
sqrt(p (1 - p) / R) of the unsupported and of the flagged (caution or unsupported) shares. Under a
null, "unsupported" is a false alarm; under a violation it is a detection. The scenario generators are
the validation modules' own (one definition for tests, self-check and this table).

    python -m auditor.validation.calibration [--reps 100] [--n 100 400] [--seed 20261201]
"""

from __future__ import annotations

import argparse
import math
import time
from dataclasses import dataclass
from typing import Callable

import numpy as np

from ..checks.registry import CheckContext
from ..results import Verdict


@dataclass(frozen=True)
class CalibrationScenario:
    check: str
    name: str
    truth: str
    """``null`` (the planned analysis is supported by construction) or ``violation``."""
    description: str
    run: Callable[[np.random.Generator, int, CheckContext], Verdict]
    """(rng, participants per arm, context) -> the check's verdict on one simulated trial."""


def _ctx(seed: int) -> CheckContext:
    return CheckContext(seed=seed, blinded=False, quick=True)


# ----------------------------------------------------------------------------- scenario runners


def _change_score(slope: float, r: float):
    def run(rng, n, ctx):
        from ..checks.change_score import run as check
        from .change_score_cases import bivariate, outcome_data_for

        b, f, a = bivariate(slope, r)(rng, 2 * n)
        return check(outcome_data_for(b, f, a), ctx).verdict
    return run


def _prepost(rng, n, ctx):
    from ..checks.prepost import run as check
    from .change_score_cases import bivariate, outcome_data_for

    b, f, a = bivariate(1.0, 0.8)(rng, 2 * n)
    return check(outcome_data_for(b, f, a, planned="follow-up-adjusted"), ctx).verdict


def _rtm(selected: bool):
    """No selection (null), or entry at baseline >= its 70th percentile with reliability 0.6 in a
    trial that reports within-arm change as the effect (violation: expected shift -0.46 SD, Barnett
    et al. 2005); :func:`auditor.validation.rtm_cases.entry_trial`, change planned."""
    def run(rng, n, ctx):
        from ..checks.regression_to_mean import run as check
        from .rtm_cases import entry_trial

        return check(entry_trial(rng, 2 * n, selected, "change"), ctx).verdict
    return run


def _percent_change(scenario: str):
    def run(rng, n, ctx):
        from ..checks.percent_change import run as check
        from .percent_change_cases import outcome_data_for, simulate

        b, f, arm = simulate(rng, scenario, 2 * n)
        return check(outcome_data_for(b, f, arm, scenario), ctx).verdict
    return run


def _count_time(**days):
    def run(rng, n, ctx):
        from ..checks.count_time import run as check
        from .count_time_cases import outcome_data_for, simulate

        return check(outcome_data_for(simulate(rng, n=2 * n, **days)), ctx).verdict
    return run


def _later_risk(name: str):
    def run(rng, n, ctx):
        from ..checks.later_risk import analyse, overall_verdict
        from ..checks.registry import NotAssessable
        from .later_risk_cases import SCENARIOS, simulate

        sc = next(s for s in SCENARIOS if s.name == name)
        y, latest, earlier = simulate(sc, 2 * n, rng)
        try:
            an = analyse(y, latest, earlier, resamples=0, seed=int(rng.integers(2**31)), definition=sc.declared)
        except NotAssessable:
            return Verdict.NOT_ASSESSABLE
        return overall_verdict(an)
    return run


SCENARIOS = [
    CalibrationScenario("pre-post", "descriptive", "null", "bivariate normal, slope 1, r 0.8", _prepost),
    CalibrationScenario("change-score", "slope 1, r 0.8", "null", "change planned; change as efficient as ANCOVA",
                        _change_score(1.0, 0.8)),
    CalibrationScenario("change-score", "slope 0.5, r 0.5", "violation", "change planned; true cost 33% more "
                        "participants", _change_score(0.5, 0.5)),
    CalibrationScenario("regression-to-mean", "no selection", "null", "no entry criterion, unselected baseline",
                        _rtm(False)),
    CalibrationScenario("regression-to-mean", "within-arm effect, 70th percentile", "violation",
                        "entry at baseline >= 70th percentile, reliability 0.6, within-arm change reported "
                        "(expected shift -0.46 SD)", _rtm(True)),
    CalibrationScenario("percent-change", "multiplicative", "null", "multiplicative effect, log-normal error",
                        _percent_change("multiplicative")),
    CalibrationScenario("percent-change", "additive", "violation", "additive effect, baseline varying fifteenfold",
                        _percent_change("additive")),
    CalibrationScenario("count-time", "balanced times", "null", "unequal observation time balanced between arms",
                        _count_time(days_control=(8, 28), days_active=(8, 28))),
    CalibrationScenario("count-time", "shorter active diaries", "violation", "active arm observed 10-20 days, "
                        "control 16-28 (true shift 0.68)", _count_time(days_active=(10, 20))),
    CalibrationScenario("later-risk", "change fits", "null", "risk linear in the change; change declared",
                        _later_risk("change-linear")),
    CalibrationScenario("later-risk", "latest value carries the risk", "violation", "risk linear in the latest "
                        "value; change declared", _later_risk("linear-change-declared")),
]


# ----------------------------------------------------------------------------- the table


@dataclass(frozen=True)
class Row:
    scenario: CalibrationScenario
    n_per_arm: int
    replicates: int
    shares: dict[str, float]
    seconds: float

    def mcse(self, p: float) -> float:
        return math.sqrt(p * (1 - p) / self.replicates)

    @property
    def unsupported(self) -> float:
        return self.shares[Verdict.UNSUPPORTED.value]

    @property
    def flagged(self) -> float:
        return self.shares[Verdict.CAUTION.value] + self.unsupported


def calibrate(replicates: int, sizes=(100, 400), seed: int = 20261201, only: str = "", progress=None) -> list[Row]:
    """Run every scenario at every size; each (scenario, size) has its own seed, fixed by its place."""
    rows = []
    for i, sc in enumerate(SCENARIOS):
        if only and not sc.check.startswith(only):
            continue
        for n in sizes:
            rng = np.random.default_rng([seed, i, n])
            counts = {v.value: 0 for v in Verdict}
            t0 = time.perf_counter()
            for rep in range(replicates):
                counts[sc.run(rng, n, _ctx(seed + rep)).value] += 1
            rows.append(Row(sc, n, replicates, {k: v / replicates for k, v in counts.items()},
                            time.perf_counter() - t0))
            if progress:
                progress(rows[-1])
    return rows


def table(rows: list[Row]) -> str:
    """The calibration table in Markdown."""
    head = ("| check | scenario | truth | n per arm | reps | sound | caution | unsupported (MCSE) | "
            "caution or unsupported (MCSE) | not assessable | for information |")
    lines = [head, "|" + " --- |" * 11]
    for r in rows:
        s = r.shares
        lines.append(f"| {r.scenario.check} | {r.scenario.name} | {r.scenario.truth} | {r.n_per_arm} | {r.replicates} "
                     f"| {s['sound']:.3f} | {s['caution']:.3f} | {r.unsupported:.3f} ({r.mcse(r.unsupported):.3f}) "
                     f"| {r.flagged:.3f} ({r.mcse(r.flagged):.3f}) | {s['not assessable']:.3f} "
                     f"| {s['for information']:.3f} |")
    return "\n".join(lines)


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description="Verdict calibration of every check under nulls and violations.")
    ap.add_argument("--reps", type=int, default=100)
    ap.add_argument("--n", type=int, nargs="+", default=[100, 400], help="participants per arm")
    ap.add_argument("--seed", type=int, default=20261201)
    ap.add_argument("--only", default="", help="run only the checks whose id starts with this")
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    rows = calibrate(args.reps, tuple(args.n), args.seed, args.only,
                     progress=lambda r: print(f"  {r.scenario.check} / {r.scenario.name} / {r.n_per_arm} per arm: "
                                              f"{r.seconds:.0f} s", flush=True))
    print()
    print(table(rows))
    print(f"\n{args.reps} replicates per row, base seed {args.seed}, quick mode (fewer resamples), "
          f"{time.perf_counter() - t0:.0f} s in all.")


if __name__ == "__main__":
    main()
