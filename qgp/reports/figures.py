"""Figures for a run, in one publication style: vector PDF and 300-dpi PNG, single-column width,
a colour-blind-safe palette (Okabe & Ito 2008), labelled axes.
"""

from __future__ import annotations

from contextlib import contextmanager
from pathlib import Path

import os
import re
import sys

import matplotlib

# Files only (the command, sweeps, tests): the Agg backend needs no display. But never take a backend
# away from a notebook or from a program that chose one before importing qgp: draw_* return Figures
# they can show and restyle.
if "ipykernel" not in sys.modules and "matplotlib.pyplot" not in sys.modules:
    matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from qgp.circuits.algorithms import algorithm_of
from qgp.errors import QgpError  # noqa: E402
from qgp.files import atomic_open  # noqa: E402
from qgp.readout.filter_model import filter_response  # noqa: E402
from qgp.readout.inference import InferenceResult  # noqa: E402

__all__ = ["PALETTE", "STYLE_FILE", "figure_style", "use_style", "styles", "math_label", "mathify", "save_figure", "draw_prediction", "prediction_figure", "filter_figure", "run_figures"]

#: Okabe–Ito colour-blind-safe palette.
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000")
SINGLE_COLUMN = (3.4, 2.5)
_GREY = "#555555"

#: The style every figure starts from, a matplotlib style sheet shipped with qgp; the user's sheets go on top.
STYLE_FILE = Path(__file__).with_name("qgp.mplstyle")
#: Environment variable naming style sheets (paths or matplotlib style names, separated by os.pathsep).
STYLE_VARIABLE = "QGP_MPLSTYLE"
_user_styles: tuple[str, ...] = ()


def _checked_style(style: str) -> str:
    if Path(style).is_file() or style in plt.style.available:
        return style
    raise QgpError(
        f"style sheet {style!r} is neither a file nor a matplotlib style name; give the path of an .mplstyle "
        "file or one of plt.style.available"
    )


def use_style(*styles: str) -> None:
    """Draw every figure with these style sheets (paths or matplotlib style names) on top of qgp's own;
    no argument goes back to qgp's style alone. Checked here, before any figure is drawn."""
    global _user_styles
    _user_styles = tuple(_checked_style(str(s)) for s in styles)


def styles() -> list[str]:
    """The style sheets a figure is drawn with, in order: qgp's, then ``QGP_MPLSTYLE``'s, then `use_style`'s."""
    from_env = [s for s in os.environ.get(STYLE_VARIABLE, "").split(os.pathsep) if s]
    return [str(STYLE_FILE), *(_checked_style(s) for s in from_env), *_user_styles]


@contextmanager
def figure_style():
    with plt.style.context(styles()):
        yield


#: Plain-text formulas the library writes in labels (logs, file headers) and their mathtext for figures,
#: longest first so that "κ_b" is not read as "κ" followed by "_b".
_MATH = (
    ("e^(iAt)", r"e^{iAt}"),
    ("e^{iAt}", r"e^{iAt}"),
    ("‖A‖_F", r"\|A\|_F"),
    ("‖A‖_max", r"\|A\|_{max}"),
    ("‖A‖", r"\|A\|"),
    ("1/κ²", r"1/\kappa^2"),
    ("1/κ", r"1/\kappa"),
    ("1/√λ", r"1/\sqrt{\lambda}"),
    ("∝", r"\propto"),
    ("λ_lo", r"\lambda_{lo}"),
    ("λ_hi", r"\lambda_{hi}"),
    ("κ_b", r"\kappa_b"),
    ("1/λ̃", r"1/\tilde\lambda"),
    ("λ̃", r"\tilde\lambda"),
    ("p(λ/α)", r"p(\lambda/\alpha)"),
    ("1/λ", r"1/\lambda"),
    ("σ²", r"\sigma^2"),
    ("s²", r"s^2"),
    ("κ", r"\kappa"),
    ("λ", r"\lambda"),
    ("α", r"\alpha"),
    ("ε", r"\epsilon"),
    ("ℓ", r"\ell"),
)
#: A power law's exponent as the fits print it: "n^0.92" → $n^{0.92}$.
_POWER = re.compile(r"\b([nκ])\^([0-9]+(?:\.[0-9]+)?)")
_MATH_PATTERN = re.compile("|".join(re.escape(plain) for plain, _ in _MATH))


def math_label(text: str) -> str:
    """``text`` with its formulas in mathtext (κ → $\\kappa$, σ² → $\\sigma^2$, e^(iAt) → $e^{iAt}$, …);
    parts already between $ signs are left as they are."""
    table = dict(_MATH)
    parts = str(text).split("$")
    for i in range(0, len(parts), 2):  # even parts lie outside $…$
        part = _POWER.sub(lambda m: "${}^{{{}}}$".format(m.group(1).replace("κ", r"\kappa"), m.group(2)), parts[i])
        pieces = part.split("$")  # the powers just made are math already: convert only between them
        for j in range(0, len(pieces), 2):
            pieces[j] = _MATH_PATTERN.sub(lambda m: f"${table[m.group(0)]}$", pieces[j])
        parts[i] = "$".join(pieces)
    return "$".join(parts)


def mathify(fig):
    """Every title, axis label, legend entry and free text of ``fig`` through `math_label`; returns ``fig``."""
    texts = [t for leg in fig.legends for t in leg.get_texts()] + list(fig.texts)
    for ax in fig.axes:
        texts += [ax.title, ax._left_title, ax._right_title, ax.xaxis.label, ax.yaxis.label, *ax.texts]
        if ax.get_legend() is not None:
            texts += ax.get_legend().get_texts()
    for t in texts:
        t.set_text(math_label(t.get_text()))
    return fig


def save_figure(fig, stem: Path) -> list[Path]:
    """Write ``stem``.pdf (vector) and ``stem``.png (300 dpi), each atomically, formulas in mathtext
    (`mathify`); close the figure."""
    stem.parent.mkdir(parents=True, exist_ok=True)
    mathify(fig)
    paths = [stem.with_suffix(".pdf"), stem.with_suffix(".png")]
    try:
        for path, dpi in zip(paths, ("figure", 300)):
            with atomic_open(path, "wb") as fh:
                # bbox "tight" here too: a figure drawn by `draw_*` may be saved outside figure_style,
                # and legends placed below the axes must not be cut off.
                fig.savefig(fh, format=path.suffix[1:], dpi=dpi, bbox_inches="tight")
    finally:
        plt.close(fig)
    return paths


def draw_prediction(result: InferenceResult, y_test=None):
    """The prediction figure as a matplotlib Figure (restyle it, or save it with `save_figure`).

    ``y_test`` (shape (m,)): held-out targets at the test points, drawn when given; default the problem's
    own (a config's test file with a target column). The estimator's ``predict`` never sees targets, so
    pass them here.

    1-D inputs: the exact GP's mean with its latent ±2σ band (of f) and its predictive ±2σ band (of y,
    latent + σ², which the training data are drawn from) on a dense grid of its own; the circuits' mean
    at the test points (±2 SE error bars with shots) and their latent ±2σ as bars; training data and
    held-out targets; below, the residual quantum − exact mean (±2 SE). More inputs: a parity plot of the
    quantum against the exact mean, and the residual per test point.
    """
    p = result.problem
    one_d = p.X.shape[1] == 1
    targets = p.y_test if y_test is None else np.asarray(y_test, dtype=float).ravel()
    if targets is not None and targets.shape != (p.n_test,):
        raise QgpError(f"y_test has {targets.size} values but the result has {p.n_test} test points; pass one per test point")
    se = result.mean_quantum_se
    resid = result.mean_quantum - result.mean_exact
    with figure_style():
        fig, (ax, rax) = plt.subplots(2, 1, figsize=(3.4, 3.6), sharex=one_d, gridspec_kw={"height_ratios": (3, 1)})
        if one_d:
            x_all = np.concatenate([p.X[:, 0], p.X_test[:, 0]])
            span = np.ptp(x_all) or 1.0
            grid = np.linspace(x_all.min() - 0.02 * span, x_all.max() + 0.02 * span, 400)
            exact = p.exact.predict(grid[:, None])
            sd_f = np.sqrt(np.clip(exact.variance_latent, 0, None))
            sd_y = np.sqrt(np.clip(exact.variance_predictive, 0, None))
            ax.fill_between(grid, exact.mean - 2 * sd_y, exact.mean + 2 * sd_y, color=PALETTE[5], alpha=0.18, lw=0,
                            label=r"exact predictive $\pm2\sigma_y$ ($\sigma_y^2=\sigma_f^2+\sigma^2$)")
            ax.fill_between(grid, exact.mean - 2 * sd_f, exact.mean + 2 * sd_f, color=PALETTE[0], alpha=0.25, lw=0,
                            label=r"exact latent $\pm2\sigma_f$")
            ax.plot(grid, exact.mean, color=PALETTE[0], lw=1.0, label="exact mean")
            x = p.X_test[:, 0]
            sd_q = np.sqrt(np.clip(result.variance_quantum, 0, None))
            ax.plot(np.r_[x, x], np.r_[result.mean_quantum - 2 * sd_q, result.mean_quantum + 2 * sd_q], "_",
                    color=PALETTE[1], ms=4, mew=0.8, label=r"quantum latent $\pm2\sigma_f$")
            if se is not None:
                ax.errorbar(x, result.mean_quantum, yerr=2 * se, fmt="o", ms=2, color=PALETTE[1], elinewidth=0.6,
                            label="quantum mean ±2 SE (shots)")
            else:
                ax.plot(x, result.mean_quantum, "o", ms=2, color=PALETTE[1], label="quantum mean")
            ax.plot(p.X[:, 0], p.y, "k.", ms=4, label="training data")
            if targets is not None:
                ax.plot(x, targets, "x", color=PALETTE[7], ms=3, mew=0.6, label="held-out targets")
            neg = result.variance_quantum <= 0
            if np.any(neg):
                ax.plot(x[neg], result.mean_quantum[neg], "s", mfc="none", color=PALETTE[3], ms=5,
                        label="quantum variance ≤ 0")
            ax.set_ylabel(p.label(p.target))
            rx, rlabel = x, p.label(p.inputs[0])
        else:
            lo, hi = float(np.min(result.mean_exact)), float(np.max(result.mean_exact))
            ax.plot([lo, hi], [lo, hi], color=_GREY, lw=0.8, label="quantum = exact")
            ax.errorbar(result.mean_exact, result.mean_quantum, yerr=None if se is None else 2 * se, fmt="o", ms=2.5,
                        color=PALETTE[1], elinewidth=0.6, label="test points" + ("" if se is None else " ±2 SE (shots)"))
            ax.set(xlabel=f"exact mean of {p.label(p.target)}", ylabel=f"quantum mean of {p.label(p.target)}")
            rx, rlabel = np.arange(p.n_test), "test point"
        rax.axhline(0.0, color=_GREY, lw=0.8)
        rax.errorbar(rx, resid, yerr=None if se is None else 2 * se, fmt="o", ms=2, color=PALETTE[1], elinewidth=0.6)
        unit = re.search(r"\(([^()]*)\)\s*$", p.label(p.target))  # "ice thickness (cm)" → cm
        rax.set(xlabel=rlabel, ylabel="quantum − exact\nmean" + (f" ({unit.group(1)})" if unit else ""))
        label = algorithm_of(result.circuit).label(result.circuit)
        size = f"c = {result.circuit.clock_qubits}" if algorithm_of(result.circuit).uses_clock else f"degree {result.inverse.n_oracle_calls}"
        kappa = p.diagnostics.condition_number
        ax.set_title(f"{label}, {size}" + ("" if kappa is None else rf", $\kappa$ = {kappa:.3g}"))
        handles, labels = ax.get_legend_handles_labels()
        fig.tight_layout()
        fig.legend(handles, labels, loc="upper center", bbox_to_anchor=(0.5, 0.0), ncol=2, frameon=False, fontsize=6)
        return mathify(fig)


def prediction_figure(result: InferenceResult, stem: Path) -> list[Path]:
    """`draw_prediction`, saved as ``stem``.pdf and ``stem``.png."""
    return save_figure(draw_prediction(result), stem)


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
        ax.set_xlabel(r"eigenvalue $\lambda$ of $A$")
        ax.set_ylabel(r"applied $1/\tilde\lambda$")
        ax.legend(frameon=False)
        return save_figure(fig, stem)


def run_figures(result: InferenceResult, out_dir: Path) -> list[Path]:
    """Both figures of a run into ``out_dir``."""
    return prediction_figure(result, out_dir / "prediction") + filter_figure(result, out_dir / "filter")
