"""OpenQASM 3 export of the inversion circuits, and the catalogue of reference circuits.

`export_config` writes, for a config's problem,

* ``inversion.qasm``: amplitude encoding of ŷ = y/‖y‖ (y the padded, centred training targets),
  then the ``inverse`` inversion with its uncompute; read with flag = 1, clock = 0, block = 0;
* ``inversion_sqrt.qasm``: the same with the ``inverse_sqrt`` rotation and no uncompute; read
  with flag = 1 alone;
* with a test point J, ``hadamard_test_J.qasm``: the Hadamard test of `qgp.readout.estimators` for that
  point (registers ``system | clock | flag | block | probe``), read as P₀, P₁ = probability of
  probe = 0, 1 with flag = 1, clock = 0, block = 0; mean = prior mean + ‖y‖‖k*‖(P₀ − P₁)/C;
* ``resources.json``: qubits per register, gate counts and depth per basis, the constants C and
  C′ (and for a test point ‖y‖, ‖k*‖, the prior mean) and how to turn each file's probabilities
  into numbers, with the package versions and the platform that synthesised the gates.

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

Files are written atomically, and an export never replaces files of an earlier one unless forced
(`qgp.files`). The catalogue (``python -m qgp.export --catalogue [DIR]``, default ``circuits/``)
holds the published worked examples and the bundled demo as ``<name>.qasm`` plus ``<name>.json``;
that command regenerates it in place.
"""

from __future__ import annotations

import argparse
import functools
import json
import math
import os
import platform
import re
import sys
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from qgp.circuits.encoding import BLOCK, MultiplexerGate, normalised_amplitudes
from qgp.errors import QgpError
from qgp.files import atomic_write_text, check_outputs
from qgp.circuits.inversion import FLAG
from qgp.circuits.phase_estimation import CLOCK
from qgp.circuits.resources import (
    BASES,
    DecomposedCircuit,
    GateInversion,
    decompose_circuit,
    gate_counts_by_basis,
    gate_inversion,
    resources_of,
    size_estimate,
)
from qgp.settings import CircuitSettings, Config

__all__ = [
    "INVERSION_FILE",
    "INVERSION_SQRT_FILE",
    "RESOURCES_FILE",
    "PROJECTORS",
    "HADAMARD_PROJECTOR",
    "GATE_PREFIX",
    "CATALOGUE",
    "REGENERATE_COMMAND",
    "CatalogueEntry",
    "HadamardPoint",
    "hadamard_file",
    "reserved_gate_names",
    "platform_info",
    "gate_counts_by_origin",
    "to_qasm3",
    "fused_circuit",
    "export_config",
    "export_inversions",
    "catalogue_entry",
    "catalogue_document",
    "build_catalogue",
    "main",
]

INVERSION_FILE = "inversion.qasm"
INVERSION_SQRT_FILE = "inversion_sqrt.qasm"
RESOURCES_FILE = "resources.json"
PROBE = "probe"

#: The register values each file is read with (registers not named are summed over).
PROJECTORS = {
    INVERSION_FILE: {FLAG: 1, CLOCK: 0, BLOCK: 0},
    INVERSION_SQRT_FILE: {FLAG: 1},
}
#: The Hadamard-test file is read with these values, separately for probe = 0 and probe = 1.
HADAMARD_PROJECTOR = {FLAG: 1, CLOCK: 0, BLOCK: 0}

#: Every gate a qgp file defines is called ``qgp_<piece>``.
GATE_PREFIX = "qgp_"

CATALOGUE = ("cao2012_exact", "hhl_2x2_exact", "demo_walk_dilation")
REGENERATE_COMMAND = "python -m qgp.export --catalogue circuits"


def hadamard_file(j: int) -> str:
    """The file name of a test point's Hadamard test.

    Parameters
    ----------
    j : int
        The test point (0-based).

    Returns
    -------
    str
        ``hadamard_test_<j>.qasm``.
    """
    return f"hadamard_test_{int(j)}.qasm"


_U_CX = BASES["u_cx"]
_FORMAT_NOTE = (
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


def _num(x) -> str:
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
            out.append(f"{indent}U({', '.join(_num(p) for p in op.params)}) {args};")
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
            body.append(f"  gphase({_num(_phase(lp.circuit.global_phase))});")
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
        lines.append(f"gphase({_num(phase)});")
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


# ---------------------------------------------------------------------------------------------
# Export of a config's inversion circuits


def _reading(file: str, vector: str = "yhat = y/|y|, y the padded, centred training targets") -> str:
    """How to turn the file's post-selection probability into numbers (plain ASCII for any reader)."""
    if file == INVERSION_SQRT_FILE:
        return (
            f"Run {file} from |0...0> and let P be the probability of flag=1 (all other registers summed). "
            f"P ~ C'*yhat^T A^-1 yhat ({vector}; C' = scale_inverse_sqrt), so yhat^T A^-1 yhat ~ P/C' and "
            "y^T A^-1 y = y_norm^2*P/C'."
        )
    tail = "" if file != INVERSION_FILE else " and |A^-1 y| = y_norm*sqrt(P)/C"
    return (
        f"Run {file} from |0...0> and let P be the probability of flag=1, clock=0, block=0. The system "
        f"amplitudes there are ~ C*A^-1*yhat ({vector}; C = scale_inverse), so the normalised system state is "
        f"~ A^-1 yhat/|A^-1 yhat|, |A^-1 yhat| ~ sqrt(P)/C{tail}."
    )


def _constants(gi: GateInversion) -> dict:
    inv = gi.inversion
    return {
        "scale": inv.scale,
        "alpha": inv.alpha,
        "evolution_time": inv.evolution_time,
        "bounds": list(inv.bounds),
        "filter_floor": inv.floor,
        "n_filtered": inv.n_filtered,
        "clock_eigenvalues": [float(x) for x in inv.clock_eigenvalues],
        "flag_amplitudes": [float(x) for x in inv.flag_amplitudes],
    }


def _header(title: str, gi: GateInversion, file: str, *, measure: bool = False) -> list[str]:
    inv = gi.inversion
    s = inv.settings
    proj = ", ".join(f"{k}={v}" for k, v in PROJECTORS.get(file, PROJECTORS[INVERSION_FILE]).items())
    return [
        title,
        f"rotation {inv.rotation}, {s.evolution} oracle"
        + (f" ({s.encoding} encoding)" if s.evolution == "walk" else "")
        + f", {s.clock_qubits} clock qubits; C = {_num(inv.scale)}",
        f"read with {proj}" + ("; every register r measured into c_r" if measure else "") + "; written by qgp.circuits.qasm",
    ]


def _refuse_if_too_large(A, settings: CircuitSettings, what: str) -> None:
    # The inverse file (with its uncompute) is the larger of the two; the Hadamard test has the
    # same two phase estimations.
    est = size_estimate(A, settings, uncompute=True, prepare=True)
    if not est.within_limits:
        raise QgpError(
            f"{what} is too large to decompose and export in reasonable time: {est.describe()}; "
            "lower [circuit] clock_qubits, use fewer training points or another [circuit] evolution"
        )


@dataclass(frozen=True)
class HadamardPoint:
    """A test point's Hadamard test: what it prepares and the constants that turn P₀ − P₁ into a mean.

    ``khat`` is the padded k*/‖k*‖ (e₀ when k* = 0), ``expected`` optional reference numbers
    written beside the constants (probabilities and means computed by qgp).
    """

    index: int
    x: tuple[float, ...]
    khat: np.ndarray
    k_star_norm: float
    y_norm: float
    prior_mean: float
    expected: dict | None = None


def _hadamard_reading(file: str) -> str:
    return (
        f"Run {file} from |0...0> and let P0 (P1) be the probability of probe=0 (probe=1) together with "
        "flag=1, clock=0, block=0. Then P0 - P1 = Re<khat|C*A^-1|yhat> and the predictive mean at the test point "
        "is prior_mean + y_norm*k_star_norm*(P0 - P1)/scale_inverse. From N shots with counts n0, n1: "
        "P0 ~ n0/N, P1 ~ n1/N, standard error of the mean y_norm*k_star_norm/scale_inverse*"
        "sqrt((P0 + P1 - (P0 - P1)^2)/N) (one multinomial draw over probe=0, probe=1 and not selected)."
    )


def _flag_rotation_named(dec: DecomposedCircuit) -> DecomposedCircuit:
    """The multi-gate piece acting on ``flag`` named ``flag_rotation``, as in the inversion files."""
    from dataclasses import replace

    offset = 0
    for name, size in dec.registers:
        if name == FLAG:
            break
        offset += size
    keys = {run.key for run in dec.runs if offset in run.qubits and dec.pieces[run.key].n_qubits > 2}
    return replace(dec, pieces={k: replace(p, name="flag_rotation") if k in keys else p for k, p in dec.pieces.items()})


def _hadamard_text(gi: GateInversion, b: np.ndarray, point: HadamardPoint, title: str, *, measure: bool):
    """(decomposed Hadamard-test circuit, file text) of ``point`` in the gate form of ``gi``."""
    from qgp.readout.estimators import hadamard_test_circuit
    from qgp.circuits.phase_estimation import phase_estimation_circuit

    inv = gi.inversion
    qpe = phase_estimation_circuit(inv.oracle)
    dec = _flag_rotation_named(decompose_circuit(hadamard_test_circuit(qpe, inv, point.khat, b)))
    file = hadamard_file(point.index)
    s = inv.settings
    header = [
        title,
        f"Hadamard test of test point {point.index}: probe=0 prepares yhat and applies C*A^-1, probe=1 prepares "
        f"khat; {s.evolution} oracle" + (f" ({s.encoding} encoding)" if s.evolution == "walk" else "")
        + f", {s.clock_qubits} clock qubits; C = {_num(inv.scale)}",
        "read P0, P1 = P(probe=0, 1 and flag=1, clock=0, block=0); mean = prior_mean + y_norm*k_star_norm*(P0 - P1)/C "
        f"(numbers in {RESOURCES_FILE})" + ("; every register r measured into c_r" if measure else ""),
    ]
    return file, dec, to_qasm3(dec, header, measure=measure)


def export_inversions(
    A,
    settings: CircuitSettings,
    bounds,
    yhat,
    out_dir,
    *,
    title: str = "qgp inversion circuits",
    extra: dict | None = None,
    measure: bool = False,
    point: HadamardPoint | None = None,
    force: bool = False,
    inputs: Sequence[Path] = (),
) -> list[Path]:
    """Write inversion.qasm, inversion_sqrt.qasm (and a Hadamard test) and resources.json.

    Parameters
    ----------
    A : array
        The padded, symmetric positive-definite matrix.
    settings : CircuitSettings
        Oracle, encoding and clock size.
    bounds : (float, float)
        A-priori eigenvalue bounds (λ_lo, λ_hi).
    yhat : array
        The vector to prepare (normalised on the way in).
    out_dir : path
        Output folder, created if missing.
    title, extra : str, dict
        First header line of every file; extra keys for resources.json.
    measure : bool
        Measure every register at the end into ``c_<name>`` (see `to_qasm3`).
    point : HadamardPoint, optional
        Also write ``hadamard_test_<index>.qasm`` and its constants under ``test_point``.
    force : bool
        Replace files of an earlier export; without it existing files are refused (QgpError)
        before anything is built.
    inputs : sequence of paths
        The command's input files, which are never overwritten.

    Returns
    -------
    list of Path
        The files written, resources.json last. Each is written atomically.
    """
    names = [INVERSION_FILE, INVERSION_SQRT_FILE] + ([hadamard_file(point.index)] if point else []) + [RESOURCES_FILE]
    out = check_outputs(out_dir, names, force=force, option="--out", inputs=inputs)
    _refuse_if_too_large(A, settings, f"the {settings.evolution} inversion circuit")
    b = normalised_amplitudes(yhat)
    inv = gate_inversion(A, settings, "inverse", bounds, prepare=b)
    inv_sqrt = gate_inversion(A, settings, "inverse_sqrt", bounds, prepare=b)
    doc = {
        "format": _FORMAT_NOTE,
        **(extra or {}),
        "qubits": resources_of(inv).as_dict()["qubits"],
        "scale_inverse": inv.inversion.scale,
        "scale_inverse_sqrt": inv_sqrt.inversion.scale,
        "projectors": PROJECTORS,
        "measured": bool(measure),
        "reading": {INVERSION_FILE: _reading(INVERSION_FILE), INVERSION_SQRT_FILE: _reading(INVERSION_SQRT_FILE)},
        "gate_counts": {},
        "resources": {},
        "constants": {},
    }
    texts: dict[str, str] = {}
    for file, gi in ((INVERSION_FILE, inv), (INVERSION_SQRT_FILE, inv_sqrt)):
        res = resources_of(gi).as_dict()
        doc["gate_counts"][file] = res["gate_counts"]
        doc["resources"][file] = res
        doc["constants"][file] = _constants(gi)
        texts[file] = to_qasm3(gi.decomposed, _header(title, gi, file, measure=measure), measure=measure)
    if point is not None:
        file, dec, texts[file] = _hadamard_text(inv, b, point, title, measure=measure)
        qubits = dict(dec.registers)
        qubits["total"] = dec.num_qubits
        doc["gate_counts"][file] = gate_counts_by_basis(dec)
        doc["resources"][file] = {"qubits": qubits, "gate_counts": doc["gate_counts"][file]}
        doc["test_point"] = {
            "index": point.index,
            "x": list(point.x),
            "file": file,
            "probe": PROBE,
            "projector": HADAMARD_PROJECTOR,
            "prior_mean": point.prior_mean,
            "y_norm": point.y_norm,
            "k_star_norm": point.k_star_norm,
            "scale_inverse": inv.inversion.scale,
            "reading": _hadamard_reading(file),
            "expected": point.expected,
        }
    doc["versions"] = _versions()
    doc["platform"] = platform_info()
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for file, text in texts.items():
        atomic_write_text(out / file, text)
        paths.append(out / file)
    atomic_write_text(out / RESOURCES_FILE, json.dumps(doc, indent=2) + "\n")
    paths.append(out / RESOURCES_FILE)
    return paths


def export_config(cfg: Config, out_dir, *, measure: bool = False, test_point: int | None = None, force: bool = False) -> list[Path]:
    """`qgp export CONFIG --out DIR`: the config's inversion circuits and resources.json.

    ŷ is the padded, centred training target vector, normalised; A the padded A = K + σ²I with
    its a-priori eigenvalue bounds (as `qgp run` builds them). Refuses (QgpError), before any
    circuit is built, files of an earlier export in ``out_dir`` (unless ``force``) and a
    configuration whose circuit is too large to decompose in reasonable time.

    Parameters
    ----------
    cfg : Config
        A loaded config.
    out_dir : path
        Output folder (created if missing; must not be a file).
    measure : bool
        Measure every register at the end (``qgp export --measure``).
    test_point : int, optional
        Also write the Hadamard test of this test point (0-based row of the test inputs, or of the
        training inputs when the config has no test file) and the constants of its mean.
    force : bool
        Overwrite files of an earlier export.

    Returns
    -------
    list of Path
        The files written, resources.json last.
    """
    from qgp.classical.problem import problem_from_config
    from qgp.classical.system import eigenvalue_bounds

    names = [INVERSION_FILE, INVERSION_SQRT_FILE] + ([hadamard_file(test_point)] if test_point is not None else [])
    inputs = [cfg.source] if cfg.source else []
    check_outputs(out_dir, names + [RESOURCES_FILE], force=force, option="--out", inputs=inputs)
    _refuse_size_from_config(cfg)
    problem = problem_from_config(cfg)
    if test_point is not None and not 0 <= test_point < problem.n_test:
        raise QgpError(
            f"--test-point {test_point} is out of range: the config has {problem.n_test} test point(s), "
            f"numbered 0 to {problem.n_test - 1}"
        )
    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    y = problem.padded(problem.y_centered)
    y_norm = float(np.linalg.norm(y))
    if y_norm == 0.0:
        raise QgpError(
            "the centred training targets are all zero, so there is no state ŷ = y/‖y‖ to prepare; "
            "check [data] target, or set [data] center = false"
        )
    extra = {
        "config": str(cfg.source) if cfg.source else None,
        "problem": {
            "n_train": problem.n_train,
            "n_test": problem.n_test,
            "padded_size": problem.padded_size,
            "noise_variance": problem.noise_variance,
            "y_offset": problem.y_offset,
            "y_norm": y_norm,
        },
    }
    point = _hadamard_point(problem, cfg.circuit, bounds, test_point) if test_point is not None else None
    title = f"qgp export of {cfg.source.name if cfg.source else 'a config'}"
    return export_inversions(
        A, cfg.circuit, bounds, y, out_dir, title=title, extra=extra, measure=measure, point=point, force=force,
        inputs=inputs,
    )


def _hadamard_point(problem, settings: CircuitSettings, bounds, j: int) -> HadamardPoint:
    """Test point j's k̂ and constants, as `qgp.readout.inference.infer` forms them, with qgp's own P₀, P₁.

    The expected probabilities come from the simulation form of the same circuit (the operator
    `qgp run --strategy per_point` simulates), by statevector.
    """
    from qgp.readout.estimators import per_point_hadamard
    from qgp.circuits.inversion import build_inversion
    from qgp.circuits.phase_estimation import phase_estimation_circuit

    y = problem.padded(problem.y_centered)
    y_norm = float(np.linalg.norm(y))
    k = problem.padded(problem.k_star[:, j : j + 1])[:, 0]
    k_norm = float(np.linalg.norm(k))
    khat = k / k_norm if k_norm > 0 else np.eye(k.size)[0]  # a zero k* has mean = prior mean
    inv = build_inversion(problem.A_padded, settings, "inverse", bounds, form="simulation")
    qpe = phase_estimation_circuit(inv.oracle)
    p0, p1 = per_point_hadamard(qpe, inv, khat[:, None], (y / y_norm)[:, None])
    mean = problem.y_offset + y_norm * k_norm * float(p0[0] - p1[0]) / inv.scale
    exact = problem.exact.predict(problem.X_test[j : j + 1])
    return HadamardPoint(
        index=int(j),
        x=tuple(float(v) for v in np.atleast_1d(problem.X_test[j])),
        khat=khat,
        k_star_norm=k_norm,
        y_norm=y_norm,
        prior_mean=float(problem.y_offset),
        expected={
            "P0": float(p0[0]),
            "P1": float(p1[0]),
            "mean_from_exact_probabilities": float(mean),
            "mean_exact_gp": float(exact.mean[0]),
            "how": "P0, P1 by statevector simulation (qiskit-aer) of the simulation form of this circuit (same "
            "operator); mean_exact_gp is the classical GP's mean at the same point",
        },
    )


def _refuse_size_from_config(cfg: Config) -> None:
    """The size check from the row count alone, before the kernel matrix is built.

    Uses one Pauli term for ``lcu``/``trotter`` (a lower bound), so it refuses only circuits that
    are too large whatever A is; `export_inversions` checks again with A's own term count.
    """
    from qgp.config import load_dataset
    from qgp.circuits.resources import estimate_size
    from qgp.classical.system import padded_size

    try:
        n = len(load_dataset(cfg.data).y_train)
    except QgpError:
        return  # the problem builder reports data errors with their own message
    m = padded_size(n).bit_length() - 1
    est = estimate_size(m, cfg.circuit, uncompute=True, prepare=True, n_pauli_terms=1)
    if not est.within_limits:
        raise QgpError(
            f"the {cfg.circuit.evolution} inversion circuit for {n} training points ({m} system qubits) is too "
            f"large to decompose and export in reasonable time: {est.describe()}; lower [circuit] clock_qubits, "
            "use fewer training points or another [circuit] evolution"
        )


# ---------------------------------------------------------------------------------------------
# The catalogue of reference circuits


@dataclass(frozen=True)
class CatalogueEntry:
    """One reference circuit: A, b, settings, the a-priori bounds and where they come from."""

    name: str
    title: str
    source: str
    A: np.ndarray
    b: np.ndarray
    b_note: str
    settings: CircuitSettings
    bounds: tuple[float, float]
    bounds_note: str
    note: str = ""


def _cao_matrix() -> np.ndarray:
    from qiskit.quantum_info import SparsePauliOp

    op = SparsePauliOp.from_list([("II", 3.75), ("XZ", 1.25), ("YY", 0.75), ("ZX", 2.25)])
    return np.real(op.to_matrix())


def catalogue_entry(name: str) -> CatalogueEntry:
    """The catalogue entry ``name`` (one of `CATALOGUE`)."""
    if name == "cao2012_exact":
        return CatalogueEntry(
            name=name,
            title="Cao, Daskin, Frankel & Kais (Mol. Phys. 110, 1675 (2012)) 4x4 worked example, exact oracle",
            source="A from its Pauli form 3.75*II + 1.25*XZ + 0.75*YY + 2.25*ZX (qiskit label order); eigenvalues 1, 2, 4, 8",
            A=_cao_matrix(),
            b=np.full(4, 0.5),
            b_note="b = (1, 1, 1, 1)/2, uniform (our choice)",
            settings=CircuitSettings(clock_qubits=4, evolution="exact", evolution_time=2 * np.pi / 16),
            bounds=(1.0, 8.0),
            bounds_note="the exact extreme eigenvalues 1 and 8: with t = 2*pi/16 every eigenvalue k sits on clock value k",
        )
    if name == "hhl_2x2_exact":
        return CatalogueEntry(
            name=name,
            title="2x2 HHL example [[1.5, 0.5], [0.5, 1.5]] (eigenvalues 1 and 2), exact oracle",
            source="the matrix of early photonic and NMR HHL experiments (from memory); A^-1 b = (3, -1)/4 for b = (1, 0)",
            A=np.array([[1.5, 0.5], [0.5, 1.5]]),
            b=np.array([1.0, 0.0]),
            b_note="b = (1, 0)",
            settings=CircuitSettings(clock_qubits=2, evolution="exact", evolution_time=2 * np.pi / 4),
            bounds=(1.0, 2.0),
            bounds_note="the exact eigenvalues 1 and 2: with t = 2*pi/4 they sit on clock values 1 and 2",
        )
    if name == "demo_walk_dilation":
        from qgp.config import load_config
        from qgp.demo import demo_config_path
        from qgp.classical.problem import problem_from_config
        from qgp.classical.system import eigenvalue_bounds

        cfg = load_config(demo_config_path())
        problem = problem_from_config(cfg)
        A = problem.A_padded
        return CatalogueEntry(
            name=name,
            title="bundled demo (qgp/demo/ice_transect.toml): walk oracle, dilation encoding",
            source="the demo config's padded A = K + sigma^2 I (n = 16, kappa = 20) and its circuit settings",
            A=A,
            b=problem.padded(problem.y_centered),
            b_note="b = the padded, centred training targets (ice_cm), normalised on loading",
            settings=cfg.circuit,
            bounds=eigenvalue_bounds(A, problem.noise_variance),
            bounds_note="the a-priori bounds of qgp.classical.system.eigenvalue_bounds (Gershgorin above, max(Gershgorin, sigma^2) below)",
            note="c from the config (8): the file stays < 1 MB because the controlled walk is defined once and called 510 times",
        )
    raise QgpError(f"unknown catalogue entry {name!r}; choose one of {CATALOGUE}")


def _simulated_postselection(entry: CatalogueEntry, b: np.ndarray) -> tuple[np.ndarray, float]:
    """Post-selected system amplitudes of the in-memory circuit (simulation form, same operator)."""
    from qgp.circuits.inversion import build_inversion, postselected_system_amplitudes
    from qgp.readout.simulate import run_statevector

    inv = build_inversion(entry.A, entry.settings, "inverse", entry.bounds, prepare=b, form="simulation")
    amps = postselected_system_amplitudes(run_statevector(inv.circuit), inv)
    return np.real_if_close(amps, tol=1e6), float(np.sum(np.abs(amps) ** 2))


def catalogue_document(entry: CatalogueEntry, gi: GateInversion, *, simulate: bool = True) -> dict:
    """The JSON document of a catalogue entry: inputs, constants, resources, expected results."""
    b = normalised_amplitudes(entry.b)
    ideal = gi.inversion.scale * np.linalg.solve(entry.A, b)
    doc = {
        "name": entry.name,
        "title": entry.title,
        "source": entry.source,
        "note": entry.note,
        "regenerate": REGENERATE_COMMAND,
        "format": _FORMAT_NOTE,
        "matrix": entry.A.tolist(),
        "b": b.tolist(),
        "b_note": entry.b_note,
        "settings": _settings_document(entry.settings),
        "rotation": "inverse",
        "bounds_note": entry.bounds_note,
        "constants": _constants(gi),
        "scale_inverse": gi.inversion.scale,
        "projector": PROJECTORS[INVERSION_FILE],
        "reading": _reading(f"{entry.name}.qasm", "yhat = b/|b|, b above"),
        "resources": resources_of(gi).as_dict(),
        "gate_counts_by_origin": gate_counts_by_origin(gi.decomposed),
        "expected": {
            "ideal_postselected_amplitudes": ideal.tolist(),
            "ideal_success_probability": float(ideal @ ideal),
        },
        "versions": _versions(),
        "platform": platform_info(),
    }
    if simulate:
        amps, p = _simulated_postselection(entry, b)
        fid = abs(np.vdot(amps, ideal)) ** 2 / (np.vdot(amps, amps).real * (ideal @ ideal))
        doc["expected"].update(
            {
                "postselected_amplitudes": [complex(x).real if abs(complex(x).imag) == 0 else [complex(x).real, complex(x).imag] for x in amps],
                "success_probability": p,
                "fidelity_with_ideal": float(fid),
                "how": "statevector simulation (qiskit-aer) of the in-memory circuit, simulation form (same operator as the file)",
            }
        )
    return doc


def _settings_document(settings: CircuitSettings) -> dict:
    """The [circuit] settings that apply to the chosen oracle."""
    doc = asdict(settings)
    if settings.evolution != "walk":
        doc.pop("encoding")
    if settings.evolution != "trotter":
        doc.pop("trotter_steps")
        doc.pop("trotter_order")
    return doc


def _is_dense(op, depth: int = 0) -> bool:
    """Whether synthesising ``op`` synthesises a dense matrix (a UnitaryGate or a MultiplexerGate)."""
    from qiskit.circuit import ControlledGate, Gate, Instruction
    from qiskit.circuit.library import UnitaryGate

    if isinstance(op, (UnitaryGate, MultiplexerGate)):
        return True
    if isinstance(op, ControlledGate):
        return _is_dense(op.base_gate, depth + 1)
    # Plain composite gates only (library gates are not opened: their definitions are synthesised lazily).
    if type(op) in (Gate, Instruction) and op.definition is not None and depth < 4:
        return any(_is_dense(inst.operation, depth + 1) for inst in op.definition.data)
    return False


_ORIGIN_NOTE = (
    "gate counts split by origin. 'dense': pieces that contain a dense matrix (the exact oracle's controlled "
    "powers, the dilation's controlled U, a multiplexed state preparation), synthesised by qiskit's unitary "
    "synthesis (quantum Shannon decomposition); their one-qubit gate counts and the depth depend on the "
    "platform's floating point (measured 2.4% spread in u for the demo between OpenBLAS kernels, CX identical). "
    "'composed': every other piece (Hadamards, QFT, multiplexed RY, RY-tree state preparation, Pauli rotations, "
    "multi-controlled Paulis), whose counts are fixed by qgp's construction"
)


def gate_counts_by_origin(dec: DecomposedCircuit) -> dict:
    """Gate counts per basis, split into dense-unitary syntheses and pieces qgp composes itself.

    Parameters
    ----------
    dec : DecomposedCircuit
        A decomposed circuit.

    Returns
    -------
    dict
        ``dense_pieces`` (readable piece names), ``<basis key>`` → ``{"dense": counts,
        "composed": counts}`` and a ``note``.
    """
    dense = {key for key, piece in dec.pieces.items() if _is_dense(piece.operation)}
    mult = dec.multiplicity()
    out: dict = {"dense_pieces": sorted({dec.pieces[k].name for k in dense})}
    for bkey, basis in BASES.items():
        lowered = dec.lowered(basis)
        split: dict[str, dict[str, int]] = {"dense": {}, "composed": {}}
        for key, times in mult.items():
            part = split["dense" if key in dense else "composed"]
            for gate, n in lowered[key].counts.items():
                part[gate] = part.get(gate, 0) + times * int(n)
        out[bkey] = {k: dict(sorted(v.items())) for k, v in split.items()}
    out["note"] = _ORIGIN_NOTE
    return out


def _versions() -> dict:
    import qiskit
    import scipy

    try:
        import qiskit_aer

        aer = qiskit_aer.__version__
    except ImportError:  # pragma: no cover - aer is a dependency
        aer = None
    return {"qiskit": qiskit.__version__, "qiskit_aer": aer, "numpy": np.__version__, "scipy": scipy.__version__}


def _cpu_model() -> str | None:
    name = platform.processor() or None
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith(("model name", "Model", "Hardware")):
                    return line.split(":", 1)[1].strip() or name
    except OSError:
        pass
    return name


def _blas_build(config: dict | None) -> dict | None:
    try:
        blas = config["Build Dependencies"]["blas"]
    except (KeyError, TypeError):
        return None
    return {k: blas.get(k) for k in ("name", "version", "openblas configuration") if blas.get(k) is not None}


def platform_info() -> dict:
    """Where the gates were synthesised: machine, CPU, BLAS, OPENBLAS_CORETYPE.

    Dense-unitary synthesis (and the matrices it starts from) depends on the floating point of the
    BLAS/LAPACK kernels in use, so one-qubit gate counts differ between machines (see
    circuits/README.md). Nothing is installed for this: numpy's and scipy's ``show_config``
    give the BLAS they were built with; the kernel OpenBLAS chose at run time is read with
    threadpoolctl only when it is installed.

    Returns
    -------
    dict
        ``machine``, ``system``, ``processor``, ``python``, ``numpy_blas``, ``scipy_blas``,
        ``blas_runtime`` (None without threadpoolctl) and ``OPENBLAS_CORETYPE`` (None when unset).
    """
    import scipy

    def config(mod):
        try:
            return mod.show_config(mode="dicts")
        except Exception:  # older releases print instead of returning a dict
            return None

    runtime = None
    try:
        from threadpoolctl import threadpool_info

        runtime = [
            {k: d.get(k) for k in ("prefix", "internal_api", "version", "architecture", "num_threads")}
            for d in threadpool_info()
            if d.get("user_api") == "blas"
        ]
    except Exception:  # not installed (it is optional) or failed to inspect the libraries
        runtime = None
    return {
        "machine": platform.machine(),
        "system": platform.system(),
        "processor": _cpu_model(),
        "python": platform.python_version(),
        "numpy_blas": _blas_build(config(np)),
        "scipy_blas": _blas_build(config(scipy)),
        "blas_runtime": runtime,
        "OPENBLAS_CORETYPE": os.environ.get("OPENBLAS_CORETYPE"),
    }


def build_catalogue(out_dir: Path = Path("circuits"), names: Sequence[str] = CATALOGUE) -> list[Path]:
    """Write ``<name>.qasm`` and ``<name>.json`` for every catalogue entry into ``out_dir``.

    The regeneration command: files of an earlier catalogue in ``out_dir`` are replaced (each
    atomically, once every file of its entry is built).

    Parameters
    ----------
    out_dir : path
        The catalogue folder (created if missing; must not be a file).
    names : sequence of str
        Entries to write (default: all of `CATALOGUE`).

    Returns
    -------
    list of Path
        The files written.
    """
    out = check_outputs(out_dir, [], force=True, option="--catalogue")
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for name in names:
        entry = catalogue_entry(name)
        _refuse_if_too_large(entry.A, entry.settings, f"catalogue entry {name}")
        gi = gate_inversion(entry.A, entry.settings, "inverse", entry.bounds, prepare=normalised_amplitudes(entry.b))
        text = to_qasm3(gi.decomposed, [entry.title, *(_header("", gi, INVERSION_FILE)[1:]), f"regenerate: {REGENERATE_COMMAND}"])
        doc = json.dumps(catalogue_document(entry, gi), indent=2) + "\n"
        qasm, js = out / f"{name}.qasm", out / f"{name}.json"
        atomic_write_text(qasm, text)
        atomic_write_text(js, doc)
        paths += [qasm, js]
    return paths


def main(argv: Sequence[str] | None = None) -> int:
    """``python -m qgp.export --catalogue [DIR]`` or ``python -m qgp.export CONFIG --out DIR``.

    Parameters
    ----------
    argv : sequence of str, optional
        Command-line arguments (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        0 on success, 2 on a QgpError (printed as one line).
    """
    parser = argparse.ArgumentParser(prog="python -m qgp.export", description=__doc__.splitlines()[0])
    parser.add_argument("config", nargs="?", help="a qgp config file to export")
    parser.add_argument("--out", help="output folder for the config's export")
    parser.add_argument("--force", action="store_true", help="overwrite files of an earlier export in --out")
    parser.add_argument("--measure", action="store_true", help="measure every register r at the end into c_r")
    parser.add_argument("--test-point", type=int, metavar="J", help="also write the Hadamard test of test point J")
    parser.add_argument("--catalogue", nargs="?", const="circuits", metavar="DIR", help="regenerate the catalogue into DIR (default: circuits)")
    args = parser.parse_args(argv)
    try:
        if args.catalogue is not None:
            paths = build_catalogue(Path(args.catalogue))
        elif args.config and args.out:
            from qgp.config import load_config

            paths = export_config(
                load_config(args.config), Path(args.out), measure=args.measure, test_point=args.test_point,
                force=args.force,
            )
        else:
            parser.error("give --catalogue [DIR], or CONFIG --out DIR")
    except QgpError as exc:
        print(f"qgp: error: {exc}", file=sys.stderr)
        return 2
    for p in paths:
        print(p)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
