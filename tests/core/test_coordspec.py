"""The coordinate specification language: parsing, error positions, resolution against a run.

Sources: the grammar is our own (documented in phasewake.core.analyses.coordspec); atom queries are checked
against mdtraj.Topology.select itself (reference library).
"""

from __future__ import annotations

import mdtraj as md
import numpy as np
import pytest

from phasewake.core.analyses.coordspec import GroupArg, IntArg, PathArg, describe_functions, parse, resolve
from phasewake.core.errors import CoordinateSpecError


def _topology() -> md.Topology:
    """A dimer (residue DIM, atoms D1 D2) in 12 argon atoms (residues AR)."""
    top = md.Topology()
    chain = top.add_chain()
    dim = top.add_residue("DIM", chain, resSeq=1)
    a = top.add_atom("D1", md.element.argon, dim)
    b = top.add_atom("D2", md.element.argon, dim)
    top.add_bond(a, b)
    for k in range(12):
        res = top.add_residue("AR", chain, resSeq=k + 2)
        top.add_atom("AR", md.element.argon, res)
    return top


def test_parse_functions_and_groups():
    d = parse("distance(3, 17)")
    assert d.function == "distance"
    assert [a.indices for a in d.args] == [(3,), (17,)]
    d = parse('com_distance([0-2, 7], "resname DIM")')
    assert d.args[0] == GroupArg(((0, 2), (7, 7)), None, 13, 21)
    assert d.args[0].indices == (0, 1, 2, 7)
    assert d.args[1].query == "resname DIM"
    d = parse("  pc( 2 , 0-4 ) ")
    assert isinstance(d.args[0], IntArg) and d.args[0].value == 2
    assert d.args[1].indices == (0, 1, 2, 3, 4)
    d = parse("rmsd(some/dir/ref-1.pdb)")
    assert isinstance(d.args[0], PathArg) and d.args[0].path == "some/dir/ref-1.pdb"
    d = parse("rmsd('my ref.pdb', [0-9])")
    assert d.args[0].path == "my ref.pdb"
    assert len(describe_functions()) == 10


@pytest.mark.parametrize(
    "spec, position, words",
    [
        ("distnce(0, 1)", 0, "unknown function"),  # points at the name
        ("distance(0 1)", 11, "expected ','"),
        ("distance(0, a)", 12, "quoted"),
        ("distance(0, 1", 13, "end of the text"),
        ("x(3-)", 4, "atom index"),
        ("rg([1, 2, x])", 10, "digit"),
        ("angle(0, 1)", 10, "needs 3"),
        ("dihedral(0, 1, 2, 3, 4)", 21, "at most 4"),
        ('distance("name CA, 1)', 9, "unterminated"),
        ("distance(0, 1) extra", 15, "after the closing"),
        ("rg(9-3)", 3, "backwards"),
        ("distance(0-3, 4)", 9, "single atom"),
        ("pc(0)", 3, "counted from 1"),
        ("", 0, "empty"),
    ],
)
def test_parse_errors_point_at_the_offending_character(spec, position, words):
    with pytest.raises(CoordinateSpecError) as info:
        parse(spec)
    err = info.value
    assert err.position == position, str(err)
    assert err.spec == spec
    assert words in str(err)
    # the caret line sits under the offending character
    if spec:
        lines = str(err).splitlines()
        assert lines[-1].index("^") - 2 == position


def test_unknown_function_suggests_close_name():
    with pytest.raises(CoordinateSpecError, match="did you mean 'dihedral'"):
        parse("dihedrl(0, 1, 2, 3)")


def test_resolve_checks_indices_against_the_run():
    with pytest.raises(CoordinateSpecError) as info:
        resolve(parse("distance(0, 14)"), n_atoms=14)
    assert info.value.position == 12 and "out of range" in str(info.value) and "14 atoms" in str(info.value)
    with pytest.raises(CoordinateSpecError, match="must differ"):
        resolve("distance(2, 2)", n_atoms=5)
    with pytest.raises(CoordinateSpecError, match="share atoms"):
        resolve("com_distance([0-3], [3-5])", n_atoms=8)
    r = resolve("com_distance([0-3], [4, 6])", n_atoms=8)
    assert [g.tolist() for g in r.groups] == [[0, 1, 2, 3], [4, 6]]


def test_queries_are_mdtraj_selections():
    top = _topology()
    r = resolve('com_distance("resname DIM", "resname AR and resid 2 to 5")', n_atoms=top.n_atoms, topology=top)
    # reference: mdtraj's own selection language
    assert r.groups[0].tolist() == top.select("resname DIM").tolist()
    assert r.groups[1].tolist() == top.select("resname AR and resid 2 to 5").tolist()
    r = resolve('distance("name D1", "name D2")', n_atoms=top.n_atoms, topology=top)
    assert [int(g[0]) for g in r.groups] == [0, 1]
    assert "D1" in r.label and "DIM" in r.label


def test_query_errors():
    top = _topology()
    with pytest.raises(CoordinateSpecError) as info:
        resolve('rg("resname LIG")', n_atoms=top.n_atoms, topology=top)
    assert "selects no atoms" in str(info.value) and info.value.position == 3
    with pytest.raises(CoordinateSpecError, match="selects 12 atoms; one is needed"):
        resolve('x("resname AR")', n_atoms=top.n_atoms, topology=top)
    with pytest.raises(CoordinateSpecError, match="mdtraj could not read"):
        resolve('rg("resname and and")', n_atoms=top.n_atoms, topology=top)
    with pytest.raises(CoordinateSpecError, match="needs a topology"):
        resolve('rg("all")', n_atoms=4)


def test_rmsd_reference(tmp_path):
    top = _topology()
    xyz = np.random.default_rng(0).normal(size=(1, top.n_atoms, 3)).astype(np.float32)
    ref = tmp_path / "ref.pdb"
    md.Trajectory(xyz, top).save_pdb(str(ref))
    r = resolve(f"rmsd({ref}, 0-5)", n_atoms=top.n_atoms, topology=top)
    # PDB stores 3 decimals in Angstrom
    np.testing.assert_allclose(r.reference_nm, xyz[0, :6], atol=1e-4)
    r = resolve("rmsd(ref.pdb)", n_atoms=top.n_atoms, topology=top, base_dir=tmp_path)
    assert r.groups[0].size == top.n_atoms
    with pytest.raises(CoordinateSpecError, match="not found"):
        resolve("rmsd(missing.pdb)", n_atoms=top.n_atoms)
    with pytest.raises(CoordinateSpecError, match="reference has 14 atoms"):
        resolve(f"rmsd({ref})", n_atoms=20)
