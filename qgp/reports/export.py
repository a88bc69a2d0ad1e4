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

For ``[circuit] method = "qsvt"`` (no clock; registers ``system | flag | block``, the block
encoding's qubits then the QSVT signal qubit last) the two inversion files hold the state
preparation and the QSVT sequence of `qgp.circuits.qsvt` with the odd polynomial p ≈ s·a/x
(``inversion.qasm``, read with flag = 1, block = 0: amplitudes p(A/α)ŷ ≈ C·A⁻¹ŷ) and the even
q ≈ s·√(a/|x|) (``inversion_sqrt.qasm``, read with flag = 1: P = ‖q(A/α)ŷ‖² ≈ C′·ŷᵀA⁻¹ŷ);
``resources.json`` holds `qgp.circuits.resources.qsvt_resources` (gate counts of the file as
written, state preparation included), C, C′, α, κ_b and each polynomial (degree, scale s,
measured relative error, Chebyshev coefficients). With a test point, ``hadamard_test_J.qasm`` holds
the QSVT sequence controlled on the probe (read with flag = 1, block = 0: no clock).

The file format is `qgp.circuits.qasm`'s. Files are written atomically, and an export never
replaces files of an earlier one unless forced (`qgp.files`).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from qgp.circuits.decomposition import _register_offsets
from qgp.circuits.algorithms import algorithm_of
from qgp.circuits.encoding import (
    BLOCK,
    SYSTEM,
    MultiplexerGate,
    check_matrix,
    normalised_amplitudes,
    pauli_decomposition,
    pauli_terms_bound,
)
from qgp.circuits.inversion import FLAG, InversionCircuit, build_inversion
from qgp.circuits.methods import method_description
from qgp.circuits.methods.encodings import get_encoding
from qgp.circuits.phase_estimation import CLOCK
from qgp.circuits.qasm import FORMAT_NOTE, number_text, to_qasm3
from qgp.circuits.resources import (
    BASES,
    SYNTHESIS_LIMIT,
    CircuitResources,
    DecomposedCircuit,
    GateInversion,
    decompose_circuit,
    gate_counts_by_basis,
    gate_inversion,
    qsvt_resources,
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
    "QSVT_PROJECTORS",
    "HADAMARD_PROJECTOR",
    "projectors_of",
    "exported_inversion",
    "file_resources",
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
#: The same for ``method = "qsvt"`` (no clock register; flag = 1 is set exactly on block = 0).
QSVT_PROJECTORS = {
    INVERSION_FILE: {FLAG: 1, BLOCK: 0},
    INVERSION_SQRT_FILE: {FLAG: 1},
}
#: The Hadamard-test file is read with these values, separately for probe = 0 and probe = 1.
HADAMARD_PROJECTOR = {FLAG: 1, CLOCK: 0, BLOCK: 0}

_QSVT_REGISTERS_NOTE = (
    "With [circuit] method = \"qsvt\" there is no clock register: the registers are system | flag | block, "
    "block holding the block encoding's qubits and, last, the QSVT signal qubit."
)
_QSVT_HADAMARD_NOTE = (
    "written with --test-point J (hadamard_test_J.qasm): the QSVT sequence with its Hadamards, phase rotations "
    "and block-encoding calls controlled on probe = 0"
)


def projectors_of(settings: CircuitSettings) -> dict:
    """`PROJECTORS` (phase estimation) or `QSVT_PROJECTORS` (no clock) for ``settings``."""
    return PROJECTORS if algorithm_of(settings).uses_clock else QSVT_PROJECTORS


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


def reading_text(
    file: str, vector: str = "yhat = y/|y|, y the padded, centred training targets", *, clock: bool = True
) -> str:
    """How to turn the file's post-selection probability into numbers (plain ASCII for any reader).

    ``clock = False`` for the QSVT files (no clock register; the amplitudes are a polynomial of A/alpha).
    """
    if not clock:
        return _qsvt_reading_text(file, vector)
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


def _qsvt_reading_text(file: str, vector: str) -> str:
    if file == INVERSION_SQRT_FILE:
        return (
            f"Run {file} from |0...0> and let P be the probability of flag=1 (all other registers summed; flag=1 "
            "is set only on block=0). P = |q(A/alpha) yhat|^2 with q the even polynomial of constants (Chebyshev "
            f"coefficients of x = lambda/alpha), q(x) ~ s*sqrt(a/|x|), a = 1/kappa_b; so P ~ C'*yhat^T A^-1 yhat ({vector}; "
            "C' = scale_inverse_sqrt = s^2*lambda_lo), yhat^T A^-1 yhat ~ P/C' and y^T A^-1 y = y_norm^2*P/C'."
        )
    tail = "" if file != INVERSION_FILE else " and |A^-1 y| = y_norm*sqrt(P)/C"
    return (
        f"Run {file} from |0...0> and let P be the probability of flag=1, block=0 (flag=1 is set only on block=0). "
        "The system amplitudes there are p(A/alpha)*yhat, p the odd polynomial of constants (Chebyshev coefficients "
        f"of x = lambda/alpha), p(x) ~ s*a/x, a = 1/kappa_b; so they are ~ C*A^-1*yhat ({vector}; C = scale_inverse = "
        "s*lambda_lo) to the polynomial's relative error max_error, the normalised system state is "
        f"~ A^-1 yhat/|A^-1 yhat| and |A^-1 yhat| ~ sqrt(P)/C{tail}."
    )


def _is_qsvt(inv: InversionCircuit) -> bool:
    return not algorithm_of(inv.settings).uses_clock


def _qsvt_constants(inv: InversionCircuit) -> dict:
    """C, alpha, kappa_b and the polynomial of a QSVT inversion (what turns its probabilities into numbers)."""
    poly = inv.polynomial
    return {
        "scale": inv.scale,
        "alpha": inv.alpha,
        "effective_condition_number": inv.effective_condition_number,
        "bounds": list(inv.bounds),
        "block_encoding": inv.settings.encoding,
        "block_encoding_calls": inv.n_oracle_calls,
        "polynomial": {
            "kind": poly.kind,
            "degree": int(poly.degree),
            "scale": float(poly.scale),
            "max_error": float(poly.max_error),
            "max_abs": float(poly.max_abs),
            "condition_number": float(poly.condition_number),
            "construction": poly.construction,
            "basis": "Chebyshev: p(x) = sum_k coefficients[k]*T_k(x), x = lambda/alpha",
            "coefficients": [float(c) for c in poly.coefficients],
        },
        "phase_residual": None if inv.phase_residual is None else float(inv.phase_residual),
    }


def constants_document(gi: GateInversion) -> dict:
    inv = gi.inversion
    if _is_qsvt(inv):
        return _qsvt_constants(inv)
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


def _qsvt_header_lines(title: str, inv: InversionCircuit, file: str, *, measure: bool) -> list[str]:
    poly = inv.polynomial
    proj = ", ".join(f"{k}={v}" for k, v in QSVT_PROJECTORS.get(file, QSVT_PROJECTORS[INVERSION_FILE]).items())
    return [
        title,
        f"rotation {inv.rotation}, QSVT of the {inv.settings.encoding} block encoding of A/alpha, "
        f"alpha = {number_text(inv.alpha)}, kappa_b = {number_text(inv.effective_condition_number)}, polynomial "
        f"degree {poly.degree} ({inv.n_oracle_calls} block-encoding calls), relative error "
        f"{number_text(poly.max_error)}; no clock; C = {number_text(inv.scale)}",
        f"read with {proj}" + ("; every register r measured into c_r" if measure else "") + "; written by qgp (qgp export)",
    ]


def header_lines(title: str, gi: GateInversion, file: str, *, measure: bool = False) -> list[str]:
    inv = gi.inversion
    if _is_qsvt(inv):
        return _qsvt_header_lines(title, inv, file, measure=measure)
    s = inv.settings
    proj = ", ".join(f"{k}={v}" for k, v in PROJECTORS.get(file, PROJECTORS[INVERSION_FILE]).items())
    return [
        title,
        f"rotation {inv.rotation}, {method_description(s)}"
        + f", {s.clock_qubits} clock qubits; C = {number_text(inv.scale)}",
        f"read with {proj}" + ("; every register r measured into c_r" if measure else "") + "; written by qgp (qgp export)",
    ]


def _qsvt_call_size(m: int, settings: CircuitSettings, terms: int) -> tuple[int, str]:
    """Gates to synthesise for one call of the block encoding (its controlled form's estimate, as
    `qsvt_resources` counts it: an upper bound) and a description."""
    piece = get_encoding(settings.encoding).size_piece(m, terms=terms, n_pe=1, calls=1)
    return piece.synthesis_gates, (
        f"one call of the {settings.encoding} block encoding on {m} system qubits synthesises to ≈ "
        f"{piece.synthesis_gates:,} gates per basis (limit {SYNTHESIS_LIMIT:,})"
    )


# Above this many system qubits A's Pauli decomposition is not computed for the size check (the bound is used).
_MAX_TERM_COUNT_QUBITS = 10


def _refuse_qsvt_if_too_large(m: int, settings: CircuitSettings, what: str, terms: int) -> None:
    gates, text = _qsvt_call_size(m, settings, terms)
    if gates > SYNTHESIS_LIMIT:
        raise QgpError(
            f"{what} is too large to decompose and export in reasonable time: {text}; use fewer training points"
            + (" or the lcu encoding" if settings.encoding == "dilation" else "")
        )


def refuse_if_too_large(A, settings: CircuitSettings, what: str) -> None:
    if not algorithm_of(settings).uses_clock:
        a = check_matrix(A)
        m = a.shape[0].bit_length() - 1
        terms = 0
        if get_encoding(settings.encoding).needs_pauli_terms():  # A's own term count where cheap, else the bound
            terms = len(pauli_decomposition(a)) if m <= _MAX_TERM_COUNT_QUBITS else pauli_terms_bound(m)
        _refuse_qsvt_if_too_large(m, settings, what, terms)
        return
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


def _hadamard_reading(file: str, clock: bool = True) -> str:
    return (
        f"Run {file} from |0...0> and let P0 (P1) be the probability of probe=0 (probe=1) together with "
        + ("flag=1, clock=0, block=0" if clock else "flag=1, block=0 (no clock register)")
        + ". Then P0 - P1 = Re<khat|C*A^-1|yhat> and the predictive mean at the test point "
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


def _qpe_body(inv: InversionCircuit):
    """The phase-estimation body of ``inv`` for its Hadamard test (None for QSVT, whose test is
    built from the inversion itself: qgp.readout.estimators)."""
    from qgp.circuits.phase_estimation import phase_estimation_circuit

    return phase_estimation_circuit(inv.oracle) if inv.oracle is not None else None


def _hadamard_text(gi: GateInversion, b: np.ndarray, point: HadamardPoint, title: str, *, measure: bool):
    """(decomposed Hadamard-test circuit, file text) of ``point`` in the gate form of ``gi``."""
    from qgp.readout.estimators import hadamard_test_circuit

    inv = gi.inversion
    named = _qsvt_named if _is_qsvt(inv) else _flag_rotation_named
    dec = named(decompose_circuit(hadamard_test_circuit(_qpe_body(inv), inv, point.khat, b), open_repeats=not _is_qsvt(inv)))
    file = hadamard_file(point.index)
    s = inv.settings
    header = [
        title,
        f"Hadamard test of test point {point.index}: probe=0 prepares yhat and applies C*A^-1, probe=1 prepares "
        f"khat; {algorithm_of(s).label(s)}"
        + f", {s.clock_qubits} clock qubits; C = {number_text(inv.scale)}",
        "read P0, P1 = P(probe=0, 1 and flag=1, " + ("" if _is_qsvt(inv) else "clock=0, ") + "block=0); mean = prior_mean + y_norm*k_star_norm*(P0 - P1)/C "
        f"(numbers in {RESOURCES_FILE})" + ("; every register r measured into c_r" if measure else ""),
    ]
    return file, dec, to_qasm3(dec, header, measure=measure)


def _qsvt_named(dec: DecomposedCircuit) -> DecomposedCircuit:
    """Readable piece names for a QSVT file: ``prepare_…`` for the state preparation (pieces on
    ``system`` alone before anything else), ``block_encoding_<kind>`` for one call of U,
    ``set_flag`` for flag ⊕= [block = 0] and ``signal_x_on_block0`` for the X of the
    projector-controlled phases."""
    offsets, sizes = _register_offsets(dec.registers), dict(dec.registers)
    system = set(range(offsets[SYSTEM], offsets[SYSTEM] + sizes[SYSTEM]))
    flag = offsets[FLAG]
    signal = offsets[BLOCK] + sizes[BLOCK] - 1
    renamed: dict[str, str] = {}
    preparing = True
    for run in dec.runs:
        piece = dec.pieces[run.key]
        if preparing and set(run.qubits) <= system:
            renamed.setdefault(run.key, "prepare_" + piece.name)
            continue
        preparing = False
        if flag in run.qubits:
            renamed.setdefault(run.key, "set_flag")
        elif system & set(run.qubits):
            renamed.setdefault(run.key, "block_encoding_" + piece.name)
        elif run.qubits[-1] == signal and piece.n_qubits > 1:
            renamed.setdefault(run.key, "signal_x_on_block0")
    return replace(dec, pieces={k: replace(p, name=renamed.get(k, p.name)) for k, p in dec.pieces.items()})


def exported_inversion(A, settings: CircuitSettings, rotation, bounds, *, prepare=None) -> GateInversion:
    """The gate-form inversion circuit an export writes, as runs of pieces, for either method.

    Phase estimation: `qgp.circuits.resources.gate_inversion` (with its size check). QSVT: the
    gate form of `qgp.circuits.qsvt_inversion.build_qsvt_inversion` split into its top-level
    pieces (as `qsvt_resources` splits it), each named by role.
    """
    if algorithm_of(settings).uses_clock:
        return gate_inversion(A, settings, rotation, bounds, prepare=prepare)
    inv = build_inversion(A, settings, rotation, bounds, prepare=prepare, form="gate")
    dec = _qsvt_named(decompose_circuit(inv.circuit, open_repeats=False))
    return GateInversion(inversion=inv, decomposed=dec, prepared=prepare is not None, n_pauli_terms=inv.n_pauli_terms or None)


def file_resources(A, gi: GateInversion) -> CircuitResources:
    """Resources of the circuit ``gi`` holds (as written to a file): `resources_of` for phase
    estimation; for QSVT `qsvt_resources` of the same A, settings, rotation and bounds, with the
    gate counts and depth of the circuit as written (state preparation included when prepared)."""
    inv = gi.inversion
    if not _is_qsvt(inv):
        return resources_of(gi)
    res = qsvt_resources(check_matrix(A), inv.settings, inv.rotation, inv.bounds, require_gate_level=True)
    return replace(res, prepared=gi.prepared, gate_counts=gate_counts_by_basis(gi.decomposed))


def _write_export(out: Path, texts: dict[str, str], doc: dict) -> list[Path]:
    """Write the OpenQASM files and resources.json (versions and platform added), each atomically."""
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
        Also write ``hadamard_test_<index>.qasm`` and its constants under ``test_point`` (phase
        estimation only: refused with ``method = "qsvt"``).
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
    clock = algorithm_of(settings).uses_clock
    names = [INVERSION_FILE, INVERSION_SQRT_FILE] + ([hadamard_file(point.index)] if point else []) + [RESOURCES_FILE]
    out = check_outputs(out_dir, names, force=force, option="--out", inputs=inputs)
    what = settings.evolution if clock else f"QSVT ({settings.encoding})"
    refuse_if_too_large(A, settings, f"the {what} inversion circuit")
    b = normalised_amplitudes(yhat)
    inv = exported_inversion(A, settings, "inverse", bounds, prepare=b)
    inv_sqrt = exported_inversion(A, settings, "inverse_sqrt", bounds, prepare=b)
    files = ((INVERSION_FILE, inv), (INVERSION_SQRT_FILE, inv_sqrt))
    resources = {file: file_resources(A, gi).as_dict() for file, gi in files}
    # QSVT adds what its files need beyond phase estimation's (which stay as they were).
    doc = {
        "format": FORMAT_NOTE if clock else f"{FORMAT_NOTE} {_QSVT_REGISTERS_NOTE}",
        **(extra or {}),
        **({} if clock else {"method": settings.method}),
        "qubits": resources[INVERSION_FILE]["qubits"],
        "scale_inverse": inv.inversion.scale,
        "scale_inverse_sqrt": inv_sqrt.inversion.scale,
        **(
            {}
            if clock
            else {"alpha": inv.inversion.alpha, "effective_condition_number": inv.inversion.effective_condition_number}
        ),
        "projectors": projectors_of(settings),
        "measured": bool(measure),
        "reading": {file: reading_text(file, clock=clock) for file, _ in files},
        "gate_counts": {file: resources[file]["gate_counts"] for file, _ in files},
        "resources": resources,
        "constants": {file: constants_document(gi) for file, gi in files},
        **({} if clock or point is not None else {"hadamard_test": _QSVT_HADAMARD_NOTE}),
    }
    texts = {file: to_qasm3(gi.decomposed, header_lines(title, gi, file, measure=measure), measure=measure) for file, gi in files}
    if point is not None:
        _add_test_point(doc, texts, inv, b, point, title, measure)
    return _write_export(out, texts, doc)


def _add_test_point(doc: dict, texts: dict, inv: GateInversion, b, point: HadamardPoint, title: str, measure: bool) -> None:
    """The Hadamard-test file of ``point`` into ``texts`` and its counts and constants into ``doc``."""
    file, dec, texts[file] = _hadamard_text(inv, b, point, title, measure=measure)
    qsvt = _is_qsvt(inv.inversion)
    qubits = dict(dec.registers)
    qubits["total"] = dec.num_qubits
    doc["gate_counts"][file] = gate_counts_by_basis(dec)
    doc["resources"][file] = {"qubits": qubits, "gate_counts": doc["gate_counts"][file]}
    doc["test_point"] = {
        "index": point.index,
        "x": list(point.x),
        "file": file,
        "probe": PROBE,
        "projector": HADAMARD_PROJECTOR if not qsvt else {FLAG: 1, BLOCK: 0},
        "prior_mean": point.prior_mean,
        "y_norm": point.y_norm,
        "k_star_norm": point.k_star_norm,
        "scale_inverse": inv.inversion.scale,
        "reading": _hadamard_reading(file, clock=not qsvt),
        "expected": point.expected,
    }


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
        training inputs when the config has no test file) and the constants of its mean (phase
        estimation only: refused with ``method = "qsvt"``).
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

    y = problem.padded(problem.y_centered)
    y_norm = float(np.linalg.norm(y))
    k = problem.padded(problem.k_star[:, j : j + 1])[:, 0]
    k_norm = float(np.linalg.norm(k))
    khat = k / k_norm if k_norm > 0 else np.eye(k.size)[0]  # a zero k* has mean = prior mean
    inv = build_inversion(problem.A_padded, settings, "inverse", bounds, form="simulation")
    p0, p1 = per_point_hadamard(_qpe_body(inv), inv, khat[:, None], (y / y_norm)[:, None])
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
    if not algorithm_of(cfg.circuit).uses_clock:
        _refuse_qsvt_if_too_large(m, cfg.circuit, f"the QSVT ({cfg.circuit.encoding}) inversion circuit for {n} training points", 1)
        return
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


