"""Diffusion: Green-Kubo from the VACF, Einstein from the mean-squared displacement, Yeh-Hummer
finite-size correction (papers in :mod:`phasewake.core.analyses.velocity`)."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.errors import AnalysisError, MissingDataError, TooShortError
from phasewake.core.progress import Work

if TYPE_CHECKING:
    from phasewake.core.model.run import FrameChunk, Run

from phasewake.core.analyses.velocity.autocorrelation import (
    DEFAULT_BUFFER_BYTES,
    VACFResult,
    _default_lag,
    _frame_spacing,
    _group_labels,
    _pass_range,
)
from phasewake.core.analyses.velocity.correlator import BlockCorrelator
from phasewake.core.analyses.verdicts import Explanation, Threshold, register

register(
    Threshold("transport.vacf_resolution", caution=3.0, problem=2.0, unit="frames per decay",
              source="common practice: a trapezoid integral needs points across the decay of the integrand. "
                     "For an exponential VACF with x = spacing / decay time it overestimates by "
                     "x (1/2 + 1/(e^x - 1)) - 1: 2% at 2 frames per decay, 8% at 1, 66% at 1/3 (analytic); "
                     "an oscillating VACF (cage rattling, librations) is far worse once its swing is not sampled",
              higher_is_worse=False,
              description="frames within which the normalised VACF falls to 1/e"),
    Explanation(
        title="Green-Kubo integral resolved",
        what="Whether the velocities are saved often enough for the Green-Kubo integral of their "
             "autocorrelation: the VACF must be sampled across its decay.",
        method="The lag (in frames) where the normalised VACF first falls to 1/e, interpolated linearly.",
        threshold="Below 2 frames the Green-Kubo value is unreliable and not used, below 3 a caution (common "
                  "practice).",
        advice="Use the mean-squared displacement (Einstein) of the same run, or save velocities every few fs "
               "in a short extra run for Green-Kubo.",
    ),
)
register(
    Threshold("transport.gk_msd_agreement", caution=3.0, problem=10.0, unit="combined standard errors",
              source="common practice (a difference beyond 3 combined standard errors is more than noise; "
                     "beyond 10 one of the two values is wrong)",
              description="difference of the Green-Kubo and Einstein (MSD) diffusion coefficients"),
    Explanation(
        title="Green-Kubo against mean-squared displacement",
        what="Whether the two routes to the diffusion coefficient of the same atoms agree.",
        method="D from the integral of the VACF (Green 1954, Kubo 1957) and from the slope of the MSD "
               "(Einstein), each with a standard error from contiguous blocks of time origins (block "
               "averaging; the VACF integral's error also includes half the spread of the running integral "
               "over its plateau).",
        threshold="A difference beyond 3 combined standard errors is a caution, beyond 10 a problem (common "
                  "practice).",
        advice="Disagreement usually means coarse frames (Green-Kubo biased), a short run (MSD not yet linear), "
               "or unwrapping problems (MSD). Check the VACF resolution and the MSD fit range.",
    ),
)

YEH_HUMMER_XI = 2.837297  # Yeh & Hummer (2004), cubic box
NM2_PER_PS_TO_CM2_PER_S = 1e-2

# ---------------------------------------------------------------------------------------------------
# Green-Kubo
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class GreenKuboResult:
    """D = (1/d) int_0^limit VACF dt for one group."""

    group: str
    diffusion_nm2_per_ps: float
    diffusion_cm2_per_s: float
    limit_ps: float
    limit_rule: str  # "user" or how it was chosen
    noise_nm2_per_ps2: float  # noise level of the VACF used by the rule
    running_integral_nm2_per_ps: np.ndarray  # (L,) (1/d) cumulative integral
    lag_ps: np.ndarray  # (L,)
    dimensions: int
    settings: dict[str, Any] = field(default_factory=dict)
    decay_frames: float = float("nan")  # lag (frames) where the normalised VACF first falls to 1/e
    reliable: bool = True  # False: the VACF decays within too few frames (transport.vacf_resolution)
    plateau_spread_nm2_per_ps: float = float("nan")  # half the range of the running integral from the limit to 2x it
    block_values_nm2_per_ps: np.ndarray = field(default_factory=lambda: np.zeros(0))  # D of contiguous time blocks
    block_error_nm2_per_ps: float | None = None  # standard error of the mean over blocks

    @property
    def error_nm2_per_ps(self) -> float | None:
        """Standard error: block error and plateau spread combined in quadrature (None without blocks)."""
        if self.block_error_nm2_per_ps is None:
            return None
        spread = self.plateau_spread_nm2_per_ps if math.isfinite(self.plateau_spread_nm2_per_ps) else 0.0
        return float(math.hypot(self.block_error_nm2_per_ps, spread))


def decay_frames(vacf_row: np.ndarray, level: float = math.exp(-1.0)) -> float:
    """Lag in frames where ``vacf_row / vacf_row[0]`` first falls to ``level`` (linear interpolation);
    the window length when it never does."""
    c = np.asarray(vacf_row, dtype=float)
    if c.size < 2 or not c[0] > 0:
        return float("nan")
    r = c / c[0]
    below = np.flatnonzero(r <= level)
    if below.size == 0:
        return float(c.size - 1)
    k = int(below[0])
    return float(k - 1 + (r[k - 1] - level) / (r[k - 1] - r[k]))


def green_kubo(result: VACFResult, *, group: int | str = 0, limit_ps: float | None = None,
               dimensions: int = 3, noise_sigmas: float = 3.0, hold_fraction: float = 0.1) -> GreenKuboResult:
    """Diffusion coefficient from the (not mass-weighted) VACF by Green-Kubo.

    The integration limit, unless given: the first lag after which |VACF| stays within
    ``noise_sigmas`` times the noise level for ``hold_fraction`` of the lag window; the noise level is
    the standard deviation of the VACF over the last quarter of the window (common practice: the tail
    is assumed decorrelated). Trapezoidal integration.

    Returns
    -------
    GreenKuboResult
    """
    if result.mass_weighted:
        raise AnalysisError("Green-Kubo diffusion needs the VACF without mass weighting")
    gi = result.groups.index(group) if isinstance(group, str) else int(group)
    c = result.vacf[gi]
    t = result.lag_ps
    if c.size < 8:
        raise TooShortError("a Green-Kubo integral", have=int(c.size), need=8)
    dt = result.dt_ps
    running = np.concatenate([[0.0], np.cumsum(0.5 * (c[1:] + c[:-1]) * dt)]) / dimensions
    tail = c[-max(4, c.size // 4):]
    noise = float(np.std(tail))
    if limit_ps is not None:
        k = int(min(c.size - 1, max(1, round(limit_ps / dt))))
        rule = "user"
    else:
        inside = np.abs(c) <= noise_sigmas * noise
        hold = max(1, int(hold_fraction * c.size))
        # run_len[k] = number of consecutive "inside" lags starting at k (reverse cumulative count,
        # reset at every lag outside the band)
        idx = np.arange(c.size)
        last_out = np.where(~inside, idx, c.size)  # for each k: the first outside lag at or after k
        first_out_after = np.minimum.accumulate(last_out[::-1])[::-1]
        run_len = first_out_after - idx
        ok = np.flatnonzero(run_len >= np.minimum(hold, c.size - idx))
        ok = ok[ok > 0]
        k = int(ok[0]) if ok.size else c.size - 1
        rule = (f"first lag where |VACF| stays within {noise_sigmas:g} x noise for {hold} lags"
                if ok.size else "end of the lag window (the VACF did not decay into its noise)")
    d = float(running[k])
    plateau = running[k:min(c.size, 2 * k + 1)]
    dec = decay_frames(c)
    return GreenKuboResult(
        group=result.groups[gi], diffusion_nm2_per_ps=d, diffusion_cm2_per_s=d * NM2_PER_PS_TO_CM2_PER_S,
        limit_ps=float(t[k]), limit_rule=rule, noise_nm2_per_ps2=noise, running_integral_nm2_per_ps=running,
        lag_ps=t, dimensions=dimensions,
        settings={"limit_ps": limit_ps, "noise_sigmas": noise_sigmas, "hold_fraction": hold_fraction},
        decay_frames=dec,
        reliable=not (dec < _threshold("transport.vacf_resolution").problem),
        plateau_spread_nm2_per_ps=float(0.5 * (plateau.max() - plateau.min())) if plateau.size > 1 else float("nan"),
    )


def _threshold(kind: str) -> Threshold:
    from phasewake.core.analyses.verdicts import THRESHOLDS

    return THRESHOLDS[kind]


def yeh_hummer_correction_nm2_per_ps(*, temperature_K: float, viscosity_mPa_s: float, box_edge_nm: float) -> float:
    """Yeh-Hummer finite-size correction xi kT / (6 pi eta L) (nm^2/ps), cubic box.

    Yeh and Hummer, J. Phys. Chem. B 108, 15873 (2004); xi = 2.837297. Use the viscosity of the
    simulated model, not of experiment.
    """
    if not (temperature_K > 0 and viscosity_mPa_s > 0 and box_edge_nm > 0):
        raise AnalysisError("the Yeh-Hummer correction needs positive temperature, viscosity and box edge")
    kt_j = 1.380649e-23 * temperature_K
    d_m2_s = YEH_HUMMER_XI * kt_j / (6.0 * math.pi * viscosity_mPa_s * 1e-3 * box_edge_nm * 1e-9)
    return d_m2_s * 1e6  # m^2/s -> nm^2/ps


@dataclass(frozen=True)
class TransportResult:
    """Diffusion of each group by Green-Kubo and by the MSD, with block errors and their comparison."""

    vacf: VACFResult
    green_kubo: tuple[GreenKuboResult, ...]
    msd: MSDResult | None
    msd_block_error_nm2_per_ps: tuple[float | None, ...]  # per group
    n_blocks: int
    verdicts: tuple[Any, ...]
    notes: tuple[str, ...] = ()


def transport(run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
              limit_ps: float | None = None, max_lag_ps: float | None = None,
              fit_range_ps: tuple[float, float] | None = None, start: int = 0, stop: int | None = None,
              n_blocks: int = 5, with_msd: bool = True,
              vacf_result: VACFResult | None = None) -> Work[TransportResult]:
    """Green-Kubo and Einstein diffusion with error bars and their comparison (generator).

    The whole run gives each value; ``n_blocks`` contiguous blocks of time origins give its standard
    error (block averaging: the standard deviation of the block values over sqrt(blocks)); the Green-Kubo
    error also holds half the spread of the running integral from the limit to twice it. The Green-Kubo
    value is marked unreliable (and the comparison says so) when the VACF decays within fewer frames than
    ``transport.vacf_resolution`` allows: with velocities 100 fs apart in water the first trapezoid alone
    overestimates D several times. Blocks shorter than 4 limits (or 16 frames) are not used. The VACF and
    the MSD of a span come from one frame pass.
    """
    import dataclasses

    known = vacf_result if vacf_result is not None and not vacf_result.mass_weighted else None
    res, msd_res = yield from _vacf_and_msd(run, groups=groups, vacf_lag_ps=max_lag_ps, msd_lag_ps=max_lag_ps,
                                            fit_range_ps=fit_range_ps, start=start, stop=stop,
                                            with_msd=with_msd and run.frames is not None,
                                            known=known)
    gks = [green_kubo(res, group=i, limit_ps=limit_ps) for i in range(len(res.groups))]
    n_total = len(range(start, run.n_frames if stop is None else min(stop, run.n_frames)))
    k_max = max(int(round(g.limit_ps / res.dt_ps)) for g in gks)
    b = int(n_blocks)
    while b >= 3 and n_total // b < max(16, 4 * k_max):
        b -= 1
    notes: list[str] = []
    msd_err: list[float | None] = [None] * len(res.groups)
    if b >= 3:
        size = n_total // b
        gk_blocks = np.zeros((len(res.groups), b))
        msd_blocks = np.zeros((len(res.groups), b))
        for j in range(b):
            s0 = start + j * size
            fit, msd_lag = None, None
            if msd_res is not None:
                lo, hi = msd_res.fit_range_ps
                half = (size // 2) * res.dt_ps
                same = hi <= half - res.dt_ps  # the whole run's fit range fits in the block: use it
                fit, msd_lag = ((lo, hi) if same else None), (hi + res.dt_ps if same else half)
            rb, mb = yield from _vacf_and_msd(run, groups=groups, vacf_lag_ps=max(k_max + 1, 8) * res.dt_ps,
                                              msd_lag_ps=msd_lag, fit_range_ps=fit, start=s0, stop=s0 + size,
                                              with_msd=msd_res is not None)
            for i, g in enumerate(gks):
                gk_blocks[i, j] = green_kubo(rb, group=i, limit_ps=g.limit_ps).diffusion_nm2_per_ps
            if mb is not None:
                msd_blocks[:, j] = mb.diffusion_nm2_per_ps
        gks = [dataclasses.replace(g, block_values_nm2_per_ps=gk_blocks[i],
                                   block_error_nm2_per_ps=float(np.std(gk_blocks[i], ddof=1) / math.sqrt(b)))
               for i, g in enumerate(gks)]
        if msd_res is not None:
            msd_err = [float(np.std(msd_blocks[i], ddof=1) / math.sqrt(b)) for i in range(len(res.groups))]
    else:
        notes.append(f"no block error bars: {n_total} frames make fewer than 3 blocks of at least "
                     f"{max(16, 4 * k_max)} frames (4 Green-Kubo limits)")
    return TransportResult(vacf=res, green_kubo=tuple(gks), msd=msd_res, msd_block_error_nm2_per_ps=tuple(msd_err),
                           n_blocks=b if b >= 3 else 0, verdicts=_transport_verdicts(gks, msd_res, msd_err, res.dt_ps),
                           notes=tuple(notes))


def _vacf_and_msd(run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray] | None, vacf_lag_ps: float | None,
                  msd_lag_ps: float | None, fit_range_ps: tuple[float, float] | None, start: int, stop: int | None,
                  with_msd: bool, known: VACFResult | None = None
                  ) -> Work[tuple[VACFResult, MSDResult | None]]:
    """The VACF (unless ``known``) and the MSD (when ``with_msd``) of frames [start, stop), from one pass."""
    from phasewake.core.analyses.velocity.autocorrelation import VACFConsumer
    from phasewake.core.model.framepass import run_pass

    consumers: dict[str, Any] = {}
    if known is None:
        consumers["velocity autocorrelation"] = VACFConsumer(run, groups=groups, max_lag_ps=vacf_lag_ps,
                                                             start=start, stop=stop)
    if with_msd:
        consumers["mean-squared displacement"] = MSDConsumer(run, groups=groups, max_lag_ps=msd_lag_ps,
                                                             fit_range_ps=fit_range_ps, start=start, stop=stop)
    got = (yield from run_pass(run, consumers, start=start, stop=stop)) if consumers else {}
    res = known if known is not None else got["velocity autocorrelation"]
    return res, got.get("mean-squared displacement")


def _transport_verdicts(gks: Sequence[GreenKuboResult], msd_res: MSDResult | None, msd_err: Sequence[float | None],
                        dt_ps: float) -> tuple[Any, ...]:
    """Resolution of each Green-Kubo value and its agreement with the MSD value."""
    import dataclasses

    from phasewake.core.analyses.verdicts import THRESHOLDS, Verdict, judge

    verdicts = []
    for i, g in enumerate(gks):
        msg = f"{g.group}: the VACF falls to 1/e within {g.decay_frames:.2g} frames ({dt_ps * 1e3:.3g} fs apart)"
        if not g.reliable:
            msg += (f": the Green-Kubo value {g.diffusion_nm2_per_ps:.3g} nm^2/ps rests on the first interval or two "
                    "and is unreliable (biased high); it is not used")
        verdicts.append(judge("transport.vacf_resolution", g.decay_frames, title=f"Green-Kubo resolution ({g.group})",
                              unit="frames per decay", message=msg,
                              advice=_explanation("transport.vacf_resolution")))
        if msd_res is None:
            continue
        dm = float(msd_res.diffusion_nm2_per_ps[i])
        rel = (g.diffusion_nm2_per_ps - dm) / dm if dm else float("inf")
        e1, e2 = g.error_nm2_per_ps, msd_err[i]
        words = (f"{g.group}: Green-Kubo D = {_pm(g.diffusion_nm2_per_ps, e1)} nm^2/ps, MSD (Einstein) D = "
                 f"{_pm(dm, e2)} nm^2/ps: Green-Kubo is {100 * rel:+.0f}% of the MSD value")
        if not g.reliable:
            words += "; the Green-Kubo value is unreliable (coarse frames): use the MSD value"
        if e1 is not None and e2 is not None and (e1 > 0 or e2 > 0):
            z = abs(g.diffusion_nm2_per_ps - dm) / math.hypot(e1, e2)
            v = judge("transport.gk_msd_agreement", z, title=f"Green-Kubo vs MSD ({g.group})",
                      unit="combined standard errors", message=words + f" ({z:.1f} combined standard errors)",
                      advice=_explanation("transport.gk_msd_agreement"))
        else:
            v = Verdict("transport.gk_msd_agreement", "info", f"Green-Kubo vs MSD ({g.group})", None, "",
                        words + " (no error bars: too few frames for blocks)",
                        threshold=THRESHOLDS["transport.gk_msd_agreement"])
        if not g.reliable and v.level in ("ok", "info"):
            v = dataclasses.replace(v, level="caution")
        verdicts.append(v)
    return tuple(verdicts)


def _pm(value: float, error: float | None) -> str:
    return f"{value:.4g}" if error is None else f"{value:.4g} +- {error:.2g}"


def _explanation(kind: str) -> str:
    from phasewake.core.analyses.verdicts import EXPLANATIONS

    return EXPLANATIONS[kind].advice


# ---------------------------------------------------------------------------------------------------
# MSD
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MSDResult:
    """Mean-squared displacement per group with the Einstein D from a linear fit."""

    lag_ps: np.ndarray  # (L,)
    msd_nm2: np.ndarray  # (n_groups, L)
    groups: tuple[str, ...]
    diffusion_nm2_per_ps: np.ndarray  # (n_groups,) slope / (2 d)
    fit_range_ps: tuple[float, float]
    dimensions: int
    unwrapped: bool
    n_frames: int
    dt_ps: float
    settings: dict[str, Any] = field(default_factory=dict)


class _Unwrapper:
    """Unwrap positions chunk by chunk: r_u(t) = r_u(t-1) + minimum_image(r(t) - r(t-1)), from r_u(0) = 0.

    Displacements are taken relative to the first frame, which keeps the numbers small.
    """

    def __init__(self) -> None:
        self.last: np.ndarray | None = None  # wrapped positions of the last frame seen
        self.acc: np.ndarray | None = None  # unwrapped displacement of the last frame seen

    def __call__(self, pos: np.ndarray, box: np.ndarray | None) -> np.ndarray:
        from phasewake.core.analyses.geometry import minimum_image

        p = np.asarray(pos, dtype=np.float64)
        if self.last is None:
            prev = p[:1]
            self.acc = np.zeros_like(p[0])
        else:
            prev = self.last[None]
        steps = np.diff(np.concatenate([prev, p], axis=0), axis=0)  # (n, N, 3)
        if box is not None:
            steps = minimum_image(steps, np.asarray(box, dtype=np.float64))
        assert self.acc is not None
        out = self.acc + np.cumsum(steps, axis=0)
        self.last = p[-1].copy()
        self.acc = out[-1].copy()
        return out


def _msd_finish(corr: BlockCorrelator, sq: np.ndarray, *, names: tuple[str, ...], sizes: np.ndarray, dt: float,
                fit_range_ps: tuple[float, float] | None, dimensions: int, unwrapped: bool,
                settings: dict[str, Any]) -> MSDResult:
    sums, _ = corr.finish()
    return _msd_result(_inside_sums(sums, sq, corr.n_frames), corr.n_frames, names=names, sizes=sizes, dt=dt,
                       fit_range_ps=fit_range_ps, dimensions=dimensions, unwrapped=unwrapped, settings=settings)


def _inside_sums(sums: np.ndarray, sq: np.ndarray, f: int) -> np.ndarray:
    """sum over origins t of |r(t+k) - r(t)|^2 per group (n_groups, L), from the correlation sums and the
    per-frame squares ``sq`` (n_groups, f): sum q(t+k) + sum q(t) - 2 sum r(t).r(t+k)."""
    k = np.arange(sums.shape[1])
    # sum_{t=0}^{F-1-k} q(t+k) + q(t), from prefix sums of q (per group, per frame)
    cs = np.concatenate([np.zeros((sq.shape[0], 1)), np.cumsum(sq, axis=1)], axis=1)
    head = cs[:, np.maximum(f - k, 0)]  # sum_{t < F-k} q(t)
    tailsum = cs[:, f:f + 1] - cs[:, np.minimum(k, f)]  # sum_{t >= k} q(t)
    return np.where(k < f, head + tailsum - 2.0 * sums, 0.0)


def _msd_result(inside: np.ndarray, f: int, *, names: tuple[str, ...], sizes: np.ndarray, dt: float,
                fit_range_ps: tuple[float, float] | None, dimensions: int, unwrapped: bool,
                settings: dict[str, Any]) -> MSDResult:
    """The MSD and its Einstein D from the sums over origins of squared displacements of ``f`` frames."""
    if f < 4:
        raise TooShortError("a mean-squared displacement", have=f, need=4)
    k = np.arange(inside.shape[1])
    counts = np.maximum(f - k, 0).astype(float)
    ok = counts > 0
    msd = np.where(ok, inside / np.where(ok, counts, 1.0), np.nan) / sizes[:, None]
    msd = msd[:, ok]
    lag = k[ok] * dt
    lo, hi = fit_range_ps if fit_range_ps is not None else (0.2 * lag[-1], 0.8 * lag[-1])
    sel = (lag >= lo) & (lag <= hi)
    if sel.sum() < 2:
        raise AnalysisError(f"the MSD fit range {lo:g}-{hi:g} ps holds fewer than two lags")
    A = np.vstack([lag[sel], np.ones(sel.sum())]).T
    coef, *_ = np.linalg.lstsq(A, msd[:, sel].T, rcond=None)
    return MSDResult(lag_ps=lag, msd_nm2=msd, groups=names, diffusion_nm2_per_ps=coef[0] / (2 * dimensions),
                     fit_range_ps=(float(lo), float(hi)), dimensions=dimensions, unwrapped=unwrapped,
                     n_frames=f, dt_ps=dt, settings=settings)


def msd_from_positions(positions_nm: np.ndarray, dt_ps: float, *, box_nm: np.ndarray | None = None,
                       groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
                       max_lag: int | None = None, fit_range_ps: tuple[float, float] | None = None,
                       dimensions: int = 3) -> MSDResult:
    """MSD of an in-memory position array, unwrapped with the box when given.

    Parameters
    ----------
    positions_nm : ndarray, shape (F, N, 3), nm
    dt_ps : float
    box_nm : ndarray, shape (F, 3, 3) or (3, 3) or (3,), nm, optional
    groups : mapping name -> atom indices, optional
    max_lag : int, optional
        Lags (frames), default F // 2.
    fit_range_ps : (float, float), optional
        Time range of the linear fit; default 20%-80% of the lag window.
    """
    p = np.asarray(positions_nm)
    if p.ndim != 3 or p.shape[2] != 3:
        raise AnalysisError("positions must have shape (n_frames, n_atoms, 3)")
    f, n = p.shape[:2]
    box = None
    if box_nm is not None:
        b = np.asarray(box_nm, float)
        if b.shape == (3,):
            b = np.diag(b)
        box = np.broadcast_to(b, (f, 3, 3)) if b.shape == (3, 3) else b
    lab, names, sizes = _group_labels(n, groups)
    lag = max(1, f // 2) if max_lag is None else int(max(1, min(max_lag, f)))
    corr = BlockCorrelator(n_atoms=n, max_lag=lag, weights=np.ones(n), group_of_atom=lab,
                           n_groups=len(names), dtype=np.float64)
    un = _Unwrapper()
    r = un(p, box)
    corr.update(r)
    sq = _group_square_sums(r, lab, len(names))
    return _msd_finish(corr, sq, names=names, sizes=sizes, dt=dt_ps, fit_range_ps=fit_range_ps,
                       dimensions=dimensions, unwrapped=box is not None, settings={"max_lag": lag})


def _group_square_sums(r: np.ndarray, lab: np.ndarray, n_groups: int) -> np.ndarray:
    q = np.einsum("fnc,fnc->fn", r, r)  # (F, N)
    out = np.zeros((n_groups, r.shape[0]))
    for g in range(n_groups):
        out[g] = q[:, lab == g].sum(axis=1)
    return out


class MSDConsumer:
    """Mean-squared displacement of unwrapped positions as a frame consumer (settings of :func:`msd`).

    ``merge(later)``: the squared displacements inside each part do not depend on where each part's
    unwrapping started, so they add; the pairs across the cut come from the last L - 1 frames of this part
    and the first L - 1 of the later one, the later shifted by the unwrapped step across the cut (minimum
    image of its first frame against this part's last). Counts exact, sums to float64 rounding.
    """

    needs_positions = True
    needs_velocities = False

    def __init__(self, run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
                 max_lag_ps: float | None = None, fit_range_ps: tuple[float, float] | None = None,
                 start: int = 0, stop: int | None = None, stride: int = 1,
                 max_buffer_bytes: int = DEFAULT_BUFFER_BYTES, dimensions: int = 3) -> None:
        if run.frames is None:
            raise MissingDataError("the run holds no frames", path=run.paths[0] if run.paths else None)
        self.fit_range_ps, self.dimensions = fit_range_ps, int(dimensions)
        self.start, self.stop, self.stride = int(start), stop, int(stride)
        self.dt = _frame_spacing(run, start, stop, stride)
        self.window = (int(start), run.frames.n_frames if stop is None else min(stop, run.frames.n_frames))
        n_sel = len(range(*self.window, stride))
        self.lab, self.names, self.sizes = _group_labels(run.n_atoms, groups)
        used = np.flatnonzero(self.lab >= 0)
        if max_lag_ps is None:
            self.lag, _ = _default_lag(n_sel, used.size, max_buffer_bytes, np.float64)
        else:
            self.lag = int(max(1, min(round(max_lag_ps / self.dt), n_sel)))
        self.has_box = bool(run.frames.has_box)
        self.atoms: np.ndarray | None = None if used.size == run.n_atoms else used.astype(np.int64)
        self._range = self.window
        self._sel = np.zeros(0, dtype=np.int64)
        self._corr: BlockCorrelator | None = None
        self._un = _Unwrapper()
        self._sq: list[np.ndarray] = []
        self._inside: np.ndarray | None = None
        self._n = 0
        self._first: tuple[np.ndarray, np.ndarray | None] | None = None  # first wrapped frame and its box
        self._head = np.zeros((0, 0))
        self._tail: list[np.ndarray] = []

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        self._range = _pass_range(self.window, start, stop, "MSD")
        cols = np.arange(self.lab.size) if columns is None else columns
        self._sel = np.flatnonzero(self.lab[cols] >= 0)
        self._corr = BlockCorrelator(n_atoms=self._sel.size, max_lag=self.lag, weights=np.ones(self._sel.size),
                                     group_of_atom=self.lab[cols][self._sel], n_groups=len(self.names),
                                     dtype=np.float64)
        self._head = np.zeros((0, 3 * self._sel.size))

    def update(self, chunk: FrameChunk) -> None:
        if self._corr is None:
            raise AnalysisError("the MSD consumer was fed before prepare (or after a merge)")
        pos = np.asarray(chunk.positions_nm)
        pos = pos if self._sel.size == pos.shape[1] else pos[:, self._sel]
        if self._first is None:
            box0 = None if chunk.box_nm is None else np.asarray(chunk.box_nm[0], dtype=np.float64)
            self._first = (np.asarray(pos[0], dtype=np.float64), box0)
        r = self._un(pos, chunk.box_nm)
        self._corr.update(r)
        self._sq.append(_group_square_sums(r, self._corr_groups(), len(self.names)))
        keep = self.lag - 1
        if keep > 0:
            flat = r.reshape(r.shape[0], -1)
            if self._head.shape[0] < keep:
                self._head = np.concatenate([self._head, flat[: keep - self._head.shape[0]]])
            self._tail.append(flat[-keep:].copy())
            while sum(t.shape[0] for t in self._tail[1:]) >= keep:
                self._tail.pop(0)

    def _corr_groups(self) -> np.ndarray:
        return self.lab[self.lab >= 0] if self.atoms is None else self.lab[self.atoms]

    def _settle(self) -> None:
        if self._corr is not None:
            sums, _ = self._corr.finish()
            sq = np.concatenate(self._sq, axis=1) if self._sq else np.zeros((len(self.names), 0))
            self._n = self._corr.n_frames
            self._inside = _inside_sums(sums, sq, self._n)
            self._corr, self._sq = None, []
        if self._inside is None:
            self._inside = np.zeros((len(self.names), self.lag))

    def _last(self) -> np.ndarray:
        return np.concatenate(self._tail)[-(self.lag - 1):] if self._tail else self._head[:0]

    def merge(self, later: MSDConsumer) -> None:
        from phasewake.core.analyses.geometry import minimum_image
        from phasewake.core.model.feeding import check_next

        check_next(self._range, later._range, "mean-squared displacement")
        self._settle()
        later._settle()
        assert self._inside is not None and later._inside is not None
        if later._first is None or later._n == 0:
            self._range = (self._range[0], later._range[1])
            return
        first, box = later._first
        step = first - self._un.last if self._un.last is not None else np.zeros_like(first)
        if box is not None:
            step = minimum_image(step[None], box[None])[0]
        shift = (self._un.acc if self._un.acc is not None else 0.0) + step  # later's origin in these coordinates
        flat_shift = np.asarray(shift).reshape(-1)
        across = _straddling_squares(self._last(), later._head + flat_shift, self._corr_groups(),
                                     len(self.names), self.lag)
        self._inside = self._inside + later._inside + across
        self._n += later._n
        keep = self.lag - 1
        if self._head.shape[0] < keep:
            self._head = np.concatenate([self._head, later._head + flat_shift])[:keep]
        self._tail = [np.concatenate([self._last(), later._last() + flat_shift])[-keep:]] if keep > 0 else []
        self._un.last = later._un.last
        self._un.acc = None if later._un.acc is None else later._un.acc + shift
        self._range = (self._range[0], later._range[1])

    def finish(self) -> MSDResult:
        self._settle()
        assert self._inside is not None
        return _msd_result(self._inside, self._n, names=self.names, sizes=self.sizes, dt=self.dt,
                           fit_range_ps=self.fit_range_ps, dimensions=self.dimensions, unwrapped=self.has_box,
                           settings={"max_lag": self.lag, "start": self.start, "stop": self.stop,
                                     "stride": self.stride})


def _straddling_squares(before: np.ndarray, after: np.ndarray, group_of_atom: np.ndarray, n_groups: int,
                        max_lag: int) -> np.ndarray:
    """sum of |r(t+k) - r(t)|^2 over t in ``before`` (T, 3n) and t + k in ``after`` (H, 3n), k < L, per group:
    |a|^2 + |b|^2 - 2 a.b, the cross term by :func:`straddling_sums`."""
    from phasewake.core.analyses.velocity.autocorrelation import straddling_sums, sum_by_straddling_lag

    def squares(cols: np.ndarray) -> np.ndarray:
        a2 = np.einsum("ij,ij->i", before[:, cols], before[:, cols])
        b2 = np.einsum("ij,ij->i", after[:, cols], after[:, cols])
        return a2[:, None] + b2[None, :]

    cross = straddling_sums(before, after, group_of_atom, np.ones(group_of_atom.size), n_groups, max_lag)
    return -2.0 * cross + sum_by_straddling_lag(before.shape[0], after.shape[0], group_of_atom, n_groups, max_lag,
                                                squares)


def msd(run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
        max_lag_ps: float | None = None, fit_range_ps: tuple[float, float] | None = None,
        start: int = 0, stop: int | None = None, stride: int = 1,
        max_buffer_bytes: int = DEFAULT_BUFFER_BYTES, dimensions: int = 3) -> Work[MSDResult]:
    """Streaming MSD of a run, positions unwrapped with the box (generator returning MSDResult): the frame
    pass with one :class:`MSDConsumer`."""
    from phasewake.core.model.framepass import run_one

    consumer = MSDConsumer(run, groups=groups, max_lag_ps=max_lag_ps, fit_range_ps=fit_range_ps, start=start,
                           stop=stop, stride=stride, max_buffer_bytes=max_buffer_bytes, dimensions=dimensions)
    return (yield from run_one(run, consumer, label="mean-squared displacement", start=start, stop=stop,
                               stride=stride))


