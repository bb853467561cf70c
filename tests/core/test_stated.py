"""What a user states, decided once in core for the command line, the window and the Python API: atom
groups in the coordinate grammar (against mdtraj's own selection), a coordinate given by name, core sets
and a dividing surface, and the open_run keywords of stated run options (fs -> ps by the SI prefixes)."""

from __future__ import annotations

from pathlib import Path

import mdtraj as md
import numpy as np
import pytest

from phasewake.core.analyses.coordinates import resolve_group, stated_coordinate
from phasewake.core.analyses.crossings.states import stated_states
from phasewake.core.errors import CoordinateSpecError, InputError
from phasewake.core.model import parallel
from phasewake.core.readers.stated import column_roles, open_stated, stated_options, stated_settings

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"


@pytest.fixture(scope="module")
def dcd_run():
    return open_stated([SAMPLES / "dimer_nve.dcd", SAMPLES / "dimer_nve.pdb"])


def test_group_query_selects_what_mdtraj_selects(dcd_run):
    # reference: mdtraj's Topology.select on the same PDB (the one third-party library the rules allow)
    top = md.load_topology(str(SAMPLES / "dimer_nve.pdb"))
    for query in ("name D1 or name D2", "resname DIM", "not resname DIM"):
        got = resolve_group(f'"{query}"', dcd_run, option="--group")
        np.testing.assert_array_equal(got, top.select(query))


def test_group_ranges_and_lists_are_the_atoms_written(dcd_run):
    np.testing.assert_array_equal(resolve_group("0-5", dcd_run, option="--pca-group"), np.arange(6))
    np.testing.assert_array_equal(resolve_group("[0, 4, 9]", dcd_run, option="--pca-group"), [0, 4, 9])


def test_group_mistakes_name_how_the_group_was_given_and_where(dcd_run):
    with pytest.raises(CoordinateSpecError) as info:
        resolve_group("[0-5", dcd_run, option="--pca-group")
    assert str(info.value).startswith("--pca-group: ")
    assert info.value.spec == "[0-5" and info.value.position is not None and 0 <= info.value.position <= 4
    with pytest.raises(CoordinateSpecError, match="^atoms: "):
        resolve_group(f"0-{dcd_run.n_atoms}", dcd_run, option="atoms")  # one past the last atom


def test_a_stated_coordinate_needs_frames_and_must_resolve(dcd_run):
    assert stated_coordinate("distance(0, 1)", dcd_run).function == "distance"
    with pytest.raises(CoordinateSpecError, match="99"):
        stated_coordinate("distance(0, 99)", dcd_run)
    energy_only = open_stated([SAMPLES / "dimer_nve_energy.csv"])
    with pytest.raises(InputError, match="^coordinate needs trajectory frames"):
        stated_coordinate("distance(0, 1)", energy_only, option="coordinate")


@pytest.mark.parametrize("states, surface, words", [
    ((0.5, 0.4), None, "--states 0.5,0.4: core A (q <= 0.5) must lie below core B (q >= 0.4)"),
    ((0.4, 0.4), None, "must lie below"),
    ((float("nan"), 0.5), None, "finite"),
    ((0.4, 0.5), 0.5, "--surface 0.5 must lie strictly between the cores of --states (0.4 and 0.5)"),
    ((0.4, 0.5), 0.3, "strictly between"),
    (None, float("inf"), "--surface inf: expected a finite number"),
])
def test_stated_states_refuse_impossible_cores_and_surfaces(states, surface, words):
    with pytest.raises(InputError) as info:
        stated_states(states, surface)
    assert words in str(info.value)


def test_stated_states_pass_what_is_possible():
    assert stated_states([0.4, 0.5], 0.45) == (0.4, 0.5)
    assert stated_states(None, 0.45) is None  # a surface alone: the cores are suggested later
    assert stated_states((-2.5, -0.5), None, option="states") == (-2.5, -0.5)


def test_stated_options_are_open_run_keywords_in_internal_units():
    got = stated_options(timestep_fs=2.0, n_constraints=0, temperature_K=130.0, ensemble="nvt",
                         velocities=Path("v.veldcd"), column_roles={"TotEng": "total"}, units_style="real")
    # 1 fs = 1e-3 ps (SI prefixes femto/pico)
    assert got == {"timestep_ps": pytest.approx(0.002, rel=1e-15), "n_constraints": 0, "temperature_K": 130.0,
                   "ensemble": "NVT", "velocities": "v.veldcd", "column_roles": {"TotEng": "total"},
                   "units_style": "real"}
    assert stated_options() == {}
    with pytest.raises(InputError, match="ensemble='nvx'"):
        stated_options(ensemble="nvx")


def test_column_roles_name_the_option_and_the_roles():
    assert column_roles(["Etot = Total", "Epot=potential"]) == {"Etot": "total", "Epot": "potential"}
    assert column_roles(None) is None
    for bad in ("Etot", "=total", "Etot=totl"):
        with pytest.raises(InputError, match=r"^--column .*expected NAME=ROLE with ROLE one of .*potential"):
            column_roles([bad])


def test_open_stated_applies_the_statements_and_notes_them_for_workers():
    path = SAMPLES / "dimer_nve.h5md"
    options = stated_options(timestep_fs=4.0, n_constraints=0)
    run = open_stated([path], options=options)
    assert run.metadata.timestep_ps == pytest.approx(0.004) and run.metadata.sources["timestep_ps"] == "user"
    again = parallel.files_of(run)
    assert again.paths == (str(path),) and dict(again.options) == options
    assert again.open().metadata.timestep_ps == run.metadata.timestep_ps


def test_report_targets_are_a_pdf_and_never_an_input(tmp_path):
    from phasewake.core.figures.report import report_targets

    run_file = tmp_path / "run.h5md"
    assert report_targets(tmp_path / "r.pdf", html=True, inputs=[run_file]) == (tmp_path / "r.pdf",
                                                                                  tmp_path / "r.html")
    assert report_targets(tmp_path / "R.PDF", html=False, inputs=[]) == (tmp_path / "R.PDF", None)
    with pytest.raises(InputError, match=r"ending in \.pdf"):
        report_targets(tmp_path / "r.png", html=False, inputs=[])
    with pytest.raises(InputError, match="overwrite one of the input files") as info:
        report_targets(tmp_path / "run.pdf", html=True, inputs=[tmp_path / "run.html"])  # the HTML page beside it
    assert info.value.path == tmp_path / "run.html"


def test_stated_settings_are_what_the_user_stated_and_nothing_the_files_say():
    path = SAMPLES / "dimer_nve.h5md"
    plain = open_stated([path])
    assert plain.metadata.timestep_ps is not None  # the file says it ...
    assert stated_settings(plain) == {"n_constraints": None, "timestep_ps": None, "temperature_K": None}  # ... not the user
    run = open_stated([path], options=stated_options(timestep_fs=4.0, n_constraints=0, temperature_K=120.0))
    # 4 fs = 4e-3 ps (SI prefixes)
    assert stated_settings(run) == {"n_constraints": 0, "timestep_ps": pytest.approx(4e-3, rel=1e-15),
                                    "temperature_K": 120.0}
