"""Time-step checks: the fastest motion, steps per period, Nyquist, and dt^2 scaling between two runs.

The fastest motion is the highest-frequency significant peak of the mass-weighted velocity power
spectrum (vibrational density of states up to a factor; Dickey and Paskin 1969), streamed by
:mod:`phasewake.core.analyses.motion_spectrum`.

Units: ps, 1/ps (frequency), cm^-1 (wavenumber), fs only in messages.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from phasewake.core.analyses.verdicts import (
    EXPLANATIONS,
    THRESHOLDS,
    Explanation,
    Threshold,
    Verdict,
    judge,
    register,
)
from phasewake.core.errors import AnalysisError

C_CM_PER_PS = 2.99792458e-2  # speed of light, exact: 2.99792458e10 cm/s = 2.99792458e-2 cm/ps

register(
    Threshold("timestep.fastest_period", caution=10.0, problem=5.0, unit="steps per period",
              source="common practice (time step <= fastest period / 10)", higher_is_worse=False,
              description="fastest vibrational period divided by the integration time step"),
    Explanation(
        title="Time step against the fastest motion",
        what="How many integration steps resolve one period of the fastest motion in the run.",
        method="The highest-frequency significant peak of the mass-weighted velocity power spectrum "
               "(Welch segments, Hann window), or the upper edge of a broad band (liquids), gives the "
               "period T; the check is T / dt. For a harmonic "
               "mode under velocity Verlet the energy fluctuation ratio is (2 pi dt / T)^2 / 4, so "
               "T/dt = 10 gives about 0.1 (from the shadow Hamiltonian of velocity Verlet, Tuckerman 2010 eq. 3.13.3).",
        threshold="Fewer than 10 steps per period caution, fewer than 5 a problem: common practice.",
        advice="Reduce the time step, or constrain the fastest bonds (bonds to hydrogen) or use heavier "
               "hydrogens, then re-check the energy conservation.",
    ),
)
register(
    Threshold("timestep.nyquist", caution=4.0, problem=2.0, unit="frames per period",
              source="Nyquist-Shannon sampling: at least 2 frames per period (caution below 4: common practice)",
              higher_is_worse=False,
              description="fastest period seen divided by the frame spacing"),
    Explanation(
        title="Frame spacing against the fastest motion",
        what="Whether the saved frames are close enough in time to see the fastest motion at all.",
        method="The fastest period found, divided by the spacing between frames. A peak close to the "
               "Nyquist frequency 1/(2 spacing) may be an aliased faster motion.",
        threshold="Fewer than 2 frames per period cannot resolve it (Nyquist); fewer than 4 is a caution "
                  "(common practice).",
        advice="Save velocities more often (a short extra run is enough) to check the time step. A motion "
               "seen in the frames lies at or below the Nyquist frequency, so the frequency found is a lower "
               "bound on the fastest motion (its period an upper bound): coarse frames can hide a faster one.",
    ),
)
register(
    Threshold("timestep.expected_motion", caution=2.0, problem=2.0, unit="frames per period",
              source="Nyquist-Shannon sampling (at least 2 frames per period); the expected stretch and bend "
                     "frequencies are common practice (O-H 3400-3700, N-H 3300-3500, C-H 2900-3100, "
                     "S-H 2550-2600 cm^-1; H-X-H bends near 1600 cm^-1)",
              higher_is_worse=False,
              description="frames per period of the fastest motion expected from the topology and masses"),
    Explanation(
        title="Fast motions the frames cannot show",
        what="Whether the frames are close enough in time to show the fast motions the topology and masses "
             "imply: stretches of bonds to hydrogen that are not constrained, and H-X-H bends.",
        method="Bonds to hydrogen in the topology (or, without bonds, atoms lighter than 4 amu) that are not "
               "held rigid (metadata, the user's count, or the rigid pairs found in the positions). Their usual "
               "stretch frequencies, scaled by the square root of the reduced-mass ratio when the masses differ "
               "from the usual ones (heavy hydrogens), are compared with the Nyquist limit 1/(2 c spacing).",
        threshold="Fewer than 2 frames per period of the expected motion: it cannot be seen, and any peak of the "
                  "spectrum may be its alias (Nyquist-Shannon).",
        advice="The time-step verdict then rests on the expected motion's period and on the energy "
               "conservation, not on the spectrum. Save velocities every 1-2 fs in a short extra run to see "
               "the fast motions.",
    ),
)

# Usual stretch frequencies of bonds to hydrogen and of H-X-H bends (cm^-1): common practice
# (infrared tables; liquid-phase O-H is broad and red-shifted from the gas-phase 3657/3756).
XH_STRETCH_CM: dict[str, tuple[float, float]] = {
    "O": (3400.0, 3700.0), "N": (3300.0, 3500.0), "C": (2900.0, 3100.0), "S": (2550.0, 2600.0),
}
XH_STRETCH_OTHER_CM = (2000.0, 3700.0)  # other or unknown partners: a wide band
HXH_BEND_CM = (1500.0, 1700.0)
_USUAL_H_MASS = 1.008
_USUAL_MASS = {"O": 15.999, "N": 14.007, "C": 12.011, "S": 32.06}
LIGHT_ATOM_AMU = 4.0  # hydrogen and deuterium, also repartitioned hydrogens (~3 amu)
register(
    Threshold("timestep.scaling", caution=0.25, problem=0.5, unit="",
              source="second-order symplectic integrators: sigma_E proportional to dt^2 (Hairer, Lubich "
                     "and Wanner 2006); tolerance common practice",
              description="|measured exponent - 2| of sigma_E against the time step between two runs"),
    Explanation(
        title="Energy fluctuation against time step (two runs)",
        what="For a second-order symplectic integrator (velocity Verlet, leapfrog) the energy error is "
             "O(dt^2): halving the step divides the fluctuation by 4.",
        method="Exponent p = ln(sigma_E1 / sigma_E2) / ln(dt1 / dt2) from two runs of one system.",
        threshold="|p - 2| > 0.25 caution, > 0.5 problem: common practice.",
        advice="An exponent far from 2 means the larger step is outside the asymptotic regime (too "
               "large), or the runs differ in more than the step (cut-offs, constraints, precision).",
    ),
)


@dataclass(frozen=True)
class FastestMotion:
    """The fastest motion in a velocity spectrum: a sharp peak, or the upper edge of a broad band."""

    frequency_per_ps: float
    period_ps: float
    wavenumber_per_cm: float
    method: str  # "highest significant peak" or "upper edge of a broad band"
    peak_frequency_per_ps: float  # highest significant peak
    band_edge_per_ps: float  # highest frequency with power >= edge_fraction of the maximum
    resolution_per_ps: float
    nyquist_per_ps: float
    near_nyquist: bool  # the fastest motion lies in the top 20% of the band: possibly aliased
    settings: dict[str, Any] = field(default_factory=dict)


def fastest_motion(freq_per_ps: np.ndarray, power: np.ndarray, *, min_relative_prominence: float = 0.05,
                   edge_fraction: float = 0.05, broad_band_bins: int = 3,
                   near_nyquist_fraction: float = 0.8) -> FastestMotion:
    """The fastest motion of a velocity power spectrum.

    The highest-frequency peak whose prominence is at least ``min_relative_prominence`` of the largest
    one. Liquids show broad bands instead of lines (librations of rigid water reach ~1000 cm^-1 with
    no peak there), so the upper band edge (highest frequency where the power is still
    ``edge_fraction`` of the maximum, interpolated between bins) is used instead when it lies more than
    ``broad_band_bins`` bins above that peak. Both fractions are common practice. The zero-frequency bin
    (centre-of-mass drift, diffusion) is not a vibration and is ignored.

    Parameters
    ----------
    freq_per_ps : ndarray, shape (n,), 1/ps, evenly spaced from 0
    power : ndarray, shape (n,)
    """
    from scipy.signal import find_peaks

    f = np.asarray(freq_per_ps, dtype=np.float64)
    p = np.asarray(power, dtype=np.float64)
    if f.size < 4 or not np.any(p[1:] > 0):
        raise AnalysisError("the velocity spectrum is empty: no motion to time")
    df = float(f[1] - f[0])
    padded = np.concatenate([[0.0], p[1:], [0.0]])  # so peaks at either end of the band count
    peaks, props = find_peaks(padded, prominence=0.0)
    if peaks.size == 0:
        raise AnalysisError("no peak in the velocity spectrum")
    prom = props["prominences"]
    top = int(peaks[prom >= min_relative_prominence * prom.max()].max())  # padded[i] == p[i] for i >= 1
    f_peak = float(f[top])
    pm = float(p[1:].max())
    thr = edge_fraction * pm
    above = np.nonzero(p[1:] >= thr)[0] + 1
    i = int(above.max())
    edge = float(f[i])
    if i + 1 < p.size and p[i] > p[i + 1]:
        edge += df * float((p[i] - thr) / (p[i] - p[i + 1]))
    if edge > f_peak + broad_band_bins * df:
        fmax, method = edge, f"upper edge of a broad band (power >= {edge_fraction:g} of the maximum)"
    else:
        fmax, method = f_peak, "highest significant peak"
    nyq = float(f[-1])
    return FastestMotion(
        frequency_per_ps=fmax, period_ps=1.0 / fmax, wavenumber_per_cm=fmax / C_CM_PER_PS, method=method,
        peak_frequency_per_ps=f_peak, band_edge_per_ps=edge, resolution_per_ps=df, nyquist_per_ps=nyq,
        near_nyquist=bool(fmax >= near_nyquist_fraction * nyq),
        settings={"min_relative_prominence": min_relative_prominence, "edge_fraction": edge_fraction,
                  "broad_band_bins": broad_band_bins, "near_nyquist_fraction": near_nyquist_fraction},
    )


@dataclass(frozen=True)
class TimestepCheck:
    timestep_ps: float | None
    timestep_source: str
    frame_spacing_ps: float
    fastest_period_ps: float
    steps_per_period: float | None  # period / dt
    frames_per_period: float  # period / frame spacing
    recommended_max_timestep_ps: float  # period / 10 (common practice)


def check_timestep(fastest_period_ps: float, frame_spacing_ps: float, timestep_ps: float | None,
                   *, timestep_source: str = "") -> TimestepCheck:
    """Steps and frames per fastest period; the common-practice limit period / 10."""
    return TimestepCheck(
        timestep_ps=timestep_ps, timestep_source=timestep_source, frame_spacing_ps=frame_spacing_ps,
        fastest_period_ps=fastest_period_ps,
        steps_per_period=None if not timestep_ps else fastest_period_ps / timestep_ps,
        frames_per_period=fastest_period_ps / frame_spacing_ps,
        recommended_max_timestep_ps=fastest_period_ps / 10.0,
    )


# ---------------------------------------------------------------------------------------------------
# dt^2 scaling between two runs
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ScalingResult:
    """Energy fluctuation against time step for two runs of one system."""

    timestep_1_ps: float
    timestep_2_ps: float
    sigma_1_kJ_per_mol: float
    sigma_2_kJ_per_mol: float
    measured_ratio: float  # sigma_1 / sigma_2
    expected_ratio: float  # (dt1 / dt2)^2
    exponent: float  # ln(sigma ratio) / ln(dt ratio); 2 expected
    expected_exponent: float
    fluctuation_ratio_1: float | None  # sigma_E/sigma_K of each run
    fluctuation_ratio_2: float | None


def timestep_scaling(timestep_1_ps: float, sigma_1_kJ_per_mol: float, timestep_2_ps: float,
                     sigma_2_kJ_per_mol: float, *, ratio_1: float | None = None,
                     ratio_2: float | None = None, order: int = 2) -> ScalingResult:
    """Measured exponent p of sigma_E ~ dt^p between two runs (expected p = order = 2 for velocity Verlet).

    Hairer, Lubich and Wanner, Geometric Numerical Integration (2006): energy error O(dt^p) for a
    symplectic method of order p.
    """
    if timestep_1_ps <= 0 or timestep_2_ps <= 0:
        raise AnalysisError("time steps must be positive to compare runs")
    if math.isclose(timestep_1_ps, timestep_2_ps, rel_tol=1e-9):
        raise AnalysisError(f"both runs have the time step {timestep_1_ps * 1e3:g} fs: nothing to compare")
    if not (sigma_1_kJ_per_mol > 0 and sigma_2_kJ_per_mol > 0):
        raise AnalysisError("an energy fluctuation is zero: the scaling exponent is undefined")
    r = sigma_1_kJ_per_mol / sigma_2_kJ_per_mol
    q = timestep_1_ps / timestep_2_ps
    return ScalingResult(timestep_1_ps=timestep_1_ps, timestep_2_ps=timestep_2_ps,
                         sigma_1_kJ_per_mol=sigma_1_kJ_per_mol, sigma_2_kJ_per_mol=sigma_2_kJ_per_mol,
                         measured_ratio=r, expected_ratio=q ** order, exponent=math.log(r) / math.log(q),
                         expected_exponent=float(order), fluctuation_ratio_1=ratio_1, fluctuation_ratio_2=ratio_2)


# ---------------------------------------------------------------------------------------------------
# Fast motions expected from the topology and masses, and the time-step verdicts
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ExpectedMotion:
    """A fast motion the topology and masses imply (unconstrained bonds to hydrogen, H-X-H bends)."""

    name: str  # "O-H stretch"
    low_per_cm: float
    high_per_cm: float
    count: int  # bonds or angles of this kind
    source: str  # where it was found, in words
    assumed: bool = False  # True: nothing says whether these bonds are constrained (assumed free)

    @property
    def shortest_period_ps(self) -> float:
        return 1.0 / (self.high_per_cm * C_CM_PER_PS)

    def words(self) -> str:
        return f"the {self.name} near {self.low_per_cm:.0f}-{self.high_per_cm:.0f} cm^-1"


def _xh_stretches(bonds: list[tuple[int, int]], atoms: list[Any], m: np.ndarray,
                  free: Any) -> tuple[dict[str, list[float]], dict[int, list[int]]]:
    """X-H stretch bands by element of X ({name: [low, high, count]}, cm^-1, scaled by the reduced mass) and
    the hydrogens on each X, over the bonds to hydrogen that ``free(h, x, in_water)`` keeps."""
    stretch: dict[str, list[float]] = {}
    neighbours_h: dict[int, list[int]] = {}
    for a, b in bonds:
        if a >= m.size or b >= m.size:
            continue
        light_a, light_b = 0.0 < m[a] < LIGHT_ATOM_AMU, 0.0 < m[b] < LIGHT_ATOM_AMU
        if light_a == light_b:
            continue
        h, x = (a, b) if light_a else (b, a)
        if not free(h, x, bool(atoms[x].residue.is_water)):
            continue
        el = atoms[x].element.symbol if atoms[x].element is not None else ""
        lo, hi = XH_STRETCH_CM.get(el, XH_STRETCH_OTHER_CM)
        mu0 = _USUAL_MASS.get(el, m[x]) * _USUAL_H_MASS / (_USUAL_MASS.get(el, m[x]) + _USUAL_H_MASS)
        mu = m[x] * m[h] / (m[x] + m[h])
        scale = math.sqrt(mu0 / mu) if mu > 0 else 1.0
        key = f"{el or 'X'}-H stretch"
        stretch.setdefault(key, [lo * scale, hi * scale, 0.0])
        cur = stretch[key]
        cur[0], cur[1], cur[2] = min(cur[0], lo * scale), max(cur[1], hi * scale), cur[2] + 1
        neighbours_h.setdefault(x, []).append(h)
    return stretch, neighbours_h


def expected_fast_motions(topology: Any, masses_amu: np.ndarray, *, n_constraints: int | None = None,
                          rigid_pairs: np.ndarray | None = None,
                          constraints_words: str | None = None) -> tuple[ExpectedMotion, ...]:
    """Fast motions the run must contain unless constrained: X-H stretches and H-X-H bends.

    A bond to hydrogen counts when it is not held rigid: with ``n_constraints == 0`` none is; with
    ``rigid_pairs`` (pairs found rigid in the positions) those are not counted; with ``constraints_words``
    naming bonds to hydrogen (or all bonds, or rigid water for water) they are taken as constrained;
    otherwise (unknown) they count, said in ``source``. Without topology bonds, atoms lighter than
    ``LIGHT_ATOM_AMU`` stand for X-H bonds of unknown partner. Frequencies scale with the square root of
    the usual over the actual reduced mass (heavy hydrogens).
    """
    m = np.asarray(masses_amu, dtype=float)
    words = (constraints_words or "").lower()
    rigid = set()
    if rigid_pairs is not None:
        rigid = {(int(min(a, b)), int(max(a, b))) for a, b in np.asarray(rigid_pairs).reshape(-1, 2)}
    all_h = any(w in words for w in ("hbond", "h-bond", "bonds to h", "hydrogen", "all bonds", "allbond", "h-angle"))
    rigid_water = "water" in words or all_h
    assumed = False
    if n_constraints == 0:
        how = "not constrained (no constraints)"
    elif rigid_pairs is not None:
        how = "not among the rigid pairs found in the positions"
    elif words:
        how = f"constraints: {constraints_words}"
    else:
        how = "constraints unknown: assumed free"
        assumed = True

    out: list[ExpectedMotion] = []
    bonds: list[tuple[int, int]] = []
    if topology is not None:
        bonds = [(int(b[0].index), int(b[1].index)) for b in topology.bonds]
    if bonds:
        def free(h: int, x: int, water: bool) -> bool:
            if n_constraints == 0:
                return True
            return ((min(h, x), max(h, x)) not in rigid
                    and not (rigid_pairs is None and (all_h or (water and rigid_water))))

        stretch, neighbours_h = _xh_stretches(bonds, list(topology.atoms), m, free)
        n_xh = int(sum(v[2] for v in stretch.values()))
        if assumed and n_constraints is not None and n_constraints >= n_xh:
            return ()  # enough constraints for every bond to hydrogen: taken as constrained
        for key, (lo, hi, cnt) in sorted(stretch.items(), key=lambda kv: -kv[1][1]):
            out.append(ExpectedMotion(key, lo, hi, int(cnt), f"topology: {int(cnt)} bonds, {how}", assumed))
        bends = sum(len(hs) * (len(hs) - 1) // 2 for hs in neighbours_h.values())
        if bends:
            out.append(ExpectedMotion("H-X-H bend", HXH_BEND_CM[0], HXH_BEND_CM[1], bends,
                                      f"topology: {bends} angles between unconstrained bonds to hydrogen", assumed))
        return tuple(out)
    n_light = int(np.count_nonzero((m > 0) & (m < LIGHT_ATOM_AMU)))
    if n_light and not all_h and not (n_constraints is not None and n_constraints >= n_light):
        mh = float(np.median(m[(m > 0) & (m < LIGHT_ATOM_AMU)]))
        scale = math.sqrt(_USUAL_H_MASS / mh)  # X much heavier than H: the reduced mass is about m_H
        lo, hi = XH_STRETCH_OTHER_CM
        out.append(ExpectedMotion("X-H stretch", lo * scale, 3700.0 * scale, n_light,
                                  f"masses: {n_light} atoms lighter than {LIGHT_ATOM_AMU:g} amu (hydrogen), "
                                  f"bonds unknown, {how}", assumed or n_constraints is None))
    return tuple(out)


def nyquist_per_cm(frame_spacing_ps: float) -> float:
    return 1.0 / (2.0 * frame_spacing_ps * C_CM_PER_PS)


def unresolved_motions(expected: tuple[ExpectedMotion, ...] | list[ExpectedMotion], frame_spacing_ps: float,
                       ) -> list[ExpectedMotion]:
    """The expected motions the frames cannot show: upper frequency at or above 0.8 of the Nyquist limit
    (the margin of :func:`fastest_motion`'s near-Nyquist rule)."""
    ny = nyquist_per_cm(frame_spacing_ps)
    return [e for e in expected if e.high_per_cm >= 0.8 * ny]


def alias_of(wavenumber_per_cm: float, frame_spacing_ps: float) -> float:
    """Where a motion at ``wavenumber_per_cm`` appears in frames ``frame_spacing_ps`` apart (folding about
    the Nyquist limit)."""
    ny = nyquist_per_cm(frame_spacing_ps)
    r = wavenumber_per_cm % (2.0 * ny)
    return float(2.0 * ny - r if r > ny else r)


def alias_band(motion: ExpectedMotion, frame_spacing_ps: float, margin: float = 0.05, *,
               low_per_cm: float | None = None) -> list[tuple[float, float]]:
    """Wavenumber intervals (cm^-1) where the part of ``motion``'s band (widened by ``margin``; from
    ``low_per_cm`` when given) above the Nyquist limit appears after folding. The part below the limit is
    the motion itself, not an alias."""
    ny = nyquist_per_cm(frame_spacing_ps)
    lo = (motion.low_per_cm if low_per_cm is None else low_per_cm) * (1 - margin)
    hi = motion.high_per_cm * (1 + margin)
    lo = max(lo, ny)
    out: list[tuple[float, float]] = []
    if not lo < hi:
        return out
    for k in range(int(lo // (2 * ny)), int(hi // (2 * ny)) + 2):
        base = 2 * ny * k
        for a, b, flip in ((base, base + ny, False), (base + ny, base + 2 * ny, True)):
            x0, x1 = max(lo, a), min(hi, b)
            if x0 < x1:
                y0, y1 = (x0 - a, x1 - a) if not flip else (b - x1, b - x0)
                out.append((float(y0), float(y1)))
    return out


@dataclass(frozen=True)
class TimestepJudgement:
    """What the time-step verdict rests on: the period used, why, and what the frames cannot show."""

    period_ps: float | None  # the fastest period the verdict uses
    basis: str  # words: "the spectrum's peak", "the expected O-H stretch (topology)", ...
    upper_bound: bool  # the period is only an upper bound (fastest peak near Nyquist, nothing expected)
    unresolved: tuple[ExpectedMotion, ...]
    expected: tuple[ExpectedMotion, ...]
    nyquist_per_cm: float
    frame_spacing_ps: float
    assumed: bool = False  # the period comes from an expected motion whose constraints are unknown


ASSUMED_WORDS = ("; this rests on an assumption: nothing in the files says whether these bonds are constrained "
                 "(give --constraints N, or the topology, to settle it), so it is a caution, not a problem")


def judge_basis(fastest: FastestMotion | None, expected: tuple[ExpectedMotion, ...] | list[ExpectedMotion],
                frame_spacing_ps: float) -> TimestepJudgement:
    """The fastest period to judge the time step by.

    The spectrum's fastest motion counts only when it is resolved: not near the Nyquist limit, and no
    expected fast motion lies beyond what the frames show (it could be an alias). Otherwise the period of
    the fastest expected motion (its upper frequency: the shortest period) is used; with nothing expected
    and a peak near Nyquist, the spectrum's period is kept as an upper bound.
    """
    exp = tuple(expected)
    unres = tuple(unresolved_motions(exp, frame_spacing_ps))
    ny = nyquist_per_cm(frame_spacing_ps)
    if fastest is not None and not fastest.near_nyquist and not unres:
        return TimestepJudgement(fastest.period_ps, f"the spectrum's fastest motion {fastest.wavenumber_per_cm:.0f} "
                                 f"cm^-1 ({fastest.method})", False, unres, exp, ny, frame_spacing_ps)
    if unres or (fastest is None and exp):
        e = min(unres or exp, key=lambda m: m.shortest_period_ps)
        why = ", which the frames cannot show" if unres else ""
        return TimestepJudgement(e.shortest_period_ps, f"{e.words()} ({e.source}){why}", False, unres, exp, ny,
                                 frame_spacing_ps, assumed=e.assumed)
    if fastest is not None:
        return TimestepJudgement(fastest.period_ps, f"the spectrum's fastest motion {fastest.wavenumber_per_cm:.0f} "
                                 f"cm^-1 ({fastest.method}), near the Nyquist limit {ny:.0f} cm^-1: a faster motion "
                                 "may be hidden, so this period is an upper bound", True, unres, exp, ny,
                                 frame_spacing_ps)
    return TimestepJudgement(None, "no fastest motion known", False, unres, exp, ny, frame_spacing_ps)


def timestep_verdicts(fastest: FastestMotion | None, frame_spacing_ps: float, timestep_ps: float | None,
                      timestep_source: str, expected: tuple[ExpectedMotion, ...] | list[ExpectedMotion] = (),
                      *, group: str = "all atoms") -> list[Verdict]:
    """The time-step and frame-spacing verdicts (``timestep.fastest_period``, ``timestep.nyquist``,
    ``timestep.expected_motion``), judged on :func:`judge_basis`.

    Never "ok" on a period that is only an upper bound (a peak near the Nyquist frequency, which may be an
    alias of a faster motion): a caution at best.
    """
    jb = judge_basis(fastest, expected, frame_spacing_ps)
    spacing_fs = frame_spacing_ps * 1e3
    cant_see = "; ".join(f"{e.words()} cannot be seen at {spacing_fs:.3g} fs frames" for e in jb.unresolved)
    out = [_step_verdict(jb, fastest, timestep_ps, timestep_source, group, cant_see)]
    if fastest is not None:
        out.append(_about_the_frames(_nyquist_verdict(jb, fastest, frame_spacing_ps)))
    if jb.expected:
        out.append(_about_the_frames(_expected_verdict(jb, frame_spacing_ps, cant_see)))
    return out


def _src(kind: str) -> str:
    return THRESHOLDS[kind].source


def _step_verdict(jb: TimestepJudgement, fastest: FastestMotion | None, timestep_ps: float | None, timestep_source: str,
                  group: str, cant_see: str) -> Verdict:
    """The time step against the fastest period (``timestep.fastest_period``)."""
    if jb.period_ps is None:
        return Verdict("timestep.fastest_period", "info", "Time step", None, "", "not checked: no fastest "
                       "motion known (no velocity spectrum and no fast motion expected from the topology)",
                       threshold=THRESHOLDS["timestep.fastest_period"])
    if not timestep_ps:
        return Verdict("timestep.fastest_period", "info", "Time step", None, "steps per period",
                       f"fastest period {jb.period_ps * 1e3:.3g} fs from {jb.basis}; the time step is unknown "
                       f"(give --timestep FS); common practice asks for at most {jb.period_ps * 1e2:.3g} fs",
                       threshold=THRESHOLDS["timestep.fastest_period"])
    spp = jb.period_ps / timestep_ps
    bound = "at most " if jb.upper_bound else ""
    msg = (f"dt = {timestep_ps * 1e3:.4g} fs ({timestep_source}) against the fastest period "
           f"{jb.period_ps * 1e3:.4g} fs from {jb.basis}: {bound}{spp:.3g} steps per period, limit "
           f"period/10 = {jb.period_ps * 1e2:.3g} fs ({_src('timestep.fastest_period')})")
    if jb.unresolved:
        msg += (f". {cant_see[0].upper() + cant_see[1:]}: the verdict rests on the expected motion from the "
                "topology and masses and on the energy conservation (see its verdicts), not on the spectrum's "
                "peaks, which may be aliases")
    if fastest is not None and group != "all atoms" and not jb.unresolved and not jb.upper_bound:
        msg += f" (fastest motion in {group})"
    v = judge("timestep.fastest_period", spp, title="Time step", unit="steps per period", message=msg,
              advice=EXPLANATIONS["timestep.fastest_period"].advice,
              details={"period_ps": jb.period_ps, "basis": jb.basis, "upper_bound": jb.upper_bound})
    if jb.assumed and v.level == "problem":
        v = replace(v, level="caution", message=msg + ASSUMED_WORDS)
    if jb.upper_bound and v.level == "ok":
        v = replace(v, level="caution", message=msg + "; the spectrum cannot show whether a faster motion "
                    "exists, so 'ok' cannot be concluded")
    return v if v.level != "ok" else replace(v, advice="")


def _nyquist_verdict(jb: TimestepJudgement, fastest: FastestMotion, frame_spacing_ps: float) -> Verdict:
    """The frames against the fastest motion seen (``timestep.nyquist``)."""
    fpp = fastest.period_ps / frame_spacing_ps
    msg = (f"frame spacing {frame_spacing_ps * 1e3:.4g} fs gives {fpp:.3g} frames per period of the fastest motion "
           f"seen ({fastest.wavenumber_per_cm:.0f} cm^-1; Nyquist limit {jb.nyquist_per_cm:.0f} cm^-1). A motion seen "
           f"in the frames is at or below the Nyquist limit, so {fastest.wavenumber_per_cm:.0f} cm^-1 is a lower "
           f"bound on the fastest frequency and {fastest.period_ps * 1e3:.3g} fs an upper bound on the fastest "
           f"period ({_src('timestep.nyquist')})")
    v = judge("timestep.nyquist", fpp, title="Frame spacing vs fastest motion", unit="frames per period",
              message=msg, advice=EXPLANATIONS["timestep.nyquist"].advice)
    if fastest.near_nyquist and v.level == "ok":
        v = replace(v, level="caution", message=msg + "; the peak lies near the Nyquist frequency: it is not "
                    "resolved and may be an aliased faster motion")
    return v


def _expected_verdict(jb: TimestepJudgement, frame_spacing_ps: float, cant_see: str) -> Verdict:
    """The frames against the fast motions the topology and masses imply (``timestep.expected_motion``)."""
    fastest_exp = min(jb.expected, key=lambda e: e.shortest_period_ps)
    fpp = fastest_exp.shortest_period_ps / frame_spacing_ps
    if jb.unresolved:
        msg = (f"{cant_see} (Nyquist limit {jb.nyquist_per_cm:.0f} cm^-1; {fpp:.2g} frames per "
               f"{fastest_exp.shortest_period_ps * 1e3:.3g} fs period); spectrum peaks may be its aliases "
               f"({_src('timestep.expected_motion')})")
    else:
        msg = (f"{fastest_exp.words()} ({fastest_exp.source}) is resolved: {fpp:.3g} frames per "
               f"{fastest_exp.shortest_period_ps * 1e3:.3g} fs period (Nyquist limit {jb.nyquist_per_cm:.0f} cm^-1)")
    v = judge("timestep.expected_motion", fpp, title="Frames vs expected fast motions", unit="frames per period",
              message=msg, advice=EXPLANATIONS["timestep.expected_motion"].advice,
              details={"unresolved": [e.name for e in jb.unresolved]})
    if fastest_exp.assumed and v.level == "problem":
        v = replace(v, level="caution", message=msg + ASSUMED_WORDS)
    if jb.unresolved and v.level == "ok":  # between 0.8 and 1 of Nyquist: not resolved either
        v = replace(v, level="caution")
    return v


FRAMES_NOT_THE_RUN = ("; this limits what the frames and their spectrum can show, not the run itself (frames are "
                      "usually written far less often than every step): the time step is judged above")


def _about_the_frames(v: Verdict) -> Verdict:
    """A frame-spacing verdict says what the frames can show; it never flags the run. Unresolved or
    near-Nyquist motions are "info" with that said (never "ok"); the time-step verdict carries the judgement."""
    if v.level == "ok":
        return replace(v, advice="")
    if v.level in ("caution", "problem"):
        return replace(v, level="info", message=v.message + FRAMES_NOT_THE_RUN)
    return v
