"""Velocity autocorrelation of a run: the frame consumer :class:`VACFConsumer` and :func:`vacf`, the pass
with that one consumer (see :mod:`phasewake.core.analyses.velocity`)."""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.analyses.result import ResultMixin
from phasewake.core.errors import AnalysisError, MissingDataError, TooShortError
from phasewake.core.progress import Work

if TYPE_CHECKING:
    from phasewake.core.model.run import FrameChunk, Run

from phasewake.core.analyses.velocity.correlator import BlockCorrelator

DEFAULT_BUFFER_BYTES = 256 * 2**20

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
class VACFResult(ResultMixin):
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


def _pass_range(window: tuple[int, int], start: int, stop: int, what: str) -> tuple[int, int]:
    """``(start, stop)`` of a pass (or part of one) inside the frames ``window`` a consumer of ``what`` was set
    up for; AnalysisError otherwise."""
    if not (window[0] <= start and stop <= window[1]):
        raise AnalysisError(f"the {what} was set up for frames {window[0]}:{window[1]}, the pass reads {start}:{stop}")
    return int(start), int(stop)


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
        self._range = _pass_range(self.window, start, stop, "VACF")
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
        from phasewake.core.model.feeding import check_next

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
    col_w = np.repeat(np.asarray(weights, dtype=np.float64), 3)
    a = np.asarray(before, dtype=np.float64)
    b = np.asarray(after, dtype=np.float64)
    return sum_by_straddling_lag(a.shape[0], b.shape[0], group_of_atom, n_groups, max_lag,
                                 lambda cols: (a[:, cols] * col_w[cols]) @ b[:, cols].T)


def sum_by_straddling_lag(t: int, h: int, group_of_atom: np.ndarray, n_groups: int, max_lag: int,
                          pairs: Callable[[np.ndarray], np.ndarray]) -> np.ndarray:
    """Per group, the sums over lags k < L of ``pairs(columns of the group)`` (T, H): the values of the pairs of
    row i of the T frames before a boundary and row j of the H frames after it, whose lag is (T - i) + j.
    Returns (n_groups, L), float64."""
    out = np.zeros((n_groups, max_lag))
    if t == 0 or h == 0:
        return out
    lag = (t - np.arange(t))[:, None] + np.arange(h)[None, :]
    inside = lag < max_lag
    col_group = np.repeat(group_of_atom, 3)
    for g in range(n_groups):
        values = pairs(col_group == g)
        out[g] = np.bincount(lag[inside], weights=values[inside], minlength=max_lag)[:max_lag]
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
    max_buffer_bytes : int
        Memory allowed for the two blocks of frames.
    """
    from phasewake.core.model.framepass import run_one

    consumer = VACFConsumer(run, groups=groups, mass_weighted=mass_weighted, max_lag_ps=max_lag_ps, start=start,
                            stop=stop, stride=stride, max_buffer_bytes=max_buffer_bytes)
    return (yield from run_one(run, consumer, label="velocity autocorrelation", start=start, stop=stop,
                               stride=stride))


