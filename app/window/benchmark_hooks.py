"""Measurements of the window for the benchmark suite (tests/benchmarks, ``make bench``).

:func:`first_panel_and_cursor` returns the time from asking the window to open a run to the first
panel drawn on screen, and the time to redraw after one cursor move on a time axis showing a long
series. Runs offscreen; creates the QApplication when there is none.
"""

from __future__ import annotations

import os
import statistics
import time
from pathlib import Path

import numpy as np


def _app():
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from PySide6 import QtWidgets

    return QtWidgets.QApplication.instance() or QtWidgets.QApplication(["phasewake-bench"])


def first_panel_seconds(path: str | Path, *, timeout_s: float = 120.0) -> float:
    """Seconds from loading the window's code to the Energy panel painted with its first result.

    The first result is the energy table's figure, or (for a run without one) the panel's plain
    message; opening reads headers only, so this is what a user waits for before seeing anything.
    """
    import tempfile

    t0 = time.perf_counter()  # what a user waits for includes loading the window's code
    from PySide6 import QtCore

    from phasewake.app.window.main import MainWindow, delete_now

    app = _app()
    with tempfile.TemporaryDirectory() as tmp:
        settings = QtCore.QSettings(str(Path(tmp) / "s.ini"), QtCore.QSettings.Format.IniFormat)
        win = MainWindow(settings=settings)
        win.resize(1280, 800)
        win.show()
        win.open_paths([str(path)])
        panel = win.panels["Energy"]
        deadline = t0 + timeout_s
        while panel.result is None and not win.messages:
            app.processEvents(QtCore.QEventLoop.ProcessEventsFlag.AllEvents, 20)
            if time.perf_counter() > deadline:
                raise TimeoutError(f"no panel drawn after {timeout_s:.0f} s")
            time.sleep(0.002)
        panel.repaint()  # paint now, synchronously
        elapsed = time.perf_counter() - t0
        win.cancel_work()  # the other panels are not part of this measurement: never start them
        if win.messages:
            raise RuntimeError(win.messages[-1])
        win.jobs.wait_all(10_000)
        delete_now(win)
    return elapsed


def cursor_redraw_seconds(n_points: int = 10_000_000, *, moves: int = 20) -> float:
    """Median seconds to move the cursor and repaint a time plot of ``n_points`` points."""
    from PySide6 import QtCore

    from phasewake.app.window.render import FigureView
    from phasewake.core.figures.spec import Axis, FigureSpec, Line, PlotSpec

    app = _app()
    t = np.arange(n_points, dtype=np.float64) * 1e-3
    y = np.sin(t) + 0.1 * np.random.default_rng(0).standard_normal(n_points)
    view = FigureView()
    view.resize(1200, 500)
    view.show()
    view.show_figure(FigureSpec(key="bench", title="bench", plots=(
        PlotSpec(title="long series", x=Axis("Time", "ps"), y=Axis("Energy", "kJ/mol"),
                 items=(Line(t, y, label="series"),), x_is_time=True),)))
    viewport = view.layout_widget.viewport()
    painted = []

    class _Count(QtCore.QObject):
        def eventFilter(self, obj, event):  # noqa: N802 - Qt override
            if event.type() == QtCore.QEvent.Type.Paint:
                painted.append(time.perf_counter())
            return False

    counter = _Count()
    viewport.installEventFilter(counter)
    app.processEvents()
    viewport.repaint()  # the first render is not what is measured
    times = []
    for i in range(moves):
        tc = float(t[-1]) * (i + 1) / (moves + 1)
        painted.clear()
        t0 = time.perf_counter()
        view.set_cursor_time(tc)
        app.processEvents()  # the scene schedules the repaint; this runs it
        if not painted:
            viewport.repaint()  # force it now if it did not happen yet
        times.append(time.perf_counter() - t0)
    viewport.removeEventFilter(counter)
    view.close()
    view.deleteLater()
    return statistics.median(times)


def first_panel_and_cursor(path: str | Path, *, n_points: int = 10_000_000) -> tuple[float, float]:
    """(seconds to the first drawn panel for the run at ``path``, seconds per cursor redraw)."""
    return first_panel_seconds(path), cursor_redraw_seconds(n_points)
