"""Estimators of the GP predictive mean and variance from the inversion circuits.

Mean, by a Hadamard test on a ``probe`` qubit (probe in |+⟩; probe = 0 prepares ŷ = y/‖y‖ and runs
the ``inverse`` inversion, probe = 1 prepares k̂ = k*/‖k*‖ and sets the flag; H on the probe). With
Π the projector on flag = 1, clock = 0, block = 0 and v = Π·(inversion of ŷ) ≈ C·Ã⁻¹ŷ:

    P₀ = ¼‖v + k̂‖²,  P₁ = ¼‖v − k̂‖²,  P₀ − P₁ = Re⟨k̂|v⟩,  μ̃ = ‖y‖‖k*‖(P₀ − P₁)/C.

Only what differs between the branches is controlled by the probe: the state preparation and the
rotation (phase estimation followed by its inverse is the identity on probe = 1).

Variance, through the ``inverse_sqrt`` circuit on k̂: P(flag = 1) = C′·k̂ᵀÃ⁻¹k̂, so
σ̃*² = k(x*, x*) − ‖k*‖²P/C′ (latent). The Hadamard-test alternative uses k̂ on both sides:
k*ᵀÃ⁻¹k* = ‖k*‖²·Re⟨k̂|C·Ã⁻¹|k̂⟩/C.

The amortised strategy uses that the circuits are linear in their input: one simulation with a
``reference`` register maximally entangled with ``system`` (Choi–Jamiołkowski) gives the whole
post-selected operator, B = Π·U·(·) ≈ C·Ã⁻¹ for ``inverse`` and E (the flag = 1 slice over every
clock and block value) for ``inverse_sqrt``, with M = E†E and P(flag = 1) = k̂†Mk̂. Every test
point's outcome probabilities then follow by linear algebra — still the circuits' answer, with every
imperfection of phase estimation, product formula and filtering.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from qiskit import ClassicalRegister, QuantumCircuit, QuantumRegister
from qiskit.circuit import CircuitInstruction

from .encoding import MultiplexerGate, amplitude_encoding, amplitude_encoding_matrix
from .inversion import FLAG, InversionCircuit, flag_rotation_circuit, rotation_angles, statevector_array
from .simulate import require_memory, run_counts, run_saved_statevectors, run_statevectors, statevector_bytes

__all__ = [
    "PROBE",
    "REFERENCE",
    "CircuitOperators",
    "reference_circuit",
    "operators_from_reference_run",
    "hadamard_probabilities",
    "variance_probabilities",
    "hadamard_test_circuit",
    "variance_circuit",
    "per_point_probabilities",
    "per_point_hadamard",
    "per_point_counts",
    "sample_hadamard",
    "sample_variance",
]

PROBE = "probe"
REFERENCE = "reference"


@dataclass(frozen=True)
class CircuitOperators:
    """What the circuits apply, read from one reference-register run each.

    ``B`` ≈ C·Ã⁻¹ (the ``inverse`` circuit's post-selected block, complex), ``M`` = E†E (the
    ``inverse_sqrt`` circuit's flag-probability matrix). Input and output index j is training row j.
    """

    B: np.ndarray
    M: np.ndarray
    scale_inverse: float
    scale_inverse_sqrt: float


def reference_circuit(inv: InversionCircuit) -> QuantumCircuit:
    """``inv`` preceded by a maximally entangled state Σ_j |j⟩_reference|j⟩_system/√N."""
    regs = list(inv.circuit.qregs)
    m = inv.n_system_qubits
    ref = QuantumRegister(m, REFERENCE)
    qc = QuantumCircuit(*regs, ref, name=f"{inv.circuit.name}-reference")
    system = regs[0]
    for i in range(m):
        qc.h(ref[i])
        qc.cx(ref[i], system[i])
    # copy=False: the instructions are shared with inv.circuit, never modified (large multiplexers).
    qc.compose(inv.circuit, qubits=qc.qubits[: inv.circuit.num_qubits], inplace=True, copy=False)
    return qc


def _reference_output(sv: np.ndarray, inv: InversionCircuit) -> np.ndarray:
    """Output array [r, block, flag, clock, system] for input basis state r (scaled by √N)."""
    m = inv.n_system_qubits
    n_inv = inv.circuit.num_qubits
    per_input = np.asarray(sv).reshape(2**m, 2**n_inv) * np.sqrt(2**m)
    return np.stack([statevector_array(row, inv) for row in per_input])


def _shares_prefix(inverse: InversionCircuit, inverse_sqrt: InversionCircuit) -> bool:
    """Whether ``inverse_sqrt`` is ``inverse``'s phase estimation followed by its own rotation on a
    fresh flag: same oracle object, same instructions before the rotation, no uncompute."""
    rs = inverse.rotation_start
    if (
        inverse.oracle is None
        or inverse.oracle is not inverse_sqrt.oracle
        or rs is None
        or rs != inverse_sqrt.rotation_start
        or inverse.rotation != "inverse"
        or inverse_sqrt.rotation != "inverse_sqrt"
        or inverse_sqrt.uncomputed
        or len(inverse_sqrt.circuit.data) <= rs
    ):
        return False
    a, b = inverse.circuit.data, inverse_sqrt.circuit.data
    return all(
        x.operation.name == y.operation.name and x.qubits == y.qubits for x, y in zip(a[:rs], b[:rs])
    )


_PHASE_ESTIMATED = "phase_estimated"
_FINAL = "final"


def _reference_with_snapshot(inv: InversionCircuit) -> QuantumCircuit:
    """`reference_circuit` of ``inv`` that also saves the state just before the flag rotation."""
    from qiskit_aer.library import SaveStatevector

    qc = reference_circuit(inv)
    start = len(qc.data) - len(inv.circuit.data)  # the reference's Hadamards and CNOTs come first
    # The save goes in at the rotation's index (inserting beats appending ~100 instructions one by one).
    qc.data.insert(
        start + inv.rotation_start,
        CircuitInstruction(SaveStatevector(qc.num_qubits, label=_PHASE_ESTIMATED), tuple(qc.qubits)),
    )
    qc.append(SaveStatevector(qc.num_qubits, label=_FINAL), qc.qubits)
    return qc


def operators_from_reference_run(
    inverse: InversionCircuit,
    inverse_sqrt: InversionCircuit,
    *,
    cap: int | None = None,
    timings: dict | None = None,
    share_prefix: bool = True,
) -> CircuitOperators:
    """B and M from one simulator job (``timings``: see `qgp.simulate.run_statevectors`).

    When the two circuits share their phase estimation (`_shares_prefix`; infer builds them so)
    that prefix is simulated once: the run of ``inverse`` saves the state ψ just before its
    rotation, and ``inverse_sqrt``'s rotation RY(θ_k) on the fresh flag puts amplitude
    sin(θ_k/2)·ψ on flag = 1 — its E read from ψ without simulating the second circuit. With
    ``share_prefix=False`` (or circuits that do not share) both reference circuits run, as two
    experiments of one job; the two give the same numbers (tests/test_speed_paths.py).
    """
    if share_prefix and _shares_prefix(inverse, inverse_sqrt):
        qc = _reference_with_snapshot(inverse)
        n = qc.num_qubits
        require_memory(2 * statevector_bytes(n), f"the reference-register run on {n} qubits", cap)
        sv_pre, sv_inv = run_saved_statevectors(qc, [_PHASE_ESTIMATED, _FINAL], cap=cap, timings=timings)
        out = _reference_output(sv_inv, inverse)
        B = out[:, 0, 1, 0, :].T
        pre = _reference_output(sv_pre, inverse)  # flag still 0: pre[:, :, 0] is ψ
        g = np.sin(rotation_angles(inverse_sqrt.flag_amplitudes) / 2)
        rows = pre[:, :, 0, :, :] * g[None, None, :, None]
        M = _gram(rows.reshape(rows.shape[0], -1))
        return CircuitOperators(B=B, M=M, scale_inverse=inverse.scale, scale_inverse_sqrt=inverse_sqrt.scale)
    circuits = [reference_circuit(inverse), reference_circuit(inverse_sqrt)]
    for c in circuits:
        require_memory(statevector_bytes(c.num_qubits), f"the reference-register run on {c.num_qubits} qubits", cap)
    sv_inv, sv_sqrt = run_statevectors(circuits, cap=cap, timings=timings)
    out = _reference_output(sv_inv, inverse)
    B = out[:, 0, 1, 0, :].T  # B[s, r]: system output s for input r
    out2 = _reference_output(sv_sqrt, inverse_sqrt)
    # E[(block, clock, system), r] = out2[r, block, 1, clock, system]; M = E†E. Built row-major
    # as Eᵀ so the product runs on contiguous memory.
    M = _gram(out2[:, :, 1, :, :].reshape(out2.shape[0], -1))
    return CircuitOperators(B=B, M=M, scale_inverse=inverse.scale, scale_inverse_sqrt=inverse_sqrt.scale)


# Below this many multiply-adds the Gram matrix is formed by einsum's own loops (≤ ~10 ms), not
# BLAS: right after an Aer job a multi-threaded OpenBLAS product of a 16 × 4096 matrix took
# 0.2–0.3 s here (waking its threads on a busy 2-core machine) against 2 ms for einsum.
_GRAM_EINSUM_LIMIT = 1 << 24


def _gram(rows: np.ndarray) -> np.ndarray:
    """conj(rows) @ rowsᵀ."""
    if rows.shape[0] ** 2 * rows.shape[1] <= _GRAM_EINSUM_LIMIT:
        return np.einsum("ik,jk->ij", rows.conj(), rows)
    rows = np.ascontiguousarray(rows)
    return rows.conj() @ rows.T


def hadamard_probabilities(v: np.ndarray, khat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """P₀ = ¼‖v + k̂‖² and P₁ = ¼‖v − k̂‖² for each column of ``khat`` (real, unit norm)."""
    v = np.asarray(v)[:, None]
    p0 = 0.25 * np.sum(np.abs(v + khat) ** 2, axis=0)
    p1 = 0.25 * np.sum(np.abs(v - khat) ** 2, axis=0)
    return p0, p1


def variance_probabilities(M: np.ndarray, khat: np.ndarray) -> np.ndarray:
    """P(flag = 1) = k̂†Mk̂ for each column of ``khat``."""
    return np.real(np.einsum("it,ij,jt->t", khat.conj(), M, khat))


class _HadamardTemplate:
    """The parts every Hadamard-test circuit of one inversion shares, built once.

    The phase-estimation body, its inverse and the probe-controlled rotation are composed into
    each point's circuit without copying (`QuantumCircuit.compose(copy=False)`); only the state
    preparations differ between points.
    """

    def __init__(self, qpe: QuantumCircuit, inv: InversionCircuit):
        m, c, b = inv.n_system_qubits, inv.settings.clock_qubits, inv.n_block_qubits
        self.regs = [QuantumRegister(m, "system"), QuantumRegister(c, "clock"), QuantumRegister(1, FLAG)]
        if b:
            self.regs.append(QuantumRegister(b, "block"))
        self.probe = QuantumRegister(1, PROBE)
        self.qpe = qpe
        self.qpe_dg = qpe.inverse()
        # The rotation on probe = 0 only: a multiplexed RY over (clock, probe) with zero angles on probe = 1.
        angles = np.concatenate((rotation_angles(inv.flag_amplitudes), np.zeros(2**c)))
        self.rotation = flag_rotation_circuit(angles, inv.form)

    def circuit(self, left: np.ndarray, right: np.ndarray, measure: bool = False) -> QuantumCircuit:
        regs, probe = self.regs, self.probe
        qc = QuantumCircuit(*regs, probe, name="hadamard-test")
        system, clock, flag = regs[0], regs[1], regs[2]
        block = list(regs[3]) if len(regs) > 3 else []
        qc.h(probe[0])
        # Prepare k̂_right on probe = 0 and k̂_left on probe = 1: one multiplexer over the probe.
        prep = MultiplexerGate([amplitude_encoding_matrix(right), amplitude_encoding_matrix(left)], label="prep")
        qc.append(prep, [*system, probe[0]], copy=False)
        body = [*system, *clock, *block]
        qc.compose(self.qpe, qubits=body, inplace=True, copy=False)
        qc.compose(self.rotation, qubits=[*clock, probe[0], flag[0]], inplace=True, copy=False)
        qc.cx(probe[0], flag[0])
        qc.compose(self.qpe_dg, qubits=body, inplace=True, copy=False)
        qc.h(probe[0])
        if measure:
            _measure(qc, [probe, flag, clock] + ([regs[3]] if len(regs) > 3 else []))
        return qc


def hadamard_test_circuit(
    qpe: QuantumCircuit, inv: InversionCircuit, left: np.ndarray, right: np.ndarray, *, measure: bool = False
) -> QuantumCircuit:
    """The Hadamard test of ⟨left|C·Ã⁻¹|right⟩ on a ``probe`` qubit (see module docstring).

    ``qpe`` is the phase-estimation body of ``inv`` (on system, clock, block); the probe is the
    last qubit. With ``measure`` the probe, flag, clock and block are measured into ``c_``
    registers of the same names.
    """
    return _HadamardTemplate(qpe, inv).circuit(left, right, measure)


def variance_circuit(body: QuantumCircuit, khat: np.ndarray, *, measure: bool = False) -> QuantumCircuit:
    """State preparation of k̂ followed by the ``inverse_sqrt`` body (flag read alone)."""
    qc = QuantumCircuit(*body.qregs, name="variance")
    qc.compose(amplitude_encoding(khat, native=True), qubits=list(qc.qregs[0]), inplace=True, copy=False)
    qc.compose(body, inplace=True, copy=False)
    if measure:
        _measure(qc, [qc.qregs[2]])
    return qc


def _measure(qc: QuantumCircuit, regs) -> None:
    for r in regs:
        creg = ClassicalRegister(r.size, f"c_{r.name}")
        qc.add_register(creg)
        qc.measure(r, creg)


def per_point_probabilities(
    qpe: QuantumCircuit,
    inverse: InversionCircuit,
    sqrt_body: QuantumCircuit,
    sqrt_inv: InversionCircuit,
    yhat: np.ndarray,
    khat: np.ndarray,
    *,
    cap: int | None = None,
    timings: dict | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact (P₀, P₁, P_flag) from one full circuit per test point, all in one simulator job.

    The shared body is built once and every circuit is native to Aer, so nothing is transpiled.
    """
    n_test = khat.shape[1]
    template = _HadamardTemplate(qpe, inverse)
    mean_circuits = [template.circuit(khat[:, j], yhat) for j in range(n_test)]
    var_circuits = [variance_circuit(sqrt_body, khat[:, j]) for j in range(n_test)]
    states = run_statevectors(mean_circuits + var_circuits, cap=cap, timings=timings)
    p0, p1 = _hadamard_outcomes(states[:n_test], inverse)
    pf = np.array([np.sum(np.abs(statevector_array(sv, sqrt_inv)[:, 1]) ** 2) for sv in states[n_test:]])
    return p0, p1, pf


def _hadamard_outcomes(states, inverse: InversionCircuit) -> tuple[np.ndarray, np.ndarray]:
    """P(probe = b, Π) for b = 0, 1 from Hadamard-test statevectors (the probe is the top qubit)."""
    p = np.empty((2, len(states)))
    for j, sv in enumerate(states):
        arr = np.asarray(sv).reshape(2, -1)
        for b in (0, 1):
            p[b, j] = np.sum(np.abs(statevector_array(arr[b], inverse)[0, 1, 0, :]) ** 2)
    return p[0], p[1]


def per_point_hadamard(
    qpe: QuantumCircuit,
    inverse: InversionCircuit,
    left: np.ndarray,
    right: np.ndarray,
    *,
    cap: int | None = None,
    timings: dict | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """(P₀, P₁) of the Hadamard test of ⟨left_j|C·Ã⁻¹|right_j⟩ for each column pair j."""
    template = _HadamardTemplate(qpe, inverse)
    circuits = [template.circuit(left[:, j], right[:, j]) for j in range(left.shape[1])]
    return _hadamard_outcomes(run_statevectors(circuits, cap=cap, timings=timings), inverse)


def per_point_counts(
    qpe: QuantumCircuit,
    inverse: InversionCircuit,
    sqrt_body: QuantumCircuit,
    yhat: np.ndarray,
    khat: np.ndarray,
    shots: int,
    seed: int,
    *,
    cap: int | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Counts (n₀Π, n₁Π, n_flag) from measured per-point circuits, sampled by the simulator."""
    n_test = khat.shape[1]
    template = _HadamardTemplate(qpe, inverse)
    mean_circuits = [template.circuit(khat[:, j], yhat, measure=True) for j in range(n_test)]
    var_circuits = [variance_circuit(sqrt_body, khat[:, j], measure=True) for j in range(n_test)]
    counts = run_counts(mean_circuits + var_circuits, shots, seed, cap=cap)
    n0, n1, nf = np.zeros(n_test, int), np.zeros(n_test, int), np.zeros(n_test, int)
    has_block = inverse.n_block_qubits > 0
    for j in range(n_test):
        for key, cnt in counts[j].items():
            parts = key.split()  # registers in reverse order of addition: block, clock, flag, probe
            fields = parts[::-1]
            probe, flag, clock = fields[0], fields[1], fields[2]
            block = fields[3] if has_block else "0"
            if flag == "1" and int(clock, 2) == 0 and int(block, 2) == 0:
                if probe == "0":
                    n0[j] += cnt
                else:
                    n1[j] += cnt
        nf[j] = counts[n_test + j].get("1", 0)
    return n0, n1, nf


def sample_hadamard(p0: np.ndarray, p1: np.ndarray, shots: int, rng: np.random.Generator):
    """One multinomial draw per test point over (probe=0 ∧ Π, probe=1 ∧ Π, fail)."""
    fail = np.clip(1.0 - p0 - p1, 0.0, 1.0)
    probs = np.stack([p0, p1, fail], axis=1)
    probs = probs / probs.sum(axis=1, keepdims=True)
    draws = rng.multinomial(shots, probs)
    return draws[:, 0], draws[:, 1]


def sample_variance(pf: np.ndarray, shots: int, rng: np.random.Generator) -> np.ndarray:
    """One binomial draw per test point of the flag = 1 count."""
    return rng.binomial(shots, np.clip(pf, 0.0, 1.0))
