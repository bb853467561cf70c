"""Small real MD runs made with OpenMM, for tests that check our numbers against a real engine.

Call :func:`water_box_nve` (or use the session fixtures ``openmm_water_1fs`` / ``openmm_water_4fs`` in
tests/conftest.py). Each call runs a rigid TIP3P water box (amber14/tip3p.xml, built from an empty
topology, no downloads) in NVE with OpenMM's VerletIntegrator on the CPU platform, and returns what
OpenMM reported through its own API at every report (positions, velocities, kinetic and potential
energy, time, masses, constraints, its own degree-of-freedom count), plus files written from it:

- ``h5md``: H5MD via ``phasewake.core.readers.h5md.write_h5md``;
- ``mdtraj_h5``: mdtraj's HDF5 layout written here with plain h5py (our reader must not be the writer);
- ``dcd`` + ``pdb``: written by mdtraj;
- ``csv``: an energy table (time, step, potential, kinetic, total, temperature).

Runs are cached per process by their arguments: the 1 fs and 4 fs runs start from the same
equilibrated state (minimised, 300 K Maxwell-Boltzmann velocities with a fixed seed, 1 fs
equilibration), so they differ only in the time step. Starting from a minimised structure, the
kinetic temperature settles near 250 K (energy flows into the potential). Costs: ~2 ms a step on one CPU thread for the
default 185 waters; the 1 fs default is about 4 s in all.

Note on velocities: OpenMM's VerletIntegrator is a leapfrog scheme, so the velocities it returns are
half a step away from the positions, and its kinetic energy (which it computes for the positions' time)
is not exactly sum(m v^2)/2 of the returned velocities. Both are recorded.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np


@dataclass(frozen=True)
class EngineRun:
    """What OpenMM reported, per report (F reports, N atoms), and the files written from it."""

    dt_fs: float
    n_waters: int
    step: np.ndarray  # (F,) int
    time_ps: np.ndarray  # (F,)
    positions_nm: np.ndarray  # (F, N, 3) float64
    velocities_nm_per_ps: np.ndarray  # (F, N, 3) float64
    kinetic_kJ_per_mol: np.ndarray  # (F,) OpenMM's getKineticEnergy()
    potential_kJ_per_mol: np.ndarray  # (F,) OpenMM's getPotentialEnergy()
    box_nm: np.ndarray  # (3, 3) box vectors as rows (constant volume)
    masses_amu: np.ndarray  # (N,) from System.getParticleMass
    n_constraints: int  # System.getNumConstraints()
    n_dof: int  # 3 N - constraints - 3 (CMMotionRemover present), as OpenMM counts it
    temperature_K: np.ndarray  # (F,) 2 K / (n_dof k_B) with OpenMM's own k_B (MOLAR_GAS_CONSTANT_R)
    topology: Any  # mdtraj.Topology
    paths: dict[str, Path] = field(default_factory=dict)

    @property
    def total_kJ_per_mol(self) -> np.ndarray:
        return self.kinetic_kJ_per_mol + self.potential_kJ_per_mol

    @property
    def n_atoms(self) -> int:
        return int(self.masses_amu.shape[0])


_STATE_CACHE: dict[tuple, Any] = {}
_RUN_CACHE: dict[tuple, EngineRun] = {}


def _system(box_nm: float):
    import openmm as mm
    import openmm.app as app
    import openmm.unit as u

    ff = app.ForceField("amber14/tip3p.xml")
    modeller = app.Modeller(app.Topology(), [] * u.nanometer)
    modeller.addSolvent(ff, model="tip3p", boxSize=mm.Vec3(box_nm, box_nm, box_nm) * u.nanometer)
    system = ff.createSystem(modeller.topology, nonbondedMethod=app.PME, nonbondedCutoff=0.8 * u.nanometer,
                             constraints=app.HBonds, rigidWater=True, ewaldErrorTolerance=5e-5)
    return modeller, system


def _context(system, dt_fs: float):
    import openmm as mm
    import openmm.unit as u

    integrator = mm.VerletIntegrator(dt_fs * u.femtosecond)
    integrator.setConstraintTolerance(1e-8)
    platform = mm.Platform.getPlatformByName("CPU")
    return mm.Context(system, integrator, platform, {"Threads": "1", "DeterministicForces": "true"}), integrator


def _equilibrated(box_nm: float, temperature_K: float, seed: int, equilibration_steps: int):
    key = (box_nm, temperature_K, seed, equilibration_steps)
    if key not in _STATE_CACHE:
        import openmm as mm
        import openmm.unit as u

        modeller, system = _system(box_nm)
        ctx, integ = _context(system, 1.0)
        ctx.setPositions(modeller.positions)
        mm.LocalEnergyMinimizer.minimize(ctx, 10.0, 100)
        ctx.setVelocitiesToTemperature(temperature_K * u.kelvin, seed)
        ctx.applyVelocityConstraints(1e-8)
        integ.step(equilibration_steps)
        state = ctx.getState(getPositions=True, getVelocities=True, enforcePeriodicBox=False)
        _STATE_CACHE[key] = (modeller, system, state)
    return _STATE_CACHE[key]


def water_box_nve(
    tmp_dir: str | Path,
    *,
    dt_fs: float = 1.0,
    box_nm: float = 1.8,
    n_steps: int = 800,
    report_every: int = 8,
    temperature_K: float = 300.0,
    seed: int = 2026,
    equilibration_steps: int = 300,
    write_files: bool = True,
) -> EngineRun:
    """Run rigid TIP3P water in NVE with OpenMM and record what it reports.

    Parameters
    ----------
    tmp_dir : folder for the files written from the run (a per-session temporary folder).
    dt_fs : integration time step, fs (1 fs conserves energy well; 4 fs visibly worse).
    box_nm : cubic box edge, nm (1.8 nm holds 185 waters; the 0.8 nm cutoff needs >= 1.6 nm).
    n_steps, report_every : production length and report interval, in steps (F = n_steps/report_every + 1
        reports, including step 0).
    temperature_K, seed, equilibration_steps : the shared starting state.
    """
    import mdtraj as md
    import openmm.unit as u

    key = (str(tmp_dir), dt_fs, box_nm, n_steps, report_every, temperature_K, seed, equilibration_steps,
           write_files)
    if key in _RUN_CACHE:
        return _RUN_CACHE[key]
    modeller, system, state0 = _equilibrated(box_nm, temperature_K, seed, equilibration_steps)
    ctx, integ = _context(system, dt_fs)
    ctx.setState(state0)
    ctx.setTime(0.0)
    ctx.setStepCount(0)

    pos, vel, ke, pe, time, steps = [], [], [], [], [], []
    n_reports = n_steps // report_every + 1
    for r in range(n_reports):
        if r:
            integ.step(report_every)
        s = ctx.getState(getPositions=True, getVelocities=True, getEnergy=True, enforcePeriodicBox=False)
        pos.append(s.getPositions(asNumpy=True).value_in_unit(u.nanometer))
        vel.append(s.getVelocities(asNumpy=True).value_in_unit(u.nanometer / u.picosecond))
        ke.append(s.getKineticEnergy().value_in_unit(u.kilojoule_per_mole))
        pe.append(s.getPotentialEnergy().value_in_unit(u.kilojoule_per_mole))
        time.append(s.getTime().value_in_unit(u.picosecond))
        steps.append(s.getStepCount())
    box = np.array(state0.getPeriodicBoxVectors(asNumpy=True).value_in_unit(u.nanometer), dtype=np.float64)

    masses = np.array([system.getParticleMass(i).value_in_unit(u.dalton) for i in range(system.getNumParticles())])
    n_con = system.getNumConstraints()
    import openmm as mm

    has_cmm = any(isinstance(f, mm.CMMotionRemover) for f in system.getForces())
    n_dof = 3 * int(np.sum(masses > 0)) - n_con - (3 if has_cmm else 0)
    kb = (u.MOLAR_GAS_CONSTANT_R).value_in_unit(u.kilojoule_per_mole / u.kelvin)
    ke_arr = np.array(ke)
    run = EngineRun(
        dt_fs=dt_fs,
        n_waters=modeller.topology.getNumResidues(),
        step=np.array(steps, dtype=np.int64),
        time_ps=np.array(time),
        positions_nm=np.array(pos),
        velocities_nm_per_ps=np.array(vel),
        kinetic_kJ_per_mol=ke_arr,
        potential_kJ_per_mol=np.array(pe),
        box_nm=box,
        masses_amu=masses,
        n_constraints=n_con,
        n_dof=n_dof,
        temperature_K=2.0 * ke_arr / (n_dof * kb),
        topology=md.Topology.from_openmm(modeller.topology),
    )
    if write_files:
        out = Path(tmp_dir)
        out.mkdir(parents=True, exist_ok=True)
        stem = f"water_{dt_fs:g}fs_{n_steps}x{report_every}"
        run.paths.update(_write_files(run, out, stem))
    _RUN_CACHE[key] = run
    return run


def _write_files(run: EngineRun, out: Path, stem: str) -> dict[str, Path]:
    import contextlib
    import io

    import mdtraj as md

    from phasewake.core.readers.h5md import write_h5md

    paths: dict[str, Path] = {}
    obs = {
        "potential_energy": (run.potential_kJ_per_mol, "kJ mol-1"),
        "kinetic_energy": (run.kinetic_kJ_per_mol, "kJ mol-1"),
        "total_energy": (run.total_kJ_per_mol, "kJ mol-1"),
        "temperature": (run.temperature_K, "K"),
    }
    params = {"timestep_ps": run.dt_fs * 1e-3, "ensemble": "NVE", "thermostat": "none",
              "n_constraints": run.n_constraints, "integrator": "leapfrog", "com_motion_removed": True}
    paths["h5md"] = out / f"{stem}.h5md"
    write_h5md(paths["h5md"], positions_nm=run.positions_nm, time_ps=run.time_ps, step=run.step,
               velocities_nm_per_ps=run.velocities_nm_per_ps, box_nm=run.box_nm, masses_amu=run.masses_amu,
               observables=obs, parameters=params, topology=run.topology)

    paths["mdtraj_h5"] = out / f"{stem}.h5"
    write_mdtraj_layout_h5(paths["mdtraj_h5"], run)

    lengths = np.tile(np.linalg.norm(run.box_nm, axis=1), (len(run.time_ps), 1))
    traj = md.Trajectory(run.positions_nm.astype(np.float32), run.topology, time=run.time_ps,
                         unitcell_lengths=lengths, unitcell_angles=np.full_like(lengths, 90.0))
    paths["dcd"] = out / f"{stem}.dcd"
    paths["pdb"] = out / f"{stem}.pdb"
    with contextlib.redirect_stdout(io.StringIO()):
        traj.save_dcd(str(paths["dcd"]))
        traj[0].save_pdb(str(paths["pdb"]))

    paths["csv"] = out / f"{stem}_energies.csv"
    header = "time (ps),step,potential energy (kJ/mol),kinetic energy (kJ/mol),total energy (kJ/mol),temperature (K)"
    table = np.column_stack([run.time_ps, run.step, run.potential_kJ_per_mol, run.kinetic_kJ_per_mol,
                             run.total_kJ_per_mol, run.temperature_K])
    np.savetxt(paths["csv"], table, delimiter=",", header=header, comments="", fmt="%.10g")
    return paths


def write_mdtraj_layout_h5(path: Path, run: EngineRun) -> None:
    """mdtraj's HDF5 layout ("Pande" conventions 1.1) written with plain h5py, as mdtraj documents it.

    Written independently of our reader so a test of the reader checks it against the layout, not itself.
    """
    import h5py

    f_count = len(run.time_ps)
    chains = []
    for c in run.topology.chains:
        residues = []
        for r in c.residues:
            residues.append({"index": r.index, "name": r.name, "resSeq": r.resSeq, "segmentID": "",
                             "atoms": [{"index": a.index, "name": a.name, "element": a.element.symbol}
                                       for a in r.atoms]})
        chains.append({"index": c.index, "chain_id": "A", "residues": residues})
    topo = {"chains": chains, "bonds": [[b[0].index, b[1].index] for b in run.topology.bonds]}
    lengths = np.linalg.norm(run.box_nm, axis=1)
    with h5py.File(path, "w") as f:
        f.attrs["conventions"] = "Pande"
        f.attrs["conventionVersion"] = "1.1"
        f.attrs["program"] = "phasewake tests (OpenMM run)"
        f.attrs["programVersion"] = "0"
        f.attrs["title"] = "water box"
        f.attrs["application"] = "OpenMM"

        def put(name: str, data: np.ndarray, units: str | None) -> None:
            ds = f.create_dataset(name, data=data, chunks=True, compression="gzip")
            if units is not None:
                ds.attrs["units"] = np.bytes_(units)

        put("coordinates", run.positions_nm.astype(np.float32), "nanometers")
        put("velocities", run.velocities_nm_per_ps.astype(np.float32), "nanometers/picosecond")
        put("time", run.time_ps.astype(np.float32), "picoseconds")
        put("cell_lengths", np.tile(lengths, (f_count, 1)).astype(np.float32), "nanometers")
        put("cell_angles", np.full((f_count, 3), 90.0, dtype=np.float32), "degrees")
        put("kineticEnergy", run.kinetic_kJ_per_mol.astype(np.float32), "kilojoules_per_mole")
        put("potentialEnergy", run.potential_kJ_per_mol.astype(np.float32), "kilojoules_per_mole")
        put("temperature", run.temperature_K.astype(np.float32), "kelvin")
        f.create_dataset("topology", data=np.array([json.dumps(topo).encode("ascii")]))
