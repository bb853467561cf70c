"""Rate statistics for barrier crossings: counts over exposure, exact intervals, dwell-time tests, TST.

Pure functions on small arrays (event counts, dwell times, a coordinate's samples). The event finding
itself lives in :mod:`phasewake.core.analyses.crossings`.

Units: times in ps, rates in 1/ps, the coordinate in whatever unit it carries (``unit``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from phasewake.core import interrupts
from phasewake.core.errors import AnalysisError

POISSON_INTERVAL_METHOD = (
    "exact Poisson interval on the number of transitions with the time spent in the origin state "
    "taken as fixed (Garwood 1936; chi-square/gamma quantiles)"
)


@dataclass(frozen=True)
class PoissonRate:
    """A rate from a count of events over an exposure time, with its exact interval.

    ``upper_bound_only`` is True when no event was seen: ``rate_per_ps`` is then 0 but the number to
    report is ``ci_high_per_ps``, a one-sided upper limit at ``confidence``.
    """

    n_events: int
    exposure_ps: float
    rate_per_ps: float
    ci_low_per_ps: float
    ci_high_per_ps: float
    confidence: float
    upper_bound_only: bool
    method: str = POISSON_INTERVAL_METHOD


def poisson_rate(n_events: int, exposure_ps: float, *, confidence: float = 0.95) -> PoissonRate:
    """Maximum-likelihood rate k = n / T with the exact (Garwood 1936) Poisson interval.

    For exponential waiting times observed with right censoring, the likelihood is k^n exp(-k T), with
    n the number of completed waits (here: transitions) and T the total time at risk, censored segments
    included; so the MLE is n / T and the count n is Poisson with mean k T (Cox and Oakes 1984, ch. 3).

    Parameters
    ----------
    n_events : int
        Number of transitions out of the origin state.
    exposure_ps : float
        Total time spent in the origin state, ps (censored first and last segments included).
    confidence : float
        Two-sided coverage of the interval; for ``n_events == 0`` the one-sided upper limit at this level
        (e.g. 0.95 gives -ln(0.05)/T = 2.996/T).
    """
    from scipy.special import gammaincinv  # gamma.ppf(p, a) = gammaincinv(a, p); lazy: ~0.1 s to import

    if not 0.0 < confidence < 1.0:
        raise AnalysisError(f"confidence must lie between 0 and 1, got {confidence}")
    if n_events < 0:
        raise AnalysisError(f"a number of events cannot be negative ({n_events})")
    if not exposure_ps > 0.0:
        nan = float("nan")
        return PoissonRate(n_events, float(exposure_ps), nan, nan, nan, confidence, n_events == 0)
    alpha = 1.0 - confidence
    if n_events == 0:
        hi = float(gammaincinv(1, confidence)) / exposure_ps
        return PoissonRate(0, float(exposure_ps), 0.0, 0.0, hi, confidence, True)
    lo = float(gammaincinv(n_events, alpha / 2.0)) / exposure_ps
    hi = float(gammaincinv(n_events + 1, 1.0 - alpha / 2.0)) / exposure_ps
    return PoissonRate(int(n_events), float(exposure_ps), n_events / exposure_ps, lo, hi, confidence, False)


@dataclass(frozen=True)
class ExponentialTest:
    """Kolmogorov–Smirnov test of dwell times against an exponential with a fitted mean (Lilliefors)."""

    n: int
    statistic: float  # KS distance D
    p_value: float  # Monte Carlo p-value (fitted-mean null), nan when n is too small
    mean_ps: float
    cv: float  # coefficient of variation (1 for an exponential)
    n_monte_carlo: int
    method: str = (
        "Kolmogorov-Smirnov distance to an exponential whose mean is the sample mean; the p-value is "
        "from Monte Carlo draws under the fitted null, which accounts for estimating the mean "
        "(Lilliefors 1969)"
    )


def _ks_exponential_distance(x: np.ndarray) -> np.ndarray:
    """KS distance of each row of ``x`` (shape (m, n), sorted, positive) to Exp(mean of the row)."""
    n = x.shape[-1]
    # The same arithmetic as -expm1(-x / mean), i / n - cdf and cdf - (i - 1) / n, in reused buffers.
    cdf = np.divide(x, x.mean(axis=-1, keepdims=True))
    np.negative(cdf, out=cdf)
    np.expm1(cdf, out=cdf)
    np.negative(cdf, out=cdf)
    i = np.arange(1, n + 1, dtype=float)
    work = np.subtract(i / n, cdf)
    d_plus = np.max(work, axis=-1)
    np.subtract(cdf, (i - 1) / n, out=work)
    d_minus = np.max(work, axis=-1)
    return np.maximum(d_plus, d_minus)


def exponential_ks_test(dwells_ps: np.ndarray, *, n_monte_carlo: int | None = None,
                        seed: int = 20261202) -> ExponentialTest:
    """Do completed dwell times look exponential?

    Parameters
    ----------
    dwells_ps : ndarray, shape (n,), ps
        Completed (uncensored) dwell times. Censored segments must not be included.
    n_monte_carlo : int, optional
        Number of null samples; default keeps n_monte_carlo * n near 5e5 (between 200 and 4000), so the
        p-value carries a Monte Carlo error of at most ~0.015 near p = 0.05.
    seed : int
        Seed of the Monte Carlo draws, so the p-value is reproducible.

    Notes
    -----
    Lilliefors, H. W. (1969) J. Am. Stat. Assoc. 64, 387: the KS test with a mean estimated from the
    same data needs its own null distribution. Because the exponential is a scale family the null of
    D does not depend on the true mean, so draws from Exp(1) suffice.
    """
    x = np.sort(np.asarray(dwells_ps, dtype=float))
    x = x[np.isfinite(x)]
    n = int(x.size)
    if n == 0:
        nan = float("nan")
        return ExponentialTest(0, nan, nan, nan, nan, 0)
    mean = float(x.mean())
    cv = float(x.std(ddof=1) / mean) if n > 1 and mean > 0 else float("nan")
    if n < 5 or not mean > 0:
        return ExponentialTest(n, float("nan"), float("nan"), mean, cv, 0)
    d = float(_ks_exponential_distance(x[None, :])[0])
    m = n_monte_carlo if n_monte_carlo is not None else int(min(4000, max(200, 500_000 // n)))
    rng = np.random.default_rng(seed)
    exceed = 0
    block = max(1, 2_000_000 // n)
    done = 0
    while done < m:
        interrupts.check()  # Ctrl-C / SIGTERM on the command line: stop between blocks (core/interrupts.py)
        k = min(block, m - done)
        sims = rng.exponential(size=(k, n))
        sims.sort(axis=1)  # in place: the same values as np.sort, without a copy
        exceed += int(np.count_nonzero(_ks_exponential_distance(sims) >= d))
        done += k
    p = (exceed + 1.0) / (m + 1.0)
    return ExponentialTest(n, d, float(p), mean, cv, m)


@dataclass(frozen=True)
class TSTRate:
    """Transition-state-theory rate from the run's own distribution of the coordinate.

    k_TST(A->B) = <q' theta(q')>_{q*} P(q*) / integral_{q < q*} P(q) dq, i.e. the equilibrium flux
    through the dividing surface over the population on the reactant side. With a Maxwell distribution
    of q' at q*, <q' theta(q')>_{q*} = sqrt(kT / (2 pi m_eff)).
    """

    surface: float
    unit: str
    density_at_surface_per_unit: float  # P(q*), 1/unit
    bin_width: float  # unit
    population_below: float  # fraction of samples with q < q*
    population_above: float
    flux_factor_unit_per_ps: float  # <q' theta(q')> at the surface, unit/ps
    flux_source: str  # "velocities at the surface" or "kT/m_eff"
    rate_up_per_ps: float  # from the low-q side to the high-q side
    rate_down_per_ps: float
    free_energy_barrier_up_kT: float  # F(q*) - F(minimum below q*), from the histogram
    free_energy_barrier_down_kT: float
    n_samples: int
    n_at_surface: int


def tst_rate_from_counts(
    *,
    surface: float,
    unit: str,
    n_samples: int,
    n_near: int,
    n_below: int,
    bin_width: float,
    flux_factor: float,
    flux_source: str,
    histogram: tuple[np.ndarray, np.ndarray] | None = None,
) -> TSTRate:
    """TST rates from counts: ``n_near`` samples within half a bin of q*, ``n_below`` with q < q*.

    ``histogram`` = (counts, edges) of q (any subsample) for the barrier heights in kT.
    See :func:`tst_rate` for the formula and references.
    """
    n = int(n_samples)
    if n < 10:
        raise AnalysisError(f"a TST estimate needs at least 10 samples of the coordinate; got {n}")
    if not bin_width > 0:
        raise AnalysisError("the coordinate has no spread: cannot estimate a density at the surface")
    density = n_near / (n * bin_width)
    below = n_below / n
    above = 1.0 - below
    rate_up = flux_factor * density / below if below > 0 else float("nan")
    rate_down = flux_factor * density / above if above > 0 else float("nan")
    barrier_up = barrier_down = float("nan")
    if histogram is not None:
        counts, edges = histogram
        m = max(int(counts.sum()), 1)
        width = edges[1:] - edges[:-1]
        centres = 0.5 * (edges[1:] + edges[:-1])
        with np.errstate(divide="ignore"):
            f = -np.log(counts / (m * width))
        f_surf = -math.log(density) if density > 0 else float("inf")
        f_lo = f[(centres < surface) & np.isfinite(f)]
        f_hi = f[(centres > surface) & np.isfinite(f)]
        barrier_up = float(f_surf - f_lo.min()) if f_lo.size else float("nan")
        barrier_down = float(f_surf - f_hi.min()) if f_hi.size else float("nan")
    return TSTRate(
        surface=float(surface), unit=unit, density_at_surface_per_unit=float(density),
        bin_width=float(bin_width), population_below=float(below), population_above=float(above),
        flux_factor_unit_per_ps=float(flux_factor), flux_source=flux_source, rate_up_per_ps=float(rate_up),
        rate_down_per_ps=float(rate_down), free_energy_barrier_up_kT=barrier_up,
        free_energy_barrier_down_kT=barrier_down, n_samples=n, n_at_surface=int(n_near),
    )


def tst_rate(
    q: np.ndarray,
    *,
    surface: float,
    unit: str = "",
    qdot: np.ndarray | None = None,
    kT_over_m_eff: float | None = None,
    bin_width: float | None = None,
) -> TSTRate:
    """TST rates both ways from samples of a coordinate (and its rate of change where known).

    Parameters
    ----------
    q : ndarray, shape (n,), unit
        Samples of the coordinate (pooled over replicas), assumed to be equilibrium samples.
    surface : float, unit
        Dividing surface q*.
    qdot : ndarray, shape (n,), unit/ps, optional
        dq/dt at each sample; when given, the flux factor is the mean of max(q', 0) over samples within
        half a bin of q* (no Maxwell assumption).
    kT_over_m_eff : float, (unit/ps)^2, optional
        Used instead when there are no velocities: flux factor sqrt(kT/m_eff / (2 pi)).
    bin_width : float, unit, optional
        Width of the window around q* used for P(q*) (default: 1/100 of the 0.1-99.9 % range).

    Notes
    -----
    TST rate with the potential of mean force: Wigner (1938); Eyring (1935); for a generalised
    coordinate with the effective mass see Schenter, Garrett and Truhlar (2003) J. Chem. Phys. 119, 5828.
    The free-energy profile here is F = -kT ln P(q) without a Jacobian: the rate is a property of q
    itself, whatever its geometry.
    """
    q = np.asarray(q, dtype=float).ravel()
    n = int(q.size)
    if n < 10:
        raise AnalysisError(f"a TST estimate needs at least 10 samples of the coordinate; got {n}")
    lo, hi = central_range(q)
    if bin_width is None:
        bin_width = float(hi - lo) / 100.0
    near = np.abs(q - surface) < 0.5 * bin_width
    n_at = int(np.count_nonzero(near))
    n_below = int(np.count_nonzero(q < surface))
    if qdot is not None:
        qd = np.asarray(qdot, dtype=float).ravel()
        if qd.shape != q.shape:
            raise AnalysisError("q and dq/dt must have the same number of samples")
        flux, source = flux_factor(qd[near], None)
    else:
        flux, source = flux_factor(None, kT_over_m_eff)
    hist = np.histogram(q, bins=40, range=(lo, hi)) if hi > lo else None
    return tst_rate_from_counts(surface=surface, unit=unit, n_samples=n, n_near=n_at, n_below=n_below,
                                bin_width=bin_width, flux_factor=flux, flux_source=source, histogram=hist)


def central_range(q: np.ndarray, max_samples: int = 1_000_000) -> tuple[float, float]:
    """0.1 and 99.9 percentiles of q from at most ~max_samples evenly spaced samples (no full sort)."""
    lo, hi = np.percentile(q[:: max(1, q.size // max_samples)], [0.1, 99.9])
    return float(lo), float(hi)


def flux_factor(qdot_at_surface: np.ndarray | None, kT_over_m_eff: float | None) -> tuple[float, str]:
    """<q' theta(q')> at q*: from dq/dt samples at the surface, else sqrt(kT/m_eff/(2 pi)) (Maxwell)."""
    if qdot_at_surface is not None:
        if qdot_at_surface.size == 0:
            return float("nan"), "velocities at the surface"
        return float(np.mean(np.maximum(qdot_at_surface, 0.0))), "velocities at the surface"
    if kT_over_m_eff is not None and kT_over_m_eff > 0:
        return math.sqrt(kT_over_m_eff / (2.0 * math.pi)), "kT/m_eff"
    return float("nan"), "none"
