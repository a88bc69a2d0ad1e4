"""`qgp fit`: the log marginal likelihood from the circuits, and hyperparameters learned with it.

Outputs (contracts): ``fit.json`` — ``log_marginal_likelihood`` = {``exact``, ``quantum``,
``quantum_se``, ``data_fit`` and ``log_determinant`` each with ``exact``, ``quantum``,
``quantum_se``} at the config's hyperparameters, and ``optimum`` = {``exact``, ``quantum``} each
with ``lengthscale``, ``signal_variance``, ``noise_variance``, ``log_marginal_likelihood`` and the
test RMSE/NLPD of the exact GP at those hyperparameters (plus ``exact_within_limit``: the exact LML
searched by the circuits' optimiser inside the same κ limit, the control); ``sizes.csv`` (one row
per circuit size: each term's error at the config's hyperparameters and the circuit ML-II optimum);
``surface.csv`` (the LML along each hyperparameter, exact and from the circuits); ``figures/``
(``lml_error``, ``hyperparameters``, ``surface``; PDF and PNG). Every file is written atomically;
nothing is replaced without ``overwrite``.
"""

from __future__ import annotations

import json
import math
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

from qgp.classical.gp import condition, fit_ml2, nlpd, rmse
from qgp.classical.problem import problem_from_config
from qgp.errors import QgpError
from qgp.progress import reporter
from qgp.files import atomic_write_text, check_outputs, figure_files, write_csv_rows
from qgp.readout.likelihood import estimate_log_marginal_likelihood
from qgp.readout.training import circuit_problem, fit_ml2_circuit
from qgp.reports.inspection import SIMULATION_CAVEAT
from qgp.reports.run import config_inputs, to_json
from qgp.settings import CircuitSettings, Config

__all__ = [
    "FIT_SCHEMA",
    "FIT_FILE",
    "SIZES_FILE",
    "SURFACE_FILE",
    "SIZE_COLUMNS",
    "SURFACE_COLUMNS",
    "CAVEAT",
    "fit_outputs",
    "circuit_sizes",
    "run_fit",
    "draw_fit_figures",
]

FIT_SCHEMA = "qgp.fit/1"
FIT_FILE = "fit.json"
SIZES_FILE = "sizes.csv"
SURFACE_FILE = "surface.csv"
FIGURES_DIR = "figures"
FIGURE_STEMS = ("lml_error", "hyperparameters", "surface")
HYPERPARAMETERS = ("lengthscale", "signal_variance", "noise_variance")

SIZE_COLUMNS = (
    "size_name", "size", "label",
    "data_fit_exact", "data_fit_quantum", "data_fit_se", "data_fit_model",
    "log_determinant_exact", "log_determinant_quantum", "log_determinant_se", "log_determinant_model",
    "lml_exact", "lml_quantum", "lml_se",
    "optimum_lengthscale", "optimum_signal_variance", "optimum_noise_variance",
    "optimum_lml_quantum", "optimum_lml_exact", "optimum_test_rmse", "optimum_test_nlpd", "optimum_evaluations",
)
SURFACE_COLUMNS = ("parameter", "value", "lml_exact", "lml_quantum", "lml_se", "condition_number_bound", "within_limit")

#: The caveat every qgp report carries (`qgp.reports.inspection.SIMULATION_CAVEAT`).
CAVEAT = SIMULATION_CAVEAT


def fit_outputs(figures: bool = True) -> tuple[str, ...]:
    """The names `run_fit` writes into its folder."""
    names = [FIT_FILE, SIZES_FILE, SURFACE_FILE]
    if figures:
        names += figure_files(FIGURES_DIR, FIGURE_STEMS)
    return tuple(names)


def circuit_sizes(circuit: CircuitSettings, sizes: tuple[int, ...]) -> list[CircuitSettings]:
    """The circuits of the size study: ``[fit] sizes``, or the config's size and its neighbours
    (clock c − 2, c, c + 2; QSVT degree ≈ d/2, d, 2d, odd)."""
    qsvt = circuit.method == "qsvt"
    if not sizes:
        if qsvt:
            if circuit.degree is None:
                raise QgpError("[fit] sizes is empty and [circuit] gives target_error, not degree; list the degrees in [fit] sizes")
            d = circuit.degree
            sizes = tuple(sorted({max(1, (d // 2) | 1), d, 2 * d + 1}))
        else:
            c = circuit.clock_qubits
            sizes = tuple(x for x in (c - 2, c, c + 2) if x >= 2)
    if qsvt:
        return [replace(circuit, degree=s, target_error=None) for s in sizes]
    return [replace(circuit, clock_qubits=s) for s in sizes]


def _hyperparameters(kernel, noise_variance: float) -> dict:
    ell = kernel.lengthscale
    return {
        "lengthscale": list(ell) if isinstance(ell, tuple) else float(ell),
        "signal_variance": float(kernel.signal_variance),
        "noise_variance": float(noise_variance),
    }


def _test_scores(problem, kernel, noise_variance: float) -> dict:
    """Test RMSE and NLPD (predictive, y* = f* + noise) of the exact GP at these hyperparameters."""
    if problem.y_test is None:
        return {"test_rmse": None, "test_nlpd": None}
    gp = condition(problem.X, problem.y, kernel, noise_variance, center=problem.center)
    pred = gp.predict(problem.X_test)
    return {
        "test_rmse": rmse(problem.y_test, pred.mean),
        "test_nlpd": nlpd(problem.y_test, pred.mean, pred.variance_predictive),
    }


def _say(quiet: bool):
    if quiet:
        return None
    return reporter("fit: ")


def _check(cfg: Config) -> None:
    if cfg.kernel.fit:
        raise QgpError("qgp fit fits the hyperparameters itself; set [kernel] fit = false (the config's values are the start)")
    if cfg.gate_noise is not None:
        raise QgpError("qgp fit simulates noiseless circuits; remove the [gate_noise] section for this command")


def _surface(problem, centre_kernel, centre_noise, cfg: Config, max_condition: float, say) -> list[dict]:
    """The LML along each hyperparameter through (centre_kernel, centre_noise), ×/÷ 4 on a log grid."""
    rows = []
    factors = np.geomspace(0.25, 4.0, cfg.fit.surface_points)
    for name in HYPERPARAMETERS:
        say(f"LML surface along {name} ({len(factors)} points)")
        for f in factors:
            kernel, noise = centre_kernel, centre_noise
            if name == "lengthscale":
                kernel = kernel.with_theta(kernel.theta + np.r_[0.0, np.full(kernel.theta.size - 1, math.log(f))])
            elif name == "signal_variance":
                kernel = kernel.with_theta(kernel.theta + np.r_[math.log(f), np.zeros(kernel.theta.size - 1)])
            else:
                noise = noise * f
            value = _hyperparameters(kernel, noise)[name]
            row = {"parameter": name, "value": value[0] if isinstance(value, list) else value}
            try:
                p = circuit_problem(problem.X, problem.y, kernel, noise, problem.center)
                est = estimate_log_marginal_likelihood(p, cfg.circuit, cfg.readout, probes=cfg.fit.probes)
                kb = p.diagnostics.condition_number_bound
                row.update(lml_exact=est.exact, lml_quantum=est.quantum, lml_se=est.quantum_se,
                           condition_number_bound=kb, within_limit=bool(kb <= max_condition))
            except QgpError as exc:
                say(f"  {name} = {row['value']:.4g}: skipped ({exc})")
            rows.append(row)
    return rows


def run_fit(cfg: Config, out: Path, *, overwrite: bool = False, figures: bool = True, quiet: bool = False) -> dict:
    """Run `qgp fit` for ``cfg`` into the folder ``out``; refuses, before any work, to replace its
    files there unless ``overwrite``.

    Parameters
    ----------
    cfg : Config
        Data, kernel (the start), σ² (the config point), circuit, read-out and ``[fit]``.
    out : Path
    overwrite : bool
    figures : bool
    quiet : bool
        No progress messages (else the ``"qgp"`` logger at INFO, `qgp.progress`).

    Returns
    -------
    dict
        The fit.json document.
    """
    start = time.perf_counter()
    say = _say(quiet)
    note = say or (lambda msg: None)
    _check(cfg)
    out = check_outputs(out, fit_outputs(figures), force=overwrite, inputs=config_inputs(cfg))
    fs = cfg.fit
    sizes = circuit_sizes(cfg.circuit, fs.sizes)
    problem = problem_from_config(cfg)
    max_condition = float(fs.max_condition) if fs.max_condition is not None else float(problem.diagnostics.condition_number_bound)
    note(f"n = {problem.n_train}; the log marginal likelihood at the config's hyperparameters")
    at_config = estimate_log_marginal_likelihood(problem, cfg.circuit, cfg.readout, probes=fs.probes, progress=say)

    note("exact ML-II (L-BFGS-B, analytic gradients)")
    exact = fit_ml2(problem.X, problem.y, problem.kernel, None, np.random.default_rng(cfg.readout.seed), restarts=fs.restarts, center=problem.center)
    common = dict(restarts=fs.restarts, max_evaluations=fs.max_evaluations, probes=fs.probes, max_condition=max_condition,
                  center=problem.center, progress=say)
    note(f"exact LML with the circuits' optimiser inside κ_b ≤ {max_condition:.4g} (the control)")
    control = fit_ml2_circuit(problem.X, problem.y, problem.kernel, cfg.circuit, cfg.readout,
                              np.random.default_rng(cfg.readout.seed), objective="exact", **common)
    size_rows, fits = [], {}
    for circ in sizes:
        est = estimate_log_marginal_likelihood(problem, circ, cfg.readout, probes=fs.probes)
        note(f"circuit ML-II at {est.size_name} = {est.size}")
        q = fit_ml2_circuit(problem.X, problem.y, problem.kernel, circ, cfg.readout, np.random.default_rng(cfg.readout.seed), **common)
        fits[est.size] = q
        hp = _hyperparameters(q.kernel, q.noise_variance)
        scores = _test_scores(problem, q.kernel, q.noise_variance)
        size_rows.append({
            "size_name": est.size_name, "size": est.size, "label": est.label,
            "data_fit_exact": est.data_fit.exact, "data_fit_quantum": est.data_fit.quantum,
            "data_fit_se": est.data_fit.quantum_se, "data_fit_model": est.data_fit.model,
            "log_determinant_exact": est.log_determinant.exact, "log_determinant_quantum": est.log_determinant.quantum,
            "log_determinant_se": est.log_determinant.quantum_se, "log_determinant_model": est.log_determinant.model,
            "lml_exact": est.exact, "lml_quantum": est.quantum, "lml_se": est.quantum_se,
            "optimum_lengthscale": hp["lengthscale"] if not isinstance(hp["lengthscale"], list) else hp["lengthscale"][0],
            "optimum_signal_variance": hp["signal_variance"], "optimum_noise_variance": hp["noise_variance"],
            "optimum_lml_quantum": q.log_marginal_likelihood, "optimum_lml_exact": q.log_marginal_likelihood_exact,
            "optimum_test_rmse": scores["test_rmse"], "optimum_test_nlpd": scores["test_nlpd"],
            "optimum_evaluations": q.evaluations,
        })
    out.mkdir(parents=True, exist_ok=True)
    write_csv_rows(out / SIZES_FILE, SIZE_COLUMNS, size_rows)
    # The config's own circuit: its optimum from the size study when it is one of the sizes.
    own = fits.get(at_config.size)
    if own is None:
        note(f"circuit ML-II at the config's {at_config.size_name} = {at_config.size}")
        own = fit_ml2_circuit(problem.X, problem.y, problem.kernel, cfg.circuit, cfg.readout, np.random.default_rng(cfg.readout.seed), **common)
    surface = _surface(problem, control.kernel, control.noise_variance, cfg, max_condition, note)
    write_csv_rows(out / SURFACE_FILE, SURFACE_COLUMNS, surface)

    def optimum(kernel, noise, lml, **extra):
        return {**_hyperparameters(kernel, noise), "log_marginal_likelihood": lml, **_test_scores(problem, kernel, noise), **extra}

    doc = {
        "schema": FIT_SCHEMA,
        "config": None if cfg.source is None else str(cfg.source),
        "n_train": problem.n_train,
        "n_test": problem.n_test if problem.y_test is not None else 0,
        "kernel": problem.kernel.describe(),
        "noise_source": problem.noise_source,
        "log_marginal_likelihood": {**at_config.as_dict(), "hyperparameters": _hyperparameters(problem.kernel, problem.noise_variance)},
        "optimum": {
            "exact": optimum(exact.kernel, exact.noise_variance, exact.log_marginal_likelihood, optimiser="L-BFGS-B, analytic gradients, no κ limit",
                             condition_number_bound=float(circuit_problem(problem.X, problem.y, exact.kernel, exact.noise_variance, problem.center).diagnostics.condition_number_bound)),
            "quantum": optimum(own.kernel, own.noise_variance, own.log_marginal_likelihood,
                               log_marginal_likelihood_exact=own.log_marginal_likelihood_exact,
                               log_marginal_likelihood_se=None if own.estimate is None else own.estimate.quantum_se,
                               evaluations=own.evaluations, converged=own.converged,
                               condition_number_bound=own.condition_number_bound, optimiser="Nelder-Mead on the circuits' LML"),
            "exact_within_limit": optimum(control.kernel, control.noise_variance, control.log_marginal_likelihood,
                                          evaluations=control.evaluations, converged=control.converged,
                                          condition_number_bound=control.condition_number_bound,
                                          optimiser="Nelder-Mead on the exact LML (the control)"),
            "max_condition": max_condition,
            "restarts": fs.restarts,
            "max_evaluations": fs.max_evaluations,
            "seed": cfg.readout.seed,
        },
        "sizes": [r["size"] for r in size_rows],
        "size_name": at_config.size_name,
        "caveat": CAVEAT,
        "seconds": None,
    }
    doc["seconds"] = round(time.perf_counter() - start, 3)
    atomic_write_text(out / FIT_FILE, json.dumps(to_json(doc), indent=2, ensure_ascii=False) + "\n")
    if figures:
        draw_fit_figures(out)
    note(f"wrote {out} in {doc['seconds']:.1f} s")
    return doc


def draw_fit_figures(out: Path) -> list[Path]:
    """Draw the three figures from the files `run_fit` wrote in ``out`` (the stored numbers only)."""
    from qgp.reports.fit_figures import hyperparameter_figure, lml_error_figure, surface_figure
    from qgp.reports.scale import read_csv_rows

    out = Path(out)
    doc = json.loads((out / FIT_FILE).read_text(encoding="utf-8"))
    sizes = read_csv_rows(out / SIZES_FILE)
    surface = read_csv_rows(out / SURFACE_FILE)
    paths = lml_error_figure(sizes, doc, out / FIGURES_DIR / "lml_error")
    paths += hyperparameter_figure(sizes, doc, out / FIGURES_DIR / "hyperparameters")
    return paths + surface_figure(surface, doc, out / FIGURES_DIR / "surface")
