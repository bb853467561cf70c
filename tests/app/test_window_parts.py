"""The window's parts on small synthetic data: model, renderer, workers, sessions (pytest-qt, offscreen)."""

from __future__ import annotations

import time

import numpy as np
import pytest

pytest.importorskip("pytestqt")
pg = pytest.importorskip("pyqtgraph")
from PySide6 import QtCore  # noqa: E402

from phasewake.app.window import session as session_io  # noqa: E402
from phasewake.app.window.model import RunEntry, WindowModel  # noqa: E402
from phasewake.app.window.render import FigureView  # noqa: E402
from phasewake.app.window.workers import JobRunner  # noqa: E402
from phasewake.core.errors import AnalysisError, SessionError  # noqa: E402
from phasewake.core.figures.spec import Axis, Band, FigureSpec, Image, Line, Mark, PlotSpec  # noqa: E402
from phasewake.core.progress import Progress  # noqa: E402
from phasewake.core.readers.memory import run_from_arrays  # noqa: E402

pytestmark = pytest.mark.gui


def _run(n=200, dt=0.5):
    t = np.arange(n) * dt
    pos = np.zeros((n, 2, 3), np.float32)
    pos[:, 1, 0] = 0.3 + 0.01 * np.sin(t)
    return run_from_arrays(pos, t, np.ones(2), name="tiny")


def test_model_signals_only_on_real_change(qtbot):
    m = WindowModel()
    cursor, window = [], []
    m.cursorChanged.connect(cursor.append)
    m.timeWindowChanged.connect(lambda: window.append(m.time_window_ps))
    m.add_run(RunEntry(run=_run()))
    cursor.clear()
    window.clear()
    m.set_cursor_frame(10)
    m.set_cursor_frame(10)
    assert cursor == [10]
    m.set_cursor_time(5.2)  # frames every 0.5 ps: nearest frame to 5.2 ps is frame 10 -> no change
    assert cursor == [10]
    m.set_cursor_time(5.3)  # nearest is 5.5 ps = frame 11
    assert cursor == [10, 11]
    m.set_cursor_frame(10_000)  # clamped to the last frame
    assert m.cursor_frame == 199
    m.set_time_window((10.0, 50.0))
    m.set_time_window((10.0, 50.0))
    m.set_time_window((50.0, 10.0))  # same window given the other way round
    assert window == [(10.0, 50.0)]
    assert m.window_frames() == (20, 101)
    m.set_time_window((-5.0, 1e9))  # covers the whole run: back to "no window"
    assert window[-1] is None and m.time_window_ps is None


def _spec():
    x = np.linspace(0.0, 10.0, 101)
    img = np.arange(12.0).reshape(4, 3)
    return FigureSpec(key="test.fig", title="test", plots=(
        PlotSpec(title="series", x=Axis("Time", "ps"), y=Axis("Energy", "kJ/mol"), x_is_time=True,
                 items=(Line(x, np.sin(x) * 3.0, label="a"), Band(x, np.sin(x) - 4.0, np.sin(x) + 4.5),
                        Mark("vline", 2.0, label="mark"))),
        PlotSpec(title="hist", x=Axis("Distance", "nm"), y=Axis("Count"),
                 items=(Line(np.linspace(0.2, 0.6, 11), np.arange(10.0), kind="step"),)),
        PlotSpec(title="density", x=Axis("q", "nm"), y=Axis("p", "amu nm/ps"),
                 items=(Image(img, np.linspace(-1, 1, 5), np.linspace(0, 3, 4)),)),
    ))


def test_renderer_shows_the_data_ranges_of_the_spec(qtbot):
    # Cross-renderer contract (core.figures.FigureSpec.data_ranges): what pyqtgraph draws spans exactly
    # the ranges the description holds, as core.export's matplotlib drawing is checked to do.
    view = FigureView()
    qtbot.addWidget(view)
    spec = _spec()
    view.show_figure(spec)
    assert len(view.plots) == 3
    for rp, ((x0, x1), (y0, y1)) in zip(view.plots, spec.data_ranges()):
        (a0, a1), (b0, b1) = rp.data_bounds()
        assert (a0, a1) == pytest.approx((x0, x1), abs=1e-9)
        assert (b0, b1) == pytest.approx((y0, y1), abs=1e-9)
    assert view.plots[0].plot.getAxis("left").labelText == "Energy (kJ/mol)"
    assert view.plots[0].cursor is not None and view.plots[1].cursor is None  # only time axes get one


def test_renderer_downsamples_long_monotonic_series_only(qtbot):
    view = FigureView()
    qtbot.addWidget(view)
    t = np.arange(200_000) * 0.001
    ring = np.linspace(0, 20 * np.pi, 200_000)
    view.show_figure(FigureSpec(key="k", title="t", plots=(
        PlotSpec(title="a", x=Axis("Time", "ps"), y=Axis("y"), items=(Line(t, np.sin(t)),), x_is_time=True),
        PlotSpec(title="b", x=Axis("q"), y=Axis("p"), items=(Line(np.cos(ring), np.sin(ring)),)),
    )))
    long_item = view.plots[0].items[0]
    ring_item = view.plots[1].items[0]
    assert long_item.opts["autoDownsample"] and long_item.opts["clipToView"]
    # clip-to-view assumes increasing x (pyqtgraph's PlotDataItem): a phase portrait must not use it
    assert not ring_item.opts["clipToView"]


def test_cursor_drag_is_reported_but_setting_it_is_silent(qtbot):
    view = FigureView()
    qtbot.addWidget(view)
    view.show_figure(_spec())
    seen = []
    view.cursorDragged.connect(seen.append)
    view.set_cursor_time(4.0)
    assert seen == [] and view.plots[0].cursor.value() == 4.0
    view.plots[0].cursor.setValue(6.5)  # what a mouse drag does
    assert seen == [6.5]


def _slow_work(steps, dt_s, result="done"):
    for i in range(steps):
        time.sleep(dt_s)
        yield Progress(i + 1, steps, f"step {i + 1}")
    return result


def idle_ticks(qtbot, ms=500):
    """Ticks of a 20 ms timer in ``ms`` with nothing running: the same-run baseline (a shared machine)."""
    ticks = []
    timer = QtCore.QTimer()
    timer.timeout.connect(lambda: ticks.append(1))
    timer.start(20)
    qtbot.wait(ms)
    timer.stop()
    return len(ticks)


def test_long_job_keeps_event_loop_responsive_and_can_be_cancelled(qtbot):
    baseline = idle_ticks(qtbot)
    runner = JobRunner()
    ticks = []
    timer = QtCore.QTimer()
    timer.setInterval(20)
    timer.timeout.connect(lambda: ticks.append(time.monotonic()))
    timer.start()
    outcomes, progress = [], []
    runner.finished.connect(outcomes.append)
    runner.progressed.connect(lambda k, f, m: progress.append(f))
    t0 = time.monotonic()
    runner.start("long", lambda: _slow_work(1000, 0.01))  # would take 10 s
    qtbot.wait(500)
    n_ticks = len(ticks)
    runner.cancel("long")
    assert runner.wait_all(3000)
    elapsed = time.monotonic() - t0
    timer.stop()
    # a frozen event loop would tick 0-1 times; a responsive one about as often as when idle (earlier tests
    # delete their windows at their own teardown, tests/app/conftest.py: torn down later, they stalled this loop)
    assert n_ticks >= max(3, 0.5 * baseline), f"{n_ticks} ticks in 0.5 s while busy, {baseline} when idle"
    assert progress and 0 < max(progress) < 1
    assert outcomes and outcomes[-1].cancelled and outcomes[-1].result is None
    assert elapsed < 2.5


def test_failing_job_reports_a_message(qtbot):
    runner = JobRunner()
    outcomes = []
    runner.finished.connect(outcomes.append)

    def bad():
        yield Progress(0, 1)
        raise AnalysisError("too short to analyse")

    def crash():
        yield Progress(0, 1)
        raise ZeroDivisionError("boom")

    runner.start("a", bad)
    runner.start("b", crash, label="Crash test")
    qtbot.waitUntil(lambda: len(outcomes) == 2, timeout=3000)
    by_key = {o.key: o for o in outcomes}
    assert by_key["a"].error == "too short to analyse"
    assert "Crash test failed" in by_key["b"].error and "boom" in by_key["b"].error
    runner.start("c", lambda: _slow_work(2, 0.001, result=42))
    qtbot.waitUntil(lambda: len(outcomes) == 3, timeout=3000)
    assert outcomes[-1].result == 42


def test_session_round_trip_and_bad_files(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    (data / "run.h5md").write_bytes(b"x")
    state = session_io.SessionState(
        runs=(session_io.RunRecord(paths=(str(data / "run.h5md"),), settings={"timestep_fs": 2.0}),),
        current_run=0, cursor_frame=17, time_window_ps=(1.5, 9.0), coordinate="distance(0, 1)",
        panel="Crossings", choices={"trail_frames": 0})
    path = session_io.save(state, tmp_path / "s.pwsession")
    back = session_io.load(path)
    assert back.runs[0].paths == (str((data / "run.h5md").resolve()),)
    assert (back.cursor_frame, back.time_window_ps, back.coordinate, back.panel) == (17, (1.5, 9.0),
                                                                                      "distance(0, 1)", "Crossings")
    assert back.runs[0].settings["timestep_fs"] == 2.0 and back.choices == {"trail_frames": 0}
    # a session moved together with its data finds the files through the relative paths
    moved = tmp_path / "moved"
    (tmp_path / "data").rename(tmp_path / "moved_data")
    moved.mkdir()
    text = path.read_text().replace("/data/", "/gone/").replace('"../data/', '"../moved_data/')
    text = text.replace('"data/run.h5md"', '"../moved_data/run.h5md"')
    (moved / "s.pwsession").write_text(text)
    assert session_io.load(moved / "s.pwsession").runs[0].paths == (str((tmp_path / "moved_data" / "run.h5md").resolve()),)
    for bad, needle in (("{", "JSON"), ('{"format": "other"}', "not a phasewake session"),
                        ('{"format": "phasewake-session", "version": 99}', "version 99")):
        p = tmp_path / "bad.pwsession"
        p.write_text(bad)
        with pytest.raises(SessionError, match=needle):
            session_io.load(p)
    with pytest.raises(SessionError, match="not found"):
        session_io.load(tmp_path / "missing.pwsession")


def test_files_given_together_are_grouped_into_runs():
    from phasewake.app.window import group_runs

    # several self-contained run files are replicas, one run each
    assert group_runs(["a.h5md", "b.h5md", "c.H5"]) == [("a.h5md",), ("b.h5md",), ("c.H5",)]
    # a trajectory with its topology and energy table is one run
    assert group_runs(["run.dcd", "run.pdb", "energy.csv"]) == [("run.dcd", "run.pdb", "energy.csv")]
    assert group_runs(["only.h5md"]) == [("only.h5md",)]


def test_open_dialog_offers_every_reader_suffix_and_a_folder(qtbot, monkeypatch, tmp_path):
    # the Open dialog's filter comes from the reader registry (engine files included), and a folder can be
    # chosen: it goes to the same route as a dropped folder
    from PySide6 import QtWidgets

    from phasewake.app.window.main import MainWindow
    from phasewake.core.readers import READERS

    seen = {}

    def fake_files(parent, title, folder, filters):
        seen["filters"] = filters
        return [], ""

    monkeypatch.setattr(QtWidgets.QFileDialog, "getOpenFileNames", staticmethod(fake_files))
    monkeypatch.setattr(QtWidgets.QFileDialog, "getExistingDirectory", staticmethod(lambda *a: str(tmp_path)))
    win = MainWindow()
    qtbot.addWidget(win)
    asked = []
    win.runs.addRequested.connect(asked.append)
    win.runs.ask_for_files()
    for suffix in (s for r in READERS for s in r.suffixes):
        assert f"*{suffix}" in seen["filters"]
    assert "*.edr" in seen["filters"] and "*.veldcd" in seen["filters"]
    win.runs.ask_for_folder()
    assert asked == [[str(tmp_path)]]
