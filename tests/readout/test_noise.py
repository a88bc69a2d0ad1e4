"""Tests of qgp.readout.noise: gate-level depolarising noise and read-out flips."""

from __future__ import annotations

import numpy as np
import pytest
from qiskit import QuantumCircuit
from qiskit.circuit.random import random_circuit
from qiskit.quantum_info import Statevector

from qgp.errors import QgpError
from qgp.readout.noise import GateNoise, event_probabilities, gate_level, noise_model


def _statevector_event(circuit, event):
    probs = Statevector(circuit).probabilities()
    idx = np.arange(probs.size)
    mask = np.ones(probs.size, bool)
    for q, v in event.items():
        mask &= ((idx >> q) & 1) == v
    return probs[mask].sum()


EVENTS = [{0: 0}, {1: 1}, {0: 1, 2: 0}, {3: 1, 1: 0}, {0: 0, 1: 1, 2: 0, 3: 1}, {2: 1, 3: 1}, {}]


def test_zero_noise_matches_statevector():
    # Source: the noiseless limit (common practice): p = 0 is qiskit's ideal Statevector.
    qc = random_circuit(4, 5, seed=11)
    res = event_probabilities([qc], [EVENTS], GateNoise(method="density_matrix"))
    expected = [_statevector_event(qc, e) for e in EVENTS]
    np.testing.assert_allclose(res.probabilities[0], expected, atol=1e-12, rtol=0)
    assert noise_model(GateNoise(method="density_matrix")).is_ideal()


@pytest.mark.parametrize("p", [0.0, 0.1, 0.37, 1.0])
def test_single_cx_depolarising_closed_form(p):
    # Source: the depolarising channel (Nielsen & Chuang eq. 8.102; qiskit-aer depolarizing_error
    # docstring): after one CX on |+0>, rho = (1-p) Bell + p I/4. h is exact after rz/sx, which
    # stay noiseless because one_qubit = 0.
    qc = QuantumCircuit(2)
    qc.h(0)
    qc.cx(0, 1)
    events = [{0: 0, 1: 0}, {0: 1, 1: 1}, {0: 0, 1: 1}, {0: 1, 1: 0}, {0: 1}, {1: 0}]
    bell = [0.5, 0.5, 0.0, 0.0, 0.5, 0.5]
    mixed = [0.25, 0.25, 0.25, 0.25, 0.5, 0.5]
    res = event_probabilities([qc], [events], GateNoise(method="density_matrix", two_qubit=p))
    closed = (1 - p) * np.array(bell) + p * np.array(mixed)
    np.testing.assert_allclose(res.probabilities[0], closed, atol=1e-12, rtol=0)


def test_single_x_depolarising_closed_form():
    # Source: as above with n = 1: after X|0> = |1>, rho = (1-p)|1><1| + p I/2, so P(0) = p/2.
    qc = QuantumCircuit(1)
    qc.x(0)
    p = 0.3
    res = event_probabilities([qc], [[{0: 0}]], GateNoise(method="density_matrix", one_qubit=p))
    assert abs(res.probabilities[0][0] - p / 2) < 1e-12


def test_trajectories_within_standard_error_of_density_matrix():
    # Source: the central limit theorem: the trajectory mean is normal about the exact value.
    from scipy.stats import chi2

    qc = random_circuit(4, 4, seed=5)
    events = EVENTS[:-1] + [{0: 1}, {1: 0, 2: 1}, {3: 0}, {0: 1, 3: 1}]
    exact = event_probabilities([qc], [events], GateNoise(method="density_matrix", two_qubit=0.02, one_qubit=0.002))
    spec = GateNoise(two_qubit=0.02, one_qubit=0.002, method="trajectories", trajectories=2000, seed=7)
    traj = event_probabilities([qc], [events], spec)
    # The normal approximation needs N·p ≫ 1 (common practice: N·p ≥ 10); an event that only noise
    # reaches (here one at p ≈ 1e-4, ~0.3 expected contributing trajectories) is left out.
    ok = exact.probabilities[0] * spec.trajectories >= 10
    assert ok.sum() >= 8
    z = (traj.probabilities[0][ok] - exact.probabilities[0][ok]) / traj.standard_errors[0][ok]
    assert np.all(traj.standard_errors[0][ok] > 0)
    assert np.all(np.abs(z) < 4), z
    assert np.sum(z**2) < chi2.ppf(0.999, int(ok.sum()))


def test_readout_flip():
    # Source: the definition of a symmetric read-out error M = [[1-r, r], [r, 1-r]].
    r = 0.07
    qc = QuantumCircuit(1)
    qc.x(0)
    res = event_probabilities([qc], [[{0: 0}, {0: 1}]], GateNoise(method="density_matrix", readout=r))
    np.testing.assert_allclose(res.probabilities[0], [r, 1 - r], atol=1e-12, rtol=0)
    # |q2 q1 q0> = |101>: a two-qubit event is the product of per-qubit flip probabilities.
    qc3 = QuantumCircuit(3)
    qc3.x(0)
    qc3.x(2)
    events = [{0: 1, 2: 1}, {0: 0, 1: 0}, {0: 0, 1: 1, 2: 0}]
    res3 = event_probabilities([qc3], [events], GateNoise(method="density_matrix", readout=r))
    expected = [(1 - r) ** 2, r * (1 - r), r**3]
    np.testing.assert_allclose(res3.probabilities[0], expected, atol=1e-12, rtol=0)
    # Trajectories apply the same flips.
    spec = GateNoise(readout=r, method="trajectories", trajectories=5)
    np.testing.assert_allclose(event_probabilities([qc3], [events], spec).probabilities[0], expected, atol=1e-12)


def test_gate_level_basis():
    # Source: the brief: the gate-level circuit is the one transpiled to the basis at level 0.
    g = gate_level(random_circuit(3, 3, seed=2), GateNoise(method="density_matrix"))
    assert set(g.count_ops()) <= {"rz", "sx", "x", "cx"}


@pytest.mark.parametrize(
    "make, fix",
    [
        (lambda: GateNoise(method="density_matrix", two_qubit=1.5), "[0, 1]"),
        (lambda: GateNoise(method="density_matrix", readout=-0.1), "[0, 1]"),
        (lambda: GateNoise(basis=("rz", "sx", "x")), "two-qubit gate"),
        (lambda: GateNoise(method="density_matrix", trajectories=0), "at least 1"),
        (lambda: GateNoise(method="mps"), "density_matrix"),
    ],
)
def test_bad_spec(make, fix):
    # Source: qgp's one-line QgpError convention.
    with pytest.raises(QgpError, match=None) as err:
        make()
    assert fix in str(err.value) and "\n" not in str(err.value)


def test_bad_circuits_and_cap():
    # Source: qgp's one-line QgpError convention; the cap is checked before allocating.
    measured = QuantumCircuit(1, 1)
    measured.measure(0, 0)
    with pytest.raises(QgpError, match="measurement"):
        event_probabilities([measured], [[{0: 0}]], GateNoise(method="density_matrix"))
    with pytest.raises(QgpError, match="memory cap"):
        event_probabilities([QuantumCircuit(10)], [[{0: 0}]], GateNoise(method="density_matrix"), cap_bytes=1024)
    with pytest.raises(QgpError, match="values 0 or 1"):
        event_probabilities([QuantumCircuit(2)], [[{5: 0}]], GateNoise(method="density_matrix"))
