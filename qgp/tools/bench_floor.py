"""`qgp bench`: simulation time against its floor, a large problem end to end, the exact GP's time.

The floor of a circuit is what any statevector simulation of its fused form must spend: for every
stage that touches the whole state (the half with the read-out's flag value: `_stages`), the
larger of its memory traffic and its arithmetic. Traffic counts only what the stage cannot avoid:
the controlled powers start from a product clock state (a write of the state, no read), the
inverse QFT, the rotation, the QFT and each saved state read and write it, and the inverse powers
with the closing Hadamards, contracted with the read-out rows, read it once — at the copy bandwidth
measured in this run for a state of that size (read + write counted). Arithmetic: 8·d flops per
amplitude for a dense d × d block, 5·log₂C per amplitude for an FFT of length C (the radix-2
count), at the complex matrix-product rate measured in this run. It is a bound, not a
prediction: no simulator reaches both rates at once, and no FFT reaches a matrix product's rate.

A tool (qgp.tools): nothing in the library imports it.
"""

from __future__ import annotations

import math
import statistics
import time
from collections.abc import Callable

import numpy as np

__all__ = ["machine_rates", "floor_case", "large_n", "classical_times", "exact_gp_call", "sample_loops", "per_call_seconds"]

Progress = Callable[[str], None]


def machine_rates(state_bytes: int) -> dict:
    """Copy bandwidth (read + write counted) for a state of ``state_bytes`` (buffers touched
    before timing; the best of at least 7 copies and of ≥ 0.2 s of them: a floor takes the best
    rate seen, and a 2 MiB copy varies by 1.5× between samples on a shared machine) and the
    complex matrix-product rate (zgemm 1024³, best of 3)."""
    n = max(1, state_bytes // 16)
    a = np.ones(n, dtype=complex)
    b = np.ones_like(a)
    best = math.inf
    spent, count = 0.0, 0
    while count < 7 or (spent < 0.2 and count < 2000):
        t0 = time.perf_counter()
        np.copyto(b, a)
        dt = time.perf_counter() - t0
        best, spent, count = min(best, dt), spent + dt, count + 1
    m = np.random.default_rng(0).normal(size=(1024, 1024)) * (1 + 1j)
    gemm = math.inf
    for _ in range(3):
        t0 = time.perf_counter()
        m @ m
        gemm = min(gemm, time.perf_counter() - t0)
    return {"copy_bandwidth_bytes_per_s": 2 * a.nbytes / best, "gemm_flops_per_s": 8 * 1024**3 / gemm}


def _stages(qubits: int, system_qubits: int, clock_qubits: int, snapshot_saves: int) -> list[dict]:
    """The whole-state stages of one inversion read out on its post-selected rows (see the module
    docstring). Each is counted on 2^(qubits − 1) amplitudes: the flag is written only by the
    rotation, and the read-out keeps flag = 1 with nothing after the rotation acting on the flag, so a
    fused form never holds the other half (qgp's engine stores the flag only from the rotation on, and
    cuts it to 1 right after: `qgp.readout.engine._cut_points`). The controlled powers act on a
    clock still in |+⟩^c: their result is written from the small stored state, not read (the
    engine's `_State._from_pending`); the inverse powers and the closing Hadamards are read once,
    contracted with the read-out rows (`qgp.readout.engine._contract_multiplexer`)."""
    amps = 2 ** (qubits - 1)
    dim = 2**system_qubits
    out = [{"stage": "controlled powers, written from |+⟩^c", "bytes": 16 * amps, "flops": 8 * dim * amps}]
    for name, flops in (("inverse QFT", 5 * clock_qubits), ("rotation", 6), ("QFT", 5 * clock_qubits)):
        out.append({"stage": name, "bytes": 2 * 16 * amps, "flops": flops * amps})
    out.append(
        {"stage": "inverse powers and closing Hadamards, read-out rows only", "bytes": 16 * amps, "flops": (8 * dim + 8) * amps}
    )
    for i in range(snapshot_saves):
        out.append({"stage": f"saved state {i + 1}", "bytes": 2 * 16 * amps, "flops": 0})
    return out


def _floor(stages: list[dict], rates: dict) -> float:
    return sum(
        max(s["bytes"] / rates["copy_bandwidth_bytes_per_s"], s["flops"] / rates["gemm_flops_per_s"]) for s in stages
    )


def _best(f, repeats: int, budget: float = 0.0, setup=None) -> float:
    """Median seconds of ``f()`` over ``repeats`` calls, or over as many as fill ``budget`` seconds
    when that is more (a 2 ms run's median over 15 calls moved ±20 % between runs here); the
    minimum when fewer than 3 calls. ``setup()`` runs untimed before each call."""
    ts: list[float] = []
    while len(ts) < repeats or (sum(ts) < budget and len(ts) < 1000):
        if setup is not None:
            setup()
        t0 = time.perf_counter()
        f()
        ts.append(time.perf_counter() - t0)
    return min(ts) if len(ts) < 3 else statistics.median(ts)


def floor_case(kind: str, clock_qubits: int, *, repeats: int = 5, aer_repeats: int = 3, say: Progress = print) -> dict:
    """Seconds of the numpy engine (warm: work buffers reused between runs of one width, as within an
    inference; and cold: fresh buffers) and of Aer on one case, its floor and the ratios.

    ``kind`` "reference": the amortised reference-register run of the bench problem (n = 16,
    exact oracle) as infer reads it: the saved state before the rotation on its flag = 0 half, and
    the final state's post-selected rows only. "inversion": one inversion with ŷ prepared, the
    post-selected amplitudes read from the final state (what qgp uses of it).
    """
    from qgp.circuits.inversion import build_inversion, postselection
    from qgp.classical.system import eigenvalue_bounds
    from qgp.readout import engine
    from qgp.readout.builds import cached_pair
    from qgp.readout.estimators import _reference_with_snapshot
    from qgp.readout.inference import unit_inputs
    from qgp.readout.simulate import engine_scope, run_saved_statevectors, run_statevectors
    from qgp.tools.bench import _bench_problem, _exact_circuit

    problem = _bench_problem(2)
    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    circuit = _exact_circuit(clock_qubits)
    m = problem.system_qubits
    if kind == "reference":
        inv, _ = cached_pair(A, circuit, bounds)
        qc = _reference_with_snapshot(inv)
        labels = ["phase_estimated", "final"]

        post = postselection(inv)

        def run(name):
            with engine_scope(name):  # as infer reads it: ψ on flag = 0, the final state on the post-selected rows
                return run_saved_statevectors(qc, labels, project=post, saved_project={inv.n_system_qubits + inv.clock_qubits: 0})

        saves = 1  # the snapshot; the final state is only read on the post-selected rows
    else:
        inv = build_inversion(A, circuit, "inverse", bounds, prepare=unit_inputs(problem)[0], form="simulation")
        qc = inv.circuit

        def run(name):
            with engine_scope(name):
                return run_statevectors([qc], reduce=lambda i, amps: amps, project=postselection(inv))[0]

        saves = 0
    q = qc.num_qubits
    say(f"floor: {kind} run on {q} qubits, numpy engine ×{repeats} and Aer ×{aer_repeats}")
    first = run("numpy")  # warm: buffers touched, imports done
    reference = run("aer")
    diff = float(max(np.max(np.abs(np.asarray(a) - np.asarray(b))) for a, b in zip(
        first if isinstance(first, list) else [first], reference if isinstance(reference, list) else [reference])))
    # Cold: every run in its own scope, so its two work buffers are fresh memory (the kernel maps
    # each page on first touch: ~0.3 GB/s on this VM, measured). Warm: runs of one width inside one
    # scope reuse the buffers, as the runs of one inference do (per-point and hybrid circuits).
    # Small work buffers outlive a scope (qgp.readout.engine._KEEP_BYTES): freed before each cold run.
    t_cold = _best(lambda: run("numpy"), max(1, repeats // 3), setup=engine.release_buffers)
    from qgp.readout.engine import buffer_pool

    with buffer_pool():
        run("numpy")
        t_numpy = _best(lambda: run("numpy"), repeats, budget=0.5)
    t_aer = _best(lambda: run("aer"), aer_repeats)
    engine.release_buffers()
    rates = machine_rates(16 * 2**q)
    stages = _stages(q, m, clock_qubits, saves)
    floor = _floor(stages, rates)
    return {
        "kind": kind,
        "qubits": q,
        "clock_qubits": clock_qubits,
        "system_qubits": m,
        "passes": len(stages),
        "floor_seconds": floor,
        "numpy_seconds": t_numpy,
        "numpy_cold_seconds": t_cold,
        "numpy_cold_floor_ratio": t_cold / floor,
        "aer_seconds": t_aer,
        "numpy_floor_ratio": t_numpy / floor,
        "aer_floor_ratio": t_aer / floor,
        "aer_over_numpy": t_aer / t_numpy,
        "max_abs_difference": diff,
        "rates": rates,
        "stages": stages,
    }


def large_n(n_train: int, n_test: int, clock_qubits: int, say: Progress = print) -> dict:
    """``infer`` end to end (auto strategy and engine) on n_train points of a smooth invented
    signal, mean and variance at n_test points; seconds, the strategy and engine that ran."""
    from qgp.classical.kernels import make_kernel
    from qgp.classical.problem import build_problem
    from qgp.readout.inference import clear_caches, infer
    from qgp.settings import CircuitSettings, KernelSpec, ReadoutSettings

    rng = np.random.default_rng(7)
    X = np.sort(rng.uniform(0.0, 100.0, n_train))[:, None]
    y = np.sin(X[:, 0] / 9.0) + 0.1 * rng.normal(size=n_train)
    kernel = make_kernel(KernelSpec(family="rbf", lengthscale=4.0, signal_variance=1.0), 1)
    problem = build_problem(X, y, kernel, target_condition=20.0, X_test=np.linspace(5.0, 95.0, n_test)[:, None])
    clear_caches()
    say(f"large problem: n = {n_train}, {n_test} test points, c = {clock_qubits}")
    t0 = time.perf_counter()
    result = infer(problem, CircuitSettings(clock_qubits=clock_qubits, evolution="exact"), ReadoutSettings(), progress=None)
    seconds = time.perf_counter() - t0
    s = result.summary()
    return {
        "n": n_train,
        "test_points": n_test,
        "clock_qubits": clock_qubits,
        "seconds": seconds,
        "strategy": s["strategy"],
        "engine": s["engine"],
        "timings": s["timings"],
        "mean_max_abs_error": s["mean_max_abs_error"],
        "variance_max_abs_error": s["variance_max_abs_error"],
        "simulation_runs": s["simulation_runs"],
    }


def exact_gp_call(problem) -> Callable[[], object]:
    """The exact GP on ``problem`` with kernel evaluation (qgp.classical.gp: condition + predict)."""
    from qgp.classical.gp import condition

    def call():
        return condition(problem.X, problem.y, problem.kernel, problem.noise_variance, center=problem.center).predict(
            problem.X_test
        )

    return call


def sample_loops(f: Callable[[], object]) -> int:
    """How many calls of a sub-millisecond ``f`` one sample times: enough to last ≥ 20 ms (timer
    resolution and call overhead then stay below 1 %)."""
    f()
    loops = 1
    while True:
        t0 = time.perf_counter()
        for _ in range(loops):
            f()
        if time.perf_counter() - t0 >= 0.02:
            return loops
        loops *= 2


def per_call_seconds(f: Callable[[], object], loops: int) -> float:
    """One sample: seconds per call over ``loops`` calls of ``f``."""
    t0 = time.perf_counter()
    for _ in range(loops):
        f()
    return (time.perf_counter() - t0) / loops


def classical_times(problem, repeats: int) -> dict:
    """Median time of the exact GP from the same matrices (and of qgp.classical.gp with kernel evaluation)."""
    import scipy.linalg

    A = np.asarray(problem.A)
    ks = np.asarray(problem.k_star)
    kss = np.asarray(problem.k_star_star)
    yc = np.asarray(problem.y_centered)
    offset = problem.y_offset

    def cholesky():
        L = scipy.linalg.cholesky(A, lower=True, check_finite=False)
        alpha = scipy.linalg.cho_solve((L, True), yc, check_finite=False)
        v = scipy.linalg.solve_triangular(L, ks, lower=True, check_finite=False)
        return ks.T @ alpha + offset, kss - np.einsum("ij,ij->j", v, v)

    with_kernels = exact_gp_call(problem)

    def median_time(f):
        loops = sample_loops(f)
        return statistics.median(per_call_seconds(f, loops) for _ in range(max(5, repeats // 40)))

    out = {}
    for name, f in (("cholesky", cholesky), ("qgp_gp", with_kernels)):
        out[name + "_blas_default"] = median_time(f)
        out[name + "_blas_1_thread"] = None
        try:  # a 16 × 16 problem gains nothing from BLAS threads, and waking them can cost ms here
            from threadpoolctl import threadpool_limits

            with threadpool_limits(1):
                out[name + "_blas_1_thread"] = median_time(f)
        except ImportError:
            pass
        out[name] = min(v for k, v in out.items() if k.startswith(name + "_") and v is not None)
    return out
