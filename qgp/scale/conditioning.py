"""The conditioning audit: how κ, sparsity, norms and block-encoding α of A = K + σ²I grow with n.

Lowe, Kim & Bondesan (2025, arXiv:2505.22502) prove that the condition number, the sparsity and the
Frobenius norm of kernel matrices grow at least linearly in n under general assumptions on the data
and kernel, which removes the exponential speed-up quantum linear solvers were hoped to give GP
regression. This module measures those quantities on the user's own data, for nested subsets
(the first n rows of an index order) at a fixed σ² and at the σ² a target κ would need, with the
held-out accuracy each σ² gives.

κ is exact (LAPACK, all eigenvalues of the dense matrix) up to `EXACT_LIMIT`; beyond it, for kernels
with finite support, both extreme eigenvalues come from Lanczos (ARPACK): the largest directly, the
smallest by shift-invert just below σ² — K is positive semi-definite, so λ_min(A) ≥ σ² and
A − s·I with s < σ² is positive definite and factorises without pivoting — iterated until the
relative error of λ_min is below `LANCZOS_RTOL`.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import asdict, dataclass
from typing import Literal

import numpy as np
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.spatial import cKDTree

from qgp.circuits.methods.encodings import get_encoding
from qgp.classical.gp import condition, nlpd, rmse
from qgp.classical.kernels import Kernel
from qgp.classical.levers import noise_for_condition
from qgp.classical.system import pad_matrix, padding_diagonal
from qgp.errors import QgpError
from qgp.memory import available_memory_bytes

__all__ = [
    "Order",
    "EXACT_LIMIT",
    "LCU_LIMIT",
    "LANCZOS_RTOL",
    "Spectrum",
    "ConditioningRow",
    "CONDITIONING_COLUMNS",
    "nested_sizes",
    "subset_order",
    "extreme_eigenvalues",
    "audit_size",
    "conditioning_audit",
]

Order = Literal["permutation", "file"]

#: Largest n with a dense eigensolve (all eigenvalues: ~1 min and 0.5 GiB per matrix at 8192 here).
EXACT_LIMIT = 8192
#: Largest n whose LCU α is computed: the Pauli decomposition of the padded matrix has 4^m terms
#: (measured: 0.27 s at n = 1024, about 5 s and 134 MB at 4096).
LCU_LIMIT = 4096
#: Relative accuracy of each Lanczos extreme eigenvalue (the tests check 1e-6 against LAPACK).
LANCZOS_RTOL = 1e-8
#: Peak bytes per stored non-zero while a sparse kernel matrix is built and factorised (measured
#: ≈ 112 B for the k-d-tree pair search, COO → CSR, and SuperLU's fill at the same order).
_BYTES_PER_NONZERO = 120


@dataclass(frozen=True)
class Spectrum:
    """A's extreme eigenvalues and how they were found (``"dense"`` or ``"lanczos"``)."""

    eigenvalue_min: float
    eigenvalue_max: float
    method: str


@dataclass(frozen=True)
class ConditioningRow:
    """One n of the audit. None marks a value not computed; ``note`` says why and how."""

    n: int
    condition_number: float | None
    condition_method: str
    eigenvalue_min: float | None
    eigenvalue_max: float | None
    sparsity: int | None
    nonzeros: int | None
    norm_max: float | None
    norm_two: float | None
    norm_frobenius: float | None
    alpha_dilation: float | None
    alpha_lcu: float | None
    alpha_sparse_access: float | None
    noise_variance: float
    target_condition: float | None
    noise_variance_for_target: float | None
    holdout_rmse: float | None
    holdout_nlpd: float | None
    holdout_rmse_at_target: float | None
    holdout_nlpd_at_target: float | None
    n_holdout: int
    seconds: float
    note: str

    def as_dict(self) -> dict:
        """Plain CSV/JSON-ready values (numpy scalars as Python numbers)."""
        return {k: (v.item() if isinstance(v, np.generic) else v) for k, v in asdict(self).items()}


CONDITIONING_COLUMNS: tuple[str, ...] = tuple(ConditioningRow.__dataclass_fields__)


def nested_sizes(n_data: int, n_min: int = 64, n_max: int = 2**17) -> tuple[int, ...]:
    """n_min, 2·n_min, 4·n_min, … up to min(n_max, n_data).

    Parameters
    ----------
    n_data : int
        Rows available.
    n_min, n_max : int
        The first size and the cap.

    Returns
    -------
    tuple of int
    """
    if n_min < 2 or n_max < n_min:
        raise QgpError(f"audit sizes need 2 ≤ n_min ≤ n_max, got n_min = {n_min}, n_max = {n_max}; fix [scale]")
    if n_data < n_min:
        raise QgpError(f"the data has {n_data} rows, fewer than [scale] n_min = {n_min}; lower n_min or give more data")
    out, n = [], n_min
    while n <= min(n_max, n_data):
        out.append(n)
        n *= 2
    return tuple(out)


def subset_order(n_data: int, *, order: Order, seed: int) -> np.ndarray:
    """The index order whose first n entries are the audit's n rows.

    ``"permutation"`` is the draw `qgp.config.load_dataset` makes for ``[data] n_train`` (the first n
    of ``default_rng(seed).permutation(n_data)``, rows then kept in file order), so the audit's subset
    at n is the training set ``n_train = n`` gives; ``"file"`` is 0, 1, …, n_data − 1.
    """
    if order == "permutation":
        return np.random.default_rng(seed).permutation(n_data)
    if order == "file":
        return np.arange(n_data)
    raise QgpError(f"unknown subset order {order!r}; use 'permutation' or 'file'")


def extreme_eigenvalues(A, *, method: Literal["auto", "dense", "lanczos"] = "auto", floor: float = 0.0) -> Spectrum:
    """λ_min and λ_max of a symmetric positive-definite A (dense array or scipy sparse).

    Parameters
    ----------
    A : array or sparse matrix, shape (n, n)
    method : {"auto", "dense", "lanczos"}
        ``auto``: dense up to `EXACT_LIMIT`, Lanczos beyond (sparse A only).
    floor : float
        A known lower bound on λ_min (σ² for A = K + σ²I); the shift-invert shift sits just below it.

    Returns
    -------
    Spectrum
    """
    n = A.shape[0]
    if method == "auto":
        method = "dense" if n <= EXACT_LIMIT else "lanczos"
    if method == "dense":
        if n > EXACT_LIMIT:
            raise QgpError(f"a dense eigensolve at n = {n} is above the limit {EXACT_LIMIT}; use method 'lanczos' with a sparse A")
        dense = A.toarray() if sp.issparse(A) else np.asarray(A, dtype=float)
        # Divide and conquer: 5× faster than scipy's default MRRR driver at n = 2048 (measured here).
        eig = scipy.linalg.eigvalsh(dense, check_finite=False, driver="evd")
        return Spectrum(float(eig[0]), float(eig[-1]), "dense")
    if method != "lanczos":
        raise QgpError(f"unknown eigenvalue method {method!r}; use 'auto', 'dense' or 'lanczos'")
    A = sp.csc_array(A) if sp.issparse(A) else sp.csc_array(np.asarray(A, dtype=float))
    hi = float(spla.eigsh(A, k=1, which="LA", tol=LANCZOS_RTOL / 10, return_eigenvectors=False)[0])
    return Spectrum(_smallest_by_shift_invert(A, floor), hi, "lanczos")


def _smallest_by_shift_invert(A: sp.csc_array, floor: float) -> float:
    """λ_min by Lanczos on (A − sI)⁻¹, s = floor·(1 − rtol): its largest eigenvalue ν gives λ = s + 1/ν.

    A relative error δ in ν is δ·(λ − s)/λ in λ, so ARPACK's tolerance is loosened to what λ needs
    (the reason this converges where plain Lanczos on the clustered bottom of a kernel spectrum
    does not) and tightened in a second pass from the first pass's vector when λ − s is large.
    """
    n = A.shape[0]
    shift = floor * (1.0 - LANCZOS_RTOL) if floor > 0 else 0.0
    M = (A - shift * sp.eye_array(n, format="csc")).tocsc()
    lu = spla.splu(M, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0, options={"SymmetricMode": True})
    if not (np.array_equal(lu.perm_r, lu.perm_c) and np.all(lu.U.diagonal() > 0)):
        raise QgpError(f"A − {shift:g}·I is not positive definite, so σ² = {floor:g} is not a lower bound on λ_min; check [noise] variance")
    op = spla.LinearOperator((n, n), matvec=lu.solve, dtype=float)
    tol, v0 = 1e-3, None
    for _ in range(6):
        nu, vec = spla.eigsh(op, k=1, which="LA", tol=tol, v0=v0)
        lam = shift + 1.0 / float(nu[0])
        need = LANCZOS_RTOL * lam / max(lam - shift, 1e-300)
        if tol <= need:
            break
        tol, v0 = max(need, 1e-14), vec[:, 0]
    return lam


def _matrix(kernel: Kernel, X: np.ndarray, noise: float):
    """A = K + σ²I: sparse for a finite-support kernel, dense otherwise."""
    n = X.shape[0]
    if kernel.support_radius is not None:
        return (kernel.sparse(X) + noise * sp.eye_array(n, format="csr")).tocsr()
    K = kernel(X)
    K[np.diag_indices(n)] += noise
    return K


def _estimated_nonzeros(kernel: Kernel, X: np.ndarray) -> int:
    """Stored entries of the sparse K, counted by the k-d tree without storing them."""
    tree = cKDTree(X / kernel.support_radius)
    return int(tree.count_neighbors(tree, 1.0))


def _refusal(kernel: Kernel, X: np.ndarray) -> str | None:
    """Why A at this n cannot be audited here (None when it can), decided before allocating."""
    n = X.shape[0]
    if kernel.support_radius is None:
        if n > EXACT_LIMIT:
            return f"skipped: a kernel without finite support is dense and n > {EXACT_LIMIT} (exact limit); taper it to go further"
        need = 3 * 8 * n * n
    else:
        need = _BYTES_PER_NONZERO * _estimated_nonzeros(kernel, X)
    have = available_memory_bytes()
    if need > have / 2:
        return f"skipped: A needs ≈ {need / 2**30:.1f} GiB to build and factorise, over half the {have / 2**30:.1f} GiB available"
    return None


def _norms(A, kernel: Kernel, noise: float) -> dict:
    n = A.shape[0]
    if sp.issparse(A):
        absA = abs(A)
        rowsum = np.asarray(absA.sum(axis=1)).ravel()
        nnz = int(A.count_nonzero())
        s = int(np.max(np.diff(sp.csr_array(A).indptr)))
        fro = float(spla.norm(A, "fro"))
        norm_max = float(absA.max())
    else:
        rowsum = np.abs(A).sum(axis=1)
        nnz = n * n
        s = n  # every entry of a kernel without finite support is non-zero (even where exp underflows)
        fro = float(np.linalg.norm(A, "fro"))
        norm_max = float(np.abs(A).max())
    return {"sparsity": s, "nonzeros": nnz, "norm_max": norm_max, "norm_frobenius": fro, "row_sum_max": float(rowsum.max())}


def _alpha_lcu(A, kernel: Kernel, noise: float) -> float | None:
    n = A.shape[0]
    if n > LCU_LIMIT:
        return None
    dense = A.toarray() if sp.issparse(A) else A
    return float(get_encoding("lcu").alpha(pad_matrix(dense, padding_diagonal(kernel.amplitude, noise))))


def _holdout(X, y, kernel, noise, X_hold, y_hold, center) -> tuple[float | None, float | None]:
    if X_hold is None or y_hold is None:
        return None, None
    pred = condition(X, y, kernel, noise, center=center).predict(X_hold)
    return rmse(y_hold, pred.mean), nlpd(y_hold, pred.mean, pred.variance_predictive)


def audit_size(
    X,
    y,
    kernel: Kernel,
    noise_variance: float,
    *,
    target_condition: float | None = None,
    X_holdout=None,
    y_holdout=None,
    center: bool = True,
) -> ConditioningRow:
    """The audit of A = K(X) + σ²I at one n.

    Parameters
    ----------
    X : array, shape (n, d)
    y : array, shape (n,)
    kernel : Kernel
    noise_variance : float
        σ² > 0, fixed.
    target_condition : float, optional
        κ whose σ² (and held-out accuracy at it) the row also reports.
    X_holdout, y_holdout : arrays, shapes (h, d) and (h,), optional
    center : bool
        Centre y on its training mean (as ``[data] center``).

    Returns
    -------
    ConditioningRow
    """
    start = time.perf_counter()
    X = np.asarray(X, dtype=float)
    n = X.shape[0]
    noise = float(noise_variance)
    n_hold = 0 if X_holdout is None else int(np.asarray(X_holdout).shape[0])
    blank = dict.fromkeys(
        ("condition_number", "eigenvalue_min", "eigenvalue_max", "sparsity", "nonzeros", "norm_max", "norm_two",
         "norm_frobenius", "alpha_dilation", "alpha_lcu", "alpha_sparse_access", "noise_variance_for_target",
         "holdout_rmse", "holdout_nlpd", "holdout_rmse_at_target", "holdout_nlpd_at_target")
    )
    refusal = _refusal(kernel, X)
    if refusal is not None:
        return ConditioningRow(
            n=n, condition_method="skipped", noise_variance=noise, target_condition=target_condition, n_holdout=n_hold,
            seconds=time.perf_counter() - start, note=refusal, **blank,
        )
    A = _matrix(kernel, X, noise)
    spec = extreme_eigenvalues(A, floor=noise)
    norms = _norms(A, kernel, noise)
    notes = [f"κ {'exact (LAPACK)' if spec.method == 'dense' else f'Lanczos (ARPACK, shift-invert below σ², rtol {LANCZOS_RTOL:g})'}"]
    values = dict(blank)
    values.update(
        condition_number=spec.eigenvalue_max / spec.eigenvalue_min,
        eigenvalue_min=spec.eigenvalue_min,
        eigenvalue_max=spec.eigenvalue_max,
        sparsity=norms["sparsity"],
        nonzeros=norms["nonzeros"],
        norm_max=norms["norm_max"],
        norm_two=spec.eigenvalue_max,
        norm_frobenius=norms["norm_frobenius"],
        # The dilation's α (qgp.circuits.methods.encodings.dilation_alpha): max(row-sum bound, ‖A‖).
        alpha_dilation=max(norms["row_sum_max"], spec.eigenvalue_max),
        alpha_lcu=_alpha_lcu(A, kernel, noise),
        alpha_sparse_access=norms["sparsity"] * norms["norm_max"],
    )
    if values["alpha_lcu"] is None:
        notes.append(f"LCU α skipped above n = {LCU_LIMIT} (4^m Pauli terms)")
    del A
    values["holdout_rmse"], values["holdout_nlpd"] = _holdout(X, y, kernel, noise, X_holdout, y_holdout, center)
    if target_condition is not None:
        try:
            target_noise = noise_for_condition(spec.eigenvalue_min - noise, spec.eigenvalue_max - noise, target_condition)
        except QgpError:
            notes.append(f"target κ = {target_condition:g} is not below K's own κ: no σ² > 0 is needed")
        else:
            values["noise_variance_for_target"] = target_noise
            r, p = _holdout(X, y, kernel, target_noise, X_holdout, y_holdout, center)
            values["holdout_rmse_at_target"], values["holdout_nlpd_at_target"] = r, p
    return ConditioningRow(
        n=n, condition_method=spec.method, noise_variance=noise, target_condition=target_condition, n_holdout=n_hold,
        seconds=time.perf_counter() - start, note="; ".join(notes), **values,
    )


def conditioning_audit(
    X,
    y,
    kernel: Kernel,
    noise_variance: float,
    *,
    sizes,
    order_index,
    target_condition: float | None = None,
    X_holdout=None,
    y_holdout=None,
    center: bool = True,
    say: Callable[[str], None] | None = None,
) -> tuple[ConditioningRow, ...]:
    """`audit_size` on X[sort(order_index[:n])] for each n of ``sizes`` (nested subsets).

    Parameters
    ----------
    X : array, shape (N, d)
    y : array, shape (N,)
    kernel : Kernel
    noise_variance : float
    sizes : sequence of int
    order_index : array of int, shape (N,)
        From `subset_order`.
    target_condition, X_holdout, y_holdout, center
        As `audit_size`.
    say : callable, optional
        Progress: one line per n.

    Returns
    -------
    tuple of ConditioningRow
    """
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    order_index = np.asarray(order_index)
    rows = []
    for n in sizes:
        keep = np.sort(order_index[:n])
        row = audit_size(
            X[keep], y[keep], kernel, noise_variance,
            target_condition=target_condition, X_holdout=X_holdout, y_holdout=y_holdout, center=center,
        )
        rows.append(row)
        if say is not None:
            kappa = "—" if row.condition_number is None else f"{row.condition_number:.4g}"
            say(f"n = {n}: κ = {kappa} ({row.condition_method}), s = {row.sparsity}, {row.seconds:.1f} s")
    return tuple(rows)
