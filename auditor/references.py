"""The bibliography, keyed by id. Checks cite keys; the report prints the entries cited."""

from __future__ import annotations

REFERENCES: dict[str, str] = {
    "frison-pocock-1992": "Frison L, Pocock SJ. Repeated measures in clinical trials: analysis using "
                          "mean summary statistics and its implications for design. Stat Med "
                          "1992;11:1685-1704.",
    "clifton-2019": "Clifton L, Clifton DA. The correlation between baseline score and post-intervention "
                    "score, and its implications for statistical analysis. Trials 2019;20:43.",
    "vickers-altman-2001": "Vickers AJ, Altman DG. Analysing controlled trials with baseline and follow up "
                           "measurements. BMJ 2001;323:1123-1124.",
    "vickers-2001": "Vickers AJ. The use of percentage change from baseline as an outcome in a controlled "
                    "trial is statistically inefficient: a simulation study. BMC Med Res Methodol "
                    "2001;1:6.",
    "altman-royston-2006": "Altman DG, Royston P. The cost of dichotomising continuous variables. BMJ "
                           "2006;332:1080.",
    "barnett-2005": "Barnett AG, van der Pols JC, Dobson AJ. Regression to the mean: what it is and how to "
                    "deal with it. Int J Epidemiol 2005;34:215-220.",
    "durrleman-simon-1989": "Durrleman S, Simon R. Flexible regression models with cubic splines. Stat Med "
                            "1989;8:551-561.",
    "peduzzi-1996": "Peduzzi P, Concato J, Kemper E, Holford TR, Feinstein AR. A simulation study of the "
                    "number of events per variable in logistic regression analysis. J Clin Epidemiol "
                    "1996;49:1373-1379.",
    "stone-koo-1985": "Stone CJ, Koo CY. Additive splines in statistics. Proceedings of the Statistical "
                      "Computing Section, American Statistical Association, 1985:45-48.",
    "mccullagh-1980": "McCullagh P. Regression models for ordinal data. J R Stat Soc B 1980;42:109-142.",
    "tornqvist-1985": "Tornqvist L, Vartia P, Vartia YO. How should relative changes be measured? Am Stat "
                      "1985;39:43-46.",
    "fieller-1957": "Fieller EC, Hartley HO, Pearson ES. Tests for rank correlation coefficients. I. "
                    "Biometrika 1957;44:470-481.",
    "cleveland-1979": "Cleveland WS. Robust locally weighted regression and smoothing scatterplots. J Am "
                      "Stat Assoc 1979;74:829-836.",
    "ema-2015": "European Medicines Agency. Guideline on adjustment for baseline covariates in clinical "
                "trials. EMA/CHMP/295050/2013, 2015.",
    "shrout-fleiss-1979": "Shrout PE, Fleiss JL. Intraclass correlations: uses in assessing rater "
                          "reliability. Psychol Bull 1979;86:420-428.",
    "venables-ripley-2002": "Venables WN, Ripley BD. Modern Applied Statistics with S, 4th ed. Springer, "
                            "2002.",
}


def add_reference(key: str, text: str) -> str:
    """Register a reference from a check module (the same key must always carry the same text)."""
    if key in REFERENCES and REFERENCES[key] != text:
        raise ValueError(f"reference key '{key}' registered with two different texts")
    REFERENCES[key] = text
    return key


def cite(keys) -> list[str]:
    """The keys, checked against the registry (a typo fails loudly in tests, never in a report)."""
    out = []
    for k in keys:
        if k not in REFERENCES:
            raise KeyError(f"unknown reference key '{k}'")
        out.append(k)
    return out
