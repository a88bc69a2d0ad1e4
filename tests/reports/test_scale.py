"""`qgp scale` end to end on the bundled radar survey: files, contracts, refusals and the model's laws.

The audit's numbers are checked against dense LAPACK in tests/scale/test_conditioning.py and the cost
formulas against their papers in tests/scale/test_fault_tolerant.py; here the whole command runs on a
small slice of the bundled data, and what it writes is checked against independent computations.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np
import pytest

from qgp.config import load_config
from qgp.demo import scale_config_path
from qgp.errors import QgpError
from qgp.reports.scale import run_scale, scale_outputs
from qgp.scale.conditioning import CONDITIONING_COLUMNS
from qgp.scale.costs import COST_COLUMNS
from qgp.tools.cli import main

DEMO = scale_config_path()


def _config(tmp_path: Path, extra: str = "", kernel: str = "", noise: str = "variance = 2.25") -> Path:
    text = f"""
[data]
train = "{(DEMO.parent / 'ice_radar.csv.gz').as_posix()}"
test = "{(DEMO.parent / 'ice_test.csv').as_posix()}"
target = "ice_cm"

[kernel]
family = "rbf"
lengthscale = 45.0
signal_variance = 16.0
{kernel}

[noise]
{noise}

[scale]
n_min = 64
n_max = 512
classical_flop_rate = 1e10
cost_points_per_decade = 2
{extra}
"""
    path = tmp_path / "scale.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def tapered_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("scale")
    cfg = load_config(_config(tmp, kernel="support = 120.0"))
    doc = run_scale(cfg, tmp / "out", quiet=True)
    return doc, tmp / "out", cfg


def _rows(path: Path) -> list[dict]:
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def test_outputs_carry_the_contract_columns_and_keys(tapered_run):
    doc, out, _ = tapered_run
    for name in scale_outputs():
        assert (out / name).is_file(), name
    cond = _rows(out / "conditioning.csv")
    assert list(cond[0]) == list(CONDITIONING_COLUMNS)
    assert [int(r["n"]) for r in cond] == [64, 128, 256, 512]
    costs = _rows(out / "costs.csv")
    assert list(costs[0]) == list(COST_COLUMNS)
    assert {"n", "method"} <= set(costs[0]) and any("classical" in c for c in costs[0])
    sizes = sorted({int(r["n"]) for r in costs})
    assert sizes[0] == 100 and sizes[-1] == 10**6
    on_disk = json.loads((out / "scale.json").read_text())
    assert on_disk["schema"] == "qgp.scale/1"
    for key in ("fits", "crossover", "crossover_text", "assumptions", "lower_bound", "caveat"):
        assert key in on_disk, key
    assert set(on_disk["crossover"]) == {"walk", "exact", "qsvt"}  # Trotter has no model and says why
    assert "Pauli" in dict(on_disk["methods_without_model"])["trotter"]


def test_kappa_column_is_the_dense_condition_number_of_the_same_subset(tapered_run):
    # Reference: numpy's 2-norm condition number of K_n + σ²I built from the rows `[data] n_train = n`
    # would keep (qgp.config.load_dataset's permutation), computed here independently.
    from dataclasses import replace

    from qgp.classical.kernels import make_kernel
    from qgp.config import load_dataset

    doc, out, cfg = tapered_run
    cond = {int(r["n"]): float(r["condition_number"]) for r in _rows(out / "conditioning.csv")}
    for n in (64, 256):
        data = load_dataset(replace(cfg.data, n_train=n))
        K = make_kernel(cfg.kernel, 1)(data.X_train)
        expected = np.linalg.cond(K + 2.25 * np.eye(n), 2)
        assert cond[n] == pytest.approx(expected, rel=1e-8), (n, cond[n], expected)


def test_the_fitted_kappa_exponent_matches_a_least_squares_fit_of_the_written_rows(tapered_run):
    # Reference: numpy.polyfit on log κ against log n from conditioning.csv.
    doc, out, _ = tapered_run
    rows = _rows(out / "conditioning.csv")
    n = np.array([float(r["n"]) for r in rows])
    k = np.array([float(r["condition_number"]) for r in rows])
    slope = np.polyfit(np.log(n), np.log(k), 1)[0]
    assert doc["fits"]["condition_number"]["exponent"] == pytest.approx(slope, rel=1e-9)


def test_costs_use_the_fitted_law_and_the_stated_flop_rate(tapered_run):
    # Reference: the fitted law written in scale.json, evaluated by hand; Cholesky's n³/3 leading
    # term (Golub & Van Loan) at the configured 1e10 flop/s.
    doc, out, _ = tapered_run
    fit = doc["fits"]["condition_number"]
    for row in _rows(out / "costs.csv"):
        n = float(row["n"])
        assert float(row["condition_number"]) == pytest.approx(fit["prefactor"] * n ** fit["exponent"], rel=1e-9)
        assert float(row["classical_cholesky_seconds"]) >= n**3 / 3 / 1e10
        assert float(row["classical_best_seconds"]) == min(float(row["classical_cholesky_seconds"]), float(row["classical_cg_seconds"]))


def test_an_existing_output_is_never_replaced_without_force(tapered_run, tmp_path):
    _, out, cfg = tapered_run
    before = (out / "scale.json").read_bytes()
    with pytest.raises(QgpError, match="--force"):
        run_scale(cfg, out, quiet=True, figures=False)
    assert (out / "scale.json").read_bytes() == before


def test_scale_needs_a_fixed_noise_variance(tmp_path):
    cfg = load_config(_config(tmp_path, noise="target_condition = 50"))
    with pytest.raises(QgpError, match=r"\[noise\] variance"):
        run_scale(cfg, tmp_path / "out", quiet=True)
    assert not (tmp_path / "out").exists()


def test_bad_scale_keys_are_one_line_errors(tmp_path):
    with pytest.raises(QgpError, match="cost_n_max"):
        load_config(_config(tmp_path, extra="cost_n_max = 50"))
    path = _config(tmp_path)
    path.write_text(path.read_text().replace("n_min = 64", "n_min = 100"))
    with pytest.raises(QgpError, match="power of two"):
        load_config(path)
    with pytest.raises(QgpError, match="physical_error"):
        load_config(_config(tmp_path, extra="physical_error = 0.02"))


def test_cli_scale_writes_the_files_and_prints_the_exponents(tmp_path, capsys):
    path = _config(tmp_path, kernel="support = 120.0", extra='order = "file"')
    rc = main(["scale", str(path), "--out", str(tmp_path / "o"), "--no-figures", "--quiet"])
    assert rc == 0
    printed = capsys.readouterr().out
    assert "condition_number: n^" in printed and "crossover" in printed
    doc = json.loads((tmp_path / "o" / "scale.json").read_text())
    assert doc["data"]["order"] == "file"
    assert not (tmp_path / "o" / "figures").exists()
    assert math.isfinite(doc["fits"]["condition_number"]["exponent"])


def test_the_audit_is_kept_when_a_later_step_fails(tmp_path):
    # Two sizes cannot give a growth law, so the cost step refuses — after conditioning.csv is written.
    path = _config(tmp_path)
    path.write_text(path.read_text().replace("n_max = 512", "n_max = 128"))
    with pytest.raises(QgpError, match="at least 3"):
        run_scale(load_config(path), tmp_path / "out", quiet=True, figures=False)
    assert [int(r["n"]) for r in _rows(tmp_path / "out" / "conditioning.csv")] == [64, 128]
    assert not (tmp_path / "out" / "scale.json").exists()
