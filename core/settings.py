"""Process-wide settings of how phasewake works (never of what it computes).

``threads``: how many threads one large numpy kernel may split into (numpy's loops release the GIL).
Default: every core this process may run on (``os.sched_getaffinity`` where the OS reports it, else
``os.cpu_count``). The command line sets it with ``--threads``; a script with :func:`set_threads`.
Results never depend on it: the kernels that split work add their parts in a fixed order.

Chunking: how many frames a frame pass reads at a time. At most :func:`chunk_frames` frames (default 256),
and few enough that one chunk's per-atom arrays fit in :func:`chunk_budget_mb` (default 128 MB, else
``PHASEWAKE_CHUNK_MB``; the command line sets it with ``--chunk-mb``). Only the frame-pass engine
(``core/model/framepass.py``, the parallel and cluster ranges) and the frame sources deal in chunk sizes;
analyses take chunks of any length. Tests force awkward splits with ``with chunking(frames=7): ...``.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterator
from contextlib import contextmanager

_threads: int | None = None  # None: default_threads()


def default_threads() -> int:
    """Cores this process may run on (its CPU affinity where the OS reports it)."""
    if hasattr(os, "sched_getaffinity"):
        return max(1, len(os.sched_getaffinity(0)))
    return max(1, os.cpu_count() or 1)


def threads() -> int:
    """The thread count of one large kernel (the setting, else :func:`default_threads`)."""
    return _threads if _threads is not None else default_threads()


def set_threads(n: int | None) -> int | None:
    """Set the thread count (``None``: back to the default); returns the previous setting.

    Raises ValueError for a count below 1.
    """
    global _threads
    previous, _threads = _threads, _count_or_none(n, "the thread count")
    return previous


def _count_or_none(n: int | None, what: str) -> int | None:
    """``n`` as an int (None stays None); ValueError naming ``what`` below 1."""
    if n is not None and int(n) < 1:
        raise ValueError(f"{what} must be at least 1, got {n}")
    return None if n is None else int(n)


# ------------------------------------------------------------------------------------------------ chunking
# Memory budget of one chunk (every per-atom array a reader hands out at once). Readers cut the frames
# per chunk so a chunk stays inside it whatever the number of atoms: 256 frames of 20,000 atoms with
# positions and velocities in float32 are 123 MB; the same 256 frames of 1,000,000 atoms would be 6 GB.
DEFAULT_CHUNK_FRAMES = 256
CHUNK_BUDGET_ENV = "PHASEWAKE_CHUNK_MB"
DEFAULT_CHUNK_MB = 128.0
_chunk_frames: int | None = None  # set_chunk_frames; None: DEFAULT_CHUNK_FRAMES
_chunk_mb: float | None = None  # set_chunk_budget_mb (command line --chunk-mb); None: the environment


def chunk_frames() -> int:
    """Most frames a frame pass reads at a time (the setting, else ``DEFAULT_CHUNK_FRAMES``)."""
    return _chunk_frames if _chunk_frames is not None else DEFAULT_CHUNK_FRAMES


def set_chunk_frames(n: int | None) -> int | None:
    """Set the most frames per chunk (``None``: back to the default); returns the previous setting.

    Raises ValueError for a count below 1.
    """
    global _chunk_frames
    previous, _chunk_frames = _chunk_frames, _count_or_none(n, "the frames per chunk")
    return previous


def set_chunk_budget_mb(mb: float | None) -> float | None:
    """Set the chunk memory budget in MB for this process (None: ``PHASEWAKE_CHUNK_MB`` or the default);
    returns the previous setting."""
    global _chunk_mb
    if mb is not None and not (mb > 0 and math.isfinite(mb)):
        raise ValueError(f"the chunk budget must be a positive number of MB, not {mb!r}")
    previous = _chunk_mb
    _chunk_mb = None if mb is None else float(mb)
    return previous


def chunk_budget_mb() -> float:
    """The chunk memory budget in MB: :func:`set_chunk_budget_mb`, else ``PHASEWAKE_CHUNK_MB``, else 128."""
    if _chunk_mb is not None:
        return _chunk_mb
    text = os.environ.get(CHUNK_BUDGET_ENV, "").strip()
    if text:
        try:
            value = float(text)
        except ValueError:
            value = float("nan")
        if value > 0 and math.isfinite(value):
            return value
    return DEFAULT_CHUNK_MB


def chunk_setting() -> tuple[int, float]:
    """(most frames per chunk, budget in MB) as this process has them: what a worker is handed, so it reads
    in the chunks this process would (``with chunking(frames=f, mb=mb)``)."""
    return chunk_frames(), chunk_budget_mb()


@contextmanager
def chunking(*, frames: int | None = None, mb: float | None = None) -> Iterator[None]:
    """Within the block, chunks of at most ``frames`` frames and ``mb`` MB (None: leave that setting as
    it is); both settings come back on leaving. Drive the work inside the block: a pass reads the setting
    when it starts."""
    old_frames = set_chunk_frames(frames) if frames is not None else _chunk_frames
    try:
        old_mb = set_chunk_budget_mb(mb) if mb is not None else _chunk_mb
    except ValueError:
        set_chunk_frames(old_frames)
        raise
    try:
        yield
    finally:
        set_chunk_frames(old_frames)
        set_chunk_budget_mb(old_mb)


def budget_chunk_frames(chunk_frames: int, n_atoms: int, *, n_arrays: int = 1, itemsize: int = 4) -> int:
    """Frames per chunk: at most ``chunk_frames``, and few enough that ``n_arrays`` arrays of shape
    (frames, n_atoms, 3) and ``itemsize`` bytes per value fit in :func:`chunk_budget_mb`. At least 1."""
    per_frame = max(1, int(n_atoms)) * 3 * max(1, int(itemsize)) * max(1, int(n_arrays))
    fit = int(chunk_budget_mb() * 1e6) // per_frame
    return max(1, min(int(chunk_frames), fit))
