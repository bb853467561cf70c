"""``phasewake memory``: numbers on H5MD files made here, against analytic results and reference
libraries (emcee, pymbar-free), exit codes, and inputs left untouched."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pytest
from scipy.signal import lfilter

from phasewake.app.cli import main
from phasewake.core.readers.h5md import write_h5md

C_CM_PER_PS = 2.99792458e10 * 1e-12  # speed of light, cm/ps (exact)
KB = 0.00831446261815324  # kJ/mol/K (exact, SI 2019)


def _digest(p: Path) -> str:
    return hashlib.sha256(Path(p).read_bytes()).hexdigest()


def _langevin_file(path: Path, *, seed: int, n_frames: int = 20_000, n_atoms: int = 10, shift: float = 0.0):
    """Free Langevin particles (exact Ornstein-Uhlenbeck velocities), wrapped in a 3 nm box, plus an AR(1)
    'potential' observable (phi = 0.9, g = 19) and the kinetic energy."""
    rng = np.random.default_rng(seed)
    m, gamma, temp, dt = 12.0, 3.0, 300.0, 0.01
    kT = KB * temp
    a = np.exp(-gamma * dt)
    noise = rng.standard_normal((n_frames, n_atoms, 3)) * np.sqrt(kT / m * (1 - a * a))
    noise[0] = rng.standard_normal((n_atoms, 3)) * np.sqrt(kT / m)
    v = lfilter([1.0], [1.0, -a], noise, axis=0)
    x0 = rng.uniform(0, 3.0, (1, n_atoms, 3))
    x = x0 + np.concatenate([np.zeros((1, n_atoms, 3)), np.cumsum(0.5 * (v[1:] + v[:-1]), axis=0) * dt])
    pot = lfilter([1.0], [1.0, -0.9], rng.standard_normal(n_frames)) + shift
    kin = 0.5 * m * np.einsum("fnc,fnc->f", v, v)
    write_h5md(path, positions_nm=np.mod(x, 3.0), time_ps=np.arange(n_frames) * dt, velocities_nm_per_ps=v,
               box_nm=np.array([3.0, 3.0, 3.0]), masses_amu=np.full(n_atoms, m), species=["C"] * n_atoms,
               observables={"potential_energy": (pot, "kJ mol-1"), "kinetic_energy": (kin, "kJ mol-1")},
               parameters={"temperature_K": temp, "ensemble": "NVT", "thermostat": "langevin"})
    return path, pot, kT / (m * gamma)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("memory")
    run, pot, d_exact = _langevin_file(d / "run.h5md", seed=1)
    rep_same, _, _ = _langevin_file(d / "rep_same.h5md", seed=2)
    rep_shift, _, _ = _langevin_file(d / "rep_shift.h5md", seed=3, shift=3.0)
    return {"run": run, "pot": pot, "D": d_exact, "same": rep_same, "shift": rep_shift, "dir": d}


def _json(capsys):
    return json.loads(capsys.readouterr().out)


@pytest.mark.slow  # measured 1.3-6.3 s of CPU
def test_default_summarises_every_energy_series(files, capsys):
    import emcee

    before = _digest(files["run"])
    rc = main(["memory", str(files["run"]), "--json"])
    out = _json(capsys)
    assert rc in (0, 1)
    names = {s["name"]: s for s in out["series"]}
    assert {"potential_energy", "kinetic_energy"} <= set(names)
    pot = names["potential_energy"]
    # emcee's integrated_time is g (it calls it tau); Sokal window c = 5 on both sides
    ref = float(emcee.autocorr.integrated_time(files["pot"], c=5, quiet=True)[0])
    assert pot["statistical_inefficiency_g"] == pytest.approx(ref, rel=1e-6)
    assert pot["statistical_inefficiency_g"] == pytest.approx(19.0, rel=0.25)  # AR(1): (1+phi)/(1-phi)
    assert pot["tau_int_sokal_ps"] == pytest.approx(pot["statistical_inefficiency_g"] / 2 * 0.01)
    assert pot["effective_sample_size"] == pytest.approx(20_000 / pot["statistical_inefficiency_g"])
    assert pot["unit"] == "kJ/mol" and pot["acf"]["rho"][0] == 1.0
    # blocking plateau within 15% of the analytic SEM sqrt(g var / N) (Flyvbjerg-Petersen; REFERENCES 3.6)
    assert pot["blocking"]["plateau_sem"] == pytest.approx(np.sqrt(19 / (1 - 0.81) / 20_000), rel=0.15)
    assert {v["kind"] for v in pot["verdicts"]} >= {"sampling.ess", "sampling.rhat", "sampling.divergence",
                                                    "sampling.equilibration"}
    assert "heuristics" in out["note"]
    assert _digest(files["run"]) == before  # read-only


def test_text_output_names_conventions(files, capsys):
    rc = main(["memory", str(files["run"]), "--series", "potential", "--method", "geyer", "--explain"])
    text = capsys.readouterr().out
    assert rc in (0, 1)
    assert "statistical inefficiency g" in text and "tau_int (Sokal, g/2)" in text
    assert "geyer" in text and "blocking standard error" in text and "split R-hat" in text
    assert "heuristics" in text and "method:" in text  # --explain adds the method and source


def test_vacf_green_kubo_and_msd(files, capsys):
    rc = main(["memory", str(files["run"]), "--vacf", "--msd", "--max-lag", "3", "--viscosity", "0.9", "--json"])
    out = _json(capsys)
    assert rc in (0, 1)
    gk = out["green_kubo"][0]
    # Langevin free particle: D = kT/(m gamma) (Einstein relation); 10 particles x 200 ps: +-10%
    assert gk["diffusion_nm2_per_ps"] == pytest.approx(files["D"], rel=0.10)
    assert gk["limit_ps"] > 1.0 and gk["limit_rule"]
    assert out["msd"]["diffusion_nm2_per_ps"][0] == pytest.approx(files["D"], rel=0.10)
    assert out["msd"]["unwrapped"] is True
    # VACF(0) per atom = 3 kT/m (equipartition)
    assert out["vacf"]["vacf"][0][0] == pytest.approx(3 * KB * 300 / 12.0, rel=0.03)
    # Yeh-Hummer: xi kT/(6 pi eta L) with xi = 2.837297 (Yeh & Hummer 2004), in nm^2/ps
    yh = 2.837297 * 1.380649e-23 * 300 / (6 * np.pi * 0.9e-3 * 3e-9) * 1e6
    assert out["yeh_hummer"]["correction_nm2_per_ps"] == pytest.approx(yh, rel=1e-6)
    assert out["yeh_hummer"]["box_edge_nm"] == pytest.approx(3.0)


def test_spectrum_of_analytic_oscillators(tmp_path, capsys):
    # exact harmonic motion at 1000 and 3000 cm^-1 (x = A cos(w t + phase)); frames every 1 fs for 4 ps
    rng = np.random.default_rng(4)
    t = np.arange(4000) * 0.001
    w = 2 * np.pi * C_CM_PER_PS * np.array([1000.0, 3000.0, 1000.0, 3000.0])
    phase = rng.uniform(0, 2 * np.pi, (4, 3))
    amp = np.array([0.01, 0.004, 0.01, 0.004])
    x = 1.0 + amp[None, :, None] * np.cos(w[None, :, None] * t[:, None, None] + phase[None])
    v = -(amp * w)[None, :, None] * np.sin(w[None, :, None] * t[:, None, None] + phase[None])
    path = tmp_path / "osc.h5md"
    write_h5md(path, positions_nm=x, time_ps=t, velocities_nm_per_ps=v, masses_amu=np.array([12.0, 1.0, 12.0, 1.0]),
               species=["C", "H", "C", "H"])
    rc = main(["memory", str(path), "--spectrum", "--json"])
    s = _json(capsys)["spectrum"]
    assert rc == 0
    peaks = sorted(p["wavenumber_cm1"] for p in s["peaks"])
    assert len(peaks) == 2
    assert abs(peaks[0] - 1000) <= s["resolution_cm1"] and abs(peaks[1] - 3000) <= s["resolution_cm1"]
    assert s["highest_significant_peak_cm1"] == pytest.approx(peaks[1])
    assert s["nyquist_cm1"] == pytest.approx(1 / (2 * C_CM_PER_PS * 0.001))  # 16678 cm^-1 at 1 fs
    rc = main(["memory", str(path), "--spectrum"])
    text = capsys.readouterr().out
    assert "Nyquist limit" in text and "highest significant peak" in text and "THz" in text


@pytest.mark.slow  # measured 1.3-6.3 s of CPU
def test_replicas_rhat(files, capsys):
    main(["memory", str(files["run"]), "--series", "potential_energy", "--replica", str(files["same"]), "--json"])
    same = _json(capsys)["series"][0]["rhat_replicas"]
    main(["memory", str(files["run"]), "--series", "potential_energy", "--replica", str(files["same"]),
          "--replica", str(files["shift"]), "--json"])
    shifted = _json(capsys)["series"][0]["rhat_replicas"]
    assert same["n_chains"] == 2 and shifted["n_chains"] == 3
    assert same["rhat"] < 1.05  # same distribution (g = 19, 1000 independent samples per chain)
    assert shifted["rhat"] > 1.1  # one replica offset by 3 (about 1.3 sigma): flagged as a problem


@pytest.mark.slow  # measured 1.3-6.3 s of CPU
def test_coordinate_and_groups(files, capsys):
    rc = main(["memory", str(files["run"]), "-c", "x(0)", "--stop", "5000", "--json"])
    out = _json(capsys)
    assert rc in (0, 1)
    s = out["series"][0]
    assert s["kind"] == "coordinate" and s["unit"] == "nm" and s["n_samples"] == 5000
    cov = s["phase_space_coverage"]["fraction"]
    assert 0 < cov[0] <= cov[-1] <= 1 and np.all(np.diff(cov) >= 0)  # visited cells only accumulate
    ra = s["running_average"]
    assert ra["mean"][-1] == pytest.approx(s["mean"]) and ra["unit"] == "nm"
    rc = main(["memory", str(files["run"]), "--vacf", "--group", "0-4", "--group", "[5, 6, 7, 8, 9]",
               "--max-lag", "2", "--json"])
    out = _json(capsys)
    assert out["vacf"]["groups"] == ["0-4", "[5, 6, 7, 8, 9]"] and out["vacf"]["n_atoms_per_group"] == [5, 5]


def test_bad_input_exit_2_one_line(files, capsys):
    rc = main(["memory", str(files["run"]), "--series", "enthalpy"])
    err = capsys.readouterr().err
    assert rc == 2 and len(err.strip().splitlines()) == 1
    assert "potential_energy" in err  # lists what the run has
    rc = main(["memory", str(files["run"]), "--vacf", "--group", "0-40"])
    err = capsys.readouterr().err
    assert rc == 2 and "out of range" in err
    rc = main(["memory", str(files["dir"] / "missing.h5md")])
    assert rc == 2


def test_help_documents_options(capsys):
    with pytest.raises(SystemExit):
        main(["memory", "--help"])
    text = capsys.readouterr().out
    for opt in ("--series", "--coordinate", "--vacf", "--spectrum", "--msd", "--tm", "--replica", "--group",
                "--max-lag", "--method", "--json"):
        assert opt in text


def test_vacf_on_water_frames_100_fs_apart_is_unreliable_and_compared_with_msd(capsys):
    # rigid TIP3P NVE made with OpenMM, velocities every 50 steps of 2 fs (tests/data/engines, reported.json):
    # the Green-Kubo was 8.7x the MSD value, silently
    folder = Path(__file__).resolve().parents[1] / "data" / "engines" / "openmm" / "tip3p_rigid_nve_verlet"
    if not (folder / "frames.h5md").exists():
        pytest.skip("engine runs not generated")
    rc = main(["memory", str(folder / "frames.h5md"), "--top", str(folder / "start.pdb"), "--vacf", "--no-cache"])
    text = capsys.readouterr().out
    assert rc == 1
    assert "UNRELIABLE" in text and "use the MSD" in text
    assert "MSD (Einstein) D" in text and "Green-Kubo is" in text
    rc = main(["memory", str(folder / "frames.h5md"), "--top", str(folder / "start.pdb"), "--vacf", "--no-cache",
               "--json"])
    out = _json(capsys)
    gk = out["green_kubo"][0]
    assert gk["reliable"] is False and gk["decay_frames"] < 2
    kinds = {v["kind"]: v["level"] for v in out["transport"]["verdicts"]}
    assert kinds["transport.vacf_resolution"] == "problem" and kinds["transport.gk_msd_agreement"] == "caution"


def test_oscillating_oh_distance_estimators_disagree_and_the_largest_is_used(capsys):
    # the O-H distance of flexible TIP3P made with OpenMM, frames every 1 fs (tests/data/engines): Sokal's
    # window closes on the first trough (g = 1); Geyer's initial sequence does not (the issue: g = 1 against
    # 2.7-4.7). The reference here is the estimators themselves, as emcee's Sokal window also gives ~1.
    import emcee

    folder = Path(__file__).resolve().parents[1] / "data" / "engines" / "openmm" / "tip3p_flexible_frames_1fs"
    if not (folder / "frames.h5md").exists():
        pytest.skip("engine runs not generated")
    rc = main(["memory", str(folder / "frames.h5md"), "--top", str(folder / "start.pdb"), "-c", "distance(0, 1)",
               "--no-cache", "--json"])
    s = _json(capsys)["series"][0]
    assert rc == 1
    assert s["oscillating"] is True and s["estimators_disagree"] is True
    assert s["statistical_inefficiency_g"] == pytest.approx(max(e["g"] for e in s["estimates"].values()))
    assert s["estimates"]["sokal"]["g"] < 1.5 < s["statistical_inefficiency_g"]
    kinds = {v["kind"]: v["level"] for v in s["verdicts"]}
    assert kinds["sampling.estimator_agreement"] == "caution"
    from phasewake.core.analyses.coordinates import compute_coordinates
    from phasewake.core.progress import result_of  # noqa: F401  (imported for parity with other tests)
    from phasewake.core.readers import open_run

    run = open_run([folder / "frames.h5md"], topology=folder / "start.pdb")
    q = np.asarray(result_of(compute_coordinates(run, ["distance(0, 1)"]))[0].values, float)
    # emcee's Sokal window (c = 5) on the same series: the low value the automatic rule does not trust
    assert float(emcee.autocorr.integrated_time(q, c=5, quiet=True)[0]) < 1.5
