"""One row per replica of a crossings ensemble: what each run brings to the pooled numbers.

Pooling hides a replica that disagrees with the others (stuck in one state, still relaxing, set up
differently). The row of each replica gives, from the pooled tables and its own coordinate:

- transitions A->B and B->A, the time it spent committed to each state (its dwell segments), and its
  own rates (transitions / time in the origin state, the estimator of the pooled rate applied to one
  run);
- its share of the between-replica spread of the coordinate's mean: n_r (mean_r - mean)^2 over the sum
  of these terms, the part of the between-chain variance B of the Gelman-Rubin potential scale
  reduction (A. Gelman and D. B. Rubin, Statistical Science 7, 457 (1992)) that this replica makes; a
  replica with a large share is the one that keeps R-hat above 1;
- its drift: the least-squares slope of the coordinate against time (unit/ns), closed form; a
  replica whose coordinate still drifts has not relaxed.

These are heuristics to point at a replica worth a look, not verdicts on it.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np


@dataclass(frozen=True)
class ReplicaRow:
    """One replica's part of a crossings ensemble (see the module docstring)."""

    name: str
    n_frames: int
    time_ps: float
    transitions_ab: int
    transitions_ba: int
    time_in_a_ps: float
    time_in_b_ps: float
    rate_ab_per_ps: float  # NaN when the replica never committed to A
    rate_ba_per_ps: float
    mean: float  # of the coordinate, in ``unit``
    between_share: float  # share of the between-replica sum of squares of the means (0..1; NaN for one run)
    drift_per_ns: float  # unit/ns
    unit: str


def _slope_per_ns(t_ps: np.ndarray, q: np.ndarray) -> float:
    """Ordinary least-squares slope of q(t), closed form, per ns (NaN for fewer than 2 frames)."""
    if t_ps.size < 2:
        return math.nan
    t = t_ps - t_ps.mean()
    den = float(np.dot(t, t))
    return float(np.dot(t, q - q.mean()) / den * 1000.0) if den > 0 else math.nan


def replica_rows(result: Any, traces: Sequence[Any], unit: str = "") -> tuple[ReplicaRow, ...]:
    """The rows of ``traces`` (one per replica, with ``time_ps``, ``values``, ``name``) against the pooled
    ``result`` (a CrossingsResult: its ``events`` and ``dwells`` tables carry the replica of each row)."""
    ev, dw = result.events, result.dwells
    means = np.array([float(np.mean(tr.values)) if len(tr.values) else math.nan for tr in traces])
    sizes = np.array([len(tr.values) for tr in traces], dtype=float)
    grand = float(np.sum(means * sizes) / max(sizes.sum(), 1.0))
    between = sizes * (means - grand) ** 2
    total_between = float(between.sum())
    rows = []
    for k, tr in enumerate(traces):
        mine = ev[(ev["replica"] == k) & (ev["kind"] == "transition")]
        n_ab = int(np.count_nonzero((mine["from_state"] == "A") & (mine["to_state"] == "B")))
        n_ba = int(np.count_nonzero((mine["from_state"] == "B") & (mine["to_state"] == "A")))
        d = dw[dw["replica"] == k]
        t_a = float(d["duration_ps"][d["state"] == "A"].sum())
        t_b = float(d["duration_ps"][d["state"] == "B"].sum())
        t = np.asarray(tr.time_ps, dtype=np.float64)
        q = np.asarray(tr.values, dtype=np.float64)
        rows.append(ReplicaRow(
            name=str(getattr(tr, "name", "") or f"replica {k}"), n_frames=int(q.size),
            time_ps=float(t[-1] - t[0]) if t.size > 1 else 0.0, transitions_ab=n_ab, transitions_ba=n_ba,
            time_in_a_ps=t_a, time_in_b_ps=t_b,
            rate_ab_per_ps=n_ab / t_a if t_a > 0 else math.nan, rate_ba_per_ps=n_ba / t_b if t_b > 0 else math.nan,
            mean=float(means[k]),
            between_share=float(between[k] / total_between) if len(traces) > 1 and total_between > 0 else math.nan,
            drift_per_ns=_slope_per_ns(t, q), unit=unit))
    return tuple(rows)
