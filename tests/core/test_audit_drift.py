"""The drift verdict: a start-up step left out of the fits, drifts a run cannot resolve, and the engine's own
drift line and target beside ours.

Synthetic energies with a known linear drift and white noise (the least-squares slope is checked against
numpy's polyfit, an independent fit); the real GROMACS runs of tests/data/engines against what GROMACS
printed in its own md.log (read there by make_engine_runs.py with its own text search, in reported.json).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from phasewake.core.analyses.audit import audit_run
from phasewake.core.model.run import EnergyTable, RunMetadata, Series
from phasewake.core.progress import result_of
from phasewake.core.readers import open_run
from phasewake.core.readers.memory import run_from_arrays

KB = 0.00831446261815324  # kJ/mol/K, CODATA 2018 (R / 1000)
ENGINES = Path(__file__).resolve().parents[1] / "data" / "engines" / "gromacs"
N_ATOMS, N_DOF, T_K = 300, 897, 300.0


def _run(drift_kT_per_dof_per_ns: float, *, noise: float = 0.5, n: int = 2000, span_ps: float = 20.0,
         first_step: float = 0.0, tolerance: float | None = None, seed: int = 1):
    """An NVE run of N_ATOMS atoms at T_K whose total energy drifts as asked (kJ/mol/ns = kT/DOF/ns x N_DOF x kT)."""
    rng = np.random.default_rng(seed)
    t = np.linspace(0.0, span_ps, n)
    slope_per_ps = drift_kT_per_dof_per_ns * N_DOF * KB * T_K / 1000.0
    e = -5000.0 + slope_per_ps * t + rng.normal(0.0, noise, n)
    e[0] -= first_step  # the first row before a start-up step
    k = 0.5 * N_DOF * KB * T_K + rng.normal(0.0, 40.0, n)
    table = EnergyTable(time_ps=t, series={
        "Total": Series("Total", e, "kJ/mol", "total"), "Kinetic": Series("Kinetic", k, "kJ/mol", "kinetic")})
    md = RunMetadata(ensemble="NVE", n_dof=N_DOF)
    md.sources["ensemble"] = "test"
    if tolerance is not None:
        md.extra["drift_tolerance"] = {"kJ_mol_ps_atom": tolerance, "source": "test"}
    pos = np.zeros((2, N_ATOMS, 3), np.float32)
    return run_from_arrays(pos, np.array([0.0, span_ps]), np.full(N_ATOMS, 12.0), energies=table, metadata=md), t, e


def _drift(res):
    return next(v for v in res.verdicts if v.kind == "energy.drift")


def test_a_start_up_step_is_left_out_of_the_fit():
    # as the GROMACS run below: 101 rows over 4 ps, the first 15 kJ/mol above the rest
    run, t, e = _run(0.0, first_step=-15.0, n=101, span_ps=4.0, noise=0.3)
    res = result_of(audit_run(run))
    d = res.energy.drift
    assert res.energy.fits_from_ps == pytest.approx(t[1])
    # the slope of the rows after the step, by numpy's own least squares
    assert d.slope_kJ_per_mol_per_ns == pytest.approx(1000.0 * np.polyfit(t[1:], e[1:], 1)[0], rel=1e-9)
    assert any("first energy row" in n for n in res.notes), res.notes
    jumps = next(v for v in res.verdicts if v.kind == "energy.jumps")
    assert jumps.level != "ok"  # still reported
    # with the row in, the step alone would look like a drift of several sigma
    with_step = np.polyfit(t, e, 1)[0] * 1000.0
    assert abs(with_step) > 5 * d.slope_error_kJ_per_mol_per_ns


def test_no_step_no_rows_left_out():
    run, t, e = _run(0.0)
    res = result_of(audit_run(run))
    assert res.energy.fits_from_ps is None
    assert res.energy.drift.slope_kJ_per_mol_per_ns == pytest.approx(1000.0 * np.polyfit(t, e, 1)[0], rel=1e-9)


def test_a_drift_the_run_cannot_resolve_is_info_not_ok():
    # 2 ps of noisy energies: the 95 % interval of the slope spans far more than the caution size
    noisy, _, _ = _run(0.0, noise=20.0, n=100, span_ps=2.0)
    v = _drift(result_of(audit_run(noisy)))
    assert v.level == "info" and "not resolved" in v.message, v.message
    assert v.measured == pytest.approx(abs(v.details["drift_kT_per_dof_per_ns"]))
    # 20 ps of quiet energies without drift: resolved, and ok
    quiet, _, _ = _run(0.0, noise=0.05)
    v = _drift(result_of(audit_run(quiet)))
    assert v.level == "ok", v.message


@pytest.mark.parametrize("tolerance, level", [(0.005, "caution"), (0.001, "problem"), (None, "problem")])
def test_a_drift_within_the_engine_target_is_a_caution(tolerance, level):
    # 0.2 kT/DOF/ns (twice our problem threshold) is 0.0015 kJ/mol/ps per atom here: within a 0.005 target,
    # not within 0.001; with no target stated, our thresholds alone decide
    run, _, _ = _run(0.2, tolerance=tolerance)
    v = _drift(result_of(audit_run(run)))
    assert v.level == level, v.message
    per_atom = 0.2 * N_DOF * KB * T_K / 1000.0 / N_ATOMS
    assert per_atom == pytest.approx(0.0015, rel=0.01)
    if tolerance == 0.005:
        assert "within that target" in v.message


@pytest.mark.parametrize("run_name", ["spce_flexible_nve_0.5fs", "spce_flexible_nve_2fs", "spce_rigid_nve_whole",
                                      "spce_rigid_nvt_vrescale"])
def test_gromacs_drift_line_read_and_its_rule_reproduced(run_name):
    # reference: md.log "Conserved energy drift" as make_engine_runs.py read it (reported.json), and
    # verlet-buffer-tolerance as mdout.mdp lists it
    d = ENGINES / run_name
    rep = json.loads((d / "reported.json").read_text())["reported"]
    run = open_run([d / "md.edr"])
    lines = run.metadata.extra["engine_drift"]
    assert [x["kJ_mol_ps_atom"] for x in lines] == [rep["conserved_energy_drift_kJ_mol_ps_atom"]]
    mdp = {k.strip(): v.strip() for k, _, v in (ln.partition("=") for ln in (d / "mdout.mdp").read_text().splitlines())
           if not k.lstrip().startswith(";")}
    assert run.metadata.extra["drift_tolerance"]["kJ_mol_ps_atom"] == float(mdp["verlet-buffer-tolerance"])
    # GROMACS's rule: (last - first conserved energy) / time / atoms, to the 3 digits it prints
    tab = run.energies
    col = "Conserved En." if "Conserved En." in tab.series else "Total Energy"
    e, t = tab.series[col].values, tab.time_ps
    ours = (e[-1] - e[0]) / (t[-1] - t[0]) / rep["atoms"]
    assert ours == pytest.approx(lines[0]["kJ_mol_ps_atom"], rel=6e-3)


def test_a_log_given_beside_its_edr_says_its_drift_once():
    # the folder holds md.log: read on its own and again as the .edr's neighbour, its line is kept once
    d = ENGINES / "spce_rigid_nvt_vrescale"
    for files in ([d], [d / "md.edr", d / "md.log"]):
        assert len(open_run(files).metadata.extra["engine_drift"]) == 1


def test_gromacs_parts_give_one_drift_line_each():
    d = ENGINES / "spce_rigid_nve_parts"
    run = open_run(sorted(d.glob("md*.edr")))
    spans = [(x["from_ps"], x["to_ps"]) for x in run.metadata.extra["engine_drift"]]
    assert spans == [(0.0, 1.2), (1.2, 2.4), (2.24, 3.6)]  # part 3 restarted from part 2's checkpoint at 2.24 ps


def test_gromacs_vrescale_run_start_step_and_engine_target():
    # the run continues from a .gro: its first conserved energy is 14.7 kJ/mol above the next (the start
    # before SETTLE); GROMACS's own drift line (-0.00923 kJ/mol/ps per atom) takes that step in whole
    d = ENGINES / "spce_rigid_nvt_vrescale"
    run = open_run([d / "md.edr", d / "md.trr", d / "md.gro"])
    res = result_of(audit_run(run))
    t = run.energies.time_ps
    e = run.energies.series["Conserved En."].values
    assert res.energy.fits_from_ps == pytest.approx(t[1])
    assert res.energy.drift.slope_kJ_per_mol_per_ns == pytest.approx(1000.0 * np.polyfit(t[1:], e[1:], 1)[0],
                                                                      rel=1e-9)
    v = _drift(res)
    assert "-0.00923 kJ/mol/ps per atom" in v.message and "0.005 kJ/mol/ps per atom" in v.message
    per_atom = res.energy.drift.slope_per_atom_kJ_per_mol_per_ns / 1000.0
    assert abs(per_atom) < 0.005  # within GROMACS's own target...
    assert v.level == "caution"  # ...so not a problem, though above our common-practice threshold


def test_a_large_drift_only_two_sigma_from_zero_is_a_caution():
    # 2 ps of noisy energies with a drift of ~2 kT/DOF/ns: its 95 % interval clears the problem size but
    # it is only ~2.5 standard errors from zero; the same drift on quiet energies (many sigma) is a problem
    def level(noise: float) -> tuple[str, float, str]:
        run, _, _ = _run(2.0, noise=noise, n=200, span_ps=2.0, seed=3)
        res = result_of(audit_run(run))
        v = _drift(res)
        return v.level, res.energy.drift.z_score, v.message

    noisy, z_noisy, words = level(22.0)
    quiet, z_quiet, _ = level(0.05)
    assert 2.0 < abs(z_noisy) < 3.0 and noisy == "caution", z_noisy
    assert "not 3 standard errors from zero" in words  # a problem by its interval alone, capped
    assert abs(z_quiet) > 10 and quiet == "problem", z_quiet


def test_describe_says_the_engines_drift_and_target():
    from phasewake.core.readers.describe import run_facts

    facts = {f["field"]: f for f in run_facts(open_run([ENGINES / "spce_rigid_nvt_vrescale" / "md.edr"]))}
    assert "-0.00923 kJ/mol/ps per atom over 0-4 ps" in facts["engine_drift"]["text"]
    assert facts["drift_tolerance"]["where"] == "from md.log (verlet-buffer-tolerance)"
