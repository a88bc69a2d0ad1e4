"""A GP regression problem made ready for the circuits: data, kernel, noise, A and its diagnostics.

This is the first stage of the pipeline (data → kernel matrix). ``build_problem`` is the Python
entry point from numpy arrays; ``problem_from_config`` is the same from a validated config.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Literal

import numpy as np

from qgp.config import Dataset, load_dataset
from qgp.errors import QgpError
from qgp.classical.gp import ExactGP, condition, fit_ml2
from qgp.classical.kernels import Kernel, make_kernel
from qgp.classical.levers import noise_for_condition
from qgp.settings import MAX_ABS_VALUE, Config
from qgp.classical.system import (
    EXACT_EIGEN_LIMIT,
    SystemDiagnostics,
    diagnose,
    pad_matrix,
    pad_vector,
    padded_size,
    regularise,
)

__all__ = ["Problem", "NoiseSource", "build_problem", "problem_from_config", "validate_arrays"]

NoiseSource = Literal["fixed", "target_condition", "fitted"]


@dataclass(frozen=True)
class Problem:
    """Everything the circuits and the classical reference need, fixed once.

    ``y_centered`` = y − ``y_offset`` (the training mean when ``center``), the vector the
    circuits see; predictive means add ``y_offset`` back. ``fitted_noise_variance`` is the ML-II
    value when a fit ran (it differs from ``noise_variance`` when a target κ overrode it).
    """

    X: np.ndarray
    y: np.ndarray
    X_test: np.ndarray
    y_test: np.ndarray | None
    kernel: Kernel
    noise_variance: float
    noise_source: NoiseSource
    fitted_noise_variance: float | None
    center: bool
    diagnostics: SystemDiagnostics
    A: np.ndarray
    inputs: tuple[str, ...] = ()
    target: str = "y"
    #: (column, label with unit) pairs for figures (``[data] labels``).
    labels: tuple[tuple[str, str], ...] = ()

    def label(self, column: str) -> str:
        """The figure label of ``column``: its ``[data] labels`` entry, else the column name."""
        return dict(self.labels).get(column, column)

    @property
    def n_train(self) -> int:
        return self.X.shape[0]

    @property
    def n_test(self) -> int:
        return self.X_test.shape[0]

    @property
    def y_offset(self) -> float:
        return float(np.mean(self.y)) if self.center else 0.0

    @property
    def y_centered(self) -> np.ndarray:
        return self.y - self.y_offset

    @property
    def padded_size(self) -> int:
        return padded_size(self.n_train)

    @property
    def system_qubits(self) -> int:
        return self.padded_size.bit_length() - 1

    @property
    def padding_diagonal(self) -> float:
        """A diagonal entry of A, k(x₁, x₁) + σ² (so inside [λmin, λmax] for any kernel; for qgp's
        stationary kernels exactly signal variance + σ², `qgp.classical.system.padding_diagonal`)."""
        return float(np.asarray(self.A[0, 0]).item())

    @cached_property
    def A_padded(self) -> np.ndarray:
        """diag(A, d·I) of size 2^m (see qgp.classical.system for why every GP answer is unchanged)."""
        return pad_matrix(self.A, self.padding_diagonal)

    @cached_property
    def k_star(self) -> np.ndarray:
        """Cross-covariances k(X, X*), shape (n_train, n_test)."""
        return self.kernel(self.X, self.X_test)

    @cached_property
    def k_star_star(self) -> np.ndarray:
        """Prior variances k(x*, x*) at the test points."""
        return self.kernel.diag(self.X_test)

    def padded(self, v: np.ndarray) -> np.ndarray:
        """A training-length vector (or columns of a matrix) padded with zeros to 2^m rows."""
        v = np.asarray(v)
        if v.ndim == 1:
            return pad_vector(v, self.padded_size)
        out = np.zeros((self.padded_size, v.shape[1]), dtype=v.dtype)
        out[: v.shape[0]] = v
        return out

    @cached_property
    def exact(self) -> ExactGP:
        """The exact classical GP on the same data, kernel and noise (the reference)."""
        return condition(self.X, self.y, self.kernel, self.noise_variance, center=self.center)


def _as_2d(X, name: str) -> np.ndarray:
    try:
        X = np.asarray(X, dtype=float)
    except (TypeError, ValueError):
        raise QgpError(f"{name} must be numeric") from None
    if X.ndim == 1:
        X = X[:, None]
    if X.ndim != 2:
        raise QgpError(f"{name} must be a 1-D or 2-D array (points × inputs), got shape {X.shape}")
    return X


def validate_arrays(X, y, X_test=None, y_test=None):
    """Shapes and finiteness checked at the Python API's edge; returns float arrays."""
    X = _as_2d(X, "X")
    y = np.asarray(y, dtype=float)
    if y.ndim != 1 or y.shape[0] != X.shape[0]:
        raise QgpError(f"y must be 1-D with one value per row of X: X has {X.shape[0]} rows, y has shape {y.shape}")
    if X.shape[0] < 2:
        raise QgpError(f"{X.shape[0]} training point(s); a GP needs at least 2")
    for name, arr in (("X", X), ("y", y)):
        bad = np.argwhere(~np.isfinite(arr))
        if bad.size:
            raise QgpError(f"{name} has a non-finite value at index {tuple(bad[0])}; remove or fix that point")
        _check_magnitude(name, arr)
    if X_test is None:
        X_test = X.copy()
    X_test = _as_2d(X_test, "X_test")
    if X_test.shape[1] != X.shape[1]:
        raise QgpError(f"X_test has {X_test.shape[1]} input column(s) but X has {X.shape[1]}; they must match")
    if not np.all(np.isfinite(X_test)):
        raise QgpError("X_test has a non-finite value; remove or fix that point")
    _check_magnitude("X_test", X_test)
    if y_test is not None:
        y_test = np.asarray(y_test, dtype=float)
        if y_test.shape != (X_test.shape[0],) or not np.all(np.isfinite(y_test)):
            raise QgpError(f"y_test must be finite with one value per row of X_test ({X_test.shape[0]})")
    return X, y, X_test, y_test


def _check_magnitude(name: str, arr: np.ndarray) -> None:
    big = np.argwhere(np.abs(arr) > MAX_ABS_VALUE)
    if big.size:
        raise QgpError(
            f"{name} has |value| > {MAX_ABS_VALUE:g} at index {tuple(int(i) for i in big[0])}, whose square overflows "
            "double precision; rescale it (divide by a power of ten) and the kernel with it"
        )


def _check_duplicates(X: np.ndarray, noise_variance: float) -> None:
    if noise_variance > 0:
        return
    _, idx, counts = np.unique(X, axis=0, return_index=True, return_counts=True)
    if np.any(counts > 1):
        row = int(idx[np.argmax(counts > 1)])
        raise QgpError(
            f"duplicate training inputs (e.g. row {row + 1} of the data) make K singular and the noise "
            "variance is 0; set [noise] variance > 0 or remove the duplicates"
        )


def build_problem(
    X,
    y,
    kernel: Kernel,
    *,
    noise_variance: float | None = None,
    target_condition: float | None = None,
    X_test=None,
    y_test=None,
    center: bool = True,
    fit: bool = False,
    rng: np.random.Generator | None = None,
    inputs: tuple[str, ...] = (),
    target: str = "y",
    labels=(),
) -> Problem:
    """Set up A = K + σ²I for data (X, y) and test inputs X* (X itself when omitted).

    σ² comes from ``noise_variance``, or from ``target_condition`` (σ² = (λmax − κλmin)/(κ − 1)
    on K's spectrum), or from the ML-II fit when ``fit`` and neither is given. With ``fit`` the
    signal variance and lengthscale(s) are always fitted (``rng`` seeds the restarts).
    """
    X, y, X_test, y_test = validate_arrays(X, y, X_test, y_test)
    if noise_variance is not None and target_condition is not None:
        raise QgpError("give noise_variance or target_condition, not both")
    if noise_variance is None and target_condition is None and not fit:
        raise QgpError("give noise_variance or target_condition (or fit=True to fit the noise)")
    if noise_variance is not None and (not np.isfinite(noise_variance) or noise_variance < 0):
        raise QgpError(f"noise_variance must be finite and ≥ 0, got {noise_variance}")
    fitted = None
    source: NoiseSource = "fixed"
    if fit:
        if rng is None:
            raise QgpError("fit=True needs rng=np.random.Generator for reproducible restarts")
        yc = y - (np.mean(y) if center else 0.0)
        result = fit_ml2(X, yc, kernel, noise_variance, rng=rng, center=False)
        kernel = result.kernel
        fitted = float(result.noise_variance)
        if noise_variance is None:
            noise_variance, source = fitted, "fitted"
    if target_condition is not None:
        if X.shape[0] > EXACT_EIGEN_LIMIT:
            raise QgpError(
                f"target_condition needs K's exact spectrum, skipped above n = {EXACT_EIGEN_LIMIT}; set a noise variance"
            )
        eig = np.linalg.eigvalsh(kernel(X))
        noise_variance = noise_for_condition(eig[0], eig[-1], target_condition)
        source = "target_condition"
    noise_variance = float(noise_variance)
    _check_duplicates(X, noise_variance)
    A = regularise(kernel(X), noise_variance)
    diag = diagnose(A, noise_variance)
    if diag.eigenvalue_min is not None and diag.eigenvalue_min <= 0:
        raise QgpError(
            f"A = K + σ²I is not positive definite (smallest eigenvalue {diag.eigenvalue_min:.3g}); "
            "raise the noise variance or remove duplicate inputs"
        )
    return Problem(
        X=X,
        y=y,
        X_test=X_test,
        y_test=y_test,
        kernel=kernel,
        noise_variance=noise_variance,
        noise_source=source,
        fitted_noise_variance=fitted,
        center=center,
        diagnostics=diag,
        A=A,
        inputs=inputs or tuple(f"x{i}" for i in range(X.shape[1])),
        target=target,
        labels=tuple(dict(labels).items()),
    )


def problem_from_config(cfg: Config, *, dataset: Dataset | None = None) -> Problem:
    """The problem a config describes; the fit (if any) is seeded from ``[readout] seed``."""
    ds = dataset if dataset is not None else load_dataset(cfg.data)
    kernel = make_kernel(cfg.kernel, ds.X_train.shape[1])
    rng = np.random.default_rng(cfg.readout.seed) if cfg.kernel.fit else None
    return build_problem(
        ds.X_train,
        ds.y_train,
        kernel,
        noise_variance=cfg.noise.variance,
        target_condition=cfg.noise.target_condition,
        X_test=ds.X_test,
        y_test=ds.y_test,
        center=cfg.data.center,
        fit=cfg.kernel.fit,
        rng=rng,
        inputs=ds.inputs,
        target=ds.target,
        labels=cfg.data.labels,
    )

