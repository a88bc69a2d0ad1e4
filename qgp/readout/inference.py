"""Quantum GP inference end to end: a `Problem` in, a frozen `InferenceResult` out.

    result = infer(problem, CircuitSettings(...), ReadoutSettings(...))

builds the ``inverse`` and ``inverse_sqrt`` circuits for the padded A (given only A's a-priori
eigenvalue bounds), simulates them (amortised: one reference-register run, or the reference
register split into as many runs as the memory cap requires; per-point: one full circuit per test
point), turns outcome probabilities — exact, or sampled with ``shots`` —
into predictive means and latent variances (qgp.readout.estimators), and sets them beside the exact GP
with an error budget that adds one imperfection at a time. Before any of it the memory guard
checks every simulation the chosen strategy will make (`qgp.readout.plan.simulation_plan`, the plan
``qgp inspect`` prints) and the result lists the runs made (``simulation_runs``).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from qgp.circuits.algorithms import algorithm_of
from qgp.circuits.inversion import InversionCircuit
from qgp.classical.gp import count_nonpositive, nlpd, rmse
from qgp.classical.problem import Problem
from qgp.errors import QgpError
from qgp.classical.system import eigenvalue_bounds
from qgp.readout.budget import budget_stage, error_budget, max_abs, rel_rmse, shots_needed
from qgp.readout.builds import SIMULATED_FORM, cached_pair, clear_caches
from qgp.readout.estimators import (
    CircuitOperators,
    hadamard_probabilities,
    sample_hadamard,
    sample_variance,
    variance_probabilities,
)
from qgp.progress import progress as progress_message
from qgp.readout.filter_model import model_operators
from qgp.readout.noisy_outcomes import NoisyOutcomes, noisy_outcomes
from qgp.readout.plan import SimulationPlan, check_clock_qubits, simulation_plan
from qgp.readout.simulate import default_memory_cap, engine_scope, engines_used
from qgp.readout.strategies import STRATEGIES, Outcomes, StrategyInputs
from qgp.readout.summary import check_summary
from qgp.settings import CircuitSettings, GateNoise, ReadoutSettings

__all__ = [
    "InferenceResult",
    "ShotEstimates",
    "infer",
    "shot_estimates",
    "planned_qubits",
    "SIMULATED_FORM",
    "clear_caches",
    "unit_inputs",
]

Progress = Callable[[str], None]


def _stderr_progress(msg: str) -> None:
    """The default progress of `infer`: the ``"qgp"`` logger at INFO (silent unless logging is configured)."""
    progress_message(msg)


@dataclass(frozen=True)
class InferenceResult:
    """Both answers at every test point, their errors, and what the circuits cost.

    Variances are latent (of f); add ``noise_variance`` for the predictive variance of y.
    ``*_se`` are None without shots. ``p0, p1`` are the Hadamard-test probabilities of landing in
    Π with probe 0/1 and ``p_flag`` the variance circuit's P(flag = 1), all exact (shots = 0).
    """

    problem: Problem
    circuit: CircuitSettings
    readout: ReadoutSettings
    inverse: InversionCircuit
    inverse_sqrt: InversionCircuit
    mean_exact: np.ndarray
    variance_exact: np.ndarray
    mean_quantum: np.ndarray
    variance_quantum: np.ndarray
    variance_quantum_hadamard: np.ndarray
    mean_quantum_se: np.ndarray | None
    variance_quantum_se: np.ndarray | None
    p0: np.ndarray
    p1: np.ndarray
    p_flag: np.ndarray
    success_probability_inversion: float
    post_selection_failures: int | None
    error_budget: dict
    shots_needed: dict
    filter_model_max_abs_difference: float | None
    operators: CircuitOperators | None
    #: Which statevector engine ran ("numpy", "aer", "numpy+aer"; qgp.readout.simulate).
    engine: str
    #: The strategy that ran (``readout.strategy``, or what "auto" chose) and why.
    strategy: str
    strategy_reason: str
    elapsed_seconds: float
    timings: dict = field(default_factory=dict)
    #: The simulator runs behind the numbers: dicts with ``what``, ``qubits``, ``runs``,
    #: ``columns_per_run`` (reference-register columns per run, None without one) and
    #: ``from_cache`` (True: made by an earlier call with the same circuits, none in this one).
    simulation_runs: tuple = ()
    #: ``[gate_noise]`` (None: noiseless). With it, ``mean_quantum``/``variance_quantum`` are the
    #: noisy answers (with shots on top when ``readout.shots`` > 0), ``*_quantum_se`` combine the
    #: trajectory and shot standard errors (kept apart in ``*_trajectory_se``/``*_shot_se``) and
    #: ``mean_noiseless``/``variance_noiseless`` are the noiseless circuits' exact answers.
    gate_noise: GateNoise | None = None
    noisy: NoisyOutcomes | None = None
    mean_noiseless: np.ndarray | None = None
    variance_noiseless: np.ndarray | None = None
    mean_trajectory_se: np.ndarray | None = None
    variance_trajectory_se: np.ndarray | None = None
    mean_shot_se: np.ndarray | None = None
    variance_shot_se: np.ndarray | None = None

    @property
    def qubits(self) -> dict[str, int]:
        q = {
            "system": self.inverse.n_system_qubits,
            "clock": self.circuit.clock_qubits,
            "flag": 1,
            "block": self.inverse.n_block_qubits,
        }
        q["total"] = sum(q.values())
        return q

    @property
    def n_negative_variances(self) -> int:
        return count_nonpositive(self.variance_quantum)

    def table(self) -> dict[str, np.ndarray]:
        """One column per name, one row per test point: the columns of ``predictions.csv`` in order
        (the input columns, both answers, SEs with shots, the noisy columns with gate noise, the
        Hadamard-test variance, the ≤ 0 marker, success probabilities, the target when known)."""
        p = self.problem
        cols: dict[str, np.ndarray] = {name: p.X_test[:, i] for i, name in enumerate(p.inputs)}
        cols.update(mean_exact=self.mean_exact, variance_exact=self.variance_exact,
                    mean_quantum=self.mean_quantum, variance_quantum=self.variance_quantum)
        if self.mean_quantum_se is not None:
            cols.update(mean_quantum_se=self.mean_quantum_se, variance_quantum_se=self.variance_quantum_se)
        if self.gate_noise is not None:
            cols.update(mean_noiseless=self.mean_noiseless, variance_noiseless=self.variance_noiseless,
                        mean_trajectory_se=self.mean_trajectory_se, variance_trajectory_se=self.variance_trajectory_se,
                        success_probability_noisy=self.noisy.p0 + self.noisy.p1,
                        success_probability_variance_noisy=self.noisy.p_flag)
        cols.update(variance_quantum_hadamard=self.variance_quantum_hadamard,
                    variance_quantum_negative=(self.variance_quantum <= 0).astype(int),
                    success_probability=self.p0 + self.p1, success_probability_variance=self.p_flag)
        if p.y_test is not None:
            cols["target"] = p.y_test
        return cols

    def to_dataframe(self):
        """`table` as a pandas DataFrame (pandas needed), indexed by test point."""
        try:
            import pandas as pd
        except ImportError:
            raise QgpError("to_dataframe needs pandas; pip install pandas (or use table())") from None
        return pd.DataFrame(self.table())

    def __repr__(self) -> str:
        p = self.problem
        return (
            f"InferenceResult({algorithm_of(self.circuit).label(self.circuit)}, n_train={p.n_train}, n_test={p.n_test}, "
            f"qubits={self.qubits['total']}, κ={p.diagnostics.condition_number if p.diagnostics.condition_number is None else round(p.diagnostics.condition_number, 4)}, "
            f"mean max|error|={max_abs(self.mean_quantum - self.mean_exact):.3g}, "
            f"variance max|error|={max_abs(self.variance_quantum - self.variance_exact):.3g}, "
            f"shots={self.readout.shots}, strategy={self.strategy}, engine={self.engine})"
        )

    def summary(self) -> dict:
        """The JSON-ready summary: the inference keys of `summary.json`, checked against the schema
        (`qgp.readout.summary.SUMMARY_KEYS`, listed in docs/summary.md)."""
        p = self.problem
        d = p.diagnostics
        q = self.qubits
        succ = self.p0 + self.p1
        out = {
            "n_train": p.n_train,
            "n_test": p.n_test,
            "system_qubits": q["system"],
            "clock_qubits": q["clock"],
            "ancilla_qubits": q["flag"] + q["block"],
            "block_qubits": q["block"],
            "total_qubits": q["total"],
            "condition_number": d.condition_number,
            "condition_number_bound": d.condition_number_bound,
            "effective_condition_number": self.inverse.effective_condition_number,
            "sparsity": d.sparsity,
            "noise_variance": p.noise_variance,
            "noise_source": p.noise_source,
            "encoding": algorithm_of(self.circuit).encoding(self.circuit),
            "evolution": algorithm_of(self.circuit).evolution(self.circuit),
            "method": self.circuit.method,
            "polynomial_degree": _poly(self.inverse, "degree"),
            "polynomial_degree_inverse_sqrt": _poly(self.inverse_sqrt, "degree"),
            "block_encoding_calls": self.inverse.n_oracle_calls,
            "polynomial_max_error": _poly(self.inverse, "max_error"),
            "polynomial_scale": _poly(self.inverse, "scale"),
            "shots": self.readout.shots,
            "seed": self.readout.seed,
            "strategy": self.strategy,
            "strategy_reason": self.strategy_reason,
            "simulated_form": SIMULATED_FORM,
            "engine": self.engine,
            "prior_mean": p.y_offset,
            "prior_mean_note": (
                "the training mean of the target was subtracted before inference and added back to every mean"
                if p.center
                else "no prior mean was subtracted ([data] center = false)"
            ),
            "variance_kind": "latent (of f); add noise_variance for the predictive variance of y",
            "mean_max_abs_error": max_abs(self.mean_quantum - self.mean_exact),
            "variance_max_abs_error": max_abs(self.variance_quantum - self.variance_exact),
            "variance_hadamard_max_abs_error": max_abs(self.variance_quantum_hadamard - self.variance_exact),
            "mean_rel_rmse": rel_rmse(self.mean_quantum - self.mean_exact, self.mean_exact - p.y_offset),
            "variance_rel_rmse": rel_rmse(self.variance_quantum - self.variance_exact, self.variance_exact),
            "negative_variances": self.n_negative_variances,
            "success_probability_min": float(np.min(succ)),
            "success_probability_mean": float(np.mean(succ)),
            "success_probability_inversion": self.success_probability_inversion,
            "success_probability_variance_min": float(np.min(self.p_flag)),
            "success_probability_variance_mean": float(np.mean(self.p_flag)),
            "post_selection_failures": self.post_selection_failures,
            "scale_inverse": self.inverse.scale,
            "scale_inverse_sqrt": self.inverse_sqrt.scale,
            "alpha": self.inverse.alpha,
            "evolution_time": self.inverse.evolution_time,
            "filter_floor": self.inverse.floor,
            "filtered_clock_values": self.inverse.n_filtered,
            "filter_model_max_abs_difference": self.filter_model_max_abs_difference,
            "error_budget": self.error_budget,
            "shots_needed": self.shots_needed,
            "elapsed_seconds": self.elapsed_seconds,
            "timings": self.timings,
            "simulation_runs": [dict(r) for r in self.simulation_runs],
        }
        if self.gate_noise is not None:
            out["gate_noise"] = self._gate_noise_summary()
        if p.y_test is not None:
            noise = p.noise_variance
            out["test_rmse"] = {"exact": rmse(p.y_test, self.mean_exact), "quantum": rmse(p.y_test, self.mean_quantum)}
            out["test_nlpd"] = {
                "exact": _none_if_nan(nlpd(p.y_test, self.mean_exact, self.variance_exact + noise)),
                "quantum": _none_if_nan(nlpd(p.y_test, self.mean_quantum, self.variance_quantum + noise)),
                "note": "NLPD of y with predictive variance = latent + noise; null when any variance is ≤ 0 "
                "(never clipped; see negative_variances)",
            }
        check_summary(out, stage="inference")
        return out


    def _gate_noise_summary(self) -> dict:
        g, noisy = self.gate_noise, self.noisy
        circuits = 2 * self.problem.n_test
        counts = noisy.gate_counts
        w0 = noisy.no_error_probability
        return {
            "two_qubit": float(g.two_qubit),
            "one_qubit": float(g.one_qubit),
            "readout": float(g.readout),
            "basis": list(g.basis),
            "method": g.method,
            "trajectories": int(noisy.trajectories),
            "seed": int(g.seed),
            "mean_max_abs_error_noiseless": max_abs(self.mean_noiseless - self.mean_exact),
            "variance_max_abs_error_noiseless": max_abs(self.variance_noiseless - self.variance_exact),
            "mean_trajectory_se_max": max_abs(self.mean_trajectory_se),
            "variance_trajectory_se_max": max_abs(self.variance_trajectory_se),
            "two_qubit_gates_mean_circuit": counts["mean_circuit"]["two_qubit"],
            "two_qubit_gates_variance_circuit": counts["variance_circuit"]["two_qubit"],
            "one_qubit_gates_mean_circuit": counts["mean_circuit"]["one_qubit"],
            "success_probability_min": float(np.min(noisy.p0 + noisy.p1)),
            "success_probability_variance_min": float(np.min(noisy.p_flag)),
            "no_error_probability_min": None if w0 is None else w0["mean_circuit_min"],
            "qubits": int(noisy.qubits),
            "seconds": float(noisy.seconds),
            "seconds_per_trajectory": (
                None if g.method == "density_matrix" else float(noisy.seconds) / (circuits * noisy.trajectories)
            ),
            "note": "noise acts on the gate form (basis above, optimisation level 0); mean_quantum and "
            "variance_quantum are the noisy answers; 'effective' is the per-block model, whose error "
            "against the gate-level runs is measured in experiments/noise_calibration.py",
        }


def _poly(inv: InversionCircuit, attr: str):
    """An attribute of the circuit's QSVT polynomial (None for phase estimation)."""
    poly = inv.polynomial
    return None if poly is None else (int(getattr(poly, attr)) if attr == "degree" else float(getattr(poly, attr)))


def _none_if_nan(x: float) -> float | None:
    return None if not math.isfinite(x) else float(x)


def planned_qubits(problem: Problem, circuit: CircuitSettings, readout: ReadoutSettings) -> int:
    """Largest simulated width of ``readout.strategy``: the inversion plus a reference register
    (amortised; split when the one run does not fit) or a probe (per-point). See
    `qgp.readout.plan.simulation_plan`."""
    return simulation_plan(problem, circuit, readout).widest()


def _unit_columns(K: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Columns scaled to unit norm, with their norms; a zero column becomes e₀ (its answer is 0)."""
    norms = np.linalg.norm(K, axis=0)
    out = np.zeros_like(K)
    ok = norms > 0
    out[:, ok] = K[:, ok] / norms[ok]
    out[0, ~ok] = 1.0
    return out, norms


def unit_inputs(problem: Problem):
    """(ŷ, ‖y‖, k̂ columns, ‖k*‖ per test point): the padded, normalised circuit inputs."""
    yhat, y_norm = _unit_columns(problem.padded(problem.y_centered)[:, None])
    khat, k_norms = _unit_columns(problem.padded(problem.k_star))
    return yhat[:, 0], float(y_norm[0]), khat, k_norms


@dataclass(frozen=True)
class ShotEstimates:
    """Estimates from counts: D̂ = (n₀ − n₁)/N with Var(D̂) = (P₀ + P₁ − D²)/N (one multinomial),
    and P̂ = n_flag/N with Var = P(1 − P)/N; plug-in standard errors."""

    mean: np.ndarray
    variance: np.ndarray
    mean_se: np.ndarray
    variance_se: np.ndarray


def _shot_estimates(problem, inv, inv_sqrt, n0, n1, nf, shots: int) -> ShotEstimates:
    _, y_norm, _, k_norms = unit_inputs(problem)
    hp0, hp1, hpf = n0 / shots, n1 / shots, nf / shots
    nan = np.full(problem.n_test, np.nan)
    mean, var, _ = _estimates(problem, hp0, hp1, hpf, nan, y_norm, k_norms, inv, inv_sqrt)
    d_hat = hp0 - hp1
    mean_se = y_norm * k_norms / inv.scale * np.sqrt(np.clip(hp0 + hp1 - d_hat**2, 0.0, None) / shots)
    var_se = k_norms**2 / inv_sqrt.scale * np.sqrt(hpf * (1 - hpf) / shots)
    return ShotEstimates(mean=mean, variance=var, mean_se=mean_se, variance_se=var_se)


def shot_estimates(result: "InferenceResult", n0, n1, nf, shots: int) -> ShotEstimates:
    """Mean and latent variance with standard errors from counts n₀Π, n₁Π and n_flag of N shots."""
    return _shot_estimates(result.problem, result.inverse, result.inverse_sqrt, np.asarray(n0), np.asarray(n1), np.asarray(nf), shots)


def _estimates(problem, p0, p1, pf, pf_had, y_norm, k_norms, inv, inv_sqrt):
    d = p0 - p1
    mean = problem.y_offset + y_norm * k_norms * d / inv.scale
    quad = k_norms**2 * pf / inv_sqrt.scale
    quad_had = k_norms**2 * pf_had / inv.scale
    return mean, problem.k_star_star - quad, problem.k_star_star - quad_had


def _guard(problem: Problem, circuit: CircuitSettings, readout: ReadoutSettings) -> tuple[SimulationPlan, int]:
    """The memory guard, before any work that grows with n (the LCU's Pauli decomposition included):
    every simulation the chosen strategy makes, from the register sizes (qgp.readout.plan), against
    ``[readout] memory_cap`` or the default cap. That is read afresh when a run needs 1/64 of it or
    more; smaller runs may use a reading under a second old (`default_memory_cap`). Returns the
    plan and the cap."""
    check_clock_qubits(circuit)
    if readout.memory_cap_bytes is not None:
        cap = readout.memory_cap_bytes
        plan = simulation_plan(problem, circuit, readout, cap=cap)
    else:
        cap = default_memory_cap(max_age=1.0)
        plan = simulation_plan(problem, circuit, readout, cap=cap)
        if 64 * max((r.bytes for r in plan.runs()), default=0) > cap:
            cap = default_memory_cap()
            plan = simulation_plan(problem, circuit, readout, cap=cap)
    plan.require()
    return plan, cap


def _estimates_with_shots(inp: StrategyInputs, out: Outcomes, y_norm: float, k_norms: np.ndarray, say: Progress):
    """(mean, variance, variance from the Hadamard test) from exact probabilities, and — with
    shots — the sampled (mean, variance, their SEs, post-selection failures)."""
    problem, readout = inp.problem, inp.readout
    exact = _estimates(problem, out.p0, out.p1, out.p_flag, out.hadamard_kk, y_norm, k_norms, inp.inverse, inp.inverse_sqrt)
    if readout.shots == 0:
        return exact, None
    say(f"sampling {readout.shots} shots per test point (seed {readout.seed})")
    n0, n1, nf = STRATEGIES[inp.plan.strategy].counts(inp, out)
    est = _shot_estimates(problem, inp.inverse, inp.inverse_sqrt, n0, n1, nf, readout.shots)
    return exact, (est, int(np.sum(readout.shots - n0 - n1)))


def _models(inp: StrategyInputs, out: Outcomes) -> tuple[tuple, list[np.ndarray], list[np.ndarray] | None]:
    """(the error budget's two models, their closed-form operators, the circuits' own closed-form
    operators — None unless the method has an exact closed-form model and operators were
    simulated), from one eigendecomposition of A (`model_operators`)."""
    algorithm = algorithm_of(inp.circuit)
    models = algorithm.budget_models(inp.circuit, inp.bounds, inp.inverse, inp.inverse_sqrt)
    own = algorithm.closed_form_model(inp.circuit) and out.operators is not None
    operators = model_operators([*models, *((inp.inverse, inp.inverse_sqrt) if own else ())], inp.A)
    return models, operators[:2], (operators[2:] if own else None)


def _budget(inp: StrategyInputs, out: Outcomes, models, exact_gp, quantum, sampled, y_norm, k_norms, noisy=None) -> dict:
    """Error budget: exact GP → the reference oracle's phase estimation and filtering (closed-form
    model, qgp.circuits.methods.BUDGET_REFERENCE; needs only the clock grid's constants, not a
    circuit) → the chosen oracle → shots. ``models``: `_models`."""
    problem = inp.problem
    algorithm = algorithm_of(inp.circuit)
    (model_inv, model_sqrt), operators, _ = models
    vm = operators[0] @ inp.yhat
    mp0, mp1 = hadamard_probabilities(vm, inp.khat)
    mpf = variance_probabilities(operators[1], inp.khat)
    mean_model, var_model, _ = _estimates(
        problem, mp0, mp1, mpf, out.hadamard_kk, y_norm, k_norms, model_inv, model_sqrt
    )
    mean_exact, var_exact = exact_gp
    stages = [
        (algorithm.budget_stage, budget_stage(mean_model, var_model, mean_exact, var_exact)),
        ("oracle", budget_stage(quantum[0], quantum[1], mean_exact, var_exact)),
    ]
    if noisy is not None:
        stages.append(("gate_noise", budget_stage(noisy[0], noisy[1], mean_exact, var_exact)))
    if sampled is not None:
        stages.append(("shots", budget_stage(sampled[0].mean, sampled[0].variance, mean_exact, var_exact)))
    return error_budget(stages)


def _noisy_answers(inp: StrategyInputs, noisy: NoisyOutcomes, y_norm: float, k_norms: np.ndarray):
    """(mean, latent variance, their trajectory SEs) from the noisy probabilities, shapes (n_test,)."""
    problem = inp.problem
    mean, var, _ = _estimates(
        problem, noisy.p0, noisy.p1, noisy.p_flag, noisy.p_flag, y_norm, k_norms, inp.inverse, inp.inverse_sqrt
    )
    mean_se = y_norm * k_norms * noisy.d_se / inp.inverse.scale
    var_se = k_norms**2 * noisy.p_flag_se / inp.inverse_sqrt.scale
    return mean, var, mean_se, var_se


def _noisy_shots(inp: StrategyInputs, noisy: NoisyOutcomes, say: Progress):
    """Shots drawn by numpy from the noisy probabilities (one generator seeded by ``readout.seed``),
    as `_estimates_with_shots` returns them; None without shots."""
    shots = inp.readout.shots
    if shots == 0:
        return None
    say(f"sampling {shots} shots per test point from the noisy probabilities (seed {inp.readout.seed})")
    rng = np.random.default_rng(inp.readout.seed)
    n0, n1 = sample_hadamard(noisy.p0, noisy.p1, shots, rng)
    nf = sample_variance(noisy.p_flag, shots, rng)
    est = _shot_estimates(inp.problem, inp.inverse, inp.inverse_sqrt, n0, n1, nf, shots)
    return est, int(np.sum(shots - n0 - n1))


def _final(mean_q, var_q, est: ShotEstimates | None, noisy_answers):
    """(mean, variance, mean SE, variance SE) reported: shots over noisy over noiseless answers;
    trajectory and shot SEs add in quadrature (independent sources)."""
    if noisy_answers is None:
        if est is None:
            return mean_q, var_q, None, None
        return est.mean, est.variance, est.mean_se, est.variance_se
    mean_n, var_n, mean_tse, var_tse = noisy_answers
    if est is None:
        return mean_n, var_n, mean_tse, var_tse
    return est.mean, est.variance, np.hypot(est.mean_se, mean_tse), np.hypot(est.variance_se, var_tse)


def _model_difference(models, out: Outcomes) -> float | None:
    """Largest difference between the closed-form model and the simulated operators, where the
    method has an exact closed-form model and operators were simulated (``models``: `_models`)."""
    own = models[2]
    if own is None:
        return None
    own_B, own_M = own
    return max(max_abs(own_B - out.operators.B), max_abs(own_M - out.operators.M))


def infer(
    problem: Problem,
    circuit: CircuitSettings = CircuitSettings(),
    readout: ReadoutSettings = ReadoutSettings(),
    *,
    gate_noise: GateNoise | None = None,
    progress: Progress | None = _stderr_progress,
) -> InferenceResult:
    """Estimate the predictive mean and latent variance at ``problem.X_test`` with the circuits.

    guard (every simulation fits) → build (cached) → the strategy's outcome probabilities →
    estimates (and shots) → error budget.

    Parameters
    ----------
    problem : Problem
        The regularised system, training targets and test points (qgp.classical.problem).
    circuit, readout : CircuitSettings, ReadoutSettings
        The inversion circuit and how it is read out.
    gate_noise : GateNoise, optional
        ``[gate_noise]``: also simulate every test point's gate-form circuits under depolarising
        gate noise and read-out flips (qgp.readout.noisy_outcomes); the answers are then the noisy ones.
    progress : callable, optional
        Receives one message per stage (default: the ``"qgp"`` logger at INFO, silent unless logging is
        configured — `qgp.progress`; None for none at all).

    Returns
    -------
    InferenceResult
        Both answers at every test point (arrays of shape (n_test,)), their errors and costs.
    """
    say = progress or (lambda msg: None)
    t_start = time.perf_counter()
    timings: dict[str, float] = {}
    plan, cap = _guard(problem, circuit, readout)

    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    t0 = time.perf_counter()
    say(f"building circuits: {algorithm_of(circuit).label(circuit)}, {circuit.clock_qubits} clock qubits, {plan.widest()} qubits simulated")
    inv, inv_sqrt = cached_pair(A, circuit, bounds)
    timings["build"] = time.perf_counter() - t0
    if plan.block.is_bound or plan.block.qubits != inv.n_block_qubits:
        # The LCU's block register was an upper bound before the build: plan with the real one.
        plan = simulation_plan(problem, circuit, readout, cap=cap, block_qubits=inv.n_block_qubits)
        plan.require()

    yhat, y_norm, khat, k_norms = unit_inputs(problem)
    inp = StrategyInputs(problem, circuit, readout, A, bounds, inv, inv_sqrt, yhat, khat, cap, plan)
    t0 = time.perf_counter()
    sim_times: dict[str, float] = {"transpile": 0.0, "simulate": 0.0}
    with engine_scope(readout.engine) as used:
        out = STRATEGIES[plan.strategy].outcomes(inp, sim_times, say)
        elapsed = time.perf_counter() - t0
    # "transpile": preparing circuits for Aer (nothing for the native simulation form);
    # "simulate": the rest of this stage — circuit assembly, the simulator jobs, reading results.
    timings["transpile"] = sim_times["transpile"]
    timings["simulate"] = elapsed - sim_times["transpile"]

    t0 = time.perf_counter()
    exact = problem.exact.predict(problem.X_test)
    mean_exact, var_exact = exact.mean, exact.variance_latent
    noiseless_inp = inp if gate_noise is None else replace(inp, readout=replace(readout, shots=0))
    with engine_scope(readout.engine) as used_for_shots:
        (mean_q, var_q, var_had), sampled = _estimates_with_shots(noiseless_inp, out, y_norm, k_norms, say)
    used = used + used_for_shots + ([out.operators.engine] if out.operators is not None and not used else [])
    noisy = noisy_answers = None
    if gate_noise is not None:
        t_noise = time.perf_counter()
        with engine_scope(readout.engine) as used_for_noise:
            noisy = noisy_outcomes(inp, gate_noise, out, say)
        used = used + used_for_noise
        timings["gate_noise"] = time.perf_counter() - t_noise
        noisy_answers = _noisy_answers(inp, noisy, y_norm, k_norms)
        sampled = _noisy_shots(inp, noisy, say)
    models = _models(inp, out)
    budget = _budget(inp, out, models, (mean_exact, var_exact), (mean_q, var_q), sampled, y_norm, k_norms, noisy_answers)
    needed = shots_needed(problem, out.p0, out.p1, out.p_flag, y_norm, k_norms, inv, inv_sqrt, mean_exact, var_exact)
    est, failures = sampled if sampled is not None else (None, None)
    final_mean, final_var, mean_se, var_se = _final(mean_q, var_q, est, noisy_answers)
    timings["post_process"] = time.perf_counter() - t0 - timings.get("gate_noise", 0.0)
    return InferenceResult(
        problem=problem,
        circuit=circuit,
        readout=readout,
        inverse=inv,
        inverse_sqrt=inv_sqrt,
        mean_exact=mean_exact,
        variance_exact=var_exact,
        mean_quantum=final_mean,
        variance_quantum=final_var,
        variance_quantum_hadamard=var_had,
        mean_quantum_se=mean_se,
        variance_quantum_se=var_se,
        p0=out.p0,
        p1=out.p1,
        p_flag=out.p_flag,
        success_probability_inversion=out.success_probability_inversion,
        post_selection_failures=failures,
        error_budget=budget,
        shots_needed=needed,
        filter_model_max_abs_difference=_model_difference(models, out),
        operators=out.operators,
        engine=engines_used(used),
        strategy=plan.strategy,
        strategy_reason=plan.reason,
        elapsed_seconds=time.perf_counter() - t_start,
        timings=timings,
        simulation_runs=out.runs,
        gate_noise=gate_noise,
        noisy=noisy,
        mean_noiseless=None if noisy is None else mean_q,
        variance_noiseless=None if noisy is None else var_q,
        mean_trajectory_se=None if noisy is None else noisy_answers[2],
        variance_trajectory_se=None if noisy is None else noisy_answers[3],
        mean_shot_se=None if est is None else est.mean_se,
        variance_shot_se=None if est is None else est.variance_se,
    )
