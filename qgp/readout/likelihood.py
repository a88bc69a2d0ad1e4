"""The GP log marginal likelihood from the circuits: both of its terms, with standard errors.

    log p(y | X) = −½ yᵀA⁻¹y − ½ log det A − (n/2) log 2π        (Rasmussen & Williams 2006, eq. 2.30)

with y the centred targets. Following Zhao, Fitzsimons, Osborne, Roberts & Fitzsimons, "Quantum
algorithms for training Gaussian processes", PRA 100, 012304 (2019):

*Data fit* yᵀA⁻¹y = ‖y‖²·ŷᵀÃ⁻¹ŷ from the inversion circuits the predictions use, with ŷ as the
"test" vector: the ``inverse_sqrt`` circuit's success probability P(flag = 1) = C′·ŷᵀÃ⁻¹ŷ (the
estimate), and the Hadamard test with ŷ on both sides, P₀ − P₁ = C·ŷᵀÃ⁻¹ŷ (reported beside it).
Any read-out strategy (qgp.readout.strategies) gives them.

*Log-determinant* log det A = n·E[log λ̃] over the maximally mixed state of the n training rows
(a uniformly random row j, then the circuit). What each algorithm reads:

* phase estimation (any oracle): the clock value k of phase estimation alone, decoded to λ̃_k and
  clipped to the a-priori range [λ_lo, λ_hi] (the decoding knows no better; a clock value below
  the range would give log 0). Outcome value n·log λ̃_k. The distribution over k per input row
  comes from one run with a ``reference`` register (the maximally entangled state whose system
  half is maximally mixed), or several runs of a split register when that does not fit.
* QSVT: the Hadamard test of the even polynomial p(A/α) ≈ h·log(b/x)/log(b/a)
  (qgp.circuits.log_polynomial); outcomes (probe 0 ∧ Π, probe 1 ∧ Π, fail) with values
  n·[log(αb) − (log(b/a)/h)·(+1, −1, 0)]: row j gives P₀ − P₁ = p(A/α)_jj, so the mixed state's
  expectation is n·log(αb) − (log(b/a)/h)·tr p(A/α) = Σ_i [log(αb) − (log(b/a)/h)·p(λ_i/α)].

With ``probes`` = R > 0 the input is instead R random Rademacher states ẑ = z/√n, z ∈ {±1}ⁿ
(Hutchinson, Commun. Stat. Simul. Comput. 19, 433 (1990)): each gives an unbiased estimate of the
trace; their spread is reported (``trace_variance``) beside Hutchinson's exact variance for
Rademacher vectors, 2(‖F‖²_F − Σ F_ii²) of the operator F the circuit applies (Avron & Toledo,
J. ACM 58, 8 (2011), from memory).

Exact outcome probabilities (``shots = 0``) give the mixed state's expectation exactly; with shots,
the mixed state takes ``shots`` samples of (row, outcome) and each Rademacher probe ``shots``
samples, seeded by ``[readout] seed``; standard errors are the plug-in ones.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from qgp.circuits.algorithms import algorithm_of
from qgp.circuits.inversion import InversionCircuit
from qgp.classical.problem import Problem
from qgp.classical.system import EXACT_EIGEN_LIMIT, eigenvalue_bounds
from qgp.errors import QgpError
from qgp.readout.builds import LOG_DETERMINANT, SIMULATED_FORM, cached, cached_pair, inversion_key, qpe_body
from qgp.readout.estimators import reference_circuit
from qgp.readout.filter_model import clock_expectation, model_operator
from qgp.readout.plan import check_clock_qubits, simulation_plan
from qgp.readout.simulate import default_memory_cap, engine_scope, engines_used, run_statevectors, statevector_bytes
from qgp.readout.strategies import STRATEGIES, StrategyInputs
from qgp.settings import CircuitSettings, ReadoutSettings

__all__ = [
    "LOG_2PI",
    "TermEstimate",
    "LikelihoodEstimate",
    "LogDeterminantReadout",
    "estimate_log_marginal_likelihood",
    "exact_terms",
    "decoded_log_eigenvalues",
    "rademacher_probes",
    "hutchinson_variance",
]

Progress = Callable[[str], None]
LOG_2PI = math.log(2.0 * math.pi)


@dataclass(frozen=True)
class TermEstimate:
    """One term of the log marginal likelihood: the exact value (Cholesky), the circuits' estimate
    and its standard error (None: exact probabilities of the mixed state, nothing sampled), and the
    closed-form model's value (what the ideal circuit applies to A's exact eigenvalues; None where
    that model is not exact for the method)."""

    exact: float
    quantum: float
    quantum_se: float | None
    model: float | None = None

    @property
    def error(self) -> float:
        return self.quantum - self.exact

    def as_dict(self) -> dict:
        return {"exact": self.exact, "quantum": self.quantum, "quantum_se": self.quantum_se, "model": self.model}


@dataclass(frozen=True)
class LikelihoodEstimate:
    """The log marginal likelihood and its two terms, exact and from the circuits.

    ``data_fit`` is yᵀA⁻¹y and ``log_determinant`` log det A, of the centred problem the circuits
    see; ``data_fit_hadamard`` the Hadamard-test route to yᵀA⁻¹y (exact probabilities). With
    Rademacher probes, ``trace_variance`` is the sample variance of the per-probe log-det values
    (exact probabilities) and ``trace_variance_formula`` Hutchinson's variance of the operator the
    circuit applies. ``size`` is the clock register (``size_name`` "clock_qubits") or the QSVT
    log polynomial's degree ("degree").
    """

    n: int
    data_fit: TermEstimate
    log_determinant: TermEstimate
    data_fit_hadamard: float
    size: int
    size_name: str
    label: str
    trace_estimator: str
    probes: int
    shots: int
    trace_variance: float | None = None
    trace_variance_formula: float | None = None
    engine: str = "none"

    def _lml(self, fit: float, logdet: float) -> float:
        return -0.5 * fit - 0.5 * logdet - 0.5 * self.n * LOG_2PI

    @property
    def exact(self) -> float:
        return self._lml(self.data_fit.exact, self.log_determinant.exact)

    @property
    def quantum(self) -> float:
        return self._lml(self.data_fit.quantum, self.log_determinant.quantum)

    @property
    def quantum_se(self) -> float | None:
        """½·√(SE_fit² + SE_logdet²): the two terms come from independent runs."""
        ses = [s for s in (self.data_fit.quantum_se, self.log_determinant.quantum_se) if s is not None]
        return 0.5 * math.hypot(*ses) if ses else None

    def as_dict(self) -> dict:
        """The ``log_marginal_likelihood`` object of ``fit.json`` (hyperparameters added by the caller)."""
        return {
            "exact": self.exact,
            "quantum": self.quantum,
            "quantum_se": self.quantum_se,
            "data_fit": {**self.data_fit.as_dict(), "hadamard": self.data_fit_hadamard},
            "log_determinant": {
                **self.log_determinant.as_dict(),
                "trace_estimator": self.trace_estimator,
                "probes": self.probes,
                "trace_variance": self.trace_variance,
                "trace_variance_formula": self.trace_variance_formula,
            },
            "circuit": {"label": self.label, self.size_name: self.size, "shots": self.shots, "engine": self.engine},
        }


def exact_terms(problem: Problem) -> tuple[float, float]:
    """(yᵀA⁻¹y, log det A) of the centred problem, from the exact GP's factorisation (R&W Alg. 2.1)."""
    gp = problem.exact
    fit = float(gp.y_centered @ gp.alpha)
    logdet = -2.0 * gp.log_marginal_likelihood - fit - problem.n_train * LOG_2PI
    return fit, logdet


def decoded_log_eigenvalues(inv: InversionCircuit, bounds: tuple[float, float]) -> np.ndarray:
    """log λ̃_k for every clock value k, λ̃_k clipped to the a-priori range [λ_lo, λ_hi], shape (2^c,)."""
    lo, hi = (float(b) for b in bounds)
    return np.log(np.clip(np.asarray(inv.clock_eigenvalues, dtype=float), lo, hi))


def rademacher_probes(n: int, probes: int, rng: np.random.Generator) -> np.ndarray:
    """``probes`` Rademacher vectors z ∈ {±1}ⁿ as columns, shape (n, probes)."""
    return rng.choice(np.array([-1.0, 1.0]), size=(n, probes))


def hutchinson_variance(F: np.ndarray) -> float:
    """Var(zᵀFz) for Rademacher z: 2(‖S‖²_F − Σ S_ii²), S the symmetric part of F (Hutchinson 1990;
    Avron & Toledo 2011, from memory)."""
    S = 0.5 * (F + F.T)
    return float(2.0 * (np.sum(S * S) - np.sum(np.diag(S) ** 2)))


# -- the log-determinant read-out ----------------------------------------------------------------


@dataclass(frozen=True)
class LogDeterminantReadout:
    """What one algorithm's log-determinant circuit gives, per input state.

    ``row_distributions[j]``: outcome probabilities for training row j as input, shape
    (n, n_outcomes); ``values``: the log-det estimate each outcome stands for, shape (n_outcomes,);
    ``distribution(v)``: outcome probabilities for a unit input vector v of length 2^m.
    The estimate for input v is distribution(v) @ values; for z/√n (z Rademacher) it is
    offset + coefficient·zᵀ·``operator()``·z, which gives Hutchinson's variance (formed on demand:
    only the probes need it).
    """

    row_distributions: np.ndarray
    values: np.ndarray
    distribution: Callable[[np.ndarray], np.ndarray]
    operator: Callable[[], np.ndarray]
    offset: float
    coefficient: float
    size: int
    size_name: str
    model: float | None


def _reference_width(width: int, m: int, cap: int) -> int:
    """The largest reference register r ≤ m whose run (a state and a work copy) fits under ``cap``."""
    for r in range(m, -1, -1):
        if 2 * statevector_bytes(width + r) <= cap:
            return r
    return 0


def _reference_columns(target, m: int, cap: int, reduce, say: Progress, project: dict | None = None) -> list:
    """Run ``target`` (anything with ``circuit`` and ``n_system_qubits``) with a reference register
    over its system input, split into as many runs as ``cap`` needs; ``reduce(r, state)`` per run
    (``project``: see `qgp.readout.simulate.run_statevectors`)."""
    r = _reference_width(target.circuit.num_qubits, m, cap)
    if r < m:
        say(f"reference register split into {2 ** (m - r)} runs of 2^{r} columns")
    circuits = [reference_circuit(target, r, v) for v in range(2 ** (m - r))]
    return run_statevectors(circuits, cap=cap, reduce=lambda i, sv: reduce(r, sv), project=project)


def _phase_estimation_readout(problem, circuit, A, bounds, inv, cap, say) -> LogDeterminantReadout:
    """Phase estimation alone with a reference register: Ψ[j, k, rest] = the amplitude of clock
    value k for input row j (rest = block and system), read from the state before any rotation."""
    qpe = qpe_body(A, circuit, bounds, inv)
    target = replace(inv, circuit=qpe)
    m, c, b = inv.n_system_qubits, inv.clock_qubits, inv.n_block_qubits
    say(f"phase estimation with a reference register ({qpe.num_qubits + m} qubits) for the log-determinant")

    def reduce(r, sv):
        view = np.asarray(sv).reshape(2**r, 2**b, 2**c, 2**m) * math.sqrt(2**r)
        return np.ascontiguousarray(view.transpose(0, 2, 1, 3)).reshape(2**r, 2**c, 2 ** (b + m))

    psi = np.concatenate(_reference_columns(target, m, cap, reduce, say), axis=0)
    n = problem.n_train
    ell = decoded_log_eigenvalues(inv, bounds)
    rows = np.sum(np.abs(psi[:n]) ** 2, axis=2)

    def operator():
        return np.real(np.einsum("ikr,k,jkr->ij", psi[:n].conj(), ell, psi[:n]))

    def distribution(v):
        u = np.tensordot(np.asarray(v, dtype=complex), psi, axes=(0, 0))
        return np.sum(np.abs(u) ** 2, axis=1)

    model = None
    if algorithm_of(circuit).closed_form_model(circuit) and n <= EXACT_EIGEN_LIMIT:
        lam = np.linalg.eigvalsh(np.asarray(problem.A, dtype=float))
        model = float(np.sum(clock_expectation(inv, lam, ell)))
    return LogDeterminantReadout(rows, n * ell, distribution, operator, 0.0, 1.0, c, "clock_qubits", model)


def _qsvt_readout(problem, circuit, A, bounds, cap, say) -> LogDeterminantReadout:
    """The QSVT log polynomial's post-selected block B ≈ p(A/α) from a reference-register run, read
    by a Hadamard test: outcomes (probe 0 ∧ Π, probe 1 ∧ Π, fail), D = P₀ − P₁ = Re v†Bv."""
    from qgp.circuits.log_polynomial import build_log_circuit

    lc = build_log_circuit(A, circuit, bounds, form=SIMULATED_FORM)
    m, nb = lc.n_system_qubits, lc.n_block_qubits
    say(f"QSVT log polynomial (degree {lc.polynomial.degree}) with a reference register for the log-determinant")
    project = {m: 1, **{m + 1 + j: 0 for j in range(nb)}}

    def reduce(r, amps):
        return (np.asarray(amps).reshape(2**r, 2**m) * math.sqrt(2**r)).T

    B = np.concatenate(_reference_columns(lc, m, cap, reduce, say, project), axis=1)
    n = problem.n_train
    poly = lc.polynomial
    slope = math.log(poly.upper / poly.lower) / poly.height
    offset = n * math.log(lc.alpha * poly.upper)
    values = np.array([offset - n * slope, offset + n * slope, offset])
    norms2 = np.sum(np.abs(B[:, :n]) ** 2, axis=0)
    diag = np.real(np.diag(B)[:n])
    rows = np.stack([0.25 * (norms2 + 2 * diag + 1), 0.25 * (norms2 - 2 * diag + 1)], axis=1)
    rows = np.column_stack([rows, np.clip(1.0 - rows.sum(axis=1), 0.0, 1.0)])

    def distribution(v):
        v = np.asarray(v, dtype=complex)
        w = B @ v
        p0 = 0.25 * float(np.sum(np.abs(w + v) ** 2))
        p1 = 0.25 * float(np.sum(np.abs(w - v) ** 2))
        return np.array([p0, p1, max(0.0, 1.0 - p0 - p1)])

    model = None
    if n <= EXACT_EIGEN_LIMIT:
        lam = np.linalg.eigvalsh(np.asarray(problem.A, dtype=float))
        model = float(np.sum(lc.log_eigenvalue(poly(lam / lc.alpha))))
    return LogDeterminantReadout(
        rows, values, distribution, lambda: np.real(B[:n, :n]), offset, -slope, poly.degree, "degree", model
    )


def _log_determinant_readout(problem, circuit, readout, A, bounds, inv, cap, say) -> LogDeterminantReadout:
    key = inversion_key(A, circuit, f"log-determinant-{readout.engine}-{problem.n_train}", bounds)
    if algorithm_of(circuit).uses_clock:
        return cached(LOG_DETERMINANT, key, lambda: _phase_estimation_readout(problem, circuit, A, bounds, inv, cap, say))
    return cached(LOG_DETERMINANT, key, lambda: _qsvt_readout(problem, circuit, A, bounds, cap, say))


def _sampled(dist: np.ndarray, values: np.ndarray, shots: int, rng: np.random.Generator) -> tuple[float, float]:
    """(mean, plug-in variance of one shot) of ``values`` over ``shots`` draws from ``dist``."""
    p = np.clip(dist, 0.0, None)
    counts = rng.multinomial(shots, p / p.sum())
    mean = float(counts @ values) / shots
    var = float(counts @ (values - mean) ** 2) / shots
    return mean, var


def _log_determinant(ro: LogDeterminantReadout, n: int, size: int, readout: ReadoutSettings, probes: int):
    """(estimate, SE, sample variance of the probes' exact values, Hutchinson's variance) of log
    det A; ``size`` = 2^m, the length of the circuit's input."""
    shots = readout.shots
    rng = np.random.default_rng([readout.seed, 16])  # its own stream: the data-fit counts use the seed itself
    if probes == 0:
        dist = ro.row_distributions.mean(axis=0)
        if shots == 0:
            return float(dist @ ro.values), None, None, None
        mean, var = _sampled(dist, ro.values, shots, rng)
        return mean, math.sqrt(var / shots), None, None
    Z = rademacher_probes(n, probes, rng)
    exact_values, estimates = np.empty(probes), np.empty(probes)
    v = np.zeros(size)
    for r in range(probes):
        v[:n] = Z[:, r] / math.sqrt(n)
        dist = ro.distribution(v)
        exact_values[r] = float(dist @ ro.values)
        estimates[r] = exact_values[r] if shots == 0 else _sampled(dist, ro.values, shots, rng)[0]
    formula = ro.coefficient**2 * hutchinson_variance(ro.operator())
    if probes == 1:
        return float(estimates[0]), None, None, formula
    se = float(np.std(estimates, ddof=1) / math.sqrt(probes))
    return float(np.mean(estimates)), se, float(np.var(exact_values, ddof=1)), formula


# -- the data-fit term ----------------------------------------------------------------------------


def _data_fit(one: Problem, circuit, readout, A, bounds, inv, inv_sqrt, plan, cap, say):
    """(estimate, SE, Hadamard-test value, closed-form model or None) of yᵀA⁻¹y: the strategies'
    outcomes with one "test point" whose normalised cross-covariance is ŷ itself."""
    yc = one.padded(one.y_centered)
    y_norm2 = float(yc @ yc)
    if y_norm2 == 0.0:
        return 0.0, (None if readout.shots == 0 else 0.0), 0.0, 0.0
    yhat = yc / math.sqrt(y_norm2)
    inp = StrategyInputs(one, circuit, readout, A, bounds, inv, inv_sqrt, yhat, yhat[:, None], cap, plan)
    out = STRATEGIES[plan.strategy].outcomes(inp, {"transpile": 0.0, "simulate": 0.0}, say)
    hadamard = y_norm2 * float(out.p0[0] - out.p1[0]) / inv.scale
    estimate = y_norm2 * float(out.p_flag[0]) / inv_sqrt.scale
    se = None
    if readout.shots > 0:
        _, _, nf = STRATEGIES[plan.strategy].counts(inp, out)
        p = float(nf[0]) / readout.shots
        estimate = y_norm2 * p / inv_sqrt.scale
        se = y_norm2 / inv_sqrt.scale * math.sqrt(p * (1.0 - p) / readout.shots)
    model = None
    if algorithm_of(circuit).closed_form_model(circuit):
        model = y_norm2 * float(yhat @ model_operator(inv_sqrt, A) @ yhat) / inv_sqrt.scale
    return estimate, se, hadamard, model


def estimate_log_marginal_likelihood(
    problem: Problem,
    circuit: CircuitSettings = CircuitSettings(),
    readout: ReadoutSettings = ReadoutSettings(),
    *,
    probes: int = 0,
    progress: Progress | None = None,
) -> LikelihoodEstimate:
    """log p(y | X) of ``problem`` from the circuits, term by term, beside the exact value.

    Parameters
    ----------
    problem : Problem
        Training data, kernel and σ² (its test points are not used).
    circuit, readout : CircuitSettings, ReadoutSettings
        The inversion circuits (their ``inverse_sqrt`` circuit gives yᵀA⁻¹y) and how they are read:
        ``shots`` = 0 for exact outcome probabilities, else shots per circuit (the mixed state's
        log-det: ``shots`` draws of row and outcome), seeded by ``seed``.
    probes : int
        0: the log-det from the maximally mixed state of the n rows; R > 0: from R Rademacher
        states (Hutchinson), with their spread reported.
    progress : callable, optional
        Receives one message per stage.

    Returns
    -------
    LikelihoodEstimate
    """
    say = progress or (lambda msg: None)
    if not (isinstance(probes, (int, np.integer)) and probes >= 0):
        raise QgpError(f"probes must be an integer ≥ 0 (got {probes!r}); use 0 for the maximally mixed state")
    cap = readout.memory_cap_bytes if readout.memory_cap_bytes is not None else default_memory_cap()
    check_clock_qubits(circuit)
    one = replace(problem, X_test=problem.X[:1], y_test=None)
    # The memory guard before anything that grows with n: the data-fit's runs, then the log-det's.
    simulation_plan(one, circuit, readout, cap=cap).require()
    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    algorithm = algorithm_of(circuit)
    say(f"building circuits: {algorithm.label(circuit)}")
    inv, inv_sqrt = cached_pair(A, circuit, bounds)
    plan = simulation_plan(one, circuit, readout, cap=cap, block_qubits=inv.n_block_qubits)
    plan.require()
    with engine_scope(readout.engine) as used:
        fit, fit_se, fit_had, fit_model = _data_fit(one, circuit, readout, A, bounds, inv, inv_sqrt, plan, cap, say)
        ro = _log_determinant_readout(problem, circuit, readout, A, bounds, inv, cap, say)
    logdet, logdet_se, trace_var, trace_formula = _log_determinant(
        ro, problem.n_train, problem.padded_size, readout, probes
    )
    fit_exact, logdet_exact = exact_terms(problem)
    return LikelihoodEstimate(
        n=problem.n_train,
        data_fit=TermEstimate(fit_exact, fit, fit_se, fit_model),
        log_determinant=TermEstimate(logdet_exact, logdet, logdet_se, ro.model),
        data_fit_hadamard=fit_had,
        size=ro.size,
        size_name=ro.size_name,
        label=algorithm.label(circuit),
        trace_estimator="rademacher" if probes else "mixed",
        probes=int(probes),
        shots=int(readout.shots),
        trace_variance=trace_var,
        trace_variance_formula=trace_formula,
        engine=engines_used(used),
    )
