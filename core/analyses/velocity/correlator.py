"""The streaming block correlator: sums over time origins of a(t) . a(t + k) with bounded memory.

For lag windows up to 256 frames the frame-pair products of the band of L lags are BLAS matrix products of
S origins against the S + L - 1 frames they reach (cost ~ 2 (S + L - 1) flops per value and origin,
S ~ L / 3); for longer windows, blocks of B >= L frames are correlated by FFT with the next block
(zero-padded to 2B, so there is no circular wrap-around). Either way only about 2 (L + S) frames of the
used atoms are held between chunks.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.errors import AnalysisError

if TYPE_CHECKING:
    pass

_FFT_BATCH_BYTES = 48 * 2**20



GRAM_MAX_LAG = 256  # up to this many lags the Gram-matrix engine (BLAS) beats the FFT one


def _blas_single_thread() -> Any:
    """A context in which BLAS uses one thread, when threadpoolctl is installed (else no change).

    Both engines issue many small matrix products; on a busy machine multithreaded BLAS spends far
    more time synchronising threads than computing (measured 20-100x slower on a shared 2-core box).
    """
    import contextlib

    global _THREADPOOL_CONTROLLER
    if _THREADPOOL_CONTROLLER is None:
        try:
            from threadpoolctl import ThreadpoolController
        except ImportError:
            return contextlib.nullcontext()
        # made once: listing the loaded libraries costs ~0.5 ms, a limit from the controller ~0.02 ms
        _THREADPOOL_CONTROLLER = ThreadpoolController()
    return _THREADPOOL_CONTROLLER.limit(limits=1, user_api="blas")


_THREADPOOL_CONTROLLER: Any = None


GRAM_THREADS: int | None = None  # threads of the Gram engine; None: the threads setting (core/settings.py)


def _gram_subblock(max_lag: int) -> int:
    """Origins per product in the Gram engine: short enough to waste little outside the band of L lags,
    long enough for GEMM speed. Measured (CPU time, 60,000 float32 columns, OpenBLAS): L = 20: S = 12-24
    best, 8 is 25% slower; L = 50: S = 16-48 within 5%, 8 is 20% slower; L = 200: S = 32-64 best."""
    return int(min(max_lag, max(12, min(48, max_lag // 3))))


def _gram_workers(n_origins: int, sub: int) -> int:
    """Threads for one banded sum: the threads setting (:func:`phasewake.core.settings.threads`) when the
    work is large, else 1."""
    from phasewake.core.settings import threads

    if n_origins < 8 * sub:
        return 1
    return max(1, int(GRAM_THREADS)) if GRAM_THREADS is not None else threads()


class BlockCorrelator:
    """Sum over time origins of a(t) . a(t + k), k = 0..L-1, per atom group, fed chunk by chunk.

    The exact sum over all origins is kept with bounded memory. Two engines:

    * ``"gram"`` (L <= 256 by default): banded frame-pair products. Origins are taken S at a time
      (S ~ L / 3, 12..48); the products of frames t0..t0+S-1 with frames t0..t0+S+L-2 are one matrix
      product G = (W A) A'^T per group (BLAS, in the working precision), and lag k of origin t0 + i is
      G[i, i + k], read as a strided view and summed in float64. Cost ~ 2 (S + L - 1) flops per value
      and lag-window row (the band needs 2 L; blocks of L frames would cost 4 L). Frames are used
      where they arrive: only the last L - 1 of each update are copied, to pair with the next update.
      When a core is idle the origins of a large update are split over two threads (BLAS releases
      the GIL); the sums then differ only by float64 rounding order.
    * ``"fft"``: blocks of B >= L frames (a fast FFT length); the FFT of each block, zero-padded to 2B,
      is computed once and the pair (b, b+1) is F_b + (-1)^j F_{b+1} (a shift by half the FFT length),
      so block b contributes conj(F_b) (F_b + (-1)^j F_{b+1}); products are summed over components and
      atoms (weighted, per group) in the frequency domain, with one inverse FFT at the end.

    Parameters
    ----------
    n_atoms : int
    max_lag : int
        L, the number of lags (0..L-1), in frames.
    weights : ndarray, shape (n_atoms,)
        Per-atom weight (masses for mass weighting, ones otherwise).
    group_of_atom : ndarray of int, shape (n_atoms,)
        Group index of each atom (0..n_groups-1), or -1 for atoms not used.
    n_groups : int
    dtype : numpy dtype
        Working precision (float32 is enough for velocities; positions use float64). Sums over
        blocks are kept in float64.
    engine : {"auto", "gram", "fft"}

    ``update(block)`` takes arrays of shape (n, n_atoms, 3); ``finish()`` returns the sums, shape
    (n_groups, L), and the number of origins per lag, shape (L,).
    """

    def __init__(self, *, n_atoms: int, max_lag: int, weights: np.ndarray, group_of_atom: np.ndarray,
                 n_groups: int, dtype: Any = np.float32, engine: str = "auto") -> None:
        import scipy.fft

        if max_lag < 1:
            raise AnalysisError("the lag window must hold at least one lag")
        if engine not in ("auto", "gram", "fft"):
            raise ValueError(f"engine must be 'auto', 'gram' or 'fft', not {engine!r}")
        self.n_atoms = int(n_atoms)
        self.L = int(max_lag)
        self.engine = engine if engine != "auto" else ("gram" if self.L <= GRAM_MAX_LAG else "fft")
        self.dtype = np.dtype(dtype)
        lab = np.asarray(group_of_atom)
        used = np.flatnonzero(lab >= 0)
        self._all = used.size == lab.size
        self._atoms = used
        w = np.asarray(weights, dtype=np.float64)[used]
        self.n_groups = int(n_groups)
        self._ncol = 3 * used.size
        self._fill = 0
        self.n_frames = 0
        col_group = np.repeat(lab[used], 3)
        col_w = np.repeat(w, 3)
        if self.engine == "gram":
            self.B = self.L
            self.nfft = 0
            self.S = _gram_subblock(self.L)
            # Columns sorted by group (one gather per update) unless one group takes every column.
            whole = self.n_groups == 1 and bool(np.all(col_group == 0))
            if whole and self._all:
                self._perm: np.ndarray | None = None
                order = np.arange(self._ncol)
            else:
                order = np.argsort(col_group, kind="stable")
                self._perm = (3 * used[:, None] + np.arange(3)[None, :]).ravel()[order]
            sorted_group = col_group[order]
            sorted_w = col_w[order]
            self._gslices: list[slice] = []
            self._gw2: list[np.ndarray | float] = []
            for g in range(self.n_groups):
                lo, hi = np.searchsorted(sorted_group, [g, g + 1])
                self._gslices.append(slice(int(lo), int(hi)))
                cw = sorted_w[lo:hi]
                self._gw2.append(float(cw[0]) if cw.size and np.all(cw == cw[0]) else cw.astype(self.dtype))
            # carried frames (fewer than S + L - 1) and room for the S + L - 1 that complete them
            self._buf = np.zeros((2 * (self.L + self.S), self._ncol), dtype=self.dtype)
            self._p = 0
            self._gsum = np.zeros((self.n_groups, self.L))
            return
        self.B = int(scipy.fft.next_fast_len(self.L, real=True))
        self.nfft = 2 * self.B
        self._cdtype = np.result_type(self.dtype, np.complex64)
        onehot = np.zeros((used.size, self.n_groups))
        onehot[np.arange(used.size), lab[used]] = w
        self._onehot3t = np.ascontiguousarray(np.repeat(onehot, 3, axis=0).T.astype(self.dtype))
        self._nfreq = self.B + 1
        self._sign = np.where(np.arange(self._nfreq) % 2 == 0, 1.0, -1.0).astype(self.dtype)
        self._fprev: np.ndarray | None = None
        self._cur = np.zeros((self._ncol, self.B), dtype=self.dtype)  # time last: contiguous FFTs
        self._acc = np.zeros((self.n_groups, self._nfreq), dtype=np.complex128)
        per_col = self.nfft * self.dtype.itemsize * 6
        self._batch = int(max(3, min(self._ncol, (_FFT_BATCH_BYTES // per_col) // 3 * 3)))

    @staticmethod
    def buffer_bytes(n_atoms: int, max_lag: int, dtype: Any = np.float32) -> int:
        """Memory the block buffers need (bytes), the larger of the two engines.

        FFT engine: about 3 L frames (a block and the transform of the previous one); Gram engine:
        2 (L + S) frames (the carried frames and those that complete them).
        """
        lag = int(max_lag)
        frames = max(3 * lag, 2 * (lag + _gram_subblock(lag)))
        return frames * int(n_atoms) * 3 * np.dtype(dtype).itemsize

    def update(self, block: np.ndarray) -> None:
        data = np.asarray(block)
        if self.engine == "gram":
            flat = data.reshape(data.shape[0], -1)
            if self._perm is not None:
                flat = np.take(flat, self._perm, axis=1)
            flat = np.ascontiguousarray(flat, dtype=self.dtype)
            if self._p + flat.shape[0] >= self.L - 1 + self.S:
                with _blas_single_thread():
                    self._gram_update(flat)
            else:  # only carried: no product
                self._gram_update(flat)
            return
        if not self._all:
            data = data[:, self._atoms, :]
        data = data.reshape(data.shape[0], -1)
        if data.shape[0] + self._fill >= self.B:
            with _blas_single_thread():
                self._fill_blocks(data, False)
        else:
            self._fill_blocks(data, False)

    # --- Gram engine: banded products, no copy of the frames beyond the L - 1 carried to the next update

    def _gram_update(self, data: np.ndarray) -> None:
        """Add the sub-blocks of origins that ``data`` (n, ncol; the frames after those carried) completes.

        Sub-blocks of S origins sit on a fixed grid (frames kS..kS+S-1 from the first frame) and are
        added to the sums in grid order, so the result does not depend on how the frames were chunked
        or on the number of threads: every product has the same operands and shape either way.
        """
        L, S, buf = self.L, self.S, self._buf
        n = data.shape[0]
        p = self._p  # carried frames: buf[:p] are the frames from the first unsummed origin on
        self.n_frames += n
        total = p + n
        m = max(0, (total - L + 1) // S)  # complete sub-blocks (all their lags have arrived)
        if m == 0:
            buf[p:total] = data
            self._p = total
            return
        k_buf = min(m, -(-p // S))  # sub-blocks that start among the carried frames
        if k_buf:
            need = min(total, k_buf * S + L - 1)  # frames those sub-blocks read
            buf[p:need] = data[: need - p]
            self._add_subblocks(buf, 0, k_buf)
        if m > k_buf:  # the rest read the update in place (no copy)
            off = k_buf * S - p  # >= 0: row of sub-block k_buf in ``data``
            self._add_subblocks(data[off:], 0, m - k_buf)
        rest = total - m * S  # frames from the next unsummed origin on (< S + L - 1)
        first = m * S  # its position in (carried ++ data)
        if first < p:
            keep = buf[first:p].copy()
            buf[: p - first] = keep
            buf[p - first : rest] = data
        else:
            buf[:rest] = data[first - p :]
        self._p = rest

    def _add_subblocks(self, z: np.ndarray, k0: int, k1: int) -> None:
        """Sums of sub-blocks k0..k1-1 of ``z`` (sub-block k: origins kS..kS+S-1, rows to kS+S+L-2),
        added in order; split over two threads when a core is idle and there are many."""
        if k1 <= k0:
            return
        workers = _gram_workers((k1 - k0) * self.S, self.S)
        if workers <= 1:
            parts = [self._subblock_sums(z, k0, k1)]
        else:
            from concurrent.futures import ThreadPoolExecutor

            per = -(-(k1 - k0) // workers)
            cuts = [(lo, min(k1, lo + per)) for lo in range(k0, k1, per)]
            with ThreadPoolExecutor(max_workers=len(cuts)) as pool:
                parts = list(pool.map(lambda c: self._subblock_sums(z, c[0], c[1]), cuts))
        for part in parts:
            for one in part:  # grid order: the same float64 additions however the work was split
                self._gsum += one

    def _subblock_sums(self, z: np.ndarray, k0: int, k1: int, rows: int | None = None) -> np.ndarray:
        """Per sub-block sums over origins of v(t) . v(t + k), k < L; shape (k1 - k0, n_groups, L).

        G = (W z[t0:t1]) z[t0:t1+L-1]^T, shape (s, s + L - 1); the band G[i, i + k] is a strided view
        (row stride + 1 element), summed over i in float64. ``rows`` limits the origins (last sub-block).
        """
        from numpy.lib.stride_tricks import as_strided

        L, S = self.L, self.S
        out = np.zeros((k1 - k0, self.n_groups, L))
        for j, k in enumerate(range(k0, k1)):
            t0 = k * S
            t1 = t0 + S if rows is None else min(t0 + S, rows)
            for g in range(self.n_groups):
                cols = self._gslices[g]
                if cols.stop <= cols.start:
                    continue
                gw = self._gw2[g]
                a = z[t0:t1, cols]
                lhs = a if isinstance(gw, float) and gw == 1.0 else a * gw  # copies s rows only when weighted
                gm = lhs @ z[t0 : t0 + S + L - 1, cols].T  # (s, S + L - 1), C-ordered
                st0, st1 = gm.strides
                band = as_strided(gm, shape=(t1 - t0, L), strides=(st0 + st1, st1), writeable=False)
                out[j, g] = band.sum(axis=0, dtype=np.float64)
        return out

    def _fill_blocks(self, data: np.ndarray, gram: bool) -> None:
        """FFT engine: collect frames into blocks of B (time last) and transform each full block."""
        i = 0
        n = data.shape[0]
        while i < n:
            take = min(self.B - self._fill, n - i)
            self._cur[:, self._fill : self._fill + take] = data[i : i + take].T
            self._fill += take
            i += take
            self.n_frames += take
            if self._fill == self.B:
                self._push(self._cur)
                self._fill = 0

    def _push(self, block: np.ndarray | None) -> None:
        """FFT engine: transform ``block`` (None: no more data) and add the previous block's origins."""
        import scipy.fft

        fnew = None
        if block is not None:
            fnew = np.empty((self._ncol, self._nfreq), dtype=self._cdtype)
            for b0 in range(0, self._ncol, self._batch):
                b1 = min(self._ncol, b0 + self._batch)
                fnew[b0:b1] = scipy.fft.rfft(block[b0:b1], n=self.nfft, axis=-1, workers=2)
        if self._fprev is not None:
            for b0 in range(0, self._ncol, self._batch):
                b1 = min(self._ncol, b0 + self._batch)
                fp = self._fprev[b0:b1]
                fw = fp if fnew is None else fp + self._sign * fnew[b0:b1]
                self._acc += self._onehot3t[:, b0:b1] @ (np.conj(fp) * fw)
        self._fprev = fnew

    def finish(self) -> tuple[np.ndarray, np.ndarray]:
        import scipy.fft

        if self.engine == "gram":
            if self._p:  # the last origins, on the same grid: lags past the end see zeros
                p = self._p
                self._buf[p:] = 0
                with _blas_single_thread():
                    for one in self._subblock_sums(self._buf, 0, -(-p // self.S), rows=p):
                        self._gsum += one
                self._p = 0
            sums = self._gsum.copy()
        else:
            if self._fill:
                tail = self._cur.copy()
                tail[:, self._fill :] = 0
                with _blas_single_thread():
                    self._push(tail)
                self._fill = 0
            with _blas_single_thread():
                self._push(None)
            sums = np.ascontiguousarray(scipy.fft.irfft(self._acc, n=self.nfft, axis=-1)[:, : self.L])
        counts = np.maximum(self.n_frames - np.arange(self.L), 0).astype(float)
        return sums, counts

