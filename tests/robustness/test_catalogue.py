"""The catalogue of bad inputs: each gives one clear line that names the file and the
problem, exit code 2, no traceback, and the input file is unchanged (sha256 before and after).

Every case is run through the real command line (`phasewake describe` and, where it applies,
`phasewake audit`) in-process via main(argv), the way a user meets it.
"""

from __future__ import annotations

import hashlib
import shutil
from collections.abc import Callable
from pathlib import Path

import h5py
import numpy as np
import pytest

from phasewake.app.cli import main

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"
GOOD_H5MD = SAMPLES / "dimer_nve.h5md"
GOOD_DCD = SAMPLES / "dimer_nve.dcd"
GOOD_PDB = SAMPLES / "dimer_nve.pdb"
GOOD_CSV = SAMPLES / "dimer_nve_energy.csv"


def sha(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


# ---- makers: each writes a bad input into tmp and returns (argv files, words the message must contain)
def empty(tmp: Path):
    p = tmp / "empty.h5md"
    p.write_bytes(b"")
    return [p], ["empty"]


def missing(tmp: Path):
    return [tmp / "nowhere.h5md"], ["no such file", "not found", "does not exist"]


def unknown_format(tmp: Path):
    p = tmp / "notes.xyzw"
    p.write_text("hello\n")
    return [p], ["format", "supported"]


def truncated_h5md(tmp: Path):
    p = tmp / "truncated.h5md"
    data = GOOD_H5MD.read_bytes()
    p.write_bytes(data[: len(data) // 3])
    return [p], ["h5md", "hdf5", "truncated", "corrupt", "read"]


def bitflipped_h5md(tmp: Path):
    p = tmp / "flipped.h5md"
    data = bytearray(GOOD_H5MD.read_bytes())
    data[0:8] = b"\x00" * 8  # the HDF5 signature
    p.write_bytes(bytes(data))
    return [p], ["format", "hdf5", "supported", "corrupt"]


def truncated_dcd(tmp: Path):
    p = tmp / "truncated.dcd"
    data = GOOD_DCD.read_bytes()
    p.write_bytes(data[: len(data) // 2 + 7])
    shutil.copy(GOOD_PDB, tmp / "top.pdb")
    return [p, tmp / "top.pdb"], ["dcd", "truncated", "corrupt", "frame", "read"]


def wrong_suffix(tmp: Path):
    p = tmp / "really_csv.dcd"
    shutil.copy(GOOD_CSV, p)
    shutil.copy(GOOD_PDB, tmp / "top.pdb")
    return [p, tmp / "top.pdb"], ["dcd", "read", "corrupt", "format"]


def topology_mismatch(tmp: Path):
    import mdtraj as md

    t = md.load(str(GOOD_PDB))
    small = t.atom_slice(np.arange(t.n_atoms - 3))
    top = tmp / "fewer_atoms.pdb"
    small.save_pdb(str(top))
    shutil.copy(GOOD_DCD, tmp / "run.dcd")
    return [tmp / "run.dcd", top], ["atom"]


def _edited_positions(tmp: Path, name: str, edit) -> Path:
    """A copy of the good H5MD in ``tmp`` with ``edit(group)`` applied to each particle group that holds
    positions."""
    p = tmp / name
    shutil.copy(GOOD_H5MD, p)
    with h5py.File(p, "r+") as f:
        for g in f["particles"].values():
            if "position" in g:
                edit(g)
    return p


def h5md_without_positions(tmp: Path):
    def drop(g):
        del g["position"]

    return [_edited_positions(tmp, "nopos.h5md", drop)], ["position"]


def h5md_unknown_unit(tmp: Path):
    def furlong(g):
        g["position/value"].attrs["unit"] = "furlong"

    return [_edited_positions(tmp, "badunit.h5md", furlong)], ["furlong"]


def h5md_misshaped(tmp: Path):
    def misshape(g):
        unit = g["position/value"].attrs.get("unit", "nm")
        del g["position/value"]
        g["position"].create_dataset("value", data=np.zeros((5, 7), np.float32)).attrs["unit"] = unit

    return [_edited_positions(tmp, "misshaped.h5md", misshape)], ["shape"]


def table(tmp: Path, text: str, name: str = "energy.csv"):
    p = tmp / name
    p.write_text(text)
    shutil.copy(GOOD_DCD, tmp / "run.dcd")
    shutil.copy(GOOD_PDB, tmp / "top.pdb")
    return [tmp / "run.dcd", tmp / "top.pdb", p]


def table_missing_unit(tmp: Path):
    return table(tmp, "time (ps),potential\n0,1\n1,2\n"), ["unit", "potential"]


def table_unknown_unit(tmp: Path):
    return table(tmp, "time (ps),potential (furlongs)\n0,1\n1,2\n"), ["furlongs"]


def table_text_in_numbers(tmp: Path):
    return table(tmp, "time (ps),potential (kJ/mol)\n0,1\n1,abc\n"), ["line 3", "abc"]


def table_ragged(tmp: Path):
    return table(tmp, "time (ps),potential (kJ/mol),kinetic (kJ/mol)\n0,1,2\n1,2\n"), ["line 3"]


def table_duplicate_headers(tmp: Path):
    return table(tmp, "time (ps),potential (kJ/mol),potential (kJ/mol)\n0,1,2\n1,2,3\n"), ["duplicate"]


# (one step back or one repeated time is a restart glued in: read, the later segment kept; a time axis
# going back at every other row is unsorted and refused)
def table_time_reversed(tmp: Path):
    return table(tmp, "time (ps),potential (kJ/mol)\n0,1\n2,2\n1,3\n3,1\n2,2\n"), ["time", "unsorted"]


def table_time_duplicated(tmp: Path):
    return table(tmp, "time (ps),potential (kJ/mol)\n0,1\n0,2\n1,3\n1,1\n"), ["time", "unsorted"]


CASES: dict[str, Callable] = {f.__name__: f for f in (
    empty, missing, unknown_format, truncated_h5md, bitflipped_h5md, truncated_dcd, wrong_suffix,
    topology_mismatch, h5md_without_positions, h5md_unknown_unit, h5md_misshaped, table_missing_unit,
    table_unknown_unit, table_text_in_numbers, table_ragged, table_duplicate_headers, table_time_reversed,
    table_time_duplicated,
)}


@pytest.mark.parametrize("name", list(CASES))
def test_bad_input_gives_one_clear_line(name, tmp_path, capsys):
    files, words = CASES[name](tmp_path)
    before = {p: sha(p) for p in files if p.exists()}
    code = main(["describe", *map(str, files)])
    out, err = capsys.readouterr()
    assert code == 2, (name, out, err)
    assert "Traceback" not in err and "Traceback" not in out
    line = err.strip()
    assert line.count("\n") <= 3, f"{name}: expected a short message, got:\n{err}"
    named = [p for p in files if p.name in line]
    assert named, f"{name}: the message must name the file: {line}"
    assert any(w.lower() in line.lower() for w in words), f"{name}: message lacks {words}: {line}"
    after = {p: sha(p) for p in before}
    assert before == after, f"{name}: the input was modified"
    leftovers = sorted(p.name for p in tmp_path.iterdir() if p.name.startswith("."))
    assert not leftovers, f"{name}: files written beside the input: {leftovers}"


def test_nonfinite_energies_are_reported_by_audit(tmp_path, capsys):
    files = table(tmp_path, "time (ps),potential (kJ/mol),kinetic (kJ/mol)\n"
                  + "".join(f"{i * 0.01},{-100 + (np.nan if i == 50 else 0)},{50 + 0.01 * (i % 7)}\n"
                            for i in range(200)))
    code = main(["audit", *map(str, files)])
    out, err = capsys.readouterr()
    assert code in (1, 2), (out, err)
    assert "Traceback" not in err
    text = (out + err).lower()
    assert "nan" in text or "non-finite" in text or "not finite" in text


def test_bad_coordinate_spec_exit_2(capsys):
    code = main(["coords", str(GOOD_H5MD), "--coordinate", "distanse(0, 1)"])
    _, err = capsys.readouterr()
    assert code == 2 and "distanse" in err and "Traceback" not in err
    code = main(["coords", str(GOOD_H5MD), "--coordinate", "distance(0, 100000)"])
    _, err = capsys.readouterr()
    assert code == 2 and "100000" in err


def test_too_short_for_an_analysis_says_the_minimum(tmp_path, capsys):
    files = table(tmp_path, "time (ps),potential (kJ/mol),kinetic (kJ/mol)\n0,1,2\n0.01,1.1,2.1\n")
    code = main(["memory", *map(str, files), "--series", "potential"])
    _, err = capsys.readouterr()
    assert code == 2 and "Traceback" not in err
    assert "at least" in err.lower() or "minimum" in err.lower() or "too short" in err.lower(), err
