"""Sessions: the open runs, their settings and coordinates, the cursor, time window and panel, saved and
restored (the file format is :mod:`phasewake.app.window.session`).

A part of :class:`~phasewake.app.window.main.MainWindow`.
"""

from __future__ import annotations

from pathlib import Path

from phasewake.app.window import session as session_io
from phasewake.app.window.analyses import PANELS
from phasewake.app.window.file_dialogs import FOLDER_KEYS, ask_path
from phasewake.app.window.model import RunSettings


class SessionActions:
    """Save, open and restore sessions (part of MainWindow)."""

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

    def ask_open_session(self) -> None:
        path = ask_path(self, self.settings, "Open session",
                        f"phasewake sessions (*{session_io.SUFFIX} *.json);;All files (*)", save=False, kind="session")
        if path:
            self.load_session(path)

    def save_session_now(self) -> None:
        if self.session_path is None:
            self.ask_save_session()
        else:
            self._save_reporting(self.session_path)

    def ask_save_session(self) -> None:
        path = ask_path(self, self.settings, "Save session", f"phasewake sessions (*{session_io.SUFFIX})", save=True,
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

