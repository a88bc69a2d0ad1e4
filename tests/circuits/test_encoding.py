"""Amplitude encoding, Pauli decomposition and block encodings (qgp.circuits.encoding)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from qiskit import transpile
from qiskit.quantum_info import Operator, SparsePauliOp, Statevector
from qiskit_aer import AerSimulator

from qgp.circuits.encoding import (
    amplitude_encoding,
    block_encoding,
    dilation_block_encoding,
    lcu_block_encoding,
    normalised_amplitudes,
    pauli_decomposition,
)
from qgp.errors import QgpError

# The Cao, Daskin, Frankel & Kais (Mol. Phys. 110, 1675 (2012)) worked example. Pauli form as
# given in issue 3 (qiskit label order, rightmost letter = qubit 0); matrix entries (1/4)·[[15, 9,
# 5, −3], …] from memory of the paper. The test below checks the two agree.
CAO_PAULI = [("II", 3.75), ("XZ", 1.25), ("YY", 0.75), ("ZX", 2.25)]
CAO_MATRIX = np.array([[15, 9, 5, -3], [9, 15, 3, -5], [5, 3, 15, -9], [-3, -5, -9, 15]]) / 4


def _random_spd(m: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    g = rng.normal(size=(2**m, 2**m))
    return g @ g.T / 2**m + 0.1 * np.eye(2**m)


def _rbf_kernel_matrix(n: int, lengthscale: float, noise: float, seed: int) -> np.ndarray:
    """K + σ²I for the squared-exponential kernel exp(−|x−x'|²/2ℓ²) on random 1-D inputs."""
    x = np.sort(np.random.default_rng(seed).uniform(0, 1, n))
    return np.exp(-0.5 * (x[:, None] - x[None, :]) ** 2 / lengthscale**2) + noise * np.eye(n)


def _circuit_unitary(circuit) -> np.ndarray:
    """The circuit's unitary from Aer's unitary simulator (transpiled at level 0, one call).

    `Operator` applies every gate to a dense 2^n × 2^n matrix in Python and takes over a minute
    on the m = 3 LCU; Aer runs its multi-controlled gates natively. Cross-checked against
    `Operator` on the small cases.
    """
    sim = AerSimulator(method="unitary")
    qc = circuit.copy()
    qc.save_unitary()
    return np.asarray(sim.run(transpile(qc, sim, optimization_level=0)).result().get_unitary())


MATRICES = {
    "spd-m1": _random_spd(1, 1),
    "spd-m2": _random_spd(2, 2),
    "spd-m3": _random_spd(3, 3),
    "rbf-4": _rbf_kernel_matrix(4, 0.3, 0.05, 4),
    "rbf-8": _rbf_kernel_matrix(8, 0.2, 0.1, 8),
}


# ---------------------------------------------------------------------------------------------
# Amplitude encoding


def test_amplitude_encoding_keeps_row_order():
    # Ordering contract (issue 3): amplitude j is entry j, system[0] least significant
    # (qiskit's little-endian convention).
    b = np.random.default_rng(0).normal(size=8)
    qc = amplitude_encoding(b)
    assert [r.name for r in qc.qregs] == ["system"]
    sv = Statevector(qc).data
    resid = np.max(np.abs(sv - b / np.linalg.norm(b)))
    assert resid < 1e-10, f"worst amplitude residual {resid:.3g}"
    e5 = np.zeros(8)
    e5[5] = 3.0
    probs = Statevector(amplitude_encoding(e5)).probabilities_dict()
    assert probs.get("101", 0.0) == pytest.approx(1.0, abs=1e-12), probs


@pytest.mark.parametrize(
    "vector, word",
    [(np.ones(3), "power of two"), (np.zeros(4), "all zeros"), (np.array([1.0, np.nan]), "NaN")],
)
def test_amplitude_encoding_refuses_bad_vectors(vector, word):
    with pytest.raises(QgpError, match=word):
        normalised_amplitudes(vector)


# ---------------------------------------------------------------------------------------------
# Pauli decomposition


@pytest.mark.parametrize("name", MATRICES)
def test_pauli_decomposition_reconstructs(name):
    a = MATRICES[name]
    op = pauli_decomposition(a)
    assert np.all(op.coeffs.imag == 0)
    resid = np.max(np.abs(op.to_matrix() - a))
    assert resid < 1e-12, f"{name}: worst entry residual {resid:.3g}"
    # Real symmetric A has no Pauli string with an odd number of Y (from memory: those are
    # imaginary antisymmetric matrices).
    n_y = [(p.x & p.z).sum() for p in op.paulis]
    assert all(n % 2 == 0 for n in n_y)


@settings(max_examples=25, deadline=None, derandomize=True)
@given(
    m=st.integers(min_value=1, max_value=4),
    seed=st.integers(min_value=0, max_value=2**31 - 1),
)
def test_pauli_decomposition_matches_trace_formula(m, seed):
    # c_P = Tr(P A)/2^m (from memory: Pauli strings are orthogonal under the trace inner product).
    rng = np.random.default_rng(seed)
    g = rng.normal(size=(2**m, 2**m))
    a = g + g.T
    op = pauli_decomposition(a)
    got = {p.to_label(): c.real for p, c in zip(op.paulis, op.coeffs)}
    reference = SparsePauliOp.from_operator(Operator(a))
    want = {p.to_label(): c for p, c in zip(reference.paulis, reference.coeffs)}
    labels = set(got) | set(want)
    worst = max(abs(got.get(k, 0.0) - want.get(k, 0.0)) for k in labels)
    assert worst < 1e-12, f"worst coefficient residual {worst:.3g}"


def test_cao_matrix_pauli_form_and_eigenvalues():
    from_pauli = SparsePauliOp.from_list(CAO_PAULI).to_matrix().real
    assert np.max(np.abs(from_pauli - CAO_MATRIX)) < 1e-15
    # Eigenvalues 1, 2, 4, 8 (Cao et al. 2012, chosen there so 4 clock qubits represent them).
    assert np.allclose(np.linalg.eigvalsh(CAO_MATRIX), [1, 2, 4, 8], atol=1e-12)
    op = pauli_decomposition(CAO_MATRIX)
    got = sorted((p.to_label(), round(c.real, 12)) for p, c in zip(op.paulis, op.coeffs))
    assert got == sorted(CAO_PAULI)


def test_pauli_decomposition_refuses_bad_matrices():
    with pytest.raises(QgpError, match="symmetric"):
        pauli_decomposition(np.array([[1.0, 2.0], [0.0, 1.0]]))
    with pytest.raises(QgpError, match="power of two"):
        pauli_decomposition(np.eye(3))
    with pytest.raises(QgpError, match="NaN"):
        pauli_decomposition(np.array([[1.0, np.inf], [np.inf, 1.0]]))
    with pytest.raises(QgpError, match="square"):
        pauli_decomposition(np.ones((2, 4)))


# ---------------------------------------------------------------------------------------------
# Block encodings


@pytest.mark.parametrize("kind", ["lcu", "dilation"])
@pytest.mark.parametrize("name", MATRICES)
def test_block_encoding_top_left_is_a_over_alpha(name, kind):
    a = MATRICES[name]
    be = block_encoding(a, kind)
    assert [r.name for r in be.circuit.qregs] == ["system", "block"]
    dim = a.shape[0]
    # Convention of issue 3: (⟨0|_block ⊗ I) U (|0⟩_block ⊗ I) = A/α, with U the circuit's operator.
    u = _circuit_unitary(be.circuit)
    if be.circuit.num_qubits <= 6:
        cross = np.max(np.abs(Operator(be.circuit).data - u))
        assert cross < 1e-10, f"Aer and Operator disagree by {cross:.3g}"
    resid = np.max(np.abs(u[:dim, :dim] - a / be.alpha))
    assert resid < 1e-10, f"{name}/{kind}: worst block residual {resid:.3g}"
    eye = np.eye(u.shape[0])
    unitarity = np.max(np.abs(u @ u.conj().T - eye))
    hermiticity = np.max(np.abs(u - u.conj().T))
    assert unitarity < 1e-10, f"{name}/{kind}: ‖UU† − I‖max = {unitarity:.3g}"
    assert hermiticity < 1e-10, f"{name}/{kind}: ‖U − U†‖max = {hermiticity:.3g}"
    assert np.max(np.abs(be.matrix() - u)) < 1e-10
    # α must not undercut ‖A‖, else A/α is not a block of any unitary (from memory).
    assert be.alpha >= np.max(np.abs(np.linalg.eigvalsh(a))) * (1 - 1e-12)
    if kind == "lcu":
        op = pauli_decomposition(a)
        assert be.alpha == pytest.approx(np.sum(np.abs(op.coeffs)), rel=1e-14)
        assert be.n_pauli_terms == len(op)
        assert 2**be.n_block_qubits >= be.n_pauli_terms
    else:
        assert be.n_block_qubits == 1 and be.n_pauli_terms == 0


def test_dilation_alpha_choices():
    a = MATRICES["rbf-8"]
    norm = np.max(np.linalg.eigvalsh(a))
    be = dilation_block_encoding(a)
    # Gershgorin: the largest absolute row sum bounds every |λ| (from memory).
    assert be.alpha == pytest.approx(np.max(np.abs(a).sum(axis=1)))
    tight = dilation_block_encoding(a, alpha=norm)
    resid = np.max(np.abs(tight.encoded_block() - a / norm))
    assert resid < 1e-12, f"worst block residual {resid:.3g}"
    with pytest.raises(QgpError, match="below the matrix norm"):
        dilation_block_encoding(a, alpha=0.9 * norm)


def test_lcu_encoding_of_cao_matrix_is_small():
    be = lcu_block_encoding(CAO_MATRIX)
    assert be.n_pauli_terms == 4 and be.n_block_qubits == 2
    assert be.alpha == pytest.approx(8.0)  # 3.75 + 1.25 + 0.75 + 2.25
