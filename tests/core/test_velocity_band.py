"""The banded Gram engine of velocity.BlockCorrelator against outside references.

References: a direct numpy einsum over every origin and lag, and statsmodels' acovf (per component,
``adjusted=True, demean=False``: sum_t x(t) x(t+k) / (n - k)).
Chunk sizes are chosen around the lag window L and the sub-block S so every carry path is used
(updates shorter than L - 1, exactly L - 1, L, and long ones), with one and two threads.
"""

from __future__ import annotations

import numpy as np
import pytest

from phasewake.core.analyses import velocity as V
from phasewake.core.analyses.velocity import correlator


def direct_sums(x: np.ndarray, lags: int, w: np.ndarray) -> np.ndarray:
    """sum_t sum_i w_i x_i(t) . x_i(t + k), k < lags (numpy einsum, every origin)."""
    f = x.shape[0]
    return np.array([np.einsum("tnc,tnc,n->", x[: f - k], x[k:], w) if k < f else 0.0 for k in range(lags)])


def feed(c: V.BlockCorrelator, x: np.ndarray, sizes: list[int], scratch: bool) -> tuple[np.ndarray, np.ndarray]:
    i = 0
    k = 0
    buf = np.empty_like(x)
    while i < x.shape[0]:
        n = sizes[k % len(sizes)]
        k += 1
        part = x[i : i + n]
        if scratch:  # one buffer reused for every chunk, as the readers' pools do
            view = buf[: part.shape[0]]
            view[...] = part
            c.update(view)
            view[...] = np.nan  # the correlator must not keep a reference to the chunk
        else:
            c.update(part)
        i += n
    return c.finish()


@pytest.mark.parametrize("threads", [1, 2])
@pytest.mark.parametrize("lag,sizes", [
    (1, [7]), (2, [1, 3]), (9, [4, 8, 9, 10, 1]), (24, [5, 23, 24, 100, 2]), (50, [256]), (50, [49, 1, 300]),
    (73, [30, 200, 72]), (256, [1000]),
])
def test_gram_band_equals_direct_sum(monkeypatch: pytest.MonkeyPatch, threads: int, lag: int,
                                     sizes: list[int]) -> None:
    monkeypatch.setattr(correlator, "GRAM_THREADS", threads)
    rng = np.random.default_rng(lag * 10 + threads)
    f = 611
    x = rng.standard_normal((f, 6, 3))
    w = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 16.0])
    lab = np.array([1, 0, -1, 0, 1, 1])  # groups interleaved, atom 2 unused
    c = V.BlockCorrelator(n_atoms=6, max_lag=lag, weights=w, group_of_atom=lab, n_groups=2, dtype=np.float64,
                          engine="gram")
    sums, counts = feed(c, x, sizes, scratch=True)
    L = min(lag, f)
    for g, atoms in ((0, [1, 3]), (1, [0, 4, 5])):
        np.testing.assert_allclose(sums[g][:L], direct_sums(x[:, atoms], L, w[atoms]), rtol=1e-10, atol=1e-9)
    np.testing.assert_array_equal(counts, np.maximum(f - np.arange(lag), 0))


def test_gram_band_short_run_and_unit_weights() -> None:
    """Fewer frames than the lag window: lags past the end sum to zero, counts are zero there."""
    x = np.random.default_rng(1).standard_normal((30, 4, 3))
    c = V.BlockCorrelator(n_atoms=4, max_lag=50, weights=np.ones(4), group_of_atom=np.zeros(4, int), n_groups=1,
                          dtype=np.float64, engine="gram")
    for i in range(0, 30, 7):
        c.update(x[i : i + 7])
    sums, counts = c.finish()
    np.testing.assert_allclose(sums[0][:30], direct_sums(x, 30, np.ones(4)), rtol=1e-10)
    assert np.all(sums[0][30:] == 0) and np.all(counts[30:] == 0)


def test_gram_band_matches_statsmodels_acf_per_component() -> None:
    from statsmodels.tsa.stattools import acovf

    rng = np.random.default_rng(7)
    f, lag = 800, 60
    # a correlated velocity-like signal: AR(1) per component (statsmodels reference needs no structure)
    e = rng.standard_normal((f, 3, 3))
    x = np.empty_like(e)
    x[0] = e[0]
    for t in range(1, f):
        x[t] = 0.9 * x[t - 1] + e[t]
    c = V.BlockCorrelator(n_atoms=3, max_lag=lag, weights=np.ones(3), group_of_atom=np.zeros(3, int), n_groups=1,
                          dtype=np.float64, engine="gram")
    for i in range(0, f, 97):
        c.update(x[i : i + 97])
    sums, counts = c.finish()
    ref = np.zeros(lag)
    for a in range(3):
        for comp in range(3):
            s = x[:, a, comp]
            r = acovf(s, adjusted=True, demean=False, fft=False, nlag=lag - 1)  # sum_t x(t) x(t+k) / (n - k)
            ref += r * (f - np.arange(lag))
    np.testing.assert_allclose(sums[0], ref, rtol=1e-10)


def test_float32_band_within_float32_rounding_of_float64() -> None:
    """The float32 route (the VACF default) stays within float32 rounding of the float64 sums."""
    rng = np.random.default_rng(11)
    x = rng.standard_normal((700, 500, 3)).astype(np.float32)
    ref = direct_sums(x.astype(np.float64), 50, np.ones(500))
    c = V.BlockCorrelator(n_atoms=500, max_lag=50, weights=np.ones(500), group_of_atom=np.zeros(500, int),
                          n_groups=1, dtype=np.float32, engine="gram")
    for i in range(0, 700, 256):
        c.update(x[i : i + 256])
    sums, _ = c.finish()
    # float32 products summed over 1500 columns: relative error ~ sqrt(1500) * 6e-8 of C(0) (from memory)
    assert np.max(np.abs(sums[0] - ref)) / ref[0] < 1e-5


def test_float32_sums_do_not_depend_on_chunking_or_threads(monkeypatch: pytest.MonkeyPatch) -> None:
    """Sub-blocks sit on a fixed frame grid: one-pass and separate analyses (other chunk sizes) agree far
    below float32 rounding (a partition that followed the chunks would differ at ~1e-7)."""
    x = np.random.default_rng(5).standard_normal((500, 300, 3)).astype(np.float32)
    out = []
    for sizes, threads in (([256], 1), ([37], 1), ([1, 90, 3, 200], 2), ([500], 2)):
        monkeypatch.setattr(correlator, "GRAM_THREADS", threads)
        c = V.BlockCorrelator(n_atoms=300, max_lag=50, weights=np.ones(300), group_of_atom=np.zeros(300, int),
                              n_groups=1, dtype=np.float32, engine="gram")
        out.append(feed(c, x, sizes, scratch=True)[0])
    for o in out[1:]:
        np.testing.assert_allclose(o, out[0], rtol=1e-12, atol=0)


@pytest.mark.parametrize("lag", [1, 5, 20, 50, 256, 300])
def test_buffer_estimate_covers_the_buffers(lag: int) -> None:
    """buffer_bytes (used for the memory checks of vacf and the one-pass VACF) is not an underestimate."""
    c = V.BlockCorrelator(n_atoms=10, max_lag=lag, weights=np.ones(10), group_of_atom=np.zeros(10, int),
                          n_groups=1)
    held = sum(getattr(c, name).nbytes for name in ("_buf", "_cur") if hasattr(c, name))
    assert 0 < held <= V.BlockCorrelator.buffer_bytes(10, lag)
