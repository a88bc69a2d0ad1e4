"""Any scikit-learn kernel object as a qgp kernel: K is evaluated by scikit-learn itself.

Sums, products, ``ExpSineSquared`` for seasonal data, ``WhiteKernel``, ``ConstantKernel`` — whatever
``sklearn.gaussian_process.kernels`` composes — gives K = kernel(X1, X2) and k(x, x) = kernel.diag(X)
exactly as scikit-learn computes them. scikit-learn is an optional extra (``pip install 'qgp[sklearn]'``);
this module imports nothing of it. Hyperparameters are the scikit-learn kernel's own: fit them with
scikit-learn's ``GaussianProcessRegressor`` (its ``kernel_``) and pass the fitted kernel; qgp's ML-II
(`qgp.classical.gp.fit_ml2`) works on qgp's kernels only.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from qgp.classical.kernels import Kernel, _as_inputs
from qgp.errors import QgpError

__all__ = ["ScikitLearnKernel", "as_kernel"]


@dataclass(frozen=True)
class ScikitLearnKernel(Kernel):
    """A scikit-learn kernel object evaluated through scikit-learn.

    ``signal_variance`` and ``lengthscale`` are placeholders the base class asks for (1.0): nothing here
    reads them — the diagonal comes from ``kernel.diag`` and A's padding from A itself.
    """

    signal_variance: float = 1.0
    lengthscale: float = 1.0
    kernel: object = field(default=None, compare=False)

    family = "scikit-learn"

    def __post_init__(self) -> None:
        super().__post_init__()
        k = self.kernel
        if k is None or not (callable(k) and hasattr(k, "diag") and hasattr(k, "get_params")):
            raise QgpError(
                f"expected a scikit-learn kernel object (from sklearn.gaussian_process.kernels), got {type(k).__name__}; "
                "pass e.g. ConstantKernel() * RBF() or one of qgp's kernels"
            )

    def __call__(self, X1, X2=None) -> np.ndarray:
        X1 = _as_inputs(X1, "X1")
        X2 = None if X2 is None else _as_inputs(X2, "X2")
        return np.asarray(self.kernel(X1, X2), dtype=float)

    def diag(self, X) -> np.ndarray:
        return np.asarray(self.kernel.diag(_as_inputs(X)), dtype=float)

    @property
    def support_radius(self) -> float | None:
        return None

    def _pair_values(self, X1, X2, rows, cols):
        raise QgpError("a scikit-learn kernel has no finite support; its matrix is dense")

    @property
    def theta(self) -> np.ndarray:
        return np.asarray(self.kernel.theta, dtype=float)

    def with_theta(self, theta) -> Kernel:
        raise QgpError(
            "qgp's ML-II works on qgp's kernels; fit a scikit-learn kernel with scikit-learn's "
            "GaussianProcessRegressor and pass its fitted kernel_"
        )

    def theta_gradient(self, X) -> np.ndarray:
        return np.asarray(self.kernel(_as_inputs(X), eval_gradient=True)[1], dtype=float)

    def describe(self) -> dict:
        return {"family": self.family, "kernel": repr(self.kernel), "support": None, "taper": None, "smoothness": None}


def as_kernel(kernel) -> Kernel:
    """``kernel`` as a qgp `Kernel`: qgp's own unchanged, a scikit-learn kernel object wrapped."""
    if isinstance(kernel, Kernel):
        return kernel
    return ScikitLearnKernel(kernel=kernel)
