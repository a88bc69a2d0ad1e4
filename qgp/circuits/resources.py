"""Resource accounting for the inversion circuits: qubits, gate counts and depth, query counts.

Two kinds of numbers, kept apart:

* query-level counts that do not depend on synthesis: qubits per register, α, the number of
  Pauli terms of A, the number of controlled oracle applications (U/W for the walk, e^{iAt} or one
  product-formula e^{iAt} for ``exact``/``trotter``) and the total evolution time t·(2^c − 1) per
  phase estimation (Nielsen & Chuang §5.2: clock qubit j controls V^{2^j}, Σ_{j<c} 2^j = 2^c − 1);
* gate counts and depth after ``transpile(..., basis_gates=B, optimization_level=0)`` for
  B = ['u', 'cx'] and ['rz', 'sx', 'x', 'cx'].

Composition (why the gate level is cheap): the gate-form circuit of `build_inversion` is a short
sequence of *runs*, each a sub-circuit ("piece": a state-preparation step, a Hadamard, one
controlled W, one controlled product-formula step, one controlled e^{iAt·2^j}, the inverse QFT,
the multiplexed RY, and their inverses in the uncompute) repeated some number of times — the
controlled power V^{2^j} of the walk and the product formula is 2^j copies of one gate, opened
into one run of 2^j. Each distinct piece is transpiled once; gate counts are the exact sums over
the runs, and the depth is exact too, composed in max-plus algebra from each piece's longest-path
matrix (entry [j, i] = longest gate path from input qubit i to output qubit j). At optimisation
level 0 nothing is optimised across gates, so these are the counts and depth of a direct
``transpile`` of the whole circuit (tests/test_resources.py checks this on small cases) — except
with the ``lcu`` encoding, where a direct transpile may borrow idle qubits of other registers as
ancillas for the multi-controlled Paulis and comes out lower (the composed counts are then an
upper bound). They are exactly the gates of the file `qgp.circuits.qasm` writes. Pieces are transpiled
with ``qubits_initially_zero=False``: they run mid-circuit, and with the default qiskit used
"clean" idle qubits of an LCU piece as ancillas, which is wrong in context.

Synthesis-dependent counts: the ``exact`` oracle's controlled e^{iAt·2^j} and the ``dilation``
encoding's controlled U are dense unitaries; their synthesised gate counts grow as 4^m and say how
qiskit decomposes a generic matrix, not what an algorithm costs. Such resources carry
``synthesis_dependent = True`` and a note.

Size limit: gate-level counting is refused (``gate_level_skipped`` says why) when the estimated
number of gates to synthesise, over the distinct pieces, exceeds `SYNTHESIS_LIMIT` per basis
(a dense q-qubit unitary synthesises to ≈ 1.25·4^q gates at ≈ 40 000 gates/s here; 500 000 gates
is ≈ 10–30 s for both bases), or the circuit applies more than `MAX_ORACLE_CALLS` oracle copies.
"""

from __future__ import annotations

import hashlib
import math
from collections import OrderedDict
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from qiskit import transpile
from qiskit.circuit import ControlledGate, Gate, Instruction, QuantumCircuit

from qgp.circuits.encoding import BLOCK, SYSTEM, check_matrix, pauli_decomposition
from qgp.errors import QgpError
from qgp.circuits.inversion import FLAG, InversionCircuit, build_inversion, check_inversion_inputs
from qgp.circuits.phase_estimation import CLOCK, derived_evolution_time
from qgp.settings import CircuitSettings, Rotation

__all__ = [
    "gate_counts_by_basis",
    "BASES",
    "OPTIMIZATION_LEVEL",
    "SYNTHESIS_LIMIT",
    "MAX_ORACLE_CALLS",
    "SizeEstimate",
    "Piece",
    "Run",
    "LoweredPiece",
    "DecomposedCircuit",
    "CircuitResources",
    "estimate_size",
    "size_estimate",
    "GateInversion",
    "decompose_circuit",
    "gate_inversion",
    "lower_piece",
    "resources_of",
    "inversion_resources",
    "inference_resources",
]

#: The two fixed bases, by the key used in `CircuitResources.gate_counts` and in JSON.
BASES: dict[str, tuple[str, ...]] = {"u_cx": ("u", "cx"), "rz_sx_x_cx": ("rz", "sx", "x", "cx")}
#: The transpiler's optimisation level for every count (stated in every output).
OPTIMIZATION_LEVEL = 0
#: Largest estimated number of gates to synthesise, per basis, summed over the distinct pieces.
SYNTHESIS_LIMIT = 500_000
#: Largest number of controlled oracle copies (calls) a decomposed circuit may hold.
MAX_ORACLE_CALLS = 2**16

_SYNTHESIS_NOTE = (
    "gate counts of the {what} are those of qiskit's synthesis of dense unitaries: they grow as 4^m "
    "and describe a generic-matrix decomposition, not the cost of an algorithm; compare query-level "
    "counts (oracle calls, alpha, evolution time) across oracles instead"
)
_COMPOSITION_NOTE = (
    "each distinct sub-circuit (state preparation, Hadamard, one controlled oracle call, inverse QFT, "
    "multiplexed RY, and their inverses) is transpiled once at optimization_level {level}; gate counts "
    "are exact sums over its repetitions and the depth is exact, composed from each piece's "
    "longest-path matrix (max-plus algebra); they are exactly the gates of the exported file. Level {level} "
    "optimises nothing across gates, so both equal a direct transpile of the whole circuit{lcu}"
)
_LCU_COMPOSITION = (
    ", except with the lcu encoding: there a direct transpile may borrow idle qubits of other registers as "
    "ancillas for the multi-controlled Paulis and comes out lower, so these counts and depth are an upper bound"
)

# Lowered pieces, keyed by (content digest, basis): the inverse and inverse_sqrt circuits share
# their phase-estimation pieces, and repeated resource calls in one process cost nothing.
_CACHE: OrderedDict[tuple[str, tuple[str, ...]], LoweredPiece] = OrderedDict()
_CACHE_SIZE = 64


# ---------------------------------------------------------------------------------------------
# Size estimate (a priori, from the problem's dimensions only)


@dataclass(frozen=True)
class SizeEstimate:
    """A-priori size of the gate-level work: gates to synthesise, oracle copies, the largest piece.

    ``synthesis_gates`` estimates, per basis, the gates produced when each distinct piece is
    transpiled once; ``expanded_gates`` the gates of the whole circuit once every repetition is
    written out; ``largest_piece`` describes the most expensive piece in words.
    """

    synthesis_gates: int
    expanded_gates: int
    oracle_calls: int
    largest_piece: str
    n_pauli_terms: int | None

    @property
    def within_limits(self) -> bool:
        return self.synthesis_gates <= SYNTHESIS_LIMIT and self.oracle_calls <= MAX_ORACLE_CALLS

    def describe(self) -> str:
        """One sentence: how large the circuit is against the limits."""
        return (
            f"the circuit applies {self.oracle_calls} controlled oracle copies (limit {MAX_ORACLE_CALLS}), "
            f"its distinct pieces synthesise to ≈ {self.synthesis_gates:,} gates per basis "
            f"(limit {SYNTHESIS_LIMIT:,}; largest: {self.largest_piece}) and ≈ {self.expanded_gates:,} "
            "gates once every repetition is written out"
        )


def _dense_gates(q: int) -> int:
    # Quantum Shannon decomposition of a generic q-qubit unitary: ≈ (23/48)·4^q CX plus ≈ 0.78·4^q
    # single-qubit gates (measured here: 1.24·4^q at q = 8).
    return int(1.25 * 4**q)


def _n_pauli_terms_bound(m: int) -> int:
    # Real symmetric A has only Pauli strings with an even number of Y: (4^m + 2^m)/2 of them.
    return (4**m + 2**m) // 2


# Pauli decompositions beyond this many system qubits cost O(4^m·m) time and memory: estimate with
# the bound instead.
_MAX_EXACT_TERM_COUNT_QUBITS = 10


def estimate_size(
    m: int, settings: CircuitSettings, *, uncompute: bool, prepare: bool, n_pauli_terms: int | None = None
) -> SizeEstimate:
    """Estimate the gate-level work for an inversion circuit on m system qubits (no circuit built).

    Piece estimates (gates per basis): dense q-qubit unitary 1.25·4^q; LCU controlled walk
    20·T·m·(k+1) for T terms over k block qubits (multi-controlled Paulis; 70 000 measured for the
    demo's T = 121, m = 4, k = 7); product-formula step T·(6m + 4), twice for order 2; multiplexed RY
    2·2^c; QFT c²; state preparation 4·2^m.
    """
    c = int(settings.clock_qubits)
    n_pe = 2 if uncompute else 1
    calls = (2**c - 1) * n_pe
    terms = n_pauli_terms if n_pauli_terms is not None else _n_pauli_terms_bound(m)
    shared = 2 * 2**c + n_pe * c * c + (4 * 2**m if prepare else 0) + c * n_pe
    if settings.evolution == "exact":
        piece = _dense_gates(m + 1)
        synth = n_pe * c * piece
        expanded = synth
        largest = f"{n_pe * c} controlled powers of e^(iAt), each a dense {m + 1}-qubit unitary (≈ {piece:,} gates)"
    elif settings.evolution == "trotter":
        steps = int(settings.trotter_steps)
        piece = terms * (6 * m + 4) * (2 if settings.trotter_order == 2 else 1)
        synth = n_pe * piece
        expanded = calls * steps * piece
        largest = f"one controlled product-formula step over {terms} Pauli terms (≈ {piece:,} gates)"
    elif settings.encoding == "dilation":
        piece = _dense_gates(m + 2)
        synth = n_pe * piece
        expanded = calls * piece
        largest = f"one controlled walk step, a dense {m + 2}-qubit unitary (≈ {piece:,} gates)"
    else:
        k = max(1, math.ceil(math.log2(terms)))
        piece = 20 * terms * m * (k + 1) + 4 * 2**k
        synth = n_pe * piece
        expanded = calls * piece
        largest = f"one controlled LCU walk step over {terms} Pauli terms and {k} block qubits (≈ {piece:,} gates)"
    return SizeEstimate(
        synthesis_gates=int(synth + shared),
        expanded_gates=int(expanded + shared),
        oracle_calls=int(calls),
        largest_piece=largest,
        n_pauli_terms=n_pauli_terms,
    )


def _count_terms(a: np.ndarray) -> int | None:
    m = a.shape[0].bit_length() - 1
    if m > _MAX_EXACT_TERM_COUNT_QUBITS:
        return None
    return len(pauli_decomposition(a))


# Below this many system qubits the Pauli term count is reported even where no estimate needs it.
_INFO_TERM_COUNT_QUBITS = 6


def _estimate_for(a: np.ndarray, settings: CircuitSettings, *, uncompute: bool, prepare: bool) -> SizeEstimate:
    m = a.shape[0].bit_length() - 1
    needed = settings.evolution == "trotter" or (settings.evolution == "walk" and settings.encoding == "lcu")
    terms = _count_terms(a) if needed or m <= _INFO_TERM_COUNT_QUBITS else None
    return estimate_size(m, settings, uncompute=uncompute, prepare=prepare, n_pauli_terms=terms)


def size_estimate(A, settings: CircuitSettings, *, uncompute: bool, prepare: bool) -> SizeEstimate:
    """`estimate_size` for the matrix A (its own Pauli term count when m ≤ 10)."""
    return _estimate_for(check_matrix(A), settings, uncompute=uncompute, prepare=prepare)


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
    _CACHE[cache_key] = lowered
    if len(_CACHE) > _CACHE_SIZE:
        _CACHE.popitem(last=False)
    return lowered


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
        return {key: lower_piece(piece, basis) for key, piece in self.pieces.items()}

    def gate_counts(self, basis: tuple[str, ...]) -> dict[str, int]:
        """Exact gate counts of the whole circuit in ``basis``: Σ multiplicity × piece counts."""
        lowered = self.lowered(basis)
        total: dict[str, int] = {}
        for key, times in self.multiplicity().items():
            for name, n in lowered[key].counts.items():
                total[name] = total.get(name, 0) + times * int(n)
        return {name: total[name] for name in sorted(total)}

    def depth(self, basis: tuple[str, ...]) -> int:
        """Exact depth of the whole circuit in ``basis``, composed from the pieces' path matrices."""
        lowered = self.lowered(basis)
        d = np.zeros(self.num_qubits)
        for run in self.runs:
            paths = lowered[run.key].paths
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


# ---------------------------------------------------------------------------------------------
# The gate-form inversion circuit, assembled from its pieces


@dataclass(frozen=True)
class GateInversion:
    """The gate-form circuit of `qgp.circuits.inversion.build_inversion` and its decomposition into runs.

    ``inversion`` holds the circuit and its constants (C, α, t, the decoded clock eigenvalues…);
    ``decomposed`` the same circuit as runs of distinct pieces, ``system | clock | flag | block``.
    ``n_pauli_terms`` counts A's Pauli strings (None when A is too large to decompose cheaply).
    """

    inversion: InversionCircuit
    decomposed: DecomposedCircuit
    prepared: bool
    n_pauli_terms: int | None


def _validated(a: np.ndarray, settings: CircuitSettings, rotation, bounds) -> tuple[float, float]:
    """The checks `build_inversion` makes (one shared function), so both refuse the same inputs."""
    _, lo, hi = check_inversion_inputs(a, settings, rotation, bounds, "gate")
    return lo, hi


def _evolution_time(settings: CircuitSettings, hi: float) -> float:
    t = settings.evolution_time
    if t is None:
        return derived_evolution_time(hi, settings.clock_qubits)
    if not np.isfinite(t) or t <= 0:
        raise QgpError(f"[circuit] evolution_time must be a positive number, got {t!r}")
    return float(t)


def gate_inversion(
    A,
    settings: CircuitSettings,
    rotation: Rotation,
    bounds: tuple[float, float],
    *,
    prepare=None,
    uncompute: bool | None = None,
    _estimate: SizeEstimate | None = None,
) -> GateInversion:
    """Build the gate-form inversion circuit with `build_inversion` and split it into runs.

    Refuses (QgpError) before building when `estimate_size` is over the limits. The runs open
    each repeated controlled power (2^j copies of one controlled W or product-formula step) into
    one run of 2^j, so counting transpiles each distinct piece once. Pieces get readable names
    for the export: ``prepare_…`` for the state preparation, ``flag_rotation`` for the
    multiplexed RY.
    """
    a = check_matrix(A)
    _validated(a, settings, rotation, bounds)
    if uncompute is None:
        uncompute = rotation == "inverse"
    m = a.shape[0].bit_length() - 1
    est = _estimate or _estimate_for(a, settings, uncompute=uncompute, prepare=prepare is not None)
    if not est.within_limits:
        raise QgpError(
            f"the {settings.evolution} inversion circuit on {m} system and {settings.clock_qubits} clock qubits is "
            f"too large to decompose in reasonable time: {est.describe()}; use fewer clock qubits or training "
            "points, or a cheaper oracle"
        )
    inv = build_inversion(a, settings, rotation, bounds, prepare=prepare, uncompute=uncompute, form="gate")
    dec = _named_by_role(decompose_circuit(inv.circuit))
    return GateInversion(
        inversion=inv,
        decomposed=dec,
        prepared=prepare is not None,
        n_pauli_terms=inv.n_pauli_terms or est.n_pauli_terms,
    )


def _named_by_role(dec: DecomposedCircuit) -> DecomposedCircuit:
    """Prefix ``prepare_`` to the pieces acting on ``system`` alone before phase estimation starts,
    and name the piece acting on ``flag`` ``flag_rotation`` (names only label exported gates)."""
    offsets = _register_offsets(dec.registers)
    sizes = dict(dec.registers)
    system = set(range(offsets[SYSTEM], offsets[SYSTEM] + sizes[SYSTEM]))
    flag = offsets[FLAG]
    renamed: dict[str, str] = {}
    preparing = True
    for run in dec.runs:
        piece = dec.pieces[run.key]
        if preparing and set(run.qubits) <= system:
            renamed.setdefault(run.key, "prepare_" + piece.name)
        else:
            preparing = False
        if flag in run.qubits:
            renamed.setdefault(run.key, "flag_rotation")
    pieces = {k: replace(p, name=renamed.get(k, p.name)) for k, p in dec.pieces.items()}
    return replace(dec, pieces=pieces)


# ---------------------------------------------------------------------------------------------
# Resources


@dataclass(frozen=True)
class CircuitResources:
    """Qubits, query-level counts and (when feasible) gate counts and depth of an inversion circuit.

    ``gate_counts[basis_key]`` holds ``basis``, ``counts`` (gate name → number), ``cx``,
    ``total`` and ``depth`` after transpiling at ``optimization_level``; it is None when
    ``gate_level_skipped`` gives the reason. ``n_oracle_calls`` counts controlled applications of
    W (walk), e^{iAt} (exact) or one product-formula e^{iAt} of ``trotter_steps`` steps (trotter),
    over all ``n_phase_estimations`` (2 with the uncompute).
    """

    qubits: Mapping[str, int]
    rotation: str
    evolution: str
    encoding: str | None
    clock_qubits: int
    uncomputed: bool
    prepared: bool
    alpha: float | None
    n_pauli_terms: int | None
    n_block_qubits: int
    n_oracle_calls: int
    n_phase_estimations: int
    oracle_call: str
    evolution_time: float | None
    total_evolution_time_per_phase_estimation: float | None
    total_evolution_time: float | None
    trotter_steps_total: int | None
    optimization_level: int
    gate_counts: Mapping[str, Mapping[str, Any]] | None
    composition: str | None
    synthesis_dependent: bool
    note: str
    gate_level_skipped: str | None
    size_estimate: Mapping[str, Any]

    def as_dict(self) -> dict:
        """Plain JSON-ready types (int, float, str, None, dict, list)."""
        return _jsonable(
            {name: getattr(self, name) for name in self.__dataclass_fields__}  # type: ignore[attr-defined]
        )


def _jsonable(x):
    if isinstance(x, Mapping):
        return {str(k): _jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_jsonable(v) for v in x]
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        return float(x)
    return x


def _oracle_call(settings: CircuitSettings) -> str:
    if settings.evolution == "walk":
        return f"controlled walk W = (2|0><0|_block - I)·U, U the {settings.encoding} block encoding of A/alpha"
    if settings.evolution == "exact":
        return "controlled e^{iAt} (dense unitary; the power 2^j is one dense gate standing for 2^j calls)"
    return (
        f"controlled product formula for e^{{iAt}} (order {settings.trotter_order}, "
        f"{settings.trotter_steps} step(s) per call)"
    )


def _synthesis_note(settings: CircuitSettings) -> tuple[bool, str]:
    if settings.evolution == "exact":
        return True, _SYNTHESIS_NOTE.format(what="controlled powers of e^{iAt}")
    if settings.evolution == "walk" and settings.encoding == "dilation":
        return True, _SYNTHESIS_NOTE.format(what="dilation block encoding's controlled U")
    return False, "gate counts come from the algorithm's own gates (Pauli rotations, multi-controlled Paulis, QFT, multiplexed RY)"


def _composition_note(settings: CircuitSettings) -> str:
    lcu = settings.evolution == "walk" and settings.encoding == "lcu"
    return _COMPOSITION_NOTE.format(level=OPTIMIZATION_LEVEL, lcu=_LCU_COMPOSITION if lcu else "")


def _qubits(m: int, c: int, k: int) -> dict[str, int]:
    q = {SYSTEM: m, CLOCK: c, FLAG: 1}
    if k:
        q[BLOCK] = k
    q["total"] = m + c + 1 + k
    return q


def gate_counts_by_basis(dec: DecomposedCircuit) -> dict[str, dict]:
    """Gate counts, CX count, total and depth of a decomposed circuit for each basis of ``BASES``."""
    out = {}
    for key, basis in BASES.items():
        counts = dec.gate_counts(basis)
        out[key] = {
            "basis": list(basis),
            "counts": counts,
            "cx": int(counts.get("cx", 0)),
            "total": int(sum(counts.values())),
            "depth": dec.depth(basis),
        }
    return out


def resources_of(gi: GateInversion, *, estimate: SizeEstimate | None = None) -> CircuitResources:
    """Resources of a built gate-form inversion circuit, gate level included."""
    inv = gi.inversion
    return _resources(
        inv.settings,
        inv.rotation,
        m=inv.n_system_qubits,
        k=inv.n_block_qubits,
        alpha=inv.alpha,
        terms=gi.n_pauli_terms,
        t=inv.evolution_time,
        uncomputed=inv.uncomputed,
        prepared=gi.prepared,
        gate_counts=gate_counts_by_basis(gi.decomposed),
        skipped=None,
        estimate=estimate,
    )


def _resources(settings, rotation, *, m, k, alpha, terms, t, uncomputed, prepared, gate_counts, skipped, estimate):
    c = settings.clock_qubits
    n_pe = 2 if uncomputed else 1
    calls = 2**c - 1
    synth, note = _synthesis_note(settings)
    return CircuitResources(
        qubits=_qubits(m, c, k),
        rotation=rotation,
        evolution=settings.evolution,
        encoding=settings.encoding if settings.evolution == "walk" else None,
        clock_qubits=c,
        uncomputed=uncomputed,
        prepared=prepared,
        alpha=alpha,
        n_pauli_terms=terms,
        n_block_qubits=k,
        n_oracle_calls=calls * n_pe,
        n_phase_estimations=n_pe,
        oracle_call=_oracle_call(settings),
        evolution_time=t,
        total_evolution_time_per_phase_estimation=None if t is None else t * calls,
        total_evolution_time=None if t is None else t * calls * n_pe,
        trotter_steps_total=settings.trotter_steps * calls * n_pe if settings.evolution == "trotter" else None,
        optimization_level=OPTIMIZATION_LEVEL,
        gate_counts=gate_counts,
        composition=_composition_note(settings) if gate_counts is not None else None,
        synthesis_dependent=synth,
        note=note,
        gate_level_skipped=skipped,
        size_estimate=_estimate_dict(estimate),
    )


def _estimate_dict(est: SizeEstimate | None) -> dict:
    if est is None:
        return {}
    return {
        "synthesis_gates_per_basis": est.synthesis_gates,
        "expanded_gates": est.expanded_gates,
        "oracle_calls": est.oracle_calls,
        "largest_piece": est.largest_piece,
        "synthesis_limit": SYNTHESIS_LIMIT,
        "max_oracle_calls": MAX_ORACLE_CALLS,
    }



def _query_only(a: np.ndarray, settings: CircuitSettings, rotation, bounds, est: SizeEstimate, *, uncompute: bool, prepared: bool, reason: str) -> CircuitResources:
    """Resources without building the circuit: every query-level count from A and the settings."""
    _, hi = _validated(a, settings, rotation, bounds)
    m = a.shape[0].bit_length() - 1
    alpha, k, t, terms = None, 0, None, est.n_pauli_terms
    if settings.evolution == "walk":
        if settings.encoding == "lcu":
            op = pauli_decomposition(a)
            alpha, terms = float(np.sum(np.abs(op.coeffs.real))), len(op)
            k = max(1, math.ceil(math.log2(terms)))
        else:
            # The dilation's α is the row-sum (Gershgorin) bound max_i Σ_j |A_ij| ≥ ‖A‖ (qgp.circuits.encoding),
            # taken directly: its eigensolve and dense 2^(m+1) unitary are what a large A cannot afford.
            alpha, k = float(np.max(np.sum(np.abs(a), axis=1))), 1
    else:
        t = _evolution_time(settings, hi)
    return _resources(
        settings, rotation, m=m, k=k, alpha=alpha, terms=terms, t=t, uncomputed=uncompute, prepared=prepared,
        gate_counts=None, skipped=reason, estimate=est,
    )


def inversion_resources(
    A,
    settings: CircuitSettings,
    rotation: Rotation,
    bounds: tuple[float, float],
    *,
    gate_level: bool = True,
    require_gate_level: bool = False,
    prepare=None,
    uncompute: bool | None = None,
) -> CircuitResources:
    """Resources of the GATE-form inversion circuit of `qgp.circuits.inversion.build_inversion`.

    With ``gate_level`` the circuit is decomposed and counted (see the module docstring) unless
    `estimate_size` is over the limits: then the counts are None and ``gate_level_skipped`` says
    how large the circuit is, or QgpError is raised when ``require_gate_level``. Query-level
    counts are always filled.
    """
    a = check_matrix(A)
    _validated(a, settings, rotation, bounds)
    if uncompute is None:
        uncompute = rotation == "inverse"
    est = _estimate_for(a, settings, uncompute=uncompute, prepare=prepare is not None)
    reason = None
    if not gate_level:
        reason = "gate-level counting not requested"
    elif not est.within_limits:
        reason = f"too large to transpile in reasonable time: {est.describe()}"
        if require_gate_level:
            raise QgpError(
                f"cannot count gates of the {settings.evolution} inversion circuit: {reason}; use fewer clock "
                "qubits or training points, or a cheaper oracle"
            )
    if reason is not None:
        return _query_only(a, settings, rotation, bounds, est, uncompute=uncompute, prepared=prepare is not None, reason=reason)
    gi = gate_inversion(a, settings, rotation, bounds, prepare=prepare, uncompute=uncompute, _estimate=est)
    return resources_of(gi, estimate=est)


def inference_resources(result) -> dict:
    """Gate-form resources of an inference result's ``inverse`` and ``inverse_sqrt`` circuits.

    ``result`` needs ``problem`` (``A_padded``), ``circuit`` (CircuitSettings) and ``inverse``,
    ``inverse_sqrt`` (InversionCircuit; their ``bounds`` are reused). The simulation ran the
    fused simulation form, which is the same operator; the counts are of the gate form.
    """
    A = result.problem.A_padded
    out = {}
    for name in ("inverse", "inverse_sqrt"):
        inv = getattr(result, name)
        res = inversion_resources(A, result.circuit, name, inv.bounds, uncompute=bool(inv.uncomputed))
        out[name] = res.as_dict()
    out["gate_form_simulated"] = False
    out["note"] = (
        "counts are of the gate form (uniformly controlled RY, gate-level oracles), transpiled piece by piece at "
        f"optimization_level {OPTIMIZATION_LEVEL}; the simulation ran the fused simulation form (block-diagonal "
        "controlled powers, diagonal rotation), the same operator; no state preparation is counted"
    )
    return out
