"""The cost table (qgp.scale.costs): its read-out count against the amplitude-estimation theorem, its
use of the fitted laws and the method registry, and its monotonicity."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import settings as hypothesis_settings
from hypothesis import strategies as st

from qgp.circuits.algorithms import algorithm_of
from qgp.scale.costs import COST_METHODS, LOOKUP_QUBIT_CAP, ScaleLaws, cost_sizes, cost_table
from qgp.scale.fault_tolerant import SurfaceCodeAssumptions, sparse_access_block_encoding
from qgp.scale.growth import GrowthFit


def _fit(quantity, exponent, prefactor):
    return GrowthFit(
        quantity=quantity, exponent=exponent, ci_low=exponent, ci_high=exponent, prefactor=prefactor,
        confidence=0.95, n_points=5, n_min=64, n_max=4096,
    )


LAWS = ScaleLaws(
    condition_number=_fit("condition_number", 1.0, 0.5),
    eigenvalue_min=_fit("eigenvalue_min", 0.0, 2.25),
    sparsity=_fit("sparsity", 0.5, 3.0),
    norm_max=18.25,
)
SURFACE = SurfaceCodeAssumptions(layout="fast")


def _table(laws=LAWS, sizes=(100, 1000, 10_000), eps=0.01):
    return cost_table(laws, np.array(sizes), relative_error=eps, test_points=1, surface=SURFACE, flop_rate=1e10)


def test_cost_sizes_span_the_range_log_evenly():
    n = cost_sizes(100, 10**6, 4)
    assert n[0] == 100 and n[-1] == 10**6 and len(n) == 17
    ratios = n[1:] / n[:-1]
    assert np.allclose(ratios, 10 ** 0.25, rtol=0.01), ratios


def test_laws_cap_the_sparsity_at_n_and_a_dense_kernel_is_full():
    dense = ScaleLaws(LAWS.condition_number, LAWS.eigenvalue_min, None, LAWS.norm_max)
    n = np.array([10, 1000])
    assert np.array_equal(dense.at(n)["sparsity"], n)
    wide = ScaleLaws(LAWS.condition_number, LAWS.eigenvalue_min, _fit("sparsity", 1.0, 5.0), LAWS.norm_max)
    assert np.all(wide.at(n)["sparsity"] <= n)


@pytest.mark.parametrize("kappa", [3.0, 50.0, 1e4])
@pytest.mark.parametrize("eps", [0.1, 0.01, 1e-3])
def test_amplitude_estimation_count_meets_brassard_theorem_12(kappa, eps):
    # Brassard, Høyer, Mosca & Tapp 2002, Thm 12: M Grover iterations estimate a probability p with
    # |p̃ − p| ≤ 2π√(p(1−p))/M + π²/M². The Hadamard test's P₀ = (1 + a·x)/2 ≈ 1/2 must be known to
    # ε·a/2 for relative error ε on x, with a = 1/κ; the table's 2M + 1 applications must meet that up
    # to the theorem's second-order term (relative excess ≤ ε/κ).
    laws = ScaleLaws(_fit("condition_number", 0.0, kappa), _fit("eigenvalue_min", 0.0, 1.0), None, 2.0)
    row = next(r for r in _table(laws, sizes=(64,), eps=eps) if r.method == "qsvt")
    M = (row.readout_amplitude_estimation - 1) / 2
    bound = 2 * math.pi * 0.5 / M + math.pi**2 / M**2
    target = eps / kappa / 2
    assert bound <= target * (1 + eps / kappa), (bound, target)
    assert row.readout_shots == pytest.approx((kappa / eps) ** 2)


def test_rows_take_calls_from_each_methods_own_query_model():
    # The registry's model (checked against built circuits in tests/circuits/test_fault_tolerant_queries.py)
    # is what the table charges, at the α of the sparse-access construction.
    rows = _table()
    law = LAWS.at(np.array([1000]))
    for key, label, settings in COST_METHODS:
        row = next(r for r in rows if r.n == 1000 and r.method == key)
        alg = algorithm_of(settings)
        if alg.fault_tolerant_gap(settings) is not None:
            assert not row.modelled and row.quantum_seconds is None and row.note
            continue
        be = sparse_access_block_encoding(1000, int(law["sparsity"][0]), max_lookup_qubits=LOOKUP_QUBIT_CAP)
        assert row.alpha == pytest.approx(max(be.alpha_sparsity * LAWS.norm_max, law["eigenvalue_max"][0]))
        q = alg.fault_tolerant_queries(
            settings, lambda_lo=2.25, lambda_hi=float(law["eigenvalue_max"][0]), alpha=row.alpha, relative_error=0.01
        )
        assert row.block_encoding_calls == q.block_encoding_calls
        assert row.toffolis_per_block_encoding_call == be.toffolis_per_call


@hypothesis_settings(max_examples=25, deadline=None)
@given(kappa_exp=st.floats(0.5, 2.0), s_exp=st.floats(0.0, 1.0))
def test_quantum_and_classical_costs_never_fall_as_n_grows(kappa_exp, s_exp):
    # Common practice: with κ and s non-decreasing in n, no cost may fall as n grows.
    laws = ScaleLaws(_fit("condition_number", kappa_exp, 1.0), LAWS.eigenvalue_min, _fit("sparsity", s_exp, 1.0), 18.25)
    rows = _table(laws, sizes=tuple(cost_sizes(100, 10**5, 2)))
    for key in ("walk", "qsvt"):
        series = [r for r in rows if r.method == key]
        for a, b in zip(series, series[1:]):
            assert b.toffolis_total >= a.toffolis_total and b.quantum_seconds >= a.quantum_seconds, (key, a.n, b.n)
            assert b.classical_best_seconds >= a.classical_best_seconds

