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

import hashlib
import math
import sys
import threading
import time
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np
from qiskit import QuantumCircuit

from qgp.readout.estimators import (
    CircuitOperators,
    hadamard_probabilities,
    operators_from_reference_run,
    per_point_counts,
    per_point_hadamard,
    per_point_probabilities,
    sample_hadamard,
    sample_variance,
    variance_probabilities,
)
from qgp.readout.filter_model import model_operator
from qgp.classical.gp import count_nonpositive, nlpd, rmse
from qgp.readout.plan import check_clock_qubits, simulation_plan
from qgp.circuits.inversion import InversionCircuit, budget_reference_model, build_inversion, postselected_system_amplitudes
from qgp.circuits.methods import get_method
from qgp.circuits.phase_estimation import phase_estimation_circuit, phase_oracle
from qgp.classical.problem import Problem
from qgp.settings import CircuitSettings, ReadoutSettings
from qgp.readout.simulate import default_memory_cap, run_statevectors
from qgp.classical.system import eigenvalue_bounds

__all__ = [
    "InferenceResult",
    "ShotEstimates",
    "infer",
    "shot_estimates",
    "planned_qubits",
    "SIMULATED_FORM",
    "clear_caches",
]

#: The circuit form every simulation uses (fused controlled powers, diagonal rotation); the gate
#: form is the same operator (tests/test_inversion.py) and is what resources and exports count.
SIMULATED_FORM = "simulation"

Progress = Callable[[str], None]


def _stderr_progress(msg: str) -> None:
    print(f"qgp: {msg}", file=sys.stderr, flush=True)


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
    elapsed_seconds: float
    timings: dict = field(default_factory=dict)
    #: The simulator runs behind the numbers: dicts with ``what``, ``qubits``, ``runs``,
    #: ``columns_per_run`` (reference-register columns per run, None without one) and
    #: ``from_cache`` (True: made by an earlier call with the same circuits, none in this one).
    simulation_runs: tuple = ()

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

    def summary(self) -> dict:
        """The JSON-ready summary (`summary.json` keys; see docs)."""
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
            "encoding": get_method(self.circuit.evolution).encoding(self.circuit),
            "evolution": self.circuit.evolution,
            "shots": self.readout.shots,
            "seed": self.readout.seed,
            "strategy": self.readout.strategy,
            "simulated_form": SIMULATED_FORM,
            "prior_mean": p.y_offset,
            "prior_mean_note": (
                "the training mean of the target was subtracted before inference and added back to every mean"
                if p.center
                else "no prior mean was subtracted ([data] center = false)"
            ),
            "variance_kind": "latent (of f); add noise_variance for the predictive variance of y",
            "mean_max_abs_error": _max_abs(self.mean_quantum - self.mean_exact),
            "variance_max_abs_error": _max_abs(self.variance_quantum - self.variance_exact),
            "variance_hadamard_max_abs_error": _max_abs(self.variance_quantum_hadamard - self.variance_exact),
            "mean_rel_rmse": _rel_rmse(self.mean_quantum - self.mean_exact, self.mean_exact - p.y_offset),
            "variance_rel_rmse": _rel_rmse(self.variance_quantum - self.variance_exact, self.variance_exact),
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
        if p.y_test is not None:
            noise = p.noise_variance
            out["test_rmse"] = {"exact": rmse(p.y_test, self.mean_exact), "quantum": rmse(p.y_test, self.mean_quantum)}
            out["test_nlpd"] = {
                "exact": _none_if_nan(nlpd(p.y_test, self.mean_exact, self.variance_exact + noise)),
                "quantum": _none_if_nan(nlpd(p.y_test, self.mean_quantum, self.variance_quantum + noise)),
                "note": "NLPD of y with predictive variance = latent + noise; null when any variance is ≤ 0 "
                "(never clipped; see negative_variances)",
            }
        return out


def _none_if_nan(x: float) -> float | None:
    return None if not math.isfinite(x) else float(x)


def _max_abs(x: np.ndarray) -> float:
    return float(np.max(np.abs(x)))


def _rel_rmse(err: np.ndarray, ref: np.ndarray) -> float:
    """RMSE relative to the RMS of the reference (the centred mean: what the circuit estimates)."""
    scale = math.sqrt(float(np.mean(ref**2)))
    return math.sqrt(float(np.mean(err**2))) / scale if scale > 0 else math.inf


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


def _unit_inputs(problem: Problem):
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
    _, y_norm, _, k_norms = _unit_inputs(problem)
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


def _budget_stage(mean, var, mean_ref, var_ref) -> dict:
    return {
        "mean_max_abs_error": _max_abs(mean - mean_ref),
        "mean_rmse": math.sqrt(float(np.mean((mean - mean_ref) ** 2))),
        "variance_max_abs_error": _max_abs(var - var_ref),
        "variance_rmse": math.sqrt(float(np.mean((var - var_ref) ** 2))),
    }


def _error_budget(stages: list[tuple[str, dict]]) -> dict:
    """Errors after each added imperfection and the increments, which add up to the total."""
    out = {"order": [name for name, _ in stages], "stages": {}, "increments": {}}
    prev = None
    for name, metrics in stages:
        out["stages"][name] = metrics
        out["increments"][name] = {k: v - (prev[k] if prev else 0.0) for k, v in metrics.items()}
        prev = metrics
    out["total"] = prev
    out["note"] = (
        "ideal 1/λ on the exact spectrum (the exact GP, error 0) → phase-estimation resolution and filtering "
        "with the exact oracle (closed-form filter model) → the chosen oracle (circuit, exact probabilities) "
        "→ shot noise; each increment is the change in the metric when that imperfection is added"
    )
    return out


def _shots_needed(problem, p0, p1, pf, y_norm, k_norms, inv, inv_sqrt, mean_exact, var_exact) -> dict:
    """Shots for a standard error of 1% of max|μ − prior mean| (mean) and of max prior variance.

    Plain sampling: N = scale²·Var/ε² (~1/ε²). Amplitude estimation (Brassard, Høyer, Mosca & Tapp
    2002, Thm 12: error ≈ π√(p(1−p))/M after M oracle calls) needs M ≈ scale·π·Σ√(p(1−p))/ε
    (~1/ε) — an estimate, not a simulation.
    """
    eps_mean = 0.01 * _max_abs(mean_exact - problem.y_offset)
    scale_m = y_norm * k_norms / inv.scale
    d = p0 - p1
    var_d = np.clip(p0 + p1 - d**2, 0.0, None)
    eps_var = 0.01 * float(np.max(problem.k_star_star))
    scale_v = k_norms**2 / inv_sqrt.scale
    plain_mean = float(np.max(scale_m**2 * var_d)) / eps_mean**2 if eps_mean > 0 else None
    ae_mean = (
        float(np.max(scale_m * math.pi * (np.sqrt(p0 * (1 - p0)) + np.sqrt(p1 * (1 - p1))))) / eps_mean
        if eps_mean > 0
        else None
    )
    plain_var = float(np.max(scale_v**2 * pf * (1 - pf))) / eps_var**2
    ae_var = float(np.max(scale_v * math.pi * np.sqrt(pf * (1 - pf)))) / eps_var
    return {
        "mean_target_se": eps_mean,
        "mean_shots_plain": _ceil(plain_mean),
        "mean_oracle_calls_amplitude_estimation": _ceil(ae_mean),
        "variance_target_se": eps_var,
        "variance_shots_plain": _ceil(plain_var),
        "variance_oracle_calls_amplitude_estimation": _ceil(ae_var),
        "note": "per test point, worst case over test points; mean target = 1% of max|μ − prior mean|, "
        "variance target = 1% of the largest prior variance k(x*, x*); amplitude-estimation counts are "
        "estimates (Brassard et al. 2002), not simulated",
    }


def _ceil(x):
    return None if x is None or not math.isfinite(x) else int(math.ceil(x))


# -- caches: each distinct circuit is built (and simulated with a reference register) once -------
#
# Keyed by the matrix's bytes (SHA-256), the circuit settings, the rotation, the bounds and the
# form, so a sweep that revisits a matrix with another seed, shot count or test set reuses the
# circuits and, for the amortised strategy, the operators B and M (no simulation at all). Small:
# a few large LCU walks would otherwise hold hundreds of MB.
_CACHE_SIZE = 8
_CACHE_LOCK = threading.Lock()
_INVERSIONS: OrderedDict = OrderedDict()
_OPERATORS: OrderedDict = OrderedDict()
_QPE_BODIES: OrderedDict = OrderedDict()


def clear_caches() -> None:
    """Forget every cached circuit and operator (benchmarks time cold runs with this)."""
    with _CACHE_LOCK:
        _INVERSIONS.clear()
        _OPERATORS.clear()
        _QPE_BODIES.clear()


def _matrix_key(A: np.ndarray) -> str:
    a = np.ascontiguousarray(A, dtype=float)
    return hashlib.sha256(repr(a.shape).encode() + a.tobytes()).hexdigest()


def _cached(cache: OrderedDict, key, make):
    with _CACHE_LOCK:
        if key in cache:
            cache.move_to_end(key)
            return cache[key]
    value = make()  # outside the lock: builds can take seconds
    with _CACHE_LOCK:
        cache[key] = value
        while len(cache) > _CACHE_SIZE:
            cache.popitem(last=False)
    return value


def _inversion_key(A, circuit: CircuitSettings, rotation: str, bounds) -> tuple:
    return (_matrix_key(A), circuit, rotation, tuple(float(b) for b in bounds), SIMULATED_FORM)


def _cached_pair(A, circuit: CircuitSettings, bounds) -> tuple[InversionCircuit, InversionCircuit]:
    """The ``inverse`` and ``inverse_sqrt`` circuits, built once around one shared phase oracle."""

    def make():
        inv = build_inversion(A, circuit, "inverse", bounds, form=SIMULATED_FORM)
        inv_sqrt = build_inversion(A, circuit, "inverse_sqrt", bounds, form=SIMULATED_FORM, oracle=inv.oracle)
        return inv, inv_sqrt

    return _cached(_INVERSIONS, _inversion_key(A, circuit, "pair", bounds), make)


def _qpe_body(A, circuit: CircuitSettings, bounds, inv: InversionCircuit):
    """The phase-estimation body of ``inv`` (same oracle and block encoding), for per-point circuits."""

    def make():
        oracle = inv.oracle
        if oracle is None:
            oracle = phase_oracle(A, circuit, bounds[1], form=SIMULATED_FORM, block_encoding=inv.block_encoding)
        return phase_estimation_circuit(oracle)

    return _cached(_QPE_BODIES, _inversion_key(A, circuit, "qpe", bounds), make)


def _with_preparation(inv: InversionCircuit, vector: np.ndarray) -> InversionCircuit:
    """``inv`` with the amplitude encoding of ``vector`` in front: what ``build_inversion(…,
    prepare=vector)`` builds, without building the rest again."""
    from qgp.circuits.encoding import amplitude_encoding

    qc = QuantumCircuit(*inv.circuit.qregs, name=inv.circuit.name)
    qc.compose(amplitude_encoding(vector, native=True), qubits=qc.qregs[0][:], inplace=True, copy=False)
    qc.compose(inv.circuit, inplace=True, copy=False)
    return replace(inv, circuit=qc)


def infer(
    problem: Problem,
    circuit: CircuitSettings = CircuitSettings(),
    readout: ReadoutSettings = ReadoutSettings(),
    *,
    progress: Progress | None = _stderr_progress,
) -> InferenceResult:
    """Estimate the predictive mean and latent variance at ``problem.X_test`` with the circuits."""
    say = progress or (lambda msg: None)
    t_start = time.perf_counter()
    timings: dict[str, float] = {}
    cap = readout.memory_cap_bytes if readout.memory_cap_bytes is not None else default_memory_cap()
    # The memory guard, before any work that grows with n (the LCU's Pauli decomposition included):
    # every simulation the chosen strategy makes, from the register sizes (qgp.readout.plan).
    check_clock_qubits(circuit)
    plan = simulation_plan(problem, circuit, readout, cap=cap)
    plan.require()
    width = plan.widest()

    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    t0 = time.perf_counter()
    say(f"building circuits: {circuit.evolution} oracle, {circuit.clock_qubits} clock qubits, {width} qubits simulated")
    inv, inv_sqrt = _cached_pair(A, circuit, bounds)
    timings["build"] = time.perf_counter() - t0
    if plan.block.is_bound or plan.block.qubits != inv.n_block_qubits:
        # The LCU's block register was an upper bound before the build: plan with the real one.
        plan = simulation_plan(problem, circuit, readout, cap=cap, block_qubits=inv.n_block_qubits)
        plan.require()

    yhat, y_norm, khat, k_norms = _unit_inputs(problem)

    t0 = time.perf_counter()
    sim_times: dict[str, float] = {"transpile": 0.0, "simulate": 0.0}
    operators = None
    runs: list[dict] = []
    if readout.strategy == "amortised":
        ref = plan.reference_qubits
        if ref is None:
            say("simulating the inversion once with a reference register (amortised)")
        else:
            say(
                "simulating the inversion with a split reference register (amortised): the one run on "
                f"{problem.system_qubits + inv.circuit.num_qubits} qubits with a saved state does not fit under "
                f"the memory cap of {cap / 2**30:.3g} GiB"
            )
        key = _inversion_key(A, circuit, "operators" if ref is None else f"operators-split-{ref}", bounds)
        made: list[bool] = []

        def simulate_operators():
            made.append(True)
            return operators_from_reference_run(
                inv, inv_sqrt, cap=cap, timings=sim_times, reference_qubits=ref, progress=say
            )

        operators = _cached(_OPERATORS, key, simulate_operators)
        runs = [{**r, "from_cache": not made} for r in operators.simulation_runs]
        v = operators.B @ yhat
        p0, p1 = hadamard_probabilities(v, khat)
        pf = variance_probabilities(operators.M, khat)
        had = np.real(np.einsum("it,ij,jt->t", khat, operators.B, khat))
        success_inv = float(np.sum(np.abs(v) ** 2))
    else:
        say(f"simulating {3 * problem.n_test + 1} per-point circuits")
        qpe = _qpe_body(A, circuit, bounds, inv)
        p0, p1, pf = per_point_probabilities(qpe, inv, inv_sqrt.circuit, inv_sqrt, yhat, khat, cap=cap, timings=sim_times)
        runs = [
            {"what": r.what, "qubits": r.qubits, "runs": r.runs, "columns_per_run": None, "from_cache": False}
            for r in plan.per_point
        ]
        h0, h1 = per_point_hadamard(qpe, inv, khat, khat, cap=cap, timings=sim_times)
        had = h0 - h1
        # The inversion on ŷ alone: the cached circuit with the state preparation in front.
        prep = _with_preparation(inv, yhat)
        sv = run_statevectors([prep.circuit], cap=cap, timings=sim_times)[0]
        success_inv = float(np.sum(np.abs(postselected_system_amplitudes(sv, prep)) ** 2))
    elapsed = time.perf_counter() - t0
    # "transpile": preparing circuits for Aer (nothing for the native simulation form);
    # "simulate": the rest of this stage — circuit assembly, the simulator jobs, reading results.
    timings["transpile"] = sim_times["transpile"]
    timings["simulate"] = elapsed - sim_times["transpile"]

    t0 = time.perf_counter()
    exact = problem.exact.predict(problem.X_test)
    mean_exact, var_exact = exact.mean, exact.variance_latent
    mean_q, var_q, var_had = _estimates(problem, p0, p1, pf, had, y_norm, k_norms, inv, inv_sqrt)

    mean_se = var_se = None
    failures = None
    mean_out, var_out = mean_q, var_q
    if readout.shots > 0:
        N = readout.shots
        say(f"sampling {N} shots per test point (seed {readout.seed})")
        if readout.strategy == "amortised":
            rng = np.random.default_rng(readout.seed)
            n0, n1 = sample_hadamard(p0, p1, N, rng)
            nf = sample_variance(pf, N, rng)
        else:
            qpe = _qpe_body(A, circuit, bounds, inv)
            n0, n1, nf = per_point_counts(qpe, inv, inv_sqrt.circuit, yhat, khat, N, readout.seed, cap=cap)
        est = _shot_estimates(problem, inv, inv_sqrt, n0, n1, nf, N)
        mean_out, var_out, mean_se, var_se = est.mean, est.variance, est.mean_se, est.variance_se
        failures = int(np.sum(N - n0 - n1))

    # Error budget: exact GP → the reference oracle's phase estimation and filtering (closed-form model,
    # qgp.circuits.methods.BUDGET_REFERENCE) → chosen oracle → shots. The model needs only the clock
    # grid's constants, not a circuit.
    model_inv = budget_reference_model(circuit, "inverse", bounds)
    model_sqrt = budget_reference_model(circuit, "inverse_sqrt", bounds)
    B_model = model_operator(model_inv, A)
    M_model = model_operator(model_sqrt, A)
    vm = B_model @ yhat
    mp0, mp1 = hadamard_probabilities(vm, khat)
    mpf = variance_probabilities(M_model, khat)
    mean_model, var_model, _ = _estimates(problem, mp0, mp1, mpf, had, y_norm, k_norms, model_inv, model_sqrt)
    stages = [
        ("phase_estimation_and_filter", _budget_stage(mean_model, var_model, mean_exact, var_exact)),
        ("oracle", _budget_stage(mean_q, var_q, mean_exact, var_exact)),
    ]
    if readout.shots > 0:
        stages.append(("shots", _budget_stage(mean_out, var_out, mean_exact, var_exact)))
    budget = _error_budget(stages)

    model_diff = None
    if get_method(circuit.evolution).closed_form_model and operators is not None:
        own_B = model_operator(inv, A)
        own_M = model_operator(inv_sqrt, A)
        model_diff = max(_max_abs(own_B - operators.B), _max_abs(own_M - operators.M))

    needed = _shots_needed(problem, p0, p1, pf, y_norm, k_norms, inv, inv_sqrt, mean_exact, var_exact)
    timings["post_process"] = time.perf_counter() - t0
    return InferenceResult(
        problem=problem,
        circuit=circuit,
        readout=readout,
        inverse=inv,
        inverse_sqrt=inv_sqrt,
        mean_exact=mean_exact,
        variance_exact=var_exact,
        mean_quantum=mean_out,
        variance_quantum=var_out,
        variance_quantum_hadamard=var_had,
        mean_quantum_se=mean_se,
        variance_quantum_se=var_se,
        p0=p0,
        p1=p1,
        p_flag=pf,
        success_probability_inversion=success_inv,
        post_selection_failures=failures,
        error_budget=budget,
        shots_needed=needed,
        filter_model_max_abs_difference=model_diff,
        operators=operators,
        elapsed_seconds=time.perf_counter() - t_start,
        timings=timings,
        simulation_runs=tuple(runs),
    )
