"""Growth laws c·n^β fitted to the audit, with a confidence interval on the exponent.

Least squares on (log n, log value), the usual way to read a power law off a log-log plot; the
interval on β is the Student-t one of ordinary least squares (any regression text, e.g. Draper &
Smith, Applied Regression Analysis, 3rd ed., §1.4), which assumes independent scatter about the
line — nested subsets make neighbouring sizes correlated, so read it as a guide, not a guarantee.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import scipy.stats

from qgp.errors import QgpError

__all__ = ["GrowthFit", "fit_growth", "growth_value"]


@dataclass(frozen=True)
class GrowthFit:
    """value ≈ prefactor·n^exponent over n_min … n_max, with a ``confidence`` interval on the exponent."""

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
        """Plain JSON-ready values."""
        return {k: (v.item() if isinstance(v, np.generic) else v) for k, v in asdict(self).items()}


def fit_growth(n, values, *, quantity: str, confidence: float = 0.95, n_min: int | None = None) -> GrowthFit:
    """Fit value = c·n^β by least squares on logs.

    Parameters
    ----------
    n, values : arrays, shape (k,)
        Sizes and the measured quantity; non-finite or non-positive values (and n < ``n_min``) are left out.
    quantity : str
        Name recorded in the fit.
    confidence : float
        Level of the two-sided interval on β.
    n_min : int, optional
        Fit only sizes from here on (the asymptotic tail).

    Returns
    -------
    GrowthFit
        `QgpError` if fewer than 3 points remain.
    """
    n = np.asarray(n, dtype=float)
    v = np.asarray(values, dtype=float)
    keep = np.isfinite(v) & (v > 0) & np.isfinite(n) & (n > 0)
    if n_min is not None:
        keep &= n >= n_min
    if keep.sum() < 3:
        raise QgpError(f"{quantity}: {int(keep.sum())} usable size(s), a growth fit needs at least 3")
    x, z = np.log(n[keep]), np.log(v[keep])
    k = x.size
    xm = x.mean()
    sxx = float(np.sum((x - xm) ** 2))
    beta = float(np.sum((x - xm) * (z - z.mean())) / sxx)
    intercept = float(z.mean() - beta * xm)
    resid = z - (intercept + beta * x)
    se = float(np.sqrt(np.sum(resid**2) / (k - 2) / sxx)) if k > 2 else float("nan")
    t = float(scipy.stats.t.ppf(0.5 + confidence / 2, k - 2))
    return GrowthFit(
        quantity=quantity,
        exponent=beta,
        ci_low=beta - t * se,
        ci_high=beta + t * se,
        prefactor=float(np.exp(intercept)),
        confidence=float(confidence),
        n_points=int(k),
        n_min=int(n[keep].min()),
        n_max=int(n[keep].max()),
    )


def growth_value(fit: GrowthFit, n) -> np.ndarray:
    """prefactor·n^exponent at each n (any shape)."""
    return fit.prefactor * np.asarray(n, dtype=float) ** fit.exponent
