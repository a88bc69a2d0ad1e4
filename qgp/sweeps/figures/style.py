"""The figures' description and drawing: panels, one figure's spec, series styles, axes, legends.

The publication style (fonts, palette, PDF + 300-dpi PNG) is qgp.reports.figures's; this module
adds what the sweep figures share: colour and marker per series, a sequential colour ramp for an
ordered setting (κ), log2 axes for doubling settings, reference lines and bands, Pareto views,
a legend per panel or under the figure, and a footnote that defines the figure's symbols.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from qgp.reports.figures import PALETTE, SINGLE_COLUMN, figure_style, math_label, save_figure
from qgp.sweeps.figures.data import _Row

__all__ = ["SINGLE_COLUMN", "DOUBLE_COLUMN", "RAMP_CMAP", "RAMP_RANGE", "pareto_front"]

#: Width (inches) of a two-column figure; SINGLE_COLUMN[0] (3.4 in) is the one-column width.
DOUBLE_COLUMN = 7.0
#: The sequential, colour-blind-safe colormap of an ordered setting (κ), and the part of it used
#: (its pale yellow end is left out: too faint on white).
RAMP_CMAP = "viridis"
RAMP_RANGE = (0.0, 0.82)

# Colour-blind-safe colours in the order series get them (Okabe–Ito; yellow left out: too pale on white).
_COLOURS = (PALETTE[0], PALETTE[1], PALETTE[2], PALETTE[3], PALETTE[4], PALETTE[5], PALETTE[7])
_MARKERS = ("o", "s", "^", "D", "v", "P", "X")
_LINESTYLES = ("-", "--", "-.", ":")
_REFERENCE_COLOUR = "#555555"
_NEUTRAL = "#333333"
#: Labels drawn with mathtext (the CSV keeps the plain text).
_DISPLAY = {"‖A‖_F / ‖A‖": r"$\|A\|_F\,/\,\|A\|$"}
def pareto_front(points: Sequence[tuple[float, float]]) -> list[int]:
    """Indices (ascending) of the points that no other point dominates, both coordinates minimised.

    (x′, y′) dominates (x, y) when x′ ≤ x and y′ ≤ y with at least one strict; equal points do not
    dominate each other (both stay). One sort and one sweep: O(n log n).
    """
    order = sorted(range(len(points)), key=lambda i: (points[i][0], points[i][1]))
    front: list[int] = []
    best_before = math.inf  # smallest y among points with a strictly smaller x
    k = 0
    while k < len(order):
        x = points[order[k]][0]
        group = []
        while k < len(order) and points[order[k]][0] == x:
            group.append(order[k])
            k += 1
        y_min = min(points[i][1] for i in group)
        front += [i for i in group if points[i][1] == y_min and y_min < best_before]
        best_before = min(best_before, y_min)
    return sorted(front)


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
    #: False: the rows stay in the CSV (nothing lost) but get no axes.
    drawn: bool = True
    #: A Pareto view: one point per row, each series' non-dominated points (both axes minimised,
    #: `pareto_front`) filled and joined, the dominated ones hollow.
    pareto: bool = False
    #: The key of a (usually undrawn) panel whose rows with the same grid points give each point's
    #: annotation: their x, written with ``annotate_format``.
    annotate: str | None = None
    annotate_format: str = "{:g}"
    #: Text after the panel letter.
    title: str = ""


@dataclass(frozen=True)
class _Ramp:
    """An ordered series part (e.g. κ) coloured along a sequential colormap instead of by palette."""

    part: str
    #: Legend title (mathtext).
    title: str
    #: The part's text → its value (the colour's position; log-spaced when all values are positive).
    values: Mapping[str, float]

    def position(self, text: str) -> float:
        """Where ``text``'s value sits on the colormap, in `RAMP_RANGE` (increasing with the value)."""
        vals = list(self.values.values())
        lo, hi = min(vals), max(vals)
        f = math.log if lo > 0 else (lambda v: v)
        span = f(hi) - f(lo)
        t = 0.5 if span == 0 else (f(self.values[text]) - f(lo)) / span
        return RAMP_RANGE[0] + t * (RAMP_RANGE[1] - RAMP_RANGE[0])

    def colour(self, text: str) -> tuple[float, float, float, float]:
        import matplotlib

        return tuple(matplotlib.colormaps[RAMP_CMAP](self.position(text)))


@dataclass
class _Figure:
    name: str
    rows: list[_Row]
    panels: list[_Panel]
    grid: tuple[int, int]
    size: tuple[float, float]
    caption: str
    notes: list[str] = field(default_factory=list)
    #: "panel": a legend in each panel that asks for one; "figure": one legend under all panels,
    #: in space reserved inside ``size``; "below": legends (and the footnote) placed under the
    #: panels, which fill ``size`` (the saved figure grows downwards, never wider).
    legend: str = "panel"
    #: The settings every point of the figure shares (for the caption).
    setting: str = ""
    #: Colour one series part along a sequential ramp (its legend block is titled ``ramp.title``).
    ramp: _Ramp | None = None
    #: Text drawn under the legend (mathtext allowed): defines the figure's symbols.
    footnote: str = ""
    #: Series-part text → a note appended to its legend label (e.g. the qubits beyond the clock).
    label_notes: Mapping[str, str] = field(default_factory=dict)


class _Styles:
    """Colour from a series' first varying part, marker and line style from the rest (per figure).

    With a ramp, the ramp part gives the colour and the other varying parts (the method) the
    marker and line style.
    """

    def __init__(self, rows: Sequence[_Row], ramp: _Ramp | None = None):
        texts: dict[str, list[str]] = {}
        for r in rows:
            for name, text in r.series:
                texts.setdefault(name, [])
                if text not in texts[name]:
                    texts[name].append(text)
        self.varying = [n for n, t in texts.items() if len(t) > 1]
        self.ramp = ramp if ramp is not None and ramp.part in self.varying else None
        self.colour_keys: list[str] = []
        self.rest_keys: dict[str, list[tuple]] = {}
        self.method_keys: list[tuple] = []
        #: The variant index (0, 1, …) of the last series styled within its colour.
        self.last_variant = 0

    def method(self, series: tuple[tuple[str, str], ...]) -> tuple[str, ...]:
        """The varying parts other than the ramp's (the method's label parts)."""
        parts = dict(series)
        return tuple(parts[n] for n in self.varying if n in parts and (self.ramp is None or n != self.ramp.part))

    def __call__(self, series: tuple[tuple[str, str], ...]) -> tuple[Any, str, Any, bool]:
        parts = dict(series)
        if self.ramp is not None:
            key = self.method(series)
            if key not in self.method_keys:
                self.method_keys.append(key)
            i = self.method_keys.index(key)
            text = parts.get(self.ramp.part)
            colour = self.ramp.colour(text) if text in self.ramp.values else _REFERENCE_COLOUR
            return colour, _MARKERS[i % len(_MARKERS)], _LINESTYLES[i % len(_LINESTYLES)], True
        vary = [n for n in self.varying if n in parts]
        first = parts[vary[0]] if vary else ""
        rest = tuple(parts[n] for n in vary[1:])
        if first not in self.colour_keys:
            self.colour_keys.append(first)
        variants = self.rest_keys.setdefault(first, [])
        if rest not in variants:
            variants.append(rest)
        i, j = self.colour_keys.index(first), variants.index(rest)
        self.last_variant = j
        # Colour and marker shape name the first varying part (e.g. the oracle), so both tell the
        # lines apart for any colour vision; its variants get a line style and filled/hollow markers.
        return _COLOURS[i % len(_COLOURS)], _MARKERS[i % len(_MARKERS)], _LINESTYLES[j % len(_LINESTYLES)], j % 2 == 0


def _plain(v: float) -> str:
    """A tick label: plain for 10⁻³ ≤ |v| < 10⁴ (0.05, 20), else mathtext a×10ⁿ."""
    if v == 0 or 1e-3 <= abs(v) < 1e4:
        return f"{v:g}"
    e = math.floor(math.log10(abs(v)) + 1e-9)
    m = v / 10**e
    return rf"$10^{{{e}}}$" if abs(m - 1) < 1e-9 else rf"${m:g}\times10^{{{e}}}$"


def _log_ticks_in(lo: float, hi: float, subs: Sequence[float]) -> list[float]:
    if lo <= 0 or hi <= lo:
        return []
    e0, e1 = math.floor(math.log10(lo)) - 1, math.ceil(math.log10(hi)) + 1
    return [s * 10.0**e for e in range(e0, e1 + 1) for s in subs if lo * (1 - 1e-9) <= s * 10.0**e <= hi * (1 + 1e-9)]


def _ensure_log_labels(axis, lims: tuple[float, float]) -> None:
    """At least two labelled major ticks on a log axis: 1–2–5 ticks (then 1…9) where the view
    holds fewer than two powers of ten, written plainly."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    lo, hi = sorted(lims)
    if len(_log_ticks_in(lo, hi, (1.0,))) >= 2:
        return
    for subs in ((1.0, 2.0, 5.0), tuple(float(s) for s in range(1, 10))):
        if len(_log_ticks_in(lo, hi, subs)) >= 2:
            break
    axis.set_major_locator(LogLocator(base=10, subs=subs, numticks=30))
    axis.set_major_formatter(FuncFormatter(lambda v, _: _plain(v)))
    axis.set_minor_formatter(NullFormatter())


def _draw(fig_spec: _Figure, labels: Mapping[tuple, str], stem: Path) -> list[Path]:
    import matplotlib.pyplot as plt

    with figure_style():
        fig = _render(fig_spec, labels)
        # "below": the panels fill the width, so the saved page keeps it (tight bbox, a thin margin).
        pad = {"savefig.pad_inches": 0.02} if fig_spec.legend == "below" else {}
        with plt.rc_context(pad):
            return save_figure(fig, stem)


def _render(fig_spec: _Figure, labels: Mapping[tuple, str]):
    """The matplotlib Figure of ``fig_spec`` (call inside `figure_style`), drawn from its rows only."""
    import matplotlib.pyplot as plt
    from matplotlib.ticker import FuncFormatter, LogLocator, MaxNLocator, NullFormatter

    panels = [p for p in fig_spec.panels if p.drawn]
    keys = {p.key for p in panels}
    styles = _Styles([r for r in fig_spec.rows if r.source not in ("reference",) and r.panel in keys], fig_spec.ramp)

    def show(series, source) -> str:
        label = _DISPLAY.get(labels[(series, source)], labels[(series, source)])
        notes = [fig_spec.label_notes[t] for _, t in series if t in fig_spec.label_notes]
        if notes:
            label += ", " + "; ".join(notes)
        return math_label(label)

    nr, nc = fig_spec.grid
    # A single column of panels over the same x: share it and label it once, at the bottom.
    shared = nc == 1 and len({(p.xlabel, p.xscale) for p in panels}) == 1
    fig, axes = plt.subplots(nr, nc, figsize=fig_spec.size, squeeze=False, sharex=shared)
    ref_styles: dict[str, Any] = {}
    pending: list[tuple] = []  # Pareto annotations, placed once the layout is final
    method_handles: dict[str, Any] = {}
    ramp_handles: dict[str, Any] = {}
    for ax, panel in zip(axes.flat, panels):
        rows = [r for r in fig_spec.rows if r.panel == panel.key]
        order: list[tuple] = []
        for r in rows:
            key = (r.series, r.source)
            if key not in order:
                order.append(key)
        if panel.pareto:
            pending += _draw_pareto(ax, panel, fig_spec, rows, order, styles, show)
        for series, source in order if not panel.pareto else ():
            sel = sorted((r for r in rows if r.series == series and r.source == source), key=lambda r: (r.x is None, r.x))
            label = show(series, source)
            if source == "reference":
                xs = [r.x for r in sel]
                # One line style per reference across the figure (two panels' references stay apart in the legend).
                ref_ls = ref_styles.setdefault(label, (":", (0, (4, 1.5, 1, 1.5)), (0, (1, 3)))[len(ref_styles) % 3])
                ax.plot(xs, [r.y for r in sel], color=_REFERENCE_COLOUR, ls=ref_ls, lw=0.9, label=label)
                continue
            colour, marker, ls, filled = styles(series)
            if styles.ramp is not None:  # the legend names the method (neutral colour) and the ramp value apart
                from matplotlib.lines import Line2D

                method = ", ".join(styles.method(series)) or label
                notes = [fig_spec.label_notes[t] for t in styles.method(series) if t in fig_spec.label_notes]
                method = method + (", " + "; ".join(notes) if notes else "")
                method = math_label(method)
                method_handles.setdefault(method, Line2D([], [], color=_NEUTRAL, ls=ls, marker=marker, ms=3.2, lw=1.0))
                text = dict(series).get(styles.ramp.part)
                if text in styles.ramp.values:
                    ramp_handles.setdefault(text, Line2D([], [], color=colour, lw=2.0))
                label = "_" + label  # drawn, not listed in an automatic legend
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
                line, = ax.plot(xs, ys, color=colour, ls=ls, marker=marker, ms=3.2, lw=1.0, label=label,
                                mfc=colour if filled else "white", mew=0.9)
                line.set_gid("series:" + labels[(series, source)])
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
            ax.set_xscale(_pareto_scale(panel.xscale, [r.x for r in rows]) if panel.pareto else panel.xscale)
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
        if not shared or panel is panels[-1]:
            ax.set_xlabel(panel.xlabel)
        ax.set_ylabel(panel.ylabel)
        ax.grid(True, which="major", lw=0.3, alpha=0.5)
        if fig_spec.legend == "panel" and panel.legend and ax.get_legend_handles_labels()[0]:
            ax.legend(frameon=False, fontsize=5.5, handlelength=2.2)
        if len(panels) > 1 or panel.title:
            letter = f"({'abcdefgh'[panels.index(panel)]}) " if len(panels) > 1 else ""
            ax.set_title(f"{letter}{panel.title}".strip(), loc="left", fontsize=7)
    for ax in list(axes.flat)[len(panels):]:
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
    for ax in axes.flat:  # after the layout, so the view limits are final
        if ax.get_visible():
            for axis, lims, scale in ((ax.xaxis, ax.get_xlim(), ax.get_xscale()), (ax.yaxis, ax.get_ylim(), ax.get_yscale())):
                if scale == "log":
                    _ensure_log_labels(axis, lims)
    if pending:
        _place_annotations(fig, pending)
    if fig_spec.legend == "below":
        blocks: list[tuple[str | None, dict[str, Any]]] = []
        if styles.ramp is not None:
            blocks.append((None, dict(sorted(method_handles.items(), key=lambda kv: _natural(kv[0])))))
            ordered = sorted(ramp_handles, key=lambda t: styles.ramp.values[t])
            ramp_labels = {f"{styles.ramp.values[t]:g}": ramp_handles[t] for t in ordered}
            blocks.append((fig_spec.ramp.title, ramp_labels))
        handles = {}
        for ax in axes.flat:
            for h, lab in zip(*ax.get_legend_handles_labels()):
                handles.setdefault(lab, h)
        if handles:  # the data in natural order, the reference lines after them
            data = sorted((lab for lab in handles if lab not in ref_styles), key=_natural)
            blocks.insert(0, (None, {lab: handles[lab] for lab in data + [lab for lab in handles if lab in ref_styles]}))
        if any(p.pareto for p in panels):
            from matplotlib.lines import Line2D

            blocks.append((None, {
                "not dominated (Pareto front)": Line2D([], [], color=_NEUTRAL, marker="o", ms=3.6, lw=1.0),
                "dominated": Line2D([], [], color=_NEUTRAL, marker="o", ms=3.6, ls="none", mfc="white", mew=0.9),
            }))
        _legends_below(fig, axes, [b for b in blocks if b[1]], fig_spec.footnote)
    return fig


def _pareto_scale(requested: str, values: Sequence[float]) -> str:
    """A Pareto view's x: log (if asked) wherever every value is positive and they span a factor 3 or more."""
    vals = [v for v in values if v is not None]
    if requested == "log" and vals and min(vals) > 0 and max(vals) / min(vals) >= 3:
        return "log"
    return "linear"


def _draw_pareto(ax, panel: _Panel, fig_spec: _Figure, rows, order, styles: _Styles, show) -> list[tuple]:
    """One point per row: each series' non-dominated points filled and joined in x, the others hollow.

    Returns the annotations to place (ax, x, y, text): each annotation value once, at its highest point.
    """
    notes: dict[tuple[int, ...], float] = {}
    if panel.annotate:
        notes = {r.grid_indices: r.x for r in fig_spec.rows if r.panel == panel.annotate and r.x is not None}
    tops: dict[float, tuple[float, float]] = {}
    for series, source in order:
        sel = [r for r in rows if r.series == series and r.source == source and r.x is not None]
        if not sel:
            continue
        # Filled/hollow means front/dominated here, so a colour's variants differ by marker and line style.
        colour, marker, ls, _ = styles(series)
        marker = _MARKERS[(_MARKERS.index(marker) + 3 * styles.last_variant) % len(_MARKERS)]
        pts = [(r.x, r.y) for r in sel]
        front = pareto_front(pts)
        on = sorted(front, key=lambda i: pts[i])
        off = [i for i in range(len(pts)) if i not in set(front)]
        line, = ax.plot([pts[i][0] for i in on], [pts[i][1] for i in on], color=colour, marker=marker, ms=3.6, lw=1.0, ls=ls,
                        mfc=colour, mew=0.9, label=show(series, source), zorder=3)
        line.set_gid("pareto-front")
        dom, = ax.plot([pts[i][0] for i in off], [pts[i][1] for i in off], ls="none", color=colour, marker=marker,
                       ms=3.6, mfc="white", mew=0.9, zorder=3)
        dom.set_gid("pareto-dominated")
        if any(r.n > 1 for r in sel):
            ax.vlines([r.x for r in sel], [r.y_min for r in sel], [r.y_max for r in sel], color=colour, lw=0.7, alpha=0.6)
        for r in sel:
            v = notes.get(r.grid_indices)
            if v is not None and (v not in tops or r.y_max > tops[v][1]):
                tops[v] = (r.x, r.y_max)
    return [(ax, x, y, panel.annotate_format.format(v)) for v, (x, y) in sorted(tops.items())]


#: Where an annotation may go, in points from its point: (dx, dy, ha, va), nearest first.
_SPOTS = [(0, 3.5, "center", "bottom"), (4, 0, "left", "center"), (-4, 0, "right", "center"), (0, -4, "center", "top"),
          (3, 3, "left", "bottom"), (-3, 3, "right", "bottom"), (3, -3, "left", "top"), (-3, -3, "right", "top")]
_FAR = [(dx * 3.5, dy * 3.5, ha, va) for dx, dy, ha, va in _SPOTS]


def _place_annotations(fig, pending: Sequence[tuple]) -> None:
    """Write each annotation beside its point where it overlaps no marker, line vertex, other
    annotation or the axes' edge (greedy, nearest spot first; a farther spot gets a leader line)."""
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    px = fig.dpi / 72.0
    taken: dict[Any, list] = {}
    for ax in {a for a, *_ in pending}:
        boxes = []
        for line in ax.get_lines():
            xy = line.get_xydata()
            if len(xy):
                r = (max(line.get_markersize(), 2.0) / 2 + line.get_markeredgewidth() / 2 + 0.8) * px  # marker + 0.8 pt
                pts = ax.transData.transform(xy)
                for X, Y in pts:
                    boxes.append((X - r, Y - r, X + r, Y + r))
                if line.get_linestyle() not in ("None", "none", "", " "):  # the segments too, as small boxes
                    for (X0, Y0), (X1, Y1) in zip(pts[:-1], pts[1:]):
                        k = max(1, int(math.hypot(X1 - X0, Y1 - Y0) / (2 * px)))
                        boxes += [(X0 + (X1 - X0) * t / k - px, Y0 + (Y1 - Y0) * t / k - px,
                                   X0 + (X1 - X0) * t / k + px, Y0 + (Y1 - Y0) * t / k + px) for t in range(1, k)]
        taken[ax] = boxes
    for ax, x, y, text in pending:
        inside = ax.get_window_extent(renderer)
        best, best_cost = None, math.inf
        for far, spots in ((False, _SPOTS), (True, _FAR)):
            for dx, dy, ha, va in spots:
                kw = dict(arrowprops=dict(arrowstyle="-", lw=0.4, color=_NEUTRAL, shrinkA=0, shrinkB=2)) if far else {}
                a = ax.annotate(text, (x, y), xytext=(dx, dy), textcoords="offset points", ha=ha, va=va, fontsize=5.5,
                                color=_NEUTRAL, gid="annotation", zorder=4, **kw)
                bb = a.get_window_extent(renderer)
                box = (bb.x0, bb.y0, bb.x1, bb.y1)
                cost = sum(_overlap(box, b) for b in taken[ax])
                if box[0] < inside.x0 or box[2] > inside.x1 or box[1] < inside.y0 or box[3] > inside.y1:
                    cost += 1e6
                if cost < best_cost:
                    if best is not None:
                        best[0].remove()
                    best, best_cost = (a, box), cost
                else:
                    a.remove()
                if best_cost == 0:
                    break
            if best_cost == 0:
                break
        taken[ax].append(best[1])


def _overlap(a, b) -> float:
    w = min(a[2], b[2]) - max(a[0], b[0])
    h = min(a[3], b[3]) - max(a[1], b[1])
    return w * h if w > 0 and h > 0 else 0.0


def _legends_below(fig, axes, blocks, footnote: str) -> None:
    """The legend blocks under the panels, one below the other, each as wide as fits; then the footnote."""
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    height = fig.bbox.height
    visible = [ax for ax in axes.flat if ax.get_visible()]
    y = min(ax.get_tightbbox(renderer).y0 for ax in visible) / height
    width = fig.bbox.width
    for title, handles in blocks:
        n = len(handles)
        for ncol in sorted({math.ceil(n / r) for r in range(1, n + 1)}, reverse=True):  # fewest rows that fit
            leg = fig.legend(list(handles.values()), list(handles), loc="upper center", bbox_to_anchor=(0.5, y - 0.004),
                             ncol=ncol, frameon=False, fontsize=6, handlelength=2.2, columnspacing=1.2, title=title,
                             title_fontsize=6, borderaxespad=0.1, handletextpad=0.5)
            if leg.get_window_extent(renderer).width <= width * 0.99 or ncol == 1:
                break
            leg.remove()
        y = leg.get_window_extent(renderer).y0 / height
    if footnote:
        prop = {"size": 5.5}
        lines = [ln for par in footnote.split("\n") for ln in _wrap(par, width * 0.98, renderer, prop)]
        fig.text(0.01, y - 0.006, "\n".join(lines), ha="left", va="top", fontsize=5.5, color=_NEUTRAL, gid="footnote",
                 linespacing=1.3)


def _wrap(text: str, width: float, renderer, prop: Mapping[str, float]) -> list[str]:
    """``text`` in lines no wider than ``width`` pixels as drawn; never breaks inside $…$ mathtext."""
    from matplotlib.font_manager import FontProperties

    font = FontProperties(size=prop["size"])
    words: list[str] = []
    cur, in_math = "", False
    for ch in text:
        if ch == "$":
            in_math = not in_math
        if ch == " " and not in_math:
            if cur:
                words.append(cur)
            cur = ""
        else:
            cur += ch
    if cur:
        words.append(cur)
    lines, cur = [], ""
    for w in words:
        trial = f"{cur} {w}" if cur else w
        tw = renderer.get_text_width_height_descent(trial, font, ismath=trial.count("$") >= 2)[0]
        if cur and tw > width:
            lines.append(cur)
            cur = w
        else:
            cur = trial
    if cur:
        lines.append(cur)
    return lines


def _natural(text: str) -> list:
    """Sort key that orders the numbers inside a label by value."""
    return [(0, float(t), "") if re.fullmatch(r"\d+(?:\.\d+)?", t) else (1, 0.0, t) for t in re.split(r"(\d+(?:\.\d+)?)", text.replace(",", ""))]


def _scale(requested: str, values: Sequence[float]) -> str:
    """``requested``, except that a log axis over less than a decade of data is drawn linear (readable ticks)."""
    pos = [v for v in values if v is not None and v > 0]
    if requested == "log" and (not pos or max(pos) / min(pos) < 10):
        return "linear"
    return requested
