"""Phase-estimation inversion of A (HHL: Harrow, Hassidim & Lloyd, PRL 103, 150502 (2009)).

Phase estimation writes the decoded eigenvalue λ̃_k of each eigencomponent into ``clock``; an
eigenvalue-conditioned RY on ``flag`` then puts amplitude g(λ̃_k) on flag = 1, with

    g = C/λ̃ (``inverse``)   or   g = √(C/λ̃) (``inverse_sqrt``),

C the smallest admitted λ̃ so g ≤ 1. Clock values with λ̃ below the filter floor (or λ̃ ≤ 0) get no
rotation. Undoing phase estimation returns ``clock`` (and ``block``) to |0⟩, so for a normalised
input b the part of the state with flag = 1, clock = 0, block = 0 is ≈ C·A⁻¹b on ``system``
(``inverse``) and P(flag = 1) ≈ C·‖A^(-1/2)b‖² = C·bᵀA⁻¹b (``inverse_sqrt``, no uncompute needed).

Register and qubit order of `InversionCircuit.circuit` (qiskit: first qubit least significant):

    system (m) | clock (c) | flag (1) | block (b, walk only)

so a statevector index is  i = s + 2^m·k + 2^(m+c)·f + 2^(m+c+1)·β  with s the system value
(``system[0]`` its least significant bit), k the clock value, f the flag and β the block value.
`postselected_system_amplitudes` reads the entries with f = 1, k = 0, β = 0.

Filtering: the floor is max(λ_lo − one clock bin, λ_lo/2) unless ``[circuit] filter_floor`` is
set. Phase estimation leaks much of λ_min's weight into the bin just below it, so a floor at λ_lo
itself would throw that weight away. One clock bin is the method's local grid spacing at λ_lo
(qgp.circuits.methods): 2π/(t·2^c) for ``exact``/``trotter``; for the walk, whose grid
α·cos(2πk/2^c) is not uniform, (2π/2^c)·√(α² − λ_lo²).

Two forms of the same operator: ``"gate"`` (uniformly controlled RY, gate-level oracles; what is
counted and exported) and ``"simulation"`` (fused controlled powers — see qgp.circuits.phase_estimation —,
the multiplexed RY as one multiplexer of its RY(θ_k) blocks, and the state preparation's uniformly
controlled RYs as multiplexers: only instructions Aer applies natively, so the simulation form is
never transpiled).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
from qiskit.circuit import QuantumCircuit, QuantumRegister
from qiskit.circuit.library import UCRYGate

from qgp.circuits.encoding import BLOCK, SYSTEM, BlockEncoding, MultiplexerGate, amplitude_encoding, check_matrix
from qgp.circuits.methods import BUDGET_REFERENCE, get_method
from qgp.circuits.phase_estimation import (
    CLOCK,
    Form,
    PhaseOracle,
    append_inverse_phase_estimation,
    append_phase_estimation,
    append_unchecked,
)
from qgp.errors import QgpError
from qgp.settings import CircuitSettings, Rotation, choices

__all__ = [
    "check_inversion_inputs",
    "check_bounds",
    "FLAG",
    "InversionCircuit",
    "build_inversion",
    "ClockModel",
    "clock_model",
    "budget_reference_model",
    "filter_floor",
    "rotation_constants",
    "rotation_angles",
    "flag_rotation_circuit",
    "append_flag_rotation",
    "eigenvalue_filter",
    "postselected_system_amplitudes",
    "postselection",
    "flag_probability",
    "statevector_array",
]

FLAG = "flag"

# λ̃ at or below this fraction of the clock's largest |λ̃| counts as ≤ 0: the walk's middle bin
# decodes to α·cos(π/2) ≈ 6e-17·α, not 0.
_ZERO_RTOL = 1e-12


@dataclass(frozen=True)
class InversionCircuit:
    """An inversion circuit and the constants that turn its probabilities back into numbers.

    ``scale`` is C (smallest admitted λ̃). ``clock_eigenvalues[k]`` is λ̃ decoded from clock value k;
    ``admitted[k]`` whether it is rotated; ``flag_amplitudes[k]`` = g(λ̃_k) (0 if filtered).
    ``effective_condition_number`` is the spread phase estimation must resolve (the method's:
    α/λ_lo for the walk, whose clock covers [−α, α], λ_hi/λ_lo for ``exact``/``trotter``). ``n_oracle_calls``
    counts controlled applications of e^{iAt}, of one product-formula sequence for e^{iAt}, or
    of W, including the uncompute; ``n_pauli_terms`` the Pauli strings the oracle is built from
    (0 for ``exact`` and the dilation walk). ``oracle`` is the phase oracle the circuit was built
    with and ``rotation_start`` the index in ``circuit.data`` where the flag rotation begins (what
    comes before it is state preparation and phase estimation), ``prefix_phase`` the circuit's
    global phase at that point.
    """

    circuit: QuantumCircuit
    rotation: Rotation
    scale: float
    alpha: float | None
    evolution_time: float | None
    clock_eigenvalues: np.ndarray
    admitted: np.ndarray
    flag_amplitudes: np.ndarray
    floor: float
    n_filtered: int
    effective_condition_number: float
    settings: CircuitSettings
    form: Form
    uncomputed: bool
    bounds: tuple[float, float]
    n_system_qubits: int
    n_block_qubits: int
    n_oracle_calls: int
    block_encoding: BlockEncoding | None = None
    n_pauli_terms: int = 0
    oracle: PhaseOracle | None = field(default=None, repr=False, compare=False)
    rotation_start: int | None = None
    prefix_phase: float = 0.0
    #: QSVT (``settings.method = "qsvt"``): the polynomial the circuit applies to A/α
    #: (qgp.circuits.polynomials) and the phase factors' measured residual; None for phase estimation.
    polynomial: object | None = field(default=None, repr=False, compare=False)
    phase_residual: float | None = None
    #: QSVT: the W-convention phase factors of the circuit (qgp.circuits.qsp), shape (d + 1,).
    phases: np.ndarray | None = field(default=None, repr=False, compare=False)

    @property
    def clock_qubits(self) -> int:
        return self.settings.clock_qubits


def check_inversion_inputs(A, settings: CircuitSettings, rotation, bounds, form) -> tuple[np.ndarray, float, float]:
    """Check A, the rotation, the form, the settings (by their method) and the bounds.

    Returns
    -------
    (a, λ_lo, λ_hi) : (ndarray of shape (2^m, 2^m), float, float)
        The checked symmetric matrix and the bounds as floats.
    """
    a = check_matrix(A)
    if rotation not in choices(Rotation):
        raise QgpError(f"unknown rotation {rotation!r}; choose one of {choices(Rotation)}")
    if form not in ("gate", "simulation"):
        raise QgpError(f"form must be 'gate' or 'simulation', got {form!r}")
    c = settings.clock_qubits
    if not isinstance(c, (int, np.integer)) or c < 1:
        raise QgpError(f"[circuit] clock_qubits must be an integer ≥ 1, got {c!r}")
    get_method(settings.evolution).check(settings)
    lo, hi = check_bounds(bounds)
    ff = settings.filter_floor
    if ff is not None and not (np.isfinite(ff) and ff > 0):
        raise QgpError(f"[circuit] filter_floor must be a positive number, got {ff!r}")
    return a, lo, hi


def check_bounds(bounds) -> tuple[float, float]:
    """(λ_lo, λ_hi) as floats, or `QgpError` unless 0 < λ_lo ≤ λ_hi (every inversion method's check)."""
    try:
        lo, hi = (float(x) for x in bounds)
    except (TypeError, ValueError):
        raise QgpError(f"bounds must be a pair (λ_lo, λ_hi), got {bounds!r}") from None
    if not (np.isfinite(lo) and np.isfinite(hi) and 0 < lo <= hi):
        raise QgpError(
            f"eigenvalue bounds must satisfy 0 < λ_lo ≤ λ_hi, got ({lo!r}, {hi!r}); "
            "A must be positive definite (add noise variance σ²)"
        )
    return lo, hi


def filter_floor(oracle, lambda_lo: float, override: float | None = None) -> float:
    """max(λ_lo − one clock bin, λ_lo/2), or ``override`` when given (see module docstring).

    ``oracle``: anything with ``kind`` (the method's name), ``clock_qubits``, ``evolution_time``
    and ``alpha`` — a `PhaseOracle` or a `ClockModel`.
    """
    if override is not None:
        return float(override)
    bin_width = get_method(oracle.kind).bin_width(lambda_lo, oracle.clock_qubits, oracle.evolution_time, oracle.alpha)
    return max(lambda_lo - bin_width, lambda_lo / 2)


def rotation_constants(oracle, lambda_lo: float, floor_override: float | None, rotation: Rotation):
    """(λ̃ per clock value, floor, admitted, C, g per clock value) for ``oracle``'s clock grid.

    Needs only the oracle's decoding (method, clock qubits, t or α), not its gates: ``oracle`` is a
    `PhaseOracle` or a gate-free `ClockModel` (the error budget's reference model).

    Returns
    -------
    (ndarray (2^c,), float, bool ndarray (2^c,), float, ndarray (2^c,))
    """
    lam = get_method(oracle.kind).clock_eigenvalues(oracle.clock_qubits, oracle.evolution_time, oracle.alpha)
    floor = filter_floor(oracle, lambda_lo, floor_override)
    positive = lam > _ZERO_RTOL * float(np.max(np.abs(lam)))
    admitted = positive & (lam >= floor)
    if not np.any(admitted):
        raise QgpError(
            f"no clock value decodes to an eigenvalue at or above the filter floor {floor:.4g}; "
            "raise [circuit] clock_qubits or lower [circuit] filter_floor"
        )
    scale = float(np.min(lam[admitted]))
    ratio = np.zeros_like(lam)
    ratio[admitted] = scale / lam[admitted]
    amplitudes = ratio if rotation == "inverse" else np.sqrt(ratio)
    return lam, floor, admitted, scale, amplitudes


@dataclass(frozen=True)
class ClockModel:
    """The constants of an inversion circuit without the circuit: what `build_inversion` would
    report for ``settings`` (method ``kind``), ``rotation`` and the bounds — the clock grid, floor,
    admitted values, C and g. Enough for `qgp.readout.filter_model` (``settings``, ``rotation``,
    ``scale``, ``alpha``, ``evolution_time``, ``clock_eigenvalues``, ``admitted``)."""

    kind: str
    rotation: str
    scale: float
    alpha: float | None
    evolution_time: float | None
    clock_eigenvalues: np.ndarray
    admitted: np.ndarray
    flag_amplitudes: np.ndarray
    floor: float
    settings: CircuitSettings

    @property
    def clock_qubits(self) -> int:
        return self.settings.clock_qubits


def clock_model(settings: CircuitSettings, rotation: Rotation, bounds, alpha: float | None = None) -> ClockModel:
    """The constants of ``build_inversion(A, settings, rotation, bounds)`` from the clock grid alone.

    Parameters
    ----------
    settings : CircuitSettings
    rotation : "inverse" or "inverse_sqrt"
    bounds : (float, float)
        A-priori eigenvalue bounds (λ_lo, λ_hi); t is derived from λ_hi unless set.
    alpha : float, optional
        The block encoding's α for methods with one (`qgp.circuits.methods.method_alpha`).

    Returns
    -------
    ClockModel
        Raises `QgpError` when no clock value is admitted (as `build_inversion` does).
    """
    method = get_method(settings.evolution)
    t = method.evolution_time(settings, float(bounds[1]))
    grid = ClockModel(method.name, rotation, 0.0, alpha, t, np.empty(0), np.empty(0), np.empty(0), 0.0, settings)
    lam, floor, admitted, scale, amplitudes = rotation_constants(grid, float(bounds[0]), settings.filter_floor, rotation)
    return replace(grid, scale=scale, clock_eigenvalues=lam, admitted=admitted, flag_amplitudes=amplitudes, floor=float(floor))


def budget_reference_model(settings: CircuitSettings, rotation: Rotation, bounds) -> ClockModel:
    """`clock_model` of the error budget's reference method (`qgp.circuits.methods.BUDGET_REFERENCE`)
    with the other settings unchanged: no expm, no gates."""
    return clock_model(replace(settings, evolution=BUDGET_REFERENCE), rotation, bounds)


def rotation_angles(amplitudes: np.ndarray) -> np.ndarray:
    """RY angles θ_k = 2·arcsin(g_k), so RY(θ_k)|0⟩ has amplitude g_k on |1⟩."""
    return 2 * np.arcsin(np.clip(amplitudes, 0.0, 1.0))


def flag_rotation_circuit(angles: np.ndarray, form: Form = "gate") -> QuantumCircuit:
    """The uniformly controlled RY(θ_k) on ``flag`` over clock values k, on registers clock, flag.

    ``"gate"``: a `UCRYGate` (multiplexed RY). ``"simulation"``: qgp's `MultiplexerGate` of the
    blocks RY(θ_k) = [[cos θ_k/2, −sin θ_k/2], [sin θ_k/2, cos θ_k/2]] on the flag, controlled by
    the clock (Aer's native ``multiplexer``); the same operator. It replaced S†, H, a diagonal of
    RZ(θ_k) over clock ⊗ flag, H and S: its 2^(c+1) parameters made most of the build (a cold
    n = 16, c = 8 inference measured 0.8–1.0 ms faster with the multiplexer).
    """
    angles = np.asarray(angles, dtype=float)
    c = int(np.log2(angles.size))
    clock = QuantumRegister(c, CLOCK)
    flag = QuantumRegister(1, FLAG)
    qc = QuantumCircuit(clock, flag, name="flag-rotation")
    append_flag_rotation(qc, angles, form, clock, flag[0])
    return qc


def append_flag_rotation(qc: QuantumCircuit, angles: np.ndarray, form: Form, clock, flag) -> None:
    """`flag_rotation_circuit`'s instructions appended to ``qc`` on the given clock qubits and flag."""
    angles = np.asarray(angles, dtype=float)
    if form == "gate":
        qc.append(UCRYGate([float(x) for x in angles]), [flag, *clock])
        return
    # One RY(θ_k) block per clock value k (first control least significant, as the clock reads).
    cs, sn = np.cos(angles / 2), np.sin(angles / 2)
    blocks = np.stack((np.stack((cs, -sn), axis=1), np.stack((sn, cs), axis=1)), axis=1).astype(complex)
    append_unchecked(qc, MultiplexerGate(blocks, label="flag-rotation"), [flag, *clock])


def build_inversion(
    A,
    settings: CircuitSettings,
    rotation: Rotation,
    bounds: tuple[float, float],
    *,
    prepare: np.ndarray | None = None,
    uncompute: bool | None = None,
    form: Form = "gate",
    oracle: PhaseOracle | None = None,
    prefix: InversionCircuit | None = None,
) -> InversionCircuit:
    """Build the inversion circuit for A with the a-priori eigenvalue bounds (λ_lo, λ_hi).

    A is never eigensolved here: t, the floor and C come from the bounds and the clock grid
    (the dilation encoding diagonalises A only to build √(I − A²/α²)). ``prepare`` prepends the
    amplitude encoding of that vector on ``system``. ``uncompute`` defaults to True for
    ``inverse`` and False for ``inverse_sqrt`` (whose answer, P(flag = 1), needs no uncompute).
    ``oracle`` reuses a phase oracle already built for the same A, settings, bounds and form (the
    ``inverse`` and ``inverse_sqrt`` circuits share one). ``prefix``: an inversion built for the
    same A, settings, bounds and form; its oracle and its instructions before the rotation (the
    phase estimation, and its prepared vector if it has one) are reused instead of built again, so
    the two circuits share that prefix by construction (``prepare`` must then be None).
    ``settings.method = "qsvt"`` builds the QSVT circuit instead (qgp.circuits.qsvt_inversion; the
    same read-out).
    """
    if settings.method != "phase_estimation":
        builder = _other_builders().get(settings.method)
        if builder is None:
            raise QgpError(f"unknown [circuit] method {settings.method!r}; choose 'phase_estimation' or one of {tuple(_other_builders())}")
        return builder(A, settings, rotation, bounds, prepare=prepare, uncompute=uncompute, form=form, oracle=oracle, prefix=prefix)
    a, lo, hi = check_inversion_inputs(A, settings, rotation, bounds, form)
    if prefix is not None:
        if prepare is not None:
            raise QgpError("build_inversion: give either prepare or prefix (a prefix carries its own prepared vector)")
        if (prefix.settings, prefix.form, prefix.bounds) != (settings, form, (lo, hi)) or prefix.rotation_start is None:
            raise QgpError("build_inversion: the prefix was built for other settings, form or bounds; build without it")
        oracle = oracle or prefix.oracle
    m = a.shape[0].bit_length() - 1
    if uncompute is None:
        uncompute = rotation == "inverse"
    encode = None
    if prepare is not None:
        encode = amplitude_encoding(prepare, native=form == "simulation")
        if encode.num_qubits != m:
            raise QgpError(
                f"the vector to prepare has {2**encode.num_qubits} entries but A is {2**m}×{2**m}; "
                "pad it the same way as A"
            )
    method = get_method(settings.evolution)
    if oracle is None:
        be = method.block_encoding(a, settings)
        oracle = method.oracle(a, settings, hi, form, be)
    elif (oracle.kind, oracle.clock_qubits, oracle.form) != (settings.evolution, settings.clock_qubits, form):
        raise QgpError(
            f"the oracle given ({oracle.kind}, {oracle.clock_qubits} clock qubits, {oracle.form} form) does not "
            f"match the settings ({settings.evolution}, {settings.clock_qubits}, {form})"
        )
    else:
        be = oracle.block_encoding

    lam, floor, admitted, scale, amplitudes = rotation_constants(oracle, lo, settings.filter_floor, rotation)

    c = settings.clock_qubits
    system = QuantumRegister(m, SYSTEM)
    clock = QuantumRegister(c, CLOCK)
    flag = QuantumRegister(1, FLAG)
    regs = [system, clock, flag]
    block = []
    if oracle.n_block_qubits:
        block = QuantumRegister(oracle.n_block_qubits, BLOCK)
        regs.append(block)
    if prefix is not None:
        # The prefix's registers and instructions as they are (immutable; shared as compose's
        # copy=False shares operations): the inverse_sqrt build at n = 16, c = 8 measured
        # 0.72–0.84 ms building its phase estimation again, 0.33–0.38 ms with the prefix.
        qc = QuantumCircuit(*prefix.circuit.qregs, name=f"inversion-{rotation}", global_phase=prefix.prefix_phase)
        named = {r.name: r for r in qc.qregs}
        system, clock, flag, block = named[SYSTEM], named[CLOCK], named[FLAG], named.get(BLOCK, [])
        for inst in prefix.circuit.data[: prefix.rotation_start]:
            qc._append(inst)
    else:
        qc = QuantumCircuit(*regs, name=f"inversion-{rotation}")
        # copy=False: the pieces are fresh, and deep-copying nested controlled gates dominated the
        # build time of large LCU walks.
        if encode is not None:
            qc.compose(encode, qubits=system[:], inplace=True, copy=False)
        append_phase_estimation(qc, oracle, system, clock, block)
    rotation_start, prefix_phase = len(qc.data), float(qc.global_phase)
    append_flag_rotation(qc, rotation_angles(amplitudes), form, clock, flag[0])
    if uncompute:
        append_inverse_phase_estimation(qc, oracle, system, clock, block)

    kappa = method.effective_condition_number(lo, hi, oracle.alpha)
    return InversionCircuit(
        circuit=qc,
        rotation=rotation,
        scale=scale,
        alpha=oracle.alpha,
        evolution_time=oracle.evolution_time,
        clock_eigenvalues=lam,
        admitted=admitted,
        flag_amplitudes=amplitudes,
        floor=float(floor),
        n_filtered=int(np.count_nonzero(~admitted)),
        effective_condition_number=float(kappa),
        settings=settings,
        form=form,
        uncomputed=bool(uncompute),
        bounds=(lo, hi),
        n_system_qubits=m,
        n_block_qubits=oracle.n_block_qubits,
        n_oracle_calls=oracle.n_calls * (2 if uncompute else 1),
        block_encoding=be,
        n_pauli_terms=oracle.n_pauli_terms,
        oracle=oracle,
        rotation_start=rotation_start,
        prefix_phase=prefix_phase,
    )


def _other_builders() -> dict:
    """``[circuit] method`` → builder for the methods other than phase estimation (imported on use:
    they import this module)."""
    from qgp.circuits.qsvt_inversion import build_qsvt_inversion

    return {"qsvt": build_qsvt_inversion}


def eigenvalue_filter(inv: InversionCircuit) -> np.ndarray:
    """g(λ̃_k) for every clock value k: the flag = 1 amplitude the rotation writes (0 if filtered)."""
    return inv.flag_amplitudes.copy()


def statevector_array(statevector, inv: InversionCircuit) -> np.ndarray:
    """The statevector as an array indexed [block, flag, clock, system] (see module docstring)."""
    data = np.asarray(getattr(statevector, "data", statevector)).reshape(-1)
    m, c, b = inv.n_system_qubits, inv.clock_qubits, inv.n_block_qubits
    if data.size != 2 ** (m + c + 1 + b):
        raise QgpError(
            f"statevector has {data.size} entries; this circuit has {m + c + 1 + b} qubits "
            f"(2^{m + c + 1 + b} entries)"
        )
    return data.reshape(2**b, 2, 2**c, 2**m)


def postselected_system_amplitudes(statevector, inv: InversionCircuit) -> np.ndarray:
    """Amplitudes of ``system`` on flag = 1, clock = 0, block = 0 (unnormalised).

    For ``inverse`` and normalised input b this is ≈ C·A⁻¹b; its squared norm is the success
    probability.
    """
    if not inv.uncomputed:
        raise QgpError(
            "phase estimation was not uncomputed, so clock = 0 does not select the answer; "
            "build with uncompute=True or read flag_probability instead"
        )
    return statevector_array(statevector, inv)[0, 1, 0, :].copy()


def postselection(inv: InversionCircuit) -> dict[int, int]:
    """Qubit → value of the post-selection flag = 1, clock = 0, block = 0 (qubit order system,
    clock, flag, block): projecting a statevector on it leaves exactly
    `postselected_system_amplitudes` (``qgp.readout.simulate.run_statevectors(project=…)``)."""
    if not inv.uncomputed:
        raise QgpError("phase estimation was not uncomputed, so clock = 0 does not select the answer")
    m, c, b = inv.n_system_qubits, inv.clock_qubits, inv.n_block_qubits
    out = {m + j: 0 for j in range(c)}
    out[m + c] = 1
    out.update({m + c + 1 + j: 0 for j in range(b)})
    return out


def flag_probability(statevector, inv: InversionCircuit) -> float:
    """P(flag = 1), summed over every other register."""
    arr = statevector_array(statevector, inv)
    return float(np.sum(np.abs(arr[:, 1, :, :]) ** 2))
