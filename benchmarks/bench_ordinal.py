"""Speed and agreement of the proportional-odds fitter against statsmodels OrderedModel.

Run:  python benchmarks/bench_ordinal.py [--quick] [--seed 2024]

Simulated trial data (seeded): a standard-normal baseline covariate, a 1:1
alternating arm indicator, and a continuous outcome
y = 0.5 baseline + 0.5 arm + standard logistic noise, so every outcome value
is distinct and the model has n - 1 intercepts. OrderedModel is fitted with
BFGS (gtol 1e-7, up to 10,000 iterations) from its default start; it is timed
once per size, this module's fitter as the best of several repeats. --quick
skips OrderedModel at N = 300 (the slowest step). Not a timed test: it prints
figures and PASS/FAIL against the targets and always exits 0.
"""

from __future__ import annotations

import argparse
import os
import platform
import sys
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from auditor.stats.ordinal import fit_proportional_odds  # noqa: E402

COMPARISON_SIZES = (100, 200, 300)
SCALING_SIZES = (1_000, 10_000, 100_000)
TARGET_SPEEDUP = 1000.0
TARGET_COEF_DIFF = 1e-4
TARGET_LOGLIK_REL = 1e-6
TARGET_SCALING = 150.0


def simulate(n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng([seed, n])
    baseline = rng.normal(size=n)
    arm = (np.arange(n) % 2).astype(float)
    y = 0.5 * baseline + 0.5 * arm + rng.logistic(size=n)
    return y, np.column_stack([baseline, arm])


def best_time(func, repeats: int) -> tuple[float, object]:
    best, result = float("inf"), None
    for _ in range(repeats):
        start = time.perf_counter()
        result = func()
        best = min(best, time.perf_counter() - start)
    return best, result


def fit_ordered_model(y: np.ndarray, X: np.ndarray):
    from statsmodels.miscmodels.ordinal_model import OrderedModel

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = OrderedModel(y, X, distr="logit").fit(method="bfgs", disp=False, maxiter=10_000, gtol=1e-7)
    cut_points = res.model.transform_threshold_params(res.params)[1:-1]
    return res.params[: X.shape[1]], -cut_points, float(res.llf), bool(res.mle_retvals.get("converged", False))


def peak_memory_mb(y: np.ndarray, X: np.ndarray) -> float:
    tracemalloc.start()
    fit_proportional_odds(y, X)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak / 2**20


def verdict(ok: bool) -> str:
    return "PASS" if ok else "FAIL"


def print_environment() -> None:
    import scipy
    import statsmodels

    print("environment")
    print(f"  python {platform.python_version()}  numpy {np.__version__}  scipy {scipy.__version__}  "
          f"statsmodels {statsmodels.__version__}")
    print(f"  cpus visible {os.cpu_count()}  load average at start {os.getloadavg()[0]:.2f}  "
          f"processor {platform.processor() or platform.machine()}")


def compare_with_ordered_model(sizes, seed: int) -> dict[int, dict]:
    print("\nagainst OrderedModel (all outcome values distinct; covariates baseline + arm)")
    header = f"  {'N':>6} {'levels':>6} {'ours s':>9} {'OM s':>9} {'ratio':>9} {'max|dbeta|':>11} " \
             f"{'max|dalpha|':>11} {'ll ours-OM':>11} {'OM conv':>7}"
    print(header)
    out = {}
    for n in sizes:
        y, X = simulate(n, seed)
        ours_s, fit = best_time(lambda: fit_proportional_odds(y, X), repeats=7)
        start = time.perf_counter()
        om_beta, om_alpha, om_ll, om_conv = fit_ordered_model(y, X)
        om_s = time.perf_counter() - start
        row = dict(
            ours=ours_s, om=om_s, ratio=om_s / ours_s,
            dbeta=float(np.max(np.abs(fit.beta - om_beta))),
            dalpha=float(np.max(np.abs(fit.alpha - om_alpha))),
            dll=fit.loglik - om_ll, om_ll=om_ll,
        )
        out[n] = row
        print(f"  {n:>6} {fit.levels.size:>6} {ours_s:>9.4f} {om_s:>9.2f} {row['ratio']:>9.0f} "
              f"{row['dbeta']:>11.2e} {row['dalpha']:>11.2e} {row['dll']:>11.2e} {str(om_conv):>7}")
    return out


def scaling(sizes, seed: int) -> dict[int, dict]:
    print("\nthis fitter alone")
    print(f"  {'N':>8} {'levels':>8} {'best s':>9} {'iter':>5} {'peak MiB':>9} {'converged':>9}")
    out = {}
    for n in sizes:
        y, X = simulate(n, seed)
        fit_s, fit = best_time(lambda: fit_proportional_odds(y, X), repeats=5 if n <= 10_000 else 3)
        mem = peak_memory_mb(y, X)
        out[n] = dict(time=fit_s, n_iter=fit.n_iter, mem=mem)
        print(f"  {n:>8} {fit.levels.size:>8} {fit_s:>9.4f} {fit.n_iter:>5} {mem:>9.1f} {str(fit.converged):>9}")
    return out


def report_targets(compared: dict[int, dict], scaled: dict[int, dict]) -> None:
    print("\ntargets")
    if 300 in compared:
        r = compared[300]["ratio"]
        print(f"  {verdict(r >= TARGET_SPEEDUP)}  speed-up at N = 300 is {r:.0f}x (target >= {TARGET_SPEEDUP:.0f}x)")
    else:
        print("  SKIP  speed-up at N = 300 (--quick)")
    worst_coef = max(c["dbeta"] for c in compared.values())
    print(f"  {verdict(worst_coef <= TARGET_COEF_DIFF)}  largest slope difference {worst_coef:.1e} "
          f"(target <= {TARGET_COEF_DIFF:.0e})")
    worst_ll = min(c["dll"] / abs(c["om_ll"]) for c in compared.values())
    print(f"  {verdict(worst_ll >= -TARGET_LOGLIK_REL)}  loglik relative to OrderedModel, worst {worst_ll:+.1e} "
          f"(target >= -{TARGET_LOGLIK_REL:.0e})")
    growth = scaled[100_000]["time"] / scaled[1_000]["time"]
    print(f"  {verdict(growth <= TARGET_SCALING)}  time(N = 100,000) / time(N = 1,000) = {growth:.0f} "
          f"(target <= {TARGET_SCALING:.0f})")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="skip OrderedModel at N = 300")
    parser.add_argument("--seed", type=int, default=2024)
    args = parser.parse_args(argv)
    print_environment()
    fit_proportional_odds(*simulate(50, args.seed))  # warm imports and caches before timing
    sizes = tuple(n for n in COMPARISON_SIZES if not (args.quick and n == 300))
    compared = compare_with_ordered_model(sizes, args.seed)
    scaled = scaling(SCALING_SIZES, args.seed)
    report_targets(compared, scaled)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
