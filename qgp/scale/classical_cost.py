"""What the classical GP costs at size n: flop counts of Cholesky and conjugate gradients.

Counts are floating-point operations (one addition or one multiplication each; a square root or
a division counts one), the convention of LAPACK Working Note 41's operation counts. Kernel
evaluations are not counted. Every function
takes numpy arrays as well as scalars and broadcasts. `measure_flop_rate` is the one measurement:
the rest are formulas.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from qgp.errors import QgpError

__all__ = [
    "ClassicalGPFlops",
    "cg_flops",
    "cg_flops_per_iteration",
    "cg_iterations",
    "cholesky_flops",
    "classical_gp_flops",
    "measure_flop_rate",
    "triangular_solve_flops",
]


def _as_float(value):
    out = np.asarray(value, dtype=float)
    return out if out.ndim else float(out)


def cholesky_flops(n):
    """Flops of the Cholesky factorisation A = LLᵀ of an n×n SPD matrix: n³/3 + n²/2 + n/6.

    LAPACK Working Note 41 (xPOTRF): n³/6 + n²/2 + n/3 multiplications (divisions and square
    roots included) and n³/6 − n/6 additions — verified as quoted in PLASMA/MORSE's flop headers
    ("See Lawn 41 page 120"). The leading term n³/3 is Golub & Van Loan, Matrix Computations, 4th
    ed., Alg. 4.2.1 (from memory). The same total follows from counting the textbook algorithm's
    loops (tests).
    """
    n = _as_float(n)
    return n**3 / 3.0 + n**2 / 2.0 + n / 6.0


def triangular_solve_flops(n, rhs=1):
    """Flops of one n×n triangular solve per right-hand side: n² (n(n+1)/2 mults, n(n−1)/2 adds).

    LAPACK Working Note 41 (xTRSM with one side m = n): verified as quoted in PLASMA/MORSE's flop
    headers. A Cholesky solve A⁻¹b = L⁻ᵀ(L⁻¹b) is two of them, 2n² per right-hand side.
    """
    n = _as_float(n)
    return n**2 * _as_float(rhs)


def cg_iterations(condition_number, relative_error):
    """Smallest k with 2((√κ − 1)/(√κ + 1))^k ≤ ε: iterations for ‖e_k‖_A ≤ ε‖e_0‖_A.

    The standard conjugate-gradient bound ‖e_k‖_A ≤ 2((√κ−1)/(√κ+1))^k ‖e_0‖_A (Saad 2003,
    Iterative Methods for Sparse Linear Systems, 2nd ed., Thm 6.29; Shewchuk 1994, "An
    introduction to the conjugate gradient method without the agonizing pain", Sec. 9.2 — both
    from memory). Exact arithmetic; κ = 1 converges in one step; ε ≥ 2 needs none.
    Broadcasts over arrays.
    """
    kappa = np.asarray(condition_number, dtype=float)
    eps = np.asarray(relative_error, dtype=float)
    if np.any(~np.isfinite(kappa)) or np.any(kappa < 1.0):
        raise QgpError(f"condition_number must be finite and ≥ 1, got {condition_number!r}.")
    if np.any(~(eps > 0.0)):
        raise QgpError(f"relative_error must be positive, got {relative_error!r}.")
    root = np.sqrt(kappa)
    with np.errstate(divide="ignore"):
        rate = np.log((root + 1.0) / (root - 1.0))  # +inf at κ = 1
        k = np.ceil(np.log(2.0 / eps) / rate - 1e-12)
    k = np.where(eps >= 2.0, 0.0, np.maximum(k, 1.0))
    return k if k.ndim else float(k)


def cg_flops_per_iteration(n, nonzeros):
    """Flops of one CG iteration: 2·nnz + 10n.

    One sparse matrix–vector product (nnz multiplications + nnz additions), two inner products
    (2n each) and three vector updates x, r, p (2n each) — Saad 2003, Alg. 6.18; Shewchuk 1994,
    Sec. B2 (from memory).
    """
    return 2.0 * _as_float(nonzeros) + 10.0 * _as_float(n)


def cg_flops(n, nonzeros, condition_number, relative_error):
    """Flops of one CG solve to A-norm relative error ε: `cg_iterations` × `cg_flops_per_iteration`.

    Starts from x₀ = 0, so the initial residual is b (free).
    """
    return cg_iterations(condition_number, relative_error) * cg_flops_per_iteration(n, nonzeros)


@dataclass(frozen=True)
class ClassicalGPFlops:
    """Flops of exact GP prediction (mean and variance at each test point), two ways.

    cholesky : dense, Rasmussen & Williams 2006, Alg. 2.1 — factor A = LLᵀ
        (`cholesky_flops`), α = Lᵀ\\(L\\y) (2n²), and per test point the mean k*ᵀα (2n), v = L\\k*
        (n²) and the variance k** − vᵀv (2n).
    conjugate_gradients : sparse, one CG solve for α = A⁻¹y and, per test point, one for A⁻¹k*
        (`cg_flops` each), plus the two inner products (2n each).
    """

    cholesky: float
    conjugate_gradients: float
    cholesky_factor: float
    cholesky_per_test_point: float
    cg_iterations: float
    cg_per_solve: float
    test_points: float


def classical_gp_flops(n, nonzeros, condition_number, relative_error, test_points) -> ClassicalGPFlops:
    """Flop totals of the classical GP on an n×n system with ``nonzeros`` stored entries.

    Dense Cholesky ignores sparsity (its factor fills in); CG uses it. ``relative_error`` is the
    A-norm accuracy each CG solve is run to; Cholesky is exact to rounding. Kernel evaluations are
    not counted. Broadcasts over arrays (the fields are then arrays).
    """
    n = _as_float(n)
    m = _as_float(test_points)
    if np.any(np.asarray(n) < 1) or np.any(np.asarray(m) < 0):
        raise QgpError("n must be ≥ 1 and test_points ≥ 0.")
    factor = cholesky_flops(n)
    per_point_chol = triangular_solve_flops(n) + 4.0 * n
    chol = factor + 2.0 * triangular_solve_flops(n) + m * per_point_chol
    iters = cg_iterations(condition_number, relative_error)
    per_solve = iters * cg_flops_per_iteration(n, nonzeros)
    cg = (1.0 + m) * per_solve + m * 4.0 * n
    return ClassicalGPFlops(
        cholesky=chol,
        conjugate_gradients=cg,
        cholesky_factor=factor,
        cholesky_per_test_point=per_point_chol,
        cg_iterations=iters,
        cg_per_solve=per_solve,
        test_points=m,
    )


def measure_flop_rate(n: int = 2048, repeats: int = 3, seed: int = 0) -> float:
    """Measured dense-Cholesky flop/s on this machine (a measurement, not a formula).

    Times ``scipy.linalg.cholesky`` on a random n×n SPD matrix (MMᵀ/n + I, M standard normal)
    ``repeats`` times and returns `cholesky_flops`(n) over the best time. The result depends on
    the BLAS, the thread count and the machine's load at the time; record it beside any figure
    that uses it.
    """
    import scipy.linalg

    if int(n) < 1 or int(repeats) < 1:
        raise QgpError(f"n = {n} and repeats = {repeats} must be ≥ 1.")
    rng = np.random.default_rng(seed)
    M = rng.standard_normal((int(n), int(n)))
    A = M @ M.T / n + np.eye(int(n))
    best = np.inf
    for _ in range(int(repeats)):
        start = time.perf_counter()
        scipy.linalg.cholesky(A, lower=True, check_finite=False)
        best = min(best, time.perf_counter() - start)
    return float(cholesky_flops(int(n)) / max(best, 1e-9))
