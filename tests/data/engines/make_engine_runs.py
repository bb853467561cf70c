"""Make the small engine runs under tests/data/engines with the engines themselves.

Run from the repository root:

    python tests/data/engines/make_engine_runs.py [gromacs] [lammps] [openmm] [cp2k] [layouts]

(no argument = all). Each run is made in a scratch folder; the files the engine wrote are copied to
tests/data/engines/<engine>/<run>/ together with ``reported.json``: what the engine itself reported in
its own log (GROMACS md.log, LAMMPS log.lammps, CP2K main output) or through its API (OpenMM), read
here with a few plain text searches. Neither phasewake's readers nor any engine analysis tool (no
``gmx energy``, ``gmx check``, ``gmx dump``) is used to write these numbers: they are the outside
reference that tests/app/test_engine_runs.py compares phasewake against.

The systems are our own: SPC/E water made with ``gmx solvate`` from the spc216.gro GROMACS ships, a
Lennard-Jones argon lattice for LAMMPS and CP2K, TIP3P water built from code for OpenMM. Seeds are
fixed; every run takes seconds on one CPU thread.

The AMBER mdout and NAMD log made by ``layouts`` are NOT engine output (neither engine can be installed
here): they are laid out as each engine's documentation and public examples show,
with numbers taken from the OpenMM water run, and say so in their README and JSON.
"""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
SEED = 2026

# ----------------------------------------------------------------------------------------------------
# shared helpers


def _run(cmd: list[str], cwd: Path, stdin: str | None = None, env: dict[str, str] | None = None) -> str:
    full_env = dict(os.environ)
    full_env.update({"OMP_NUM_THREADS": "1", "GMX_MAXBACKUP": "-1"})
    if env:
        full_env.update(env)
    proc = subprocess.run(cmd, cwd=cwd, input=stdin, capture_output=True, text=True, env=full_env, check=False)
    if proc.returncode != 0:
        sys.stderr.write(proc.stdout[-4000:] + proc.stderr[-4000:])
        raise RuntimeError(f"{' '.join(cmd)} failed with exit {proc.returncode} in {cwd}")
    return proc.stdout + proc.stderr


def _fresh(folder: Path) -> Path:
    if folder.exists():
        shutil.rmtree(folder)
    folder.mkdir(parents=True)
    return folder


def _copy(src_dir: Path, names: list[str], dest: Path) -> None:
    for name in names:
        shutil.copy2(src_dir / name, dest / name)


def _write_json(path: Path, data: dict[str, Any]) -> None:
    path.write_text(json.dumps(data, indent=2, sort_keys=False) + "\n")


def _mean(values: list[float]) -> float:
    return sum(values) / len(values)


# ----------------------------------------------------------------------------------------------------
# GROMACS: SPC/E water (134 molecules, 402 atoms) from gmx solvate

GMX_TOP = """; SPC/E water box made by make_engine_runs.py (gmx solvate from spc216.gro)
#include "oplsaa.ff/forcefield.itp"
#include "oplsaa.ff/spce.itp"

[ system ]
SPC/E water, 134 molecules

[ molecules ]
SOL {n}
"""

GMX_COMMON = """cutoff-scheme   = Verlet
nstlist         = 10
pbc             = xyz
coulombtype     = PME
rcoulomb        = 0.7
rvdw            = 0.7
fourierspacing  = 0.12
DispCorr        = EnerPres
pcoupl          = no
comm-mode       = linear
"""


def _mdp(**kw: Any) -> str:
    lines = [f"{k.replace('_', '-'):<16}= {v}" for k, v in kw.items()]
    return "; written by make_engine_runs.py\n" + "\n".join(lines) + "\n" + GMX_COMMON


def _gmx_version(gmx: str, cwd: Path) -> str:
    out = _run([gmx, "--version"], cwd)
    m = re.search(r"GROMACS version:\s+(\S+)", out)
    return m.group(1) if m else "unknown"


def _gmx_run(gmx: str, work: Path, mdp: str, conf: str, deffnm: str = "md", extra: list[str] | None = None) -> None:
    (work / "grompp.mdp").write_text(mdp)
    _run([gmx, "-quiet", "grompp", "-f", "grompp.mdp", "-c", conf, "-p", "topol.top", "-o", f"{deffnm}.tpr",
          "-po", "mdout.mdp", "-maxwarn", "0"], work)
    _run([gmx, "-quiet", "mdrun", "-nt", "1", "-pin", "off", "-reprod", "-deffnm", deffnm] + (extra or []), work)


def parse_gmx_log(text: str) -> dict[str, Any]:
    """What GROMACS wrote in md.log: input parameters, nrdf, atom count, averages, drift."""
    out: dict[str, Any] = {}
    m = re.search(r"GROMACS:\s+gmx mdrun, version (\S+)", text)
    out["engine_version"] = m.group(1) if m else None
    params = {}
    block = text.split("Input Parameters:", 1)[1]
    for line in block.splitlines()[1:]:
        pm = re.match(r"^   (\S+)\s+=\s+(.*)$", line)
        if pm:
            params.setdefault(pm.group(1), pm.group(2).strip())
        if line.startswith("grpopts:"):
            break
    grp = block.split("grpopts:", 1)[1]
    out["nrdf"] = [float(x) for x in re.search(r"nrdf:\s+(.*)", grp).group(1).split()]  # type: ignore[union-attr]
    out["ref_t"] = [float(x) for x in re.search(r"ref-t:\s+(.*)", grp).group(1).split()]  # type: ignore[union-attr]
    out["tau_t"] = [float(x) for x in re.search(r"tau-t:\s+(.*)", grp).group(1).split()]  # type: ignore[union-attr]
    out["params"] = {k: params[k] for k in ("integrator", "tinit", "dt", "nsteps", "init-step", "nstcalcenergy",
                                            "nstenergy", "nstlog", "nstxout", "nstvout", "nstxout-compressed",
                                            "tcoupl", "nsttcouple", "pcoupl", "constraints", "comm-mode",
                                            "define") if k in params}
    m = re.search(r"There are:\s+(\d+)\s+Atoms", text)
    out["atoms"] = int(m.group(1)) if m else None
    m = re.search(r"Conserved energy drift:\s+(\S+)\s+kJ/mol/ps per atom", text)
    out["conserved_energy_drift_kJ_mol_ps_atom"] = float(m.group(1)) if m else None
    m = re.search(r"Statistics over (\d+) steps using (\d+) frames", text)
    out["averages_steps"], out["averages_frames"] = (int(m.group(1)), int(m.group(2))) if m else (None, None)
    averages = text.split("A V E R A G E S", 1)[1]
    avg = _gmx_energy_rows(averages.split("Energies (kJ/mol)", 1)[1])
    out["averages"] = avg
    # every energy block printed during the run (step, time, Temperature, Total/Conserved energy)
    steps = []
    running = text.split("A V E R A G E S", 1)[0]
    for bm in re.finditer(r"^\s+Step\s+Time\s*\n\s+(\d+)\s+(\S+)\s*\n(.*?)(?=^\s+Step\s+Time|\Z)", running,
                          flags=re.S | re.M):
        if "Energies (kJ/mol)" not in bm.group(3):
            continue  # orphan header (append restart)
        rows = _gmx_energy_rows(bm.group(3).split("Energies (kJ/mol)", 1)[1])
        steps.append({"step": int(bm.group(1)), "time_ps": float(bm.group(2)), **rows})
    out["log_energy_blocks"] = steps
    return out


def _gmx_energy_rows(text: str) -> dict[str, float]:
    """Name rows and value rows in 15-character fields, 5 per row, up to the first blank line pair."""
    vals: dict[str, float] = {}
    lines = text.splitlines()
    i = 0
    while i < len(lines) and not lines[i].strip():
        i += 1
    while i + 1 < len(lines) and lines[i].strip() and lines[i + 1].strip():
        names = [lines[i][j:j + 15].strip() for j in range(0, len(lines[i]), 15)]
        values = lines[i + 1].split()
        if len(values) != len(names):
            break
        for n, v in zip(names, values):
            vals[n] = float(v)
        i += 2
    return vals


def _gmx_report(run: str, log_text: str, mdp: dict[str, Any], files: list[str], note: str) -> dict[str, Any]:
    log = parse_gmx_log(log_text)
    p = log["params"]
    dt = float(p["dt"])
    nsteps = int(p["nsteps"])
    tcoupl = p["tcoupl"]
    ensemble = "NVE" if tcoupl.lower() == "no" else "NVT"
    temps = [b["Temperature"] for b in log["log_energy_blocks"]]
    frames = {}
    for key, name in (("nstxout", "trr positions"), ("nstvout", "trr velocities"),
                      ("nstxout-compressed", "xtc")):
        n = int(p[key])
        frames[name] = nsteps // n + 1 if n > 0 else 0
    nstenergy = int(p["nstenergy"])
    frames["edr"] = nsteps // nstenergy + 1
    reported = {
        "atoms": log["atoms"],
        "time_step_ps": dt,
        "time_step_fs": dt * 1000.0,
        "n_steps": nsteps,
        "integrator": p["integrator"],
        "ensemble": ensemble,
        "thermostat": None if ensemble == "NVE" else tcoupl,
        "target_temperature_K": None if ensemble == "NVE" else log["ref_t"][0],
        "degrees_of_freedom": log["nrdf"][0],
        "temperature_mean_K": log["averages"]["Temperature"],
        "temperature_mean_over_log_blocks_K": _mean(temps),
        "averages_over": f"{log['averages_steps']} steps using {log['averages_frames']} frames",
        "conserved_energy_drift_kJ_mol_ps_atom": log["conserved_energy_drift_kJ_mol_ps_atom"],
        "frames": frames,
        "units_style": "GROMACS (nm, ps, kJ/mol, K)",
        "flexible_water": "FLEXIBLE" in p.get("define", ""),
        "constraints": "none (flexible SPC/E)" if "FLEXIBLE" in p.get("define", "") else "SETTLE (rigid SPC/E)",
    }
    if "Total Energy" in log["averages"]:
        reported["total_energy_mean_kJ_mol"] = log["averages"]["Total Energy"]
    if "Conserved En." in log["averages"]:
        reported["conserved_energy_mean_kJ_mol"] = log["averages"]["Conserved En."]
    return {
        "engine": "GROMACS",
        "engine_version": log["engine_version"],
        "origin": "engine output: written by gmx mdrun; numbers below read by make_engine_runs.py from md.log",
        "run": run,
        "what_was_run": note,
        "mdp": mdp,
        "files": files,
        "reported": reported,
        "sources": {
            "atoms": "md.log 'There are: N Atoms'",
            "time_step_ps": "md.log Input Parameters 'dt'",
            "ensemble": "md.log Input Parameters 'tcoupl' (no = NVE)",
            "degrees_of_freedom": "md.log grpopts 'nrdf'",
            "temperature_mean_K": "md.log 'A V E R A G E S' Temperature (nstcalcenergy = nstenergy, so over the edr frames)",
            "conserved_energy_drift_kJ_mol_ps_atom": "md.log 'Conserved energy drift'",
            "frames": "nsteps / nst*out + 1 from md.log Input Parameters",
        },
        "log_energy_blocks": [{k: b[k] for k in ("step", "time_ps", "Temperature", "Total Energy",
                                                  "Conserved En.") if k in b}
                              for b in log["log_energy_blocks"]],
    }


def _gmx_water_box(solvent: str, atoms_per_water: int) -> tuple[str, Path, str, int] | None:
    """gmx, a fresh work folder, the GROMACS version and the water count of a 1.6 nm box of ``solvent``
    (``gmx solvate -cs``) in work/conf.gro; None (said) when gmx is not installed."""
    gmx = shutil.which("gmx")
    if gmx is None:
        print(f"gmx not found: GROMACS runs with {solvent} skipped")
        return None
    work = Path(tempfile.mkdtemp(prefix="pw_gmx_"))
    version = _gmx_version(gmx, work)
    _run([gmx, "-quiet", "solvate", "-cs", solvent, "-box", "1.6", "1.6", "1.6", "-o", "conf.gro"], work)
    return gmx, work, version, int((work / "conf.gro").read_text().splitlines()[1]) // atoms_per_water


def make_gromacs(root: Path) -> None:
    box = _gmx_water_box("spc216.gro", 3)
    if box is None:
        return
    gmx, work, version, n_water = box
    top = GMX_TOP.format(n=n_water)
    base = work / "base"
    base.mkdir()
    shutil.copy2(work / "conf.gro", base / "conf.gro")
    (base / "topol.top").write_text(top)
    # minimise, then equilibrate rigid (2 fs) and flexible (0.5 fs) water at 300 K with v-rescale
    _gmx_run(gmx, base, _mdp(integrator="steep", nsteps=200), "conf.gro", "em")
    _gmx_run(gmx, base, _mdp(integrator="md", dt=0.002, nsteps=2500, tcoupl="v-rescale", tc_grps="System",
                             tau_t=0.1, ref_t=300, gen_vel="yes", gen_temp=300, gen_seed=SEED,
                             ld_seed=SEED, constraints="none", nstenergy=100, nstcalcenergy=100,
                             nstlog=500), "em.gro", "eq_rigid")
    # flexible: stochastic dynamics (Langevin, friction 1/tau_t on every atom) so that the O-H stretch and
    # bend, cold when the bonds are released, reach 300 K like the rest (a global thermostat leaves the H
    # atoms colder than the O atoms for picoseconds)
    _gmx_run(gmx, base, "define          = -DFLEXIBLE\n" + _mdp(
        integrator="sd", dt=0.0005, nsteps=6000, tcoupl="no", tc_grps="System", tau_t=0.1, ref_t=300,
        gen_vel="no", continuation="yes", ld_seed=SEED, nstenergy=100, nstcalcenergy=100, nstlog=500),
        "eq_rigid.gro", "eq_flex")

    runs = [
        ("spce_flexible_nve_0.5fs", "flexible SPC/E (define = -DFLEXIBLE), NVE, leap-frog, dt 0.5 fs, 2 ps",
         True, dict(integrator="md", dt=0.0005, nsteps=4000, tcoupl="no", nstxout=200, nstvout=200,
                    nstxout_compressed=80, nstenergy=40, nstcalcenergy=40, nstlog=200)),
        ("spce_flexible_nve_2fs", "flexible SPC/E (define = -DFLEXIBLE), NVE, leap-frog, dt 2 fs, 2 ps",
         True, dict(integrator="md", dt=0.002, nsteps=1000, tcoupl="no", nstxout=50, nstvout=50,
                    nstxout_compressed=20, nstenergy=10, nstcalcenergy=10, nstlog=50)),
        ("spce_rigid_nvt_vrescale", "rigid SPC/E (SETTLE), v-rescale 300 K tau 0.1 ps (NVT), dt 2 fs, 4 ps",
         False, dict(integrator="md", dt=0.002, nsteps=2000, tcoupl="v-rescale", tc_grps="System", tau_t=0.1,
                     ref_t=300, ld_seed=SEED, nstxout=100, nstvout=100, nstxout_compressed=40, nstenergy=20,
                     nstcalcenergy=20, nstlog=100)),
    ]
    out_root = root / "gromacs"
    out_root.mkdir(parents=True, exist_ok=True)
    for name, note, flexible, params in runs:
        w = _fresh(work / name)
        shutil.copy2(base / ("eq_flex.gro" if flexible else "eq_rigid.gro"), w / "start.gro")
        (w / "topol.top").write_text(top)
        mdp = ("define          = -DFLEXIBLE\n" if flexible else "") + _mdp(
            gen_vel="no", continuation="yes", constraints="none", **params)
        _gmx_run(gmx, w, mdp, "start.gro")
        dest = _fresh(out_root / name)
        files = ["grompp.mdp", "mdout.mdp", "topol.top", "md.log", "md.edr", "md.trr", "md.xtc", "md.gro"]
        _copy(w, files, dest)
        report = _gmx_report(name, (w / "md.log").read_text(), params, files, note)
        report["engine_version"] = report["engine_version"] or version
        _write_json(dest / "reported.json", report)
        print(f"{name}: T {report['reported']['temperature_mean_K']} K, drift "
              f"{report['reported']['conserved_energy_drift_kJ_mol_ps_atom']}")
    _make_gromacs_parts(gmx, base, work, top, out_root)
    shutil.rmtree(work)


def _make_gromacs_parts(gmx: str, base: Path, work: Path, top: str, out_root: Path) -> None:
    """A rigid-water NVE run made whole, and again in three parts (mdrun -noappend).

    part 1: steps 0-600; part 2 continues from part 1's last checkpoint (step 600, repeated as -noappend
    does) to step 1200, keeping a checkpoint at every neighbour-search step; part 3 restarts from part 2's
    checkpoint at step 1120, i.e. before part 2 ended, so parts 2 and 3 share the 5 xtc frames of steps
    1120-1200 (frames every 20 steps), and runs to step 1800. With -reprod on one thread the continuation
    follows the same trajectory as the whole run.
    """
    params = dict(integrator="md", dt=0.002, tcoupl="no", nstxout=100, nstvout=100, nstxout_compressed=20,
                  nstenergy=20, nstcalcenergy=20, nstlog=100, gen_vel="no", continuation="yes",
                  constraints="none")
    whole = _fresh(work / "whole")
    shutil.copy2(base / "eq_rigid.gro", whole / "start.gro")
    (whole / "topol.top").write_text(top)
    _gmx_run(gmx, whole, _mdp(nsteps=1800, **params), "start.gro")

    parts = _fresh(work / "parts")
    shutil.copy2(base / "eq_rigid.gro", parts / "start.gro")
    (parts / "topol.top").write_text(top)
    _gmx_run(gmx, parts, _mdp(nsteps=1800, **params), "start.gro", extra=["-nsteps", "600"])
    # part 2: steps 600 -> 1200 (on a continuation, mdrun -nsteps counts the steps still to run), numbered
    # checkpoints at every neighbour-search step
    _run([gmx, "-quiet", "mdrun", "-nt", "1", "-pin", "off", "-reprod", "-deffnm", "md", "-cpi", "md.cpt",
          "-noappend", "-nsteps", "600", "-cpt", "0", "-cpnum"], parts)
    cpt = sorted(parts.glob("md_step1120.cpt"))
    if not cpt:
        raise RuntimeError(f"no checkpoint at step 1120 in {sorted(p.name for p in parts.glob('*.cpt'))}")
    shutil.copy2(cpt[0], parts / "restart1120.cpt")
    _run([gmx, "-quiet", "mdrun", "-nt", "1", "-pin", "off", "-reprod", "-deffnm", "md", "-cpi",
          "restart1120.cpt", "-noappend", "-nsteps", "680"], parts)
    dest_whole = _fresh(out_root / "spce_rigid_nve_whole")
    files = ["grompp.mdp", "mdout.mdp", "topol.top", "md.log", "md.edr", "md.trr", "md.xtc", "md.gro"]
    _copy(whole, files, dest_whole)
    rep = _gmx_report("spce_rigid_nve_whole", (whole / "md.log").read_text(), params | {"nsteps": 1800}, files,
                      "rigid SPC/E, NVE, dt 2 fs, 1800 steps in one go (reference for the three-part run)")
    _write_json(dest_whole / "reported.json", rep)
    dest = _fresh(out_root / "spce_rigid_nve_parts")
    part_files = ["grompp.mdp", "mdout.mdp", "topol.top", "md.log", "md.edr", "md.trr", "md.xtc", "md.gro"]
    for suffix in ("part0002", "part0003"):
        part_files += [f"md.{suffix}.{ext}" for ext in ("log", "edr", "trr", "xtc", "gro")]
    _copy(parts, part_files, dest)
    logs = {f: parse_gmx_log((parts / f).read_text()) for f in ("md.log", "md.part0002.log", "md.part0003.log")}
    part_info = []
    for f, log in logs.items():
        blocks = log["log_energy_blocks"]
        first = blocks[0]["step"]
        m = re.search(r"Reading checkpoint file.*?\n\s+step:\s+(\d+)", (parts / f).read_text(), flags=re.S)
        if m:  # a continuation starts at its checkpoint's step (its first log block can come later)
            first = int(m.group(1))
        part_info.append({"log": f, "first_step": first, "last_step": blocks[-1]["step"],
                          "first_time_ps": round(first * float(log["params"]["dt"]), 6), "last_time_ps": blocks[-1]["time_ps"]})
    rep = {
        "engine": "GROMACS",
        "engine_version": logs["md.log"]["engine_version"],
        "origin": "engine output: written by gmx mdrun (-noappend continuations); numbers read from the md*.log",
        "run": "spce_rigid_nve_parts",
        "what_was_run": (
            "the run of spce_rigid_nve_whole made in three parts: md.* steps 0-600; md.part0002.* from the "
            "step-600 checkpoint to step 1200 (step 600 written again); md.part0003.* from part 2's "
            "checkpoint at step 1120 to step 1800, so steps 1120-1200 (5 xtc frames, 20 steps apart) are in "
            "both part 2 and part 3; an engine keeps the later part's frames. mdrun -reprod, one thread."),
        "files": part_files,
        "reported": {
            "atoms": logs["md.log"]["atoms"],
            "time_step_ps": float(logs["md.log"]["params"]["dt"]),
            "ensemble": "NVE",
            "degrees_of_freedom": logs["md.log"]["nrdf"][0],
            "parts": part_info,
            "overlap_steps": [1120, 1200],
            "overlap_xtc_frames": 5,
            "frames_whole_run": {"xtc": 1800 // 20 + 1, "trr": 1800 // 100 + 1, "edr": 1800 // 20 + 1},
        },
        "sources": {"parts": "first and last Step of the energy blocks in each part's log"},
    }
    _write_json(dest / "reported.json", rep)
    print("gromacs parts:", part_info)


# ----------------------------------------------------------------------------------------------------
# LAMMPS: Lennard-Jones argon, 256 atoms on an fcc lattice (4 x 4 x 4 cells) that melts at once

LMP_KB = {"real": 0.0019872067, "metal": 8.617343e-5, "lj": 1.0}  # energy/K per style (LAMMPS units doc)

LMP_SYSTEM = {
    # units: (lattice constant or reduced density, mass, epsilon, sigma, cutoff, start T, dt)
    "real": ("5.719", "39.948", "0.2381", "3.405", "8.5", "240.0", "4.0"),  # kcal/mol, Angstrom, fs
    "metal": ("5.719", "39.948", "0.010325", "3.405", "8.5", "240.0", "0.004"),  # eV, Angstrom, ps
    "lj": ("0.8442", "1.0", "1.0", "1.0", "2.5", "2.0", "0.005"),  # reduced units
}


def _lmp_equilibrate(units: str) -> str:
    """Melt the lattice and bring it near 120 K (1.0 in lj units) with fix nvt; the runs start from here."""
    a, mass, eps, sig, rc, t0, dt = LMP_SYSTEM[units]
    t_eq, damp = ("1.0", "0.5") if units == "lj" else ("120.0", str(100 * float(dt)))
    return (
        f"# Lennard-Jones argon, 256 atoms: equilibration (make_engine_runs.py)\n"
        f"units           {units}\n"
        f"atom_style      atomic\n"
        f"boundary        p p p\n"
        f"lattice         fcc {a}\n"
        f"region          box block 0 4 0 4 0 4\n"
        f"create_box      1 box\n"
        f"create_atoms    1 box\n"
        f"mass            1 {mass}\n"
        f"pair_style      lj/cut {rc}\n"
        f"pair_coeff      1 1 {eps} {sig}\n"
        f"velocity        all create {t0} {SEED} mom yes rot no dist gaussian\n"
        f"timestep        {dt}\n"
        f"fix             1 all nvt temp {t_eq} {t_eq} {damp}\n"
        f"thermo          500\n"
        f"run             3000\n"
        f"write_data      start.data\n"
    )


def _lmp_head(units: str) -> str:
    a, mass, eps, sig, rc, t0, dt = LMP_SYSTEM[units]
    return (
        f"# Lennard-Jones argon, 256 atoms, from an equilibrated liquid (make_engine_runs.py)\n"
        f"units           {units}\n"
        f"atom_style      atomic\n"
        f"boundary        p p p\n"
        f"pair_style      lj/cut {rc}\n"
        f"read_data       start.data\n"
        f"pair_coeff      1 1 {eps} {sig}\n"
        f"timestep        {dt}\n"
    )


LMP_RUNS: dict[str, tuple[str, str, str]] = {
    "argon_real_nve": ("real", "NVE (fix nve), real units, dt 4 fs, 2000 steps; two dumps (wrapped x, "
                       "unwrapped xu sorted by id) and a data file", (
        "fix             1 all nve\n"
        "thermo_style    custom step time temp pe ke etotal press\n"
        "thermo          50\n"
        "dump            1 all custom 200 dump.lammpstrj id type x y z vx vy vz\n"
        "dump            2 all custom 200 dump.unwrapped.lammpstrj id type xu yu zu vx vy vz\n"
        "dump_modify     2 sort id\n"
        "run             2000\n"
        "write_data      argon.data\n")),
    "argon_metal_nve": ("metal", "NVE (fix nve), metal units, dt 4 fs (0.004 ps), 2000 steps; dump with "
                        "image flags ix iy iz; data file", (
        "fix             1 all nve\n"
        "thermo_style    custom step time temp pe ke etotal press\n"
        "thermo          50\n"
        "dump            1 all custom 200 dump.lammpstrj id type x y z ix iy iz vx vy vz\n"
        "run             2000\n"
        "write_data      argon.data\n")),
    "argon_lj_nve": ("lj", "NVE (fix nve), lj reduced units (energies per atom, thermo_modify norm yes "
                     "by default), dt 0.005 tau, 2000 steps", (
        "fix             1 all nve\n"
        "thermo_style    custom step time temp pe ke etotal press\n"
        "thermo          50\n"
        "dump            1 all custom 200 dump.lammpstrj id type x y z vx vy vz\n"
        "run             2000\n"
        "write_data      argon.data\n")),
    "argon_real_nvt": ("real", "NVT (fix nvt, Nose-Hoover, 120 K, Tdamp 400 fs), real units, dt 4 fs, "
                       "2000 steps", (
        "fix             1 all nvt temp 120.0 120.0 400.0\n"
        "thermo_style    custom step time temp pe ke etotal ecouple econserve press\n"
        "thermo          50\n"
        "dump            1 all custom 200 dump.lammpstrj id type x y z vx vy vz\n"
        "run             2000\n"
        "write_data      argon.data\n")),
    "argon_real_two_runs": ("real", "two run commands in one input (NVE, real units, dt 4 fs, 1000 + 1000 "
                            "steps); the second run prints different thermo columns", (
        "fix             1 all nve\n"
        "thermo_style    custom step temp pe ke etotal\n"
        "thermo          50\n"
        "run             1000\n"
        "thermo_style    custom step time temp pe ke etotal press vol\n"
        "thermo          100\n"
        "run             1000\n")),
}


def parse_lammps_log(text: str) -> dict[str, Any]:
    """What LAMMPS wrote in log.lammps: version, echoed commands, thermo blocks, 'Loop time' lines."""
    lines = text.splitlines()
    out: dict[str, Any] = {"engine_version": None, "units": "lj", "timestep": None, "fixes": [], "runs": []}
    m = re.match(r"LAMMPS \((.*)\)", lines[0])
    out["engine_version"] = m.group(1) if m else None
    i = 0
    while i < len(lines):
        line = lines[i]
        words = line.split()
        if words[:1] == ["units"]:
            out["units"] = words[1]
        elif words[:1] == ["timestep"]:
            out["timestep"] = float(words[1])
        elif words[:1] == ["fix"]:
            out["fixes"].append(" ".join(words[1:]))
        elif words[:1] == ["Step"]:
            cols = words
            rows = []
            i += 1
            while i < len(lines) and not lines[i].startswith("Loop time of"):
                vals = lines[i].split()
                if len(vals) == len(cols):
                    try:
                        rows.append([float(v) for v in vals])
                    except ValueError:
                        pass
                i += 1
            lm = re.match(r"Loop time of \S+ on (\d+) procs for (\d+) steps with (\d+) atoms", lines[i])
            assert lm, lines[i]
            out["runs"].append({"columns": cols, "rows": rows, "steps": int(lm.group(2)),
                                "atoms": int(lm.group(3))})
        i += 1
    return out


def _lmp_report(run: str, units: str, note: str, log_text: str, files: list[str],
                dump_every: int | None) -> dict[str, Any]:
    log = parse_lammps_log(log_text)
    kb = LMP_KB[log["units"]]
    atoms = log["runs"][-1]["atoms"]
    runs = []
    for r in log["runs"]:
        cols = r["columns"]
        rows = r["rows"]
        temp = [row[cols.index("Temp")] for row in rows]
        ke = [row[cols.index("KinEng")] for row in rows]
        tot = [row[cols.index("TotEng")] for row in rows]
        # KinEng = dof kB T / 2 (per atom under lj's norm yes)
        scale = atoms if log["units"] == "lj" else 1
        dofs = [2.0 * k * scale / (kb * t) for k, t in zip(ke, temp) if t > 0]
        info = {"columns": cols, "n_rows": len(rows), "first_step": int(rows[0][0]), "last_step": int(rows[-1][0]),
                "steps": r["steps"], "atoms": r["atoms"], "temperature_mean": _mean(temp),
                "total_energy_mean": _mean(tot), "kinetic_energy_mean": _mean(ke),
                "degrees_of_freedom_from_KinEng_over_Temp": sorted(dofs)[len(dofs) // 2],
                "dof_spread": max(dofs) - min(dofs)}
        if "Econserve" in cols:
            ec = [row[cols.index("Econserve")] for row in rows]
            info["econserve_first_last"] = [ec[0], ec[-1]]
        if dump_every:
            at = [row for row in rows if int(row[0]) % dump_every == 0]
            info["temperature_mean_at_dump_steps"] = _mean([row[cols.index("Temp")] for row in at])
            info["total_energy_mean_at_dump_steps"] = _mean([row[cols.index("TotEng")] for row in at])
        runs.append(info)
    fixes = log["fixes"]
    integrate = " ".join(fixes)
    if " nvt " in f" {integrate} ":
        ensemble, thermostat = "NVT", "Nose-Hoover (fix nvt)"
        target = float(integrate.split(" temp ")[1].split()[1])
    else:
        ensemble, thermostat, target = "NVE", None, None
    dt = log["timestep"]
    dt_ps = {"real": dt * 1e-3, "metal": dt, "lj": None}[log["units"]]
    total_steps = sum(r["steps"] for r in log["runs"])
    frames = {}
    if dump_every:
        for f in files:
            if f.startswith("dump"):
                frames[f] = total_steps // dump_every + 1
    reported = {
        "atoms": atoms,
        "units_style": log["units"],
        "time_step": dt,
        "time_step_units": {"real": "fs", "metal": "ps", "lj": "tau"}[log["units"]],
        "time_step_ps": dt_ps,
        "n_steps": total_steps,
        "ensemble": ensemble,
        "thermostat": thermostat,
        "target_temperature": target,
        "fixes": fixes,
        "degrees_of_freedom": round(runs[-1]["degrees_of_freedom_from_KinEng_over_Temp"]),
        "temperature_mean": runs[-1]["temperature_mean"] if len(runs) == 1 else None,
        "temperature_units": "K" if log["units"] != "lj" else "epsilon/kB",
        "energy_units": {"real": "kcal/mol", "metal": "eV", "lj": "epsilon per atom (norm yes)"}[log["units"]],
        "frames": frames,
        "thermo_runs": runs,
    }
    if len(runs) == 1 and dump_every:
        reported["temperature_mean_at_dump_steps"] = runs[0]["temperature_mean_at_dump_steps"]
        reported["total_energy_mean"] = runs[0]["total_energy_mean"]
        reported["total_energy_mean_at_dump_steps"] = runs[0]["total_energy_mean_at_dump_steps"]
    return {
        "engine": "LAMMPS",
        "engine_version": log["engine_version"],
        "origin": "engine output: written by lmp; numbers below read by make_engine_runs.py from log.lammps",
        "run": run,
        "what_was_run": note,
        "files": files,
        "reported": reported,
        "sources": {
            "atoms": "log.lammps 'Loop time of ... with N atoms'",
            "units_style": "log.lammps echoed 'units' command",
            "time_step": "log.lammps echoed 'timestep' command",
            "ensemble": "log.lammps echoed 'fix' commands",
            "degrees_of_freedom": "2 KinEng / (kB Temp) on the thermo rows (x N atoms for lj, norm yes)",
            "temperature_mean": "mean of the thermo Temp column over the run's rows (first row = step 0)",
            "temperature_mean_at_dump_steps": "mean of Temp over the thermo rows at the dump steps",
            "frames": "steps / dump interval + 1",
        },
    }


def make_lammps(root: Path) -> None:
    lmp = shutil.which("lmp")
    if lmp is None:
        print("lmp not found: LAMMPS runs skipped")
        return
    work = Path(tempfile.mkdtemp(prefix="pw_lmp_"))
    out_root = root / "lammps"
    out_root.mkdir(parents=True, exist_ok=True)
    for units in LMP_SYSTEM:
        eq = _fresh(work / f"equilibrate_{units}")
        (eq / "in.equilibrate").write_text(_lmp_equilibrate(units))
        _run([lmp, "-in", "in.equilibrate", "-log", "log.lammps", "-screen", "none", "-nocite"], eq)
    for name, (units, note, body) in LMP_RUNS.items():
        w = _fresh(work / name)
        shutil.copy2(work / f"equilibrate_{units}" / "start.data", w / "start.data")
        (w / "in.argon").write_text(_lmp_head(units) + body)
        _run([lmp, "-in", "in.argon", "-log", "log.lammps", "-screen", "none", "-nocite"], w)
        files = ["in.argon", "start.data", "log.lammps"] + sorted(p.name for p in w.glob("dump*")) + (
            ["argon.data"] if (w / "argon.data").exists() else [])
        dest = _fresh(out_root / name)
        _copy(w, files, dest)
        dump_every = 200 if "dump" in body else None
        report = _lmp_report(name, units, note, (w / "log.lammps").read_text(), files, dump_every)
        _write_json(dest / "reported.json", report)
        rep = report["reported"]
        print(f"{name}: T {rep['temperature_mean']} dof {rep['degrees_of_freedom']} {rep['units_style']}")
    shutil.rmtree(work)


# ----------------------------------------------------------------------------------------------------


# ----------------------------------------------------------------------------------------------------
# OpenMM: TIP3P water (amber14/tip3p.xml shipped with OpenMM), built from code with Modeller.addSolvent

OPENMM_RUNS: dict[str, dict[str, Any]] = {
    "tip3p_rigid_nve_verlet": dict(
        note="rigid TIP3P (129 waters, 387 atoms), NVE with VerletIntegrator (leap-frog), dt 2 fs, 1000 steps; CSV every "
             "10 steps, DCD and H5MD (positions and velocities) every 50 steps",
        flexible=False, integrator="verlet", dt_fs=2.0, n_steps=1000, csv_every=10, dcd_every=50, h5_every=50),
    "tip3p_rigid_nvt_langevin": dict(
        note="rigid TIP3P (129 waters, 387 atoms), LangevinMiddleIntegrator 300 K, friction 1/ps, dt 2 fs, 1000 steps; "
             "CSV every 10 steps, DCD and H5MD every 50 steps; nothing in the files says it is thermostatted",
        flexible=False, integrator="langevin", dt_fs=2.0, n_steps=1000, csv_every=10, dcd_every=50, h5_every=50),
    "tip3p_flexible_frames_1fs": dict(
        note="flexible TIP3P (27 waters, 81 atoms, PME with a 0.45 nm cutoff), NVE with VerletIntegrator, dt 0.5 fs, 1000 steps (0.5 ps); H5MD "
             "frames every 2 steps = 1 fs, CSV every 10 steps",
        flexible=True, integrator="verlet", dt_fs=0.5, n_steps=1000, csv_every=10, dcd_every=0, h5_every=2),
    "tip3p_flexible_frames_10fs": dict(
        note="the same flexible TIP3P from the same start, NVE, dt 0.5 fs, 4000 steps (2 ps); H5MD frames "
             "every 20 steps = 10 fs, too far apart to resolve the O-H stretch; CSV every 20 steps",
        flexible=True, integrator="verlet", dt_fs=0.5, n_steps=4000, csv_every=20, dcd_every=0, h5_every=20),
    "tip4pew_rigid_nve_verlet": dict(
        note="rigid TIP4P-Ew (126 waters: 378 atoms and 126 massless virtual sites M, 504 particles), NVE with "
             "VerletIntegrator, dt 2 fs, 1000 steps; CSV every 10 steps, DCD and H5MD every 50 steps",
        flexible=False, integrator="verlet", dt_fs=2.0, n_steps=1000, csv_every=10, dcd_every=50, h5_every=50,
        model="tip4pew"),
}


def _openmm_system(flexible: bool, model: str = "tip3p"):
    import openmm as mm
    import openmm.app as app
    import openmm.unit as u

    ff = app.ForceField(f"amber14/{model}.xml")
    modeller = app.Modeller(app.Topology(), [] * u.nanometer)
    edge, cutoff = (0.95, 0.45) if flexible else (1.6, 0.7)
    modeller.addSolvent(ff, model=model, boxSize=mm.Vec3(edge, edge, edge) * u.nanometer)
    system = ff.createSystem(modeller.topology, nonbondedMethod=app.PME, nonbondedCutoff=cutoff * u.nanometer,
                             constraints=None if flexible else app.HBonds, rigidWater=not flexible,
                             ewaldErrorTolerance=5e-5)
    return modeller, system


def _openmm_platform():
    import openmm as mm

    return mm.Platform.getPlatformByName("CPU"), {"Threads": "1", "DeterministicForces": "true"}


def _openmm_start(flexible: bool, model: str = "tip3p"):
    """Minimise, give 300 K velocities (seeded), equilibrate 1 ps with a Langevin thermostat."""
    import openmm as mm
    import openmm.app as app
    import openmm.unit as u

    modeller, system = _openmm_system(flexible, model)
    dt = 0.5 if flexible else 2.0
    integ = mm.LangevinMiddleIntegrator(300 * u.kelvin, 5.0 / u.picosecond, dt * u.femtosecond)
    integ.setRandomNumberSeed(SEED)
    integ.setConstraintTolerance(1e-8)
    platform, props = _openmm_platform()
    sim = app.Simulation(modeller.topology, system, integ, platform, props)
    sim.context.setPositions(modeller.positions)
    sim.minimizeEnergy(tolerance=10.0, maxIterations=200)
    sim.context.setVelocitiesToTemperature(300 * u.kelvin, SEED)
    sim.step(int(round(1000.0 / dt)))
    return modeller, sim.context.getState(getPositions=True, getVelocities=True)


def _write_h5md(path: Path, frames: dict[str, Any], masses: list[float], species: list[int],
                bonds: list[tuple[int, int]], box_nm: list[float], creator_version: str) -> None:
    """H5MD 1.1 (de Buyl et al., Comput. Phys. Commun. 185, 1546 (2014)) written here with plain h5py.

    What OpenMM's State gave at each frame: positions, velocities, kinetic and potential energy. Nothing
    about the ensemble or the time step is written (an H5MD file from an engine does not carry them).
    """
    import h5py
    import numpy as np

    with h5py.File(path, "w") as f:
        h5 = f.create_group("h5md")
        h5.attrs["version"] = np.array([1, 1], dtype=np.int32)
        h5.create_group("author").attrs["name"] = "make_engine_runs.py"
        cr = h5.create_group("creator")
        cr.attrs["name"] = "OpenMM (State written by make_engine_runs.py)"
        cr.attrs["version"] = creator_version
        g = f.create_group("particles/all")
        box = g.create_group("box")
        box.attrs["dimension"] = np.int32(3)
        box.attrs["boundary"] = np.array([b"periodic"] * 3)
        box.create_dataset("edges", data=np.asarray(box_nm, dtype=np.float64)).attrs["unit"] = "nm"
        step = np.asarray(frames["step"], dtype=np.int64)
        time = np.asarray(frames["time"], dtype=np.float64)
        for name, key, unit in (("position", "x", "nm"), ("velocity", "v", "nm ps-1")):
            e = g.create_group(name)
            e.create_dataset("value", data=np.asarray(frames[key], dtype=np.float32)).attrs["unit"] = unit
            if name == "position":
                e.create_dataset("step", data=step)
                e.create_dataset("time", data=time).attrs["unit"] = "ps"
            else:
                e["step"] = g["position/step"]  # hard links: sampled together
                e["time"] = g["position/time"]
        g.create_dataset("mass", data=np.asarray(masses, dtype=np.float64)).attrs["unit"] = "u"
        g.create_dataset("species", data=np.asarray(species, dtype=np.int32))
        conn = f.create_group("connectivity")
        ds = conn.create_dataset("bonds", data=np.asarray(bonds, dtype=np.int64))
        ds.attrs["particles_group"] = g.ref
        obs = f.create_group("observables")
        for name, key, unit in (("potential_energy", "pe", "kJ mol-1"), ("kinetic_energy", "ke", "kJ mol-1"),
                                ("total_energy", "etot", "kJ mol-1")):
            o = obs.create_group(name)
            o.create_dataset("value", data=np.asarray(frames[key], dtype=np.float64)).attrs["unit"] = unit
            o["step"] = g["position/step"]
            o["time"] = g["position/time"]


def _grab_state(context: Any, frames: dict[str, list[Any]]) -> None:
    """Append what OpenMM's State reports now: step, time, positions, velocities, energies."""
    import openmm.unit as u

    st = context.getState(getPositions=True, getVelocities=True, getEnergy=True)
    frames["step"].append(st.getStepCount())
    frames["time"].append(st.getTime().value_in_unit(u.picosecond))
    frames["x"].append(st.getPositions(asNumpy=True).value_in_unit(u.nanometer))
    frames["v"].append(st.getVelocities(asNumpy=True).value_in_unit(u.nanometer / u.picosecond))
    pe = st.getPotentialEnergy().value_in_unit(u.kilojoule_per_mole)
    ke = st.getKineticEnergy().value_in_unit(u.kilojoule_per_mole)
    frames["pe"].append(pe)
    frames["ke"].append(ke)
    frames["etot"].append(pe + ke)


def _parse_openmm_csv(path: Path) -> dict[str, list[float]]:
    lines = path.read_text().splitlines()
    names = [n.strip('"') for n in lines[0].lstrip("#").split(",")]
    cols: dict[str, list[float]] = {n: [] for n in names}
    for line in lines[1:]:
        for n, v in zip(names, line.split(",")):
            cols[n].append(float(v))
    return cols


def make_openmm(root: Path, only: str | None = None) -> None:
    try:
        import openmm as mm
        import openmm.app as app
        import openmm.unit as u
    except ImportError:
        print("openmm not importable: OpenMM runs skipped")
        return
    out_root = root / "openmm"
    out_root.mkdir(parents=True, exist_ok=True)
    version = mm.Platform.getOpenMMVersion()
    starts = {}
    kb = u.MOLAR_GAS_CONSTANT_R.value_in_unit(u.kilojoule_per_mole / u.kelvin)
    for name, cfg in OPENMM_RUNS.items():
        if only is not None and name != only:
            continue
        flexible, model = cfg["flexible"], cfg.get("model", "tip3p")
        if (flexible, model) not in starts:
            starts[(flexible, model)] = _openmm_start(flexible, model)
        modeller, state0 = starts[(flexible, model)]
        _, system = _openmm_system(flexible, model)
        dt = cfg["dt_fs"]
        if cfg["integrator"] == "verlet":
            integ = mm.VerletIntegrator(dt * u.femtosecond)
            ensemble, thermostat, target = "NVE", None, None
        else:
            integ = mm.LangevinMiddleIntegrator(300 * u.kelvin, 1.0 / u.picosecond, dt * u.femtosecond)
            integ.setRandomNumberSeed(SEED + 1)
            ensemble, thermostat, target = "NVT", "Langevin (LangevinMiddleIntegrator, friction 1/ps)", 300.0
        integ.setConstraintTolerance(1e-8)
        platform, props = _openmm_platform()
        sim = app.Simulation(modeller.topology, system, integ, platform, props)
        sim.context.setState(state0)
        sim.context.setTime(0.0)
        sim.context.setStepCount(0)
        dest = _fresh(out_root / name)
        files = ["start.pdb", "energies.csv", "frames.h5md"]
        with open(dest / "start.pdb", "w") as fh:
            app.PDBFile.writeFile(modeller.topology, state0.getPositions(), fh)
        csv_fh = open(dest / "energies.csv", "w")  # noqa: SIM115 (closed below, after the run)
        sim.reporters.append(app.StateDataReporter(csv_fh, cfg["csv_every"], step=True, time=True,
                                                   potentialEnergy=True, kineticEnergy=True, totalEnergy=True,
                                                   temperature=True))
        if cfg["dcd_every"]:
            sim.reporters.append(app.DCDReporter(str(dest / "trajectory.dcd"), cfg["dcd_every"]))
            files.insert(1, "trajectory.dcd")
        frames: dict[str, list[Any]] = {k: [] for k in ("step", "time", "x", "v", "pe", "ke", "etot")}

        _grab_state(sim.context, frames)
        for _ in range(cfg["n_steps"] // cfg["h5_every"]):
            sim.step(cfg["h5_every"])
            _grab_state(sim.context, frames)
        csv_fh.close()
        for r in sim.reporters:
            if isinstance(r, app.DCDReporter):  # it closes its file only when garbage-collected
                r._out.close()
        masses = [system.getParticleMass(i).value_in_unit(u.dalton) for i in range(system.getNumParticles())]
        species = [a.element.atomic_number if a.element is not None else 0 for a in modeller.topology.atoms()]
        bonds = [(b[0].index, b[1].index) for b in modeller.topology.bonds()]
        box = state0.getPeriodicBoxVectors(asNumpy=True).value_in_unit(u.nanometer)
        _write_h5md(dest / "frames.h5md", frames, masses, species, bonds, [box[0][0], box[1][1], box[2][2]],
                    version)
        n_con = system.getNumConstraints()
        has_cmm = any(isinstance(f, mm.CMMotionRemover) for f in system.getForces())
        dof = 3 * sum(1 for m in masses if m > 0) - n_con - (3 if has_cmm else 0)
        csv = _parse_openmm_csv(dest / "energies.csv")
        t_frames = [2.0 * ke / (dof * kb) for ke in frames["ke"]]
        reported = {
            "atoms": system.getNumParticles(),
            "waters": modeller.topology.getNumResidues(),
            "time_step_ps": integ.getStepSize().value_in_unit(u.picosecond),
            "time_step_fs": dt,
            "n_steps": cfg["n_steps"],
            "integrator": type(integ).__name__,
            "ensemble": ensemble,
            "thermostat": thermostat,
            "target_temperature_K": target,
            "constraints": n_con,
            "virtual_sites": sum(1 for i in range(system.getNumParticles()) if system.isVirtualSite(i)),
            "rigid_water": not flexible,
            "cm_motion_removed": has_cmm,
            "degrees_of_freedom": dof,
            "temperature_mean_K": _mean(csv["Temperature (K)"]),
            "temperature_mean_at_h5md_frames_K": _mean(t_frames),
            "kinetic_energy_mean_at_h5md_frames_kJ_mol": _mean(frames["ke"]),
            "total_energy_mean_kJ_mol": _mean(csv["Total Energy (kJ/mole)"]),
            "total_energy_first_last_kJ_mol": [csv["Total Energy (kJ/mole)"][0], csv["Total Energy (kJ/mole)"][-1]],
            "frames": {"energies.csv": len(csv["Step"]), "frames.h5md": len(frames["step"])}
            | ({"trajectory.dcd": cfg["n_steps"] // cfg["dcd_every"]} if cfg["dcd_every"] else {}),
            "frame_interval_fs": {"energies.csv": cfg["csv_every"] * dt, "frames.h5md": cfg["h5_every"] * dt}
            | ({"trajectory.dcd": cfg["dcd_every"] * dt} if cfg["dcd_every"] else {}),
            "units_style": "OpenMM (nm, ps, kJ/mol, K; PDB and DCD in Angstrom)",
            "velocities": ("as State.getVelocities() returns them: leap-frog, half a step behind the positions"
                           if cfg["integrator"] == "verlet" else
                           "as State.getVelocities() returns them (LangevinMiddleIntegrator)"),
        }
        report = {
            "engine": "OpenMM",
            "engine_version": version,
            "origin": ("engine output: start.pdb, energies.csv (StateDataReporter) and trajectory.dcd "
                       "(DCDReporter) written by OpenMM; frames.h5md written by make_engine_runs.py from "
                       "OpenMM's State at each frame; numbers below from OpenMM's API and its CSV"),
            "run": name,
            "what_was_run": cfg["note"],
            "files": files,
            "reported": reported,
            "sources": {
                "atoms": "System.getNumParticles()",
                "time_step_ps": "Integrator.getStepSize()",
                "ensemble": "the integrator class (VerletIntegrator = NVE)",
                "degrees_of_freedom": "3 x particles with mass - System.getNumConstraints() - 3 (CMMotionRemover), "
                                      "as StateDataReporter counts them",
                "temperature_mean_K": "mean of the StateDataReporter 'Temperature (K)' column",
                "temperature_mean_at_h5md_frames_K": "2 State.getKineticEnergy() / (dof R) at the H5MD frames",
            },
        }
        _write_json(dest / "reported.json", report)
        print(f"{name}: T {reported['temperature_mean_K']:.3f} K dof {dof} atoms {reported['atoms']}")


# ----------------------------------------------------------------------------------------------------
# CP2K (Fist, classical): the same Lennard-Jones argon, started from the positions in the LAMMPS
# real-units start.data (an equilibrated liquid at ~120 K); CP2K draws its own 120 K velocities.

CP2K_INPUT = """&GLOBAL
  PROJECT argon
  RUN_TYPE MD
  PRINT_LEVEL LOW
  SEED {seed}
&END GLOBAL
&MOTION
  &MD
    ENSEMBLE {ensemble}
    STEPS 500
    TIMESTEP 4.0
    TEMPERATURE 120.0
{thermostat}    &PRINT
      &ENERGY
        &EACH
          MD 5
        &END EACH
      &END ENERGY
      &PROGRAM_RUN_INFO
        &EACH
          MD 50
        &END EACH
      &END PROGRAM_RUN_INFO
    &END PRINT
  &END MD
  &PRINT
    &TRAJECTORY
      &EACH
        MD 100
      &END EACH
    &END TRAJECTORY
    &VELOCITIES
      &EACH
        MD 100
      &END EACH
    &END VELOCITIES
    &RESTART
      &EACH
        MD 500
      &END EACH
    &END RESTART
    &RESTART_HISTORY OFF
    &END RESTART_HISTORY
  &END PRINT
&END MOTION
&FORCE_EVAL
  METHOD FIST
  &MM
    &FORCEFIELD
      &CHARGE
        ATOM Ar
        CHARGE 0.0
      &END CHARGE
      &NONBONDED
        &LENNARD-JONES
          ATOMS Ar Ar
          EPSILON [kcalmol] 0.2381
          SIGMA [angstrom] 3.405
          RCUT [angstrom] 8.5
        &END LENNARD-JONES
      &END NONBONDED
    &END FORCEFIELD
    &POISSON
      &EWALD
        EWALD_TYPE NONE
      &END EWALD
    &END POISSON
  &END MM
  &SUBSYS
    &CELL
      ABC {box} {box} {box}
    &END CELL
    &COORD
{coords}
    &END COORD
  &END SUBSYS
&END FORCE_EVAL
"""

CP2K_THERMOSTAT = """    &THERMOSTAT
      TYPE CSVR
      &CSVR
        TIMECON 100.0
      &END CSVR
    &END THERMOSTAT
"""


def parse_cp2k_output(text: str) -> dict[str, Any]:
    def grab(pattern: str) -> str | None:
        m = re.search(pattern, text)
        return m.group(1) if m else None

    out: dict[str, Any] = {
        "engine_version": grab(r"CP2K\| version string:\s+CP2K version (\S+)"),
        "ensemble": grab(r"MD_PAR\| Ensemble type\s+(\S+)"),
        "time_step_fs": float(grab(r"MD_PAR\| Time step \[fs\]\s+(\S+)") or "nan"),
        "steps": int(grab(r"MD_PAR\| Number of time steps\s+(\d+)") or -1),
        "temperature_K": float(grab(r"MD_PAR\| Temperature \[K\]\s+(\S+)") or "nan"),
        "atoms": int(grab(r"DOF\| Number of atoms\s+(\d+)") or -1),
        "degrees_of_freedom": int(grab(r"DOF\| Degrees of freedom\s+(\d+)") or -1),
        "thermostat": grab(r"THERMOSTAT\| Type of thermostat\s+(.*\S)"),
    }
    blocks = re.findall(r"MD\| Temperature \[K\]\s+(\S+)\s+(\S+)", text)
    out["temperature_running_average_K"] = float(blocks[-1][1]) if blocks else None
    drift = re.findall(r"MD\| Energy drift per atom \[K\]\s+(\S+)\s+(\S+)", text)
    out["energy_drift_per_atom_K_last"] = float(drift[-1][0]) if drift else None
    return out


def make_cp2k(root: Path) -> None:
    cp2k = shutil.which("cp2k.psmp") or shutil.which("cp2k.ssmp") or shutil.which("cp2k")
    if cp2k is None:
        print("cp2k not found: CP2K runs skipped")
        return
    data = (root / "lammps" / "argon_real_nve" / "start.data").read_text()
    rows = data.split("Atoms # atomic", 1)[1].split("Velocities", 1)[0].split("\n")
    atoms = sorted((int(w[0]), w[2], w[3], w[4]) for w in (r.split() for r in rows) if len(w) >= 5)
    coords = "\n".join(f"      Ar {float(x):.8f} {float(y):.8f} {float(z):.8f}" for _, x, y, z in atoms)
    box = re.search(r"(\S+) (\S+) xlo xhi", data).group(2)  # type: ignore[union-attr]
    work = Path(tempfile.mkdtemp(prefix="pw_cp2k_"))
    out_root = root / "cp2k"
    out_root.mkdir(parents=True, exist_ok=True)
    for name, ensemble, note in (
        ("argon_fist_nve", "NVE", "Fist Lennard-Jones argon (256 atoms), NVE (velocity Verlet), dt 4 fs, 500 steps"),
        ("argon_fist_nvt_csvr", "NVT", "the same, NVT with the CSVR (Bussi) thermostat at 120 K, time constant "
                                       "100 fs, dt 4 fs, 500 steps"),
    ):
        w = _fresh(work / name)
        (w / "argon.inp").write_text(CP2K_INPUT.format(
            seed=SEED, ensemble=ensemble, thermostat=CP2K_THERMOSTAT if ensemble == "NVT" else "", box=box,
            coords=coords))
        _run([cp2k, "-i", "argon.inp", "-o", "argon.out"], w)
        files = ["argon.inp", "argon.out", "argon-1.ener", "argon-pos-1.xyz", "argon-vel-1.xyz"]
        dest = _fresh(out_root / name)
        _copy(w, files, dest)
        out = parse_cp2k_output((w / "argon.out").read_text())
        ener = [line.split() for line in (w / "argon-1.ener").read_text().splitlines() if not line.startswith("#")]
        temps = [float(r[3]) for r in ener]
        at_frames = [float(r[3]) for r in ener if int(r[0]) % 100 == 0]
        reported = {
            "atoms": out["atoms"],
            "time_step_fs": out["time_step_fs"],
            "time_step_ps": out["time_step_fs"] * 1e-3,
            "n_steps": out["steps"],
            "ensemble": out["ensemble"],
            "thermostat": out["thermostat"],
            "target_temperature_K": out["temperature_K"] if ensemble == "NVT" else None,
            "degrees_of_freedom": out["degrees_of_freedom"],
            "temperature_mean_K": _mean(temps),
            "temperature_mean_at_xyz_frames_K": _mean(at_frames),
            "temperature_running_average_K": out["temperature_running_average_K"],
            "conserved_quantity_first_last_hartree": [float(ener[0][5]), float(ener[-1][5])],
            "frames": {"argon-1.ener": len(ener), "argon-pos-1.xyz": out["steps"] // 100 + 1,
                       "argon-vel-1.xyz": out["steps"] // 100 + 1},
            "units_style": "CP2K (.ener: fs, hartree, K; pos xyz: Angstrom; vel xyz: bohr per atomic time unit)",
        }
        report = {
            "engine": "CP2K",
            "engine_version": out["engine_version"],
            "origin": "engine output: written by cp2k (Fist); numbers read by make_engine_runs.py from argon.out "
                      "and argon-1.ener",
            "run": name,
            "what_was_run": note,
            "files": files,
            "reported": reported,
            "sources": {
                "atoms": "argon.out 'DOF| Number of atoms'",
                "time_step_fs": "argon.out 'MD_PAR| Time step [fs]'",
                "ensemble": "argon.out 'MD_PAR| Ensemble type'",
                "degrees_of_freedom": "argon.out 'DOF| Degrees of freedom'",
                "temperature_mean_K": "mean of the Temp[K] column of argon-1.ener (every 5 steps from step 0)",
                "temperature_running_average_K": "argon.out last 'MD| Temperature [K]' average (all steps)",
            },
        }
        _write_json(dest / "reported.json", report)
        print(f"{name}: T {reported['temperature_mean_K']:.3f} K dof {reported['degrees_of_freedom']}")
    shutil.rmtree(work)


# ----------------------------------------------------------------------------------------------------
# AMBER mdout and NAMD log: NOT engine output. Neither engine can be installed here, so these files are
# laid out as the engines document an AMBER (sander) mdout and a NAMD log, with the numbers of the OpenMM
# Langevin water run (kcal/mol = kJ/mol / 4.184). The split of the potential into VDWAALS/VDW and
# EELEC/ELECT is OpenMM's: the Lennard-Jones part is the energy of the same frame with all charges off.

KCAL = 4.184  # kJ per kcal (thermochemical calorie, NIST SP 811)
LAYOUT_NOTE = "laid out per ENGINES.md, not engine output"
LAYOUT_README = """# {engine}: laid out per ENGINES.md, not engine output

`{file}` was NOT written by the engine: it cannot be installed here. make_engine_runs.py (`layouts`) laid
it out as the project's ENGINES.md describes this engine's file, with the numbers of the OpenMM run
`openmm/tip3p_rigid_nvt_langevin` (rigid TIP3P water, Langevin at 300 K, dt 2 fs) converted to kcal/mol
(/ 4.184), every 100 steps. It checks that a reader follows the documented layout, not that it matches
the real engine byte for byte. `reported.json` holds the numbers written into it.
"""


def _langevin_records(root: Path, every: int) -> tuple[dict[str, Any], list[dict[str, float]]]:
    """Rows of the OpenMM Langevin run at the H5MD frames that fall on multiples of ``every`` steps."""
    import h5py
    import numpy as np
    import openmm as mm
    import openmm.unit as u

    src = root / "openmm" / "tip3p_rigid_nvt_langevin"
    rep = json.loads((src / "reported.json").read_text())
    _, system = _openmm_system(flexible=False)
    for f in system.getForces():
        if isinstance(f, mm.NonbondedForce):
            for i in range(f.getNumParticles()):
                _, sig, eps = f.getParticleParameters(i)
                f.setParticleParameters(i, 0.0, sig, eps)
            for i in range(f.getNumExceptions()):
                a, b, _, sig, eps = f.getExceptionParameters(i)
                f.setExceptionParameters(i, a, b, 0.0, sig, eps)
    platform, props = _openmm_platform()
    ctx = mm.Context(system, mm.VerletIntegrator(0.001), platform, props)
    dof = rep["reported"]["degrees_of_freedom"]
    kb = u.MOLAR_GAS_CONSTANT_R.value_in_unit(u.kilojoule_per_mole / u.kelvin)
    rows = []
    with h5py.File(src / "frames.h5md", "r") as h5:
        g = h5["particles/all"]
        steps = g["position/step"][()]
        edges = g["box/edges"][()]
        ctx.setPeriodicBoxVectors(mm.Vec3(edges[0], 0, 0), mm.Vec3(0, edges[1], 0), mm.Vec3(0, 0, edges[2]))
        for k, step in enumerate(steps):
            if step == 0 or step % every:
                continue
            ctx.setPositions(np.asarray(g["position/value"][k], dtype=np.float64))
            lj = ctx.getState(getEnergy=True).getPotentialEnergy().value_in_unit(u.kilojoule_per_mole)
            pe = float(h5["observables/potential_energy/value"][k])
            ke = float(h5["observables/kinetic_energy/value"][k])
            rows.append({"step": int(step), "pe": pe / KCAL, "ke": ke / KCAL, "etot": (pe + ke) / KCAL,
                         "vdw": lj / KCAL, "elec": (pe - lj) / KCAL, "temp": 2.0 * ke / (dof * kb),
                         "volume": float(edges.prod()) * 1000.0})
    return rep, rows


def _amber_block(step: int, time_ps: float, r: dict[str, float]) -> str:
    return (
        f" NSTEP = {step:8d}   TIME(PS) = {time_ps:11.3f}  TEMP(K) = {r['temp']:8.2f}  PRESS = {0.0:7.1f}\n"
        f" Etot   = {r['etot']:14.4f}  EKtot   = {r['ke']:14.4f}  EPtot      = {r['pe']:14.4f}\n"
        f" BOND   = {0.0:14.4f}  ANGLE   = {0.0:14.4f}  DIHED      = {0.0:14.4f}\n"
        f" 1-4 NB = {0.0:14.4f}  1-4 EEL = {0.0:14.4f}  VDWAALS    = {r['vdw']:14.4f}\n"
        f" EELEC  = {r['elec']:14.4f}  EHBOND  = {0.0:14.4f}  RESTRAINT  = {0.0:14.4f}\n"
        f" Ewald error estimate:   0.0000E+00\n"
        f" ------------------------------------------------------------------------------\n\n"
    )


def make_layouts(root: Path) -> None:
    try:
        rep, rows = _langevin_records(root, every=100)
    except ImportError:
        print("openmm/h5py not importable: AMBER/NAMD layouts skipped")
        return
    r0 = rep["reported"]
    n_atoms, n_wat, dof = r0["atoms"], r0["waters"], r0["degrees_of_freedom"]
    dt_ps = r0["time_step_ps"]
    t_begin = 10.0  # time read from the (imagined) restart file: TIME(PS) continues, NSTEP starts at 0
    n_steps = r0["n_steps"]
    # ---- AMBER mdout (sander layout)
    head = f"""
          -------------------------------------------------------
          Amber 22 SANDER                              2022
          -------------------------------------------------------

| Run on 12/03/2026 at 16:00:00

| NOTE: {LAYOUT_NOTE}: written by make_engine_runs.py with numbers of an OpenMM run

File Assignments:
|  MDIN: md.in
| MDOUT: mdout
|INPCRD: eq.rst7
|  PARM: water.prmtop
|RESTRT: md.rst7
|  REFC: refc
| MDVEL: mdvel
|  MDEN: mden
| MDCRD: md.nc
|MDINFO: mdinfo

 Here is the input file:

TIP3P water box, Langevin MD
 &cntrl
  imin=0, irest=1, ntx=5,
  nstlim={n_steps}, dt={dt_ps},
  ntc=2, ntf=2,
  ntt=3, gamma_ln=1.0, temp0=300.0, ig={SEED},
  ntb=1, cut=7.0,
  ntpr=100, ntwx=50, ntwv=-1, ioutfm=1,
 /

--------------------------------------------------------------------------------
   1.  RESOURCE   USE:
--------------------------------------------------------------------------------

 NATOM  = {n_atoms:7d} NTYPES =       2 NBONH  = {n_atoms:7d} MBONA  =       0
 NTHETH = {n_wat:7d} MTHETA =       0 NPHIH  =       0 MPHIA  =       0
 NRES   = {n_wat:7d}

--------------------------------------------------------------------------------
   2.  CONTROL  DATA  FOR  THE  RUN
--------------------------------------------------------------------------------

default_name

General flags:
     imin    =       0, nmropt  =       0

Nature and format of input:
     ntx     =       5, irest   =       1, ntrx    =       1

Nature and format of output:
     ntxo    =       2, ntpr    =     100, ntrx    =       1, ntwr    =    {n_steps}
     iwrap   =       0, ntwx    =      50, ntwv    =      -1, ntwe    =       0
     ioutfm  =       1, ntwprt  =       0, idecomp =       0, rbornstat=      0

Potential function:
     ntf     =       2, ntb     =       1, igb     =       0, nsnb    =      25
     ipol    =       0, gbsa    =       0, iesp    =       0
     dielc   =   1.00000, cut     =   7.00000, intdiel =   1.00000

Frozen or restrained atoms:
     ibelly  =       0, ntr     =       0

Molecular dynamics:
     nstlim  = {n_steps:9d}, nscm    =      1000, nrespa  =         1
     t       =   0.00000, dt      =   {dt_ps:.5f}, vlimit  =  20.00000

Langevin dynamics temperature regulation:
     ig      =    {SEED}
     temp0   = 300.00000, tempi   =   0.00000, gamma_ln=   1.00000

SHAKE:
     ntc     =       2, jfastw  =       0
     tol     =   0.00001

--------------------------------------------------------------------------------
   3.  ATOMIC COORDINATES AND VELOCITIES
--------------------------------------------------------------------------------

default_name
 begin time read from input coords = {t_begin:9.3f} ps

 Number of triangulated 3-point waters found: {n_wat:8d}

--------------------------------------------------------------------------------
   4.  RESULTS
--------------------------------------------------------------------------------

|  # of SOLUTE  degrees of freedom (RNDFP): {dof + 3:8d}.
|  # of SOLVENT degrees of freedom (RNDFS):        0.
|  NDFMIN =        3.     NUM_NOSHAKE =      0     CORRECTED RNDFP = {dof:8d}.
|  TOTAL # of degrees of freedom (RNDF) = {dof:8d}.
 ---------------------------------------------------

"""
    body = "".join(_amber_block(r["step"], t_begin + r["step"] * dt_ps, r) for r in rows)
    keys = ("pe", "ke", "etot", "vdw", "elec", "temp")
    avg = {k: _mean([r[k] for r in rows]) for k in keys}
    rms = {k: math.sqrt(_mean([(r[k] - avg[k]) ** 2 for r in rows])) for k in keys}
    last = rows[-1]["step"]
    tail = (f"\n      A V E R A G E S   O V E R {len(rows):7d} S T E P S\n\n\n"
            + _amber_block(last, t_begin + last * dt_ps, avg)
            + "      R M S  F L U C T U A T I O N S\n\n\n"
            + _amber_block(last, t_begin + last * dt_ps, rms)
            + "--------------------------------------------------------------------------------\n"
            + "   5.  TIMINGS\n"
            + "--------------------------------------------------------------------------------\n\n"
            + "|  Total CPU time:            1.00 seconds\n")
    dest = _fresh(root / "amber" / "water_langevin_layout")
    (dest / "mdout").write_text(head + body + tail)
    (dest / "README.md").write_text(LAYOUT_README.format(engine="AMBER (sander) mdout", file="mdout"))
    temps = [r["temp"] for r in rows]
    _write_json(dest / "reported.json", {
        "engine": "AMBER (sander) layout",
        "engine_version": None,
        "origin": f"{LAYOUT_NOTE}: numbers from OpenMM run openmm/tip3p_rigid_nvt_langevin in kcal/mol",
        "run": "water_langevin_layout",
        "what_was_run": "nothing: mdout laid out by make_engine_runs.py (sander layout, ntt=3 Langevin, ntc=2 "
                        "SHAKE, ntb=1) with the OpenMM Langevin run's energies every 100 steps",
        "files": ["mdout"],
        "reported": {
            "atoms": n_atoms, "time_step_ps": dt_ps, "n_steps": n_steps, "ensemble": "NVT",
            "thermostat": "Langevin (ntt=3, gamma_ln 1/ps)", "target_temperature_K": 300.0,
            "degrees_of_freedom": dof, "records": len(rows), "temperature_mean_K": _mean(temps),
            "temperature_mean_printed_K": _mean([round(t, 2) for t in temps]),
            "total_energy_mean_kcal_mol": _mean([round(r["etot"], 4) for r in rows]),
            "first_time_ps": t_begin + rows[0]["step"] * dt_ps, "last_time_ps": t_begin + last * dt_ps,
            "first_nstep": rows[0]["step"], "units_style": "AMBER (Angstrom, ps, kcal/mol, K)",
        },
        "sources": {"all": "the numbers written into mdout by make_engine_runs.py (TEMP(K) printed to 0.01 K)"},
    })
    # ---- NAMD log
    cols = ["TS", "BOND", "ANGLE", "DIHED", "IMPRP", "ELECT", "VDW", "BOUNDARY", "MISC", "KINETIC", "TOTAL", "TEMP",
            "POTENTIAL", "TOTAL3", "TEMPAVG", "PRESSURE", "GPRESSURE", "VOLUME", "PRESSAVG", "GPRESSAVG"]
    edge = rows[0]["volume"] ** (1.0 / 3.0)
    info = [
        "Charm++> Running in non-SMP mode: 1 processes (layout only)",
        f"Info: NOTE: {LAYOUT_NOTE}: written by make_engine_runs.py with numbers of an OpenMM run",
        "Info: NAMD 2.14 for Linux-x86_64-multicore",
        "Info: Configuration file is water.namd",
        "Info: SIMULATION PARAMETERS:",
        f"Info: TIMESTEP               {dt_ps * 1000:g}",
        f"Info: NUMBER OF STEPS        {n_steps}",
        "Info: STEPS PER CYCLE        20",
        f"Info: PERIODIC CELL BASIS 1  {edge:.4f} 0 0",
        f"Info: PERIODIC CELL BASIS 2  0 {edge:.4f} 0",
        f"Info: PERIODIC CELL BASIS 3  0 0 {edge:.4f}",
        "Info: LOAD BALANCER  Centralized",
        "Info: FIRST TIMESTEP 0",
        "Info: ENERGY OUTPUT STEPS    100",
        "Info: LANGEVIN DYNAMICS ACTIVE",
        "Info: LANGEVIN TEMPERATURE   300",
        "Info: LANGEVIN USING BBK INTEGRATOR",
        "Info: LANGEVIN DAMPING COEFFICIENT IS 1 INVERSE PS",
        "Info: LANGEVIN DYNAMICS NOT APPLIED TO HYDROGENS",
        "Info: PARTICLE MESH EWALD (PME) ACTIVE",
        "Info: RIGID BONDS TO HYDROGEN : WATER",
        "Info:         ERROR TOLERANCE : 1e-08",
        "Info:          MAX ITERATIONS : 100",
        "Info: RIGID WATER USING SETTLE ALGORITHM",
        "Info: *****************************",
        "Info: STRUCTURE SUMMARY:",
        f"Info: {n_atoms} ATOMS",
        f"Info: {2 * n_wat} BONDS",
        f"Info: {n_wat} ANGLES",
        "Info: 0 DIHEDRALS",
        "Info: 0 IMPROPERS",
        f"Info: {n_atoms} RIGID BONDS",
        f"Info: {dof} DEGREES OF FREEDOM",
        "Info: *****************************",
        "",
    ]
    title = "ETITLE:      TS" + "".join(f"{c:>15s}" for c in cols[1:])
    lines = info + [title, ""]
    for k, r in enumerate(rows):
        vals = [0.0, 0.0, 0.0, 0.0, r["elec"], r["vdw"], 0.0, 0.0, r["ke"], r["etot"], r["temp"], r["pe"],
                r["etot"], r["temp"], 0.0, 0.0, r["volume"], 0.0, 0.0]
        if k and k % 5 == 0:
            lines += [title, ""]
        lines.append(f"ENERGY: {r['step']:7d}" + "".join(f"{v:15.4f}" for v in vals))
        lines.append("")
    lines += [f"WRITING EXTENDED SYSTEM TO OUTPUT FILE AT STEP {n_steps}", "WallClock: 1.0  CPUTime: 1.0  Memory: 100 MB",
              "End of program"]
    dest = _fresh(root / "namd" / "water_langevin_layout")
    (dest / "water.log").write_text("\n".join(lines) + "\n")
    (dest / "README.md").write_text(LAYOUT_README.format(engine="NAMD log", file="water.log"))
    _write_json(dest / "reported.json", {
        "engine": "NAMD layout",
        "engine_version": None,
        "origin": f"{LAYOUT_NOTE}: numbers from OpenMM run openmm/tip3p_rigid_nvt_langevin in kcal/mol",
        "run": "water_langevin_layout",
        "what_was_run": "nothing: log laid out by make_engine_runs.py (Info: start-up lines, ETITLE:/ENERGY: "
                        "records every 100 steps, ETITLE repeated every 5 records) with the OpenMM Langevin "
                        "run's energies; the pressure columns are 0 (not computed)",
        "files": ["water.log"],
        "reported": {
            "atoms": n_atoms, "time_step_ps": dt_ps, "time_step_fs": dt_ps * 1000, "n_steps": n_steps,
            "ensemble": "NVT", "thermostat": "Langevin (1/ps)", "target_temperature_K": 300.0,
            "degrees_of_freedom": dof, "records": len(rows), "temperature_mean_K": _mean(temps),
            "total_energy_mean_kcal_mol": _mean([r["etot"] for r in rows]),
            "units_style": "NAMD (Angstrom, fs, kcal/mol, K)",
        },
        "sources": {"all": "the numbers written into water.log by make_engine_runs.py (4 decimals)"},
    })
    print(f"layouts: {len(rows)} records, T {_mean(temps):.3f} K")


GMX_TIP4P_TOP = """; TIP4P water box made by make_engine_runs.py (gmx solvate from tip4p.gro)
#include "oplsaa.ff/forcefield.itp"
#include "oplsaa.ff/tip4p.itp"

[ system ]
TIP4P water

[ molecules ]
SOL {n}
"""


def make_gromacs_tip4p(root: Path) -> None:
    """Rigid TIP4P (SETTLE plus a massless virtual site MW per water), NVE at 2 fs: the GROMACS run of the
    virtual-site checks. GROMACS writes MW's positions and velocities in the .trr and leaves it out of nrdf."""
    box = _gmx_water_box("tip4p.gro", 4)
    if box is None:
        return
    gmx, work, version, n_water = box
    top = GMX_TIP4P_TOP.format(n=n_water)
    (work / "topol.top").write_text(top)
    _gmx_run(gmx, work, _mdp(integrator="steep", nsteps=200), "conf.gro", "em")
    _gmx_run(gmx, work, _mdp(integrator="md", dt=0.002, nsteps=2500, tcoupl="v-rescale", tc_grps="System",
                             tau_t=0.1, ref_t=300, gen_vel="yes", gen_temp=300, gen_seed=SEED, ld_seed=SEED,
                             constraints="none", nstenergy=100, nstcalcenergy=100, nstlog=500), "em.gro", "eq")
    name = "tip4p_rigid_nve"
    params = dict(integrator="md", dt=0.002, nsteps=1000, tcoupl="no", nstxout=50, nstvout=50,
                  nstxout_compressed=0, nstenergy=10, nstcalcenergy=10, nstlog=100)
    w = _fresh(work / name)
    shutil.copy2(work / "eq.gro", w / "start.gro")
    (w / "topol.top").write_text(top)
    _gmx_run(gmx, w, _mdp(gen_vel="no", continuation="yes", constraints="none", **params), "start.gro")
    dest = _fresh(root / "gromacs" / name)
    files = ["grompp.mdp", "mdout.mdp", "topol.top", "md.log", "md.edr", "md.trr", "md.gro"]
    _copy(w, files, dest)
    report = _gmx_report(name, (w / "md.log").read_text(), params, files,
                         f"rigid TIP4P (OPLS-AA tip4p.itp: SETTLE and a massless site MW), {n_water} waters, "
                         "NVE, leap-frog, dt 2 fs, 2 ps")
    report["engine_version"] = report["engine_version"] or version
    report["reported"]["constraints"] = "SETTLE (rigid TIP4P) and one virtual site per water"
    report["reported"]["waters"] = n_water
    vsites = re.search(r"There are: (\d+) VSites", (w / "md.log").read_text())
    report["reported"]["virtual_sites"] = int(vsites.group(1)) if vsites else None
    report["sources"]["virtual_sites"] = "md.log 'There are: N VSites'"
    report["sources"]["atoms"] = "md.log 'There are: N Atoms' (the atoms with mass; the sites are counted apart)"
    _write_json(dest / "reported.json", report)
    print(f"{name}: T {report['reported']['temperature_mean_K']} K, nrdf {report['reported']['degrees_of_freedom']}")
    shutil.rmtree(work)


MAKERS = {"gromacs": make_gromacs, "gromacs-tip4p": make_gromacs_tip4p, "lammps": make_lammps,
          "openmm": make_openmm, "cp2k": make_cp2k, "layouts": make_layouts}


def main(argv: list[str]) -> int:
    """Make the named engines' runs (all by default); ``openmm:RUN`` makes one OpenMM run."""
    which = argv or ["gromacs", "gromacs-tip4p", "lammps", "openmm", "cp2k", "layouts"]
    for name in which:
        if name.startswith("openmm:"):
            make_openmm(HERE, only=name.split(":", 1)[1])
        elif name in MAKERS:
            MAKERS[name](HERE)
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
