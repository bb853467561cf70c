"""One series, all the numbers: correlation summary, blocking (Flyvbjerg-Petersen), equilibration (Chodera)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phasewake.core.analyses import result, verdicts
from phasewake.core.analyses.correlation.acf import AUTO, MIN_SAMPLES, Method, one_series
from phasewake.core.analyses.correlation.inefficiency import (
    AutoEstimate,
    _estimate,
    _sums_adaptive,
    auto_estimate,
)
from phasewake.core.errors import AnalysisError
from phasewake.core.progress import Progress, Work, result_of

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


def _g_of_series(a: np.ndarray, method: Method, c: float, max_lag: int | None, notes: list[str]
                 ) -> tuple[np.ndarray, int, float, int, bool, str, AutoEstimate | None]:
    """Autocovariance sums, lags computed, g, window, window met, estimator name, and the automatic choice."""
    if method == AUTO:
        auto = auto_estimate(a, c=c, max_lag=max_lag)
        if auto.disagree:
            listing = ", ".join(f"{m} {v[0]:.3g} +- {v[1]:.2g}" for m, v in auto.estimates.items())
            notes.append(f"the estimators of g disagree by {auto.disagreement_z:.1f} standard errors ({listing}); "
                         f"the largest, {auto.g:.3g}, is used (conservative)")
        return auto.sums, auto.lags, auto.g, auto.window, auto.converged, auto.method, auto
    s, est, k = _sums_adaptive(a, 0, max_lag, method, c)
    return s, k, float(est.g), int(est.window), bool(est.converged), method, None


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
    a = one_series(x, "analyse_series")
    if not dt_ps > 0:
        raise AnalysisError(f"the sample spacing must be positive, got {dt_ps} ps")
    n = a.size
    notes: list[str] = []
    s, k, g, window, window_ok, label, auto = _g_of_series(a, method, c, max_lag, notes)
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
    a0 = one_series(x, "equilibration detection")
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
