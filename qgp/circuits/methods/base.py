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
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

__all__ = ["InversionMethod", "SizePiece"]


@dataclass(frozen=True)
class SizePiece:
    """The oracle's part of the a-priori gate estimate (`qgp.circuits.resources.estimate_size`):
    gates to synthesise per basis over its distinct pieces, gates once every repetition is written
    out, and the largest piece in words."""

    synthesis_gates: int
    expanded_gates: int
    largest_piece: str


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

    def query_counts(self, a: np.ndarray, settings, lambda_hi: float, n_pauli_terms: int | None):
        """(α, block qubits, t, Pauli terms) without building a circuit (resources' query-only path)."""
        return None, self.block_qubits(settings), self.evolution_time(settings, lambda_hi), n_pauli_terms
