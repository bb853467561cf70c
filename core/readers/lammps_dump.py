"""LAMMPS text dumps (``dump custom``, ``dump atom``): our own reader, lazily in chunks.

Layout (LAMMPS dump): per frame optional ``ITEM: UNITS`` and ``ITEM: TIME``, then ``ITEM:
TIMESTEP``, ``ITEM: NUMBER OF ATOMS``, ``ITEM: BOX BOUNDS`` (+ ``xy xz yz`` for a triclinic box) with
three ``lo hi [tilt]`` lines, ``ITEM: ATOMS <columns>`` and one row per atom in arbitrary order.

- Opening scans the file once for a frame index (byte offsets, steps, boxes, columns); frames are read
  only when asked for, a chunk at a time.
- Atoms are sorted by ``id`` in every frame (a dump without ``id`` is refused: rows cannot be matched).
- Positions: ``xu yu zu`` (unwrapped) when present, else ``x y z`` plus ``ix iy iz`` images (unwrapped
  with the box), else scaled ``xs ys zs`` / ``xsu ysu zsu``; without images wrapped positions are used
  as they are, and said so.
- Velocities ``vx vy vz`` are full-step (the same step as the positions), as LAMMPS writes them.
- An appended continuation repeats the restart step (and may change columns): a frame whose step is not
  after the previous one replaces the earlier frames from that step on, as the engine's restart did.
- A last frame cut short is an error naming the file, the frame and its step (like a cut DCD/XTC/TRR):
  the complete frames are not silently kept, since a cut file usually means a failed copy.

Units: a dump carries none (unless ``ITEM: UNITS``). The style is fixed later by
:meth:`LammpsDumpFrames.set_units` (from log.lammps, the dump, or the user); time is step x time step.
"""

from __future__ import annotations

import io
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core.errors import CorruptFileError, MissingDataError, TopologyMismatchError, UnitsStyleUnknown
from phasewake.core.model.run import FrameChunk, FrameRequest, Run, RunMetadata
from phasewake.core.readers.common import ClockedFrames, check_box, file_head
from phasewake.core.readers.lammps_dump_index import DumpIndex, scan
from phasewake.core.readers.lammps_units import UnitStyle

DUMP_SUFFIXES = (".lammpstrj", ".lammpsdump", ".dump")

# Numeric columns we read; anything else (element, q, fx, c_*, ...) is skipped, text or numbers.
_POSITION_SETS = (("xu", "yu", "zu"), ("x", "y", "z"), ("xsu", "ysu", "zsu"), ("xs", "ys", "zs"))


def claim(path: Path) -> bool:
    """A LAMMPS text dump: starts with an ``ITEM:`` line (any suffix: dumps are often named dump.*)."""
    head = file_head(path, 64)
    if head is None:
        return False
    return head.lstrip().startswith(b"ITEM:")


_NUMERIC = frozenset(("id", "type", "x", "y", "z", "xu", "yu", "zu", "xs", "ys", "zs", "xsu", "ysu", "zsu",
                      "ix", "iy", "iz", "vx", "vy", "vz", "mass", "mol"))


def _parse_block(raw: bytes, cols: tuple[str, ...], n: int) -> np.ndarray | None:
    """The atom rows of one frame as float64 (n, len(cols)), text columns NaN; None when a row does not
    parse (the caller's slow path then names the row). pandas' C parser: about 2.5x numpy's text parsers,
    measured on a 20,000-atom frame."""
    import pandas as pd

    numeric = [c for c, name in enumerate(cols) if name in _NUMERIC]
    try:
        # LAMMPS separates fields by one space: then the plain separator (1.45x faster than a pattern)
        single = b"  " not in raw and b" \n" not in raw and b"\t" not in raw and not raw.startswith(b" ")
        df = pd.read_csv(io.BytesIO(raw), sep=" " if single else r"\s+", header=None, engine="c",
                         usecols=numeric, dtype=np.float64, names=list(range(len(cols))))
    except (ValueError, IndexError, TypeError):  # pandas' ParserError is a ValueError
        return None
    if df.shape[0] != n:
        return None
    rows = np.full((n, len(cols)), np.nan)
    rows[:, numeric] = df.to_numpy(dtype=np.float64)
    return rows


class LammpsDumpFrames(ClockedFrames):
    """A FrameSource over a LAMMPS text dump (frames read lazily, a chunk at a time)."""

    positions_precision_nm: float | None = None  # text: as many digits as the dump wrote (6 with %g)

    def __init__(self, path: Path, index: DumpIndex, keep: np.ndarray) -> None:
        self.path = path
        self._idx = index
        self._keep = keep  # file frame of each run frame
        self.n_frames = int(keep.size)
        first = int(keep[0])
        self.n_atoms = int(index.n_atoms[first])
        self.steps = np.asarray(index.step, dtype=np.int64)[keep]
        self.has_box = True
        self.velocities_estimated = False
        cols_per_frame = [index.column_sets[index.columns[int(k)]] for k in keep]
        self._vel_frames = np.array([all(c in cols for c in ("vx", "vy", "vz")) for cols in cols_per_frame])
        self.has_velocities = bool(self._vel_frames.all())
        self.style: UnitStyle | None = None
        self._time = self.steps.astype(np.float64)  # until set_units/retime: the step number
        self._ids: np.ndarray | None = None
        self.lammps: LammpsTopology | None = None  # set by open_dump_run, used by finish_run
        self.dump_units: str | None = None  # ITEM: UNITS, when the dump has it

    # -- units and time, fixed once the run's metadata is known
    def set_units(self, style: UnitStyle) -> None:
        self.style = style

    def dump_times(self) -> np.ndarray | None:
        """The ``ITEM: TIME`` values (style time units) of the frames, or None when some frame has none."""
        t = [self._idx.time[int(k)] for k in self._keep]
        return None if any(v is None for v in t) else np.asarray(t, dtype=np.float64)

    # -- reading
    def read_rows(self, k: int) -> tuple[tuple[str, ...], np.ndarray]:
        """Columns and the rows (float64, sorted by id) of file frame ``k``; non-numeric columns are NaN."""
        idx = self._idx
        cols = idx.column_sets[idx.columns[k]]
        n = idx.n_atoms[k]
        with open(self.path, "rb") as f:
            f.seek(idx.offset[k])
            raw = f.read(idx.end[k] - idx.offset[k])
        step = idx.step[k]
        rows = _parse_block(raw, cols, n)
        if rows is None:  # text in a numeric column, a short or long row: the slow path names it
            rows = self._rows_with_text(raw, cols, n, k)
        used = [c for c, name in enumerate(cols) if name in _NUMERIC]
        if used and not np.all(np.isfinite(rows[:, used])):
            r, c = np.argwhere(~np.isfinite(rows[:, used]))[0]
            raise CorruptFileError(f"frame {k} (step {step}): {cols[used[c]]} of atom row {r} is not a finite "
                                   "number", path=self.path)
        ids = rows[:, cols.index("id")]
        order = np.argsort(ids, kind="stable")
        rows = rows[order]
        sorted_ids = rows[:, cols.index("id")].astype(np.int64)
        if self._ids is None:
            if np.any(np.diff(sorted_ids) == 0):
                raise CorruptFileError(f"frame {k} (step {step}) lists an atom id twice", path=self.path)
            self._ids = sorted_ids
        elif not np.array_equal(sorted_ids, self._ids):
            raise CorruptFileError(f"frame {k} (step {step}) holds other atom ids than the first frame",
                                   path=self.path)
        return cols, rows

    def _rows_with_text(self, raw: bytes, cols: tuple[str, ...], n: int, k: int) -> np.ndarray:
        """Rows when some column holds text (element names): numbers where they parse, NaN elsewhere."""
        lines = raw.split(b"\n")
        rows = np.full((n, len(cols)), np.nan)
        r = 0
        for line in lines:
            fields = line.split()
            if not fields:
                continue
            if r >= n or len(fields) != len(cols):
                raise CorruptFileError(f"frame {k} (step {self._idx.step[k]}): atom row {r} has {len(fields)} "
                                       f"fields for {len(cols)} columns", path=self.path)
            for c, text in enumerate(fields):
                try:
                    rows[r, c] = float(text)
                except ValueError:
                    if cols[c] in _NUMERIC:
                        raise CorruptFileError(f"frame {k} (step {self._idx.step[k]}): {cols[c]} of atom row {r} "
                                               f"is not a number ({text[:20]!r})", path=self.path) from None
            r += 1
        if r != n:
            raise CorruptFileError(f"frame {k} (step {self._idx.step[k]}): {r} atom rows for {n} atoms",
                                   path=self.path)
        return rows

    def column_text(self, name: str) -> list[str] | None:
        """A text column (``element``) of the first frame, sorted by id, or None."""
        k = int(self._keep[0])
        cols = self._idx.column_sets[self._idx.columns[k]]
        if name not in cols:
            return None
        with open(self.path, "rb") as f:
            f.seek(self._idx.offset[k])
            raw = f.read(self._idx.end[k] - self._idx.offset[k])
        table = [line.split() for line in raw.split(b"\n") if line.strip()]
        ids = np.array([int(r[cols.index("id")]) for r in table])
        order = np.argsort(ids, kind="stable")
        return [table[i][cols.index(name)].decode("utf-8", errors="replace") for i in order]

    def _positions(self, cols: tuple[str, ...], rows: np.ndarray, k: int) -> np.ndarray:
        box = self._idx.box[k]
        origin = self._idx.origin[k]
        for names in _POSITION_SETS:
            if all(c in cols for c in names):
                xyz = rows[:, [cols.index(c) for c in names]]
                if names[0].startswith("xs"):  # scaled: fractions of the edge vectors from the corner
                    xyz = origin + xyz @ box
                if names == ("x", "y", "z") and all(c in cols for c in ("ix", "iy", "iz")):
                    xyz = xyz + rows[:, [cols.index(c) for c in ("ix", "iy", "iz")]] @ box
                return xyz
        raise MissingDataError(f"frame {k} (step {self._idx.step[k]}) has no positions (columns "
                               f"{' '.join(cols)}; expected x y z, xu yu zu or xs ys zs)", path=self.path)

    def wrapped_only(self) -> bool:
        """True when some frame has wrapped positions (x y z or xs ys zs) and no image flags."""
        for cols in self._idx.column_sets:
            if not any(all(c in cols for c in s) for s in (("xu", "yu", "zu"), ("xsu", "ysu", "zsu"))):
                if not all(c in cols for c in ("ix", "iy", "iz")):
                    return True
        return False

    def _read(self, request: FrameRequest) -> Iterator[FrameChunk]:
        if self.style is None:
            raise MissingDataError("the LAMMPS units style is not known (give log.lammps, which echoes "
                                   "'units', or state it)", path=self.path)
        style, atoms, n_read = self.style, request.atoms, request.n_read
        with_v = request.velocities and self.has_velocities
        for sel in request.batches():
            pos = np.empty((sel.size, n_read if request.positions else 0, 3), np.float32)
            vel = np.empty((sel.size, n_read, 3), np.float32) if with_v else None
            box = np.empty((sel.size, 3, 3))
            for j, fi in enumerate(sel):
                k = int(self._keep[fi])
                cols, rows = self.read_rows(k)
                if rows.shape[0] != self.n_atoms:
                    raise CorruptFileError(f"frame {k} (step {self._idx.step[k]}) has {rows.shape[0]} atoms, "
                                           f"the first frame {self.n_atoms}", path=self.path)
                if atoms is not None:
                    rows = rows[atoms]
                if request.positions:
                    pos[j] = self._positions(cols, rows, k) * style.length_nm
                if vel is not None:
                    vel[j] = rows[:, [cols.index(c) for c in ("vx", "vy", "vz")]] * style.velocity_nm_per_ps
                box[j] = self._idx.box[k] * style.length_nm
            box = check_box(box, path=self.path, first_frame=int(sel[0]))  # an edge <= 0 is refused by name
            yield FrameChunk(start=int(sel[0]), time_ps=self._time[sel], positions_nm=pos,
                             velocities_nm_per_ps=vel, box_nm=box)


@dataclass
class DumpScan:
    """A dump opened: its frames (repeated steps resolved) and what the scan found."""

    frames: LammpsDumpFrames
    repeats: list[str]  # one line per appended continuation that restarted before the previous end
    units: str | None  # ITEM: UNITS, when the dump has it
    columns: tuple[str, ...]  # of the first frame


def open_dump(path: str | Path) -> DumpScan:
    """Scan a dump and resolve appended continuations (the later frames of a repeated step win)."""
    p = Path(path)
    idx = scan(p)
    steps = idx.step
    kept: list[int] = []
    repeats: list[str] = []
    for k, s in enumerate(steps):
        if kept and s <= steps[kept[-1]]:
            dropped = [j for j in kept if steps[j] >= s]
            kept = [j for j in kept if steps[j] < s]
            repeats.append(f"frame {k} restarts at step {s}: {len(dropped)} earlier frame(s) of steps "
                           f"{steps[dropped[0]]} to {steps[dropped[-1]]} replaced by the later ones")
        kept.append(k)
    n0 = idx.n_atoms[kept[0]]
    for k in kept:
        if idx.n_atoms[k] != n0:
            raise CorruptFileError(f"frame {k} (step {steps[k]}) has {idx.n_atoms[k]} atoms, frame 0 has {n0}: "
                                   "the atom count changes inside the dump", path=p)
    units = next((u for u in idx.units if u), None)
    frames = LammpsDumpFrames(p, idx, np.asarray(kept, dtype=np.int64))
    frames.dump_units = units
    return DumpScan(frames=frames, repeats=repeats, units=units,
                    columns=idx.column_sets[idx.columns[kept[0]]])


# ------------------------------------------------------------------------------------ a run


@dataclass
class LammpsTopology:
    """What a dump run knows about its atoms before the units style is known (masses in style units)."""

    dump_path: Path
    data: object | None = None  # lammps_data.DataFile
    mdtraj_top: object | None = None  # a topology file read by mdtraj (PDB, ...)
    top_path: Path | None = None
    dump_masses: np.ndarray | None = None  # the dump's mass column (style mass unit)
    dump_types: np.ndarray | None = None
    elements: list[str] | None = None  # the dump's element column
    dump_mols: np.ndarray | None = None  # the dump's mol column


def open_dump_run(path: Path, top_path: Path | None) -> Run:
    """A Run over a LAMMPS dump (and a data file or another topology), units not yet applied.

    :func:`finish_run` applies the units style and the time step once the run's metadata is known
    (``open_run`` calls it after reading log.lammps and the user's statements).
    """
    from phasewake.core.model.run import Run, RunMetadata
    from phasewake.core.readers import lammps_data

    ds = open_dump(path)
    frames = ds.frames
    warnings = [f"{path.name}: appended continuation: {r}" for r in ds.repeats]
    meta = RunMetadata()
    meta.sources["positions"] = path.name
    if frames.has_velocities:
        meta.sources["velocities"] = f"{path.name} (vx vy vz, full-step)"
    elif frames._vel_frames.any():
        warnings.append(f"{path.name}: only {int(frames._vel_frames.sum())} of {frames.n_frames} frames hold "
                        "velocities (the dump's columns change); stored velocities are not used")
    if ds.repeats:
        meta.extra["overlaps"] = [f"{path.name}: {r}" for r in ds.repeats]
    info = LammpsTopology(dump_path=path, top_path=top_path)
    k0 = int(frames._keep[0])
    cols, rows = frames.read_rows(k0)
    if "mass" in cols:
        info.dump_masses = rows[:, cols.index("mass")].copy()
    if "type" in cols:
        info.dump_types = rows[:, cols.index("type")].astype(np.int64)
    if "mol" in cols:
        info.dump_mols = rows[:, cols.index("mol")].astype(np.int64)
    if "element" in cols:
        info.elements = frames.column_text("element")
    if top_path is not None:
        if lammps_data.claim(top_path):
            data = lammps_data.read_data(top_path)
            if data.n_atoms != frames.n_atoms:
                raise TopologyMismatchError(f"the dump has {frames.n_atoms} atoms, the data file {top_path.name} "
                                            f"{data.n_atoms}", path=path)
            if frames._ids is not None and not np.array_equal(frames._ids, data.ids):
                raise TopologyMismatchError(f"the dump's atom ids differ from those of the data file "
                                            f"{top_path.name}", path=path)
            info.data = data
        else:
            from phasewake.core.readers.trajectory import load_topology

            top = load_topology(top_path)
            if top.n_atoms != frames.n_atoms:
                raise TopologyMismatchError(f"the dump has {frames.n_atoms} atoms, the topology {top_path.name} "
                                            f"{top.n_atoms}", path=path)
            info.mdtraj_top = top
        meta.sources["topology"] = top_path.name
    frames.lammps = info
    if frames.wrapped_only():
        warnings.append(f"{path.name}: positions are wrapped into the box (x y z without ix iy iz images): "
                        "molecules may be cut at the box faces. Dump xu yu zu, or x y z with ix iy iz")
    meta.extra["time_from"] = "step number"
    return Run(name=path.stem, paths=(path,) + ((top_path,) if top_path else ()), topology=None,
               masses_amu=np.full(frames.n_atoms, np.nan), time_ps=frames.time_ps.copy(), frames=frames,
               energies=None, metadata=meta, warnings=warnings)


def lammps_frames(frames: object) -> bool:
    """True for frames that still need :func:`finish_run` (a dump, or parts made of dumps)."""
    return getattr(frames, "lammps", None) is not None


def finish_run(run: Run, stated: str | None = None) -> list[str]:
    """Apply the units style and the time step to a dump run; return warnings.

    The style comes from ``run.metadata.units_style`` when log.lammps echoes it (or the user set it),
    else the dump's ``ITEM: UNITS``, else ``stated`` (``--units``), else the LAMMPS default a log without
    a ``units`` command implies; a run whose style nothing states is refused. Time is step x time step
    (``run.metadata.timestep_ps``; for lj the log's time step in tau, ``extra["timestep_tau"]``), else
    the dump's ``ITEM: TIME``, else the step number (said so).
    """
    frames = run.frames
    info: LammpsTopology = frames.lammps  # type: ignore[union-attr]
    warnings: list[str] = []
    style = _units_style(run.metadata, frames, info, stated, warnings)
    frames.set_units(style)  # type: ignore[union-attr]
    run.metadata.engine = run.metadata.engine or "LAMMPS"
    _apply_time(run, style, info, warnings)
    _apply_topology_and_masses(run, style, info, warnings)
    if style.reduced:
        warnings.append(f"{info.dump_path.name}: LAMMPS lj units are reduced: positions, times, velocities and "
                        "masses are in sigma, tau, sigma/tau and m, shown as numbers without conversion "
                        "(the labels nm, ps, amu do not apply)")
    return warnings


def _units_style(md: RunMetadata, frames: Any, info: LammpsTopology, stated: str | None,
                 warnings: list[str]) -> UnitStyle:
    """The style the log echoes or the user set, else the dump's ITEM: UNITS, else ``stated``; or refused."""
    from phasewake.core.readers.lammps_units import style_from_text

    style = style_from_text(md.units_style)
    if md.units_style and style is None:
        raise MissingDataError(f"units style {md.units_style!r} is not a LAMMPS style (lj, real, metal, si, "
                               "cgs, electron, micro, nano)", path=info.dump_path)
    src = md.sources.get("units_style", "")
    guessed = style is not None and (src.startswith("LAMMPS default") or src.startswith("stated"))
    dump_style = style_from_text(getattr(frames, "dump_units", None))
    if dump_style is not None and (style is None or guessed):
        if style is not None and style.name != dump_style.name and src.startswith("stated"):
            warnings.append(f"{info.dump_path.name}: the dump says 'units {dump_style.name}'; the stated "
                            f"'{style.name}' is not used")
        style = dump_style
        md.units_style = f"lammps {style.name}"
        md.sources["units_style"] = f"ITEM: UNITS of {info.dump_path.name}"
    elif stated and (style is None or guessed):
        style = style_from_text(stated)
        if style is None:
            raise MissingDataError(f"units style {stated!r} is not a LAMMPS style (lj, real, metal, si, cgs, "
                                   "electron, micro, nano)", path=info.dump_path)
        md.units_style = f"lammps {style.name}"
        md.sources["units_style"] = "stated (--units)"
    if style is None:
        raise UnitsStyleUnknown("the LAMMPS units style is not known: give log.lammps (it echoes 'units') with "
                                "the dump, or state it (--units real, metal, lj, ...)", path=info.dump_path)
    return style


def _apply_time(run: Run, style: UnitStyle, info: LammpsTopology, warnings: list[str]) -> None:
    """Frame times: step x time step, else the dump's ITEM: TIME, else the step number (said so)."""
    from phasewake.core.readers.common import check_time_axis

    frames: Any = run.frames
    md = run.metadata
    steps = np.asarray(frames.steps, dtype=np.float64)
    dt = md.timestep_ps
    dt_source = md.sources.get("timestep_ps", "the run")
    if style.reduced and md.extra.get("timestep_tau") is not None and md.sources.get("timestep_ps") != "user":
        dt, dt_source = float(md.extra["timestep_tau"]), "log.lammps"
    if dt is not None:
        t = steps * float(dt)
        md.extra["time_from"] = f"step x time step ({dt:g} {'tau' if style.reduced else 'ps'} from {dt_source})"
    elif (dump_t := frames.dump_times()) is not None:
        t = dump_t * style.time_ps
        md.extra["time_from"] = f"ITEM: TIME of {info.dump_path.name}"
    else:
        t = steps
        md.extra["time_from"] = "step number"
        warnings.append(f"{info.dump_path.name}: the time step is not known, so time is the step number (not ps): "
                        "give log.lammps (it echoes 'timestep') or --timestep")
    frames.retime(t)
    run.time_ps = np.asarray(t, dtype=np.float64)
    warnings.extend(check_time_axis(run.time_ps, path=info.dump_path, what="frame"))


def _apply_topology_and_masses(run: Run, style: UnitStyle, info: LammpsTopology, warnings: list[str]) -> None:
    """Topology from the data file, an mdtraj topology or the dump's columns; masses from the dump's mass
    column, the data file's Masses, or the elements."""
    from phasewake.core.readers import lammps_data

    masses = None
    src = ""
    g_per_mol = style.name in ("real", "metal", "electron")
    if info.dump_masses is not None:
        masses, src = info.dump_masses * style.mass_amu, f"mass column of {info.dump_path.name}"
    elif info.data is not None and info.data.masses() is not None:  # type: ignore[attr-defined]
        masses = info.data.masses() * style.mass_amu  # type: ignore[attr-defined]
        src = f"Masses of {info.top_path.name if info.top_path else 'the data file'}"
    if info.data is not None:
        run.topology = lammps_data.topology(info.data, masses_in_amu=g_per_mol,  # type: ignore[arg-type]
                                            elements=info.elements)
    elif info.mdtraj_top is not None:
        run.topology = info.mdtraj_top  # type: ignore[assignment]
    elif info.elements is not None or info.dump_types is not None:
        run.topology = _topology_of_types(info.dump_types, info.elements, info.dump_mols)  # type: ignore[assignment]
    if masses is None and run.topology is not None:
        from phasewake.core.readers.common import masses_from_topology

        masses = masses_from_topology(run.topology, run.frames.n_atoms)  # type: ignore[union-attr]
        src = "element masses of " + (info.top_path.name if info.mdtraj_top is not None and info.top_path
                                      else f"the element column of {info.dump_path.name}")
    if masses is None:
        warnings.append(f"{info.dump_path.name}: masses unknown: give the LAMMPS data file (its Masses section), "
                        "or dump a mass or element column")
        return
    if not np.all(np.isfinite(masses)) or np.any(masses <= 0):
        raise CorruptFileError("masses must be positive finite numbers", path=info.dump_path)
    run.masses_amu = np.asarray(masses, dtype=np.float64)
    run.metadata.sources["masses"] = src


def _topology_of_types(types: np.ndarray | None, elements: list[str] | None,
                       mols: np.ndarray | None = None) -> object:
    """A topology from a dump alone: atoms named by element (element column) or ``T<type>``; a residue
    per molecule (mol column), else per run of consecutive atoms of one type (one residue per atom costs
    a second per 20,000 atoms in mdtraj)."""
    import mdtraj as md
    from mdtraj.core import element as elem

    n = len(elements) if elements is not None else len(types)  # type: ignore[arg-type]
    top = md.Topology()
    chain = top.add_chain()
    res = None
    last: object = None
    for i in range(n):
        key = elements[i] if elements is not None else f"T{int(types[i])}"  # type: ignore[index]
        group = (int(mols[i]),) if mols is not None else key
        if group != last:
            res = top.add_residue("MOL" if mols is not None else key, chain,
                                  resSeq=int(mols[i]) if mols is not None else i + 1)
            last = group
        try:
            el = elem.get_by_symbol(key) if elements is not None else elem.virtual
        except KeyError:
            el = elem.virtual
        top.add_atom(key, el, res)
    return top
