"""OpenQASM 3 writer for decomposed circuits in the ['u', 'cx'] basis, and a fast reader's helper.

File format: OpenQASM 3.0, registers ``system | clock | flag | block`` declared in qubit order
(``system[0]`` least significant; amplitude j of ``system`` is training row j). Every gate is the
built-in ``U`` or ``cx`` (stdgates.inc) — the ['u', 'cx'] basis, transpiled at optimisation level 0
with no coupling map, so no swap is inserted and no qubit is permuted. Sub-circuits with more than
one gate (one controlled oracle call, the state preparation, the inverse QFT, the multiplexed RY,
…) are written once as ``gate`` definitions whose bodies are in that basis, and called; every
definition's name starts with ``qgp_``, a prefix no standard gate, simulator instruction or
synthesis plugin uses (a definition called ``unitary`` was taken by qiskit's transpiler for Aer's
matrix instruction, and Aer crashed). Global phases are kept with ``gphase``, so the file is the
in-memory operator exactly, not up to a phase. Measurement-free by default; with ``measure`` every
register is measured at the end into a classical register ``c_<name>`` of its size (OpenQASM 3
gives a classical and a quantum register one namespace, so they cannot share the name). Writing
each of the 2(2^c − 1) oracle calls out instead would make the demo's file ≈ 50 MB and take
qiskit's importer hours; as definitions it is < 1 MB. The writer is our own (qiskit.qasm3.dumps
drops global phases and took 3 min per 10^6 gates here); tests load every file back with
`qiskit.qasm3.loads` and run it through ``transpile(…, AerSimulator())``.

What is exported, and the catalogue of reference circuits: `qgp.reports.export`,
`qgp.tools.catalogue`.
"""

from __future__ import annotations

import functools
import math
import re
from collections.abc import Sequence

import numpy as np

from qgp.circuits.resources import BASES, DecomposedCircuit

__all__ = ["GATE_PREFIX", "FORMAT_NOTE", "number_text", "reserved_gate_names", "to_qasm3", "fused_circuit"]

#: Every gate a qgp file defines is called ``qgp_<piece>``.
GATE_PREFIX = "qgp_"

_U_CX = BASES["u_cx"]
FORMAT_NOTE = (
    "OpenQASM 3.0. Every gate is the built-in U or cx (stdgates.inc), transpiled at optimization_level 0 "
    "without a coupling map (no swap inserted, no qubit permuted); sub-circuits of more than one gate are "
    "defined once as `gate` blocks in that basis, named qgp_<piece> (no standard gate or simulator instruction "
    "has that prefix), and called; gphase keeps global phases. Registers in qubit order: system | clock | flag | "
    "block (| probe for a Hadamard test); system[0] is the least significant bit and amplitude j of system is "
    "training row j. Measurement-free unless exported with --measure: then every register r is measured at the "
    "end into the classical register c_r of the same size."
)

# OpenQASM 3 keywords, built-ins and stdgates.inc: names a definition must never take.
_QASM_RESERVED = frozenset(
    """U gphase CX cx cy cz ch cp crx cry crz cswap ccx cu cphase phase id h p rx ry rz s sdg sx swap t tdg
    u1 u2 u3 x y z gate qubit bit include OPENQASM def defcal let const input output reset measure barrier
    if else for while in return box ctrl negctrl inv pow pi euler tau""".split()
)


@functools.lru_cache(maxsize=1)
def reserved_gate_names() -> frozenset[str]:
    """Names no gate defined in a qgp file may take.

    Returns
    -------
    frozenset of str
        OpenQASM 3 keywords and stdgates.inc, qiskit's standard gate names, the operation names of
        qiskit's high-level-synthesis plugins (``qft``, ``mcx``, …: the transpiler synthesises a gate
        of that name with the plugin, not its definition) and qiskit-aer's instruction names.
    """
    from qiskit.circuit.library import get_standard_gate_name_mapping

    names = set(_QASM_RESERVED) | set(get_standard_gate_name_mapping())
    try:
        from qiskit.transpiler.passes.synthesis.plugin import HighLevelSynthesisPluginManager

        names |= {n.split(".", 1)[0] for n in HighLevelSynthesisPluginManager().plugins.names()}
    except Exception:  # pragma: no cover - a plugin manager that cannot load changes nothing written
        pass
    try:
        from qiskit_aer import AerSimulator

        sim = AerSimulator()
        names |= set(sim.target.operation_names) | set(sim.configuration().basis_gates)
    except ImportError:  # pragma: no cover - aer is a dependency
        pass
    return frozenset(names)



# ---------------------------------------------------------------------------------------------
# OpenQASM 3 writer for a decomposed circuit in the ['u', 'cx'] basis


def _identifier(name: str) -> str:
    """``qgp_<name>`` with every character OpenQASM does not allow replaced by ``_``."""
    ident = re.sub(r"_+", "_", re.sub(r"[^A-Za-z0-9_]", "_", name)).strip("_") or "piece"
    ident = GATE_PREFIX + ident
    while ident in reserved_gate_names():  # never with the prefix today; kept so it stays true
        ident += "_gate"
    return ident


def number_text(x) -> str:
    """The shortest text that reads back as the same double (``repr``)."""
    # repr is the shortest string that reads back as the same double.
    return repr(float(x))


def _phase(x) -> float:
    """A global phase reduced to (−π, π] (2π and 0 are the same phase)."""
    return math.remainder(float(x), 2 * math.pi)


def _statements(qc, names: Sequence[str], indent: str) -> list[str]:
    index = {q: i for i, q in enumerate(qc.qubits)}
    out = []
    for inst in qc.data:
        op = inst.operation
        args = ", ".join(names[index[q]] for q in inst.qubits)
        if op.name == "u":
            out.append(f"{indent}U({', '.join(number_text(p) for p in op.params)}) {args};")
        elif op.name == "cx":
            out.append(f"{indent}cx {args};")
        else:
            raise RuntimeError(f"gate {op.name!r} is outside the ['u', 'cx'] basis; refusing to write it")
    return out


def _display_names(dec: DecomposedCircuit) -> dict[str, str]:
    """Piece names for the file: an unnamed matrix gate that is the exact conjugate transpose of a
    named one (the uncompute's e^{-iAt·2^j}) is called ``<that name>_dg``."""
    from qiskit.circuit.library import UnitaryGate

    out = {key: piece.name for key, piece in dec.pieces.items()}
    named = [(k, p) for k, p in dec.pieces.items() if isinstance(p.operation, UnitaryGate) and p.name != "unitary"]
    for key, piece in dec.pieces.items():
        if piece.name != "unitary" or not isinstance(piece.operation, UnitaryGate):
            continue
        mat = np.asarray(piece.operation.params[0])
        for other_key, other in named:
            ref = np.asarray(other.operation.params[0])
            if ref.shape == mat.shape and np.array_equal(np.conj(ref).T, mat):
                out[key] = f"{other.name}_dg"
                break
    return out


def to_qasm3(dec: DecomposedCircuit, header: Sequence[str] = (), *, measure: bool = False) -> str:
    """OpenQASM 3 text of ``dec`` in the ['u', 'cx'] basis (see the module docstring).

    Parameters
    ----------
    dec : DecomposedCircuit
        The circuit as runs of distinct pieces (`qgp.circuits.resources.decompose_circuit`).
    header : sequence of str
        Lines written as ``//`` comments after the version line.
    measure : bool
        Measure every register ``r`` at the end into a classical register ``c_r`` of its size.

    Returns
    -------
    str
        The file's text.
    """
    lowered = dec.lowered(_U_CX)
    display = _display_names(dec)
    qubit_names = [f"{name}[{j}]" for name, size in dec.registers for j in range(size)]
    names: dict[str, str] = {}
    # A gate must not shadow a register, quantum or classical.
    taken: set[str] = {name for name, _ in dec.registers} | {f"c_{name}" for name, _ in dec.registers}
    definitions: list[str] = []
    phase = float(dec.global_phase)
    inline: set[str] = set()
    for run in dec.runs:
        key = run.key
        if key in names or key in inline:
            continue
        lp = lowered[key]
        if lp.size <= 1:
            inline.add(key)
            continue
        ident = base = _identifier(display[key])
        n = 2
        while ident in taken:
            ident, n = f"{base}_{n}", n + 1
        taken.add(ident)
        names[key] = ident
        args = [f"q{i}" for i in range(lp.circuit.num_qubits)]
        body = [f"gate {ident} {', '.join(args)} {{"]
        if _phase(lp.circuit.global_phase) != 0.0:
            body.append(f"  gphase({number_text(_phase(lp.circuit.global_phase))});")
        body += _statements(lp.circuit, args, "  ")
        body.append("}")
        definitions.append("\n".join(body))
    calls: list[str] = []
    for run in dec.runs:
        lp = lowered[run.key]
        mapped = [qubit_names[q] for q in run.qubits]
        if run.key in inline:
            phase += run.repeat * float(lp.circuit.global_phase)
            stmt = _statements(lp.circuit, mapped, "")
        else:
            stmt = [f"{names[run.key]} {', '.join(mapped)};"]
        calls.extend(stmt * run.repeat)
    lines = ["OPENQASM 3.0;", *(f"// {h}" for h in header), 'include "stdgates.inc";', *definitions]
    lines += [f"qubit[{size}] {name};" for name, size in dec.registers]
    if measure:
        lines += [f"bit[{size}] c_{name};" for name, size in dec.registers]
    phase = _phase(phase)
    if phase != 0.0:
        lines.append(f"gphase({number_text(phase)});")
    lines += calls
    if measure:
        lines += [f"c_{name} = measure {name};" for name, _ in dec.registers]
    return "\n".join(lines) + "\n"


_FUSION_MIN_QUBITS = 8


def fused_circuit(qc):
    """``qc`` (e.g. a loaded file) with every gate that has a definition replaced by its matrix.

    The matrix is the definition's own gates multiplied out (global phase included) by Aer's
    unitary simulator, once per distinct gate name, so simulating a file that calls one definition
    2(2^c − 1) times costs one dense gate per call instead of thousands of U/cx: the same
    operator, orders of magnitude faster (the demo's inversion.qasm: ~2 s instead of ~5 min).
    """
    from qiskit import QuantumCircuit
    from qiskit.circuit.library import UnitaryGate
    from qiskit_aer import AerSimulator

    # One Aer job for every distinct definition (a job costs ~0.3 s to start here).
    bodies: dict[str, QuantumCircuit] = {}
    for inst in qc.data:
        op = inst.operation
        if op.name in bodies or op.name in ("u", "U", "cx") or op.definition is None:
            continue
        body = op.definition.copy()
        body.save_unitary()
        bodies[op.name] = body
    cache: dict[str, UnitaryGate] = {}
    # Bodies are U/cx: Aer runs them as they are, without a transpile. Aer's gate fusion took 12–22 s
    # on the demo's 6-qubit walk body (2772 gates; 0.3 s without) but saves 3 s on its 9-qubit
    # multiplexed RY, so it is on only for wide bodies.
    for fusion in (False, True):
        names = [n for n, b in bodies.items() if (b.num_qubits >= _FUSION_MIN_QUBITS) == fusion]
        if not names:
            continue
        # One thread: OpenMP over these small matrices spun for 48 s (0.4 s single-threaded) when
        # the cores were shared.
        sim = AerSimulator(method="unitary", fusion_enable=fusion, max_parallel_threads=1)
        result = sim.run([bodies[n] for n in names]).result()
        for i, name in enumerate(names):
            cache[name] = UnitaryGate(np.asarray(result.get_unitary(i)), label=name, check_input=False)
    out = QuantumCircuit(*qc.qregs, global_phase=qc.global_phase, name=qc.name)
    for inst in qc.data:
        out.append(cache.get(inst.operation.name, inst.operation), inst.qubits)
    return out


