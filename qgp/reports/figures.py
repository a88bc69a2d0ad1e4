"""Figures for a run, in one publication style: vector PDF and 300-dpi PNG, single-column width,
a colour-blind-safe palette (Okabe & Ito 2008), labelled axes.
"""

from __future__ import annotations

from contextlib import contextmanager
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from qgp.circuits.algorithms import algorithm_of
from qgp.files import atomic_open  # noqa: E402
from qgp.readout.filter_model import filter_response  # noqa: E402
from qgp.readout.inference import InferenceResult  # noqa: E402

__all__ = ["PALETTE", "figure_style", "save_figure", "prediction_figure", "filter_figure", "run_figures"]

#: Okabe–Ito colour-blind-safe palette.
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000")
SINGLE_COLUMN = (3.4, 2.5)

_STYLE = {
    "font.size": 8,
    "axes.labelsize": 8,
    "axes.titlesize": 8,
    "legend.fontsize": 7,
    "xtick.labelsize": 7,
    "ytick.labelsize": 7,
    "lines.linewidth": 1.2,
    "axes.prop_cycle": matplotlib.cycler(color=PALETTE),
    "savefig.bbox": "tight",
    "pdf.fonttype": 42,
}


@contextmanager
def figure_style():
    with plt.rc_context(_STYLE):
        yield


def save_figure(fig, stem: Path) -> list[Path]:
    """Write ``stem``.pdf (vector) and ``stem``.png (300 dpi), each atomically; close the figure."""
    stem.parent.mkdir(parents=True, exist_ok=True)
    paths = [stem.with_suffix(".pdf"), stem.with_suffix(".png")]
    try:
        for path, dpi in zip(paths, ("figure", 300)):
            with atomic_open(path, "wb") as fh:
                fig.savefig(fh, format=path.suffix[1:], dpi=dpi)
    finally:
        plt.close(fig)
    return paths


def prediction_figure(result: InferenceResult, stem: Path) -> list[Path]:
    """Training data, exact mean ± 2σ, quantum mean ± 2σ (σ from the latent variances)."""
    p = result.problem
    one_d = p.X.shape[1] == 1
    x_test = p.X_test[:, 0] if one_d else np.arange(p.n_test)
    order = np.argsort(x_test)
    xs = x_test[order]
    with figure_style():
        fig, ax = plt.subplots(figsize=SINGLE_COLUMN)
        sd_e = np.sqrt(np.clip(result.variance_exact, 0, None))[order]
        me = result.mean_exact[order]
        ax.fill_between(xs, me - 2 * sd_e, me + 2 * sd_e, color=PALETTE[0], alpha=0.2, lw=0, label="exact ±2σ")
        ax.plot(xs, me, color=PALETTE[0], label="exact mean")
        mq = result.mean_quantum[order]
        vq = result.variance_quantum[order]
        sd_q = np.sqrt(np.clip(vq, 0, None))
        ax.plot(xs, mq - 2 * sd_q, color=PALETTE[1], lw=0.7, ls="--", label="quantum ±2σ")
        ax.plot(xs, mq + 2 * sd_q, color=PALETTE[1], lw=0.7, ls="--")
        if result.mean_quantum_se is not None:
            ax.errorbar(xs, mq, yerr=2 * result.mean_quantum_se[order], fmt="o", ms=2, color=PALETTE[1],
                        elinewidth=0.6, label="quantum mean ±2 SE (shots)")
        else:
            ax.plot(xs, mq, "o", ms=2, color=PALETTE[1], label="quantum mean")
        neg = vq <= 0
        if np.any(neg):
            ax.plot(xs[neg], mq[neg], "x", color=PALETTE[7], ms=4, label="quantum variance ≤ 0")
        if one_d:
            ax.plot(p.X[:, 0], p.y, "k.", ms=4, label="training data")
        ax.set_xlabel(p.inputs[0] if one_d else "test point index")
        ax.set_ylabel(p.target)
        ax.legend(frameon=False, ncol=2)
        ax.set_title(f"{result.circuit.evolution} oracle, c = {result.circuit.clock_qubits}, κ = {p.diagnostics.condition_number:.3g}")
        return save_figure(fig, stem)


def filter_figure(result: InferenceResult, stem: Path) -> list[Path]:
    """The effective 1/λ̃ the circuit applies against the exact 1/λ, over A's eigenvalues.

    Points: the circuit's own operator B ≈ C·Ã⁻¹ in A's eigenbasis, diag(VᵀBV)/C (amortised runs);
    curve: the closed-form filter model of qgp.readout.filter_model for the same circuit (for QSVT
    its polynomial).
    """
    A = result.problem.A_padded
    lam, V = np.linalg.eigh(A)
    inv = result.inverse
    algorithm = algorithm_of(result.circuit)
    grid = np.linspace(max(lam[0] * 0.5, 1e-12), lam[-1] * 1.05, 600)
    with figure_style():
        fig, ax = plt.subplots(figsize=SINGLE_COLUMN)
        ax.plot(grid, 1 / grid, color=PALETTE[7], lw=0.8, label="exact 1/λ")
        ax.plot(grid, filter_response(inv, grid) / inv.scale, color=PALETTE[0], label=algorithm.model_label)
        if result.operators is not None:
            eff = np.real(np.einsum("ij,ik,kj->j", V, result.operators.B, V)) / inv.scale
            ax.plot(lam, eff, "o", ms=3, color=PALETTE[1], label="circuit, at A's eigenvalues")
        ax.axvline(inv.floor, color=PALETTE[2], lw=0.7, ls=":", label=algorithm.floor_label)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("eigenvalue λ of A")
        ax.set_ylabel("applied 1/λ̃")
        ax.legend(frameon=False)
        return save_figure(fig, stem)


def run_figures(result: InferenceResult, out_dir: Path) -> list[Path]:
    """Both figures of a run into ``out_dir``."""
    return prediction_figure(result, out_dir / "prediction") + filter_figure(result, out_dir / "filter")
