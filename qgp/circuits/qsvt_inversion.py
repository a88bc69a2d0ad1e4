"""QSVT inversion of A: the polynomial, its phases and its circuit as an `InversionCircuit`.

The block encoding U of A/α (``[circuit] encoding``) is transformed by an odd polynomial
p(x) ≈ s·a/x (``inverse``) or an even q(x) ≈ s·√(a/|x|) (``inverse_sqrt``) on the a-priori range
a ≤ |x| ≤ 1, a = 1/κ_b = λ_lo/α (qgp.circuits.polynomials); the phases come from
qgp.circuits.qsp and the circuit from qgp.circuits.qsvt. So, for a normalised input b, the
amplitudes on flag = 1, block = 0 are p(A/α)b ≈ s·λ_lo·A⁻¹b and P(flag = 1) = ‖q(A/α)b‖² ≈
s²·λ_lo·bᵀA⁻¹b: the same read-out as phase estimation with C = s·λ_lo (``inverse``) and
C = s²·λ_lo (``inverse_sqrt``). The polynomial is what the circuit applies to each eigenvalue
(`InversionCircuit.polynomial`; qgp.readout.filter_model reads it), exact up to the phase
factors' residual.

``[circuit] degree`` is the inversion polynomial's degree (odd); the variance polynomial then has
degree + 1. With ``target_error`` each polynomial takes the smallest degree that meets it.
"""

from __future__ import annotations

import numpy as np
from qiskit.circuit import QuantumCircuit

from qgp.circuits.encoding import amplitude_encoding, check_matrix
from qgp.circuits.inversion import InversionCircuit, check_bounds
from qgp.circuits.methods.base import FaultTolerantQueries
from qgp.circuits.methods.encodings import get_encoding
from qgp.circuits.phase_estimation import Form
from qgp.circuits.polynomials import InversionPolynomial, inverse_sqrt_polynomial, inversion_polynomial, residual_degree
from qgp.circuits.qsp import qsp_phases
from qgp.circuits.qsvt import qsvt_circuit
from qgp.errors import QgpError
from qgp.settings import CircuitSettings, Rotation

__all__ = ["QSP_MAX_ABS", "qsvt_polynomial", "build_qsvt_inversion", "qsvt_scale", "qsvt_fault_tolerant_queries"]

#: Largest |p| on [−1, 1] the polynomials are scaled to: the phase-factor solver converges to
#: 1e-13 up to 0.999 (measured, qgp.circuits.qsp), and 0.1% of success probability is the price.
QSP_MAX_ABS = 0.999


def qsvt_polynomial(settings: CircuitSettings, rotation: Rotation, condition_number: float) -> InversionPolynomial:
    """The polynomial of ``rotation`` for κ_b = ``condition_number`` under ``settings``.

    Parameters
    ----------
    settings : CircuitSettings
        ``method = "qsvt"`` with ``target_error`` or ``degree``.
    rotation : "inverse" or "inverse_sqrt"
    condition_number : float
        κ_b = α/λ_lo > 1.

    Returns
    -------
    InversionPolynomial
    """
    make = inversion_polynomial if rotation == "inverse" else inverse_sqrt_polynomial
    if settings.degree is not None:
        degree = int(settings.degree)
        if degree % 2 == 0:
            raise QgpError(f"[circuit] degree is the inversion polynomial's degree and must be odd, got {degree}; use {degree + 1}")
        return make(condition_number, degree=degree if rotation == "inverse" else degree + 1, max_abs=QSP_MAX_ABS)
    if settings.target_error is None:
        raise QgpError('[circuit] method = "qsvt" needs target_error or degree; give one')
    return make(condition_number, target_error=float(settings.target_error), max_abs=QSP_MAX_ABS)


def qsvt_scale(poly: InversionPolynomial, rotation: Rotation, lambda_lo: float) -> float:
    """C with block ≈ C·A⁻¹ (``inverse``: s·λ_lo) or P(flag = 1) ≈ C·bᵀA⁻¹b (``inverse_sqrt``: s²·λ_lo)."""
    return float(poly.scale * lambda_lo if rotation == "inverse" else poly.scale**2 * lambda_lo)


def qsvt_fault_tolerant_queries(*, lambda_lo: float, alpha: float, relative_error: float) -> FaultTolerantQueries:
    """Block-encoding calls of one QSVT inversion at relative error ε: the polynomial's degree.

    The circuit calls U (or U†) once per degree (Gilyén, Su, Low & Wiebe 2019, Thm 17); the
    degree is the Chebyshev residual's closed form at κ_b = α/λ_lo (`residual_degree`, the
    construction `qsvt_polynomial` builds), ≈ κ_b·ln(2/ε). One signal qubit beyond U's.

    Parameters
    ----------
    lambda_lo, alpha : float
        A lower bound on A's smallest eigenvalue and the block encoding's α (α > λ_lo > 0).
    relative_error : float
        ε in (0, 1).

    Returns
    -------
    FaultTolerantQueries
    """
    d = residual_degree(alpha / lambda_lo, relative_error)
    return FaultTolerantQueries(
        clock_qubits=0,
        oracle_calls=float(d),
        block_encoding_calls=float(d),
        extra_qubits=1,
        model="QSVT: one block-encoding call per degree of the Chebyshev residual inverse, d ≈ κ_b ln(2/ε)",
    )


def build_qsvt_inversion(
    A,
    settings: CircuitSettings,
    rotation: Rotation,
    bounds: tuple[float, float],
    *,
    prepare: np.ndarray | None = None,
    uncompute: bool | None = None,
    form: Form = "gate",
    oracle=None,
    prefix=None,
) -> InversionCircuit:
    """`qgp.circuits.inversion.build_inversion` for ``method = "qsvt"`` (same arguments; ``uncompute``,
    ``oracle`` and ``prefix`` do not apply: the sequence leaves nothing to undo, there is no phase
    oracle, and the two rotations' sequences share no prefix).

    A is never eigensolved here (the dilation encoding diagonalises A only to build √(I − A²/α²)).
    """
    a = check_matrix(A)
    lo, hi = check_bounds(bounds)
    m = a.shape[0].bit_length() - 1
    be = get_encoding(settings.encoding).build(a)
    kappa = float(be.alpha / lo)
    if not kappa > 1:
        raise QgpError(f"κ_b = α/λ_lo = {kappa:.6g} must exceed 1 for the QSVT polynomial; check the eigenvalue bounds")
    poly = qsvt_polynomial(settings, rotation, kappa)
    phases = qsp_phases(poly.coefficients)
    body = qsvt_circuit(be, phases.phases, form)
    if prepare is not None:
        encode = amplitude_encoding(prepare, native=form == "simulation")
        if encode.num_qubits != m:
            raise QgpError(
                f"the vector to prepare has {2**encode.num_qubits} entries but A is {2**m}×{2**m}; pad it the same way as A"
            )
        qc = QuantumCircuit(*body.qregs, name=f"inversion-{rotation}")
        qc.compose(encode, qubits=qc.qregs[0][:], inplace=True, copy=False)
        qc.compose(body, inplace=True, copy=False)
    else:
        qc = body
        qc.name = f"inversion-{rotation}"
    return InversionCircuit(
        circuit=qc,
        rotation=rotation,
        scale=qsvt_scale(poly, rotation, lo),
        alpha=float(be.alpha),
        evolution_time=None,
        clock_eigenvalues=np.empty(0),
        admitted=np.empty(0, dtype=bool),
        flag_amplitudes=np.empty(0),
        floor=float(lo),
        n_filtered=0,
        effective_condition_number=kappa,
        settings=settings,
        form=form,
        uncomputed=True,
        bounds=(lo, hi),
        n_system_qubits=m,
        n_block_qubits=be.n_block_qubits + 1,
        n_oracle_calls=int(phases.degree),
        block_encoding=be,
        n_pauli_terms=be.n_pauli_terms,
        oracle=None,
        rotation_start=None,
        polynomial=poly,
        phase_residual=float(phases.residual),
        phases=phases.phases,
    )
