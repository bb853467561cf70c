"""CP2K's MD trajectories ``PROJECT-pos-1.xyz`` and ``PROJECT-vel-1.xyz``: our own reader, lazily in chunks.

Layout (checked on CP2K 2023.1 Fist output): per frame a line with the atom count N,
a line ``i =        0, time =        0.000, E =        -0.0976846878`` (MD step, time in fs, potential
energy in Hartree), then N rows ``El x y z``. The ``-pos-`` file holds positions in Angstrom, the
``-vel-`` file velocities in bohr per atomic unit of time; they are full-step velocities (1/2 m v^2 with
the mass in electron masses equals the .ener's ``Kin.[a.u.]`` exactly).

- The file is claimed by content: an atom count line, then the ``i = ..., time = ..., E = ...`` line.
- Opening scans each file once for a frame index (byte offsets, steps, times); frames are read only
  when asked for, a chunk at a time.
- Masses are the standard atomic weights of the elements in the first column (mdtraj's element table);
  the topology is one residue per atom, named by element.
- Time is the header's time (fs -> ps). Positions and velocities are paired by MD step: files with other
  atom counts, frame counts or steps are refused, naming both.
- A last frame cut short is refused naming the file and the frame (a cut file is usually a failed copy).
"""

from __future__ import annotations

import io
import re
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from phasewake.core.errors import CorruptFileError, TopologyMismatchError
from phasewake.core.model.run import FrameChunk, FrameRequest, Run, RunMetadata
from phasewake.core.readers.common import (
    ClockedFrames,
    check_time_axis,
    file_head,
    masses_from_topology,
    topology_from_elements,
)
from phasewake.core.units import BOHR_M, HARTREE_J, HBAR_J_S

_HEADER = re.compile(rb"^\s*i\s*=\s*(-?\d+)\s*,\s*time\s*=\s*([-+0-9.eEdD]+)\s*,\s*E\s*=")
_VEL_NAME = re.compile(r"-vel-\d+\.xyz$", re.IGNORECASE)

# CP2K's atomic units (CODATA, core/units.py): length bohr (a0), time hbar/Hartree energy.
BOHR_NM = BOHR_M * 1e9
AU_TIME_PS = HBAR_J_S / HARTREE_J * 1e12
VELOCITY_AU_TO_NM_PER_PS = BOHR_NM / AU_TIME_PS
ANGSTROM_NM = 0.1

_BLOCK = 1 << 24  # bytes per block of the opening scan


def is_velocity_name(path: Path) -> bool:
    """CP2K's velocity trajectory by its name (``PROJECT-vel-1.xyz``): its content looks like positions."""
    return bool(_VEL_NAME.search(path.name))


def claim(path: Path) -> bool:
    """A CP2K MD xyz: an atom count line, then CP2K's ``i = <step>, time = <fs>, E = <Hartree>`` line."""
    head = file_head(path, 512)
    if head is None:
        return False
    lines = head.split(b"\n")
    if len(lines) < 2:
        return False
    return lines[0].strip().isdigit() and _HEADER.match(lines[1]) is not None


@dataclass
class XyzIndex:
    """What the opening scan learnt: per frame the byte range of its atom rows, its step and time (fs)."""

    path: Path
    n_atoms: int
    offset: np.ndarray  # byte offset of the first atom row
    end: np.ndarray  # byte offset after the last atom row
    step: np.ndarray
    time_fs: np.ndarray

    @property
    def n_frames(self) -> int:
        return int(self.offset.size)


def scan(path: Path) -> XyzIndex:
    """One pass over the file: the frame index. Errors name the file and the frame."""
    size = path.stat().st_size
    with open(path, "rb") as f:
        first = f.readline()
        try:
            n = int(first.split()[0])
        except (ValueError, IndexError):
            raise CorruptFileError(f"the first line is not an atom count ({first[:30]!r})", path=path) from None
        if n <= 0:
            raise CorruptFileError(f"the first line claims {n} atoms", path=path)
        # trailing blank lines do not count
        f.seek(max(0, size - 4096))
        tail = f.read()
        data_end = max(0, size - 4096) + len(tail.rstrip())
        per = n + 2
        # frame starts: every line whose number is a multiple of N + 2 (newlines counted with numpy)
        starts: list[np.ndarray] = [np.zeros(1, np.int64)]
        lines_before = 0
        pos = 0
        f.seek(0)
        while pos < data_end:
            buf = f.read(min(_BLOCK, data_end - pos))
            if not buf:
                break
            nl = np.flatnonzero(np.frombuffer(buf, dtype=np.uint8) == 10).astype(np.int64) + pos
            # the line after newline number j (counting from 0 over the file) is line j + 1
            i0 = (-(lines_before + 1)) % per
            starts.append(nl[i0::per] + 1)
            lines_before += int(nl.size)
            pos += len(buf)
        n_lines = lines_before + 1  # the last line has no newline before data_end
    frame_start = np.concatenate(starts)
    frame_start = frame_start[frame_start < data_end]
    complete, rest = divmod(n_lines, per)
    if rest:
        frame = complete
        got = max(0, rest - 2)
        done = f"frames 0 to {frame - 1} are complete" if frame else "no frame is complete"
        raise CorruptFileError(f"frame {frame} is cut short: {got} of {n} atom rows (the file is truncated; "
                               f"{done})", path=path)
    offset = np.empty(complete, np.int64)
    end = np.empty(complete, np.int64)
    step = np.empty(complete, np.int64)
    time_fs = np.empty(complete, np.float64)
    with open(path, "rb") as f:
        for k in range(complete):
            f.seek(int(frame_start[k]))
            count = f.readline()
            header = f.readline()
            try:
                nk = int(count.split()[0])
            except (ValueError, IndexError):
                raise CorruptFileError(f"frame {k}: expected the atom count line, found {count[:40]!r}",
                                       path=path) from None
            if nk != n:
                raise CorruptFileError(f"frame {k} has {nk} atoms, frame 0 has {n}: the atom count changes "
                                       "inside the file", path=path)
            m = _HEADER.match(header)
            if m is None:
                raise CorruptFileError(f"frame {k}: expected CP2K's 'i = <step>, time = <fs>, E = ...' line, "
                                       f"found {header[:50]!r}", path=path)
            step[k] = int(m.group(1))
            time_fs[k] = float(m.group(2).replace(b"D", b"E").replace(b"d", b"e"))
            offset[k] = f.tell()
            end[k] = int(frame_start[k + 1]) if k + 1 < complete else data_end
    if complete == 0:
        raise CorruptFileError("the file holds no frame", path=path)
    _check_last_row(path, int(end[-1]), complete - 1)
    return XyzIndex(path=path, n_atoms=n, offset=offset, end=end, step=step, time_fs=time_fs)


def _check_last_row(path: Path, end: int, frame: int) -> None:
    """The file's last row must hold an element and three numbers (a cut inside it leaves fewer)."""
    with open(path, "rb") as f:
        f.seek(max(0, end - 512))
        last = f.read(end - max(0, end - 512)).rstrip().rsplit(b"\n", 1)[-1]
    if len(last.split()) != 4:
        raise CorruptFileError(f"the last atom row of frame {frame} is cut short ({len(last.split())} of 4 "
                               "fields): the file is truncated", path=path)


def _read_rows(index: XyzIndex, k: int) -> np.ndarray:
    """The three numbers of every atom row of frame ``k`` (float64, file units)."""
    import pandas as pd

    with open(index.path, "rb") as f:
        f.seek(int(index.offset[k]))
        raw = f.read(int(index.end[k] - index.offset[k]))
    try:
        df = pd.read_csv(io.BytesIO(raw), sep=r"\s+", header=None, engine="c", usecols=[1, 2, 3],
                         dtype=np.float64, names=[0, 1, 2, 3])
        rows = df.to_numpy(dtype=np.float64)
    except (ValueError, IndexError, TypeError):
        rows = None
    if rows is None or rows.shape != (index.n_atoms, 3) or not np.all(np.isfinite(rows)):
        _name_bad_row(index, k, raw)
    assert rows is not None
    return rows


def _name_bad_row(index: XyzIndex, k: int, raw: bytes) -> None:
    """The slow path: say which row of frame ``k`` is not ``El x y z``."""
    r = 0
    for line in raw.split(b"\n"):
        fields = line.split()
        if not fields:
            continue
        if len(fields) != 4:
            break
        try:
            vals = [float(v) for v in fields[1:]]
        except ValueError:
            break
        if not np.all(np.isfinite(vals)):
            break
        r += 1
    raise CorruptFileError(f"frame {k} (step {int(index.step[k])}): atom row {r} is not 'element x y z' with "
                           "finite numbers", path=index.path)


def read_elements(index: XyzIndex) -> list[str]:
    """The first column of frame 0."""
    with open(index.path, "rb") as f:
        f.seek(int(index.offset[0]))
        raw = f.read(int(index.end[0] - index.offset[0]))
    labels = [line.split()[0].decode("utf-8", errors="replace") for line in raw.split(b"\n") if line.strip()]
    if len(labels) != index.n_atoms:
        raise CorruptFileError(f"frame 0 holds {len(labels)} atom rows for {index.n_atoms} atoms", path=index.path)
    return labels


def element_symbol(label: str) -> str | None:
    """The element of a CP2K atom label (``Ar``, ``O``, ``H1``, ``Na+``): the label, else its leading letters
    when they name an element; None when nothing does."""
    from mdtraj.core import element as elem

    letters = re.match(r"[A-Za-z]+", label)
    if letters is None:
        return None
    text = letters.group(0)
    for cand in (text[:2], text[:1]):
        sym = cand[:1].upper() + cand[1:].lower()
        try:
            elem.get_by_symbol(sym)
        except KeyError:
            continue
        return sym
    return None


class Cp2kXyzFrames(ClockedFrames):
    """A FrameSource over CP2K's ``-pos-`` xyz (Angstrom) and, when given, its ``-vel-`` xyz (atomic units)."""

    positions_precision_nm: float | None = None
    positions_lossy = False

    def __init__(self, pos: XyzIndex, vel: XyzIndex | None = None, vel_frame: np.ndarray | None = None) -> None:
        self.pos = pos
        self.vel = vel
        self._vel_frame = vel_frame  # vel file frame of each positions frame
        self.path = pos.path
        self.n_frames = pos.n_frames
        self.n_atoms = pos.n_atoms
        self.steps = pos.step.copy()
        self.has_box = False
        self.box_nm: np.ndarray | None = None  # a fixed cell (3, 3), nm: from the main output (set_fixed_box)
        self.has_velocities = vel is not None
        self.velocities_estimated = False
        self._time = pos.time_fs * 1e-3

    def _read(self, request: FrameRequest) -> Iterator[FrameChunk]:
        atoms, n_read = request.atoms, request.n_read
        with_v = request.velocities and self.vel is not None
        for sel in request.batches():
            pos = np.empty((sel.size, n_read if request.positions else 0, 3), np.float32)
            vel = np.empty((sel.size, n_read, 3), np.float32) if with_v else None
            for j, fi in enumerate(sel):
                if request.positions:
                    rows = _read_rows(self.pos, int(fi))
                    pos[j] = (rows if atoms is None else rows[atoms]) * ANGSTROM_NM
                if vel is not None:
                    assert self.vel is not None and self._vel_frame is not None
                    rows = _read_rows(self.vel, int(self._vel_frame[fi]))
                    vel[j] = (rows if atoms is None else rows[atoms]) * VELOCITY_AU_TO_NM_PER_PS
            box = None if self.box_nm is None else np.repeat(self.box_nm[None], sel.size, axis=0)
            yield FrameChunk(start=int(sel[0]), time_ps=self._time[sel], positions_nm=pos,
                             velocities_nm_per_ps=vel, box_nm=box)

    def set_fixed_box(self, box_nm: np.ndarray) -> None:
        """Every frame's cell: box edge vectors as rows, shape (3, 3), nm (the run's cell does not change)."""
        self.box_nm = np.asarray(box_nm, dtype=np.float64).reshape(3, 3)
        self.has_box = True


def pair(pos: XyzIndex, vel: XyzIndex) -> np.ndarray:
    """The velocity-file frame of each positions frame, matched by MD step; TopologyMismatchError naming
    both files when they are not of one run."""
    both = f"{vel.path.name} and {pos.path.name}"
    if vel.n_atoms != pos.n_atoms:
        raise TopologyMismatchError(f"the velocity file has {vel.n_atoms} atoms, the positions ({pos.path.name}) "
                                    f"{pos.n_atoms}: {both} are not of one run", path=vel.path)
    if vel.n_frames != pos.n_frames:
        raise TopologyMismatchError(f"the velocity file has {vel.n_frames} frames, the positions ({pos.path.name}) "
                                    f"{pos.n_frames}: {both} cannot be paired frame by frame", path=vel.path)
    where = {int(s): k for k, s in enumerate(vel.step)}
    out = np.empty(pos.n_frames, np.int64)
    for k, s in enumerate(pos.step):
        j = where.get(int(s))
        if j is None:
            raise TopologyMismatchError(f"positions frame {k} ({pos.path.name}) is step {int(s)}, which the velocity "
                                        f"file has not: {both} cannot be paired by step", path=vel.path)
        out[k] = j
    return out


def open_xyz_run(path: Path, top_path: Path | None = None, velocities: Path | None = None) -> Run:
    """A Run over CP2K's positions xyz, with the velocities xyz beside it when given."""
    pos = scan(path)
    meta = RunMetadata()
    meta.sources["positions"] = f"{path.name} (CP2K xyz, Angstrom)"
    warnings: list[str] = []
    frames: Cp2kXyzFrames
    if velocities is not None:
        vel = scan(velocities)
        frames = Cp2kXyzFrames(pos, vel, pair(pos, vel))
        labels_v = read_elements(vel)
        meta.sources["velocities"] = (f"{velocities.name} (CP2K xyz: bohr per atomic time unit, x "
                                      f"{VELOCITY_AU_TO_NM_PER_PS:.6g} = nm/ps; full-step, paired by MD step)")
        meta.velocities_half_step = False
    else:
        frames = Cp2kXyzFrames(pos)
        labels_v = None
        beside = path.with_name(re.sub(r"-pos-(\d+\.xyz)$", r"-vel-\1", path.name, flags=re.IGNORECASE))
        if beside != path and beside.exists():
            warnings.append(f"{path.name}: {beside.name} beside it holds CP2K's velocities; give it too (or open "
                            "the folder) to use them instead of estimates from the positions")
    labels = read_elements(pos)
    if labels_v is not None and labels_v != labels:
        i = next(k for k, (a, b) in enumerate(zip(labels, labels_v, strict=True)) if a != b)
        raise TopologyMismatchError(f"atom {i} is {labels_v[i]} in the velocity file, {labels[i]} in the positions "
                                    f"({path.name}): not of one run", path=velocities)
    if top_path is not None:
        from phasewake.core.readers.trajectory import load_topology

        top = load_topology(top_path)
        if top.n_atoms != pos.n_atoms:
            raise TopologyMismatchError(f"the trajectory has {pos.n_atoms} atoms, the topology {top_path.name} "
                                        f"{top.n_atoms}", path=path)
        masses = masses_from_topology(top, pos.n_atoms)
        msrc = f"element masses of {top_path.name}"
        meta.sources["topology"] = top_path.name
    else:
        symbols = [element_symbol(lab) for lab in labels]
        unknown = [lab for lab, s in zip(labels, symbols, strict=True) if s is None]
        top = topology_from_elements([s or lab for lab, s in zip(labels, symbols, strict=True)])
        masses = masses_from_topology(top, pos.n_atoms)
        msrc = f"standard atomic weights of the elements in {path.name} (mdtraj's element table)"
        meta.sources["topology"] = f"elements of {path.name} (one residue per atom)"
        if unknown:
            warnings.append(f"{path.name}: the atom labels {', '.join(sorted(set(unknown))[:5])} name no element: "
                            "masses unknown; give a topology")
    if masses is not None:
        meta.sources["masses"] = msrc
        masses_amu = masses
    else:
        masses_amu = np.full(pos.n_atoms, np.nan)
    meta.extra["time_from"] = f"time = of {path.name} (fs)"
    time_ps = frames.time_ps.copy()
    warnings.extend(check_time_axis(time_ps, path=path, what="frame"))
    if np.unique(pos.step).size >= 2 and pos.n_frames >= 2:
        steps = pos.step.astype(np.float64)
        ds = np.diff(steps)
        ok = ds > 0
        if ok.any():
            dt = float(np.median(np.diff(time_ps)[ok] / ds[ok]))
            if dt > 0:
                meta.timestep_ps = float(f"{dt:.12g}")
                meta.sources["timestep_ps"] = f"{path.name} (i = step and time = fs of its frames)"
    paths = (path,) + ((velocities,) if velocities is not None else ()) + ((top_path,) if top_path else ())
    return Run(name=path.stem, paths=paths, topology=top, masses_amu=np.asarray(masses_amu, np.float64),
               time_ps=time_ps, frames=frames, energies=None, metadata=meta, warnings=warnings)
