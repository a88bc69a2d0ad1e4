"""The ideal phase oracle V = e^{iAt} (Hamiltonian simulation taken as exact).

Controlled powers are block-diagonal unitaries diag(I, e^{iAt·2^j}), the powers by repeated
squaring of one matrix exponential. A clock value k decodes as λ̃_k = 2πk/(t·2^c), the phase map
is φ(λ) = λt/2π mod 1, and the closed-form filter model (qgp.readout.filter_model) is exact. The
evolution time is t = 2π(1 − 2^(1−c))/λ_hi unless given (`derived_evolution_time`). This is also
the error budget's reference oracle (`qgp.circuits.methods.BUDGET_REFERENCE`).

Gate counts of its dense controlled powers are those of qiskit's synthesis of a generic matrix
(4^m growth), not the cost of an algorithm: the resources mark them ``synthesis_dependent``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from qgp.circuits.encoding import check_matrix
from qgp.circuits.methods.base import InversionMethod, SizePiece
from qgp.circuits.phase_estimation import (
    Form,
    PhaseOracle,
    _check_clock,
    _check_form,
    _LazyPowers,
    _squared_powers,
    _squares,
    derived_evolution_time,
)
from qgp.errors import QgpError

__all__ = [
    "ExactEvolution",
    "evolution_clock_eigenvalues",
    "evolution_phases",
    "evolution_time",
    "exact_oracle",
    "dense_gates",
    "hamiltonian_simulation_calls",
]


def evolution_time(settings, lambda_hi: float) -> float:
    """``[circuit] evolution_time``, or t derived from λ_hi (`derived_evolution_time`)."""
    t = settings.evolution_time
    if t is None:
        return derived_evolution_time(lambda_hi, settings.clock_qubits)
    if not np.isfinite(t) or t <= 0:
        raise QgpError(f"[circuit] evolution_time must be a positive number, got {t!r}")
    return float(t)


def evolution_clock_eigenvalues(clock_qubits: int, evolution_time: float) -> np.ndarray:
    """λ̃_k = 2πk/(t·2^c) for k in [0, 2^c): the eigenvalue each clock value stands for."""
    n = 2**clock_qubits
    return 2 * np.pi * np.arange(n) / (evolution_time * n)



def evolution_phases(eigenvalues, evolution_time: float) -> np.ndarray:
    """φ(λ) = λt/2π mod 1: the eigenphase of e^{iAt} for each eigenvalue (any shape)."""
    lam = np.asarray(eigenvalues, dtype=float)
    return np.mod(lam * evolution_time / (2 * np.pi), 1.0)


def evolution_bin_width(clock_qubits: int, evolution_time: float) -> float:
    """One clock bin of the uniform grid, 2π/(t·2^c)."""
    return 2 * np.pi / (evolution_time * 2**clock_qubits)


def hamiltonian_simulation_calls(alpha_time: float, precision: float) -> float:
    """Block-encoding calls for e^{iAt} to operator-norm error δ: 6α|t| + 9 ln(6/δ).

    Optimal block-Hamiltonian simulation by QSVT of the block encoding of A/α (Gilyén, Su, Low &
    Wiebe, STOC 2019, Corollary 62; the constants are from memory). ``alpha_time`` is α|t|.
    """
    return 6.0 * abs(alpha_time) + 9.0 * np.log(6.0 / precision)


def dense_gates(q: int) -> int:
    """Estimated gates of a generic dense q-qubit unitary after synthesis, 1.25·4^q."""
    # Quantum Shannon decomposition of a generic q-qubit unitary: ≈ (23/48)·4^q CX plus ≈ 0.78·4^q
    # single-qubit gates (measured here: 1.24·4^q at q = 8).
    return int(1.25 * 4**q)


def exact_oracle(A, clock_qubits: int, evolution_time: float, form: Form = "gate") -> PhaseOracle:
    """Controlled e^{iAt·2^j} as block-diagonal unitaries (ideal Hamiltonian simulation).

    One `scipy.linalg.expm`, then c − 1 matrix products. The same gates serve both forms; the
    simulation form also keeps the matrices, which phase estimation applies as multiplexers.
    """
    a = check_matrix(A)
    _check_clock(clock_qubits)
    _check_form(form)
    m = a.shape[0].bit_length() - 1
    squares = _squares(scipy.linalg.expm(1j * evolution_time * a), clock_qubits)
    return PhaseOracle(
        kind="exact",
        form=form,
        clock_qubits=clock_qubits,
        n_system_qubits=m,
        n_block_qubits=0,
        evolution_time=float(evolution_time),
        alpha=None,
        block_encoding=None,
        powers=(_LazyPowers if form == "simulation" else _squared_powers)(squares, clock_qubits, "c-exp(iAt)"),
        n_calls=2**clock_qubits - 1,
        power_matrices=squares if form == "simulation" else None,
    )



@dataclass(frozen=True)
class ExactEvolution(InversionMethod):
    """``evolution = "exact"``: V = e^{iAt} as dense controlled powers."""

    name = "exact"
    closed_form_model = True

    def label(self, settings) -> str:
        return "exact e^(iAt)"

    def evolution_time(self, settings, lambda_hi):
        return evolution_time(settings, lambda_hi)

    def clock_eigenvalues(self, clock_qubits, evolution_time, alpha):
        return evolution_clock_eigenvalues(clock_qubits, evolution_time)

    def phase(self, eigenvalues, evolution_time, alpha):
        return evolution_phases(eigenvalues, evolution_time)

    def bin_width(self, lambda_lo, clock_qubits, evolution_time, alpha):
        return evolution_bin_width(clock_qubits, evolution_time)

    def effective_condition_number(self, lambda_lo, lambda_hi, alpha):
        return lambda_hi / lambda_lo

    def block_encoding_calls_per_oracle(self, evolution_time, alpha, power, precision):
        return hamiltonian_simulation_calls(alpha * evolution_time * power, precision)

    def fault_tolerant_ancillas(self) -> int:
        return 2

    def fault_tolerant_model(self) -> str:
        return (
            "e^{iAt·2^j} by quantum signal processing of the block encoding: 6α|t| + 9 ln(6/δ) calls "
            "(Gilyén, Su, Low & Wiebe 2019, Cor. 62; from memory)"
        )

    def oracle(self, A, settings, lambda_hi, form, block_encoding=None):
        return exact_oracle(A, settings.clock_qubits, self.evolution_time(settings, lambda_hi), form)

    def size_piece(self, m, settings, *, terms, n_pe, calls):
        c = int(settings.clock_qubits)
        piece = dense_gates(m + 1)
        synth = n_pe * c * piece
        return SizePiece(
            synth,
            synth,
            f"{n_pe * c} controlled powers of e^(iAt), each a dense {m + 1}-qubit unitary (≈ {piece:,} gates)",
        )

    def oracle_call(self, settings) -> str:
        return "controlled e^{iAt} (dense unitary; the power 2^j is one dense gate standing for 2^j calls)"

    def synthesis_dependent(self, settings):
        return "controlled powers of e^{iAt}"
