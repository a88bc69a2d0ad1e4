"""The inversion algorithms (``[circuit] method``) and what the read-out asks of each.

``phase_estimation``: HHL-type inversion with a phase oracle from the `qgp.circuits.methods`
registry (``[circuit] evolution``), a clock register and an eigenvalue-conditioned rotation
(qgp.circuits.inversion). ``qsvt``: the quantum singular value transformation of the
``[circuit] encoding`` with a polynomial (qgp.circuits.qsvt_inversion). Both build an
`InversionCircuit` with the same read-out (flag = 1, clock = 0, block = 0); what differs — the
registers, the error budget's idealised stage, the label — is here,
so code elsewhere asks `algorithm_of(settings)` and never compares method names.
"""

from __future__ import annotations

from dataclasses import dataclass

from qgp.circuits.methods import get_method
from qgp.circuits.methods.encodings import get_encoding
from qgp.errors import QgpError

__all__ = ["Algorithm", "ALGORITHMS", "algorithm_of"]


@dataclass(frozen=True)
class Algorithm:
    """One ``[circuit] method``.

    ``budget_stage``: the name of the error budget's idealised stage (what the method applies to each eigenvalue,
    without the circuit); ``uses_clock``: whether it has a clock register.
    """

    name: str
    budget_stage: str
    uses_clock: bool
    #: Legend labels of the run's filter figure: the idealised response and its lower cut.
    model_label: str = "filter model"
    floor_label: str = "filter floor"

    def label(self, settings) -> str:
        """Figure and text label, e.g. ``"walk + LCU"`` or ``"QSVT + dilation"``."""
        if self.uses_clock:
            return get_method(settings.evolution).label(settings)
        return f"QSVT + {get_encoding(settings.encoding).label}"

    def encoding(self, settings) -> str | None:
        """The block encoding used (None for phase oracles without one)."""
        if self.uses_clock:
            return get_method(settings.evolution).encoding(settings)
        return settings.encoding

    def evolution(self, settings) -> str | None:
        """The phase oracle (``[circuit] evolution``), None without phase estimation."""
        return settings.evolution if self.uses_clock else None

    def block_qubits_depend_on_terms(self, settings) -> bool:
        if self.uses_clock:
            return get_method(settings.evolution).block_qubits_depend_on_terms(settings)
        return get_encoding(settings.encoding).block_qubits_depend_on_terms()

    def block_qubits(self, settings, n_pauli_terms: int | None = None) -> int:
        """The ``block`` register: the oracle's, or the encoding's plus QSVT's signal qubit."""
        if self.uses_clock:
            return get_method(settings.evolution).block_qubits(settings, n_pauli_terms)
        return get_encoding(settings.encoding).block_qubits(n_pauli_terms) + 1

    def budget_models(self, settings, bounds, inverse, inverse_sqrt) -> tuple:
        """The error budget's idealised models of the two circuits (qgp.readout.filter_model reads
        them): phase estimation's exact-oracle clock model (no gates), or QSVT's polynomials."""
        if self.uses_clock:
            from qgp.circuits.inversion import budget_reference_model

            return budget_reference_model(settings, "inverse", bounds), budget_reference_model(settings, "inverse_sqrt", bounds)
        return inverse, inverse_sqrt

    def fault_tolerant_gap(self, settings) -> str | None:
        """Why the method has no fault-tolerant query model at scale (None when it has one)."""
        return get_method(settings.evolution).fault_tolerant_gap(settings) if self.uses_clock else None

    def fault_tolerant_queries(self, settings, *, lambda_lo: float, lambda_hi: float, alpha: float, relative_error: float):
        """`qgp.circuits.methods.base.FaultTolerantQueries` of one inversion at relative error ε
        (phase estimation: the oracle's model and the clock it needs; QSVT: the polynomial's degree)."""
        if self.uses_clock:
            return get_method(settings.evolution).fault_tolerant_queries(
                settings, lambda_lo=lambda_lo, lambda_hi=lambda_hi, alpha=alpha, relative_error=relative_error
            )
        from qgp.circuits.qsvt_inversion import qsvt_fault_tolerant_queries

        return qsvt_fault_tolerant_queries(lambda_lo=lambda_lo, alpha=alpha, relative_error=relative_error)

    def closed_form_model(self, settings) -> bool:
        """Whether qgp.readout.filter_model's operator is what the circuit applies (QSVT: p itself)."""
        return bool(get_method(settings.evolution).closed_form_model) if self.uses_clock else True


ALGORITHMS: dict[str, Algorithm] = {
    a.name: a
    for a in (
        Algorithm("phase_estimation", "phase_estimation_and_filter", True),
        Algorithm(
            "qsvt", "polynomial", False,
            model_label="polynomial p(λ/α)/C", floor_label="λ_lo (polynomial range)",
        ),
    )
}


def algorithm_of(settings) -> Algorithm:
    """The `Algorithm` of ``settings.method`` (`QgpError` naming the choices otherwise)."""
    try:
        return ALGORITHMS[settings.method]
    except KeyError:
        raise QgpError(f"unknown [circuit] method {settings.method!r}; choose one of {tuple(ALGORITHMS)}") from None
