"""Autocovariance, autocorrelation and cross-correlation by FFT; the verdict kinds of time correlations."""

from __future__ import annotations

from typing import Any, Literal

import numpy as np

from phasewake.core.analyses import verdicts
from phasewake.core.errors import AnalysisError, TooShortError
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


def one_series(x: Any, what: str) -> np.ndarray:
    """``x`` as one float64 series, checked as :func:`_as_float_array` does; AnalysisError "``what`` takes
    one 1D series" for another shape."""
    a, _ = _as_float_array(x, 0)
    if a.ndim != 1:
        raise AnalysisError(f"{what} takes one 1D series")
    return a


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
