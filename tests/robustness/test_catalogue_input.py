"""Impossible values, claimed sizes, bad options and unwritable outputs.

Each case runs through the real command line in-process (``main(argv)``), as a user meets it: exit code
2, a short message naming the file or the option and the problem, no traceback, and every input file
byte for byte unchanged (sha256 before and after). Cases that need a folder without write permission
drop root's privileges in a forked child (root may write anywhere, so the test would otherwise not test
the path); CI runs as root.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import shutil
import sys
import traceback
from collections.abc import Callable
from pathlib import Path

import h5py
import numpy as np
import pytest

from phasewake.app.cli import main

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"
NVE = SAMPLES / "dimer_nve.h5md"
DCD = SAMPLES / "dimer_nve.dcd"
PDB = SAMPLES / "dimer_nve.pdb"
CSV = SAMPLES / "dimer_nve_energy.csv"
COORD = "distance(0, 1)"


def sha(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def expect_refusal(argv: list[str], inputs: list[Path], words: list[str], capsys, *,
                   names: list[str] | None = None, max_lines: int = 1) -> str:
    """Run ``phasewake argv``: exit 2, a short message with one of ``words`` naming one of ``names``
    (default: the inputs' file names), no traceback, the inputs unchanged. Returns the message."""
    before = {p: sha(p) for p in inputs if p.is_file()}
    code = main(argv)
    out, err = capsys.readouterr()
    assert code == 2, (argv, out, err)
    assert "Traceback" not in err and "Traceback" not in out
    text = err.strip()
    assert text.count("\n") < max_lines + 2, f"expected a short message, got:\n{err}"
    low = text.lower()
    assert any(w.lower() in low for w in words), f"message lacks {words}: {text}"
    wanted = names if names is not None else [p.name for p in inputs]
    assert any(n in text for n in wanted), f"message names none of {wanted}: {text}"
    assert before == {p: sha(p) for p in before}, "an input was modified"
    return text


def h5md_copy(tmp: Path, name: str, change: Callable[[h5py.File], None]) -> Path:
    p = tmp / name
    shutil.copy(NVE, p)
    with h5py.File(p, "r+") as f:
        change(f)
    return p


def _set_param(f: h5py.File, key: str, value) -> None:
    del f["parameters"][key]
    f["parameters"][key] = value


# ---------------------------------------------------------------- 7. impossible physical values


def _masses_set(tmp_path, masses):
    def change(f):
        m = f["particles/all/mass"]
        a = m[()]
        a[:2] = masses
        m[...] = a

    return h5md_copy(tmp_path, "badmass.h5md", change)


def test_negative_mass_in_h5md_is_refused_on_every_verb(tmp_path, capsys):
    p = _masses_set(tmp_path, (-3.0, 39.9))
    # today coords --momentum printed an effective mass from them and audit called them "unknown"
    for argv in (["coords", str(p), "-c", COORD, "--momentum"], ["audit", str(p)], ["describe", str(p)]):
        text = expect_refusal(argv, [p], ["mass"], capsys)
        assert "atom 0" in text and "positive" in text


def test_zero_mass_is_a_virtual_site_a_coordinate_through_it_is_refused(tmp_path, capsys):
    # mass 0 marks a massless virtual site (TIP4P's M): the run opens, but a coordinate through that atom
    # has no conjugate momentum
    p = _masses_set(tmp_path, (0.0, 39.9))
    text = expect_refusal(["coords", str(p), "-c", COORD, "--momentum"], [p], ["virtual site"], capsys)
    assert "atom 0" in text
    assert main(["describe", str(p)]) == 0
    capsys.readouterr()


def test_impossible_mass_from_a_library_caller_is_refused_in_compute_coordinates():
    # the coordinate code refuses them too (a Run built by hand, not through a reader)
    from phasewake.core.analyses.coordinates import compute_coordinates
    from phasewake.core.errors import PhasewakeError
    from phasewake.core.progress import drive
    from phasewake.core.readers import open_run

    run = open_run([NVE])
    run.masses_amu = run.masses_amu.copy()
    run.masses_amu[1] = 0.0
    with pytest.raises(PhasewakeError, match="mass"):
        drive(compute_coordinates(run, [COORD]))


@pytest.mark.parametrize("edges, words", [((0.0, 3.0, 3.0), ["box edge a", "positive"]),
                                          ((3.0, -1.0, 3.0), ["box edge b", "positive"]),
                                          ((3.0, 3.0, np.nan), ["box", "nan"])])
def test_zero_or_negative_box_edges_are_refused(tmp_path, capsys, edges, words):
    p = h5md_copy(tmp_path, "badbox.h5md",
                  lambda f: f["particles/all/box/edges"].__setitem__(..., np.array(edges)))
    expect_refusal(["describe", str(p)], [p], words, capsys)


def test_impossible_box_in_a_frame_of_a_time_dependent_box_names_the_frame(tmp_path):
    from phasewake.core.errors import ImpossibleValueError
    from phasewake.core.readers.common import check_box

    box = np.broadcast_to(np.diag([3.0, 3.0, 3.0]), (5, 3, 3)).copy()
    assert check_box(box, path=tmp_path / "x") is box
    assert check_box(np.zeros((5, 3, 3)), path=None) is None  # all zeros: engines' way to say "no box"
    box[3, 1, 1] = -2.0
    with pytest.raises(ImpossibleValueError, match="box edge b of frame 13"):
        check_box(box, path=tmp_path / "x", first_frame=10)
    tilted = np.array([[3.0, 0, 0], [0, 3.0, 0], [0, 0, 3.0]])
    tilted[2] = [1.0, 1.0, 0.0]  # c in the ab plane: a flat cell
    with pytest.raises(ImpossibleValueError, match="flat"):
        check_box(tilted[None], path=None)


def test_negative_box_edge_in_a_lammps_dump_is_refused(tmp_path, capsys):
    # BOX BOUNDS lo hi per axis (LAMMPS dump layout); hi below lo is an edge < 0
    frame = ("ITEM: TIMESTEP\n{step}\nITEM: NUMBER OF ATOMS\n2\nITEM: BOX BOUNDS pp pp pp\n0 50\n0 -50\n0 50\n"
             "ITEM: ATOMS id type x y z\n1 1 1 1 1\n2 1 2 2 {z}\n")
    p = tmp_path / "negbox.lammpstrj"
    p.write_text(frame.format(step=0, z=2) + frame.format(step=10, z=2.1))
    text = expect_refusal(["describe", str(p), "--units", "real", "--timestep", "1"], [p], ["box edge b"], capsys)
    assert "positive" in text


def test_negative_constraint_count_in_the_file_is_refused(tmp_path, capsys):
    # today: "659 = 3 x 54 - -500" degrees of freedom
    p = h5md_copy(tmp_path, "negc.h5md", lambda f: _set_param(f, "n_constraints", -500))
    expect_refusal(["audit", str(p)], [p], ["constraint", "negative"], capsys)


@pytest.mark.parametrize("value", [np.nan, 0.0, -0.002, np.inf])
def test_nan_or_non_positive_time_step_in_the_file_is_refused(tmp_path, capsys, value):
    p = h5md_copy(tmp_path, "dt.h5md", lambda f: _set_param(f, "timestep_ps", value))
    expect_refusal(["audit", str(p)], [p], ["time step"], capsys)


@pytest.mark.parametrize("argv, option", [
    (["--timestep", "nan"], "--timestep"), (["--timestep", "0"], "--timestep"),
    (["--timestep", "-1"], "--timestep"), (["--timestep", "inf"], "--timestep"),
    (["--constraints", "-500"], "--constraints"), (["--temperature", "nan"], "--temperature"),
    (["--temperature", "-5"], "--temperature"),
])
def test_impossible_run_options_are_refused_by_name(capsys, argv, option):
    for verb in ("audit", "describe", "coords"):
        expect_refusal([verb, str(NVE), *argv], [NVE], [option], capsys, names=[option])


def test_impossible_overrides_are_refused_by_the_library_too():
    from phasewake.core.errors import ImpossibleValueError
    from phasewake.core.readers import open_run

    for kw in ({"timestep_ps": float("nan")}, {"timestep_ps": 0.0}, {"n_constraints": -1},
               {"temperature_K": float("inf")}, {"n_constraints": 10**6}):
        with pytest.raises(ImpossibleValueError):
            open_run([NVE], **kw)


def table_run(tmp: Path, text: str, name: str = "energy.csv") -> list[Path]:
    p = tmp / name
    p.write_text(text)
    return [p]


@pytest.mark.parametrize("bad", ["nan", "inf", "-inf", "1e400"])
def test_nan_or_inf_in_the_time_column_is_refused(tmp_path, capsys, bad):
    # H5MD refused it already; an energy table accepted it
    files = table_run(tmp_path, f"time (ps),potential (kJ/mol)\n0,1\n1,2\n{bad},3\n3,4\n")
    text = expect_refusal(["describe", *map(str, files)], files, ["time"], capsys)
    assert "line 4" in text


def test_nan_time_in_an_engine_energy_file_is_refused_not_dropped(tmp_path, capsys):
    # a CP2K .ener laid out as CP2K writes it (step, time in fs, kinetic, temperature, potential, conserved,
    # used time); the NaN was taken for a restart's repeat and it and every later row dropped silently
    head = "#     Step Nr.          Time[fs]        Kin.[a.u.]          Temp[K]            Pot.[a.u.]" \
           "        Cons Qty[a.u.]        UsedTime[s]\n"
    rows = "".join(f"{k:10d} {t:>19} 0.01 300.0 -1.0 -0.99 0.1\n"
                   for k, t in enumerate(["0.000", "1.000", "NaN", "3.000", "4.000"]))
    p = tmp_path / "run-1.ener"
    p.write_text(head + rows)
    text = expect_refusal(["describe", str(p)], [p], ["finite"], capsys)
    assert "sample 2" in text


def test_a_time_axis_that_overflows_is_refused(tmp_path, capsys):
    # finite in ns, infinite in ps: 1e306 ns = 1e309 ps > the largest float (1.8e308)
    files = table_run(tmp_path, "time (ns),potential (kJ/mol)\n0,1\n1e305,2\n1e306,3\n")
    expect_refusal(["describe", *map(str, files)], files, ["overflow", "finite"], capsys)
    # finite times whose difference overflows
    from phasewake.core.errors import TimeAxisError
    from phasewake.core.readers.common import check_time_axis

    with pytest.raises(TimeAxisError, match="overflows"):
        check_time_axis(np.array([-1.5e308, 1.5e308]), path=tmp_path / "t")


# ------------------------------------------------------------------------- 8. claimed sizes


def test_h5md_claiming_1e12_frames_with_scalar_step_and_time_is_refused_before_allocating(tmp_path, capsys):
    # today this tried to allocate 7.28 TiB for the step axis
    def change(f):
        g = f["particles/all/position"]
        unit = g["value"].attrs["unit"]
        data = g["value"][()]
        for k in ("value", "step", "time"):
            if k in g:
                del g[k]
        d = g.create_dataset("value", shape=(10**12, data.shape[1], 3), dtype="f4", chunks=(1, data.shape[1], 3))
        d.attrs["unit"] = unit
        d[: data.shape[0]] = data
        g["step"] = np.int64(10)
        g["time"] = 0.01
        g["time"].attrs["unit"] = "ps"
        del f["particles/all/velocity"]
        del f["observables"]

    p = h5md_copy(tmp_path, "huge.h5md", change)
    text = expect_refusal(["describe", str(p)], [p], ["claims"], capsys)
    assert "1000000000000" in text and "1600" in text


def test_h5md_observable_claiming_more_rows_than_the_file_holds_is_refused(tmp_path, capsys):
    def change(f):
        og = f["observables/potential_energy"]
        unit = og["value"].attrs["unit"]
        del og["value"]
        d = og.create_dataset("value", shape=(10**11,), dtype="f8", chunks=(1000,))
        d.attrs["unit"] = unit
        d[:1600] = 1.0

    p = h5md_copy(tmp_path, "hugeobs.h5md", change)
    expect_refusal(["describe", str(p)], [p], ["claims"], capsys)


def test_atom_range_is_checked_against_the_atom_count_before_a_list_is_built(capsys):
    import tracemalloc

    from phasewake.core.analyses.coordspec import parse, resolve
    from phasewake.core.errors import CoordinateSpecError

    tracemalloc.start()
    with pytest.raises(CoordinateSpecError, match="out of range: the run has 54 atoms"):
        resolve(parse("rg(0-999999999)"), n_atoms=54)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert peak < 5e6, f"{peak / 1e6:.0f} MB allocated for an out-of-range group"  # a list would take ~36 GB
    text = expect_refusal(["coords", str(NVE), "-c", "rg(0-999999999)"], [NVE], ["out of range"], capsys,
                          names=["0-999999999"], max_lines=3)
    assert "54 atoms" in text


def test_a_failed_allocation_is_one_line_naming_the_file(capsys, monkeypatch):
    # a size no header check foresaw: simulated, since a real one would take the machine's memory
    from phasewake.app.commands import coords
    from phasewake.core.readers import h5md

    real = h5md._read_h5md

    def boom(*a, **k):
        raise MemoryError()

    monkeypatch.setattr(h5md, "_read_h5md", boom)
    expect_refusal(["describe", str(NVE)], [NVE], ["not enough memory"], capsys)
    monkeypatch.setattr(h5md, "_read_h5md", real)
    monkeypatch.setattr(coords, "_columns", boom)  # during an analysis
    expect_refusal(["coords", str(NVE), "-c", COORD], [NVE], ["not enough memory"], capsys)


# ------------------------------------------------------------------------------ 9. no traceback


@pytest.mark.parametrize("spec, words", [
    ("distance(0, ²)", ["digit 0-9"]),
    ("distance(0, 12345678901234567890123456)", ["too large"]),
    ("distance(0, ١)", ["digit 0-9"]),  # an Arabic-Indic one: Python calls it a digit
    ("pc(²)", ["whole number"]),
    ("pc(99999999)", ["does not exist"]),
    ("rg([0, 1-99999999999999999999])", ["too large"]),
])
def test_numeric_edge_cases_of_the_coordinate_specification(capsys, spec, words):
    expect_refusal(["coords", str(NVE), "-c", spec], [NVE], words, capsys, names=[spec], max_lines=3)


@pytest.mark.parametrize("argv, option", [
    (["memory", str(NVE), "--bins", "0"], "--bins"),
    (["memory", str(NVE), "--bins", "9" * 26], "--bins"),  # numpy: "Maximum allowed size exceeded"
    (["memory", str(NVE), "--segments", "1"], "--segments"),
    (["memory", str(NVE), "--vacf", "--max-lag", "nan"], "--max-lag"),
    (["memory", str(NVE), "--vacf", "--gk-limit", "nan"], "--gk-limit"),
    (["memory", str(NVE), "--vacf", "--gk-limit", "-1"], "--gk-limit"),
    (["memory", str(NVE), "--msd", "--fit-range", "5", "nan"], "--fit-range"),
    (["memory", str(NVE), "--spectrum", "--peak-prominence", "inf"], "--peak-prominence"),
    (["audit", str(NVE), "--compare-timestep", "nan"], "--compare-timestep"),
    (["coords", str(NVE), "--pca", "0"], "--pca"),
])
def test_impossible_analysis_options_are_refused_by_name(capsys, argv, option):
    expect_refusal(argv, [NVE], [option], capsys, names=[option])


def _bad_gro(tmp: Path) -> Path:
    p = tmp / "bad.gro"
    p.write_text("made by hand\n    3\n    1SOL     OW    1   0.126   1.624   1.679\n garbage line\n")
    return p


def test_malformed_gro_is_one_line(tmp_path, capsys):
    p = _bad_gro(tmp_path)
    expect_refusal(["describe", str(p)], [p], ["cannot read", "gro"], capsys)
    bare = tmp_path / "badbox.gro"  # atoms fine, the box line is not: mdtraj raises a bare Exception
    bare.write_text("made by hand\n    1\n    1SOL     OW    1   0.126   1.624   1.679\n garbage line\n")
    expect_refusal(["describe", str(bare)], [bare], ["unexpected line"], capsys)
    q = tmp_path / "short.gro"
    q.write_text("made by hand\n  3\n")  # mdtraj raises a bare Exception on this one
    expect_refusal(["describe", str(q)], [q], ["cannot read", "gro"], capsys)


def test_output_path_that_is_a_folder_or_under_a_file(tmp_path, capsys):
    folder = tmp_path / "out"
    folder.mkdir()
    blocker = tmp_path / "blocker"
    blocker.write_text("a file")
    for argv, option in (
        (["coords", str(NVE), "-c", COORD, "-o", str(folder)], "-o/--output"),
        (["coords", str(NVE), "-c", COORD, "-o", str(blocker / "x.csv")], "-o/--output"),
        (["crossings", str(NVE), "-c", COORD, "--events", str(folder)], "--events"),
        (["report", str(NVE), "-o", str(blocker / "r.pdf")], "-o/--output"),
        (["report", str(NVE), "-o", str(tmp_path / "r.pdf"), "--preview", str(blocker)], "--preview"),
        (["report", str(NVE), "-o", str(tmp_path / "r.pdf"), "--preview", str(blocker / "pages")], "--preview"),
    ):
        expect_refusal(argv, [NVE, blocker], ["folder", "file"], capsys, names=[option])
    assert not (tmp_path / "r.pdf").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["blocker", "out"]


def _as_unprivileged(argv: list[str]) -> tuple[int, str]:
    """``main(argv)`` in a forked child without root's privileges (nobody); (exit code, stderr)."""
    r, w = os.pipe()
    pid = os.fork()
    if pid == 0:  # pragma: no cover - runs in the child
        try:
            os.close(r)
            os.setgroups([])
            os.setgid(65534)
            os.setuid(65534)
            sys.stderr = io.StringIO()
            sys.stdout = io.StringIO()
            code = main(argv)
            payload = [code, sys.stderr.getvalue()]
        except BaseException:  # noqa: BLE001 - the child reports whatever happened, then exits
            payload = [99, traceback.format_exc()]
        os.write(w, json.dumps(payload).encode())
        os._exit(0)
    os.close(w)
    chunks = []
    while True:
        b = os.read(r, 65536)
        if not b:
            break
        chunks.append(b)
    os.close(r)
    os.waitpid(pid, 0)
    code, err = json.loads(b"".join(chunks).decode())
    return int(code), err


@pytest.fixture
def read_only_folder(tmp_path_factory):
    """A folder nobody may write into, inside a folder everybody may traverse (pytest's own tmp is 0700)."""
    import tempfile

    base = Path(tempfile.mkdtemp(prefix="phasewake-ro-"))
    base.chmod(0o1777)  # the unprivileged child may write here, not in the folder below
    ro = base / "readonly"
    ro.mkdir()
    ro.chmod(0o555)
    yield ro
    ro.chmod(0o755)
    shutil.rmtree(base)


def _main_without_privileges(argv: list[str], capsys) -> tuple[int, str]:
    """``main(argv)``'s exit code and stderr as a user without special rights: root reads and writes
    anywhere, so as root the imports are warmed in this process and the command runs in a child that
    drops privileges."""
    if os.geteuid() == 0:
        main(["describe", str(NVE)])
        capsys.readouterr()
        return _as_unprivileged(argv)
    code = main(argv)
    return code, capsys.readouterr().err


def _refused_in_read_only_folder(argv: list[str], option: str, capsys) -> None:
    code, err = _main_without_privileges(argv, capsys)
    assert code == 2, err
    assert "Traceback" not in err and err.strip().count("\n") == 0, err
    assert option in err and "permission denied" in err.lower(), err


@pytest.mark.parametrize("verb", ["coords-csv", "coords-h5md", "events", "report", "preview"])
def test_read_only_output_folder_is_one_line_before_any_analysis(read_only_folder, capsys, verb, monkeypatch):
    monkeypatch.setenv("PHASEWAKE_NO_CACHE", "1")
    ro = read_only_folder
    argv, option = {
        "coords-csv": (["coords", str(NVE), "-c", COORD, "-o", str(ro / "x.csv")], "-o/--output"),
        "coords-h5md": (["coords", str(NVE), "-c", COORD, "-o", str(ro / "x.h5md")], "-o/--output"),
        "events": (["crossings", str(NVE), "-c", COORD, "--events", str(ro / "ev.csv")], "--events"),
        "report": (["report", str(NVE), "-o", str(ro / "r.pdf")], "-o/--output"),
        "preview": (["report", str(NVE), "-o", str(ro.parent / "r.pdf"), "--preview", str(ro / "pages")],
                    "--preview"),
    }[verb]
    _refused_in_read_only_folder(argv, option, capsys)
    assert list(ro.iterdir()) == []
    assert not (ro.parent / "r.pdf").exists()


# ---------------------------------------------------------------------- 11. report's explicit options


@pytest.mark.parametrize("argv, words, name", [
    (["--coordinate", "distance(0, 999)"], ["out of range"], "999"),
    (["--states", "nan,nan"], ["finite"], "--states"),
    (["--states", "0.6,0.4"], ["below"], "--states"),
    (["--surface", "inf"], ["finite"], "--surface"),
    (["--states", "0.42,0.53", "--surface", "0.9"], ["between"], "--surface"),
])
def test_report_with_an_invalid_explicit_option_exits_2_and_writes_nothing(tmp_path, capsys, argv, words, name):
    out = tmp_path / "r.pdf"
    expect_refusal(["report", str(NVE), "-o", str(out), *argv], [NVE], words, capsys, names=[name], max_lines=3)
    assert not out.exists()


# ---------------------------------------------------------------------- 10. messages that name the problem


def test_unreadable_file_says_permission_denied(read_only_folder, capsys):
    p = read_only_folder.parent / "secret.h5md"
    shutil.copy(NVE, p)
    p.chmod(0o000)
    try:
        code, err = _main_without_privileges(["describe", str(p)], capsys)
    finally:
        p.chmod(0o644)
    assert code == 2 and "Traceback" not in err, err
    assert "permission denied" in err.lower() and "secret.h5md" in err and "no reader" not in err, err


@pytest.mark.parametrize("suffix", [".h5", ".hdf5", ".h5md"])
def test_truncated_hdf5_says_damaged_whatever_its_suffix(tmp_path, capsys, suffix):
    p = tmp_path / f"cut{suffix}"
    data = NVE.read_bytes()
    p.write_bytes(data[: len(data) // 3])
    text = expect_refusal(["describe", str(p)], [p], ["damaged", "truncated", "not a readable hdf5"], capsys)
    assert "no reader claims" not in text


def _amber_netcdf(path: Path, n_atoms: int, *, time_unit: str) -> None:
    """A minimal AMBER NetCDF trajectory (AMBER trajectory convention 1.0), written with scipy."""
    from scipy.io import netcdf_file

    with netcdf_file(str(path), "w", version=2) as nc:
        nc.Conventions = "AMBER"
        nc.ConventionVersion = "1.0"
        nc.createDimension("frame", 3)
        nc.createDimension("spatial", 3)
        nc.createDimension("atom", n_atoms)
        sp = nc.createVariable("spatial", "c", ("spatial",))
        sp[:] = np.array(list("xyz"), dtype="S1")
        t = nc.createVariable("time", "f", ("frame",))
        t.units = time_unit
        t[:] = [0.0, 1.0, 2.0]
        c = nc.createVariable("coordinates", "f", ("frame", "atom", "spatial"))
        c.units = "angstrom"
        c[:] = np.random.default_rng(1).uniform(0, 20, (3, n_atoms, 3)).astype(np.float32)


def test_netcdf_with_an_unknown_time_unit_names_the_file(tmp_path, capsys):
    import mdtraj as md

    nc = tmp_path / "run.nc"
    _amber_netcdf(nc, md.load_topology(str(PDB)).n_atoms, time_unit="fortnight")
    text = expect_refusal(["describe", str(nc), "--top", str(PDB)], [nc, PDB], ["fortnight"], capsys)
    assert "run.nc" in text and "time" in text


def test_nan_inside_a_coordinate_series_names_the_file_and_the_frame(tmp_path, capsys):
    def change(f):
        d = f["particles/all/position/value"]
        frame = d[5]
        frame[3, 1] = np.nan
        d[5] = frame

    p = h5md_copy(tmp_path, "nanpos.h5md", change)
    for argv in (["coords", str(p), "-c", "distance(0, 3)", "--no-cache"],
                 ["crossings", str(p), "-c", "distance(0, 3)", "--no-cache"]):
        text = expect_refusal(argv, [p], ["frame 5"], capsys)
        assert "nan" in text.lower()
