"""The conditioning audit (qgp.scale.conditioning) against LAPACK, numpy, qiskit, scikit-learn and the loader."""

from __future__ import annotations

import csv
import io
import json
from dataclasses import replace

import numpy as np
import pytest
import scipy.sparse as sp

from qgp.circuits.methods.encodings import get_encoding
from qgp.classical.kernels import RBF, Matern32, Tapered, Wendland
from qgp.classical.system import pad_matrix, padding_diagonal
from qgp.config import load_dataset
from qgp.errors import QgpError
from qgp.scale import conditioning
from qgp.scale.conditioning import (
    CONDITIONING_COLUMNS,
    EXACT_LIMIT,
    audit_size,
    conditioning_audit,
    extreme_eigenvalues,
    nested_sizes,
    subset_order,
)
from qgp.settings import DataSpec

RNG = np.random.default_rng(5)
X1 = RNG.uniform(0.0, 400.0, size=(700, 1))
X2 = RNG.uniform(0.0, 10.0, size=(700, 2))
X3 = RNG.uniform(0.0, 10.0, size=(600, 3))

# Sparse matrices whose spectra differ where Lanczos finds them hard: a bottom cluster far tighter
# than 1e-6 (1-D, dense data: λmin(K)/σ² ~ 1e-15), and λmin(K) comparable to σ² (2-D, 3-D).
LANCZOS_CASES = {
    "tapered-rbf-1d": (Tapered(RBF(signal_variance=16.0, lengthscale=45.0), 120.0), X1, 2.25),
    "wendland-1d": (Wendland(signal_variance=16.0, lengthscale=6.0), X1, 2.25),
    "wendland-2d": (Wendland(signal_variance=1.0, lengthscale=1.5), X2, 1e-3),
    "tapered-matern-3d": (Tapered(Matern32(signal_variance=1.0, lengthscale=2.0), 3.0), X3, 1e-2),
}


def _sparse_A(kernel, X, noise):
    return sp.csr_array(kernel.sparse(X) + noise * sp.eye_array(X.shape[0], format="csr"))


def _dense_A(kernel, X, noise):
    return kernel(X) + noise * np.eye(X.shape[0])


def _assert_relative(pairs: dict, rtol: float):
    """Every (ours, reference) pair within rtol; the message names the worst one."""
    rel = {k: abs(float(a) - float(b)) / abs(float(b)) for k, (a, b) in pairs.items()}
    worst = max(rel, key=rel.get)
    assert rel[worst] <= rtol, (
        f"worst relative residual {rel[worst]:.3e} in {worst} (ours {pairs[worst][0]!r}, "
        f"reference {pairs[worst][1]!r}, allowed {rtol:.0e})"
    )


# -- extreme eigenvalues ----------------------------------------------------------------------------


@pytest.mark.parametrize("factorisation", ["banded", "superlu"])
@pytest.mark.parametrize("name", LANCZOS_CASES)
def test_lanczos_extremes_match_the_dense_lapack_eigensolver(name, factorisation, monkeypatch):
    # Reference: LAPACK's dense symmetric eigensolver (numpy.linalg.eigvalsh) on the same matrix.
    if factorisation == "superlu":  # a zero memory cap refuses the band, so SuperLU factorises
        monkeypatch.setattr(conditioning.memory, "default_memory_cap", lambda: 0)
    kernel, X, noise = LANCZOS_CASES[name]
    A = _sparse_A(kernel, X, noise)
    eig = np.linalg.eigvalsh(A.toarray())
    got = extreme_eigenvalues(A, method="lanczos", lower_bound=noise)
    assert got.method == "lanczos"
    _assert_relative({"λmin": (got.eigenvalue_min, eig[0]), "λmax": (got.eigenvalue_max, eig[-1])}, 1e-6)


def test_lanczos_without_a_lower_bound_on_a_separated_spectrum():
    # Reference: numpy.linalg.eigvalsh. With λmin(K) ≈ 1.2 σ² the bottom is not clustered, so the
    # always-valid lower bound 0 is enough.
    kernel, X, noise = LANCZOS_CASES["tapered-matern-3d"]
    A = _sparse_A(kernel, X, noise)
    eig = np.linalg.eigvalsh(A.toarray())
    got = extreme_eigenvalues(A, method="lanczos")
    _assert_relative({"λmin": (got.eigenvalue_min, eig[0]), "λmax": (got.eigenvalue_max, eig[-1])}, 1e-6)


def test_a_lower_bound_above_the_spectrum_is_refused():
    # Reference: Sylvester's law of inertia — A − sI with s above λmin has a negative eigenvalue, so
    # neither Cholesky nor a symmetric LU with positive pivots exists.
    A = sp.diags_array(np.linspace(1.0, 10.0, 50)).tocsr()
    with pytest.raises(QgpError, match="not positive definite"):
        extreme_eigenvalues(A, method="lanczos", lower_bound=2.0)


def test_dense_method_refuses_above_the_exact_limit_before_allocating():
    big = sp.eye_array(EXACT_LIMIT + 1, format="csr")  # densifying would take 0.5 GiB
    with pytest.raises(QgpError, match="above the exact limit"):
        extreme_eigenvalues(big, method="dense")
    with pytest.raises(QgpError, match="above the exact limit"):
        extreme_eigenvalues(np.eye(20), method="dense", exact_limit=10)
    with pytest.raises(QgpError, match="unknown eigenvalue method"):
        extreme_eigenvalues(np.eye(5), method="arpack")
    with pytest.raises(QgpError, match="square"):
        extreme_eigenvalues(np.ones((3, 4)))


# -- one row against direct computations --------------------------------------------------------


def _qiskit_lcu_alpha(padded: np.ndarray) -> float:
    from qiskit.quantum_info import SparsePauliOp

    return float(np.sum(np.abs(SparsePauliOp.from_operator(padded).coeffs)))


@pytest.mark.parametrize(
    "kernel",
    [RBF(signal_variance=16.0, lengthscale=45.0), Tapered(RBF(signal_variance=16.0, lengthscale=45.0), 60.0)],
    ids=["rbf", "tapered"],
)
def test_dense_row_matches_numpy_and_qiskit(kernel):
    # References: numpy.linalg.cond / norm (2 and Frobenius), direct non-zero counts, the row-sum
    # bound and λmax computed with numpy (the dilation's α as qgp.circuits.encoding.dilation_alpha
    # defines it, also via the encoding registry the circuits build from), and qiskit's own Pauli
    # decomposition (SparsePauliOp.from_operator) for the LCU's Σ|c_P|.
    X, noise = X1[:100], 2.25  # n = 100 pads to 128
    row = audit_size(X, np.zeros(100), kernel, noise)
    A = _dense_A(kernel, X, noise)
    padded = pad_matrix(A, padding_diagonal(kernel.signal_variance, noise))
    eig = np.linalg.eigvalsh(A)
    s = int(np.max(np.count_nonzero(A, axis=1))) if kernel.support_radius is not None else 100
    assert row.condition_method == "dense"
    assert (row.sparsity, row.nonzeros) == (s, int(np.count_nonzero(A)) if kernel.support_radius else 100 * 100)
    _assert_relative(
        {
            "κ": (row.condition_number, np.linalg.cond(A, 2)),
            "λmin": (row.eigenvalue_min, eig[0]),
            "‖A‖₂": (row.norm_two, np.linalg.norm(A, 2)),
            "‖A‖_F": (row.norm_frobenius, np.linalg.norm(A, "fro")),
            "‖A‖_max": (row.norm_max, np.abs(A).max()),
            "α dilation": (row.alpha_dilation, max(np.abs(padded).sum(axis=1).max(), eig[-1])),
            "α dilation (registry)": (row.alpha_dilation, get_encoding("dilation").alpha(padded, eig[-1])),
            "α LCU": (row.alpha_lcu, _qiskit_lcu_alpha(padded)),
            "α sparse access": (row.alpha_sparse_access, s * np.abs(A).max()),
        },
        1e-9,
    )


def test_a_kernel_without_support_has_sparsity_n_even_where_exp_underflows():
    # Reference: numpy's count of the dense matrix, which does see the underflowed zeros.
    X = np.linspace(0.0, 4000.0, 200)[:, None]
    kernel = RBF(signal_variance=1.0, lengthscale=1.0)
    stored = int(np.count_nonzero(_dense_A(kernel, X, 0.1)))
    assert stored < 200 * 200, "precondition: exp must underflow somewhere"
    row = audit_size(X, np.zeros(200), kernel, 0.1)
    assert (row.sparsity, row.nonzeros) == (200, 200 * 200), (row.sparsity, row.nonzeros, stored)


@pytest.mark.parametrize("name", ["tapered-rbf-1d", "wendland-2d"])
def test_lanczos_row_matches_the_dense_reference(name):
    # References: numpy.linalg.cond, counts and norms of the densified matrix; the dilation's α as
    # the encoding registry computes it on the padded dense matrix. exact_limit is lowered so the
    # sparse path (the one used beyond EXACT_LIMIT) runs at a size numpy can check.
    kernel, X, noise = LANCZOS_CASES[name]
    X = X[:600]
    row = audit_size(X, np.zeros(600), kernel, noise, target_condition=30.0, exact_limit=256, lcu_limit=128)
    A = _dense_A(kernel, X, noise)
    eig = np.linalg.eigvalsh(A)
    padded = pad_matrix(A, padding_diagonal(kernel.signal_variance, noise))
    assert row.condition_method == "lanczos"
    assert row.sparsity == int(np.max(np.count_nonzero(A, axis=1)))
    assert row.nonzeros == int(np.count_nonzero(A))
    assert row.alpha_lcu is None and "LCU α not computed above n = 128" in row.note
    _assert_relative(
        {
            "κ": (row.condition_number, np.linalg.cond(A, 2)),
            "‖A‖_F": (row.norm_frobenius, np.linalg.norm(A, "fro")),
            "‖A‖_max": (row.norm_max, np.abs(A).max()),
            "α dilation": (row.alpha_dilation, get_encoding("dilation").alpha(padded, eig[-1])),
        },
        1e-6,
    )
    # The σ² for the target makes κ(K + σ²I) the target (numpy's 2-norm condition number).
    K = kernel(X)
    kappa = np.linalg.cond(K + row.noise_variance_for_target * np.eye(600), 2)
    _assert_relative({"κ at the target's σ²": (kappa, 30.0)}, 1e-6)


def test_noise_for_the_target_gives_the_target_condition_number():
    # Reference: numpy.linalg.cond(K + σ²I, 2) at the σ² the row reports (dense path).
    X, kernel = X1[:300], RBF(signal_variance=16.0, lengthscale=45.0)
    for target in (20.0, 400.0):
        row = audit_size(X, np.zeros(300), kernel, 2.25, target_condition=target)
        kappa = np.linalg.cond(kernel(X) + row.noise_variance_for_target * np.eye(300), 2)
        _assert_relative({f"κ for target {target:g}": (kappa, target)}, 1e-8)


def test_a_target_the_kernel_already_beats_gives_none_and_a_note():
    X, kernel = X1[:200], Wendland(signal_variance=1.0, lengthscale=1e-9)  # no pair within the support: K = I, κ(K) = 1
    Xh, yh = X1[200:220], np.ones(20)
    row = audit_size(X, np.ones(200), kernel, 0.5, target_condition=50.0, X_holdout=Xh, y_holdout=yh)
    assert row.noise_variance_for_target is None and row.holdout_rmse_at_target is None
    assert row.holdout_rmse is not None
    assert "at or above K's own κ" in row.note, row.note


def _sklearn_scores(kernel, X, y, Xh, yh, noise):
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process import kernels as skk

    sk_kernel = skk.ConstantKernel(kernel.signal_variance, "fixed") * skk.RBF(kernel.lengthscale, "fixed")
    gp = GaussianProcessRegressor(sk_kernel, alpha=noise, optimizer=None, normalize_y=False)
    offset = y.mean()  # center=True: the prior mean is the training mean
    mean, std = gp.fit(X, y - offset).predict(Xh, return_std=True)
    mean, var = mean + offset, std**2 + noise  # sklearn's std is the latent one
    return np.sqrt(np.mean((yh - mean) ** 2)), np.mean(0.5 * np.log(2 * np.pi * var) + (yh - mean) ** 2 / (2 * var))


def test_held_out_scores_match_scikit_learn():
    # Reference: scikit-learn's GaussianProcessRegressor with the same fixed kernel and alpha = σ²,
    # at the fixed σ² and at the target's σ².
    kernel = RBF(signal_variance=16.0, lengthscale=45.0)
    X = X1[:250]
    y = 3.0 * np.sin(X[:, 0] / 40.0) + 0.3 * RNG.standard_normal(250)
    Xh = np.linspace(5.0, 395.0, 31)[:, None]
    yh = 3.0 * np.sin(Xh[:, 0] / 40.0)
    row = audit_size(X, y, kernel, 2.25, target_condition=100.0, X_holdout=Xh, y_holdout=yh)
    rmse, nlpd = _sklearn_scores(kernel, X, y, Xh, yh, 2.25)
    rmse_t, nlpd_t = _sklearn_scores(kernel, X, y, Xh, yh, row.noise_variance_for_target)
    assert row.n_holdout == 31
    _assert_relative(
        {
            "RMSE": (row.holdout_rmse, rmse),
            "NLPD": (row.holdout_nlpd, nlpd),
            "RMSE at target": (row.holdout_rmse_at_target, rmse_t),
            "NLPD at target": (row.holdout_nlpd_at_target, nlpd_t),
        },
        1e-7,
    )


def test_held_out_scores_on_the_sparse_path_match_dense_numpy():
    # Reference: the GP mean k*ᵀ(K + σ²I)⁻¹(y − ȳ) + ȳ with numpy.linalg.solve (R&W 2006, Alg. 2.1).
    kernel, X, noise = LANCZOS_CASES["tapered-rbf-1d"]
    X = X[:400]
    y = np.cos(X[:, 0] / 30.0)
    Xh = np.linspace(0.0, 400.0, 23)[:, None]
    yh = np.cos(Xh[:, 0] / 30.0)
    row = audit_size(X, y, kernel, noise, X_holdout=Xh, y_holdout=yh, exact_limit=200)
    mean = kernel(Xh, X) @ np.linalg.solve(_dense_A(kernel, X, noise), y - y.mean()) + y.mean()
    assert row.condition_method == "lanczos"
    _assert_relative({"RMSE": (row.holdout_rmse, np.sqrt(np.mean((yh - mean) ** 2)))}, 1e-8)


# -- beyond the limits --------------------------------------------------------------------------------


def test_a_dense_kernel_beyond_the_exact_limit_is_skipped_not_invented():
    # Reference: the dense matrix numpy builds here (the row itself never builds it).
    X, kernel = X1[:300], Matern32(signal_variance=2.0, lengthscale=30.0)
    row = audit_size(X, np.zeros(300), kernel, 0.5, target_condition=10.0, X_holdout=X1[300:310],
                     y_holdout=np.zeros(10), exact_limit=256)
    A = _dense_A(kernel, X, 0.5)
    assert row.condition_method == "skipped"
    for name in ("condition_number", "eigenvalue_min", "eigenvalue_max", "norm_two", "norm_frobenius",
                 "alpha_dilation", "alpha_lcu", "noise_variance_for_target", "holdout_rmse", "holdout_nlpd"):
        assert getattr(row, name) is None, f"{name} = {getattr(row, name)!r} on a skipped row"
    assert (row.sparsity, row.nonzeros) == (300, 300 * 300)
    _assert_relative({"‖A‖_max": (row.norm_max, np.abs(A).max()),
                      "α sparse access": (row.alpha_sparse_access, 300 * np.abs(A).max())}, 1e-15)
    assert "exact limit 256" in row.note and "taper" in row.note, row.note


def test_a_sparse_matrix_over_the_memory_cap_is_skipped_before_it_is_built(monkeypatch):
    monkeypatch.setattr(conditioning.memory, "default_memory_cap", lambda: 1000)
    kernel, X, noise = LANCZOS_CASES["wendland-2d"]
    row = audit_size(X[:300], np.zeros(300), kernel, noise, exact_limit=128)
    assert row.condition_method == "skipped" and row.condition_number is None and row.sparsity is None
    assert "GiB" in row.note and "smaller support" in row.note, row.note


def test_a_failed_eigensolve_skips_the_spectrum_but_keeps_the_counts(monkeypatch):
    # Reference: numpy's direct count on the dense matrix; the failure is forced.
    def fail(*args, **kwargs):
        raise QgpError("Lanczos did not converge (forced)")

    monkeypatch.setattr(conditioning, "extreme_eigenvalues", fail)
    kernel, X, noise = LANCZOS_CASES["wendland-2d"]
    row = audit_size(X[:300], np.zeros(300), kernel, noise, target_condition=10.0, exact_limit=128)
    A = _dense_A(kernel, X[:300], noise)
    assert row.condition_method == "skipped" and row.condition_number is None and row.noise_variance_for_target is None
    assert (row.sparsity, row.nonzeros) == (int(np.max(np.count_nonzero(A, axis=1))), int(np.count_nonzero(A)))
    assert "forced" in row.note, row.note


# -- sizes, subsets, the whole audit -----------------------------------------------------------------


def test_nested_subsets_are_the_rows_n_train_keeps(tmp_path):
    # Reference: qgp.config.load_dataset with [data] n_train = n (the loader every run uses).
    x = RNG.permutation(700).astype(float)
    (tmp_path / "d.csv").write_text("x,y\n" + "".join(f"{a},{a / 10}\n" for a in x))
    spec = DataSpec(train=tmp_path / "d.csv", target="y", subsample_seed=3)
    full = load_dataset(spec).X_train
    order = subset_order(700, order="permutation", seed=3)
    previous: set = set()
    for n in nested_sizes(700, 64, 10**6):
        ours = full[np.sort(order[:n])]
        loaded = load_dataset(replace(spec, n_train=n)).X_train
        assert np.array_equal(ours, loaded), f"n = {n}: audit rows differ from load_dataset's n_train rows"
        rows = {float(r[0]) for r in ours}
        assert previous < rows and len(rows) == n, f"n = {n}: subsets not nested"
        previous = rows
    assert np.array_equal(subset_order(9, order="file", seed=3), np.arange(9))


def test_nested_sizes():
    assert nested_sizes(1000) == (64, 128, 256, 512)
    assert nested_sizes(1024, 64, 2**17) == (64, 128, 256, 512, 1024)
    assert nested_sizes(10**6, 128, 1000) == (128, 256, 512)
    assert nested_sizes(300, 256) == (256,)


def test_the_audit_reports_each_size_against_numpy():
    # Reference: numpy.linalg.cond on the matrix of each nested subset, built here.
    kernel, noise = RBF(signal_variance=16.0, lengthscale=45.0), 2.25
    order = subset_order(700, order="permutation", seed=11)
    said: list[str] = []
    rows = conditioning_audit(X1, np.zeros(700), kernel, noise, sizes=(64, 128, 256), order_index=order, say=said.append)
    assert [r.n for r in rows] == [64, 128, 256]
    for row in rows:
        A = _dense_A(kernel, X1[np.sort(order[: row.n])], noise)
        _assert_relative({f"κ at n = {row.n}": (row.condition_number, np.linalg.cond(A, 2))}, 1e-9)
    assert len(said) == 3 and all(line.startswith(f"n = {r.n}: κ = ") and "(dense, " in line for line, r in zip(said, rows))


def test_rows_are_plain_json_and_csv():
    # Reference: the standard library's json (allow_nan=False) and csv round trips.
    row = audit_size(X1[:100], np.zeros(100), RBF(signal_variance=1.0, lengthscale=40.0), 0.1, target_condition=20.0)
    d = row.as_dict()
    assert tuple(d) == CONDITIONING_COLUMNS
    assert all(v is None or type(v) in (int, float, str) for v in d.values()), {k: type(v) for k, v in d.items()}
    assert json.loads(json.dumps(d, allow_nan=False)) == d
    buf = io.StringIO()
    writer = csv.DictWriter(buf, CONDITIONING_COLUMNS)
    writer.writeheader()
    writer.writerow(d)
    back = next(csv.DictReader(io.StringIO(buf.getvalue())))
    for key, value in d.items():
        if value is None:
            assert back[key] == "", (key, back[key])
        elif not isinstance(value, str):
            assert float(back[key]) == value, (key, back[key], value)  # floats survive as their repr


def test_bad_input_is_refused_with_the_fix():
    kernel = RBF(signal_variance=1.0, lengthscale=1.0)
    X = X1[:100]
    cases = [
        (lambda: nested_sizes(50), "fewer than n_min = 64; lower n_min"),
        (lambda: nested_sizes(500, 96), "not a power of two"),
        (lambda: nested_sizes(500, 128, 64), "below n_min"),
        (lambda: nested_sizes(500.0), "must be an integer"),
        (lambda: subset_order(10, order="random", seed=0), "use 'permutation'"),
        (lambda: audit_size(X, np.zeros(100), kernel, 0.0), "σ² > 0"),
        (lambda: audit_size(X, np.zeros(99), kernel, 0.1), "one finite target per row"),
        (lambda: audit_size(X, np.zeros(100), kernel, 0.1, target_condition=1.0), "finite number > 1"),
        (lambda: audit_size(X, np.zeros(100), kernel, 0.1, X_holdout=X), "both X_holdout and y_holdout"),
        (lambda: conditioning_audit(X, np.zeros(100), kernel, 0.1, sizes=(64,), order_index=np.arange(10)),
         "at least max\\(sizes\\) = 64"),
        (lambda: conditioning_audit(X, np.zeros(100), kernel, 0.1, sizes=(64,), order_index=np.zeros(100, int)),
         "distinct row indices"),
    ]
    for call, message in cases:
        with pytest.raises(QgpError, match=message):
            call()


@pytest.mark.slow
def test_lanczos_beyond_the_exact_limit_matches_lapack():
    # Reference: numpy.linalg.eigvalsh (LAPACK) on the densified matrix at n = EXACT_LIMIT + 808
    # (1–2 min): the default path, Lanczos, at a size just past the dense one.
    n = EXACT_LIMIT + 808
    X = np.random.default_rng(9).uniform(0.0, 400.0, size=(n, 1))
    kernel, noise = Wendland(signal_variance=16.0, lengthscale=3.0), 2.25
    row = audit_size(X, np.zeros(n), kernel, noise)
    eig = np.linalg.eigvalsh(_dense_A(kernel, X, noise))
    assert row.condition_method == "lanczos"
    _assert_relative({"λmin": (row.eigenvalue_min, eig[0]), "λmax": (row.eigenvalue_max, eig[-1]),
                      "κ": (row.condition_number, eig[-1] / eig[0])}, 1e-6)
