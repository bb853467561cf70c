"""One pass over the frames feeds several analyses (issue 9).

A request that needs coordinates, the kinetic temperature per group and the VACF reads every frame once,
not once per analysis: :func:`run_pass` iterates ``run.frames.iter_chunks`` a single time (asking for
positions and velocities only if some consumer needs them, and for the union of the atoms they need) and
hands each chunk to every consumer. A consumer is a chunk reduction built on the existing kernels:

* ``prepare(columns, start=, stop=, chunk_frames=)``: told which run atoms the chunk's atom axis holds
  (``columns``, shape (n_read,), or None for all atoms) and the frame range of the pass;
* ``update(chunk)``: one :class:`~phasewake.core.model.run.FrameChunk`;
* ``finish()``: the same frozen result the separate analysis returns.

Consumers here: :class:`CoordinatesConsumer` (``coordinates.evaluate_arrays`` per chunk, finishing into the
``CoordinateSeries`` that :func:`~phasewake.core.analyses.coordinates.compute_coordinates` returns; pc(k) specs need
a PCA pass first and are refused), :class:`GroupTemperatureConsumer` (``temperature.kinetic_energy`` per
group, then ``group_degrees_of_freedom`` and ``group_temperatures`` as the audit does),
:class:`VACFConsumer` (``velocity.BlockCorrelator`` and the finish of ``velocity.vacf``),
:class:`PCAConsumer` (``projection.PCAReduction``: the PCA covariance, exact route, or the single-pass
Nystrom sketch; bitwise what ``compute_pca(..., projections=False)`` returns, because the reduction works
on its own blocks of frames whatever the pass's chunks; subspace iteration, ``n_iter`` > 0, needs more
passes and is refused) and :class:`PCAProjectionConsumer` (``projection.PCAProjection``: projections,
mode momenta and cosine contents of a computed PCA, for a second pass, which may feed other analyses
too).

:func:`feed` is the loop itself (prepare, read once, update; the caller finishes); ``run_pass`` and
``projection.compute_pca`` both use it.

Because every consumer is an update/finish reduction, the same objects can be driven over blocks of a
distributed array (see DEVELOPERS.md, "Scaling out").
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any, Protocol

import numpy as np

from phasewake.core.analyses.projection import PCAProjection, PCAReduction
from phasewake.core.errors import AnalysisError, CoordinateSpecError, MissingDataError
from phasewake.core.model.run import DEFAULT_CHUNK_FRAMES, FrameChunk
from phasewake.core.progress import Progress, Work

if TYPE_CHECKING:
    from phasewake.core.analyses.coordinates import CoordinateSeries
    from phasewake.core.analyses.projection import PCAResult
    from phasewake.core.analyses.temperature import GroupTemperature
    from phasewake.core.analyses.velocity import VACFResult
    from phasewake.core.model.run import Run


class ChunkConsumer(Protocol):
    """What :func:`run_pass` needs from a consumer (see the module docstring)."""

    atoms: np.ndarray | None  # run atom indices needed (sorted, unique), None for all atoms
    needs_positions: bool
    needs_velocities: bool

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None: ...

    def update(self, chunk: FrameChunk) -> None: ...

    def finish(self) -> Any: ...


def _path(run: Run) -> Any:
    return run.paths[0] if run.paths else None


def _frame_range(run: Run, start: int, stop: int | None) -> tuple[int, int]:
    stop_ = run.n_frames if stop is None else min(int(stop), run.n_frames)
    if not 0 <= int(start) < stop_:
        raise AnalysisError(f"empty frame range {start}:{stop_} (the run has {run.n_frames} frames)",
                            path=_path(run))
    return int(start), stop_


def _local(columns: np.ndarray | None, atoms: np.ndarray) -> np.ndarray:
    """Positions of run atoms ``atoms`` on the chunk's atom axis."""
    if columns is None:
        return np.asarray(atoms, dtype=np.int64)
    pos = np.searchsorted(columns, atoms)
    if np.any(pos >= columns.size) or np.any(columns[np.minimum(pos, columns.size - 1)] != atoms):
        raise AnalysisError("a consumer's atoms are not among the atoms read by the pass")
    return pos.astype(np.int64)


# ------------------------------------------------------------------------------------------------------
# coordinates


class CoordinatesConsumer:
    """Coordinates with velocities, effective masses and momenta, as :func:`compute_coordinates`.

    Parameters
    ----------
    run : Run
    specs : sequence of str
        Coordinate specifications (``phasewake.core.analyses.coordspec``); not ``pc(k)``.

    ``finish()`` returns ``list[CoordinateSeries]`` in the order of ``specs``, field for field what
    ``compute_coordinates(run, specs, start=, stop=, chunk_frames=)`` returns for the pass's range.
    """

    needs_positions = True

    def __init__(self, run: Run, specs: Sequence[str]) -> None:
        from phasewake.core.analyses.coordinates import resolve_for_run
        from phasewake.core.readers.common import check_masses

        if run.frames is None:
            raise MissingDataError("the run has no frames (positions)", path=_path(run))
        if not specs:
            raise CoordinateSpecError("no coordinate given")
        check_masses(run.masses_amu, path=_path(run), where=run.metadata.sources.get("masses", "masses"))
        self.run = run
        self.resolved = [resolve_for_run(s, run) for s in specs]
        for r in self.resolved:
            if r.function == "pc":
                raise CoordinateSpecError("pc(k) needs a PCA pass first: use coordinates.compute_coordinates",
                                          spec=r.spec)
        self.atoms: np.ndarray | None = np.unique(np.concatenate([r.atoms for r in self.resolved])).astype(np.int64)
        self.needs_velocities = bool(run.frames.has_velocities)
        self._remap: list[Any] = []
        self._masses = np.zeros(0)
        self._values: list[list[np.ndarray]] = [[] for _ in self.resolved]
        self._dqdt: list[list[np.ndarray]] = [[] for _ in self.resolved]
        self._meff: list[list[np.ndarray]] = [[] for _ in self.resolved]
        self._time: list[np.ndarray] = []
        self._got_vel = self.needs_velocities
        self._range = (0, 0, DEFAULT_CHUNK_FRAMES)

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        self._range = (start, stop, chunk_frames)
        self._remap = [replace(r, groups=tuple(_local(columns, np.asarray(g, dtype=np.int64)) for g in r.groups))
                       for r in self.resolved]
        m = np.asarray(self.run.masses_amu, dtype=np.float64)
        self._masses = m if columns is None else m[columns]

    def update(self, chunk: FrameChunk) -> None:
        from phasewake.core.analyses.coordinates import evaluate_arrays, refuse_not_finite

        vel = chunk.velocities_nm_per_ps if self.needs_velocities else None
        if self.needs_velocities and vel is None:
            self._got_vel = False
        self._time.append(np.asarray(chunk.time_ps, dtype=np.float64))
        for k, r in enumerate(self._remap):
            v, dq, me = evaluate_arrays(r, chunk.positions_nm, vel, self._masses, chunk.box_nm)
            if not np.all(np.isfinite(v)):  # names the file and the frame
                refuse_not_finite(r, chunk, v, _path(self.run))
            self._values[k].append(v)
            if dq is not None:
                self._dqdt[k].append(dq)
            if me is not None:
                self._meff[k].append(me)

    def finish(self) -> list[CoordinateSeries]:
        from phasewake.core.analyses.coordinates import CoordinateSeries, finite_difference_velocity, units_of

        start, stop, chunk = self._range
        time = np.concatenate(self._time) if self._time else np.zeros(0)
        estimated_by_reader = bool(getattr(self.run.frames, "velocities_estimated", False))
        out: list[CoordinateSeries] = []
        for k, r in enumerate(self.resolved):
            values = np.concatenate(self._values[k]) if self._values[k] else np.zeros(0)
            meff = np.concatenate(self._meff[k]) if self._meff[k] else np.zeros(0)
            vu, velu, mu, pu = units_of(r)
            periodic = r.function == "dihedral"
            if self._got_vel and len(self._dqdt[k]) == len(self._values[k]) and self._dqdt[k]:
                vel_k: np.ndarray | None = np.concatenate(self._dqdt[k])
                estimated = estimated_by_reader
            else:
                vel_k = finite_difference_velocity(values, time, periodic=periodic)
                estimated = True
            mom = None if vel_k is None else meff * vel_k
            out.append(CoordinateSeries(
                spec=r.spec, label=r.label, unit=vu, time_ps=time, values=values, velocity=vel_k, m_eff=meff,
                momentum=mom, momentum_unit=pu, velocities_estimated=estimated, velocity_unit=velu,
                m_eff_unit=mu, periodic=periodic, start=start, stop=stop, chunk_frames=chunk,
            ))
        return out


# ------------------------------------------------------------------------------------------------------
# kinetic energy and temperature per group


@dataclass(frozen=True)
class GroupKinetics:
    """Kinetic energy and temperature per frame, of all atoms and of groups, with equipartition per group.

    time_ps : (n,) ps; kinetic_kJ_per_mol, com_kinetic_kJ_per_mol : (n,) kJ/mol; temperature_K : (n,) K
    group_kinetic_kJ_per_mol : (n, G) kJ/mol, columns in the order of ``group_names``
    groups : per-group temperatures with errors (``temperature.group_temperatures``)
    settings : n_com, n_constraints, group sizes, start, stop, chunk_frames
    """

    time_ps: np.ndarray
    kinetic_kJ_per_mol: np.ndarray
    com_kinetic_kJ_per_mol: np.ndarray
    temperature_K: np.ndarray
    n_dof: int
    group_names: tuple[str, ...]
    group_kinetic_kJ_per_mol: np.ndarray
    group_dof: tuple[float, ...]
    groups: tuple[GroupTemperature, ...]
    velocities_estimated: bool
    settings: dict[str, Any] = field(default_factory=dict)


class GroupTemperatureConsumer:
    """Kinetic temperature of all atoms and of atom groups, frame by frame (needs velocities).

    Parameters
    ----------
    run : Run
    groups : mapping name -> atom indices, optional
        Default: ``temperature.default_groups`` (by residue name; by element too when nothing is
        constrained), as the audit chooses them.
    n_com : int
        Centre-of-mass degrees of freedom removed (default 3).
    n_constraints : int, optional
        Default: the run's metadata, else 0. Constraints are shared between groups in proportion to atom
        counts (no rigid-pair inference here: the audit infers them from positions).
    significance_z : float
        Passed to ``group_temperatures``.

    Kinetic energies are those of ``temperature.kinetic_energy`` (squared speeds per atom in float32, sums
    over atoms in float64, all groups in one product); the temperature is T = 2 K / (N_dof k_B). Groups
    may overlap each other (an atom listed twice in one group counts once).
    """

    needs_positions = False
    needs_velocities = True

    def __init__(self, run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
                 n_com: int = 3, n_constraints: int | None = None, significance_z: float = 3.0) -> None:
        from phasewake.core.analyses import temperature as tm

        if run.frames is None or not run.frames.has_velocities:
            raise MissingDataError("the run holds no velocities (and none can be estimated)", path=_path(run))
        self.run = run
        n_con = n_constraints if n_constraints is not None else (run.metadata.n_constraints or 0)
        self.n_constraints = int(n_con)
        self.n_com = int(n_com)
        self.significance_z = float(significance_z)
        if groups is None:
            groups = tm.default_groups(run.topology, run.n_atoms, by_element=(self.n_constraints == 0))
        self.group_atoms = {k: np.asarray(v, dtype=np.int64) for k, v in groups.items()}
        self.atoms: np.ndarray | None = None
        self._masses = np.asarray(run.masses_amu, dtype=np.float64)
        self._kin: list[np.ndarray] = []
        self._com: list[np.ndarray] = []
        self._gk: list[np.ndarray] = []
        self._time: list[np.ndarray] = []
        self._local: dict[str, np.ndarray] = {}
        self._range = (0, 0, DEFAULT_CHUNK_FRAMES)
        w = np.zeros((run.n_atoms, 1 + len(self.group_atoms)))
        w[:, 0] = 0.5 * self._masses
        for j, idx in enumerate(self.group_atoms.values()):
            w[idx, 1 + j] = 0.5 * self._masses[idx]
        self._weights = w
        self._m32 = self._masses.astype(np.float32)
        self._mtot = float(self._masses.sum())

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        if columns is not None:
            raise AnalysisError("the temperature needs every atom's velocity")
        self._range = (start, stop, chunk_frames)

    def update(self, chunk: FrameChunk) -> None:

        v = chunk.velocities_nm_per_ps
        if v is None:
            raise MissingDataError("velocities are missing in a chunk of frames", path=_path(self.run))
        self._time.append(np.asarray(chunk.time_ps, dtype=np.float64))
        # K = sum_i m_i |v_i|^2 / 2 as temperature.kinetic_energy, for all atoms and every group at once:
        # |v_i|^2 per atom in float32 (3 terms), the mass-weighted sums over atoms in float64 (one product)
        v = np.asarray(v, dtype=np.float32)
        v2 = np.einsum("fai,fai->fa", v, v).astype(np.float64)
        both = v2 @ self._weights  # (k, 1 + G)
        self._kin.append(both[:, 0])
        self._gk.append(both[:, 1:])
        p = np.matmul(self._m32, v).astype(np.float64)  # (k, 3) total momentum
        self._com.append(np.einsum("fi,fi->f", p, p) / (2.0 * self._mtot))

    def finish(self) -> GroupKinetics:
        from phasewake.core.analyses import temperature as tm

        start, stop, chunk = self._range
        kin = np.concatenate(self._kin) if self._kin else np.zeros(0)
        com = np.concatenate(self._com) if self._com else np.zeros(0)
        names = tuple(self.group_atoms)
        gk = np.concatenate(self._gk) if self._gk else np.zeros((0, len(names)))
        n_dof = tm.degrees_of_freedom(self.run.n_atoms, n_constraints=self.n_constraints, n_com=self.n_com)
        t_all = tm.kinetic_temperature(kin, n_dof)
        gdof = tm.group_degrees_of_freedom(self.group_atoms, self._masses, n_com=self.n_com,
                                           n_constraints=self.n_constraints)
        gt = tm.group_temperatures(gk, [gdof[k] for k in names], list(names),
                                   [int(self.group_atoms[k].size) for k in names], t_all,
                                   significance_z=self.significance_z) if names and kin.size else ()
        return GroupKinetics(
            time_ps=np.concatenate(self._time) if self._time else np.zeros(0), kinetic_kJ_per_mol=kin,
            com_kinetic_kJ_per_mol=com, temperature_K=t_all, n_dof=int(n_dof), group_names=names,
            group_kinetic_kJ_per_mol=gk, group_dof=tuple(float(gdof[k]) for k in names), groups=tuple(gt),
            velocities_estimated=bool(getattr(self.run.frames, "velocities_estimated", False)),
            settings={"n_com": self.n_com, "n_constraints": self.n_constraints,
                      "groups": {k: int(v.size) for k, v in self.group_atoms.items()},
                      "significance_z": self.significance_z, "start": start, "stop": stop,
                      "chunk_frames": chunk},
        )


# ------------------------------------------------------------------------------------------------------
# VACF


class VACFConsumer:
    """Velocity autocorrelation, as :func:`phasewake.core.analyses.velocity.vacf` with stride 1.

    Parameters are those of ``vacf`` (``groups``, ``mass_weighted``, ``max_lag_ps``,
    ``max_buffer_bytes``); ``start``/``stop`` must be the pass's range (they set the lag window).
    ``finish()`` returns the ``VACFResult`` that ``drive(vacf(run, ..., start=start, stop=stop))`` returns.
    """

    needs_positions = False
    needs_velocities = True

    def __init__(self, run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
                 mass_weighted: bool = False, max_lag_ps: float | None = None, start: int = 0,
                 stop: int | None = None, max_buffer_bytes: int | None = None) -> None:
        from phasewake.core.analyses import velocity as vel

        if run.frames is None or not run.frames.has_velocities:
            raise MissingDataError("the run holds no velocities (and none can be estimated)", path=_path(run))
        buf = vel.DEFAULT_BUFFER_BYTES if max_buffer_bytes is None else int(max_buffer_bytes)
        self.run = run
        self.start, self.stop = int(start), stop
        self.dt = vel._frame_spacing(run, self.start, stop, 1)
        n_sel = len(range(self.start, run.frames.n_frames if stop is None else min(stop, run.frames.n_frames)))
        self.lab, self.names, self.sizes = vel._group_labels(run.n_atoms, groups)
        used = np.flatnonzero(self.lab >= 0)
        self.notes: list[str] = []
        if max_lag_ps is None:
            self.lag, self.notes = vel._default_lag(n_sel, used.size, buf)
        else:
            self.lag = int(max(1, min(round(max_lag_ps / self.dt), n_sel)))
            need = vel.BlockCorrelator.buffer_bytes(used.size, self.lag)
            if need > 4 * buf:
                from phasewake.core.errors import ResourceError

                raise ResourceError(f"a lag window of {max_lag_ps} ps over {used.size} atoms needs "
                                    f"{need / 2**30:.1f} GiB; choose fewer atoms or a shorter window")
        self.mass_weighted = bool(mass_weighted)
        self.groups = groups
        self.atoms: np.ndarray | None = None if used.size == run.n_atoms else used.astype(np.int64)
        self._corr: Any = None

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        from phasewake.core.analyses.velocity import BlockCorrelator

        want_stop = self.run.n_frames if self.stop is None else min(int(self.stop), self.run.n_frames)
        if (start, stop) != (self.start, want_stop):
            raise AnalysisError(f"the VACF was set up for frames {self.start}:{want_stop}, the pass reads "
                                f"{start}:{stop}")
        cols = np.arange(self.run.n_atoms) if columns is None else columns
        m = np.asarray(self.run.masses_amu, dtype=float)[cols]
        w = m if self.mass_weighted else np.ones(cols.size)
        self._corr = BlockCorrelator(n_atoms=cols.size, max_lag=self.lag, weights=w, group_of_atom=self.lab[cols],
                                     n_groups=len(self.names))

    def update(self, chunk: FrameChunk) -> None:
        if chunk.velocities_nm_per_ps is None:
            raise MissingDataError("the frames came without velocities", path=_path(self.run))
        self._corr.update(chunk.velocities_nm_per_ps)

    def finish(self) -> VACFResult:
        from phasewake.core.analyses.velocity import _vacf_finish

        settings = {"groups": {k: len(v) for k, v in (self.groups or {}).items()},
                    "mass_weighted": self.mass_weighted, "max_lag": self.lag, "start": self.start,
                    "stop": self.stop, "stride": 1}
        return _vacf_finish(self._corr, sizes=self.sizes, names=self.names, dt_ps=self.dt,
                            mass_weighted=self.mass_weighted,
                            estimated=bool(getattr(self.run.frames, "velocities_estimated", False)),
                            settings=settings, notes=list(self.notes))


# ------------------------------------------------------------------------------------------------------
# PCA


class PCAConsumer(PCAReduction):
    """The PCA covariance (exact route) or the one-pass Nystrom sketch (randomized, ``n_iter=0``).

    Settings are those of :func:`phasewake.core.analyses.projection.compute_pca` except ``start``, ``stop`` (the
    pass's) and ``projections``; ``finish()`` returns the :class:`~phasewake.core.analyses.projection.PCAResult`
    that ``compute_pca(run, ..., start=, stop=, projections=False)`` returns, to float rounding identical
    (the same reduction: blocks of ``chunk_frames`` frames whatever the pass's chunks; reference: the
    first frame of the pass unless ``reference_nm``). Subspace iteration (``n_iter`` > 0) needs more
    passes and is refused; projections need the eigenvectors, so a later pass with
    :class:`PCAProjectionConsumer`.
    """

    def __init__(self, run: Run, *, projections: bool = False, **settings: Any) -> None:
        if projections:
            raise AnalysisError("PCA projections need the eigenvectors first: add a PCAProjectionConsumer to a "
                                "second pass, or call projection.compute_pca")
        if "stride" in settings and int(settings["stride"]) != 1:
            raise AnalysisError("a frame pass reads every frame: stride must be 1 (use compute_pca for a stride)")
        for key in ("start", "stop"):
            if key in settings:
                raise AnalysisError(f"{key} is the pass's setting (FramePass / run_pass), not the PCA's")
        super().__init__(run, **settings)


class PCAProjectionConsumer(PCAProjection):
    """q_k(t), p_k(t) and cosine contents of a computed PCA (``compute_pca``'s projection pass)."""


# ------------------------------------------------------------------------------------------------------
# the pass


def _columns(run: Run, consumers: Mapping[str, ChunkConsumer]) -> np.ndarray | None:
    """The union of the consumers' atoms (None: every atom)."""
    if any(c.atoms is None for c in consumers.values()):
        return None
    columns = np.unique(np.concatenate([np.asarray(c.atoms, dtype=np.int64) for c in consumers.values()]))
    return None if columns.size == run.n_atoms else columns


def _n_read(run: Run, columns: np.ndarray | None) -> int:
    return run.n_atoms if columns is None else int(columns.size)


def _plan(run: Run, consumers: Mapping[str, ChunkConsumer]) -> list[dict[str, ChunkConsumer]]:
    """The reads of a pass: one, or two when consumers that need positions want only a few atoms and the
    others need velocities of many (a distance with its momentum beside a VACF of every atom): then the
    positions of the many are not read at all. Each byte of the file is still read once, bar the
    velocities of the few atoms, which both reads hold."""
    with_pos = {n: c for n, c in consumers.items() if c.needs_positions}
    vel_only = {n: c for n, c in consumers.items() if not c.needs_positions}
    if not with_pos or not vel_only:
        return [dict(consumers)]
    few = _n_read(run, _columns(run, with_pos))
    many = _n_read(run, _columns(run, vel_only))
    if 4 * few > many:  # reading the positions of the union costs little more than a second read
        return [dict(consumers)]
    return [with_pos, vel_only]


def feed(run: Run, consumers: Mapping[str, ChunkConsumer], *, start: int = 0, stop: int | None = None,
         stride: int = 1, chunk_frames: int | None = None) -> Iterator[int]:
    """Prepare every consumer, read frames [start, stop) with ``stride`` once, hand every chunk to each.

    A generator yielding the number of frames handed out so far after each chunk; the caller calls
    ``finish()`` (this is the loop of :func:`run_pass`, shared with ``projection.compute_pca``).
    Positions and velocities are read only if a consumer needs them, for the union of the atoms they need;
    when the consumers that need positions want only a few atoms (at most a quarter of the others'), those
    few are read apart (positions and velocities) and the rest without positions, the two reads interleaved
    chunk by chunk (:func:`_plan`). Every consumer sees its frames in order, in chunks of any length.
    """
    from itertools import zip_longest

    from phasewake.core.readers.common import iter_frame_chunks

    if run.frames is None:
        raise MissingDataError("the run has no frames (positions)", path=_path(run))
    if not consumers:
        raise AnalysisError("a frame pass needs at least one analysis")
    start_, stop_ = _frame_range(run, start, stop)
    chunk = int(chunk_frames or DEFAULT_CHUNK_FRAMES)
    reads = []
    for group in _plan(run, consumers):
        columns = _columns(run, group)
        want_pos = any(c.needs_positions for c in group.values())
        want_vel = any(c.needs_velocities for c in group.values()) and bool(run.frames.has_velocities)
        for c in group.values():
            c.prepare(columns, start=start_, stop=stop_, chunk_frames=chunk)
        kw: dict[str, Any] = {"chunk_frames": chunk, "start": start_, "stop": stop_, "atom_indices": columns,
                              "velocities": want_vel, "positions": want_pos}
        if int(stride) != 1:
            kw["stride"] = int(stride)
        reads.append((list(group.values()), iter_frame_chunks(run.frames, **kw)))
    done = [0] * len(reads)
    try:
        for chunks in zip_longest(*(it for _, it in reads)):
            for k, ch in enumerate(chunks):
                if ch is None:
                    continue
                for c in reads[k][0]:
                    c.update(ch)
                done[k] += ch.n_frames
            yield min(done)
    finally:
        for _, it in reads:
            close = getattr(it, "close", None)
            if close is not None:
                close()


def run_pass(run: Run, consumers: Mapping[str, ChunkConsumer], *, start: int = 0, stop: int | None = None,
             chunk_frames: int | None = None, workers: int | None = None) -> Work[dict[str, Any]]:
    """Read frames [start, stop) once and feed every chunk to every consumer.

    Parameters
    ----------
    run : Run
    consumers : mapping name -> consumer (:class:`CoordinatesConsumer`, :class:`GroupTemperatureConsumer`,
        :class:`VACFConsumer`, :class:`PCAConsumer`, :class:`PCAProjectionConsumer`, or anything with
        ``atoms``, ``needs_positions``, ``needs_velocities``, ``prepare``, ``update`` and ``finish``)
    start, stop : int
        Frame range (``stop`` None: to the end).
    chunk_frames : int, optional
        Frames per chunk (default ``run.DEFAULT_CHUNK_FRAMES``); peak memory is about one chunk of the
        atoms read.
    workers : int, optional
        Worker processes reading frame ranges (``phasewake.core.model.parallel``); default: the
        ``--workers`` setting, else automatic (several only for a large pass over XTC, TRR or DCD).

    Returns
    -------
    A generator yielding :class:`Progress` and returning ``{name: consumer.finish()}``.
    """
    if run.frames is None:
        raise MissingDataError("the run has no frames (positions)", path=_path(run))
    start_, stop_ = _frame_range(run, start, stop)
    if workers != 1:
        from phasewake.core.model import parallel

        if parallel.parallel_wanted(run, consumers, start_, stop_, workers):
            return (yield from parallel.ranges_pass(run, consumers, start=start_, stop=stop_,
                                                    chunk_frames=chunk_frames, workers=workers))
    n_total = stop_ - start_
    label = "one pass: " + ", ".join(consumers)
    for done in feed(run, consumers, start=start_, stop=stop_, chunk_frames=chunk_frames):
        yield Progress(done, n_total, label)
    return {name: c.finish() for name, c in consumers.items()}


class FramePass:
    """A builder for :func:`run_pass`: add analyses, then ``work()``.

    ::

        fp = FramePass(run, start=0, stop=None)
        fp.coordinates("q", ["distance(0, 1)"]); fp.temperatures("T"); fp.vacf("vacf", max_lag_ps=0.5)
        fp.pca("pca", atom_indices=ca, n_components=10); fp.audit_frames("audit")
        results = drive(fp.work())   # {"q": [...], "T": GroupKinetics, "vacf": VACFResult, "pca": PCAResult}
        # projections need the eigenvectors: a second pass (which can carry other analyses too)
        proj = drive(FramePass(run).pca_projections("proj", results["pca"]).work())["proj"]
    """

    def __init__(self, run: Run, *, start: int = 0, stop: int | None = None, chunk_frames: int | None = None) -> None:
        self.run = run
        self.start, self.stop, self.chunk_frames = int(start), stop, chunk_frames
        self.consumers: dict[str, ChunkConsumer] = {}

    def add(self, name: str, consumer: ChunkConsumer) -> FramePass:
        if name in self.consumers:
            raise AnalysisError(f"two analyses named {name!r} in one pass")
        self.consumers[name] = consumer
        return self

    def coordinates(self, name: str, specs: Sequence[str]) -> FramePass:
        return self.add(name, CoordinatesConsumer(self.run, specs))

    def temperatures(self, name: str, **settings: Any) -> FramePass:
        return self.add(name, GroupTemperatureConsumer(self.run, **settings))

    def vacf(self, name: str, **settings: Any) -> FramePass:
        return self.add(name, VACFConsumer(self.run, start=self.start, stop=self.stop, **settings))

    def pca(self, name: str, **settings: Any) -> FramePass:
        """The PCA covariance or one-pass sketch (:class:`PCAConsumer`; settings of ``compute_pca``)."""
        return self.add(name, PCAConsumer(self.run, **settings))

    def pca_projections(self, name: str, pca: PCAResult) -> FramePass:
        """Projections of a computed PCA (:class:`PCAProjectionConsumer`), in a later pass."""
        return self.add(name, PCAProjectionConsumer(self.run, pca))

    def audit_frames(self, name: str, **settings: Any) -> FramePass:
        """The audit's frame part (:class:`phasewake.core.analyses.audit.AuditFramesConsumer` with the choices
        ``audit_run`` makes; settings ``n_constraints``, ``groups``, ``segment_frames``,
        ``max_spectrum_segments``). Hand the result to ``audit_run(run, frames=..., same settings)``, which
        then reads no frames; it needs a pass over all frames and every atom."""
        from phasewake.core.analyses.audit import AuditFramesConsumer

        return self.add(name, AuditFramesConsumer.for_run(self.run, **settings))

    def work(self) -> Work[dict[str, Any]]:
        return run_pass(self.run, self.consumers, start=self.start, stop=self.stop, chunk_frames=self.chunk_frames)
