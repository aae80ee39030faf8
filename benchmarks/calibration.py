"""Verdict calibration under nulls and violations at 100 and 400 participants per arm.

    python benchmarks/calibration.py [--reps 100] [--n 100 400]
        one row per check (each check alone): docs/validation.md, "Verdict calibration"
    python benchmarks/calibration.py --outcomes [--full | --reps R] [--only calibration/null]
        one row per outcome scenario, every applicable check together (the rows of
        `auditor selfcheck`, same seeds): docs/validation.md, "Verdict calibration per outcome"

The scenarios and tables live in auditor/validation/calibration.py and
auditor/validation/outcome_calibration.py, so the installed tool runs the same thing.
"""

import sys

if __name__ == "__main__":
    if "--outcomes" in sys.argv[1:]:
        from auditor.validation.outcome_calibration import main

        main([a for a in sys.argv[1:] if a != "--outcomes"])
    else:
        from auditor.validation.calibration import main

        main()
