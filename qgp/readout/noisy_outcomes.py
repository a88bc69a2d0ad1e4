"""Outcome probabilities of every test point's circuits under gate noise (``[gate_noise]``).

Noise acts on the gate form — the circuit a device would run, whose counts qgp reports — never on
the fused simulation form. For test point j the two circuits are the Hadamard test of
⟨k̂_j|C·Ã⁻¹|ŷ⟩ (qgp.readout.estimators.hadamard_test_circuit) and the variance circuit of k̂_j;
their events are P₀, P₁ = P(probe = 0/1, flag = 1, every clock and block qubit 0) and
P_flag = P(flag = 1). A noisy channel is linear in ρ but the Hadamard test superposes two state
preparations, so the amortised reference-register trick does not apply: noise is always read out
per point, 2·n_test circuits.

Methods (``GateNoise.method``): ``density_matrix`` and ``trajectories`` simulate the transpiled
gate-level circuits with Aer's noise model (qgp.readout.noise); ``effective`` runs the per-block
model (qgp.readout.noise_effective) on the gate form's top-level pieces, with the noiseless
probabilities as its error-free part.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from qiskit import QuantumCircuit

from qgp.circuits.decomposition import decompose_circuit
from qgp.circuits.inversion import FLAG
from qgp.errors import QgpError
from qgp.memory import require_memory, statevector_bytes
from qgp.readout.builds import cached_pair, qpe_body
from qgp.readout.estimators import PROBE, hadamard_test_circuit, variance_circuit
from qgp.readout.noise import ProbabilityResult, event_probabilities, noisy_gate_counts
from qgp.readout.noise_effective import effective_event_probabilities
from qgp.settings import GateNoise

__all__ = ["NoisyOutcomes", "noisy_outcomes", "point_circuits", "readout_events"]

Progress = Callable[[str], None]

#: Registers that are read but not required to be 0 in the Hadamard test's success event.
_FREE = ("system", PROBE, FLAG)


@dataclass(frozen=True)
class NoisyOutcomes:
    """Noisy event probabilities per test point, shape (n_test,), with trajectory standard errors.

    ``d_se`` is the SE of P₀ − P₁ (their covariance inside each trajectory kept); ``gate_counts``
    the gate-level counts of test point 0's two circuits in the noise basis (``two_qubit``,
    ``one_qubit``: the noisy one-qubit gates); ``no_error_probability``
    the exact weight of the error-free part (effective model; None for the gate-level methods).
    """

    p0: np.ndarray
    p1: np.ndarray
    p_flag: np.ndarray
    d_se: np.ndarray
    p_flag_se: np.ndarray
    method: str
    trajectories: int
    seconds: float
    qubits: int
    gate_counts: dict
    no_error_probability: dict | None


def point_circuits(inp, j: int) -> tuple[QuantumCircuit, QuantumCircuit]:
    """(Hadamard-test circuit, variance circuit) of test point ``j`` in the gate form.

    ``inp`` is the strategies' `StrategyInputs` (A, settings, bounds, ŷ, k̂*)."""
    inv, inv_sqrt = cached_pair(inp.A, inp.circuit, inp.bounds, form="gate")
    qpe = qpe_body(inp.A, inp.circuit, inp.bounds, inv, form="gate")
    k = inp.khat[:, j]
    return hadamard_test_circuit(qpe, inv, k, inp.yhat), variance_circuit(inv_sqrt.circuit, k)


def readout_events(mean_circuit: QuantumCircuit, variance: QuantumCircuit) -> tuple[list[dict], list[dict]]:
    """Events (qubit → value dicts, qiskit's qubit order) of the Hadamard test — P₀, P₁ — and of the
    variance circuit — P_flag — found by register name."""

    def index(qc, reg):
        return [qc.find_bit(q).index for q in reg]

    rest: dict[int, int] = {}
    probe = flag = None
    for reg in mean_circuit.qregs:
        if reg.name == PROBE:
            [probe] = index(mean_circuit, reg)
        elif reg.name == FLAG:
            [flag] = index(mean_circuit, reg)
        elif reg.name not in _FREE:
            rest.update({q: 0 for q in index(mean_circuit, reg)})
    if probe is None or flag is None:
        raise QgpError("the Hadamard-test circuit has no probe or flag register; it was not built by qgp")
    mean_events = [{probe: b, flag: 1, **rest} for b in (0, 1)]
    [var_flag] = [index(variance, r)[0] for r in variance.qregs if r.name == FLAG]
    return mean_events, [{var_flag: 1}]


def _counts(qc: QuantumCircuit, basis: tuple[str, ...]) -> dict:
    two, one = noisy_gate_counts(decompose_circuit(qc).gate_counts(basis))
    return {"two_qubit": two, "one_qubit": one}


def _guard(width: int, spec: GateNoise, cap: int) -> None:
    """Refuse what cannot fit before any circuit is built or transpiled."""
    if spec.method == "density_matrix":
        require_memory(16 * 4**width, f"a {width}-qubit density matrix (16·4^q bytes) for [gate_noise]", cap)
    else:
        require_memory(statevector_bytes(width), f"a {width}-qubit noisy trajectory for [gate_noise]", cap)


def noisy_outcomes(inp, spec: GateNoise, ideal, say: Progress) -> NoisyOutcomes:
    """Noisy P₀, P₁, P_flag of every test point under ``spec``.

    Parameters
    ----------
    inp : qgp.readout.strategies.StrategyInputs
        The problem, settings, bounds, unit vectors and memory cap.
    spec : GateNoise
    ideal : qgp.readout.strategies.Outcomes
        The noiseless outcomes (the effective model's error-free part; shapes (n_test,)).
    say : callable
        Progress messages.

    Returns
    -------
    NoisyOutcomes
        Arrays of shape (n_test,).
    """
    n_test = inp.problem.n_test
    width = inp.inverse.circuit.num_qubits + 1  # the Hadamard test adds the probe
    _guard(width, spec, inp.cap)
    say(f"gate noise ({spec.method}): building the gate form of {2 * n_test} per-point circuits on up to {width} qubits")
    pairs = [point_circuits(inp, j) for j in range(n_test)]
    mean_events, var_events = readout_events(*pairs[0])
    circuits = [c for pair in pairs for c in pair]
    events = [mean_events, var_events] * n_test
    t0 = time.perf_counter()
    if spec.method == "effective":
        ideal_probs = [
            np.array(v)
            for j in range(n_test)
            for v in ([ideal.p0[j], ideal.p1[j]], [ideal.p_flag[j]])
        ]
        say(f"gate noise: {spec.trajectories} effective-model trajectories per circuit (seed {spec.seed})")
        res = effective_event_probabilities(circuits, events, spec, ideal=ideal_probs, cap_bytes=inp.cap)
    else:
        what = "a density matrix" if spec.method == "density_matrix" else f"{spec.trajectories} trajectories"
        say(f"gate noise: transpiling to {list(spec.basis)} and simulating {what} per circuit")
        res = event_probabilities(circuits, events, spec, cap_bytes=inp.cap)
    seconds = time.perf_counter() - t0
    return _collect(res, n_test, spec, seconds, width, pairs[0])


def _collect(res: ProbabilityResult, n_test: int, spec: GateNoise, seconds: float, width: int, first) -> NoisyOutcomes:
    p0, p1, pf, d_se, pf_se = (np.empty(n_test) for _ in range(5))
    for j in range(n_test):
        m, v = 2 * j, 2 * j + 1
        p0[j], p1[j] = res.probabilities[m]
        _, d_se[j] = res.combination(m, (1.0, -1.0))
        pf[j], pf_se[j] = res.probabilities[v][0], res.standard_errors[v][0]
    w0 = None
    if res.ideal_weight:
        w = np.asarray(res.ideal_weight)
        w0 = {"mean_circuit_min": float(w[0::2].min()), "variance_circuit_min": float(w[1::2].min())}
    return NoisyOutcomes(
        p0=p0,
        p1=p1,
        p_flag=pf,
        d_se=d_se,
        p_flag_se=pf_se,
        method=spec.method,
        trajectories=res.trajectories,
        seconds=seconds,
        qubits=width,
        gate_counts={"mean_circuit": _counts(first[0], spec.basis), "variance_circuit": _counts(first[1], spec.basis)},
        no_error_probability=w0,
    )
