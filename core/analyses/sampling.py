"""Sampling adequacy and ergodicity diagnostics.

* Thirumalai-Mountain fluctuation metric Omega(t) of per-particle time averages: an effectively
  ergodic run decays as Omega(t)/Omega(0) ~ 1/(D t); a non-ergodic one plateaus (D. Thirumalai,
  R. D. Mountain and T. R. Kirkpatrick, Phys. Rev. A 39, 3563 (1989); R. D. Mountain and
  D. Thirumalai, J. Phys. Chem. 93, 6975 (1989)).
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
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.analyses import verdicts
from phasewake.core.analyses.correlation import statistical_inefficiency
from phasewake.core.errors import AnalysisError, MissingDataError, TooShortError
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

verdicts.register(
    verdicts.Threshold(
        kind="sampling.tm_slope", caution=-0.7, problem=-0.3, unit="log-log slope",
        source="common practice (the Thirumalai-Mountain metric decays with slope -1 when effectively ergodic)",
        description="late-time log-log slope of the Thirumalai-Mountain metric",
    ),
    verdicts.Explanation(
        title="Thirumalai-Mountain metric",
        what="Spread between the time averages of equivalent particles (their energies, kinetic energies or "
        "a chosen coordinate). In an effectively ergodic run every particle sees the same average and the "
        "spread falls as 1/(D t).",
        method="Omega(t) = mean_j (eps_j(t) - <eps(t)>)^2 of running time averages (Thirumalai, Mountain "
        "and Kirkpatrick, Phys. Rev. A 39, 3563 (1989)); slope of log Omega against log t at late times "
        "and a fit of Omega(0)/Omega(t) = D t + b.",
        threshold="caution when the late slope is flatter than -0.7, problem when flatter than -0.3 "
        "(common practice; ergodic decay has slope -1).",
        advice="A plateau means particles do not exchange their environments on the time scale of the run "
        "(a glassy or trapped system, or particles that are not equivalent). Check that the particles "
        "compared are equivalent; run longer.",
    ),
)


# ---------------------------------------------------------------------------------------------------
# Thirumalai-Mountain
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class TMResult:
    """Thirumalai-Mountain metric over time.

    omega : (T,) Omega(t) in ``unit``^2; ratio : (T,) Omega(t)/Omega(0) with Omega(0) the
    instantaneous spread between particles averaged over frames.
    """

    time_ps: np.ndarray
    omega: np.ndarray
    omega0: float
    ratio: np.ndarray
    d_per_ps: float  # fitted D of Omega(0)/Omega(t) = D t + b over the fit range
    late_slope: float  # d log Omega / d log t over the fit range
    plateau: bool  # late slope flatter than the caution threshold
    fit_range_ps: tuple[float, float]
    n_particles: int
    unit: str
    quantity: str
    settings: dict[str, Any] = field(default_factory=dict)


class TMAccumulator:
    """Streaming Thirumalai-Mountain metric: feed (n, N) per-particle values chunk by chunk."""

    def __init__(self) -> None:
        self._sum: np.ndarray | None = None
        self._count = 0
        self._omega: list[np.ndarray] = []
        self._inst_sum = 0.0

    def update(self, values: np.ndarray) -> None:
        e = np.asarray(values, dtype=np.float64)
        if e.ndim != 2:
            raise AnalysisError("per-particle values must have shape (n_frames, n_particles)")
        if self._sum is None:
            self._sum = np.zeros(e.shape[1])
        cs = self._sum + np.cumsum(e, axis=0)
        counts = self._count + np.arange(1, e.shape[0] + 1)
        avg = cs / counts[:, None]
        self._omega.append(avg.var(axis=1))
        self._inst_sum += float(e.var(axis=1).sum())
        self._sum = cs[-1]
        self._count += e.shape[0]

    def finish(self, *, dt_ps: float, fit_range_ps: tuple[float, float] | None = None, unit: str = "",
               quantity: str = "", n_particles: int = 0) -> TMResult:
        if self._count < 8:
            raise TooShortError("the Thirumalai-Mountain metric", have=self._count, need=8)
        omega = np.concatenate(self._omega)
        omega0 = self._inst_sum / self._count
        if not omega0 > 0:
            raise AnalysisError("the particles' values do not differ: the Thirumalai-Mountain metric is undefined")
        t = (np.arange(omega.size) + 1) * dt_ps  # the average over the first k frames covers k dt
        lo, hi = fit_range_ps if fit_range_ps is not None else (0.1 * t[-1], t[-1])
        sel = (t >= lo) & (t <= hi) & (omega > 0)
        if sel.sum() < 3:
            raise AnalysisError("the Thirumalai-Mountain fit range holds fewer than three points")
        ratio = omega / omega0
        inv = 1.0 / ratio[sel]
        d, b = np.polyfit(t[sel], inv, 1)
        slope = float(np.polyfit(np.log(t[sel]), np.log(omega[sel]), 1)[0])
        thr = verdicts.THRESHOLDS["sampling.tm_slope"]
        return TMResult(time_ps=t, omega=omega, omega0=omega0, ratio=ratio, d_per_ps=float(d),
                        late_slope=slope, plateau=slope > thr.caution, fit_range_ps=(float(lo), float(hi)),
                        n_particles=n_particles, unit=unit, quantity=quantity,
                        settings={"fit_range_ps": fit_range_ps})


def thirumalai_mountain(values: np.ndarray, *, dt_ps: float, fit_range_ps: tuple[float, float] | None = None,
                        unit: str = "", quantity: str = "per-particle values") -> TMResult:
    """Thirumalai-Mountain metric of per-particle series.

    Parameters
    ----------
    values : ndarray, shape (T, N)
        One series per particle (energy in kJ/mol, or any per-particle quantity in ``unit``).
    dt_ps : float
        Frame spacing (ps).
    fit_range_ps : (float, float), optional
        Range for the late-time fits; default the last 90% of the run.

    Returns
    -------
    TMResult
        ``d_per_ps`` is D_e in Omega(0)/Omega(t) = D_e t; for independent stationary series with
        statistical inefficiency g, D_e = 1 / (g dt).
    """
    e = np.asarray(values, dtype=np.float64)
    if e.ndim != 2 or e.shape[1] < 2:
        raise AnalysisError("the Thirumalai-Mountain metric needs values of shape (n_frames, n_particles >= 2)")
    acc = TMAccumulator()
    for i in range(0, e.shape[0], 65536):
        acc.update(e[i : i + 65536])
    return acc.finish(dt_ps=dt_ps, fit_range_ps=fit_range_ps, unit=unit, quantity=quantity, n_particles=e.shape[1])


def thirumalai_mountain_kinetic(run: Run, *, atom_indices: Sequence[int] | np.ndarray | None = None,
                                fit_range_ps: tuple[float, float] | None = None, chunk_frames: int = 256,
                                start: int = 0, stop: int | None = None, stride: int = 1) -> Work[TMResult]:
    """TM metric of per-atom kinetic energies (1/2 m v^2, kJ/mol) of a run, streamed.

    Use atoms that are equivalent (one species); the metric compares their time averages.
    """
    if run.frames is None or not run.frames.has_velocities:
        raise MissingDataError("the Thirumalai-Mountain metric of kinetic energies needs velocities",
                               path=run.paths[0] if run.paths else None)
    idx = np.arange(run.n_atoms) if atom_indices is None else np.asarray(atom_indices, dtype=np.int64)
    if idx.size < 2:
        raise AnalysisError("the Thirumalai-Mountain metric needs at least two atoms")
    m = np.asarray(run.masses_amu, float)[idx]
    t = np.asarray(run.time_ps)[start:stop:stride]
    if t.size < 2:
        raise TooShortError("the Thirumalai-Mountain metric", have=int(t.size), need=8)
    dt = float(np.median(np.diff(t)))
    acc = TMAccumulator()
    done = 0
    for chunk in run.frames.iter_chunks(chunk_frames=chunk_frames, start=start, stop=stop, stride=stride,
                                        atom_indices=idx, velocities=True, positions=False):
        v = chunk.velocities_nm_per_ps
        if v is None:
            raise MissingDataError("the frames came without velocities", path=run.paths[0] if run.paths else None)
        ke = 0.5 * m[None, :] * np.einsum("fnc,fnc->fn", v.astype(np.float64), v.astype(np.float64))
        acc.update(ke)
        done += chunk.n_frames
        yield Progress(done, t.size, "Thirumalai-Mountain metric")
    return acc.finish(dt_ps=dt, fit_range_ps=fit_range_ps, unit="kJ/mol", quantity="kinetic energy per atom",
                      n_particles=int(idx.size))


def judge_tm(result: TMResult) -> verdicts.Verdict:
    return verdicts.judge(
        "sampling.tm_slope", result.late_slope, title="Thirumalai-Mountain metric", unit="log-log slope",
        message=f"The spread between time averages of {result.n_particles} particles ({result.quantity}) falls "
        f"with late log-log slope {result.late_slope:.2f} (ergodic decay: -1). " + verdicts.HEURISTIC_NOTE,
        advice=verdicts.EXPLANATIONS["sampling.tm_slope"].advice,
        details={"d_per_ps": result.d_per_ps},
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
    if (m < 2 and not split) or n < 4:
        raise TooShortError("R-hat", have=int(c.size), need=8)
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
    if n < 4:
        raise TooShortError("R-hat over segments", have=int(a.size), need=4 * n_segments)
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

