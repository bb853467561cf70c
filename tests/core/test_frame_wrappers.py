"""Frame sources that wrap another (a window of frames, kept restart segments, estimated or paired
velocities) say of their frames what the source they wrap says: atoms, box and the precision of the
positions. The audit relies on that precision to refuse inferring constraints from XTC bond lengths."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from phasewake.core.readers import open_run

GMX = Path(__file__).resolve().parents[1] / "data" / "engines" / "gromacs" / "spce_rigid_nve_whole"


def test_a_window_of_an_xtc_run_keeps_its_lossy_positions():
    # GROMACS writes XTC positions rounded to 0.001 nm by default (compressed-x-precision 1000; from
    # memory); the file is the engine's own output, not ours.
    run = open_run([GMX / "md.xtc"], topology=GMX / "md.gro")
    assert run.frames.positions_lossy
    win = run.window(2, 8)
    assert win.n_frames == 6
    assert win.frames.positions_lossy
    assert win.frames.positions_precision_nm == run.frames.positions_precision_nm
    assert (win.frames.n_atoms, win.frames.has_box) == (run.frames.n_atoms, run.frames.has_box)
    assert win.frames.velocities_estimated and win.frames.has_velocities
    # and the window's frames are the run's frames 2..7
    a = next(run.frames.iter_chunks(start=2, stop=8, chunk_frames=8)).positions_nm
    b = next(win.frames.iter_chunks(chunk_frames=8)).positions_nm
    np.testing.assert_array_equal(a, b)


def _array_source(n_frames=10, n_atoms=4):
    from phasewake.core.readers.memory import ArrayFrames

    rng = np.random.default_rng(5)
    return ArrayFrames(rng.random((n_frames, n_atoms, 3)), np.arange(n_frames) * 0.5,
                       rng.normal(size=(n_frames, n_atoms, 3)))


def test_iter_chunks_refuses_a_negative_start_a_stride_below_one_and_atoms_outside_the_run():
    src = _array_source()
    for kw in ({"start": -1}, {"stride": 0}, {"stride": -2}):
        with pytest.raises(ValueError, match="start must be 0 or more and stride 1 or more"):
            next(src.iter_chunks(**kw))
    for atoms in ([4], [-1], [0, 7]):
        with pytest.raises(IndexError, match="atoms 0 to 3"):
            next(src.iter_chunks(atom_indices=atoms))
    # a wrapper checks against its own frames and atoms too (a window of 5 frames of the 10)
    from phasewake.core.model.run import WindowFrames

    with pytest.raises(IndexError):
        next(WindowFrames(src, 3, 8).iter_chunks(atom_indices=[9]))


def test_iter_chunks_clamps_stop_and_gives_nothing_for_an_empty_range():
    src = _array_source()
    chunks = list(src.iter_chunks(start=7, stop=1000, chunk_frames=2))
    assert [(c.start, c.n_frames) for c in chunks] == [(7, 2), (9, 1)]
    assert list(src.iter_chunks(start=12)) == []
    assert list(src.iter_chunks(start=4, stop=4)) == []


def test_a_source_implements_only_read_and_gets_checked_frames_in_budgeted_chunks():
    # the template hands _read the frames asked for (stop clamped), the atoms as an index array, and a
    # chunk cut to the memory budget: 0.0001 MB is 100 bytes; one frame of 2 atoms x 3 float32 is 24 bytes
    # per array, positions and velocities: 48 bytes, so 2 frames per chunk
    from phasewake.core.model.run import ChunkedFrames
    from phasewake.core.settings import chunking

    class Source(ChunkedFrames):
        n_frames, n_atoms, has_velocities, velocities_estimated, has_box = 9, 5, True, False, False
        seen = []

        def _read(self, request):
            self.seen.append(request)
            return iter(())

    src = Source()
    with chunking(mb=0.0001):
        list(src.iter_chunks(start=1, stop=50, stride=3, atom_indices=[4, 0], chunk_frames=100))
    (req,) = src.seen
    assert req.frames.tolist() == [1, 4, 7] and (req.start, req.stop, req.stride) == (1, 8, 3)
    assert req.atoms.tolist() == [4, 0] and req.n_read == 2 and req.chunk == 2
    assert [b.tolist() for b in req.batches()] == [[1, 4], [7]]
