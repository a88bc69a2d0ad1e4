"""The regularised system A = K + σ²I: bounds, the two levers, padding."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qgp.errors import QgpError
from qgp.classical.gp import condition
from qgp.classical.kernels import RBF, Matern32, Tapered
from qgp.classical.levers import noise_for_condition, taper_cost, taper_radius_for_sparsity
from qgp.classical.system import diagnose, eigenvalue_bounds, pad_matrix, pad_vector, padded_size, regularise, sparsity


def _points(seed, n, d=1, scale=5.0):
    return np.random.default_rng(seed).uniform(0, scale, size=(n, d))


@given(seed=st.integers(0, 10_000), n=st.integers(2, 24), noise=st.floats(1e-4, 2.0))
@settings(max_examples=40, deadline=None)
def test_bounds_enclose_spectrum(seed, n, noise):
    # Gershgorin circle theorem (Gershgorin 1931) above; λmin(K + σ²I) ≥ σ² for PSD K below.
    X = _points(seed, n, 2)
    A = regularise(RBF(signal_variance=1.3, lengthscale=0.8)(X), noise)
    lo, hi = eigenvalue_bounds(A, noise)
    eig = np.linalg.eigvalsh(A)
    assert lo <= eig[0] * (1 + 1e-12), (lo, eig[0])
    assert hi >= eig[-1] * (1 - 1e-12), (hi, eig[-1])
    assert lo >= noise


@given(seed=st.integers(0, 10_000), target=st.floats(1.5, 200.0))
@settings(max_examples=40, deadline=None)
def test_target_condition_is_hit(seed, target):
    # κ(K + σ²I) = (λmax + σ²)/(λmin + σ²) for symmetric PSD K (common practice: spectral shift).
    X = _points(seed, 12)
    K = Matern32(signal_variance=2.0, lengthscale=1.5)(X)
    eig = np.linalg.eigvalsh(K)
    if eig[-1] / max(eig[0], 1e-300) <= target:
        pytest.skip("kernel matrix already better conditioned than the target")
    s2 = noise_for_condition(eig[0], eig[-1], target)
    kappa = np.linalg.cond(K + s2 * np.eye(len(K)))
    assert abs(kappa / target - 1) < 1e-9, f"κ = {kappa!r}, target {target}"


def test_target_condition_unreachable_is_refused():
    with pytest.raises(QgpError, match="not below the kernel matrix's own condition number"):
        noise_for_condition(1.0, 3.0, 5.0)
    with pytest.raises(QgpError, match="must be a finite number > 1"):
        noise_for_condition(0.1, 3.0, 1.0)


@pytest.mark.parametrize("target", [2, 3, 5, 8])
def test_taper_radius_hits_sparsity(target):
    X = _points(3, 40, 2, scale=10.0)
    radius, achieved = taper_radius_for_sparsity(X, target)
    K = Tapered(RBF(signal_variance=1.0, lengthscale=2.0), radius)(X)
    assert sparsity(K) == achieved == target
    # A slightly larger radius must exceed the target (the radius is the largest admissible).
    K_more = Tapered(RBF(signal_variance=1.0, lengthscale=2.0), radius * (1 + 1e-9))(X)
    assert sparsity(K_more) > target


def test_taper_cost_reports_accuracy_change():
    rng = np.random.default_rng(5)
    X = np.sort(rng.uniform(0, 10, 30))[:, None]
    y = np.sin(X[:, 0])
    Xs = np.linspace(0, 10, 50)[:, None]
    ys = np.sin(Xs[:, 0])
    k = RBF(signal_variance=1.0, lengthscale=1.0)
    wide = taper_cost(X, y, Xs, ys, k, 1e-2, radius=20.0)
    narrow = taper_cost(X, y, Xs, ys, k, 1e-2, radius=1.0)
    assert narrow.sparsity < wide.sparsity
    assert narrow.mean_max_abs_change > wide.mean_max_abs_change
    assert wide.reference_rmse == narrow.reference_rmse


@given(seed=st.integers(0, 10_000), n=st.integers(2, 20))
@settings(max_examples=30, deadline=None)
def test_padding_changes_no_answer(seed, n):
    # diag(A, dI)⁻¹ = diag(A⁻¹, I/d) (block-diagonal inverse, common practice): zero-padded
    # vectors give the same quadratic forms, and d lies inside the spectrum, so κ is unchanged.
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 4, size=(n, 1))
    amp, s2 = 1.7, 0.05
    A = regularise(RBF(signal_variance=amp, lengthscale=0.7)(X), s2)
    y, k = rng.normal(size=n), rng.normal(size=n)
    P = pad_matrix(A, amp + s2)
    size = padded_size(n)
    assert P.shape == (size, size) and size >= n and size & (size - 1) == 0
    yp, kp = pad_vector(y, size), pad_vector(k, size)
    ref = k @ np.linalg.solve(A, y)
    got = kp @ np.linalg.solve(P, yp)
    assert abs(got - ref) <= 1e-12 * max(1.0, abs(ref)) * np.linalg.cond(A), (got, ref)
    ref2 = k @ np.linalg.solve(A, k)
    got2 = kp @ np.linalg.solve(P, kp)
    assert abs(got2 - ref2) <= 1e-12 * max(1.0, abs(ref2)) * np.linalg.cond(A)
    e, ep = np.linalg.eigvalsh(A), np.linalg.eigvalsh(P)
    assert abs(ep[0] - e[0]) <= 1e-12 * e[-1] and abs(ep[-1] - e[-1]) <= 1e-12 * e[-1]


def test_padded_gp_mean_matches_exact_gp():
    rng = np.random.default_rng(1)
    X = rng.uniform(0, 3, size=(11, 2))
    y = rng.normal(size=11)
    Xs = rng.uniform(0, 3, size=(7, 2))
    kern, s2 = RBF(signal_variance=1.0, lengthscale=1.2), 0.1
    gp = condition(X, y, kern, s2, center=False)
    P = pad_matrix(regularise(kern(X), s2), 1.0 + s2)
    ks = np.vstack([kern(X, Xs), np.zeros((16 - 11, 7))])
    mean = ks.T @ np.linalg.solve(P, pad_vector(y, 16))
    np.testing.assert_allclose(mean, gp.predict(Xs).mean, rtol=0, atol=1e-12)


def test_diagnostics_of_sparse_and_dense_agree():
    X = _points(2, 30, 1, scale=20.0)
    kern = Tapered(RBF(signal_variance=1.0, lengthscale=1.0), 2.5)
    dense = diagnose(regularise(kern(X), 0.1), 0.1)
    sparse = diagnose(regularise(kern.sparse(X), 0.1), 0.1)
    assert dense.sparsity == sparse.sparsity
    assert dense.nnz == sparse.nnz
    for a in ("eigenvalue_min", "eigenvalue_max", "bound_lower", "bound_upper", "frobenius_norm"):
        assert abs(getattr(dense, a) - getattr(sparse, a)) < 1e-12, a
