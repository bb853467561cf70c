"""mdtraj's own HDF5 trajectory format (".h5", "Pande" conventions), read with plain h5py.

mdtraj itself needs PyTables for this format; h5py reads every field: ``coordinates`` (frames, atoms, 3),
``time``, ``cell_lengths``/``cell_angles``, ``velocities``, ``kineticEnergy``, ``potentialEnergy``,
``temperature`` and the ``topology`` JSON. Unit attributes are ``units`` (plural, often bytes). When a
unit attribute is absent the convention's unit is used (nm, ps, degrees, kJ/mol, K), as mdtraj does.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from phasewake.core.errors import CorruptFileError, MissingDataError, UnitError
from phasewake.core.model.run import (
    EnergyTable,
    FrameChunk,
    FrameRequest,
    Run,
    RunMetadata,
    Series,
    no_positions,
)
from phasewake.core.readers.common import (
    box_vectors_from_lengths_angles,
    check_box,
    check_time_axis,
    decode,
    masses_from_topology,
    topology_from_json,
)
from phasewake.core.readers.h5md_frames import HDF5Frames, in_float32
from phasewake.core.units import parse_unit

if TYPE_CHECKING:
    import h5py

# dataset -> (convention unit, expected dimension)
_CONVENTION = {
    "coordinates": ("nanometers", "length"),
    "time": ("picoseconds", "time"),
    "cell_lengths": ("nanometers", "length"),
    "velocities": ("nanometers/picosecond", "velocity"),
    "kineticEnergy": ("kilojoules_per_mole", "energy"),
    "potentialEnergy": ("kilojoules_per_mole", "energy"),
    "temperature": ("kelvin", "temperature"),
}
_ENERGY_FIELDS = {"potentialEnergy": ("potential_energy", "potential"),
                  "kineticEnergy": ("kinetic_energy", "kinetic"),
                  "temperature": ("temperature", "temperature")}


def claim(path: Path) -> bool:
    if path.suffix.lower() not in (".h5", ".hdf5", ".lh5"):
        return False
    try:
        import h5py

        with h5py.File(path, "r") as f:
            if "h5md" in f:
                return False
            conv = decode(f.attrs.get("conventions", ""))
            return conv == "Pande" or "coordinates" in f
    except OSError:
        return False


def _factor(f: h5py.File, name: str, path: Path) -> float:
    ds = f[name]
    unit = ds.attrs.get("units")
    conv, dim = _CONVENTION[name]
    text = conv if unit is None else decode(unit)
    if dim == "length" and text in ("degrees",):
        raise UnitError(f"{name} has unit {text!r}, expected a length", path=path)
    try:
        return parse_unit(text, expect=dim).factor
    except UnitError as exc:
        raise UnitError(f"{name}: {exc.problem}", path=path) from exc


class MdtrajH5Frames(HDF5Frames):
    """Lazy chunked frames of an mdtraj HDF5 file (a FrameSource)."""

    def __init__(self, path: Path, *, n_frames: int, n_atoms: int, time_ps: np.ndarray, pos_factor: float,
                 vel_factor: float | None, box_factor: float | None) -> None:
        self.path = path
        self.n_frames = n_frames
        self.n_atoms = n_atoms
        self._time = time_ps
        self._pf = pos_factor
        self._vf = vel_factor
        self._bf = box_factor
        self.has_velocities = vel_factor is not None
        self.velocities_estimated = False
        self.has_box = box_factor is not None

    def _chunks(self, f: h5py.File, request: FrameRequest) -> Iterator[FrameChunk]:
        for sel in request.batches():
            sl = slice(int(sel[0]), int(sel[-1]) + 1, request.stride)
            pos = no_positions(sel.size)  # a velocity-only analysis reads none
            if request.positions:
                pos = in_float32(request.pick(f["coordinates"][sl]), self._pf)
            vel = None
            if request.velocities and self._vf is not None:
                vel = in_float32(request.pick(f["velocities"][sl]), self._vf)
            box = None
            if self._bf is not None:
                lengths = f["cell_lengths"][sl] * self._bf
                angles = f["cell_angles"][sl] if "cell_angles" in f else np.full_like(lengths, 90.0)
                box = check_box(box_vectors_from_lengths_angles(lengths, angles), path=self.path,
                                first_frame=int(sel[0]))
            yield FrameChunk(start=int(sel[0]), time_ps=self._time[sel], positions_nm=pos,
                             velocities_nm_per_ps=vel, box_nm=box)


def open_mdtraj_h5_run(path: str | Path) -> Run:
    """Open an mdtraj HDF5 file: headers, time, energies and topology; frames stay lazy."""
    import h5py

    path = Path(path)
    warnings: list[str] = []
    md = RunMetadata()
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise CorruptFileError(f"not a readable HDF5 file ({exc})", path=path) from exc
    with f:
        if "coordinates" not in f:
            raise MissingDataError("mdtraj HDF5 file has no coordinates", path=path)
        shape = f["coordinates"].shape
        if len(shape) != 3 or shape[2] != 3:
            raise CorruptFileError(f"coordinates have shape {shape}, expected (frames, atoms, 3)", path=path)
        n_frames, n_atoms = int(shape[0]), int(shape[1])
        if n_frames == 0:
            raise MissingDataError("mdtraj HDF5 file has no frames", path=path)
        from phasewake.core.readers.h5md import check_claimed_rows

        check_claimed_rows(f["coordinates"], path=path, name="/coordinates")  # before n_frames is allocated
        pf = _factor(f, "coordinates", path)
        if "time" in f:
            time = np.asarray(f["time"][()], dtype=np.float64) * _factor(f, "time", path)
            if time.shape != (n_frames,):
                raise CorruptFileError(f"time has {time.shape[0]} entries for {n_frames} frames", path=path)
            md.extra["time_from"] = f"{path.name}:/time"
        else:
            time = np.arange(n_frames, dtype=np.float64)
            warnings.append(f"{path.name}: no time dataset; frames are numbered, not in ps")
        warnings.extend(check_time_axis(time, path=path, what="frame"))
        vf = None
        if "velocities" in f:
            if f["velocities"].shape != shape:
                raise CorruptFileError(f"velocities have shape {f['velocities'].shape}, coordinates {shape}", path=path)
            vf = _factor(f, "velocities", path)
            md.sources["velocities"] = f"{path.name}:/velocities"
        bf = _factor(f, "cell_lengths", path) if "cell_lengths" in f else None
        if bf is not None:
            md.sources["box"] = f"{path.name}:/cell_lengths"
        topology = None
        if "topology" in f:
            topology = topology_from_json(f["topology"][0], path=path)
            if topology.n_atoms != n_atoms:
                raise CorruptFileError(f"stored topology has {topology.n_atoms} atoms, coordinates {n_atoms}",
                                       path=path)
            md.sources["topology"] = f"{path.name}:/topology"
        series: dict[str, Series] = {}
        for key, (name, role) in _ENERGY_FIELDS.items():
            if key in f:
                vals = np.asarray(f[key][()], dtype=np.float64)
                if vals.shape != (n_frames,):
                    warnings.append(f"{path.name}: {key} has {vals.shape} values for {n_frames} frames; ignored")
                    continue
                u = _CONVENTION[key][0] if f[key].attrs.get("units") is None else decode(f[key].attrs["units"])
                pu = parse_unit(u, expect=_CONVENTION[key][1])
                series[name] = Series(name=name, values=vals * pu.factor, unit=pu.internal, role=role,
                                      source=f"{path.name}:/{key}")
        for attr in ("program", "application", "title"):
            if attr in f.attrs:
                md.extra[attr] = decode(f.attrs[attr])
    md.sources["positions"] = f"{path.name}:/coordinates"
    energies = EnergyTable(time_ps=time, series=series, sources=(str(path),)) if series else None
    if energies is not None:
        md.sources["energies"] = path.name
    masses = masses_from_topology(topology, n_atoms)
    if masses is None:
        masses = np.full(n_atoms, np.nan)
        warnings.append(f"{path.name}: no topology with elements; masses unknown")
    else:
        md.sources["masses"] = "element masses of the topology"
    frames = MdtrajH5Frames(path, n_frames=n_frames, n_atoms=n_atoms, time_ps=time, pos_factor=pf,
                            vel_factor=vf, box_factor=bf)
    return Run(name=path.stem, paths=(path,), topology=topology, masses_amu=masses, time_ps=time,
               frames=frames, energies=energies, metadata=md, warnings=warnings)
