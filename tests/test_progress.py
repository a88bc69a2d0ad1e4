"""Progress: silent in library calls unless logging is configured, on stderr from the command."""

import logging

from qgp.classical.problem import problem_from_config
from qgp.config import load_config
from qgp.demo import demo_config_path
from qgp.readout.inference import infer
from qgp.settings import CircuitSettings
from qgp.tools.cli import main


def test_library_calls_are_silent_by_default_and_log_when_asked(capsys, caplog):
    problem = problem_from_config(load_config(demo_config_path()))
    infer(problem, CircuitSettings(clock_qubits=4))
    assert capsys.readouterr().err == ""
    with caplog.at_level(logging.INFO, logger="qgp"):
        infer(problem, CircuitSettings(clock_qubits=4))
    assert any("building circuits" in r.getMessage() for r in caplog.records)


def test_the_command_reports_progress_unless_quiet(tmp_path, capsys):
    assert main(["run", "--demo", "--out", str(tmp_path / "a"), "--no-figures"]) == 0
    assert "qgp: building circuits" in capsys.readouterr().err
    assert main(["run", "--demo", "--out", str(tmp_path / "b"), "--no-figures", "--quiet"]) == 0
    err = capsys.readouterr().err
    assert "building circuits" not in err
    # The command leaves the logger as it found it: library calls after it stay silent.
    infer(problem_from_config(load_config(demo_config_path())), CircuitSettings(clock_qubits=4))
    assert capsys.readouterr().err == ""
