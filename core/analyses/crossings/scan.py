"""The chunked scan of one replica's coordinate: side changes of q*, segment extremes, core entries.

See :mod:`phasewake.core.analyses.crossings` for how it stays fast.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from phasewake.core import interrupts
from phasewake.core.analyses.crossings.results import Trace
from phasewake.core.errors import AnalysisError

_CHUNK = 1 << 17  # 1 MB of float64: the temporaries of one chunk stay in cache


_NONE = np.iinfo(np.int64).max  # "no such frame"


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
    q_min: float  # the extremes of q, from the segment extremes (no extra pass over q)
    q_max: float


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
    """Threads for the scan (numpy releases the GIL in its loops): the threads setting
    (:func:`phasewake.core.settings.threads`) when the series is long, else 1. The parts join in a
    fixed order, so the result is the same for any count."""
    from phasewake.core.settings import threads

    return 1 if n < 8 * _CHUNK else threads()


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
                 next_entry=next_entry, next_label=next_label, finite=finite, time_increasing=increasing,
                 q_min=float(seg_min.min()), q_max=float(seg_max.max()))


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



def _check_scan(sc: _Scan, k: int, tr: Trace) -> None:
    label = f"replica {k}" + (f" ({tr.name})" if tr.name else "")
    if not sc.finite:
        raise AnalysisError(f"{label}: the coordinate has NaN or infinite values")
    if not sc.time_increasing:
        raise AnalysisError(f"{label}: time must increase strictly from frame to frame")
