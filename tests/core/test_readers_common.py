"""Shared reader pieces: estimated velocities (central differences, minimum image in rectangular and
triclinic boxes), box conversions against mdtraj, time-axis checks."""

from pathlib import Path

import mdtraj as md
import numpy as np
import pytest

from phasewake.core.errors import TimeAxisError
from phasewake.core.readers.common import (
    EstimatedVelocityFrames,
    box_vectors_from_lengths_angles,
    check_time_axis,
)
from phasewake.core.readers.memory import ArrayFrames


def _wrap(x, box):
    frac = x @ np.linalg.inv(box)
    return (frac - np.floor(frac)) @ box


@pytest.mark.parametrize("triclinic", [False, True])
def test_central_differences_recover_uniform_motion_across_boundaries(triclinic):
    # Uniform motion x(t) = x0 + v t: the central difference is exact (Taylor: error is O(dt^2 x''')) = 0),
    # and wrapping into the box must not change it (minimum image).
    box = np.diag([2.0, 2.0, 2.0])
    if triclinic:
        box = np.array([[2.0, 0.0, 0.0], [0.6, 1.9, 0.0], [0.4, 0.5, 1.8]])
    rng = np.random.default_rng(0)
    v = rng.normal(size=(5, 3)) * 2.0
    x0 = rng.random((5, 3))
    t = 0.05 * np.arange(30)
    x = x0[None] + v[None] * t[:, None, None]
    wrapped = np.stack([_wrap(xi, box) for xi in x])
    src = EstimatedVelocityFrames(ArrayFrames(wrapped, t, box_nm=box), t)
    for chunk in (4, 100):
        got = np.concatenate([c.velocities_nm_per_ps for c in src.iter_chunks(chunk_frames=chunk)])
        np.testing.assert_allclose(got, np.broadcast_to(v, got.shape), rtol=1e-4, atol=1e-4)
    strided = np.concatenate([c.velocities_nm_per_ps for c in src.iter_chunks(chunk_frames=3, start=1, stride=4)])
    np.testing.assert_allclose(strided, np.broadcast_to(v, strided.shape), rtol=1e-4, atol=1e-4)
    assert src.velocities_estimated


def test_box_vectors_match_mdtraj():
    # reference: mdtraj.utils.lengths_and_angles_to_box_vectors
    lengths = np.array([[2.0, 2.5, 3.0]])
    angles = np.array([[70.0, 80.0, 100.0]])
    ours = box_vectors_from_lengths_angles(lengths, angles)[0]
    ref = np.array(md.utils.lengths_and_angles_to_box_vectors(2.0, 2.5, 3.0, 70.0, 80.0, 100.0))
    np.testing.assert_allclose(ours, ref, atol=1e-12)


def test_time_axis_checks():
    assert check_time_axis(np.arange(5.0), path=None) == []
    # was: TimeAxisError for a repeated or backward time. A restart glued in is reported (the reader layer
    # keeps the later segment, as engines do); only an unsorted axis is refused
    assert any("frame 3" in w and "repeats" in w for w in check_time_axis(np.array([0.0, 1.0, 2.0, 2.0]), path="x.h5md"))
    assert any("frame 2" in w and "1 ps -> 0.5 ps" in w for w in check_time_axis(np.array([0.0, 1.0, 0.5]), path="x.h5md"))
    with pytest.raises(TimeAxisError, match="unsorted"):
        check_time_axis(np.array([0.0, 2.0, 1.0, 3.0, 2.0, 4.0]), path="x.h5md")


def test_impossible_value_checks_keep_what_engines_legitimately_write(tmp_path):
    # a thermostat target of 0 K stated by an engine file (a quench) is kept; given by the user it is refused
    import shutil

    import h5py

    from phasewake.core.errors import ImpossibleValueError
    from phasewake.core.model.run import RunMetadata
    from phasewake.core.readers import open_run
    from phasewake.core.readers.common import check_box, check_metadata

    src = Path(__file__).resolve().parents[2] / "sample_data" / "dimer_nve.h5md"
    p = tmp_path / "quench.h5md"
    shutil.copy(src, p)
    with h5py.File(p, "r+") as f:
        f["parameters"]["temperature_K"] = 0.0
    assert open_run([p]).metadata.temperature_K == 0.0
    with pytest.raises(ImpossibleValueError, match="as given"):
        md = RunMetadata(temperature_K=0.0)
        md.sources["temperature_K"] = "user"
        check_metadata(md, n_atoms=3, path=None)
    # an all-zero box is the engines' "no periodic box" (GROMACS in vacuum), not an impossible one
    assert check_box(np.zeros((2, 3, 3)), path=None) is None


def test_gromacs_tip4p_virtual_site_from_a_gro_is_massless(tmp_path):
    # GROMACS names TIP4P's massless site MW; mdtraj's .gro reader gives it its virtual-site element (atomic
    # number 0, mass 0): the run's masses are O, H, H, 0 (not unknown), and the sites have no DOF
    from phasewake.core.readers import open_run

    gro = tmp_path / "tip4p.gro"
    gro.write_text("tip4p\n    8\n"
                   "    1SOL     OW    1   0.126   1.624   1.679\n    1SOL    HW1    2   0.190   1.661   1.747\n"
                   "    1SOL    HW2    3   0.177   1.568   1.613\n    1SOL     MW    4   0.142   1.616   1.686\n"
                   "    2SOL     OW    5   1.059   0.701   1.113\n    2SOL    HW1    6   1.026   0.610   1.123\n"
                   "    2SOL    HW2    7   1.000   0.749   1.053\n    2SOL     MW    8   1.048   0.700   1.104\n"
                   "   1.86206   1.86206   1.86206\n")
    run = open_run([gro])
    assert run.virtual_sites.tolist() == [3, 7] and run.n_massive == 6
    assert run.masses_amu[:3] == pytest.approx([15.999, 1.008, 1.008], abs=1e-2)  # IUPAC standard weights
