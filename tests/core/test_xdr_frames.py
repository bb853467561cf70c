"""XTC and TRR frames read straight from mdtraj's XDR file objects (core/readers/xdr_frames.py), checked
against mdtraj's own ``md.load`` of files GROMACS 2022.5 wrote (tests/data/engines/gromacs, made by the
script there): the same float32 positions bit for bit, the same box, and for a TRR the same velocities as
``TRRTrajectoryFile._read(get_velocities=True)`` gives frame by frame."""

from __future__ import annotations

import pickle
from pathlib import Path

import mdtraj as md
import numpy as np
import pytest

from phasewake.core.errors import CorruptFileError
from phasewake.core.readers import open_run
from phasewake.core.readers.xdr_frames import XdrFrames
from phasewake.core.settings import chunking

GMX = Path(__file__).resolve().parents[1] / "data" / "engines" / "gromacs" / "spce_flexible_nve_2fs"


def _frames(run):
    frames = run.frames
    while not isinstance(frames, XdrFrames):
        frames = frames.inner
    return frames


def _cat(chunks, what):
    return np.concatenate([getattr(c, what) for c in chunks])


@pytest.mark.parametrize("kind", ["xtc", "trr"])
def test_positions_and_box_equal_mdtraj_load_for_any_range_stride_and_atoms(kind):
    path = GMX / f"md.{kind}"
    ref = md.load(str(path), top=str(GMX / "md.gro"))
    frames = _frames(open_run([path], topology=GMX / "md.gro"))
    assert frames.n_frames == ref.n_frames and frames.n_atoms == ref.n_atoms
    with chunking(frames=7):  # chunks that do not divide the frames
        whole = list(frames.iter_chunks(velocities=False))
        np.testing.assert_array_equal(_cat(whole, "positions_nm"), ref.xyz)
        np.testing.assert_allclose(_cat(whole, "box_nm"), ref.unitcell_vectors, rtol=1e-6)
        atoms = np.array([5, 0, ref.n_atoms - 1, 17])  # out of order, the last atom included
        part = list(frames.iter_chunks(start=3, stop=ref.n_frames - 2, stride=4, atom_indices=atoms))
        np.testing.assert_array_equal(_cat(part, "positions_nm"), ref.xyz[3 : ref.n_frames - 2 : 4][:, atoms])
        assert [c.start for c in part][0] == 3


def test_trr_velocities_equal_mdtraj_frame_by_frame_reads():
    path = GMX / "md.trr"
    frames = _frames(open_run([path], topology=GMX / "md.gro"))
    assert frames.has_velocities
    want = []
    with md.formats.TRRTrajectoryFile(str(path)) as f:
        for _ in range(frames.n_frames):
            want.append(f._read(1, None, get_velocities=True, get_forces=False)[5][0])
    atoms = np.array([2, 9])
    with chunking(frames=5):
        got = _cat(frames.iter_chunks(positions=False, atom_indices=atoms, stride=2), "velocities_nm_per_ps")
    np.testing.assert_array_equal(got, np.asarray(want)[::2][:, atoms])


def test_the_source_pickles_without_a_topology_and_reads_the_same_after(tmp_path):
    run = open_run([GMX / "md.xtc"], topology=GMX / "md.gro")
    frames = _frames(run)
    assert frames.portable and run.frames.portable  # the velocity-estimating wrapper says what it wraps
    data = pickle.dumps(frames)
    assert len(data) < 200 + 24 * frames.n_frames  # path, offsets and clock; no atoms, no topology
    again = pickle.loads(data)
    np.testing.assert_array_equal(_cat(again.iter_chunks(), "positions_nm"), _cat(frames.iter_chunks(), "positions_nm"))


def test_a_file_cut_after_opening_fails_with_the_file_named(tmp_path):
    src = (GMX / "md.xtc").read_bytes()
    path = tmp_path / "cut.xtc"
    path.write_bytes(src)
    frames = _frames(open_run([path], topology=GMX / "md.gro"))
    path.write_bytes(src[: len(src) * 2 // 3])  # the file changed under a run already open
    with pytest.raises(CorruptFileError) as err:
        for _ in frames.iter_chunks(velocities=False):
            pass
    assert "cut.xtc" in str(err.value)
