"""What a result was computed with: package versions and the platform (a shared piece, like `qgp.errors`).

`versions` goes into `summary.json` and the sweep store; `qiskit_versions` and `platform_info` into
exported `resources.json` and the circuit catalogue, where dense-unitary synthesis makes one-qubit gate
counts depend on the platform's floating point.
"""

from __future__ import annotations

import os
import platform
from importlib.metadata import PackageNotFoundError, version

import numpy as np

__all__ = ["versions", "qiskit_versions", "platform_info"]


def versions() -> dict[str, str]:
    """Python and the installed versions of qgp and its dependencies (``"not installed"`` if absent)."""
    out = {"python": platform.python_version()}
    for pkg in ("qgp", "qiskit", "qiskit-aer", "numpy", "scipy", "matplotlib"):
        try:
            out[pkg] = version(pkg)
        except PackageNotFoundError:
            out[pkg] = "not installed"
    return out


def qiskit_versions() -> dict[str, str | None]:
    """The versions that decide synthesis: ``qiskit``, ``qiskit_aer``, ``numpy``, ``scipy``."""
    import qiskit
    import scipy

    try:
        import qiskit_aer

        aer = qiskit_aer.__version__
    except ImportError:  # pragma: no cover - aer is a dependency
        aer = None
    return {"qiskit": qiskit.__version__, "qiskit_aer": aer, "numpy": np.__version__, "scipy": scipy.__version__}


def _cpu_model() -> str | None:
    name = platform.processor() or None
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith(("model name", "Model", "Hardware")):
                    return line.split(":", 1)[1].strip() or name
    except OSError:
        pass
    return name


def _blas_build(config: dict | None) -> dict | None:
    try:
        blas = config["Build Dependencies"]["blas"]
    except (KeyError, TypeError):
        return None
    return {k: blas.get(k) for k in ("name", "version", "openblas configuration") if blas.get(k) is not None}


def platform_info() -> dict:
    """Where the gates were synthesised: machine, CPU, BLAS, OPENBLAS_CORETYPE.

    Dense-unitary synthesis (and the matrices it starts from) depends on the floating point of the
    BLAS/LAPACK kernels in use, so one-qubit gate counts differ between machines (see
    circuits/README.md). Nothing is installed for this: numpy's and scipy's ``show_config``
    give the BLAS they were built with; the kernel OpenBLAS chose at run time is read with
    threadpoolctl only when it is installed.

    Returns
    -------
    dict
        ``machine``, ``system``, ``processor``, ``python``, ``numpy_blas``, ``scipy_blas``,
        ``blas_runtime`` (None without threadpoolctl) and ``OPENBLAS_CORETYPE`` (None when unset).
    """
    import scipy

    def config(mod):
        try:
            return mod.show_config(mode="dicts")
        except Exception:  # older releases print instead of returning a dict
            return None

    runtime = None
    try:
        from threadpoolctl import threadpool_info

        runtime = [
            {k: d.get(k) for k in ("prefix", "internal_api", "version", "architecture", "num_threads")}
            for d in threadpool_info()
            if d.get("user_api") == "blas"
        ]
    except Exception:  # not installed (it is optional) or failed to inspect the libraries
        runtime = None
    return {
        "machine": platform.machine(),
        "system": platform.system(),
        "processor": _cpu_model(),
        "python": platform.python_version(),
        "numpy_blas": _blas_build(config(np)),
        "scipy_blas": _blas_build(config(scipy)),
        "blas_runtime": runtime,
        "OPENBLAS_CORETYPE": os.environ.get("OPENBLAS_CORETYPE"),
    }


