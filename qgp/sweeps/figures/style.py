"""The figures' description and drawing: panels, one figure's spec, series styles, axes, legends.

The publication style (fonts, palette, PDF + 300-dpi PNG) is qgp.reports.figures's; this module
adds what the sweep figures share: colour and marker per series, log2 axes for doubling settings,
reference lines and bands, a legend per panel or under the figure.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from qgp.reports.figures import PALETTE, SINGLE_COLUMN, figure_style, save_figure
from qgp.sweeps.figures.data import _Row

__all__ = ["SINGLE_COLUMN"]

# Colour-blind-safe colours in the order series get them (Okabe–Ito; yellow left out: too pale on white).
_COLOURS = (PALETTE[0], PALETTE[1], PALETTE[2], PALETTE[3], PALETTE[4], PALETTE[5], PALETTE[7])
_MARKERS = ("o", "s", "^", "D", "v", "P", "X")
_LINESTYLES = ("-", "--", "-.", ":")
_REFERENCE_COLOUR = "#555555"
#: Labels drawn with mathtext (the CSV keeps the plain text).
_DISPLAY = {"‖A‖_F / ‖A‖": r"$\|A\|_F\,/\,\|A\|$"}


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
