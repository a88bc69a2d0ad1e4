"""The QSVT circuit (qgp.circuits.qsvt) against numpy.

Sources: the block of the QSVT sequence is the QSP polynomial of A/α (Gilyén, Su, Low & Wiebe,
STOC 2019, Thm. 17 and Cor. 18; Martyn, Rossi, Tan & Chuang, PRX Quantum 2, 040203 (2021),
Sec. IV); the numpy side is V·diag(f(λ/α))·Vᵀ with f evaluated by numpy.polynomial.chebyshev
from the target's coefficients, the circuit side qiskit's Operator (or Aer's statevector).
Tolerances: the gate and simulation forms are one operator in double precision (1e-10, the
issue's figure; the LCU's gate form is synthesised from controlled Paulis, measured 3e-13);
block = f(A/α) to 1e-9 (the phase factors' residual is ≤ 1e-12 on the grid, measured).
"""

import numpy as np
import pytest
from numpy.polynomial import chebyshev as C

from qgp.circuits.encoding import dilation_block_encoding, lcu_block_encoding
from qgp.circuits.qsp import qsp_phases
from qgp.circuits.qsvt import qsvt_block, qsvt_circuit, qsvt_calls
from qgp.readout.simulate import engine_scope, run_statevectors

ENCODINGS = {"dilation": dilation_block_encoding, "lcu": lcu_block_encoding}


def _spd(n: int, seed: int) -> np.ndarray:
    x = np.random.default_rng(seed).normal(size=(n, n))
    return x @ x.T / n + 0.5 * np.eye(n)


def _kernel_matrix(n: int) -> np.ndarray:
    """RBF kernel (scikit-learn's) on the first n rows of scikit-learn's diabetes data, + 0.1·I."""
    from sklearn.datasets import load_diabetes
    from sklearn.gaussian_process.kernels import RBF

    X = load_diabetes().data[:n, :3]
    X = (X - X.mean(axis=0)) / X.std(axis=0)
    return RBF(length_scale=1.5)(X) + 0.1 * np.eye(n)


def _target(degree: int, seed: int, peak: float) -> np.ndarray:
    """Random Chebyshev coefficients of parity degree mod 2, scaled to max |f| = peak."""
    c = np.zeros(degree + 1)
    c[degree % 2 :: 2] = np.random.default_rng(seed).normal(size=len(c[degree % 2 :: 2])) / (1 + np.arange(len(c[degree % 2 :: 2])))
    grid = np.cos(np.linspace(0, np.pi, 4001))
    return c * peak / np.max(np.abs(C.chebval(grid, c)))


def _reference(A: np.ndarray, alpha: float, coeffs: np.ndarray) -> np.ndarray:
    lam, V = np.linalg.eigh(A)
    return (V * C.chebval(lam / alpha, coeffs)) @ V.T


def _choi(qc):
    """Aer's statevector of qc applied to half of a maximally entangled state on 2q qubits: equal
    for two circuits exactly when their operators are equal (the Choi–Jamiołkowski isomorphism)."""
    from qiskit import QuantumCircuit

    q = qc.num_qubits
    full = QuantumCircuit(2 * q)
    for i in range(q):
        full.h(q + i)
        full.cx(q + i, i)
    full.compose(qc, qubits=range(q), inplace=True)
    with engine_scope("aer"):
        [sv] = run_statevectors([full])
    return np.asarray(sv)


@pytest.mark.parametrize("encoding", list(ENCODINGS))
@pytest.mark.parametrize("degree", [1, 2, 5, 8])
def test_gate_and_simulation_forms_are_one_operator(encoding, degree):
    be = ENCODINGS[encoding](_spd(4, degree))
    phases = qsp_phases(_target(degree, degree, 0.8)).phases
    gate, sim = qsvt_circuit(be, phases, "gate"), qsvt_circuit(be, phases, "simulation")
    # √(2^q) turns the Choi amplitudes back into matrix entries.
    worst = float(np.max(np.abs(_choi(gate) - _choi(sim)))) * np.sqrt(2**gate.num_qubits)
    assert worst <= 1e-10, f"gate and simulation forms differ by {worst:.3g}"


@pytest.mark.parametrize("encoding", list(ENCODINGS))
@pytest.mark.parametrize(
    "matrix", [pytest.param(lambda: _spd(4, 7), id="random-spd-4"), pytest.param(lambda: _kernel_matrix(8), id="diabetes-rbf-8")]
)
@pytest.mark.parametrize("degree", [3, 4, 21])
def test_block_is_the_polynomial_of_the_matrix(encoding, matrix, degree):
    A = matrix()
    m = A.shape[0].bit_length() - 1
    be = ENCODINGS[encoding](A)
    coeffs = _target(degree, 100 + degree, 0.9)
    factors = qsp_phases(coeffs)
    assert qsvt_calls(factors.phases) == degree
    # The LCU's gate form is proved equal to its simulation form above (4 × 4); evolving its
    # multi-controlled Paulis column by column at 8 × 8 takes ~20 s, so it is not repeated here.
    for form in ("gate", "simulation") if encoding == "dilation" else ("simulation",):
        block = qsvt_block(qsvt_circuit(be, factors.phases, form), m)
        worst = float(np.max(np.abs(block - _reference(A, be.alpha, coeffs))))
        assert worst <= 1e-9, f"{form} form: block differs from f(A/α) by {worst:.3g}"


@pytest.mark.parametrize("encoding", list(ENCODINGS))
def test_numpy_engine_matches_aer_on_the_simulation_form(encoding):
    # Aer's statevector is the reference for every engine (tests/readout/test_engine.py's rule).
    from qgp.circuits.encoding import amplitude_encoding
    from qiskit import QuantumCircuit

    A = _kernel_matrix(8)
    be = ENCODINGS[encoding](A)
    body = qsvt_circuit(be, qsp_phases(_target(31, 5, 0.9)).phases, "simulation")
    v = np.random.default_rng(3).normal(size=8)
    qc = QuantumCircuit(*body.qregs)
    qc.compose(amplitude_encoding(v / np.linalg.norm(v), native=True), qubits=qc.qregs[0][:], inplace=True)
    qc.compose(body, inplace=True)
    out = {}
    for name in ("numpy", "aer"):
        with engine_scope(name) as used:
            [out[name]] = run_statevectors([qc])
        assert used == [name]
    worst = float(np.max(np.abs(np.asarray(out["numpy"]) - np.asarray(out["aer"]))))
    assert worst <= 1e-12, f"numpy engine differs from Aer by {worst:.3g}"


def test_flag_marks_exactly_the_post_selected_block():
    # P(flag = 1) = ‖f(A/α)b‖²: the flag is set on block = 0 (signal included) and nowhere else.
    from qgp.circuits.encoding import amplitude_encoding
    from qiskit import QuantumCircuit
    from qiskit.quantum_info import Statevector

    A = _spd(4, 11)
    be = dilation_block_encoding(A)
    coeffs = _target(12, 4, 0.9)
    body = qsvt_circuit(be, qsp_phases(coeffs).phases, "gate")
    b = np.random.default_rng(2).normal(size=4)
    b /= np.linalg.norm(b)
    qc = QuantumCircuit(*body.qregs)
    qc.compose(amplitude_encoding(b), qubits=qc.qregs[0][:], inplace=True)
    qc.compose(body, inplace=True)
    sv = Statevector(qc).data.reshape(-1, 2, 4)  # [block, flag, system]
    p_flag = float(np.sum(np.abs(sv[:, 1, :]) ** 2))
    expected = float(np.sum((_reference(A, be.alpha, coeffs) @ b) ** 2))
    assert abs(p_flag - expected) <= 1e-10, f"P(flag = 1) = {p_flag}, ‖f(A/α)b‖² = {expected}"
    assert float(np.max(np.abs(sv[1:, 1, :]))) <= 1e-12  # flag = 1 only with block = 0


def test_native_lcu_calls_are_the_same_operator(monkeypatch):
    # Wide LCUs run PREPARE · SELECT multiplexer · PREPARE† per call instead of one fused matrix;
    # forced here at 4 × 4 so both paths meet the gate form.
    import qgp.circuits.qsvt as qsvt

    be = lcu_block_encoding(_spd(4, 21))
    phases = qsp_phases(_target(6, 21, 0.8)).phases
    monkeypatch.setattr(qsvt, "_MAX_FUSED_QUBITS", 0)
    native = qsvt_circuit(be, phases, "simulation")
    assert any(i.operation.label == "select" for i in native.data)
    worst = float(np.max(np.abs(_choi(native) - _choi(qsvt_circuit(be, phases, "gate"))))) * np.sqrt(2**native.num_qubits)
    assert worst <= 1e-10, f"native LCU calls differ from the gate form by {worst:.3g}"


@pytest.mark.parametrize("encoding", list(ENCODINGS))
@pytest.mark.parametrize("degree", [3, 4])
def test_probe_controlled_forms_are_one_operator(encoding, degree):
    # The Hadamard test's controlled sequence: gate form (controlled H, RZ and U on probe = 0)
    # against the simulation form (multiplexers over the probe), the whole operator via Choi states.
    be = ENCODINGS[encoding](_spd(4, 30 + degree))
    phases = qsp_phases(_target(degree, degree, 0.8)).phases
    gate = qsvt_circuit(be, phases, "gate", probe=True)
    sim = qsvt_circuit(be, phases, "simulation", probe=True)
    worst = float(np.max(np.abs(_choi(gate) - _choi(sim)))) * np.sqrt(2**gate.num_qubits)
    assert worst <= 1e-10, f"probe-controlled gate and simulation forms differ by {worst:.3g}"
