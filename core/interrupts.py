"""Ctrl-C and SIGTERM on the command line: noted by a handler, acted on between chunks of work.

Python's default turns SIGINT into a KeyboardInterrupt raised at whatever line runs at that moment:
inside a finaliser, a thread pool's shutdown or an HDF5 call it is printed as "Exception ignored" and
the work carries on, and a SIGTERM kills the process before its temporary files are removed.

:func:`handling` (used by ``phasewake.app.cli.main``) installs handlers for SIGINT and SIGTERM that only
*note* the signal. The work notices it at safe points: :data:`TOKEN` is the cancel token the command
line passes to :func:`phasewake.core.progress.drive` (checked at every Progress record, i.e. between
chunks of frames), and :func:`check` is called by the atomic writer before it puts a file in place (an
interrupted write is abandoned and its temporary file removed). :func:`requested` still tells after the
block, until the next one begins. A second signal of either kind raises
KeyboardInterrupt at once, for work that yields no Progress for a long time.

The exit status is :func:`exit_status`: 130 after SIGINT, 143 after SIGTERM (128 + the signal number).
"""

from __future__ import annotations

import contextlib
import signal
import threading
from collections.abc import Iterator
from types import FrameType

from phasewake.core.progress import CancelToken

TOKEN = CancelToken()
_received: list[int] = []
_active: list[bool] = []  # non-empty while handling() is in force


def requested() -> int | None:
    """The number of the first signal received while :func:`handling` was active, or None."""
    return _received[0] if _received else None


def check() -> None:
    """Raise KeyboardInterrupt if a SIGINT or SIGTERM was noted (a safe point to stop at)."""
    if _received and _active:
        raise KeyboardInterrupt


def exit_status() -> int:
    """128 + the signal number (130 for Ctrl-C, 143 for SIGTERM)."""
    return 128 + (requested() or signal.SIGINT)


def describe() -> str:
    """The word for what happened: interrupted (Ctrl-C) or terminated (SIGTERM)."""
    return "terminated" if requested() == signal.SIGTERM else "interrupted"


def _note(signum: int, frame: FrameType | None) -> None:
    first = not _received
    _received.append(signum)
    TOKEN.cancel()
    if not first:  # asked twice: stop now
        raise KeyboardInterrupt


@contextlib.contextmanager
def handling() -> Iterator[None]:
    """Note SIGINT and SIGTERM for the duration of the block (main thread only; elsewhere a no-op)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    _reset()
    saved = {s: signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM)}
    for s in saved:
        signal.signal(s, _note)
    _active.append(True)
    try:
        yield
    finally:
        _active.clear()
        for s, h in saved.items():
            signal.signal(s, h)
        _fresh_token()  # work driven after the block is not cancelled; requested() still tells


def _fresh_token() -> None:
    global TOKEN
    TOKEN = CancelToken()


def _reset() -> None:
    _received.clear()
    _fresh_token()


def token() -> CancelToken:
    """The cancel token of the current :func:`handling` block."""
    return TOKEN
