"""The read-out strategies: how the circuits' exact outcome probabilities (and counts) are obtained.

``amortised`` simulates the ``inverse`` circuit with a reference register (one run, or the register
split into as many runs as the memory cap requires) and reads every test point's probabilities from
the operators B and M it yields; ``per-point`` simulates the circuits of every test point. Both give
the circuit's own answer (tests/readout/test_inference.py: equal to 1e-10). `STRATEGIES` maps each
``[readout] strategy`` value to its pair of functions; nothing else branches on the name.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from qgp.circuits.inversion import InversionCircuit, flag_probability, postselected_system_amplitudes, postselection
from qgp.classical.problem import Problem
from qgp.readout.builds import OPERATORS, cached, inversion_key, qpe_body, with_preparation
from qgp.readout.estimators import (
    CircuitOperators,
    hadamard_probabilities,
    operators_from_reference_run,
    per_point_counts,
    per_point_hadamard,
    per_point_probabilities,
    sample_hadamard,
    sample_variance,
    variance_circuit,
    variance_probabilities,
)
from qgp.readout.plan import SimulationPlan
from qgp.readout.simulate import engine_scope, engines_used, run_statevectors
from qgp.settings import CircuitSettings, ReadoutSettings

__all__ = ["StrategyInputs", "Outcomes", "Strategy", "STRATEGIES"]

Progress = Callable[[str], None]


@dataclass(frozen=True)
class StrategyInputs:
    """What a strategy works on: the built circuit pair, the unit vectors ŷ (shape (2^m,)) and k̂*
    (shape (2^m, n_test)), the a-priori bounds, the memory cap and the simulation plan."""

    problem: Problem
    circuit: CircuitSettings
    readout: ReadoutSettings
    A: np.ndarray
    bounds: tuple[float, float]
    inverse: InversionCircuit
    inverse_sqrt: InversionCircuit
    yhat: np.ndarray
    khat: np.ndarray
    cap: int
    plan: SimulationPlan


@dataclass(frozen=True)
class Outcomes:
    """Exact outcome probabilities per test point, shape (n_test,): Hadamard test P₀, P₁, the
    variance circuit's P(flag = 1), Re k̂*ᵀBk̂* (the Hadamard test with k̂* on both sides); the
    inversion's success probability on ŷ; the operators (amortised) and the runs made."""

    p0: np.ndarray
    p1: np.ndarray
    p_flag: np.ndarray
    hadamard_kk: np.ndarray
    success_probability_inversion: float
    operators: CircuitOperators | None
    runs: tuple[dict, ...]


def _amortised(inp: StrategyInputs, sim_times: dict, say: Progress) -> Outcomes:
    ref = inp.plan.reference_qubits
    if ref is None:
        say("simulating the inversion once with a reference register (amortised)")
    else:
        say(
            "simulating the inversion with a split reference register (amortised): the one run on "
            f"{inp.problem.system_qubits + inp.inverse.circuit.num_qubits} qubits with a saved state does not fit "
            f"under the memory cap of {inp.cap / 2**30:.3g} GiB"
        )
    # The engine is part of the key: a run asked of one engine never reports another's operators.
    what = "operators" if ref is None else f"operators-split-{ref}"
    key = inversion_key(inp.A, inp.circuit, f"{what}-{inp.readout.engine}", inp.bounds)
    made: list[bool] = []

    def simulate_operators():
        made.append(True)
        with engine_scope(inp.readout.engine) as used:
            ops = operators_from_reference_run(
                inp.inverse, inp.inverse_sqrt, cap=inp.cap, timings=sim_times, reference_qubits=ref, progress=say
            )
        return replace(ops, engine=engines_used(used))

    operators = cached(OPERATORS, key, simulate_operators)
    v = operators.B @ inp.yhat
    p0, p1 = hadamard_probabilities(v, inp.khat)
    return Outcomes(
        p0=p0,
        p1=p1,
        p_flag=variance_probabilities(operators.M, inp.khat),
        hadamard_kk=np.real(np.sum(inp.khat * (operators.B @ inp.khat), axis=0)),
        success_probability_inversion=float(np.sum(np.abs(v) ** 2)),
        operators=operators,
        runs=tuple({**r, "from_cache": not made} for r in operators.simulation_runs),
    )


def _amortised_counts(inp: StrategyInputs, out: Outcomes) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Counts drawn by numpy from the exact probabilities (one seeded generator)."""
    rng = np.random.default_rng(inp.readout.seed)
    n0, n1 = sample_hadamard(out.p0, out.p1, inp.readout.shots, rng)
    return n0, n1, sample_variance(out.p_flag, inp.readout.shots, rng)


def _per_point(inp: StrategyInputs, sim_times: dict, say: Progress) -> Outcomes:
    say(f"simulating {3 * inp.problem.n_test + 1} per-point circuits")
    inv, inv_sqrt = inp.inverse, inp.inverse_sqrt
    qpe = qpe_body(inp.A, inp.circuit, inp.bounds, inv)
    p0, p1, pf = per_point_probabilities(
        qpe, inv, inv_sqrt.circuit, inv_sqrt, inp.yhat, inp.khat, cap=inp.cap, timings=sim_times
    )
    h0, h1 = per_point_hadamard(qpe, inv, inp.khat, inp.khat, cap=inp.cap, timings=sim_times)
    # The inversion on ŷ alone: the cached circuit with the state preparation in front.
    prep = with_preparation(inv, inp.yhat)
    sv = run_statevectors([prep.circuit], cap=inp.cap, timings=sim_times)[0]
    return Outcomes(
        p0=p0,
        p1=p1,
        p_flag=pf,
        hadamard_kk=h0 - h1,
        success_probability_inversion=float(np.sum(np.abs(postselected_system_amplitudes(sv, prep)) ** 2)),
        operators=None,
        runs=tuple(
            {"what": r.what, "qubits": r.qubits, "runs": r.runs, "columns_per_run": None, "from_cache": False}
            for r in inp.plan.per_point
        ),
    )


def _per_point_counts(inp: StrategyInputs, out: Outcomes) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Counts sampled by Aer from the measured per-point circuits (seeded)."""
    qpe = qpe_body(inp.A, inp.circuit, inp.bounds, inp.inverse)
    return per_point_counts(
        qpe, inp.inverse, inp.inverse_sqrt.circuit, inp.yhat, inp.khat, inp.readout.shots, inp.readout.seed, cap=inp.cap
    )


def _hybrid(inp: StrategyInputs, sim_times: dict, say: Progress) -> Outcomes:
    """The mean of every test point from one run of the inversion on ŷ (its post-selected output
    v ≈ C·Ã⁻¹ŷ gives each point's Hadamard-test probabilities with k̂*, as in the amortised
    strategy); per test point the variance circuit (P(flag = 1)) and the inversion of k̂*
    (k̂*ᵀÃ⁻¹k̂*, the Hadamard-test form of the variance). 1 + 2·n_test runs of the inversion's width."""
    n_test = inp.problem.n_test
    say(f"simulating the inversion of ŷ once and {2 * n_test} per-point circuits (hybrid)")
    inv, inv_sqrt = inp.inverse, inp.inverse_sqrt

    # Only the post-selected amplitudes are read (flag = 1, clock = 0, block = 0): projected, they
    # are the system amplitudes themselves.
    post = postselection(inv)
    mean_prep = with_preparation(inv, inp.yhat)
    [v] = run_statevectors(
        [mean_prep.circuit], cap=inp.cap, timings=sim_times, reduce=lambda i, amps: amps, project=post
    )
    p0, p1 = hadamard_probabilities(v, inp.khat)
    var_circuits = [variance_circuit(inv_sqrt.circuit, inp.khat[:, j]) for j in range(n_test)]
    p_flag = np.array(
        run_statevectors(
            var_circuits,
            cap=inp.cap,
            timings=sim_times,
            reduce=lambda i, sv: flag_probability(sv, inv_sqrt),
        )
    )
    preps = [with_preparation(inv, inp.khat[:, j]) for j in range(n_test)]
    hadamard_kk = np.array(
        run_statevectors(
            [p.circuit for p in preps],
            cap=inp.cap,
            timings=sim_times,
            reduce=lambda i, amps: float(np.real(inp.khat[:, i] @ amps)),
            project=post,
        )
    )
    return Outcomes(
        p0=p0,
        p1=p1,
        p_flag=p_flag,
        hadamard_kk=hadamard_kk,
        success_probability_inversion=float(np.sum(np.abs(v) ** 2)),
        operators=None,
        runs=tuple(
            {"what": r.what, "qubits": r.qubits, "runs": r.runs, "columns_per_run": None, "from_cache": False}
            for r in inp.plan.hybrid
        ),
    )


@dataclass(frozen=True)
class Strategy:
    """A read-out strategy: exact outcome probabilities, and counts of ``readout.shots`` shots."""

    outcomes: Callable[[StrategyInputs, dict, Progress], Outcomes]
    counts: Callable[[StrategyInputs, Outcomes], tuple[np.ndarray, np.ndarray, np.ndarray]]


STRATEGIES: dict[str, Strategy] = {
    "amortised": Strategy(outcomes=_amortised, counts=_amortised_counts),
    "per-point": Strategy(outcomes=_per_point, counts=_per_point_counts),
    "hybrid": Strategy(outcomes=_hybrid, counts=_amortised_counts),
}
