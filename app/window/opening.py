"""Opening runs: the files a user gives become runs in the Runs list, read in the background.

A part of :class:`~phasewake.app.window.main.MainWindow`. Opening reads headers only (the reader
registry, ``phasewake.core.readers.open_run``); the panels are computed once a run is current
(:mod:`phasewake.app.window.computing`).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import replace
from pathlib import Path

from phasewake.app.window.file_dialogs import FOLDER_KEYS
from phasewake.app.window.model import RunEntry, RunSettings, apply_settings
from phasewake.app.window.run_groups import group_runs
from phasewake.app.window.workers import JobOutcome
from phasewake.core.model.run import Run

Opener = Callable[[Sequence[str], str | None, RunSettings], Run]


def default_opener(paths: Sequence[str], topology: str | None, settings: RunSettings) -> Run:
    """Open a run through the reader registry with what the user stated, as the command line does
    (library chatter kept off stdout; the files and options noted for worker processes, which open
    the run again with them)."""
    from phasewake.core.readers.stated import open_stated

    return open_stated(list(paths), topology=topology, options=settings.overrides())


class RunOpening:
    """Adding runs to the window and following the current run (part of MainWindow)."""

    def open_paths(self, paths: Sequence[str], *, topology: str | None = None,
                   settings: RunSettings | None = None) -> None:
        """Open ``paths`` in the background and add to the Runs list: one run, or one run per file when
        they are several self-contained run files (replicas; see :func:`group_runs`)."""
        self.open_runs([(group, topology, settings or RunSettings()) for group in group_runs(paths)])

    def open_runs(self, specs: Sequence[tuple[tuple[str, ...], str | None, RunSettings]]) -> None:
        if not specs:
            return
        opener = self.opener

        def job():
            from phasewake.core.errors import PhasewakeError, UnitsStyleUnknown
            from phasewake.core.progress import Progress

            opened = []
            failures = []
            no_style = []  # runs whose LAMMPS units style nothing states: asked for when the job is done
            for i, (paths, top, st) in enumerate(specs):
                yield Progress(i, len(specs), f"opening {Path(paths[0]).name if paths else ''}")
                try:
                    run = opener(paths, top, st)
                except UnitsStyleUnknown as exc:  # asked for in the window thread, then opened again
                    no_style.append((paths, top, st, str(exc)))
                    continue
                except PhasewakeError as exc:
                    failures.append(str(exc))
                    continue
                except OSError as exc:
                    failures.append(f"{paths[0] if paths else ''}: {exc}")
                    continue
                apply_settings(run, st)
                opened.append(RunEntry(run=run, paths=tuple(paths), topology=top, settings=st))
            return opened, failures, no_style

        self._open_counter += 1
        self.jobs.start(f"open:{self._open_counter}", job, label="Opening run files", on_done=self._runs_opened)
        self.say("Opening run files\u2026")

    def add_run(self, run: Run, *, paths: Sequence[str] = (), topology: str | None = None,
                settings: RunSettings | None = None) -> int:
        """Add an already opened run (tests, synthetic runs)."""
        return self.model.add_run(RunEntry(run=run, paths=tuple(paths), topology=topology,
                                           settings=settings or RunSettings()))

    def ask_units_style(self, paths: Sequence[str], why: str) -> str | None:
        """The LAMMPS units style of a dump opened without its log, asked of the user (None: cancelled)."""
        from PySide6 import QtWidgets

        from phasewake.app.window.runs import UNITS_STYLES

        names = [text for value, text in UNITS_STYLES if value]
        text, ok = QtWidgets.QInputDialog.getItem(
            self, "LAMMPS units style", f"{Path(paths[0]).name}: the units style is not in the files (no "
            "log.lammps). Which style did the run use?", names, 0, False)
        if not ok:
            return None
        return next(value for value, label in UNITS_STYLES if label == text)

    def reopen_run(self, index: int, settings: RunSettings) -> None:
        """Open run ``index``'s files again with ``settings`` (a changed time step is read into the run) in
        the background, then put it in place of the old one."""
        entry = self.model.entry(index)
        if entry is None:
            return
        opener, paths, top = self.opener, entry.paths, entry.topology

        def job():
            from phasewake.core.progress import Progress

            yield Progress(0, 1, f"opening {Path(paths[0]).name} again")
            run = opener(paths, top, settings)
            apply_settings(run, settings)
            return RunEntry(run=run, paths=tuple(paths), topology=top, settings=settings, coordinate=entry.coordinate)

        def done(outcome: JobOutcome) -> None:
            if outcome.error:
                self.show_problem("Could not open the run again with the new settings", outcome.error)
            elif not outcome.cancelled and self.model.entry(index) is entry:
                self.model.replace_run(index, outcome.result)
                self.say(f"Opened {outcome.result.label} again with the new settings.")

        self._open_counter += 1
        self.jobs.start(f"open:{self._open_counter}", job, label="Opening the run again", on_done=done)

    def _runs_opened(self, outcome: JobOutcome) -> None:
        if outcome.error:
            self.show_problem("Could not open files", outcome.error)
            self._pending_state = None
            return
        if outcome.cancelled:
            self.say("Opening cancelled.")
            self._pending_state = None
            return
        opened, failures, no_style = outcome.result
        for paths, top, st, why in no_style:
            style = self.ask_units_style(paths, why)
            if style:
                self.open_runs([(paths, top, replace(st, units_style=style))])
            else:
                failures.append(why)
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
        from phasewake.core.analyses.coordinate_choice import choose_coordinate
        from phasewake.core.errors import PhasewakeError

        try:
            choice = choose_coordinate(run)
        except PhasewakeError:
            return "", ""
        return choice.spec or "", choice.reason
