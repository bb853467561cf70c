"""Vibrational density of states from the mass-weighted VACF (papers in
:mod:`phasewake.core.analyses.velocity`)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.analyses.result import ResultMixin
from phasewake.core.errors import AnalysisError, TooShortError
from phasewake.core.progress import Work

if TYPE_CHECKING:
    from phasewake.core.model.run import Run

from phasewake.core.analyses.velocity.autocorrelation import (
    DEFAULT_BUFFER_BYTES,
    VACFResult,
    vacf,
    vacf_from_velocities,
)

SPEED_OF_LIGHT_CM_PER_S = 2.99792458e10  # exact (SI 2019)
PS_PER_S = 1e12
DEFAULT_SPECTRUM_LAG_PS = 2.0  # lag window of the VDOS unless asked: 16.7 cm^-1 resolution, smooth


def wavenumber_cm1_from_thz(f_thz: float) -> float:
    """Wavenumber (cm^-1) of a frequency in THz: nu~ = f / c."""
    return float(f_thz) * 1e12 / SPEED_OF_LIGHT_CM_PER_S


def nyquist_cm1(dt_ps: float) -> float:
    """Highest wavenumber a sampling interval can represent: 1 / (2 c dt)."""
    return 1.0 / (2.0 * SPEED_OF_LIGHT_CM_PER_S * dt_ps / PS_PER_S)


# ---------------------------------------------------------------------------------------------------
# Vibrational density of states
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Peak:
    wavenumber_cm1: float
    thz: float
    intensity: float  # per cm^-1
    prominence: float  # fraction of the highest peak
    not_a_motion: str = ""  # why the peak is not counted as a motion (may be an alias, near Nyquist); "" if it is


@dataclass(frozen=True)
class VDOSResult(ResultMixin):
    """Vibrational density of states from the mass-weighted VACF.

    ``intensity`` is normalised so that its integral over wavenumber (cm^-1) is ``n_dof``;
    units: degrees of freedom per cm^-1.
    """

    wavenumber_cm1: np.ndarray  # (n_freq,)
    thz: np.ndarray  # (n_freq,)
    intensity: np.ndarray  # (n_freq,), per cm^-1
    n_dof: float
    peaks: tuple[Peak, ...]  # significant peaks, by wavenumber
    highest_significant_peak_cm1: float | None
    upper_wavenumber_cm1: float  # below this lies 99% of the spectral weight (robust when no peak stands out)
    resolution_cm1: float  # 1 / (c * lag window)
    bin_spacing_cm1: float
    nyquist_cm1: float
    dt_ps: float
    max_lag_ps: float
    window: str
    velocities_estimated: bool
    settings: dict[str, Any] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    unresolved_motions: tuple[str, ...] = ()  # expected fast motions the frames cannot show, in words

    @property
    def motions(self) -> tuple[Peak, ...]:
        """The peaks counted as motions (resolved, not possible aliases)."""
        return tuple(p for p in self.peaks if not p.not_a_motion)

    @property
    def intensity_unit(self) -> str:
        return "1/cm^-1"


def vdos_from_vacf(lag_ps: np.ndarray, vacf_mass_weighted: np.ndarray, *, n_dof: float, window: str = "hann",
                   peak_prominence: float = 0.05, velocities_estimated: bool = False,
                   notes: Sequence[str] = ()) -> VDOSResult:
    """VDOS from a mass-weighted VACF (summed over atoms), by a windowed cosine transform.

    Parameters
    ----------
    lag_ps : ndarray, shape (L,), ps, evenly spaced from 0
    vacf_mass_weighted : ndarray, shape (L,), kJ/mol
    n_dof : float
        Degrees of freedom the spectrum integrates to.
    window : {"hann", "none"}
        Lag window w(k) = (1 + cos(pi k / L)) / 2 for "hann".
    peak_prominence : float
        A peak is significant when its prominence is at least this fraction of the highest value.
    """
    import scipy.fft
    from scipy.signal import find_peaks

    c = np.asarray(vacf_mass_weighted, float)
    L = c.size
    if L < 4:
        raise TooShortError("a vibrational spectrum", have=L, need=4)
    dt = float(lag_ps[1] - lag_ps[0])
    if window == "hann":
        w = 0.5 * (1.0 + np.cos(np.pi * np.arange(L) / L))
    elif window == "none":
        w = np.ones(L)
    else:
        raise ValueError(f"window must be 'hann' or 'none', not {window!r}")
    cw = c * w
    n = 2 * L
    sym = np.zeros(n)
    sym[:L] = cw
    sym[n - L + 1 :] = cw[1:][::-1]
    spec = scipy.fft.rfft(sym).real * dt  # (L + 1,)
    f_thz = scipy.fft.rfftfreq(n, d=dt)  # 1/ps = THz
    wn = f_thz * 1e12 / SPEED_OF_LIGHT_CM_PER_S
    area = np.trapezoid(spec, wn)
    if not area > 0:
        raise AnalysisError("the velocity autocorrelation has no spectral weight (zero velocities?)")
    intensity = spec * (n_dof / area)
    top = float(intensity.max())
    idx, props = find_peaks(intensity, prominence=peak_prominence * top)
    pos = np.clip(intensity, 0.0, None)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (pos[1:] + pos[:-1]) * np.diff(wn))])
    upper = float(wn[min(int(np.searchsorted(cum, 0.99 * cum[-1])), wn.size - 1)])
    peaks = tuple(Peak(float(wn[i]), float(f_thz[i]), float(intensity[i]), float(p / top))
                  for i, p in zip(idx, props["prominences"]))
    return VDOSResult(
        wavenumber_cm1=wn, thz=f_thz, intensity=intensity, n_dof=float(n_dof), peaks=peaks,
        highest_significant_peak_cm1=peaks[-1].wavenumber_cm1 if peaks else None, upper_wavenumber_cm1=upper,
        resolution_cm1=1.0 / (SPEED_OF_LIGHT_CM_PER_S * L * dt / PS_PER_S),
        bin_spacing_cm1=float(wn[1] - wn[0]), nyquist_cm1=nyquist_cm1(dt), dt_ps=dt, max_lag_ps=L * dt,
        window=window, velocities_estimated=velocities_estimated,
        settings={"window": window, "peak_prominence": peak_prominence, "max_lag": L}, notes=tuple(notes),
    )


def vdos_from_velocities(velocities_nm_per_ps: np.ndarray, masses_amu: np.ndarray, dt_ps: float, *,
                         window: str = "hann", max_lag: int | None = None, n_dof: float | None = None,
                         peak_prominence: float = 0.05) -> VDOSResult:
    """Vibrational density of states of an in-memory velocity array.

    Parameters
    ----------
    velocities_nm_per_ps : ndarray, shape (F, N, 3), nm/ps
    masses_amu : ndarray, shape (N,), amu
    dt_ps : float
        Frame spacing (ps); the Nyquist limit is 1 / (2 c dt).
    window : {"hann", "none"}
    max_lag : int, optional
        Lag window L in frames; default the frames in 2 ps (at most F // 2). Resolution 1 / (c L dt):
        a longer window resolves finer but is noisier (the variance of a lag-window estimate grows
        with L / F), so the default favours a smooth spectrum (2 ps: 16.7 cm^-1).
    n_dof : float, optional
        Normalisation (default 3 N).
    peak_prominence : float

    Returns
    -------
    VDOSResult
    """
    v = np.asarray(velocities_nm_per_ps)
    if max_lag is None:
        max_lag = int(max(4, min(v.shape[0] // 2, round(DEFAULT_SPECTRUM_LAG_PS / dt_ps))))
    r = vacf_from_velocities(v, dt_ps, masses_amu=masses_amu, mass_weighted=True, max_lag=max_lag)
    return vdos_from_vacf(r.lag_ps, r.vacf_sum.sum(axis=0), n_dof=3.0 * v.shape[1] if n_dof is None else n_dof,
                          window=window, peak_prominence=peak_prominence)


def vibrational_spectrum(run: Run, *, atom_indices: Sequence[int] | np.ndarray | None = None,
                         window: str = "hann", max_lag_ps: float | None = None, n_dof: float | None = None,
                         peak_prominence: float = 0.05, start: int = 0, stop: int | None = None,
                         stride: int = 1,
                         max_buffer_bytes: int = DEFAULT_BUFFER_BYTES) -> Work[VDOSResult]:
    """Streaming VDOS of a run (generator: yields Progress, returns VDOSResult).

    ``max_lag_ps`` defaults to 2 ps (at most half the run; see :func:`vdos_from_velocities`).
    ``n_dof`` defaults to :func:`spectrum_dof` (for a subset of atoms constraints are not subtracted: the spectrum of a
    constrained run simply has less weight at the constrained frequencies, and the normalisation is a
    convention). The highest significant peak (``highest_significant_peak_cm1``) is what the time-step
    check uses.
    """
    idx = np.arange(run.n_atoms) if atom_indices is None else np.asarray(atom_indices, dtype=np.int64)
    res = yield from vacf(run, groups={"atoms": idx}, mass_weighted=True,
                          max_lag_ps=spectrum_lag_ps(run, max_lag_ps, start, stop, stride), start=start,
                          stop=stop, stride=stride, max_buffer_bytes=max_buffer_bytes)
    return spectrum_from_vacf(run, res, idx, window=window, n_dof=n_dof, peak_prominence=peak_prominence)


def spectrum_lag_ps(run: Run, max_lag_ps: float | None, start: int, stop: int | None, stride: int) -> float | None:
    """The spectrum's lag window: ``max_lag_ps``, else 2 ps and at most half the frames' time span."""
    if max_lag_ps is not None:
        return max_lag_ps
    t = np.asarray(run.time_ps)[start:stop:stride]
    span = float(t.size * np.median(np.diff(t))) if t.size > 1 else 0.0
    return min(DEFAULT_SPECTRUM_LAG_PS, 0.5 * span) if span > 0 else None


def spectrum_dof(run: Run, idx: np.ndarray) -> float:
    """The degrees of freedom a VDOS of atoms ``idx`` is normalised to: 3 per atom with mass; for the whole
    system with its constraint count known (the files or the user), that count and a removed centre-of-mass
    motion come off too, so the area is the run's N_dof (the equipartition sum m<v^2>/kT)."""
    m = np.asarray(run.masses_amu)
    massive = int(np.count_nonzero(m[idx] != 0.0))  # virtual sites: no DOF
    md = run.metadata
    if idx.size == run.n_atoms and md.n_constraints is not None:
        return float(3 * massive - md.n_constraints - (3 if md.com_motion_removed else 0))
    return 3.0 * massive


def spectrum_from_vacf(run: Run, res: VACFResult, idx: np.ndarray, *, window: str = "hann",
                       n_dof: float | None = None, peak_prominence: float = 0.05) -> VDOSResult:
    """The VDOS of the mass-weighted VACF ``res`` of atoms ``idx`` (one group), peaks judged."""
    out = vdos_from_vacf(res.lag_ps, res.vacf_sum[0], n_dof=spectrum_dof(run, idx) if n_dof is None else n_dof,
                         window=window, peak_prominence=peak_prominence,
                         velocities_estimated=res.velocities_estimated, notes=res.notes)
    return judge_peaks(out, _expected_motions(run, idx))


def _expected_motions(run: Run, idx: np.ndarray) -> tuple[Any, ...]:
    """Fast motions the topology and masses of the atoms used imply (timestep.expected_fast_motions)."""
    from phasewake.core.analyses.timestep import expected_fast_motions

    md = run.metadata
    top = run.topology
    if top is not None and idx.size != run.n_atoms:
        top = top.subset(idx)
    return expected_fast_motions(top, np.asarray(run.masses_amu)[idx], n_constraints=md.n_constraints,
                                 constraints_words=md.constraints)


def judge_peaks(result: VDOSResult, expected: Sequence[Any] = ()) -> VDOSResult:
    """The spectrum with every peak that is not a resolved motion marked (``Peak.not_a_motion``).

    A peak is only a motion when the frames resolve it: peaks in the top 20% below the Nyquist limit may
    be aliases of faster motions, and when a fast motion expected from the topology and masses
    (:func:`phasewake.core.analyses.timestep.expected_fast_motions`) lies beyond what the frames show, peaks where
    its band folds to (Nyquist-Shannon) may be its aliases. ``highest_significant_peak_cm1`` then counts
    motions only, and a note says in words what cannot be seen.
    """
    import dataclasses

    from phasewake.core.analyses.timestep import HXH_BEND_CM, alias_band, unresolved_motions

    dt = result.dt_ps
    ny = result.nyquist_cm1
    unres = unresolved_motions(list(expected), dt)
    # an unresolved X-H stretch: every hydrogen motion from the H-X-H bend up to the stretch (bends, wags,
    # model-specific stiff angles) may lie beyond the frames too; what of that band lies above Nyquist folds
    stretch = [e for e in unres if "stretch" in e.name]
    h_band = None if not stretch else max(stretch, key=lambda e: e.high_per_cm)
    peaks = []
    for p in result.peaks:
        why = ""
        hits = [e for e in unres if any(lo <= p.wavenumber_cm1 <= hi for lo, hi in alias_band(e, dt))]
        if hits:
            why = "may be an alias of " + " or ".join(e.words() for e in hits)
        elif h_band is not None and any(lo <= p.wavenumber_cm1 <= hi for lo, hi in
                                        alias_band(h_band, dt, low_per_cm=HXH_BEND_CM[0])):
            why = (f"may be an alias of a hydrogen motion between {HXH_BEND_CM[0]:.0f} and "
                   f"{h_band.high_per_cm:.0f} cm^-1 (bends up to the {h_band.name}), which the frames cannot show")
        elif p.wavenumber_cm1 >= 0.8 * ny:
            why = f"near the Nyquist limit {ny:.0f} cm^-1: not resolved, may be an alias of a faster motion"
        peaks.append(dataclasses.replace(p, not_a_motion=why))
    motions = [p for p in peaks if not p.not_a_motion]
    notes = list(result.notes)
    spacing_fs = dt * 1e3
    for e in unres:
        aliased = [p for p in peaks if e.words() in p.not_a_motion or (e is h_band and "hydrogen motion" in p.not_a_motion)]
        where = (", ".join(f"{p.wavenumber_cm1:.0f}" for p in aliased) + " cm^-1") if aliased else ""
        notes.append(f"{e.words()} cannot be seen at {spacing_fs:.3g} fs frames (Nyquist limit {ny:.0f} cm^-1; "
                     f"{e.source})" + (f": the peaks at {where} may be its aliases and are not counted as motions"
                                       if where else ""))
    return dataclasses.replace(result, peaks=tuple(peaks),
                               highest_significant_peak_cm1=motions[-1].wavenumber_cm1 if motions else None,
                               notes=tuple(notes), unresolved_motions=tuple(e.words() for e in unres))
