"""Trajectories through mdtraj: files written by mdtraj from known positions read back equal (mdtraj as
the reference), TRR and AMBER NetCDF velocities, mdtraj's HDF5 layout read with h5py."""

import contextlib
import io
import json
import struct
import warnings
from pathlib import Path

import h5py
import mdtraj as md
import numpy as np
import pytest

from phasewake.core.errors import CorruptFileError, MissingDataError, TopologyMismatchError
from phasewake.core.readers import open_run
from tests.helpers import amber_netcdf

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"

N_ATOMS = 12
N_FRAMES = 20


@pytest.fixture(scope="module")
def topo():
    top = md.Topology()
    ch = top.add_chain()
    for i in range(N_ATOMS // 3):
        r = top.add_residue("HOH", ch, resSeq=i + 1)
        o = top.add_atom("O", md.element.oxygen, r)
        h1 = top.add_atom("H1", md.element.hydrogen, r)
        h2 = top.add_atom("H2", md.element.hydrogen, r)
        top.add_bond(o, h1)
        top.add_bond(o, h2)
    return top


@pytest.fixture(scope="module")
def traj(topo):
    rng = np.random.default_rng(11)
    xyz = (0.2 + 1.6 * rng.random((N_FRAMES, N_ATOMS, 3))).astype(np.float32)
    lengths = np.full((N_FRAMES, 3), 2.0, dtype=np.float32)
    angles = np.full((N_FRAMES, 3), 90.0, dtype=np.float32)
    return md.Trajectory(xyz, topo, time=1.5 + 0.1 * np.arange(N_FRAMES), unitcell_lengths=lengths,
                         unitcell_angles=angles)


@pytest.fixture(scope="module")
def files(traj, tmp_path_factory):
    d = tmp_path_factory.mktemp("mdtraj_formats")
    out = {}
    with contextlib.redirect_stdout(io.StringIO()), warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*netCDF4.*")  # mdtraj's advice, not our code
        for ext in ("dcd", "xtc", "trr", "nc", "gro", "xyz", "lammpstrj"):
            out[ext] = d / f"t.{ext}"
            traj.save(str(out[ext]))
        out["pdb"] = d / "t.pdb"
        traj[0].save_pdb(str(out["pdb"]))
    return out


def _all_positions(run):
    return np.concatenate([c.positions_nm for c in run.frames.iter_chunks(chunk_frames=7, velocities=False)])


@pytest.mark.parametrize(("ext", "atol"), [("dcd", 1e-6), ("xtc", 1.5e-3), ("trr", 0), ("nc", 1e-6),
                                           ("xyz", 1e-4), ("lammpstrj", 1e-4)])
def test_positions_read_back_equal_to_mdtraj(files, traj, ext, atol):
    # Reference: mdtraj.load of the same file (and the positions it was written from).
    with contextlib.redirect_stdout(io.StringIO()), warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*netCDF4.*")
        ref = md.load(str(files[ext]), top=str(files["pdb"]))
    # lammpstrj is read by our own LAMMPS reader, which needs the units style (mdtraj writes Angstrom)
    run = open_run([files[ext], files["pdb"]], **({"units_style": "real"} if ext == "lammpstrj" else {}))
    assert run.n_frames == N_FRAMES and run.n_atoms == N_ATOMS
    got = _all_positions(run)
    np.testing.assert_array_equal(got, ref.xyz)
    np.testing.assert_allclose(got, traj.xyz, atol=atol, rtol=0)  # XTC stores 1e-3 nm precision
    box = run.frames.read_frame(3).box_nm
    if ext == "xyz":  # XYZ holds no box
        assert box is None and not run.frames.has_box
    else:
        np.testing.assert_allclose(box[0], np.diag([2.0, 2.0, 2.0]), atol=1e-5)


@pytest.mark.parametrize("ext", ["xtc", "trr", "nc"])
def test_time_from_headers(files, traj, ext):
    run = open_run([files[ext], files["pdb"]])
    np.testing.assert_allclose(run.time_ps, traj.time, rtol=1e-6)  # float32 in the file


def test_dcd_without_time_step_is_numbered_with_warning(files):
    # mdtraj writes DCD headers with placeholder DELTA=1, NSAVC=1: no real clock, so we say so.
    run = open_run([files["dcd"], files["pdb"]])
    np.testing.assert_array_equal(run.time_ps, np.arange(N_FRAMES))
    assert any("holds no time axis" in w for w in run.warnings)


def test_dcd_chatter_stays_off_stdout(files, capfd):
    run = open_run([files["dcd"], files["pdb"]])
    _all_positions(run)
    out, _ = capfd.readouterr()
    assert out == ""


def test_chunks_strides_and_atom_subsets(files, traj):
    run = open_run([files["xtc"], files["pdb"]])
    chunks = list(run.frames.iter_chunks(chunk_frames=3, start=2, stop=17, stride=4, atom_indices=[0, 5],
                                         velocities=False))
    got = np.concatenate([c.positions_nm for c in chunks])
    np.testing.assert_allclose(got, traj.xyz[2:17:4][:, [0, 5]], atol=1.5e-3)
    assert [c.start for c in chunks] == [2, 14]
    np.testing.assert_allclose(np.concatenate([c.time_ps for c in chunks]), traj.time[2:17:4], rtol=1e-6)


def test_estimated_velocities_central_differences(files, traj):
    # positions only (DCD): velocities by central differences, marked estimated, with a warning
    run = open_run([files["trr"], files["pdb"]])
    assert run.frames.velocities_estimated and run.has_velocities
    assert any("estimated by central differences" in w for w in run.warnings)
    v = np.concatenate([c.velocities_nm_per_ps for c in run.frames.iter_chunks(chunk_frames=6)])
    x = traj.xyz.astype(np.float64)
    box = 2.0
    d = x[2:] - x[:-2]
    d -= box * np.round(d / box)  # minimum image
    expected_mid = d / 0.2
    np.testing.assert_allclose(v[1:-1], expected_mid, rtol=1e-4, atol=1e-4)


def test_gro_alone_carries_topology(files):
    run = open_run([files["gro"]])
    assert run.n_frames == N_FRAMES and run.topology.n_atoms == N_ATOMS


def test_topology_with_other_atom_count(files, tmp_path, traj):
    other = tmp_path / "small.pdb"
    traj.atom_slice(range(9))[0].save_pdb(str(other))
    for ext in ("dcd", "xtc", "trr", "nc"):
        with pytest.raises(TopologyMismatchError, match="12 atoms.*9"):
            open_run([files[ext], other])


def test_trajectory_without_topology(files):
    with pytest.raises(MissingDataError, match="topology"):
        open_run([files["xtc"]])


def test_content_not_matching_suffix(tmp_path, files):
    fake = tmp_path / "fake.xtc"
    fake.write_bytes(b"this is not an xtc file at all, just text\n" * 10)
    with pytest.raises(CorruptFileError, match="not XTC"):
        open_run([fake, files["pdb"]])


# --- TRR velocities: a TRR written here byte by byte in the GROMACS XDR layout ---------------------


def _trr_frame(x, v, step, t, box):
    """One single-precision TRR frame (GROMACS trr header: magic 1993, version string, 13 size ints)."""
    n = x.shape[0]
    xs = 12 * n
    vs = 12 * n if v is not None else 0
    head = struct.pack(">ii", 1993, 13) + struct.pack(">i", 12) + b"GMX_trn_file"
    head += struct.pack(">13i", 0, 0, 36, 0, 0, 0, 0, xs, vs, 0, n, step, 0)
    head += struct.pack(">ff", t, 0.0)
    body = struct.pack(">9f", *box.ravel()) + struct.pack(f">{3 * n}f", *x.ravel())
    if v is not None:
        body += struct.pack(f">{3 * n}f", *v.ravel())
    return head + body


def _write_trr(path, xyz, vel, mask):
    box = np.diag([2.0, 2.0, 2.0])
    with open(path, "wb") as f:
        for i in range(xyz.shape[0]):
            f.write(_trr_frame(xyz[i], vel[i] if mask[i] else None, 10 * i, 0.5 * i, box))


def test_trr_velocities(tmp_path, files, traj):
    rng = np.random.default_rng(3)
    vel = rng.normal(size=traj.xyz.shape).astype(np.float32)
    path = tmp_path / "v.trr"
    _write_trr(path, traj.xyz, vel, np.ones(N_FRAMES, bool))
    # our hand-written TRR is valid: mdtraj reads the same positions back (reference)
    ref = md.load(str(path), top=str(files["pdb"]))
    np.testing.assert_array_equal(ref.xyz, traj.xyz)
    run = open_run([path, files["pdb"]])
    assert run.has_velocities and not run.frames.velocities_estimated
    got = np.concatenate([c.velocities_nm_per_ps for c in run.frames.iter_chunks(chunk_frames=6, start=1)])
    np.testing.assert_array_equal(got, vel[1:])
    np.testing.assert_allclose(run.time_ps, 0.5 * np.arange(N_FRAMES))


def test_trr_with_frames_lacking_velocities_is_not_trusted(tmp_path, files, traj):
    # A trap: mdtraj checks velocities on frame 0 only; frames without them would be garbage.
    vel = np.ones(traj.xyz.shape, np.float32)
    mask = np.ones(N_FRAMES, bool)
    mask[7] = False
    path = tmp_path / "mixed.trr"
    _write_trr(path, traj.xyz, vel, mask)
    run = open_run([path, files["pdb"]])
    assert run.frames.velocities_estimated
    assert any("frame 7 has none" in w for w in run.warnings)


def test_truncated_trr_frame(tmp_path, files, traj):
    path = tmp_path / "cut.trr"
    _write_trr(path, traj.xyz, traj.xyz, np.ones(N_FRAMES, bool))
    data = path.read_bytes()
    path.write_bytes(data[: len(data) - 50])
    with pytest.raises(CorruptFileError, match="truncated"):
        open_run([path, files["pdb"]])


# --- AMBER NetCDF velocities with scale_factor ------------------------------------------------------


def test_amber_netcdf_velocities_with_scale_factor(tmp_path, files, traj):
    # AMBER NetCDF convention: velocities(frame, atom, spatial), units "angstrom/picosecond",
    # scale_factor 20.455 (AMBER's internal velocity unit); written here with scipy's NetCDF-3 writer.
    rng = np.random.default_rng(8)
    stored = rng.normal(size=traj.xyz.shape).astype(np.float32)
    path = tmp_path / "amber.nc"
    amber_netcdf(path, traj.xyz, stored, traj.time)
    with contextlib.redirect_stdout(io.StringIO()), warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*netCDF4.*")
        ref = md.load(str(path), top=str(files["pdb"]))
    run = open_run([path, files["pdb"]])
    np.testing.assert_allclose(_all_positions(run), ref.xyz, rtol=1e-6)
    got = np.concatenate([ch.velocities_nm_per_ps for ch in run.frames.iter_chunks(chunk_frames=8)])
    np.testing.assert_allclose(got, stored * np.float32(20.455) * 0.1, rtol=1e-5)  # x scale, A -> nm


# --- mdtraj's HDF5 layout -----------------------------------------------------------------------------


def test_mdtraj_hdf5_layout_read_with_h5py(tmp_path, traj):
    # Layout of mdtraj/formats/hdf5.py ("Pande" conventions 1.1), written here with h5py.
    path = tmp_path / "m.h5"
    rng = np.random.default_rng(2)
    vel = rng.normal(size=traj.xyz.shape).astype(np.float32)
    ke = rng.random(N_FRAMES)
    top_dict = {"chains": [{"index": 0, "residues": [
        {"index": r.index, "name": r.name, "resSeq": r.resSeq,
         "atoms": [{"index": a.index, "name": a.name, "element": a.element.symbol} for a in r.atoms]}
        for r in traj.topology.residues]}], "bonds": [[b[0].index, b[1].index] for b in traj.topology.bonds]}
    with h5py.File(path, "w") as f:
        f.attrs["conventions"] = b"Pande"
        f.attrs["conventionVersion"] = b"1.1"
        f.create_dataset("coordinates", data=traj.xyz * 10).attrs["units"] = b"angstroms"
        f.create_dataset("time", data=traj.time).attrs["units"] = b"picoseconds"
        f.create_dataset("velocities", data=vel).attrs["units"] = b"nanometers/picosecond"
        f.create_dataset("cell_lengths", data=traj.unitcell_lengths).attrs["units"] = b"nanometers"
        f.create_dataset("cell_angles", data=np.tile([90.0, 90.0, 60.0], (N_FRAMES, 1))).attrs["units"] = b"degrees"
        f.create_dataset("kineticEnergy", data=ke).attrs["units"] = b"kilocalories_per_mole"
        f.create_dataset("topology", data=[json.dumps(top_dict).encode()])
    run = open_run([path])
    np.testing.assert_allclose(_all_positions(run), traj.xyz, rtol=1e-6)
    v = np.concatenate([c.velocities_nm_per_ps for c in run.frames.iter_chunks()])
    np.testing.assert_array_equal(v, vel)
    np.testing.assert_allclose(run.energies.by_role("kinetic").values, ke * 4.184)  # NIST SP 811
    assert run.topology.n_bonds == traj.topology.n_bonds
    b = run.frames.read_frame(0).box_nm[0]
    # gamma = 60 deg: b = 2 (cos 60, sin 60, 0)  (standard lengths/angles -> vectors convention)
    np.testing.assert_allclose(b[1], [1.0, np.sqrt(3.0), 0.0], atol=1e-6)
    # mdtraj's own converter agrees (reference): lengths/angles -> vectors
    ref = md.utils.lengths_and_angles_to_box_vectors(2.0, 2.0, 2.0, 90.0, 90.0, 60.0)
    np.testing.assert_allclose(b, np.array(ref), atol=1e-6)


def test_dcd_header_clock(tmp_path, files):
    # CHARMM/NAMD DCD header: ISTART, NSAVC (steps) and DELTA (time step in AKMA units, 48.88821 fs;
    # from memory, CHARMM documentation). Patch them into an mdtraj-written file.
    path = tmp_path / "clock.dcd"
    data = bytearray(files["dcd"].read_bytes())
    struct.pack_into("<ii", data, 12, 500, 25)  # ISTART = 500, NSAVC = 25
    struct.pack_into("<f", data, 44, np.float32(2.0 / 48.88821))  # DELTA = 2 fs in AKMA units
    path.write_bytes(bytes(data))
    run = open_run([path, files["pdb"]])
    expected = (500 + 25 * np.arange(N_FRAMES)) * 2e-3  # ps
    np.testing.assert_allclose(run.time_ps, expected, rtol=1e-5)
    assert not any("holds no time axis" in w for w in run.warnings)


def test_quiet_stdout_restored_after_concurrent_reads(files, capfd):
    # the window reads frames in worker threads: the process-wide stdout swap must nest and restore
    import os
    import threading

    run = open_run([files["dcd"], files["pdb"]])
    errors_seen = []

    def work():
        try:
            for _ in range(3):
                _all_positions(run)
        except Exception as exc:  # noqa: BLE001 - collected for the assertion below
            errors_seen.append(exc)

    threads = [threading.Thread(target=work) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert not errors_seen
    capfd.readouterr()
    os.write(1, b"still here\n")
    assert capfd.readouterr().out == "still here\n"


@pytest.mark.parametrize("start, stride, atoms, chunk", [(0, 2, [0, 1], 256), (1, 3, [1, 2], 3), (0, 3, [5], 1)])
def test_trr_read_with_a_stride_and_some_atoms_is_the_full_read_thinned(start, stride, atoms, chunk):
    # mdtraj 1.11's TRR reader aborted the process (heap corruption) on a stride with an atom subset; the
    # reference is mdtraj's own plain read of the whole file (GROMACS's output), sliced
    from pathlib import Path

    run_dir = Path(__file__).resolve().parents[1] / "data" / "engines" / "gromacs" / "spce_flexible_nve_2fs"
    run = open_run([run_dir / "md.trr"], topology=run_dir / "md.gro")
    with contextlib.redirect_stdout(io.StringIO()):
        ref = md.load(str(run_dir / "md.trr"), top=str(run_dir / "md.gro"))
    chunks = list(run.frames.iter_chunks(start=start, stride=stride, atom_indices=atoms, chunk_frames=chunk))
    pos = np.concatenate([c.positions_nm for c in chunks])
    np.testing.assert_array_equal(pos, ref.xyz[start::stride][:, atoms])
    np.testing.assert_array_equal(np.concatenate([c.box_nm for c in chunks]),
                                  ref.unitcell_vectors[start::stride].astype(np.float64))
    assert [c.start for c in chunks][0] == start and sum(c.n_frames for c in chunks) == len(range(start, run.n_frames, stride))


def test_copies_of_one_topology_share_a_parse_and_a_changed_file_is_parsed_again(tmp_path):
    # replicas often carry a copy of the same topology file each: one parse serves them all (kept by
    # content), while a file whose bytes differ, or that changed since, is parsed afresh
    from phasewake.core.readers import trajectory

    src = (SAMPLES / "dimer_nve.pdb").read_bytes()
    paths = []
    for k in range(3):
        (tmp_path / f"r{k}").mkdir()
        paths.append(tmp_path / f"r{k}" / "top.pdb")
        paths[-1].write_bytes(src)
    trajectory.forget_topologies()
    tops = [trajectory.load_topology(p) for p in paths]
    assert tops[0] is tops[1] is tops[2]
    assert tops[0].n_atoms == md.load_topology(str(paths[0])).n_atoms
    paths[2].write_bytes(src.replace(b"ATOM      1", b"HETATM    1", 1))  # other bytes, same size
    changed = trajectory.load_topology(paths[2])
    assert changed is not tops[0]
    assert trajectory.load_topology(paths[0]) is tops[0]
