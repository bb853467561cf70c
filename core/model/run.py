"""The Run: what one finished MD run is, independent of the files it came from.

Internal units everywhere (see ``phasewake.core.units``): nm, ps, amu, kJ/mol, K, nm/ps.

Opening a run reads headers, not frames. Frames come from :meth:`FrameSource.iter_chunks` in bounded
chunks, so memory stays bounded whatever the file size.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

import numpy as np

# the chunk settings are process settings, like the thread count
from phasewake.core.settings import DEFAULT_CHUNK_FRAMES, budget_chunk_frames

if TYPE_CHECKING:  # mdtraj is heavy; import it only where frames or topologies are built
    import mdtraj

# Roles an energy-table column can play. Readers map file column names onto these.
ENERGY_ROLES = (
    "time",
    "step",
    "potential",
    "kinetic",
    "total",
    "conserved",
    "bath_heat",
    "temperature",
    "pressure",
    "volume",
    "density",
    "other",
)


@dataclass(frozen=True)
class Series:
    """One named series of an energy table, in internal units."""

    name: str
    values: np.ndarray  # shape (n_rows,), float64
    unit: str  # internal unit string, e.g. "kJ/mol", "K", "ps", "bar", "nm^3", "" for dimensionless
    role: str = "other"  # one of ENERGY_ROLES
    source: str = ""  # file (and column) it came from


@dataclass(frozen=True)
class TimeJoin:
    """A place where a file's time went back or repeated (a restart glued in); the later segment is kept."""

    time_ps: float  # time at which the kept later segment starts, ps
    back_from_ps: float  # time of the row (frame) just before the step back, ps
    n_dropped: int  # rows (frames) of the earlier segment dropped for it
    index: int  # row (frame) index of the join in the kept series
    where: str = ""  # file (and line) in words


@dataclass(frozen=True)
class EnergyTable:
    """Time series of scalar observables (energies, temperature, ...) with one shared time axis."""

    time_ps: np.ndarray  # shape (n_rows,)
    series: dict[str, Series]
    sources: tuple[str, ...] = ()
    joins: tuple[TimeJoin, ...] = ()  # restarts glued into the files (readers keep the later segment)

    def by_role(self, role: str) -> Series | None:
        """The first series with this role, or None."""
        for s in self.series.values():
            if s.role == role:
                return s
        return None

    def __len__(self) -> int:
        return int(self.time_ps.shape[0])


@dataclass
class FrameChunk:
    """A block of consecutive frames.

    positions_nm : ndarray, shape (n, n_atoms, 3), float32, nm
    velocities_nm_per_ps : ndarray, shape (n, n_atoms, 3), float32, nm/ps, or None
    box_nm : ndarray, shape (n, 3, 3) box edge vectors as rows (nm), or None when not periodic
    """

    start: int  # index of the first frame in the run
    time_ps: np.ndarray
    positions_nm: np.ndarray
    velocities_nm_per_ps: np.ndarray | None = None
    box_nm: np.ndarray | None = None

    @property
    def n_frames(self) -> int:
        return int(self.positions_nm.shape[0])


class FrameSource(Protocol):
    """Lazy, chunked access to a run's frames. Implementations live in ``phasewake.core.readers``."""

    n_frames: int
    n_atoms: int
    has_velocities: bool  # True when velocities can be had (stored or estimated)
    velocities_estimated: bool  # True when they are central differences of positions
    has_box: bool

    def iter_chunks(
        self,
        *,
        chunk_frames: int = DEFAULT_CHUNK_FRAMES,
        start: int = 0,
        stop: int | None = None,
        stride: int = 1,
        atom_indices: Sequence[int] | np.ndarray | None = None,
        velocities: bool = True,
        positions: bool = True,
    ) -> Iterator[FrameChunk]:
        """Chunks of frames. ``positions=False`` (for velocity-only analyses) may skip reading positions:
        ``positions_nm`` is then an empty array of shape (n, 0, 3) and ``box_nm`` may be None. Every frame
        source takes every one of these keywords."""
        ...

    def read_frame(self, index: int) -> FrameChunk: ...


def no_positions(n_frames: int) -> np.ndarray:
    """The ``positions_nm`` of a chunk read without positions: shape (n_frames, 0, 3)."""
    return np.empty((n_frames, 0, 3), np.float32)


@dataclass(frozen=True)
class FrameRequest:
    """One ``iter_chunks`` call as :meth:`ChunkedFrames.iter_chunks` hands it to a source's ``_read``:
    checked, clamped to the run and cut to the chunk budget."""

    frames: np.ndarray  # run frames to read, increasing (never empty): start, stop clamped to the run, stride
    stride: int
    atoms: np.ndarray | None  # the atoms to read (intp, in the order asked), or None for every atom
    n_read: int  # atoms per frame read
    velocities: bool  # velocities asked for (a source hands them out where it has them)
    positions: bool
    chunk: int  # frames per chunk: at most ``chunk_frames`` and within the chunk memory budget

    @property
    def start(self) -> int:
        return int(self.frames[0])

    @property
    def stop(self) -> int:
        return int(self.frames[-1]) + 1

    def batches(self) -> Iterator[np.ndarray]:
        """The run frames of each chunk, in order."""
        for i in range(0, self.frames.size, self.chunk):
            yield self.frames[i : i + self.chunk]

    def pick(self, per_atom: np.ndarray) -> np.ndarray:
        """The asked atoms of an array (frames, atoms, ...): C-ordered, unlike ``a[:, atoms]``."""
        return per_atom if self.atoms is None else np.take(per_atom, self.atoms, axis=1)

    def keywords(self, **change: Any) -> dict[str, Any]:
        """``iter_chunks`` keywords asking another source for these frames (a wrapper's read), with changes."""
        kw: dict[str, Any] = {"chunk_frames": self.chunk, "start": self.start, "stop": self.stop,
                              "stride": self.stride, "atom_indices": self.atoms, "velocities": self.velocities,
                              "positions": self.positions}
        kw.update(change)
        return kw


class ChunkedFrames:
    """Base of the frame sources: :meth:`iter_chunks` checks and clamps its arguments, applies the chunk
    memory budget and hands one :class:`FrameRequest` to the source's :meth:`_read`, which yields the
    chunks. :meth:`read_frame` is the one-frame chunk of ``iter_chunks`` (negative indices count from the
    end; out of range is an IndexError)."""

    n_frames: int
    n_atoms: int
    has_velocities: bool
    velocities_estimated: bool
    has_box: bool
    # True for a source that pickles small and holds no open file (its path, an index, a clock): a worker
    # process can take it as it is instead of opening the run again (core/model/parallel.py)
    portable: bool = False

    def iter_chunks(
        self,
        *,
        chunk_frames: int = DEFAULT_CHUNK_FRAMES,
        start: int = 0,
        stop: int | None = None,
        stride: int = 1,
        atom_indices: Sequence[int] | np.ndarray | None = None,
        velocities: bool = True,
        positions: bool = True,
    ) -> Iterator[FrameChunk]:
        """Chunks of frames ``start:stop:stride`` (``stop`` clamped to the run; nothing when the range is
        empty) of the atoms ``atom_indices`` (all when None); see :class:`FrameSource`."""
        start, stride = int(start), int(stride)
        if start < 0 or stride < 1:
            raise ValueError(f"frames {start}:{stop}:{stride}: start must be 0 or more and stride 1 or more")
        frames = np.arange(start, self.n_frames if stop is None else min(int(stop), self.n_frames), stride)
        atoms = None if atom_indices is None else np.asarray(atom_indices, dtype=np.intp)
        if atoms is not None and (atoms.ndim != 1 or np.any((atoms < 0) | (atoms >= self.n_atoms))):
            raise IndexError(f"atom indices must be a list of atoms 0 to {self.n_atoms - 1} of the run, not "
                             f"{np.asarray(atom_indices).tolist()!r:.80}")
        n_read = self.n_atoms if atoms is None else int(atoms.size)
        chunk = budget_chunk_frames(chunk_frames, n_read, n_arrays=self._arrays_per_frame(velocities, positions))
        if frames.size:
            yield from self._read(FrameRequest(frames=frames, stride=stride, atoms=atoms, n_read=n_read,
                                               velocities=bool(velocities), positions=bool(positions), chunk=chunk))

    def _arrays_per_frame(self, velocities: bool, positions: bool) -> int:
        """Per-atom arrays a chunk holds at once (for the chunk budget): positions and velocities asked for."""
        return int(positions) + int(velocities and self.has_velocities)

    def _read(self, request: FrameRequest) -> Iterator[FrameChunk]:
        """The chunks of a checked request: what each frame source implements."""
        raise NotImplementedError

    def describe_as(self, inner: FrameSource, n_frames: int) -> None:
        """Say of this source's frames what ``inner`` says of its own (for a source wrapping another): atoms,
        velocities, box and the precision of the positions; the wrapper then sets what it changes."""
        self.n_frames = int(n_frames)
        self.n_atoms = inner.n_atoms
        self.has_velocities = inner.has_velocities
        self.velocities_estimated = inner.velocities_estimated
        self.has_box = inner.has_box
        self.positions_lossy = bool(getattr(inner, "positions_lossy", False))
        self.positions_precision_nm = getattr(inner, "positions_precision_nm", None)
        self.portable = bool(getattr(inner, "portable", False))

    def read_frame(self, index: int) -> FrameChunk:
        if not -self.n_frames <= index < self.n_frames:
            raise IndexError(f"frame {index} out of range (run has {self.n_frames})")
        index %= self.n_frames
        return next(self.iter_chunks(start=index, stop=index + 1, chunk_frames=1))


@dataclass
class RunMetadata:
    """What is known about how the run was made; None means unknown."""

    timestep_ps: float | None = None  # integration time step (not the frame spacing)
    ensemble: str | None = None  # "NVE", "NVT", "NPT", ...
    thermostat: str | None = None  # "langevin", "nose-hoover", "csvr", "none", ...
    temperature_K: float | None = None  # target temperature of a thermostat
    n_constraints: int | None = None
    constraints_source: str | None = None  # "metadata", "user", "inferred from rigid bonds"
    com_motion_removed: bool | None = None
    integrator: str | None = None  # "velocity-verlet", "leapfrog", "baoab", ...
    barostat: str | None = None  # "none", "parrinello-rahman", "c-rescale", "berendsen", "monte-carlo", ...
    pressure_bar: float | None = None  # target pressure of a barostat
    constraints: str | None = None  # what is held rigid, in words: "none", "rigid water", "bonds to hydrogen"
    n_dof: int | None = None  # the engine's own count of kinetic degrees of freedom, where it reports one
    velocities_half_step: bool | None = None  # True: stored velocities are half a step off the positions
    conserved_quantity: str | None = None  # name of the energy series the engine conserves ("Conserved En.")
    units_style: str | None = None  # the engine's unit system where files carry none ("lammps real", ...)
    engine: str | None = None  # "GROMACS 2022.5", "LAMMPS 29 Sep 2021", "OpenMM", ...
    # field name -> where its value came from, in words a user reads: "md.log", "user",
    # "inferred: sigma_E/sigma_K = 1.02, no drift"; also part -> file ("positions": "run.dcd")
    sources: dict[str, str] = field(default_factory=dict)
    extra: dict[str, Any] = field(default_factory=dict)


@dataclass
class Run:
    """One finished run: topology, masses, time axis, lazy frames, energies and metadata."""

    name: str
    paths: tuple[Path, ...]
    topology: mdtraj.Topology | None
    masses_amu: np.ndarray  # shape (n_atoms,)
    time_ps: np.ndarray  # shape (n_frames,), time of each frame
    frames: FrameSource | None  # None for a run that has only an energy table
    energies: EnergyTable | None
    metadata: RunMetadata = field(default_factory=RunMetadata)
    warnings: list[str] = field(default_factory=list)

    @property
    def n_atoms(self) -> int:
        return int(self.masses_amu.shape[0])

    @property
    def virtual_sites(self) -> np.ndarray:
        """Indices of the massless particles (virtual sites such as TIP4P's M: placed from other atoms, they
        carry no degree of freedom and no kinetic energy). Unknown (NaN) masses are not counted."""
        return np.flatnonzero(np.asarray(self.masses_amu) == 0.0)

    @property
    def n_massive(self) -> int:
        """Particles with mass (or unknown mass): the atoms whose 3 coordinates are degrees of freedom."""
        return self.n_atoms - int(self.virtual_sites.size)

    @property
    def n_frames(self) -> int:
        return int(self.time_ps.shape[0])

    @property
    def frame_spacing_ps(self) -> float | None:
        if self.time_ps.shape[0] < 2:
            return None
        return float(np.median(np.diff(self.time_ps)))

    @property
    def has_velocities(self) -> bool:
        return self.frames is not None and self.frames.has_velocities

    def window(self, start: int, stop: int) -> Run:
        """This run cut to frames [start, stop) (:func:`window_run`)."""
        return window_run(self, start, stop)


# ------------------------------------------------------------------------------------------- run windows
# Windowing is an operation of the model, not of a front end: a run cut to frames [start, stop), its energy
# table cut to the same time span, no data copied. Chunk ``start`` indices count from the window's first
# frame, as for a run written only over that span; ``offset`` (the window's first frame in the whole run)
# joins the cache key, so two windows of one run never share a result.


class WindowFrames(ChunkedFrames):
    """A frame source restricted to frames [offset, stop) of another one (a window of a window is a window
    of the first source)."""

    base: FrameSource
    offset: int

    def __init__(self, base: FrameSource, offset: int, stop: int) -> None:
        if isinstance(base, WindowFrames):
            offset, stop, base = base.offset + int(offset), base.offset + int(stop), base.base
        self.base = base
        self.offset = int(offset)
        self.describe_as(base, int(stop) - int(offset))

    def _read(self, request: FrameRequest) -> Iterator[FrameChunk]:
        for ch in self.base.iter_chunks(**request.keywords(start=self.offset + request.start,
                                                           stop=self.offset + request.stop)):
            ch.start = ch.start - self.offset
            yield ch


def table_in_span(table: EnergyTable, lo: float, hi: float) -> EnergyTable:
    """The rows of ``table`` with lo <= t <= hi (ps), both ends within 1e-9 relative (frame and row times
    written by different files round differently)."""
    et = np.asarray(table.time_ps, float)
    sel = (et >= lo - 1e-9 * max(1.0, abs(lo))) & (et <= hi + 1e-9 * max(1.0, abs(hi)))
    return EnergyTable(time_ps=et[sel], sources=table.sources,
                       series={k: dataclasses.replace(v, values=np.asarray(v.values)[sel])
                               for k, v in table.series.items()})


def window_run(run: Run, start: int, stop: int) -> Run:
    """The run cut to frames [start, stop) (energies cut to the same time span); no data copied.

    The whole run (``start <= 0`` and ``stop >= run.n_frames``) is returned as it is.
    """
    start, stop = max(0, int(start)), min(int(stop), run.n_frames)
    if start <= 0 and stop >= run.n_frames:
        return run
    t = run.time_ps
    energies = None if run.energies is None else table_in_span(run.energies, float(t[start]), float(t[stop - 1]))
    frames = None if run.frames is None else WindowFrames(run.frames, start, stop)
    return dataclasses.replace(run, time_ps=t[start:stop], frames=frames, energies=energies, name=run.name)
