"""Reference cases: computed values against published or reference-library values."""

from __future__ import annotations

import numpy as np

from .cases import ReferenceCase, dataset, reference


def _anorexia_slope() -> float:
    from ..checks.prepost import baseline_slope

    df = dataset("anorexia").rename(columns={"Prewt": "baseline", "Postwt": "followup", "Treat": "arm"})
    return baseline_slope(df, ["Cont", "CBT", "FT"], "Cont")[0]


def _anorexia_r() -> float:
    from ..stats.correlation import pearson

    df = dataset("anorexia")
    return pearson(df["Prewt"], df["Postwt"]).r


def _spline_vs_patsy() -> float:
    import patsy

    from ..stats.splines import choose_knots, spline_basis

    rng = np.random.default_rng(3)
    x = rng.normal(10, 3, 250)
    y = np.sin(x / 2) + rng.normal(0, 0.3, 250)
    k = np.asarray(choose_knots(x).knots)
    ours = np.column_stack([np.ones_like(x), spline_basis(x, k)])
    ref = np.asarray(patsy.dmatrix("cr(x, knots=inner, lower_bound=lo, upper_bound=hi) - 1",
                                   {"x": x, "inner": k[1:-1], "lo": k[0], "hi": k[-1]}))
    return float(np.max(np.abs(ours @ np.linalg.lstsq(ours, y, rcond=None)[0]
                               - ref @ np.linalg.lstsq(ref, y, rcond=None)[0])))


def _barnett() -> float:
    from ..stats.rtm import expected_rtm

    return expected_rtm(60, 15, 0.5, 40, direction="below")


def _rtm_integration_gap() -> float:
    from ..stats.rtm import expected_rtm, rtm_by_integration

    return max(abs(expected_rtm(mu, s, r, c, d) - rtm_by_integration(mu, s, r, c, d))
               for mu, s, r, c, d in [(0, 1, 0.5, 1.0, "above"), (60, 15, 0.5, 40, "below"),
                                      (3.4, 0.55, 0.77, 3.56, "above")])


def _frison_pocock_sim() -> float:
    """Simulated variance ratio change / ANCOVA at rho = 0.6 (formula: 2/(1+rho) = 1.25)."""
    rng = np.random.default_rng(5)
    rho, n, reps = 0.6, 200, 2000
    arm = np.arange(n) % 2
    chg, anc = [], []
    for _ in range(reps):
        b, f = rng.multivariate_normal([0, 0], [[1, rho], [rho, 1]], n).T
        d = f - b
        chg.append(d[arm == 1].mean() - d[arm == 0].mean())
        X = np.column_stack([np.ones(n), b, arm])
        anc.append(np.linalg.lstsq(X, f, rcond=None)[0][2])
    return float(np.var(chg) / np.var(anc))


def _boxcox_log_profile() -> float:
    from ..stats.diagnostics import boxcox_profile

    rng = np.random.default_rng(9)
    b = np.exp(rng.normal(3, 0.5, 400))
    f = b * np.exp(rng.normal(0, 0.25, 400))
    prof = boxcox_profile(f, b, {}, grid=np.round(np.arange(-1, 2.0001, 0.01), 4))
    # scipy's MLE of the power for the ratio f/b (no regressor) is a different model; compare instead the
    # profile log-likelihood at lambda = 0 with an independent OLS computation on the log scale.
    from statsmodels.regression.linear_model import OLS
    from statsmodels.tools.tools import add_constant

    res = OLS(np.log(f), add_constant(np.log(b))).fit()
    n = len(f)
    ll0 = -n / 2 * np.log(res.ssr / n) - np.sum(np.log(f))
    i = int(np.argmin(np.abs(np.asarray(prof.grid))))
    return float(prof.loglik[i] - ll0)


reference(ReferenceCase(
    "anorexia-slope", "pre-post: slope of follow-up on baseline adjusted for arm",
    "MASS anorexia, Postwt on Prewt + Treat", "Venables and Ripley, MASS 4th ed. 2002 (offset-model Prewt "
    "coefficient -0.5655, so slope 0.4345); from memory, reproduced with statsmodels", 0.4345, 5e-5, _anorexia_slope))
reference(ReferenceCase(
    "anorexia-correlation", "pre-post: Pearson correlation", "MASS anorexia, Prewt with Postwt",
    "R cor() on MASS anorexia (from memory)", 0.332, 5e-4, _anorexia_r))
reference(ReferenceCase(
    "spline-vs-patsy", "change-score: restricted cubic spline fit",
    "largest difference of fitted values from patsy cr() with the same knots", "patsy natural cubic "
    "regression spline (reference library)", 0.0, 1e-8, _spline_vs_patsy))
reference(ReferenceCase(
    "barnett-example", "regression to the mean: truncated-normal formula",
    "mean 60, SD 15, selected below 40, correlation 0.5", "Barnett, van der Pols and Dobson, Int J Epidemiol "
    "2005;34:215-220 (worked example)", 13.49, 0.005, _barnett))
reference(ReferenceCase(
    "rtm-integration", "regression to the mean: formula against numerical integration",
    "largest gap over three settings", "scipy numerical integration of the truncated bivariate normal",
    0.0, 1e-6, _rtm_integration_gap))
reference(ReferenceCase(
    "frison-pocock-ratio", "change-score: efficiency formula", "variance ratio change / ANCOVA at rho 0.6, "
    "2,000 simulated trials", "Frison and Pocock, Stat Med 1992;11:1685-1704: 2/(1 + rho) = 1.25", 1.25, 0.08,
    _frison_pocock_sim, relative=True))
reference(ReferenceCase(
    "boxcox-log-profile", "change-score: Box-Cox profile likelihood",
    "profile log-likelihood at power 0 against an independent log-scale fit", "statsmodels OLS on the log "
    "scale with the Box-Cox Jacobian (Box and Cox 1964)", 0.0, 1e-8, _boxcox_log_profile))


def _housing_fit():
    from ..stats.ordinal import fit_proportional_odds

    h = dataset("housing")
    y = h["Sat"].map({"Low": 0, "Medium": 1, "High": 2}).to_numpy()
    cols = {"InflMedium": h["Infl"] == "Medium", "InflHigh": h["Infl"] == "High",
            "TypeApartment": h["Type"] == "Apartment", "TypeAtrium": h["Type"] == "Atrium",
            "TypeTerrace": h["Type"] == "Terrace", "ContHigh": h["Cont"] == "High"}
    X = np.column_stack([np.asarray(v, dtype=float) for v in cols.values()])
    return fit_proportional_odds(y, X, weights=h["Freq"].to_numpy(dtype=float), names=list(cols))


_HOUSING = {"InflMedium": 0.5663937, "InflHigh": 1.2888191, "TypeApartment": -0.5723501,
            "TypeAtrium": -0.3661866, "TypeTerrace": -1.0910149, "ContHigh": 0.3602841}
_HOUSING_SOURCE = ("Venables and Ripley, MASS 4th ed. 2002, proportional-odds fit of the Copenhagen housing "
                   "data (weights Freq); values from memory")

for _name, _value in _HOUSING.items():
    reference(ReferenceCase(
        f"housing-{_name}", "proportional odds: slope", f"MASS housing, coefficient {_name}", _HOUSING_SOURCE,
        _value, 1e-5, (lambda n=_name: float(_housing_fit().beta[list(_HOUSING).index(n)]))))
reference(ReferenceCase(
    "housing-cut-1", "proportional odds: cut point", "MASS housing, first cut point (zeta = -alpha)",
    _HOUSING_SOURCE, -0.4961353, 1e-5, lambda: float(-_housing_fit().alpha[0])))
reference(ReferenceCase(
    "housing-cut-2", "proportional odds: cut point", "MASS housing, second cut point (zeta = -alpha)",
    _HOUSING_SOURCE, 0.6907083, 1e-5, lambda: float(-_housing_fit().alpha[1])))
reference(ReferenceCase(
    "housing-deviance", "proportional odds: residual deviance", "MASS housing, -2 log-likelihood",
    _HOUSING_SOURCE, 3479.149, 1e-3, lambda: float(_housing_fit().deviance)))


def _ordered_model_gap() -> float:
    """Largest slope difference from statsmodels OrderedModel on 50 participants, all values distinct."""
    import warnings

    from statsmodels.miscmodels.ordinal_model import OrderedModel

    from ..stats.ordinal import fit_proportional_odds

    rng = np.random.default_rng(12)
    n = 50
    X = np.column_stack([rng.normal(size=n), rng.integers(0, 2, n)]).astype(float)
    y = X @ np.array([0.8, -0.5]) + rng.logistic(size=n)
    ours = fit_proportional_odds(y, X)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = OrderedModel(np.searchsorted(np.sort(y), y), X, distr="logit").fit(method="bfgs", disp=False,
                                                                               maxiter=5000, gtol=1e-8)
    return float(np.max(np.abs(ours.beta - np.asarray(ref.params)[:2])))


reference(ReferenceCase(
    "ordinal-vs-orderedmodel", "proportional odds: many distinct values",
    "largest slope difference, 50 distinct outcome values", "statsmodels OrderedModel (reference library)",
    0.0, 1e-4, _ordered_model_gap))


def _median_split() -> float:
    from ..stats.relative_change import dichotomisation_efficiency

    return dichotomisation_efficiency(0.0)


def _dichotomy_simulated(z: float, rho: float):
    def compute() -> float:
        from ..stats.relative_change import simulate_dichotomisation_efficiency

        return simulate_dichotomisation_efficiency(z, rho, n_per_arm=1000, reps=800, seed=17, noncentrality=5.0).value
    return compute


def _dichotomy_analytic(z: float, rho: float) -> float:
    from ..stats.relative_change import dichotomisation_efficiency

    return dichotomisation_efficiency(z) * (1 + rho) / 2


reference(ReferenceCase(
    "dichotomy-median", "responder: efficiency of a median split", "normal outcome cut at its median",
    "Altman and Royston, BMJ 2006;332:1080: 2/pi, about 64% of the information kept", 2 / np.pi, 1e-12,
    _median_split))
for _z, _rho in ((0.0, 0.5), (1.0, 0.8), (-1.5, 0.3)):
    reference(ReferenceCase(
        f"dichotomy-sim-z{_z:+.1f}-rho{_rho:.1f}", "responder: analytic efficiency against simulation",
        f"responder on change cut at z = {_z:+.1f}, rho = {_rho}; 800 simulated trials of 2 x 1,000",
        "normal-theory formula of this tool (docs/methods/percent-change.md) against Monte Carlo; tolerance "
        "3 Monte Carlo SE plus 2% (a convention)", _dichotomy_analytic(_z, _rho), 0.06,
        _dichotomy_simulated(_z, _rho), relative=True))


def _spector(name: str):
    def compute() -> float:
        from statsmodels.datasets import spector

        from ..stats.logistic import fit_logistic

        d = spector.load_pandas()
        fit = fit_logistic(d.endog.to_numpy(), {c: d.exog[c].to_numpy() for c in ("GPA", "TUCE", "PSI")})
        return fit.loglik if name == "loglik" else float(fit.params[fit.index(name) if name != "const" else 0])
    return compute


_SPECTOR_SOURCE = ("Spector and Mazzeo data shipped with statsmodels; statsmodels documentation and Greene, "
                   "Econometric Analysis (from memory)")
for _name, _value, _tol in (("const", -13.021347, 5e-6), ("GPA", 2.826113, 5e-6), ("TUCE", 0.095158, 5e-6),
                            ("PSI", 2.378688, 5e-6), ("loglik", -12.890, 5e-4)):
    reference(ReferenceCase(f"spector-{_name}", "later-risk: logistic regression", f"Spector and Mazzeo logit, {_name}",
                            _SPECTOR_SOURCE, _value, _tol, _spector(_name)))
