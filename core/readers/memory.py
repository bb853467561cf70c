"""An in-memory frame source: for tests, synthetic runs and results computed on the fly."""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from phasewake.core.model.run import (
    ChunkedFrames,
    EnergyTable,
    FrameChunk,
    FrameRequest,
    Run,
    RunMetadata,
    no_positions,
)


class ArrayFrames(ChunkedFrames):
    """Frames held in numpy arrays, served through the same chunked API as file readers."""

    def __init__(
        self,
        positions_nm: np.ndarray,
        time_ps: np.ndarray,
        velocities_nm_per_ps: np.ndarray | None = None,
        box_nm: np.ndarray | None = None,
        *,
        velocities_estimated: bool = False,
    ) -> None:
        self._pos = np.asarray(positions_nm, dtype=np.float32)
        if self._pos.ndim != 3 or self._pos.shape[2] != 3:
            raise ValueError("positions must have shape (n_frames, n_atoms, 3)")
        self._time = np.asarray(time_ps, dtype=np.float64)
        self._vel = None if velocities_nm_per_ps is None else np.asarray(velocities_nm_per_ps, np.float32)
        if box_nm is not None:
            box = np.asarray(box_nm, dtype=np.float64)
            if box.shape == (3,):
                box = np.diag(box)
            if box.shape == (3, 3):
                box = np.broadcast_to(box, (self._pos.shape[0], 3, 3))
            self._box: np.ndarray | None = box
        else:
            self._box = None
        self.n_frames = int(self._pos.shape[0])
        self.n_atoms = int(self._pos.shape[1])
        self.has_velocities = self._vel is not None
        self.velocities_estimated = velocities_estimated
        self.has_box = self._box is not None

    def _read(self, request: FrameRequest) -> Iterator[FrameChunk]:
        for sel in request.batches():
            vel = None
            if request.velocities and self._vel is not None:
                vel = request.pick(self._vel[sel])
            yield FrameChunk(
                start=int(sel[0]),
                time_ps=self._time[sel],
                positions_nm=request.pick(self._pos[sel]) if request.positions else no_positions(sel.size),
                velocities_nm_per_ps=vel,
                box_nm=None if self._box is None else np.asarray(self._box[sel]),
            )


def run_from_arrays(
    positions_nm: np.ndarray,
    time_ps: np.ndarray,
    masses_amu: np.ndarray,
    *,
    velocities_nm_per_ps: np.ndarray | None = None,
    box_nm: np.ndarray | None = None,
    energies: EnergyTable | None = None,
    topology=None,
    metadata: RunMetadata | None = None,
    name: str = "in-memory run",
) -> Run:
    """A Run over arrays (tests, synthetic data)."""
    frames = ArrayFrames(positions_nm, time_ps, velocities_nm_per_ps, box_nm)
    return Run(
        name=name,
        paths=(),
        topology=topology,
        masses_amu=np.asarray(masses_amu, dtype=np.float64),
        time_ps=np.asarray(time_ps, dtype=np.float64),
        frames=frames,
        energies=energies,
        metadata=metadata or RunMetadata(),
    )
