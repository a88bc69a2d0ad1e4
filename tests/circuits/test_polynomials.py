"""QSVT inversion and inverse-square-root polynomials (qgp.circuits.polynomials).

Sources named beside the checks: CKS = Childs, Kothari & Somma, SIAM J. Comput. 46, 1920 (2017)
(the Chebyshev residual polynomial and its error 1/T_k(z₀)); SNWPB = Sünderhauf, Németh, Walayat,
Patterson & Berntson, arXiv:2507.15537 (2025), with Berntson & Sünderhauf, arXiv:2505.10710 (2025)
(the optimal polynomial's error (1 − a)^n/(a(1 + a)^(n−1)), d = 2n − 1); DMWL = Dong, Meng, Whaley &
Lin, PRA 103, 042419 (2021) (minimax polynomials by convex optimisation / LP).

Double precision: the coefficient polynomial's values carry rounding of ~1e-14, so a measured
error below ~1e-13 cannot match a closed form that is smaller still (κ = 5, k = 100 has
1/T_k(z₀) ≈ 5e-18). Where a closed form is compared "to 1e-9 (1e-8) relative", an absolute floor
of 1e-13 is added for that reason; it only matters when the closed form is below ~1e-4.
"""

from __future__ import annotations

import dataclasses
import math
from decimal import Decimal, getcontext

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.polynomial import Chebyshev
from scipy.optimize import linprog

from qgp.circuits.polynomials import (
    MAX_DEGREE,
    InversionPolynomial,
    inverse_sqrt_polynomial,
    inversion_polynomial,
    optimal_degree,
    optimal_error,
)
from qgp.errors import QgpError

FLOOR = 1e-13  # absolute floor of a double-precision error measurement (module docstring)


def _rho(kappa: float) -> float:
    a = 1.0 / kappa
    return (1.0 + a) / (1.0 - a)


def _cks_error(kappa: float, k: int) -> float:
    """CKS closed form 2/(ρ^k + ρ^−k) = 1/T_k(z₀), z₀ = (1 + a²)/(1 − a²)."""
    r = _rho(kappa)
    return 2.0 / (r**k + r**-k)


def _residual_reference(kappa: float, k: int, x: np.ndarray) -> np.ndarray:
    """T_k((1 + a² − 2x²)/(1 − a²)) / T_k(z₀) through numpy's Chebyshev.basis(k) (CKS)."""
    a = 1.0 / kappa
    t = Chebyshev.basis(k)
    return t((1 + a * a - 2 * x * x) / (1 - a * a)) / t((1 + a * a) / (1 - a * a))


def _residual_extrema(kappa: float, k: int) -> np.ndarray:
    """The k + 1 points of [a, 1] where T_k(z(x)) = ±1: z = cos(jπ/k) (CKS equioscillation)."""
    a = 1.0 / kappa
    z = np.cos(np.pi * np.arange(k + 1) / k)
    return np.sqrt((1 + a * a - (1 - a * a) * z) / 2)


def _alternations(e: np.ndarray, level: float) -> int:
    """Length of the longest sign-alternating sequence of grid extrema with |e| ≥ level."""
    big = np.flatnonzero(np.abs(e) >= level)
    if big.size == 0:
        return 0
    signs = np.sign(e[big])
    return 1 + int(np.count_nonzero(np.diff(signs) != 0))


# -- inversion: Chebyshev residual (CKS) --------------------------------------------------------------


@pytest.mark.parametrize("kappa", [5.0, 20.0, 50.0])
@pytest.mark.parametrize("k", [5, 20, 100])
def test_residual_is_the_chebyshev_closed_form(kappa, k):
    p = inversion_polynomial(kappa, degree=2 * k - 1)
    a = 1.0 / kappa
    x = np.linspace(-1.0, 1.0, 20001)
    # CKS: 1 − x·P(x) = T_k(z(x))/T_k(z₀), P = p/(s·a); compared with numpy's own T_k
    residual = 1.0 - x * p(x) / (p.scale * a)
    assert np.max(np.abs(residual - _residual_reference(kappa, k, x))) <= 1e-12
    # CKS: max over [a, 1] of |1 − xP| is 1/T_k(z₀) = 2/(ρ^k + ρ^−k), reached at the k + 1 points
    # z = cos(jπ/k); the module's measurement and the value at those points both give it
    cks = _cks_error(kappa, k)
    assert abs(p.max_error - cks) <= 1e-9 * cks + FLOOR
    xe = _residual_extrema(kappa, k)
    assert abs(np.max(np.abs(1.0 - xe * p(xe) / (p.scale * a))) - cks) <= 1e-9 * cks + FLOOR
    # odd parity exactly (common practice for QSVT: definite parity)
    assert np.all(p.coefficients[0::2] == 0.0)
    # bounded on a dense grid of [−1, 1] (QSVT needs |p| ≤ 1; GSLW Thm 17)
    peak = np.max(np.abs(p(np.linspace(-1.0, 1.0, 100_001))))
    assert peak <= 1.0 and peak <= p.max_abs * (1 + 1e-12)


def _decimal_residual(kappa: float, k: int, xs: np.ndarray) -> np.ndarray:
    """T_k(z(x))/T_k(z₀) by the three-term recurrence in 40-digit decimal arithmetic (CKS closed
    form, evaluated without the cancellation of 1 − R near x = 0 that double precision suffers)."""
    getcontext().prec = 40
    a = Decimal(1) / Decimal(repr(float(kappa)))

    def t(z: Decimal) -> Decimal:
        t0, t1 = Decimal(1), z
        for _ in range(k - 1):
            t0, t1 = t1, 2 * z * t1 - t0
        return t1

    z0 = (1 + a * a) / (1 - a * a)
    tz0 = t(z0)
    out = []
    for x in xs:
        xd = Decimal(float(x))  # exact binary value of x
        out.append(float(1 - t((1 + a * a - 2 * xd * xd) / (1 - a * a)) / tz0))
    return np.array(out)  # 1 − R(x) = x·P(x)


@pytest.mark.parametrize("kappa", [5.0, 50.0])
def test_degree_2001_coefficients_match_the_closed_form(kappa):
    # common practice: the coefficient-evaluated polynomial against the closed form (CKS) on a grid,
    # in the units QSVT applies (p itself): p(x) vs s·a·(1 − R(x))/x.
    k = 1001
    p = inversion_polynomial(kappa, degree=2 * k - 1)
    a = 1.0 / kappa
    # (i) 40-digit reference on 2001 points of [−1, 1] plus points near 0 and around ±a
    xs = np.concatenate([np.linspace(-1.0, 1.0, 2001), [1e-9, -1e-6, 1e-4, 3e-3], a * (1 + np.linspace(-0.05, 0.05, 41))])
    xs = xs[xs != 0.0]
    ref = p.scale * a * _decimal_residual(kappa, k, xs) / xs
    assert np.max(np.abs(p(xs) - ref)) <= 1e-13
    # (ii) dense double-precision reference (numpy's T_k) away from the cancellation near x = 0
    x = np.linspace(-1.0, 1.0, 200_001)
    x = x[np.abs(x) >= 0.1]
    ref = p.scale * a * (1.0 - _residual_reference(kappa, k, x)) / x
    assert np.max(np.abs(p(x) - ref)) <= 1e-13


def test_scale_meets_the_bound_at_the_peak_near_a():
    # common practice: the maximum of |p| sits just below x = a, above the grid value; the scale
    # makes the refined maximum equal max_abs (up to the documented 1e-10 margin)
    for max_abs in (1.0, 0.5):
        p = inversion_polynomial(20.0, degree=151, max_abs=max_abs)
        assert max_abs * (1 - 2e-10) <= p.max_abs <= max_abs
        a = 1.0 / 20.0
        fine = np.linspace(0.5 * a, 1.5 * a, 200_001)
        assert np.max(np.abs(p(fine))) <= max_abs
        assert np.max(np.abs(p(fine))) == pytest.approx(p.max_abs, rel=1e-9)  # the peak is there
    full, half = inversion_polynomial(20.0, degree=151), inversion_polynomial(20.0, degree=151, max_abs=0.5)
    assert half.scale == pytest.approx(full.scale / 2, rel=1e-14)
    assert half.max_error == full.max_error  # the relative error does not depend on s


@pytest.mark.parametrize("kappa, eps", [(10.0, 1e-3), (50.0, 1e-2), (3.0, 1e-6)])
def test_target_error_gives_the_smallest_degree(kappa, eps):
    # common practice: the degree found meets the target, two less does not
    p = inversion_polynomial(kappa, target_error=eps)
    assert p.degree % 2 == 1
    assert p.max_error <= eps
    assert inversion_polynomial(kappa, degree=p.degree - 2).max_error > eps


@pytest.mark.parametrize("kappa", [5.0, 10.0, 20.0, 50.0])
@pytest.mark.parametrize("eps", [1e-2, 1e-3])
def test_degree_ratio_against_the_claimed_optimum(kappa, eps):
    a = 1.0 / kappa
    # CKS: smallest k with 2/(ρ^k + ρ^−k) ≤ ε; SNWPB: smallest n with (1 − a)^n/(1 + a)^(n−1) ≤ ε
    # (a·max|p* − 1/x|, the error `optimal_error` gives). Derived by direct search here.
    k = next(k for k in range(1, 100_000) if _cks_error(kappa, k) <= eps)
    n = next(n for n in range(1, 100_000) if (1 - a) ** n / (1 + a) ** (n - 1) <= eps)
    ours = inversion_polynomial(kappa, target_error=eps)
    assert ours.degree == 2 * k - 1
    assert optimal_degree(kappa, eps) == 2 * n - 1
    assert ours.degree / optimal_degree(kappa, eps) == (2 * k - 1) / (2 * n - 1)
    # the two closed forms differ by the prefactor 2/(1 + a) at the same rate ρ^−k, so
    # k − n ∈ {⌊c⌋, ⌈c⌉}, c = ln(2/(1 + a))/ln ρ (module docstring; ε ≤ 1e-2 makes
    # arccosh(1/ε) = ln(2/ε) to 1e-5, far inside one step)
    c = math.log(2 / (1 + a)) / math.log(_rho(kappa))
    assert k - n in {math.floor(c), math.ceil(c)}
    assert 1.0 < ours.degree / optimal_degree(kappa, eps) < 1.2


def test_degree_table_values():
    # the table the module docstring quotes (from the two closed forms above): ours / optimal
    table = {
        (5.0, 1e-2): (27, 23), (5.0, 1e-3): (37, 35),
        (10.0, 1e-2): (53, 47), (10.0, 1e-3): (75, 69),
        (20.0, 1e-2): (105, 93), (20.0, 1e-3): (151, 139),
        (50.0, 1e-2): (265, 231), (50.0, 1e-3): (379, 347),
    }  # fmt: skip
    for (kappa, eps), (ours, best) in table.items():
        assert inversion_polynomial(kappa, target_error=eps).degree == ours
        assert optimal_degree(kappa, eps) == best


# -- inversion: the 2025 optimal polynomial (SNWPB) ------------------------------------------------


@pytest.mark.parametrize("kappa", [5.0, 20.0, 50.0])
@pytest.mark.parametrize("d", [1, 9, 41, 101])
def test_optimal_polynomial_has_the_claimed_error_and_equioscillates(kappa, d):
    a = 1.0 / kappa
    n = (d + 1) // 2
    p = inversion_polynomial(kappa, degree=d, construction="optimal")
    eps_uniform = (1 - a) ** n / (a * (1 + a) ** (n - 1))  # SNWPB: max_{[a,1]} |P − 1/x|
    assert optimal_error(kappa, d) == pytest.approx(a * eps_uniform, rel=1e-12)
    # its relative error max |x·P − 1| is the same ε_d, reached at x = 1
    assert p.max_error == pytest.approx(eps_uniform, rel=1e-9)
    x = np.linspace(a, 1.0, 200_001)
    e = p(x) / (p.scale * a) - 1.0 / x
    assert np.max(np.abs(e)) <= eps_uniform * (1 + 1e-9) + FLOOR / a  # P is of size 1/a
    # Chebyshev's alternation theorem: n + 1 alternating extrema of size ε_d make it the minimax
    assert _alternations(e, eps_uniform * (1 - 1e-3)) >= n + 1
    assert np.all(p.coefficients[0::2] == 0.0)
    peak = np.max(np.abs(p(np.linspace(-1.0, 1.0, 100_001))))
    assert peak <= 1.0 and peak <= p.max_abs * (1 + 1e-12)


@pytest.mark.parametrize("kappa, d", [(5.0, 9), (10.0, 15)])
def test_optimal_error_matches_an_lp_minimax(kappa, d):
    # DMWL-style LP: minimise t with |Σ c_j T_{2j+1}(x_i) − 1/x_i| ≤ t on a grid of [a, 1]; the grid
    # optimum is a lower bound on the true minimax, and SNWPB's closed form must sit just above it.
    a = 1.0 / kappa
    xs = 0.5 * (1 + a) + 0.5 * (1 - a) * np.cos(np.pi * (np.arange(4000) + 0.5) / 4000)
    xs = np.concatenate([xs, [a, 1.0]])
    basis = np.stack([Chebyshev.basis(2 * j + 1)(xs) for j in range((d + 1) // 2)], axis=1)
    f = 1.0 / xs
    ones = np.ones((xs.size, 1))
    res = linprog(
        np.r_[np.zeros(basis.shape[1]), 1.0],
        A_ub=np.vstack([np.hstack([basis, -ones]), np.hstack([-basis, -ones])]),
        b_ub=np.r_[f, -f],
        bounds=[(None, None)] * (basis.shape[1] + 1),
        method="highs",
    )
    assert res.status == 0
    claimed = optimal_error(kappa, d) / a
    assert res.x[-1] <= claimed * (1 + 1e-7)
    assert res.x[-1] >= claimed * (1 - 1e-4)


def test_default_is_the_relative_minimax():
    # why "chebyshev_residual" is the default: it is the minimax of the relative error |x·P − 1|
    # (CKS), while "optimal" is the minimax of the uniform error |P − 1/x| (SNWPB)
    a = 1.0 / 20.0
    cheb = inversion_polynomial(20.0, degree=101)
    opt = inversion_polynomial(20.0, degree=101, construction="optimal")
    assert cheb.construction == "chebyshev_residual"
    assert cheb.max_error < opt.max_error
    x = np.linspace(a, 1.0, 100_001)
    uniform = [np.max(np.abs(p(x) / (p.scale * a) - 1 / x)) for p in (cheb, opt)]
    assert uniform[1] < uniform[0]


# -- inverse square root ---------------------------------------------------------------------------


@pytest.mark.parametrize("kappa", [5.0, 10.0, 20.0, 50.0])
@pytest.mark.parametrize("eps", [1e-2, 1e-3])
def test_inverse_sqrt_meets_the_target(kappa, eps):
    q = inverse_sqrt_polynomial(kappa, target_error=eps)
    a = 1.0 / kappa
    assert q.kind == "inverse_sqrt" and q.degree % 2 == 0
    assert q.max_error <= eps
    # common practice: the smallest such degree
    assert inverse_sqrt_polynomial(kappa, degree=q.degree - 2).max_error > eps
    # independent dense-grid measurement: never above the refined one, and close to it
    x = np.linspace(a, 1.0, 200_001)
    rel = np.max(np.abs(q(x) / q.target(x) - 1.0))
    assert q.max_error * (1 - 1e-3) <= rel <= q.max_error * (1 + 1e-9)
    # q(x)²·|x| ≈ s²·a on the range: (1 ± ε)² − 1 bounds it (the point of A^(−1/2): ‖q(A)b‖² ∝ bᵀA⁻¹b)
    both = np.concatenate([-x, x])
    assert np.max(np.abs(q(both) ** 2 * np.abs(both) / (q.scale**2 * a) - 1.0)) <= 2 * eps + eps * eps
    # even parity exactly, bounded on [−1, 1] (common practice for QSVT)
    assert np.all(q.coefficients[1::2] == 0.0)
    peak = np.max(np.abs(q(np.linspace(-1.0, 1.0, 100_001))))
    assert peak <= 1.0 and peak <= q.max_abs * (1 + 1e-12)


@pytest.mark.parametrize("kappa, d", [(10.0, 30), (50.0, 80)])
def test_inverse_sqrt_equioscillates(kappa, d):
    # Chebyshev's alternation theorem (weighted): m + 2 alternating extrema of equal size, m = d/2
    # (the approximating space is m + 1 dimensional), make it the relative-error minimax
    q = inverse_sqrt_polynomial(kappa, degree=d)
    a = 1.0 / kappa
    y = 0.5 * (1 + a * a) + 0.5 * (1 - a * a) * np.cos(np.linspace(0, np.pi, 400_001))
    x = np.sqrt(y)
    e = q(x) / q.target(x) - 1.0
    assert _alternations(e, q.max_error * (1 - 1e-4)) >= d // 2 + 2


@pytest.mark.parametrize("kappa, d", [(10.0, 20), (50.0, 40)])
def test_inverse_sqrt_matches_an_lp_minimax(kappa, d):
    # DMWL's convex-optimisation route as an LP (scipy HiGHS) on a grid of [a, 1]:
    # minimise t with |Σ c_j T_{2j}(x_i) − f_i| ≤ t·f_i, f = √(a/x); a lower bound on the minimax.
    a = 1.0 / kappa
    m = d // 2
    ys = 0.5 * (1 + a * a) + 0.5 * (1 - a * a) * np.cos(np.pi * (np.arange(20 * (m + 1)) + 0.5) / (20 * (m + 1)))
    xs = np.sqrt(np.concatenate([ys, [a * a, 1.0]]))
    f = np.sqrt(a / xs)
    basis = np.stack([Chebyshev.basis(2 * j)(xs) for j in range(m + 1)], axis=1)
    res = linprog(
        np.r_[np.zeros(m + 1), 1.0],
        A_ub=np.vstack([np.hstack([basis, -f[:, None]]), np.hstack([-basis, -f[:, None]])]),
        b_ub=np.r_[f, -f],
        bounds=[(None, None)] * (m + 2),
        method="highs",
    )
    assert res.status == 0
    q = inverse_sqrt_polynomial(kappa, degree=d)
    assert res.x[-1] <= q.max_error * (1 + 1e-6)
    assert res.x[-1] >= q.max_error * (1 - 1e-2)
    # and the LP's own polynomial, measured densely, is no better than the Remez one
    x = np.linspace(a, 1.0, 200_001)
    lp_poly = Chebyshev(np.ravel(np.column_stack([res.x[:-1], np.zeros(m + 1)]))[: d + 1])
    assert np.max(np.abs(lp_poly(x) / np.sqrt(a / x) - 1)) >= q.max_error * (1 - 1e-6)


# -- the object ------------------------------------------------------------------------------------


def test_object_is_frozen_cached_and_read_only():
    p = inversion_polynomial(10.0, degree=21)
    assert isinstance(p, InversionPolynomial)
    assert inversion_polynomial(10, degree=21) is p  # lru_cache on the scalar arguments
    assert p.coefficients.shape == (22,) and p.degree == 21 and p.condition_number == 10.0
    with pytest.raises(ValueError):
        p.coefficients[1] = 0.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        p.scale = 2.0  # type: ignore[misc]
    x = np.array([[-0.5, 0.25], [0.5, 1.0]])
    assert p(x).shape == x.shape and p.target(x).shape == x.shape
    np.testing.assert_allclose(p.target(x), p.scale * 0.1 / x)
    q = inverse_sqrt_polynomial(10.0, degree=20)
    np.testing.assert_allclose(q.target(x), q.scale * np.sqrt(0.1 / np.abs(x)))


# -- errors ----------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda: inversion_polynomial(1.0, degree=11), "condition_number must be a finite number > 1"),
        (lambda: inversion_polynomial(0.5, degree=11), "condition_number"),
        (lambda: inversion_polynomial(float("inf"), degree=11), "condition_number"),
        (lambda: inversion_polynomial(float("nan"), degree=11), "condition_number"),
        (lambda: inversion_polynomial("10", degree=11), "condition_number"),
        (lambda: inversion_polynomial(True, degree=11), "condition_number"),
        (lambda: inversion_polynomial(10.0), "exactly one of target_error and degree"),
        (lambda: inversion_polynomial(10.0, target_error=1e-3, degree=11), "exactly one"),
        (lambda: inversion_polynomial(10.0, target_error=0.0), r"target_error must be a number in \(0, 1\)"),
        (lambda: inversion_polynomial(10.0, target_error=1.0), "target_error"),
        (lambda: inversion_polynomial(10.0, target_error=1e-14), "below 1e-12"),
        (lambda: inversion_polynomial(10.0, degree=10), "degree must be odd.*degree=9 or degree=11"),
        (lambda: inversion_polynomial(10.0, degree=0), "between 1 and 10000"),
        (lambda: inversion_polynomial(10.0, degree=MAX_DEGREE + 2), "between 1 and 10000"),
        (lambda: inversion_polynomial(10.0, degree=11.0), "degree must be an integer"),
        (lambda: inversion_polynomial(10.0, degree=11, max_abs=0.0), r"max_abs must be a number in \(0, 1\]"),
        (lambda: inversion_polynomial(10.0, degree=11, max_abs=1.5), "max_abs"),
        (lambda: inversion_polynomial(10.0, degree=11, construction="remez"), "construction must be one of"),
        (lambda: inversion_polynomial(1e6, target_error=1e-3), "needs degree .* > 10000"),
        (lambda: inverse_sqrt_polynomial(10.0, degree=11), "degree must be even.*degree=10 or degree=12"),
        (lambda: inverse_sqrt_polynomial(10.0, degree=1), "degree must be even.*degree=2"),
        (lambda: inverse_sqrt_polynomial(1e7, target_error=1e-3), "far above 10000"),
        (lambda: optimal_degree(10.0, 2.0), "target_error"),
        (lambda: optimal_degree(1.0, 1e-3), "condition_number"),
        (lambda: optimal_error(10.0, 4), "degree must be odd"),
    ],
)
def test_bad_input_is_one_clear_error(call, match):
    # common practice (DEVELOPERS.md): one QgpError naming the problem and the fix, on one line
    with pytest.raises(QgpError, match=match) as info:
        call()
    assert "\n" not in str(info.value)


# -- property (hypothesis) -------------------------------------------------------------------------


@settings(max_examples=100, deadline=None)
@given(kappa=st.floats(min_value=1.5, max_value=100.0), k=st.integers(min_value=1, max_value=60))
def test_random_inversion_polynomials_are_bounded_and_hit_the_cks_error(kappa, k):
    p = inversion_polynomial(kappa, degree=2 * k - 1)
    grid = np.linspace(-1.0, 1.0, 20_001)
    peak = np.max(np.abs(p(grid)))
    assert peak <= 1.0 and peak <= p.max_abs * (1 + 1e-12)  # QSVT bound (GSLW Thm 17)
    # CKS closed form; the relative error is |x·p/(s·a) − 1|, so the scale s divides out
    cks = _cks_error(kappa, k)
    assert abs(p.max_error - cks) <= 1e-8 * cks + FLOOR
    xe = _residual_extrema(kappa, k)
    at_extrema = np.max(np.abs(1.0 - xe * p(xe) * kappa / p.scale))
    assert abs(at_extrema - cks) <= 1e-8 * cks + FLOOR
