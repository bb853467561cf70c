"""``phasewake audit`` end to end: files on disk, exit codes, table, JSON, --compare, --explain.

Test data: atoms in harmonic traps integrated by velocity Verlet (vectorised), whose fluctuation ratio
is known analytically, R = (w dt)^2 / 4 (Tuckerman 2010 eq. 3.13.3, derived), plus the project's sample
runs and a real OpenMM water box when they are available.
"""

import hashlib
import json
import math
from pathlib import Path

import numpy as np
import pytest

from phasewake.app.cli import main

KB = 0.00831446261815324  # CODATA 2018


def traps_vv(n_atoms=32, *, dt, w, n_steps, every, m=12.0, temperature=300.0, seed=0, hot=0):
    rng = np.random.default_rng(seed)
    kt = KB * temperature
    k = m * w * w
    x = rng.normal(0, math.sqrt(kt / k), (n_atoms, 3))
    v = rng.normal(0, math.sqrt(kt / m), (n_atoms, 3))
    if hot:
        # independent traps never share energy: give the first `hot` atoms exactly 1.3x the energy per
        # atom of the others; their time-averaged K is half their energy (harmonic virial theorem)
        e = 0.5 * m * np.sum(v * v, axis=1) + 0.5 * k * np.sum(x * x, axis=1)
        f = math.sqrt(1.3 * e[hot:].mean() / e[:hot].mean())
        x[:hot] *= f
        v[:hot] *= f
    X, V = [x], [v]
    for s in range(1, n_steps + 1):
        v = v - 0.5 * dt * k / m * x
        x = x + dt * v
        v = v - 0.5 * dt * k / m * x
        if s % every == 0:
            X.append(x)
            V.append(v)
    X, V = np.array(X), np.array(V)
    t = np.arange(X.shape[0]) * dt * every
    kin = 0.5 * m * np.einsum("fai,fai->f", V, V)
    pot = 0.5 * k * np.einsum("fai,fai->f", X, X)
    return t, X, V, kin, pot


def write_traps(path, *, dt, w, n_steps, every, seed=0, observables=None, with_velocities=True, hot=0):
    from phasewake.core.readers.h5md import write_h5md

    t, X, V, kin, pot = traps_vv(dt=dt, w=w, n_steps=n_steps, every=every, seed=seed, hot=hot)
    obs = {"kinetic_energy": (kin, "kJ mol-1"), "potential_energy": (pot, "kJ mol-1"),
           "total_energy": (kin + pot, "kJ mol-1")} if observables is None else observables(kin, pot)
    write_h5md(path, positions_nm=X, time_ps=t, velocities_nm_per_ps=V if with_velocities else None,
               masses_amu=np.full(X.shape[1], 12.0), species=["C"] * X.shape[1], observables=obs,
               parameters={"timestep_ps": dt, "ensemble": "NVE", "thermostat": "none", "n_constraints": 0,
                           "com_motion_removed": 0, "integrator": "velocity-verlet"})
    return path


def _digest(p):
    return hashlib.sha256(Path(p).read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def good_and_bad(tmp_path_factory):
    d = tmp_path_factory.mktemp("audit")
    # w = 50/ps: period 126 fs. dt = 2 fs -> R = (0.1)^2/4 = 0.0025 (good); dt = 1 fs -> R/4.
    good = write_traps(d / "good.h5md", dt=0.002, w=50.0, n_steps=4000, every=4)
    half = write_traps(d / "half.h5md", dt=0.001, w=50.0, n_steps=8000, every=8)
    # dt = 14 fs: w dt = 0.7 -> R = 0.1225 (problem), 9 steps per period (caution)
    bad = write_traps(d / "bad.h5md", dt=0.014, w=50.0, n_steps=600, every=1)
    return good, half, bad


def test_good_run_exit_0_and_table(good_and_bad, capsys):
    good = good_and_bad[0]
    before = _digest(good)
    code = main(["audit", str(good)])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "Energy fluctuation ratio" in out and "common practice" in out
    assert "heuristics" in out  # the heuristics note (core.verdicts.HEURISTIC_NOTE)
    assert "total energy (column 'total_energy')" in out  # says which series was judged
    assert _digest(good) == before  # input opened read-only, unchanged


def test_too_large_step_exit_1_and_json(good_and_bad, capsys):
    bad = good_and_bad[2]
    code = main(["audit", str(bad), "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 1
    v = {x["kind"]: x for x in data["verdicts"]}
    # From Tuckerman 2010 eq. 3.13.3: E = H~ - K a/(1 - a), a = (w dt)^2/4, so R = a/(1 - a) exactly
    # (-> (w dt)^2/4 for small dt). Here a = 0.1225: R = 0.1396. Sampled every step.
    a = 0.7 ** 2 / 4
    assert v["energy.fluctuation_ratio"]["measured"] == pytest.approx(a / (1 - a), rel=0.02)
    assert v["energy.fluctuation_ratio"]["level"] == "problem"
    assert v["timestep.fastest_period"]["level"] == "caution"  # 2 pi / 0.7 = 9.0 steps per period
    assert v["timestep.fastest_period"]["measured"] == pytest.approx(2 * math.pi / 0.7, rel=0.05)
    for x in data["verdicts"]:
        assert "unit" in x and "message" in x
    assert data["energy"]["fluctuations"]["sigma_total_kJ_per_mol"] > 0
    assert data["temperature"]["n_dof"] == 96  # 3 N, no constraints, no COM removal (metadata)
    assert data["heuristic_note"]


def test_compare_measures_dt_squared_exponent(good_and_bad, capsys):
    good, half, _ = good_and_bad
    code = main(["audit", str(good), "--compare", str(half), "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 0
    # sigma_E ~ dt^2 for velocity Verlet (Hairer, Lubich & Wanner 2006): exponent 2 (+-1 % on the HO,
    # REFERENCES.md §1.3; more here because the runs are short and sampled differently)
    assert data["scaling"]["exponent"] == pytest.approx(2.0, abs=0.05)
    assert data["scaling"]["expected_ratio"] == pytest.approx(4.0)


def test_explain_prints_explanations(good_and_bad, capsys):
    main(["audit", str(good_and_bad[0]), "--explain"])
    out = capsys.readouterr().out
    assert "| method:" in out and "Tuckerman 2010" in out


def test_user_group_hotter_is_flagged(tmp_path, capsys):
    # Equipartition (Gibbs 1902): independent traps never exchange energy, so 16 atoms started 30 %
    # hotter stay hotter; the group must be flagged, relative difference ~ (1.3 - 1.15) / 1.15 = 13 %.
    p = write_traps(tmp_path / "hot.h5md", dt=0.002, w=50.0, n_steps=4000, every=4, hot=16)
    code = main(["audit", str(p), "--group", "hot=0-15", "--group", "cold=16-31", "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 1
    v = {x["kind"]: x for x in data["verdicts"]}
    assert v["temperature.equipartition"]["level"] == "problem"
    g = {x["name"]: x for x in data["temperature"]["groups"]}
    assert g["hot"]["significant"] and g["hot"]["relative_difference"] > 0.05
    assert main(["audit", str(p), "--group", "bad=0-99"]) == 2  # out of range: one-line error
    assert "out of range" in capsys.readouterr().err


def test_no_usable_energy_column_still_audits_what_it_can(tmp_path, capsys):
    # was: exit 2 "no usable energy column" (all or nothing). Positions only (velocities estimated) and
    # only a temperature observable: the energy checks say what they need, the temperature is still
    # computed and compared with the file's (velocities estimated 4 steps apart are biased low: the
    # central difference of x = A cos(w t) gives v * sin(w h)/(w h), w h = 0.4 here, i.e. T low by ~5 %)
    p = write_traps(tmp_path / "temps.h5md", dt=0.002, w=50.0, n_steps=200, every=4,
                    observables=lambda k, u: {"temperature": (2 * k / (96 * KB), "K")}, with_velocities=False)
    code = main(["audit", str(p), "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 1
    v = {x["kind"]: x for x in data["verdicts"]}
    assert v["energy.drift"]["message"].startswith("not checked: needs a conserved or total energy")
    ratio = (math.sin(0.4) / 0.4) ** 2  # <v_est^2>/<v^2> for a harmonic trap, derived
    assert v["temperature.file_mismatch"]["level"] == "problem"
    assert data["temperature"]["file_mismatch_relative"] == pytest.approx(ratio - 1, abs=0.02)


def test_missing_file_exit_2(tmp_path, capsys):
    assert main(["audit", str(tmp_path / "nope.h5md")]) == 2
    assert "Traceback" not in capsys.readouterr().err


def test_velocities_missing_when_asked_for_temperature_still_audits_the_table(tmp_path, capsys):
    # was: exit 2 "velocities are missing" (all or nothing: --constraints asked for a temperature the files
    # cannot give, and the energy checks were never run). Now the temperature says what it needs and the
    # table is audited; exit 2 is kept for files that cannot be read at all.
    csv = tmp_path / "energy.csv"
    csv.write_text("time (ps),total energy (kJ/mol)\n0,1.0\n0.1,1.1\n0.2,0.9\n0.3,1.0\n0.4,1.05\n")
    code = main(["audit", str(csv), "--constraints", "3", "--json"])
    data = json.loads(capsys.readouterr().out)
    v = {x["kind"]: x for x in data["verdicts"]}
    assert code == 0  # the time axis was checked and is fine; nothing else could be judged
    assert v["temperature.file_mismatch"]["message"].startswith("not checked")
    assert v["time.gaps"]["level"] == "ok"


# --- sample runs (sample_data/, generated by the project's own script) -------------------------------

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"


def _sample(name):
    p = SAMPLES / name
    if not p.exists():
        pytest.skip(f"sample run {name} not generated yet")
    return p


def _audit_json(path, capsys, *extra):
    code = main(["audit", str(path), "--json", *extra])
    data = json.loads(capsys.readouterr().out)
    return code, data, {v["kind"]: v for v in data["verdicts"]}


def test_sample_nve_ok(capsys):
    code, data, v = _audit_json(_sample("dimer_nve.h5md"), capsys)
    assert v["energy.fluctuation_ratio"]["level"] == "ok"  # sample made with R < 0.01 (common practice)
    assert v["energy.drift"]["level"] == "ok"


def test_sample_bigstep_flagged_on_drift_and_fluctuation(capsys):
    code, data, v = _audit_json(_sample("dimer_nve_bigstep.h5md"), capsys)
    assert code == 1
    assert v["energy.drift"]["level"] in ("caution", "problem")
    assert v["energy.fluctuation_ratio"]["level"] in ("caution", "problem")


def test_sample_langevin_ok_on_conserved_quantity(capsys):
    code, data, v = _audit_json(_sample("dimer_langevin.h5md"), capsys)
    assert "conserved" in data["energy"]["series_label"] or "bath heat" in data["energy"]["series_label"]
    assert data["energy"]["expected_conserved"]
    assert v["energy.drift"]["level"] == "ok"
    assert v["energy.fluctuation_ratio"]["level"] == "ok"


# --- real engine: OpenMM rigid TIP3P water box, NVE at 1 fs and 4 fs (tests/engine_runs.py) -----------


@pytest.mark.slow
def test_openmm_water_temperature_and_4fs_flagged_worse(openmm_water_1fs, openmm_water_4fs):
    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.progress import drive
    from phasewake.core.readers import open_run

    r1 = drive(audit_run(open_run([openmm_water_1fs.paths["h5md"]])))
    r4 = drive(audit_run(open_run([openmm_water_4fs.paths["h5md"]])))
    # constraints counted: rigid water has 3 per molecule; OpenMM's own count (System.getNumConstraints)
    assert r1.temperature.n_constraints == openmm_water_1fs.n_constraints
    assert r1.temperature.n_dof == openmm_water_1fs.n_dof
    # kinetic temperature equals OpenMM's own (its kinetic energy, its DOF count) within 0.1 K
    assert r1.temperature.mean_K == pytest.approx(float(np.mean(openmm_water_1fs.temperature_K)), abs=0.1)
    # the 4 fs run is worse: larger fluctuation ratio (~9x spread seen at 4 fs), flagged
    f1 = r1.energy.fluctuations.ratio
    f4 = r4.energy.fluctuations.ratio
    assert f4 > 3 * f1
    v1 = {v.kind: v for v in r1.verdicts}
    v4 = {v.kind: v for v in r4.verdicts}
    assert v1["energy.fluctuation_ratio"].level == "ok"
    # the 4 fs run's R (~0.04) is within "acceptable" (<= 0.05, common practice): it is flagged by the time
    # step against the librations below, and its ratio is reported, larger than the 1 fs run's
    assert v4["energy.fluctuation_ratio"].measured > 3 * v1["energy.fluctuation_ratio"].measured
    # rigid-water librations reach ~1000 cm^-1 (period ~33 fs): 4 fs is under 10 steps, 1 fs is not
    assert v1["timestep.fastest_period"].level == "ok"
    assert v4["timestep.fastest_period"].level in ("caution", "problem")


@pytest.mark.slow
def test_openmm_water_constraints_inferred_without_metadata(openmm_water_1fs):
    # DCD + PDB + CSV carry no constraint count: inferred from rigid pairs = OpenMM's own count
    # (System.getNumConstraints: 3 per rigid water), and T equals OpenMM's within 0.1 K.
    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.progress import drive
    from phasewake.core.readers import open_run

    p = openmm_water_1fs.paths
    r = drive(audit_run(open_run([p["dcd"], p["pdb"], p["csv"]])))
    assert r.temperature.n_constraints == openmm_water_1fs.n_constraints == 3 * openmm_water_1fs.n_waters
    assert "inferred" in r.temperature.constraints_source
    assert r.temperature.n_dof == openmm_water_1fs.n_dof
    assert r.temperature.mean_K == pytest.approx(float(np.mean(openmm_water_1fs.temperature_K)), abs=0.1)


def test_energy_table_only_gets_dof_from_its_own_columns(tmp_path, capsys):
    pytest.importorskip("phasewake.core.readers.tables")
    # K and T written with N_dof = 300 (T = 2K / (N_dof k_B), CODATA 2018 k_B): the audit recovers 300
    rng = np.random.default_rng(9)
    n = 400
    t = np.arange(n) * 0.01
    k = 374.0 + rng.normal(0, 5, n)
    temp = 2 * k / (300 * KB)
    tot = -1000 + rng.normal(0, 0.01, n)
    rows = "\n".join(f"{a:.4f},{b:.6f},{c:.6f},{d:.6f}" for a, b, c, d in zip(t, k, temp, tot))
    csv = tmp_path / "e.csv"
    csv.write_text("time (ps),kinetic energy (kJ/mol),temperature (K),total energy (kJ/mol)\n" + rows + "\n")
    code = main(["audit", str(csv), "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 0
    assert any("N_dof = 300" in n for n in data["notes"])
    assert data["energy"]["drift"]["slope_kT_per_dof_per_ns"] is not None


def test_sample_runs_follow_dt_squared(capsys):
    # The two NVE sample runs differ only in the step (4 fs and 40 fs): sigma_E ~ dt^2 for velocity
    # Verlet (Hairer, Lubich & Wanner 2006); 40 fs is far from the small-step limit, so the tolerance
    # is loose (+-0.5 on the exponent, common practice).
    code = main(["audit", str(_sample("dimer_nve.h5md")), "--compare", str(_sample("dimer_nve_bigstep.h5md")),
                 "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 1  # the comparison run itself has problems
    assert data["scaling"]["exponent"] == pytest.approx(2.0, abs=0.5)
    assert data["compared"]["level"] in ("caution", "problem")
