"""`qgp bench`, part 3: seconds per inversion against qubits, each case in a child process.

Each case builds and simulates one inversion (the demo's n = 16 problem, the exact oracle, the clock
register grown) in its own process, which reports its peak resident memory; the machine's memory-copy
bandwidth is measured in the same run. A tool (qgp.tools): nothing in the library imports it.

    python -m qgp.tools.bench_scaling --case JSON      (one case; what `qgp bench` runs per case)
"""

from __future__ import annotations

import json
import math
import os
import resource
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING


if TYPE_CHECKING:
    from qgp.tools.bench import BenchSettings

__all__ = ["child_env", "run_scaling"]

Progress = Callable[[str], None]

# -- 3. simulation scaling (child processes) -------------------------------------------------------


def _run_case(case: dict) -> dict:
    """One scaling case, in this (child) process: build and simulate one inversion."""
    from qgp.tools.bench import _bench_problem, _exact_circuit  # the same problem as the rest of the bench

    from qgp.readout.inference import unit_inputs
    from qgp.circuits.inversion import build_inversion
    from qgp.readout.simulate import simulator
    from qgp.classical.system import eigenvalue_bounds

    problem = _bench_problem(2)
    circuit = _exact_circuit(int(case["clock_qubits"]))
    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    yhat = unit_inputs(problem)[0]
    from qiskit import QuantumCircuit
    from qiskit_aer.library import SaveStatevector

    warm = QuantumCircuit(1)  # the simulator's one-off start-up is not the case's cost
    warm.append(SaveStatevector(1), [0])
    simulator().run(warm).result()
    t0 = time.perf_counter()
    inv = build_inversion(A, circuit, "inverse", bounds, prepare=yhat, form="simulation")
    t1 = time.perf_counter()
    qc = inv.circuit.copy_empty_like()
    qc.global_phase = 0.0  # compose adds the circuit's phase again
    qc.compose(inv.circuit, inplace=True, copy=False)
    qc.append(SaveStatevector(qc.num_qubits), qc.qubits)
    from qgp.circuits.inversion import postselection
    from qgp.readout.simulate import engine_scope, run_statevectors

    aer_seconds = simulate_seconds = None
    if case.get("aer", True):
        result = simulator().run(qc).result()
        sv = result.get_statevector(0)
        simulate_seconds = time.perf_counter() - t1
        aer_seconds = float(result.results[0].time_taken)
        del sv, result
    # qgp's default engine on the same circuit, reading what qgp reads (the post-selected amplitudes).
    t2 = time.perf_counter()
    with engine_scope("numpy"):
        run_statevectors([inv.circuit], reduce=lambda i, amps: amps, project=postselection(inv))
    numpy_seconds = time.perf_counter() - t2
    return {
        "qubits": inv.circuit.num_qubits,
        "clock_qubits": circuit.clock_qubits,
        "instructions": len(inv.circuit.data),
        "build_seconds": t1 - t0,
        "simulate_seconds": simulate_seconds,
        "aer_seconds": aer_seconds,
        "numpy_seconds": numpy_seconds,
        "peak_memory_mb": _peak_rss_mb(),
        "statevector_mb": 16 * 2 ** inv.circuit.num_qubits / 2**20,
    }


def _peak_rss_mb() -> float:
    """This process's peak resident memory: VmHWM from /proc (reset at exec, unlike ru_maxrss,
    which a child started by fork + exec inherits from its parent), else ru_maxrss."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # Linux: kilobytes


def child_env() -> dict:
    """This environment with the folder holding this qgp first on PYTHONPATH (so a child process
    imports the same qgp, installed or not)."""
    env = dict(os.environ)
    root = str(Path(__file__).resolve().parents[1])
    env["PYTHONPATH"] = root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    return env


def _case_in_child(case: dict, timeout: float) -> dict:
    cmd = [sys.executable, "-m", "qgp.tools.bench_scaling", "--case", json.dumps(case)]
    try:
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, env=child_env())
    except subprocess.TimeoutExpired:
        return {"clock_qubits": case["clock_qubits"], "timed_out": True, "timeout_seconds": timeout}
    if done.returncode != 0:
        tail = (done.stderr or "").strip().splitlines()[-1:] or ["no output"]
        return {"clock_qubits": case["clock_qubits"], "failed": tail[0]}
    return json.loads(done.stdout.strip().splitlines()[-1])


#: Aer runs the scaling cases up to this size only (it took 114 s at 26 qubits here).
_AER_MAX_QUBITS = 24


def run_scaling(s: "BenchSettings", say: Progress) -> dict:
    from qgp.readout.simulate import default_memory_cap, statevector_bytes
    from qgp.tools.bench_floor import _floor, _stages, machine_rates


    cap = default_memory_cap()
    guard_qubits = int(math.floor(math.log2(cap / 16)))
    say("measuring the memory-copy bandwidth")
    rates = machine_rates(min(1 << 29, cap // 4))
    bandwidth = rates["copy_bandwidth_bytes_per_s"]
    system_qubits, flag = 4, 1
    sizes = []
    q = s.scaling_start
    top = guard_qubits if s.scaling_cap is None else min(guard_qubits, s.scaling_cap)
    while q <= top:
        sizes.append(q)
        q += 2 if q < 20 else 1
    cases, stop = [], None
    for q in sizes:
        if statevector_bytes(q) > cap:
            stop = f"the memory guard refuses {q} qubits"
            break
        c = q - system_qubits - flag
        say(f"scaling: one inversion on {q} qubits ({c} clock qubits) in a child process")
        r = _case_in_child({"clock_qubits": c, "aer": q <= _AER_MAX_QUBITS}, s.case_timeout_seconds)
        if "qubits" in r:
            layer_bytes = 2 * 16 * 2 ** r["qubits"]  # one pass over the statevector: read + write
            per_instruction = r["instructions"] * layer_bytes / bandwidth
            r["bytes_per_layer"] = layer_bytes
            r["bandwidth_floor_seconds"] = per_instruction
            r["fraction_of_bandwidth_limit"] = per_instruction / r["aer_seconds"] if r["aer_seconds"] else None
            floor = _floor(_stages(r["qubits"], system_qubits, c, 0), {**rates, "copy_bandwidth_bytes_per_s": bandwidth})
            r["floor_seconds"] = floor
            r["numpy_floor_ratio"] = r["numpy_seconds"] / floor
            r["aer_floor_ratio"] = r["aer_seconds"] / floor if r["aer_seconds"] else None
        cases.append(r)
        if r.get("timed_out") or r.get("failed"):
            stop = f"the case on {q} qubits " + ("timed out" if r.get("timed_out") else f"failed: {r['failed']}")
            break
        if r["numpy_seconds"] >= s.scaling_limit_seconds:
            stop = f"{q} qubits took {r['numpy_seconds']:.1f} s ≥ {s.scaling_limit_seconds:g} s (numpy engine)"
            break
    else:
        if s.scaling_cap is not None and s.scaling_cap < guard_qubits:
            stop = f"{s.name} mode caps the scaling at {s.scaling_cap} qubits (the memory guard allows {guard_qubits})"
        else:
            stop = f"the memory guard allows at most {guard_qubits} qubits"
    ok = [r for r in cases if "qubits" in r and r["numpy_seconds"] < 60.0]
    largest = max(ok, key=lambda r: r["qubits"]) if ok else None
    return {
        "copy_bandwidth_gb_per_s": bandwidth / 1e9,
        "memory_cap_gib": cap / 2**30,
        "memory_guard_qubits": guard_qubits,
        "cases": cases,
        "stopped_because": stop,
        "largest": largest,
        "definition": "each case: the n = 16 inversion (state preparation of ŷ, exact-oracle phase estimation, "
        "rotation, uncompute) in the simulation form, grown by clock qubits; numpy_seconds is qgp's numpy engine "
        "reading the post-selected amplitudes (what qgp uses; largest_qubits_60s is by it); simulate_seconds is the "
        f"Aer job (submit to statevector in hand, run up to {_AER_MAX_QUBITS} qubits), aer_seconds Aer's own time. "
        "floor_seconds: the whole-state stages a fused form cannot avoid (qgp.tools.bench_floor), with the ratios "
        "of each engine to it. The older per-instruction figure follows, kept for comparison only: it counts "
        "every instruction as a pass and so makes Aer look closer to its limit than it is. A gate layer is one instruction of the "
        "circuit, which reads and writes the whole statevector once: bytes_per_layer = 2·16·2^q. "
        "bandwidth_floor_seconds = instructions × bytes_per_layer / copy bandwidth (numpy copying a large array, "
        "read + write counted, same run), the time if every instruction ran at memory-copy speed; "
        "fraction_of_bandwidth_limit = bandwidth_floor_seconds / aer_seconds (1 = at the limit; Aer's gate fusion "
        "can merge instructions into one pass, which could push it above 1)",
    }



def _case_main(argv: list[str]) -> int:
    """``python -m qgp.tools.bench_scaling --case JSON``: one scaling case, its result as one JSON line."""
    if len(argv) != 2 or argv[0] != "--case":
        print("usage: python -m qgp.tools.bench_scaling --case JSON (used by qgp bench)", file=sys.stderr)
        return 2
    print(json.dumps(_run_case(json.loads(argv[1]))))
    return 0


if __name__ == "__main__":
    sys.exit(_case_main(sys.argv[1:]))
