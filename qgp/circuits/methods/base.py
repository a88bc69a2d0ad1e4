"""The inversion-method protocol: what every phase oracle of `qgp.circuits.methods` knows about itself.

A method is a stateless frozen object (Cirq's habit: every gate answers the same protocol
questions). Phase estimation of its oracle V maps an eigenvector of A with eigenvalue λ to the
clock grid through the method's phase map φ(λ) (V's eigenphase over 2π), and a clock value k
decodes back to λ̃_k; the rest of the inversion (rotation, filter, uncompute) is generic
(qgp.circuits.inversion). Everything that differs between methods is a method here: the circuit
of the controlled powers in both forms, t or α, φ, the decoding, the local bin width the filter
floor uses, the effective condition number, the block register, the query and gate-count model,
the size estimate of the gate-level guard and the label.

``settings`` is always a `qgp.settings.CircuitSettings`; ``evolution_time`` is t (None when the
method has no evolution time) and ``alpha`` the block encoding's α (None without one).
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, replace
from typing import ClassVar

import numpy as np

__all__ = ["InversionMethod", "SizePiece", "FaultTolerantQueries", "fault_tolerant_clock_qubits"]

#: Most clock qubits the fault-tolerant query model considers (2^80 calls is far past any device).
_MAX_FT_CLOCK = 80


@dataclass(frozen=True)
class SizePiece:
    """The oracle's part of the a-priori gate estimate (`qgp.circuits.resources.estimate_size`):
    gates to synthesise per basis over its distinct pieces, gates once every repetition is written
    out, and the largest piece in words."""

    synthesis_gates: int
    expanded_gates: int
    largest_piece: str


@dataclass(frozen=True)
class FaultTolerantQueries:
    """Block-encoding calls of one inversion (A⁻¹ applied once, uncompute included) at scale.

    ``clock_qubits`` is 0 without phase estimation; ``oracle_calls`` counts the method's own
    oracle (controlled W, controlled e^{iAt}, or U itself for QSVT); ``block_encoding_calls`` the
    calls of the sparse-access block encoding those need; ``extra_qubits`` the logical qubits
    beyond the system, block-encoding and read-out registers (clock, QSVT signal qubit, the
    Hamiltonian simulation's ancillas); ``model`` says which published count it is.
    """

    clock_qubits: int
    oracle_calls: float
    block_encoding_calls: float
    extra_qubits: int
    model: str


def fault_tolerant_clock_qubits(bin_width, lambda_lo: float, relative_error: float) -> int:
    """Smallest c ≥ 2 whose clock bin at λ_lo is at most ε·λ_lo: ``bin_width(c) ≤ ε·λ_lo``.

    The grid must resolve the smallest eigenvalue to relative error ε, because the rotation
    applies C/λ̃ and a relative error in λ̃ is one in the estimate (Harrow, Hassidim & Lloyd
    2009, PRL 103, 150502: t₀ = O(κ/ε)).
    """
    target = relative_error * lambda_lo
    for c in range(2, _MAX_FT_CLOCK + 1):
        if bin_width(c) <= target:
            return c
    raise ValueError(f"no clock of ≤ {_MAX_FT_CLOCK} qubits resolves λ_lo = {lambda_lo:g} to relative error {relative_error:g}")


@dataclass(frozen=True)
class InversionMethod(ABC):
    """The protocol of one inversion method (one ``[circuit] evolution`` value).

    Class attributes: ``name`` (the config value), ``uses_block_encoding`` (whether
    ``[circuit] encoding`` applies), ``closed_form_model`` (whether `qgp.readout.filter_model`'s
    Fejér-kernel model with this method's φ(λ) and clock grid is exact for its circuit).
    """

    name: ClassVar[str]
    uses_block_encoding: ClassVar[bool] = False
    closed_form_model: ClassVar[bool] = False

    # -- settings and text -----------------------------------------------------------------------

    def check(self, settings) -> None:
        """Raise `QgpError` for settings this method cannot use (called by the inversion's checks)."""

    @abstractmethod
    def label(self, settings) -> str:
        """The series label of figures and text, e.g. ``"exact e^(iAt)"`` or ``"walk + LCU"``."""

    def description(self, settings) -> str:
        """The oracle in a file header: ``"<name> oracle"`` plus the encoding where one applies."""
        return f"{self.name} oracle"

    def encoding(self, settings) -> str | None:
        """The ``[circuit] encoding`` this method uses (None when it uses no block encoding)."""
        return None

    # -- the clock grid --------------------------------------------------------------------------

    def evolution_time(self, settings, lambda_hi: float) -> float | None:
        """t of e^{iAt} (None for a method without one)."""
        return None

    def alpha(self, A, settings, lambda_hi: float | None = None) -> float | None:
        """The block encoding's α computed cheaply (no circuit), None without a block encoding."""
        return None

    @abstractmethod
    def clock_eigenvalues(self, clock_qubits: int, evolution_time, alpha) -> np.ndarray:
        """λ̃_k decoded from every clock value k in [0, 2^c); shape (2^c,)."""

    @abstractmethod
    def phase(self, eigenvalues, evolution_time, alpha) -> np.ndarray:
        """φ(λ) in [0, 1): the eigenphase phase estimation sees for each eigenvalue; same shape."""

    @abstractmethod
    def bin_width(self, lambda_lo: float, clock_qubits: int, evolution_time, alpha) -> float:
        """The clock grid's local spacing at λ_lo (the filter floor sits one bin below λ_lo)."""

    @abstractmethod
    def effective_condition_number(self, lambda_lo: float, lambda_hi: float, alpha) -> float:
        """The spread of eigenvalues the clock must resolve."""

    # -- circuits ----------------------------------------------------------------------------------

    def block_encoding(self, A, settings):
        """The block encoding the oracle is built on (None for methods without one)."""
        return None

    @abstractmethod
    def oracle(self, A, settings, lambda_hi: float, form: str, block_encoding=None):
        """The `qgp.circuits.phase_estimation.PhaseOracle` (controlled powers) in ``form``."""

    # -- registers -----------------------------------------------------------------------------------

    def block_qubits_depend_on_terms(self, settings) -> bool:
        """Whether the block register's size depends on A's Pauli decomposition."""
        return False

    def block_qubits(self, settings, n_pauli_terms: int | None = None) -> int:
        """Qubits of the ``block`` register (for an LCU, from the number of Pauli strings)."""
        return 0

    # -- resources -------------------------------------------------------------------------------------

    def needs_pauli_terms(self, settings) -> bool:
        """Whether the size estimate needs A's Pauli term count."""
        return False

    @abstractmethod
    def size_piece(self, m: int, settings, *, terms: int, n_pe: int, calls: int) -> SizePiece:
        """The oracle's gates in `qgp.circuits.resources.estimate_size` (m system qubits, ``terms`` Pauli
        strings or their bound, ``n_pe`` phase estimations, ``calls`` oracle calls in all)."""

    @abstractmethod
    def oracle_call(self, settings) -> str:
        """What one counted oracle call is (the ``oracle_call`` of the resources JSON)."""

    def synthesis_dependent(self, settings) -> str | None:
        """What is synthesised from dense unitaries (None when the gates are the algorithm's own)."""
        return None

    def composition_is_upper_bound(self, settings) -> bool:
        """Whether a direct transpile may come out lower than the composed counts (LCU ancillas)."""
        return False

    def steps_per_call(self, settings) -> int | None:
        """Product-formula steps per oracle call (None for methods that are not product formulas)."""
        return None

    def phase_estimation_calls(self, clock_qubits: int, uncompute: bool = True) -> int:
        """Controlled oracle calls of phase estimation with ``clock_qubits`` (Σ_j 2^j = 2^c − 1 per
        estimation; twice with the uncompute) — what `qgp.circuits.resources` counts."""
        return (2**clock_qubits - 1) * (2 if uncompute else 1)

    def fault_tolerant_gap(self, settings) -> str | None:
        """Why this method has no fault-tolerant query model at scale (None when it has one)."""
        return None

    def block_encoding_calls_per_oracle(self, evolution_time, alpha: float, power: int, precision: float) -> float:
        """Sparse-access block-encoding calls to apply the oracle to the ``power`` (controlled)."""
        raise NotImplementedError(f"{self.name} has no fault-tolerant query model")

    def fault_tolerant_queries(self, settings, *, lambda_lo: float, lambda_hi: float, alpha: float, relative_error: float) -> FaultTolerantQueries:
        """Block-encoding calls of one inversion at relative error ε, from a-priori λ_lo, λ_hi and α.

        The clock is the smallest that resolves λ_lo to ε (`fault_tolerant_clock_qubits`, with
        the method's own bin width and t derived from λ_hi for that clock); the oracle calls are
        phase estimation's 2(2^c − 1) with the uncompute, as the simulated circuits count them; each
        power's block-encoding calls come from `block_encoding_calls_per_oracle`.
        """
        gap = self.fault_tolerant_gap(settings)
        if gap is not None:
            raise NotImplementedError(gap)

        def width(c):
            return self.bin_width(lambda_lo, c, self.evolution_time(_with_clock(settings, c), lambda_hi), alpha)

        c = fault_tolerant_clock_qubits(width, lambda_lo, relative_error)
        t = self.evolution_time(_with_clock(settings, c), lambda_hi)
        # Each of the 2c controlled powers gets an equal share of the error budget.
        precision = relative_error / (2 * c)
        per_estimation = sum(self.block_encoding_calls_per_oracle(t, alpha, 2**j, precision) for j in range(c))
        return FaultTolerantQueries(
            clock_qubits=c,
            oracle_calls=float(self.phase_estimation_calls(c)),
            block_encoding_calls=2.0 * per_estimation,
            extra_qubits=c + self.fault_tolerant_ancillas(),
            model=self.fault_tolerant_model(),
        )

    def fault_tolerant_ancillas(self) -> int:
        """Logical qubits the oracle needs beyond the block encoding's own (0 by default)."""
        return 0

    def fault_tolerant_model(self) -> str:
        """The published count behind `block_encoding_calls_per_oracle`, in words."""
        return ""

    def query_counts(self, a: np.ndarray, settings, lambda_hi: float, n_pauli_terms: int | None):
        """(α, block qubits, t, Pauli terms) without building a circuit (resources' query-only path)."""
        return None, self.block_qubits(settings), self.evolution_time(settings, lambda_hi), n_pauli_terms


def _with_clock(settings, clock_qubits: int):
    """``settings`` with another clock size and a derived evolution time (the model picks both)."""
    return replace(settings, clock_qubits=clock_qubits, evolution_time=None)
