"""Tables and result objects of the crossings analysis (see :mod:`phasewake.core.analyses.crossings`)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phasewake.core.analyses.rates import ExponentialTest, TSTRate
from phasewake.core.analyses.result import ResultMixin
from phasewake.core.analyses.verdicts import HEURISTIC_NOTE, Verdict
from phasewake.core.errors import AnalysisError

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
class CrossingsResult(ResultMixin):
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
    replicas: tuple[Any, ...] = field(default_factory=tuple)  # replica_table.ReplicaRow, one per replica

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
            "replicas": [asdict(r) for r in self.replicas],
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
