"""A run cut to a span of its frames: windowing is an operation of the model, not of a front end.

:func:`window_run` (also ``Run.window(start, stop)``) returns the run restricted to frames
[start, stop), its energy table cut to the same time span, no data copied. Its frames are a
:class:`WindowFrames` whose chunk ``start`` indices count from the window's first frame, as for a run
that was written only over that span; ``offset`` (the window's first frame in the whole run) joins the
cache key, so two windows of one run never share a result.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterator, Sequence
from typing import TYPE_CHECKING

import numpy as np

from phasewake.core.model.run import DEFAULT_CHUNK_FRAMES, ChunkedFrames, EnergyTable, FrameChunk, FrameSource

if TYPE_CHECKING:
    from phasewake.core.model.run import Run


class WindowFrames(ChunkedFrames):
    """A frame source restricted to frames [offset, stop) of another one (a window of a window is a window
    of the first source)."""

    base: FrameSource
    offset: int

    def __init__(self, base: FrameSource, offset: int, stop: int) -> None:
        if isinstance(base, WindowFrames):
            offset, stop, base = base.offset + int(offset), base.offset + int(stop), base.base
        self.base = base
        self.offset = int(offset)
        self.n_frames = int(stop) - int(offset)
        self.n_atoms = base.n_atoms
        self.has_velocities = base.has_velocities
        self.velocities_estimated = base.velocities_estimated
        self.has_box = base.has_box

    def iter_chunks(
        self,
        *,
        chunk_frames: int = DEFAULT_CHUNK_FRAMES,
        start: int = 0,
        stop: int | None = None,
        stride: int = 1,
        atom_indices: Sequence[int] | np.ndarray | None = None,
        velocities: bool = True,
        positions: bool = True,
    ) -> Iterator[FrameChunk]:
        stop = self.n_frames if stop is None else min(int(stop), self.n_frames)
        for ch in self.base.iter_chunks(chunk_frames=chunk_frames, start=self.offset + int(start),
                                        stop=self.offset + stop, stride=stride, atom_indices=atom_indices,
                                        velocities=velocities, positions=positions):
            ch.start = ch.start - self.offset
            yield ch


def window_run(run: Run, start: int, stop: int) -> Run:
    """The run cut to frames [start, stop) (energies cut to the same time span); no data copied.

    The whole run (``start <= 0`` and ``stop >= run.n_frames``) is returned as it is.
    """
    start, stop = max(0, int(start)), min(int(stop), run.n_frames)
    if start <= 0 and stop >= run.n_frames:
        return run
    t = run.time_ps
    lo, hi = float(t[start]), float(t[stop - 1])
    energies = run.energies
    if energies is not None:
        et = np.asarray(energies.time_ps, float)
        sel = (et >= lo - 1e-9 * max(1.0, abs(lo))) & (et <= hi + 1e-9 * max(1.0, abs(hi)))
        energies = EnergyTable(time_ps=et[sel], sources=energies.sources,
                               series={k: dataclasses.replace(v, values=np.asarray(v.values)[sel])
                                       for k, v in energies.series.items()})
    frames = None if run.frames is None else WindowFrames(run.frames, start, stop)
    return dataclasses.replace(run, time_ps=t[start:stop], frames=frames, energies=energies, name=run.name)
