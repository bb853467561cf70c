"""Crossings of pooled replicas: the analysis as named steps (states, scans, events, rates, kappa, TST, checks).

See :mod:`phasewake.core.analyses.crossings` for what is found and how it stays fast.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from phasewake.core.analyses.crossings.checks import check_moves, check_traces
from phasewake.core.analyses.crossings.events import _Replica, _replica_events
from phasewake.core.analyses.crossings.kappa import (
    coarse_sample,
    counting_kappa,
    flux_sums,
    kappa_window,
    transmission,
    tst_comparison,
)
from phasewake.core.analyses.crossings.results import (
    STATE_CODES,
    CrossingSettings,
    CrossingsResult,
    PathTimes,
    RateEstimate,
    StateSuggestion,
    Trace,
    TransmissionCoefficient,
    as_trace,
)
from phasewake.core.analyses.crossings.scan import _check_scan, _Scan, _scan
from phasewake.core.analyses.crossings.states import suggest_states
from phasewake.core.analyses.rates import ExponentialTest, PoissonRate, exponential_ks_test, poisson_rate
from phasewake.core.analyses.verdicts import Verdict, judge
from phasewake.core.errors import AnalysisError, TooShortError
from phasewake.core.progress import Progress, Work, result_of


@dataclass(frozen=True)
class _States:
    a_hi: float
    b_lo: float
    surface: float
    source: str
    suggestion: StateSuggestion | None


def resolve_states(trs: Sequence[Trace], states: tuple[float, float] | None, surface: float | None, *,
                   unit: str, temperature_K: float | None, jacobian: str) -> _States:
    """The cores and the surface: given, or suggested from the pooled profile; checked for order."""
    suggestion: StateSuggestion | None = None
    if states is None:
        pooled = trs[0].values if len(trs) == 1 else np.concatenate([tr.values for tr in trs])
        try:
            suggestion = suggest_states(pooled, unit=unit, temperature_K=temperature_K, jacobian=jacobian)
        except TooShortError as exc:
            raise AnalysisError(f"{exc}; state the two cores instead (A: q <= a_hi, B: q >= b_lo; on the command "
                                "line --states A_HI,B_LO)") from None
        del pooled
        a_hi, b_lo = suggestion.a_hi, suggestion.b_lo
        if surface is None:
            surface = suggestion.surface
        source = "suggested from the free-energy profile"
    else:
        a_hi, b_lo = float(states[0]), float(states[1])
        source = "given"
    if not a_hi < b_lo:
        raise AnalysisError(
            f"the states overlap: core A is q <= {a_hi:g} {unit} and core B is q >= {b_lo:g} {unit}; "
            f"A's upper edge must lie below B's lower edge".replace("  ", " ")
        )
    if surface is None:
        surface = 0.5 * (a_hi + b_lo)
    surface = float(surface)
    if not a_hi < surface < b_lo:
        raise AnalysisError(
            f"the dividing surface {surface:g} {unit} must lie strictly between the cores "
            f"(q <= {a_hi:g} and q >= {b_lo:g} {unit})".replace("  ", " ")
        )
    return _States(a_hi, b_lo, surface, source, suggestion)


def scan_replicas(trs: Sequence[Trace], st: _States, unit: str, warnings: list[str]) -> list[_Scan]:
    """One scan per replica; a surface never crossed outside q's range is refused, an unvisited core said."""
    scans: list[_Scan] = []
    for k, tr in enumerate(trs):
        sc = _scan(tr.time_ps, tr.values, a_hi=st.a_hi, b_lo=st.b_lo, surface=st.surface)
        _check_scan(sc, k, tr)
        scans.append(sc)
    q_min = min(sc.q_min for sc in scans)
    q_max = max(sc.q_max for sc in scans)
    if not any(sc.crossings.size for sc in scans) and not q_min < st.surface < q_max:
        raise AnalysisError(
            f"the dividing surface {st.surface:g} {unit} lies outside the range of the coordinate "
            f"({q_min:.6g} to {q_max:.6g} {unit}): it is never crossed".replace("  ", " ")
        )
    if not any(bool(np.any(sc.labels == 0)) for sc in scans):
        warnings.append(f"the coordinate never enters core A (q <= {st.a_hi:g} {unit}; its minimum is "
                        f"{q_min:.4g})")
    if not any(bool(np.any(sc.labels == 1)) for sc in scans):
        warnings.append(f"the coordinate never enters core B (q >= {st.b_lo:g} {unit}; its maximum is "
                        f"{q_max:.4g})")
    return scans


def replica_events(trs: Sequence[Trace], scans: Sequence[_Scan], st: _States, total: float
                   ) -> Work[list[_Replica]]:
    """Crossings, paths and dwells of each replica (one progress step each)."""
    reps: list[_Replica] = []
    for k, (tr, sc) in enumerate(zip(trs, scans)):
        reps.append(_replica_events(tr, k, sc, a_hi=st.a_hi, b_lo=st.b_lo, surface=st.surface))
        yield Progress(1 + k, total, "crossings: events")
    return reps


def pool_tables(reps: Sequence[_Replica], warnings: list[str]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Events, paths and dwells of every replica in one table each (path rows renumbered)."""
    n_wraps = sum(r.n_wraps for r in reps)
    if n_wraps:
        warnings.append(f"{n_wraps} jumps across the period of the coordinate were not counted as crossings "
                        "of the dividing surface; transitions over the other barrier have a path but no "
                        "transition event")
    offsets = np.cumsum([0] + [r.paths.shape[0] for r in reps])
    for k, r in enumerate(reps):
        if offsets[k]:
            r.events["path"][r.events["path"] >= 0] += offsets[k]
    # the tables of one replica are its own (private) arrays: no copy
    events = reps[0].events if len(reps) == 1 else np.concatenate([r.events for r in reps])
    events["index"] = np.arange(events.shape[0])
    paths = reps[0].paths if len(reps) == 1 else np.concatenate([r.paths for r in reps])
    dwells = reps[0].dwells if len(reps) == 1 else np.concatenate([r.dwells for r in reps])
    return events, paths, dwells


def velocity_source(trs: Sequence[Trace]) -> str:
    with_vel = [tr.velocity is not None for tr in trs]
    if all(with_vel):
        return "stored velocities (dq/dt from the run), linearly interpolated to the crossing"
    if not any(with_vel):
        return "finite difference of the two frames around the crossing (secant slope)"
    return "stored velocities where the replica has them, else finite differences of frames"


def _rate(from_state: str, to_state: str, n: int, exposure: float, dwells: np.ndarray,
          confidence: float) -> RateEstimate:
    pr: PoissonRate = poisson_rate(n, exposure, confidence=confidence)
    complete = dwells[(dwells["state"] == from_state) & ~dwells["censored_start"] & ~dwells["censored_end"]]
    mean_c = float(complete["duration_ps"].mean()) if complete.size else float("nan")
    if pr.upper_bound_only:
        msg = (f"no {from_state}->{to_state} transition in {exposure:.4g} ps in {from_state}: the rate is "
               f"below {pr.ci_high_per_ps:.3g} /ps ({100 * confidence:.0f}% one-sided upper limit), not zero")
    else:
        msg = (f"{n} {from_state}->{to_state} transitions in {exposure:.4g} ps in {from_state}: "
               f"k = {pr.rate_per_ps:.3g} /ps ({100 * confidence:.0f}% interval {pr.ci_low_per_ps:.3g} to "
               f"{pr.ci_high_per_ps:.3g})")
    return RateEstimate(
        from_state=from_state, to_state=to_state, n_transitions=n, exposure_ps=float(exposure),
        rate_per_ps=pr.rate_per_ps, ci_low_per_ps=pr.ci_low_per_ps, ci_high_per_ps=pr.ci_high_per_ps,
        confidence=confidence, upper_bound_only=pr.upper_bound_only, interval_method=pr.method,
        mfpt_ps=(exposure / n) if n else float("inf"), mean_completed_dwell_ps=mean_c,
        n_completed_dwells=int(complete.size), message=msg,
    )


def rates(paths: np.ndarray, dwells: np.ndarray, confidence: float) -> tuple[RateEstimate, RateEstimate]:
    """Rates with censoring: exposure = all committed time in the origin state."""
    exp_a = float(dwells["duration_ps"][dwells["state"] == "A"].sum())
    exp_b = float(dwells["duration_ps"][dwells["state"] == "B"].sum())
    n_ab = int(np.count_nonzero(paths["from_state"] == "A"))
    n_ba = int(np.count_nonzero(paths["from_state"] == "B"))
    return _rate("A", "B", n_ab, exp_a, dwells, confidence), _rate("B", "A", n_ba, exp_b, dwells, confidence)


def path_times(paths: np.ndarray, dts: np.ndarray) -> PathTimes:
    """Transition-path durations pooled over directions and replicas (in ps and in frames of their replica)."""
    dur = paths["duration_ps"]
    if not dur.size:
        nan = float("nan")
        return PathTimes(0, nan, nan, nan, nan, nan, nan)
    dt_of_path = dts[paths["replica"]]
    return PathTimes(
        n=int(dur.size), mean_ps=float(dur.mean()),
        sem_ps=float(dur.std(ddof=1) / math.sqrt(dur.size)) if dur.size > 1 else float("nan"),
        median_ps=float(np.median(dur)), std_ps=float(dur.std(ddof=1)) if dur.size > 1 else float("nan"),
        mean_frames=float(np.mean(dur / dt_of_path)), median_frames=float(np.median(dur / dt_of_path)))


def kappa_step(trs: Sequence[Trace], reps: Sequence[_Replica], events: np.ndarray, st: _States, dts: np.ndarray, *,
               window_ps: tuple[float, float] | None, rate_ab: RateEstimate, rate_ba: RateEstimate, on: bool,
               total: float, warnings: list[str]) -> Work[tuple[TransmissionCoefficient, tuple[float, float]]]:
    """Counting and reactive-flux transmission coefficients, and the plateau window used."""
    dt = float(np.median(dts))
    paths_ps = np.concatenate([r.paths["duration_ps"] for r in reps])
    w0, w1 = kappa_window(window_ps, paths_ps, dt)
    n_lags = int(min(max(2, math.ceil(w1 / dt) + 1), max(2, max(r.n for r in reps) // 2)))
    if not np.allclose(dts, dt, rtol=1e-3):
        warnings.append("replicas have different frame spacings: kappa(t) uses only those with the "
                        f"median spacing {dt:.4g} ps")
    # kappa(t) costs crossings x lags gathers; above ~2e8 use every k-th crossing (still an unbiased
    # sample of the crossings, only noisier).
    n_cross_all = sum(int(r.crossing_i0.size) for r in reps)
    every = max(1, math.ceil(n_cross_all * n_lags / 2e8))
    if on and every > 1:
        warnings.append(f"kappa(t) uses every {every}th of the {n_cross_all} crossings (to bound its cost)")
    sums = yield from flux_sums(trs, reps, surface=st.surface, n_lags=n_lags, dt=dt, every=every,
                                on=on, progress_base=1 + len(trs), total=total)
    kappa = transmission(counting_kappa(reps, events), sums, dt=dt, window=(w0, w1), rate_ab=rate_ab,
                         rate_ba=rate_ba, kappa_time_series=on, warnings=warnings)
    return kappa, (w0, w1)


def dwell_tests(dwells: np.ndarray) -> dict[str, ExponentialTest]:
    """KS tests of each state's completed dwells against an exponential (both at once when threads allow:
    each test draws from its own seeded generator, so the numbers do not depend on it)."""
    from phasewake.core.settings import threads

    complete = ~dwells["censored_start"] & ~dwells["censored_end"]
    samples = [dwells["duration_ps"][(dwells["state"] == st) & complete] for st in STATE_CODES]
    if threads() > 1 and min(x.size for x in samples) >= 1000:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(max_workers=2) as pool:
            done = list(pool.map(exponential_ks_test, samples))
    else:
        done = [exponential_ks_test(x) for x in samples]
    return dict(zip(STATE_CODES, done))


def judge_crossings(rate_ab: RateEstimate, rate_ba: RateEstimate, tests: dict[str, ExponentialTest],
                    times: PathTimes, st: _States, *, unit: str, dt: float, warnings: list[str]) -> list[Verdict]:
    """Verdicts on the number of transitions, the dwell-time shapes and the time resolution of paths."""
    n_ab, n_ba = rate_ab.n_transitions, rate_ba.n_transitions
    verdicts = [judge(
        "crossings.few_transitions", float(min(n_ab, n_ba)), title="Number of transitions", unit="transitions",
        message=f"{n_ab} A->B and {n_ba} B->A transitions (core A: q <= {st.a_hi:g}, core B: q >= {st.b_lo:g} "
                f"{unit}); the rarer direction sets the precision of the rates".replace("  ", " "),
        advice="run longer or pool replicas; rates with no transition are upper bounds",
        details={"n_ab": n_ab, "n_ba": n_ba},
    )]
    for state, test in tests.items():
        if not math.isfinite(test.p_value):
            continue
        v = judge(
            "crossings.dwell_exponential", test.p_value, title=f"Dwell times in {state} exponential",
            unit="p-value",
            message=f"{test.n} completed dwells in {state}: KS distance {test.statistic:.3f} to an "
                    f"exponential of mean {test.mean_ps:.4g} ps, p = {test.p_value:.3g} "
                    f"(Lilliefors), coefficient of variation {test.cv:.2f} (1 for an exponential)",
            advice="see the explanation of crossings.dwell_exponential",
            details={"state": state, "n": test.n},
        )
        verdicts.append(v)
        if v.level != "ok":
            warnings.append(f"dwell times in {state} do not look exponential (p = {test.p_value:.3g}, "
                            f"CV = {test.cv:.2f}): a single rate may not describe {state}")
    if times.n:
        verdicts.append(judge(
            "crossings.path_resolution", times.median_frames, title="Time resolution of paths",
            unit="frames",
            message=f"median transition path spans {times.median_frames:.1f} frames "
                    f"({times.median_ps:.4g} ps at {dt:.4g} ps per frame)",
            advice="recrossings faster than a frame are invisible; save frames more often",
        ))
    return verdicts


def start_warnings(reps: Sequence[_Replica], coarse: np.ndarray, durations_ps: np.ndarray, st: _States,
                   rate_ab: RateEstimate, rate_ba: RateEstimate, warnings: list[str]) -> None:
    """Replicas that begin between the cores have an unknown committed state: a transition already under
    way at their start is not counted. Expected loss = (replicas starting outside the cores) x P(on a
    transition path | outside the cores) = time on paths / time outside the cores."""
    n_outside = sum(1 for r in reps if r.unassigned_ps > 0)
    total_time = float(sum(r.time_span_ps for r in reps))
    outside = float(np.count_nonzero((coarse > st.a_hi) & (coarse < st.b_lo))) / max(coarse.size, 1)
    on_paths = float(durations_ps.sum()) / (outside * total_time) if outside > 0 and total_time > 0 else 0.0
    missed = n_outside * min(1.0, on_paths)
    n_tr = rate_ab.n_transitions + rate_ba.n_transitions
    if n_tr and missed > max(1.0, 0.02 * n_tr):
        warnings.append(
            f"{n_outside} replica(s) begin between the cores, where the committed state is unknown; about "
            f"{missed:.3g} transitions under way at those starts are not counted ({100 * missed / n_tr:.2g}% "
            f"of the {n_tr} counted), so the rates are biased low by about that much: longer replicas help")
    if rate_ab.upper_bound_only or rate_ba.upper_bound_only:
        warnings.append("no transition in at least one direction: that rate is an upper bound, not zero")


def crossings_work(
    traces: Sequence[Any],
    *,
    states: tuple[float, float] | None = None,
    surface: float | None = None,
    unit: str = "",
    confidence: float = 0.95,
    kappa_window_ps: tuple[float, float] | None = None,
    temperature_K: float | None = None,
    kT_over_m_eff: float | None = None,
    test_dwells: bool = True,
    kappa_time_series: bool = True,
    jacobian: str = "none",
) -> Work[CrossingsResult]:
    """Find crossings, paths, dwells, rates and transmission coefficients, pooled over replicas.

    Parameters
    ----------
    traces : sequence of Trace, CoordinateSeries or (time_ps, q[, qdot]) tuples
        One per replica. time_ps shape (n_r,), ps; q shape (n_r,), ``unit``; qdot unit/ps.
    states : (a_hi, b_lo), optional
        Core A is q <= a_hi, core B is q >= b_lo. Default: suggested from the free-energy profile
        (:func:`suggest_states`).
    surface : float, optional
        Dividing surface q*, strictly between the cores. Default: the barrier top of the profile when
        the states are suggested, else midway between the cores.
    confidence : float
        Coverage of the rate intervals.
    kappa_window_ps : (t1, t2), optional
        Lag window (ps) over which the reactive-flux kappa(t) is averaged; default from the 90th
        percentile of the transition-path durations to twice that (at least 10 to 20 frames).
    temperature_K, kT_over_m_eff : optional
        Used for the TST flux factor when there are no velocities (kT_over_m_eff in (unit/ps)^2).
    test_dwells : bool
        Run the KS test of completed dwells against an exponential.
    kappa_time_series : bool
        Compute the reactive-flux kappa(t) (its cost grows with crossings x lags; overdamped data with
        very many crossings may want it off).
    jacobian : "none" or "distance"
        Of the profile the states are suggested from (:func:`suggest_states`).

    Yields :class:`~phasewake.core.progress.Progress`; returns a :class:`CrossingsResult`.
    """
    trs = [as_trace(x) for x in traces]
    check_traces(trs)
    check_moves([tr.values for tr in trs], unit)
    total = float(len(trs) * 2 + 2)
    yield Progress(0, total, "crossings: checking states")
    st = resolve_states(trs, states, surface, unit=unit, temperature_K=temperature_K, jacobian=jacobian)
    warnings: list[str] = []
    scans = scan_replicas(trs, st, unit, warnings)
    reps = yield from replica_events(trs, scans, st, total)
    events, paths, dwells = pool_tables(reps, warnings)
    rate_ab, rate_ba = rates(paths, dwells, confidence)
    dts = np.array([r.dt_ps for r in reps])
    dt, times = float(np.median(dts)), path_times(paths, dts)
    kappa, (w0, w1) = yield from kappa_step(trs, reps, events, st, dts, window_ps=kappa_window_ps, rate_ab=rate_ab,
                                            rate_ba=rate_ba, on=kappa_time_series, total=total, warnings=warnings)
    coarse, coarse_v = coarse_sample(trs)
    tst = tst_comparison(coarse, coarse_v, surface=st.surface, unit=unit, kT_over_m_eff=kT_over_m_eff,
                         rate_ab=rate_ab, rate_ba=rate_ba, warnings=warnings)
    yield Progress(total - 1, total, "crossings: dwell tests")
    tests = dwell_tests(dwells) if test_dwells else {}
    verdicts = judge_crossings(rate_ab, rate_ba, tests, times, st, unit=unit, dt=dt, warnings=warnings)
    start_warnings(reps, coarse, paths["duration_ps"], st, rate_ab, rate_ba, warnings)
    yield Progress(total, total, "crossings: done")
    return CrossingsResult(
        settings=CrossingSettings(
            a_hi=st.a_hi, b_lo=st.b_lo, surface=st.surface, unit=unit, states_source=st.source, confidence=confidence,
            kappa_window_ps=None if kappa_window_ps is None else (float(w0), float(w1)), temperature_K=temperature_K,
            jacobian=jacobian),
        n_replicas=len(trs), n_samples=int(sum(r.n for r in reps)),
        total_time_ps=float(sum(r.time_span_ps for r in reps)),
        unassigned_time_ps=float(sum(r.unassigned_ps for r in reps)), frame_spacing_ps=dt,
        events=events, paths=paths, dwells=dwells, velocity_source=velocity_source(trs),
        velocity_unit=f"{unit}/ps" if unit else "1/ps", rate_ab=rate_ab, rate_ba=rate_ba,
        path_times=times, kappa=kappa, tst=tst, dwell_tests=tests, suggestion=st.suggestion,
        verdicts=tuple(verdicts), warnings=tuple(warnings),
        replica_names=tuple(tr.name for tr in trs),
    )


def pool_crossings(traces: Sequence[Any], **settings: Any) -> CrossingsResult:
    """:func:`crossings_work` run to the end (no progress display). Same keyword-only settings."""
    return result_of(crossings_work(traces, **settings))


def analyse_crossings(time_ps: np.ndarray, q: np.ndarray, qdot: np.ndarray | None = None, *,
                      states: tuple[float, float] | None = None, surface: float | None = None,
                      unit: str = "", confidence: float = 0.95,
                      kappa_window_ps: tuple[float, float] | None = None,
                      temperature_K: float | None = None, kT_over_m_eff: float | None = None,
                      test_dwells: bool = True, kappa_time_series: bool = True) -> CrossingsResult:
    """One replica: time_ps (n,) ps, q (n,) unit, qdot (n,) unit/ps or None. See :func:`crossings_work`."""
    return result_of(crossings_work(
        [Trace(np.asarray(time_ps, float), np.asarray(q, float),
               None if qdot is None else np.asarray(qdot, float))],
        states=states, surface=surface, unit=unit, confidence=confidence, kappa_window_ps=kappa_window_ps,
        temperature_K=temperature_K, kT_over_m_eff=kT_over_m_eff, test_dwells=test_dwells,
        kappa_time_series=kappa_time_series))
