"""Binary logistic regression by Newton-Raphson, likelihood-ratio tests and risk bands.

Model: P(Y = 1 | x) = expit(x'beta), fitted by maximising the exact Bernoulli log-likelihood

    l(beta) = sum_i [ y_i eta_i - log(1 + exp(eta_i)) ],   eta_i = x_i'beta,

with Newton-Raphson steps (X'WX)^{-1} X'(y - p), W = diag(p(1 - p)), halved whenever a step would
lower l. Columns other than the intercept are centred and scaled inside the fit for conditioning;
every reported coefficient and covariance is on the scale of the supplied columns. The inverse
information at the maximum is the covariance (McCullagh and Nelder, Generalized Linear Models,
2nd ed., 1989, section 4.4).

Nested models are compared by the likelihood-ratio chi-square 2 (l_full - l_reduced) on the
difference in parameter counts (Wilks 1938); models of any kind by AIC = -2 l + 2 k (Akaike 1974).
A fitted logit at new rows has variance x' V x (the delta method on the logit scale), and its band
is mapped to the risk scale through expit, so the band always lies in (0, 1).

Everything here is pure: arrays in, frozen dataclasses out; no verdicts, no plots.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import linalg, special, stats

from .fitrecord import FitRecord
from .lrtest import LRTest, likelihood_ratio  # noqa: F401  (LRTest is part of this module's interface)

INTERCEPT = "(intercept)"
SEPARATION_LOGIT = 25.0
"""Under separation the maximum likelihood estimate does not exist: Newton steps stay large while the
log-likelihood creeps towards its supremum, so the fit never converges, and some fitted risks run to
0 or 1 (Albert and Anderson 1984). A fit that has not converged with an in-sample |logit| above this
(a risk within 1.4e-11 of 0 or 1) is reported as separation. Convention of this tool."""


class SeparationError(ValueError):
    """The outcome is perfectly (or quasi-perfectly) predicted: the likelihood has no finite maximum."""


# --------------------------------------------------------------------------------------------- fit


@dataclass(frozen=True)
class LogisticFit(FitRecord):
    """A fitted logistic model: named coefficients, their covariance and the maximised log-likelihood
    (normal-theory Wald inference)."""

    names: tuple[str, ...]
    params: np.ndarray
    cov: np.ndarray
    loglik: float
    n: int
    n_events: int
    iterations: int

    @property
    def n_params(self) -> int:
        return len(self.names)

    @property
    def aic(self) -> float:
        """AIC = -2 l + 2 k (Akaike 1974)."""
        return -2.0 * self.loglik + 2.0 * self.n_params

    @property
    def se(self) -> np.ndarray:
        return np.sqrt(np.diag(self.cov))

    def indices(self, names) -> list[int]:
        return [self.index(n) for n in names]


def log_likelihood(y: np.ndarray, eta: np.ndarray) -> float:
    """Exact Bernoulli log-likelihood sum[y eta - log(1 + e^eta)], computed without overflow."""
    return float(np.sum(y * eta - np.logaddexp(0.0, eta)))


def _design(columns: dict[str, np.ndarray] | None, n: int, intercept: bool) -> tuple[list[str], np.ndarray]:
    names = ([INTERCEPT] if intercept else []) + list(columns or {})
    parts = ([np.ones(n)] if intercept else []) + [np.asarray(c, dtype=float) for c in (columns or {}).values()]
    if not parts:
        raise ValueError("a logistic model needs at least one column")
    X = np.column_stack(parts)
    if X.shape[0] != n:
        raise ValueError("every column must have one value per observation")
    if not np.all(np.isfinite(X)):
        raise ValueError("the design matrix has missing or infinite values")
    return names, X


def _standardiser(X: np.ndarray, intercept: bool) -> np.ndarray:
    """T such that X T has centred, unit-scale columns (the intercept kept): beta = T beta_std."""
    p = X.shape[1]
    T = np.eye(p)
    start = 1 if intercept else 0
    for j in range(start, p):
        sd = float(np.std(X[:, j]))
        if sd == 0.0:
            raise ValueError(f"column {j} is constant (collinear with the intercept)")
        T[j, j] = 1.0 / sd
        if intercept:
            T[0, j] = -float(np.mean(X[:, j])) / sd
    return T


def fit_logistic(y, columns: dict[str, np.ndarray] | None = None, intercept: bool = True,
                 max_iter: int = 100, tol: float = 1e-10) -> LogisticFit:
    """Maximum-likelihood logistic regression of a 0/1 ``y`` on named columns (intercept first).

    Newton-Raphson with step halving; stops when the largest standardised step is below ``tol`` and
    the log-likelihood has stopped changing. Raises :class:`SeparationError` when the maximum does
    not exist (separation) and ``ValueError`` for a singular design.
    """
    y = np.asarray(y, dtype=float)
    if y.ndim != 1 or not np.all(np.isin(y, (0.0, 1.0))):
        raise ValueError("the outcome must be a vector of 0/1 values")
    n = len(y)
    names, X = _design(columns, n, intercept)
    if n <= X.shape[1]:
        raise ValueError(f"{n} observations are too few for {X.shape[1]} parameters")
    events = int(y.sum())
    if events in (0, n):
        raise SeparationError("every observation has the same outcome")
    T = _standardiser(X, intercept)
    Z = X @ T
    if np.linalg.matrix_rank(Z) < Z.shape[1]:
        raise ValueError("the design matrix is singular (a column is collinear with others)")
    b = np.zeros(Z.shape[1])
    if intercept:
        b[0] = special.logit(y.mean())
    eta = Z @ b
    ll = log_likelihood(y, eta)
    converged = False
    it = 0
    for it in range(1, max_iter + 1):
        p = special.expit(eta)
        w = p * (1.0 - p)
        info = Z.T @ (Z * w[:, None])
        try:
            step = linalg.cho_solve(linalg.cho_factor(info), Z.T @ (y - p))
        except linalg.LinAlgError as exc:
            raise SeparationError("the information matrix is not positive definite "
                                  "(fitted risks at 0 or 1)") from exc
        new_b, new_ll, shrink = b + step, log_likelihood(y, Z @ (b + step)), 1.0
        while new_ll < ll - 1e-12 * (1.0 + abs(ll)) and shrink > 1e-9:
            shrink /= 2.0
            new_b = b + shrink * step
            new_ll = log_likelihood(y, Z @ new_b)
        change = abs(new_ll - ll)
        b, ll, eta = new_b, new_ll, Z @ new_b
        if np.max(np.abs(shrink * step)) < tol and change < 1e-9:
            converged = True
            break
    if not converged:
        if np.max(np.abs(eta)) > SEPARATION_LOGIT:
            raise SeparationError("some fitted risks run to 0 or 1 (perfect prediction by the covariates)")
        raise RuntimeError(f"the logistic fit did not converge in {max_iter} iterations")
    p = special.expit(eta)
    info = Z.T @ (Z * (p * (1.0 - p))[:, None])
    cov_std = linalg.inv(info)
    cov = T @ cov_std @ T.T
    return LogisticFit(tuple(names), T @ b, (cov + cov.T) / 2.0, ll, n, events, it)


# --------------------------------------------------------------------------------------- LR tests


def lr_test(reduced: LogisticFit, full: LogisticFit) -> LRTest:
    """The LR chi-square of a reduced model nested in a full one (:func:`auditor.stats.lrtest.likelihood_ratio`).

    Nesting (the reduced model's column space inside the full one's) is the caller's duty; only the
    sample and the parameter counts are checked here.
    """
    if reduced.n != full.n:
        raise ValueError("nested models must be fitted to the same observations")
    return likelihood_ratio(reduced.loglik, full.loglik, full.n_params - reduced.n_params)


@dataclass(frozen=True)
class PartitionRow:
    """One line of a chi-square partition: what is tested, its LR chi-square, df and p."""

    name: str
    test: LRTest


@dataclass(frozen=True)
class ChiSquarePartition:
    """The likelihood-ratio chi-square of a model split by block of terms.

    ``joint`` is the chi-square of all the blocks together given the adjustment columns (the
    chi-square the blocks can explain); each block's ``total`` is its contribution given every other
    block, its ``nonlinear`` the contribution of its columns after the first. Partial chi-squares of
    correlated blocks need not add up to the joint one: the rest is information the blocks share.
    """

    full: LogisticFit
    whole: LRTest
    """The full model against the intercept alone."""
    joint: LRTest
    """All blocks together, given the adjustment columns."""
    adjustment: LRTest | None
    """The adjustment columns given all blocks (None when there are none)."""
    total: dict[str, LRTest]
    nonlinear: dict[str, LRTest]
    reduced: dict[str, LogisticFit]
    """The fits behind each test, keyed ``'-<block>'`` (block dropped) and ``'linear <block>'``."""

    def share(self, block: str) -> float:
        """The block's partial chi-square as a fraction of the joint chi-square of all blocks."""
        return self.total[block].statistic / self.joint.statistic if self.joint.statistic > 0 else float("nan")

    def rows(self) -> list[PartitionRow]:
        out = []
        for name in self.total:
            out.append(PartitionRow(name, self.total[name]))
            if name in self.nonlinear:
                out.append(PartitionRow(f"{name}, nonlinear part", self.nonlinear[name]))
        out.append(PartitionRow("all blocks together", self.joint))
        if self.adjustment is not None:
            out.append(PartitionRow("adjustment", self.adjustment))
        out.append(PartitionRow("whole model", self.whole))
        return out


def block_columns(name: str, matrix: np.ndarray) -> dict[str, np.ndarray]:
    """Name the columns of a basis block: ``name`` for the first (linear) one, ``name'j`` after it."""
    m = np.atleast_2d(np.asarray(matrix, dtype=float).T).T
    return {(name if j == 0 else f"{name}'{j}"): m[:, j] for j in range(m.shape[1])}


def chi_square_partition(y, blocks: dict[str, np.ndarray], adjust: dict[str, np.ndarray] | None = None
                         ) -> ChiSquarePartition:
    """Partition the LR chi-square of y ~ blocks + adjust by block (Wilks 1938 for each nested comparison).

    Each block is an n x m basis whose first column is the linear term and the others its nonlinear
    terms (a restricted cubic spline basis, for instance). For each block b:
    total(b) = 2 [l(full) - l(full without b)] on m_b df; nonlinear(b) = 2 [l(full) -
    l(full with b linear only)] on m_b - 1 df.
    """
    y = np.asarray(y, dtype=float)
    adjust = dict(adjust or {})
    cols = {name: block_columns(name, m) for name, m in blocks.items()}

    def fit(keep: dict[str, dict[str, np.ndarray]], with_adjust: bool = True) -> LogisticFit:
        design = {k: v for block in keep.values() for k, v in block.items()}
        if with_adjust:
            design.update(adjust)
        return fit_logistic(y, design)

    full = fit(cols)
    intercept_only = fit_logistic(y, None)
    adjust_only = fit({}) if adjust else intercept_only
    reduced, total, nonlinear = {}, {}, {}
    for name, block in cols.items():
        without = fit({k: v for k, v in cols.items() if k != name})
        reduced[f"-{name}"] = without
        total[name] = lr_test(without, full)
        if len(block) > 1:
            first = next(iter(block))
            linear = fit({k: (v if k != name else {first: v[first]}) for k, v in cols.items()})
            reduced[f"linear {name}"] = linear
            nonlinear[name] = lr_test(linear, full)
    adjustment = None
    if adjust:
        no_adjust = fit(cols, with_adjust=False)
        reduced["-adjustment"] = no_adjust
        adjustment = lr_test(no_adjust, full)
    return ChiSquarePartition(full, lr_test(intercept_only, full), lr_test(adjust_only, full), adjustment,
                              total, nonlinear, reduced)


# -------------------------------------------------------------------------------------- prediction


@dataclass(frozen=True)
class RiskBand:
    """Fitted logits at new rows with their standard errors, and the risk with its pointwise band."""

    logit: np.ndarray
    se: np.ndarray
    risk: np.ndarray
    lower: np.ndarray
    upper: np.ndarray


def risk_band(fit: LogisticFit, rows: np.ndarray, level: float = 0.95) -> RiskBand:
    """Risk expit(x'b) at each row of ``rows`` (columns in ``fit.names`` order) with a delta-method band.

    SE(x'b) = sqrt(x' V x); band = expit(x'b -/+ z SE), z the normal quantile for ``level``.
    """
    X = np.atleast_2d(np.asarray(rows, dtype=float))
    if X.shape[1] != fit.n_params:
        raise ValueError(f"rows have {X.shape[1]} columns; the model has {fit.n_params}")
    eta = X @ fit.params
    se = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", X, fit.cov, X), 0.0))
    z = stats.norm.ppf(0.5 + level / 2)
    return RiskBand(eta, se, special.expit(eta), special.expit(eta - z * se), special.expit(eta + z * se))


def contrast(fit: LogisticFit, weights: dict[str, float] | np.ndarray) -> tuple[float, float]:
    """A linear combination c'b of the coefficients and its standard error sqrt(c' V c)."""
    if isinstance(weights, dict):
        c = np.zeros(fit.n_params)
        for name, w in weights.items():
            c[fit.index(name)] = w
    else:
        c = np.asarray(weights, dtype=float)
    return float(c @ fit.params), float(np.sqrt(max(c @ fit.cov @ c, 0.0)))


def coefficient_ratio(fit: LogisticFit, numerator: str, denominator: str,
                      level: float = 0.95) -> tuple[float, float, float]:
    """Ratio r = b_num / b_den of two coefficients with its delta-method interval: (r, lower, upper).

    var(r) = [V_nn - 2 r V_nd + r^2 V_dd] / b_den^2 (first-order Taylor expansion of the ratio; e.g.
    Casella and Berger, Statistical Inference, 2nd ed., 2002, section 5.5.4); interval
    r -/+ z_{(1+level)/2} sqrt(var(r)).
    """
    i, j = fit.index(denominator), fit.index(numerator)
    bl, be = fit.params[i], fit.params[j]
    r = be / bl
    var = (fit.cov[j, j] - 2 * r * fit.cov[i, j] + r * r * fit.cov[i, i]) / (bl * bl)
    half = stats.norm.ppf(0.5 + level / 2) * math.sqrt(max(var, 0.0))
    return float(r), float(r - half), float(r + half)


def bootstrap_lowest_point(y, columns: dict[str, np.ndarray], term_names: list[str], basis_grid: np.ndarray,
                           grid, resamples: int, seed: int, level: float = 0.95,
                           min_success: float = 0.0) -> tuple[float | None, float | None, int]:
    """Percentile bootstrap of the grid point where a term's fitted logit is lowest: (lower, upper, failed).

    Rows are resampled with replacement (``numpy.random.default_rng(seed)``), the logistic model of
    ``y`` on ``columns`` refitted, and the grid point minimising basis_grid @ b_term recorded; the
    interval is the (1 -/+ level)/2 quantiles of the points found (Efron and Tibshirani, An
    Introduction to the Bootstrap, 1993, ch. 13). Fits that fail count in ``failed``; with fewer than
    ``min_success * resamples`` successes the interval is (None, None). The basis (knots) stays at its
    full-sample positions.
    """
    y = np.asarray(y)
    names = list(columns)
    X = np.column_stack([columns[k] for k in names])
    li = [names.index(k) + 1 for k in term_names]
    rng = np.random.default_rng(seed)
    found, failed = [], 0
    for _ in range(resamples):
        idx = rng.integers(0, len(y), len(y))
        try:
            fit = fit_logistic(y[idx], {k: X[idx, j] for j, k in enumerate(names)})
        except (ValueError, RuntimeError):
            failed += 1
            continue
        found.append(grid[int(np.argmin(basis_grid @ fit.params[li]))])
    if len(found) < min_success * resamples:
        return None, None, failed
    lo, hi = np.quantile(found, [0.5 - level / 2, 0.5 + level / 2])
    return float(lo), float(hi), failed


# ------------------------------------------------------------------------------ interior extremum


@dataclass(frozen=True)
class EndContrast:
    """The fitted logit at one end of a range minus the logit at the extremum, with one-sided tests.

    ``difference`` is signed so that a positive value points away from the extremum (above a minimum,
    below a maximum). ``p_value`` is the pointwise one-sided normal p of difference / se;
    ``p_adjusted`` is the max-t p of the largest standardised contrast between this end and any grid
    point, which allows for the extremum having been chosen by the data. Both are None when the
    extremum sits at this end.
    """

    at: float
    difference: float
    se: float
    p_value: float | None
    p_adjusted: float | None


@dataclass(frozen=True)
class ExtremumTest:
    """Where a fitted curve is lowest (or highest) on a grid, and whether both ends differ from it."""

    kind: str
    """``minimum`` or ``maximum``."""
    index: int
    at: float
    interior: bool
    low_end: EndContrast
    high_end: EndContrast

    @property
    def p_value(self) -> float | None:
        """Intersection-union p of 'both ends differ from the extremum': the larger adjusted p."""
        if not self.interior or self.low_end.p_adjusted is None or self.high_end.p_adjusted is None:
            return None
        return max(self.low_end.p_adjusted, self.high_end.p_adjusted)


def _root(V: np.ndarray) -> np.ndarray:
    """A matrix R with R R' = V for a symmetric positive semi-definite V."""
    w, Q = np.linalg.eigh((V + V.T) / 2.0)
    return Q * np.sqrt(np.clip(w, 0.0, None))


def interior_extremum(fit: LogisticFit, names, grid: np.ndarray, basis: np.ndarray,
                      kind: str = "minimum", draws: int = 10_000, seed: int = 0) -> ExtremumTest:
    """Find the lowest (highest) point of one term's fitted logit over a grid and test both ends.

    ``basis`` is the term's basis at ``grid`` (rows), its columns the coefficients ``names``. The
    term's logit is f(g) = B(g) b; other additive terms cancel from every difference. For the grid's
    extremum g* and each end e, d_e = s [f(e) - f(g*)] with s = +1 for a minimum and -1 for a maximum,
    SE(d_e) = sqrt(c' V c) with c = B(e) - B(g*), and the pointwise one-sided p = 1 - Phi(d_e / SE).

    Because g* is chosen by the data, the adjusted test asks whether the end is the extremum at all:
    its statistic is T_e = max_g s c_g'b / SE_g over every grid point g (c_g = B(e) - B(g)),
    referred to the distribution of max_g s c_g'(b_hat - b) / SE_g simulated from
    b_hat - b ~ N(0, V) with ``draws`` seeded draws, which is its null distribution when the curve
    is flat (the least favourable monotone case): a max-t test (Hothorn, Bretz and Westfall 2008).
    If neither end is the extremum, the extremum is interior; requiring both adjusted p below alpha
    is an intersection-union test (Berger 1982), in the spirit of Lind and Mehlum (2010).
    """
    if kind not in ("minimum", "maximum"):
        raise ValueError("kind must be 'minimum' or 'maximum'")
    grid = np.asarray(grid, dtype=float)
    B = np.atleast_2d(np.asarray(basis, dtype=float))
    idx = fit.indices(names)
    b, V = fit.params[idx], fit.cov[np.ix_(idx, idx)]
    f = B @ b
    sign = 1.0 if kind == "minimum" else -1.0
    k = int(np.argmin(sign * f))
    noise = np.random.default_rng(seed).standard_normal((draws, len(b))) @ _root(V).T

    def end(j: int) -> EndContrast:
        c = B[j] - B[k]
        d = sign * float(c @ b)
        se = float(np.sqrt(max(c @ V @ c, 0.0)))
        if j == k or se == 0.0:
            return EndContrast(float(grid[j]), d, se, None, None)
        others = np.delete(B[j] - B, j, axis=0)
        se_all = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", others, V, others), 1e-300))
        observed = float(np.max(sign * (others @ b) / se_all))
        scan = np.max(sign * (noise @ others.T) / se_all, axis=1)
        p_adj = float((1 + np.count_nonzero(scan >= observed)) / (draws + 1))
        return EndContrast(float(grid[j]), d, se, float(stats.norm.sf(d / se)), p_adj)

    return ExtremumTest(kind, k, float(grid[k]), 0 < k < len(grid) - 1, end(0), end(len(grid) - 1))
