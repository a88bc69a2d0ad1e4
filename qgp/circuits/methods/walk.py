"""Qubitization walk phase oracle (Low & Chuang, Quantum 3, 163 (2019)).

V = W = R·U with U a Hermitian block encoding of A/α (qgp.circuits.methods.encodings) and
R = (2|0⟩⟨0|_block − I) ⊗ I_system. On the two-dimensional space of each eigenvector |0⟩|u⟩
(A u = λu) W is a rotation with eigenphases ±arccos(λ/α), so every clock value decodes as
λ̃_k = α·cos(2πk/2^c): k and 2^c − k give the same λ̃, covering both branches (a two's-complement
reading would drop one). R carries its exact sign: W is used controlled, where a global sign
becomes a relative phase.

Closed-form model: the two eigenphases ±arccos(λ/α)/2π each carry half the weight and, because
the grid is symmetric under k → 2^c − k, give the same sum, so φ(λ) = arccos(λ/α)/2π serves for
both (qgp.readout.filter_model). The grid is not uniform: its local spacing at λ_lo, which the
filter floor uses, is (2π/2^c)·√(α² − λ_lo²). The clock covers [−α, α], so the effective
condition number is α/λ_lo.

Simulation form: diag(I, W^{2^j}) from the dense W by squaring, when it fits in
``_MAX_FUSED_QUBITS`` qubits; above that, the encoding's native pieces (the LCU's), repeated.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from qiskit.circuit import Gate, QuantumCircuit, QuantumRegister
from qiskit.circuit.library import ZGate

from qgp.circuits.encoding import BLOCK, SYSTEM, BlockEncoding
from qgp.circuits.methods.base import InversionMethod
from qgp.circuits.methods.encodings import get_encoding
from qgp.circuits.phase_estimation import (
    Form,
    PhaseOracle,
    _check_clock,
    _check_form,
    _repeated,
    _squared_powers,
    _squares,
)
from qgp.errors import QgpError

__all__ = [
    "QubitizationWalk",
    "walk_clock_eigenvalues",
    "walk_phases",
    "walk_reflection_matrix",
    "walk_matrix",
    "controlled_walk",
    "walk_oracle",
]

# Largest controlled unitary (in qubits) the simulation form fuses into one dense matrix:
# 2^10 × 2^10 complex is 16 MB per gate (Aer and transpile copy it). Beyond it the LCU walk runs
# as native pieces (PREPARE, controlled SELECT, controlled reflection).
_MAX_FUSED_QUBITS = 10


def walk_clock_eigenvalues(clock_qubits: int, alpha: float) -> np.ndarray:
    """λ̃_k = α·cos(2πk/2^c) for every k (both ±arccos branches decode alike)."""
    n = 2**clock_qubits
    return alpha * np.cos(2 * np.pi * np.arange(n) / n)



def walk_phases(eigenvalues, alpha: float) -> np.ndarray:
    """φ(λ) = arccos(λ/α)/2π for each eigenvalue (any shape)."""
    lam = np.asarray(eigenvalues, dtype=float)
    return np.arccos(np.clip(lam / alpha, -1.0, 1.0)) / (2 * np.pi)


def walk_bin_width(lambda_lo: float, clock_qubits: int, alpha: float) -> float:
    """The grid's local spacing at λ_lo, (2π/2^c)·√(α² − λ_lo²)."""
    n = 2**clock_qubits
    return (2 * np.pi / n) * np.sqrt(max(alpha**2 - lambda_lo**2, 0.0))


def walk_reflection_matrix(be: BlockEncoding) -> np.ndarray:
    """Diagonal of R = (2|0⟩⟨0|_block − I) ⊗ I_system: +1 where block = 0, −1 elsewhere."""
    dim_s = 2**be.n_system_qubits
    diag = -np.ones(dim_s * 2**be.n_block_qubits)
    diag[:dim_s] = 1.0
    return diag


def walk_matrix(be: BlockEncoding) -> np.ndarray:
    """W = R·U as a dense matrix (index = system + 2^m · block)."""
    return walk_reflection_matrix(be)[:, None] * be.matrix()


def controlled_walk(be: BlockEncoding) -> Gate:
    """Gate on [system…, block…, control] applying W = R·U when control = 1 (gate level).

    Controlled U is the encoding's (`qgp.circuits.methods.encodings`): the dilation as one
    block-diagonal unitary diag(I, U); the LCU as PREPARE · controlled SELECT · PREPARE†. Controlled
    R: (2|0⟩⟨0| − I) is Z for one block qubit; for more it is Z on the control (−1 whenever on)
    times a phase −1 on control = 1, block = 0.
    """
    m, k = be.n_system_qubits, be.n_block_qubits
    system = QuantumRegister(m, SYSTEM)
    block = QuantumRegister(k, BLOCK)
    ctrl = QuantumRegister(1, "ctrl")
    qc = QuantumCircuit(system, block, ctrl, name=f"c-walk-{be.kind}")
    get_encoding(be.kind).append_controlled_u(qc, be, system, block, ctrl[0])
    if k == 1:
        qc.cz(ctrl[0], block[0])
    else:
        qc.z(ctrl[0])
        qc.append(ZGate().control(k, ctrl_state=0, annotated=False), [*block, ctrl[0]])
    return qc.to_gate()


def walk_oracle(be: BlockEncoding, clock_qubits: int, form: Form = "gate") -> PhaseOracle:
    """Controlled W^{2^j} for the qubitization walk W = R·U of block encoding ``be``.

    ``"gate"``: the gate-level controlled W repeated 2^j times. ``"simulation"``: diag(I, W^{2^j})
    from the dense W by squaring, when it fits in ``_MAX_FUSED_QUBITS`` qubits; above that, an LCU
    walk's controlled W from the encoding's native pieces (the LCU's), repeated.
    """
    _check_clock(clock_qubits)
    _check_form(form)
    n_target = be.n_system_qubits + be.n_block_qubits
    repeats = squares = pieces = None
    if form == "simulation" and n_target + 1 <= _MAX_FUSED_QUBITS:
        squares = _squares(walk_matrix(be), clock_qubits)
        powers = _squared_powers(squares, clock_qubits, "c-W")
    else:
        if form == "simulation":
            pieces = get_encoding(be.kind).native_pieces(be)
        cw = pieces.controlled_walk() if pieces is not None else controlled_walk(be)
        repeats = tuple((cw, 2**j) for j in range(clock_qubits))
        powers = tuple(_repeated(g, n, f"c-W^{n}") for g, n in repeats)
    return PhaseOracle(
        kind=QubitizationWalk.name,
        form=form,
        clock_qubits=clock_qubits,
        n_system_qubits=be.n_system_qubits,
        n_block_qubits=be.n_block_qubits,
        evolution_time=None,
        alpha=float(be.alpha),
        block_encoding=be,
        powers=powers,
        n_calls=2**clock_qubits - 1,
        n_pauli_terms=be.n_pauli_terms,
        repeats=repeats,
        power_matrices=squares,
        walk_pieces=pieces,
    )



@dataclass(frozen=True)
class QubitizationWalk(InversionMethod):
    """``evolution = "walk"``: the qubitization walk of the ``[circuit] encoding`` block encoding."""

    name = "walk"
    uses_block_encoding = True
    closed_form_model = True

    def check(self, settings) -> None:
        get_encoding(settings.encoding)

    def label(self, settings) -> str:
        return f"walk + {get_encoding(settings.encoding).label}"

    def description(self, settings) -> str:
        return f"{self.name} oracle ({settings.encoding} encoding)"

    def encoding(self, settings) -> str | None:
        return settings.encoding

    def alpha(self, A, settings, lambda_hi=None) -> float:
        return get_encoding(settings.encoding).alpha(A, lambda_hi)

    def clock_eigenvalues(self, clock_qubits, evolution_time, alpha):
        return walk_clock_eigenvalues(clock_qubits, alpha)

    def phase(self, eigenvalues, evolution_time, alpha):
        return walk_phases(eigenvalues, alpha)

    def bin_width(self, lambda_lo, clock_qubits, evolution_time, alpha):
        return walk_bin_width(lambda_lo, clock_qubits, alpha)

    def effective_condition_number(self, lambda_lo, lambda_hi, alpha):
        return alpha / lambda_lo

    def block_encoding(self, A, settings) -> BlockEncoding:
        return get_encoding(settings.encoding).build(A)

    def block_encoding_calls_per_oracle(self, evolution_time, alpha, power, precision):
        # W^p = (R·U)^p: one call of U per step, exactly (Low & Chuang, Quantum 3, 163 (2019)).
        return float(power)

    def fault_tolerant_model(self) -> str:
        return "qubitization walk: one block-encoding call per step of W (Low & Chuang 2019)"

    def oracle(self, A, settings, lambda_hi, form, block_encoding=None):
        if block_encoding is None:
            raise QgpError("the walk oracle needs a block encoding; set [circuit] encoding")
        return walk_oracle(block_encoding, settings.clock_qubits, form)

    def block_qubits_depend_on_terms(self, settings) -> bool:
        return get_encoding(settings.encoding).block_qubits_depend_on_terms()

    def block_qubits(self, settings, n_pauli_terms=None) -> int:
        return get_encoding(settings.encoding).block_qubits(n_pauli_terms)

    def needs_pauli_terms(self, settings) -> bool:
        return get_encoding(settings.encoding).needs_pauli_terms()

    def size_piece(self, m, settings, *, terms, n_pe, calls):
        return get_encoding(settings.encoding).size_piece(m, terms=terms, n_pe=n_pe, calls=calls)

    def oracle_call(self, settings) -> str:
        return f"controlled walk W = (2|0><0|_block - I)·U, U the {settings.encoding} block encoding of A/alpha"

    def synthesis_dependent(self, settings):
        return get_encoding(settings.encoding).synthesis_dependent()

    def composition_is_upper_bound(self, settings) -> bool:
        return get_encoding(settings.encoding).composition_is_upper_bound()

    def query_counts(self, a, settings, lambda_hi, n_pauli_terms):
        alpha, k, terms = get_encoding(settings.encoding).query_counts(a, n_pauli_terms)
        return alpha, k, None, terms
