"""`qgp scale`: the conditioning audit and the fault-tolerant cost table, written to a folder.

Outputs (contracts): ``conditioning.csv`` (one row per n, `qgp.scale.conditioning.CONDITIONING_COLUMNS`),
``costs.csv`` (one row per n and method, `qgp.scale.costs.COST_COLUMNS`; classical columns have
``classical`` in their names), ``scale.json`` (fitted growth exponents with confidence intervals,
the crossover per method, every assumption) and ``figures/`` (``conditioning`` and ``costs``, PDF
and PNG). Every file is written atomically, scale.json last; nothing is replaced without
``overwrite``.
"""

from __future__ import annotations

import csv
import json
import time
from dataclasses import asdict, replace
from pathlib import Path

import numpy as np

from qgp.classical.kernels import make_kernel
from qgp.config import load_dataset
from qgp.errors import QgpError
from qgp.progress import reporter
from qgp.files import atomic_write_text, check_outputs, figure_files, write_csv_rows
from qgp.scale.classical_cost import measure_flop_rate
from qgp.scale.conditioning import CONDITIONING_COLUMNS, conditioning_audit, nested_sizes, subset_order
from qgp.scale.costs import COST_COLUMNS, LOOKUP_QUBIT_CAP, ScaleLaws, cost_sizes, cost_table, crossovers
from qgp.scale.fault_tolerant import SurfaceCodeAssumptions
from qgp.scale.growth import fit_growth
from qgp.settings import Config

__all__ = [
    "SCALE_SCHEMA",
    "CONDITIONING_FILE",
    "COSTS_FILE",
    "SCALE_FILE",
    "FITTED_QUANTITIES",
    "CAVEAT",
    "scale_outputs",
    "run_scale",
    "draw_scale_figures",
]

SCALE_SCHEMA = "qgp.scale/1"
CONDITIONING_FILE = "conditioning.csv"
COSTS_FILE = "costs.csv"
SCALE_FILE = "scale.json"
FIGURES_DIR = "figures"
FIGURE_STEMS = ("conditioning", "costs")

#: Columns of conditioning.csv whose growth in n is fitted (log-log least squares).
FITTED_QUANTITIES = (
    "condition_number",
    "eigenvalue_min",
    "eigenvalue_max",
    "sparsity",
    "norm_frobenius",
    "alpha_dilation",
    "alpha_sparse_access",
    "noise_variance_for_target",
)

#: The published lower bound the fitted κ exponent is compared with.
LOWER_BOUND = {
    "quantity": "condition_number",
    "exponent": 1.0,
    "source": "Lowe, Kim & Bondesan 2025, arXiv:2505.22502: κ, sparsity and ‖K‖_F of kernel matrices grow at least linearly in n",
}

CAVEAT = (
    "These are cost formulas evaluated on growth laws fitted to this data, not measurements of a device; "
    "simulated accuracy says nothing by itself about a speed-up on hardware, and κ and sparsity of kernel "
    "matrices grow with n."
)


def scale_outputs(figures: bool = True) -> tuple[str, ...]:
    """The names `run_scale` writes into its folder."""
    names = [CONDITIONING_FILE, COSTS_FILE, SCALE_FILE]
    if figures:
        names += figure_files(FIGURES_DIR, FIGURE_STEMS)
    return tuple(names)


def _say(quiet: bool):
    if quiet:
        return None
    return reporter("scale: ")


def _check(cfg: Config) -> float:
    if cfg.noise.variance is None:
        raise QgpError(
            "qgp scale holds σ² fixed as n grows and needs [noise] variance; set it (the target κ goes in "
            "[scale] target_condition)"
        )
    if cfg.kernel.fit:
        raise QgpError("qgp scale uses the kernel as given; set [kernel] fit = false and give its hyperparameters")
    return float(cfg.noise.variance)


def _fits(rows) -> dict:
    out = {}
    for quantity in FITTED_QUANTITIES:
        n = np.array([r.n for r in rows], dtype=float)
        v = np.array([np.nan if getattr(r, quantity) is None else getattr(r, quantity) for r in rows], dtype=float)
        try:
            out[quantity] = fit_growth(n, v, quantity=quantity)
        except QgpError as exc:
            out[quantity] = str(exc)
    return out


def _laws(fits: dict, kernel, noise_variance: float) -> ScaleLaws:
    for needed in ("condition_number", "eigenvalue_min"):
        if isinstance(fits[needed], str):
            raise QgpError(
                f"cannot fit the growth of {needed} ({fits[needed]}); lower [scale] n_min or give more data so that "
                "at least 3 sizes have an exact or Lanczos κ"
            )
    sparsity = fits["sparsity"] if kernel.support_radius is not None else None
    if isinstance(sparsity, str):
        raise QgpError(f"cannot fit the growth of the sparsity ({sparsity}); lower [scale] n_min or give more data")
    return ScaleLaws(
        condition_number=fits["condition_number"],
        eigenvalue_min=fits["eigenvalue_min"],
        sparsity=sparsity,
        norm_max=float(kernel.signal_variance) + noise_variance,
    )


def _crossover_text(cross: dict, n_max: int) -> dict:
    return {k: (f"n ≈ {v}" if v is not None else f"none below {n_max:.0e}".replace("e+0", "e")) for k, v in cross.items()}


def run_scale(
    cfg: Config,
    out: Path,
    *,
    overwrite: bool = False,
    figures: bool = True,
    quiet: bool = False,
    order: str | None = None,
) -> dict:
    """`qgp scale`: audit → fitted laws → cost table → files in ``out``; returns the scale.json document.

    Parameters
    ----------
    cfg : Config
        With ``[noise] variance`` (held fixed as n grows) and ``[scale]``.
    out : Path
        Output folder (created if missing).
    overwrite : bool
        Replace earlier outputs of the same names.
    figures : bool
        Draw ``figures/conditioning`` and ``figures/costs``.
    quiet : bool
        No progress messages on stderr.
    order : {"permutation", "file"}, optional
        Overrides ``[scale] order``.

    Returns
    -------
    dict
        The scale.json document.
    """
    from qgp.reports.run import config_inputs, to_json

    start = time.perf_counter()
    noise = _check(cfg)
    sc = cfg.scale if order is None else replace(cfg.scale, order=order)
    out = check_outputs(out, scale_outputs(figures), force=overwrite, inputs=config_inputs(cfg))
    say = _say(quiet)
    data = load_dataset(replace(cfg.data, n_train=None))
    n_data = data.X_train.shape[0]
    sizes = nested_sizes(n_data, sc.n_min, sc.n_max)
    kernel = make_kernel(cfg.kernel, data.X_train.shape[1])
    index = subset_order(n_data, order=sc.order, seed=cfg.data.subsample_seed)
    holdout = (data.X_test, data.y_test) if data.X_test is not None and data.y_test is not None else (None, None)
    if say:
        say(f"auditing {len(sizes)} sizes n = {sizes[0]} … {sizes[-1]} of {n_data} rows ({sc.order} order)")
    rows = conditioning_audit(
        data.X_train, data.y_train, kernel, noise,
        sizes=sizes, order_index=index, target_condition=sc.target_condition,
        X_holdout=holdout[0], y_holdout=holdout[1], center=cfg.data.center, say=say,
    )
    # Written at once: the audit is the long part, and a later failure must not lose it.
    out.mkdir(parents=True, exist_ok=True)
    write_csv_rows(out / CONDITIONING_FILE, CONDITIONING_COLUMNS, [r.as_dict() for r in rows])
    fits = _fits(rows)
    laws = _laws(fits, kernel, noise)
    if sc.classical_flop_rate is None:
        if say:
            say("measuring this machine's dense-Cholesky flop rate")
        flop_rate, flop_source = measure_flop_rate(), "measured here (dense Cholesky, n = 2048, best of 3)"
    else:
        flop_rate, flop_source = float(sc.classical_flop_rate), "[scale] classical_flop_rate"
    # The fast data block (one T per clock cycle, 11 factories): the quickest layout, as the
    # question is whether the quantum side could ever win.
    surface = SurfaceCodeAssumptions(
        physical_error=sc.physical_error, cycle_seconds=sc.cycle_seconds, failure_budget=sc.failure_budget, layout="fast"
    )
    sizes_cost = cost_sizes(sc.cost_n_min, sc.cost_n_max, sc.cost_points_per_decade)
    costs = cost_table(laws, sizes_cost, relative_error=sc.relative_error, test_points=sc.test_points, surface=surface, flop_rate=flop_rate)
    cross = crossovers(costs)
    write_csv_rows(out / COSTS_FILE, COST_COLUMNS, [r.as_dict() for r in costs])
    doc = {
        "schema": SCALE_SCHEMA,
        "config": None if cfg.source is None else str(cfg.source),
        "data": {"train": str(cfg.data.train), "rows": n_data, "order": sc.order, "subsample_seed": cfg.data.subsample_seed,
                 "holdout": None if holdout[0] is None else {"file": str(cfg.data.test), "rows": int(holdout[0].shape[0])}},
        "kernel": kernel.describe(),
        "noise_variance": noise,
        "target_condition": sc.target_condition,
        "sizes": [int(n) for n in sizes],
        "fits": {q: (f.as_dict() if not isinstance(f, str) else {"skipped": f}) for q, f in fits.items()},
        "lower_bound": LOWER_BOUND,
        "kappa_exponent_vs_lower_bound": _versus_bound(fits["condition_number"]),
        "assumptions": _assumptions(sc, surface, flop_rate, flop_source),
        "crossover": cross,
        "crossover_text": _crossover_text(cross, sc.cost_n_max),
        "methods_without_model": sorted({r.method: r.note for r in costs if not r.modelled}.items()),
        "caveat": CAVEAT,
        "seconds": None,
    }
    doc["seconds"] = round(time.perf_counter() - start, 3)
    atomic_write_text(out / SCALE_FILE, json.dumps(to_json(doc), indent=2, ensure_ascii=False) + "\n")
    if figures:
        draw_scale_figures(out)
    if say:
        say(f"wrote {out} in {doc['seconds']:.1f} s")
    return doc


def read_csv_rows(path: Path) -> list:
    """CSV rows back as objects: numbers as floats, empty cells as None, True/False as booleans."""
    from types import SimpleNamespace

    def value(text: str):
        if text == "":
            return None
        if text in ("True", "False"):
            return text == "True"
        try:
            return float(text)
        except ValueError:
            return text

    with open(path, newline="", encoding="utf-8") as fh:
        return [SimpleNamespace(**{k: value(v) for k, v in row.items()}) for row in csv.DictReader(fh)]


def draw_scale_figures(out: Path) -> list[Path]:
    """Draw ``figures/conditioning`` and ``figures/costs`` from the files `run_scale` wrote in ``out``
    (so a figure shows exactly the stored numbers, and can be redrawn without recomputing them)."""
    from qgp.reports.scale_figures import conditioning_figure, costs_figure
    from qgp.scale.growth import GrowthFit

    out = Path(out)
    doc = json.loads((out / SCALE_FILE).read_text(encoding="utf-8"))
    fits = {q: (GrowthFit(**f) if "exponent" in f else f.get("skipped", "")) for q, f in doc["fits"].items()}
    paths = conditioning_figure(read_csv_rows(out / CONDITIONING_FILE), fits, doc, out / FIGURES_DIR / "conditioning")
    return paths + costs_figure(read_csv_rows(out / COSTS_FILE), doc, out / FIGURES_DIR / "costs")


def _versus_bound(fit) -> str:
    if isinstance(fit, str):
        return "not fitted"
    lo, hi = fit.ci_low, fit.ci_high
    if lo > LOWER_BOUND["exponent"]:
        return "above the linear lower bound (whole confidence interval > 1)"
    if hi < LOWER_BOUND["exponent"]:
        return "below the linear lower bound over the sizes audited (the bound is asymptotic)"
    return "consistent with linear growth (the confidence interval contains 1)"


def _assumptions(sc, surface, flop_rate: float, flop_source: str) -> dict:
    return {
        "relative_error": sc.relative_error,
        "test_points": sc.test_points,
        "estimates_per_test_point": 2,
        "readout": "amplitude estimation, 2⌈2πκ/ε⌉ + 1 circuit applications per estimate (Brassard et al. 2002, Thm 12); "
        "shots (κ/ε)² in quantum_seconds_shots",
        "readout_amplitude": "a = 1/κ (worst case of the inversion's normalisation C ≈ λ_min; Harrow, Hassidim & Lloyd 2009)",
        "block_encoding": "sparse access with α = s·‖A‖_max (s padded to a power of two); oracles as select-swap table "
        f"lookups of the n·s stored entries, banks ≤ {LOOKUP_QUBIT_CAP} qubits (qgp.scale.fault_tolerant)",
        "state_preparation": "y and k* once per circuit application (qgp.scale.fault_tolerant.state_preparation_cost)",
        "surface_code": asdict(surface),
        "surface_code_layout": f"Litinski 2019 {surface.layout} data block, 15-to-1 factories; 0.1·(100p)^((d+1)/2) per patch and cycle",
        "classical_flop_rate": flop_rate,
        "classical_flop_rate_source": flop_source,
        "classical": "dense Cholesky n³/3 + per-point solves, or conjugate gradients with √κ-bounded iterations on nnz = n·s "
        "(qgp.scale.classical_cost); the best of the two",
        "omitted": "QFT and rotation arithmetic, Clifford gates, routing, amplitude estimation's repetitions for its 8/π² success "
        "probability (the quantum costs are lower bounds in these respects)",
    }

