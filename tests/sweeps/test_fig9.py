"""Fig. 9 (gate noise): its CSV against the store and against what is drawn, p* by its stated rule (log–log
linear interpolation between the two simulated rates around the first 1% crossing, as usual for a
threshold read off a log–log curve), the unfitted rules of thumb, the exact GP's spread, and the skips.

One tiny real sweep (demo data, n = 4, two test points, κ = 2; the effective gate-noise model with eight
trajectories; p ∈ {0, 1e-5, 1e-4, 1e-3} × phase estimation with the exact oracle at c = 3, 4 and QSVT at
target error 0.1: 12 points, a few seconds) runs through the sweep engine; its rows are checked against
the SQLite file read without qgp.sweeps.figures. Edge cases of p* run on copies of its points with
hand-set errors.
"""

from __future__ import annotations

import copy
import json
import math
import sqlite3
from dataclasses import replace
from pathlib import Path

import pytest

import qgp.demo
from qgp.sweeps.figures import (
    CSV_COLUMNS,
    FIGURES,
    draw_figures,
    load_points,
    read_figure_csv,
)

DEMO = Path(qgp.demo.__file__).resolve().parent
NAME = "fig9_gate_noise"
TARGET = 0.01
RATES = [0.0, 1e-5, 1e-4, 1e-3]

_BASE = {
    "data": {"train": str(DEMO / "ice_train.csv"), "target": "ice_cm", "n_train": 4},
    "kernel": {"lengthscale": 45.0, "signal_variance": 16.0},
    "noise": {"target_condition": 2.0},
    "circuit": {"clock_qubits": 3, "evolution": "exact"},
    "readout": {"seed": 1},
    "gate_noise": {"two_qubit": 0.0, "method": "effective", "trajectories": 8, "seed": 1},
}
_PAIRED = {
    "circuit.method": ["phase_estimation", "phase_estimation", "qsvt"],
    "circuit.evolution": ["exact", "exact", {}],
    "circuit.clock_qubits": [3, 4, {}],
    "circuit.target_error": [{}, {}, 0.1],  # QSVT's floor is above 1% here: no p*
}


@pytest.fixture(scope="module")
def drawn(tmp_path_factory):
    """(store, output dir, outcomes, what each panel drew) of fig. 9 from the tiny sweep."""
    from qgp.sweeps.execute import run_sweep
    from qgp.sweeps.export import store_status
    from qgp.sweeps.figures import style
    from qgp.sweeps.grid import parse_sweep

    root = tmp_path_factory.mktemp("fig9")
    lines = (DEMO / "ice_test.csv").read_text(encoding="utf-8").splitlines()
    (root / "test.csv").write_text("\n".join(lines[:3]) + "\n", encoding="utf-8")  # two test points
    store = root / "fig9.sqlite"
    raw = {"base": json.loads(json.dumps(_BASE)), "axes": {"gate_noise.two_qubit": RATES}, "paired": _PAIRED}
    raw["base"]["data"]["test"] = str(root / "test.csv")
    report = run_sweep(parse_sweep(raw, base_dir=root), store, workers=1, progress=False)
    assert report.failed == 0, store_status(store).failures

    plotted: list[dict] = []
    real_save = style.save_figure

    def record(fig, stem):  # what matplotlib was given, per panel: data lines and horizontal lines
        for ax in fig.axes:
            if not ax.get_visible():
                continue
            points, hlines = [], []
            for line in ax.get_lines():
                xs, ys = list(map(float, line.get_xdata())), list(map(float, line.get_ydata()))
                if line.get_transform() == ax.get_yaxis_transform():
                    hlines.append(ys[0])
                else:
                    points += list(zip(xs, ys))
            plotted.append({"points": points, "hlines": hlines})
        return real_save(fig, stem)

    mp = pytest.MonkeyPatch()
    mp.setattr(style, "save_figure", record)
    try:
        outcomes = draw_figures(store, root / "out", only=["fig9"])
    finally:
        mp.undo()
    return store, root / "out", outcomes, plotted


def _stored(store: Path) -> dict[int, dict]:
    """grid_index → summary, straight from the SQLite file."""
    con = sqlite3.connect(f"{store.resolve().as_uri()}?mode=ro", uri=True)
    try:
        return {gi: json.loads(s) for gi, s in con.execute("SELECT grid_index, summary_json FROM points WHERE status = 'done'")}
    finally:
        con.close()


def _test_points(store: Path, grid_index: int) -> list[tuple[float, float]]:
    con = sqlite3.connect(f"{store.resolve().as_uri()}?mode=ro", uri=True)
    try:
        return list(con.execute("SELECT mean_exact, variance_exact FROM test_points WHERE grid_index = ?", (grid_index,)))
    finally:
        con.close()


def _value(summary: dict, ref: str):
    cur = summary
    for key in ref.split(":", 1)[1].split("."):
        cur = cur[key]
    return cur


def _rows(drawn) -> list[dict]:
    _, out, outcomes, _ = drawn
    assert [o.name for o in outcomes] == [NAME] and outcomes[0].written, outcomes
    return read_figure_csv(out / f"{NAME}.csv")


def _hand_pstar(p1, e1, p2, e2, target=TARGET):
    """log p* − log p₁ : log p₂ − log p₁ = log target − log e₁ : log e₂ − log e₁ (base 10 here)."""
    return 10 ** (math.log10(p1) + (math.log10(target) - math.log10(e1)) * (math.log10(p2 / p1)) / math.log10(e2 / e1))


# -- the tiny real sweep -------------------------------------------------------------------------


def test_fig9_is_registered_and_writes_its_four_files(drawn):
    _, out, outcomes, _ = drawn
    assert NAME in FIGURES
    assert sorted(p.suffix for p in outcomes[0].paths) == [".csv", ".pdf", ".png", ".txt"]
    header = (out / f"{NAME}.csv").read_text(encoding="utf-8").splitlines()[0]
    assert tuple(header.split(",")) == CSV_COLUMNS
    caption = (out / f"{NAME}.txt").read_text(encoding="utf-8")
    assert caption.count("\n") == 1
    for text in ("effective per-block model", "8 trajectories", "two-qubit depolarising noise only", "2 test points",
                 "noiseless floor", "not hardware", "neither fitted"):
        assert text in caption, text


def test_fig9_csv_holds_exactly_what_is_drawn(drawn):
    rows = _rows(drawn)
    plotted = drawn[3]
    assert len(plotted) == 3  # (a) mean, (b) variance, (c) p* against gates
    for panel, drew in zip(("mean", "variance", "pstar"), plotted):
        mine = [r for r in rows if r["panel"] == panel]
        assert sorted((r["x"], r["y"]) for r in mine if r["x"] is not None) == sorted(drew["points"])
        assert sorted(r["y"] for r in mine if r["x"] is None) == sorted(drew["hlines"])


def test_fig9_store_rows_and_floors_equal_the_stored_values(drawn):
    points = _stored(drawn[0])
    rows = _rows(drawn)
    store_rows = [r for r in rows if r["source"] == "store"]
    noisy = [gi for gi, s in points.items() if s["gate_noise"]["two_qubit"] > 0]
    assert len(store_rows) == 2 * len(noisy) == 18  # each p > 0 point once per panel; p = 0 only as a floor
    for r in store_rows:
        (gi,) = r["grid_indices"]
        assert r["x"] == points[gi]["gate_noise"]["two_qubit"] > 0 and r["x_name"] == "summary:gate_noise.two_qubit"
        assert r["y"] == r["y_min"] == r["y_max"] == _value(points[gi], r["y_name"]) and r["n"] == 1
    floors = [r for r in rows if "noiseless floor" in r["series"]]
    assert len(floors) == 2 * 3  # one per line and panel
    for r in floors:
        (gi,) = r["grid_indices"]
        assert r["source"] == "derived" and r["x"] is None and "= 0 (the line's noiseless floor" in r["y_name"]
        assert points[gi]["gate_noise"]["two_qubit"] == 0.0
        assert r["y"] == points[gi]["mean_rel_rmse" if r["panel"] == "mean" else "variance_rel_rmse"]
    labels = {r["series"] for r in store_rows}
    assert labels == {"exact e^(iAt), c = 3", "exact e^(iAt), c = 4", "QSVT + dilation, ε = 0.1"}


def test_fig9_pstar_is_the_loglog_crossing_of_one_percent(drawn):
    points = _stored(drawn[0])
    rows = _rows(drawn)
    marks = [r for r in rows if r["source"] == "derived" and r["series"].endswith(", p*")]
    by_panel = {p: {r["series"]: r for r in marks if r["panel"] == p} for p in ("mean", "pstar")}
    # the QSVT line's floor is above 1% (no p*); both phase-estimation lines cross
    assert set(by_panel["mean"]) == set(by_panel["pstar"]) == {"exact e^(iAt), c = 3, p*", "exact e^(iAt), c = 4, p*"}
    qsvt_floor = next(s["mean_rel_rmse"] for s in points.values() if s["method"] == "qsvt" and s["gate_noise"]["two_qubit"] == 0)
    assert qsvt_floor > TARGET
    assert "no p* (mean error crossing 1%) for QSVT + dilation, ε = 0.1 (noiseless floor" in drawn[2][0].note
    for series, r in by_panel["mean"].items():
        lo, hi = sorted((points[g] for g in r["grid_indices"]), key=lambda s: s["gate_noise"]["two_qubit"])
        line = sorted((s for s in points.values() if s["method"] == lo["method"] and s["clock_qubits"] == lo["clock_qubits"]),
                      key=lambda s: s["gate_noise"]["two_qubit"])
        first_above = next(s for s in line if s["mean_rel_rmse"] > TARGET)
        assert hi is first_above and lo is line[line.index(hi) - 1] and lo["gate_noise"]["two_qubit"] > 0
        expected = _hand_pstar(lo["gate_noise"]["two_qubit"], lo["mean_rel_rmse"], hi["gate_noise"]["two_qubit"], hi["mean_rel_rmse"])
        assert r["x"] == pytest.approx(expected, rel=1e-12) and r["y"] == TARGET
        assert lo["gate_noise"]["two_qubit"] < r["x"] < hi["gate_noise"]["two_qubit"]
        assert r["y_name"].startswith("derived:summary:mean_rel_rmse = 0.01") and "log–log linear interpolation" in r["y_name"]
        c = by_panel["pstar"][series]
        assert c["y"] == r["x"] and c["grid_indices"] == r["grid_indices"]
        assert c["x"] == lo["gate_noise"]["two_qubit_gates_mean_circuit"] == hi["gate_noise"]["two_qubit_gates_mean_circuit"]


def test_fig9_rules_of_thumb_are_one_and_a_hundredth_over_the_gate_count(drawn):
    rows = _rows(drawn)
    refs = [r for r in rows if r["source"] == "reference" and r["panel"] == "pstar"]
    one = [r for r in refs if r["y_name"].startswith("reference:p = 1/x")]
    hundredth = [r for r in refs if r["y_name"].startswith("reference:p = 0.01/x")]
    assert one and hundredth and len(one) + len(hundredth) == len(refs)
    assert all(r["y"] == 1.0 / r["x"] for r in one) and all(r["y"] == 0.01 / r["x"] for r in hundredth)
    assert all("one error per run" in r["y_name"] and "not fitted" in r["y_name"] for r in one)
    gates = [s["gate_noise"]["two_qubit_gates_mean_circuit"] for s in _stored(drawn[0]).values()]
    xs = [r["x"] for r in one]
    assert min(xs) < min(gates) and max(xs) > max(gates)  # spans every line's gate count
    targets = [r for r in rows if r["source"] == "reference" and r["panel"] in ("mean", "variance")]
    assert {r["y"] for r in targets} == {TARGET} and len(targets) == 4


def test_fig9_gp_spread_equals_the_stored_exact_posterior(drawn):
    store = drawn[0]
    points = _stored(store)
    (gp,) = {r["y"] for r in _rows(drawn) if r["source"] == "classical"}
    for gi, s in points.items():
        tp = _test_points(store, gi)
        assert len(tp) == s["n_test"] == 2
        sd = math.sqrt(sum(v for _, v in tp) / len(tp))
        centred = math.sqrt(sum((m - s["prior_mean"]) ** 2 for m, _ in tp) / len(tp))
        assert gp == pytest.approx(sd / centred, rel=1e-12)


# -- edge cases on copies of the stored points ---------------------------------------------------


def _line(points, clock: int, errors: dict[float, float], start: int):
    """Copies of the c = ``clock`` phase-estimation points with mean_rel_rmse set per rate (rates left out are dropped)."""
    out = []
    for p in points:
        s = p.summary
        if s["method"] != "phase_estimation" or s["clock_qubits"] != clock or s["gate_noise"]["two_qubit"] not in errors:
            continue
        summary = copy.deepcopy(s)
        summary["mean_rel_rmse"] = errors[s["gate_noise"]["two_qubit"]]
        out.append(replace(p, grid_index=start + len(out), summary=summary))
    assert len(out) == len(errors)
    return out


def _marks(points) -> tuple[dict[str, float], str, set[str]]:
    """The figure's spec, not drawn (fast): p* per line of panel (a), the notes, the panels."""
    spec = FIGURES[NAME](points)
    marks = {dict(r.series)["line"]: r.x for r in spec.rows if r.panel == "mean" and dict(r.series).get("quantity") == "p*"}
    return marks, "; ".join(spec.notes), {p.key for p in spec.panels}


def test_fig9_pstar_on_hand_set_errors(drawn):
    points, _ = load_points(drawn[0])
    # c = 3: 0.5% at 1e-5, 2% at 1e-4: log-log halfway, p* = √(1e-5 · 1e-4) = 10^-4.5
    # c = 4: noiseless floor 1.5% > 1%: no p*, though its noisy points dip below
    lines = _line(points, 3, {0.0: 0.004, 1e-5: 0.005, 1e-4: 0.02, 1e-3: 0.3}, 100)
    lines += _line(points, 4, {0.0: 0.015, 1e-5: 0.009, 1e-4: 0.05, 1e-3: 0.5}, 200)
    marks, note, _ = _marks(lines)
    assert marks == {"exact e^(iAt), c = 3": pytest.approx(10 ** -4.5, rel=1e-12)}
    assert "exact e^(iAt), c = 4 (noiseless floor 1.50% above 1%)" in note


def test_fig9_pstar_takes_the_first_crossing_and_needs_a_rate_below_it(drawn):
    points, _ = load_points(drawn[0])
    # c = 3 crosses up, down and up again: the first crossing, between 1e-5 and 1e-4 (4× in error: p* = 10^-4.5)
    lines = _line(points, 3, {0.0: 0.001, 1e-5: 0.005, 1e-4: 0.02, 1e-3: 0.008}, 100)
    # c = 4 is above 1% already at the smallest p > 0 (no rate to interpolate from) and never crosses after
    lines += _line(points, 4, {0.0: 0.002, 1e-5: 0.03, 1e-4: 0.05, 1e-3: 0.5}, 200)
    marks, note, _ = _marks(lines)
    assert marks == {"exact e^(iAt), c = 3": pytest.approx(10 ** -4.5, rel=1e-12)}
    assert "exact e^(iAt), c = 4 (above 1% already at the smallest simulated p = 1e-05)" in note
    # a line that stays within 1% gets none, and without any p* panel (c) is left out
    lines = _line(points, 3, {0.0: 0.001, 1e-5: 0.002, 1e-4: 0.003}, 300)
    marks, note, panels = _marks(lines)
    assert marks == {} and "(within 1% up to p = 0.0001)" in note and "panel (c) left out" in note
    assert panels == {"mean", "variance"}


def test_fig9_skips_without_a_gate_noise_axis_of_two_positive_rates(drawn, tmp_path):
    points, _ = load_points(drawn[0])
    for keep in ({0.0}, {0.0, 1e-4}, {1e-4}):
        only = [p for p in points if p.summary["gate_noise"]["two_qubit"] in keep]
        (outcome,) = draw_figures(only, tmp_path / str(len(keep)), only=["fig9"])
        assert not outcome.written
        assert outcome.note.startswith("skipped: needs a gate_noise.two_qubit axis with at least two positive rates")
    no_noise = [replace(p, summary={k: v for k, v in p.summary.items() if k != "gate_noise"},
                        axes={k: v for k, v in p.axes.items() if k != "gate_noise.two_qubit"}) for p in points]
    (outcome,) = draw_figures(no_noise, tmp_path / "none", only=["fig9"])
    assert not outcome.written and outcome.note.startswith("skipped: needs")


def test_fig9_leaves_out_the_gp_spread_when_the_data_cannot_be_reloaded(drawn, tmp_path):
    points, _ = load_points(drawn[0])
    moved = []
    for p in points:
        config = copy.deepcopy(p.config)
        config["data"]["train"] = str(tmp_path / "missing.csv")
        moved.append(replace(p, config=config))
    spec = FIGURES[NAME](moved)
    assert any("the exact GP's posterior spread is not drawn: cannot reload" in n for n in spec.notes)
    assert spec.rows and not any(r.source == "classical" for r in spec.rows)
