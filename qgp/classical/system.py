"""The regularised system A = K + σ²I: diagnostics, a-priori eigenvalue bounds and padding.

A quantum linear solver is not given A's spectrum; it is given bounds. The bounds here are
what such an algorithm would be handed: Gershgorin's circle theorem above, and below
max(Gershgorin, σ²), because K is positive semi-definite so λmin(A) ≥ σ² (Gershgorin alone is
useless below for dense kernel matrices, whose off-diagonal row sums exceed the diagonal).

Padding to 2^m (for m system qubits) uses a documented scheme that leaves every GP answer and κ
unchanged: A is extended block-diagonally with d·I, where d = signal variance + σ² is a diagonal
entry of A (so d ∈ [λmin, λmax] without an eigensolve), and vectors (y, k*) are padded with
zeros. Then A_pad⁻¹ = diag(A⁻¹, I/d), so k*ᵀA⁻¹y and k*ᵀA⁻¹k* are untouched and the spectrum
gains only the value d, which lies inside [λmin, λmax].
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import asdict, dataclass

import numpy as np
import scipy.sparse as sp

from qgp.errors import QgpError

__all__ = [
    "matrix_key",
    "SystemDiagnostics",
    "regularise",
    "eigenvalue_bounds",
    "sparsity",
    "diagnose",
    "padded_size",
    "padding_diagonal",
    "pad_matrix",
    "pad_vector",
    "EXACT_EIGEN_LIMIT",
]

#: Largest n for which diagnostics run a dense symmetric eigensolve (O(n³), ~1 s at 2048).
EXACT_EIGEN_LIMIT = 2048


@dataclass(frozen=True)
class SystemDiagnostics:
    """Spectrum, bounds, conditioning and sparsity of A = K + σ²I.

    ``condition_number`` is the exact κ = λmax/λmin (None when n exceeds the eigensolve
    limit); ``condition_number_bound`` = bound_upper/bound_lower is what an algorithm given
    only the bounds must plan for. ``sparsity`` is the largest count of non-zeros in a row.
    """

    n: int
    padded_size: int
    noise_variance: float
    eigenvalue_min: float | None
    eigenvalue_max: float | None
    bound_lower: float
    bound_upper: float
    condition_number: float | None
    condition_number_bound: float
    sparsity: int
    nnz: int
    frobenius_norm: float
    spectral_norm: float | None

    def as_dict(self) -> dict:
        return asdict(self)


def regularise(K, noise_variance: float):
    """A = K + σ²I, dense or sparse as K is."""
    n = K.shape[0]
    if sp.issparse(K):
        return sp.csr_array(K + noise_variance * sp.identity(n, format="csr"))
    return np.asarray(K, dtype=float) + noise_variance * np.eye(n)


def _row_abs_offdiag(A) -> tuple[np.ndarray, np.ndarray]:
    if sp.issparse(A):
        A = sp.csr_array(A)
        diag = A.diagonal()
        rows = np.asarray(abs(A).sum(axis=1)).ravel() - np.abs(diag)
        return diag, rows
    A = np.asarray(A)
    diag = np.diag(A).copy()
    return diag, np.abs(A).sum(axis=1) - np.abs(diag)


def eigenvalue_bounds(A, noise_variance: float) -> tuple[float, float]:
    """(lower, upper) a-priori bounds on A's eigenvalues.

    Upper: Gershgorin, max_i (A_ii + Σ_{j≠i}|A_ij|). Lower: max(min_i (A_ii − Σ_{j≠i}|A_ij|), σ²),
    valid because A − σ²I = K is PSD.
    """
    diag, off = _row_abs_offdiag(A)
    upper = float(np.max(diag + off))
    lower = max(float(np.min(diag - off)), float(noise_variance))
    if lower <= 0:
        raise QgpError(
            "no positive lower bound on A's eigenvalues: the noise variance is 0 and Gershgorin's "
            "bound is not positive; set [noise] variance > 0 or [noise] target_condition"
        )
    return lower, upper


def sparsity(A) -> int:
    """Largest number of non-zero entries in any row of A."""
    if sp.issparse(A):
        A = sp.csr_array(A)
        A.eliminate_zeros()
        return int(np.max(np.diff(A.indptr)))
    return int(np.max(np.count_nonzero(np.asarray(A), axis=1)))


def diagnose(A, noise_variance: float, *, exact_limit: int = EXACT_EIGEN_LIMIT) -> SystemDiagnostics:
    """Diagnostics of A; the eigensolve is exact for n ≤ ``exact_limit`` and skipped above it."""
    n = A.shape[0]
    lo, hi = eigenvalue_bounds(A, noise_variance)
    if sp.issparse(A):
        nnz = int(sp.csr_array(A).count_nonzero())
        fro = float(sp.linalg.norm(A, "fro"))
    else:
        nnz = int(np.count_nonzero(A))
        fro = float(np.linalg.norm(A, "fro"))
    lmin = lmax = kappa = None
    if n <= exact_limit:
        dense = A.toarray() if sp.issparse(A) else np.asarray(A)
        eig = np.linalg.eigvalsh(dense)
        lmin, lmax = float(eig[0]), float(eig[-1])
        kappa = lmax / lmin if lmin > 0 else math.inf
    return SystemDiagnostics(
        n=n,
        padded_size=padded_size(n),
        noise_variance=float(noise_variance),
        eigenvalue_min=lmin,
        eigenvalue_max=lmax,
        bound_lower=lo,
        bound_upper=hi,
        condition_number=kappa,
        condition_number_bound=hi / lo,
        sparsity=sparsity(A),
        nnz=nnz,
        frobenius_norm=fro,
        spectral_norm=lmax,
    )


def padded_size(n: int) -> int:
    """Smallest power of two ≥ n (at least 2, so there is always one system qubit)."""
    if n < 1:
        raise QgpError(f"cannot pad a system of size {n}; need at least one training point")
    return max(2, 1 << (n - 1).bit_length())


def padding_diagonal(signal_variance: float, noise_variance: float) -> float:
    """d = signal variance + σ², a diagonal entry of A and so inside [λmin, λmax]."""
    return float(signal_variance) + float(noise_variance)


def pad_matrix(A, diagonal: float) -> np.ndarray:
    """Dense 2^m × 2^m matrix diag(A, d·I) (see the module docstring for why this is exact)."""
    dense = A.toarray() if sp.issparse(A) else np.asarray(A, dtype=float)
    n = dense.shape[0]
    size = padded_size(n)
    out = np.zeros((size, size))
    out[:n, :n] = dense
    idx = np.arange(n, size)
    out[idx, idx] = diagonal
    return out


def pad_vector(v, size: int) -> np.ndarray:
    """v with zeros appended to length ``size`` (the padded rows carry no data)."""
    v = np.asarray(v)
    if v.shape[0] > size:
        raise QgpError(f"vector of length {v.shape[0]} does not fit a padded size of {size}")
    out = np.zeros(size, dtype=v.dtype if np.iscomplexobj(v) else float)
    out[: v.shape[0]] = v
    return out


def matrix_key(A) -> str:
    """SHA-256 of a matrix's shape and float64 bytes: the key under which circuits built from it,
    and their resource counts, are cached."""
    a = np.ascontiguousarray(A, dtype=float)
    return hashlib.sha256(repr(a.shape).encode() + a.tobytes()).hexdigest()
