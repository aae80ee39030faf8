"""Report speed, before and after, in one run: this tree against an earlier revision of the tool.

The earlier revision is exported with ``git archive`` into a temporary folder and run from there
(``PYTHONPATH``), with the same interpreter, libraries and data, alternating with the current tree
so that a busy shared machine slows both alike; the figures that matter are the ratios.

Prints, for the example study:
1. ``auditor validate`` wall time (best and median of ``--repeats``; ``--validate-only`` stops here);
2. ``auditor run`` wall time, peak memory and output sizes: the earlier revision, this tree at
   ``--jobs 1`` and this tree at its default (one process per core); then this tree writing JSON and
   CSV only (``--formats json,csv``);
3. the same audit in stages (imports, loading, checks with figures, HTML, PDF), before and after;
4. with ``--outcomes N``, a synthetic study of N outcomes x 30 participants (this tree only, at N
   and 2N outcomes, JSON and CSV), to show that time and memory grow linearly in outcomes.

    python benchmarks/bench_speed.py [--baseline REV] [--repeats 3] [--outcomes 0]
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "example_study"

_DRIVER = (
    "import resource, runpy, sys\n"
    "sys.argv = ['auditor'] + sys.argv[1:]\n"
    "try:\n    runpy.run_module('auditor.cli', run_name='__main__')\n"
    "except SystemExit as exc:\n    code = exc.code or 0\n"
    "else:\n    code = 0\n"
    "peak = max(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss,\n"
    "           resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)\n"
    "sys.stderr.write(f'\\nPEAK_KB {peak}\\n')\n"
    "sys.exit(code)\n"
)
"""Runs the command line in-process and reports the peak resident memory of it or its workers."""


def export_revision(rev: str, dest: Path) -> Path:
    """The tool as it was at ``rev``, unpacked into ``dest`` (templates placed where the package
    looks for them when it is not installed)."""
    archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev], check=True, capture_output=True).stdout
    dest.mkdir(parents=True)
    subprocess.run(["tar", "-x", "-C", str(dest)], input=archive, check=True)
    shutil.copytree(dest / "templates", dest / "auditor" / "templates")
    return dest


def start_worker(tree: Path, code: str, *args: str) -> tuple[subprocess.Popen, dict]:
    """A Python process running ``code`` from ``tree`` (its first line of output, JSON, returned),
    which then answers one JSON line per line it is sent: the peers of bench_pdf and bench_figures."""
    env = {**os.environ, "PYTHONPATH": str(tree)}
    env.pop("AUDITOR_STRICT", None)
    proc = subprocess.Popen([sys.executable, "-c", code, *args], cwd=tree, env=env, text=True,
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE)
    return proc, json.loads(proc.stdout.readline())


def ask(proc: subprocess.Popen) -> dict:
    """One more round from a worker made by :func:`start_worker`."""
    proc.stdin.write("go\n")
    proc.stdin.flush()
    line = proc.stdout.readline()
    if not line:
        raise SystemExit(f"worker stopped (exit {proc.wait()})")
    return json.loads(line)


def alternate(starts: dict[str, tuple], repeats: int) -> tuple[dict, dict]:
    """Start one worker per tree (``name -> start_worker arguments``), one after another since
    starting is the heavy part, then ask each in turn ``repeats`` times, so that a busy machine slows
    both alike. Returns each worker's first line and its rounds, by name."""
    workers = {name: start_worker(*a) for name, a in starts.items()}
    runs = {name: [] for name in starts}
    try:
        for _ in range(repeats):
            for name in starts:
                runs[name].append(ask(workers[name][0]))
    finally:
        for proc, _ in workers.values():
            proc.stdin.close()
            proc.wait()
    return {name: head for name, (_, head) in workers.items()}, runs


def best_and_median(rounds: list[dict]) -> tuple[dict, dict]:
    """Best and median wall and processor seconds over a worker's rounds (see :func:`alternate`)."""
    keys = ("wall", "cpu")
    return ({k: min(x[k] for x in rounds) for k in keys}, {k: statistics.median(x[k] for x in rounds) for k in keys})


def cli(tree: Path, *args: str) -> tuple[float, float]:
    """Wall seconds and peak MB of one command-line call run from ``tree``."""
    env = {**os.environ, "PYTHONPATH": str(tree)}
    env.pop("AUDITOR_STRICT", None)
    t = time.perf_counter()
    res = subprocess.run([sys.executable, "-c", _DRIVER, *args], cwd=tree, env=env, capture_output=True, text=True)
    wall = time.perf_counter() - t
    if res.returncode != 0:
        raise SystemExit(f"{tree}: auditor {' '.join(args)} failed ({res.returncode}):\n{res.stderr[-2000:]}")
    peak_kb = int(res.stderr.rsplit("PEAK_KB", 1)[1].split()[0])
    return wall, peak_kb / 1024


def child_cpu() -> float:
    """User plus system CPU seconds of every finished child process so far."""
    use = resource.getrusage(resource.RUSAGE_CHILDREN)
    return use.ru_utime + use.ru_stime


_STAGES = (
    "import json, sys, time\n"
    "t0 = time.perf_counter()\n"
    "from auditor.pipeline import audit_study\n"
    "from auditor.render.html import report_html\n"
    "from auditor.render.pdf import html_to_pdf\n"
    "from auditor.study import load_study\n"
    "t1 = time.perf_counter(); study = load_study(sys.argv[1])\n"
    "t2 = time.perf_counter(); audit = audit_study(study)\n"
    "t3 = time.perf_counter(); html = report_html(audit)\n"
    "t4 = time.perf_counter(); html_to_pdf(html)\n"
    "t5 = time.perf_counter()\n"
    "print(json.dumps({'imports': t1 - t0, 'load': t2 - t1, 'checks and figures': t3 - t2, 'html': t4 - t3,"
    " 'pdf': t5 - t4}))\n"
)
"""One process, one outcome after another: where an audit's time goes, in either tree's own API."""


def stages(tree: Path, study: Path) -> dict:
    env = {**os.environ, "PYTHONPATH": str(tree)}
    env.pop("AUDITOR_STRICT", None)
    res = subprocess.run([sys.executable, "-c", _STAGES, str(study)], cwd=tree, env=env, capture_output=True,
                         text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])


def sizes(folder: Path) -> str:
    return ", ".join(f"{p.name} {p.stat().st_size / 1e6:.2f} MB" for p in sorted(folder.iterdir()))


def make_many_outcomes(folder: Path, n_outcomes: int, n: int = 30, seed: int = 11) -> None:
    """A two-arm study of ``n`` participants and ``n_outcomes`` continuous outcomes (invented)."""
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(seed)
    ids = [f"MNY-{i:04d}" for i in range(n)]
    arm = ["Active" if i % 2 else "Control" for i in range(n)]
    rows, blocks = [], []
    for j in range(n_outcomes):
        base = rng.normal(50, 10, n)
        follow = 0.7 * base + 15 + rng.normal(0, 6, n)
        for visit, vals in (("Baseline", base), ("Week 8", follow)):
            rows.append(pd.DataFrame({"USUBJID": ids, "TRTP": arm, "PARAMCD": f"Q{j:03d}", "AVISIT": visit,
                                      "AVAL": np.round(vals, 2)}))
        blocks.append(f'[[outcomes]]\nparam = "Q{j:03d}"\nlabel = "Item {j}"\nscale = "continuous"\n'
                      'baseline_visit = "Baseline"\nfollowup_visits = ["Week 8"]\nplanned_analysis = "change"\n')
    (folder / "data").mkdir(parents=True)
    pd.concat(rows).to_csv(folder / "data" / "visits.csv", index=False)
    (folder / "study.toml").write_text(
        '[study]\nid = "MANY"\ndesign = "parallel"\narms = ["Control", "Active"]\ncontrol_arm = "Control"\n'
        'analysis_date = 2026-01-01\n\n[files]\nvisits = "data/visits.csv"\n\n' + "\n".join(blocks))


def machine_line() -> str:
    """The first line every benchmark prints: machine, cores, Python and the load average before the run
    (the ratios below it are read against this)."""
    return (f"machine: {platform.platform()}; {os.cpu_count()} cores; Python {platform.python_version()}; "
            f"load average before {os.getloadavg()[0]:.1f}")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--baseline", default="edc2959", help="git revision to compare against")
    ap.add_argument("--repeats", type=int, default=3, help="validate timings: best of this many")
    ap.add_argument("--outcomes", type=int, default=0, help="also time N and 2N outcomes x 30 participants")
    ap.add_argument("--validate-only", action="store_true", help="time only validate (part 1) and stop")
    args = ap.parse_args()
    print(machine_line())
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        old = export_revision(args.baseline, tmp / "old")
        new = ROOT
        ex = str(EXAMPLE)
        # Each tree reads the example study as its own revision ships it: the data are the same,
        # and an older tree refuses study.toml keys added since.
        ex_old = str(old / "example_study")

        v_old, v_new, c_old, c_new = [], [], [], []
        for _ in range(args.repeats):
            for tree, study, walls, cpus in ((old, ex_old, v_old, c_old), (new, ex, v_new, c_new)):
                used = child_cpu()
                walls.append(cli(tree, "validate", study)[0])
                cpus.append(child_cpu() - used)
        print(f"\n1. validate example_study: before {min(v_old):.2f} s, after {min(v_new):.2f} s "
              f"(ratio {min(v_new) / min(v_old):.2f}; target under 1 s: {'PASS' if min(v_new) < 1 else 'FAIL'})")
        print(f"   medians of {args.repeats}: before {statistics.median(v_old):.2f} s, after "
              f"{statistics.median(v_new):.2f} s; CPU (user + system) medians: before "
              f"{statistics.median(c_old):.2f} s, after {statistics.median(c_new):.2f} s "
              f"(the steadier figure on a shared machine); load average after {os.getloadavg()[0]:.1f}")
        if args.validate_only:
            return

        runs = {}
        runs["before"] = cli(old, "run", ex_old, "-o", str(tmp / "o_before"), "--force", "--quiet")
        runs["after, --jobs 1"] = cli(new, "run", ex, "-o", str(tmp / "o_after1"), "--force", "--quiet", "--jobs", "1")
        runs["after, default jobs"] = cli(new, "run", ex, "-o", str(tmp / "o_after"), "--force", "--quiet")
        runs["after, --formats json,csv"] = cli(new, "run", ex, "-o", str(tmp / "o_json"), "--force", "--quiet",
                                                "--formats", "json,csv")
        before = runs["before"][0]
        print("\n2. run example_study (all four files unless stated)")
        for name, (wall, peak) in runs.items():
            print(f"   {name:28s} {wall:6.1f} s  ratio {wall / before:4.2f}  peak {peak:5.0f} MB")
        print(f"   target: default run under 1/4 of before: "
              f"{'PASS' if runs['after, default jobs'][0] < before / 4 else 'FAIL'}")
        print(f"   before: {sizes(tmp / 'o_before')}")
        print(f"   after:  {sizes(tmp / 'o_after')}")
        a1 = (tmp / "o_after1" / "findings.json").read_bytes()
        print(f"   findings.json identical at --jobs 1 and default: {a1 == (tmp / 'o_after' / 'findings.json').read_bytes()}; "
              f"PDF identical: {(tmp / 'o_after1' / 'audit.pdf').read_bytes() == (tmp / 'o_after' / 'audit.pdf').read_bytes()}")
        old_results = json.loads((tmp / "o_before" / "findings.json").read_text())["results"]
        new_results = json.loads(a1)["results"]
        same = [(r["verdict"], r["headline"]) for r in old_results] == [(r["verdict"], r["headline"]) for r in new_results]
        print(f"   verdicts and headlines identical before and after: {same}")

        print("\n3. where the time goes (one process, outcomes in turn)")
        st_old, st_new = stages(old, old / "example_study"), stages(new, EXAMPLE)
        for k in st_old:
            print(f"   {k:20s} before {st_old[k]:6.1f} s   after {st_new[k]:6.1f} s   ratio {st_new[k] / st_old[k]:4.2f}")
        quarter = before / 4
        print(f"   the PDF stage alone, after: {st_new['pdf']:.1f} s, {st_new['pdf'] / quarter:.2f} of the whole-run "
              f"target ({quarter:.1f} s = a quarter of before); one WeasyPrint document is laid out on one core")

        if args.outcomes:
            print("\n4. many outcomes x 30 participants, this tree, --formats json,csv and full")
            for k in (args.outcomes, 2 * args.outcomes):
                make_many_outcomes(tmp / f"many{k}", k)
                for fmt in ("json,csv", "html,pdf,json,csv"):
                    wall, peak = cli(new, "run", str(tmp / f"many{k}"), "-o", str(tmp / f"m{k}{len(fmt)}"),
                                     "--force", "--quiet", "--formats", fmt)
                    print(f"   {k:4d} outcomes, {fmt:18s} {wall:6.1f} s ({wall / k:.2f} s per outcome), "
                          f"peak {peak:.0f} MB")


if __name__ == "__main__":
    main()
