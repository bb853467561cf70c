"""H5MD 1.1 files: reading the headers, axes, observables and metadata with h5py (frames: :mod:`.h5md_frames`;
writing: :mod:`.h5md_write`).

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

import os
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.errors import CorruptFileError, MissingDataError, ResourceError, UnitError
from phasewake.core.model.run import EnergyTable, Run, RunMetadata, Series
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
)
from phasewake.core.readers.h5md_frames import LAYOUT_ERRORS, H5MDFrames
from phasewake.core.readers.h5md_write import write_h5md
from phasewake.core.units import parse_unit

if TYPE_CHECKING:
    import h5py
    import mdtraj

H5MD_SUFFIXES = (".h5md", ".h5", ".hdf5", ".hdf")

@dataclass
class _StatedUnits:
    """Units the user stated (dimension -> unit text) for elements whose file gives none, and each use."""

    stated: Mapping[str, str] | None
    used: list[str] = field(default_factory=list)

    def assumed(self, dimension: str | None, name: str) -> str | None:
        """The unit the user stated for this dimension, or None; noted for the run's warnings."""
        if not self.stated or dimension is None or dimension not in self.stated:
            return None
        self.used.append(f"{name} has no unit in the file; using {self.stated[dimension]!r} as stated")
        return self.stated[dimension]


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


def check_claimed_rows(ds: h5py.Dataset, *, path: Path, name: str) -> None:
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
    except (OSError, ValueError):
        return  # a layout the HDF5 library cannot describe: the reads themselves fail with a clear error
    if written < n:
        raise CorruptFileError(f"{name} claims {n} rows, but the file holds data for at most {written} "
                               "(a damaged header, or a file that was never finished)", path=path)


def _axis(g: h5py.Group, n: int, *, path: Path, units: _StatedUnits, name: str) -> _Axis:
    """Step and time arrays of element ``g`` with ``n`` samples (array or scalar with offset)."""
    import h5py

    if "value" in g and isinstance(g["value"], h5py.Dataset):
        check_claimed_rows(g["value"], path=path, name=f"{name}/value")

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
            unit = units.assumed("time", f"{name}/time")
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


def _unit_factor(ds: h5py.Dataset, *, path: Path, units: _StatedUnits, name: str,
                 expect: str | None) -> tuple[float, str]:
    unit = ds.attrs.get("unit")
    if unit is None:
        unit = units.assumed(expect, name)
    if unit is None:
        raise UnitError(f"{name} has no unit attribute (state it: units={{{expect!r}: ...}})", path=path)
    try:
        u = parse_unit(decode(unit), expect=expect)
    except UnitError as exc:
        raise UnitError(f"{name}: {exc.problem}", path=path) from exc
    return u.factor, u.internal


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


_Sampled = tuple[str, np.ndarray, "np.ndarray | None", np.ndarray, str]  # name, steps, time, values, unit


def _read_observables(f: h5py.File, path: Path, frame_steps: np.ndarray, frame_time: np.ndarray,
                      warnings: list[str], dt_ps: float | None, other_tables: list[EnergyTable],
                      units: _StatedUnits) -> EnergyTable | None:
    """The observables sampled like the longest one as an EnergyTable; the others into ``other_tables``."""
    if "observables" not in f:
        return None
    series = _observable_series(f, path, warnings, units)
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
    others: dict[bytes, list[_Sampled]] = {}
    for name, st, _t, values, unit in series:
        rows = _align(steps, st)
        if np.any(rows < 0):
            warnings.append(f"{path.name}: observable {name} is sampled at other steps than "
                            f"{main[0]}; kept in a table of its own (metadata.extra['other_energy_tables'])")
            others.setdefault(st.tobytes(), []).append((name, st, _t, values, unit))
            continue
        table[name] = _series(name, values[rows], unit, path)
    warnings.extend(check_time_axis(time, path=path, what="observable sample"))
    other_tables.clear()
    for group in others.values():
        st, t_other = group[0][1], group[0][2]
        if t_other is None:
            if dt_ps is None:
                continue
            t_other = st * dt_ps
        other_tables.append(EnergyTable(time_ps=np.asarray(t_other, dtype=np.float64),
                                        series={n: _series(n, v, u, path) for n, _s, _tt, v, u in group},
                                        sources=(str(path),)))
    return EnergyTable(time_ps=np.asarray(time, dtype=np.float64), series=table, sources=(str(path),))


def _series(name: str, values: np.ndarray, unit: str, path: Path) -> Series:
    return Series(name=name, values=values, unit=unit, role=OBSERVABLE_ROLES.get(name.rsplit("/", 1)[-1], "other"),
                  source=f"{path.name}:/observables/{name}")


def _observable_series(f: h5py.File, path: Path, warnings: list[str], units: _StatedUnits) -> list[_Sampled]:
    """Every scalar time series under /observables, in internal units, with its own steps and times."""
    import h5py

    thermo = "h5md" in f and "modules" in f["h5md"] and "thermodynamics" in f["h5md"]["modules"]
    og = f["observables"]
    particle_number = None
    if thermo and "particle_number" in og:
        pn = og["particle_number"]
        particle_number = pn[()] if isinstance(pn, h5py.Dataset) else pn["value"][()]
    series: list[_Sampled] = []
    for name, obj in _iter_observables(og):
        if isinstance(obj, h5py.Dataset):
            continue  # fixed observable (a constant): not a time series
        ds = obj["value"]
        if ds.ndim != 1:
            continue  # vector observables are not energy-table columns
        base = name.rsplit("/", 1)[-1]
        role_dim = _ROLE_DIMENSION.get(OBSERVABLE_ROLES.get(base, "other"))
        u = _observable_unit(ds, name, role_dim, path, units)
        check_claimed_rows(ds, path=path, name=f"observables/{name}/value")
        values = np.asarray(ds[()], dtype=np.float64) * u.factor
        if thermo and base in _THERMO_PER_PARTICLE:
            if particle_number is None:
                warnings.append(f"{path.name}: {name} is per particle (thermodynamics module) but the file "
                                "has no particle_number; shown per particle")
            else:
                pnv = np.asarray(particle_number, dtype=np.float64)
                values = values * (pnv if pnv.ndim == 0 else pnv[: values.size])
        ax = _axis(obj, values.shape[0], path=path, units=units, name=f"observables/{name}")
        series.append((name, ax.step, ax.time_ps, values, u.internal))
    return series


def _observable_unit(ds: h5py.Dataset, name: str, role_dim: str | None, path: Path, units: _StatedUnits) -> Any:
    """The parsed unit of an observable: stated, or assumed by the user; none for a dimensionless one."""
    unit = ds.attrs.get("unit")
    if unit is None:
        unit = units.assumed(role_dim, f"observables/{name}")
    if unit is None:
        if role_dim is not None:
            raise UnitError(f"observable {name} has no unit attribute (state it: units={{{role_dim!r}: ...}})",
                            path=path)
        unit = "1"  # H5MD: a quantity without a unit attribute is dimensionless
    try:
        return parse_unit(decode(unit), expect=role_dim)
    except UnitError as exc:
        raise UnitError(f"observable {name}: {exc.problem}", path=path) from exc


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
    units = _StatedUnits(assumed_units)
    try:
        contents = _read_h5md(Path(path), group=group, units=units)
    except LAYOUT_ERRORS as exc:
        raise CorruptFileError(f"damaged or unexpected H5MD layout ({type(exc).__name__}: {exc})",
                               path=path) from exc
    except MemoryError as exc:
        raise ResourceError(f"not enough memory to read the file's headers and observables ({exc})",
                            path=path) from None
    contents.warnings.extend(f"{Path(path).name}: {u}" for u in dict.fromkeys(units.used))
    return contents


def _read_h5md(path: Path, *, group: str | None, units: _StatedUnits) -> H5MDContents:
    import h5py

    path = Path(path)
    warnings: list[str] = []
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise CorruptFileError(f"not a readable HDF5 file ({exc})", path=path) from exc
    with f:
        gname, groups = _choose_group(f, group, path, warnings)
        pg = f["particles"][gname]
        where = f"/particles/{gname}"
        n_rows, n_atoms = _position_shape(pg, where, path)
        pos_factor, _ = _unit_factor(pg["position"]["value"], path=path, units=units, name=f"{where}/position", expect="length")
        pax = _axis(pg["position"], n_rows, path=path, units=units, name=f"{where}/position")
        md, params = _metadata(f, n_atoms, path)
        md.sources["positions"] = f"{path.name}:{where}/position"
        time = _frame_time(pax, md.timestep_ps, path, warnings)
        vel_rows, vel_factor = _velocity_rows(pg, where, pax, units, n_atoms, md, path, warnings)
        if "force" in pg:
            md.extra["has_forces"] = True
        box_fixed, box_rows, box_factor = _box(pg, where, pax, units, md, path, warnings)
        has_box = box_fixed is not None or box_rows is not None
        image_rows = _image_rows(pg, where, pax, units, n_atoms, md, path, warnings) if has_box else None
        masses = _masses(pg, where, n_atoms, md, path, warnings)
        topology = _topology(f, pg, where, params, n_atoms, md, path, masses)
        if masses is None:
            masses = masses_from_topology(topology, n_atoms)
            if masses is not None:
                md.sources["masses"] = "element masses of the topology"
        other_tables: list[EnergyTable] = []
        energies = _read_observables(f, path, pax.step, time, warnings, md.timestep_ps, other_tables, units)
        if other_tables:
            md.extra["other_energy_tables"] = other_tables
        if energies is not None:
            md.sources["energies"] = f"{path.name}:/observables"

    frames = H5MDFrames(path, gname, frame_rows=np.arange(n_rows, dtype=np.int64),
                        time_ps=np.asarray(time, np.float64), pos_factor=pos_factor, vel_rows=vel_rows,
                        vel_factor=vel_factor, box_fixed=box_fixed, box_rows=box_rows, box_factor=box_factor,
                        n_atoms=n_atoms, image_rows=image_rows)
    return H5MDContents(frames=frames, time_ps=np.asarray(time, np.float64), masses_amu=masses,
                        topology=topology, energies=energies, metadata=md, warnings=warnings, groups=groups)


def _choose_group(f: h5py.File, group: str | None, path: Path, warnings: list[str]) -> tuple[str, tuple[str, ...]]:
    """The particle group to read (``group``, else the first with positions) and every group's name."""
    if "particles" not in f or not len(f["particles"]):
        raise MissingDataError("H5MD file has no /particles group, so no positions", path=path)
    groups = tuple(f["particles"].keys())
    with_pos = [g for g in groups if "position" in f["particles"][g]]
    if group is not None:
        if group not in groups:
            raise MissingDataError(f"no particle group {group!r}; the file has {', '.join(groups)}", path=path)
        if group not in with_pos:
            raise MissingDataError(f"particle group {group!r} has no positions", path=path)
        return group, groups
    if not with_pos:
        raise MissingDataError(f"no particle group has positions (groups: {', '.join(groups)})", path=path)
    if len(with_pos) > 1:
        warnings.append(f"{path.name}: particle groups with positions: {', '.join(with_pos)}; "
                        f"reading {with_pos[0]!r} (choose another with group=...)")
    return with_pos[0], groups


def _position_shape(pg: h5py.Group, where: str, path: Path) -> tuple[int, int]:
    """(frames, particles) of the group's positions, refusing what is not a 3-D time series."""
    import h5py

    pos_el = pg["position"]
    if not isinstance(pos_el, h5py.Group) or "value" not in pos_el:
        raise CorruptFileError(f"{where}/position is not a time-dependent element", path=path)
    pos_ds = pos_el["value"]
    if pos_ds.ndim != 3 or pos_ds.shape[2] not in (2, 3):
        raise CorruptFileError(f"{where}/position/value has shape {pos_ds.shape}, "
                               "expected (frames, particles, 3)", path=path)
    if pos_ds.shape[2] != 3:
        raise CorruptFileError("only 3-dimensional H5MD files are supported", path=path)
    n_rows, n_atoms = int(pos_ds.shape[0]), int(pos_ds.shape[1])
    if n_rows == 0:
        raise MissingDataError(f"{where}/position has no frames", path=path)
    return n_rows, n_atoms


def _metadata(f: h5py.File, n_atoms: int, path: Path) -> tuple[RunMetadata, dict[str, Any]]:
    """RunMetadata from /parameters (datasets and attributes), and every parameter read."""
    import h5py

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
        if key not in params:
            continue
        val = params[key]
        if key == "n_constraints":
            val = int(val)
            md.constraints_source = "metadata"
        elif key in ("timestep_ps", "temperature_K"):
            val = float(val)
        elif key == "com_motion_removed":
            val = bool(val)
        else:
            val = str(val)
        setattr(md, key, val)
    md.extra.update({k: v for k, v in params.items() if k not in _PARAM_FIELDS and k != "topology_json"})
    for key in ("timestep_ps", "n_constraints", "temperature_K"):
        if key in params:
            md.sources.setdefault(key, f"{path.name}:/parameters/{key}")
    check_metadata(md, n_atoms=n_atoms, path=path)
    return md, params


def _frame_time(pax: _Axis, timestep_ps: float | None, path: Path, warnings: list[str]) -> np.ndarray:
    """The frames' times: stored, else step x time step, else step numbers (said in the warnings)."""
    if pax.time_ps is not None:
        time = pax.time_ps
    elif timestep_ps is not None:
        time = pax.step * timestep_ps
        warnings.append(f"{path.name}: positions have no time; time = step x time step {timestep_ps:g} ps")
    else:
        time = pax.step.astype(np.float64)
        warnings.append(f"{path.name}: positions have neither time nor a known time step; the time axis "
                        "counts steps, not ps (state the time step)")
    # order by step is the file order; do not sort
    warnings.extend(check_time_axis(time, path=path, what="frame"))
    return np.asarray(time)


def _velocity_rows(pg: h5py.Group, where: str, pax: _Axis, units: _StatedUnits, n_atoms: int, md: RunMetadata, path: Path,
                   warnings: list[str]) -> tuple[np.ndarray | None, float]:
    """Row of velocity/value for each frame (-1 where missing; None without velocities) and the unit factor."""
    if "velocity" not in pg:
        return None, 1.0
    vel_el = pg["velocity"]
    vds = vel_el["value"]
    if vds.ndim != 3 or vds.shape[1] != n_atoms:
        raise CorruptFileError(f"{where}/velocity/value has shape {vds.shape} for {n_atoms} particles", path=path)
    vel_factor, _ = _unit_factor(vds, path=path, units=units, name=f"{where}/velocity", expect="velocity")
    vax = _axis(vel_el, int(vds.shape[0]), path=path, units=units, name=f"{where}/velocity")
    vel_rows = _align(pax.step, vax.step)
    n_with = int(np.sum(vel_rows >= 0))
    n_rows = pax.step.size
    md.sources["velocities"] = f"{path.name}:{where}/velocity"
    if n_with == 0:
        warnings.append(f"{path.name}: velocities are stored at steps where no positions are; ignored")
        return None, vel_factor
    if n_with < n_rows:
        warnings.append(f"{path.name}: velocities are stored at {n_with} of {n_rows} frames (aligned "
                        "by step); analyses that need velocities use those frames only")
    return vel_rows, vel_factor


def _box(pg: h5py.Group, where: str, pax: _Axis, units: _StatedUnits, md: RunMetadata, path: Path,
         warnings: list[str]) -> tuple[np.ndarray | None, np.ndarray | None, float]:
    """(fixed box (3, 3) nm or None, row of box/edges/value for each frame or None, unit factor)."""
    import h5py

    if "box" not in pg:
        return None, None, 1.0
    bx = pg["box"]
    boundary = decode(bx.attrs.get("boundary", np.array([b"none"])))
    boundary = [boundary] if isinstance(boundary, str) else list(boundary)
    periodic = [str(b).strip().lower() == "periodic" for b in boundary]
    if not any(periodic) or "edges" not in bx:
        return None, None, 1.0
    if not all(periodic):
        warnings.append(f"{path.name}: box is periodic only along some axes ({boundary})")
    md.sources["box"] = f"{path.name}:{where}/box"
    ed = bx["edges"]
    if isinstance(ed, h5py.Dataset):
        box_factor, _ = _unit_factor(ed, path=path, units=units, name=f"{where}/box/edges", expect="length")
        box_fixed = box_matrix(ed[()] * box_factor, 1)[0]
        checked = check_box(box_fixed[None], path=path)
        return (None if checked is None else box_fixed), None, box_factor
    box_factor, _ = _unit_factor(ed["value"], path=path, units=units, name=f"{where}/box/edges", expect="length")
    bax = _axis(ed, int(ed["value"].shape[0]), path=path, units=units, name=f"{where}/box/edges")
    box_rows = _align(pax.step, bax.step)
    if np.any(box_rows < 0):
        # a box sampled less often: use the latest box at or before each frame's step
        order = np.argsort(bax.step)
        k = np.searchsorted(bax.step[order], pax.step, side="right") - 1
        box_rows = order[np.clip(k, 0, None)]
        warnings.append(f"{path.name}: box sampled at other steps than positions; each frame "
                        "uses the latest box at or before its step")
    return None, box_rows, box_factor


def _image_rows(pg: h5py.Group, where: str, pax: _Axis, units: _StatedUnits, n_atoms: int, md: RunMetadata, path: Path,
                warnings: list[str]) -> np.ndarray | None:
    """Row of image/value for each frame (positions get unwrapped), or None."""
    import h5py

    if "image" not in pg or not isinstance(pg["image"], h5py.Group):
        return None
    iel = pg["image"]
    iax = _axis(iel, int(iel["value"].shape[0]), path=path, units=units, name=f"{where}/image")
    image_rows = _align(pax.step, iax.step)
    if np.any(image_rows < 0) or iel["value"].shape[1:] != (n_atoms, 3):
        warnings.append(f"{path.name}: periodic images do not match the positions' steps or shape; "
                        "positions are used as stored (wrapped)")
        return None
    md.sources["images"] = f"{path.name}:{where}/image (positions unwrapped)"
    return image_rows


def _masses(pg: h5py.Group, where: str, n_atoms: int, md: RunMetadata, path: Path,
            warnings: list[str]) -> np.ndarray | None:
    import h5py

    if "mass" not in pg:
        return None
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
        raise CorruptFileError(f"{where}/mass has shape {masses.shape} for {n_atoms} particles", path=path)
    md.sources["masses"] = f"{path.name}:{where}/mass"
    check_masses(masses, path=path, where=f"{where}/mass")
    return masses


def _topology(f: h5py.File, pg: h5py.Group, where: str, params: dict[str, Any], n_atoms: int,
              md: RunMetadata, path: Path, masses: np.ndarray | None = None) -> mdtraj.Topology | None:
    """The stored topology (/parameters/topology_json), else one made of the species and bonds."""
    import h5py

    if "topology_json" in params or ("parameters" in f and "topology_json" in f["parameters"]):
        raw = f["parameters"]["topology_json"][()] if "topology_json" in f["parameters"] else params["topology_json"]
        topology = topology_from_json(raw, path=path)
        if topology.n_atoms != n_atoms:
            raise CorruptFileError(f"stored topology has {topology.n_atoms} atoms, positions {n_atoms}", path=path)
        md.sources["topology"] = f"{path.name}:/parameters/topology_json"
        return topology
    if "species" not in pg:
        return None
    sp = pg["species"]
    sval = sp[()] if isinstance(sp, h5py.Dataset) else sp["value"][()]
    meaning = decode(sp.attrs.get("phasewake_meaning", ""))
    symbols = _species_symbols(sval, meaning if meaning or not _masses_say_atomic_numbers(sval, masses)
                               else "atomic number")
    if symbols is None or len(symbols) != n_atoms:
        md.extra["species"] = np.asarray(sval).tolist()
        return None
    bonds = f["connectivity"]["bonds"][()] if "connectivity" in f and "bonds" in f["connectivity"] else None
    md.sources["topology"] = f"{path.name}:{where}/species" + ("" if meaning else " (atomic numbers, as the masses show)")
    return topology_from_elements(symbols, bonds)


def _masses_say_atomic_numbers(sval: Any, masses: np.ndarray | None) -> bool:
    """Integer species whose every value is an atomic number with the standard atomic weight of the stored
    mass (within 0.1 amu): the species are atomic numbers, as OpenMM-based and other writers store them
    without saying so. Anything else (force-field types 1, 2, ... with argon masses, deuterium) is not."""
    vals = np.asarray(sval)
    if masses is None or vals.dtype.kind not in "iu" or vals.shape != masses.shape or vals.size == 0:
        return False
    from mdtraj.core import element as elem

    for z in np.unique(vals):
        try:
            weight = elem.Element.getByAtomicNumber(int(z)).mass
        except KeyError:
            return False
        if not np.all(np.abs(masses[vals == z] - weight) <= 0.1):
            return False
    return True


def _species_symbols(sval: Any, meaning: Any) -> list[str] | None:
    """Element symbols of a species dataset: stored as text, or as atomic numbers (as we write them)."""
    if np.asarray(sval).dtype.kind in "SOU":
        return [str(s) for s in decode(np.asarray(sval))]
    if meaning != "atomic number":
        return None
    from mdtraj.core import element as elem

    symbols = []
    for z in np.asarray(sval).ravel():
        try:
            symbols.append(elem.Element.getByAtomicNumber(int(z)).symbol)
        except KeyError:
            symbols.append("VS")
    return symbols


def open_h5md_run(path: Path, *, group: str | None = None, units: Mapping[str, str] | None = None) -> Run:
    """An H5MD file as a Run (see :func:`read_h5md`)."""
    c = read_h5md(path, group=group, assumed_units=units)
    warnings = list(c.warnings)
    masses = c.masses_amu
    if masses is None:
        masses = np.full(c.frames.n_atoms, np.nan)
        warnings.append(f"{path.name}: no masses in the file and no element data; masses unknown")
    return Run(name=path.stem, paths=(path,), topology=c.topology, masses_amu=masses, time_ps=c.time_ps,
               frames=c.frames, energies=c.energies, metadata=c.metadata, warnings=warnings)


__all__ = ["H5MDContents", "H5MDFrames", "claim", "open_h5md_run", "read_h5md", "write_h5md"]
