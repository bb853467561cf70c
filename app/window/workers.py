"""Run the core's progress generators off the GUI thread.

A job is a zero-argument callable that returns a ``phasewake.core.progress`` generator (or a plain
value). :class:`JobRunner` runs each job in its own ``QThread`` with a
:class:`~phasewake.core.progress.CancelToken`, turns the generator's yields into (rate-limited)
progress signals, and reports the result, a cancellation or an error back on the GUI thread. Jobs
have a key (e.g. the panel name): starting a job cancels the running one with the same key, so a
dragged time window never piles up stale computations. Each job carries its own completion handler
(``start(..., on_done=...)``), called on the GUI thread with the job's :class:`JobOutcome`: the window
wires every kind of job to the code that shows its result, with no central router.

Every thread carries a serial number in its signals, and the runner finds the thread by that number:
it never asks Qt for ``sender()``. A queued progress signal can arrive after the thread that sent it
was deleted (a job that ends while the GUI thread is busy, e.g. during a burst of exports); reading
the sender then touched a dead object and crashed the window. The thread is deleted only after its
``done`` signal has been handled on the GUI thread, its signals disconnected and the thread joined.
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


OutcomeHandler = Callable[[JobOutcome], None]


class _Thread(QtCore.QThread):
    progressed = QtCore.Signal(int, str, float, str)  # serial, key, fraction (-1 unknown), message
    done = QtCore.Signal(int, object)  # serial, JobOutcome

    def __init__(self, serial: int, key: str, job: Callable[[], Any], token: CancelToken, label: str,
                 on_done: OutcomeHandler | None) -> None:
        super().__init__()
        self.serial = serial
        self.key = key
        self.job = job
        self.token = token
        self.label = label
        self.on_done = on_done  # called on the GUI thread, never from run()
        self._last = 0.0

    def _on_progress(self, p: Progress) -> None:
        now = time.monotonic()
        if now - self._last < PROGRESS_INTERVAL_S:
            return
        self._last = now
        frac = p.fraction
        self.progressed.emit(self.serial, self.key, -1.0 if frac is None else float(frac), p.message)

    def run(self) -> None:  # runs in the worker thread
        t0 = time.monotonic()
        outcome = JobOutcome(self.key, error=f"{self.label} stopped unexpectedly")
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
        finally:  # always: the runner deletes the thread only once this has arrived
            self.done.emit(self.serial, outcome)


class JobRunner(QtCore.QObject):
    """Start, track and cancel background jobs.

    Signals
    -------
    started(str, str)
        key, label: a job started.
    progressed(str, float, str)
        key, fraction in [0, 1] (or -1 when unknown), message.
    finished(object)
        A :class:`JobOutcome` (for results, errors and cancellations alike), after the job's own
        ``on_done`` handler has seen it.
    busyChanged(bool)
        Whether any job is running.
    """

    started = QtCore.Signal(str, str)
    progressed = QtCore.Signal(str, float, str)
    finished = QtCore.Signal(object)
    busyChanged = QtCore.Signal(bool)

    def __init__(self, parent: QtCore.QObject | None = None) -> None:
        super().__init__(parent)
        self._threads: dict[str, _Thread] = {}  # key -> the current job's thread
        self._live: dict[int, _Thread] = {}  # serial -> every thread not yet deleted (current or cancelled)
        self._serial = 0
        self.labels: dict[str, str] = {}

    @property
    def busy(self) -> bool:
        return bool(self._threads)

    def running(self) -> list[str]:
        return list(self._threads)

    def start(self, key: str, job: Callable[[], Any], *, label: str = "",
              on_done: OutcomeHandler | None = None) -> CancelToken:
        """Run ``job`` in a worker thread; cancels a running job with the same key first.

        ``on_done(outcome)`` runs on the GUI thread when the job ends (result, error or cancellation); a
        job superseded by another of the same key is not reported (its successor will be)."""
        was_busy = self.busy
        self.cancel(key, quiet=True)
        token = CancelToken()
        self._serial += 1
        th = _Thread(self._serial, key, job, token, label or key, on_done)
        # bound methods of this runner (a QObject of the GUI thread): queued across threads, and the
        # serial in each signal says which thread sent it
        th.progressed.connect(self._relay_progress)
        th.done.connect(self._on_done)
        self._threads[key] = th
        self._live[th.serial] = th
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
            th.token.cancel()  # the thread stays in _live until its done signal arrives
            if not quiet:
                self._report(th.on_done, JobOutcome(key, cancelled=True))
            if not self._threads and not quiet:
                self.busyChanged.emit(False)

    def cancel_all(self) -> None:
        for key in list(self._threads):
            self.cancel(key)

    def wait_all(self, timeout_ms: int = 10_000) -> bool:
        """Block until every thread (running or cancelled) has ended; for shutdown and tests."""
        ok = True
        for th in list(self._live.values()):
            ok = th.wait(timeout_ms) and ok
        return ok

    @property
    def n_threads(self) -> int:
        """Threads not yet deleted (running, cancelled and winding down, or ended and not yet reaped)."""
        return len(self._live)

    def _current(self, serial: int, key: str) -> bool:
        th = self._threads.get(key)
        return th is not None and th.serial == serial

    def _relay_progress(self, serial: int, key: str, frac: float, message: str) -> None:
        if self._current(serial, key):  # else a superseded, cancelled or already reaped job
            self.progressed.emit(key, frac, message)

    def _on_done(self, serial: int, outcome: JobOutcome) -> None:
        current = self._current(serial, outcome.key)
        handler = None
        if current:
            handler = self._threads.pop(outcome.key).on_done
        self._reap(serial)
        if current:
            self._report(handler, outcome)
            if not self._threads:
                self.busyChanged.emit(False)
        # else: a superseded or cancelled job ending late; its outcome was already reported.

    def _report(self, handler: OutcomeHandler | None, outcome: JobOutcome) -> None:
        if handler is not None:
            handler(outcome)
        self.finished.emit(outcome)

    def _reap(self, serial: int) -> None:
        """Delete an ended thread: disconnect it first, so nothing it queued later can reach us."""
        th = self._live.get(serial)
        if th is None:
            return
        if not th.wait(0):
            # done was its last act; run() is returning: try again in a moment instead of blocking
            QtCore.QTimer.singleShot(5, lambda serial=serial: self._reap(serial))
            return
        del self._live[serial]
        th.on_done = None  # the handler may hold the window's panels: nothing keeps them alive through here
        th.job = None  # nor the job's closure (its run, its results)
        for signal in (th.progressed, th.done):
            try:
                signal.disconnect()
            except (RuntimeError, TypeError):  # nothing connected any more
                pass
        th.deleteLater()
