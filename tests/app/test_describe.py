"""`phasewake describe`: the summary (text and JSON) and bad input: each a typed error naming the file and
the fault, exit code 2 with one line and no traceback, and the input file unchanged (hash before/after)."""

import contextlib
import hashlib
import io
import json

import h5py
import mdtraj as md
import numpy as np
import pytest

from phasewake.app.cli import main
from phasewake.core import errors
from phasewake.core.readers import open_run
from phasewake.core.readers.h5md import write_h5md


def _digest(paths):
    return {str(p): hashlib.sha256(p.read_bytes()).hexdigest() for p in paths if p.exists()}


def _topology(n):
    top = md.Topology()
    ch = top.add_chain()
    for i in range(n):
        top.add_atom("AR", md.element.argon, top.add_residue("AR", ch, resSeq=i + 1))
    return top


def _traj(n_atoms=6, n_frames=10):
    rng = np.random.default_rng(4)
    xyz = rng.random((n_frames, n_atoms, 3)).astype(np.float32) * 2
    return md.Trajectory(xyz, _topology(n_atoms), time=0.1 * np.arange(n_frames),
                         unitcell_lengths=np.full((n_frames, 3), 2.0), unitcell_angles=np.full((n_frames, 3), 90.0))


@pytest.fixture()
def good_h5md(tmp_path):
    rng = np.random.default_rng(1)
    pos = rng.normal(size=(8, 3, 3)).astype(np.float32)
    path = tmp_path / "good.h5md"
    write_h5md(path, positions_nm=pos, time_ps=0.5 * np.arange(8), velocities_nm_per_ps=pos,
               box_nm=np.array([2.0, 2.0, 2.0]), species=["Ar", "Ar", "Ar"],
               observables={"total_energy": (np.arange(8.0), "kcal mol-1")},
               parameters={"timestep_ps": 0.004, "ensemble": "NVE"})
    return path


def test_describe_json(good_h5md, capsys):
    before = _digest([good_h5md])
    assert main(["describe", str(good_h5md), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["n_atoms"] == 3 and out["n_frames"] == 8
    assert out["time_span_ps"] == 3.5 and out["frame_spacing_ps"] == 0.5
    assert out["velocities"] == "stored" and out["box"] == "yes"
    term = out["energy_terms"][0]
    assert term["name"] == "total_energy" and term["unit"] == "kJ/mol" and term["role"] == "total"
    assert out["metadata"]["timestep_ps"] == 0.004 and out["metadata"]["ensemble"] == "NVE"
    # masses from element data: argon 39.948 u (IUPAC standard atomic weight, from memory)
    assert out["total_mass_amu"] == pytest.approx(3 * 39.948, rel=1e-4)
    assert _digest([good_h5md]) == before


def test_describe_text_and_overrides(good_h5md, capsys):
    assert main(["describe", str(good_h5md), "--timestep", "2", "--constraints", "0"]) == 0
    text = capsys.readouterr().out
    assert "atoms: 3" in text and "frames: 8" in text and "velocities: stored" in text
    assert "total_energy [kJ/mol]" in text
    assert "time step 2 fs stated" in text and "0 constraints stated" in text  # each value with its source


def test_describe_dcd_no_chatter_and_estimated_velocities(tmp_path, capfd):
    t = _traj()
    with contextlib.redirect_stdout(io.StringIO()):
        t.save_dcd(str(tmp_path / "r.dcd"))
        t[0].save_pdb(str(tmp_path / "r.pdb"))
    capfd.readouterr()
    assert main(["describe", str(tmp_path / "r.dcd"), "--top", str(tmp_path / "r.pdb"), "--json"]) == 0
    out, err = capfd.readouterr()
    d = json.loads(out)  # stdout holds only our JSON: no plugin chatter
    assert d["velocities"] == "estimated"
    assert any("central differences" in w for w in d["warnings"])


# --- bad input ------------------------------------------------------------------------------------


def _make_bad(kind, d):
    """Files for one bad-input case: (paths given to describe, expected error class, text in the message)."""
    if kind == "missing":
        return [d / "nothere.xtc"], errors.FileMissingError, "no such file"
    if kind == "empty":
        p = d / "empty.xtc"
        p.write_bytes(b"")
        return [p], errors.EmptyFileError, "empty"
    if kind == "unknown":
        p = d / "notes.xyzzy"
        p.write_text("hello\n")
        return [p], errors.UnknownFormatError, "no reader claims"
    if kind in ("truncated_dcd", "truncated_xtc", "other_atom_count"):
        t = _traj()
        ext = "xtc" if kind != "truncated_dcd" else "dcd"
        p = d / f"r.{ext}"
        top = d / "r.pdb"
        with contextlib.redirect_stdout(io.StringIO()):
            t.save(str(p))
            (t.atom_slice(range(4)) if kind == "other_atom_count" else t)[0].save_pdb(str(top))
        if kind == "other_atom_count":
            return [p, top], errors.TopologyMismatchError, "6 atoms"
        data = p.read_bytes()
        p.write_bytes(data[: len(data) - 37])
        return [p, top], errors.CorruptFileError, "truncated"
    if kind == "truncated_h5md":
        p = d / "cut.h5md"
        write_h5md(p, positions_nm=np.zeros((50, 20, 3)), time_ps=np.arange(50.0))
        p.write_bytes(p.read_bytes()[:3000])
        return [p], errors.CorruptFileError, "HDF5"
    if kind == "h5md_no_positions":
        p = d / "nopos.h5md"
        with h5py.File(p, "w") as f:
            f.create_group("h5md").attrs["version"] = [1, 1]
            f.create_group("particles/all").create_dataset("mass", data=[1.0, 2.0])
        return [p], errors.MissingDataError, "positions"
    if kind == "h5md_duplicated_time":
        p = d / "dup.h5md"
        # (a single repeated time is a restart, kept-later; a time axis repeating at every row is refused)
        write_h5md(p, positions_nm=np.zeros((4, 2, 3)), time_ps=np.array([0.0, 0.0, 1.0, 1.0]))
        return [p], errors.TimeAxisError, "unsorted"
    tables = {
        "table_missing_unit": ("time (ps),potential energy\n0,1\n1,2\n", errors.EnergyTableError, "no unit"),
        "table_unknown_unit": ("time (ps),potential (kJ/fortnight)\n0,1\n", errors.EnergyTableError, "fortnight"),
        "table_text_row": ("time (ps),potential (kJ/mol)\n0,1\n1,n/a?\n", errors.EnergyTableError, "line 3"),
        # a restart glued in is read (the later segment kept); time going back at every other row is refused
        "table_backwards": ("time (ps),potential (kJ/mol)\n0,1\n2,1\n1,1\n3,1\n2,1\n", errors.TimeAxisError,
                            "unsorted"),
        "table_duplicated": ("time (ps),potential (kJ/mol)\n0,1\n0,1\n1,1\n1,1\n", errors.TimeAxisError,
                             "unsorted"),
    }
    text, cls, match = tables[kind]
    p = d / f"{kind}.csv"
    p.write_text(text)
    return [p], cls, match


BAD = ["missing", "empty", "unknown", "truncated_dcd", "truncated_xtc", "other_atom_count", "truncated_h5md",
       "h5md_no_positions", "h5md_duplicated_time", "table_missing_unit", "table_unknown_unit",
       "table_text_row", "table_backwards", "table_duplicated"]


@pytest.mark.parametrize("kind", BAD)
def test_bad_input_typed_error(kind, tmp_path):
    paths, cls, match = _make_bad(kind, tmp_path)
    before = _digest(paths)
    with pytest.raises(cls, match=match) as info:
        open_run(paths)
    assert info.value.path is not None and info.value.path.name in {p.name for p in paths}
    assert _digest(paths) == before


@pytest.mark.parametrize("kind", BAD)
def test_bad_input_exit_2_one_line(kind, tmp_path, capfd):
    paths, _cls, match = _make_bad(kind, tmp_path)
    before = _digest(paths)
    listing = sorted(p.name for p in tmp_path.iterdir())
    capfd.readouterr()
    rc = main(["describe", *map(str, paths)])
    out, err = capfd.readouterr()
    assert rc == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    assert lines[0].startswith("phasewake describe: ")
    assert any(p.name in lines[0] for p in paths) and match.split()[0] in lines[0]
    assert _digest(paths) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == listing  # nothing written next to the input


def test_describe_group_option(tmp_path, capsys):
    path = tmp_path / "two.h5md"
    write_h5md(path, positions_nm=np.zeros((3, 2, 3)), time_ps=np.arange(3.0), group="solute")
    with h5py.File(path, "r+") as f:  # a second group with positions, written by hand in the spec layout
        p = f.create_group("particles/solvent/position")
        p.create_dataset("value", data=np.zeros((3, 5, 3))).attrs["unit"] = "nm"
        p["step"] = f["particles/solute/position/step"]
        p["time"] = f["particles/solute/position/time"]
    assert main(["describe", str(path), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["n_atoms"] == 2 and any("choose another" in w for w in d["warnings"])
    assert main(["describe", str(path), "--json", "--group", "solvent"]) == 0
    assert json.loads(capsys.readouterr().out)["n_atoms"] == 5
    assert main(["describe", str(path), "--group", "nothere"]) == 2


def test_user_states_missing_units(tmp_path, capsys):
    # a file silent about its units: an error naming it, unless the user states the unit
    path = tmp_path / "silent.h5md"
    with h5py.File(path, "w") as f:
        f.create_group("h5md").attrs["version"] = [1, 1]
        p = f.create_group("particles/all/position")
        p.create_dataset("value", data=np.ones((3, 2, 3)))  # 1 Angstrom, no unit attribute
        p.create_dataset("step", data=[0, 1, 2])
        p.create_dataset("time", data=[0.0, 1.0, 2.0])  # fs, no unit attribute
    assert main(["describe", str(path)]) == 2
    assert "no unit" in capsys.readouterr().err
    assert main(["describe", str(path), "--unit", "length=A", "--unit", "time=fs", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["time_end_ps"] == pytest.approx(2e-3)  # 2 fs = 2e-3 ps (SI prefixes)
    assert any("using 'A' as stated" in w for w in d["warnings"])
    run = open_run([path], units={"length": "A", "time": "fs"})
    np.testing.assert_allclose(run.frames.read_frame(0).positions_nm, 0.1)  # 1 Angstrom = 0.1 nm
    assert main(["describe", str(path), "--unit", "length=kcal/mol"]) == 2  # wrong dimension


def test_user_states_table_unit(tmp_path):
    p = tmp_path / "e.csv"
    p.write_text("time (ps),potential\n0,1\n1,2\n")
    run = open_run([p], units={"energy": "kcal/mol"})
    np.testing.assert_allclose(run.energies.by_role("potential").values, [4.184, 8.368])  # NIST SP 811
