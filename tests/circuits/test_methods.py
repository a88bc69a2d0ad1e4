"""The consistency harness over the inversion-method registry (qgp.circuits.methods).

Every registered method — and, for a method that uses a block encoding, every registered encoding —
must satisfy the same contracts: the gate form and the simulation form are one operator; the
function it applies to each eigenvalue (the closed-form model, for methods that declare one) is
what the circuit does to eigenvectors; its clock decoding agrees with its phase map; the composed
resources equal a direct count where that is exact; its label and registers follow the contracts.
A method added to `METHODS` is picked up here with no change to this file.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from qiskit import transpile
from qiskit.quantum_info import Statevector

from qgp.circuits.encoding import BLOCK, SYSTEM, pauli_decomposition
from qgp.circuits.inversion import FLAG, build_inversion, clock_model, postselected_system_amplitudes
from qgp.circuits.methods import (
    BUDGET_REFERENCE,
    METHODS,
    clock_eigenvalues,
    get_method,
    has_closed_form_model,
    method_alpha,
    method_description,
    method_label,
)
from qgp.circuits.methods.encodings import ENCODINGS
from qgp.circuits.phase_estimation import CLOCK
from qgp.circuits.resources import BASES, decompose_circuit, estimate_size, inversion_resources
from qgp.errors import QgpError
from qgp.readout.estimators import operators_from_reference_run
from qgp.readout.filter_model import model_operator
from qgp.settings import EVOLUTION_USES_BLOCK_ENCODING, CircuitSettings, Encoding, Evolution, choices

TOL = 1e-10


def _cases() -> list[tuple[str, CircuitSettings]]:
    out = []
    for name, method in METHODS.items():
        encodings = list(ENCODINGS) if method.uses_block_encoding else [CircuitSettings().encoding]
        for enc in encodings:
            label = f"{name}-{enc}" if method.uses_block_encoding else name
            out.append((label, CircuitSettings(clock_qubits=3, evolution=name, encoding=enc, trotter_steps=2)))
    return out


CASES = _cases()
IDS = [c[0] for c in CASES]
SETTINGS = [c[1] for c in CASES]


def _spd(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, n))
    return x @ x.T / n + 0.5 * np.eye(n)


A = _spd(4, 11)
LAM = np.linalg.eigvalsh(A)
BOUNDS = (float(LAM[0]) * 0.95, float(LAM[-1]) * 1.05)
B = np.array([0.9, -0.3, 0.5, 0.2])


# -- the registry --------------------------------------------------------------------------------------


def test_registry_agrees_with_the_settings_declarations():
    # qgp.config validates against qgp.settings (it may not import the circuits stage).
    assert tuple(METHODS) == choices(Evolution) == tuple(EVOLUTION_USES_BLOCK_ENCODING)
    assert {n: m.uses_block_encoding for n, m in METHODS.items()} == EVOLUTION_USES_BLOCK_ENCODING
    assert set(ENCODINGS) == set(choices(Encoding))
    assert BUDGET_REFERENCE in METHODS and METHODS[BUDGET_REFERENCE].closed_form_model


def test_unknown_method_names_the_choices():
    with pytest.raises(QgpError, match="choose one of") as err:
        get_method("qsvt")
    for name in METHODS:
        assert name in str(err.value)


def test_config_accepts_exactly_the_registered_methods(tmp_path):
    from qgp.config import parse_config

    (tmp_path / "t.csv").write_text("x,y\n0,1\n1,2\n")
    for name in METHODS:
        cfg = parse_config({"data": {"train": "t.csv", "target": "y"}, "noise": {"variance": 0.1},
                            "circuit": {"evolution": name}}, base_dir=tmp_path)
        assert cfg.circuit.evolution == name
    with pytest.raises(QgpError, match="must be one of"):
        parse_config({"data": {"train": "t.csv", "target": "y"}, "noise": {"variance": 0.1},
                      "circuit": {"evolution": "qsvt"}}, base_dir=tmp_path)


# -- per method -------------------------------------------------------------------------------------------


@pytest.mark.parametrize("settings", SETTINGS, ids=IDS)
def test_label_and_description(settings):
    method = get_method(settings.evolution)
    assert isinstance(method_label(settings), str) and method_label(settings)
    assert method_label(settings) == method.label(settings)
    assert method_description(settings).startswith(f"{settings.evolution} oracle")
    assert has_closed_form_model(settings) == method.closed_form_model
    assert (method.encoding(settings) is not None) == method.uses_block_encoding


@pytest.mark.parametrize("settings", SETTINGS, ids=IDS)
@pytest.mark.parametrize("rotation", ["inverse", "inverse_sqrt"])
def test_gate_form_equals_simulation_form(settings, rotation):
    gate = build_inversion(A, settings, rotation, BOUNDS, prepare=B, form="gate")
    sim = build_inversion(A, settings, rotation, BOUNDS, prepare=B, form="simulation")
    diff = np.max(np.abs(Statevector(gate.circuit).data - Statevector(sim.circuit).data))
    assert diff < TOL, diff


@pytest.mark.parametrize("settings", SETTINGS, ids=IDS)
def test_registers_follow_the_contract(settings):
    method = get_method(settings.evolution)
    inv = build_inversion(A, settings, "inverse", BOUNDS, form="simulation")
    names = [r.name for r in inv.circuit.qregs]
    expected = [SYSTEM, CLOCK, FLAG] + ([BLOCK] if inv.n_block_qubits else [])
    assert names == expected
    terms = len(pauli_decomposition(A)) if method.block_qubits_depend_on_terms(settings) else None
    assert inv.n_block_qubits == method.block_qubits(settings, terms)


@pytest.mark.parametrize("settings", SETTINGS, ids=IDS)
def test_public_functions_match_the_built_circuit(settings):
    # clock_eigenvalues / method_alpha / clock_model need no circuit and give the built numbers.
    inv = build_inversion(A, settings, "inverse", BOUNDS, form="simulation")
    alpha = method_alpha(A, settings, float(np.max(np.abs(np.linalg.eigh(A)[0]))))
    assert alpha == inv.alpha
    assert np.array_equal(clock_eigenvalues(settings, BOUNDS, alpha), inv.clock_eigenvalues)
    model = clock_model(settings, "inverse", BOUNDS, alpha)
    assert model.scale == inv.scale and model.floor == inv.floor
    assert np.array_equal(model.admitted, inv.admitted)
    assert np.array_equal(model.flag_amplitudes, inv.flag_amplitudes)
    method = get_method(settings.evolution)
    assert inv.effective_condition_number == method.effective_condition_number(*inv.bounds, inv.alpha)


@pytest.mark.parametrize("settings", SETTINGS, ids=IDS)
def test_clock_decoding_inverts_the_phase_map(settings):
    # Clock value k stands for λ̃_k, whose eigenphase is ±k/2^c (the walk's two branches).
    method = get_method(settings.evolution)
    inv = build_inversion(A, settings, "inverse", BOUNDS, form="simulation")
    n = 2**settings.clock_qubits
    k = np.arange(n)
    phase = method.phase(inv.clock_eigenvalues, inv.evolution_time, inv.alpha) * n
    ok = np.isclose(np.mod(phase - k + 0.5, n) - 0.5, 0, atol=1e-9) | np.isclose(np.mod(phase + k + 0.5, n) - 0.5, 0, atol=1e-9)
    assert ok.all(), (phase, k)


@pytest.mark.parametrize("settings", [s for s in SETTINGS if get_method(s.evolution).closed_form_model],
                         ids=[i for i, s in CASES if get_method(s.evolution).closed_form_model])
def test_applied_function_is_the_circuit_on_eigenvectors(settings):
    inv = build_inversion(A, settings, "inverse", BOUNDS, form="simulation")
    inv_sqrt = build_inversion(A, settings, "inverse_sqrt", BOUNDS, form="simulation", oracle=inv.oracle)
    ops = operators_from_reference_run(inv, inv_sqrt)
    assert np.max(np.abs(model_operator(inv, A) - ops.B)) < TOL
    assert np.max(np.abs(model_operator(inv_sqrt, A) - ops.M)) < TOL
    # And on one eigenvector directly: the post-selected amplitude is f(λ)·v.
    lam, V = np.linalg.eigh(A)
    one = build_inversion(A, settings, "inverse", BOUNDS, prepare=V[:, 1], form="simulation", oracle=inv.oracle)
    amps = postselected_system_amplitudes(Statevector(one.circuit).data, one)
    f = model_operator(inv, A) @ V[:, 1]
    assert np.max(np.abs(amps - f)) < TOL


@pytest.mark.parametrize("settings", SETTINGS, ids=IDS)
def test_resources_equal_a_direct_count(settings):
    method = get_method(settings.evolution)
    s = replace(settings, clock_qubits=2)
    a = A[:2, :2] + 0.0
    lam = np.linalg.eigvalsh(a)
    bounds = (float(lam[0]) * 0.9, float(lam[-1]) * 1.1)
    inv = build_inversion(a, s, "inverse", bounds, form="gate")
    res = inversion_resources(a, s, "inverse", bounds)
    # Oracle calls from the circuit's instructions: every run on system (+ block) controlled by one
    # clock qubit j is one power; a repeated gate counts its copies, a dense power V^(2^j) 2^j calls.
    dec = decompose_circuit(inv.circuit)
    offsets, start = {}, 0
    for name, size in dec.registers:
        offsets[name] = range(start, start + size)
        start += size
    clock = set(offsets[CLOCK])
    system = set(offsets[SYSTEM])
    calls = 0
    for run in dec.runs:
        q = set(run.qubits)
        if system <= q and len(q & clock) == 1:
            j = list(offsets[CLOCK]).index(next(iter(q & clock)))
            calls += run.repeat if inv.oracle.repeats is not None else 2**j
    per_call = method.steps_per_call(s) or 1
    assert calls == res.n_oracle_calls * per_call == inv.n_oracle_calls * per_call
    est = estimate_size(1, s, uncompute=True, prepare=False, n_pauli_terms=res.n_pauli_terms)
    assert est.oracle_calls == res.n_oracle_calls
    if not method.composition_is_upper_bound(s):
        for key, basis in BASES.items():
            direct = transpile(inv.circuit, basis_gates=list(basis), optimization_level=0)
            assert res.gate_counts[key]["counts"] == dict(sorted(direct.count_ops().items()))
            assert res.gate_counts[key]["depth"] == direct.depth()
