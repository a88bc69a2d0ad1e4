"""Run circuits on qiskit-aer's CPU statevector simulator, after a memory check.

A statevector of q qubits takes 16·2^q bytes (complex128); ``require_memory`` (qgp.memory, shared
by every stage and re-exported here) refuses a run that cannot fit under the cap (default: half of
the available memory — the least of MemAvailable, the cgroup's limit and ``ulimit -v``) before
anything is allocated. A job keeps every circuit's final
state (`job_bytes`); a state saved part-way is a copy beside the running one.
Circuits are transpiled at optimisation level 0 (higher levels cost several times more and
simulated no faster in trials here), through one pass manager per simulator built once: building
it from the backend's target cost ~0.3 s per call. Circuits made only of instructions Aer runs
natively (the simulation forms of qgp's circuits) skip transpiling altogether.

Statevector runs go to the engine the current `engine_scope` names: ``"aer"``; ``"numpy"``, the
structured engine of `qgp.readout.engine` (checked against Aer to 1e-12 on every method); or
``"auto"`` (the default): numpy where it applies every instruction, Aer otherwise. Shot counts
always come from Aer. `engines_used` lists what ran in the scope.
"""

from __future__ import annotations

import contextlib
import contextvars
import os
import time
from collections.abc import Callable, Iterator
from functools import lru_cache
from typing import Any, Literal

import numpy as np
from qiskit import QuantumCircuit
from qiskit.circuit import Gate

from qgp.errors import QgpError
from qgp.progress import Bar
from qgp.memory import (  # re-exported: the memory arithmetic moved to qgp.memory
    _status_bytes,  # noqa: F401  (tests read it from here)
    available_memory_bytes,
    default_memory_cap,
    require_memory,
    statevector_bytes,
)

__all__ = [
    "available_memory_bytes",
    "default_memory_cap",
    "require_memory",
    "statevector_bytes",
    "job_bytes",
    "simulator",
    "set_threads",
    "cpu_count",
    "run_statevector",
    "run_statevectors",
    "run_saved_statevectors",
    "run_counts",
    "is_native",
    "prepare_for_simulator",
    "Engine",
    "ENGINES",
    "engine_scope",
    "engines_used",
]

Engine = Literal["auto", "numpy", "aer"]
#: The engine choices (config ``[readout] engine``).
ENGINES: tuple[str, ...] = ("auto", "numpy", "aer")
_ENGINE: contextvars.ContextVar[tuple[str, list[str]]] = contextvars.ContextVar("qgp_engine", default=("auto", []))


@contextlib.contextmanager
def engine_scope(engine: Engine) -> Iterator[list[str]]:
    """Statevector runs inside use ``engine``; yields the list of engines that ran, in order."""
    if engine not in ENGINES:
        raise QgpError(f"engine must be one of {', '.join(ENGINES)}, got {engine!r}")
    from qgp.readout.engine import buffer_pool

    used: list[str] = []
    token = _ENGINE.set((engine, used))
    try:
        with buffer_pool():  # the numpy engine's work buffers live as long as the outermost scope
            yield used
    finally:
        _ENGINE.reset(token)


def engines_used(used: list[str]) -> str:
    """"numpy", "aer", "numpy+aer" (both ran) or "none" (nothing simulated)."""
    names = [e for e in ("numpy", "aer") if e in used]
    return "+".join(names) if names else "none"


def _use_numpy(circuits: list[QuantumCircuit], numpy_bytes: int, cap: int | None) -> bool:
    """Whether the numpy engine runs ``circuits``: always under "numpy" (refusing what it cannot
    apply), never under "aer"; under "auto" when it applies every instruction and its memory
    (``numpy_bytes``: the states plus two work buffers) fits under the cap — else Aer, whose
    memory the simulation plan and the guard count."""
    from qgp.readout.engine import SUPPORTED, supports

    engine, _ = _ENGINE.get()
    if engine == "aer":
        return False
    if engine == "numpy":
        for c in circuits:
            if not supports(c):
                bad = sorted({i.operation.name for i in c.data} - SUPPORTED)
                raise QgpError(
                    f"engine = 'numpy' does not apply {', '.join(bad)} in '{c.name}'; use engine = 'auto' or 'aer'"
                )
        return True
    cap = default_memory_cap() if cap is None else int(cap)
    return numpy_bytes <= cap and all(supports(c) for c in circuits)


def _log(engine: str) -> None:
    _ENGINE.get()[1].append(engine)

_THREADS: int | None = None


def cpu_count() -> int:
    """Cores this process may run on."""
    return max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1)


def set_threads(n: int | None) -> None:
    """Cap the simulator's threads (sweep workers pin this so workers × threads ≤ cores)."""
    global _THREADS
    _THREADS = None if n is None else max(1, int(n))


def _threads() -> int:
    return _THREADS or cpu_count()


def _engine_threads(qubits: int) -> int:
    """Threads of a numpy-engine run (FFT workers and BLAS): one below `PARALLEL_THRESHOLD_QUBITS`,
    where a pass takes ~1 ms and a second thread costs more than it gives (OpenBLAS's idle threads
    spin and take the core the FFT's second worker needs: the 17-qubit reference run measured 7.0 ms
    with two threads against 5.8 ms with one, idle machine); the cores (or the cap) from there on
    (a 20-qubit inversion: 38 ms with two against 49 ms with one)."""
    return _threads() if qubits >= PARALLEL_THRESHOLD_QUBITS else 1


_BLAS = None


@contextlib.contextmanager
def blas_threads(n: int):
    """BLAS limited to ``n`` threads inside (threadpoolctl; its controller is made once: ~12 µs a
    use, against ~0.3 ms for a fresh `threadpool_limits`)."""
    global _BLAS
    if _BLAS is None:
        from threadpoolctl import ThreadpoolController

        _BLAS = ThreadpoolController()
    with _BLAS.limit(limits=int(n), user_api="blas"):
        yield


def simulator():
    """A statevector AerSimulator with gate fusion on and its threads set to the cores (or the cap)."""
    return _simulator(_THREADS or cpu_count())


# Aer parallelises a statevector above this many qubits (its default is 14). Below ~20 qubits a
# gate is ~1 ms of work, and on a shared machine each OpenMP barrier can wait a scheduler slice for
# the busy core: trials here measured 2 threads 2–20× slower than 1 at 15–19 qubits, while from
# ~21 qubits the second core helps when it is free. Threads stay = cores (or the sweep's cap).
PARALLEL_THRESHOLD_QUBITS = 19


@lru_cache(maxsize=4)
def _simulator(threads: int):
    from qiskit_aer import AerSimulator

    return AerSimulator(
        method="statevector",
        max_parallel_threads=threads,
        fusion_enable=True,
        statevector_parallel_threshold=PARALLEL_THRESHOLD_QUBITS,
    )


@lru_cache(maxsize=4)
def _pass_manager(sim):
    from qiskit.transpiler import generate_preset_pass_manager

    return generate_preset_pass_manager(optimization_level=0, backend=sim)


@lru_cache(maxsize=4)
def _native_names(sim) -> frozenset[str]:
    return frozenset(sim.target.operation_names) | {"barrier", "measure"}


def is_native(circuit: QuantumCircuit, sim=None) -> bool:
    """Whether Aer can run ``circuit`` as it is (every instruction one it applies natively).

    A custom gate (a plain ``Gate`` with a definition, e.g. one read from an OpenQASM file) is
    never native, even when its name is one of Aer's: Aer would apply its own instruction of that
    name (a file's gate called ``unitary`` is not a matrix gate).
    """
    names = _native_names(sim or simulator())
    return all(inst.operation.name in names and type(inst.operation) is not Gate for inst in circuit.data)


def _unshadowed(circuit: QuantumCircuit, names: frozenset[str]) -> QuantumCircuit:
    """``circuit`` with every custom gate named like one of Aer's instructions renamed, at any
    depth of its definitions: the transpiler would otherwise keep it as that instruction (a file's
    gate called ``unitary`` reaches Aer as a matrix gate without a matrix)."""
    memo: dict[tuple[str, int], Gate] = {}

    def gate(op):
        if type(op) is not Gate or op.definition is None:
            return op
        key = (op.name, id(op.definition))
        if key not in memo:
            body = circ(op.definition)
            new = op
            if op.name in names or body is not op.definition:
                new = Gate(op.name + "_custom" if op.name in names else op.name, op.num_qubits, op.params, label=op.label)
                new.definition = body
            memo[key] = new
        return memo[key]

    def circ(qc: QuantumCircuit) -> QuantumCircuit:
        ops = [gate(inst.operation) for inst in qc.data]
        if all(new is inst.operation for new, inst in zip(ops, qc.data)):
            return qc
        out = qc.copy_empty_like()  # global phase included, and _append adds none
        for new, inst in zip(ops, qc.data):
            out._append(inst.replace(operation=new))
        return out

    return circ(circuit)


def prepare_for_simulator(circuits: list[QuantumCircuit], sim=None) -> list[QuantumCircuit]:
    """``circuits`` as Aer will run them: native ones unchanged, the rest transpiled (level 0)."""
    sim = sim or simulator()
    out = list(circuits)
    todo = [i for i, c in enumerate(out) if not is_native(c, sim)]
    if todo:
        names = _native_names(sim)
        done = _pass_manager(sim).run([_unshadowed(out[i], names) for i in todo])
        for i, c in zip(todo, done if isinstance(done, list) else [done]):
            out[i] = c
    return out


def _with_final_save(circuit: QuantumCircuit) -> QuantumCircuit:
    """``circuit`` followed by save_statevector, sharing its instructions: ``copy()`` would
    deep-copy every multiplexer's matrices (~1.5 s for a few hundred per-point circuits)."""
    from qiskit_aer.library import SaveStatevector

    out = circuit.copy_empty_like()
    out.global_phase = 0.0  # copy_empty_like kept the phase and compose adds it: count it once
    out.compose(circuit, inplace=True, copy=False)
    out.append(SaveStatevector(out.num_qubits), out.qubits, copy=False)
    return out


def job_bytes(qubits: list[int]) -> int:
    """Memory of one simulator job that returns each circuit's final statevector: Aer keeps every
    experiment's final state in the result (the last save of a circuit is moved there, not
    copied; the running state of the next experiment is allocated afresh). Measured here:
    4 circuits of 22 qubits in one job peaked at 4.01 statevectors of resident memory."""
    return sum(statevector_bytes(q) for q in qubits)


def _batches(circuits: list[QuantumCircuit], cap: int) -> list[list[int]]:
    """Consecutive groups of circuit indices whose `job_bytes` stay within ``cap`` (≥ 1 each)."""
    out: list[list[int]] = []
    total = 0
    for i, c in enumerate(circuits):
        b = statevector_bytes(c.num_qubits)
        if out and total + b <= cap:
            out[-1].append(i)
            total += b
        else:
            out.append([i])
            total = b
    return out


def run_statevectors(
    circuits: list[QuantumCircuit],
    *,
    cap: int | None = None,
    timings: dict | None = None,
    reduce: Callable[[int, np.ndarray], Any] | None = None,
    project: dict[int, int] | None = None,
) -> list:
    """Final statevectors of measurement-free circuits, all in one simulator job.

    ``reduce``, when given, is called as reduce(i, statevector of circuit i) as each job returns,
    and only its result is kept: the circuits then run in as many jobs as the memory cap requires (each job holds its
    circuits' final states, `job_bytes`), so memory stays bounded however many circuits there
    are. Without it every state is returned, from one job whose whole size is checked.

    ``timings``, when given, accumulates seconds under "transpile" (preparing the circuits for
    Aer) and "simulate" (the jobs themselves, results included).

    ``project`` (qubit → 0/1, with ``reduce``): ``reduce`` gets only the amplitudes with those
    qubits at those values (`qgp.readout.engine.project_statevector`), whichever engine ran; the
    numpy engine then skips computing the rest of a closing one-qubit layer.
    """
    if project is not None and reduce is None:
        raise QgpError("project needs reduce: the projected amplitudes are handed to it")
    if not circuits:
        return []
    cap = default_memory_cap() if cap is None else int(cap)
    for c in circuits:
        require_memory(statevector_bytes(c.num_qubits), f"simulating '{c.name}' on {c.num_qubits} qubits", cap)
    if reduce is None:
        if len(circuits) > 1:
            require_memory(
                job_bytes([c.num_qubits for c in circuits]),
                f"simulating {len(circuits)} circuits in one job (every final state kept)",
                cap,
            )
        groups = [list(range(len(circuits)))]
    else:
        groups = _batches(circuits, cap)
    if _use_numpy(circuits, _numpy_bytes(circuits, reduce), cap):
        return _numpy_statevectors(circuits, cap, timings, reduce, project)
    if project is not None:
        from qgp.readout.engine import project_statevector

        full = reduce
        reduce = lambda i, sv: full(i, project_statevector(sv, project))  # noqa: E731
    sim = simulator()
    out: list = []
    _log("aer")
    with Bar(len(circuits), "simulating", unit="circuit") as meter:
        for group in groups:
            t0 = time.perf_counter()
            compiled = [_with_final_save(c) for c in prepare_for_simulator([circuits[i] for i in group], sim)]
            t1 = time.perf_counter()
            result = sim.run(compiled).result()
            if not result.success:
                raise QgpError(f"the simulator failed: {result.status}")
            for i, index in enumerate(group):
                sv = np.asarray(result.get_statevector(i))
                out.append(sv if reduce is None else reduce(index, sv))
            del result, sv
            meter.update(len(group))
            if timings is not None:
                timings["transpile"] = timings.get("transpile", 0.0) + (t1 - t0)
                timings["simulate"] = timings.get("simulate", 0.0) + (time.perf_counter() - t1)
    return out


def run_saved_statevectors(
    circuit: QuantumCircuit,
    labels: list[str],
    *,
    cap: int | None = None,
    timings: dict | None = None,
    project: dict[int, int] | None = None,
    saved_project: dict[int, int] | None = None,
) -> list[np.ndarray]:
    """The statevectors ``circuit`` saves under ``labels`` (its own ``save_statevector(label=…)``
    instructions: states part-way through one run), in one simulator job. ``timings`` as in
    `run_statevectors`; memory is checked for one statevector per label.

    ``project`` (qubit → 0/1): the last label must be the circuit's final save; for it only the
    amplitudes with those qubits at those values are returned (`qgp.readout.engine.project_statevector`
    order), whichever engine ran — the numpy engine then never writes the full final state out,
    and contracts a closing one-qubit layer on projected qubits with the wanted rows.
    ``saved_project`` (qubit → 0/1): the same for every label but the last (states saved part-way
    through; the last label must then be the circuit's final save); the numpy engine then copies
    only those amplitudes out."""
    n = circuit.num_qubits
    require_memory(
        len(labels) * statevector_bytes(n), f"simulating '{circuit.name}' on {n} qubits ({len(labels)} saved states)", cap
    )
    if _use_numpy([circuit], (len(labels) + 2) * statevector_bytes(n), cap):
        from qgp.readout.engine import simulate

        require_memory(
            (len(labels) + 2) * statevector_bytes(n),
            f"simulating '{circuit.name}' on {n} qubits with the numpy engine ({len(labels)} saved states, two work buffers)",
            cap,
        )
        _log("numpy")
        t0 = time.perf_counter()
        workers = _engine_threads(n)
        with blas_threads(workers):
            if project is None and not saved_project:
                states = simulate(circuit, labels=labels, workers=workers)
            else:
                states = simulate(
                    circuit,
                    labels=labels[:-1],
                    workers=workers,
                    reduce=np.copy if project is not None else None,
                    project=project,
                    saved_project=saved_project,
                )
                states[labels[-1]] = states["final"]
        if timings is not None:
            timings["simulate"] = timings.get("simulate", 0.0) + (time.perf_counter() - t0)
        return [states[label] for label in labels]
    _log("aer")
    t0 = time.perf_counter()
    sim = simulator()
    [compiled] = prepare_for_simulator([circuit], sim)
    t1 = time.perf_counter()
    result = sim.run(compiled).result()
    if not result.success:
        raise QgpError(f"the simulator failed: {result.status}")
    data = result.data(0)
    out = [np.asarray(data[label]) for label in labels]
    from qgp.readout.engine import project_statevector

    if saved_project:
        out[:-1] = [project_statevector(sv, saved_project) for sv in out[:-1]]
    if project is not None:
        out[-1] = project_statevector(out[-1], project)
    if timings is not None:
        timings["transpile"] = timings.get("transpile", 0.0) + (t1 - t0)
        timings["simulate"] = timings.get("simulate", 0.0) + (time.perf_counter() - t1)
    return out


def _numpy_bytes(circuits, reduce) -> int:
    """Memory of `_numpy_statevectors`: two work buffers of the widest circuit, and every final
    state unless reduced."""
    widest = max(c.num_qubits for c in circuits)
    kept = 0 if reduce is not None else sum(statevector_bytes(c.num_qubits) for c in circuits)
    return 2 * statevector_bytes(widest) + kept


def _numpy_statevectors(circuits, cap: int, timings: dict | None, reduce, project=None) -> list:
    """`run_statevectors` on the numpy engine: one circuit at a time, two work buffers beside
    the state (reused between circuits); with ``reduce`` the final state is never copied."""
    from qgp.readout.engine import simulate

    widest = max(c.num_qubits for c in circuits)
    require_memory(
        _numpy_bytes(circuits, reduce),
        f"simulating {len(circuits)} circuit(s) of up to {widest} qubits with the numpy engine (two work buffers"
        + ("" if reduce is not None else ", every final state kept") + ")",
        cap,
    )
    _log("numpy")
    out = []
    t0 = time.perf_counter()
    workers = _engine_threads(widest)
    with Bar(len(circuits), "simulating", unit="circuit") as meter, blas_threads(workers):
        for i, c in enumerate(circuits):
            if reduce is None:
                out.append(simulate(c, workers=workers)["final"])
            else:
                out.append(simulate(c, workers=workers, reduce=lambda sv, i=i: reduce(i, sv), project=project)["final"])
            meter.update(1)
    if timings is not None:
        timings["simulate"] = timings.get("simulate", 0.0) + (time.perf_counter() - t0)
    return out


def run_statevector(circuit: QuantumCircuit, *, cap: int | None = None) -> np.ndarray:
    """Final statevector of one measurement-free circuit."""
    return run_statevectors([circuit], cap=cap)[0]


def run_counts(circuits: list[QuantumCircuit], shots: int, seed: int, *, cap: int | None = None) -> list[dict[str, int]]:
    """Measurement counts with a fixed simulator seed (reproducible), all in one job."""
    for c in circuits:
        require_memory(statevector_bytes(c.num_qubits), f"simulating '{c.name}' on {c.num_qubits} qubits", cap)
    sim = simulator()
    compiled = prepare_for_simulator(circuits, sim)
    _log("aer")
    result = sim.run(compiled, shots=shots, seed_simulator=seed).result()
    if not result.success:
        raise QgpError(f"the simulator failed: {result.status}")
    return [result.get_counts(i) for i in range(len(compiled))]
