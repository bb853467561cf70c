"""Test helpers: frame consumers with a ``merge`` (a later range folded in), light enough to send to worker
processes, for the tests of ``phasewake.core.model.parallel`` and ``cluster``.

They live in an importable module (not in a test file) because a worker process imports them by name.
"""

from __future__ import annotations

import time

import numpy as np

from phasewake.core.errors import AnalysisError


class FrameSums:
    """Frames seen, and per-atom sums of positions and of their squares (float64) of some atoms, with the
    time of every frame: a count (exact under any split), sums (equal to rounding) and an ordered series
    (equal only if the ranges are merged in frame order)."""

    needs_positions = True
    needs_velocities = False

    def __init__(self, atoms=(0, 1), *, pause_s: float = 0.0) -> None:
        self.atoms = np.asarray(atoms, dtype=np.int64)
        self.pause_s = float(pause_s)
        self.count = 0
        self.chunks = 0
        self.sum = np.zeros((self.atoms.size, 3))
        self.sumsq = np.zeros((self.atoms.size, 3))
        self.time: list[np.ndarray] = []
        self.first_frames: list[int] = []
        self.range = (0, 0)

    def prepare(self, columns, *, start, stop, chunk_frames) -> None:
        self.range = (start, stop)
        self._local = self.atoms if columns is None else np.searchsorted(columns, self.atoms)

    def update(self, chunk) -> None:
        if self.pause_s:
            time.sleep(self.pause_s)
        x = np.asarray(chunk.positions_nm[:, self._local], dtype=np.float64)
        self.count += chunk.n_frames
        self.chunks += 1
        self.sum += x.sum(axis=0)
        self.sumsq += (x * x).sum(axis=0)
        self.time.append(np.asarray(chunk.time_ps, dtype=np.float64))
        self.first_frames.append(int(chunk.start))

    def merge(self, later: FrameSums) -> None:
        if later.range[0] != self.range[1]:
            raise AnalysisError(f"merge of frames {later.range} after {self.range}: not the next range")
        self.count += later.count
        self.chunks += later.chunks
        self.sum += later.sum
        self.sumsq += later.sumsq
        self.time += later.time
        self.first_frames += later.first_frames
        self.range = (self.range[0], later.range[1])

    def finish(self) -> dict:
        t = np.concatenate(self.time) if self.time else np.zeros(0)
        return {"count": self.count, "sum": self.sum, "sumsq": self.sumsq, "time": t, "range": self.range,
                "first_frames": list(self.first_frames)}


class NoMerge(FrameSums):
    """The same without ``merge``: a pass with it stays serial."""

    merge = None  # type: ignore[assignment]
