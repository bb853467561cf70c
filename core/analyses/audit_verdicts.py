"""The audit's verdicts in words: each measured number against its threshold, with the source and advice.

Thresholds and explanations are registered in :mod:`phasewake.core.analyses.verdicts` (and beside the
checks in energy.py, temperature.py, timestep.py); here the results of the audit's parts become the lines a
practitioner reads, in a fixed order: ensemble, energy, restarts, temperature, time step, scaling. These
diagnostics are heuristics (:data:`phasewake.core.analyses.verdicts.HEURISTIC_NOTE`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import replace

import numpy as np

from phasewake.core.analyses import timestep as ts
from phasewake.core.analyses.audit_results import AuditResult, EnergyAudit, TemperatureAudit, TimestepAudit
from phasewake.core.analyses.verdicts import EXPLANATIONS, THRESHOLDS, Verdict, judge


def not_checked(kind: str, title: str, reason: str) -> Verdict:
    """An information line "not checked: <reason>" in place of a verdict."""
    return Verdict(kind=kind, level="info", title=title, measured=None, unit="",
                   message=f"not checked: {reason}", advice="", threshold=THRESHOLDS.get(kind))


def advice_of(kind: str) -> str:
    """The registered advice of a verdict kind ("" when none)."""
    return EXPLANATIONS[kind].advice if kind in EXPLANATIONS else ""


def source_of(kind: str) -> str:
    """The source of a verdict kind's threshold."""
    return THRESHOLDS[kind].source


def fmt(x: float | None, unit: str = "", digits: int = 4) -> str:
    """A number for a message, "n/a" when missing or not finite."""
    if x is None or not math.isfinite(x):
        return "n/a"
    return f"{x:.{digits}g}{(' ' + unit) if unit else ''}"


def _conservation_settles_a_bound(step_verdicts: list[Verdict], earlier: list[Verdict]) -> list[Verdict]:
    """A time step judged only against an upper bound on the fastest period (a peak near the frames' Nyquist
    limit, nothing faster expected from the topology and masses) is a caution by itself; when the energy
    conservation was judged and is ok on both drift and fluctuation ratio, that conservation settles it:
    a step too large for a hidden faster motion would show there."""
    judged = {v.kind: v.level for v in earlier}
    if judged.get("energy.drift") != "ok" or judged.get("energy.fluctuation_ratio") != "ok":
        return step_verdicts
    out = []
    for v in step_verdicts:
        if (v.kind == "timestep.fastest_period" and v.level == "caution" and (v.details or {}).get("upper_bound")
                and "assumption" not in v.message):
            v = replace(v, level="ok", advice="", message=v.message + "; the energy conservation (drift and "
                        "fluctuation ratio both ok) shows no sign of a step too large for a faster motion")
        out.append(v)
    return out


def audit_verdicts(ea: EnergyAudit | None, ta: TemperatureAudit | None, tsa: TimestepAudit | None,
                   scaling: ts.ScalingResult | None, compared: AuditResult | None, *, thermostatted: bool,
                   dt: float | None, n_atoms_known: bool, energy_reason: str, pre: Sequence[Verdict] = (),
                   after_energy: Sequence[Verdict] = (), after_temperature: Sequence[Verdict] = (),
                   restarts_found: bool = False) -> list[Verdict]:
    """Every verdict of the audit in reading order; ``pre``, ``after_energy`` and ``after_temperature`` are
    verdicts the parts made themselves (ensemble, restarts, temperature assumptions), put in their place."""
    out: list[Verdict] = list(pre)
    min_rows = THRESHOLDS["audit.min_rows"]
    few = int(min_rows.caution)  # drift, fluctuations, time gaps
    few_jumps = int(min_rows.problem)  # energy jumps
    # energy
    if ea is None:
        for kind, title in (("energy.drift", "Energy drift"), ("energy.fluctuation_ratio", "Energy fluctuation ratio"),
                            ("energy.jumps", "Energy jumps")):
            out.append(not_checked(kind, title, energy_reason))
    else:
        ev = ea.events
        n_rows = int(np.asarray(ea.time_ps).size)
        v = judge("energy.nonfinite", float(ev.n_nonfinite), title="Non-finite energies", unit="rows",
                  message=f"{ev.n_nonfinite} rows of {ea.series_label} are NaN or infinite "
                          f"(threshold: any; {source_of('energy.nonfinite')})",
                  advice=advice_of("energy.nonfinite") if ev.n_nonfinite else "",
                  details={"first_time_ps": next((e.time_ps for e in ev.events if e.kind == "nonfinite"), None)})
        if v.level == "ok" and n_rows < few:
            # a finite value in one or two rows judges nothing about the run
            v = replace(v, level="info", message=v.message + f"; only {n_rows} row(s): this says nothing of the run")
        out.append(v)
        too_few = f"too few rows ({n_rows}; needs {few}, {source_of('audit.min_rows')})"
        out.extend(_conservation_verdicts(ea, too_few))
        out.extend(_event_verdicts(ea, few=few, few_jumps=few_jumps, too_few=too_few,
                                   restarts_found=restarts_found))
    out.extend(after_energy)
    # temperature
    if ta is None:
        out.append(not_checked("temperature.file_mismatch", "Kinetic temperature",
                            "no velocities and no kinetic energy in the files" if not n_atoms_known else
                            "no velocities and no kinetic energy in the files, or the degrees of freedom "
                            "could not be counted"))
    else:
        out.extend(_temperature_verdicts(ta))
        out.extend(_canonical_verdicts(ta, thermostatted))
    out.extend(after_temperature)
    # time step (verdicts made in timestep.py: resolved motions only, expected fast motions from the topology)
    if tsa is None or tsa.frame_spacing_ps is None or (tsa.fastest is None and not tsa.expected):
        out.append(not_checked("timestep.fastest_period", "Time step", "no velocities: the fastest motion is unknown"
                            if tsa is None or tsa.note == "no velocities" else tsa.note))
    else:
        out.extend(_conservation_settles_a_bound(
            ts.timestep_verdicts(tsa.fastest, tsa.frame_spacing_ps, dt, tsa.timestep_source, tsa.expected,
                                 group=tsa.fastest_group), out))
    if scaling is not None:
        dev = abs(scaling.exponent - scaling.expected_exponent)
        v = judge("timestep.scaling", dev, title="Fluctuation vs time step", unit="",
                  message=f"sigma_E {scaling.sigma_1_kJ_per_mol:.4g} kJ/mol at {scaling.timestep_1_ps * 1e3:.4g} fs vs "
                          f"{scaling.sigma_2_kJ_per_mol:.4g} kJ/mol at {scaling.timestep_2_ps * 1e3:.4g} fs: ratio "
                          f"{scaling.measured_ratio:.4g} against (dt1/dt2)^2 = {scaling.expected_ratio:.4g}; exponent "
                          f"{scaling.exponent:.3f} against 2 ({source_of('timestep.scaling')})",
                  advice=advice_of("timestep.scaling"), details={"exponent": scaling.exponent})
        out.append(v if v.level != "ok" else replace(v, advice=""))
    elif compared is not None:
        out.append(not_checked("timestep.scaling", "Fluctuation vs time step",
                            "both runs need a known time step and an energy fluctuation (give --timestep)"))
    return out


def _conservation_verdicts(ea: EnergyAudit, too_few: str) -> list[Verdict]:
    """Drift and fluctuation ratio of the conserved series (or why they were not judged)."""
    out: list[Verdict] = []
    if not ea.expected_conserved:
        out.append(not_checked("energy.drift", "Energy drift", ea.reason))
        out.append(not_checked("energy.fluctuation_ratio", "Energy fluctuation ratio", ea.reason))
    elif ea.drift is None:
        out.append(not_checked("energy.drift", "Energy drift", too_few))
        out.append(not_checked("energy.fluctuation_ratio", "Energy fluctuation ratio", too_few))
    else:
        d = ea.drift
        if d is not None:
            thr = THRESHOLDS["energy.drift"]
            kt = d.slope_kT_per_dof_per_ns
            msg = (f"{ea.series_label}: slope {fmt(d.slope_kJ_per_mol_per_ns)} +- "
                   f"{fmt(d.slope_error_kJ_per_mol_per_ns)} kJ/mol/ns (z = {d.z_score:.2f}) = "
                   f"{fmt(kt)} kT/DOF/ns")
            if kt is None:
                out.append(Verdict("energy.drift", "info", "Energy drift", None, "kT/DOF/ns",
                                   msg + "; kT/DOF not known (degrees of freedom or temperature missing)",
                                   threshold=thr))
            else:
                # judged on the lower end of the 95 % interval: flag only drifts larger than the
                # threshold beyond their own error bar
                err_kt = abs(kt) / abs(d.z_score) if d.z_score else 0.0
                bound = max(0.0, abs(kt) - 1.96 * err_kt)
                msg += (f"; lower end of its 95 % interval {bound:.3g} kT/DOF/ns against {thr.caution:g} "
                        f"caution / {thr.problem:g} problem ({thr.source})")
                msg += _engine_drift_words(ea)
                v = judge("energy.drift", bound, title="Energy drift", unit="kT/DOF/ns", message=msg,
                          advice=advice_of("energy.drift"),
                          details={"drift_kT_per_dof_per_ns": kt, "error_kT_per_dof_per_ns": err_kt,
                                   "significant_3_sigma": d.significant})
                v = _within_engine_target(_unresolved(v, abs(kt), bound, abs(kt) + 1.96 * err_kt), ea)
                if v.level == "problem" and not d.significant:
                    # beyond its 95 % interval but not 3 standard errors from zero: with a dozen checks per
                    # run, one such drift in twenty is noise; a caution until a longer run confirms it
                    v = replace(v, level="caution", message=v.message + (
                        f"; z = {d.z_score:.2f} is not 3 standard errors from zero: a caution, not a problem, "
                        "until a longer run confirms it"))
                out.append(v if v.level != "ok" else replace(v, advice=""))
        f = ea.fluctuations
        if f is not None and f.ratio is not None:
            thr = THRESHOLDS["energy.fluctuation_ratio"]
            v = judge("energy.fluctuation_ratio", f.ratio, title="Energy fluctuation ratio", unit="",
                      message=f"sigma_E/sigma_K = {fmt(f.sigma_total_kJ_per_mol)} / "
                              f"{fmt(f.sigma_kinetic_kJ_per_mol)} kJ/mol = {fmt(f.ratio)} against "
                              f"a caution above {thr.caution:g}, a problem above {thr.problem:g} ({thr.source})",
                      advice=advice_of("energy.fluctuation_ratio"))
            out.append(v if v.level != "ok" else replace(v, advice=""))
        elif f is not None:
            out.append(not_checked("energy.fluctuation_ratio", "Energy fluctuation ratio",
                                "no kinetic energy in the files or from velocities matched to the rows"))
    return out


def _unresolved(v: Verdict, drift: float, lower: float, upper: float) -> Verdict:
    """An 'ok' drift whose 95 % interval reaches past the problem threshold is not ok but unresolved (info,
    shown with the measured drift): the run is too short or too noisy to tell. One that reaches past the
    caution threshold only stays ok, saying that drifts of the caution size are beyond this run."""
    thr = v.threshold
    if v.level != "ok" or thr is None or not upper > thr.caution:
        return v
    interval = f"its 95 % interval, {lower:.3g} to {upper:.3g} kT/DOF/ns,"
    if upper <= thr.problem:
        return replace(v, message=v.message + f"; {interval} rules out a drift of the problem size but not one of "
                                              "the caution size (a longer run narrows it)")
    return replace(v, level="info", measured=drift, message=v.message + (
        f"; not resolved: {interval} reaches past the problem threshold, so this run can neither show a drift "
        "of that size nor rule it out (a longer run narrows it)"))


def _within_engine_target(v: Verdict, ea: EnergyAudit) -> Verdict:
    """A drift problem becomes a caution when the drift per atom, to the upper end of its 95 % interval, is
    within the engine's own stated target (GROMACS ``verlet-buffer-tolerance``, read from the run's log).

    Our kT/DOF/ns thresholds are common practice without a citable source; the engine's target is what its
    developers set the run up for (from memory of the GROMACS manual: the pair-list buffer is chosen so
    that the drift it causes stays below the tolerance; the total drift is usually well below it). A run
    inside that envelope is worth a look, not a rejection.
    """
    d, tol = ea.drift, ea.drift_tolerance
    if v.level != "problem" or d is None or not tol or d.slope_per_atom_kJ_per_mol_per_ns is None:
        return v
    scale = d.slope_per_atom_kJ_per_mol_per_ns / d.slope_kJ_per_mol_per_ns if d.slope_kJ_per_mol_per_ns else 0.0
    upper = (abs(d.slope_kJ_per_mol_per_ns) + 1.96 * d.slope_error_kJ_per_mol_per_ns) * abs(scale) / 1000.0
    if not upper <= float(tol["kJ_mol_ps_atom"]):
        return v
    return replace(v, level="caution", message=v.message + f"; the upper end of its 95 % interval, {upper:.3g} "
                   "kJ/mol/ps per atom, is within that target: a caution here rather than a problem")


def _engine_drift_words(ea: EnergyAudit) -> str:
    """The drift per atom beside what the engine says of its own drift and its target ('' when it says
    nothing), so the user can hold the number to the engine's own scale."""
    d = ea.drift
    if d is None or d.slope_per_atom_kJ_per_mol_per_ns is None or not (ea.engine_drift or ea.drift_tolerance):
        return ""
    words = f". Per atom: {d.slope_per_atom_kJ_per_mol_per_ns / 1000:.3g} kJ/mol/ps"
    if ea.fits_from_ps is not None:
        words += f" (fit from {ea.fits_from_ps:.6g} ps)"
    if ea.engine_drift:
        parts = "; ".join(
            f"{p['kJ_mol_ps_atom']:.3g} kJ/mol/ps per atom"
            + (f" over {p['from_ps']:.6g}-{p['to_ps']:.6g} ps" if "from_ps" in p else "") for p in ea.engine_drift[:4])
        src = ea.engine_drift[0].get("source", "the engine's log")
        words += (f"; the engine's own log ({src}) says {parts} (from the first and last "
                  "energy of each part" + (", the start-up step included" if ea.fits_from_ps is not None else "")
                  + ")")
    tol = ea.drift_tolerance
    if tol:
        words += (f"; the engine sets its pair-list buffer for a drift of at most {tol['kJ_mol_ps_atom']:g} "
                  f"kJ/mol/ps per atom ({tol.get('source', 'its parameters')})")
    return words


def _event_verdicts(ea: EnergyAudit, *, few: int, few_jumps: int, too_few: str,
                    restarts_found: bool) -> list[Verdict]:
    """Jumps, runaway noise, time gaps and overlaps of the energy table."""
    out: list[Verdict] = []
    ev = ea.events
    n_rows = int(np.asarray(ea.time_ps).size)
    mj = ev.max_jump_robust_sigma
    jump_times = [e.time_ps for e in ev.events if e.kind == "jump"]
    v = judge("energy.jumps", mj, title="Energy jumps", unit="robust sigma",
              message=f"largest frame-to-frame step {mj:.3g} robust sigma; {ev.n_jumps} steps above "
                      f"{THRESHOLDS['energy.jumps'].caution:g}"
                      + (f" at t = {', '.join(f'{x:.6g}' for x in jump_times[:5])} ps" if jump_times else "")
                      + (f"; the one at {ea.fits_from_ps:.6g} ps is the run's first step (the drift and "
                         "fluctuation fits begin after it)" if ea.fits_from_ps is not None else "")
                      + f" ({source_of('energy.jumps')})",
              advice=advice_of("energy.jumps"), details={"times_ps": jump_times})
    if n_rows < few_jumps:
        out.append(not_checked("energy.jumps", "Energy jumps",
                            f"too few rows ({n_rows}; needs {few_jumps}, {source_of('audit.min_rows')})"))
    else:
        out.append(v if v.level != "ok" else replace(v, advice=""))
    if ev.runaway_ratio is not None:
        v = judge("energy.runaway", ev.runaway_ratio, title="Runaway energy", unit="",
                  message=f"frame-to-frame energy noise in the last tenth is {ev.runaway_ratio:.3g} times "
                          f"that in the first tenth ({source_of('energy.runaway')})",
                  advice=advice_of("energy.runaway"))
        out.append(v if v.level != "ok" else replace(v, advice=""))
    gap_times = [e.time_ps for e in ev.events if e.kind == "gap"]
    v = judge("time.gaps", float(ev.n_gaps), title="Time gaps", unit="gaps",
              message=f"{ev.n_gaps} spacings above 1.5 x the median spacing {fmt(ev.median_spacing_ps, 'ps')}"
                      + (f", before t = {', '.join(f'{x:.6g}' for x in gap_times[:5])} ps" if gap_times else ""),
              advice=advice_of("time.gaps"), details={"times_ps": gap_times})
    if n_rows < few:
        out.append(not_checked("time.gaps", "Time gaps", too_few))
    else:
        out.append(v if v.level != "ok" else replace(v, advice=""))
    if not (restarts_found and ev.n_overlaps == 0) and n_rows >= 2:
        v = judge("time.overlaps", float(ev.n_overlaps), title="Time overlaps and reversals", unit="rows",
                  message=f"{ev.n_overlaps} rows where time repeats or goes back",
                  advice=advice_of("time.overlaps"),
                  details={"times_ps": [e.time_ps for e in ev.events if e.kind in ("overlap", "reversal")]})
        out.append(v if v.level != "ok" else replace(v, advice=""))
    return out


def _temperature_verdicts(ta: TemperatureAudit) -> list[Verdict]:
    """The kinetic temperature with its degrees of freedom, against the file's, and equipartition."""
    out: list[Verdict] = []
    out.append(Verdict("temperature.dof", "info", "Kinetic temperature", ta.mean_K, "K",
                       f"T = {fmt(ta.mean_K)} +- {fmt(ta.error_K)} K from {ta.kinetic_source}; N_dof = "
                       f"{ta.n_dof} = {ta.atoms_words} - {ta.n_constraints} constraints ({ta.constraints_source}) "
                       f"- {ta.n_com_removed} centre of mass ({ta.com_source})"))
    if ta.file_mismatch_relative is not None:
        v = judge("temperature.file_mismatch", abs(ta.file_mismatch_relative), title="Temperature vs file",
                  unit="", message=f"mean T here {fmt((1 + ta.file_mismatch_relative) * (ta.file_temperature_mean_K or 0))} K "
                                   f"against {fmt(ta.file_temperature_mean_K)} K in the file "
                                   f"(relative {ta.file_mismatch_relative:+.3%}); the file's value matches "
                                   f"N_dof = {fmt(ta.implied_file_dof, digits=6)} against {ta.n_dof} here "
                                   f"({source_of('temperature.file_mismatch')})",
                  advice=advice_of("temperature.file_mismatch"))
        out.append(v if v.level != "ok" else replace(v, advice=""))
    if ta.groups:
        listing = "; ".join(f"{g.name}: {g.mean_K:.2f} +- {g.error_K:.2f} K ({g.z_score:+.1f} sigma)"
                            for g in ta.groups[:12])
        sp = ta.split
        zthr = THRESHOLDS["temperature.equipartition_significance"]
        if sp is not None and sp.get("mean_K"):
            rel = abs(sp["split_K"]) / sp["mean_K"]
            z = abs(sp["z"])
            measured = rel if z > zthr.caution else 0.0
            head = (f"largest split {sp['split_K']:.3g} +- {sp['error_K']:.2g} K ({rel:.2%} of {sp['mean_K']:.4g} K, "
                    f"{z:.1f} sigma) between {sp['hot']} ({sp['hot_K']:.2f} K) and {sp['cold']} "
                    f"({sp['cold_K']:.2f} K)")
            if z <= zthr.caution:
                head += f"; not significant (below {zthr.caution:g} sigma)"
        else:
            sig = [g for g in ta.groups if g.significant]
            worst_g = max(sig or list(ta.groups), key=lambda g: abs(g.relative_difference))
            measured = abs(worst_g.relative_difference) if sig else 0.0
            z = abs(worst_g.z_score)
            head = (f"largest significant relative difference {measured:.3%} ({worst_g.name})" if sig else
                    f"no group differs significantly (largest |z| = {max(abs(g.z_score) for g in ta.groups):.1f} "
                    "< 3)")
        v = judge("temperature.equipartition", measured, title="Equipartition", unit="",
                  message=f"{head}; groups: {listing} ({source_of('temperature.equipartition')}; a split of caution "
                          f"size at {zthr.problem:g} sigma or more is a problem, "
                          f"{source_of('temperature.equipartition_significance')})",
                  advice=advice_of("temperature.equipartition"),
                  details={"split": sp})
        if v.level == "caution" and z >= zthr.problem:
            v = replace(v, level="problem")
        shown = abs(sp["split_K"]) / sp["mean_K"] if sp is not None and sp.get("mean_K") else \
            max(abs(g.relative_difference) for g in ta.groups)
        v = replace(v, measured=shown)  # shown as measured; judged only where significant
        out.append(v if v.level != "ok" else replace(v, advice=""))
    else:
        if ta.mean_from_velocities_K is None:
            why = "needs velocities"
        elif ta.groups_left_out or ta.n_constraints > 0:
            why = ("the only groups of atoms (elements, species or masses) cut through molecules that are or may "
                   "be rigid, and there is one kind of residue; give --group to compare parts of the system"
                   + ("; translation against rotation is checked below" if ta.translation is not None else ""))
        else:
            why = "needs at least two groups of atoms (species, elements or masses, residue kinds, or --group)"
        out.append(not_checked("temperature.equipartition", "Equipartition", why))
    out.extend(_translation_verdict(ta))
    return out


def _translation_verdict(ta: TemperatureAudit) -> list[Verdict]:
    """Translation of whole molecules against their rotation and internal motion (none without molecules)."""
    tr = ta.translation
    if tr is None:
        return []
    zthr = THRESHOLDS["temperature.equipartition_significance"]
    rel = abs(tr.relative_difference)
    measured = rel if abs(tr.z_score) > zthr.caution else 0.0
    v = judge("temperature.translation", measured, title="Translation against rotation", unit="",
              message=f"T_trans = {tr.translation_K:.2f} K over {tr.dof_translation:g} degrees of freedom "
                      f"({tr.n_molecules} molecules), T_rest = {tr.rest_K:.2f} K over {tr.dof_rest:g} (rotation "
                      f"and internal motion); difference {tr.difference_K:+.3g} +- {tr.difference_error_K:.2g} K "
                      f"({rel:.2%}, {tr.z_score:+.1f} sigma) on {tr.n_frames} frames"
                      + ("" if abs(tr.z_score) > zthr.caution else f"; not significant (below {zthr.caution:g} sigma)")
                      + f" ({source_of('temperature.translation')})",
              advice=advice_of("temperature.translation"),
              details={"translation_K": tr.translation_K, "rest_K": tr.rest_K, "z": tr.z_score})
    if v.level == "caution" and abs(tr.z_score) >= zthr.problem:
        v = replace(v, level="problem")
    v = replace(v, measured=rel)  # shown as measured; judged only where significant
    return [v if v.level != "ok" else replace(v, advice="")]


def _canonical_verdicts(ta: TemperatureAudit, thermostatted: bool) -> list[Verdict]:
    """The canonical-distribution checks: kinetic energy and Maxwell-Boltzmann speeds."""
    out: list[Verdict] = []
    if ta.kinetic_distribution is not None:
        kd = ta.kinetic_distribution
        v = judge("temperature.kinetic_distribution", kd.p_value, title="Kinetic-energy distribution",
                  unit="p-value", message=f"KS p = {kd.p_value:.3g} for {kd.n_samples} decorrelated kinetic "
                                          f"energies against {kd.reference} (std {kd.sample_std:.4g} vs "
                                          f"{kd.expected_std:.4g} kJ/mol; {source_of('temperature.kinetic_distribution')})",
                  advice=advice_of("temperature.kinetic_distribution"))
        out.append(v if v.level != "ok" else replace(v, advice=""))
    else:
        out.append(not_checked("temperature.kinetic_distribution", "Kinetic-energy distribution", ta.canonical_note))
    if ta.maxwell:
        nsp = len(ta.maxwell)
        pmin = min(1.0, min(c.p_value for c in ta.maxwell) * nsp)
        listing = "; ".join(f"{c.name}: p = {c.p_value:.3g} (n = {c.n_samples})" for c in ta.maxwell)
        v = judge("temperature.maxwell", pmin, title="Maxwell-Boltzmann speeds", unit="p-value",
                  message=f"smallest Bonferroni-corrected KS p = {pmin:.3g}; {listing} "
                          f"({source_of('temperature.maxwell')})", advice=advice_of("temperature.maxwell"))
        out.append(v if v.level != "ok" else replace(v, advice=""))
    else:
        reason = ta.canonical_note if not thermostatted else (
            ta.canonical_note if "not applied" in ta.canonical_note else
            "no unconstrained species with enough decorrelated speeds (needs velocities)")
        out.append(not_checked("temperature.maxwell", "Maxwell-Boltzmann speeds", reason))
    return out
