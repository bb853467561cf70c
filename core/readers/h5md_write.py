"""Writing H5MD 1.1 files (the layout :mod:`.h5md` reads; see there for the specification).

phasewake writes TOTAL observables (kinetic/potential energy of the whole system) and does not declare
the thermodynamics module.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.readers.common import topology_to_json

if TYPE_CHECKING:
    import h5py
    import mdtraj


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
    """Write an H5MD 1.1 file (atomically, through core/store/atomic.py: a temporary file beside it, then a
    rename).

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

    from phasewake.core.store.atomic import atomic_path  # the project's one atomic writer

    pos = np.asarray(positions_nm, dtype=np.float32)
    if pos.ndim != 3 or pos.shape[2] != 3:
        raise ValueError(f"positions must have shape (F, N, 3), not {pos.shape}")
    n_frames = pos.shape[0]
    t = np.asarray(time_ps, dtype=np.float64)
    if t.shape != (n_frames,):
        raise ValueError(f"time_ps must have shape ({n_frames},), not {t.shape}")
    st = np.arange(n_frames, dtype=np.int64) if step is None else np.asarray(step, dtype=np.int64)
    if st.shape != (n_frames,):
        raise ValueError(f"step must have shape ({n_frames},), not {st.shape}")
    with atomic_path(Path(path)) as tmp, h5py.File(tmp, "w") as f:
        _write_header(f, author, creator_version)
        pg = f.create_group("particles").create_group(group)
        pos_group = _write_frames(pg, pos, t, st, velocities_nm_per_ps)
        _write_box(pg, box_nm, pos_group, n_frames)
        _write_atoms(pg, masses_amu, species, topology, pos.shape[1])
        if observables:
            _write_observables(f, observables, pos_group, t, st)
        _write_parameters(f, parameters, topology, pg, pos.shape[1])


def _write_header(f: h5py.File, author: str, creator_version: str | None) -> None:
    from phasewake.core import __version__

    h = f.create_group("h5md")
    h.attrs["version"] = np.array([1, 1], dtype=np.int32)
    h.create_group("author").attrs["name"] = author
    cr = h.create_group("creator")
    cr.attrs["name"] = "phasewake"
    cr.attrs["version"] = creator_version or __version__


def _write_frames(pg: h5py.Group, pos: np.ndarray, t: np.ndarray, st: np.ndarray,
                  velocities_nm_per_ps: np.ndarray | None) -> h5py.Group:
    """Positions (and velocities, sampled with them: step and time are hard links); the position group."""
    n_frames, n_atoms = pos.shape[:2]
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
    return pos_group


def _write_box(pg: h5py.Group, box_nm: np.ndarray | None, pos_group: h5py.Group, n_frames: int) -> None:
    box = pg.create_group("box")
    box.attrs["dimension"] = np.int32(3)
    if box_nm is None:
        box.attrs["boundary"] = np.array([b"none"] * 3)
        return
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


def _write_atoms(pg: h5py.Group, masses_amu: np.ndarray | None, species: Sequence[str] | None,
                 topology: mdtraj.Topology | None, n_atoms: int) -> None:
    """Masses, and elements as atomic numbers (from ``species``, else from the topology)."""
    if masses_amu is not None:
        m = np.asarray(masses_amu, dtype=np.float64)
        if m.shape != (n_atoms,):
            raise ValueError(f"masses must have shape ({n_atoms},), not {m.shape}")
        pg.create_dataset("mass", data=m).attrs["unit"] = "u"
    symbols = list(species) if species is not None else None
    if symbols is None and topology is not None:
        symbols = [a.element.symbol if a.element is not None else "VS" for a in topology.atoms]
    if symbols is None:
        return
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


def _write_observables(f: h5py.File, observables: Mapping[str, tuple[Any, ...]], pos_group: h5py.Group,
                       t: np.ndarray, st: np.ndarray) -> None:
    n_frames = t.size
    dt_frame = float(np.median(np.diff(t))) if n_frames > 1 else 1.0
    dstep = float(np.median(np.diff(st))) if n_frames > 1 else 1.0
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


def _write_parameters(f: h5py.File, parameters: Mapping[str, Any] | None, topology: mdtraj.Topology | None,
                      pg: h5py.Group, n_atoms: int) -> None:
    prm = f.create_group("parameters")
    for key, val in dict(parameters or {}).items():
        if val is None:
            continue
        prm.create_dataset(key, data=val)
    if topology is None:
        return
    if topology.n_atoms != n_atoms:
        raise ValueError(f"topology has {topology.n_atoms} atoms, positions {n_atoms}")
    prm.create_dataset("topology_json", data=topology_to_json(topology))
    bonds = np.array([[b[0].index, b[1].index] for b in topology.bonds], dtype=np.int64)
    if bonds.size:
        cg = f.create_group("connectivity")
        bd = cg.create_dataset("bonds", data=bonds.reshape(-1, 2))
        bd.attrs["particles_group"] = pg.ref
