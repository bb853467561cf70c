"""The committed sample runs: integrity, exact regeneration, and physics checked against outside references.

The H5MD files are read here with plain h5py in the layout of the H5MD 1.1 specification (de Buyl,
Colberg and Hoefling, Comput. Phys. Commun. 185, 1546 (2014)), not through phasewake's reader, so these
checks do not lean on the code they feed.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import h5py
import numpy as np
import pytest

from phasewake.core.progress import result_of
from phasewake.core.units import KB_KJ_PER_MOL_K
from phasewake.sample_data import make_samples as ms

SAMPLES = Path(ms.__file__).resolve().parent
H5MD_FILES = ["dimer_nve.h5md", "dimer_nve_bigstep.h5md", "dimer_langevin.h5md", "dimer_langevin_r2.h5md",
              "dimer_langevin_r3.h5md"]
SAMPLE_SUFFIXES = (".h5md", ".dcd", ".pdb", ".csv")

# Model parameters as published, restated here rather than imported: Rahman's argon (REFERENCES.md 8.3),
# the WCA potential (Weeks, Chandler and Andersen, J. Chem. Phys. 54, 5237 (1971)) and the double-well
# bond of Dellago, Bolhuis and Chandler, J. Chem. Phys. 110, 6617 (1999).
SIGMA = 0.34  # nm
EPS = 120.0 * KB_KJ_PER_MOL_K  # kJ/mol
R_CUT = 2 ** (1 / 6) * SIGMA
MASS = 39.948  # amu


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def load(name: str) -> dict[str, object]:
    """What a sample H5MD file holds, read with h5py in the spec layout."""
    with h5py.File(SAMPLES / name, "r") as f:
        assert tuple(f["h5md"].attrs["version"]) == (1, 1)
        part = f["particles/all"]
        out: dict[str, object] = {
            "x": part["position/value"][()],
            "x_unit": part["position/value"].attrs["unit"],
            "v": part["velocity/value"][()],
            "v_unit": part["velocity/value"].attrs["unit"],
            "t": part["position/time"][()],
            "step": part["position/step"][()],
            "mass": part["mass"][()],
            "box": part["box/edges"][()],
            "boundary": [b.decode() if isinstance(b, bytes) else b for b in part["box"].attrs["boundary"]],
            "params": {k: f["parameters"][k][()] for k in f["parameters"] if f["parameters"][k].shape == ()},
        }
        obs = {}
        for k in f["observables"]:
            g = f["observables"][k]
            unit = g["value"].attrs.get("unit", "")
            obs[k] = (g["value"][()], unit.decode() if isinstance(unit, bytes) else unit)
            assert np.array_equal(g["step"][()], out["step"])  # sampled with the frames
        out["obs"] = obs
    return out


def decoded(value: object) -> object:
    return value.decode() if isinstance(value, bytes) else value


def bond_lengths(x: np.ndarray, box: float) -> np.ndarray:
    d = x[:, 0].astype(np.float64) - x[:, 1]
    d -= box * np.round(d / box)
    return np.sqrt(np.sum(d * d, axis=-1))


def committed_transitions(r: np.ndarray, r0: float, w: float) -> tuple[int, int, int]:
    """(compact->extended, extended->compact, crossings of r0 + w) with core sets r < r0 + w/2,
    r > r0 + 3w/2 (two-threshold assignment, Buchete and Hummer, J. Phys. Chem. B 112, 6057 (2008))."""
    state = np.where(r < r0 + 0.5 * w, 0, np.where(r > r0 + 1.5 * w, 1, -1))
    visits = state[state >= 0]
    changes = np.diff(visits)
    crossings = int(np.count_nonzero(np.diff(np.sign(r - (r0 + w)))))
    return int(np.sum(changes == 1)), int(np.sum(changes == -1)), crossings


def energy_ratio(total: np.ndarray, kinetic: np.ndarray, t: np.ndarray) -> float:
    """sigma_E / sigma_K with E detrended by a least-squares line (REFERENCES.md 1.2, common practice)."""
    resid = total - np.polyval(np.polyfit(t, total, 1), t)
    return float(np.std(resid) / np.std(kinetic))


# ------------------------------------------------------------------------------------ integrity


def test_committed_files_match_the_manifest():
    manifest = json.loads((SAMPLES / ms.MANIFEST_NAME).read_text())
    files = manifest["files"]
    on_disk = sorted(p.name for p in SAMPLES.iterdir() if p.suffix in SAMPLE_SUFFIXES)
    assert sorted(files) == on_disk
    for name, info in files.items():
        path = SAMPLES / name
        assert path.stat().st_size == info["bytes"], name
        assert sha256(path) == info["sha256"], name
    # the size budget of the sample folder: at most about 8 MB in all
    assert sum(info["bytes"] for info in files.values()) <= 8 * 1024**2


@pytest.mark.slow  # measured 0.8 s of CPU
def test_a_reduced_generation_is_bitwise_deterministic(tmp_path):
    # Fixed seeds, plain numpy arithmetic, HDF5 without timestamps, DCD/PDB dates removed: two runs of the
    # generator give the same bytes. A reduced plan keeps this to a few seconds.
    a, b = tmp_path / "a", tmp_path / "b"
    man_a = result_of(ms.generate(a, plan=ms.QUICK_PLAN))
    man_b = result_of(ms.generate(b, plan=ms.QUICK_PLAN))
    assert man_a == man_b
    names = sorted(p.name for p in a.iterdir())
    assert names == sorted(p.name for p in b.iterdir())
    assert {"dimer_nve.h5md", "dimer_nve.dcd", "dimer_nve.pdb", "dimer_nve_energy.csv"} <= set(names)
    for name in names:
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
    # the --check logic: a clean regeneration matches; a changed file is reported by name
    assert ms.check(a, plan=ms.QUICK_PLAN) == []
    (a / "dimer_nve.pdb").write_text((a / "dimer_nve.pdb").read_text().replace("DIM", "DIX"))
    problems = ms.check(a, plan=ms.QUICK_PLAN)
    assert len(problems) == 1 and problems[0].startswith("dimer_nve.pdb")


# ------------------------------------------------------------------------------------ layout and metadata


@pytest.mark.parametrize("name", H5MD_FILES)
def test_h5md_layout_units_and_parameters(name):
    run = load(name)
    x, v = run["x"], run["v"]
    assert x.dtype == np.float32 and v.dtype == np.float32 and x.shape == v.shape
    assert x.shape[1:] == (54, 3) and np.all(np.isfinite(x)) and np.all(np.isfinite(v))
    assert decoded(run["x_unit"]) == "nm" and decoded(run["v_unit"]) == "nm ps-1"
    assert run["boundary"] == ["periodic"] * 3
    assert np.allclose(run["mass"], MASS)
    p = {k: decoded(val) for k, val in run["params"].items()}
    assert p["n_constraints"] == 0
    if "langevin" in name:
        assert (p["ensemble"], p["thermostat"], p["integrator"]) == ("NVT", "langevin", "baoab")
        assert p["temperature_K"] == 120.0 and not p["com_motion_removed"]
    else:
        assert (p["ensemble"], p["thermostat"], p["integrator"]) == ("NVE", "none", "velocity-verlet")
        assert "temperature_K" not in p and p["com_motion_removed"]
    # the time axis is the step count times the time step
    assert np.allclose(run["t"], run["step"] * p["timestep_ps"], rtol=0, atol=1e-9)
    for key in ("potential_energy", "kinetic_energy", "total_energy"):
        assert run["obs"][key][1] == "kJ mol-1"
    assert run["obs"]["temperature"][1] == "K"


def test_frames_resolve_the_bond_vibration():
    # harmonic period at either minimum of the double well: V'' = 8h/w^2, reduced mass m/2 (DBC 1999 form)
    run = load("dimer_nve.h5md")
    p = run["params"]
    k = 8 * p["dimer_barrier_kJ_per_mol"] / p["dimer_w_nm"] ** 2
    period = 2 * np.pi / np.sqrt(k / (MASS / 2))
    assert period / (run["t"][1] - run["t"][0]) >= 10  # >= 10 frames per period


def test_stored_energies_agree_with_an_independent_recomputation():
    # Kinetic energy 1/2 sum m v^2 from the stored float32 velocities; potential energy from mdtraj's periodic
    # minimum-image distances (mdtraj as reference) with the WCA and double-well formulas written out here.
    import mdtraj as md

    run = load("dimer_nve.h5md")
    p = run["params"]
    x, v, box = run["x"], run["v"].astype(np.float64), float(run["box"][0])
    kin = 0.5 * np.sum(run["mass"][None, :, None] * v * v, axis=(1, 2))
    assert np.allclose(kin, run["obs"]["kinetic_energy"][0], rtol=1e-5)
    frames = [0, 777, len(x) - 1]
    top = md.Topology()
    res = top.add_residue("X", top.add_chain())
    for _ in range(x.shape[1]):
        top.add_atom("X", md.element.argon, res)
    traj = md.Trajectory(x[frames], top, unitcell_lengths=np.full((3, 3), box), unitcell_angles=np.full((3, 3), 90.0))
    i, j = np.triu_indices(x.shape[1], 1)
    pairs = np.stack([i, j], axis=1)
    r = md.compute_distances(traj, pairs, periodic=True).astype(np.float64)
    sr6 = (SIGMA / r) ** 6
    wca = np.where(r < R_CUT, 4 * EPS * (sr6 * sr6 - sr6) + EPS, 0.0)
    is_dimer = (i == 0) & (j == 1)
    r_dim = r[:, is_dimer][:, 0]
    h, r0, w = p["dimer_barrier_kJ_per_mol"], p["dimer_r0_nm"], p["dimer_w_nm"]
    u_bond = h * (1 - (r_dim - r0 - w) ** 2 / w**2) ** 2
    u = np.sum(wca[:, ~is_dimer], axis=1) + u_bond
    assert np.allclose(u, run["obs"]["potential_energy"][0][frames], rtol=1e-3, atol=1e-3)
    assert np.allclose(r_dim, run["obs"]["dimer_distance"][0][frames], atol=1e-5)
    total = run["obs"]["kinetic_energy"][0] + run["obs"]["potential_energy"][0]
    assert np.allclose(total, run["obs"]["total_energy"][0], rtol=1e-12)


# ------------------------------------------------------------------------------------ physics


def test_nve_runs_conserve_energy_well_and_badly():
    good = load("dimer_nve.h5md")
    big = load("dimer_nve_bigstep.h5md")
    r_good = energy_ratio(good["obs"]["total_energy"][0], good["obs"]["kinetic_energy"][0], good["t"])
    r_big = energy_ratio(big["obs"]["total_energy"][0], big["obs"]["kinetic_energy"][0], big["t"])
    assert r_good < 0.01  # common practice: sigma_E/sigma_K < 0.01 is good (REFERENCES.md 1.2)
    assert r_big > 0.05  # ... and above 0.05 a problem (common practice)
    assert r_big > 20 * r_good
    # visible drift: the fitted change over run (b) dwarfs the whole spread of the good run's energy
    e_big, e_good = big["obs"]["total_energy"][0], good["obs"]["total_energy"][0]
    slope = np.polyfit(big["t"], e_big, 1)[0]
    assert abs(slope) * (big["t"][-1] - big["t"][0]) > 10 * (e_good.max() - e_good.min())
    # not a blow-up: finite, and the mean temperature within 20% of the 120 K the run started near
    assert np.all(np.isfinite(big["x"])) and np.all(np.isfinite(e_big))
    assert abs(np.mean(big["obs"]["temperature"][0]) - 120) < 24
    # velocity Verlet with pair forces conserves the (zero) total momentum (Newton's third law)
    p_tot = np.sum(good["mass"][None, :, None] * good["v"].astype(np.float64), axis=1)
    assert np.max(np.abs(p_tot)) < 1e-3  # amu nm/ps; float32 storage of 54 velocities


@pytest.mark.parametrize("name", ["dimer_langevin.h5md", "dimer_langevin_r2.h5md", "dimer_langevin_r3.h5md"])
def test_langevin_conserved_energy_is_flat(name):
    run = load(name)
    obs = run["obs"]
    total, heat, cons = obs["total_energy"][0], obs["bath_heat"][0], obs["conserved_energy"][0]
    kin = obs["kinetic_energy"][0]
    assert np.allclose(cons, total + heat, rtol=1e-12)
    assert obs["bath_heat"][1] == "kJ mol-1" and obs["conserved_energy"][1] == "kJ mol-1"
    sigma_k = np.std(kin)
    # flat to integration error (common practice, as for NVE): detrended fluctuation and net change small
    # against sigma_K, while the total energy itself exchanges energy with the bath
    assert energy_ratio(cons, kin, run["t"]) < 0.01
    assert abs(cons[-1] - cons[0]) < 0.05 * sigma_k
    assert np.std(total) > 0.5 * sigma_k


@pytest.mark.parametrize("name", ["dimer_langevin.h5md", "dimer_langevin_r2.h5md", "dimer_langevin_r3.h5md"])
def test_langevin_mean_temperature_matches_the_bath(name):
    # Kinetic temperature 2K/(3N k_B) (Langevin does not conserve momentum: N_dof = 3N). Its mean must equal
    # the bath's 120 K within 4 standard errors, the error corrected for correlation with the statistical
    # inefficiency from pymbar (Chodera et al., J. Chem. Theory Comput. 3, 26 (2007)).
    from pymbar import timeseries

    run = load(name)
    temp = 2 * run["obs"]["kinetic_energy"][0] / (3 * 54 * KB_KJ_PER_MOL_K)
    assert np.allclose(temp, run["obs"]["temperature"][0], rtol=1e-12)
    g = timeseries.statistical_inefficiency(temp)
    se = np.std(temp) * np.sqrt(g / temp.size)
    assert abs(np.mean(temp) - 120.0) < 4 * se


def test_langevin_velocities_are_maxwell_boltzmann():
    # Components of the velocity ~ N(0, kT/m) (Maxwell-Boltzmann; REFERENCES.md 2.2). Frames of the
    # replicas 1.12 ps apart (the velocity autocorrelation of a dense liquid dies within ~1 ps), bath
    # atoms only; KS test against scipy.stats.norm, p > 0.001 (common practice).
    from scipy import stats

    kt = KB_KJ_PER_MOL_K * 120.0
    samples = [load(n)["v"][10::4, 2:].astype(np.float64).ravel() for n in H5MD_FILES[3:]]
    z = np.concatenate(samples) / np.sqrt(kt / MASS)
    assert z.size > 10000
    assert stats.kstest(z, stats.norm.cdf).pvalue > 1e-3


@pytest.mark.parametrize("name", ["dimer_nve.h5md", "dimer_langevin.h5md"])
def test_the_dimer_crosses_its_barrier_both_ways_with_recrossings(name):
    run = load(name)
    p = run["params"]
    r = bond_lengths(run["x"], float(run["box"][0]))
    assert np.allclose(r, run["obs"]["dimer_distance"][0], atol=1e-5)
    up, down, crossings = committed_transitions(r, p["dimer_r0_nm"], p["dimer_w_nm"])
    assert up >= 3 and down >= 3  # several transitions each way
    assert crossings > up + down  # some crossings of r0 + w are recrossings, not transitions
    # both states are visited for a good share of the run
    frac_extended = np.mean(r > p["dimer_r0_nm"] + p["dimer_w_nm"])
    assert 0.1 < frac_extended < 0.9


def test_dcd_pdb_csv_repeat_the_nve_run():
    # mdtraj (reference library) reads the DCD with the PDB topology: the same positions as the H5MD file
    import mdtraj as md

    run = load("dimer_nve.h5md")
    traj = md.load(str(SAMPLES / "dimer_nve.dcd"), top=str(SAMPLES / "dimer_nve.pdb"))
    assert traj.n_frames == run["x"].shape[0]
    assert np.allclose(traj.xyz, run["x"], atol=2e-6)  # nm; DCD stores float32 angstrom
    assert np.allclose(traj.unitcell_lengths, float(run["box"][0]), atol=1e-5)
    top = traj.topology
    assert [(a.residue.name, a.name) for a in top.atoms][:3] == [("DIM", "D1"), ("DIM", "D2"), ("AR", "AR")]
    assert {a.element.symbol for a in top.atoms} == {"Ar"}
    assert sum(1 for a in top.atoms if a.residue.name == "AR") == 52
    # the energy table: units in the headers, one row per frame, the same numbers as the H5MD observables
    lines = (SAMPLES / "dimer_nve_energy.csv").read_text().splitlines()
    header = next(ln for ln in lines if not ln.startswith("#")).split(",")
    assert header == ["time (ps)", "step", "potential energy (kJ/mol)", "kinetic energy (kJ/mol)",
                      "total energy (kJ/mol)", "temperature (K)"]
    table = np.loadtxt(SAMPLES / "dimer_nve_energy.csv", delimiter=",", comments="#", skiprows=2)
    assert table.shape == (run["x"].shape[0], 6)
    assert np.allclose(table[:, 0], run["t"], atol=1e-6)
    assert np.array_equal(table[:, 1].astype(np.int64), run["step"])
    for col, key in ((2, "potential_energy"), (3, "kinetic_energy"), (4, "total_energy"), (5, "temperature")):
        assert np.allclose(table[:, col], run["obs"][key][0], atol=1e-5), key


@pytest.mark.slow  # measured 0.5 s of CPU
def test_the_project_reader_opens_every_sample():
    # integration: phasewake's own reader layer sees what the files say
    from phasewake.core.readers import open_run

    for name in H5MD_FILES:
        run = open_run([SAMPLES / name])
        assert run.n_atoms == 54 and run.n_frames == load(name)["x"].shape[0], name
        assert run.metadata.n_constraints == 0 and not run.warnings, name

    nve = open_run([SAMPLES / "dimer_nve.h5md"])
    assert (nve.n_atoms, nve.n_frames) == (54, 1600)
    assert nve.metadata.timestep_ps == pytest.approx(0.004) and nve.metadata.ensemble == "NVE"
    assert nve.frames is not None and nve.frames.has_velocities and not nve.frames.velocities_estimated
    lang = open_run([SAMPLES / "dimer_langevin.h5md"])
    assert lang.metadata.thermostat == "langevin" and lang.metadata.temperature_K == 120.0
    assert lang.energies is not None and lang.energies.by_role("bath_heat") is not None
    assert lang.energies.by_role("conserved") is not None
    trio = open_run([SAMPLES / "dimer_nve.dcd", SAMPLES / "dimer_nve.pdb", SAMPLES / "dimer_nve_energy.csv"])
    assert (trio.n_atoms, trio.n_frames) == (54, 1600)
    assert np.allclose(trio.time_ps, nve.time_ps, atol=1e-6)
    assert trio.energies is not None and trio.energies.by_role("total") is not None
