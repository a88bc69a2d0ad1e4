"""qgp: simulated quantum-assisted Gaussian-process regression, checked against the exact GP.

Pipeline: data → kernel matrix (``qgp.kernels``, ``qgp.system``, ``qgp.problem``) → circuits
(``qgp.encoding``, ``qgp.phase_estimation``, ``qgp.inversion``) → simulation → estimates →
comparison with the exact GP (``qgp.gp``) → stored results → figures.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("qgp")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.1.0+source"

from .errors import QgpError
from .inference import InferenceResult, infer
from .kernels import RBF, Matern32, Matern52, Tapered, Wendland
from .problem import Problem, build_problem
from .settings import CircuitSettings, ReadoutSettings

__all__ = [
    "__version__",
    "QgpError",
    "RBF",
    "Matern32",
    "Matern52",
    "Wendland",
    "Tapered",
    "Problem",
    "build_problem",
    "CircuitSettings",
    "ReadoutSettings",
    "InferenceResult",
    "infer",
]
