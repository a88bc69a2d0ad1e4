"""Inference with the QSVT circuits (``[circuit] method = "qsvt"``) against numpy and the exact GP.

Sources: the circuit's block is p(A/α) (Gilyén, Su, Low & Wiebe, STOC 2019, Thm. 17), so the
simulated operators must equal V·diag(p(λ/α))·Vᵀ and V·diag(q(λ/α)²)·Vᵀ computed here with
numpy.polynomial.chebyshev from the polynomials' coefficients (1e-9: the phase factors' residual
is ≤ 1e-12); the exact GP is Rasmussen & Williams Alg. 2.1 (qgp.classical.gp, itself checked
against scikit-learn in tests/classical). The error bounds are the polynomials' measured relative
errors carried through: |k̂ᵀ(p(A/α)/C − A⁻¹)ŷ| ≤ max_λ |λp(λ/α)/C − 1|/λ ≤ ε/λ_min.
"""

import numpy as np
import pytest
from numpy.polynomial import chebyshev as C

from qgp.classical.kernels import make_kernel
from qgp.classical.problem import build_problem
from qgp.config import load_config, load_dataset
from qgp.demo import demo_config_path
from qgp.readout.inference import infer
from qgp.settings import CircuitSettings, ReadoutSettings


def _problem(kappa: float, n_test: int = 12):
    cfg = load_config(demo_config_path())
    ds = load_dataset(cfg.data)
    return build_problem(
        ds.X_train, ds.y_train, make_kernel(cfg.kernel, 1), target_condition=kappa,
        X_test=np.linspace(0.0, 400.0, n_test)[:, None], center=True, inputs=ds.inputs,
    )


def _qsvt(encoding="dilation", **kw):
    return CircuitSettings(method="qsvt", clock_qubits=0, encoding=encoding, **kw)


@pytest.mark.parametrize("encoding", ["dilation", "lcu"])
def test_operators_are_the_polynomials_of_the_matrix(encoding):
    problem = _problem(10.0)
    r = infer(problem, _qsvt(encoding, target_error=1e-2), ReadoutSettings(strategy="amortised"), progress=None)
    A = problem.A_padded
    lam, V = np.linalg.eigh(A)
    alpha = r.inverse.alpha
    p = C.chebval(lam / alpha, r.inverse.polynomial.coefficients)
    q = C.chebval(lam / alpha, r.inverse_sqrt.polynomial.coefficients)
    worst_B = float(np.max(np.abs(r.operators.B - (V * p) @ V.T)))
    worst_M = float(np.max(np.abs(r.operators.M - (V * q**2) @ V.T)))
    assert worst_B <= 1e-9, f"B differs from p(A/α) by {worst_B:.3g}"
    assert worst_M <= 1e-9, f"M differs from q(A/α)² by {worst_M:.3g}"
    assert r.summary()["filter_model_max_abs_difference"] <= 1e-9


@pytest.mark.parametrize("target", [1e-2, 1e-3])
def test_errors_stay_within_the_polynomial_bound(target):
    problem = _problem(10.0)
    r = infer(problem, _qsvt(target_error=target), ReadoutSettings(), progress=None)
    lam_min = float(np.linalg.eigvalsh(problem.A)[0])
    y_norm = float(np.linalg.norm(problem.y_centered))
    k_norms = np.linalg.norm(problem.k_star, axis=0)
    eps_p = r.inverse.polynomial.max_error
    eps_q = r.inverse_sqrt.polynomial.max_error
    assert eps_p <= target and eps_q <= target
    mean_bound = y_norm * k_norms * eps_p / lam_min
    var_bound = k_norms**2 * ((1 + eps_q) ** 2 - 1) / lam_min
    mean_err = np.abs(r.mean_quantum - r.mean_exact)
    var_err = np.abs(r.variance_quantum - r.variance_exact)
    assert np.all(mean_err <= mean_bound * (1 + 1e-9)), f"worst mean error over its bound {np.max(mean_err / mean_bound):.3g}"
    assert np.all(var_err <= var_bound * (1 + 1e-9)), f"worst variance error over its bound {np.max(var_err / var_bound):.3g}"


def test_qsvt_and_phase_estimation_agree_on_one_problem():
    # Both approximate the same exact GP; at a tight target QSVT's mean must be closer to phase
    # estimation's than phase estimation's own error (walk, c = 8) plus QSVT's bound.
    problem = _problem(10.0)
    pe = infer(problem, CircuitSettings(clock_qubits=8, evolution="walk"), ReadoutSettings(), progress=None)
    qs = infer(problem, _qsvt(target_error=1e-3), ReadoutSettings(), progress=None)
    pe_err = np.abs(pe.mean_quantum - pe.mean_exact)
    qs_err = np.abs(qs.mean_quantum - qs.mean_exact)
    gap = np.abs(pe.mean_quantum - qs.mean_quantum)
    assert np.all(gap <= pe_err + qs_err + 1e-12)
    s = qs.summary()
    assert s["method"] == "qsvt" and s["clock_qubits"] == 0 and s["evolution"] is None
    assert s["block_encoding_calls"] == s["polynomial_degree"] == qs.inverse.polynomial.degree
    assert pe.summary()["block_encoding_calls"] == pe.inverse.n_oracle_calls


def test_shots_give_standard_errors_that_cover_the_exact_probabilities():
    problem = _problem(10.0, n_test=6)
    r = infer(problem, _qsvt(target_error=1e-2), ReadoutSettings(shots=200_000, seed=5), progress=None)
    exact = infer(problem, _qsvt(target_error=1e-2), ReadoutSettings(), progress=None)
    z = np.abs(r.mean_quantum - exact.mean_quantum) / r.mean_quantum_se
    assert np.all(np.isfinite(z)) and np.max(z) < 5.0  # 5σ: common practice for a seeded check


@pytest.mark.parametrize("encoding", ["dilation", "lcu"])
def test_every_strategy_and_engine_gives_the_amortised_probabilities(encoding):
    # The figure: amortised and per-point read-outs agree to 1e-9 (same circuits, exact).
    problem = _problem(10.0, n_test=5)
    circuit = _qsvt(encoding, target_error=1e-2)
    engines = ("numpy", "aer") if encoding == "dilation" else ("numpy",)
    ref = infer(problem, circuit, ReadoutSettings(strategy="amortised", engine=engines[-1]), progress=None)
    # Aer runs the LCU's native calls (a 2^b-block SELECT per call) slowly: ~80 s here for this
    # loop; the numpy engine is itself checked against Aer on these circuits (tests/circuits/test_qsvt.py).
    for strategy in ("amortised", "per-point", "hybrid"):
        for engine in engines:
            r = infer(problem, circuit, ReadoutSettings(strategy=strategy, engine=engine), progress=None)
            for name in ("p0", "p1", "p_flag", "variance_quantum_hadamard"):
                worst = float(np.max(np.abs(getattr(r, name) - getattr(ref, name))))
                assert worst <= 1e-9, f"{strategy}/{engine}: {name} differs from amortised/{engines[-1]} by {worst:.3g}"


def test_per_point_shots_are_counted_from_the_measured_circuits():
    # Aer samples the measured per-point circuits; the estimates must sit within 5 standard
    # errors of the exact ones (common practice for a seeded check).
    problem = _problem(10.0, n_test=3)
    circuit = _qsvt(target_error=1e-2)
    exact = infer(problem, circuit, ReadoutSettings(strategy="per-point"), progress=None)
    r = infer(problem, circuit, ReadoutSettings(strategy="per-point", shots=100_000, seed=9), progress=None)
    zm = np.abs(r.mean_quantum - exact.mean_quantum) / r.mean_quantum_se
    zv = np.abs(r.variance_quantum - exact.variance_quantum) / r.variance_quantum_se
    assert np.max(zm) < 5 and np.max(zv) < 5, (zm, zv)
