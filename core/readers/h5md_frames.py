"""The frames of an H5MD file, read lazily in chunks (the file's headers are read by :mod:`.h5md`)."""

from __future__ import annotations

import weakref
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.errors import CorruptFileError, MissingDataError
from phasewake.core.model.run import ChunkedFrames, FrameChunk, FrameRequest, no_positions
from phasewake.core.readers.common import box_matrix, check_box

if TYPE_CHECKING:
    import h5py

#: What h5py and numpy raise on a layout the reader did not expect (a damaged or foreign file).
LAYOUT_ERRORS = (KeyError, ValueError, TypeError, IndexError, AttributeError, OSError, RuntimeError)


class _Loan:
    """One buffer of a :class:`BufferPool` lent out. The array lent is made from this object (numpy keeps
    it as the array's ``base``), so the loan lives exactly as long as that array or any view of it."""

    def __init__(self, buffer: np.ndarray, shape: tuple[int, ...], dtype: np.dtype) -> None:
        self._buffer = buffer  # the pool's memory stays alive while lent, whatever the pool does
        self.__array_interface__ = {"shape": shape, "typestr": dtype.str, "version": 3,
                                    "data": (buffer.__array_interface__["data"][0], False)}


class BufferPool:
    """Chunk buffers the pool owns and lends; a buffer is lent again only once its last loan is gone.

    Fresh memory is slow to touch (first-touch page faults cost more than the copy from the page cache
    into it), so a streamed read reuses its buffers. Each array handed out is a loan (:class:`_Loan`);
    the pool keeps a weak reference to it, which Python clears once no array or view made from the
    loan is left. A consumer that keeps a chunk, or any view of its arrays, keeps that buffer out of
    reuse, so data handed out are never overwritten.
    """

    def __init__(self, size: int = 6) -> None:  # positions and velocities, ~2-3 in flight each
        self._buffers: list[np.ndarray] = []
        self._loans: list[weakref.ref[_Loan] | None] = []  # the last loan of each buffer
        self._size = size

    def lend(self, shape: tuple[int, ...], dtype: Any) -> np.ndarray:
        """An uninitialised array of ``shape`` and ``dtype`` in a buffer that no live array uses."""
        dt = np.dtype(dtype)
        nbytes = int(np.prod(shape, dtype=np.int64)) * dt.itemsize
        free = [k for k, (buffer, loan) in enumerate(zip(self._buffers, self._loans, strict=True))
                if buffer.nbytes >= nbytes and (loan is None or loan() is None)]
        if free:
            k = free[0]
        else:
            if len(self._buffers) >= self._size:  # forget the oldest: a live loan keeps its memory alive
                del self._buffers[0], self._loans[0]
            self._buffers.append(np.empty(max(nbytes, 1), np.uint8))
            self._loans.append(None)
            k = len(self._buffers) - 1
        loan = _Loan(self._buffers[k], shape, dt)
        self._loans[k] = weakref.ref(loan)
        return np.asarray(loan)


def in_float32(values: np.ndarray, factor: float) -> np.ndarray:
    """Values read from a file as float32, times a unit factor (kept float32)."""
    values = np.asarray(values, dtype=np.float32)
    return values if factor == 1.0 else (values * factor).astype(np.float32)


class HDF5Frames(ChunkedFrames):
    """Frames of an HDF5 file: each read opens it once and calls :meth:`_chunks`; a layout it did not
    expect is a CorruptFileError naming the file."""

    path: Path

    def _read(self, request: FrameRequest) -> Iterator[FrameChunk]:
        import h5py

        try:
            f = h5py.File(self.path, "r")
        except OSError as exc:
            raise CorruptFileError(f"cannot open for reading frames ({exc})", path=self.path) from exc
        with f:
            try:
                yield from self._chunks(f, request)
            except LAYOUT_ERRORS as exc:
                raise CorruptFileError(f"cannot read frames ({type(exc).__name__}: {exc})", path=self.path) from exc

    def _chunks(self, f: h5py.File, request: FrameRequest) -> Iterator[FrameChunk]:
        raise NotImplementedError


class H5MDFrames(HDF5Frames):
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
                        pool: BufferPool) -> np.ndarray:
        """As :meth:`_read_rows`, for float32 data at evenly spaced rows: straight into a pooled buffer."""
        d = np.diff(rows)
        regular = rows.size == 1 or (rows.size > 1 and bool(np.all(d == d[0])) and d[0] > 0)
        if ds.dtype != np.float32 or not regular or rows.size == 0:
            return H5MDFrames._read_rows(ds, rows, span)
        step = 1 if rows.size == 1 else int(d[0])
        cols = slice(None) if span is None else span
        width = ds.shape[1] if span is None else len(range(*span.indices(ds.shape[1])))
        out = pool.lend((rows.size, width, *ds.shape[2:]), np.float32)
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

    def _chunks(self, f: h5py.File, request: FrameRequest) -> Iterator[FrameChunk]:
        want_vel = request.velocities and self.has_velocities
        pg = f["particles"][self.group]
        pos_ds = pg["position"]["value"]
        vel_ds = pg["velocity"]["value"] if want_vel else None
        box_ds = pg["box"]["edges"]["value"] if self._box_rows is not None else None
        img_ds = pg["image"]["value"] if self._image_rows is not None else None
        span, cols = self._atom_span(request.atoms)
        pool = BufferPool()
        for sel in request.batches():
            if request.positions:
                pos = self._read_rows_into(pos_ds, self._rows[sel], span, pool)
                pos = in_float32(pos if cols is None else np.take(pos, cols, axis=1), self._pos_factor)
            else:  # a velocity-only analysis: half the reading
                pos = no_positions(sel.size)
            vel = None
            if vel_ds is not None and self._vel_rows is not None:
                vel = self._read_rows_into(vel_ds, self._vel_rows[sel], span, pool)
                vel = in_float32(vel if cols is None else np.take(vel, cols, axis=1), self._vel_factor)
            box = None
            if box_ds is not None and self._box_rows is not None:
                box = box_matrix(self._read_rows(box_ds, self._box_rows[sel]) * self._box_factor, sel.size)
                box = check_box(box, path=self.path, first_frame=int(sel[0]))
            elif self._box_fixed is not None:
                box = np.broadcast_to(self._box_fixed, (sel.size, 3, 3)).copy()
            if request.positions and img_ds is not None and self._image_rows is not None and box is not None:
                # H5MD: the unwrapped position is position + image . box edges
                img = np.asarray(self._read_rows(img_ds, self._image_rows[sel], span), dtype=np.float64)
                if cols is not None:
                    img = np.take(img, cols, axis=1)
                pos = (pos + np.einsum("fnk,fkj->fnj", img, box)).astype(np.float32)
            yield FrameChunk(start=int(sel[0]), time_ps=self._time[sel], positions_nm=pos,
                             velocities_nm_per_ps=vel, box_nm=box)
