"""No user file is lost or half-written, and bad input is one line, before any work (issue 10).

Each defect below was reproduced with the command in its comment before the fix.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

from qgp.tools.cli import main
from qgp.errors import QgpError
from qgp.files import atomic_open, atomic_write_text, check_output_file, check_outputs

TRAIN = "x,y\n0.0,1.0\n1.0,2.0\n2.5,0.5\n3.0,-0.4\n"
TOML = """[data]
train = "train.csv"
target = "y"
[noise]
variance = 0.2
[circuit]
clock_qubits = 3
evolution = "exact"
"""


def _config(folder: Path, train: str = TRAIN, toml: str = TOML) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "train.csv").write_bytes(train.encode("utf-8") if isinstance(train, str) else train)
    cfg = folder / "c.toml"
    cfg.write_text(toml)
    return cfg


def _one_line_error(capsys) -> str:
    err = capsys.readouterr().err.strip()
    assert err.startswith("qgp: error: ") and "\n" not in err and "Traceback" not in err, err
    return err


# -- atomic writes ---------------------------------------------------------------------------------


def test_atomic_write_keeps_the_old_file_when_writing_fails(tmp_path):
    target = tmp_path / "out.csv"
    target.write_text("old\n")
    with pytest.raises(RuntimeError):
        with atomic_open(target, "w") as fh:
            fh.write("new, half written")
            raise RuntimeError("killed mid-write")
    assert target.read_text() == "old\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.csv"], "temporary file left behind"
    atomic_write_text(target, "new\n")
    assert target.read_text() == "new\n"


_SLOW_WRITER = """
import sys, time
from qgp.files import atomic_open
with atomic_open(sys.argv[1], "w") as fh:
    for i in range(10**6):
        fh.write(f"{i},row\\n")
        if i % 1000 == 0:
            fh.flush()
            if i == 2000:
                print("writing", flush=True)
            time.sleep(0.001)
"""


@pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL is POSIX")
def test_sigkill_mid_write_leaves_the_old_file_whole(tmp_path):
    # Defect: SIGKILL 4 s into a large `qgp run` left a truncated predictions.csv. A process killed
    # while writing through atomic_open leaves the old file untouched (os.replace is atomic on
    # POSIX: rename(2), common practice).
    target = tmp_path / "predictions.csv"
    target.write_text("old complete file\n")
    proc = subprocess.Popen([sys.executable, "-c", _SLOW_WRITER, str(target)], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "writing"
    proc.send_signal(signal.SIGKILL)
    proc.wait(timeout=30)
    assert target.read_text() == "old complete file\n"
    leftovers = [p for p in tmp_path.iterdir() if p.name != "predictions.csv"]
    assert all(p.name.startswith(".predictions.csv.") and p.suffix == ".tmp" for p in leftovers), leftovers


def test_atomic_write_gives_a_normal_file_mode(tmp_path):
    # mkstemp creates 0600; the renamed file gets what open() would give (0666 minus the umask).
    umask = os.umask(0o022)
    try:
        atomic_write_text(tmp_path / "a.txt", "x")
    finally:
        os.umask(umask)
    assert (tmp_path / "a.txt").stat().st_mode & 0o777 == 0o644


# -- never overwrite without --force ---------------------------------------------------------------


def test_check_outputs_names_what_would_be_overwritten(tmp_path):
    (tmp_path / "predictions.csv").write_text("a user's own file\n")
    with pytest.raises(QgpError, match=r"already holds predictions.csv; .*--force"):
        check_outputs(tmp_path, ["predictions.csv", "summary.json"], force=False)
    assert check_outputs(tmp_path, ["predictions.csv"], force=True) == tmp_path
    with pytest.raises(QgpError, match="is a file, not a folder"):
        check_outputs(tmp_path / "predictions.csv", ["x"], force=True)


def test_check_output_file_refuses_inputs_folders_and_existing_files(tmp_path):
    store = tmp_path / "r.sqlite"
    store.write_bytes(b"SQLite format 3\x00")
    with pytest.raises(QgpError, match="is the input file"):
        check_output_file(store, force=True, option="--csv", inputs=[store])
    with pytest.raises(QgpError, match="is a folder"):
        check_output_file(tmp_path, force=True, option="--csv")
    (tmp_path / "r.csv").write_text("x\n")
    with pytest.raises(QgpError, match="already exists; .*--force"):
        check_output_file(tmp_path / "r.csv", force=False, option="--csv")
    with pytest.raises(QgpError, match="does not exist"):
        check_output_file(tmp_path / "no" / "r.csv", force=False, option="--csv")


def test_run_refuses_a_folder_holding_a_users_predictions(tmp_path, capsys):
    # Defect: `qgp run c.toml --out DIR` into a folder with a user's predictions.csv (and no
    # summary.json) overwrote it silently.
    cfg = _config(tmp_path / "in")
    out = tmp_path / "out"
    out.mkdir()
    (out / "predictions.csv").write_text("my own numbers\n")
    assert main(["run", str(cfg), "--out", str(out), "--quiet"]) == 2
    assert "predictions.csv" in _one_line_error(capsys)
    assert (out / "predictions.csv").read_text() == "my own numbers\n"
    assert sorted(p.name for p in out.iterdir()) == ["predictions.csv"], "wrote something before refusing"
    assert main(["run", str(cfg), "--out", str(out), "--quiet", "--force"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["n_train"] == 4
    # Every quantum column says what produced it (issue 10: "say exactly what was simulated").
    quantum = {"mean_quantum", "variance_quantum", "variance_quantum_hadamard", "success_probability_inversion"}
    assert quantum | {"shots", "simulated_form", "error_budget"} <= set(summary["provenance"])
    assert summary["provenance"]["shots"].startswith("none") and summary["simulated_form"] == "simulation"
    assert (out / "predictions.csv").read_text().startswith("x,mean_exact,")


def test_run_out_naming_a_file_is_one_line(tmp_path, capsys):
    cfg = _config(tmp_path / "in")
    assert main(["run", str(cfg), "--out", str(cfg), "--quiet"]) == 2
    assert "is a file, not a folder" in _one_line_error(capsys)


def test_run_never_writes_onto_its_own_data(tmp_path, capsys):
    cfg = _config(tmp_path / "in")
    # --out is the data folder and the data file is named like an output: refused even with --force.
    (tmp_path / "in" / "train.csv").rename(tmp_path / "in" / "predictions.csv")
    cfg.write_text(TOML.replace("train.csv", "predictions.csv"))
    assert main(["run", str(cfg), "--out", str(tmp_path / "in"), "--quiet", "--force"]) == 2
    assert "input file" in _one_line_error(capsys)


def test_demo_refuses_an_earlier_demo_without_force(tmp_path, capsys):
    # Defect: `qgp demo --out DIR` always overwrote DIR.
    out = tmp_path / "demo"
    out.mkdir()
    (out / "summary.json").write_text("{}\n")
    assert main(["demo", "--out", str(out), "--quiet"]) == 2
    assert "summary.json" in _one_line_error(capsys)
    assert (out / "summary.json").read_text() == "{}\n"


def test_figures_refuses_existing_figure_files(tmp_path, capsys):
    # Defect: `qgp figures STORE --out DIR` overwrote figure files already in DIR. The check runs
    # before the store is read (an empty file stands in for it here).
    store = tmp_path / "r.sqlite"
    store.write_bytes(b"")
    out = tmp_path / "figs"
    out.mkdir()
    (out / "fig1_error_vs_qubits.png").write_bytes(b"a user's edited figure")
    assert main(["figures", str(store), "--out", str(out), "--only", "fig1"]) == 2
    assert "fig1_error_vs_qubits.png" in _one_line_error(capsys)
    assert (out / "fig1_error_vs_qubits.png").read_bytes() == b"a user's edited figure"


# -- bad input: one line, naming the problem and the fix ------------------------------------------


def test_csv_with_a_byte_order_mark_is_read(tmp_path, capsys):
    # Defect: a CSV saved with a UTF-8 byte-order mark (as spreadsheet programs write it) was
    # refused as "target column not in the header".
    cfg = _config(tmp_path, train=b"\xef\xbb\xbf" + TRAIN.encode())
    assert main(["inspect", str(cfg), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["n_train"] == 4


def test_a_folder_given_as_data_file_is_named_as_a_folder(tmp_path, capsys):
    # Defect: a directory given as [data] train was reported as "does not exist".
    cfg = _config(tmp_path, toml=TOML.replace('"train.csv"', '"sub"'))
    (tmp_path / "sub").mkdir()
    assert main(["inspect", str(cfg)]) == 2
    assert "is a folder, not a CSV file" in _one_line_error(capsys)


def test_too_many_shots_is_refused_at_the_edge(tmp_path, capsys):
    # Defect: [readout] shots = 10^21 ended in an OverflowError inside numpy's multinomial, whose
    # count must fit a C long; the limit is 2^53, where float64 counts stop being exact.
    cfg = _config(tmp_path, toml=TOML + "[readout]\nshots = 1000000000000000000000\n")
    assert main(["run", str(cfg), "--out", str(tmp_path / "o"), "--quiet"]) == 2
    assert "shots must be ≤ 9007199254740992" in _one_line_error(capsys)


def test_targets_whose_squares_overflow_are_refused(tmp_path, capsys):
    # Defect: targets of ±1e160 ended in an OverflowError in the shots estimate (1e160² overflows
    # float64, whose largest value is 1.8e308: IEEE 754 binary64, common practice).
    cfg = _config(tmp_path, train=TRAIN.replace("2.0\n", "1e160\n"))
    assert main(["inspect", str(cfg)]) == 2
    err = _one_line_error(capsys)
    assert "data row 2 (file line 3), column 'y'" in err and "rescale" in err
