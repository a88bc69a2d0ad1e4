"""`qgp bench`: QSVT — seconds per simulated block-encoding call, and a degree-1000 inversion end to end.

Both on the bench problem (the demo's n = 16 training points, padded A, eigenvalue bounds from
qgp.classical.system.eigenvalue_bounds), ``[circuit] method = "qsvt"`` with the ``dilation``
encoding, whose U (system + block qubits) is small enough for the simulation form to fuse each call
with the phase after it into one multiplexer (qgp.circuits.qsvt):

* `qsvt_call_rate`: the simulation-form QSVT inversion with ŷ prepared, at a fixed degree d (d
  block-encoding calls), and the reference-register circuit the amortised strategy runs instead
  (qgp.readout.estimators.reference_circuit: the same d calls on a state with m more qubits);
  each simulated by `qgp.readout.simulate.run_statevectors` on the numpy engine and on Aer, warm
  (one run first: imports, the engine's compiled program, Aer's start-up), numpy and Aer runs
  interleaved, the median of the repeats. Calls per second = d / seconds of the whole circuit
  (state preparation and the closing flag included: they are a few instructions of d + 5).
* `qsvt_degree_1000`: ``infer`` (amortised strategy, engine "auto") with ``[circuit] degree`` = 999
  (odd, the inversion polynomial; the variance polynomial has degree 1000) on every test point of
  the bench problem; cold (the circuit caches and the polynomials' memo caches cleared before each
  run), the median of the repeats, with its build / transpile / simulate / post-process breakdown.

A tool (qgp.tools): nothing in the library imports it.
"""

from __future__ import annotations

import statistics
import time
from collections.abc import Callable

import numpy as np

__all__ = ["qsvt_call_rate", "qsvt_degree_1000"]

Progress = Callable[[str], None]


def _qsvt_settings(degree: int, encoding: str = "dilation"):
    from qgp.settings import CircuitSettings

    return CircuitSettings(method="qsvt", clock_qubits=0, encoding=encoding, degree=int(degree))


def _problem(problem):
    if problem is not None:
        return problem
    from qgp.tools.bench import BenchSettings, _bench_problem

    return _bench_problem(BenchSettings(name="default").n_test)


def _clear_polynomial_caches() -> None:
    """Forget the memoised inversion polynomials (qgp.circuits.polynomials keeps them in
    functools caches, which qgp.readout.builds.clear_caches does not reach)."""
    from qgp.circuits import polynomials

    for obj in vars(polynomials).values():
        if callable(getattr(obj, "cache_clear", None)):
            obj.cache_clear()


def _run(qc, engine: str) -> np.ndarray:
    from qgp.readout.simulate import engine_scope, run_statevectors

    with engine_scope(engine) as used:
        [sv] = run_statevectors([qc])
    if used != [engine]:
        raise RuntimeError(f"asked for the {engine} engine, ran {used}")
    return np.asarray(sv)


def _time_engines(qc, calls: int, repeats: int, aer_repeats: int) -> dict:
    """Seconds of one circuit on the numpy engine and on Aer, warm, interleaved; medians."""
    from qgp.readout.engine import buffer_pool

    with buffer_pool():  # the numpy engine's work buffers live across the runs, as within an inference
        t0 = time.perf_counter()
        first = _run(qc, "numpy")  # compiles the engine's program for this circuit (cached on it)
        t_first = time.perf_counter() - t0
        reference = _run(qc, "aer")
        numpy_ts, aer_ts = [], []
        for r in range(max(repeats, aer_repeats)):
            if r < repeats:
                t0 = time.perf_counter()
                _run(qc, "numpy")
                numpy_ts.append(time.perf_counter() - t0)
            if r < aer_repeats:
                t0 = time.perf_counter()
                _run(qc, "aer")
                aer_ts.append(time.perf_counter() - t0)
    t_numpy, t_aer = statistics.median(numpy_ts), statistics.median(aer_ts)
    return {
        "qubits": qc.num_qubits,
        "instructions": len(qc.data),
        "numpy_seconds": t_numpy,
        "numpy_first_run_seconds": t_first,
        "aer_seconds": t_aer,
        "numpy_seconds_per_call": t_numpy / calls,
        "aer_seconds_per_call": t_aer / calls,
        "numpy_calls_per_second": calls / t_numpy,
        "aer_calls_per_second": calls / t_aer,
        "aer_over_numpy": t_aer / t_numpy,
        "numpy_seconds_all": numpy_ts,
        "aer_seconds_all": aer_ts,
        "max_abs_difference": float(np.max(np.abs(first - reference))),
    }


def qsvt_call_rate(
    problem=None,
    degree: int = 1001,
    *,
    encoding: str = "dilation",
    repeats: int = 7,
    aer_repeats: int = 5,
    say: Progress = print,
) -> dict:
    """Block-encoding calls per second of the simulation-form QSVT inversion (see the module docstring).

    Parameters
    ----------
    problem : Problem, optional
        The bench problem (`qgp.tools.bench._bench_problem`); built when not given.
    degree : int
        The inversion polynomial's degree d (odd): the circuit makes d block-encoding calls.
    encoding : "dilation" or "lcu"
    repeats, aer_repeats : int
        Timed runs on the numpy engine and on Aer (the median is reported).

    Returns
    -------
    dict
        ``inversion`` and ``reference`` (the amortised strategy's circuit): qubits, seconds,
        seconds and calls per second on each engine, Aer over numpy, and the largest amplitude
        difference between the engines; ``numpy_calls_per_second`` is the inversion's.
    """
    from qgp.circuits.qsvt import _MAX_FUSED_QUBITS
    from qgp.circuits.qsvt_inversion import build_qsvt_inversion
    from qgp.classical.system import eigenvalue_bounds
    from qgp.readout.estimators import reference_circuit
    from qgp.readout.inference import unit_inputs

    problem = _problem(problem)
    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    settings = _qsvt_settings(degree, encoding)
    say(f"QSVT call rate: {encoding} encoding, degree {degree}, building the simulation form")
    t0 = time.perf_counter()
    inv = build_qsvt_inversion(A, settings, "inverse", bounds, prepare=unit_inputs(problem)[0], form="simulation")
    t_build = time.perf_counter() - t0
    d = int(inv.n_oracle_calls)
    m = inv.n_system_qubits
    b = inv.block_encoding.n_block_qubits  # the encoding's own block qubits (the signal qubit not counted)
    fused_calls = sum(1 for inst in inv.circuit.data if getattr(inst.operation, "label", None) == "U·phase")
    ref = reference_circuit(inv)
    out = {
        "n_train": problem.n_train,
        "encoding": encoding,
        "degree": d,
        "block_encoding_calls": d,
        "system_qubits": m,
        "block_qubits": inv.n_block_qubits,
        "fused": m + b <= _MAX_FUSED_QUBITS,
        "fused_calls": fused_calls,
        "build_seconds": t_build,
    }
    for name, qc in (("inversion", inv.circuit), ("reference", ref)):
        say(f"QSVT call rate: {name} circuit on {qc.num_qubits} qubits, numpy engine ×{repeats} and Aer ×{aer_repeats}")
        out[name] = _time_engines(qc, d, repeats, aer_repeats)
    out["qubits"] = out["inversion"]["qubits"]
    out["reference_qubits"] = out["reference"]["qubits"]
    out["numpy_calls_per_second"] = out["inversion"]["numpy_calls_per_second"]
    out["aer_calls_per_second"] = out["inversion"]["aer_calls_per_second"]
    out["aer_over_numpy"] = out["inversion"]["aer_over_numpy"]
    out["note"] = (
        f"d = {d} block-encoding calls ({fused_calls} fused U·phase multiplexers) on the {encoding} encoding of the "
        f"padded n = {problem.n_train} A; calls per second = d / seconds of run_statevectors on the whole circuit "
        f"(ŷ prepared: {out['qubits']} qubits; the amortised strategy's reference-register circuit: "
        f"{out['reference_qubits']} qubits), warm, numpy and Aer interleaved, medians"
    )
    return out


def qsvt_degree_1000(problem=None, degree: int = 999, *, encoding: str = "dilation", repeats: int = 3, say: Progress = print) -> dict:
    """Wall time of cold ``infer`` with a QSVT inversion of ``degree`` on every test point of ``problem``.

    Parameters
    ----------
    problem : Problem, optional
        The bench problem with its test points; built (200 test points) when not given.
    degree : int
        ``[circuit] degree`` (odd): the inversion polynomial's; the variance polynomial's is degree + 1.
    repeats : int
        Cold runs; the run at the median is reported.

    Returns
    -------
    dict
        ``seconds`` (median), every run's seconds, the median run's ``timings`` (build, transpile,
        simulate, post_process), polynomial degrees, block-encoding calls, errors against the exact GP,
        strategy, engine, the simulation runs made.
    """
    from qgp.readout.builds import clear_caches
    from qgp.readout.inference import infer
    from qgp.settings import ReadoutSettings

    problem = _problem(problem)
    settings = _qsvt_settings(degree, encoding)
    infer(problem, _qsvt_settings(21, encoding), ReadoutSettings(), progress=None)  # imports, engine start-up
    say(f"QSVT inference: degree {degree}, {encoding} encoding, {problem.n_test} test points, {repeats} cold run(s)")
    runs = []
    for _ in range(repeats):
        clear_caches()
        _clear_polynomial_caches()
        t0 = time.perf_counter()
        result = infer(problem, settings, ReadoutSettings(), progress=None)
        runs.append((time.perf_counter() - t0, result))
    ordered = sorted(runs, key=lambda r: r[0])
    seconds, result = ordered[len(ordered) // 2]
    s = result.summary()
    calls = int(result.inverse.n_oracle_calls) + int(result.inverse_sqrt.n_oracle_calls)
    simulate = s["timings"].get("simulate", 0.0)
    return {
        "n_train": problem.n_train,
        "test_points": problem.n_test,
        "encoding": encoding,
        "degree": s["polynomial_degree"],
        "degree_inverse_sqrt": s["polynomial_degree_inverse_sqrt"],
        "block_encoding_calls": s["block_encoding_calls"],
        "block_encoding_calls_simulated": calls,
        "seconds": seconds,
        "seconds_all": [r[0] for r in runs],
        "timings": s["timings"],
        "simulated_calls_per_second": calls / simulate if simulate > 0 else None,
        "strategy": s["strategy"],
        "engine": s["engine"],
        "total_qubits": s["total_qubits"],
        "simulation_runs": s["simulation_runs"],
        "mean_max_abs_error": s["mean_max_abs_error"],
        "variance_max_abs_error": s["variance_max_abs_error"],
        "polynomial_max_error": s["polynomial_max_error"],
        "note": f"infer (strategy and engine auto) with method qsvt, {encoding} encoding, degree {degree} (variance "
        f"polynomial {s['polynomial_degree_inverse_sqrt']}) on all {problem.n_test} test points; cold: circuit caches "
        "(qgp.readout.builds.clear_caches) and memoised polynomials cleared before each run; the run at the median "
        f"of {repeats}; simulated_calls_per_second counts both inversions' calls over the simulate time",
    }
