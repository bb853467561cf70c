"""Property-based fuzzing (hypothesis) of every parser we wrote: the unit parser, the
energy-table reader, the coordinate specification, the H5MD reader on randomly perturbed layouts and
the window's session file. Every outcome is a result or one of our typed errors, never anything else.

`make fuzz` sets PHASEWAKE_FUZZ=long for a larger budget; `make test` runs a quick one.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import h5py
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from phasewake.core.errors import PhasewakeError

pytestmark = pytest.mark.slow  # 150 hypothesis examples per property: 15 s of CPU in all (make fuzz for more)

LONG = os.environ.get("PHASEWAKE_FUZZ") == "long"
BUDGET = settings(max_examples=3000 if LONG else 150, deadline=None, derandomize=not LONG,
                  suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"

UNIT_ALPHABET = "nmpsfkJcalmolKeVÅA/^-+0123456789 *()[]_.µuegbrd"


@BUDGET
@given(st.text(alphabet=UNIT_ALPHABET, max_size=24))
def test_unit_parser(text):
    from phasewake.core.units import parse_unit

    try:
        u = parse_unit(text)
    except PhasewakeError:
        return
    assert np.isfinite(u.factor) and u.factor > 0


@BUDGET
@given(st.text(max_size=40))
def test_unit_parser_any_text(text):
    from phasewake.core.units import parse_unit, split_header

    try:
        parse_unit(text)
    except PhasewakeError:
        pass
    name, unit = split_header(text)
    assert isinstance(name, str)


CELL = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-10**6, 10**6).map(str),
    st.text(alphabet="abc-+.eE0123456789 ", max_size=6),
)
HEADER = st.sampled_from(["time (ps)", "time (fs)", "step", "potential (kJ/mol)", "Kinetic Energy (kcal/mol)",
                          "E_tot [eV]", "temperature (K)", "pressure (bar)", "volume (nm^3)", "x", "time",
                          "potential (furlong)", "conserved (kJ/mol)"])


@BUDGET
@given(headers=st.lists(HEADER, min_size=1, max_size=5),
       rows=st.lists(st.lists(CELL, min_size=0, max_size=6), max_size=8),
       delim=st.sampled_from([",", "\t", " ", ";"]),
       comment=st.sampled_from(["", "# made by hand\n", "@ title\n"]))
def test_energy_table_reader(tmp_path, headers, rows, delim, comment):
    from phasewake.core.readers.tables import read_table

    p = tmp_path / "fuzz.csv"
    p.write_text(comment + delim.join(headers) + "\n" + "".join(delim.join(r) + "\n" for r in rows))
    try:
        table, warnings = read_table(p)
    except PhasewakeError:
        return
    assert all(s.values.shape == table.time_ps.shape for s in table.series.values())


SPEC_TOKENS = st.sampled_from(["distance", "angle", "dihedral", "x", "y", "z", "com_distance", "rg", "rmsd",
                               "pc", "(", ")", ",", "[", "]", "-", "0", "1", "7", "12", "99999", '"name CA"',
                               '"resname"', " ", "'", "ref.pdb", "3-5", "foo"])


@BUDGET
@given(st.lists(SPEC_TOKENS, max_size=12).map("".join))
def test_coordinate_spec(spec):
    from phasewake.core.analyses.coordspec import parse, resolve

    try:
        defn = parse(spec)
        resolve(defn, n_atoms=20, topology=None)
    except PhasewakeError as exc:
        pos = getattr(exc, "position", None)
        assert pos is None or 0 <= pos <= len(spec)


@BUDGET
@given(st.text(max_size=30))
def test_coordinate_spec_any_text(spec):
    from phasewake.core.analyses.coordspec import parse

    try:
        parse(spec)
    except PhasewakeError:
        pass


@BUDGET
@given(rows=st.lists(st.lists(st.one_of(st.floats(allow_nan=True, allow_infinity=True, width=64).map(repr),
                                        st.integers(-10**20, 10**20).map(str),
                                        st.sampled_from(["1e400", "-1E-400", "+.5", "5.", "1_000", "0x10", "nan",
                                                         " 7 ", "infinity", "-Infinity", '"3.5"', "1e5"])),
                              min_size=3, max_size=3), min_size=1, max_size=40),
       delim=st.sampled_from([",", "\t", ";", " "]))
def test_energy_table_numbers_match_python_float(tmp_path, rows, delim):
    # Reference: Python's own float() of each cell (the table reader parses plain blocks with numpy's C
    # parser and any other block cell by cell; both must agree with float() or refuse the line).
    from phasewake.core.readers.tables import read_table

    if delim == " ":
        rows = [[c.strip() for c in r] for r in rows]
    p = tmp_path / "fuzz_numbers.csv"
    p.write_text(delim.join(["step", "potential (kJ/mol)", "x (nm)"]) + "\n"
                 + "".join(delim.join(r) + "\n" for r in rows))
    try:
        table, _ = read_table(p)
    except PhasewakeError:
        return
    want = np.array([[float(c.strip().strip('"')) for c in r] for r in rows])
    got = np.column_stack([table.series["potential"].values, table.series["x"].values])
    np.testing.assert_array_equal(got, want[:, 1:])


# Numbers as a user (or a paste from elsewhere) may write them: huge indices, digits Python accepts but
# int() or an atom list does not (superscripts, other scripts), NaN/inf literals, signs, huge ranges.
ODD_NUMBER = st.one_of(
    st.integers(0, 10**40).map(str),
    st.builds(lambda a, b: f"{a}-{b}", st.integers(0, 10**30), st.integers(0, 10**30)),
    st.sampled_from(["²", "³", "¹⁰", "١", "٣-٥", "०", "½", "Ⅻ", "𝟘", "nan", "NaN", "inf", "-inf", "-1", "+1",
                     "1e5", "1E400", "0x10", "1_000", "1.5", "0-999999999", "99999999999999999999-1", "3-", "-3",
                     "0-18446744073709551616", "9223372036854775807", "9223372036854775808", "00000000000000000000007"]),
    st.text(alphabet="0123456789-²³¹⁰١٢٣०१२٠.e+_", min_size=1, max_size=14),
)
GROUP = st.one_of(ODD_NUMBER, st.lists(ODD_NUMBER, min_size=1, max_size=3).map(lambda xs: f"[{', '.join(xs)}]"))


@BUDGET
@given(fn=st.sampled_from(["x", "distance", "angle", "rg", "com_distance", "pc"]),
       args=st.lists(GROUP, min_size=1, max_size=4), n_atoms=st.integers(1, 60))
def test_coordinate_spec_numeric_edge_cases(fn, args, n_atoms):
    from phasewake.core.analyses.coordspec import parse, resolve

    spec = f"{fn}({', '.join(args)})"
    try:
        r = resolve(parse(spec), n_atoms=n_atoms, topology=None)
    except PhasewakeError as exc:
        pos = getattr(exc, "position", None)
        assert pos is None or 0 <= pos <= len(spec)
        return
    # accepted: then every atom exists and no group is larger than the run
    for g in r.groups:
        assert g.dtype.kind == "i" and g.size <= n_atoms
        assert np.all((g >= 0) & (g < n_atoms))
    if r.pc_index is not None:
        assert 0 <= r.pc_index < 3 * n_atoms


def _h5md_paths(f: h5py.File) -> list[str]:
    names: list[str] = []
    f.visit(names.append)
    return sorted(names)


@pytest.fixture(scope="module")
def h5md_layout():
    with h5py.File(SAMPLES / "dimer_nve.h5md", "r") as f:
        return _h5md_paths(f)


@BUDGET
@given(data=st.data())
def test_h5md_reader_perturbed(tmp_path, h5md_layout, data):
    from phasewake.core.readers import open_run

    p = tmp_path / "perturbed.h5md"
    shutil.copy(SAMPLES / "dimer_nve.h5md", p)
    victims = data.draw(st.lists(st.sampled_from(h5md_layout), min_size=1, max_size=3, unique=True))
    action = data.draw(st.sampled_from(["delete", "reshape", "attrs", "scalar", "nan"]))
    with h5py.File(p, "r+") as f:
        for name in victims:
            if name not in f:
                continue
            obj = f[name]
            if action == "delete":
                del f[name]
            elif action == "attrs":
                for a in list(obj.attrs):
                    obj.attrs[a] = "nonsense"
            elif isinstance(obj, h5py.Dataset):
                parent, leaf = name.rsplit("/", 1) if "/" in name else ("/", name)
                attrs = dict(obj.attrs)
                if action == "reshape":
                    new = np.zeros((3,) * max(1, obj.ndim - 1), obj.dtype if obj.dtype.kind in "fiu" else "f")
                elif action == "scalar":
                    new = np.float64(1.5)
                else:
                    arr = obj[()]
                    new = np.full_like(arr, np.nan, dtype=float) if np.ndim(arr) else np.float64(np.nan)
                del f[name]
                d = f[parent].create_dataset(leaf, data=new)
                for k, v in attrs.items():
                    d.attrs[k] = v
    try:
        run = open_run([p])
        if run.frames is not None and run.n_frames:
            next(run.frames.iter_chunks(chunk_frames=4))
    except PhasewakeError:
        return


@BUDGET
@given(st.recursive(st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=10),
                    lambda kids: st.lists(kids, max_size=4) | st.dictionaries(st.text(max_size=8), kids, max_size=4),
                    max_leaves=20))
def test_session_file(tmp_path, obj):
    import json

    session = pytest.importorskip("phasewake.app.window.session")
    loader = session.load
    p = tmp_path / "fuzz.phasewake.json"
    p.write_text(json.dumps(obj))
    try:
        loader(p)
    except PhasewakeError:
        return


JSONISH = st.recursive(st.none() | st.booleans() | st.integers(-5, 10**12) | st.floats() | st.text(max_size=8),
                       lambda kids: st.lists(kids, max_size=3) | st.dictionaries(st.text(max_size=6), kids, max_size=3),
                       max_leaves=8)


@BUDGET
@given(data=st.data())
def test_session_file_perturbed(tmp_path, data):
    # Start from a valid session document and replace or drop fields: deeper than random JSON.
    import json

    from phasewake.app.window import session

    doc = {"format": session.FORMAT, "version": session.VERSION,
           "runs": [{"paths": [str(SAMPLES / "dimer_nve.h5md")], "relative_paths": ["dimer_nve.h5md"],
                     "topology": None, "settings": {"timestep_fs": None}}],
           "current_run": 0, "cursor_frame": 12, "time_window_ps": [1.0, 20.0],
           "coordinate": "distance(0, 1)", "panel": "Energy", "choices": {}}
    for key in data.draw(st.lists(st.sampled_from(sorted(doc)), max_size=3, unique=True)):
        if data.draw(st.booleans()):
            del doc[key]
        else:
            doc[key] = data.draw(JSONISH)
    p = tmp_path / "fuzz.pwsession"
    p.write_text(json.dumps(doc))
    try:
        state = session.load(p)
    except PhasewakeError:
        return
    assert isinstance(state, session.SessionState)
