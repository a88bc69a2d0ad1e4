"""Classical GP flop counts (qgp.scale.classical_cost) against outside references.

References beside each check: LAPACK Working Note 41's operation counts (as printed in PLASMA's
flops.h, "See Lawn 41 page 120"), the textbook Cholesky algorithm's loops (Golub & Van Loan,
Matrix Computations, Alg. 4.2.1) and Rasmussen & Williams 2006 Alg. 2.1 counted step by step,
and scipy.sparse.linalg.cg's actual iterations.
"""

import math

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from hypothesis import given, settings
from hypothesis import strategies as st

from qgp.errors import QgpError
from qgp.scale.classical_cost import (
    cg_flops,
    cg_iterations,
    cholesky_flops,
    classical_gp_flops,
    measure_flop_rate,
    triangular_solve_flops,
)

PROPERTY = settings(max_examples=40, deadline=None, derandomize=True)


def _lawn41_potrf(n):
    # LAWN 41 as in PLASMA flops.h: FMULS_POTRF = n(n(n/6 + 1/2) + 1/3), FADDS_POTRF = n(n·n/6 − 1/6).
    return n * ((1 / 6 * n + 0.5) * n + 1 / 3) + n * ((1 / 6 * n) * n - 1 / 6)


def _textbook_cholesky_count(n):
    # Golub & Van Loan Alg. 4.2.1 (outer-product Cholesky), counted loop by loop:
    # for k: A[k,k] = sqrt(A[k,k]) (1); A[k+1:,k] /= A[k,k] (n−k−1);
    #        A[i,j] −= A[i,k]·A[j,k] for k < j ≤ i (2 flops each, (n−k−1)(n−k)/2 pairs).
    flops = 0
    for k in range(n):
        rest = n - k - 1
        flops += 1 + rest + 2 * rest * (rest + 1) // 2
    return flops


def test_cholesky_flops_against_lawn41_and_the_textbook_loops():
    residuals = []
    for n in (1, 2, 3, 10, 64, 257, 1000):
        ours = cholesky_flops(n)
        residuals.append((n, "LAWN 41", ours / _lawn41_potrf(n) - 1.0))
        residuals.append((n, "GvL loops", ours / _textbook_cholesky_count(n) - 1.0))
    worst = max(residuals, key=lambda r: abs(r[2]))
    assert abs(worst[2]) < 1e-12, f"worst relative residual {worst}"
    # Golub & Van Loan's leading term n³/3 (from memory): the ratio → 1.
    assert abs(cholesky_flops(10**6) / (1e18 / 3) - 1.0) < 2e-6


def test_triangular_solve_flops_against_lawn41():
    # LAWN 41 xTRSM (PLASMA flops.h): mults n·m(m+1)/2, adds n·m(m−1)/2 for m×m triangle, n rhs.
    residuals = []
    for m in (1, 5, 100, 4096):
        for rhs in (1, 3):
            lawn = rhs * m * (m + 1) / 2 + rhs * m * (m - 1) / 2
            residuals.append(((m, rhs), triangular_solve_flops(m, rhs) / lawn - 1.0))
    worst = max(residuals, key=lambda r: abs(r[1]))
    assert abs(worst[1]) < 1e-12, f"worst relative residual {worst}"


def test_gp_totals_follow_rasmussen_williams_algorithm_2_1():
    # R&W 2006 Alg. 2.1, step by step: L = chol(A); α = Lᵀ\(L\y); per test point f* = k*ᵀα,
    # v = L\k*, V = k** − vᵀv. Costed with the LAWN 41 counts above (n² per triangular solve,
    # 2n per inner product incl. the final subtraction).
    n, m = 1500, 7
    expected = _lawn41_potrf(n) + 2 * n**2 + m * (2 * n + n**2 + 2 * n)
    flops = classical_gp_flops(n, 30 * n, 100.0, 1e-6, m)
    assert abs(flops.cholesky / expected - 1.0) < 1e-12, (flops.cholesky, expected)
    # CG: one solve for α and one per test point (iterations × (matvec 2·nnz + 2 dots + 3 axpys))
    k = math.ceil(math.log(2 / 1e-6) / math.log((10 + 1) / (10 - 1)))
    per_solve = k * (2 * 30 * n + 4 * n + 6 * n)
    assert flops.cg_iterations == k
    assert abs(flops.conjugate_gradients / ((1 + m) * per_solve + 4 * n * m) - 1.0) < 1e-12
    # broadcasting over n
    many = classical_gp_flops(np.array([100, 1000]), np.array([3000, 30000]), 100.0, 1e-6, m)
    assert many.cholesky.shape == (2,) and many.cholesky[1] > many.cholesky[0]


def _cg_actual_iterations(eigenvalues, eps, seed=0):
    """First k at which scipy's CG iterate has ‖x_k − x‖_A ≤ ε‖x‖_A (x₀ = 0), on diag(λ)."""
    n = eigenvalues.size
    rng = np.random.default_rng(seed)
    b = rng.standard_normal(n)
    x = b / eigenvalues
    norm0 = math.sqrt(x @ (eigenvalues * x))
    errors = []

    def record(xk):
        e = xk - x
        errors.append(math.sqrt(e @ (eigenvalues * e)) / norm0)

    bound = int(cg_iterations(float(eigenvalues.max() / eigenvalues.min()), eps))
    spla.cg(sp.diags(eigenvalues), b, rtol=1e-15, atol=0.0, maxiter=2 * bound + 10, callback=record)
    hits = np.flatnonzero(np.asarray(errors) <= eps)
    return (int(hits[0]) + 1 if hits.size else None), bound


def test_cg_bound_against_scipy():
    # Saad 2003 Thm 6.29 / Shewchuk 1994 bound vs scipy.sparse.linalg.cg's A-norm error on an SPD
    # matrix of known κ. CG depends only on the spectrum and b's weights on the eigenvectors, so a
    # diagonal matrix stands for any matrix with that spectrum. (1) The bound holds: actual ≤ bound.
    # (2) For eigenvalues equally spaced over [1, κ], the Chebyshev polynomial behind the bound is
    # near-optimal on the filled interval, so the bound is tight up to its factor 2 and mild
    # superlinear effects: within 3× of the actual count. That needs the spectrum dense near λ_min
    # relative to the iterations (n = 2000 points, κ ≤ 10³; at κ = 10⁴ the lowest eigenvalues
    # separate, CG deflates them and the bound is ~3.5× loose at ε = 1e-8).
    ratios = []
    for kappa in (10.0, 100.0, 1000.0):
        for eps in (1e-2, 1e-4, 1e-6, 1e-8):
            actual, bound = _cg_actual_iterations(np.linspace(1.0, kappa, 2000), eps)
            assert actual is not None and actual <= bound, (kappa, eps, actual, bound)
            ratios.append(((kappa, eps), bound / actual))
    worst = max(ratios, key=lambda r: r[1])
    assert worst[1] <= 3.0, f"bound/actual = {worst[1]:.2f} at (κ, ε) = {worst[0]}; all {ratios}"
    # A clustered spectrum (most eigenvalues at 1, five near κ): the bound still holds, loosely.
    clustered = np.concatenate([np.ones(1995), np.linspace(500.0, 1000.0, 5)])
    actual, bound = _cg_actual_iterations(clustered, 1e-8)
    assert actual is not None and actual <= bound


def test_cg_edge_cases_and_errors():
    assert cg_iterations(1.0, 1e-6) == 1  # κ = 1: one step
    assert cg_iterations(50.0, 3.0) == 0  # ε ≥ 2: the bound holds at k = 0
    with pytest.raises(QgpError):
        cg_iterations(0.5, 1e-3)
    with pytest.raises(QgpError):
        cg_iterations(10.0, 0.0)


@given(kappa=st.floats(1.0, 1e8), more=st.floats(1.0, 1e3), eps=st.floats(1e-12, 1.0), finer=st.floats(1.0, 1e3))
@PROPERTY
def test_cg_iterations_monotone(kappa, more, eps, finer):
    # Worse conditioning or a tighter tolerance never needs fewer iterations (the bound is
    # increasing in κ and in 1/ε).
    base = cg_iterations(kappa, eps)
    assert cg_iterations(kappa * more, eps) >= base
    assert cg_iterations(kappa, eps / finer) >= base
    assert cg_flops(1000, 30_000, kappa * more, eps) >= cg_flops(1000, 30_000, kappa, eps)


def test_measure_flop_rate_is_a_positive_measurement():
    # A measurement (no value to compare with); only its sanity is checked, never a speed.
    rate = measure_flop_rate(n=128, repeats=1)
    assert math.isfinite(rate) and rate > 0.0
