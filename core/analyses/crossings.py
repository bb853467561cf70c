"""Barrier crossings along a reaction coordinate: events, transition paths, dwell times, rates, kappa.

Two states are core sets on the coordinate q: state A is q <= ``a_hi`` (the low side), state B is
q >= ``b_lo`` (the high side), with ``a_hi < surface < b_lo``. The committed state changes only when q
enters the *other* core (two thresholds with hysteresis; Buchete and Hummer, J. Phys. Chem. B 112,
6057 (2008)), so quick returns across the dividing surface q* are recrossings, not transitions.

What is found, per replica, without any per-frame Python loop (loops run over events only):

- every crossing of q* between two frames, its time and dq/dt linearly interpolated to the crossing
  (from stored velocities where given, else the secant slope of the two frames), its direction (+1 when
  q increases, A side to B side), and its kind:

  ``transition``  the crossing after which the trajectory reaches the other core without crossing again;
  ``recrossing``  any other crossing with a known origin (the trajectory crosses back first, or returns
                  to the core it came from);
  ``censored``    the origin is unknown (no core visited yet) or the run ends before the outcome.

- transition paths: from the last exit of the origin core to the first entry into the other core,
  both times interpolated to the core boundary; their durations (Hummer, J. Chem. Phys. 120, 516 (2004)).
- dwell (committed-state) segments: from the entry into a core to the entry into the other core. The first
  segment (start unknown) and the last (end unknown) are kept and marked censored: their time counts in the
  exposure of the rate, but they are not counted as complete dwells.
- rates k = transitions / time in the origin state (exponential MLE with censoring) with exact Poisson
  intervals, upper bounds when nothing was seen; a KS test of completed dwells against an exponential;
- transmission coefficients by counting and by the reactive-flux kappa(t) of the run's own crossings;
  the TST rate from the run's own distribution of q, so k / k_TST can be compared with kappa.

Several replicas pool their events (:func:`pool_crossings`). The Run adapter is
:func:`crossings_of_runs`. A periodic coordinate (``Trace.period``, set for dihedrals) does not count a
jump across its period as a crossing.

How it stays fast: one chunked pass (1 MB chunks, temporaries in cache, no full-length temporary)
finds the frames where q changes side of q* and the extreme value of q in each piece between them;
pieces are merged into segments with one reduction, and a segment whose extreme reaches its side's
core commits the state. When a core is idle the pass runs as two parts on two threads
(:mod:`phasewake.core.cpuload`). Only at committed-state changes is the exact core entry (and the last
exit from the origin core) looked up, locally. Noise flickering at a core boundary therefore costs
nothing; 1e8 samples take about 0.7-1.0 s on a shared 2-core machine, 4-5x one numpy pass
(tests/benchmarks: crossings_long_series), of which the pass is ~2.6x and the events, the dwell tests
(Monte Carlo) and the TST histogram the rest. Everything here is a heuristic read of finite data; see
:data:`phasewake.core.analyses.verdicts.HEURISTIC_NOTE`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

from phasewake.core import interrupts
from phasewake.core.analyses.rates import (
    ExponentialTest,
    PoissonRate,
    TSTRate,
    central_range,
    exponential_ks_test,
    flux_factor,
    poisson_rate,
    tst_rate_from_counts,
)
from phasewake.core.analyses.request import AnalysisRequest
from phasewake.core.analyses.verdicts import (
    HEURISTIC_NOTE,
    THRESHOLDS,
    Explanation,
    Threshold,
    Verdict,
    judge,
    register,
)
from phasewake.core.errors import AnalysisError, TooShortError
from phasewake.core.progress import Progress, Work, result_of
from phasewake.core.units import KB_KJ_PER_MOL_K

if TYPE_CHECKING:
    from phasewake.core.model.run import Run

# --------------------------------------------------------------------------------------------------
# Verdict kinds
# --------------------------------------------------------------------------------------------------

register(
    Threshold(
        kind="crossings.few_transitions", caution=20, problem=5, unit="transitions",
        higher_is_worse=False,
        source="common practice: a count of N has a Poisson relative error of 1/sqrt(N) "
               "(about 22% at 20, 45% at 5)",
        description="number of transitions in the rarer direction",
    ),
    Explanation(
        title="Number of transitions",
        what="How many committed transitions (core to core) the run shows in the rarer direction.",
        method="Core-set state assignment with hysteresis (Buchete and Hummer 2008); a rate is the number "
               "of transitions over the time spent in the origin state, whose relative error is 1/sqrt(N).",
        threshold="caution below 20, problem below 5 transitions (common practice, from the Poisson error).",
        advice="Run longer or pool independent replicas; with no transitions the rate is only an upper bound.",
    ),
)
register(
    Threshold(
        kind="crossings.dwell_exponential", caution=0.05, problem=0.001, unit="p-value",
        higher_is_worse=False,
        source="Lilliefors (1969) KS test against an exponential; 5% and 0.1% levels are common practice",
        description="p-value of completed dwell times against an exponential with the fitted mean",
    ),
    Explanation(
        title="Dwell times exponential",
        what="Whether the completed dwell times in a state look exponential, as they should for a "
             "two-state process with a single rate.",
        method="Kolmogorov-Smirnov distance to an exponential with the sample mean, p-value from Monte "
               "Carlo draws under the fitted null (Lilliefors 1969). Censored segments are left out.",
        threshold="caution when p < 0.05, problem when p < 0.001 (common practice significance levels).",
        advice="Non-exponential dwells suggest hidden intermediate states, a poor reaction coordinate, "
               "core sets too close to the barrier, or a run barely longer than the dwells (completed "
               "dwells are then biased short). Try other core boundaries or another coordinate.",
    ),
)
register(
    Threshold(
        kind="crossings.barrier", caution=1.0, problem=1.0, unit="kT", higher_is_worse=False,
        source="common practice: a dip of less than about 1 kT in -kT ln P(q) is within thermal noise, "
               "not two states",
        description="highest barrier of the coordinate's free-energy profile, seen from both sides",
    ),
    Explanation(
        title="A barrier to define states",
        what="Whether the coordinate's distribution has two states separated by a barrier, so that "
             "crossings between them mean something.",
        method="The free-energy profile -kT ln P(q) (histogram, minima closer than 0.5 kT merged); the "
               "barrier highest from both sides.",
        threshold="States are only suggested over a barrier of at least 1 kT (common practice); below it the "
                  "crossings would count noise, and no states are defined.",
        advice="Choose a coordinate that separates the states of your process, or give the states "
               "yourself (--states) if you know them from elsewhere.",
    ),
)
register(
    Threshold(
        kind="crossings.constant", caution=1e-3, problem=1e-3, unit="relative standard deviation",
        higher_is_worse=False,
        source="the rigid-pair criterion of the constraint inference (relative spread 1e-3: constraint "
               "solvers hold bonds to 1e-4 or better; float32 round-off is 6e-8)",
        description="spread of the coordinate relative to its mean below which it is constant",
    ),
    Explanation(
        title="A coordinate that moves",
        what="Whether the coordinate changes at all beyond constraint tolerance and round-off.",
        method="Standard deviation of the coordinate over all frames against its mean magnitude "
               "(and an absolute floor of 1e-6 of its unit).",
        threshold="Below a relative 1e-3 the coordinate is constant (a constrained bond, a rigid "
                  "molecule); its crossings would be round-off noise and are refused.",
        advice="Choose a coordinate that moves: for a rigid molecule a distance between molecules, an "
               "angle, or a principal component.",
    ),
)
register(
    Threshold(
        kind="crossings.path_resolution", caution=5, problem=2, unit="frames",
        higher_is_worse=False,
        source="common practice: a crossing that lasts fewer frames than a handful cannot show its "
               "recrossings",
        description="median transition-path duration in frames",
    ),
    Explanation(
        title="Time resolution of transition paths",
        what="How many frames a typical transition path spans.",
        method="Median duration of the transition paths divided by the frame spacing.",
        threshold="caution below 5 frames, problem below 2 (common practice).",
        advice="Recrossings faster than the frame spacing are invisible, so counting kappa is biased "
               "high; save frames more often if the files allow.",
    ),
)

# --------------------------------------------------------------------------------------------------
# Tables
# --------------------------------------------------------------------------------------------------

STATE_CODES = ("A", "B")

EVENT_DTYPE = np.dtype([
    ("index", np.int64),  # row number in the pooled table
    ("replica", np.int32),
    ("frame", np.int64),  # frame nearest to the crossing, within its replica
    ("time_ps", np.float64),  # interpolated crossing time
    ("direction", np.int8),  # +1: q increases (A side -> B side), -1: the reverse
    ("kind", "U10"),  # transition | recrossing | censored
    ("from_state", "U1"),  # committed state before the crossing ("" when none yet)
    ("to_state", "U1"),  # first core reached after the crossing ("" when the run ends first)
    ("velocity", np.float64),  # dq/dt at the crossing, unit/ps
    ("path_duration_ps", np.float64),  # transition-path duration for transitions, else nan
    ("path", np.int64),  # row in the paths table for transitions, else -1
])

PATH_DTYPE = np.dtype([
    ("replica", np.int32),
    ("from_state", "U1"),
    ("to_state", "U1"),
    ("exit_frame", np.int64),  # first frame outside the origin core
    ("entry_frame", np.int64),  # first frame inside the destination core
    ("exit_time_ps", np.float64),  # interpolated to the origin core's boundary
    ("entry_time_ps", np.float64),  # interpolated to the destination core's boundary
    ("duration_ps", np.float64),
    ("n_crossings", np.int32),  # crossings of the dividing surface during the path (odd)
])

DWELL_DTYPE = np.dtype([
    ("replica", np.int32),
    ("state", "U1"),
    ("start_frame", np.int64),
    ("end_frame", np.int64),
    ("start_ps", np.float64),
    ("end_ps", np.float64),
    ("duration_ps", np.float64),
    ("censored_start", np.bool_),  # first segment: how long it had been in the state is unknown
    ("censored_end", np.bool_),  # last segment: the run ended before it left
])


@dataclass(frozen=True)
class Event:
    """One crossing of the dividing surface (a row of :attr:`CrossingsResult.events`)."""

    index: int
    replica: int
    frame: int
    time_ps: float
    direction: int
    kind: str
    from_state: str
    to_state: str
    velocity: float
    velocity_unit: str
    path_duration_ps: float
    path: int


@dataclass(frozen=True)
class Trace:
    """One replica's coordinate: times (ps), values (unit) and dq/dt (unit/ps) or None."""

    time_ps: np.ndarray
    values: np.ndarray
    velocity: np.ndarray | None = None
    name: str = ""
    period: float | None = None  # e.g. 2 pi for a dihedral: a jump by more than half of it is a wrap



def as_trace(obj: Any, name: str = "") -> Trace:
    """A :class:`Trace` from a Trace, a ``CoordinateSeries``-like object or a tuple (t, q[, qdot]).

    A series whose ``velocities_estimated`` is True is taken without velocities: the crossing
    velocity then comes from the frames themselves, and says so.
    """
    if isinstance(obj, Trace):
        return obj
    if isinstance(obj, tuple | list):
        if len(obj) not in (2, 3):
            raise AnalysisError("a trace is (time_ps, q) or (time_ps, q, dq/dt)")
        v = obj[2] if len(obj) == 3 else None
        return Trace(np.asarray(obj[0], float), np.asarray(obj[1], float),
                     None if v is None else np.asarray(v, float), name)
    t = getattr(obj, "time_ps", None)
    q = getattr(obj, "values", None)
    if t is None or q is None:
        raise AnalysisError(f"cannot read a coordinate series from {type(obj).__name__}")
    v = getattr(obj, "velocity", None)
    if getattr(obj, "velocities_estimated", False):
        v = None
    period = 2.0 * math.pi if getattr(obj, "periodic", False) else None
    return Trace(np.asarray(t, float), np.asarray(q, float), None if v is None else np.asarray(v, float),
                 name or str(getattr(obj, "label", "")), period)


# --------------------------------------------------------------------------------------------------
# Settings and results
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CrossingSettings:
    """What produced a :class:`CrossingsResult`. Values of q in ``unit``; times in ps."""

    a_hi: float  # state A core: q <= a_hi
    b_lo: float  # state B core: q >= b_lo
    surface: float  # dividing surface q*
    unit: str
    states_source: str  # "given" or "suggested from the free-energy profile"
    confidence: float
    kappa_window_ps: tuple[float, float] | None  # plateau window of kappa(t); None = automatic
    temperature_K: float | None
    temperature_source: str = ""  # where temperature_K came from (or why it is unknown)
    jacobian: str = "none"  # of the profile the states were suggested from


@dataclass(frozen=True)
class RateEstimate:
    """Rate of leaving ``from_state`` for ``to_state`` (per ps), pooled over replicas."""

    from_state: str
    to_state: str
    n_transitions: int
    exposure_ps: float  # time committed to the origin state, censored segments included
    rate_per_ps: float  # MLE n / T; 0 when n == 0 (then report ci_high_per_ps as an upper bound)
    ci_low_per_ps: float
    ci_high_per_ps: float
    confidence: float
    upper_bound_only: bool
    interval_method: str
    mfpt_ps: float  # 1 / rate (exposure per transition); inf when none seen
    mean_completed_dwell_ps: float  # mean of uncensored dwells (biased short in short runs)
    n_completed_dwells: int
    message: str


@dataclass(frozen=True)
class TransmissionCoefficient:
    """Counting and reactive-flux transmission coefficients.

    Counting: transitions per crossing of the dividing surface in the same direction.
    Reactive flux: kappa(t) = sum_c s_c theta(q(t_c + t) - q*) / N_+ over the run's own crossings c
    (s_c their direction); see :func:`reactive_flux`.
    """

    counting_up: float  # A->B transitions per +1 crossing
    counting_down: float  # B->A transitions per -1 crossing
    counting: float  # all transitions per crossing
    n_crossings_up: int
    n_crossings_down: int
    lag_ps: np.ndarray  # shape (n_lags,)
    kappa_up: np.ndarray  # shape (n_lags,), A->B
    kappa_down: np.ndarray  # shape (n_lags,), B->A
    kappa: np.ndarray  # shape (n_lags,), both directions pooled
    n_used: np.ndarray  # crossings that contribute at each lag
    plateau_window_ps: tuple[float, float]
    plateau: float  # mean of kappa(t) exp(k_relax t) over the window
    plateau_raw: float  # mean of kappa(t) over the window, uncorrected
    relaxation_rate_per_ps: float  # k_AB + k_BA used in the correction
    assumptions: str


@dataclass(frozen=True)
class TSTComparison:
    """k / k_TST for both directions, to compare with kappa."""

    tst: TSTRate
    kappa_up: float  # k_AB / k_TST(A->B)
    kappa_down: float
    note: str


@dataclass(frozen=True)
class PathTimes:
    """Transition-path durations (ps) pooled over both directions and replicas."""

    n: int
    mean_ps: float
    sem_ps: float
    median_ps: float
    std_ps: float
    mean_frames: float
    median_frames: float


@dataclass(frozen=True)
class StateSuggestion:
    """Core sets and dividing surface read off a 1D free-energy profile F(q) = -kT ln P(q)."""

    a_hi: float
    b_lo: float
    surface: float
    minimum_a: float
    minimum_b: float
    barrier_from_a_kT: float
    barrier_from_b_kT: float
    centres: np.ndarray  # bin centres, unit
    free_energy_kT: np.ndarray  # F - min F, kT (NaN where empty)
    method: str
    unit: str = ""  # unit of a_hi, b_lo, surface, minima and centres


@dataclass(frozen=True)
class CrossingsResult:
    """Everything :func:`pool_crossings` finds. Tables are numpy structured arrays (see the dtypes)."""

    settings: CrossingSettings
    n_replicas: int
    n_samples: int
    total_time_ps: float
    unassigned_time_ps: float  # before the first core visit of each replica (given to the first core reached)
    frame_spacing_ps: float
    events: np.ndarray  # EVENT_DTYPE
    paths: np.ndarray  # PATH_DTYPE
    dwells: np.ndarray  # DWELL_DTYPE
    velocity_source: str
    velocity_unit: str
    rate_ab: RateEstimate
    rate_ba: RateEstimate
    path_times: PathTimes
    kappa: TransmissionCoefficient
    tst: TSTComparison | None
    dwell_tests: dict[str, ExponentialTest]
    suggestion: StateSuggestion | None
    verdicts: tuple[Verdict, ...]
    warnings: tuple[str, ...]
    note: str = HEURISTIC_NOTE
    replica_names: tuple[str, ...] = field(default_factory=tuple)

    @property
    def n_transitions(self) -> int:
        return int(np.count_nonzero(self.events["kind"] == "transition"))

    @property
    def n_recrossings(self) -> int:
        return int(np.count_nonzero(self.events["kind"] == "recrossing"))

    def event(self, i: int) -> Event:
        """Row i of the events table as an :class:`Event`."""
        r = self.events[i]
        return Event(int(r["index"]), int(r["replica"]), int(r["frame"]), float(r["time_ps"]),
                     int(r["direction"]), str(r["kind"]), str(r["from_state"]), str(r["to_state"]),
                     float(r["velocity"]), self.velocity_unit, float(r["path_duration_ps"]), int(r["path"]))

    def event_rows(self) -> list[Event]:
        return [self.event(i) for i in range(self.events.shape[0])]

    def to_dict(self, *, tables: bool = True) -> dict[str, Any]:
        """Plain data (numbers with units in names) for JSON; tables as lists of row dicts."""
        from dataclasses import asdict

        def rows(a: np.ndarray) -> list[dict[str, Any]]:
            names = a.dtype.names or ()
            return [{k: r[k].item() for k in names} for r in a]

        out: dict[str, Any] = {
            "settings": asdict(self.settings),
            "n_replicas": self.n_replicas,
            "n_samples": self.n_samples,
            "total_time_ps": self.total_time_ps,
            "unassigned_time_ps": self.unassigned_time_ps,
            "frame_spacing_ps": self.frame_spacing_ps,
            "n_crossings": int(self.events.shape[0]),
            "n_transitions": self.n_transitions,
            "n_recrossings": self.n_recrossings,
            "velocity_source": self.velocity_source,
            "velocity_unit": self.velocity_unit,
            "rate_ab": asdict(self.rate_ab),
            "rate_ba": asdict(self.rate_ba),
            "path_times": asdict(self.path_times),
            "kappa": {k: v for k, v in asdict(self.kappa).items()},
            "tst": None if self.tst is None else asdict(self.tst),
            "dwell_tests": {k: asdict(v) for k, v in self.dwell_tests.items()},
            "verdicts": [v.to_dict() for v in self.verdicts],
            "warnings": list(self.warnings),
            "note": self.note,
        }
        if self.suggestion is not None:
            s = asdict(self.suggestion)
            s.pop("centres")
            s.pop("free_energy_kT")
            out["suggestion"] = s
        if tables:
            out["events"] = rows(self.events)
            out["paths"] = rows(self.paths)
            out["dwells"] = rows(self.dwells)
        return out


# --------------------------------------------------------------------------------------------------
# Kernels
# --------------------------------------------------------------------------------------------------

_CHUNK = 1 << 17  # 1 MB of float64: the temporaries of one chunk stay in cache
SCAN_THREADS: int | None = None  # threads of the scan; None: up to 2 when the series is long and cores allow


_NONE = np.iinfo(np.int64).max  # "no such frame"
_NOMINAL_K = 300.0  # scale of a profile read only in kT (suggest_states): no result depends on it


@dataclass
class _Scan:
    """What the events of one replica need, found without keeping per-frame data.

    The surface crossings cut the run into segments, each wholly on one side of q*. A segment *touches*
    its side's core when its extreme value reaches the core (one reduction per segment). The committed
    state changes at the first touching segment of the other side; the entry into the core and the last
    exit from the origin core are then searched for locally. So the cost is a few passes over q, and
    noisy flickering at a core's edge (many entries and exits) costs nothing extra.
    """

    first: int  # 0 when frame 0 is below the surface, 1 when above
    entries: np.ndarray  # frames where the committed state changes (the first core entry included)
    labels: np.ndarray  # 0 (A) or 1 (B) for each entry
    exits: np.ndarray  # for each entry but the first: first frame outside the origin core, last exit
    crossings: np.ndarray  # frames i with q[i-1], q[i] on two sides of the surface
    next_entry: np.ndarray  # for each crossing: first core entry at frame >= i (_NONE if none)
    next_label: np.ndarray  # its label (-1 if none)
    finite: bool  # no NaN or infinity in q
    time_increasing: bool


def _first_index(q: np.ndarray, start: int, stop: int, level: float, above: bool, *, last: bool = False) -> int:
    """First (or last) frame in [start, stop) with q >= level (above) or q <= level; -1 if none.

    Looks in windows that grow from the near end, so a core reached soon is found in O(distance).
    """
    width = 64
    while True:
        if last:
            lo = max(start, stop - width)
            seg = q[lo:stop]
            hit = seg >= level if above else seg <= level
            if hit.any():
                return lo + hit.size - 1 - int(np.argmax(hit[::-1]))
            if lo == start:
                return -1
        else:
            hi = min(stop, start + width)
            seg = q[start:hi]
            hit = seg >= level if above else seg <= level
            if hit.any():
                return start + int(np.argmax(hit))
            if hi == stop:
                return -1
            start = hi
        width *= 8


def _window_hits(q: np.ndarray, starts: np.ndarray, stops: np.ndarray, levels: np.ndarray, above: np.ndarray,
                 last: bool, window: int) -> np.ndarray:
    """First (last) hit within ``window`` frames of each segment's start (end), -1 where none."""
    out = np.full(starts.size, -1, np.int64)
    off = np.arange(window)
    idx = (stops[:, None] - 1 - off[None, :]) if last else (starts[:, None] + off[None, :])
    inside = (idx >= starts[:, None]) & (idx < stops[:, None])
    vals = q[np.clip(idx, 0, q.shape[0] - 1)]
    hit = inside & np.where(above[:, None], vals >= levels[:, None], vals <= levels[:, None])
    found = hit.any(axis=1)
    pos = np.argmax(hit, axis=1)
    out[found] = idx[found, pos[found]]
    return out


def _first_indices(q: np.ndarray, starts: np.ndarray, stops: np.ndarray, levels: np.ndarray,
                   above: np.ndarray, *, last: bool = False) -> np.ndarray:
    """:func:`_first_index` for many segments: gathered windows of 8 frames, then of 64 for the segments
    without a hit (the wider window then gives the same first hit, as the narrower held none), and a loop
    only for the rare rest."""
    out = np.full(starts.size, -1, np.int64)
    todo = np.arange(starts.size)
    for window in (8, 64):
        if not todo.size:
            return out
        got = _window_hits(q, starts[todo], stops[todo], levels[todo], above[todo], last, window)
        out[todo] = got
        todo = todo[got < 0]
    for k in todo:  # cores reached later than the window: search on
        out[k] = _first_index(q, int(starts[k]), int(stops[k]), float(levels[k]), bool(above[k]), last=last)
    return out


def _scan_part(t: np.ndarray | None, q: np.ndarray, s0: int, s1: int, surface: float
               ) -> tuple[list[np.ndarray], list[np.ndarray], list[np.ndarray], bool, bool]:
    """Side changes and piece extremes of frames [s0, s1), chunk by chunk (each chunk's temporaries in cache).

    Returns, per chunk, the crossings c (frames with q[c - 1], q[c] on two sides; c = s0 included when
    s0 > 0) and the maxima and minima of the chunk's pieces between them (len(c) + 1 pieces; an empty
    piece, when the chunk begins with a crossing, has extremes -inf and +inf); then whether every value
    is finite and whether the times increase strictly.
    """
    crs: list[np.ndarray] = []
    maxs: list[np.ndarray] = []
    mins: list[np.ndarray] = []
    finite = True
    increasing = True
    side_buf = np.empty(_CHUNK + 1, bool)  # reused: no allocation per chunk
    pair_buf = np.empty(_CHUNK, bool)
    for s in range(s0, s1, _CHUNK):
        interrupts.check()  # Ctrl-C / SIGTERM on the command line: stop between chunks (core/interrupts.py)
        e = min(s + _CHUNK, s1)
        lo = max(s - 1, 0)
        m = e - lo
        side = np.greater_equal(q[lo:e], surface, out=side_buf[:m])
        pair = pair_buf[: m - 1]
        d = np.flatnonzero(np.not_equal(side[1:], side[:-1], out=pair))
        own = q[s:e]
        c = d + (lo + 1)
        loc = c - s  # local starts of the pieces after each crossing (all >= 0)
        if loc.size and loc[0] == 0:  # the chunk begins with a crossing: its first piece is empty
            mx = np.maximum.reduceat(own, loc)
            mn = np.minimum.reduceat(own, loc)
            finite = finite and bool(np.isfinite(mx).all() and np.isfinite(mn).all())
            mx = np.concatenate(([-math.inf], mx))
            mn = np.concatenate(([math.inf], mn))
        else:
            st = np.concatenate(([0], loc)) if loc.size else np.zeros(1, np.int64)
            mx = np.maximum.reduceat(own, st)
            mn = np.minimum.reduceat(own, st)
            finite = finite and bool(np.isfinite(mx).all() and np.isfinite(mn).all())
        crs.append(c)
        maxs.append(mx)
        mins.append(mn)
        if t is not None and increasing:
            tc = t[lo:e]
            increasing = not bool(np.less_equal(tc[1:], tc[:-1], out=pair).any())
    return crs, maxs, mins, finite, increasing


def _scan_workers(n: int) -> int:
    """Threads for the scan (numpy releases the GIL in its loops): 2 when a core is idle right now
    (:func:`phasewake.core.cpuload.kernel_threads`) and the series is long, else 1."""
    from phasewake.core.cpuload import kernel_threads

    if SCAN_THREADS is not None:
        return max(1, int(SCAN_THREADS))
    return 1 if n < 8 * _CHUNK else kernel_threads()


def _scan(t: np.ndarray | None, q: np.ndarray, *, a_hi: float, b_lo: float, surface: float) -> _Scan:
    """Chunked side changes and per-segment extremes, both while a chunk is in cache (threads over parts)."""
    n = q.shape[0]
    workers = _scan_workers(n)
    bounds = sorted({0, n, *(min(n, (n * k // workers) // _CHUNK * _CHUNK) for k in range(1, workers))})
    if len(bounds) <= 2:
        parts = [_scan_part(t, q, 0, n, surface)]
    else:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(max_workers=len(bounds) - 1) as pool:
            parts = list(pool.map(lambda k: _scan_part(t, q, bounds[k], bounds[k + 1], surface),
                                  range(len(bounds) - 1)))
    crs = [c for p in parts for c in p[0]]
    maxs = [m for p in parts for m in p[1]]
    mins = [m for p in parts for m in p[2]]
    finite = all(p[3] for p in parts)
    increasing = all(p[4] for p in parts)
    # Segment s >= 1 begins at crossing s; in its chunk it is a piece after a crossing (index >= 1).
    # The first piece of every chunk continues the segment open at the chunk's start (number: the
    # crossings before the chunk) and is folded into it; segment 0 is made of such first pieces only.
    per_chunk = np.array([c.size for c in crs], np.int64)
    before = np.concatenate(([0], np.cumsum(per_chunk)[:-1])).astype(np.intp)
    cr = np.concatenate(crs).astype(np.int64, copy=False)
    seg_max = np.concatenate([[-math.inf]] + [m[1:] for m in maxs])
    seg_min = np.concatenate([[math.inf]] + [m[1:] for m in mins])
    np.maximum.at(seg_max, before, np.array([m[0] for m in maxs]))
    np.minimum.at(seg_min, before, np.array([m[0] for m in mins]))
    starts = np.concatenate(([0], cr)).astype(np.int64)
    ends = np.concatenate((cr, [n])).astype(np.int64)
    first = int(q[0] >= surface)
    seg_side = ((np.arange(starts.size) + first) % 2).astype(np.int8)  # 1: above the surface (B side)
    touched = np.where(seg_side == 1, seg_max >= b_lo, seg_min <= a_hi)
    tseg = np.flatnonzero(touched)
    tlab = seg_side[tseg]
    # committed-state changes: touching segments whose side differs from the previous touching one
    keep = np.ones(tseg.size, bool)
    keep[1:] = tlab[1:] != tlab[:-1]
    kseg = tseg[keep]
    klab = tlab[keep]
    # the origin's last touching segment before each change: the touching segment just before it
    pos = np.flatnonzero(keep)
    oseg = tseg[np.maximum(pos - 1, 0)]
    b_side = klab.astype(bool)
    entries = _first_indices(q, starts[kseg], ends[kseg], np.where(b_side, b_lo, a_hi), b_side)
    exits = np.full(kseg.size, -1, np.int64)
    if kseg.size > 1:
        og = oseg[1:]
        exits[1:] = 1 + _first_indices(q, starts[og], ends[og], np.where(b_side[1:], a_hi, b_lo),
                                       ~b_side[1:], last=True)
    # for each crossing (which starts segment j + 1): the first touching segment at or after it
    # j[v - 1] = number of touching segments before segment v (= searchsorted(tseg, v, "left"))
    j = np.cumsum(np.bincount(tseg, minlength=starts.size))[: starts.size - 1]
    has = j < tseg.size
    jj = np.minimum(j, max(tseg.size - 1, 0))
    nseg = tseg[jj] if tseg.size else np.zeros(j.size, np.int64)
    next_label = np.where(has, seg_side[nseg] if tseg.size else -1, -1).astype(np.int8)
    # Its entry frame matters exactly only where the committed state changes (paths end there);
    # elsewhere the segment's first frame stands in: it orders the same against the next crossing.
    next_entry = np.where(has, starts[nseg], _NONE) if tseg.size else np.full(cr.size, _NONE, np.int64)
    if kseg.size and cr.size:
        ik = np.minimum(np.searchsorted(kseg, nseg), kseg.size - 1)
        match = has & (kseg[ik] == nseg)
        next_entry[match] = entries[ik[match]]
    return _Scan(first=first, entries=entries, labels=klab.astype(np.int8), exits=exits, crossings=cr,
                 next_entry=next_entry, next_label=next_label, finite=finite, time_increasing=increasing)


def _interp_time(t: np.ndarray, q: np.ndarray, i0: np.ndarray, level: float | np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Time at which the straight line between frames i0 and i0+1 reaches ``level``, and the fraction."""
    q0 = q[i0]
    dq = q[i0 + 1] - q0
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.where(dq != 0, (level - q0) / dq, 0.0)
    f = np.clip(f, 0.0, 1.0)
    return t[i0] + f * (t[i0 + 1] - t[i0]), f


def committed_states(q: np.ndarray, *, a_hi: float, b_lo: float) -> np.ndarray:
    """Committed state of every frame: 0 (A), 1 (B), -1 before the first core visit.

    Parameters
    ----------
    q : ndarray, shape (n,)
    a_hi, b_lo : float
        Core boundaries (A: q <= a_hi, B: q >= b_lo), same unit as q.

    Returns
    -------
    ndarray, shape (n,), int8
    """
    q = np.asarray(q, dtype=float)
    if not a_hi < b_lo:
        raise AnalysisError(f"the states overlap: core A (q <= {a_hi:g}) must lie below core B (q >= {b_lo:g})")
    n = q.shape[0]
    out = np.full(n, -1, np.int8)
    if n == 0:
        return out
    sc = _scan(None, q, a_hi=a_hi, b_lo=b_lo, surface=0.5 * (a_hi + b_lo))
    if sc.entries.size:
        bounds = np.concatenate((sc.entries, [n]))
        out[sc.entries[0]:] = np.repeat(sc.labels, np.diff(bounds))
    return out


@dataclass
class _Replica:
    """Per-replica intermediate results (mutable, private)."""

    n: int
    time_span_ps: float
    unassigned_ps: float
    dt_ps: float
    events: np.ndarray
    paths: np.ndarray
    dwells: np.ndarray
    crossing_i0: np.ndarray  # frame before each crossing
    kind_code: np.ndarray  # 0 transition, 1 recrossing, 2 censored
    n_wraps: int  # jumps across the period of a periodic coordinate (not counted as crossings)
    crossing_f: np.ndarray  # sub-frame fraction of each crossing
    visited: tuple[bool, bool]


def _replica_events(tr: Trace, replica: int, sc: _Scan, *, a_hi: float, b_lo: float, surface: float
                    ) -> _Replica:
    t = tr.time_ps
    q = tr.values
    n = int(q.shape[0])
    starts, labels = sc.entries, sc.labels
    n_runs = int(starts.size)

    # Committed-state changes: every entry after the first.
    exit_frame = sc.exits[1:]  # first frame outside the origin core (its last exit)
    entry_frame = starts[1:]  # first frame inside the destination core
    origin = labels[:-1]
    dest = labels[1:]
    chg = entry_frame
    level_exit = np.where(origin == 0, a_hi, b_lo)
    level_entry = np.where(dest == 0, a_hi, b_lo)
    t_exit, _ = _interp_time(t, q, exit_frame - 1, level_exit)
    t_entry, _ = _interp_time(t, q, entry_frame - 1, level_entry)
    cs = sc.crossings

    # Surface crossings: between frames i0 and i0 + 1. Each of q and t is gathered once at i0 and i0 + 1
    # (scattered reads from a long series cost a cache miss each).
    i0 = cs - 1
    q0, q1 = q[i0], q[cs]
    t0, t1 = t[i0], t[cs]
    dq = q1 - q0
    with np.errstate(divide="ignore", invalid="ignore"):
        f_c = np.clip(np.where(dq != 0, (surface - q0) / dq, 0.0), 0.0, 1.0)  # as _interp_time
    t_c = t0 + f_c * (t1 - t0)
    direction = np.where(q1 > q0, 1, -1).astype(np.int8)
    if tr.velocity is not None:
        v = tr.velocity
        v0 = v[i0]
        vel = v0 + f_c * (v[i0 + 1] - v0)
    else:
        vel = dq / (t1 - t0)
    n_c = int(i0.size)
    # k_prev = searchsorted(starts, i0, "right") - 1, by counting (both sorted; i0 has many more entries)
    k_prev = np.cumsum(np.bincount(np.searchsorted(i0, starts, side="left"), minlength=n_c + 1))[:n_c] - 1
    from_lab = np.where(k_prev >= 0, labels[np.maximum(k_prev, 0)] if n_runs else -1, -1)
    next_entry = sc.next_entry
    has_next_core = next_entry != _NONE
    to_lab = sc.next_label.astype(np.int64)
    next_cross = np.empty(n_c, np.int64)
    if n_c:
        next_cross[:-1] = i0[1:]
        next_cross[-1] = _NONE
    committed = has_next_core & (next_entry <= next_cross)
    kind_code = np.full(n_c, 1, np.int8)  # 0 transition, 1 recrossing, 2 censored
    is_transition = committed & (from_lab >= 0) & (to_lab != from_lab)
    kind_code[is_transition] = 0
    ended = ~has_next_core & (next_cross == _NONE)
    kind_code[ended | (from_lab < 0)] = 2
    # A periodic coordinate (a dihedral) jumping across its period boundary changes side without
    # crossing q*: such wraps cut segments (above) but are not crossing events.
    wrap = (np.abs(dq) > 0.5 * tr.period) if tr.period else np.zeros(n_c, bool)
    n_wraps = int(np.count_nonzero(wrap))
    if n_wraps:
        keep = ~wrap
        i0, t_c, f_c, direction, vel = i0[keep], t_c[keep], f_c[keep], direction[keep], vel[keep]
        kind_code, from_lab, to_lab = kind_code[keep], from_lab[keep], to_lab[keep]
        next_entry, is_transition = next_entry[keep], is_transition[keep]
        n_c = int(i0.size)
    kind = np.asarray(("transition", "recrossing", "censored"))[kind_code] if n_c else np.zeros(0, "U10")

    # Paths: each committed-state change has exactly one transition crossing (the last before entry).
    n_p = int(chg.size)
    paths = np.zeros(n_p, PATH_DTYPE)
    paths["replica"] = replica
    paths["from_state"] = np.asarray(STATE_CODES)[origin] if n_p else []
    paths["to_state"] = np.asarray(STATE_CODES)[dest] if n_p else []
    paths["exit_frame"] = exit_frame
    paths["entry_frame"] = entry_frame
    paths["exit_time_ps"] = t_exit
    paths["entry_time_ps"] = t_entry
    paths["duration_ps"] = t_entry - t_exit
    paths["n_crossings"] = (np.searchsorted(i0, entry_frame - 1, side="right")
                            - np.searchsorted(i0, exit_frame - 1, side="left"))

    codes = np.asarray(("A", "B", ""))
    events = np.zeros(n_c, EVENT_DTYPE)
    events["replica"] = replica
    events["frame"] = i0 + (f_c >= 0.5)
    events["time_ps"] = t_c
    events["direction"] = direction
    events["kind"] = kind
    events["from_state"] = codes[from_lab] if n_c else []
    events["to_state"] = codes[to_lab] if n_c else []
    events["velocity"] = vel
    events["path_duration_ps"] = np.nan
    events["path"] = -1
    if n_p and n_c:
        tr_idx = np.flatnonzero(is_transition)
        p_of = np.searchsorted(entry_frame, next_entry[tr_idx])
        events["path"][tr_idx] = p_of
        events["path_duration_ps"][tr_idx] = paths["duration_ps"][p_of]

    # Dwell segments of the committed state.
    if n_runs:
        seg_start_frame = np.concatenate(([0], entry_frame))
        seg_label = np.concatenate(([labels[0]], dest))
        t_first = t[0] if starts[0] == 0 else _interp_time(
            t, q, np.asarray([starts[0] - 1]), np.asarray([a_hi if labels[0] == 0 else b_lo]))[0][0]
        # Time before the first core visit is given to the first core reached: the committed state
        # then was most likely that core (unless the run began on a transition path, a fraction of
        # about <t_TP>/<dwell>). Counting it keeps the exposure of a run started at a random time
        # unbiased; starting the clock at the first core entry would bias k low when runs are short.
        seg_t0 = np.concatenate(([t[0]], t_entry))
        seg_t1 = np.concatenate((t_entry, [t[-1]]))
        seg_end_frame = np.concatenate((entry_frame, [n - 1]))
        dwells = np.zeros(seg_t0.size, DWELL_DTYPE)
        dwells["replica"] = replica
        dwells["state"] = np.asarray(STATE_CODES)[seg_label]
        dwells["start_frame"] = seg_start_frame
        dwells["end_frame"] = seg_end_frame
        dwells["start_ps"] = seg_t0
        dwells["end_ps"] = seg_t1
        dwells["duration_ps"] = seg_t1 - seg_t0
        dwells["censored_start"][0] = True
        dwells["censored_end"][-1] = True
        unassigned = float(t_first - t[0])
    else:
        dwells = np.zeros(0, DWELL_DTYPE)
        unassigned = float(t[-1] - t[0])
    dt = float(t[-1] - t[0]) / (n - 1) if n > 1 else float("nan")  # mean spacing
    return _Replica(n=n, time_span_ps=float(t[-1] - t[0]), unassigned_ps=unassigned, dt_ps=dt,
                    events=events, paths=paths, dwells=dwells, crossing_i0=i0, kind_code=kind_code, n_wraps=n_wraps,
                    crossing_f=f_c,
                    visited=(bool(np.any(labels == 0)), bool(np.any(labels == 1))))


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


def _refine_top(centres: np.ndarray, f: np.ndarray, counts: np.ndarray, b: int, i: int, j: int) -> float:
    """Vertex of a parabola fitted (count-weighted) to F within 1 kT of the barrier top.

    The highest bin of a sparse top is mostly noise; the fitted vertex is steadier. Falls back to the
    bin centre when the fit is not a maximum inside the fitted window.
    """
    lo = b
    while lo - 1 > i and f[lo - 1] >= f[b] - 1.0:
        lo -= 1
    hi = b
    while hi + 1 < j and f[hi + 1] >= f[b] - 1.0:
        hi += 1
    sel = np.arange(lo, hi + 1)
    sel = sel[np.isfinite(f[sel]) & (counts[sel] > 0)]
    if sel.size < 4:
        return float(centres[b])
    c2, c1, _ = np.polyfit(centres[sel], f[sel], 2, w=np.sqrt(counts[sel]))
    if not c2 < 0:
        return float(centres[b])
    top = -c1 / (2.0 * c2)
    if not centres[lo] <= top <= centres[hi]:
        return float(centres[b])
    return float(top)


def suggest_states(q: np.ndarray, *, unit: str = "", temperature_K: float | None = None,
                   jacobian: str = "none") -> StateSuggestion:
    """Core sets and dividing surface from the free-energy profile F(q) = -kT ln P(q).

    The profile, its minima and barrier tops come from
    :func:`phasewake.core.analyses.landscape.free_energy_profile` (no Jacobian: the states are where q itself
    dwells). Of its barriers the one highest seen from both sides is used; the surface is its top;
    each core reaches from its minimum towards the barrier until F has risen by min(1 kT, half that
    side's barrier). These choices are ours (a heuristic): check them against the profile and adjust.

    Parameters
    ----------
    q : ndarray, shape (n,)
        Samples of the coordinate, pooled over replicas, in time order.
    temperature_K : float, optional
        Only sets the kJ/mol scale of the profile; F in kT does not depend on it.
    jacobian : "none" or "distance"
        Of the profile (see :func:`phasewake.core.analyses.landscape.free_energy_profile`).
    """
    from phasewake.core.analyses.landscape import free_energy_profile

    q = np.asarray(q, dtype=float).ravel()
    fin = np.isfinite(q)
    if not fin.all():  # no full-length copy when every value is finite
        q = q[fin]
    del fin
    if q.size < 50:
        raise TooShortError("suggesting states from a free-energy profile", have=int(q.size), need=50)
    if not float(q.max()) > float(q.min()):
        raise AnalysisError("the coordinate has no spread: cannot suggest states; give them explicitly")
    # F in kT does not depend on the temperature; it only scales the kJ/mol values, which are not kept
    prof = free_energy_profile(q, temperature_K=temperature_K or _NOMINAL_K, unit=unit, min_depth_kT=0.5,
                               jacobian=jacobian)
    kt = prof.kT_kJ_per_mol
    best = None
    for bar in prof.barriers:
        h = min(bar.height_from_left_kJ_per_mol, bar.height_from_right_kJ_per_mol) / kt
        if math.isfinite(h) and (best is None or h > best[0]):
            best = (h, bar)
    need = THRESHOLDS["crossings.barrier"].caution
    if best is None or best[0] < need:
        seen = "no barrier at all" if best is None else f"its highest barrier is {best[0]:.2f} kT"
        raise AnalysisError(
            f"no states defined: the free-energy profile of the coordinate shows no two minima separated by a "
            f"barrier of at least {need:g} kT ({seen}; {THRESHOLDS['crossings.barrier'].source}); crossings there "
            "would count noise. Choose a coordinate with a barrier, or give the states (--states A_HI,B_LO) "
            "and the surface yourself"
        )
    bar = best[1]
    f = np.where(np.isfinite(prof.free_energy_kT), prof.free_energy_kT, np.inf)
    centres, edges = prof.centers, prof.edges
    i = int(np.argmin(np.abs(centres - bar.left_minimum)))
    j = int(np.argmin(np.abs(centres - bar.right_minimum)))
    b = bar.index
    up_a = min(1.0, 0.5 * (f[b] - f[i]))
    up_b = min(1.0, 0.5 * (f[b] - f[j]))
    ka = i + int(np.argmax(f[i:b + 1] >= f[i] + up_a))
    kb = j - int(np.argmax(f[b:j + 1][::-1] >= f[j] + up_b))
    surface = _refine_top(centres, f, prof.counts, b, i, j)
    a_hi = min(float(edges[ka]), surface - 0.25 * (surface - float(centres[i])))
    b_lo = max(float(edges[kb + 1]), surface + 0.25 * (float(centres[j]) - surface))
    return StateSuggestion(
        a_hi=a_hi, b_lo=b_lo, surface=surface, minimum_a=float(centres[i]), minimum_b=float(centres[j]),
        barrier_from_a_kT=float(f[b] - f[i]), barrier_from_b_kT=float(f[b] - f[j]),
        centres=centres, free_energy_kT=prof.free_energy_kT, unit=unit,
        method="free-energy profile -kT ln P(q) (phasewake.core.analyses.landscape); surface at the top of the "
               "barrier highest from both sides; cores where F is within min(1 kT, half the barrier) of "
               "each minimum (our heuristic)",
    )


def _spread_blocks(x: np.ndarray, fraction: float, n_blocks: int = 200) -> np.ndarray:
    """About ``fraction`` of x as n_blocks contiguous blocks spread evenly (cache-friendly, unlike a stride)."""
    n = x.shape[0]
    if fraction >= 1.0 or n <= n_blocks:
        return x
    length = max(1, int(n * fraction / n_blocks))
    starts = np.linspace(0, n - length, n_blocks).astype(np.int64)
    return np.concatenate([x[a:a + length] for a in starts])


def _check_moves(values: Sequence[np.ndarray], unit: str) -> None:
    """Refuse a coordinate that is constant to constraint tolerance or round-off (``crossings.constant``):
    its 'crossings' would be the noise of a rigid bond."""
    n = 0
    s1 = 0.0
    s2 = 0.0
    shift = 0.0
    for x in values:
        v = np.asarray(x, dtype=float).ravel()
        v = v[:: max(1, v.size // 100_000)]  # a spread check needs no more (long series stay cheap)
        v = v[np.isfinite(v)]
        if v.size:
            c = float(v[0])
            n += v.size
            s1 += float(np.sum(v - c))
            s2 += float(np.sum((v - c) ** 2))
            shift = c
    if n < 2:
        return
    mean_d = s1 / n
    std = math.sqrt(max(s2 / n - mean_d * mean_d, 0.0))
    mean = shift + mean_d
    rel_limit = THRESHOLDS["crossings.constant"].caution
    if std <= max(rel_limit * abs(mean), 1e-6):
        u = f" {unit}" if unit else ""
        raise AnalysisError(
            f"the coordinate is constant: standard deviation {std:.3g}{u} around {mean:.6g}{u} (relative "
            f"{std / abs(mean) if mean else float('inf'):.2g}, below {rel_limit:g}); a constrained bond or a rigid "
            "molecule. Its crossings would be round-off noise: choose a coordinate that moves"
        )


def _check_traces(traces: Sequence[Trace]) -> None:
    if not traces:
        raise AnalysisError("no coordinate series given")
    for k, tr in enumerate(traces):
        t, q = tr.time_ps, tr.values
        label = f"replica {k}" + (f" ({tr.name})" if tr.name else "")
        if t.ndim != 1 or q.ndim != 1 or t.shape != q.shape:
            raise AnalysisError(f"{label}: time and coordinate must be 1D arrays of one length "
                                f"(got {t.shape} and {q.shape})")
        if q.shape[0] < 2:
            raise TooShortError(f"crossings of {label}", have=int(q.shape[0]), need=2)
        if tr.velocity is not None and tr.velocity.shape != q.shape:
            raise AnalysisError(f"{label}: dq/dt has {tr.velocity.shape[0]} samples, q has {q.shape[0]}")


def _check_scan(sc: _Scan, k: int, tr: Trace) -> None:
    label = f"replica {k}" + (f" ({tr.name})" if tr.name else "")
    if not sc.finite:
        raise AnalysisError(f"{label}: the coordinate has NaN or infinite values")
    if not sc.time_increasing:
        raise AnalysisError(f"{label}: time must increase strictly from frame to frame")


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

    Yields :class:`~phasewake.core.progress.Progress`; returns a :class:`CrossingsResult`.
    """
    trs = [as_trace(x) for x in traces]
    _check_traces(trs)
    _check_moves([tr.values for tr in trs], unit)
    total = float(len(trs) * 2 + 2)
    yield Progress(0, total, "crossings: checking states")
    suggestion: StateSuggestion | None = None
    if states is None:
        pooled = trs[0].values if len(trs) == 1 else np.concatenate([tr.values for tr in trs])
        suggestion = suggest_states(pooled, unit=unit, temperature_K=temperature_K, jacobian=jacobian)
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
    scans: list[_Scan] = []
    for k, tr in enumerate(trs):
        sc = _scan(tr.time_ps, tr.values, a_hi=a_hi, b_lo=b_lo, surface=surface)
        _check_scan(sc, k, tr)
        scans.append(sc)
    if not any(sc.crossings.size for sc in scans):
        q_all_min = min(float(tr.values.min()) for tr in trs)
        q_all_max = max(float(tr.values.max()) for tr in trs)
        if not q_all_min < surface < q_all_max:
            raise AnalysisError(
                f"the dividing surface {surface:g} {unit} lies outside the range of the coordinate "
                f"({q_all_min:.6g} to {q_all_max:.6g} {unit}): it is never crossed".replace("  ", " ")
            )
    warnings: list[str] = []
    seen_a = any(bool(np.any(sc.labels == 0)) for sc in scans)
    seen_b = any(bool(np.any(sc.labels == 1)) for sc in scans)
    if not seen_a:
        warnings.append(f"the coordinate never enters core A (q <= {a_hi:g} {unit}; its minimum is "
                        f"{min(float(tr.values.min()) for tr in trs):.4g})")
    if not seen_b:
        warnings.append(f"the coordinate never enters core B (q >= {b_lo:g} {unit}; its maximum is "
                        f"{max(float(tr.values.max()) for tr in trs):.4g})")

    reps: list[_Replica] = []
    for k, (tr, sc) in enumerate(zip(trs, scans)):
        reps.append(_replica_events(tr, k, sc, a_hi=a_hi, b_lo=b_lo, surface=surface))
        yield Progress(1 + k, total, "crossings: events")

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
    with_vel = [tr.velocity is not None for tr in trs]
    if all(with_vel):
        vsource = "stored velocities (dq/dt from the run), linearly interpolated to the crossing"
    elif not any(with_vel):
        vsource = "finite difference of the two frames around the crossing (secant slope)"
    else:
        vsource = "stored velocities where the replica has them, else finite differences of frames"

    # Rates with censoring: exposure = all committed time in the origin state.
    exp_a = float(dwells["duration_ps"][dwells["state"] == "A"].sum())
    exp_b = float(dwells["duration_ps"][dwells["state"] == "B"].sum())
    n_ab = int(np.count_nonzero(paths["from_state"] == "A"))
    n_ba = int(np.count_nonzero(paths["from_state"] == "B"))
    rate_ab = _rate("A", "B", n_ab, exp_a, dwells, confidence)
    rate_ba = _rate("B", "A", n_ba, exp_b, dwells, confidence)

    # Transition-path times.
    dts = np.array([r.dt_ps for r in reps])
    dt = float(np.median(dts))
    dur = paths["duration_ps"]
    dt_of_path = dts[paths["replica"]] if paths.size else np.zeros(0)
    if dur.size:
        path_times = PathTimes(
            n=int(dur.size), mean_ps=float(dur.mean()),
            sem_ps=float(dur.std(ddof=1) / math.sqrt(dur.size)) if dur.size > 1 else float("nan"),
            median_ps=float(np.median(dur)), std_ps=float(dur.std(ddof=1)) if dur.size > 1 else float("nan"),
            mean_frames=float(np.mean(dur / dt_of_path)), median_frames=float(np.median(dur / dt_of_path)))
    else:
        nan = float("nan")
        path_times = PathTimes(0, nan, nan, nan, nan, nan, nan)

    # Counting transmission coefficient.
    kcode = np.concatenate([r.kind_code for r in reps])
    known = kcode != 2
    up = known & (events["direction"] > 0)
    down = known & (events["direction"] < 0)
    n_up, n_down = int(np.count_nonzero(up)), int(np.count_nonzero(down))
    t_up = int(np.count_nonzero(up & (kcode == 0)))
    t_down = int(np.count_nonzero(down & (kcode == 0)))
    kc_up = t_up / n_up if n_up else float("nan")
    kc_down = t_down / n_down if n_down else float("nan")
    kc = (t_up + t_down) / (n_up + n_down) if (n_up + n_down) else float("nan")

    # Reactive flux kappa(t).
    if kappa_window_ps is None:
        # Start after most transition paths (and so most recrossing excursions) are over.
        base = float(np.percentile(dur, 90)) if path_times.n else 10.0 * dt
        w0 = max(base, 10.0 * dt)
        w1 = max(2.0 * w0, 20.0 * dt)
    else:
        w0, w1 = float(kappa_window_ps[0]), float(kappa_window_ps[1])
        if not 0 <= w0 < w1:
            raise AnalysisError(f"the kappa window must be 0 <= t1 < t2 (got {w0:g}, {w1:g} ps)")
    longest = max(r.n for r in reps)
    n_lags = int(min(max(2, math.ceil(w1 / dt) + 1), max(2, longest // 2)))
    same_dt = bool(np.allclose(dts, dt, rtol=1e-3))
    if not same_dt:
        warnings.append("replicas have different frame spacings: kappa(t) uses only those with the "
                        f"median spacing {dt:.4g} ps")
    up_num = np.zeros(n_lags)
    up_den = np.zeros(n_lags)
    dn_num = np.zeros(n_lags)
    dn_den = np.zeros(n_lags)
    f_sum = 0.0
    f_n = 0
    # kappa(t) costs crossings x lags gathers; above ~2e8 use every k-th crossing (still an unbiased
    # sample of the crossings, only noisier).
    n_cross_all = sum(int(r.crossing_i0.size) for r in reps)
    every = max(1, math.ceil(n_cross_all * n_lags / 2e8))
    if kappa_time_series and every > 1:
        warnings.append(f"kappa(t) uses every {every}th of the {n_cross_all} crossings (to bound its cost)")
    for k, (tr, r) in enumerate(zip(trs, reps)):
        if not kappa_time_series or not math.isclose(r.dt_ps, dt, rel_tol=1e-3):
            continue
        a, b, c, d = reactive_flux(tr.values, r.crossing_i0[::every], r.events["direction"][::every],
                                   surface=surface, n_lags=n_lags)
        up_num += a
        up_den += b
        dn_num += c
        dn_den += d
        f_sum += float(r.crossing_f[::every].sum())
        f_n += int(r.crossing_f[::every].size)
        yield Progress(1 + len(trs) + k, total, "crossings: reactive flux")
    mean_f = f_sum / f_n if f_n else 0.5
    lag = (np.arange(n_lags) + 1.0 - mean_f) * dt
    with np.errstate(divide="ignore", invalid="ignore"):
        k_up = up_num / up_den
        k_dn = dn_num / dn_den
        k_all = (up_num + dn_num) / (up_den + dn_den)
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
    kappa = TransmissionCoefficient(
        counting_up=kc_up, counting_down=kc_down, counting=kc, n_crossings_up=n_up, n_crossings_down=n_down,
        lag_ps=lag, kappa_up=k_up, kappa_down=k_dn, kappa=k_all, n_used=up_den + dn_den,
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

    # TST from the run's own distribution of q.
    tst_cmp: TSTComparison | None = None
    # TST from at most ~2e6 frames (all frames of shorter runs) in evenly spread contiguous blocks:
    # MD frames are correlated, so this loses little, and a long series is not read again in full.
    n_all = sum(r.n for r in reps)
    frac = min(1.0, 2_000_000 / n_all)
    coarse = np.concatenate([_spread_blocks(tr.values, frac) for tr in trs])
    coarse_v = (np.concatenate([_spread_blocks(tr.velocity, frac) for tr in trs])  # type: ignore[arg-type]
                if all(with_vel) else None)
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
        tst = None
    if tst is not None and math.isfinite(tst.flux_factor_unit_per_ps):
        ka = rate_ab.rate_per_ps / tst.rate_up_per_ps if tst.rate_up_per_ps > 0 else float("nan")
        kb = rate_ba.rate_per_ps / tst.rate_down_per_ps if tst.rate_down_per_ps > 0 else float("nan")
        tst_cmp = TSTComparison(
            tst=tst, kappa_up=float(ka), kappa_down=float(kb),
            note="k / k_TST uses the committed-state rates and the TST rate of the same surface; it should "
                 "agree with the reactive-flux plateau when the cores are well separated from the barrier",
        )
    elif tst is not None:
        warnings.append("no TST estimate: neither velocities nor kT/m_eff are known")
    yield Progress(total - 1, total, "crossings: dwell tests")

    # Dwell-time tests and verdicts.
    tests: dict[str, ExponentialTest] = {}
    verdicts: list[Verdict] = []
    n_rare = min(n_ab, n_ba)
    verdicts.append(judge(
        "crossings.few_transitions", float(n_rare), title="Number of transitions", unit="transitions",
        message=f"{n_ab} A->B and {n_ba} B->A transitions (core A: q <= {a_hi:g}, core B: q >= {b_lo:g} "
                f"{unit}); the rarer direction sets the precision of the rates".replace("  ", " "),
        advice="run longer or pool replicas; rates with no transition are upper bounds",
        details={"n_ab": n_ab, "n_ba": n_ba},
    ))
    if test_dwells:
        complete = ~dwells["censored_start"] & ~dwells["censored_end"]
        samples = [dwells["duration_ps"][(dwells["state"] == st) & complete] for st in STATE_CODES]
        from phasewake.core.cpuload import kernel_threads

        if kernel_threads() > 1 and min(x.size for x in samples) >= 1000:  # both Monte Carlo tests at once
            from concurrent.futures import ThreadPoolExecutor

            with ThreadPoolExecutor(max_workers=2) as pool:
                done = list(pool.map(exponential_ks_test, samples))
        else:
            done = [exponential_ks_test(x) for x in samples]
        for st, test in zip(STATE_CODES, done):
            tests[st] = test
            if math.isfinite(test.p_value):
                v = judge(
                    "crossings.dwell_exponential", test.p_value, title=f"Dwell times in {st} exponential",
                    unit="p-value",
                    message=f"{test.n} completed dwells in {st}: KS distance {test.statistic:.3f} to an "
                            f"exponential of mean {test.mean_ps:.4g} ps, p = {test.p_value:.3g} "
                            f"(Lilliefors), coefficient of variation {test.cv:.2f} (1 for an exponential)",
                    advice="see the explanation of crossings.dwell_exponential",
                    details={"state": st, "n": test.n},
                )
                verdicts.append(v)
                if v.level != "ok":
                    warnings.append(f"dwell times in {st} do not look exponential (p = {test.p_value:.3g}, "
                                    f"CV = {test.cv:.2f}): a single rate may not describe {st}")
    if path_times.n:
        verdicts.append(judge(
            "crossings.path_resolution", path_times.median_frames, title="Time resolution of paths",
            unit="frames",
            message=f"median transition path spans {path_times.median_frames:.1f} frames "
                    f"({path_times.median_ps:.4g} ps at {dt:.4g} ps per frame)",
            advice="recrossings faster than a frame are invisible; save frames more often",
        ))
    # Replicas that begin between the cores have an unknown committed state: a transition already under
    # way at their start is not counted. Expected loss = (replicas starting outside the cores) x P(on a
    # transition path | outside the cores) = time on paths / time outside the cores.
    n_outside = sum(1 for r in reps if r.unassigned_ps > 0)
    total_time = float(sum(r.time_span_ps for r in reps))
    outside = float(np.count_nonzero((coarse > a_hi) & (coarse < b_lo))) / max(coarse.size, 1)
    on_paths = float(dur.sum()) / (outside * total_time) if outside > 0 and total_time > 0 else 0.0
    missed = n_outside * min(1.0, on_paths)
    n_tr = n_ab + n_ba
    if n_tr and missed > max(1.0, 0.02 * n_tr):
        warnings.append(
            f"{n_outside} replica(s) begin between the cores, where the committed state is unknown; about "
            f"{missed:.3g} transitions under way at those starts are not counted ({100 * missed / n_tr:.2g}% "
            f"of the {n_tr} counted), so the rates are biased low by about that much: longer replicas help")
    if rate_ab.upper_bound_only or rate_ba.upper_bound_only:
        warnings.append("no transition in at least one direction: that rate is an upper bound, not zero")

    settings = CrossingSettings(
        a_hi=a_hi, b_lo=b_lo, surface=surface, unit=unit, states_source=source, confidence=confidence,
        kappa_window_ps=None if kappa_window_ps is None else (float(w0), float(w1)), temperature_K=temperature_K,
        jacobian=jacobian,
    )
    yield Progress(total, total, "crossings: done")
    return CrossingsResult(
        settings=settings, n_replicas=len(trs), n_samples=int(sum(r.n for r in reps)),
        total_time_ps=float(sum(r.time_span_ps for r in reps)),
        unassigned_time_ps=float(sum(r.unassigned_ps for r in reps)), frame_spacing_ps=dt,
        events=events, paths=paths, dwells=dwells, velocity_source=vsource,
        velocity_unit=f"{unit}/ps" if unit else "1/ps", rate_ab=rate_ab, rate_ba=rate_ba,
        path_times=path_times, kappa=kappa, tst=tst_cmp, dwell_tests=tests, suggestion=suggestion,
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


# --------------------------------------------------------------------------------------------------
# Run adapter: the one request of the command line, the window, the report and the Python API
# --------------------------------------------------------------------------------------------------

JACOBIANS = ("none", "auto")


def check_not_stiff_bond(coordinate: str, run: Run, values: Sequence[np.ndarray], unit: str) -> None:
    """Refuse to suggest states on a distance that only vibrates about one length (a covalent bond):
    two peaks of its histogram are the turning points of the vibration (in a run without a thermostat a
    single bond keeps its energy for a long time), not two states. ``coordinate.stiff_pair``."""
    from phasewake.core.analyses.coordinate_choice import THRESHOLDS as _T  # registers coordinate.stiff_pair
    from phasewake.core.analyses.coordinates import resolve_for_run
    from phasewake.core.errors import PhasewakeError

    try:
        fn = resolve_for_run(coordinate, run).function
    except PhasewakeError:
        return
    if fn != "distance":
        return
    _check_moves(values, unit)  # a constant says so first
    v = np.concatenate([np.asarray(x, dtype=float).ravel() for x in values])
    v = v[np.isfinite(v)]
    if v.size < 2 or not float(np.mean(v)) > 0:
        return
    rel = float(np.std(v) / np.mean(v))
    stiff = _T["coordinate.stiff_pair"].caution
    if rel < stiff:
        raise AnalysisError(
            f"no states defined: {coordinate} only vibrates about {float(np.mean(v)):.4g} {unit} (relative spread "
            f"{rel:.3g}, below the {stiff:g} of a stiff bond: {_T['coordinate.stiff_pair'].source}); any two peaks "
            "of its histogram are the turning points of the vibration, not states. Choose a coordinate that "
            "changes between states, or give the states (--states A_HI,B_LO) yourself"
        )


def run_temperature(run: Run) -> tuple[float | None, str]:
    """The temperature (K) of ``run`` for kT, and where it comes from; (None, why) when unknown.

    The run's own statement first (the thermostat target from its files, or a ``--temperature`` given
    when it was opened), else the mean kinetic temperature of its energy table. Never a guess: with
    neither, the temperature is unknown and whatever needs kT says so.
    """
    if run.metadata.temperature_K:
        return float(run.metadata.temperature_K), "thermostat target of the run"
    if run.energies is not None:
        s = run.energies.by_role("temperature")
        if s is not None:
            v = np.asarray(s.values, dtype=float)
            if np.isfinite(v).any():
                return float(np.nanmean(v)), "mean kinetic temperature in the energy table"
    return None, ("the temperature is unknown (no thermostat target in the files and no temperature column): "
                  "give it (--temperature) for the TST flux factor of a coordinate without velocities")


def kt_over_m_eff(temperature_K: float | None, series: Sequence[Any]) -> float | None:
    """kT <1/m_eff> in (unit/ps)^2 over every frame of every series (equipartition of dq/dt; see
    :mod:`phasewake.core.analyses.coordinates`), or None when the temperature or an m_eff is unknown."""
    if temperature_K is None:
        return None
    inverse = []
    for s in series:
        m = getattr(s, "m_eff", None)
        if m is None or not np.all(np.isfinite(m)):
            return None
        inverse.append(1.0 / np.asarray(m, dtype=float))
    return float(KB_KJ_PER_MOL_K * float(temperature_K) * np.mean(np.concatenate(inverse)))


def profile_jacobian(jacobian: str, coordinate: str) -> str:
    """The Jacobian of the free-energy profile: ``"auto"`` reads the parsed specification (a distance in
    3D gets the 4 pi r^2 correction, see :func:`phasewake.core.analyses.landscape.jacobian_of`)."""
    from phasewake.core.analyses.landscape import jacobian_of

    if jacobian not in JACOBIANS:
        raise AnalysisError(f"unknown jacobian {jacobian!r}: use one of {', '.join(JACOBIANS)}")
    return jacobian_of(coordinate) if jacobian == "auto" else "none"


@dataclass(frozen=True)
class CrossingsRequest(AnalysisRequest):
    """Crossings of ``coordinate`` in a run (and its ``replicas``, pooled): the one request of every front end.

    The defaults are decided here and nowhere else:

    - temperature: ``temperature_K`` when given, else :func:`run_temperature` of the first run (its
      thermostat target, else its mean kinetic temperature); unknown is said in the result's warnings,
      never replaced by a guess;
    - kT/m_eff for the TST flux factor of a coordinate without velocities: :func:`kt_over_m_eff` over
      every replica's frames;
    - the Jacobian of the profile from which states are suggested: ``"none"`` by default, since the
      dividing surface of least TST rate lies at the minimum of P(q) itself (Truhlar, Garrett and
      Klippenstein, J. Phys. Chem. 100, 12771 (1996), variational TST), where q dwells; ``"auto"`` applies
      the distance Jacobian to distances (from the parsed specification);
    - states and surface suggested from the profile when not given (:func:`suggest_states`), refused for
      a stiff bond (:func:`check_not_stiff_bond`).

    ``start``/``stop`` select frames [start, stop) of every run. ``chunk_frames`` only sets how many
    frames are read at once (it never changes the result and is not part of the cache key).
    """

    name: ClassVar[str] = "crossings"
    label: ClassVar[str] = "crossings"

    coordinate: str
    states: tuple[float, float] | None = None
    surface: float | None = None
    confidence: float = 0.95
    kappa_window_ps: tuple[float, float] | None = None
    temperature_K: float | None = None
    jacobian: str = "none"
    replicas: tuple[Run, ...] = ()
    start: int = 0
    stop: int | None = None
    chunk_frames: int | None = field(default=None, compare=False)

    def settings(self) -> Mapping[str, Any]:
        out = dict(super().settings())
        del out["chunk_frames"]
        return out

    def reference_paths(self, run: Run) -> tuple[str, ...]:
        from phasewake.core.analyses.coordinates import resolve_for_run
        from phasewake.core.errors import PhasewakeError

        try:
            ref = resolve_for_run(self.coordinate, run).reference_path
        except PhasewakeError:  # a bad specification is reported by the analysis itself
            return ()
        return (str(ref),) if ref else ()

    def work(self, run: Run) -> Work[CrossingsResult]:
        runs = [run, *self.replicas]
        series = yield from self._series(runs)
        return (yield from self.analyse(runs, series, base=len(runs), total=len(runs) + 1))

    def _series(self, runs: Sequence[Run]) -> Work[list[Any]]:
        """Step 1: the coordinate (and dq/dt, m_eff) of every run, read chunk by chunk."""
        from phasewake.core.analyses.coordinates import compute_coordinates

        out = []
        for k, r in enumerate(runs):
            work = compute_coordinates(r, [self.coordinate], start=self.start, stop=self.stop,
                                       chunk_frames=self.chunk_frames)
            s = yield from _relay(work, k, len(runs) + 1, r.name)
            out.append(s[0])
        return out

    def analyse(self, runs: Sequence[Run], series: Sequence[Any], *, base: float = 0.0,
                total: float = 1.0) -> Work[CrossingsResult]:
        """Step 2: crossings of given coordinate series of ``runs`` (one per run; CoordinateSeries, Trace or
        (time_ps, q[, dq/dt]) as :func:`as_trace` reads them) with this request's settings.

        For a front end that already holds the series; :meth:`work` is both steps.
        """
        profile_jacobian(self.jacobian, self.coordinate)  # an unknown Jacobian is refused before any work
        temp, why = ((float(self.temperature_K), "given") if self.temperature_K is not None
                     else run_temperature(runs[0]))
        traces = [as_trace(s, name=r.name) for s, r in zip(series, runs)]
        unit = str(getattr(series[0], "unit", ""))
        if self.states is None:
            check_not_stiff_bond(self.coordinate, runs[0], [tr.values for tr in traces], unit)
        inner = crossings_work(traces, states=self.states, surface=self.surface, unit=unit,
                               confidence=self.confidence, kappa_window_ps=self.kappa_window_ps,
                               temperature_K=temp, kT_over_m_eff=kt_over_m_eff(temp, series),
                               jacobian=profile_jacobian(self.jacobian, self.coordinate))
        result: CrossingsResult = yield from _relay(inner, base, total, "")
        if temp is None:
            result = replace(result, warnings=(*result.warnings, why))
        return replace(result, settings=replace(result.settings, temperature_source=why))


def _relay(work: Work[Any], base: float, total: float, prefix: str) -> Work[Any]:
    """Run ``work`` as the part [base, base + 1) of ``total``, its messages after ``prefix``."""
    try:
        while True:
            p = next(work)
            msg = f"{prefix}: {p.message}" if prefix and p.message else (prefix or p.message)
            yield Progress(base + (p.fraction or 0.0), total, msg)
    except StopIteration as stop:
        return stop.value


def crossings_of_runs(
    runs: Run | Sequence[Run],
    coordinate: str,
    *,
    states: tuple[float, float] | None = None,
    surface: float | None = None,
    confidence: float = 0.95,
    kappa_window_ps: tuple[float, float] | None = None,
    temperature_K: float | None = None,
    chunk_frames: int | None = None,
) -> Work[CrossingsResult]:
    """Crossings of ``coordinate`` (a coordinate spec, e.g. ``"distance(0, 1)"``) in one or more runs:
    :class:`CrossingsRequest` on the first run with the others as replicas (their events pool)."""
    run_list: list[Run] = [runs] if not isinstance(runs, Sequence) else list(runs)
    if not run_list:
        raise AnalysisError("no run given")
    request = CrossingsRequest(coordinate=coordinate, states=states, surface=surface, confidence=confidence,
                               kappa_window_ps=kappa_window_ps, temperature_K=temperature_K,
                               replicas=tuple(run_list[1:]), chunk_frames=chunk_frames)
    return (yield from request.work(run_list[0]))
