"""What the audit returns: the measured numbers with units, the verdicts, and a plain summary for JSON.

:class:`AuditResult` holds an :class:`EnergyAudit` (conservation), a :class:`TemperatureAudit` (kinetic
temperature, degrees of freedom, equipartition, canonical checks) and a :class:`TimestepAudit` (fastest
motion against the step), each None when the run holds nothing to measure it from; :func:`audit_summary`
turns it into plain data (no per-frame arrays).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phasewake.core.analyses import energy as en
from phasewake.core.analyses import temperature as tm
from phasewake.core.analyses import timestep as ts
from phasewake.core.analyses.energy_events import EventsResult
from phasewake.core.analyses.molecule_motion import TranslationSplit
from phasewake.core.analyses.result import ResultMixin
from phasewake.core.analyses.verdicts import HEURISTIC_NOTE, Level, Verdict, worst


@dataclass(frozen=True)
class EnergyAudit:
    series_label: str
    series_columns: tuple[str, ...]
    expected_conserved: bool
    reason: str
    kinetic_source: str | None
    drift: en.DriftResult | None
    fluctuations: en.FluctuationResult | None
    events: EventsResult
    sampling: tuple[en.SeriesSampling, ...]
    time_ps: np.ndarray  # shape (n_rows,), for figures
    values_kJ_per_mol: np.ndarray  # shape (n_rows,)
    fits_from_ps: float | None = None  # the drift and fluctuation fits begin here (a start-up step left out)
    engine_drift: tuple[dict[str, Any], ...] = ()  # the engine's own drift lines (kJ/mol/ps per atom)
    drift_tolerance: dict[str, Any] | None = None  # the engine's target for its drift (kJ/mol/ps per atom)


@dataclass(frozen=True)
class TemperatureAudit:
    n_atoms: int
    n_dof: int
    n_constraints: int
    constraints_source: str
    n_com_removed: int
    com_source: str
    kinetic_source: str  # which kinetic energy the temperature comes from, in words
    mean_K: float
    std_K: float
    error_K: float  # standard error of the mean, g-corrected
    statistical_inefficiency: float
    mean_from_velocities_K: float | None
    mean_from_file_kinetic_K: float | None
    file_temperature_mean_K: float | None
    file_mismatch_relative: float | None  # (T_here - T_file) / T_file over common rows
    implied_file_dof: float | None  # N_dof the file's temperature corresponds to
    velocities_estimated: bool
    constraint_inference: tm.ConstraintInference | None
    groups: tuple[tm.GroupTemperature, ...]
    kinetic_distribution: tm.DistributionCheck | None
    maxwell: tuple[tm.DistributionCheck, ...]
    canonical_note: str
    time_ps: np.ndarray  # shape (n,), for figures
    temperature_K: np.ndarray  # shape (n,)
    split: dict[str, Any] | None = None  # hottest against coldest group (tm.largest_split)
    groups_left_out: tuple[str, ...] = ()  # per-atom groups not judged (they cut through rigid molecules)
    assumption: dict[str, Any] | None = None  # the other plausible constraint count and its temperature
    half_step: str = ""  # how half-step velocities were handled, in words ("" when they are not)
    translation: TranslationSplit | None = None  # molecules' translation against rotation and internal motion
    n_virtual_sites: int = 0  # massless particles: no degrees of freedom

    @property
    def atoms_words(self) -> str:
        """'3 x N' of the degrees of freedom, saying the virtual sites left out when there are any."""
        n = self.n_atoms - self.n_virtual_sites
        return f"3 x {n}" + (f" ({self.n_virtual_sites} massless virtual sites have none)" if self.n_virtual_sites
                             else "")


@dataclass(frozen=True)
class TimestepAudit:
    fastest: ts.FastestMotion | None
    check: ts.TimestepCheck | None
    note: str
    frequency_per_ps: np.ndarray  # spectrum for figures; empty when not computed
    power: np.ndarray
    fastest_group: str = "all atoms"  # the atom group whose spectrum holds the fastest motion
    group_wavenumbers_per_cm: dict[str, float] = field(default_factory=dict)  # fastest motion per group
    expected: tuple[ts.ExpectedMotion, ...] = ()  # fast motions the topology and masses imply (timestep.py)
    frame_spacing_ps: float | None = None
    timestep_source: str = ""


@dataclass(frozen=True)
class AuditResult(ResultMixin):
    """Everything the audit measured, with units, plus the verdicts and the settings used."""

    run_name: str
    paths: tuple[str, ...]
    ensemble: str
    thermostatted: bool
    energy: EnergyAudit | None
    temperature: TemperatureAudit | None
    timestep: TimestepAudit | None
    scaling: ts.ScalingResult | None
    compared: AuditResult | None
    verdicts: tuple[Verdict, ...]
    notes: tuple[str, ...]
    heuristic_note: str = HEURISTIC_NOTE
    settings: dict[str, Any] = field(default_factory=dict)
    ensemble_source: str = ""  # where the ensemble came from, in words (files, stated, inferred + evidence)
    ensemble_origin: str = ""  # "files", "stated", "inferred" or "unknown"
    target_temperature_K: float | None = None  # the thermostat's target (stated, else the files'); None in NVE

    @property
    def level(self) -> Level:
        """Worst verdict level: ok, caution or problem."""
        lv = worst([v.level for v in self.verdicts])
        return "ok" if lv == "info" else lv

    @property
    def checked(self) -> bool:
        """True when at least one check judged the run (ok, caution or problem); False when every check
        said 'not checked' or only informs."""
        return any(v.level in ("ok", "caution", "problem") for v in self.verdicts)

    @property
    def overall(self) -> str:
        """The overall verdict in words: ok, caution, problem, or 'not checked' when nothing was."""
        if not self.checked:
            return "not checked"
        return self.level


# ---------------------------------------------------------------------------------------------------
# Plain summary (JSON, reports): every number with its unit, no per-frame arrays
# ---------------------------------------------------------------------------------------------------

_ARRAY_FIELDS = {"time_ps", "values_kJ_per_mol", "temperature_K", "frequency_per_ps", "power", "rigid_pairs",
                 "constraint_weights"}


def _plain(obj: Any) -> Any:
    from dataclasses import fields, is_dataclass

    if is_dataclass(obj) and not isinstance(obj, type):
        out: dict[str, Any] = {}
        for f in fields(obj):
            if f.name in _ARRAY_FIELDS:
                continue
            out[f.name] = _plain(getattr(obj, f.name))
        return out
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def audit_summary(result: AuditResult) -> dict[str, Any]:
    """The audit as plain data for JSON: every number (units in the field names or a ``unit`` field),
    the verdicts with thresholds and sources, notes and the heuristics note. Per-frame series are left
    out (they are in the result object for figures)."""
    d = _plain(result)
    d["level"] = result.level
    d["checked"] = result.checked
    d["overall"] = result.overall
    if result.compared is not None and isinstance(d.get("compared"), dict):
        d["compared"]["level"] = result.compared.level
    d["units"] = {"time": "ps", "energy": "kJ/mol", "temperature": "K", "frequency": "1/ps",
                  "wavenumber": "cm^-1", "drift": "kJ/mol/ns (kT/DOF/ns where named)"}
    return d  # type: ignore[no-any-return]
