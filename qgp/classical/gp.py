"""Exact classical Gaussian-process regression: the reference every quantum estimate is judged by.

Conditioning on training data (X, y) with noise variance σ² factorises the regularised
system A = K + σ²I once (Rasmussen & Williams 2006, Algorithm 2.1):

    L = chol(A),  α = A⁻¹(y − m),
    mean(x*)          = k*ᵀ α + m,
    variance_latent   = k(x*, x*) − k*ᵀ A⁻¹ k*,
    variance_predictive = variance_latent + σ²,
    log p(y | X)      = −½ (y − m)ᵀ α − Σ log L_ii − (n/2) log 2π,

where m is the prior mean: the training mean of y when ``center`` (the default), else 0.
For kernels with finite support and a sparse enough matrix the same quantities come from a
sparse LU factorisation (SuperLU, symmetric mode), with log det A = Σ log U_ii.

``fit_ml2`` chooses hyperparameters by type-II maximum likelihood on log-parameters with
L-BFGS-B, analytic gradients (R&W eq. 5.9) and seeded random restarts.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import scipy.linalg
import scipy.optimize
import scipy.sparse
import scipy.sparse.linalg

from qgp.errors import QgpError
from qgp.classical.kernels import Kernel, _as_inputs

__all__ = [
    "Prediction",
    "ExactGP",
    "FitResult",
    "condition",
    "fit_ml2",
    "ml2_search_space",
    "rmse",
    "nlpd",
    "count_nonpositive",
    "SPARSE_MIN_SIZE",
    "SPARSE_MAX_DENSITY",
]

Method = Literal["auto", "dense", "sparse"]

# method="auto" takes the sparse path only when it pays: a finite-support kernel, at least
# this many training points, and a kernel matrix with fewer than this fraction non-zero.
SPARSE_MIN_SIZE = 200
SPARSE_MAX_DENSITY = 0.25

_LOG_2PI = math.log(2.0 * math.pi)

# ML-II search box, relative to the data so it cannot run off to degenerate fits:
# signal variance and noise relative to the mean square of the (centred) targets, lengthscales
# relative to the spread of each input column.
_AMPLITUDE_BOUNDS = (1e-6, 1e6)
_NOISE_BOUNDS = (1e-10, 1e2)
_LENGTHSCALE_BOUNDS = (1e-3, 1e3)
# Returned by the ML-II objective where A is numerically not positive definite: a large,
# finite value makes L-BFGS-B's line search step back instead of failing on inf.
_INFEASIBLE = 1e25


@dataclass(frozen=True, eq=False)
class Prediction:
    """Predictive mean, latent variance of f(x*), and predictive variance of y* = latent + σ².

    Variances are not clipped: round-off can leave tiny negative values where the latent
    variance is ~0, and callers should see (and count) them rather than have them hidden.
    """

    mean: np.ndarray
    variance_latent: np.ndarray
    variance_predictive: np.ndarray


def _not_pd_error(noise_variance: float) -> QgpError:
    return QgpError(
        f"A = K + σ²I is not positive definite (σ² = {noise_variance:g}), usually because of "
        "duplicate or near-duplicate inputs; raise the noise variance or remove duplicate inputs"
    )


@dataclass(frozen=True, eq=False)
class ExactGP:
    """A GP conditioned on training data; build it with ``condition``.

    ``factor`` is the factorisation of A = K + σ²I: the lower Cholesky factor L (dense
    path) or a SuperLU object (sparse path). ``y_centered`` = y − ``y_offset``.
    """

    X_train: np.ndarray
    y_centered: np.ndarray
    kernel: Kernel
    noise_variance: float
    y_offset: float
    alpha: np.ndarray
    log_marginal_likelihood: float
    method: Literal["dense", "sparse"]
    factor: object = field(repr=False)

    @property
    def n_train(self) -> int:
        return self.X_train.shape[0]

    def k_star(self, Xs) -> np.ndarray:
        """Dense cross-kernel matrix k(X_train, Xs) of shape (n_train, n_test)."""
        return self.kernel(self.X_train, _as_inputs(Xs, "test inputs"))

    def solve(self, b) -> np.ndarray:
        """A⁻¹ b with the stored factorisation (b of shape (n_train,) or (n_train, m))."""
        b = np.asarray(b, dtype=float)
        if b.shape[0] != self.n_train:
            raise QgpError(f"right-hand side has {b.shape[0]} rows, expected n_train = {self.n_train}")
        if self.method == "dense":
            return scipy.linalg.cho_solve((self.factor, True), b, check_finite=False)
        return self.factor.solve(b)

    def predict(self, Xs) -> Prediction:
        """Mean, latent and predictive variance at the rows of Xs (R&W Algorithm 2.1, lines 4–6)."""
        Xs = _as_inputs(Xs, "test inputs")
        if self.method == "dense":
            ks = self.kernel(self.X_train, Xs)
            v = scipy.linalg.solve_triangular(self.factor, ks, lower=True, check_finite=False)
            reduction = np.einsum("ij,ij->j", v, v)
        else:
            ks = self.kernel.sparse(self.X_train, Xs)
            # kᵀA⁻¹k column by column; A⁻¹k is dense, but only n_train × n_test.
            w = self.factor.solve(ks.toarray())
            reduction = np.asarray(ks.multiply(w).sum(axis=0)).ravel()
        mean = ks.T @ self.alpha + self.y_offset
        latent = self.kernel.diag(Xs) - reduction
        return Prediction(
            mean=np.asarray(mean, dtype=float),
            variance_latent=latent,
            variance_predictive=latent + self.noise_variance,
        )


def _check_data(X, y) -> tuple[np.ndarray, np.ndarray]:
    X = _as_inputs(X, "training inputs")
    y = np.asarray(y, dtype=float)
    if y.ndim == 2 and y.shape[1] == 1:
        y = y[:, 0]
    if y.ndim != 1 or y.shape[0] != X.shape[0]:
        raise QgpError(
            f"training targets have shape {y.shape} but there are {X.shape[0]} training inputs; "
            "give one target value per input row"
        )
    if X.shape[0] < 1:
        raise QgpError("no training points; give at least one training row")
    if not np.all(np.isfinite(y)):
        raise QgpError("training targets contain NaN or infinite values; remove or fill those rows")
    return X, y


def _check_noise(noise_variance) -> float:
    noise = float(noise_variance)
    if not (math.isfinite(noise) and noise >= 0.0):
        raise QgpError(
            f"noise variance must be a finite number ≥ 0 (got {noise_variance!r}); set `[noise] variance` ≥ 0"
        )
    return noise


def _factor_dense(K: np.ndarray, noise: float):
    """Cholesky factor of A = K + σ²I, or QgpError when A is not positive definite."""
    A = K.copy()
    A[np.diag_indices_from(A)] += noise
    try:
        return scipy.linalg.cholesky(A, lower=True, check_finite=False)
    except np.linalg.LinAlgError:
        raise _not_pd_error(noise) from None


def _factor_sparse(K: scipy.sparse.csr_array, noise: float):
    """SuperLU of A = K + σ²I with symmetric, diagonal pivoting, and log det A.

    With perm_r = perm_c the factorisation is P A Pᵀ = L U, i.e. Gaussian elimination
    without pivoting on a symmetric permutation of A; it has all pivots U_ii > 0 exactly
    when A is positive definite, and then log det A = Σ log U_ii (L has unit diagonal).
    """
    n = K.shape[0]
    A = (K + noise * scipy.sparse.eye_array(n, format="csr")).tocsc()
    try:
        lu = scipy.sparse.linalg.splu(
            A, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0, options={"SymmetricMode": True}
        )
    except RuntimeError:  # SuperLU reports an exactly singular factor this way
        raise _not_pd_error(noise) from None
    pivots = lu.U.diagonal()
    if not (np.array_equal(lu.perm_r, lu.perm_c) and np.all(pivots > 0.0)):
        raise _not_pd_error(noise)
    return lu, float(np.sum(np.log(pivots)))


def _wants_sparse(kernel: Kernel, n: int, method: Method) -> bool:
    """Whether to try the sparse path; "auto" still falls back to dense if K is too full."""
    if method not in ("auto", "dense", "sparse"):
        raise QgpError(f"unknown solver method {method!r}; use 'auto', 'dense' or 'sparse'")
    if kernel.support_radius is None:
        if method == "sparse":
            raise QgpError(
                f"the sparse solver needs a kernel with finite support, but {kernel.family} has none; "
                "use method 'dense', a Wendland kernel, or set `[kernel] support` to taper it"
            )
        return False
    return method == "sparse" or (method == "auto" and n >= SPARSE_MIN_SIZE)


def condition(
    X,
    y,
    kernel: Kernel,
    noise_variance: float,
    center: bool = True,
    method: Method = "auto",
) -> ExactGP:
    """Condition the GP prior on (X, y): factorise A = K + σ²I and solve for α (R&W Alg. 2.1).

    ``center`` uses the training mean of y as the prior mean (else 0). ``method`` picks the
    dense Cholesky or the sparse LU path; "auto" goes sparse for finite-support kernels
    with n ≥ ``SPARSE_MIN_SIZE`` and density < ``SPARSE_MAX_DENSITY``. Raises QgpError if A
    is not positive definite.
    """
    X, y = _check_data(X, y)
    noise = _check_noise(noise_variance)
    n = X.shape[0]
    offset = float(np.mean(y)) if center else 0.0
    yc = y - offset
    K_sparse = kernel.sparse(X) if _wants_sparse(kernel, n, method) else None
    chosen = "dense" if K_sparse is None else "sparse"
    if method == "auto" and K_sparse is not None and K_sparse.nnz >= SPARSE_MAX_DENSITY * n * n:
        chosen = "dense"
    if chosen == "dense":
        K = K_sparse.toarray() if K_sparse is not None else kernel(X)
        L = _factor_dense(K, noise)
        alpha = scipy.linalg.cho_solve((L, True), yc, check_finite=False)
        half_logdet = float(np.sum(np.log(np.diag(L))))
        factor: object = L
    else:
        factor, logdet = _factor_sparse(K_sparse, noise)
        alpha = factor.solve(yc)
        half_logdet = 0.5 * logdet
    lml = -0.5 * float(yc @ alpha) - half_logdet - 0.5 * n * _LOG_2PI
    return ExactGP(
        X_train=X,
        y_centered=yc,
        kernel=kernel,
        noise_variance=noise,
        y_offset=offset,
        alpha=alpha,
        log_marginal_likelihood=lml,
        method=chosen,
        factor=factor,
    )


# -- ML-II -------------------------------------------------------------------------------


@dataclass(frozen=True)
class FitResult:
    """Outcome of ``fit_ml2``: the fitted kernel and σ², the log marginal likelihood they
    reach (of the centred targets when centring), and how many random restarts were run."""

    kernel: Kernel
    noise_variance: float
    log_marginal_likelihood: float
    restarts: int


def _log_bounds(kernel: Kernel, X: np.ndarray, y_scale: float, fit_noise: bool) -> np.ndarray:
    """Box for the log-parameters [log a, log ℓ…, (log σ²)], scaled to the data."""
    spans = np.ptp(X, axis=0)
    spans = np.where(spans > 0.0, spans, 1.0)
    n_ell = kernel.theta.size - 1
    if n_ell == 1:
        ell_lo, ell_hi = spans.min() * _LENGTHSCALE_BOUNDS[0], spans.max() * _LENGTHSCALE_BOUNDS[1]
        ell_box = [(ell_lo, ell_hi)]
    else:
        ell_box = [(s * _LENGTHSCALE_BOUNDS[0], s * _LENGTHSCALE_BOUNDS[1]) for s in spans]
    box = [(y_scale * _AMPLITUDE_BOUNDS[0], y_scale * _AMPLITUDE_BOUNDS[1]), *ell_box]
    if fit_noise:
        box.append((y_scale * _NOISE_BOUNDS[0], y_scale * _NOISE_BOUNDS[1]))
    return np.log(np.asarray(box, dtype=float))


def _negative_lml_and_gradient(params, X, yc, kernel: Kernel, fixed_noise: float | None):
    """−log p(y|X) and its gradient in the log-parameters (R&W eq. 5.9).

    ∂/∂θ_j log p = ½ tr((ααᵀ − A⁻¹) ∂A/∂θ_j); for log σ², ∂A/∂θ = σ² I.
    """
    p = kernel.theta.size
    k = kernel.with_theta(params[:p])
    noise = fixed_noise if fixed_noise is not None else float(np.exp(params[p]))
    n = X.shape[0]
    try:
        L = _factor_dense(k(X), noise)
    except QgpError:
        return _INFEASIBLE, np.zeros_like(params)
    alpha = scipy.linalg.cho_solve((L, True), yc, check_finite=False)
    lml = -0.5 * float(yc @ alpha) - float(np.sum(np.log(np.diag(L)))) - 0.5 * n * _LOG_2PI
    W = np.outer(alpha, alpha) - scipy.linalg.cho_solve((L, True), np.eye(n), check_finite=False)
    grad = 0.5 * np.einsum("ij,ijk->k", W, k.theta_gradient(X))
    if fixed_noise is None:
        grad = np.append(grad, 0.5 * noise * np.trace(W))
    if not np.isfinite(lml):
        return _INFEASIBLE, np.zeros_like(params)
    return -lml, -grad


def ml2_search_space(
    X: np.ndarray, yc: np.ndarray, kernel: Kernel, rng: np.random.Generator, restarts: int, fit_noise: bool
) -> tuple[np.ndarray, list[np.ndarray]]:
    """The ML-II log-parameter box and starting points, shared by every ML-II optimiser here.

    Parameters
    ----------
    X : ndarray of shape (n, d)
    yc : ndarray of shape (n,)
        The (centred) targets; the box for signal variance and σ² scales with their mean square.
    kernel : Kernel
        Its own hyperparameters are the first start.
    rng : numpy.random.Generator
        Draws ``restarts`` further starts uniformly in the box.
    restarts : int
    fit_noise : bool
        Whether log σ² is the last parameter (its first start: a tenth of the mean square).

    Returns
    -------
    bounds : ndarray of shape (p, 2)
        [lower, upper] of each log-parameter [log a, log ℓ…, (log σ²)].
    starts : list of ndarray of shape (p,)
    """
    if restarts < 0:
        raise QgpError(f"restarts must be ≥ 0 (got {restarts})")
    y_scale = float(np.mean(yc * yc))
    if not y_scale > 0.0:
        y_scale = 1.0
    bounds = _log_bounds(kernel, X, y_scale, fit_noise)
    lo, hi = bounds[:, 0], bounds[:, 1]
    start = kernel.theta
    if fit_noise:
        start = np.append(start, math.log(0.1 * y_scale))
    return bounds, [np.clip(start, lo, hi)] + [rng.uniform(lo, hi) for _ in range(restarts)]


def fit_ml2(
    X,
    y,
    kernel: Kernel,
    noise_variance: float | None,
    rng: np.random.Generator,
    restarts: int = 5,
    center: bool = True,
) -> FitResult:
    """Type-II maximum likelihood: maximise log p(y | X, θ, σ²) over log-hyperparameters.

    L-BFGS-B with analytic gradients (R&W 2006, eq. 5.9), from the kernel's own
    hyperparameters and from ``restarts`` further starts drawn uniformly in the log-box
    with ``rng``; the best optimum wins. σ² is fitted only when ``noise_variance`` is None.
    The box (see ``_log_bounds``) scales with the data: signal variance and σ² relative to the
    mean square of the centred targets, lengthscales relative to each input's range.
    Uses the dense Cholesky path.
    """
    X, y = _check_data(X, y)
    fixed_noise = None if noise_variance is None else _check_noise(noise_variance)
    yc = y - (float(np.mean(y)) if center else 0.0)
    fit_noise = fixed_noise is None
    bounds, starts = ml2_search_space(X, yc, kernel, rng, restarts, fit_noise)

    best = None
    for x0 in starts:
        result = scipy.optimize.minimize(
            _negative_lml_and_gradient,
            x0,
            args=(X, yc, kernel, fixed_noise),
            jac=True,
            method="L-BFGS-B",
            bounds=list(map(tuple, bounds)),
            # Tighter than scipy's defaults: the optimum is cheap to polish and the
            # reported LML is compared against other optimisers.
            options={"ftol": 1e-13, "gtol": 1e-9, "maxiter": 2000},
        )
        if result.fun < _INFEASIBLE and (best is None or result.fun < best.fun):
            best = result
    if best is None:
        raise QgpError(
            "the ML-II fit found no hyperparameters with a positive-definite A = K + σ²I; "
            "remove duplicate inputs or fix `[noise] variance` to a larger value"
        )
    p = kernel.theta.size
    fitted = kernel.with_theta(best.x[:p])
    noise = fixed_noise if not fit_noise else float(np.exp(best.x[p]))
    gp = condition(X, y, fitted, noise, center=center, method="dense")
    return FitResult(
        kernel=fitted,
        noise_variance=noise,
        log_marginal_likelihood=gp.log_marginal_likelihood,
        restarts=restarts,
    )


# -- scores ------------------------------------------------------------------------------


def _paired(y, other, name: str) -> tuple[np.ndarray, np.ndarray]:
    y = np.asarray(y, dtype=float).ravel()
    other = np.asarray(other, dtype=float).ravel()
    if y.shape != other.shape:
        raise QgpError(f"{name} has {other.size} values but there are {y.size} targets")
    return y, other


def rmse(y, mean) -> float:
    """Root-mean-square error √(mean (y − μ)²)."""
    y, mean = _paired(y, mean, "predictive mean")
    return float(np.sqrt(np.mean((y - mean) ** 2)))


def count_nonpositive(variance) -> int:
    """How many variances are ≤ 0 or not finite (the points ``nlpd`` cannot score)."""
    v = np.asarray(variance, dtype=float)
    return int(np.count_nonzero(~(np.isfinite(v) & (v > 0.0))))


def nlpd(y, mean, variance) -> float:
    """Mean Gaussian negative log predictive density, (1/n) Σ [½ log 2πv_i + (y_i − μ_i)² / 2v_i].

    Variances are not clipped: if any v_i is ≤ 0 or not finite the whole score is ``nan``
    (a clipped score would silently reward a broken variance). Use ``count_nonpositive``
    to report how many points caused it.
    """
    y, mean = _paired(y, mean, "predictive mean")
    _, variance = _paired(y, variance, "predictive variance")
    if count_nonpositive(variance):
        return float("nan")
    return float(np.mean(0.5 * (_LOG_2PI + np.log(variance)) + (y - mean) ** 2 / (2.0 * variance)))
