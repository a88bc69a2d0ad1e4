"""The referee's points on figs. 1, 3, 4 and 6, checked through matplotlib objects (never pixels).

fig. 1: one panel per quantity, against clock qubits only (total qubits = c + a constant per oracle,
stated in the legend and caption), κ along a sequential colour ramp, the oracle by marker and line style;
fig. 3: the 1/κ² line (HHL's success-probability scaling: Harrow, Hassidim & Lloyd, PRL 103, 150502
(2009)) and the 1/κ line anchored at the lowest measured point at the smallest κ, and every log axis
with at least two labelled ticks; fig. 4: a Pareto view whose front is exactly the non-dominated set;
fig. 6: m and † defined on the figure and in the caption. All four: mathtext formulas, one- or
two-column widths, legends off the data.

One tiny real sweep (n = 4, c = 3–4, exact and walk oracles, κ = 5, 20 and 80: 12 points) feeds all four;
at κ = 80 (the smallest σ²) the GP's NLPD and the circuits' error are both worse, so fig. 4 has dominated points.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import qgp.demo
from qgp.reports.figures import figure_style, math_label
from qgp.sweeps.figures import FIGURES, draw_figures, read_figure_csv
from qgp.sweeps.figures.data import _labels, load_points
from qgp.sweeps.figures.style import (
    DOUBLE_COLUMN,
    RAMP_CMAP,
    RAMP_RANGE,
    SINGLE_COLUMN,
    _ensure_log_labels,
    _render,
    pareto_front,
)

DEMO = Path(qgp.demo.__file__).resolve().parent

_SWEEP = {
    "base": {
        "data": {"train": str(DEMO / "ice_train.csv"), "test": str(DEMO / "ice_test.csv"), "target": "ice_cm", "n_train": 4},
        "kernel": {"lengthscale": 45.0, "signal_variance": 16.0},
        "noise": {"target_condition": 10.0},
        "circuit": {"clock_qubits": 3, "evolution": "walk"},
        "readout": {"seed": 1},
    },
    "axes": {"circuit.clock_qubits": [3, 4], "circuit.evolution": ["exact", "walk"], "noise.target_condition": [5, 20, 80]},
}
_REVIEWED = ("fig1_error_vs_qubits", "fig3_success_probability", "fig4_noise_tradeoff", "fig6_circuit_cost")


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    from qgp.sweeps.execute import run_sweep
    from qgp.sweeps.grid import parse_sweep

    root = tmp_path_factory.mktemp("figure_review")
    path = root / "review.sqlite"
    report = run_sweep(parse_sweep(json.loads(json.dumps(_SWEEP)), base_dir=root), path, workers=1, progress=False)
    assert report.failed == 0
    outcomes = {o.name: o for o in draw_figures(path, root / "figures")}
    assert all(outcomes[name].written for name in _REVIEWED), outcomes
    return path, root / "figures"


@pytest.fixture(scope="module")
def rendered(store):
    """{figure name: (spec, matplotlib Figure)} drawn as `qgp figures` draws them (not saved)."""
    import matplotlib.pyplot as plt

    points, _ = load_points(store[0])
    out = {}
    with figure_style():
        for name in _REVIEWED:
            spec = FIGURES[name](points)
            labels, _ = _labels(spec.rows)
            fig = _render(spec, labels)
            fig.canvas.draw()
            out[name] = (spec, fig)
    yield out
    for _, fig in out.values():
        plt.close(fig)


def _data_axes(fig):
    return [ax for ax in fig.axes if ax.get_visible() and ax.has_data()]


def _csv(store, name):
    return read_figure_csv(store[1] / f"{name}.csv")


# -- fig. 1 ---------------------------------------------------------------------------------------


def test_fig1_has_one_panel_per_quantity_against_clock_qubits_only(rendered, store):
    spec, fig = rendered["fig1_error_vs_qubits"]
    axes = _data_axes(fig)
    # The total-qubit panels are gone: one data panel for the mean, one for the variance, both against c.
    assert len(axes) == 2
    assert [ax.get_title(loc="left") for ax in axes] == ["(a) predictive mean", "(b) latent variance"]
    assert "clock qubits" in axes[-1].get_xlabel()
    assert not any("total" in ax.get_xlabel() + ax.get_ylabel() for ax in fig.axes)
    # … but their numbers stay in the CSV, and the constant c → total is stated (legend and caption).
    rows = _csv(store, "fig1_error_vs_qubits")
    assert {r["panel"] for r in rows} == {"mean vs clock", "variance vs clock", "mean vs total", "variance vs total"}
    offsets = {}
    clock = {(r["panel"].split()[0], tuple(r["grid_indices"])): r["x"] for r in rows if r["panel"].endswith("clock")}
    for r in rows:
        if r["panel"].endswith("total"):
            offsets.setdefault(r["series"].split(", κ")[0], set()).add(r["x"] - clock[(r["panel"].split()[0], tuple(r["grid_indices"]))])
    assert all(len(v) == 1 for v in offsets.values())  # one constant per oracle
    legend = " ".join(t.get_text() for leg in fig.legends for t in leg.get_texts())
    caption = (store[1] / "fig1_error_vs_qubits.txt").read_text(encoding="utf-8")
    for oracle, (k,) in offsets.items():
        assert f"total $c + {int(k)}$" in legend
        assert f"total = c + {int(k)} for {oracle}" in caption


def _ramp_position(colour) -> float:
    """Where ``colour`` sits on the ramp's colormap (nearest of 1001 samples)."""
    import matplotlib

    grid = np.linspace(0.0, 1.0, 1001)
    samples = matplotlib.colormaps[RAMP_CMAP](grid)[:, :3]
    d = np.linalg.norm(samples - np.asarray(matplotlib.colors.to_rgb(colour)), axis=1)
    assert d.min() < 1e-6, "a κ series colour is not on the ramp"
    return float(grid[np.argmin(d)])


def test_fig1_kappa_series_have_distinct_colours_ordered_along_the_ramp(rendered):
    spec, fig = rendered["fig1_error_vs_qubits"]
    assert spec.ramp is not None and spec.ramp.part == "κ"
    by_kappa: dict[float, set] = {}
    styles_by_kappa: dict[float, set] = {}
    for ax in _data_axes(fig):
        for line in ax.get_lines():
            gid = line.get_gid() or ""
            if gid.startswith("series:"):
                kappa = float(re.search(r"κ = (\S+)", gid)[1])
                by_kappa.setdefault(kappa, set()).add(line.get_color() if isinstance(line.get_color(), str) else tuple(line.get_color()))
                styles_by_kappa.setdefault(kappa, set()).add((line.get_marker(), line.get_linestyle()))
    assert sorted(by_kappa) == [5.0, 20.0, 80.0]
    assert all(len(c) == 1 for c in by_kappa.values())  # one colour per κ, whatever the oracle
    positions = [_ramp_position(next(iter(by_kappa[k]))) for k in sorted(by_kappa)]
    assert positions == sorted(positions) and len(set(positions)) == len(positions)  # ordered along the ramp
    bin_width = 1 / 256  # the colormap is a table of 256 colours
    assert positions[0] == pytest.approx(RAMP_RANGE[0], abs=bin_width) and positions[-1] == pytest.approx(RAMP_RANGE[1], abs=bin_width)
    # the oracle (the other dimension) by marker and line style: two oracles, two styles at each κ
    assert all(len(s) == 2 for s in styles_by_kappa.values())
    # the κ legend block: titled κ, entries in increasing κ, coloured like the lines
    (ramp_legend,) = [leg for leg in fig.legends if "kappa" in leg.get_title().get_text()]
    values = [float(t.get_text()) for t in ramp_legend.get_texts()]
    assert values == sorted(values) == [5.0, 20.0, 80.0]
    handle_positions = [_ramp_position(h.get_color()) for h in ramp_legend.legend_handles]
    assert handle_positions == positions


# -- fig. 3 ---------------------------------------------------------------------------------------


def test_fig3_reference_lines_pass_through_the_anchored_data_point(rendered, store):
    """Anchor rule: through the lowest measured P at the smallest κ, slope −2 (1/κ², HHL 2009) or −1 (1/κ)."""
    _, fig = rendered["fig3_success_probability"]
    rows = _csv(store, "fig3_success_probability")
    axes = _data_axes(fig)
    for ax, panel, power in zip(axes, ("inversion", "variance"), (2, 1)):
        measured = [r for r in rows if r["panel"] == panel and r["source"] == "store"]
        k0 = min(r["x"] for r in measured)
        p0 = min(r["y"] for r in measured if r["x"] == k0)
        refs = sorted((r for r in rows if r["panel"] == panel and r["source"] == "reference"), key=lambda r: r["x"])
        assert refs[0]["x"] == k0 and refs[0]["y"] == p0  # exactly through the anchor point
        for a, b in zip(refs, refs[1:]):
            assert math.log(b["y"] / a["y"]) / math.log(b["x"] / a["x"]) == pytest.approx(-power, rel=1e-12)
        # the drawn reference line is that one, and the anchor is a drawn data point
        (ref_line,) = [ln for ln in ax.get_lines() if "propto" in ln.get_label()]
        assert (r"$1/\kappa^2$" if power == 2 else r"$1/\kappa$") in ref_line.get_label()
        assert "through the lowest point at" in ref_line.get_label()
        assert (ref_line.get_xdata()[0], ref_line.get_ydata()[0]) == (k0, p0)
        data = [(x, y) for ln in ax.get_lines() if (ln.get_gid() or "").startswith("series:") for x, y in ln.get_xydata()]
        assert (k0, p0) in data


def _labelled_major_ticks(axis, lims) -> list[str]:
    lo, hi = sorted(lims)
    locs = [v for v in axis.get_majorticklocs() if lo * (1 - 1e-9) <= v <= hi * (1 + 1e-9)]
    return [t for t in axis.get_major_formatter().format_ticks(locs) if t.strip()]


def test_every_log_axis_has_at_least_two_labelled_ticks(rendered):
    n_log = 0
    for name, (_, fig) in rendered.items():
        for ax in _data_axes(fig):
            for axis, lims, scale in ((ax.xaxis, ax.get_xlim(), ax.get_xscale()), (ax.yaxis, ax.get_ylim(), ax.get_yscale())):
                if scale == "log":
                    n_log += 1
                    assert len(_labelled_major_ticks(axis, lims)) >= 2, (name, ax.get_title(loc="left"), lims)
    assert n_log >= 8


@pytest.mark.parametrize("lims", [(0.05, 0.4), (0.12, 0.19), (3.0, 9.0), (0.004, 0.09), (1e-6, 1.0)])
def test_a_short_log_axis_gets_two_labelled_ticks(lims):
    import matplotlib.pyplot as plt

    with figure_style():
        fig, ax = plt.subplots()
        ax.set_yscale("log")
        ax.set_ylim(*lims)
        _ensure_log_labels(ax.yaxis, ax.get_ylim())
        fig.canvas.draw()
        assert len(_labelled_major_ticks(ax.yaxis, ax.get_ylim())) >= 2
        plt.close(fig)


# -- fig. 4 ---------------------------------------------------------------------------------------


def _dominated_brute_force(pts):
    """O(n²): the indices some other point dominates (≤ in both, < in one; both minimised)."""
    return {
        i
        for i, (x, y) in enumerate(pts)
        if any(j != i and a <= x and b <= y and (a < x or b < y) for j, (a, b) in enumerate(pts))
    }


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 6), st.integers(0, 6)), max_size=25)
       | st.lists(st.tuples(st.floats(-1e3, 1e3), st.floats(-1e3, 1e3)), max_size=25))
def test_pareto_front_is_exactly_the_non_dominated_set(pts):
    assert set(pareto_front(pts)) == set(range(len(pts))) - _dominated_brute_force(pts)
    assert pareto_front(pts) == sorted(pareto_front(pts))


def test_fig4_pareto_front_drawn_is_the_non_dominated_set_of_its_csv_rows(rendered, store):
    spec, fig = rendered["fig4_noise_tradeoff"]
    rows = _csv(store, "fig4_noise_tradeoff")
    axes = _data_axes(fig)
    assert len(axes) == 2
    n_front = n_dominated = 0
    for ax, panel in zip(axes, ("pareto mean", "pareto variance")):
        assert "NLPD" in ax.get_xlabel() and "relative RMSE" in ax.get_ylabel()
        fronts = [ln for ln in ax.get_lines() if ln.get_gid() == "pareto-front"]
        dominated = [ln for ln in ax.get_lines() if ln.get_gid() == "pareto-dominated"]
        assert len(fronts) == len(dominated) >= 2  # one series per clock size
        for front, dom in zip(fronts, dominated):
            assert front.get_color() == dom.get_color()
            series = [r for r in rows if r["panel"] == panel and math_label(r["series"]) == front.get_label()]
            pts = [(r["x"], r["y"]) for r in series]
            n_sigma = len({r["x"] for r in rows if r["panel"] == "quantum error"})
            assert len(pts) == len(front.get_xdata()) + len(dom.get_xdata()) == n_sigma  # one point per σ²
            bad = _dominated_brute_force(pts)
            assert sorted(map(tuple, front.get_xydata())) == sorted(p for i, p in enumerate(pts) if i not in bad)
            assert sorted(map(tuple, dom.get_xydata())) == sorted(p for i, p in enumerate(pts) if i in bad)
            n_front += len(front.get_xdata())
            n_dominated += len(dom.get_xdata())
    assert n_front > 0 and n_dominated > 0  # both kinds occur, so the check has teeth


def test_fig4_points_are_annotated_with_their_noise_variance_in_mathtext(rendered, store):
    _, fig = rendered["fig4_noise_tradeoff"]
    rows = _csv(store, "fig4_noise_tradeoff")
    sigma = {tuple(r["grid_indices"]): r["x"] for r in rows if r["panel"] == "quantum error"}
    renderer = fig.canvas.get_renderer()
    for ax, panel in zip(_data_axes(fig), ("pareto mean", "pareto variance")):
        notes = [t for t in ax.texts if t.get_gid() == "annotation"]
        want = {sigma[tuple(r["grid_indices"])] for r in rows if r["panel"] == panel}
        assert sorted(t.get_text() for t in notes) == sorted(rf"$\sigma^2={v:.3g}$" for v in want)
        boxes = [t.get_window_extent(renderer) for t in notes]
        inside = ax.get_window_extent(renderer)
        for i, a in enumerate(boxes):
            assert inside.x0 <= a.x0 and a.x1 <= inside.x1 and inside.y0 <= a.y0 and a.y1 <= inside.y1
            assert not any(a.overlaps(b) for b in boxes[i + 1 :])
    # the earlier quantities against σ² stay in the CSV
    assert {"kappa", "quantum error", "rmse", "nlpd"} <= {r["panel"] for r in rows}


# -- fig. 6 ---------------------------------------------------------------------------------------


def test_fig6_defines_m_and_dagger_on_the_figure_and_in_the_caption(rendered, store):
    _, fig = rendered["fig6_circuit_cost"]
    texts = [t.get_text() for t in fig.texts]
    legend = [t.get_text() for leg in fig.legends for t in leg.get_texts()]
    assert any("†" in t for t in legend) and any("$m$" in ax.get_xlabel() for ax in _data_axes(fig))
    (foot,) = [t for t in fig.texts if t.get_gid() == "footnote"]
    note = foot.get_text()
    assert re.search(r"\$m\$: system qubits, \$m = \\lceil\\log_2 n\\rceil\$", note)
    assert "$c$: clock qubits" in note
    assert "†: synthesis-dependent count" in note
    assert texts
    caption = (store[1] / "fig6_circuit_cost.txt").read_text(encoding="utf-8")
    assert "m = ⌈log₂ n⌉ system qubits" in caption and "† marks synthesis-dependent counts" in caption


# -- all four -------------------------------------------------------------------------------------


def _all_text(fig):
    out = [t.get_text() for t in fig.texts]
    for ax in fig.axes:
        out += [ax.get_xlabel(), ax.get_ylabel(), ax.get_title(loc="left")] + [t.get_text() for t in ax.texts]
        if ax.get_legend():
            out += [t.get_text() for t in ax.get_legend().get_texts()]
    for leg in fig.legends:
        out += [t.get_text() for t in leg.get_texts()] + [leg.get_title().get_text()]
    return [t for t in out if t]


def test_formulas_are_mathtext(rendered):
    for name, (_, fig) in rendered.items():
        for text in _all_text(fig):
            plain = re.sub(r"\$[^$]*\$", "", text)  # what is left outside $…$
            for formula in ("κ", "σ²", "e^(iAt)", "λ"):
                assert formula not in plain, (name, text)


def test_widths_fit_one_or_two_columns_and_legends_stay_off_the_data(rendered, store):
    from PIL import Image

    for name, (spec, fig) in rendered.items():
        column = DOUBLE_COLUMN if spec.size[0] > SINGLE_COLUMN[0] else SINGLE_COLUMN[0]
        assert spec.size[0] in (SINGLE_COLUMN[0], DOUBLE_COLUMN)
        with Image.open(store[1] / f"{name}.png") as im:
            assert im.size[0] / 300 <= column + 0.01, name
        renderer = fig.canvas.get_renderer()
        axes = [ax.get_window_extent(renderer) for ax in _data_axes(fig)]
        legends = list(fig.legends) + [ax.get_legend() for ax in fig.axes if ax.get_legend()]
        assert legends, name
        for leg in legends:
            box = leg.get_window_extent(renderer)
            assert not any(box.overlaps(a) for a in axes), name
