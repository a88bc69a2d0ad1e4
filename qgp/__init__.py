"""qgp: simulated quantum-assisted Gaussian-process regression, checked against the exact GP.

Pipeline: data → kernel matrix (``qgp.classical.kernels``, ``qgp.classical.system``, ``qgp.classical.problem``) → circuits
(``qgp.circuits.encoding``, ``qgp.circuits.phase_estimation``, ``qgp.circuits.inversion``) → simulation → estimates →
comparison with the exact GP (``qgp.classical.gp``) → stored results → figures.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("qgp")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.1.0+source"

from qgp.errors import QgpError
from qgp.readout.estimator import QuantumGPRegressor
from qgp.readout.inference import InferenceResult, infer
from qgp.classical.kernels import RBF, Matern32, Matern52, Tapered, Wendland
from qgp.classical.problem import Problem, build_problem
from qgp.settings import CircuitSettings, ReadoutSettings

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
    "QuantumGPRegressor",
]
