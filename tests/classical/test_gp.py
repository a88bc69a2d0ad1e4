"""Exact GP against scikit-learn, sparse vs dense paths, ML-II on Mauna Loa CO₂, scores, errors."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats

from qgp.errors import QgpError
from qgp.classical.gp import (
    SPARSE_MIN_SIZE,
    ExactGP,
    FitResult,
    _negative_lml_and_gradient,
    condition,
    count_nonpositive,
    fit_ml2,
    nlpd,
    rmse,
)
from qgp.classical.kernels import RBF, Matern32, Matern52, Tapered, Wendland


def _worst_relative(ours, ref) -> float:
    ours, ref = np.asarray(ours, dtype=float), np.asarray(ref, dtype=float)
    return float(np.max(np.abs(ours - ref) / np.abs(ref)))


def _assert_relative(ours, ref, rtol, what):
    ours, ref = np.asarray(ours, dtype=float), np.asarray(ref, dtype=float)
    rel = np.abs(ours - ref) / np.abs(ref)
    worst = int(np.argmax(rel))
    assert rel.flat[worst] <= rtol, (
        f"{what}: worst relative residual {rel.flat[worst]:.3e} at index {worst} "
        f"(ours {float(ours.flat[worst])!r}, ref {float(ref.flat[worst])!r}, allowed {rtol:.0e})"
    )


def _assert_absolute(ours, ref, atol, what):
    ours, ref = np.asarray(ours, dtype=float), np.asarray(ref, dtype=float)
    diff = np.abs(ours - ref)
    worst = int(np.argmax(diff))
    assert diff.flat[worst] <= atol, (
        f"{what}: worst residual {diff.flat[worst]:.3e} at index {worst} "
        f"(ours {float(ours.flat[worst])!r}, ref {float(ref.flat[worst])!r}, allowed {atol:.0e})"
    )


def _toy_data(n: int, n_dims: int, seed: int):
    rng = np.random.default_rng(seed)
    X = rng.uniform(-2.0, 2.0, size=(n, n_dims))
    # An offset of 5 keeps the means far from 0, so relative residuals are meaningful.
    y = 5.0 + np.sin(X).sum(axis=1) + 0.1 * rng.normal(size=n)
    Xs = rng.uniform(-2.0, 2.0, size=(25, n_dims))
    return X, y, Xs


def _sklearn_kernel(kernel):
    from sklearn.gaussian_process import kernels as skk

    ell = np.atleast_1d(kernel.lengthscale)
    if isinstance(kernel, RBF):
        base = skk.RBF(ell, length_scale_bounds="fixed")
    else:
        nu = 1.5 if isinstance(kernel, Matern32) else 2.5
        base = skk.Matern(ell, length_scale_bounds="fixed", nu=nu)
    return skk.ConstantKernel(kernel.signal_variance, constant_value_bounds="fixed") * base


# -- exact GP against scikit-learn -------------------------------------------------------

SKLEARN_CASES = [
    (RBF(signal_variance=1.4, lengthscale=0.8), 1),
    (Matern32(signal_variance=1.4, lengthscale=0.8), 1),
    (Matern52(signal_variance=1.4, lengthscale=0.8), 1),
    (RBF(signal_variance=0.9, lengthscale=1.3), 3),
    (Matern32(signal_variance=0.9, lengthscale=1.3), 3),
    (Matern52(signal_variance=0.9, lengthscale=1.3), 3),
    (RBF(signal_variance=2.1, lengthscale=(0.7, 1.5, 3.0)), 3),  # ARD
    (Matern32(signal_variance=2.1, lengthscale=(0.7, 1.5, 3.0)), 3),  # ARD
    (Matern52(signal_variance=2.1, lengthscale=(0.7, 1.5, 3.0)), 3),  # ARD
]


@pytest.mark.parametrize(("kernel", "n_dims"), SKLEARN_CASES)
@pytest.mark.parametrize("center", [True, False])
def test_exact_gp_matches_scikit_learn(kernel, n_dims, center):
    # Source: scikit-learn GaussianProcessRegressor(kernel=C(a)·RBF/Matern(ℓ, ν), alpha=σ²,
    # optimizer=None, normalize_y=False), fed the same centred targets.
    from sklearn.gaussian_process import GaussianProcessRegressor

    X, y, Xs = _toy_data(40, n_dims, seed=n_dims)
    noise = 0.05
    gp = condition(X, y, kernel, noise, center=center)
    pred = gp.predict(Xs)

    offset = y.mean() if center else 0.0
    ref = GaussianProcessRegressor(
        kernel=_sklearn_kernel(kernel), alpha=noise, optimizer=None, normalize_y=False
    ).fit(X, y - offset)
    ref_mean, ref_std = ref.predict(Xs, return_std=True)

    assert gp.y_offset == offset
    # Round-off of a Cholesky solve with κ(A) ≲ 1e3 is ~1e-13; 1e-8 is the agreed bar.
    _assert_relative(pred.mean, ref_mean + offset, 1e-8, "predictive mean")
    _assert_relative(np.sqrt(pred.variance_latent), ref_std, 1e-8, "latent std")
    _assert_relative(gp.log_marginal_likelihood, ref.log_marginal_likelihood_value_, 1e-8, "log marginal likelihood")
    _assert_absolute(pred.variance_predictive, pred.variance_latent + noise, 1e-15, "predictive = latent + σ²")


def test_k_star_and_solve_are_the_pieces_of_the_mean():
    X, y, Xs = _toy_data(30, 2, seed=4)
    gp = condition(X, y, Matern52(signal_variance=1.0, lengthscale=0.9), 0.1)
    ks = gp.k_star(Xs)
    assert ks.shape == (30, 25)
    _assert_absolute(gp.solve(gp.y_centered), gp.alpha, 1e-12, "A⁻¹(y − m) = α")
    _assert_absolute(ks.T @ gp.alpha + gp.y_offset, gp.predict(Xs).mean, 1e-12, "k*ᵀα + m")


# -- sparse path -------------------------------------------------------------------------


@pytest.mark.parametrize(
    "kernel",
    [
        Tapered(base=RBF(signal_variance=1.2, lengthscale=0.3), support=0.25),
        Tapered(base=Matern32(signal_variance=1.2, lengthscale=(0.3, 0.6)), support=0.3),
        Wendland(signal_variance=1.2, lengthscale=0.3, smoothness=2),
    ],
)
def test_sparse_path_agrees_with_dense(kernel):
    rng = np.random.default_rng(8)
    n = SPARSE_MIN_SIZE + 50
    X = rng.uniform(0.0, 2.0, size=(n, 2))
    y = np.cos(3 * X[:, 0]) * X[:, 1] + 0.05 * rng.normal(size=n)
    Xs = rng.uniform(0.0, 2.0, size=(30, 2))
    auto = condition(X, y, kernel, 0.01)
    dense = condition(X, y, kernel, 0.01, method="dense")
    assert auto.method == "sparse" and dense.method == "dense"
    p_sparse, p_dense = auto.predict(Xs), dense.predict(Xs)
    # Both are backward-stable direct solves of the same system (κ(A) ≲ 1e3): agreement to
    # ~1e-13 is expected; 1e-10 is the agreed bar.
    _assert_absolute(auto.log_marginal_likelihood, dense.log_marginal_likelihood, 1e-10, "LML")
    _assert_absolute(auto.alpha, dense.alpha, 1e-10, "alpha")
    _assert_absolute(p_sparse.mean, p_dense.mean, 1e-10, "mean")
    _assert_absolute(p_sparse.variance_latent, p_dense.variance_latent, 1e-10, "latent variance")
    _assert_absolute(auto.solve(np.eye(n)[:, :3]), dense.solve(np.eye(n)[:, :3]), 1e-10, "A⁻¹ columns")


def test_auto_method_stays_dense_when_it_should():
    X, y, _ = _toy_data(SPARSE_MIN_SIZE + 10, 1, seed=1)
    assert condition(X, y, RBF(1.0, 0.5), 0.1).method == "dense"  # infinite support
    assert condition(X[:50], y[:50], Wendland(1.0, 0.1), 0.1).method == "dense"  # small n
    assert condition(X, y, Wendland(1.0, 10.0), 0.1).method == "dense"  # K nearly full
    assert condition(X, y, Wendland(1.0, 0.01), 0.1).method == "sparse"


def test_sparse_method_needs_finite_support():
    X, y, _ = _toy_data(10, 1, seed=1)
    with pytest.raises(QgpError, match="sparse solver needs a kernel with finite support"):
        condition(X, y, Matern32(1.0, 0.5), 0.1, method="sparse")


@pytest.mark.parametrize(
    ("kernel", "method"),
    [(RBF(1.0, 0.5), "dense"), (Wendland(1.0, 0.5), "dense"), (Wendland(1.0, 0.5), "sparse")],
)
def test_duplicate_inputs_without_noise_are_refused(kernel, method):
    X = np.array([[0.0], [0.3], [0.3], [1.0]])
    y = np.array([1.0, 2.0, 2.5, 0.0])
    with pytest.raises(QgpError, match="not positive definite.*raise the noise variance or remove duplicate inputs"):
        condition(X, y, kernel, 0.0, method=method)
    assert isinstance(condition(X, y, kernel, 1e-3, method=method), ExactGP)


@pytest.mark.parametrize(
    ("X", "y", "noise", "message"),
    [
        (np.zeros((3, 1)), np.zeros(2), 0.1, "one target value per input row"),
        (np.zeros((3, 1)), np.array([0.0, np.nan, 1.0]), 0.1, "targets contain NaN"),
        (np.array([[0.0], [np.inf]]), np.zeros(2), 0.1, "NaN or infinite"),
        (np.arange(3.0), np.zeros(3), -0.1, r"noise variance must be a finite number ≥ 0"),
    ],
)
def test_bad_training_data_is_refused(X, y, noise, message):
    with pytest.raises(QgpError, match=message):
        condition(X, y, RBF(1.0, 1.0), noise)


def test_unknown_method_is_refused():
    with pytest.raises(QgpError, match="unknown solver method"):
        condition(np.arange(3.0), np.zeros(3), RBF(1.0, 1.0), 0.1, method="cg")  # type: ignore[arg-type]


# -- ML-II -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("kernel", "fit_noise"),
    [
        (RBF(signal_variance=1.1, lengthscale=(0.6, 1.7)), True),
        (Matern32(signal_variance=0.8, lengthscale=0.9), False),
        (Tapered(base=Matern52(signal_variance=0.8, lengthscale=0.9), support=2.5), True),
    ],
)
def test_lml_gradient_matches_finite_differences(kernel, fit_noise):
    # Checks the analytic R&W eq. 5.9 gradient used by fit_ml2 against central differences.
    X, y, _ = _toy_data(25, 2, seed=9)
    yc = y - y.mean()
    params = np.append(kernel.theta, math.log(0.07)) if fit_noise else kernel.theta
    fixed = None if fit_noise else 0.07
    _, grad = _negative_lml_and_gradient(params, X, yc, kernel, fixed)
    h = 1e-6
    numeric = np.array(
        [
            (
                _negative_lml_and_gradient(params + h * e, X, yc, kernel, fixed)[0]
                - _negative_lml_and_gradient(params - h * e, X, yc, kernel, fixed)[0]
            )
            / (2 * h)
            for e in np.eye(params.size)
        ]
    )
    # Round-off of the difference quotient ≈ eps·|LML|/h ≈ 1e-8.
    _assert_absolute(grad, numeric, 1e-6, "∂(−LML)/∂θ")


def test_fit_ml2_is_seeded_and_respects_fixed_noise():
    X, y, _ = _toy_data(30, 1, seed=6)
    a = fit_ml2(X, y, RBF(1.0, 1.0), 0.02, np.random.default_rng(3), restarts=3)
    b = fit_ml2(X, y, RBF(1.0, 1.0), 0.02, np.random.default_rng(3), restarts=3)
    assert isinstance(a, FitResult) and a.restarts == 3
    assert a.noise_variance == 0.02
    assert a == b  # same seed, same answer
    start = condition(X, y, RBF(1.0, 1.0), 0.02).log_marginal_likelihood
    assert a.log_marginal_likelihood >= start
    again = condition(X, y, a.kernel, a.noise_variance).log_marginal_likelihood
    assert a.log_marginal_likelihood == again


def test_fit_ml2_keeps_taper_radius():
    X, y, _ = _toy_data(30, 2, seed=12)
    kernel = Tapered(base=RBF(1.0, 1.0), support=3.0)
    result = fit_ml2(X, y, kernel, None, np.random.default_rng(0), restarts=2)
    assert isinstance(result.kernel, Tapered) and result.kernel.support == 3.0
    assert result.noise_variance > 0.0
    assert result.log_marginal_likelihood >= condition(X, y, kernel, 0.1 * np.var(y)).log_marginal_likelihood


def _mauna_loa_window():
    # Source: statsmodels.datasets.co2 (Mauna Loa weekly CO₂, ppm), a 70-week window.
    from statsmodels.datasets import co2

    series = co2.load_pandas().data["co2"].dropna()
    window = series.iloc[1000:1070]
    years = window.index.year + (window.index.day_of_year - 1) / 365.25
    t = np.asarray(years - years[0], dtype=float)[:, None]  # years since the window start
    return t, window.to_numpy(dtype=float)


def test_ml2_matches_scikit_learn_on_mauna_loa():
    # Source: scikit-learn's own ML-II optimiser (L-BFGS-B, 5 restarts) on the same data and
    # kernel ConstantKernel·RBF + WhiteKernel, normalize_y=False, same centring, alpha=0.
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process import kernels as skk

    t, y = _mauna_loa_window()
    ours = fit_ml2(t, y, RBF(signal_variance=1.0, lengthscale=1.0), None, np.random.default_rng(2026), restarts=5)

    ref = GaussianProcessRegressor(
        kernel=skk.ConstantKernel(1.0) * skk.RBF(1.0) + skk.WhiteKernel(0.1),
        alpha=0.0,
        normalize_y=False,
        n_restarts_optimizer=5,
        random_state=0,
    ).fit(t, y - y.mean())
    reference = ref.log_marginal_likelihood_value_
    assert ours.log_marginal_likelihood >= reference - 1e-6, (
        f"ours {ours.log_marginal_likelihood!r} < scikit-learn {reference!r} "
        f"(short by {reference - ours.log_marginal_likelihood:.3e})"
    )
    # Our conditioning reproduces scikit-learn's LML at scikit-learn's hyperparameters.
    params = ref.kernel_.get_params()
    at_ref = condition(
        t, y, RBF(params["k1__k1__constant_value"], params["k1__k2__length_scale"]), params["k2__noise_level"]
    )
    _assert_relative(at_ref.log_marginal_likelihood, reference, 1e-8, "LML at scikit-learn's optimum")


# -- scores ------------------------------------------------------------------------------


def test_nlpd_matches_gaussian_log_density():
    rng = np.random.default_rng(1)
    y, mean = rng.normal(size=20), rng.normal(size=20)
    variance = rng.uniform(0.1, 2.0, size=20)
    # Source: scipy.stats.norm.logpdf with scale = √v.
    reference = -np.mean(scipy.stats.norm.logpdf(y, loc=mean, scale=np.sqrt(variance)))
    _assert_relative(nlpd(y, mean, variance), reference, 1e-14, "NLPD")
    assert rmse(y, mean) == pytest.approx(np.sqrt(np.mean((y - mean) ** 2)), rel=1e-15)


@pytest.mark.parametrize("bad", [0.0, -1e-14, np.nan, np.inf])
def test_nlpd_is_nan_not_clipped_for_bad_variances(bad):
    variance = np.array([0.5, bad, 1.0, bad])
    assert math.isnan(nlpd(np.zeros(4), np.zeros(4), variance))
    assert count_nonpositive(variance) == 2
    assert count_nonpositive(np.array([0.5, 1.0])) == 0


def test_scores_refuse_mismatched_lengths():
    with pytest.raises(QgpError, match="predictive mean has 2 values but there are 3 targets"):
        rmse(np.zeros(3), np.zeros(2))
    with pytest.raises(QgpError, match="predictive variance has 2 values"):
        nlpd(np.zeros(3), np.zeros(3), np.ones(2))
