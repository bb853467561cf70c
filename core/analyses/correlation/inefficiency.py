"""Statistical inefficiency g (Sokal, Geyer, first zero, and the automatic choice) and effective sample size."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from phasewake.core.analyses import verdicts
from phasewake.core.analyses.correlation.acf import (
    _ADAPTIVE_ABOVE,
    _FIRST_LAG,
    AUTO,
    METHODS,
    OSCILLATION_NOISE_SIGMAS,
    Method,
    _as_float_array,
    _autocovariance_sums,
    one_series,
)
from phasewake.core.analyses.correlation.blocking import blocking
from phasewake.core.errors import AnalysisError

# Statistical inefficiency
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _GEstimate:
    g: np.ndarray  # shape (...), samples
    window: np.ndarray  # shape (...), lags summed (int)
    converged: np.ndarray  # shape (...), bool: the window condition was met inside the lags computed


def _g_from_rho(rho: np.ndarray, method: str, c: float, n: int) -> _GEstimate:
    """g from the biased autocorrelation rho(..., 0..K) along the last axis."""
    k_max = rho.shape[-1] - 1
    if method == "sokal":
        # Sokal's automatic window: smallest M with M >= c * g(M), g(M) = 1 + 2 sum_{k=1}^{M} rho(k).
        g_m = 2.0 * np.cumsum(rho, axis=-1) - 1.0
        lags = np.arange(k_max + 1)
        ok = lags >= c * g_m
        ok[..., 0] = False
        has = np.asarray(ok.any(axis=-1))
        m = np.where(has, np.argmax(ok, axis=-1), k_max)
        g = np.take_along_axis(g_m, m[..., None], axis=-1)[..., 0]
        return _GEstimate(np.maximum(g, 1.0), m, has)
    if method == "geyer":
        # Geyer (1992) initial positive sequence, made monotone (initial monotone sequence).
        n_pairs = (k_max + 1) // 2
        pairs = rho[..., : 2 * n_pairs].reshape(rho.shape[:-1] + (n_pairs, 2)).sum(axis=-1)
        nonpos = pairs <= 0
        has = np.asarray(nonpos.any(axis=-1))
        first = np.where(has, np.argmax(nonpos, axis=-1), n_pairs)
        mono = np.minimum.accumulate(pairs, axis=-1)
        keep = np.arange(n_pairs) < first[..., None]
        total = np.where(keep, mono, 0.0).sum(axis=-1)
        g = -1.0 + 2.0 * total  # sigma^2_CLT / gamma0 with rho(0) = 1
        return _GEstimate(np.maximum(g, 1.0), 2 * first - 1, has)
    if method == "first_zero":
        # Chodera et al. (2007): sum until the first non-positive rho(k) once k > mintime = 3.
        lags = np.arange(k_max + 1)
        stop = (rho <= 0) & (lags > 3)
        has = np.asarray(stop.any(axis=-1))
        first = np.where(has, np.argmax(stop, axis=-1), k_max + 1)
        keep = (lags >= 1) & (lags < first[..., None])
        g = 1.0 + 2.0 * np.where(keep, rho, 0.0).sum(axis=-1)
        return _GEstimate(np.maximum(g, 1.0), first - 1, has)
    raise ValueError(f"method must be one of {METHODS}, not {method!r}")


def _sums_adaptive(a: np.ndarray, axis: int, max_lag: int | None, method: str, c: float
                   ) -> tuple[np.ndarray, _GEstimate, int]:
    """Sums, estimate and lags used. Without ``max_lag``, long series start with min(2^15, N/16) lags and
    widen the window (x4) until every estimate's truncation falls inside its first half."""
    n = a.shape[axis % a.ndim]
    if max_lag is not None:
        k = int(max(1, min(max_lag, n - 1)))
    elif n > _ADAPTIVE_ABOVE:
        k = int(min(n - 1, max(1024, min(_FIRST_LAG, n // 16))))
    else:
        k = n - 1
    while True:
        s = _autocovariance_sums(a, axis, k)
        s0 = s[..., :1]
        if np.any(s0 <= 0):
            raise AnalysisError("the series has no variance (constant): its statistical inefficiency is undefined")
        est = _g_from_rho(s / s0, method, c, n)
        done = max_lag is not None or k >= n - 1 or (bool(np.all(est.converged)) and int(np.max(est.window)) < k // 2)
        if done:
            return s, est, k
        k = n - 1 if 4 * k >= n else 4 * k


_BLAS: list[Any] = []  # a threadpoolctl controller, made on first use (scanning the libraries takes ~50 ms)


def one_blas_thread() -> Any:
    """A context in which BLAS uses one thread (threadpoolctl).

    Many short BLAS calls (dot products, skinny matrix products) on a busy shared machine spend far
    more time synchronising BLAS threads than computing: 16 lag sums of a 2^19-sample series took
    80 ms per series instead of 5 ms at load 3.7 on 2 cores. Entering costs ~10 us. Never hold it
    across a ``yield``: the caller's own BLAS use must stay untouched.
    """
    from threadpoolctl import ThreadpoolController

    if not _BLAS:
        _BLAS.append(ThreadpoolController())
    return _BLAS[0].limit(limits=1, user_api="blas")


_DIRECT_LAGS = 32  # lags summed directly (no FFT) before falling back to the FFT route


def _direct_estimate(a: np.ndarray, max_lag: int | None, method: str, c: float) -> _GEstimate | None:
    """g of one 1D series from lag sums S(k) = sum_t d(t) d(t+k), k <= 32, by direct dot products.

    Every estimator here stops at the first lag that meets its rule (Sokal's window, Geyer's first
    non-positive pair, the first non-positive rho), so when that lag lies within the directly summed
    lags the estimate is the one the FFT route gives with any longer lag window, up to rounding of the
    sums (~1e-16 relative). Returns None when the rule is not met there (or is not expected to be: the
    lag-1 correlation r gives the AR(1) guess g = (1 + r) / (1 - r), and c g must fit in the lags);
    the caller then takes the FFT route. Short-memory series (g of a few samples, as energies sampled
    every few hundred steps) cost K + 1 memory passes over the series instead of FFTs.
    """
    n = a.shape[0]
    k_max = min(_DIRECT_LAGS, n - 1) if max_lag is None else min(_DIRECT_LAGS, n - 1, int(max_lag))
    if k_max < 4:
        return None
    with one_blas_thread():
        return _direct_sums_estimate(a, k_max, method, c)


def _direct_sums_estimate(a: np.ndarray, k_max: int, method: str, c: float) -> _GEstimate | None:
    n = a.shape[0]
    d = a - a.mean()
    s0 = float(np.vecdot(d, d))
    if not s0 > 0.0:
        return None  # the FFT route raises the constant-series error
    s1 = float(np.vecdot(d[:-1], d[1:]))
    r1 = s1 / s0
    if not r1 < 1.0 or c * (1.0 + r1) / (1.0 - r1) > k_max:
        return None
    s = np.empty(k_max + 1)
    s[0] = s0
    s[1] = s1
    done = 1
    for k_now in (min(8, k_max), k_max):  # most short-memory series meet the rule within 8 lags
        for k in range(done + 1, k_now + 1):
            s[k] = np.vecdot(d[:-k], d[k:])
        done = k_now
        est = _g_from_rho(s[: k_now + 1] / s0, method, c, n)
        if bool(est.converged):
            return est
    return None


@dataclass(frozen=True)
class AutoEstimate:
    """The automatic choice among the estimators of g for one series (see :func:`auto_estimate`)."""

    g: float  # reported statistical inefficiency (samples)
    method: str  # words: which estimator, and why
    primary: str  # "sokal" or "geyer"
    oscillating: bool
    oscillation_depth: float  # -min rho over the first lags (> 0: a negative lobe)
    estimates: dict[str, tuple[float, float]]  # estimator -> (g, standard error of g), samples
    disagreement_z: float  # largest |g_i - g_j| / sqrt(se_i^2 + se_j^2)
    disagree: bool
    window: int  # lags summed by the primary estimator
    converged: bool  # the primary's window condition was met inside the lags computed
    sums: np.ndarray  # lag sums S(0..k) used (for the ACF)
    lags: int


def _windowed_error(g: float, window: int, n: int) -> float:
    """Standard error of a windowed estimate of g: g sqrt(2 (2M + 1) / N) (Madras and Sokal 1988)."""
    return float(g * math.sqrt(2.0 * (2.0 * max(int(window), 1) + 1.0) / n))


def auto_estimate(x: Any, *, c: float = 5.0, max_lag: int | None = None) -> AutoEstimate:
    """g of one series by the automatic rule.

    Sokal's automatic window (c) when the autocorrelation does not oscillate; Geyer's initial monotone
    sequence (Geyer 1992) when it does (a negative lobe deeper than ``sampling.acf_oscillation`` and
    beyond 4 sqrt(g/N) within the first lags): on an oscillating autocorrelation Sokal's window closes
    after a few lags, where the partial sum is near its trough (g = 1 for an O-H distance sampled every
    femtosecond). Sokal, Geyer and, when its plateau is found, Flyvbjerg-Petersen blocking are compared
    within their standard errors; beyond ``sampling.estimator_agreement`` the largest g (the
    conservative one) is reported and the disagreement is flagged.
    """
    a = one_series(x, "the automatic estimator")
    n = a.size
    s_s, est_s, k_s = _sums_adaptive(a, 0, max_lag, "sokal", c)
    s_g, est_g, k_g = _sums_adaptive(a, 0, max_lag, "geyer", c)
    sums, k = (s_g, k_g) if k_g > k_s else (s_s, k_s)
    rho = sums / sums[0]
    g_s, g_g = float(est_s.g), float(est_g.g)
    w_s, w_g = int(est_s.window), int(est_g.window)
    look = int(min(rho.size - 1, max(10, 2 * max(w_g, 1) + 2)))
    depth = float(-np.min(rho[1:look + 1])) if look >= 1 else 0.0
    limit = max(verdicts.THRESHOLDS["sampling.acf_oscillation"].caution,
                OSCILLATION_NOISE_SIGMAS * math.sqrt(max(g_s, g_g) / n))
    oscillating = depth > limit
    estimates: dict[str, tuple[float, float]] = {
        "sokal": (g_s, _windowed_error(g_s, w_s, n)),
        "geyer": (g_g, _windowed_error(g_g, w_g, n)),
    }
    if n >= 64:
        b = blocking(a)
        if b.plateau_found:
            lvl = b.plateau_level
            rel = 2.0 * float(b.sem_error[lvl] / b.sem[lvl]) if b.sem[lvl] > 0 else float("inf")
            estimates["blocking"] = (b.statistical_inefficiency, b.statistical_inefficiency * rel)
    names = list(estimates)
    z = 0.0
    for i, p in enumerate(names):
        for q in names[i + 1:]:
            (g1, e1), (g2, e2) = estimates[p], estimates[q]
            den = math.sqrt(e1 * e1 + e2 * e2)
            zz = abs(g1 - g2) / den if den > 0 else (0.0 if g1 == g2 else float("inf"))
            z = max(z, zz)
    primary = "geyer" if oscillating else "sokal"
    disagree = verdicts.THRESHOLDS["sampling.estimator_agreement"].level(z) != "ok"
    why = "oscillating autocorrelation" if oscillating else "no oscillation"
    g, method = estimates[primary][0], f"{_ESTIMATOR_WORDS.get(primary, primary)} ({why})"
    if disagree:
        top = max(names, key=lambda m: estimates[m][0])
        g = estimates[top][0]
        method = (f"{_ESTIMATOR_WORDS.get(top, top)} (the largest of estimators that disagree by {z:.1f} "
                  f"standard errors; {why}, first choice {_ESTIMATOR_WORDS.get(primary, primary)})")
    est = est_g if primary == "geyer" else est_s
    return AutoEstimate(g=float(max(g, 1.0)), method=method, primary=primary, oscillating=oscillating,
                        oscillation_depth=depth, estimates=estimates, disagreement_z=float(z), disagree=disagree,
                        window=int(est.window), converged=bool(est.converged), sums=sums, lags=k)


# how the automatic choice names an estimator in text a user reads
_ESTIMATOR_WORDS = {"sokal": "Sokal's window", "geyer": "Geyer's initial sequence", "first_zero": "first zero",
                    "blocking": "blocking"}


def _estimate(x: Any, *, method: str, c: float, max_lag: int | None, axis: int) -> tuple[_GEstimate, int]:
    a, axis = _as_float_array(x, axis)
    n = a.shape[axis]
    if method == AUTO:
        rows = np.moveaxis(a, axis, -1)
        flat = rows.reshape(-1, n)
        found = [auto_estimate(r, c=c, max_lag=max_lag) for r in flat]
        shape = rows.shape[:-1]
        return _GEstimate(np.array([e.g for e in found]).reshape(shape),
                          np.array([e.window for e in found]).reshape(shape),
                          np.array([e.converged for e in found]).reshape(shape)), n
    if a.ndim == 1:
        direct = _direct_estimate(a, max_lag, method, c)
        if direct is not None:
            return direct, n
    _s, est, _k = _sums_adaptive(a, axis, max_lag, method, c)
    return est, n


def statistical_inefficiency(
    x: Any,
    *,
    method: Method = "sokal",
    c: float = 5.0,
    max_lag: int | None = None,
    axis: int = -1,
) -> Any:
    """Statistical inefficiency g = 1 + 2 sum_{k>=1} rho(k) (in samples; g >= 1).

    Parameters
    ----------
    x : array_like, shape (N,) or (..., N) with ``axis``
    method : {"sokal", "geyer", "first_zero"}
        Estimator (see the module docstring for the papers).
    c : float
        Sokal's window constant (only for ``method="sokal"``).
    max_lag : int, optional
        Largest lag computed (default N - 1).
    axis : int
        Time axis.

    Returns
    -------
    float, or ndarray of shape (...) for multi-dimensional input
        g in samples. Sokal's tau_int is g / 2.
    """
    est, _ = _estimate(x, method=method, c=c, max_lag=max_lag, axis=axis)
    return float(est.g) if est.g.ndim == 0 else est.g


def effective_sample_size(
    x: Any,
    *,
    method: Method = "sokal",
    c: float = 5.0,
    max_lag: int | None = None,
    axis: int = -1,
) -> Any:
    """Effective number of independent samples N / g (float, or ndarray for 2D input)."""
    est, n = _estimate(x, method=method, c=c, max_lag=max_lag, axis=axis)
    out = n / est.g
    return float(out) if out.ndim == 0 else out


# ---------------------------------------------------------------------------------------------------
