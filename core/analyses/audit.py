"""The energy audit of one run: energy conservation, kinetic temperature, equipartition, time step.

:class:`AuditRequest` is the audit as the front ends ask for it (the command line, the window, the report
and the Python API build it and hand it to :func:`phasewake.core.store.cached.requested`);
:func:`audit_run` is the audit itself, a progress generator (yields
:class:`~phasewake.core.progress.Progress`, returns an :class:`AuditResult`) made of named steps:

1. the ensemble (:mod:`~phasewake.core.analyses.ensemble`) and the energy series judged
   (:mod:`~phasewake.core.analyses.audit_energy`);
2. one pass over the frames (:mod:`~phasewake.core.analyses.audit_frames`: kinetic energy per frame and per
   group, rigid pairs, velocity spectrum, speeds), or the frame results of a shared pass;
3. the degrees of freedom and the temperature part (:mod:`~phasewake.core.analyses.audit_temperature`);
4. the energy part: drift, fluctuations, events (:mod:`~phasewake.core.analyses.audit_energy`);
5. the time-step part (:func:`timestep_part`) and an optional comparison run (dt^2 scaling);
6. the verdicts in words (:mod:`~phasewake.core.analyses.audit_verdicts`).

Every verdict names what was measured, the threshold and its source, and advice. These diagnostics are
heuristics (:data:`phasewake.core.analyses.verdicts.HEURISTIC_NOTE`).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, fields, replace
from typing import Any, ClassVar

import numpy as np

from phasewake.core.analyses import temperature as tm
from phasewake.core.analyses import timestep as ts
from phasewake.core.analyses.audit_energy import (
    EnergySeriesChoice,
    choose_energy_series,
    drift_reference,
    energy_part,
    restarts_verdict,
)
from phasewake.core.analyses.audit_frames import (
    AuditFrames,
    AuditFramesConsumer,
    audit_groups,
    can_infer,
    frame_pass,
    infer_constraints_only,
    needs_com,
    reads_velocities,
)
from phasewake.core.analyses.audit_results import (
    AuditResult,
    EnergyAudit,
    TemperatureAudit,
    TimestepAudit,
    audit_summary,
)
from phasewake.core.analyses.audit_temperature import DofCount, count_dof, temperature_part
from phasewake.core.analyses.audit_verdicts import audit_verdicts
from phasewake.core.analyses.ensemble import EnsembleDecision, decide_ensemble, ensemble_verdict
from phasewake.core.analyses.request import AnalysisRequest, index_groups
from phasewake.core.analyses.verdicts import Verdict
from phasewake.core.errors import AnalysisError, MissingDataError
from phasewake.core.model.run import EnergyTable, Run
from phasewake.core.progress import Progress, Work

__all__ = ["AuditFrames", "AuditFramesConsumer", "AuditRequest", "AuditResult", "EnergyAudit", "EnsembleDecision",
           "TemperatureAudit", "TimestepAudit", "audit_groups", "audit_run", "audit_summary", "decide_ensemble"]


# ---------------------------------------------------------------------------------------------------
# Steps of audit_run
# ---------------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class _Inputs:
    """What the audit can read of a run: its energy table (None when empty) and whether it reads velocities."""

    table: EnergyTable | None
    reads_velocities: bool
    notes: list[str]


def _inputs(run: Run, *, require_temperature: bool) -> _Inputs:
    table = run.energies if run.energies is not None and len(run.energies) else None
    has_vel = reads_velocities(run)
    notes: list[str] = []
    if run.has_velocities and not has_vel:
        notes.append("Atom masses are unknown: nothing per atom (temperature from velocities, spectrum) was computed.")
    if table is None and not has_vel:
        notes.append("Nothing to audit: the run has neither an energy table nor velocities.")
    if require_temperature and not has_vel and (table is None or table.by_role("kinetic") is None):
        raise MissingDataError("velocities are missing (and no kinetic energy in the energy table): the kinetic "
                               "temperature needs them", path=run.paths[0] if run.paths else None)
    notes.extend(f"Reader: {w}" for w in run.warnings)
    return _Inputs(table, has_vel, notes)


def _checked_frames(run: Run, frames: AuditFrames, all_groups: Mapping[str, np.ndarray],
                    thermostatted: bool) -> AuditFrames:
    """Frame results of a shared pass, refused when they were made for other settings."""
    path0 = run.paths[0] if run.paths else None
    if frames.group_names != tuple(all_groups) or frames.kinetic_kJ_per_mol.size != run.n_frames:
        raise AnalysisError("the frame results given to the audit were made for other groups or "
                            "another frame range", path=path0)
    if frames.com_kinetic_kJ_per_mol is None and needs_com(run, thermostatted):
        raise AnalysisError("the frame results given to the audit lack the centre-of-mass kinetic "
                            "energy it needs (make them with AuditFramesConsumer.for_run)", path=path0)
    return frames


def _frames_part(run: Run, inputs: _Inputs, frames: AuditFrames | None, *, n_constraints: int | None,
                 groups: Mapping[str, Sequence[int] | np.ndarray] | None, thermostatted: bool, segment_frames: int, max_spectrum_segments: int | None,
                 total: float) -> Work[tuple[AuditFrames | None, tm.ConstraintInference | None, dict[str, np.ndarray]]]:
    """(frame results, constraint inference, equipartition groups): one pass over the frames, or none."""
    infer = can_infer(run)
    if run.topology is not None and run.frames is not None and not infer:
        inputs.notes.append("The positions are stored with too little precision to tell rigid bonds from flexible "
                            "ones (a lossy format): constraints are not inferred from them.")
    if not inputs.reads_velocities:
        return None, infer_constraints_only(run) if infer else None, {}
    # groups are fixed before the pass; element groups only when nothing is constrained
    all_groups = audit_groups(run, n_constraints=n_constraints, groups=groups)
    if frames is not None:
        fp = _checked_frames(run, frames, all_groups, thermostatted)
    else:
        consumer = AuditFramesConsumer(run, groups=all_groups, infer=infer, want_speeds=thermostatted,
                                       want_com=needs_com(run, thermostatted),
                                       segment_frames=segment_frames, max_segments=max_spectrum_segments)
        fp = yield from frame_pass(run, consumer, done0=0.0, total=total)
    return fp, fp.inference, all_groups


def _spectrum_timestep(fp: AuditFrames, dt: float | None, dt_src: str) -> TimestepAudit:
    """The fastest motion of the velocity spectra (whole system and each group) against the step."""
    if fp.spectrum_frequency_per_ps is None or fp.spectrum_power is None:
        return TimestepAudit(None, None, fp.spectrum_note, np.zeros(0), np.zeros(0))
    freq, power = fp.spectrum_frequency_per_ps, fp.spectrum_power
    candidates: dict[str, ts.FastestMotion] = {}
    for gname, gpow in (("all atoms", power), *fp.group_spectra.items()):
        try:
            candidates[gname] = ts.fastest_motion(freq, gpow)
        except AnalysisError:
            continue
    if not candidates:
        return TimestepAudit(None, None, "no motion found in the velocity spectrum", freq, power)
    gbest = max(candidates, key=lambda k: candidates[k].frequency_per_ps)
    fast = candidates[gbest]
    spacing = float(np.median(np.diff(fp.time_ps)))
    chk = ts.check_timestep(fast.period_ps, spacing, dt, timestep_source=dt_src)
    return TimestepAudit(fast, chk, "fastest motion from mass-weighted velocity power spectra of "
                         "the whole system and of each atom group (Welch, Hann window; the "
                         "audit's own estimator)", freq, power, fastest_group=gbest,
                         group_wavenumbers_per_cm={k: c.wavenumber_per_cm for k, c in candidates.items()})


def timestep_part(run: Run, fp: AuditFrames | None, inference: tm.ConstraintInference | None, *,
                  n_constraints: int | None, timestep_ps: float | None) -> TimestepAudit | None:
    """The fastest motion (velocity spectrum) and the fast motions the topology and masses imply, against
    the frame spacing and the time step; None when neither can be had."""
    md = run.metadata
    dt = timestep_ps if timestep_ps is not None else md.timestep_ps
    dt_src = "user (--timestep)" if timestep_ps is not None else ("metadata" if md.timestep_ps else "unknown")
    tsa = _spectrum_timestep(fp, dt, dt_src) if fp is not None else None
    if run.frame_spacing_ps:  # fast motions the topology and masses imply, judged against the frames
        known = n_constraints if n_constraints is not None else md.n_constraints
        expected = ts.expected_fast_motions(run.topology, run.masses_amu, n_constraints=known,
                                            rigid_pairs=None if inference is None else inference.rigid_pairs,
                                            constraints_words=md.constraints)
        tsa = replace(tsa or TimestepAudit(None, None, "no velocities", np.zeros(0), np.zeros(0)),
                      expected=expected, frame_spacing_ps=float(run.frame_spacing_ps), timestep_source=dt_src)
    return tsa


def _nested(work: Work[AuditResult], done0: float, total: float) -> Work[AuditResult]:
    """Re-yield a nested audit's progress on the outer scale."""
    try:
        while True:
            p = next(work)
            yield Progress(min(done0 + p.done, total), total, f"comparison run: {p.message}")
    except StopIteration as stop:
        return stop.value  # type: ignore[no-any-return]


def _comparison_part(compare: Run, eaudit: EnergyAudit | None, dt: float | None, *, temperature_K: float | None,
                     compare_timestep_ps: float | None, segment_frames: int,
                     max_spectrum_segments: int | None, done0: float, total: float,
                     notes: list[str]) -> Work[tuple[AuditResult, ts.ScalingResult | None]]:
    """The audit of a run at another time step, and the dt^2 scaling of the energy fluctuation."""
    compared = yield from _nested(audit_run(compare, temperature_K=temperature_K,
                                            timestep_ps=compare_timestep_ps, segment_frames=segment_frames,
                                            max_spectrum_segments=max_spectrum_segments), done0, total)
    dt2 = compare_timestep_ps if compare_timestep_ps is not None else compare.metadata.timestep_ps
    s1 = eaudit.fluctuations if eaudit is not None else None
    s2 = compared.energy.fluctuations if compared.energy is not None else None
    scaling = None
    if dt and dt2 and s1 is not None and s2 is not None:
        try:
            scaling = ts.timestep_scaling(dt, s1.sigma_total_kJ_per_mol, dt2, s2.sigma_total_kJ_per_mol,
                                          ratio_1=s1.ratio, ratio_2=s2.ratio)
        except AnalysisError as exc:
            notes.append(f"Time-step scaling not checked: {exc}")
    return compared, scaling


def _overall(run: Run, decision: EnsembleDecision, choice: EnergySeriesChoice, eaudit: EnergyAudit | None,
             temp: TemperatureAudit | None, temp_verdicts: list[Verdict], tsa: TimestepAudit | None,
             scaling: ts.ScalingResult | None, compared: AuditResult | None, dt: float | None) -> list[Verdict]:
    """Every verdict, in reading order."""
    md = run.metadata
    joins = list(choice.table.joins) if choice.table is not None else []
    frame_joins = list(md.extra.get("frame_joins") or [])
    part_overlaps = [str(x) for x in (md.extra.get("overlaps") or [])]  # parts joined by the reader layer
    after_energy = []
    if joins or frame_joins or part_overlaps:
        after_energy.append(restarts_verdict(joins, frame_joins, eaudit, part_overlaps))
    verdicts = audit_verdicts(eaudit, temp, tsa, scaling, compared, thermostatted=decision.thermostatted, dt=dt,
                              n_atoms_known=bool(run.n_atoms), energy_reason=choice.reason,
                              pre=[ensemble_verdict(decision, eaudit)], after_energy=after_energy,
                              after_temperature=temp_verdicts, restarts_found=bool(joins))
    if not run.n_atoms and temp is None:
        verdicts = [replace(v, title="Temperature vs file", message="not checked: the files hold no atoms (energy "
                            "table only), so the degrees of freedom cannot be counted")
                    if v.kind == "temperature.file_mismatch" else v
                    for v in verdicts]
    return verdicts


# ---------------------------------------------------------------------------------------------------
# The audit
# ---------------------------------------------------------------------------------------------------

def audit_run(
    run: Run,
    *,
    n_constraints: int | None = None,
    timestep_ps: float | None = None,
    temperature_K: float | None = None,
    groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
    require_temperature: bool = False,
    compare: Run | None = None,
    compare_timestep_ps: float | None = None,
    segment_frames: int = 256,
    max_spectrum_segments: int | None = 64,
    frames: AuditFrames | None = None,
) -> Work[AuditResult]:
    """Audit one run (and optionally compare its energy fluctuation with a run at another time step).

    The keywords are the settings of :class:`AuditRequest` (see there); ``frames`` takes the frame results
    of an :class:`AuditFramesConsumer` fed by a shared pass (``AuditRequest.consumer``, over all frames):
    then no frame is read here. ``require_temperature`` raises :class:`MissingDataError` when the run holds
    neither velocities nor a kinetic energy (instead of skipping the temperature checks).

    Yields
    ------
    Progress

    Returns
    -------
    AuditResult
    """
    settings = {"n_constraints": n_constraints, "timestep_ps": timestep_ps, "temperature_K": temperature_K,
                "groups": {k: list(map(int, v)) for k, v in (groups or {}).items()},
                "require_temperature": require_temperature,
                "segment_frames": segment_frames, "max_spectrum_segments": max_spectrum_segments,
                "compare": None if compare is None else compare.name}
    md = run.metadata
    decision = decide_ensemble(run, temperature_K=temperature_K)
    inputs = _inputs(run, require_temperature=require_temperature)
    notes = inputs.notes
    frames_total = float(run.frames.n_frames if (inputs.reads_velocities and run.frames is not None) else 0)
    cmp_total = float(compare.frames.n_frames if compare is not None and compare.has_velocities
                      and compare.frames is not None else 0)
    total = max(frames_total + cmp_total, 1.0)
    yield Progress(0, total, "energies")
    choice = choose_energy_series(inputs.table, thermostatted=decision.thermostatted)
    fp, inference, all_groups = yield from _frames_part(
        run, inputs, frames, n_constraints=n_constraints, groups=groups, thermostatted=decision.thermostatted,
        segment_frames=segment_frames, max_spectrum_segments=max_spectrum_segments, total=total)
    dof: DofCount = count_dof(run, inputs.table, fp, inference, n_constraints=n_constraints,
                              thermostatted=decision.thermostatted, notes=notes)
    target_T = temperature_K if temperature_K is not None else md.temperature_K
    temp, temp_verdicts = temperature_part(run, choice, fp, dof, inference=inference, all_groups=all_groups,
                                           user_groups=groups, thermostatted=decision.thermostatted,
                                           target_T=target_T, timestep_ps=timestep_ps, notes=notes)
    n_dof_drift, kT_K = drift_reference(choice, dof.n_dof,
                                        target_T if target_T is not None else (temp.mean_K if temp else None), notes)
    eaudit = energy_part(run, choice, fp, n_dof=n_dof_drift, kT_K=kT_K, notes=notes)
    tsa = timestep_part(run, fp, inference, n_constraints=n_constraints, timestep_ps=timestep_ps)
    dt = timestep_ps if timestep_ps is not None else md.timestep_ps
    compared, scaling = None, None
    if compare is not None:
        compared, scaling = yield from _comparison_part(
            compare, eaudit, dt, temperature_K=temperature_K, compare_timestep_ps=compare_timestep_ps,
            segment_frames=segment_frames, max_spectrum_segments=max_spectrum_segments,
            done0=frames_total, total=total, notes=notes)
    verdicts = _overall(run, decision, choice, eaudit, temp, temp_verdicts, tsa, scaling, compared, dt)
    yield Progress(total, total, "done")
    return AuditResult(run_name=run.name, paths=tuple(str(p) for p in run.paths), ensemble=decision.label,
                       thermostatted=decision.thermostatted, energy=eaudit, temperature=temp, timestep=tsa,
                       scaling=scaling, compared=compared, verdicts=tuple(verdicts), notes=tuple(notes),
                       settings=settings, ensemble_source=decision.source, ensemble_origin=decision.origin,
                       target_temperature_K=target_T if decision.thermostatted else None)


# ---------------------------------------------------------------------------------------------------
# The audit as an analysis request: the one road of the command line, the window, the report and the API
# ---------------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class AuditRequest(AnalysisRequest):
    """The audit of a run with every setting a user can give; defaults are decided here.

    The ensemble, thermostat and constraint facts of the files, and a user's ``--ensemble``, stay on the
    run's metadata (the run's fingerprint is part of the cache key); the fields below are the audit's own
    settings (those of :func:`audit_run`). Build it with keywords, hand it to
    :func:`phasewake.core.store.cached.requested`.

    Parameters
    ----------
    n_constraints : int, optional
        Holonomic constraints (overrides the files and inference; labelled "user (--constraints)").
    timestep_ps : float, optional
        Integration time step, ps (overrides the files; labelled "user (--timestep)").
    temperature_K : float, optional
        Thermostat target temperature, K (also given to the comparison run).
    groups : mapping name -> atom indices, optional
        Equipartition groups added to the residue-name groups (stored as tuples of ints).
    require_temperature : bool
        Raise MissingDataError when no kinetic temperature can be had (instead of skipping).
    compare : Run, optional
        A second run of the same system at another time step (the dt^2 scaling check).
    compare_timestep_ps : float, optional
        Time step of ``compare``, ps, when its files do not say.
    segment_frames : int
        Frames per velocity-spectrum segment.
    max_spectrum_segments : int or None
        At most this many spectrum segments (None: all).

    Examples
    --------
    >>> from phasewake.core.analyses.audit import AuditRequest
    >>> AuditRequest(groups={"solute": [1, 0]}).groups
    {'solute': (1, 0)}
    """

    name: ClassVar[str] = "audit"
    label: ClassVar[str] = "audit"

    n_constraints: int | None = None
    timestep_ps: float | None = None
    temperature_K: float | None = None
    groups: Mapping[str, Sequence[int]] | None = field(default=None, hash=False)
    require_temperature: bool = False
    compare: Run | None = field(default=None, hash=False)
    compare_timestep_ps: float | None = None
    segment_frames: int = 256
    max_spectrum_segments: int | None = 64

    def __post_init__(self) -> None:
        object.__setattr__(self, "groups", index_groups(self.groups))

    def _keywords(self) -> dict[str, Any]:
        return {f.name: getattr(self, f.name) for f in fields(self)}

    def work(self, run: Run) -> Work[AuditResult]:
        return (yield from audit_run(run, **self._keywords()))

    def consumer(self, run: Run) -> AuditFramesConsumer | None:
        """The audit's frame part for a shared pass over all frames; None when the audit reads no velocities
        (an energy table only, unknown masses): then :meth:`work` does it all."""
        if not reads_velocities(run):
            return None
        return AuditFramesConsumer.for_run(run, n_constraints=self.n_constraints, groups=self.groups,
                                           segment_frames=self.segment_frames,
                                           max_spectrum_segments=self.max_spectrum_segments,
                                           temperature_K=self.temperature_K)

    def after_pass(self, run: Run, finished: AuditFrames) -> Work[AuditResult]:
        """The energy part, the judgement and any comparison run, from the frame part of a shared pass."""
        return (yield from audit_run(run, frames=finished, **self._keywords()))

