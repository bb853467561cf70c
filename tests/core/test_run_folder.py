"""A run folder: `phasewake describe FOLDER` finds the engine's files (core/readers/folder.py).

Folders are laid out as each engine writes its files (GROMACS `mdrun -deffnm md` with
-noappend parts, a LAMMPS run with its dump, data file and log); file contents are written by mdtraj or
come from the real LAMMPS run in tests/data/lammps_small.
"""

from __future__ import annotations

import contextlib
import io
import shutil
from pathlib import Path

import mdtraj as md
import numpy as np
import pytest

from phasewake.app.cli import main
from phasewake.core.errors import InputError
from phasewake.core.readers import open_run
from phasewake.core.readers.folder import find_run_files, run_family

LAMMPS = Path(__file__).resolve().parents[1] / "data" / "lammps_small"


def _traj(n_frames=10, n_atoms=3, t0=0.0):
    top = md.Topology()
    ch = top.add_chain()
    for i in range(n_atoms):
        top.add_atom("Ar", md.element.argon, top.add_residue("AR", ch, resSeq=i + 1))
    xyz = np.random.default_rng(1).random((n_frames, n_atoms, 3)).astype(np.float32) + 0.5
    return md.Trajectory(xyz, top, time=t0 + np.arange(n_frames) * 0.5,
                         unitcell_lengths=np.full((n_frames, 3), 2.0), unitcell_angles=np.full((n_frames, 3), 90.0))


def _save(tr, path: Path) -> Path:
    with contextlib.redirect_stdout(io.StringIO()):
        tr.save(str(path))
    return path


def test_run_family_names_parts_alike():
    assert run_family(Path("md.part0002.xtc")) == run_family(Path("md.xtc")) == "md"
    assert run_family(Path("prod1.nc")) == run_family(Path("prod12.nc")) == "prod"
    assert run_family(Path("nvt.xtc")) != run_family(Path("npt.xtc"))


def test_gromacs_folder_takes_parts_and_topology_and_names_what_it_left_out(tmp_path, capsys):
    tr = _traj(20)
    _save(tr[:10], tmp_path / "md.xtc")
    _save(tr[9:], tmp_path / "md.part0002.xtc")  # -noappend repeats the checkpoint frame
    _save(tr[0], tmp_path / "md.gro")
    (tmp_path / "topol.top").write_text("; a GROMACS topology (no reader of ours)\n")
    found = find_run_files(tmp_path)
    assert [p.name for p in found.paths] == ["md.xtc", "md.part0002.xtc", "md.gro"]
    assert ("topol.top", "no reader claims it") in [(p.name, why) for p, why in found.left_out]
    run = open_run([tmp_path])
    assert run.n_frames == 20
    assert any(w.startswith(f"run folder {tmp_path.name}: took md.xtc, md.part0002.xtc, md.gro") for w in run.warnings)
    assert main(["describe", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "left out topol.top" in out and "repeats 1 frame(s) of md.xtc" in out


def test_same_run_in_two_formats_takes_the_one_with_velocities(tmp_path):
    tr = _traj(10)
    _save(tr, tmp_path / "md.xtc")
    _save(tr, tmp_path / "md.trr")
    _save(tr[0], tmp_path / "md.gro")
    found = find_run_files(tmp_path)
    assert [p.name for p in found.paths] == ["md.trr", "md.gro"]
    assert [p.name for p, _ in found.left_out] == ["md.xtc"]


def test_lammps_folder(tmp_path):
    for name in ("tri.lammpstrj", "tri.data", "in.tri"):
        shutil.copy(LAMMPS / name, tmp_path / name)
    run = open_run([tmp_path], units_style="real", timestep_ps=0.002)
    assert run.n_atoms == 60 and run.n_frames == 6
    assert run.metadata.sources["topology"] == "tri.data"
    assert "in.tri (no reader claims it)" in run.warnings[0]


def test_two_candidate_trajectories_are_one_line_listing_them(tmp_path, capsys):
    tr = _traj(10)
    _save(tr, tmp_path / "nvt.xtc")
    _save(tr, tmp_path / "npt.xtc")
    _save(tr[0], tmp_path / "conf.gro")
    with pytest.raises(InputError, match="nvt.xtc"):
        find_run_files(tmp_path)
    code = main(["describe", str(tmp_path)])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "Traceback" not in err
    assert "npt (npt.xtc)" in err and "nvt (nvt.xtc)" in err and tmp_path.name in err


def test_empty_folder_is_one_line(tmp_path, capsys):
    (tmp_path / "notes.md").write_text("nothing here\n")
    code = main(["describe", str(tmp_path)])
    err = capsys.readouterr().err
    assert code == 2 and "no file of a run" in err and err.count("\n") == 1


@pytest.mark.slow  # measured 0.9 s of CPU
def test_window_opens_a_dropped_folder(tmp_path):
    # The window's drop and open route (group_runs, then the default opener) takes a folder as one run,
    # and several folders as one run each.
    pytest.importorskip("PySide6")
    from phasewake.app.window import group_runs
    from phasewake.app.window.main import default_opener
    from phasewake.app.window.model import RunSettings

    a, b = tmp_path / "a", tmp_path / "b"
    for d in (a, b):
        d.mkdir()
        _save(_traj(8), d / "md.xtc")
        _save(_traj(1), d / "md.gro")
    assert group_runs([str(a), str(b)]) == [(str(a),), (str(b),)]
    (group,) = group_runs([str(a)])
    run = default_opener(group, None, RunSettings())
    assert run.n_frames == 8 and run.metadata.sources["topology"] == "md.gro"


ENGINES = Path(__file__).resolve().parents[1] / "data" / "engines"


def test_real_gromacs_parts_folder_gives_the_whole_run(capsys):
    # Reference: GROMACS 2022.5 made the run whole and in three -noappend parts (tests/data/engines,
    # reported.json: 91 energy frames for the whole run, parts 2 and 3 overlapping 1120-1200). The folder
    # of parts, opened with no option, gives the whole run's frames and energies.
    parts = open_run([ENGINES / "gromacs" / "spce_rigid_nve_parts"])
    whole_dir = ENGINES / "gromacs" / "spce_rigid_nve_whole"
    whole = open_run([whole_dir / "md.trr", whole_dir / "md.gro", whole_dir / "md.edr"])
    assert parts.n_frames == whole.n_frames and len(parts.energies) == len(whole.energies) == 91
    np.testing.assert_allclose(parts.energies.time_ps, whole.energies.time_ps, atol=1e-9)
    np.testing.assert_array_equal(parts.energies.series["Total Energy"].values,
                                  whole.energies.series["Total Energy"].values)
    np.testing.assert_array_equal(
        np.concatenate([c.velocities_nm_per_ps for c in parts.frames.iter_chunks()]),
        np.concatenate([c.velocities_nm_per_ps for c in whole.frames.iter_chunks()]))
    note = parts.warnings[0]
    assert "took md.trr, md.part0002.trr, md.part0003.trr, md.gro" in note
    assert "md.xtc (the same run as md.trr" in note
    assert any("md.part0002.edr" in w and "2.24" in w for w in parts.warnings)  # the energy overlap
    assert parts.metadata.n_dof == 801  # the engine's count, from md.log beside md.edr


def test_real_lammps_folder_with_two_dumps_is_ambiguous_and_one_dump_opens(tmp_path, capsys):
    # argon_real_nve holds two dumps of the run (wrapped, unwrapped): two candidates, named in one line.
    code = main(["describe", str(ENGINES / "lammps" / "argon_real_nve")])
    err = capsys.readouterr().err
    assert code == 2 and "dump.lammpstrj" in err and "dump.unwrapped.lammpstrj" in err and err.count("\n") == 1
    # argon_metal_nve: one dump, log.lammps and data files: no option needed (reported.json: 256 atoms,
    # 11 dump frames every 200 steps of 0.004 ps)
    run = open_run([ENGINES / "lammps" / "argon_metal_nve"])
    assert run.n_atoms == 256 and run.n_frames == 11
    np.testing.assert_allclose(np.diff(run.time_ps), 0.8)
    assert run.metadata.units_style == "lammps metal" and run.energies is not None


def test_cp2k_folder_pairs_the_positions_with_the_velocity_xyz(tmp_path):
    # CP2K writes PROJECT-pos-1.xyz and PROJECT-vel-1.xyz of one run: not two runs,
    # the velocities of the positions
    src = ENGINES / "cp2k" / "argon_fist_nve"
    found = find_run_files(src)
    taken = [p.name for p in found.paths]
    assert "argon-pos-1.xyz" in taken and "argon-vel-1.xyz" in taken
    assert "argon-1.ener" in taken and "argon.out" in taken
