"""The audit's judgement on real engine output (tests/data/engines, made by the engines themselves).

The outside reference of each check is what the engine reported for the run (``reported.json``: OpenMM's
System and integrator, GROMACS md.log), never a number of ours.
"""

import json
from pathlib import Path

import pytest

from phasewake.core.analyses.audit import audit_run
from phasewake.core.progress import drive
from phasewake.core.readers import open_run

DATA = Path(__file__).resolve().parents[1] / "data" / "engines"


def _engine(folder):
    d = DATA / folder
    if not (d / "reported.json").exists():
        pytest.skip(f"engine run {folder} not present")
    return d, json.loads((d / "reported.json").read_text())["reported"]


def _verdicts(res):
    return {v.kind: v for v in res.verdicts}


def test_openmm_langevin_run_whose_files_say_nothing_gets_no_conservation_problem():
    # LangevinMiddleIntegrator at 300 K, 1/ps (OpenMM's own setting, reported.json); the CSV, DCD and PDB
    # say nothing of a thermostat. Before: judged as NVE, drift and fluctuation 'problem'.
    d, rep = _engine("openmm/tip3p_rigid_nvt_langevin")
    run = open_run([d / "energies.csv", d / "trajectory.dcd", d / "start.pdb"])
    assert run.metadata.ensemble is None and run.metadata.thermostat is None
    res = drive(audit_run(run))
    v = _verdicts(res)
    assert rep["ensemble"] == "NVT"
    assert res.thermostatted and res.ensemble_origin == "inferred" and "corr(K, U)" in res.ensemble_source
    for kind in ("energy.drift", "energy.fluctuation_ratio"):
        assert v[kind].level == "info" and "needs the thermostat's energy" in v[kind].message
    assert not any(x.level == "problem" for x in res.verdicts)
    # the temperature is OpenMM's own (its CSV kinetic energy; DOF = OpenMM's count) within 0.5 K
    assert res.temperature.n_dof == rep["degrees_of_freedom"]
    assert res.temperature.mean_K == pytest.approx(rep["temperature_mean_K"], abs=0.5)


def test_openmm_verlet_twin_is_inferred_nve_and_judged_on_its_total_energy():
    d, rep = _engine("openmm/tip3p_rigid_nve_verlet")
    res = drive(audit_run(open_run([d / "energies.csv", d / "trajectory.dcd", d / "start.pdb"])))
    v = _verdicts(res)
    assert rep["ensemble"] == "NVE"
    assert not res.thermostatted and res.ensemble_origin == "inferred"
    assert v["energy.fluctuation_ratio"].level in ("ok", "caution", "problem")  # judged, not skipped
    assert res.energy.fluctuations.ratio < 0.05


def test_openmm_h5md_without_topology_names_the_assumption_and_the_engines_count_is_the_other(tmp_path):
    # frames.h5md carries masses, species as atomic numbers and OpenMM's kinetic energy; its species and
    # masses now give a topology (tests/app/test_engine_runs.py), so a copy without the species stands for a
    # file with no topology the audit can use and no DOF count: T with 0 constraints is a caution, and the
    # other value (rigid water, 3 per molecule, from the masses) is OpenMM's own temperature at those frames
    import shutil

    import h5py

    d, rep = _engine("openmm/tip3p_rigid_nvt_langevin")
    bare = tmp_path / "frames.h5md"
    shutil.copyfile(d / "frames.h5md", bare)
    with h5py.File(bare, "a") as f:
        del f["particles/all/species"]
    res = drive(audit_run(open_run([bare])))
    a = _verdicts(res)["temperature.assumption"]
    assert a.level == "caution" and "rigid" in a.message
    ta = res.temperature
    other_dof = 3 * ta.n_atoms - ta.n_com_removed - ta.assumption["other_constraints"]
    assert other_dof == rep["degrees_of_freedom"] and ta.assumption["other_constraints"] == rep["constraints"]
    assert ta.assumption["other_mean_K"] == pytest.approx(rep["temperature_mean_at_h5md_frames_K"], rel=1e-3)
    assert ta.mean_K == pytest.approx(rep["temperature_mean_at_h5md_frames_K"] * other_dof / ta.n_dof, rel=1e-3)


def test_gromacs_leapfrog_trr_against_the_edr_kinetic_energy():
    # GROMACS md (leap-frog): TRR frames hold v(t - dt/2); the edr's kinetic energy is shown,
    # said to be preferred because the velocities are half a step off, and it gives md.log's temperature
    d, rep = _engine("gromacs/spce_flexible_nve_2fs")
    run = open_run([d])
    res = drive(audit_run(run))
    ta = res.temperature
    assert ta.kinetic_source.startswith("the file's kinetic energy") and "half a step off" in ta.kinetic_source
    assert ta.n_dof == rep["degrees_of_freedom"]
    assert ta.mean_K == pytest.approx(rep["temperature_mean_K"], abs=0.05)
    assert _verdicts(res)["temperature.half_step"].level == "info"


def test_energy_table_only_shows_the_engines_own_temperature():
    # log.lammps alone (no atoms): the temperature is LAMMPS's own column, said so, equal to its log's value
    d, rep = _engine("lammps/argon_real_nvt")
    res = drive(audit_run(open_run([d / "log.lammps"])))
    shown = [v for v in res.verdicts if v.kind == "temperature.dof"]
    assert len(shown) == 1 and "the file's temperature column" in shown[0].message
    assert rep["temperature_units"] == "K"
    assert shown[0].measured == pytest.approx(rep["temperature_mean"], abs=0.05)


def test_thermostat_target_drawn_on_the_temperature_figure():
    # reference: md.log ref-t of the v-rescale run (reported.json target_temperature_K = 300); the NVE run has
    # no target. The figure the window and the report draw carries the target as a dotted line.
    from phasewake.core.figures import plots

    d, rep = _engine("gromacs/spce_rigid_nvt_vrescale")
    res = drive(audit_run(open_run([d / "md.edr", d / "md.trr", d / "md.gro"])))
    assert res.target_temperature_K == rep["target_temperature_K"]
    fig = plots.audit_temperature_figure(res)
    marks = [m for p in fig.plots for m in p.items if getattr(m, "kind", None) == "hline"]
    assert any(m.value == pytest.approx(300.0) and "target" in m.label for m in marks), marks
    d2, _ = _engine("gromacs/spce_rigid_nve_whole")
    assert drive(audit_run(open_run([d2 / "md.edr"]))).target_temperature_K is None
