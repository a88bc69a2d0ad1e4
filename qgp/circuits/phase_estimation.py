"""Phase estimation of A with c clock qubits, generic over the phase oracle.

Phase estimation (Nielsen & Chuang §5.2): Hadamards on ``clock``, clock qubit j controls V^{2^j},
then the inverse QFT. An eigenvector of V with eigenvalue e^{2πiφ} leaves ``clock`` in |k⟩ with
k ≈ φ·2^c (``clock[0]`` least significant). The oracles V — ``exact`` (e^{iAt}), ``trotter`` (a
product formula) and ``walk`` (qubitization) — and how a clock value k decodes to λ̃_k live in
their own modules, qgp.circuits.methods.*; `phase_oracle` asks the registry for the one the
settings name. Each builds a `PhaseOracle`: the controlled powers and what phase estimation needs
to apply them.

The evolution time of the e^{iAt} oracles is t = 2π(1 − 2^(1−c))/λ_hi unless given: λ_hi·t/2π
at 1 would alias λ_hi to clock value 0, and the margin of two bins keeps it clear of the wrap.

Two forms of the same operator: ``"gate"`` builds the gate-level circuit (what resource counts and
exports see); ``"simulation"`` builds only instructions Aer applies natively, so a simulation needs
no transpiling. The controlled powers act on qubits [system…, block…, control]: the control is the
most significant qubit, so diag(I, V) is their matrix. In the simulation form, when V is held as a
dense matrix (exact, Trotter, the walk up to its fusion limit), phase estimation applies all
controlled powers of a run of clock qubits as one multiplexer Σ_k |k⟩⟨k|_clock ⊗ V^k (one pass over
the statevector with a 2^m×2^m block per amplitude group, instead of one pass per clock qubit with a
2^(m+1)-sized block); larger LCU walks run PREPARE, the controlled SELECT (a multiplexer over
block and control) and the controlled reflection (a diagonal) as separate native pieces
(``walk_pieces``). The inverse QFT is written out as H, controlled phases and swaps.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any, Literal

import numpy as np
from qiskit.circuit import CircuitInstruction, Gate, QuantumCircuit, QuantumRegister
from qiskit.circuit.library import QFTGate, UnitaryGate

from qgp.circuits.encoding import BLOCK, SYSTEM, BlockEncoding, MultiplexerGate
from qgp.errors import QgpError
from qgp.settings import CircuitSettings

__all__ = [
    "CLOCK",
    "Form",
    "PhaseOracle",
    "derived_evolution_time",
    "phase_oracle",
    "phase_estimation_circuit",
    "inverse_phase_estimation_circuit",
    "append_phase_estimation",
    "append_inverse_phase_estimation",
    "append_unchecked",
]

# Names that moved to the method modules, still importable from here (resolved lazily: the method
# modules import this one).
_MOVED = {
    "evolution_clock_eigenvalues": "qgp.circuits.methods.exact",
    "exact_oracle": "qgp.circuits.methods.exact",
    "product_formula_terms": "qgp.circuits.methods.trotter",
    "product_formula_matrix": "qgp.circuits.methods.trotter",
    "controlled_trotter_step": "qgp.circuits.methods.trotter",
    "trotter_oracle": "qgp.circuits.methods.trotter",
    "_step_matrix": "qgp.circuits.methods.trotter",
    "walk_clock_eigenvalues": "qgp.circuits.methods.walk",
    "walk_reflection_matrix": "qgp.circuits.methods.walk",
    "walk_matrix": "qgp.circuits.methods.walk",
    "controlled_walk": "qgp.circuits.methods.walk",
    "walk_oracle": "qgp.circuits.methods.walk",
    "_MAX_FUSED_QUBITS": "qgp.circuits.methods.walk",
    "_WalkPieces": "qgp.circuits.methods.encodings",
    "_lcu_walk_pieces": "qgp.circuits.methods.encodings",
    "_tree_matrix": "qgp.circuits.methods.encodings",
}


def __getattr__(name: str) -> Any:
    if name in _MOVED:
        import importlib

        return getattr(importlib.import_module(_MOVED[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


CLOCK = "clock"
Form = Literal["gate", "simulation"]

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



def _block_diag_identity(v: np.ndarray) -> np.ndarray:
    dim = v.shape[0]
    out = np.zeros((2 * dim, 2 * dim), dtype=complex)
    out[:dim, :dim] = np.eye(dim)
    out[dim:, dim:] = v
    return out

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
    ``walk_pieces`` the native pieces of a large LCU walk (qgp.circuits.methods.encodings); `phase_estimation_circuit` builds from
    these rather than from ``powers``.
    """

    kind: str
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
    walk_pieces: Any = field(default=None, repr=False, compare=False)
    # Simulation-form pieces built from this oracle (multiplexer stacks), kept for its lifetime:
    # the inverse and inverse_sqrt circuits and the uncompute all reuse them.
    _built: dict = field(default_factory=dict, repr=False, compare=False)

    def clock_eigenvalues(self) -> np.ndarray:
        """Decoded λ̃ for each clock value k in [0, 2^c) (the method's decoding), shape (2^c,)."""
        from qgp.circuits.methods import get_method

        return get_method(self.kind).clock_eigenvalues(self.clock_qubits, self.evolution_time, self.alpha)


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


class _LazyPowers(Sequence):
    """`_squared_powers` of the given squares, built on first use: a simulation-form circuit
    applies the squares as multiplexers and never reads these gates (building them measured
    ~0.1 ms of a cold 17-qubit inference)."""

    def __init__(self, squares: tuple[np.ndarray, ...], clock_qubits: int, label: str):
        self._args = (squares, clock_qubits, label)
        self._gates: tuple[Gate, ...] | None = None

    def _all(self) -> tuple[Gate, ...]:
        if self._gates is None:
            self._gates = _squared_powers(*self._args)
        return self._gates

    def __getitem__(self, j):
        return self._all()[j]

    def __len__(self) -> int:
        return self._args[1]

    def __eq__(self, other) -> bool:
        return isinstance(other, Sequence) and tuple(self) == tuple(other)

    __hash__ = None


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


def phase_oracle(
    A,
    settings: CircuitSettings,
    lambda_hi: float,
    *,
    form: Form = "gate",
    block_encoding: BlockEncoding | None = None,
) -> PhaseOracle:
    """The oracle ``settings.evolution`` names, built by its method (qgp.circuits.methods).

    Parameters
    ----------
    A : array, shape (2^m, 2^m)
    settings : CircuitSettings
    lambda_hi : float
        Upper eigenvalue bound (t is derived from it unless ``[circuit] evolution_time`` is set).
    form : "gate" or "simulation"
    block_encoding : BlockEncoding, optional
        Required by methods that use one (the walk); build it with the method's ``block_encoding``.

    Returns
    -------
    PhaseOracle
    """
    from qgp.circuits.methods import get_method

    _check_form(form)
    _check_clock(settings.clock_qubits)
    method = get_method(settings.evolution)
    return method.oracle(A, settings, lambda_hi, form, block_encoding)


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
    append_phase_estimation(qc, oracle, system, clock, block)
    return qc


def append_unchecked(qc: QuantumCircuit, gate: Gate, qubits) -> None:
    """Append a gate built here (no symbolic parameters, as many qubits as it acts on) to ``qc``'s
    qubits without `QuantumCircuit.append`'s checks, which loop over every parameter: a
    multiplexer's matrices or a 2^(c+1)-entry diagonal (measured here: a 512-entry diagonal
    0.35 → 0.26 ms, a 64-block multiplexer 0.06 → 0.04 ms)."""
    qc._append(CircuitInstruction(gate, tuple(qubits)))


def append_phase_estimation(qc: QuantumCircuit, oracle: PhaseOracle, system, clock, block) -> None:
    """`phase_estimation_circuit`'s instructions appended to ``qc`` on the given qubits (a larger
    circuit is built without composing a sub-circuit into it)."""
    qc.h(clock)
    if oracle.form == "simulation" and oracle.power_matrices is not None:
        for bits, gate in _power_multiplexers(oracle):
            append_unchecked(qc, gate, [*system, *block, *(clock[j] for j in bits)])
    elif oracle.form == "simulation" and oracle.walk_pieces is not None:
        for j in range(oracle.clock_qubits):
            for _ in range(2**j):
                oracle.walk_pieces.append(qc, system, block, clock[j])
    else:
        for j, gate in enumerate(oracle.powers):
            qc.append(gate, [*system, *block, clock[j]])
        qc.append(QFTGate(oracle.clock_qubits).inverse(), clock[:])
        return
    qc.compose(_inverse_qft(oracle.clock_qubits), clock[:], inplace=True, copy=False)


def _power_multiplexers(oracle: PhaseOracle, inverse: bool = False) -> list[tuple[list[int], MultiplexerGate]]:
    """Σ_k |k⟩⟨k| ⊗ V^k over runs of clock qubits, each run's stack within ``_MAX_MULTIPLEXER_BYTES``.

    The stack for clock bits j0 … j0+g−1 holds V^{k·2^j0} for k < 2^g, built by doubling from
    the squares V^{2^j}: entry k + 2^i is entry k times V^{2^(j0+i)} (all are powers of V, so
    the order of the factors does not matter). ``inverse``: the conjugate transposes.
    """
    key = ("multiplexers", inverse)
    if key in oracle._built:
        return oracle._built[key]
    if inverse:
        # Each the forward one's inverse (its adjoint_of set: a simulator may reuse its merge).
        out = []
        for bits, gate in _power_multiplexers(oracle):
            dg = gate.inverse()
            dg.label = f"{gate.label}_dg"
            out.append((bits, dg))
        oracle._built[key] = out
        return out
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
        out.append((bits, MultiplexerGate(stack, label=f"c-V^k[{j0}:{bits[-1] + 1}]")))
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
    append_inverse_phase_estimation(qc, oracle, system, clock, block)
    return qc


def append_inverse_phase_estimation(qc: QuantumCircuit, oracle: PhaseOracle, system, clock, block) -> None:
    """`inverse_phase_estimation_circuit`'s instructions appended to ``qc`` on the given qubits."""
    if oracle.form == "simulation" and oracle.power_matrices is not None:
        qc.compose(_qft(oracle.clock_qubits), clock[:], inplace=True, copy=False)
        for bits, gate in reversed(_power_multiplexers(oracle, inverse=True)):
            append_unchecked(qc, gate, [*system, *block, *(clock[j] for j in bits)])
        for q in reversed(clock):
            qc.h(q)
        return
    if oracle.form == "simulation" and oracle.walk_pieces is not None:
        qc.compose(_qft(oracle.clock_qubits), clock[:], inplace=True, copy=False)
        for j in reversed(range(oracle.clock_qubits)):
            for _ in range(2**j):
                oracle.walk_pieces.append(qc, system, block, clock[j], inverse=True)
        for q in reversed(clock):
            qc.h(q)
        return
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
