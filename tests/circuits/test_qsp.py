"""Symmetric QSP phase factors (qgp.circuits.qsp).

The reference is independent of the module: U(x, Φ) built from scipy.linalg.expm of iφZ and of
i·arccos(x)·X, multiplied as explicit 2×2 matrices, and the target evaluated by numpy's chebval.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from numpy.polynomial import chebyshev as C

from qgp.circuits.qsp import PhaseFactors, chebyshev_values, qsp_phases, qsp_response
from qgp.errors import QgpError

X = np.array([[0, 1], [1, 0]], dtype=complex)
Z = np.array([[1, 0], [0, -1]], dtype=complex)


def reference_u(phases, x) -> np.ndarray:
    """U(x, Φ) = e^{iφ_0 Z} Π_k W(x) e^{iφ_k Z}, W(x) = e^{i·arccos(x)·X}, shape (len(x), 2, 2).

    The convention as the issue states it, by matrix exponentials (scipy) and matrix products.
    """
    x = np.asarray(x, dtype=float)
    w = scipy.linalg.expm(1j * np.arccos(x)[:, None, None] * X)  # batched over x
    u = np.broadcast_to(scipy.linalg.expm(1j * phases[0] * Z), (x.size, 2, 2)).copy()
    for phi in phases[1:]:
        u = u @ w @ scipy.linalg.expm(1j * phi * Z)
    return u


def test_gate_is_the_stated_matrix():
    # The convention: W(x) = e^{i·arccos(x)·X} = [[x, i√(1−x²)], [i√(1−x²), x]].
    x = np.array([-1.0, -0.3, 0.0, 0.7, 1.0])
    s = np.sqrt(1 - x**2)
    expected = np.stack([np.stack([x, 1j * s], -1), np.stack([1j * s, x], -1)], -2)
    assert np.allclose(reference_u(np.zeros(2), x), expected, atol=1e-14)


def check_grid(d: int) -> np.ndarray:
    """Test points: the ends, Chebyshev–Lobatto points (dense near ±1) and uniform points."""
    n = min(max(4 * d, 64), 400)
    return np.unique(np.concatenate([np.cos(np.linspace(0, np.pi, n + 1)), np.linspace(-1, 1, 101)]))


def scale_to(c: np.ndarray, peak: float) -> np.ndarray:
    """c scaled so max |f| = peak on a Chebyshev–Lobatto grid of 32d points (misses the true max by
    at most ½(π/64)² ≈ 1e-3 relative, Bernstein's inequality for the trig polynomial f(cos θ))."""
    grid = np.cos(np.linspace(0, np.pi, 32 * max(len(c), 64) + 1))
    return c * (peak / np.max(np.abs(C.chebval(grid, c))))


def random_target(d: int, peak: float, seed: int) -> np.ndarray:
    c = np.random.default_rng(seed).standard_normal(d + 1)
    c[1 - d % 2 :: 2] = 0.0
    return scale_to(c, peak)


def smooth_target(d: int, peak: float) -> np.ndarray:
    """Chebyshev interpolant of x/(x² + κ⁻²) (≈ 1/x for |x| ≫ 1/κ, κ = 50; odd) or of
    cos(30x)·e^{−x²} (even), truncated to parity and scaled."""
    if d % 2:
        c = C.chebinterpolate(lambda x: x / (x * x + 50.0**-2), d)
    else:
        c = C.chebinterpolate(lambda x: np.cos(30 * x) * np.exp(-x * x), d)
    c[1 - d % 2 :: 2] = 0.0
    return scale_to(c, peak)


def assert_law(result: PhaseFactors, c: np.ndarray, atol: float = 1e-10, x=None) -> None:
    """Re⟨0|U(x, Φ)|0⟩ = Σ c_k T_k(x) against the independent reference (the issue's defining law)."""
    x = check_grid(len(c)) if x is None else x
    got = reference_u(result.phases, x)[:, 0, 0].real
    want = C.chebval(x, c)
    worst = np.max(np.abs(got - want))
    i = int(np.argmax(np.abs(got - want)))
    assert worst <= atol, f"degree {result.degree}: worst |Re U00 − f| = {worst:.3e} at x = {x[i]:.6f}"


# The defining law of symmetric QSP with Re⟨0|U|0⟩ as target (Dong, Meng, Whaley & Lin, PRA 103,
# 042419 (2021), as the issue states it); degrees 1, 2, 3, 10, 51, 100 and ≥ 1000, odd and even,
# max|f| 0.5 and 0.95.
LAW_CASES = [
    (0, 0.5, "random"),
    (1, 0.5, "random"),
    (1, 0.95, "random"),
    (2, 0.95, "random"),
    (3, 0.5, "random"),
    (3, 0.95, "random"),
    (10, 0.5, "random"),
    (10, 0.95, "random"),
    (51, 0.95, "random"),
    (51, 0.5, "smooth"),
    (100, 0.95, "random"),
    (100, 0.95, "smooth"),
    (1000, 0.5, "smooth"),
    (1001, 0.95, "smooth"),
]


@pytest.mark.parametrize("d, peak, kind", LAW_CASES, ids=[f"d{d}-{p}-{k}" for d, p, k in LAW_CASES])
def test_defining_law_against_reference(d, peak, kind):
    c = random_target(d, peak, seed=d) if kind == "random" else smooth_target(d, peak)
    result = qsp_phases(c)
    assert result.degree == d and result.phases.shape == (d + 1,)
    assert result.method == "newton"
    assert_law(result, c)
    # the module's own residual (dense grid) agrees with the reference check
    assert result.residual <= 1e-10, f"reported residual {result.residual:.3e}"


def test_symmetry():
    # Symmetric QSP (Dong, Meng, Whaley & Lin 2021): φ_j = φ_{d−j}.
    for d, peak in [(10, 0.95), (51, 0.5), (100, 0.95), (101, 0.95)]:
        phases = qsp_phases(random_target(d, peak, seed=7 + d)).phases
        worst = np.max(np.abs(phases - phases[::-1]))
        assert worst <= 1e-12, f"degree {d}: max |φ_j − φ_(d−j)| = {worst:.3e}"


# -- known closed forms ------------------------------------------------------------------------


def test_zero_phases_give_chebyshev_polynomial():
    # Common practice (e.g. QSPPACK's chebyshev_ex1 example): Φ = 0 gives U = W^d = e^{i·d·arccos(x)·X},
    # so Re U00 = T_d(x) = cos(d·arccos x).
    x = check_grid(20)
    for d in (1, 4, 7, 20):
        got = reference_u(np.zeros(d + 1), x)[:, 0, 0].real
        assert np.max(np.abs(got - np.cos(d * np.arccos(x)))) <= 1e-12
        assert np.max(np.abs(qsp_response(np.zeros(d + 1), x) - reference_u(np.zeros(d + 1), x)[:, 0, 0])) <= 1e-12


@pytest.mark.parametrize("d", [1, 2, 5, 8, 33, 200])
def test_half_chebyshev_polynomial(d):
    # f = 0.5·T_d (T_d itself has max|f| = 1 and is refused, see test_max_one_is_refused);
    # closed form 0.5·cos(d·arccos x).
    c = np.zeros(d + 1)
    c[d] = 0.5
    result = qsp_phases(c)
    x = check_grid(d)
    got = reference_u(result.phases, x)[:, 0, 0].real
    worst = np.max(np.abs(got - 0.5 * np.cos(d * np.arccos(x))))
    assert worst <= 1e-10, f"degree {d}: worst |Re U00 − T_d/2| = {worst:.3e}"


def test_zero_polynomial_gives_quarter_pi_edges():
    # QSPPACK example chebyshev_ex2: "The answer is known analytically phi=(pi/4,0,0,..,0,pi/4)".
    for d in (1, 2, 5, 10):
        result = qsp_phases(np.zeros(d + 1))
        expected = np.zeros(d + 1)
        expected[[0, -1]] = np.pi / 4
        assert np.array_equal(result.phases, expected)
        assert result.iterations == 0 and result.residual <= 1e-15
    # d = 0: both quarters on the one phase, U = e^{iπ/2·Z}, Re U00 = cos(π/2) = 0
    assert np.allclose(qsp_phases([0.0]).phases, [np.pi / 2])


def test_degree_zero_and_one_closed_forms():
    # Worked by hand from the convention: d = 0, U = e^{iφ_0 Z}, Re U00 = cos φ_0 = c_0;
    # d = 1 symmetric, U00 = e^{2iφ_0}·x, so Re U00 = cos(2φ_0)·x = c_1·x.
    for c0 in (0.3, -0.7, 0.99):
        (phi,) = qsp_phases([c0]).phases
        assert np.cos(phi) == pytest.approx(c0, abs=1e-13)
    for c1 in (0.5, -0.25, 0.9):
        phases = qsp_phases([0.0, c1]).phases
        assert phases[0] == phases[1]
        assert np.cos(2 * phases[0]) == pytest.approx(c1, abs=1e-13)


# -- property ---------------------------------------------------------------------------------


@settings(max_examples=25, deadline=None)
@given(
    d=st.integers(0, 40),
    values=st.lists(st.floats(-1, 1, allow_nan=False), min_size=21, max_size=21),
)
def test_random_coefficients_property(d, values):
    # The defining law (Dong, Meng, Whaley & Lin 2021) for random targets of one parity, max|f| = 0.8.
    c = np.zeros(d + 1)
    c[d % 2 :: 2] = values[: d // 2 + 1]
    grid = np.cos(np.linspace(0, np.pi, 2001))
    peak = np.max(np.abs(C.chebval(grid, c)))
    assume(peak > 1e-6)
    c *= 0.8 / peak
    result = qsp_phases(c)
    assert result.residual <= 1e-11, f"degree {d}: residual {result.residual:.3e}"
    # 65 points keep the expm reference fast; the module's residual above covers a dense grid
    assert_law(result, c, atol=1e-11, x=np.cos(np.linspace(0, np.pi, 65)))


# -- convergence range (measured; Dong, Lin, Ni & Wang, SIAM J. Sci. Comput. 46 (2024): Newton on
# the reduced phases converges for max|f| close to 1) --------------------------------------------


@pytest.mark.parametrize("peak", [0.99, 0.999, 0.9999])
def test_newton_converges_close_to_one(peak):
    c = C.chebinterpolate(lambda x: np.tanh(20 * x), 101)
    c[0::2] = 0.0
    c = scale_to(c, peak)
    result = qsp_phases(c)
    assert result.iterations <= 20
    assert_law(result, c)


@pytest.mark.slow
@pytest.mark.parametrize("peak", [0.9, 0.999])
def test_degree_2000(peak):
    c = smooth_target(2001, peak)
    result = qsp_phases(c)
    assert result.degree == 2001 and result.iterations <= 20
    assert_law(result, c)


# -- the helpers ------------------------------------------------------------------------------


def test_qsp_response_keeps_shape_and_matches_reference():
    phases = np.array([0.3, -0.1, 0.7, 0.2])  # not symmetric: the response is for any phases
    x = np.linspace(-1, 1, 12).reshape(3, 4)
    got = qsp_response(phases, x)
    assert got.shape == (3, 4) and np.iscomplexobj(got)
    want = reference_u(phases, x.ravel())[:, 0, 0].reshape(3, 4)
    assert np.max(np.abs(got - want)) <= 1e-14
    assert qsp_response(phases, 0.5).shape == ()


def test_chebyshev_values_is_chebval():
    c = np.array([0.1, -0.2, 0.3, 0.05])
    x = np.linspace(-1, 1, 9)
    assert np.allclose(chebyshev_values(c, x), C.chebval(x, c), atol=1e-15)


def test_phase_factors_is_frozen():
    result = qsp_phases([0.0, 0.5])
    with pytest.raises(AttributeError):
        result.degree = 3


# -- errors -----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "coefficients, match",
    [
        ([], "non-empty"),
        ([0.0, np.nan, 0.0, 0.2], "NaN or infinity"),
        ([0.0, 0.3, 0.0, np.inf], "NaN or infinity"),
        ([0.1, 0.3], "mix even and odd"),
        ([0.0, 0.2, 0.1, 0.3], "mix even and odd"),
        ([0.0, 1.0], "max \\|f\\| .* ≥ 1.*scale the polynomial down"),
        ([0.0, 0.6, 0.0, 0.5], "max \\|f\\| .* ≥ 1"),
        ([[0.0, 0.5]], "1-D"),
    ],
)
def test_bad_coefficients(coefficients, match):
    with pytest.raises(QgpError, match=match):
        qsp_phases(coefficients)


def test_max_one_is_refused():
    # T_d itself (max|f| = 1, reached at x = ±1) has phases 0 but is outside what the solver accepts.
    with pytest.raises(QgpError, match="≥ 1"):
        qsp_phases([0, 0, 0, 0, 1.0])


def test_peak_between_grid_points_is_caught():
    # A degree-2001 random polynomial whose maximum on a 4d-point grid is 0.999 reaches > 1 between
    # grid points; the check must see it (else Newton runs 100 iterations and fails).
    d = 2001
    c = np.random.default_rng(3).standard_normal(d + 1)
    c[0::2] = 0.0
    coarse = np.cos(np.linspace(0, np.pi, 4 * d + 1))
    c *= 0.999 / np.max(np.abs(C.chebval(coarse, c)))
    fine = np.cos(np.linspace(0, np.pi, 64 * d + 1))
    assert np.max(np.abs(C.chebval(fine, c))) > 1.0  # premise, measured
    with pytest.raises(QgpError, match="≥ 1"):
        qsp_phases(c)


def test_not_converged_message():
    c = smooth_target(51, 0.95)
    with pytest.raises(QgpError, match="did not converge \\(residual .*lower max \\|f\\| \\(scale the polynomial down\\)"):
        qsp_phases(c, max_iterations=1)


@pytest.mark.parametrize("kwargs", [{"tol": 0.0}, {"tol": float("nan")}, {"max_iterations": 0}, {"max_iterations": 2.5}])
def test_bad_options(kwargs):
    with pytest.raises(QgpError):
        qsp_phases([0.0, 0.5], **kwargs)


def test_bad_response_inputs():
    with pytest.raises(QgpError, match="\\[−1, 1\\]"):
        qsp_response([0.1, 0.2], [0.5, 1.5])
    with pytest.raises(QgpError, match="phases"):
        qsp_response([], [0.5])


def test_trailing_zero_of_other_parity_lowers_degree():
    # c = (0, 0.5, 0): f = 0.5·x is odd, so the degree is 1, not 2.
    result = qsp_phases([0.0, 0.5, 0.0])
    assert result.degree == 1 and result.phases.shape == (2,)
    assert_law(result, np.array([0.0, 0.5]))
