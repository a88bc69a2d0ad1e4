"""`qgp sweep --dry-run`: every point's plan before anything runs, and the points that would be refused."""

import shutil
from pathlib import Path

from qgp.demo import demo_config_path
from qgp.sweeps.dry_run import dry_run
from qgp.sweeps.grid import load_sweep
from qgp.tools.cli import main

SWEEP = """\
[base.data]
train = "data/ice_train.csv"
target = "ice_cm"
n_train = 8

[base.kernel]
lengthscale = 45.0
signal_variance = 16.0

[base.noise]
target_condition = 10.0

[base.circuit]
evolution = "walk"
encoding = "dilation"

[base.readout]
strategy = "amortised"

[axes]
"circuit.clock_qubits" = [3, 5]
"readout.memory_cap_gib" = [1.0, 1e-6]
"""


def _sweep(tmp_path: Path) -> Path:
    (tmp_path / "data").mkdir()
    shutil.copy(demo_config_path().parent / "ice_train.csv", tmp_path / "data" / "ice_train.csv")
    path = tmp_path / "sweep.toml"
    path.write_text(SWEEP)
    return path


def test_dry_run_plans_every_point_and_names_the_refused(tmp_path, capsys):
    path = _sweep(tmp_path)
    estimates = dry_run(load_sweep(path))
    assert [e.grid_index for e in estimates] == [0, 1, 2, 3]
    for e in estimates:
        c = e.axes["circuit.clock_qubits"]
        # The amortised run: reference (m) + system (m) + clock (c) + flag (1) + block (1, the
        # dilation) qubits, m = 3 for 8 rows (register layout of docs/DEVELOPERS.md), and a
        # statevector of 16·2^q bytes plus its saved copy at least (common practice: complex128).
        assert e.qubits == 2 * 3 + c + 1 + 1
        assert e.bytes >= 2 * 16 * 2**e.qubits
        if e.axes["readout.memory_cap_gib"] == 1e-6:
            assert e.refused is not None and "memory cap" in e.refused
        else:
            assert e.refused is None and e.seconds > 0
    assert main(["sweep", str(path), "--dry-run"]) == 0
    out = capsys.readouterr().out
    assert "4 points: 2 would run, 2 refused" in out
    assert out.count("REFUSED") == 2
    assert not list(tmp_path.glob("*.sqlite"))  # nothing ran, no store
