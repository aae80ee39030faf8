"""Full validation of the later-risk check (scenarios in auditor/validation/later_risk_cases.py).

Run:  python benchmarks/validate_later_risk.py [--replicates 200] [--n 300] [--seed 20261201]
"""

import sys

from auditor.validation.later_risk_cases import *  # noqa: F401,F403  (the tests load these names from here)
from auditor.validation.later_risk_cases import main

if __name__ == "__main__":
    sys.exit(main())
