"""Test helper: a FrameSource wrapper that counts reads, to check that an analysis read the frames once
(or not at all, on a cache hit)."""

from __future__ import annotations

import dataclasses
from typing import Any


class CountingFrames:
    """Wraps a FrameSource; counts ``iter_chunks`` calls (``calls``) and the frames handed out (``frames_read``)."""

    def __init__(self, base: Any) -> None:
        self.base = base
        self.calls = 0
        self.frames_read = 0
        for k in ("n_frames", "n_atoms", "has_velocities", "velocities_estimated", "has_box"):
            setattr(self, k, getattr(base, k))

    def iter_chunks(self, **kw: Any):
        self.calls += 1
        for ch in self.base.iter_chunks(**kw):
            self.frames_read += ch.n_frames
            yield ch

    def read_frame(self, index: int) -> Any:
        return self.base.read_frame(index)


def counted(run: Any) -> tuple[Any, CountingFrames]:
    """The same run with its frames behind a :class:`CountingFrames`, and that counter."""
    frames = CountingFrames(run.frames)
    return dataclasses.replace(run, frames=frames), frames
