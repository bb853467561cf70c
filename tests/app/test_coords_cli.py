"""``phasewake coords``: the table it writes (CSV and H5MD) against mdtraj and scikit-learn on the same
frames, the momentum columns against the analytic reduced mass, and exit code 2 with a message
pointing at the problem for bad specifications.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json

import h5py
import mdtraj as md
import numpy as np
import pytest
from sklearn.decomposition import PCA

from phasewake.app.cli import main
from phasewake.core.readers.h5md import write_h5md


@pytest.fixture(scope="module")
def run_file(tmp_path_factory):
    rng = np.random.default_rng(0)
    top = md.Topology()
    chain = top.add_chain()
    res = top.add_residue("DIM", chain)
    a = top.add_atom("D1", md.element.argon, res)
    b = top.add_atom("D2", md.element.carbon, res)
    top.add_bond(a, b)
    for _k in range(12):
        r = top.add_residue("AR", chain)
        top.add_atom("AR", md.element.argon, r)
    n = 300
    pos = rng.uniform(0, 2.0, size=(n, 14, 3)).astype(np.float32)
    vel = rng.normal(size=(n, 14, 3)).astype(np.float32)
    masses = np.array([39.948, 12.011] + [39.948] * 12)
    path = tmp_path_factory.mktemp("coords") / "run.h5md"
    write_h5md(path, positions_nm=pos, time_ps=np.arange(n) * 0.02, velocities_nm_per_ps=vel,
               box_nm=np.array([2.0, 2.0, 2.0]), masses_amu=masses, topology=top)
    return path, pos, vel, masses, top


def _read_csv(text):
    rows = [r for r in csv.reader(io.StringIO(text)) if r and not r[0].startswith("#")]
    header, data = rows[0], np.array(rows[1:], dtype=float)
    return header, data


@pytest.mark.slow  # measured 1.1 s of CPU
def test_csv_table_matches_mdtraj(run_file, capsys):
    path, pos, _vel, masses, top = run_file
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    rc = main(["coords", str(path), "-c", "distance(0, 1)", "-c", "dihedral(0, 1, 2, 3)", "--momentum"])
    assert rc == 0
    header, data = _read_csv(capsys.readouterr().out)
    assert header[0] == "time [ps]" and header[1].endswith("[nm]") and "m_eff" in header[3]
    traj = md.Trajectory(pos, top, unitcell_lengths=np.full((len(pos), 3), 2.0, np.float32),
                         unitcell_angles=np.full((len(pos), 3), 90.0, np.float32))
    np.testing.assert_allclose(data[:, 0], np.arange(len(pos)) * 0.02, atol=1e-9)
    np.testing.assert_allclose(data[:, 1], md.compute_distances(traj, [[0, 1]], periodic=True)[:, 0], atol=1e-5)
    # random geometries include near-collinear ones where mdtraj's float32 dihedral loses digits
    np.testing.assert_allclose(data[:, 5], md.compute_dihedrals(traj, [[0, 1, 2, 3]], periodic=True)[:, 0], atol=1e-3)
    # effective mass of a distance = reduced mass (REFERENCES.md 7.3)
    np.testing.assert_allclose(data[:, 3], masses[0] * masses[1] / (masses[0] + masses[1]), rtol=1e-7)
    np.testing.assert_allclose(data[:, 4], data[:, 3] * data[:, 2], rtol=1e-6)
    assert hashlib.sha256(path.read_bytes()).hexdigest() == digest  # input untouched


def test_h5md_output_and_pca(run_file, tmp_path, capsys):
    path, pos, _vel, masses, _top = run_file
    out = tmp_path / "table.h5md"
    rc = main(["coords", str(path), "-c", 'distance("name D1", "name D2")', "--pca", "3", "--pca-group", "0-5",
               "--no-fit", "--momentum", "-o", str(out), "--json"])
    assert rc == 0
    summary = json.loads(capsys.readouterr().out)
    # scikit-learn PCA of the same mass-weighted coordinates (no fit)
    y = (pos[:, :6].astype(np.float64) * np.sqrt(masses[:6])[None, :, None]).reshape(len(pos), -1)
    sk = PCA(3).fit(y)
    np.testing.assert_allclose(summary["pca"]["eigenvalues"], sk.explained_variance_, rtol=1e-5)
    with h5py.File(out, "r") as f:
        assert list(f["h5md"].attrs["version"]) == [1, 1]
        obs = f["observables"]
        names = list(obs)
        assert len(names) == len(summary["columns"])
        first = next(obs[k] for k in names if obs[k].attrs["label"] == summary["columns"][0]["name"])
        assert first["value"].attrs["unit"] == "nm" and first["time"].attrs["unit"] == "ps"
        d = md.compute_distances(md.Trajectory(pos, None, unitcell_lengths=np.full((len(pos), 3), 2.0, np.float32),
                                               unitcell_angles=np.full((len(pos), 3), 90.0, np.float32)),
                                 [[0, 1]], periodic=True)[:, 0]
        np.testing.assert_allclose(first["value"][()], d, atol=1e-5)
        pc1 = obs["pc1"]["value"][()]
        np.testing.assert_allclose(np.abs(pc1), np.abs(sk.transform(y)[:, 0]), atol=1e-4)


@pytest.mark.parametrize(
    "spec, words, caret",
    [
        ("distnce(0, 1)", "unknown function 'distnce'", 0),
        ("distance(0, 99)", "atom index 99 is out of range: the run has 14 atoms", 12),
        ('rg("resname LIG")', "selects no atoms", 3),
        ("angle(0, 1", "expected ',' or ')'", 10),
    ],
)
def test_bad_specs_exit_2_with_a_pointer(run_file, capsys, spec, words, caret):
    path = run_file[0]
    rc = main(["coords", str(path), "-c", spec])
    assert rc == 2
    err = capsys.readouterr().err
    assert words in err and "Traceback" not in err
    lines = err.rstrip("\n").splitlines()
    assert lines[-2].strip() == spec and lines[-1].index("^") - 2 == caret


def test_refuses_to_write_over_its_input(run_file, capsys):
    path = run_file[0]
    rc = main(["coords", str(path), "-c", "x(0)", "-o", str(path)])
    assert rc == 2
    assert "input file" in capsys.readouterr().err


def test_fast_pca_and_csv_file(run_file, tmp_path, capsys):
    path, pos, _vel, masses, _top = run_file
    out = tmp_path / "pcs.csv"
    rc = main(["coords", str(path), "--pca", "2", "--pca-group", "[0-5]", "--no-fit", "--pca-fast",
               "--pca-passes", "4", "-o", str(out)])
    assert rc == 0
    text = capsys.readouterr().out
    assert "pc1: eigenvalue" in text and "randomized" in text
    header, data = _read_csv(out.read_text())
    assert header == ["time [ps]", "pc1 [nm amu^1/2]", "pc2 [nm amu^1/2]"]
    y = (pos[:, :6].astype(np.float64) * np.sqrt(masses[:6])[None, :, None]).reshape(len(pos), -1)
    sk = PCA(2).fit(y)  # scikit-learn on the same coordinates
    np.testing.assert_allclose(np.var(data[:, 1:], axis=0, ddof=1), sk.explained_variance_, rtol=1e-3)
    rc = main(["coords", str(path), "--pca", "2", "--pca-group", "[0-5", "-o", str(out)])
    assert rc == 2 and "--pca-group" in capsys.readouterr().err
