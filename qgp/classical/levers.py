"""The two levers on A = K + σ²I that quantum linear solvers rely on, and what they cost.

Conditioning: a larger noise variance σ² lowers κ = (λmax(K) + σ²)/(λmin(K) + σ²).
Sparsity: multiplying the kernel by a compactly supported Wendland taper of radius ρ
(covariance tapering, Furrer, Genton & Nychka 2006) caps the non-zeros per row.
Both change the GP itself; the ``*_cost`` functions report by how much.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from qgp.errors import QgpError
from qgp.classical.gp import condition, nlpd, rmse
from qgp.classical.kernels import Kernel, Tapered

__all__ = [
    "noise_for_condition",
    "taper_radius_for_sparsity",
    "LeverCost",
    "taper_cost",
    "noise_cost",
]


def noise_for_condition(eigenvalue_min: float, eigenvalue_max: float, target: float) -> float:
    """σ² with (λmax + σ²)/(λmin + σ²) = κ exactly: σ² = (λmax − κ·λmin)/(κ − 1).

    ``eigenvalue_min``/``eigenvalue_max`` are K's (not A's) extreme eigenvalues.
    """
    if not np.isfinite(target) or target <= 1:
        raise QgpError(f"[noise] target_condition must be a finite number > 1, got {target}")
    lmin = max(float(eigenvalue_min), 0.0)  # K is PSD; a tiny negative value is round-off
    lmax = float(eigenvalue_max)
    natural = lmax / lmin if lmin > 0 else np.inf
    if target >= natural:
        raise QgpError(
            f"[noise] target_condition = {target:g} is not below the kernel matrix's own condition "
            f"number {natural:.6g}; no non-negative noise variance reaches it. Choose a smaller target "
            "or set [noise] variance instead"
        )
    return (lmax - target * lmin) / (target - 1.0)


def taper_radius_for_sparsity(X: np.ndarray, target: int) -> tuple[float, int]:
    """Largest taper radius ρ whose matrix has at most ``target`` non-zeros in every row.

    Entry (i, j) of a φ_{3,1}-tapered matrix is non-zero iff ‖xᵢ − xⱼ‖ < ρ (φ(1) = 0), so row i
    has ≤ s non-zeros iff ρ ≤ dᵢ⁽ˢ⁺¹⁾, its distance to the (s+1)-th nearest point counting itself.
    The search over ρ is therefore exact: ρ = minᵢ dᵢ⁽ˢ⁺¹⁾. Returns (ρ, achieved sparsity).
    """
    X = np.asarray(X, dtype=float)
    n = X.shape[0]
    if not 1 <= target < n:
        raise QgpError(
            f"target sparsity {target} must be between 1 and n − 1 = {n - 1}; "
            "a sparsity of n needs no taper"
        )
    tree = cKDTree(X)
    dist, _ = tree.query(X, k=target + 1)
    radius = float(np.min(dist[:, target]))
    if radius <= 0:
        raise QgpError(
            f"duplicate inputs: some point has {target} others at distance 0, so no taper "
            f"radius reaches sparsity {target}; remove duplicates or choose a larger target"
        )
    # Entries at distance exactly ρ are zero in the taper, so count strictly closer points.
    counts = tree.query_ball_point(X, r=np.nextafter(radius, 0.0), return_length=True)
    achieved = int(np.max(counts))
    return radius, achieved


@dataclass(frozen=True)
class LeverCost:
    """GP accuracy with a lever applied against without it, on the same test points."""

    setting: float
    sparsity: int | None
    condition_number: float | None
    mean_max_abs_change: float
    variance_max_abs_change: float
    test_rmse: float | None
    test_nlpd: float | None
    reference_rmse: float | None
    reference_nlpd: float | None


def _cost(X, y, Xs, ys, kernel, noise, ref_kernel, ref_noise, setting, center) -> LeverCost:
    from qgp.classical.system import diagnose, regularise

    gp = condition(X, y, kernel, noise, center=center)
    ref = condition(X, y, ref_kernel, ref_noise, center=center)
    p, q = gp.predict(Xs), ref.predict(Xs)
    A = regularise(kernel(X), noise)
    diag = diagnose(A, noise)
    have_y = ys is not None
    return LeverCost(
        setting=float(setting),
        sparsity=diag.sparsity,
        condition_number=diag.condition_number,
        mean_max_abs_change=float(np.max(np.abs(p.mean - q.mean))),
        variance_max_abs_change=float(np.max(np.abs(p.variance_latent - q.variance_latent))),
        test_rmse=rmse(ys, p.mean) if have_y else None,
        test_nlpd=nlpd(ys, p.mean, p.variance_predictive) if have_y else None,
        reference_rmse=rmse(ys, q.mean) if have_y else None,
        reference_nlpd=nlpd(ys, q.mean, q.variance_predictive) if have_y else None,
    )


def taper_cost(X, y, Xs, ys, kernel: Kernel, noise_variance: float, radius: float, *, center=True) -> LeverCost:
    """Accuracy of the GP with ``kernel`` tapered at ``radius`` against the untapered GP."""
    return _cost(X, y, Xs, ys, Tapered(kernel, radius), noise_variance, kernel, noise_variance, radius, center)


def noise_cost(
    X, y, Xs, ys, kernel: Kernel, noise_variance: float, reference_noise: float, *, center=True
) -> LeverCost:
    """Accuracy of the GP at noise ``noise_variance`` against the GP at ``reference_noise``."""
    return _cost(X, y, Xs, ys, kernel, noise_variance, kernel, reference_noise, noise_variance, center)
