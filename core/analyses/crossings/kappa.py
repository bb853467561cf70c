"""Transmission coefficients of pooled replicas: counting, the reactive-flux kappa(t) and k / k_TST.

Counting: transitions per crossing of the dividing surface in the same direction. Reactive flux:
kappa(t) from the run's own crossings (:func:`reactive_flux`). TST: the rate through the surface from the
run's own distribution of q (:func:`phasewake.core.analyses.rates.tst_rate_from_counts`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from phasewake.core.analyses.crossings.events import _Replica
from phasewake.core.analyses.crossings.results import (
    RateEstimate,
    Trace,
    TransmissionCoefficient,
    TSTComparison,
)
from phasewake.core.analyses.rates import TSTRate, central_range, flux_factor, tst_rate_from_counts
from phasewake.core.errors import AnalysisError
from phasewake.core.progress import Progress, Work


def reactive_flux(q: np.ndarray, crossing_i0: np.ndarray, direction: np.ndarray, *, surface: float,
                  n_lags: int, block: int = 1 << 20) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Sums for the reactive-flux kappa(t) from one trajectory's own crossings.

    Bennett (1977) and Chandler (J. Chem. Phys. 68, 2959 (1978)) define
    kappa(t) = <q'(0) delta(q(0) - q*) theta(q(t) - q*)> / <q'(0) delta(q(0) - q*) theta(q'(0))>.
    Along one long equilibrium trajectory, delta(q(t) - q*) = sum_c delta(t - t_c) / |q'(t_c)| over its
    crossings c, so the time average turns into a sum over crossings in which each one is weighted by
    q'/|q'| = its direction s_c: kappa(t) = sum_c s_c theta(q(t_c + t) - q*) / N_+. Only directions
    are needed; the run must be long and in equilibrium (its crossings then sample the flux-weighted
    distribution at q*, which is what the reactive-flux average needs).

    Lag j uses frame i0 + 1 + j after a crossing between frames i0 and i0 + 1.

    Returns
    -------
    up_num, up_den, down_num, down_den : ndarray, shape (n_lags,)
        A->B: sum over crossings of s_c theta(q - q*) and the number of +1 crossings that reach lag j;
        B->A: the same with -s_c theta(q* - q) and the -1 crossings.
    """
    n = q.shape[0]
    lags = np.arange(n_lags)
    up_num = np.zeros(n_lags)
    up_den = np.zeros(n_lags)
    down_num = np.zeros(n_lags)
    down_den = np.zeros(n_lags)
    per = max(1, block // max(n_lags, 1))
    for s in range(0, crossing_i0.size, per):
        i0 = crossing_i0[s:s + per]
        d = direction[s:s + per].astype(float)
        idx = i0[:, None] + 1 + lags[None, :]
        valid = idx < n
        above = np.zeros(idx.shape, bool)
        above[valid] = q[idx[valid]] >= surface
        up = d > 0
        down = ~up
        # s_c theta(q - q*): +1 crossings add theta, -1 crossings subtract it.
        up_num += np.sum(np.where(valid, d[:, None] * above, 0.0), axis=0)
        up_den += np.sum(valid[up], axis=0)
        down_num += np.sum(np.where(valid, -d[:, None] * (~above), 0.0), axis=0)
        down_den += np.sum(valid[down], axis=0)
    return up_num, up_den, down_num, down_den


@dataclass(frozen=True)
class _Counting:
    up: float  # A->B transitions per +1 crossing
    down: float
    both: float
    n_up: int
    n_down: int


def counting_kappa(reps: Sequence[_Replica], events: np.ndarray) -> _Counting:
    """Transitions per crossing of known origin, per direction and pooled."""
    kcode = np.concatenate([r.kind_code for r in reps])
    known = kcode != 2
    up = known & (events["direction"] > 0)
    down = known & (events["direction"] < 0)
    n_up, n_down = int(np.count_nonzero(up)), int(np.count_nonzero(down))
    t_up = int(np.count_nonzero(up & (kcode == 0)))
    t_down = int(np.count_nonzero(down & (kcode == 0)))
    return _Counting(
        up=t_up / n_up if n_up else float("nan"), down=t_down / n_down if n_down else float("nan"),
        both=(t_up + t_down) / (n_up + n_down) if (n_up + n_down) else float("nan"), n_up=n_up, n_down=n_down)


def kappa_window(window_ps: tuple[float, float] | None, durations_ps: np.ndarray, dt: float) -> tuple[float, float]:
    """The plateau window of kappa(t): given, else from after most transition paths (and so most
    recrossing excursions) are over: the 90th percentile of path durations (at least 10 frames) to twice that."""
    if window_ps is None:
        base = float(np.percentile(durations_ps, 90)) if durations_ps.size else 10.0 * dt
        w0 = max(base, 10.0 * dt)
        return w0, max(2.0 * w0, 20.0 * dt)
    w0, w1 = float(window_ps[0]), float(window_ps[1])
    if not 0 <= w0 < w1:
        raise AnalysisError(f"the kappa window must be 0 <= t1 < t2 (got {w0:g}, {w1:g} ps)")
    return w0, w1


@dataclass
class _FluxSums:
    up_num: np.ndarray
    up_den: np.ndarray
    dn_num: np.ndarray
    dn_den: np.ndarray
    mean_f: float  # mean sub-frame position of the crossings used


def flux_sums(trs: Sequence[Trace], reps: Sequence[_Replica], *, surface: float, n_lags: int, dt: float,
              every: int, on: bool, progress_base: float, total: float) -> Work[_FluxSums]:
    """The reactive-flux sums of every replica with the median frame spacing (every ``every``-th crossing)."""
    sums = [np.zeros(n_lags) for _ in range(4)]
    f_sum = 0.0
    f_n = 0
    for k, (tr, r) in enumerate(zip(trs, reps)):
        if not on or not math.isclose(r.dt_ps, dt, rel_tol=1e-3):
            continue
        parts = reactive_flux(tr.values, r.crossing_i0[::every], r.events["direction"][::every],
                              surface=surface, n_lags=n_lags)
        for acc, part in zip(sums, parts):
            acc += part
        f_sum += float(r.crossing_f[::every].sum())
        f_n += int(r.crossing_f[::every].size)
        yield Progress(progress_base + k, total, "crossings: reactive flux")
    return _FluxSums(sums[0], sums[1], sums[2], sums[3], mean_f=f_sum / f_n if f_n else 0.5)


def transmission(counting: _Counting, sums: _FluxSums, *, dt: float, window: tuple[float, float],
                 rate_ab: RateEstimate, rate_ba: RateEstimate, kappa_time_series: bool,
                 warnings: list[str]) -> TransmissionCoefficient:
    """Counting and reactive-flux transmission coefficients (kappa(t) corrected for the slow relaxation)."""
    w0, w1 = window
    n_lags = sums.up_num.size
    lag = (np.arange(n_lags) + 1.0 - sums.mean_f) * dt
    with np.errstate(divide="ignore", invalid="ignore"):
        k_up = sums.up_num / sums.up_den
        k_dn = sums.dn_num / sums.dn_den
        k_all = (sums.up_num + sums.dn_num) / (sums.up_den + sums.dn_den)
    relax = (rate_ab.rate_per_ps if not rate_ab.upper_bound_only else 0.0) + \
            (rate_ba.rate_per_ps if not rate_ba.upper_bound_only else 0.0)
    if not math.isfinite(relax):
        relax = 0.0
    win = (lag >= w0) & (lag <= w1) & np.isfinite(k_all)
    if not np.any(win):
        win = np.isfinite(k_all) & (lag >= lag[-1] / 2)
    if kappa_time_series and relax * w1 > 0.3:
        warnings.append(
            f"the kappa(t) plateau window ({w0:.3g}-{w1:.3g} ps) is not short against 1/(k_AB + k_BA) = "
            f"{1 / relax:.3g} ps: the relaxation correction exp((k_AB + k_BA) t) = {math.exp(relax * w1):.2f} "
            "is large and the reactive-flux kappa unreliable; trust the counting kappa or k/k_TST more")
    plateau_raw = float(np.mean(k_all[win])) if np.any(win) else float("nan")
    plateau = float(np.mean((k_all * np.exp(relax * lag))[win])) if np.any(win) else float("nan")
    return TransmissionCoefficient(
        counting_up=counting.up, counting_down=counting.down, counting=counting.both,
        n_crossings_up=counting.n_up, n_crossings_down=counting.n_down,
        lag_ps=lag, kappa_up=k_up, kappa_down=k_dn, kappa=k_all, n_used=sums.up_den + sums.dn_den,
        plateau_window_ps=(float(w0), float(w1)), plateau=plateau, plateau_raw=plateau_raw,
        relaxation_rate_per_ps=relax,
        assumptions=(
            "reactive flux from the run's own crossings (Bennett 1977; Chandler 1978): the run is in "
            "equilibrium and long enough that its crossings sample the flux through the surface; the "
            "plateau lies between the barrier-crossing time and 1/k, and kappa(t) is multiplied by "
            "exp((k_AB + k_BA) t) to undo the slow two-state relaxation (Chandler 1978); recrossings "
            "faster than the frame spacing are not seen (kappa is then biased high)"
        ),
    )


def spread_blocks(x: np.ndarray, fraction: float, n_blocks: int = 200) -> np.ndarray:
    """About ``fraction`` of x as n_blocks contiguous blocks spread evenly (cache-friendly, unlike a stride)."""
    n = x.shape[0]
    if fraction >= 1.0 or n <= n_blocks:
        return x
    length = max(1, int(n * fraction / n_blocks))
    starts = np.linspace(0, n - length, n_blocks).astype(np.int64)
    return np.concatenate([x[a:a + length] for a in starts])


def coarse_sample(trs: Sequence[Trace]) -> tuple[np.ndarray, np.ndarray | None]:
    """At most ~2e6 frames (all frames of shorter runs) of q (and dq/dt when every replica has it) in evenly
    spread contiguous blocks: MD frames are correlated, so this loses little, and a long series is not
    read again in full."""
    n_all = sum(int(tr.values.shape[0]) for tr in trs)
    frac = min(1.0, 2_000_000 / n_all)
    coarse = np.concatenate([spread_blocks(tr.values, frac) for tr in trs])
    coarse_v = (np.concatenate([spread_blocks(tr.velocity, frac) for tr in trs])  # type: ignore[arg-type]
                if all(tr.velocity is not None for tr in trs) else None)
    return coarse, coarse_v


def tst_comparison(coarse: np.ndarray, coarse_v: np.ndarray | None, *, surface: float, unit: str,
                   kT_over_m_eff: float | None, rate_ab: RateEstimate, rate_ba: RateEstimate,
                   warnings: list[str]) -> TSTComparison | None:
    """TST from the run's own distribution of q, compared with the committed-state rates (k / k_TST)."""
    lo_c, hi_c = central_range(coarse)
    band = (hi_c - lo_c) / 100.0
    near = np.abs(coarse - surface) < 0.5 * band
    n_near = int(np.count_nonzero(near))
    if coarse_v is not None:
        flux, fsource = flux_factor(coarse_v[near], None)
    else:
        flux, fsource = flux_factor(None, kT_over_m_eff)
    try:
        tst: TSTRate | None = tst_rate_from_counts(
            surface=surface, unit=unit, n_samples=int(coarse.size), n_near=n_near,
            n_below=int(np.count_nonzero(coarse < surface)), bin_width=band,
            flux_factor=flux, flux_source=fsource,
            histogram=np.histogram(coarse, bins=40, range=(lo_c, hi_c)) if hi_c > lo_c else None)
    except AnalysisError as exc:
        warnings.append(f"no TST estimate: {exc}")
        return None
    if tst is not None and math.isfinite(tst.flux_factor_unit_per_ps):
        ka = rate_ab.rate_per_ps / tst.rate_up_per_ps if tst.rate_up_per_ps > 0 else float("nan")
        kb = rate_ba.rate_per_ps / tst.rate_down_per_ps if tst.rate_down_per_ps > 0 else float("nan")
        return TSTComparison(
            tst=tst, kappa_up=float(ka), kappa_down=float(kb),
            note="k / k_TST uses the committed-state rates and the TST rate of the same surface; it should "
                 "agree with the reactive-flux plateau when the cores are well separated from the barrier",
        )
    if tst is not None:
        warnings.append("no TST estimate: neither velocities nor kT/m_eff are known")
    return None
