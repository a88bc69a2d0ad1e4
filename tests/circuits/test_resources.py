"""Resource accounting of the inversion circuits (qgp.circuits.resources)."""

from __future__ import annotations

import json
import math
from types import SimpleNamespace

import numpy as np
import pytest
from qiskit import transpile
from qiskit.quantum_info import SparsePauliOp

from qgp.errors import QgpError
from qgp.circuits.inversion import build_inversion
from qgp.circuits.resources import (
    BASES,
    MAX_ORACLE_CALLS,
    OPTIMIZATION_LEVEL,
    gate_inversion,
    inference_resources,
    inversion_resources,
    resources_of,
)
from qgp.settings import CircuitSettings

# Cao, Daskin, Frankel & Kais, Mol. Phys. 110, 1675 (2012), in the Pauli form issue 3 gives
# (qiskit label order): eigenvalues 1, 2, 4, 8.
CAO_TERMS = [("II", 3.75), ("XZ", 1.25), ("YY", 0.75), ("ZX", 2.25)]
CAO = SparsePauliOp.from_list(CAO_TERMS).to_matrix().real
CAO_BOUNDS = (1.0, 8.0)


def _random_spd(m: int, seed: int) -> np.ndarray:
    g = np.random.default_rng(seed).normal(size=(2**m, 2**m))
    return g @ g.T / 2**m + 0.5 * np.eye(2**m)


SPD = _random_spd(2, 7)
SPD_BOUNDS = (0.9 * np.linalg.eigvalsh(SPD)[0], 1.1 * np.linalg.eigvalsh(SPD)[-1])
B = np.random.default_rng(8).normal(size=4)

ORACLES = {
    "exact": CircuitSettings(clock_qubits=3, evolution="exact"),
    "trotter": CircuitSettings(clock_qubits=3, evolution="trotter", trotter_steps=2, trotter_order=2),
    "walk-dilation": CircuitSettings(clock_qubits=3, evolution="walk", encoding="dilation"),
    "walk-lcu": CircuitSettings(clock_qubits=3, evolution="walk", encoding="lcu"),
}


@pytest.mark.parametrize("oracle", list(ORACLES))
def test_qubit_totals_are_system_clock_flag_block(oracle):
    # Register layout of issue 3 / qgp.circuits.inversion: system (m) | clock (c) | flag (1) | block (b);
    # b = 0 without a block encoding, 1 for the dilation, ⌈log2 T⌉ for the LCU over T = 4 Pauli
    # terms of the Cao matrix (the paper's Pauli form has 4 terms).
    s = ORACLES[oracle]
    res = inversion_resources(CAO, s, "inverse", CAO_BOUNDS)
    b = {"exact": 0, "trotter": 0, "walk-dilation": 1, "walk-lcu": math.ceil(math.log2(len(CAO_TERMS)))}[oracle]
    q = res.qubits
    assert q["total"] == 2 + s.clock_qubits + 1 + b, q
    assert (q["system"], q["clock"], q["flag"], q.get("block", 0)) == (2, s.clock_qubits, 1, b), q
    assert res.n_block_qubits == b


@pytest.mark.parametrize("rotation, uncompute, n_pe", [("inverse", None, 2), ("inverse_sqrt", None, 1), ("inverse", False, 1)])
def test_oracle_calls_and_total_evolution_time(rotation, uncompute, n_pe):
    # Phase estimation (Nielsen & Chuang §5.2): clock qubit j controls V^{2^j}, so one phase
    # estimation applies Σ_{j<c} 2^j = 2^c − 1 controlled copies of V = e^{iAt}; the uncompute
    # doubles it. t = 2π(1 − 2^(1−c))/λ_hi is issue 3's wrap-around margin.
    c = 5
    s = CircuitSettings(clock_qubits=c, evolution="exact")
    res = inversion_resources(CAO, s, rotation, CAO_BOUNDS, uncompute=uncompute, gate_level=False)
    t = 2 * np.pi * (1 - 2.0 ** (1 - c)) / CAO_BOUNDS[1]
    assert res.n_oracle_calls == (2**c - 1) * n_pe
    assert res.n_phase_estimations == n_pe
    assert res.evolution_time == pytest.approx(t, rel=1e-15)
    assert res.total_evolution_time_per_phase_estimation == pytest.approx(t * (2**c - 1), rel=1e-15)
    assert res.total_evolution_time == pytest.approx(t * (2**c - 1) * n_pe, rel=1e-15)
    # Trotter: trotter_steps product-formula steps per call (issue 3).
    st = CircuitSettings(clock_qubits=c, evolution="trotter", trotter_steps=3)
    rt = inversion_resources(CAO, st, rotation, CAO_BOUNDS, uncompute=uncompute, gate_level=False)
    assert rt.trotter_steps_total == 3 * (2**c - 1) * n_pe


@pytest.mark.parametrize("oracle", list(ORACLES))
def test_runs_repeat_each_controlled_power_2_to_the_j_times(oracle):
    # Phase estimation (Nielsen & Chuang §5.2): clock qubit j controls V^{2^j}; the walk and the
    # product formula write it as 2^j (× trotter_steps) copies of one gate, which the
    # decomposition keeps as one run of that length; the exact oracle as one dense gate.
    s = ORACLES[oracle]
    gi = gate_inversion(SPD, s, "inverse_sqrt", SPD_BOUNDS)
    m, c = 2, s.clock_qubits
    clock = range(m, m + c)
    oracle_runs = [r for r in gi.decomposed.runs if len(r.qubits) > 1 and r.qubits[-1] in clock and min(r.qubits) < m]
    per_call = s.trotter_steps if oracle == "trotter" else 1
    expected = [1] * c if oracle == "exact" else [per_call * 2**j for j in range(c)]
    assert [r.repeat for r in oracle_runs] == expected
    assert [r.qubits[-1] for r in oracle_runs] == list(clock)


@pytest.mark.parametrize("oracle", ["exact", "trotter", "walk-dilation"])
def test_composed_counts_and_depth_equal_a_direct_transpile(oracle):
    # Common practice: the composed counts must be what qiskit reports for the whole circuit
    # transpiled at the stated level (0: no optimisation across gates).
    s = ORACLES[oracle]
    built = build_inversion(SPD, s, "inverse", SPD_BOUNDS, prepare=B, form="gate")
    res = inversion_resources(SPD, s, "inverse", SPD_BOUNDS, prepare=B)
    assert res.optimization_level == OPTIMIZATION_LEVEL == 0
    for key, basis in BASES.items():
        direct = transpile(built.circuit, basis_gates=list(basis), optimization_level=OPTIMIZATION_LEVEL)
        got = res.gate_counts[key]
        assert got["counts"] == dict(sorted(direct.count_ops().items())), (key, got["counts"], direct.count_ops())
        assert got["depth"] == direct.depth(), (key, got["depth"], direct.depth())
        assert got["cx"] == direct.count_ops().get("cx", 0)


def test_lcu_composed_counts_bound_a_direct_transpile():
    # A direct transpile may borrow idle qubits of other registers as ancillas for the LCU's
    # multi-controlled Paulis (qiskit's HighLevelSynthesis); the pieces, synthesised on their own
    # qubits, cannot, so the composed counts are an upper bound (stated in `composition`).
    s = ORACLES["walk-lcu"]
    built = build_inversion(SPD, s, "inverse", SPD_BOUNDS, form="gate")
    res = inversion_resources(SPD, s, "inverse", SPD_BOUNDS)
    direct = transpile(built.circuit, basis_gates=list(BASES["u_cx"]), optimization_level=0)
    assert res.gate_counts["u_cx"]["cx"] >= direct.count_ops()["cx"]
    assert res.gate_counts["u_cx"]["depth"] >= direct.depth()
    assert "upper bound" in res.composition


def test_lcu_alpha_is_the_sum_of_absolute_pauli_coefficients():
    # LCU subnormalisation α = Σ|c_j| (Childs & Wiebe, QIC 12, 901 (2012)); for the Cao matrix's
    # Pauli form (issue 3) 3.75 + 1.25 + 0.75 + 2.25 = 8.
    for gate_level in (True, False):
        res = inversion_resources(CAO, ORACLES["walk-lcu"], "inverse", CAO_BOUNDS, gate_level=gate_level)
        assert res.alpha == pytest.approx(8.0, rel=1e-14)
        assert res.n_pauli_terms == 4


def test_dilation_alpha_is_the_row_sum_bound():
    # Gershgorin: max_i Σ_j |A_ij| ≥ ‖A‖ (the dilation's default α, qgp.circuits.encoding).
    res = inversion_resources(SPD, ORACLES["walk-dilation"], "inverse", SPD_BOUNDS, gate_level=False)
    assert res.alpha == pytest.approx(np.max(np.sum(np.abs(SPD), axis=1)), rel=1e-14)
    assert res.alpha >= np.linalg.eigvalsh(SPD)[-1]


def test_synthesis_dependent_flags():
    # Issue 3: gate counts of synthesised dense unitaries (the exact oracle; the dilation's
    # controlled U is one too) are labelled synthesis-dependent.
    flags = {
        name: inversion_resources(CAO, s, "inverse_sqrt", CAO_BOUNDS, gate_level=False).synthesis_dependent
        for name, s in ORACLES.items()
    }
    assert flags == {"exact": True, "trotter": False, "walk-dilation": True, "walk-lcu": False}


def test_gate_level_refused_when_too_large_with_the_reason():
    # A 256-point problem (m = 8) with the dilation walk: the controlled walk is a dense
    # 10-qubit unitary (≈ 1.25·4^10 ≈ 1.3M gates per basis, over SYNTHESIS_LIMIT).
    a = _random_spd(8, 3)
    lo, hi = np.linalg.eigvalsh(a)[[0, -1]]
    s = CircuitSettings(clock_qubits=4, evolution="walk", encoding="dilation")
    res = inversion_resources(a, s, "inverse", (lo, hi))
    assert res.gate_counts is None
    assert "10-qubit" in res.gate_level_skipped and "limit" in res.gate_level_skipped, res.gate_level_skipped
    assert res.qubits["total"] == 8 + 4 + 1 + 1 and res.n_oracle_calls == 2 * 15
    assert res.alpha == pytest.approx(np.max(np.sum(np.abs(a), axis=1)))
    with pytest.raises(QgpError, match="too large"):
        inversion_resources(a, s, "inverse", (lo, hi), require_gate_level=True)
    with pytest.raises(QgpError, match="too large"):
        gate_inversion(a, s, "inverse", (lo, hi))


def test_too_many_oracle_calls_are_refused_without_building():
    # 2·(2^16 − 1) controlled copies exceed MAX_ORACLE_CALLS; nothing of size 2^c is built.
    s = CircuitSettings(clock_qubits=16, evolution="walk", encoding="dilation")
    res = inversion_resources(CAO, s, "inverse", CAO_BOUNDS)
    assert res.gate_counts is None and str(MAX_ORACLE_CALLS) in res.gate_level_skipped
    assert res.n_oracle_calls == 2 * (2**16 - 1)


def test_resources_are_json_ready():
    res = inversion_resources(CAO, ORACLES["trotter"], "inverse", CAO_BOUNDS).as_dict()
    again = json.loads(json.dumps(res))
    assert again == res
    assert again["gate_counts"]["u_cx"]["basis"] == ["u", "cx"]
    assert again["gate_counts"]["rz_sx_x_cx"]["basis"] == ["rz", "sx", "x", "cx"]
    assert set(again["qubits"]) == {"system", "clock", "flag", "total"}


def test_depth_of_one_piece_matches_qiskit():
    # The longest-path matrix gives each piece's depth; qiskit's own depth() is the reference.
    gi = gate_inversion(CAO, ORACLES["walk-lcu"], "inverse", CAO_BOUNDS)
    for key, lp in gi.decomposed.lowered(BASES["rz_sx_x_cx"]).items():
        assert lp.depth == lp.circuit.depth(), gi.decomposed.pieces[key].name


def test_inference_resources_for_the_demo():
    # The demo (walk + dilation, c = 8): counts of the gate form beside a simulation-form run.
    from qgp.config import load_config
    from qgp.demo import demo_config_path
    from qgp.classical.problem import problem_from_config
    from qgp.classical.system import eigenvalue_bounds

    cfg = load_config(demo_config_path())
    problem = problem_from_config(cfg)
    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    inv = build_inversion(A, cfg.circuit, "inverse", bounds, form="simulation")
    inv_sqrt = build_inversion(A, cfg.circuit, "inverse_sqrt", bounds, form="simulation")
    result = SimpleNamespace(problem=problem, circuit=cfg.circuit, inverse=inv, inverse_sqrt=inv_sqrt)
    doc = inference_resources(result)
    json.dumps(doc)
    assert doc["gate_form_simulated"] is False and doc["note"]
    c = cfg.circuit.clock_qubits
    assert doc["inverse"]["n_oracle_calls"] == 2 * (2**c - 1)
    assert doc["inverse_sqrt"]["n_oracle_calls"] == 2**c - 1
    for name in ("inverse", "inverse_sqrt"):
        d = doc[name]
        assert d["qubits"]["total"] == problem.system_qubits + c + 1 + 1
        assert d["gate_counts"]["u_cx"]["cx"] > 0 and d["gate_level_skipped"] is None
    # Same forward pieces: the uncomputed circuit is at least the forward one, at most twice it
    # plus the rotation (the inverse pieces synthesise to the same size for a dense unitary).
    cx_inv = doc["inverse"]["gate_counts"]["u_cx"]["cx"]
    cx_sqrt = doc["inverse_sqrt"]["gate_counts"]["u_cx"]["cx"]
    assert cx_sqrt < cx_inv <= 2 * cx_sqrt


def test_resources_of_a_prepared_circuit_counts_the_preparation():
    gi = gate_inversion(CAO, ORACLES["exact"], "inverse", CAO_BOUNDS, prepare=np.ones(4))
    bare = gate_inversion(CAO, ORACLES["exact"], "inverse", CAO_BOUNDS)
    with_prep = resources_of(gi).gate_counts["u_cx"]["total"]
    without = resources_of(bare).gate_counts["u_cx"]["total"]
    assert with_prep > without and resources_of(gi).prepared
