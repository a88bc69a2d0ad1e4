"""Gate noise: how depolarising gate errors and read-out flips change qgp's event probabilities.

Noise acts on the gate-level circuit a device would run: each measurement-free circuit is
lowered to ``GateNoise.basis`` (default ``rz, sx, x, cx``) piece by piece at optimisation level 0
(`gate_level`: exactly where qgp counts its resources and what `qgp export` writes), then
simulated by qiskit-aer with a `NoiseModel`:

* ``depolarizing_error(one_qubit, 1)`` after every one-qubit basis gate except ``rz``: ``rz`` is
  virtual (a frame change in the control software) and error-free on hardware — common practice
  in device noise models, made explicit here;
* ``depolarizing_error(two_qubit, 2)`` after every two-qubit basis gate;
* a symmetric ``ReadoutError([[1-r, r], [r, 1-r]])`` on every qubit when ``readout > 0``.

Depolarising parameters are kept in [0, 1] (λ = 1 is the fully depolarising channel), although
qiskit-aer's ``depolarizing_error`` accepts λ up to 4^n/(4^n − 1) (the uniform Pauli channel).

Two methods: ``"density_matrix"`` (exact; 16·4^q bytes, refused above the memory cap before
anything is allocated) and ``"trajectories"`` (the statevector method with one noise sample per
shot; Aer 0.18's ``save_probabilities(pershot=True)`` returns each trajectory's exact probability
vector, so the estimate is their mean, with standard error std/√N). Aer runs a circuit with no
noisy instruction once and returns one per-shot entry; it then counts as N identical trajectories.

Saved probabilities never see a ``ReadoutError`` (it acts on measurements only), so the read-out
flip is applied here: for each qubit in an event, P(observed v) = Σ_u M[v, u] P(true u), by
applying the 2×2 flip matrix M along that qubit's axis of the probability tensor before summing.

Sources: qiskit-aer 0.18 (``qiskit_aer.noise.depolarizing_error``, ``ReadoutError``,
``NoiseModel``, ``AerSimulator``, ``save_probabilities``); Nielsen & Chuang eq. 8.102 (the
depolarising channel).
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
from qiskit import QuantumCircuit

from qgp.circuits.decomposition import decompose_circuit, lower_piece

from qgp.errors import QgpError
from qgp.memory import require_memory, statevector_bytes
from qgp.settings import VIRTUAL_GATES, GateNoise, gate_arity as _gate_arity

__all__ = ["GateNoise", "ProbabilityResult", "noise_model", "noisy_gate_counts", "gate_level", "check_events", "events_from_probabilities", "event_probabilities"]

@dataclass(frozen=True)
class ProbabilityResult:
    """Event probabilities under noise.

    Attributes
    ----------
    probabilities : tuple of ndarray
        One float array of shape (n_events_i,) per circuit.
    standard_errors : tuple of ndarray
        Same shapes: the trajectory standard error (zeros for the density matrix).
    method : str
    trajectories : int
        Noise samples per circuit (1 for the density matrix).
    seconds : float
        Wall time of the simulation (transpiling excluded).
    samples : tuple of ndarray
        Per circuit, shape (N_i, n_events_i): each simulated trajectory's event probabilities
        (one row for the density matrix), so that SEs of combinations keep their covariances.
    ideal_weight : tuple of float
        Per circuit, the exact weight w₀ of the error-free part (``ideal``), 0 when every
        trajectory is sampled: probabilities = w₀·ideal + (1 − w₀)·mean(samples).
    ideal : tuple of ndarray
        Per circuit, the noiseless event probabilities used with ``ideal_weight`` (empty if w₀ = 0).
    """

    probabilities: tuple[np.ndarray, ...]
    standard_errors: tuple[np.ndarray, ...]
    method: str
    trajectories: int
    seconds: float
    samples: tuple[np.ndarray, ...] = ()
    ideal_weight: tuple[float, ...] = ()
    ideal: tuple[np.ndarray, ...] = ()

    def combination(self, i: int, weights) -> tuple[float, float]:
        """(Σₑ wₑ Pₑ, its trajectory standard error) for circuit ``i`` — e.g. P₀ − P₁ with
        weights (1, −1) — with the covariance of the events inside each trajectory kept."""
        w = np.asarray(weights, dtype=float)
        rows = self.samples[i] @ w
        w0 = self.ideal_weight[i] if self.ideal_weight else 0.0
        ideal = float(self.ideal[i] @ w) if w0 > 0 else 0.0
        value = w0 * ideal + (1.0 - w0) * float(rows.mean())
        se = (1.0 - w0) * float(rows.std(ddof=1)) / np.sqrt(rows.size) if rows.size > 1 else 0.0
        return value, se


def noise_model(spec: GateNoise):
    """The Aer `NoiseModel` of ``spec`` (empty — ideal — when every probability is zero)."""
    from qiskit_aer.noise import NoiseModel, ReadoutError, depolarizing_error

    model = NoiseModel(basis_gates=list(spec.basis))
    one = [b for b in spec.basis if _gate_arity(b) == 1 and b not in VIRTUAL_GATES]
    two = [b for b in spec.basis if _gate_arity(b) == 2]
    if spec.one_qubit > 0 and one:
        model.add_all_qubit_quantum_error(depolarizing_error(float(spec.one_qubit), 1), one)
    if spec.two_qubit > 0:
        model.add_all_qubit_quantum_error(depolarizing_error(float(spec.two_qubit), 2), two)
    if spec.readout > 0:
        r = float(spec.readout)
        model.add_all_qubit_readout_error(ReadoutError([[1 - r, r], [r, 1 - r]]))
    return model


def noisy_gate_counts(counts) -> tuple[int, int]:
    """(two-qubit, non-virtual one-qubit) gates among gate-level ``counts`` (name → count): the
    gates a depolarising error follows in `noise_model` (``rz`` is virtual and error-free)."""
    two = sum(int(n) for name, n in counts.items() if _gate_arity(name) == 2)
    one = sum(int(n) for name, n in counts.items() if _gate_arity(name) == 1 and name not in VIRTUAL_GATES)
    return two, one


def gate_level(circuit: QuantumCircuit, spec: GateNoise) -> QuantumCircuit:
    """``circuit`` in ``spec.basis``, piece by piece: the gate-level circuit whose counts qgp reports.

    Each top-level piece is lowered once (`qgp.circuits.decomposition.lower_piece`, optimisation
    level 0, cached by content) and the lowered pieces are composed in order, repetitions written
    out — the same lowering `qgp export` writes, so the noise acts on the exported circuit.
    """
    if any(inst.operation.name == "measure" for inst in circuit.data) or circuit.num_clbits:
        raise QgpError(f"circuit {circuit.name!r} has measurements or classical bits; pass the measurement-free circuit")
    dec = decompose_circuit(circuit)
    out = QuantumCircuit(*circuit.qregs, name=circuit.name, global_phase=dec.global_phase)
    for run in dec.runs:
        lowered = lower_piece(dec.pieces[run.key], tuple(spec.basis)).circuit
        for _ in range(run.repeat):
            out.compose(lowered, qubits=list(run.qubits), inplace=True)
    return out


def check_events(events: list[dict[int, int]], n_qubits: int) -> list[int]:
    for event in events:
        for q, v in event.items():
            if not 0 <= int(q) < n_qubits or v not in (0, 1):
                raise QgpError(f"event {event} needs qubits in 0..{n_qubits - 1} and values 0 or 1; fix the event")
    return sorted({int(q) for event in events for q in event}) or [0]


def events_from_probabilities(probs: np.ndarray, saved: list[int], events, readout: float) -> np.ndarray:
    """Event probabilities, shape (N, n_events), from saved probabilities of shape (N, 2^k) over
    the qubits ``saved`` (bit j of an index is qubit ``saved[j]``), after the read-out flips."""
    k = len(saved)
    tensor = probs.reshape((probs.shape[0],) + (2,) * k)  # axis 1 + (k-1-j) is saved[j]
    flip = np.array([[1 - readout, readout], [readout, 1 - readout]])
    out = np.empty((probs.shape[0], len(events)))
    for e, event in enumerate(events):
        t = tensor
        index: list = [slice(None)] * (k + 1)
        for q, v in event.items():
            axis = 1 + (k - 1 - saved.index(int(q)))
            if readout > 0:
                t = np.moveaxis(np.tensordot(flip, t, axes=([1], [axis])), 0, axis)
            index[axis] = int(v)
        out[:, e] = t[tuple(index)].reshape(probs.shape[0], -1).sum(axis=1)
    return out


def event_probabilities(circuits, events, spec: GateNoise, *, cap_bytes: int | None = None) -> ProbabilityResult:
    """Probability of each event under ``spec``'s noise, for each measurement-free circuit.

    Parameters
    ----------
    circuits : list of QuantumCircuit
        Measurement-free circuits (any gates; transpiled here with `gate_level`).
    events : list of list of dict[int, int]
        ``events[i]`` lists circuit i's events, each a dict qubit index → 0/1 (qiskit's order).
    spec : GateNoise
    cap_bytes : int, optional
        Memory cap; default half the available memory (`qgp.memory.default_memory_cap`).

    Returns
    -------
    ProbabilityResult
        ``probabilities[i]`` and ``standard_errors[i]`` of shape (len(events[i]),).
    """
    from qiskit_aer import AerSimulator

    if spec.method not in ("density_matrix", "trajectories"):
        raise QgpError(f"gate-level simulation needs method 'density_matrix' or 'trajectories', not {spec.method!r}; "
                       "the effective model runs in qgp.readout.noise_effective")
    circuits = list(circuits)
    if len(events) != len(circuits):
        raise QgpError(f"got {len(events)} event lists for {len(circuits)} circuits; give one list per circuit")
    saved = [check_events(ev, c.num_qubits) for c, ev in zip(circuits, events)]
    n_max = max((c.num_qubits for c in circuits), default=0)
    trajectories = spec.method == "trajectories"
    if trajectories:
        k_max = max((len(s) for s in saved), default=0)
        require_memory(statevector_bytes(n_max) + 8 * spec.trajectories * (1 << k_max), "a noisy trajectory run", cap_bytes)
    else:
        require_memory(16 * 4**n_max, f"a {n_max}-qubit density matrix (16·4^q bytes)", cap_bytes)
    runs = []
    for c, s in zip(circuits, saved):
        g = gate_level(c, spec)
        g.save_probabilities(qubits=s, pershot=trajectories)
        runs.append(g)
    model = noise_model(spec)
    if trajectories:
        sim = AerSimulator(method="statevector", noise_model=model, seed_simulator=int(spec.seed))
        shots = int(spec.trajectories)
    else:
        sim = AerSimulator(method="density_matrix", noise_model=model)
        shots = 1
    start = time.perf_counter()
    result = sim.run(runs, shots=shots).result() if runs else None
    seconds = time.perf_counter() - start
    means, errors, samples = [], [], []
    for i, (ev, s) in enumerate(zip(events, saved)):
        probs = np.atleast_2d(np.asarray(result.data(i)["probabilities"], dtype=float))
        per = events_from_probabilities(probs, s, ev, float(spec.readout))
        means.append(per.mean(axis=0))
        # One entry means Aer ran the circuit once (nothing noisy): N identical trajectories.
        n = per.shape[0]
        errors.append(per.std(axis=0, ddof=1) / np.sqrt(n) if n > 1 else np.zeros(len(ev)))
        samples.append(per)
    return ProbabilityResult(tuple(means), tuple(errors), spec.method, shots, seconds, samples=tuple(samples))
