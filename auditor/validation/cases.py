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
    """``<= 0.05 + 2 MCSE`` (a null scenario) or ``>= 0.80`` (a violation), in words."""
    compute: Callable[[int, int], float]
    """(replicates, seed) -> observed rate."""
    kind: str
    """``false-alarm`` or ``detection`` (or ``coverage``)."""
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
CASE_MODULES = ("auditor.validation.reference_cases", "auditor.validation.simulation_cases")


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


def run_simulation(case: SimulationCase, full: bool, seed: int) -> CaseOutcome:
    reps = case.full_replicates if full else case.quick_replicates
    try:
        rate = float(case.compute(reps, seed))
        mcse = math.sqrt(max(rate * (1 - rate), 0.05 * 0.95) / reps)
        if case.kind == "false-alarm":
            limit = case.bound + 2 * math.sqrt(case.bound * (1 - case.bound) / reps)
            ok = rate <= limit
            target = f"<= {limit:.3f} ({case.bound:g} + 2 MCSE)"
        elif full:
            ok = rate >= case.bound
            target = f">= {case.bound:g}"
        else:  # quick mode is a smoke test: a few replicates get the same 2-MCSE allowance as a null
            limit = case.bound - 2 * math.sqrt(case.bound * (1 - case.bound) / reps)
            ok = rate >= limit
            target = f">= {limit:.3f} ({case.bound:g} - 2 MCSE, quick mode)"
        obtained, detail = f"{rate:.3f}", f"{reps} replicates, seed {seed}, MCSE {mcse:.3f}"
    except Exception as exc:
        ok, obtained, target, detail = False, "error", case.target, f"{type(exc).__name__}: {exc}"
    return CaseOutcome(case.id, case.method, case.description, "simulation with known truth", target, obtained,
                       "-", ok, detail)
