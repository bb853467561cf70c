"""Energy files and run facts of each engine (core/readers: gromacs, lammps_log, amber, namd, cp2k,
openmm_csv).

Two kinds of reference:
- real engine output committed in tests/data/engines (GROMACS 2022.5, LAMMPS 29 Sep 2021), compared with
  what each engine reported in its own log (reported.json, written by make_engine_runs.py from md.log /
  log.lammps, not by our readers);
- files laid out by hand (or by a tiny writer here) exactly as each engine lays the format out (AMBER
  and NAMD cannot be run here; the .edr writer makes the cases the real files do not have: double
  precision, accumulators, blocks, cuts).
"""

from __future__ import annotations

import json
import struct
from pathlib import Path

import numpy as np
import pytest
import scipy.constants as sc
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from phasewake.app.cli import main
from phasewake.core.errors import CorruptFileError, EnergyTableError, InputError, PhasewakeError
from phasewake.core.readers import identify, open_run
from phasewake.core.readers.describe import describe, format_description

DATA = Path(__file__).resolve().parents[1] / "data" / "engines"
KCAL = 4.184  # kJ per kcal, thermochemical calorie (NIST SP 811, B.8)
EV_KJ_MOL = sc.electron_volt * sc.Avogadro / 1000  # 96.485332... kJ/mol per eV (CODATA via scipy)
HARTREE_KJ_MOL = sc.physical_constants["Hartree energy"][0] * sc.Avogadro / 1000


def _reported(folder: str) -> dict:
    return json.loads((DATA / folder / "reported.json").read_text())


# ---- a writer of the .edr layout GROMACS writes ---------------------------------------------------------

def _xdr_string(s: str) -> bytes:
    b = s.encode()
    return struct.pack(">i", len(b)) + b + b"\0" * ((4 - len(b) % 4) % 4)


def write_edr(path: Path, names, units, frames, *, double=False, nsum=0, blocks=()) -> Path:
    """frames: list of (time_ps, step, values). blocks: list of (id, [(type, data array)]) for every frame."""
    real = ">d" if double else ">f"
    out = bytearray(struct.pack(">iii", -55555, 5, len(names)))
    for n, u in zip(names, units):
        out += _xdr_string(n) + _xdr_string(u)
    for k, (t, step, values) in enumerate(frames):
        ns = nsum if k > 0 else 0
        out += struct.pack(real, -2e10) + struct.pack(">ii", -7777777, 5)
        out += struct.pack(">dqiqd", t, step, ns, 10, 0.002)
        out += struct.pack(">iii", len(names), 0, len(blocks))
        for bid, subs in blocks:
            out += struct.pack(">ii", bid, len(subs))
            for typ, data in subs:
                out += struct.pack(">ii", typ, len(data))
        out += struct.pack(">iii", 16 * len(names), 0, 0)
        for v in values:
            out += struct.pack(real, v)
            if ns > 0:
                out += struct.pack(real, 123.0) + struct.pack(real, 456.0)  # accumulators: must be skipped
        for _bid, subs in blocks:
            for typ, data in subs:
                fmt = {0: ">i", 1: ">f", 2: ">d", 3: ">q"}[typ]
                for x in data:
                    out += struct.pack(fmt, x)
    path.write_bytes(bytes(out))
    return path


NAMES = ["Potential", "Kinetic En.", "Total Energy", "Temperature", "Pressure"]
UNITS = ["kJ/mol", "kJ/mol", "kJ/mol", "K", "bar"]


def _frames(n=12):
    rng = np.random.default_rng(3)
    return [(0.02 * k, 10 * k, list(rng.normal(size=5) * 100)) for k in range(n)]


@pytest.mark.parametrize("double", [False, True])
@pytest.mark.parametrize("nsum", [0, 2])
def test_edr_written_to_the_layout_reads_back(tmp_path, double, nsum):
    frames = _frames()
    blocks = [(7, [(0, [1, 2, 3]), (2, [0.5, 0.25])]), (9, [(1, [1.5]), (3, [2**40])])]
    p = write_edr(tmp_path / "x.edr", NAMES, UNITS, frames, double=double, nsum=nsum, blocks=blocks)
    assert identify(p).name == "gromacs-edr"
    run = open_run([p])
    t = run.energies
    vals = np.array([f[2] for f in frames])
    tol = 0 if double else 1e-6
    np.testing.assert_allclose(t.time_ps, [f[0] for f in frames], rtol=1e-12)
    for j, name in enumerate(NAMES):
        np.testing.assert_allclose(t.series[name].values, vals[:, j], rtol=tol, atol=tol * 100)
    assert t.by_role("kinetic").name == "Kinetic En." and t.by_role("temperature").unit == "K"
    assert run.metadata.timestep_ps == pytest.approx(0.002)
    assert run.metadata.sources["timestep_ps"] == "x.edr (frame header)"
    assert run.metadata.extra["edr_precision"] == ("double" if double else "single")


def test_edr_cut_mid_frame_is_refused_naming_the_frame(tmp_path):
    # a run stopped by the queue leaves a half-written last frame: refused like a cut trajectory, naming the
    # frame and saying how many before it are complete
    p = write_edr(tmp_path / "full.edr", NAMES, UNITS, _frames(8))
    data = p.read_bytes()
    cut = tmp_path / "cut.edr"
    cut.write_bytes(data[:-30])
    with pytest.raises(CorruptFileError, match=r"ends inside frame 7 \(step 70.*7 frame\(s\) before it are complete"):
        open_run([cut])


def test_edr_without_a_complete_frame_or_damaged_is_an_error(tmp_path):
    p = write_edr(tmp_path / "full.edr", NAMES, UNITS, _frames(4))
    data = p.read_bytes()
    head = tmp_path / "head.edr"
    head.write_bytes(data[:200])  # header and part of frame 0
    with pytest.raises(CorruptFileError, match="frame 0"):
        open_run([head])
    bad = bytearray(data)
    size = 72 + 4 * len(NAMES)  # frame header (no blocks, single precision) + one float per term
    start = len(data) - 4 * size
    bad[start + 2 * size + 5] ^= 0xFF  # the frame marker of frame 2
    damaged = tmp_path / "damaged.edr"
    damaged.write_bytes(bytes(bad))
    with pytest.raises(CorruptFileError, match="frame 2"):
        open_run([damaged])
    # through the command line: one line naming the file, exit 2
    assert main(["describe", str(head)]) == 2


def test_edr_frames_of_several_layouts(tmp_path):
    # frame 0 without accumulators, the rest with (nsum > 0), as GROMACS writes with nstcalcenergy < nstenergy
    frames = _frames(40)
    p = write_edr(tmp_path / "x.edr", NAMES, UNITS, frames, nsum=5)
    t = open_run([p]).energies
    np.testing.assert_allclose(t.series["Pressure"].values, [f[2][4] for f in frames], rtol=1e-6)


# ---- GROMACS: real output ------------------------------------------------------------------------------

GMX_RUNS = ["spce_flexible_nve_0.5fs", "spce_flexible_nve_2fs", "spce_rigid_nvt_vrescale", "spce_rigid_nve_whole"]


@pytest.mark.parametrize("name", GMX_RUNS)
def test_gromacs_edr_equals_what_md_log_reported(name):
    rep = _reported(f"gromacs/{name}")["reported"]
    run = open_run([DATA / "gromacs" / name / "md.edr"])
    md = run.metadata
    assert len(run.energies) == rep["frames"]["edr"]
    # md.log averages are over the edr frames (nstcalcenergy = nstenergy), printed to 6 digits
    assert np.mean(run.energies.by_role("temperature").values) == pytest.approx(rep["temperature_mean_K"], abs=6e-4)
    assert md.timestep_ps == pytest.approx(rep["time_step_ps"])
    assert md.n_dof == rep["degrees_of_freedom"]
    assert md.ensemble == rep["ensemble"]
    assert md.integrator == "leap-frog" and md.velocities_half_step is True
    assert md.n_constraints == 3 * rep["atoms"] - 3 - rep["degrees_of_freedom"]  # nrdf = 3N - constraints - 3
    if rep["ensemble"] == "NVT":
        assert md.thermostat == "v-rescale" and md.temperature_K == rep["target_temperature_K"]
        assert md.conserved_quantity == "Conserved En." and run.energies.by_role("conserved") is not None
    else:
        assert md.thermostat == "none" and run.energies.by_role("conserved") is None


def test_gromacs_md_log_energies_equal_its_printed_blocks():
    doc = _reported("gromacs/spce_rigid_nvt_vrescale")
    run = open_run([DATA / "gromacs" / "spce_rigid_nvt_vrescale" / "md.log"])
    t = run.energies
    blocks = doc["log_energy_blocks"]
    assert len(t) == len(blocks)  # the averages at the end are not a row
    np.testing.assert_allclose(t.time_ps, [b["time_ps"] for b in blocks])
    np.testing.assert_allclose(t.series["Temperature"].values, [b["Temperature"] for b in blocks], rtol=1e-6)
    np.testing.assert_allclose(t.series["Conserved En."].values, [b["Conserved En."] for b in blocks], rtol=1e-6)
    np.testing.assert_allclose(t.by_role("total").values, [b["Total Energy"] for b in blocks], rtol=1e-6)
    assert run.metadata.sources["timestep_ps"] == "md.log"
    assert run.metadata.n_dof == doc["reported"]["degrees_of_freedom"]
    assert "LJ (SR)" in t.series and t.series["Pressure"].unit == "bar"


def test_gromacs_edr_and_md_log_agree_at_the_log_steps():
    # two files the engine wrote of one run: the .edr (binary, float32) and the log (6 printed digits)
    folder = DATA / "gromacs" / "spce_flexible_nve_2fs"
    e = open_run([folder / "md.edr"]).energies
    g = open_run([folder / "md.log"]).energies
    idx = np.searchsorted(e.time_ps, g.time_ps)
    np.testing.assert_allclose(e.time_ps[idx], g.time_ps)
    for name in ("Potential", "Kinetic En.", "Total Energy", "Temperature"):
        np.testing.assert_allclose(e.series[name].values[idx], g.series[name].values, rtol=5e-6)


def test_mdp_given_on_the_command_line_and_describe_shows_sources():
    folder = DATA / "gromacs" / "spce_flexible_nve_2fs"
    run = open_run([folder / "grompp.mdp"] + [folder / "md.log"])
    assert run.metadata.timestep_ps == pytest.approx(0.002)
    text = format_description(describe(run))
    assert "time step 2 fs from grompp.mdp" in text or "time step 2 fs from md.log" in text
    assert "ensemble NVE from" in text
    stated = open_run([folder / "md.log"], timestep_ps=0.001, ensemble="NVT")
    text = format_description(describe(stated))
    assert "time step 1 fs stated" in text and "ensemble NVT stated" in text


# ---- LAMMPS: real output ------------------------------------------------------------------------------

@pytest.mark.parametrize("name,factor", [("argon_real_nve", KCAL), ("argon_metal_nve", EV_KJ_MOL),
                                         ("argon_real_nvt", KCAL)])
def test_lammps_log_equals_its_thermo_output_after_conversion(name, factor):
    rep = _reported(f"lammps/{name}")["reported"]
    thermo = rep["thermo_runs"][0]
    run = open_run([DATA / "lammps" / name / "log.lammps"])
    t = run.energies
    md = run.metadata
    assert len(t) == thermo["n_rows"]
    assert np.mean(t.by_role("temperature").values) == pytest.approx(thermo["temperature_mean"], rel=1e-9)
    # kcal/mol x 4.184 (NIST SP 811); eV x N_A e / 1000 (CODATA, scipy.constants)
    assert np.mean(t.by_role("total").values) == pytest.approx(thermo["total_energy_mean"] * factor, rel=1e-9)
    assert np.mean(t.by_role("kinetic").values) == pytest.approx(thermo["kinetic_energy_mean"] * factor, rel=1e-9)
    assert t.by_role("total").unit == "kJ/mol"
    assert md.timestep_ps == pytest.approx(rep["time_step_ps"])
    assert md.n_dof == rep["degrees_of_freedom"]
    assert md.ensemble == rep["ensemble"]
    assert md.units_style == f"lammps {rep['units_style']}"
    np.testing.assert_allclose(t.time_ps[-1], thermo["last_step"] * rep["time_step_ps"])
    if rep["ensemble"] == "NVT":
        assert md.temperature_K == rep["target_temperature"] and md.thermostat == "nose-hoover"
        assert t.by_role("conserved").values[0] == pytest.approx(rep["thermo_runs"][0]["econserve_first_last"][0]
                                                                 * factor, rel=1e-7)
        assert t.by_role("bath_heat").name == "Ecouple"


def test_lammps_two_runs_join_and_drop_the_repeated_step():
    rep = _reported("lammps/argon_real_two_runs")["reported"]
    runs = rep["thermo_runs"]
    run = open_run([DATA / "lammps" / "argon_real_two_runs" / "log.lammps"])
    t = run.energies
    assert len(t) == runs[0]["n_rows"] + runs[1]["n_rows"] - 1  # step 1000 printed by both runs, kept once
    np.testing.assert_allclose(t.time_ps[[0, -1]], [0, runs[1]["last_step"] * rep["time_step_ps"]])
    assert set(t.series) == {"Temp", "PotEng", "KinEng", "TotEng"}  # the columns both runs print
    assert any("Press, Volume are not printed in every run" in w for w in run.warnings)
    n0, n1 = runs[0]["n_rows"], runs[1]["n_rows"]
    mean_all = (runs[0]["temperature_mean"] * n0 + runs[1]["temperature_mean"] * n1) / (n0 + n1)
    first_of_second = t.by_role("temperature").values[n0 - 1]  # the repeated row: counted in both means
    assert np.mean(t.by_role("temperature").values) == pytest.approx(
        (mean_all * (n0 + n1) - first_of_second) / (n0 + n1 - 1), rel=1e-9)


def test_lammps_lj_units_are_kept_and_labelled():
    rep = _reported("lammps/argon_lj_nve")["reported"]
    run = open_run([DATA / "lammps" / "argon_lj_nve" / "log.lammps"])
    t = run.energies
    tot = t.by_role("total")
    assert "lj reduced" in tot.unit and "kJ/mol" not in tot.unit and "per atom" in tot.unit
    assert np.mean(tot.values) == pytest.approx(rep["total_energy_mean"], rel=1e-12)  # unconverted
    assert np.mean(t.by_role("temperature").values) == pytest.approx(rep["temperature_mean"], rel=1e-12)
    # the time step stays in τ like the time axis (the lj run has no ps)
    assert run.metadata.timestep_ps == rep["time_step"] and "τ" in run.metadata.sources["timestep_ps"]
    assert run.metadata.n_dof == rep["degrees_of_freedom"]  # KinEng per atom x N = 1/2 dof T (k_B = 1)
    assert any("lj reduced units" in w for w in run.warnings)
    assert "time step 0.005 τ" in format_description(describe(run))


# ---- LAMMPS: laid out by hand (as LAMMPS writes it) ----------------------------------------------------------------

LOG_HEAD = """LAMMPS (29 Sep 2021 - Update 2)
{units}atom_style full
read_data water.data
timestep 1.0
fix 1 all shake 1e-4 20 0 b 1 a 1
       0 = # of size 2 clusters
       0 = # of size 3 clusters
       0 = # of size 4 clusters
       4 = # of frozen angles
  find clusters CPU = 0.000 seconds
minimize 1e-4 1e-6 10 100
Step Temp PotEng KinEng TotEng
       0            0   -10.0   0   -10.0
       5            0   -11.0   0   -11.0
Loop time of 0.001 on 1 procs for 5 steps with 12 atoms

Minimization stats:
  Stopping criterion = energy tolerance
fix 2 all nvt temp 300 300 100
thermo_style custom step temp pe ke etotal ecouple econserve
run 20
SHAKE stats (type/ave/delta/count) on step 5
     1   1.00000   6.66134e-16        8
     1   109.470   5.68434e-14        4
Step Temp PotEng KinEng TotEng Ecouple Econserve
       5          290   -11.0   {ke0}   -9.0   0.0   -9.0
      10          305   -12.0   {ke1}   -10.0  0.5   -9.5
SHAKE stats (type/ave/delta/count) on step 10
     1   1.00000   6.66134e-16        8
     1   109.470   5.68434e-14        4
WARNING: Something harmless (src/x.cpp:1)
      15          310   -12.5   {ke2}   -10.5  1.0   -9.5
      25          300   -12.0   {ke3}   -10.0  1.5   -8.5
Loop time of 0.01 on 1 procs for 20 steps with 12 atoms
"""


def _ke(T, dof, kB):
    return 0.5 * dof * kB * T


def test_lammps_hand_log_shake_minimise_warning(tmp_path):
    # 12 atoms (4 waters), 4 frozen angles (3 constraints each, LAMMPS fix shake): dof = 36 - 3 - 12 = 21
    kB = 0.0019872067  # kcal/mol/K, LAMMPS real units (LAMMPS units documentation)
    kes = {f"ke{i}": f"{_ke(T, 21, kB):.8f}" for i, T in enumerate((290, 305, 310, 300))}
    p = tmp_path / "log.lammps"
    p.write_text(LOG_HEAD.format(units="units real\n", **kes))
    run = open_run([p])
    t = run.energies
    np.testing.assert_allclose(t.time_ps, [0.005, 0.010, 0.015, 0.025])  # step x 1 fs; minimisation left out
    np.testing.assert_allclose(t.by_role("potential").values, np.array([-11, -12, -12.5, -12]) * KCAL)
    md = run.metadata
    assert md.n_constraints == 12 and md.n_dof == 21 and md.ensemble == "NVT" and md.temperature_K == 300
    assert "SHAKE" in md.constraints
    assert any("1 minimisation block(s) left out" in w for w in run.warnings)


def test_lammps_units_missing_default_lj_or_stated(tmp_path):
    kes = {f"ke{i}": "1.0" for i in range(4)}
    p = tmp_path / "log.lammps"
    p.write_text(LOG_HEAD.format(units="", **kes))
    run = open_run([p])
    assert run.metadata.units_style == "lammps lj" and "lj reduced" in run.energies.by_role("total").unit
    # lj norm yes: Ecouple is a total, the rest per atom; Econserve rebuilt as TotEng + Ecouple / N
    np.testing.assert_allclose(run.energies.by_role("conserved").values, [-9.0, -10 + 0.5 / 12, -10.5 + 1 / 12,
                                                                          -10 + 1.5 / 12])
    stated = open_run([p], units_style="real")
    assert stated.metadata.units_style == "lammps real"
    assert stated.metadata.sources["units_style"] == "stated (--units)"
    np.testing.assert_allclose(stated.energies.by_role("potential").values[0], -11 * KCAL)
    assert "unit style: lammps real stated (--units)" in format_description(describe(stated))


def test_lammps_log_without_md_block_is_an_error(tmp_path, capsys):
    p = tmp_path / "log.lammps"
    p.write_text("LAMMPS (29 Sep 2021)\nunits real\nminimize 1e-4 1e-6 10 100\nStep Temp PotEng\n 0 0 -1\n"
                 "Loop time of 0.001 on 1 procs for 5 steps with 12 atoms\n")
    with pytest.raises(EnergyTableError, match="only 1 minimisation"):
        open_run([p])
    empty = tmp_path / "log2.lammps"
    empty.write_text("LAMMPS (29 Sep 2021)\nunits real\n")
    assert main(["describe", str(empty)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "log2.lammps" in err[0] and "no thermo block" in err[0]


def test_column_role_reaches_an_engine_reader(tmp_path, capsys):
    kes = {f"ke{i}": "1.0" for i in range(4)}
    p = tmp_path / "log.lammps"
    p.write_text(LOG_HEAD.format(units="units metal\n", **kes))
    run = open_run([p], column_roles={"Econserve": "other"})
    assert run.energies.by_role("conserved") is None and run.energies.series["Econserve"].role == "other"
    assert main(["describe", str(p), "--column", "Econserve=other", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert {s["name"]: s["role"] for s in out["energy_terms"]}["Econserve"] == "other"


# ---- AMBER mdout, laid out by hand (public mdout excerpts, sander source) ----------------------

MDOUT = """
          -------------------------------------------------------
          Amber 20 PMEMD                              2020
          -------------------------------------------------------
 Here is the input file:
 &cntrl
   imin=0, irest=1, ntx=5, nstlim=1000, dt=0.002, ntc=2, ntf=2, ntt=3, temp0=300.0, gamma_ln=2.0,
 /
--------------------------------------------------------------------------------
   2.  CONTROL  DATA  FOR  THE  RUN
--------------------------------------------------------------------------------

General flags:
     imin    =       0, nmropt  =       0

Nature and format of input:
     ntx     =       5, irest   =       1, ntrx    =       1

Potential function:
     ntf     =       2, ntb     =       1, igb     =       0, nsnb    =      25

Molecular dynamics:
     nstlim  =      1000, nscm    =      1000, nrespa  =         1
     t       =   0.00000, dt      =   0.00200, vlimit  =  -1.00000

Langevin dynamics temperature regulation:
     ig      =   71277
     temp0   = 300.00000, tempi   =   0.00000, gamma_ln=   2.00000

SHAKE:
     ntc     =       2, jfastw  =       0
     tol     =   0.00001
--------------------------------------------------------------------------------
   3.  ATOMIC COORDINATES AND VELOCITIES
--------------------------------------------------------------------------------
|  # of SOLUTE  degrees of freedom (RNDFP):   12345.
|  TOTAL # of degrees of freedom (RNDF) =   12345.
--------------------------------------------------------------------------------
   4.  RESULTS
--------------------------------------------------------------------------------

 NSTEP =      500   TIME(PS) =    1021.000  TEMP(K) =   302.32  PRESS =     0.0
 Etot   =    -53856.9263  EKtot   =     13584.8418  EPtot      =    -67441.7681
 BOND   =       452.1527  ANGLE   =      1359.2765  DIHED      =      1710.0914
 1-4 NB =       599.3826  1-4 EEL =      6671.2542  VDWAALS    =      8049.2744
 EELEC  =    -86283.1998  EHBOND  =         0.0000  RESTRAINT  =         0.0000
 Ewald error estimate:   0.1234E-03
 ------------------------------------------------------------------------------

 NSTEP =     1000   TIME(PS) =    1022.000  TEMP(K) =   299.10  PRESS =     0.0
 Etot   =    -53800.0000  EKtot   =     13440.0000  EPtot      =    -67240.0000
 BOND   =       450.0000  ANGLE   =      1350.0000  DIHED      =      1700.0000
 1-4 NB =       600.0000  1-4 EEL =      6670.0000  VDWAALS    =      8050.0000
 EELEC  =    -86000.0000  EHBOND  =         0.0000  RESTRAINT  =         0.0000
 ------------------------------------------------------------------------------

      A V E R A G E S   O V E R    1000 S T E P S

 NSTEP =     1000   TIME(PS) =    1022.000  TEMP(K) =   300.71  PRESS =     0.0
 Etot   =    -53828.4631  EKtot   =     13512.4209  EPtot      =    -67340.8840
 BOND   =       451.0763  ANGLE   =      1354.6382  DIHED      =      1705.0457
 1-4 NB =       599.6913  1-4 EEL =      6670.6271  VDWAALS    =      8049.6372
 EELEC  =    -86141.5999  EHBOND  =         0.0000  RESTRAINT  =         0.0000
 ------------------------------------------------------------------------------

      R M S  F L U C T U A T I O N S

 NSTEP =     1000   TIME(PS) =    1022.000  TEMP(K) =     1.61  PRESS =     0.0
 Etot   =        28.4632  EKtot   =        72.4209  EPtot      =       100.8840
 BOND   =         1.0763  ANGLE   =         4.6382  DIHED      =         5.0457
 1-4 NB =         0.3087  1-4 EEL =         0.6271  VDWAALS    =         0.3628
 EELEC  =       141.5999  EHBOND  =         0.0000  RESTRAINT  =         0.0000
 ------------------------------------------------------------------------------
"""


def test_amber_mdout_records_without_averages(tmp_path):
    p = tmp_path / "md.out"
    p.write_text(MDOUT)
    assert identify(p).name == "amber-mdout"
    run = open_run([p])
    t = run.energies
    np.testing.assert_allclose(t.time_ps, [1021.0, 1022.0])  # TIME(PS), not NSTEP; averages and RMS left out
    np.testing.assert_allclose(t.by_role("total").values, np.array([-53856.9263, -53800.0]) * KCAL)
    np.testing.assert_allclose(t.series["1-4 NB"].values, np.array([599.3826, 600.0]) * KCAL)
    np.testing.assert_allclose(t.by_role("temperature").values, [302.32, 299.10])
    md = run.metadata
    assert md.timestep_ps == pytest.approx(0.002) and md.thermostat == "langevin" and md.temperature_K == 300
    assert md.ensemble == "NVT" and md.n_dof == 12345 and "bonds to hydrogen" in md.constraints
    assert md.velocities_half_step is True


# ---- NAMD log, laid out by hand (public logs, Controller.C) -------------------------------------

NAMD = """Charm++: standalone mode (not using charmrun)
Info: NAMD 2.14 for Linux-x86_64-multicore
Info: TIMESTEP               2
Info: FIRST TIMESTEP         0
Info: LANGEVIN DYNAMICS ACTIVE
Info: LANGEVIN TEMPERATURE   300
Info: RIGID BONDS TO HYDROGEN : ALL
ETITLE:      TS           BOND          ANGLE          DIHED          IMPRP               ELECT            VDW       BOUNDARY           MISC        KINETIC               TOTAL           TEMP      POTENTIAL         TOTAL3        TEMPAVG

ENERGY:       0        10.0000        20.0000        30.0000         1.0000          -500.0000        50.0000         0.0000         0.0000       100.0000           -289.0000       300.0000      -389.0000      -289.0000       300.0000

ENERGY:     100        11.0000        21.0000        31.0000         1.5000          -501.0000        51.0000         0.0000         0.0000       101.0000           -285.5000       303.0000      -386.5000      -285.5000       301.0000

ETITLE:      TS           BOND          ANGLE          DIHED          IMPRP               ELECT            VDW       BOUNDARY           MISC        KINETIC               TOTAL           TEMP      POTENTIAL         TOTAL3        TEMPAVG            PRESSURE      GPRESSURE         VOLUME       PRESSAVG      GPRESSAVG

ENERGY:     200        12.0000        22.0000        32.0000         2.0000          -502.0000        52.0000         0.0000         0.0000       102.0000           -282.0000       306.0000      -384.0000      -282.0000       302.0000           1.0            2.0      27000.0            1.5            2.5
"""


def test_namd_log_maps_energy_lines_by_the_latest_etitle(tmp_path):
    p = tmp_path / "run.log"
    p.write_text(NAMD)
    assert identify(p).name == "namd-log"
    run = open_run([p])
    t = run.energies
    np.testing.assert_allclose(t.time_ps, [0.0, 0.2, 0.4])  # TS x 2 fs
    np.testing.assert_allclose(t.by_role("total").values, np.array([-289.0, -285.5, -282.0]) * KCAL)
    np.testing.assert_allclose(t.by_role("temperature").values, [300.0, 303.0, 306.0])
    assert t.series["TOTAL3"].role == "other"  # a smoothed total, not a conserved quantity
    assert "PRESSURE" not in t.series  # printed from the second ETITLE on only
    md = run.metadata
    assert md.timestep_ps == pytest.approx(0.002) and md.thermostat == "langevin" and md.temperature_K == 300
    assert md.engine == "NAMD 2.14" and md.constraints.startswith("bonds to hydrogen")


# ---- CP2K .ener (checked on CP2K 2023.1) and OpenMM CSV ---------------------------------------

def test_cp2k_ener_hartree_and_fs(tmp_path):
    p = tmp_path / "water-1.ener"
    p.write_text("#     Step Nr.          Time[fs]        Kin.[a.u.]          Temp[K]            Pot.[a.u.]"
                 "        Cons Qty[a.u.]        UsedTime[s]\n"
                 "         0            0.000         0.008956465       300.000000000        -0.097684688"
                 "        -0.088728223         0.000000000\n"
                 "         1            0.500         0.008900000       298.100000000        -0.097600000"
                 "        -0.088700000         0.010000000\n"
                 "         2            1.000         0.008800000       294.750000000        -0.097500000"
                 "        -0.088700000         0.020000000\n")
    assert identify(p).name == "cp2k-ener"
    run = open_run([p])
    t = run.energies
    np.testing.assert_allclose(t.time_ps, [0, 0.0005, 0.001])
    # Hartree x N_A / 1000 (CODATA via scipy.constants)
    np.testing.assert_allclose(t.by_role("kinetic").values[0], 0.008956465 * HARTREE_KJ_MOL, rtol=1e-12)
    np.testing.assert_allclose(t.by_role("conserved").values[2], -0.0887 * HARTREE_KJ_MOL, rtol=1e-12)
    assert run.metadata.timestep_ps == pytest.approx(0.0005) and run.metadata.conserved_quantity == "Cons Qty"


def test_openmm_csv_gives_the_time_step(tmp_path):
    p = tmp_path / "state.csv"
    p.write_text('#"Step","Time (ps)","Potential Energy (kJ/mole)","Kinetic Energy (kJ/mole)",'
                 '"Total Energy (kJ/mole)","Temperature (K)"\n'
                 "10,0.020000000000000004,-100.0,50.0,-50.0,300.0\n"
                 "20,0.04000000000000001,-101.0,51.0,-50.0,306.0\n")
    assert identify(p).name == "openmm-csv"
    run = open_run([p])
    assert run.metadata.timestep_ps == pytest.approx(0.002)
    assert run.metadata.sources["timestep_ps"] == "state.csv (Step and Time columns)"
    np.testing.assert_allclose(run.energies.by_role("potential").values, [-100.0, -101.0])


def test_a_table_that_is_no_engine_file_still_goes_to_the_generic_reader(tmp_path):
    p = tmp_path / "energies.log"
    p.write_text("time (ps)  potential (kJ/mol)\n0 1\n1 2\n")
    assert identify(p).name == "energy-table"
    with pytest.raises(InputError):
        open_run([tmp_path / "nothing.edr"])


# ---- the other committed runs: CP2K (engine output), OpenMM CSV (engine output), AMBER/NAMD (laid out) ----

@pytest.mark.parametrize("name", ["argon_fist_nve", "argon_fist_nvt_csvr"])
def test_cp2k_ener_and_output_equal_what_cp2k_reported(name):
    rep = _reported(f"cp2k/{name}")["reported"]
    run = open_run([DATA / "cp2k" / name / "argon-1.ener"])
    md = run.metadata
    assert np.mean(run.energies.by_role("temperature").values) == pytest.approx(rep["temperature_mean_K"], abs=1e-9)
    assert md.timestep_ps == pytest.approx(rep["time_step_ps"], rel=1e-12)
    # from argon.out beside the .ener (it names the file): MD_PAR and DOF lines
    assert md.n_dof == rep["degrees_of_freedom"] and md.ensemble == rep["ensemble"]
    assert md.sources["n_dof"] == "argon.out (beside argon-1.ener)"
    if rep["ensemble"] == "NVT":
        assert md.temperature_K == rep["target_temperature_K"]
    assert md.conserved_quantity == "Cons Qty"


@pytest.mark.parametrize("name", ["tip3p_rigid_nve_verlet", "tip3p_rigid_nvt_langevin", "tip3p_flexible_frames_1fs"])
def test_openmm_csv_time_step_equals_the_integrator_step(name):
    rep = _reported(f"openmm/{name}")["reported"]
    run = open_run([DATA / "openmm" / name / "energies.csv"])
    assert run.metadata.timestep_ps == pytest.approx(rep["time_step_ps"], rel=1e-9)
    assert np.mean(run.energies.by_role("temperature").values) == pytest.approx(rep["temperature_mean_K"], rel=1e-9)
    assert run.metadata.engine == "OpenMM"


def test_amber_and_namd_layouts_of_one_run():
    # both laid out by make_engine_runs.py from one OpenMM run (marked as such in their README.md)
    amber = _reported("amber/water_langevin_layout")["reported"]
    a = open_run([DATA / "amber" / "water_langevin_layout" / "mdout"])
    assert len(a.energies) == amber["records"]
    assert np.mean(a.energies.by_role("temperature").values) == pytest.approx(amber["temperature_mean_printed_K"],
                                                                               abs=5e-4)
    assert np.mean(a.energies.by_role("total").values) == pytest.approx(amber["total_energy_mean_kcal_mol"] * KCAL,
                                                                         rel=1e-6)
    assert a.energies.time_ps[0] == pytest.approx(amber["first_time_ps"])
    assert a.metadata.n_dof == amber["degrees_of_freedom"] and a.metadata.ensemble == amber["ensemble"]
    assert a.metadata.temperature_K == amber["target_temperature_K"]
    assert a.metadata.timestep_ps == pytest.approx(amber["time_step_ps"])
    namd = _reported("namd/water_langevin_layout")["reported"]
    n = open_run([DATA / "namd" / "water_langevin_layout" / "water.log"])
    assert len(n.energies) == namd["records"]
    assert np.mean(n.energies.by_role("temperature").values) == pytest.approx(namd["temperature_mean_K"], abs=5e-4)
    assert np.mean(n.energies.by_role("total").values) == pytest.approx(namd["total_energy_mean_kcal_mol"] * KCAL,
                                                                         rel=1e-6)
    assert n.metadata.timestep_ps == pytest.approx(namd["time_step_ps"]) and n.metadata.ensemble == "NVT"
    assert n.metadata.temperature_K == namd["target_temperature_K"]


def test_gromacs_energy_parts_join_to_the_whole_run():
    # the same NVE run written whole and in three -noappend parts, part 3 restarted from part 2's checkpoint
    # at 2.24 ps (5 rows of overlap): GROMACS itself made both (tests/data/engines/README.md)
    parts = DATA / "gromacs" / "spce_rigid_nve_parts"
    whole = open_run([DATA / "gromacs" / "spce_rigid_nve_whole" / "md.edr"]).energies
    run = open_run([parts / "md.part0003.edr", parts / "md.edr", parts / "md.part0002.edr"])  # any order
    np.testing.assert_array_equal(run.energies.time_ps, whole.time_ps)
    for name in ("Potential", "Kinetic En.", "Total Energy", "Temperature"):
        np.testing.assert_array_equal(run.energies.series[name].values, whole.series[name].values)
    assert any("md.part0003.edr starts at 2.24 ps" in w and "5 overlapping row(s) 2.24-2.4 ps" in w
               for w in run.warnings)


def test_dcd_header_gives_the_time_step():
    d = DATA / "openmm" / "tip3p_rigid_nvt_langevin"
    rep = _reported("openmm/tip3p_rigid_nvt_langevin")["reported"]
    run = open_run([d / "trajectory.dcd", d / "start.pdb"])
    assert run.metadata.timestep_ps == pytest.approx(rep["time_step_ps"], rel=1e-6)  # DELTA is float32
    assert run.metadata.sources["timestep_ps"].startswith("trajectory.dcd (header: DELTA")


def test_a_gromacs_folder_takes_energies_from_the_edr_and_parameters_from_the_log():
    folder = DATA / "gromacs" / "spce_rigid_nvt_vrescale"
    rep = _reported("gromacs/spce_rigid_nvt_vrescale")["reported"]
    run = open_run([folder / "md.log", folder / "md.edr", folder / "grompp.mdp"])
    assert len(run.energies) == rep["frames"]["edr"]  # not the 21 log steps
    assert run.metadata.n_dof == rep["degrees_of_freedom"] and run.metadata.sources["n_dof"].startswith("md.log")
    assert any("md.log: energies taken from the .edr" in w for w in run.warnings)


def test_lammps_runs_of_different_ensembles_read_the_last(tmp_path):
    # NVT equilibration then NVE production in one log: the production run is what is judged
    text = ("LAMMPS (29 Sep 2021)\nunits metal\ntimestep 0.002\nfix 1 all nvt temp 100 100 0.1\nrun 10\n"
            "Step Temp TotEng\n 0 90 -1.0\n 10 95 -1.1\nLoop time of 0.1 on 1 procs for 10 steps with 10 atoms\n"
            "unfix 1\nfix 2 all nve\nrun 10\nStep Temp TotEng\n 10 95 -1.1\n 20 96 -1.1\n"
            "Loop time of 0.1 on 1 procs for 10 steps with 10 atoms\n")
    p = tmp_path / "log.lammps"
    p.write_text(text)
    run = open_run([p])
    np.testing.assert_allclose(run.energies.time_ps, [0.020, 0.040])  # step x 0.002 ps, the repeat dropped
    assert run.metadata.ensemble == "NVE" and run.metadata.thermostat == "none"
    assert any("different ensembles; the last (from step 10) is read" in w for w in run.warnings)


def test_lammps_killed_run_and_multi_layout(tmp_path):
    p = tmp_path / "log.lammps"
    p.write_text("LAMMPS (29 Sep 2021)\nunits real\nfix 1 all nve\nrun 100\nStep Temp TotEng\n 0 90 -1.0\n"
                 " 10 95 -1.1\n 20 96")  # killed while writing a row: the complete rows are used
    run = open_run([p])
    assert len(run.energies) == 2 and any("the last thermo row is cut off" in w for w in run.warnings)
    p.write_text("LAMMPS (29 Sep 2021)\nunits real\nfix 1 all nve\nrun 100\nStep Temp TotEng\n 0 90 -1.0\n"
                 " 10 95\n 20 96 -1.1\n")
    with pytest.raises(EnergyTableError, match="line 7: 2 values in a thermo row, the header has 3"):
        open_run([p])
    p.write_text("LAMMPS (29 Sep 2021)\nunits real\nfix 1 all nve\nrun 100\nStep Temp TotEng\n 0 90 -1.0\n 10 95 -1.1\n")
    run = open_run([p])
    assert len(run.energies) == 2 and any("no 'Loop time' line" in w for w in run.warnings)
    p.write_text("LAMMPS (29 Sep 2021)\nunits real\nthermo_modify line yaml\nrun 10\n")
    with pytest.raises(EnergyTableError, match="'yaml'"):
        open_run([p])


def test_units_option_on_the_command_line(tmp_path, capsys):
    kes = {f"ke{i}": "1.0" for i in range(4)}
    p = tmp_path / "log.lammps"
    p.write_text(LOG_HEAD.format(units="", **kes))
    assert main(["describe", str(p), "--units", "metal"]) == 0
    out = capsys.readouterr().out
    assert "unit style: lammps metal stated (--units)" in out and "time step 1 fs" not in out
    with pytest.raises(SystemExit) as exc:  # argparse refuses a style LAMMPS does not have
        main(["describe", str(p), "--units", "furlongs"])
    assert exc.value.code == 2


@pytest.mark.parametrize("name,text,match", [
    ("bad-1.ener", "#     Step Nr.          Time[fs]        Kin.[a.u.]\n 0 0.0 0.1\n 1 0.5\n", "numbers the header"),
    ("run.log", "Info: NAMD 2.14\nETITLE: TS TOTAL\nENERGY: 0 -1.0\n", "TIMESTEP"),
    ("run2.log", "Info: NAMD 2.14\nInfo: TIMESTEP 2\nENERGY: 0 -1.0\n", "before any ETITLE"),
])
def test_bad_engine_files_are_one_line_exit_2(tmp_path, capsys, name, text, match):
    p = tmp_path / name
    p.write_text(text)
    with pytest.raises(InputError, match=match):
        open_run([p])
    assert main(["describe", str(p)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and name in err[0]


def test_the_audit_gets_the_engine_facts(capsys):
    # a v-rescale run is judged as thermostatted, by its conserved quantity (md.log beside the .edr says so)
    assert main(["audit", str(DATA / "gromacs" / "spce_rigid_nvt_vrescale" / "md.edr"), "--json"]) in (0, 1)
    out = json.loads(capsys.readouterr().out)
    assert out["ensemble"] == "NVT" and out["thermostatted"] is True
    assert "Conserved En." in out["energy"]["series_columns"]


@pytest.mark.parametrize("folder,precision", [("gromacs_nsum_single", "single"), ("gromacs_nsum_double", "double")])
def test_real_edr_with_accumulators_equals_its_md_log(folder, precision):
    # GROMACS 2022.5 gmx / gmx_d, nstcalcenergy 5 < nstenergy 10 (tests/data/engines_energy/README.md);
    # reference: the energies the engine printed in md.log (6 significant digits)
    d = DATA.parent / "engines_energy" / folder
    e = open_run([d / "md.edr"])
    g = open_run([d / "md.log"]).energies
    assert e.metadata.extra["edr_precision"] == precision
    assert len(e.energies) == 11 and len(g) == 6  # 100 steps: every 10th in the .edr, every 20th in the log
    idx = np.searchsorted(e.energies.time_ps, g.time_ps)
    np.testing.assert_allclose(e.energies.time_ps[idx], g.time_ps)
    for name in g.series:
        np.testing.assert_allclose(e.energies.series[name].values[idx], g.series[name].values, rtol=6e-6)
    md = e.metadata
    assert md.thermostat == "nose-hoover" and md.temperature_K == 300 and md.timestep_ps == pytest.approx(0.001)
    assert md.n_dof == 801 and md.conserved_quantity == "Conserved En."


# ---- fuzzing: every damaged engine file is a result or one of our typed errors -------------------------

_FUZZ = settings(max_examples=120, deadline=None, derandomize=True,
                 suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


@_FUZZ
@given(st.lists(st.tuples(st.integers(0, 10**6), st.integers(0, 255)), min_size=1, max_size=6),
       st.integers(0, 10**6))
@pytest.mark.slow  # measured 1.1 s of CPU
def test_fuzz_damaged_edr(tmp_path, flips, cut):
    src = DATA.parent / "engines_energy" / "gromacs_nsum_double" / "md.edr"
    data = bytearray(src.read_bytes())
    for pos, val in flips:
        data[pos % len(data)] = val
    data = data[: max(1, cut % (len(data) + 1))]
    p = tmp_path / "fuzz.edr"
    p.write_bytes(bytes(data))
    try:
        run = open_run([p])
    except PhasewakeError:
        return
    assert len(run.energies) >= 1


@_FUZZ
@given(st.lists(st.tuples(st.integers(0, 10**5), st.sampled_from(["\n", " ", "x", "1", "-", "Step ", "Loop time of ",
                                                                 "units lj\n", "e+", "SHAKE stats", "\n\n"])),
                min_size=1, max_size=6))
@pytest.mark.slow  # measured 1.0 s of CPU
def test_fuzz_damaged_lammps_log(tmp_path, edits):
    text = (DATA / "lammps" / "argon_real_two_runs" / "log.lammps").read_text()
    for pos, piece in edits:
        k = pos % (len(text) + 1)
        text = text[:k] + piece + text[k + 1:]
    p = tmp_path / "log.lammps"
    p.write_text(text)
    try:
        run = open_run([p])
    except PhasewakeError:
        return
    assert len(run.energies) >= 1


def test_md_log_and_edr_of_an_appended_restart():
    # real output of gmx mdrun -cpi (append) (tests/data/engines_energy/README.md): the log's step-60 header
    # before the restart has no energies; the restart prints step 60 again with them
    d = DATA.parent / "engines_energy" / "gromacs_append_restart"
    g = open_run([d / "md.log"])
    np.testing.assert_allclose(g.energies.time_ps, np.arange(7) * 0.02, atol=1e-12)
    assert g.energies.series["Potential"].values[3] == pytest.approx(-6.53323e3)  # printed after the restart
    assert not any("repeated" in w for w in g.warnings)
    e = open_run([d / "md.edr"])
    np.testing.assert_allclose(e.energies.time_ps, np.arange(13) * 0.01, atol=1e-12)


def test_lammps_multi_line_records_equal_the_one_line_rows_of_the_same_run():
    # two logs LAMMPS wrote of one run (tests/data/engines_energy/README.md): multi prints 4 decimals
    d = DATA.parent / "engines_energy" / "lammps_lj_multi"
    one = open_run([d / "log.one.lammps"])
    multi = open_run([d / "log.multi.lammps"])
    np.testing.assert_allclose(multi.energies.time_ps, one.energies.time_ps)
    for name in ("TotEng", "PotEng", "KinEng", "Temp", "Press"):
        np.testing.assert_allclose(multi.energies.series[name].values, one.energies.series[name].values, atol=5e-5)
    assert multi.metadata.n_dof == one.metadata.n_dof == 3 * 256 - 3  # KinEng = 1/2 dof T, lj units
    assert multi.metadata.ensemble == "NVE"  # the production run after the NVT one


def test_lammps_norm_yes_in_real_units_gives_totals(tmp_path):
    # thermo_modify norm yes: energies per atom, Ecouple not divided (checked on LAMMPS 2021);
    # 10 atoms, dof = 3 x 10 - 3 = 27, KinEng per atom = 1/2 dof k_B T / N with k_B of real units
    kB = 0.0019872067
    ke = [0.5 * 27 * kB * T / 10 for T in (300.0, 310.0)]
    p = tmp_path / "log.lammps"
    p.write_text("LAMMPS (29 Sep 2021)\nunits real\nfix 1 all nvt temp 300 300 100\nthermo_modify norm yes\nrun 10\n"
                 "Step Temp KinEng TotEng Ecouple Econserve\n"
                 f" 0 300 {ke[0]:.10f} -5.0 0.0 -5.0\n 10 310 {ke[1]:.10f} -5.1 2.0 -4.9\n"
                 "Loop time of 0.1 on 1 procs for 10 steps with 10 atoms\n")
    run = open_run([p])
    t = run.energies
    np.testing.assert_allclose(t.by_role("total").values, np.array([-50.0, -51.0]) * KCAL)
    np.testing.assert_allclose(t.by_role("bath_heat").values, np.array([0.0, 2.0]) * KCAL)  # already a total
    np.testing.assert_allclose(t.by_role("conserved").values, np.array([-50.0, -49.0]) * KCAL)  # TotEng N + Ecouple
    assert run.metadata.n_dof == 27
