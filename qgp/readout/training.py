"""ML-II with the circuits: hyperparameters that maximise the circuits' estimate of log p(y | X).

The objective is `qgp.readout.likelihood.estimate_log_marginal_likelihood` at θ = [log a, log ℓ…,
log σ²] (each evaluation builds A, its circuits and simulates them). It is not smooth in θ — phase
estimation's admitted clock values and the QSVT degree needed change in steps — and with shots it is
random, so the optimiser is derivative-free: Nelder–Mead (Nelder & Mead, Comput. J. 7, 308 (1965);
scipy's bounded implementation) on the same log-box and from the same starts as the exact ML-II
(`qgp.classical.gp.ml2_search_space`). With shots every evaluation reuses the one ``[readout] seed``
(common random numbers: the objective is then a fixed function of θ, so the simplex compares points
rather than fresh noise; its optimum carries the shot error of that one draw, reported as the SE).

Where A's a-priori condition number exceeds what the circuits resolve, they lose the small
eigenvalues — yᵀA⁻¹y is underestimated and the LML estimate runs away upwards (measured on the demo:
+137 where the exact value is −8·10¹⁰, at σ² → 0). So the search is confined to
κ_b(θ) = λ_hi/λ_lo ≤ ``max_condition`` (the a-priori bound the circuits are built for; penalised
outside, so the simplex walks back in). ``objective = "exact"`` runs the same search on the exact
LML: the control that separates the constraint's effect from the circuits'.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.optimize

from qgp.classical.gp import ml2_search_space
from qgp.classical.kernels import Kernel
from qgp.classical.problem import build_problem
from qgp.errors import QgpError
from qgp.progress import Bar
from qgp.readout.likelihood import LikelihoodEstimate, estimate_log_marginal_likelihood
from qgp.settings import CircuitSettings, ReadoutSettings

__all__ = ["CircuitFit", "circuit_problem", "fit_ml2_circuit"]

Progress = Callable[[str], None]

# Objective value where the circuits cannot be built or A is not positive definite: finite, so the
# simplex shrinks away from it instead of failing.
_INFEASIBLE = 1e25
# The first simplex steps e^{±0.5} (×1.65) in each hyperparameter: ML-II optima are broad in log space.
_SIMPLEX_STEP = 0.5


@dataclass(frozen=True)
class CircuitFit:
    """The optimum: kernel, σ², the objective's LML there, the circuits' estimate there with its
    terms (None for ``objective = "exact"``), the exact LML there, and how the search went
    (``evaluations`` objective calls over ``starts`` starts; a-priori κ_b at the optimum)."""

    kernel: Kernel
    noise_variance: float
    log_marginal_likelihood: float
    log_marginal_likelihood_exact: float
    estimate: LikelihoodEstimate | None
    evaluations: int
    starts: int
    converged: bool
    condition_number_bound: float
    max_condition: float | None


def circuit_problem(X, y, kernel: Kernel, noise_variance: float, center: bool = True):
    """The `Problem` the objective simulates: training data only (one placeholder test point)."""
    X = np.asarray(X, dtype=float)
    return build_problem(X, y, kernel, noise_variance=noise_variance, X_test=X[:1], center=center)


def fit_ml2_circuit(
    X,
    y,
    kernel: Kernel,
    circuit: CircuitSettings,
    readout: ReadoutSettings,
    rng: np.random.Generator,
    *,
    restarts: int = 1,
    max_evaluations: int = 120,
    probes: int = 0,
    max_condition: float | None = None,
    objective: Literal["circuits", "exact"] = "circuits",
    center: bool = True,
    progress: Progress | None = None,
) -> CircuitFit:
    """Maximise the circuits' log marginal likelihood over signal variance, lengthscale(s) and σ².

    Parameters
    ----------
    X : array of shape (n, d)
    y : array of shape (n,)
    kernel : Kernel
        The family and the first start.
    circuit, readout : CircuitSettings, ReadoutSettings
        The circuits and their read-out at every evaluation (``readout.seed`` fixed).
    rng : numpy.random.Generator
        The random starts (drawn as `qgp.classical.gp.fit_ml2` draws them).
    restarts, max_evaluations : int
        Random starts beyond the kernel's own, and objective calls per start.
    probes : int
        The log-determinant's trace estimator (`estimate_log_marginal_likelihood`).
    max_condition : float, optional
        Largest a-priori κ_b = λ_hi/λ_lo searched (None: no limit).
    objective : "circuits" or "exact"
        The circuits' estimate, or the exact LML with the same optimiser and limit (the control).
    center : bool
    progress : callable, optional

    Returns
    -------
    CircuitFit
    """
    say = progress or (lambda msg: None)
    if objective not in ("circuits", "exact"):
        raise QgpError(f"objective must be 'circuits' or 'exact', got {objective!r}")
    if max_condition is not None and not max_condition > 1:
        raise QgpError(f"max_condition must exceed 1 (got {max_condition!r}); it bounds κ = λ_hi/λ_lo")
    X = np.asarray(X, dtype=float)
    if X.ndim == 1:
        X = X[:, None]
    y = np.asarray(y, dtype=float)
    yc = y - (float(np.mean(y)) if center else 0.0)
    bounds, starts = ml2_search_space(X, yc, kernel, rng, restarts, True)
    p = kernel.theta.size
    calls = [0]

    def problem_at(theta: np.ndarray):
        return circuit_problem(X, y, kernel.with_theta(theta[:p]), float(np.exp(theta[p])), center)

    def value(problem) -> tuple[float, LikelihoodEstimate | None]:
        if objective == "exact":
            return problem.exact.log_marginal_likelihood, None
        est = estimate_log_marginal_likelihood(problem, circuit, readout, probes=probes)
        return est.quantum, est

    def negative(theta: np.ndarray) -> float:
        calls[0] += 1
        meter.update(1)
        try:
            problem = problem_at(theta)
            kb = problem.diagnostics.condition_number_bound
            if max_condition is not None and kb > max_condition:
                # Outside the circuits' range: a penalty that falls towards it, so the simplex returns.
                return _INFEASIBLE * (1.0 + math.log(kb / max_condition))
            v = value(problem)[0]
        except QgpError:
            return _INFEASIBLE * 10.0
        return -v if math.isfinite(v) else _INFEASIBLE * 10.0

    best = None
    # The bar counts each start's evaluation budget; a start that converges early skips the rest of it.
    with Bar(len(starts) * max_evaluations, f"ML-II ({objective})", unit="evaluation") as meter:
        for i, x0 in enumerate(starts):
            say(f"ML-II on the {objective} LML: start {i + 1} of {len(starts)}")
            before = meter.n
            result = scipy.optimize.minimize(
                negative,
                x0,
                method="Nelder-Mead",
                bounds=list(map(tuple, bounds)),
                options={"maxfev": max_evaluations, "initial_simplex": _simplex(x0, bounds), "xatol": 1e-3, "fatol": 1e-4},
            )
            meter.update(max(0, max_evaluations - (meter.n - before)))
            if result.fun < _INFEASIBLE and (best is None or result.fun < best.fun):
                best = result
    if best is None:
        raise QgpError(
            f"the ML-II search on the {objective} LML found no hyperparameters inside the limits"
            + (f" (a-priori κ ≤ {max_condition:g})" if max_condition is not None else "")
            + "; raise [fit] max_condition, give more restarts or check the circuits with `qgp inspect`"
        )
    problem = problem_at(best.x)
    lml, est = value(problem)
    return CircuitFit(
        kernel=problem.kernel,
        noise_variance=problem.noise_variance,
        log_marginal_likelihood=float(lml),
        log_marginal_likelihood_exact=problem.exact.log_marginal_likelihood,
        estimate=est,
        evaluations=calls[0],
        starts=len(starts),
        converged=bool(best.success),
        condition_number_bound=float(problem.diagnostics.condition_number_bound),
        max_condition=max_condition,
    )


def _simplex(x0: np.ndarray, bounds: np.ndarray) -> np.ndarray:
    """x0 and one step of ±`_SIMPLEX_STEP` along each axis, inwards where the box is in the way."""
    lo, hi = bounds[:, 0], bounds[:, 1]
    points = [x0]
    for i in range(x0.size):
        step = _SIMPLEX_STEP if x0[i] + _SIMPLEX_STEP <= hi[i] else -_SIMPLEX_STEP
        x = x0.copy()
        x[i] = np.clip(x0[i] + step, lo[i], hi[i])
        points.append(x)
    return np.array(points)
