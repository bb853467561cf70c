"""The audit's energy part: which series is judged, its drift, fluctuations and events, and restarts.

:func:`choose_energy_series` picks the conserved series of the energy table and scans the table once
(:func:`phasewake.core.analyses.energy.scan_energy_table`); :func:`energy_part` measures the drift (per
degree of freedom and kT where they are known, :func:`drift_reference`), the fluctuation ratio and the events;
:func:`restarts_verdict` lists the restarts glued into the files. Kernels live in energy.py.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from phasewake.core.analyses import energy as en
from phasewake.core.analyses.audit_frames import AuditFrames, align_by_time
from phasewake.core.analyses.audit_results import EnergyAudit
from phasewake.core.analyses.audit_verdicts import advice_of, source_of
from phasewake.core.analyses.energy_events import EventsResult, find_energy_events
from phasewake.core.analyses.verdicts import THRESHOLDS, Verdict, judge
from phasewake.core.errors import MissingDataError
from phasewake.core.model.run import EnergyTable, Run, Series
from phasewake.core.units import KB_KJ_PER_MOL_K


@dataclass(frozen=True)
class EnergySeriesChoice:
    """The energy table as the audit reads it: the judged series, one scan of every column, the sampling."""

    table: EnergyTable | None
    conserved: en.ConservedSeries | None
    scan: en.TableScan | None  # one blocked pass over the table's columns; None unless every value is finite
    sampling: tuple[en.SeriesSampling, ...]
    reason: str  # why no series is judged ("" when one is)

    def stats(self, name: str) -> tuple[float, float, float] | None:
        """Mean, population std and g of a table series from the scan (None: take the masked route)."""
        key = en.SERIES_PREFIX + name
        if self.scan is None or key not in self.scan.names:
            return None
        g = next((x.statistical_inefficiency for x in self.sampling if x.name == name), None)
        if g is None:
            return None
        return float(self.scan.mean[self.scan.index(key)]), self.scan.std(key), g

    def role(self, role: str) -> Series | None:
        """The table's series of ``role`` (None without a table or such a series)."""
        return self.table.by_role(role) if self.table is not None else None


def choose_energy_series(table: EnergyTable | None, *, thermostatted: bool) -> EnergySeriesChoice:
    """The series to judge (:func:`phasewake.core.analyses.energy.select_conserved`) and one scan of the table."""
    conserved: en.ConservedSeries | None = None
    scan: en.TableScan | None = None
    sampling: tuple[en.SeriesSampling, ...] = ()
    reason = "the run has no energy table"
    if table is not None:
        try:
            conserved = en.select_conserved(table, thermostatted=thermostatted)
        except MissingDataError as exc:
            reason = "needs " + exc.problem.partition("need ")[2] if "need " in exc.problem else exc.problem
    if table is not None and conserved is not None:
        scan = en.scan_energy_table(conserved.time_ps, conserved.values_kJ_per_mol, table)
        sampling = en.series_sampling(table, scan=scan)
        if not scan.finite:
            scan = None
    elif table is not None:
        sampling = en.series_sampling(table)
    return EnergySeriesChoice(table, conserved, scan, sampling, reason)


def drift_reference(choice: EnergySeriesChoice, n_dof: int | None, kT_K: float | None,
                    notes: list[str]) -> tuple[int | None, float | None]:
    """(N_dof, temperature in K) that express the drift per degree of freedom and kT.

    Without atoms (an energy table only) the file's kinetic energy and temperature give the N_dof the
    engine used: N_dof = 2 <K> / (k_B <T>).
    """
    file_kin, file_T = choice.role("kinetic"), choice.role("temperature")
    if n_dof is not None or file_kin is None or file_T is None:
        return n_dof, kT_K
    ks, tst = choice.stats(file_kin.name), choice.stats(file_T.name)
    if ks is not None and tst is not None:  # every row finite: the scan's means
        k_mean, t_mean = ks[0], tst[0]
    else:
        kv = np.asarray(file_kin.values, dtype=np.float64)
        tv = np.asarray(file_T.values, dtype=np.float64)
        ok = np.isfinite(kv) & np.isfinite(tv)
        k_mean = float(kv[ok].mean()) if ok.any() else math.nan
        t_mean = float(tv[ok].mean()) if ok.any() else math.nan
    if not t_mean > 0:
        return n_dof, kT_K
    dof = int(round(2.0 * k_mean / (KB_KJ_PER_MOL_K * t_mean)))
    notes.append(f"No atoms in the files: N_dof = {dof} for the per-DOF drift comes from the "
                 "file's kinetic energy and temperature (2 <K> / (k_B <T>)).")
    return dof, kT_K if kT_K is not None else t_mean


def _without_join_steps(tg: np.ndarray, eg: np.ndarray, table: EnergyTable,
                        notes: list[str]) -> tuple[np.ndarray, bool]:
    """The energy with the steps across restarts glued in taken out (each segment is its own run; the step is
    reported by the restarts and jumps checks, not counted again as drift or fluctuation)."""
    eg = np.array(eg, dtype=np.float64)
    d_all = np.diff(eg)
    med_d = float(np.median(d_all)) if d_all.size else 0.0
    taken = []
    for j in table.joins:
        i = int(np.searchsorted(tg, j.time_ps - 1e-9 * max(1.0, abs(j.time_ps))))
        if 0 < i < eg.size:
            step = float(eg[i] - eg[i - 1] - med_d)
            eg[i:] -= step
            taken.append(f"{step:+.4g} kJ/mol at {float(tg[i]):.6g} ps")
    if taken:
        notes.append("Restarts glued in: the energy steps across the joins (" + ", ".join(taken[:5])
                     + ") are taken out before the drift and fluctuation checks; the jumps and restarts "
                     "checks report them.")
    return eg, bool(taken)


def energy_part(run: Run, choice: EnergySeriesChoice, fp: AuditFrames | None, *, n_dof: int | None,
                kT_K: float | None, notes: list[str]) -> EnergyAudit | None:
    """Events, drift and fluctuation ratio of the judged series (None when there is none)."""
    conserved, scan = choice.conserved, choice.scan
    if conserved is None:
        return None
    t, e = conserved.time_ps, conserved.values_kJ_per_mol
    events = find_energy_events(t, e, jump_robust_sigma=THRESHOLDS["energy.jumps"].caution, scan=scan)
    kin = conserved.kinetic_kJ_per_mol
    ksrc: str | None = None if kin is None else f"file column '{conserved.kinetic_column}'"
    drift = fl = None
    tg, eg, kg = t, e, kin
    if scan is None:  # a non-finite value somewhere: mask it out (with a scan, every row is finite)
        good = np.isfinite(e) & np.isfinite(t)
        if kin is not None:
            good &= np.isfinite(kin)
        if not good.all():
            tg, eg, kg = t[good], e[good], None if kin is None else kin[good]
    scan_e = scan
    start = _start_step(t, tg, events, notes)
    if start is not None:
        tg, eg, kg = tg[1:], eg[1:], None if kg is None else kg[1:]
        scan_e = None
    n_good = int(eg.size)
    if choice.table is not None and choice.table.joins and n_good >= 3:
        eg, changed = _without_join_steps(tg, eg, choice.table, notes)
        scan_e = None if changed else scan_e
    if n_good >= 3:
        drift = en.drift_fit(tg, eg, n_atoms=run.n_atoms or None, n_dof=n_dof or None, temperature_K=kT_K,
                             scan=scan_e)
        kin_used = kg
        if kin_used is None and fp is not None:
            fi, ti = align_by_time(fp.time_ps, tg)
            if fi.size == n_good:
                kin_used = fp.kinetic_kJ_per_mol[fi[np.argsort(ti)]]
                ksrc = "velocities (frames matched to energy rows by time)"
        kcol = (en.SERIES_PREFIX + conserved.kinetic_column
                if kin_used is kg and kg is not None and conserved.kinetic_column is not None
                and scan_e is not None else None)
        fl = en.energy_fluctuations(tg, eg, kin_used, scan=scan_e, kinetic_column=kcol)
    return EnergyAudit(series_label=conserved.label, series_columns=conserved.columns,
                       expected_conserved=conserved.expected_conserved, reason=conserved.reason,
                       kinetic_source=ksrc, drift=drift, fluctuations=fl, events=events,
                       sampling=choice.sampling, time_ps=t, values_kJ_per_mol=e, fits_from_ps=start,
                       engine_drift=tuple(run.metadata.extra.get("engine_drift") or ()),
                       drift_tolerance=run.metadata.extra.get("drift_tolerance"))


def _start_step(t: np.ndarray, tg: np.ndarray, events: EventsResult, notes: list[str]) -> float | None:
    """The time the drift and fluctuation fits begin at when the very first step of the series is a jump
    (None when it is not): that row is left out of both fits and the jumps check reports the step.

    A run continued from a structure file of lower precision (a .gro start, GROMACS ``continuation = yes``)
    or from a state its first step changes (constraints applied, a changed setting) writes that first
    energy before the change; GROMACS's own first-to-last drift line takes it in whole (on its rigid SPC/E
    v-rescale run in tests/data/engines the first step, -14.7 kJ/mol, is nearly all of the -14.8 kJ/mol its
    drift line spans over 4 ps).
    """
    if tg.size < 4 or t.size < 2 or tg[0] != t[0] or tg[1] != t[1]:
        return None
    first = [ev for ev in events.events if ev.kind == "jump" and ev.index == 1]
    if not first:
        return None
    ev = first[0]
    notes.append(f"The first energy row (t = {float(t[0]):.6g} ps) is left out of the drift and fluctuation fits: "
                 f"the {ev.description} is a jump, as when a run starts from a structure "
                 "before its first constraint step (continued from a .gro or .pdb) or with a changed setting; "
                 "the jumps check reports it.")
    return float(t[1])


def _robust_steps(ea: EnergyAudit | None) -> tuple[np.ndarray | None, np.ndarray | None, float, float]:
    """(time, energy, median step, robust spread of the steps) of the judged series, NaN when too short."""
    if ea is None:
        return None, None, math.nan, math.nan
    t = np.asarray(ea.time_ps, dtype=np.float64)
    e = np.asarray(ea.values_kJ_per_mol, dtype=np.float64)
    d = np.diff(e[np.isfinite(e)])
    if d.size < 5:
        return t, e, math.nan, math.nan
    med = float(np.median(d))
    return t, e, med, 1.4826 * float(np.median(np.abs(d - med)))


def restarts_verdict(joins: Sequence[Any], frame_joins: Sequence[Any], ea: EnergyAudit | None,
                     part_overlaps: Sequence[str] = ()) -> Verdict:
    """Restarts glued into the files: where, what was dropped, and the energy step across each join."""
    parts: list[str] = []
    steps: list[dict[str, Any]] = []
    t, e, med, s_rob = _robust_steps(ea)
    for j in joins:
        text = (f"energy table, t = {j.time_ps:.6g} ps: time went back from {j.back_from_ps:.6g} ps "
                f"({j.n_dropped} earlier row(s) dropped; {j.where})")
        step = None
        if t is not None and e is not None and t.size > 1:
            i = int(np.searchsorted(t, j.time_ps - 1e-9 * max(1.0, abs(j.time_ps))))
            if 0 < i < t.size and np.isfinite(e[i]) and np.isfinite(e[i - 1]):
                step = float(e[i] - e[i - 1])
                text += f"; energy step across the join {step:+.4g} kJ/mol"
                if s_rob > 0:
                    text += f" ({abs(step - med) / s_rob:.1f} robust sigma of the frame-to-frame steps)"
        steps.append({"time_ps": j.time_ps, "back_from_ps": j.back_from_ps, "n_dropped": j.n_dropped,
                      "energy_step_kJ_per_mol": step, "where": j.where})
        parts.append(text)
    for j in frame_joins:
        parts.append(f"trajectory, t = {j.time_ps:.6g} ps: time went back from {j.back_from_ps:.6g} ps "
                     f"({j.n_dropped} earlier frame(s) dropped; {j.where})")
        steps.append({"time_ps": j.time_ps, "back_from_ps": j.back_from_ps, "n_dropped": j.n_dropped,
                      "energy_step_kJ_per_mol": None, "where": j.where, "trajectory": True})
    for text in part_overlaps:
        parts.append(f"trajectory parts: {text}")
        steps.append({"where": text, "trajectory": True, "energy_step_kJ_per_mol": None})
    n = len(joins) + len(frame_joins) + len(part_overlaps)
    return judge("time.restarts", float(n), title="Restarts in the run", unit="joins",
                 message=f"{n} restart(s) in the run; the later segment is kept and every check runs on it: "
                         + "; ".join(parts[:8]) + (f"; ... {len(parts) - 8} more" if len(parts) > 8 else "")
                         + f" ({source_of('time.restarts')})",
                 advice=advice_of("time.restarts"), details={"joins": steps})
