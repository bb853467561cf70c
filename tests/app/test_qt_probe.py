"""The window's start-up probe: Qt aborts the process when its platform plugin cannot load, so
`phasewake open` and `phasewake demo` ask a child process first and report one clear line instead."""

from phasewake.app import qt_probe
from phasewake.app.cli import main


def test_offscreen_needs_no_probe(monkeypatch):
    monkeypatch.setenv("QT_QPA_PLATFORM", "offscreen")
    assert qt_probe.qt_start_problem() is None


def test_a_platform_that_cannot_load_is_reported(monkeypatch):
    monkeypatch.setenv("QT_QPA_PLATFORM", "no-such-platform")
    problem = qt_probe.qt_start_problem()
    assert problem is not None and "Qt" in problem


def test_open_exits_2_with_one_line_when_qt_cannot_start(monkeypatch, capsys):
    monkeypatch.setenv("QT_QPA_PLATFORM", "no-such-platform")
    assert main(["open"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("phasewake open: Qt") and "Traceback" not in err
