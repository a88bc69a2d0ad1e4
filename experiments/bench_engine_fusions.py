"""Before/after ratios of the numpy engine's fusions, each timed both ways side by side in one run.

    python experiments/bench_engine_fusions.py [--json OUT.json] [--repeats 9]

The two cases of `qgp bench`'s floor figures: the amortised reference-register run of the demo
problem (n = 16, c = 8: 17 qubits; the state before the rotation saved on its flag = 0 half, the
final state read on its post-selected rows) and one 24-qubit inversion (c = 19) read on its
post-selected rows. For each fusion the "before" side switches that one fusion off in this
process (the engine's step as it was before it, applied to the whole state) while every other
stays on, the two sides alternate, and the table gives median seconds, their ratio and the largest
amplitude difference between the two sides. The whole runs with every fusion on and off are the
first row. Ratios are comparable between runs on a shared machine; absolute seconds are not.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from qgp.circuits.inversion import build_inversion, postselection  # noqa: E402
from qgp.classical.system import eigenvalue_bounds  # noqa: E402
from qgp.files import atomic_write_text  # noqa: E402
from qgp.readout import engine  # noqa: E402
from qgp.readout.builds import cached_pair  # noqa: E402
from qgp.readout.estimators import _reference_with_snapshot  # noqa: E402
from qgp.readout.inference import unit_inputs  # noqa: E402
from qgp.readout.simulate import engine_scope, run_saved_statevectors, run_statevectors  # noqa: E402
from qgp.tools.bench import _bench_problem, _exact_circuit  # noqa: E402

from bench_optimisations import _alternate  # noqa: E402  (this folder: the same alternating timer)

State = engine._State


def _unfused_pending(self, stack, targets, controls):
    """Before: the controls stored (written out in their one-qubit states), then the multiplexer."""
    self._touch(list(controls))
    self.multiplexer(stack, targets, controls)


def _unfused_projected(original):
    def projected(self, project, closing, muxes=()):
        for mux in muxes:  # before: the last multiplexers applied to the whole state
            self.multiplexer(*mux[1:5])
        return original(self, project, closing, ())

    return projected


def _unfused_rotation(original):
    def conditioned_expand(self, columns, target, controls, keep=None):
        original(self, columns, target, controls)  # before: both halves written, then cut
        if keep is not None:
            self.fix({target: keep})

    return conditioned_expand


@contextlib.contextmanager
def _patched(obj, name, value):
    saved = getattr(obj, name)
    setattr(obj, name, value)
    try:
        yield
    finally:
        setattr(obj, name, saved)


def _all_off():
    stack = contextlib.ExitStack()
    stack.enter_context(_patched(State, "_from_pending", _unfused_pending))
    stack.enter_context(_patched(State, "projected", _unfused_projected(State.projected)))
    stack.enter_context(_patched(State, "_conditioned_expand", _unfused_rotation(State._conditioned_expand)))
    stack.enter_context(_patched(engine, "_pocketfft", None))
    stack.enter_context(_patched(State, "fft_diagonal_fft", lambda self, *a: False))
    stack.enter_context(_patched(State, "_copied", lambda self, *a: False))
    stack.enter_context(_patched(engine, "_laid_out", _fresh_laid_out))
    return stack


def _fresh_laid_out(stack, axes, into=None):
    """Before: the stack copied into the product's axis order on every run (nothing kept)."""
    return np.ascontiguousarray(stack.transpose(axes))


FUSIONS = {
    "every fusion below": ("all fusions off", "all on", _all_off),
    "controlled powers from the clock's |+⟩^c": (
        "clock stored, then the multiplexer on the whole state",
        "c_k·U_k·ψ written from the small stored state (and, above a prepared system, the clock after it: contiguous FFTs, which the four-step transform needs)",
        lambda: _patched(State, "_from_pending", _unfused_pending),
    ),
    "controlled powers on a reference register's s·I as a copy": (
        "the product U_k·ψ",
        "s·U_k: the stack copied (ψ = s·I, the Choi state Σ_r |r⟩|r⟩)",
        lambda: _patched(State, "_copied", lambda self, *a: False),
    ),
    "inverse powers contracted with the read-out rows": (
        "multiplexer(s) applied to the whole state, then read",
        "one product with the rows",
        lambda: _patched(State, "projected", _unfused_projected(State.projected)),
    ),
    "flag rotation cut as it is written": (
        "both flag halves written, then cut",
        "the kept half, in place (inside the four-step transform when that runs: then no difference)",
        lambda: _patched(State, "_conditioned_expand", _unfused_rotation(State._conditioned_expand)),
    ),
    "iQFT · flag rotation · QFT as one four-step transform": (
        "two FFTs and the rotation's pass",
        "three passes, the middle one in cache (from 12 clock qubits, with no saved state between)",
        lambda: _patched(State, "fft_diagonal_fft", lambda self, *a: False),
    ),
    "stacks kept in the order a product reads them": (
        "a strided copy of the stack on every run",
        "the copy kept for the next run of the circuit (the last four, per thread)",
        lambda: _patched(engine, "_laid_out", _fresh_laid_out),
    ),
    "FFT in place": ("scipy.fft into a new array", "pocketfft over the state", lambda: _patched(engine, "_pocketfft", None)),
}


def _cases():
    problem = _bench_problem(2)
    A = problem.A_padded
    bounds = eigenvalue_bounds(A, problem.noise_variance)
    inv, _ = cached_pair(A, _exact_circuit(8), bounds)
    ref = _reference_with_snapshot(inv)
    post = postselection(inv)
    flag = {inv.n_system_qubits + inv.clock_qubits: 0}

    def reference():
        with engine_scope("numpy"):
            return run_saved_statevectors(ref, ["phase_estimated", "final"], project=post, saved_project=flag)

    big = build_inversion(A, _exact_circuit(19), "inverse", bounds, prepare=unit_inputs(problem)[0], form="simulation")
    big_post = postselection(big)

    def inversion():
        with engine_scope("numpy"):
            return [run_statevectors([big.circuit], reduce=lambda i, amps: amps, project=big_post)[0]]

    return {"reference run, 17 qubits": reference, "inversion, 24 qubits": inversion}


def _time(run, off, repeats: int):
    def unfused():
        with off():
            return run()

    with engine.buffer_pool():
        run()
        tb, ta, rb, ra = _alternate(unfused, run, repeats)
    diff = max(float(np.max(np.abs(np.asarray(a) - np.asarray(b)))) for a, b in zip(ra, rb))
    return tb, ta, diff


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", type=Path)
    ap.add_argument("--repeats", type=int, default=9)
    args = ap.parse_args(argv)
    rows = []
    for case, run in _cases().items():
        repeats = args.repeats if "17" in case else max(3, args.repeats // 3)
        for name, (before, after, off) in FUSIONS.items():
            tb, ta, diff = _time(run, off, repeats)
            rows.append({"case": case, "fusion": name, "before": before, "after": after, "before_seconds": tb,
                         "after_seconds": ta, "ratio": tb / ta, "max_abs_difference": diff})
            print(f"{case:26s} {name:50s} {tb * 1e3:9.2f} ms → {ta * 1e3:8.2f} ms  {tb / ta:5.2f}×  max |Δ| {diff:.1e}",
                  flush=True)
    if args.json:
        atomic_write_text(args.json, json.dumps({"rows": rows}, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
