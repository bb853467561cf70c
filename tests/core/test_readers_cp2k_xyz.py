"""CP2K's MD trajectories PROJECT-pos-1.xyz and PROJECT-vel-1.xyz (core/readers/cp2k_xyz.py).

The runs in tests/data/engines/cp2k were made by CP2K 2023.1 (Fist) itself. Outside references: the
engine's own argon-1.ener (Kin.[a.u.] and Temp[K] at every 5th step, read here with numpy, not with our
readers), reported.json (written by make_engine_runs.py from argon.out: atoms, time step, degrees of
freedom, frame counts), and CODATA constants via scipy.constants.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest
from scipy import constants as sc

from phasewake.app.cli import main
from phasewake.core.errors import CorruptFileError, TopologyMismatchError
from phasewake.core.readers import identify, open_run
from phasewake.core.readers.cp2k_xyz import scan

CP2K = Path(__file__).resolve().parents[1] / "data" / "engines" / "cp2k"
RUNS = ["argon_fist_nve", "argon_fist_nvt_csvr"]
# Hartree -> kJ/mol (CODATA via scipy.constants)
HARTREE_KJ_MOL = sc.physical_constants["Hartree energy"][0] * sc.N_A / 1000.0
# 1 amu (g/mol) x (nm/ps)^2 = 1 g/mol x (1000 m/s)^2 = 1 kJ/mol, exactly
KB_KJ_MOL_K = sc.k * sc.N_A / 1000.0


def _reported(run: str) -> dict:
    return json.loads((CP2K / run / "reported.json").read_text())["reported"]


def _ener(run: str) -> np.ndarray:
    # CP2K's own .ener: Step Nr., Time[fs], Kin.[a.u.], Temp[K], Pot.[a.u.], Cons Qty[a.u.], UsedTime[s]
    return np.loadtxt(CP2K / run / "argon-1.ener", comments="#")


# CP2K's argon mass: 39.948, the IUPAC conventional standard atomic weight (from memory); mdtraj's element
# table, which gives our masses, has 39.9481 (2.5e-6 relative more)
CP2K_AR_AMU = 39.948


def _kinetic_kj_mol(run_obj, masses=None) -> tuple[np.ndarray, np.ndarray]:
    m = run_obj.masses_amu if masses is None else masses
    ke = []
    for ch in run_obj.frames.iter_chunks(chunk_frames=4):
        v = ch.velocities_nm_per_ps.astype(np.float64)
        ke.extend(0.5 * np.einsum("i,fij->f", m, v * v))
    return np.asarray(ke), np.asarray(run_obj.frames.steps)


@pytest.mark.parametrize("run", RUNS)
def test_folder_opens_positions_and_velocities_as_cp2k_wrote_them(run):
    rep = _reported(run)
    r = open_run([CP2K / run])
    names = {p.name for p in r.paths}
    assert {"argon-pos-1.xyz", "argon-vel-1.xyz", "argon-1.ener", "argon.out"} <= names
    # reference: reported.json (argon.out DOF| Number of atoms, MD_PAR| Time step, frames per file)
    assert r.n_atoms == rep["atoms"]
    assert r.n_frames == rep["frames"]["argon-pos-1.xyz"] == rep["frames"]["argon-vel-1.xyz"]
    assert r.metadata.timestep_ps == pytest.approx(rep["time_step_ps"], rel=1e-12)
    assert r.frames.has_velocities and not r.frames.velocities_estimated
    # time from the frame headers (fs -> ps): frames every 100 steps of 4 fs, the last at the last step
    assert r.time_ps[0] == 0.0
    assert r.time_ps[-1] == pytest.approx(rep["n_steps"] * rep["time_step_ps"], rel=1e-12)
    assert "argon-vel-1.xyz" in r.metadata.sources["velocities"]
    # argon's standard atomic weight (mdtraj's element table, within 3e-6 of CP2K's)
    np.testing.assert_allclose(r.masses_amu, CP2K_AR_AMU, rtol=3e-6)
    assert r.topology.n_residues == r.n_atoms


@pytest.mark.parametrize("run", RUNS)
def test_kinetic_energy_and_temperature_equal_the_ener_at_each_frame(run):
    # CP2K: the -vel- file's velocities are full-step, 1/2 m v^2 equals Kin.[a.u.] exactly.
    rep = _reported(run)
    r = open_run([CP2K / run])
    ener = _ener(run)
    row = {int(s): k for k, s in enumerate(ener[:, 0])}
    steps = np.asarray(r.frames.steps)
    kin = np.array([ener[row[int(s)], 2] for s in steps]) * HARTREE_KJ_MOL
    temp = np.array([ener[row[int(s)], 3] for s in steps])
    # with CP2K's own mass the velocities give Kin. to the printed precision: velocities to 1e-10 bohr/atu
    # (values ~1e-4, averaged over 768 components), Kin. to 1e-9 Hartree, float32 storage ~6e-8 each
    ke_cp2k, _ = _kinetic_kj_mol(r, np.full(r.n_atoms, CP2K_AR_AMU))
    np.testing.assert_allclose(ke_cp2k, kin, rtol=2e-7)
    # with our masses (mdtraj's 39.9481) the same within their 2.5e-6 difference
    ke, _ = _kinetic_kj_mol(r)
    np.testing.assert_allclose(ke, kin, rtol=3e-6)
    # the engine's DOF (argon.out, 3N - 3 = 765) turns it into the .ener's Temp[K]
    # (CP2K 2023 converts with CODATA 2006 constants, k_B = 1.3806504e-23 J/K (from memory): 1.2e-6
    # relative from scipy's CODATA 2018, hence the tolerance)
    t_cp2k = 2.0 * ke_cp2k / (rep["degrees_of_freedom"] * KB_KJ_MOL_K)
    np.testing.assert_allclose(t_cp2k, temp, rtol=1.5e-6)
    t = 2.0 * ke / (rep["degrees_of_freedom"] * KB_KJ_MOL_K)
    assert np.mean(t) == pytest.approx(rep["temperature_mean_at_xyz_frames_K"], rel=5e-6)


def test_describe_and_audit_of_the_folder_through_the_command_line(capsys):
    rep = _reported("argon_fist_nve")
    folder = CP2K / "argon_fist_nve"
    assert main(["describe", str(folder), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["n_atoms"] == rep["atoms"] and d["n_frames"] == rep["frames"]["argon-pos-1.xyz"]
    code = main(["audit", str(folder), "--json"])
    out = capsys.readouterr()
    assert code in (0, 1), out.err
    a = json.loads(out.out)
    text = json.dumps(a)
    assert "estimated by central differences" not in text


def test_claimed_by_content_not_by_name(tmp_path):
    pos = CP2K / "argon_fist_nve" / "argon-pos-1.xyz"
    assert identify(pos).name == "cp2k-xyz"
    other = tmp_path / "traj.xyz"  # an xyz with a free comment line is left to the other readers
    other.write_text("2\nwater made by hand\nO 0 0 0\nH 0 0 1\n")
    assert identify(other).name != "cp2k-xyz"
    renamed = tmp_path / "whatever.xyz"
    shutil.copy(pos, renamed)
    assert identify(renamed).name == "cp2k-xyz"


def test_lazy_chunks_equal_a_plain_read(tmp_path):
    # reference: the file's numbers read with numpy line by line (Angstrom -> nm x 0.1)
    path = CP2K / "argon_fist_nve" / "argon-pos-1.xyz"
    idx = scan(path)
    np.testing.assert_array_equal(idx.step, [0, 100, 200, 300, 400, 500])
    lines = path.read_text().splitlines()
    n = int(lines[0])
    whole = np.array([[float(x) for x in ln.split()[1:]] for k in range(6)
                      for ln in lines[k * (n + 2) + 2 : (k + 1) * (n + 2)]]).reshape(6, n, 3) * 0.1
    r = open_run([path])
    sel = [3, 0, 255, 17]
    got = np.concatenate([ch.positions_nm for ch in r.frames.iter_chunks(chunk_frames=2, start=1, stride=2,
                                                                          atom_indices=sel)])
    np.testing.assert_allclose(got, whole[1::2][:, sel], rtol=1e-6)
    np.testing.assert_allclose(r.frames.read_frame(-1).positions_nm[0], whole[-1], rtol=1e-6)
    # the positions alone: velocities are estimated, and the file beside them is named
    assert r.frames.velocities_estimated
    assert any("argon-vel-1.xyz" in w for w in r.warnings)


def _copy_run(tmp_path: Path) -> Path:
    d = tmp_path / "run"
    shutil.copytree(CP2K / "argon_fist_nve", d)
    return d


def _one_line_exit_2(capsys, *args) -> str:
    code = main(["describe", *[str(a) for a in args]])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert "\n" not in err and "Traceback" not in err
    return err


def test_velocity_file_with_another_atom_count_names_both_files(tmp_path, capsys):
    d = _copy_run(tmp_path)
    lines = (d / "argon-vel-1.xyz").read_text().splitlines()
    n = int(lines[0])
    kept = []
    for k in range(len(lines) // (n + 2)):
        block = lines[k * (n + 2) : (k + 1) * (n + 2)]
        kept += [str(n - 1), block[1], *block[2:-1]]
    (d / "argon-vel-1.xyz").write_text("\n".join(kept) + "\n")
    err = _one_line_exit_2(capsys, d)
    assert "argon-vel-1.xyz" in err and "argon-pos-1.xyz" in err and "255" in err
    with pytest.raises(TopologyMismatchError):
        open_run([d / "argon-pos-1.xyz", d / "argon-vel-1.xyz"])


def test_velocity_file_with_another_frame_count_names_both_files(tmp_path, capsys):
    d = _copy_run(tmp_path)
    lines = (d / "argon-vel-1.xyz").read_text().splitlines()
    n = int(lines[0])
    (d / "argon-vel-1.xyz").write_text("\n".join(lines[: 5 * (n + 2)]) + "\n")
    err = _one_line_exit_2(capsys, d)
    assert "argon-vel-1.xyz" in err and "argon-pos-1.xyz" in err and "5 frames" in err


def test_cut_last_frame_is_refused_naming_file_and_frame(tmp_path, capsys):
    d = _copy_run(tmp_path)
    pos = d / "argon-pos-1.xyz"
    lines = pos.read_text().splitlines()
    pos.write_text("\n".join(lines[:-100]) + "\n")  # frame 5 ends after 156 of its 256 rows
    err = _one_line_exit_2(capsys, d)
    assert "argon-pos-1.xyz" in err and "frame 5" in err and "156 of 256" in err
    # cut inside the last row: the row has fewer than 4 fields
    raw = (CP2K / "argon_fist_nve" / "argon-pos-1.xyz").read_bytes().rstrip()
    pos.write_bytes(raw[:-25])
    with pytest.raises(CorruptFileError, match="frame 5"):
        scan(pos)
    err = _one_line_exit_2(capsys, pos)
    assert "argon-pos-1.xyz" in err and "frame 5" in err


def test_a_velocity_file_alone_asks_for_the_positions(tmp_path, capsys):
    err = _one_line_exit_2(capsys, CP2K / "argon_fist_nve" / "argon-vel-1.xyz")
    assert "argon-vel-1.xyz" in err and "positions" in err
