"""The frame index of a LAMMPS text dump: one pass over the file for each frame's byte offsets, step,
box, columns, time and units (the frames themselves are read by :mod:`.lammps_dump`)."""

from __future__ import annotations

import io
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core.errors import CorruptFileError, MissingDataError


@dataclass
class DumpIndex:
    """What the opening scan learnt about every frame (before de-duplication of repeated steps)."""

    offset: list[int] = field(default_factory=list)  # byte offset of the first atom row
    end: list[int] = field(default_factory=list)  # byte offset after the last atom row
    step: list[int] = field(default_factory=list)
    n_atoms: list[int] = field(default_factory=list)
    columns: list[int] = field(default_factory=list)  # index into column_sets
    box: list[np.ndarray] = field(default_factory=list)  # (3, 3) edge vectors as rows, style length
    origin: list[np.ndarray] = field(default_factory=list)  # (3,) box corner, style length
    time: list[float | None] = field(default_factory=list)
    units: list[str | None] = field(default_factory=list)
    column_sets: list[tuple[str, ...]] = field(default_factory=list)


def _box_from_bounds(rows: list[list[float]], triclinic: bool) -> tuple[np.ndarray, np.ndarray]:
    """Edge vectors (rows) and origin from the three BOX BOUNDS lines.

    Triclinic dumps give the bounding box ``xlo_bound xhi_bound xy`` etc.; the box itself is
    xlo = xlo_bound - min(0, xy, xz, xy + xz), xhi = xhi_bound - max(0, xy, xz, xy + xz),
    ylo = ylo_bound - min(0, yz), yhi = yhi_bound - max(0, yz), with edges a = (lx, 0, 0),
    b = (xy, ly, 0), c = (xz, yz, lz) (LAMMPS documentation, "Triclinic (non-orthogonal) simulation
    boxes" and the dump command page; from memory, checked against a real triclinic dump in the tests).
    """
    (xlo, xhi, *t0), (ylo, yhi, *t1), (zlo, zhi, *t2) = rows
    xy = xz = yz = 0.0
    if triclinic:
        xy, xz, yz = t0[0], t1[0], t2[0]
        xlo -= min(0.0, xy, xz, xy + xz)
        xhi -= max(0.0, xy, xz, xy + xz)
        ylo -= min(0.0, yz)
        yhi -= max(0.0, yz)
    box = np.array([[xhi - xlo, 0.0, 0.0], [xy, yhi - ylo, 0.0], [xz, yz, zhi - zlo]])
    return box, np.array([xlo, ylo, zlo])


def _skip_lines(f: io.BufferedReader, pos: int, n: int, size: int, line_guess: float) -> tuple[int, int]:
    """Byte offset after ``n`` more newlines from ``pos``, and how many were found (< n: file ended).

    Newlines are counted with numpy over blocks of about the expected size, so skipping a frame costs a
    read of its bytes and no Python loop over its rows. A last row without a newline at the very end of
    the file counts as a row.
    """
    # fast path: the rows end where the next frame's "ITEM:" begins; count the newlines before it
    # (bytes.find and bytes.count run in C: a 20,000-atom frame costs about its read)
    span = int(min(size - pos, max(1 << 16, n * line_guess * 1.25 + 4096)))
    f.seek(pos)
    head = f.read(span)
    item = head.find(b"ITEM:")
    if item >= 0 and head.count(b"\n", 0, item) == n and (item == 0 or head[item - 1 : item] == b"\n"):
        return pos + item, n
    if item < 0 and pos + len(head) >= size and head.count(b"\n") == n and head.endswith(b"\n"):
        return size, n
    found = 0
    p = pos
    while found < n and p < size:
        want = n - found
        span = int(min(size - p, max(1 << 16, want * line_guess * 1.25 + 4096)))
        f.seek(p)
        buf = np.frombuffer(f.read(span), dtype=np.uint8)
        nl = np.flatnonzero(buf == 10)
        if nl.size >= want:
            return p + int(nl[want - 1]) + 1, n
        found += int(nl.size)
        p += span
    if found == n - 1 and p >= size and size > pos:
        # the last row has no newline: a complete file written by hand, or a cut one (checked by the caller)
        f.seek(max(pos, size - 1))
        if f.read(1) != b"\n":
            return size, n
    return p, found


def scan(path: Path) -> DumpIndex:
    """One pass over the dump: the frame index. Errors name the file, the frame and its step."""
    idx = DumpIndex()
    size = path.stat().st_size
    sets: dict[tuple[str, ...], int] = {}
    line_guess = 40.0
    with open(path, "rb") as f:
        pos = 0
        frame = 0
        while pos < size:
            f.seek(pos)
            head = _read_header(f, frame, path)
            if head is None:
                return idx  # trailing blank lines
            start, end = _atom_rows(f, head, frame, size, line_guess, path)
            if frame == 0 and head.n:
                line_guess = max(4.0, (end - start) / head.n)
            if head.cols not in sets:
                sets[head.cols] = len(sets)
                idx.column_sets.append(head.cols)
            idx.offset.append(start)
            idx.end.append(end)
            idx.step.append(head.step)
            idx.n_atoms.append(head.n)
            idx.columns.append(sets[head.cols])
            idx.box.append(head.box)
            idx.origin.append(head.origin)
            idx.time.append(head.time)
            idx.units.append(head.units)
            pos = end
            frame += 1
    if not idx.offset:
        raise CorruptFileError("the dump holds no frame", path=path)
    return idx


@dataclass
class _Header:
    """The ITEM lines of one frame, read up to its ATOMS line."""

    step: int
    n: int
    box: np.ndarray
    origin: np.ndarray
    cols: tuple[str, ...]
    time: float | None
    units: str | None


def _read_header(f: io.BufferedReader, frame: int, path: Path) -> _Header | None:
    """The header of the frame at the file's position (None: only blank lines are left after a frame)."""
    items: dict[str, Any] = {}
    while "cols" not in items:
        line = f.readline()
        if not line:
            if "step" not in items and "n" not in items and frame > 0:
                return None
            step = items.get("step")
            raise CorruptFileError(f"file ends inside the header of frame {frame}"
                                   + (f" (step {step})" if step is not None else "") + ": truncated", path=path)
        text = line.decode("utf-8", errors="replace").strip()
        if not text:
            continue
        if not text.startswith("ITEM:"):
            raise CorruptFileError(f"expected an 'ITEM:' line in the header of frame {frame}, found "
                                   f"{text[:40]!r}", path=path)
        try:
            _read_item(f, text[5:].strip(), items, frame, path)
        except (ValueError, IndexError) as exc:
            step = items.get("step")
            raise CorruptFileError(f"cannot read 'ITEM: {text[5:].strip()[:30]}' of frame {frame}"
                                   + (f" (step {step})" if step is not None else "")
                                   + f": truncated or damaged ({exc})", path=path) from exc
    missing = [name for name, key in (("TIMESTEP", "step"), ("NUMBER OF ATOMS", "n"), ("BOX BOUNDS", "box"))
               if key not in items]
    if missing:
        raise CorruptFileError(f"frame {frame} has no 'ITEM: {missing[0]}' before its atoms", path=path)
    return _Header(step=items["step"], n=items["n"], box=items["box"], origin=items["origin"],
                   cols=items["cols"], time=items.get("time"), units=items.get("units"))


def _read_item(f: io.BufferedReader, item: str, items: dict[str, Any], frame: int, path: Path) -> None:
    """One ``ITEM:`` of a frame header and the lines that follow it, into ``items``."""
    if item == "TIMESTEP":
        items["step"] = int(f.readline().split()[0])
    elif item == "NUMBER OF ATOMS":
        items["n"] = int(f.readline().split()[0])
    elif item == "TIME":
        items["time"] = float(f.readline().split()[0])
    elif item == "UNITS":
        items["units"] = f.readline().decode("utf-8", errors="replace").strip().lower()
    elif item.startswith("BOX BOUNDS"):
        flags = item.split()[2:]
        triclinic = len(flags) >= 3 and flags[:3] == ["xy", "xz", "yz"]
        rows = [[float(v) for v in f.readline().split()] for _ in range(3)]
        if any(len(r) < (3 if triclinic else 2) for r in rows):
            raise ValueError("box bounds line too short")
        items["box"], items["origin"] = _box_from_bounds(rows, triclinic)
    elif item.startswith("ATOMS"):
        items["cols"] = tuple(item.split()[1:])
    else:
        raise CorruptFileError(f"unknown header item 'ITEM: {item[:30]}' in frame {frame}", path=path)


def _atom_rows(f: io.BufferedReader, head: _Header, frame: int, size: int, line_guess: float,
               path: Path) -> tuple[int, int]:
    """(first, end) byte offsets of the frame's atom rows, checking that they are all there."""
    step, n, cols = head.step, head.n, head.cols
    if "id" not in cols:
        raise MissingDataError(
            f"the dump has no 'id' column (ITEM: ATOMS {' '.join(cols)}): atoms cannot be matched "
            "from frame to frame. Write the dump with 'id' (dump custom ... id type x y z vx vy vz)",
            path=path)
    if n < 0:
        raise CorruptFileError(f"frame {frame} (step {step}) claims {n} atoms", path=path)
    start = f.tell()
    # Each row holds at least one character and a separator per column: a claimed atom count
    # the remaining bytes cannot hold is a truncated file, found before anything is allocated.
    if n * 2 * len(cols) > size - start + 1:
        raise CorruptFileError(
            f"frame {frame} (step {step}) claims {n} atoms, more than the {size - start} bytes left in "
            "the file can hold: truncated or damaged", path=path)
    end, got = _skip_lines(f, start, n, size, line_guess)
    if got < n:
        raise CorruptFileError(f"frame {frame} (step {step}) is cut short: {got} of {n} atom rows "
                               f"(the file is truncated; frames 0 to {frame - 1} are complete)"
                               if frame else f"frame 0 (step {step}) is cut short: {got} of {n} atom "
                               "rows (the file is truncated)", path=path)
    if end == size and n:
        _check_last_row(f, start, end, len(cols), path, frame, step)
    return start, end


def _check_last_row(f: io.BufferedReader, start: int, end: int, ncols: int, path: Path, frame: int,
                    step: int) -> None:
    """The file's last row must hold every column (a cut inside the last row leaves fewer fields)."""
    f.seek(max(start, end - 4096))
    tail = f.read(end - max(start, end - 4096))
    last = tail.rstrip(b"\n").rsplit(b"\n", 1)[-1]
    if len(last.split()) != ncols:
        raise CorruptFileError(f"the last atom row of frame {frame} (step {step}) is cut short "
                               f"({len(last.split())} of {ncols} fields): the file is truncated", path=path)
