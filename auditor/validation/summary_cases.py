"""Validation cases of the audit from published summaries.

Reference: the summaries a paper would print for MASS anorexia (control against cognitive behavioural
therapy; Venables and Ripley, Modern Applied Statistics with S, 2002), audited from summaries, give the
same per-arm pre-post correlations and the same change/ANCOVA sample-size ratio as the data audit
computes from the participant data. Simulation: the Wishart-simulated interval the summaries audit
puts on that ratio covers the true ratio of simulated trials at its nominal 95%.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np

from .cases import ReferenceCase, SimulationCase, dataset, reference, simulation

ARMS = ("Cont", "CBT")
"""The two anorexia arms compared (the summaries audit's comparison of analyses needs two arms)."""


def _anorexia_arms():
    df = dataset("anorexia")
    return {t: df[df["Treat"] == t].reset_index(drop=True) for t in ARMS}


def _summaries_audit(arms: dict):
    """Audit from summaries computed from the participant data, as a paper would print them (n, means,
    SDs of baseline, follow-up and change), written at full precision to a temporary folder."""
    from ..pipeline import AuditOptions
    from ..summaries.audit import audit_summaries, load_summary_study

    lines = ["outcome,arm,n,mean_baseline,sd_baseline,mean_followup,sd_followup,sd_change"]
    for t, a in arms.items():
        c = a["Postwt"] - a["Prewt"]
        nums = [a["Prewt"].mean(), a["Prewt"].std(ddof=1), a["Postwt"].mean(), a["Postwt"].std(ddof=1),
                c.std(ddof=1)]
        lines.append(f"WT,{t},{len(a)}," + ",".join(repr(float(x)) for x in nums))
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        (d / "summaries.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
        (d / "study.toml").write_text(
            '[study]\nid = "ANOREXIA-S"\nsource = "summaries"\narms = ["Cont", "CBT"]\ncontrol_arm = "Cont"\n'
            'seed = 1\n\n[files]\nsummaries = "summaries.csv"\n\n[[outcomes]]\nparam = "WT"\n'
            'scale = "continuous"\nunit = "lb"\nreported_analysis = "change"\n', encoding="utf-8")
        audit = audit_summaries(load_summary_study(d), AuditOptions(quick=True))
    return {e.key: e for r in audit.results for e in r.estimates}


def _implied_r_gap() -> float:
    """Largest gap between an arm's correlation implied by its three SDs (summaries audit) and that
    arm's Pearson correlation computed by the data audit on the participants."""
    from ..stats.correlation import pearson

    arms = _anorexia_arms()
    est = _summaries_audit(arms)
    return max(abs(est[f"summary-consistency.correlation.arm-{i + 1}"].value
                   - pearson(arms[t]["Prewt"], arms[t]["Postwt"]).r) for i, t in enumerate(ARMS))


def _ratio_gap() -> float:
    """Relative gap between the summaries audit's change/ANCOVA ratio and the data audit's own-cost
    ratio (within-arm moments, :func:`auditor.stats.efficiency.own_cost`) on the participant data."""
    import pandas as pd

    from ..stats.efficiency import own_cost

    arms = _anorexia_arms()
    est = _summaries_audit(arms)
    df = pd.concat(arms.values(), ignore_index=True)
    data_ratio = own_cost(df["Prewt"], df["Postwt"], df["Treat"].to_numpy()).ratio
    return abs(est["summary-efficiency.ratio"].value / data_ratio - 1)


ANOREXIA_SOURCE = ("MASS anorexia participant data (Venables and Ripley 2002), arms Cont and CBT: the data "
                   "audit's own computation on the participants is the reference; expected gap 0")

reference(ReferenceCase(
    "summaries/anorexia-implied-r", "summary-consistency",
    "Per-arm pre-post correlation implied by the SDs of baseline, follow-up and change equals the arm's "
    "Pearson r on the participant data (the identity var(f - b) = var(b) + var(f) - 2 cov(b, f) is exact "
    "for sample SDs of the same participants)", ANOREXIA_SOURCE, 0.0, 1e-9, _implied_r_gap))

reference(ReferenceCase(
    "summaries/anorexia-ratio-vs-ancova", "summary-efficiency",
    "Sample-size ratio change / ANCOVA from the summaries equals the data audit's ratio from within-arm "
    "moments (relative gap; both are var(change) / residual variance of ANCOVA, Frison and Pocock 1992)",
    ANOREXIA_SOURCE, 0.0, 1e-6, _ratio_gap))


# ------------------------------------------------------------------------------------ simulation

N_PER_ARM = 40
TRUE_SD_BASELINE, TRUE_SD_FOLLOWUP, TRUE_R = 1.0, 1.3, 0.6
"""Unequal variances, so the true ratio (1.38) differs from the equal-variance 2 / (1 + r) = 1.25."""


def ratio_interval_coverage(replicates: int, seed: int) -> float:
    """Share of simulated two-arm trials (normal, N_PER_ARM per arm, a treatment effect on follow-up)
    whose Wishart-simulated 95% interval of the change/ANCOVA ratio, computed from the trial's printed
    summaries exactly as the summaries audit does (implied per-arm r, pooled within-arm SDs and r,
    total n less 2 degrees of freedom, the quick mode's draws), covers the true ratio."""
    from ..stats import summary_formulas as sf
    from ..summaries.checks import QUICK_DRAWS

    truth = float(sf.ratio_to_ancova("change", TRUE_R, TRUE_SD_BASELINE, TRUE_SD_FOLLOWUP))
    cov = np.array([[TRUE_SD_BASELINE**2, TRUE_R * TRUE_SD_BASELINE * TRUE_SD_FOLLOWUP],
                    [TRUE_R * TRUE_SD_BASELINE * TRUE_SD_FOLLOWUP, TRUE_SD_FOLLOWUP**2]])
    rng = np.random.default_rng(seed)
    fn = lambda r, b, f: float(sf.ratio_to_ancova("change", r, b, f))
    covered = 0
    for i in range(replicates):
        sds_b, sds_f, rs = [], [], []
        for effect in (0.0, -0.5):
            x = rng.multivariate_normal([10.0, 10.0 + effect], cov, N_PER_ARM)
            sb, sf_, sc = (float(np.std(v, ddof=1)) for v in (x[:, 0], x[:, 1], x[:, 1] - x[:, 0]))
            sds_b.append(sb)
            sds_f.append(sf_)
            rs.append(sf.implied_correlation(sb, sf_, sc))
        ns = [N_PER_ARM, N_PER_ARM]
        r = sf.pooled_correlation(rs, sds_b, sds_f, ns)
        iv = sf.simulated_interval(fn, sf.pooled_sd(sds_b, ns), sf.pooled_sd(sds_f, ns), r, 2 * N_PER_ARM - 2,
                                   seed + i, QUICK_DRAWS)
        covered += iv.lower <= truth <= iv.upper
    return covered / replicates


simulation(SimulationCase(
    "summaries/ratio-interval-coverage", "summary-efficiency",
    f"95% Wishart-simulated interval of the change/ANCOVA ratio from printed summaries covers the true ratio "
    f"(normal data, {N_PER_ARM} per arm, SDs {TRUE_SD_BASELINE:g} and {TRUE_SD_FOLLOWUP:g}, r {TRUE_R:g})",
    "nominal 0.95", ratio_interval_coverage, "coverage", 0.95, quick_replicates=40, full_replicates=200))
