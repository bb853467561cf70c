"""The threads setting (core/settings.py): default from the OS's CPU affinity, set by the user, and
results that do not depend on it."""

from __future__ import annotations

import os

import numpy as np
import pytest

from phasewake.core import settings


def test_default_is_the_cores_this_process_may_use(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(settings, "_threads", None)
    expected = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()  # the OS's own
    assert settings.default_threads() == expected
    assert settings.threads() == expected


def test_set_threads_returns_the_previous_setting_and_refuses_zero(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(settings, "_threads", None)
    assert settings.set_threads(3) is None
    assert settings.threads() == 3
    assert settings.set_threads(None) == 3
    assert settings.threads() == settings.default_threads()
    with pytest.raises(ValueError, match="at least 1"):
        settings.set_threads(0)


def test_results_do_not_depend_on_the_thread_count(monkeypatch: pytest.MonkeyPatch) -> None:
    """The FFT autocorrelation (scipy.fft workers) and the threaded crossings scan give the same bits."""
    from phasewake.core.analyses.correlation import autocorrelation
    from phasewake.core.analyses.crossings import crossings_work
    from phasewake.core.analyses.crossings import scan as S
    from phasewake.core.progress import result_of

    rng = np.random.default_rng(5)
    x = rng.standard_normal((6, 5000)).cumsum(axis=1)
    q = np.sign(np.sin(np.arange(40_000) / 400.0)) + 0.3 * rng.standard_normal(40_000)
    t = np.arange(q.size) * 0.01
    monkeypatch.setattr(S, "_CHUNK", 256)
    out = []
    for n in (1, 4):
        monkeypatch.setattr(settings, "_threads", n)
        res = result_of(crossings_work([(t, q)], states=(-0.5, 0.5), surface=0.0, kappa_time_series=False))
        out.append((autocorrelation(x, axis=-1), res.events, res.dwells))
    np.testing.assert_array_equal(out[0][0], out[1][0])
    for table in (1, 2):
        for name in out[0][table].dtype.names:  # field by field: NaN (no path) equals NaN here
            np.testing.assert_array_equal(out[0][table][name], out[1][table][name])
    assert out[0][1].size > 50  # crossings were found
