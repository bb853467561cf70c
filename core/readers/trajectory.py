"""Trajectories and topologies read through mdtraj, lazily in chunks.

Positions come from ``mdtraj.iterload`` (nm, box vectors in nm). Velocities, which mdtraj's public
readers drop, come from the files themselves where a format stores them:

- TRR (GROMACS): mdtraj's lower-level ``TRRTrajectoryFile._read(..., get_velocities=True)``, after
  checking every frame's XDR header says velocities are there (a frame without them would otherwise
  come back as uninitialised memory);
- AMBER NetCDF: the ``velocities`` variable read with ``scipy.io.netcdf_file(maskandscale=True)``, which
  applies its ``scale_factor`` (20.455 for AMBER's internal velocity unit), then converted by its unit.

Time axes come from headers where possible: XTC/TRR frame headers, the NetCDF ``time`` variable, the
DCD header (ISTART, NSAVC, DELTA in AKMA time units) unless it holds mdtraj's placeholder values.
"""

from __future__ import annotations

import contextlib
import math
import struct
import warnings as _warnings
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.errors import (
    NO_FRAME_TIMES,
    Caveat,
    CorruptFileError,
    MissingDataError,
    TopologyMismatchError,
)
from phasewake.core.model.run import FrameChunk, FrameRequest, Run, RunMetadata, no_positions
from phasewake.core.readers.common import (
    ClockedFrames,
    check_box,
    check_time_axis,
    file_head,
    masses_from_topology,
)
from phasewake.core.readers.quiet import quiet_mdtraj
from phasewake.core.readers.xdr import (  # noqa: F401 - _check_xdr_complete and trr_velocity_frames: names kept here
    _check_xdr_complete,
    _trr_header,
    frame_index,
    trr_velocity_frames,
)
from phasewake.core.readers.xdr_frames import XdrFrames
from phasewake.core.units import parse_unit

if TYPE_CHECKING:
    import mdtraj

TRAJECTORY_SUFFIXES = (".dcd", ".xtc", ".trr", ".nc", ".ncdf", ".netcdf", ".lammpstrj", ".xyz", ".binpos",
                       ".pdb", ".pdb.gz", ".gro", ".mdcrd", ".crd", ".arc", ".dtr")
TOPOLOGY_SUFFIXES = (".pdb", ".pdb.gz", ".gro", ".psf", ".prmtop", ".parm7", ".mol2", ".hoomdxml", ".cif",
                     ".pdbx", ".h5")
# Formats that carry their own topology.
SELF_TOPOLOGY = (".pdb", ".pdb.gz", ".gro", ".cif", ".pdbx")
# Formats for which mdtraj wants the atom count given with the file (read from the topology).
_NEEDS_N_ATOMS = (".mdcrd", ".crd")


def _suffix(path: Path) -> str:
    name = path.name.lower()
    return ".pdb.gz" if name.endswith(".pdb.gz") else path.suffix.lower()


def _sniff(path: Path) -> str | None:
    """The format the first bytes say, for formats with a signature; None when they say nothing."""
    head = file_head(path, 96)
    if head is None:
        return None
    if len(head) >= 8 and head[4:8] == b"CORD":
        return ".dcd"
    if len(head) >= 4:
        magic = struct.unpack(">i", head[:4])[0]
        if magic == 1995:
            return ".xtc"
        if magic == 1993:
            return ".trr"
    if head[:3] == b"CDF":
        return ".nc"
    if head[:8] == b"\x89HDF\r\n\x1a\n":
        return ".hdf5"
    return None


_BINARY_WITH_MAGIC = {".dcd": ".dcd", ".xtc": ".xtc", ".trr": ".trr", ".nc": ".nc", ".ncdf": ".nc",
                      ".netcdf": ".nc"}


def claim_trajectory(path: Path) -> bool:
    return _suffix(path) in TRAJECTORY_SUFFIXES


def claim_topology(path: Path) -> bool:
    return _suffix(path) in TOPOLOGY_SUFFIXES and _suffix(path) != ".h5"


# Parsed topologies, a few, keyed by the file's kind and content (replicas often carry copies of one
# topology file, one per folder: one parse serves them all); and each file seen (path, size, modification
# time) -> its content key, so an unchanged file is not read again to find it.
_TOPOLOGY_CACHE: dict[tuple[str, str], mdtraj.Topology] = {}
_TOPOLOGY_CACHE_SIZE = 8
_CONTENT_OF_FILE: dict[tuple[str, int, int], tuple[str, str]] = {}
_CONTENT_OF_FILE_SIZE = 4096


def _file_key(p: Path) -> tuple[str, int, int]:
    st = p.stat()
    return (str(p.resolve()), st.st_size, st.st_mtime_ns)


def _content_key(p: Path, fkey: tuple[str, int, int]) -> tuple[str, str]:
    """(format, BLAKE2 digest of the bytes) of a topology file: hashing 1 MB costs ~1 ms, parsing the
    PDB it holds ~0.5 s."""
    import hashlib

    got = _CONTENT_OF_FILE.get(fkey)
    if got is None:
        digest = hashlib.blake2b(digest_size=20)
        with open(p, "rb") as fh:
            while block := fh.read(1 << 20):
                digest.update(block)
        got = (_suffix(p), digest.hexdigest())
        if len(_CONTENT_OF_FILE) >= _CONTENT_OF_FILE_SIZE:
            _CONTENT_OF_FILE.pop(next(iter(_CONTENT_OF_FILE)))
        _CONTENT_OF_FILE[fkey] = got
    return got


def _keep_topology(key: tuple[str, str], top: mdtraj.Topology) -> None:
    if key not in _TOPOLOGY_CACHE and len(_TOPOLOGY_CACHE) >= _TOPOLOGY_CACHE_SIZE:
        _TOPOLOGY_CACHE.pop(next(iter(_TOPOLOGY_CACHE)))
    _TOPOLOGY_CACHE[key] = top


def load_topology(path: str | Path) -> mdtraj.Topology:
    """A topology file through mdtraj (PDB, GRO, PSF, PRMTOP, mol2, ...).

    Parsing a large PDB costs more than reading a whole DCD, so topologies are kept (a few, keyed by the
    file's format and content: files with the same bytes share one parse). The same object is
    returned: do not modify it.
    """
    import mdtraj as md

    p = Path(path)
    try:
        key = _content_key(p, _file_key(p))
        if key in _TOPOLOGY_CACHE:
            return _TOPOLOGY_CACHE[key]
        with quiet_mdtraj():
            top = md.load_topology(str(p))
        _keep_topology(key, top)
        return top
    except (OSError, ValueError, KeyError, IndexError, TypeError, RuntimeError, struct.error,
            AssertionError) as exc:
        _close_files_of(exc)
        raise CorruptFileError(f"cannot read the topology ({type(exc).__name__}: {exc})", path=p) from exc
    except Exception as exc:
        _raise_if_bare(exc, p, "cannot read the topology")
        raise


def forget_topologies() -> None:
    """Drop every kept topology (a benchmark that times parsing; a test)."""
    _TOPOLOGY_CACHE.clear()
    _CONTENT_OF_FILE.clear()


def topologies_for(paths: Sequence[str | Path]) -> dict[tuple[str, int, int], tuple[tuple[str, str], mdtraj.Topology]]:
    """The parsed topologies kept for these files (unchanged since), with their content keys: handed to
    worker processes (:func:`seed_topologies`) so they need not parse a large PDB again."""
    found = {}
    for path in paths:
        try:
            fkey = _file_key(Path(path))
        except OSError:
            continue
        ckey = _CONTENT_OF_FILE.get(fkey)
        if ckey is not None and ckey in _TOPOLOGY_CACHE:
            found[fkey] = (ckey, _TOPOLOGY_CACHE[ckey])
    return found


def seed_topologies(found: dict[tuple[str, int, int], tuple[tuple[str, str], mdtraj.Topology]]) -> None:
    """Keep topologies parsed by another process (a file changed since has another size or modification
    time, so it is read and parsed afresh)."""
    for fkey, (ckey, top) in found.items():
        _CONTENT_OF_FILE[fkey] = ckey
        _keep_topology(ckey, top)


def _close_files_of(exc: BaseException) -> None:
    """Close the file a reader object opened when its constructor failed (mdtraj's GRO reader opens the
    file, then raises from ``__init__`` without closing it: the handle would leak)."""
    tb = exc.__traceback__
    while tb is not None:
        fh = getattr(tb.tb_frame.f_locals.get("self"), "_file", None)
        if fh is not None and hasattr(fh, "close") and not isinstance(fh, str | bytes | Path):
            with contextlib.suppress(Exception):
                fh.close()
        tb = tb.tb_next


def _raise_if_bare(exc: Exception, path: Path, what: str) -> None:
    """mdtraj's text readers (GRO) raise a bare ``Exception`` on a malformed line: a CorruptFileError
    naming the file. Anything more specific (ours, MemoryError, ...) is left to its own handler."""
    _close_files_of(exc)
    if type(exc) is Exception:
        text = " ".join(str(exc).split())
        raise CorruptFileError(f"{what} ({text})", path=path) from exc


# ------------------------------------------------------------------ headers: counts and time axes

# AKMA time unit: sqrt(angstrom^2 amu / (kcal/mol)) = 48.888 fs (CHARMM's internal unit).
_AKMA_PS = math.sqrt(1e-20 * 1.66053906892e-27 / (4184.0 / 6.02214076e23)) * 1e12


def _dcd_clock(head: bytes | None) -> tuple[int, int, float] | None:
    """(ISTART, NSAVC, DELTA in AKMA time units) of a DCD header's first 92 bytes, or None when it holds no
    real time step (mdtraj writes delta=1, nsavc=1, istart=0)."""
    if head is None or len(head) < 92:
        return None
    for endian in ("<", ">"):
        if struct.unpack(endian + "i", head[:4])[0] == 84:
            break
    else:
        return None
    icntrl = struct.unpack(endian + "9if10i", head[8:88])
    istart, nsavc, delta = icntrl[1], icntrl[2], icntrl[9]
    if not (delta > 0 and nsavc > 0) or (delta == 1.0 and nsavc == 1 and istart == 0):
        return None
    return istart, nsavc, delta


def dcd_header_timestep(path: Path) -> tuple[float, int] | None:
    """(integration time step in ps, steps between frames) from a DCD header's DELTA (AKMA time units) and
    NSAVC (OpenMM and NAMD write them so), or None when the header holds no real step."""
    clock = _dcd_clock(file_head(path, 92))
    if clock is None:
        return None
    _, nsavc, delta = clock
    return float(f"{delta * _AKMA_PS:.6g}"), int(nsavc)  # DELTA is float32: 6 digits are what it holds


def _dcd_time(path: Path, n_frames: int) -> np.ndarray | None:
    """Frame times from a DCD header, or None when it holds no real time step (mdtraj writes delta=1, nsavc=1)."""
    with open(path, "rb") as f:
        clock = _dcd_clock(f.read(92))
    if clock is None:
        return None
    istart, nsavc, delta = clock
    return (istart + np.arange(n_frames) * nsavc) * float(delta) * _AKMA_PS


# ------------------------------------------------------------------------------ frame source

_READ_ERRORS = (OSError, ValueError, RuntimeError, IndexError, EOFError, struct.error, AssertionError)


class MdtrajFrames(ClockedFrames):
    """Lazy chunked frames through mdtraj's ``iterload`` (a FrameSource) for the formats other than XTC and
    TRR (those are :class:`~phasewake.core.readers.xdr_frames.XdrFrames`); NetCDF velocities when stored."""

    # XTC keeps positions to its precision (0.001 nm by default): too coarse to infer constraints from
    # bond lengths (rigid water looks 0.4% flexible), so the audit does not
    positions_precision_nm: float | None = None
    positions_lossy = False

    def __init__(self, path: Path, topology: mdtraj.Topology, *, n_frames: int, time_ps: np.ndarray,
                 has_box: bool, velocity_kind: str | None, velocity_factor: float = 1.0) -> None:
        self.path = path
        self.topology = topology
        self.n_frames = n_frames
        self.n_atoms = topology.n_atoms
        self._time = time_ps
        self.has_box = has_box
        self._vkind = velocity_kind  # "netcdf" or None
        self._vfactor = velocity_factor
        self.has_velocities = velocity_kind is not None
        self.velocities_estimated = False

    def _load_kwargs(self) -> dict[str, Any]:
        kw: dict[str, Any] = {}
        if _suffix(self.path) not in SELF_TOPOLOGY:
            kw["top"] = self.topology
        return kw

    def _velocities(self, sel: np.ndarray, cols: np.ndarray | None) -> np.ndarray:
        from scipy.io import netcdf_file

        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            with netcdf_file(str(self.path), "r", mmap=False, maskandscale=True) as nc:
                var = nc.variables["velocities"]
                v = np.asarray(var[sel], dtype=np.float64)
        v = (v * self._vfactor).astype(np.float32)
        return v if cols is None else np.take(v, cols, axis=1)

    def _read(self, request: FrameRequest) -> Iterator[FrameChunk]:
        if not request.positions and request.velocities and self.has_velocities:
            yield from self._velocity_chunks(request)  # no position decode at all; no box either
            return
        import mdtraj as md

        start, stride, cols, expected = request.start, request.stride, request.atoms, request.frames
        done = 0
        try:
            with quiet_mdtraj():
                chunks = iter(md.iterload(str(self.path), chunk=request.chunk, skip=start, stride=stride,
                                          atom_indices=cols, **self._load_kwargs()))
        except _READ_ERRORS as exc:
            raise CorruptFileError(f"cannot read frames ({type(exc).__name__}: {exc})", path=self.path) from exc
        while done < expected.size:
            try:
                with quiet_mdtraj():
                    tr = next(chunks, None)
                    if tr is None:
                        break
                    sel = expected[done : done + tr.n_frames]
                    vel = self._velocities(sel, cols) if (request.velocities and self.has_velocities) else None
            except _READ_ERRORS as exc:
                raise CorruptFileError(f"cannot read frames after frame {start + done * stride} "
                                       f"({type(exc).__name__}: {exc})", path=self.path) from exc
            except Exception as exc:
                _raise_if_bare(exc, self.path, f"cannot read frames after frame {start + done * stride}")
                raise
            box = None
            if self.has_box and tr.unitcell_vectors is not None:
                box = check_box(np.asarray(tr.unitcell_vectors[: sel.size], dtype=np.float64), path=self.path,
                                first_frame=int(sel[0]))
            done += sel.size
            yield FrameChunk(start=int(sel[0]), time_ps=self._time[sel],
                             positions_nm=np.asarray(tr.xyz[: sel.size], np.float32),
                             velocities_nm_per_ps=vel, box_nm=box)
        if done < expected.size:
            raise CorruptFileError(f"file ended after {start + done * stride} of {self.n_frames} frames "
                                   "(truncated?)", path=self.path)

    def _velocity_chunks(self, request: FrameRequest) -> Iterator[FrameChunk]:
        """Velocities read on their own (TRR, NetCDF), for an analysis that needs no positions."""
        for sel in request.batches():
            try:
                with quiet_mdtraj():
                    only_vel = self._velocities(sel, request.atoms)
            except _READ_ERRORS as exc:
                raise CorruptFileError(f"cannot read velocities at frame {int(sel[0])} "
                                       f"({type(exc).__name__}: {exc})", path=self.path) from exc
            yield FrameChunk(start=int(sel[0]), time_ps=self._time[sel], positions_nm=no_positions(sel.size),
                             velocities_nm_per_ps=only_vel, box_nm=None)


# --------------------------------------------------------------------------------- opening


def _count_and_time(path: Path, top: mdtraj.Topology, warnings: list[str]) -> tuple[int, np.ndarray | None, bool, dict[str, Any]]:
    """Frame count, time axis (None when unknown), whether there is a box, and velocity info, from headers."""
    import mdtraj as md

    suf = _suffix(path)
    info: dict[str, Any] = {}
    t: np.ndarray | None
    if suf == ".dcd":
        with quiet_mdtraj(), md.formats.DCDTrajectoryFile(str(path)) as f:
            n = len(f)
        _check_dcd_size(path, n, top.n_atoms)
        return n, _dcd_time(path, n), True, info
    if suf in (".xtc", ".trr"):
        index = frame_index(path, suf)  # kept in the result cache: a second open does not walk the file
        n, t_xdr, step, has_v = index.n_frames, index.time_ps, index.step, index.has_velocities
        info["step"] = step
        info["offsets"] = index.offsets
        if suf == ".trr":
            info["trr_velocity_frames"] = int(has_v.sum())
            if has_v.all():
                info["velocity_kind"] = "trr"
            elif has_v.any():
                first = int(np.flatnonzero(~has_v)[0])
                warnings.append(f"{path.name}: only {int(has_v.sum())} of {n} TRR frames hold velocities "
                                f"(frame {first} has none); stored velocities are not used")
        return n, t_xdr, True, info
    if suf in (".nc", ".ncdf", ".netcdf"):
        from scipy.io import netcdf_file

        try:
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                with netcdf_file(str(path), "r", mmap=False, maskandscale=True) as nc:
                    n = int(nc.variables["coordinates"].shape[0])
                    t = None
                    if "time" in nc.variables:
                        tv = nc.variables["time"]
                        unit = tv.units.decode() if isinstance(getattr(tv, "units", None), bytes) else getattr(tv, "units", "picosecond")
                        t = np.asarray(tv[:], dtype=np.float64) * _nc_unit(unit, "time", "time", path)
                    has_box = "cell_lengths" in nc.variables
                    if "velocities" in nc.variables:
                        vv = nc.variables["velocities"]
                        vunit = getattr(vv, "units", b"angstrom/picosecond")
                        vunit = vunit.decode() if isinstance(vunit, bytes) else vunit
                        info["velocity_kind"] = "netcdf"
                        info["velocity_factor"] = _nc_unit(vunit, "velocity", "velocities", path)
        except (TypeError, KeyError) as exc:
            raise CorruptFileError(f"not an AMBER NetCDF trajectory ({exc})", path=path) from exc
        return n, t, has_box, info
    # text formats and others: load through mdtraj (these are usually small), keeping only counts/time
    kw: dict[str, Any] = {} if suf in SELF_TOPOLOGY else {"top": top}
    n = 0
    times = []
    has_box = False
    with quiet_mdtraj():
        for tr in md.iterload(str(path), chunk=1000, **kw):
            n += tr.n_frames
            times.append(np.asarray(tr.time, dtype=np.float64))
            has_box = has_box or tr.unitcell_vectors is not None
    t = np.concatenate(times) if times else None
    if suf in (".xyz", ".lammpstrj", ".mdcrd", ".crd", ".binpos") or (t is not None and n > 1 and np.all(t == np.arange(n))):
        t = None  # these formats hold no time; mdtraj numbers frames
    return n, t, has_box, info


def _nc_unit(unit: Any, dimension: str, variable: str, path: Path) -> float:
    """Factor of a NetCDF variable's ``units`` text; a UnitError that names the file and the variable."""
    from phasewake.core.errors import UnitError

    text = unit.decode(errors="replace") if isinstance(unit, bytes) else str(unit)
    try:
        return parse_unit(text, expect=dimension).factor
    except UnitError as exc:
        raise UnitError(f"the {variable} variable: {exc.problem}", path=path) from None


def _check_dcd_size(path: Path, n: int, n_atoms: int) -> None:
    """A DCD file whose size is not header + n whole frames was cut short (mdtraj drops the cut frame)."""
    if n == 0:
        raise CorruptFileError("DCD file holds no complete frame (truncated?)", path=path)
    with open(path, "rb") as f:
        raw = f.read(4096)
    endian = "<" if struct.unpack("<i", raw[:4])[0] == 84 else ">"
    icntrl = struct.unpack(endian + "20i", raw[8:88])
    has_cell = icntrl[10] != 0
    four_d = icntrl[11] != 0
    pos = 4 + 84 + 4
    (tlen,) = struct.unpack(endian + "i", raw[pos : pos + 4])
    header = pos + 4 + tlen + 4 + 12
    frame = (56 if has_cell else 0) + (4 if four_d else 3) * (4 * n_atoms + 8)
    size = path.stat().st_size
    extra = size - header - n * frame
    if extra != 0:
        raise CorruptFileError(
            f"DCD file ends {extra} bytes after its last whole frame ({n} frames of {n_atoms} atoms): "
            "truncated or damaged" if extra > 0 else f"DCD file is {-extra} bytes short of {n} frames (truncated)",
            path=path)


def open_trajectory_run(path: Path, top_path: Path | None) -> Run:
    """A Run over a trajectory read by mdtraj (and a topology file)."""
    suf = _suffix(path)
    warnings: list[str] = []
    md_meta = RunMetadata()
    if top_path is not None:
        top = load_topology(top_path)
        md_meta.sources["topology"] = top_path.name
    elif suf in SELF_TOPOLOGY:
        top = load_topology(path)
        md_meta.sources["topology"] = path.name
    else:
        raise MissingDataError(f"a {suf} trajectory holds no topology: give one (--top FILE: PDB, GRO, PSF, "
                               "PRMTOP, ...)", path=path)
    magic = _sniff(path)
    if suf in _BINARY_WITH_MAGIC and magic != _BINARY_WITH_MAGIC[suf] and not (suf in (".nc", ".ncdf", ".netcdf") and magic == ".hdf5"):
        raise CorruptFileError(f"content is not {suf[1:].upper()} (no {suf[1:].upper()} signature at the start)",
                               path=path)
    # atom count of the trajectory vs the topology
    n_file = _atoms_in_file(path, top)
    if n_file is not None and n_file != top.n_atoms:
        raise TopologyMismatchError(f"trajectory has {n_file} atoms, the topology "
                                    f"{top_path.name if top_path else path.name} has {top.n_atoms}", path=path)
    try:
        n, t, has_box, info = _count_and_time(path, top, warnings)
    except (CorruptFileError, MissingDataError, TopologyMismatchError):
        raise
    except (OSError, ValueError, RuntimeError, IndexError, EOFError, struct.error, KeyError, AssertionError) as exc:
        _close_files_of(exc)
        raise CorruptFileError(f"cannot read the trajectory, truncated or damaged? ({type(exc).__name__}: {exc})",
                               path=path) from exc
    except Exception as exc:
        _raise_if_bare(exc, path, "cannot read the trajectory")
        raise
    if n == 0:
        raise CorruptFileError("trajectory holds no frames", path=path)
    if t is not None and n > 1 and np.all(t == t[0]):
        warnings.append(f"{path.name}: every frame header gives the same time ({t[0]:g} ps); "
                        "treated as no time axis")
        t = None
    if t is None:
        t = np.arange(n, dtype=np.float64)
        warnings.append(Caveat(f"{path.name}: the file holds no time axis; frames are numbered 0, 1, 2, ... "
                               "(not ps). An energy table with one row per frame supplies the time", NO_FRAME_TIMES))
        md_meta.extra["time_from"] = "frame index"
    else:
        md_meta.extra["time_from"] = f"{path.name} headers"
    warnings.extend(check_time_axis(t, path=path, what="frame"))
    masses = masses_from_topology(top, top.n_atoms)
    if masses is None:
        masses = np.full(top.n_atoms, np.nan)
        warnings.append(f"{path.name}: some atoms have no element, so masses are unknown")
    else:
        md_meta.sources["masses"] = "element masses of the topology"
    frames: MdtrajFrames | XdrFrames
    if suf in (".xtc", ".trr"):
        frames = XdrFrames(path, kind=suf, n_atoms=top.n_atoms, offsets=info["offsets"],
                           time_ps=np.asarray(t, np.float64), velocities=info.get("velocity_kind") == "trr",
                           precision_nm=_xtc_precision_nm(path) if suf == ".xtc" else None)
    else:
        frames = MdtrajFrames(path, top, n_frames=n, time_ps=np.asarray(t, np.float64), has_box=has_box,
                              velocity_kind=info.get("velocity_kind"),
                              velocity_factor=info.get("velocity_factor", 1.0))
    md_meta.sources["positions"] = path.name
    step = dcd_header_timestep(path) if suf == ".dcd" else None
    if step is not None:  # the integration step, not the frame spacing
        md_meta.timestep_ps = step[0]
        md_meta.sources["timestep_ps"] = f"{path.name} (header: DELTA, a frame every {step[1]} steps)"
    if frames.has_velocities:
        md_meta.sources["velocities"] = path.name
    return Run(name=path.stem, paths=(path,) + ((top_path,) if top_path else ()), topology=top,
               masses_amu=masses, time_ps=np.asarray(t, np.float64), frames=frames, energies=None,
               metadata=md_meta, warnings=warnings)


def _atoms_in_file(path: Path, top: mdtraj.Topology) -> int | None:
    """Atom count stored in a binary trajectory's header, or None when the format has no cheap way to say."""
    suf = _suffix(path)
    try:
        if suf == ".dcd":
            with open(path, "rb") as f:
                raw = f.read(400)
            (endian,) = ("<",) if struct.unpack("<i", raw[:4])[0] == 84 else (">",)
            # after the 84-byte control block: title record (length-prefixed), then a 4-byte record with N
            pos = 4 + 84 + 4
            (tlen,) = struct.unpack(endian + "i", raw[pos : pos + 4])
            pos += 4 + tlen + 4
            (_rl, natoms) = struct.unpack(endian + "ii", raw[pos : pos + 8])
            return int(natoms)
        if suf == ".xtc":
            with open(path, "rb") as f:
                return int(struct.unpack(">ii", f.read(8))[1])
        if suf == ".trr":
            with open(path, "rb") as f:
                return int(_trr_header(f, path)["natoms"])
        if suf in (".nc", ".ncdf", ".netcdf"):
            from scipy.io import netcdf_file

            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                with netcdf_file(str(path), "r", mmap=False) as nc:
                    return int(nc.variables["coordinates"].shape[1])
    except (OSError, struct.error, KeyError, IndexError, TypeError, ValueError):
        return None
    return None


def _xtc_precision_nm(path: Path) -> float:
    """The position precision of an XTC (1 / the precision stored in the first frame, nm); 0.001 nm when
    the frame is stored uncompressed (9 atoms or fewer) or the header cannot say."""
    try:
        with open(path, "rb") as f:
            head = f.read(60)
        if struct.unpack(">i", head[4:8])[0] > 9:
            prec = struct.unpack(">f", head[56:60])[0]
            if prec > 0 and math.isfinite(prec):
                return 1.0 / prec
    except (OSError, struct.error):
        pass
    return 1e-3
