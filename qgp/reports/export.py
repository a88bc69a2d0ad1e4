"""What `qgp export` writes for a config: the inversion circuits as OpenQASM 3 and resources.json.

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

The file format is `qgp.circuits.qasm`'s. Files are written atomically, and an export never
replaces files of an earlier one unless forced (`qgp.files`).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from qgp.circuits.algorithms import algorithm_of
from qgp.circuits.encoding import BLOCK, MultiplexerGate, normalised_amplitudes
from qgp.circuits.inversion import FLAG
from qgp.circuits.methods import method_description
from qgp.circuits.phase_estimation import CLOCK
from qgp.circuits.qasm import FORMAT_NOTE, number_text, to_qasm3
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
from qgp.environment import platform_info, qiskit_versions
from qgp.errors import QgpError
from qgp.files import atomic_write_text, check_outputs
from qgp.settings import CircuitSettings, Config

__all__ = [
    "INVERSION_FILE",
    "INVERSION_SQRT_FILE",
    "RESOURCES_FILE",
    "PROJECTORS",
    "HADAMARD_PROJECTOR",
    "HadamardPoint",
    "hadamard_file",
    "gate_counts_by_origin",
    "refuse_if_too_large",
    "header_lines",
    "constants_document",
    "reading_text",
    "export_config",
    "export_inversions",
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



# ---------------------------------------------------------------------------------------------
# Export of a config's inversion circuits


def reading_text(file: str, vector: str = "yhat = y/|y|, y the padded, centred training targets") -> str:
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


def constants_document(gi: GateInversion) -> dict:
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


def header_lines(title: str, gi: GateInversion, file: str, *, measure: bool = False) -> list[str]:
    inv = gi.inversion
    s = inv.settings
    proj = ", ".join(f"{k}={v}" for k, v in PROJECTORS.get(file, PROJECTORS[INVERSION_FILE]).items())
    return [
        title,
        f"rotation {inv.rotation}, {method_description(s)}"
        + f", {s.clock_qubits} clock qubits; C = {number_text(inv.scale)}",
        f"read with {proj}" + ("; every register r measured into c_r" if measure else "") + "; written by qgp (qgp export)",
    ]


def refuse_if_too_large(A, settings: CircuitSettings, what: str) -> None:
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
        f"khat; {method_description(s)}"
        + f", {s.clock_qubits} clock qubits; C = {number_text(inv.scale)}",
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
    if not algorithm_of(settings).uses_clock:
        raise QgpError(
            '`qgp export` writes phase-estimation circuits only so far: OpenQASM export of the QSVT circuits is not '
            'implemented yet; use [circuit] method = "phase_estimation" to export'
        )
    names = [INVERSION_FILE, INVERSION_SQRT_FILE] + ([hadamard_file(point.index)] if point else []) + [RESOURCES_FILE]
    out = check_outputs(out_dir, names, force=force, option="--out", inputs=inputs)
    refuse_if_too_large(A, settings, f"the {settings.evolution} inversion circuit")
    b = normalised_amplitudes(yhat)
    inv = gate_inversion(A, settings, "inverse", bounds, prepare=b)
    inv_sqrt = gate_inversion(A, settings, "inverse_sqrt", bounds, prepare=b)
    doc = {
        "format": FORMAT_NOTE,
        **(extra or {}),
        "qubits": resources_of(inv).as_dict()["qubits"],
        "scale_inverse": inv.inversion.scale,
        "scale_inverse_sqrt": inv_sqrt.inversion.scale,
        "projectors": PROJECTORS,
        "measured": bool(measure),
        "reading": {INVERSION_FILE: reading_text(INVERSION_FILE), INVERSION_SQRT_FILE: reading_text(INVERSION_SQRT_FILE)},
        "gate_counts": {},
        "resources": {},
        "constants": {},
    }
    texts: dict[str, str] = {}
    for file, gi in ((INVERSION_FILE, inv), (INVERSION_SQRT_FILE, inv_sqrt)):
        res = resources_of(gi).as_dict()
        doc["gate_counts"][file] = res["gate_counts"]
        doc["resources"][file] = res
        doc["constants"][file] = constants_document(gi)
        texts[file] = to_qasm3(gi.decomposed, header_lines(title, gi, file, measure=measure), measure=measure)
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
    doc["versions"] = qiskit_versions()
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


