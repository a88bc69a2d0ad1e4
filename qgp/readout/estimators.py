"""Estimators of the GP predictive mean and variance from the inversion circuits.

Mean, by a Hadamard test on a ``probe`` qubit (probe in |+⟩; probe = 0 prepares ŷ = y/‖y‖ and runs
the ``inverse`` inversion, probe = 1 prepares k̂ = k*/‖k*‖ and sets the flag; H on the probe). With
Π the projector on flag = 1, clock = 0, block = 0 and v = Π·(inversion of ŷ) ≈ C·Ã⁻¹ŷ:

    P₀ = ¼‖v + k̂‖²,  P₁ = ¼‖v − k̂‖²,  P₀ − P₁ = Re⟨k̂|v⟩,  μ̃ = ‖y‖‖k*‖(P₀ − P₁)/C.

Only what differs between the branches is controlled by the probe: the state preparation and the
rotation (phase estimation followed by its inverse is the identity on probe = 1).

Variance, through the ``inverse_sqrt`` circuit on k̂: P(flag = 1) = C′·k̂ᵀÃ⁻¹k̂, so
σ̃*² = k(x*, x*) − ‖k*‖²P/C′ (latent). The Hadamard-test alternative uses k̂ on both sides:
k*ᵀÃ⁻¹k* = ‖k*‖²·Re⟨k̂|C·Ã⁻¹|k̂⟩/C.

The amortised strategy uses that the circuits are linear in their input: one simulation with a
``reference`` register maximally entangled with ``system`` (Choi–Jamiołkowski) gives the whole
post-selected operator, B = Π·U·(·) ≈ C·Ã⁻¹ for ``inverse`` and E (the flag = 1 slice over every
clock and block value) for ``inverse_sqrt``, with M = E†E and P(flag = 1) = k̂†Mk̂. Every test
point's outcome probabilities then follow by linear algebra — still the circuits' answer, with every
imperfection of phase estimation, product formula and filtering. When that run does not fit in
memory the reference register is split: each run covers a block of 2^r′ basis columns
(`_split_reference_operators`), with M read from the uncomputed circuit P₀U†(Σ_k g_k²Π_k)UP₀.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np
from qiskit import ClassicalRegister, QuantumCircuit, QuantumRegister
from qiskit.circuit import CircuitInstruction

from qgp.circuits.encoding import MultiplexerGate, amplitude_encoding, amplitude_encoding_matrix
from qgp.errors import QgpError
from qgp.circuits.inversion import (
    FLAG,
    InversionCircuit,
    flag_probability,
    flag_rotation_circuit,
    postselection,
    rotation_angles,
    statevector_array,
)
from qgp.readout.simulate import blas_threads, require_memory, run_counts, run_saved_statevectors, run_statevectors, statevector_bytes

__all__ = [
    "PROBE",
    "REFERENCE",
    "CircuitOperators",
    "reference_circuit",
    "operators_from_reference_run",
    "reference_run_bytes",
    "hadamard_probabilities",
    "variance_probabilities",
    "hadamard_test_circuit",
    "variance_circuit",
    "per_point_probabilities",
    "per_point_hadamard",
    "per_point_counts",
    "sample_hadamard",
    "sample_variance",
]

PROBE = "probe"
REFERENCE = "reference"


@dataclass(frozen=True)
class CircuitOperators:
    """What the circuits apply, read from one reference-register run each.

    ``B`` ≈ C·Ã⁻¹ (the ``inverse`` circuit's post-selected block, complex), ``M`` = E†E (the
    ``inverse_sqrt`` circuit's flag-probability matrix). Input and output index j is training row j.
    """

    B: np.ndarray
    M: np.ndarray
    scale_inverse: float
    scale_inverse_sqrt: float
    #: The simulator runs that produced B and M: dicts with ``what``, ``qubits``, ``runs`` and
    #: ``columns_per_run`` (the reference register's basis columns each run covered).
    simulation_runs: tuple = ()
    #: The statevector engine that produced them ("numpy", "aer"; qgp.readout.simulate).
    engine: str = "none"


def reference_circuit(inv: InversionCircuit, reference_qubits: int | None = None, block: int = 0) -> QuantumCircuit:
    """``inv`` preceded by a maximally entangled state Σ_j |j⟩_reference|j⟩_system/√N.

    With ``reference_qubits`` = r′ < m (a split reference register) the reference is entangled
    with the r′ least significant system qubits only and the other m − r′ system qubits are set
    to ``block``: the state Σ_{j<2^r′} |j⟩_reference|block·2^r′ + j⟩_system/√(2^r′), whose run
    gives input columns block·2^r′ … (block + 1)·2^r′ − 1 of the circuit's operators.
    """
    regs = list(inv.circuit.qregs)
    m = inv.n_system_qubits
    r = m if reference_qubits is None else int(reference_qubits)
    if not 0 <= r <= m or not 0 <= block < 2 ** (m - r):
        raise QgpError(f"a reference register of {r} qubits on {m} system qubits has no column block {block}")
    ref = QuantumRegister(r, REFERENCE)
    name = f"{inv.circuit.name}-reference" + ("" if r == m else f"-{block}")
    qc = QuantumCircuit(*regs, ref, name=name)
    system = regs[0]
    for i in range(r):
        qc.h(ref[i])
        qc.cx(ref[i], system[i])
    for i in range(m - r):
        if (block >> i) & 1:
            qc.x(system[r + i])
    # inv.circuit's instructions on its own registers, shared, never modified (large multiplexers);
    # appended as they are: compose's remapping of the identical qubits measured 0.3 ms here.
    qc.global_phase = inv.circuit.global_phase
    for inst in inv.circuit.data:
        qc._append(inst)
    return qc


def _reference_view(sv: np.ndarray, inv: InversionCircuit, flags: int = 2) -> np.ndarray:
    """A view of a reference-register statevector as [r, block, flag, clock, system] (no copy;
    amplitudes scaled by √(columns) still to apply); ``flags`` = 1 for one projected on a flag value."""
    m, c, b = inv.n_system_qubits, inv.clock_qubits, inv.n_block_qubits
    return np.asarray(sv).reshape(-1, 2**b, flags, 2**c, 2**m)


def _postselected_columns(sv: np.ndarray, inv: InversionCircuit) -> np.ndarray:
    """[system output, input column] on flag = 1, clock = 0, block = 0 of a reference run: the
    columns of B (a copy; the statevector can be freed)."""
    view = _reference_view(sv, inv)
    return (view[:, 0, 1, 0, :] * np.sqrt(view.shape[0])).T


# The Gram matrix of the snapshot's rows is formed in chunks of whole (block, clock) slices of at
# most this many bytes (and of their conjugate): a copy of the whole flag = 0 half of the
# statevector would add half a statevector to the run's memory. Below it the chunk is everything,
# as one product.
_GRAM_CHUNK_BYTES = 1 << 26


def _gram_chunk_slices(system_qubits: int, clock_qubits: int, block_qubits: int) -> int:
    """(block, clock) slices of n×n amplitudes (16·n² bytes each) per Gram chunk."""
    return max(1, min(2 ** (block_qubits + clock_qubits), _GRAM_CHUNK_BYTES // (16 * 4**system_qubits)))


def reference_run_bytes(
    inversion_qubits: int, system_qubits: int, clock_qubits: int, block_qubits: int, reference_qubits: int, *, snapshot: bool
) -> int:
    """Memory of one reference-register run and the arrays read from it.

    The simulator holds the running state (16·2^q bytes, q = inversion + reference qubits; the
    final save is moved into the result, not copied) plus, with ``snapshot``, the state saved
    before the rotation (a copy: 2 statevectors; measured here 2.00 with a saved state, 1.01
    without). Beside them: B and M (16·n² bytes each, n = 2^system_qubits) and, with the
    snapshot, the Gram chunks (rows and their conjugate, `_GRAM_CHUNK_BYTES` at most each) and
    one n×n product; without it, the 2^reference_qubits columns read from the run. Not counted:
    Aer's copy of the circuit's matrices and its own start-up, a fixed ~17 MiB measured for
    n = 64, c = 8 (peak resident memory 2.0 statevectors + 17 MiB with the snapshot at 21–23
    qubits, 1.0 + 17 MiB per split run at 21–22 qubits; 5.1 statevectors before the arrays read
    from the run became views and chunks).
    """
    q = inversion_qubits + reference_qubits
    n2 = 16 * 4**system_qubits
    operators = 2 * n2
    if snapshot:
        chunk = _gram_chunk_slices(system_qubits, clock_qubits, block_qubits) * n2
        return 2 * statevector_bytes(q) + operators + 2 * chunk + n2
    return statevector_bytes(q) + operators + 16 * 2**system_qubits * 2**reference_qubits


def _shares_prefix(inverse: InversionCircuit, inverse_sqrt: InversionCircuit) -> bool:
    """Whether ``inverse_sqrt`` is ``inverse``'s phase estimation followed by its own rotation on a
    fresh flag: same oracle object, same instructions before the rotation, no uncompute."""
    rs = inverse.rotation_start
    if (
        inverse.oracle is None
        or inverse.oracle is not inverse_sqrt.oracle
        or rs is None
        or rs != inverse_sqrt.rotation_start
        or inverse.rotation != "inverse"
        or inverse_sqrt.rotation != "inverse_sqrt"
        or inverse_sqrt.uncomputed
        or len(inverse_sqrt.circuit.data) <= rs
    ):
        return False
    a, b = inverse.circuit.data, inverse_sqrt.circuit.data
    return all(
        x.operation.name == y.operation.name and x.qubits == y.qubits for x, y in zip(a[:rs], b[:rs])
    )


_PHASE_ESTIMATED = "phase_estimated"
_FINAL = "final"


def _reference_with_snapshot(inv: InversionCircuit) -> QuantumCircuit:
    """`reference_circuit` of ``inv`` that also saves the state just before the flag rotation."""
    from qiskit_aer.library import SaveStatevector

    qc = reference_circuit(inv)
    start = len(qc.data) - len(inv.circuit.data)  # the reference's Hadamards and CNOTs come first
    # The save goes in at the rotation's index (inserting beats appending ~100 instructions one by one).
    qc.data.insert(
        start + inv.rotation_start,
        CircuitInstruction(SaveStatevector(qc.num_qubits, label=_PHASE_ESTIMATED), tuple(qc.qubits)),
    )
    qc.append(SaveStatevector(qc.num_qubits, label=_FINAL), qc.qubits)
    return qc


def operators_from_reference_run(
    inverse: InversionCircuit,
    inverse_sqrt: InversionCircuit,
    *,
    cap: int | None = None,
    timings: dict | None = None,
    share_prefix: bool = True,
    reference_qubits: int | None = None,
    progress: Callable[[str], None] | None = None,
) -> CircuitOperators:
    """B and M from one simulator job (``timings``: see `qgp.readout.simulate.run_statevectors`).

    When the two circuits share their phase estimation (`_shares_prefix`; infer builds them so)
    that prefix is simulated once: the run of ``inverse`` saves the state ψ just before its
    rotation, and ``inverse_sqrt``'s rotation RY(θ_k) on the fresh flag puts amplitude
    sin(θ_k/2)·ψ on flag = 1 — its E read from ψ without simulating the second circuit. With
    ``share_prefix=False`` (or circuits that do not share) both reference circuits run, as two
    experiments of one job; the two give the same numbers (tests/readout/test_speed_paths.py).

    ``reference_qubits`` = r′ (0 ≤ r′ ≤ m) splits the reference register instead: 2^(m − r′) runs
    of 2^r′ input columns each (`_split_reference_operators`), one statevector at a time and no
    saved state — for when the one-run simulation does not fit in memory; the same numbers to
    round-off (tests/reports/test_inspection.py).
    """
    if reference_qubits is not None:
        return _split_reference_operators(
            inverse, inverse_sqrt, int(reference_qubits), cap=cap, timings=timings, progress=progress
        )
    m, c, b = inverse.n_system_qubits, inverse.clock_qubits, inverse.n_block_qubits
    if share_prefix and _shares_prefix(inverse, inverse_sqrt):
        qc = _reference_with_snapshot(inverse)
        n = qc.num_qubits
        need = reference_run_bytes(inverse.circuit.num_qubits, m, c, b, m, snapshot=True)
        require_memory(need, f"the reference-register run on {n} qubits (a saved state and the final one)", cap)
        # The final state is read only on flag = 1, clock = 0, block = 0: projected, it is B's
        # 2^m × 2^m amplitudes [reference r, system s] (never the whole final state).
        # The flag is still 0 in the saved state: only its flag = 0 half, ψ, is copied out.
        sv_pre, post = run_saved_statevectors(
            qc,
            [_PHASE_ESTIMATED, _FINAL],
            cap=cap,
            timings=timings,
            project=postselection(inverse),
            saved_project={m + c: 0},
        )
        n_in = 2**m
        B = (np.asarray(post).reshape(n_in, n_in) * np.sqrt(n_in)).T.copy()
        g = np.sin(rotation_angles(inverse_sqrt.flag_amplitudes) / 2)
        M = _gram_of_slices(sv_pre, inverse, None, g, own=True)
        del sv_pre
        runs = ({"what": ONE_RUN, "qubits": n, "runs": 1, "columns_per_run": 2**m},)
        return CircuitOperators(
            B=B, M=M, scale_inverse=inverse.scale, scale_inverse_sqrt=inverse_sqrt.scale, simulation_runs=runs
        )
    circuits = [reference_circuit(inverse), reference_circuit(inverse_sqrt)]
    sv_inv, sv_sqrt = run_statevectors(circuits, cap=cap, timings=timings)  # one job: both states kept
    B = _postselected_columns(sv_inv, inverse)  # B[s, r]: system output s for input r
    del sv_inv
    # E[(block, clock, system), r]: input r's amplitude on (block, flag = 1, clock, system); M = E†E.
    M = _gram_of_slices(sv_sqrt, inverse_sqrt, 1, None)
    runs = tuple(
        {"what": f"{what} with a reference register", "qubits": qc.num_qubits, "runs": 1, "columns_per_run": 2**m}
        for what, qc in (("inversion (inverse)", circuits[0]), ("inversion (inverse_sqrt)", circuits[1]))
    )
    return CircuitOperators(
        B=B, M=M, scale_inverse=inverse.scale, scale_inverse_sqrt=inverse_sqrt.scale, simulation_runs=runs
    )


#: What each kind of reference-register run is (the ``what`` of `CircuitOperators.simulation_runs`
#: and of the simulation plan in qgp.readout.plan).
ONE_RUN = "inversion with a reference register: B and M in one run (state saved before the rotation)"
SPLIT_RUN = "inversion with a split reference register: columns of B and M per run"
SPLIT_RUN_B = "inversion with a split reference register: columns of B per run"
SPLIT_GRAM_RUN = "uncomputed inverse_sqrt circuit with rotation g², split reference register: columns of M per run"


def _gram_of_slices(
    sv: np.ndarray, inv: InversionCircuit, flag: int | None, g: np.ndarray | None, *, own: bool = False
) -> np.ndarray:
    """Σ over (block, clock) of conj(R)·Rᵀ, R[r, s] = √N·amplitude[r, block, flag, clock, s]·g_clock:
    M = E†E from a reference run, in chunks of whole (block, clock) slices (`_GRAM_CHUNK_BYTES`)
    so that no copy of half the statevector is made. When every slice fits in one chunk this is
    the single product of the unchunked rows. ``flag`` None: ``sv`` holds that flag value's
    amplitudes only (projected on it). ``own``: ``sv`` is the caller's to overwrite (a saved state
    about to be freed): the rows are weighted in place instead of in a copy."""
    view = _reference_view(sv, inv, flags=1 if flag is None else 2)
    flag = flag or 0
    n_in, nb, _, nc, _ = view.shape
    root = np.sqrt(n_in)
    slices = _gram_chunk_slices(inv.n_system_qubits, inv.clock_qubits, inv.n_block_qubits)

    def rows(b0, b1, k0, k1):
        w = root if g is None else root * np.asarray(g)[None, None, k0:k1, None]
        part = view[:, b0:b1, flag, k0:k1, :]
        if own and part.flags.c_contiguous:
            part *= w
            return part.reshape(n_in, -1)
        return (part * w).reshape(n_in, -1)

    if slices >= nb * nc:
        return _gram(rows(0, nb, 0, nc))
    M = np.zeros((n_in, n_in), dtype=complex)
    if slices >= nc:
        step = slices // nc
        for b0 in range(0, nb, step):
            M += _gram(rows(b0, min(nb, b0 + step), 0, nc))
    else:
        for b0 in range(nb):
            for k0 in range(0, nc, slices):
                M += _gram(rows(b0, b0 + 1, k0, min(nc, k0 + slices)))
    return M


def _same_gram_operator(inverse: InversionCircuit, inverse_sqrt: InversionCircuit) -> bool:
    """Whether ``inverse``'s post-selected block is ``inverse_sqrt``'s M.

    M = E†E = P₀·U†(Σ_k g_k² Π_k)U·P₀ (U the phase estimation, Π_k the projector on clock value
    k, g the ``inverse_sqrt`` amplitudes: its rotation acts on a fresh flag, so
    ⟨Ex|Ey⟩ = Σ_k g_k²⟨Ux|Π_k|Uy⟩), and ``inverse``'s block is P₀·U†(Σ_k f_k Π_k)U·P₀. They are
    one operator when both circuits share U and f = g² — as infer builds them: f = C/λ̃ and
    g = √(C/λ̃) with one C and one admitted set.
    """
    return _shares_prefix(inverse, inverse_sqrt) and bool(
        np.max(np.abs(inverse_sqrt.flag_amplitudes**2 - inverse.flag_amplitudes)) <= 1e-14
    )


def _gram_inversion(inverse_sqrt: InversionCircuit) -> InversionCircuit:
    """The uncomputed circuit whose post-selected block is ``inverse_sqrt``'s M = E†E: its phase
    estimation, the rotation with amplitudes g², and the inverse phase estimation (see
    `_same_gram_operator`)."""
    from qgp.circuits.phase_estimation import inverse_phase_estimation_circuit, phase_estimation_circuit

    oracle = inverse_sqrt.oracle
    if oracle is None:
        raise QgpError("splitting the reference register needs the phase oracle the inverse_sqrt circuit was built with")
    regs = list(inverse_sqrt.circuit.qregs)
    system, clock, flag = regs[0], regs[1], regs[2]
    block = list(regs[3]) if len(regs) > 3 else []
    g2 = inverse_sqrt.flag_amplitudes**2
    qc = QuantumCircuit(*regs, name=f"{inverse_sqrt.circuit.name}-gram")
    body = [*system, *clock, *block]
    qc.compose(phase_estimation_circuit(oracle), qubits=body, inplace=True, copy=False)
    rotation = flag_rotation_circuit(rotation_angles(g2), inverse_sqrt.form)
    qc.compose(rotation, qubits=[*clock, flag[0]], inplace=True, copy=False)
    qc.compose(inverse_phase_estimation_circuit(oracle), qubits=body, inplace=True, copy=False)
    return replace(inverse_sqrt, circuit=qc, flag_amplitudes=g2, uncomputed=True)


def _split_reference_operators(
    inverse: InversionCircuit,
    inverse_sqrt: InversionCircuit,
    reference_qubits: int,
    *,
    cap: int | None,
    timings: dict | None,
    progress: Callable[[str], None] | None,
) -> CircuitOperators:
    """B and M from a reference register of r′ = ``reference_qubits`` qubits: run v prepares
    Σ_{j<2^r′}|j⟩_reference|v·2^r′ + j⟩_system/√(2^r′) (`reference_circuit`) and gives input
    columns v·2^r′ … (v + 1)·2^r′ − 1 of B: the same linear map, a block of basis columns at a time.

    M's columns cannot come from a state saved per block (M = E†E pairs the columns of every
    block), so they come from the uncomputed circuit P₀·U†(Σ_k g_k² Π_k)U·P₀ (`_gram_inversion`),
    which is ``inverse`` itself for the pair infer builds (`_same_gram_operator`): then each run
    gives columns of both. One statevector per run, freed before the next.
    """
    m, c, b = inverse.n_system_qubits, inverse.clock_qubits, inverse.n_block_qubits
    r = reference_qubits
    if not 0 <= r <= m:
        raise QgpError(f"the reference register has {m} qubits; it cannot be split into runs of {r}")
    if not inverse.uncomputed:
        raise QgpError("splitting the reference register needs the inverse circuit with its uncompute")
    n_runs, width = 2 ** (m - r), 2**r
    q = inverse.circuit.num_qubits + r
    need = reference_run_bytes(inverse.circuit.num_qubits, m, c, b, r, snapshot=False)
    require_memory(need, f"each run of the split reference register ({q} qubits)", cap)
    same = _same_gram_operator(inverse, inverse_sqrt)
    targets = [inverse] if same else [inverse, _gram_inversion(inverse_sqrt)]
    if progress is not None:
        if n_runs > 1:
            progress(f"reference register split into {n_runs} runs of 2^{r} columns")
        else:
            progress(f"reference register in one run of 2^{r} columns, without the state saved before the rotation")
    operators = []
    for inv in targets:
        out = np.empty((2**m, 2**m), dtype=complex)
        for v in range(n_runs):
            [cols] = run_statevectors(
                [reference_circuit(inv, r, v)], cap=cap, timings=timings, reduce=lambda _, sv, inv=inv: _postselected_columns(sv, inv)
            )
            out[:, v * width : (v + 1) * width] = cols
        operators.append(out)
    B = operators[0]
    M = B.copy() if same else operators[1]
    if same:
        runs = ({"what": SPLIT_RUN, "qubits": q, "runs": n_runs, "columns_per_run": width},)
    else:
        runs = (
            {"what": SPLIT_RUN_B, "qubits": q, "runs": n_runs, "columns_per_run": width},
            {"what": SPLIT_GRAM_RUN, "qubits": q, "runs": n_runs, "columns_per_run": width},
        )
    return CircuitOperators(
        B=B, M=M, scale_inverse=inverse.scale, scale_inverse_sqrt=inverse_sqrt.scale, simulation_runs=runs
    )


# Below this many multiply-adds the Gram matrix is formed by BLAS on one thread: right after an Aer
# job a multi-threaded OpenBLAS product of a 16 × 4096 matrix took 0.2–0.3 s here (waking its
# threads on a busy 2-core machine); on one thread it takes ~0.3 ms, einsum's own loops ~1.4 ms.
_GRAM_ONE_THREAD_LIMIT = 1 << 24


def _gram(rows: np.ndarray) -> np.ndarray:
    """conj(rows) @ rowsᵀ, by BLAS zgemm with the conjugate transpose as its operation (no
    conjugated copy of the rows: 0.31 → 0.25 ms for 16 × 4096, measured)."""
    from scipy.linalg.blas import zgemm

    rows = np.ascontiguousarray(rows, dtype=complex)
    # rows.T is Fortran-ordered: BLAS reads it in place; op(a) = aᴴ = conj(rows), op(b) = rowsᵀ.
    if rows.shape[0] ** 2 * rows.shape[1] <= _GRAM_ONE_THREAD_LIMIT:
        with blas_threads(1):
            return zgemm(1.0, rows.T, rows.T, trans_a=2)
    return zgemm(1.0, rows.T, rows.T, trans_a=2)


def hadamard_probabilities(v: np.ndarray, khat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """P₀ = ¼‖v + k̂‖² and P₁ = ¼‖v − k̂‖² for each column of ``khat`` (real, unit norm)."""
    v = np.asarray(v)[:, None]
    p0 = 0.25 * np.sum(np.abs(v + khat) ** 2, axis=0)
    p1 = 0.25 * np.sum(np.abs(v - khat) ** 2, axis=0)
    return p0, p1


def variance_probabilities(M: np.ndarray, khat: np.ndarray) -> np.ndarray:
    """P(flag = 1) = k̂†Mk̂ for each column of ``khat``."""
    # M k̂ as one product, then the column-wise dot: a three-operand einsum loops in C over all
    # (i, j, t) without BLAS (0.2 ms at n = 16, 41 points, measured; this ~0.01 ms).
    return np.real(np.sum(khat.conj() * (M @ khat), axis=0))


class _HadamardTemplate:
    """The parts every Hadamard-test circuit of one inversion shares, built once.

    The phase-estimation body, its inverse and the probe-controlled rotation are composed into
    each point's circuit without copying (`QuantumCircuit.compose(copy=False)`); only the state
    preparations differ between points.
    """

    def __init__(self, qpe: QuantumCircuit, inv: InversionCircuit):
        m, c, b = inv.n_system_qubits, inv.settings.clock_qubits, inv.n_block_qubits
        self.regs = [QuantumRegister(m, "system"), QuantumRegister(c, "clock"), QuantumRegister(1, FLAG)]
        if b:
            self.regs.append(QuantumRegister(b, "block"))
        self.probe = QuantumRegister(1, PROBE)
        self.qpe = qpe
        self.qpe_dg = qpe.inverse()
        # The rotation on probe = 0 only: a multiplexed RY over (clock, probe) with zero angles on probe = 1.
        angles = np.concatenate((rotation_angles(inv.flag_amplitudes), np.zeros(2**c)))
        self.rotation = flag_rotation_circuit(angles, inv.form)

    def circuit(self, left: np.ndarray, right: np.ndarray, measure: bool = False) -> QuantumCircuit:
        regs, probe = self.regs, self.probe
        qc = QuantumCircuit(*regs, probe, name="hadamard-test")
        system, clock, flag = regs[0], regs[1], regs[2]
        block = list(regs[3]) if len(regs) > 3 else []
        qc.h(probe[0])
        # Prepare k̂_right on probe = 0 and k̂_left on probe = 1: one multiplexer over the probe.
        prep = MultiplexerGate([amplitude_encoding_matrix(right), amplitude_encoding_matrix(left)], label="prep")
        qc.append(prep, [*system, probe[0]], copy=False)
        body = [*system, *clock, *block]
        qc.compose(self.qpe, qubits=body, inplace=True, copy=False)
        qc.compose(self.rotation, qubits=[*clock, probe[0], flag[0]], inplace=True, copy=False)
        qc.cx(probe[0], flag[0])
        qc.compose(self.qpe_dg, qubits=body, inplace=True, copy=False)
        qc.h(probe[0])
        if measure:
            _measure(qc, [probe, flag, clock] + ([regs[3]] if len(regs) > 3 else []))
        return qc


class _QsvtHadamardTemplate:
    """The Hadamard test of a QSVT inversion: k̂_right on probe = 0 and k̂_left on probe = 1, the
    QSVT sequence on probe = 0 only (qgp.circuits.qsvt, ``probe=True``, in ``inv``'s form: probe = 1
    keeps its input with flag = 1), Hadamards on the probe. Same read-out as `_HadamardTemplate`."""

    def __init__(self, inv: InversionCircuit):
        from qgp.circuits.qsvt import qsvt_circuit

        self.body = qsvt_circuit(inv.block_encoding, inv.phases, inv.form, probe=True)
        self.regs = list(self.body.qregs)

    def circuit(self, left: np.ndarray, right: np.ndarray, measure: bool = False) -> QuantumCircuit:
        qc = QuantumCircuit(*self.regs, name="hadamard-test")
        system, probe = self.regs[0], self.regs[-1]
        qc.h(probe[0])
        prep = MultiplexerGate([amplitude_encoding_matrix(right), amplitude_encoding_matrix(left)], label="prep")
        qc.append(prep, [*system, probe[0]], copy=False)
        qc.compose(self.body, inplace=True, copy=False)
        qc.h(probe[0])
        if measure:
            _measure(qc, [probe, *self.regs[1:-1]])
        return qc


def _template(qpe: QuantumCircuit | None, inv: InversionCircuit):
    """The Hadamard-test template: phase estimation's from its body, QSVT's (``qpe`` None) from ``inv``."""
    return _HadamardTemplate(qpe, inv) if qpe is not None else _QsvtHadamardTemplate(inv)


def hadamard_test_circuit(
    qpe: QuantumCircuit, inv: InversionCircuit, left: np.ndarray, right: np.ndarray, *, measure: bool = False
) -> QuantumCircuit:
    """The Hadamard test of ⟨left|C·Ã⁻¹|right⟩ on a ``probe`` qubit (see module docstring).

    ``qpe`` is the phase-estimation body of ``inv`` (on system, clock, block); the probe is the
    last qubit. With ``measure`` the probe, flag, clock and block are measured into ``c_``
    registers of the same names.
    """
    return _template(qpe, inv).circuit(left, right, measure)


def variance_circuit(body: QuantumCircuit, khat: np.ndarray, *, measure: bool = False) -> QuantumCircuit:
    """State preparation of k̂ followed by the ``inverse_sqrt`` body (flag read alone)."""
    qc = QuantumCircuit(*body.qregs, name="variance")
    qc.compose(amplitude_encoding(khat, native=True), qubits=list(qc.qregs[0]), inplace=True, copy=False)
    qc.compose(body, inplace=True, copy=False)
    if measure:
        _measure(qc, [r for r in qc.qregs if r.name == FLAG])
    return qc


def _measure(qc: QuantumCircuit, regs) -> None:
    for r in regs:
        creg = ClassicalRegister(r.size, f"c_{r.name}")
        qc.add_register(creg)
        qc.measure(r, creg)


def per_point_probabilities(
    qpe: QuantumCircuit,
    inverse: InversionCircuit,
    sqrt_body: QuantumCircuit,
    sqrt_inv: InversionCircuit,
    yhat: np.ndarray,
    khat: np.ndarray,
    *,
    cap: int | None = None,
    timings: dict | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact (P₀, P₁, P_flag) from one full circuit per test point, in as few simulator jobs as
    the memory cap allows (each state is reduced to its probabilities as its job returns).

    The shared body is built once and every circuit is native to Aer, so nothing is transpiled.
    """
    n_test = khat.shape[1]
    template = _template(qpe, inverse)
    mean_circuits = [template.circuit(khat[:, j], yhat) for j in range(n_test)]
    var_circuits = [variance_circuit(sqrt_body, khat[:, j]) for j in range(n_test)]

    def reduce(i, sv):
        if i < n_test:
            return _hadamard_outcome(sv, inverse)
        return flag_probability(sv, sqrt_inv)

    out = run_statevectors(mean_circuits + var_circuits, cap=cap, timings=timings, reduce=reduce)
    p0 = np.array([o[0] for o in out[:n_test]])
    p1 = np.array([o[1] for o in out[:n_test]])
    pf = np.array(out[n_test:])
    return p0, p1, pf


def _hadamard_outcomes(states, inverse: InversionCircuit) -> tuple[np.ndarray, np.ndarray]:
    """(P₀, P₁) arrays from Hadamard-test statevectors (`_hadamard_outcome` of each)."""
    p = np.array([_hadamard_outcome(sv, inverse) for sv in states]).reshape(-1, 2)
    return p[:, 0], p[:, 1]


def _hadamard_outcome(sv, inverse: InversionCircuit) -> tuple[float, float]:
    """P(probe = b, Π) for b = 0, 1 from one Hadamard-test statevector (the probe is the top qubit)."""
    arr = np.asarray(sv).reshape(2, -1)
    return tuple(float(np.sum(np.abs(statevector_array(arr[b], inverse)[0, 1, 0, :]) ** 2)) for b in (0, 1))


def per_point_hadamard(
    qpe: QuantumCircuit,
    inverse: InversionCircuit,
    left: np.ndarray,
    right: np.ndarray,
    *,
    cap: int | None = None,
    timings: dict | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """(P₀, P₁) of the Hadamard test of ⟨left_j|C·Ã⁻¹|right_j⟩ for each column pair j."""
    template = _template(qpe, inverse)
    circuits = [template.circuit(left[:, j], right[:, j]) for j in range(left.shape[1])]
    out = run_statevectors(circuits, cap=cap, timings=timings, reduce=lambda _, sv: _hadamard_outcome(sv, inverse))
    return np.array([o[0] for o in out]), np.array([o[1] for o in out])


def per_point_counts(
    qpe: QuantumCircuit,
    inverse: InversionCircuit,
    sqrt_body: QuantumCircuit,
    yhat: np.ndarray,
    khat: np.ndarray,
    shots: int,
    seed: int,
    *,
    cap: int | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Counts (n₀Π, n₁Π, n_flag) from measured per-point circuits, sampled by the simulator."""
    n_test = khat.shape[1]
    template = _template(qpe, inverse)
    mean_circuits = [template.circuit(khat[:, j], yhat, measure=True) for j in range(n_test)]
    var_circuits = [variance_circuit(sqrt_body, khat[:, j], measure=True) for j in range(n_test)]
    counts = run_counts(mean_circuits + var_circuits, shots, seed, cap=cap)
    measured = [c.name[2:] for c in mean_circuits[0].cregs]  # "c_<register>", in order of measurement
    n0, n1, nf = np.zeros(n_test, int), np.zeros(n_test, int), np.zeros(n_test, int)
    for j in range(n_test):
        for key, cnt in counts[j].items():
            # Registers in the key: reverse order of measurement (probe, flag, then clock and/or block).
            values = dict(zip(measured, key.split()[::-1]))
            rest = [v for name, v in values.items() if name not in (PROBE, FLAG)]
            if values[FLAG] == "1" and all(int(v, 2) == 0 for v in rest):
                if values[PROBE] == "0":
                    n0[j] += cnt
                else:
                    n1[j] += cnt
        nf[j] = counts[n_test + j].get("1", 0)
    return n0, n1, nf


def sample_hadamard(p0: np.ndarray, p1: np.ndarray, shots: int, rng: np.random.Generator):
    """One multinomial draw per test point over (probe=0 ∧ Π, probe=1 ∧ Π, fail)."""
    fail = np.clip(1.0 - p0 - p1, 0.0, 1.0)
    probs = np.stack([p0, p1, fail], axis=1)
    probs = probs / probs.sum(axis=1, keepdims=True)
    draws = rng.multinomial(shots, probs)
    return draws[:, 0], draws[:, 1]


def sample_variance(pf: np.ndarray, shots: int, rng: np.random.Generator) -> np.ndarray:
    """One binomial draw per test point of the flag = 1 count."""
    return rng.binomial(shots, np.clip(pf, 0.0, 1.0))
