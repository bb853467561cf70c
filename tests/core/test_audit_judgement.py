"""The audit's judgement on runs whose files say little: the ensemble, partial data, restarts glued into
one file, temperatures that rest on an assumption, half-step velocities, and equipartition groups.

Every case is made here with a known answer: BAOAB Langevin dynamics (Leimkuhler and Matthews 2013) of
harmonic traps, Maxwell-Boltzmann velocities drawn at set temperatures (equipartition theorem: <1/2 m
v_x^2> = kT/2 per quadratic degree of freedom), velocities projected onto rigid water (a rigid molecule
has 6 kinetic degrees of freedom), and leapfrog half-step velocities whose full-step kinetic energy is
defined as GROMACS writes it (KE(n) = mean of 1/2 m v^2 of TRR frames n and n+1).
"""

import json
import math

import numpy as np
import pytest

from phasewake.app.cli import main
from phasewake.core.analyses.audit import audit_run, decide_ensemble
from phasewake.core.model.integrators import run_baoab
from phasewake.core.model.run import EnergyTable, RunMetadata, Series
from phasewake.core.progress import drive
from phasewake.core.readers import open_run
from phasewake.core.readers.memory import run_from_arrays

KB = 0.00831446261815324  # kJ/mol/K, CODATA 2018 (R / 1000)


def _traps(k):
    def force(x):
        return -k * x, 0.5 * k * np.einsum("...ai,...ai->...", x, x)

    return force


def _verdicts(res):
    return {v.kind: v for v in res.verdicts}


# --- 3: a thermostatted run whose files do not say so ----------------------------------------------------


@pytest.fixture(scope="module")
def langevin_traps():
    """64 carbon atoms in harmonic traps (k = 300 kJ/mol/nm^2), BAOAB at 300 K, gamma = 5/ps, dt = 2 fs."""
    rng = np.random.default_rng(3)
    n, m, temp = 64, 12.0, 300.0
    k = 300.0
    x0 = rng.normal(0, math.sqrt(KB * temp / k), (n, 3))
    v0 = rng.normal(0, math.sqrt(KB * temp / m), (n, 3))
    return drive(run_baoab(x0, v0, np.full(n, m), _traps(k), timestep_ps=0.002, n_steps=8000,
                           temperature_K=temp, friction_per_ps=5.0, seed=11, record_every=8))


def _table(t, **cols):
    return EnergyTable(time_ps=np.asarray(t, float),
                       series={name: Series(name, np.asarray(v, float), unit, role)
                               for name, (v, unit, role) in cols.items()})


@pytest.mark.slow  # measured 0.6 s of CPU
def test_langevin_run_without_ensemble_gets_no_conservation_problem(langevin_traps):
    r = langevin_traps
    # the files hold K, U and their total but say nothing of a thermostat or a bath
    table = _table(r.time_ps, kinetic=(r.kinetic_kJ_per_mol, "kJ/mol", "kinetic"),
                   potential=(r.potential_kJ_per_mol, "kJ/mol", "potential"),
                   total=(r.total_kJ_per_mol, "kJ/mol", "total"))
    run = run_from_arrays(r.positions_nm, r.time_ps, np.full(64, 12.0), velocities_nm_per_ps=r.velocities_nm_per_ps,
                          energies=table)
    res = drive(audit_run(run))
    v = _verdicts(res)
    # canonical sampling: sigma_E^2 = sigma_K^2 + sigma_U^2 for independent K and U of a harmonic system,
    # so sigma_E/sigma_K = sqrt(2) (equipartition; derived): far above an NVE run's 0.01-0.05
    assert res.thermostatted and res.ensemble_origin == "inferred"
    assert "sigma_E/sigma_K" in res.ensemble_source and "thermostat" in res.ensemble_source
    assert "inferred" in v["ensemble"].message
    for kind in ("energy.drift", "energy.fluctuation_ratio"):
        assert v[kind].level == "info"
        assert "needs the thermostat's energy or the engine's conserved quantity" in v[kind].message
    assert not any(x.level == "problem" for x in res.verdicts), [x.message for x in res.verdicts if x.level == "problem"]
    assert res.overall == "ok"
    # the same run judged as NVE (what the audit did before) flags its total energy as a problem
    run_nve = run_from_arrays(r.positions_nm, r.time_ps, np.full(64, 12.0), velocities_nm_per_ps=r.velocities_nm_per_ps,
                              energies=table, metadata=RunMetadata(ensemble="NVE", sources={"ensemble": "user"}))
    assert _verdicts(drive(audit_run(run_nve)))["energy.fluctuation_ratio"].level == "problem"


def test_stated_temperature_implies_a_thermostat_and_bath_heat_is_judged(langevin_traps):
    r = langevin_traps
    table = _table(r.time_ps, total=(r.total_kJ_per_mol, "kJ/mol", "total"),
                   kinetic=(r.kinetic_kJ_per_mol, "kJ/mol", "kinetic"))
    run = run_from_arrays(r.positions_nm, r.time_ps, np.full(64, 12.0), energies=table)
    d = decide_ensemble(run, temperature_K=300.0)
    assert d.thermostatted and d.origin == "stated" and "300 K" in d.source
    # with the bath heat in the files, the conserved quantity K + U + heat is judged (and is conserved:
    # BAOAB's B and A parts are velocity Verlet, Leimkuhler and Matthews 2013)
    table2 = _table(r.time_ps, total=(r.total_kJ_per_mol, "kJ/mol", "total"),
                    kinetic=(r.kinetic_kJ_per_mol, "kJ/mol", "kinetic"),
                    heat=(r.bath_heat_kJ_per_mol, "kJ/mol", "bath_heat"))
    run2 = run_from_arrays(r.positions_nm, r.time_ps, np.full(64, 12.0), energies=table2)
    res = drive(audit_run(run2))
    assert res.thermostatted and "bath-heat" in res.ensemble_source
    assert res.energy.expected_conserved and "bath heat" in res.energy.series_label


# --- 4: all or nothing -----------------------------------------------------------------------------------


def _two_species(tmp_path, t_hot=315.0, t_cold=285.0, n_each=200, n_frames=60, seed=5):
    """Velocities only (no energies): argon atoms drawn at ``t_hot`` and neon atoms at ``t_cold`` per frame."""
    from phasewake.core.readers.h5md import write_h5md

    rng = np.random.default_rng(seed)
    m = np.r_[np.full(n_each, 39.948), np.full(n_each, 20.180)]
    temps = np.r_[np.full(n_each, t_hot), np.full(n_each, t_cold)]
    v = rng.normal(size=(n_frames, 2 * n_each, 3)) * np.sqrt(KB * temps / m)[None, :, None]
    x = rng.uniform(0, 3.0, size=(n_frames, 2 * n_each, 3))
    t = 0.1 * np.arange(n_frames)
    p = tmp_path / "two_species.h5md"
    write_h5md(p, positions_nm=x, time_ps=t, velocities_nm_per_ps=v, masses_amu=m,
               species=["Ar"] * n_each + ["Ne"] * n_each)
    return p


def test_two_species_at_different_temperatures_without_energies(tmp_path, capsys):
    # was: exit 2 "no usable energy column". Equipartition theorem: each species' kinetic temperature is
    # the temperature it was drawn at, 315 K and 285 K: a 30 K split (10 % of 300 K) far beyond its error
    p = _two_species(tmp_path, n_each=500, n_frames=300)
    code = main(["audit", str(p), "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 1
    v = {x["kind"]: x for x in data["verdicts"]}
    assert v["temperature.equipartition"]["level"] == "problem"
    split = data["temperature"]["split"]
    assert {split["hot"], split["cold"]} == {"element Ar", "element Ne"}
    # 300 independent frames x 1500 DOF per species: relative error of a species' mean T sqrt(2 / 450000)
    # (K ~ Gamma(N_dof/2, kT)); the split's error sqrt(2) x 300 K x sqrt(2 / 1500) / sqrt(300) = 0.9 K: ~33 sigma
    err = math.sqrt(2 / 450000)
    assert split["hot_K"] == pytest.approx(315.0, abs=4 * 315 * err)
    assert split["cold_K"] == pytest.approx(285.0, abs=4 * 285 * err)
    assert split["z"] > 20
    assert v["energy.drift"]["message"].startswith("not checked: the run has no energy table")


def test_caution_sized_split_far_beyond_its_error_is_a_problem(tmp_path, capsys):
    # 306 K against 294 K: a 4 % split (caution by size alone, common practice); with 2000 atoms of each
    # species over 300 frames its error is sqrt(2) x 300 K x sqrt(2 / 6000) / sqrt(300) = 0.45 K, so the
    # split lies ~27 sigma out (beyond 20 sigma: judged as a problem)
    p = _two_species(tmp_path, t_hot=306.0, t_cold=294.0, n_each=2000, n_frames=300)
    code = main(["audit", str(p), "--json"])
    data = json.loads(capsys.readouterr().out)
    v = {x["kind"]: x for x in data["verdicts"]}
    assert code == 1
    assert data["temperature"]["split"]["z"] > 20
    assert 0.02 < abs(data["temperature"]["split"]["split_K"]) / 300 < 0.05
    assert v["temperature.equipartition"]["level"] == "problem"


def test_same_temperature_species_are_not_flagged(tmp_path, capsys):
    p = _two_species(tmp_path, t_hot=300.0, t_cold=300.0)
    main(["audit", str(p), "--json"])
    data = json.loads(capsys.readouterr().out)
    v = {x["kind"]: x for x in data["verdicts"]}
    assert v["temperature.equipartition"]["level"] == "ok"


def test_potential_only_table_gives_what_it_can(tmp_path, capsys):
    # a potential energy with a +50 kJ/mol step at t = 3 ps: the jump is found, the conservation checks
    # say what they need, and the command exits 1 (a problem was found)
    rng = np.random.default_rng(2)
    t = 0.01 * np.arange(600)
    u = -500 + rng.normal(0, 1.0, t.size) + 50.0 * (t >= 3.0)
    csv = tmp_path / "pot.csv"
    csv.write_text("time (ps),potential energy (kJ/mol)\n" + "\n".join(f"{a:.2f},{b:.5f}" for a, b in zip(t, u)) + "\n")
    code = main(["audit", str(csv), "--json"])
    data = json.loads(capsys.readouterr().out)
    v = {x["kind"]: x for x in data["verdicts"]}
    assert code == 1
    assert v["energy.drift"]["message"].startswith("not checked: needs a total energy")
    assert v["energy.jumps"]["level"] == "problem"
    assert v["energy.jumps"]["details"]["times_ps"] == [pytest.approx(3.0)]


def test_one_row_table_is_not_checked_and_exits_1(tmp_path, capsys):
    csv = tmp_path / "one.csv"
    csv.write_text("time (ps),total energy (kJ/mol),kinetic energy (kJ/mol)\n0,-1000,300\n")
    code = main(["audit", str(csv)])
    out = capsys.readouterr().out
    assert code == 1
    assert "overall: not checked" in out and "overall: ok" not in out
    assert "too few rows (1" in out
    main(["audit", str(csv), "--json"])
    data = json.loads(capsys.readouterr().out)
    assert data["checked"] is False and data["overall"] == "not checked"
    assert all(x["level"] == "info" for x in data["verdicts"])


# --- 5: restarts glued into one file ---------------------------------------------------------------------


def test_glued_restart_overlap_and_jump_reported_with_times(tmp_path, capsys):
    # run A: 0..10 ps; run B restarted from 9.5 ps (5 rows back) with the energy 40 kJ/mol higher
    rng = np.random.default_rng(7)
    dt = 0.1
    ta = dt * np.arange(101)  # 0 .. 10 ps
    tb = 9.5 + dt * np.arange(1, 101)  # 9.6 .. 19.5 ps
    ea = -1000 + rng.normal(0, 0.2, ta.size)
    eb = -960 + rng.normal(0, 0.2, tb.size)
    ka = 300 + rng.normal(0, 5, ta.size)
    kb = 300 + rng.normal(0, 5, tb.size)
    rows = [(a, b, c) for a, b, c in zip(ta, ea, ka)] + [(a, b, c) for a, b, c in zip(tb, eb, kb)]
    csv = tmp_path / "glued.csv"
    csv.write_text("time (ps),total energy (kJ/mol),kinetic energy (kJ/mol)\n"
                   + "\n".join(f"{a:.1f},{b:.4f},{c:.4f}" for a, b, c in rows) + "\n")
    code = main(["audit", str(csv), "--ensemble", "nve", "--json"])
    data = json.loads(capsys.readouterr().out)
    v = {x["kind"]: x for x in data["verdicts"]}
    assert code == 1
    (join,) = v["time.restarts"]["details"]["joins"]
    assert join["time_ps"] == pytest.approx(9.6) and join["back_from_ps"] == pytest.approx(10.0)
    assert join["n_dropped"] == 5  # rows 9.6 .. 10.0 ps of run A, replaced by run B
    assert join["energy_step_kJ_per_mol"] == pytest.approx(40.0, abs=2.0)
    assert v["time.restarts"]["level"] == "caution"
    assert v["energy.jumps"]["level"] == "problem"
    assert v["energy.jumps"]["details"]["times_ps"] == [pytest.approx(9.6)]
    # the checks ran on the kept rows: 96 of run A and 100 of run B
    assert data["energy"]["sampling"][0]["n_samples"] == 196
    code = main(["audit", str(csv), "--ensemble", "nve"])
    out = capsys.readouterr().out
    assert "time went back from 10 ps" in out and "t = 9.6 ps" in out


# --- 7: temperatures that rest on an assumption, half-step velocities -------------------------------------


def _rigid_water_velocities(rng, n_mol, n_frames, temp):
    """Positions and velocities of rigid water molecules (O, H, H) at ``temp``.

    Maxwell-Boltzmann velocities projected onto the three bond-length constraints with the mass-weighted
    projection (v' = v - M^-1 G^T (G M^-1 G^T)^-1 G v): that leaves the canonical distribution of the 6
    rigid-body degrees of freedom, so <K> = 6/2 kT per molecule (equipartition).
    """
    m = np.tile([15.999, 1.008, 1.008], n_mol)
    r, ang = 0.09572, math.radians(104.52)
    local = np.array([[0, 0, 0], [r, 0, 0], [r * math.cos(ang), r * math.sin(ang), 0]])
    xs, vs = [], []
    for _ in range(n_frames):
        q, _ = np.linalg.qr(rng.normal(size=(n_mol, 3, 3)))
        x = np.einsum("mij,aj->mai", q, local) + rng.uniform(0, 3, (n_mol, 1, 3))
        v = rng.normal(size=(n_mol, 3, 3)) * np.sqrt(KB * temp / m.reshape(n_mol, 3))[..., None]
        pairs = [(0, 1), (0, 2), (1, 2)]
        g = np.zeros((n_mol, 3, 9))
        for c, (a, b) in enumerate(pairs):
            d = x[:, a] - x[:, b]
            g[:, c, 3 * a:3 * a + 3] = d
            g[:, c, 3 * b:3 * b + 3] = -d
        minv = np.repeat(1.0 / m.reshape(n_mol, 3), 3, axis=1)  # (n_mol, 9)
        vf = v.reshape(n_mol, 9)
        a_mat = np.einsum("mci,mi,mdi->mcd", g, minv, g)
        lam = np.linalg.solve(a_mat, np.einsum("mci,mi->mc", g, vf)[..., None])[..., 0]
        vf = vf - minv * np.einsum("mci,mc->mi", g, lam)
        xs.append(x.reshape(-1, 3))
        vs.append(vf.reshape(-1, 3))
    return np.array(xs), np.array(vs), m


def test_constrained_run_without_topology_names_the_assumption_and_both_values():
    rng = np.random.default_rng(8)
    n_mol, n_frames = 200, 20
    x, v, m = _rigid_water_velocities(rng, n_mol, n_frames, 300.0)
    run = run_from_arrays(x, 0.05 * np.arange(n_frames), m, velocities_nm_per_ps=v,
                          metadata=RunMetadata(ensemble="NVE", sources={"ensemble": "test"}))
    res = drive(audit_run(run))
    v_ = _verdicts(res)
    a = v_["temperature.assumption"]
    assert a.level == "caution"
    assert "assumes 0 constraints" in a.message and "rigid" in a.message
    # N_dof = 9N - 3 assumed against 6N - 3 for rigid water: T scales by (9N - 3)/(6N - 3)
    n_dof0, n_dof1 = 9 * n_mol - 3, 6 * n_mol - 3
    assert res.temperature.mean_K == pytest.approx(300.0 * 6 * n_mol / n_dof0, rel=0.03)
    assert res.temperature.assumption["other_mean_K"] == pytest.approx(300.0 * 6 * n_mol / n_dof1, rel=0.03)
    assert f"{res.temperature.assumption['other_mean_K']:.4g} K" in a.message
    assert f"{res.temperature.mean_K:.4g} K" in a.message
    # O against H per atom is no equipartition test when the molecules may be rigid (a rigid water's O and
    # H atoms carry different shares of its 6 quadratic terms): those groups are left out, not a problem
    assert v_["temperature.equipartition"].level == "info"
    assert any("not judged" in n for n in res.notes)


def _leapfrog_traps(n_steps, every, dt=0.004, w=60.0, m=12.0, n=32, temp=300.0, seed=4):
    """Leapfrog on harmonic traps: frame n holds x(t_n) and v(t_n - dt/2), as a GROMACS TRR does."""
    rng = np.random.default_rng(seed)
    k = m * w * w
    x = rng.normal(0, math.sqrt(KB * temp / k), (n, 3))
    v_half = rng.normal(0, math.sqrt(KB * temp / m), (n, 3))  # v(-dt/2)
    xs, vs = [x.copy()], [v_half.copy()]
    for s in range(1, n_steps + 1):
        v_half = v_half - dt * k / m * x  # v(t + dt/2)
        x = x + dt * v_half
        if s % every == 0:
            xs.append(x.copy())
            vs.append(v_half.copy())  # frame at t: v(t - dt/2)
    return np.array(xs), np.array(vs), np.full(n, m), dt * every * np.arange(len(xs)), dt


def _half_step_md(dt):
    return RunMetadata(ensemble="NVE", timestep_ps=dt, integrator="leapfrog", velocities_half_step=True,
                       n_constraints=0, sources={"ensemble": "test", "velocities_half_step": "md.mdp",
                                                 "n_constraints": "test"})


def test_leapfrog_every_step_is_averaged_to_full_steps_as_gromacs_does():
    x, v, m, t, dt = _leapfrog_traps(n_steps=2000, every=1)
    run = run_from_arrays(x, t, m, velocities_nm_per_ps=v, metadata=_half_step_md(dt))
    res = drive(audit_run(run))
    k_half = 0.5 * np.einsum("a,fai,fai->f", m, v, v)
    k_full = 0.5 * (k_half[:-1] + k_half[1:])  # GROMACS leap-frog: edr KE(n) = mean of frames n and n+1
    n_dof = 3 * 32 - 3
    np.testing.assert_allclose(res.temperature.temperature_K, 2 * k_full / (n_dof * KB), rtol=1e-5)
    assert "averaged to full steps" in res.temperature.kinetic_source
    assert _verdicts(res)["temperature.half_step"].level == "info"


def test_leapfrog_sparse_frames_flagged_and_file_kinetic_energy_preferred():
    x, v, m, t, dt = _leapfrog_traps(n_steps=4000, every=10)
    run = run_from_arrays(x, t, m, velocities_nm_per_ps=v, metadata=_half_step_md(dt))
    res = drive(audit_run(run))
    hs = _verdicts(res)["temperature.half_step"]
    assert hs.level == "caution" and "used as they are" in hs.message
    # with the engine's kinetic energy in the files (GROMACS convention, every step; the rows at the frame
    # times), that is what is shown, and the half-step velocities are said to be the reason
    xa, va, ma, ta, _ = _leapfrog_traps(n_steps=4000, every=1)
    k_half = 0.5 * np.einsum("a,fai,fai->f", ma, va, va)
    k_full = 0.5 * (k_half[:-1] + k_half[1:])
    rows = np.arange(0, k_full.size, 10)
    table = _table(ta[rows], kinetic=(k_full[rows], "kJ/mol", "kinetic"))
    run2 = run_from_arrays(xa[rows], ta[rows], ma, velocities_nm_per_ps=va[rows], energies=table,
                           metadata=_half_step_md(dt))
    res2 = drive(audit_run(run2))
    assert res2.temperature.kinetic_source.startswith("the file's kinetic energy")
    assert "half a step off" in res2.temperature.kinetic_source
    np.testing.assert_allclose(res2.temperature.mean_K, np.mean(2 * k_full[rows] / ((3 * 32 - 3) * KB)), rtol=1e-9)
    assert "temperature.half_step" in _verdicts(res2) and _verdicts(res2)["temperature.half_step"].level == "info"


def test_restart_in_a_trajectory_is_kept_later_and_audited(tmp_path):
    from phasewake.core.readers.h5md import write_h5md

    x, v, m, t, dt = _leapfrog_traps(n_steps=400, every=4)
    t2 = t.copy()
    t2[60:] -= t[5]  # back by 5 frames at frame 60
    write_h5md(tmp_path / "r.h5md", positions_nm=x, time_ps=t2, velocities_nm_per_ps=v, masses_amu=m,
               parameters={"ensemble": "NVE", "n_constraints": 0})
    run = open_run([tmp_path / "r.h5md"])
    assert run.n_frames == x.shape[0] - 5
    res = drive(audit_run(run))
    r = _verdicts(res)["time.restarts"]
    assert r.level == "caution" and "trajectory" in r.message
    assert r.details["joins"][0]["time_ps"] == pytest.approx(t2[60])
