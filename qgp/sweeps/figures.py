"""The figures of a parameter sweep (`qgp figures RESULTS.sqlite --out DIR`).

Seven figures, each drawn only if the store holds the data it needs (otherwise skipped with a
note, never drawn empty):

1. ``fig1_error_vs_qubits``   error of the mean and of the variance against total and clock qubits,
                              one line per oracle;
2. ``fig2_error_vs_condition`` the same errors against the condition number κ (a noise axis);
3. ``fig3_success_probability`` post-selection success probability against κ: the inversion circuit
                              beside 1/κ², the variance circuit beside 1/κ (Harrow, Hassidim & Lloyd,
                              PRL 103, 150502 (2009): the 1/λ amplitude C/λ is at least about 1/κ);
4. ``fig4_noise_tradeoff``    κ, the quantum error, and the exact GP's test RMSE and NLPD against
                              σ²: raising σ² helps the circuit and hurts the model;
5. ``fig5_taper_sparsity``    sparsity s, κ and GP accuracy against the taper radius ``kernel.support``;
6. ``fig6_circuit_cost``      CX count and depth of the 1/λ circuit against system and clock qubits;
7. ``fig7_scaling``           κ, s and ‖A‖_F/‖A‖ against n at fixed hyperparameters, and the clock
                              qubits and success probability a 1% error needs — simulated where the
                              store has runs, the closed-form filter model (qgp.readout.filter_model) beyond,
                              marked "model". Kernel matrices' κ and sparsity tend to grow with n
                              (Lowe, Kim & Bondesan, arXiv:2505.22502 (2025), as its abstract reports).

Contract: every figure is drawn from the rows of the CSV written beside it and from nothing
else, so the CSV holds exactly the plotted numbers. Columns (`CSV_COLUMNS`):

    panel, series, x_name, x, y_name, y, y_std, y_min, y_max, n, source, grid_indices

``source`` says where y comes from: ``store`` — the mean over the listed grid points (which differ
only in a seed axis, `SEED_KEYS`) of the stored value named by ``y_name`` ("summary:key.sub" or
"config:section.key"), with sample std and min–max (the band drawn); ``derived`` — a rule over the
listed points stated in ``y_name``; ``reference`` — the formula in ``y_name``; ``classical`` — A's
diagnostics recomputed from the stored config (listed points have the same n and store equal
values); ``model`` — the closed-form filter model. Floats are written with ``repr`` (exact round
trip). Beside each figure: ``.pdf`` (vector), ``.png`` (300 dpi), ``.csv`` and a one-line caption ``.txt``.
"""

from __future__ import annotations

import csv
import math
import sys
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import numpy as np

from qgp.errors import QgpError
from qgp.files import atomic_open, atomic_write_text, check_outputs
from qgp.reports.figures import PALETTE, SINGLE_COLUMN, figure_style, save_figure

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

#: Axes aggregated over (mean, sample std and min–max band); every other axis separates points.
SEED_KEYS = ("readout.seed",)
CSV_COLUMNS = ("panel", "series", "x_name", "x", "y_name", "y", "y_std", "y_min", "y_max", "n", "source", "grid_indices")
#: The target errors of fig. 7: relative RMSE (summary: mean_rel_rmse, variance_rel_rmse) ≤ 1%.
MEAN_TARGET = 0.01
VARIANCE_TARGET = 0.01
#: Largest n and clock register the closed-form model of fig. 7 evaluates.
MODEL_MAX_N = 1024
MODEL_MAX_CLOCK = 16

_MEAN_LABEL = f"mean ≤ {MEAN_TARGET:.0%}"
_VARIANCE_LABEL = f"variance ≤ {VARIANCE_TARGET:.0%}"
_NOISE_KEYS = ("noise.target_condition", "noise.variance")
_ORACLE_KEYS = ("circuit.evolution", "circuit.encoding", "circuit.trotter_steps", "circuit.trotter_order")
_SHOT_KEYS = ("readout.shots",)
# Colour-blind-safe colours in the order series get them (Okabe–Ito; yellow left out: too pale on white).
_COLOURS = (PALETTE[0], PALETTE[1], PALETTE[2], PALETTE[3], PALETTE[4], PALETTE[5], PALETTE[7])
_MARKERS = ("o", "s", "^", "D", "v", "P", "X")
_LINESTYLES = ("-", "--", "-.", ":")
_REFERENCE_COLOUR = "#555555"
#: Labels drawn with mathtext (the CSV keeps the plain text).
_DISPLAY = {"‖A‖_F / ‖A‖": r"$\|A\|_F\,/\,\|A\|$"}


# -- reading points ------------------------------------------------------------------------------


def load_points(source) -> tuple[list, str]:
    """(done points, a description) from a store path, or from a sequence of StoredPoint-likes."""
    if isinstance(source, (str, Path)):
        from qgp.sweeps.store import open_store

        with open_store(source) as store:
            points = store.points("done")
            failed = len(store.points("failed"))
            size = store.meta.get("grid_size")
        extra = f", {failed} failed and left out" if failed else ""
        return points, f"store {Path(source).name} ({len(points)} of {size} grid points done{extra})"
    points = [p for p in source if getattr(p, "status", "done") == "done" and p.summary is not None]
    return points, f"{len(points)} points"


def _dig(doc: Any, dotted: str) -> Any:
    cur = doc
    for key in dotted.split("."):
        if not isinstance(cur, Mapping) or key not in cur:
            return None
        cur = cur[key]
    return cur


def point_value(point, ref: str) -> Any:
    """The value a CSV ``x_name``/``y_name`` names: "summary:a.b", "config:section.key" or "axes:key"."""
    where, _, path = ref.partition(":")
    if where == "summary":
        return _dig(point.summary, path)
    if where == "config":
        return _dig(point.config, path)
    if where == "axes":
        return point.axes.get(path)
    raise QgpError(f"unknown value reference {ref!r}; use summary:…, config:… or axes:…")


def _finite(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _varying_axes(points) -> list[str]:
    """Axis keys whose value differs between points, in first-seen order."""
    keys: list[str] = []
    for p in points:
        for k in p.axes:
            if k not in keys:
                keys.append(k)
    out = []
    for k in keys:
        vals = {repr(p.axes.get(k)) for p in points}
        if len(vals) > 1:
            out.append(k)
    return out


# -- rows, aggregation and CSV -------------------------------------------------------------------


@dataclass(frozen=True)
class _Row:
    panel: str
    series: tuple[tuple[str, str], ...]  # (part name, text); the label is built from the parts that vary
    x_name: str
    x: float | None
    y_name: str
    y: float
    y_std: float
    y_min: float
    y_max: float
    n: int
    source: str
    grid_indices: tuple[int, ...] = ()


def _stats(values: Sequence[float]) -> tuple[float, float, float, float]:
    """(mean, sample std (0 for one value), min, max); mean = fsum/n so a reader can recompute it exactly."""
    n = len(values)
    mean = math.fsum(values) / n
    std = math.sqrt(math.fsum((v - mean) ** 2 for v in values) / (n - 1)) if n > 1 else 0.0
    return mean, std, min(values), max(values)


def _one(panel, series, x_name, x, y_name, y, source, grid_indices=()) -> _Row:
    y = float(y)
    return _Row(panel, tuple(series), x_name, x, y_name, y, 0.0, y, y, 1, source, tuple(grid_indices))


def _aggregate(
    points,
    *,
    panel: str,
    x_name: str,
    y_name: str,
    series: Callable[[Any], Sequence[tuple[str, str]]],
    extras: Sequence[str],
    dropped: list[str],
) -> list[_Row]:
    """One row per (series, x, non-seed axes): the stored ``y_name`` over the seeds.

    Points are merged only when their axes differ in `SEED_KEYS` alone. ``extras`` are varying
    axes the figure does not consume; they become series parts so no two settings share a line.
    Points whose value is missing or not finite are left out and counted in ``dropped``.
    """
    groups: dict[tuple, list] = {}
    for p in points:
        x = point_value(p, x_name)
        y = point_value(p, y_name)
        if not _finite(y) or (x is not None and not _finite(x)):
            dropped.append(y_name)
            continue
        parts = tuple(series(p)) + tuple((k, f"{_short(k)} = {_fmt(p.axes.get(k))}") for k in extras)
        others = tuple(sorted((k, repr(v)) for k, v in p.axes.items() if k not in SEED_KEYS))
        groups.setdefault((parts, x, others), []).append(p)
    rows = []
    for (parts, x, _), pts in groups.items():
        vals = [float(point_value(p, y_name)) for p in pts]
        mean, std, lo, hi = _stats(vals)
        rows.append(_Row(panel, parts, x_name, x, y_name, mean, std, lo, hi, len(vals), "store", tuple(p.grid_index for p in pts)))
    return rows


_SHORT = {
    "circuit.clock_qubits": "c",
    "data.n_train": "n",
    "noise.variance": "σ²",
    "noise.target_condition": "target κ",
    "kernel.support": "taper radius",
    "readout.shots": "shots",
}


def _short(key: str) -> str:
    return _SHORT.get(key, key.split(".", 1)[-1])


def _fmt(v) -> str:
    if v is None:
        return "unset"
    if isinstance(v, float):
        return f"{v:g}"
    return str(v)


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        return repr(float(v))
    return str(v)


def _write_csv(rows: Sequence[_Row], labels: Mapping[tuple, str], path: Path) -> None:
    """One line per row; ``labels`` maps (series parts, source) to the series label."""
    with atomic_open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(CSV_COLUMNS)
        for r in rows:
            w.writerow(
                [
                    r.panel,
                    labels[(r.series, r.source)],
                    r.x_name,
                    _cell(r.x),
                    r.y_name,
                    _cell(r.y),
                    _cell(r.y_std),
                    _cell(r.y_min),
                    _cell(r.y_max),
                    str(r.n),
                    r.source,
                    " ".join(str(i) for i in r.grid_indices),
                ]
            )


def read_figure_csv(path: str | Path) -> list[dict[str, Any]]:
    """A figure CSV back as dicts: numbers as float (x None when empty), grid_indices as a list of int."""
    out = []
    with open(path, newline="", encoding="utf-8") as fh:
        for row in csv.DictReader(fh):
            d: dict[str, Any] = dict(row)
            for k in ("x", "y", "y_std", "y_min", "y_max"):
                d[k] = None if row[k] == "" else float(row[k])
            d["n"] = int(row["n"])
            d["grid_indices"] = [int(i) for i in row["grid_indices"].split()]
            out.append(d)
    return out


# -- series labels and styles --------------------------------------------------------------------


def _oracle(p) -> tuple[str, str]:
    """The phase oracle as one series part: exact, Trotter (steps, order), walk + encoding."""
    ev = point_value(p, "summary:evolution")
    if ev == "walk":
        enc = point_value(p, "summary:encoding")
        return ("oracle", f"walk + {'LCU' if enc == 'lcu' else enc}")
    if ev == "trotter":
        steps = point_value(p, "config:circuit.trotter_steps")
        order = point_value(p, "config:circuit.trotter_order")
        return ("oracle", f"Trotter ({steps} step{'s' if steps != 1 else ''}, order {order})")
    return ("oracle", "exact e^(iAt)")


def _shots(p) -> tuple[str, str]:
    n = point_value(p, "summary:shots")
    return ("shots", "exact probabilities" if not n else f"{int(n):,} shots")


def _labels(rows: Sequence[_Row]) -> tuple[dict[tuple, str], list[str]]:
    """Label each series by its parts that vary over the figure; return the constant parts too."""
    names: list[str] = []
    texts: dict[str, set] = {}
    for r in rows:
        for name, text in r.series:
            if name not in names:
                names.append(name)
            texts.setdefault(name, set()).add(text)
    varying = [n for n in names if len(texts[n]) > 1]
    constant = [next(iter(texts[n])) for n in names if len(texts[n]) == 1 and n not in ("quantity",)]
    labels = {}
    for r in rows:
        parts = dict(r.series)
        shown = [parts[n] for n in varying if n in parts]
        if not shown:  # nothing varies: the quantity (or the only part) names the line
            shown = [parts.get("quantity", next(iter(parts.values()), "data"))]
        label = ", ".join(shown)
        if r.source == "model":
            label += " (model)"
        labels[(r.series, r.source)] = label
    return labels, constant


class _Styles:
    """Colour from a series' first varying part, marker and line style from the rest (per figure)."""

    def __init__(self, rows: Sequence[_Row]):
        texts: dict[str, list[str]] = {}
        for r in rows:
            for name, text in r.series:
                texts.setdefault(name, [])
                if text not in texts[name]:
                    texts[name].append(text)
        self.varying = [n for n, t in texts.items() if len(t) > 1]
        self.colour_keys: list[str] = []
        self.rest_keys: dict[str, list[tuple]] = {}

    def __call__(self, series: tuple[tuple[str, str], ...]) -> tuple[str, str, Any, bool]:
        parts = dict(series)
        vary = [n for n in self.varying if n in parts]
        first = parts[vary[0]] if vary else ""
        rest = tuple(parts[n] for n in vary[1:])
        if first not in self.colour_keys:
            self.colour_keys.append(first)
        variants = self.rest_keys.setdefault(first, [])
        if rest not in variants:
            variants.append(rest)
        i, j = self.colour_keys.index(first), variants.index(rest)
        # Colour and marker shape name the first varying part (e.g. the oracle), so both tell the
        # lines apart for any colour vision; its variants get a line style and filled/hollow markers.
        return _COLOURS[i % len(_COLOURS)], _MARKERS[i % len(_MARKERS)], _LINESTYLES[j % len(_LINESTYLES)], j % 2 == 0


# -- figure description and drawing -------------------------------------------------------------


@dataclass(frozen=True)
class _Panel:
    key: str
    xlabel: str
    ylabel: str
    xscale: str = "linear"
    yscale: str = "linear"
    integer_x: bool = False
    integer_y: bool = False
    vline: float | None = None
    vline_text: str = ""
    legend: bool = True


@dataclass
class _Figure:
    name: str
    rows: list[_Row]
    panels: list[_Panel]
    grid: tuple[int, int]
    size: tuple[float, float]
    caption: str
    notes: list[str] = field(default_factory=list)
    #: "panel": a legend in each panel that asks for one; "figure": one legend under all panels.
    legend: str = "panel"
    #: The settings every point of the figure shares (for the caption).
    setting: str = ""


class _Skip(Exception):
    """The store holds no data for this figure; the message says what is missing."""


@dataclass(frozen=True)
class FigureOutcome:
    """One figure: the files written (empty when skipped) and the note (the skip reason or caveats)."""

    name: str
    paths: tuple[Path, ...]
    note: str | None = None

    @property
    def written(self) -> bool:
        return bool(self.paths)


def _draw(fig_spec: _Figure, labels: Mapping[tuple, str], stem: Path) -> list[Path]:
    import matplotlib.pyplot as plt
    from matplotlib.ticker import FuncFormatter, LogLocator, MaxNLocator, NullFormatter

    styles = _Styles([r for r in fig_spec.rows if r.source not in ("reference",)])
    with figure_style():
        nr, nc = fig_spec.grid
        # A single column of panels over the same x: share it and label it once, at the bottom.
        shared = nc == 1 and len({(p.xlabel, p.xscale) for p in fig_spec.panels}) == 1
        fig, axes = plt.subplots(nr, nc, figsize=fig_spec.size, squeeze=False, sharex=shared)
        for ax, panel in zip(axes.flat, fig_spec.panels):
            rows = [r for r in fig_spec.rows if r.panel == panel.key]
            order: list[tuple] = []
            for r in rows:
                key = (r.series, r.source)
                if key not in order:
                    order.append(key)
            n_refs = 0
            for series, source in order:
                sel = sorted((r for r in rows if r.series == series and r.source == source), key=lambda r: (r.x is None, r.x))
                label = _DISPLAY.get(labels[(series, source)], labels[(series, source)])
                if source == "reference":
                    xs = [r.x for r in sel]
                    ref_ls = (":", (0, (4, 1.5, 1, 1.5)), (0, (1, 3)))[n_refs % 3]
                    n_refs += 1
                    ax.plot(xs, [r.y for r in sel], color=_REFERENCE_COLOUR, ls=ref_ls, lw=0.9, label=label)
                    continue
                colour, marker, ls, filled = styles(series)
                flat = [r for r in sel if r.x is None]
                sel = [r for r in sel if r.x is not None]
                for r in flat:  # a setting without an x value (no taper): a horizontal line, explained in the caption
                    ax.axhline(r.y, color=colour, ls=(0, (1, 1.5)), lw=0.9)
                if not sel:
                    continue
                xs = np.array([r.x for r in sel], dtype=float)
                ys = np.array([r.y for r in sel], dtype=float)
                if source == "model":
                    ax.plot(xs, ys, color=colour, ls="--", lw=1.0, label=label)
                elif source == "classical":
                    ax.plot(xs, ys, color=colour, ls=ls, lw=1.0, label=label)
                else:
                    ax.plot(xs, ys, color=colour, ls=ls, marker=marker, ms=3.2, lw=1.0, label=label,
                            mfc=colour if filled else "white", mew=0.9)
                    if any(r.n > 1 for r in sel):
                        ax.fill_between(xs, [r.y_min for r in sel], [r.y_max for r in sel], color=colour, alpha=0.22, lw=0)
            if panel.vline is not None:
                ax.axvline(panel.vline, color=_REFERENCE_COLOUR, lw=0.6, ls="-.")
                if panel.vline_text:
                    ax.text(panel.vline, 0.03, panel.vline_text + " ", transform=ax.get_xaxis_transform(), ha="right",
                            va="bottom", rotation=90, fontsize=5.5, color=_REFERENCE_COLOUR)
            if panel.xscale == "log2":  # settings that double: ticks at the values themselves, written plainly
                ax.set_xscale("log", base=2)
                ticks = sorted({r.x for r in fig_spec.rows if r.x is not None})
                if len(ticks) <= 10:
                    ax.set_xticks(ticks)
                ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
                ax.xaxis.set_minor_formatter(NullFormatter())
            else:
                ax.set_xscale(panel.xscale)
            ax.set_yscale(_scale(panel.yscale, [v for r in rows for v in (r.y, r.y_min, r.y_max)]))
            if ax.get_xscale() == "log" and panel.xscale == "log":
                lo, hi = ax.get_xlim()
                if lo > 0 and math.log10(hi / lo) <= 1.3:
                    # A short log axis gets 1–2–5 ticks written plainly (5, 10, 20, 50), not 2×10¹, 3×10¹, ….
                    ax.xaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
                    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
            for axis, scale in ((ax.xaxis, ax.get_xscale()), (ax.yaxis, ax.get_yscale())):
                if scale == "log":  # minor labels (2×10ⁿ, 3×10ⁿ, …) only crowd a single-column axis
                    axis.set_minor_formatter(NullFormatter())
            if panel.integer_x and panel.xscale == "linear":
                ax.xaxis.set_major_locator(MaxNLocator(integer=True))
            if panel.integer_y and panel.yscale == "linear":
                ax.yaxis.set_major_locator(MaxNLocator(integer=True))
            if not shared or panel is fig_spec.panels[-1]:
                ax.set_xlabel(panel.xlabel)
            ax.set_ylabel(panel.ylabel)
            ax.grid(True, which="major", lw=0.3, alpha=0.5)
            if fig_spec.legend == "panel" and panel.legend and ax.get_legend_handles_labels()[0]:
                ax.legend(frameon=False, fontsize=5.5, handlelength=2.2)
            if len(fig_spec.panels) > 1:
                ax.set_title(f"({'abcdefgh'[fig_spec.panels.index(panel)]})", loc="left", fontsize=7)
        for ax in list(axes.flat)[len(fig_spec.panels):]:
            ax.set_visible(False)
        if fig_spec.legend == "figure":
            handles: dict[str, Any] = {}
            for ax in axes.flat:
                for h, lab in zip(*ax.get_legend_handles_labels()):
                    handles.setdefault(lab, h)
            # Natural order (walk, c = 5 before walk, c = 10) groups each oracle's variants together.
            handles = dict(sorted(handles.items(), key=lambda kv: _natural(kv[0])))
            ncol = 2 if len(handles) > 3 else len(handles) or 1
            rows_needed = math.ceil(len(handles) / ncol)
            bottom = min(0.35, (0.16 * rows_needed + 0.1) / fig_spec.size[1])
            fig.tight_layout(pad=0.4, h_pad=0.6, w_pad=0.6, rect=(0, bottom, 1, 1))
            fig.legend(list(handles.values()), list(handles), loc="lower center", ncol=ncol, frameon=False,
                       fontsize=6, handlelength=2.2, bbox_to_anchor=(0.5, 0.0))
        else:
            fig.tight_layout(pad=0.4, h_pad=0.6, w_pad=0.6)
        return save_figure(fig, stem)


def _natural(text: str) -> list:
    """Sort key that orders the numbers inside a label by value."""
    import re

    return [(0, float(t), "") if re.fullmatch(r"\d+(?:\.\d+)?", t) else (1, 0.0, t) for t in re.split(r"(\d+(?:\.\d+)?)", text.replace(",", ""))]


def _scale(requested: str, values: Sequence[float]) -> str:
    """``requested``, except that a log axis over less than a decade of data is drawn linear (readable ticks)."""
    pos = [v for v in values if v is not None and v > 0]
    if requested == "log" and (not pos or max(pos) / min(pos) < 10):
        return "linear"
    return requested


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


_BAND = "Lines: mean over readout seeds; bands (where a seed axis varies): min–max over seeds."


def _setting(points, skip: Iterable[str] = ()) -> str:
    """The settings all ``points`` share, as caption text: n, c, kernel, noise (minus ``skip``)."""
    def same(ref):
        vals = {repr(point_value(p, ref)) for p in points}
        return point_value(points[0], ref) if len(vals) == 1 else None

    parts = []
    if "n" not in skip and same("summary:n_train") is not None:
        parts.append(f"n = {same('summary:n_train')} training points")
    if "c" not in skip and same("summary:clock_qubits") is not None:
        parts.append(f"c = {same('summary:clock_qubits')} clock qubits")
    if "kernel" not in skip:
        fam, ls, amp = (same(f"config:kernel.{k}") for k in ("family", "lengthscale", "amplitude"))
        if fam is not None and ls is not None and amp is not None:
            sup = same("config:kernel.support")
            parts.append(f"{fam} kernel, lengthscale {_fmt(ls)}, amplitude {_fmt(amp)}" + (f", taper radius {_fmt(sup)}" if sup else ""))
    if "noise" not in skip:
        tc, var = same("config:noise.target_condition"), same("config:noise.variance")
        if tc is not None:
            parts.append(f"σ² set for κ = {_fmt(tc)}")
        elif var is not None:
            parts.append(f"σ² = {_fmt(var)}")
    return "; ".join(parts)


def _distinct(points, ref: str) -> list:
    vals = []
    for p in points:
        v = point_value(p, ref)
        if v is not None and v not in vals:
            vals.append(v)
    return vals


def _with(points, ref: str) -> list:
    return [p for p in points if _finite(point_value(p, ref))]


# -- the seven figures ---------------------------------------------------------------------------


def _fig1(points) -> _Figure:
    pts = _with(points, "summary:mean_rel_rmse")
    if len(_distinct(pts, "summary:clock_qubits")) < 2:
        raise _Skip("needs points at two or more clock-qubit counts (a circuit.clock_qubits axis)")
    consumed = {"circuit.clock_qubits", *_ORACLE_KEYS, *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS]
    series = lambda p: (_oracle(p), _shots(p))  # noqa: E731
    rows: list[_Row] = []
    dropped: list[str] = []
    for q, y in (("mean", "summary:mean_rel_rmse"), ("variance", "summary:variance_rel_rmse")):
        for xkey, x in (("total", "summary:total_qubits"), ("clock", "summary:clock_qubits")):
            rows += _aggregate(pts, panel=f"{q} vs {xkey}", x_name=x, y_name=y, series=series, extras=extras, dropped=dropped)
    panels = [
        _Panel("mean vs total", "total qubits", "mean: relative RMSE", yscale="log", integer_x=True),
        _Panel("mean vs clock", "clock qubits c", "mean: relative RMSE", yscale="log", integer_x=True, legend=False),
        _Panel("variance vs total", "total qubits", "variance: relative RMSE", yscale="log", integer_x=True, legend=False),
        _Panel("variance vs clock", "clock qubits c", "variance: relative RMSE", yscale="log", integer_x=True, legend=False),
    ]
    caption = (
        "Error of the quantum predictive mean and latent variance against the exact GP (relative RMSE over the test "
        "points: RMSE of quantum − exact over the RMS of the exact centred mean, resp. exact variance), against total "
        f"qubits (system + clock + flag + block) and clock qubits, one line per phase oracle. {_BAND}"
    )
    return _Figure("fig1_error_vs_qubits", rows, panels, (2, 2), (SINGLE_COLUMN[0], 3.9), caption, dropped, legend="figure",
                   setting=_setting(pts, {"c"}))


def _model_side(extras: Sequence[str]) -> list[str]:
    """The extras that change A or the GP (not the circuit or read-out): for κ, s and the exact GP."""
    return [k for k in extras if not k.startswith(("circuit.", "readout."))]


def _noise_axis(points) -> str | None:
    varying = _varying_axes(points)
    for k in _NOISE_KEYS:
        if k in varying:
            return k
    return None


def _fig2(points) -> _Figure:
    pts = _with(points, "summary:condition_number")
    if _noise_axis(pts) is None or len(_distinct(pts, "summary:condition_number")) < 2:
        raise _Skip("needs a noise axis (noise.target_condition or noise.variance) giving two or more condition numbers")
    consumed = {*_NOISE_KEYS, *_ORACLE_KEYS, *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS]
    series = lambda p: (_oracle(p), _shots(p))  # noqa: E731
    dropped: list[str] = []
    rows = _aggregate(pts, panel="mean", x_name="summary:condition_number", y_name="summary:mean_rel_rmse",
                      series=series, extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="variance", x_name="summary:condition_number", y_name="summary:variance_rel_rmse",
                       series=series, extras=extras, dropped=dropped)
    panels = [
        _Panel("mean", "condition number κ of A = K + σ²I", "mean: relative RMSE", "log", "log"),
        _Panel("variance", "condition number κ of A = K + σ²I", "variance: relative RMSE", "log", "log", legend=False),
    ]
    caption = (
        "Error of the quantum mean and latent variance (relative RMSE against the exact GP) against the condition "
        f"number κ, set through the noise variance σ². {_BAND}"
    )
    return _Figure("fig2_error_vs_condition", rows, panels, (2, 1), (SINGLE_COLUMN[0], 3.9), caption, dropped, legend="figure",
                   setting=_setting(pts, {"noise"}))


def _references(kappas: Iterable[float], panel: str, power: int) -> list[_Row]:
    name = "1/κ² bound (HHL 2009)" if power == 2 else "1/κ bound"
    return [
        _one(panel, (("quantity", name),), "summary:condition_number", k, f"reference:1/kappa^{power}", 1.0 / k**power, "reference")
        for k in sorted(set(kappas))
    ]


def loglog_slope(x: Sequence[float], y: Sequence[float]) -> float | None:
    """Least-squares slope of log y against log x over the positive pairs (None with fewer than 2)."""
    pairs = [(a, b) for a, b in zip(x, y) if a is not None and b is not None and a > 0 and b > 0]
    if len({a for a, _ in pairs}) < 2:
        return None
    lx, ly = np.log([a for a, _ in pairs]), np.log([b for _, b in pairs])
    return float(np.polyfit(lx, ly, 1)[0])


def _slopes_text(rows: Sequence[_Row]) -> str:
    """'−0.75 (inversion, exact …), …' for every plotted series of measured points."""
    groups: dict[tuple, list[_Row]] = {}
    for r in rows:
        if r.source != "reference":
            groups.setdefault((r.panel, r.series), []).append(r)
    parts = []
    for (panel, series), rs in groups.items():
        slope = loglog_slope([r.x for r in rs], [r.y for r in rs])
        if slope is not None:
            label = ", ".join(text for _, text in series)
            parts.append(f"{slope:.2f} ({panel}, {label})")
    return "; ".join(parts) if parts else "not available (one κ per series)"


def _fig3(points) -> _Figure:
    pts = _with(points, "summary:condition_number")
    if _noise_axis(pts) is None or len(_distinct(pts, "summary:condition_number")) < 2:
        raise _Skip("needs a noise axis (noise.target_condition or noise.variance) giving two or more condition numbers")
    consumed = {*_NOISE_KEYS, *_ORACLE_KEYS, *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS]
    series = lambda p: (_oracle(p),)  # noqa: E731
    dropped: list[str] = []
    x = "summary:condition_number"
    rows = _aggregate(pts, panel="inversion", x_name=x, y_name="summary:success_probability_inversion",
                      series=series, extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="variance", x_name=x, y_name="summary:success_probability_variance_min",
                       series=series, extras=extras, dropped=dropped)
    kappas = [r.x for r in rows]
    measured = list(rows)
    rows += _references(kappas, "inversion", 2) + _references(kappas, "variance", 1)
    panels = [
        _Panel("inversion", "condition number κ", "P(success), 1/λ circuit", "log", "log"),
        _Panel("variance", "condition number κ", "P(flag = 1), 1/√λ circuit", "log", "log"),
    ]
    caption = (
        "Post-selection success probability against κ: (a) the 1/λ inversion circuit on the normalised targets ŷ, "
        "P = ‖C·Ã⁻¹ŷ‖² with C the smallest admitted eigenvalue estimate, beside 1/κ² (Harrow, Hassidim & Lloyd 2009); "
        "(b) the 1/√λ variance circuit, P(flag = 1) = C·k̂*ᵀÃ⁻¹k̂*, smallest over the test points, beside 1/κ. "
        "1/κ² and 1/κ are worst-case bounds (ŷ or k̂* wholly on the largest eigenvalue; C is near the a-priori lower "
        "bound on λ_min, so they are not strict), not the expected rate: GP vectors also weigh the small eigenvalues, "
        f"and the fitted log–log slopes of the plotted points are {_slopes_text(measured)}. "
        "Where λ_min falls below what the clock resolves, C is set by the clock grid instead (qgp.circuits.inversion's filter floor) "
        "and P levels off; the error pays instead (fig. 2). Exact outcome probabilities."
    )
    return _Figure("fig3_success_probability", rows, panels, (2, 1), (SINGLE_COLUMN[0], 3.9), caption, dropped,
                   setting=_setting(pts, {"noise"}))


def _fig4(points) -> _Figure:
    pts = _with(points, "summary:noise_variance")
    if _noise_axis(pts) is None or len(_distinct(pts, "summary:noise_variance")) < 2:
        raise _Skip("needs a noise axis (noise.variance or noise.target_condition) giving two or more σ²")
    if not any(_finite(point_value(p, "summary:test_rmse.exact")) for p in pts):
        raise _Skip("needs test targets ([data] test with the target column) for test RMSE and NLPD")
    consumed = {*_NOISE_KEYS, *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS and k not in _ORACLE_KEYS]
    x = "summary:noise_variance"
    dropped: list[str] = []
    rows: list[_Row] = []

    def q(name, with_oracle=True):
        return lambda p: (("quantity", name),) + ((_oracle(p), _shots(p)) if with_oracle else ())

    gp_extras = _model_side(extras)
    rows += _aggregate(pts, panel="kappa", x_name=x, y_name="summary:condition_number", series=q("κ", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="quantum error", x_name=x, y_name="summary:mean_rel_rmse", series=q("mean"), extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="quantum error", x_name=x, y_name="summary:variance_rel_rmse", series=q("variance"), extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="rmse", x_name=x, y_name="summary:test_rmse.exact", series=q("exact GP", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="rmse", x_name=x, y_name="summary:test_rmse.quantum", series=q("quantum"), extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="nlpd", x_name=x, y_name="summary:test_nlpd.exact", series=q("exact GP", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="nlpd", x_name=x, y_name="summary:test_nlpd.quantum", series=q("quantum"), extras=extras, dropped=dropped)
    kept = _dedupe_rows(rows)
    sigma = "noise variance σ²"
    panels = [
        _Panel("kappa", sigma, "condition number κ", "log", "log"),
        _Panel("quantum error", sigma, "quantum vs exact:\nrelative RMSE", "log", "log"),
        _Panel("rmse", sigma, "test RMSE", "log", "linear"),
        _Panel("nlpd", sigma, "test NLPD", "log", "linear"),
    ]
    caption = (
        "The conditioning–accuracy trade-off: against the noise variance σ² of A = K + σ²I, (a) κ, (b) the circuits' "
        "error against the exact GP (relative RMSE of mean and latent variance), (c) test RMSE and (d) test negative "
        "log predictive density (NLPD, predictive variance = latent + σ²) of the exact GP and of the quantum estimates, "
        "on the held-out test targets. Raising σ² lowers κ (helps the circuit) and moves the GP away from its best fit "
        f"(hurts the model). {_BAND}"
    )
    return _Figure("fig4_noise_tradeoff", kept, panels, (4, 1), (SINGLE_COLUMN[0], 6.2), caption, dropped, legend="figure",
                   setting=_setting(pts, {"noise"}))


def _fig5(points) -> _Figure:
    if "kernel.support" not in _varying_axes(points):
        raise _Skip("needs a kernel.support axis (taper radii; {} leaves the kernel untapered)")
    pts = _with(points, "summary:sparsity")
    consumed = {"kernel.support", *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS and k not in _ORACLE_KEYS]
    x = "config:kernel.support"
    dropped: list[str] = []

    def q(name, with_oracle=True):
        return lambda p: (("quantity", name),) + ((_oracle(p), _shots(p)) if with_oracle else ())

    rows: list[_Row] = []
    gp_extras = _model_side(extras)
    rows += _aggregate(pts, panel="sparsity", x_name=x, y_name="summary:sparsity", series=q("s", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="kappa", x_name=x, y_name="summary:condition_number", series=q("κ", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="rmse", x_name=x, y_name="summary:test_rmse.exact", series=q("exact GP", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="rmse", x_name=x, y_name="summary:test_rmse.quantum", series=q("quantum"), extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="nlpd", x_name=x, y_name="summary:test_nlpd.exact", series=q("exact GP", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="nlpd", x_name=x, y_name="summary:test_nlpd.quantum", series=q("quantum"), extras=extras, dropped=dropped)
    rows = _dedupe_rows(rows)
    if not any(r.x is not None for r in rows):
        raise _Skip("needs at least one tapered point (a kernel.support value)")
    ns = sorted({int(point_value(p, "summary:n_train")) for p in pts})
    xs = sorted({r.x for r in rows if r.x is not None})
    for n in ns:
        rows += [_one("sparsity", (("quantity", f"n = {n} (dense)"),), x, r, f"reference:n_train = {n}", n, "reference") for r in xs]
    panels = [
        _Panel("sparsity", "taper radius (kernel.support)", "sparsity s", "log2", "linear", integer_y=True),
        _Panel("kappa", "taper radius (kernel.support)", "condition number κ", "log2", "log"),
        _Panel("rmse", "taper radius (kernel.support)", "test RMSE", "log2", "linear"),
        _Panel("nlpd", "taper radius (kernel.support)", "test NLPD", "log2", "linear"),
    ]
    caption = (
        "The sparsity lever: the kernel multiplied by the compactly supported Wendland taper φ₃,₁(r/radius) "
        "(Furrer, Genton & Nychka 2006). (a) sparsity s of A (largest count of non-zeros in a row; dotted: n, the dense "
        "value), (b) κ, (c) test RMSE and (d) test NLPD of the exact GP and of the quantum estimates, against the taper "
        f"radius; dotted horizontal lines: the untapered kernel. {_BAND}"
    )
    return _Figure("fig5_taper_sparsity", rows, panels, (4, 1), (SINGLE_COLUMN[0], 6.2), caption, dropped, legend="figure",
                   setting=_setting(pts))


def _dedupe_rows(rows: list[_Row]) -> list[_Row]:
    """Keep the first row per (panel, series, x, y_name).

    Oracle-independent quantities (κ, s, the exact GP) carry no oracle part, so a sweep over
    oracles repeats them once per oracle with the same value; one line is drawn, from the first.
    """
    seen: set = set()
    out = []
    for r in rows:
        key = (r.panel, r.series, r.x, r.y_name)
        if key not in seen:
            seen.add(key)
            out.append(r)
    return out


_CX = "summary:resources.inverse.gate_counts.u_cx.cx"
_DEPTH = "summary:resources.inverse.gate_counts.u_cx.depth"


def _most_common_slice(points, fixed: str, varied: str):
    """The value of ``fixed`` at which ``varied`` takes the most distinct values.

    Ties go to the value with the most points (so the most oracles share the slice), then the largest.
    """
    counts: dict[Any, set] = {}
    sizes: dict[Any, int] = {}
    for p in points:
        v = point_value(p, fixed)
        counts.setdefault(v, set()).add(point_value(p, varied))
        sizes[v] = sizes.get(v, 0) + 1
    return max(counts, key=lambda v: (len(counts[v]), sizes[v], v))


def _fig6(points) -> _Figure:
    pts = [p for p in _with(points, _CX) if _finite(point_value(p, _DEPTH))]
    skipped = [p for p in points if point_value(p, "summary:resources.inverse.gate_level_skipped")]
    notes = [f"gate counts skipped at {len(skipped)} point(s) (over the synthesis limit)"] if skipped else []
    if not pts:
        raise _Skip("needs gate counts (summary resources.inverse.gate_counts) at some points")
    m_values = _distinct(pts, "summary:system_qubits")
    c_values = _distinct(pts, "summary:clock_qubits")
    if len(m_values) < 2 and len(c_values) < 2:
        raise _Skip("needs two or more system sizes (data.n_train axis) or clock-qubit counts (circuit.clock_qubits axis)")
    consumed = {"data.n_train", "circuit.clock_qubits", *_ORACLE_KEYS, *_SHOT_KEYS, *_NOISE_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS]

    def series(p):
        oracle = _oracle(p)
        dependent = bool(point_value(p, "summary:resources.inverse.synthesis_dependent"))
        return ((oracle[0], oracle[1] + (" †" if dependent else "")),)

    rows: list[_Row] = []
    panels: list[_Panel] = []
    dropped: list[str] = []
    if len(m_values) >= 2:
        c_ref = _most_common_slice(pts, "summary:clock_qubits", "summary:system_qubits")
        sl = [p for p in pts if point_value(p, "summary:clock_qubits") == c_ref]
        for key, y, lab in (("cx vs m", _CX, "CX count"), ("depth vs m", _DEPTH, "depth")):
            rows += _aggregate(sl, panel=key, x_name="summary:system_qubits", y_name=y, series=series, extras=extras, dropped=dropped)
            panels.append(_Panel(key, f"system qubits m (c = {c_ref})", lab, "linear", "log", integer_x=True, legend=key == "cx vs m"))
    if len(c_values) >= 2:
        m_ref = _most_common_slice(pts, "summary:system_qubits", "summary:clock_qubits")
        sl = [p for p in pts if point_value(p, "summary:system_qubits") == m_ref]
        for key, y, lab in (("cx vs c", _CX, "CX count"), ("depth vs c", _DEPTH, "depth")):
            rows += _aggregate(sl, panel=key, x_name="summary:clock_qubits", y_name=y, series=series, extras=extras, dropped=dropped)
            panels.append(_Panel(key, f"clock qubits c (m = {m_ref})", lab, "linear", "log", integer_x=True, legend=key == "cx vs c" and len(m_values) < 2))
    order = ["cx vs m", "cx vs c", "depth vs m", "depth vs c"]
    panels.sort(key=lambda p: order.index(p.key))
    grid = (2, 2) if len(panels) == 4 else (2, 1)
    caption = (
        "Circuit cost of the 1/λ inversion circuit (phase estimation, rotation, uncompute; the mean's circuit): "
        "CX count and depth after transpiling to the ['u', 'cx'] basis at optimisation level 0 (qgp.circuits.resources), against "
        "system qubits and clock qubits, per phase oracle and block encoding. † marks synthesis-dependent counts "
        "(dense controlled unitaries: the exact e^(iAt) oracle and the dilation encoding), which say how qiskit "
        "decomposes a generic matrix, not what an algorithm needs."
    )
    return _Figure("fig6_circuit_cost", rows, panels, grid, (SINGLE_COLUMN[0], 3.9), caption, notes + dropped, legend="figure",
                   setting=_setting(pts, {"n", "c", "noise", "kernel"}))


# -- fig. 7: scaling with n, simulated and modelled ----------------------------------------------


def config_from_document(doc: Mapping[str, Any]):
    """The `qgp.settings.Config` of a stored config document (qgp.reports.run.config_document)."""
    from qgp.settings import CircuitSettings, Config, DataSpec, KernelSpec, NoiseSpec, ReadoutSettings

    d, k, nz, c, r = (dict(doc.get(s) or {}) for s in ("data", "kernel", "noise", "circuit", "readout"))
    d["train"] = Path(d["train"])
    if d.get("test") is not None:
        d["test"] = Path(d["test"])
    if isinstance(k.get("lengthscale"), list):
        k["lengthscale"] = tuple(k["lengthscale"])
    return Config(
        data=DataSpec(**d),
        kernel=KernelSpec(**k),
        noise=NoiseSpec(**nz),
        circuit=CircuitSettings(**c),
        readout=ReadoutSettings(**r),
    )


def _model_inversion(lam_bounds, alpha, settings, rotation: str):
    """The constants of `qgp.circuits.inversion.build_inversion` without building a circuit (any n).

    Same rules: clock grid α·cos(2πk/2^c) (walk) or 2πk/(t·2^c) (exact, t derived from λ_hi),
    floor max(λ_lo − one bin, λ_lo/2), admitted = positive and ≥ floor, C = smallest admitted λ̃.
    tests/test_sweep_figures.py checks it against build_inversion.
    """
    from qgp.circuits.inversion import filter_floor
    from qgp.circuits.phase_estimation import derived_evolution_time, evolution_clock_eigenvalues, walk_clock_eigenvalues

    lo, hi = lam_bounds
    c = settings.clock_qubits
    if settings.evolution == "walk":
        t = None
        lam = walk_clock_eigenvalues(c, alpha)
    else:
        t = settings.evolution_time if settings.evolution_time is not None else derived_evolution_time(hi, c)
        lam = evolution_clock_eigenvalues(c, t)
        alpha = None
    oracle = SimpleNamespace(clock_qubits=c, kind=settings.evolution, alpha=alpha, evolution_time=t)
    floor = filter_floor(oracle, lo, settings.filter_floor)
    positive = lam > 1e-12 * float(np.max(np.abs(lam)))
    admitted = positive & (lam >= floor)
    if not np.any(admitted):
        return None
    return SimpleNamespace(
        alpha=alpha,
        evolution_time=t,
        settings=settings,
        clock_eigenvalues=lam,
        admitted=admitted,
        scale=float(np.min(lam[admitted])),
        rotation=rotation,
        floor=floor,
    )


def _response(inv, lam: np.ndarray, chunk_entries: int = 1 << 21) -> np.ndarray:
    """`qgp.readout.filter_model.filter_response` in chunks of eigenvalues (the weights are n × 2^c)."""
    from qgp.readout.filter_model import filter_response

    step = max(1, chunk_entries >> inv.settings.clock_qubits)
    return np.concatenate([filter_response(inv, lam[i : i + step]) for i in range(0, lam.size, step)])


def _walk_alpha(A: np.ndarray, encoding: str, lam_max: float) -> float:
    """α of the block encoding qgp.circuits.encoding builds: row-sum bound (dilation) or Σ|Pauli coefficients| (LCU)."""
    if encoding == "lcu":
        from qgp.circuits.encoding import pauli_decomposition

        return float(np.sum(np.abs(pauli_decomposition(A).coeffs)))
    return max(float(np.max(np.sum(np.abs(A), axis=1))), lam_max)


class _FilterModel:
    """A problem's padded A eigendecomposed once, and the ideal circuits' answers for any clock size.

    With A = V diag(λ) Vᵀ (padded), f the inverse and h the inverse_sqrt response of
    qgp.readout.filter_model, C and C′ their scales, m the prior mean and ŷ, k̂* the unit inputs:

        μ − m = k*ᵀ V diag(f/C) Vᵀ y,     v = k** − k*ᵀ V diag(h/C′) Vᵀ k*,
        P_inv = Σᵢ f(λᵢ)² (vᵢᵀŷ)²,        P_var = minₜ Σᵢ h(λᵢ) (vᵢᵀk̂*ₜ)²,

    which is what `qgp.readout.inference.infer` estimates from the circuits with exact probabilities.
    """

    def __init__(self, problem, circuit):
        from qgp.classical.system import eigenvalue_bounds

        self.problem = problem
        self.oracle = circuit.evolution if circuit.evolution in ("exact", "walk") else "exact"
        self.circuit = replace(circuit, evolution=self.oracle)
        A = problem.A_padded
        self.lam, V = np.linalg.eigh(A)
        self.bounds = eigenvalue_bounds(A, problem.noise_variance)
        self.alpha = _walk_alpha(A, circuit.encoding, float(self.lam[-1])) if self.oracle == "walk" else None
        y = problem.padded(problem.y_centered)
        ks = problem.padded(problem.k_star)
        self.ks, self.V = ks, V
        self.vy = V.T @ y
        self.vk = V.T @ ks
        self.k_norm2 = np.sum(ks**2, axis=0)
        y_norm = float(np.linalg.norm(y))
        self.y_hat = self.vy / y_norm if y_norm > 0 else self.vy
        exact = problem.exact.predict(problem.X_test)
        self.mean_ref = exact.mean - problem.y_offset
        self.var_ref = exact.variance_latent

    def mean(self, clock_qubits: int) -> tuple[float, float] | None:
        """(relative RMSE of the mean, P_inv) at c clock qubits; None if every clock value is filtered."""
        inv = _model_inversion(self.bounds, self.alpha, replace(self.circuit, clock_qubits=clock_qubits), "inverse")
        if inv is None:
            return None
        f = _response(inv, self.lam)
        err = self.ks.T @ (self.V @ (f / inv.scale * self.vy)) - self.mean_ref
        return _rel_rmse(err, self.mean_ref), float(np.sum(f**2 * self.y_hat**2))

    def variance(self, clock_qubits: int) -> tuple[float, float] | None:
        """(relative RMSE of the latent variance, smallest P_var over test points) at c clock qubits."""
        inv = _model_inversion(self.bounds, self.alpha, replace(self.circuit, clock_qubits=clock_qubits), "inverse_sqrt")
        if inv is None:
            return None
        h = _response(inv, self.lam)
        quad = np.einsum("it,i,it->t", self.vk, h, self.vk)
        err = self.problem.k_star_star - quad / inv.scale - self.var_ref
        ok = self.k_norm2 > 0
        return _rel_rmse(err, self.var_ref), float(np.min(quad[ok] / self.k_norm2[ok]))


def model_errors(problem, circuit) -> dict[str, float | None]:
    """What the closed-form filter model predicts for ``problem`` and ``circuit`` with exact probabilities.

    Keys as in summary.json: mean_rel_rmse, variance_rel_rmse, success_probability_inversion,
    success_probability_variance_min. Exact for the exact and walk oracles (qgp.readout.filter_model);
    a Trotter oracle is modelled as exact.
    """
    m = _FilterModel(problem, circuit)
    mean, var = m.mean(circuit.clock_qubits), m.variance(circuit.clock_qubits)
    return {
        "mean_rel_rmse": None if mean is None else mean[0],
        "variance_rel_rmse": None if var is None else var[0],
        "success_probability_inversion": None if mean is None else mean[1],
        "success_probability_variance_min": None if var is None else var[1],
    }


def scaling_model(cfg, n_values: Iterable[int], *, max_clock: int = MODEL_MAX_CLOCK,
                  mean_target: float = MEAN_TARGET, variance_target: float = VARIANCE_TARGET) -> list[dict[str, Any]]:
    """Closed-form scaling of the ideal circuits with the training-set size n (fig. 7).

    For each n (a nested subsample, `[data] n_train`, at ``cfg``'s fixed hyperparameters): A's
    diagnostics (κ, sparsity s, ‖A‖_F/‖A‖) and, from the filter model (`model_errors`), the
    smallest c in [2, ``max_clock``] at which the mean (resp. latent variance) has relative RMSE
    ≤ the target, with the success probability at that c (None where not reached).
    """
    from qgp.classical.problem import problem_from_config

    out = []
    for n in n_values:
        problem = problem_from_config(replace(cfg, data=replace(cfg.data, n_train=int(n))))
        d = problem.diagnostics
        model = _FilterModel(problem, cfg.circuit)
        rec: dict[str, Any] = {
            "n": int(n),
            "condition_number": d.condition_number,
            "sparsity": d.sparsity,
            "frobenius_ratio": d.frobenius_norm / d.spectral_norm,
            "noise_variance": problem.noise_variance,
            "oracle": model.oracle,
            "clock_for_mean": None,
            "clock_for_variance": None,
            "success_inversion": None,
            "success_variance": None,
        }
        for c in range(2, max_clock + 1):
            if rec["clock_for_mean"] is None:
                got = model.mean(c)
                if got is not None and got[0] <= mean_target:
                    rec["clock_for_mean"], rec["success_inversion"] = c, got[1]
            if rec["clock_for_variance"] is None:
                got = model.variance(c)
                if got is not None and got[0] <= variance_target:
                    rec["clock_for_variance"], rec["success_variance"] = c, got[1]
            if rec["clock_for_mean"] is not None and rec["clock_for_variance"] is not None:
                break
        out.append(rec)
    return out


def _rel_rmse(err: np.ndarray, ref: np.ndarray) -> float:
    """As qgp.readout.inference: RMSE of the error over the RMS of the reference."""
    scale = math.sqrt(float(np.mean(ref**2)))
    return math.sqrt(float(np.mean(err**2))) / scale if scale > 0 else math.inf


def _fig7(points) -> _Figure:
    if "data.n_train" not in _varying_axes(points):
        raise _Skip("needs a data.n_train axis (training-set sizes) at fixed hyperparameters")
    pts = _with(points, "summary:mean_rel_rmse")
    fixed_noise = [p for p in pts if point_value(p, "config:noise.variance") is not None and not point_value(p, "config:kernel.fit")]
    if len(_distinct(fixed_noise, "summary:n_train")) < 2:
        raise _Skip("needs a fixed noise.variance (target_condition or a fit would hide how κ grows with n)")
    pts = fixed_noise
    notes: list[str] = []
    consumed = {"data.n_train", "circuit.clock_qubits", *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS and k not in _ORACLE_KEYS]
    if extras:
        raise _Skip(f"needs n and clock qubits as the only varying axes besides the oracle and seeds; {', '.join(extras)} vary too")
    rows: list[_Row] = []
    n_sim = sorted({int(point_value(p, "summary:n_train")) for p in pts})

    # (b, c) measured: the smallest simulated c meeting each target, and the success probability there.
    by_oracle: dict[tuple, list] = {}
    for p in pts:
        by_oracle.setdefault((_oracle(p), _shots(p)), []).append(p)
    c_max_sim = max(int(point_value(p, "summary:clock_qubits")) for p in pts)
    unreached: dict[str, list[int]] = {}
    for series, group in by_oracle.items():
        for n in n_sim:
            at_n = [p for p in group if point_value(p, "summary:n_train") == n]
            if not at_n:
                continue
            for tgt, y_name, prob, pname, target in (
                (_MEAN_LABEL, "summary:mean_rel_rmse", "summary:success_probability_inversion", "inversion (1/λ) circuit", MEAN_TARGET),
                (_VARIANCE_LABEL, "summary:variance_rel_rmse", "summary:success_probability_variance_min", "variance (1/√λ) circuit", VARIANCE_TARGET),
            ):
                by_c: dict[int, list] = {}
                for p in at_n:
                    by_c.setdefault(int(point_value(p, "summary:clock_qubits")), []).append(p)
                # Over seeds the worst seed must meet the target.
                ok = sorted(c for c, ps in by_c.items() if max(point_value(p, y_name) for p in ps) <= target)
                if not ok:
                    unreached.setdefault(f"{series[0][1]}: {tgt} not reached with c ≤ {max(by_c)} simulated", []).append(n)
                    continue
                c = ok[0]
                rows.append(_one("clock", (("quantity", tgt),) + series, "summary:n_train", n,
                                 f"derived:min summary:clock_qubits with {y_name} <= {target!r} (all seeds)", c, "derived",
                                 [p.grid_index for ps in by_c.values() for p in ps]))
                vals = [float(point_value(p, prob)) for p in by_c[c]]
                mean, std, lo, hi = _stats(vals)
                rows.append(_Row("success", (("quantity", pname),) + series, "summary:n_train", n, prob, mean, std, lo, hi,
                                 len(vals), "store", tuple(p.grid_index for p in by_c[c])))

    # (a) and the model: A's diagnostics and the filter model for every n up to the data set's size.
    from qgp.config import load_dataset

    base = pts[0]
    try:
        cfg = config_from_document(base.config)
        n_rows = load_dataset(replace(cfg.data, n_train=None)).X_train.shape[0]
    except (QgpError, OSError, KeyError, TypeError) as exc:
        raise _Skip(f"cannot reload the data the store names to compute the model ({exc})") from None
    n_model = sorted(set(n_sim) | {2**k for k in range(1, 30) if n_sim[0] <= 2**k <= min(n_rows, MODEL_MAX_N)})
    model = scaling_model(cfg, n_model)
    for rec in model:
        n = rec["n"]
        same = [p.grid_index for p in pts if point_value(p, "summary:n_train") == n]
        for qty, key, name in (("κ", "condition_number", "classical:condition_number"),
                               ("sparsity s", "sparsity", "classical:sparsity"),
                               ("‖A‖_F / ‖A‖", "frobenius_ratio", "classical:frobenius_norm/spectral_norm")):
            rows.append(_one("diagnostics", (("quantity", qty),), "summary:n_train", n, name, rec[key], "classical", same if key != "frobenius_ratio" else ()))
        model_series = (("oracle", f"{'walk + ' + ('LCU' if cfg.circuit.encoding == 'lcu' else cfg.circuit.encoding) if rec['oracle'] == 'walk' else 'exact e^(iAt)'}"),)
        for tgt, ckey, pname, pkey in ((_MEAN_LABEL, "clock_for_mean", "inversion (1/λ) circuit", "success_inversion"),
                                       (_VARIANCE_LABEL, "clock_for_variance", "variance (1/√λ) circuit", "success_variance")):
            if rec[ckey] is None:
                unreached.setdefault(f"model: {tgt} not reached with c ≤ {MODEL_MAX_CLOCK}", []).append(n)
                continue
            rows.append(_one("clock", (("quantity", tgt),) + model_series + (("shots", "exact probabilities"),), "summary:n_train", n,
                             f"model:min clock_qubits with {ckey.split('_')[-1]} rel. RMSE <= {MEAN_TARGET if ckey == 'clock_for_mean' else VARIANCE_TARGET!r}", rec[ckey], "model"))
            rows.append(_one("success", (("quantity", pname),) + model_series + (("shots", "exact probabilities"),), "summary:n_train", n,
                             f"model:{pkey} at that clock", rec[pkey], "model"))
    notes += [f"{what} at n = {', '.join(str(n) for n in ns)}" for what, ns in unreached.items()]
    kappas = {rec["n"]: rec["condition_number"] for rec in model}
    rows += [_one("success", (("quantity", "1/κ²"),), "summary:n_train", n, "reference:1/kappa^2 (kappa of this n)", 1 / kappas[n] ** 2, "reference") for n in n_model]
    rows += [_one("success", (("quantity", "1/κ"),), "summary:n_train", n, "reference:1/kappa (kappa of this n)", 1 / kappas[n], "reference") for n in n_model]
    edge = max(n_sim)
    panels = [
        _Panel("diagnostics", "training-set size n", r"κ, s, $\|A\|_F/\|A\|$", "log2", "log", vline=edge, vline_text="largest simulated n"),
        _Panel("clock", "training-set size n", "clock qubits c needed", "log2", "linear", integer_y=True, vline=edge,
               vline_text="simulated | model"),
        _Panel("success", "training-set size n", "P(success) at that c", "log2", "log", vline=edge),
    ]
    caption = (
        "The scaling caveat at fixed hyperparameters: (a) κ, sparsity s and ‖A‖_F/‖A‖ of A = K + σ²I against the training-set "
        "size n (nested subsamples of the same data); (b) the smallest clock register c at which the mean, resp. latent "
        "variance, is within 1% relative RMSE of the exact GP; (c) the success probabilities at that c (1/λ circuit: "
        "the inversion on ŷ; 1/√λ circuit: smallest P(flag = 1) over test points), beside 1/κ² and 1/κ. Markers: simulated "
        f"runs (c ≤ {c_max_sim}); dashed: the closed-form filter model (qgp.readout.filter_model; exact for the exact and walk "
        "oracles, ideal probabilities), marked (model), which reaches beyond what can be simulated. Kernel matrices' κ "
        "and sparsity tend to grow with n (Lowe, Kim & Bondesan, arXiv:2505.22502, 2025, as reported in its abstract)."
    )
    return _Figure("fig7_scaling", rows, panels, (3, 1), (SINGLE_COLUMN[0], 5.0), caption, notes,
                   setting=_setting(pts, {"n", "c"}))


#: Figure name → builder, in the order they are drawn.
FIGURES: dict[str, Callable[[list], _Figure]] = {
    "fig1_error_vs_qubits": _fig1,
    "fig2_error_vs_condition": _fig2,
    "fig3_success_probability": _fig3,
    "fig4_noise_tradeoff": _fig4,
    "fig5_taper_sparsity": _fig5,
    "fig6_circuit_cost": _fig6,
    "fig7_scaling": _fig7,
}


# -- entry points --------------------------------------------------------------------------------


def _select(only: Sequence[str] | None) -> list[str]:
    if not only:
        return list(FIGURES)
    out = []
    for want in only:
        hits = [n for n in FIGURES if n == want or n.split("_", 1)[0] == want]
        if not hits:
            raise QgpError(f"unknown figure {want!r}; choose from {', '.join(FIGURES)} (or fig1 … fig7)")
        out += [h for h in hits if h not in out]
    return out


def draw_figures(source, out_dir: str | Path, *, only: Sequence[str] | None = None) -> list[FigureOutcome]:
    """Draw every figure the data supports into ``out_dir``; the others come back skipped with a note.

    ``source``: a result store path or a sequence of StoredPoint-likes. ``only``: figure names or
    "fig1" … "fig7".
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
