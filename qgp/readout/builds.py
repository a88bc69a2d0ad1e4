"""Each distinct circuit built once per process: the inversion pair, the phase-estimation body.

Keyed by the matrix's bytes (SHA-256), the circuit settings, the rotation, the bounds and the form,
so a sweep that revisits a matrix with another seed, shot count or test set reuses the circuits and,
for the amortised strategy, the operators B and M (no simulation at all).
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from dataclasses import replace

import numpy as np
from qiskit import QuantumCircuit

from qgp.circuits.algorithms import algorithm_of
from qgp.circuits.inversion import InversionCircuit, build_inversion
from qgp.classical.system import matrix_key
from qgp.circuits.phase_estimation import phase_estimation_circuit, phase_oracle
from qgp.settings import CircuitSettings

__all__ = ["SIMULATED_FORM", "OPERATORS", "LOG_DETERMINANT", "clear_caches", "cached", "inversion_key", "cached_pair", "qpe_body", "with_preparation"]

#: The circuit form every simulation uses (fused controlled powers, diagonal rotation); the gate
#: form is the same operator (tests/circuits/test_inversion.py) and is what resources and exports count.
SIMULATED_FORM = "simulation"

# Small: a few large LCU walks would otherwise hold hundreds of MB.
_CACHE_SIZE = 8
_CACHE_LOCK = threading.Lock()
_INVERSIONS: OrderedDict = OrderedDict()
OPERATORS: OrderedDict = OrderedDict()
#: The log-determinant read-outs (qgp.readout.likelihood), keyed like the operators.
LOG_DETERMINANT: OrderedDict = OrderedDict()
_QPE_BODIES: OrderedDict = OrderedDict()


def clear_caches() -> None:
    """Forget every cached circuit and operator (benchmarks time cold runs with this)."""
    with _CACHE_LOCK:
        _INVERSIONS.clear()
        OPERATORS.clear()
        LOG_DETERMINANT.clear()
        _QPE_BODIES.clear()


def cached(cache: OrderedDict, key, make):
    with _CACHE_LOCK:
        if key in cache:
            cache.move_to_end(key)
            return cache[key]
    value = make()  # outside the lock: builds can take seconds
    with _CACHE_LOCK:
        cache[key] = value
        while len(cache) > _CACHE_SIZE:
            cache.popitem(last=False)
    return value


def inversion_key(A, circuit: CircuitSettings, rotation: str, bounds, form: str = SIMULATED_FORM) -> tuple:
    return (matrix_key(A), circuit, rotation, tuple(float(b) for b in bounds), form)


def cached_pair(
    A, circuit: CircuitSettings, bounds, form: str = SIMULATED_FORM
) -> tuple[InversionCircuit, InversionCircuit]:
    """The ``inverse`` and ``inverse_sqrt`` circuits, built once around one shared phase oracle, the
    second reusing the first's phase estimation (``form="gate"``: the gate form a device would
    run, which gate noise acts on)."""

    def make():
        inv = build_inversion(A, circuit, "inverse", bounds, form=form)
        inv_sqrt = build_inversion(A, circuit, "inverse_sqrt", bounds, form=form, prefix=inv)
        return inv, inv_sqrt

    return cached(_INVERSIONS, inversion_key(A, circuit, "pair", bounds, form), make)


def qpe_body(A, circuit: CircuitSettings, bounds, inv: InversionCircuit, form: str = SIMULATED_FORM):
    """The phase-estimation body of ``inv`` (same oracle and block encoding, in ``inv``'s
    ``form``), for per-point circuits; None for a method without phase estimation (its Hadamard
    test is built from ``inv``)."""
    if not algorithm_of(circuit).uses_clock:
        return None

    def make():
        oracle = inv.oracle
        if oracle is None:
            oracle = phase_oracle(A, circuit, bounds[1], form=form, block_encoding=inv.block_encoding)
        return phase_estimation_circuit(oracle)

    return cached(_QPE_BODIES, inversion_key(A, circuit, "qpe", bounds, form), make)


def with_preparation(inv: InversionCircuit, vector: np.ndarray) -> InversionCircuit:
    """``inv`` with the amplitude encoding of ``vector`` in front: what ``build_inversion(…,
    prepare=vector)`` builds, without building the rest again."""
    from qgp.circuits.encoding import amplitude_encoding

    qc = QuantumCircuit(*inv.circuit.qregs, name=inv.circuit.name)
    qc.compose(amplitude_encoding(vector, native=True), qubits=qc.qregs[0][:], inplace=True, copy=False)
    qc.compose(inv.circuit, inplace=True, copy=False)
    return replace(inv, circuit=qc)


