"""The sweep figures: valid PDF and PNG files, CSVs that equal the stored numbers, skip notes.

Four tiny real sweeps (c = 3–4, n ≤ 8, 17 points in all) run through the sweep engine into
result stores; every figure is drawn from them, and each CSV row is checked against the store,
read back independently of qgp.sweeps.figures.
"""

from __future__ import annotations

import json
import math
import re
import sqlite3
import struct
import zlib
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

import qgp.demo
from qgp.sweeps.figures import (
    CSV_COLUMNS,
    FIGURES,
    config_from_document,
    draw_figures,
    figures_command,
    make_figures,
    model_errors,
    read_figure_csv,
    scaling_model,
)

DEMO = Path(qgp.demo.__file__).resolve().parent

_BASE = {
    "data": {"train": str(DEMO / "ice_train.csv"), "test": str(DEMO / "ice_test.csv"), "target": "ice_cm", "n_train": 4},
    "kernel": {"lengthscale": 45.0, "signal_variance": 16.0},
    "noise": {"variance": 2.0},
    "circuit": {"clock_qubits": 3, "evolution": "walk"},
    "readout": {"seed": 1},
}

# store name → (axes, paired): together they give every figure something to draw.
_SWEEPS = {
    "oracles": ({"circuit.clock_qubits": [3, 4], "circuit.evolution": ["exact", "walk"]}, {}),  # figs 1, 6
    "noise": ({"noise.variance": [0.5, 4.0]}, {"readout.shots": [0, 1000, 1000], "readout.seed": [1, 1, 2]}),  # 2, 3, 4
    "taper": ({"data.n_train": [8], "kernel.support": [{}, 60.0, 200.0]}, {}),  # fig 5
    "sizes": ({"data.n_train": [4, 8], "circuit.clock_qubits": [3, 4]}, {}),  # figs 1, 6, 7
}

_EXPECTED = {
    "oracles": {"fig1_error_vs_qubits", "fig6_circuit_cost"},
    "noise": {"fig2_error_vs_condition", "fig3_success_probability", "fig4_noise_tradeoff"},
    "taper": {"fig5_taper_sparsity"},
    "sizes": {"fig1_error_vs_qubits", "fig6_circuit_cost", "fig7_scaling"},
}

_SEED_KEYS = {"readout.seed"}


@pytest.fixture(scope="module")
def drawn(tmp_path_factory):
    """{store name: (store path, output dir, outcomes)} for the four tiny sweeps."""
    from qgp.sweeps.execute import run_sweep
    from qgp.sweeps.export import store_status
    from qgp.sweeps.grid import parse_sweep

    root = tmp_path_factory.mktemp("sweep_figures")
    out = {}
    for name, (axes, paired) in _SWEEPS.items():
        raw = {"base": json.loads(json.dumps(_BASE)), "axes": axes}
        if paired:
            raw["paired"] = paired
        store = root / f"{name}.sqlite"
        report = run_sweep(parse_sweep(raw, base_dir=root), store, workers=1, progress=False)
        assert report.failed == 0, store_status(store).failures
        outcomes = draw_figures(store, root / name)
        out[name] = (store, root / name, outcomes)
    return out


# -- reading the store without qgp.sweeps.figures -------------------------------------------------


def _stored(store: Path) -> dict[int, dict]:
    """grid_index → {"axes", "config", "summary"} straight from the SQLite file."""
    con = sqlite3.connect(f"{store.resolve().as_uri()}?mode=ro", uri=True)
    try:
        rows = con.execute("SELECT grid_index, axes_json, config_json, summary_json FROM points WHERE status = 'done'")
        return {gi: {"axes": json.loads(a), "config": json.loads(c), "summary": json.loads(s)} for gi, a, c, s in rows}
    finally:
        con.close()


def _lookup(point: dict, ref: str):
    where, _, path = ref.partition(":")
    cur = point["summary" if where == "summary" else "config"]
    for key in path.split("."):
        cur = cur[key] if isinstance(cur, dict) and key in cur else None
    return cur


# -- file formats --------------------------------------------------------------------------------


def _png_dpi(path: Path) -> tuple[float, float]:
    """Resolution from the PNG pHYs chunk (PNG spec §11.3.5.3: pixels per metre when unit = 1)."""
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n", f"{path} lacks the PNG signature"
    pos = 8
    while pos < len(data):
        (length,) = struct.unpack(">I", data[pos : pos + 4])
        kind = data[pos + 4 : pos + 8]
        body = data[pos + 8 : pos + 8 + length]
        (crc,) = struct.unpack(">I", data[pos + 8 + length : pos + 12 + length])
        assert zlib.crc32(kind + body) == crc, f"{path}: bad CRC in chunk {kind!r}"
        if kind == b"pHYs":
            x, y, unit = struct.unpack(">IIB", body)
            assert unit == 1
            return x * 0.0254, y * 0.0254
        if kind == b"IEND":
            break
        pos += 12 + length
    raise AssertionError(f"{path} has no pHYs chunk")


def test_each_store_draws_exactly_the_figures_it_has_data_for(drawn):
    for name, (_, _, outcomes) in drawn.items():
        written = {o.name for o in outcomes if o.written}
        assert written == _EXPECTED[name], name
        for o in outcomes:
            if not o.written:
                assert o.note and o.note.startswith("skipped: needs"), o
    # fig8 needs QSVT points and fig9 a gate-noise axis: their own stores (tests/sweeps/test_fig8.py, test_fig9.py).
    assert set().union(*_EXPECTED.values()) == set(FIGURES) - {"fig8_qsvt_vs_phase_estimation", "fig9_gate_noise"}


def test_every_figure_is_a_valid_pdf_and_300_dpi_png_with_csv_and_caption(drawn):
    for _, out_dir, outcomes in drawn.values():
        for o in (o for o in outcomes if o.written):
            suffixes = sorted(p.suffix for p in o.paths)
            assert suffixes == [".csv", ".pdf", ".png", ".txt"]
            pdf = out_dir / f"{o.name}.pdf"
            body = pdf.read_bytes()
            assert body.startswith(b"%PDF-") and body.rstrip().endswith(b"%%EOF")
            dpi = _png_dpi(out_dir / f"{o.name}.png")
            assert dpi == pytest.approx((300, 300), abs=0.5)
            caption = (out_dir / f"{o.name}.txt").read_text(encoding="utf-8")
            assert caption.count("\n") == 1 and caption.endswith("\n") and len(caption) > 80
            header = (out_dir / f"{o.name}.csv").read_text(encoding="utf-8").splitlines()[0]
            assert tuple(header.split(",")) == CSV_COLUMNS


def test_every_csv_equals_the_stored_numbers_it_claims_to_plot(drawn):
    n_checked = {"store": 0, "reference": 0, "classical": 0, "model": 0}
    for name, (store, out_dir, outcomes) in drawn.items():
        points = _stored(store)
        for o in (o for o in outcomes if o.written):
            rows = read_figure_csv(out_dir / f"{o.name}.csv")
            assert rows, o.name
            for r in rows:
                src = r["source"]
                pts = [points[i] for i in r["grid_indices"]]
                if src == "store":
                    vals = [_lookup(p, r["y_name"]) for p in pts]
                    assert r["n"] == len(vals) == len(r["grid_indices"]) >= 1
                    # exact float round trip: repr in the CSV, float() back
                    assert r["y"] == math.fsum(vals) / len(vals)
                    assert r["y_min"] == min(vals) and r["y_max"] == max(vals)
                    if len(vals) > 1:
                        assert r["y_std"] == pytest.approx(float(np.std(vals, ddof=1)), rel=1e-12, abs=1e-300)
                    else:
                        assert r["y_std"] == 0.0
                    for p in pts:
                        x = _lookup(p, r["x_name"])
                        assert (r["x"] is None and x is None) or r["x"] == x
                    # merged points differ only in a seed axis
                    others = {json.dumps({k: v for k, v in p["axes"].items() if k not in _SEED_KEYS}, sort_keys=True) for p in pts}
                    assert len(others) == 1
                elif src == "reference":
                    anchored = re.fullmatch(r"reference:P0\*\(kappa0/kappa\)\^(\d) with kappa0 = (\S+), P0 = (\S+) \(.*\)", r["y_name"])
                    if anchored:  # fig. 3: the 1/κ^power scaling through (κ0, P0), the lowest point at the smallest κ
                        power, k0, p0 = int(anchored[1]), float(anchored[2]), float(anchored[3])
                        assert r["y"] == p0 * (k0 / r["x"]) ** power
                    elif "kappa" in r["y_name"] and "this n" not in r["y_name"]:
                        power = 2 if "kappa^2" in r["y_name"] else 1
                        assert r["y"] == 1.0 / r["x"] ** power
                    elif r["y_name"].startswith("reference:n_train"):
                        assert r["y"] == float(r["y_name"].split("=")[1])
                elif src == "classical":
                    key = r["y_name"].split(":")[1]
                    for p in pts:  # the recomputed diagnostics agree with what the runs stored
                        assert _lookup(p, "summary:n_train") == r["x"]
                        assert r["y"] == pytest.approx(p["summary"][key], rel=1e-12)
                elif src == "derived":
                    metric = r["y_name"].split(" with ")[1].split(" <= ")[0]
                    target = float(r["y_name"].split(" <= ")[1].split()[0])
                    ok = {p["summary"]["clock_qubits"] for p in pts if _lookup(p, metric) <= target}
                    bad = {p["summary"]["clock_qubits"] for p in pts if _lookup(p, metric) > target}
                    assert r["y"] == min(ok - bad)
                n_checked[src] = n_checked.get(src, 0) + 1
    assert n_checked["store"] > 50 and n_checked["reference"] > 0 and n_checked["classical"] > 0


def test_seed_axis_is_aggregated_into_a_band(drawn):
    store, out_dir, _ = drawn["noise"]
    rows = read_figure_csv(out_dir / "fig2_error_vs_condition.csv")
    banded = [r for r in rows if r["n"] == 2]
    assert banded and all("1,000 shots" in r["series"] for r in banded)
    assert all(r["y_min"] <= r["y"] <= r["y_max"] and r["y_min"] < r["y_max"] for r in banded)
    assert all(r["n"] == 1 for r in rows if "exact probabilities" in r["series"])


def test_untapered_point_is_kept_as_a_row_without_x(drawn):
    _, out_dir, _ = drawn["taper"]
    rows = read_figure_csv(out_dir / "fig5_taper_sparsity.csv")
    assert any(r["x"] is None and r["source"] == "store" for r in rows)
    sparsity = {r["x"]: r["y"] for r in rows if r["panel"] == "sparsity" and r["source"] == "store"}
    assert sparsity[None] == 8 and sparsity[60.0] < 8  # a 60 m taper on 8 points over 400 m drops entries


def test_fig7_model_rows_match_scaling_model(drawn):
    store, out_dir, _ = drawn["sizes"]
    rows = read_figure_csv(out_dir / "fig7_scaling.csv")
    model_rows = [r for r in rows if r["source"] == "model"]
    points = _stored(store)
    cfg = config_from_document(next(iter(points.values()))["config"])
    by_n = {rec["n"]: rec for rec in scaling_model(cfg, sorted({int(r["x"]) for r in model_rows}))}
    assert model_rows
    for r in model_rows:
        rec = by_n[int(r["x"])]
        if r["panel"] == "clock":
            assert r["y"] == rec["clock_for_mean" if r["series"].startswith("mean") else "clock_for_variance"]
        else:
            assert r["y"] == rec["success_inversion" if r["series"].startswith("inversion") else "success_variance"]
    # the model extends to the data set's 16 rows, beyond the simulated n ≤ 8
    assert max(int(r["x"]) for r in rows if r["panel"] == "diagnostics") == 16


@pytest.mark.parametrize("evolution,encoding", [("exact", "dilation"), ("walk", "dilation"), ("walk", "lcu")])
def test_filter_model_reproduces_the_simulated_circuits(drawn, evolution, encoding):
    """The closed-form model behind fig. 7 equals the stored exact-probability runs (qgp.readout.filter_model is exact here)."""
    from qgp.classical.problem import problem_from_config

    store, _, _ = drawn["oracles"] if encoding == "dilation" else drawn["sizes"]
    cases = [p for p in _stored(store).values() if p["summary"]["evolution"] == evolution]
    if encoding == "lcu":  # no stored LCU run (too slow for a fast test): run one c = 3, n = 4 point here
        from qgp.readout.inference import infer
        from qgp.reports.run import config_document

        cfg = config_from_document(cases[0]["config"])
        cfg = replace(cfg, data=replace(cfg.data, n_train=4), circuit=replace(cfg.circuit, clock_qubits=3, encoding="lcu"))
        result = infer(problem_from_config(cfg), cfg.circuit, cfg.readout, progress=None)
        cases = [{"config": json.loads(json.dumps(config_document(cfg))), "summary": result.summary()}]
    assert cases
    for p in cases:
        cfg = config_from_document(p["config"])
        got = model_errors(problem_from_config(cfg), cfg.circuit)
        for key, value in got.items():
            assert value == pytest.approx(p["summary"][key], rel=1e-9, abs=1e-12), key


@pytest.mark.parametrize("evolution,encoding", [("exact", "dilation"), ("walk", "dilation"), ("walk", "lcu")])
@pytest.mark.parametrize("clock", [3, 5])
def test_model_inversion_constants_match_build_inversion(evolution, encoding, clock):
    from qgp.circuits.inversion import build_inversion
    from qgp.settings import CircuitSettings
    from qgp.circuits.methods import method_alpha
    from qgp.sweeps.figures.model import _model_inversion
    from qgp.classical.system import eigenvalue_bounds

    rng = np.random.default_rng(5)
    X = rng.normal(size=(4, 4))
    A = X @ X.T + 0.3 * np.eye(4)
    bounds = eigenvalue_bounds(A, 0.3)
    settings = CircuitSettings(clock_qubits=clock, evolution=evolution, encoding=encoding)
    alpha = method_alpha(A, settings, float(np.linalg.eigvalsh(A)[-1]))  # None for the exact oracle
    for rotation in ("inverse", "inverse_sqrt"):
        ref = build_inversion(A, settings, rotation, bounds, form="simulation")
        got = _model_inversion(bounds, alpha, settings, rotation)
        assert got.scale == pytest.approx(ref.scale, rel=1e-12)
        assert got.floor == pytest.approx(ref.floor, rel=1e-12)
        np.testing.assert_allclose(got.clock_eigenvalues, ref.clock_eigenvalues, rtol=1e-12, atol=1e-12)
        np.testing.assert_array_equal(got.admitted, ref.admitted)
        if evolution == "walk":
            assert got.alpha == pytest.approx(ref.alpha, rel=1e-12)


def test_no_data_skips_every_figure_with_a_note(tmp_path, capsys):
    outcomes = draw_figures([], tmp_path / "none")
    assert [o.name for o in outcomes] == list(FIGURES)
    assert all(not o.written and o.note == "skipped: the store has no finished points" for o in outcomes)
    assert not (tmp_path / "none").exists() or not any((tmp_path / "none").iterdir())
    assert make_figures([], tmp_path / "none") == []


def test_figures_command_prints_written_and_skipped(drawn, tmp_path, capsys):
    store, _, _ = drawn["taper"]
    assert figures_command(store, tmp_path / "out") == 0
    text = capsys.readouterr().out
    assert "wrote" in text and "fig5_taper_sparsity" in text
    assert text.count("skipped: needs") == len(FIGURES) - 1
    assert make_figures(store, tmp_path / "only", only=["fig5"]) == sorted(
        (tmp_path / "only").iterdir(), key=lambda p: [".pdf", ".png", ".csv", ".txt"].index(p.suffix)
    )


def test_figures_command_fails_when_nothing_can_be_drawn(drawn, tmp_path, capsys):
    store, _, _ = drawn["taper"]
    assert figures_command(store, tmp_path / "out", only=["fig7"]) == 1
    captured = capsys.readouterr()
    assert "fig7_scaling: skipped" in captured.out and "no figure" in captured.err
