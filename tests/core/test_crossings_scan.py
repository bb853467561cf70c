"""The chunked (and threaded) crossing scan against a plain Python state machine, frame by frame.

The reference below walks the series one sample at a time with the definitions of the core-set
(hysteresis) states of Buchete and Hummer, J. Phys. Chem. B 112, 6057 (2008): the committed state
changes only on entry into the other core; a crossing of q* is a transition when the trajectory then
reaches the other core before crossing again. It shares no code with phasewake.core.analyses.crossings, and the
chunk size is made tiny so that chunk and thread boundaries fall everywhere, also on crossings.
"""

from __future__ import annotations

import numpy as np
import pytest

from phasewake.core import settings
from phasewake.core.analyses import crossings as C
from phasewake.core.analyses.crossings import scan as S
from phasewake.core.progress import result_of

A_HI, B_LO, SURF = -0.5, 0.5, 0.0


def reference(q: np.ndarray, *, a_hi: float = A_HI, b_lo: float = B_LO, surface: float = SURF) -> dict[str, list]:
    """Crossings, kinds, paths and dwells by a per-sample Python loop (slow, obvious); core A is
    q <= a_hi, core B is q >= b_lo, the dividing surface q = surface."""
    n = len(q)
    qs = [float(x) for x in q]

    def core(x: float) -> int:
        return 0 if x <= a_hi else (1 if x >= b_lo else -1)

    state = []
    s = -1
    for x in qs:
        c = core(x)
        if c >= 0:
            s = c
        state.append(s)
    cross = [i for i in range(1, n) if (qs[i - 1] >= surface) != (qs[i] >= surface)]
    kinds, frm, to, direction, frames = [], [], [], [], []
    for j, c in enumerate(cross):
        nxt = cross[j + 1] if j + 1 < len(cross) else None
        k = c
        while k < n and core(qs[k]) < 0:
            k += 1
        first_core = k if k < n else None
        origin = state[c - 1]
        dest = core(qs[first_core]) if first_core is not None else -1
        committed = first_core is not None and (nxt is None or first_core < nxt)
        if origin < 0 or (first_core is None and nxt is None):
            kind = "censored"
        elif committed and dest != origin:
            kind = "transition"
        else:
            kind = "recrossing"
        kinds.append(kind)
        frm.append("AB"[origin] if origin >= 0 else "")
        to.append("AB"[dest] if dest >= 0 else "")
        direction.append(1 if qs[c] > qs[c - 1] else -1)
        f = (surface - qs[c - 1]) / (qs[c] - qs[c - 1])
        frames.append(c - 1 + (1 if f >= 0.5 else 0))
    changes = [i for i in range(n) if state[i] >= 0 and (i == 0 or state[i] != state[i - 1])]
    paths = []
    for e in changes[1:]:
        origin = state[e - 1]
        x = e - 1
        while core(qs[x]) != origin:
            x -= 1
        exit_frame = x + 1
        n_cross = sum(1 for c in cross if exit_frame <= c <= e)
        paths.append(("AB"[origin], "AB"[state[e]], exit_frame, e, n_cross))
    dwells = []
    if changes:
        starts = [0] + changes[1:]
        ends = changes[1:] + [n - 1]
        labels = [state[changes[0]]] + [state[e] for e in changes[1:]]
        dwells = [("AB"[lab], a, b) for lab, a, b in zip(labels, starts, ends)]
    return {"frames": frames, "direction": direction, "kinds": kinds, "from": frm, "to": to,
            "paths": paths, "dwells": dwells, "states": state}


def noisy_two_state(n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    state = np.zeros(n)
    switches = np.cumsum(rng.exponential(300.0, size=n // 100 + 10)).astype(np.int64)
    state[switches[switches < n]] = 1.0
    q = 2.0 * (np.cumsum(state) % 2) - 1.0 + 0.6 * rng.standard_normal(n)
    q[:40] = 0.1 * rng.standard_normal(40)  # start between the cores: censored crossings first
    return np.arange(n) * 0.002, q


@pytest.mark.parametrize("threads", [1, 3])
@pytest.mark.parametrize("seed", [1, 2])
def test_scan_matches_python_state_machine(monkeypatch: pytest.MonkeyPatch, threads: int, seed: int) -> None:
    monkeypatch.setattr(S, "_CHUNK", 64)  # ~100 chunk boundaries, several parts
    monkeypatch.setattr(settings, "_threads", threads)
    t, q = noisy_two_state(6000, seed)
    ref = reference(q)
    res = result_of(C.crossings_work([(t, q)], states=(A_HI, B_LO), surface=SURF, kappa_time_series=False,
                                     test_dwells=False))
    ev = res.events
    assert len(ref["frames"]) > 150 and ref["kinds"].count("transition") > 10  # the series is not trivial
    assert ev["frame"].tolist() == ref["frames"]
    assert ev["direction"].tolist() == ref["direction"]
    assert ev["kind"].tolist() == ref["kinds"]
    assert ev["from_state"].tolist() == ref["from"]
    assert ev["to_state"].tolist() == ref["to"]
    got_paths = [(p["from_state"], p["to_state"], int(p["exit_frame"]), int(p["entry_frame"]), int(p["n_crossings"]))
                 for p in res.paths]
    assert got_paths == ref["paths"]
    got_dwells = [(d["state"], int(d["start_frame"]), int(d["end_frame"])) for d in res.dwells]
    assert got_dwells == ref["dwells"]
    # committed states per frame by the same scan
    assert C.committed_states(q, a_hi=A_HI, b_lo=B_LO).tolist() == ref["states"]
    # crossing times: linear interpolation between the two frames (numpy, independent of the module)
    c = np.flatnonzero((q[1:] >= SURF) != (q[:-1] >= SURF))
    f = (SURF - q[c]) / (q[c + 1] - q[c])
    np.testing.assert_allclose(ev["time_ps"], t[c] + f * (t[c + 1] - t[c]), rtol=0, atol=1e-12)


def test_threaded_scan_equals_single_part(monkeypatch: pytest.MonkeyPatch) -> None:
    """Parts split at chunk boundaries give exactly the one-part scan (a crossing on every split too)."""
    monkeypatch.setattr(S, "_CHUNK", 50)
    t, q = noisy_two_state(20_000, 7)
    q[49:51] = [-1.0, 1.0]  # crossings exactly at chunk starts
    q[9999:10001] = [1.0, -1.0]
    out = {}
    for threads in (1, 2, 5):
        monkeypatch.setattr(settings, "_threads", threads)
        sc = S._scan(t, q, a_hi=A_HI, b_lo=B_LO, surface=SURF)
        out[threads] = sc
    for threads in (2, 5):
        for name in ("entries", "labels", "exits", "crossings", "next_entry", "next_label"):
            np.testing.assert_array_equal(getattr(out[threads], name), getattr(out[1], name))
    assert np.array_equal(out[1].crossings, 1 + np.flatnonzero((q[1:] >= SURF) != (q[:-1] >= SURF)))
    # the extremes come from the segment extremes, not a pass of their own: numpy's min and max
    q[0], q[50] = q.max() + 1.0, q.min() - 1.0  # on the first frame and on a chunk's first frame
    for threads in (1, 2, 5):
        monkeypatch.setattr(settings, "_threads", threads)
        sc = S._scan(t, q, a_hi=A_HI, b_lo=B_LO, surface=SURF)
        assert (sc.q_min, sc.q_max) == (q.min(), q.max())


def test_scan_flags_nan_and_time_order_in_any_part(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(S, "_CHUNK", 64)
    monkeypatch.setattr(settings, "_threads", 3)
    t, q = noisy_two_state(3000, 3)
    q2 = q.copy()
    q2[2500] = np.nan
    assert not S._scan(t, q2, a_hi=A_HI, b_lo=B_LO, surface=SURF).finite
    t2 = t.copy()
    t2[2100] = t2[2099]
    assert not S._scan(t2, q, a_hi=A_HI, b_lo=B_LO, surface=SURF).time_increasing
    ok = S._scan(t, q, a_hi=A_HI, b_lo=B_LO, surface=SURF)
    assert ok.finite and ok.time_increasing


def test_dwell_tests_same_with_two_threads(monkeypatch: pytest.MonkeyPatch) -> None:
    """The two Monte Carlo KS tests (Lilliefors 1969) run at once when a core is idle: same numbers."""
    rng = np.random.default_rng(9)
    n = 400_000
    switches = np.cumsum(rng.exponential(80.0, size=n // 40)).astype(np.int64)
    state = np.zeros(n)
    state[switches[switches < n]] = 1.0
    q = 2.0 * (np.cumsum(state) % 2) - 1.0 + 0.2 * rng.standard_normal(n)
    t = np.arange(n) * 0.001
    out = {}
    for threads in (1, 2):
        monkeypatch.setattr(settings, "_threads", threads)
        res = result_of(C.crossings_work([(t, q)], states=(A_HI, B_LO), surface=SURF, kappa_time_series=False))
        out[threads] = res.dwell_tests
    assert min(test.n for test in out[1].values()) >= 1000  # the threaded path is taken
    assert out[1] == out[2]
