"""Generate the example study: an invented two-arm asthma trial, seeded and reproducible.

Study TQ-ASTH-02 is fictional: 1:1 randomisation of adults with moderate asthma and raised exhaled
nitric oxide to placebo or an invented inhaled compound, TQ-4417, for 12 weeks. Each outcome is built
to exercise one audit question, and the intended verdict is written beside it:

- FEV1     forced expiratory volume; follow-up = baseline + effect + noise, so slope 1 and r ~ 0.9:
           analysing change is defensible.
- FENO     exhaled nitric oxide; participants entered only with a baseline FeNO >= 35 ppb, so the
           baseline is truncated and regression to the mean is expected.
- EOS      blood eosinophil count; log-normal, multiplicative effect, some baselines near zero;
           planned as percent change, which is unstable here.
- NSS      night-time symptom score 0-4; most participants at 0 (floor); planned as change, which
           subtracts ordinal codes.
- K        serum potassium; the risk of a cardiac rhythm event is U-shaped in the latest value
           (lowest near 4.3 mmol/L) and does not depend on the change.
- ACS      asthma control score 0-6 (higher is worse); planned as a responder analysis
           (improvement of at least 0.5), which discards information.
- RESC     rescue-inhaler puffs counted over the diary days completed in the 4 weeks before each
           visit (DIARYD); the active arm's diary device logs fewer days at follow-up, so counts
           compared as they stand (change planned) confound the rate with the time observed.

Run: python example_study/generate.py  (writes data/adsl.csv and data/adeff.csv beside this file)
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

SEED = 20261201
N_RANDOMISED = 320
ARMS = ("Placebo", "TQ-4417 200 ug")
VISITS = (("Screening", -2), ("Baseline", 0), ("Week 4", 4), ("Week 12", 12))
HERE = Path(__file__).resolve().parent


def _screen_for_feno(rng, n_needed):
    """Screen candidates until n_needed have a baseline FeNO of at least 35 ppb (entry criterion).

    log FeNO: true level ~ N(log 30, 0.55), each reading adds N(0, 0.30) error, so the test-retest
    correlation on the log scale is 0.55^2 / (0.55^2 + 0.30^2) = 0.77.
    """
    kept = []
    while len(kept) < n_needed:
        true = rng.normal(np.log(30), 0.55)
        scr = true + rng.normal(0, 0.30)
        base = true + rng.normal(0, 0.30)
        if np.exp(base) >= 35:
            kept.append((true, scr, base))
    return np.array(kept)


def _clip_round(x, lo, hi, step):
    return np.round(np.clip(x, lo, hi) / step) * step


def simulate(seed: int = SEED):
    rng = np.random.default_rng(seed)
    n = N_RANDOMISED
    arm = np.array([ARMS[i % 2] for i in rng.permutation(n)])
    active = (arm == ARMS[1]).astype(float)
    age = np.round(rng.normal(46, 13, n).clip(18, 80))
    sex = rng.choice(["F", "M"], n)
    values = {}

    # FEV1 (L): random-walk follow-up, treatment adds 0.12 L.
    base = rng.normal(2.45, 0.60, n).clip(0.9, 4.8)
    w4 = base + 0.08 * active + rng.normal(0, 0.22, n)
    w12 = base + 0.12 * active + rng.normal(0, 0.25, n)
    scr = base + rng.normal(0, 0.22, n)
    values["FEV1"] = [np.round(v, 2) for v in (scr, base, w4, w12)]

    # FeNO (ppb): entry on baseline >= 35; treatment lowers by 25%.
    f = _screen_for_feno(rng, n)
    true, scr, base = f[:, 0], f[:, 1], f[:, 2]
    w4 = true + np.log(1 - 0.15 * active) + rng.normal(0, 0.30, n)
    w12 = true + np.log(1 - 0.25 * active) + rng.normal(0, 0.30, n)
    values["FENO"] = [np.round(np.exp(v)) for v in (scr, base, w4, w12)]

    # Eosinophils (cells/uL): log-normal, multiplicative 40% fall on treatment.
    lt = rng.normal(np.log(260), 0.85, n)
    e = [lt + rng.normal(0, 0.35, n) for _ in range(2)]
    w4 = lt + np.log(1 - 0.25 * active) + rng.normal(0, 0.35, n)
    w12 = lt + np.log(1 - 0.40 * active) + rng.normal(0, 0.35, n)
    values["EOS"] = [np.maximum(10, np.round(np.exp(v) / 10) * 10) for v in (e[0], e[1], w4, w12)]

    # Night-time symptom score 0-4 from a latent normal with a floor.
    latent = rng.normal(0.3, 1.0, n)
    cuts = np.array([0.6, 1.4, 2.1, 2.8])
    def score(x):
        return np.searchsorted(cuts, x).astype(float)
    values["NSS"] = [score(latent + rng.normal(0, 0.5, n)),
                     score(latent + rng.normal(0, 0.5, n)),
                     score(latent - 0.25 * active + rng.normal(0, 0.6, n)),
                     score(latent - 0.40 * active + rng.normal(0, 0.6, n))]

    # Potassium (mmol/L): no treatment effect; event risk U-shaped in the latest value.
    kt = rng.normal(4.3, 0.38, n)
    k = [kt + rng.normal(0, 0.15, n) for _ in range(4)]
    values["K"] = [np.round(v, 1) for v in k]
    latest = values["K"][3]
    logit = -2.6 + 4.0 * (latest - 4.3) ** 2
    event = (rng.uniform(size=n) < 1 / (1 + np.exp(-logit))).astype(int)

    # Asthma control score 0-6 (higher worse), mean of 6 items in steps of 1/6.
    at = rng.normal(2.6, 0.7, n)
    def acs(x):
        return np.round(_clip_round(x, 0, 6, 1 / 6), 2)
    values["ACS"] = [acs(at + rng.normal(0, 0.30, n)), acs(at + rng.normal(0, 0.30, n)),
                     acs(at - 0.20 * active + rng.normal(0, 0.40, n)),
                     acs(at - 0.30 * active + rng.normal(0, 0.45, n))]

    # Missing follow-up for about 4% at week 12 (dropout), at random.
    dropped = rng.uniform(size=n) < 0.04
    for p in values:
        values[p][3] = np.where(dropped, np.nan, values[p][3])
    ids = [f"TQA02-{101 + i // 40:03d}-{1001 + i:04d}" for i in range(n)]

    # Rescue-inhaler puffs: Poisson counts at a participant's own rate (gamma, mean 1.6 a day) over
    # the diary days completed (of 28); rate ratio 0.75 on the active arm. Drawn after every other
    # outcome so that their values do not depend on this one.
    rate = rng.gamma(2.0, 0.8, n)
    days_base = np.minimum(28, 22 + rng.binomial(6, 0.85, n))
    days = [np.full(n, np.nan), days_base,
            np.minimum(28, np.where(active, 12, 17) + rng.binomial(11, 0.7, n)),
            np.minimum(28, np.where(active, 10, 16) + rng.binomial(12, 0.7, n))]
    ratio = np.where(active, 0.75, 1.0)
    values["RESC"] = [np.full(n, np.nan), rng.poisson(rate * days_base).astype(float),
                      rng.poisson(rate * ratio * np.nan_to_num(days[2])).astype(float),
                      rng.poisson(rate * ratio * np.nan_to_num(days[3])).astype(float)]
    values["RESC"][3] = np.where(dropped, np.nan, values["RESC"][3])
    days[3] = np.where(dropped, np.nan, days[3])
    exposure = {"RESC": days}
    return ids, arm, age, sex, event, values, exposure


LABELS = {
    "FEV1": ("Forced expiratory volume in 1 second (L)", "L"),
    "FENO": ("Fractional exhaled nitric oxide (ppb)", "ppb"),
    "EOS": ("Blood eosinophil count (cells/uL)", "cells/uL"),
    "NSS": ("Night-time symptom score (0-4)", ""),
    "K": ("Serum potassium (mmol/L)", "mmol/L"),
    "ACS": ("Asthma control score (0-6)", ""),
    "RESC": ("Rescue-inhaler puffs over the diary days completed", "puffs"),
}


def _fmt(v):
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return ""
    return f"{v:.6g}"


def write(seed: int = SEED, folder: Path = HERE / "data") -> None:
    ids, arm, age, sex, event, values, exposure = simulate(seed)
    folder.mkdir(parents=True, exist_ok=True)
    with (folder / "adsl.csv").open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["STUDYID", "USUBJID", "TRT01P", "AGE", "SEX", "CRHYTHFL"])
        for i, sid in enumerate(ids):
            w.writerow(["TQ-ASTH-02", sid, arm[i], int(age[i]), sex[i], "Y" if event[i] else "N"])
    with (folder / "adeff.csv").open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["STUDYID", "USUBJID", "TRTP", "PARAMCD", "PARAM", "AVISIT", "AVISITN", "AVAL",
                    "ABLFL", "BASE", "CHG", "DIARYD"])
        for p, (label, _unit) in LABELS.items():
            vals = values[p]
            times = exposure.get(p)
            for i, sid in enumerate(ids):
                b = vals[1][i]
                for j, ((visit, vnum), series) in enumerate(zip(VISITS, vals)):
                    v = series[i]
                    if np.isnan(v):
                        continue
                    post = vnum > 0
                    w.writerow(["TQ-ASTH-02", sid, arm[i], p, label, visit, vnum, _fmt(v),
                                "Y" if vnum == 0 else "", _fmt(b) if vnum >= 0 else "",
                                _fmt(v - b) if post else "", "" if times is None else _fmt(times[j][i])])


if __name__ == "__main__":
    write()
    print(f"wrote {HERE / 'data'} (seed {SEED})")
