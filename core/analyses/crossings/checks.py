"""Verdict kinds of the crossings analysis and the checks that refuse unusable input."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from phasewake.core.analyses import coordinate_choice  # noqa: F401  (registers crossings.barrier, crossings.constant)
from phasewake.core.analyses.crossings.results import Trace
from phasewake.core.analyses.verdicts import THRESHOLDS, Explanation, Threshold, register
from phasewake.core.errors import AnalysisError, TooShortError

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


def check_moves(values: Sequence[np.ndarray], unit: str) -> None:
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


def check_traces(traces: Sequence[Trace]) -> None:
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
    check_moves(values, unit)  # a constant says so first
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
