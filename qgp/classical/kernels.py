"""Covariance functions k(x, x′) with explicit hyperparameters.

Every kernel is a frozen dataclass with a ``signal_variance`` a (k(x, x), in units of the
target squared) and a ``lengthscale`` ℓ (one number, or one per input dimension: automatic relevance
determination). The stationary families are radial in the scaled distance

    r = ‖(x − x′) / ℓ‖,        k(x, x′) = a · φ(r),

with φ(0) = 1, so k(x, x) = a:

* ``RBF``       φ(r) = exp(−r²/2)                              (squared exponential)
* ``Matern32``  φ(r) = (1 + √3 r) exp(−√3 r)                    (Matérn ν = 3/2)
* ``Matern52``  φ(r) = (1 + √5 r + 5r²/3) exp(−√5 r)            (Matérn ν = 5/2)
* ``Wendland``  φ_{3,1}(r) = (1 − r)₊⁴ (4r + 1)  or
                φ_{3,2}(r) = (1 − r)₊⁶ (35r² + 18r + 3) / 3   (Wendland 1995)

The forms are those of Rasmussen & Williams (2006), ch. 4. The Wendland functions are
compactly supported (zero for r ≥ 1, so ℓ is the support radius) and positive definite
for inputs of up to 3 dimensions. ``Tapered`` multiplies any kernel by
φ_{3,1}(‖x − x′‖ / support) (covariance tapering, Furrer, Genton & Nychka 2006), which
keeps positive definiteness and makes the kernel matrix sparse.

Kernels with finite support also evaluate to a ``scipy.sparse.csr_array`` found by a
k-d-tree neighbour search, so a sparse matrix never costs n² distances.
"""

from __future__ import annotations

import math
import warnings
from abc import ABC, ABCMeta, abstractmethod
from dataclasses import dataclass, field, replace
from typing import ClassVar, Literal

import numpy as np
import scipy.sparse
from scipy.spatial import cKDTree
from scipy.spatial.distance import cdist

from qgp.errors import QgpError
from qgp.settings import KernelSpec

__all__ = [
    "Kernel",
    "RBF",
    "Matern32",
    "Matern52",
    "Wendland",
    "Tapered",
    "wendland_phi",
    "make_kernel",
    "WENDLAND_MAX_DIMS",
]

# Wendland's φ_{3,k} are positive definite on R^d for d ≤ 3 only (Wendland 1995).
WENDLAND_MAX_DIMS = 3

_SQRT3 = math.sqrt(3.0)
_SQRT5 = math.sqrt(5.0)

# The neighbour search radius is widened by this relative amount so that pairs whose
# scaled distance rounds to just above 1 in the tree but just below 1 in the dense
# formula are still evaluated (their value is ~(1 − r)⁴ ≈ 0 either way); the kernel
# formula itself then decides, and exact zeros are dropped.
_SEARCH_SLACK = 1e-12


def wendland_phi(r: np.ndarray | float, smoothness: int) -> np.ndarray:
    """Wendland's compactly supported function φ_{3,k}(r) for k = ``smoothness`` ∈ {1, 2}.

    φ_{3,1}(r) = (1 − r)₊⁴ (4r + 1) and φ_{3,2}(r) = (1 − r)₊⁶ (35r² + 18r + 3) / 3
    (Wendland 1995), normalised to φ(0) = 1 and exactly 0 for r ≥ 1; positive definite
    on R^d for d ≤ 3 and 2k times continuously differentiable at 0.
    """
    r = np.asarray(r, dtype=float)
    t = np.maximum(1.0 - r, 0.0)
    if smoothness == 1:
        return t**4 * (4.0 * r + 1.0)
    if smoothness == 2:
        return t**6 * (35.0 * r * r + 18.0 * r + 3.0) / 3.0
    raise QgpError(
        f"Wendland smoothness must be 1 or 2 (got {smoothness!r}); "
        "set `[kernel] smoothness` to 1 (φ_{3,1}) or 2 (φ_{3,2})"
    )


def _wendland_slope(r: np.ndarray, smoothness: int) -> np.ndarray:
    """φ′(r) / r for φ_{3,k}; finite at r = 0, used for lengthscale gradients.

    d/dr φ_{3,1} = −20 r (1 − r)₊³ and d/dr φ_{3,2} = −(56/3) r (1 − r)₊⁵ (5r + 1).
    """
    t = np.maximum(1.0 - r, 0.0)
    if smoothness == 1:
        return -20.0 * t**3
    return -(56.0 / 3.0) * t**5 * (5.0 * r + 1.0)


def _as_inputs(X, name: str = "X") -> np.ndarray:
    """Inputs as a finite float array of shape (n, d); a 1-D array is read as n points in 1-D."""
    X = np.asarray(X, dtype=float)
    if X.ndim == 1:
        X = X[:, None]
    if X.ndim != 2:
        raise QgpError(
            f"{name} must be a 2-D array of shape (n_points, n_dims), got shape {X.shape}; "
            "reshape the inputs to one row per point"
        )
    if not np.all(np.isfinite(X)):
        raise QgpError(f"{name} contains NaN or infinite values; remove or fill those inputs")
    return X


def _check_positive(value: float, what: str, key: str) -> float:
    value = float(value)
    if not (math.isfinite(value) and value > 0.0):
        raise QgpError(f"{what} must be a positive finite number (got {value!r}); set {key} > 0")
    return value


#: The old name of ``signal_variance``: accepted for one release, with a FutureWarning.
_OLD_NAME = "amplitude"


def _renamed_warning(where: str) -> None:
    warnings.warn(
        f"{where} `amplitude` is deprecated: it holds the signal variance (units of the target squared); "
        "call it `signal_variance` (`amplitude` will be removed in the next release)",
        FutureWarning,
        stacklevel=3,
    )


class _KernelType(ABCMeta):
    """Takes the deprecated keyword ``amplitude=`` for ``signal_variance=`` on every kernel class."""

    def __call__(cls, *args, **kwargs):
        if _OLD_NAME in kwargs:
            if "signal_variance" in kwargs:
                raise QgpError("give the kernel's signal_variance only (amplitude is its deprecated name), not both")
            _renamed_warning("the kernel keyword")
            kwargs["signal_variance"] = kwargs.pop(_OLD_NAME)
        return super().__call__(*args, **kwargs)


@dataclass(frozen=True)
class Kernel(ABC, metaclass=_KernelType):
    """A positive-definite covariance function with signal variance a and lengthscale(s) ℓ.

    ``theta`` = [log a, log ℓ₁, …] is the unconstrained parameter vector the ML-II
    optimiser works on; ``with_theta`` returns a new kernel. ``support_radius`` is the
    Euclidean distance (input units) past which k is exactly 0, or None.
    """

    signal_variance: float
    lengthscale: float | tuple[float, ...]

    family: ClassVar[str] = ""

    def __post_init__(self) -> None:
        object.__setattr__(
            self,
            "signal_variance",
            _check_positive(self.signal_variance, "the kernel's signal variance", "`[kernel] signal_variance`"),
        )
        ell = self.lengthscale
        if np.ndim(ell) > 0:
            ell = tuple(
                _check_positive(v, "every kernel lengthscale", "`[kernel] lengthscale`")
                for v in np.ravel(ell)
            )
            if not ell:
                raise QgpError("kernel lengthscale is an empty list; give one number or one per input column")
        else:
            ell = _check_positive(ell, "kernel lengthscale", "`[kernel] lengthscale`")
        object.__setattr__(self, "lengthscale", ell)

    @property
    def amplitude(self) -> float:
        """Deprecated name of ``signal_variance`` (one release)."""
        _renamed_warning("the kernel attribute")
        return self.signal_variance

    # -- evaluation -----------------------------------------------------------------

    @abstractmethod
    def __call__(self, X1, X2=None) -> np.ndarray:
        """Dense kernel matrix K[i, j] = k(X1[i], X2[j]) of shape (n1, n2); X2 = None means X1."""

    def diag(self, X) -> np.ndarray:
        """k(x, x) for every row of X: the signal variance, since every φ here has φ(0) = 1."""
        X = _as_inputs(X)
        self._check_dims(X.shape[1])
        return np.full(X.shape[0], self.signal_variance)

    @property
    @abstractmethod
    def support_radius(self) -> float | None:
        """Euclidean distance in input units beyond which k = 0 exactly; None if unbounded."""

    @abstractmethod
    def _pair_values(self, X1: np.ndarray, X2: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        """k(X1[rows[m]], X2[cols[m]]) for the listed pairs only."""

    def _search_coordinates(self, X: np.ndarray) -> np.ndarray:
        """Coordinates in which k = 0 whenever the Euclidean distance exceeds 1."""
        return X / self.support_radius

    def sparse(self, X1, X2=None) -> scipy.sparse.csr_array:
        """Kernel matrix as a CSR array, from a k-d-tree search of pairs inside the support.

        Only pairs within the support are ever evaluated (``cKDTree.sparse_distance_matrix``
        on inputs scaled so the support is the unit ball). Exact-zero distances (the
        diagonal, duplicate points) are added explicitly because a sparse distance matrix
        need not store them, so the diagonal is the signal variance. Equals ``self(X1, X2)``.
        """
        if self.support_radius is None:
            raise QgpError(
                f"the {self.family} kernel has unbounded support, so its matrix is dense; "
                "use a Wendland kernel or set `[kernel] support` to taper it"
            )
        symmetric = X2 is None
        X1 = _as_inputs(X1, "X1")
        X2 = X1 if symmetric else _as_inputs(X2, "X2")
        self._check_pair(X1, X2)
        n1, n2 = X1.shape[0], X2.shape[0]
        if n1 == 0 or n2 == 0:
            return scipy.sparse.csr_array((n1, n2))
        tree1 = cKDTree(self._search_coordinates(X1))
        tree2 = tree1 if symmetric else cKDTree(self._search_coordinates(X2))
        near = tree1.sparse_distance_matrix(tree2, 1.0 + _SEARCH_SLACK, output_type="coo_matrix")
        rows, cols = [near.row], [near.col]
        # Zero distances: the diagonal, and duplicates found by an exact (radius 0) search.
        if symmetric:
            rows.append(np.arange(n1))
            cols.append(np.arange(n1))
        for i, hits in enumerate(tree1.query_ball_tree(tree2, 0.0)):
            if hits:
                rows.append(np.full(len(hits), i))
                cols.append(np.asarray(hits))
        keys = np.unique(np.concatenate(rows).astype(np.int64) * n2 + np.concatenate(cols))
        r, c = np.divmod(keys, n2)
        values = self._pair_values(X1, X2, r, c)
        keep = values != 0.0
        return scipy.sparse.csr_array((values[keep], (r[keep], c[keep])), shape=(n1, n2))

    # -- hyperparameters ------------------------------------------------------------

    @property
    def theta(self) -> np.ndarray:
        """Log-hyperparameters [log a, log ℓ₁, …, log ℓ_p] (p = 1 for a scalar lengthscale)."""
        return np.log(np.concatenate(([self.signal_variance], np.atleast_1d(self.lengthscale))))

    def with_theta(self, theta) -> Kernel:
        """A new kernel of the same family with signal variance and lengthscale(s) exp(theta)."""
        theta = np.asarray(theta, dtype=float).ravel()
        n_ell = len(np.atleast_1d(self.lengthscale))
        if theta.shape != (1 + n_ell,):
            raise QgpError(f"theta must have {1 + n_ell} entries for this kernel, got {theta.size}")
        values = np.exp(theta)
        ell = tuple(values[1:]) if isinstance(self.lengthscale, tuple) else float(values[1])
        return replace(self, signal_variance=float(values[0]), lengthscale=ell)

    @abstractmethod
    def theta_gradient(self, X) -> np.ndarray:
        """∂K/∂θ_j for X, stacked as an (n, n, len(theta)) array (for R&W eq. 5.9)."""

    # -- reporting --------------------------------------------------------------------

    def describe(self) -> dict:
        """JSON-ready summary: family, signal_variance, lengthscale, support, taper, smoothness.

        ``smoothness`` is ν for the Matérn families, k of φ_{3,k} for Wendland, and None
        for the (infinitely smooth) RBF. ``support`` is ``support_radius`` (None = unbounded).
        """
        ell = self.lengthscale
        return {
            "family": self.family,
            "signal_variance": self.signal_variance,
            "lengthscale": list(ell) if isinstance(ell, tuple) else ell,
            "support": self.support_radius,
            "taper": None,
            "smoothness": self._smoothness(),
        }

    def _smoothness(self):
        return None

    # -- shared checks ----------------------------------------------------------------

    def _scales(self, n_dims: int) -> np.ndarray:
        """Lengthscales broadcast to one per input dimension, after checking the count."""
        self._check_dims(n_dims)
        return np.broadcast_to(np.asarray(self.lengthscale, dtype=float), (n_dims,))

    def _check_dims(self, n_dims: int) -> None:
        ell = self.lengthscale
        if isinstance(ell, tuple) and len(ell) != n_dims:
            raise QgpError(
                f"`[kernel] lengthscale` has {len(ell)} values but the inputs have {n_dims} "
                f"dimension(s); give one number or exactly {n_dims} values (one per input column)"
            )

    def _check_pair(self, X1: np.ndarray, X2: np.ndarray) -> None:
        if X1.shape[1] != X2.shape[1]:
            raise QgpError(
                f"the two input sets have {X1.shape[1]} and {X2.shape[1]} columns; "
                "test inputs need the same columns as the training inputs"
            )
        self._check_dims(X1.shape[1])


@dataclass(frozen=True)
class _Radial(Kernel):
    """k(x, x′) = a φ(r), r = ‖(x − x′)/ℓ‖: shared machinery of the stationary families."""

    @abstractmethod
    def _phi(self, r: np.ndarray) -> np.ndarray:
        """The profile φ(r), φ(0) = 1."""

    @abstractmethod
    def _slope(self, r: np.ndarray) -> np.ndarray:
        """φ′(r) / r, finite at r = 0 for every family here."""

    def _distances(self, X1, X2) -> tuple[np.ndarray, np.ndarray, bool]:
        symmetric = X2 is None
        X1 = _as_inputs(X1, "X1")
        X2 = X1 if symmetric else _as_inputs(X2, "X2")
        self._check_pair(X1, X2)
        ell = self._scales(X1.shape[1])
        return X1 / ell, X2 / ell, symmetric

    def __call__(self, X1, X2=None) -> np.ndarray:
        S1, S2, _ = self._distances(X1, X2)
        # cdist of a set with itself has an exactly zero diagonal, so K[i, i] = a exactly.
        return self.signal_variance * self._phi(cdist(S1, S2))

    def _pair_values(self, X1, X2, rows, cols) -> np.ndarray:
        ell = self._scales(X1.shape[1])
        r = np.sqrt(np.sum(((X1[rows] - X2[cols]) / ell) ** 2, axis=1))
        return self.signal_variance * self._phi(r)

    def theta_gradient(self, X) -> np.ndarray:
        """∂K/∂log a = K; ∂K/∂log ℓ_i = −a (φ′(r)/r) (Δ_i/ℓ_i)², summed over i for scalar ℓ."""
        S, _, _ = self._distances(X, None)
        diff2 = (S[:, None, :] - S[None, :, :]) ** 2  # (n, n, d) scaled squared offsets
        r = np.sqrt(diff2.sum(axis=2))
        K = self.signal_variance * self._phi(r)
        g = -self.signal_variance * self._slope(r)
        if isinstance(self.lengthscale, tuple):
            dell = g[:, :, None] * diff2
        else:
            dell = (g * r * r)[:, :, None]
        return np.concatenate((K[:, :, None], dell), axis=2)


@dataclass(frozen=True)
class RBF(_Radial):
    """Squared exponential: k = a exp(−r²/2) (R&W 2006, eq. 4.9). Infinite support."""

    family: ClassVar[str] = "rbf"

    def _phi(self, r):
        return np.exp(-0.5 * r * r)

    def _slope(self, r):
        return -np.exp(-0.5 * r * r)

    @property
    def support_radius(self) -> None:
        return None


@dataclass(frozen=True)
class Matern32(_Radial):
    """Matérn ν = 3/2: k = a (1 + √3 r) e^{−√3 r} (R&W 2006, eq. 4.17). Infinite support."""

    family: ClassVar[str] = "matern32"

    def _phi(self, r):
        return (1.0 + _SQRT3 * r) * np.exp(-_SQRT3 * r)

    def _slope(self, r):
        return -3.0 * np.exp(-_SQRT3 * r)

    def _smoothness(self):
        return 1.5

    @property
    def support_radius(self) -> None:
        return None


@dataclass(frozen=True)
class Matern52(_Radial):
    """Matérn ν = 5/2: k = a (1 + √5 r + 5r²/3) e^{−√5 r} (R&W 2006, eq. 4.17). Infinite support."""

    family: ClassVar[str] = "matern52"

    def _phi(self, r):
        return (1.0 + _SQRT5 * r + (5.0 / 3.0) * r * r) * np.exp(-_SQRT5 * r)

    def _slope(self, r):
        return -(5.0 / 3.0) * (1.0 + _SQRT5 * r) * np.exp(-_SQRT5 * r)

    def _smoothness(self):
        return 2.5

    @property
    def support_radius(self) -> None:
        return None


@dataclass(frozen=True)
class Wendland(_Radial):
    """Compactly supported k = a φ_{3,k}(r) (Wendland 1995); the lengthscale is the support radius.

    Positive definite only for inputs of up to 3 dimensions, so wider inputs are refused.
    """

    smoothness: Literal[1, 2] = 1

    family: ClassVar[str] = "wendland"

    def __post_init__(self) -> None:
        super().__post_init__()
        if self.smoothness not in (1, 2):
            raise QgpError(
                f"Wendland smoothness must be 1 or 2 (got {self.smoothness!r}); "
                "set `[kernel] smoothness` to 1 (φ_{3,1}) or 2 (φ_{3,2})"
            )

    def _check_dims(self, n_dims: int) -> None:
        if n_dims > WENDLAND_MAX_DIMS:
            raise QgpError(
                f"the Wendland kernel is positive definite only for inputs of up to "
                f"{WENDLAND_MAX_DIMS} dimensions, but the inputs have {n_dims}; "
                "use the rbf or a matern family for wider inputs"
            )
        super()._check_dims(n_dims)

    def _phi(self, r):
        return wendland_phi(r, self.smoothness)

    def _slope(self, r):
        return _wendland_slope(r, self.smoothness)

    def _smoothness(self):
        return self.smoothness

    @property
    def support_radius(self) -> float:
        # r = ‖Δ/ℓ‖ ≥ ‖Δ‖ / max ℓ, so ‖Δ‖ > max ℓ guarantees r > 1: the safe bound.
        return float(np.max(self.lengthscale))

    def _search_coordinates(self, X):
        # Per-dimension scaling makes the support exactly the unit ball (tighter than max ℓ).
        return X / self._scales(X.shape[1])


@dataclass(frozen=True)
class Tapered(Kernel):
    """k(x, x′) = k_base(x, x′) · φ_{3,1}(‖x − x′‖ / support) (Furrer, Genton & Nychka 2006).

    A product of positive-definite kernels is positive definite (Schur product theorem),
    and the Wendland factor sets every pair farther apart than ``support`` (Euclidean,
    input units) to exactly 0. ``signal_variance`` and ``lengthscale`` mirror the base kernel;
    ``theta`` covers the base hyperparameters only (the taper radius is fixed).
    """

    signal_variance: float = field(init=False, repr=False)
    lengthscale: float | tuple[float, ...] = field(init=False, repr=False)
    base: Kernel
    support: float

    def __post_init__(self) -> None:
        if not isinstance(self.base, Kernel):
            raise QgpError(f"Tapered needs a Kernel to taper, got {type(self.base).__name__}")
        object.__setattr__(
            self, "support", _check_positive(self.support, "the taper support radius", "`[kernel] support`")
        )
        object.__setattr__(self, "signal_variance", self.base.signal_variance)
        object.__setattr__(self, "lengthscale", self.base.lengthscale)

    @property
    def family(self) -> str:  # type: ignore[override]
        return self.base.family

    def _check_dims(self, n_dims: int) -> None:
        if n_dims > WENDLAND_MAX_DIMS:
            raise QgpError(
                f"the taper φ_{{3,1}} is positive definite only for inputs of up to "
                f"{WENDLAND_MAX_DIMS} dimensions, but the inputs have {n_dims}; "
                "remove `[kernel] support` for wider inputs"
            )
        self.base._check_dims(n_dims)

    def _taper(self, distance: np.ndarray) -> np.ndarray:
        return wendland_phi(distance / self.support, 1)

    def __call__(self, X1, X2=None) -> np.ndarray:
        X1 = _as_inputs(X1, "X1")
        X2 = X1 if X2 is None else _as_inputs(X2, "X2")
        self._check_pair(X1, X2)
        return self.base(X1, X2) * self._taper(cdist(X1, X2))

    def _pair_values(self, X1, X2, rows, cols) -> np.ndarray:
        distance = np.sqrt(np.sum((X1[rows] - X2[cols]) ** 2, axis=1))
        return self.base._pair_values(X1, X2, rows, cols) * self._taper(distance)

    @property
    def support_radius(self) -> float:
        inner = self.base.support_radius
        return self.support if inner is None else min(self.support, inner)

    def _search_coordinates(self, X):
        # The base may reach less far, but the taper alone already bounds the pairs.
        return X / self.support

    @property
    def theta(self) -> np.ndarray:
        return self.base.theta

    def with_theta(self, theta) -> Tapered:
        return Tapered(base=self.base.with_theta(theta), support=self.support)

    def theta_gradient(self, X) -> np.ndarray:
        """The taper is fixed, so ∂K/∂θ = (∂K_base/∂θ) ∘ T."""
        X = _as_inputs(X)
        self._check_dims(X.shape[1])
        return self.base.theta_gradient(X) * self._taper(cdist(X, X))[:, :, None]

    def describe(self) -> dict:
        out = self.base.describe()
        out["support"] = self.support_radius
        out["taper"] = {"family": "wendland", "smoothness": 1, "support": self.support}
        return out


_FAMILIES: dict[str, type[_Radial]] = {
    "rbf": RBF,
    "matern32": Matern32,
    "matern52": Matern52,
    "wendland": Wendland,
}


def make_kernel(spec: KernelSpec, n_dims: int) -> Kernel:
    """Build the kernel a ``[kernel]`` section describes, for inputs with ``n_dims`` columns.

    A ``support`` wraps the family in ``Tapered``. Checks the lengthscale count against
    ``n_dims`` and the Wendland/taper dimension limit here, before any matrix is built.
    """
    if n_dims < 1:
        raise QgpError(f"the inputs need at least one column (got {n_dims}); add an input column")
    cls = _FAMILIES.get(spec.family)
    if cls is None:
        raise QgpError(
            f"unknown `[kernel] family` {spec.family!r}; use one of {', '.join(sorted(_FAMILIES))}"
        )
    ell = spec.lengthscale
    if isinstance(ell, (list, tuple)):
        if len(ell) != n_dims:
            raise QgpError(
                f"`[kernel] lengthscale` has {len(ell)} values but the data have {n_dims} input "
                f"column(s); give one number or exactly {n_dims} values, one per input column"
            )
        ell = tuple(ell)
    if cls is Wendland:
        kernel: Kernel = Wendland(signal_variance=spec.signal_variance, lengthscale=ell, smoothness=spec.smoothness)
    else:
        kernel = cls(signal_variance=spec.signal_variance, lengthscale=ell)
    if spec.support is not None:
        kernel = Tapered(base=kernel, support=spec.support)
    kernel._check_dims(n_dims)
    return kernel
