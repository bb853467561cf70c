"""Run the core's progress generators off the GUI thread.

A job is a zero-argument callable that returns a ``phasewake.core.progress`` generator (or a plain
value). :class:`JobRunner` runs each job in its own ``QThread`` with a
:class:`~phasewake.core.progress.CancelToken`, turns the generator's yields into (rate-limited)
progress signals, and reports the result, a cancellation or an error back on the GUI thread. Jobs
have a key (e.g. the panel name): starting a job cancels the running one with the same key, so a
dragged time window never piles up stale computations.
"""

from __future__ import annotations

import time
import traceback
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from PySide6 import QtCore

from phasewake.core.errors import Cancelled, PhasewakeError
from phasewake.core.progress import CancelToken, Progress, drive

PROGRESS_INTERVAL_S = 0.05  # at most ~20 progress updates a second cross to the GUI thread


@dataclass(frozen=True)
class JobOutcome:
    """What a finished job produced: a result, or an error message, or a cancellation."""

    key: str
    result: Any = None
    error: str | None = None
    cancelled: bool = False
    elapsed_s: float = 0.0


class _Thread(QtCore.QThread):
    progressed = QtCore.Signal(str, float, str)  # key, fraction (-1 unknown), message
    done = QtCore.Signal(object)  # JobOutcome

    def __init__(self, key: str, job: Callable[[], Any], token: CancelToken, label: str) -> None:
        super().__init__()
        self.key = key
        self.job = job
        self.token = token
        self.label = label
        self._last = 0.0

    def _on_progress(self, p: Progress) -> None:
        now = time.monotonic()
        if now - self._last < PROGRESS_INTERVAL_S:
            return
        self._last = now
        frac = p.fraction
        self.progressed.emit(self.key, -1.0 if frac is None else float(frac), p.message)

    def run(self) -> None:  # runs in the worker thread
        t0 = time.monotonic()
        try:
            work = self.job()
            if hasattr(work, "send") and hasattr(work, "throw"):  # a progress generator
                result = drive(work, self._on_progress, self.token)
            else:
                result = work
            if self.token.cancelled:
                raise Cancelled()
            outcome = JobOutcome(self.key, result=result, elapsed_s=time.monotonic() - t0)
        except Cancelled:
            outcome = JobOutcome(self.key, cancelled=True, elapsed_s=time.monotonic() - t0)
        except PhasewakeError as exc:
            outcome = JobOutcome(self.key, error=str(exc), elapsed_s=time.monotonic() - t0)
        except Exception as exc:  # noqa: BLE001 - any failure of an analysis must reach the user, not kill the window
            detail = traceback.format_exception_only(type(exc), exc)[-1].strip()
            outcome = JobOutcome(self.key, error=f"{self.label} failed: {detail}",
                                 elapsed_s=time.monotonic() - t0)
        self.done.emit(outcome)


class JobRunner(QtCore.QObject):
    """Start, track and cancel background jobs.

    Signals
    -------
    started(str, str)
        key, label: a job started.
    progressed(str, float, str)
        key, fraction in [0, 1] (or -1 when unknown), message.
    finished(object)
        A :class:`JobOutcome` (for results, errors and cancellations alike).
    busyChanged(bool)
        Whether any job is running.
    """

    started = QtCore.Signal(str, str)
    progressed = QtCore.Signal(str, float, str)
    finished = QtCore.Signal(object)
    busyChanged = QtCore.Signal(bool)

    def __init__(self, parent: QtCore.QObject | None = None) -> None:
        super().__init__(parent)
        self._threads: dict[str, _Thread] = {}
        self._retired: list[_Thread] = []  # cancelled threads still winding down
        self.labels: dict[str, str] = {}

    @property
    def busy(self) -> bool:
        return bool(self._threads)

    def running(self) -> list[str]:
        return list(self._threads)

    def start(self, key: str, job: Callable[[], Any], *, label: str = "") -> CancelToken:
        """Run ``job`` in a worker thread; cancels a running job with the same key first."""
        was_busy = self.busy
        self.cancel(key, quiet=True)
        token = CancelToken()
        th = _Thread(key, job, token, label or key)
        th.progressed.connect(self._relay_progress)
        th.done.connect(self._on_done)
        th.finished.connect(lambda th=th: self._reap(th))
        self._threads[key] = th
        self.labels[key] = label or key
        th.start()
        self.started.emit(key, label or key)
        if not was_busy:
            self.busyChanged.emit(True)
        return token

    def cancel(self, key: str, *, quiet: bool = False) -> None:
        """Ask the job to stop; listeners get a cancelled outcome now (unless ``quiet``)."""
        th = self._threads.pop(key, None)
        if th is not None:
            th.token.cancel()
            self._retired.append(th)
            if not quiet:
                self.finished.emit(JobOutcome(key, cancelled=True))
            if not self._threads and not quiet:
                self.busyChanged.emit(False)

    def cancel_all(self) -> None:
        for key in list(self._threads):
            self.cancel(key)

    def wait_all(self, timeout_ms: int = 10_000) -> bool:
        """Block until every thread (running or cancelled) has ended; for shutdown and tests."""
        ok = True
        for th in list(self._threads.values()) + list(self._retired):
            ok = th.wait(timeout_ms) and ok
        return ok

    def _relay_progress(self, key: str, frac: float, message: str) -> None:
        th = self._threads.get(key)
        if th is not None and th is self.sender():
            self.progressed.emit(key, frac, message)

    def _on_done(self, outcome: JobOutcome) -> None:
        th = self.sender()
        if self._threads.get(outcome.key) is th:
            del self._threads[outcome.key]
            self.finished.emit(outcome)
            if not self._threads:
                self.busyChanged.emit(False)
        # else: a superseded or cancelled job ending late; its outcome was already reported.

    def _reap(self, th: _Thread) -> None:
        if th in self._retired:
            self._retired.remove(th)
        th.deleteLater()
