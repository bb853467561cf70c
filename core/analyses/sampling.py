"""Sampling adequacy and ergodicity diagnostics.

* Thirumalai-Mountain fluctuation metric (in :mod:`phasewake.core.analyses.ergodicity`, names kept here).
* Histogram divergence (Jensen-Shannon, J. Lin, IEEE Trans. Inf. Theory 37, 145 (1991)) between halves
  or segments of a run, with the level expected from noise alone for the effective sample size.
* Rank-normalised split R-hat with folding (A. Vehtari, A. Gelman, D. Simpson, B. Carpenter and
  P.-C. Buerkner, Bayesian Analysis 16(2), 667-718 (2021)), across segments of one run or across
  replicas; the classic potential scale reduction of A. Gelman and D. B. Rubin, Statistical Science
  7, 457 (1992) is reported beside it.
* Running averages with error bands, recurrence plots (J.-P. Eckmann, S. O. Kamphorst and D. Ruelle,
  Europhys. Lett. 4, 973 (1987)), phase-space coverage of a fixed grid over time (common practice).

All diagnostics here are heuristics (see :data:`phasewake.core.analyses.verdicts.HEURISTIC_NOTE`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

from phasewake.core.analyses import verdicts
from phasewake.core.analyses.correlation import Method, statistical_inefficiency
from phasewake.core.analyses.correlation.request import Series1D, read_series, sample_spacing
from phasewake.core.analyses.ergodicity import TMAccumulator as TMAccumulator
from phasewake.core.analyses.ergodicity import TMResult as TMResult
from phasewake.core.analyses.ergodicity import judge_tm as judge_tm
from phasewake.core.analyses.ergodicity import thirumalai_mountain as thirumalai_mountain
from phasewake.core.analyses.ergodicity import thirumalai_mountain_kinetic as thirumalai_mountain_kinetic
from phasewake.core.analyses.request import AnalysisRequest
from phasewake.core.analyses.result import ResultMixin
from phasewake.core.errors import AnalysisError, TooShortError
from phasewake.core.progress import Progress, Work

if TYPE_CHECKING:
    from phasewake.core.model.run import Run

# ---------------------------------------------------------------------------------------------------
# Verdict kinds
# ---------------------------------------------------------------------------------------------------

verdicts.register(
    verdicts.Threshold(
        kind="sampling.rhat", caution=1.01, problem=1.1, unit="",
        source="Vehtari et al., Bayesian Analysis 16, 667 (2021) for 1.01; Gelman and Rubin (1992) practice for 1.1",
        description="max of bulk and tail rank-normalised split R-hat",
    ),
    verdicts.Explanation(
        title="Split R-hat",
        what="Whether segments of the run (or replicas) sample the same distribution: the spread between "
        "segments relative to the spread within them, after rank-normalising (bulk) and folding about the "
        "median (tail).",
        method="Rank-normalised split R-hat of Vehtari, Gelman, Simpson, Carpenter and Buerkner, Bayesian "
        "Analysis 16, 667 (2021); the classic Gelman-Rubin (1992) value is shown beside it.",
        threshold="caution above 1.01 (Vehtari et al. 2021), problem above 1.1 (the older Gelman-Rubin rule).",
        advice="Segments disagree: the run has not converged for this quantity, or it drifts. Run longer, "
        "discard an equilibration period, or run independent replicas and compare them.",
    ),
)

verdicts.register(
    verdicts.Threshold(
        kind="sampling.divergence", caution=3.0, problem=10.0, unit="x null level",
        source="common practice (flag a Jensen-Shannon divergence a few times the level expected from noise)",
        description="Jensen-Shannon divergence between halves/segments divided by its null level",
    ),
    verdicts.Explanation(
        title="Half-against-half divergence",
        what="How different the histograms of the first and second half (or of segments) of a run are, in "
        "nats, compared with the divergence that noise alone gives for the effective number of samples.",
        method="Jensen-Shannon divergence (Lin 1991) of histograms on a shared grid; the null level is the "
        "mean divergence of multinomial histograms of the effective sample sizes n = N/g drawn from the "
        "pooled histogram (about (B - 1)/(4n) nats for B bins and equal halves), with g the statistical "
        "inefficiency of the bin occupations.",
        threshold="caution above 3x the null level, problem above 10x (common practice).",
        advice="The halves sample different regions: the run is not converged for this quantity (slow "
        "transitions, drift). Extend the run or use enhanced sampling; compare replicas.",
    ),
)

# ---------------------------------------------------------------------------------------------------
# Histogram divergence
# ---------------------------------------------------------------------------------------------------


def jensen_shannon_nats(p: np.ndarray, q: np.ndarray) -> float:
    """Jensen-Shannon divergence (nats) of two histograms (counts or probabilities). Bounded by ln 2."""
    p = np.asarray(p, float)
    q = np.asarray(q, float)
    p = p / p.sum()
    q = q / q.sum()
    m = 0.5 * (p + q)

    def kl(a: np.ndarray) -> float:
        nz = a > 0
        return float(np.sum(a[nz] * np.log(a[nz] / m[nz])))

    return 0.5 * kl(p) + 0.5 * kl(q)


def histogram_inefficiency(x: np.ndarray, edges: np.ndarray, *, n_batches: int = 20) -> float:
    """Statistical inefficiency of a histogram of a correlated series, by batch means.

    The noise of a histogram is set by how fast bin occupations decorrelate, which need not be the
    memory of the series itself (for an Ornstein-Uhlenbeck process a narrow bin's indicator forgets
    faster than x, but it also keeps a slow tail). In the chi-square limit of the plug-in JSD,
    E[JSD] = (1/8)(1/N1 + 1/N2) sum_b (1 - p_b) g_b, since var(p_b-hat) = p_b (1 - p_b) g_b / N
    (derivation). Here var(p_b-hat) is estimated from the spread of the bin frequencies over
    ``n_batches`` contiguous batches (the batch-means method, e.g. Flegal and Jones, Ann. Stat. 38,
    1034 (2010)), so g_bar = sum_b var(p_b-hat) N / p_b / sum_b (1 - p_b), clipped at 1.
    Batches must be long compared with the memory of the series; with fewer than ~10 batch lengths per
    correlation time the estimate is low.
    """
    a = np.asarray(x, dtype=np.float64)
    nb = edges.size - 1
    n = a.size
    k = int(max(2, min(n_batches, n // 4)))
    size = n // k
    if size < 2:
        return 1.0
    a = a[: size * k]
    idx = np.clip(np.searchsorted(edges, a, side="right") - 1, 0, nb - 1)
    batch = np.repeat(np.arange(k), size)
    freq = np.bincount(batch * nb + idx, minlength=k * nb).reshape(k, nb) / size
    p = freq.mean(axis=0)
    ok = (p > 0) & (p < 1)
    if not ok.any():
        return 1.0
    var_of_mean = freq[:, ok].var(axis=0, ddof=1) / k  # variance of p_b-hat over the whole series
    num = float(np.sum(var_of_mean * (size * k) / p[ok]))
    den = float(np.sum(1.0 - p[ok]))
    return max(1.0, num / den) if den > 0 else 1.0


def _jsd_rows(h1: np.ndarray, h2: np.ndarray) -> np.ndarray:
    """JSD (nats) of each row pair of two (K, B) count arrays."""
    p = h1 / h1.sum(axis=1, keepdims=True)
    q = h2 / h2.sum(axis=1, keepdims=True)
    m = 0.5 * (p + q)
    with np.errstate(divide="ignore", invalid="ignore"):
        tp = np.where(p > 0, p * np.log(np.where(p > 0, p, 1.0) / np.where(m > 0, m, 1.0)), 0.0)
        tq = np.where(q > 0, q * np.log(np.where(q > 0, q, 1.0) / np.where(m > 0, m, 1.0)), 0.0)
    return np.asarray(0.5 * tp.sum(axis=1) + 0.5 * tq.sum(axis=1))


@dataclass(frozen=True)
class DivergenceResult:
    """JSD between consecutive segments of a run, with the null level from the effective sample size."""

    n_segments: int
    jsd_nats: np.ndarray  # (S, S) pairwise divergences
    null_nats: np.ndarray  # (S, S) expected from noise
    ratio: np.ndarray  # (S, S) jsd / null
    max_ratio: float
    half_jsd_nats: float  # first half against second half (S = 2), or first against last segment
    half_null_nats: float
    statistical_inefficiency: float  # mean g of the histograms used for n_eff (samples)
    n_eff_per_segment: np.ndarray  # (S,)
    bin_edges: np.ndarray  # (B + 1,)
    histograms: np.ndarray  # (S, B) counts
    settings: dict[str, Any] = field(default_factory=dict)


def segment_divergence(x: Any, *, n_segments: int = 2, bins: int = 50, value_range: tuple[float, float] | None = None,
                       g: float | None = None, null_draws: int = 200, seed: int = 0) -> DivergenceResult:
    """Half-against-half (or segment-against-segment) Jensen-Shannon divergence with its null level.

    Parameters
    ----------
    x : array_like, shape (N,)
        The series (any unit).
    n_segments : int
        Contiguous segments compared pairwise (2 = halves).
    bins : int
        Histogram bins on one grid shared by all segments (default range: the data's).
    value_range : (float, float), optional
    g : float, optional
        Statistical inefficiency for the effective sample sizes; default: the histogram inefficiency of
        each segment (:func:`histogram_inefficiency`, batch means of the bin frequencies).
    null_draws : int
        Monte Carlo draws for the null level: pairs of multinomial histograms of sizes n_eff1, n_eff2 from
        the pooled histogram of the pair; the null is the mean of their divergence (the plug-in JSD is
        biased upwards by noise; this is that bias). 0 uses the chi-square limit (B - 1)/8 (1/n1 + 1/n2)
        instead (B occupied bins), which underestimates it when many bins are sparse.
    seed : int
        Seed of the Monte Carlo null (results are deterministic).

    Returns
    -------
    DivergenceResult
    """
    a = np.asarray(x, dtype=np.float64)
    if a.ndim != 1:
        raise AnalysisError("segment divergence takes one 1D series")
    if n_segments < 2:
        raise AnalysisError("at least two segments are needed")
    if a.size < 10 * n_segments:
        raise TooShortError("a segment divergence", have=int(a.size), need=10 * n_segments)
    lo, hi = value_range if value_range is not None else (float(a.min()), float(a.max()))
    if not hi > lo:
        raise AnalysisError("the series has no spread: histograms are undefined")
    edges = np.linspace(lo, hi, bins + 1)
    segs = np.array_split(a, n_segments)
    hists = np.array([np.histogram(s, bins=edges)[0] for s in segs], dtype=float)
    if g is not None:
        gs = np.full(n_segments, float(g))
    else:
        gs = np.array([histogram_inefficiency(s, edges) for s in segs])
    neff = np.array([s.size for s in segs]) / gs
    S = n_segments
    jsd = np.zeros((S, S))
    null = np.zeros((S, S))
    rng = np.random.default_rng(seed)
    for i in range(S):
        for j in range(i + 1, S):
            pooled = hists[i] + hists[j]
            occupied = int(np.count_nonzero(pooled))
            jsd[i, j] = jsd[j, i] = jensen_shannon_nats(hists[i], hists[j])
            if null_draws > 0:
                n1, n2 = max(2, int(round(neff[i]))), max(2, int(round(neff[j])))
                pr = pooled / pooled.sum()
                h1 = rng.multinomial(n1, pr, size=null_draws).astype(float)
                h2 = rng.multinomial(n2, pr, size=null_draws).astype(float)
                null[i, j] = null[j, i] = float(np.mean(_jsd_rows(h1, h2)))
            else:
                null[i, j] = null[j, i] = max(occupied - 1, 1) / 8.0 * (1.0 / neff[i] + 1.0 / neff[j])
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(null > 0, jsd / np.where(null > 0, null, 1.0), 0.0)
    return DivergenceResult(
        n_segments=S, jsd_nats=jsd, null_nats=null, ratio=ratio, max_ratio=float(ratio.max()),
        half_jsd_nats=float(jsd[0, S - 1]), half_null_nats=float(null[0, S - 1]),
        statistical_inefficiency=float(np.mean(gs)), n_eff_per_segment=neff, bin_edges=edges, histograms=hists,
        settings={"n_segments": n_segments, "bins": bins, "value_range": value_range, "g": g,
                  "null_draws": null_draws, "seed": seed},
    )


def judge_divergence(result: DivergenceResult, *, name: str = "series") -> verdicts.Verdict:
    return verdicts.judge(
        "sampling.divergence", result.max_ratio, title=f"Segment divergence of {name}", unit="x null level",
        message=f"{name}: the largest Jensen-Shannon divergence between {result.n_segments} segments is "
        f"{result.max_ratio:.2g} times the level noise alone gives for about "
        f"{float(result.n_eff_per_segment.mean()):.0f} effective samples per segment. " + verdicts.HEURISTIC_NOTE,
        advice=verdicts.EXPLANATIONS["sampling.divergence"].advice,
        details={"half_jsd_nats": result.half_jsd_nats, "half_null_nats": result.half_null_nats},
    )


# ---------------------------------------------------------------------------------------------------
# R-hat
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class RhatResult:
    """Rank-normalised split R-hat (bulk and folded tail), their max, and the classic split value."""

    rhat: float  # max(bulk, tail)
    bulk: float
    tail: float
    classic_split: float  # Gelman-Rubin on split chains, no rank normalisation
    n_chains: int  # before splitting
    n_draws: int  # per chain before splitting
    split: bool
    threshold: float
    ess_per_chain: float  # mean N/g of the (split) chains
    expected_from_correlation: float  # sqrt(1 + (g - 1)/n): R-hat of stationary chains with this memory
    settings: dict[str, Any] = field(default_factory=dict)


def _psrf(chains: np.ndarray) -> float:
    """Gelman-Rubin potential scale reduction of (M, N) chains."""
    m, n = chains.shape
    means = chains.mean(axis=1)
    w = chains.var(axis=1, ddof=1).mean()
    b = n * means.var(ddof=1)
    if not w > 0:
        return math.nan
    var_plus = (n - 1) / n * w + b / n
    return float(math.sqrt(var_plus / w))


def _rank_normalise(chains: np.ndarray) -> np.ndarray:
    """z = Phi^-1((r - 3/8) / (S + 1/4)) of pooled average ranks (Vehtari et al. 2021; offset from memory)."""
    from scipy.special import ndtri
    from scipy.stats import rankdata

    s = chains.size
    r = rankdata(chains, method="average").reshape(chains.shape)
    return np.asarray(ndtri((r - 0.375) / (s + 0.25)))


def rhat(chains: Any, *, split: bool = True) -> RhatResult:
    """Rank-normalised split R-hat with folding (Vehtari et al., Bayesian Analysis 16, 667 (2021)).

    Parameters
    ----------
    chains : array_like, shape (M, N)
        M chains (replicas or segments) of N draws each.
    split : bool
        Split every chain into halves first (detects drift within chains).

    Returns
    -------
    RhatResult
        ``rhat`` = max(bulk, tail); values above 1.01 suggest the chains disagree.
    """
    c = np.asarray(chains, dtype=np.float64)
    if c.ndim != 2 or c.shape[0] < 1:
        raise AnalysisError("R-hat needs chains of shape (n_chains, n_draws)")
    m, n = c.shape
    least = 8 if split else 4  # each (half-)chain needs 4 draws for its statistical inefficiency
    if (m < 2 and not split) or n < least:
        raise TooShortError("R-hat", have=int(n), need=least)
    if not np.all(np.isfinite(c)):
        raise AnalysisError("the chains hold NaN or infinite values")
    if split:
        h = n // 2
        c = np.concatenate([c[:, :h], c[:, n - h :]], axis=0)
    if np.ptp(c) == 0:
        raise AnalysisError("the chains are constant: R-hat is undefined")
    bulk = _psrf(_rank_normalise(c))
    folded = np.abs(c - np.median(c))
    tail = _psrf(_rank_normalise(folded))
    classic = _psrf(c)
    thr = verdicts.THRESHOLDS["sampling.rhat"].caution
    gs = np.array([statistical_inefficiency(row) if np.ptp(row) > 0 else 1.0 for row in c])
    n_half = c.shape[1]
    # E[B/n] = g sigma^2 / n for stationary chains, so R^2 ~ 1 + (g - 1)/n (from the Gelman-Rubin formula)
    expected = math.sqrt(1.0 + max(float(gs.mean()) - 1.0, 0.0) / n_half)
    return RhatResult(rhat=float(max(bulk, tail)), bulk=bulk, tail=tail, classic_split=classic, n_chains=m,
                      n_draws=n, split=split, threshold=thr, ess_per_chain=float(n_half / gs.mean()),
                      expected_from_correlation=expected, settings={"split": split})


def rhat_segments(x: Any, *, n_segments: int = 4) -> RhatResult:
    """Split R-hat of one run cut into ``n_segments`` contiguous segments (tests stationarity)."""
    a = np.asarray(x, dtype=np.float64)
    if a.ndim != 1:
        raise AnalysisError("rhat_segments takes one 1D series")
    n = a.size // n_segments
    if n < 8:  # split halves of 4 draws at least
        raise TooShortError("R-hat over segments", have=int(a.size), need=8 * n_segments)
    return rhat(a[: n * n_segments].reshape(n_segments, n), split=True)


def judge_rhat(result: RhatResult, *, name: str = "series") -> verdicts.Verdict:
    extra = ""
    if result.ess_per_chain < 100:
        extra = (f" Each half-chain holds only about {result.ess_per_chain:.0f} independent samples: "
                 f"memory alone makes R-hat about {result.expected_from_correlation:.3f}, so a value above "
                 f"{result.threshold} may mean too short rather than different (Vehtari et al. also ask for "
                 "an effective sample size above 100 per chain).")
    return verdicts.judge(
        "sampling.rhat", result.rhat, title=f"Split R-hat of {name}", unit="",
        message=f"{name}: rank-normalised split R-hat {result.rhat:.4f} (bulk {result.bulk:.4f}, tail "
        f"{result.tail:.4f}) over {result.n_chains} chains; values above {result.threshold} suggest the chains "
        "sample different distributions." + extra + " " + verdicts.HEURISTIC_NOTE,
        advice=verdicts.EXPLANATIONS["sampling.rhat"].advice,
        details={"classic_split": result.classic_split, "ess_per_chain": result.ess_per_chain,
                 "expected_from_correlation": result.expected_from_correlation},
    )


# ---------------------------------------------------------------------------------------------------
# Running average
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class RunningAverage:
    """Cumulative mean of a series with a band of +-1 standard error (g-corrected)."""

    time_ps: np.ndarray  # (K,) end time of each prefix
    mean: np.ndarray  # (K,) in unit
    sem: np.ndarray  # (K,) in unit
    statistical_inefficiency: float
    unit: str
    settings: dict[str, Any] = field(default_factory=dict)


def running_average(x: Any, *, dt_ps: float, n_points: int = 200, g: float | None = None, unit: str = "") -> RunningAverage:
    """Running mean over prefixes x[:k] with standard error sqrt(var_k g / k).

    g is the statistical inefficiency of the whole series by the automatic estimator (Sokal, Geyer on an
    oscillating autocorrelation, the largest when estimators disagree; correlation.auto_estimate) unless
    given (so the band is a guide, not an exact error for short prefixes).
    """
    a = np.asarray(x, dtype=np.float64)
    if a.ndim != 1 or a.size < 4:
        raise TooShortError("a running average", have=int(a.size), need=4)
    gg = float(g) if g is not None else (statistical_inefficiency(a, method="auto") if np.ptp(a) > 0 else 1.0)
    ks = np.unique(np.round(np.geomspace(2, a.size, min(n_points, a.size - 1))).astype(int))
    c1 = np.cumsum(a)
    c2 = np.cumsum((a - a.mean()) ** 2)
    cd = np.cumsum(a - a.mean())
    mean = c1[ks - 1] / ks
    var = (c2[ks - 1] - cd[ks - 1] ** 2 / ks) / np.maximum(ks - 1, 1)
    sem = np.sqrt(np.maximum(var, 0) * gg / ks)
    return RunningAverage(time_ps=ks * float(dt_ps), mean=mean, sem=sem, statistical_inefficiency=gg, unit=unit,
                          settings={"n_points": n_points, "g": g})


# ---------------------------------------------------------------------------------------------------
# Recurrence
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class RecurrenceResult:
    """R_ij = [|x_i - x_j| <= epsilon] on (at most max_points) frames."""

    matrix: np.ndarray  # (n, n) bool
    time_ps: np.ndarray  # (n,)
    epsilon: float  # in the unit of the projection
    recurrence_rate: float  # N^-2 sum R_ij, diagonal included
    stride: int
    settings: dict[str, Any] = field(default_factory=dict)


def recurrence(x: Any, *, dt_ps: float = 1.0, epsilon: float | None = None, quantile: float = 0.1,
               max_points: int = 2000) -> RecurrenceResult:
    """Recurrence plot of a projection (Eckmann, Kamphorst and Ruelle 1987).

    Parameters
    ----------
    x : array_like, shape (T,) or (T, d)
        The projection (e.g. two principal components).
    epsilon : float, optional
        Distance threshold; default the ``quantile`` of the pairwise distances (Kraemer et al. 2018).
    max_points : int
        Frames are strided down to at most this many (memory n^2).
    """
    from scipy.spatial.distance import pdist, squareform

    a = np.asarray(x, dtype=np.float64)
    if a.ndim == 1:
        a = a[:, None]
    if a.ndim != 2 or a.shape[0] < 2:
        raise TooShortError("a recurrence plot", have=int(a.shape[0]), need=2)
    stride = int(math.ceil(a.shape[0] / max_points))
    a = a[::stride]
    d = pdist(a)
    eps = float(np.quantile(d, quantile)) if epsilon is None else float(epsilon)
    mat = squareform(d <= eps)
    np.fill_diagonal(mat, True)
    return RecurrenceResult(matrix=mat, time_ps=np.arange(a.shape[0]) * stride * float(dt_ps), epsilon=eps,
                            recurrence_rate=float(mat.mean()), stride=stride,
                            settings={"epsilon": epsilon, "quantile": quantile, "max_points": max_points})


# ---------------------------------------------------------------------------------------------------
# Coverage
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CoverageResult:
    """Fraction of the cells of a fixed grid visited up to each time."""

    time_ps: np.ndarray  # (K,)
    fraction: np.ndarray  # (K,) in [0, 1]
    x_edges: np.ndarray
    y_edges: np.ndarray
    visits: np.ndarray  # (bins_x, bins_y) counts over the whole run
    settings: dict[str, Any] = field(default_factory=dict)


def coverage_over_time(x: Any, y: Any, *, dt_ps: float = 1.0, bins: int = 50,
                       x_range: tuple[float, float] | None = None, y_range: tuple[float, float] | None = None,
                       n_sigma: float = 4.0, n_points: int = 200) -> CoverageResult:
    """Phase-space coverage growth: visited fraction of a fixed 2D grid over time.

    Parameters
    ----------
    x, y : array_like, shape (T,)
        Two projections (e.g. q and p, or PC1 and PC2).
    bins : int
        Cells per axis.
    x_range, y_range : (float, float), optional
        Grid limits; default mean +- ``n_sigma`` standard deviations of the whole run.
    n_points : int
        Times reported (log spaced).
    """
    a = np.asarray(x, dtype=np.float64)
    b = np.asarray(y, dtype=np.float64)
    if a.shape != b.shape or a.ndim != 1 or a.size < 2:
        raise AnalysisError("coverage needs two 1D series of equal length")

    def rng_of(v: np.ndarray, given: tuple[float, float] | None) -> tuple[float, float]:
        if given is not None:
            return given
        s = float(v.std())
        if s == 0:
            s = 1.0
        return float(v.mean() - n_sigma * s), float(v.mean() + n_sigma * s)

    xr, yr = rng_of(a, x_range), rng_of(b, y_range)
    xe = np.linspace(xr[0], xr[1], bins + 1)
    ye = np.linspace(yr[0], yr[1], bins + 1)
    ix = np.clip(((a - xr[0]) / (xr[1] - xr[0]) * bins).astype(np.int64), -1, bins)
    iy = np.clip(((b - yr[0]) / (yr[1] - yr[0]) * bins).astype(np.int64), -1, bins)
    inside = (ix >= 0) & (ix < bins) & (iy >= 0) & (iy < bins)
    cell = np.where(inside, ix * bins + iy, -1)
    visits = np.bincount(cell[inside], minlength=bins * bins).reshape(bins, bins)
    cells, first = np.unique(cell[inside], return_index=True)
    frame_idx = np.flatnonzero(inside)[first]
    new_per_frame = np.bincount(frame_idx, minlength=a.size)
    cum = np.cumsum(new_per_frame) / (bins * bins)
    ks = np.unique(np.round(np.geomspace(1, a.size, min(n_points, a.size))).astype(int))
    return CoverageResult(time_ps=ks * float(dt_ps), fraction=cum[ks - 1], x_edges=xe, y_edges=ye, visits=visits,
                          settings={"bins": bins, "x_range": xr, "y_range": yr, "n_sigma": n_sigma})


# ---------------------------------------------------------------------------------------------------
# The request of every front end
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SamplingReport(ResultMixin):
    """What :class:`SamplingRequest` finds for one series (None where the series is too short for it)."""

    name: str
    unit: str
    running: RunningAverage
    rhat_segments: RhatResult | None
    divergence: DivergenceResult | None
    coverage: CoverageResult | None  # of (q, p) for a coordinate with a momentum
    rhat_replicas: RhatResult | None
    verdicts: tuple[verdicts.Verdict, ...]  # R-hat over segments, divergence, R-hat across replicas
    momentum_unit: str = ""  # of the coverage's second axis


@dataclass(frozen=True)
class SamplingRequest(AnalysisRequest):
    """Running average (g-corrected band), R-hat over ``segments`` contiguous segments, the half-against-half
    divergence (``bins``), the (q, p) coverage of a coordinate, and R-hat across ``replicas`` of one series
    (an energy column ``series`` or a ``coordinate``; see :func:`phasewake.core.analyses.correlation.request.
    read_series`). g of the band by ``method`` over at most ``max_lag_ps``."""

    name: ClassVar[str] = "sampling"
    label: ClassVar[str] = "sampling"

    series: str = ""
    coordinate: str = ""
    segments: int = 4
    bins: int = 50
    method: Method = "auto"
    max_lag_ps: float | None = None
    replicas: tuple[Run, ...] = ()
    start: int = 0
    stop: int | None = None

    def _read(self, run: Run) -> Work[Series1D]:
        return (yield from read_series(run, series=self.series, coordinate=self.coordinate, start=self.start,
                                       stop=self.stop))

    def work(self, run: Run) -> Work[SamplingReport]:
        s = yield from self._read(run)
        chains = [s.values]
        for rep in self.replicas:
            chains.append((yield from self._read(rep)).values)
        yield Progress(0, 1, f"sampling of {s.name}")
        return self.analyse(s, chains[1:])

    def analyse(self, s: Series1D, replica_values: list[np.ndarray]) -> SamplingReport:
        """The numbers of a series already read (and of the same series in each replica)."""
        x = s.values
        dt = sample_spacing(s.time_ps, f"series {s.name}")
        max_lag = None if self.max_lag_ps is None else max(1, int(round(self.max_lag_ps / dt)))
        seg = max(2, int(self.segments))
        rh = rhat_segments(x, n_segments=seg) if x.size >= 8 * seg else None
        div = segment_divergence(x, n_segments=2, bins=self.bins) if x.size >= 20 and np.ptp(x) > 0 else None
        g = statistical_inefficiency(x, method=self.method, max_lag=max_lag)
        mom = s.momentum
        cov = None
        if mom is not None and mom.shape == x.shape and np.all(np.isfinite(mom)) and np.ptp(mom) > 0:
            cov = coverage_over_time(x, mom, dt_ps=dt, bins=self.bins)
        rep = _replica_rhat([x, *replica_values]) if replica_values else None
        found = [judge_rhat(rh, name=f"{s.name} ({seg} segments)") if rh is not None else None,
                 judge_divergence(div, name=s.name) if div is not None else None,
                 judge_rhat(rep, name=f"{s.name} across {rep.n_chains} replicas") if rep is not None else None]
        return SamplingReport(name=s.name, unit=s.unit, running=running_average(x, dt_ps=dt, g=g, unit=s.unit),
                              rhat_segments=rh, divergence=div, coverage=cov, rhat_replicas=rep,
                              verdicts=tuple(v for v in found if v is not None), momentum_unit=s.momentum_unit)


def _replica_rhat(chains: list[np.ndarray]) -> RhatResult | None:
    """Split R-hat across runs of one series, each cut to the shortest (None below 8 samples)."""
    finite = [c[np.isfinite(c)] for c in chains]
    n = min(c.size for c in finite)
    if n < 8:
        return None
    return rhat(np.vstack([c[:n] for c in finite]), split=True)
