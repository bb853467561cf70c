"""Events of an energy series: non-finite rows, jumps, time gaps, overlaps and reversals, runaway noise.

:func:`find_energy_events` takes the time and the judged energy and locates every event with its time and
size. It works from one blocked scan of the two columns (:func:`phasewake.core.analyses.energy_scan.scan_columns`):
only the blocks whose bounds can hold an event are looked at again. Rows with a non-finite energy are
listed, then left out of the energy steps (the time spacings keep every row).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phasewake.core.analyses.energy_scan import (
    ENERGY_COLUMN,
    ENERGY_UNIT,
    TIME_COLUMN,
    TableScan,
    fast_median,
    scan_columns,
)


@dataclass(frozen=True)
class EnergyEvent:
    """One located event: ``kind`` in nonfinite, jump, gap, overlap, reversal, runaway."""

    kind: str
    index: int  # row index (for a spacing event: the row after the spacing)
    time_ps: float
    size: float
    unit: str
    description: str


@dataclass(frozen=True)
class EventsResult:
    events: tuple[EnergyEvent, ...]
    n_nonfinite: int
    n_jumps: int
    n_gaps: int
    n_overlaps: int  # repeated times and reversals
    max_jump_robust_sigma: float  # largest |d - median d| / robust spread; 0 when too short
    runaway_ratio: float | None  # RMS step noise last tenth / first tenth
    median_spacing_ps: float | None
    settings: dict[str, Any] = field(default_factory=dict)


def find_energy_events(
    time_ps: np.ndarray,
    energy_kJ_per_mol: np.ndarray,
    *,
    jump_robust_sigma: float = 8.0,
    gap_factor: float = 1.5,
    max_listed: int = 50,
    robust_sample: int = 1 << 20,
    scan: TableScan | None = None,
) -> EventsResult:
    """Locate non-finite rows, jumps, time gaps/overlaps/reversals and a runaway trend.

    Parameters
    ----------
    time_ps : ndarray, shape (n,), ps
    energy_kJ_per_mol : ndarray, shape (n,), kJ/mol (may contain NaN/inf)
    jump_robust_sigma : float
        A frame-to-frame change this many robust spreads from the median change is a jump.
    gap_factor : float
        A spacing above this many median spacings is a gap.
    max_listed : int
        At most this many events of each kind are listed (all are counted).
    robust_sample : int
        Median and MAD of the steps come from at most this many evenly spaced steps.
    scan : TableScan, optional
        A scan of these arrays from :func:`phasewake.core.analyses.energy.scan_energy_table` (made here when
        not given or not usable).
    """
    t = np.asarray(time_ps, dtype=np.float64)
    e = np.asarray(energy_kJ_per_mol, dtype=np.float64)
    settings = {"jump_robust_sigma": jump_robust_sigma, "gap_factor": gap_factor, "max_listed": max_listed,
                "robust_sample": robust_sample}
    if scan is None or scan.n_rows != e.shape[0] or ENERGY_COLUMN not in scan.diffs or TIME_COLUMN not in scan.diffs:
        scan = scan_columns({TIME_COLUMN: t, ENERGY_COLUMN: e}, diffs=(TIME_COLUMN, ENERGY_COLUMN), no_extremes=(TIME_COLUMN,), robust_sample=robust_sample)
    events: list[EnergyEvent] = []
    rows = None  # rows of the finite energies (None: every row)
    time_scan = energy_scan = scan
    tf, ef = t, e
    bad = np.zeros(0, np.int64)
    if not scan.finite:  # the steps of the finite rows; the spacings of every row
        good = np.isfinite(e)
        bad = np.flatnonzero(~good)
        for i in bad[:max_listed]:
            events.append(EnergyEvent("nonfinite", int(i), float(t[i]),
                                      float(e[i]) if not np.isnan(e[i]) else math.nan,
                                      ENERGY_UNIT, f"non-finite energy at t = {t[i]:.6g} ps"))
        if bad.size:
            rows, tf, ef = np.flatnonzero(good), t[good], e[good]
        time_scan = scan_columns({TIME_COLUMN: t}, diffs=(TIME_COLUMN,), no_extremes=(TIME_COLUMN,), robust_sample=robust_sample)
        energy_scan = scan_columns({TIME_COLUMN: tf, ENERGY_COLUMN: ef}, diffs=(ENERGY_COLUMN,), no_extremes=(TIME_COLUMN,), robust_sample=robust_sample)
    spacing = _spacing_events(t, time_scan, gap_factor=gap_factor, max_listed=max_listed)
    steps = _step_events(tf, ef, energy_scan, rows, jump_robust_sigma=jump_robust_sigma, max_listed=max_listed)
    events += spacing[0] + steps[0]
    events.sort(key=lambda ev: (ev.time_ps if math.isfinite(ev.time_ps) else math.inf, ev.kind))
    return EventsResult(events=tuple(events), n_nonfinite=int(bad.size), n_jumps=steps[2], n_gaps=spacing[2],
                        n_overlaps=spacing[1], max_jump_robust_sigma=steps[1], runaway_ratio=steps[3],
                        median_spacing_ps=spacing[3], settings=settings)


def _rows_of_blocks(flag: np.ndarray, block: int, n_diffs: int) -> list[tuple[int, int]]:
    """d-index ranges [lo, hi) of the flagged blocks of a scan (block b: max(bB - 1, 0) .. (b + 1)B - 2)."""
    out = []
    for b in np.flatnonzero(flag):
        lo = max(int(b) * block - 1, 0)
        hi = min((int(b) + 1) * block - 1, n_diffs)
        if hi > lo:
            out.append((lo, hi))
    return out


def _flagged(x: np.ndarray, scan: TableScan, flag: np.ndarray, rule: Any) -> np.ndarray:
    """Sorted d-indices i where ``rule(x[i + 1] - x[i])`` holds, looked for only in the flagged blocks."""
    found = [lo + np.nonzero(rule(np.diff(x[lo:hi + 1])))[0]
             for lo, hi in _rows_of_blocks(flag, scan.block_rows, max(x.shape[0] - 1, 0))]
    return np.unique(np.concatenate(found)) if found else np.zeros(0, np.int64)  # neighbouring blocks share one


def _spacing_events(t: np.ndarray, scan: TableScan, *, gap_factor: float,
                    max_listed: int) -> tuple[list[EnergyEvent], int, int, float | None]:
    """(events, overlaps and reversals, gaps, median spacing) of the time column."""
    events: list[EnergyEvent] = []
    dt_s = scan.diffs[TIME_COLUMN]
    pos = dt_s.sample[dt_s.sample > 0]  # a copy: partitioned in place below
    median_dt = fast_median(pos, overwrite=True) if pos.size else None
    over = _flagged(t, scan, dt_s.block_min <= 0, lambda d: d <= 0)
    for i in over[:max_listed]:
        dti = float(t[i + 1] - t[i])
        kind = "overlap" if dti == 0 else "reversal"
        events.append(EnergyEvent(kind, int(i + 1), float(t[i + 1]), dti, "ps",
                                  f"time {'repeats' if kind == 'overlap' else 'goes back'} at row {i + 1}: "
                                  f"{t[i]:.6g} ps -> {t[i + 1]:.6g} ps"))
    n_gaps = 0
    if median_dt is not None:
        lim = gap_factor * median_dt
        gaps = _flagged(t, scan, dt_s.block_max > lim, lambda d: d > lim)
        n_gaps = int(gaps.size)
        for i in gaps[:max_listed]:
            dti = float(t[i + 1] - t[i])
            events.append(EnergyEvent("gap", int(i + 1), float(t[i + 1]), dti, "ps",
                                      f"gap of {dti:.6g} ps (median spacing {median_dt:.6g} ps) "
                                      f"before t = {t[i + 1]:.6g} ps"))
    return events, int(over.size), n_gaps, median_dt


def _step_events(t: np.ndarray, e: np.ndarray, scan: TableScan, rows: np.ndarray | None, *,
                 jump_robust_sigma: float, max_listed: int) -> tuple[list[EnergyEvent], float, int, float | None]:
    """(events, largest step in robust sigma, jumps, runaway ratio) of finite energies ``e`` at times ``t``;
    ``rows`` maps their positions to the rows of the table (None: the same)."""
    events: list[EnergyEvent] = []
    n = e.shape[0]
    if n < 5:
        return events, 0.0, 0, None
    de_s = scan.diffs[ENERGY_COLUMN]
    med = fast_median(de_s.sample)
    dev = np.subtract(de_s.sample, med)
    ie = scan.index(ENERGY_COLUMN)
    floor = 1e-12 * max(1.0, float(scan.maximum[ie]), -float(scan.minimum[ie]))
    s = max(1.4826 * fast_median(np.abs(dev, out=dev), overwrite=True), floor)
    max_jump = max(float(de_s.block_max.max()) - med, med - float(de_s.block_min.min())) / s
    band = jump_robust_sigma * s * (1.0 - 1e-9)  # a little inside, then the exact rule below
    flag = (de_s.block_max > med + band) | (de_s.block_min < med - band)
    jumps = _flagged(e, scan, flag, lambda d: (d > med + band) | (d < med - band))
    dj = e[jumps + 1] - e[jumps]
    keep = np.abs(dj - med) / s > jump_robust_sigma  # the exact rule at the border
    jumps, dj = jumps[keep], dj[keep]
    score_j = np.abs(dj - med) / s
    for r in np.argsort(-score_j)[:max_listed]:
        jr = int(jumps[r])
        events.append(EnergyEvent("jump", int(jr + 1 if rows is None else rows[jr + 1]), float(t[jr + 1]),
                                  float(dj[r]), ENERGY_UNIT,
                                  f"energy step of {dj[r]:.6g} kJ/mol ({score_j[r]:.1f} robust sigma) at "
                                  f"t = {t[jr + 1]:.6g} ps"))
    runaway = _runaway_ratio(e, med, floor)
    if runaway is not None and runaway > 3.0:
        events.append(EnergyEvent("runaway", int(n - 1 if rows is None else rows[-1]), float(t[-1]), runaway, "",
                                  f"frame-to-frame energy noise grew {runaway:.3g}-fold from the "
                                  "first to the last tenth of the run"))
    return events, max_jump, int(jumps.size), runaway


def _runaway_ratio(e: np.ndarray, med: float, floor: float) -> float | None:
    """RMS of the steps about their median in the last tenth over that in the first (None: too short)."""
    nd = e.shape[0] - 1
    tenth = nd // 10
    if tenth < 2:
        return None

    def rms(d: np.ndarray) -> float:  # sqrt(mean((d - med)^2)) without further temporaries
        d -= med
        return float(np.sqrt(np.mean(np.square(d, out=d))))

    return rms(np.diff(e[nd - tenth:])) / max(rms(np.diff(e[:tenth + 1])), floor)
