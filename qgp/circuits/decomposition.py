"""A circuit as runs of distinct pieces, each lowered to a basis once: exact counts and depth.

A gate-form circuit is split (`decompose_circuit`) into its top-level instructions, with a
repetition wrapper (a gate applying one gate n times, how phase estimation writes controlled
V^{2^j}) opened into one run of n. Each distinct piece (by content digest) is transpiled once
(`lower_piece`, at `OPTIMIZATION_LEVEL`, ``qubits_initially_zero=False``: pieces run mid-circuit);
gate counts are exact sums over the runs, and the depth is exact too, composed in max-plus algebra
from each piece's longest-path matrix. See qgp.circuits.resources for what is counted with it.

Counting (`DecomposedCircuit.gate_counts`, `.depth`) needs only each piece's counts and path
matrix, looked up in memory, then in the on-disk cache of `qgp.circuits.count_store` (kept between
processes, keyed by digest, basis, level and qiskit version), and only then transpiled with
`lower_piece`, which fills both. `lower_piece` and `DecomposedCircuit.lowered` still give the
transpiled circuits (export, gate-noise simulation).
"""

from __future__ import annotations

import hashlib
from collections import OrderedDict
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
from qiskit import transpile
from qiskit.circuit import ControlledGate, Gate, Instruction, QuantumCircuit

from qgp.circuits import count_store
from qgp.circuits.count_store import PieceCounts
from qgp.errors import QgpError

__all__ = [
    "OPTIMIZATION_LEVEL",
    "Piece",
    "Run",
    "LoweredPiece",
    "DecomposedCircuit",
    "decompose_circuit",
    "lower_piece",
    "piece_counts",
]

#: The transpiler's optimisation level for every count (stated in every output).
OPTIMIZATION_LEVEL = 0

# Lowered pieces, keyed by (content digest, basis): the inverse and inverse_sqrt circuits share
# their phase-estimation pieces, and repeated resource calls in one process cost nothing.
_CACHE: OrderedDict[tuple[str, tuple[str, ...]], LoweredPiece] = OrderedDict()
_CACHE_SIZE = 64
# What counting needs of a lowered piece (counts and path matrix, no circuit), by the same key:
# small, so many more are kept; filled by `lower_piece` and by reads of the disk cache.
_COUNTS: OrderedDict[tuple[str, tuple[str, ...]], PieceCounts] = OrderedDict()
_COUNTS_SIZE = 1024


def _remember(cache: OrderedDict, key, value, size: int) -> None:
    cache[key] = value
    cache.move_to_end(key)
    if len(cache) > size:
        cache.popitem(last=False)


# ---------------------------------------------------------------------------------------------
# Pieces, runs and their lowering to a basis


def _param_bytes(p) -> bytes:
    if isinstance(p, np.ndarray):
        return np.ascontiguousarray(p, dtype=complex).tobytes() + repr(p.shape).encode()
    if isinstance(p, (list, tuple)):
        return b"[" + b",".join(_param_bytes(x) for x in p) + b"]"
    if isinstance(p, (bool, int, float, complex, np.number)):
        return repr(complex(p)).encode()
    return repr(p).encode()  # ParameterExpression, strings: their text identifies them


def _digest(op: Instruction) -> str:
    """A content digest of an operation: equal digests mean the same operator.

    Covers the type, name, size, parameters, control state and, for plain composite gates (from
    ``to_gate``/``inverse``), the definition recursively with its global phase. Library gates
    (UnitaryGate, StatePreparation, UCRYGate, QFTGate, standard gates) are identified by their
    parameters, so their lazily synthesised definitions are never built here.
    """
    h = hashlib.sha1()
    h.update(f"{type(op).__name__}|{op.name}|{op.num_qubits}|{op.num_clbits}|".encode())
    for p in op.params:
        h.update(_param_bytes(p))
    if isinstance(op, ControlledGate):
        h.update(f"|ctrl{op.num_ctrl_qubits}:{op.ctrl_state}|".encode())
        h.update(_digest(op.base_gate).encode())
    elif type(op) in (Gate, Instruction) and not op.params and op.definition is not None:
        d = op.definition
        h.update(f"|def:{float(d.global_phase)!r}|".encode())
        for inst in d.data:
            h.update(_digest(inst.operation).encode())
            h.update(repr(tuple(d.find_bit(q).index for q in inst.qubits)).encode())
    return h.hexdigest()


def _readable_name(op: Instruction) -> str:
    label = getattr(op, "label", None)
    return str(label or op.name)


@dataclass(frozen=True)
class Piece:
    """A distinct sub-circuit: its operation (on ``n_qubits`` qubits), a readable name, its digest."""

    key: str
    name: str
    operation: Instruction = field(repr=False)
    n_qubits: int


@dataclass(frozen=True)
class Run:
    """``repeat`` consecutive applications of piece ``key`` on circuit qubits ``qubits``."""

    key: str
    qubits: tuple[int, ...]
    repeat: int = 1


@dataclass(frozen=True)
class LoweredPiece:
    """A piece transpiled to a basis: the circuit, its gate counts, depth and longest-path matrix.

    ``paths[j, i]`` is the longest gate path from input qubit i to output qubit j (−inf if none,
    0 on the diagonal of an idle qubit), so a piece applied after per-qubit depths d ends at
    depths max_i(d_i + paths[j, i]).
    """

    circuit: QuantumCircuit = field(repr=False)
    counts: Mapping[str, int]
    depth: int
    paths: np.ndarray = field(repr=False)

    @property
    def size(self) -> int:
        return int(sum(self.counts.values()))


def _longest_paths(qc: QuantumCircuit) -> np.ndarray:
    """paths[j, i]: longest gate path from input qubit i to output qubit j (−inf if none).

    Rows are Python lists and single-qubit gates are added lazily (``pending``): the loop runs
    once per gate of a piece (up to ~10^5), where numpy's per-call overhead would dominate.
    """
    n = qc.num_qubits
    index = {q: i for i, q in enumerate(qc.qubits)}
    ninf = float("-inf")
    rows = [[0.0 if i == j else ninf for i in range(n)] for j in range(n)]
    pending = [0.0] * n
    for inst in qc.data:
        qs = [index[q] for q in inst.qubits]
        if len(qs) == 1:
            pending[qs[0]] += 1.0
            continue
        cols = [[x + pending[q] for x in rows[q]] for q in qs]
        new = [max(col) + 1.0 for col in zip(*cols)]
        for q in qs:
            rows[q] = new
            pending[q] = 0.0
    for q in range(n):
        rows[q] = [x + pending[q] for x in rows[q]]
    return np.array(rows, dtype=float).reshape(n, n)


def lower_piece(piece: Piece, basis: tuple[str, ...]) -> LoweredPiece:
    """Transpile one piece to ``basis`` at `OPTIMIZATION_LEVEL` (cached by content and basis).

    Its counts and path matrix also go to the in-memory and disk caches of `piece_counts`.
    No coupling map is given, so no layout or routing pass runs: the result acts on the piece's
    qubits in order, with no swap inserted and no final permutation (checked).
    """
    cache_key = (piece.key, tuple(basis))
    hit = _CACHE.get(cache_key)
    if hit is not None:
        _CACHE.move_to_end(cache_key)
        return hit
    qc = QuantumCircuit(piece.n_qubits, name=piece.name)
    qc.append(piece.operation, qc.qubits)
    # qubits_initially_zero=False: the piece runs mid-circuit, so synthesis must not treat its idle
    # qubits as clean |0⟩ ancillas (it did for the LCU's multi-controlled Paulis, and the
    # exported walk was wrong).
    out = transpile(
        qc, basis_gates=list(basis), optimization_level=OPTIMIZATION_LEVEL, qubits_initially_zero=False
    )
    if out.layout is not None and (
        list(out.layout.final_index_layout()) != list(range(piece.n_qubits))
    ):
        raise RuntimeError(f"transpiling {piece.name!r} permuted its qubits; the count would be wrong")
    extra = set(out.count_ops()) - set(basis)
    if extra:
        raise RuntimeError(f"transpiling {piece.name!r} left gates {sorted(extra)} outside {list(basis)}")
    paths = _longest_paths(out)
    lowered = LoweredPiece(
        circuit=out,
        counts=dict(out.count_ops()),
        depth=int(paths.max()) if paths.size else 0,  # every path starts at depth 0
        paths=paths,
    )
    _remember(_CACHE, cache_key, lowered, _CACHE_SIZE)
    counted = PieceCounts(counts=lowered.counts, paths=paths)
    _remember(_COUNTS, cache_key, counted, _COUNTS_SIZE)
    count_store.store(piece.key, cache_key[1], OPTIMIZATION_LEVEL, counted)
    return lowered


def piece_counts(piece: Piece, basis: tuple[str, ...]) -> PieceCounts:
    """The gate counts and path matrix of one piece in ``basis``, transpiling only on a miss.

    Looked up in memory, then in the disk cache (`qgp.circuits.count_store`), and only then
    lowered with `lower_piece`, which fills both.
    """
    cache_key = (piece.key, tuple(basis))
    hit = _COUNTS.get(cache_key)
    if hit is not None:
        _COUNTS.move_to_end(cache_key)
        return hit
    lowered = _CACHE.get(cache_key)
    if lowered is None:
        found = count_store.load(piece.key, cache_key[1], OPTIMIZATION_LEVEL, piece.n_qubits)
        if found is None:
            lowered = lower_piece(piece, cache_key[1])
    if lowered is not None:
        found = PieceCounts(counts=lowered.counts, paths=lowered.paths)
    _remember(_COUNTS, cache_key, found, _COUNTS_SIZE)
    return found


@dataclass(frozen=True)
class DecomposedCircuit:
    """A circuit as an ordered list of runs over distinct pieces, with its registers.

    ``registers`` are (name, size) in qubit order; ``global_phase`` is the phase not carried by
    any piece (the source circuit's own and that of repetition wrappers).
    """

    registers: tuple[tuple[str, int], ...]
    pieces: Mapping[str, Piece]
    runs: tuple[Run, ...]
    global_phase: float = 0.0

    @property
    def num_qubits(self) -> int:
        return sum(size for _, size in self.registers)

    def multiplicity(self) -> dict[str, int]:
        """How many times each piece is applied in total."""
        out: dict[str, int] = {}
        for run in self.runs:
            out[run.key] = out.get(run.key, 0) + run.repeat
        return out

    def lowered(self, basis: tuple[str, ...]) -> dict[str, LoweredPiece]:
        """Every piece transpiled to ``basis`` (`lower_piece`), circuits included."""
        return {key: lower_piece(piece, basis) for key, piece in self.pieces.items()}

    def counted(self, basis: tuple[str, ...]) -> dict[str, PieceCounts]:
        """Every piece's counts and path matrix in ``basis`` (`piece_counts`: cached, no circuit)."""
        return {key: piece_counts(piece, basis) for key, piece in self.pieces.items()}

    def gate_counts(self, basis: tuple[str, ...]) -> dict[str, int]:
        """Exact gate counts of the whole circuit in ``basis``: Σ multiplicity × piece counts."""
        counted = self.counted(basis)
        total: dict[str, int] = {}
        for key, times in self.multiplicity().items():
            for name, n in counted[key].counts.items():
                total[name] = total.get(name, 0) + times * int(n)
        return {name: total[name] for name in sorted(total)}

    def depth(self, basis: tuple[str, ...]) -> int:
        """Exact depth of the whole circuit in ``basis``, composed from the pieces' path matrices."""
        counted = self.counted(basis)
        d = np.zeros(self.num_qubits)
        for run in self.runs:
            paths = counted[run.key].paths
            idx = np.asarray(run.qubits)
            for _ in range(run.repeat):
                d[idx] = np.max(d[idx][None, :] + paths, axis=1)
        return int(d.max()) if d.size else 0

def _repeated_base(op: Instruction) -> tuple[Instruction, tuple[int, ...], int] | None:
    """(base, qubits, n) when ``op`` is a plain gate whose definition applies one gate n times.

    That is how phase estimation writes controlled V^{2^j} for the walk and the product formula
    (and qiskit writes their inverses). Only the first copy's operation is kept; the copies are
    recognised by name and qubits, which the builder gives to one repeated object.
    """
    if type(op) not in (Gate, Instruction) or op.params:
        return None
    d = op.definition
    if d is None or len(d.data) == 0 or float(d.global_phase) != 0.0:
        return None
    first = d.data[0]
    if not all(
        inst.operation.name == first.operation.name and inst.qubits == first.qubits for inst in d.data
    ):
        return None
    qubits = tuple(d.find_bit(q).index for q in first.qubits)
    return first.operation, qubits, len(d.data)


def _merged(runs) -> tuple[Run, ...]:
    """Consecutive runs of one piece on the same qubits as one run."""
    out: list[Run] = []
    for run in runs:
        if out and out[-1].key == run.key and out[-1].qubits == run.qubits:
            out[-1] = Run(run.key, run.qubits, out[-1].repeat + run.repeat)
        else:
            out.append(run)
    return tuple(out)


def decompose_circuit(qc: QuantumCircuit, *, open_repeats: bool = True) -> DecomposedCircuit:
    """Split ``qc`` into runs of distinct pieces: its top-level instructions, with repetition
    wrappers (a gate applying one gate n times) opened one level into one run of n when
    ``open_repeats``."""
    pieces: dict[str, Piece] = {}
    runs: list[Run] = []
    for inst in qc.data:
        op = inst.operation
        if op.num_clbits or op.name in ("measure", "reset", "barrier", "delay"):
            raise QgpError(f"cannot decompose a circuit with a {op.name!r} instruction: it must be unitary")
        qubits = tuple(qc.find_bit(q).index for q in inst.qubits)
        rep = _repeated_base(op) if open_repeats else None
        times = 1
        if rep is not None:
            op, inner, times = rep
            qubits = tuple(qubits[i] for i in inner)
        key = _digest(op)
        if key not in pieces:
            pieces[key] = Piece(key=key, name=_readable_name(op), operation=op, n_qubits=op.num_qubits)
        runs.append(Run(key, qubits, times))
    registers = tuple((r.name, r.size) for r in qc.qregs)
    if [qc.find_bit(q).index for r in qc.qregs for q in r] != list(range(qc.num_qubits)):
        raise QgpError("cannot decompose a circuit whose registers do not cover its qubits in order")
    return DecomposedCircuit(registers=registers, pieces=pieces, runs=_merged(runs), global_phase=float(qc.global_phase))


def _register_offsets(registers) -> dict[str, int]:
    out, offset = {}, 0
    for name, size in registers:
        out[name] = offset
        offset += size
    return out
