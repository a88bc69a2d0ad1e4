"""The fault-tolerant query models of every inversion method, checked against qgp's own circuits.

At scale the cost model asks each method how many block-encoding calls one inversion at relative
error ε needs (`Algorithm.fault_tolerant_queries`). Where the circuit can be built, the model must
agree with it: the clock the model picks is the smallest whose *built* grid resolves λ_lo to ε, the
walk's calls are the controlled-W gates counted in the gate-form circuit, and QSVT's calls are the
block-encoding gates counted in its circuit. A method without a model says why.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from qgp.circuits.algorithms import algorithm_of
from qgp.circuits.inversion import build_inversion
from qgp.circuits.methods import METHODS
from qgp.circuits.methods.encodings import ENCODINGS, get_encoding
from qgp.circuits.polynomials import inversion_polynomial, residual_degree
from qgp.classical.system import eigenvalue_bounds
from qgp.settings import CircuitSettings


def _spd(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    q, _ = np.linalg.qr(rng.normal(size=(n, n)))
    return (q * np.linspace(1.0, 6.0, n)) @ q.T


A = _spd(4, 3)
BOUNDS = eigenvalue_bounds(A, noise_variance=0.5)


def _count(circuit, name: str) -> int:
    """Operations called ``name`` or its inverse ``name_dg`` anywhere in the definition tree."""
    total = 0
    for inst in circuit.data:
        op = inst.operation
        if op.name in (name, f"{name}_dg"):
            total += 1
        elif getattr(op, "definition", None) is not None:
            total += _count(op.definition, name)
    return total


def _grid_step_at(grid: np.ndarray, lam: float) -> float:
    """Spacing of the built clock grid's decoded eigenvalues around λ (the bin that holds it)."""
    values = np.unique(np.round(grid, 14))
    i = int(np.searchsorted(values, lam))
    return float(values[min(i, values.size - 1)] - values[max(i - 1, 0)])


PE_CASES = [
    (name, CircuitSettings(evolution=name, encoding=enc))
    for name, method in METHODS.items()
    for enc in (ENCODINGS if method.uses_block_encoding else ["dilation"])
    if method.fault_tolerant_gap(CircuitSettings(evolution=name, encoding=enc)) is None
]


@pytest.mark.parametrize("name,settings", PE_CASES, ids=[f"{n}-{s.encoding}" for n, s in PE_CASES])
def test_the_model_clock_is_the_smallest_built_grid_that_resolves_lambda_lo(name, settings):
    # Reference: the clock grid of the circuit qgp builds (InversionCircuit.clock_eigenvalues),
    # HHL's requirement (Harrow, Hassidim & Lloyd 2009) that λ̃ resolve λ_lo to relative error ε.
    lo, hi = BOUNDS
    alpha = get_encoding(settings.encoding).alpha(A, hi)
    eps = 0.3
    q = algorithm_of(settings).fault_tolerant_queries(settings, lambda_lo=lo, lambda_hi=hi, alpha=alpha, relative_error=eps)
    steps = {}
    for c in (q.clock_qubits - 1, q.clock_qubits):
        inv = build_inversion(A, replace(settings, clock_qubits=c), "inverse", BOUNDS, form="gate")
        steps[c] = _grid_step_at(inv.clock_eigenvalues, lo)
    assert steps[q.clock_qubits] <= eps * lo * (1 + 1e-9), f"built grid step {steps[q.clock_qubits]:.4g} > ε·λ_lo = {eps * lo:.4g}"
    assert steps[q.clock_qubits - 1] > eps * lo, f"one clock qubit fewer already resolves λ_lo: step {steps[q.clock_qubits - 1]:.4g}"


@pytest.mark.parametrize("encoding", ENCODINGS)
def test_walk_calls_equal_the_controlled_walks_in_the_built_circuit(encoding):
    # Reference: the gate-form circuit itself — every controlled W holds one call of U
    # (Low & Chuang 2019), so the calls are the c-walk gates (and their inverses, the uncompute)
    # counted in its definition tree.
    settings = CircuitSettings(evolution="walk", encoding=encoding)
    lo, hi = BOUNDS
    be = get_encoding(encoding).build(A)
    q = algorithm_of(settings).fault_tolerant_queries(settings, lambda_lo=lo, lambda_hi=hi, alpha=be.alpha, relative_error=0.3)
    inv = build_inversion(A, replace(settings, clock_qubits=q.clock_qubits), "inverse", BOUNDS, form="gate")
    counted = _count(inv.circuit, f"c-walk-{be.kind}")
    assert counted == q.oracle_calls == q.block_encoding_calls, (counted, q)


@pytest.mark.parametrize("encoding", ENCODINGS)
@pytest.mark.parametrize("eps", [0.1, 0.02])
def test_qsvt_calls_equal_the_block_encoding_calls_in_the_built_circuit(encoding, eps):
    # Reference: the gate-form QSVT circuit (Gilyén et al. 2019, Thm 17: one call of U or U† per
    # degree), counted gate by gate.
    settings = CircuitSettings(method="qsvt", encoding=encoding, target_error=eps, clock_qubits=0)
    lo, hi = BOUNDS
    be = get_encoding(encoding).build(A)
    inv = build_inversion(A, settings, "inverse", BOUNDS, form="gate")
    q = algorithm_of(settings).fault_tolerant_queries(settings, lambda_lo=lo, lambda_hi=hi, alpha=inv.alpha, relative_error=eps)
    counted = _count(inv.circuit, be.circuit.name)
    assert counted == q.block_encoding_calls, (counted, q)


@pytest.mark.parametrize("kappa", [1.5, 3.0, 10.0, 47.0, 200.0])
@pytest.mark.parametrize("eps", [0.3, 0.05, 1e-3])
def test_residual_degree_is_the_degree_the_measured_search_settles_on(kappa, eps):
    # Reference: the polynomial module's measured search (relative error measured on a dense grid),
    # which the closed form only starts.
    measured = inversion_polynomial(kappa, target_error=eps).degree
    assert residual_degree(kappa, eps) == measured


def test_a_method_without_a_model_says_why():
    settings = CircuitSettings(evolution="trotter")
    gap = algorithm_of(settings).fault_tolerant_gap(settings)
    assert gap and "Pauli" in gap
    with pytest.raises(NotImplementedError, match="Pauli"):
        algorithm_of(settings).fault_tolerant_queries(settings, lambda_lo=1.0, lambda_hi=5.0, alpha=6.0, relative_error=0.1)


def test_exact_oracle_calls_follow_hamiltonian_simulation_cost_linear_in_alpha_t():
    # Gilyén, Su, Low & Wiebe 2019, Cor. 62 (constants from memory): 6α|t| + 9 ln(6/δ) calls per
    # e^{iAt}; doubling α doubles the α·t part of the total at a fixed clock.
    settings = CircuitSettings(evolution="exact")
    alg = algorithm_of(settings)
    one = alg.fault_tolerant_queries(settings, lambda_lo=1.0, lambda_hi=10.0, alpha=20.0, relative_error=0.05)
    two = alg.fault_tolerant_queries(settings, lambda_lo=1.0, lambda_hi=10.0, alpha=40.0, relative_error=0.05)
    assert one.clock_qubits == two.clock_qubits  # the exact oracle's grid does not depend on α
    log_part = 2 * one.clock_qubits * 9 * np.log(6 / (0.05 / (2 * one.clock_qubits)))
    assert two.block_encoding_calls - log_part == pytest.approx(2 * (one.block_encoding_calls - log_part), rel=1e-12)
