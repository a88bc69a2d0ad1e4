"""What `qgp inspect` says is what `qgp run` does: the simulation plan, the split reference
register, the memory guard before the LCU's Pauli decomposition, and the clock-register check.

Sources beside each check. The memory model throughout: a statevector of q qubits is 16·2^q bytes
(complex128 amplitudes, common practice; qgp.memory.statevector_bytes).
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pytest

import qgp.circuits.encoding as encoding
from qgp.tools.cli import main
from qgp.config import load_config
from qgp.errors import QgpError
from qgp.readout.estimators import (
    ONE_RUN,
    SPLIT_RUN,
    _reference_with_snapshot,
    _PHASE_ESTIMATED,
    _FINAL,
    hadamard_test_circuit,
    operators_from_reference_run,
    reference_circuit,
    variance_circuit,
)
from qgp.readout.builds import cached_pair as _cached_pair, qpe_body as _qpe_body
from qgp.readout.inference import clear_caches, infer, planned_qubits, unit_inputs as _unit_inputs
from qgp.reports.inspection import inspect_problem, lcu_block_qubits, simulation_plan
from qgp.circuits.inversion import build_inversion
from qgp.classical.kernels import RBF
from qgp.classical.problem import build_problem
from qgp.settings import CircuitSettings, ReadoutSettings
from qgp.readout.simulate import run_saved_statevectors, run_statevectors, statevector_bytes
from qgp.classical.system import eigenvalue_bounds

TOL = 1e-10


def _problem(n: int = 6, n_test: int = 5, seed: int = 3):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 5, size=(n, 2))
    y = np.sin(X[:, 0]) + 0.3 * X[:, 1]
    return build_problem(X, y, RBF(signal_variance=1.0, lengthscale=1.3), noise_variance=0.2, X_test=rng.uniform(0, 5, size=(n_test, 2)))


CIRCUITS = [
    pytest.param(CircuitSettings(clock_qubits=4), id="walk-dilation"),
    pytest.param(CircuitSettings(clock_qubits=3, encoding="lcu"), id="walk-lcu"),
    pytest.param(CircuitSettings(clock_qubits=4, evolution="exact"), id="exact"),
]


# -- the plan is what is built and simulated ---------------------------------------------------------


@pytest.mark.parametrize("circuit", CIRCUITS)
def test_plan_qubits_and_bytes_are_the_circuits_built(circuit):
    # Compared against the circuits actually built and the arrays the simulator actually returns.
    p = _problem(n=4 if circuit.encoding == "lcu" and circuit.evolution == "walk" else 6)
    plan = simulation_plan(p, circuit, ReadoutSettings())
    A = p.A_padded
    bounds = eigenvalue_bounds(A, p.noise_variance)
    inv, sq = _cached_pair(A, circuit, bounds)
    assert plan.block.qubits == inv.n_block_qubits and not plan.block.is_bound
    # Amortised, one run: the reference circuit's width and its two saved statevectors.
    [run] = plan.amortised
    qc = _reference_with_snapshot(inv)
    assert run.what == ONE_RUN and run.qubits == qc.num_qubits == reference_circuit(inv).num_qubits
    states = run_saved_statevectors(qc, [_PHASE_ESTIMATED, _FINAL])
    held = sum(s.nbytes for s in states)
    assert held == run.statevectors * statevector_bytes(run.qubits), (held, run.statevectors, run.qubits)
    ops = operators_from_reference_run(inv, sq)
    assert run.bytes >= held + ops.B.nbytes + ops.M.nbytes
    assert ops.simulation_runs[0]["qubits"] == run.qubits
    # Per-point: the Hadamard test has the probe, the variance circuit has not.
    yhat, _, khat, _ = _unit_inputs(p)
    qpe = _qpe_body(A, circuit, bounds, inv)
    widths = [hadamard_test_circuit(qpe, inv, khat[:, 0], yhat).num_qubits, variance_circuit(sq.circuit, khat[:, 0]).num_qubits]
    assert [r.qubits for r in plan.per_point[:2]] == widths
    assert [r.runs for r in plan.per_point] == [p.n_test, p.n_test, p.n_test, 1]
    sv = run_statevectors([variance_circuit(sq.circuit, khat[:, 0])])[0]
    assert sv.nbytes == plan.per_point[1].bytes


def test_inspect_and_infer_agree_on_qubits():
    p = _problem()
    circuit = CircuitSettings(clock_qubits=4)
    for strategy in ("amortised", "per-point", "hybrid", "auto"):
        ro = ReadoutSettings(strategy=strategy)
        info = inspect_problem(p, circuit, ro)
        s = infer(p, circuit, ro, progress=None).summary()
        assert info["qubits"]["total"] == s["total_qubits"] and info["qubits"]["block"] == s["block_qubits"]
        ran = s["strategy"]
        assert ran == strategy or strategy == "auto"
        planned = [(r["qubits"], r["runs"], r["columns_per_run"]) for r in info["simulations"][ran]]
        made = [(r["qubits"], r["runs"], r["columns_per_run"]) for r in s["simulation_runs"]]
        assert planned == made, (planned, made)
        assert info["simulations"]["strategy"] == ran and info["simulations"]["fits"][ran]
        assert info["simulations"]["reason"] == s["strategy_reason"]
        assert planned_qubits(p, circuit, ro) == max(q for q, _, _ in planned)
    json.dumps(info)  # JSON-ready


def test_inspect_keeps_its_keys_and_adds_the_plan():
    # The keys `qgp inspect --json` printed before the plan are a contract; the plan is added.
    p = _problem()
    info = inspect_problem(p, CircuitSettings(clock_qubits=4))
    for key in ("n_train", "padded_size", "qubits", "statevector_bytes", "circuit", "caveat", "condition_number"):
        assert key in info
    assert info["statevector_bytes"] == statevector_bytes(info["qubits"]["total"])
    sims = info["simulations"]
    assert set(sims) >= {"strategy", "memory_cap_bytes", "amortised", "per-point", "fits", "block_qubits_is_bound"}
    for run in sims["amortised"] + sims["per-point"]:
        assert set(run) == {"what", "qubits", "statevectors", "bytes", "runs", "columns_per_run", "fits"}
    assert info["pauli_decomposition"] is None  # the dilation has no Pauli strings


# -- the split reference register ---------------------------------------------------------------------


@pytest.mark.parametrize(
    "circuit", [CircuitSettings(clock_qubits=4), CircuitSettings(clock_qubits=4, evolution="exact")], ids=["walk", "exact"]
)
def test_split_reference_register_gives_the_one_run_numbers(circuit):
    # The same linear map applied column block by column block: B and M, and every prediction,
    # equal the one-run numbers to 1e-10 (round-off of different but equivalent circuits).
    p = _problem()
    one = infer(p, circuit, ReadoutSettings(), progress=None)
    # 20 KiB: the one run (3 + 3 reference qubits over the inversion, 2 statevectors) does not
    # fit; 10 qubits do (the walk: r′ = 1, 4 runs of 2 columns; exact, no block qubit: r′ = 2).
    messages: list[str] = []
    ro = ReadoutSettings(memory_cap_bytes=20 * 1024)
    plan = simulation_plan(p, circuit, ro)
    r = plan.reference_qubits
    assert r == (1 if circuit.evolution == "walk" else 2) and plan.amortised[0].runs == 2 ** (3 - r)
    split = infer(p, circuit, ro, progress=messages.append)
    worst = {
        "B": np.max(np.abs(split.operators.B - one.operators.B)),
        "M": np.max(np.abs(split.operators.M - one.operators.M)),
        "mean": np.max(np.abs(split.mean_quantum - one.mean_quantum)),
        "variance": np.max(np.abs(split.variance_quantum - one.variance_quantum)),
        "p_flag": np.max(np.abs(split.p_flag - one.p_flag)),
    }
    assert max(worst.values()) < TOL, f"worst residuals {worst}"
    assert any(f"reference register split into {2 ** (3 - r)} runs of 2^{r} columns" in m for m in messages), messages
    [run] = split.summary()["simulation_runs"]
    assert {k: run[k] for k in ("what", "qubits", "runs", "columns_per_run")} == {
        "what": SPLIT_RUN, "qubits": 10, "runs": 2 ** (3 - r), "columns_per_run": 2**r
    }
    assert one.summary()["simulation_runs"][0]["what"] == ONE_RUN
    assert one.summary()["simulation_runs"][0]["columns_per_run"] == 8


def test_split_run_of_circuits_that_do_not_share_a_prefix():
    # inverse_sqrt built with its own oracle: M's columns come from its own uncomputed circuit with
    # the rotation g² (two kinds of run), still equal to the one-run M to 1e-10.
    rng = np.random.default_rng(14)
    x = rng.normal(size=(8, 8))
    a = x @ x.T / 8 + np.eye(8)
    lam = np.linalg.eigvalsh(a)
    s = CircuitSettings(clock_qubits=3, evolution="exact")
    inv = build_inversion(a, s, "inverse", (lam[0], lam[-1]), form="simulation")
    sq = build_inversion(a, s, "inverse_sqrt", (lam[0], lam[-1]), form="simulation")
    one = operators_from_reference_run(inv, sq)
    split = operators_from_reference_run(inv, sq, reference_qubits=1)
    rb, rm = np.max(np.abs(split.B - one.B)), np.max(np.abs(split.M - one.M))
    assert max(rb, rm) < TOL, f"B differs by {rb:.3g}, M by {rm:.3g}"
    assert [r["runs"] for r in split.simulation_runs] == [4, 4]


def test_split_operators_are_cached_and_say_so():
    p = _problem(seed=5)
    circuit = CircuitSettings(clock_qubits=3)
    ro = ReadoutSettings(memory_cap_bytes=20 * 1024)
    clear_caches()
    cold = infer(p, circuit, ro, progress=None).summary()["simulation_runs"]
    warm = infer(p, circuit, ro, progress=None).summary()["simulation_runs"]
    assert [r["from_cache"] for r in cold] == [False] and [r["from_cache"] for r in warm] == [True]
    # 20 KiB: 8 inversion qubits + r′ = 2 reference qubits fit (16 KiB), so 2^(3−2) = 2 runs.
    assert [r["runs"] for r in cold] == [r["runs"] for r in warm] == [2]


def test_per_point_jobs_batched_under_a_small_cap_give_the_same_numbers():
    # Batching the per-point circuits into several simulator jobs (each holding its final states)
    # changes nothing but memory: the same statevectors, so the same probabilities exactly.
    p = _problem()
    circuit = CircuitSettings(clock_qubits=3)
    a = infer(p, circuit, ReadoutSettings(strategy="per-point"), progress=None)
    b = infer(p, circuit, ReadoutSettings(strategy="per-point", memory_cap_bytes=20 * 1024), progress=None)
    for name in ("p0", "p1", "p_flag", "variance_quantum_hadamard"):
        assert np.array_equal(getattr(a, name), getattr(b, name)), name


def test_nothing_fits_is_refused_before_building():
    p = _problem()
    with pytest.raises(QgpError, match="above the memory cap") as err:
        infer(p, CircuitSettings(clock_qubits=4), ReadoutSettings(memory_cap_bytes=4 * 1024), progress=None)
    assert "\n" not in str(err.value)


# -- the memory guard before the Pauli decomposition -------------------------------------------------


def _forbid_decomposition(monkeypatch):
    def boom(*_, **__):
        raise AssertionError("the Pauli decomposition ran")

    monkeypatch.setattr(encoding, "pauli_decomposition", boom)


def test_lcu_guard_refuses_before_decomposing(monkeypatch):
    # n = 32 (m = 5): the decomposition needs 66·4^5 + T·147 bytes ≈ 100 KB at the bound; a cap of
    # 64 KiB refuses it in one line that names the bytes and the fix, without running it.
    _forbid_decomposition(monkeypatch)
    p = _problem(n=32)
    circuit = CircuitSettings(clock_qubits=2, encoding="lcu")
    ro = ReadoutSettings(memory_cap_bytes=64 * 1024)
    t0 = time.perf_counter()
    with pytest.raises(QgpError) as err:
        infer(p, circuit, ro, progress=None)
    msg = str(err.value)
    assert time.perf_counter() - t0 < 5
    assert "\n" not in msg and "Pauli decomposition" in msg and "GiB" in msg and "Pauli strings" in msg
    assert 'encoding = "dilation"' in msg and "n_train" in msg
    info = inspect_problem(p, circuit, ro)  # inspect reports bounds instead
    lcu = info["pauli_decomposition"]
    assert lcu["pauli_terms_is_bound"] and lcu["block_qubits_is_bound"] and not lcu["decomposition_fits"]
    assert info["simulations"]["block_qubits_is_bound"]
    assert lcu["pauli_terms_lower_bound"] <= lcu["pauli_terms"] <= (4**5 + 2**5) // 2
    assert info["qubits"]["block"] == lcu_block_qubits(lcu["pauli_terms"])


def test_decomposition_refuses_itself_when_memory_is_short(monkeypatch):
    # The last line of defence inside pauli_decomposition: against the memory the process has left.
    import qgp.memory

    monkeypatch.setattr(qgp.memory, "available_memory_bytes", lambda: 1000)
    with pytest.raises(QgpError, match='use \\[circuit\\] encoding = "dilation"'):
        encoding.pauli_decomposition(np.eye(32))


@pytest.mark.parametrize("kind", ["rbf", "dense", "banded", "diagonal"])
def test_pauli_term_bounds_hold(kind):
    # Bounds from the entries alone (qgp.circuits.encoding.pauli_term_bounds: ℓ₁ and Parseval per X-mask)
    # bracket the count the decomposition finds.
    rng = np.random.default_rng(7)
    n = 32
    if kind == "rbf":
        x = np.sort(rng.uniform(0, 10, n))
        a = np.exp(-0.5 * (x[:, None] - x[None, :]) ** 2) + 0.1 * np.eye(n)
    elif kind == "dense":
        a = rng.normal(size=(n, n))
        a = a + a.T
    elif kind == "banded":
        a = np.diag(np.full(n, 2.0)) + np.diag(np.ones(n - 1), 1) + np.diag(np.ones(n - 1), -1)
    else:
        a = np.diag(rng.uniform(1, 2, n))
    lower, upper = encoding.pauli_term_bounds(a)
    terms = len(encoding.pauli_decomposition(a))
    assert lower <= terms <= upper <= encoding.pauli_terms_bound(5), (lower, terms, upper)


def test_decomposition_memory_formula_matches_a_measurement():
    # Measured with tracemalloc (numpy reports its allocations to it): the formula of
    # qgp.circuits.encoding.pauli_decomposition_bytes is within 20% above the measured peak at m = 8.
    rng = np.random.default_rng(0)
    x = rng.normal(size=(256, 256))
    a = x + x.T
    tracemalloc.start()
    tracemalloc.reset_peak()
    op = encoding.pauli_decomposition(a)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    formula = encoding.pauli_decomposition_bytes(8, len(op))
    assert 0.8 * formula <= peak <= formula, (peak, formula)


def test_inspect_cli_shows_the_plan(capsys):
    assert main(["inspect", "--demo"]) == 0
    out = capsys.readouterr().out
    assert "amortised simulation (chosen)" in out and "per-point simulation" in out and "memory cap" in out


# -- clock_qubits = 1 --------------------------------------------------------------------------------


def test_one_clock_qubit_needs_an_evolution_time(tmp_path: Path):
    # run refuses c = 1 without an evolution time (qgp.circuits.phase_estimation.derived_evolution_time:
    # t = 2π(1 − 2^(1−c))/λ_max is 0); the config and inspect now say so first, in one line.
    (tmp_path / "train.csv").write_text("x,y\n0.0,1.0\n1.0,2.0\n2.5,0.5\n")
    base = '[data]\ntrain = "train.csv"\ntarget = "y"\n[noise]\nvariance = 0.1\n[circuit]\nclock_qubits = 1\n'
    (tmp_path / "c.toml").write_text(base)
    with pytest.raises(QgpError, match="clock_qubits = 1 needs \\[circuit\\] evolution_time") as err:
        load_config(tmp_path / "c.toml")
    assert "\n" not in str(err.value)
    p = _problem()
    with pytest.raises(QgpError, match="evolution_time"):
        inspect_problem(p, CircuitSettings(clock_qubits=1))
    with pytest.raises(QgpError, match="evolution_time"):
        infer(p, CircuitSettings(clock_qubits=1), progress=None)
    (tmp_path / "c.toml").write_text(base + "evolution_time = 1.0\n")
    cfg = load_config(tmp_path / "c.toml")
    c = CircuitSettings(clock_qubits=1, evolution_time=1.0)
    assert inspect_problem(p, c)["qubits"]["clock"] == cfg.circuit.clock_qubits == 1
    assert np.all(np.isfinite(infer(p, c, progress=None).mean_quantum))


# -- the memory the process may use -------------------------------------------------------------------


def test_available_memory_respects_the_address_space_limit():
    # `ulimit -v` (RLIMIT_AS) is invisible in /proc/meminfo; the cap must not exceed what is left.
    code = (
        "import resource\n"
        "from qgp.memory import available_memory_bytes, _status_bytes\n"
        "size = _status_bytes('VmSize:')\n"
        "resource.setrlimit(resource.RLIMIT_AS, (size + 2**30, resource.RLIM_INFINITY))\n"
        "print(available_memory_bytes(), 2**30 + size - _status_bytes('VmSize:'))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split()
    avail, room = int(out[0]), int(out[1])
    assert avail <= 2**30 and abs(avail - room) < 2**24, (avail, room)


def test_a_recent_memory_reading_serves_small_runs_only(monkeypatch):
    # default_memory_cap(max_age=…) returns a reading under max_age old by the same functions;
    # another reader is never served an old reading, and infer's guard reads again for a run that
    # needs 1/64 of the cap or more (common practice: a cache keyed by its inputs, bounded in age).
    import qgp.memory
    from qgp.readout.inference import _guard

    calls = []
    real = qgp.memory.available_memory_bytes

    def counting():
        calls.append(1)
        return real()

    monkeypatch.setattr(qgp.memory, "available_memory_bytes", counting)
    first = qgp.memory.default_memory_cap()
    assert qgp.memory.default_memory_cap(max_age=60.0) == first and len(calls) == 1
    qgp.memory.default_memory_cap()
    assert len(calls) == 2, "max_age = 0 must read again"
    readers = (qgp.memory.default_memory_cap, qgp.memory.available_memory_bytes)
    problem, circuit = _problem(), CircuitSettings(clock_qubits=8, evolution="exact")
    need = max(r.bytes for r in simulation_plan(problem, circuit, ReadoutSettings(), cap=first).runs())
    for stale, reads in ((128 * need, 0), (32 * need, 1)):
        monkeypatch.setattr(qgp.memory, "_LAST_CAP", (time.monotonic(), stale, readers))
        before = len(calls)
        _guard(problem, circuit, ReadoutSettings())
        assert len(calls) - before == reads, (stale / need, len(calls) - before)
    monkeypatch.setattr(qgp.memory, "available_memory_bytes", lambda: 1 << 20)
    assert qgp.memory.default_memory_cap(max_age=60.0) == 1 << 19, "a reading by another reader was reused"
