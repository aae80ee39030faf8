"""Regression to the mean (RTM) under a normal model, and the reliability figures it depends on.

Model. A participant's reading is ``Y = T + e`` with true level ``T ~ N(mu, rho * sigma^2)`` and
within-participant error ``e ~ N(0, (1 - rho) * sigma^2)``, so ``sigma`` is the total SD of one
reading and ``rho`` the correlation between two readings of the same participant (the reliability,
an intraclass correlation). Participants enter when their screening reading (or the mean of ``m``
screening readings) lies above or below a cutoff ``c``; the RTM effect is the expected change of the
selected group's mean from that baseline to a later reading when nothing else changes.

Sign convention used throughout: every RTM quantity is the signed expected change
``E[follow-up - baseline | selected]``. It is negative for selection above the cutoff (the group is
expected to fall) and positive for selection below it (the group is expected to rise).

Formulas, the interval methods and the truncation handling are set out in
docs/methods/regression-to-the-mean-formulas.md.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import integrate, special, stats

from .fitrecord import FitRecord

_DIRECTIONS = ("above", "below")
_EDGE_SIDES = ("lower", "upper", "either")
_HALF_LOG_2PI = 0.5 * np.log(2.0 * np.pi)


# ---------------------------------------------------------------------------------------------
# validation


def _check_direction(direction: str) -> None:
    if direction not in _DIRECTIONS:
        raise ValueError(f"direction must be 'above' or 'below', not {direction!r}")


def _check_sigma(sigma: float) -> None:
    if not (np.isfinite(sigma) and sigma > 0):
        raise ValueError(f"sigma must be a positive finite number, not {sigma}")


def _check_m(m: int) -> None:
    if int(m) != m or m < 1:
        raise ValueError(f"m (readings averaged) must be a positive integer, not {m}")


def _check_rho(rho: float, m: int, name: str = "rho") -> None:
    lowest = -1.0 if m == 1 else 0.0
    if not (np.isfinite(rho) and lowest <= rho <= 1.0):
        raise ValueError(f"{name} must lie in [{lowest:g}, 1] when m = {m}, not {rho}")


def _check_level(level: float) -> None:
    if not 0 < level < 1:
        raise ValueError(f"level must lie strictly between 0 and 1, not {level}")


def _check_common(mu: float, sigma: float, rho: float, cutoff: float, direction: str, m: int) -> None:
    _check_direction(direction)
    _check_sigma(sigma)
    _check_m(m)
    _check_rho(rho, m)
    if not (np.isfinite(mu) and np.isfinite(cutoff)):
        raise ValueError("mu and cutoff must be finite")


# ---------------------------------------------------------------------------------------------
# closed-form RTM


def reliability_of_mean(rho, m: int = 1):
    """Reliability of the mean of ``m`` readings given the single-reading reliability ``rho``.

    Spearman-Brown: ``rho_m = m * rho / (1 + (m - 1) * rho)``, which is
    ``var(T) / var(mean of m readings) = rho / (rho + (1 - rho) / m)`` under the model above
    (Spearman, Br J Psychol 1910;3:271-295; Brown, ibid. 296-322). Accepts arrays.
    """
    _check_m(m)
    rho = np.asarray(rho, dtype=float)
    out = m * rho / (1.0 + (m - 1.0) * rho)
    return float(out) if out.ndim == 0 else out


def sd_of_mean(sigma, rho, m: int = 1):
    """Total SD of the mean of ``m`` readings: ``sigma * sqrt(rho + (1 - rho) / m)``.

    The true-level variance ``rho sigma^2`` is untouched by averaging; only the within-participant
    variance ``(1 - rho) sigma^2`` is divided by ``m``. Accepts arrays.
    """
    _check_m(m)
    out = np.asarray(sigma, dtype=float) * np.sqrt(np.asarray(rho, dtype=float) + (1.0 - np.asarray(rho)) / m)
    return float(out) if out.ndim == 0 else out


def _mills(z):
    """``C(z) = phi(z) / (1 - Phi(z))``, the inverse Mills ratio, computed on the log scale so that
    it stays accurate in the upper tail; beyond z = 1000, where the two logs cancel badly, from the
    asymptotic series ``C(z) = z / (1 - z^-2 + 3 z^-4 - 15 z^-6 + ...)``."""
    z = np.asarray(z, dtype=float)
    far = z > 1e3
    safe = np.where(far, 0.0, z)
    direct = np.exp(-0.5 * safe * safe - _HALF_LOG_2PI - special.log_ndtr(-safe))
    w = 1.0 / np.where(far, z, 1.0) ** 2
    return np.where(far, np.where(far, z, 0.0) / (1.0 - w + 3.0 * w * w - 15.0 * w**3), direct)


def _selection_shift(mu, sd, cutoff, direction: str):
    """``E[X - mu | X selected]`` for ``X ~ N(mu, sd^2)``: ``+sd C((c - mu)/sd)`` when selected above
    ``c`` and ``-sd C((mu - c)/sd)`` when selected below."""
    if direction == "above":
        return sd * _mills((cutoff - mu) / sd)
    return -sd * _mills((mu - cutoff) / sd)


def _signed_rtm(mu, sigma, rho, cutoff, direction: str, m: int):
    """Vectorised core of :func:`expected_rtm` (no validation)."""
    sd_m = sd_of_mean(sigma, rho, m)
    weight = reliability_of_mean(rho, m)
    return -(1.0 - weight) * _selection_shift(mu, sd_m, cutoff, direction)


def expected_rtm(mu: float, sigma: float, rho: float, cutoff: float, direction: str = "above",
                 m: int = 1) -> float:
    """Expected RTM change of the selected group's mean, signed (follow-up minus baseline).

    For selection on one reading above ``c`` (Barnett, van der Pols and Dobson, Int J Epidemiol
    2005;34:215-220)::

        RTM = -(1 - rho) * sigma * C(z),   z = (c - mu) / sigma,   C(z) = phi(z) / (1 - Phi(z))

    and for selection below ``c`` the mirror image ``+(1 - rho) * sigma * C((mu - c) / sigma)``.
    The magnitude ``(1 - rho) sigma C(z)`` is the published formula; the sign says which way the
    selected group is expected to move (down after selection above, up after selection below).

    With ``m`` screening readings averaged, the baseline has total SD
    ``sigma_m = sigma * sqrt(rho + (1 - rho) / m)`` and the follow-up regresses on it with slope
    ``rho_m = rho sigma^2 / sigma_m^2`` (the Spearman-Brown reliability of the mean), so the same
    formula applies with ``(sigma_m, rho_m)`` in place of ``(sigma, rho)``; the magnitude is then
    ``(sigma_w^2 / m) / sigma_m * C(z_m)`` with ``sigma_w^2 = (1 - rho) sigma^2``. Whether the
    follow-up is one reading or a mean of several does not change this expectation.

    ``rho`` may be negative only when ``m = 1``; with ``m > 1`` it is a variance share in [0, 1].
    """
    _check_common(mu, sigma, rho, cutoff, direction, m)
    return float(_signed_rtm(mu, sigma, rho, cutoff, direction, m))


def rtm_by_integration(mu: float, sigma: float, rho: float, cutoff: float, direction: str = "above",
                       m: int = 1) -> float:
    """The quantity of :func:`expected_rtm` by direct numerical integration, as an independent check.

    Computes ``E[Y2 - Y1 | Y1 selected]`` as a ratio of integrals over the truncated bivariate
    normal density of (baseline ``Y1``, follow-up ``Y2``)::

        numerator   = integral over the selected half-plane of (y2 - y1) f(y1, y2) dy2 dy1
        denominator = integral over the selected half-line of f1(y1) dy1

    with ``var(Y1) = sigma^2 (rho + (1 - rho)/m)``, ``var(Y2) = sigma^2`` and
    ``cov(Y1, Y2) = rho sigma^2`` written from the variance components directly, so the check also
    covers the ``m``-reading reduction. Uses ``scipy.integrate.dblquad`` on standardised units over
    +/- 14 SD (mass beyond is below double precision). Requires ``rho < 1``.
    """
    _check_common(mu, sigma, rho, cutoff, direction, m)
    if rho >= 1:
        raise ValueError("integration needs rho < 1 (the bivariate density is degenerate at rho = 1)")
    z = (cutoff - mu) / sigma
    var1 = rho + (1.0 - rho) / m
    s1 = np.sqrt(var1)
    det = var1 - rho**2
    norm_const = 1.0 / (2.0 * np.pi * np.sqrt(det))

    def joint(u2, u1):
        quad_form = (u1 * u1 - 2.0 * rho * u1 * u2 + var1 * u2 * u2) / det
        return norm_const * np.exp(-0.5 * quad_form)

    def marginal(u1):
        return np.exp(-0.5 * u1 * u1 / var1) / (s1 * np.sqrt(2.0 * np.pi))

    cond_sd = np.sqrt(det / var1)
    inner_lo = lambda u1: rho * u1 / var1 - 14.0 * cond_sd  # noqa: E731
    inner_hi = lambda u1: rho * u1 / var1 + 14.0 * cond_sd  # noqa: E731
    if direction == "above":
        lo, hi = max(z, -14.0 * s1), max(z, 0.0) + 14.0 * s1
    else:
        lo, hi = min(z, 0.0) - 14.0 * s1, min(z, 14.0 * s1)
    tol = dict(epsabs=1e-13, epsrel=1e-11)
    num, _ = integrate.dblquad(lambda u2, u1: (u2 - u1) * joint(u2, u1), lo, hi, inner_lo, inner_hi, **tol)
    den, _ = integrate.quad(marginal, lo, hi, limit=200, **tol)
    return float(sigma * num / den)


# ---------------------------------------------------------------------------------------------
# interval for the expected RTM


@dataclass(frozen=True)
class RtmInterval:
    """Expected RTM (signed, as :func:`expected_rtm`) with a confidence interval.

    ``method`` is ``"bootstrap"`` (parametric, percentile interval) or ``"delta"``; ``seed`` is
    ``None`` and ``n_draws`` 0 for the delta method.
    """

    estimate: float
    lower: float
    upper: float
    level: float
    method: str
    seed: int | None
    n_draws: int


@dataclass(frozen=True)
class _Spread:
    """Sampling spread of the inputs, resolved from whichever of SE / sample size was supplied."""

    mu_sd: float
    sigma_sd: float
    mu_sigma_cov: float
    sigma_chi2_df: float | None  # set when sigma's spread comes from normal-sample theory
    rho_z_sd: float  # SD of atanh(rho)


def _resolve_spread(mu, sigma, rho, mu_se, sigma_se, mu_sigma_cov, n_screen, rho_se, n_rho) -> _Spread:
    if n_screen is not None and n_screen < 3:
        raise ValueError(f"n_screen must be at least 3, not {n_screen}")
    if n_rho is not None and n_rho <= 3:
        raise ValueError(f"n_rho must exceed 3 for the Fisher z SE, not {n_rho}")
    if mu_se is None:
        mu_se = sigma / np.sqrt(n_screen) if n_screen is not None else 0.0
    chi2_df = None
    if sigma_se is None:
        if n_screen is not None:
            chi2_df = float(n_screen - 1)
            sigma_se = sigma / np.sqrt(2.0 * chi2_df)
        else:
            sigma_se = 0.0
    if rho_se is not None and n_rho is not None:
        raise ValueError("give rho_se or n_rho, not both")
    if rho_se is not None or n_rho is not None:
        if abs(rho) >= 1:
            raise ValueError("an uncertain rho must lie strictly inside (-1, 1)")
        rho_z_sd = rho_se / (1.0 - rho**2) if rho_se is not None else 1.0 / np.sqrt(n_rho - 3.0)
    else:
        rho_z_sd = 0.0
    if min(mu_se, sigma_se, rho_z_sd) < 0:
        raise ValueError("standard errors must be non-negative")
    cov = float(mu_sigma_cov) if chi2_df is None else 0.0
    if cov**2 > (mu_se * sigma_se) ** 2 * (1 + 1e-9):
        raise ValueError("mu_sigma_cov is larger than the two SEs allow")
    return _Spread(float(mu_se), float(sigma_se), cov, chi2_df, float(rho_z_sd))


def _draw_parameters(mu, sigma, rho, cutoff, direction, spread: _Spread, m: int, n_draws: int, seed: int):
    """Parametric draws of (mu, sigma, rho). rho: on the Fisher z scale. mu and sigma: from normal
    sample theory when they came from a sample size, otherwise jointly normal on the truncation
    scale of :func:`_draw_on_truncation_scale`."""
    rng = np.random.default_rng(seed)
    if spread.sigma_chi2_df is not None:
        mu_d = mu + spread.mu_sd * rng.standard_normal(n_draws)
        df = spread.sigma_chi2_df
        sigma_d = sigma * np.sqrt(rng.chisquare(df, n_draws) / df)
    else:
        mu_d, sigma_d = _draw_on_truncation_scale(mu, sigma, cutoff, direction, spread, rng, n_draws)
    rho_d = np.full(n_draws, float(rho))
    if spread.rho_z_sd > 0:
        rho_d = np.tanh(np.arctanh(rho) + spread.rho_z_sd * rng.standard_normal(n_draws))
    if m > 1:
        rho_d = np.clip(rho_d, 0.0, 1.0)  # the m-reading model needs a variance share
    return mu_d, sigma_d, rho_d


def _draw_on_truncation_scale(mu, sigma, cutoff, direction, spread: _Spread, rng, n_draws):
    """Draw (mu, sigma) as ``(log delta, log sigma)`` jointly normal, where
    ``delta = |E[Y - mu | selected]| = sigma C(z)`` is the selected group's distance from the
    population mean, then map back through the inverse Mills ratio.

    ML estimates from a truncated sample are far from normal on the (mu, sigma) scale (mu has a long
    tail away from the cutoff) but close to normal on this scale; the covariance is carried over by
    the delta method with ``d delta/d mu = -/+ C'(z)``, ``d delta/d sigma = C(z) - z C'(z)``,
    ``C'(z) = C(z)(C(z) - z)``."""
    above = direction == "above"
    z = (cutoff - mu) / sigma if above else (mu - cutoff) / sigma
    if z < -30:  # practically no one is excluded, delta underflows: draw (mu, log sigma) instead
        cov = np.array([[spread.mu_sd**2, spread.mu_sigma_cov / sigma],
                        [spread.mu_sigma_cov / sigma, (spread.sigma_sd / sigma) ** 2]])
        draws = rng.standard_normal((n_draws, 2)) @ _psd_factor(cov).T
        return mu + draws[:, 0], sigma * np.exp(draws[:, 1])
    c_z = float(_mills(z))
    dc_z = c_z * (c_z - z)
    delta = sigma * c_z
    jac = np.array([[(-dc_z if above else dc_z) / delta, (c_z - z * dc_z) / delta], [0.0, 1.0 / sigma]])
    cov = np.array([[spread.mu_sd**2, spread.mu_sigma_cov], [spread.mu_sigma_cov, spread.sigma_sd**2]])
    draws = rng.standard_normal((n_draws, 2)) @ _psd_factor(jac @ cov @ jac.T).T
    delta_d = delta * np.exp(draws[:, 0])
    sigma_d = sigma * np.exp(draws[:, 1])
    z_d = _inverse_mills(delta_d / sigma_d)
    return (cutoff - z_d * sigma_d if above else cutoff + z_d * sigma_d), sigma_d


def _inverse_mills(ratio):
    """Solve ``C(z) = ratio`` for z (C is increasing from 0 to infinity), by vectorised bisection."""
    ratio = np.asarray(ratio, dtype=float)
    lo = np.full(ratio.shape, -38.0)
    hi = np.maximum(ratio, 0.0) + 2.0  # C(z) > z, so the root lies below ratio
    for _ in range(64):
        mid = 0.5 * (lo + hi)
        too_high = _mills(mid) > ratio
        hi = np.where(too_high, mid, hi)
        lo = np.where(too_high, lo, mid)
    return 0.5 * (lo + hi)


def _psd_factor(cov: np.ndarray) -> np.ndarray:
    """A factor ``L`` with ``L L' = cov`` that tolerates singular (e.g. zero-SE) components."""
    vals, vecs = np.linalg.eigh(cov)
    return vecs * np.sqrt(np.clip(vals, 0.0, None))


def _delta_se_log(mu, sigma, rho, cutoff, direction, m, spread: _Spread) -> float:
    """Delta-method SE of ``log|RTM|``: gradient by central differences, times the covariance of
    (mu, sigma, rho) on the natural scale with ``var(rho) = (rho_z_sd (1 - rho^2))^2``."""
    point = np.array([mu, sigma, rho], dtype=float)
    lowest = -1.0 if m == 1 else 0.0
    # rho's steps stay inside its range; the difference is one-sided at a boundary
    steps_up = np.array([1e-5 * sigma, 1e-5 * sigma, min(1e-6, 0.5 * (1.0 - rho))])
    steps_down = np.array([1e-5 * sigma, 1e-5 * sigma, min(1e-6, 0.5 * (rho - lowest))])
    grad = np.empty(3)
    for i in range(3):
        up, down = point.copy(), point.copy()
        up[i] += steps_up[i]
        down[i] -= steps_down[i]
        f_up = np.log(abs(_signed_rtm(*up, cutoff, direction, m)))
        f_down = np.log(abs(_signed_rtm(*down, cutoff, direction, m)))
        grad[i] = (f_up - f_down) / (up[i] - down[i])
    rho_sd = spread.rho_z_sd * (1.0 - rho**2)
    cov = np.array([[spread.mu_sd**2, spread.mu_sigma_cov, 0.0],
                    [spread.mu_sigma_cov, spread.sigma_sd**2, 0.0],
                    [0.0, 0.0, rho_sd**2]])
    return float(np.sqrt(max(grad @ cov @ grad, 0.0)))


def rtm_with_ci(mu: float, sigma: float, rho: float, cutoff: float, direction: str = "above", m: int = 1,
                *, mu_se: float | None = None, sigma_se: float | None = None, mu_sigma_cov: float = 0.0,
                n_screen: int | None = None, rho_se: float | None = None, n_rho: int | None = None,
                level: float = 0.95, method: str = "bootstrap", n_draws: int = 4000,
                seed: int = 20240601) -> RtmInterval:
    """Expected RTM with a CI that carries the uncertainty in ``mu``, ``sigma`` and ``rho``.

    Inputs of uncertainty, per parameter (anything not given is treated as known):

    * ``mu``: ``mu_se``; else ``sigma / sqrt(n_screen)``.
    * ``sigma``: ``sigma_se`` (with optional ``mu_sigma_cov``, e.g. from
      :func:`fit_truncated_normal`); else normal-sample theory from ``n_screen``:
      ``sigma*^2 = sigma^2 chi2_{n-1} / (n - 1)``, independent of ``mu``.
    * ``rho``: on the Fisher z scale, ``atanh(rho*) ~ N(atanh(rho), s^2)`` with
      ``s = 1 / sqrt(n_rho - 3)`` (Fisher 1921) or ``s = rho_se / (1 - rho^2)`` (delta method).

    ``method="bootstrap"``: ``n_draws`` parametric draws of (mu, sigma, rho) from those
    distributions with ``seed``; the CI is the percentile interval of the RTM formula over the
    draws. When SEs are supplied for mu and sigma, the pair is drawn jointly normal on the
    ``(log delta, log sigma)`` scale, ``delta = sigma C(z)`` the distance of the selected group's
    mean from ``mu``, where ML estimates from a truncated sample are close to normal (on the
    (mu, sigma) scale they are markedly skewed and a normal draw there under-covers).
    ``method="delta"``: a symmetric interval for ``log|RTM|``, ``log|est| +/- z SE``, mapped back;
    the SE comes from the numerical gradient of the formula and the covariance of
    (mu, sigma, rho) on the natural scale.
    For ``m > 1`` the inputs are single-reading ``mu`` and ``sigma``; a truncated fit to screening
    means estimates ``sigma_m``, to be converted with ``sigma = sigma_m / sqrt(rho + (1 - rho)/m)``.
    The point estimate is always the formula at the supplied point values.
    """
    _check_common(mu, sigma, rho, cutoff, direction, m)
    _check_level(level)
    if method not in ("bootstrap", "delta"):
        raise ValueError(f"method must be 'bootstrap' or 'delta', not {method!r}")
    spread = _resolve_spread(mu, sigma, rho, mu_se, sigma_se, mu_sigma_cov, n_screen, rho_se, n_rho)
    estimate = float(_signed_rtm(mu, sigma, rho, cutoff, direction, m))
    if method == "delta":
        if estimate == 0:
            raise ValueError("the delta interval works on log|RTM| and needs a non-zero estimate (rho < 1)")
        half = stats.norm.ppf(0.5 + level / 2) * _delta_se_log(mu, sigma, rho, cutoff, direction, m, spread)
        ends = np.sign(estimate) * np.exp(np.log(abs(estimate)) + np.array([-half, half]))
        return RtmInterval(estimate, float(ends.min()), float(ends.max()), level, "delta", None, 0)
    if n_draws < 100:
        raise ValueError(f"n_draws must be at least 100 for a percentile interval, not {n_draws}")
    mu_d, sigma_d, rho_d = _draw_parameters(mu, sigma, rho, cutoff, direction, spread, m, n_draws, seed)
    values = _signed_rtm(mu_d, sigma_d, rho_d, cutoff, direction, m)
    lower, upper = np.quantile(values, [0.5 - level / 2, 0.5 + level / 2])
    return RtmInterval(estimate, float(lower), float(upper), level, "bootstrap", seed, int(n_draws))


# ---------------------------------------------------------------------------------------------
# truncated-normal maximum likelihood (one-sided truncation)
#
# With lower truncation point a and d_i = x_i - a >= 0, put tau = 1/sigma and alpha = (a - mu)/sigma.
# The mean log-likelihood per observation (without -log(2 pi)/2) is
#     log tau - (m2 tau^2 + 2 alpha m1 tau + alpha^2)/2 - log Q(alpha),   Q = 1 - Phi,
# with m1 = mean(d), m2 = mean(d^2). For fixed alpha it is maximised in closed form by the positive
# root of m2 tau^2 + alpha m1 tau - 1 = 0, leaving a smooth one-dimensional profile in alpha.
# Upper truncation is handled by reflecting the data.

_ALPHA_HI = 30.0
_GRID = 241
_GOLDEN_STEPS = 40


def _profile_tau(alpha, m1, m2):
    """Positive root of ``m2 tau^2 + alpha m1 tau - 1 = 0``, in the cancellation-free form on each
    side of ``alpha m1 = 0``."""
    b = alpha * m1
    root = np.sqrt(b * b + 4.0 * m2)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(b >= 0, 2.0 / (b + root), (root - b) / (2.0 * m2))


def _profile_value(alpha, m1, m2):
    tau = _profile_tau(alpha, m1, m2)
    # at the profiled tau, m2 tau^2 + alpha m1 tau = 1
    return np.log(tau) - 0.5 * (1.0 + alpha * m1 * tau + alpha * alpha) - special.log_ndtr(-alpha)


def _profile_maximum(m1, m2):
    """Maximise the profile over alpha for each (m1, m2) pair: a grid search for the bracket, then
    golden-section refinement, vectorised over pairs. Returns (alpha, tau, value, at_upper_bound)."""
    m1 = np.atleast_1d(np.asarray(m1, dtype=float))[:, None]
    m2 = np.atleast_1d(np.asarray(m2, dtype=float))[:, None]
    alpha_normal = -m1 / np.sqrt(np.maximum(m2 - m1 * m1, 1e-300))
    lo = np.minimum(-12.0, alpha_normal - 3.0)
    grid = lo + (_ALPHA_HI - lo) * np.linspace(0.0, 1.0, _GRID)[None, :]
    best = np.argmax(_profile_value(grid, m1, m2), axis=1)
    rows = np.arange(grid.shape[0])
    left = grid[rows, np.maximum(best - 1, 0)][:, None]
    right = grid[rows, np.minimum(best + 1, _GRID - 1)][:, None]
    ratio = (np.sqrt(5.0) - 1.0) / 2.0
    for _ in range(_GOLDEN_STEPS):
        inner_left = right - ratio * (right - left)
        inner_right = left + ratio * (right - left)
        go_right = _profile_value(inner_right, m1, m2) > _profile_value(inner_left, m1, m2)
        left = np.where(go_right, inner_left, left)
        right = np.where(go_right, right, inner_right)
    alpha = 0.5 * (left + right)
    step = (_ALPHA_HI - lo) / (_GRID - 1)
    at_bound = alpha > _ALPHA_HI - step
    return (alpha[:, 0], _profile_tau(alpha, m1, m2)[:, 0], _profile_value(alpha, m1, m2)[:, 0],
            at_bound[:, 0])


def _lower_truncated_hessian(alpha: float, sigma: float, u: np.ndarray) -> np.ndarray:
    """Hessian of the lower-truncated normal log-likelihood in (mu, sigma), analytic.

    With lambda = C(alpha) and lambda' = lambda (lambda - alpha), per observation:
    d2/dmu2 = (lambda' - 1)/sigma^2; d2/dmu dsigma = (lambda + alpha lambda' - 2u)/sigma^2;
    d2/dsigma2 = (1 - 3u^2 + 2 alpha lambda + alpha^2 lambda')/sigma^2, u = (x - mu)/sigma.
    """
    n = len(u)
    lam = float(_mills(alpha))
    dlam = lam * (lam - alpha)
    h_mm = n * (dlam - 1.0)
    h_ms = n * (lam + alpha * dlam) - 2.0 * u.sum()
    h_ss = n * (1.0 + 2.0 * alpha * lam + alpha**2 * dlam) - 3.0 * (u * u).sum()
    return np.array([[h_mm, h_ms], [h_ms, h_ss]]) / sigma**2


@dataclass(frozen=True)
class SelectedNormalFit(FitRecord):
    """Maximum-likelihood ``N(mu, sigma^2)`` of the unselected population from readings observed only
    beyond a cutoff or inside a window (``lower`` / ``upper``, None where open). The SEs and
    ``cov_mu_sigma`` come from the inverse information; as a fit record its parameters are ``mu`` and
    ``sigma`` with normal-theory Wald intervals. ``converged`` False: the numbers should not be used."""

    mu: float
    sigma: float
    se_mu: float
    se_sigma: float
    cov_mu_sigma: float
    loglik: float
    n: int
    lower: float | None
    upper: float | None
    converged: bool

    names = ("mu", "sigma")

    @property
    def params(self) -> np.ndarray:
        return np.array([self.mu, self.sigma])

    @property
    def se(self) -> np.ndarray:
        return np.array([self.se_mu, self.se_sigma])

    @property
    def cov(self) -> np.ndarray:
        """Covariance of (mu, sigma)."""
        return np.array([[self.se_mu ** 2, self.cov_mu_sigma], [self.cov_mu_sigma, self.se_sigma ** 2]])


@dataclass(frozen=True)
class TruncatedNormalFit(SelectedNormalFit):
    """The fit from a one-sided truncated sample (exactly one of ``lower`` and ``upper`` set);
    ``converged`` is False when the likelihood has no interior maximum (the fit drifts to the
    exponential limit) or the information is not positive definite."""


def fit_truncated_normal(values, lower: float | None = None, upper: float | None = None) -> TruncatedNormalFit:
    """ML estimate of (mu, sigma) of ``N(mu, sigma^2)`` from values observed only above ``lower``
    (or only below ``upper``; give exactly one).

    Log-likelihood for lower truncation at ``a``:
    ``sum log phi((x_i - mu)/sigma) - n log sigma - n log(1 - Phi((a - mu)/sigma))``. It is
    maximised through the closed-form profile in ``tau = 1/sigma`` and a bounded one-dimensional
    search over ``alpha = (a - mu)/sigma``. At the maximum the fitted truncated mean equals the
    sample mean. The MLE exists only when the sample is less skewed than the exponential limit of
    the family (roughly ``mean((x-a)^2) < 2 mean(x-a)^2``); otherwise ``converged`` is False.
    """
    x = np.asarray(values, dtype=float).ravel()
    if (lower is None) == (upper is None):
        raise ValueError("give exactly one truncation point: lower or upper")
    if len(x) < 3 or not np.all(np.isfinite(x)):
        raise ValueError("need at least 3 finite values")
    point = lower if lower is not None else upper
    sign = 1.0 if lower is not None else -1.0
    d = sign * (x - point)
    if np.any(d < 0):
        raise ValueError("some values lie on the excluded side of the truncation point")
    if np.ptp(d) == 0:
        raise ValueError("the values are all equal")
    alpha, tau, _, at_bound = (v[0] for v in _profile_maximum(d.mean(), (d * d).mean()))
    a, y = sign * point, sign * x
    mu_reflected, sigma = _newton_polish(y, a, a - alpha / tau, 1.0 / tau)
    alpha = (a - mu_reflected) / sigma
    u = (y - mu_reflected) / sigma
    cov, info_ok = _invert_information(-_lower_truncated_hessian(alpha, sigma, u))
    mu = sign * mu_reflected
    loglik = float(np.sum(-0.5 * u * u) - len(x) * (np.log(sigma) + _HALF_LOG_2PI + special.log_ndtr(-alpha)))
    return TruncatedNormalFit(float(mu), float(sigma), float(np.sqrt(cov[0, 0])), float(np.sqrt(cov[1, 1])),
                              float(sign * cov[0, 1]), float(loglik), len(x),
                              None if lower is None else float(lower), None if upper is None else float(upper),
                              bool(info_ok and not at_bound))


def _newton_polish(y: np.ndarray, a: float, mu: float, sigma: float, steps: int = 3) -> tuple[float, float]:
    """A few Newton steps on the lower-truncated score, from the profile maximum, to bring the
    estimate from search precision to machine precision. Score per observation:
    d/dmu = (u - lambda)/sigma, d/dsigma = (u^2 - 1 - alpha lambda)/sigma."""
    for _ in range(steps):
        alpha, u = (a - mu) / sigma, (y - mu) / sigma
        lam = float(_mills(alpha))
        score = np.array([np.sum(u - lam), np.sum(u * u - 1.0 - alpha * lam)]) / sigma
        hess = _lower_truncated_hessian(alpha, sigma, u)
        if not np.all(np.isfinite(hess)) or np.any(np.linalg.eigvalsh(hess) >= 0):
            break
        step = np.linalg.solve(hess, score)
        if not np.all(np.isfinite(step)) or sigma - step[1] <= 0:
            break
        mu, sigma = mu - step[0], sigma - step[1]
    return float(mu), float(sigma)


def _invert_information(info: np.ndarray) -> tuple[np.ndarray, bool]:
    if not np.all(np.isfinite(info)) or np.any(np.linalg.eigvalsh(info) <= 0):
        return np.full((2, 2), np.nan), False
    return np.linalg.inv(info), True


# ---------------------------------------------------------------------------------------------
# data-driven test for a truncation edge


@dataclass(frozen=True)
class EdgeScale:
    """The scale on which a reading is tested for a truncation edge."""

    values: np.ndarray
    name: str
    """``raw``, ``log`` or ``Box-Cox power 0.32``."""


BOXCOX_POWER_BOUND = 2.0
"""The Box-Cox power of the edge test's scale is bounded to [-2, 2] (convention of this tool). A
normal sample kept above its 50th to 75th percentile asks for maximum-likelihood powers of about -4
to -14, driven by the cut itself; at such powers ``x ** power`` loses the values' spread to floating
point and the edge test could not run."""


def boxcox_power(values) -> float | None:
    """The Box-Cox power that makes positive ``values`` most nearly normal, by maximum likelihood
    (Box and Cox 1964; scipy.stats.boxcox_normmax), bounded to +-BOXCOX_POWER_BOUND; None when the
    search does not return a finite power. The values are divided by their geometric mean first: the
    maximum-likelihood power is unchanged by rescaling, and the search stays away from overflow."""
    x = np.asarray(values, dtype=float)
    scaled = x / np.exp(np.mean(np.log(x)))
    with np.errstate(all="ignore"):
        power = float(stats.boxcox_normmax(scaled, method="mle"))
    if not np.isfinite(power):
        return None
    return float(np.clip(power, -BOXCOX_POWER_BOUND, BOXCOX_POWER_BOUND))


def _keeps_spread(original: np.ndarray, transformed: np.ndarray) -> bool:
    """True when a transform left every value finite and kept every distinct value distinct (a
    monotone transform can only merge values through rounding)."""
    return bool(np.all(np.isfinite(transformed))
                and len(np.unique(transformed)) == len(np.unique(original)))


def edge_test_scale(values, declared_log: bool | None = None) -> EdgeScale:
    """``values`` on the scale where the truncation-edge test's normal reference is most plausible.

    The edge test reads any tail shorter than a normal one as a cut, so a skewed but untruncated
    sample is a false alarm on the raw scale, and a gamma-like one (a count with a long right tail)
    still is on the log scale, whose upper tail is short. Positive values are therefore given the
    Box-Cox power that makes them most nearly normal (:func:`boxcox_power`, bounded to
    +-BOXCOX_POWER_BOUND); non-negative values with zeros are shifted by 0.5 first. A sharp cut
    survives every monotone transform, so an edge is still found. Powers within 0.1 of 1 are kept
    as the raw scale and within 0.1 of 0 as the log (conventions of this tool); a declared
    ``log_scale`` decides instead. Values with a negative stay raw. The transform is applied to the
    values divided by their geometric mean, an affine change of ``(x ** power - 1) / power`` that
    leaves the (location- and scale-invariant) edge test unchanged; should it still merge distinct
    values, the raw scale is used.
    """
    v = np.asarray(values, dtype=float)
    if declared_log is not None:
        if declared_log and np.all(v > 0):
            return EdgeScale(np.log(v), "log")
        return EdgeScale(v, "raw")
    if np.any(v < 0) or np.ptp(v) == 0:
        return EdgeScale(v, "raw")
    shifted = v + 0.5 if np.any(v == 0) else v
    power = boxcox_power(shifted)
    if power is None or abs(power - 1.0) < 0.1:
        return EdgeScale(v, "raw")
    if abs(power) < 0.1:
        return EdgeScale(np.log(shifted), "log")
    power = round(power, 2)
    scaled = shifted / np.exp(np.mean(np.log(shifted)))
    with np.errstate(all="ignore"):
        transformed = (scaled ** power - 1.0) / power
    if not _keeps_spread(v, transformed):
        return EdgeScale(v, "raw")
    return EdgeScale(transformed, f"Box-Cox power {power:g}")


@dataclass(frozen=True)
class EdgeTestResult:
    """Likelihood-ratio test for a sharp edge at the sample minimum and/or maximum.

    ``statistic`` is ``2 (loglik truncated-at-the-extreme - loglik normal)`` (for ``side="either"``
    the larger of the two); ``edge_side`` is the side that gave it and ``edge`` its value;
    ``p_value`` is the Monte Carlo p-value ``(1 + #{null >= observed}) / (n_null + 1)`` from
    ``n_null`` normal samples of the same size drawn with ``seed``."""

    statistic: float
    p_value: float
    side: str
    edge_side: str
    edge: float
    n: int
    n_null: int
    seed: int


def _edge_statistics(samples: np.ndarray, side: str) -> tuple[np.ndarray, np.ndarray]:
    """Edge LR statistic for each row of ``samples``; returns (lower-edge LR, upper-edge LR) with the
    side not asked for left as NaN."""
    n = samples.shape[1]
    out = []
    for edge, wanted in (("lower", side in ("lower", "either")), ("upper", side in ("upper", "either"))):
        if not wanted:
            out.append(np.full(samples.shape[0], np.nan))
            continue
        d = samples - samples.min(axis=1, keepdims=True) if edge == "lower" else \
            samples.max(axis=1, keepdims=True) - samples
        m1, m2 = d.mean(axis=1), (d * d).mean(axis=1)
        value = _profile_maximum(m1, m2)[2]
        normal_value = -0.5 * np.log(m2 - m1 * m1) - 0.5
        out.append(np.maximum(2.0 * n * (value - normal_value), 0.0))
    return out[0], out[1]


def _combine(lower_lr: np.ndarray, upper_lr: np.ndarray, side: str) -> np.ndarray:
    if side == "lower":
        return lower_lr
    if side == "upper":
        return upper_lr
    return np.maximum(lower_lr, upper_lr)


@lru_cache(maxsize=32)
def _null_edge_statistics(n: int, side: str, n_null: int, seed: int) -> np.ndarray:
    """Null distribution of the edge statistic at sample size ``n``. The statistic is invariant to
    location and scale, so standard normal samples give the null for every normal population."""
    rng = np.random.default_rng(seed)
    chunks = []
    for start in range(0, n_null, 250):
        block = rng.standard_normal((min(250, n_null - start), n))
        chunks.append(_combine(*_edge_statistics(block, side), side))
    null = np.concatenate(chunks)
    null.setflags(write=False)
    return null


def truncation_edge_test(values, side: str = "lower", n_null: int = 999, seed: int = 20240601) -> EdgeTestResult:
    """Test whether a sample looks cut off at its minimum (``side="lower"``), maximum (``"upper"``) or
    either end, against an untruncated normal.

    Statistic: ``LR = 2 [max loglik of a normal truncated at the sample extreme - max loglik of a
    normal]``. The truncated model fits better when the data pile up against the extreme, as they
    do when only values beyond a cutoff were kept. Because the truncation point sits at the extreme
    and is chosen from the data, LR has no chi-square reference; but it is exactly invariant to
    location and scale, so its null distribution depends on ``n`` alone and is simulated from
    ``n_null`` standard normal samples (seeded, cached per ``n``). The Monte Carlo p-value
    ``(1 + #{LR* >= LR}) / (n_null + 1)`` keeps the false-alarm rate at or below the nominal level
    for normal data. Assumes continuous values; heavy rounding (many ties at the extreme) and
    non-normal shapes (skew, short tails) can also trigger it, so a small p-value says "not an
    untruncated normal with a soft edge", not "truncated" by itself.
    """
    if side not in _EDGE_SIDES:
        raise ValueError(f"side must be one of {_EDGE_SIDES}, not {side!r}")
    x = np.asarray(values, dtype=float).ravel()
    if len(x) < 10 or not np.all(np.isfinite(x)):
        raise ValueError("need at least 10 finite values")
    if np.ptp(x) == 0:
        raise ValueError("the values are all equal")
    if n_null < 99:
        raise ValueError(f"n_null must be at least 99, not {n_null}")
    lower_lr, upper_lr = (float(v[0]) for v in _edge_statistics(x[None, :], side))
    statistic = float(_combine(np.array([lower_lr]), np.array([upper_lr]), side)[0])
    edge_side = side if side != "either" else ("lower" if lower_lr >= upper_lr else "upper")
    null = _null_edge_statistics(len(x), side, int(n_null), int(seed))
    p_value = (1.0 + np.count_nonzero(null >= statistic)) / (n_null + 1.0)
    edge = float(x.min() if edge_side == "lower" else x.max())
    return EdgeTestResult(statistic, float(p_value), side, edge_side, edge, len(x), int(n_null), int(seed))


# ---------------------------------------------------------------------------------------------
# reliability


@dataclass(frozen=True)
class IccResult:
    """An intraclass correlation for single readings with its CI. ``model`` names the ANOVA:
    ``"oneway"`` (ICC(1)) or ``"twoway_agreement"`` (ICC(A,1)); ``average_estimate`` is the
    reliability of the mean of the ``n_readings`` readings."""

    estimate: float
    lower: float
    upper: float
    level: float
    model: str
    n_subjects: int
    n_readings: int
    average_estimate: float


def _readings_matrix(readings, more) -> np.ndarray:
    y = np.column_stack([readings, *more]) if more else np.asarray(readings, dtype=float)
    y = np.asarray(y, dtype=float)
    if y.ndim != 2 or y.shape[1] < 2 or y.shape[0] < 3:
        raise ValueError("need a (subjects x readings) table with at least 3 subjects and 2 readings")
    if not np.all(np.isfinite(y)):
        raise ValueError("the readings table must be complete (no missing values)")
    return y


def icc_oneway(readings, *more_readings, level: float = 0.95) -> IccResult:
    """ICC(1): one-way random-effects intraclass correlation of single readings, with its exact CI.

    Pass a (subjects x k) array, or k equal-length 1-D arrays (``icc_oneway(x1, x2)``). From the
    one-way ANOVA with between-subject mean square BMS on ``n - 1`` df and within-subject mean square
    WMS on ``n (k - 1)`` df (Shrout and Fleiss, Psychol Bull 1979;86:420-428)::

        ICC(1) = (BMS - WMS) / (BMS + (k - 1) WMS)

    CI: with ``F = BMS / WMS``, ``F_L = F / F_{1-a/2}(n-1, n(k-1))`` and
    ``F_U = F * F_{1-a/2}(n(k-1), n-1)``, the limits are ``(F_L - 1) / (F_L + k - 1)`` and
    ``(F_U - 1) / (F_U + k - 1)``; exact under the normal random-effects model because
    ``F (1 - ICC) / (1 + (k - 1) ICC)`` has an F distribution. ``average_estimate`` is ICC(1,k) =
    ``(BMS - WMS) / BMS``, the Spearman-Brown reliability of the k-reading mean. Reading order is
    ignored: a systematic shift between occasions counts as error.
    """
    _check_level(level)
    y = _readings_matrix(readings, more_readings)
    n, k = y.shape
    row_means = y.mean(axis=1)
    bms = k * np.sum((row_means - y.mean()) ** 2) / (n - 1)
    wms = np.sum((y - row_means[:, None]) ** 2) / (n * (k - 1))
    if wms == 0:
        raise ValueError("no within-subject variation: the ICC is undefined")
    f_obs = bms / wms
    q = 0.5 + level / 2
    f_lo = f_obs / stats.f.ppf(q, n - 1, n * (k - 1))
    f_hi = f_obs * stats.f.ppf(q, n * (k - 1), n - 1)
    return IccResult(float((bms - wms) / (bms + (k - 1) * wms)), float((f_lo - 1) / (f_lo + k - 1)),
                     float((f_hi - 1) / (f_hi + k - 1)), level, "oneway", n, k, float((bms - wms) / bms))


def icc_agreement(readings, *more_readings, level: float = 0.95) -> IccResult:
    """ICC(A,1): two-way random-effects intraclass correlation for absolute agreement of single
    readings, with its approximate CI.

    With row (subject) mean square MSR, column (occasion) mean square MSC and residual MSE from the
    two-way ANOVA without interaction (Shrout and Fleiss 1979, their ICC(2,1); McGraw and Wong,
    Psychol Methods 1996;1:30-46)::

        ICC(A,1) = (MSR - MSE) / (MSR + (k - 1) MSE + k (MSC - MSE) / n)

    The CI uses the Satterthwaite-type degrees of freedom ``v`` of Shrout and Fleiss (1979):
    with ``F_j = MSC/MSE``, ``r`` the estimate and ``A = n (1 + (k-1) r) - k r``,
    ``v = (k-1)(n-1) (k r F_j + A)^2 / ((n-1) k^2 r^2 F_j^2 + A^2)``, ``F* = F_{1-a/2}(n-1, v)``,
    ``F** = F_{1-a/2}(v, n-1)``;
    lower ``= n (MSR - F* MSE) / (F* (k MSC + (k n - k - n) MSE) + n MSR)``,
    upper ``= n (F** MSR - MSE) / (k MSC + (k n - k - n) MSE + n F** MSR)``.
    ``average_estimate`` is ICC(A,k) ``= (MSR - MSE) / (MSR + (MSC - MSE) / n)``.
    """
    _check_level(level)
    y = _readings_matrix(readings, more_readings)
    n, k = y.shape
    grand = y.mean()
    row_eff = y.mean(axis=1) - grand
    col_eff = y.mean(axis=0) - grand
    msr = k * np.sum(row_eff**2) / (n - 1)
    msc = n * np.sum(col_eff**2) / (k - 1)
    resid = y - grand - row_eff[:, None] - col_eff[None, :]
    mse = np.sum(resid**2) / ((n - 1) * (k - 1))
    if mse == 0:
        raise ValueError("no residual variation: the ICC is undefined")
    r = (msr - mse) / (msr + (k - 1) * mse + k * (msc - mse) / n)
    f_j = msc / mse
    a = n * (1 + (k - 1) * r) - k * r
    v = (k - 1) * (n - 1) * (k * r * f_j + a) ** 2 / ((n - 1) * k**2 * r**2 * f_j**2 + a**2)
    q = 0.5 + level / 2
    f_star, f_star2 = stats.f.ppf(q, n - 1, v), stats.f.ppf(q, v, n - 1)
    common = k * msc + (k * n - k - n) * mse
    lower = n * (msr - f_star * mse) / (f_star * common + n * msr)
    upper = n * (f_star2 * msr - mse) / (common + n * f_star2 * msr)
    average = (msr - mse) / (msr + (msc - mse) / n)
    return IccResult(float(r), float(lower), float(upper), level, "twoway_agreement", n, k, float(average))


# ---------------------------------------------------------------------------------------------
# shrinkage and second baselines


def shrunk_values(x, mu: float, reliability: float, m: int = 1) -> np.ndarray:
    """Empirical-Bayes estimate of each participant's true level from the observed value(s).

    Under the model above, ``E[T | X] = mu + rho_m (X - mu)``: each observation is pulled toward the
    population mean ``mu`` by the factor ``1 - rho_m`` (the James-Stein / Kelley shrinkage of a
    normal mean with known variance components; Kelley, Fundamentals of Statistics 1947). ``x`` are
    single readings (``m = 1``) or means of ``m`` readings, and ``rho_m`` is the Spearman-Brown
    reliability of such a mean built from the single-reading ``reliability``. ``mu`` must be the mean
    of the unselected population (for a selected sample, e.g. from :func:`fit_truncated_normal`);
    the average of ``shrunk - x`` over a selected group is then its expected RTM change.
    """
    _check_m(m)
    _check_rho(reliability, 2, "reliability")
    weight = reliability_of_mean(reliability, m)
    x = np.asarray(x, dtype=float)
    return mu + weight * (x - mu)


@dataclass(frozen=True)
class SecondBaselineBias:
    """Signed expected change (follow-up minus baseline) of the group selected on screening, when the
    analysis baseline is the screening value or a second, later baseline, and the share of the
    former that the switch removes: ``1 - second / selection`` (NaN when the former is 0)."""

    selection_baseline_bias: float
    second_baseline_bias: float
    share_removed: float


def bias_after_second_baseline(mu: float, sigma: float, cutoff: float, rho_screen_second: float,
                               rho_screen_followup: float | None = None, direction: str = "above",
                               m: int = 1, rho_within_screen: float | None = None) -> SecondBaselineBias:
    """RTM bias of the change score with the eligibility reading as baseline versus a second baseline.

    Readings: screening ``Y1`` (decides eligibility; the mean of ``m`` readings taken at one visit),
    second baseline ``Y2`` and follow-up ``Y3``, jointly normal with mean ``mu`` and SD ``sigma``,
    ``corr(Y1, Y2) = rho_12`` (``rho_screen_second``), ``corr(Y1, Y3) = rho_13``
    (``rho_screen_followup``) for single readings. With ``e = E[Y1bar - mu | selected]`` and
    ``sigma_m`` the SD of the screening mean (within-visit correlation ``rho_within_screen``)::

        E[Y3 - Y1bar | sel] = (rho_13 sigma^2 / sigma_m^2 - 1) e
        E[Y3 - Y2    | sel] = (rho_13 - rho_12) sigma^2 / sigma_m^2 e
        share removed       = (1 - rho_12) / (1 - rho_13)          (m = 1)

    Assumption: with a stable true level and exchangeable errors all correlations are equal
    (``rho_13 = rho_12``, the default), so the second baseline removes the bias completely. If the
    correlation decays with time (``rho_12 > rho_13`` because the second baseline is nearer the
    screening visit), the second baseline still carries part of the selection and a bias of the same
    sign remains. ``rho_within_screen`` defaults to ``rho_screen_second``.
    """
    rho_13 = rho_screen_second if rho_screen_followup is None else rho_screen_followup
    rho_w = rho_screen_second if rho_within_screen is None else rho_within_screen
    _check_common(mu, sigma, rho_w, cutoff, direction, m)
    _check_rho(rho_screen_second, 1, "rho_screen_second")
    _check_rho(rho_13, 1, "rho_screen_followup")
    sd_m = sd_of_mean(sigma, rho_w, m)
    shift = _selection_shift(mu, sd_m, cutoff, direction)
    scale = (sigma / sd_m) ** 2
    first = float((rho_13 * scale - 1.0) * shift)
    second = float((rho_13 - rho_screen_second) * scale * shift)
    share = 1.0 - second / first if first != 0 else float("nan")
    return SecondBaselineBias(first, second, float(share))


# ---------------------------------------------------------------------------------------------
# two-sided entry window: selection lower <= X <= upper


def window_mean_shift(mu, sigma, lower: float, upper: float):
    """``E[X - mu | a < X < b]`` for ``X ~ N(mu, sigma^2)``, the mean shift of a doubly truncated
    normal (Johnson, Kotz and Balakrishnan, Continuous Univariate Distributions vol. 1, 2nd ed.
    1994, section 10.1)::

        E[X | a < X < b] = mu + sigma (phi(alpha) - phi(beta)) / (Phi(beta) - Phi(alpha)),
        alpha = (a - mu) / sigma,  beta = (b - mu) / sigma.

    Computed through log densities and ``log_ndtr`` so that a window far in a tail stays accurate;
    vectorised over ``mu`` and ``sigma``."""
    mu = np.asarray(mu, dtype=float)
    sigma = np.asarray(sigma, dtype=float)
    alpha, beta = (lower - mu) / sigma, (upper - mu) / sigma
    # Work in the tail nearer the window (reflect when the window lies above the mean) so that the
    # difference of the two normal probabilities never cancels.
    flip = (alpha + beta) > 0
    lo = np.where(flip, -beta, alpha)
    hi = np.where(flip, -alpha, beta)
    log_mass = special.log_ndtr(hi) + np.log1p(-np.exp(np.minimum(special.log_ndtr(lo) - special.log_ndtr(hi), 0.0)))
    dens = np.exp(-0.5 * lo * lo - _HALF_LOG_2PI - log_mass) - np.exp(-0.5 * hi * hi - _HALF_LOG_2PI - log_mass)
    return sigma * np.where(flip, -dens, dens)


def expected_rtm_window(mu: float, sigma: float, rho: float, lower: float, upper: float):
    """Expected RTM change of a group selected by a two-sided window on one reading, signed
    (follow-up minus baseline): ``-(1 - rho) E[X - mu | lower < X < upper]``. The same relation as
    for a one-sided cutoff (Barnett, van der Pols and Dobson 2005), with the doubly truncated mean of
    :func:`window_mean_shift`; a window symmetric about ``mu`` gives no RTM at all."""
    if not lower < upper:
        raise ValueError("the window needs lower < upper")
    if not np.all(np.asarray(sigma) > 0):
        raise ValueError("sigma must be positive")
    return -(1.0 - np.asarray(rho, dtype=float)) * window_mean_shift(mu, sigma, lower, upper)


@dataclass(frozen=True)
class WindowNormalFit(SelectedNormalFit):
    """The fit from readings observed only inside ``[lower, upper]`` (both set)."""


def _window_loglik(theta, x, lower, upper):
    mu, log_sigma = theta
    sigma = np.exp(log_sigma)
    a, b = (lower - mu) / sigma, (upper - mu) / sigma
    flip = (a + b) > 0
    lo, hi = (-b, -a) if flip else (a, b)
    log_mass = special.log_ndtr(hi) + np.log1p(-np.exp(min(special.log_ndtr(lo) - special.log_ndtr(hi), 0.0)))
    u = (x - mu) / sigma
    return float(np.sum(-0.5 * u * u) - len(x) * (log_sigma + _HALF_LOG_2PI + log_mass))


def fit_window_normal(values, lower: float, upper: float) -> WindowNormalFit:
    """ML estimate of (mu, sigma) from readings truncated to ``[lower, upper]`` on both sides.

    Log-likelihood: ``sum log phi((x_i - mu)/sigma) - n log sigma - n log(Phi(beta) - Phi(alpha))``,
    maximised over ``(mu, log sigma)`` from the sample mean and SD (Nelder-Mead, then a numerical
    Hessian for the standard errors). A sample spread almost evenly over the window carries little
    information about a wide population, so ``converged`` is False when the fitted sigma runs away
    (more than 50 window widths) or the information matrix is not positive definite."""
    from scipy import optimize

    x = np.asarray(values, dtype=float).ravel()
    if len(x) < 3 or not np.all(np.isfinite(x)):
        raise ValueError("need at least 3 finite values")
    if np.any(x < lower) or np.any(x > upper):
        raise ValueError("some values lie outside the window")
    if np.ptp(x) == 0:
        raise ValueError("the values are all equal")
    start = np.array([x.mean(), np.log(x.std(ddof=1))])
    neg = lambda t: -_window_loglik(t, x, lower, upper)  # noqa: E731
    res = optimize.minimize(neg, start, method="Nelder-Mead",
                            options={"xatol": 1e-9, "fatol": 1e-10, "maxiter": 4000})
    res = optimize.minimize(neg, res.x, method="Nelder-Mead",
                            options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 4000})
    mu, log_sigma = res.x
    sigma = float(np.exp(log_sigma))
    hess = _numerical_hessian(lambda t: neg((t[0], np.log(t[1]))), np.array([mu, sigma]))
    cov, ok = _invert_information(hess)
    converged = bool(res.success and ok and sigma < 50 * (upper - lower))
    return WindowNormalFit(float(mu), sigma, float(np.sqrt(max(cov[0, 0], 0.0))), float(np.sqrt(max(cov[1, 1], 0.0))),
                           float(cov[0, 1]), float(-res.fun), len(x), float(lower), float(upper), converged)


def _numerical_hessian(f, t: np.ndarray) -> np.ndarray:
    """Central-difference Hessian of ``f`` at ``t`` (steps relative to each coordinate)."""
    h = 1e-4 * np.maximum(np.abs(t), 1.0)
    out = np.empty((len(t), len(t)))
    for i in range(len(t)):
        for j in range(len(t)):
            ei, ej = np.eye(len(t))[i] * h[i], np.eye(len(t))[j] * h[j]
            out[i, j] = (f(t + ei + ej) - f(t + ei - ej) - f(t - ei + ej) + f(t - ei - ej)) / (4 * h[i] * h[j])
    return out


def rtm_window_with_ci(fit: WindowNormalFit, rho: float, rho_se: float | None, level: float = 0.95,
                       n_draws: int = 4000, seed: int = 20240601) -> RtmInterval:
    """Expected RTM for a two-sided window with a percentile interval over ``n_draws`` parametric
    draws: (mu, sigma) jointly normal from the fit's covariance (sigma kept positive), and
    ``atanh(rho)`` normal with SD ``rho_se / (1 - rho^2)`` (delta method; ``rho`` known when
    ``rho_se`` is None)."""
    _check_level(level)
    estimate = float(expected_rtm_window(fit.mu, fit.sigma, rho, fit.lower, fit.upper))
    rng = np.random.default_rng(seed)
    cov = np.array([[fit.se_mu**2, fit.cov_mu_sigma], [fit.cov_mu_sigma, fit.se_sigma**2]])
    draws = rng.multivariate_normal([fit.mu, fit.sigma], cov, size=n_draws, method="cholesky"
                                    if np.all(np.linalg.eigvalsh(cov) > 0) else "eigh")
    sigma_d = np.abs(draws[:, 1])
    z_sd = 0.0 if rho_se is None else rho_se / max(1.0 - rho * rho, 1e-12)
    rho_d = np.tanh(np.arctanh(np.clip(rho, -0.999999, 0.999999)) + z_sd * rng.standard_normal(n_draws))
    values = expected_rtm_window(draws[:, 0], sigma_d, rho_d, fit.lower, fit.upper)
    lower, upper = np.quantile(values, [0.5 - level / 2, 0.5 + level / 2])
    return RtmInterval(estimate, float(lower), float(upper), level, "bootstrap", seed, int(n_draws))


def selection_shift_with_se(fit, cutoff: float, direction: str) -> tuple[float, float]:
    """The mean shift of the selected entry readings, ``e = E[S - mu | selected]`` (signed), and its
    delta-method SE.

    ``e`` is minus the expected regression to the mean at reliability 0: sigma * phi(z) / (1 - Phi(z)),
    z = (c - mu) / sigma, for selection above c (the truncated-normal mean; Johnson, Kotz and
    Balakrishnan, Continuous Univariate Distributions, vol. 1, 2nd ed., 1994, ch. 13), and the doubly
    truncated mean shift for a window ``direction`` (with ``fit.lower``, ``fit.upper``). SE from the
    fit's covariance of (mu, sigma) and a central-difference gradient (step 1e-5 sigma):
    var(e) = g' V g (delta method). ``fit`` is a truncated-normal or window-normal fit.
    """
    def e(mu, sigma):
        if direction == "window":
            return float(window_mean_shift(mu, sigma, fit.lower, fit.upper))
        return -expected_rtm(mu, sigma, 0.0, cutoff, direction)

    h = 1e-5 * fit.sigma
    grad = np.array([(e(fit.mu + h, fit.sigma) - e(fit.mu - h, fit.sigma)) / (2 * h),
                     (e(fit.mu, fit.sigma + h) - e(fit.mu, fit.sigma - h)) / (2 * h)])
    cov = np.array([[fit.se_mu ** 2, fit.cov_mu_sigma], [fit.cov_mu_sigma, fit.se_sigma ** 2]])
    return e(fit.mu, fit.sigma), float(np.sqrt(max(grad @ cov @ grad, 0.0)))


def product_se(a: float, se_a: float, b: float, se_b: float) -> float:
    """Exact SE of the product of two independent estimates a and b (Goodman 1960, J Am Stat Assoc
    55:708-713): var(ab) = a^2 var(b) + b^2 var(a) + var(a) var(b)."""
    return math.sqrt(a ** 2 * se_b ** 2 + b ** 2 * se_a ** 2 + se_a ** 2 * se_b ** 2)


def product_interval(estimate: float, a: float, se_a: float, b: float, se_b: float,
                     level: float = 0.95) -> tuple[float, float]:
    """Normal interval ``estimate -/+ z_{(1+level)/2} SE(ab)`` for an estimate proportional to the
    product of a and b (the residual bias after a later baseline, (rho_SF - rho_SB) e), with
    SE(ab) from :func:`product_se`."""
    q = stats.norm.ppf(0.5 + level / 2)
    se = product_se(a, se_a, b, se_b)
    return estimate - q * se, estimate + q * se
