"""Phase estimation of A with c clock qubits, and its three phase oracles.

Phase estimation (Nielsen & Chuang §5.2): Hadamards on ``clock``, clock qubit j controls V^{2^j},
then the inverse QFT. An eigenvector of V with eigenvalue e^{2πiφ} leaves ``clock`` in |k⟩ with
k ≈ φ·2^c (``clock[0]`` least significant). The oracles V and how a clock value k decodes:

* ``exact``: V = e^{iAt}, controlled powers as block-diagonal unitaries diag(I, e^{iAt·2^j}),
  the powers by repeated squaring of one matrix exponential. λ̃_k = 2πk/(t·2^c).
* ``trotter``: V = a product formula for e^{iAt} over A's Pauli decomposition, order 1
  (Lie–Trotter) or 2 (symmetric Strang splitting), ``trotter_steps`` steps per e^{iAt}; the
  power 2^j uses 2^j·trotter_steps steps. Same decoding as ``exact``; the Trotter error is a
  separate, measurable error source.
* ``walk``: qubitization (Low & Chuang, Quantum 3, 163 (2019)). V = W = R·U with U a Hermitian
  block encoding of A/α and R = (2|0⟩⟨0|_block − I) ⊗ I_system. On the two-dimensional space of
  each eigenvector |0⟩|u⟩ (A u = λu) W is a rotation with eigenphases ±arccos(λ/α), so every
  clock value decodes as λ̃_k = α·cos(2πk/2^c): k and 2^c − k give the same λ̃, covering both
  branches (a two's-complement reading would drop one). R carries its exact sign: W is used
  controlled, where a global sign becomes a relative phase.

The evolution time for ``exact``/``trotter`` is t = 2π(1 − 2^(1−c))/λ_hi unless given: λ_hi·t/2π
at 1 would alias λ_hi to clock value 0, and the margin of two bins keeps it clear of the wrap.

Two forms of the same operator: ``"gate"`` builds the gate-level circuit (what resource counts and
exports see); ``"simulation"`` builds only instructions Aer applies natively, so a simulation needs
no transpiling. The controlled powers act on qubits [system…, block…, control]: the control is the
most significant qubit, so diag(I, V) is their matrix. In the simulation form, when V is held as a
dense matrix (exact, Trotter, the walk up to ``_MAX_FUSED_QUBITS``), phase estimation applies all
controlled powers of a run of clock qubits as one multiplexer Σ_k |k⟩⟨k|_clock ⊗ V^k (one pass over
the statevector with a 2^m×2^m block per amplitude group, instead of one pass per clock qubit with a
2^(m+1)-sized block); larger LCU walks run PREPARE, the controlled SELECT (a multiplexer over
block and control) and the controlled reflection (a diagonal) as separate native pieces. The
inverse QFT is written out as H, controlled phases and swaps.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Literal

import numpy as np
import scipy.linalg
from qiskit.circuit import Gate, QuantumCircuit, QuantumRegister
from qiskit.circuit.library import QFTGate, UnitaryGate, ZGate
from qiskit.quantum_info import SparsePauliOp

from qgp.circuits.encoding import (
    BLOCK,
    SYSTEM,
    BlockEncoding,
    MultiplexerGate,
    check_matrix,
    pauli_decomposition,
)
from qgp.errors import QgpError
from qgp.settings import CircuitSettings, Evolution, choices

__all__ = [
    "CLOCK",
    "Form",
    "PhaseOracle",
    "derived_evolution_time",
    "evolution_clock_eigenvalues",
    "walk_clock_eigenvalues",
    "product_formula_terms",
    "product_formula_matrix",
    "controlled_trotter_step",
    "walk_reflection_matrix",
    "walk_matrix",
    "controlled_walk",
    "exact_oracle",
    "trotter_oracle",
    "walk_oracle",
    "phase_oracle",
    "phase_estimation_circuit",
    "inverse_phase_estimation_circuit",
]

CLOCK = "clock"
Form = Literal["gate", "simulation"]

# Largest controlled unitary (in qubits) the simulation form fuses into one dense matrix:
# 2^10 × 2^10 complex is 16 MB per gate (Aer and transpile copy it). Beyond it the LCU walk runs
# as native pieces (PREPARE, controlled SELECT, controlled reflection).
_MAX_FUSED_QUBITS = 10

# Largest stack of matrices in one phase-estimation multiplexer (2^g blocks of 2^t × 2^t complex):
# longer clock registers are split into runs of g qubits, one multiplexer each. A stack that sits
# in a core's L2 cache (1 MB here) costs Aer less to convert and to apply than one long stack:
# against 32 MB, 256 KB made per-point inference (n = 16, c = 8, 123 circuits in one job) 1.22×
# faster and left the amortised run as it was; one inversion on 20 / 25 / 26 qubits took 0.64× /
# 0.99× / 1.04× the time (each pair in one session).
_MAX_MULTIPLEXER_BYTES = 1 << 18


def derived_evolution_time(lambda_hi: float, clock_qubits: int) -> float:
    """t = 2π(1 − 2^(1−c))/λ_hi: λ_hi lands two bins below the wrap-around at clock value 2^c."""
    if clock_qubits < 2:
        raise QgpError(
            "deriving the evolution time needs at least 2 clock qubits (with 1, t would be 0); "
            "raise [circuit] clock_qubits or set [circuit] evolution_time"
        )
    return 2 * np.pi * (1 - 2.0 ** (1 - clock_qubits)) / lambda_hi


def evolution_clock_eigenvalues(clock_qubits: int, evolution_time: float) -> np.ndarray:
    """λ̃_k = 2πk/(t·2^c) for k in [0, 2^c): the eigenvalue each clock value stands for."""
    n = 2**clock_qubits
    return 2 * np.pi * np.arange(n) / (evolution_time * n)


def walk_clock_eigenvalues(clock_qubits: int, alpha: float) -> np.ndarray:
    """λ̃_k = α·cos(2πk/2^c) for every k (both ±arccos branches decode alike)."""
    n = 2**clock_qubits
    return alpha * np.cos(2 * np.pi * np.arange(n) / n)


# ---------------------------------------------------------------------------------------------
# Product formulas


def product_formula_terms(
    op: SparsePauliOp, delta: float, order: int
) -> tuple[float, list[tuple[object, float]]]:
    """One step of e^{iAδ}: (identity phase, [(Pauli, θ), …]) meaning Π e^{iθP} in list order.

    Order 1: e^{iδc_1P_1} … e^{iδc_LP_L}. Order 2 (Strang): half steps forward then backward,
    the two middle halves merged. The identity term commutes with everything, so its phase
    e^{iδc_0} is exact and kept apart; once controlled it is a real relative phase.
    """
    if order not in (1, 2):
        raise QgpError(f"trotter_order must be 1 or 2, got {order!r}")
    phase = 0.0
    terms = []
    for pauli, c in zip(op.paulis, op.coeffs.real):
        if not pauli.x.any() and not pauli.z.any():
            phase += float(c) * delta
        else:
            terms.append((pauli, float(c)))
    if order == 1 or len(terms) <= 1:
        return phase, [(p, c * delta) for p, c in terms]
    half = [(p, c * delta / 2) for p, c in terms]
    middle = (terms[-1][0], terms[-1][1] * delta)
    return phase, half[:-1] + [middle] + half[-2::-1]


def _pauli_exponential_matrix(pauli, theta: float) -> np.ndarray:
    """e^{iθP} = cos θ·I + i sin θ·P (P² = I)."""
    p = pauli.to_matrix()
    return np.cos(theta) * np.eye(p.shape[0]) + 1j * np.sin(theta) * p


def _step_matrix(op: SparsePauliOp, delta: float, order: int) -> np.ndarray:
    phase, terms = product_formula_terms(op, delta, order)
    u = np.exp(1j * phase) * np.eye(2**op.num_qubits, dtype=complex)
    for pauli, theta in terms:  # later terms act after earlier ones
        u = _pauli_exponential_matrix(pauli, theta) @ u
    return u


def product_formula_matrix(A, time: float, steps: int, order: int) -> np.ndarray:
    """The product-formula approximation of e^{iA·time} with ``steps`` steps, as a matrix."""
    op = A if isinstance(A, SparsePauliOp) else pauli_decomposition(A)
    if steps < 1:
        raise QgpError(f"trotter_steps must be at least 1, got {steps}")
    return np.linalg.matrix_power(_step_matrix(op, time / steps, order), steps)


def _append_controlled_pauli_exponential(qc, control, system, pauli, theta: float) -> None:
    """Controlled e^{iθP}: rotate P to Z…Z, CX ladder onto one qubit, controlled RZ(−2θ), undo.

    Only the RZ needs the control: the basis change and ladder cancel when it is off.
    """
    support = [q for q in range(len(system)) if pauli.x[q] or pauli.z[q]]
    for q in support:
        if pauli.x[q] and pauli.z[q]:  # Y = S X S†, X = H Z H
            qc.sdg(system[q])
            qc.h(system[q])
        elif pauli.x[q]:
            qc.h(system[q])
    for a, b in zip(support[:-1], support[1:]):
        qc.cx(system[a], system[b])
    qc.crz(-2 * theta, control, system[support[-1]])  # e^{iθZ} = RZ(−2θ)
    for a, b in reversed(list(zip(support[:-1], support[1:]))):
        qc.cx(system[a], system[b])
    for q in support:
        if pauli.x[q] and pauli.z[q]:
            qc.h(system[q])
            qc.s(system[q])
        elif pauli.x[q]:
            qc.h(system[q])


def controlled_trotter_step(op: SparsePauliOp, delta: float, order: int) -> Gate:
    """Gate on [system…, control] applying one product-formula step of e^{iAδ} when control = 1."""
    m = op.num_qubits
    system = QuantumRegister(m, SYSTEM)
    ctrl = QuantumRegister(1, "ctrl")
    qc = QuantumCircuit(system, ctrl, name=f"c-trotter{order}")
    phase, terms = product_formula_terms(op, delta, order)
    if phase != 0.0:
        qc.p(phase, ctrl[0])
    for pauli, theta in terms:
        _append_controlled_pauli_exponential(qc, ctrl[0], system, pauli, theta)
    return qc.to_gate()


# ---------------------------------------------------------------------------------------------
# Qubitization walk


def walk_reflection_matrix(be: BlockEncoding) -> np.ndarray:
    """Diagonal of R = (2|0⟩⟨0|_block − I) ⊗ I_system: +1 where block = 0, −1 elsewhere."""
    dim_s = 2**be.n_system_qubits
    diag = -np.ones(dim_s * 2**be.n_block_qubits)
    diag[:dim_s] = 1.0
    return diag


def walk_matrix(be: BlockEncoding) -> np.ndarray:
    """W = R·U as a dense matrix (index = system + 2^m · block)."""
    return walk_reflection_matrix(be)[:, None] * be.matrix()


def _block_diag_identity(v: np.ndarray) -> np.ndarray:
    dim = v.shape[0]
    out = np.zeros((2 * dim, 2 * dim), dtype=complex)
    out[:dim, :dim] = np.eye(dim)
    out[dim:, dim:] = v
    return out


def controlled_walk(be: BlockEncoding) -> Gate:
    """Gate on [system…, block…, control] applying W = R·U when control = 1 (gate level).

    Controlled U: the dilation as one block-diagonal unitary diag(I, U); the LCU as PREPARE ·
    controlled SELECT · PREPARE† (PREPARE cancels when the control is off). Controlled R:
    (2|0⟩⟨0| − I) is Z for one block qubit; for more it is Z on the control (−1 whenever on)
    times a phase −1 on control = 1, block = 0.
    """
    m, k = be.n_system_qubits, be.n_block_qubits
    system = QuantumRegister(m, SYSTEM)
    block = QuantumRegister(k, BLOCK)
    ctrl = QuantumRegister(1, "ctrl")
    qc = QuantumCircuit(system, block, ctrl, name=f"c-walk-{be.kind}")
    if be.kind == "dilation":
        qc.append(
            UnitaryGate(_block_diag_identity(be.matrix()), label="c-U", check_input=False),
            [*system, *block, ctrl[0]],
        )
    else:
        # Rebuild SELECT with one more control; PREPARE and PREPARE† are the first and last
        # instructions of the LCU circuit.
        data = be.circuit.data
        prep, select, unprep = data[0], data[1:-1], data[-1]
        qc.append(prep.operation, block[:])
        for inst in select:
            op = inst.operation  # a `ctrl_state`-controlled ±P on [block…, system…]
            base = op.base_gate
            state = op.ctrl_state | (1 << k)
            qc.append(base.control(k + 1, ctrl_state=state, annotated=False), [*block, ctrl[0], *system])
        qc.append(unprep.operation, block[:])
    if k == 1:
        qc.cz(ctrl[0], block[0])
    else:
        qc.z(ctrl[0])
        qc.append(ZGate().control(k, ctrl_state=0, annotated=False), [*block, ctrl[0]])
    return qc.to_gate()


@dataclass(frozen=True)
class _WalkPieces:
    """A large LCU walk's controlled W = PREPARE · controlled SELECT · PREPARE† · controlled R,
    each piece an instruction Aer applies natively (simulation form).

    PREPARE is the LCU's own RY tree with each uniformly controlled RY as a multiplexer
    (``prepare``: (gate, block qubit indices) in order); SELECT, controlled, is one multiplexer
    over [block…, control] with targets ``system`` (identity for control = 0 and unused block
    values); the controlled reflection is a diagonal over [block…, control]. Same operator as
    `controlled_walk` (tests/test_speed_paths.py).
    """

    n_system_qubits: int
    n_block_qubits: int
    prepare: tuple
    prepare_dg: tuple
    select: Gate
    select_dg: Gate
    reflect: Gate

    def append(self, qc: QuantumCircuit, system, block, ctrl, *, inverse: bool = False) -> None:
        """Append controlled W (or its inverse) to ``qc``; the pieces are shared, not copied."""
        steps = [
            *[(g, [block[i] for i in idx]) for g, idx in self.prepare],
            (self.select, [*system, *block, ctrl]),
            *[(g, [block[i] for i in idx]) for g, idx in self.prepare_dg],
            (self.reflect, [*block, ctrl]),
        ]
        if inverse:
            inv = {id(self.select): self.select_dg, id(self.reflect): self.reflect}
            for g, _ in self.prepare_dg:
                inv[id(g)] = _paired(self.prepare_dg, self.prepare, g)
            for g, _ in self.prepare:
                inv[id(g)] = _paired(self.prepare, self.prepare_dg, g)
            steps = [(inv[id(g)], q) for g, q in reversed(steps)]
        for g, q in steps:
            qc.append(g, q, copy=False)

    def controlled_walk(self) -> Gate:
        """The controlled W as one gate on [system…, block…, control] (its definition: the pieces)."""
        system = QuantumRegister(self.n_system_qubits, SYSTEM)
        block = QuantumRegister(self.n_block_qubits, BLOCK)
        ctrl = QuantumRegister(1, "ctrl")
        qc = QuantumCircuit(system, block, ctrl, name="c-walk-lcu-native")
        self.append(qc, system, block, ctrl[0])
        gate = Gate("c-walk-lcu-native", qc.num_qubits, [])
        gate.definition = qc
        return gate


def _paired(source: tuple, target: tuple, gate: Gate) -> Gate:
    """The gate of ``target`` that inverts ``gate`` of ``source`` (the trees are mirror images)."""
    for i, (g, _) in enumerate(source):
        if g is gate:
            return target[len(target) - 1 - i][0]
    raise KeyError("gate not in the tree")


def _tree_matrix(levels, n: int) -> np.ndarray:
    """The 2^n × 2^n matrix of RY-tree levels (target, angles): level angles are indexed by the
    value of the qubits above the target (target+1 least significant), as in UCRYGate."""
    dim = 2**n
    u = np.eye(dim)
    for target, angles in levels:
        w = u.reshape(dim >> (target + 1), 2, 1 << target, dim)
        c = np.cos(np.asarray(angles) / 2)[:, None, None]
        s = np.sin(np.asarray(angles) / 2)[:, None, None]
        a0, a1 = w[:, 0].copy(), w[:, 1].copy()
        w[:, 0] = c * a0 - s * a1
        w[:, 1] = s * a0 + c * a1
        u = w.reshape(dim, dim)
    return u


def _lcu_walk_pieces(be: BlockEncoding) -> _WalkPieces:
    """Native pieces of an LCU walk (see `_WalkPieces`), read from the LCU's own circuit.

    PREPARE's RY tree is fused into two pieces: its first levels act only on the upper h block
    qubits (one dense 2^h unitary), the rest rotate the lower qubits controlled by everything
    above, so for each value of the upper qubits they form one unitary on the lower ones (one
    multiplexer). Two passes over the statevector instead of one per level.
    """
    from qiskit.circuit.library import DiagonalGate

    m, k = be.n_system_qubits, be.n_block_qubits
    tree = be.circuit.data[0].operation.definition
    levels = []
    for inst in tree.data:
        op = inst.operation
        if op.name not in ("ry", "ucry"):  # the tree is RY and uniformly controlled RY (qgp.circuits.encoding)
            raise QgpError(f"unexpected gate {op.name!r} in the LCU's PREPARE")
        levels.append((tree.find_bit(inst.qubits[0]).index, np.array([float(t) for t in op.params])))
    levels.sort(key=lambda lv: -lv[0])  # level l targets qubit k − 1 − l
    lo = k // 2
    hi = k - lo
    u_hi = _tree_matrix([(t - lo, a) for t, a in levels[:hi]], hi).astype(complex)
    prepare = [(UnitaryGate(u_hi, label="prepare-hi", check_input=False), list(range(lo, k)))]
    prepare_dg = [(UnitaryGate(u_hi.T, label="prepare-hi_dg", check_input=False), list(range(lo, k)))]
    if lo:
        lows = []
        for v in range(2**hi):
            lv = [(t, a[v * 2 ** (lo - 1 - t) : (v + 1) * 2 ** (lo - 1 - t)]) for t, a in levels[hi:]]
            lows.append(_tree_matrix(lv, lo))
        mux = MultiplexerGate(lows, label="prepare-lo")
        prepare.append((mux, list(range(k))))
        prepare_dg.insert(0, (mux.inverse(), list(range(k))))
    dim = 2**m
    eye = np.eye(dim, dtype=complex)
    mats = [eye] * (2**k) + [eye] * (2**k)
    op = be.pauli_op
    for j, (pauli, c) in enumerate(zip(op.paulis, op.coeffs.real)):
        mats[2**k + j] = np.sign(c) * pauli.to_matrix()
    select = MultiplexerGate(mats, label="c-select")
    diag = np.ones(2 ** (k + 1))
    diag[2**k + 1 :] = -1.0  # control = 1: +1 on block = 0, −1 elsewhere
    reflect = DiagonalGate([float(x) for x in diag])
    return _WalkPieces(
        n_system_qubits=m,
        n_block_qubits=k,
        prepare=tuple(prepare),
        prepare_dg=tuple(prepare_dg),
        select=select,
        select_dg=select.inverse(),
        reflect=reflect,
    )


# ---------------------------------------------------------------------------------------------
# Oracles


@dataclass(frozen=True)
class PhaseOracle:
    """The controlled powers V^{2^j}, j < c, for phase estimation, and how to decode clock values.

    ``powers[j]`` acts on [system…, block…, control]. ``evolution_time`` is t (None for the
    walk); ``alpha`` the block encoding's α (None unless walk). ``n_calls`` counts controlled
    applications of the base oracle (e^{iAt}, one product-formula step sequence, or W) in one
    phase estimation; ``n_pauli_terms`` the Pauli strings the oracle is built from (Trotter:
    A's decomposition, identity included; LCU walk: the selected terms; otherwise 0).
    ``repeats[j] = (base, n)`` when ``powers[j]`` is ``base`` applied n times (gate-level Trotter
    and walk), so the inverse can invert ``base`` once. Simulation form only: ``power_matrices[j]``
    is V^{2^j} as a dense matrix (index = system + 2^m·block) when V is held densely, and
    ``walk_pieces`` the native pieces of a large LCU walk; `phase_estimation_circuit` builds from
    these rather than from ``powers``.
    """

    kind: Evolution
    form: Form
    clock_qubits: int
    n_system_qubits: int
    n_block_qubits: int
    evolution_time: float | None
    alpha: float | None
    block_encoding: BlockEncoding | None
    powers: tuple[Gate, ...] = field(repr=False)
    n_calls: int = 0
    n_pauli_terms: int = 0
    repeats: tuple[tuple[Gate, int], ...] | None = field(default=None, repr=False)
    power_matrices: tuple[np.ndarray, ...] | None = field(default=None, repr=False, compare=False)
    walk_pieces: "_WalkPieces | None" = field(default=None, repr=False, compare=False)
    # Simulation-form pieces built from this oracle (multiplexer stacks), kept for its lifetime:
    # the inverse and inverse_sqrt circuits and the uncompute all reuse them.
    _built: dict = field(default_factory=dict, repr=False, compare=False)

    def clock_eigenvalues(self) -> np.ndarray:
        """Decoded λ̃ for each clock value k in [0, 2^c)."""
        if self.kind == "walk":
            return walk_clock_eigenvalues(self.clock_qubits, self.alpha)
        return evolution_clock_eigenvalues(self.clock_qubits, self.evolution_time)


def _check_form(form: str) -> None:
    if form not in ("gate", "simulation"):
        raise QgpError(f"form must be 'gate' or 'simulation', got {form!r}")


def _check_clock(clock_qubits: int) -> None:
    if not isinstance(clock_qubits, (int, np.integer)) or clock_qubits < 1:
        raise QgpError(f"clock_qubits must be an integer ≥ 1, got {clock_qubits!r}")


def _squares(v: np.ndarray, clock_qubits: int) -> tuple[np.ndarray, ...]:
    """V^{2^j} for j < c: c − 1 squarings of V."""
    out = [np.asarray(v, dtype=complex)]
    for _ in range(1, clock_qubits):
        out.append(out[-1] @ out[-1])
    return tuple(out)


def _squared_powers(v, clock_qubits: int, label: str) -> tuple[Gate, ...]:
    """diag(I, V^{2^j}) for j < c, by c − 1 squarings of V (or from the squares, when given)."""
    squares = v if isinstance(v, tuple) else _squares(v, clock_qubits)
    return tuple(
        UnitaryGate(_block_diag_identity(sq), label=f"{label}^{2**j}", check_input=False)
        for j, sq in enumerate(squares)
    )


def _repeated(base: Gate, times: int, name: str) -> Gate:
    """A gate defined as ``base`` applied ``times`` times (the definition shares ``base``).

    Built directly rather than by ``to_gate``, which deep-copies every nested copy of a large
    controlled walk.
    """
    qc = QuantumCircuit(base.num_qubits, name=name)
    for _ in range(times):
        qc.append(base, qc.qubits, copy=False)
    gate = Gate(name, base.num_qubits, [])
    gate.definition = qc
    return gate


def exact_oracle(A, clock_qubits: int, evolution_time: float, form: Form = "gate") -> PhaseOracle:
    """Controlled e^{iAt·2^j} as block-diagonal unitaries (ideal Hamiltonian simulation).

    One `scipy.linalg.expm`, then c − 1 matrix products. The same gates serve both forms; the
    simulation form also keeps the matrices, which phase estimation applies as multiplexers.
    """
    a = check_matrix(A)
    _check_clock(clock_qubits)
    _check_form(form)
    m = a.shape[0].bit_length() - 1
    squares = _squares(scipy.linalg.expm(1j * evolution_time * a), clock_qubits)
    return PhaseOracle(
        kind="exact",
        form=form,
        clock_qubits=clock_qubits,
        n_system_qubits=m,
        n_block_qubits=0,
        evolution_time=float(evolution_time),
        alpha=None,
        block_encoding=None,
        powers=_squared_powers(squares, clock_qubits, "c-exp(iAt)"),
        n_calls=2**clock_qubits - 1,
        power_matrices=squares if form == "simulation" else None,
    )


def trotter_oracle(
    A, clock_qubits: int, evolution_time: float, steps: int, order: int, form: Form = "gate"
) -> PhaseOracle:
    """Controlled product-formula powers: 2^j·steps steps of e^{iAt/steps} on clock qubit j.

    ``"gate"``: the controlled step as Pauli rotations, repeated. ``"simulation"``: the one-step
    matrix computed from the same term sequence, raised to ``steps`` and squared.
    """
    _check_clock(clock_qubits)
    _check_form(form)
    if not isinstance(steps, (int, np.integer)) or steps < 1:
        raise QgpError(f"trotter_steps must be an integer ≥ 1, got {steps!r}")
    op = pauli_decomposition(A)
    delta = evolution_time / steps
    repeats = squares = None
    if form == "simulation":
        squares = _squares(np.linalg.matrix_power(_step_matrix(op, delta, order), steps), clock_qubits)
        powers = _squared_powers(squares, clock_qubits, f"c-trotter{order}")
    else:
        step = controlled_trotter_step(op, delta, order)
        repeats = tuple((step, steps * 2**j) for j in range(clock_qubits))
        powers = tuple(_repeated(g, n, f"c-trotter{order}^{n}") for g, n in repeats)
    return PhaseOracle(
        kind="trotter",
        form=form,
        clock_qubits=clock_qubits,
        n_system_qubits=op.num_qubits,
        n_block_qubits=0,
        evolution_time=float(evolution_time),
        alpha=None,
        block_encoding=None,
        powers=powers,
        n_calls=2**clock_qubits - 1,
        n_pauli_terms=len(op),
        repeats=repeats,
        power_matrices=squares,
    )


def walk_oracle(be: BlockEncoding, clock_qubits: int, form: Form = "gate") -> PhaseOracle:
    """Controlled W^{2^j} for the qubitization walk W = R·U of block encoding ``be``.

    ``"gate"``: the gate-level controlled W repeated 2^j times. ``"simulation"``: diag(I, W^{2^j})
    from the dense W by squaring, when it fits in ``_MAX_FUSED_QUBITS`` qubits; above that, an LCU
    walk's controlled W from native pieces (`_lcu_walk_pieces`), repeated.
    """
    _check_clock(clock_qubits)
    _check_form(form)
    n_target = be.n_system_qubits + be.n_block_qubits
    repeats = squares = pieces = None
    if form == "simulation" and n_target + 1 <= _MAX_FUSED_QUBITS:
        squares = _squares(walk_matrix(be), clock_qubits)
        powers = _squared_powers(squares, clock_qubits, "c-W")
    else:
        if form == "simulation" and be.kind == "lcu":
            pieces = _lcu_walk_pieces(be)
            cw = pieces.controlled_walk()
        else:
            cw = controlled_walk(be)
        repeats = tuple((cw, 2**j) for j in range(clock_qubits))
        powers = tuple(_repeated(g, n, f"c-W^{n}") for g, n in repeats)
    return PhaseOracle(
        kind="walk",
        form=form,
        clock_qubits=clock_qubits,
        n_system_qubits=be.n_system_qubits,
        n_block_qubits=be.n_block_qubits,
        evolution_time=None,
        alpha=float(be.alpha),
        block_encoding=be,
        powers=powers,
        n_calls=2**clock_qubits - 1,
        n_pauli_terms=be.n_pauli_terms,
        repeats=repeats,
        power_matrices=squares,
        walk_pieces=pieces,
    )


def phase_oracle(
    A,
    settings: CircuitSettings,
    lambda_hi: float,
    *,
    form: Form = "gate",
    block_encoding: BlockEncoding | None = None,
) -> PhaseOracle:
    """The oracle ``settings.evolution`` asks for; t derived from λ_hi unless overridden.

    For the walk, ``block_encoding`` (built by the caller, e.g. `qgp.circuits.encoding.block_encoding`)
    is required.
    """
    _check_form(form)
    c = settings.clock_qubits
    _check_clock(c)
    kind = settings.evolution
    if kind not in choices(Evolution):
        raise QgpError(f"unknown evolution {kind!r}; choose one of {choices(Evolution)}")
    if kind == "walk":
        if block_encoding is None:
            raise QgpError("the walk oracle needs a block encoding; set [circuit] encoding")
        return walk_oracle(block_encoding, c, form)
    t = settings.evolution_time
    if t is None:
        t = derived_evolution_time(lambda_hi, c)
    elif not np.isfinite(t) or t <= 0:
        raise QgpError(f"[circuit] evolution_time must be a positive number, got {t!r}")
    if kind == "exact":
        return exact_oracle(A, c, t, form)
    return trotter_oracle(A, c, t, settings.trotter_steps, settings.trotter_order, form)


def _qpe_registers(oracle: PhaseOracle, name: str):
    """An empty circuit on registers ``system``, ``clock`` and (walk) ``block``, and the three
    registers (``block`` an empty list when the oracle has none)."""
    system = QuantumRegister(oracle.n_system_qubits, SYSTEM)
    clock = QuantumRegister(oracle.clock_qubits, CLOCK)
    regs = [system, clock]
    block: Sequence = []
    if oracle.n_block_qubits:
        block = QuantumRegister(oracle.n_block_qubits, BLOCK)
        regs.append(block)
    return QuantumCircuit(*regs, name=name), system, clock, block


def phase_estimation_circuit(oracle: PhaseOracle) -> QuantumCircuit:
    """Phase estimation on registers ``system``, ``clock`` and (walk) ``block``, in that order.

    Hadamards on the clock, clock[j] controls ``oracle.powers[j]``, then the inverse QFT (with
    its swaps, so clock value k = Σ_j 2^j·clock[j] reads φ·2^c directly).
    """
    qc, system, clock, block = _qpe_registers(oracle, "qpe")
    qc.h(clock)
    if oracle.form == "simulation" and oracle.power_matrices is not None:
        for bits, gate in _power_multiplexers(oracle):
            qc.append(gate, [*system, *block, *(clock[j] for j in bits)], copy=False)
    elif oracle.form == "simulation" and oracle.walk_pieces is not None:
        for j in range(oracle.clock_qubits):
            for _ in range(2**j):
                oracle.walk_pieces.append(qc, system, block, clock[j])
    else:
        for j, gate in enumerate(oracle.powers):
            qc.append(gate, [*system, *block, clock[j]])
        qc.append(QFTGate(oracle.clock_qubits).inverse(), clock[:])
        return qc
    qc.compose(_inverse_qft(oracle.clock_qubits), clock[:], inplace=True, copy=False)
    return qc


def _power_multiplexers(oracle: PhaseOracle, inverse: bool = False) -> list[tuple[list[int], MultiplexerGate]]:
    """Σ_k |k⟩⟨k| ⊗ V^k over runs of clock qubits, each run's stack within ``_MAX_MULTIPLEXER_BYTES``.

    The stack for clock bits j0 … j0+g−1 holds V^{k·2^j0} for k < 2^g, built by doubling from
    the squares V^{2^j}: entry k + 2^i is entry k times V^{2^(j0+i)} (all are powers of V, so
    the order of the factors does not matter). ``inverse``: the conjugate transposes.
    """
    key = ("multiplexers", inverse)
    if key in oracle._built:
        return oracle._built[key]
    squares = oracle.power_matrices
    dim = squares[0].shape[0]
    c = oracle.clock_qubits
    per_block = dim * dim * 16
    g = max(1, min(c, int(np.log2(max(1, _MAX_MULTIPLEXER_BYTES // per_block)))))
    out = []
    for j0 in range(0, c, g):
        bits = list(range(j0, min(c, j0 + g)))
        stack = np.eye(dim, dtype=complex)[None]
        for j in bits:
            stack = np.concatenate((stack, stack @ squares[j]))
        if inverse:
            stack = np.ascontiguousarray(stack.conj().transpose(0, 2, 1))
        label = f"c-V^k[{j0}:{bits[-1] + 1}]" + ("_dg" if inverse else "")
        out.append((bits, MultiplexerGate(list(stack), label=label)))
    oracle._built[key] = out
    return out


@lru_cache(maxsize=32)
def _qft_gates(c: int, inverse: bool) -> QuantumCircuit:
    gate = QFTGate(c)
    return (gate.inverse() if inverse else gate.inverse().inverse()).definition


def _inverse_qft(c: int) -> QuantumCircuit:
    """The inverse QFT written out as H, controlled phases and swaps (all native to Aer); shared
    (compose it with ``copy=False`` or copy it; never modify it)."""
    return _qft_gates(c, True)


def _qft(c: int) -> QuantumCircuit:
    """The inverse of `_inverse_qft`, instruction for instruction."""
    return _qft_gates(c, False)




def _inverse_repeated(power: Gate, base: Gate, times: int, base_dg: Gate) -> Gate:
    """What ``power.inverse()`` builds for ``power = _repeated(base, times)``, with the inverse
    of ``base`` computed once and shared instead of once per repetition."""
    name = power.name[:-3] if power.name.endswith("_dg") else power.name + "_dg"
    qc = QuantumCircuit(base.num_qubits, name=power.definition.name)
    for _ in range(times):
        qc.append(base_dg, qc.qubits, copy=False)
    gate = Gate(name, base.num_qubits, [])
    gate.definition = qc
    return gate


def inverse_phase_estimation_circuit(oracle: PhaseOracle) -> QuantumCircuit:
    """``phase_estimation_circuit(oracle).inverse()``, instruction for instruction.

    Same registers, names and gate contents as qiskit's recursive inverse, but a repeated
    controlled walk or Trotter step is inverted once rather than once per repetition (for a
    16-point LCU walk that was most of the build time).
    """
    qc, system, clock, block = _qpe_registers(oracle, "qpe_dg")
    if oracle.form == "simulation" and oracle.power_matrices is not None:
        qc.compose(_qft(oracle.clock_qubits), clock[:], inplace=True, copy=False)
        for bits, gate in reversed(_power_multiplexers(oracle, inverse=True)):
            qc.append(gate, [*system, *block, *(clock[j] for j in bits)], copy=False)
        for q in reversed(clock):
            qc.h(q)
        return qc
    if oracle.form == "simulation" and oracle.walk_pieces is not None:
        qc.compose(_qft(oracle.clock_qubits), clock[:], inplace=True, copy=False)
        for j in reversed(range(oracle.clock_qubits)):
            for _ in range(2**j):
                oracle.walk_pieces.append(qc, system, block, clock[j], inverse=True)
        for q in reversed(clock):
            qc.h(q)
        return qc
    qc.append(QFTGate(oracle.clock_qubits).inverse().inverse(), clock[:])
    inverted: dict[int, Gate] = {}  # one inverse per distinct base gate
    for j in reversed(range(oracle.clock_qubits)):
        power = oracle.powers[j]
        if oracle.repeats is not None:
            base, times = oracle.repeats[j]
            base_dg = inverted.setdefault(id(base), base.inverse())
            power_dg = _inverse_repeated(power, base, times, base_dg)
        elif isinstance(power, UnitaryGate):
            # What UnitaryGate.inverse() returns (label None), without its two unitarity checks.
            power_dg = UnitaryGate(np.conj(power.params[0]).T, check_input=False)
        else:
            power_dg = power.inverse()
        qc.append(power_dg, [*system, *block, clock[j]], copy=False)
    for q in reversed(clock):
        qc.h(q)
    return qc
