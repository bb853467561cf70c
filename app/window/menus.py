"""The menu bar and what its simple actions do (cache, trail, guides, coordinate dialogs).

A part of :class:`~phasewake.app.window.main.MainWindow`. Every action is also added to the window, so
its shortcut works whichever widget has the focus.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from PySide6 import QtCore, QtGui, QtWidgets

from phasewake.app.window import analyses
from phasewake.app.window.analyses import PANELS


class MenuActions:
    """The menus of the window and their small actions (part of MainWindow)."""

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
        self._action(a, "Worker processes\u2026", self.ask_frame_workers,
                     tip="How many processes decode a run's frames at once (automatic: every usable core for "
                         "XTC, TRR and DCD, one for H5MD and other files)")
        self.set_frame_workers(self._frame_workers_setting(), remember=False)
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

    def _frame_workers_setting(self) -> int:
        """The remembered number of frame-reading processes (0: automatic)."""
        try:
            return max(0, int(self.settings.value("frame_workers", 0)))
        except (TypeError, ValueError):
            return 0

    def set_frame_workers(self, n: int, *, remember: bool = True) -> None:
        """Frame passes of this window use ``n`` worker processes (0: automatic, as on the command line)."""
        from phasewake.core.model import parallel

        parallel.set_workers(n if n > 0 else None)
        if remember:
            self.settings.setValue("frame_workers", int(n))
            self.settings.sync()
            self.say("Frames are read by " + (f"{n} worker process{'es' if n != 1 else ''}." if n > 0 else
                     "as many processes as there are usable cores for XTC, TRR and DCD, one otherwise."))

    def ask_frame_workers(self) -> None:
        from phasewake.core.model import parallel

        n, ok = QtWidgets.QInputDialog.getInt(
            self, "Worker processes",
            "Processes that decode a run's frames at once (0: automatic).\n"
            f"This computer lets phasewake use {parallel.usable_cores()} cores. More processes help with "
            "compressed\nframes (XTC, TRR) and DCD; results are the same whatever the number.",
            self._frame_workers_setting(), 0, 256)
        if ok:
            self.set_frame_workers(n)

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

