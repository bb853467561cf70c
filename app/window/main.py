"""The main window: Runs list (left), panels (centre), time ruler (under the panels), status area.

All analysis runs in worker threads (``workers.JobRunner``). Opening reads headers only; the Energy
panel is computed first (it needs only the energy table) and the other panels follow in the
background. Errors of any job appear as a message; the window stays usable.

The window is put together here from parts, each in a module named after what it does:
``menus`` (the menu bar and its small actions), ``opening`` (runs into the Runs list),
``computing`` (panel jobs and what each does when it ends), ``sessions`` and ``exports``.
"""

from __future__ import annotations

from pathlib import Path

from PySide6 import QtCore, QtWidgets

from phasewake.app.window import session as session_io
from phasewake.app.window.analyses import PANELS, PanelResult, forget_runs
from phasewake.app.window.computing import PanelComputing
from phasewake.app.window.exports import ExportActions, ExportDialog
from phasewake.app.window.file_dialogs import FOLDER_KEYS, TakesDroppedFiles
from phasewake.app.window.menus import MenuActions
from phasewake.app.window.model import WindowModel
from phasewake.app.window.opening import Opener, RunOpening, default_opener
from phasewake.app.window.panels import PANEL_CLASSES, Panel
from phasewake.app.window.ruler import TimeRuler
from phasewake.app.window.runs import RunsList
from phasewake.app.window.sessions import SessionActions
from phasewake.app.window.workers import JobRunner
from phasewake.core.model.run import Run

__all__ = ["ExportDialog", "MainWindow", "default_opener", "delete_now"]

PROBLEM_SHOWN_MS = 15_000  # a problem stays in the status line this long (its box stays until closed)
RUNS_WIDTH = 230  # the Runs column's width at start; narrower windows narrow it (see resizeEvent)
NARROW_PX = 1200  # below this width the Runs column takes the least room it can (F9 hides it)
CLOSE_WAIT_MS = 30_000  # closing waits this long for the jobs to stop (each stops at its next progress step)


class MainWindow(MenuActions, RunOpening, PanelComputing, SessionActions, ExportActions, TakesDroppedFiles,
                 QtWidgets.QMainWindow):
    """The window of phasewake; its parts (menus, opening runs, computing the panels, sessions and
    exports) are in the modules of the classes it is made of, named after what they do."""

    def __init__(self, *, opener: Opener | None = None, settings: QtCore.QSettings | None = None,
                 parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("phasewake")
        self.opener = opener or default_opener
        self.settings = settings or QtCore.QSettings("phasewake", "phasewake")
        self.model = WindowModel(self)
        self.jobs = JobRunner(self)
        self.session_path: Path | None = None
        self.messages: list[str] = []  # every message shown to the user, newest last
        self.message_box: QtWidgets.QMessageBox | None = None
        self._pending_state: session_io.SessionState | None = None
        self._open_counter = 0
        self._recompute_only: tuple[str, ...] | None = None
        self._rest_pending = False
        self._computed_for: Run | None = None
        self._extras_waiting: dict[str, list[PanelResult]] = {}
        self._export_counter = 0
        self._narrow = False  # the window is narrower than NARROW_PX (the Runs column collapsed)
        self._coordinates_to_restore: dict[tuple[str, ...], str] = {}  # a session's per-run coordinates

        self.panels: dict[str, Panel] = {name: PANEL_CLASSES[name](self.model) for name in PANELS}
        self.tabs = QtWidgets.QTabWidget()
        for name in PANELS:
            self.tabs.addTab(self.panels[name], name)
        self.ruler = TimeRuler(self.model)
        centre = QtWidgets.QWidget()
        lay = QtWidgets.QVBoxLayout(centre)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.tabs, 1)
        lay.addWidget(self.ruler)
        self.setCentralWidget(centre)

        self.runs = RunsList(self.model, settings=self.settings, folder_key=FOLDER_KEYS["runs"])
        self.runs.addRequested.connect(self.open_paths)
        dock = QtWidgets.QDockWidget("Runs", self)
        dock.setObjectName("runsDock")
        dock.setWidget(self.runs)
        dock.setFeatures(QtWidgets.QDockWidget.DockWidgetFeature.DockWidgetMovable
                         | QtWidgets.QDockWidget.DockWidgetFeature.DockWidgetClosable)
        self.addDockWidget(QtCore.Qt.DockWidgetArea.LeftDockWidgetArea, dock)
        self.runs_dock = dock

        self._build_status()
        self._build_menus()
        self.setAcceptDrops(True)

        self._recompute_timer = QtCore.QTimer(self)
        self._recompute_timer.setSingleShot(True)
        self._recompute_timer.setInterval(150)
        self._recompute_timer.timeout.connect(self.recompute)
        self.model.currentRunChanged.connect(self._current_run_changed)
        self.model.timeWindowChanged.connect(self.schedule_recompute)
        self.model.coordinateChanged.connect(lambda _: self.schedule_recompute())
        self.model.choicesChanged.connect(self._choice_changed)
        self.model.runsChanged.connect(self._runs_changed)
        self.model.reopenRequested.connect(self.reopen_run)
        self.jobs.progressed.connect(self._job_progress)
        self.jobs.started.connect(self._job_started)
        self.jobs.busyChanged.connect(self._busy_changed)
        for p in self.panels.values():
            p.show_empty()
        self.resize(1280, 820)
        self.resizeDocks([self.runs_dock], [RUNS_WIDTH], QtCore.Qt.Orientation.Horizontal)

    # ---- status area --------------------------------------------------------------------------
    def _build_status(self) -> None:
        bar = self.statusBar()
        self.status_label = QtWidgets.QLabel("Open run files to begin (Ctrl+O), or drop them here.")
        self.progress = QtWidgets.QProgressBar()
        self.progress.setMaximumWidth(220)
        self.progress.setRange(0, 1000)
        self.progress.setTextVisible(True)
        self.progress.hide()
        self.cancel_button = QtWidgets.QPushButton("Cancel")
        self.cancel_button.setToolTip("Stop the background computations (Esc)")
        self.cancel_button.clicked.connect(self.cancel_work)
        self.cancel_button.hide()
        self.status_label.setMinimumWidth(80)  # long lines are cut, never widen the window
        self.status_label.setSizePolicy(QtWidgets.QSizePolicy.Policy.Ignored, QtWidgets.QSizePolicy.Policy.Preferred)
        self._problem_timer = QtCore.QTimer(self)
        self._problem_timer.setSingleShot(True)
        self._problem_timer.setInterval(PROBLEM_SHOWN_MS)
        self._problem_timer.timeout.connect(self._problem_gone)
        bar.addWidget(self.status_label, 1)
        bar.addPermanentWidget(self.progress)
        bar.addPermanentWidget(self.cancel_button)

    def say(self, text: str) -> None:
        self._problem_timer.stop()
        self.status_label.setText(text)
        self.status_label.setStyleSheet("")

    def _say_problem(self, text: str) -> None:
        """A problem in the status line, in the problem colour, for a while (the box keeps the whole text)."""
        self.say(text)
        self.status_label.setStyleSheet("color: #D55E00")
        self._problem_timer.start()

    def _problem_gone(self) -> None:
        """An old problem leaves the status line: say what the window is doing now instead."""
        e = self.model.current
        if self.jobs.busy:
            self.say("Computing in the background…")
        elif e is None:
            self.say("Open run files to begin (Ctrl+O), or drop them here.")
        else:
            self.say(f"Showing {e.label}.")

    def show_problem(self, title: str, text: str) -> None:
        """A message that never blocks the window (non-modal box + status line), in the window's words
        (what to do here, not a command-line option)."""
        from phasewake.app.window.words import for_window

        text = for_window(text)
        self.messages.append(text)
        self._say_problem(text.splitlines()[0] if text else title)
        if self.message_box is not None:
            self.message_box.close()
        box = QtWidgets.QMessageBox(QtWidgets.QMessageBox.Icon.Warning, title, text,
                                    QtWidgets.QMessageBox.StandardButton.Ok, self)
        box.setModal(False)
        box.setWindowModality(QtCore.Qt.WindowModality.NonModal)
        box.show()
        self.message_box = box

    # ---- window events ------------------------------------------------------------------------
    def files_dropped(self, paths: list[str]) -> None:
        self.open_paths(paths)

    def resizeEvent(self, event):  # noqa: N802 - Qt override
        super().resizeEvent(event)
        narrow = self.width() < NARROW_PX
        if narrow != self._narrow and self.runs_dock.isVisible():
            # crossing into a laptop-sized window, the Runs column collapses to its narrowest and the panels
            # get the room; back on a large screen it has its width again
            self._narrow = narrow
            self.resizeDocks([self.runs_dock], [180 if narrow else RUNS_WIDTH], QtCore.Qt.Orientation.Horizontal)

    def closeEvent(self, event):  # noqa: N802 - Qt override
        """Closing stops and joins every job (no thread outlives the window or computes for nobody), stops
        the timers, closes the window's own dialogs and drops its runs' in-memory coordinate series."""
        self._rest_pending = False
        self._recompute_timer.stop()
        self._problem_timer.stop()
        self.jobs.cancel_all()
        if not self.jobs.wait_all(CLOSE_WAIT_MS):
            self.messages.append("Some background work did not stop in time; it ends on its own.")
        for box in (self.message_box, getattr(self, "guide", None), getattr(self, "user_guide", None),
                    getattr(self, "about_box", None)):
            if box is not None:
                box.close()
        forget_runs([e.run for e in self.model.entries])
        super().closeEvent(event)


def delete_now(widget: QtWidgets.QWidget) -> None:
    """Close ``widget`` and delete it at once with all its children (the panels' pyqtgraph scenes and their
    items), instead of whenever a later event loop reaches the deferred deletion.

    A host program or a test that opens windows one after another calls this: a window left to
    ``deleteLater`` alone is torn down during some later event loop, and tearing down a window's plots runs
    Python for every graphics item (a quarter to half a second on a busy machine), which stalls whatever
    that loop was doing."""
    widget.close()
    widget.deleteLater()
    for _ in range(4):  # a deletion can post more (pyqtgraph deletes its scene later)
        QtCore.QCoreApplication.sendPostedEvents(None, QtCore.QEvent.Type.DeferredDelete.value)
