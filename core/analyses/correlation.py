"""Time correlations of scalar series: autocorrelation, statistical inefficiency, blocking, equilibration.

Conventions (kept apart on purpose, because sources disagree):

* ``g`` -- the **statistical inefficiency**, ``g = 1 + 2 sum_{k>=1} rho(k)``, in samples. The number of
  effectively independent samples is ``N_eff = N / g``. ``g >= 1`` always (we clip).
  Some libraries call this number "tau" (emcee's ``integrated_time`` returns g).
* ``tau_int`` -- Sokal's **integrated autocorrelation time with the 1/2**, ``tau_int = 1/2 + sum rho(k)
  = g / 2``. Fields carry the name ``tau_int_sokal`` and a unit (``_samples`` or ``_ps``).
* pymbar's ``integratedAutocorrelationTime`` is ``(g - 1) / 2``; we do not expose that number.

Estimators of g:

* ``"sokal"`` -- sum of the (biased) autocorrelation up to the automatic window M, the smallest M with
  ``M >= c * g(M)``, c = 5 by default. A. D. Sokal, "Monte Carlo Methods in Statistical Mechanics:
  Foundations and New Algorithms", in Functional Integration, NATO ASI Series B 361 (1997) 131-192;
  N. Madras and A. D. Sokal, J. Stat. Phys. 50, 109 (1988).
* ``"geyer"`` -- Geyer's initial positive sequence: sums of adjacent autocovariance pairs
  ``Gamma_m = gamma(2m) + gamma(2m+1)`` truncated at the first non-positive pair, optionally made
  monotone. C. J. Geyer, Statistical Science 7(4), 473-483 (1992).
* ``"first_zero"`` -- sum until the first non-positive autocorrelation after a minimum of 3 lags,
  as in J. D. Chodera, W. C. Swope, J. W. Pitera, C. Seok, K. A. Dill, J. Chem. Theory Comput. 3,
  26-41 (2007).

Block averaging: H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989), with the plateau
level chosen automatically by the test of M. Jonsson, Phys. Rev. E 98, 043304 (2018).
Equilibration detection: J. D. Chodera, J. Chem. Theory Comput. 12, 1799-1805 (2016).

Every kernel accepts 2D input with ``axis=`` so that many series are handled in one vectorised call.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from phasewake.core.analyses import result, verdicts
from phasewake.core.errors import AnalysisError, TooShortError
from phasewake.core.progress import Progress, Work, result_of
from phasewake.core.settings import threads

Normalisation = Literal["biased", "unbiased"]
Method = Literal["sokal", "geyer", "first_zero", "auto"]
METHODS: tuple[str, ...] = ("sokal", "geyer", "first_zero")  # the single estimators
AUTO = "auto"  # Sokal, or Geyer on an oscillating ACF; the largest estimate when the estimators disagree

MIN_SAMPLES = 4

# ---------------------------------------------------------------------------------------------------
# Verdict kinds owned by this module
# ---------------------------------------------------------------------------------------------------

verdicts.register(
    verdicts.Threshold(
        kind="sampling.ess",
        caution=100.0,
        problem=20.0,
        unit="samples",
        source="common practice (a few hundred independent samples for a stable mean and error bar; "
        "emcee's tol = 50 asks for N > 50 g)",
        higher_is_worse=False,
        description="effective sample size N/g of a series",
    ),
    verdicts.Explanation(
        title="Effective sample size",
        what="How many statistically independent samples the series holds: N_eff = N / g, where g is "
        "the statistical inefficiency (g = 1 + 2 sum of the autocorrelation).",
        method="Autocorrelation by FFT; g from Sokal's automatic window (c = 5), Geyer's initial positive "
        "sequence (1992) or the first-zero rule of Chodera et al. (2007).",
        threshold="caution below 100, problem below 20 effective samples (common practice).",
        advice="Run longer, or save less often only if storage matters (saving more often does not add "
        "independent samples). Error bars from fewer than ~20 effective samples are unreliable.",
    ),
)

verdicts.register(
    verdicts.Threshold(
        kind="sampling.equilibration",
        caution=0.1,
        problem=0.5,
        unit="fraction of run",
        source="common practice (Chodera 2016 picks the start; how much discarded is too much is a "
        "judgement)",
        description="fraction of the run before the detected start of equilibrated data",
    ),
    verdicts.Explanation(
        title="Equilibration",
        what="The start time t0 after which the series holds the largest number of effectively "
        "independent samples; data before t0 look like a transient.",
        method="Chodera, J. Chem. Theory Comput. 12, 1799 (2016): t0 = argmax (N - t0) / g(t0).",
        threshold="caution when more than 10% of the run is discarded, problem above 50% (common practice).",
        advice="Discard the data before t0 from averages; if a large part of the run is transient, the run "
        "may still be relaxing: extend it, or check whether it drifts.",
    ),
)


verdicts.register(
    verdicts.Threshold(
        kind="sampling.estimator_agreement",
        caution=3.0,
        problem=float("inf"),
        unit="combined standard errors",
        source="common practice (a difference beyond 3 combined standard errors is more than noise); the "
        "error of Sokal's and Geyer's g from Madras and Sokal, J. Stat. Phys. 50, 109 (1988), "
        "var(g)/g^2 = 2 (2M + 1)/N; of the blocking g from the error of the blocking variance, "
        "sqrt(2/(n_blocks - 1)) (Flyvbjerg and Petersen 1989)",
        description="largest difference between estimators of the statistical inefficiency, in units of "
        "their combined standard error",
    ),
    verdicts.Explanation(
        title="Agreement of the estimators of g",
        what="Whether Sokal's window, Geyer's initial sequence and block averaging give the same statistical "
        "inefficiency g within their own noise.",
        method="Each estimate carries its standard error (Madras and Sokal 1988 for the windowed sums; the "
        "error of the plateau variance for blocking); the largest pairwise difference is divided by the "
        "combined error. When they disagree the largest g (the conservative one: the wider error bar, the "
        "fewer effective samples) is reported.",
        threshold="caution above 3 combined standard errors (common practice).",
        advice="Estimators disagree on oscillating or slowly drifting series: an oscillation (a bond "
        "vibration, a periodic motion) closes Sokal's window after a few lags. Trust the larger g, look at "
        "the autocorrelation and the blocking curve, and run longer if the estimates stay apart.",
    ),
)

verdicts.register(
    verdicts.Threshold(
        kind="sampling.acf_oscillation",
        caution=0.1,
        problem=float("inf"),
        unit="autocorrelation",
        source="common practice (a negative lobe deeper than 0.1, and beyond 4 times the Bartlett noise "
        "sqrt(g/N) of the autocorrelation, is an oscillation, not noise)",
        description="depth of the first negative lobe of the autocorrelation before the estimators' "
        "windows close",
    ),
    verdicts.Explanation(
        title="Oscillating autocorrelation",
        what="Whether the autocorrelation swings negative early (an oscillating quantity such as a bond "
        "length), where Sokal's automatic window closes too soon.",
        method="The deepest autocorrelation within the first lags (up to twice Geyer's truncation lag) "
        "compared with 0.1 and with 4 sqrt(g/N) (Bartlett's noise level). An oscillating series uses "
        "Geyer's initial monotone sequence (Geyer, Statistical Science 7, 473 (1992)) by default.",
        threshold="A lobe deeper than -0.1 (common practice) counts as oscillation.",
        advice="Name the estimator (--method) to override the automatic choice.",
    ),
)

OSCILLATION_DEPTH = 0.1  # see sampling.acf_oscillation (common practice)
OSCILLATION_NOISE_SIGMAS = 4.0


# ---------------------------------------------------------------------------------------------------
# FFT kernels
# ---------------------------------------------------------------------------------------------------


def _as_float_array(x: Any, axis: int) -> tuple[np.ndarray, int]:
    a = np.asarray(x, dtype=np.float64)
    if a.ndim == 0:
        raise AnalysisError("a time series must be an array, not a scalar")
    axis = axis % a.ndim
    n = a.shape[axis]
    if n < MIN_SAMPLES:
        raise TooShortError("a time-correlation analysis", have=int(n), need=MIN_SAMPLES)
    if not np.all(np.isfinite(a)):
        raise AnalysisError("the series holds NaN or infinite values")
    return a, axis


_FFT_BYTES = 256 * 2**20  # memory budget of one FFT batch
_ADAPTIVE_ABOVE = 2**14  # series longer than this start with a shorter lag window, widened as needed
_FIRST_LAG = 2**15


def _full_sums(d: np.ndarray, max_lag: int) -> np.ndarray:
    """Rows of centred series d (R, n): sums by one zero-padded FFT per row batch."""
    import scipy.fft

    r, n = d.shape
    nfft = scipy.fft.next_fast_len(n + max_lag + 1, real=True)
    rows = int(max(1, _FFT_BYTES // (nfft * 24)))
    out = np.empty((r, max_lag + 1))
    for i in range(0, r, rows):
        f = scipy.fft.rfft(d[i : i + rows], n=nfft, axis=-1, workers=threads())
        power = f.real * f.real + f.imag * f.imag
        del f
        out[i : i + rows] = scipy.fft.irfft(power, n=nfft, axis=-1, workers=threads())[:, : max_lag + 1]
    return out


def _blocked_sums(d: np.ndarray, max_lag: int) -> np.ndarray:
    """Sums over lags 0..max_lag of one long centred series by blocks of B >= max_lag samples.

    The origins of block b see lags reaching into block b+1 only; with blocks zero-padded to 2B the
    transform of the pair is F_b + (-1)^j F_{b+1}, so every block is transformed once and block b adds
    conj(F_b) (F_b + (-1)^j F_{b+1}). Exact, with memory bounded by the batch of blocks.
    """
    import scipy.fft

    n = d.size
    bsize = int(scipy.fft.next_fast_len(max_lag + 1, real=True))
    nb = -(-n // bsize)
    padded = np.zeros((nb + 1) * bsize)
    padded[:n] = d
    blocks = padded.reshape(nb + 1, bsize)
    sign = np.where(np.arange(bsize + 1) % 2 == 0, 1.0, -1.0)
    acc = np.zeros(bsize + 1, dtype=np.complex128)
    per = int(max(2, _FFT_BYTES // (2 * bsize * 24)))
    prev_f = None
    for i in range(0, nb + 1, per):
        f = scipy.fft.rfft(blocks[i : i + per], n=2 * bsize, axis=-1, workers=threads())
        if prev_f is not None:
            f = np.concatenate([prev_f, f], axis=0)
        nxt = f[1:]
        cur = f[:-1]
        acc += np.sum(np.conj(cur) * (cur + sign * nxt), axis=0)
        prev_f = f[-1:]
    return np.asarray(scipy.fft.irfft(acc, n=2 * bsize)[: max_lag + 1])


def _autocovariance_sums(a: np.ndarray, axis: int, max_lag: int) -> np.ndarray:
    """Sums S(k) = sum_t d(t) d(t+k) of the centred series d, k = 0..max_lag, along ``axis`` (moved last).

    Zero-padded FFTs (no circular wrap-around), batched so memory stays bounded; a short lag window on
    a long series uses the blocked transform.
    """
    a = np.moveaxis(a, axis, -1)
    n = a.shape[-1]
    lead = a.shape[:-1]
    d = (a - a.mean(axis=-1, keepdims=True)).reshape(-1, n)
    if d.shape[0] == 1 and n > 2**16 and 8 * (max_lag + 1) <= n:
        out = np.stack([_blocked_sums(row, max_lag) for row in d])
    else:
        out = _full_sums(d, max_lag)
    return out.reshape(lead + (max_lag + 1,))


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


def autocovariance(
    x: Any,
    *,
    max_lag: int | None = None,
    normalisation: Normalisation = "biased",
    axis: int = -1,
) -> np.ndarray:
    """Autocovariance of a series by FFT with zero padding.

    Parameters
    ----------
    x : array_like, shape (..., N, ...)
        The series (any unit u); time runs along ``axis``.
    max_lag : int, optional
        Largest lag (samples); default N - 1.
    normalisation : {"biased", "unbiased"}
        ``biased`` divides lag k by N (positive semidefinite, the usual choice for estimating g);
        ``unbiased`` divides by N - k.
    axis : int
        Time axis.

    Returns
    -------
    ndarray, shape (..., max_lag + 1)
        gamma(k) in u^2, time moved to the last axis.
    """
    a, axis = _as_float_array(x, axis)
    n = a.shape[axis]
    m = n - 1 if max_lag is None else int(max(0, min(max_lag, n - 1)))
    s = _autocovariance_sums(a, axis, m)
    if normalisation == "biased":
        return s / n
    if normalisation == "unbiased":
        return s / (n - np.arange(m + 1))
    raise ValueError(f"normalisation must be 'biased' or 'unbiased', not {normalisation!r}")


def autocorrelation(
    x: Any,
    *,
    max_lag: int | None = None,
    normalisation: Normalisation = "biased",
    axis: int = -1,
) -> np.ndarray:
    """Normalised autocorrelation rho(k) = gamma(k) / gamma(0) by FFT (Wiener-Khinchin).

    Parameters
    ----------
    x : array_like, shape (N,) or (..., N) with ``axis``
    max_lag : int, optional
        Largest lag in samples (default N - 1).
    normalisation : {"biased", "unbiased"}
        Divide the lag-k sum by N ("biased", as statsmodels ``acf(adjusted=False)`` and emcee) or by
        N - k ("unbiased", statsmodels ``adjusted=True``).
    axis : int
        Time axis of ``x``.

    Returns
    -------
    ndarray, shape (..., max_lag + 1)
        rho(0) = 1. A constant series (zero variance) raises AnalysisError.
    """
    g = autocovariance(x, max_lag=max_lag, normalisation=normalisation, axis=axis)
    g0 = g[..., :1]
    if np.any(g0 <= 0):
        raise AnalysisError("the series has no variance (constant): its autocorrelation is undefined")
    return g / g0


def cross_correlation(
    x: Any,
    y: Any,
    *,
    max_lag: int | None = None,
    normalisation: Normalisation = "biased",
) -> tuple[np.ndarray, np.ndarray]:
    """Normalised cross-correlation c(k) = <dx(t) dy(t+k)> / (sigma_x sigma_y) for k = -K..K.

    Parameters
    ----------
    x, y : array_like, shape (N,)
    max_lag : int, optional
        K, default N - 1.
    normalisation : {"biased", "unbiased"}

    Returns
    -------
    lags : ndarray of int, shape (2K + 1,)
    c : ndarray, shape (2K + 1,)
        Positive lags: y lags behind x.
    """
    import scipy.fft

    a, _ = _as_float_array(x, 0)
    b, _ = _as_float_array(y, 0)
    if a.ndim != 1 or b.shape != a.shape:
        raise AnalysisError("cross-correlation needs two 1D series of equal length")
    n = a.size
    k = n - 1 if max_lag is None else int(max(0, min(max_lag, n - 1)))
    da = a - a.mean()
    db = b - b.mean()
    sx, sy = da.std(), db.std()
    if sx == 0 or sy == 0:
        raise AnalysisError("a series has no variance: cross-correlation undefined")
    nfft = scipy.fft.next_fast_len(n + k + 1, real=True)
    fa = scipy.fft.rfft(da, nfft, workers=threads())
    fb = scipy.fft.rfft(db, nfft, workers=threads())
    full = scipy.fft.irfft(np.conj(fa) * fb, nfft, workers=threads())
    pos = full[: k + 1]  # sum_t da(t) db(t+k)
    neg = full[nfft - k :][::-1] if k > 0 else full[:0]  # lags -1..-k
    lags = np.arange(-k, k + 1)
    sums = np.concatenate([neg[::-1], pos])
    if normalisation == "biased":
        denom = np.full(lags.shape, float(n))
    elif normalisation == "unbiased":
        denom = (n - np.abs(lags)).astype(float)
    else:
        raise ValueError(f"normalisation must be 'biased' or 'unbiased', not {normalisation!r}")
    return lags, sums / denom / (sx * sy)


# ---------------------------------------------------------------------------------------------------
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


_BLAS: list[Any] = []  # a threadpoolctl controller, made on first use (scanning the libraries takes ~50 ms)


def one_blas_thread() -> Any:
    """A context in which BLAS uses one thread (threadpoolctl; no change when it is not installed).

    Many short BLAS calls (dot products, skinny matrix products) on a busy shared machine spend far
    more time synchronising BLAS threads than computing: 16 lag sums of a 2^19-sample series took
    80 ms per series instead of 5 ms at load 3.7 on 2 cores. Entering costs ~10 us. Never hold it
    across a ``yield``: the caller's own BLAS use must stay untouched.
    """
    import contextlib

    if not _BLAS:
        try:
            from threadpoolctl import ThreadpoolController
        except ImportError:
            _BLAS.append(None)
        else:
            _BLAS.append(ThreadpoolController())
    ctrl = _BLAS[0]
    return contextlib.nullcontext() if ctrl is None else ctrl.limit(limits=1, user_api="blas")


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
    a, _ = _as_float_array(x, 0)
    if a.ndim != 1:
        raise AnalysisError("the automatic estimator takes one 1D series")
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
# One series, all the numbers
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CorrelationResult(result.ResultMixin):
    """Memory of one series.

    ``statistical_inefficiency`` is g (samples); ``tau_int_sokal_*`` is Sokal's g / 2.
    ``acf`` holds the biased autocorrelation for lags 0..len(acf)-1 at ``acf_lag_ps``.
    """

    n_samples: int
    dt_ps: float
    mean: float
    variance: float
    unit: str  # unit of the series (mean in unit, variance in unit^2)
    statistical_inefficiency: float  # g, in samples
    effective_sample_size: float  # N / g
    tau_int_sokal_samples: float  # g / 2
    tau_int_sokal_ps: float  # g / 2 * dt
    correlation_time_g_ps: float  # g * dt: spacing of effectively independent samples
    standard_error_of_mean: float  # sqrt(variance * g / N), in unit
    window_lags: int  # Sokal window M / Geyer or first-zero truncation lag
    converged: bool  # the window condition was met and N >= tol * g
    method: str
    acf: np.ndarray  # shape (n_lags,)
    acf_lag_ps: np.ndarray  # shape (n_lags,)
    settings: dict[str, Any] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    # the automatic choice (method "auto"): every estimate with its standard error, and whether they agree
    estimates: dict[str, tuple[float, float]] = field(default_factory=dict)  # name -> (g, standard error)
    oscillating: bool | None = None  # None: not tested (a single estimator was asked for)
    disagreement_z: float | None = None  # largest difference of estimates in combined standard errors
    estimators_disagree: bool = False

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready numbers (arrays kept; print_json converts them)."""
        return {
            "n_samples": self.n_samples,
            "dt_ps": self.dt_ps,
            "mean": self.mean,
            "variance": self.variance,
            "unit": self.unit,
            "statistical_inefficiency_g": self.statistical_inefficiency,
            "effective_sample_size": self.effective_sample_size,
            "tau_int_sokal_samples": self.tau_int_sokal_samples,
            "tau_int_sokal_ps": self.tau_int_sokal_ps,
            "correlation_time_g_ps": self.correlation_time_g_ps,
            "standard_error_of_mean": self.standard_error_of_mean,
            "window_lags": self.window_lags,
            "converged": self.converged,
            "method": self.method,
            "settings": self.settings,
            "notes": list(self.notes),
            "estimates": {k: {"g": v[0], "standard_error": v[1]} for k, v in self.estimates.items()},
            "oscillating": self.oscillating,
            "disagreement_standard_errors": self.disagreement_z,
            "estimators_disagree": self.estimators_disagree,
        }


def analyse_series(
    x: Any,
    *,
    dt_ps: float,
    method: Method = "auto",
    c: float = 5.0,
    tol: float = 50.0,
    max_lag: int | None = None,
    acf_lags: int | None = None,
    unit: str = "",
) -> CorrelationResult:
    """Autocorrelation, g, tau_int (Sokal), ESS and standard error of the mean of one series.

    Parameters
    ----------
    x : array_like, shape (N,)
        The series, in ``unit``.
    dt_ps : float
        Spacing of samples (ps).
    method : {"auto", "sokal", "geyer", "first_zero"}
        "auto" (default): Sokal, or Geyer when the autocorrelation oscillates, compared with blocking;
        the largest g when they disagree beyond their noise (:func:`auto_estimate`).
    c : float
        Sokal window constant.
    tol : float
        The estimate counts as converged when N >= tol * g (emcee's default 50).
    max_lag : int, optional
        Largest lag used for g (default N - 1).
    acf_lags : int, optional
        Lags of the ACF kept in the result for plotting (default: 5 windows, at least 50, at most N).
    unit : str
        Unit of the series.

    Returns
    -------
    CorrelationResult
    """
    a, _ = _as_float_array(x, 0)
    if a.ndim != 1:
        raise AnalysisError("analyse_series takes one 1D series")
    if not dt_ps > 0:
        raise AnalysisError(f"the sample spacing must be positive, got {dt_ps} ps")
    n = a.size
    notes: list[str] = []
    auto: AutoEstimate | None = None
    if method == AUTO:
        auto = auto_estimate(a, c=c, max_lag=max_lag)
        s, k = auto.sums, auto.lags
        g, window, window_ok, label = auto.g, auto.window, auto.converged, auto.method
        if auto.disagree:
            listing = ", ".join(f"{m} {v[0]:.3g} +- {v[1]:.2g}" for m, v in auto.estimates.items())
            notes.append(f"the estimators of g disagree by {auto.disagreement_z:.1f} standard errors ({listing}); "
                         f"the largest, {g:.3g}, is used (conservative)")
    else:
        s, est, k = _sums_adaptive(a, 0, max_lag, method, c)
        g, window, window_ok, label = float(est.g), int(est.window), bool(est.converged), method
    rho = s / s[0]
    var = float(s[0] / n)
    n_keep = acf_lags if acf_lags is not None else max(50, 5 * max(window, 1))
    n_keep = int(min(max(2, n_keep), rho.size))
    if not window_ok:
        first = auto.primary if auto is not None else method
        notes.append(f"the {first} window condition was not met within {k} lags: g is a lower bound")
    if n < tol * g:
        notes.append(f"the series is shorter than {tol:g} g ({n} < {tol * g:.0f}): g is uncertain, "
                     "run longer for a reliable estimate")
    return CorrelationResult(
        n_samples=n,
        dt_ps=float(dt_ps),
        mean=float(a.mean()),
        variance=var,
        unit=unit,
        statistical_inefficiency=g,
        effective_sample_size=n / g,
        tau_int_sokal_samples=g / 2.0,
        tau_int_sokal_ps=g / 2.0 * dt_ps,
        correlation_time_g_ps=g * dt_ps,
        standard_error_of_mean=math.sqrt(var * g / n),
        window_lags=window,
        converged=window_ok and n >= tol * g,
        method=label,
        acf=rho[:n_keep].copy(),
        acf_lag_ps=np.arange(n_keep) * float(dt_ps),
        settings={"method": method, "c": c, "tol": tol, "max_lag": max_lag, "normalisation": "biased"},
        notes=tuple(notes),
        estimates={} if auto is None else dict(auto.estimates),
        oscillating=None if auto is None else auto.oscillating,
        disagreement_z=None if auto is None else auto.disagreement_z,
        estimators_disagree=False if auto is None else auto.disagree,
    )


def judge_ess(result: CorrelationResult, *, name: str = "series") -> verdicts.Verdict:
    """The ``sampling.ess`` verdict for a series."""
    ess = result.effective_sample_size
    return verdicts.judge(
        "sampling.ess", ess, title=f"Effective sample size of {name}", unit="samples",
        message=f"{name}: {result.n_samples} samples with g = {result.statistical_inefficiency:.3g} "
        f"({result.method}) hold about {ess:.0f} independent samples. " + verdicts.HEURISTIC_NOTE,
        advice=verdicts.EXPLANATIONS["sampling.ess"].advice,
        details={"g": result.statistical_inefficiency, "n_samples": result.n_samples},
    )


def judge_estimators(result: CorrelationResult, *, name: str = "series") -> verdicts.Verdict | None:
    """The ``sampling.estimator_agreement`` verdict (None when a single estimator was asked for)."""
    if result.disagreement_z is None or not result.estimates:
        return None
    listing = "; ".join(f"{m} g = {v[0]:.3g} +- {v[1]:.2g}" for m, v in result.estimates.items())
    osc = ("the autocorrelation oscillates, so Geyer's initial sequence is the first choice"
           if result.oscillating else "the autocorrelation does not oscillate, so Sokal's window is the first choice")
    if result.estimators_disagree:
        tail = (f"They disagree by more than their noise: g = {result.statistical_inefficiency:.3g}, the largest "
                "(conservative), is used for the effective sample size and the error bar.")
    else:
        tail = "They agree within their noise."
    return verdicts.judge(
        "sampling.estimator_agreement", float(result.disagreement_z), title=f"Estimators of g for {name}",
        unit="combined standard errors", message=f"{name}: {listing}; {osc}. {tail}",
        advice=verdicts.EXPLANATIONS["sampling.estimator_agreement"].advice,
        details={"estimates": {k: list(v) for k, v in result.estimates.items()}, "oscillating": result.oscillating},
    )


# ---------------------------------------------------------------------------------------------------
# Blocking (Flyvbjerg-Petersen 1989) with an automatic plateau (Jonsson 2018)
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class BlockingResult(result.ResultMixin):
    """The blocking curve and the level read as the plateau.

    ``sem[k]`` is the standard error of the mean (in ``unit``) estimated from 2^k-sample blocks,
    ``sem_error[k]`` its own error, sqrt(2/(n_k - 1)) relative.
    """

    block_size: np.ndarray  # shape (L,), samples per block
    n_blocks: np.ndarray  # shape (L,)
    sem: np.ndarray  # shape (L,), unit
    sem_error: np.ndarray  # shape (L,), unit
    plateau_level: int  # index into the arrays
    plateau_sem: float  # unit
    plateau_found: bool
    naive_sem: float  # sem at level 0 (ignores correlation), unit
    statistical_inefficiency: float  # (plateau_sem / naive_sem)^2, samples
    unit: str
    settings: dict[str, Any] = field(default_factory=dict)


def blocking(x: Any, *, min_blocks: int = 16, confidence: float = 0.99, unit: str = "") -> BlockingResult:
    """Flyvbjerg-Petersen block averaging with the plateau found automatically.

    At each level neighbours are averaged in pairs (x'_i = (x_{2i} + x_{2i+1}) / 2, an odd last sample
    dropped); the variance of the mean is c0' / (n' - 1) (Flyvbjerg and Petersen 1989). The plateau is
    the first level j whose remaining levels pass Jonsson's (2018) test: M_j = sum_{k>=j}
    n_k (gamma1_k / sigma2_k)^2 below the chi-square quantile with (levels - j) degrees of freedom,
    gamma1 the lag-1 autocovariance of the blocked series [test from memory of Jonsson, Phys. Rev. E 98,
    043304 (2018)].

    Parameters
    ----------
    x : array_like, shape (N,)
    min_blocks : int
        Levels with fewer blocks are not used.
    confidence : float
        Quantile of the chi-square test.
    unit : str
        Unit of the series.

    Returns
    -------
    BlockingResult
    """
    from scipy.stats import chi2

    a, _ = _as_float_array(x, 0)
    if a.ndim != 1:
        raise AnalysisError("blocking takes one 1D series")
    if a.size < 2 * min_blocks:
        raise TooShortError("blocking", have=int(a.size), need=2 * min_blocks)
    sizes, nbl, sems, errs, mstat = [], [], [], [], []
    cur = a.copy()
    size = 1
    while cur.size >= min_blocks:
        n = cur.size
        d = cur - cur.mean()
        c0 = float(np.dot(d, d) / n)
        g1 = float(np.dot(d[:-1], d[1:]) / n)
        var_mean = c0 / (n - 1)
        sizes.append(size)
        nbl.append(n)
        sems.append(math.sqrt(var_mean))
        errs.append(math.sqrt(var_mean) * math.sqrt(1.0 / (2.0 * (n - 1))))  # d sqrt(v) = sqrt(v) sqrt(2/(n-1))/2
        mstat.append(n * (g1 / c0) ** 2 if c0 > 0 else 0.0)
        m = (n // 2) * 2
        cur = 0.5 * (cur[0:m:2] + cur[1:m:2])
        size *= 2
    if sems[0] == 0:
        raise AnalysisError("the series has no variance (constant): blocking undefined")
    levels = len(sems)
    tail = np.cumsum(np.array(mstat)[::-1])[::-1]
    found = False
    level = levels - 1
    for j in range(levels):
        if tail[j] < chi2.ppf(confidence, levels - j):
            level, found = j, True
            break
    sem_arr = np.array(sems)
    return BlockingResult(
        block_size=np.array(sizes),
        n_blocks=np.array(nbl),
        sem=sem_arr,
        sem_error=np.array(errs),
        plateau_level=level,
        plateau_sem=float(sem_arr[level]),
        plateau_found=found,
        naive_sem=float(sem_arr[0]),
        statistical_inefficiency=float(max(1.0, (sem_arr[level] / sem_arr[0]) ** 2)),
        unit=unit,
        settings={"min_blocks": min_blocks, "confidence": confidence},
    )


# ---------------------------------------------------------------------------------------------------
# Equilibration detection (Chodera 2016)
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class EquilibrationResult:
    """Start of equilibrated data: t0 maximises N_eff(t0) = (N - t0) / g(t0)."""

    t0_index: int
    t0_ps: float
    statistical_inefficiency: float  # g of x[t0:], samples
    effective_sample_size: float  # at t0
    fraction_discarded: float
    candidates_index: np.ndarray  # shape (K,)
    candidates_ess: np.ndarray  # shape (K,)
    method: str
    settings: dict[str, Any] = field(default_factory=dict)


def equilibration_work(
    x: Any,
    *,
    dt_ps: float = 1.0,
    method: Method = "sokal",
    n_candidates: int = 200,
    max_fraction: float = 0.75,
    max_lag: int | None = None,
    max_points: int = 100_000,
) -> Work[EquilibrationResult]:
    """Generator form of :func:`detect_equilibration` (yields Progress, returns the result)."""
    a0, _ = _as_float_array(x, 0)
    if a0.ndim != 1:
        raise AnalysisError("equilibration detection takes one 1D series")
    n_orig = a0.size
    # Long series: scan block means of s samples. Averaging s neighbours keeps the effective sample size
    # (g of the means ~ g/s while s << g) and bounds the cost; t0 is then known to s samples.
    s_blk = int(max(1, -(-n_orig // max_points)))
    if s_blk > 1:
        m_blk = n_orig // s_blk
        a = a0[: m_blk * s_blk].reshape(m_blk, s_blk).mean(axis=1)
        if max_lag is not None:
            max_lag = max(1, max_lag // s_blk)
    else:
        a = a0
    n = a.size
    last = int(max(1, min(n - MIN_SAMPLES, max_fraction * n)))
    n_c = int(max(2, min(n_candidates, last + 1)))
    cands = np.unique(np.round(np.linspace(0, last, n_c)).astype(int))
    ess = np.empty(cands.size)
    gs = np.empty(cands.size)
    for i, t0 in enumerate(cands):
        seg = a[t0:]
        if np.ptp(seg) == 0:
            gs[i], ess[i] = np.inf, 0.0
        else:
            ml = None if max_lag is None else min(max_lag, seg.size - 1)
            est, _ = _estimate(seg, method=method, c=5.0, max_lag=ml, axis=0)
            gs[i] = float(est.g)
            ess[i] = seg.size / gs[i]
        if i % 10 == 0:
            yield Progress(i + 1, cands.size, "equilibration scan")
    best = int(np.argmax(ess))
    t0 = int(cands[best]) * s_blk
    return EquilibrationResult(
        t0_index=t0,
        t0_ps=t0 * float(dt_ps),
        statistical_inefficiency=float((n_orig - t0) / ess[best]) if ess[best] > 0 else float("inf"),
        effective_sample_size=float(ess[best]),
        fraction_discarded=t0 / n_orig,
        candidates_index=cands * s_blk,
        candidates_ess=ess,
        method=method,
        settings={"method": method, "n_candidates": n_candidates, "max_fraction": max_fraction,
                  "max_lag": max_lag, "dt_ps": dt_ps, "max_points": max_points, "block_of_samples": s_blk},
    )


def detect_equilibration(
    x: Any,
    *,
    dt_ps: float = 1.0,
    method: Method = "sokal",
    n_candidates: int = 200,
    max_fraction: float = 0.75,
    max_lag: int | None = None,
    max_points: int = 100_000,
) -> EquilibrationResult:
    """Chodera (2016) automated equilibration detection.

    Parameters
    ----------
    x : array_like, shape (N,)
    dt_ps : float
        Sample spacing (ps), to report t0 in ps.
    method : {"sokal", "geyer", "first_zero"}
        Estimator of g(t0).
    n_candidates : int
        Number of evenly spaced candidate starts in [0, max_fraction N].
    max_fraction : float
        Latest candidate start as a fraction of the series.
    max_lag : int, optional
        Largest lag for each g (speeds up long series).
    max_points : int
        Longer series are scanned as block means of ceil(N / max_points) samples (the effective sample
        size is kept while the block is short compared with g; t0 is then resolved to one block).

    Returns
    -------
    EquilibrationResult
        ``statistical_inefficiency`` is g of x[t0:] in samples of the input.
    """
    return result_of(equilibration_work(x, dt_ps=dt_ps, method=method, n_candidates=n_candidates,
                                        max_fraction=max_fraction, max_lag=max_lag, max_points=max_points))


def judge_equilibration(result: EquilibrationResult, *, name: str = "series") -> verdicts.Verdict:
    """The ``sampling.equilibration`` verdict."""
    f = result.fraction_discarded
    extra = ""
    if result.effective_sample_size < 100:
        extra = ("With so few independent samples the estimates of g on the shorter tails are noisy and the "
                 "detected start is uncertain (it tends to move late). ")
    return verdicts.judge(
        "sampling.equilibration", f, title=f"Equilibration of {name}", unit="fraction of run",
        message=f"{name}: the data from t0 = {result.t0_ps:.4g} ps on ({100 * (1 - f):.0f}% of the run) hold "
        f"the most independent samples ({result.effective_sample_size:.0f}). " + extra + verdicts.HEURISTIC_NOTE,
        advice=verdicts.EXPLANATIONS["sampling.equilibration"].advice,
        details={"t0_index": result.t0_index},
    )
