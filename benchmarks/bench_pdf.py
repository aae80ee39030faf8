"""Report the PDF stage's speed, before and after, in one run: this tree against an earlier revision.

Each tree runs in a worker process of its own (the earlier revision exported with ``git archive``,
as in ``bench_speed.py``): the worker audits the example study once, builds the report's HTML, then
turns it into a PDF each time it is asked. The two workers are asked in turn, ``--repeats`` times,
so that a busy shared machine slows both alike; the figures that matter are the ratios. Processor
time (the worker's own) is printed beside wall time because it is the steadier of the two when
other jobs share the cores.

Prints, per tree: the best and median PDF time (wall and processor), the PDF's size, the
worker's peak resident memory before and after the PDF stage, whether the PDF is byte-identical
from one repeat to the next, and the HTML's size.

    python benchmarks/bench_pdf.py [--baseline REV] [--repeats 5] [--study example_study]
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_speed import (EXAMPLE, ROOT, alternate, best_and_median, export_revision,  # noqa: E402
                         machine_line)

_WORKER = (
    "import hashlib, json, resource, sys, time\n"
    "from auditor.pipeline import audit_study\n"
    "from auditor.render.html import report_html\n"
    "from auditor.render.pdf import html_to_pdf\n"
    "from auditor.study import load_study\n"
    "html = report_html(audit_study(load_study(sys.argv[1])))\n"
    "rss = lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024\n"
    "print(json.dumps({'html_mb': len(html.encode()) / 1e6, 'peak_before_mb': rss()}), flush=True)\n"
    "for _ in sys.stdin:\n"
    "    w, c = time.perf_counter(), time.process_time()\n"
    "    pdf = html_to_pdf(html)\n"
    "    w, c = time.perf_counter() - w, time.process_time() - c\n"
    "    print(json.dumps({'wall': w, 'cpu': c, 'mb': len(pdf) / 1e6,\n"
    "                      'sha': hashlib.sha256(pdf).hexdigest(), 'peak_mb': rss()}), flush=True)\n"
)
"""Audits the study once, then makes one PDF of its report per line read, printing the figures."""


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--baseline", default="18f72a8",
                    help="git revision to compare against (default: the tree before the PDF-stage changes)")
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--study", default=str(EXAMPLE))
    args = ap.parse_args()
    print(machine_line())
    with tempfile.TemporaryDirectory() as tmp:
        trees = {"before": export_revision(args.baseline, Path(tmp) / "old"), "after": ROOT}
        heads, runs = alternate({name: (tree, _WORKER, str(Path(args.study))) for name, tree in trees.items()},
                                args.repeats)
        print(f"load average after {os.getloadavg()[0]:.1f}; {args.repeats} PDFs each, alternating; "
              f"baseline {args.baseline}")
        best = {}
        for name in trees:
            r, head = runs[name], heads[name]
            best[name], med = best_and_median(r)
            print(f"  {name:6s} pdf wall best {best[name]['wall']:5.2f} s median {med['wall']:5.2f} s; "
                  f"cpu best {best[name]['cpu']:5.2f} s median {med['cpu']:5.2f} s; "
                  f"PDF {r[0]['mb']:.2f} MB; HTML {head['html_mb']:.2f} MB; "
                  f"peak memory {head['peak_before_mb']:.0f} MB before the PDF, {max(x['peak_mb'] for x in r):.0f} MB "
                  f"after; byte-identical across repeats: {len({x['sha'] for x in r}) == 1}")
        for k in ("wall", "cpu"):
            print(f"  ratio after/before, best {k}: {best['after'][k] / best['before'][k]:.2f}")


if __name__ == "__main__":
    main()
