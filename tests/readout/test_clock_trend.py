"""How the mean's error falls with the clock size c (issue 10: not monotone step by step; the trend).

Phase estimation resolves an eigenvalue to one clock bin, whose width halves with each added clock
qubit, so the relative error of the inverted eigenvalues — and of the mean — falls like 2^−c
(Harrow, Hassidim & Lloyd 2009: error O(κ/t₀) with t₀ ∝ 2^c; Nielsen & Chuang §5.2.1 for the
one-bin resolution). Step by step it need not fall: where each eigenvalue sits inside its bin (the
Fejér leakage) and which grid value becomes the scale C change with c in no monotone way, so one
added qubit can raise the error (measured: the exact oracle on 5 of 6 problems like these, the walk on 1 of 6). The
trend is tested, not each step.
"""

from __future__ import annotations

import numpy as np
import pytest

from qgp import RBF, CircuitSettings, ReadoutSettings, build_problem, infer

CLOCKS = np.arange(3, 11)


def _problem(seed: int):
    rng = np.random.default_rng(seed)
    X = np.sort(rng.uniform(0, 10, 12))
    y = np.sin(X) + 0.1 * rng.standard_normal(12)
    return build_problem(X, y, RBF(1.0, 1.5), target_condition=30.0, X_test=np.linspace(0, 10, 9))


def _errors(problem, evolution: str) -> np.ndarray:
    return np.array(
        [
            infer(problem, CircuitSettings(clock_qubits=int(c), evolution=evolution), ReadoutSettings(), progress=None)
            .summary()["mean_rel_rmse"]
            for c in CLOCKS
        ]
    )


@pytest.mark.parametrize("evolution", ["exact", "walk"])
@pytest.mark.parametrize("seed", [1, 4])
def test_mean_error_falls_like_one_clock_bin(seed, evolution):
    err = _errors(_problem(seed), evolution)
    # The 2^−c law: slope −1 of log₂(error) against c. Measured −0.99 … −1.25 over six problems
    # (both oracles); ±0.3 is the spread of a least-squares slope through 8 points whose
    # step-to-step scatter reaches a factor 2.5.
    slope = float(np.polyfit(CLOCKS, np.log2(err), 1)[0])
    assert -1.3 <= slope <= -0.7, f"{evolution}, seed {seed}: slope {slope:.3f}; errors {np.array2string(err, precision=3)}"
    # Two more qubits (a 4× finer grid) outweigh the in-bin scatter: measured on all 12 cases.
    worse = [int(c) for c, a, b in zip(CLOCKS, err, err[2:]) if b >= a]
    assert not worse, f"{evolution}, seed {seed}: error did not fall from c to c + 2 at c = {worse}"


def test_one_added_clock_qubit_can_raise_the_error():
    # The documented non-monotonicity, on one problem where it happens (seed 4, exact oracle:
    # c = 5 → 6 raises the relative RMSE, measured 0.0146 → 0.0366).
    err = _errors(_problem(4), "exact")
    assert np.any(np.diff(err) > 0), f"no step raised the error: {np.array2string(err, precision=3)}"
