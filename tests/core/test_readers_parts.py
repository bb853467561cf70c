"""A run written in parts, joined in time order (core/readers/parts.py through open_run).

Outside references: the whole trajectory the parts were cut from (written with mdtraj's XTC writer and
read back with mdtraj.load), and the real LAMMPS dump of tests/data/lammps_small split into two files.
The joining rule (an overlap keeps the later part's frames; GROMACS -noappend repeats the checkpoint
frame) is what the engines do on a restart (the restarted part's frames replace the repeated ones).
"""

from __future__ import annotations

import contextlib
import io
from pathlib import Path

import mdtraj as md
import numpy as np
import pytest

from phasewake.app.cli import main
from phasewake.core.errors import TopologyMismatchError
from phasewake.core.readers import open_run
from tests.helpers import amber_netcdf

N_ATOMS = 6
N_FRAMES = 40
DT = 0.5  # ps between frames


def _top(n=N_ATOMS):
    top = md.Topology()
    ch = top.add_chain()
    for i in range(n):
        top.add_atom("Ar", md.element.argon, top.add_residue("AR", ch, resSeq=i + 1))
    return top


def _write_xtc(path: Path, xyz: np.ndarray, frames: range) -> Path:
    with contextlib.redirect_stdout(io.StringIO()), md.formats.XTCTrajectoryFile(str(path), "w") as f:
        idx = np.asarray(list(frames))
        f.write(xyz[idx], time=(idx * DT).astype(np.float32), step=idx * 250,
                box=np.repeat(np.eye(3, dtype=np.float32)[None] * 3.0, idx.size, axis=0))
    return path


@pytest.fixture()
def whole(tmp_path):
    rng = np.random.default_rng(5)
    xyz = (0.5 + 2.0 * rng.random((N_FRAMES, N_ATOMS, 3))).astype(np.float32)
    pdb = tmp_path / "sys.pdb"
    md.Trajectory(xyz[:1], _top()).save_pdb(str(pdb))
    full = _write_xtc(tmp_path / "whole.xtc", xyz, range(N_FRAMES))
    return xyz, pdb, full


def _positions(run):
    return np.concatenate([c.positions_nm for c in run.frames.iter_chunks(chunk_frames=7, velocities=False)])


def test_three_parts_with_an_overlap_and_a_restart_give_the_whole_run(tmp_path, whole):
    # Part 1: frames 0-19, but its last 5 frames (15-19) hold other positions (a run that went on past
    # the checkpoint the later part restarted from); part 2: frames 15-29 (restart 5 frames back);
    # part 3: frames 29-39 (GROMACS -noappend: repeats the checkpoint frame 29).
    xyz, pdb, full = whole
    spoiled = xyz.copy()
    spoiled[15:20] += 0.3
    p1 = _write_xtc(tmp_path / "md.xtc", spoiled, range(0, 20))
    p2 = _write_xtc(tmp_path / "md.part0002.xtc", xyz, range(15, 30))
    p3 = _write_xtc(tmp_path / "md.part0003.xtc", xyz, range(29, 40))
    # given in any order
    run = open_run([p3, p1, pdb, p2])
    with contextlib.redirect_stdout(io.StringIO()):
        ref = md.load(str(full), top=str(pdb))  # the whole run, mdtraj as the reference reader
    assert run.n_frames == N_FRAMES
    np.testing.assert_array_equal(_positions(run), ref.xyz)
    np.testing.assert_allclose(run.time_ps, ref.time, atol=1e-4)
    overlaps = run.metadata.extra["overlaps"]
    assert len(overlaps) == 2
    assert "md.part0002.xtc starts at t = 7.5 ps" in overlaps[0] and "5 frame(s) of md.xtc" in overlaps[0]
    assert "t = 7.5 ps to t = 9.5 ps" in overlaps[0]
    assert "repeats 1 frame(s) of md.part0002.xtc" in overlaps[1]
    assert run.metadata.extra["gaps"] == []
    assert run.metadata.extra["parts"][0].startswith("md.xtc: 15 of 20 frames")
    # strided and windowed reads cross the part boundaries
    got = np.concatenate([c.positions_nm for c in run.frames.iter_chunks(start=3, stop=37, stride=4,
                                                                          chunk_frames=3, velocities=False)])
    np.testing.assert_array_equal(got, ref.xyz[3:37:4])
    np.testing.assert_array_equal(run.frames.read_frame(29).positions_nm[0], ref.xyz[29])


def test_gap_between_parts_is_reported_with_its_times(tmp_path, whole, capsys):
    xyz, pdb, _ = whole
    p1 = _write_xtc(tmp_path / "prod1.xtc", xyz, range(0, 10))
    p2 = _write_xtc(tmp_path / "prod2.xtc", xyz, range(20, 30))
    run = open_run([p1, p2, pdb])
    assert run.n_frames == 20
    (gap,) = run.metadata.extra["gaps"]
    assert "gap of 5.5 ps" in gap and "t = 4.5 ps" in gap and "t = 10 ps" in gap
    assert main(["describe", str(p1), str(p2), str(pdb)]) == 0
    out = capsys.readouterr().out
    assert "gap of 5.5 ps" in out


def test_parts_with_different_atom_counts_name_both_files(tmp_path, whole, capsys):
    xyz, pdb, _ = whole
    p1 = _write_xtc(tmp_path / "a1.xtc", xyz, range(0, 10))
    p2 = tmp_path / "a2.xtc"
    with contextlib.redirect_stdout(io.StringIO()), md.formats.XTCTrajectoryFile(str(p2), "w") as f:
        f.write(xyz[10:20, :4], time=np.arange(10, 20, dtype=np.float32) * DT)
    pdb4 = tmp_path / "four.pdb"
    md.Trajectory(xyz[:1, :4], _top(4)).save_pdb(str(pdb4))
    # the 4-atom XTC against the 6-atom topology is refused first; parts check their atom counts too
    with pytest.raises(TopologyMismatchError, match="a2.xtc"):
        open_run([p1, p2, pdb])
    from phasewake.core.readers.parts import join_runs

    r1 = open_run([p1, pdb])
    r2 = open_run([p2, pdb4])
    with pytest.raises(TopologyMismatchError, match=r"a1.xtc has 6.*a2.xtc has 4"):
        join_runs([r1, r2])
    code = main(["describe", str(p1), str(p2), str(pdb)])
    err = capsys.readouterr().err
    assert code == 2 and "a2.xtc" in err and err.count("\n") == 1 and "Traceback" not in err


def test_lammps_dump_parts_join_by_step(tmp_path):
    # The real dump (tests/data/lammps_small) cut into two files at the appended continuation: the joined
    # parts give the same frames as the single file (whose repeated step 150 the later frame wins).
    data = Path(__file__).resolve().parents[1] / "data" / "lammps_small"
    text = (data / "tri.lammpstrj").read_text()
    cut = text.index("ITEM: TIMESTEP\n150", text.index("ITEM: TIMESTEP\n150") + 5)
    (tmp_path / "dump.1.lammpstrj").write_text(text[:cut])
    (tmp_path / "dump.2.lammpstrj").write_text(text[cut:])
    kw = {"units_style": "real", "timestep_ps": 0.002}
    single = open_run([data / "tri.lammpstrj", data / "tri.data"], **kw)
    joined = open_run([tmp_path / "dump.2.lammpstrj", tmp_path / "dump.1.lammpstrj", data / "tri.data"], **kw)
    np.testing.assert_array_equal(joined.time_ps, single.time_ps)
    for what in ("positions_nm", "velocities_nm_per_ps", "box_nm"):
        a = np.concatenate([getattr(c, what) for c in joined.frames.iter_chunks(chunk_frames=4)])
        b = np.concatenate([getattr(c, what) for c in single.frames.iter_chunks(chunk_frames=4)])
        np.testing.assert_array_equal(a, b)
    assert "repeats 1 frame(s) of dump.1.lammpstrj (step 150" in joined.metadata.extra["overlaps"][0]


GMX = Path(__file__).resolve().parents[1] / "data" / "engines" / "gromacs"


@pytest.mark.parametrize("fmt", ["xtc", "trr"])
def test_gromacs_noappend_parts_give_the_whole_run(fmt):
    # Reference: GROMACS 2022.5 made the same run whole and in three -noappend parts (tests/data/engines,
    # reported.json): parts 2 and 3 share steps 1120-1200 (5 XTC frames); frames equal the whole run's.
    whole_dir, parts_dir = GMX / "spce_rigid_nve_whole", GMX / "spce_rigid_nve_parts"
    whole = open_run([whole_dir / f"md.{fmt}", whole_dir / "md.gro"])
    parts = open_run([parts_dir / f"md.{fmt}", parts_dir / f"md.part0002.{fmt}", parts_dir / f"md.part0003.{fmt}",
                      parts_dir / "md.gro"])
    assert parts.n_frames == whole.n_frames
    np.testing.assert_allclose(parts.time_ps, whole.time_ps, atol=1e-6)
    for what in ("positions_nm", "velocities_nm_per_ps", "box_nm"):
        a = np.concatenate([getattr(c, what) for c in parts.frames.iter_chunks(chunk_frames=16)])
        b = np.concatenate([getattr(c, what) for c in whole.frames.iter_chunks(chunk_frames=16)])
        np.testing.assert_array_equal(a, b)
    (overlap,) = parts.metadata.extra["overlaps"][1:] or parts.metadata.extra["overlaps"]
    if fmt == "xtc":
        assert "md.part0003.xtc starts at t = 2.24 ps" in overlap and "5 frame(s) of md.part0002.xtc" in overlap
    assert parts.metadata.extra["gaps"] == []


def test_xtc_positions_are_marked_lossy_and_the_estimate_says_so():
    # XTC: positions kept to 0.001 nm (precision 1000 in the frame header of GROMACS's
    # md.xtc); constraint inference must not run on them (the audit reads positions_lossy).
    d = GMX / "spce_rigid_nve_whole"
    xtc = open_run([d / "md.xtc", d / "md.gro"])
    assert xtc.frames.positions_lossy and xtc.frames.positions_precision_nm == pytest.approx(1e-3)
    assert any("stored to 0.001 nm (XTC)" in w for w in xtc.warnings)
    trr = open_run([d / "md.trr", d / "md.gro"])
    assert not trr.frames.positions_lossy
    parts = open_run([GMX / "spce_rigid_nve_parts" / "md.xtc", GMX / "spce_rigid_nve_parts" / "md.part0002.xtc",
                      d / "md.gro"])
    assert parts.frames.positions_lossy


def test_a_dump_and_an_xtc_are_not_parts_of_one_run(tmp_path, whole):
    from phasewake.core.errors import InputError

    xyz, pdb, full = whole
    dump = Path(__file__).resolve().parents[1] / "data" / "lammps_small" / "tri.lammpstrj"
    with pytest.raises(InputError, match="mix LAMMPS dumps"):
        open_run([full, dump, pdb])


def test_parts_whose_clocks_restart_follow_their_names(tmp_path, whole):
    # OpenMM reporters start each new file's time at the report interval (seen in OpenMM 8 output):
    # two parts both starting at t = 0.5 ps are joined by name, the second continuing the first's clock.
    xyz, pdb, _ = whole
    a = tmp_path / "run1.xtc"
    b = tmp_path / "run2.xtc"
    for path, rows in ((a, range(0, 10)), (b, range(10, 20))):
        with contextlib.redirect_stdout(io.StringIO()), md.formats.XTCTrajectoryFile(str(path), "w") as f:
            idx = np.asarray(list(rows))
            f.write(xyz[idx], time=((np.arange(idx.size) + 1) * DT).astype(np.float32), step=(np.arange(idx.size) + 1) * 250)
    run = open_run([b, a, pdb])
    assert run.n_frames == 20
    np.testing.assert_allclose(run.time_ps, (np.arange(20) + 1) * DT, atol=1e-5)
    np.testing.assert_array_equal(_positions(run), xyz[:20])
    assert any("each file restarts the clock" in w for w in run.warnings)


def test_audit_infers_no_constraints_from_xtc_positions():
    # Issue: XTC bond lengths (0.001 nm) made rigid water look flexible, 1203 instead of 801 DOF. From
    # the XTC the audit infers nothing (and says so); from the TRR of the same run (GROMACS 2022.5, full
    # precision) the rigid pairs are still found. Reference: md.log nrdf 801 (reported.json).
    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.progress import drive

    d = GMX / "spce_rigid_nve_whole"
    xtc = drive(audit_run(open_run([d / "md.xtc", d / "md.gro"])))
    assert "inferred" not in xtc.temperature.constraints_source
    assert "precise positions" in xtc.temperature.constraints_source
    trr = drive(audit_run(open_run([d / "md.trr", d / "md.gro"])))
    assert trr.temperature.constraints_source.startswith("inferred from rigid pair distances")


def test_amber_netcdf_parts_prod1_prod2_join_with_velocities(tmp_path, whole):
    # AMBER restarts continue TIME(PS) from the restart file and repeat no frame (AMBER documentation):
    # prod1.nc (frames 0-24) and prod2.nc (25-39) give the whole run; velocities x 20.455 x 0.1 nm/ps.
    xyz, pdb, _ = whole
    vel = np.random.default_rng(9).normal(size=xyz.shape).astype(np.float32)
    t = np.arange(N_FRAMES) * DT
    amber_netcdf(tmp_path / "prod1.nc", xyz[:25], vel[:25], t[:25])
    amber_netcdf(tmp_path / "prod2.nc", xyz[25:], vel[25:], t[25:])
    run = open_run([tmp_path / "prod2.nc", tmp_path / "prod1.nc", pdb])
    assert run.n_frames == N_FRAMES and run.has_velocities and not run.frames.velocities_estimated
    got = np.concatenate([c.velocities_nm_per_ps for c in run.frames.iter_chunks(chunk_frames=9)])
    np.testing.assert_allclose(got, vel * np.float32(20.455) * 0.1, rtol=1e-5)
    np.testing.assert_allclose(_positions(run), xyz, atol=1e-6)
    assert run.metadata.extra["overlaps"] == [] and run.metadata.extra["gaps"] == []
    assert [p.split(":")[0] for p in run.metadata.extra["parts"]] == ["prod1.nc", "prod2.nc"]
