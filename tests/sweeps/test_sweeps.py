"""Sweeps and the result store: grid expansion, validation, failures, resume, and execution modes.

Points use the bundled demo data with small exact-oracle circuits (3–4 clock qubits, 6 training
rows), about a second each. The checks follow common practice for resumable batch jobs and data
stores: an interrupted run loses only unfinished work, a rerun never alters finished results, and
a file that is not ours is refused without a single byte written.
"""

from __future__ import annotations

import contextlib
import csv
import hashlib
import itertools
import json
import math
import os
import re
import shutil
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import qgp
from qgp.tools.cli import main
from qgp.demo import demo_config_path
from qgp.errors import QgpError
from qgp.sweeps.store import APPLICATION_ID, SCHEMA_VERSION, bind_store, open_store
from qgp.sweeps.execute import run_sweep
from qgp.sweeps.grid import load_sweep, parse_sweep, valid_keys

REPO = Path(qgp.__file__).resolve().parents[1]

# Inline base: the demo data with a small, fast circuit (exact oracle, no block register).
BASE = """\
[base.data]
train = "data/ice_train.csv"
test = "data/ice_test.csv"
target = "ice_cm"
n_train = 6

[base.kernel]
family = "rbf"
lengthscale = 45.0
signal_variance = 16.0

[base.noise]
target_condition = 10.0

[base.circuit]
clock_qubits = 3
evolution = "exact"

[base.readout]
seed = 11
"""

# Four points: clock qubits 3, 4 crossed with a paired (κ, shots) axis; shots > 0 covers the SEs.
FOUR = BASE + """
[axes]
"circuit.clock_qubits" = [3, 4]

[paired]
"noise.target_condition" = [5.0, 20.0]
"readout.shots" = [0, 400]
"""

# Numbers that legitimately differ between two runs of the same point.
VOLATILE = {"elapsed_seconds", "timings"}


def _project(tmp_path: Path, text: str, name: str = "sweep.toml") -> Path:
    data = tmp_path / "data"
    if not data.exists():
        data.mkdir()
        for f in ("ice_train.csv", "ice_test.csv", "ice_transect.toml"):
            shutil.copy(demo_config_path().parent / f, data / f)
    path = tmp_path / name
    path.write_text(text)
    return path


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _numbers(store_path: Path) -> dict[int, tuple]:
    """Everything a point stored that must not depend on how it was run."""
    with open_store(store_path) as store:
        out = {}
        for p in store.points(None):
            summary = {k: v for k, v in (p.summary or {}).items() if k not in VOLATILE}
            out[p.grid_index] = (p.status, p.axes, p.config_hash, summary, store.test_points(p.grid_index))
        return out


def _assert_same_numbers(a, b, path: str = "") -> None:
    """Equal structure and non-float values; floats equal to 1e-12 relative. Runs with other
    thread counts (1 worker × 2 threads against 2 workers × 1) may sum in another order, which
    moves the last bits of a float (IEEE 754 addition is not associative: common practice)."""
    if isinstance(a, float) and isinstance(b, float):
        assert b == pytest.approx(a, rel=1e-12, abs=1e-300), f"{path}: {a!r} vs {b!r}"
    elif isinstance(a, dict) and isinstance(b, dict):
        assert a.keys() == b.keys(), f"{path}: keys differ: {sorted(set(a) ^ set(b))}"
        for k in a:
            _assert_same_numbers(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        assert len(a) == len(b), f"{path}: lengths {len(a)} and {len(b)}"
        for i, (x, y) in enumerate(zip(a, b)):
            _assert_same_numbers(x, y, f"{path}[{i}]")
    else:
        assert a == b, f"{path}: {a!r} vs {b!r}"


# -- grid expansion and validation ---------------------------------------------------------------


def test_grid_is_the_product_of_the_axes_then_the_paired_group(tmp_path):
    sweep = load_sweep(
        _project(
            tmp_path,
            BASE
            + """
[axes]
"circuit.clock_qubits" = [3, 4]
"readout.seed" = [1, 2, 2]

[paired]
"circuit.evolution" = ["exact", "walk"]
"circuit.encoding" = [{}, "lcu"]
""",
        )
    )
    assert sweep.size == 2 * 3 * 2
    assert sweep.axis_keys == ("circuit.clock_qubits", "readout.seed", "circuit.evolution", "circuit.encoding")
    assert [p.grid_index for p in sweep.points] == list(range(12))
    # Last axis fastest; the paired group moves as one axis; {} leaves the key out (null in the axes).
    assert dict(sweep.points[0].axes) == {
        "circuit.clock_qubits": 3,
        "readout.seed": 1,
        "circuit.evolution": "exact",
        "circuit.encoding": None,
    }
    assert "encoding" not in sweep.points[0].config["circuit"]
    assert dict(sweep.points[1].axes)["circuit.encoding"] == "lcu"
    assert sweep.points[1].config["circuit"] == {"clock_qubits": 3, "evolution": "walk", "encoding": "lcu"}
    assert dict(sweep.points[2].axes)["readout.seed"] == 2
    assert dict(sweep.points[6].axes)["circuit.clock_qubits"] == 4
    # Repeated values are separate points: every point of the product gets its own row.
    assert sweep.points[2].config_hash != sweep.points[0].config_hash
    assert sweep.points[2].config_hash == sweep.points[4].config_hash
    # Relative data paths of an inline base resolve against the sweep file's folder.
    assert sweep.points[0].config["data"]["train"] == str((tmp_path / "data" / "ice_train.csv").resolve())


@settings(max_examples=25, deadline=None)
@given(
    lengths=st.lists(st.integers(1, 3), min_size=0, max_size=3),
    paired=st.integers(0, 3),
)
def test_grid_holds_every_combination_exactly_once(lengths, paired):
    # Property: |grid| = product of the axis lengths × the paired length, and each combination of
    # axis values appears once, in lexicographic (row-major) order.
    keys = ["readout.seed", "readout.shots", "data.subsample_seed"][: len(lengths)]
    axes = {k: list(range(1, n + 1)) for k, n in zip(keys, lengths)}
    raw = {"base": _inline_base(), "axes": axes}
    if paired:
        raw["paired"] = {"circuit.clock_qubits": list(range(3, 3 + paired)), "kernel.signal_variance": [1.0 + i for i in range(paired)]}
    if not axes and not paired:
        with pytest.raises(QgpError, match="no axes"):
            parse_sweep(raw, base_dir=demo_config_path().parent)
        return
    sweep = parse_sweep(raw, base_dir=demo_config_path().parent)
    expected = list(itertools.product(*axes.values(), *([range(paired)] if paired else [])))
    assert sweep.size == len(expected) == math.prod(lengths) * max(paired, 1)
    got = [tuple(p.axes[k] for k in keys) + ((p.axes["circuit.clock_qubits"] - 3,) if paired else ()) for p in sweep.points]
    assert got == expected
    if paired:
        assert all(p.axes["kernel.signal_variance"] == p.axes["circuit.clock_qubits"] - 2.0 for p in sweep.points)


def _inline_base() -> dict:
    return {
        "data": {"train": "ice_train.csv", "test": "ice_test.csv", "target": "ice_cm"},
        "noise": {"target_condition": 10.0},
        "circuit": {"evolution": "exact", "clock_qubits": 3},
    }


def test_base_file_paths_resolve_against_the_base_folder(tmp_path):
    _project(tmp_path, "")
    sub = tmp_path / "sweeps"
    sub.mkdir()
    (sub / "s.toml").write_text(
        'base = "../data/ice_transect.toml"\n[axes]\n"data.n_train" = [4, 8]\n"circuit.clock_qubits" = [3]\n'
    )
    sweep = load_sweep(sub / "s.toml")
    assert sweep.size == 2
    cfg = sweep.points[1].config
    assert cfg["data"]["train"] == str((tmp_path / "data" / "ice_train.csv").resolve())
    assert cfg["data"]["n_train"] == 8 and cfg["circuit"]["evolution"] == "walk"  # the rest comes from the base
    assert set(sweep.data_sha256) == {
        str((tmp_path / "data" / f).resolve()) for f in ("ice_train.csv", "ice_test.csv")
    }


def test_unquoted_dotted_keys_are_the_same_axes(tmp_path):
    quoted = load_sweep(_project(tmp_path, BASE + '[axes]\n"circuit.clock_qubits" = [3, 4]\n', "a.toml"))
    bare = load_sweep(_project(tmp_path, BASE + "[axes]\ncircuit.clock_qubits = [3, 4]\n", "b.toml"))
    assert [p.config_hash for p in quoted.points] == [p.config_hash for p in bare.points]


@pytest.mark.parametrize(
    "text, message",
    [
        (BASE + '[axes]\n"circuit.clock_qubit" = [3]\n',
         r"unknown key 'circuit.clock_qubit' in \[axes\] \(did you mean 'circuit.clock_qubits'\?\).*valid ones: data.train"),
        (BASE + '[axes]\n"clock_qubits" = [3]\n', r"unknown key 'clock_qubits' in \[axes\]"),
        (BASE + '[axes]\n"circuit.clock_qubits" = 3\n', r"\"circuit.clock_qubits\" must be a list of values"),
        (BASE + '[axes]\n"circuit.clock_qubits" = []\n', r"\"circuit.clock_qubits\" is an empty list"),
        (BASE + '[paired]\n"readout.seed" = [1, 2]\n"readout.shots" = [0, 10, 20]\n',
         r"\[paired\] lists must have equal lengths \(readout.seed has 2, readout.shots has 3\)"),
        (BASE + '[axes]\n"readout.seed" = [1]\n[paired]\n"readout.seed" = [1]\n',
         r"readout.seed appear in both \[axes\] and \[paired\]"),
        (BASE, r"no axes; add an \[axes\] table"),
        ('[axes]\n"readout.seed" = [1]\n', r"no base config"),
        ('base = "missing.toml"\n[axes]\n"readout.seed" = [1]\n', r"base config .*missing.toml does not exist"),
        (BASE + '[axes]\n"readout.seed" = [1]\n[grid]\nx = 1\n', r"unknown top-level key 'grid'"),
        (BASE + '[axes]\n"circuit.clock_qubits" = [3, 0]\n',
         r"grid point 1 \(circuit.clock_qubits=0\) is not a valid config: .*clock_qubits must be ≥ 1"),
        (BASE + '[axes]\n"circuit.encoding" = ["lcu"]\n',
         r"grid point 0 \(circuit.encoding=\"lcu\"\) is not a valid config: .*applies only to evolution"),
        (BASE + '[axes]\n"noise.variance" = [0.1]\n',
         r"grid point 0 .* sets both variance and target_condition"),
        (BASE + '[axes]\n"data.train" = ["nope.csv"]\n', r"grid point 0 .*nope.csv does not exist"),
        (BASE + '[axes]\n"readout.seed" = [{ a = 1 }]\n', r"holds a table .*or \{\} to leave the key out"),
    ],
)
def test_sweep_validation_errors(tmp_path, text, message):
    with pytest.raises(QgpError, match=message):
        load_sweep(_project(tmp_path, text))


def test_every_point_is_validated_before_any_runs(tmp_path):
    # The last point is invalid: nothing runs and no store is made.
    path = _project(tmp_path, BASE + '[axes]\n"circuit.clock_qubits" = [3, 4, 99]\n')
    store = tmp_path / "r.sqlite"
    assert main(["sweep", str(path), "--store", str(store), "--quiet"]) == 2
    assert not store.exists()


def test_unset_marker_lets_an_axis_replace_the_base_noise(tmp_path):
    sweep = load_sweep(
        _project(tmp_path, BASE + '[axes]\n"noise.variance" = [0.5, 1.0]\n"noise.target_condition" = [{}]\n')
    )
    assert [p.config["noise"] for p in sweep.points] == [{"variance": 0.5}, {"variance": 1.0}]


def test_valid_keys_cover_every_config_section():
    keys = valid_keys()
    assert {"circuit.clock_qubits", "noise.target_condition", "readout.seed", "data.n_train", "kernel.support"} <= set(keys)


# -- the store refuses what is not a qgp store -------------------------------------------------------


def _foreign_sqlite(path: Path) -> None:
    con = sqlite3.connect(path)
    con.execute("CREATE TABLE points (x INTEGER)")
    con.execute("INSERT INTO points VALUES (1)")
    con.commit()
    con.close()


def _other_schema_version(path: Path) -> None:
    con = sqlite3.connect(path)
    con.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    con.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    con.execute("CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL)")
    con.commit()
    con.close()


@pytest.mark.parametrize(
    "make, message",
    [
        (lambda p: p.write_bytes(os.urandom(4096)), "is not an SQLite file"),
        (lambda p: p.write_bytes(b""), "is an empty file"),
        (lambda p: p.write_text("a,b\n1,2\n"), "is not an SQLite file"),
        (_foreign_sqlite, "is an SQLite database but not a qgp result store"),
        (_other_schema_version, f"schema version {SCHEMA_VERSION + 1}, but this qgp reads version {SCHEMA_VERSION}"),
    ],
    ids=["random-bytes", "empty", "csv", "foreign-sqlite", "other-schema-version"],
)
def test_foreign_files_are_refused_and_left_untouched(tmp_path, capsys, make, message):
    sweep_path = _project(tmp_path, FOUR)
    target = tmp_path / "results.sqlite"
    make(target)
    before = _sha(target)
    with pytest.raises(QgpError, match=message) as err:
        open_store(target)
    assert str(target) in str(err.value) and "left untouched" in str(err.value)
    # The CLI refuses too, before any point runs, with one line naming the file.
    assert main(["sweep", str(sweep_path), "--store", str(target), "--quiet", "--workers", "1"]) == 2
    line = capsys.readouterr().err.strip()
    assert line.startswith("qgp: error: ") and str(target) in line and "\n" not in line
    assert main(["sweep", "--status", str(target)]) == 2
    assert main(["results", str(target), "--csv", str(tmp_path / "out.csv")]) == 2
    assert _sha(target) == before
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith("results")) == ["results.sqlite"]


def test_damaged_store_is_refused_and_left_untouched(tmp_path):
    sweep = load_sweep(_project(tmp_path, FOUR))
    target = tmp_path / "results.sqlite"
    _bind(target, sweep).close()
    data = bytearray(target.read_bytes())
    assert len(data) > 4096
    data[1024:] = os.urandom(len(data) - 1024)  # keep the header (and its qgp marker), wreck the pages
    target.write_bytes(bytes(data))
    before = _sha(target)
    with pytest.raises(QgpError, match="damaged") as err:
        open_store(target)
    assert "left untouched" in str(err.value)
    with pytest.raises(QgpError, match="damaged"):
        run_sweep(sweep, target, workers=1, progress=False)
    assert _sha(target) == before


def _bind(path: Path, sweep):
    return bind_store(
        path,
        grid=[p.entry() for p in sweep.points],
        sweep_file=str(sweep.source),
        sweep_text=sweep.text,
        sweep_sha256=sweep.sha256,
        data_sha256=sweep.data_sha256,
        qgp_version=qgp.__version__,
        versions={},
    )


def test_a_store_is_bound_to_its_sweep_and_data(tmp_path):
    four = load_sweep(_project(tmp_path, FOUR))
    target = tmp_path / "results.sqlite"
    with _bind(target, four) as store:
        assert store.meta["grid_size"] == 4 and store.meta["schema_version"] == SCHEMA_VERSION
        assert store.to_run() == [0, 1, 2, 3]
    # The same grid again (another spelling, a comment) is accepted...
    same = load_sweep(_project(tmp_path, "# the same grid\n" + FOUR, "same.toml"))
    _bind(target, same).close()
    # ...another grid is not, and neither is the same grid over a changed data file.
    other = load_sweep(_project(tmp_path, FOUR.replace("[3, 4]", "[3, 5]"), "other.toml"))
    with pytest.raises(QgpError, match=r"holds results of a different sweep .*grid point 2 differs"):
        run_sweep(other, target, workers=1, progress=False)
    with (tmp_path / "data" / "ice_train.csv").open("a") as fh:
        fh.write("400.0,30.0\n")
    changed = load_sweep(_project(tmp_path, FOUR, "changed.toml"))
    with pytest.raises(QgpError, match=r"data file\(s\) changed since the store was made \(.*ice_train.csv: sha256"):
        run_sweep(changed, target, workers=1, progress=False)
    with open_store(target) as store:
        assert store.points(None) == []


# -- running: failures, retry, equal numbers across execution modes ------------------------------


def test_a_failing_point_is_recorded_the_sweep_goes_on_and_retry_reruns_it(tmp_path, capsys, monkeypatch):
    # Point 1's memory cap (1e-9 GiB) passes validation but no simulation fits under it: it fails
    # deterministically at run time.
    path = _project(tmp_path, BASE + '[axes]\n"readout.memory_cap_gib" = [{}, 1e-9]\n"circuit.clock_qubits" = [3]\n')
    store = tmp_path / "r.sqlite"
    assert main(["sweep", str(path), "--store", str(store), "--workers", "1", "--quiet"]) == 1
    assert "1 point(s) failed" in capsys.readouterr().err
    with open_store(store) as s:
        done, failed = s.points("done"), s.points("failed")
        assert [p.grid_index for p in done] == [0] and [p.grid_index for p in failed] == [1]
        assert "above the memory cap" in failed[0].error and failed[0].summary is None
        assert s.test_points(1) == [] and len(s.test_points(0)) == done[0].summary["n_test"]
        first = {r["grid_index"]: r for r in s.point_rows()}
    assert main(["sweep", "--status", str(store)]) == 0
    out = capsys.readouterr().out
    assert "2 points: 1 done, 1 failed, 0 pending" in out and "readout.memory_cap_gib=1e-09" in out
    assert "above the memory cap" in out

    # Without --retry-failed a rerun changes nothing; with it, only the failed point runs again.
    report = run_sweep(load_sweep(path), store, workers=1, progress=False)
    assert report.ran == 0 and report.skipped == 2
    report = run_sweep(load_sweep(path), store, workers=1, retry_failed=True, progress=False)
    assert report.ran == 1 and report.failed == 1
    with open_store(store) as s:
        again = {r["grid_index"]: r for r in s.point_rows()}
    assert again[0] == first[0]
    assert again[1]["started"] > first[1]["finished"] and again[1]["status"] == "failed"

    # A transient failure (here an injected bug in one point) is stored with its traceback, and
    # --retry-failed turns it into a done point once the cause is gone.
    path2 = _project(tmp_path, BASE + '[axes]\n"circuit.clock_qubits" = [3, 4]\n', "two.toml")
    store2 = tmp_path / "r2.sqlite"
    import qgp.readout.inference

    real_infer = qgp.readout.inference.infer

    def flaky(problem, circuit, readout, **kw):
        if circuit.clock_qubits == 4:
            raise RuntimeError("injected failure")
        return real_infer(problem, circuit, readout, **kw)

    monkeypatch.setattr(qgp.readout.inference, "infer", flaky)
    assert main(["sweep", str(path2), "--store", str(store2), "--workers", "1", "--quiet"]) == 1
    with open_store(store2) as s:
        (bad,) = s.points("failed")
        assert bad.grid_index == 1 and bad.error == "RuntimeError: injected failure"
        assert "Traceback" in s.point_rows()[1]["traceback"]
    monkeypatch.setattr(qgp.readout.inference, "infer", real_infer)
    assert main(["sweep", str(path2), "--store", str(store2), "--workers", "1", "--quiet", "--retry-failed"]) == 0
    with open_store(store2) as s:
        assert [p.grid_index for p in s.points("done")] == [0, 1] and s.points("failed") == []


@pytest.fixture(scope="module")
def four_points(tmp_path_factory):
    """The four-point sweep run inline (1 worker) and in a pool of 2 worker processes."""
    tmp = tmp_path_factory.mktemp("four")
    sweep = load_sweep(_project(tmp, FOUR))
    one, two = tmp / "one.sqlite", tmp / "two.sqlite"
    r1 = run_sweep(sweep, one, workers=1, progress=False)
    r2 = run_sweep(sweep, two, workers=2, progress=False)
    return sweep, one, two, r1, r2


def test_one_and_two_workers_store_the_same_numbers(four_points):
    sweep, one, two, r1, r2 = four_points
    assert (r1.mode, r1.workers) == ("inline", 1)
    assert (r2.mode, r2.workers) == ("processes", 2)
    assert r1.store_done == r2.store_done == 4
    a, b = _numbers(one), _numbers(two)
    _assert_same_numbers(a, b)
    assert a[3][3]["shots"] == 400 and a[3][4][0]["mean_quantum_se"] is not None
    assert a[0][4][0]["mean_quantum_se"] is None


def test_two_workers_share_the_cores_without_oversubscribing(four_points):
    from qgp.readout.simulate import cpu_count

    r2 = four_points[4]
    assert r2.workers * r2.threads_per_worker <= max(cpu_count(), r2.workers)


def test_dask_local_cluster_stores_the_same_numbers_as_the_process_pool(four_points, tmp_path):
    pytest.importorskip("dask.distributed", reason="dask[distributed] is not installed (pip install 'qgp[cluster]')")
    sweep, _, two, _, _ = four_points
    store = tmp_path / "dask.sqlite"
    report = run_sweep(sweep, store, cluster="local", workers=2, progress=False)
    assert report.mode == "dask" and report.store_done == 4
    _assert_same_numbers(_numbers(store), _numbers(two))


def test_cluster_without_dask_says_how_to_install_it(tmp_path, monkeypatch):
    sweep = load_sweep(_project(tmp_path, FOUR))
    monkeypatch.setitem(sys.modules, "dask.distributed", None)  # makes the import fail
    with pytest.raises(QgpError, match=r"pip install 'qgp\[cluster\]'"):
        run_sweep(sweep, tmp_path / "r.sqlite", cluster="local", progress=False)
    assert not (tmp_path / "r.sqlite").exists()


def test_status_and_results_export_tidy_tables(four_points, tmp_path, capsys):
    sweep, one, _, _, _ = four_points
    assert main(["sweep", "--status", str(one)]) == 0
    out = capsys.readouterr().out
    assert "4 points: 4 done, 0 failed, 0 pending" in out and str(sweep.source) in out

    csv_path = tmp_path / "points.csv"
    assert main(["results", str(one), "--csv", str(csv_path)]) == 0
    with csv_path.open() as fh:
        rows = list(csv.DictReader(fh))
    header = list(rows[0])
    assert header[:4] == ["grid_index", "circuit.clock_qubits", "noise.target_condition", "readout.shots"]
    assert {"mean_max_abs_error", "condition_number", "total_qubits", "test_rmse.exact"} <= set(header)
    # Text records of the summary (what produced each number) stay in summary_json, not in the table.
    assert not [h for h in header if h.startswith(("provenance.", "caveat", "config."))], header
    with open_store(one) as store:
        stored = store.points()
        assert [int(r["grid_index"]) for r in rows] == [p.grid_index for p in stored]
        for r, p in zip(rows, stored):
            # Numbers are written with repr: they read back as exactly the stored floats.
            assert float(r["mean_max_abs_error"]) == p.summary["mean_max_abs_error"]
            assert float(r["condition_number"]) == p.summary["condition_number"]
            assert json.loads(r["circuit.clock_qubits"]) == p.axes["circuit.clock_qubits"]
        n_test = stored[0].summary["n_test"]
        first = store.test_points(0)

    tp_path = tmp_path / "test_points.csv"
    assert main(["results", str(one), "--csv", str(tp_path), "--test-points"]) == 0
    with tp_path.open() as fh:
        tp = list(csv.DictReader(fh))
    assert len(tp) == 4 * n_test
    assert list(tp[0])[:6] == ["grid_index", "circuit.clock_qubits", "noise.target_condition", "readout.shots",
                               "test_index", "distance_m"]
    assert float(tp[1]["mean_error"]) == first[1]["mean_error"]
    assert float(tp[1]["distance_m"]) == first[1]["inputs"]["distance_m"]


def test_cli_usage_errors_are_one_line(tmp_path, capsys):
    path = _project(tmp_path, FOUR)
    assert main(["sweep", str(path)]) == 2
    assert "no --store given" in capsys.readouterr().err
    assert main(["sweep", str(path), "--store", str(tmp_path / "r.sqlite"), "--status", str(tmp_path / "r.sqlite")]) == 2
    assert "--status STORE summarises a store on its own" in capsys.readouterr().err
    assert main(["sweep", "--status", str(tmp_path / "none.sqlite")]) == 2
    assert "no result store at" in capsys.readouterr().err


# -- kill and resume -----------------------------------------------------------------------------


def _sweep_cli(path: Path, store: Path, *extra: str) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(filter(None, [str(REPO), os.environ.get("PYTHONPATH")]))}
    return subprocess.Popen(
        [sys.executable, "-m", "qgp.tools.cli", "sweep", str(path), "--store", str(store), "--quiet", *extra],
        cwd=REPO,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        start_new_session=True,  # its own process group, so the kill reaches its workers too
    )


def _wait_for_done(proc: subprocess.Popen, store: Path, at_least: int, timeout: float = 180.0) -> int:
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        if proc.poll() is not None:
            raise AssertionError(f"sweep ended early: {proc.communicate()}")
        if store.exists():
            try:
                with open_store(store) as s:
                    n = s.status().done
            except (QgpError, sqlite3.Error):
                n = 0
            if n >= at_least:
                return n
        time.sleep(0.05)
    raise AssertionError("no points committed in time")


def test_kill_and_resume_keeps_one_row_per_point_and_finished_rows_unchanged(tmp_path):
    path = _project(tmp_path, BASE + '[axes]\n"circuit.clock_qubits" = [3, 4]\n"readout.seed" = [1, 2, 3, 4, 5]\n')
    store = tmp_path / "r.sqlite"

    # 1. SIGKILL the whole process group after two points are committed: no chance to clean up.
    proc = _sweep_cli(path, store, "--workers", "2")
    _wait_for_done(proc, store, 2)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    with open_store(store) as s:
        killed = {r["grid_index"]: r for r in s.point_rows()}
        killed_tp = {i: s.test_points(i) for i in killed}
        assert s.status().pending > 0, "the sweep finished before the kill; nothing was tested"

    # 2. SIGTERM the sweep process alone: it stops its workers and exits as interrupted.
    proc = _sweep_cli(path, store, "--workers", "2")
    _wait_for_done(proc, store, len(killed) + 1)
    proc.send_signal(signal.SIGTERM)
    rc = proc.wait(timeout=60)
    assert rc == 130, proc.communicate()[1].decode()[-2000:]

    # 3. Run to the end.
    proc = _sweep_cli(path, store, "--workers", "2")
    out, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err.decode()
    con = sqlite3.connect(store)
    assert con.execute("SELECT COUNT(*), COUNT(DISTINCT grid_index) FROM points").fetchone() == (10, 10)
    con.close()
    with open_store(store) as s:
        final = {r["grid_index"]: r for r in s.point_rows()}
        assert sorted(final) == list(range(10)) and all(r["status"] == "done" for r in final.values())
        for i, row in killed.items():
            assert final[i] == row  # every column, timestamps included: never recomputed
            assert s.test_points(i) == killed_tp[i]
        n_test = final[0]["n_test"]
        assert all(len(s.test_points(i)) == n_test for i in final)


# -- no user file is ever lost or half-written (issue 10) -----------------------------------------

# Twenty points of about 1 s each (10 clock qubits; each lengthscale is another matrix, so nothing is
# reused between points): a sweep still running while a second process starts (about 2 s), or while
# its parent is killed; the tests stop it early.
SLOW = (
    BASE.replace("clock_qubits = 3", "clock_qubits = 10")
    + '[axes]\n"kernel.lengthscale" = ['
    + ", ".join(f"{40.0 + i}" for i in range(20))
    + "]\n"
)


def test_results_csv_never_replaces_the_store_or_a_file_without_force(four_points, tmp_path, capsys, monkeypatch):
    # Reproduced: `qgp results r.sqlite --csv r.sqlite` replaced the store with a CSV (exit 0), and
    # --csv onto any existing file overwrote it silently.
    _, one, _, _, _ = four_points
    store_sha = _sha(one)
    for extra in ([], ["--force"]):  # the input store is refused even with --force
        assert main(["results", str(one), "--csv", str(one), *extra]) == 2
        err = capsys.readouterr().err.strip()
        assert "is the input file" in err and "\n" not in err
    # Nor a file of the store that may not exist now: SQLite would read a CSV named STORE-wal as
    # the store's write-ahead log (SQLite's file naming: sqlite.org/tempfiles.html).
    for suffix in ("-wal", "-shm", ".lock"):
        companion = Path(str(one) + suffix)
        before = companion.exists() and _sha(companion)  # SQLite may keep -wal/-shm after a read
        assert main(["results", str(one), "--csv", str(companion), "--force"]) == 2
        assert "is a file of the store" in capsys.readouterr().err
        assert (companion.exists() and _sha(companion)) == before
    assert _sha(one) == store_sha

    mine = tmp_path / "mine.csv"
    mine.write_text("a user's own table\n")
    assert main(["results", str(one), "--csv", str(mine)]) == 2
    err = capsys.readouterr().err.strip()
    assert f"--csv {mine} already exists" in err and "--force" in err and "\n" not in err
    assert mine.read_text() == "a user's own table\n"
    assert main(["results", str(one), "--csv", str(tmp_path)]) == 2  # was an IsADirectoryError traceback
    err = capsys.readouterr().err.strip()
    assert err.startswith("qgp: error: --csv") and "is a folder" in err and "\n" not in err

    # Written atomically: an export that fails half-way leaves the old file whole and no temporary
    # file (temporary name in the same folder, then rename(2), which is atomic: POSIX).
    import qgp.sweeps.export

    real_cell, calls = qgp.sweeps.export._cell, []

    def failing_cell(value):
        calls.append(value)
        if len(calls) == 30:
            raise RuntimeError("disk full (injected)")
        return real_cell(value)

    monkeypatch.setattr(qgp.sweeps.export, "_cell", failing_cell)
    with pytest.raises(RuntimeError, match="injected"):
        qgp.sweeps.export.export_csv(one, mine, force=True)
    monkeypatch.setattr(qgp.sweeps.export, "_cell", real_cell)
    assert len(calls) == 30 and mine.read_text() == "a user's own table\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["mine.csv"]
    assert main(["results", str(one), "--csv", str(mine), "--force"]) == 0
    with mine.open() as fh:
        assert len(list(csv.DictReader(fh))) == 4


def test_a_second_sweep_on_a_store_in_use_refuses_and_runs_nothing(tmp_path):
    # Reproduced: two `qgp sweep` processes on one store both ran every point ("24 done" twice).
    from qgp.sweeps.lock import lock_path, lock_store

    path = _project(tmp_path, SLOW)
    store = tmp_path / "r.sqlite"
    first = _sweep_cli(path, store, "--workers", "1")
    try:
        _wait_for_done(first, store, 1)
        second = _sweep_cli(path, store, "--workers", "1")
        out, err = second.communicate(timeout=120)
        still_running = first.poll() is None
        with open_store(store) as s:
            done_when_refused = s.status().done
    finally:
        os.killpg(first.pid, signal.SIGKILL)
        first.wait(timeout=30)
    assert still_running, "the first sweep ended before the second tried the store; nothing was tested"
    assert second.returncode == 2 and out == b""
    line = err.decode().strip()
    assert "\n" not in line and line.startswith(f"qgp: error: {store} is being written by another qgp sweep")
    assert f"pid {first.pid} on " in line and "wait for it to finish or use another --store" in line
    assert 0 < done_when_refused < 20

    # The killed holder's lock file stays, naming it, but binds nobody: flock(2) locks belong to
    # the open file and are released when the holder dies (POSIX, common practice for pid files).
    assert json.loads(lock_path(store).read_text())["pid"] == first.pid
    with lock_store(store) as lock:
        assert lock.held and json.loads(lock_path(store).read_text())["pid"] == os.getpid()
    assert not lock_path(store).exists()  # a released lock leaves no file behind
    con = sqlite3.connect(store)
    assert con.execute("SELECT COUNT(*) = COUNT(DISTINCT grid_index) FROM points").fetchone() == (1,)
    con.close()


def test_a_store_held_by_this_process_is_refused_by_a_second_run(tmp_path):
    # The same rule inside one process (two threads or calls): flock locks are per open file.
    from qgp.sweeps.lock import lock_store

    sweep = load_sweep(_project(tmp_path, FOUR))
    store = tmp_path / "r.sqlite"
    with lock_store(store):
        with pytest.raises(QgpError, match=rf"is being written by another qgp sweep \(pid {os.getpid()} on "):
            run_sweep(sweep, store, workers=1, progress=False)
    assert not store.exists()


def _targets(store: Path) -> dict[int, list[float]]:
    with open_store(store) as s:
        return {p.grid_index: [tp["target"] for tp in s.test_points(p.grid_index)] for p in s.points()}


def test_every_point_uses_the_data_read_at_the_start_and_a_changed_file_stops_a_resume(tmp_path, monkeypatch, capsys):
    # Reproduced: a data file edited while a sweep ran was mixed in silently (points 0-6 saw one
    # file, 7-11 another). Here the test file's targets change while point 0 runs.
    import qgp.readout.inference

    path = _project(tmp_path, BASE + '[axes]\n"readout.seed" = [1, 2, 3, 4]\n')
    test_csv = (tmp_path / "data" / "ice_test.csv").resolve()
    original = test_csv.read_bytes()
    rows = list(csv.reader(original.decode().splitlines()))
    truth = [float(r[1]) for r in rows[1:]]
    edited = "\n".join([",".join(rows[0])] + [f"{r[0]},{float(r[1]) + 100.0}" for r in rows[1:]]) + "\n"
    sha_original, sha_edited = _sha(test_csv), hashlib.sha256(edited.encode()).hexdigest()
    store = tmp_path / "r.sqlite"
    real_infer, calls = qgp.readout.inference.infer, []

    def hooked(problem, circuit, readout, **kw):
        calls.append(1)
        if len(calls) in (1, 4):  # while points 0 (first run) and 2 (the resume) run
            test_csv.write_text(edited)
        if len(calls) == 3:  # stop the first run before point 2: a partial store
            raise KeyboardInterrupt
        return real_infer(problem, circuit, readout, **kw)

    monkeypatch.setattr(qgp.readout.inference, "infer", hooked)
    with pytest.raises(KeyboardInterrupt):
        run_sweep(load_sweep(path), store, workers=1, progress=False)
    assert _targets(store) == {0: truth, 1: truth}  # point 1 read its data after the edit

    # Resuming over the changed file is refused: the file, both hashes and the two ways out.
    with pytest.raises(QgpError) as err:
        run_sweep(load_sweep(path), store, workers=1, progress=False)
    msg = str(err.value)
    assert f"{test_csv}: sha256 {sha_original} when the store was made, {sha_edited} now" in msg
    assert "restore the file as it was" in msg and "new --store" in msg
    assert main(["sweep", str(path), "--store", str(store), "--workers", "1", "--quiet"]) == 2
    line = capsys.readouterr().err.strip()
    assert "\n" not in line and sha_edited in line

    # Restored, it resumes; an edit during the resume is again not mixed in, and is reported.
    test_csv.write_bytes(original)
    report = run_sweep(load_sweep(path), store, workers=1, progress=False)
    assert (report.ran, report.store_done) == (2, 4)
    assert _targets(store) == {i: truth for i in range(4)}
    assert report.data_changed == (str(test_csv),)
    warning = capsys.readouterr().err  # said even without a progress bar
    assert f"data file {test_csv} changed on disk during this sweep" in warning
    assert f"sha256 {sha_original[:12]}… at the start, {sha_edited[:12]}… now" in warning


def _proc_stat(pid: int) -> list[str] | None:
    """Fields of /proc/PID/stat after the command name (state first), or None if it is gone."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    return text.rsplit(")", 1)[1].split()


def _children(pid: int) -> dict[int, str]:
    """Child pid → its start time (to tell a reused pid apart), from /proc."""
    kids = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            stat = _proc_stat(int(entry.name))
            if stat is not None and int(stat[1]) == pid:
                kids[int(entry.name)] = stat[19]
    return kids


def _running(pid: int, started: str) -> bool:
    # A zombie ("Z") has exited; only reaping by its new parent (init here) is left.
    stat = _proc_stat(pid)
    return stat is not None and stat[19] == started and stat[0] != "Z"


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads worker pids from /proc (Linux only)")
def test_workers_exit_when_the_sweep_process_is_killed(tmp_path):
    # Reproduced: SIGKILL of the `qgp sweep` parent left its worker processes running idle.
    path = _project(tmp_path, SLOW)
    store = tmp_path / "r.sqlite"
    proc = _sweep_cli(path, store, "--workers", "2")
    try:
        _wait_for_done(proc, store, 1)
        kids = _children(proc.pid)
        workers = [p for p in kids if b"spawn_main" in Path(f"/proc/{p}/cmdline").read_bytes()]
        assert len(workers) == 2, kids
        os.kill(proc.pid, signal.SIGKILL)  # the parent alone, not its process group
        proc.wait(timeout=30)
        deadline = time.monotonic() + 10.0  # bounded wait: the watcher polls once a second
        while time.monotonic() < deadline and any(_running(p, kids[p]) for p in kids):
            time.sleep(0.1)
        left = [p for p in kids if _running(p, kids[p])]
    finally:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(proc.pid, signal.SIGKILL)
    # Every child is gone: both workers (prctl(PR_SET_PDEATHSIG) sends them SIGTERM when the
    # parent dies: Linux prctl(2)) and multiprocessing's resource tracker (its pipe closes).
    assert left == [], f"still running after the parent was killed: {left}"


def test_an_unreachable_scheduler_leaves_no_store(tmp_path):
    pytest.importorskip("dask.distributed", reason="dask[distributed] is not installed (pip install 'qgp[cluster]')")
    import socket

    sweep = load_sweep(_project(tmp_path, FOUR))
    with socket.socket() as s:  # a loopback port nothing listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    before = sorted(p.name for p in tmp_path.iterdir())
    address = f"tcp://127.0.0.1:{port}"
    with pytest.raises(QgpError, match=rf"cannot reach the Dask scheduler at '{address}' .*or use --cluster local"):
        run_sweep(sweep, tmp_path / "r.sqlite", cluster=address, connect_timeout=1.0, progress=False)
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # no store, no lock file


def test_zero_dask_workers_are_reported_while_waiting(tmp_path, monkeypatch, capsys):
    distributed = pytest.importorskip("dask.distributed", reason="dask[distributed] is not installed")
    import logging

    import qgp.sweeps.execute

    sweep = load_sweep(_project(tmp_path, BASE + '[axes]\n"readout.seed" = [1, 2]\n'))
    monkeypatch.setattr(qgp.sweeps.execute, "_DASK_WAIT_SECONDS", 0.5)
    seen: list[str] = []
    real_say = qgp.sweeps.execute._Progress.say
    with distributed.LocalCluster(n_workers=0, dashboard_address=None, silence_logs=logging.ERROR) as cluster:

        def say(self, msg, *, always=False):
            real_say(self, msg, always=always)
            if "waiting for Dask workers" in msg and not seen:
                seen.append(msg)
                cluster.scale(1)  # a worker arrives once the wait has been reported

        monkeypatch.setattr(qgp.sweeps.execute._Progress, "say", say)
        # Without the message the run would wait forever: a worker arrives after 20 s regardless,
        # so a silent wait fails the assertions below instead of hanging the test.
        fallback = threading.Timer(20.0, lambda: seen or cluster.scale(1))
        fallback.start()
        try:
            report = run_sweep(sweep, tmp_path / "r.sqlite", cluster=cluster.scheduler_address, progress=False)
        finally:
            fallback.cancel()
    assert seen and seen[0].startswith(f"waiting for Dask workers at {cluster.scheduler_address} (0 connected)")
    assert "waiting for Dask workers" in capsys.readouterr().err  # said even without a progress bar
    assert report.mode == "dask" and report.store_done == 2


@pytest.mark.parametrize(
    "case, message",
    [
        ("sweep-is-folder", r"sweep file .* is a folder; name the sweep's TOML file"),
        ("base-is-folder", r"base config .* is a folder; name the config's TOML file"),
        ("store-is-folder", r"--store .* is a folder, not a qgp result store; give a file name"),
        ("store-folder-missing", r"folder .*nowhere of --store .* does not exist; create it first"),
        ("store-is-a-csv", r"is not an SQLite file, so not a qgp result store; it was left untouched"),
        ("store-is-the-sweep-file", r"is not an SQLite file"),
    ],
)
def test_bad_sweep_inputs_are_one_line_errors_before_any_work(tmp_path, capsys, case, message):
    sweep_path = _project(tmp_path, FOUR)
    store = tmp_path / "r.sqlite"
    if case == "sweep-is-folder":
        sweep_path = tmp_path / "data"
    elif case == "base-is-folder":
        sweep_path = _project(tmp_path, 'base = "data"\n[axes]\n"readout.seed" = [1]\n', "folder-base.toml")
    elif case == "store-is-folder":
        store.mkdir()
    elif case == "store-folder-missing":
        store = tmp_path / "nowhere" / "r.sqlite"
    elif case == "store-is-a-csv":
        store.write_text("a,b\n1,2\n")
    elif case == "store-is-the-sweep-file":
        store = sweep_path
    before = {p.name: (p.is_dir() or _sha(p)) for p in tmp_path.iterdir()}
    assert main(["sweep", str(sweep_path), "--store", str(store), "--quiet", "--workers", "1"]) == 2
    line = capsys.readouterr().err.strip()
    assert "\n" not in line and line.startswith("qgp: error: ")
    assert re.search(message, line), line
    assert {p.name: (p.is_dir() or _sha(p)) for p in tmp_path.iterdir()} == before  # nothing made or changed
