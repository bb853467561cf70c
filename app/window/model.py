"""The window's shared state: loaded runs, the time cursor, the analysis time window, choices.

Views subscribe to the signals of :class:`WindowModel` in their constructor and write user intent
back through its setters. Every setter emits its signal only when the value really changed, so a
cursor dragged in one panel updates all others without feeding back into itself.

The cursor is a frame index of the current run; its time is ``run.time_ps[frame]``. The time window
is a pair of times in ps (``None`` means the whole run).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from PySide6 import QtCore

from phasewake.core.model.run import Run


@dataclass(frozen=True)
class RunSettings:
    """What a user may state about a run when the files do not say (None: keep the files' value)."""

    timestep_fs: float | None = None
    n_constraints: int | None = None
    temperature_K: float | None = None  # the thermostat's target temperature
    ensemble: str | None = None  # "NVE", "NVT", "NPT" (RunMetadata.ensemble)
    thermostat: str | None = None  # "none", "langevin", "nose-hoover", ... (RunMetadata.thermostat)
    units_style: str | None = None  # a LAMMPS units style ("real", "metal", "lj", ...) for a dump without a log

    FIELDS = ("timestep_fs", "n_constraints", "temperature_K", "ensemble", "thermostat", "units_style")

    def overrides(self) -> dict[str, Any]:
        """Keyword overrides for ``phasewake.core.readers.open_run`` (internal units)."""
        from phasewake.core.readers.stated import stated_options

        return stated_options(timestep_fs=self.timestep_fs, n_constraints=self.n_constraints,
                              temperature_K=self.temperature_K, ensemble=self.ensemble, thermostat=self.thermostat,
                              units_style=self.units_style)

    def to_dict(self) -> dict[str, Any]:
        return {k: getattr(self, k) for k in self.FIELDS}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> RunSettings:
        """From :meth:`to_dict` (a saved session); unknown keys are ignored, missing ones stay None."""
        return cls(**{k: d.get(k) for k in cls.FIELDS})


@dataclass
class RunEntry:
    """One loaded run and how it was opened."""

    run: Run
    paths: tuple[str, ...] = ()
    topology: str | None = None
    settings: RunSettings = field(default_factory=RunSettings)
    coordinate: str = ""  # this run's coordinate (runs with different atoms need different ones)
    files_metadata: Any = None  # RunMetadata as opened, kept when the user first changes a setting

    @property
    def label(self) -> str:
        return self.run.name


def _note_for_workers(run: Run, settings: RunSettings) -> None:
    """Worker processes that open the run again do so with what the user states now."""
    from dataclasses import replace as with_

    from phasewake.core.model.ranges import files_of, has_files, remember_files

    if has_files(run):
        files = files_of(run)
        kept = {k: v for k, v in files.options.items() if k not in _SETTING_OPTIONS}  # e.g. a units style
        remember_files(run, with_(files, options={**kept, **settings.overrides()}))


_SETTING_OPTIONS = frozenset({"timestep_ps", "n_constraints", "temperature_K", "ensemble", "thermostat", "units_style"})


def apply_settings(run: Run, settings: RunSettings) -> None:
    """Write a user's per-run settings into the run's metadata (in place), as ``open_run`` does."""
    from phasewake.core.readers import apply_stated

    apply_stated(run.metadata, {k: v for k, v in settings.overrides().items() if k != "units_style"})  # read only


class WindowModel(QtCore.QObject):
    """Runs, cursor, time window and panel choices, with change signals.

    Signals
    -------
    runsChanged()
        A run was added, removed or its settings changed.
    currentRunChanged(int)
        Index of the run the panels show (-1: none).
    cursorChanged(int)
        Frame index of the cursor in the current run.
    timeWindowChanged()
        The analysis window (``time_window_ps``) changed.
    coordinateChanged(str)
        The coordinate specification the phase-space, landscape and crossings panels use.
    choicesChanged(str)
        A panel choice (key) changed; read it with :meth:`choice`.
    """

    runsChanged = QtCore.Signal()
    reopenRequested = QtCore.Signal(int, object)  # run index, RunSettings: open its files again with these
    currentRunChanged = QtCore.Signal(int)
    cursorChanged = QtCore.Signal(int)
    timeWindowChanged = QtCore.Signal()
    coordinateChanged = QtCore.Signal(str)
    choicesChanged = QtCore.Signal(str)

    def __init__(self, parent: QtCore.QObject | None = None) -> None:
        super().__init__(parent)
        self._entries: list[RunEntry] = []
        self._current = -1
        self._cursor = 0
        self._window: tuple[float, float] | None = None
        self._pending_coordinate = ""  # set before any run is open (a session): given to the first run
        self._choices: dict[str, Any] = {}

    # ---- runs -------------------------------------------------------------------------------
    @property
    def entries(self) -> list[RunEntry]:
        return list(self._entries)

    @property
    def current_index(self) -> int:
        return self._current

    @property
    def current(self) -> RunEntry | None:
        return self._entries[self._current] if 0 <= self._current < len(self._entries) else None

    def entry(self, index: int) -> RunEntry | None:
        """Run ``index`` of the list, or None."""
        return self._entries[index] if 0 <= index < len(self._entries) else None

    @property
    def time_ps(self) -> np.ndarray:
        """Frame times of the current run, shape (n_frames,), ps (empty when no run)."""
        e = self.current
        if e is None:
            return np.zeros(0)
        t = e.run.time_ps
        if t.size == 0 and e.run.energies is not None:
            t = e.run.energies.time_ps
        return np.asarray(t, dtype=float)

    def add_run(self, entry: RunEntry) -> int:
        self._entries.append(entry)
        self.runsChanged.emit()
        if self._current < 0:
            self.set_current(len(self._entries) - 1)
        return len(self._entries) - 1

    def remove_run(self, index: int) -> None:
        if not 0 <= index < len(self._entries):
            return
        del self._entries[index]
        self.runsChanged.emit()
        if not self._entries:
            self._current = -1
            self._cursor = 0
            self._window = None
            self.currentRunChanged.emit(-1)
            self.timeWindowChanged.emit()
        elif index < self._current:
            self._current -= 1  # same run, new position in the list
            self.currentRunChanged.emit(self._current)
        elif index == self._current:
            self._current = -1
            self.set_current(min(index, len(self._entries) - 1))

    def update_settings(self, index: int, settings: RunSettings) -> None:
        """A user's settings for a run: its metadata becomes the files' values with these on top (a value
        set back to "as in files" is the files' again), and its panels recompute (the result cache keys
        hold the metadata, so nothing stale is served)."""
        import copy

        e = self._entries[index]
        if e.settings == settings:
            return
        steps = str(e.run.metadata.extra.get("time_from", "")).startswith("step")
        if e.paths and ((settings.timestep_fs != e.settings.timestep_fs and steps)
                        or settings.units_style != e.settings.units_style):
            # what is read into the run changed: a LAMMPS dump's time is step x time step, its units come from
            # its style. Open the files again with it, as --timestep / --units do (in the background)
            self.reopenRequested.emit(index, replace(settings))
            return
        if e.files_metadata is None:  # what the files said, before any of the user's settings
            e.files_metadata = copy.deepcopy(e.run.metadata)
            for k in ("timestep_ps", "temperature_K", "ensemble", "thermostat", "n_constraints"):
                if e.files_metadata.sources.get(k) == "user":
                    e.files_metadata.sources.pop(k, None)
        e.settings = replace(settings)
        e.run.metadata = copy.deepcopy(e.files_metadata)
        apply_settings(e.run, settings)
        _note_for_workers(e.run, settings)
        self.runsChanged.emit()
        if index == self._current:
            self.timeWindowChanged.emit()  # analyses depend on the settings: recompute

    def replace_run(self, index: int, entry: RunEntry) -> None:
        """Put ``entry`` (the same files opened again) in place of run ``index``, keeping its coordinate."""
        if not 0 <= index < len(self._entries):
            return
        entry.coordinate = entry.coordinate or self._entries[index].coordinate
        self._entries[index] = entry
        self.runsChanged.emit()
        if index == self._current:
            self.currentRunChanged.emit(index)
            self.timeWindowChanged.emit()

    def set_current(self, index: int) -> None:
        if index == self._current or not 0 <= index < len(self._entries):
            return
        before = self.coordinate
        self._current = index
        e = self._entries[index]
        if not e.coordinate and self._pending_coordinate:
            e.coordinate, self._pending_coordinate = self._pending_coordinate, ""
        t = self.time_ps
        self._window = None
        self._cursor = 0 if t.size == 0 else min(self._cursor, t.size - 1)
        self.currentRunChanged.emit(index)
        if self.coordinate != before:
            self.coordinateChanged.emit(self.coordinate)
        self.timeWindowChanged.emit()
        self.cursorChanged.emit(self._cursor)

    # ---- cursor -----------------------------------------------------------------------------
    @property
    def cursor_frame(self) -> int:
        return self._cursor

    @property
    def cursor_time_ps(self) -> float:
        t = self.time_ps
        return float(t[self._cursor]) if t.size else 0.0

    def set_cursor_frame(self, frame: int) -> None:
        t = self.time_ps
        if t.size == 0:
            return
        frame = int(min(max(int(frame), 0), t.size - 1))
        if frame != self._cursor:
            self._cursor = frame
            self.cursorChanged.emit(frame)

    def frame_at(self, time_ps: float) -> int:
        """Index of the frame nearest ``time_ps`` in the current run."""
        t = self.time_ps
        if t.size == 0 or not math.isfinite(time_ps):
            return 0
        i = int(np.searchsorted(t, time_ps))
        if i <= 0:
            return 0
        if i >= t.size:
            return t.size - 1
        return i if (t[i] - time_ps) < (time_ps - t[i - 1]) else i - 1

    def set_cursor_time(self, time_ps: float) -> None:
        self.set_cursor_frame(self.frame_at(time_ps))

    def step_cursor(self, frames: int) -> None:
        self.set_cursor_frame(self._cursor + frames)

    # ---- analysis window --------------------------------------------------------------------
    @property
    def time_window_ps(self) -> tuple[float, float] | None:
        return self._window

    @property
    def effective_window_ps(self) -> tuple[float, float]:
        """The window, or the whole run's span when none is set."""
        if self._window is not None:
            return self._window
        t = self.time_ps
        return (float(t[0]), float(t[-1])) if t.size else (0.0, 0.0)

    def window_frames(self) -> tuple[int, int]:
        """(start, stop) frame indices of the window, stop exclusive."""
        t = self.time_ps
        if self._window is None or t.size == 0:
            return 0, int(t.size)
        lo, hi = self._window
        start = int(np.searchsorted(t, lo, side="left"))
        stop = int(np.searchsorted(t, hi, side="right"))
        return start, max(stop, start + 1)

    def set_time_window(self, window: tuple[float, float] | None) -> None:
        t = self.time_ps
        if window is not None:
            lo, hi = sorted((float(window[0]), float(window[1])))
            if t.size:
                lo = max(lo, float(t[0]))
                hi = min(hi, float(t[-1]))
                if hi <= lo:
                    return
                if lo <= float(t[0]) and hi >= float(t[-1]):
                    window = None
                else:
                    window = (lo, hi)
            else:
                window = (lo, hi)
        if window == self._window:
            return
        if window is not None and self._window is not None:
            # Sub-resolution jitter from a drag is not a change worth recomputing for.
            tol = 1e-9 * max(1.0, abs(window[1]))
            if abs(window[0] - self._window[0]) < tol and abs(window[1] - self._window[1]) < tol:
                return
        self._window = window
        self.timeWindowChanged.emit()

    # ---- coordinate and panel choices -------------------------------------------------------
    @property
    def coordinate(self) -> str:
        """The current run's coordinate ('' when none is chosen or no run is open)."""
        e = self.current
        return self._pending_coordinate if e is None else e.coordinate

    def coordinate_of(self, index: int) -> str:
        return self._entries[index].coordinate if 0 <= index < len(self._entries) else ""

    def set_coordinate(self, spec: str) -> None:
        """Set the current run's coordinate (before any run is open: the next run's)."""
        spec = spec.strip()
        e = self.current
        if e is None:
            self._pending_coordinate = spec
            return
        if spec != e.coordinate:
            e.coordinate = spec
            self.coordinateChanged.emit(spec)

    def choice(self, key: str, default: Any = None) -> Any:
        return self._choices.get(key, default)

    @property
    def choices(self) -> dict[str, Any]:
        return dict(self._choices)

    def set_choice(self, key: str, value: Any) -> None:
        if self._choices.get(key, object()) == value:
            return
        self._choices[key] = value
        self.choicesChanged.emit(key)
