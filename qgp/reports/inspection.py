"""What a config implies before any circuit is built: conditioning, sparsity, qubits, memory.

The simulation plan (qgp.readout.plan, re-exported here) says which simulations a run makes — per
strategy, each run's qubits, memory and count, and whether it fits under the memory cap — from the
register sizes alone. ``qgp inspect`` reports it and `qgp.readout.inference.infer` refuses by it,
before any work that grows with n (the LCU encoding's Pauli decomposition included).
"""

from __future__ import annotations

from qgp.circuits.methods import get_method
from qgp.classical.problem import Problem
from qgp.memory import default_memory_cap, statevector_bytes
from qgp.readout.plan import (  # re-exported: the plan moved to the read-out stage
    STRATEGIES,
    BlockRegister,
    SimulationPlan,
    SimulationRun,
    block_register,
    check_clock_qubits,
    lcu_block_qubits,
    plan_runs,
    simulation_plan,
)
from qgp.settings import CircuitSettings, ReadoutSettings

__all__ = [
    "qubit_counts",
    "inspect_problem",
    "SIMULATION_CAVEAT",
    "BlockRegister",
    "SimulationRun",
    "SimulationPlan",
    "block_register",
    "lcu_block_qubits",
    "plan_runs",
    "simulation_plan",
    "simulation_rows",
    "check_clock_qubits",
]

SIMULATION_CAVEAT = (
    "These are statevector simulations, not hardware runs: simulated accuracy says nothing by itself "
    "about a speed-up on a real device, where state preparation, read-out and noise carry their own "
    "costs; and the condition number and sparsity of kernel matrices tend to grow with n."
)


def simulation_rows(info: dict) -> list[tuple[str, str]]:
    """Table rows (label, text) of `inspect_problem`'s ``simulations`` for ``qgp inspect``."""
    sims = info["simulations"]
    rows = [("memory cap", _size(sims["memory_cap_bytes"])), ("strategy", sims["reason"])]
    for s in STRATEGIES:
        runs = sims[s]
        chosen = " (chosen)" if s == sims["strategy"] else ""
        verdict = "fits" if sims["fits"][s] else "does NOT fit"
        if s == "amortised":
            parts = []
            for r in runs:
                cols = r["columns_per_run"]
                split = f", reference split: {cols} of {cols * r['runs']} columns per run" if r["runs"] > 1 else ""
                parts.append(
                    f"{r['runs']} run{'s' if r['runs'] > 1 else ''} on {r['qubits']} qubits "
                    f"({r['statevectors']} statevector{'s' if r['statevectors'] > 1 else ''}{split}), "
                    f"{_size(r['bytes'])} each" + ("" if r["fits"] else " — above the cap")
                )
            text = "; or ".join(parts)
        else:
            widest = max(runs, key=lambda r: r["bytes"])
            text = (
                f"{sum(r['runs'] for r in runs)} circuits, up to {widest['qubits']} qubits, {_size(widest['bytes'])} each "
                "(jobs batched under the cap)"
            )
        est = sims["estimated_seconds"][s]
        rows.append((f"{s} simulation{chosen}", f"{verdict}: {text}; cost model ~{est:.2g} s"))
    lcu = info.get("pauli_decomposition")
    if lcu is not None:
        terms = f"≤ {lcu['pauli_terms']:,} (upper bound)" if lcu["pauli_terms_is_bound"] else f"{lcu['pauli_terms']:,}"
        fits = "fits" if lcu["decomposition_fits"] else "does NOT fit"
        rows.append(("Pauli strings (LCU)", f"{terms}; decomposition needs {_size(lcu['decomposition_bytes'])}: {fits}"))
    return rows


def _size(n: int) -> str:
    for unit, scale in (("GiB", 2**30), ("MiB", 2**20)):
        if n >= scale:
            return f"{n / scale:.3g} {unit}"
    return f"{n / 2**10:.3g} KiB"


# -- inspect ---------------------------------------------------------------------------------------


def qubit_counts(problem: Problem, settings: CircuitSettings, *, block: BlockRegister | None = None) -> dict[str, int]:
    """Qubits per register of the inversion circuit and in total."""
    if block is None:
        block = block_register(problem, settings, default_memory_cap())
    counts = {
        "system": problem.system_qubits,
        "clock": settings.clock_qubits,
        "flag": 1,
        "block": block.qubits,
    }
    counts["total"] = sum(counts.values())
    return counts


def inspect_problem(problem: Problem, settings: CircuitSettings, readout: ReadoutSettings | None = None) -> dict:
    """A JSON-ready description of the regularised system and the circuit it implies."""
    check_clock_qubits(settings)
    readout = readout or ReadoutSettings()
    plan = simulation_plan(problem, settings, readout)
    d = problem.diagnostics
    q = qubit_counts(problem, settings, block=plan.block)
    return {
        "n_train": problem.n_train,
        "n_test": problem.n_test,
        "input_dimension": problem.X.shape[1],
        "padded_size": problem.padded_size,
        "kernel": problem.kernel.describe(),
        "noise_variance": problem.noise_variance,
        "noise_source": problem.noise_source,
        "fitted_noise_variance": problem.fitted_noise_variance,
        "center": problem.center,
        "prior_mean": problem.y_offset,
        "eigenvalue_min": d.eigenvalue_min,
        "eigenvalue_max": d.eigenvalue_max,
        "eigenvalue_bound_lower": d.bound_lower,
        "eigenvalue_bound_upper": d.bound_upper,
        "condition_number": d.condition_number,
        "condition_number_bound": d.condition_number_bound,
        "sparsity": d.sparsity,
        "frobenius_norm": d.frobenius_norm,
        "spectral_norm": d.spectral_norm,
        "qubits": q,
        "statevector_bytes": statevector_bytes(q["total"]),
        "circuit": {
            "clock_qubits": settings.clock_qubits,
            "evolution": settings.evolution,
            "encoding": get_method(settings.evolution).encoding(settings),
        },
        "simulations": plan.as_dict(),
        "pauli_decomposition": plan.block.as_dict(),
        "caveat": SIMULATION_CAVEAT,
    }
