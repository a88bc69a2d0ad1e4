"""What a config implies before any circuit is built: conditioning, sparsity, qubits, memory."""

from __future__ import annotations

import math

from .problem import Problem
from .settings import CircuitSettings
from .simulate import statevector_bytes

__all__ = ["qubit_counts", "inspect_problem", "SIMULATION_CAVEAT"]

SIMULATION_CAVEAT = (
    "These are statevector simulations, not hardware runs: simulated accuracy says nothing by itself "
    "about a speed-up on a real device, where state preparation, read-out and noise carry their own "
    "costs; and the condition number and sparsity of kernel matrices tend to grow with n."
)


def _block_qubits(problem: Problem, settings: CircuitSettings) -> int:
    if settings.evolution != "walk":
        return 0
    if settings.encoding == "dilation":
        return 1
    from .encoding import pauli_decomposition

    terms = len(pauli_decomposition(problem.A_padded))
    return max(1, math.ceil(math.log2(terms)))


def qubit_counts(problem: Problem, settings: CircuitSettings) -> dict[str, int]:
    """Qubits per register of the inversion circuit and in total."""
    counts = {
        "system": problem.system_qubits,
        "clock": settings.clock_qubits,
        "flag": 1,
        "block": _block_qubits(problem, settings),
    }
    counts["total"] = sum(counts.values())
    return counts


def inspect_problem(problem: Problem, settings: CircuitSettings) -> dict:
    """A JSON-ready description of the regularised system and the circuit it implies."""
    d = problem.diagnostics
    q = qubit_counts(problem, settings)
    return {
        "n_train": problem.n_train,
        "n_test": problem.n_test,
        "input_dimension": problem.X.shape[1],
        "padded_size": problem.padded_size,
        "kernel": problem.kernel.describe(),
        "noise_variance": problem.noise_variance,
        "noise_source": problem.noise_source,
        "fitted_noise_variance": problem.fitted_noise_variance,
        "center": problem.center,
        "prior_mean": problem.y_offset,
        "eigenvalue_min": d.eigenvalue_min,
        "eigenvalue_max": d.eigenvalue_max,
        "eigenvalue_bound_lower": d.bound_lower,
        "eigenvalue_bound_upper": d.bound_upper,
        "condition_number": d.condition_number,
        "condition_number_bound": d.condition_number_bound,
        "sparsity": d.sparsity,
        "frobenius_norm": d.frobenius_norm,
        "spectral_norm": d.spectral_norm,
        "qubits": q,
        "statevector_bytes": statevector_bytes(q["total"]),
        "circuit": {
            "clock_qubits": settings.clock_qubits,
            "evolution": settings.evolution,
            "encoding": settings.encoding if settings.evolution == "walk" else None,
        },
        "caveat": SIMULATION_CAVEAT,
    }
