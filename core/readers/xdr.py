"""XTC and TRR (GROMACS's XDR formats): frame headers, and the frame index kept in the result cache.

Neither format has an index: the byte offset of frame k is known only by walking the headers of frames
0..k-1, so opening a file walks all of them (mdtraj's offset scan), then reads each header once more for
its time and step. On a large file, or one on a network disk whose pages are not in memory, that walk
is most of the time an open takes. :func:`frame_index` keeps what it finds (offsets, times, steps, which
TRR frames hold velocities) in the result cache (``phasewake.core.store.cache``), keyed by the file's
identity as every cache entry is (resolved path, size, modification time, hashes of its first and last
64 KiB): a second open reads the index back, and a file changed since is a miss and is walked again.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core.errors import CorruptFileError

INDEX_ANALYSIS = "frame index (XTC/TRR)"  # the cache entries' name, as ``phasewake cache`` lists them
_INDEX_LAYOUT = 1


@dataclass(frozen=True)
class FrameIndex:
    """Where each frame of an XTC/TRR starts and what its header says."""

    offsets: np.ndarray  # (n,) int64, byte offset of each frame
    time_ps: np.ndarray  # (n,) float64, the header's time
    step: np.ndarray  # (n,) int64, the header's MD step
    has_velocities: np.ndarray  # (n,) bool, TRR frames whose header says velocities follow (XTC: none)
    from_cache: bool = False

    @property
    def n_frames(self) -> int:
        return int(self.offsets.size)


def frame_index(path: Path, kind: str, *, cache: Any = None) -> FrameIndex:
    """The frame index of an XTC (``kind`` ".xtc") or TRR (".trr"): from the result cache when the file is
    unchanged since it was stored, else by walking the file (then stored).

    A damaged or cut file raises CorruptFileError as the walk finds it; a cache that cannot be read or
    written never fails the open (the walk is done, a notice recorded).
    """
    from phasewake.core.store.atomic import OutputError
    from phasewake.core.store.cache import CacheFolderError, ResultCache, make_key, skipped

    store = ResultCache() if cache is None else cache
    key: str | None = None
    try:
        key = make_key([path], INDEX_ANALYSIS, {"kind": kind, "layout": _INDEX_LAYOUT})
        entry = store.get(key)
    except (OSError, CacheFolderError):
        entry = None
    if entry is not None:
        got = _from_entry(entry.arrays)
        if got is not None:
            return got
    index = scan_index(path, kind)
    if key is not None and store.enabled:
        arrays = {"offsets": index.offsets, "time_ps": index.time_ps, "step": index.step,
                  "has_velocities": index.has_velocities}
        try:
            store.put(key, arrays, {"analysis": INDEX_ANALYSIS, "file": path.name})
        except (OSError, OutputError, CacheFolderError) as exc:
            skipped(store, exc)
    return index


def _from_entry(arrays: dict[str, np.ndarray]) -> FrameIndex | None:
    try:
        out = FrameIndex(offsets=np.asarray(arrays["offsets"], np.int64), time_ps=np.asarray(arrays["time_ps"]),
                         step=np.asarray(arrays["step"], np.int64),
                         has_velocities=np.asarray(arrays["has_velocities"], bool), from_cache=True)
    except KeyError:
        return None
    n = out.offsets.size
    if n == 0 or any(a.shape != (n,) for a in (out.time_ps, out.step, out.has_velocities)):
        return None
    return out


def scan_index(path: Path, kind: str) -> FrameIndex:
    """Walk the file: mdtraj's offsets, the last frame checked whole, each header's time and step."""
    import mdtraj as md

    from phasewake.core.readers.quiet import quiet_mdtraj

    cls = md.formats.XTCTrajectoryFile if kind == ".xtc" else md.formats.TRRTrajectoryFile
    with quiet_mdtraj(), cls(str(path)) as f:
        offsets = np.asarray(f.offsets, dtype=np.int64)
    _check_xdr_complete(path, offsets, kind)
    times, steps, has_v = _xdr_times(path, offsets, kind)
    return FrameIndex(offsets=offsets, time_ps=times, step=steps, has_velocities=has_v)


def _xdr_times(path: Path, offsets: np.ndarray, kind: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(time_ps, step, has_velocities) of each XTC/TRR frame from its header at ``offsets``.

    One pass over the headers (a seek and a few bytes a frame); XTC frames never hold velocities.
    """
    times = np.empty(offsets.size)
    steps = np.empty(offsets.size, dtype=np.int64)
    has_v = np.zeros(offsets.size, dtype=bool)
    with open(path, "rb") as f:
        for i, off in enumerate(offsets):
            f.seek(int(off))
            if kind == ".xtc":
                _magic, _natoms, step, t = struct.unpack(">iiif", f.read(16))
                times[i], steps[i] = t, step
            else:
                h = _trr_header(f, path)
                times[i], steps[i], has_v[i] = h["time"], h["step"], h["v"] > 0
    return times, steps, has_v


def _trr_header(f: Any, path: Path) -> dict[str, Any]:
    """Parse one TRR frame header (XDR, big-endian) at the current position (GROMACS trr layout)."""
    raw = f.read(8)
    if len(raw) < 8:
        raise CorruptFileError("TRR frame header is cut short", path=path)
    magic, _slen = struct.unpack(">ii", raw)
    if magic != 1993:
        raise CorruptFileError(f"bad TRR frame magic {magic}", path=path)
    (strlen,) = struct.unpack(">i", f.read(4))
    f.read((strlen + 3) // 4 * 4)
    fields = struct.unpack(">13i", f.read(52))
    names = ("ir", "e", "box", "vir", "pres", "top", "sym", "x", "v", "f", "natoms", "step", "nre")
    h = dict(zip(names, fields))
    natoms = h["natoms"]
    size = 4
    for key, count in (("box", 9), ("x", 3 * natoms), ("v", 3 * natoms), ("f", 3 * natoms)):
        if h[key]:
            size = h[key] // count
            break
    fmt = ">ff" if size == 4 else ">dd"
    h["time"], h["lambda"] = struct.unpack(fmt, f.read(2 * size))
    h["real_size"] = size
    return h


def trr_velocity_frames(path: str | Path, offsets: np.ndarray) -> np.ndarray:
    """For each TRR frame, whether its header says velocities follow (v_size > 0)."""
    p = Path(path)
    out = np.zeros(offsets.size, dtype=bool)
    with open(p, "rb") as f:
        for i, off in enumerate(offsets):
            f.seek(int(off))
            out[i] = _trr_header(f, p)["v"] > 0
    return out



def _check_xdr_complete(path: Path, offsets: np.ndarray, kind: str) -> None:
    """The last XTC/TRR frame must end where the file ends; mdtraj silently drops a cut last frame."""
    size = path.stat().st_size
    if offsets.size == 0:
        raise CorruptFileError(f"{kind[1:].upper()} file holds no complete frame (truncated?)", path=path)
    off = int(offsets[-1])
    with open(path, "rb") as f:
        f.seek(off)
        if kind == ".xtc":
            head = f.read(92)
            if len(head) < 56:
                end = size + 1
            else:
                natoms = struct.unpack(">i", head[4:8])[0]
                if natoms <= 9:
                    end = off + 56 + 12 * natoms
                else:
                    nbytes = struct.unpack(">i", head[88:92])[0]
                    end = off + 92 + (nbytes + 3) // 4 * 4
        else:
            h = _trr_header(f, path)
            body = sum(h[k] for k in ("ir", "e", "box", "vir", "pres", "top", "sym", "x", "v", "f"))
            end = f.tell() + body
    if end != size:
        raise CorruptFileError(f"{kind[1:].upper()} file has {size - end} bytes after its last whole frame "
                               f"(frame {offsets.size}): truncated or damaged", path=path)
