"""Energy tables: headers with units, comment lines, roles by name and by override, several files, errors
naming file and line. Unit factors checked against NIST SP 811 (calorie) and scipy.constants (CODATA)."""

import numpy as np
import pytest
import scipy.constants as sc

from phasewake.core.errors import EmptyFileError, EnergyTableError, TimeAxisError
from phasewake.core.readers import open_run
from phasewake.core.readers.tables import read_table, read_tables, role_for


def _write(path, text):
    path.write_text(text)
    return path


def test_csv_with_units_and_comments(tmp_path):
    p = _write(tmp_path / "e.csv", "# made by hand\n; another comment\n"
               "time (fs),Potential Energy (kcal/mol),E_kin [eV],T (K),Box Volume (nm^3),step\n"
               "0,1.0,0.5,300,27.0,0\n2,2.0,0.25,301,27.1,2\n@ a comment between rows\n4,3.0,0.125,302,27.2,4\n")
    table, warnings = read_table(p)
    np.testing.assert_allclose(table.time_ps, [0, 0.002, 0.004])  # fs -> 1e-3 ps (SI prefix)
    np.testing.assert_allclose(table.by_role("potential").values, [4.184, 8.368, 12.552])  # NIST SP 811
    ke = table.by_role("kinetic")
    np.testing.assert_allclose(ke.values, np.array([0.5, 0.25, 0.125]) * sc.electron_volt * sc.Avogadro / 1000)
    assert ke.unit == "kJ/mol"
    assert table.by_role("temperature").unit == "K"
    assert table.by_role("volume").unit == "nm^3"
    assert warnings == []


def test_header_on_comment_line_and_whitespace(tmp_path):
    p = _write(tmp_path / "e.dat", "#  time (ps)   Epot (kJ/mol)   Temp (K)\n 0.0  -10.0  300\n 0.5  -11.0  299\n")
    table, _ = read_table(p)
    np.testing.assert_allclose(table.time_ps, [0.0, 0.5])
    assert table.by_role("potential").name == "Epot"
    assert table.by_role("temperature").values.tolist() == [300, 299]


def test_tsv(tmp_path):
    p = _write(tmp_path / "e.tsv", "time (ps)\ttotal energy (kJ/mol)\n0\t1\n1\t2\n")
    assert read_table(p)[0].by_role("total").values.tolist() == [1, 2]


def test_roles_by_name():
    assert role_for("Potential Energy") == "potential"
    assert role_for("E_tot") == "total"
    assert role_for("Conserved Energy") == "conserved"
    assert role_for("bath_heat") == "bath_heat"
    assert role_for("T") == "temperature" and role_for("t") == "time"
    assert role_for("Speed") == "other"


def test_column_roles_override_with_unit(tmp_path):
    p = _write(tmp_path / "e.csv", "time (ps),U,H_shadow\n0,1,5\n1,2,6\n")
    with pytest.raises(EnergyTableError, match="'U'.*no unit"):
        read_table(p)
    table, warnings = read_table(p, column_roles={"U": "potential (kcal/mol)", "H_shadow": "conserved [kJ/mol]"})
    np.testing.assert_allclose(table.by_role("potential").values, [4.184, 8.368])
    assert table.by_role("conserved").values.tolist() == [5, 6]
    with pytest.raises(EnergyTableError, match="not one of"):
        read_table(p, column_roles={"U": "potentiall (kJ/mol)"})


def test_other_column_without_unit_is_left_out_with_warning(tmp_path):
    p = _write(tmp_path / "e.csv", "time (ps),Potential (kJ/mol),lambda\n0,1,0.5\n1,2,0.5\n")
    table, warnings = read_table(p)
    assert "lambda" not in table.series
    assert any("'lambda' has no unit" in w for w in warnings)


def test_several_tables_joined_on_time(tmp_path):
    a = _write(tmp_path / "a.csv", "time (ps),potential (kJ/mol)\n0,1\n1,2\n2,3\n3,4\n")
    b = _write(tmp_path / "b.csv", "time (ps),temperature (K),potential (kJ/mol)\n1,300,20\n2,301,30\n3,302,40\n")
    table, warnings = read_tables([a, b])
    np.testing.assert_allclose(table.time_ps, [1, 2, 3])
    assert table.series["potential"].values.tolist() == [2, 3, 4]
    assert table.series["potential [b]"].values.tolist() == [20, 30, 40]
    assert table.by_role("temperature").values.tolist() == [300, 301, 302]
    assert any("joined on 3 shared times" in w for w in warnings)


def test_table_alone_is_a_run(tmp_path):
    p = _write(tmp_path / "e.csv", "time (ps),total energy (kJ/mol)\n0,1\n1,2\n")
    run = open_run([p])
    assert run.frames is None and run.energies.by_role("total").values.tolist() == [1, 2]
    np.testing.assert_allclose(run.time_ps, [0, 1])


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("time (ps),potential (kJ/mol)\n0,1\n1,2,3\n", "line 3: 3 fields.*ragged"),
        ("time (ps),potential (kJ/mol)\n0,1\n1,abc\n", "line 3: column 'potential \\(kJ/mol\\)' holds 'abc'"),
        ("time (ps),potential (kJ/mol),potential (kJ/mol)\n0,1,1\n", "line 1: duplicate column"),
        ("time (ps),potential (furlongs)\n0,1\n", "line 1: column 'potential'.*furlongs"),
        ("time (ps),potential\n0,1\n", "line 1: column 'potential' \\(potential\\) has no unit"),
        ("time (ps),potential (nm)\n0,1\n", "length unit, expected a unit of energy"),
        ("# only a comment\n", "no rows"),
        ("1,2\n3,4\n", "line 1: no header row"),
    ],
)
def test_table_errors_name_file_and_line(tmp_path, text, match):
    p = _write(tmp_path / "bad.csv", text)
    with pytest.raises(EnergyTableError, match=match) as info:
        read_table(p)
    assert info.value.path == p and str(p) in str(info.value)


@pytest.mark.parametrize(
    ("text", "kept_t", "kept_u", "word"),
    [
        ("time (ps),potential (kJ/mol)\n0,1\n1,2\n1,3\n", [0, 1], [1, 3], "line 4 (1 ps -> 1 ps)"),
        ("time (ps),potential (kJ/mol)\n0,1\n2,2\n1,3\n", [0, 1], [1, 3], "line 4 (2 ps -> 1 ps)"),
    ],
)
def test_restarts_keep_the_later_segment_and_say_so(tmp_path, text, kept_t, kept_u, word):
    # was: TimeAxisError (the table refused at the first backward step). A repeated or backward time is a
    # restart glued in: engines keep the later segment (the repeated rows are dropped), so do we,
    # and the join is reported with its times and the rows dropped.
    p = _write(tmp_path / "t.csv", text)
    table, warnings = read_table(p)
    np.testing.assert_array_equal(table.time_ps, kept_t)
    np.testing.assert_array_equal(table.series["potential"].values, kept_u)
    assert any(word in w and "later segment is kept" in w for w in warnings)
    assert len(table.joins) == 1 and table.joins[0].time_ps == 1.0 and table.joins[0].n_dropped == 1


def test_unsorted_time_is_still_refused(tmp_path):
    # time going back at every other row is not a restart but an unsorted table: refused, not sorted
    rows = "\n".join(f"{t},{i}" for i, t in enumerate([0, 3, 1, 4, 2, 5, 3, 6]))
    p = _write(tmp_path / "u.csv", "time (ps),potential (kJ/mol)\n" + rows + "\n")
    with pytest.raises(TimeAxisError, match="unsorted"):
        read_table(p)


def test_empty_table(tmp_path):
    p = _write(tmp_path / "e.csv", "\n\n")
    with pytest.raises(EmptyFileError):
        read_table(p)


def test_gaps_are_warned_with_lines(tmp_path):
    p = _write(tmp_path / "g.csv", "time (ps),potential (kJ/mol)\n0,1\n1,1\n2,1\n5,1\n6,1\n")
    _, warnings = read_table(p)
    assert any("1 gap(s)" in w and "line 4" in w and "line 5" in w for w in warnings)


def test_semicolon_separated(tmp_path):
    p = _write(tmp_path / "e.csv", "; exported table\ntime (ps);kinetic energy (kJ/mol)\n0;1.5\n1;2.5\n")
    assert read_table(p)[0].by_role("kinetic").values.tolist() == [1.5, 2.5]
