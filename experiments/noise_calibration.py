"""Calibrate the effective gate-noise model against the exact gate-level density matrix.

The effective model (qgp.readout.noise_effective) replaces each gate's depolarising error by one
depolarising channel on the whole block after each top-level piece. Where both fit, this script
runs the same GP inference both ways — Aer's density matrix of the gate-level circuits (exact) and
the effective model (trajectories) — and reports how far apart the noise-induced shifts of the
predictive mean and variance are. That ratio is the effective model's error bar quoted beside the
fig. 9 sweeps.

Problems: the demo data (an invented scenario) and scikit-learn's diabetes data, the first n
training rows (n = 4, 8; see CASES) and 2 test points, κ(A) = 10 (or 1 + (κ(K) − 1)/2 where K's own is lower); phase estimation (walk + dilation, 3 and 4
clock qubits) and QSVT (dilation, target error 0.1); two-qubit depolarising rates 1e-4, 1e-3, 1e-2
(one-qubit gates and read-out error-free, as in the sweeps). Writes
experiments/results/noise_calibration.{json,txt} (atomically; refuses to overwrite without --force).

    python experiments/noise_calibration.py [--force]
    python experiments/noise_calibration.py --summarise-only     # the error bar again from the stored rows
"""

from __future__ import annotations

import argparse
import json
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

from qgp.classical.kernels import make_kernel
from qgp.classical.problem import problem_from_config
from qgp.config import load_config, load_dataset
from qgp.files import atomic_write_text, check_outputs
from qgp.readout.inference import infer
from qgp.settings import CircuitSettings, GateNoise

HERE = Path(__file__).parent
BASES = {"demo": HERE / "ice_noise.toml", "diabetes": HERE / "diabetes_noise.toml"}
TEST_POINTS = 2
CIRCUITS = {
    "walk, c = 3": CircuitSettings(clock_qubits=3),
    "walk, c = 4": CircuitSettings(clock_qubits=4),
    "QSVT, ε = 0.1": CircuitSettings(method="qsvt", clock_qubits=0, target_error=0.1),
}
#: (n_train, circuits): at n = 8 the walk at c = 4 is a 10-qubit density matrix of ~7000 cx that took
#: ~550 s per inference here, so it is left out.
CASES = ((4, tuple(CIRCUITS)), (8, ("walk, c = 3", "QSVT, ε = 0.1")))
RATES = (1e-4, 1e-3, 1e-2)
TRAJECTORIES = 400


def _problem(base: Path, n: int):
    """The first n training rows and 2 test points; κ(A) = 10, or 1 + (κ(K) − 1)/2 when K's own
    condition number is below 10 (the lever cannot raise κ)."""
    cfg = load_config(base)
    ds = load_dataset(cfg.data)
    ds = replace(ds, X_train=ds.X_train[:n], y_train=ds.y_train[:n], X_test=ds.X_test[:TEST_POINTS], y_test=ds.y_test[:TEST_POINTS])
    K = make_kernel(cfg.kernel, ds.X_train.shape[1])(ds.X_train)
    eig = np.linalg.eigvalsh(K)
    target = min(cfg.noise.target_condition, 1.0 + 0.5 * (eig[-1] / eig[0] - 1.0))
    cfg = replace(cfg, noise=replace(cfg.noise, target_condition=target))
    return problem_from_config(cfg, dataset=ds)


def _rel(shift_model: np.ndarray, shift_exact: np.ndarray) -> float:
    """‖Δ_effective − Δ_exact‖ / ‖Δ_exact‖ over test points (Δ: noisy − noiseless)."""
    scale = float(np.linalg.norm(shift_exact))
    return float(np.linalg.norm(shift_model - shift_exact)) / scale if scale > 0 else float("nan")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--force", action="store_true", help="overwrite the results files")
    parser.add_argument("--summarise-only", action="store_true", help="rewrite the files from the rows already in the JSON (no simulation)")
    args = parser.parse_args()
    names = ["noise_calibration.json", "noise_calibration.txt"]
    folder = check_outputs(HERE / "results", names, force=args.force or args.summarise_only, option="--force")
    out = [folder / name for name in names]
    if args.summarise_only:
        _write(out, json.loads(out[0].read_text())["rows"])
        return
    rows = []
    for data, base in BASES.items():
        for n, labels in CASES:
            problem = _problem(base, n)
            for label in labels:
                circuit = CIRCUITS[label]
                for p in RATES:
                    t0 = time.perf_counter()
                    exact = infer(problem, circuit, gate_noise=GateNoise(method="density_matrix", two_qubit=p), progress=None)
                    t1 = time.perf_counter()
                    eff = infer(
                        problem, circuit, gate_noise=GateNoise(two_qubit=p, trajectories=TRAJECTORIES, seed=1), progress=None
                    )
                    t2 = time.perf_counter()
                    g = exact.summary()["gate_noise"]
                    row = {
                        "data": data,
                        "n_train": n,
                        "circuit": label,
                        "two_qubit": p,
                        "condition_number": exact.summary()["condition_number"],
                        "qubits": g["qubits"],
                        "two_qubit_gates_mean_circuit": g["two_qubit_gates_mean_circuit"],
                        "mean_shift_disagreement": _rel(eff.mean_quantum - eff.mean_noiseless, exact.mean_quantum - exact.mean_noiseless),
                        "variance_shift_disagreement": _rel(
                            eff.variance_quantum - eff.variance_noiseless, exact.variance_quantum - exact.variance_noiseless
                        ),
                        "mean_max_abs_difference": float(np.max(np.abs(eff.mean_quantum - exact.mean_quantum))),
                        "mean_trajectory_se_max": float(np.max(eff.mean_trajectory_se)),
                        "mean_rel_rmse_exact": exact.summary()["mean_rel_rmse"],
                        "mean_rel_rmse_effective": eff.summary()["mean_rel_rmse"],
                        "seconds_density_matrix": t1 - t0,
                        "seconds_effective": t2 - t1,
                        "seconds_per_trajectory": eff.summary()["gate_noise"]["seconds_per_trajectory"],
                    }
                    rows.append(row)
                    print(
                        f"{data:8s} n={n} {label:14s} p={p:.0e}: {row['qubits']} qubits, {row['two_qubit_gates_mean_circuit']} cx; "
                        f"mean shift off by {row['mean_shift_disagreement']:.1%}, variance shift by "
                        f"{row['variance_shift_disagreement']:.1%}; rel RMSE exact {row['mean_rel_rmse_exact']:.3g} "
                        f"effective {row['mean_rel_rmse_effective']:.3g}; {row['seconds_density_matrix']:.1f} s / {row['seconds_effective']:.1f} s",
                        flush=True,
                    )
    _write(out, rows)


#: Rows that calibrate: rates below the point where every model's answer is noise alone (at 1e-2 both
#: methods give the maximally mixed answer and agree trivially).
INFORMATIVE_MAX_RATE = 1e-3


def _write(out: list[Path], rows: list[dict]) -> None:
    """Write the JSON (rows and the error bar) and the text table."""
    informative = [r for r in rows if r["two_qubit"] <= INFORMATIVE_MAX_RATE]
    summary = {
        "note": "effective per-block model against Aer's density matrix of the gate-level circuits; disagreement = "
        "‖Δ_eff − Δ_exact‖/‖Δ_exact‖ of the noise-induced shift (noisy − noiseless) over 2 test points; the error bar "
        f"is over rows with two-qubit rate ≤ {INFORMATIVE_MAX_RATE:g} (at higher rates both answers are noise alone); "
        f"measured, with trajectory noise ({TRAJECTORIES} trajectories)",
        "mean_shift_disagreement_median": float(np.median([r["mean_shift_disagreement"] for r in informative])),
        "mean_shift_disagreement_max": float(np.max([r["mean_shift_disagreement"] for r in informative])),
        "variance_shift_disagreement_median": float(np.median([r["variance_shift_disagreement"] for r in informative])),
        "variance_shift_disagreement_max": float(np.max([r["variance_shift_disagreement"] for r in informative])),
        "rows": rows,
    }
    atomic_write_text(out[0], json.dumps(summary, indent=2) + "\n")
    lines = [summary["note"], ""]
    lines += [
        f"{r['data']:8s} n={r['n_train']} {r['circuit']:14s} p={r['two_qubit']:.0e} qubits={r['qubits']:2d} cx={r['two_qubit_gates_mean_circuit']:6d} "
        f"mean-shift {r['mean_shift_disagreement']:7.1%} variance-shift {r['variance_shift_disagreement']:7.1%} "
        f"relRMSE exact {r['mean_rel_rmse_exact']:.3g} effective {r['mean_rel_rmse_effective']:.3g} "
        f"s(dm) {r['seconds_density_matrix']:.1f} s/traj {r['seconds_per_trajectory']:.2g}"
        for r in rows
    ]
    lines += [
        "",
        f"error bar (p ≤ {INFORMATIVE_MAX_RATE:g}): mean shift median {summary['mean_shift_disagreement_median']:.1%}, "
        f"max {summary['mean_shift_disagreement_max']:.1%}; variance shift median "
        f"{summary['variance_shift_disagreement_median']:.1%}, max {summary['variance_shift_disagreement_max']:.1%}",
    ]
    atomic_write_text(out[1], "\n".join(lines) + "\n")
    print(lines[-1])


if __name__ == "__main__":
    main()
