"""Verdict calibration per outcome: every applicable check together on one simulated outcome.

An audit reads one outcome through all the checks that apply to it, so the error rate that matters
to a reviewer is the outcome's: the share of simulated trials in which *any* check calls the planned
analysis unsupported ("any unsupported"), and in which any check says caution or worse ("any
caution"). Each scenario builds one simulated outcome (:class:`auditor.study.OutcomeData`) and runs
it through :func:`auditor.pipeline.run_applicable_checks`, the loop an audit runs, in quick mode
(fewer resamples). The generators are the validation modules' own (one definition for the tests,
the self-check and this table).

Pass rules (targets are conventions of this tool, no source):

- a null (planned analysis supported by construction) passes when "any unsupported" is at most
  0.05 + 2 MCSE and "any caution" at most 0.15 + 2 MCSE (the multiplicity target of one outcome
  read through several checks), MCSE = sqrt(b (1 - b) / R) at the bound b with R replicates;
- a violation passes when the expected verdict or worse is reached in at least 0.80 - 2 MCSE of
  the trials at 400 per arm (at 100 per arm the rate is reported, not judged);
- the large-trial case (slope 0.97, r 0.8, 2,000 per arm) passes when it is never unsupported.

Beside each judged rate the exact one-sided binomial p-value of the self-check's pass rule
(:func:`auditor.validation.cases.binomial_pass_rule`) is printed; a row judged by the 2-MCSE rule
also fails when that test rejects its target at alpha 0.001.

    python benchmarks/calibration.py --outcomes [--reps 200] [--n 100 400]
"""

from __future__ import annotations

import math
import time
import zlib
from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from ..checks.registry import CheckContext
from ..results import Verdict
from .cases import PASS_ALPHA, binomial_pass_rule

NULL_UNSUPPORTED = 0.05
"""Bound of "any unsupported" under a null (a convention of this tool, no source)."""
NULL_CAUTION = 0.15
"""Bound of "any caution" under a null: the multiplicity target of one outcome read through every
check that applies (a convention of this tool, no source)."""
MIN_DETECTION = 0.80
"""Least share of trials at 400 per arm given the expected verdict or worse under a violation."""
JUDGED_SIZE = 400
"""Participants per arm at which detection is judged."""
QUICK_REPLICATES = 2
FULL_REPLICATES = 200
LARGE_QUICK_REPLICATES = 1
LARGE_FULL_REPLICATES = 40

_RANK = {Verdict.UNSUPPORTED: 2, Verdict.CAUTION: 1}


@dataclass(frozen=True)
class OutcomeScenario:
    id: str
    truth: str
    """``null``, ``violation`` or ``large-trial`` (a null judged only on "never unsupported")."""
    expected: str
    """The verdict a violation should reach (``caution`` or ``unsupported``); ``sound`` for a null."""
    description: str
    make: Callable[[np.random.Generator, int], object]
    """(rng, participants per arm) -> one simulated :class:`auditor.study.OutcomeData`."""
    sizes: tuple[int, ...] = (100, 400)
    about: str = "change-score"
    """The check whose rule the scenario exists to test (it must be among the checks that run)."""


# ----------------------------------------------------------------------------- scenario builders


def _two_arm(b, f, a, spec, extra: dict | None = None):
    from ..study import OutcomeData

    frame = pd.DataFrame({"subject": [f"S{i:05d}" for i in range(len(b))],
                          "arm": np.where(np.asarray(a) == 1, "Active", "Control"),
                          "baseline": b, "followup": f, "fu:F": f, **(extra or {})})
    return OutcomeData(spec=spec, frame=frame, arms=["Control", "Active"], control_arm="Control",
                       design="parallel", derived_columns=[])


def _bivariate(slope: float, r: float, planned: str = "change"):
    """Bivariate normal (change_score_cases.bivariate): true change/ANCOVA cost
    1 + (slope - 1)^2 r^2 / (slope^2 (1 - r^2)) (Frison and Pocock 1992)."""
    def make(rng, n):
        from .change_score_cases import bivariate, outcome_data_for

        b, f, a = bivariate(slope, r)(rng, 2 * n)
        return outcome_data_for(b, f, a, planned=planned)
    return make


def _verdict_scenario(key: str):
    """A change-score verdict scenario (floor, ordinal) at the requested size."""
    def make(rng, n):
        from .change_score_cases import VERDICT_SCENARIOS, outcome_data_for

        sc = VERDICT_SCENARIOS[key]
        b, f, a = sc.make(rng, 2 * n)
        return outcome_data_for(b, f, a, sc.bounds, sc.planned, "ordinal" if sc.levels else "continuous",
                                sc.levels)
    return make


def _lognormal(rng, n):
    """Log-normal outcome, effect multiplicative (log-additive), percent change planned."""
    from .percent_change_cases import outcome_data_for, simulate

    b, f, arm = simulate(rng, "multiplicative", 2 * n)
    return outcome_data_for(b, f, arm, "multiplicative")


def _rtm(selected: bool):
    """Screening, baseline and follow-up readings of a true level with reliability 0.6, a treatment
    effect of -2 on the active arm, ANCOVA planned (so that no other check has a reason to object).
    Selected: entry at baseline >= its 70th percentile and within-arm change reported as the effect
    (``effect_basis = "within-arm-change"``), which regression to the mean biases in any design, so
    unsupported is the right answer (expected shift -0.46 SD, Barnett et al. 2005). Not selected:
    the same trial without an entry criterion, between-arm effect
    (:func:`auditor.validation.rtm_cases.entry_trial`)."""
    def make(rng, n):
        from .rtm_cases import entry_trial

        return entry_trial(rng, 2 * n, selected, "follow-up-adjusted")
    return make


def _risk(name: str):
    """A later-risk scenario (later_risk_cases.SCENARIOS): earlier reading as baseline, latest as
    follow-up, no treatment effect on the values, ANCOVA planned for the values themselves, the event
    as the risk endpoint with the scenario's declared ``risk_definition`` (None: nothing declared)."""
    def make(rng, n):
        from ..metadata import OutcomeSpec
        from .later_risk_cases import SCENARIOS, simulate

        sc = next(s for s in SCENARIOS if s.name == name)
        y, latest, earlier = simulate(sc, 2 * n, rng)
        a = rng.permutation(np.arange(2 * n) % 2)
        spec = OutcomeSpec(param="SIM", scale="continuous", baseline_visit="B", followup_visits=["F"],
                           planned_analysis="follow-up-adjusted", risk_endpoint="EVENT",
                           risk_definition=sc.declared)
        return _two_arm(earlier, latest, a, spec, {"event": y})
    return make


SCENARIOS = [
    OutcomeScenario("null/change-r08", "null", "sound", "change planned, slope 1, r 0.8", _bivariate(1.0, 0.8)),
    OutcomeScenario("null/change-r045", "null", "sound", "change planned, slope 1, r 0.45 (follow-up more "
                    "variable than baseline: change as efficient as ANCOVA)", _bivariate(1.0, 0.45)),
    OutcomeScenario("null/ancova-slope05", "null", "sound", "ANCOVA (follow-up-adjusted) planned, slope 0.5, r 0.5",
                    _bivariate(0.5, 0.5, "follow-up-adjusted")),
    OutcomeScenario("null/lognormal-percent", "null", "sound", "log-normal outcome, log-additive effect, percent "
                    "change planned", _lognormal, about="percent-change"),
    OutcomeScenario("null/no-selection", "null", "sound", "screening, baseline and follow-up, reliability 0.6, no "
                    "entry criterion, ANCOVA planned", _rtm(False),
                    about="regression-to-mean"),
    OutcomeScenario("null/risk-latest-undeclared", "null", "sound", "event risk linear in the latest value only, "
                    "no risk_definition declared, ANCOVA planned", _risk("monotone-linear"), about="later-risk"),
    OutcomeScenario("violation/change-slope05", "violation", "unsupported", "change planned, slope 0.5, r 0.5 "
                    "(true cost 33% more participants)", _bivariate(0.5, 0.5)),
    OutcomeScenario("violation/floor40", "violation", "caution", "change planned, about 40% of values at a floor "
                    "of 0", _verdict_scenario("floor40")),
    OutcomeScenario("violation/ordinal04", "violation", "caution", "change planned on a declared 0-4 ordinal score",
                    _verdict_scenario("ordinal04")),
    OutcomeScenario("violation/entry-p70-within-arm", "violation", "unsupported", "entry at baseline >= 70th "
                    "percentile, reliability 0.6, within-arm change reported (parallel trial, "
                    "effect_basis within-arm-change), ANCOVA planned", _rtm(True), about="regression-to-mean"),
    OutcomeScenario("violation/risk-u-shape", "violation", "caution", "U-shaped event risk in the latest value, "
                    "nothing declared (caution at most by the verdict rules)", _risk("u-shaped"), about="later-risk"),
    OutcomeScenario("violation/risk-latest-change-declared", "violation", "unsupported", "event risk linear in the "
                    "latest value, risk_definition = change declared", _risk("linear-change-declared"),
                    about="later-risk"),
    OutcomeScenario("large-trial/slope097", "large-trial", "sound", "change planned, slope 0.97, r 0.8 (true cost "
                    "0.2%): sound or caution, never unsupported", _bivariate(0.97, 0.8), sizes=(2000,)),
]


# ----------------------------------------------------------------------------- running and judging


def outcome_verdicts(data, ctx: CheckContext) -> dict[str, str]:
    """Each applicable check's verdict on one simulated outcome, through the audit's own loop."""
    from ..pipeline import outcome_screen, run_applicable_checks

    results = run_applicable_checks(data.spec, data.design, data, outcome_screen(data, ctx), ctx, draw=False)
    return {r.check_id: r.verdict.value for r in results}


def worst(verdicts: dict[str, str]) -> int:
    """0 (nothing flagged), 1 (some check says caution, none unsupported) or 2 (some unsupported)."""
    return max((_RANK.get(Verdict(v), 0) for v in verdicts.values()), default=0)


@dataclass(frozen=True)
class CalibrationRow:
    """One (scenario, size) row of the per-outcome table."""

    id: str
    truth: str
    expected: str
    description: str
    n_per_arm: int
    replicates: int
    seed: int
    any_unsupported: float
    any_caution: float
    """Share of trials in which some check said caution or worse."""
    flagged_by: dict
    """check id -> share of trials that check said caution or worse (which check drives a rate)."""
    judged: str
    """The pass rule applied to this row, in words ("" when the row is reported, not judged)."""
    passed: bool
    detail: str
    seconds: float

    @property
    def detection(self) -> float:
        return self.any_unsupported if self.expected == "unsupported" else self.any_caution


def mcse(p: float, reps: int) -> float:
    """Monte Carlo standard error sqrt(p (1 - p) / R) of a share estimated from R replicates."""
    return math.sqrt(p * (1 - p) / reps)


def row_seed(base: int, row_id: str) -> int:
    """Base seed plus a number fixed by the row's id (CRC-32 modulo 10^6), as for the simulation cases."""
    return base + zlib.crc32(row_id.encode("utf-8")) % 1_000_000


def _upper_rule(rate: float, bound: float, reps: int, what: str) -> tuple[bool, str]:
    k = int(round(rate * reps))
    limit = bound + 2 * mcse(bound, reps)
    exact = binomial_pass_rule("false-alarm", bound, k, reps)
    ok = rate <= limit and exact.passed
    return ok, f"{what} {rate:.3f} <= {limit:.3f} ({bound:g} + 2 MCSE); exact one-sided p = {exact.p_value:.3g}"


def judge(sc: OutcomeScenario, n: int, reps: int, any_uns: float, any_cau: float) -> tuple[str, bool, str]:
    """The pass rule of one row, whether it holds, and the numbers behind it."""
    if sc.truth == "null":
        ok1, d1 = _upper_rule(any_uns, NULL_UNSUPPORTED, reps, "any unsupported")
        ok2, d2 = _upper_rule(any_cau, NULL_CAUTION, reps, "any caution")
        return (f"any unsupported <= {NULL_UNSUPPORTED:g} + 2 MCSE and any caution <= {NULL_CAUTION:g} + 2 MCSE",
                ok1 and ok2, f"{d1}; {d2}")
    if sc.truth == "large-trial":
        k = int(round(any_uns * reps))
        return "never unsupported", k == 0, f"unsupported in {k} of {reps}"
    rate = any_uns if sc.expected == "unsupported" else any_cau
    if n < JUDGED_SIZE:
        return "", True, f"{sc.expected} or worse in {rate:.3f} (reported, judged at {JUDGED_SIZE} per arm)"
    limit = MIN_DETECTION - 2 * mcse(MIN_DETECTION, reps)
    exact = binomial_pass_rule("detection", MIN_DETECTION, int(round(rate * reps)), reps)
    return (f"{sc.expected} or worse >= {MIN_DETECTION:g} - 2 MCSE", rate >= limit and exact.passed,
            f"{sc.expected} or worse {rate:.3f} >= {limit:.3f}; exact one-sided p = {exact.p_value:.3g}")


def run_row(sc: OutcomeScenario, n: int, reps: int, seed: int) -> CalibrationRow:
    """Simulate ``reps`` trials of ``sc`` at ``n`` per arm and judge the row."""
    rid = f"calibration/{sc.id}/n{n}"
    s = row_seed(seed, rid)
    rng = np.random.default_rng(s)
    t0 = time.perf_counter()
    uns = cau = 0
    by: dict[str, int] = {}
    for rep in range(reps):
        verdicts = outcome_verdicts(sc.make(rng, n), CheckContext(seed=s + rep, blinded=False, quick=True))
        w = worst(verdicts)
        uns += w == 2
        cau += w >= 1
        for cid, v in verdicts.items():
            by[cid] = by.get(cid, 0) + (_RANK.get(Verdict(v), 0) >= 1)
    any_uns, any_cau = uns / reps, cau / reps
    judged, ok, detail = judge(sc, n, reps, any_uns, any_cau)
    return CalibrationRow(rid, sc.truth, sc.expected, sc.description, n, reps, s, any_uns, any_cau,
                          {k: round(v / reps, 4) for k, v in sorted(by.items())}, judged, ok,
                          f"{reps} replicates, seed {s}; {detail}", round(time.perf_counter() - t0, 1))


def row_ids() -> list[str]:
    return [f"calibration/{sc.id}/n{n}" for sc in SCENARIOS for n in sc.sizes]


def row_plan(full: bool, only: str = "", reps: int | None = None,
             sizes: tuple[int, ...] | None = None) -> list[tuple[str, int, int]]:
    """The rows to run as (scenario id, participants per arm, replicates), in table order
    (``sizes`` replaces 100 and 400 for all but the large trial).

    Quick: :data:`QUICK_REPLICATES` per row (1 for the large trial); full: :data:`FULL_REPLICATES`
    (:data:`LARGE_FULL_REPLICATES` for the 2,000-per-arm case, whose replicates each take seconds);
    ``reps`` overrides both."""
    plan = []
    for sc in SCENARIOS:
        large = sc.truth == "large-trial"
        for n in sc.sizes if (large or sizes is None) else sizes:
            if only and not f"calibration/{sc.id}/n{n}".startswith(only):
                continue
            plan.append((sc.id, n, reps or ((LARGE_FULL_REPLICATES if full else LARGE_QUICK_REPLICATES) if large
                                            else (FULL_REPLICATES if full else QUICK_REPLICATES))))
    return plan


def scenario(scenario_id: str) -> OutcomeScenario:
    return next(sc for sc in SCENARIOS if sc.id == scenario_id)


def calibrate(full: bool, seed: int = 20261201, only: str = "", reps: int | None = None,
              sizes: tuple[int, ...] | None = None, progress=None) -> list[CalibrationRow]:
    """Every row of :func:`row_plan`, run one after another."""
    rows = []
    for sc_id, n, r in row_plan(full, only, reps, sizes):
        rows.append(run_row(scenario(sc_id), n, r, seed))
        if progress:
            progress(rows[-1].id)
    return rows


def markdown_table(rows: list[CalibrationRow]) -> str:
    """The per-outcome table as Markdown (docs/validation.md)."""
    out = ["| scenario | truth (expected) | n per arm | reps | any unsupported (MCSE) | any caution (MCSE) | "
           "flagged by | rule | result |", "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for r in rows:
        by = ", ".join(f"{k} {v:.2f}" for k, v in r.flagged_by.items() if v > 0) or "none"
        out.append(f"| {r.id.split('/', 1)[1].rsplit('/', 1)[0]} | {r.truth} ({r.expected}) | {r.n_per_arm} | "
                   f"{r.replicates} | {r.any_unsupported:.3f} ({mcse(r.any_unsupported, r.replicates):.3f}) | "
                   f"{r.any_caution:.3f} ({mcse(r.any_caution, r.replicates):.3f}) | {by} | "
                   f"{r.judged or 'reported'} | {'pass' if r.passed else 'FAIL'} |")
    return "\n".join(out)


PASS_NOTE = (f"Per outcome, every applicable check together. Null: any unsupported <= {NULL_UNSUPPORTED:g} + "
             f"2 MCSE and any caution (caution or worse) <= {NULL_CAUTION:g} + 2 MCSE; violation at "
             f"{JUDGED_SIZE} per arm: the expected verdict or worse in >= {MIN_DETECTION:g} - 2 MCSE; MCSE = "
             f"sqrt(b (1 - b) / R) at the bound b; a row also fails when the exact one-sided binomial test "
             f"rejects its bound at alpha {PASS_ALPHA:g}. The 2,000-per-arm case must never be unsupported.")


def main(argv=None) -> None:
    """Print the per-outcome table (the rows ``auditor selfcheck`` reports, same seeds)."""
    import argparse

    ap = argparse.ArgumentParser(description="Verdict calibration per outcome, every applicable check together.")
    ap.add_argument("--full", action="store_true", help=f"{FULL_REPLICATES} replicates per row "
                    f"({LARGE_FULL_REPLICATES} at 2,000 per arm); default: quick")
    ap.add_argument("--reps", type=int, default=None, help="replicates per row (overrides --full)")
    ap.add_argument("--seed", type=int, default=20261201)
    ap.add_argument("--only", default="", help="rows whose id starts with this (calibration/null/...)")
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    rows = calibrate(args.full, args.seed, args.only, reps=args.reps,
                     progress=lambda rid: print(f"  done: {rid}", flush=True))
    print()
    print(markdown_table(rows))
    print(f"\n{PASS_NOTE}\nBase seed {args.seed}, quick mode of each check (fewer resamples), "
          f"{time.perf_counter() - t0:.0f} s in all.")
