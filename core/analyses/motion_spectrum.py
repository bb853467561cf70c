"""The mass-weighted velocity power spectrum in which the audit looks for the fastest motion.

A small streaming Welch estimator (Welch, IEEE Trans. Audio Electroacoust. 15, 70 (1967)): the
Hann-windowed spectrum of each segment of frames, summed over atoms with their masses, averaged over
segments, so memory stays bounded by one chunk. The spectrum is the vibrational density of states up to a
factor (Dickey and Paskin 1969). :func:`spectrum_groups` labels atoms for per-group spectra.

Units: ps, 1/ps (frequency).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from phasewake.core.errors import AnalysisError, TooShortError


class VelocitySpectrumAccumulator:
    """Welch average of sum_i m_i |FFT(w v_i)|^2 over segments of ``segment_frames`` frames.

    Feed chunks of velocities in time order with :meth:`update`; frames are cut into consecutive
    segments of equal length (a remainder shorter than a segment is carried into the next chunk).
    With ``labels`` (one integer group per atom) the power is also kept per group, so a few fast
    atoms (one stiff bond among many slow atoms) are not drowned in the total. At most
    ``max_atoms_per_group`` atoms of a group are used (evenly spread; enough for a stable spectrum),
    and atoms are processed in blocks, so memory and work stay bounded.
    """

    def __init__(self, masses_amu: np.ndarray, frame_spacing_ps: float, *, segment_frames: int = 256,
                 labels: np.ndarray | None = None, block_atoms: int = 4096, max_segments: int | None = None,
                 max_atoms_per_group: int | None = 2000) -> None:
        if segment_frames < 8:
            raise TooShortError("a velocity spectrum segment", have=segment_frames, need=8)
        masses = np.asarray(masses_amu, dtype=np.float64)
        self.spacing_ps = float(frame_spacing_ps)
        self.segment_frames = int(segment_frames)
        self.block_atoms = int(block_atoms)
        self.max_segments = max_segments  # later segments are ignored (bounds the FFT work on long runs)
        from scipy.signal import get_window

        self.window = get_window("hann", self.segment_frames)  # periodic Hann, as scipy.signal.welch uses
        n_freq = self.segment_frames // 2 + 1
        lab_all = np.zeros(masses.size, np.int64) if labels is None else np.asarray(labels, dtype=np.int64)
        # at most max_atoms_per_group atoms of each group, evenly spread, each weighted by
        # n_group / n_kept so the total stays an estimate of the whole system's spectrum
        keep: list[np.ndarray] = []
        weight = np.zeros(masses.size)
        for g in np.unique(lab_all):
            idx = np.nonzero(lab_all == g)[0]
            if max_atoms_per_group is not None and idx.size > max_atoms_per_group:
                idx = idx[np.linspace(0, idx.size - 1, max_atoms_per_group).astype(np.int64)]
            weight[idx] = np.count_nonzero(lab_all == g) / idx.size
            keep.append(idx)
        sel = np.sort(np.concatenate(keep))
        self.atoms: np.ndarray | None = None if sel.size == masses.size else sel
        self.masses = masses[sel]
        self._weight = weight[sel]
        self.labels = None if labels is None else lab_all[sel]
        n_groups = 0 if labels is None else int(lab_all.max()) + 1
        self._power = np.zeros(n_freq)
        self._group_power = np.zeros((n_groups, n_freq))
        self._n_segments = 0
        self._carry: np.ndarray | None = None
        self._colw: np.ndarray | None = None  # per-column weights of the flat layout, made on first use
        self._bufs: dict[int, tuple[np.ndarray, np.ndarray]] = {}  # work buffers by block width
        self._win32 = np.zeros((0, 1), np.float32)

    def _segment(self, seg: np.ndarray) -> None:
        """One segment (L, n_atoms, 3). Works on the flat (L, 3 n) layout: numpy reductions over a
        trailing axis of length 3 are slow, so the sums over components, atoms and groups are one
        float64 matrix product with per-column weights. The masses are in those weights too
        (|FFT(sqrt(m) v)|^2 = m |FFT(v)|^2), and the power comes from squaring the transform's real
        and imaginary parts in place (columns 2j, 2j + 1 of its float32 view): fewer passes over the
        segment than scaling, squaring and adding separate arrays."""
        import scipy.fft

        if self._colw is None:
            cols = [self._weight]
            if self.labels is not None:
                for g in range(self._group_power.shape[0]):
                    cols.append(np.where(self.labels == g, self._weight, 0.0))
            w = np.stack(cols, axis=1) * self.masses[:, None]  # (n, 1 + G) float64
            self._colw = np.repeat(w, 6, axis=0)  # (6 n, 1 + G): x, y, z, each as real and imaginary part
            self._win32 = self.window.astype(np.float32)[:, None]
        flat = np.ascontiguousarray(seg, dtype=np.float32).reshape(seg.shape[0], -1)
        width = 3 * self.block_atoms
        for c0 in range(0, flat.shape[1], width):
            x = flat[:, c0:c0 + width]
            w = x.shape[1]
            bufs = self._bufs.get(w)
            if bufs is None:  # reused between segments: fresh pages of large temporaries are slow to touch
                bufs = self._bufs[w] = (np.empty((x.shape[0], w), np.float32),
                                        np.empty((x.shape[0] // 2 + 1, 2 * w), np.float64))
            blk = np.subtract(x, x.mean(axis=0, keepdims=True), out=bufs[0])
            blk *= self._win32
            f = scipy.fft.rfft(blk, axis=0)  # float32 in, complex64 (n_freq, cols) out
            fv = f.view(np.float32)  # (n_freq, 2 cols): real and imaginary parts side by side
            np.multiply(fv, fv, out=fv)
            pw = bufs[1]
            pw[...] = fv  # float64 sums from here on
            both = pw @ self._colw[2 * c0:2 * (c0 + w)]  # (n_freq, 1 + G)
            self._power += both[:, 0]
            if self.labels is not None:
                self._group_power += both[:, 1:].T
        self._n_segments += 1

    def update(self, velocities_nm_per_ps: np.ndarray) -> None:
        """velocities : ndarray, shape (n_frames, n_atoms, 3), nm/ps."""
        if self.full:
            return
        v = np.asarray(velocities_nm_per_ps, dtype=np.float32)
        if self.atoms is not None:
            v = np.take(v, self.atoms, axis=1)  # C-ordered (v[:, idx] is not: every later pass was slow)
        self.update_selected(v)

    def update_selected(self, velocities_nm_per_ps: np.ndarray) -> None:
        """Like :meth:`update` with the velocities of the atoms kept (``self.atoms``, or all) only,
        shape (n_frames, n_kept, 3): for callers that gathered them while the chunk was in cache."""
        if self.full:
            return
        v = np.asarray(velocities_nm_per_ps, dtype=np.float32)
        if self._carry is not None:
            v = np.concatenate([self._carry, v], axis=0)
            self._carry = None
        L = self.segment_frames
        n_full = v.shape[0] // L
        for k in range(n_full):
            if self.full:
                return
            self._segment(v[k * L:(k + 1) * L])
        rest = v[n_full * L:]
        if rest.shape[0]:
            self._carry = np.array(rest, copy=True)

    def merge(self, later: VelocitySpectrumAccumulator) -> None:
        """Add the segments of an accumulator fed the frames after this one's, whose segments continue this
        one's cut (the caller completes the segment across the cut first, with :meth:`update_selected`)."""
        if later.segment_frames != self.segment_frames or later._power.shape != self._power.shape:
            raise AnalysisError("velocity spectra of other segment lengths cannot be merged")
        self._power += later._power
        self._group_power += later._group_power
        self._n_segments += later._n_segments
        if later._n_segments or later._carry is not None:
            self._carry = later._carry

    def __getstate__(self) -> dict[str, Any]:
        state = dict(self.__dict__)
        state["_bufs"], state["_colw"] = {}, None  # work buffers and weights, made again on first use
        return state

    @property
    def n_segments(self) -> int:
        return self._n_segments

    @property
    def full(self) -> bool:
        return self.max_segments is not None and self._n_segments >= self.max_segments

    def finish(self) -> tuple[np.ndarray, np.ndarray]:
        """Frequencies (1/ps), shape (L//2+1,), and the average power (arbitrary units, amu nm^2/ps^2)."""
        if self._n_segments == 0:
            raise TooShortError("a velocity spectrum", have=0 if self._carry is None else self._carry.shape[0],
                                need=self.segment_frames)
        freq = np.fft.rfftfreq(self.segment_frames, d=self.spacing_ps)
        return freq, self._power / self._n_segments

    def finish_groups(self) -> np.ndarray:
        """Average power per label group, shape (n_groups, L//2+1); empty without labels."""
        return self._group_power / max(self._n_segments, 1)


def spectrum_groups(topology: Any, masses_amu: np.ndarray, *, max_groups: int = 64) -> tuple[np.ndarray, list[str]]:
    """Atom labels for per-group spectra: residue and atom name (when at most ``max_groups`` kinds),
    else element, else mass. Returns labels (n_atoms,) int and the group names."""
    m = np.asarray(masses_amu, dtype=np.float64)
    keys: list[str] = []
    if topology is not None:
        keys = [f"{a.residue.name}:{a.name}" for a in topology.atoms]
        if len(set(keys)) > max_groups:
            keys = [a.element.symbol if a.element is not None else a.name for a in topology.atoms]
    if not keys or len(set(keys)) > max_groups:
        # by mass: format each distinct mass once (a Python loop over every atom took 25-50 ms at 20k atoms)
        um, inverse = np.unique(m, return_inverse=True)
        ukeys = [f"mass {x:.4g} amu" for x in um]
        names = sorted(set(ukeys))
        index = {k: i for i, k in enumerate(names)}
        return np.array([index[k] for k in ukeys], dtype=np.int64)[inverse.reshape(-1)], names
    names = sorted(set(keys))
    index = {k: i for i, k in enumerate(names)}
    return np.array([index[k] for k in keys], dtype=np.int64), names


def velocity_power_spectrum(velocities_nm_per_ps: np.ndarray, masses_amu: np.ndarray, frame_spacing_ps: float,
                            *, segment_frames: int = 256) -> tuple[np.ndarray, np.ndarray]:
    """Array form of :class:`VelocitySpectrumAccumulator` (one call over all frames)."""
    acc = VelocitySpectrumAccumulator(masses_amu, frame_spacing_ps,
                                      segment_frames=min(segment_frames, velocities_nm_per_ps.shape[0]))
    acc.update(velocities_nm_per_ps)
    return acc.finish()
