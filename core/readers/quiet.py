"""Quiet reading: mdtraj's C plugins print to file descriptor 1, and mdtraj warns about optional
packages; readers wrap their calls into mdtraj in :func:`quiet_mdtraj`."""

from __future__ import annotations

import contextlib
import os
import sys
import threading
import warnings as _warnings
from collections.abc import Iterator

_QUIET_LOCK = threading.RLock()
_QUIET_DEPTH = 0


@contextlib.contextmanager
def quiet_c_stdout() -> Iterator[None]:
    """Silence writes to file descriptor 1 (mdtraj's DCD plugin prints there from C) and Python's stdout.

    Library code never prints; mdtraj's C plugins do, below Python. This swaps fd 1 for /dev/null for
    the duration. The swap is process-wide, so it is serialised by a lock (re-entrant, nesting counted)
    and callers keep it short: one chunk read at a time, never across a ``yield``.
    """
    global _QUIET_DEPTH
    with _QUIET_LOCK:
        _QUIET_DEPTH += 1
        saved = None
        fd = 1
        sink = None
        saved_py = sys.stdout
        try:
            if _QUIET_DEPTH == 1:
                try:
                    fd = sys.__stdout__.fileno() if sys.__stdout__ is not None else 1
                except (AttributeError, ValueError, OSError):
                    fd = 1
                try:
                    sys.stdout.flush()
                except (AttributeError, ValueError, OSError):
                    pass
                try:
                    saved = os.dup(fd)
                    devnull = os.open(os.devnull, os.O_WRONLY)
                    os.dup2(devnull, fd)
                    os.close(devnull)
                except OSError:
                    saved = None
                sink = open(os.devnull, "w")  # noqa: SIM115
                sys.stdout = sink
            yield
        finally:
            _QUIET_DEPTH -= 1
            if sink is not None:
                sys.stdout = saved_py
                sink.close()
            if saved is not None:
                os.dup2(saved, fd)
                os.close(saved)


@contextlib.contextmanager
def quiet_mdtraj() -> Iterator[None]:
    """No chatter on stdout and no mdtraj advice warnings (netCDF4 missing, ...)."""
    with quiet_c_stdout(), _warnings.catch_warnings():
        _warnings.filterwarnings("ignore", message=".*netCDF4.*")
        _warnings.filterwarnings("ignore", category=DeprecationWarning)
        yield
