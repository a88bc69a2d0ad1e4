"""Growth laws value ≈ c·n^p fitted by least squares on log–log axes.

Lowe, Kim & Bondesan (2025, arXiv:2505.22502) prove that κ, the sparsity and the Frobenius norm of
a kernel matrix grow at least linearly in n; the exponent p fitted here to the conditioning audit's
rows (`qgp.scale.conditioning`) is the measured counterpart. The fit is ordinary least squares of
log value on log n, so p is the slope and c = exp(intercept); the confidence interval on p is the
Student-t interval of an OLS slope with N − 2 degrees of freedom (any regression text, e.g. Seber &
Lee 2003, §5.2), which assumes independent, normal residuals on the log scale — nested subsets
violate independence, so read it as a measure of scatter around the power law, not a guarantee.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
import scipy.stats

from qgp.errors import QgpError

__all__ = ["GrowthFit", "fit_growth", "growth_value"]

# OLS needs two points for a line and one more for a residual variance (N − 2 ≥ 1).
_MIN_POINTS = 3


@dataclass(frozen=True)
class GrowthFit:
    """value ≈ ``prefactor``·n^``exponent`` with a ``confidence`` interval [``ci_low``, ``ci_high``]
    on the exponent, from ``n_points`` points with ``n_min`` ≤ n ≤ ``n_max``."""

    quantity: str
    exponent: float
    ci_low: float
    ci_high: float
    prefactor: float
    confidence: float
    n_points: int
    n_min: int
    n_max: int

    def as_dict(self) -> dict:
        """Plain JSON/CSV-ready values (str, float, int)."""
        return asdict(self)


def _as_vector(values, name: str) -> np.ndarray:
    try:
        out = np.asarray(values, dtype=float)  # None (a value the audit did not compute) → nan
    except (TypeError, ValueError):
        raise QgpError(f"{name} must be numbers (None for missing values); got {values!r}") from None
    if out.ndim != 1:
        raise QgpError(f"{name} must be a 1-D sequence, got shape {out.shape}; pass one value per n")
    return out


def _fit_points(n, values, n_min) -> tuple[np.ndarray, np.ndarray]:
    """(log n, log value) of the usable points: both finite and positive, n ≥ n_min."""
    n = _as_vector(n, "n")
    values = _as_vector(values, "values")
    if n.shape != values.shape:
        raise QgpError(f"n has {n.size} entries but values has {values.size}; give one value per n")
    keep = np.isfinite(n) & (n > 0) & np.isfinite(values) & (values > 0)
    if n_min is not None:
        keep &= n >= n_min
    return n[keep], values[keep]


def fit_growth(n, values, *, quantity: str, confidence: float = 0.95, n_min: int | None = None) -> GrowthFit:
    """Fit value ≈ c·n^p by OLS on (log n, log value), with a Student-t interval on p.

    Parameters
    ----------
    n : array_like, shape (N,)
        Problem sizes.
    values : array_like, shape (N,)
        The measured quantity at each n; None, nan, inf and values ≤ 0 are left out (a power law
        has no logarithm there), as are points with n < ``n_min``.
    quantity : str
        Name of the quantity, carried into the result.
    confidence : float
        Two-sided confidence level of the interval on the exponent, in (0, 1).
    n_min : int, optional
        Smallest n to use (small n are often pre-asymptotic).

    Returns
    -------
    GrowthFit

    Raises
    ------
    QgpError
        Fewer than 3 usable points, all at one n, or a confidence outside (0, 1).
    """
    if not (isinstance(confidence, (int, float)) and 0.0 < confidence < 1.0):
        raise QgpError(f"confidence must be a number in (0, 1), got {confidence!r}; e.g. 0.95")
    n_used, v_used = _fit_points(n, values, n_min)
    if n_used.size < _MIN_POINTS:
        where = "" if n_min is None else f" with n ≥ {n_min}"
        raise QgpError(
            f"a growth fit of {quantity} needs at least {_MIN_POINTS} points{where} and a finite positive value, "
            f"got {n_used.size}; audit more sizes" + ("" if n_min is None else " or lower n_min")
        )
    x, z = np.log(n_used), np.log(v_used)
    x_mean = x.mean()
    sxx = float(np.sum((x - x_mean) ** 2))
    if sxx == 0.0:
        raise QgpError(f"every usable point of {quantity} is at n = {n_used[0]:g}; a growth fit needs several sizes")
    slope = float(np.sum((x - x_mean) * (z - z.mean())) / sxx)
    intercept = float(z.mean() - slope * x_mean)
    dof = n_used.size - 2
    residual_variance = float(np.sum((z - intercept - slope * x) ** 2)) / dof
    half = float(scipy.stats.t.ppf(0.5 + confidence / 2.0, dof)) * math.sqrt(residual_variance / sxx)
    return GrowthFit(
        quantity=quantity,
        exponent=slope,
        ci_low=slope - half,
        ci_high=slope + half,
        prefactor=math.exp(intercept),
        confidence=float(confidence),
        n_points=int(n_used.size),
        n_min=int(n_used.min()),
        n_max=int(n_used.max()),
    )


def growth_value(fit: GrowthFit, n) -> np.ndarray:
    """The fitted law c·n^p at ``n`` (scalar or array; returns an array of the same shape)."""
    return fit.prefactor * np.power(np.asarray(n, dtype=float), fit.exponent)
