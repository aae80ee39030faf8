"""``auditor selfcheck``: run the validation cases on the installed tool and report them.

The report (HTML, PDF, JSON) lists every case with its source, the expected value, the value
obtained, the tolerance and pass or fail, plus the environment and the date: evidence a
biostatistics core can file under its computerised-system validation SOP. Its last section is the
verdict calibration per outcome (:mod:`auditor.validation.outcome_calibration`): every applicable
check together on simulated outcomes under nulls and violations, with Monte Carlo SEs.
"""

from __future__ import annotations

import datetime as dt
import json
import platform
from dataclasses import asdict, dataclass, field

from . import __version__
from .pipeline import library_versions
from .validation import outcome_calibration
from .validation.cases import (PASS_ALPHA, PASS_RULE, CaseOutcome, case_seed, reference_cases, run_reference,
                               run_simulation, simulation_cases)


@dataclass(frozen=True)
class SelfcheckReport:
    mode: str
    date: str
    tool_version: str
    platform: str
    libraries: dict
    seed: int
    reference: list[CaseOutcome]
    simulation: list[CaseOutcome]
    pass_rule: str = PASS_RULE
    """How a simulation case is judged (an exact binomial test at :data:`PASS_ALPHA`), in words."""
    pass_alpha: float = PASS_ALPHA
    calibration: list[outcome_calibration.CalibrationRow] = field(default_factory=list)
    """The per-outcome verdict calibration rows (every applicable check together)."""
    calibration_rule: str = outcome_calibration.PASS_NOTE

    @property
    def passed(self) -> bool:
        return all(c.passed for c in self.reference + self.simulation + self.calibration)

    @property
    def n_pass(self) -> int:
        return sum(c.passed for c in self.reference + self.simulation + self.calibration)

    @property
    def n_all(self) -> int:
        return len(self.reference) + len(self.simulation) + len(self.calibration)

    def to_json(self) -> str:
        d = asdict(self)
        d["passed"] = self.passed
        return json.dumps(d, indent=2, sort_keys=True) + "\n"


def case_ids() -> list[str]:
    """The id of every reference case, simulation case and calibration row, which ``--only`` selects
    from by prefix."""
    return sorted([c.id for c in reference_cases() + simulation_cases()] + outcome_calibration.row_ids())


def run_selfcheck(full: bool = False, seed: int = 20261201, date: str | None = None, only: str = "",
                  progress=None, jobs: int = 1) -> SelfcheckReport:
    """Run every reference case, every simulation case and the per-outcome verdict calibration
    (quick: few replicates; full: >= 200, 40 for the 2,000-per-arm case), across ``jobs`` processes.

    Every case draws from a generator seeded by its own id (:func:`case_seed`,
    :func:`outcome_calibration.row_seed`) and the results are put back in the order of the cases, so
    the report is the same at any number of jobs (the wall time of each calibration row aside)."""
    tasks = selfcheck_tasks(full, seed, only)
    results = run_tasks(tasks, jobs, progress)
    ref = [r for (kind, _), r in zip(tasks, results) if kind == "reference"]
    sim = [r for (kind, _), r in zip(tasks, results) if kind == "simulation"]
    cal = [r for (kind, _), r in zip(tasks, results) if kind == "calibration"]
    return SelfcheckReport("full" if full else "quick", date or dt.date.today().isoformat(), __version__,
                           f"{platform.platform()}; Python {platform.python_version()}", library_versions(), seed,
                           ref, sim, calibration=cal)


def selfcheck_tasks(full: bool, seed: int, only: str) -> list[tuple[str, tuple]]:
    """The cases of one run as (kind, picklable arguments of :func:`run_task`), in report order:
    reference cases, simulation cases, then the calibration rows."""
    tasks: list[tuple[str, tuple]] = [("reference", (c.id,)) for c in reference_cases()
                                      if not only or c.id.startswith(only)]
    tasks += [("simulation", (c.id, full, case_seed(seed, c.id))) for c in simulation_cases()
              if not only or c.id.startswith(only)]
    tasks += [("calibration", (sc_id, n, reps, seed)) for sc_id, n, reps in
              outcome_calibration.row_plan(full, only)]
    return tasks


def run_task(task: tuple[str, tuple]):
    """Run one case from its kind and arguments (looked up by id, so a worker process needs nothing
    but the task)."""
    kind, args = task
    if kind == "reference":
        return run_reference(next(c for c in reference_cases() if c.id == args[0]))
    if kind == "simulation":
        case_id, full, case_seed_ = args
        return run_simulation(next(c for c in simulation_cases() if c.id == case_id), full, case_seed_)
    sc_id, n, reps, seed = args
    return outcome_calibration.run_row(outcome_calibration.scenario(sc_id), n, reps, seed)


def task_id(task: tuple[str, tuple]) -> str:
    kind, args = task
    return f"calibration/{args[0]}/n{args[1]}" if kind == "calibration" else args[0]


def run_tasks(tasks: list[tuple[str, tuple]], jobs: int, progress=None) -> list:
    """Results in the order of ``tasks`` whatever the number of jobs. With several jobs the
    calibration rows (the slow part) are handed out first, so the processes finish close together."""
    results: list = [None] * len(tasks)
    if jobs <= 1 or len(tasks) <= 1:
        for i, t in enumerate(tasks):
            results[i] = run_task(t)
            if progress:
                progress(task_id(t))
        return results
    import warnings
    from concurrent.futures import ProcessPoolExecutor, as_completed

    from .batch import _use_warning_filters

    order = sorted(range(len(tasks)), key=lambda i: tasks[i][0] != "calibration")
    with ProcessPoolExecutor(max_workers=min(jobs, len(tasks)), initializer=_use_warning_filters,
                             initargs=(list(warnings.filters),)) as pool:
        futures = {pool.submit(run_task, tasks[i]): i for i in order}
        for fut in as_completed(futures):
            i = futures[fut]
            results[i] = fut.result()
            if progress:
                progress(task_id(tasks[i]))
    return results


def selfcheck_view(rep: SelfcheckReport) -> dict:
    def rows(cases):
        return [{**asdict(c), "result": "pass" if c.passed else "FAIL",
                 "cls": "v-sound" if c.passed else "v-unsupported"} for c in cases]

    return {"mode": rep.mode, "date": rep.date, "tool_version": rep.tool_version, "platform": rep.platform,
            "libraries": sorted(rep.libraries.items()), "seed": rep.seed, "passed": rep.passed,
            "pass_rule": rep.pass_rule,
            "n_pass": rep.n_pass, "n_all": rep.n_all,
            "reference": rows(rep.reference), "simulation": rows(rep.simulation),
            "calibration_rule": rep.calibration_rule, "calibration": calibration_rows(rep.calibration)}


def calibration_rows(rows: list) -> list[dict]:
    """Display strings of the per-outcome calibration rows (shares with their MCSE, the checks that
    flagged, the rule and its result)."""
    mc = outcome_calibration.mcse
    return [{"id": r.id, "description": r.description, "truth": r.truth, "expected": r.expected,
             "n_per_arm": f"{r.n_per_arm:,}", "replicates": r.replicates,
             "any_unsupported": f"{r.any_unsupported:.3f} ({mc(r.any_unsupported, r.replicates):.3f})",
             "any_caution": f"{r.any_caution:.3f} ({mc(r.any_caution, r.replicates):.3f})",
             "flagged_by": ", ".join(f"{k} {v:.2f}" for k, v in r.flagged_by.items() if v > 0) or "none",
             "rule": r.judged or "reported, not judged", "detail": r.detail,
             "result": "pass" if r.passed else "FAIL", "cls": "v-sound" if r.passed else "v-unsupported"}
            for r in rows]
