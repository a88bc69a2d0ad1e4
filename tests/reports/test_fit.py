"""`qgp fit` end to end on a slice of the bundled demo: files, contracts, refusals.

The estimates themselves are checked against scikit-learn and the closed-form model in
tests/readout/test_likelihood.py and the search in tests/readout/test_training.py; here the whole
command runs small, and what it writes is checked against independent computations.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF as SkRBF
from sklearn.gaussian_process.kernels import ConstantKernel

from qgp.config import load_config, load_dataset
from qgp.demo import demo_config_path
from qgp.errors import QgpError
from qgp.reports.fit import SIZE_COLUMNS, SURFACE_COLUMNS, fit_outputs, run_fit
from qgp.tools.cli import main

DEMO = demo_config_path()


def _config(tmp_path: Path, fit: str = "sizes = [3, 5]", circuit: str = 'clock_qubits = 5\nevolution = "exact"') -> Path:
    text = f"""
[data]
train = "{(DEMO.parent / 'ice_train.csv').as_posix()}"
test = "{(DEMO.parent / 'ice_test.csv').as_posix()}"
target = "ice_cm"
n_train = 8

[kernel]
family = "rbf"
lengthscale = 45.0
signal_variance = 16.0

[noise]
variance = 4.0

[circuit]
{circuit}

[fit]
{fit}
restarts = 0
max_evaluations = 12
surface_points = 3
"""
    path = tmp_path / "fit.toml"
    path.write_text(text)
    return path


def test_fit_writes_its_contracts(tmp_path):
    cfg = load_config(_config(tmp_path))
    out = tmp_path / "out"
    doc = run_fit(cfg, out, quiet=True)
    for name in fit_outputs(True):
        assert (out / name).is_file(), name
    on_disk = json.loads((out / "fit.json").read_text())
    lml = on_disk["log_marginal_likelihood"]
    for key in ("exact", "quantum", "quantum_se"):
        assert key in lml
        for term in ("data_fit", "log_determinant"):
            assert key in lml[term]
    for which in ("exact", "quantum"):
        for key in ("lengthscale", "signal_variance", "noise_variance", "log_marginal_likelihood", "test_rmse", "test_nlpd"):
            assert on_disk["optimum"][which][key] is not None, (which, key)
    # The exact LML at the config's hyperparameters is scikit-learn's (R&W eq. 2.30), on the same 8 rows.
    ds = load_dataset(cfg.data)
    x, y = ds.X_train, ds.y_train
    assert x.shape == (8, 1)
    gpr = GaussianProcessRegressor(ConstantKernel(16.0, "fixed") * SkRBF(45.0, "fixed"), alpha=4.0, optimizer=None).fit(x, y - y.mean())
    assert abs(lml["exact"] - gpr.log_marginal_likelihood_value_) < 1e-9 * abs(lml["exact"])
    assert lml["quantum"] == doc["log_marginal_likelihood"]["quantum"]
    with open(out / "sizes.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert tuple(rows[0]) == SIZE_COLUMNS
    assert [int(r["size"]) for r in rows] == [3, 5]
    with open(out / "surface.csv", newline="") as fh:
        surface = list(csv.DictReader(fh))
    assert tuple(surface[0]) == SURFACE_COLUMNS
    assert {r["parameter"] for r in surface} == {"lengthscale", "signal_variance", "noise_variance"}


def test_fit_refuses_to_overwrite_and_bad_input(tmp_path, capsys):
    path = _config(tmp_path)
    out = tmp_path / "out"
    out.mkdir()
    (out / "fit.json").write_text("{}")
    with pytest.raises(QgpError, match="--force"):
        run_fit(load_config(path), out, quiet=True)
    assert (out / "fit.json").read_text() == "{}"
    assert main(["fit", str(path), "--out", str(out)]) != 0
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--force" in err[0]
    with pytest.raises(QgpError, match=r"\[fit\] sizes"):
        load_config(_config(tmp_path, fit="sizes = [1]"))
    with pytest.raises(QgpError, match="odd inversion degrees"):
        load_config(_config(tmp_path, fit="sizes = [4]", circuit='method = "qsvt"\ndegree = 5'))
    with pytest.raises(QgpError, match="unknown key 'size'"):
        load_config(_config(tmp_path, fit="size = [3]"))
