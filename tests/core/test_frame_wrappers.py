"""Frame sources that wrap another (a window of frames, kept restart segments, estimated or paired
velocities) say of their frames what the source they wrap says: atoms, box and the precision of the
positions. The audit relies on that precision to refuse inferring constraints from XTC bond lengths."""

from __future__ import annotations

from pathlib import Path

import numpy as np

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
