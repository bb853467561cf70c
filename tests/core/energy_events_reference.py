"""A reference for the energy events: the straightforward masked float64 route (several passes over whole
arrays, non-finite rows masked out) that phasewake used before its one-pass scan. The production code
(core/analyses/energy_events.py) must find exactly the same events; this copy lives here only as the
reference of tests/core/test_energy_scan.py.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from phasewake.core.analyses.energy_events import EnergyEvent, EventsResult
from phasewake.core.analyses.energy_scan import ENERGY_UNIT


def events_masked(t: np.ndarray, e: np.ndarray, *, jump_robust_sigma: float, gap_factor: float, max_listed: int,
                   robust_sample: int, settings: dict[str, Any]) -> EventsResult:
    """:func:`find_energy_events` on whole arrays with non-finite rows masked out (several passes)."""
    events: list[EnergyEvent] = []

    good = np.isfinite(e)
    bad = np.flatnonzero(~good) if not good.all() else np.zeros(0, np.int64)
    for i in bad[:max_listed]:
        events.append(EnergyEvent("nonfinite", int(i), float(t[i]), float(e[i]) if not np.isnan(e[i]) else math.nan,
                                  ENERGY_UNIT, f"non-finite energy at t = {t[i]:.6g} ps"))

    dt = np.diff(t)
    median_dt: float | None = None
    n_gaps = n_over = 0
    if dt.size:
        dsub = dt if dt.size <= robust_sample else dt[:: int(math.ceil(dt.size / robust_sample))]
        pos = dsub[dsub > 0]
        median_dt = float(np.median(pos)) if pos.size else None
        over = np.nonzero(dt <= 0)[0]
        n_over = int(over.size)
        for i in over[:max_listed]:
            kind = "overlap" if dt[i] == 0 else "reversal"
            events.append(EnergyEvent(kind, int(i + 1), float(t[i + 1]), float(dt[i]), "ps",
                                      f"time {'repeats' if kind == 'overlap' else 'goes back'} at row {i + 1}: "
                                      f"{t[i]:.6g} ps -> {t[i + 1]:.6g} ps"))
        if median_dt is not None:
            gaps = np.nonzero(dt > gap_factor * median_dt)[0]
            n_gaps = int(gaps.size)
            for i in gaps[:max_listed]:
                events.append(EnergyEvent("gap", int(i + 1), float(t[i + 1]), float(dt[i]), "ps",
                                          f"gap of {dt[i]:.6g} ps (median spacing {median_dt:.6g} ps) "
                                          f"before t = {t[i + 1]:.6g} ps"))

    if bad.size:
        ef, tf = e[good], t[good]
        idx = np.nonzero(good)[0]
    else:  # the usual case: no copies of long series
        ef, tf = e, t
        idx = None  # row numbers are the positions themselves
    max_jump = 0.0
    n_jumps = 0
    runaway: float | None = None
    if ef.size >= 5:
        d = np.diff(ef)
        # robust centre and spread; on very long series from an even subsample (medians are the cost)
        sub = d if d.size <= robust_sample else d[:: int(math.ceil(d.size / robust_sample))]
        med = float(np.median(sub))
        s = 1.4826 * float(np.median(np.abs(sub - med)))
        floor = 1e-12 * max(1.0, float(ef.max()), -float(ef.min()))
        s = max(s, floor)
        # |d - med| / s from the extremes and two comparisons: no full-length float temporaries
        max_jump = max(float(d.max()) - med, med - float(d.min())) / s
        band = jump_robust_sigma * s * (1.0 - 1e-9)  # a little inside, then the exact rule below
        jumps = np.flatnonzero((d > med + band) | (d < med - band))
        jumps = jumps[np.abs(d[jumps] - med) / s > jump_robust_sigma]  # the exact rule at the border
        score_j = np.abs(d[jumps] - med) / s
        n_jumps = int(jumps.size)
        for r in np.argsort(-score_j)[:max_listed]:
            j = jumps[r]
            events.append(EnergyEvent("jump", int(j + 1 if idx is None else idx[j + 1]), float(tf[j + 1]), float(d[j]), ENERGY_UNIT,
                                      f"energy step of {d[j]:.6g} kJ/mol ({score_j[r]:.1f} robust sigma) at "
                                      f"t = {tf[j + 1]:.6g} ps"))
        tenth = d.size // 10
        if tenth >= 2:
            first = float(np.sqrt(np.mean((d[:tenth] - med) ** 2)))
            last = float(np.sqrt(np.mean((d[-tenth:] - med) ** 2)))
            runaway = last / max(first, floor)
            if runaway > 3.0:
                events.append(EnergyEvent("runaway", int(e.size - 1 if idx is None else idx[-1]), float(tf[-1]), runaway, "",
                                          f"frame-to-frame energy noise grew {runaway:.3g}-fold from the "
                                          "first to the last tenth of the run"))
    events.sort(key=lambda ev: (ev.time_ps if math.isfinite(ev.time_ps) else math.inf, ev.kind))
    return EventsResult(events=tuple(events), n_nonfinite=int(bad.size), n_jumps=n_jumps, n_gaps=n_gaps,
                        n_overlaps=n_over, max_jump_robust_sigma=max_jump, runaway_ratio=runaway,
                        median_spacing_ps=median_dt, settings=settings)
