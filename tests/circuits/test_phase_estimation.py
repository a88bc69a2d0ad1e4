"""Phase estimation and its three oracles (qgp.circuits.phase_estimation)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
from qiskit import QuantumCircuit, transpile
from qiskit.quantum_info import Operator, Statevector
from qiskit_aer import AerSimulator

from qgp.circuits.encoding import block_encoding, dilation_block_encoding, pauli_decomposition
from qgp.errors import QgpError
from qgp.circuits.methods.exact import evolution_clock_eigenvalues, exact_oracle
from qgp.circuits.methods.trotter import controlled_trotter_step, product_formula_matrix, trotter_oracle
from qgp.circuits.methods.walk import controlled_walk, walk_clock_eigenvalues, walk_matrix, walk_oracle
from qgp.circuits.phase_estimation import (
    derived_evolution_time,
    inverse_phase_estimation_circuit,
    phase_estimation_circuit,
    phase_oracle,
)
from qgp.settings import CircuitSettings


def _orthogonal(n: int, seed: int) -> np.ndarray:
    q, r = np.linalg.qr(np.random.default_rng(seed).normal(size=(n, n)))
    return q * np.sign(np.diag(r))


def _rbf_kernel_matrix(n: int, lengthscale: float, noise: float, seed: int) -> np.ndarray:
    """K + σ²I for the squared-exponential kernel exp(−|x−x'|²/2ℓ²) on random 1-D inputs."""
    x = np.sort(np.random.default_rng(seed).uniform(0, 1, n))
    return np.exp(-0.5 * (x[:, None] - x[None, :]) ** 2 / lengthscale**2) + noise * np.eye(n)


def _random_spd(n: int, seed: int) -> np.ndarray:
    g = np.random.default_rng(seed).normal(size=(n, n))
    return g @ g.T / n + 0.2 * np.eye(n)


def _clock_distribution(qpe: QuantumCircuit, start: np.ndarray, m: int, c: int) -> np.ndarray:
    """P(clock = k) after phase estimation from |0⟩_block|0⟩_clock|start⟩_system."""
    n_rest = qpe.num_qubits - m - c  # block qubits, most significant
    init = np.zeros(2**qpe.num_qubits, dtype=complex)
    init[: 2**m] = start
    sv = Statevector(init).evolve(qpe).data.reshape(2**n_rest, 2**c, 2**m)
    return np.sum(np.abs(sv) ** 2, axis=(0, 2))


def _unitary(gate) -> np.ndarray:
    """A gate's matrix via Aer's unitary simulator (fast for multi-controlled gates)."""
    sim = AerSimulator(method="unitary")
    qc = QuantumCircuit(gate.num_qubits)
    qc.append(gate, qc.qubits)
    qc.save_unitary()
    return np.asarray(sim.run(transpile(qc, sim, optimization_level=0)).result().get_unitary())


# ---------------------------------------------------------------------------------------------
# Decoding and the evolution time


def test_derived_evolution_time_margin():
    # Issue 3: λ_hi·t/2π = 1 − 2^(1−c) keeps λ_hi two bins clear of the wrap to clock value 0.
    for c in (2, 4, 8):
        t = derived_evolution_time(3.0, c)
        assert 3.0 * t / (2 * np.pi) == pytest.approx(1 - 2.0 ** (1 - c), rel=1e-14)
        grid = evolution_clock_eigenvalues(c, t)
        assert grid[0] == 0.0 and grid[-1] > 3.0
    with pytest.raises(QgpError, match="at least 2 clock qubits"):
        derived_evolution_time(3.0, 1)


def test_walk_decoding_reads_the_circuits_clock_back_as_lambda():
    # Issue 10 asked for this in place of a symmetry check that held by construction. For
    # eigenvalues off the grid, the walk's clock distribution is read from the circuit; its most
    # likely value is within one bin of θ = arccos(λ/α) (Low & Chuang 2019: eigenphases ±θ;
    # Nielsen & Chuang §5.2: the nearest bin has probability ≥ 4/π²), so the decoded λ̃ is within
    # α·2π/2^c of λ (|d cos θ| ≤ |dθ|). The two branches mirror each other (W and u are real, so
    # the −θ branch is the complex conjugate of the +θ one): P(k) = P(2^c − k).
    m, c, alpha = 2, 5, 3.0
    lam = np.array([2.71, 1.03, -0.4, -2.2])
    q = _orthogonal(2**m, 5)
    a = (q * lam) @ q.T
    be = dilation_block_encoding(a, alpha=alpha)
    qpe = phase_estimation_circuit(walk_oracle(be, c, "simulation"))
    grid = walk_clock_eigenvalues(c, alpha)
    mirror = (-np.arange(2**c)) % 2**c
    for lam_i, u in zip(lam, q.T):
        p = _clock_distribution(qpe, u, m, c)
        asym = float(np.max(np.abs(p - p[mirror])))
        assert asym < 1e-10, f"λ = {lam_i}: P(k) and P(2^c − k) differ by {asym:.3g}"
        err = abs(float(grid[np.argmax(p)]) - lam_i)
        assert err <= alpha * 2 * np.pi / 2**c, f"λ = {lam_i}: decoded {grid[np.argmax(p)]:.4f} (error {err:.3g})"
    assert grid[0] == pytest.approx(alpha) and grid[2 ** (c - 1)] == pytest.approx(-alpha)


# ---------------------------------------------------------------------------------------------
# Phase estimation on exactly representable and on random phases


def test_exact_oracle_representable_phases_give_clock_basis_states():
    # Nielsen & Chuang §5.2: a phase φ = k/2^c is read out exactly as |k⟩.
    m, c, t = 2, 4, 1.3
    ks = np.array([1, 5, 10, 15])
    lam = 2 * np.pi * ks / (t * 2**c)
    q = _orthogonal(2**m, 7)
    a = (q * lam) @ q.T
    qpe = phase_estimation_circuit(exact_oracle(a, c, t))
    assert [r.name for r in qpe.qregs] == ["system", "clock"]
    for k, u in zip(ks, q.T):
        p = _clock_distribution(qpe, u, m, c)
        assert p[k] == pytest.approx(1.0, abs=1e-10), f"P(clock={k}) = {p[k]:.12f}"


def test_trotter_oracle_commuting_terms_is_exact():
    # A diagonal A has only I/Z Pauli terms, which commute, so one product-formula step is exact
    # (from memory: e^{X+Y} = e^X e^Y when [X, Y] = 0).
    m, c, t = 2, 4, 0.7
    ks = np.array([2, 3, 9, 14])
    lam = 2 * np.pi * ks / (t * 2**c)
    for order in (1, 2):
        for form in ("gate", "simulation"):
            qpe = phase_estimation_circuit(trotter_oracle(np.diag(lam), c, t, 1, order, form))
            for i, k in enumerate(ks):
                p = _clock_distribution(qpe, np.eye(2**m)[i], m, c)
                assert p[k] == pytest.approx(1.0, abs=1e-10), f"order {order} {form}: {p[k]:.12f}"


@pytest.mark.parametrize("form", ["gate", "simulation"])
def test_walk_representable_phases_split_between_both_branches(form):
    # Low & Chuang (2019): |0⟩|u⟩ is an equal superposition of the walk eigenvectors with
    # eigenphases ±arccos(λ/α), so with λ = α·cos(2πk/2^c) the clock reads k and 2^c − k,
    # each with probability 1/2.
    m, c, alpha = 2, 4, 4.0
    ks = np.array([1, 2, 3, 5])
    lam = alpha * np.cos(2 * np.pi * ks / 2**c)
    q = _orthogonal(2**m, 11)
    a = (q * lam) @ q.T
    be = dilation_block_encoding(a, alpha=alpha)
    qpe = phase_estimation_circuit(walk_oracle(be, c, form))
    assert [r.name for r in qpe.qregs] == ["system", "clock", "block"]
    for k, u in zip(ks, q.T):
        p = _clock_distribution(qpe, u, m, c)
        resid = max(abs(p[k] - 0.5), abs(p[2**c - k] - 0.5))
        assert resid < 1e-10, f"k={k}: P = {p[k]:.12f}, {p[2**c - k]:.12f}"


def test_random_phases_nearest_estimate_at_least_4_over_pi_squared():
    # Nielsen & Chuang §5.2.1: the c-bit estimate closest to φ has probability ≥ 4/π².
    m, c, t = 3, 5, 1.0
    rng = np.random.default_rng(2024)
    lam = rng.uniform(0.05, 2 * np.pi / t - 0.05, size=2**m)
    q = _orthogonal(2**m, 3)
    a = (q * lam) @ q.T
    qpe = phase_estimation_circuit(exact_oracle(a, c, t))
    worst = 1.0
    for lam_i, u in zip(lam, q.T):
        nearest = int(np.rint(lam_i * t / (2 * np.pi) * 2**c)) % 2**c
        worst = min(worst, _clock_distribution(qpe, u, m, c)[nearest])
    assert worst >= 4 / np.pi**2, f"smallest nearest-estimate probability {worst:.4f}"


# ---------------------------------------------------------------------------------------------
# The qubitization walk as placed in the circuit


WALK_MATRICES = {
    "spd-m2": _random_spd(4, 5),
    "rbf-4": _rbf_kernel_matrix(4, 0.4, 0.05, 1),
    "rbf-8": _rbf_kernel_matrix(8, 0.25, 0.1, 2),
}


@pytest.mark.parametrize("kind", ["dilation", "lcu"])
@pytest.mark.parametrize("name", WALK_MATRICES)
def test_controlled_walk_in_circuit_has_eigenphases_plus_minus_arccos(name, kind):
    # Low & Chuang, Quantum 3, 163 (2019): W = (2|0⟩⟨0|_block − I)·U rotates each span{|0⟩|u⟩,
    # W|0⟩|u⟩} with eigenvalues e^{±i·arccos(λ/α)}. Taken from the circuit itself (clock[0]'s
    # controlled W), so the reflection's sign is the one phase estimation sees: with −R the
    # phases would be ±(π − arccos(λ/α)).
    a = WALK_MATRICES[name]
    be = block_encoding(a, kind)
    qpe = phase_estimation_circuit(walk_oracle(be, 2, "gate"))
    clock0 = qpe.find_bit(qpe.qregs[1][0]).index
    [inst] = [i for i in qpe.data if i.operation.name != "h" and i.qubits[-1] == qpe.qubits[clock0]]
    cw = _unitary(inst.operation)
    dim = cw.shape[0] // 2
    off = np.max(np.abs(cw[:dim, :dim] - np.eye(dim))) + np.max(np.abs(cw[:dim, dim:]))
    assert off < 1e-10, f"control = 0 is not the identity: {off:.3g}"
    w = cw[dim:, dim:]
    assert np.max(np.abs(w - walk_matrix(be))) < 1e-10
    lam, vecs = np.linalg.eigh(a)
    worst = 0.0
    for lam_i, u in zip(lam, vecs.T):
        e1 = np.zeros(dim, dtype=complex)
        e1[: u.size] = u
        we1 = w @ e1
        e2 = we1 - (e1.conj() @ we1) * e1
        basis = np.column_stack([e1, e2 / np.linalg.norm(e2)])
        restricted = basis.conj().T @ w @ basis
        invariance = np.max(np.abs(w @ basis - basis @ restricted))
        phases = np.sort(np.angle(np.linalg.eigvals(restricted)))
        theta = np.arccos(lam_i / be.alpha)
        worst = max(worst, invariance, *np.abs(phases - [-theta, theta]))
    assert worst < 1e-10, f"{name}/{kind}: worst eigenphase or invariance residual {worst:.3g}"


def test_walk_simulation_form_matches_gate_form():
    a = WALK_MATRICES["rbf-4"]
    for kind in ("dilation", "lcu"):
        be = block_encoding(a, kind)
        gate = walk_oracle(be, 3, "gate")
        fused = walk_oracle(be, 3, "simulation")
        for j in range(3):
            resid = np.max(np.abs(_unitary(gate.powers[j]) - Operator(fused.powers[j]).data))
            assert resid < 1e-10, f"{kind}: controlled W^{2**j} differs by {resid:.3g}"
    assert np.max(np.abs(_unitary(controlled_walk(be)) - _unitary(gate.powers[0]))) < 1e-12


# ---------------------------------------------------------------------------------------------
# Exact and Trotter oracles


@pytest.mark.parametrize("form", ["gate", "simulation"])
def test_exact_oracle_powers(form):
    # The simulation form builds its gates only when read (they are not in its circuits).
    a = _rbf_kernel_matrix(4, 0.3, 0.1, 3)
    t = 0.9
    oracle = exact_oracle(a, 4, t, form)
    assert len(oracle.powers) == 4
    for j, gate in enumerate(oracle.powers):
        u = Operator(gate).data
        want = scipy.linalg.expm(1j * a * t * 2**j)  # e^{+iAt·2^j}: the sign matters
        resid = np.max(np.abs(u[4:, 4:] - want)) + np.max(np.abs(u[:4, :4] - np.eye(4)))
        assert resid < 1e-10, f"power 2^{j}: residual {resid:.3g}"


@pytest.mark.parametrize("order", [1, 2])
def test_controlled_trotter_step_matches_product_formula(order):
    a = _rbf_kernel_matrix(4, 0.3, 0.1, 5) + 0.3  # a constant shift adds an identity term
    op = pauli_decomposition(a)
    assert any(not p.x.any() and not p.z.any() for p in op.paulis)
    delta = 0.37
    u = Operator(controlled_trotter_step(op, delta, order)).data
    want = product_formula_matrix(op, delta, 1, order)
    resid = np.max(np.abs(u[4:, 4:] - want)) + np.max(np.abs(u[:4, :4] - np.eye(4)))
    # The identity term's phase must survive control: it is a relative phase between blocks.
    assert resid < 1e-12, f"controlled step differs from the product formula by {resid:.3g}"


def test_trotter_forms_agree():
    a = _rbf_kernel_matrix(4, 0.3, 0.1, 6)
    t = derived_evolution_time(np.max(np.abs(a).sum(1)), 3)
    gate = trotter_oracle(a, 3, t, 2, 2, "gate")
    fused = trotter_oracle(a, 3, t, 2, 2, "simulation")
    for j in range(3):
        resid = np.max(np.abs(Operator(gate.powers[j]).data - Operator(fused.powers[j]).data))
        assert resid < 1e-10, f"controlled power 2^{j} differs by {resid:.3g}"


@pytest.mark.parametrize("order", [1, 2])
def test_trotter_error_falls_at_the_order_rate(order):
    # Product-formula error ‖S_p(t/n)^n − e^{iAt}‖ = O(t^{p+1}/n^p) for order p
    # (from memory; Lie–Trotter p = 1, Strang splitting p = 2).
    a = _rbf_kernel_matrix(8, 0.3, 0.1, 9)
    op = pauli_decomposition(a)
    hs = [p.to_matrix() * c.real for p, c in zip(op.paulis, op.coeffs)]
    assert any(np.max(np.abs(x @ y - y @ x)) > 1e-3 for x in hs for y in hs), "terms commute"
    t = derived_evolution_time(float(np.max(np.linalg.eigvalsh(a))), 4)
    exact = scipy.linalg.expm(1j * a * t)
    steps = np.array([8, 16, 32, 64, 128])
    errors = np.array([np.linalg.norm(product_formula_matrix(op, t, n, order) - exact, 2) for n in steps])
    slope = np.polyfit(np.log(steps), np.log(errors), 1)[0]
    assert abs(slope + order) < 0.1, f"order {order}: log-log slope {slope:.3f}, errors {errors}"


@pytest.mark.parametrize(
    "make",
    [
        pytest.param(lambda a: exact_oracle(a, 2, 0.8), id="exact"),
        pytest.param(lambda a: trotter_oracle(a, 2, 0.8, 2, 2, "gate"), id="trotter-gate"),
        pytest.param(lambda a: trotter_oracle(a, 2, 0.8, 2, 1, "simulation"), id="trotter-simulation"),
        pytest.param(lambda a: walk_oracle(block_encoding(a, "dilation"), 2, "gate"), id="walk-dilation"),
        pytest.param(lambda a: walk_oracle(block_encoding(a, "lcu"), 2, "gate"), id="walk-lcu"),
        pytest.param(lambda a: walk_oracle(block_encoding(a, "lcu"), 2, "simulation"), id="walk-lcu-fused"),
    ],
)
def test_inverse_phase_estimation_undoes_phase_estimation(make):
    a = np.array([[1.2, 0.4], [0.4, 0.7]])
    oracle = make(a)
    forward = Operator(phase_estimation_circuit(oracle))
    backward = Operator(inverse_phase_estimation_circuit(oracle))
    resid = np.max(np.abs(forward.compose(backward).data - np.eye(2**forward.num_qubits)))
    assert resid < 1e-10, f"QPE⁻¹·QPE differs from I by {resid:.3g}"


# ---------------------------------------------------------------------------------------------
# Refusals


def test_phase_oracle_refusals():
    a = np.eye(2)
    with pytest.raises(QgpError, match="block encoding"):
        phase_oracle(a, CircuitSettings(clock_qubits=3, evolution="walk"), 1.0)
    with pytest.raises(QgpError, match="clock_qubits"):
        phase_oracle(a, CircuitSettings(clock_qubits=0, evolution="exact"), 1.0)
    with pytest.raises(QgpError, match="evolution_time"):
        phase_oracle(a, CircuitSettings(clock_qubits=3, evolution="exact", evolution_time=-1.0), 1.0)
    with pytest.raises(QgpError, match="trotter_steps"):
        trotter_oracle(a, 3, 1.0, 0, 1)
    with pytest.raises(QgpError, match="form"):
        trotter_oracle(a, 3, 1.0, 1, 1, form="fast")
