"""The simulation plan: which simulations a run makes, from the register sizes alone.

`simulation_plan` is the one place that says which simulations a run makes — per strategy, each
run's qubits, memory and count, and whether it fits under the memory cap. `qgp.readout.inference.infer`
refuses by it before any work that grows with n (the LCU encoding's Pauli decomposition included),
and ``qgp inspect`` reports it (qgp.reports.inspection). The block register is the method's
(qgp.circuits.methods: ``block_qubits``; for the LCU walk from the Pauli decomposition or, without
decomposing, from bounds).
"""

from __future__ import annotations

import hashlib
import threading
from collections import OrderedDict
from dataclasses import dataclass

from qgp.circuits.encoding import lcu_block_qubits
from qgp.circuits.algorithms import algorithm_of
from qgp.classical.problem import Problem
from qgp.errors import QgpError
from qgp.memory import default_memory_cap, require_memory, statevector_bytes
from qgp.settings import CircuitSettings, ReadoutSettings

__all__ = [
    "STRATEGIES",
    "BlockRegister",
    "SimulationRun",
    "SimulationPlan",
    "block_register",
    "lcu_block_qubits",
    "plan_runs",
    "hybrid_runs",
    "estimated_seconds",
    "simulation_plan",
    "check_clock_qubits",
]

#: The strategies a run can make (``[readout] strategy`` also takes "auto": the cheapest that fits).
STRATEGIES = ("amortised", "per-point", "hybrid")

# What each per-point run is (the ``what`` of the plan and of `InferenceResult.summary`'s
# ``simulation_runs``); the amortised runs' are in qgp.readout.estimators.
PER_POINT_MEAN = "Hadamard test of the mean (inversion of ŷ against k̂, probe qubit): one circuit per test point"
PER_POINT_VARIANCE = "variance circuit (inverse_sqrt on k̂, flag read): one circuit per test point"
PER_POINT_HADAMARD = "Hadamard test of k̂ᵀÃ⁻¹k̂ (probe qubit): one circuit per test point"
PER_POINT_SUCCESS = "inversion of ŷ (success probability of the inversion): one circuit"
PER_POINT_MEAN_SHOTS = "measured Hadamard test of the mean, shots drawn by Aer: one circuit per test point"
PER_POINT_VARIANCE_SHOTS = "measured variance circuit, shots drawn by Aer: one circuit per test point"
HYBRID_MEAN = "inversion of ŷ, post-selected output read (every test point's mean from it): one circuit"
HYBRID_VARIANCE = "variance circuit (inverse_sqrt on k̂, flag read): one circuit per test point"
HYBRID_HADAMARD = "inversion of k̂, post-selected output read (k̂ᵀÃ⁻¹k̂): one circuit per test point"

# The cost model of "auto" (seconds of one run on q qubits with a d-dimensional system (and block)
# register): a fixed overhead, a per-amplitude cost of the fused passes and the arithmetic of the
# controlled powers (two stages of dense d × d blocks, 8·d flops per amplitude each). Measured here
# with the numpy engine (qgp bench, floor figures): 14 ms for the 17-qubit reference run at d = 16,
# 2.2 s for one 24-qubit inversion (1.1–1.3e-7 s per amplitude); the flop rate is a sustained
# batched-product rate of ~50 GFlop/s. Only the ratios between strategies matter for the choice.
_RUN_OVERHEAD_SECONDS = 2e-3
_SECONDS_PER_AMPLITUDE = 1.2e-7
_FLOPS_PER_SECOND = 5e10


def check_clock_qubits(settings: CircuitSettings) -> None:
    """What `run` accepts: the derived evolution time t = 2π(1 − 2^(1−c))/λ_hi is 0 at c = 1 (the
    error budget's exact-oracle model needs t for every oracle, the walk included), so one clock
    qubit needs an explicit ``[circuit] evolution_time``."""
    if algorithm_of(settings).uses_clock and settings.clock_qubits < 2 and settings.evolution_time is None:
        from qgp.circuits.phase_estimation import derived_evolution_time

        derived_evolution_time(1.0, settings.clock_qubits)  # raises its own one-line error


# -- the block register ------------------------------------------------------------------------


@dataclass(frozen=True)
class BlockRegister:
    """The walk's block register: ``qubits`` (an upper bound when ``is_bound``).

    For the LCU encoding ``pauli_terms`` is the number of Pauli strings — exact, or an upper bound
    (`qgp.circuits.encoding.pauli_term_bounds`) when the decomposition was not run, with
    ``pauli_terms_lower`` beside it — ``decomposition_bytes`` the memory the decomposition needs
    (`qgp.circuits.encoding.pauli_decomposition_bytes`) and ``decomposition_fits`` whether that is under
    the cap. None for the other encodings.
    """

    qubits: int
    is_bound: bool = False
    pauli_terms: int | None = None
    pauli_terms_is_bound: bool = False
    pauli_terms_lower: int | None = None
    decomposition_bytes: int | None = None
    decomposition_fits: bool | None = None

    def as_dict(self) -> dict | None:
        if self.pauli_terms is None:
            return None
        return {
            "pauli_terms": self.pauli_terms,
            "pauli_terms_is_bound": self.pauli_terms_is_bound,
            "pauli_terms_lower_bound": self.pauli_terms_lower,
            "block_qubits": self.qubits,
            "block_qubits_is_bound": self.is_bound,
            "decomposition_bytes": self.decomposition_bytes,
            "decomposition_fits": self.decomposition_fits,
            "note": "decomposition_bytes = 66·4^m + T·max(132 + 3m, 16 + 10m) at T = pauli_terms (measured; "
            "qgp.circuits.encoding); when pauli_terms_is_bound the decomposition was not run (it would not fit under the "
            "memory cap, or the answer does not depend on it) and pauli_terms, block_qubits are upper bounds "
            "from the entries of A, pauli_terms_lower_bound a lower one",
        }


_TERM_COUNTS: OrderedDict = OrderedDict()
_TERM_LOCK = threading.Lock()

# Below this the decomposition is run for its exact count whenever it fits (m ≤ 10: ~150 MB, ~1 s
# here); above it only when the verdict (fits or not) depends on the count.
_CHEAP_DECOMPOSITION_BYTES = 1 << 28


def _pauli_term_count(A) -> int:
    """Pauli strings of A's decomposition, remembered per matrix (a sweep revisits matrices)."""
    import numpy as np

    a = np.ascontiguousarray(A, dtype=float)
    key = hashlib.sha256(repr(a.shape).encode() + a.tobytes()).hexdigest()
    with _TERM_LOCK:
        if key in _TERM_COUNTS:
            return _TERM_COUNTS[key]
    from qgp.circuits.encoding import pauli_decomposition

    count = len(pauli_decomposition(a))
    with _TERM_LOCK:
        _TERM_COUNTS[key] = count
        while len(_TERM_COUNTS) > 64:
            _TERM_COUNTS.popitem(last=False)
    return count


def block_register(problem: Problem, settings: CircuitSettings, cap: int, *, decompose: bool = True) -> BlockRegister:
    """The block register the method needs (its ``block_qubits``; none for most oracles).

    When its size depends on A's Pauli decomposition (the LCU walk), the decomposition runs only
    when ``decompose`` and its memory fits under ``cap``; otherwise the counts are the bounds of
    `qgp.circuits.encoding.pauli_term_bounds` (one pass over A).
    """
    method = algorithm_of(settings)
    if not method.block_qubits_depend_on_terms(settings):
        return BlockRegister(method.block_qubits(settings))
    from qgp.circuits.encoding import pauli_decomposition_bytes, pauli_term_bounds

    m = problem.system_qubits
    lower, upper = pauli_term_bounds(problem.A_padded)
    need = pauli_decomposition_bytes(m, upper)
    if need <= cap and decompose:
        terms = _pauli_term_count(problem.A_padded)
        qubits = method.block_qubits(settings, terms)
        return BlockRegister(qubits, False, terms, False, terms, pauli_decomposition_bytes(m, terms), True)
    return BlockRegister(method.block_qubits(settings, upper), True, upper, True, lower, need, need <= cap)


# -- the simulation plan -------------------------------------------------------------------------


@dataclass(frozen=True)
class SimulationRun:
    """One kind of simulator run: ``runs`` of them, each on ``qubits`` qubits holding
    ``statevectors`` statevectors at once and ``bytes`` in all (statevectors and the arrays read
    from them), ``columns_per_run`` reference-register columns (None without a reference)."""

    what: str
    qubits: int
    statevectors: int
    bytes: int
    runs: int
    columns_per_run: int | None
    fits: bool

    def as_dict(self) -> dict:
        return {
            "what": self.what,
            "qubits": self.qubits,
            "statevectors": self.statevectors,
            "bytes": self.bytes,
            "runs": self.runs,
            "columns_per_run": self.columns_per_run,
            "fits": self.fits,
        }


def plan_runs(
    system_qubits: int, clock_qubits: int, block_qubits: int, n_test: int, cap: int, *, shots: int = 0
) -> tuple[tuple[SimulationRun, ...], int | None, tuple[SimulationRun, ...]]:
    """(amortised runs, reference qubits, per-point runs) for these registers: pure arithmetic.

    Amortised: one run with a reference register of m qubits, saving the state before the
    rotation (two statevectors, `qgp.readout.estimators.reference_run_bytes`) when that fits (reference
    qubits None); else the reference register split into 2^(m − r′) runs of 2^r′ columns, r′ the
    largest that fits with one statevector per run (reference qubits r′). Per-point: one circuit
    per test point and estimator, batched into jobs under the cap (one statevector per circuit).
    """
    from qgp.readout.estimators import ONE_RUN, SPLIT_RUN, reference_run_bytes

    m, c, b = int(system_qubits), int(clock_qubits), int(block_qubits)
    q = m + c + 1 + b
    one = reference_run_bytes(q, m, c, b, m, snapshot=True)
    reference: int | None = None
    if one <= cap:
        amortised = (SimulationRun(ONE_RUN, q + m, 2, one, 1, 2**m, True),)
    else:
        fitting = [r for r in range(m, -1, -1) if reference_run_bytes(q, m, c, b, r, snapshot=False) <= cap]
        if fitting:
            reference = fitting[0]
            need = reference_run_bytes(q, m, c, b, reference, snapshot=False)
            amortised = (SimulationRun(SPLIT_RUN, q + reference, 1, need, 2 ** (m - reference), 2**reference, True),)
        else:  # not even one column per run fits: report the one run and the smallest split
            need = reference_run_bytes(q, m, c, b, 0, snapshot=False)
            amortised = (
                SimulationRun(ONE_RUN, q + m, 2, one, 1, 2**m, False),
                SimulationRun(SPLIT_RUN, q, 1, need, 2**m, 1, False),
            )
    per_point = [
        SimulationRun(PER_POINT_MEAN, q + 1, 1, statevector_bytes(q + 1), n_test, None, statevector_bytes(q + 1) <= cap),
        SimulationRun(PER_POINT_VARIANCE, q, 1, statevector_bytes(q), n_test, None, statevector_bytes(q) <= cap),
        SimulationRun(PER_POINT_HADAMARD, q + 1, 1, statevector_bytes(q + 1), n_test, None, statevector_bytes(q + 1) <= cap),
        SimulationRun(PER_POINT_SUCCESS, q, 1, statevector_bytes(q), 1, None, statevector_bytes(q) <= cap),
    ]
    if shots > 0:
        per_point += [
            SimulationRun(PER_POINT_MEAN_SHOTS, q + 1, 1, statevector_bytes(q + 1), n_test, None, statevector_bytes(q + 1) <= cap),
            SimulationRun(PER_POINT_VARIANCE_SHOTS, q, 1, statevector_bytes(q), n_test, None, statevector_bytes(q) <= cap),
        ]
    return amortised, reference, tuple(per_point)


def hybrid_runs(system_qubits: int, clock_qubits: int, block_qubits: int, n_test: int, cap: int) -> tuple[SimulationRun, ...]:
    """Runs of the hybrid strategy: the inversion of ŷ once (every mean), then per test point the
    variance circuit and the inversion of k̂ (one statevector each, read as it returns)."""
    q = int(system_qubits) + int(clock_qubits) + 1 + int(block_qubits)
    b = statevector_bytes(q)
    return (
        SimulationRun(HYBRID_MEAN, q, 1, b, 1, None, b <= cap),
        SimulationRun(HYBRID_VARIANCE, q, 1, b, n_test, None, b <= cap),
        SimulationRun(HYBRID_HADAMARD, q, 1, b, n_test, None, b <= cap),
    )


def estimated_seconds(runs: tuple[SimulationRun, ...], system_qubits: int, block_qubits: int) -> float:
    """The cost model of "auto" (a model, not a measurement; see the constants above)."""
    d = 2 ** (int(system_qubits) + int(block_qubits))
    per_amplitude = _SECONDS_PER_AMPLITUDE + 2 * 8 * d / _FLOPS_PER_SECOND
    return sum(r.runs * (_RUN_OVERHEAD_SECONDS + 2**r.qubits * per_amplitude) for r in runs)


@dataclass(frozen=True)
class SimulationPlan:
    """Every simulation a run makes, per strategy, against the memory cap."""

    strategy: str
    memory_cap_bytes: int
    system_qubits: int
    clock_qubits: int
    block: BlockRegister
    amortised: tuple[SimulationRun, ...]
    per_point: tuple[SimulationRun, ...]
    reference_qubits: int | None  # amortised: None = one run with the saved state; r′ = split
    n_test: int = 0
    shots: int = 0
    hybrid: tuple[SimulationRun, ...] = ()
    #: What the config asked for ("auto" or a strategy) and why ``strategy`` is the one that runs.
    requested: str = ""
    reason: str = ""

    def runs(self, strategy: str | None = None) -> tuple[SimulationRun, ...]:
        s = strategy or self.strategy
        return {"amortised": self.amortised, "per-point": self.per_point, "hybrid": self.hybrid}[s]

    def estimated_seconds(self, strategy: str | None = None) -> float:
        """The cost model's seconds for the strategy's simulations (`estimated_seconds`)."""
        return estimated_seconds(self.runs(strategy), self.system_qubits, self.block.qubits)

    def fits(self, strategy: str | None = None) -> bool:
        s = strategy or self.strategy
        lcu_ok = self.block.decomposition_fits is not False
        return lcu_ok and all(r.fits for r in self.runs(s))

    def widest(self, strategy: str | None = None) -> int:
        """Qubits of the widest simulation of the strategy."""
        return max(r.qubits for r in self.runs(strategy))

    def require(self) -> None:
        """Raise a one-line `QgpError` when the chosen strategy cannot run under the cap."""
        if self.block.decomposition_fits is False:
            from qgp.circuits.encoding import require_decomposition_memory

            require_decomposition_memory(self.system_qubits, self.memory_cap_bytes, self.block.pauli_terms)
        failing = [r for r in self.runs() if not r.fits]
        if failing:
            run = min(failing, key=lambda r: r.bytes)  # the smallest form it could take
            bound = ", block register at its upper bound" if self.block.is_bound else ""
            others = [s for s in STRATEGIES if s != self.strategy and self.fits(s)]
            hint = ""
            if others:
                hint = f"; [readout] strategy = \"{others[0]}\" would fit"
            elif self.block.pauli_terms is not None:  # the LCU: would the dilation's one block qubit fit?
                amortised, _, per_point = plan_runs(
                    self.system_qubits, self.clock_qubits, 1, self.n_test, self.memory_cap_bytes, shots=self.shots
                )
                hybrid = hybrid_runs(self.system_qubits, self.clock_qubits, 1, self.n_test, self.memory_cap_bytes)
                mine = {"amortised": amortised, "per-point": per_point, "hybrid": hybrid}[self.strategy]
                if all(r.fits for r in mine):
                    hint = '; [circuit] encoding = "dilation" (one block qubit) would fit'
            try:
                require_memory(
                    run.bytes, f"the {self.strategy} simulation ({run.what}; {run.qubits} qubits{bound})", self.memory_cap_bytes
                )
            except QgpError as err:
                raise QgpError(f"{err}{hint}") from None

    def as_dict(self) -> dict:
        return {
            "strategy": self.strategy,
            "requested": self.requested or self.strategy,
            "reason": self.reason,
            "memory_cap_bytes": self.memory_cap_bytes,
            "amortised": [r.as_dict() for r in self.amortised],
            "per-point": [r.as_dict() for r in self.per_point],
            "hybrid": [r.as_dict() for r in self.hybrid],
            "fits": {s: self.fits(s) for s in STRATEGIES},
            "estimated_seconds": {s: self.estimated_seconds(s) for s in STRATEGIES},
            "block_qubits_is_bound": self.block.is_bound,
            "note": "bytes: 16·2^q per statevector (complex128) held at once, plus the operators B and M "
            "(16·n² each) read from amortised runs; per-point circuits run in jobs batched under the cap",
        }


def _resolve(plan: SimulationPlan, requested: str) -> SimulationPlan:
    """``plan`` with its strategy: the requested one, or under "auto" the cheapest by the cost
    model among those that fit (amortised when none fits: the guard then says what would)."""
    from dataclasses import replace

    if requested != "auto":
        return replace(plan, strategy=requested, reason=f"[readout] strategy = \"{requested}\"")
    cost = {s: plan.estimated_seconds(s) for s in STRATEGIES}
    fitting = [s for s in STRATEGIES if plan.fits(s)]
    if not fitting:
        return replace(plan, strategy="amortised", reason="auto: no strategy fits under the memory cap")
    chosen = min(fitting, key=lambda s: cost[s])
    others = ", ".join(
        f"{s} {cost[s]:.2g} s" + ("" if s in fitting else " (does not fit)") for s in STRATEGIES if s != chosen
    )
    return replace(plan, strategy=chosen, reason=f"auto: {chosen}, estimated {cost[chosen]:.2g} s of simulation, against {others} (cost model, qgp.readout.plan)")


def simulation_plan(
    problem: Problem,
    circuit: CircuitSettings,
    readout: ReadoutSettings | None = None,
    *,
    cap: int | None = None,
    block_qubits: int | None = None,
) -> SimulationPlan:
    """The simulations ``infer(problem, circuit, readout)`` makes, from register sizes alone.

    ``cap``: bytes (default: ``readout.memory_cap_bytes``, else `default_memory_cap`).
    ``block_qubits``: the block register of circuits already built (exact); otherwise it is
    derived (`block_register`) — for the LCU from bounds, without decomposing, when the
    decomposition cannot fit, or when it is large and whether the chosen strategy fits is the same
    at both bounds of the block register.
    """
    readout = readout or ReadoutSettings()
    if cap is None:
        cap = readout.memory_cap_bytes if readout.memory_cap_bytes is not None else default_memory_cap()
    cap = int(cap)
    m, c, n_test = problem.system_qubits, circuit.clock_qubits, problem.n_test

    def build(block: BlockRegister) -> SimulationPlan:
        amortised, reference, per_point = plan_runs(m, c, block.qubits, n_test, cap, shots=readout.shots)
        hybrid = hybrid_runs(m, c, block.qubits, n_test, cap)
        plan = SimulationPlan(
            "amortised", cap, m, c, block, amortised, per_point, reference, n_test, readout.shots, hybrid,
            requested=readout.strategy,
        )
        return _resolve(plan, readout.strategy)

    if block_qubits is not None:
        return build(BlockRegister(int(block_qubits)))
    method = algorithm_of(circuit)
    if method.block_qubits_depend_on_terms(circuit):
        bounded = block_register(problem, circuit, cap, decompose=False)
        if not bounded.decomposition_fits:
            return build(bounded)
        at_upper = build(bounded)
        at_lower = build(BlockRegister(method.block_qubits(circuit, bounded.pauli_terms_lower)))
        verdict_known = all(r.fits for r in at_lower.runs()) == all(r.fits for r in at_upper.runs())
        if verdict_known and bounded.decomposition_bytes > _CHEAP_DECOMPOSITION_BYTES:
            return at_upper  # the count would take long and change nothing
    return build(block_register(problem, circuit, cap))
