"""Velocity autocorrelation, diffusion (Green-Kubo and mean-squared displacement), vibrational spectrum.

Everything streams over frame chunks with bounded memory, and the exact sum over all time origins is
recovered (:class:`BlockCorrelator`). For lag windows up to 256 frames the frame-pair products of the
band of L lags are BLAS matrix products of S origins against the S + L - 1 frames they reach (cost
~ 2 (S + L - 1) flops per value and origin, S ~ L / 3); for longer windows, blocks of B >= L frames
are correlated by FFT with the next block (zero-padded to 2B, so there is no circular wrap-around).
Either way only about 2 (L + S) frames of the used atoms are held between chunks.
The VACF is compute-bound: 20,000 atoms, 2,200 frames and 50 lags are ~17 GFLOP of float32 products,
~0.45 s of one core of the shared test machine, against ~0.1 s to read the velocities from the page
cache.
The spectrum is then the Fourier transform of the averaged, windowed VACF (Wiener-Khinchin).

Methods and papers:

* Green-Kubo: D = (1/d) int_0^T <v(0).v(t)> dt (M. S. Green, J. Chem. Phys. 22, 398 (1954);
  R. Kubo, J. Phys. Soc. Jpn. 12, 570 (1957)); the upper limit T is chosen where the VACF has
  decayed into its own noise and stays there, and is reported.
* Einstein: MSD(t) -> 2 d D t; MSD by the same block correlation of unwrapped positions
  (MSD(k) = <r(t+k)^2> + <r(t)^2> - 2 <r(t).r(t+k)>, the decomposition of V. Calandrini,
  E. Pellegrini, P. Calligari, K. Hinsen, G. R. Kneller, Collection SFN 12, 201 (2011)).
* Finite-size correction: D0 = D_PBC + xi kT / (6 pi eta L), xi = 2.837297 (I.-C. Yeh and
  G. Hummer, J. Phys. Chem. B 108, 15873 (2004)).
* Vibrational density of states from the mass-weighted VACF, normalised to the number of degrees
  of freedom (J. M. Dickey and A. Paskin, Phys. Rev. 188, 1407 (1969); P. H. Berens, D. H. J.
  Mackay, G. M. White, K. R. Wilson, J. Chem. Phys. 79, 2375 (1983)); a Hann lag window against
  leakage (common practice).

Units: velocities nm/ps, masses amu, time ps; amu nm^2/ps^2 = kJ/mol; D in nm^2/ps
(1 nm^2/ps = 1e-6 m^2/s = 1e-2 cm^2/s); wavenumbers cm^-1 (exact c), frequencies THz.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.errors import AnalysisError, MissingDataError, TooShortError
from phasewake.core.progress import Progress, Work

if TYPE_CHECKING:
    from phasewake.core.model.run import FrameChunk, Run

from phasewake.core.analyses.verdicts import Explanation, Threshold, register  # noqa: E402

register(
    Threshold("transport.vacf_resolution", caution=3.0, problem=2.0, unit="frames per decay",
              source="common practice: a trapezoid integral needs points across the decay of the integrand. "
                     "For an exponential VACF with x = spacing / decay time it overestimates by "
                     "x (1/2 + 1/(e^x - 1)) - 1: 2% at 2 frames per decay, 8% at 1, 66% at 1/3 (analytic); "
                     "an oscillating VACF (cage rattling, librations) is far worse once its swing is not sampled",
              higher_is_worse=False,
              description="frames within which the normalised VACF falls to 1/e"),
    Explanation(
        title="Green-Kubo integral resolved",
        what="Whether the velocities are saved often enough for the Green-Kubo integral of their "
             "autocorrelation: the VACF must be sampled across its decay.",
        method="The lag (in frames) where the normalised VACF first falls to 1/e, interpolated linearly.",
        threshold="Below 2 frames the Green-Kubo value is unreliable and not used, below 3 a caution (common "
                  "practice).",
        advice="Use the mean-squared displacement (Einstein) of the same run, or save velocities every few fs "
               "in a short extra run for Green-Kubo.",
    ),
)
register(
    Threshold("transport.gk_msd_agreement", caution=3.0, problem=10.0, unit="combined standard errors",
              source="common practice (a difference beyond 3 combined standard errors is more than noise; "
                     "beyond 10 one of the two values is wrong)",
              description="difference of the Green-Kubo and Einstein (MSD) diffusion coefficients"),
    Explanation(
        title="Green-Kubo against mean-squared displacement",
        what="Whether the two routes to the diffusion coefficient of the same atoms agree.",
        method="D from the integral of the VACF (Green 1954, Kubo 1957) and from the slope of the MSD "
               "(Einstein), each with a standard error from contiguous blocks of time origins (block "
               "averaging; the VACF integral's error also includes half the spread of the running integral "
               "over its plateau).",
        threshold="A difference beyond 3 combined standard errors is a caution, beyond 10 a problem (common "
                  "practice).",
        advice="Disagreement usually means coarse frames (Green-Kubo biased), a short run (MSD not yet linear), "
               "or unwrapping problems (MSD). Check the VACF resolution and the MSD fit range.",
    ),
)

SPEED_OF_LIGHT_CM_PER_S = 2.99792458e10  # exact (SI 2019)
PS_PER_S = 1e12
YEH_HUMMER_XI = 2.837297  # Yeh & Hummer (2004), cubic box
NM2_PER_PS_TO_CM2_PER_S = 1e-2

DEFAULT_BUFFER_BYTES = 256 * 2**20
DEFAULT_SPECTRUM_LAG_PS = 2.0  # lag window of the VDOS unless asked: 16.7 cm^-1 resolution, smooth
_FFT_BATCH_BYTES = 48 * 2**20


def wavenumber_cm1_from_thz(f_thz: float) -> float:
    """Wavenumber (cm^-1) of a frequency in THz: nu~ = f / c."""
    return float(f_thz) * 1e12 / SPEED_OF_LIGHT_CM_PER_S


def nyquist_cm1(dt_ps: float) -> float:
    """Highest wavenumber a sampling interval can represent: 1 / (2 c dt)."""
    return 1.0 / (2.0 * SPEED_OF_LIGHT_CM_PER_S * dt_ps / PS_PER_S)


# ---------------------------------------------------------------------------------------------------
# The streaming block correlator
# ---------------------------------------------------------------------------------------------------


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


# ---------------------------------------------------------------------------------------------------
# Groups
# ---------------------------------------------------------------------------------------------------


def _group_labels(n_atoms: int, groups: Mapping[str, Sequence[int] | np.ndarray] | None
                  ) -> tuple[np.ndarray, tuple[str, ...], np.ndarray]:
    """group_of_atom (n_atoms,), names, atom counts. Groups must not overlap."""
    if not groups:
        return np.zeros(n_atoms, dtype=np.int64), ("all",), np.array([n_atoms])
    lab = np.full(n_atoms, -1, dtype=np.int64)
    names = []
    sizes = []
    for gi, (name, idx) in enumerate(groups.items()):
        ix = np.asarray(idx, dtype=np.int64)
        if ix.size == 0:
            raise AnalysisError(f"the atom group {name!r} is empty")
        if ix.min() < 0 or ix.max() >= n_atoms:
            raise AnalysisError(f"the atom group {name!r} has indices outside 0..{n_atoms - 1}")
        if np.any(lab[ix] >= 0):
            raise AnalysisError(f"the atom group {name!r} overlaps an earlier group")
        lab[ix] = gi
        names.append(str(name))
        sizes.append(ix.size)
    return lab, tuple(names), np.array(sizes)


# ---------------------------------------------------------------------------------------------------
# VACF
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class VACFResult:
    """Velocity autocorrelation per atom group, averaged over atoms and time origins.

    vacf : (n_groups, L) in ``unit``: <v_i(0).v_i(t)> (nm^2/ps^2), or <m_i v_i(0).v_i(t)>
        (amu nm^2/ps^2 = kJ/mol) when mass weighted; one atom's average.
    vacf_sum : (n_groups, L) the sum over the group's atoms of the same (for the VDOS).
    """

    lag_ps: np.ndarray  # (L,)
    vacf: np.ndarray  # (n_groups, L)
    vacf_sum: np.ndarray  # (n_groups, L)
    unit: str
    groups: tuple[str, ...]
    n_atoms_per_group: np.ndarray  # (n_groups,)
    mass_weighted: bool
    n_frames: int
    dt_ps: float
    velocities_estimated: bool = False
    settings: dict[str, Any] = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    @property
    def normalised(self) -> np.ndarray:
        """vacf / vacf[:, :1] (dimensionless)."""
        return self.vacf / self.vacf[:, :1]


def _default_lag(n_frames: int, n_atoms: int, max_buffer_bytes: int, dtype: Any = np.float32
                 ) -> tuple[int, list[str]]:
    notes = []
    lag = max(1, n_frames // 2)
    per_lag = 3 * max(1, n_atoms) * 3 * np.dtype(dtype).itemsize  # ~3 frames per lag (both engines, L >= 36)
    cap = max(2, int(max_buffer_bytes // per_lag))
    if lag > cap:
        notes.append(f"the lag window was limited to {cap} frames to keep memory under "
                     f"{max_buffer_bytes / 2**20:.0f} MiB; choose fewer atoms or a larger buffer for a finer "
                     "spectral resolution")
        lag = cap
    return lag, notes


def _vacf_finish(corr: BlockCorrelator, *, sizes: np.ndarray, names: tuple[str, ...], dt_ps: float,
                 mass_weighted: bool, estimated: bool, settings: dict[str, Any], notes: list[str]) -> VACFResult:
    sums, counts = corr.finish()
    return vacf_result(sums, corr.n_frames, sizes=sizes, names=names, dt_ps=dt_ps, mass_weighted=mass_weighted,
                       estimated=estimated, settings=settings, notes=notes)


def vacf_result(sums: np.ndarray, n_frames: int, *, sizes: np.ndarray, names: tuple[str, ...], dt_ps: float,
                mass_weighted: bool, estimated: bool, settings: dict[str, Any], notes: list[str]) -> VACFResult:
    """The VACF from the sums over time origins (n_groups, L) of ``n_frames`` frames."""
    if n_frames < 2:
        raise TooShortError("a velocity autocorrelation", have=n_frames, need=2)
    counts = np.maximum(n_frames - np.arange(sums.shape[1]), 0).astype(float)
    ok = counts > 0
    sums = sums[:, ok]
    counts = counts[ok]
    vsum = sums / counts
    if estimated:
        notes.append("velocities were estimated from positions by finite differences: the VACF and spectrum "
                     "are damped at high frequencies")
    return VACFResult(
        lag_ps=np.arange(vsum.shape[1]) * dt_ps,
        vacf=vsum / sizes[:, None],
        vacf_sum=vsum,
        unit="kJ/mol" if mass_weighted else "nm^2/ps^2",
        groups=names,
        n_atoms_per_group=sizes,
        mass_weighted=mass_weighted,
        n_frames=n_frames,
        dt_ps=float(dt_ps),
        velocities_estimated=estimated,
        settings=settings,
        notes=tuple(notes),
    )


def vacf_from_velocities(
    velocities_nm_per_ps: np.ndarray,
    dt_ps: float,
    *,
    masses_amu: np.ndarray | None = None,
    mass_weighted: bool = False,
    groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
    max_lag: int | None = None,
) -> VACFResult:
    """VACF of an in-memory velocity array.

    Parameters
    ----------
    velocities_nm_per_ps : ndarray, shape (F, N, 3), nm/ps
    dt_ps : float
        Frame spacing (ps).
    masses_amu : ndarray, shape (N,), amu
        Needed when ``mass_weighted``.
    mass_weighted : bool
        Weight each atom by its mass (then the VACF is in kJ/mol, C(0) = 3 kT per atom).
    groups : mapping name -> atom indices, optional
        Non-overlapping groups; default one group "all".
    max_lag : int, optional
        Number of lags L (frames); default F // 2.

    Returns
    -------
    VACFResult
    """
    v = np.asarray(velocities_nm_per_ps)
    if v.ndim != 3 or v.shape[2] != 3:
        raise AnalysisError("velocities must have shape (n_frames, n_atoms, 3)")
    f, n = v.shape[:2]
    if f < 4:
        raise TooShortError("a velocity autocorrelation", have=int(f), need=4)
    if mass_weighted and masses_amu is None:
        raise AnalysisError("mass weighting needs the masses")
    lab, names, sizes = _group_labels(n, groups)
    lag = max(1, f // 2) if max_lag is None else int(max(1, min(max_lag, f)))
    w = np.asarray(masses_amu, float) if mass_weighted and masses_amu is not None else np.ones(n)
    corr = BlockCorrelator(n_atoms=n, max_lag=lag, weights=w, group_of_atom=lab, n_groups=len(names))
    for i in range(0, f, 4096):
        corr.update(v[i : i + 4096])
    return _vacf_finish(corr, sizes=sizes, names=names, dt_ps=dt_ps, mass_weighted=mass_weighted,
                        estimated=False, settings={"max_lag": lag, "mass_weighted": mass_weighted}, notes=[])


def _frame_spacing(run: Run, start: int, stop: int | None, stride: int) -> float:
    t = np.asarray(run.time_ps)[start:stop:stride]
    if t.size < 2:
        raise TooShortError("a time-correlation analysis", have=int(t.size), need=2)
    d = np.diff(t)
    dt = float(np.median(d))
    if not dt > 0 or np.max(np.abs(d - dt)) > 1e-3 * dt + 1e-9:
        raise AnalysisError("frames are not evenly spaced in time: correlations need a uniform time axis",
                            path=run.paths[0] if run.paths else None)
    return dt


class VACFConsumer:
    """Velocity autocorrelation as a frame consumer (:mod:`phasewake.core.model.framepass`): the sums over
    time origins of :class:`BlockCorrelator`, per group.

    Parameters are those of :func:`vacf`; ``start``, ``stop``, ``stride`` are the frames of the whole
    analysis (they set the time step and the default lag window), and a pass may feed it those frames or,
    for a later :meth:`merge`, a part of them. ``finish()`` returns the :class:`VACFResult`.

    ``merge(later)`` (later saw the frames right after these): the sums of both plus the origin pairs
    that straddle the boundary, from the last L - 1 frames of this consumer and the first L - 1 of the
    later one (each consumer keeps those), in float64; counts are exact, sums equal the serial pass to
    float rounding.
    """

    needs_positions = False
    needs_velocities = True

    def __init__(self, run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
                 mass_weighted: bool = False, max_lag_ps: float | None = None, start: int = 0,
                 stop: int | None = None, stride: int = 1, max_buffer_bytes: int | None = None) -> None:
        self.path = run.paths[0] if run.paths else None
        if run.frames is None or not run.frames.has_velocities:
            raise MissingDataError("the run holds no velocities (and none can be estimated)", path=self.path)
        buf = DEFAULT_BUFFER_BYTES if max_buffer_bytes is None else int(max_buffer_bytes)
        self.start, self.stop, self.stride = int(start), stop, int(stride)
        self.dt = _frame_spacing(run, self.start, stop, self.stride)
        self.window = (self.start, run.frames.n_frames if stop is None else min(stop, run.frames.n_frames))
        n_sel = len(range(*self.window, self.stride))
        self.lab, self.names, self.sizes = _group_labels(run.n_atoms, groups)
        used = np.flatnonzero(self.lab >= 0)
        self.notes: list[str] = []
        if max_lag_ps is None:
            self.lag, self.notes = _default_lag(n_sel, used.size, buf)
        else:
            self.lag = int(max(1, min(round(max_lag_ps / self.dt), n_sel)))
            need = BlockCorrelator.buffer_bytes(used.size, self.lag)
            if need > 4 * buf:
                from phasewake.core.errors import ResourceError

                raise ResourceError(f"a lag window of {max_lag_ps} ps over {used.size} atoms needs "
                                    f"{need / 2**30:.1f} GiB; choose fewer atoms or a shorter window")
        self.mass_weighted = bool(mass_weighted)
        self.group_sizes = {k: len(v) for k, v in (groups or {}).items()}
        self.masses = np.asarray(run.masses_amu, dtype=float)
        self.estimated = bool(getattr(run.frames, "velocities_estimated", False))
        self.atoms: np.ndarray | None = None if used.size == run.n_atoms else used.astype(np.int64)
        self._corr: BlockCorrelator | None = None
        self._sums: np.ndarray | None = None  # after a merge: the sums over origins so far
        self._n = 0
        self._range = self.window
        self._sel = np.zeros(0, dtype=np.int64)
        self._head = np.zeros((0, 0), dtype=np.float32)  # first L - 1 frames fed (frames, 3 x used atoms)
        self._tail: list[np.ndarray] = []  # blocks holding at least the last L - 1 frames fed

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        if not (self.window[0] <= start and stop <= self.window[1]):
            raise AnalysisError(f"the VACF was set up for frames {self.window[0]}:{self.window[1]}, the pass "
                                f"reads {start}:{stop}")
        self._range = (int(start), int(stop))
        cols = np.arange(self.lab.size) if columns is None else columns
        w = self.masses[cols] if self.mass_weighted else np.ones(cols.size)
        self._corr = BlockCorrelator(n_atoms=cols.size, max_lag=self.lag, weights=w, group_of_atom=self.lab[cols],
                                     n_groups=len(self.names))
        self._sel = np.flatnonzero(self.lab[cols] >= 0)
        self._head = np.zeros((0, 3 * self._sel.size), dtype=np.float32)

    def update(self, chunk: FrameChunk) -> None:
        v = chunk.velocities_nm_per_ps
        if v is None:
            raise MissingDataError("the frames came without velocities", path=self.path)
        if self._corr is None:
            raise AnalysisError("the VACF consumer was fed before prepare (or after a merge)")
        self._corr.update(v)
        keep = self.lag - 1
        if keep <= 0:
            return
        if self._head.shape[0] < keep:
            more = self._flat(v[: keep - self._head.shape[0]])
            self._head = np.concatenate([self._head, more]) if self._head.size else more
        self._tail.append(self._flat(v[-keep:]))
        while sum(t.shape[0] for t in self._tail[1:]) >= keep:
            self._tail.pop(0)

    def _flat(self, v: np.ndarray) -> np.ndarray:
        """Frames (m, atoms read, 3) as a copy (m, 3 x used atoms), float32."""
        sel = v if self._sel.size == v.shape[1] else v[:, self._sel]
        return np.array(sel, dtype=np.float32).reshape(sel.shape[0], -1)

    def _settle(self) -> None:
        """Turn the correlator's state into sums over origins (no more updates after this)."""
        if self._corr is not None:
            sums, _ = self._corr.finish()
            self._n += self._corr.n_frames
            self._sums = sums if self._sums is None else self._sums + sums
            self._corr = None
        if self._sums is None:
            self._sums = np.zeros((len(self.names), self.lag))

    def _last(self) -> np.ndarray:
        keep = self.lag - 1
        if not self._tail:
            return np.zeros((0, self._head.shape[1]), dtype=np.float32)
        return np.concatenate(self._tail)[-keep:]

    def merge(self, later: VACFConsumer) -> None:
        from phasewake.core.model.framepass import check_next

        check_next(self._range, later._range, "velocity autocorrelation")
        if (later.lag, later.names, later.mass_weighted) != (self.lag, self.names, self.mass_weighted):
            raise AnalysisError("velocity autocorrelation: only consumers of the same settings can be merged")
        self._settle()
        later._settle()
        assert self._sums is not None and later._sums is not None
        used = np.flatnonzero(self.lab >= 0)  # the columns of head and tail, in run order
        w = self.masses[used] if self.mass_weighted else np.ones(used.size)
        cross = straddling_sums(self._last(), later._head, self.lab[used], w, len(self.names), self.lag)
        self._sums = self._sums + later._sums + cross
        self._n += later._n
        keep = self.lag - 1
        if self._head.shape[0] < keep:
            self._head = np.concatenate([self._head, later._head])[:keep]
        self._tail = [self._last(), later._last()] if keep > 0 else []
        self._range = (self._range[0], later._range[1])

    def finish(self) -> VACFResult:
        self._settle()
        assert self._sums is not None
        settings = {"groups": self.group_sizes, "mass_weighted": self.mass_weighted, "max_lag": self.lag,
                    "start": self.start, "stop": self.stop, "stride": self.stride}
        return vacf_result(self._sums, self._n, sizes=self.sizes, names=self.names, dt_ps=self.dt,
                           mass_weighted=self.mass_weighted, estimated=self.estimated, settings=settings,
                           notes=list(self.notes))


def straddling_sums(before: np.ndarray, after: np.ndarray, group_of_atom: np.ndarray, weights: np.ndarray,
                    n_groups: int, max_lag: int) -> np.ndarray:
    """Sums of w_i v_i(t) . v_i(t + k) over origins t in ``before`` with t + k in ``after``, k < L.

    ``before`` (T, 3 n) holds the last frames before a boundary, ``after`` (H, 3 n) the first after it;
    returns (n_groups, L) in float64 (lag k of before's row i and after's row j is (T - i) + j).
    """
    out = np.zeros((n_groups, max_lag))
    t, h = before.shape[0], after.shape[0]
    if t == 0 or h == 0:
        return out
    lag = (t - np.arange(t))[:, None] + np.arange(h)[None, :]
    inside = lag < max_lag
    col_group = np.repeat(group_of_atom, 3)
    col_w = np.repeat(np.asarray(weights, dtype=np.float64), 3)
    a = np.asarray(before, dtype=np.float64)
    b = np.asarray(after, dtype=np.float64)
    for g in range(n_groups):
        cols = col_group == g
        gram = (a[:, cols] * col_w[cols]) @ b[:, cols].T
        out[g] = np.bincount(lag[inside], weights=gram[inside], minlength=max_lag)[:max_lag]
    return out


def vacf(
    run: Run,
    *,
    groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
    mass_weighted: bool = False,
    max_lag_ps: float | None = None,
    start: int = 0,
    stop: int | None = None,
    stride: int = 1,
    chunk_frames: int = 256,
    max_buffer_bytes: int = DEFAULT_BUFFER_BYTES,
) -> Work[VACFResult]:
    """Streaming VACF of a run (generator: yields Progress, returns VACFResult): the frame pass with one
    :class:`VACFConsumer`.

    Parameters
    ----------
    run : Run
        Must have velocities (stored or estimated).
    groups : mapping name -> atom indices, optional
        Default: one group of all atoms.
    mass_weighted : bool
    max_lag_ps : float, optional
        Lag window (ps); default half the analysed time, capped so the two blocks fit
        ``max_buffer_bytes``.
    start, stop, stride : int
        Frames analysed.
    chunk_frames : int
        Frames read at a time.
    max_buffer_bytes : int
        Memory allowed for the two blocks of frames.
    """
    from phasewake.core.model.framepass import run_one

    consumer = VACFConsumer(run, groups=groups, mass_weighted=mass_weighted, max_lag_ps=max_lag_ps, start=start,
                            stop=stop, stride=stride, max_buffer_bytes=max_buffer_bytes)
    return (yield from run_one(run, consumer, label="velocity autocorrelation", start=start, stop=stop,
                               stride=stride, chunk_frames=chunk_frames))


# ---------------------------------------------------------------------------------------------------
# Green-Kubo
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class GreenKuboResult:
    """D = (1/d) int_0^limit VACF dt for one group."""

    group: str
    diffusion_nm2_per_ps: float
    diffusion_cm2_per_s: float
    limit_ps: float
    limit_rule: str  # "user" or how it was chosen
    noise_nm2_per_ps2: float  # noise level of the VACF used by the rule
    running_integral_nm2_per_ps: np.ndarray  # (L,) (1/d) cumulative integral
    lag_ps: np.ndarray  # (L,)
    dimensions: int
    settings: dict[str, Any] = field(default_factory=dict)
    decay_frames: float = float("nan")  # lag (frames) where the normalised VACF first falls to 1/e
    reliable: bool = True  # False: the VACF decays within too few frames (transport.vacf_resolution)
    plateau_spread_nm2_per_ps: float = float("nan")  # half the range of the running integral from the limit to 2x it
    block_values_nm2_per_ps: np.ndarray = field(default_factory=lambda: np.zeros(0))  # D of contiguous time blocks
    block_error_nm2_per_ps: float | None = None  # standard error of the mean over blocks

    @property
    def error_nm2_per_ps(self) -> float | None:
        """Standard error: block error and plateau spread combined in quadrature (None without blocks)."""
        if self.block_error_nm2_per_ps is None:
            return None
        spread = self.plateau_spread_nm2_per_ps if math.isfinite(self.plateau_spread_nm2_per_ps) else 0.0
        return float(math.hypot(self.block_error_nm2_per_ps, spread))


def decay_frames(vacf_row: np.ndarray, level: float = math.exp(-1.0)) -> float:
    """Lag in frames where ``vacf_row / vacf_row[0]`` first falls to ``level`` (linear interpolation);
    the window length when it never does."""
    c = np.asarray(vacf_row, dtype=float)
    if c.size < 2 or not c[0] > 0:
        return float("nan")
    r = c / c[0]
    below = np.flatnonzero(r <= level)
    if below.size == 0:
        return float(c.size - 1)
    k = int(below[0])
    return float(k - 1 + (r[k - 1] - level) / (r[k - 1] - r[k]))


def green_kubo(result: VACFResult, *, group: int | str = 0, limit_ps: float | None = None,
               dimensions: int = 3, noise_sigmas: float = 3.0, hold_fraction: float = 0.1) -> GreenKuboResult:
    """Diffusion coefficient from the (not mass-weighted) VACF by Green-Kubo.

    The integration limit, unless given: the first lag after which |VACF| stays within
    ``noise_sigmas`` times the noise level for ``hold_fraction`` of the lag window; the noise level is
    the standard deviation of the VACF over the last quarter of the window (common practice: the tail
    is assumed decorrelated). Trapezoidal integration.

    Returns
    -------
    GreenKuboResult
    """
    if result.mass_weighted:
        raise AnalysisError("Green-Kubo diffusion needs the VACF without mass weighting")
    gi = result.groups.index(group) if isinstance(group, str) else int(group)
    c = result.vacf[gi]
    t = result.lag_ps
    if c.size < 8:
        raise TooShortError("a Green-Kubo integral", have=int(c.size), need=8)
    dt = result.dt_ps
    running = np.concatenate([[0.0], np.cumsum(0.5 * (c[1:] + c[:-1]) * dt)]) / dimensions
    tail = c[-max(4, c.size // 4):]
    noise = float(np.std(tail))
    if limit_ps is not None:
        k = int(min(c.size - 1, max(1, round(limit_ps / dt))))
        rule = "user"
    else:
        inside = np.abs(c) <= noise_sigmas * noise
        hold = max(1, int(hold_fraction * c.size))
        # run_len[k] = number of consecutive "inside" lags starting at k (reverse cumulative count,
        # reset at every lag outside the band)
        idx = np.arange(c.size)
        last_out = np.where(~inside, idx, c.size)  # for each k: the first outside lag at or after k
        first_out_after = np.minimum.accumulate(last_out[::-1])[::-1]
        run_len = first_out_after - idx
        ok = np.flatnonzero(run_len >= np.minimum(hold, c.size - idx))
        ok = ok[ok > 0]
        k = int(ok[0]) if ok.size else c.size - 1
        rule = (f"first lag where |VACF| stays within {noise_sigmas:g} x noise for {hold} lags"
                if ok.size else "end of the lag window (the VACF did not decay into its noise)")
    d = float(running[k])
    plateau = running[k:min(c.size, 2 * k + 1)]
    dec = decay_frames(c)
    return GreenKuboResult(
        group=result.groups[gi], diffusion_nm2_per_ps=d, diffusion_cm2_per_s=d * NM2_PER_PS_TO_CM2_PER_S,
        limit_ps=float(t[k]), limit_rule=rule, noise_nm2_per_ps2=noise, running_integral_nm2_per_ps=running,
        lag_ps=t, dimensions=dimensions,
        settings={"limit_ps": limit_ps, "noise_sigmas": noise_sigmas, "hold_fraction": hold_fraction},
        decay_frames=dec,
        reliable=not (dec < _threshold("transport.vacf_resolution").problem),
        plateau_spread_nm2_per_ps=float(0.5 * (plateau.max() - plateau.min())) if plateau.size > 1 else float("nan"),
    )


def _threshold(kind: str) -> Threshold:
    from phasewake.core.analyses.verdicts import THRESHOLDS

    return THRESHOLDS[kind]


def yeh_hummer_correction_nm2_per_ps(*, temperature_K: float, viscosity_mPa_s: float, box_edge_nm: float) -> float:
    """Yeh-Hummer finite-size correction xi kT / (6 pi eta L) (nm^2/ps), cubic box.

    Yeh and Hummer, J. Phys. Chem. B 108, 15873 (2004); xi = 2.837297. Use the viscosity of the
    simulated model, not of experiment.
    """
    if not (temperature_K > 0 and viscosity_mPa_s > 0 and box_edge_nm > 0):
        raise AnalysisError("the Yeh-Hummer correction needs positive temperature, viscosity and box edge")
    kt_j = 1.380649e-23 * temperature_K
    d_m2_s = YEH_HUMMER_XI * kt_j / (6.0 * math.pi * viscosity_mPa_s * 1e-3 * box_edge_nm * 1e-9)
    return d_m2_s * 1e6  # m^2/s -> nm^2/ps


@dataclass(frozen=True)
class TransportResult:
    """Diffusion of each group by Green-Kubo and by the MSD, with block errors and their comparison."""

    vacf: VACFResult
    green_kubo: tuple[GreenKuboResult, ...]
    msd: MSDResult | None
    msd_block_error_nm2_per_ps: tuple[float | None, ...]  # per group
    n_blocks: int
    verdicts: tuple[Any, ...]
    notes: tuple[str, ...] = ()


def transport(run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
              limit_ps: float | None = None, max_lag_ps: float | None = None,
              fit_range_ps: tuple[float, float] | None = None, start: int = 0, stop: int | None = None,
              n_blocks: int = 5, with_msd: bool = True, chunk_frames: int = 256,
              vacf_result: VACFResult | None = None) -> Work[TransportResult]:
    """Green-Kubo and Einstein diffusion with error bars and their comparison (generator).

    The whole run gives each value; ``n_blocks`` contiguous blocks of time origins give its standard
    error (block averaging: the standard deviation of the block values over sqrt(blocks)); the Green-Kubo
    error also holds half the spread of the running integral from the limit to twice it. The Green-Kubo
    value is marked unreliable (and the comparison says so) when the VACF decays within fewer frames than
    ``transport.vacf_resolution`` allows: with velocities 100 fs apart in water the first trapezoid alone
    overestimates D several times. Blocks shorter than 4 limits (or 16 frames) are not used.
    """
    import dataclasses

    from phasewake.core.analyses.verdicts import judge

    if vacf_result is not None and not vacf_result.mass_weighted:
        res = vacf_result  # the same run, groups and frames, computed already (not re-read)
    else:
        res = yield from vacf(run, groups=groups, max_lag_ps=max_lag_ps, start=start, stop=stop,
                              chunk_frames=chunk_frames)
    gks = [green_kubo(res, group=i, limit_ps=limit_ps) for i in range(len(res.groups))]
    msd_res = None
    if with_msd and run.frames is not None:
        msd_res = yield from msd(run, groups=groups, max_lag_ps=max_lag_ps, fit_range_ps=fit_range_ps,
                                 start=start, stop=stop, chunk_frames=chunk_frames)
    n_total = len(range(start, run.n_frames if stop is None else min(stop, run.n_frames)))
    k_max = max(int(round(g.limit_ps / res.dt_ps)) for g in gks)
    b = int(n_blocks)
    while b >= 3 and n_total // b < max(16, 4 * k_max):
        b -= 1
    notes: list[str] = []
    msd_err: list[float | None] = [None] * len(res.groups)
    if b >= 3:
        size = n_total // b
        gk_blocks = np.zeros((len(res.groups), b))
        msd_blocks = np.zeros((len(res.groups), b))
        for j in range(b):
            s0 = start + j * size
            rb = yield from vacf(run, groups=groups, max_lag_ps=max(k_max + 1, 8) * res.dt_ps, start=s0, stop=s0 + size,
                                 chunk_frames=chunk_frames)
            for i, g in enumerate(gks):
                gk_blocks[i, j] = green_kubo(rb, group=i, limit_ps=g.limit_ps).diffusion_nm2_per_ps
            if msd_res is not None:
                lo, hi = msd_res.fit_range_ps
                half = (size // 2) * res.dt_ps
                same = hi <= half - res.dt_ps  # the whole run's fit range fits in the block: use it
                mb = yield from msd(run, groups=groups, max_lag_ps=hi + res.dt_ps if same else half,
                                    fit_range_ps=(lo, hi) if same else None, start=s0, stop=s0 + size,
                                    chunk_frames=chunk_frames)
                msd_blocks[:, j] = mb.diffusion_nm2_per_ps
        gks = [dataclasses.replace(g, block_values_nm2_per_ps=gk_blocks[i],
                                   block_error_nm2_per_ps=float(np.std(gk_blocks[i], ddof=1) / math.sqrt(b)))
               for i, g in enumerate(gks)]
        if msd_res is not None:
            msd_err = [float(np.std(msd_blocks[i], ddof=1) / math.sqrt(b)) for i in range(len(res.groups))]
    else:
        notes.append(f"no block error bars: {n_total} frames make fewer than 3 blocks of at least "
                     f"{max(16, 4 * k_max)} frames (4 Green-Kubo limits)")
    verdicts = []
    for i, g in enumerate(gks):
        spacing_fs = res.dt_ps * 1e3
        msg = (f"{g.group}: the VACF falls to 1/e within {g.decay_frames:.2g} frames ({spacing_fs:.3g} fs apart)")
        if not g.reliable:
            msg += (f": the Green-Kubo value {g.diffusion_nm2_per_ps:.3g} nm^2/ps rests on the first interval or two "
                    "and is unreliable (biased high); it is not used")
        verdicts.append(judge("transport.vacf_resolution", g.decay_frames, title=f"Green-Kubo resolution ({g.group})",
                              unit="frames per decay", message=msg,
                              advice=_explanation("transport.vacf_resolution")))
        if msd_res is not None:
            dm = float(msd_res.diffusion_nm2_per_ps[i])
            rel = (g.diffusion_nm2_per_ps - dm) / dm if dm else float("inf")
            e1, e2 = g.error_nm2_per_ps, msd_err[i]
            words = (f"{g.group}: Green-Kubo D = {_pm(g.diffusion_nm2_per_ps, e1)} nm^2/ps, MSD (Einstein) D = "
                     f"{_pm(dm, e2)} nm^2/ps: Green-Kubo is {100 * rel:+.0f}% of the MSD value")
            if not g.reliable:
                words += "; the Green-Kubo value is unreliable (coarse frames): use the MSD value"
            if e1 is not None and e2 is not None and (e1 > 0 or e2 > 0):
                z = abs(g.diffusion_nm2_per_ps - dm) / math.hypot(e1, e2)
                v = judge("transport.gk_msd_agreement", z, title=f"Green-Kubo vs MSD ({g.group})",
                          unit="combined standard errors", message=words + f" ({z:.1f} combined standard errors)",
                          advice=_explanation("transport.gk_msd_agreement"))
            else:
                from phasewake.core.analyses.verdicts import THRESHOLDS, Verdict

                v = Verdict("transport.gk_msd_agreement", "info", f"Green-Kubo vs MSD ({g.group})", None, "",
                            words + " (no error bars: too few frames for blocks)",
                            threshold=THRESHOLDS["transport.gk_msd_agreement"])
            if not g.reliable and v.level in ("ok", "info"):
                v = dataclasses.replace(v, level="caution")
            verdicts.append(v)
    return TransportResult(vacf=res, green_kubo=tuple(gks), msd=msd_res, msd_block_error_nm2_per_ps=tuple(msd_err),
                           n_blocks=b if b >= 3 else 0, verdicts=tuple(verdicts), notes=tuple(notes))


def _pm(value: float, error: float | None) -> str:
    return f"{value:.4g}" if error is None else f"{value:.4g} +- {error:.2g}"


def _explanation(kind: str) -> str:
    from phasewake.core.analyses.verdicts import EXPLANATIONS

    return EXPLANATIONS[kind].advice


# ---------------------------------------------------------------------------------------------------
# MSD
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MSDResult:
    """Mean-squared displacement per group with the Einstein D from a linear fit."""

    lag_ps: np.ndarray  # (L,)
    msd_nm2: np.ndarray  # (n_groups, L)
    groups: tuple[str, ...]
    diffusion_nm2_per_ps: np.ndarray  # (n_groups,) slope / (2 d)
    fit_range_ps: tuple[float, float]
    dimensions: int
    unwrapped: bool
    n_frames: int
    dt_ps: float
    settings: dict[str, Any] = field(default_factory=dict)


class _Unwrapper:
    """Unwrap positions chunk by chunk: r_u(t) = r_u(t-1) + minimum_image(r(t) - r(t-1)), from r_u(0) = 0.

    Displacements are taken relative to the first frame, which keeps the numbers small.
    """

    def __init__(self) -> None:
        self.last: np.ndarray | None = None  # wrapped positions of the last frame seen
        self.acc: np.ndarray | None = None  # unwrapped displacement of the last frame seen

    def __call__(self, pos: np.ndarray, box: np.ndarray | None) -> np.ndarray:
        from phasewake.core.analyses.coordinates import minimum_image

        p = np.asarray(pos, dtype=np.float64)
        if self.last is None:
            prev = p[:1]
            self.acc = np.zeros_like(p[0])
        else:
            prev = self.last[None]
        steps = np.diff(np.concatenate([prev, p], axis=0), axis=0)  # (n, N, 3)
        if box is not None:
            steps = minimum_image(steps, np.asarray(box, dtype=np.float64))
        assert self.acc is not None
        out = self.acc + np.cumsum(steps, axis=0)
        self.last = p[-1].copy()
        self.acc = out[-1].copy()
        return out


def _msd_finish(corr: BlockCorrelator, sq: np.ndarray, *, names: tuple[str, ...], sizes: np.ndarray, dt: float,
                fit_range_ps: tuple[float, float] | None, dimensions: int, unwrapped: bool,
                settings: dict[str, Any]) -> MSDResult:
    sums, counts = corr.finish()
    f = corr.n_frames
    if f < 4:
        raise TooShortError("a mean-squared displacement", have=f, need=4)
    L = sums.shape[1]
    k = np.arange(L)
    ok = counts > 0
    # sum_{t=0}^{F-1-k} q(t+k) + q(t), from prefix sums of q (per group, per frame)
    cs = np.concatenate([np.zeros((sq.shape[0], 1)), np.cumsum(sq, axis=1)], axis=1)
    head = cs[:, np.maximum(f - k, 0)]  # sum_{t < F-k} q(t)
    tailsum = cs[:, f:f + 1] - cs[:, np.minimum(k, f)]  # sum_{t >= k} q(t)
    msd = np.where(ok, (head + tailsum - 2.0 * sums) / np.where(ok, counts, 1.0), np.nan) / sizes[:, None]
    msd = msd[:, ok]
    lag = k[ok] * dt
    lo, hi = fit_range_ps if fit_range_ps is not None else (0.2 * lag[-1], 0.8 * lag[-1])
    sel = (lag >= lo) & (lag <= hi)
    if sel.sum() < 2:
        raise AnalysisError(f"the MSD fit range {lo:g}-{hi:g} ps holds fewer than two lags")
    A = np.vstack([lag[sel], np.ones(sel.sum())]).T
    coef, *_ = np.linalg.lstsq(A, msd[:, sel].T, rcond=None)
    return MSDResult(lag_ps=lag, msd_nm2=msd, groups=names, diffusion_nm2_per_ps=coef[0] / (2 * dimensions),
                     fit_range_ps=(float(lo), float(hi)), dimensions=dimensions, unwrapped=unwrapped,
                     n_frames=f, dt_ps=dt, settings=settings)


def msd_from_positions(positions_nm: np.ndarray, dt_ps: float, *, box_nm: np.ndarray | None = None,
                       groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
                       max_lag: int | None = None, fit_range_ps: tuple[float, float] | None = None,
                       dimensions: int = 3) -> MSDResult:
    """MSD of an in-memory position array, unwrapped with the box when given.

    Parameters
    ----------
    positions_nm : ndarray, shape (F, N, 3), nm
    dt_ps : float
    box_nm : ndarray, shape (F, 3, 3) or (3, 3) or (3,), nm, optional
    groups : mapping name -> atom indices, optional
    max_lag : int, optional
        Lags (frames), default F // 2.
    fit_range_ps : (float, float), optional
        Time range of the linear fit; default 20%-80% of the lag window.
    """
    p = np.asarray(positions_nm)
    if p.ndim != 3 or p.shape[2] != 3:
        raise AnalysisError("positions must have shape (n_frames, n_atoms, 3)")
    f, n = p.shape[:2]
    box = None
    if box_nm is not None:
        b = np.asarray(box_nm, float)
        if b.shape == (3,):
            b = np.diag(b)
        box = np.broadcast_to(b, (f, 3, 3)) if b.shape == (3, 3) else b
    lab, names, sizes = _group_labels(n, groups)
    lag = max(1, f // 2) if max_lag is None else int(max(1, min(max_lag, f)))
    corr = BlockCorrelator(n_atoms=n, max_lag=lag, weights=np.ones(n), group_of_atom=lab,
                           n_groups=len(names), dtype=np.float64)
    un = _Unwrapper()
    r = un(p, box)
    corr.update(r)
    sq = _group_square_sums(r, lab, len(names))
    return _msd_finish(corr, sq, names=names, sizes=sizes, dt=dt_ps, fit_range_ps=fit_range_ps,
                       dimensions=dimensions, unwrapped=box is not None, settings={"max_lag": lag})


def _group_square_sums(r: np.ndarray, lab: np.ndarray, n_groups: int) -> np.ndarray:
    q = np.einsum("fnc,fnc->fn", r, r)  # (F, N)
    out = np.zeros((n_groups, r.shape[0]))
    for g in range(n_groups):
        out[g] = q[:, lab == g].sum(axis=1)
    return out


def msd(run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
        max_lag_ps: float | None = None, fit_range_ps: tuple[float, float] | None = None,
        start: int = 0, stop: int | None = None, stride: int = 1, chunk_frames: int = 256,
        max_buffer_bytes: int = DEFAULT_BUFFER_BYTES, dimensions: int = 3) -> Work[MSDResult]:
    """Streaming MSD of a run, positions unwrapped with the box (generator returning MSDResult)."""
    if run.frames is None:
        raise MissingDataError("the run holds no frames", path=run.paths[0] if run.paths else None)
    dt = _frame_spacing(run, start, stop, stride)
    n_sel = len(range(start, run.frames.n_frames if stop is None else min(stop, run.frames.n_frames), stride))
    lab, names, sizes = _group_labels(run.n_atoms, groups)
    used = np.flatnonzero(lab >= 0)
    if max_lag_ps is None:
        lag, _ = _default_lag(n_sel, used.size, max_buffer_bytes, np.float64)
    else:
        lag = int(max(1, min(round(max_lag_ps / dt), n_sel)))
    corr = BlockCorrelator(n_atoms=used.size, max_lag=lag, weights=np.ones(used.size), group_of_atom=lab[used],
                           n_groups=len(names), dtype=np.float64)
    un = _Unwrapper()
    sq_parts = []
    done = 0
    has_box = bool(run.frames.has_box)
    sel_atoms = None if used.size == run.n_atoms else used
    for chunk in run.frames.iter_chunks(chunk_frames=chunk_frames, start=start, stop=stop, stride=stride,
                                        atom_indices=sel_atoms, velocities=False):
        r = un(chunk.positions_nm, chunk.box_nm)
        corr.update(r)
        sq_parts.append(_group_square_sums(r, lab[used], len(names)))
        done += chunk.n_frames
        yield Progress(done, n_sel, "mean-squared displacement")
    sq = np.concatenate(sq_parts, axis=1) if sq_parts else np.zeros((len(names), 0))
    return _msd_finish(corr, sq, names=names, sizes=sizes, dt=dt, fit_range_ps=fit_range_ps,
                       dimensions=dimensions, unwrapped=has_box,
                       settings={"max_lag": lag, "start": start, "stop": stop, "stride": stride})


# ---------------------------------------------------------------------------------------------------
# Vibrational density of states
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Peak:
    wavenumber_cm1: float
    thz: float
    intensity: float  # per cm^-1
    prominence: float  # fraction of the highest peak
    not_a_motion: str = ""  # why the peak is not counted as a motion (may be an alias, near Nyquist); "" if it is


@dataclass(frozen=True)
class VDOSResult:
    """Vibrational density of states from the mass-weighted VACF.

    ``intensity`` is normalised so that its integral over wavenumber (cm^-1) is ``n_dof``;
    units: degrees of freedom per cm^-1.
    """

    wavenumber_cm1: np.ndarray  # (n_freq,)
    thz: np.ndarray  # (n_freq,)
    intensity: np.ndarray  # (n_freq,), per cm^-1
    n_dof: float
    peaks: tuple[Peak, ...]  # significant peaks, by wavenumber
    highest_significant_peak_cm1: float | None
    upper_wavenumber_cm1: float  # below this lies 99% of the spectral weight (robust when no peak stands out)
    resolution_cm1: float  # 1 / (c * lag window)
    bin_spacing_cm1: float
    nyquist_cm1: float
    dt_ps: float
    max_lag_ps: float
    window: str
    velocities_estimated: bool
    settings: dict[str, Any] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    unresolved_motions: tuple[str, ...] = ()  # expected fast motions the frames cannot show, in words

    @property
    def motions(self) -> tuple[Peak, ...]:
        """The peaks counted as motions (resolved, not possible aliases)."""
        return tuple(p for p in self.peaks if not p.not_a_motion)

    @property
    def intensity_unit(self) -> str:
        return "1/cm^-1"


def vdos_from_vacf(lag_ps: np.ndarray, vacf_mass_weighted: np.ndarray, *, n_dof: float, window: str = "hann",
                   peak_prominence: float = 0.05, velocities_estimated: bool = False,
                   notes: Sequence[str] = ()) -> VDOSResult:
    """VDOS from a mass-weighted VACF (summed over atoms), by a windowed cosine transform.

    Parameters
    ----------
    lag_ps : ndarray, shape (L,), ps, evenly spaced from 0
    vacf_mass_weighted : ndarray, shape (L,), kJ/mol
    n_dof : float
        Degrees of freedom the spectrum integrates to.
    window : {"hann", "none"}
        Lag window w(k) = (1 + cos(pi k / L)) / 2 for "hann".
    peak_prominence : float
        A peak is significant when its prominence is at least this fraction of the highest value.
    """
    import scipy.fft
    from scipy.signal import find_peaks

    c = np.asarray(vacf_mass_weighted, float)
    L = c.size
    if L < 4:
        raise TooShortError("a vibrational spectrum", have=L, need=4)
    dt = float(lag_ps[1] - lag_ps[0])
    if window == "hann":
        w = 0.5 * (1.0 + np.cos(np.pi * np.arange(L) / L))
    elif window == "none":
        w = np.ones(L)
    else:
        raise ValueError(f"window must be 'hann' or 'none', not {window!r}")
    cw = c * w
    n = 2 * L
    sym = np.zeros(n)
    sym[:L] = cw
    sym[n - L + 1 :] = cw[1:][::-1]
    spec = scipy.fft.rfft(sym).real * dt  # (L + 1,)
    f_thz = scipy.fft.rfftfreq(n, d=dt)  # 1/ps = THz
    wn = f_thz * 1e12 / SPEED_OF_LIGHT_CM_PER_S
    area = np.trapezoid(spec, wn)
    if not area > 0:
        raise AnalysisError("the velocity autocorrelation has no spectral weight (zero velocities?)")
    intensity = spec * (n_dof / area)
    top = float(intensity.max())
    idx, props = find_peaks(intensity, prominence=peak_prominence * top)
    pos = np.clip(intensity, 0.0, None)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (pos[1:] + pos[:-1]) * np.diff(wn))])
    upper = float(wn[min(int(np.searchsorted(cum, 0.99 * cum[-1])), wn.size - 1)])
    peaks = tuple(Peak(float(wn[i]), float(f_thz[i]), float(intensity[i]), float(p / top))
                  for i, p in zip(idx, props["prominences"]))
    return VDOSResult(
        wavenumber_cm1=wn, thz=f_thz, intensity=intensity, n_dof=float(n_dof), peaks=peaks,
        highest_significant_peak_cm1=peaks[-1].wavenumber_cm1 if peaks else None, upper_wavenumber_cm1=upper,
        resolution_cm1=1.0 / (SPEED_OF_LIGHT_CM_PER_S * L * dt / PS_PER_S),
        bin_spacing_cm1=float(wn[1] - wn[0]), nyquist_cm1=nyquist_cm1(dt), dt_ps=dt, max_lag_ps=L * dt,
        window=window, velocities_estimated=velocities_estimated,
        settings={"window": window, "peak_prominence": peak_prominence, "max_lag": L}, notes=tuple(notes),
    )


def vdos_from_velocities(velocities_nm_per_ps: np.ndarray, masses_amu: np.ndarray, dt_ps: float, *,
                         window: str = "hann", max_lag: int | None = None, n_dof: float | None = None,
                         peak_prominence: float = 0.05) -> VDOSResult:
    """Vibrational density of states of an in-memory velocity array.

    Parameters
    ----------
    velocities_nm_per_ps : ndarray, shape (F, N, 3), nm/ps
    masses_amu : ndarray, shape (N,), amu
    dt_ps : float
        Frame spacing (ps); the Nyquist limit is 1 / (2 c dt).
    window : {"hann", "none"}
    max_lag : int, optional
        Lag window L in frames; default the frames in 2 ps (at most F // 2). Resolution 1 / (c L dt):
        a longer window resolves finer but is noisier (the variance of a lag-window estimate grows
        with L / F), so the default favours a smooth spectrum (2 ps: 16.7 cm^-1).
    n_dof : float, optional
        Normalisation (default 3 N).
    peak_prominence : float

    Returns
    -------
    VDOSResult
    """
    v = np.asarray(velocities_nm_per_ps)
    if max_lag is None:
        max_lag = int(max(4, min(v.shape[0] // 2, round(DEFAULT_SPECTRUM_LAG_PS / dt_ps))))
    r = vacf_from_velocities(v, dt_ps, masses_amu=masses_amu, mass_weighted=True, max_lag=max_lag)
    return vdos_from_vacf(r.lag_ps, r.vacf_sum.sum(axis=0), n_dof=3.0 * v.shape[1] if n_dof is None else n_dof,
                          window=window, peak_prominence=peak_prominence)


def vibrational_spectrum(run: Run, *, atom_indices: Sequence[int] | np.ndarray | None = None,
                         window: str = "hann", max_lag_ps: float | None = None, n_dof: float | None = None,
                         peak_prominence: float = 0.05, start: int = 0, stop: int | None = None,
                         stride: int = 1, chunk_frames: int = 256,
                         max_buffer_bytes: int = DEFAULT_BUFFER_BYTES) -> Work[VDOSResult]:
    """Streaming VDOS of a run (generator: yields Progress, returns VDOSResult).

    ``max_lag_ps`` defaults to 2 ps (at most half the run; see :func:`vdos_from_velocities`).
    ``n_dof`` defaults to 3 x the atoms used (constraints are not subtracted: the spectrum of a
    constrained run simply has less weight at the constrained frequencies, and the normalisation is a
    convention). The highest significant peak (``highest_significant_peak_cm1``) is what the time-step
    check uses.
    """
    idx = np.arange(run.n_atoms) if atom_indices is None else np.asarray(atom_indices, dtype=np.int64)
    if max_lag_ps is None:
        t = np.asarray(run.time_ps)[start:stop:stride]
        span = float(t.size * np.median(np.diff(t))) if t.size > 1 else 0.0
        max_lag_ps = min(DEFAULT_SPECTRUM_LAG_PS, 0.5 * span) if span > 0 else None
    res = yield from vacf(run, groups={"atoms": idx}, mass_weighted=True, max_lag_ps=max_lag_ps, start=start,
                          stop=stop, stride=stride, chunk_frames=chunk_frames, max_buffer_bytes=max_buffer_bytes)
    out = vdos_from_vacf(res.lag_ps, res.vacf_sum[0], n_dof=3.0 * idx.size if n_dof is None else n_dof,
                         window=window, peak_prominence=peak_prominence,
                         velocities_estimated=res.velocities_estimated, notes=res.notes)
    return judge_peaks(out, _expected_motions(run, idx))


def _expected_motions(run: Run, idx: np.ndarray) -> tuple[Any, ...]:
    """Fast motions the topology and masses of the atoms used imply (timestep.expected_fast_motions)."""
    from phasewake.core.analyses.timestep import expected_fast_motions

    md = run.metadata
    top = run.topology
    if top is not None and idx.size != run.n_atoms:
        top = top.subset(idx)
    return expected_fast_motions(top, np.asarray(run.masses_amu)[idx], n_constraints=md.n_constraints,
                                 constraints_words=md.constraints)


def judge_peaks(result: VDOSResult, expected: Sequence[Any] = ()) -> VDOSResult:
    """The spectrum with every peak that is not a resolved motion marked (``Peak.not_a_motion``).

    A peak is only a motion when the frames resolve it: peaks in the top 20% below the Nyquist limit may
    be aliases of faster motions, and when a fast motion expected from the topology and masses
    (:func:`phasewake.core.analyses.timestep.expected_fast_motions`) lies beyond what the frames show, peaks where
    its band folds to (Nyquist-Shannon) may be its aliases. ``highest_significant_peak_cm1`` then counts
    motions only, and a note says in words what cannot be seen.
    """
    import dataclasses

    from phasewake.core.analyses.timestep import HXH_BEND_CM, alias_band, unresolved_motions

    dt = result.dt_ps
    ny = result.nyquist_cm1
    unres = unresolved_motions(list(expected), dt)
    # an unresolved X-H stretch: every hydrogen motion from the H-X-H bend up to the stretch (bends, wags,
    # model-specific stiff angles) may lie beyond the frames too; what of that band lies above Nyquist folds
    stretch = [e for e in unres if "stretch" in e.name]
    h_band = None if not stretch else max(stretch, key=lambda e: e.high_per_cm)
    peaks = []
    for p in result.peaks:
        why = ""
        hits = [e for e in unres if any(lo <= p.wavenumber_cm1 <= hi for lo, hi in alias_band(e, dt))]
        if hits:
            why = "may be an alias of " + " or ".join(e.words() for e in hits)
        elif h_band is not None and any(lo <= p.wavenumber_cm1 <= hi for lo, hi in
                                        alias_band(h_band, dt, low_per_cm=HXH_BEND_CM[0])):
            why = (f"may be an alias of a hydrogen motion between {HXH_BEND_CM[0]:.0f} and "
                   f"{h_band.high_per_cm:.0f} cm^-1 (bends up to the {h_band.name}), which the frames cannot show")
        elif p.wavenumber_cm1 >= 0.8 * ny:
            why = f"near the Nyquist limit {ny:.0f} cm^-1: not resolved, may be an alias of a faster motion"
        peaks.append(dataclasses.replace(p, not_a_motion=why))
    motions = [p for p in peaks if not p.not_a_motion]
    notes = list(result.notes)
    spacing_fs = dt * 1e3
    for e in unres:
        aliased = [p for p in peaks if e.words() in p.not_a_motion or (e is h_band and "hydrogen motion" in p.not_a_motion)]
        where = (", ".join(f"{p.wavenumber_cm1:.0f}" for p in aliased) + " cm^-1") if aliased else ""
        notes.append(f"{e.words()} cannot be seen at {spacing_fs:.3g} fs frames (Nyquist limit {ny:.0f} cm^-1; "
                     f"{e.source})" + (f": the peaks at {where} may be its aliases and are not counted as motions"
                                       if where else ""))
    return dataclasses.replace(result, peaks=tuple(peaks),
                               highest_significant_peak_cm1=motions[-1].wavenumber_cm1 if motions else None,
                               notes=tuple(notes), unresolved_motions=tuple(e.words() for e in unres))
