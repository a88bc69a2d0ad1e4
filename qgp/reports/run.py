"""Write a run's results: predictions.csv, summary.json and the column guide, never rounded.

Numbers are written with ``repr`` (the shortest string that round-trips to the same float).
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import asdict, is_dataclass
from pathlib import Path

import numpy as np

from qgp.circuits.algorithms import algorithm_of
from qgp.environment import versions
from qgp.files import atomic_open, atomic_write_text, check_outputs
from qgp.readout.inference import InferenceResult
from qgp.progress import progress
from qgp.reports.inspection import SIMULATION_CAVEAT
from qgp.settings import Config

__all__ = ["PREDICTIONS_FILE", "SUMMARY_FILE", "COLUMN_GUIDE_FILE", "FIGURES_DIR", "run_outputs", "config_inputs", "provenance", "PREDICTION_COLUMNS", "prediction_columns", "write_predictions", "summary_document", "write_summary", "config_document", "to_json", "run_config", "run_result"]

PREDICTIONS_FILE = "predictions.csv"
SUMMARY_FILE = "summary.json"
COLUMN_GUIDE_FILE = "COLUMNS.txt"
FIGURES_DIR = "figures"

#: The contract columns after the input columns (the SE pair only with shots).
PREDICTION_COLUMNS = ("mean_exact", "variance_exact", "mean_quantum", "variance_quantum")

_COLUMN_GUIDE = """\
predictions.csv — one row per test point, in the test file's order.

Columns: the input columns, then
  mean_exact, variance_exact        exact GP predictive mean and LATENT variance (of f, not of y)
  mean_quantum, variance_quantum    the circuits' estimates (latent variance from the 1/sqrt(lambda) circuit);
                                    with [gate_noise], the noisy estimates
  mean_quantum_se, variance_quantum_se   standard errors (only with shots > 0 or [gate_noise]): from the shot
                                    counts, and with [gate_noise] the trajectory SE added in quadrature
  mean_noiseless, variance_noiseless     (only with [gate_noise]) the noiseless circuits' exact estimates
  mean_trajectory_se, variance_trajectory_se   (only with [gate_noise]) the noise-sampling SE alone
                                    (0 for the exact density matrix)
  success_probability_noisy, success_probability_variance_noisy   (only with [gate_noise]) the two
                                    success probabilities below, under the noise
  variance_quantum_hadamard         latent variance from a Hadamard test with k* on both sides (noiseless
                                    even with [gate_noise]: not simulated under noise)
  variance_quantum_negative         1 where the quantum latent variance came out <= 0 (reported as computed, never clipped)
  success_probability               P(Hadamard-test run lands in flag=1, clock=0, block=0), noiseless
  success_probability_variance      P(flag=1) of the variance circuit, noiseless
  target                            the test file's target value, when present

Add the noise variance (summary.json: noise_variance) to a latent variance for the predictive variance of y.
The prior mean (summary.json: prior_mean) was subtracted before inference and added back to every mean.

{caveat}
"""


def prediction_columns(result: InferenceResult) -> list[str]:
    """The column names of predictions.csv (`InferenceResult.table`'s)."""
    return list(result.table())


def _num(x) -> str:
    return repr(float(x))


def write_predictions(result: InferenceResult, path: Path) -> None:
    table = result.table()
    with atomic_open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(list(table))
        for row in zip(*table.values()):
            w.writerow([str(int(v)) if isinstance(v, (np.integer,)) else _num(v) for v in row])
    atomic_write_text(path.parent / COLUMN_GUIDE_FILE, _COLUMN_GUIDE.format(caveat=SIMULATION_CAVEAT))


def to_json(obj):
    """JSON-ready copy: numpy scalars/arrays to Python, non-finite floats to None, paths to str."""
    if is_dataclass(obj) and not isinstance(obj, type):
        return to_json(asdict(obj))
    if isinstance(obj, dict):
        return {str(k): to_json(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_json(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_json(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        x = float(obj)
        return x if math.isfinite(x) else None
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    if isinstance(obj, Path):
        return str(obj)
    return obj


def config_document(cfg: Config | None) -> dict | None:
    """The validated config as plain data (paths absolute)."""
    if cfg is None:
        return None
    doc = to_json(cfg)
    doc.pop("source", None)
    return doc


_FORM = (
    "the simulation form of the circuits (controlled oracle powers as multiplexers of fused matrices, the "
    "rotation as one multiplexed gate): the same operator as the gate form to 1e-10 (tests), which is what "
    "`resources` counts and `qgp export` writes"
)


def provenance(result: InferenceResult) -> dict[str, str]:
    """What produced each reported quantity: which circuit Aer simulated, what numpy computed.

    The `summary.json` key ``provenance``; docs/method.md ("What is simulated") explains it.
    """
    shots = result.readout.shots
    # Statevectors come from the numpy engine when it ran (shot counts are always Aer's).
    sv = "numpy-engine" if "numpy" in result.engine else "Aer"
    if result.strategy == "hybrid":
        out = {
            "mean_quantum": f"{sv} statevector run of the `inverse` circuit on ŷ (one run): its post-selected output "
            "v ≈ C·Ã⁻¹ŷ; each test point's Hadamard-test probabilities P₀, P₁ are then computed in numpy from v and k̂* "
            "(the Hadamard-test circuit itself is not simulated)",
            "variance_quantum": f"{sv} statevector run of one `inverse_sqrt` circuit per test point on k̂*; "
            "P(flag = 1) read from each final statevector",
            "variance_quantum_hadamard": f"{sv} statevector run of the `inverse` circuit on each k̂*; k̂*ᵀ·(its "
            "post-selected output)",
            "success_probability_inversion": "numpy, from the same run on ŷ: ‖v‖²",
        }
        sampled = "numpy (np.random.Generator seeded with [readout] seed) from the exact outcome probabilities"
    elif result.strategy == "amortised":
        out = {
            "mean_quantum": f"{sv} statevector run of the `inverse` circuit with a reference register entangled with "
            "`system` (one run, or one per block of reference columns when split for memory; see simulation_runs): "
            "it yields the post-selected operator B ≈ C·Ã⁻¹; each test point's Hadamard-test probabilities P₀, P₁ "
            "are then computed in numpy from B·ŷ and k̂* (the Hadamard-test circuit itself is not simulated)",
            "variance_quantum": f"the same {sv} run saves the state just before the flag rotation; the `inverse_sqrt` "
            "rotation is applied to that saved state exactly in numpy (amplitude sin(θ_k/2) on flag = 1), giving "
            "M = E†E and P(flag = 1) = k̂*ᵀMk̂* (the `inverse_sqrt` circuit is not simulated separately); when the "
            "reference register is split, M is read from each run's uncomputed circuit instead (docs/method.md)",
            "variance_quantum_hadamard": "numpy, from the same B: k̂*ᵀBk̂*",
            "success_probability_inversion": "numpy, from the same B: ‖B·ŷ‖²",
        }
        if not algorithm_of(result.circuit).uses_clock:
            out["variance_quantum"] = (
                f"{sv} statevector run of the `inverse_sqrt` (QSVT, even polynomial q) circuit with a reference register, "
                "in the same job: M = E†E from its flag = 1 amplitudes, P(flag = 1) = k̂*ᵀMk̂*"
            )
        sampled = "numpy (np.random.Generator seeded with [readout] seed) from the exact outcome probabilities"
    else:
        out = {
            "mean_quantum": f"{sv} statevector run of one Hadamard-test circuit per test point (probe qubit, "
            "ŷ and k̂* prepared, the `inverse` circuit); P₀, P₁ read from each final statevector",
            "variance_quantum": f"{sv} statevector run of one `inverse_sqrt` circuit per test point on k̂*; P(flag = 1) "
            "read from each final statevector",
            "variance_quantum_hadamard": f"{sv} statevector run of one Hadamard-test circuit per test point with k̂* "
            "on both sides",
            "success_probability_inversion": f"{sv} statevector run of the `inverse` circuit on ŷ",
        }
        sampled = "Aer (measured circuits, one job, seeded with [readout] seed)"
    out["shots"] = f"counts drawn by {sampled}" if shots > 0 else "none: exact outcome probabilities (shots = 0)"
    out["simulated_form"] = _FORM
    algorithm = algorithm_of(result.circuit)
    model = (
        "the closed-form filter model in numpy (no simulation)"
        if algorithm.uses_clock
        else "the QSVT polynomials p(λ/α), q(λ/α)² applied to A's eigenvalues in numpy (no simulation)"
    )
    out["error_budget"] = (
        f"stage {algorithm.budget_stage}: {model}; stage oracle: "
        "the simulated circuits' exact probabilities; stage shots: the sampled estimates"
    )
    if result.gate_noise is not None:
        g = result.gate_noise
        how = (
            "the per-block effective model (qgp.readout.noise_effective): each top-level piece of the gate form "
            "followed by a depolarising channel on its qubits with λ = 1 − Π(1 − p_g) over its gates, sampled by "
            "trajectories (error-free part weighted exactly)"
            if g.method == "effective"
            else f"Aer's {g.method.replace('_', ' ')} simulation of the gate-level circuits transpiled to "
            f"{list(g.basis)} with a NoiseModel (depolarising_error, ReadoutError)"
        )
        out["gate_noise"] = (
            f"one Hadamard-test and one variance circuit per test point in the gate form, under {how}; "
            "mean_quantum and variance_quantum are these noisy answers (variance_quantum_hadamard and the success "
            "probabilities outside the gate_noise record stay noiseless)"
        )
        out["error_budget"] += "; stage gate_noise: the noisy answers without shots"
    out["mean_exact"] = out["variance_exact"] = "the exact GP in numpy/scipy (Cholesky; Rasmussen & Williams Alg. 2.1)"
    return out


def summary_document(result: InferenceResult, cfg: Config | None = None, resources: dict | None = None) -> dict:
    doc = result.summary()
    doc["provenance"] = provenance(result)
    doc["resources"] = resources if resources is not None else result_resources(result)
    doc["versions"] = versions()
    doc["config"] = config_document(cfg)
    doc["config_file"] = str(cfg.source) if cfg is not None and cfg.source else None
    doc["caveat"] = SIMULATION_CAVEAT
    return to_json(doc)


def result_resources(result: InferenceResult) -> dict:
    """Resource counts of the inversion circuits (qgp.circuits.resources), query-level and gate-level."""
    from qgp.circuits.resources import inference_resources

    return inference_resources(result)


def write_summary(result: InferenceResult, path: Path, cfg: Config | None = None) -> dict:
    doc = summary_document(result, cfg)
    atomic_write_text(path, json.dumps(doc, indent=2) + "\n")
    return doc


def run_outputs() -> tuple[str, ...]:
    """Every file `run_config` writes, relative to its output folder."""
    figures = [f"{FIGURES_DIR}/{stem}{ext}" for stem in ("prediction", "filter") for ext in (".pdf", ".png")]
    return (PREDICTIONS_FILE, SUMMARY_FILE, COLUMN_GUIDE_FILE, *figures)


def config_inputs(cfg: Config) -> list[Path]:
    """The files a config reads (the config itself and its data), which no output may replace."""
    files = [cfg.source, cfg.data.train, cfg.data.test]
    return [Path(f) for f in files if f is not None]


def run_config(
    cfg: Config, out: Path, *, overwrite: bool = False, quiet: bool = False, figures: bool = True
) -> tuple[dict, Path]:
    """`run_result` without the result: (summary document, output folder)."""
    _, doc, out = run_result(cfg, out, overwrite=overwrite, quiet=quiet, figures=figures)
    return doc, out


def run_result(
    cfg: Config, out: Path, *, overwrite: bool = False, quiet: bool = False, figures: bool = True
) -> tuple[InferenceResult, dict, Path]:
    """`qgp run`: problem → inference → predictions.csv, summary.json, figures/ in ``out``; returns
    the `InferenceResult` (its ``problem`` included), the summary document and the folder.

    Before any work, refuses to replace any file a run writes (not only an earlier run's) unless
    ``overwrite``; every file is written atomically (temporary name, then rename), and summary.json
    last, so a folder with a summary.json holds a complete run. ``figures=False`` (``--no-figures``)
    skips the figures (and never touches figures/).
    """
    from qgp.readout.inference import infer
    from qgp.classical.problem import problem_from_config

    outputs = run_outputs() if figures else tuple(f for f in run_outputs() if not f.startswith(FIGURES_DIR + "/"))
    out = check_outputs(out, outputs, force=overwrite, inputs=config_inputs(cfg))
    problem = problem_from_config(cfg)
    result = infer(problem, cfg.circuit, cfg.readout, gate_noise=cfg.gate_noise, progress=None if quiet else _progress)
    out.mkdir(parents=True, exist_ok=True)
    write_predictions(result, out / PREDICTIONS_FILE)
    if figures:
        from qgp.reports.figures import run_figures  # matplotlib is imported only when figures are drawn

        if not quiet:
            _progress("drawing figures")
        run_figures(result, out / FIGURES_DIR)
    doc = write_summary(result, out / SUMMARY_FILE, cfg)
    return result, doc, out


def _progress(msg: str) -> None:
    progress(msg)
