"""Feeding frames to consumers: the loop every frame pass runs, here or in a worker process.

A consumer (:class:`FrameConsumer`) is a reduction over chunks of frames:

* ``prepare(columns, start=, stop=, chunk_frames=)``: told which run atoms the chunk's atom axis holds
  (``columns``, shape (n_read,), or None for all atoms) and the frame range it will be fed;
* ``update(chunk)``: one :class:`~phasewake.core.model.run.FrameChunk`, in frame order;
* ``merge(later)``: fold in a consumer of the same settings that was fed the frames right after this
  one's (self saw [a, b), later [b, c); afterwards self stands for [a, c)), so frame ranges can be fed in
  separate processes and their states joined in frame order;
* ``finish()``: the result (after merges: the result of the serial pass, counts exactly, sums to float
  rounding).

Consumers keep what they need of the run as arrays (no Run, no open file), so they pickle after
``prepare``/``update``. :func:`feed` reads a frame range once and hands every chunk to every consumer;
:func:`serial_pass` is that loop with progress and ``finish()``. Which process runs it is decided above,
in :func:`phasewake.core.model.framepass.run_pass`; this module imports neither the pass nor the workers.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from itertools import zip_longest
from typing import TYPE_CHECKING, Any, Protocol

import numpy as np

from phasewake.core import settings
from phasewake.core.errors import AnalysisError, MissingDataError
from phasewake.core.model.run import FrameChunk
from phasewake.core.progress import Progress, Work

if TYPE_CHECKING:
    from phasewake.core.model.run import Run


class FrameConsumer(Protocol):
    """What :func:`feed` and :func:`run_pass` need from a consumer (see the module docstring)."""

    atoms: np.ndarray | None  # run atom indices needed (sorted, unique), None for all atoms
    needs_positions: bool
    needs_velocities: bool

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None: ...

    def update(self, chunk: FrameChunk) -> None: ...

    def merge(self, later: Any) -> None: ...

    def finish(self) -> Any: ...


def run_path(run: Run) -> Any:
    """The run's first file (for error messages), or None for an in-memory run."""
    return run.paths[0] if run.paths else None


def frame_range(run: Run, start: int, stop: int | None) -> tuple[int, int]:
    """``(start, stop)`` with ``stop`` clamped to the run; AnalysisError for an empty range."""
    stop_ = run.n_frames if stop is None else min(int(stop), run.n_frames)
    if not 0 <= int(start) < stop_:
        raise AnalysisError(f"empty frame range {start}:{stop_} (the run has {run.n_frames} frames)",
                            path=run_path(run))
    return int(start), stop_


def local_columns(columns: np.ndarray | None, atoms: np.ndarray) -> np.ndarray:
    """Positions of run atoms ``atoms`` on a chunk's atom axis that holds run atoms ``columns``."""
    if columns is None:
        return np.asarray(atoms, dtype=np.int64)
    pos = np.searchsorted(columns, atoms)
    if np.any(pos >= columns.size) or np.any(columns[np.minimum(pos, columns.size - 1)] != atoms):
        raise AnalysisError("a consumer's atoms are not among the atoms read by the pass")
    return pos.astype(np.int64)


def check_next(mine: tuple[int, int], later: tuple[int, int], what: str) -> None:
    """AnalysisError unless frame range ``later`` starts where ``mine`` stops (merge order)."""
    if mine[1] != later[0]:
        raise AnalysisError(f"{what}: a merge needs the frames right after these ({mine[0]}:{mine[1]} then "
                            f"{later[0]}:{later[1]})")


# ------------------------------------------------------------------------------------------------------
# the pass


def _columns(run: Run, consumers: Mapping[str, FrameConsumer]) -> np.ndarray | None:
    """The union of the consumers' atoms (None: every atom)."""
    if any(c.atoms is None for c in consumers.values()):
        return None
    columns = np.unique(np.concatenate([np.asarray(c.atoms, dtype=np.int64) for c in consumers.values()]))
    return None if columns.size == run.n_atoms else columns


def _n_read(run: Run, columns: np.ndarray | None) -> int:
    return run.n_atoms if columns is None else int(columns.size)


def _plan(run: Run, consumers: Mapping[str, FrameConsumer]) -> list[dict[str, FrameConsumer]]:
    """The reads of a pass: one, or two when consumers that need positions want only a few atoms and the
    others need velocities of many (a distance with its momentum beside a VACF of every atom): then the
    positions of the many are not read at all. Each byte of the file is still read once, bar the
    velocities of the few atoms, which both reads hold."""
    with_pos = {n: c for n, c in consumers.items() if c.needs_positions}
    vel_only = {n: c for n, c in consumers.items() if not c.needs_positions}
    if not with_pos or not vel_only:
        return [dict(consumers)]
    few = _n_read(run, _columns(run, with_pos))
    many = _n_read(run, _columns(run, vel_only))
    if 4 * few > many:  # reading the positions of the union costs little more than a second read
        return [dict(consumers)]
    return [with_pos, vel_only]


def feed(run: Run, consumers: Mapping[str, FrameConsumer], *, start: int = 0, stop: int | None = None,
         stride: int = 1, chunk_frames: int | None = None) -> Iterator[int]:
    """Prepare every consumer, read frames [start, stop) with ``stride`` once, hand every chunk to each.

    A generator yielding the number of frames handed out so far after each chunk; the caller calls
    ``finish()`` (or sends the consumers elsewhere to be merged). Positions and velocities are read only
    if a consumer needs them, for the union of the atoms they need; when the consumers that need
    positions want only a few atoms (at most a quarter of the others'), those few are read apart
    (positions and velocities) and the rest without positions, the two reads interleaved chunk by chunk
    (:func:`_plan`). Every consumer sees its frames in order, in chunks of any length (at most
    :func:`phasewake.core.settings.chunk_frames`, fewer when the chunk memory budget says so; both are
    read when the pass starts). ``chunk_frames`` is for a loop of the engine's own that reads in the
    blocks its reduction works in (``projection.compute_pca``); analyses leave it to the setting.
    """
    if run.frames is None:
        raise MissingDataError("the run has no frames (positions)", path=run_path(run))
    if not consumers:
        raise AnalysisError("a frame pass needs at least one analysis")
    start_, stop_ = frame_range(run, start, stop)
    chunk = int(chunk_frames) if chunk_frames is not None else settings.chunk_frames()
    reads = []
    for group in _plan(run, consumers):
        columns = _columns(run, group)
        want_pos = any(c.needs_positions for c in group.values())
        want_vel = any(c.needs_velocities for c in group.values()) and bool(run.frames.has_velocities)
        for c in group.values():
            c.prepare(columns, start=start_, stop=stop_, chunk_frames=chunk)
        reads.append((list(group.values()),
                      run.frames.iter_chunks(chunk_frames=chunk, start=start_, stop=stop_, stride=int(stride),
                                             atom_indices=columns, velocities=want_vel, positions=want_pos)))
    done = [0] * len(reads)
    try:
        for chunks in zip_longest(*(it for _, it in reads)):
            for k, ch in enumerate(chunks):
                if ch is None:
                    continue
                for c in reads[k][0]:
                    c.update(ch)
                done[k] += ch.n_frames
            yield min(done)
    finally:
        for _, it in reads:
            close = getattr(it, "close", None)
            if close is not None:
                close()


def serial_pass(run: Run, consumers: Mapping[str, FrameConsumer], *, start: int, stop: int, stride: int = 1,
                label: str | None = None) -> Work[dict[str, Any]]:
    """:func:`feed` in this process with progress records, then ``{name: consumer.finish()}``."""
    n_total = len(range(start, stop, int(stride)))
    text = label if label is not None else "one pass: " + ", ".join(consumers)
    for done in feed(run, consumers, start=start, stop=stop, stride=stride):
        yield Progress(done, n_total, text)
    return {name: c.finish() for name, c in consumers.items()}
