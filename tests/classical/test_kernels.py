"""Kernel values, support, positive definiteness, sparse evaluation and configuration errors."""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from qgp.errors import QgpError
from qgp.classical.kernels import (
    RBF,
    Kernel,
    Matern32,
    Matern52,
    Tapered,
    Wendland,
    make_kernel,
    wendland_phi,
)
from qgp.settings import KernelSpec

# Hypothesis runs are derandomised so the suite is reproducible (fixed examples per run).
PROPERTY = settings(max_examples=40, deadline=None, derandomize=True)


def _assert_close(ours, ref, *, rtol=0.0, atol=0.0, what=""):
    """assert_allclose-style check whose message names the worst residual."""
    ours, ref = np.asarray(ours, dtype=float), np.asarray(ref, dtype=float)
    assert ours.shape == ref.shape, f"{what}: shape {ours.shape} != {ref.shape}"
    resid = np.abs(ours - ref)
    allowed = atol + rtol * np.abs(ref)
    worst = int(np.argmax(resid - allowed)) if resid.size else 0
    assert np.all(resid <= allowed), (
        f"{what}: worst residual {resid.flat[worst]:.3e} at flat index {worst} "
        f"(ours {float(ours.flat[worst])!r}, ref {float(ref.flat[worst])!r}, allowed {allowed.flat[worst]:.3e})"
    )


def _min_eigenvalue(K: np.ndarray) -> float:
    return float(np.linalg.eigvalsh(0.5 * (K + K.T))[0])


# -- Wendland functions ------------------------------------------------------------------


@pytest.mark.parametrize(
    ("smoothness", "r", "expected"),
    [
        # Source: Wendland (1995), φ_{3,1}(r) = (1 − r)₊⁴ (4r + 1).
        (1, 0.0, 1.0),  # 1⁴ · 1 = 1
        (1, 0.5, 0.1875),  # 0.5⁴ · (2 + 1) = 0.0625 · 3 = 0.1875
        (1, 1.0, 0.0),  # 0⁴ · 5 = 0
        # Source: Wendland (1995), φ_{3,2}(r) = (1 − r)₊⁶ (35r² + 18r + 3) / 3.
        (2, 0.0, 1.0),  # 1⁶ · 3 / 3 = 1
        (2, 0.5, 20.75 / 192.0),  # 0.5⁶ · (35/4 + 9 + 3) / 3 = (1/64) · 20.75 / 3 = 0.108072916…
        (2, 1.0, 0.0),  # 0⁶ · 56 / 3 = 0
    ],
)
def test_wendland_matches_published_values(smoothness, r, expected):
    value = float(wendland_phi(r, smoothness))
    assert value == pytest.approx(expected, rel=1e-15, abs=0.0), f"φ_3,{smoothness}({r}) = {value!r}"


@pytest.mark.parametrize("smoothness", [1, 2])
def test_wendland_support_is_exact(smoothness):
    outside = np.array([1.0, 1.0 + 1e-12, 1.5, 10.0, 1e6])
    values = wendland_phi(outside, smoothness)
    assert np.all(values == 0.0), f"non-zero beyond the radius: {values}"
    inside = wendland_phi(np.array([1.0 - 1e-3, 0.9, 0.1]), smoothness)
    assert np.all(inside > 0.0), f"zero inside the radius: {inside}"


def test_wendland_kernel_support_in_input_units():
    # ARD: support radius 0.5 along x, 2.0 along y; the safe Euclidean bound is the largest.
    k = Wendland(signal_variance=3.0, lengthscale=(0.5, 2.0), smoothness=2)
    assert k.support_radius == 2.0
    origin = np.zeros((1, 2))
    at_edge = np.array([[0.5, 0.0], [0.0, 2.0], [0.6, 0.0], [0.0, 2.5]])
    assert np.all(k(origin, at_edge) == 0.0)
    assert k(origin, np.array([[0.49, 0.0]]))[0, 0] > 0.0


def test_wendland_rejects_more_than_three_dimensions():
    k = Wendland(signal_variance=1.0, lengthscale=1.0)
    X = np.zeros((3, 4))
    for evaluate in (k, k.diag, k.sparse):
        with pytest.raises(QgpError, match="up to 3 dimensions"):
            evaluate(X)


def test_wendland_rejects_bad_smoothness():
    with pytest.raises(QgpError, match="smoothness must be 1 or 2"):
        Wendland(signal_variance=1.0, lengthscale=1.0, smoothness=3)
    with pytest.raises(QgpError, match="smoothness must be 1 or 2"):
        wendland_phi(0.5, 3)


# -- positive definiteness (hypothesis) --------------------------------------------------


@st.composite
def point_sets(draw):
    n_dims = draw(st.integers(1, 3))
    n = draw(st.integers(2, 30))
    coords = st.floats(-2.0, 2.0, allow_nan=False, allow_infinity=False)
    X = draw(arrays(np.float64, (n, n_dims), elements=coords))
    return np.unique(X, axis=0)  # distinct points


@PROPERTY
@given(X=point_sets(), radius=st.floats(0.1, 5.0), amplitude=st.floats(0.1, 10.0), smoothness=st.sampled_from([1, 2]))
def test_wendland_matrix_is_positive_semidefinite(X, radius, amplitude, smoothness):
    K = Wendland(signal_variance=amplitude, lengthscale=radius, smoothness=smoothness)(X)
    floor = -1e-10 * len(X) * amplitude  # round-off allowance of a symmetric eigensolve
    assert _min_eigenvalue(K) >= floor, f"λmin = {_min_eigenvalue(K):.3e} < {floor:.3e}"


@PROPERTY
@given(X=point_sets(), ell=st.floats(0.1, 3.0), support=st.floats(0.1, 5.0), amplitude=st.floats(0.1, 10.0))
def test_tapered_rbf_matrix_is_positive_semidefinite(X, ell, support, amplitude):
    K = Tapered(base=RBF(signal_variance=amplitude, lengthscale=ell), support=support)(X)
    floor = -1e-10 * len(X) * amplitude
    assert _min_eigenvalue(K) >= floor, f"λmin = {_min_eigenvalue(K):.3e} < {floor:.3e}"


# -- dense values ------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("ours", "family", "nu"),
    [
        (RBF(signal_variance=1.7, lengthscale=(0.6, 1.3, 2.2)), "rbf", None),
        (Matern32(signal_variance=0.4, lengthscale=0.9), "matern", 1.5),
        (Matern52(signal_variance=2.5, lengthscale=(0.6, 1.3, 2.2)), "matern", 2.5),
    ],
)
def test_stationary_matrix_matches_scikit_learn(ours, family, nu):
    # Source: scikit-learn ConstantKernel(a) * RBF(ℓ) / Matern(ℓ, ν) as the outside reference.
    from sklearn.gaussian_process import kernels as skk

    ell = np.atleast_1d(ours.lengthscale)
    base = skk.RBF(ell) if family == "rbf" else skk.Matern(ell, nu=nu)
    reference = skk.ConstantKernel(ours.signal_variance) * base
    rng = np.random.default_rng(7)
    X1, X2 = rng.normal(size=(25, 3)), rng.normal(size=(11, 3))
    _assert_close(ours(X1, X2), reference(X1, X2), rtol=1e-12, atol=1e-15, what="cross matrix")
    _assert_close(ours(X1), reference(X1), rtol=1e-12, atol=1e-15, what="square matrix")


@pytest.mark.parametrize(
    "kernel",
    [
        RBF(signal_variance=2.0, lengthscale=0.7),
        Matern32(signal_variance=2.0, lengthscale=(0.7, 1.1)),
        Matern52(signal_variance=2.0, lengthscale=0.7),
        Wendland(signal_variance=2.0, lengthscale=1.5, smoothness=2),
        Tapered(base=Matern52(signal_variance=2.0, lengthscale=0.7), support=1.2),
    ],
)
def test_diag_is_signal_variance_and_matrix_symmetric(kernel):
    X = np.random.default_rng(3).uniform(-1, 1, size=(20, 2))
    K = kernel(X)
    assert np.array_equal(np.diag(K), kernel.diag(X))
    assert np.all(kernel.diag(X) == 2.0)
    assert np.array_equal(K, K.T)


def test_one_dimensional_array_is_read_as_points():
    k = RBF(signal_variance=1.0, lengthscale=0.5)
    x = np.linspace(0, 1, 5)
    assert np.array_equal(k(x), k(x[:, None]))


# -- sparse evaluation -------------------------------------------------------------------


SPARSE_CASES = [
    Wendland(signal_variance=1.5, lengthscale=0.3, smoothness=1),
    Wendland(signal_variance=1.5, lengthscale=(0.2, 0.5), smoothness=2),
    Tapered(base=RBF(signal_variance=0.8, lengthscale=0.4), support=0.35),
    Tapered(base=Matern32(signal_variance=0.8, lengthscale=(0.3, 0.9)), support=0.5),
    Tapered(base=Wendland(signal_variance=0.8, lengthscale=0.2), support=0.5),
]


@pytest.mark.parametrize("kernel", SPARSE_CASES)
def test_sparse_equals_dense(kernel):
    rng = np.random.default_rng(11)
    X = rng.uniform(0, 2, size=(120, 2))
    X[5] = X[17]  # an exact duplicate: a zero distance off the diagonal
    Xs = np.vstack([rng.uniform(0, 2, size=(40, 2)), X[:3]])  # test points coinciding with training ones
    for args in ((X,), (X, Xs)):
        dense = kernel(*args)
        S = kernel.sparse(*args)
        assert S.format == "csr"
        _assert_close(S.toarray(), dense, rtol=1e-13, atol=1e-15, what=f"sparse vs dense {kernel}")
        assert S.nnz == np.count_nonzero(dense), "sparse result has a different pattern"
    assert np.all(kernel.sparse(X).diagonal() == kernel.signal_variance)
    assert 0 < kernel.sparse(X).nnz < 0.5 * len(X) ** 2


@pytest.mark.parametrize("n_dims", [1, 3])
def test_tapered_is_zero_beyond_support(n_dims):
    k = Tapered(base=RBF(signal_variance=1.0, lengthscale=10.0), support=0.5)
    rng = np.random.default_rng(5)
    X1, X2 = rng.uniform(0, 2, size=(60, n_dims)), rng.uniform(0, 2, size=(50, n_dims))
    distance = np.linalg.norm(X1[:, None, :] - X2[None, :, :], axis=2)
    K = k(X1, X2)
    assert np.all(K[distance >= 0.5] == 0.0)
    assert np.all(K[distance < 0.5 - 1e-9] > 0.0)
    assert k.support_radius == 0.5


def test_support_radius_of_tapered_takes_the_tighter_support():
    assert Tapered(base=Wendland(1.0, 0.2), support=0.5).support_radius == 0.2
    assert Tapered(base=Wendland(1.0, 0.9), support=0.5).support_radius == 0.5
    assert RBF(1.0, 1.0).support_radius is None


def test_sparse_needs_finite_support():
    with pytest.raises(QgpError, match="unbounded support"):
        Matern52(signal_variance=1.0, lengthscale=1.0).sparse(np.zeros((4, 1)))


# -- hyperparameters ---------------------------------------------------------------------


def test_theta_round_trip_and_immutability():
    k = Matern32(signal_variance=2.0, lengthscale=(0.5, 4.0))
    _assert_close(k.theta, np.log([2.0, 0.5, 4.0]), rtol=1e-15, what="theta")
    k2 = k.with_theta(np.log([3.0, 1.0, 2.0]))
    assert isinstance(k2, Matern32) and k2 is not k
    _assert_close(k2.lengthscale, [1.0, 2.0], rtol=1e-15, what="lengthscale")
    assert k.signal_variance == 2.0  # original untouched
    with pytest.raises(dataclasses.FrozenInstanceError):
        k.signal_variance = 5.0  # type: ignore[misc]
    assert isinstance(RBF(1.0, 0.5).with_theta([0.0, 0.0]).lengthscale, float)


def test_tapered_theta_covers_base_only():
    k = Tapered(base=RBF(signal_variance=2.0, lengthscale=0.5), support=1.5)
    _assert_close(k.theta, np.log([2.0, 0.5]), rtol=1e-15, what="tapered theta")
    k2 = k.with_theta(np.log([1.0, 0.25]))
    assert isinstance(k2, Tapered) and k2.support == 1.5
    assert k2.signal_variance == pytest.approx(1.0) and k2.lengthscale == pytest.approx(0.25)


@pytest.mark.parametrize(
    "kernel",
    [
        RBF(signal_variance=1.3, lengthscale=0.8),
        RBF(signal_variance=1.3, lengthscale=(0.8, 1.4)),
        Matern32(signal_variance=0.7, lengthscale=(0.8, 1.4)),
        Matern52(signal_variance=0.7, lengthscale=1.1),
        Wendland(signal_variance=1.1, lengthscale=(1.5, 2.0), smoothness=1),
        Wendland(signal_variance=1.1, lengthscale=1.8, smoothness=2),
        Tapered(base=Matern52(signal_variance=0.9, lengthscale=(0.6, 0.9)), support=1.6),
    ],
)
def test_theta_gradient_matches_finite_differences(kernel):
    X = np.random.default_rng(2).uniform(0, 1.5, size=(12, 2))
    analytic = kernel.theta_gradient(X)
    h = 1e-6
    for j in range(kernel.theta.size):
        step = np.zeros(kernel.theta.size)
        step[j] = h
        numeric = (kernel.with_theta(kernel.theta + step)(X) - kernel.with_theta(kernel.theta - step)(X)) / (2 * h)
        # Central difference error is O(h²·K''') plus round-off O(eps·K/h) ≈ 1e-10.
        _assert_close(analytic[:, :, j], numeric, atol=1e-7, what=f"∂K/∂θ_{j}")


def test_describe_is_json_ready():
    plain = json.loads(json.dumps(Matern52(signal_variance=2.0, lengthscale=(1.0, 2.0)).describe()))
    assert plain == {
        "family": "matern52",
        "signal_variance": 2.0,
        "lengthscale": [1.0, 2.0],
        "support": None,
        "taper": None,
        "smoothness": 2.5,
    }
    tapered = json.loads(json.dumps(Tapered(base=RBF(1.0, 0.5), support=3.0).describe()))
    assert tapered["family"] == "rbf" and tapered["support"] == 3.0
    assert tapered["taper"] == {"family": "wendland", "smoothness": 1, "support": 3.0}
    assert Wendland(1.0, 2.0, smoothness=2).describe()["smoothness"] == 2


# -- configuration -----------------------------------------------------------------------


@pytest.mark.parametrize(
    ("spec", "n_dims", "cls"),
    [
        (KernelSpec(family="rbf", lengthscale=0.5), 2, RBF),
        (KernelSpec(family="matern32", lengthscale=(0.5, 1.0)), 2, Matern32),
        (KernelSpec(family="matern52"), 1, Matern52),
        (KernelSpec(family="wendland", lengthscale=2.0, smoothness=2), 3, Wendland),
        (KernelSpec(family="rbf", support=1.0), 2, Tapered),
    ],
)
def test_make_kernel_builds_the_family(spec, n_dims, cls):
    k = make_kernel(spec, n_dims)
    assert type(k) is cls and isinstance(k, Kernel)
    assert k.family == spec.family
    assert k.signal_variance == spec.signal_variance
    if cls is Wendland:
        assert k.smoothness == 2


def test_make_kernel_lengthscale_count_mismatch():
    with pytest.raises(QgpError, match=r"`\[kernel\] lengthscale` has 2 values but the data have 3") as err:
        make_kernel(KernelSpec(family="rbf", lengthscale=(1.0, 2.0)), 3)
    assert "exactly 3 values" in str(err.value)


def test_evaluation_lengthscale_count_mismatch():
    with pytest.raises(QgpError, match=r"`\[kernel\] lengthscale` has 2 values but the inputs have 3"):
        RBF(signal_variance=1.0, lengthscale=(1.0, 2.0))(np.zeros((2, 3)))


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"signal_variance": 0.0, "lengthscale": 1.0}, r"signal variance must be a positive finite number .* `\[kernel\] signal_variance` > 0"),
        ({"signal_variance": -2.0, "lengthscale": 1.0}, r"signal variance must be a positive"),
        ({"signal_variance": 1.0, "lengthscale": -1.0}, r"lengthscale must be a positive finite number .* `\[kernel\] lengthscale` > 0"),
        ({"signal_variance": 1.0, "lengthscale": (1.0, 0.0)}, r"every kernel lengthscale must be a positive"),
        ({"signal_variance": 1.0, "lengthscale": math.inf}, r"lengthscale must be a positive finite"),
    ],
)
def test_non_positive_hyperparameters_are_refused(kwargs, message):
    with pytest.raises(QgpError, match=message):
        Matern32(**kwargs)


def test_make_kernel_dimension_limits():
    with pytest.raises(QgpError, match="Wendland kernel is positive definite only for inputs of up to 3"):
        make_kernel(KernelSpec(family="wendland"), 4)
    with pytest.raises(QgpError, match=r"remove `\[kernel\] support`"):
        make_kernel(KernelSpec(family="rbf", support=1.0), 4)
    with pytest.raises(QgpError, match=r"`\[kernel\] support` > 0"):
        make_kernel(KernelSpec(family="rbf", support=0.0), 2)
    assert isinstance(make_kernel(KernelSpec(family="rbf"), 8), RBF)  # no limit without compact support


# -- the deprecated name `amplitude` (one release) ---------------------------------------------------


def test_amplitude_keyword_still_works_with_a_warning_naming_signal_variance():
    with pytest.warns(FutureWarning, match="signal_variance"):
        old = Matern32(amplitude=2.5, lengthscale=0.7)
    assert old == Matern32(signal_variance=2.5, lengthscale=0.7)
    with pytest.warns(FutureWarning, match="signal_variance"):
        assert old.amplitude == 2.5
    with pytest.raises(QgpError, match="not both"):
        RBF(amplitude=1.0, signal_variance=1.0, lengthscale=1.0)
