"""The energy audit of one run: energy conservation, kinetic temperature, equipartition, time step.

:func:`audit_run` is a progress generator (yields :class:`~phasewake.core.progress.Progress`, returns an
:class:`AuditResult`); it streams once over the run's frame chunks for everything per-atom (kinetic
energy per frame and per group, centre-of-mass motion, rigid-pair distances for constraint inference,
the velocity spectrum, speed samples) and works on the energy table for the rest.

The frame pass is a chunk reduction, :class:`AuditFramesConsumer` (``prepare`` / ``update`` /
``finish``, the protocol of :mod:`phasewake.core.model.framepass`): ``audit_run`` drives it through
``onepass.run_pass``, and a shared one-pass request can feed it next to other consumers and hand its
:class:`AuditFrames` to ``audit_run(run, frames=...)``, which then reads no frames. The energy table is
summed in one blocked pass (:func:`phasewake.core.analyses.energy.scan_energy_table`) that feeds the events,
the drift, the fluctuations and the sampling of every series.

Every verdict names what was measured, the threshold and its source, and advice. These diagnostics are
heuristics (:data:`phasewake.core.analyses.verdicts.HEURISTIC_NOTE`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, fields, replace
from typing import Any, ClassVar

import numpy as np

from phasewake.core.analyses import energy as en
from phasewake.core.analyses import temperature as tm
from phasewake.core.analyses import timestep as ts
from phasewake.core.analyses.correlation import one_blas_thread
from phasewake.core.analyses.request import AnalysisRequest
from phasewake.core.analyses.verdicts import (
    EXPLANATIONS,
    HEURISTIC_NOTE,
    THRESHOLDS,
    Explanation,
    Level,
    Verdict,
    judge,
    register,
    worst,
)
from phasewake.core.errors import AnalysisError, MissingDataError
from phasewake.core.model.run import DEFAULT_CHUNK_FRAMES, EnergyTable, FrameChunk, Run
from phasewake.core.progress import Progress, Work
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

THERMOSTATTED_ENSEMBLES = ("NVT", "NPT", "NPH_THERMOSTAT", "MUVT", "NST")


@dataclass(frozen=True)
class EnergyAudit:
    series_label: str
    series_columns: tuple[str, ...]
    expected_conserved: bool
    reason: str
    kinetic_source: str | None
    drift: en.DriftResult | None
    fluctuations: en.FluctuationResult | None
    events: en.EventsResult
    sampling: tuple[en.SeriesSampling, ...]
    time_ps: np.ndarray  # shape (n_rows,), for figures
    values_kJ_per_mol: np.ndarray  # shape (n_rows,)


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
class AuditResult:
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


def _skipped(kind: str, title: str, reason: str) -> Verdict:
    return Verdict(kind=kind, level="info", title=title, measured=None, unit="",
                   message=f"not checked: {reason}", advice="", threshold=THRESHOLDS.get(kind))


def _advice(kind: str) -> str:
    return EXPLANATIONS[kind].advice if kind in EXPLANATIONS else ""


def _src(kind: str) -> str:
    return THRESHOLDS[kind].source


@dataclass(frozen=True)
class EnsembleDecision:
    """Which ensemble the audit judges the run in, and where that came from."""

    label: str  # "NVE", "NVT", "NPT", "thermostatted", "unknown"
    thermostatted: bool
    origin: str  # "files", "stated", "inferred", "unknown"
    source: str  # in words: "md.mdp", "you (--ensemble)", "inferred: sigma_E/sigma_K = 1.02, ..."
    evidence: dict[str, Any] = field(default_factory=dict)

    def words(self) -> str:
        return f"{self.label} ({self.source})"


_USER = ("user",)


def _is_user(src: str | None) -> bool:
    return (src or "").strip().lower().startswith(_USER)


def _thermostat_evidence_from_table(table: EnergyTable | None) -> tuple[bool | None, str, dict[str, Any]]:
    """(thermostatted?, evidence in words, numbers) from the energy table alone; None when it cannot say.

    A bath-heat series, or a conserved quantity that differs from the total energy, means a thermostat.
    Otherwise, with steps of E and a line removed from E and K: sigma_E/sigma_K at or above the
    ``ensemble`` caution threshold with corr(K, U) above the ``ensemble.ku_correlation`` caution threshold
    (K and U not traded one for one) and no growing energy noise is the signature of a thermostat;
    sigma_E/sigma_K below the ``ensemble`` problem threshold or corr(K, U) below its problem threshold
    (U takes what K gives) is the signature of NVE.
    """
    if table is None or len(table) < 3:
        return None, "", {}

    def vals(role: str) -> np.ndarray | None:
        ser = table.by_role(role)
        if ser is None or ser.unit.replace(" ", "") not in ("kJ/mol", "kJmol-1", "kJ/mole"):
            return None
        return np.asarray(ser.values, dtype=np.float64)

    heat, con, tot = vals("bath_heat"), vals("conserved"), vals("total")
    pot, kin = vals("potential"), vals("kinetic")
    if tot is None and pot is not None and kin is not None:
        tot = pot + kin
    if heat is not None and np.any(np.isfinite(heat)) and float(np.nanmax(np.abs(heat))) > 0:
        return True, "a bath-heat series is present (energy exchanged with a thermostat)", {}
    if con is not None and tot is not None:
        d = con - tot
        ok = np.isfinite(d)
        scale = float(np.nanmax(np.abs(tot[ok]))) if ok.any() else 0.0
        if ok.sum() >= 3 and float(np.ptp(d[ok])) > 1e-6 * scale + 1e-3:
            return True, ("a conserved quantity differing from the total energy is present (a thermostat's "
                          "energy is in it)"), {"conserved_minus_total_range_kJ_per_mol": float(np.ptp(d[ok]))}
    if tot is None or kin is None:
        return None, "", {}
    t = np.asarray(table.time_ps, dtype=np.float64)
    ok = np.isfinite(tot) & np.isfinite(kin) & np.isfinite(t)
    if ok.sum() < 20:
        return None, "", {}
    stride = max(1, int(ok.size) // (1 << 18))  # the signatures need no more than ~260,000 rows
    tt, ee, kk = t[ok][::stride], tot[ok][::stride].copy(), kin[ok][::stride]
    # steps of E (restarts glued in, changed settings) would pass for fluctuations: take them out
    d = np.diff(ee)
    med = float(np.median(d))
    s_rob = 1.4826 * float(np.median(np.abs(d - med)))
    if s_rob > 0:
        steps = np.where(np.abs(d - med) > THRESHOLDS["energy.jumps"].caution * s_rob, d - med, 0.0)
        ee = ee - np.r_[0.0, np.cumsum(steps)]
    x = tt - tt.mean()

    def detrended(y: np.ndarray) -> np.ndarray:
        return y - np.polyval(np.polyfit(x, y, 1), x)

    re_, rk = detrended(ee), detrended(kk)
    ru = re_ - rk  # U = E - K
    s_e, s_k = float(re_.std()), float(rk.std())
    if not s_k > 0:
        return None, "", {}
    ratio = s_e / s_k
    corr = float(np.corrcoef(rk, ru)[0, 1]) if float(ru.std()) > 0 else -1.0
    dd = np.diff(ee)
    tenth = dd.size // 10
    growth = (float(np.sqrt(np.mean((dd[-tenth:] - dd.mean()) ** 2))
                    / max(float(np.sqrt(np.mean((dd[:tenth] - dd.mean()) ** 2))), 1e-300)) if tenth >= 2 else 1.0)
    nums = {"sigma_E_over_sigma_K": ratio, "kinetic_potential_correlation": corr, "noise_growth": growth}
    thr, cthr = THRESHOLDS["ensemble"], THRESHOLDS["ensemble.ku_correlation"]
    words = f"sigma_E/sigma_K = {ratio:.3g}, corr(K, U) = {corr:+.2f}"
    if ratio >= thr.caution and corr > cthr.caution and growth < THRESHOLDS["energy.runaway"].caution:
        return True, (f"{words}: E fluctuates like K and K and U are not traded one for one, the signature of "
                      "a thermostat"), nums
    if ratio < thr.problem or corr < cthr.problem:
        return False, f"{words}: U takes what K gives and E hardly moves, the signature of an NVE run", nums
    return None, f"{words}: neither signature is clear", nums


def decide_ensemble(run: Run, *, temperature_K: float | None = None) -> EnsembleDecision:
    """The ensemble the audit judges ``run`` in: from the files, else stated, else inferred.

    Stated: ``--ensemble`` (metadata source "user") or a thermostat temperature you gave (``temperature_K``
    here, or metadata ``temperature_K`` from "user"), which implies a thermostatted run. Inferred: from
    the energy table (:func:`_thermostat_evidence_from_table`), with its evidence in ``source``.
    """
    md = run.metadata
    thermo = (md.thermostat or "").strip().lower()
    ens = (md.ensemble or "").strip().upper()
    src = md.sources

    def from_ens(origin: str, where: str) -> EnsembleDecision:
        return EnsembleDecision(ens, ens in THERMOSTATTED_ENSEMBLES, origin, where)

    if ens and _is_user(src.get("ensemble")):
        return from_ens("stated", "stated by you (--ensemble)")
    if thermo:
        where = src.get("thermostat") or "the files"
        origin = "stated" if _is_user(where) else "files"
        where = "stated by you" if origin == "stated" else f"from {where}"
        if thermo not in ("none", "no", "off"):
            return EnsembleDecision(ens or "thermostatted", True, origin, f"{where}: thermostat {md.thermostat}")
        return EnsembleDecision(ens or "NVE", ens in THERMOSTATTED_ENSEMBLES, origin, f"{where}: no thermostat")
    if ens:
        return from_ens("files", f"from {src.get('ensemble') or 'the files'}")
    if temperature_K is not None or (md.temperature_K is not None and _is_user(src.get("temperature_K"))):
        t_user = temperature_K if temperature_K is not None else md.temperature_K
        return EnsembleDecision("thermostatted", True, "stated",
                                f"implied by the thermostat temperature you gave ({t_user:g} K)")
    verdict, why, nums = _thermostat_evidence_from_table(run.energies)
    if verdict is True:
        return EnsembleDecision("thermostatted", True, "inferred", f"inferred: {why}", nums)
    if verdict is False:
        return EnsembleDecision("NVE", False, "inferred", f"inferred: {why}", nums)
    return EnsembleDecision("unknown", False, "unknown",
                            "not stated in the files" + (f" ({why})" if why else "")
                            + "; judged as NVE (state it with --ensemble)", nums)


def _is_thermostatted(run: Run, temperature_K: float | None = None) -> tuple[bool, str]:
    d = decide_ensemble(run, temperature_K=temperature_K)
    return d.thermostatted, d.label


def _other_constraints(masses_amu: np.ndarray) -> tuple[int, str] | None:
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


def _can_infer(run: Run) -> bool:
    """Constraints can be inferred from pair distances: a topology, frames, and positions precise enough
    (a frame source may say its positions are lossy, e.g. XTC's 0.001 nm)."""
    if run.topology is None or run.frames is None:
        return False
    return not any(bool(getattr(run.frames, a, False)) for a in ("positions_lossy", "lossy_positions"))


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
    if fp is not None and not _half_step(run)[0] and not (run.frames is not None and run.frames.velocities_estimated):
        fi, ti = _align(fp.time_ps, np.asarray(table.time_ps, dtype=np.float64))
        ok = np.isfinite(tv[ti]) & (tv[ti] > 0)
        if ok.sum() >= 1:
            dof = 2.0 * float(fp.kinetic_kJ_per_mol[fi][ok].mean()) / (KB_KJ_PER_MOL_K
                                                                      * float(tv[ti][ok].mean()))
            return int(round(dof)), (f"2 <K> / (k_B <T>) of the velocities and the file's temperature column "
                                     f"'{ft.name}'")
    return None, ""


_LEAPFROG_WORDS = ("leap", "leapfrog", "leap-frog")


def _half_step(run: Run) -> tuple[bool, str]:
    """Whether the stored velocities are half a step off the positions, and where that came from."""
    md = run.metadata
    if md.velocities_half_step is not None:
        return bool(md.velocities_half_step), md.sources.get("velocities_half_step", "the files")
    integ = (md.integrator or "").strip().lower()
    if any(w in integ for w in _LEAPFROG_WORDS) or integ == "md":
        return True, f"integrator {md.integrator} ({md.sources.get('integrator', 'the files')})"
    return False, ""


def _align(t_frames: np.ndarray, t_table: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Indices (frame_idx, table_idx) of rows present in both, matched by time."""
    if t_frames.size == 0 or t_table.size == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    spacing = np.median(np.diff(t_frames)) if t_frames.size > 1 else 1.0
    tol = 1e-6 * max(abs(float(spacing)), 1e-12) + 1e-9
    order = np.argsort(t_table, kind="stable")
    tt = t_table[order]
    pos = np.clip(np.searchsorted(tt, t_frames), 0, tt.size - 1)
    prev = np.clip(pos - 1, 0, tt.size - 1)
    best = np.where(np.abs(tt[prev] - t_frames) < np.abs(tt[pos] - t_frames), prev, pos)
    ok = np.abs(tt[best] - t_frames) <= tol
    return np.nonzero(ok)[0], order[best[ok]]


@dataclass(frozen=True)
class AuditFrames:
    """What the audit takes from the frames: the result of :class:`AuditFramesConsumer`.

    Per-frame arrays have shape (n,) (n frames of the pass); ``group_kinetic_kJ_per_mol`` (n, G) with
    columns in the order of ``group_names``. ``spectrum_frequency_per_ps`` / ``spectrum_power``: the
    mass-weighted velocity power spectrum of all atoms (Welch; None when not computed, see
    ``spectrum_note``), ``group_spectra`` the power per atom group at the same frequencies.
    ``speeds_nm_per_ps``: species -> (frames kept, atoms kept) speeds, every ``speed_frame_stride``-th
    frame (canonical runs only).
    """

    time_ps: np.ndarray
    kinetic_kJ_per_mol: np.ndarray
    com_kinetic_kJ_per_mol: np.ndarray | None  # None when not asked for (``want_com=False``)
    group_names: tuple[str, ...]
    group_kinetic_kJ_per_mol: np.ndarray
    inference: tm.ConstraintInference | None
    spectrum_frequency_per_ps: np.ndarray | None
    spectrum_power: np.ndarray | None
    group_spectra: dict[str, np.ndarray]
    spectrum_note: str
    speeds_nm_per_ps: dict[str, np.ndarray]
    speed_frame_stride: int
    settings: dict[str, Any] = field(default_factory=dict)


def _reads_velocities(run: Run) -> bool:
    """Whether the audit reads the run's velocities: it has them and every atom's mass is known."""
    m = run.masses_amu
    return bool(run.has_velocities and run.n_atoms and np.all(np.isfinite(m)) and np.all(m > 0))


def _needs_com(run: Run, thermostatted: bool) -> bool:
    """Whether the audit decides the removed centre-of-mass motion from the frames (see ``audit_run``)."""
    return thermostatted and run.metadata.com_motion_removed is None


def audit_groups(run: Run, *, n_constraints: int | None = None,
                 groups: Mapping[str, Sequence[int] | np.ndarray] | None = None) -> dict[str, np.ndarray]:
    """The equipartition groups the audit uses: residue names (and elements when nothing is constrained,
    by ``n_constraints`` or the metadata), plus the user's ``groups``."""
    declared = n_constraints if n_constraints is not None else run.metadata.n_constraints
    species = run.metadata.extra.get("species")
    base = tm.default_groups(run.topology, run.n_atoms, by_element=(declared is None or declared == 0),
                             masses_amu=run.masses_amu,
                             species=species if isinstance(species, list | tuple) else None)
    return {**base, **{k: np.asarray(v, dtype=np.int64) for k, v in (groups or {}).items()}}


class AuditFramesConsumer:
    """The audit's frame pass as a chunk reduction (``prepare`` / ``update`` / ``finish``).

    Kinetic energy per frame of all atoms and of every group, the centre-of-mass kinetic energy, the
    rigid-pair statistics for constraint inference (positions of the first 500 frames), the streaming
    velocity power spectrum (:class:`~phasewake.core.analyses.timestep.VelocitySpectrumAccumulator`) and speed
    samples for the Maxwell-Boltzmann test. It follows the ``ChunkConsumer`` protocol of
    :mod:`phasewake.core.model.framepass`, so one frame pass can feed the audit together with other analyses;
    :func:`audit_run` drives this same consumer through ``onepass.run_pass``.

    Parameters
    ----------
    run : Run
    groups : mapping name -> atom indices
        Equipartition groups (:func:`audit_groups` gives the audit's choice).
    infer : bool
        Collect rigid-pair distances (needs positions and a topology).
    want_speeds : bool
        Keep speed samples (the audit does for thermostatted runs).
    want_com : bool
        Sum the total momentum per frame for the centre-of-mass kinetic energy (the audit needs it only
        for thermostatted runs whose files do not say whether that motion was removed).
    segment_frames : int
        Frames per spectrum segment (at most half the frames of the pass).
    max_segments : int or None
        At most this many spectrum segments, from the start of the pass.

    Per chunk the work goes in sub-blocks of 8 frames, which stay in cache while they are squared,
    multiplied with the kinetic-energy weights (one float32 product for all atoms and every group:
    relative error ~1e-6), summed into the total momentum (when ``want_com``) and gathered for the
    spectrum: one memory pass over the chunk instead of four.
    """

    atoms: np.ndarray | None = None
    needs_velocities = True
    SUB_FRAMES = 8  # frames per sub-block (8 x 3 n_atoms float32: ~2 MB for 20,000 atoms)

    def __init__(self, run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray], infer: bool,
                 want_speeds: bool, want_com: bool = True, segment_frames: int = 256,
                 max_segments: int | None = 64) -> None:
        if run.frames is None or not run.frames.has_velocities:
            raise MissingDataError("the run holds no velocities (and none can be estimated)",
                                   path=run.paths[0] if run.paths else None)
        self.run = run
        self.groups = {k: np.asarray(v, dtype=np.int64) for k, v in groups.items()}
        self.want_speeds = bool(want_speeds)
        self.want_com = bool(want_com)
        self.segment_frames = int(segment_frames)
        self.max_segments = max_segments
        self.rigid: tm.RigidPairAccumulator | None = None
        if infer and run.topology is not None:
            pairs = tm.candidate_pairs(run.topology)
            if pairs.size:
                self.rigid = tm.RigidPairAccumulator(pairs, run.n_atoms)
        # positions only for the constraint inference: velocity-only reads are half the I/O
        self.needs_positions = self.rigid is not None
        m = np.asarray(run.masses_amu, dtype=np.float64)
        self._m32 = m.astype(np.float32)
        self._m_total = float(m.sum())
        names = list(self.groups)
        w = np.zeros((run.n_atoms, 1 + len(names)))
        w[:, 0] = 0.5 * m
        for j, nm in enumerate(names):
            w[self.groups[nm], 1 + j] = 0.5 * m[self.groups[nm]]
        self._w3 = np.repeat(w, 3, axis=0).astype(np.float32)  # (3 n_atoms, 1 + G): W3[3i + c, j] = m_i / 2
        self._range = (0, 0, DEFAULT_CHUNK_FRAMES)
        self._pos = 0

    @classmethod
    def for_run(cls, run: Run, *, n_constraints: int | None = None,
                groups: Mapping[str, Sequence[int] | np.ndarray] | None = None, segment_frames: int = 256,
                max_spectrum_segments: int | None = 64, temperature_K: float | None = None) -> AuditFramesConsumer:
        """The consumer with the choices :func:`audit_run` makes for the same arguments."""
        thermostatted, _ = _is_thermostatted(run, temperature_K)
        return cls(run, groups=audit_groups(run, n_constraints=n_constraints, groups=groups),
                   infer=_can_infer(run), want_speeds=thermostatted,
                   want_com=_needs_com(run, thermostatted),
                   segment_frames=segment_frames, max_segments=max_spectrum_segments)

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        if columns is not None:
            raise AnalysisError("the audit needs every atom's velocity")
        run = self.run
        n = int(stop - start)
        self._range = (int(start), int(stop), int(chunk_frames))
        self._pos = 0
        g = len(self.groups)
        self._kin = np.empty(n)
        self._com = np.empty(n)
        self._gk = np.empty((n, g))
        self._times = np.empty(n)
        self.spectrum_note = ""
        self.spec: ts.VelocitySpectrumAccumulator | None = None
        self.spec_names: list[str] = []
        t = np.asarray(run.time_ps)[start:stop]
        if n >= 32 and t.size == n:
            dt = np.diff(t)
            h = float(np.median(dt))
            if h > 0 and np.allclose(dt, h, rtol=1e-3, atol=1e-9):
                seg = int(min(self.segment_frames, n // 2))
                labels, self.spec_names = ts.spectrum_groups(run.topology, run.masses_amu)
                self.spec = ts.VelocitySpectrumAccumulator(run.masses_amu, h, segment_frames=seg,
                                                           labels=labels if len(self.spec_names) > 1 else None,
                                                           max_segments=self.max_segments)
            else:
                self.spectrum_note = "frame spacing is not uniform: no velocity spectrum"
        else:
            self.spectrum_note = f"too few frames for a velocity spectrum ({n} < 32)"
        species = tm.species_of(run.topology, run.masses_amu) if self.want_speeds else {}
        self.stride = max(1, n // 200)
        self.speed_atoms = {sp: idx[: max(1, 100_000 // max(1, n // self.stride))][:2000]
                            for sp, idx in species.items()}
        self.speed_store: dict[str, list[np.ndarray]] = {sp: [] for sp in species}
        n_atoms = run.n_atoms
        self._sq = np.empty((self.SUB_FRAMES, 3 * n_atoms), np.float32)  # reused (fresh pages are slow)
        self._sel = (np.empty((chunk_frames, self.spec.atoms.size, 3), np.float32)
                     if self.spec is not None and self.spec.atoms is not None else None)

    def update(self, chunk: FrameChunk) -> None:
        v = chunk.velocities_nm_per_ps
        if v is None:
            raise MissingDataError("velocities are missing in a chunk of frames",
                                   path=self.run.paths[0] if self.run.paths else None)
        with one_blas_thread():
            self._update(chunk, np.ascontiguousarray(v, dtype=np.float32))

    def _update(self, chunk: FrameChunk, v: np.ndarray) -> None:
        k = v.shape[0]
        pos = self._pos
        n_atoms = v.shape[1]
        vf = v.reshape(k, 3 * n_atoms)
        both = np.empty((k, self._w3.shape[1]), np.float32)
        p = np.empty((k, 3), np.float32)
        spec = self.spec if self.spec is not None and not self.spec.full else None
        idx = None if spec is None else spec.atoms
        sel = self._sel
        if sel is not None and sel.shape[0] < k:
            sel = self._sel = np.empty((k,) + sel.shape[1:], np.float32)
        fb = self.SUB_FRAMES
        for f0 in range(0, k, fb):
            f1 = min(k, f0 + fb)
            vb = vf[f0:f1]
            sq = np.multiply(vb, vb, out=self._sq[: f1 - f0])  # squared components, in cache
            np.matmul(sq, self._w3, out=both[f0:f1])  # kinetic energy of all atoms, then of every group
            if self.want_com:
                p[f0:f1] = np.matmul(self._m32, v[f0:f1])  # total momentum
            if spec is not None and sel is not None and idx is not None:
                np.take(v[f0:f1], idx, axis=1, out=sel[f0:f1])
        self._kin[pos:pos + k] = both[:, 0]
        if self.want_com:
            p64 = p.astype(np.float64)
            self._com[pos:pos + k] = np.einsum("fi,fi->f", p64, p64) / (2.0 * self._m_total)
        if self.groups:
            self._gk[pos:pos + k] = both[:, 1:]
        self._times[pos:pos + k] = chunk.time_ps
        if self.rigid is not None and not self.rigid.full:
            self.rigid.update(chunk.positions_nm, chunk.box_nm)
        if spec is not None:
            spec.update_selected(v if idx is None or sel is None else sel[:k])
        if self.speed_atoms:
            keep = np.nonzero(np.arange(pos, pos + k) % self.stride == 0)[0]
            if keep.size:
                vk = v[keep]
                sp_all = np.sqrt((vk * vk).sum(axis=2))
                for sp, ia in self.speed_atoms.items():
                    self.speed_store[sp].append(sp_all[:, ia])
        self._pos = pos + k

    def finish(self) -> AuditFrames:
        pos = self._pos
        freq = power = None
        group_spectra: dict[str, np.ndarray] = {}
        note = self.spectrum_note
        if self.spec is not None:
            if self.spec.n_segments:
                freq, power = self.spec.finish()
                if self.spec.labels is not None:
                    group_spectra = dict(zip(self.spec_names, self.spec.finish_groups(), strict=True))
            else:
                note = "too few frames for one spectrum segment"
        start, stop, chunk = self._range
        return AuditFrames(
            time_ps=self._times[:pos], kinetic_kJ_per_mol=self._kin[:pos],
            com_kinetic_kJ_per_mol=self._com[:pos] if self.want_com else None,
            group_names=tuple(self.groups), group_kinetic_kJ_per_mol=self._gk[:pos],
            inference=None if self.rigid is None else self.rigid.finish(),
            spectrum_frequency_per_ps=freq, spectrum_power=power, group_spectra=group_spectra, spectrum_note=note,
            speeds_nm_per_ps={sp: (np.concatenate(v_) if v_ else np.zeros((0, 0), np.float32))
                              for sp, v_ in self.speed_store.items()},
            speed_frame_stride=self.stride,
            settings={"groups": {k: int(v.size) for k, v in self.groups.items()},
                      "infer": self.rigid is not None, "want_speeds": self.want_speeds, "want_com": self.want_com,
                      "segment_frames": self.segment_frames, "max_segments": self.max_segments,
                      "start": start, "stop": stop, "chunk_frames": chunk},
        )


def _frame_pass(run: Run, consumer: AuditFramesConsumer, *, chunk_frames: int, done0: float,
                total: float) -> Work[AuditFrames]:
    """Drive the consumer through the one-pass engine (``onepass.run_pass``), progress on the audit's scale."""
    from phasewake.core.model.framepass import run_pass

    work = run_pass(run, {"audit": consumer}, chunk_frames=chunk_frames)
    try:
        while True:
            p = next(work)
            yield Progress(min(done0 + p.done, total), total, "velocities")
    except StopIteration as stop:
        return stop.value["audit"]  # type: ignore[no-any-return]


def _infer_only(run: Run, *, chunk_frames: int) -> tm.ConstraintInference | None:
    if run.topology is None or run.frames is None:
        return None
    pairs = tm.candidate_pairs(run.topology)
    if not pairs.size:
        return None
    acc = tm.RigidPairAccumulator(pairs, run.n_atoms)
    chunks = run.frames.iter_chunks(chunk_frames=chunk_frames, stop=acc.max_frames, velocities=False)
    try:
        for chunk in chunks:
            acc.update(chunk.positions_nm, chunk.box_nm)
            if acc.full:
                break
    finally:
        close = getattr(chunks, "close", None)
        if close is not None:
            close()  # a reader generator left suspended would hold its file open
    return acc.finish()


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
    chunk_frames: int = DEFAULT_CHUNK_FRAMES,
    segment_frames: int = 256,
    max_spectrum_segments: int | None = 64,
    frames: AuditFrames | None = None,
) -> Work[AuditResult]:
    """Audit one run (and optionally compare its energy fluctuation with a run at another time step).

    Parameters
    ----------
    run : Run
    n_constraints : int, optional
        Number of holonomic constraints (overrides metadata and inference).
    timestep_ps : float, optional
        Integration time step in ps (overrides metadata).
    temperature_K : float, optional
        Target temperature (overrides metadata); used for kT and the canonical checks.
    groups : mapping name -> atom indices, optional
        User groups for equipartition (added to the residue-name groups).
    require_temperature : bool
        Raise :class:`MissingDataError` when there are no velocities (instead of skipping).
    compare : Run, optional
        A run of the same system at another time step: the dt^2 scaling check.
    compare_timestep_ps : float, optional
        Time step of the comparison run (overrides its metadata).
    chunk_frames, segment_frames : int
        Frames per chunk read, and per velocity-spectrum segment.
    max_spectrum_segments : int or None
        At most this many spectrum segments (from the start of the run) are averaged: enough for a
        stable peak, and it bounds the FFT work on long runs. None: all.
    frames : AuditFrames, optional
        The frame results of an :class:`AuditFramesConsumer` fed by a shared one-pass request
        (``AuditFramesConsumer.for_run(run, n_constraints=, groups=, segment_frames=,
        max_spectrum_segments=)`` with the same arguments, over all frames): then no frame is read here.

    Yields
    ------
    Progress

    Returns
    -------
    AuditResult
    """
    settings = {"n_constraints": n_constraints, "timestep_ps": timestep_ps, "temperature_K": temperature_K,
                "groups": {k: list(map(int, v)) for k, v in (groups or {}).items()},
                "require_temperature": require_temperature, "chunk_frames": chunk_frames,
                "segment_frames": segment_frames, "max_spectrum_segments": max_spectrum_segments, "compare": None if compare is None else compare.name}
    path0 = run.paths[0] if run.paths else None
    md = run.metadata
    decision = decide_ensemble(run, temperature_K=temperature_K)
    thermostatted, ensemble = decision.thermostatted, decision.label
    verdicts: list[Verdict] = []
    table: EnergyTable | None = run.energies if run.energies is not None and len(run.energies) else None
    has_vel = _reads_velocities(run)
    notes: list[str] = []
    if run.has_velocities and not has_vel:
        notes.append("Atom masses are unknown: nothing per atom (temperature from velocities, spectrum) was computed.")
    if table is None and not has_vel:
        notes.append("Nothing to audit: the run has neither an energy table nor velocities.")
    if require_temperature and not has_vel and (table is None or table.by_role("kinetic") is None):
        raise MissingDataError("velocities are missing (and no kinetic energy in the energy table): the kinetic "
                               "temperature needs them", path=path0)
    notes.extend(f"Reader: {w}" for w in run.warnings)
    frames_total = float(run.frames.n_frames if (has_vel and run.frames is not None) else 0)
    cmp_total = float(compare.frames.n_frames if compare is not None and compare.has_velocities
                      and compare.frames is not None else 0)
    total = max(frames_total + cmp_total, 1.0)
    yield Progress(0, total, "energies")

    # ---- energy table: which series -------------------------------------------------------------
    conserved: en.ConservedSeries | None = None
    scan: en.TableScan | None = None  # one blocked pass over the table's columns, when all are finite
    sampling: tuple[en.SeriesSampling, ...] = ()
    energy_reason = "the run has no energy table"
    if table is not None:
        try:
            conserved = en.select_conserved(table, thermostatted=thermostatted)
        except MissingDataError as exc:
            energy_reason = "needs " + exc.problem.partition("need ")[2] if "need " in exc.problem else exc.problem
    if table is not None and conserved is not None:
        scan = en.scan_energy_table(conserved.time_ps, conserved.values_kJ_per_mol, table)
        sampling = en.series_sampling(table, scan=scan)
        if not scan.finite:
            scan = None
    elif table is not None:
        sampling = en.series_sampling(table)

    def table_stats(name: str) -> tuple[float, float, float] | None:
        """Mean, population std and g of a table series from the scan (None: take the masked route)."""
        key = en._SERIES + name
        if scan is None or key not in scan.names:
            return None
        g = next((x.statistical_inefficiency for x in sampling if x.name == name), None)
        if g is None:
            return None
        return float(scan.mean[scan.index(key)]), scan.std(key), g

    # ---- constraints and centre of mass ---------------------------------------------------------
    infer = _can_infer(run)
    if run.topology is not None and run.frames is not None and not infer:
        notes.append("The positions are stored with too little precision to tell rigid bonds from flexible "
                     "ones (a lossy format): constraints are not inferred from them.")
    fp: AuditFrames | None = None
    inference: tm.ConstraintInference | None = None
    if has_vel:
        # groups are fixed before the pass; element groups only when nothing is constrained
        all_groups = audit_groups(run, n_constraints=n_constraints, groups=groups)
        if frames is not None:
            if frames.group_names != tuple(all_groups) or frames.kinetic_kJ_per_mol.size != run.n_frames:
                raise AnalysisError("the frame results given to the audit were made for other groups or "
                                    "another frame range", path=path0)
            if frames.com_kinetic_kJ_per_mol is None and _needs_com(run, thermostatted):
                raise AnalysisError("the frame results given to the audit lack the centre-of-mass kinetic "
                                    "energy it needs (make them with AuditFramesConsumer.for_run)", path=path0)
            fp = frames
        else:
            consumer = AuditFramesConsumer(run, groups=all_groups, infer=infer, want_speeds=thermostatted,
                                           want_com=_needs_com(run, thermostatted),
                                           segment_frames=segment_frames, max_segments=max_spectrum_segments)
            fp = yield from _frame_pass(run, consumer, chunk_frames=chunk_frames, done0=0.0, total=total)
        inference = fp.inference
    elif infer:
        inference = _infer_only(run, chunk_frames=chunk_frames)
        all_groups = {}
    else:
        all_groups = {}

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
    con_assumed = n_constraints is None and md.n_constraints is None and inference is None
    if inference is not None and n_con != inference.n_constraints and n_constraints is None:
        notes.append(f"{con_src} gives {n_con} constraints; the pair distances suggest {inference.n_constraints}.")

    if md.com_motion_removed is not None:
        n_com = 3 if md.com_motion_removed else 0
        com_src = "metadata"
    elif not thermostatted:
        n_com, com_src = 3, "NVE: total momentum is conserved"
    elif (fp is not None and fp.kinetic_kJ_per_mol.size and fp.com_kinetic_kJ_per_mol is not None
          and float(np.mean(fp.com_kinetic_kJ_per_mol)) < 1e-4 * float(np.mean(fp.kinetic_kJ_per_mol))):
        n_com, com_src = 3, "inferred: the centre-of-mass momentum stays zero"
    else:
        n_com, com_src = 0, "thermostatted and the centre-of-mass momentum fluctuates: not removed"
    try:
        n_dof = tm.degrees_of_freedom(run.n_atoms, n_constraints=n_con, n_com=n_com) if run.n_atoms else None
    except AnalysisError:
        n_dof = None
        notes.append("The degrees of freedom could not be counted (too many constraints for the atoms).")
    if n_constraints is None and run.n_atoms and (md.n_dof is not None or con_assumed):
        engine_dof, engine_src = _engine_dof(run, table, fp, n_com)
        if engine_dof is not None and 0 < engine_dof <= 3 * run.n_atoms:
            n_dof = int(engine_dof)
            n_con = max(0, 3 * run.n_atoms - n_com - n_dof)
            con_src = f"from the engine's own count of degrees of freedom, N_dof = {n_dof} ({engine_src})"
            con_assumed = False

    target_T = temperature_K if temperature_K is not None else md.temperature_K

    # ---- temperature ------------------------------------------------------------------------------
    temp: TemperatureAudit | None = None
    file_kin = table.by_role("kinetic") if table is not None else None
    file_T = table.by_role("temperature") if table is not None else None
    temp_verdicts: list[Verdict] = []
    half, half_src = _half_step(run) if fp is not None else (False, "")
    half_words = ""
    if n_dof is not None and (fp is not None or file_kin is not None):
        t_vel = tm.kinetic_temperature(fp.kinetic_kJ_per_mol, n_dof) if fp is not None else None
        t_vel_time = fp.time_ps if fp is not None else None
        if half and fp is not None and t_vel is not None and file_kin is None:
            spacing = float(np.median(np.diff(fp.time_ps))) if fp.time_ps.size > 1 else math.nan
            step = timestep_ps if timestep_ps is not None else md.timestep_ps
            if step and fp.time_ps.size > 2 and abs(spacing - step) <= 1e-3 * step:
                # every step written: KE(n) = mean of 1/2 m v^2 of frames n and n+1 (ENGINES.md, GROMACS)
                k_full = 0.5 * (fp.kinetic_kJ_per_mol[:-1] + fp.kinetic_kJ_per_mol[1:])
                t_vel = tm.kinetic_temperature(k_full, n_dof)
                t_vel_time = fp.time_ps[:-1]
                half_words = (f"velocities half a step off the positions ({half_src}), averaged to full steps: "
                              "KE(n) = mean of 1/2 m v^2 of frames n and n+1")
            else:
                half_words = (f"velocities half a step off the positions ({half_src}) used as they are: frames "
                              "are not written every step, so they cannot be averaged to full steps")
        t_filek = None
        if file_kin is not None and table is not None:
            t_filek = tm.kinetic_temperature(np.asarray(file_kin.values, dtype=np.float64), n_dof)
        if t_filek is not None and table is not None:
            t_series, t_time = t_filek, np.asarray(table.time_ps, dtype=np.float64)
            ksrc = (f"the file's kinetic energy (column '{file_kin.name}'), preferred over the velocities: "  # type: ignore[union-attr]
                    + (f"they are half a step off the positions ({half_src})" if half else
                       "it is the engine's own" if md.velocities_half_step is False else
                       "the velocities may be half a step off the positions (leapfrog-type integrators)"))
            if half:
                half_words = f"velocities half a step off the positions ({half_src}): the file's kinetic energy is shown"
        else:
            assert fp is not None and t_vel is not None and t_vel_time is not None
            t_series, t_time = t_vel, t_vel_time
            ksrc = ("velocities (1/2 m v^2 summed over atoms)" if not half_words else
                    f"velocities (1/2 m v^2 summed over atoms); {half_words}")
        k_stats = table_stats(file_kin.name) if t_filek is not None and file_kin is not None else None
        if k_stats is not None:
            # T = f K with f = 2 / (N_dof k_B): mean, spread and g follow from the kinetic energy's
            f_T = float(tm.kinetic_temperature(1.0, n_dof))
            mean_T, std_T, g_T = f_T * k_stats[0], f_T * k_stats[1], k_stats[2]
            n_T = int(t_series.size)
        else:
            fin = np.isfinite(t_series)
            ts_f = t_series[fin]
            g_T, _ = en.statistical_inefficiency_of(ts_f)
            mean_T = float(ts_f.mean()) if ts_f.size else math.nan
            std_T = float(ts_f.std()) if ts_f.size else math.nan
            n_T = int(ts_f.size)
        err_T = std_T * math.sqrt(g_T / max(n_T, 1))
        mismatch = implied = fT_mean = None
        if file_T is not None and table is not None:
            fvals = np.asarray(file_T.values, dtype=np.float64)
            ft_stats = table_stats(file_T.name)
            if t_filek is not None and k_stats is not None and ft_stats is not None:
                ours, theirs = np.array([mean_T]), np.array([ft_stats[0]])  # every row finite: the means
            elif t_filek is not None:
                ok = np.isfinite(fvals) & np.isfinite(t_filek)
                ours, theirs = t_filek[ok], fvals[ok]
            else:
                assert fp is not None and t_vel is not None and t_vel_time is not None
                fi, ti = _align(t_vel_time, np.asarray(table.time_ps, dtype=np.float64))
                ok = np.isfinite(fvals[ti])
                ours, theirs = t_vel[fi][ok], fvals[ti][ok]
            if theirs.size and float(theirs.mean()) > 0:
                fT_mean = float(theirs.mean())
                mismatch = (float(ours.mean()) - fT_mean) / fT_mean
                implied = n_dof * float(ours.mean()) / fT_mean
        # equipartition groups
        gtemps: tuple[tm.GroupTemperature, ...] = ()
        split: dict[str, Any] | None = None
        left_out: tuple[str, ...] = ()
        if fp is not None and all_groups and t_vel is not None:
            gdof = tm.group_degrees_of_freedom(
                all_groups, run.masses_amu, n_com=n_com,
                constraint_pairs=None if inference is None else inference.rigid_pairs,
                constraint_weights=None if inference is None else inference.constraint_weights,
                n_constraints=n_con)
            names = list(all_groups)
            if n_con > 0 or (con_assumed and _other_constraints(run.masses_amu) is not None):
                # per-atom groups (elements, species, masses) cut through rigid molecules (or may: constraints
                # unknown and hydrogens present): not judged
                left_out = tuple(k for k in names if k.startswith(tm.PER_ATOM_PREFIXES) and k not in (groups or {}))
            judged = [k for k in names if k not in left_out]
            t_all = tm.kinetic_temperature(fp.kinetic_kJ_per_mol, n_dof)
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
        # canonical checks
        kdist = None
        maxw: list[tm.DistributionCheck] = []
        if not thermostatted:
            cnote = ("not applied: canonical-ensemble tests; in an NVE run the kinetic energy and the speeds "
                     "do not follow the canonical distributions (K is narrower because E is fixed), so they "
                     "would mislead")
        elif target_T is None:
            cnote = "not applied: the target temperature is unknown (give --temperature K)"
        else:
            kin_for_test = (np.asarray(file_kin.values, dtype=np.float64) if file_kin is not None
                            else fp.kinetic_kJ_per_mol if fp is not None else None)
            cnote = "applied on decorrelated samples (every g-th frame)"
            if kin_for_test is not None:
                kf = kin_for_test[np.isfinite(kin_for_test)]
                gk_ = k_stats[2] if (k_stats is not None and file_kin is not None) else \
                    en.statistical_inefficiency_of(kf)[0]
                sample = kf[tm.thin_indices(kf.size, gk_)]
                if sample.size >= 20:
                    kdist = tm.kinetic_energy_distribution_check(sample, n_dof, target_T)
                else:
                    cnote = f"kinetic-energy test not applied: only {sample.size} decorrelated samples (< 20)"
            if fp is not None and fp.speeds_nm_per_ps:
                free = tm.unconstrained_atoms(run.n_atoms, np.zeros((0, 2)) if inference is None
                                              else inference.rigid_pairs)
                species = tm.species_of(run.topology, run.masses_amu)
                g_frames = max(1.0, g_T if t_filek is None else en.statistical_inefficiency_of(t_vel)[0]
                               if t_vel is not None else 1.0)
                step = max(1, int(math.ceil(g_frames / fp.speed_frame_stride)))
                for sp, speeds in fp.speeds_nm_per_ps.items():
                    if speeds.size == 0:
                        continue
                    idx = species[sp]
                    kept = idx[: speeds.shape[1]]
                    cols = free[kept]
                    if n_con > 0 and inference is None:
                        continue  # cannot tell constrained atoms apart
                    s = speeds[::step][:, cols].ravel()
                    if s.size >= 50:
                        mass = float(run.masses_amu[kept[cols]][0])
                        maxw.append(tm.maxwell_speed_check(s, mass, target_T, name=sp))
        temp = TemperatureAudit(
            n_atoms=run.n_atoms, n_dof=n_dof, n_constraints=n_con, constraints_source=con_src,
            n_com_removed=n_com, com_source=com_src, kinetic_source=ksrc, mean_K=mean_T, std_K=std_T,
            error_K=err_T, statistical_inefficiency=g_T,
            mean_from_velocities_K=None if t_vel is None else float(np.mean(t_vel)),
            mean_from_file_kinetic_K=None if t_filek is None else (mean_T if k_stats is not None
                                                                   else float(np.nanmean(t_filek))),
            file_temperature_mean_K=fT_mean, file_mismatch_relative=mismatch, implied_file_dof=implied,
            velocities_estimated=bool(run.frames is not None and run.frames.velocities_estimated),
            constraint_inference=inference, groups=gtemps, kinetic_distribution=kdist, maxwell=tuple(maxw),
            canonical_note=cnote, time_ps=t_time, temperature_K=t_series, split=split, groups_left_out=left_out,
            half_step=half_words,
        )
        if con_assumed:
            alt = _other_constraints(run.masses_amu)
            if alt is not None:
                alt_n, alt_words = alt
                try:
                    dof_alt = tm.degrees_of_freedom(run.n_atoms, n_constraints=n_con + alt_n, n_com=n_com)
                except AnalysisError:
                    dof_alt = 0
                if dof_alt > 0 and math.isfinite(mean_T):
                    t_alt = mean_T * n_dof / dof_alt
                    rel = abs(t_alt - mean_T) / mean_T if mean_T else 0.0
                    temp = replace(temp, assumption={"assumed_constraints": n_con, "other_constraints": n_con + alt_n,
                                                     "other_assumption": alt_words, "other_mean_K": t_alt,
                                                     "relative_change": rel})
                    v = judge("temperature.assumption", rel, title="Temperature rests on an assumption", unit="",
                              message=f"T = {mean_T:.4g} K assumes {n_con} constraints (none stated in the files, "
                                      f"and none could be inferred: no topology or precise positions); "
                                      f"{alt_words} ({n_con + alt_n} constraints) it would be {t_alt:.4g} K "
                                      f"({rel:.1%} apart; {_src('temperature.assumption')})",
                              advice=_advice("temperature.assumption"))
                    if v.level == "problem":
                        v = replace(v, level="caution")  # an unknown, not a wrong run
                    temp_verdicts.append(v if v.level != "ok" else replace(v, advice=""))
        if half_words and t_filek is None and "as they are" in half_words:
            temp_verdicts.append(judge("temperature.half_step", 1.0, title="Half-step velocities", unit="",
                                       message=f"T = {mean_T:.4g} K from {half_words}; the engine's kinetic "
                                               "energy at full steps differs from it "
                                               f"({_src('temperature.half_step')})",
                                       advice=_advice("temperature.half_step")))
        elif half_words:
            temp_verdicts.append(Verdict("temperature.half_step", "info", "Half-step velocities", None, "",
                                         half_words, threshold=THRESHOLDS["temperature.half_step"]))
        if temp.velocities_estimated and t_filek is None:
            notes.append("Velocities were estimated from positions (central differences): the kinetic "
                         "temperature from them is biased low when frames are far apart.")
    if temp is None and file_T is not None:
        ft = next((x for x in sampling if x.name == file_T.name), None)
        if ft is not None:
            temp_verdicts.append(Verdict(
                "temperature.dof", "info", "Kinetic temperature", ft.mean, "K",
                f"T = {_fmt(ft.mean)} +- {_fmt(ft.standard_error_of_mean)} K from the file's temperature column "
                f"'{file_T.name}' (the engine's own value; the degrees of freedom it rests on cannot be counted "
                "here)"))
    kT_ref = target_T if target_T is not None else (temp.mean_K if temp is not None else None)
    dof_for_drift = n_dof
    if n_dof is None and file_kin is not None and file_T is not None:
        # energy table only: the file's own kinetic energy and temperature give the N_dof it used
        ks, tst = table_stats(file_kin.name), table_stats(file_T.name)
        if ks is not None and tst is not None:  # every row finite: the scan's means
            k_mean, t_mean = ks[0], tst[0]
        else:
            kv = np.asarray(file_kin.values, dtype=np.float64)
            tv = np.asarray(file_T.values, dtype=np.float64)
            ok = np.isfinite(kv) & np.isfinite(tv)
            k_mean = float(kv[ok].mean()) if ok.any() else math.nan
            t_mean = float(tv[ok].mean()) if ok.any() else math.nan
        if t_mean > 0:
            dof_for_drift = int(round(2.0 * k_mean / (KB_KJ_PER_MOL_K * t_mean)))
            kT_ref = kT_ref if kT_ref is not None else t_mean
            notes.append(f"No atoms in the files: N_dof = {dof_for_drift} for the per-DOF drift comes from the "
                         "file's kinetic energy and temperature (2 <K> / (k_B <T>)).")

    # ---- energy conservation ------------------------------------------------------------------
    eaudit: EnergyAudit | None = None
    if conserved is not None:
        t = conserved.time_ps
        e = conserved.values_kJ_per_mol
        events = en.find_energy_events(t, e, jump_robust_sigma=THRESHOLDS["energy.jumps"].caution, scan=scan)
        kin = conserved.kinetic_kJ_per_mol
        ksrc_e: str | None = None
        if kin is not None:
            ksrc_e = f"file column '{conserved.kinetic_column}'"
        drift = fl = None
        if scan is not None:  # every row finite (the scan says so): no masks, no copies
            n_good = int(e.size)
            tg, eg, kg = t, e, kin
        else:
            good = np.isfinite(e) & np.isfinite(t)
            if kin is not None:
                good &= np.isfinite(kin)
            n_good = int(good.sum())
            if n_good == good.size:
                tg, eg, kg = t, e, kin
            else:
                tg, eg, kg = t[good], e[good], None if kin is None else kin[good]
        scan_e = scan
        if table is not None and table.joins and n_good >= 3:
            # restarts glued in: each segment is its own run; the energy step across a join is reported by the
            # restarts and jumps checks, not counted again as drift or fluctuation
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
                scan_e = None
                notes.append("Restarts glued in: the energy steps across the joins (" + ", ".join(taken[:5])
                             + ") are taken out before the drift and fluctuation checks; the jumps and restarts "
                             "checks report them.")
        if n_good >= 3:
            drift = en.drift_fit(tg, eg, n_atoms=run.n_atoms or None, n_dof=dof_for_drift or None,
                                 temperature_K=kT_ref, scan=scan_e)
            kin_used = kg
            if kin_used is None and fp is not None:
                fi, ti = _align(fp.time_ps, tg)
                if fi.size == n_good:
                    kin_used = fp.kinetic_kJ_per_mol[fi[np.argsort(ti)]]
                    ksrc_e = "velocities (frames matched to energy rows by time)"
            kcol = (en._SERIES + conserved.kinetic_column
                    if kin_used is kg and kg is not None and conserved.kinetic_column is not None
                    and scan_e is not None else None)
            fl = en.energy_fluctuations(tg, eg, kin_used, scan=scan_e, kinetic_column=kcol)
        eaudit = EnergyAudit(series_label=conserved.label, series_columns=conserved.columns,
                             expected_conserved=conserved.expected_conserved, reason=conserved.reason,
                             kinetic_source=ksrc_e, drift=drift, fluctuations=fl, events=events,
                             sampling=sampling, time_ps=t, values_kJ_per_mol=e)

    # ---- time step ------------------------------------------------------------------------------
    dt = timestep_ps if timestep_ps is not None else md.timestep_ps
    dt_src = "user (--timestep)" if timestep_ps is not None else ("metadata" if md.timestep_ps else "unknown")
    tsa: TimestepAudit | None = None
    if fp is not None:
        if fp.spectrum_frequency_per_ps is not None and fp.spectrum_power is not None:
            freq, power = fp.spectrum_frequency_per_ps, fp.spectrum_power
            candidates: dict[str, ts.FastestMotion] = {}
            for gname, gpow in (("all atoms", power), *fp.group_spectra.items()):
                try:
                    candidates[gname] = ts.fastest_motion(freq, gpow)
                except AnalysisError:
                    continue
            if not candidates:
                tsa = TimestepAudit(None, None, "no motion found in the velocity spectrum", freq, power)
            else:
                gbest = max(candidates, key=lambda k: candidates[k].frequency_per_ps)
                fast = candidates[gbest]
                spacing = float(np.median(np.diff(fp.time_ps)))
                chk = ts.check_timestep(fast.period_ps, spacing, dt, timestep_source=dt_src)
                tsa = TimestepAudit(fast, chk, "fastest motion from mass-weighted velocity power spectra of "
                                    "the whole system and of each atom group (Welch, Hann window; the "
                                    "audit's own estimator)", freq, power, fastest_group=gbest,
                                    group_wavenumbers_per_cm={k: c.wavenumber_per_cm for k, c in candidates.items()})
        else:
            tsa = TimestepAudit(None, None, fp.spectrum_note, np.zeros(0), np.zeros(0))
    if run.frame_spacing_ps:  # fast motions the topology and masses imply, judged against the frames
        known = n_constraints if n_constraints is not None else md.n_constraints
        expected = ts.expected_fast_motions(run.topology, run.masses_amu, n_constraints=known,
                                            rigid_pairs=None if inference is None else inference.rigid_pairs,
                                            constraints_words=md.constraints)
        tsa = replace(tsa or TimestepAudit(None, None, "no velocities", np.zeros(0), np.zeros(0)),
                      expected=expected, frame_spacing_ps=float(run.frame_spacing_ps), timestep_source=dt_src)

    # ---- comparison run -----------------------------------------------------------------------
    compared: AuditResult | None = None
    scaling: ts.ScalingResult | None = None
    if compare is not None:
        compared = yield from _nested(audit_run(compare, temperature_K=temperature_K, chunk_frames=chunk_frames,
                                                timestep_ps=compare_timestep_ps, segment_frames=segment_frames,
                                                max_spectrum_segments=max_spectrum_segments), frames_total, total)
        dt2 = compare_timestep_ps if compare_timestep_ps is not None else compare.metadata.timestep_ps
        s1 = eaudit.fluctuations if eaudit is not None else None
        s2 = compared.energy.fluctuations if compared.energy is not None else None
        if dt and dt2 and s1 is not None and s2 is not None:
            try:
                scaling = ts.timestep_scaling(dt, s1.sigma_total_kJ_per_mol, dt2, s2.sigma_total_kJ_per_mol,
                                              ratio_1=s1.ratio, ratio_2=s2.ratio)
            except AnalysisError as exc:
                notes.append(f"Time-step scaling not checked: {exc}")

    pre = [_ensemble_verdict(decision, eaudit)]
    joins = list(table.joins) if table is not None else []
    frame_joins = list(md.extra.get("frame_joins") or [])
    part_overlaps = [str(x) for x in (md.extra.get("overlaps") or [])]  # parts joined by the reader layer
    after_energy = []
    if joins or frame_joins or part_overlaps:
        after_energy.append(_restarts_verdict(joins, frame_joins, eaudit, part_overlaps))
    verdicts = _verdicts(eaudit, temp, tsa, scaling, compared, thermostatted, has_vel, conserved, dt,
                         n_atoms_known=bool(run.n_atoms), energy_reason=energy_reason, pre=pre,
                         after_energy=after_energy, after_temperature=temp_verdicts,
                         restarts_found=bool(joins))
    if not run.n_atoms and temp is None:
        verdicts = [replace(v, title="Temperature vs file", message="not checked: the files hold no atoms (energy "
                            "table only), so the degrees of freedom cannot be counted")
                    if v.kind == "temperature.file_mismatch" else v
                    for v in verdicts]
    yield Progress(total, total, "done")
    return AuditResult(run_name=run.name, paths=tuple(str(p) for p in run.paths), ensemble=ensemble,
                       thermostatted=thermostatted, energy=eaudit, temperature=temp, timestep=tsa,
                       scaling=scaling, compared=compared, verdicts=tuple(verdicts), notes=tuple(notes),
                       settings=settings, ensemble_source=decision.source, ensemble_origin=decision.origin)


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


def _ensemble_verdict(decision: EnsembleDecision, ea: EnergyAudit | None) -> Verdict:
    """The ensemble the run is judged in and where it came from (information, not a verdict)."""
    msg = f"{decision.label}: {decision.source}"
    if decision.thermostatted:
        if ea is not None and ea.expected_conserved:
            msg += f"; conservation is judged on the {ea.series_label}"
        else:
            msg += ("; conservation is not judged on the total energy (a thermostat exchanges energy with the "
                    "run): it needs the thermostat's energy or the engine's conserved quantity")
    elif decision.origin in ("inferred", "unknown"):
        msg += "; conservation is judged on the total energy"
    return Verdict("ensemble", "info", "Ensemble", None, "", msg,
                   details={"origin": decision.origin, "thermostatted": decision.thermostatted,
                            **decision.evidence})


def _restarts_verdict(joins: Sequence[Any], frame_joins: Sequence[Any], ea: EnergyAudit | None,
                      part_overlaps: Sequence[str] = ()) -> Verdict:
    """Restarts glued into the files: where, what was dropped, and the energy step across each join."""
    parts: list[str] = []
    steps: list[dict[str, Any]] = []
    t = e = None
    s_rob = med = math.nan
    if ea is not None:
        t = np.asarray(ea.time_ps, dtype=np.float64)
        e = np.asarray(ea.values_kJ_per_mol, dtype=np.float64)
        d = np.diff(e[np.isfinite(e)])
        if d.size >= 5:
            med = float(np.median(d))
            s_rob = 1.4826 * float(np.median(np.abs(d - med)))
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
    v = judge("time.restarts", float(n), title="Restarts glued into one file", unit="joins",
              message=f"{n} restart(s) glued in; the later segment is kept and every check runs on it: "
                      + "; ".join(parts[:8]) + (f"; ... {len(parts) - 8} more" if len(parts) > 8 else "")
                      + f" ({_src('time.restarts')})",
              advice=_advice("time.restarts"), details={"joins": steps})
    return v


def _nested(work: Work[AuditResult], done0: float, total: float) -> Work[AuditResult]:
    """Re-yield a nested audit's progress on the outer scale."""
    try:
        while True:
            p = next(work)
            yield Progress(min(done0 + p.done, total), total, f"comparison run: {p.message}")
    except StopIteration as stop:
        return stop.value  # type: ignore[no-any-return]


def _fmt(x: float | None, unit: str = "", digits: int = 4) -> str:
    if x is None or not math.isfinite(x):
        return "n/a"
    return f"{x:.{digits}g}{(' ' + unit) if unit else ''}"


def _verdicts(ea: EnergyAudit | None, ta: TemperatureAudit | None, tsa: TimestepAudit | None,
              scaling: ts.ScalingResult | None, compared: AuditResult | None, thermostatted: bool,
              has_vel: bool, conserved: en.ConservedSeries | None, dt: float | None,
              n_atoms_known: bool = True, *, energy_reason: str = "the run has no energy table",
              pre: Sequence[Verdict] = (), after_energy: Sequence[Verdict] = (),
              after_temperature: Sequence[Verdict] = (), restarts_found: bool = False) -> list[Verdict]:
    out: list[Verdict] = list(pre)
    min_rows = THRESHOLDS["audit.min_rows"]
    few = int(min_rows.caution)  # drift, fluctuations, time gaps
    few_jumps = int(min_rows.problem)  # energy jumps
    # energy
    if ea is None:
        for kind, title in (("energy.drift", "Energy drift"), ("energy.fluctuation_ratio", "Energy fluctuation ratio"),
                            ("energy.jumps", "Energy jumps")):
            out.append(_skipped(kind, title, energy_reason))
    else:
        ev = ea.events
        n_rows = int(np.asarray(ea.time_ps).size)
        v = judge("energy.nonfinite", float(ev.n_nonfinite), title="Non-finite energies", unit="rows",
                  message=f"{ev.n_nonfinite} rows of {ea.series_label} are NaN or infinite "
                          f"(threshold: any; {_src('energy.nonfinite')})",
                  advice=_advice("energy.nonfinite") if ev.n_nonfinite else "",
                  details={"first_time_ps": next((e.time_ps for e in ev.events if e.kind == "nonfinite"), None)})
        if v.level == "ok" and n_rows < few:
            # a finite value in one or two rows judges nothing about the run
            v = replace(v, level="info", message=v.message + f"; only {n_rows} row(s): this says nothing of the run")
        out.append(v)
        too_few = f"too few rows ({n_rows}; needs {few}, {_src('audit.min_rows')})"
        if not ea.expected_conserved:
            out.append(_skipped("energy.drift", "Energy drift", ea.reason))
            out.append(_skipped("energy.fluctuation_ratio", "Energy fluctuation ratio", ea.reason))
        elif ea.drift is None:
            out.append(_skipped("energy.drift", "Energy drift", too_few))
            out.append(_skipped("energy.fluctuation_ratio", "Energy fluctuation ratio", too_few))
        else:
            d = ea.drift
            if d is not None:
                thr = THRESHOLDS["energy.drift"]
                kt = d.slope_kT_per_dof_per_ns
                msg = (f"{ea.series_label}: slope {_fmt(d.slope_kJ_per_mol_per_ns)} +- "
                       f"{_fmt(d.slope_error_kJ_per_mol_per_ns)} kJ/mol/ns (z = {d.z_score:.2f}) = "
                       f"{_fmt(kt)} kT/DOF/ns")
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
                    v = judge("energy.drift", bound, title="Energy drift", unit="kT/DOF/ns", message=msg,
                              advice=_advice("energy.drift"),
                              details={"drift_kT_per_dof_per_ns": kt, "error_kT_per_dof_per_ns": err_kt,
                                       "significant_3_sigma": d.significant})
                    out.append(v if v.level != "ok" else replace(v, advice=""))
            f = ea.fluctuations
            if f is not None and f.ratio is not None:
                thr = THRESHOLDS["energy.fluctuation_ratio"]
                v = judge("energy.fluctuation_ratio", f.ratio, title="Energy fluctuation ratio", unit="",
                          message=f"sigma_E/sigma_K = {_fmt(f.sigma_total_kJ_per_mol)} / "
                                  f"{_fmt(f.sigma_kinetic_kJ_per_mol)} kJ/mol = {_fmt(f.ratio)} against "
                                  f"a caution above {thr.caution:g}, a problem above {thr.problem:g} ({thr.source})",
                          advice=_advice("energy.fluctuation_ratio"))
                out.append(v if v.level != "ok" else replace(v, advice=""))
            elif f is not None:
                out.append(_skipped("energy.fluctuation_ratio", "Energy fluctuation ratio",
                                    "no kinetic energy in the files or from velocities matched to the rows"))
        mj = ev.max_jump_robust_sigma
        jump_times = [e.time_ps for e in ev.events if e.kind == "jump"]
        v = judge("energy.jumps", mj, title="Energy jumps", unit="robust sigma",
                  message=f"largest frame-to-frame step {mj:.3g} robust sigma; {ev.n_jumps} steps above "
                          f"{THRESHOLDS['energy.jumps'].caution:g}"
                          + (f" at t = {', '.join(f'{x:.6g}' for x in jump_times[:5])} ps" if jump_times else "")
                          + f" ({_src('energy.jumps')})",
                  advice=_advice("energy.jumps"), details={"times_ps": jump_times})
        if n_rows < few_jumps:
            out.append(_skipped("energy.jumps", "Energy jumps",
                                f"too few rows ({n_rows}; needs {few_jumps}, {_src('audit.min_rows')})"))
        else:
            out.append(v if v.level != "ok" else replace(v, advice=""))
        if ev.runaway_ratio is not None:
            v = judge("energy.runaway", ev.runaway_ratio, title="Runaway energy", unit="",
                      message=f"frame-to-frame energy noise in the last tenth is {ev.runaway_ratio:.3g} times "
                              f"that in the first tenth ({_src('energy.runaway')})",
                      advice=_advice("energy.runaway"))
            out.append(v if v.level != "ok" else replace(v, advice=""))
        gap_times = [e.time_ps for e in ev.events if e.kind == "gap"]
        v = judge("time.gaps", float(ev.n_gaps), title="Time gaps", unit="gaps",
                  message=f"{ev.n_gaps} spacings above 1.5 x the median spacing {_fmt(ev.median_spacing_ps, 'ps')}"
                          + (f", before t = {', '.join(f'{x:.6g}' for x in gap_times[:5])} ps" if gap_times else ""),
                  advice=_advice("time.gaps"), details={"times_ps": gap_times})
        if n_rows < few:
            out.append(_skipped("time.gaps", "Time gaps", too_few))
        else:
            out.append(v if v.level != "ok" else replace(v, advice=""))
        if not (restarts_found and ev.n_overlaps == 0) and n_rows >= 2:
            v = judge("time.overlaps", float(ev.n_overlaps), title="Time overlaps and reversals", unit="rows",
                      message=f"{ev.n_overlaps} rows where time repeats or goes back",
                      advice=_advice("time.overlaps"),
                      details={"times_ps": [e.time_ps for e in ev.events if e.kind in ("overlap", "reversal")]})
            out.append(v if v.level != "ok" else replace(v, advice=""))
    out.extend(after_energy)
    # temperature
    if ta is None:
        out.append(_skipped("temperature.file_mismatch", "Kinetic temperature",
                            "no velocities and no kinetic energy in the files" if not n_atoms_known else
                            "no velocities and no kinetic energy in the files, or the degrees of freedom "
                            "could not be counted"))
    else:
        out.append(Verdict("temperature.dof", "info", "Kinetic temperature", ta.mean_K, "K",
                           f"T = {_fmt(ta.mean_K)} +- {_fmt(ta.error_K)} K from {ta.kinetic_source}; N_dof = "
                           f"{ta.n_dof} = 3 x {ta.n_atoms} - {ta.n_constraints} constraints ({ta.constraints_source}) "
                           f"- {ta.n_com_removed} centre of mass ({ta.com_source})"))
        if ta.file_mismatch_relative is not None:
            v = judge("temperature.file_mismatch", abs(ta.file_mismatch_relative), title="Temperature vs file",
                      unit="", message=f"mean T here {_fmt((1 + ta.file_mismatch_relative) * (ta.file_temperature_mean_K or 0))} K "
                                       f"against {_fmt(ta.file_temperature_mean_K)} K in the file "
                                       f"(relative {ta.file_mismatch_relative:+.3%}); the file's value matches "
                                       f"N_dof = {_fmt(ta.implied_file_dof, digits=6)} against {ta.n_dof} here "
                                       f"({_src('temperature.file_mismatch')})",
                      advice=_advice("temperature.file_mismatch"))
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
                      message=f"{head}; groups: {listing} ({_src('temperature.equipartition')}; a split of caution "
                              f"size at {zthr.problem:g} sigma or more is a problem, "
                              f"{_src('temperature.equipartition_significance')})",
                      advice=_advice("temperature.equipartition"),
                      details={"split": sp})
            if v.level == "caution" and z >= zthr.problem:
                v = replace(v, level="problem")
            out.append(v if v.level != "ok" else replace(v, advice=""))
        else:
            out.append(_skipped("temperature.equipartition", "Equipartition",
                                "needs velocities and at least two groups of atoms (species, elements or masses, "
                                "residue kinds, or --group)" if ta.mean_from_velocities_K is None or not
                                ta.groups_left_out else "the only groups (elements, species or masses) cut through "
                                "molecules that are or may be rigid; give --group"))
        if ta.kinetic_distribution is not None:
            kd = ta.kinetic_distribution
            v = judge("temperature.kinetic_distribution", kd.p_value, title="Kinetic-energy distribution",
                      unit="p-value", message=f"KS p = {kd.p_value:.3g} for {kd.n_samples} decorrelated kinetic "
                                              f"energies against {kd.reference} (std {kd.sample_std:.4g} vs "
                                              f"{kd.expected_std:.4g} kJ/mol; {_src('temperature.kinetic_distribution')})",
                      advice=_advice("temperature.kinetic_distribution"))
            out.append(v if v.level != "ok" else replace(v, advice=""))
        else:
            out.append(_skipped("temperature.kinetic_distribution", "Kinetic-energy distribution", ta.canonical_note))
        if ta.maxwell:
            nsp = len(ta.maxwell)
            pmin = min(1.0, min(c.p_value for c in ta.maxwell) * nsp)
            listing = "; ".join(f"{c.name}: p = {c.p_value:.3g} (n = {c.n_samples})" for c in ta.maxwell)
            v = judge("temperature.maxwell", pmin, title="Maxwell-Boltzmann speeds", unit="p-value",
                      message=f"smallest Bonferroni-corrected KS p = {pmin:.3g}; {listing} "
                              f"({_src('temperature.maxwell')})", advice=_advice("temperature.maxwell"))
            out.append(v if v.level != "ok" else replace(v, advice=""))
        else:
            reason = ta.canonical_note if not thermostatted else (
                ta.canonical_note if "not applied" in ta.canonical_note else
                "no unconstrained species with enough decorrelated speeds (needs velocities)")
            out.append(_skipped("temperature.maxwell", "Maxwell-Boltzmann speeds", reason))
    out.extend(after_temperature)
    # time step (verdicts made in timestep.py: resolved motions only, expected fast motions from the topology)
    if tsa is None or tsa.frame_spacing_ps is None or (tsa.fastest is None and not tsa.expected):
        out.append(_skipped("timestep.fastest_period", "Time step", "no velocities: the fastest motion is unknown"
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
                          f"{scaling.exponent:.3f} against 2 ({_src('timestep.scaling')})",
                  advice=_advice("timestep.scaling"), details={"exponent": scaling.exponent})
        out.append(v if v.level != "ok" else replace(v, advice=""))
    elif compared is not None:
        out.append(_skipped("timestep.scaling", "Fluctuation vs time step",
                            "both runs need a known time step and an energy fluctuation (give --timestep)"))
    return out


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
    chunk_frames : int
        Frames per chunk read.
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
    chunk_frames: int = DEFAULT_CHUNK_FRAMES
    segment_frames: int = 256
    max_spectrum_segments: int | None = 64

    def __post_init__(self) -> None:
        if self.groups is not None:  # equal requests compare equal whatever sequence type the indices came in
            object.__setattr__(self, "groups", {str(k): tuple(int(i) for i in np.asarray(v).reshape(-1))
                                                for k, v in self.groups.items()} or None)

    def _keywords(self) -> dict[str, Any]:
        return {f.name: getattr(self, f.name) for f in fields(self)}

    def work(self, run: Run) -> Work[AuditResult]:
        return (yield from audit_run(run, **self._keywords()))

    def consumer(self, run: Run) -> AuditFramesConsumer | None:
        """The audit's frame part for a shared pass over all frames; None when the audit reads no velocities
        (an energy table only, unknown masses): then :meth:`work` does it all."""
        if not _reads_velocities(run):
            return None
        return AuditFramesConsumer.for_run(run, n_constraints=self.n_constraints, groups=self.groups,
                                           segment_frames=self.segment_frames,
                                           max_spectrum_segments=self.max_spectrum_segments,
                                           temperature_K=self.temperature_K)

    def after_pass(self, run: Run, finished: AuditFrames) -> Work[AuditResult]:
        """The energy part, the judgement and any comparison run, from the frame part of a shared pass."""
        return (yield from audit_run(run, frames=finished, **self._keywords()))
