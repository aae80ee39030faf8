"""Proportional-odds (cumulative logit) regression by structured Newton-Raphson.

Model and sign convention
-------------------------
The outcome takes k sorted distinct values ``y_0 < y_1 < ... < y_{k-1}`` (the
levels actually observed; unobserved codes never become empty categories).
For j = 1..k-1

    P(Y >= y_j | x) = expit(alpha_j + x'beta),

so alpha_1 > alpha_2 > ... > alpha_{k-1} and a positive beta makes higher
outcome values more likely. The familiar "cut point" form
logit P(Y <= y_{j-1} | x) = zeta_j - x'beta is the same model with
zeta_j = -alpha_j and the same beta (McCullagh 1980, JRSS-B 42:109-142).
A continuous outcome gets one intercept per distinct value (up to n - 1).

Fitting
-------
Newton-Raphson with step halving on the exact log-likelihood, with analytic
score and observed information. The intercept block of the information is
tridiagonal, so the Newton system is solved with a banded Cholesky factor of
that block and a p x p Schur complement for the slopes: O(n p^2 + k p) work per
iteration, no dense (k-1+p) square matrix anywhere. Covariates are centred and
scaled internally for conditioning; every reported quantity is on the scale of
the supplied covariates. See docs/methods/proportional-odds.md.

Everything here is pure: arrays in, frozen dataclasses out.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
from scipy import linalg, optimize, special, stats

from .fitrecord import FitRecord, WaldTest
from .lrtest import LRTest, likelihood_ratio

__all__ = [
    "OrdinalFitError",
    "OrdinalFit",
    "WaldTest",
    "OddsRatio",
    "LikelihoodRatioTest",
    "ExceedanceProbabilities",
    "PredictedValue",
    "ConcordanceEstimate",
    "CutPointComparison",
    "ProportionalOddsCheck",
    "fit_proportional_odds",
    "lr_test",
    "prob_exceeds",
    "predicted_mean",
    "predicted_median",
    "concordance_probability",
    "concordance_exact",
    "proportional_odds_check",
]

_LN2 = math.log(2.0)
_MAX_HALVINGS = 40
# Screens that send a fit to the exact separation test (thresholds for running
# the test, not verdicts: the linear programme decides).
_SUSPECT_SLOPE = 10.0
_SUSPECT_SE = 100.0
_SUSPECT_LOG_PROB = -1e-8
# Exact separation test: rounds of constraint generation and its tolerances
# (the linear-programme solver's own feasibility tolerance is 1e-7).
_SEPARATION_ROUNDS = 60
_SEPARATION_FEASIBILITY = 1e-6
_SEPARATION_OBJECTIVE = 1e-6


class OrdinalFitError(ValueError):
    """A proportional-odds fit that cannot give a trustworthy answer.

    ``reason`` is one human-readable sentence; ``kind`` is a short machine tag:
    "input", "nonfinite", "levels", "rank", "separation" or "nonconvergence".
    """

    def __init__(self, reason: str, kind: str = "input") -> None:
        super().__init__(reason)
        self.reason = reason
        self.kind = kind


# --------------------------------------------------------------------------
# Result containers
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class OddsRatio:
    """exp(beta_i) with the exponentiated Wald interval."""

    name: str
    odds_ratio: float
    lower: float
    upper: float
    level: float


LikelihoodRatioTest = LRTest
"""chi2 = 2 (loglik_full - loglik_reduced) on df = difference in slopes (the tool's one LR test result)."""


@dataclass(frozen=True, eq=False)
class ExceedanceProbabilities:
    """P(Y > t | x) at each threshold t with pointwise Wald limits on the logit scale."""

    thresholds: np.ndarray
    probability: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    level: float


@dataclass(frozen=True)
class PredictedValue:
    """A model-based summary of Y at one covariate vector, with its interval."""

    estimate: float
    se: float
    lower: float
    upper: float
    level: float
    method: str


@dataclass(frozen=True)
class ConcordanceEstimate:
    """P(Y_treated > Y_control) + 0.5 P(Y_treated = Y_control) at a reference x."""

    estimate: float
    se: float
    lower: float
    upper: float
    level: float
    approximation: float


@dataclass(frozen=True)
class CutPointComparison:
    """One binary split ``Y >= cut_value`` fitted by its own logistic model."""

    cut_value: object
    share_below: float
    n_below: float
    n_at_or_above: float
    binary_log_or: float
    binary_se: float
    po_log_or: float
    failure: str | None


@dataclass(frozen=True)
class ProportionalOddsCheck:
    """Binary log odds ratios of one covariate across cut points versus the PO estimate.

    ``heterogeneity_chi2`` = sum_j (b_j - b_bar)^2 / se_j^2 with b_bar the
    inverse-variance mean, referred to chi-square on (m - 1) df. The binary fits
    share observations and are positively correlated, so this reference
    distribution is only approximate (it tends to overstate the p-value): a
    descriptive check, not a formal test.
    """

    covariate: str
    rows: tuple[CutPointComparison, ...]
    po_log_or: float
    po_se: float
    pooled_binary_log_or: float
    heterogeneity_chi2: float
    df: int
    p_value: float


@dataclass(frozen=True, eq=False)
class _Curvature:
    """Factorised observed information at the estimate, on the internal scale.

    Internal parameters are (a, b) with z = (x - center) / scale, so that
    alpha = a - (center / scale)' b and beta = b / scale. With the information
    J = [[A, B], [B', D]] (A tridiagonal), W = A^{-1} B and S = D - B' W:

        J^{-1} = [[A^{-1} + W S^{-1} W', -W S^{-1}], [-S^{-1} W', S^{-1}]].
    """

    a_chol: np.ndarray
    w: np.ndarray
    s_chol: np.ndarray | None
    a_inv_diag: np.ndarray
    center: np.ndarray
    scale: np.ndarray

    def _solve_a(self, rhs: np.ndarray) -> np.ndarray:
        return linalg.cho_solve_banded((self.a_chol, False), rhs)

    def _solve_internal(self, h_a: np.ndarray, h_b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        a_inv_h = self._solve_a(h_a)
        if self.s_chol is None:
            return a_inv_h, np.zeros(0)
        x_b = linalg.cho_solve((self.s_chol, True), h_b - self.w.T @ h_a)
        return a_inv_h - self.w @ x_b, x_b

    def quad_form(self, g_alpha: np.ndarray, g_beta: np.ndarray) -> float:
        """g' Cov(alpha, beta) g for a gradient g on the reported parameter scale."""
        ratio = self.center / self.scale
        h_a = np.asarray(g_alpha, float)
        h_b = np.asarray(g_beta, float) / self.scale - ratio * h_a.sum()
        x_a, x_b = self._solve_internal(h_a, h_b)
        return float(h_a @ x_a + h_b @ x_b)

    def slope_cov_internal(self) -> np.ndarray:
        """S^{-1}, the slope block of J^{-1} on the internal scale."""
        if self.s_chol is None:
            return np.zeros((0, 0))
        return _schur_inverse(self.s_chol)

    def beta_cov(self) -> np.ndarray:
        return self.slope_cov_internal() / np.outer(self.scale, self.scale)

    def linear_predictor_var(self, x: np.ndarray) -> np.ndarray:
        """Var(alpha_j + x'beta) for every j, O(k p^2): diag(A^{-1})_j + (W_j - z)' S^{-1} (W_j - z)."""
        if self.s_chol is None:
            return self.a_inv_diag.copy()
        z = (np.asarray(x, float) - self.center) / self.scale
        r = self.w - z
        return self.a_inv_diag + np.einsum("ij,jk,ik->i", r, self.slope_cov_internal(), r)


@dataclass(frozen=True, eq=False)
class OrdinalFit(FitRecord):
    """A proportional-odds fit, P(Y >= levels[j] | x) = expit(alpha[j-1] + x'beta).

    Always converged unless the caller passed raise_on_nonconvergence=False
    (then see ``converged`` and ``message``).

    ``alpha`` has k - 1 strictly decreasing entries (cut points in the
    logit P(Y <= y) = zeta - x'beta form are ``-alpha``). ``loglik`` is the
    weighted log-likelihood sum_i w_i log P(Y = y_i | x_i); ``n`` counts rows
    with positive weight and ``weight_total`` their summed weights.
    ``gradient_norm`` is max |score| at the estimate on the reported scale and
    ``newton_decrement`` is g' J^{-1} g there (twice the predicted remaining
    gain in log-likelihood). Its :class:`~auditor.stats.fitrecord.FitRecord` parameters are the slopes
    ``beta`` (normal-theory Wald inference), addressed by name or position.
    """

    levels: np.ndarray
    alpha: np.ndarray
    alpha_se: np.ndarray
    beta: np.ndarray
    beta_se: np.ndarray
    beta_cov: np.ndarray
    names: tuple[str, ...]
    loglik: float
    n_iter: int
    converged: bool
    n: int
    weight_total: float
    gradient_norm: float
    newton_decrement: float
    message: str
    _curvature: _Curvature = field(repr=False, compare=False)

    @property
    def deviance(self) -> float:
        """-2 loglik."""
        return -2.0 * self.loglik

    @property
    def n_params(self) -> int:
        return self.alpha.size + self.beta.size

    @property
    def params(self) -> np.ndarray:
        return self.beta

    @property
    def se(self) -> np.ndarray:
        return self.beta_se

    def index(self, i: int | str) -> int:
        if isinstance(i, str):
            if i not in self.names:
                raise KeyError(f"no covariate named {i!r}; known: {self.names}")
            return self.names.index(i)
        if not -self.beta.size <= i < self.beta.size:
            raise IndexError(f"slope index {i} out of range for {self.beta.size} slopes")
        return int(i) % self.beta.size

    def odds_ratio(self, i: int | str, level: float = 0.95) -> OddsRatio:
        """exp(beta_i): the common odds ratio of Y >= y_j for every j, with exp(Wald limits)."""
        w = self.wald(i, level)
        return OddsRatio(w.name, math.exp(w.estimate), math.exp(w.lower), math.exp(w.upper), level)


# --------------------------------------------------------------------------
# Input preparation
# --------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class _Data:
    """Rows with positive weight, sorted by outcome category, covariates standardised."""

    codes: np.ndarray
    w: np.ndarray
    z: np.ndarray
    starts: np.ndarray
    levels: np.ndarray
    names: tuple[str, ...]
    center: np.ndarray
    scale: np.ndarray
    upper: slice  # rows with a finite upper bound alpha_c (category c >= 1)
    lower: slice  # rows with a finite lower bound alpha_{c+1} (category c <= k-2)
    upper_index: np.ndarray  # alpha index (0-based) of alpha_c for `upper` rows
    lower_index: np.ndarray  # alpha index (0-based) of alpha_{c+1} for `lower` rows

    @property
    def n(self) -> int:
        return self.codes.size

    @property
    def k(self) -> int:
        return self.levels.size

    @property
    def p(self) -> int:
        return self.z.shape[1]


def _as_outcome(y) -> tuple[np.ndarray, np.ndarray | None]:
    """Validated outcome values, plus the category labels when y is an ordered categorical.

    An ordered (pandas) categorical is represented by its integer codes so that
    its declared order, not the alphabetical order of its labels, ranks the
    levels. Any other input is ranked by the natural sort of its values.
    """
    dtype = getattr(y, "dtype", None)
    if getattr(dtype, "name", None) == "category":
        if not dtype.ordered:
            raise OrdinalFitError("y is an unordered categorical, so the order of its levels is undefined; make it ordered.")
        codes = np.asarray(y.cat.codes if hasattr(y, "cat") else y.codes)
        if np.any(codes < 0):
            raise OrdinalFitError("y contains missing categories; remove them before fitting.", "nonfinite")
        return codes, np.asarray(dtype.categories)
    y = np.asarray(y)
    if y.ndim != 1:
        raise OrdinalFitError(f"y must be one-dimensional, got shape {y.shape}.")
    if y.dtype.kind in "fc":
        if not np.all(np.isfinite(y)):
            raise OrdinalFitError("y contains NaN or infinite values; remove or impute them before fitting.", "nonfinite")
    elif y.dtype.kind == "O":
        missing = [v is None or (isinstance(v, float) and not math.isfinite(v)) for v in y]
        if any(missing):
            raise OrdinalFitError("y contains missing (None/NaN) values; remove them before fitting.", "nonfinite")
    return y, None


def _encode_outcome(values: np.ndarray, categories: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """Sorted distinct observed levels and each row's 0-based level index (no empty categories)."""
    try:
        levels, codes = np.unique(values, return_inverse=True)
    except TypeError as exc:
        raise OrdinalFitError(f"y values cannot be sorted: {exc}.") from exc
    if categories is not None:
        levels = categories[levels]
    return levels, codes.reshape(-1)


def _as_design(X, n: int) -> np.ndarray:
    if X is None:
        return np.zeros((n, 0))
    try:
        X = np.asarray(X, dtype=float)
    except (TypeError, ValueError) as exc:
        raise OrdinalFitError(f"X must be numeric: {exc}.") from exc
    if X.ndim == 1 and X.size == 0:
        X = X.reshape(n, 0)
    if X.ndim != 2 or X.shape[0] != n:
        raise OrdinalFitError(f"X must be a 2-d array with {n} rows, got shape {X.shape}.")
    if not np.all(np.isfinite(X)):
        bad = np.flatnonzero(~np.all(np.isfinite(X), axis=0))
        raise OrdinalFitError(
            f"X contains NaN or infinite values in column(s) {bad.tolist()}; remove or impute them before fitting.",
            "nonfinite",
        )
    return X


def _as_weights(weights, n: int) -> np.ndarray:
    if weights is None:
        return np.ones(n)
    w = np.asarray(weights, dtype=float)
    if w.shape != (n,):
        raise OrdinalFitError(f"weights must have shape ({n},), got {w.shape}.")
    if not np.all(np.isfinite(w)):
        raise OrdinalFitError("weights contain NaN or infinite values.", "nonfinite")
    if np.any(w < 0):
        raise OrdinalFitError("weights must be non-negative frequency weights.")
    if not np.any(w > 0):
        raise OrdinalFitError("all weights are zero, so there is nothing to fit.", "levels")
    return w


def _resolve_names(names, X, p: int) -> tuple[str, ...]:
    if names is None:
        columns = getattr(X, "columns", None)
        names = [str(c) for c in columns] if columns is not None else [f"x{i + 1}" for i in range(p)]
    names = tuple(str(s) for s in names)
    if len(names) != p:
        raise OrdinalFitError(f"names has {len(names)} entries but X has {p} columns.")
    if len(set(names)) != p:
        raise OrdinalFitError("covariate names must be unique.")
    return names


def _check_rank(x: np.ndarray, names: tuple[str, ...]) -> tuple[np.ndarray, np.ndarray]:
    """Centre and scale X, refusing a design that is singular together with the intercepts."""
    n, p = x.shape
    if p == 0:
        return np.zeros(0), np.ones(0)
    center = x.mean(axis=0)
    scale = x.std(axis=0)
    constant = np.flatnonzero(scale <= 1e-12 * np.maximum(1.0, np.abs(center)))
    if constant.size:
        cols = ", ".join(repr(names[j]) for j in constant)
        raise OrdinalFitError(
            f"covariate {cols} is constant over the fitted rows, so it duplicates the intercepts (rank-deficient X).",
            "rank",
        )
    if p + 1 > n:
        raise OrdinalFitError(f"X has {p} columns but only {n} rows with positive weight (rank-deficient X).", "rank")
    z = (x - center) / scale
    _, r, piv = linalg.qr(z, mode="economic", pivoting=True)
    diag = np.abs(np.diag(r))
    tol = max(n, p) * np.finfo(float).eps * diag[0] * 10.0
    rank = int(np.sum(diag > tol))
    if rank < p:
        dependent = ", ".join(repr(names[j]) for j in sorted(piv[rank:]))
        raise OrdinalFitError(
            f"X is rank-deficient (rank {rank + 1} of {p + 1} with the intercept): column(s) {dependent} "
            "are linear combinations of the others.",
            "rank",
        )
    return center, scale


def _prepare(y, X, weights, names) -> _Data:
    values, categories = _as_outcome(y)
    n_all = values.size
    x = _as_design(X, n_all)
    w = _as_weights(weights, n_all)
    names = _resolve_names(names, X, x.shape[1])
    keep = w > 0
    x, w = x[keep], w[keep]
    levels, codes = _encode_outcome(values[keep], categories)
    if levels.size < 2:
        raise OrdinalFitError(
            f"y has {levels.size} distinct value(s) among rows with positive weight; at least 2 are needed.", "levels"
        )
    center, scale = _check_rank(x, names)
    order = np.argsort(codes, kind="stable")
    codes, w = codes[order], w[order]
    z = ((x - center) / scale)[order] if x.shape[1] else np.zeros((codes.size, 0))
    k = levels.size
    starts = np.searchsorted(codes, np.arange(k))
    upper = slice(int(starts[1]), codes.size)
    lower = slice(0, int(starts[k - 1]))
    return _Data(
        codes=codes,
        w=w,
        z=np.ascontiguousarray(z),
        starts=starts,
        levels=levels,
        names=names,
        center=center,
        scale=scale,
        upper=upper,
        lower=lower,
        upper_index=codes[upper] - 1,
        lower_index=codes[lower],
    )


# --------------------------------------------------------------------------
# Log-likelihood, score and information
# --------------------------------------------------------------------------


def _log1mexp(d: np.ndarray) -> np.ndarray:
    """log(1 - exp(-d)) for d > 0, switching at log 2 (Maechler 2012, "Accurately computing log(1 - exp(-|a|))", Rmpfr vignette)."""
    d = np.asarray(d, dtype=float)
    out = np.empty_like(d)
    small = d <= _LN2
    out[small] = np.log(-np.expm1(-d[small]))
    out[~small] = np.log1p(-np.exp(-d[~small]))
    return out


def _gap_log_factor(data: _Data, alpha: np.ndarray) -> np.ndarray:
    """Per-row log(1 - exp(-(alpha_c - alpha_{c+1}))); zero for the two end categories."""
    per_category = np.zeros(data.k)
    per_category[1:-1] = _log1mexp(alpha[:-1] - alpha[1:])
    return per_category[data.codes]


@dataclass
class _RowTerms:
    """Per-row pieces of log p_i, p_i = F(u_i) - F(v_i), u_i = alpha_c + eta_i, v_i = alpha_{c+1} + eta_i."""

    logp: np.ndarray
    log_f_u: np.ndarray  # log F(u), 0 where u = +inf
    log_f_neg_v: np.ndarray  # log F(-v), 0 where v = -inf
    gap: np.ndarray
    u: np.ndarray  # on the `upper` rows only
    v: np.ndarray  # on the `lower` rows only


def _row_terms(data: _Data, alpha: np.ndarray, b: np.ndarray) -> _RowTerms:
    """log p_i = log F(u) + log F(-v) + log(1 - e^{-(u - v)}), exact and overflow-free."""
    eta = data.z @ b if data.p else np.zeros(data.n)
    u = alpha[data.upper_index] + eta[data.upper]
    v = alpha[data.lower_index] + eta[data.lower]
    log_f_u = np.zeros(data.n)
    log_f_u[data.upper] = special.log_expit(u)
    log_f_neg_v = np.zeros(data.n)
    log_f_neg_v[data.lower] = special.log_expit(-v)
    gap = _gap_log_factor(data, alpha)
    return _RowTerms(log_f_u + log_f_neg_v + gap, log_f_u, log_f_neg_v, gap, u, v)


def _loglik(data: _Data, alpha: np.ndarray, b: np.ndarray) -> float:
    return float(data.w @ _row_terms(data, alpha, b).logp)


@dataclass
class _Evaluation:
    loglik: float
    max_logp: float
    g_alpha: np.ndarray
    g_beta: np.ndarray
    a_diag: np.ndarray
    a_off: np.ndarray
    b_block: np.ndarray
    d_block: np.ndarray


def _sum_by_category(data: _Data, *columns: np.ndarray) -> list[np.ndarray]:
    """Sums within each outcome category of 1-d and 2-d per-row arrays (rows sorted by category)."""
    if data.k == data.n:  # one row per category, as for a continuous outcome without ties
        return list(columns)
    widths = [1 if c.ndim == 1 else c.shape[1] for c in columns]
    summed = np.add.reduceat(np.column_stack(columns), data.starts, axis=0)
    edges = np.cumsum([0] + widths)
    return [summed[:, lo] if c.ndim == 1 else summed[:, lo:hi] for c, lo, hi in zip(columns, edges[:-1], edges[1:])]


def _evaluate(data: _Data, alpha: np.ndarray, b: np.ndarray) -> _Evaluation:
    """Log-likelihood, score and observed information (intercept block tridiagonal).

    With a = f(u)/p, b = f(v)/p (f = F(1 - F) the logistic density) the per-row
    derivatives are d/du = a, d/dv = -b, d/deta = F(-u) - F(v),
    -d2/du2 = f(u) + ab, -d2/dv2 = f(v) + ab, -d2/dudv = -ab,
    -d2/(du deta) = f(u), -d2/(dv deta) = f(v), -d2/deta2 = f(u) + f(v).
    These follow from (f(u) - f(v)) / (F(u) - F(v)) = 1 - F(u) - F(v) and keep
    every information entry a sum of non-negative terms.
    """
    t = _row_terms(data, alpha, b)
    n, up, lo = data.n, data.upper, data.lower
    log_f_neg_u = t.log_f_u[up] - t.u
    log_f_v = t.log_f_neg_v[lo] + t.v
    a = np.zeros(n)
    a[up] = np.exp(log_f_neg_u - t.log_f_neg_v[up] - t.gap[up])
    bb = np.zeros(n)
    bb[lo] = np.exp(log_f_v - t.log_f_u[lo] - t.gap[lo])
    f_u = np.zeros(n)
    f_u[up] = np.exp(t.log_f_u[up] + log_f_neg_u)
    f_v = np.zeros(n)
    f_v[lo] = np.exp(log_f_v + t.log_f_neg_v[lo])
    score_eta = np.zeros(n)
    score_eta[up] = np.exp(log_f_neg_u)
    score_eta[lo] -= np.exp(log_f_v)

    w, z = data.w, data.z
    wf_u, wf_v = w * f_u, w * f_v
    sum_a, sum_b, sum_fu, sum_fv, sum_ab, sum_zfu, sum_zfv = _sum_by_category(
        data, w * a, w * bb, wf_u, wf_v, w * a * bb, z * wf_u[:, None], z * wf_v[:, None]
    )
    g_alpha = sum_a[1:] - sum_b[:-1]
    a_diag = (sum_fu + sum_ab)[1:] + (sum_fv + sum_ab)[:-1]
    a_off = -sum_ab[1:-1]
    b_block = sum_zfu[1:] + sum_zfv[:-1]
    g_beta = z.T @ (w * score_eta)
    d_block = (z * (wf_u + wf_v)[:, None]).T @ z
    return _Evaluation(
        loglik=float(w @ t.logp),
        max_logp=float(t.logp.max()),
        g_alpha=g_alpha,
        g_beta=g_beta,
        a_diag=a_diag,
        a_off=a_off,
        b_block=b_block,
        d_block=d_block,
    )


class _SingularInformation(Exception):
    """The observed information is not numerically positive definite."""


def _factorise(ev: _Evaluation) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """Banded Cholesky of A, W = A^{-1} B and the lower Cholesky factor of S = D - B'W."""
    m = ev.a_diag.size
    banded = np.zeros((2, m))
    banded[1] = ev.a_diag
    banded[0, 1:] = ev.a_off
    try:
        a_chol = linalg.cholesky_banded(banded, lower=False, check_finite=False)
    except linalg.LinAlgError as exc:
        raise _SingularInformation(str(exc)) from exc
    if not np.all(np.isfinite(a_chol)):
        raise _SingularInformation("non-finite intercept factor")
    if ev.b_block.shape[1] == 0:
        return a_chol, ev.b_block, None
    w = linalg.cho_solve_banded((a_chol, False), ev.b_block, check_finite=False)
    schur = ev.d_block - ev.b_block.T @ w
    try:
        s_chol = linalg.cholesky(schur, lower=True, check_finite=False)
    except linalg.LinAlgError as exc:
        raise _SingularInformation(str(exc)) from exc
    return a_chol, w, s_chol


def _schur_inverse(s_chol: np.ndarray) -> np.ndarray:
    """S^{-1} from its lower Cholesky factor (p x p, p small)."""
    return linalg.cho_solve((s_chol, True), np.eye(s_chol.shape[0]), check_finite=False)


def _newton_step(
    ev: _Evaluation, factors: tuple[np.ndarray, np.ndarray, np.ndarray | None]
) -> tuple[np.ndarray, np.ndarray, float]:
    """Solve J (da, db) = g by block elimination; also return g' J^{-1} g."""
    a_chol, w, s_chol = factors
    a_inv_g = linalg.cho_solve_banded((a_chol, False), ev.g_alpha, check_finite=False)
    if s_chol is None:
        db = np.zeros(0)
        da = a_inv_g
    else:
        db = linalg.cho_solve((s_chol, True), ev.g_beta - w.T @ ev.g_alpha, check_finite=False)
        da = a_inv_g - w @ db
    decrement = float(ev.g_alpha @ da + ev.g_beta @ db)
    return da, db, decrement


def _tridiagonal_inverse_diagonal(a_chol: np.ndarray) -> np.ndarray:
    """diag(A^{-1}) from A = U'U, U upper bidiagonal: z_i = 1/u_i^2 + (s_i/u_i)^2 z_{i+1}.

    A backward recursion of positive terms (Takahashi, Fagan and Chin 1973), O(k).
    """
    u = a_chol[1].tolist()
    s = a_chol[0, 1:].tolist()
    m = len(u)
    out = [0.0] * m
    acc = 1.0 / (u[m - 1] * u[m - 1])
    out[m - 1] = acc
    for i in range(m - 2, -1, -1):
        r = s[i] / u[i]
        acc = 1.0 / (u[i] * u[i]) + r * r * acc
        out[i] = acc
    return np.asarray(out)


# --------------------------------------------------------------------------
# Separation
# --------------------------------------------------------------------------


def _separation_direction(data: _Data, hint: np.ndarray | None = None) -> np.ndarray | None:
    """Return a slope direction d != 0 along which the log-likelihood never falls, or None.

    Row i's term log(F(u_i) - F(v_i)) never decreases along (da, db) exactly
    when da_c + z_i'db >= 0 >= da_{c+1} + z_i'db. Eliminating da, such a
    direction exists iff the score s = Z db satisfies
    max_{i in category j-1} s_i <= min_{l in category j} s_l at every boundary j,
    i.e. s is weakly ordered like Y; with X of full rank any db != 0 then
    gives a strictly increasing likelihood, so the estimate is infinite
    (complete or quasi-complete separation; Albert and Anderson 1984,
    Biometrika 71:1-10, for the binary case). Existence is decided by the
    linear programme max c'd over |d| <= 1 subject to (z_l - z_i)'d >= 0 for
    adjacent-category pairs, where c sums z_l - z_i over all such pairs (so
    c'd > 0 for every nonzero feasible d). The pair constraints are generated
    lazily: solve with the pairs found so far, add the most violated pair at
    every boundary the solution breaks, repeat. Each programme has only p
    variables.
    """
    if data.p == 0:
        return None
    z, starts, k = data.z, data.starts, data.k
    counts = np.diff(np.append(starts, data.n)).astype(float)
    sums = np.add.reduceat(z, starts, axis=0)
    objective = (counts[:-1, None] * sums[1:] - counts[1:, None] * sums[:-1]).sum(axis=0)
    scale = np.abs(objective).sum()
    if scale == 0:
        return None
    objective = objective / scale
    d = objective.copy() if hint is None else np.asarray(hint, float)
    rows: list[np.ndarray] = []
    for _ in range(_SEPARATION_ROUNDS):
        s = z @ d
        top = np.maximum.reduceat(s, starts)
        bottom = np.minimum.reduceat(s, starts)
        tol = _SEPARATION_FEASIBILITY * max(1.0, float(np.abs(s).max()))
        violated = np.flatnonzero(top[:-1] - bottom[1:] > tol)
        if rows and violated.size == 0:
            return d if float(objective @ d) > _SEPARATION_OBJECTIVE else None
        arg_top = _first_index_where(s == top[data.codes], data.codes, k)
        arg_bottom = _first_index_where(s == bottom[data.codes], data.codes, k)
        boundary = violated if violated.size else np.arange(k - 1)
        rows.append(z[arg_bottom[boundary + 1]] - z[arg_top[boundary]])
        res = optimize.linprog(
            -objective, A_ub=-np.vstack(rows), b_ub=np.zeros(sum(r.shape[0] for r in rows)),
            bounds=(-1.0, 1.0), method="highs",
        )
        if res.status != 0 or -res.fun <= _SEPARATION_OBJECTIVE:
            return None
        d = res.x
    return None


def _first_index_where(mask: np.ndarray, codes: np.ndarray, k: int) -> np.ndarray:
    """For each category, the first row index (rows sorted by category) where mask holds."""
    hits = np.flatnonzero(mask)
    out = np.zeros(k, dtype=int)
    cats, first = np.unique(codes[hits], return_index=True)
    out[cats] = hits[first]
    return out


def _raise_if_separated(data: _Data, hint: np.ndarray | None = None) -> None:
    d = _separation_direction(data, hint)
    if d is None:
        return
    involved = [data.names[j] for j in np.flatnonzero(np.abs(d) > 1e-6 * np.abs(d).max())]
    which = ", ".join(repr(s) for s in involved)
    raise OrdinalFitError(
        f"complete or quasi-complete separation: a linear combination of {which} orders the outcome perfectly "
        "(no row of a lower category scores above any row of the next), so the likelihood has no finite "
        "maximum and at least one slope is infinite.",
        "separation",
    )


# --------------------------------------------------------------------------
# Fitting
# --------------------------------------------------------------------------


def _start_alpha(data: _Data) -> np.ndarray:
    """Empirical logits of P(Y >= y_j): the exact null-model estimate, strictly decreasing."""
    per_cat = np.add.reduceat(data.w, data.starts)
    at_or_above = np.cumsum(per_cat[::-1])[::-1][1:] / per_cat.sum()
    return special.logit(at_or_above)


def _line_search(data, alpha, b, da, db, loglik) -> tuple[np.ndarray, np.ndarray, float] | None:
    """Halve the Newton step until the intercepts stay strictly decreasing and loglik does not fall."""
    slack = 1e-12 * (abs(loglik) + 1.0)
    t = 1.0
    for _ in range(_MAX_HALVINGS):
        alpha_t = alpha + t * da
        if np.all(np.diff(alpha_t) < 0) and np.all(np.isfinite(alpha_t)):
            b_t = b + t * db
            ll_t = _loglik(data, alpha_t, b_t)
            if np.isfinite(ll_t) and ll_t >= loglik - slack:
                return alpha_t, b_t, ll_t
        t *= 0.5
    return None


def _converged(rel_change: float, decrement: float, loglik: float, tol: float) -> bool:
    """Relative loglik change <= tol and Newton decrement g'J^{-1}g <= tol (1 + |loglik|)."""
    return rel_change <= tol and decrement <= tol * (1.0 + abs(loglik))


def _suspicious(ev: _Evaluation, b: np.ndarray, factors) -> bool:
    """Cheap screens, applied to every iterate and to the final fit, that trigger the exact separation test."""
    if ev.max_logp > _SUSPECT_LOG_PROB:
        return True
    if b.size and np.max(np.abs(b)) > _SUSPECT_SLOPE:
        return True
    s_chol = factors[2]
    if s_chol is not None:
        if np.max(np.sqrt(np.diag(_schur_inverse(s_chol)))) > _SUSPECT_SE:
            return True
    return False


class _SeparationGuard:
    """Runs the exact separation test at most once per data set (it depends on the data only)."""

    def __init__(self, data: _Data) -> None:
        self.data = data
        self.checked = False

    def check(self, hint: np.ndarray) -> None:
        if not self.checked:
            self.checked = True
            _raise_if_separated(self.data, hint)


@dataclass
class _NewtonState:
    alpha: np.ndarray
    b: np.ndarray
    ev: _Evaluation
    factors: tuple
    n_iter: int
    converged: bool
    message: str


def _plural(count: int, word: str) -> str:
    return f"{count} {word}" + ("" if count == 1 else "s")


def _newton(data: _Data, max_iter: int, tol: float, guard: _SeparationGuard) -> _NewtonState:
    """Newton-Raphson with step halving from the null-model estimate (alpha = empirical logits, b = 0)."""
    alpha, b = _start_alpha(data), np.zeros(data.p)
    rel_change = math.inf
    n_iter = 0
    while True:
        ev = _evaluate(data, alpha, b)
        try:
            factors = _factorise(ev)
        except _SingularInformation:
            guard.check(b)
            raise OrdinalFitError(
                f"the information matrix became numerically singular after {_plural(n_iter, 'iteration')}, "
                "so the Newton system cannot be solved.",
                "nonconvergence",
            ) from None
        da, db, decrement = _newton_step(ev, factors)
        state = _NewtonState(alpha, b, ev, factors, n_iter, False, "")
        if _converged(rel_change, decrement, ev.loglik, tol):
            state.converged, state.message = True, f"converged in {_plural(n_iter, 'iteration')}"
            return state
        if n_iter >= max_iter:
            state.message = (
                f"no convergence within {_plural(max_iter, 'Newton-Raphson iteration')} (relative log-likelihood "
                f"change {rel_change:.2g}, Newton decrement {decrement:.2g})"
            )
            return state
        if _suspicious(ev, b, factors):
            guard.check(b)
        step = _line_search(data, alpha, b, da, db, ev.loglik)
        if step is None:
            if decrement <= tol * (1.0 + abs(ev.loglik)):
                state.converged = True
                state.message = f"converged in {_plural(n_iter, 'iteration')} (no further increase possible)"
            else:
                state.message = f"step halving could not increase the log-likelihood at iteration {n_iter + 1}"
            return state
        alpha, b, new_loglik = step
        rel_change = abs(new_loglik - ev.loglik) / (1.0 + abs(ev.loglik))
        n_iter += 1


def fit_proportional_odds(
    y,
    X=None,
    weights=None,
    *,
    names: Sequence[str] | None = None,
    max_iter: int = 100,
    tol: float = 1e-10,
    raise_on_nonconvergence: bool = True,
) -> OrdinalFit:
    """Maximum-likelihood proportional-odds fit, P(Y >= y_j | x) = expit(alpha_j + x'beta).

    y: 1-d array of sortable values (codes or a continuous measurement); each
    observed distinct value is a level. X: (n, p) covariates without a constant
    column (None or p = 0 fits the null model). weights: non-negative frequency
    weights (rows with weight 0 are ignored).

    Newton-Raphson with step halving from alpha = empirical logits, beta = 0.
    Converged when |Delta loglik| / (1 + |loglik|) <= tol and
    g'J^{-1}g <= tol (1 + |loglik|). Raises OrdinalFitError for unusable
    input, fewer than two levels, rank-deficient X, separation, or (unless
    raise_on_nonconvergence=False) failure to converge within max_iter steps.
    """
    if max_iter < 1:
        raise OrdinalFitError("max_iter must be at least 1.")
    if not tol > 0:
        raise OrdinalFitError("tol must be positive.")
    data = _prepare(y, X, weights, names)
    guard = _SeparationGuard(data)
    state = _newton(data, max_iter, tol, guard)
    if not state.converged or _suspicious(state.ev, state.b, state.factors):
        guard.check(state.b)
    if not state.converged and raise_on_nonconvergence:
        raise OrdinalFitError(f"the proportional-odds fit did not converge: {state.message}.", "nonconvergence")
    return _assemble(data, state)


def _assemble(data: _Data, state: _NewtonState) -> OrdinalFit:
    """Map the internal estimate and its factorised information to the reported scale."""
    ev = state.ev
    a_chol, w, s_chol = state.factors
    curvature = _Curvature(
        a_chol=a_chol,
        w=w,
        s_chol=s_chol,
        a_inv_diag=_tridiagonal_inverse_diagonal(a_chol),
        center=data.center,
        scale=data.scale,
    )
    beta = state.b / data.scale if data.p else np.zeros(0)
    alpha = state.alpha - float(data.center @ beta)
    beta_cov = curvature.beta_cov()
    alpha_se = np.sqrt(curvature.linear_predictor_var(np.zeros(data.p)))
    g_beta = data.center * ev.g_alpha.sum() + data.scale * ev.g_beta if data.p else np.zeros(0)
    gradient_norm = float(np.max(np.abs(np.concatenate([ev.g_alpha, g_beta]))))
    _, _, decrement = _newton_step(ev, state.factors)
    return OrdinalFit(
        levels=data.levels,
        alpha=alpha,
        alpha_se=alpha_se,
        beta=beta,
        beta_se=np.sqrt(np.diag(beta_cov)),
        beta_cov=beta_cov,
        names=data.names,
        loglik=ev.loglik,
        n_iter=state.n_iter,
        converged=state.converged,
        n=data.n,
        weight_total=float(data.w.sum()),
        gradient_norm=gradient_norm,
        newton_decrement=decrement,
        message=state.message,
        _curvature=curvature,
    )


# --------------------------------------------------------------------------
# Post-fit summaries
# --------------------------------------------------------------------------


def _normal_quantile(level: float) -> float:
    if not 0.0 < level < 1.0:
        raise ValueError(f"confidence level must be in (0, 1), got {level}.")
    return float(stats.norm.ppf(0.5 + level / 2.0))


def _covariate_vector(fit: OrdinalFit, x) -> np.ndarray:
    x = np.zeros(0) if x is None else np.asarray(x, dtype=float).reshape(-1)
    if x.size != fit.beta.size:
        raise ValueError(f"covariate vector has {x.size} entries; the fit has {fit.beta.size} slopes.")
    if not np.all(np.isfinite(x)):
        raise ValueError("covariate vector contains NaN or infinite values.")
    return x


def _exceedance_curve(fit: OrdinalFit, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Linear predictors lp_j = alpha_j + x'beta and S_j = P(Y >= y_j | x), j = 1..k-1."""
    lp = fit.alpha + float(x @ fit.beta)
    return lp, special.expit(lp)


def lr_test(reduced: OrdinalFit, full: OrdinalFit) -> LikelihoodRatioTest:
    """Likelihood-ratio test of nested fits on the same rows: chi2 = 2 (ll_full - ll_reduced).

    The reduced fit first, as everywhere (:func:`auditor.stats.lrtest.likelihood_ratio`). df is the
    difference in the number of slopes; p = chi2 survival function (Wilks 1938). The caller
    guarantees the nesting; levels, row counts and total weight are checked to match.
    """
    if not np.array_equal(full.levels, reduced.levels) or full.n != reduced.n:
        raise ValueError("the two fits do not use the same outcome levels and rows.")
    if not math.isclose(full.weight_total, reduced.weight_total, rel_tol=1e-12):
        raise ValueError("the two fits do not use the same total weight.")
    return likelihood_ratio(reduced.loglik, full.loglik, full.beta.size - reduced.beta.size)


def prob_exceeds(fit: OrdinalFit, x, thresholds, level: float = 0.95) -> ExceedanceProbabilities:
    """P(Y > t | x) for each t, with limits expit(lp +/- z se(lp)) (delta method on the logit scale).

    P(Y > t) = P(Y >= y_j) with y_j the smallest level above t; it is exactly 1
    below the lowest level and exactly 0 at or above the highest.
    """
    x = _covariate_vector(fit, x)
    t = np.asarray(thresholds).reshape(-1)
    q = _normal_quantile(level)
    j = np.searchsorted(fit.levels, t, side="right")  # number of levels <= t
    k = fit.levels.size
    lp, _ = _exceedance_curve(fit, x)
    inner = (j > 0) & (j < k)
    prob = np.where(j == 0, 1.0, 0.0)
    lower, upper = prob.copy(), prob.copy()
    if np.any(inner):
        idx = j[inner] - 1
        se = np.sqrt(fit._curvature.linear_predictor_var(x)[idx])
        prob[inner] = special.expit(lp[idx])
        lower[inner] = special.expit(lp[idx] - q * se)
        upper[inner] = special.expit(lp[idx] + q * se)
    return ExceedanceProbabilities(thresholds=t, probability=prob, lower=lower, upper=upper, level=level)


def _numeric_levels(fit: OrdinalFit) -> np.ndarray:
    if fit.levels.dtype.kind not in "iufb":
        raise ValueError("the outcome levels are not numeric, so a mean is not defined.")
    return fit.levels.astype(float)


def predicted_mean(fit: OrdinalFit, x, level: float = 0.95) -> PredictedValue:
    """E(Y | x) = y_0 + sum_j (y_j - y_{j-1}) S_j with a delta-method interval.

    The gradient is d/dalpha_j = (y_j - y_{j-1}) f_j and d/dbeta = x sum_j (y_j - y_{j-1}) f_j
    (f_j = S_j (1 - S_j)); its variance g' Cov g is computed from the factorised
    information in O(k p), without forming the covariance matrix.
    """
    x = _covariate_vector(fit, x)
    values = _numeric_levels(fit)
    steps = np.diff(values)
    _, s = _exceedance_curve(fit, x)
    mean = float(values[0] + steps @ s)
    g_alpha = steps * s * (1.0 - s)
    g_beta = x * g_alpha.sum()
    se = math.sqrt(max(fit._curvature.quad_form(g_alpha, g_beta), 0.0))
    q = _normal_quantile(level)
    return PredictedValue(mean, se, mean - q * se, mean + q * se, level, "delta method")


def _median_index(lp: np.ndarray) -> int:
    """Index m of the smallest level with P(Y <= y_m) >= 0.5, i.e. the first j with lp_j <= 0, minus one."""
    below = np.flatnonzero(lp <= 0.0)
    return int(below[0]) if below.size else lp.size


def predicted_median(fit: OrdinalFit, x, level: float = 0.95) -> PredictedValue:
    """Smallest level y with P(Y <= y | x) >= 0.5, with an interval from the exceedance band.

    The limits are the medians of the curves expit(lp_j -/+ z se(lp_j)): the
    pointwise band of P(Y >= y_j | x) is inverted at 0.5 (a test-inversion
    interval; pointwise, hence approximate). ``se`` is NaN: the median of a
    discrete distribution has no delta-method standard error.
    """
    x = _covariate_vector(fit, x)
    lp, _ = _exceedance_curve(fit, x)
    se = np.sqrt(fit._curvature.linear_predictor_var(x))
    q = _normal_quantile(level)
    levels = fit.levels
    estimate = levels[_median_index(lp)]
    lower = levels[_median_index(lp - q * se)]
    upper = levels[_median_index(lp + q * se)]
    as_float = lambda v: float(v) if levels.dtype.kind in "iufb" else v  # noqa: E731
    return PredictedValue(as_float(estimate), math.nan, as_float(lower), as_float(upper), level, "inverted pointwise band")


def concordance_probability(log_odds_ratio: float, *, method: str = "power") -> float:
    """Concordance c = P(Y1 > Y0) + 0.5 P(Y1 = Y0) implied by a common odds ratio OR = exp(log_odds_ratio).

    method="power": the approximation c ~ OR^0.66 / (1 + OR^0.66), an empirical
    fit to proportional-odds models published in the ordinal-outcome literature
    (a rule of thumb: a convention with no source checked here). It ignores ties and the
    baseline distribution.
    method="continuous": the exact value for a continuous outcome without ties,
    c = OR (OR - 1 - log OR) / (OR - 1)^2 (from integrating
    S1 = OR S0 / (1 - S0 + OR S0) over a uniform S0; 0.5 at OR = 1).
    """
    if not math.isfinite(log_odds_ratio):
        raise ValueError("log odds ratio must be finite.")
    if method == "power":
        return float(special.expit(0.66 * log_odds_ratio))
    if method == "continuous":
        return _continuous_concordance(log_odds_ratio)
    raise ValueError(f"unknown method {method!r}; use 'power' or 'continuous'.")


def _continuous_concordance(b: float) -> float:
    """OR (OR - 1 - b) / (OR - 1)^2 with OR = e^b, written as (e^b - 1 - b) / ((e^b - 1)(1 - e^-b))."""
    if b < 0:
        return 1.0 - _continuous_concordance(-b)
    if b < 1e-4:
        return 0.5 + b / 6.0  # series: c = 1/2 + b/6 + O(b^3)
    if b > 700:
        return 1.0
    em1 = math.expm1(b)
    return (em1 - b) / (em1 * -math.expm1(-b))


def _full_curve(fit: OrdinalFit, x: np.ndarray) -> np.ndarray:
    """S_0..S_k with S_0 = 1 and S_k = 0."""
    _, s = _exceedance_curve(fit, x)
    return np.concatenate([[1.0], s, [0.0]])


def concordance_exact(fit: OrdinalFit, x_reference, arm_column: int | str, level: float = 0.95) -> ConcordanceEstimate:
    """P(Y1 > Y0) + 0.5 P(Y1 = Y0) between the fitted distributions with arm = 1 and arm = 0.

    Both distributions are taken at ``x_reference`` with its arm entry set to 1
    and 0. c = 0.5 sum_b P0_b (S1_b + S1_{b+1}); its gradient is
    d/dS1_j = 0.5 (P0_j + P0_{j-1}), d/dS0_j = 0.5 (S1_{j+1} - S1_{j-1}), chained
    through dS_j = f_j (dalpha_j + x'dbeta). The interval is delta-method on
    the logit of c. ``approximation`` repeats the OR^0.66 rule for comparison.
    """
    j_arm = fit.index(arm_column)
    x0 = _covariate_vector(fit, x_reference).copy()
    x1 = x0.copy()
    x0[j_arm], x1[j_arm] = 0.0, 1.0
    s0, s1 = _full_curve(fit, x0), _full_curve(fit, x1)
    p0 = s0[:-1] - s0[1:]
    c = float(0.5 * p0 @ (s1[:-1] + s1[1:]))
    f0 = s0[1:-1] * (1.0 - s0[1:-1])
    f1 = s1[1:-1] * (1.0 - s1[1:-1])
    d_s1 = 0.5 * (p0[1:] + p0[:-1])
    d_s0 = 0.5 * (s1[2:] - s1[:-2])
    g_alpha = d_s1 * f1 + d_s0 * f0
    g_beta = x1 * float(d_s1 @ f1) + x0 * float(d_s0 @ f0)
    se = math.sqrt(max(fit._curvature.quad_form(g_alpha, g_beta), 0.0))
    q = _normal_quantile(level)
    if 0.0 < c < 1.0:
        se_logit = se / (c * (1.0 - c))
        lower = float(special.expit(special.logit(c) - q * se_logit))
        upper = float(special.expit(special.logit(c) + q * se_logit))
    else:
        lower = upper = c
    approx = concordance_probability(float(fit.beta[j_arm]))
    return ConcordanceEstimate(c, se, lower, upper, level, approx)


# --------------------------------------------------------------------------
# Proportional-odds check
# --------------------------------------------------------------------------


def _choose_cuts(levels, per_level: np.ndarray, min_per_side: float, max_cut_points: int) -> np.ndarray:
    """Indices j (binary split Y >= levels[j]) with at least min_per_side weight on each side.

    When more qualify than max_cut_points, keep those whose share below is
    nearest the quantiles 1/(m+1), ..., m/(m+1) (deciles for m = 9).
    """
    below = np.cumsum(per_level)[:-1]
    total = per_level.sum()
    j = np.arange(1, levels.size)
    ok = (below >= min_per_side) & (total - below >= min_per_side)
    candidates, shares = j[ok], below[ok] / total
    if candidates.size <= max_cut_points:
        return candidates
    targets = np.arange(1, max_cut_points + 1) / (max_cut_points + 1)
    picked = {int(candidates[np.argmin(np.abs(shares - q))]) for q in targets}
    return np.array(sorted(picked))


def proportional_odds_check(
    y,
    X,
    arm_column: int | str,
    weights=None,
    *,
    names: Sequence[str] | None = None,
    min_per_side: float = 10,
    max_cut_points: int = 9,
    fit: OrdinalFit | None = None,
) -> ProportionalOddsCheck:
    """Compare the PO log odds ratio of one covariate with separate logistic fits at cut points.

    For each chosen level y_j the binary outcome 1{Y >= y_j} is regressed on the
    same covariates (this module's fitter with two levels is ordinary logistic
    regression). Under proportional odds every binary log OR estimates the
    same beta. The summary is the Wald-type heterogeneity statistic described
    on ProportionalOddsCheck; cut points whose binary fit fails (for example
    by separation) are reported with the failure reason and left out of it.
    ``min_per_side`` (default 10, a convention) is in weighted counts.
    """
    if fit is None:
        fit = fit_proportional_odds(y, X, weights, names=names)
    j_arm = fit.index(arm_column)
    values, categories = _as_outcome(y)
    n_all = values.size
    w_arr = _as_weights(weights, n_all)
    x_arr = _as_design(X, n_all)
    keep = w_arr > 0
    levels, codes = _encode_outcome(values[keep], categories)
    if not np.array_equal(levels, fit.levels):
        raise ValueError("the supplied fit does not have the levels of y.")
    per_level = np.bincount(codes, weights=w_arr[keep], minlength=levels.size)
    total = per_level.sum()
    po_log_or, po_se = float(fit.beta[j_arm]), float(fit.beta_se[j_arm])
    rows = []
    for j in _choose_cuts(levels, per_level, min_per_side, max_cut_points):
        n_below = float(per_level[:j].sum())
        binary = np.zeros(n_all)
        binary[keep] = (codes >= j).astype(float)
        try:
            bfit = fit_proportional_odds(binary, x_arr, w_arr, names=fit.names)
            est, se, failure = float(bfit.beta[j_arm]), float(bfit.beta_se[j_arm]), None
        except OrdinalFitError as exc:
            est, se, failure = math.nan, math.nan, exc.reason
        cut = levels[j].item() if hasattr(levels[j], "item") else levels[j]
        rows.append(CutPointComparison(cut, n_below / total, n_below, total - n_below, est, se, po_log_or, failure))
    usable = [r for r in rows if r.failure is None]
    if usable:
        b = np.array([r.binary_log_or for r in usable])
        inv_var = 1.0 / np.array([r.binary_se for r in usable]) ** 2
        pooled = float(inv_var @ b / inv_var.sum())
        chi2 = float(inv_var @ (b - pooled) ** 2)
        df = len(usable) - 1
        p_value = float(stats.chi2.sf(chi2, df)) if df > 0 else math.nan
    else:
        pooled, chi2, df, p_value = math.nan, math.nan, 0, math.nan
    return ProportionalOddsCheck(
        covariate=fit.names[j_arm],
        rows=tuple(rows),
        po_log_or=po_log_or,
        po_se=po_se,
        pooled_binary_log_or=pooled,
        heterogeneity_chi2=chi2 if df > 0 else math.nan,
        df=df,
        p_value=p_value,
    )
