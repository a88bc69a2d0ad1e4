"""The three `qgp fit` figures, drawn from the stored files: how far the circuits' log marginal
likelihood is from the exact one at each circuit size (term by term), which hyperparameters
circuit ML-II finds at each size, and the LML along each hyperparameter.

Publication style of qgp.reports.figures (PDF + 300-dpi PNG, Okabe–Ito palette).
"""

from __future__ import annotations

from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

from qgp.reports.figures import PALETTE, figure_style, save_figure

__all__ = ["lml_error_figure", "hyperparameter_figure", "surface_figure"]

_GREY = "#555555"
_SIZE_LABEL = {"clock_qubits": "clock qubits c", "degree": r"degree d of the log and $A^{-1/2}$ polynomials"}
_PARAM_LABEL = {
    "lengthscale": r"lengthscale $\ell$",
    "signal_variance": r"signal variance $s^2$",
    "noise_variance": r"noise variance $\sigma^2$",
}


def _column(rows, name) -> np.ndarray:
    return np.array([np.nan if getattr(r, name, None) is None else getattr(r, name) for r in rows], dtype=float)


def _errorbar(ax, x, y, se, **kw):
    if np.isfinite(se).any():
        ax.errorbar(x, y, yerr=np.where(np.isfinite(se), se, 0.0), capsize=2, **kw)
    else:
        ax.plot(x, y, **kw)


def lml_error_figure(rows, doc: dict, stem: Path) -> list[Path]:
    """|error| of ½·yᵀA⁻¹y, ½·log det A and the LML against circuit size (config hyperparameters)."""
    size = _column(rows, "size")
    with figure_style():
        fig, ax = plt.subplots(figsize=(3.4, 2.6))
        series = (
            (r"data fit $\frac{1}{2}y^\top A^{-1}y$", "data_fit", PALETTE[0], "o"),
            (r"$\frac{1}{2}\log\det A$", "log_determinant", PALETTE[1], "s"),
        )
        shown_model = False
        for label, key, colour, marker in series:
            err = 0.5 * np.abs(_column(rows, f"{key}_quantum") - _column(rows, f"{key}_exact"))
            _errorbar(ax, size, err, 0.5 * _column(rows, f"{key}_se"), color=colour, marker=marker, ms=3.5, lw=1, label=label)
            model = 0.5 * np.abs(_column(rows, f"{key}_model") - _column(rows, f"{key}_exact"))
            if np.isfinite(model).any():
                ax.plot(size, model, ls="none", marker="+", ms=8, mew=0.8, color=_GREY,
                        label=None if shown_model else "closed-form model (+)")
                shown_model = True
        total = np.abs(_column(rows, "lml_quantum") - _column(rows, "lml_exact"))
        _errorbar(ax, size, total, _column(rows, "lml_se"), color=PALETTE[7], marker="D", ms=3, lw=1.2, ls="--", label="log marginal likelihood")
        label = rows[0].label if rows else ""
        ax.set(yscale="log", xlabel=_SIZE_LABEL.get(doc.get("size_name"), "circuit size"),
               ylabel="|circuit − exact| (nats)", title=f"LML error by term, {label}, n = {doc['n_train']}")
        ax.set_xticks(size)
        ax.legend(frameon=False, fontsize=6)
        fig.tight_layout()
        return save_figure(fig, stem)


def _readable_log(ax, which: str = "y", linear_below: float | None = 10.0) -> None:
    """At least two labelled ticks on a log axis: one spanning less than ``linear_below`` becomes linear,
    one spanning under three decades is labelled at 1, 2, 5 × 10^k."""
    axis = ax.yaxis if which == "y" else ax.xaxis
    lo, hi = ax.get_ylim() if which == "y" else ax.get_xlim()
    if linear_below is not None and hi / lo < linear_below:
        (ax.set_yscale if which == "y" else ax.set_xscale)("linear")
        return
    if hi / lo < 1000.0:
        axis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
        axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    axis.set_minor_formatter(NullFormatter())


def hyperparameter_figure(rows, doc: dict, stem: Path) -> list[Path]:
    """The circuit ML-II optimum at each size against the exact optima (with and without the κ limit)."""
    size = _column(rows, "size")
    exact, control = doc["optimum"]["exact"], doc["optimum"]["exact_within_limit"]
    with figure_style():
        fig, axes = plt.subplots(1, 4, figsize=(7.0, 2.5))
        for ax, name in zip(axes, ("lengthscale", "signal_variance", "noise_variance")):
            ax.plot(size, _column(rows, f"optimum_{name}"), "o-", ms=3.5, color=PALETTE[0], label="circuit ML-II")
            for ref, style, text in ((control, "--", rf"exact, $\kappa_b \leq$ {doc['optimum']['max_condition']:.3g}"), (exact, ":", "exact, no limit")):
                v = ref[name][0] if isinstance(ref[name], list) else ref[name]
                ax.axhline(v, color=_GREY, ls=style, lw=0.9, label=text)
            ax.set(yscale="log", title=_PARAM_LABEL[name])
            _readable_log(ax, "y")
            ax.set_xticks(size)
        ax = axes[3]
        ax.plot(size, _column(rows, "optimum_test_nlpd"), "o-", ms=3.5, color=PALETTE[0], label="circuit ML-II")
        for ref, style, text in ((control, "--", "exact, κ limit"), (exact, ":", "exact, no limit")):
            if ref.get("test_nlpd") is not None:
                ax.axhline(ref["test_nlpd"], color=_GREY, ls=style, lw=0.9, label=text)
        ax.set(title="test NLPD (exact GP at the optimum)")
        ax.set_xticks(size)
        handles, labels = axes[0].get_legend_handles_labels()
        fig.supxlabel(_SIZE_LABEL.get(doc.get("size_name"), "circuit size"), fontsize=8, y=0.1)
        fig.legend(handles, labels, loc="lower center", ncol=3, frameon=False, fontsize=7)
        fig.tight_layout(rect=(0, 0.12, 1, 1))
        return save_figure(fig, stem)


def surface_figure(rows, doc: dict, stem: Path) -> list[Path]:
    """The LML along each hyperparameter through the exact optimum within the κ limit: exact curve,
    circuit estimates (± SE), and the values outside the limit shaded."""
    control = doc["optimum"]["exact_within_limit"]
    with figure_style():
        fig, axes = plt.subplots(1, 3, figsize=(7.0, 2.4))
        for ax, name in zip(axes, ("lengthscale", "signal_variance", "noise_variance")):
            sel = [r for r in rows if r.parameter == name]
            x = _column(sel, "value")
            ax.plot(x, _column(sel, "lml_exact"), "-", color=_GREY, lw=1.2, label="exact")
            _errorbar(ax, x, _column(sel, "lml_quantum"), _column(sel, "lml_se"), color=PALETTE[1], marker="o", ms=3, ls="none", label="circuits")
            outside = np.array([r.within_limit is False for r in sel])
            if outside.any() and x.size > 1:
                # Each point's cell of the log grid: geometric midpoints to its neighbours.
                edges = np.sqrt(x[1:] * x[:-1])
                lo = np.r_[x[0] ** 2 / edges[0], edges]
                hi = np.r_[edges, x[-1] ** 2 / edges[-1]]
                for a, b in zip(lo[outside], hi[outside]):
                    ax.axvspan(a, b, color=PALETTE[5], alpha=0.2, lw=0)
            v = control[name][0] if isinstance(control[name], list) else control[name]
            ax.axvline(v, color=PALETTE[0], ls="--", lw=0.8)
            ax.set(xscale="log", xlabel=_PARAM_LABEL[name], ylabel="log marginal likelihood" if name == "lengthscale" else None)
            _readable_log(ax, "x", linear_below=None)  # the slices are log grids: keep the axis log
        axes[0].legend(frameon=False, fontsize=6, title=r"shaded: $\kappa_b$ above the limit", title_fontsize=6)
        circ = doc["log_marginal_likelihood"]["circuit"]
        size = ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in circ.items() if k in ("clock_qubits", "degree"))
        fig.suptitle(f"LML slices through the exact optimum within the κ limit (dashed); circuits: {circ['label']}, {size}; "
                     f"n = {doc['n_train']}", fontsize=8)
        fig.tight_layout()
        return save_figure(fig, stem)
