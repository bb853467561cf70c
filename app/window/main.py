"""The main window: Runs list (left), panels (centre), time ruler (under the panels), status area.

All analysis runs in worker threads (``workers.JobRunner``). Opening reads headers only; the Energy
panel is computed first (it needs only the energy table) and the other panels follow in the
background. Errors of any job appear as a message; the window stays usable.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from PySide6 import QtCore, QtGui, QtWidgets

from phasewake.app.window import analyses
from phasewake.app.window import session as session_io
from phasewake.app.window.analyses import (
    EXTRA_JOBS,
    FIRST_JOB,
    PANEL_JOBS,
    PANELS,
    AnalysisContext,
    PanelResult,
    shared_frames_job,
)
from phasewake.app.window.model import RunEntry, RunSettings, WindowModel, apply_settings
from phasewake.app.window.panels import PANEL_CLASSES, Panel
from phasewake.app.window.ruler import TimeRuler
from phasewake.app.window.runs import RunsList
from phasewake.app.window.workers import JobOutcome, JobRunner
from phasewake.core.model.run import Run
from phasewake.core.progress import Progress

Opener = Callable[[Sequence[str], str | None, RunSettings], Run]

# Choices that change what an analysis computes (others, like the trail length, only redraw).
RECOMPUTE_CHOICES: dict[str, tuple[str, ...]] = {
    "landscape_marks": ("Crossings", "Landscape"),
    "coordinate2": ("Phase space",),
}
# Each kind of file dialog starts in the folder last used for that kind: opening runs never starts in
# the folder figures were last exported to.
FOLDER_KEYS = {"runs": "last_run_folder", "export": "last_export_folder", "session": "last_session_folder"}
# matplotlib is not thread-safe (its font caches broke a PDF report written while a figure was being
# exported: "bytes must be in range(0, 256)"): exports run in the background, one after another
EXPORT_LOCK = threading.Lock()
PROBLEM_SHOWN_MS = 15_000
RUNS_WIDTH = 230  # the Runs column's width at start; narrower windows narrow it (see resizeEvent)
NARROW_PX = 1200  # below this width the Runs column takes the least room it can (F9 hides it)  # a problem stays in the status line this long (its box stays until closed)
from phasewake.app.window.guide_text import GUIDE_TEXT  # noqa: E402,F401 - kept for callers of the old name


def default_opener(paths: Sequence[str], topology: str | None, settings: RunSettings) -> Run:
    """Open a run through the reader registry, keeping library chatter off stdout."""
    from phasewake.app.common import quiet_stdout
    from phasewake.core.readers import open_run

    with quiet_stdout():
        return open_run(list(paths), topology=topology, **settings.overrides())


class MainWindow(QtWidgets.QMainWindow):
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
        self._export_kinds: dict[str, str] = {}  # job key -> "Figure", "Data" or "Report"

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
        self.jobs.finished.connect(self._job_finished)
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

    # ---- menus --------------------------------------------------------------------------------
    def _action(self, menu: QtWidgets.QMenu, text: str, slot: Callable[[], Any],
                shortcut: str | QtGui.QKeySequence.StandardKey | None = None, tip: str = "") -> QtGui.QAction:
        act = QtGui.QAction(text, self)
        if shortcut is not None:
            act.setShortcut(QtGui.QKeySequence(shortcut))
        act.setShortcutContext(QtCore.Qt.ShortcutContext.WindowShortcut)
        if tip:
            act.setStatusTip(tip)
        act.triggered.connect(lambda checked=False: slot())
        menu.addAction(act)
        self.addAction(act)
        return act

    def _build_menus(self) -> None:
        mb = self.menuBar()
        f = mb.addMenu("&File")
        self.act_open = self._action(f, "Open run files\u2026", self.runs.ask_for_files, "Ctrl+O",
                                     "Add a run from its files")
        self._action(f, "Open run folder\u2026", self.runs.ask_for_folder, "Ctrl+Shift+F",
                     "Add a run from the folder its engine wrote (trajectory parts, topology, energies, log)")
        self._action(f, "Close run", self.runs.remove_selected, "Ctrl+W")
        f.addSeparator()
        self._action(f, "Open session\u2026", self.ask_open_session, "Ctrl+Shift+O")
        self.act_save = self._action(f, "Save session", self.save_session_now, "Ctrl+S")
        self._action(f, "Save session as\u2026", self.ask_save_session, "Ctrl+Shift+S")
        f.addSeparator()
        self._action(f, "Quit", self.close, "Ctrl+Q")

        e = mb.addMenu("E&xport")
        self.act_export_figure = self._action(e, "Export figure\u2026", self.ask_export_figure, "Ctrl+E",
                                              "The figure on screen as PNG, SVG or PDF")
        self.act_export_data = self._action(e, "Export data\u2026", self.ask_export_data, "Ctrl+Shift+E",
                                            "The data of the figure on screen as CSV")
        self.act_export_report = self._action(e, "Export report\u2026", self.ask_export_report, "Ctrl+R",
                                              "A PDF report of the current run")

        a = mb.addMenu("&Analysis")
        self._action(a, "Coordinate\u2026", self.ask_coordinate, "Ctrl+K",
                     "Choose the coordinate of the phase-space, crossings and landscape panels")
        self._action(a, "Second coordinate\u2026", self.ask_coordinate2, "Ctrl+Shift+K",
                     "A second coordinate for coordinate pairs and the Poincar\u00e9 section")
        self._action(a, "Whole run", lambda: self.model.set_time_window(None), "Ctrl+0",
                     "Analyse the whole run (reset the time window)")
        self._action(a, "Recompute", self.recompute, "F5")
        a.addSeparator()
        self.act_use_cache = self._action(a, "Use the result cache", self._toggle_cache,
                                          tip="Keep results on disk so a run looked at again is not recomputed")
        self.act_use_cache.setCheckable(True)
        self.act_use_cache.setChecked(self._cache_setting())
        analyses.USE_CACHE = self.act_use_cache.isChecked()
        self._action(a, "Clear the result cache", self.clear_cache,
                     tip="Delete every stored result (inputs are never touched)")
        a.addSeparator()
        self._action(a, "Cancel background work", self.cancel_work, "Esc")

        c = mb.addMenu("&Cursor")
        self._action(c, "Next frame", lambda: self.model.step_cursor(1), "Right")
        self._action(c, "Previous frame", lambda: self.model.step_cursor(-1), "Left")
        self._action(c, "Jump forward", lambda: self.model.step_cursor(self._page()), "PgDown")
        self._action(c, "Jump back", lambda: self.model.step_cursor(-self._page()), "PgUp")
        self._action(c, "First frame", lambda: self.model.set_cursor_frame(0), "Home")
        self._action(c, "Last frame", lambda: self.model.set_cursor_frame(self.model.time_ps.size - 1), "End")

        v = mb.addMenu("&View")
        for i, name in enumerate(PANELS):
            self._action(v, f"{name} panel", lambda i=i: self.tabs.setCurrentIndex(i), f"Ctrl+{i + 1}")
        v.addSeparator()
        runs_toggle = self.runs_dock.toggleViewAction()
        runs_toggle.setText("Runs list")
        runs_toggle.setShortcut(QtGui.QKeySequence("F9"))
        runs_toggle.setStatusTip("Show or hide the Runs list (more room for the panels on a small screen)")
        v.addAction(runs_toggle)
        self.addAction(runs_toggle)
        self.act_runs_list = runs_toggle
        self._action(v, "Trail the recent path", self._toggle_trail, "T")

        h = mb.addMenu("&Help")
        self._action(h, "User guide", self.show_user_guide, "F1",
                     "The job, the panels, the coordinate specification, file formats, units and cautions")
        self._action(h, "Short guide", self.show_guide, "Shift+F1", "Where things are in this window")
        h.addSeparator()
        self._action(h, "About phasewake", self._about, tip="Version, licences of the dependencies, how to cite")

    def _cache_setting(self) -> bool:
        return str(self.settings.value("use_result_cache", "true")).lower() in ("true", "1")

    def _toggle_cache(self) -> None:
        on = self.act_use_cache.isChecked()
        analyses.USE_CACHE = on
        self.settings.setValue("use_result_cache", on)
        self.settings.sync()
        self.say("Results are kept in the result cache." if on else
                 "The result cache is off: every panel is computed afresh.")

    def clear_cache(self) -> None:
        from phasewake.core.errors import PhasewakeError
        from phasewake.core.store.cache import ResultCache

        cache = ResultCache()
        try:
            n = cache.clear()
        except (OSError, PhasewakeError) as exc:  # PhasewakeError: a folder that is not ours, left alone
            self.show_problem("Result cache", f"Could not clear the result cache in {cache.folder}: {exc}")
            return
        self.say(f"Removed {n} stored result{'s' if n != 1 else ''} from {cache.folder}.")

    def _page(self) -> int:
        return max(1, self.model.time_ps.size // 20)

    def _toggle_trail(self) -> None:
        from phasewake.app.window.panels import DEFAULT_TRAIL

        on = bool(self.model.choice("trail_frames", DEFAULT_TRAIL))
        self.model.set_choice("trail_frames", 0 if on else DEFAULT_TRAIL)

    def first_start(self) -> bool:
        """True the very first time the window starts with these settings (then remembered)."""
        seen = str(self.settings.value("guide_shown", "false")).lower() in ("true", "1")
        if not seen:
            self.settings.setValue("guide_shown", True)
            self.settings.sync()
        return not seen

    def show_guide(self) -> QtWidgets.QDialog:
        """The short, dismissible guide pointing at each part of the window (first start, ``demo``)."""
        from phasewake.app.window import help as help_dialogs

        self.guide = help_dialogs.short_guide(self)
        self.guide.show()
        return self.guide

    def show_user_guide(self) -> QtWidgets.QDialog:
        from phasewake.app.window import help as help_dialogs

        self.user_guide = help_dialogs.user_guide(self)
        self.user_guide.show()
        return self.user_guide

    def _about(self) -> QtWidgets.QDialog:
        from phasewake.app.window import help as help_dialogs

        self.about_box = help_dialogs.about(self)
        self.about_box.show()
        return self.about_box

    # ---- opening runs -------------------------------------------------------------------------
    def open_paths(self, paths: Sequence[str], *, topology: str | None = None,
                   settings: RunSettings | None = None) -> None:
        """Open ``paths`` in the background and add to the Runs list: one run, or one run per file when
        they are several self-contained run files (replicas; see ``phasewake.app.window.group_runs``)."""
        from phasewake.app.window import group_runs

        self.open_runs([(group, topology, settings or RunSettings()) for group in group_runs(paths)])

    def open_runs(self, specs: Sequence[tuple[tuple[str, ...], str | None, RunSettings]]) -> None:
        if not specs:
            return
        opener = self.opener

        def job():
            from phasewake.core.errors import PhasewakeError
            from phasewake.core.progress import Progress

            opened = []
            failures = []
            for i, (paths, top, st) in enumerate(specs):
                yield Progress(i, len(specs), f"opening {Path(paths[0]).name if paths else ''}")
                try:
                    run = opener(paths, top, st)
                except PhasewakeError as exc:
                    failures.append(str(exc))
                    continue
                except OSError as exc:
                    failures.append(f"{paths[0] if paths else ''}: {exc}")
                    continue
                apply_settings(run, st)
                opened.append(RunEntry(run=run, paths=tuple(paths), topology=top, settings=st))
            return opened, failures

        self._open_counter += 1
        self.jobs.start(f"open:{self._open_counter}", job, label="Opening run files")
        self.say("Opening run files\u2026")

    def add_run(self, run: Run, *, paths: Sequence[str] = (), topology: str | None = None,
                settings: RunSettings | None = None) -> int:
        """Add an already opened run (tests, synthetic runs)."""
        return self.model.add_run(RunEntry(run=run, paths=tuple(paths), topology=topology,
                                           settings=settings or RunSettings()))

    def _runs_opened(self, outcome: JobOutcome) -> None:
        if outcome.error:
            self.show_problem("Could not open files", outcome.error)
            self._pending_state = None
            return
        if outcome.cancelled:
            self.say("Opening cancelled.")
            self._pending_state = None
            return
        opened, failures = outcome.result
        for entry in opened:
            entry.coordinate = self._coordinates_to_restore.pop(tuple(entry.paths), entry.coordinate)
            self.model.add_run(entry)
        if opened and opened[-1].paths:
            self.settings.setValue(FOLDER_KEYS["runs"], str(Path(opened[-1].paths[0]).resolve().parent))
        if failures:
            self.show_problem("Could not open files", "\n".join(failures))
        elif opened:
            self.say(f"Opened {', '.join(e.label for e in opened)}.")
        if self._pending_state is not None:
            state, self._pending_state = self._pending_state, None
            self._apply_state(state)

    def _current_run_changed(self, index: int) -> None:
        e = self.model.current
        if e is None:
            self.jobs.cancel_all()
            for p in self.panels.values():
                p.show_empty()
            self.setWindowTitle("phasewake")
            return
        self.setWindowTitle(f"phasewake \u2014 {e.label}")
        # another run's figures must not stay up under this run's name: every panel says it is loading
        # until its job for this run has drawn (not "No run is open" while the frames are read)
        for p in self.panels.values():
            p.show_loading(e.label, has_frames=e.run.frames is not None)
        if not self.model.coordinate and e.run.frames is not None:
            spec, reason = self._default_coordinate(e.run)
            self.model.set_coordinate(spec)
            if reason:
                self.say(f"Coordinate {spec}: {reason}" if spec else reason[0].upper() + reason[1:])
        self.schedule_recompute()

    @staticmethod
    def _default_coordinate(run: Run) -> tuple[str, str]:
        """The automatic coordinate and its reason (core.coordinate_choice: one rule for every caller)."""
        from phasewake.app.window.analyses import module_or_none
        from phasewake.core.errors import PhasewakeError

        chooser = module_or_none("coordinate_choice")
        if chooser is None or not hasattr(chooser, "choose_coordinate"):
            return "", ""
        try:
            choice = chooser.choose_coordinate(run)
        except PhasewakeError:
            return "", ""
        return choice.spec or "", choice.reason

    def _runs_changed(self) -> None:
        # the Sampling panel compares the current run with the others (R-hat across replicas)
        if self.model.current is not None and self._computed_for is self.model.current.run:
            self.schedule_recompute(("Sampling",))

    # ---- computing ----------------------------------------------------------------------------
    def _choice_changed(self, key: str) -> None:
        if key in RECOMPUTE_CHOICES and self.model.current is not None:
            self.schedule_recompute(RECOMPUTE_CHOICES[key])

    def schedule_recompute(self, panels: Sequence[str] | None = None) -> None:
        """Recompute soon (debounced: a dragged window recomputes once it rests)."""
        pending = self._recompute_timer.isActive()
        previous = getattr(self, "_recompute_only", None)
        if not panels or (pending and previous is None):
            self._recompute_only = None
        else:
            self._recompute_only = tuple(dict.fromkeys((previous or ()) + tuple(panels)))
        # a run not computed yet is computed at once (the first panel should appear fast); later
        # changes wait until a drag rests
        e = self.model.current
        first = e is not None and self._computed_for is not e.run
        self._recompute_timer.start(0 if first else 150)

    def context(self) -> AnalysisContext | None:
        e = self.model.current
        if e is None:
            return None
        start, stop = self.model.window_frames()
        others = tuple(o.run for o in self.model.entries if o is not e)
        return AnalysisContext(run=e.run, start=start, stop=stop, window_ps=self.model.effective_window_ps,
                               coordinate=self.model.coordinate, choices=self.model.choices, others=others)

    def recompute(self) -> None:
        """Compute every panel of the current run: Energy first, the others once it is drawn."""
        self._recompute_timer.stop()
        only = getattr(self, "_recompute_only", None)
        self._recompute_only = None
        ctx = self.context()
        if ctx is None:
            return
        self._ctx = ctx
        self._computed_for = ctx.run
        if only:
            self._start_panels(ctx, only)
        else:
            # the energy table first (no analysis: drawn at once), then everything else
            self.panels["Energy"].show_busy()
            self.jobs.start("Energy", lambda: FIRST_JOB(ctx), label="Energy table")
            self._rest_pending = True

    def _start_panels(self, ctx: AnalysisContext, names: Sequence[str]) -> None:
        for name in names:
            job = PANEL_JOBS[name]
            self.panels[name].show_busy()
            key = "Energy#audit" if name == "Energy" else name
            self.jobs.start(key, lambda job=job, ctx=ctx: job(ctx), label="Energy audit" if name == "Energy"
                            else f"{name} panel")
            for suffix, (panel_name, extra) in EXTRA_JOBS.items():
                if panel_name == name:
                    self.jobs.start(f"{name}#{suffix}", lambda extra=extra, ctx=ctx: extra(ctx),
                                    label=f"{name} panel ({suffix})")

    def _job_started(self, key: str, label: str) -> None:
        self.progress.show()
        self.cancel_button.show()
        self.progress.setRange(0, 0)
        self.say(f"{label}\u2026")

    def _job_progress(self, key: str, fraction: float, message: str) -> None:
        if fraction < 0:
            self.progress.setRange(0, 0)
        else:
            self.progress.setRange(0, 1000)
            self.progress.setValue(int(round(1000 * fraction)))
        label = self.jobs.labels.get(key, key)
        self.say(f"{label}: {message}" if message else label)

    def _busy_changed(self, busy: bool) -> None:
        self.progress.setVisible(busy)
        self.cancel_button.setVisible(busy)

    def cancel_work(self) -> None:
        running = self.jobs.running()
        self.jobs.cancel_all()
        self._rest_pending = False
        if running:
            self.say("Cancelled: " + ", ".join(self.jobs.labels.get(k, k) for k in running) + ".")

    def _job_finished(self, outcome: JobOutcome) -> None:
        key = outcome.key
        if key.startswith("open:"):
            self._runs_opened(outcome)
            return
        if key.startswith("export:"):
            self._export_finished(outcome)
            return
        if key == "frames:shared":  # the shared read is done (or cancelled): the panels find its results
            QtCore.QTimer.singleShot(0, self._start_rest_now)
            return
        name = key.split("#")[0]
        panel = self.panels.get(name)
        if panel is None:
            return
        waiting = [] if "#" in key else self._extras_waiting.pop(name, [])
        if outcome.cancelled:
            panel.show_cancelled()
        elif "#" in key and not key.endswith("#audit"):  # an extra job: add to what the panel shows
            if outcome.error:
                panel.add_note(f"{key.split('#')[1]}: {outcome.error}")
            else:
                self._extra_done(panel, name, outcome.result)
        elif outcome.error and key.endswith("#audit") and panel.result is not None and panel.result.figures:
            panel.add_note(f"The audit could not run: {outcome.error}")  # keep the energy table shown
            self._say_problem(f"Energy audit: {outcome.error.splitlines()[0]}")
        elif outcome.error:
            panel.show_error(outcome.error)
            self._say_problem(f"{name} panel: {outcome.error.splitlines()[0]}")
        else:
            result: PanelResult = outcome.result
            panel.show_result(result)
            audit = result.info.get("audit")
            ta = getattr(audit, "temperature", None)
            if ta is not None and self.model.current is not None:
                self.runs.note_kinetic_temperature(
                    self.model.current.run, f"{ta.mean_K:.4g} \u00b1 {ta.error_K:.2g} K (audit, {ta.n_dof} degrees "
                                            "of freedom)")
            for extra in waiting:
                self._apply_extra(panel, extra)
            if not self.jobs.busy:
                self.say(f"Panels up to date ({outcome.elapsed_s:.2g} s for the last).")
        if key == "Energy" and self._rest_pending:
            # let the energy figure reach the screen before the other analyses compete for the CPU
            QtCore.QTimer.singleShot(30, self._start_rest)

    def _extra_done(self, panel: Panel, name: str, result: PanelResult) -> None:
        if name in self.jobs.running():
            # the panel's main job is still running: add the extra figures once it has drawn
            self._extras_waiting.setdefault(name, []).append(result)
        else:
            self._apply_extra(panel, result)

    @staticmethod
    def _apply_extra(panel: Panel, result: PanelResult) -> None:
        if not result.figures and result.message:  # e.g. why there are no principal components
            panel.add_note(result.message)
        else:
            panel.add_result(result)

    def _start_rest(self) -> None:
        """After the energy table: one shared read of the frames (``shared_frames_job``), then the panels."""
        if not self._rest_pending:
            return
        ctx = self.context()
        if ctx is None:
            self._rest_pending = False
            return
        self.jobs.start("frames:shared", lambda ctx=ctx: shared_frames_job(ctx),
                        label="Reading the frames once for the audit, coordinate and principal components")

    def _start_rest_now(self) -> None:
        if not self._rest_pending:
            return  # cancelled meanwhile
        self._rest_pending = False
        ctx = self.context()
        if ctx is not None:
            self._start_panels(ctx, PANELS)

    def wait_idle(self, timeout_ms: int = 20_000) -> bool:
        """Process events until no job is running (tests and screenshots)."""
        timer = QtCore.QElapsedTimer()
        timer.start()
        app = QtWidgets.QApplication.instance()
        while timer.elapsed() < timeout_ms:
            app.processEvents(QtCore.QEventLoop.ProcessEventsFlag.AllEvents, 50)
            if (not self.jobs.busy and not self._recompute_timer.isActive()
                    and not getattr(self, "_rest_pending", False)):
                app.processEvents()
                return True
            QtCore.QThread.msleep(5)
        return False

    # ---- coordinate ---------------------------------------------------------------------------
    def ask_coordinate(self) -> None:
        from phasewake.app.window.builder import CoordinateBuilder

        e = self.model.current
        dlg = CoordinateBuilder(None if e is None else e.run, self.model.coordinate, self)
        if dlg.exec() == QtWidgets.QDialog.DialogCode.Accepted and dlg.spec:
            self.model.set_coordinate(dlg.spec)

    def ask_coordinate2(self) -> None:
        from phasewake.app.window.builder import CoordinateBuilder

        e = self.model.current
        dlg = CoordinateBuilder(None if e is None else e.run, str(self.model.choice("coordinate2", "") or ""), self)
        dlg.setWindowTitle("Second coordinate")
        if dlg.exec() == QtWidgets.QDialog.DialogCode.Accepted:
            self.model.set_choice("coordinate2", dlg.spec)

    # ---- sessions -----------------------------------------------------------------------------
    def session_state(self) -> session_io.SessionState:
        runs = []
        skipped = []
        for e in self.model.entries:
            if not e.paths:
                skipped.append(e.label)
                continue
            runs.append(session_io.RunRecord(paths=e.paths, topology=e.topology,
                                             settings={**e.settings.to_dict(), "coordinate": e.coordinate}))
        current = self.model.current_index
        if current >= 0 and not self.model.entries[current].paths:
            current = -1
        elif current >= 0:
            current -= sum(1 for e in self.model.entries[:current] if not e.paths)
        return session_io.SessionState(
            runs=tuple(runs), current_run=current, cursor_frame=self.model.cursor_frame,
            time_window_ps=self.model.time_window_ps, coordinate=self.model.coordinate,
            panel=self.tabs.tabText(self.tabs.currentIndex()), choices=self.model.choices,
            skipped=tuple(skipped))

    def save_session(self, path: str | Path) -> Path:
        state = self.session_state()
        out = session_io.save(state, path)
        self.session_path = out
        self.settings.setValue(FOLDER_KEYS["session"], str(out.parent))
        note = f" (not saved, built in memory: {', '.join(state.skipped)})" if state.skipped else ""
        self.say(f"Session saved to {out}{note}.")
        return out

    def load_session(self, path: str | Path) -> None:
        """Close the open runs and restore a saved session (runs open in the background)."""
        from phasewake.core.errors import SessionError

        try:
            state = session_io.load(path)
        except SessionError as exc:
            self.show_problem("Could not open the session", str(exc))
            return
        self.session_path = Path(path)
        while self.model.entries:
            self.model.remove_run(len(self.model.entries) - 1)
        self.model.set_coordinate(state.coordinate)
        for k, v in state.choices.items():
            self.model.set_choice(k, tuple(v) if k == "highlight_ps" and v else v)
        self._pending_state = state
        specs = []
        for r in state.runs:
            st = RunSettings.from_dict(r.settings)
            specs.append((r.paths, r.topology, st))
            if r.settings.get("coordinate"):
                self._coordinates_to_restore[tuple(r.paths)] = str(r.settings["coordinate"])
        if specs:
            self.open_runs(specs)
        else:
            self._pending_state = None
            self._apply_state(state)

    def _apply_state(self, state: session_io.SessionState) -> None:
        if 0 <= state.current_run < len(self.model.entries):
            self.model.set_current(state.current_run)
        self.model.set_coordinate(state.coordinate)
        self.model.set_time_window(state.time_window_ps)
        self.model.set_cursor_frame(state.cursor_frame)
        if state.panel in PANELS:
            self.tabs.setCurrentIndex(PANELS.index(state.panel))
        self.say(f"Session {self.session_path} restored.")

    def _ask_path(self, title: str, filters: str, *, save: bool, suggested: str = "", kind: str = "export") -> str:
        """A file dialog starting in the last folder used for this ``kind`` (see FOLDER_KEYS)."""
        key = FOLDER_KEYS[kind]
        folder = str(self.settings.value(key, "") or self.settings.value(FOLDER_KEYS["runs"], ""))
        start = str(Path(folder) / suggested) if folder and suggested else (suggested or folder)
        if save:
            path, _ = QtWidgets.QFileDialog.getSaveFileName(self, title, start, filters)
        else:
            path, _ = QtWidgets.QFileDialog.getOpenFileName(self, title, folder, filters)
        if path:
            self.settings.setValue(key, str(Path(path).parent))
        return path

    def ask_open_session(self) -> None:
        path = self._ask_path("Open session", f"phasewake sessions (*{session_io.SUFFIX} *.json);;All files (*)",
                              save=False, kind="session")
        if path:
            self.load_session(path)

    def save_session_now(self) -> None:
        if self.session_path is None:
            self.ask_save_session()
        else:
            self._save_reporting(self.session_path)

    def ask_save_session(self) -> None:
        path = self._ask_path("Save session", f"phasewake sessions (*{session_io.SUFFIX})", save=True,
                              suggested=f"session{session_io.SUFFIX}", kind="session")
        if path:
            if not Path(path).suffix:
                path += session_io.SUFFIX
            self._save_reporting(path)

    def _save_reporting(self, path: str | Path) -> None:
        from phasewake.core.errors import PhasewakeError

        try:
            self.save_session(path)
        except (OSError, PhasewakeError) as exc:
            self.show_problem("Could not save the session", f"{path}: {exc}")

    # ---- export -------------------------------------------------------------------------------
    def current_panel(self) -> Panel:
        return self.tabs.currentWidget()  # type: ignore[return-value]

    def _provenance(self) -> dict[str, Any]:
        e = self.model.current
        prov: dict[str, Any] = {"time_window_ps": list(self.model.effective_window_ps),
                                "coordinate": self.model.coordinate}
        if e is not None:
            try:
                from phasewake.core.figures.export import provenance_of_run

                prov.update(provenance_of_run(e.run, settings={"time_window_ps": list(self.model.effective_window_ps),
                                                                "coordinate": self.model.coordinate}))
            except (ImportError, OSError):
                pass
        return prov

    def export_figure_to(self, path: str | Path, *, preset: str = "slide", dpi: float = 200.0) -> Path:
        """Export the figure of the panel on top through core.export (matplotlib), as a background job.

        Returns the path at once; the status line says when the file is written (``wait_idle`` waits).
        """
        from phasewake.core.errors import MissingDataError
        from phasewake.core.figures.export import export_figure

        spec = self.current_panel().current_figure()
        if spec is None:
            raise MissingDataError("the panel on top has no figure to export yet")
        target = Path(path)
        provenance = self._provenance()

        def job():
            yield Progress(0, None, f"writing {target.name}")
            return export_figure(spec, target, preset=preset, dpi=dpi, provenance=provenance).path

        self._start_export(target, job, "Figure")
        return target

    def export_data_to(self, path: str | Path) -> Path:
        """The data of the figure on top as CSV, as a background job (returns the path at once)."""
        from phasewake.core.errors import MissingDataError
        from phasewake.core.figures.export import export_csv

        spec = self.current_panel().current_figure()
        if spec is None:
            raise MissingDataError("the panel on top has no figure to export yet")
        target = Path(path)
        provenance = self._provenance()

        def job():
            yield Progress(0, None, f"writing {target.name}")
            return export_csv(spec, target, provenance=provenance)

        self._start_export(target, job, "Data")
        return target

    def _start_export(self, target: Path, job: Callable[[], Any], what: str) -> None:
        """Run an export as a background job; exports take turns (see EXPORT_LOCK)."""
        self._export_counter += 1
        key = f"export:{self._export_counter}:{target}"
        self._export_kinds[key] = what

        def one_at_a_time():
            yield Progress(0, None, f"waiting to write {target.name}")
            with EXPORT_LOCK:
                work = job()
                if hasattr(work, "send") and hasattr(work, "throw"):
                    return (yield from work)
                return work

        self.jobs.start(key, one_at_a_time, label=f"{what} export")

    def ask_export_figure(self) -> None:
        from phasewake.core.errors import PhasewakeError

        if self.current_panel().current_figure() is None:
            self.show_problem("Nothing to export", "The panel on top has no figure yet.")
            return
        dlg = ExportDialog(self)
        if dlg.exec() != QtWidgets.QDialog.DialogCode.Accepted:
            return
        fmt, preset, dpi = dlg.values()
        name = (self.current_panel().current_figure().key or "figure").replace(".", "-")  # type: ignore[union-attr]
        path = self._ask_path("Export figure", f"{fmt.upper()} (*.{fmt})", save=True, suggested=f"{name}.{fmt}")
        if not path:
            return
        if not Path(path).suffix:
            path += f".{fmt}"
        try:
            self.export_figure_to(path, preset=preset, dpi=dpi)
        except (OSError, PhasewakeError) as exc:
            self.show_problem("Could not export the figure", str(exc))

    def ask_export_data(self) -> None:
        from phasewake.core.errors import PhasewakeError

        spec = self.current_panel().current_figure()
        if spec is None:
            self.show_problem("Nothing to export", "The panel on top has no figure yet.")
            return
        path = self._ask_path("Export data", "CSV (*.csv)", save=True,
                              suggested=f"{spec.key.replace('.', '-')}.csv")
        if not path:
            return
        try:
            self.export_data_to(path)
        except (OSError, PhasewakeError) as exc:
            self.show_problem("Could not export the data", str(exc))

    def export_report_to(self, path: str | Path) -> None:
        """Build the report of the current run (restricted to the time window) in the background.

        A ``.html`` path writes the HTML report and the PDF beside it (core.report writes both).
        """
        from phasewake.app.window.analyses import AnalysisContext, _given_states, module_or_none, window_run

        e = self.model.current
        if e is None:
            self.show_problem("No run", "Open a run before exporting its report.")
            return
        report = module_or_none("report")
        builder = None if report is None else getattr(report, "build_report", None)
        if builder is None:
            self.show_problem("Report not available", "This installation of phasewake has no report builder.")
            return
        target = Path(path)
        pdf, html_path = (target.with_suffix(".pdf"), target) if target.suffix.lower() in (".html", ".htm") \
            else (target, None)
        start, stop = self.model.window_frames()
        run = window_run(e.run, start, stop)
        ctx = AnalysisContext(run=e.run, start=start, stop=stop, window_ps=self.model.effective_window_ps,
                              choices=self.model.choices)
        states, surface = _given_states(ctx)
        kwargs = _report_kwargs(builder, coordinate=self.model.coordinate, states=states, surface=surface,
                                html_path=html_path)

        def job():
            return builder(run, pdf, **kwargs)

        self._start_export(target, job, "Report")

    def ask_export_report(self) -> None:
        path = self._ask_path("Export report", "PDF (*.pdf);;HTML (*.html)", save=True,
                              suggested="run-report.pdf")
        if path:
            self.export_report_to(path)

    def _export_finished(self, outcome: JobOutcome) -> None:
        what = self._export_kinds.pop(outcome.key, "Export")
        target = outcome.key.split(":", 2)[2]
        noun = {"Figure": "the figure", "Data": "the data", "Report": "the report"}.get(what, "the file")
        if outcome.error:
            self.show_problem(f"Could not write {noun}", outcome.error)
        elif outcome.cancelled:
            self.say(f"Writing {noun} was cancelled; {Path(target).name} was left as it was.")
        else:
            self.say(f"{what} written to {target}.")

    # ---- window events ------------------------------------------------------------------------
    def dragEnterEvent(self, event):  # noqa: N802 - Qt override
        if event.mimeData().hasUrls():
            event.acceptProposedAction()

    def dropEvent(self, event):  # noqa: N802 - Qt override
        paths = [u.toLocalFile() for u in event.mimeData().urls() if u.isLocalFile()]
        if paths:
            self.open_paths(paths)
            event.acceptProposedAction()

    def resizeEvent(self, event):  # noqa: N802 - Qt override
        super().resizeEvent(event)
        narrow = self.width() < NARROW_PX
        if narrow != self._narrow and self.runs_dock.isVisible():
            # crossing into a laptop-sized window, the Runs column collapses to its narrowest and the panels
            # get the room; back on a large screen it has its width again
            self._narrow = narrow
            self.resizeDocks([self.runs_dock], [180 if narrow else RUNS_WIDTH], QtCore.Qt.Orientation.Horizontal)

    def closeEvent(self, event):  # noqa: N802 - Qt override
        self.jobs.cancel_all()
        self.jobs.wait_all(3000)
        super().closeEvent(event)


def _report_kwargs(builder: Callable[..., Any], **wanted: Any) -> dict[str, Any]:
    """The options the report builder takes, among those the window knows (None values left out)."""
    import inspect

    params = inspect.signature(builder).parameters
    return {k: v for k, v in wanted.items() if v not in (None, "") and k in params}


class ExportDialog(QtWidgets.QDialog):
    """Format, size preset and DPI of an exported figure."""

    def __init__(self, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Export figure")
        self.fmt = QtWidgets.QComboBox()
        for f, what in (("png", "PNG image"), ("svg", "SVG vector"), ("pdf", "PDF vector")):
            self.fmt.addItem(what, f)
        self.preset = QtWidgets.QComboBox()
        for p, what in (("slide", "slide, 16:9"), ("single", "one journal column, ~8.5 cm"),
                        ("double", "two journal columns, ~17 cm")):
            self.preset.addItem(what, p)
        self.dpi = QtWidgets.QSpinBox()
        self.dpi.setRange(50, 1200)
        self.dpi.setValue(200)
        self.dpi.setSuffix(" dpi")
        buttons = QtWidgets.QDialogButtonBox(
            QtWidgets.QDialogButtonBox.StandardButton.Ok | QtWidgets.QDialogButtonBox.StandardButton.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        form = QtWidgets.QFormLayout(self)
        form.addRow("Format", self.fmt)
        form.addRow("Size", self.preset)
        form.addRow("Resolution (PNG)", self.dpi)
        form.addRow(buttons)

    def values(self) -> tuple[str, str, float]:
        return str(self.fmt.currentData()), str(self.preset.currentData()), float(self.dpi.value())
