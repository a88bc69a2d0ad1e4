"""The conditioning audit (qgp.scale.conditioning) against dense LAPACK, numpy and the data loader."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
import scipy.sparse as sp

from qgp.classical.kernels import RBF, Tapered, Wendland
from qgp.config import load_dataset
from qgp.errors import QgpError
from qgp.scale.conditioning import (
    EXACT_LIMIT,
    audit_size,
    conditioning_audit,
    extreme_eigenvalues,
    nested_sizes,
    subset_order,
)
from qgp.settings import DataSpec

RNG = np.random.default_rng(5)
X1 = RNG.uniform(0.0, 400.0, size=(900, 1))
X2 = RNG.uniform(0.0, 10.0, size=(700, 2))
CASES = {
    "tapered-rbf-1d": (Tapered(RBF(amplitude=16.0, lengthscale=45.0), 120.0), X1, 2.25),
    "wendland-2d": (Wendland(amplitude=1.0, lengthscale=1.5), X2, 1e-3),
}


@pytest.mark.parametrize("name", CASES)
def test_lanczos_extremes_match_the_dense_eigensolver_to_1e_6(name):
    # Reference: LAPACK's dense symmetric eigensolver (numpy.linalg.eigvalsh) on the same matrix.
    kernel, X, noise = CASES[name]
    A = (kernel.sparse(X) + noise * sp.eye_array(X.shape[0], format="csr")).tocsr()
    eig = np.linalg.eigvalsh(A.toarray())
    got = extreme_eigenvalues(A, method="lanczos", floor=noise)
    rel = max(abs(got.eigenvalue_min / eig[0] - 1), abs(got.eigenvalue_max / eig[-1] - 1))
    assert got.method == "lanczos"
    assert rel <= 1e-6, f"worst relative residual {rel:.2e} (λ_min {got.eigenvalue_min!r} vs {eig[0]!r})"


def test_row_values_match_numpy_on_the_dense_matrix():
    # References: numpy.linalg.cond (2-norm), numpy's Frobenius norm, direct non-zero counts, and
    # the held-out RMSE of scikit-learn-free plain numpy GP algebra (R&W Alg. 2.1).
    kernel, X, noise = CASES["tapered-rbf-1d"]
    X = X[:300]
    y = np.sin(X[:, 0] / 40.0)
    Xh = np.linspace(0, 400, 17)[:, None]
    yh = np.sin(Xh[:, 0] / 40.0)
    row = audit_size(X, y, kernel, noise, target_condition=50.0, X_holdout=Xh, y_holdout=yh, center=False)
    A = kernel(X) + noise * np.eye(300)
    assert row.condition_number == pytest.approx(np.linalg.cond(A, 2), rel=1e-9)
    assert row.sparsity == int(np.max(np.count_nonzero(A, axis=1)))
    assert row.nonzeros == int(np.count_nonzero(A))
    assert row.norm_frobenius == pytest.approx(np.linalg.norm(A, "fro"), rel=1e-12)
    assert row.norm_max == pytest.approx(np.abs(A).max(), rel=1e-15)
    assert row.alpha_sparse_access == pytest.approx(row.sparsity * row.norm_max)
    mean = kernel(Xh, X) @ np.linalg.solve(A, y)
    assert row.holdout_rmse == pytest.approx(np.sqrt(np.mean((mean - yh) ** 2)), rel=1e-8)
    # The σ² for the target makes κ(K + σ²I) the target (dense check).
    K = kernel(X)
    assert np.linalg.cond(K + row.noise_variance_for_target * np.eye(300), 2) == pytest.approx(50.0, rel=1e-8)


def test_a_dense_kernel_without_support_has_sparsity_n():
    X = np.linspace(0.0, 4000.0, 200)[:, None]  # far-apart points: exp underflows to exactly 0
    row = audit_size(X, np.zeros(200), RBF(amplitude=1.0, lengthscale=1.0), 0.1)
    assert row.sparsity == 200 and row.nonzeros == 200 * 200


def test_nested_subsets_are_the_rows_n_train_keeps(tmp_path):
    # Reference: qgp.config.load_dataset with [data] n_train = n (the loader every run uses).
    x = RNG.permutation(500).astype(float)
    (tmp_path / "d.csv").write_text("x,y\n" + "".join(f"{a},{a / 10}\n" for a in x))
    spec = DataSpec(train=tmp_path / "d.csv", target="y", subsample_seed=3)
    full = load_dataset(spec)
    order = subset_order(500, order="permutation", seed=3)
    previous = set()
    for n in nested_sizes(500, 64, 10**6):
        keep = np.sort(order[:n])
        expected = load_dataset(replace(spec, n_train=n)).X_train
        assert np.array_equal(full.X_train[keep], expected)
        rows = {tuple(r) for r in expected}
        assert previous <= rows  # nested
        previous = rows
    assert np.array_equal(subset_order(9, order="file", seed=3), np.arange(9))


def test_sizes_and_refusals():
    assert nested_sizes(1000, 64, 2**17) == (64, 128, 256, 512)
    with pytest.raises(QgpError, match="n_min"):
        nested_sizes(50, 64)
    with pytest.raises(QgpError, match="n_min"):
        nested_sizes(500, 128, 64)
    X = np.linspace(0.0, 1.0, EXACT_LIMIT + 1)[:, None]
    row = audit_size(X, np.zeros(EXACT_LIMIT + 1), RBF(amplitude=1.0, lengthscale=1.0), 0.1)
    assert row.condition_method == "skipped" and row.condition_number is None and "taper" in row.note


def test_audit_reports_progress_and_keeps_row_order():
    kernel, X, noise = CASES["tapered-rbf-1d"]
    said = []
    rows = conditioning_audit(
        X, np.zeros(X.shape[0]), kernel, noise, sizes=(64, 128), order_index=subset_order(X.shape[0], order="file", seed=0),
        say=said.append,
    )
    assert [r.n for r in rows] == [64, 128] and len(said) == 2 and "κ" in said[0]
