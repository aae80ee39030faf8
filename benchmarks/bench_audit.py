"""End-to-end audit benchmark: a large synthetic study, and a batch at one and two jobs.

Prints, in one run:
1. a synthetic study of 20 outcomes and 5,000 participants audited end to end: total time, peak
   memory, and the share of time spent in the checks (model fitting), drawing figures, building the
   HTML and rendering the PDF;
2. a batch of 8 example-size studies with --jobs 1 against --jobs 2, and the speed-up (target >= 1.7
   on 2 cores; the peer is the same batch at one job, in the same run).

    python benchmarks/bench_audit.py [--participants 5000] [--outcomes 20] [--studies 8] [--skip-batch]
"""

from __future__ import annotations

import argparse
import os
import platform
import resource
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]


def make_large_study(folder: Path, n: int, n_outcomes: int, seed: int = 7) -> None:
    """Long-layout data for ``n_outcomes`` outcomes drawn from the change-score validation scenarios."""
    from auditor.validation.change_score_cases import SCENARIOS

    rng = np.random.default_rng(seed)
    ids = np.array([f"BEN-{i:06d}" for i in range(n)])
    arm = np.where(rng.permutation(np.arange(n) % 2) == 1, "Active", "Control")
    rows, blocks = [], []
    for j in range(n_outcomes):
        sc = SCENARIOS[j % len(SCENARIOS)]
        b, f, a = sc.make(rng, n)
        code = f"P{j:02d}"
        f = np.where(rng.uniform(size=n) < 0.03, np.nan, f)
        for visit, vals in (("Baseline", b), ("Week 12", f)):
            rows.append(pd.DataFrame({"USUBJID": ids, "TRTP": arm, "PARAMCD": code, "AVISIT": visit,
                                      "AVAL": np.round(vals, 3)}))
        scale = 'scale = "ordinal"\nlevels = [0, 1, 2, 3, 4]' if sc.target == "interval" else 'scale = "continuous"'
        bounds = "\nbounds = [0, inf]" if sc.bounds else ""
        blocks.append(f'[[outcomes]]\nparam = "{code}"\nlabel = "{sc.name}"\n{scale}{bounds}\n'
                      f'baseline_visit = "Baseline"\nfollowup_visits = ["Week 12"]\nplanned_analysis = "change"\n')
    (folder / "data").mkdir(parents=True)
    pd.concat(rows).to_csv(folder / "data" / "visits.csv", index=False)
    (folder / "study.toml").write_text(
        '[study]\nid = "BENCH"\ndesign = "parallel"\narms = ["Control", "Active"]\ncontrol_arm = "Control"\n'
        'analysis_date = 2026-01-01\n\n[files]\nvisits = "data/visits.csv"\n\n' + "\n".join(blocks))


def timed_audit(folder: Path) -> dict:
    import auditor.figures as figures
    from auditor.figures import to_png
    from auditor.pipeline import audit_study
    from auditor.render.html import report_html
    from auditor.render.pdf import html_to_pdf
    from auditor.study import load_study

    spent = {"figures": 0.0}

    def timed_png(fig):
        t = time.perf_counter()
        out = to_png(fig)
        spent["figures"] += time.perf_counter() - t
        return out

    figures.to_png = timed_png  # the pipeline draws each figure once, through this name
    t0 = time.perf_counter()
    study = load_study(folder)
    t1 = time.perf_counter()
    audit = audit_study(study)
    t2 = time.perf_counter()
    html = report_html(audit)
    t3 = time.perf_counter()
    pdf = html_to_pdf(html)
    t4 = time.perf_counter()
    figures.to_png = to_png
    return {"load": t1 - t0, "checks": t2 - t1 - spent["figures"], "figures": spent["figures"], "html": t3 - t2,
            "pdf": t4 - t3, "total": t4 - t0, "results": len(audit.results), "pages": pdf.count(b"/Type /Page\n")
            or pdf.count(b"/Type /Page"), "pdf_mb": len(pdf) / 1e6}


def batch_seconds(studies: list[Path], out: Path, jobs: int) -> float:
    from auditor.batch import run_batch

    t = time.perf_counter()
    res = run_batch(studies, out, {}, jobs=jobs)
    assert all(r.status == "ok" for r in res), [r.error for r in res if r.status != "ok"]
    return time.perf_counter() - t


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--participants", type=int, default=5000)
    ap.add_argument("--outcomes", type=int, default=20)
    ap.add_argument("--studies", type=int, default=8)
    ap.add_argument("--skip-batch", action="store_true")
    args = ap.parse_args()
    print(f"machine: {platform.platform()}; {os.cpu_count()} cores; Python {platform.python_version()}")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        make_large_study(tmp / "large", args.participants, args.outcomes)
        r = timed_audit(tmp / "large")
        peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        print(f"\n1. synthetic study: {args.outcomes} outcomes x {args.participants:,} participants, "
              f"{r['results']} findings")
        print(f"   total {r['total']:.1f} s; peak memory {peak_mb:.0f} MB; PDF {r['pdf_mb']:.1f} MB")
        for k in ("load", "checks", "figures", "html", "pdf"):
            print(f"   {k:8s} {r[k]:7.1f} s  {100 * r[k] / r['total']:5.1f}%")
        if args.skip_batch:
            return
        studies = []
        for i in range(args.studies):
            dst = tmp / f"study{i}"
            shutil.copytree(ROOT / "example_study", dst)
            studies.append(dst)
        one = batch_seconds(studies, tmp / "out1", 1)
        two = batch_seconds(studies, tmp / "out2", 2)
        same = all((tmp / "out1" / s.name / "findings.json").read_bytes()
                   == (tmp / "out2" / s.name / "findings.json").read_bytes() for s in studies)
        print(f"\n2. batch of {args.studies} example studies: --jobs 1 {one:.1f} s, --jobs 2 {two:.1f} s, "
              f"speed-up {one / two:.2f} (target >= 1.7: {'PASS' if one / two >= 1.7 else 'FAIL'}); "
              f"findings identical across job counts: {same}")


if __name__ == "__main__":
    main()
