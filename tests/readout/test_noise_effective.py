"""Tests of qgp.readout.noise_effective: the per-block effective gate-noise model."""

from __future__ import annotations

import numpy as np
import pytest
from qiskit import QuantumCircuit, transpile
from qiskit.circuit.random import random_circuit
from qiskit.quantum_info import Statevector
from scipy.stats import chi2

import qgp.readout.noise_effective as ne
from qgp.circuits.decomposition import lower_piece
from qgp.errors import QgpError
from qgp.readout.noise import GateNoise, event_probabilities, events_from_probabilities
from qgp.readout.noise_effective import _sample_errors, block_errors, effective_event_probabilities

EVENTS4 = [{0: 0}, {1: 1}, {0: 1, 2: 0}, {3: 1, 1: 0}, {0: 0, 1: 1, 2: 0, 3: 1}, {2: 1, 3: 1}, {}]
BASIS = ("rz", "sx", "x", "cx")


def _statevector_events(circuit, events):
    probs = Statevector(circuit).probabilities()
    idx = np.arange(probs.size)
    out = []
    for event in events:
        mask = np.ones(probs.size, bool)
        for q, v in event.items():
            mask &= ((idx >> q) & 1) == v
        out.append(probs[mask].sum())
    return np.array(out)


def _z(estimate, reference, se):
    # A floor of 1e-12 on the SE: events the noise cannot move (e.g. exactly 1/2 under any Pauli)
    # have a rounding-level SE, and their difference is rounding too.
    return (np.asarray(estimate) - np.asarray(reference)) / np.sqrt(np.asarray(se) ** 2 + 1e-24)


def _basis_circuit() -> QuantumCircuit:
    """Three qubits, every top-level instruction one basis gate (h lowers to rz·sx·rz: one sx)."""
    qc = QuantumCircuit(3)
    qc.sx(0)
    qc.rz(0.7, 0)
    qc.sx(0)
    qc.cx(0, 1)
    qc.rz(1.1, 1)
    qc.sx(1)
    qc.cx(1, 2)
    qc.h(2)
    qc.rz(0.3, 2)
    qc.sx(2)
    qc.cx(2, 0)
    qc.x(1)
    qc.sx(0)
    return qc


def _three_cx_gate():
    """A custom two-qubit gate that lowers to exactly 3 cx, 1 sx and 1 rz (written in the basis)."""
    sub = QuantumCircuit(2, name="g3")
    sub.sx(0)
    sub.cx(0, 1)
    sub.rz(0.4, 1)
    sub.cx(1, 0)
    sub.sx(1)  # second sx: 2 one-qubit noisy gates in all
    sub.cx(0, 1)
    return sub.to_gate()


# ---------------------------------------------------------------------------------------------
# 1. The noiseless limit


def test_zero_noise_is_the_noiseless_answer(monkeypatch):
    # Source: the noiseless limit (common practice): p = 0 is qiskit's ideal Statevector, and with
    # w₀ = 1 the model computes the noiseless state alone, no trajectory.
    simulated = []
    real = ne._trajectory

    def counting(*args, **kw):
        simulated.append(1)
        return real(*args, **kw)

    monkeypatch.setattr(ne, "_trajectory", counting)
    qc = random_circuit(4, 5, seed=11)
    res = effective_event_probabilities([qc], [EVENTS4], GateNoise(trajectories=50))
    np.testing.assert_allclose(res.probabilities[0], _statevector_events(qc, EVENTS4), atol=1e-12, rtol=0)
    assert simulated == []  # no trajectory: the noiseless state alone
    assert res.ideal_weight == (1.0,) and res.samples[0].shape == (1, len(EVENTS4))
    assert np.all(res.standard_errors[0] == 0) and res.method == "effective"
    assert block_errors(qc, GateNoise()).no_error_probability == 1.0


# ---------------------------------------------------------------------------------------------
# 2. Exactness where each block is one gate; block counts against the transpiler


@pytest.mark.parametrize("p2, p1", [(0.05, 0.01), (0.2, 0.05)])
def test_single_gate_blocks_match_aer_density_matrix(p2, p1):
    # Source: qiskit-aer's density-matrix simulator with depolarizing_error after each basis gate
    # (qgp.readout.noise, method "density_matrix") is the outside reference. With every block one
    # noisy basis gate, the block channel is that gate's channel (Nielsen & Chuang eq. 8.102), so
    # the two agree up to trajectory noise. Criterion (common practice, as in test_noise): every
    # |z| < 4 and Σ z² below the chi-square 99.9% quantile for the number of events.
    qc = _basis_circuit()
    events = [{0: 0}, {1: 1}, {2: 0}, {0: 1, 1: 1}, {0: 0, 2: 1}, {1: 0, 2: 0}, {0: 1, 1: 0, 2: 1}]
    model = block_errors(qc, GateNoise(two_qubit=p2, one_qubit=p1))
    assert np.all(np.isin(model.lambdas, [0.0, p1, p2]))  # each block is one gate (or rz: no error)
    spec = GateNoise(two_qubit=p2, one_qubit=p1, trajectories=4000, seed=3)
    eff = effective_event_probabilities([qc], [events], spec)
    exact = event_probabilities([qc], [events], GateNoise(two_qubit=p2, one_qubit=p1, method="density_matrix"))
    z = _z(eff.probabilities[0], exact.probabilities[0], eff.standard_errors[0])
    assert np.max(eff.standard_errors[0]) > 0
    assert np.all(np.abs(z) < 4), z
    assert np.sum(z**2) < chi2.ppf(0.999, len(events)), z
    # The estimator is the stratified sum (the brief): w₀·ideal + (1 − w₀)·mean(samples).
    w0 = eff.ideal_weight[0]
    assert abs(w0 - model.no_error_probability) < 1e-15
    np.testing.assert_allclose(
        eff.probabilities[0], w0 * eff.ideal[0] + (1 - w0) * eff.samples[0].mean(axis=0), atol=1e-14, rtol=0
    )


def test_controlled_repeat_block_counts():
    # Source: the transpiler is the reference for gate counts: qiskit.transpile(...).count_ops()
    # of the whole circuit at optimisation level 0, and lower_piece's counts of each piece;
    # λ_b is the closed form 1 − (1 − p₂)^(r·n₂)·(1 − p₁)^(r·n₁) (the brief).
    g3 = _three_cx_gate()
    assert dict(transpile(_one(g3, 2), basis_gates=list(BASIS), optimization_level=0).count_ops()) == {
        "cx": 3, "sx": 2, "rz": 1
    }
    cg = g3.control(1)
    wrapper = QuantumCircuit(3, name="cg^4")
    for _ in range(4):
        wrapper.append(cg, [0, 1, 2])
    qc = QuantumCircuit(3)
    qc.h(0)
    qc.append(wrapper.to_gate(), [0, 1, 2])  # a repetition wrapper, as phase estimation writes V^(2^j)
    qc.append(g3, [2, 1])
    p2, p1 = 0.01, 0.002
    model = block_errors(qc, GateNoise(two_qubit=p2, one_qubit=p1))
    assert [run.repeat for run in model.decomposition.runs] == [1, 4, 1]
    assert model.qubits == ((0,), (0, 1, 2), (2, 1))
    for b, run in enumerate(model.decomposition.runs):
        counts = lower_piece(model.decomposition.pieces[run.key], BASIS).counts
        n2 = counts.get("cx", 0)
        n1 = counts.get("sx", 0) + counts.get("x", 0)
        assert model.two_qubit[b] == run.repeat * n2 and model.one_qubit[b] == run.repeat * n1
        closed = 1 - (1 - p2) ** (run.repeat * n2) * (1 - p1) ** (run.repeat * n1)
        assert abs(model.lambdas[b] - closed) < 1e-15
    assert model.two_qubit[2] == 3 and model.one_qubit[2] == 2
    whole = transpile(qc, basis_gates=list(BASIS), optimization_level=0).count_ops()
    assert model.two_qubit_gates == whole["cx"]
    assert model.one_qubit_gates == whole.get("sx", 0) + whole.get("x", 0)
    assert abs(model.no_error_probability - np.prod(1 - model.lambdas)) < 1e-15
    assert abs(model.error_probability - (1 - model.no_error_probability)) < 1e-15


def _one(gate, n):
    qc = QuantumCircuit(n)
    qc.append(gate, range(n))
    return qc


def test_full_depolarisation_and_virtual_gates():
    # Source: the closed form at p = 1 (λ = 1: every block with a noisy gate always errs) and
    # rz being virtual (qgp.settings.VIRTUAL_GATES: error-free, common practice).
    qc = QuantumCircuit(2)
    qc.rz(0.3, 0)
    qc.cx(0, 1)
    qc.sx(1)
    model = block_errors(qc, GateNoise(two_qubit=1.0, one_qubit=0.0))
    np.testing.assert_array_equal(model.lambdas, [0.0, 1.0, 0.0])
    assert model.no_error_probability == 0.0 and model.error_probability == 1.0


# ---------------------------------------------------------------------------------------------
# 3. One block: the closed form of the depolarised output


def test_single_block_closed_form():
    # Source: Nielsen & Chuang eq. 8.102 on the block's 2 qubits: ρ → (1 − λ)ρ + λ I/4, so an
    # event's probability is (1 − λ)·P_ideal + λ·(its probability under I/4: 1/4 per fixed qubit
    # pair, 1/2 per fixed qubit), with λ = 1 − (1 − p₂)^3 (1 − p₁)^2 for the 3-cx, 2-sx gate.
    # Criterion (common practice): |z| < 4 and Σ z² within the chi-square 99.9% quantile.
    qc = _one(_three_cx_gate(), 2)
    p2, p1 = 0.1, 0.05
    lam = 1 - (1 - p2) ** 3 * (1 - p1) ** 2
    events = [{0: 0, 1: 0}, {0: 1, 1: 0}, {0: 1, 1: 1}, {1: 1}, {0: 0}]
    mixed = np.array([0.25, 0.25, 0.25, 0.5, 0.5])
    ideal = _statevector_events(qc, events)
    res = effective_event_probabilities([qc], [events], GateNoise(two_qubit=p2, one_qubit=p1, trajectories=3000, seed=5))
    assert abs(res.ideal_weight[0] - (1 - lam)) < 1e-15
    np.testing.assert_allclose(res.ideal[0], ideal, atol=1e-12, rtol=0)
    z = _z(res.probabilities[0], (1 - lam) * ideal + lam * mixed, res.standard_errors[0])
    assert np.max(res.standard_errors[0]) > 0
    assert np.all(np.abs(z) < 4), z
    assert np.sum(z**2) < chi2.ppf(0.999, len(events)), z


# ---------------------------------------------------------------------------------------------
# 4. Read-out flips


def test_readout_flips_at_zero_gate_noise():
    # Source: the definition of a symmetric read-out error M = [[1-r, r], [r, 1-r]], applied by
    # qgp.readout.noise.events_from_probabilities to qiskit's ideal Statevector distribution.
    r = 0.07
    qc = random_circuit(4, 4, seed=3)
    probs = Statevector(qc).probabilities()[None, :]
    expected = events_from_probabilities(probs, [0, 1, 2, 3], EVENTS4[:-1], r)[0]
    # With r > 0 a given ideal (per event, before flips) cannot be flipped: it is ignored.
    junk = [np.full(len(EVENTS4) - 1, 0.123)]
    res = effective_event_probabilities([qc], [EVENTS4[:-1]], GateNoise(readout=r), ideal=junk)
    np.testing.assert_allclose(res.probabilities[0], expected, atol=1e-12, rtol=0)
    np.testing.assert_allclose(res.ideal[0], expected, atol=1e-12, rtol=0)


def test_given_ideal_is_used_without_readout():
    # Source: the brief's contract: with readout 0, a given ideal is the error-free part as is.
    qc = random_circuit(3, 3, seed=4)
    given = [np.array([0.3, 0.6])]
    res = effective_event_probabilities([qc], [[{0: 0}, {1: 1}]], GateNoise(), ideal=given)
    np.testing.assert_array_equal(res.probabilities[0], given[0])


def test_reproducible_and_independent_of_kept_prefixes(monkeypatch):
    # Source: the module's documented random stream (common practice: one seeded generator, drawn
    # per circuit before simulating), so recomputing each trajectory's noiseless prefix instead of
    # keeping it cannot change the answer.
    qc = _basis_circuit()
    events = [{0: 0}, {1: 1, 2: 0}]
    spec = GateNoise(two_qubit=0.1, one_qubit=0.02, readout=0.01, trajectories=150, seed=9)
    a = effective_event_probabilities([qc, qc], [events, events], spec)
    monkeypatch.setattr(ne, "_cap", lambda cap: 0)
    b = effective_event_probabilities([qc, qc], [events, events], spec)
    for i in range(2):
        np.testing.assert_allclose(a.samples[i], b.samples[i], atol=1e-14, rtol=0)
    assert not np.array_equal(a.samples[0], a.samples[1])  # one stream: the circuits differ


# ---------------------------------------------------------------------------------------------
# 5. Conditioned sampling


def test_first_error_distribution():
    # Source: the law of the first success of independent Bernoulli trials, conditioned on at
    # least one: P(first = b) = λ_b Π_{a<b}(1 − λ_a)/(1 − w₀); a binomial z-test per block
    # (|z| < 4.5, common practice) and λ_a for a later block given the first.
    lam = np.array([0.01, 0.3, 0.0, 0.05, 0.2, 1e-6])
    n = 200_000
    first, errs = _sample_errors(lam, n, np.random.default_rng(5))
    survive = np.concatenate([[1.0], np.cumprod(1 - lam)[:-1]])
    q = lam * survive / (1 - np.prod(1 - lam))
    counts = np.bincount(first, minlength=lam.size)
    assert counts[2] == 0  # λ = 0: never the first
    for b in np.flatnonzero(q > 0):
        z = (counts[b] - n * q[b]) / np.sqrt(n * q[b] * (1 - q[b]))
        assert abs(z) < 4.5, (b, z)
    assert np.all(errs[np.arange(n), first]) and np.all(errs.sum(axis=1) >= 1)
    assert not np.any(errs & (np.arange(lam.size)[None, :] < first[:, None]))
    after = first == 0
    for a in (1, 3, 4):
        k, m = errs[after, a].sum(), after.sum()
        assert abs(k - m * lam[a]) / np.sqrt(m * lam[a] * (1 - lam[a])) < 4.5
    assert not errs[:, 2].any()


def test_first_error_distribution_tiny_lambdas():
    # Source: as above; λ below the float resolution of 1 − λ (1 − 1e-17 == 1.0) still gives
    # P(first = b) ∝ λ_b Π_{a<b}(1 − λ_a) = (1/4, 1/4, 1/2): the inverse CDF is in log space.
    lam = np.array([1e-17, 1e-17, 2e-17])
    n = 40_000
    first, _ = _sample_errors(lam, n, np.random.default_rng(8))
    q = np.array([0.25, 0.25, 0.5])
    z = (np.bincount(first, minlength=3) - n * q) / np.sqrt(n * q * (1 - q))
    assert np.all(np.abs(z) < 4.5), z


# ---------------------------------------------------------------------------------------------
# 6. Bad input


def test_bad_input():
    # Source: qgp's one-line QgpError convention (each message names the fix).
    qc = _basis_circuit()
    with pytest.raises(QgpError, match="effective") as err:
        effective_event_probabilities([qc], [[{0: 0}]], GateNoise(method="density_matrix"))
    assert "\n" not in str(err.value)
    wide = QuantumCircuit(13, name="wide")
    wide.x(range(13))
    big = QuantumCircuit(13)
    big.append(wide.to_gate(), range(13))
    with pytest.raises(QgpError, match="use method='trajectories' or fewer qubits") as err:
        effective_event_probabilities([big], [[{0: 0}]], GateNoise(two_qubit=0.01))
    assert "\n" not in str(err.value)
    with pytest.raises(QgpError, match="values 0 or 1"):
        effective_event_probabilities([qc], [[{5: 0}]], GateNoise(two_qubit=0.01))
    with pytest.raises(QgpError, match="values 0 or 1"):
        effective_event_probabilities([qc], [[{0: 2}]], GateNoise(two_qubit=0.01))
    with pytest.raises(QgpError, match="one list per circuit"):
        effective_event_probabilities([qc], [], GateNoise(two_qubit=0.01))
    with pytest.raises(QgpError, match="one per event"):
        effective_event_probabilities([qc], [[{0: 0}]], GateNoise(two_qubit=0.01), ideal=[[0.1, 0.2]])
    with pytest.raises(QgpError, match="memory cap"):
        effective_event_probabilities([qc], [[{0: 0}]], GateNoise(two_qubit=0.01), cap_bytes=64)
