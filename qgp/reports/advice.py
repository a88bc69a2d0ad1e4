"""What `qgp run` warns about after a run, each warning with its fix.

* The quantum latent variance is off by more than ``variance_threshold`` (relative RMSE against the
  exact GP): the closed-form model of the ideal circuit (qgp.readout.filter_model) is evaluated at
  growing sizes — clock qubits for phase estimation (the exact-oracle model, as the error budget
  uses), the polynomial degree for QSVT — and the smallest size whose *model* meets the threshold is
  suggested. It is the model's answer, not a run's: the oracle, shots and noise add their own error.
* σ² is more than ``noise_ratio`` times the noise variance an exact ML-II fit gives (the κ lever's
  price): the fit's σ² and the exact GP's test NLPD at both are reported, with the keys to change.
"""

from __future__ import annotations

from dataclasses import replace
from types import SimpleNamespace

import numpy as np

from qgp.classical.gp import condition, fit_ml2, nlpd
from qgp.classical.problem import Problem
from qgp.classical.system import eigenvalue_bounds
from qgp.config import MAX_CLOCK_QUBITS
from qgp.readout.budget import rel_rmse
from qgp.readout.estimators import variance_probabilities
from qgp.readout.filter_model import model_operator
from qgp.readout.inference import unit_inputs
from qgp.settings import CircuitSettings, Config

__all__ = ["VARIANCE_THRESHOLD", "NOISE_RATIO", "model_variance_error", "size_for_variance", "run_advice"]

#: Relative RMSE of the latent variance above which `qgp run` warns.
VARIANCE_THRESHOLD = 0.05
#: σ² above this multiple of the ML-II noise variance gets a warning.
NOISE_RATIO = 10.0
# Largest QSVT inversion degree the suggestion searches (its polynomial build takes ~1 s there).
_MAX_DEGREE = 4001


def _qsvt_variance_model(problem: Problem, circuit: CircuitSettings, bounds):
    from qgp.circuits.methods.encodings import get_encoding
    from qgp.circuits.qsvt_inversion import qsvt_polynomial, qsvt_scale

    alpha = float(get_encoding(circuit.encoding).build(problem.A_padded).alpha)
    poly = qsvt_polynomial(circuit, "inverse_sqrt", alpha / bounds[0])
    return SimpleNamespace(polynomial=poly, alpha=alpha, rotation="inverse_sqrt", scale=qsvt_scale(poly, "inverse_sqrt", bounds[0]))


def model_variance_error(problem: Problem, circuit: CircuitSettings) -> float:
    """Relative RMSE of the latent variance the ideal circuit of ``circuit`` gives at the test points
    (closed-form model: the exact-oracle clock model, or the QSVT polynomial) against the exact GP."""
    from qgp.circuits.algorithms import algorithm_of
    from qgp.circuits.inversion import budget_reference_model

    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    if algorithm_of(circuit).uses_clock:
        model = budget_reference_model(circuit, "inverse_sqrt", bounds)
    else:
        model = _qsvt_variance_model(problem, circuit, bounds)
    _, _, khat, k_norms = unit_inputs(problem)
    p_flag = variance_probabilities(model_operator(model, A), khat)
    variance = problem.k_star_star - k_norms**2 * p_flag / model.scale
    exact = problem.exact.predict(problem.X_test).variance_latent
    return rel_rmse(variance - exact, exact)


def size_for_variance(problem: Problem, circuit: CircuitSettings, threshold: float) -> tuple[str, int | None]:
    """("clock_qubits" or "degree", the smallest size above the config's whose model meets
    ``threshold``; None when none up to the search's limit does)."""
    from qgp.circuits.algorithms import algorithm_of

    if algorithm_of(circuit).uses_clock:
        for c in range(circuit.clock_qubits + 1, MAX_CLOCK_QUBITS + 1):
            if model_variance_error(problem, replace(circuit, clock_qubits=c)) <= threshold:
                return "clock_qubits", c
        return "clock_qubits", None
    d = circuit.degree if circuit.degree is not None else 1
    while d < _MAX_DEGREE:
        d = 2 * d + 1
        if model_variance_error(problem, replace(circuit, degree=d, target_error=None)) <= threshold:
            return "degree", d
    return "degree", None


def run_advice(cfg: Config, problem: Problem, doc: dict, *, variance_threshold: float = VARIANCE_THRESHOLD,
               noise_ratio: float = NOISE_RATIO) -> list[str]:
    """The warnings of a finished run (``doc``: its summary.json), one line each, with the fix.

    Parameters
    ----------
    cfg : Config
    problem : Problem
        The run's problem (`qgp.classical.problem.problem_from_config`).
    doc : dict
        The run's summary document (``variance_rel_rmse``, ``noise_variance``).
    variance_threshold, noise_ratio : float

    Returns
    -------
    list of str
    """
    lines = []
    err = doc.get("variance_rel_rmse")
    if err is not None and err > variance_threshold:
        name, size = size_for_variance(problem, cfg.circuit, variance_threshold)
        fix = (f"the closed-form model meets it at [circuit] {name} = {size} (the ideal circuit's answer; the oracle "
               "and shots add their own error)") if size is not None else f"no [circuit] {name} the model searched meets it"
        lines.append(f"warning: the quantum variance is off by {err:.1%} (relative RMSE, threshold {variance_threshold:.0%}); {fix}")
    fit = fit_ml2(problem.X, problem.y, problem.kernel, None, np.random.default_rng(cfg.readout.seed), restarts=2,
                  center=problem.center)
    ratio = problem.noise_variance / fit.noise_variance if fit.noise_variance > 0 else np.inf
    if ratio > noise_ratio:
        text = (f"warning: σ² = {problem.noise_variance:.4g} is {ratio:.0f}× the noise variance an ML-II fit gives "
                f"({fit.noise_variance:.4g})")
        if problem.y_test is not None:
            scores = []
            for kernel, noise in ((problem.kernel, problem.noise_variance), (fit.kernel, fit.noise_variance)):
                pred = condition(problem.X, problem.y, kernel, noise, center=problem.center).predict(problem.X_test)
                scores.append(nlpd(problem.y_test, pred.mean, pred.variance_predictive))
            text += f"; exact-GP test NLPD {scores[0]:.3f} here against {scores[1]:.3f} at the ML-II fit"
        lines.append(text + "; the κ lever costs accuracy: lower [noise] target_condition or set [noise] variance "
                     "(or [kernel] fit = true)")
    return lines
