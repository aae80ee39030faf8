"""Validation cases: the one source of truth for the tests and ``auditor selfcheck``.

A *reference case* compares one computed number with a value from outside the project (a published
worked example, a handbook value, or a general-purpose reference library) within a stated tolerance.
A *simulation case* runs a check on simulated data with known truth and compares a rate (false alarms
under a null scenario, detections under a violation) with its target. Modules register cases with
:func:`reference` and :func:`simulation`; tests parametrise over :func:`reference_cases` and run the
simulation cases in quick mode.
"""

from __future__ import annotations

import importlib
import math
from dataclasses import dataclass
from importlib import resources
from typing import Callable

import pandas as pd


@dataclass(frozen=True)
class ReferenceCase:
    id: str
    method: str
    description: str
    source: str
    expected: float
    tolerance: float
    compute: Callable[[], float]
    relative: bool = False


@dataclass(frozen=True)
class SimulationCase:
    id: str
    method: str
    description: str
    target: str
    """The target in words (``<= 0.05``, ``>= 0.80``, ``nominal 0.95``); the pass rule that judges the
    observed rate against :attr:`bound` is :func:`binomial_pass_rule`, the same for every case."""
    compute: Callable[[int, int], float]
    """(replicates, seed) -> observed rate."""
    kind: str
    """``false-alarm`` (bound: the nominal false-alarm rate), ``detection`` (bound: the stated minimum
    power) or ``coverage`` (bound: the nominal coverage of the interval)."""
    bound: float
    quick_replicates: int = 20
    full_replicates: int = 200


@dataclass(frozen=True)
class CaseOutcome:
    id: str
    method: str
    description: str
    source: str
    expected: str
    obtained: str
    tolerance: str
    passed: bool
    detail: str = ""


_REFERENCE: dict[str, ReferenceCase] = {}
_SIMULATION: dict[str, SimulationCase] = {}
CASE_MODULES = ("auditor.validation.reference_cases", "auditor.validation.simulation_cases",
                "auditor.validation.summary_cases")


def reference(case: ReferenceCase) -> ReferenceCase:
    if case.id in _REFERENCE:
        raise ValueError(f"reference case '{case.id}' registered twice")
    _REFERENCE[case.id] = case
    return case


def simulation(case: SimulationCase) -> SimulationCase:
    if case.id in _SIMULATION:
        raise ValueError(f"simulation case '{case.id}' registered twice")
    _SIMULATION[case.id] = case
    return case


def _load() -> None:
    for name in CASE_MODULES:
        importlib.import_module(name)


def reference_cases() -> list[ReferenceCase]:
    _load()
    return [_REFERENCE[k] for k in sorted(_REFERENCE)]


def simulation_cases() -> list[SimulationCase]:
    _load()
    return [_SIMULATION[k] for k in sorted(_SIMULATION)]


def dataset(name: str) -> pd.DataFrame:
    """A small published dataset shipped with the package (copied from the R package MASS)."""
    path = resources.files("auditor.validation") / "data" / f"{name}.csv"
    with resources.as_file(path) as p:
        return pd.read_csv(p)


def run_reference(case: ReferenceCase) -> CaseOutcome:
    try:
        got = float(case.compute())
        err = abs(got - case.expected) / (abs(case.expected) if case.relative else 1.0)
        ok = math.isfinite(got) and err <= case.tolerance
        detail = f"difference {err:.3g}{' (relative)' if case.relative else ''}"
        obtained = f"{got:.10g}"
    except Exception as exc:  # a failing case is a result, never a crash of the self-check
        ok, obtained, detail = False, "error", f"{type(exc).__name__}: {exc}"
    return CaseOutcome(case.id, case.method, case.description, case.source, f"{case.expected:.10g}", obtained,
                       f"{case.tolerance:g}{' relative' if case.relative else ''}", ok, detail)


def case_seed(base: int, case_id: str) -> int:
    """The seed of one simulation case: the base seed plus a number fixed by the case's id (CRC-32
    modulo 10^6), so adding or removing a case never changes the seeds of the others."""
    import zlib

    return base + zlib.crc32(case_id.encode("utf-8")) % 1_000_000


PASS_ALPHA = 0.001
"""Error rate of the simulation pass rule: a case whose true rate meets its target fails with
probability at most 0.001 (a convention of this tool, no source), so a run of 36 simulation cases
fails by chance alone with probability at most 1 - 0.999^36 = 3.5%."""

PASS_RULE = (f"A simulation case passes unless a one-sided exact binomial test rejects its target at alpha "
             f"{PASS_ALPHA:g}: a false-alarm case fails when P(X >= k) < {PASS_ALPHA:g} under its nominal rate, "
             f"a detection case when P(X <= k) < {PASS_ALPHA:g} under its stated minimum power, a coverage case "
             f"when P(X <= k) < {PASS_ALPHA:g} under its nominal coverage (X binomial with the case's replicates "
             f"n; k the replicates flagged or covered). A case that meets its target fails with probability at "
             f"most {PASS_ALPHA:g}.")
"""The pass rule in words, printed in the self-check report."""


@dataclass(frozen=True)
class BinomialRule:
    """The outcome of :func:`binomial_pass_rule` for one case."""

    passed: bool
    p_value: float
    target: str


def binomial_pass_rule(kind: str, bound: float, k: int, n: int, alpha: float = PASS_ALPHA) -> BinomialRule:
    """Judge ``k`` events in ``n`` replicates against a case's target by a one-sided exact binomial test.

    False alarms (``bound`` the nominal rate a): H0 p <= a, p-value P(X >= k | n, a). Detections
    (``bound`` the minimum power b) and coverage (``bound`` the nominal coverage c): H0 p >= b, p-value
    P(X <= k | n, b). The case fails when the p-value is below ``alpha``; the tail probabilities are
    exact (scipy.stats.binom), so a case whose true rate meets its target fails with probability at
    most ``alpha`` whatever the number of replicates.
    """
    from scipy.stats import binom

    if kind == "false-alarm":
        p = float(binom.sf(k - 1, n, bound))
        target = f"rate <= {bound:g}: fails if P(X >= k) < {alpha:g} (exact binomial, one-sided)"
    else:
        p = float(binom.cdf(k, n, bound))
        what = "coverage" if kind == "coverage" else "power"
        target = f"{what} >= {bound:g}: fails if P(X <= k) < {alpha:g} (exact binomial, one-sided)"
    return BinomialRule(p >= alpha, min(p, 1.0), target)


def run_simulation(case: SimulationCase, full: bool, seed: int) -> CaseOutcome:
    """Run one simulation case (quick: its quick replicates; full: its full replicates) and judge the
    observed rate by :func:`binomial_pass_rule`; an error is a failed case, never a crash."""
    reps = case.full_replicates if full else case.quick_replicates
    try:
        rate = float(case.compute(reps, seed))
        k = int(round(rate * reps))
        rule = binomial_pass_rule(case.kind, case.bound, k, reps)
        ok, target = rule.passed, rule.target
        obtained = f"{rate:.3f}"
        detail = f"{k} of {reps} replicates, seed {seed}; one-sided exact p = {rule.p_value:.3g}"
    except Exception as exc:
        ok, obtained, target, detail = False, "error", case.target, f"{type(exc).__name__}: {exc}"
    return CaseOutcome(case.id, case.method, case.description, "simulation with known truth", target, obtained,
                       f"alpha {PASS_ALPHA:g}", ok, detail)
