"""A small flexible TIP3P water box run with OpenMM (PyPI) in NVE, for the time-step and spectrum checks.

amber14/tip3p.xml with ``rigidWater=False`` and no constraints: the O-H bonds and the H-O-H angle are
harmonic, so the O-H stretches (~3400-3700 cm^-1, periods ~9-10 fs) and the bend (~1600 cm^-1) are in
the run. OpenMM's VerletIntegrator (leapfrog: velocities half a step off the positions) at
0.5 fs (common practice for flexible X-H bonds), positions and velocities saved every 2 steps (1 fs);
the same run read every 20 steps gives frames 10 fs apart. 64 waters in a 1.25 nm box, about 5 s.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

_CACHE: dict[tuple, tuple[Path, Path]] = {}


def flexible_water_files(out: Path, *, n_steps: int = 6144, seed: int = 7) -> tuple[Path, Path]:
    """H5MD files of one flexible-water NVE run: frames every 1 fs and every 10 fs (same run).

    The files carry no time step (the user gives it, as for a trajectory without its input file), say
    ensemble NVE and no constraints, and hold the topology (bonds O-H).
    """
    key = (str(out), n_steps, seed)
    if key in _CACHE:
        return _CACHE[key]
    import mdtraj as md
    import openmm as mm
    import openmm.app as app
    import openmm.unit as u

    from phasewake.core.readers.h5md import write_h5md

    ff = app.ForceField("amber14/tip3p.xml")
    modeller = app.Modeller(app.Topology(), [] * u.nanometer)
    modeller.addSolvent(ff, model="tip3p", numAdded=64, boxShape="cube")
    system = ff.createSystem(modeller.topology, nonbondedMethod=app.PME, nonbondedCutoff=0.6 * u.nanometer,
                             constraints=None, rigidWater=False, ewaldErrorTolerance=5e-4)
    assert system.getNumConstraints() == 0
    integ = mm.VerletIntegrator(0.5 * u.femtosecond)
    ctx = mm.Context(system, integ, mm.Platform.getPlatformByName("CPU"), {"Threads": "1"})
    ctx.setPositions(modeller.positions)
    mm.LocalEnergyMinimizer.minimize(ctx, 10.0, 200)
    ctx.setVelocitiesToTemperature(300 * u.kelvin, seed)
    integ.step(400)
    pos, vel, t = [], [], []
    for k in range(n_steps // 2):
        integ.step(2)
        s = ctx.getState(getPositions=True, getVelocities=True)
        pos.append(s.getPositions(asNumpy=True).value_in_unit(u.nanometer))
        vel.append(s.getVelocities(asNumpy=True).value_in_unit(u.nanometer / u.picosecond))
        t.append(0.001 * (k + 1))
    box = np.array(s.getPeriodicBoxVectors(asNumpy=True).value_in_unit(u.nanometer))
    masses = np.array([system.getParticleMass(i).value_in_unit(u.dalton) for i in range(system.getNumParticles())])
    top = md.Topology.from_openmm(modeller.topology)
    p, v, tt = np.array(pos), np.array(vel), np.array(t)
    params = {"ensemble": "NVE", "thermostat": "none", "n_constraints": 0, "integrator": "leapfrog"}
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for every, name in ((1, "flexwater_1fs.h5md"), (10, "flexwater_10fs.h5md")):
        path = out / name
        write_h5md(path, positions_nm=p[::every], time_ps=tt[::every], velocities_nm_per_ps=v[::every],
                   box_nm=box, masses_amu=masses, parameters=params, topology=top)
        paths.append(path)
    _CACHE[key] = (paths[0], paths[1])
    return _CACHE[key]
