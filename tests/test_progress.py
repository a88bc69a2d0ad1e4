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


# -- progress bars (tqdm): off in library calls, on in the command, log lines where none can be drawn --

import qgp.progress as qprogress  # noqa: E402
import qgp.tools.cli  # noqa: E402


def test_bars_are_off_by_default_and_drawn_by_tqdm_when_shown(capsys, monkeypatch):
    assert not qprogress.bars_shown()
    monkeypatch.setattr(qprogress, "_drawable", lambda: True)
    monkeypatch.setattr(qprogress, "DELAY_SECONDS", 0.0)
    with qprogress.Bar(3, "work", unit="item") as b:
        b.update(3)
    assert capsys.readouterr().err == ""  # library default: nothing
    before = qprogress.show_bars(True)
    try:
        with qprogress.Bar(3, "work", unit="item") as b:
            b.update(2, failed=1)
            b.update(1)
    finally:
        qprogress.show_bars(before)
    err = capsys.readouterr().err
    # tqdm's own bar line (the library's format, e.g. "work: 100%|██████████| 3/3 [...]").
    assert "work: 100%" in err and "3/3" in err and "failed=1" in err


def test_a_bar_that_cannot_be_drawn_logs_lines_instead(caplog, monkeypatch):
    monkeypatch.setattr(qprogress, "_drawable", lambda: False)
    monkeypatch.setattr(qprogress, "LOG_EVERY_SECONDS", 0.0)
    before = qprogress.show_bars(True)
    try:
        with caplog.at_level(logging.INFO, logger="qgp"), qprogress.Bar(2, "sweep", unit="point") as b:
            b.update(1, failed=0)
            b.update(1, failed=1)
    finally:
        qprogress.show_bars(before)
    lines = [r.getMessage() for r in caplog.records]
    assert lines[0].startswith("sweep: 1/2 points, 0 failed") and lines[-1].startswith("sweep: 2/2 points, 1 failed")


def test_the_command_shows_bars_only_while_it_runs_and_not_when_quiet(tmp_path, monkeypatch):
    seen = []

    class Spy(logging.Handler):  # notes, at each progress message, whether bars are switched on
        def emit(self, record):
            seen.append(qprogress.bars_shown())

    logger, spy = logging.getLogger("qgp"), Spy()
    level = logger.level
    logger.addHandler(spy)
    logger.setLevel(logging.INFO)
    try:
        assert main(["run", "--demo", "--out", str(tmp_path / "a"), "--no-figures"]) == 0
        assert seen and all(seen)
    finally:
        logger.removeHandler(spy)
        logger.setLevel(level)
    assert not qprogress.bars_shown()
    switched = []
    monkeypatch.setattr(qgp.tools.cli, "show_bars", lambda on=True: switched.append(on) or qprogress.show_bars(on))
    assert main(["run", "--demo", "--out", str(tmp_path / "b"), "--no-figures", "--quiet"]) == 0
    assert switched == [False, False]  # off for the command (quiet), then back as it was
