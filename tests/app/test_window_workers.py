"""The job runner under bursts: no ``sender()``, no dead thread read, stale progress dropped.

The window once died with a segmentation fault in the progress relay: a queued progress signal
arrived after its thread had been scheduled for deletion, and the relay asked Qt for the sender.
These tests drive the runner the way a burst of exports does (many short jobs ending while the GUI
thread is busy) and check what reaches the listeners.
"""

from __future__ import annotations

import time

import pytest

pytest.importorskip("pytestqt")
from PySide6 import QtCore, QtWidgets  # noqa: E402

from phasewake.app.window import workers  # noqa: E402
from phasewake.app.window.workers import JobRunner  # noqa: E402
from phasewake.core.progress import Progress  # noqa: E402

pytestmark = pytest.mark.gui


def _burst(n: int, result: object):
    def job():
        for i in range(n):
            yield Progress(i, n, f"step {i}")
        return result
    return job


@pytest.fixture()
def runner(qapp, monkeypatch):
    monkeypatch.setattr(workers, "PROGRESS_INTERVAL_S", 0.0)  # every yield becomes a queued signal

    def no_sender(self):  # the relay must never ask who sent a signal
        raise AssertionError("JobRunner read sender()")

    monkeypatch.setattr(JobRunner, "sender", no_sender)
    r = JobRunner()
    yield r
    r.cancel_all()
    r.wait_all(5000)


def _drain(qapp, until, timeout_s=10.0):
    t0 = time.monotonic()
    while not until() and time.monotonic() - t0 < timeout_s:
        qapp.processEvents(QtCore.QEventLoop.ProcessEventsFlag.AllEvents, 20)
        # what the real event loop does between events: deleteLater takes effect here
        QtCore.QCoreApplication.sendPostedEvents(None, QtCore.QEvent.Type.DeferredDelete)
    return until()


def test_progress_queued_by_jobs_that_ended_and_were_reaped(qapp, qtbot, runner):
    outcomes, progress = [], []
    runner.finished.connect(outcomes.append)
    runner.progressed.connect(lambda k, f, m: progress.append((k, f)))
    # a burst like "export six figures and a report": many short jobs, all ended before the GUI
    # thread looks at its queue, so every progress signal is still queued when the threads end
    keys = [f"export:{i}" for i in range(12)]
    for i, key in enumerate(keys):
        runner.start(key, _burst(200, i), label=key)
    assert runner.wait_all(10_000)
    assert _drain(qapp, lambda: len(outcomes) == len(keys) and runner.n_threads == 0)
    assert sorted(o.result for o in outcomes) == list(range(12))
    assert not any(o.error for o in outcomes)
    assert progress and {k for k, _ in progress} <= set(keys)
    # a progress signal of a job that is gone (ended and deleted) is dropped, and reads nothing
    runner._relay_progress(1, keys[0], 0.5, "late")
    runner._on_done(1, workers.JobOutcome(keys[0], result="late"))
    assert len(outcomes) == len(keys)


def test_superseded_job_reports_nothing_and_is_deleted(qapp, qtbot, runner):
    outcomes, progress = [], []
    runner.finished.connect(outcomes.append)
    runner.progressed.connect(lambda k, f, m: progress.append(m))

    def old():
        for i in range(50):
            yield Progress(i, 50, "old")
            time.sleep(0.002)
        return "old"

    runner.start("Crossings", old)
    time.sleep(0.03)  # the old job has queued progress...
    runner.start("Crossings", _burst(20, "new"))  # ...when a new one with the same key replaces it
    assert runner.wait_all(10_000)
    assert _drain(qapp, lambda: len(outcomes) == 1 and runner.n_threads == 0)
    assert [o.result for o in outcomes] == ["new"]
    assert "old" not in progress


def test_cancelled_job_is_deleted_once_it_ends(qapp, qtbot, runner):
    outcomes = []
    runner.finished.connect(outcomes.append)

    def slow():
        for i in range(1000):
            yield Progress(i, 1000)
            time.sleep(0.005)

    runner.start("slow", slow)
    time.sleep(0.05)
    runner.cancel("slow")
    assert outcomes and outcomes[-1].cancelled
    assert runner.wait_all(5000)
    assert _drain(qapp, lambda: runner.n_threads == 0)
    assert len(outcomes) == 1  # the cancelled job's own late outcome is not reported again


@pytest.mark.slow  # measured 1.8 s of CPU
def test_many_exports_and_a_report_in_a_busy_window(qapp, qtbot, tmp_path, monkeypatch):
    """Figure exports and a report as jobs of the window, started while others still run."""
    import numpy as np

    from phasewake.app.window.main import MainWindow
    from phasewake.core.figures.spec import Axis, FigureSpec, Line, PlotSpec

    monkeypatch.setattr(workers, "PROGRESS_INTERVAL_S", 0.0)
    w = MainWindow(settings=QtCore.QSettings(str(tmp_path / "s.ini"), QtCore.QSettings.Format.IniFormat))
    qtbot.addWidget(w)
    x = np.linspace(0, 1, 400)
    spec = FigureSpec(key="test.figure", title="A test figure",
                      plots=(PlotSpec(title="t", x=Axis("Time", "ps"), y=Axis("q", "nm"),
                                      items=(Line(x, np.sin(9 * x), label="q"),)),))
    w.current_panel().view.show_figure(spec)
    written = []
    for i in range(6):
        written.append(w.export_figure_to(tmp_path / f"fig{i}.{('png', 'svg', 'pdf')[i % 3]}", preset="single",
                                          dpi=60))
        QtWidgets.QApplication.processEvents()
    assert w.wait_idle(60_000)
    assert all(p.exists() and p.stat().st_size > 0 for p in written), written
    assert not w.messages, w.messages
    assert _drain(qapp, lambda: w.jobs.n_threads == 0)
