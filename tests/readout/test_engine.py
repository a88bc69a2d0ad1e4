"""The numpy engine against qiskit-aer's statevector simulator (the reference), on every circuit qgp
simulates, for every registered inversion method; and the engine's QFT against qiskit's QFTGate.

Tolerance 1e-12 on amplitudes of unit vectors: both sides are double precision and the circuits
are ~100 instructions deep, so round-off stays near 1e-15 (measured worst here: 6e-16).
"""

import numpy as np
import pytest
from hypothesis import assume, given, settings, strategies as st
from qiskit import QuantumCircuit
from qiskit.circuit.library import QFTGate
from qiskit.quantum_info import Operator

from qgp.circuits.methods import METHODS
from qgp.circuits.methods.encodings import ENCODINGS
from qgp.circuits.phase_estimation import _inverse_qft, _qft
from qgp.errors import QgpError
from qgp.readout import engine
from qgp.readout.builds import cached_pair, qpe_body, with_preparation
from qgp.readout.estimators import (
    _HadamardTemplate,
    _reference_with_snapshot,
    operators_from_reference_run,
    reference_circuit,
    variance_circuit,
)
from qgp.circuits.inversion import postselection
from qgp.readout.engine import project_statevector
from qgp.readout.simulate import engine_scope, run_saved_statevectors, run_statevectors
from qgp.settings import CircuitSettings

TOL = 1e-12


def _cases():
    out = []
    for name, method in METHODS.items():
        encodings = list(ENCODINGS) if method.uses_block_encoding else [CircuitSettings().encoding]
        for enc in encodings:
            label = f"{name}-{enc}" if method.uses_block_encoding else name
            out.append(pytest.param(CircuitSettings(clock_qubits=4, evolution=name, encoding=enc, trotter_steps=2), id=label))
    return out


def _spd(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, n))
    return x @ x.T / n + 0.5 * np.eye(n)


def _unit(n: int, seed: int) -> np.ndarray:
    v = np.random.default_rng(seed).normal(size=n)
    return v / np.linalg.norm(v)


def _aer(circuits):
    with engine_scope("aer") as used:
        out = run_statevectors(circuits)
    assert used == ["aer"]
    return out


def _prepared_inversion(n: int, clock_qubits: int):
    """The exact-oracle inversion of an n × n SPD matrix with a unit input prepared, and its
    post-selection (flag = 1, clock = 0)."""
    A = _spd(n, 9)
    lam = np.linalg.eigvalsh(A)
    inv, _ = cached_pair(A, CircuitSettings(clock_qubits=clock_qubits, evolution="exact"), (0.95 * lam[0], 1.05 * lam[-1]))
    prep = with_preparation(inv, _unit(n, 4))
    return prep, postselection(prep)


def _worst(a, b) -> float:
    return float(np.max(np.abs(np.asarray(a) - np.asarray(b))))


@pytest.mark.parametrize("settings_", _cases())
@pytest.mark.parametrize("n", [4, 8])
def test_every_simulated_circuit_equals_aer(settings_, n):
    A = _spd(n, 3 + n)
    lam = np.linalg.eigvalsh(A)
    bounds = (0.95 * lam[0], 1.05 * lam[-1])
    inv, inv_sqrt = cached_pair(A, settings_, bounds)
    qpe = qpe_body(A, settings_, bounds, inv)
    k, y = _unit(n, 1), _unit(n, 2)
    circuits = [
        reference_circuit(inv),
        reference_circuit(inv_sqrt),
        _HadamardTemplate(qpe, inv).circuit(k, y),
        variance_circuit(inv_sqrt.circuit, k),
        with_preparation(inv, y).circuit,
    ]
    assert all(engine.supports(c) for c in circuits)
    for c, ref in zip(circuits, _aer(circuits)):
        got = engine.simulate(c)["final"]
        assert _worst(got, ref) < TOL, f"{c.name}: worst |Δamplitude| {_worst(got, ref):.2e}"


@pytest.mark.parametrize("settings_", _cases())
def test_saved_states_and_operators_equal_aer(settings_):
    A = _spd(4, 5)
    lam = np.linalg.eigvalsh(A)
    inv, inv_sqrt = cached_pair(A, settings_, (0.95 * lam[0], 1.05 * lam[-1]))
    qc = _reference_with_snapshot(inv)
    labels = ["phase_estimated", "final"]
    with engine_scope("aer"):
        ref = run_saved_statevectors(qc, labels)
        ops_aer = operators_from_reference_run(inv, inv_sqrt)
    with engine_scope("numpy") as used:
        got = run_saved_statevectors(qc, labels)
        ops_np = operators_from_reference_run(inv, inv_sqrt)
    assert used and set(used) == {"numpy"}
    for label, a, b in zip(labels, got, ref):
        assert _worst(a, b) < TOL, f"{label}: {_worst(a, b):.2e}"
    assert _worst(ops_np.B, ops_aer.B) < TOL and _worst(ops_np.M, ops_aer.M) < TOL
    # The final state read on the post-selected rows only (what the amortised read-out does):
    # the numpy engine's contracted closing layer against Aer's full state, projected.
    post = postselection(inv)
    with engine_scope("numpy"):
        got_pre, got_post = run_saved_statevectors(qc, labels, project=post)
    assert _worst(got_pre, ref[0]) < TOL
    worst = _worst(got_post, project_statevector(ref[1], post))
    assert worst < TOL, f"projected final state: {worst:.2e}"


@pytest.mark.parametrize("c", [2, 3, 5, 7])
def test_written_out_qft_runs_as_an_fft_equal_to_qiskits_qftgate(c, monkeypatch):
    calls = []
    original = engine._State.fft
    monkeypatch.setattr(engine._State, "fft", lambda self, *a, **k: (calls.append(a), original(self, *a, **k))[1])
    rng = np.random.default_rng(c)
    psi = rng.normal(size=2 ** (c + 1)) + 1j * rng.normal(size=2 ** (c + 1))
    psi /= np.linalg.norm(psi)
    for body, gate in ((_inverse_qft(c), QFTGate(c).inverse()), (_qft(c), QFTGate(c))):
        circ = QuantumCircuit(c + 1)
        circ.compose(body, qubits=range(1, c + 1), inplace=True)
        state = engine._State(c + 1)
        state.t = psi.reshape((2,) * (c + 1)).copy()
        state.order = list(range(c, -1, -1))
        calls.clear()
        # Run the body's instructions through the engine's dispatcher on this state.
        out = _run_on(state, circ)
        assert len(calls) == 1, "the written-out QFT was not recognised"
        want = (np.kron(Operator(gate).data, np.eye(2))) @ psi
        assert _worst(out, want) < TOL, f"{'inverse ' if gate.name != 'qft' else ''}QFT c={c}: {_worst(out, want):.2e}"


def _run_on(state, circ):
    """The engine's instruction loop, from a given state (test helper; same code path as simulate)."""
    from qgp.readout.engine_program import _match_qft

    index = {q: i for i, q in enumerate(circ.qubits)}
    pos = 0
    data = circ.data
    while pos < len(data):
        match = _match_qft(data, pos, index)
        assert match is not None
        length, qubits, inverse = match
        state.fft(qubits, inverse, 1)
        pos += length
    return state.release()


@settings(max_examples=40, deadline=None)
@given(st.lists(st.tuples(st.sampled_from(["h", "x", "s", "sdg", "ry", "cx", "cp", "swap", "mux", "diag"]),
                          st.integers(0, 3), st.integers(0, 3), st.floats(-3, 3)), min_size=1, max_size=25))
def test_random_circuits_of_supported_gates_equal_aer(ops):
    """Law: for any sequence of the instructions the engine applies, its state equals Aer's."""
    qc = QuantumCircuit(4)
    rng = np.random.default_rng(len(ops))
    from qiskit.circuit.library import DiagonalGate

    from qgp.circuits.encoding import MultiplexerGate

    for name, a, b, theta in ops:
        if name in ("cx", "cp", "swap") and a == b:
            b = (a + 1) % 4
        if name == "h":
            qc.h(a)
        elif name == "x":
            qc.x(a)
        elif name == "s":
            qc.s(a)
        elif name == "sdg":
            qc.sdg(a)
        elif name == "ry":
            qc.ry(theta, a)
        elif name == "cx":
            qc.cx(a, b)
        elif name == "cp":
            qc.cp(theta, a, b)
        elif name == "swap":
            qc.swap(a, b)
        elif name == "diag":
            qc.append(DiagonalGate(list(np.exp(1j * rng.normal(size=4)))), [a, (a + 2) % 4])
        else:
            mats = [np.linalg.qr(rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2)))[0] for _ in range(4)]
            qc.append(MultiplexerGate(mats), [a, (a + 1) % 4, (a + 3) % 4])
    [ref] = _aer([qc])
    got = engine.simulate(qc)["final"]
    assert _worst(got, ref) < TOL, f"worst |Δamplitude| {_worst(got, ref):.2e}"


@settings(max_examples=40, deadline=None)
@given(st.permutations([1, 2, 3, 4, 5, 6]), st.lists(st.integers(1, 3), min_size=1, max_size=3), st.integers(0, 2**16))
def test_consecutive_multiplexers_on_disjoint_controls_merge_into_one_step_equal_to_aer(perm, sizes, seed):
    """Law: multiplexers on the same target with disjoint controls, in any order of control
    qubits (the inverse powers come highest bits first), merge into one step of the compiled
    program (their stack stays below the state's size here) whose state equals Aer's
    (reference: Aer's statevector)."""
    from qgp.circuits.encoding import MultiplexerGate
    from qgp.readout.engine_program import compiled

    rng = np.random.default_rng(seed)
    qc = QuantumCircuit(9)
    for q in range(9):
        qc.h(q)
    qc.cx(1, 0)  # the target entangled with a control: no pending shortcut
    used = 0
    for k in sizes:
        group = perm[used : used + k]
        if not group:
            break
        used += len(group)
        qc.append(MultiplexerGate([_random_unitary(rng, 2) for _ in range(2 ** len(group))]), [0, *group])
    muxes = [st_ for st_ in compiled(qc).steps if st_[0] == "mux"]
    assert len(muxes) == 1, f"{len(muxes)} multiplexer steps, not one merged"
    [want] = _aer([qc])
    got = engine.simulate(qc)["final"]
    assert _worst(got, want) < TOL, f"worst |Δamplitude| {_worst(got, want):.2e}"


@settings(max_examples=25, deadline=None)
@given(st.booleans(), st.integers(0, 2**16))
def test_inverse_multiplexers_merge_as_the_adjoint_of_the_forward_merge_equal_to_aer(same_qubits, seed):
    """Law: the inverses of merged multiplexers, in reverse order on the same qubits (an inverse
    phase estimation's powers), merge as the adjoint of the forward merge — the same stack the
    block products give — and on other qubits the products are taken; the state equals Aer's
    (reference: Aer's statevector)."""
    from qgp.circuits.encoding import MultiplexerGate
    from qgp.readout import engine_program

    rng = np.random.default_rng(seed)
    qc = QuantumCircuit(8)
    for q in range(8):
        qc.h(q)
    qc.cx(2, 0)
    a = MultiplexerGate([_random_unitary(rng, 2) for _ in range(8)])
    b = MultiplexerGate([_random_unitary(rng, 2) for _ in range(4)])
    qc.append(a, [0, 2, 3, 4])
    qc.append(b, [0, 5, 6])
    qc.ry(0.3, 1)
    qc.append(b.inverse(), [0, 5, 6] if same_qubits else [0, 6, 5])
    qc.append(a.inverse(), [0, 2, 3, 4])
    adjoints = []
    original = engine_program._adjoint_of_merged
    engine_program._adjoint_of_merged = lambda *args: (adjoints.append(r := original(*args)), r)[1]
    try:
        engine_program._STACKS.clear()
        steps = [st_ for st_ in engine_program._compile(qc).steps if st_[0] == "mux"]
    finally:
        engine_program._adjoint_of_merged = original
    assert len(steps) == 2
    assert (adjoints[-1] is not None) == same_qubits
    engine_program._STACKS.clear()
    engine_program._adjoint_of_merged = lambda *args: None
    try:
        products = [st_ for st_ in engine_program._compile(qc).steps if st_[0] == "mux"]
    finally:
        engine_program._adjoint_of_merged = original
    resid = np.max(np.abs(steps[1][1] - products[1][1]))
    assert resid < 1e-13, f"worst |adjoint − product| entry {resid:.2e}"
    [want] = _aer([qc])
    got = engine.simulate(qc)["final"]
    assert _worst(got, want) < TOL, f"worst |Δamplitude| {_worst(got, want):.2e}"


@pytest.mark.parametrize("settings_", _cases())
def test_projected_read_out_equals_aers_postselected_amplitudes(settings_):
    """With ``project`` only the post-selected amplitudes are computed (the closing Hadamards
    contracted with the read-out rows); they equal Aer's post-selected amplitudes."""
    from qgp.circuits.inversion import postselected_system_amplitudes, postselection

    A = _spd(8, 9)
    lam = np.linalg.eigvalsh(A)
    inv, _ = cached_pair(A, settings_, (0.95 * lam[0], 1.05 * lam[-1]))
    prep = with_preparation(inv, _unit(8, 4))
    [ref] = _aer([prep.circuit])
    want = postselected_system_amplitudes(ref, prep)
    with engine_scope("numpy"):
        [got] = run_statevectors([prep.circuit], reduce=lambda i, amps: amps, project=postselection(prep))
    with engine_scope("aer"):
        [via_aer] = run_statevectors([prep.circuit], reduce=lambda i, amps: amps, project=postselection(prep))
    assert _worst(got, want) < TOL, f"worst |Δamplitude| {_worst(got, want):.2e}"
    assert _worst(via_aer, want) == 0.0


@settings(max_examples=30, deadline=None)
@given(
    st.lists(st.tuples(st.sampled_from(["h", "ry", "cx", "cp"]), st.integers(0, 3), st.integers(0, 3), st.floats(-3, 3)),
             min_size=1, max_size=15),
    st.dictionaries(st.integers(0, 3), st.integers(0, 1), min_size=1, max_size=3),
    st.lists(st.tuples(st.sampled_from(["h", "ry", "x"]), st.floats(-3, 3)), min_size=0, max_size=3),
)
def test_projection_equals_slicing_the_full_state(ops, project, closing):
    """Law: the engine's projected amplitudes (closing one-qubit gates on projected qubits
    contracted, not applied) equal the full state sliced, for any circuit and projection."""
    from qgp.readout.engine import project_statevector

    qc = QuantumCircuit(4)
    for name, a, b, theta in ops:
        b = b if b != a else (a + 1) % 4
        {"h": lambda: qc.h(a), "ry": lambda: qc.ry(theta, a), "cx": lambda: qc.cx(a, b), "cp": lambda: qc.cp(theta, a, b)}[name]()
    for q in project:  # a closing layer on the projected qubits
        for name, theta in closing:
            {"h": lambda: qc.h(q), "ry": lambda: qc.ry(theta, q), "x": lambda: qc.x(q)}[name]()
    [ref] = _aer([qc])
    want = project_statevector(ref, project)
    got = engine.simulate(qc, reduce=lambda amps: amps, project=project)["final"]
    assert _worst(got, want) < TOL, f"worst |Δamplitude| {_worst(got, want):.2e}"


def test_unsupported_instructions_fall_back_to_aer_or_are_refused():
    qc = QuantumCircuit(2)
    qc.h(0)
    qc.rzz(0.3, 0, 1)
    assert not engine.supports(qc)
    with pytest.raises(engine.Unsupported, match="rzz"):
        engine.simulate(qc)
    with engine_scope("auto") as used:
        run_statevectors([qc])
    assert used == ["aer"]
    with engine_scope("numpy"), pytest.raises(QgpError, match="engine = 'numpy' does not apply rzz"):
        run_statevectors([qc])
    with pytest.raises(QgpError, match="engine must be one of"):
        with engine_scope("gpu"):
            pass


def test_the_flag_is_cut_to_its_read_out_value_right_after_the_rotation():
    # Nothing after the rotation acts on the flag and the read-out keeps flag = 1, so the engine keeps
    # only that half from there on (the projection commutes with the rest: common practice, deferred
    # measurement); the amplitudes are those of the uncut run and of Aer (law test above, and here).
    from qgp.readout.engine import _cut_points
    from qgp.readout.engine_program import compiled

    prep, post = _prepared_inversion(8, 4)
    flag = prep.circuit.find_bit(prep.circuit.qregs[[r.name for r in prep.circuit.qregs].index("flag")][0]).index
    steps = compiled(prep.circuit).steps
    cut = _cut_points(steps, post, [], set())
    where = [i for i, qs in cut.items() if flag in qs]
    assert len(where) == 1 and cut[where[0]][flag] == post[flag] == 1
    assert where[0] < len(steps) - 1 and all(flag not in engine._step_qubits(st) for st in steps[where[0] + 1 :])
    [ref] = _aer([prep.circuit])
    got = engine.simulate(prep.circuit, reduce=lambda amps: amps, project=post)["final"]
    assert _worst(got, project_statevector(ref, post)) < TOL


def _random_unitary(rng, d: int) -> np.ndarray:
    return np.linalg.qr(rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d)))[0]


@settings(max_examples=30, deadline=None)
@given(
    st.lists(st.floats(-3, 3), min_size=5, max_size=5),
    st.sampled_from(["above", "below", "none"]),
    st.sampled_from([1, 2]),
    st.integers(0, 2**16),
)
def test_multiplexer_on_controls_in_a_known_one_qubit_state_equals_aer(angles, stored, n_targets, seed):
    """Law: a multiplexer whose controls were only touched by one-qubit gates (so the engine keeps
    them unstored, in their one-qubit state) gives Aer's state, whichever side of the controls the
    other stored qubits lie (the result's control axes go before them or between them and the
    targets) and whatever the controls' amplitudes (|+⟩ or not)."""
    from qgp.circuits.encoding import MultiplexerGate

    rng = np.random.default_rng(seed)
    qc = QuantumCircuit(5)
    targets = list(range(n_targets))
    for q in targets:
        qc.ry(angles[q], q)
    controls = [n_targets + 1, n_targets + 2] if stored == "below" else [n_targets, n_targets + 1]
    other = {"above": 4, "below": n_targets, "none": None}[stored]
    if other is not None and other not in controls + targets:
        qc.ry(angles[2], other)
        qc.cx(other, 0)  # entangled with a target: stored before the multiplexer
    for i, q in enumerate(controls):
        qc.ry(angles[3 + i], q) if i else qc.h(q)
    qc.append(MultiplexerGate([_random_unitary(rng, 2**n_targets) for _ in range(4)]), targets + controls)
    [ref] = _aer([qc])
    calls = []
    original = engine._State._from_pending
    engine._State._from_pending = lambda self, *a: (calls.append(1), original(self, *a))[1]
    try:
        got = engine.simulate(qc)["final"]
    finally:
        engine._State._from_pending = original
    assert calls, "the multiplexer did not start from its controls' one-qubit states"
    assert _worst(got, ref) < TOL, f"worst |Δamplitude| {_worst(got, ref):.2e}"


@settings(max_examples=30, deadline=None)
@given(st.sampled_from(["above", "below"]), st.booleans(), st.booleans(), st.integers(0, 2**16))
def test_a_multiplexer_on_a_reference_registers_state_is_copied_and_equals_aer(where, ref_first, plus, seed):
    """Law: on Σ_r |r⟩|r⟩ (Hadamards on a reference register, CNOTs onto the targets, the Choi
    state a reference-register run starts from) the multiplexer's result is its stack times a
    number: the engine copies the stack instead of multiplying (`_State._copied`), with the
    reference register above or below the controls, written from either side, controls in |+⟩
    or not; the state equals Aer's (reference: Aer's statevector)."""
    from qgp.circuits.encoding import MultiplexerGate

    rng = np.random.default_rng(seed)
    targets, controls = [0, 1], ([2, 3] if where == "above" else [4, 5])
    ref = [4, 5] if where == "above" else [2, 3]
    qc = QuantumCircuit(6)
    for r, t in zip(ref, targets):
        if ref_first:
            qc.h(r)
            qc.cx(r, t)
        else:
            qc.h(t)
            qc.cx(t, r)
    for q in controls:
        qc.h(q) if plus else qc.ry(0.7, q)
    qc.append(MultiplexerGate([_random_unitary(rng, 4) for _ in range(4)]), targets + controls)
    [want] = _aer([qc])
    copied = []
    original = engine._State._copied
    engine._State._copied = lambda self, *a: (copied.append(r := original(self, *a)), r)[1]
    try:
        got = engine.simulate(qc)["final"]
    finally:
        engine._State._copied = original
    assert any(copied), "the multiplexer on s·I was multiplied, not copied"
    assert _worst(got, want) < TOL, f"worst |Δamplitude| {_worst(got, want):.2e}"


@settings(max_examples=50, deadline=None)
@given(st.integers(2, 6), st.complex_numbers(max_magnitude=10, allow_nan=False, allow_infinity=False),
       st.integers(0, 35), st.floats(1e-300, 1.0))
def test_scaled_identity_is_found_exactly(n, s, where, eps):
    """Law: `_scaled_identity` answers s for s·I (s ≠ 0, n ≥ 2) and None once any one entry differs."""
    assume(s != 0)
    psi = s * np.eye(n, dtype=complex)
    assert engine._scaled_identity(psi) == s
    i, j = divmod(where % (n * n), n)
    psi[i, j] += eps * (1 + abs(s))
    if psi[i, j] != (s if i == j else 0):
        assert engine._scaled_identity(psi) is None


@settings(max_examples=30, deadline=None)
@given(
    st.lists(st.tuples(st.sampled_from(["h", "ry", "cx"]), st.integers(0, 4), st.integers(0, 4), st.floats(-3, 3)),
             min_size=1, max_size=12),
    st.integers(0, 1),
    st.integers(0, 1),
    st.booleans(),
    st.integers(0, 2**16),
)
def test_a_last_multiplexer_contracted_with_the_read_out_rows_equals_slicing_aers_state(ops, v3, v4, closing, seed):
    """Law: a multiplexer on targets {0, 1} controlled by projected qubits {3, 4}, then (optionally)
    Hadamards on them, read on those qubits' values, is contracted with the read-out rows in one
    product; the amplitudes equal Aer's full state sliced."""
    from qgp.circuits.encoding import MultiplexerGate

    rng = np.random.default_rng(seed)
    qc = QuantumCircuit(5)
    for name, a, b, theta in ops:
        b = b if b != a else (a + 1) % 5
        {"h": lambda: qc.h(a), "ry": lambda: qc.ry(theta, a), "cx": lambda: qc.cx(a, b)}[name]()
    qc.append(MultiplexerGate([_random_unitary(rng, 4) for _ in range(4)]), [0, 1, 3, 4])
    if closing:
        qc.h(3)
        qc.h(4)
    project = {3: v3, 4: v4}
    [ref] = _aer([qc])
    want = project_statevector(ref, project)
    got = engine.simulate(qc, reduce=lambda amps: amps, project=project)["final"]
    assert _worst(got, want) < TOL, f"worst |Δamplitude| {_worst(got, want):.2e}"


def test_the_reference_runs_inverse_powers_are_contracted_not_applied():
    # The amortised read-out's last multiplexer (the inverse controlled powers, controls = the clock,
    # all projected on 0 after the closing Hadamards) is folded into the read-out product.
    from qgp.readout.engine_program import compiled

    A = _spd(8, 9)
    lam = np.linalg.eigvalsh(A)
    inv, _ = cached_pair(A, CircuitSettings(clock_qubits=4, evolution="exact"), (0.95 * lam[0], 1.05 * lam[-1]))
    qc = reference_circuit(inv)
    post = postselection(inv)
    steps = compiled(qc).steps
    last_mux = max(i for i, s_ in enumerate(steps) if s_[0] == "mux")
    assert set(steps[last_mux][3]) <= set(post)
    applied = []
    original = engine._State.multiplexer
    engine._State.multiplexer = lambda self, stack, *a, **k: (applied.append(stack.shape), original(self, stack, *a, **k))[1]
    try:
        got = engine.simulate(qc, reduce=lambda amps: amps, project=post)["final"]
    finally:
        engine._State.multiplexer = original
    assert len(applied) == sum(s_[0] == "mux" for s_ in steps) - 1, "the last multiplexer was applied to the state"
    [ref] = _aer([qc])
    assert _worst(got, project_statevector(ref, post)) < TOL


@settings(max_examples=25, deadline=None)
@given(st.lists(st.floats(-3, 3), min_size=2, max_size=2), st.booleans(), st.booleans(), st.integers(0, 2**16))
def test_two_last_multiplexers_contracted_in_turn_equal_slicing_aers_state(angles, leading, closing, seed):
    """Law: the inverse controlled powers split into two multiplexers on disjoint controls (as
    at 24 qubits, where one merged stack would be too large) are contracted one after the other;
    with the targets prepared first (``leading``: the clock built above them, the layout the
    engine gives a phase estimation on a prepared system) or not, the amplitudes equal Aer's."""
    from qgp.circuits.encoding import MultiplexerGate

    rng = np.random.default_rng(seed)
    qc = QuantumCircuit(6)
    if leading:
        qc.ry(angles[0], 0)
        qc.ry(angles[1], 1)
        qc.cx(0, 1)
    for q in range(2, 6):
        qc.h(q)
    qc.append(MultiplexerGate([_random_unitary(rng, 4) for _ in range(16)]), [0, 1, 2, 3, 4, 5])
    if not leading:
        qc.cx(5, 0)
    qc.append(MultiplexerGate([_random_unitary(rng, 4) for _ in range(4)]), [0, 1, 4, 5])
    qc.append(MultiplexerGate([_random_unitary(rng, 4) for _ in range(4)]), [0, 1, 2, 3])
    if closing:
        for q in range(2, 6):
            qc.h(q)
    project = {2: 0, 3: 1, 4: 0, 5: 0}
    [ref] = _aer([qc])
    want = project_statevector(ref, project)
    got = engine.simulate(qc, reduce=lambda amps: amps, project=project)["final"]
    assert _worst(got, want) < TOL, f"worst |Δamplitude| {_worst(got, want):.2e}"


@pytest.mark.parametrize("c, hi", [(12, 1), (13, 3), (15, 16)])
def test_four_step_transform_equals_numpys_fft_diagonal_ifft(c, hi):
    # x ← IFFT(d ⊙ FFT(x)) along the last axis, orthonormal; reference: numpy.fft (an outside
    # implementation of the same DFT).
    rng = np.random.default_rng(c + hi)
    x = rng.normal(size=(hi, 2**c)) + 1j * rng.normal(size=(hi, 2**c))
    d = rng.uniform(0, 1, 2**c) * np.exp(1j * rng.uniform(0, 2 * np.pi, 2**c))
    want = np.fft.ifft(d * np.fft.fft(x, axis=1, norm="ortho"), axis=1, norm="ortho")
    for workers in (1, 2):
        got = x.copy()
        engine._fft_diagonal_ifft(got, d, workers)
        assert _worst(got, want) < TOL, f"c={c}, hi={hi}, workers={workers}: {_worst(got, want):.2e}"


def test_a_large_clocks_iqft_rotation_qft_run_as_one_transform_equal_aer():
    # From 12 clock qubits the inverse QFT, the flag rotation cut to flag = 1 and the QFT run as one
    # four-step transform (clock after the prepared system, so its axis is the last); the read-out
    # amplitudes equal Aer's post-selected ones.
    prep, post = _prepared_inversion(16, 12)
    calls = []
    original = engine._State.fft_diagonal_fft
    engine._State.fft_diagonal_fft = lambda self, *a: (calls.append(original(self, *a)), calls[-1])[1]
    try:
        got = engine.simulate(prep.circuit, reduce=lambda amps: amps, project=post)["final"]
    finally:
        engine._State.fft_diagonal_fft = original
    assert calls == [True], "the four-step transform did not run"
    [ref] = _aer([prep.circuit])
    worst = _worst(got, project_statevector(ref, post))
    assert worst < TOL, f"worst |Δamplitude| {worst:.2e}"


def test_only_small_work_buffers_outlive_their_scope(monkeypatch):
    # A pair of ≤ _KEEP_BYTES is kept for the next inference (no fresh pages); a larger pair is
    # freed when the outermost scope ends, and release_buffers frees the kept one (common practice:
    # a cache that never holds more than its stated bound).
    from qgp.readout.simulate import engine_scope

    qc = QuantumCircuit(6)
    qc.h(0)
    qc.cx(0, 5)
    engine.release_buffers()
    with engine_scope("numpy"):
        engine.simulate(qc)
    assert 6 in engine._POOL, "a 6-qubit pair (2 KiB) was not kept"
    engine.release_buffers()
    assert not engine._POOL
    monkeypatch.setattr(engine, "_KEEP_BYTES", 1024)
    with engine_scope("numpy"):
        engine.simulate(qc)
    assert not engine._POOL, "a pair over the bound outlived its scope"
