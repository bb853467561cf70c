"""Velocities in a file of their own: NAMD's velocity DCD (core/readers/velocity_file.py).

NAMD cannot be installed here, so the files are laid out as NAMD writes them (marked as such): a
positions DCD and a velocity DCD in the CHARMM layout, written with mdtraj's DCD writer, the velocities
in NAMD's internal unit (Angstrom per 48.88821 fs; x 20.45482706 = Angstrom/ps, NAMD's Output.C).
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

N_ATOMS, N_FRAMES = 5, 12


def _files(tmp_path: Path, vel_name="out.veldcd", n_vel_frames=N_FRAMES):
    rng = np.random.default_rng(3)
    top = md.Topology()
    ch = top.add_chain()
    for i in range(N_ATOMS):
        top.add_atom("AR", md.element.argon, top.add_residue("ARG", ch, resSeq=i + 1))
    xyz = 1.0 + rng.random((N_FRAMES, N_ATOMS, 3)).astype(np.float32)
    v_nm_ps = rng.normal(0, 0.3, (N_FRAMES, N_ATOMS, 3))
    pdb = tmp_path / "sys.pdb"
    md.Trajectory(xyz[:1], top).save_pdb(str(pdb))
    with contextlib.redirect_stdout(io.StringIO()):
        md.Trajectory(xyz, top).save_dcd(str(tmp_path / "out.dcd"))
        with md.formats.DCDTrajectoryFile(str(tmp_path / vel_name), "w") as f:
            # internal units: (nm/ps -> Angstrom/ps) / 20.45482706
            f.write((v_nm_ps[:n_vel_frames] * 10.0 / 20.45482706).astype(np.float32))
    return tmp_path / "out.dcd", tmp_path / vel_name, pdb, v_nm_ps


def _velocities(run):
    return np.concatenate([c.velocities_nm_per_ps for c in run.frames.iter_chunks(chunk_frames=5)])


def test_velocity_dcd_by_name_gives_velocities_in_nm_per_ps(tmp_path):
    dcd, vel, pdb, v = _files(tmp_path)
    run = open_run([dcd, vel, pdb])
    assert run.has_velocities and not run.frames.velocities_estimated
    np.testing.assert_allclose(_velocities(run), v, rtol=1e-5, atol=1e-6)
    assert "NAMD velocity DCD" in run.metadata.sources["velocities"]
    sub = np.concatenate([c.velocities_nm_per_ps for c in run.frames.iter_chunks(start=2, stop=11, stride=3,
                                                                                 atom_indices=[1, 4])])
    np.testing.assert_allclose(sub, v[2:11:3][:, [1, 4]], rtol=1e-5, atol=1e-6)


def test_velocity_file_option_on_the_command_line(tmp_path, capsys):
    dcd, vel, pdb, _ = _files(tmp_path, vel_name="velocities.dcd")
    assert main(["describe", str(dcd), str(pdb), "--velocities", str(vel)]) == 0
    out = capsys.readouterr().out
    assert "velocities: stored" in out


def test_velocity_file_with_other_frames_names_both(tmp_path, capsys):
    dcd, vel, pdb, _ = _files(tmp_path, n_vel_frames=N_FRAMES - 2)
    with pytest.raises(TopologyMismatchError, match=r"10 frames.*out.dcd.*12"):
        open_run([dcd, vel, pdb])
    code = main(["describe", str(dcd), str(vel), str(pdb)])
    err = capsys.readouterr().err
    assert code == 2 and "out.veldcd" in err and err.count("\n") == 1
