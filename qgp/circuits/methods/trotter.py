"""Product-formula phase oracle: V = a Trotter–Suzuki approximation of e^{iAt}.

Over A's Pauli decomposition A = Σ_P c_P P, order 1 (Lie–Trotter) or 2 (symmetric Strang
splitting), ``trotter_steps`` steps per e^{iAt}; the power 2^j uses 2^j·trotter_steps steps. A
clock value decodes as for the exact oracle (λ̃_k = 2πk/(t·2^c)); the Trotter error is a separate,
measurable error source, so the closed-form filter model (which assumes e^{iAt}) is not exact here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from qiskit.circuit import Gate, QuantumCircuit, QuantumRegister
from qiskit.quantum_info import SparsePauliOp

from qgp.circuits.encoding import SYSTEM, pauli_decomposition
from qgp.circuits.methods.base import SizePiece
from qgp.circuits.methods.exact import ExactEvolution
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
    "TrotterEvolution",
    "product_formula_terms",
    "product_formula_matrix",
    "controlled_trotter_step",
    "trotter_oracle",
]


def product_formula_terms(
    op: SparsePauliOp, delta: float, order: int
) -> tuple[float, list[tuple[object, float]]]:
    """One step of e^{iAδ}: (identity phase, [(Pauli, θ), …]) meaning Π e^{iθP} in list order.

    Order 1: e^{iδc_1P_1} … e^{iδc_LP_L}. Order 2 (Strang): half steps forward then backward,
    the two middle halves merged. The identity term commutes with everything, so its phase
    e^{iδc_0} is exact and kept apart; once controlled it is a real relative phase.
    """
    if order not in (1, 2):
        raise QgpError(f"trotter_order must be 1 or 2, got {order!r}")
    phase = 0.0
    terms = []
    for pauli, c in zip(op.paulis, op.coeffs.real):
        if not pauli.x.any() and not pauli.z.any():
            phase += float(c) * delta
        else:
            terms.append((pauli, float(c)))
    if order == 1 or len(terms) <= 1:
        return phase, [(p, c * delta) for p, c in terms]
    half = [(p, c * delta / 2) for p, c in terms]
    middle = (terms[-1][0], terms[-1][1] * delta)
    return phase, half[:-1] + [middle] + half[-2::-1]


def _pauli_exponential_matrix(pauli, theta: float) -> np.ndarray:
    """e^{iθP} = cos θ·I + i sin θ·P (P² = I)."""
    p = pauli.to_matrix()
    return np.cos(theta) * np.eye(p.shape[0]) + 1j * np.sin(theta) * p


def _step_matrix(op: SparsePauliOp, delta: float, order: int) -> np.ndarray:
    phase, terms = product_formula_terms(op, delta, order)
    u = np.exp(1j * phase) * np.eye(2**op.num_qubits, dtype=complex)
    for pauli, theta in terms:  # later terms act after earlier ones
        u = _pauli_exponential_matrix(pauli, theta) @ u
    return u


def product_formula_matrix(A, time: float, steps: int, order: int) -> np.ndarray:
    """The product-formula approximation of e^{iA·time} with ``steps`` steps, as a matrix."""
    op = A if isinstance(A, SparsePauliOp) else pauli_decomposition(A)
    if steps < 1:
        raise QgpError(f"trotter_steps must be at least 1, got {steps}")
    return np.linalg.matrix_power(_step_matrix(op, time / steps, order), steps)


def _append_controlled_pauli_exponential(qc, control, system, pauli, theta: float) -> None:
    """Controlled e^{iθP}: rotate P to Z…Z, CX ladder onto one qubit, controlled RZ(−2θ), undo.

    Only the RZ needs the control: the basis change and ladder cancel when it is off.
    """
    support = [q for q in range(len(system)) if pauli.x[q] or pauli.z[q]]
    for q in support:
        if pauli.x[q] and pauli.z[q]:  # Y = S X S†, X = H Z H
            qc.sdg(system[q])
            qc.h(system[q])
        elif pauli.x[q]:
            qc.h(system[q])
    for a, b in zip(support[:-1], support[1:]):
        qc.cx(system[a], system[b])
    qc.crz(-2 * theta, control, system[support[-1]])  # e^{iθZ} = RZ(−2θ)
    for a, b in reversed(list(zip(support[:-1], support[1:]))):
        qc.cx(system[a], system[b])
    for q in support:
        if pauli.x[q] and pauli.z[q]:
            qc.h(system[q])
            qc.s(system[q])
        elif pauli.x[q]:
            qc.h(system[q])


def controlled_trotter_step(op: SparsePauliOp, delta: float, order: int) -> Gate:
    """Gate on [system…, control] applying one product-formula step of e^{iAδ} when control = 1."""
    m = op.num_qubits
    system = QuantumRegister(m, SYSTEM)
    ctrl = QuantumRegister(1, "ctrl")
    qc = QuantumCircuit(system, ctrl, name=f"c-trotter{order}")
    phase, terms = product_formula_terms(op, delta, order)
    if phase != 0.0:
        qc.p(phase, ctrl[0])
    for pauli, theta in terms:
        _append_controlled_pauli_exponential(qc, ctrl[0], system, pauli, theta)
    return qc.to_gate()



def trotter_oracle(
    A, clock_qubits: int, evolution_time: float, steps: int, order: int, form: Form = "gate"
) -> PhaseOracle:
    """Controlled product-formula powers: 2^j·steps steps of e^{iAt/steps} on clock qubit j.

    ``"gate"``: the controlled step as Pauli rotations, repeated. ``"simulation"``: the one-step
    matrix computed from the same term sequence, raised to ``steps`` and squared.
    """
    _check_clock(clock_qubits)
    _check_form(form)
    if not isinstance(steps, (int, np.integer)) or steps < 1:
        raise QgpError(f"trotter_steps must be an integer ≥ 1, got {steps!r}")
    op = pauli_decomposition(A)
    delta = evolution_time / steps
    repeats = squares = None
    if form == "simulation":
        squares = _squares(np.linalg.matrix_power(_step_matrix(op, delta, order), steps), clock_qubits)
        powers = _squared_powers(squares, clock_qubits, f"c-trotter{order}")
    else:
        step = controlled_trotter_step(op, delta, order)
        repeats = tuple((step, steps * 2**j) for j in range(clock_qubits))
        powers = tuple(_repeated(g, n, f"c-trotter{order}^{n}") for g, n in repeats)
    return PhaseOracle(
        kind="trotter",
        form=form,
        clock_qubits=clock_qubits,
        n_system_qubits=op.num_qubits,
        n_block_qubits=0,
        evolution_time=float(evolution_time),
        alpha=None,
        block_encoding=None,
        powers=powers,
        n_calls=2**clock_qubits - 1,
        n_pauli_terms=len(op),
        repeats=repeats,
        power_matrices=squares,
    )



@dataclass(frozen=True)
class TrotterEvolution(ExactEvolution):
    """``evolution = "trotter"``: the exact method's clock grid, a product formula's circuit."""

    name = "trotter"
    closed_form_model = False

    def check(self, settings) -> None:
        if not isinstance(settings.trotter_steps, (int, np.integer)) or settings.trotter_steps < 1:
            raise QgpError(f"[circuit] trotter_steps must be an integer ≥ 1, got {settings.trotter_steps!r}")
        if settings.trotter_order not in (1, 2):
            raise QgpError(f"[circuit] trotter_order must be 1 or 2, got {settings.trotter_order!r}")

    def label(self, settings) -> str:
        steps, order = settings.trotter_steps, settings.trotter_order
        return f"Trotter ({steps} step{'s' if steps != 1 else ''}, order {order})"

    def oracle(self, A, settings, lambda_hi, form, block_encoding=None):
        t = self.evolution_time(settings, lambda_hi)
        return trotter_oracle(A, settings.clock_qubits, t, settings.trotter_steps, settings.trotter_order, form)

    def needs_pauli_terms(self, settings) -> bool:
        return True

    def size_piece(self, m, settings, *, terms, n_pe, calls):
        steps = int(settings.trotter_steps)
        piece = terms * (6 * m + 4) * (2 if settings.trotter_order == 2 else 1)
        return SizePiece(
            n_pe * piece,
            calls * steps * piece,
            f"one controlled product-formula step over {terms} Pauli terms (≈ {piece:,} gates)",
        )

    def oracle_call(self, settings) -> str:
        return (
            f"controlled product formula for e^{{iAt}} (order {settings.trotter_order}, "
            f"{settings.trotter_steps} step(s) per call)"
        )

    def synthesis_dependent(self, settings):
        return None

    def fault_tolerant_gap(self, settings) -> str | None:
        return (
            "no fault-tolerant model at scale: the product formula runs over A's Pauli strings, up to 4^m "
            "of them for a kernel matrix, and its step count needs commutator bounds qgp does not compute"
        )

    def steps_per_call(self, settings) -> int:
        return settings.trotter_steps
