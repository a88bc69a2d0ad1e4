"""`qgp run`'s warnings (qgp.reports.advice): the clock size the closed-form model suggests, and σ² far
above what ML-II fits."""

from dataclasses import replace

import numpy as np

from qgp.classical.gp import fit_ml2
from qgp.classical.problem import build_problem, problem_from_config
from qgp.config import load_config
from qgp.demo import demo_config_path
from qgp.readout.budget import rel_rmse
from qgp.readout.inference import infer
from qgp.reports.advice import VARIANCE_THRESHOLD, model_variance_error, run_advice, size_for_variance
from qgp.settings import CircuitSettings


def _demo():
    cfg = load_config(demo_config_path())
    return cfg, problem_from_config(cfg)


def test_suggested_clock_is_the_smallest_that_meets_the_threshold_and_the_circuit_agrees():
    # For the exact oracle the closed-form model is what the circuit applies (tests/readout), so the
    # suggested size must meet the threshold when the circuits run, and one fewer clock qubit must not
    # (by the model).
    cfg, problem = _demo()
    circuit = CircuitSettings(clock_qubits=4, evolution="exact")
    name, c = size_for_variance(problem, circuit, VARIANCE_THRESHOLD)
    assert name == "clock_qubits" and c is not None and c > 4
    assert model_variance_error(problem, replace(circuit, clock_qubits=c - 1)) > VARIANCE_THRESHOLD
    result = infer(problem, replace(circuit, clock_qubits=c), progress=None)
    err = rel_rmse(result.variance_quantum - result.variance_exact, result.variance_exact)
    assert err <= VARIANCE_THRESHOLD, f"circuit at c = {c}: {err:.3%}"


def test_qsvt_suggests_a_degree():
    cfg, problem = _demo()
    circuit = CircuitSettings(method="qsvt", clock_qubits=0, degree=3)
    name, d = size_for_variance(problem, circuit, VARIANCE_THRESHOLD)
    assert name == "degree" and d is not None and d % 2 == 1
    assert model_variance_error(problem, replace(circuit, degree=d)) <= VARIANCE_THRESHOLD


def test_noise_warning_only_when_sigma2_is_far_above_the_ml2_fit():
    cfg, problem = _demo()  # σ² from target_condition = 20: 4.4, against 0.19 by ML-II (measured)
    doc = {"variance_rel_rmse": 0.0}
    lines = run_advice(cfg, problem, doc)
    assert len(lines) == 1 and "the noise variance an ML-II fit gives" in lines[0] and "test NLPD" in lines[0]
    fit = fit_ml2(problem.X, problem.y, problem.kernel, None, np.random.default_rng(cfg.readout.seed), restarts=2)
    at_fit = build_problem(problem.X, problem.y, fit.kernel, noise_variance=fit.noise_variance,
                           X_test=problem.X_test, y_test=problem.y_test)
    assert run_advice(cfg, at_fit, doc) == []
