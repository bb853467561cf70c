"""The audit's temperature part: degrees of freedom, kinetic temperature, equipartition, canonical checks.

:func:`count_dof` decides N_dof = 3 N - constraints - removed centre-of-mass motion, saying where each
number came from (the user, the files, inferred from the frames, or the engine's own count);
:func:`temperature_part` measures the kinetic temperature (from the file's kinetic energy when there is one,
else from the velocities, with half-step velocities handled), compares it with the file's temperature,
splits it by groups of atoms (equipartition) and, for a thermostatted run at a known temperature, tests
the kinetic-energy and speed distributions. Kernels live in temperature.py.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from phasewake.core.analyses import energy as en
from phasewake.core.analyses import temperature as tm
from phasewake.core.analyses.audit_energy import EnergySeriesChoice
from phasewake.core.analyses.audit_frames import AuditFrames, align_by_time
from phasewake.core.analyses.audit_results import TemperatureAudit
from phasewake.core.analyses.audit_verdicts import advice_of, fmt, source_of
from phasewake.core.analyses.molecule_motion import translation_split
from phasewake.core.analyses.verdicts import THRESHOLDS, Explanation, Verdict, judge, register
from phasewake.core.errors import AnalysisError
from phasewake.core.model.run import EnergyTable, Run
from phasewake.core.units import KB_KJ_PER_MOL_K

register(None, Explanation(
    title="Degrees of freedom",
    what="The number of degrees of freedom used for every per-DOF number and for the kinetic temperature.",
    method="N_dof = 3 N - constraints - removed centre-of-mass motion (common practice). Constraints come "
           "from the user, the files' metadata, or are inferred from atom pairs whose distance does not "
           "fluctuate (relative spread < 1e-3).",
    threshold="None: this is information for the other checks, not a verdict.",
    advice="Give --constraints N when the count shown is wrong.",
), kind="temperature.dof")



def other_constraints(masses_amu: np.ndarray) -> tuple[int, str] | None:
    """The other plausible count of constraints when none is known, from the atom masses alone.

    Rigid water (3 constraints per molecule) when the atoms are one oxygen (15.9-16.1 amu) and two
    hydrogens (1.0-1.1 amu, or deuterium 2.0-2.1) per molecule; else one constraint per hydrogen (bonds to
    hydrogen constrained, the usual setting: common practice). None without hydrogens.
    """
    m = np.asarray(masses_amu, dtype=np.float64)
    if not m.size or not np.all(np.isfinite(m)):
        return None
    n_h = int(np.count_nonzero(((m > 0.99) & (m < 1.1)) | ((m > 2.0) & (m < 2.1))))
    n_o = int(np.count_nonzero((m > 15.9) & (m < 16.1)))
    if n_h == 0:
        return None
    if n_o and n_h == 2 * n_o and m.size == 3 * n_o:
        return 3 * n_o, "if the water is rigid (3 constraints per molecule)"
    return n_h, "with every bond to hydrogen constrained (one per hydrogen)"


def _engine_dof(run: Run, table: EnergyTable | None, fp: AuditFrames | None,
                n_com: int) -> tuple[int | None, str]:
    """The engine's own N_dof: the metadata's count, else 2 <K> / (k_B <T>) from the file's kinetic energy
    (or, for full-step velocities, the velocities' kinetic energy) and the file's temperature."""
    md = run.metadata
    if md.n_dof is not None:
        return int(md.n_dof), md.sources.get("n_dof", "the files")
    if table is None:
        return None, ""
    ft = table.by_role("temperature")
    if ft is None:
        return None, ""
    tv = np.asarray(ft.values, dtype=np.float64)
    fk = table.by_role("kinetic")
    if fk is not None:
        kv = np.asarray(fk.values, dtype=np.float64)
        ok = np.isfinite(kv) & np.isfinite(tv) & (tv > 0)
        if ok.sum() >= 1:
            dof = 2.0 * float(kv[ok].mean()) / (KB_KJ_PER_MOL_K * float(tv[ok].mean()))
            return int(round(dof)), (f"2 <K> / (k_B <T>) of the file's columns '{fk.name}' and '{ft.name}'")
    if fp is not None and not half_step(run)[0] and not (run.frames is not None and run.frames.velocities_estimated):
        fi, ti = align_by_time(fp.time_ps, np.asarray(table.time_ps, dtype=np.float64))
        ok = np.isfinite(tv[ti]) & (tv[ti] > 0)
        if ok.sum() >= 1:
            dof = 2.0 * float(fp.kinetic_kJ_per_mol[fi][ok].mean()) / (KB_KJ_PER_MOL_K
                                                                      * float(tv[ti][ok].mean()))
            return int(round(dof)), (f"2 <K> / (k_B <T>) of the velocities and the file's temperature column "
                                     f"'{ft.name}'")
    return None, ""


_LEAPFROG_WORDS = ("leap", "leapfrog", "leap-frog")


def half_step(run: Run) -> tuple[bool, str]:
    """Whether the stored velocities are half a step off the positions, and where that came from."""
    md = run.metadata
    if md.velocities_half_step is not None:
        return bool(md.velocities_half_step), md.sources.get("velocities_half_step", "the files")
    integ = (md.integrator or "").strip().lower()
    if any(w in integ for w in _LEAPFROG_WORDS) or integ == "md":
        return True, f"integrator {md.integrator} ({md.sources.get('integrator', 'the files')})"
    return False, ""


# ---------------------------------------------------------------------------------------------------
# Degrees of freedom
# ---------------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class DofCount:
    """N_dof = 3 N - constraints - removed centre-of-mass motion, and where each number came from."""

    n_dof: int | None  # None when it cannot be counted (no atoms, or more constraints than coordinates)
    n_constraints: int
    constraints_source: str
    assumed: bool  # no count known: 0 constraints assumed
    n_com: int
    com_source: str


def _constraints(run: Run, n_constraints: int | None,
                 inference: tm.ConstraintInference | None, notes: list[str]) -> tuple[int, str, bool]:
    """(count, source in words, assumed?) of the holonomic constraints: the user, the files, or inferred."""
    md = run.metadata
    if n_constraints is not None:
        n_con, con_src = int(n_constraints), "user (--constraints)"
    elif md.n_constraints is not None:
        n_con, con_src = int(md.n_constraints), md.constraints_source or "metadata"
    elif inference is not None:
        n_con = inference.n_constraints
        con_src = (f"inferred from rigid pair distances ({inference.n_rigid_pairs} rigid pairs in "
                   f"{inference.n_rigid_clusters} rigid groups, relative spread < {inference.rigid_relative_std:g})")
    else:
        n_con, con_src = 0, ("none known (no metadata, and no topology or precise positions to infer them from): "
                             "0 assumed")
    assumed = n_constraints is None and md.n_constraints is None and inference is None
    if inference is not None and n_con != inference.n_constraints and n_constraints is None:
        notes.append(f"{con_src} gives {n_con} constraints; the pair distances suggest {inference.n_constraints}.")
    return n_con, con_src, assumed


def _com_removed(run: Run, fp: AuditFrames | None, thermostatted: bool) -> tuple[int, str]:
    """(3 or 0, source in words): whether the centre-of-mass motion was removed."""
    md = run.metadata
    if md.com_motion_removed is not None:
        return (3 if md.com_motion_removed else 0), "metadata"
    if not thermostatted:
        return 3, "NVE: total momentum is conserved"
    if (fp is not None and fp.kinetic_kJ_per_mol.size and fp.com_kinetic_kJ_per_mol is not None
            and float(np.mean(fp.com_kinetic_kJ_per_mol)) < 1e-4 * float(np.mean(fp.kinetic_kJ_per_mol))):
        return 3, "inferred: the centre-of-mass momentum stays zero"
    return 0, "thermostatted and the centre-of-mass momentum fluctuates: not removed"


def count_dof(run: Run, table: EnergyTable | None, fp: AuditFrames | None,
              inference: tm.ConstraintInference | None, *, n_constraints: int | None, thermostatted: bool,
              notes: list[str]) -> DofCount:
    """The degrees of freedom of the kinetic temperature; the engine's own count wins when the constraints
    were not stated (by the user or the files) and the engine's count is known or the constraints unknown."""
    md = run.metadata
    n_con, con_src, assumed = _constraints(run, n_constraints, inference, notes)
    n_com, com_src = _com_removed(run, fp, thermostatted)
    try:
        n_dof = tm.degrees_of_freedom(run.n_massive, n_constraints=n_con, n_com=n_com) if run.n_atoms else None
    except AnalysisError:
        n_dof = None
        notes.append("The degrees of freedom could not be counted (too many constraints for the atoms).")
    if n_constraints is None and run.n_atoms and (md.n_dof is not None or assumed):
        engine_dof, engine_src = _engine_dof(run, table, fp, n_com)
        if engine_dof is not None and 0 < engine_dof <= 3 * run.n_massive:
            n_dof = int(engine_dof)
            n_con = max(0, 3 * run.n_massive - n_com - n_dof)
            con_src = f"from the engine's own count of degrees of freedom, N_dof = {n_dof} ({engine_src})"
            assumed = False
    return DofCount(n_dof, n_con, con_src, assumed, n_com, com_src)


# ---------------------------------------------------------------------------------------------------
# Kinetic temperature
# ---------------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class KineticTemperature:
    """The kinetic temperature series shown, and the ones it was chosen from (K, per frame or row)."""

    series: np.ndarray
    time_ps: np.ndarray
    source: str  # in words
    from_velocities: np.ndarray | None  # full steps when half-step velocities were averaged
    from_velocities_time_ps: np.ndarray | None
    from_file_kinetic: np.ndarray | None
    half: bool  # velocities half a step off the positions
    half_words: str  # how that was handled ("" when they are not)


def _from_velocities(run: Run, fp: AuditFrames, n_dof: int, half: bool, half_src: str, *,
                     has_file_kinetic: bool, timestep_ps: float | None) -> tuple[np.ndarray, np.ndarray, str]:
    """(T, time, how half-step velocities were handled) from the frames' kinetic energy."""
    t_vel = tm.kinetic_temperature(fp.kinetic_kJ_per_mol, n_dof)
    if not half or has_file_kinetic:
        return t_vel, fp.time_ps, ""
    spacing = float(np.median(np.diff(fp.time_ps))) if fp.time_ps.size > 1 else math.nan
    step = timestep_ps if timestep_ps is not None else run.metadata.timestep_ps
    if step and fp.time_ps.size > 2 and abs(spacing - step) <= 1e-3 * step:
        # every step written: KE(n) = mean of 1/2 m v^2 of frames n and n+1 (GROMACS leap-frog)
        k_full = 0.5 * (fp.kinetic_kJ_per_mol[:-1] + fp.kinetic_kJ_per_mol[1:])
        return (tm.kinetic_temperature(k_full, n_dof), fp.time_ps[:-1],
                f"velocities half a step off the positions ({half_src}), averaged to full steps: "
                "KE(n) = mean of 1/2 m v^2 of frames n and n+1")
    return (t_vel, fp.time_ps, f"velocities half a step off the positions ({half_src}) used as they are: frames "
            "are not written every step, so they cannot be averaged to full steps")


def kinetic_temperature_series(run: Run, choice: EnergySeriesChoice, fp: AuditFrames | None, n_dof: int, *,
                               timestep_ps: float | None) -> KineticTemperature:
    """The file's kinetic energy when it has one (the engine's own, at full steps), else the velocities'."""
    md = run.metadata
    file_kin = choice.role("kinetic")
    half, half_src = half_step(run) if fp is not None else (False, "")
    t_vel = t_vel_time = None
    half_words = ""
    if fp is not None:
        t_vel, t_vel_time, half_words = _from_velocities(run, fp, n_dof, half, half_src,
                                                         has_file_kinetic=file_kin is not None,
                                                         timestep_ps=timestep_ps)
    if file_kin is not None and choice.table is not None:
        t_filek = tm.kinetic_temperature(np.asarray(file_kin.values, dtype=np.float64), n_dof)
        ksrc = (f"the file's kinetic energy (column '{file_kin.name}'), preferred over the velocities: "
                + (f"they are half a step off the positions ({half_src})" if half else
                   "it is the engine's own" if md.velocities_half_step is False else
                   "the velocities may be half a step off the positions (leapfrog-type integrators)"))
        if half:
            half_words = f"velocities half a step off the positions ({half_src}): the file's kinetic energy is shown"
        return KineticTemperature(t_filek, np.asarray(choice.table.time_ps, dtype=np.float64), ksrc, t_vel,
                                  t_vel_time, t_filek, half, half_words)
    assert t_vel is not None and t_vel_time is not None
    ksrc = ("velocities (1/2 m v^2 summed over atoms)" if not half_words else
            f"velocities (1/2 m v^2 summed over atoms); {half_words}")
    return KineticTemperature(t_vel, t_vel_time, ksrc, t_vel, t_vel_time, None, half, half_words)


def _mean_and_error(kt: KineticTemperature, k_stats: tuple[float, float, float] | None,
                    n_dof: int) -> tuple[float, float, float, float]:
    """(mean, std, g, standard error of the mean) of the kinetic temperature, K."""
    if k_stats is not None:
        # T = f K with f = 2 / (N_dof k_B): mean, spread and g follow from the kinetic energy's
        f_T = float(tm.kinetic_temperature(1.0, n_dof))
        mean_T, std_T, g_T = f_T * k_stats[0], f_T * k_stats[1], k_stats[2]
        n_T = int(kt.series.size)
    else:
        ts_f = kt.series[np.isfinite(kt.series)]
        g_T, _ = en.statistical_inefficiency_of(ts_f)
        mean_T = float(ts_f.mean()) if ts_f.size else math.nan
        std_T = float(ts_f.std()) if ts_f.size else math.nan
        n_T = int(ts_f.size)
    return mean_T, std_T, g_T, std_T * math.sqrt(g_T / max(n_T, 1))


def _against_file(choice: EnergySeriesChoice, kt: KineticTemperature, mean_T: float,
                  k_stats: tuple[float, float, float] | None,
                  n_dof: int) -> tuple[float | None, float | None, float | None]:
    """(relative mismatch, N_dof the file's temperature implies, the file's mean temperature) or Nones."""
    file_T = choice.role("temperature")
    if file_T is None or choice.table is None:
        return None, None, None
    fvals = np.asarray(file_T.values, dtype=np.float64)
    ft_stats = choice.stats(file_T.name)
    t_filek = kt.from_file_kinetic
    if t_filek is not None and k_stats is not None and ft_stats is not None:
        ours, theirs = np.array([mean_T]), np.array([ft_stats[0]])  # every row finite: the means
    elif t_filek is not None:
        ok = np.isfinite(fvals) & np.isfinite(t_filek)
        ours, theirs = t_filek[ok], fvals[ok]
    else:
        assert kt.from_velocities is not None and kt.from_velocities_time_ps is not None
        fi, ti = align_by_time(kt.from_velocities_time_ps, np.asarray(choice.table.time_ps, dtype=np.float64))
        ok = np.isfinite(fvals[ti])
        ours, theirs = kt.from_velocities[fi][ok], fvals[ti][ok]
    if not (theirs.size and float(theirs.mean()) > 0):
        return None, None, None
    fT_mean = float(theirs.mean())
    return (float(ours.mean()) - fT_mean) / fT_mean, n_dof * float(ours.mean()) / fT_mean, fT_mean


# ---------------------------------------------------------------------------------------------------
# Equipartition and canonical distributions
# ---------------------------------------------------------------------------------------------------

def _equipartition(run: Run, fp: AuditFrames, dof: DofCount, inference: tm.ConstraintInference | None,
                   all_groups: Mapping[str, np.ndarray], user_groups: Mapping[str, Sequence[int] | np.ndarray] | None,
                   notes: list[str]) -> tuple[tuple[tm.GroupTemperature, ...], dict[str, Any] | None, tuple[str, ...]]:
    """(group temperatures, hottest-coldest split, per-atom groups left out) of the velocities."""
    assert dof.n_dof is not None
    n_con = dof.n_constraints
    gdof = tm.group_degrees_of_freedom(
        all_groups, run.masses_amu, n_com=dof.n_com,
        constraint_pairs=None if inference is None else inference.rigid_pairs,
        constraint_weights=None if inference is None else inference.constraint_weights,
        n_constraints=n_con)
    names = list(all_groups)
    left_out: tuple[str, ...] = ()
    if n_con > 0 or (dof.assumed and other_constraints(run.masses_amu) is not None):
        # per-atom groups (elements, species, masses) cut through rigid molecules (or may: constraints
        # unknown and hydrogens present): not judged
        left_out = tuple(k for k in names if k.startswith(tm.PER_ATOM_PREFIXES) and k not in (user_groups or {}))
    judged = [k for k in names if k not in left_out]
    t_all = tm.kinetic_temperature(fp.kinetic_kJ_per_mol, dof.n_dof)
    gtemps = tm.group_temperatures(fp.group_kinetic_kJ_per_mol[:, [names.index(k) for k in judged]],
                                   [gdof[k] for k in judged], judged,
                                   [int(all_groups[k].size) for k in judged], t_all)
    split = tm.largest_split(fp.group_kinetic_kJ_per_mol, [gdof[k] for k in names], names, keep=judged)
    if split is not None:
        split["mean_K"] = float(np.mean(t_all))
    if left_out:
        notes.append("Equipartition: the per-atom groups (" + ", ".join(left_out[:6])
                     + ") are not judged: they cut through rigid molecules"
                     + (", and the constraints are unknown" if n_con == 0 else "") + ".")
    return gtemps, split, left_out


def _maxwell_checks(run: Run, fp: AuditFrames, dof: DofCount, inference: tm.ConstraintInference | None,
                    target_T: float, g_frames: float) -> list[tm.DistributionCheck]:
    """Maxwell-Boltzmann speed tests per unconstrained species, on frames g apart."""
    free = tm.unconstrained_atoms(run.n_atoms, np.zeros((0, 2)) if inference is None else inference.rigid_pairs)
    species = tm.species_of(run.topology, run.masses_amu)
    step = max(1, int(math.ceil(g_frames / fp.speed_frame_stride)))
    maxw: list[tm.DistributionCheck] = []
    for sp, speeds in fp.speeds_nm_per_ps.items():
        if speeds.size == 0:
            continue
        kept = species[sp][: speeds.shape[1]]
        cols = free[kept]
        if dof.n_constraints > 0 and inference is None:
            continue  # cannot tell constrained atoms apart
        s = speeds[::step][:, cols].ravel()
        if s.size >= 50 and float(run.masses_amu[kept[cols]][0]) > 0:  # virtual sites have no speed of their own
            mass = float(run.masses_amu[kept[cols]][0])
            maxw.append(tm.maxwell_speed_check(s, mass, target_T, name=sp))
    return maxw


def _canonical_checks(run: Run, fp: AuditFrames | None, kt: KineticTemperature, dof: DofCount,
                      inference: tm.ConstraintInference | None, *, file_kinetic: np.ndarray | None,
                      k_stats: tuple[float, float, float] | None, g_T: float, thermostatted: bool,
                      target_T: float | None) -> tuple[tm.DistributionCheck | None, list[tm.DistributionCheck], str]:
    """(kinetic-energy distribution test, speed tests, a note): canonical runs at a known temperature only."""
    assert dof.n_dof is not None
    if not thermostatted:
        return None, [], ("not applied: canonical-ensemble tests; in an NVE run the kinetic energy and the speeds "
                          "do not follow the canonical distributions (K is narrower because E is fixed), so they "
                          "would mislead")
    if target_T is None:
        return None, [], "not applied: the target temperature is unknown (give --temperature K)"
    kdist = None
    kin_for_test = file_kinetic if file_kinetic is not None else fp.kinetic_kJ_per_mol if fp is not None else None
    cnote = "applied on decorrelated samples (every g-th frame)"
    if kin_for_test is not None:
        kf = kin_for_test[np.isfinite(kin_for_test)]
        gk_ = k_stats[2] if (k_stats is not None and file_kinetic is not None) else \
            en.statistical_inefficiency_of(kf)[0]
        sample = kf[tm.thin_indices(kf.size, gk_)]
        if sample.size >= 20:
            kdist = tm.kinetic_energy_distribution_check(sample, dof.n_dof, target_T)
        else:
            cnote = f"kinetic-energy test not applied: only {sample.size} decorrelated samples (< 20)"
    maxw: list[tm.DistributionCheck] = []
    if fp is not None and fp.speeds_nm_per_ps:
        t_vel = kt.from_velocities
        g_frames = max(1.0, g_T if kt.from_file_kinetic is None else en.statistical_inefficiency_of(t_vel)[0]
                       if t_vel is not None else 1.0)
        maxw = _maxwell_checks(run, fp, dof, inference, target_T, g_frames)
    return kdist, maxw, cnote


# ---------------------------------------------------------------------------------------------------
# The temperature part
# ---------------------------------------------------------------------------------------------------

def _assumption(temp: TemperatureAudit, run: Run, dof: DofCount) -> tuple[TemperatureAudit, Verdict | None]:
    """With no constraint count known, the temperature under the other plausible count, and a caution."""
    alt = other_constraints(run.masses_amu)
    mean_T, n_con = temp.mean_K, dof.n_constraints
    if alt is None or dof.n_dof is None:
        return temp, None
    alt_n, alt_words = alt
    try:
        dof_alt = tm.degrees_of_freedom(run.n_massive, n_constraints=n_con + alt_n, n_com=dof.n_com)
    except AnalysisError:
        dof_alt = 0
    if not (dof_alt > 0 and math.isfinite(mean_T)):
        return temp, None
    t_alt = mean_T * dof.n_dof / dof_alt
    rel = abs(t_alt - mean_T) / mean_T if mean_T else 0.0
    temp = replace(temp, assumption={"assumed_constraints": n_con, "other_constraints": n_con + alt_n,
                                     "other_assumption": alt_words, "other_mean_K": t_alt, "relative_change": rel})
    v = judge("temperature.assumption", rel, title="Temperature rests on an assumption", unit="",
              message=f"T = {mean_T:.4g} K assumes {n_con} constraints (none stated in the files, "
                      f"and none could be inferred: no topology or precise positions); "
                      f"{alt_words} ({n_con + alt_n} constraints) it would be {t_alt:.4g} K "
                      f"({rel:.1%} apart; {source_of('temperature.assumption')})",
              advice=advice_of("temperature.assumption"))
    if v.level == "problem":
        v = replace(v, level="caution")  # an unknown, not a wrong run
    return temp, v if v.level != "ok" else replace(v, advice="")


def _half_step_verdict(kt: KineticTemperature, mean_T: float) -> Verdict | None:
    """How half-step velocities were handled: a caution when used as they are, else information."""
    if kt.half_words and kt.from_file_kinetic is None and "as they are" in kt.half_words:
        return judge("temperature.half_step", 1.0, title="Half-step velocities", unit="",
                     message=f"T = {mean_T:.4g} K from {kt.half_words}; the engine's kinetic "
                             f"energy at full steps differs from it ({source_of('temperature.half_step')})",
                     advice=advice_of("temperature.half_step"))
    if kt.half_words:
        return Verdict("temperature.half_step", "info", "Half-step velocities", None, "", kt.half_words,
                       threshold=THRESHOLDS["temperature.half_step"])
    return None


def _file_temperature_only(choice: EnergySeriesChoice) -> list[Verdict]:
    """Without a kinetic temperature of our own: the file's temperature column, as information."""
    file_T = choice.role("temperature")
    ft = None if file_T is None else next((x for x in choice.sampling if x.name == file_T.name), None)
    if file_T is None or ft is None:
        return []
    return [Verdict("temperature.dof", "info", "Kinetic temperature", ft.mean, "K",
                    f"T = {fmt(ft.mean)} +- {fmt(ft.standard_error_of_mean)} K from the file's temperature column "
                    f"'{file_T.name}' (the engine's own value; the degrees of freedom it rests on cannot be counted "
                    "here)")]


def temperature_part(run: Run, choice: EnergySeriesChoice, fp: AuditFrames | None, dof: DofCount, *,
                     inference: tm.ConstraintInference | None, all_groups: Mapping[str, np.ndarray],
                     user_groups: Mapping[str, Sequence[int] | np.ndarray] | None, thermostatted: bool,
                     target_T: float | None, timestep_ps: float | None,
                     notes: list[str]) -> tuple[TemperatureAudit | None, list[Verdict]]:
    """The kinetic temperature and its checks, and the verdicts this part makes itself (assumption, half step)."""
    file_kin = choice.role("kinetic")
    if dof.n_dof is None or (fp is None and file_kin is None):
        return None, _file_temperature_only(choice)
    kt = kinetic_temperature_series(run, choice, fp, dof.n_dof, timestep_ps=timestep_ps)
    k_stats = choice.stats(file_kin.name) if kt.from_file_kinetic is not None and file_kin is not None else None
    mean_T, std_T, g_T, err_T = _mean_and_error(kt, k_stats, dof.n_dof)
    mismatch, implied, fT_mean = _against_file(choice, kt, mean_T, k_stats, dof.n_dof)
    gtemps: tuple[tm.GroupTemperature, ...] = ()
    split: dict[str, Any] | None = None
    left_out: tuple[str, ...] = ()
    if fp is not None and all_groups and kt.from_velocities is not None:
        gtemps, split, left_out = _equipartition(run, fp, dof, inference, all_groups, user_groups, notes)
    translation = None
    if fp is not None and kt.from_velocities is not None and fp.translation_kJ_per_mol is not None \
            and fp.translation_total_kJ_per_mol is not None:
        if run.frames is not None and run.frames.velocities_estimated:
            notes.append("Translation against rotation is not checked: the velocities are estimated from the "
                         "positions of neighbouring frames, which misses rotation faster than the frame spacing.")
        else:
            translation = translation_split(fp.translation_kJ_per_mol, fp.translation_total_kJ_per_mol,
                                            n_molecules=fp.n_molecules, n_dof=dof.n_dof, n_com=dof.n_com)
    kdist, maxw, cnote = _canonical_checks(
        run, fp, kt, dof, inference, file_kinetic=None if file_kin is None else np.asarray(file_kin.values,
                                                                                          dtype=np.float64),
        k_stats=k_stats, g_T=g_T, thermostatted=thermostatted, target_T=target_T)
    t_filek = kt.from_file_kinetic
    temp = TemperatureAudit(
        n_atoms=run.n_atoms, n_dof=dof.n_dof, n_constraints=dof.n_constraints,
        constraints_source=dof.constraints_source, n_com_removed=dof.n_com, com_source=dof.com_source,
        kinetic_source=kt.source, mean_K=mean_T, std_K=std_T, error_K=err_T, statistical_inefficiency=g_T,
        mean_from_velocities_K=None if kt.from_velocities is None else float(np.mean(kt.from_velocities)),
        mean_from_file_kinetic_K=None if t_filek is None else (mean_T if k_stats is not None
                                                               else float(np.nanmean(t_filek))),
        file_temperature_mean_K=fT_mean, file_mismatch_relative=mismatch, implied_file_dof=implied,
        velocities_estimated=bool(run.frames is not None and run.frames.velocities_estimated),
        constraint_inference=inference, groups=gtemps, kinetic_distribution=kdist, maxwell=tuple(maxw),
        canonical_note=cnote, time_ps=kt.time_ps, temperature_K=kt.series, split=split, groups_left_out=left_out,
        half_step=kt.half_words, translation=translation, n_virtual_sites=int(run.virtual_sites.size),
    )
    verdicts: list[Verdict] = []
    if dof.assumed:
        temp, v = _assumption(temp, run, dof)
        verdicts += [v] if v is not None else []
    half_v = _half_step_verdict(kt, mean_T)
    verdicts += [half_v] if half_v is not None else []
    if temp.velocities_estimated and t_filek is None:
        notes.append("Velocities were estimated from positions (central differences): the kinetic "
                     "temperature from them is biased low when frames are far apart.")
    return temp, verdicts
