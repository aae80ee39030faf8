"""Report the figures' drawing speed, before and after, in one run: this tree against an earlier revision.

Each tree runs in a worker process of its own (the earlier revision exported with ``git archive``,
as in ``bench_speed.py``): the worker audits the example study once with figures off, keeps every
figure's data, then draws all of them in turn (``figures.to_png``, as the pipeline does) each time
it is asked. The two workers are asked in turn, ``--repeats`` times, so that a busy shared machine
slows both alike. Processor time (the worker's own) is the figure to read when other jobs share the
cores; wall time is printed beside it.

Prints, per tree: the best and median time to draw all figures, the best time per figure kind,
the PNGs' total size, and whether the PNG bytes repeat from one round to the next. With ``--write``,
each tree's PNGs of the first round are written to ``<write>-before/`` and ``<write>-after/`` (one
file per figure, numbered in audit order) for looking at them side by side.

    python benchmarks/bench_figures.py [--baseline REV] [--repeats 5] [--write /tmp/figs]
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
    "import hashlib, json, os, sys, time\n"
    "import auditor.figures as figures\n"
    "from auditor.pipeline import AuditOptions, audit_study\n"
    "from auditor.study import load_study\n"
    "audit = audit_study(load_study(sys.argv[1]), AuditOptions(draw=False))\n"
    "figs = [(r, f) for r in audit.results for f in r.figures]\n"
    "out = sys.argv[2]\n"
    "figures.to_png(figs[0][1])  # first-use costs (fonts, caches) stay out of the rounds\n"
    "print(json.dumps({'figures': len(figs), 'module': figures.__file__}), flush=True)\n"
    "for _ in sys.stdin:\n"
    "    kinds, digest, size = {}, hashlib.sha256(), 0\n"
    "    w, c = time.perf_counter(), time.process_time()\n"
    "    for i, (r, f) in enumerate(figs):\n"
    "        k = time.process_time()\n"
    "        png = figures.to_png(f)\n"
    "        kinds[f.kind] = kinds.get(f.kind, 0.0) + time.process_time() - k\n"
    "        digest.update(png)\n"
    "        size += len(png)\n"
    "        if out:\n"
    "            os.makedirs(out, exist_ok=True)\n"
    "            with open(os.path.join(out, f'{i:02d}-{f.kind}-{r.check_id}-{r.outcome}.png'), 'wb') as fh:\n"
    "                fh.write(png)\n"
    "    w, c = time.perf_counter() - w, time.process_time() - c\n"
    "    out = ''\n"
    "    print(json.dumps({'wall': w, 'cpu': c, 'kinds': kinds, 'mb': size / 1e6,\n"
    "                      'sha': digest.hexdigest()}), flush=True)\n"
)
"""Audits the study once without figures, then draws every figure once per line read, printing the
times; the first round's PNGs go to the folder named by the second argument (none if empty)."""


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--baseline", default="ed874fb",
                    help="git revision to compare against (default: the tree before the single-draw crop)")
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--study", default=str(EXAMPLE))
    ap.add_argument("--write", default="", help="write each tree's PNGs to WRITE-before/ and WRITE-after/")
    args = ap.parse_args()
    print(machine_line())
    with tempfile.TemporaryDirectory() as tmp:
        old = export_revision(args.baseline, Path(tmp) / "old")
        trees = {"before": (old, old / "example_study"), "after": (ROOT, Path(args.study))}
        heads, runs = alternate({name: (tree, _WORKER, str(study), f"{args.write}-{name}" if args.write else "")
                                 for name, (tree, study) in trees.items()}, args.repeats)
        print(f"load average after {os.getloadavg()[0]:.1f}; {args.repeats} rounds each, alternating; "
              f"baseline {args.baseline}")
        best = {}
        for name in trees:
            r, head = runs[name], heads[name]
            best[name], med = best_and_median(r)
            print(f"  {name:6s} {head['figures']} figures: cpu best {best[name]['cpu']:5.2f} s median "
                  f"{med['cpu']:5.2f} s; wall best {best[name]['wall']:5.2f} s median {med['wall']:5.2f} s; "
                  f"PNGs {r[0]['mb']:.2f} MB; byte-identical across rounds: {len({x['sha'] for x in r}) == 1}")
        kinds = sorted(runs["after"][0]["kinds"])
        for kind in kinds:
            b, a = (min(x["kinds"].get(kind, 0.0) for x in runs[name]) for name in trees)
            print(f"    {kind:18s} cpu best before {b:5.2f} s, after {a:5.2f} s (ratio {a / b if b else 0:.2f})")
        for k in ("cpu", "wall"):
            print(f"  ratio after/before, best {k}: {best['after'][k] / best['before'][k]:.2f}")


if __name__ == "__main__":
    main()
