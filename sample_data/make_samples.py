"""Regenerate phasewake's sample runs exactly: a bistable dimer in a dense WCA argon-like bath.

Usage::

    python sample_data/make_samples.py [--output DIR] [--check]

Without options it rewrites the sample files next to this script and MANIFEST.json (sha256 of each
file). ``--check`` regenerates into a temporary folder and compares every file with MANIFEST.json
(exit 0 when all match, 1 otherwise).

The scenario (our own; see README.md beside this file):

- bath: argon-like atoms, m = 39.948 amu, sigma = 0.34 nm, epsilon/k_B = 120 K (Rahman 1964 values,
  REFERENCES.md 8.3), purely repulsive WCA pair potential (Weeks, Chandler and Andersen,
  J. Chem. Phys. 54, 5237 (1971)), periodic cubic box at a liquid-like reduced density;
- solute: a dimer whose bond is the double well V(r) = h [1 - (r - r0 - w)^2 / w^2]^2 (compact minimum
  r0, extended minimum r0 + 2w, barrier h at r0 + w), the model of Dellago, Bolhuis and Chandler,
  J. Chem. Phys. 110, 6617 (1999); its atoms interact with the bath through the same WCA potential;
- integrators from :mod:`phasewake.core.model.integrators` (velocity Verlet; BAOAB Langevin with the bath heat).

Every number is reproducible: fixed seeds (numpy PCG64), plain numpy arithmetic, and HDF5 files written
without timestamps. The dynamics is chaotic, so last-bit differences between CPUs or numpy builds grow
into different (equally valid) trajectories: ``--check`` is exact on the same platform and versions.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from phasewake.core.model.integrators import IntegratedRun, run_baoab, run_velocity_verlet
from phasewake.core.progress import Progress, Work, drive, result_of
from phasewake.core.units import KB_KJ_PER_MOL_K

HERE = Path(__file__).resolve().parent
MANIFEST_NAME = "MANIFEST.json"

# Argon-like Lennard-Jones parameters (REFERENCES.md 8.3: Rahman's epsilon/k_B = 120 K, sigma = 3.4 A).
ARGON_MASS_AMU = 39.948
SIGMA_NM = 0.34
EPSILON_KJ_PER_MOL = 120.0 * KB_KJ_PER_MOL_K
WCA_CUTOFF_NM = 2.0 ** (1.0 / 6.0) * SIGMA_NM  # the LJ minimum, where WCA goes to zero smoothly


@dataclass(frozen=True)
class Scenario:
    """Physics of the sample system (internal units)."""

    n_bath: int = 52
    reduced_density: float = 0.75  # rho* = N sigma^3 / V, counting the dimer atoms too
    temperature_K: float = 120.0
    barrier_kT: float = 2.0  # h / kT
    r0_nm: float = WCA_CUTOFF_NM  # compact bond length: the WCA minimum 2^(1/6) sigma
    w_nm: float = 0.25 * SIGMA_NM  # half the distance between the two minima

    @property
    def n_atoms(self) -> int:
        return self.n_bath + 2

    @property
    def box_nm(self) -> float:
        return float((self.n_atoms / self.reduced_density) ** (1.0 / 3.0) * SIGMA_NM)

    @property
    def barrier_kJ_per_mol(self) -> float:
        return self.barrier_kT * KB_KJ_PER_MOL_K * self.temperature_K

    @property
    def masses_amu(self) -> np.ndarray:
        return np.full(self.n_atoms, ARGON_MASS_AMU)

    @property
    def bond_period_ps(self) -> float:
        """Harmonic period at either minimum: V'' = 8h/w^2, reduced mass m/2."""
        k = 8.0 * self.barrier_kJ_per_mol / self.w_nm**2
        return float(2.0 * np.pi / np.sqrt(k / (0.5 * ARGON_MASS_AMU)))


@dataclass(frozen=True)
class Plan:
    """How long each run is and how it is sampled (steps and frames)."""

    seed: int = 20261201
    timestep_ps: float = 0.004  # good step: ~150 steps per bond period
    record_every: int = 14  # 0.056 ps between frames: >= 10 frames per bond period
    equilibration_steps: int = 5000  # 20 ps of BAOAB from the lattice, not recorded
    equilibration_friction_per_ps: float = 5.0
    nve_frames: int = 1600
    big_timestep_ps: float = 0.04  # too large: 10x the good step, stable but drifting
    bigstep_record_every: int = 2
    bigstep_frames: int = 800
    langevin_friction_per_ps: float = 1.0
    langevin_frames: int = 1600
    n_replicas: int = 2  # extra Langevin replicas, each from its own lattice start and equilibration
    replica_equilibration_steps: int = 2500
    replica_record_every: int = 70  # 0.28 ps: coarse, for sampling (not vibration) checks
    replica_frames: int = 250

    def n_steps(self, frames: int, record_every: int) -> int:
        return (frames - 1) * record_every


#: A small plan for the fast determinism test (a few hundred steps in all).
QUICK_PLAN = Plan(equilibration_steps=100, nve_frames=12, bigstep_frames=8, langevin_frames=12, n_replicas=1,
                  replica_equilibration_steps=50, replica_record_every=14, replica_frames=4)


class DimerInBath:
    """Forces of the dimer (atoms 0, 1) in the WCA bath (atoms 2...), minimum image in a cubic box.

    Call with positions of shape (n_atoms, 3) nm; returns forces (n_atoms, 3) kJ mol^-1 nm^-1 and the
    potential energy in kJ/mol.
    """

    def __init__(self, scenario: Scenario) -> None:
        self.scenario = scenario
        self.box = scenario.box_nm
        n = scenario.n_atoms
        i, j = np.triu_indices(n, 1)
        keep = ~((i == 0) & (j == 1))  # the dimer pair feels only its bond
        self.i = i[keep]
        self.j = j[keep]
        self.n = n
        self._xyz = np.arange(3)
        self.h = scenario.barrier_kJ_per_mol
        self.r0 = scenario.r0_nm
        self.w = scenario.w_nm

    def bond(self, r: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
        """Double-well bond energy V(r) and dV/dr (kJ/mol, kJ mol^-1 nm^-1)."""
        s = (np.asarray(r, dtype=np.float64) - self.r0 - self.w) / self.w
        g = 1.0 - s * s
        return self.h * g * g, -4.0 * self.h * g * s / self.w

    def minimum_image(self, d: np.ndarray) -> np.ndarray:
        return d - self.box * np.round(d / self.box)

    def __call__(self, x: np.ndarray) -> tuple[np.ndarray, float]:
        # np.take rather than fancy indexing: the same result, about 3x faster for these small arrays
        d = self.minimum_image(np.take(x, self.i, axis=0) - np.take(x, self.j, axis=0))
        r2 = np.einsum("ij,ij->i", d, d)
        near = np.flatnonzero(r2 < WCA_CUTOFF_NM**2)
        dn = np.take(d, near, axis=0)
        inv_r2 = 1.0 / np.take(r2, near)
        s6 = (SIGMA_NM**2 * inv_r2) ** 3
        u = float(np.sum(4.0 * EPSILON_KJ_PER_MOL * (s6 * s6 - s6) + EPSILON_KJ_PER_MOL))
        fpair = (24.0 * EPSILON_KJ_PER_MOL * (2.0 * s6 * s6 - s6) * inv_r2)[:, None] * dn
        # scatter the pair forces onto atoms: flat index 3*atom + component, one bincount per side
        ii = (3 * np.take(self.i, near))[:, None] + self._xyz
        jj = (3 * np.take(self.j, near))[:, None] + self._xyz
        fp = fpair.ravel()
        f = (np.bincount(ii.ravel(), fp, 3 * self.n) - np.bincount(jj.ravel(), fp, 3 * self.n)).reshape(self.n, 3)
        db = self.minimum_image(x[0] - x[1])
        rb = float(np.sqrt(db @ db))
        ub, dub = self.bond(rb)
        fb = (-float(dub) / rb) * db
        f[0] += fb
        f[1] -= fb
        return f, u + float(ub)


def bond_length_nm(positions_nm: np.ndarray, box_nm: float) -> np.ndarray:
    """Minimum-image distance between atoms 0 and 1 of each frame, shape (n_frames,), nm."""
    d = positions_nm[..., 0, :] - positions_nm[..., 1, :]
    d = d - box_nm * np.round(d / box_nm)
    return np.sqrt(np.sum(d * d, axis=-1))


def lattice_start(scenario: Scenario) -> np.ndarray:
    """Simple-cubic lattice sites (the first two, the dimer, are neighbours), shape (n_atoms, 3), nm."""
    n_side = int(np.ceil(scenario.n_atoms ** (1.0 / 3.0)))
    g = (np.arange(n_side) + 0.5) * scenario.box_nm / n_side
    sites = np.stack(np.meshgrid(g, g, g, indexing="ij"), axis=-1).reshape(-1, 3)
    return np.ascontiguousarray(sites[: scenario.n_atoms])


def maxwell_velocities(scenario: Scenario, rng: np.random.Generator) -> np.ndarray:
    """Velocities drawn from Maxwell-Boltzmann at the scenario temperature, shape (n_atoms, 3), nm/ps."""
    kt = KB_KJ_PER_MOL_K * scenario.temperature_K
    return rng.standard_normal((scenario.n_atoms, 3)) * np.sqrt(kt / scenario.masses_amu)[:, None]


def build_topology(scenario: Scenario):  # -> mdtraj.Topology
    """Dimer (residue DIM, atoms D1 D2, bonded) then one residue AR per bath atom; element Ar throughout."""
    import mdtraj as md

    top = md.Topology()
    argon = md.element.argon
    chain = top.add_chain()
    res = top.add_residue("DIM", chain, resSeq=1)
    d1 = top.add_atom("D1", argon, res)
    d2 = top.add_atom("D2", argon, res)
    top.add_bond(d1, d2)
    bath = top.add_chain()
    for k in range(scenario.n_bath):
        top.add_atom("AR", argon, top.add_residue("AR", bath, resSeq=k + 2))
    return top


def temperature_K(kinetic_kJ_per_mol: np.ndarray, n_dof: int) -> np.ndarray:
    """Kinetic temperature 2K / (N_dof k_B), K."""
    return 2.0 * np.asarray(kinetic_kJ_per_mol) / (n_dof * KB_KJ_PER_MOL_K)


# ------------------------------------------------------------------------------------- the runs


def _stream(plan: Plan, k: int) -> np.random.Generator:
    """Independent random stream number k of the plan's seed."""
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence([plan.seed, k])))


def _forward(work: Work[IntegratedRun], done: float, total: float, label: str) -> Work[IntegratedRun]:
    """Pass a run's progress on, shifted into the whole job's count."""
    gen = work
    try:
        while True:
            p = next(gen)
            yield Progress(done + p.done, total, label)
    except StopIteration as stop:
        return stop.value  # type: ignore[no-any-return]


def _equilibrate(
    scenario: Scenario, forces: DimerInBath, plan: Plan, n_steps: int, stream: int, done: float, total: float
) -> Work[tuple[np.ndarray, np.ndarray]]:
    """Lattice start, Maxwell-Boltzmann velocities, then BAOAB at strong friction: the final state."""
    rng = _stream(plan, stream)
    x0 = lattice_start(scenario)
    v0 = maxwell_velocities(scenario, rng)
    eq = yield from _forward(run_baoab(
        x0, v0, scenario.masses_amu, forces, timestep_ps=plan.timestep_ps, n_steps=n_steps,
        temperature_K=scenario.temperature_K, friction_per_ps=plan.equilibration_friction_per_ps, seed=rng,
        record_every=max(1, n_steps)), done, total, "equilibrating")
    return eq.positions_nm[-1], eq.velocities_nm_per_ps[-1]


@dataclass(frozen=True)
class SampleRuns:
    """The integrated runs behind the sample files (float64, before writing)."""

    scenario: Scenario
    plan: Plan
    nve: IntegratedRun
    bigstep: IntegratedRun
    langevin: IntegratedRun
    replicas: tuple[IntegratedRun, ...]


def simulate(scenario: Scenario = Scenario(), plan: Plan = Plan()) -> Work[SampleRuns]:
    """Run every sample simulation (a progress generator returning :class:`SampleRuns`)."""
    forces = DimerInBath(scenario)
    m = scenario.masses_amu
    total = float(plan.equilibration_steps + plan.n_steps(plan.nve_frames, plan.record_every)
                  + plan.n_steps(plan.bigstep_frames, plan.bigstep_record_every)
                  + plan.n_steps(plan.langevin_frames, plan.record_every)
                  + plan.n_replicas * (plan.replica_equilibration_steps
                                       + plan.n_steps(plan.replica_frames, plan.replica_record_every)))
    done = 0.0
    x, v = yield from _equilibrate(scenario, forces, plan, plan.equilibration_steps, 0, done, total)
    done += plan.equilibration_steps

    # NVE runs start with zero total momentum, which velocity Verlet then conserves
    v_nve = v - np.sum(m[:, None] * v, axis=0) / np.sum(m)
    n = plan.n_steps(plan.nve_frames, plan.record_every)
    nve = yield from _forward(run_velocity_verlet(
        x, v_nve, m, forces, timestep_ps=plan.timestep_ps, n_steps=n, record_every=plan.record_every),
        done, total, "NVE, good time step")
    done += n
    n = plan.n_steps(plan.bigstep_frames, plan.bigstep_record_every)
    big = yield from _forward(run_velocity_verlet(
        x, v_nve, m, forces, timestep_ps=plan.big_timestep_ps, n_steps=n,
        record_every=plan.bigstep_record_every), done, total, "NVE, too large a time step")
    done += n
    n = plan.n_steps(plan.langevin_frames, plan.record_every)
    lang = yield from _forward(run_baoab(
        x, v, m, forces, timestep_ps=plan.timestep_ps, n_steps=n, temperature_K=scenario.temperature_K,
        friction_per_ps=plan.langevin_friction_per_ps, seed=_stream(plan, 1), record_every=plan.record_every),
        done, total, "Langevin")
    done += n
    replicas = []
    for k in range(plan.n_replicas):
        xr, vr = yield from _equilibrate(scenario, forces, plan, plan.replica_equilibration_steps, 2 + 2 * k,
                                         done, total)
        done += plan.replica_equilibration_steps
        n = plan.n_steps(plan.replica_frames, plan.replica_record_every)
        rep = yield from _forward(run_baoab(
            xr, vr, m, forces, timestep_ps=plan.timestep_ps, n_steps=n, temperature_K=scenario.temperature_K,
            friction_per_ps=plan.langevin_friction_per_ps, seed=_stream(plan, 3 + 2 * k),
            record_every=plan.replica_record_every), done, total, f"Langevin replica {k + 2}")
        done += n
        replicas.append(rep)
    return SampleRuns(scenario, plan, nve, big, lang, tuple(replicas))


# ------------------------------------------------------------------------------------- writing


def _parameters(scenario: Scenario, plan: Plan, run: IntegratedRun, *, stream: int | None) -> dict[str, object]:
    nve = run.integrator == "velocity-verlet"
    out: dict[str, object] = {
        "timestep_ps": run.timestep_ps,
        "ensemble": "NVE" if nve else "NVT",
        "thermostat": "none" if nve else "langevin",
        "temperature_K": None if nve else run.temperature_K,
        "friction_per_ps": None if nve else run.friction_per_ps,
        "n_constraints": 0,
        "integrator": run.integrator,
        "com_motion_removed": bool(nve),
        "frame_every_steps": run.record_every,
        "seed": plan.seed,
        "random_stream": stream,
        "scenario": "bistable dimer (atoms 0, 1) in a WCA argon-like bath; sample_data/README.md",
        "bath_sigma_nm": SIGMA_NM,
        "bath_epsilon_kJ_per_mol": EPSILON_KJ_PER_MOL,
        "wca_cutoff_nm": WCA_CUTOFF_NM,
        "dimer_barrier_kJ_per_mol": scenario.barrier_kJ_per_mol,
        "dimer_r0_nm": scenario.r0_nm,
        "dimer_w_nm": scenario.w_nm,
        "reduced_density": scenario.reduced_density,
        "bath_temperature_K": scenario.temperature_K,
    }
    return out


def _n_dof(scenario: Scenario, run: IntegratedRun) -> int:
    # NVE: total momentum is zero and conserved (3 fewer); Langevin does not conserve momentum
    return 3 * scenario.n_atoms - (3 if run.integrator == "velocity-verlet" else 0)


def _observables(scenario: Scenario, run: IntegratedRun) -> dict[str, tuple[np.ndarray, str]]:
    obs: dict[str, tuple[np.ndarray, str]] = {
        "potential_energy": (run.potential_kJ_per_mol, "kJ mol-1"),
        "kinetic_energy": (run.kinetic_kJ_per_mol, "kJ mol-1"),
        "total_energy": (run.total_kJ_per_mol, "kJ mol-1"),
        "temperature": (temperature_K(run.kinetic_kJ_per_mol, _n_dof(scenario, run)), "K"),
    }
    if run.integrator == "baoab":
        obs["bath_heat"] = (run.bath_heat_kJ_per_mol, "kJ mol-1")
        obs["conserved_energy"] = (run.conserved_kJ_per_mol, "kJ mol-1")
    obs["dimer_distance"] = (bond_length_nm(run.positions_nm, scenario.box_nm), "nm")
    return obs


def _write_h5md(path: Path, scenario: Scenario, plan: Plan, run: IntegratedRun, topology: object,
                stream: int | None) -> None:
    from phasewake.core.readers.h5md import write_h5md

    write_h5md(
        path, positions_nm=run.positions_nm.astype(np.float32), time_ps=run.time_ps, step=run.step,
        velocities_nm_per_ps=run.velocities_nm_per_ps.astype(np.float32), box_nm=np.full(3, scenario.box_nm),
        masses_amu=scenario.masses_amu, observables=_observables(scenario, run),
        parameters=_parameters(scenario, plan, run, stream=stream), topology=topology,
        author="phasewake sample_data/make_samples.py",
    )


def _fix_dcd_title(path: Path) -> None:
    """Replace the DCD title record that carries the write date (and unset bytes) with a fixed text.

    mdtraj's DCD writer puts "REMARKS Created <date> at <time>" followed by uninitialised memory into
    the second 80-byte title record; the record has a fixed length, so overwriting it in place keeps
    the file valid and makes it reproducible.
    """
    data = bytearray(path.read_bytes())
    at = data.find(b"REMARKS Created", 0, 1024)
    if at >= 0:
        data[at:at + 80] = b"REMARKS phasewake sample run, sample_data/make_samples.py".ljust(80, b"\0")
        path.write_bytes(bytes(data))


def _fix_pdb_remark(path: Path) -> None:
    """Drop the date from the REMARK line mdtraj's PDB writer adds."""
    lines = path.read_text().splitlines(keepends=True)
    lines = ["REMARK   1 phasewake sample run, sample_data/make_samples.py\n"
             if ln.startswith("REMARK   1 CREATED WITH MDTraj") else ln for ln in lines]
    path.write_text("".join(lines))


def _write_nve_as_files(out: Path, scenario: Scenario, run: IntegratedRun, topology: object) -> list[str]:
    """Run (a) again as DCD (positions) + PDB (topology, first frame) + CSV (energies)."""
    import mdtraj as md

    n = run.n_frames
    traj = md.Trajectory(run.positions_nm.astype(np.float32), topology, time=run.time_ps,
                         unitcell_lengths=np.full((n, 3), scenario.box_nm),
                         unitcell_angles=np.full((n, 3), 90.0))
    dcd = out / "dimer_nve.dcd"
    pdb = out / "dimer_nve.pdb"
    traj.save_dcd(str(dcd))
    _fix_dcd_title(dcd)
    traj[0].save_pdb(str(pdb))
    _fix_pdb_remark(pdb)
    csv = out / "dimer_nve_energy.csv"
    temp = temperature_K(run.kinetic_kJ_per_mol, _n_dof(scenario, run))
    rows = ["# phasewake sample run dimer_nve (velocity Verlet, NVE), energies of the whole system",
            "time (ps),step,potential energy (kJ/mol),kinetic energy (kJ/mol),total energy (kJ/mol),"
            "temperature (K)"]
    for k in range(n):
        rows.append(f"{run.time_ps[k]:.6f},{run.step[k]:d},{run.potential_kJ_per_mol[k]:.8f},"
                    f"{run.kinetic_kJ_per_mol[k]:.8f},{run.total_kJ_per_mol[k]:.8f},{temp[k]:.6f}")
    csv.write_text("\n".join(rows) + "\n")
    return [dcd.name, pdb.name, csv.name]


def write_samples(out: Path, runs: SampleRuns) -> list[str]:
    """Write every sample file of ``runs`` into ``out``; returns the file names."""
    out.mkdir(parents=True, exist_ok=True)
    sc, plan = runs.scenario, runs.plan
    top = build_topology(sc)
    names = ["dimer_nve.h5md", "dimer_nve_bigstep.h5md", "dimer_langevin.h5md"]
    _write_h5md(out / names[0], sc, plan, runs.nve, top, None)
    _write_h5md(out / names[1], sc, plan, runs.bigstep, top, None)
    _write_h5md(out / names[2], sc, plan, runs.langevin, top, 1)
    for k, rep in enumerate(runs.replicas):
        name = f"dimer_langevin_r{k + 2}.h5md"
        _write_h5md(out / name, sc, plan, rep, top, 3 + 2 * k)
        names.append(name)
    names += _write_nve_as_files(out, sc, runs.nve, top)
    return names


def sha256_of(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def manifest(out: Path, names: list[str]) -> dict[str, object]:
    """sha256 and size of each file, with the versions that made them."""
    import h5py
    import mdtraj

    return {
        "made_by": "sample_data/make_samples.py",
        "versions": {"python": sys.version.split()[0], "numpy": np.__version__, "h5py": h5py.__version__,
                     "hdf5": h5py.version.hdf5_version, "mdtraj": mdtraj.__version__},
        "files": {n: {"sha256": sha256_of(out / n), "bytes": (out / n).stat().st_size} for n in sorted(names)},
    }


def generate(out: Path, *, scenario: Scenario = Scenario(), plan: Plan = Plan(),
             write_manifest: bool = True) -> Work[dict[str, object]]:
    """Simulate and write every sample file (and MANIFEST.json); returns the manifest."""
    runs = yield from simulate(scenario, plan)
    names = write_samples(out, runs)
    man = manifest(out, names)
    if write_manifest:
        (out / MANIFEST_NAME).write_text(json.dumps(man, indent=2, sort_keys=True) + "\n")
    return man


def check(reference_dir: Path, *, scenario: Scenario = Scenario(), plan: Plan = Plan()) -> list[str]:
    """Regenerate into a temporary folder and compare with ``reference_dir``/MANIFEST.json.

    Returns the problems found, one line each (empty when every file matches, bit for bit).
    """
    expected = json.loads((reference_dir / MANIFEST_NAME).read_text())["files"]
    with tempfile.TemporaryDirectory(prefix="phasewake-samples-") as tmp:
        man = result_of(generate(Path(tmp), scenario=scenario, plan=plan, write_manifest=False))
    got = man["files"]
    assert isinstance(got, dict)
    problems = []
    for name in sorted(set(expected) | set(got)):
        if name not in got:
            problems.append(f"{name}: listed in {MANIFEST_NAME} but not made")
        elif name not in expected:
            problems.append(f"{name}: made but not listed in {MANIFEST_NAME}")
        elif got[name]["sha256"] != expected[name]["sha256"]:
            problems.append(f"{name}: sha256 differs from {MANIFEST_NAME}")
        else:
            on_disk = reference_dir / name
            if on_disk.exists() and sha256_of(on_disk) != expected[name]["sha256"]:
                problems.append(f"{name}: the committed file differs from {MANIFEST_NAME}")
    return problems


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Regenerate phasewake's sample runs exactly.")
    parser.add_argument("--output", type=Path, default=HERE, help="folder to write into (default: beside this script)")
    parser.add_argument("--check", action="store_true",
                        help="regenerate into a temporary folder and compare with MANIFEST.json in --output")
    args = parser.parse_args(argv)
    if args.check:
        problems = check(args.output)
        for p in problems:
            print(p)
        print("all sample files match MANIFEST.json" if not problems else f"{len(problems)} mismatches")
        return 1 if problems else 0
    last = [-1]

    def show(p: Progress) -> None:
        pct = int(100 * (p.fraction or 0))
        if pct // 10 != last[0]:
            last[0] = pct // 10
            print(f"{pct:3d}% {p.message}", flush=True)

    man = drive(generate(args.output), on_progress=show)
    files = man["files"]
    assert isinstance(files, dict)
    for name, info in files.items():
        print(f"{name}: {info['bytes']} bytes")
    return 0


if __name__ == "__main__":
    sys.exit(main())
