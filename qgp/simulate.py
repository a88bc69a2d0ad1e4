"""Run circuits on qiskit-aer's CPU statevector simulator, after a memory check.

A statevector of q qubits takes 16·2^q bytes (complex128); ``require_memory`` refuses a run that
cannot fit under the cap (default: half of the available memory) before anything is allocated.
Circuits are transpiled at optimisation level 0: higher levels cost several times more and
simulated no faster in trials here.
"""

from __future__ import annotations

import os
from functools import lru_cache

import numpy as np
from qiskit import QuantumCircuit, transpile

from .errors import QgpError

__all__ = [
    "available_memory_bytes",
    "default_memory_cap",
    "require_memory",
    "statevector_bytes",
    "simulator",
    "set_threads",
    "cpu_count",
    "run_statevector",
    "run_statevectors",
    "run_counts",
]


def statevector_bytes(total_qubits: int) -> int:
    """Memory of a complex128 statevector: 16·2^q bytes."""
    return 16 * (1 << int(total_qubits))


def available_memory_bytes() -> int:
    """MemAvailable from /proc/meminfo (Linux), else total physical memory."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")


def default_memory_cap() -> int:
    """Half of the memory available now: room for the simulator's own copies."""
    return available_memory_bytes() // 2


def require_memory(n_bytes: int, what: str, cap: int | None = None) -> None:
    """Raise before allocating when ``n_bytes`` exceeds the cap."""
    cap = default_memory_cap() if cap is None else int(cap)
    if n_bytes > cap:
        raise QgpError(
            f"{what} needs {n_bytes / 2**30:.3g} GiB, above the memory cap of {cap / 2**30:.3g} GiB; "
            "use fewer clock qubits or training points, or raise [readout] memory_cap_gib if the machine has room"
        )


_THREADS: int | None = None


def cpu_count() -> int:
    """Cores this process may run on."""
    return max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1)


def set_threads(n: int | None) -> None:
    """Cap the simulator's threads (sweep workers pin this so workers × threads ≤ cores)."""
    global _THREADS
    _THREADS = None if n is None else max(1, int(n))


def simulator():
    """A statevector AerSimulator with gate fusion on and its threads set to the cores (or the cap)."""
    return _simulator(_THREADS or cpu_count())


@lru_cache(maxsize=4)
def _simulator(threads: int):
    from qiskit_aer import AerSimulator

    return AerSimulator(method="statevector", max_parallel_threads=threads, fusion_enable=True)


def run_statevectors(circuits: list[QuantumCircuit], *, cap: int | None = None) -> list[np.ndarray]:
    """Final statevectors of measurement-free circuits, all in one simulator job."""
    if not circuits:
        return []
    for c in circuits:
        require_memory(statevector_bytes(c.num_qubits), f"simulating '{c.name}' on {c.num_qubits} qubits", cap)
    sim = simulator()
    prepared = []
    for c in circuits:
        c = c.copy()
        c.save_statevector()
        prepared.append(c)
    compiled = transpile(prepared, sim, optimization_level=0)
    result = sim.run(compiled).result()
    if not result.success:
        raise QgpError(f"the simulator failed: {result.status}")
    return [np.asarray(result.get_statevector(i)) for i in range(len(compiled))]


def run_statevector(circuit: QuantumCircuit, *, cap: int | None = None) -> np.ndarray:
    """Final statevector of one measurement-free circuit."""
    return run_statevectors([circuit], cap=cap)[0]


def run_counts(circuits: list[QuantumCircuit], shots: int, seed: int, *, cap: int | None = None) -> list[dict[str, int]]:
    """Measurement counts with a fixed simulator seed (reproducible), all in one job."""
    for c in circuits:
        require_memory(statevector_bytes(c.num_qubits), f"simulating '{c.name}' on {c.num_qubits} qubits", cap)
    sim = simulator()
    compiled = transpile(circuits, sim, optimization_level=0)
    result = sim.run(compiled, shots=shots, seed_simulator=seed).result()
    if not result.success:
        raise QgpError(f"the simulator failed: {result.status}")
    return [result.get_counts(i) for i in range(len(compiled))]
