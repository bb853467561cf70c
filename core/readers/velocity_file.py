"""Velocities written to a file of their own, beside the positions: NAMD's velocity DCD (``velDCDfile``).

NAMD: a velocity DCD has the CHARMM DCD layout of the positions file, no unit cell, and
holds velocities in NAMD's internal unit, Angstrom per 48.88821 fs; x 20.45482706 gives Angstrom/ps
(NAMD Output.C). NAMD integrates with velocity Verlet, so they are full-step velocities.

A user names the file with ``--velocities FILE`` (``open_run(velocities=...)``), or gives it with the
other files when it ends in ``.veldcd`` or ``.vel.dcd``. It must have the frames and atoms of the
positions; the frames are paired one to one.
"""

from __future__ import annotations

import struct
from collections.abc import Iterator
from pathlib import Path

import numpy as np

from phasewake.core.errors import CorruptFileError, TopologyMismatchError
from phasewake.core.model.run import ChunkedFrames, FrameChunk, FrameRequest, FrameSource

# Angstrom per AKMA time unit (48.88821 fs) -> Angstrom/ps (NAMD's PDBVELFACTOR).
NAMD_VELOCITY_TO_A_PER_PS = 20.45482706
_TO_NM_PER_PS = 0.1 * NAMD_VELOCITY_TO_A_PER_PS


def is_velocity_file(path: Path) -> bool:
    """A velocity DCD by its name (its content looks like any DCD)."""
    name = path.name.lower()
    return name.endswith((".veldcd", ".vel.dcd"))


def _dcd_counts(path: Path) -> tuple[int, int, int, int]:
    """(atoms, frames, first step, step interval) from a DCD header, checking the file's length."""
    from phasewake.core.readers.trajectory import _check_dcd_size

    with open(path, "rb") as f:
        raw = f.read(4096)
    if len(raw) < 100 or raw[4:8] != b"CORD":
        raise CorruptFileError("not a DCD file (no CORD signature at the start)", path=path)
    endian = "<" if struct.unpack("<i", raw[:4])[0] == 84 else ">"
    icntrl = struct.unpack(endian + "20i", raw[8:88])
    pos = 4 + 84 + 4
    (tlen,) = struct.unpack(endian + "i", raw[pos : pos + 4])
    pos += 4 + tlen + 4
    (_rl, natoms) = struct.unpack(endian + "ii", raw[pos : pos + 8])
    has_cell = icntrl[10] != 0
    header = pos + 12
    frame = (56 if has_cell else 0) + 3 * (4 * natoms + 8)
    n = (path.stat().st_size - header) // frame if frame > 0 else 0
    _check_dcd_size(path, n, natoms)
    return int(natoms), int(n), int(icntrl[1]), int(icntrl[2])


class VelocityFileFrames(ChunkedFrames):
    """Positions (and box) from one frame source, velocities from a velocity DCD, frame by frame."""

    def __init__(self, inner: FrameSource, path: Path, positions_name: str) -> None:
        natoms, n, istart, nsavc = _dcd_counts(path)
        if natoms != inner.n_atoms:
            raise TopologyMismatchError(f"the velocity file has {natoms} atoms, the positions ({positions_name}) "
                                        f"{inner.n_atoms}", path=path)
        if n != inner.n_frames:
            raise TopologyMismatchError(f"the velocity file has {n} frames, the positions ({positions_name}) "
                                        f"{inner.n_frames}: they cannot be paired", path=path)
        self.inner = inner
        self.path = path
        self.describe_as(inner, inner.n_frames)
        self.has_velocities = True
        self.velocities_estimated = False
        self.first_step, self.step_interval = istart, nsavc

    def retime(self, time_ps: np.ndarray) -> None:
        retime = getattr(self.inner, "retime", None)
        if retime is not None:
            retime(time_ps)

    def _velocities(self, start: int, stop: int, stride: int, atoms: np.ndarray | None) -> np.ndarray:
        import mdtraj as md

        from phasewake.core.readers.quiet import quiet_mdtraj

        # mdtraj reads atoms in increasing order: read the sorted set, then put them in the order asked
        read = None if atoms is None else np.unique(atoms)
        with quiet_mdtraj(), md.formats.DCDTrajectoryFile(str(self.path)) as f:
            f.seek(start)
            n = len(range(start, stop, stride))
            out = f.read(n_frames=n, stride=stride, atom_indices=read)
        v = np.asarray(out[0], dtype=np.float64) * _TO_NM_PER_PS
        if atoms is not None and read is not None:
            v = v[:, np.searchsorted(read, atoms)]
        if v.shape[0] != n:
            raise CorruptFileError(f"the velocity file ended after {v.shape[0]} of {n} frames from frame {start}",
                                   path=self.path)
        return v.astype(np.float32)

    def _arrays_per_frame(self, velocities: bool, positions: bool) -> int:
        return 2  # the positions read from the inner source and the velocities beside them

    def _read(self, request: FrameRequest) -> Iterator[FrameChunk]:
        try:
            for ch in self.inner.iter_chunks(**request.keywords(velocities=False)):
                vel = None
                if request.velocities:
                    vel = self._velocities(ch.start, ch.start + ch.n_frames * request.stride, request.stride,
                                           request.atoms)
                yield FrameChunk(start=ch.start, time_ps=ch.time_ps, positions_nm=ch.positions_nm,
                                 velocities_nm_per_ps=vel, box_nm=ch.box_nm)
        except (OSError, ValueError, IndexError, struct.error) as exc:
            raise CorruptFileError(f"cannot read velocities ({type(exc).__name__}: {exc})", path=self.path) from exc
