"""LAMMPS dumps and data files read by our own readers (core/readers/lammps_dump.py, lammps_data.py).

Outside references:
- tests/data/lammps_small/: a real LAMMPS 29 Sep 2021 run (in.tri, Debian's lmp) of 60 Lennard-Jones
  atoms in a triclinic box, `units real`, velocity Verlet: its log.lammps (thermo KinEng at each dumped
  step, the engine's own numbers), its dump (x y z, ix iy iz, xu yu zu, xs ys zs, vx vy vz written by
  LAMMPS itself; an appended continuation repeating step 150 with other columns, unsorted rows) and its
  write_data file (Masses, 2 Bonds, Atoms # full).
- LAMMPS units table (from the LAMMPS units documentation): real = g/mol, Angstrom, fs,
  Angstrom/fs, kcal/mol with mvv2e = 48.88821291^2; metal = g/mol, Angstrom, ps, Angstrom/ps.
- Small dumps written here by hand in the layout LAMMPS writes (marked as such).
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from phasewake.app.cli import main
from phasewake.core.errors import CorruptFileError, MissingDataError, TopologyMismatchError
from phasewake.core.readers import open_run
from phasewake.core.readers.lammps_data import read_data
from phasewake.core.readers.lammps_dump import LammpsDumpFrames

DATA = Path(__file__).resolve().parents[1] / "data" / "lammps_small"
DUMP = DATA / "tri.lammpstrj"
DATAFILE = DATA / "tri.data"
LOG = DATA / "log.lammps"
KCAL = 4.184  # kJ per kcal (thermochemical calorie, NIST SP 811)


def _thermo_kineng() -> dict[int, float]:
    """Step -> KinEng (kcal/mol) as LAMMPS printed it in its log (the engine's own numbers)."""
    out: dict[int, float] = {}
    cols: list[str] | None = None
    for line in LOG.read_text().splitlines():
        f = line.split()
        if f[:1] == ["Step"]:
            cols = f if "KinEng" in f else None  # the minimisation's block has none
            continue
        if cols and f and re.fullmatch(r"-?\d+", f[0]) and len(f) == len(cols):
            out[int(f[0])] = float(f[cols.index("KinEng")])
        elif f[:2] == ["Loop", "time"]:
            cols = None
    return out


def _all(run, **kw):
    chunks = list(run.frames.iter_chunks(**kw))
    pos = np.concatenate([c.positions_nm for c in chunks])
    vel = None if chunks[0].velocities_nm_per_ps is None else np.concatenate([c.velocities_nm_per_ps for c in chunks])
    return pos, vel, np.concatenate([c.box_nm for c in chunks]), np.concatenate([c.time_ps for c in chunks])


def _real_run(**kw):
    return open_run([DUMP, DATAFILE], units_style="real", timestep_ps=0.002, **kw)


def test_real_dump_kinetic_energy_equals_lammps_thermo():
    # Reference: LAMMPS's thermo KinEng at each dumped step (log.lammps); KE = 1/2 mvv2e sum m v^2 with
    # full-step velocities (v at the step of x). kcal/mol -> kJ/mol x 4.184 (NIST SP 811). The dump writes
    # 6 digits (%g), hence rtol 2e-5.
    run = _real_run()
    thermo = _thermo_kineng()
    assert run.n_atoms == 60
    assert list(run.frames.steps) == [0, 50, 100, 150, 200, 250]  # step 150 is in the file twice
    _, vel, _, _ = _all(run)
    ke = 0.5 * np.einsum("fai,fai,a->f", vel.astype(np.float64), vel.astype(np.float64), run.masses_amu)
    expected = np.array([thermo[int(s)] for s in run.frames.steps]) * KCAL
    np.testing.assert_allclose(ke, expected, rtol=2e-5)


def test_real_dump_time_is_step_times_timestep_and_masses_from_the_dump_or_data():
    # Reference: in.tri sets timestep 2.0 (fs in real units) and dumps every 50 steps; masses 39.948 and
    # 20.1797 g/mol (in.tri, the data file's Masses section).
    run = _real_run()
    np.testing.assert_allclose(run.time_ps, np.arange(6) * 50 * 0.002)
    assert set(np.round(run.masses_amu, 4)) == {39.948, 20.1797}
    assert run.metadata.extra["time_from"].startswith("step x time step")
    assert any("restarts at step 150" in w for w in run.warnings)
    assert run.metadata.extra["overlaps"]


def test_unwrapped_positions_agree_with_lammps_xu_for_images_and_scaled_columns(tmp_path):
    # Reference: LAMMPS's own unwrapped xu yu zu (and its box) in the same dump. Dumps holding only
    # x y z + ix iy iz, or only xs ys zs, are cut out of the real one (columns removed, nothing else).
    text = DUMP.read_text()
    lines = text.splitlines()
    # the appended continuation (from the second "step 150") has no scaled columns: the first run's frames
    first_run = text[: text.index("ITEM: TIMESTEP\n150", text.index("ITEM: TIMESTEP\n150") + 5)].splitlines()

    def keep_columns(names: tuple[str, ...], out: Path, lines: list[str]) -> Path:
        result = []
        cols: list[str] | None = None
        for line in lines:
            if line.startswith("ITEM: ATOMS"):
                cols = line.split()[2:]
                result.append("ITEM: ATOMS " + " ".join(c for c in cols if c in names))
            elif line.startswith("ITEM:"):
                cols = None if not line.startswith("ITEM: ATOMS") else cols
                result.append(line)
            elif cols is not None:
                f = line.split()
                result.append(" ".join(v for c, v in zip(cols, f) if c in names))
            else:
                result.append(line)
        out.write_text("\n".join(result) + "\n")
        return out

    ref = _all(_real_run())[0]
    for names in (("id", "type", "x", "y", "z", "ix", "iy", "iz", "vx", "vy", "vz"),
                  ("id", "type", "xs", "ys", "zs", "vx", "vy", "vz")):
        scaled = names[2] == "xs"
        p = keep_columns(names, tmp_path / f"{names[2]}.lammpstrj", first_run if scaled else lines)
        run = open_run([p, DATAFILE], units_style="real", timestep_ps=0.002)
        got = _all(run)[0]
        if names[2] == "x":
            # 6 digits of x, ix and the box against 6 digits of xu: 1e-4 Angstrom
            np.testing.assert_allclose(got, ref, atol=1e-5)
        else:
            # scaled coordinates wrap, so compare inside the box: wrapped xu against the scaled positions
            box = run.frames.read_frame(0).box_nm[0]
            d = (got - ref[: got.shape[0]]) @ np.linalg.inv(box)
            np.testing.assert_allclose(d - np.round(d), 0, atol=1e-5)


def test_triclinic_box_from_bounds():
    # Reference: in.tri's `region box prism 0 18 0 17 0 16 3.0 -2.0 1.5` (Angstrom): edges a=(18,0,0),
    # b=(3,17,0), c=(-2,1.5,16); LAMMPS wrote the bounding box and tilts, which the reader turns back.
    run = _real_run()
    box = run.frames.read_frame(0).box_nm[0]
    np.testing.assert_allclose(box, np.array([[18, 0, 0], [3, 17, 0], [-2, 1.5, 16]]) * 0.1, atol=1e-12)


def test_data_file_as_topology():
    # Reference: tri.data written by LAMMPS (write_data): 60 atoms, Masses 1 39.948 / 2 20.1797, Bonds
    # "1 1 1 2" and "2 1 3 4", Atoms # full.
    d = read_data(DATAFILE)
    assert d.n_atoms == 60 and d.atom_style == "full" and d.header_step == 250
    assert d.type_masses == {1: 39.948, 2: 20.1797}
    np.testing.assert_array_equal(d.bonds, [[0, 1], [2, 3]])
    run = _real_run()
    assert run.topology.n_bonds == 2
    symbols = {a.element.symbol for a in run.topology.atoms}
    assert symbols == {"Ar", "Ne"}  # g/mol masses of argon and neon


def test_data_file_masses_used_when_the_dump_has_none(tmp_path):
    # The continuation part of the real dump has no mass column: masses come from the data file.
    text = DUMP.read_text()
    second = text[text.index("ITEM: TIMESTEP\n150\nITEM: NUMBER OF ATOMS\n60\nITEM: BOX BOUNDS xy xz yz pp pp pp",
                             text.index("ITEM: TIMESTEP\n150") + 5):]
    p = tmp_path / "part2.lammpstrj"
    p.write_text(second)
    run = open_run([p, DATAFILE], units_style="real", timestep_ps=0.002)
    assert run.metadata.sources["masses"].startswith("Masses of tri.data")
    thermo = _thermo_kineng()
    _, vel, _, _ = _all(run)
    ke = 0.5 * np.einsum("fai,fai,a->f", vel.astype(np.float64), vel.astype(np.float64), run.masses_amu)
    np.testing.assert_allclose(ke, np.array([thermo[s] for s in (150, 200, 250)]) * KCAL, rtol=2e-5)


HAND = """ITEM: TIMESTEP
{step}
ITEM: NUMBER OF ATOMS
3
ITEM: BOX BOUNDS pp pp pp
0.0 10.0
0.0 20.0
-5.0 5.0
ITEM: ATOMS id type x y z vx vy vz mass
3 2 1.0 2.0 3.0 0.5 0.0 0.0 16.0
1 1 4.0 5.0 -1.0 0.0 1.0 0.0 1.0
2 1 7.0 8.0 0.5 0.0 0.0 2.0 1.0
"""


def _hand(tmp_path: Path, steps=(0, 10), name="hand.lammpstrj") -> Path:
    p = tmp_path / name
    p.write_text("".join(HAND.format(step=s) for s in steps))
    return p


@pytest.mark.parametrize(("style", "length", "velocity"), [("metal", 0.1, 0.1), ("real", 0.1, 100.0),
                                                           ("lj", 1.0, 1.0)])
def test_units_by_style(tmp_path, style, length, velocity):
    # Hand-written dump in the layout LAMMPS writes; factors from the LAMMPS units documentation:
    # metal Angstrom -> 0.1 nm, Angstrom/ps -> 0.1 nm/ps; real Angstrom/fs -> 100 nm/ps; lj unchanged.
    run = open_run([_hand(tmp_path)], units_style=style)
    pos, vel, box, t = _all(run)
    # atoms sorted by id: id 1 is the second row
    np.testing.assert_allclose(pos[0, 0], np.array([4.0, 5.0, -1.0]) * length, rtol=1e-6)
    np.testing.assert_allclose(vel[0, 1], np.array([0.0, 0.0, 2.0]) * velocity, rtol=1e-6)
    np.testing.assert_allclose(box[0], np.diag([10.0, 20.0, 10.0]) * length)
    np.testing.assert_array_equal(run.masses_amu, [1.0, 1.0, 16.0])
    np.testing.assert_array_equal(t, [0, 10])  # no time step known: the step number, said so
    assert any("time is the step number" in w for w in run.warnings)
    assert ("reduced" in " ".join(run.warnings)) == (style == "lj")


def test_units_and_time_items_of_the_dump(tmp_path):
    # dump_modify units yes / time yes write ITEM: UNITS and ITEM: TIME before ITEM: TIMESTEP (LAMMPS dump_modify).
    p = tmp_path / "timed.lammpstrj"
    p.write_text("".join(f"ITEM: UNITS\nmetal\nITEM: TIME\n{0.001 * s}\n" + HAND.format(step=s)
                         for s in (0, 10, 20)))
    run = open_run([p])
    assert run.metadata.units_style == "lammps metal"
    np.testing.assert_allclose(run.time_ps, [0.0, 0.01, 0.02])


def test_chunks_and_atom_selection_agree(tmp_path):
    run = _real_run()
    pos, vel, _, _ = _all(run)
    pos1, vel1, _, _ = _all(run, chunk_frames=1, atom_indices=[5, 0, 59])
    np.testing.assert_array_equal(pos1, pos[:, [5, 0, 59]])
    np.testing.assert_array_equal(vel1, vel[:, [5, 0, 59]])
    fr = run.frames.read_frame(-1)
    np.testing.assert_array_equal(fr.positions_nm[0], pos[-1])


def test_opening_reads_no_frame_beyond_the_first(monkeypatch):
    calls = []
    orig = LammpsDumpFrames.read_rows

    def counting(self, k):
        calls.append(k)
        return orig(self, k)

    monkeypatch.setattr(LammpsDumpFrames, "read_rows", counting)
    _real_run()
    assert calls == [0]


def test_pdb_topology_with_a_dump(tmp_path):
    # A topology file read by mdtraj still serves a dump (element masses).
    pdb = tmp_path / "three.pdb"
    pdb.write_text("".join(f"HETATM{i:5d}  {el:<3} MOL A   1    {0:8.3f}{0:8.3f}{0:8.3f}  1.00  0.00          {el:>2}\n"
                           for i, el in ((1, "H"), (2, "H"), (3, "O"))) + "END\n")
    p = _hand(tmp_path)
    p.write_text(p.read_text().replace(" mass", "").replace(" 16.0\n", "\n").replace(" 1.0\n", "\n"))
    run = open_run([p, pdb], units_style="real")
    np.testing.assert_allclose(run.masses_amu, [1.008, 1.008, 15.999], atol=2e-3)  # element masses
    assert run.metadata.sources["topology"] == "three.pdb"


# ---- bad input: one line, exit 2, the file named


def _cli(capsys, *argv) -> tuple[int, str]:
    code = main(["describe", *map(str, argv)])
    err = capsys.readouterr().err
    return code, err


def test_dump_without_id_is_one_line(tmp_path, capsys):
    p = tmp_path / "noid.lammpstrj"
    p.write_text(HAND.format(step=0).replace("ATOMS id type", "ATOMS type").replace("\n3 2 ", "\n2 ")
                 .replace("\n1 1 ", "\n1 ").replace("\n2 1 ", "\n1 "))
    code, err = _cli(capsys, p, "--timestep", "1")
    assert code == 2 and "noid.lammpstrj" in err and "'id'" in err
    assert err.count("\n") == 1 and "Traceback" not in err
    with pytest.raises(MissingDataError):
        open_run([p], units_style="real")


@pytest.mark.parametrize("cut", ["inside the last frame", "inside the last row", "inside the header"])
def test_truncated_dump_is_an_error_naming_the_frame(tmp_path, capsys, cut):
    # A file cut short (a lammpstrj cut inside its last frame is detected, as DCD/XTC/TRR are).
    data = DUMP.read_bytes()
    last = data.rindex(b"ITEM: TIMESTEP")
    if cut == "inside the last frame":
        end = data.index(b"\n", last + 2000) + 1  # a whole number of rows, some missing
    elif cut == "inside the last row":
        end = len(data) - 20
    else:
        end = last + 30
    p = tmp_path / "cut.lammpstrj"
    p.write_bytes(data[:end])
    before = p.read_bytes()
    with pytest.raises(CorruptFileError, match="frame 6"):
        open_run([p, DATAFILE], units_style="real")
    code, err = _cli(capsys, p, DATAFILE)
    assert code == 2 and "cut.lammpstrj" in err and ("truncated" in err or "cut short" in err)
    assert err.count("\n") == 1 and "Traceback" not in err
    assert p.read_bytes() == before


def test_unknown_units_style_is_one_line(tmp_path, capsys):
    code, err = _cli(capsys, _hand(tmp_path))
    assert code == 2 and "units style" in err and "hand.lammpstrj" in err and err.count("\n") == 1


def test_atom_count_claim_beyond_the_file_is_refused_before_allocating(tmp_path):
    p = tmp_path / "huge.lammpstrj"
    p.write_text(HAND.format(step=0).replace("NUMBER OF ATOMS\n3", "NUMBER OF ATOMS\n2000000000"))
    with pytest.raises(CorruptFileError, match="claims 2000000000 atoms"):
        open_run([p], units_style="real")


def test_data_file_with_another_atom_count_names_both(tmp_path):
    with pytest.raises(TopologyMismatchError, match="tri.data"):
        open_run([_hand(tmp_path), DATAFILE], units_style="real")


def test_data_file_alone_asks_for_the_dump():
    with pytest.raises(MissingDataError, match="dump"):
        open_run([DATAFILE])


# ---- the engine-fixture runs (tests/data/engines/lammps, made by make_engine_runs.py with LAMMPS 29 Sep
# 2021): the outside reference is each run's reported.json, read from the engine's own log.lammps.

ENGINES = Path(__file__).resolve().parents[1] / "data" / "engines" / "lammps"
R_KJ = 0.00831446261815324  # molar gas constant, kJ/(mol K) (CODATA 2018)


def _reported(name: str) -> dict:
    import json

    return json.loads((ENGINES / name / "reported.json").read_text())["reported"]


def _engine_run(name: str, dump: str = "dump.lammpstrj"):
    # no option a user would not know to give: units style and time step come from log.lammps
    rep = _reported(name)
    run = open_run([ENGINES / name / dump, ENGINES / name / "argon.data", ENGINES / name / "log.lammps"])
    assert run.metadata.units_style == f"lammps {rep['units_style']}"
    return run, rep


@pytest.mark.parametrize("name", ["argon_real_nve", "argon_metal_nve", "argon_real_nvt"])
def test_engine_runs_temperature_at_the_dump_steps_equals_lammps(name):
    # Reference: LAMMPS's Temp at the dump steps (reported.json, temperature_mean_at_dump_steps) with its
    # dof 765 = 3N - 3; T = sum m v^2 / (dof R) from the dump's velocities. Within 0.5 K, and
    # in fact to the dump's 6 digits.
    run, rep = _engine_run(name)
    assert run.n_atoms == rep["atoms"] and run.n_frames == rep["frames"]["dump.lammpstrj"]
    np.testing.assert_allclose(np.diff(run.time_ps), 200 * rep["time_step_ps"])  # dumps every 200 steps
    assert run.metadata.extra["time_from"].startswith("step x time step")
    _, vel, _, _ = _all(run)
    t = np.einsum("fai,fai,a->f", vel.astype(np.float64), vel.astype(np.float64), run.masses_amu)
    t /= rep["degrees_of_freedom"] * R_KJ
    assert abs(t.mean() - rep["temperature_mean_at_dump_steps"]) < 0.5
    np.testing.assert_allclose(t.mean(), rep["temperature_mean_at_dump_steps"], rtol=1e-4)


def test_engine_run_lj_units_kept_reduced():
    # Reference: LAMMPS lj Temp at the dump steps (epsilon/kB) = sum m v^2 / dof with kB = 1 (units lj).
    run, rep = _engine_run("argon_lj_nve")
    np.testing.assert_allclose(np.diff(run.time_ps), 200 * rep["time_step"])  # in tau
    _, vel, _, _ = _all(run)
    t = np.einsum("fai,fai,a->f", vel.astype(np.float64), vel.astype(np.float64), run.masses_amu)
    t /= rep["degrees_of_freedom"]
    np.testing.assert_allclose(t.mean(), rep["temperature_mean_at_dump_steps"], rtol=1e-4)
    assert any("reduced" in w for w in run.warnings)


def test_engine_run_wrapped_and_unwrapped_dumps_agree_modulo_the_box():
    # Reference: LAMMPS wrote the same run twice: x y z (wrapped, unsorted) and xu yu zu (sorted by id).
    wrapped, _ = _engine_run("argon_real_nve")
    unwrapped, _ = _engine_run("argon_real_nve", "dump.unwrapped.lammpstrj")
    pw, vw, box, _ = _all(wrapped)
    pu, vu, _, _ = _all(unwrapped)
    np.testing.assert_array_equal(vw, vu)  # same atoms in the same (id) order
    d = (pu.astype(np.float64) - pw) / np.diagonal(box, axis1=1, axis2=2)[:, None, :]
    np.testing.assert_allclose(d - np.round(d), 0, atol=1e-5)
    assert any("wrapped" in w for w in wrapped.warnings) and not any("wrapped" in w for w in unwrapped.warnings)


def test_text_and_nan_in_atom_rows_name_the_frame(tmp_path):
    # an element column (text) is fine; a NaN position or a word in a number column names frame and row
    p = tmp_path / "el.lammpstrj"
    p.write_text(HAND.format(step=0).replace("vz mass", "vz mass element").replace(" 16.0\n", " 16.0 O\n")
                 .replace(" 1.0\n", " 1.0 H\n"))
    run = open_run([p], units_style="real")
    assert [a.element.symbol for a in run.topology.atoms] == ["H", "H", "O"]
    for bad, word in (("4.0 5.0 -1.0", "nan 5.0 -1.0"), ("4.0 5.0 -1.0", "4.0 five -1.0")):
        q = tmp_path / "bad.lammpstrj"
        q.write_text(HAND.format(step=0).replace(bad, word))
        with pytest.raises(CorruptFileError, match=r"frame 0 \(step 0\).*atom row"):
            _all(open_run([q], units_style="real"))


def test_fuzzed_dumps_and_data_files_fail_only_with_our_errors(tmp_path_factory):
    # Random damage (bytes replaced, cut, lines dropped) to a good dump and data file: either the files
    # still read, or a PhasewakeError names the file; never another exception.
    from hypothesis import HealthCheck, given, settings
    from hypothesis import strategies as st

    from phasewake.core.errors import PhasewakeError

    good_dump = (HAND.format(step=0) + HAND.format(step=5)).encode()
    good_data = DATAFILE.read_bytes()[:4000]
    d = tmp_path_factory.mktemp("fuzz")

    @settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
    @given(which=st.sampled_from(["dump", "data"]), pos=st.integers(0, 3999), cut=st.integers(1, 4000),
           byte=st.sampled_from([b"x", b"\n", b" ", b"-", b"9", b"\0", b"#", b"e"]))
    def check(which, pos, cut, byte):
        src = good_dump if which == "dump" else good_data
        pos %= len(src)
        bad = src[:pos] + byte + src[pos + 1 : max(pos + 1, cut)]
        p = d / ("f.lammpstrj" if which == "dump" else "f.data")
        p.write_bytes(bad)
        try:
            if which == "dump":
                _all(open_run([p], units_style="metal"))
            else:
                read_data(p)
        except PhasewakeError:
            pass

    check()


def test_describe_labels_step_numbers_and_molecules_from_the_mol_column(tmp_path, capsys):
    p = tmp_path / "mols.lammpstrj"
    p.write_text("".join(HAND.format(step=s).replace("ATOMS id type", "ATOMS id mol type")
                         .replace("\n3 2 ", "\n3 2 2 ").replace("\n1 1 ", "\n1 1 1 ").replace("\n2 1 ", "\n2 1 1 ")
                         for s in (0, 100)))
    assert main(["describe", str(p), "--units", "metal"]) == 0
    out = capsys.readouterr().out
    assert "time: 0 steps to 100 steps" in out and "time step is not known" in out
    run = open_run([p], units_style="metal")
    assert [r.n_atoms for r in run.topology.residues] == [2, 1]  # molecules 1 (ids 1, 2) and 2 (id 3)


def test_dump_without_velocities_or_time_step_says_velocities_are_per_step(tmp_path):
    p = tmp_path / "novel.lammpstrj"
    p.write_text("".join(HAND.format(step=s).replace(" vx vy vz", "").replace(" 0.5 0.0 0.0 ", " ")
                         .replace(" 0.0 1.0 0.0 ", " ").replace(" 0.0 0.0 2.0 ", " ") for s in (0, 10, 20)))
    run = open_run([p], units_style="real")
    assert run.frames.velocities_estimated
    assert any("per MD step, not per ps" in w for w in run.warnings)
