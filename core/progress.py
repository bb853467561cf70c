"""Long work as plain generators.

A long computation is a generator that yields :class:`Progress` records and *returns* its result
(``return result`` inside the generator). :func:`drive` runs one to the end; the command line passes a
progress callback, the window runs the same generator in a worker thread and passes a
:class:`CancelToken`.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Generator
from dataclasses import dataclass
from typing import TypeVar

from phasewake.core.errors import Cancelled

T = TypeVar("T")


@dataclass(frozen=True)
class Progress:
    """One progress point: ``done`` out of ``total`` units (``total`` None when unknown)."""

    done: float
    total: float | None
    message: str = ""

    @property
    def fraction(self) -> float | None:
        if not self.total:
            return None
        return min(1.0, max(0.0, self.done / self.total))


Work = Generator[Progress, None, T]


class CancelToken:
    """Thread-safe cancellation flag shared between a worker and whoever started it."""

    def __init__(self) -> None:
        self._event = threading.Event()

    def cancel(self) -> None:
        self._event.set()

    @property
    def cancelled(self) -> bool:
        return self._event.is_set()

    def raise_if_cancelled(self) -> None:
        if self._event.is_set():
            raise Cancelled()


def drive(
    work: Generator[Progress, None, T],
    on_progress: Callable[[Progress], None] | None = None,
    cancel: CancelToken | None = None,
) -> T:
    """Run a progress generator to completion and return its result.

    Raises :class:`Cancelled` (after closing the generator) when ``cancel`` is set between steps.
    """
    try:
        while True:
            if cancel is not None and cancel.cancelled:
                work.close()
                raise Cancelled()
            record = next(work)
            if on_progress is not None:
                on_progress(record)
    except StopIteration as stop:
        return stop.value  # type: ignore[no-any-return]


def labelled(work: Generator[Progress, None, T], label: str) -> Generator[Progress, None, T]:
    """``work`` with ``label`` before each progress message (so a status line says what is running);
    returns its result."""
    try:
        while True:
            p = next(work)
            yield Progress(p.done, p.total, f"{label}: {p.message}" if p.message else label)
    except StopIteration as stop:
        return stop.value  # type: ignore[no-any-return]


def result_of(work: Generator[Progress, None, T]) -> T:
    """Shorthand for :func:`drive` with no progress display."""
    return drive(work)
