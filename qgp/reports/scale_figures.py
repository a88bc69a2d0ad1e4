"""The two `qgp scale` figures: how A grows with n, and time-to-solution against the classical GP.

Publication style of qgp.reports.figures (PDF + 300-dpi PNG, Okabe–Ito palette). Every assumption
of the cost model is printed under the cost figure, so the figure can stand alone in a paper.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np

from qgp.reports.figures import PALETTE, figure_style, save_figure
from qgp.scale.growth import GrowthFit, growth_value

__all__ = ["conditioning_figure", "costs_figure"]

_GREY = "#555555"


def _column(rows, name) -> np.ndarray:
    return np.array([np.nan if getattr(r, name) is None else getattr(r, name) for r in rows], dtype=float)


def _fit_label(fit) -> str:
    if not isinstance(fit, GrowthFit):
        return ""
    return f" (n^{fit.exponent:.2f} [{fit.ci_low:.2f}, {fit.ci_high:.2f}])"


def _fit_line(ax, fit, n, colour) -> None:
    if isinstance(fit, GrowthFit):
        grid = np.geomspace(n.min(), n.max(), 50)
        ax.plot(grid, growth_value(fit, grid), color=colour, lw=0.8, ls="--")


def conditioning_figure(rows, fits: dict, doc: dict, stem: Path) -> list[Path]:
    """κ(n) against the linear lower bound; sparsity, ‖A‖_F and α; the price of the conditioning lever.

    Parameters
    ----------
    rows : sequence of ConditioningRow
    fits : dict of quantity → GrowthFit (or a reason string)
    doc : dict
        The scale.json document (target κ, σ², kernel).
    stem : Path
        Output path without suffix.
    """
    n = _column(rows, "n")
    methods = [r.condition_method for r in rows]
    with figure_style():
        fig, axes = plt.subplots(1, 3, figsize=(7.0, 2.6))
        ax = axes[0]
        kappa = _column(rows, "condition_number")
        for method, marker in (("dense", "o"), ("lanczos", "s")):
            sel = np.array([m == method for m in methods])
            if sel.any():
                ax.plot(n[sel], kappa[sel], marker, color=PALETTE[0], ms=3.5, mfc="white" if method == "lanczos" else PALETTE[0],
                        ls="none", label=f"κ ({'exact' if method == 'dense' else 'Lanczos'})")
        _fit_line(ax, fits.get("condition_number"), n[np.isfinite(kappa)], PALETTE[0])
        ok = np.isfinite(kappa)
        if ok.any():
            n0, k0 = n[ok][0], kappa[ok][0]
            grid = np.geomspace(n[ok].min(), n[ok].max(), 20)
            ax.plot(grid, k0 * grid / n0, color=_GREY, lw=0.8, ls=":", label="∝ n (lower bound, Lowe et al. 2025)")
        ax.axhline(doc["target_condition"], color=PALETTE[1], lw=0.8, ls="-.", label=f"target κ = {doc['target_condition']:g}")
        ax.set(xscale="log", yscale="log", xlabel="training points n", ylabel="condition number κ of K + σ²I",
               title="(a) κ" + _fit_label(fits.get("condition_number")))
        ax.legend(frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.3), fontsize=6)

        ax = axes[1]
        for i, (name, label) in enumerate(
            (("sparsity", "sparsity s"), ("norm_frobenius", "‖A‖_F"), ("alpha_sparse_access", "α = s‖A‖_max"), ("alpha_dilation", "α dilation"))
        ):
            v = _column(rows, name)
            if np.isfinite(v).any():
                colour = PALETTE[i + 2]
                ax.plot(n, v, "o", ms=3, color=colour, label=label + _fit_label(fits.get(name)))
                _fit_line(ax, fits.get(name), n[np.isfinite(v)], colour)
        ax.set(xscale="log", yscale="log", xlabel="training points n", ylabel="value", title="(b) sparsity, norm, α")
        ax.legend(frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.3), fontsize=6)

        ax = axes[2]
        rmse_fixed = _column(rows, "holdout_rmse")
        rmse_target = _column(rows, "holdout_rmse_at_target")
        if np.isfinite(rmse_fixed).any() or np.isfinite(rmse_target).any():
            ax.plot(n, rmse_fixed, "o-", ms=3, color=PALETTE[0], label=f"σ² = {doc['noise_variance']:g} (fixed)")
            ax.plot(n, rmse_target, "s--", ms=3, color=PALETTE[1], label=f"σ² for κ = {doc['target_condition']:g}")
            ax.set_ylabel("held-out RMSE (target's units)")
            ax.legend(frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.3), fontsize=6)
        else:
            ax.text(0.5, 0.5, "no held-out data with a target\n(add [data] test with the target column)",
                    ha="center", va="center", transform=ax.transAxes)
        ax.set(xscale="log", xlabel="training points n", title="(c) accuracy the κ lever costs")
        fig.tight_layout()
        return save_figure(fig, stem)


def _kernel_text(kernel: dict) -> str:
    text = f"{kernel.get('family', '')}, lengthscale {kernel.get('lengthscale')}"
    return text + (f", tapered at {kernel['support']:g}" if kernel.get("support") else "")


def costs_figure(costs, doc: dict, stem: Path) -> list[Path]:
    """Time-to-solution and physical qubits against n: quantum methods beside the classical GP.

    Parameters
    ----------
    costs : sequence of CostRow
    doc : dict
        The scale.json document (assumptions, crossover).
    stem : Path
        Output path without suffix.
    """
    by_method: dict[str, list] = {}
    for row in costs:
        by_method.setdefault(row.method, []).append(row)
    first = next(iter(by_method.values()))
    n = np.array([r.n for r in first], dtype=float)
    a = doc["assumptions"]
    sc = a["surface_code"]
    with figure_style():
        fig, axes = plt.subplots(1, 2, figsize=(7.0, 3.9), gridspec_kw={"width_ratios": [1.6, 1]})
        ax_t, ax_q = axes
        colour = 0
        for key, rows in by_method.items():
            if not rows[0].modelled:
                continue
            t = np.array([r.quantum_seconds for r in rows], dtype=float)
            ax_t.plot(n, t, "-", color=PALETTE[colour], label=f"{rows[0].label} (amplitude est.)")
            ax_q.plot(n, [r.physical_qubits for r in rows], "-", color=PALETTE[colour], label=rows[0].label)
            cross = doc["crossover"].get(key)
            if cross is not None:
                i = int(np.searchsorted(n, cross))
                ax_t.plot([n[i]], [t[i]], "*", color=PALETTE[colour], ms=8)
            colour += 1
        best = min((k for k in by_method if by_method[k][0].modelled), default=None,
                   key=lambda k: by_method[k][-1].quantum_seconds)
        if best is not None:
            ax_t.plot(n, [r.quantum_seconds_shots for r in by_method[best]], ":", color=_GREY,
                      label=f"{by_method[best][0].label} (shots)")
        ax_t.plot(n, [r.classical_cholesky_seconds for r in first], "-", color="black", lw=1.6, label="classical: Cholesky")
        ax_t.plot(n, [r.classical_cg_seconds for r in first], "--", color="black", lw=1.6, label="classical: conjugate gradients")
        ax_t.set(xscale="log", yscale="log", xlabel="training points n", ylabel="time to solution (s)",
                 title="(a) time to solution")
        handles, labels = ax_t.get_legend_handles_labels()
        ax_q.set(xscale="log", yscale="log", xlabel="training points n", ylabel="physical qubits", title="(b) surface-code footprint")
        kfit = doc["fits"]["condition_number"]
        cross_text = "; ".join(f"{k}: {v}" for k, v in doc["crossover_text"].items())
        caption = (
            f"Crossover (quantum faster than the best classical): {cross_text}. Growth laws fitted on n = "
            f"{kfit.get('n_min', '?')}…{kfit.get('n_max', '?')} of {doc['data']['rows']} rows "
            f"({_kernel_text(doc['kernel'])}, σ² = {doc['noise_variance']:g}): "
            f"κ ∝ n^{kfit.get('exponent', float('nan')):.2f}. "
            f"ε = {a['relative_error']:g} per estimate, {a['test_points']} test point(s), mean and variance. "
            f"Block encoding: {a['block_encoding']}. Read-out: {a['readout']}; a = 1/κ. "
            f"Surface code ({a['surface_code_layout']}): physical error {sc['physical_error']:g}, cycle "
            f"{sc['cycle_seconds']:g} s, failure budget {sc['failure_budget']:g}. Classical: {a['classical_flop_rate']:.3g} flop/s ({a['classical_flop_rate_source']}). "
            f"Omitted: {a['omitted']}. {doc['caveat']}"
        )
        fig.tight_layout(rect=(0, 0.36, 1, 1))
        fig.legend(handles, labels, loc="lower center", bbox_to_anchor=(0.5, 0.22), ncol=3, frameon=False, fontsize=6.5)
        fig.text(0.01, 0.01, textwrap.fill(caption, 150), fontsize=5.5, va="bottom", ha="left")
        return save_figure(fig, stem)
