"""Config and data validation: every bad input gets a clear message before heavy work."""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from qgp.tools.cli import main
from qgp.config import load_config, load_dataset
from qgp.demo import demo_config_path
from qgp.errors import QgpError
from qgp.classical.problem import build_problem, problem_from_config
from qgp.classical.kernels import RBF

TRAIN = "x,y\n0.0,1.0\n1.0,2.0\n2.5,0.5\n"


def _write(tmp_path: Path, toml: str, train: str = TRAIN, test: str | None = None) -> Path:
    (tmp_path / "train.csv").write_text(train)
    if test is not None:
        (tmp_path / "test.csv").write_text(test)
    cfg = tmp_path / "c.toml"
    cfg.write_text(toml)
    return cfg


BASE = '[data]\ntrain = "train.csv"\ntarget = "y"\n'


def test_minimal_config_loads_with_defaults(tmp_path):
    cfg = load_config(_write(tmp_path, BASE + "[noise]\nvariance = 0.1\n"))
    assert cfg.kernel.family == "rbf" and cfg.data.center is True
    assert cfg.circuit.evolution == "walk" and cfg.circuit.encoding == "dilation"
    assert cfg.readout.shots == 0 and cfg.readout.strategy == "auto" and cfg.readout.engine == "auto"


@pytest.mark.parametrize(
    "extra, message",
    [
        ("[noise]\nvariance = 0.1\n[kernel]\nwidth = 2\n", "unknown key 'width' in \\[kernel\\]; valid keys are family"),
        ("[noise]\nvariance = 0.1\n[kernel]\nlengthscal = 2\n", "unknown key 'lengthscal' in \\[kernel\\] \\(did you mean 'lengthscale'\\?\\)"),
        ("[noise]\nvariance = 0.1\n[solver]\nx = 1\n", "unknown section \\[solver\\]; valid"),
        ("[noise]\nvariance = 0.1\n[circuits]\nx = 1\n", "unknown section \\[circuits\\] \\(did you mean 'circuit'\\?\\)"),
        ("[noise]\nvariance = 0.1\ntarget_condition = 10\n", "sets both variance and target_condition"),
        ("[noise]\nvariance = 'big'\n", "\\[noise\\] variance must be a number"),
        ("[noise]\nvariance = 0.1\n[kernel]\nfamily = 'cubic'\n", "must be one of 'rbf', 'matern32'"),
        ("[noise]\nvariance = 0.1\n[kernel]\nlengthscale = -1\n", "lengthscale must be > 0"),
        ("[noise]\nvariance = 0.1\n[circuit]\nclock_qubits = 0\n", "clock_qubits must be ≥ 1"),
        ("[noise]\nvariance = 0.1\n[circuit]\nclock_qubits = 2.5\n", "clock_qubits must be a whole number"),
        ("[noise]\nvariance = 0.1\n[circuit]\nevolution = 'exact'\nencoding = 'lcu'\n", "applies only to evolution"),
        ("[noise]\nvariance = 0.1\n[readout]\nstrategy = 'fast'\n", "must be one of 'auto', 'amortised', 'per-point', 'hybrid'"),
        ("[noise]\nvariance = 0.1\n[readout]\nshots = -5\n", "shots must be ≥ 0"),
        ("[noise]\ntarget_condition = 1.0\n", "target_condition must be > 1"),
        ("", "\\[noise\\] needs variance"),
        ("[noise]\nvariance = 0.1\n[kernel]\nsmoothness = 2\n", "applies only to family = \"wendland\""),
        ("[noise]\nvariance = 0.1\n[kernel]\nsignal_variance = 2\namplitude = 2\n", "deprecated name of signal_variance, which is also set"),
    ],
)
def test_bad_config_values(tmp_path, extra, message):
    with pytest.raises(QgpError, match=message):
        load_config(_write(tmp_path, BASE + extra))


def test_deprecated_amplitude_key_is_read_with_a_warning_naming_signal_variance(tmp_path):
    with pytest.warns(FutureWarning, match=r"\[kernel\] amplitude` is deprecated.*rename the key to `signal_variance`"):
        old = load_config(_write(tmp_path, BASE + "[noise]\nvariance = 0.1\n[kernel]\namplitude = 2.5\n"))
    new = load_config(_write(tmp_path, BASE + "[noise]\nvariance = 0.1\n[kernel]\nsignal_variance = 2.5\n"))
    assert old.kernel == new.kernel and new.kernel.signal_variance == 2.5


def test_missing_files(tmp_path):
    with pytest.raises(QgpError, match="does not exist"):
        load_config(tmp_path / "nope.toml")
    cfg = tmp_path / "c.toml"
    cfg.write_text('[data]\ntrain = "missing.csv"\ntarget = "y"\n[noise]\nvariance = 0.1\n')
    with pytest.raises(QgpError, match="missing.csv does not exist; the path is relative to the config file"):
        load_config(cfg)


def test_invalid_toml(tmp_path):
    with pytest.raises(QgpError, match="is not valid TOML"):
        load_config(_write(tmp_path, "[data\n"))


@pytest.mark.parametrize(
    "train, message",
    [
        ("x,y\n0,1\n1,abc\n", "data row 2 \\(file line 3\\), column 'y': 'abc' is not a number"),
        ("x,y\n0,1\nnan,2\n", "data row 2 \\(file line 3\\), column 'x': value nan is not finite"),
        ("x,y\n0,1\n1,inf\n", "data row 2 \\(file line 3\\), column 'y': value inf is not finite"),
        # Blank lines are skipped, and the file line still counts them.
        ("x,y\n0,1\n\n1,inf\n", "data row 2 \\(file line 4\\), column 'y': value inf is not finite"),
        ("x,y\n0,1\n", "1 training row\\(s\\); a GP needs at least 2"),
        ("x,z\n0,1\n1,2\n", "target column 'y' not in the header; columns are x, z"),
        ("x,y\n0,1\n1,2,3\n", "data row 2 \\(file line 3\\): 3 cells but the header has 2"),
    ],
)
def test_bad_csv(tmp_path, train, message):
    cfg = load_config(_write(tmp_path, BASE + "[noise]\nvariance = 0.1\n", train=train))
    with pytest.raises(QgpError, match=message):
        load_dataset(cfg.data)


def test_test_file_columns_must_match(tmp_path):
    cfg = load_config(_write(tmp_path, BASE + 'test = "test.csv"\n[noise]\nvariance = 0.1\n', test="w\n1\n"))
    with pytest.raises(QgpError, match="differ from the training file's"):
        load_dataset(cfg.data)


def test_test_file_without_target_is_fine_and_reordered(tmp_path):
    cfg = load_config(
        _write(
            tmp_path,
            '[data]\ntrain = "train.csv"\ntest = "test.csv"\ntarget = "y"\n[noise]\nvariance = 0.1\n',
            train="a,y,b\n0,1,5\n1,2,6\n2,0,7\n",
            test="b,a\n9,3\n",
        )
    )
    ds = load_dataset(cfg.data)
    assert ds.inputs == ("a", "b") and ds.y_test is None
    np.testing.assert_array_equal(ds.X_test, [[3.0, 9.0]])


def test_duplicate_inputs_without_noise(tmp_path):
    cfg = load_config(_write(tmp_path, BASE + "[noise]\nvariance = 0.0\n", train="x,y\n0,1\n0,2\n1,3\n"))
    with pytest.raises(QgpError, match="duplicate training inputs .* make K singular"):
        problem_from_config(cfg)


def test_api_shape_errors():
    k = RBF(signal_variance=1.0, lengthscale=1.0)
    with pytest.raises(QgpError, match="one value per row of X"):
        build_problem(np.zeros((3, 1)), np.zeros(4), k, noise_variance=0.1)
    with pytest.raises(QgpError, match="non-finite value"):
        build_problem(np.array([0.0, 1.0, np.inf]), np.zeros(3), k, noise_variance=0.1)
    with pytest.raises(QgpError, match="input column"):
        build_problem(np.zeros((3, 2)) + np.arange(3)[:, None], np.zeros(3), k, noise_variance=0.1, X_test=np.zeros((2, 3)))


def test_centering_is_added_back(tmp_path):
    cfg = load_config(demo_config_path())
    p = problem_from_config(cfg)
    assert p.center and abs(p.y_offset - p.y.mean()) < 1e-15
    assert abs(p.y_centered.mean()) < 1e-12
    # A far-away test point reverts to the prior mean, which is the training mean.
    far = p.exact.predict(np.array([[1e6]])).mean[0]
    assert abs(far - p.y.mean()) < 1e-9


def test_demo_inspect_json(capsys):
    assert main(["inspect", "--demo", "--json"]) == 0
    info = json.loads(capsys.readouterr().out)
    for key in ("n_train", "padded_size", "condition_number", "sparsity", "noise_variance", "eigenvalue_min", "eigenvalue_max"):
        assert key in info
    assert info["n_train"] == 16 and info["padded_size"] == 16
    # The demo sets target_condition = 20 (see qgp/demo/ice_transect.toml).
    assert abs(info["condition_number"] - 20.0) < 1e-9
    assert info["qubits"]["total"] == 4 + 8 + 1 + 1
    assert info["statevector_bytes"] == 16 * 2**14


def test_cli_error_is_one_line(tmp_path, capsys):
    bad = _write(tmp_path, BASE + "[noise]\nvariance = 0.1\n[kernel]\nwidth = 2\n")
    assert main(["inspect", str(bad)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("qgp: error:") and "\n" not in err and "Traceback" not in err


def test_console_script_version_and_help():
    out = subprocess.run([sys.executable, "-m", "qgp.tools.cli", "--version"], capture_output=True, text=True)
    assert out.returncode == 0 and out.stdout.startswith("qgp ")
    out = subprocess.run([sys.executable, "-m", "qgp.tools.cli", "inspect", "--help"], capture_output=True, text=True)
    assert out.returncode == 0 and "--json" in out.stdout


def test_training_subsample_is_reproducible_and_nested(tmp_path):
    rows = "x,y\n" + "".join(f"{i},{i * i}\n" for i in range(20))
    sets = []
    for n in (5, 10):
        cfg = load_config(_write(tmp_path, BASE + f"n_train = {n}\nsubsample_seed = 3\n[noise]\nvariance = 0.1\n", train=rows))
        ds = load_dataset(cfg.data)
        assert ds.X_train.shape == (n, 1) and np.all(np.diff(ds.X_train[:, 0]) > 0)  # file order kept
        np.testing.assert_array_equal(ds.y_train, ds.X_train[:, 0] ** 2)
        sets.append(set(ds.X_train[:, 0]))
    assert sets[0] < sets[1]
    cfg = load_config(_write(tmp_path, BASE + "n_train = 50\n[noise]\nvariance = 0.1\n", train=rows))
    with pytest.raises(QgpError, match="has only 20 rows"):
        load_dataset(cfg.data)


def test_qsvt_config_loads(tmp_path):
    cfg = load_config(_write(tmp_path, BASE + '[noise]\nvariance = 0.1\n[circuit]\nmethod = "qsvt"\nencoding = "lcu"\ntarget_error = 1e-3\n'))
    c = cfg.circuit
    assert (c.method, c.encoding, c.target_error, c.degree, c.clock_qubits) == ("qsvt", "lcu", 1e-3, None, 0)
    assert load_config(_write(tmp_path, BASE + '[noise]\nvariance = 0.1\n')).circuit.method == "phase_estimation"


@pytest.mark.parametrize(
    "circuit, fragment",
    [
        ('method = "qsvt"\n', "exactly one of target_error"),
        ('method = "qsvt"\ntarget_error = 1e-2\ndegree = 11\n', "exactly one of target_error"),
        ('method = "qsvt"\ntarget_error = 1.5\n', "target_error must be below 1"),
        ('method = "qsvt"\ntarget_error = 0\n', "target_error"),
        ('method = "qsvt"\ndegree = 0\n', "degree"),
        ('method = "qsvt"\ndegree = 10\n', "must be odd"),
        ('method = "qsvt"\ndegree = 11\nclock_qubits = 6\n', 'clock_qubits applies only to method = "phase_estimation"'),
        ('method = "qsvt"\ndegree = 11\nevolution = "walk"\n', 'evolution applies only to method = "phase_estimation"'),
        ('target_error = 1e-2\n', 'target_error applies only to method = "qsvt"'),
        ('method = "hhl"\n', "method"),
    ],
)
def test_bad_qsvt_settings_are_one_clear_error(tmp_path, circuit, fragment):
    with pytest.raises(QgpError, match=None) as err:
        load_config(_write(tmp_path, BASE + "[noise]\nvariance = 0.1\n[circuit]\n" + circuit))
    msg = str(err.value)
    assert fragment in msg and "\n" not in msg, msg


def test_gzipped_csv_reads_like_the_plain_file(tmp_path):
    # Reference: the same rows written plain; Python's gzip module compresses them.
    import gzip

    text = "x,y\n0.5,1.25\n1.5,-2.0\n"
    (tmp_path / "plain.csv").write_text(text)
    with gzip.open(tmp_path / "packed.csv.gz", "wt") as fh:
        fh.write(text)
    from qgp.config import read_csv

    Xp, yp, _ = read_csv(tmp_path / "plain.csv", "y")
    Xg, yg, _ = read_csv(tmp_path / "packed.csv.gz", "y")
    assert np.array_equal(Xp, Xg) and np.array_equal(yp, yg)
    (tmp_path / "broken.csv.gz").write_bytes(gzip.compress(text.encode())[:-8])
    with pytest.raises(QgpError, match="gzip"):
        read_csv(tmp_path / "broken.csv.gz", "y")


def test_bundled_radar_survey_loads_with_its_scale_section():
    from qgp.demo import scale_config_path

    cfg = load_config(scale_config_path())
    data = load_dataset(cfg.data)
    assert data.X_train.shape == (2**17, 1) and cfg.noise.variance == 2.25
    assert len(np.unique(data.X_train[:, 0])) == 2**17  # distinct inputs: K stays non-singular at σ² = 0
    assert cfg.scale.n_max == 2**17 and cfg.scale.target_condition == 100.0
