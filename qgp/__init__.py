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

__all__ = ["__version__", "QgpError"]
