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
here): they are laid out as /work/shared/ENGINES.md (copied into the project's knowledge) describes,
with numbers taken from the OpenMM water run, and say so in their README and JSON.
"""

from __future__ import annotations

import json
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


def make_gromacs(root: Path) -> None:
    gmx = shutil.which("gmx")
    if gmx is None:
        print("gmx not found: GROMACS runs skipped")
        return
    work = Path(tempfile.mkdtemp(prefix="pw_gmx_"))
    version = _gmx_version(gmx, work)
    _run([gmx, "-quiet", "solvate", "-cs", "spc216.gro", "-box", "1.6", "1.6", "1.6", "-o", "conf.gro"], work)
    n_water = int((work / "conf.gro").read_text().splitlines()[1]) // 3
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
    _gmx_run(gmx, base, "define          = -DFLEXIBLE\n" + _mdp(
        integrator="md", dt=0.0005, nsteps=2000, tcoupl="v-rescale", tc_grps="System", tau_t=0.1, ref_t=300,
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


MAKERS = {"gromacs": make_gromacs, "lammps": make_lammps}


def main(argv: list[str]) -> int:
    which = argv or ["gromacs", "lammps", "openmm", "cp2k", "layouts"]
    which = [w for w in which if w in MAKERS]
    for name in which:
        MAKERS[name](HERE)
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
