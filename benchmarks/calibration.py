"""Verdict calibration of every check under nulls and violations at 100 and 400 participants per arm.

Prints the table recorded in docs/validation.md ("Verdict calibration"):

    python benchmarks/calibration.py [--reps 100] [--n 100 400]

The scenarios and the table live in auditor/validation/calibration.py, so the installed tool runs the
same thing (python -m auditor.validation.calibration).
"""

from auditor.validation.calibration import main

if __name__ == "__main__":
    main()
