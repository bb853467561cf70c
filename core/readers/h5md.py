"""H5MD 1.1 files: writer and lazy reader with h5py.

Layout follows the H5MD specification (de Buyl, Colberg and Höfling, Comput. Phys. Commun. 185,
1546 (2014); version 1.1 of the specification adds scalar step/time with an ``offset``):
``/h5md`` (version, author, creator), ``/particles/<group>/{position,velocity,force,box,mass,species}``,
``/observables/<name>`` (time series ``{value, step, time}`` or fixed datasets, subgroups allowed),
``/connectivity/<name>`` and a free-form ``/parameters``.

phasewake writes TOTAL observables (kinetic/potential energy of the whole system) and does not declare
the thermodynamics module. When a file declares it (``/h5md/modules/thermodynamics``), the per-particle
energies it defines are multiplied by ``particle_number`` as the module says.
"""

from __future__ import annotations

import contextvars
import os
import sys
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.errors import CorruptFileError, MissingDataError, ResourceError, UnitError
from phasewake.core.model.run import (
    DEFAULT_CHUNK_FRAMES,
    ChunkedFrames,
    EnergyTable,
    FrameChunk,
    RunMetadata,
    Series,
    budget_chunk_frames,
)
from phasewake.core.readers.common import (
    box_matrix,
    check_box,
    check_masses,
    check_metadata,
    check_time_axis,
    decode,
    masses_from_topology,
    topology_from_elements,
    topology_from_json,
    topology_to_json,
)
from phasewake.core.units import parse_unit

if TYPE_CHECKING:
    import h5py
    import mdtraj

H5MD_SUFFIXES = (".h5md", ".h5", ".hdf5", ".hdf")

# Units the user stated for elements whose file gives none (dimension -> unit text), set by read_h5md.
_ASSUMED_UNITS: contextvars.ContextVar[Mapping[str, str] | None] = contextvars.ContextVar(
    "phasewake_h5md_assumed_units", default=None)
_ASSUMED_USED: contextvars.ContextVar[list[str] | None] = contextvars.ContextVar(
    "phasewake_h5md_assumed_used", default=None)


def _assumed(dimension: str | None, name: str) -> str | None:
    """The unit the user stated for this dimension, or None; noted for the run's warnings."""
    units = _ASSUMED_UNITS.get()
    if not units or dimension is None or dimension not in units:
        return None
    used = _ASSUMED_USED.get()
    if used is not None:
        used.append(f"{name} has no unit in the file; using {units[dimension]!r} as stated")
    return units[dimension]

# Observable name -> energy-table role (our names and common names other engines write).
OBSERVABLE_ROLES: dict[str, str] = {
    "potential_energy": "potential",
    "kinetic_energy": "kinetic",
    "total_energy": "total",
    "internal_energy": "total",
    "conserved_energy": "conserved",
    "conserved": "conserved",
    "bath_heat": "bath_heat",
    "temperature": "temperature",
    "pressure": "pressure",
    "volume": "volume",
    "density": "density",
}
# Per-particle averages in the H5MD thermodynamics module.
_ROLE_DIMENSION = {"potential": "energy", "kinetic": "energy", "total": "energy", "conserved": "energy",
                   "bath_heat": "energy", "temperature": "temperature", "pressure": "pressure",
                   "volume": "volume", "density": "density"}
_THERMO_PER_PARTICLE = {"potential_energy", "kinetic_energy", "internal_energy", "enthalpy"}

# /parameters keys that fill RunMetadata.
_PARAM_FIELDS = ("timestep_ps", "ensemble", "thermostat", "temperature_K", "n_constraints",
                 "integrator", "com_motion_removed")


# ----------------------------------------------------------------------------------- writer


def write_h5md(
    path: str | Path,
    *,
    positions_nm: np.ndarray,
    time_ps: np.ndarray,
    step: np.ndarray | None = None,
    velocities_nm_per_ps: np.ndarray | None = None,
    box_nm: np.ndarray | None = None,
    masses_amu: np.ndarray | None = None,
    species: Sequence[str] | None = None,
    observables: Mapping[str, tuple[Any, ...]] | None = None,
    parameters: Mapping[str, Any] | None = None,
    topology: mdtraj.Topology | None = None,
    group: str = "all",
    author: str = "phasewake",
    creator_version: str | None = None,
) -> None:
    """Write an H5MD 1.1 file (atomically, through core/atomic.py: a temporary file beside it, then a rename).

    Parameters
    ----------
    positions_nm : ndarray, shape (F, N, 3), nm
    time_ps : ndarray, shape (F,), ps
    step : ndarray of int, shape (F,), or None (then 0..F-1)
    velocities_nm_per_ps : ndarray, shape (F, N, 3), nm/ps, or None
    box_nm : (3,) edge lengths, (3, 3) edge vectors as rows, (F, 3, 3) time-dependent, or None (no box)
    masses_amu : ndarray, shape (N,), amu, or None
    species : N element symbols (stored as atomic numbers), or None
    observables : name -> (values (F,), unit_text) sampled with the frames, or
        name -> (values (K,), unit_text, time_ps (K,)) on their own time axis
    parameters : scalars/strings written under /parameters (timestep_ps, ensemble, ...)
    topology : mdtraj.Topology stored as /connectivity/bonds and /parameters/topology_json
    """
    import h5py

    from phasewake.core import __version__

    pos = np.asarray(positions_nm, dtype=np.float32)
    if pos.ndim != 3 or pos.shape[2] != 3:
        raise ValueError(f"positions must have shape (F, N, 3), not {pos.shape}")
    n_frames, n_atoms = pos.shape[:2]
    t = np.asarray(time_ps, dtype=np.float64)
    if t.shape != (n_frames,):
        raise ValueError(f"time_ps must have shape ({n_frames},), not {t.shape}")
    st = np.arange(n_frames, dtype=np.int64) if step is None else np.asarray(step, dtype=np.int64)
    if st.shape != (n_frames,):
        raise ValueError(f"step must have shape ({n_frames},), not {st.shape}")
    dt_frame = float(np.median(np.diff(t))) if n_frames > 1 else 1.0
    dstep = float(np.median(np.diff(st))) if n_frames > 1 else 1.0

    path = Path(path)
    from phasewake.core.store.atomic import atomic_path  # the project's one atomic writer

    with atomic_path(path) as tmp:
        with h5py.File(tmp, "w") as f:
            h = f.create_group("h5md")
            h.attrs["version"] = np.array([1, 1], dtype=np.int32)
            h.create_group("author").attrs["name"] = author
            cr = h.create_group("creator")
            cr.attrs["name"] = "phasewake"
            cr.attrs["version"] = creator_version or __version__

            pg = f.create_group("particles").create_group(group)
            chunk = (max(1, min(n_frames, max(1, (1 << 20) // max(1, n_atoms * 12)))), n_atoms, 3)

            def element(name: str, value: np.ndarray, unit: str, share: h5py.Group | None) -> h5py.Group:
                g = pg.create_group(name)
                ds = g.create_dataset("value", data=value, chunks=chunk if value.ndim == 3 else True)
                ds.attrs["unit"] = unit
                if share is None:
                    g.create_dataset("step", data=st)
                    tt = g.create_dataset("time", data=t)
                    tt.attrs["unit"] = "ps"
                else:  # hard links: sampled together
                    g["step"] = share["step"]
                    g["time"] = share["time"]
                return g

            pos_group = element("position", pos, "nm", None)
            if velocities_nm_per_ps is not None:
                vel = np.asarray(velocities_nm_per_ps, dtype=np.float32)
                if vel.shape != pos.shape:
                    raise ValueError(f"velocities shape {vel.shape} differs from positions {pos.shape}")
                element("velocity", vel, "nm ps-1", pos_group)

            box = pg.create_group("box")
            box.attrs["dimension"] = np.int32(3)
            if box_nm is None:
                box.attrs["boundary"] = np.array([b"none"] * 3)
            else:
                box.attrs["boundary"] = np.array([b"periodic"] * 3)
                b = np.asarray(box_nm, dtype=np.float64)
                if b.ndim == 3:
                    if b.shape != (n_frames, 3, 3):
                        raise ValueError(f"time-dependent box must be (F, 3, 3), not {b.shape}")
                    eg = box.create_group("edges")
                    eg.create_dataset("value", data=b).attrs["unit"] = "nm"
                    eg["step"] = pos_group["step"]
                    eg["time"] = pos_group["time"]
                elif b.shape in ((3,), (3, 3)):
                    box.create_dataset("edges", data=b).attrs["unit"] = "nm"
                else:
                    raise ValueError(f"box must be (3,), (3, 3) or (F, 3, 3), not {b.shape}")

            if masses_amu is not None:
                m = np.asarray(masses_amu, dtype=np.float64)
                if m.shape != (n_atoms,):
                    raise ValueError(f"masses must have shape ({n_atoms},), not {m.shape}")
                pg.create_dataset("mass", data=m).attrs["unit"] = "u"
            symbols = list(species) if species is not None else None
            if symbols is None and topology is not None:
                symbols = [a.element.symbol if a.element is not None else "VS" for a in topology.atoms]
            if symbols is not None:
                from mdtraj.core import element as elem

                if len(symbols) != n_atoms:
                    raise ValueError(f"species has {len(symbols)} entries for {n_atoms} atoms")
                z = []
                for s in symbols:
                    try:
                        z.append(elem.get_by_symbol(str(s)).number)
                    except KeyError:
                        z.append(0)
                sp = pg.create_dataset("species", data=np.asarray(z, dtype=np.int32))
                sp.attrs["phasewake_meaning"] = "atomic number"

            if observables:
                og = f.create_group("observables")
                for name, spec in observables.items():
                    values = np.asarray(spec[0], dtype=np.float64)
                    unit = spec[1]
                    g = og.create_group(name)
                    ds = g.create_dataset("value", data=values)
                    if unit:
                        ds.attrs["unit"] = unit
                    if len(spec) >= 3 and spec[2] is not None:
                        ot = np.asarray(spec[2], dtype=np.float64)
                        if ot.shape != values.shape[:1]:
                            raise ValueError(f"observable {name}: time shape {ot.shape} vs values {values.shape}")
                        g.create_dataset("time", data=ot).attrs["unit"] = "ps"
                        # steps on the frames' clock, so elements align by step
                        ost = np.rint((ot - t[0]) / dt_frame * dstep + st[0]).astype(np.int64)
                        g.create_dataset("step", data=ost)
                    else:
                        if values.shape[:1] != (n_frames,):
                            raise ValueError(f"observable {name} has {values.shape[0]} values for {n_frames} frames")
                        g["step"] = pos_group["step"]
                        g["time"] = pos_group["time"]

            params = dict(parameters or {})
            prm = f.create_group("parameters")
            for key, val in params.items():
                if val is None:
                    continue
                prm.create_dataset(key, data=val)
            if topology is not None:
                if topology.n_atoms != n_atoms:
                    raise ValueError(f"topology has {topology.n_atoms} atoms, positions {n_atoms}")
                prm.create_dataset("topology_json", data=topology_to_json(topology))
                bonds = np.array([[b[0].index, b[1].index] for b in topology.bonds], dtype=np.int64)
                if bonds.size:
                    cg = f.create_group("connectivity")
                    bd = cg.create_dataset("bonds", data=bonds.reshape(-1, 2))
                    bd.attrs["particles_group"] = pg.ref


# ----------------------------------------------------------------------------------- reader


def claim(path: Path) -> bool:
    """An HDF5 file with an /h5md group (any suffix among the HDF5 ones, or .h5md)."""
    if path.suffix.lower() not in H5MD_SUFFIXES:
        return False
    try:
        import h5py

        with h5py.File(path, "r") as f:
            return "h5md" in f
    except OSError:
        return path.suffix.lower() == ".h5md"


@dataclass(frozen=True)
class _Axis:
    """Step and time of a time-dependent element."""

    step: np.ndarray  # (K,) int64
    time_ps: np.ndarray | None  # (K,) or None when the element has no time


def _check_claimed_rows(ds: h5py.Dataset, *, path: Path, name: str) -> None:
    """CorruptFileError when a dataset's first dimension claims more rows than the file holds data for.

    Checked before anything of that length is allocated: a damaged or hostile header may claim 1e12
    frames (with scalar step/time nothing else says otherwise). Chunked layout: the chunks actually
    written bound the rows with data; contiguous layout: the rows must fit in the file.
    """
    import h5py

    n = int(ds.shape[0]) if ds.ndim else 0
    if n <= 1:
        return
    row_items = int(np.prod(ds.shape[1:], dtype=np.int64)) if ds.ndim > 1 else 1
    row_bytes = max(row_items * ds.dtype.itemsize, 1)
    try:
        layout = ds.id.get_create_plist().get_layout()
        if layout == h5py.h5d.CHUNKED and ds.chunks is not None:
            per_block = 1
            for size, c in zip(ds.shape[1:], ds.chunks[1:], strict=True):
                per_block *= -(-int(size) // int(c))
            written = (int(ds.id.get_num_chunks()) // max(per_block, 1)) * int(ds.chunks[0])
        elif layout == h5py.h5d.CONTIGUOUS:
            offset = ds.id.get_offset()
            room = 0 if offset is None else os.path.getsize(path) - int(offset)
            written = max(room, 0) // row_bytes
        else:
            return
    except (AttributeError, OSError, ValueError, TypeError):
        return  # an older library without these calls: the reads themselves fail cleanly later
    if written < n:
        raise CorruptFileError(f"{name} claims {n} rows, but the file holds data for at most {written} "
                               "(a damaged header, or a file that was never finished)", path=path)


def _axis(g: h5py.Group, n: int, *, path: Path, name: str) -> _Axis:
    """Step and time arrays of element ``g`` with ``n`` samples (array or scalar with offset)."""
    import h5py

    if "value" in g and isinstance(g["value"], h5py.Dataset):
        _check_claimed_rows(g["value"], path=path, name=f"{name}/value")

    def values(key: str) -> np.ndarray | None:
        if key not in g:
            return None
        ds = g[key]
        if ds.shape == ():  # H5MD 1.1: scalar increment, s(i) = i*step + offset
            inc = ds[()]
            off = ds.attrs.get("offset", 0)
            return np.arange(n) * inc + off
        arr = ds[()]
        if arr.shape[0] != n:
            raise CorruptFileError(f"{name}/{key} has {arr.shape[0]} entries for {n} samples", path=path)
        return arr

    step = values("step")
    time = values("time")
    if time is not None:
        unit = g["time"].attrs.get("unit")
        if unit is None:
            unit = _assumed("time", f"{name}/time")
        if unit is None:
            raise UnitError(f"{name}/time has no unit attribute (state it or add unit=\"ps\")", path=path)
        try:
            time = np.asarray(time, dtype=np.float64) * parse_unit(decode(unit), expect="time").factor
        except UnitError as exc:
            raise UnitError(f"{name}/time: {exc.problem}", path=path) from exc
    if step is None:
        if time is None:
            raise CorruptFileError(f"{name} has neither step nor time", path=path)
        step = np.arange(n)
    step_f = np.asarray(step, dtype=np.float64)
    if not np.all(np.isfinite(step_f)) or np.any(np.abs(step_f) > 2.0**62):
        raise CorruptFileError(f"{name}/step holds values that are not step numbers (NaN, inf or huge)", path=path)
    if time is not None and not np.all(np.isfinite(time)):
        raise CorruptFileError(f"{name}/time holds NaN or infinite values", path=path)
    return _Axis(step_f.astype(np.int64), time)


def _unit_factor(ds: h5py.Dataset, *, path: Path, name: str, expect: str | None) -> tuple[float, str]:
    unit = ds.attrs.get("unit")
    if unit is None:
        unit = _assumed(expect, name)
    if unit is None:
        raise UnitError(f"{name} has no unit attribute (state it: units={{{expect!r}: ...}})", path=path)
    try:
        u = parse_unit(decode(unit), expect=expect)
    except UnitError as exc:
        raise UnitError(f"{name}: {exc.problem}", path=path) from exc
    return u.factor, u.internal


class _BufferPool:
    """Chunk buffers handed out again once nothing outside the pool refers to them.

    Fresh memory is slow to touch here (PERFORMANCE.md: ~0.4 GB/s on first touch against 7-14 GB/s for
    a copy), so a streamed read reuses its buffers. A buffer is reused only when its reference count
    shows no holder outside the pool: a consumer that keeps a chunk, or any view of its arrays, keeps
    its buffer out of reuse, so data handed out are never overwritten.
    """

    _IDLE_REFS = 3  # the pool's list, the loop variable and getrefcount's own argument

    def __init__(self, size: int = 6) -> None:  # positions and velocities, ~2-3 in flight each
        self._bufs: list[np.ndarray] = []
        self._size = size

    def get(self, shape: tuple[int, ...], dtype: Any) -> np.ndarray:
        for b in self._bufs:
            if b.shape == shape and b.dtype == dtype and sys.getrefcount(b) <= self._IDLE_REFS:
                return b
        b = np.empty(shape, dtype)
        if len(self._bufs) >= self._size:
            self._bufs.pop(0)
        self._bufs.append(b)
        return b


class H5MDFrames(ChunkedFrames):
    """Lazy chunked frames of one particle group of an H5MD file (a FrameSource).

    Frames are the position samples. Velocities and a time-dependent box are aligned to them BY STEP.
    When velocities exist only at some of the position steps, ``has_velocities`` is False here and
    :meth:`with_velocities_only` gives a source over the frames that have both.
    """

    def __init__(self, path: Path, group: str, *, frame_rows: np.ndarray, time_ps: np.ndarray,
                 pos_factor: float, vel_rows: np.ndarray | None, vel_factor: float,
                 box_fixed: np.ndarray | None, box_rows: np.ndarray | None, box_factor: float,
                 n_atoms: int, image_rows: np.ndarray | None = None) -> None:
        self.path = path
        self.group = group
        self._rows = frame_rows  # row of position/value for each frame
        self._time = time_ps
        self._pos_factor = pos_factor
        self._vel_rows = vel_rows  # row of velocity/value for each frame, -1 where missing; or None
        self._vel_factor = vel_factor
        self._box_fixed = box_fixed
        self._box_rows = box_rows
        self._image_rows = image_rows  # row of image/value for each frame (positions get unwrapped)
        self._box_factor = box_factor
        self.n_frames = int(frame_rows.shape[0])
        self.n_atoms = n_atoms
        self.has_velocities = vel_rows is not None and bool(np.all(vel_rows >= 0))
        self.velocities_estimated = False
        self.has_box = box_fixed is not None or box_rows is not None

    @property
    def velocity_frame_count(self) -> int:
        return 0 if self._vel_rows is None else int(np.sum(self._vel_rows >= 0))

    def with_velocities_only(self) -> H5MDFrames:
        """The frames at which velocities were stored too (aligned by step)."""
        if self._vel_rows is None:
            raise MissingDataError(f"/particles/{self.group} has no velocities", path=self.path)
        keep = self._vel_rows >= 0
        return H5MDFrames(self.path, self.group, frame_rows=self._rows[keep], time_ps=self._time[keep],
                          pos_factor=self._pos_factor, vel_rows=self._vel_rows[keep],
                          vel_factor=self._vel_factor, box_fixed=self._box_fixed,
                          box_rows=None if self._box_rows is None else self._box_rows[keep],
                          box_factor=self._box_factor, n_atoms=self.n_atoms,
                          image_rows=None if self._image_rows is None else self._image_rows[keep])

    @property
    def time_ps(self) -> np.ndarray:
        return self._time

    @staticmethod
    def _read_rows(ds: h5py.Dataset, rows: np.ndarray, span: slice | None = None) -> np.ndarray:
        """Read rows (sorted, maybe strided) with as few HDF5 selections as possible; ``span``: only
        these atoms (a hyperslab: HDF5 copies just the selected bytes)."""
        if rows.size == 0:
            shape = ds.shape[1:] if span is None else (len(range(*span.indices(ds.shape[1]))), *ds.shape[2:])
            return np.empty((0, *shape), dtype=ds.dtype)
        cols = slice(None) if span is None else span
        d = np.diff(rows)
        if rows.size == 1 or np.all(d == d[0]) and d[0] > 0:
            step = 1 if rows.size == 1 else int(d[0])
            return ds[int(rows[0]) : int(rows[-1]) + 1 : step, cols]
        uniq, inv = np.unique(rows, return_inverse=True)
        return ds[uniq, cols][inv]

    @staticmethod
    def _read_rows_into(ds: h5py.Dataset, rows: np.ndarray, span: slice | None,
                        pool: _BufferPool) -> np.ndarray:
        """As :meth:`_read_rows`, for float32 data at evenly spaced rows: straight into a pooled buffer."""
        d = np.diff(rows)
        regular = rows.size == 1 or (rows.size > 1 and bool(np.all(d == d[0])) and d[0] > 0)
        if ds.dtype != np.float32 or not regular or rows.size == 0:
            return H5MDFrames._read_rows(ds, rows, span)
        step = 1 if rows.size == 1 else int(d[0])
        cols = slice(None) if span is None else span
        width = ds.shape[1] if span is None else len(range(*span.indices(ds.shape[1])))
        out = pool.get((rows.size, width, *ds.shape[2:]), np.float32)
        ds.read_direct(out, np.s_[int(rows[0]) : int(rows[-1]) + 1 : step, cols])
        return out

    def _atom_span(self, cols: np.ndarray | None) -> tuple[slice | None, np.ndarray | None]:
        """A few atoms close together are read as the hyperslab of atoms that spans them."""
        if cols is None or cols.size == 0:
            return None, cols
        lo, hi = int(cols.min()), int(cols.max()) + 1
        if lo < 0 or hi - lo > self.n_atoms // 2:
            return None, cols
        local = cols - lo
        whole = local.size == hi - lo and bool(np.all(local == np.arange(hi - lo)))
        return slice(lo, hi), None if whole else local

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
        import h5py

        idx = self.frame_indices(start, stop, stride)
        cols = None if atom_indices is None else np.asarray(atom_indices)
        want_vel = velocities and self.has_velocities
        chunk_frames = budget_chunk_frames(chunk_frames, self.n_atoms if cols is None else cols.size,
                                           n_arrays=int(positions) + int(want_vel))
        try:
            f = h5py.File(self.path, "r")
        except OSError as exc:
            raise CorruptFileError(f"cannot open for reading frames ({exc})", path=self.path) from exc
        with f:
            try:
                yield from self._chunks(f, idx, cols, want_vel, chunk_frames, positions)
            except _LAYOUT_ERRORS as exc:
                raise CorruptFileError(f"cannot read frames ({type(exc).__name__}: {exc})", path=self.path) from exc

    def _chunks(self, f: h5py.File, idx: np.ndarray, cols: np.ndarray | None, want_vel: bool,
                chunk_frames: int, want_pos: bool = True) -> Iterator[FrameChunk]:
        pg = f["particles"][self.group]
        pos_ds = pg["position"]["value"]
        vel_ds = pg["velocity"]["value"] if want_vel else None
        box_ds = pg["box"]["edges"]["value"] if self._box_rows is not None else None
        img_ds = pg["image"]["value"] if self._image_rows is not None else None
        span, cols = self._atom_span(cols)
        pool = _BufferPool()
        for i in range(0, idx.size, chunk_frames):
            sel = idx[i : i + chunk_frames]
            if want_pos:
                pos = self._read_rows_into(pos_ds, self._rows[sel], span, pool)
                if cols is not None:
                    pos = np.take(pos, cols, axis=1)  # C-ordered, unlike pos[:, cols]
                pos = np.asarray(pos, dtype=np.float32)
                if self._pos_factor != 1.0:
                    pos = (pos * self._pos_factor).astype(np.float32)
            else:  # a velocity-only analysis: half the reading
                pos = np.empty((sel.size, 0, 3), np.float32)
            vel = None
            if vel_ds is not None and self._vel_rows is not None:
                vel = self._read_rows_into(vel_ds, self._vel_rows[sel], span, pool)
                if cols is not None:
                    vel = np.take(vel, cols, axis=1)
                vel = np.asarray(vel, dtype=np.float32)
                if self._vel_factor != 1.0:
                    vel = (vel * self._vel_factor).astype(np.float32)
            box = None
            if box_ds is not None and self._box_rows is not None:
                box = box_matrix(self._read_rows(box_ds, self._box_rows[sel]) * self._box_factor, sel.size)
                box = check_box(box, path=self.path, first_frame=int(sel[0]))
            elif self._box_fixed is not None:
                box = np.broadcast_to(self._box_fixed, (sel.size, 3, 3)).copy()
            if want_pos and img_ds is not None and self._image_rows is not None and box is not None:
                # H5MD: the unwrapped position is position + image . box edges
                img = np.asarray(self._read_rows(img_ds, self._image_rows[sel], span), dtype=np.float64)
                if cols is not None:
                    img = np.take(img, cols, axis=1)
                pos = (pos + np.einsum("fnk,fkj->fnj", img, box)).astype(np.float32)
            yield FrameChunk(start=int(sel[0]), time_ps=self._time[sel], positions_nm=pos,
                             velocities_nm_per_ps=vel, box_nm=box)


@dataclass
class H5MDContents:
    """What :func:`read_h5md` found (headers only; frames stay on disk)."""

    frames: H5MDFrames
    time_ps: np.ndarray
    masses_amu: np.ndarray | None
    topology: Any
    energies: EnergyTable | None
    metadata: RunMetadata
    warnings: list[str]
    groups: tuple[str, ...]


def _align(steps_of_frames: np.ndarray, steps: np.ndarray) -> np.ndarray:
    """Row in ``steps`` for each frame step, -1 where that step was not sampled."""
    if steps.size == 0:
        return np.full(steps_of_frames.shape, -1, dtype=np.int64)
    order = np.argsort(steps, kind="stable")
    s = steps[order]
    pos = np.clip(np.searchsorted(s, steps_of_frames), 0, s.size - 1)
    return np.where(s[pos] == steps_of_frames, order[pos], -1).astype(np.int64)


def _iter_observables(og: h5py.Group, prefix: str = "") -> Iterator[tuple[str, Any]]:
    import h5py

    for key in og:
        obj = og[key]
        name = f"{prefix}{key}"
        if isinstance(obj, h5py.Dataset):
            yield name, obj
        elif "value" in obj and isinstance(obj["value"], h5py.Dataset):
            yield name, obj
        else:
            yield from _iter_observables(obj, prefix=f"{name}/")


def _read_observables(f: h5py.File, path: Path, frame_steps: np.ndarray, frame_time: np.ndarray,
                      warnings: list[str], dt_ps: float | None,
                      other_tables: list[EnergyTable]) -> EnergyTable | None:
    """The observables sampled like the longest one as an EnergyTable; the others into ``other_tables``."""
    import h5py

    if "observables" not in f:
        return None
    thermo = "h5md" in f and "modules" in f["h5md"] and "thermodynamics" in f["h5md"]["modules"]
    og = f["observables"]
    particle_number = None
    if thermo and "particle_number" in og:
        pn = og["particle_number"]
        particle_number = pn[()] if isinstance(pn, h5py.Dataset) else pn["value"][()]

    series: list[tuple[str, np.ndarray, np.ndarray | None, np.ndarray, str]] = []  # name, steps, time, values, unit
    for name, obj in _iter_observables(og):
        if isinstance(obj, h5py.Dataset):
            continue  # fixed observable (a constant): not a time series
        ds = obj["value"]
        if ds.ndim != 1:
            continue  # vector observables are not energy-table columns
        base = name.rsplit("/", 1)[-1]
        unit = ds.attrs.get("unit")
        role_dim = _ROLE_DIMENSION.get(OBSERVABLE_ROLES.get(base, "other"))
        if unit is None:
            unit = _assumed(role_dim, f"observables/{name}")
        if unit is None:
            if role_dim is not None:
                raise UnitError(f"observable {name} has no unit attribute (state it: units={{{role_dim!r}: ...}})",
                                path=path)
            unit = "1"  # H5MD: a quantity without a unit attribute is dimensionless
        try:
            u = parse_unit(decode(unit), expect=role_dim)
        except UnitError as exc:
            raise UnitError(f"observable {name}: {exc.problem}", path=path) from exc
        factor, internal = u.factor, u.internal
        _check_claimed_rows(ds, path=path, name=f"observables/{name}/value")
        values = np.asarray(ds[()], dtype=np.float64) * factor
        if thermo and base in _THERMO_PER_PARTICLE:
            if particle_number is None:
                warnings.append(f"{path.name}: {name} is per particle (thermodynamics module) but the file "
                                "has no particle_number; shown per particle")
            else:
                pnv = np.asarray(particle_number, dtype=np.float64)
                values = values * (pnv if pnv.ndim == 0 else pnv[: values.size])
        ax = _axis(obj, values.shape[0], path=path, name=f"observables/{name}")
        series.append((name, ax.step, ax.time_ps, values, internal))
    if not series:
        return None

    # The table's axis: the steps of the longest series; others join by step (warned when they cannot).
    main = max(series, key=lambda s: s[1].size)
    steps = main[1]
    if main[2] is not None:
        time = main[2]
    else:
        rows = _align(steps, frame_steps)
        if np.all(rows >= 0):
            time = frame_time[rows]
        elif dt_ps is not None:
            time = steps * dt_ps
        else:
            raise MissingDataError(f"observables/{main[0]} has no time and its steps are not frame steps",
                                   path=path)
    table: dict[str, Series] = {}
    others: dict[bytes, list[tuple[str, np.ndarray, np.ndarray | None, np.ndarray, str]]] = {}
    for name, st, _t, values, unit in series:
        rows = _align(steps, st)
        if np.any(rows < 0):
            warnings.append(f"{path.name}: observable {name} is sampled at other steps than "
                            f"{main[0]}; kept in a table of its own (metadata.extra['other_energy_tables'])")
            others.setdefault(st.tobytes(), []).append((name, st, _t, values, unit))
            continue
        base = name.rsplit("/", 1)[-1]
        table[name] = Series(name=name, values=values[rows], unit=unit,
                             role=OBSERVABLE_ROLES.get(base, "other"),
                             source=f"{path.name}:/observables/{name}")
    warnings.extend(check_time_axis(time, path=path, what="observable sample"))
    other_tables.clear()
    for group in others.values():
        st, t_other = group[0][1], group[0][2]
        if t_other is None:
            if dt_ps is None:
                continue
            t_other = st * dt_ps
        other_tables.append(EnergyTable(
            time_ps=np.asarray(t_other, dtype=np.float64),
            series={n: Series(name=n, values=v, unit=u, role=OBSERVABLE_ROLES.get(n.rsplit("/", 1)[-1], "other"),
                              source=f"{path.name}:/observables/{n}") for n, _s, _tt, v, u in group},
            sources=(str(path),)))
    return EnergyTable(time_ps=np.asarray(time, dtype=np.float64), series=table, sources=(str(path),))


_LAYOUT_ERRORS = (KeyError, ValueError, TypeError, IndexError, AttributeError, OSError, RuntimeError)


def read_h5md(path: str | Path, *, group: str | None = None,
              assumed_units: Mapping[str, str] | None = None) -> H5MDContents:
    """Open an H5MD file: headers, axes, observables and metadata; frames stay lazy.

    Parameters
    ----------
    group : particle group to read (default: the first with positions).
    assumed_units : dimension -> unit text ({"length": "A", "time": "fs", "energy": "kcal/mol", ...}) for
        elements whose file states no unit; each use is listed in the warnings. Units the file states
        always win.

    Raises MissingDataError when no particle group has positions (or ``group`` is not there),
    UnitError for a missing/unknown unit, CorruptFileError for inconsistent shapes or a damaged layout.
    """
    used: list[str] = []
    tok_units = _ASSUMED_UNITS.set(assumed_units)
    tok_used = _ASSUMED_USED.set(used)
    try:
        contents = _read_h5md(Path(path), group=group)
    except _LAYOUT_ERRORS as exc:
        raise CorruptFileError(f"damaged or unexpected H5MD layout ({type(exc).__name__}: {exc})",
                               path=path) from exc
    except MemoryError as exc:
        raise ResourceError(f"not enough memory to read the file's headers and observables ({exc})",
                            path=path) from None
    finally:
        _ASSUMED_UNITS.reset(tok_units)
        _ASSUMED_USED.reset(tok_used)
    contents.warnings.extend(f"{Path(path).name}: {u}" for u in dict.fromkeys(used))
    return contents


def _read_h5md(path: Path, *, group: str | None) -> H5MDContents:
    import h5py

    path = Path(path)
    warnings: list[str] = []
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise CorruptFileError(f"not a readable HDF5 file ({exc})", path=path) from exc
    with f:
        if "particles" not in f or not len(f["particles"]):
            raise MissingDataError("H5MD file has no /particles group, so no positions", path=path)
        groups = tuple(f["particles"].keys())
        with_pos = [g for g in groups if "position" in f["particles"][g]]
        if group is not None:
            if group not in groups:
                raise MissingDataError(f"no particle group {group!r}; the file has {', '.join(groups)}", path=path)
            if group not in with_pos:
                raise MissingDataError(f"particle group {group!r} has no positions", path=path)
            gname = group
        elif not with_pos:
            raise MissingDataError(f"no particle group has positions (groups: {', '.join(groups)})", path=path)
        else:
            gname = with_pos[0]
            if len(with_pos) > 1:
                warnings.append(f"{path.name}: particle groups with positions: {', '.join(with_pos)}; "
                                f"reading {gname!r} (choose another with group=...)")
        pg = f["particles"][gname]
        pos_el = pg["position"]
        if not isinstance(pos_el, h5py.Group) or "value" not in pos_el:
            raise CorruptFileError(f"/particles/{gname}/position is not a time-dependent element", path=path)
        pos_ds = pos_el["value"]
        if pos_ds.ndim != 3 or pos_ds.shape[2] not in (2, 3):
            raise CorruptFileError(f"/particles/{gname}/position/value has shape {pos_ds.shape}, "
                                   "expected (frames, particles, 3)", path=path)
        if pos_ds.shape[2] != 3:
            raise CorruptFileError("only 3-dimensional H5MD files are supported", path=path)
        n_rows, n_atoms = int(pos_ds.shape[0]), int(pos_ds.shape[1])
        if n_rows == 0:
            raise MissingDataError(f"/particles/{gname}/position has no frames", path=path)
        pos_factor, _ = _unit_factor(pos_ds, path=path, name=f"/particles/{gname}/position", expect="length")
        pax = _axis(pos_el, n_rows, path=path, name=f"/particles/{gname}/position")

        # metadata from /parameters
        md = RunMetadata()
        params: dict[str, Any] = {}
        if "parameters" in f:
            prm = f["parameters"]
            for k in prm:
                if isinstance(prm[k], h5py.Dataset) and prm[k].shape == ():
                    params[k] = decode(prm[k][()])
            for k, v in prm.attrs.items():
                params.setdefault(k, decode(v))
        for key in _PARAM_FIELDS:
            if key in params:
                val = params[key]
                if key == "n_constraints":
                    val = int(val)
                elif key in ("timestep_ps", "temperature_K"):
                    val = float(val)
                elif key == "com_motion_removed":
                    val = bool(val)
                else:
                    val = str(val)
                setattr(md, key, val)
                if key == "n_constraints":
                    md.constraints_source = "metadata"
        md.extra.update({k: v for k, v in params.items() if k not in _PARAM_FIELDS and k != "topology_json"})
        for key in ("timestep_ps", "n_constraints", "temperature_K"):
            if key in params:
                md.sources.setdefault(key, f"{path.name}:/parameters/{key}")
        check_metadata(md, n_atoms=n_atoms, path=path)
        md.sources["positions"] = f"{path.name}:/particles/{gname}/position"

        if pax.time_ps is not None:
            time = pax.time_ps
        elif md.timestep_ps is not None:
            time = pax.step * md.timestep_ps
            warnings.append(f"{path.name}: positions have no time; time = step x time step {md.timestep_ps:g} ps")
        else:
            time = pax.step.astype(np.float64)
            warnings.append(f"{path.name}: positions have neither time nor a known time step; the time axis "
                            "counts steps, not ps (state the time step)")
        # order by step is the file order; do not sort
        warnings.extend(check_time_axis(time, path=path, what="frame"))
        frame_rows = np.arange(n_rows, dtype=np.int64)

        vel_rows = None
        vel_factor = 1.0
        if "velocity" in pg:
            vel_el = pg["velocity"]
            vds = vel_el["value"]
            if vds.ndim != 3 or vds.shape[1] != n_atoms:
                raise CorruptFileError(f"/particles/{gname}/velocity/value has shape {vds.shape} for "
                                       f"{n_atoms} particles", path=path)
            vel_factor, _ = _unit_factor(vds, path=path, name=f"/particles/{gname}/velocity", expect="velocity")
            vax = _axis(vel_el, int(vds.shape[0]), path=path, name=f"/particles/{gname}/velocity")
            vel_rows = _align(pax.step, vax.step)
            n_with = int(np.sum(vel_rows >= 0))
            md.sources["velocities"] = f"{path.name}:/particles/{gname}/velocity"
            if n_with == 0:
                warnings.append(f"{path.name}: velocities are stored at steps where no positions are; ignored")
                vel_rows = None
            elif n_with < n_rows:
                warnings.append(f"{path.name}: velocities are stored at {n_with} of {n_rows} frames (aligned "
                                "by step); analyses that need velocities use those frames only")
        if "force" in pg:
            md.extra["has_forces"] = True

        box_fixed = None
        box_rows = None
        box_factor = 1.0
        if "box" in pg:
            bx = pg["box"]
            boundary = decode(bx.attrs.get("boundary", np.array([b"none"])))
            boundary = [boundary] if isinstance(boundary, str) else list(boundary)
            periodic = [str(b).strip().lower() == "periodic" for b in boundary]
            if any(periodic) and "edges" in bx:
                if not all(periodic):
                    warnings.append(f"{path.name}: box is periodic only along some axes ({boundary})")
                ed = bx["edges"]
                if isinstance(ed, h5py.Dataset):
                    box_factor, _ = _unit_factor(ed, path=path, name=f"/particles/{gname}/box/edges", expect="length")
                    box_fixed = box_matrix(ed[()] * box_factor, 1)[0]
                    checked = check_box(box_fixed[None], path=path)
                    box_fixed = None if checked is None else box_fixed
                else:
                    box_factor, _ = _unit_factor(ed["value"], path=path, name=f"/particles/{gname}/box/edges",
                                                 expect="length")
                    bax = _axis(ed, int(ed["value"].shape[0]), path=path, name=f"/particles/{gname}/box/edges")
                    box_rows = _align(pax.step, bax.step)
                    if np.any(box_rows < 0):
                        # a box sampled less often: use the latest box at or before each frame's step
                        order = np.argsort(bax.step)
                        k = np.searchsorted(bax.step[order], pax.step, side="right") - 1
                        box_rows = order[np.clip(k, 0, None)]
                        warnings.append(f"{path.name}: box sampled at other steps than positions; each frame "
                                        "uses the latest box at or before its step")
                md.sources["box"] = f"{path.name}:/particles/{gname}/box"

        image_rows = None
        if "image" in pg and isinstance(pg["image"], h5py.Group) and (box_fixed is not None or box_rows is not None):
            iel = pg["image"]
            iax = _axis(iel, int(iel["value"].shape[0]), path=path, name=f"/particles/{gname}/image")
            image_rows = _align(pax.step, iax.step)
            if np.any(image_rows < 0) or iel["value"].shape[1:] != (n_atoms, 3):
                warnings.append(f"{path.name}: periodic images do not match the positions' steps or shape; "
                                "positions are used as stored (wrapped)")
                image_rows = None
            else:
                md.sources["images"] = f"{path.name}:/particles/{gname}/image (positions unwrapped)"

        masses = None
        if "mass" in pg:
            mds = pg["mass"]
            mval = mds[()] if isinstance(mds, h5py.Dataset) else mds["value"][()]
            if isinstance(mds, h5py.Group):
                mval = mval[0] if np.ndim(mval) > 1 else mval
            unit = (mds if isinstance(mds, h5py.Dataset) else mds["value"]).attrs.get("unit")
            mfac = 1.0
            if unit is not None:
                mfac = parse_unit(decode(unit), expect="mass").factor
            else:
                warnings.append(f"{path.name}: masses have no unit; read as amu")
            mval = np.asarray(mval, dtype=np.float64) * mfac
            masses = np.broadcast_to(mval, (n_atoms,)).copy() if mval.ndim == 0 else mval
            if masses.shape != (n_atoms,):
                raise CorruptFileError(f"/particles/{gname}/mass has shape {masses.shape} for {n_atoms} "
                                       "particles", path=path)
            md.sources["masses"] = f"{path.name}:/particles/{gname}/mass"
            check_masses(masses, path=path, where=f"/particles/{gname}/mass")

        topology = None
        if "topology_json" in params or ("parameters" in f and "topology_json" in f["parameters"]):
            raw = f["parameters"]["topology_json"][()] if "topology_json" in f["parameters"] else params["topology_json"]
            topology = topology_from_json(raw, path=path)
            if topology.n_atoms != n_atoms:
                raise CorruptFileError(f"stored topology has {topology.n_atoms} atoms, positions {n_atoms}",
                                       path=path)
            md.sources["topology"] = f"{path.name}:/parameters/topology_json"
        elif "species" in pg:
            sp = pg["species"]
            sval = sp[()] if isinstance(sp, h5py.Dataset) else sp["value"][()]
            symbols: list[str] | None = None
            if np.asarray(sval).dtype.kind in "SOU":
                symbols = [str(s) for s in decode(np.asarray(sval))]
            elif decode(sp.attrs.get("phasewake_meaning", "")) == "atomic number":
                from mdtraj.core import element as elem

                symbols = []
                for z in np.asarray(sval).ravel():
                    try:
                        symbols.append(elem.Element.getByAtomicNumber(int(z)).symbol)
                    except KeyError:
                        symbols.append("VS")
            if symbols is not None and len(symbols) == n_atoms:
                bonds = None
                if "connectivity" in f and "bonds" in f["connectivity"]:
                    bonds = f["connectivity"]["bonds"][()]
                topology = topology_from_elements(symbols, bonds)
                md.sources["topology"] = f"{path.name}:/particles/{gname}/species"
            else:
                md.extra["species"] = np.asarray(sval).tolist()
        if masses is None:
            masses = masses_from_topology(topology, n_atoms)
            if masses is not None:
                md.sources["masses"] = "element masses of the topology"

        other_tables: list[EnergyTable] = []
        energies = _read_observables(f, path, pax.step, time, warnings, md.timestep_ps, other_tables)
        if other_tables:
            md.extra["other_energy_tables"] = other_tables
        if energies is not None:
            md.sources["energies"] = f"{path.name}:/observables"

    frames = H5MDFrames(path, gname, frame_rows=frame_rows, time_ps=np.asarray(time, np.float64),
                        pos_factor=pos_factor, vel_rows=vel_rows, vel_factor=vel_factor,
                        box_fixed=box_fixed, box_rows=box_rows, box_factor=box_factor, n_atoms=n_atoms,
                        image_rows=image_rows)
    return H5MDContents(frames=frames, time_ps=np.asarray(time, np.float64), masses_amu=masses,
                        topology=topology, energies=energies, metadata=md, warnings=warnings, groups=groups)
