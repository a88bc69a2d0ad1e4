"""OpenQASM 3 export of the inversion circuits, and the catalogue of reference circuits.

`export_config` writes, for a config's problem,

* ``inversion.qasm``: amplitude encoding of ŷ = y/‖y‖ (y the padded, centred training targets),
  then the ``inverse`` inversion with its uncompute; read with flag = 1, clock = 0, block = 0;
* ``inversion_sqrt.qasm``: the same with the ``inverse_sqrt`` rotation and no uncompute; read
  with flag = 1 alone;
* ``resources.json``: qubits per register, gate counts and depth per basis, the constants C and
  C′ and how to turn each file's probability into ‖A⁻¹ŷ‖ and ŷᵀA⁻¹ŷ.

File format: OpenQASM 3.0, measurement-free, registers ``system | clock | flag | block`` declared
in qubit order (``system[0]`` least significant; amplitude j of ``system`` is training row j).
Every gate is the built-in ``U`` or ``cx`` (stdgates.inc) — the ['u', 'cx'] basis, transpiled at
optimisation level 0 with no coupling map, so no swap is inserted and no qubit is permuted.
Sub-circuits with more than one gate (one controlled oracle call, the state preparation, the
inverse QFT, the multiplexed RY, …) are written once as ``gate`` definitions whose bodies are in
that basis, and called; global phases are kept with ``gphase``, so the file is the in-memory
operator exactly, not up to a phase. Writing each of the 2(2^c − 1) oracle calls out instead would
make the demo's file ≈ 50 MB and take qiskit's importer hours; as definitions it is < 1 MB. The
writer is our own (qiskit.qasm3.dumps drops global phases and took 3 min per 10^6 gates here);
tests load every file back with `qiskit.qasm3.loads`.

The catalogue (``python -m qgp.export --catalogue [DIR]``, default ``circuits/``) holds the
published worked examples and the bundled demo as ``<name>.qasm`` plus ``<name>.json``.
"""

from __future__ import annotations

import argparse
import json
import math
import re
import sys
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from qgp.encoding import BLOCK, normalised_amplitudes
from qgp.errors import QgpError
from qgp.inversion import FLAG
from qgp.phase_estimation import CLOCK
from qgp.resources import (
    BASES,
    DecomposedCircuit,
    GateInversion,
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
    "CATALOGUE",
    "REGENERATE_COMMAND",
    "CatalogueEntry",
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

#: The register values each file is read with (registers not named are summed over).
PROJECTORS = {
    INVERSION_FILE: {FLAG: 1, CLOCK: 0, BLOCK: 0},
    INVERSION_SQRT_FILE: {FLAG: 1},
}

CATALOGUE = ("cao2012_exact", "hhl_2x2_exact", "demo_walk_dilation")
REGENERATE_COMMAND = "python -m qgp.export --catalogue circuits"

_U_CX = BASES["u_cx"]
_FORMAT_NOTE = (
    "OpenQASM 3.0, measurement-free. Every gate is the built-in U or cx (stdgates.inc), transpiled at "
    "optimization_level 0 without a coupling map (no swap inserted, no qubit permuted); sub-circuits of more "
    "than one gate are defined once as `gate` blocks in that basis and called, and gphase keeps global phases. "
    "Registers in qubit order: system | clock | flag | block; system[0] is the least significant bit and "
    "amplitude j of system is training row j."
)

# Gate names a definition must not take: OpenQASM 3 keywords, built-ins and stdgates.inc.
_RESERVED = frozenset(
    """U gphase CX cx cy cz ch cp crx cry crz cswap ccx cu cphase phase id h p rx ry rz s sdg sx swap t tdg
    u1 u2 u3 x y z gate qubit bit include OPENQASM def defcal let const input output reset measure barrier
    if else for while in return box ctrl negctrl inv pow pi euler tau""".split()
)


# ---------------------------------------------------------------------------------------------
# OpenQASM 3 writer for a decomposed circuit in the ['u', 'cx'] basis


def _identifier(name: str) -> str:
    ident = re.sub(r"_+", "_", re.sub(r"[^A-Za-z0-9_]", "_", name)).strip("_") or "piece"
    if ident[0].isdigit():
        ident = "g_" + ident
    if ident in _RESERVED:
        ident += "_gate"
    return ident


def _num(x) -> str:
    # repr is the shortest string that reads back as the same double.
    return repr(float(x))


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


def to_qasm3(dec: DecomposedCircuit, header: Sequence[str] = ()) -> str:
    """OpenQASM 3 text of ``dec`` in the ['u', 'cx'] basis (see the module docstring).

    ``header`` lines are written as ``//`` comments after the version line.
    """
    lowered = dec.lowered(_U_CX)
    qubit_names = [f"{name}[{j}]" for name, size in dec.registers for j in range(size)]
    names: dict[str, str] = {}
    taken: set[str] = {name for name, _ in dec.registers}  # a gate must not shadow a register
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
        ident = base = _identifier(dec.pieces[key].name)
        n = 2
        while ident in taken:
            ident, n = f"{base}_{n}", n + 1
        taken.add(ident)
        names[key] = ident
        args = [f"q{i}" for i in range(lp.circuit.num_qubits)]
        body = [f"gate {ident} {', '.join(args)} {{"]
        if float(lp.circuit.global_phase) != 0.0:
            body.append(f"  gphase({_num(lp.circuit.global_phase)});")
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
    phase = math.remainder(phase, 2 * math.pi)
    if phase != 0.0:
        lines.append(f"gphase({_num(phase)});")
    lines += calls
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


def _header(title: str, gi: GateInversion, file: str) -> list[str]:
    inv = gi.inversion
    s = inv.settings
    proj = ", ".join(f"{k}={v}" for k, v in PROJECTORS.get(file, PROJECTORS[INVERSION_FILE]).items())
    return [
        title,
        f"rotation {inv.rotation}, {s.evolution} oracle"
        + (f" ({s.encoding} encoding)" if s.evolution == "walk" else "")
        + f", {s.clock_qubits} clock qubits; C = {_num(inv.scale)}",
        f"read with {proj}; written by qgp.export",
    ]


def _refuse_if_too_large(A, settings: CircuitSettings, what: str) -> None:
    # The inverse file (with its uncompute) is the larger of the two.
    est = size_estimate(A, settings, uncompute=True, prepare=True)
    if not est.within_limits:
        raise QgpError(
            f"{what} is too large to decompose and export in reasonable time: {est.describe()}; "
            "lower [circuit] clock_qubits, use fewer training points or another [circuit] evolution"
        )


def export_inversions(A, settings: CircuitSettings, bounds, yhat, out_dir, *, title: str = "qgp inversion circuits", extra: dict | None = None) -> list[Path]:
    """Write inversion.qasm, inversion_sqrt.qasm and resources.json for A, ŷ into ``out_dir``.

    Existing files of those names are overwritten (they are regenerated from the inputs).
    """
    _refuse_if_too_large(A, settings, f"the {settings.evolution} inversion circuit")
    b = normalised_amplitudes(yhat)
    inv = gate_inversion(A, settings, "inverse", bounds, prepare=b)
    inv_sqrt = gate_inversion(A, settings, "inverse_sqrt", bounds, prepare=b)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    doc = {
        "format": _FORMAT_NOTE,
        **(extra or {}),
        "qubits": resources_of(inv).as_dict()["qubits"],
        "scale_inverse": inv.inversion.scale,
        "scale_inverse_sqrt": inv_sqrt.inversion.scale,
        "projectors": PROJECTORS,
        "reading": {INVERSION_FILE: _reading(INVERSION_FILE), INVERSION_SQRT_FILE: _reading(INVERSION_SQRT_FILE)},
        "gate_counts": {},
        "resources": {},
        "constants": {},
    }
    paths = []
    for file, gi in ((INVERSION_FILE, inv), (INVERSION_SQRT_FILE, inv_sqrt)):
        res = resources_of(gi).as_dict()
        doc["gate_counts"][file] = res["gate_counts"]
        doc["resources"][file] = res
        doc["constants"][file] = _constants(gi)
        path = out / file
        path.write_text(to_qasm3(gi.decomposed, _header(title, gi, file)))
        paths.append(path)
    path = out / RESOURCES_FILE
    path.write_text(json.dumps(doc, indent=2) + "\n")
    paths.append(path)
    return paths


def export_config(cfg: Config, out_dir) -> list[Path]:
    """`qgp export CONFIG --out DIR`: the config's two inversion circuits and resources.json.

    ŷ is the padded, centred training target vector, normalised; A the padded A = K + σ²I with
    its a-priori eigenvalue bounds (as `qgp run` builds them). Refuses (QgpError), before any
    circuit is built, a configuration whose circuit is too large to decompose in reasonable time.
    """
    from qgp.problem import problem_from_config
    from qgp.system import eigenvalue_bounds

    _refuse_size_from_config(cfg)
    problem = problem_from_config(cfg)
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
            "padded_size": problem.padded_size,
            "noise_variance": problem.noise_variance,
            "y_offset": problem.y_offset,
            "y_norm": y_norm,
        },
    }
    title = f"qgp export of {cfg.source.name if cfg.source else 'a config'}"
    return export_inversions(A, cfg.circuit, bounds, y, out_dir, title=title, extra=extra)


def _refuse_size_from_config(cfg: Config) -> None:
    """The size check from the row count alone, before the kernel matrix is built.

    Uses one Pauli term for ``lcu``/``trotter`` (a lower bound), so it refuses only circuits that
    are too large whatever A is; `export_inversions` checks again with A's own term count.
    """
    from qgp.config import load_dataset
    from qgp.resources import estimate_size
    from qgp.system import padded_size

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
        from qgp.problem import problem_from_config
        from qgp.system import eigenvalue_bounds

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
            bounds_note="the a-priori bounds of qgp.system.eigenvalue_bounds (Gershgorin above, max(Gershgorin, sigma^2) below)",
            note="c from the config (8): the file stays < 1 MB because the controlled walk is defined once and called 510 times",
        )
    raise QgpError(f"unknown catalogue entry {name!r}; choose one of {CATALOGUE}")


def _simulated_postselection(entry: CatalogueEntry, b: np.ndarray) -> tuple[np.ndarray, float]:
    """Post-selected system amplitudes of the in-memory circuit (simulation form, same operator)."""
    from qgp.inversion import build_inversion, postselected_system_amplitudes
    from qgp.simulate import run_statevector

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
        "expected": {
            "ideal_postselected_amplitudes": ideal.tolist(),
            "ideal_success_probability": float(ideal @ ideal),
        },
        "versions": _versions(),
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


def _versions() -> dict:
    import qiskit

    try:
        import qiskit_aer

        aer = qiskit_aer.__version__
    except ImportError:  # pragma: no cover - aer is a dependency
        aer = None
    return {"qiskit": qiskit.__version__, "qiskit_aer": aer, "numpy": np.__version__}


def build_catalogue(out_dir: Path = Path("circuits"), names: Sequence[str] = CATALOGUE) -> list[Path]:
    """Write ``<name>.qasm`` and ``<name>.json`` for every catalogue entry into ``out_dir``."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for name in names:
        entry = catalogue_entry(name)
        _refuse_if_too_large(entry.A, entry.settings, f"catalogue entry {name}")
        gi = gate_inversion(entry.A, entry.settings, "inverse", entry.bounds, prepare=normalised_amplitudes(entry.b))
        qasm = out / f"{name}.qasm"
        qasm.write_text(to_qasm3(gi.decomposed, [entry.title, *(_header("", gi, INVERSION_FILE)[1:]), f"regenerate: {REGENERATE_COMMAND}"]))
        js = out / f"{name}.json"
        js.write_text(json.dumps(catalogue_document(entry, gi), indent=2) + "\n")
        paths += [qasm, js]
    return paths


def main(argv: Sequence[str] | None = None) -> int:
    """``python -m qgp.export --catalogue [DIR]`` or ``python -m qgp.export CONFIG --out DIR``."""
    parser = argparse.ArgumentParser(prog="python -m qgp.export", description=__doc__.splitlines()[0])
    parser.add_argument("config", nargs="?", help="a qgp config file to export")
    parser.add_argument("--out", help="output folder for the config's export")
    parser.add_argument("--catalogue", nargs="?", const="circuits", metavar="DIR", help="regenerate the catalogue into DIR (default: circuits)")
    args = parser.parse_args(argv)
    try:
        if args.catalogue is not None:
            paths = build_catalogue(Path(args.catalogue))
        elif args.config and args.out:
            from qgp.config import load_config

            paths = export_config(load_config(args.config), Path(args.out))
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
