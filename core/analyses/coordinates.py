"""Coordinates of a run with their analytic gradients, velocities, effective masses and momenta.

For a coordinate q(x) of the Cartesian positions x (atoms i with masses m_i):

* velocity      dq/dt = sum_i grad_i q . v_i          (from the stored velocities)
* effective mass m_eff = [ sum_i |grad_i q|^2 / m_i ]^-1
* momentum      p = m_eff dq/dt

This is the effective mass of a generalised coordinate used in blue-moon / Z-factor work
(Carter, Ciccotti, Hynes and Kapral, Chem. Phys. Lett. 156, 472 (1989)); for a distance it is the
reduced mass m_i m_j / (m_i + m_j). It is a function of the configuration (exact for linear q such
as x(i) or a principal component; frame by frame otherwise).

Canonical check used by the tests: velocities are Gaussian with <v_i v_i^T> = (kT/m_i) 1 and
independent of positions, so for fixed x, dq/dt = sum_i g_i . v_i is Gaussian with variance
sum_i |g_i|^2 kT/m_i = kT/m_eff(x); averaging over x gives <(dq/dt)^2> = kT <1/m_eff>.

Periodic boxes: every difference vector goes through the minimum image (fractional coordinates
rounded to the nearest image; for triclinic boxes the 27 neighbours of that image are searched); groups (com_distance, rg) are made whole around their first atom. Angles are in
[0, pi], dihedrals in (-pi, pi] with the sign convention of mdtraj.compute_dihedrals. rmsd assumes
the group is whole (no minimum image).

Streaming: :func:`compute_coordinates` is the frame pass (``core/model/framepass.py``) with one
:class:`CoordinatesConsumer`, which reads only the atoms the coordinates need, chunk by chunk, and evaluates
every coordinate vectorised over frames and atoms.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

from phasewake.core.analyses.atom_groups import solute_atoms, solvent_atoms  # noqa: F401 - re-exported
from phasewake.core.analyses.coordspec import CoordinateDef, ResolvedCoordinate, parse, resolve
from phasewake.core.analyses.geometry import (  # noqa: F401 - re-exported: the coordinates' kernels
    evaluate_arrays,
    kabsch,
    minimum_image,
    value_and_gradient,
)
from phasewake.core.analyses.request import AnalysisRequest
from phasewake.core.analyses.result import ResultMixin
from phasewake.core.errors import AnalysisError, CoordinateSpecError, InputError, MissingDataError
from phasewake.core.progress import Work, labelled
from phasewake.core.readers.common import check_masses

if TYPE_CHECKING:

    from phasewake.core.model.run import FrameChunk, Run

# Frames per block of the PCA products behind pc(k) (float32 sums depend on the blocks): 256, the blocks
# pc(k) has always used; independent of how many frames a pass reads at a time.
PC_BLOCK_FRAMES = 256


@dataclass(frozen=True)
class CoordinateSeries(ResultMixin):
    """One coordinate over the frames of a run.

    time_ps : (n_frames,) ps
    values : (n_frames,) in ``unit``
    velocity : (n_frames,) dq/dt in ``velocity_unit``, or None
    m_eff : (n_frames,) effective mass in ``m_eff_unit``, or None
    momentum : (n_frames,) m_eff dq/dt in ``momentum_unit``, or None
    velocities_estimated : True when dq/dt came from finite differences (of q, or of positions by
        the reader) rather than from stored velocities.
    """

    spec: str
    label: str
    unit: str
    time_ps: np.ndarray
    values: np.ndarray
    velocity: np.ndarray | None
    m_eff: np.ndarray | None
    momentum: np.ndarray | None
    momentum_unit: str
    velocities_estimated: bool
    velocity_unit: str = ""
    m_eff_unit: str = ""
    periodic: bool = False  # True for dihedrals (period 2 pi)
    start: int = 0
    stop: int | None = None


_UNITS: dict[str, tuple[str, str, str, str]] = {
    # function -> (value, velocity, m_eff, momentum)
    "x": ("nm", "nm/ps", "amu", "amu nm/ps"),
    "distance": ("nm", "nm/ps", "amu", "amu nm/ps"),
    "com_distance": ("nm", "nm/ps", "amu", "amu nm/ps"),
    "rg": ("nm", "nm/ps", "amu", "amu nm/ps"),
    "rmsd": ("nm", "nm/ps", "amu", "amu nm/ps"),
    "angle": ("rad", "rad/ps", "amu nm^2/rad^2", "amu nm^2/(rad ps)"),
    "pc": ("nm amu^1/2", "nm amu^1/2/ps", "1", "nm amu^1/2/ps"),
    "pc_unweighted": ("nm", "nm/ps", "amu", "amu nm/ps"),
}


def units_of(resolved: ResolvedCoordinate) -> tuple[str, str, str, str]:
    """(value, velocity, m_eff, momentum) units of a resolved coordinate."""
    fn = resolved.function
    if fn in ("y", "z"):
        fn = "x"
    if fn == "dihedral":
        fn = "angle"
    if fn == "pc" and resolved.pca is not None and not resolved.pca.mass_weighted:
        fn = "pc_unweighted"
    return _UNITS[fn]


# ----------------------------------------------------------------------------------------------
# geometry kernels (pure numpy, vectorised over frames)




def resolve_for_run(spec: str | CoordinateDef, run: Run) -> ResolvedCoordinate:
    """Parse (if needed) and resolve a specification against a run, filling pc's default group."""
    base = run.paths[0].parent if run.paths else None
    resolved = resolve(parse(spec) if isinstance(spec, str) else spec, n_atoms=run.n_atoms,
                       topology=run.topology, base_dir=base)
    if resolved.function == "pc" and resolved.groups[0].size == 0:
        resolved = replace(resolved, groups=(solute_atoms(run.topology, run.n_atoms),))
    return resolved


def stated_coordinate(spec: str, run: Run, *, option: str = "--coordinate") -> ResolvedCoordinate:
    """A coordinate the user gave by name (``option``: how they gave it), checked before any work: the run
    must have frames and the specification must resolve on it (InputError / CoordinateSpecError)."""
    if run.frames is None:
        raise InputError(f"{option} needs trajectory frames; this run has only an energy table")
    return resolve_for_run(spec, run)


def resolve_group(text: str, run: Run, *, option: str) -> np.ndarray:
    """The atom indices of a group written in the coordinate grammar's group form (an index, a range
    ``"0-9"``, a list ``"[0, 4]"`` or a quoted mdtraj query), as inside ``rg(...)``.

    A mistake raises CoordinateSpecError naming ``option`` (how the user gave the group) with the
    position in ``text``.
    """
    wrapped = f"rg({text})"
    try:
        r = resolve(parse(wrapped), n_atoms=run.n_atoms, topology=run.topology)
    except CoordinateSpecError as exc:
        pos = None if exc.position is None else max(0, exc.position - 3)  # 3: len("rg(")
        raise CoordinateSpecError(f"{option}: {exc.problem.splitlines()[0]}", spec=text, position=pos) from exc
    return r.groups[0]


class CoordinatesConsumer:
    """Coordinates with velocities, effective masses and momenta: the frame consumer of
    :func:`compute_coordinates` (see :mod:`phasewake.core.model.framepass`).

    Parameters
    ----------
    run : Run
    specs : sequence of str or ResolvedCoordinate
        Coordinate specifications (``phasewake.core.analyses.coordspec``); a ``pc(k)`` one only resolved
        with its PCA attached (``compute_coordinates`` computes it first).

    ``finish()`` returns ``list[CoordinateSeries]`` in the order of ``specs``. ``merge(later)`` appends the
    frames a consumer of the same specs saw right after these; dq/dt from finite differences (no stored
    velocities) is taken in ``finish``, over the whole range, so it equals the serial pass.
    """

    needs_positions = True

    def __init__(self, run: Run, specs: Sequence[str | ResolvedCoordinate]) -> None:
        if run.frames is None:
            raise MissingDataError("the run has no frames (positions)", path=run.paths[0] if run.paths else None)
        if not specs:
            raise CoordinateSpecError("no coordinate given")
        self.path = run.paths[0] if run.paths else None
        check_masses(run.masses_amu, path=self.path, where=run.metadata.sources.get("masses", "masses"))
        self.resolved = [s if isinstance(s, ResolvedCoordinate) else resolve_for_run(s, run) for s in specs]
        virtual = set(run.virtual_sites.tolist())
        for r in self.resolved:
            if r.function == "pc" and r.pca is None:
                raise CoordinateSpecError("pc(k) needs a PCA pass first: use coordinates.compute_coordinates",
                                          spec=r.spec)
            hit = sorted(virtual.intersection(r.atoms.tolist())) if r.function != "pc" else []
            if hit:  # m_eff = [sum |grad_i q|^2 / m_i]^-1 has no meaning with m_i = 0
                raise AnalysisError(
                    f"coordinate {r.spec}: atom {hit[0]} is a massless virtual site"
                    + (f" ({len(hit)} in all)" if len(hit) > 1 else "") + ": it is placed from other atoms and "
                    "has no momentum of its own, so the coordinate would have no conjugate momentum; use atoms "
                    "with mass (e.g. the oxygen of a TIP4P water)", path=self.path)
        self.atoms: np.ndarray | None = np.unique(np.concatenate([r.atoms for r in self.resolved])).astype(np.int64)
        self.needs_velocities = bool(run.frames.has_velocities)
        self.estimated_by_reader = bool(getattr(run.frames, "velocities_estimated", False))
        self.masses = np.asarray(run.masses_amu, dtype=np.float64)
        self._remap: list[ResolvedCoordinate] = []
        self._local_masses = np.zeros(0)
        self._values: list[list[np.ndarray]] = [[] for _ in self.resolved]
        self._dqdt: list[list[np.ndarray]] = [[] for _ in self.resolved]
        self._meff: list[list[np.ndarray]] = [[] for _ in self.resolved]
        self._time: list[np.ndarray] = []
        self._got_vel = self.needs_velocities
        self._range = (0, 0)

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        from phasewake.core.model.feeding import local_columns

        self._range = (start, stop)
        self._remap = [replace(r, groups=tuple(local_columns(columns, np.asarray(g, dtype=np.int64))
                                               for g in r.groups)) for r in self.resolved]
        self._local_masses = self.masses if columns is None else self.masses[columns]

    def update(self, chunk: FrameChunk) -> None:
        vel = chunk.velocities_nm_per_ps if self.needs_velocities else None
        if self.needs_velocities and vel is None:
            self._got_vel = False
        self._time.append(np.asarray(chunk.time_ps, dtype=np.float64))
        for k, r in enumerate(self._remap):
            v, dq, me = evaluate_arrays(r, chunk.positions_nm, vel, self._local_masses, chunk.box_nm)
            if not np.all(np.isfinite(v)):  # names the file and the frame
                refuse_not_finite(r, chunk, v, self.path)
            self._values[k].append(v)
            if dq is not None:
                self._dqdt[k].append(dq)
            if me is not None:
                self._meff[k].append(me)

    def merge(self, later: CoordinatesConsumer) -> None:
        from phasewake.core.model.feeding import check_next

        check_next(self._range, later._range, "coordinates")
        if [r.spec for r in later.resolved] != [r.spec for r in self.resolved]:
            raise AnalysisError("coordinates: only consumers of the same coordinates can be merged")
        self._time += later._time
        for k in range(len(self.resolved)):
            self._values[k] += later._values[k]
            self._dqdt[k] += later._dqdt[k]
            self._meff[k] += later._meff[k]
        self._got_vel = self._got_vel and later._got_vel
        self._range = (self._range[0], later._range[1])

    def finish(self) -> list[CoordinateSeries]:
        start, stop = self._range
        time = np.concatenate(self._time) if self._time else np.zeros(0)
        out: list[CoordinateSeries] = []
        for k, r in enumerate(self.resolved):
            values = np.concatenate(self._values[k]) if self._values[k] else np.zeros(0)
            meff = np.concatenate(self._meff[k]) if self._meff[k] else np.zeros(0)
            vu, velu, mu, pu = units_of(r)
            periodic = r.function == "dihedral"
            if self._got_vel and len(self._dqdt[k]) == len(self._values[k]) and self._dqdt[k]:
                vel_k: np.ndarray | None = np.concatenate(self._dqdt[k])
                estimated = self.estimated_by_reader
            else:
                vel_k = finite_difference_velocity(values, time, periodic=periodic)
                estimated = True
            mom = None if vel_k is None else meff * vel_k
            out.append(CoordinateSeries(
                spec=r.spec, label=r.label, unit=vu, time_ps=time, values=values, velocity=vel_k, m_eff=meff,
                momentum=mom, momentum_unit=pu, velocities_estimated=estimated, velocity_unit=velu,
                m_eff_unit=mu, periodic=periodic, start=start, stop=stop,
            ))
        return out


def compute_coordinates(
    run: Run,
    specs: Sequence[str],
    *,
    start: int = 0,
    stop: int | None = None,
    mass_weighted_pca: bool = True,
    fit_pca: bool = True,
) -> Work[list[CoordinateSeries]]:
    """Compute coordinates (with velocities, effective masses and momenta) over a run, streaming.

    A generator: yields :class:`Progress`, returns ``list[CoordinateSeries]`` in the order of
    ``specs``: the frame pass with one :class:`CoordinatesConsumer`. ``pc(k)`` specifications trigger a
    first pass that computes the PCA of their group (see
    :func:`phasewake.core.analyses.projection.compute_pca`; ``mass_weighted_pca`` and ``fit_pca`` are its
    settings).

    Raises
    ------
    CoordinateSpecError for bad specifications; MissingDataError when the run has no frames.
    """
    from phasewake.core.model.feeding import frame_range
    from phasewake.core.model.framepass import run_one

    if run.frames is None:
        raise MissingDataError("the run has no frames (positions)", path=run.paths[0] if run.paths else None)
    if not specs:
        raise CoordinateSpecError("no coordinate given")
    start, stop_ = frame_range(run, start, stop)
    resolved = [resolve_for_run(s, run) for s in specs]
    if any(r.function == "pc" for r in resolved):
        resolved = yield from _with_pcas(run, resolved, start=start, stop=stop_, mass_weighted=mass_weighted_pca,
                                         fit=fit_pca)
    consumer = CoordinatesConsumer(run, resolved)
    return (yield from run_one(run, consumer, label="coordinates", start=start, stop=stop_))


def _with_pcas(run: Run, resolved: list[ResolvedCoordinate], *, start: int, stop: int, mass_weighted: bool,
               fit: bool) -> Work[list[ResolvedCoordinate]]:
    """``resolved`` with the PCA of each pc(k) group attached: one PCA pass per distinct group (its products
    in blocks of ``PC_BLOCK_FRAMES`` frames, whatever the reading chunks)."""
    from phasewake.core.analyses.projection import compute_pca

    pcas: dict[tuple[int, ...], Any] = {}
    out = list(resolved)
    for k, r in enumerate(resolved):
        if r.function != "pc":
            continue
        key = tuple(int(a) for a in r.groups[0])
        if key not in pcas:
            n_comp = max(int(q.pc_index or 0) + 1 for q in resolved
                         if q.function == "pc" and tuple(int(a) for a in q.groups[0]) == key)
            pcas[key] = yield from labelled(
                compute_pca(run, atom_indices=np.asarray(key), start=start, stop=stop,
                            block_frames=PC_BLOCK_FRAMES,
                            mass_weighted=mass_weighted, fit=fit, n_components=max(n_comp, 1), projections=False),
                label=f"PCA for {r.spec}",
            )
        pca = pcas[key]
        if int(r.pc_index or 0) >= pca.eigenvalues.shape[0]:
            raise CoordinateSpecError(
                f"pc({int(r.pc_index or 0) + 1}) asked for, but the group has only {pca.eigenvalues.shape[0]} "
                "components",
                spec=r.spec,
                position=3,
            )
        out[k] = replace(r, pca=pca)
    return out


def refuse_not_finite(r: ResolvedCoordinate, ch: Any, v: np.ndarray, path: Any) -> None:
    """CorruptFileError naming the file and the first frame where a coordinate is NaN or infinite."""
    from phasewake.core.errors import CorruptFileError

    i = int(np.flatnonzero(~np.isfinite(v))[0])
    frame = int(ch.start) + i
    pos = np.asarray(ch.positions_nm[i])
    why = ("the positions there hold NaN or infinite values" if not np.all(np.isfinite(pos))
           else "its atoms sit where it is not defined")
    raise CorruptFileError(f"{r.spec} is {v[i]} at frame {frame} (t = {float(ch.time_ps[i]):g} ps): {why}",
                           path=path)


def finite_difference_velocity(values: np.ndarray, time_ps: np.ndarray, *, periodic: bool = False) -> np.ndarray | None:
    """dq/dt by central differences (one-sided at the ends); None for fewer than 2 frames.

    Periodic coordinates (dihedrals) are unwrapped first so a jump across +-pi is not a huge speed.
    """
    if values.shape[0] < 2:
        return None
    q = np.unwrap(values) if periodic else values
    return np.gradient(q, time_ps)


@dataclass(frozen=True)
class CoordinatesRequest(AnalysisRequest):
    """Coordinates with velocities, effective masses and momenta, with every setting a user can give (those
    of :func:`compute_coordinates`); build it and hand it to :func:`phasewake.core.store.cached.requested`.

    Examples
    --------
    >>> from phasewake.core.analyses.coordinates import CoordinatesRequest
    >>> CoordinatesRequest(["distance(0, 1)"], stop=100).specs
    ('distance(0, 1)',)
    """

    name: ClassVar[str] = "coordinates"
    label: ClassVar[str] = "coordinates"

    specs: Sequence[str] = ()
    start: int = 0
    stop: int | None = None
    mass_weighted_pca: bool = True
    fit_pca: bool = True

    def __post_init__(self) -> None:
        specs = (self.specs,) if isinstance(self.specs, str) else self.specs
        object.__setattr__(self, "specs", tuple(str(s) for s in specs))

    @classmethod
    def for_run(cls, run: Run, specs: Sequence[str], *, start: int = 0, stop: int | None = None,
                **settings: Any) -> CoordinatesRequest:
        """The request of frames [start, stop) of ``run``, "to the end" said one way (``stop`` None) however
        it was given, so every front end keys the same frames alike."""
        to_end = stop is None or int(stop) >= run.n_frames
        return cls(specs, start=int(start), stop=None if to_end or stop is None else int(stop), **settings)

    def reference_paths(self, run: Run) -> tuple[str, ...]:
        """The rmsd reference structures the specifications name (a bad specification raises here; a run
        without frames has none: the work says so)."""
        if run.frames is None:
            return ()
        refs = (resolve_for_run(s, run).reference_path for s in self.specs)
        return tuple(str(r) for r in refs if r)

    def work(self, run: Run) -> Work[list[CoordinateSeries]]:
        return (yield from compute_coordinates(run, list(self.specs), start=self.start, stop=self.stop,
                                               mass_weighted_pca=self.mass_weighted_pca, fit_pca=self.fit_pca))

    def consumer(self, run: Run) -> CoordinatesConsumer | None:
        """The coordinates of every frame in a shared pass (its chunks); None for part of the frames or a
        pc(k), whose PCA is a pass of its own first."""
        whole = self.start == 0 and (self.stop is None or self.stop >= run.n_frames)
        if not whole or any(resolve_for_run(s, run).function == "pc" for s in self.specs):
            return None
        return CoordinatesConsumer(run, self.specs)
