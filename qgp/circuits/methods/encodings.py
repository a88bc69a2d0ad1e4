"""The block encodings the qubitization walk is built on, as a small registry of their own.

``[circuit] encoding`` picks one: ``dilation`` (one block qubit, U = [[B, S], [S, −B]], B = A/α)
or ``lcu`` (PREPARE† · SELECT · PREPARE over A's Pauli decomposition; see qgp.circuits.encoding).
Each entry knows its α (cheaply, without building U), its block register, how its controlled U is
written at gate level, its native simulation pieces (the LCU's, for walks too large to fuse) and
its share of the resource model. Only this module branches on the encoding's kind.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from qiskit.circuit import Gate, QuantumCircuit, QuantumRegister
from qiskit.circuit.library import UnitaryGate

from qgp.circuits.encoding import (
    BLOCK,
    SYSTEM,
    BlockEncoding,
    MultiplexerGate,
    dilation_alpha,
    dilation_block_encoding,
    lcu_alpha,
    lcu_block_encoding,
    lcu_block_qubits,
    pauli_decomposition,
)
from qgp.circuits.methods.base import SizePiece
from qgp.circuits.methods.exact import dense_gates
from qgp.circuits.phase_estimation import _block_diag_identity
from qgp.errors import QgpError

__all__ = ["ENCODINGS", "get_encoding", "BlockEncodingKind", "Dilation", "Lcu"]


@dataclass(frozen=True)
class BlockEncodingKind:
    """The protocol of one ``[circuit] encoding`` value (defaults: the one-qubit dilation)."""

    name: ClassVar[str]
    label: ClassVar[str]  # in figure labels: "walk + <label>"

    def build(self, A) -> BlockEncoding:
        raise NotImplementedError

    def alpha(self, A, lambda_hi: float | None = None) -> float:
        """α of the encoding `build` makes, without building it."""
        raise NotImplementedError

    def block_qubits_depend_on_terms(self) -> bool:
        return False

    def block_qubits(self, n_pauli_terms: int | None = None) -> int:
        return 1

    def needs_pauli_terms(self) -> bool:
        return False

    def synthesis_dependent(self) -> str | None:
        return None

    def composition_is_upper_bound(self) -> bool:
        return False

    def size_piece(self, m: int, *, terms: int, n_pe: int, calls: int) -> SizePiece:
        raise NotImplementedError

    def query_counts(self, a: np.ndarray, n_pauli_terms: int | None):
        """(α, block qubits, Pauli terms) from A alone."""
        raise NotImplementedError

    def append_controlled_u(self, qc: QuantumCircuit, be: BlockEncoding, system, block, ctrl) -> None:
        """Append U controlled by ``ctrl`` (gate level) to ``qc``."""
        raise NotImplementedError

    def native_pieces(self, be: BlockEncoding):
        """Native simulation pieces of the controlled walk when U is too large to fuse (or None)."""
        return None


@dataclass(frozen=True)
class Dilation(BlockEncodingKind):
    """``encoding = "dilation"``: one block qubit, α = max(row-sum bound, ‖A‖)."""

    name = "dilation"
    label = "dilation"

    def build(self, A) -> BlockEncoding:
        return dilation_block_encoding(A)

    def alpha(self, A, lambda_hi=None) -> float:
        return dilation_alpha(A, lambda_hi)

    def synthesis_dependent(self) -> str | None:
        return "dilation block encoding's controlled U"

    def size_piece(self, m, *, terms, n_pe, calls):
        piece = dense_gates(m + 2)
        return SizePiece(
            n_pe * piece, calls * piece, f"one controlled walk step, a dense {m + 2}-qubit unitary (≈ {piece:,} gates)"
        )

    def query_counts(self, a, n_pauli_terms):
        # The dilation's α is the row-sum (Gershgorin) bound max_i Σ_j |A_ij| ≥ ‖A‖, taken directly:
        # its eigensolve and dense 2^(m+1) unitary are what a large A cannot afford.
        return dilation_alpha(a), 1, n_pauli_terms

    def append_controlled_u(self, qc, be, system, block, ctrl) -> None:
        qc.append(
            UnitaryGate(_block_diag_identity(be.matrix()), label="c-U", check_input=False),
            [*system, *block, ctrl],
        )


@dataclass(frozen=True)
class Lcu(BlockEncodingKind):
    """``encoding = "lcu"``: ⌈log₂ T⌉ block qubits over A's T Pauli strings, α = Σ|c_P|."""

    name = "lcu"
    label = "LCU"

    def build(self, A) -> BlockEncoding:
        return lcu_block_encoding(A)

    def alpha(self, A, lambda_hi=None) -> float:
        return lcu_alpha(pauli_decomposition(A))

    def block_qubits_depend_on_terms(self) -> bool:
        return True

    def block_qubits(self, n_pauli_terms=None) -> int:
        if n_pauli_terms is None:
            raise QgpError("the LCU's block register needs the number of Pauli strings")
        return lcu_block_qubits(n_pauli_terms)

    def needs_pauli_terms(self) -> bool:
        return True

    def composition_is_upper_bound(self) -> bool:
        return True

    def size_piece(self, m, *, terms, n_pe, calls):
        k = lcu_block_qubits(terms)
        piece = 20 * terms * m * (k + 1) + 4 * 2**k
        return SizePiece(
            n_pe * piece,
            calls * piece,
            f"one controlled LCU walk step over {terms} Pauli terms and {k} block qubits (≈ {piece:,} gates)",
        )

    def query_counts(self, a, n_pauli_terms):
        op = pauli_decomposition(a)
        terms = len(op)
        return lcu_alpha(op), lcu_block_qubits(terms), terms

    def append_controlled_u(self, qc, be, system, block, ctrl) -> None:
        # Rebuild SELECT with one more control; PREPARE and PREPARE† are the first and last
        # instructions of the LCU circuit (PREPARE cancels when the control is off).
        k = be.n_block_qubits
        data = be.circuit.data
        prep, select, unprep = data[0], data[1:-1], data[-1]
        qc.append(prep.operation, block[:])
        for inst in select:
            op = inst.operation  # a `ctrl_state`-controlled ±P on [block…, system…]
            base = op.base_gate
            state = op.ctrl_state | (1 << k)
            qc.append(base.control(k + 1, ctrl_state=state, annotated=False), [*block, ctrl, *system])
        qc.append(unprep.operation, block[:])

    def native_pieces(self, be: BlockEncoding):
        return _lcu_walk_pieces(be)


ENCODINGS: dict[str, BlockEncodingKind] = {e.name: e for e in (Lcu(), Dilation())}


def get_encoding(name: str) -> BlockEncodingKind:
    """The registered block encoding ``name``; `QgpError` naming the choices otherwise."""
    try:
        return ENCODINGS[name]
    except (KeyError, TypeError):
        raise QgpError(
            f"the walk oracle needs a block encoding, got [circuit] encoding = {name!r}; "
            f"choose one of {tuple(ENCODINGS)}"
        ) from None


# ---------------------------------------------------------------------------------------------
# The LCU walk's native simulation pieces


@dataclass(frozen=True)
class _WalkPieces:
    """A large LCU walk's controlled W = PREPARE · controlled SELECT · PREPARE† · controlled R,
    each piece an instruction Aer applies natively (simulation form).

    PREPARE is the LCU's own RY tree with each uniformly controlled RY as a multiplexer
    (``prepare``: (gate, block qubit indices) in order); SELECT, controlled, is one multiplexer
    over [block…, control] with targets ``system`` (identity for control = 0 and unused block
    values); the controlled reflection is a diagonal over [block…, control]. Same operator as
    `controlled_walk` (tests/readout/test_speed_paths.py).
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

