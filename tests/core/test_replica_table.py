"""The per-replica table of a crossings ensemble (core/analyses/replica_table.py)."""

from __future__ import annotations

import numpy as np
from scipy import stats

from phasewake.core.analyses.crossings import CrossingsRequest
from phasewake.core.analyses.replica_table import replica_rows
from phasewake.core.progress import drive


def _square_wave(dwells, values=(0.3, 0.7), dt=0.1, noise=0.0, seed=0, slope=0.0):
    """q(t) that sits in A (0.3) and B (0.7) for the given numbers of frames in turn, jumping in one frame."""
    q = np.concatenate([np.full(n, values[k % 2]) for k, n in enumerate(dwells)])
    t = np.arange(q.size) * dt
    rng = np.random.default_rng(seed)
    return t, q + noise * rng.standard_normal(q.size) + slope * t


def test_rows_count_each_replicas_transitions_and_time_in_states():
    # replica 0: A 40, B 30, A 50, B 20 frames -> A->B twice, B->A once; replica 1 never leaves A
    t0, q0 = _square_wave([40, 30, 50, 20])
    t1, q1 = _square_wave([140])
    t2, q2 = _square_wave([20, 60, 60])
    req = CrossingsRequest(coordinate="distance(0, 1)", states=(0.4, 0.6), surface=0.5, temperature_K=300.0)
    res = drive(req.analyse([_FakeRun("r0"), _FakeRun("r1"), _FakeRun("r2")], [(t0, q0), (t1, q1), (t2, q2)]))
    rows = res.replicas
    assert [r.transitions_ab for r in rows] == [2, 0, 1]  # counted by construction of the waves
    assert [r.transitions_ba for r in rows] == [1, 0, 1]
    assert sum(r.transitions_ab for r in rows) == res.rate_ab.n_transitions  # the pooled count: the rows' sum
    assert abs(sum(r.time_in_a_ps for r in rows) - res.rate_ab.exposure_ps) < 1e-9  # and the pooled exposure
    # time committed to A: the replica's own A segments (the last one ends with the run)
    dwell = res.dwells[res.dwells["replica"] == 0]
    assert rows[0].time_in_a_ps == float(dwell["duration_ps"][dwell["state"] == "A"].sum()) > 0
    assert np.isnan(rows[1].rate_ba_per_ps) and rows[1].rate_ab_per_ps == 0.0
    assert rows[0].rate_ab_per_ps == 2 / rows[0].time_in_a_ps
    assert res.to_dict(tables=False)["replicas"][0]["transitions_ab"] == 2


class _FakeRun:
    """What CrossingsRequest.analyse asks of a run when states and the temperature are given."""

    def __init__(self, name):
        self.name = name


def test_between_share_and_drift_against_the_textbook_formulas():
    rng = np.random.default_rng(3)
    traces = []
    for k, shift in enumerate((0.0, 0.0, 0.05, 0.0)):
        t = np.arange(500) * 0.2
        q = 0.5 + shift + 0.02 * rng.standard_normal(500) + (0.0002 * t if k == 1 else 0.0)
        traces.append(_Trace(t, q, f"r{k}"))
    res = _EmptyResult()
    rows = replica_rows(res, traces, "nm")
    shares = np.array([r.between_share for r in rows])
    assert abs(shares.sum() - 1.0) < 1e-12 and np.argmax(shares) == 2  # the shifted replica dominates
    # Gelman and Rubin (1992): B = n var(means, ddof=1) for m chains of n draws; the shares split (m - 1) B
    means = np.array([tr.values.mean() for tr in traces])
    b = 500 * means.var(ddof=1)
    np.testing.assert_allclose(shares * 3 * b, 500 * (means - means.mean()) ** 2, rtol=1e-9)
    # drift: scipy's least-squares slope, per ns
    for tr, r in zip(traces, rows, strict=True):
        np.testing.assert_allclose(r.drift_per_ns, 1000 * stats.linregress(tr.time_ps, tr.values).slope,
                                   rtol=1e-9, atol=1e-9)
    assert 0.15 < rows[1].drift_per_ns < 0.25  # 0.0002 nm/ps = 0.2 nm/ns put in by hand


class _Trace:
    def __init__(self, t, q, name):
        self.time_ps, self.values, self.name = t, q, name


class _EmptyResult:
    from phasewake.core.analyses.crossings.results import DWELL_DTYPE, EVENT_DTYPE

    events = np.zeros(0, EVENT_DTYPE)
    dwells = np.zeros(0, DWELL_DTYPE)
