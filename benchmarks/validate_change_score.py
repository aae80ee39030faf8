"""Full validation of the change-score check: false-alarm and detection rates over simulated trials.

Prints, for each scenario of auditor.validation.change_score_cases, the share of replicates in which
each sub-finding was flagged. Under "assumptions hold" every rate should be at most 5% plus twice its
Monte Carlo SE; under each violation the targeted sub-finding should be flagged in at least 80%.

    python benchmarks/validate_change_score.py [--replicates 200] [--n 300] [--seed 20261201]
"""

from __future__ import annotations

import argparse
import math
import platform
import time

from auditor.validation.change_score_cases import SCENARIOS, SUBFINDINGS, run_scenario


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--replicates", type=int, default=200)
    ap.add_argument("--n", type=int, default=300)
    ap.add_argument("--seed", type=int, default=20261201)
    args = ap.parse_args()
    print(f"change-score validation: {args.replicates} replicates per scenario, N = {args.n}, seed {args.seed}")
    print(f"machine: {platform.platform()}, Python {platform.python_version()}")
    header = f"{'scenario':24s} {'target':12s} " + " ".join(f"{k[:10]:>10s}" for k in SUBFINDINGS) + "  verdict"
    print(header)
    mcse = math.sqrt(0.05 * 0.95 / args.replicates)
    ok_all = True
    t0 = time.time()
    for i, s in enumerate(SCENARIOS):
        rates = run_scenario(s, args.n, args.replicates, args.seed + i)
        if s.target is None:
            ok = all(v <= 0.05 + 2 * mcse for v in rates.values())
        else:
            ok = rates[s.target] >= 0.80
        ok_all &= ok
        print(f"{s.name:24s} {str(s.target):12s} " + " ".join(f"{rates[k]:10.3f}" for k in SUBFINDINGS)
              + f"  {'PASS' if ok else 'FAIL'}")
    print(f"null bound 0.05 + 2 MCSE = {0.05 + 2 * mcse:.3f}; detection target 0.80; {time.time() - t0:.0f} s")
    print("overall:", "PASS" if ok_all else "FAIL")


if __name__ == "__main__":
    main()
