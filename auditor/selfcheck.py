"""``auditor selfcheck``: run the validation cases on the installed tool and report them.

The report (HTML, PDF, JSON) lists every case with its source, the expected value, the value
obtained, the tolerance and pass or fail, plus the environment and the date: evidence a
biostatistics core can file under its computerised-system validation SOP.
"""

from __future__ import annotations

import datetime as dt
import json
import platform
from dataclasses import asdict, dataclass

from . import __version__
from .pipeline import library_versions
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

    @property
    def passed(self) -> bool:
        return all(c.passed for c in self.reference + self.simulation)

    def to_json(self) -> str:
        d = asdict(self)
        d["passed"] = self.passed
        return json.dumps(d, indent=2, sort_keys=True) + "\n"


def case_ids() -> list[str]:
    """The id of every reference and simulation case, which ``--only`` selects from by prefix."""
    return sorted(c.id for c in reference_cases() + simulation_cases())


def run_selfcheck(full: bool = False, seed: int = 20261201, date: str | None = None, only: str = "",
                  progress=None) -> SelfcheckReport:
    """Run every reference case and every simulation case (quick: few replicates; full: >= 200)."""
    ref = []
    for case in reference_cases():
        if only and not case.id.startswith(only):
            continue
        ref.append(run_reference(case))
        if progress:
            progress(case.id)
    sim = []
    for case in simulation_cases():
        if only and not case.id.startswith(only):
            continue
        sim.append(run_simulation(case, full, case_seed(seed, case.id)))
        if progress:
            progress(case.id)
    return SelfcheckReport("full" if full else "quick", date or dt.date.today().isoformat(), __version__,
                           f"{platform.platform()}; Python {platform.python_version()}", library_versions(), seed,
                           ref, sim)


def selfcheck_view(rep: SelfcheckReport) -> dict:
    def rows(cases):
        return [{**asdict(c), "result": "pass" if c.passed else "FAIL",
                 "cls": "v-sound" if c.passed else "v-unsupported"} for c in cases]

    return {"mode": rep.mode, "date": rep.date, "tool_version": rep.tool_version, "platform": rep.platform,
            "libraries": sorted(rep.libraries.items()), "seed": rep.seed, "passed": rep.passed,
            "pass_rule": rep.pass_rule,
            "n_pass": sum(c.passed for c in rep.reference + rep.simulation),
            "n_all": len(rep.reference + rep.simulation),
            "reference": rows(rep.reference), "simulation": rows(rep.simulation)}
