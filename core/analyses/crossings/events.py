"""Events of one replica from its scan: crossings of the surface (with kinds), transition paths, dwells.

Loops run over events only, never over frames; see :mod:`phasewake.core.analyses.crossings`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from phasewake.core.analyses.crossings.results import DWELL_DTYPE, EVENT_DTYPE, PATH_DTYPE, STATE_CODES, Trace
from phasewake.core.analyses.crossings.scan import _NONE, _interp_time, _Scan


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


@dataclass
class _Crossings:
    """The crossings of the dividing surface of one replica, one entry per crossing (private)."""

    i0: np.ndarray  # frame before the crossing
    time_ps: np.ndarray
    fraction: np.ndarray  # where between frames i0 and i0 + 1
    direction: np.ndarray
    velocity: np.ndarray
    kind_code: np.ndarray  # 0 transition, 1 recrossing, 2 censored
    from_label: np.ndarray  # committed state before (-1 none)
    to_label: np.ndarray  # first core reached after (-1 none)
    next_entry: np.ndarray
    is_transition: np.ndarray
    n_wraps: int


@dataclass
class _Changes:
    """The committed-state changes of one replica: each is one transition path (private)."""

    exit_frame: np.ndarray  # first frame outside the origin core (its last exit)
    entry_frame: np.ndarray  # first frame inside the destination core
    origin: np.ndarray
    dest: np.ndarray
    t_exit: np.ndarray
    t_entry: np.ndarray


def _changes(tr: Trace, sc: _Scan, *, a_hi: float, b_lo: float) -> _Changes:
    """Every core entry after the first, with its last exit from the origin core, interpolated in time."""
    t, q = tr.time_ps, tr.values
    exit_frame = sc.exits[1:]
    entry_frame = sc.entries[1:]
    origin = sc.labels[:-1]
    dest = sc.labels[1:]
    t_exit, _ = _interp_time(t, q, exit_frame - 1, np.where(origin == 0, a_hi, b_lo))
    t_entry, _ = _interp_time(t, q, entry_frame - 1, np.where(dest == 0, a_hi, b_lo))
    return _Changes(exit_frame, entry_frame, origin, dest, t_exit, t_entry)


def _crossings(tr: Trace, sc: _Scan, *, surface: float) -> _Crossings:
    """Time, direction, dq/dt and kind of every crossing between frames i0 and i0 + 1."""
    t, q = tr.time_ps, tr.values
    starts, labels = sc.entries, sc.labels
    cs = sc.crossings
    # Each of q and t is gathered once at i0 and i0 + 1 (scattered reads from a long series cost a cache
    # miss each).
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
    from_lab = np.where(k_prev >= 0, labels[np.maximum(k_prev, 0)] if starts.size else -1, -1)
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
    out = _Crossings(i0, t_c, f_c, direction, vel, kind_code, from_lab, to_lab, next_entry, is_transition, 0)
    # A periodic coordinate (a dihedral) jumping across its period boundary changes side without
    # crossing q*: such wraps cut segments (above) but are not crossing events.
    wrap = (np.abs(dq) > 0.5 * tr.period) if tr.period else np.zeros(n_c, bool)
    n_wraps = int(np.count_nonzero(wrap))
    if n_wraps:
        keep = ~wrap
        out = _Crossings(i0[keep], t_c[keep], f_c[keep], direction[keep], vel[keep], kind_code[keep],
                         from_lab[keep], to_lab[keep], next_entry[keep], is_transition[keep], n_wraps)
    return out


def _paths_table(replica: int, ch: _Changes, i0: np.ndarray) -> np.ndarray:
    """Paths: each committed-state change has exactly one transition crossing (the last before entry)."""
    n_p = int(ch.entry_frame.size)
    paths = np.zeros(n_p, PATH_DTYPE)
    paths["replica"] = replica
    paths["from_state"] = np.asarray(STATE_CODES)[ch.origin] if n_p else []
    paths["to_state"] = np.asarray(STATE_CODES)[ch.dest] if n_p else []
    paths["exit_frame"] = ch.exit_frame
    paths["entry_frame"] = ch.entry_frame
    paths["exit_time_ps"] = ch.t_exit
    paths["entry_time_ps"] = ch.t_entry
    paths["duration_ps"] = ch.t_entry - ch.t_exit
    paths["n_crossings"] = (np.searchsorted(i0, ch.entry_frame - 1, side="right")
                            - np.searchsorted(i0, ch.exit_frame - 1, side="left"))
    return paths


def _events_table(replica: int, c: _Crossings, ch: _Changes, paths: np.ndarray) -> np.ndarray:
    n_c = int(c.i0.size)
    kind = np.asarray(("transition", "recrossing", "censored"))[c.kind_code] if n_c else np.zeros(0, "U10")
    codes = np.asarray(("A", "B", ""))
    events = np.zeros(n_c, EVENT_DTYPE)
    events["replica"] = replica
    events["frame"] = c.i0 + (c.fraction >= 0.5)
    events["time_ps"] = c.time_ps
    events["direction"] = c.direction
    events["kind"] = kind
    events["from_state"] = codes[c.from_label] if n_c else []
    events["to_state"] = codes[c.to_label] if n_c else []
    events["velocity"] = c.velocity
    events["path_duration_ps"] = np.nan
    events["path"] = -1
    if paths.size and n_c:
        tr_idx = np.flatnonzero(c.is_transition)
        p_of = np.searchsorted(ch.entry_frame, c.next_entry[tr_idx])
        events["path"][tr_idx] = p_of
        events["path_duration_ps"][tr_idx] = paths["duration_ps"][p_of]
    return events


def _dwells_table(tr: Trace, replica: int, sc: _Scan, ch: _Changes, *, a_hi: float, b_lo: float
                  ) -> tuple[np.ndarray, float]:
    """Dwell segments of the committed state, and the time before the first core visit."""
    t, q = tr.time_ps, tr.values
    n = int(q.shape[0])
    starts, labels = sc.entries, sc.labels
    if not starts.size:
        return np.zeros(0, DWELL_DTYPE), float(t[-1] - t[0])
    seg_start_frame = np.concatenate(([0], ch.entry_frame))
    seg_label = np.concatenate(([labels[0]], ch.dest))
    t_first = t[0] if starts[0] == 0 else _interp_time(
        t, q, np.asarray([starts[0] - 1]), np.asarray([a_hi if labels[0] == 0 else b_lo]))[0][0]
    # Time before the first core visit is given to the first core reached: the committed state
    # then was most likely that core (unless the run began on a transition path, a fraction of
    # about <t_TP>/<dwell>). Counting it keeps the exposure of a run started at a random time
    # unbiased; starting the clock at the first core entry would bias k low when runs are short.
    seg_t0 = np.concatenate(([t[0]], ch.t_entry))
    seg_t1 = np.concatenate((ch.t_entry, [t[-1]]))
    seg_end_frame = np.concatenate((ch.entry_frame, [n - 1]))
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
    return dwells, float(t_first - t[0])


def _replica_events(tr: Trace, replica: int, sc: _Scan, *, a_hi: float, b_lo: float, surface: float
                    ) -> _Replica:
    """Crossings, paths and dwells of one replica (the pieces above, tied together)."""
    t = tr.time_ps
    n = int(tr.values.shape[0])
    ch = _changes(tr, sc, a_hi=a_hi, b_lo=b_lo)
    c = _crossings(tr, sc, surface=surface)
    paths = _paths_table(replica, ch, c.i0)
    events = _events_table(replica, c, ch, paths)
    dwells, unassigned = _dwells_table(tr, replica, sc, ch, a_hi=a_hi, b_lo=b_lo)
    dt = float(t[-1] - t[0]) / (n - 1) if n > 1 else float("nan")  # mean spacing
    return _Replica(n=n, time_span_ps=float(t[-1] - t[0]), unassigned_ps=unassigned, dt_ps=dt,
                    events=events, paths=paths, dwells=dwells, crossing_i0=c.i0, kind_code=c.kind_code,
                    n_wraps=c.n_wraps, crossing_f=c.fraction,
                    visited=(bool(np.any(sc.labels == 0)), bool(np.any(sc.labels == 1))))
