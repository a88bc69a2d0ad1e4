"""The conditioning audit: how κ, sparsity, norms and block-encoding α of A = K + σ²I grow with n.

Lowe, Kim & Bondesan (2025, "Assessing quantum advantage for Gaussian process regression",
arXiv:2505.22502) prove that the condition number, the sparsity and the Frobenius norm of a kernel
matrix grow at least linearly in n under general assumptions on the data and the kernel, which
removes the exponential speed-up quantum linear solvers were hoped to give GP regression. This
module measures those quantities on the researcher's own data: nested subsets (the first n rows of
an index order, `subset_order`) at sizes n = n_min, 2·n_min, … (`nested_sizes`), at a fixed σ² and
at the σ² a target κ would need, with the held-out accuracy each σ² gives.

How each number is found:

* κ = λmax/λmin. Up to `EXACT_LIMIT` from all eigenvalues of the dense matrix (LAPACK); beyond it,
  for kernels with finite support only, from Lanczos (ARPACK) on the sparse matrix: λmax directly,
  λmin by shift-invert just below σ² (`extreme_eigenvalues`). A kernel without finite support is
  not audited beyond `EXACT_LIMIT`: its row says "skipped" and why; no value is invented.
* Sparsity s: the most non-zeros in a row of A, and the total. A kernel without finite support has
  s = n by definition: every k(x, x′) is mathematically positive, even where exp underflows to 0.
* ‖A‖_max = max|A_ij|, ‖A‖₂ = λmax, ‖A‖_F.
* Block-encoding α: the dilation's max(row-sum bound, λmax) and the LCU's Σ|c_P| over the Pauli
  decomposition of the padded matrix (`qgp.circuits.methods.encodings`; the LCU up to `LCU_LIMIT`
  only, its cost being 4^m), and s·‖A‖_max, the normalisation of the standard block encoding
  of an s-sparse matrix from sparse-access oracles (Gilyén, Su, Low & Wiebe 2019, STOC, Lemma 48;
  cited from memory).
* σ² for a target κ (`qgp.classical.levers.noise_for_condition` on K's extremes, λ(A) − σ²) and the
  held-out RMSE and NLPD of the exact GP (`qgp.classical.gp`) at both noise variances.
"""

from __future__ import annotations

import math
import operator
import time
from collections.abc import Callable
from dataclasses import dataclass, fields
from typing import Literal

import numpy as np
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.sparse.csgraph import reverse_cuthill_mckee
from scipy.spatial import cKDTree

from qgp import memory
from qgp.classical.gp import SPARSE_MAX_DENSITY, condition, count_nonpositive, nlpd, rmse
from qgp.classical.kernels import Kernel, _as_inputs
from qgp.classical.levers import noise_for_condition
from qgp.classical.system import pad_matrix, padded_size, padding_diagonal
from qgp.errors import QgpError
from qgp.progress import Bar

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

#: Largest n with a dense eigensolve: all eigenvalues in one LAPACK call (35 s and 0.5 GiB at 8192 on
#: the 2-core project machine; two `subset_by_index` calls, one per extreme, each repeat the O(n³)
#: tridiagonal reduction and took twice as long).
EXACT_LIMIT = 8192
#: Largest n whose LCU α is computed: the Pauli decomposition of the padded matrix has 4^m terms
#: (measured here: 0.55 s at n = 1024, 2.8 s at 2048, 11 s and 1.1 GiB at 4096).
LCU_LIMIT = 2048
#: Relative accuracy the Lanczos path aims at for each extreme eigenvalue.
LANCZOS_RTOL = 1e-9

# Peak bytes per stored non-zero while `Kernel.sparse` builds a matrix (k-d-tree pair list, unique
# keys, COO → CSR): 112 B measured at 8.6e6 and 3.4e7 non-zeros; rounded up.
_BUILD_BYTES_PER_NONZERO = 120
# ARPACK tolerances: the first shift-invert pass, and λmax's pass (the top of a kernel spectrum is
# well separated: 1e-10 converged in every case measured, in 2 s at n = 65536 with 1e7 non-zeros).
_FIRST_PASS_TOL = 1e-3
_TOP_TOL = 1e-10
# The shift s = floor − δ sits δ below the known lower bound: δ ≥ this many units of round-off in
# λmax, so that the factorisation of A − sI (condition ≲ λmax/δ) is never at the edge of breaking down.
_SHIFT_ROUNDOFF_UNITS = 1e4
_EPS = float(np.finfo(float).eps)


# -- sizes and subsets ---------------------------------------------------------------------------


def _count(value, name: str, fix: str) -> int:
    """A non-negative integer argument (numpy integers too; bools and floats are refused)."""
    if isinstance(value, bool):
        raise QgpError(f"{name} must be an integer, got {value!r}; {fix}")
    try:
        out = operator.index(value)
    except TypeError:
        raise QgpError(f"{name} must be an integer, got {value!r}; {fix}") from None
    if out < 0:
        raise QgpError(f"{name} must be ≥ 0, got {out}; {fix}")
    return out


def nested_sizes(n_data: int, n_min: int = 64, n_max: int = 2**17) -> tuple[int, ...]:
    """The audit's sizes: n_min, 2·n_min, 4·n_min, … up to min(n_max, n_data).

    Parameters
    ----------
    n_data : int
        Rows available.
    n_min : int
        The first size, a power of two ≥ 2.
    n_max : int
        The cap, ≥ n_min.

    Returns
    -------
    tuple of int
        Increasing powers of two.

    Raises
    ------
    QgpError
        n_min not a power of two ≥ 2, n_max < n_min, or fewer than n_min rows of data.
    """
    n_data = _count(n_data, "n_data", "pass the number of data rows")
    n_min = _count(n_min, "n_min", "use a power of two such as 64")
    n_max = _count(n_max, "n_max", "use a power of two such as 2**17")
    if n_min < 2 or n_min & (n_min - 1):
        raise QgpError(f"n_min = {n_min} is not a power of two ≥ 2; use e.g. n_min = 64")
    if n_max < n_min:
        raise QgpError(f"n_max = {n_max} is below n_min = {n_min}; raise n_max or lower n_min")
    if n_data < n_min:
        raise QgpError(f"the data have {n_data} rows, fewer than n_min = {n_min}; lower n_min or give more data")
    top = min(n_max, n_data)
    return tuple(n_min << k for k in range((top // n_min).bit_length()))


def subset_order(n_data: int, *, order: Order, seed: int) -> np.ndarray:
    """The index order whose first n entries (sorted) are the audit's rows at n.

    ``"permutation"`` is the draw `qgp.config.load_dataset` makes for ``[data] n_train``:
    ``np.random.default_rng(seed).permutation(n_data)``, of which the loader keeps
    ``np.sort(perm[:n])``; so the audit's rows at n are the training rows ``n_train = n`` gives,
    and the subsets are nested. ``"file"`` is 0, 1, …, n_data − 1 (the first n rows of the file).

    Parameters
    ----------
    n_data : int
        Rows available (≥ 1).
    order : {"permutation", "file"}
    seed : int
        ``[data] subsample_seed`` (ignored for ``"file"``).

    Returns
    -------
    ndarray of int, shape (n_data,)
    """
    n_data = _count(n_data, "n_data", "pass the number of data rows")
    if n_data < 1:
        raise QgpError("the data have no rows; give at least n_min rows")
    if order == "permutation":
        return np.random.default_rng(seed).permutation(n_data)
    if order == "file":
        return np.arange(n_data)
    raise QgpError(f"unknown subset order {order!r}; use 'permutation' (as [data] n_train) or 'file'")


# -- extreme eigenvalues ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Spectrum:
    """A's extreme eigenvalues and how they were found: ``"dense"`` (LAPACK) or ``"lanczos"``."""

    eigenvalue_min: float
    eigenvalue_max: float
    method: str


def extreme_eigenvalues(
    A,
    *,
    method: Literal["auto", "dense", "lanczos"] = "auto",
    lower_bound: float = 0.0,
    exact_limit: int = EXACT_LIMIT,
) -> Spectrum:
    """λmin and λmax of a symmetric positive-definite A.

    ``dense``: every eigenvalue from one LAPACK call (``scipy.linalg.eigvalsh``; its O(n³)
    tridiagonal reduction dominates, so the full spectrum costs what one extreme does).
    ``lanczos``: ARPACK; λmax on A, λmin by shift-invert at s just below ``lower_bound``. The
    bottom of a kernel matrix's spectrum is a dense cluster (K's small eigenvalues pile up near 0),
    where plain Lanczos, and shift-invert at 0, do not converge in thousands of restarts (measured);
    A − sI with s just below the cluster spreads it out. s < λmin is certified by the factorisation
    itself (a positive-definite Cholesky, or positive pivots of a symmetric LU), and λ = s + 1/ν
    from the largest eigenvalue ν of (A − sI)⁻¹ is never below λmin. The estimates aim at a relative
    error of `LANCZOS_RTOL`.

    Parameters
    ----------
    A : ndarray or scipy sparse matrix, shape (n, n)
        Symmetric positive definite.
    method : {"auto", "dense", "lanczos"}
        ``auto``: dense for n ≤ ``exact_limit``, Lanczos beyond.
    lower_bound : float
        A known lower bound on λmin, ≥ 0: σ² for A = K + σ²I (K is positive semi-definite). The
        default 0 is always valid but slow when the spectrum clusters near λmin.
    exact_limit : int
        Largest n the dense method accepts; it refuses more before allocating anything.

    Returns
    -------
    Spectrum
    """
    shape = getattr(A, "shape", None)
    if shape is None or len(shape) != 2 or shape[0] != shape[1] or shape[0] < 1:
        raise QgpError(f"A must be a square matrix, got shape {shape}; pass A = K + σ²I")
    n = shape[0]
    lower_bound = float(lower_bound)
    if not (math.isfinite(lower_bound) and lower_bound >= 0.0):
        raise QgpError(f"lower_bound must be a finite number ≥ 0 (got {lower_bound!r}); pass σ² or 0")
    if method == "auto":
        method = "dense" if n <= exact_limit else "lanczos"
    if method == "dense":
        if n > exact_limit:
            raise QgpError(
                f"a dense eigensolve at n = {n} is above the exact limit {exact_limit}; "
                "use method='lanczos' on a sparse A (a kernel with finite support)"
            )
        dense = A.toarray() if sp.issparse(A) else np.asarray(A, dtype=float)
        eig = scipy.linalg.eigvalsh(dense, check_finite=False)
        return Spectrum(float(eig[0]), float(eig[-1]), "dense")
    if method != "lanczos":
        raise QgpError(f"unknown eigenvalue method {method!r}; use 'auto', 'dense' or 'lanczos'")
    if n < 3:
        raise QgpError(f"Lanczos needs n ≥ 3 (got {n}); use method='dense'")
    A = sp.csr_array(A, dtype=float)
    top = _largest(A)
    return Spectrum(_smallest_by_shift_invert(A, lower_bound, top), top, "lanczos")


def _start_vector(n: int) -> np.ndarray:
    # Seeded, so a row is reproducible (ARPACK's own start vector is not under our control).
    return np.random.default_rng(0).standard_normal(n)


def _largest(A) -> float:
    """λmax by ARPACK; the residual bound makes it accurate to `_TOP_TOL` relative."""
    try:
        value = spla.eigsh(A, k=1, which="LA", tol=_TOP_TOL, v0=_start_vector(A.shape[0]), return_eigenvectors=False)
    except spla.ArpackNoConvergence:
        raise QgpError(
            f"Lanczos did not converge on λmax of the {A.shape[0]} × {A.shape[0]} matrix; "
            "use method='dense' (n ≤ EXACT_LIMIT) or report the data set"
        ) from None
    return float(value[0])


def _smallest_by_shift_invert(A, floor: float, top: float) -> float:
    """λmin = s + 1/ν, ν the largest eigenvalue of (A − sI)⁻¹, s = floor − δ (see `extreme_eigenvalues`).

    An ARPACK residual tolerance t on ν bounds λ's error by about t·(λ − s): with s just below a
    clustered bottom, λ − s is tiny and a loose first pass suffices (0.25 s where a tight one took 35 s,
    measured); when λ − s turns out large (λmin well above the floor) a second pass from the first
    pass's vector tightens t to what `LANCZOS_RTOL` needs.
    """
    n = A.shape[0]
    delta = max(LANCZOS_RTOL * floor, _SHIFT_ROUNDOFF_UNITS * _EPS * top)
    shift = floor - delta
    solve = _shifted_solver(A, shift)
    op = spla.LinearOperator((n, n), matvec=solve, dtype=float)
    tol, v0 = _FIRST_PASS_TOL, _start_vector(n)
    for _ in range(3):
        try:
            nu, vec = spla.eigsh(op, k=1, which="LA", tol=tol, v0=v0)
        except spla.ArpackNoConvergence:
            raise QgpError(
                f"shift-invert Lanczos did not converge on λmin (n = {n}, tolerance {tol:.1e}); pass "
                "lower_bound = σ² (the noise variance) or use method='dense' for n ≤ EXACT_LIMIT"
            ) from None
        value = shift + 1.0 / float(nu[0])
        needed = LANCZOS_RTOL * value / (value - shift)
        if tol <= needed:
            break
        tol, v0 = max(needed, 1e-14), vec[:, 0]
    return value


def _shifted_solver(A, shift: float) -> Callable[[np.ndarray], np.ndarray]:
    """x ↦ (A − sI)⁻¹x from a factorisation that also proves A − sI positive definite.

    Banded Cholesky after a reverse Cuthill–McKee ordering when the band fits in memory (its
    storage, n·(bandwidth + 1) floats, is known before allocating, and for 1-D inputs the band is
    the fill: 1.0× the non-zeros, measured); else SuperLU with a symmetric ordering and diagonal
    pivots (as `qgp.classical.gp`), whose fill is smaller for 2-D and 3-D inputs but which fails on
    its own past ~10⁸ non-zeros ("Not enough memory", measured at n = 2^17 on 23 GiB).
    """
    n = A.shape[0]
    M = sp.csr_array(A - shift * sp.eye_array(n, format="csr"))
    perm = reverse_cuthill_mckee(M, symmetric_mode=True)
    P = sp.coo_array(M[perm][:, perm])
    upper = P.row <= P.col
    rows, cols, vals = P.row[upper], P.col[upper], P.data[upper]
    band = int(np.max(cols - rows)) if cols.size else 0
    if 8 * n * (band + 1) <= memory.default_memory_cap():
        ab = np.zeros((band + 1, n))
        ab[band + rows - cols, cols] = vals  # LAPACK upper band storage: ab[u + i − j, j] = A[i, j]
        try:
            factor = scipy.linalg.cholesky_banded(ab, overwrite_ab=True, lower=False, check_finite=False)
        except np.linalg.LinAlgError:
            raise _not_above_shift(shift) from None

        def solve(b: np.ndarray) -> np.ndarray:
            out = np.empty(n)
            out[perm] = scipy.linalg.cho_solve_banded((factor, False), b[perm], check_finite=False)
            return out

        return solve
    try:
        lu = spla.splu(M.tocsc(), permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0, options={"SymmetricMode": True})
    except MemoryError:
        raise QgpError(
            f"the shift-invert factorisation of the {n} × {n} matrix ({M.nnz} non-zeros) ran out of memory; "
            "audit smaller n or a kernel with a smaller support"
        ) from None
    except RuntimeError:  # SuperLU's report of an exactly singular pivot
        raise _not_above_shift(shift) from None
    if not (np.array_equal(lu.perm_r, lu.perm_c) and np.all(lu.U.diagonal() > 0.0)):
        raise _not_above_shift(shift)
    return lu.solve


def _not_above_shift(shift: float) -> QgpError:
    return QgpError(
        f"A − {shift:.6g}·I is not positive definite, so lower_bound is not below λmin(A); "
        "pass the noise variance σ² (or 0) as lower_bound"
    )


# -- one row ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ConditioningRow:
    """The audit of A = K + σ²I at one n. None marks a value not computed; ``note`` says why.

    ``condition_method`` is ``"dense"`` (exact), ``"lanczos"`` (estimate, relative error ≲
    `LANCZOS_RTOL`) or ``"skipped"``. ``sparsity`` is the most non-zeros in a row (n by definition
    for a kernel without finite support), ``nonzeros`` their total. ``alpha_*`` are the
    block-encoding normalisations (module docstring). ``seconds`` is the row's wall time.
    """

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
        """The row as plain Python values (int, float, str, None), in `CONDITIONING_COLUMNS` order."""
        return {f.name: _plain(getattr(self, f.name)) for f in fields(self)}


def _plain(value):
    if value is None or isinstance(value, (str, bool)):
        return value
    if isinstance(value, (int, np.integer)):
        return int(value)
    return float(value)


#: CSV column order: the fields of `ConditioningRow`.
CONDITIONING_COLUMNS: tuple[str, ...] = tuple(f.name for f in fields(ConditioningRow))

_MATRIX_FIELDS = (
    "condition_number",
    "eigenvalue_min",
    "eigenvalue_max",
    "sparsity",
    "nonzeros",
    "norm_max",
    "norm_two",
    "norm_frobenius",
    "alpha_dilation",
    "alpha_lcu",
    "alpha_sparse_access",
)


def _check_inputs(X, y, noise_variance, target_condition, X_holdout, y_holdout):
    """Validated (X, y, σ², target, X_hold, y_hold); QgpError naming the fix otherwise."""
    X = _as_inputs(X, "X")
    y = np.asarray(y, dtype=float).ravel()
    if y.shape != (X.shape[0],) or not np.all(np.isfinite(y)):
        raise QgpError(f"y must hold one finite target per row of X ({X.shape[0]}), got shape {y.shape}; fix the data")
    if X.shape[0] < 3:
        raise QgpError(f"the audit needs at least 3 rows, got {X.shape[0]}; give more data")
    noise = float(noise_variance)
    if not (math.isfinite(noise) and noise > 0.0):
        raise QgpError(
            f"the audit needs a noise variance σ² > 0 (got {noise_variance!r}): A = K + σ²I is singular "
            "or nearly so without it; set σ² > 0"
        )
    if target_condition is not None:
        target_condition = float(target_condition)
        if not (math.isfinite(target_condition) and target_condition > 1.0):
            raise QgpError(f"target_condition must be a finite number > 1 (got {target_condition!r}); e.g. 100")
    if (X_holdout is None) != (y_holdout is None):
        raise QgpError("give both X_holdout and y_holdout, or neither")
    if X_holdout is not None:
        X_holdout = _as_inputs(X_holdout, "X_holdout")
        y_holdout = np.asarray(y_holdout, dtype=float).ravel()
        if y_holdout.shape != (X_holdout.shape[0],) or X_holdout.shape[1] != X.shape[1] or X_holdout.shape[0] < 1:
            raise QgpError(
                f"held-out data need one target per row and {X.shape[1]} input column(s); got X_holdout "
                f"{X_holdout.shape}, y_holdout {y_holdout.shape}"
            )
    return X, y, noise, target_condition, X_holdout, y_holdout


def _dense_matrix(kernel: Kernel, X: np.ndarray, noise: float, exact_limit: int) -> np.ndarray:
    n = X.shape[0]
    if n > exact_limit:  # the caller branches first; this guards the allocation itself
        raise QgpError(f"a dense {n} × {n} matrix is above the exact limit {exact_limit}; taper the kernel")
    A = kernel(X)
    A[np.diag_indices(n)] += noise
    return A


def _sparse_build_refusal(kernel: Kernel, X: np.ndarray) -> str | None:
    """Why the sparse A cannot be built here (None if it can), decided before allocating.

    The k-d tree counts the pairs `Kernel.sparse` will evaluate without listing them (the search
    coordinates are the kernel's own, in which its support is the unit ball).
    """
    coords = kernel._search_coordinates(X)  # private, but the exact search `sparse` runs
    tree = cKDTree(coords)
    pairs = int(tree.count_neighbors(tree, 1.0))
    need = _BUILD_BYTES_PER_NONZERO * pairs
    cap = memory.default_memory_cap()
    if need <= cap:
        return None
    return (
        f"skipped: building the sparse A ({pairs:.3g} kernel pairs within the support, ≈ {pairs / X.shape[0]:.0f} "
        f"a row) needs ≈ {need / 2**30:.3g} GiB, above the cap of {cap / 2**30:.3g} GiB (half the memory "
        "available); use a smaller support or fewer points"
    )


def _matrix_measures(A, kernel: Kernel, noise: float, lower_bound: float, lcu_limit: int, exact_limit: int) -> dict:
    """Every matrix quantity of the row from A (dense or sparse), and what the note should add.

    A Lanczos failure (QgpError) leaves the spectral values None with the reason in the note, so one
    size cannot abort a long audit; the counts and norms need no eigensolve and are kept.
    """
    n = A.shape[0]
    notes = []
    try:
        spectrum = extreme_eigenvalues(A, lower_bound=lower_bound, exact_limit=exact_limit)
    except QgpError as err:
        spectrum = None
        notes.append(f"skipped: no eigenvalues at n = {n}: {err}")
    if sp.issparse(A):
        A = sp.csr_array(A)
        A.eliminate_zeros()
        per_row = np.diff(A.indptr)
        magnitudes = abs(A)
        row_sums = np.asarray(magnitudes.sum(axis=1)).ravel()
        norm_max = float(magnitudes.max())
        frobenius = float(np.sqrt(np.sum(A.data**2)))
    else:
        per_row = np.count_nonzero(A, axis=1)
        row_sums = np.abs(A).sum(axis=1)
        norm_max = float(np.abs(A).max())
        frobenius = float(np.linalg.norm(A, "fro"))
    if kernel.support_radius is None:
        sparsity, nonzeros = n, n * n  # by definition: every entry is mathematically non-zero
    else:
        sparsity, nonzeros = int(per_row.max()), int(per_row.sum())
    diagonal = padding_diagonal(kernel.signal_variance, noise)
    lam_max = None if spectrum is None else spectrum.eigenvalue_max
    alpha_lcu = None
    if n <= lcu_limit:
        from qgp.circuits.methods.encodings import get_encoding  # qiskit: loaded only when needed

        dense = A.toarray() if sp.issparse(A) else A
        padded = pad_matrix(dense, diagonal)
        alpha_dilation = get_encoding("dilation").alpha(padded, lam_max)
        alpha_lcu = get_encoding("lcu").alpha(padded)
    else:
        # The same α without padding or densifying: the padded rows' sums are d = a + σ² = A_ii ≤ any
        # row sum of A, so max(row sums of A, d, λmax) is the padded matrix's max(row-sum bound, λmax)
        # (λmax ≤ the row-sum bound by Gershgorin; it only guards round-off, so it may be unknown).
        alpha_dilation = max(float(row_sums.max()), diagonal, lam_max or 0.0)
        notes.append(f"LCU α not computed above n = {lcu_limit} (4^m Pauli terms of the {padded_size(n)}-row padding)")
    values = dict.fromkeys(_MATRIX_FIELDS)
    values.update(
        sparsity=sparsity,
        nonzeros=nonzeros,
        norm_max=norm_max,
        norm_frobenius=frobenius,
        alpha_dilation=float(alpha_dilation),
        alpha_lcu=None if alpha_lcu is None else float(alpha_lcu),
        alpha_sparse_access=sparsity * norm_max,
    )
    if spectrum is not None:
        values.update(
            condition_number=lam_max / spectrum.eigenvalue_min,
            eigenvalue_min=spectrum.eigenvalue_min,
            eigenvalue_max=lam_max,
            norm_two=lam_max,
        )
    return {
        "values": values,
        "method": "skipped" if spectrum is None else spectrum.method,
        "notes": notes,
        "gp": True,  # the matrix could be built, so the GP's own copy can be too
    }


def _skipped_dense_measures(kernel: Kernel, X: np.ndarray, noise: float, exact_limit: int) -> dict:
    """What is exact without the matrix for a kernel without finite support beyond the limit."""
    n = X.shape[0]
    # |A_ij| ≤ √(A_ii A_jj) for positive semi-definite A, so ‖A‖_max is the largest diagonal entry.
    norm_max = float(np.max(kernel.diag(X))) + noise
    values = dict.fromkeys(_MATRIX_FIELDS)
    values.update(sparsity=n, nonzeros=n * n, norm_max=norm_max, alpha_sparse_access=n * norm_max)
    gib = 8 * n * n / 2**30
    note = (
        f"skipped: a kernel without finite support gives a dense A, and n = {n} is above the exact limit "
        f"{exact_limit} (the matrix alone would need {gib:.3g} GiB); κ, eigenvalues, ‖A‖₂, ‖A‖_F, α and the "
        "held-out scores are not computed; taper the kernel (Tapered, or [kernel] support) for a Lanczos estimate"
    )
    return {"values": values, "method": "skipped", "notes": [note], "gp": False}


def _sparse_measures(kernel: Kernel, X: np.ndarray, noise: float, lcu_limit: int, exact_limit: int) -> dict:
    """The row's matrix values from the sparse A, or a skipped row when it cannot be built."""
    n = X.shape[0]
    refusal = _sparse_build_refusal(kernel, X)
    if refusal is None:
        try:
            A = sp.csr_array(kernel.sparse(X) + noise * sp.eye_array(n, format="csr"))
        except MemoryError:
            refusal = f"skipped: building the sparse A ran out of memory at n = {n}; use a smaller support or fewer points"
    if refusal is not None:
        return {"values": dict.fromkeys(_MATRIX_FIELDS), "method": "skipped", "notes": [refusal], "gp": False}
    # A is dropped on return, before the GP builds its own copy.
    return _matrix_measures(A, kernel, noise, noise, lcu_limit, exact_limit)


def _gp_method(kernel: Kernel, n: int, nonzeros: int | None, exact_limit: int) -> str:
    """The solver `qgp.classical.gp.condition` should use for this row.

    Above the exact limit always the sparse LU ("auto" would densify a matrix fuller than
    SPARSE_MAX_DENSITY); below it, dense when the matrix is that full, because `Kernel.sparse`
    costs far more than the dense kernel there (82 s against 5 s for a half-full n = 8192, measured).
    """
    if kernel.support_radius is None:
        return "dense"
    if n > exact_limit:
        return "sparse"
    return "dense" if nonzeros is not None and nonzeros >= SPARSE_MAX_DENSITY * n * n else "auto"


def _holdout_scores(X, y, kernel, noise, X_hold, y_hold, center, method) -> tuple[float | None, float | None, str | None]:
    """Held-out RMSE and NLPD of the exact GP, or (None, None, why)."""
    try:
        prediction = condition(X, y, kernel, noise, center=center, method=method).predict(X_hold)
    except MemoryError:
        return None, None, f"held-out scores at σ² = {noise:.6g} not computed: the GP factorisation ran out of memory"
    except QgpError as err:
        return None, None, f"held-out scores at σ² = {noise:.6g} not computed: {err}"
    score = nlpd(y_hold, prediction.mean, prediction.variance_predictive)
    why = None
    if math.isnan(score):
        bad = count_nonpositive(prediction.variance_predictive)
        score, why = None, f"NLPD at σ² = {noise:.6g} undefined: {bad} predictive variance(s) ≤ 0 (round-off)"
    return rmse(y_hold, prediction.mean), score, why


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
    exact_limit: int = EXACT_LIMIT,
    lcu_limit: int = LCU_LIMIT,
) -> ConditioningRow:
    """The audit of A = K(X) + σ²I at n = len(X).

    n ≤ ``exact_limit``: A is built dense (for every kernel: the dense eigensolver needs it, and
    `Kernel.sparse` is the slower build at these sizes) and κ is exact. Beyond: a kernel with
    finite support is built sparse, after a memory check, and κ comes from Lanczos; a kernel
    without finite support is not built at all (method "skipped"; only s = n, the non-zero count
    n², ‖A‖_max = a + σ² and s·‖A‖_max, which need no matrix, are given).

    Parameters
    ----------
    X : array_like, shape (n, d)
    y : array_like, shape (n,)
    kernel : Kernel
    noise_variance : float
        σ² > 0, fixed.
    target_condition : float, optional
        κ > 1 whose σ² the row reports, with the held-out accuracy at that σ². None in the row (and
        a note) when the target is at or above K's own κ, so that no σ² ≥ 0 reaches it.
    X_holdout, y_holdout : array_like, shapes (h, d) and (h,), optional
        Held-out data for RMSE and NLPD (both or neither).
    center : bool
        Prior mean = training mean of y (as ``[data] center``).
    exact_limit, lcu_limit : int
        The dense and LCU limits (`EXACT_LIMIT`, `LCU_LIMIT`); lower them to try the large-n paths on
        small data.

    Returns
    -------
    ConditioningRow
    """
    start = time.perf_counter()
    X, y, noise, target, X_hold, y_hold = _check_inputs(X, y, noise_variance, target_condition, X_holdout, y_holdout)
    n = X.shape[0]
    if n <= exact_limit:
        measured = _matrix_measures(_dense_matrix(kernel, X, noise, exact_limit), kernel, noise, noise, lcu_limit, exact_limit)
    elif kernel.support_radius is None:
        measured = _skipped_dense_measures(kernel, X, noise, exact_limit)
    else:
        measured = _sparse_measures(kernel, X, noise, lcu_limit, exact_limit)
    values, notes = measured["values"], measured["notes"]

    values["noise_variance_for_target"] = None
    if target is not None and values["eigenvalue_min"] is not None:
        try:
            values["noise_variance_for_target"] = noise_for_condition(
                values["eigenvalue_min"] - noise, values["eigenvalue_max"] - noise, target
            )
        except QgpError:
            k_min, k_max = values["eigenvalue_min"] - noise, values["eigenvalue_max"] - noise
            kernel_kappa = k_max / k_min if k_min > 0.0 else math.inf
            notes.append(f"target κ = {target:g} is at or above K's own κ ({kernel_kappa:.4g}): no σ² ≥ 0 reaches it")

    scores = dict.fromkeys(("holdout_rmse", "holdout_nlpd", "holdout_rmse_at_target", "holdout_nlpd_at_target"))
    if X_hold is not None and not measured["gp"]:
        notes.append("held-out scores not computed (the matrix was not built)")
    elif X_hold is not None:
        method = _gp_method(kernel, n, values["nonzeros"], exact_limit)
        pairs = [(noise, "holdout_rmse", "holdout_nlpd")]
        if values["noise_variance_for_target"] is not None:
            pairs.append((values["noise_variance_for_target"], "holdout_rmse_at_target", "holdout_nlpd_at_target"))
        for sigma2, rmse_key, nlpd_key in pairs:
            scores[rmse_key], scores[nlpd_key], why = _holdout_scores(
                X, y, kernel, sigma2, X_hold, y_hold, center, method
            )
            if why:
                notes.append(why)
    return ConditioningRow(
        n=n,
        condition_method=measured["method"],
        noise_variance=noise,
        target_condition=target,
        n_holdout=0 if X_hold is None else X_hold.shape[0],
        seconds=time.perf_counter() - start,
        note="; ".join(notes),
        **values,
        **scores,
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
    exact_limit: int = EXACT_LIMIT,
    lcu_limit: int = LCU_LIMIT,
) -> tuple[ConditioningRow, ...]:
    """`audit_size` on the rows ``np.sort(order_index[:n])`` for each n of ``sizes``.

    Parameters
    ----------
    X : array_like, shape (N, d)
    y : array_like, shape (N,)
    kernel : Kernel
    noise_variance : float
        σ² > 0.
    sizes : sequence of int
        Each ≤ N (`nested_sizes`).
    order_index : array_like of int, shape (N,) or longer than max(sizes)
        Distinct row indices (`subset_order`); the subsets are nested because they are prefixes.
    target_condition, X_holdout, y_holdout, center, exact_limit, lcu_limit
        As `audit_size`.
    say : callable, optional
        Called with one progress line per n, e.g. ``"n = 4096: κ = 7785 (dense, 3.1 s)"``.

    Returns
    -------
    tuple of ConditioningRow, one per size, in the order of ``sizes``
    """
    X = _as_inputs(X, "X")
    y = np.asarray(y, dtype=float).ravel()
    order_index = np.asarray(order_index)
    sizes = tuple(_count(n, "every size", "use nested_sizes(...)") for n in sizes)
    if not sizes:
        raise QgpError("no sizes to audit; pass sizes=nested_sizes(len(X))")
    largest = max(sizes)
    if order_index.ndim != 1 or not np.issubdtype(order_index.dtype, np.integer) or order_index.size < largest:
        raise QgpError(
            f"order_index must be a 1-D integer array with at least max(sizes) = {largest} entries; "
            "use subset_order(len(X), order=..., seed=...)"
        )
    prefix = order_index[:largest]
    if prefix.min() < 0 or prefix.max() >= X.shape[0] or np.unique(prefix).size != largest:
        raise QgpError(f"order_index must hold distinct row indices in [0, {X.shape[0]}); use subset_order(...)")
    rows = []
    with Bar(len(sizes), "conditioning audit", unit="size") as meter:
        for n in sizes:
            keep = np.sort(order_index[:n])
            row = audit_size(
                X[keep],
                y[keep],
                kernel,
                noise_variance,
                target_condition=target_condition,
                X_holdout=X_holdout,
                y_holdout=y_holdout,
                center=center,
                exact_limit=exact_limit,
                lcu_limit=lcu_limit,
            )
            rows.append(row)
            meter.update(1, n=n)
            if say is not None:
                say(_progress_line(row))
    return tuple(rows)


def _progress_line(row: ConditioningRow) -> str:
    if row.condition_number is None:
        return f"n = {row.n}: κ not computed ({row.condition_method}, {row.seconds:.1f} s): {row.note}"
    return f"n = {row.n}: κ = {row.condition_number:.6g} ({row.condition_method}, {row.seconds:.1f} s)"
