"""One blocked pass over equally long columns: means, spreads, cross sums, extremes and difference bounds.

:func:`scan_columns` reads every column once, a block of rows at a time (the block stays in cache), and
returns a :class:`TableScan` that the energy kernels (drift, fluctuations, events, sampling) use instead of
passing over the columns again; :func:`fast_median` is numpy's median by one partition.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from phasewake.core.analyses.correlation import one_blas_thread
from phasewake.core.errors import AnalysisError

ENERGY_UNIT = "kJ/mol"
TIME_COLUMN, ENERGY_COLUMN = "@time", "@energy"  # column names of the time and the judged energy in a scan

SCAN_BLOCK = 1 << 16  # rows per block: a few columns of a block stay in cache while they are summed


@dataclass(frozen=True)
class DiffScan:
    """Frame-to-frame differences d_i = x_(i+1) - x_i of one column, as seen by the pass.

    ``block_min`` / ``block_max`` (n_blocks,) bound the differences of each block of rows (block b covers
    d indices max(b B - 1, 0) .. (b + 1) B - 2), so only blocks that can hold an event are looked at
    again; ``sample`` is d[::stride] (the even subsample the robust medians use).
    """

    block_min: np.ndarray
    block_max: np.ndarray
    sample: np.ndarray
    stride: int


@dataclass(frozen=True)
class TableScan:
    """Moments of equally long float64 columns from one blocked pass (:func:`scan_columns`).

    ``mean``, ``m2`` (centred sums of squares), ``minimum``, ``maximum``: shape (C,), in the columns'
    units (squared for ``m2``); ``cross`` maps the pairs asked for to their centred cross sums
    sum_i (x_i - mean_x)(y_i - mean_y). ``finite`` is False when any value is NaN or infinite: then
    the moments are not usable and the callers take their masked routes.
    """

    n_rows: int
    names: tuple[str, ...]
    mean: np.ndarray
    m2: np.ndarray
    minimum: np.ndarray
    maximum: np.ndarray
    cross: dict[tuple[str, str], float]
    finite: bool
    diffs: dict[str, DiffScan]
    block_rows: int

    def index(self, name: str) -> int:
        return self.names.index(name)

    def std(self, name: str) -> float:
        """Population standard deviation of a column."""
        return math.sqrt(max(float(self.m2[self.index(name)]), 0.0) / self.n_rows)


def scan_columns(columns: dict[str, np.ndarray], *, diffs: tuple[str, ...] = (),
                 cross: tuple[tuple[str, str], ...] = (), no_extremes: tuple[str, ...] = (),
                 robust_sample: int = 1 << 20, block: int = SCAN_BLOCK) -> TableScan:
    """Means, extremes, centred sums of squares and cross sums of columns, and difference bounds, in one pass.

    Per block of rows (in cache) every column is shifted by a reference value (the mean of an even
    subsample, so the shifted sums do not cancel) and its sum and sum of squares taken; the cross sums
    of the pairs in ``cross`` likewise. Centred sums follow as S_xy - n m_x m_y of the shifted means
    m (Chan, Golub and LeVeque 1983: with the shift within a few standard deviations of the mean the
    error is that of the two-pass sums). The differences of the columns in ``diffs`` are made per
    block too. Dot products run with one BLAS thread.

    Parameters
    ----------
    columns : dict name -> ndarray, shape (n,), float64
    diffs : names of columns whose differences are scanned
    cross : pairs of names whose centred cross sums are wanted
    no_extremes : names of columns whose minimum and maximum are not needed (reported as NaN)
    robust_sample : int
        The difference subsample holds at most this many values, every ceil((n - 1) / robust_sample)-th.
    block : int
        Rows per block.
    """
    names = tuple(columns)
    cols = [np.asarray(columns[k], dtype=np.float64) for k in names]
    n = int(cols[0].shape[0]) if cols else 0
    c = len(cols)
    if any(x.shape != (n,) for x in cols):
        raise AnalysisError("the columns of one scan must be 1D and equally long")
    stride_sub = max(1, n // 1024)
    with np.errstate(invalid="ignore", over="ignore"):
        shift = np.array([float(np.mean(x[::stride_sub])) if n else 0.0 for x in cols])
    if not np.all(np.isfinite(shift)):
        shift = np.zeros(c)  # a non-finite value in the subsample: the pass reports it below
    pairs = [(names.index(a), names.index(b)) for a, b in cross]
    extremes = [k not in no_extremes for k in names]
    nd = max(n - 1, 0)
    dstride = int(math.ceil(nd / robust_sample)) if nd > robust_sample else 1
    n_blocks = -(-n // block) if n else 0
    dsc = {k: (np.full(n_blocks, np.inf), np.full(n_blocks, -np.inf), np.empty(-(-nd // dstride) if nd else 0))
           for k in diffs}
    sums = np.zeros(c)
    sq = np.zeros(c)
    xy = np.zeros(len(pairs))
    lo = np.full(c, np.inf)
    hi = np.full(c, -np.inf)
    width = min(block, max(n, 1))
    buf = np.empty((c, width))
    dbuf = np.empty(width)
    # non-finite values only make the sums non-finite (reported as finite=False): no warnings for them
    with one_blas_thread(), np.errstate(invalid="ignore", over="ignore"):
        for b in range(n_blocks):
            a0, a1 = b * block, min(n, (b + 1) * block)
            m = a1 - a0
            for j, col in enumerate(cols):
                raw = col[a0:a1]
                if extremes[j]:
                    lo[j] = min(lo[j], raw.min())
                    hi[j] = max(hi[j], raw.max())
                x = np.subtract(raw, shift[j], out=buf[j, :m])
                sums[j] += x.sum()
                sq[j] += np.vecdot(x, x)
            for q, (ja, jb) in enumerate(pairs):
                xy[q] += np.vecdot(buf[ja, :m], buf[jb, :m])
            for k in diffs:
                _scan_block_diffs(cols[names.index(k)], b, a0, a1, dsc[k], dbuf, dstride)
    ext = np.array(extremes, dtype=bool)
    finite = bool(np.all(np.isfinite(sums)) and np.all(np.isfinite(sq)) and np.all(np.isfinite(lo[ext]))
                  and np.all(np.isfinite(hi[ext])))
    lo[~ext] = np.nan
    hi[~ext] = np.nan
    mu = sums / n if n else sums
    with np.errstate(invalid="ignore", over="ignore"):
        m2 = sq - n * mu * mu
        xc = {cross[q]: float(xy[q] - n * mu[ja] * mu[jb]) for q, (ja, jb) in enumerate(pairs)}
    return TableScan(n_rows=n, names=names, mean=shift + mu, m2=m2, minimum=lo, maximum=hi, cross=xc,
                     finite=finite, diffs={k: DiffScan(v[0], v[1], v[2], dstride) for k, v in dsc.items()},
                     block_rows=block)


def _scan_block_diffs(col: np.ndarray, b: int, a0: int, a1: int,
                      out: tuple[np.ndarray, np.ndarray, np.ndarray], dbuf: np.ndarray, dstride: int) -> None:
    """Differences of block b (rows a0..a1-1, and the one across the border before it) into ``out``: their
    minimum and maximum at index b, every ``dstride``-th difference into the subsample."""
    d0 = max(a0 - 1, 0)
    if a1 - d0 < 2:
        return
    d = np.subtract(col[d0 + 1:a1], col[d0:a1 - 1], out=dbuf[:a1 - d0 - 1])
    bmin, bmax, sub = out
    bmin[b] = d.min()
    bmax[b] = d.max()
    first = -(-d0 // dstride) * dstride
    if first < d0 + d.size:
        got = d[first - d0 :: dstride]
        sub[first // dstride : first // dstride + got.size] = got


def fast_median(x: np.ndarray, *, overwrite: bool = False) -> float:
    """np.median of a finite 1D array by one partition (np.median partitions at two ranks plus a NaN check).

    ``overwrite``: partition ``x`` itself (a float64 array the caller no longer needs) instead of a copy.
    """
    a = np.asarray(x, dtype=np.float64)
    n = a.size
    h = n // 2
    if overwrite and a is x:
        a.partition(h)
        part = a
    else:
        part = np.partition(a, h)
    if n % 2:
        return float(part[h])
    return float((part[:h].max() + part[h]) / 2.0)
