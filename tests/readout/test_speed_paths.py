"""The fast paths give the numbers of the plain gate-level path (correctness only; no timing).

Reference throughout: qiskit's own `Statevector` / `Operator` of the gate-form circuits — a
simulator independent of Aer and of every shortcut under test (multiplexers, native pieces,
the shared phase-estimation prefix, caches, the exact-oracle model without a circuit).

That a sweep stores the same numbers with 1 and 2 workers is checked in
tests/sweeps/test_sweeps.py::test_one_and_two_workers_store_the_same_numbers (not repeated here).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from qiskit import QuantumCircuit, QuantumRegister
from qiskit.circuit.library import UCRYGate
from qiskit.quantum_info import Operator, Statevector

import qgp.circuits.methods.walk as walk
import qgp.circuits.phase_estimation as pe
from qgp.circuits.encoding import (
    MultiplexerGate,
    amplitude_encoding,
    amplitude_encoding_matrix,
    block_encoding,
)
from qgp.readout.estimators import (
    PROBE,
    operators_from_reference_run,
    per_point_probabilities,
    reference_circuit,
    variance_circuit,
)
from qgp.readout.filter_model import model_operator
from qgp.readout.inference import SIMULATED_FORM, clear_caches, infer, unit_inputs as _unit_inputs
from qgp.circuits.inversion import FLAG, build_inversion, flag_rotation_circuit, rotation_angles, statevector_array
from qgp.classical.kernels import RBF
from qgp.classical.problem import build_problem
from qgp.settings import CircuitSettings, ReadoutSettings
from qgp.readout.simulate import is_native, run_statevector

TOL = 1e-10


def _spd(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, n))
    return x @ x.T / n + np.eye(n)


def _bounds(a: np.ndarray) -> tuple[float, float]:
    lam = np.linalg.eigvalsh(a)
    return float(lam[0]), float(lam[-1])


ORACLES = [
    pytest.param({"evolution": "exact"}, id="exact"),
    pytest.param({"evolution": "trotter", "trotter_steps": 2, "trotter_order": 2}, id="trotter"),
    pytest.param({"evolution": "walk", "encoding": "dilation"}, id="walk-dilation"),
    pytest.param({"evolution": "walk", "encoding": "lcu"}, id="walk-lcu"),
]


# -- building blocks -------------------------------------------------------------------------------


def test_multiplexer_gate_is_its_block_diagonal_matrix():
    rng = np.random.default_rng(3)
    mats = [np.linalg.qr(rng.normal(size=(4, 4)) + 1j * rng.normal(size=(4, 4)))[0] for _ in range(4)]
    gate = MultiplexerGate(mats)
    # Qubits [targets…, controls…]: index = target + 4·control, block k for control value k.
    want = np.zeros((16, 16), dtype=complex)
    for k, u in enumerate(mats):
        want[4 * k : 4 * k + 4, 4 * k : 4 * k + 4] = u
    assert np.max(np.abs(Operator(gate).data - want)) < 1e-14
    assert np.max(np.abs(Operator(gate.inverse()).data - want.conj().T)) < 1e-14
    # Aer's native multiplexer applies the same operator.
    qc = QuantumCircuit(4)
    psi = rng.normal(size=16) + 1j * rng.normal(size=16)
    psi /= np.linalg.norm(psi)
    qc.initialize(psi)
    qc.append(gate, range(4))
    assert np.max(np.abs(run_statevector(qc) - want @ psi)) < TOL


def test_native_amplitude_encoding_is_the_gate_form():
    v = np.random.default_rng(5).normal(size=16)
    gate = Operator(amplitude_encoding(v)).data
    assert np.max(np.abs(Operator(amplitude_encoding(v, native=True)).data - gate)) < 1e-14
    assert np.max(np.abs(amplitude_encoding_matrix(v) - gate)) < 1e-14


# -- the inversion circuit: simulation form on Aer against the gate form ----------------------------


@pytest.mark.parametrize("oracle", ORACLES)
@pytest.mark.parametrize("rotation", ["inverse", "inverse_sqrt"])
def test_simulation_form_on_aer_matches_gate_form(oracle, rotation):
    a = _spd(4, 7)
    s = CircuitSettings(clock_qubits=3, **oracle)
    b = np.array([0.3, -0.5, 0.7, 0.2])
    gate = build_inversion(a, s, rotation, _bounds(a), prepare=b, form="gate")
    fused = build_inversion(a, s, rotation, _bounds(a), prepare=b, form="simulation")
    assert is_native(fused.circuit), "the simulation form needs no transpiling"
    resid = np.max(np.abs(run_statevector(fused.circuit) - Statevector(gate.circuit).data))
    assert resid < TOL, f"worst amplitude residual {resid:.3g}"


def test_long_clock_register_splits_into_several_multiplexers(monkeypatch):
    a = _spd(4, 8)
    s = CircuitSettings(clock_qubits=5, evolution="exact")
    b = np.array([1.0, 0.5, -0.25, 0.1])
    whole = build_inversion(a, s, "inverse", _bounds(a), prepare=b, form="simulation")
    monkeypatch.setattr(pe, "_MAX_MULTIPLEXER_BYTES", 4 * 16 * 16)  # two 4×4 blocks: one clock bit each
    split = build_inversion(a, s, "inverse", _bounds(a), prepare=b, form="simulation")
    n_mux = [sum(i.operation.name == "multiplexer" for i in c.circuit.data) for c in (whole, split)]
    assert n_mux[1] > n_mux[0]
    assert np.max(np.abs(run_statevector(split.circuit) - run_statevector(whole.circuit))) < TOL
    assert np.max(np.abs(run_statevector(whole.circuit) - Statevector(
        build_inversion(a, s, "inverse", _bounds(a), prepare=b, form="gate").circuit).data)) < TOL


def test_native_lcu_walk_pieces_are_the_gate_level_walk(monkeypatch):
    # Above _MAX_FUSED_QUBITS the LCU walk runs as native pieces (fused PREPARE, multiplexed
    # controlled SELECT, diagonal reflection); lower the limit so small cases take that path.
    monkeypatch.setattr(walk, "_MAX_FUSED_QUBITS", 2)
    a = _spd(4, 4)
    be = block_encoding(a, "lcu")
    oracle = walk.walk_oracle(be, 2, "simulation")
    assert oracle.walk_pieces is not None and oracle.power_matrices is None
    resid = np.max(np.abs(Operator(oracle.repeats[0][0]).data - Operator(walk.controlled_walk(be)).data))
    assert resid < TOL, f"controlled W differs by {resid:.3g}"
    qpe = pe.phase_estimation_circuit(oracle)
    assert is_native(qpe)
    undo = Operator(qpe).compose(Operator(pe.inverse_phase_estimation_circuit(oracle))).data
    assert np.max(np.abs(undo - np.eye(undo.shape[0]))) < TOL


def test_native_lcu_walk_on_aer_applies_the_walk_matrix(monkeypatch):
    # 8 × 8: six block qubits, a 3-level split of PREPARE. qiskit's Operator of the gate-level
    # controlled W takes minutes here, so the reference is diag(I, W) with W = R·U assembled from
    # the Pauli terms and PREPARE's matrix (qgp.circuits.encoding), applied to random states on Aer.
    monkeypatch.setattr(walk, "_MAX_FUSED_QUBITS", 2)
    a = _spd(8, 8)
    be = block_encoding(a, "lcu")
    cw = walk.walk_oracle(be, 1, "simulation").repeats[0][0]
    w = walk.walk_matrix(be)
    rng = np.random.default_rng(1)
    for _ in range(3):
        psi = rng.normal(size=2 * w.shape[0]) + 1j * rng.normal(size=2 * w.shape[0])
        psi /= np.linalg.norm(psi)
        qc = QuantumCircuit(cw.num_qubits)
        qc.initialize(psi)
        qc.compose(cw.definition, inplace=True)
        dim = w.shape[0]
        want = np.concatenate((psi[:dim], w @ psi[dim:]))  # the control is the top qubit
        resid = np.max(np.abs(run_statevector(qc) - want))
        assert resid < TOL, f"residual {resid:.3g}"


def test_native_lcu_inversion_on_aer_matches_gate_form(monkeypatch):
    monkeypatch.setattr(walk, "_MAX_FUSED_QUBITS", 2)
    a = _spd(4, 11)
    s = CircuitSettings(clock_qubits=3, evolution="walk", encoding="lcu")
    b = np.array([0.6, 0.2, -0.7, 0.3])
    gate = build_inversion(a, s, "inverse", _bounds(a), prepare=b, form="gate")
    fused = build_inversion(a, s, "inverse", _bounds(a), prepare=b, form="simulation")
    assert fused.oracle.walk_pieces is not None
    resid = np.max(np.abs(run_statevector(fused.circuit) - Statevector(gate.circuit).data))
    assert resid < TOL, f"worst amplitude residual {resid:.3g}"


# -- the amortised read-out --------------------------------------------------------------------------


def _gate_operators(a, settings, bounds):
    """B and M the plain way: each gate-form circuit applied by qiskit to every basis input at
    once (the input register entangled with a copy, Σ_r |r⟩|r⟩/√N), read column by column."""
    inv = build_inversion(a, settings, "inverse", bounds, form="gate")
    sq = build_inversion(a, settings, "inverse_sqrt", bounds, form="gate")
    dim = a.shape[0]
    m = inv.n_system_qubits

    def columns(c):
        qc = QuantumCircuit(c.circuit.num_qubits + m)
        for i in range(m):
            qc.h(c.circuit.num_qubits + i)
            qc.cx(c.circuit.num_qubits + i, i)
        qc.compose(c.circuit, qubits=range(c.circuit.num_qubits), inplace=True)
        sv = Statevector(qc).data.reshape(dim, -1) * np.sqrt(dim)  # row r: the output for input r
        return [statevector_array(row, c) for row in sv]

    B = np.array([out[0, 1, 0, :] for out in columns(inv)]).T
    E = np.array([out[:, 1].reshape(-1) for out in columns(sq)]).T
    return B, E.conj().T @ E


@pytest.mark.parametrize("oracle", ORACLES)
def test_amortised_operators_match_gate_level_circuits(oracle):
    a = _spd(4, 13)
    s = CircuitSettings(clock_qubits=3, **oracle)
    bounds = _bounds(a)
    inv = build_inversion(a, s, "inverse", bounds, form="simulation")
    sq = build_inversion(a, s, "inverse_sqrt", bounds, form="simulation", oracle=inv.oracle)
    B_ref, M_ref = _gate_operators(a, s, bounds)
    shared = operators_from_reference_run(inv, sq)  # one run: the prefix saved before the rotation
    separate = operators_from_reference_run(inv, sq, share_prefix=False)  # two reference circuits
    for name, ops in (("shared prefix", shared), ("two circuits", separate)):
        rb, rm = np.max(np.abs(ops.B - B_ref)), np.max(np.abs(ops.M - M_ref))
        assert max(rb, rm) < TOL, f"{name}: B differs by {rb:.3g}, M by {rm:.3g}"
    assert is_native(reference_circuit(inv)) and is_native(reference_circuit(sq))


@pytest.mark.parametrize("oracle", ORACLES)
def test_split_reference_register_matches_gate_level_circuits(oracle):
    # A reference register split into runs of 2^r′ columns (qgp.readout.estimators._split_reference_operators)
    # is the same linear map applied a block of basis columns at a time, and M = E†E is read from the
    # uncomputed circuit P₀U†(Σ g_k²Π_k)UP₀: both equal qiskit's gate-level operators to round-off.
    a = _spd(4, 13)
    s = CircuitSettings(clock_qubits=3, **oracle)
    bounds = _bounds(a)
    inv = build_inversion(a, s, "inverse", bounds, form="simulation")
    sq = build_inversion(a, s, "inverse_sqrt", bounds, form="simulation", oracle=inv.oracle)
    B_ref, M_ref = _gate_operators(a, s, bounds)
    for r in (2, 1, 0):
        ops = operators_from_reference_run(inv, sq, reference_qubits=r)
        rb, rm = np.max(np.abs(ops.B - B_ref)), np.max(np.abs(ops.M - M_ref))
        assert max(rb, rm) < TOL, f"r′ = {r}: B differs by {rb:.3g}, M by {rm:.3g}"
        assert [(x["runs"], x["columns_per_run"]) for x in ops.simulation_runs] == [(2 ** (2 - r), 2**r)]


def test_circuits_built_separately_do_not_share_a_prefix():
    a = _spd(4, 14)
    s = CircuitSettings(clock_qubits=3, evolution="exact")
    inv = build_inversion(a, s, "inverse", _bounds(a), form="simulation")
    sq = build_inversion(a, s, "inverse_sqrt", _bounds(a), form="simulation")  # its own oracle
    from qgp.readout.estimators import _shares_prefix

    assert not _shares_prefix(inv, sq)
    assert _shares_prefix(inv, build_inversion(a, s, "inverse_sqrt", _bounds(a), form="simulation", oracle=inv.oracle))


# -- infer: caches, per-point circuits, the exact-oracle model ---------------------------------------


def _problem(n_test: int = 5):
    x = np.linspace(0.0, 1.0, 4)
    y = np.sin(3 * x)
    return build_problem(x, y, RBF(signal_variance=1.0, lengthscale=0.4), noise_variance=0.1, X_test=np.linspace(-0.1, 1.1, n_test))


def _same(r1, r2) -> float:
    return max(
        np.max(np.abs(r1.mean_quantum - r2.mean_quantum)),
        np.max(np.abs(r1.variance_quantum - r2.variance_quantum)),
        np.max(np.abs(r1.p0 - r2.p0)),
        np.max(np.abs(r1.p_flag - r2.p_flag)),
    )


@pytest.mark.parametrize("oracle", ORACLES)
def test_cached_infer_gives_the_cold_numbers(oracle):
    p = _problem()
    s = CircuitSettings(clock_qubits=3, **oracle)
    clear_caches()
    cold = infer(p, s, ReadoutSettings(), progress=None)
    warm = infer(p, s, ReadoutSettings(), progress=None)  # circuits and B, M from the caches
    assert _same(cold, warm) == 0.0
    assert cold.summary()["simulated_form"] == SIMULATED_FORM == "simulation"
    # Another seed and shot count reuse the operators: same exact probabilities.
    shots = infer(p, s, ReadoutSettings(shots=500, seed=3), progress=None)
    assert np.max(np.abs(shots.p0 - cold.p0)) == 0.0


def test_per_point_circuits_match_gate_level_hadamard_tests():
    p = _problem(3)
    s = CircuitSettings(clock_qubits=3, evolution="exact")
    bounds = _bounds(p.A_padded)
    yhat, _, khat, _ = _unit_inputs(p)
    inv = build_inversion(p.A_padded, s, "inverse", bounds, form="simulation")
    sq = build_inversion(p.A_padded, s, "inverse_sqrt", bounds, form="simulation", oracle=inv.oracle)
    qpe = pe.phase_estimation_circuit(inv.oracle)
    p0, p1, pf = per_point_probabilities(qpe, inv, sq.circuit, sq, yhat, khat)

    # Reference: the Hadamard test written out at gate level (controlled RY-tree preparations,
    # gate-form phase estimation, uniformly controlled RY), simulated by qiskit.
    gate_qpe = pe.phase_estimation_circuit(pe.phase_oracle(p.A_padded, s, bounds[1], form="gate"))
    gate_sq = build_inversion(p.A_padded, s, "inverse_sqrt", bounds, form="gate")
    m, c = inv.n_system_qubits, s.clock_qubits
    angles = np.concatenate((rotation_angles(inv.flag_amplitudes), np.zeros(2**c)))
    for j in range(khat.shape[1]):
        regs = [QuantumRegister(m, "system"), QuantumRegister(c, "clock"), QuantumRegister(1, FLAG)]
        probe = QuantumRegister(1, PROBE)
        qc = QuantumCircuit(*regs, probe)
        qc.h(probe[0])
        qc.append(amplitude_encoding(yhat).to_gate().control(1, ctrl_state=0), [probe[0], *regs[0]])
        qc.append(amplitude_encoding(khat[:, j]).to_gate().control(1, ctrl_state=1), [probe[0], *regs[0]])
        qc.compose(gate_qpe, qubits=[*regs[0], *regs[1]], inplace=True)
        rot = flag_rotation_circuit(angles, "gate")
        assert isinstance(rot.data[0].operation, UCRYGate)
        qc.compose(rot, qubits=[*regs[1], probe[0], regs[2][0]], inplace=True)
        qc.cx(probe[0], regs[2][0])
        qc.compose(gate_qpe.inverse(), qubits=[*regs[0], *regs[1]], inplace=True)
        qc.h(probe[0])
        arr = Statevector(qc).data.reshape(2, -1)
        want = [np.sum(np.abs(statevector_array(arr[b], inv)[0, 1, 0, :]) ** 2) for b in (0, 1)]
        var = Statevector(variance_circuit(gate_sq.circuit, khat[:, j]).decompose(reps=2)).data
        want_f = np.sum(np.abs(statevector_array(var, gate_sq)[:, 1]) ** 2)
        resid = max(abs(p0[j] - want[0]), abs(p1[j] - want[1]), abs(pf[j] - want_f))
        assert resid < TOL, f"test point {j}: residual {resid:.3g}"


@pytest.mark.parametrize(
    "settings",
    [
        CircuitSettings(clock_qubits=4, evolution="walk", encoding="dilation"),
        CircuitSettings(clock_qubits=4, evolution="trotter", trotter_steps=3),
        CircuitSettings(clock_qubits=5, evolution="walk", encoding="lcu", filter_floor=0.2),
        CircuitSettings(clock_qubits=4, evolution="trotter", evolution_time=1.3),
    ],
)
@pytest.mark.parametrize("rotation", ["inverse", "inverse_sqrt"])
def test_exact_oracle_model_needs_no_circuit(settings, rotation):
    # The error budget's exact-oracle stage used to build the exact-oracle circuits; the model
    # needs only their constants, which must be the same numbers.
    from dataclasses import replace

    a = _spd(4, 17)
    bounds = _bounds(a)
    from qgp.circuits.inversion import budget_reference_model
    from qgp.circuits.methods import BUDGET_REFERENCE

    assert BUDGET_REFERENCE == "exact"
    built = build_inversion(a, replace(settings, evolution="exact", trotter_steps=1), rotation, bounds, form="simulation")
    model = budget_reference_model(settings, rotation, bounds)
    assert model.scale == built.scale
    assert model.evolution_time == built.evolution_time
    assert np.array_equal(model.clock_eigenvalues, built.clock_eigenvalues)
    assert np.array_equal(model.admitted, built.admitted)
    assert np.array_equal(model_operator(model, a), model_operator(built, a))


def test_model_operators_share_work_without_mixing_models():
    # One eigendecomposition and the weights shared between models with the same phases: each
    # operator is still the one model_operator gives alone — across an exact pair, a walk circuit
    # (other phases, other clock grid) and a QSVT circuit (its polynomial).
    from qgp.readout.filter_model import model_operators

    a = _spd(4, 23)
    bounds = _bounds(a)
    exact = CircuitSettings(clock_qubits=4, evolution="exact")
    models = [
        build_inversion(a, exact, "inverse", bounds, form="simulation"),
        build_inversion(a, exact, "inverse_sqrt", bounds, form="simulation"),
        build_inversion(a, CircuitSettings(clock_qubits=5), "inverse", bounds, form="simulation"),
        build_inversion(a, CircuitSettings(method="qsvt", clock_qubits=0, degree=21), "inverse_sqrt", bounds, form="simulation"),
    ]
    together = model_operators(models, a)
    for model, got in zip(models, together):
        alone = model_operator(model, a)
        assert np.max(np.abs(got - alone)) < 1e-14, (model.settings.evolution, model.rotation)


# -- the benchmark command -------------------------------------------------------------------------


@pytest.mark.slow
def test_bench_quick_json_runs(capsys):
    from qgp.tools.cli import main

    assert main(["bench", "--quick", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["mode"] == "quick"
    for key in ("amortised_speedup", "amortised_vs_batched", "classical_ratio", "sweep_speedup_2_workers",
                "largest_qubits_60s", "peak_memory_mb", "floor_ratio_17q", "floor_ratio_24q", "large_n",
                "qsvt_calls_per_second", "qsvt_degree_1000_seconds"):
        assert key in doc["figures"]
    assert set(doc["figures"]["large_n"]) == {"n", "test_points", "seconds", "strategy", "engine"}
    # The engine and Aer read the same circuit in the floor case.
    assert doc["floor"]["17q"]["max_abs_difference"] < 1e-12
    # And the same QSVT circuits (inversion and reference register), every call fused at n = 16.
    qsvt = doc["qsvt"]["call_rate"]
    assert qsvt["fused"] and qsvt["fused_calls"] == qsvt["block_encoding_calls"]
    assert max(qsvt["inversion"]["max_abs_difference"], qsvt["reference"]["max_abs_difference"]) < 1e-12
    # Same answers from every strategy: the speed comparison is between equal computations.
    assert doc["amortised"]["per_point_naive"]["max_abs_difference"] < TOL
    assert doc["amortised"]["batched_max_abs_difference"] < TOL
    assert doc["sweep"]["stored_numbers_max_abs_difference"] < 1e-9


# -- the simulator front end -------------------------------------------------------------------------


@pytest.mark.parametrize("native", [True, False], ids=["native", "transpiled"])
def test_global_phase_is_counted_once(native):
    # Reference: qiskit's Statevector. The save appended without copying the circuit once added
    # the circuit's global phase twice; transpiling (the gate form) sets a global phase.
    qc = QuantumCircuit(2, global_phase=0.7)
    qc.h(0)
    qc.cx(0, 1)
    if native:
        qc.rz(0.3, 1)
    else:
        qc.append(UCRYGate([0.4, 1.1]), [0, 1])  # not one of Aer's instructions: transpiled
    assert is_native(qc) is native
    worst = float(np.max(np.abs(run_statevector(qc) - Statevector(qc).data)))
    assert worst < TOL, f"worst residual {worst:.3g}"


def test_custom_gate_named_like_an_aer_instruction_is_unrolled():
    # An OpenQASM file may define a gate called `unitary` (qgp's own export does): Aer must run
    # its body, not its own matrix instruction of that name, at the top level and inside
    # another gate's body. Reference: qiskit's Statevector.
    from qiskit import qasm3

    text = """OPENQASM 3.0;
include "stdgates.inc";
gate unitary a, b { h a; cx a, b; }
gate pair a, b { unitary b, a; x b; }
qubit[2] q;
pair q[1], q[0];
unitary q[0], q[1];
"""
    qc = qasm3.loads(text)
    assert not is_native(qc)
    worst = float(np.max(np.abs(run_statevector(qc) - Statevector(qc).data)))
    assert worst < TOL, f"worst residual {worst:.3g}"


def test_small_engine_runs_use_one_thread_and_blas_is_limited_inside():
    # Common practice (OpenBLAS's idle threads spin): below the parallel threshold a run gets one thread
    # for its FFTs and its BLAS calls; above it, the cores. threadpoolctl reports the limit in force.
    from threadpoolctl import threadpool_info

    from qgp.readout.simulate import PARALLEL_THRESHOLD_QUBITS, _engine_threads, _threads, blas_threads

    assert _engine_threads(PARALLEL_THRESHOLD_QUBITS - 1) == 1
    assert _engine_threads(PARALLEL_THRESHOLD_QUBITS) == _threads()
    with blas_threads(1):
        assert all(lib["num_threads"] == 1 for lib in threadpool_info() if lib["user_api"] == "blas")
