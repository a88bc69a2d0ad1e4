"""Closed-form model of the ideal inversion circuit: what it applies to each eigenvalue of A.

Phase estimation with c clock qubits maps an eigenvector with eigenphase φ to clock value k with
amplitude a_k(φ) = 2^{-c} Σ_j e^{2πij(φ − k/2^c)}, so |a_k|² = sin²(π2^cδ)/(2^{2c} sin²(πδ)),
δ = φ − k/2^c (the Fejér kernel; Nielsen & Chuang §5.2.1). The rotation puts g(λ̃_k) on the flag,
and uncomputation projects back onto clock 0, so for an eigenvector of A with eigenvalue λ

    inverse circuit:      post-selected amplitude  f(λ) = Σ_k |a_k(φ(λ))|² g(λ̃_k),  g = C/λ̃
    inverse_sqrt circuit: flag probability         h(λ) = Σ_k |a_k(φ(λ))|² g(λ̃_k)², g = √(C′/λ̃)

(g = 0 on filtered clock values). The circuit therefore applies Ã⁻¹ = V diag(f/C) Vᵀ. φ(λ) and the
clock grid λ̃_k are the inversion method's (qgp.circuits.methods: ``phase``, ``clock_eigenvalues``);
the model is exact for the methods whose ``closed_form_model`` is set — the exact oracle,
φ = λt/2π, and the qubitization walk, not the product formula (its Trotter error is not modelled).
For the walk the two eigenphases ±arccos(λ/α)/2π
each carry half of the weight and, because λ̃_k = α cos(2πk/2^c) is symmetric under k → 2^c − k,
give the same sum, so φ = arccos(λ/α)/2π serves for both (Low & Chuang 2019).
"""

from __future__ import annotations

import numpy as np

from qgp.circuits.methods import get_method

__all__ = [
    "qpe_weights",
    "clock_phases",
    "rotation_amplitudes",
    "filter_response",
    "model_operator",
    "model_operators",
    "clock_expectation",
]


def qpe_weights(phase, clock_qubits: int) -> np.ndarray:
    """|a_k(φ)|² for every φ in ``phase`` (rows) and clock value k (columns); rows sum to 1."""
    N = 1 << clock_qubits
    phase = np.atleast_1d(np.asarray(phase, dtype=float))
    delta = phase[:, None] - np.arange(N)[None, :] / N
    s = np.sin(np.pi * delta)
    exact = np.abs(s) < 1e-12  # δ an integer: the phase sits on clock value k
    w = np.ones_like(delta)
    w[~exact] = (np.sin(np.pi * N * delta[~exact]) / (N * s[~exact])) ** 2
    return w


def clock_phases(inv, eigenvalues) -> np.ndarray:
    """Eigenphase φ(λ) in [0, 1) that phase estimation sees for each eigenvalue of A.

    ``inv``: an `InversionCircuit` or `qgp.circuits.inversion.ClockModel` (its ``settings.evolution``
    names the method; ``evolution_time``, ``alpha`` its parameters). Returns shape of ``eigenvalues``.
    """
    return get_method(inv.settings.evolution).phase(eigenvalues, inv.evolution_time, inv.alpha)


def rotation_amplitudes(inv) -> np.ndarray:
    """g(λ̃_k) of the circuit's rotation for every clock value (0 where filtered)."""
    lam = np.asarray(inv.clock_eigenvalues, dtype=float)
    g = np.zeros_like(lam)
    ok = np.asarray(inv.admitted, dtype=bool)
    ratio = inv.scale / lam[ok]
    g[ok] = ratio if inv.rotation == "inverse" else np.sqrt(ratio)
    return g


def filter_response(inv, eigenvalues) -> np.ndarray:
    """f(λ) (``inverse``) or h(λ) (``inverse_sqrt``) of the module docstring, per eigenvalue.

    For a QSVT circuit (``inv.polynomial`` set, qgp.circuits.qsvt_inversion) the circuit applies
    its polynomial itself: f(λ) = p(λ/α), h(λ) = q(λ/α)² (GSLW 2019, Thm. 17).
    """
    return _response(inv, np.asarray(eigenvalues, dtype=float), {})


def _response(inv, eigenvalues: np.ndarray, weights: dict) -> np.ndarray:
    """`filter_response`, the phase-estimation weights looked up in ``weights`` (keyed by the phases
    and the clock size) before they are computed: circuits with one oracle share them."""
    poly = getattr(inv, "polynomial", None)
    if poly is not None:
        p = poly(eigenvalues / inv.alpha)
        return p if inv.rotation == "inverse" else p**2
    phases = np.asarray(clock_phases(inv, eigenvalues), dtype=float)
    key = (phases.tobytes(), inv.settings.clock_qubits)
    w = weights.get(key)
    if w is None:
        w = weights[key] = qpe_weights(phases, inv.settings.clock_qubits)
    g = rotation_amplitudes(inv)
    return w @ (g if inv.rotation == "inverse" else g**2)


def model_operator(inv, A: np.ndarray) -> np.ndarray:
    """V diag(response) Vᵀ: C·Ã⁻¹ for ``inverse``, the flag-probability matrix M for ``inverse_sqrt``."""
    return model_operators([inv], A)[0]


def model_operators(models, A: np.ndarray) -> list[np.ndarray]:
    """`model_operator` of each circuit or model in ``models`` on one A: one eigendecomposition of
    A, and the phase-estimation weights computed once for those that share their phases (an
    inversion pair and the error budget's reference models of an exact oracle)."""
    lam, V = np.linalg.eigh(A)
    weights: dict = {}
    return [(V * _response(inv, lam, weights)) @ V.T for inv in models]


def clock_expectation(inv, eigenvalues, values) -> np.ndarray:
    """Σ_k |a_k(φ(λ))|²·values[k] per eigenvalue λ: the mean of a function of the clock value that
    phase estimation alone (no rotation) reads on an eigenvector of A.

    Parameters
    ----------
    inv : InversionCircuit or ClockModel
        The method, clock size and its t or α (as `clock_phases`).
    eigenvalues : array_like of shape (n,)
    values : array_like of shape (2^c,)

    Returns
    -------
    ndarray of shape (n,)
    """
    w = qpe_weights(clock_phases(inv, np.asarray(eigenvalues, dtype=float).ravel()), inv.settings.clock_qubits)
    return w @ np.asarray(values, dtype=float)
