"""Every strategy and engine reads the same circuits, so they must give the same numbers; "auto"
picks the cheapest that fits and says why.

References: the amortised strategy on Aer (qiskit-aer's statevector simulator) is the reference
for the others; equal to 1e-10 (probabilities of unit vectors read from double-precision states;
measured differences 1e-12 to 3e-14).
"""

from dataclasses import replace

import numpy as np
import pytest

from qgp.classical.kernels import RBF
from qgp.classical.problem import build_problem
from qgp.readout.inference import infer
from qgp.readout.plan import STRATEGIES, simulation_plan
from qgp.settings import CircuitSettings, ReadoutSettings

TOL = 1e-10


def _problem(n: int, n_test: int):
    rng = np.random.default_rng(3)
    X = np.sort(rng.uniform(0, 10, n))[:, None]
    y = np.sin(X[:, 0]) + 0.1 * rng.normal(size=n)
    return build_problem(X, y, RBF(signal_variance=1.0, lengthscale=1.5), target_condition=15.0, X_test=np.linspace(0.5, 9.5, n_test)[:, None])


@pytest.mark.parametrize(
    "circuit",
    [
        CircuitSettings(clock_qubits=4, evolution="exact"),
        CircuitSettings(clock_qubits=4, evolution="trotter", trotter_steps=2),
        CircuitSettings(clock_qubits=4, evolution="walk", encoding="dilation"),
    ],
    ids=["exact", "trotter", "walk"],
)
def test_every_strategy_and_engine_gives_the_reference_numbers(circuit):
    p = _problem(8, 5)
    ref = infer(p, circuit, ReadoutSettings(strategy="amortised", engine="aer"), progress=None)
    assert ref.engine == "aer" and ref.strategy == "amortised"
    for strategy in STRATEGIES:
        for engine in ("numpy", "aer"):
            r = infer(p, circuit, ReadoutSettings(strategy=strategy, engine=engine), progress=None)
            assert r.strategy == strategy and r.engine in (engine, "none")
            worst = max(
                float(np.max(np.abs(getattr(r, k) - getattr(ref, k))))
                for k in ("p0", "p1", "p_flag", "mean_quantum", "variance_quantum", "variance_quantum_hadamard")
            )
            assert worst < TOL, f"{strategy}/{engine}: worst difference {worst:.2e}"
            assert abs(r.success_probability_inversion - ref.success_probability_inversion) < TOL


def test_hybrid_with_shots_samples_from_its_exact_probabilities():
    p = _problem(8, 5)
    circuit = CircuitSettings(clock_qubits=4)
    a = infer(p, circuit, ReadoutSettings(strategy="amortised", shots=500, seed=4), progress=None)
    h = infer(p, circuit, ReadoutSettings(strategy="hybrid", shots=500, seed=4), progress=None)
    # Same exact probabilities (to round-off) and the same seeded numpy sampler: the same counts.
    np.testing.assert_allclose(h.mean_quantum, a.mean_quantum, atol=1e-9)
    assert h.mean_quantum_se is not None and np.all(h.mean_quantum_se > 0)


def test_auto_takes_the_cheapest_strategy_that_fits_and_says_why():
    circuit = CircuitSettings(clock_qubits=4)
    many_points = _problem(8, 40)  # a reference register of 3 qubits beats 81 circuits
    plan = simulation_plan(many_points, circuit, ReadoutSettings(strategy="auto"))
    assert plan.strategy == "amortised" and plan.requested == "auto"
    few_points = _problem(64, 2)  # 5 circuits of 11 qubits beat one run on 17
    plan = simulation_plan(few_points, circuit, ReadoutSettings(strategy="auto"))
    assert plan.strategy == "hybrid"
    est = {s: plan.estimated_seconds(s) for s in STRATEGIES}
    assert est["hybrid"] == min(est.values())
    assert plan.reason.startswith("auto: hybrid") and "amortised" in plan.reason
    # A cap that the amortised run does not fit under: auto goes elsewhere, the forced one refuses.
    small = ReadoutSettings(strategy="auto", memory_cap_bytes=64 * 1024)
    plan = simulation_plan(many_points, circuit, small)
    assert plan.fits(plan.strategy)
    r = infer(many_points, circuit, small, progress=None)
    assert r.strategy == plan.strategy and r.summary()["strategy_reason"] == plan.reason


def test_forced_strategy_is_reported_as_asked():
    p = _problem(8, 3)
    r = infer(p, CircuitSettings(clock_qubits=3), replace(ReadoutSettings(), strategy="per-point"), progress=None)
    s = r.summary()
    assert s["strategy"] == "per-point" and s["strategy_reason"] == '[readout] strategy = "per-point"'
