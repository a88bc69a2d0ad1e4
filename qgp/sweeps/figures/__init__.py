"""The figures of a parameter sweep (`qgp figures RESULTS.sqlite --out DIR`).

Nine figures, each drawn only if the store holds the data it needs (otherwise skipped with a
note, never drawn empty):

1. ``fig1_error_vs_qubits``   error of the mean and of the variance against clock qubits, one line
                              per oracle (total qubits = c + a constant per oracle, stated in the legend;
                              their rows stay in the CSV, not drawn); where κ varies, its series along a
                              sequential colour ramp, the oracle by marker and line style;
2. ``fig2_error_vs_condition`` the same errors against the condition number κ (a noise axis);
3. ``fig3_success_probability`` post-selection success probability against κ: the inversion circuit
                              beside a line ∝ 1/κ², the variance circuit beside one ∝ 1/κ (Harrow, Hassidim
                              & Lloyd, PRL 103, 150502 (2009): the 1/λ amplitude C/λ is at least about
                              1/κ), each anchored at the lowest measured point at the smallest κ;
4. ``fig4_noise_tradeoff``    a Pareto view of the noise trade-off: the quantum error against the exact
                              GP's test NLPD, one point per σ² (labelled), per method and clock size, the
                              non-dominated points marked; raising σ² helps the circuit and hurts the
                              model. κ, errors, test RMSE and NLPD against σ² stay in the CSV, not drawn;
5. ``fig5_taper_sparsity``    sparsity s, κ and GP accuracy against the taper radius ``kernel.support``;
6. ``fig6_circuit_cost``      CX count and depth of the 1/λ circuit against system qubits m and clock
                              qubits c, with m, c and † (synthesis-dependent counts) defined on the figure;
7. ``fig7_scaling``           κ, s and ‖A‖_F/‖A‖ against n at fixed hyperparameters, and the clock
                              qubits and success probability a 1% error needs — simulated where the
                              store has runs, the closed-form filter model (qgp.readout.filter_model) beyond,
                              marked "model". Kernel matrices' κ and sparsity tend to grow with n
                              (Lowe, Kim & Bondesan, arXiv:2505.22502 (2025), as its abstract reports);
8. ``fig8_qsvt_vs_phase_estimation`` QSVT against phase estimation on the same GP problems, one column
                              per κ: mean and variance error against block-encoding calls, with the
                              fewest calls for a 1% mean error marked and the query models κ/ε
                              (phase estimation) and κ·ln(κ/ε) (QSVT) beside them, unfitted; the mean's
                              error against total qubits;
9. ``fig9_gate_noise``        how much gate noise the inference tolerates: mean and variance error
                              against the two-qubit depolarising rate p, one line per method and
                              accuracy setting, with the noiseless floors, the 1% target and the exact
                              GP's own posterior spread; p*, where the mean's error crosses 1%, against
                              the Hadamard-test circuit's two-qubit gates beside p = 1/gates (about one
                              error per run), unfitted.

Contract: every figure is drawn from the rows of the CSV written beside it and from nothing
else, so the CSV holds the plotted numbers (and, for figs. 1 and 4, the rows of panels they no
longer draw, marked so in the caption: nothing a reader used is lost). Columns (`CSV_COLUMNS`):

    panel, series, x_name, x, y_name, y, y_std, y_min, y_max, n, source, grid_indices

``source`` says where y comes from: ``store`` — the mean over the listed grid points (which differ
only in a seed axis, `SEED_KEYS`) of the stored value named by ``y_name`` ("summary:key.sub" or
"config:section.key"), with sample std and min–max (the band drawn); ``derived`` — a rule over the
listed points stated in ``y_name``; ``reference`` — the formula in ``y_name``; ``classical`` — A's
diagnostics recomputed from the stored config (listed points have the same n and store equal
values), or the exact GP's posterior spread recomputed from it (fig. 9; y_name states the rule,
the listed points share the GP); ``model`` — the closed-form filter model. Floats are written with ``repr`` (exact round
trip). Beside each figure: ``.pdf`` (vector), ``.png`` (300 dpi), ``.csv`` and a one-line caption ``.txt``.
"""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

from qgp.errors import QgpError
from qgp.files import atomic_write_text, check_outputs
from qgp.sweeps.figures.contract import CSV_COLUMNS, _write_csv, read_figure_csv
from qgp.sweeps.figures.data import SEED_KEYS, _labels, _Skip, load_points, point_value
from qgp.sweeps.figures.fig1 import _fig1
from qgp.sweeps.figures.fig2 import _fig2
from qgp.sweeps.figures.fig3 import _fig3, loglog_slope  # noqa: F401  (kept at its old address)
from qgp.sweeps.figures.fig4 import _fig4
from qgp.sweeps.figures.fig5 import _fig5
from qgp.sweeps.figures.fig6 import _fig6
from qgp.sweeps.figures.fig7 import _fig7
from qgp.sweeps.figures.fig8 import _fig8
from qgp.sweeps.figures.fig9 import _fig9
from qgp.sweeps.figures.model import (
    MEAN_TARGET,
    MODEL_MAX_CLOCK,
    MODEL_MAX_N,
    VARIANCE_TARGET,
    config_from_document,
    model_errors,
    scaling_model,
)
from qgp.sweeps.figures.style import _draw, _Figure

__all__ = [
    "FIGURES",
    "SEED_KEYS",
    "CSV_COLUMNS",
    "MEAN_TARGET",
    "VARIANCE_TARGET",
    "MODEL_MAX_N",
    "MODEL_MAX_CLOCK",
    "FigureOutcome",
    "load_points",
    "point_value",
    "draw_figures",
    "make_figures",
    "figures_command",
    "read_figure_csv",
    "config_from_document",
    "model_errors",
    "scaling_model",
]


@dataclass(frozen=True)
class FigureOutcome:
    """One figure: the files written (empty when skipped) and the note (the skip reason or caveats)."""

    name: str
    paths: tuple[Path, ...]
    note: str | None = None

    @property
    def written(self) -> bool:
        return bool(self.paths)


def _write_figure(spec: _Figure, out_dir: Path, source_text: str) -> FigureOutcome:
    if not spec.rows:
        raise _Skip("no plottable numbers")
    labels, constant = _labels(spec.rows)
    out_dir.mkdir(parents=True, exist_ok=True)
    stem = out_dir / spec.name
    csv_path = stem.with_suffix(".csv")
    _write_csv(spec.rows, labels, csv_path)
    paths = _draw(spec, labels, stem)
    shared = [t for t in (spec.setting, *constant) if t]
    fixed = f" Fixed across the figure: {'; '.join(shared)}." if shared else ""
    notes = f" Notes: {'; '.join(_notes(spec.notes))}." if spec.notes else ""
    caption = f"{spec.caption}{fixed}{notes} Data: {source_text}; plotted numbers in {csv_path.name}."
    txt = stem.with_suffix(".txt")
    atomic_write_text(txt, " ".join(caption.split()) + "\n")
    return FigureOutcome(spec.name, tuple(paths) + (csv_path, txt), "; ".join(_notes(spec.notes)) or None)


def _notes(items: Iterable[str]) -> list[str]:
    """Notes once each; a missing value ("summary:…" from `_aggregate`) as a count of points."""
    missing: dict[str, int] = {}
    out: list[str] = []
    for s in items:
        if s.startswith(("summary:", "config:")):
            missing[s] = missing.get(s, 0) + 1
        elif s not in out:
            out.append(s)
    for ref, k in missing.items():
        why = " (null where a quantum latent variance is ≤ 0; never clipped)" if ref.endswith("test_nlpd.quantum") else ""
        out.append(f"{ref.split(':', 1)[1]} missing at {k} point(s), left out{why}")
    return out


#: Figure name → builder, in the order they are drawn.
FIGURES: dict[str, Callable[[list], _Figure]] = {
    "fig1_error_vs_qubits": _fig1,
    "fig2_error_vs_condition": _fig2,
    "fig3_success_probability": _fig3,
    "fig4_noise_tradeoff": _fig4,
    "fig5_taper_sparsity": _fig5,
    "fig6_circuit_cost": _fig6,
    "fig7_scaling": _fig7,
    "fig8_qsvt_vs_phase_estimation": _fig8,
    "fig9_gate_noise": _fig9,
}


# -- entry points --------------------------------------------------------------------------------


def _select(only: Sequence[str] | None) -> list[str]:
    if not only:
        return list(FIGURES)
    out = []
    for want in only:
        hits = [n for n in FIGURES if n == want or n.split("_", 1)[0] == want]
        if not hits:
            raise QgpError(f"unknown figure {want!r}; choose from {', '.join(FIGURES)} (or fig1 … fig9)")
        out += [h for h in hits if h not in out]
    return out


def draw_figures(source, out_dir: str | Path, *, only: Sequence[str] | None = None) -> list[FigureOutcome]:
    """Draw every figure the data supports into ``out_dir``; the others come back skipped with a note.

    ``source``: a result store path or a sequence of StoredPoint-likes. ``only``: figure names or
    "fig1" … "fig9".
    """
    points, text = load_points(source)
    out_dir = Path(out_dir)
    outcomes = []
    for name in _select(only):
        try:
            if not points:
                raise _Skip("the store has no finished points")
            spec = FIGURES[name](points)
            outcomes.append(_write_figure(spec, out_dir, text))
        except _Skip as why:
            outcomes.append(FigureOutcome(name, (), f"skipped: {why}"))
    return outcomes


def make_figures(source, out_dir: str | Path, *, only: Sequence[str] | None = None) -> list[Path]:
    """The files written by `draw_figures` (PDF, PNG, CSV, caption per figure); skips are not files."""
    return [p for o in draw_figures(source, out_dir, only=only) for p in o.paths]


FIGURE_SUFFIXES = (".pdf", ".png", ".csv", ".txt")


def figures_command(store: Path, out: Path, only: Sequence[str] | None = None, *, force: bool = False) -> int:
    """`qgp figures STORE --out DIR`: draw, print what was written and skipped; 1 if nothing was drawn.

    Refuses, before reading the store, to replace figure files already in ``out`` unless ``force``.
    """
    names = [name + suffix for name in _select(only) for suffix in FIGURE_SUFFIXES]
    check_outputs(out, names, force=force, inputs=[store])
    outcomes = draw_figures(Path(store), Path(out), only=only)
    for o in outcomes:
        if o.written:
            exts = ", ".join(p.suffix.lstrip(".") for p in o.paths)
            print(f"wrote {Path(out) / o.name}.{{{exts}}}" + (f"  ({o.note})" if o.note else ""))
        else:
            print(f"{o.name}: {o.note}")
    if not any(o.written for o in outcomes):
        print(f"qgp: no figure could be drawn from {store}; see the notes above", file=sys.stderr)
        return 1
    return 0
