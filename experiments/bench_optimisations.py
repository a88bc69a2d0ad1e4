"""Before/after ratios of each speed optimisation in qgp, measured side by side in one run.

    python experiments/bench_optimisations.py [--json OUT.json]

Each row times the plain way and qgp's way of the same computation in this one process,
alternating the two (median of the repeats), and checks that both give the same numbers
(``max_abs_difference``). The problem is the bundled demo's (n = 16, κ = 20), as in `qgp bench`.
Ratios are comparable between runs on a shared machine; absolute seconds are not. Takes ~3 min
on 2 cores.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import scipy.linalg

from qgp.tools.bench import _bench_problem
from qgp.readout.estimators import operators_from_reference_run, sample_hadamard
from qgp.readout.builds import cached_pair, with_preparation
from qgp.readout.inference import clear_caches, infer, unit_inputs
from qgp.circuits.inversion import build_inversion, statevector_array
from qgp.circuits.phase_estimation import _squares
from qgp.settings import CircuitSettings, ReadoutSettings
from qgp.readout.simulate import prepare_for_simulator, run_statevectors, simulator
from qgp.classical.system import eigenvalue_bounds


def _alternate(plain, fast, repeats: int) -> tuple[float, float, object, object]:
    """Median seconds of ``plain()`` and ``fast()`` run alternately; their last results."""
    tp, tf = [], []
    for _ in range(repeats):
        t0 = time.perf_counter()
        rp = plain()
        tp.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        rf = fast()
        tf.append(time.perf_counter() - t0)
    return statistics.median(tp), statistics.median(tf), rp, rf


def _row(name, plain_desc, fast_desc, tp, tf, diff, note=""):
    return {
        "optimisation": name,
        "before": plain_desc,
        "after": fast_desc,
        "before_seconds": tp,
        "after_seconds": tf,
        "ratio": tp / tf if tf > 0 else None,
        "max_abs_difference": diff,
        "note": note,
    }


def _max_diff(a, b) -> float:
    return float(np.max(np.abs(np.asarray(a) - np.asarray(b))))


# -- the rows --------------------------------------------------------------------------------------


def squaring(problem, c: int = 8, repeats: int = 20) -> dict:
    A = problem.A_padded
    t = 2 * np.pi * (1 - 2.0 ** (1 - c)) / float(np.linalg.eigvalsh(A)[-1])
    tp, tf, rp, rf = _alternate(
        lambda: [scipy.linalg.expm(1j * t * 2**j * A) for j in range(c)],
        lambda: _squares(scipy.linalg.expm(1j * t * A), c),
        repeats,
    )
    return _row(
        "controlled powers by squaring",
        f"{c} matrix exponentials e^(iAt·2^j)",
        "one expm and c−1 squarings",
        tp,
        tf,
        max(_max_diff(x, y) for x, y in zip(rp, rf)),
        "n = 16; scipy's expm itself scales and squares, so the two agree bit for bit",
    )


def fused_form(problem, settings: CircuitSettings, repeats: int = 3) -> dict:
    """Build + prepare + simulate one inversion on ŷ in the gate form (transpiled to Aer's gates)
    against the simulation form (fused controlled powers, native multiplexers)."""
    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    yhat = unit_inputs(problem)[0]

    def run(form):
        inv = build_inversion(A, settings, "inverse", bounds, prepare=yhat, form=form)
        return statevector_array(run_statevectors([inv.circuit])[0], inv)

    tp, tf, rp, rf = _alternate(lambda: run("gate"), lambda: run("simulation"), repeats)
    label = settings.evolution + (f" ({settings.encoding})" if settings.evolution == "walk" else "")
    if settings.evolution == "trotter":
        label += f", {settings.trotter_steps} steps, order {settings.trotter_order}"
    return _row(
        f"simulation form: {label}, c = {settings.clock_qubits}",
        "gate form: build, transpile for Aer, simulate",
        "simulation form: build, simulate (nothing to transpile)",
        tp,
        tf,
        _max_diff(rp, rf),
        "one inversion of ŷ with uncompute; difference over the whole output state",
    )


def build_cache(problem, c: int = 8, repeats: int = 3) -> dict:
    """A second inference on the same matrix (another seed, another shot count), cold and cached."""
    circuit = CircuitSettings(clock_qubits=c, evolution="exact")
    infer(problem, circuit, ReadoutSettings(), progress=None)

    def cold():
        clear_caches()
        return infer(problem, circuit, ReadoutSettings(shots=1000, seed=7), progress=None)

    def warm():
        return infer(problem, circuit, ReadoutSettings(shots=1000, seed=7), progress=None)

    tp, tf, rp, rf = _alternate(cold, warm, repeats)
    return _row(
        "build/transpile once per run (cache)",
        "circuits built and simulated again",
        "cached circuits and operators",
        tp,
        tf,
        max(_max_diff(rp.mean_quantum, rf.mean_quantum), _max_diff(rp.variance_quantum, rf.variance_quantum)),
        f"amortised infer, exact oracle, c = {c}, m = {problem.n_test}, 1000 shots seed 7",
    )


def shared_prefix(problem, c: int = 8, repeats: int = 3) -> dict:
    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    inv, inv_sqrt = cached_pair(A, CircuitSettings(clock_qubits=c, evolution="exact"), bounds)
    tp, tf, rp, rf = _alternate(
        lambda: operators_from_reference_run(inv, inv_sqrt, share_prefix=False),
        lambda: operators_from_reference_run(inv, inv_sqrt, share_prefix=True),
        repeats,
    )
    return _row(
        "phase estimation simulated once for both rotations",
        "two reference-register runs (1/λ and 1/√λ circuits)",
        "one run, the 1/√λ rotation applied to the saved pre-rotation state",
        tp,
        tf,
        max(_max_diff(rp.B, rf.B), _max_diff(rp.M, rf.M)),
        f"exact oracle, c = {c}",
    )


def batching(problem, c: int = 8, repeats: int = 3) -> dict:
    """The inversion's action on the n basis inputs: n simulator jobs against one reference run."""
    A = problem.A_padded
    n = A.shape[0]
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    inv, inv_sqrt = cached_pair(A, CircuitSettings(clock_qubits=c, evolution="exact"), bounds)
    basis = [with_preparation(inv, np.eye(n)[j]) for j in range(n)]

    def separate():
        cols = []
        for b in basis:
            sv = run_statevectors([b.circuit])[0]
            cols.append(statevector_array(sv, b)[0, 1, 0, :])
        return np.array(cols).T

    def one_job():
        svs = run_statevectors([b.circuit for b in basis])
        return np.array([statevector_array(sv, b)[0, 1, 0, :] for sv, b in zip(svs, basis)]).T

    def reference():
        return operators_from_reference_run(inv, inv_sqrt).B

    t_sep, t_job, r_sep, r_job = _alternate(separate, one_job, repeats)
    _, t_ref, _, r_ref = _alternate(one_job, reference, repeats)
    return [
        _row(
            "n basis-state simulations in one job",
            f"{n} simulator jobs, one circuit each",
            f"one job of {n} circuits",
            t_sep,
            t_job,
            _max_diff(r_sep, r_job),
            f"the block C·Ã⁻¹ of the 1/λ inversion, exact oracle, c = {c}",
        ),
        _row(
            "reference register instead of n circuits",
            f"one job of {n} circuits",
            "one circuit with a reference register (also yields the 1/√λ operator)",
            t_job,
            t_ref,
            _max_diff(r_job, r_ref),
            f"same block; exact oracle, c = {c}",
        ),
    ]


def shot_sampling(problem, shots: int = 10_000, repeats: int = 5, subset: int = 10) -> dict:
    rng_p = np.random.default_rng(1)
    m = problem.n_test
    p0 = rng_p.uniform(0.1, 0.4, m)
    p1 = rng_p.uniform(0.1, 0.4, m)
    probs = np.stack([p0, p1, 1 - p0 - p1], axis=1)

    def per_shot(rows):
        rng = np.random.default_rng(3)
        out = np.zeros((len(rows), 3), dtype=int)
        for j, p in enumerate(rows):
            for _ in range(shots):
                out[j, rng.choice(3, p=p)] += 1
        return out

    def vectorised():
        rng = np.random.default_rng(3)
        n0, n1 = sample_hadamard(p0, p1, shots, rng)
        return np.column_stack((n0, n1, shots - n0 - n1))

    # The per-shot loop on a few points, scaled: its cost is per shot.
    t0 = time.perf_counter()
    per_shot(probs[:subset])
    tp = (time.perf_counter() - t0) * m / subset
    _, tf, _, counts = _alternate(lambda: None, vectorised, repeats)
    # The two use different random streams, so compare the vectorised counts with N·p instead.
    return _row(
        "vectorised shot sampling",
        f"one draw per shot (Python loop; timed on {subset} points, scaled to {m})",
        "one multinomial draw per test point, all points at once",
        tp,
        tf,
        None,
        f"{shots} shots × {m} points; vectorised counts against N·p: largest |z| = "
        f"{float(np.max(np.abs(counts - shots * probs) / np.sqrt(shots * probs * (1 - probs)))):.2f} "
        f"over {counts.size} counts (binomial z-score)",
    )


def lcu_walk(problem, c: int = 2, repeats: int = 2) -> dict:
    settings = CircuitSettings(clock_qubits=c, evolution="walk", encoding="lcu")
    return fused_form(problem, settings, repeats)


def thread_pinning(c: int = 16) -> dict:
    """Two concurrent simulations (two sweep workers), each with Aer on 2 threads vs pinned to 1."""

    def pair(threads):
        t0 = time.perf_counter()
        procs = [
            subprocess.Popen([sys.executable, __file__, "--child", str(c), str(threads)], stdout=subprocess.PIPE, text=True)
            for _ in range(2)
        ]
        outs = [float(p.communicate()[0].strip().splitlines()[-1]) for p in procs]
        return time.perf_counter() - t0, outs

    tp, tf, rp, rf = _alternate(lambda: pair(2), lambda: pair(1), 2)
    return _row(
        "sweep workers pinned to cores",
        "2 processes, Aer on 2 threads each (4 threads on 2 cores)",
        "2 processes, 1 thread each",
        tp,
        tf,
        None,
        f"each process: one exact-oracle inversion on {c + 5} qubits (simulation only: "
        f"{statistics.mean(rp[1]):.2f} s vs {statistics.mean(rf[1]):.2f} s per process); wall time includes start-up",
    )


def _child(c: int, threads: int) -> None:
    from qgp.readout.simulate import set_threads

    set_threads(threads)
    problem = _bench_problem(2)
    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    inv = build_inversion(
        A, CircuitSettings(clock_qubits=c, evolution="exact"), "inverse", bounds, prepare=unit_inputs(problem)[0],
        form="simulation",
    )
    qc = prepare_for_simulator([inv.circuit])[0].copy()
    qc.save_statevector()
    sim = simulator()
    t0 = time.perf_counter()
    sim.run(qc).result()
    print(time.perf_counter() - t0)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--json", type=Path, help="also write the rows to this JSON file")
    parser.add_argument("--child", nargs=2, type=int, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        _child(*args.child)
        return 0
    t_start = time.perf_counter()
    load = os.getloadavg()
    problem = _bench_problem(200)
    say = lambda msg: print(f"bench_optimisations: {msg}", file=sys.stderr, flush=True)  # noqa: E731
    rows = []
    steps = [
        ("squaring", lambda: squaring(problem)),
        ("exact, fused", lambda: fused_form(problem, CircuitSettings(clock_qubits=8, evolution="exact"))),
        ("trotter, fused", lambda: fused_form(problem, CircuitSettings(clock_qubits=5, evolution="trotter", trotter_steps=4))),
        ("walk dilation, fused", lambda: fused_form(problem, CircuitSettings(clock_qubits=6, evolution="walk", encoding="dilation"))),
        ("LCU walk, native pieces", lambda: lcu_walk(problem)),
        ("cache", lambda: build_cache(problem)),
        ("shared prefix", lambda: shared_prefix(problem)),
        ("batching", lambda: batching(problem)),
        ("shots", lambda: shot_sampling(problem)),
        ("threads", lambda: thread_pinning()),
    ]
    for name, step in steps:
        say(name)
        r = step()
        rows.extend(r if isinstance(r, list) else [r])
    doc = {
        "rows": rows,
        "load_average_start": list(load),
        "load_average_end": list(os.getloadavg()),
        "elapsed_seconds": time.perf_counter() - t_start,
    }
    w = max(len(r["optimisation"]) for r in rows)
    print(f"{'optimisation':<{w}}  {'before s':>9}  {'after s':>9}  {'ratio':>7}  {'max |Δ|':>9}")
    for r in rows:
        d = "—" if r["max_abs_difference"] is None else f"{r['max_abs_difference']:.2g}"
        print(f"{r['optimisation']:<{w}}  {r['before_seconds']:>9.4g}  {r['after_seconds']:>9.4g}  {r['ratio']:>6.1f}×  {d:>9}")
    print(f"load {load[0]:.2f} → {os.getloadavg()[0]:.2f}; total {doc['elapsed_seconds']:.0f} s")
    if args.json:
        args.json.write_text(json.dumps(doc, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
