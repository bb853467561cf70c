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

Several replicas pool their events (:func:`pool_crossings`). Runs go through :class:`CrossingsRequest`
(the one request of the command line, the window, the report and the Python API), whose thin face over
several runs is :func:`crossings_of_runs`. A periodic coordinate (``Trace.period``, set for dihedrals) does not count a
jump across its period as a crossing.

How it stays fast: one chunked pass (1 MB chunks, temporaries in cache, no full-length temporary)
finds the frames where q changes side of q* and the extreme value of q in each piece between them;
pieces are merged into segments with one reduction, and a segment whose extreme reaches its side's
core commits the state. A long series is scanned in parts on several threads (the threads setting,
:mod:`phasewake.core.settings`; the parts join in a fixed order, so the result does not depend on it). Only at committed-state changes is the exact core entry (and the last
exit from the origin core) looked up, locally. Noise flickering at a core boundary therefore costs
nothing; 1e8 samples take about 0.7-1.0 s on a shared 2-core machine, 4-5x one numpy pass
(tests/benchmarks: crossings_long_series), of which the pass is ~2.6x and the events, the dwell tests
(Monte Carlo) and the TST histogram the rest. Everything here is a heuristic read of finite data; see
:data:`phasewake.core.analyses.verdicts.HEURISTIC_NOTE`.

Modules, in the order of the data flow: ``results`` (tables and result objects), ``checks`` (verdict kinds,
refusals), ``scan`` (the chunked scan of one replica), ``states`` (states from the profile), ``events`` (one
replica's crossings, paths and dwells), ``kappa`` (transmission coefficients, TST), ``pooled`` (the analysis
of pooled replicas as named steps), ``request`` (:class:`CrossingsRequest`).
"""

from phasewake.core.analyses.crossings.checks import check_not_stiff_bond
from phasewake.core.analyses.crossings.kappa import reactive_flux
from phasewake.core.analyses.crossings.pooled import analyse_crossings, crossings_work, pool_crossings
from phasewake.core.analyses.crossings.request import (
    CrossingsRequest,
    crossings_of_runs,
    kt_over_m_eff,
    run_temperature,
)
from phasewake.core.analyses.crossings.results import (
    DWELL_DTYPE,
    EVENT_DTYPE,
    PATH_DTYPE,
    STATE_CODES,
    CrossingSettings,
    CrossingsResult,
    Event,
    PathTimes,
    RateEstimate,
    StateSuggestion,
    Trace,
    TransmissionCoefficient,
    TSTComparison,
    as_trace,
)
from phasewake.core.analyses.crossings.scan import committed_states
from phasewake.core.analyses.crossings.states import suggest_states
from phasewake.core.analyses.landscape import JACOBIANS

__all__ = [
    "DWELL_DTYPE", "EVENT_DTYPE", "JACOBIANS", "PATH_DTYPE", "STATE_CODES", "CrossingSettings", "CrossingsRequest",
    "CrossingsResult", "Event", "PathTimes", "RateEstimate", "StateSuggestion", "TSTComparison", "Trace",
    "TransmissionCoefficient", "analyse_crossings", "as_trace", "check_not_stiff_bond", "committed_states",
    "crossings_of_runs", "crossings_work", "kt_over_m_eff", "pool_crossings", "reactive_flux",
    "run_temperature", "suggest_states",
]
