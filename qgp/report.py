"""Write a run's results: predictions.csv, summary.json and the column guide, never rounded.

Numbers are written with ``repr`` (the shortest string that round-trips to the same float).
"""

from __future__ import annotations

import csv
import json
import math
import platform
from dataclasses import asdict, is_dataclass
from pathlib import Path

import numpy as np

from .errors import QgpError
from .inference import InferenceResult
from .inspection import SIMULATION_CAVEAT
from .settings import Config

__all__ = ["PREDICTION_COLUMNS", "prediction_columns", "write_predictions", "summary_document", "write_summary", "versions", "config_document", "to_json", "run_config"]

#: The contract columns after the input columns (the SE pair only with shots).
PREDICTION_COLUMNS = ("mean_exact", "variance_exact", "mean_quantum", "variance_quantum")

_COLUMN_GUIDE = """\
predictions.csv — one row per test point, in the test file's order.

Columns: the input columns, then
  mean_exact, variance_exact        exact GP predictive mean and LATENT variance (of f, not of y)
  mean_quantum, variance_quantum    the circuits' estimates (latent variance from the 1/sqrt(lambda) circuit)
  mean_quantum_se, variance_quantum_se   standard errors from the shot counts (only when shots > 0)
  variance_quantum_hadamard         latent variance from a Hadamard test with k* on both sides
  variance_quantum_negative         1 where the quantum latent variance came out <= 0 (reported as computed, never clipped)
  success_probability               P(Hadamard-test run lands in flag=1, clock=0, block=0)
  success_probability_variance      P(flag=1) of the variance circuit
  target                            the test file's target value, when present

Add the noise variance (summary.json: noise_variance) to a latent variance for the predictive variance of y.
The prior mean (summary.json: prior_mean) was subtracted before inference and added back to every mean.

{caveat}
"""


def prediction_columns(result: InferenceResult) -> list[str]:
    cols = list(result.problem.inputs) + list(PREDICTION_COLUMNS)
    if result.readout.shots > 0:
        cols += ["mean_quantum_se", "variance_quantum_se"]
    cols += ["variance_quantum_hadamard", "variance_quantum_negative", "success_probability", "success_probability_variance"]
    if result.problem.y_test is not None:
        cols.append("target")
    return cols


def _num(x) -> str:
    return repr(float(x))


def write_predictions(result: InferenceResult, path: Path) -> None:
    p = result.problem
    columns = [p.X_test[:, i] for i in range(p.X_test.shape[1])]
    columns += [result.mean_exact, result.variance_exact, result.mean_quantum, result.variance_quantum]
    if result.readout.shots > 0:
        columns += [result.mean_quantum_se, result.variance_quantum_se]
    columns += [
        result.variance_quantum_hadamard,
        (result.variance_quantum <= 0).astype(int),
        result.p0 + result.p1,
        result.p_flag,
    ]
    if p.y_test is not None:
        columns.append(p.y_test)
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(prediction_columns(result))
        for row in zip(*columns):
            w.writerow([str(int(v)) if isinstance(v, (np.integer,)) else _num(v) for v in row])
    (path.parent / "COLUMNS.txt").write_text(_COLUMN_GUIDE.format(caveat=SIMULATION_CAVEAT))


def versions() -> dict[str, str]:
    from importlib.metadata import PackageNotFoundError, version

    out = {"python": platform.python_version()}
    for pkg in ("qgp", "qiskit", "qiskit-aer", "numpy", "scipy", "matplotlib"):
        try:
            out[pkg] = version(pkg)
        except PackageNotFoundError:
            out[pkg] = "not installed"
    return out


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


def summary_document(result: InferenceResult, cfg: Config | None = None, resources: dict | None = None) -> dict:
    doc = result.summary()
    doc["resources"] = resources if resources is not None else result_resources(result)
    doc["versions"] = versions()
    doc["config"] = config_document(cfg)
    doc["config_file"] = str(cfg.source) if cfg is not None and cfg.source else None
    doc["caveat"] = SIMULATION_CAVEAT
    return to_json(doc)


def result_resources(result: InferenceResult) -> dict:
    """Resource counts of the inversion circuits (qgp.resources), query-level and gate-level."""
    from .resources import inference_resources

    return inference_resources(result)


def write_summary(result: InferenceResult, path: Path, cfg: Config | None = None) -> dict:
    doc = summary_document(result, cfg)
    path.write_text(json.dumps(doc, indent=2) + "\n")
    return doc


def run_config(cfg: Config, out: Path, *, overwrite: bool = False, quiet: bool = False) -> tuple[dict, Path]:
    """`qgp run`: problem → inference → predictions.csv, summary.json, figures/ in ``out``.

    An earlier run in ``out`` is never overwritten unless ``overwrite``; the check runs first.
    """
    from .figures import run_figures
    from .inference import infer
    from .problem import problem_from_config

    out = Path(out)
    if (out / "summary.json").exists() and not overwrite:
        raise QgpError(f"{out} already holds a run (summary.json); choose another --out or pass --force to overwrite it")
    problem = problem_from_config(cfg)
    result = infer(problem, cfg.circuit, cfg.readout, progress=None if quiet else _progress)
    out.mkdir(parents=True, exist_ok=True)
    write_predictions(result, out / "predictions.csv")
    if not quiet:
        _progress("drawing figures")
    run_figures(result, out / "figures")
    doc = write_summary(result, out / "summary.json", cfg)
    return doc, out


def _progress(msg: str) -> None:
    import sys

    print(f"qgp: {msg}", file=sys.stderr, flush=True)
