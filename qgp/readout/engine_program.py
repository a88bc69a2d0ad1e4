"""The numpy engine's compiler: a circuit → the steps `qgp.readout.engine.simulate` runs.

Instruction by instruction: consecutive multiplexers on the same targets merged (while the merged
stack stays smaller than the state), runs of one-qubit gates gathered into layers, a run of layers
and diagonals on one target conditioned on other qubits fused into one multiplexer (the
eigenvalue-conditioned rotation), and qgp's written-out inverse QFT and QFT recognised by matching
them against qiskit's synthesis. Every step is the circuit's own operator or a product of them.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from qiskit import QuantumCircuit

from qgp.errors import QgpError

__all__ = ["SUPPORTED", "Unsupported", "supports", "compiled"]


#: Instruction names the engine applies (anything else: `Unsupported`).
SUPPORTED = frozenset(
    {"h", "x", "y", "z", "s", "sdg", "t", "tdg", "p", "rz", "ry", "rx", "u", "cx", "cz", "cp", "swap",
     "multiplexer", "diagonal", "unitary", "save_statevector", "barrier"}
)
_DIAGONAL_NAMES = frozenset({"z", "s", "sdg", "t", "tdg", "p", "rz", "cz", "cp", "diagonal"})


class Unsupported(QgpError):
    """The circuit holds an instruction the engine does not apply (use Aer)."""


def supports(circuit: QuantumCircuit) -> bool:
    """Whether every instruction of ``circuit`` is one the engine applies (a circuit compiled
    already is: its check is not repeated on every run of it)."""
    hit = _PROGRAMS.get(id(circuit))
    if hit is not None and hit[0] is circuit and hit[1] == len(circuit.data):
        return True
    return all(inst.name in SUPPORTED for inst in circuit.data)


@lru_cache(maxsize=64)
def _qft_signature(c: int, inverse: bool) -> tuple:
    """(name, params, qubit offsets) of qgp's written-out (inverse) QFT on c qubits."""
    from qgp.circuits.phase_estimation import _inverse_qft, _qft

    qc = _inverse_qft(c) if inverse else _qft(c)
    return tuple(
        (i.operation.name, tuple(float(p) for p in i.operation.params), tuple(qc.find_bit(q).index for q in i.qubits))
        for i in qc.data
    )


def _matrix_of(op) -> np.ndarray:
    return np.asarray(op.to_matrix(), dtype=complex) if hasattr(op, "to_matrix") else np.asarray(op, dtype=complex)


def _matrix_of_inst(inst) -> np.ndarray:
    """The matrix of a circuit instruction (a standard gate's straight from the instruction)."""
    m = inst.matrix if inst.is_standard_gate() else None
    return np.asarray(m, dtype=complex) if m is not None else _matrix_of(inst.operation)


@dataclass(frozen=True)
class _Program:
    """A circuit as the engine's steps: ("mux", stack, targets, controls), ("layer", {qubit: 2×2}),
    ("fft", qubits, inverse?), ("diag", d, qubits), ("x", q), ("cx", c, t), ("swap", a, b),
    ("save", label, last?), ("matrix", u, qubits); ``phase`` the global phase factor."""

    steps: tuple
    phase: complex


_PROGRAMS_LOCK = threading.Lock()


#: Compiled circuits, keyed by id() with the circuit itself held (so the id is not reused) and
#: its length checked; a sweep or a benchmark that simulates one circuit again skips compiling.
#: Few are kept: each holds its circuit and stacks (~3 MiB at 17 qubits). In a loop of cold
#: 17-qubit inferences (measured): sixteen programs and sixteen merged stacks against four of each,
#: 0.4–0.5 ms slower each; programs alone at sixteen against four, the same median, the first 50
#: runs 8.7 against 7.0 ms.
_PROGRAMS: OrderedDict = OrderedDict()
_PROGRAMS_SIZE = 4


def _program(circuit: QuantumCircuit) -> _Program:
    key = id(circuit)
    with _PROGRAMS_LOCK:
        hit = _PROGRAMS.get(key)
        if hit is not None and hit[0] is circuit and hit[1] == len(circuit.data):
            _PROGRAMS.move_to_end(key)
            return hit[2]
    program = _compile(circuit)
    with _PROGRAMS_LOCK:
        _PROGRAMS[key] = (circuit, len(circuit.data), program)
        while len(_PROGRAMS) > _PROGRAMS_SIZE:
            _PROGRAMS.popitem(last=False)
    return program


def _compile(circuit: QuantumCircuit) -> _Program:
    # A list, read many times below: indexing circuit.data builds a new instruction object each time.
    data = list(circuit.data)
    bad = sorted({i.name for i in data} - SUPPORTED)
    if bad:
        raise Unsupported(f"the numpy engine does not apply {', '.join(bad)}; run it on Aer")
    index = {q: i for i, q in enumerate(circuit.qubits)}
    names = [inst.name for inst in data]
    steps: list[tuple] = []
    pos = 0
    while pos < len(data):
        inst = data[pos]
        # The instruction's name, params and matrix, not inst.operation: for a standard gate that
        # builds a Python gate object each time (~10 µs, measured), the compile's main cost.
        name = inst.name
        qs = [index[q] for q in inst.qubits]
        if name in ("h", "swap"):
            match = _match_qft(data, pos, index, names)
            if match is not None:
                length, qubits, inverse = match
                steps.append(("fft", qubits, inverse))
                pos += length
                continue
        if name == "multiplexer":
            stack, targets, controls, length = _merged_multiplexers(data, pos, index)
            steps.append(("mux", stack, targets, controls, _identity_blocks(stack)))
            pos += length
            continue
        if len(qs) == 1 and name not in _DIAGONAL_NAMES and name not in ("x", "save_statevector", "barrier"):
            length = _one_qubit_run(data, pos, index, names)
            per_qubit: dict[int, np.ndarray] = {}
            for layer_inst in data[pos : pos + length]:
                q = index[layer_inst.qubits[0]]
                u = _matrix_of_inst(layer_inst)
                per_qubit[q] = u @ per_qubit[q] if q in per_qubit else u
            steps.append(("layer", per_qubit))
            pos += length
            continue
        if name == "diagonal":
            steps.append(("diag", np.asarray(inst.params, dtype=complex), qs))
        elif name in _DIAGONAL_NAMES:
            steps.append(("diag", np.diag(_matrix_of_inst(inst)).copy(), qs))
        elif name in ("x", "cx", "swap"):
            steps.append((name, *qs))
        elif name == "save_statevector":
            steps.append(("save", inst.operation.label or "statevector", pos == len(data) - 1))
        elif name != "barrier":
            steps.append(("matrix", _matrix_of_inst(inst), qs))
        pos += 1
    return _Program(tuple(_fuse_conditioned(steps)), complex(np.exp(1j * float(circuit.global_phase))))


def _fuse_conditioned(steps: list[tuple]) -> list[tuple]:
    """Runs of one-qubit layers on one qubit t and diagonals (on t and other qubits C) become one
    multiplexer on t controlled by C: every step of the run is block-diagonal in C, so the run is
    Σ_k |k⟩⟨k|_C ⊗ U_k with U_k the product of its 2 × 2 blocks (the eigenvalue-conditioned
    rotation written as S†·H·diag·H·S is such a run: one pass instead of five)."""
    out: list[tuple] = []
    i = 0
    while i < len(steps):
        j, target = i, None
        while j < len(steps):
            kind = steps[j][0]
            if kind == "layer" and len(steps[j][1]) == 1:
                (q,) = steps[j][1]
                if target not in (None, q):
                    break
                target = q
            elif kind != "diag":
                break
            j += 1
        run = steps[i:j]
        controls = sorted({q for st in run if st[0] == "diag" for q in st[2]} - {target})
        if target is None or len(run) < 2 or not controls or not any(st[0] == "diag" and target in st[2] for st in run):
            out.append(steps[i])
            i += 1
            continue
        if any(st[0] == "diag" and any(q not in controls and q != target for q in st[2]) for st in run):
            out.append(steps[i])
            i += 1
            continue
        K = 2 ** len(controls)
        k = np.arange(K)
        U = np.broadcast_to(np.eye(2, dtype=complex), (K, 2, 2)).copy()
        for st in run:
            if st[0] == "layer":
                U = st[1][target] @ U
                continue
            d, qs = st[1], st[2]
            # d's index: Σ_i bit_i·2^i over qs; read it for every control value k and t = 0, 1.
            base = np.zeros(K, dtype=np.int64)
            tbit = 0
            for pos_, q in enumerate(qs):
                if q == target:
                    tbit = 1 << pos_
                else:
                    base |= ((k >> controls.index(q)) & 1) << pos_
            U = np.stack([d[base], d[base | tbit]], axis=1)[:, :, None] * U
        out.append(("mux", U, [target], controls, None))
        i = j
    return out


def _match_qft(data, pos: int, index: dict, names: list[str] | None = None) -> tuple[int, list[int], bool] | None:
    """(length, qubits, inverse?) when the instructions from ``pos`` are qgp's written-out inverse
    QFT or QFT on some qubits (one H on each, with the controlled phases and swaps between).
    ``names``: the instructions' names, when the caller has them listed."""
    # The inverse QFT starts with the swaps (qiskit's synthesis) or an H; find the register from
    # the run of h/cp/swap instructions and try each width it could have.
    if names is None:
        names = [inst.name for inst in data[pos:]]
        offset = pos
    else:
        offset = 0
    run_end = pos
    has_cp = False
    while run_end - offset < len(names) and names[run_end - offset] in ("h", "cp", "swap"):
        has_cp = has_cp or names[run_end - offset] == "cp"
        run_end += 1
    if run_end - pos < 3 or not has_cp:
        return None  # every QFT on two or more qubits has controlled phases
    qubits: list[int] = []
    for i in range(pos, run_end):
        for q in data[i].qubits:
            if index[q] not in qubits:
                qubits.append(index[q])
    lo = min(qubits)
    for c in range(len(qubits), 1, -1):
        reg = list(range(lo, lo + c))
        for inverse in (True, False):
            sig = _qft_signature(c, inverse)
            if pos + len(sig) > run_end:
                continue
            if all(
                data[pos + i].name == s[0]
                and tuple(float(p) for p in data[pos + i].params) == s[1]
                and tuple(index[q] - lo for q in data[pos + i].qubits) == s[2]
                for i, s in enumerate(sig)
            ):
                return len(sig), reg, inverse
    return None


#: Largest stack of matrices a merge of consecutive multiplexers may build.
_MAX_MERGED_BYTES = 1 << 26


def _stack_of(op) -> np.ndarray:
    stack = getattr(op, "stack", None)  # qgp's MultiplexerGate keeps its blocks as one array
    return stack if stack is not None else np.asarray(op.params, dtype=complex)


def _merged_multiplexers(data, pos: int, index: dict) -> tuple[np.ndarray, list[int], list[int], int]:
    """The multiplexer at ``pos`` merged with the ones right after it that act on the same targets
    with other controls: Σ_k |k⟩⟨k| ⊗ U_k then Σ_l |l⟩⟨l| ⊗ V_l is Σ_(k,l) |k,l⟩⟨k,l| ⊗ V_l·U_k, one
    pass instead of two (products of the circuit's own blocks, up to `_MAX_MERGED_BYTES`)."""
    first = data[pos]
    # The stacks' shapes, not op.params: qiskit's params getter costs ~4 µs a call.
    first_stack = _stack_of(first.operation)
    n_t = first_stack.shape[1].bit_length() - 1
    qs = [index[q] for q in first.qubits]
    targets, controls = qs[:n_t], qs[n_t:]
    blocks = first_stack.shape[0]
    block_bytes = first_stack[0].nbytes
    # Merging saves a pass over the state but reads a larger stack: merge while the stack stays
    # no larger than the state (and `_MAX_MERGED_BYTES`).
    limit = min(_MAX_MERGED_BYTES, 16 * 2 ** len(index))
    ops = [first.operation]
    length = 1
    while pos + length < len(data):
        nxt = data[pos + length]
        if nxt.name != "multiplexer":
            break
        oq = [index[q] for q in nxt.qubits]
        nxt_stack = _stack_of(nxt.operation)
        if nxt_stack.shape[1:] != first_stack.shape[1:] or oq[:n_t] != targets:
            break
        if set(oq[n_t:]) & set(controls) or blocks * nxt_stack.shape[0] * block_bytes > limit:
            break
        blocks *= nxt_stack.shape[0]
        controls = controls + oq[n_t:]
        ops.append(nxt.operation)
        length += 1
    if len(ops) == 1 and controls == sorted(controls):
        return _stack_of(ops[0]), targets, controls, 1
    key = (tuple(id(op) for op in ops), tuple(sorted(range(len(controls)), key=controls.__getitem__)))
    with _PROGRAMS_LOCK:
        hit = _STACKS.get(key)
        if hit is not None:
            _STACKS.move_to_end(key)
            return hit[1], targets, sorted(controls), length
    stack = _adjoint_of_merged(ops, targets, controls)
    if stack is None:
        stack = _stack_of(ops[0])
        n_first = len(qs) - n_t
        order = controls[:n_first]  # the merged stack's controls, least significant first
        for op, oc in zip(ops[1:], _control_groups(controls[n_first:], ops[1:], n_t)):
            nxt = _stack_of(op)
            if max(oc) < min(order):
                # The new controls lie below: index l + L·k (k the merged one), already ascending.
                stack = np.matmul(nxt[None], stack[:, None]).reshape(-1, *stack.shape[1:])
                order = oc + order
            else:
                # Index k + K·l (the new controls more significant).
                stack = np.matmul(nxt[:, None], stack[None]).reshape(-1, *stack.shape[1:])
                order = order + oc
        stack = _sorted_controls(stack, order)
    with _PROGRAMS_LOCK:
        # The ops are held so their ids are not reused; targets and controls for `_adjoint_of_merged`.
        _STACKS[key] = (ops, stack, targets, controls)
        while len(_STACKS) > _STACKS_SIZE:
            _STACKS.popitem(last=False)
    return stack, targets, sorted(controls), length


def _adjoint_of_merged(ops, targets: list[int], controls: list[int]) -> np.ndarray | None:
    """The merged stack of ``ops`` as the adjoint of one merged before, when each op is the adjoint
    of one of those (``adjoint_of``, set by `MultiplexerGate.inverse`) on the same qubits, in reverse
    order — an inverse phase estimation's powers after the forward ones: (V_l·U_k)† = U_k†·V_l†,
    a conjugate transpose instead of 2^c block products. None when there is no such merge."""
    forward = [getattr(op, "adjoint_of", None) for op in reversed(ops)]
    if any(f is None for f in forward):
        return None
    n_t = len(targets)
    groups = _control_groups(controls, ops, n_t)
    fwd_controls = [q for g in reversed(groups) for q in g]
    key = (tuple(id(f) for f in forward), tuple(sorted(range(len(fwd_controls)), key=fwd_controls.__getitem__)))
    with _PROGRAMS_LOCK:
        hit = _STACKS.get(key)
    if hit is None or hit[2] != targets or hit[3] != fwd_controls or any(a is not b for a, b in zip(hit[0], forward)):
        return None
    return np.conjugate(hit[1].transpose(0, 2, 1), out=np.empty_like(hit[1]))  # one new array, no temporary


def _control_groups(controls: list[int], ops, n_t: int) -> list[list[int]]:
    """``controls`` split into each operation's own controls, in order."""
    out, i = [], 0
    for op in ops:
        k = op.num_qubits - n_t
        out.append(controls[i : i + k])
        i += k
    return out


def _identity_blocks(stack: np.ndarray) -> np.ndarray | None:
    """Which blocks are exactly the identity (None when none is, or when there are too many to loop)."""
    if stack.shape[0] > 64:
        return None
    eye = np.eye(stack.shape[1], dtype=stack.dtype)
    mask = np.array([np.array_equal(b, eye) for b in stack])
    return mask if mask.any() else None


#: Merged (and control-sorted) multiplexer stacks, keyed by the ids of the merged operations:
#: the per-point circuits of one inference share their phase-estimation body's operations (a
#: forward and an inverse merge each for the mean's and the variance's circuits): with four kept,
#: the hybrid strategy at n = 128 merged again and again (0.57–0.59 s against 0.33–0.39 s with
#: eight or sixteen, measured), and sixteen cost cold inferences nothing measurable.
_STACKS: OrderedDict = OrderedDict()
_STACKS_SIZE = 16


def _sorted_controls(stack: np.ndarray, controls: list[int]) -> np.ndarray:
    """``stack`` re-indexed so that its controls run in ascending qubit order."""
    if controls != sorted(controls):
        # Relabel k so that the controls run in ascending qubit order (as they lie in the state).
        nc, T = len(controls), stack.shape[1]
        axes_now = list(reversed(controls))  # axis j of the reshaped index ↔ this qubit
        want = sorted(controls, reverse=True)
        stack = np.ascontiguousarray(
            stack.reshape((2,) * nc + (T, T)).transpose([axes_now.index(q) for q in want] + [nc, nc + 1])
        ).reshape(-1, T, T)
    return stack


def _one_qubit_run(data, pos: int, index: dict, names: list[str]) -> int:
    """How many instructions from ``pos`` are one-qubit gates to fuse (stopping at a QFT)."""
    end = pos
    while end < len(data):
        inst = data[end]
        name = names[end]
        if len(inst.qubits) != 1 or name in _DIAGONAL_NAMES or name in ("x", "save_statevector", "barrier"):
            break
        if end > pos and name == "h" and _match_qft(data, end, index, names) is not None:
            break
        end += 1
    return end - pos


def compiled(circuit: QuantumCircuit) -> "_Program":
    """The engine's steps for ``circuit`` (compiled once per circuit object; see the module docstring)."""
    return _program(circuit)
