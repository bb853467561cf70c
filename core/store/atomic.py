"""Atomic writes, the one writer of every file phasewake makes.

A file is written to a temporary file beside the target (``.<start of the name>.<12 hex digits>.part``,
at most 84 bytes, so a legal 255-byte name still gets a legal temporary name), flushed and fsynced,
then renamed over the target with ``os.replace``. A crash, a full disk or a killed process leaves either
the previous file or the new one, never a half-written one.

- Permissions are those of a normal new file: the temporary file is created with mode 0666 less the
  umask (0644 under umask 022), and a file that replaces an existing one takes over its mode.
- A write that fails (no space left, file too large, permission denied, read-only file system, a folder
  in the way) raises :class:`OutputError` naming the file; the temporary file is removed and the old file
  is untouched. Nothing is retried.
- An interrupt noted by :mod:`phasewake.core.interrupts` (Ctrl-C, SIGTERM) abandons the write before
  the rename.
- Temporary files of our naming left by a killed process (``kill -9``) are swept on the next write into
  the same folder once they are older than :data:`STALE_AFTER_S` (only regular files of ours that match
  the pattern exactly; nothing else is touched).
- HDF5 output is built in memory (:func:`atomic_hdf5`) and written as bytes, so a full disk can never
  reach the HDF5 library in the middle of a write (it crashes the process there).
"""

from __future__ import annotations

import contextlib
import errno
import os
import re
import secrets
import stat
import time
from collections.abc import Iterator
from pathlib import Path
from typing import IO, Any

from phasewake.core import interrupts
from phasewake.core.errors import PhasewakeError

STALE_AFTER_S = 3600.0  # a temporary file untouched this long belongs to a writer that died
_PREFIX_BYTES = 64
TEMP_PATTERN = re.compile(r"^\..{0,64}\.[0-9a-f]{12}\.part$", re.DOTALL)


class OutputError(PhasewakeError):
    """An output file cannot be written (full disk, permissions, a folder in the way, ...)."""


_PLAIN = {
    errno.ENOSPC: "no space left on the device",
    errno.EFBIG: "the file is too large for this file system or the limits of this session",
    errno.EDQUOT: "the disk quota is exceeded",
    errno.EACCES: "permission denied",
    errno.EPERM: "permission denied",
    errno.EROFS: "the file system is read-only",
    errno.EISDIR: "a folder of that name is in the way",
    errno.ENOTDIR: "a part of the path is a file, not a folder",
    errno.ENAMETOOLONG: "the name is too long",
    errno.ENOENT: "the folder does not exist",
    errno.EEXIST: "a part of the path is a file, not a folder",
}


def describe_os_error(exc: OSError) -> str:
    """Plain words for the errors a write meets."""
    return _PLAIN.get(exc.errno or 0, exc.strerror or str(exc))


def _output_error(target: Path, exc: OSError) -> OutputError:
    return OutputError(f"cannot write: {describe_os_error(exc)} (the previous file, if any, is unchanged)",
                       path=target)


def temp_name(target_name: str) -> str:
    """The temporary name for ``target_name``: a hidden file, under 100 bytes whatever the name."""
    raw = target_name.encode("utf-8", "surrogateescape")[:_PREFIX_BYTES]
    start = raw.decode("utf-8", "ignore")  # never cut a character in two
    return f".{start}.{secrets.token_hex(6)}.part"


def is_our_temp(name: str) -> bool:
    """Whether ``name`` is a temporary name of ours (:func:`temp_name`)."""
    return bool(TEMP_PATTERN.match(name))


def stale_temporaries(folder: str | Path, *, older_than_s: float = STALE_AFTER_S) -> list[Path]:
    """Our temporary files in ``folder`` untouched for ``older_than_s``: regular files, our naming, our uid."""
    out: list[Path] = []
    now = time.time()
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return out
    uid = os.getuid() if hasattr(os, "getuid") else None
    for e in entries:
        if not is_our_temp(e.name):
            continue
        try:
            st = e.stat(follow_symlinks=False)
        except OSError:
            continue
        if not stat.S_ISREG(st.st_mode) or (uid is not None and st.st_uid != uid):
            continue
        if now - st.st_mtime >= older_than_s:
            out.append(Path(e.path))
    return out


def sweep_stale(folder: str | Path, *, older_than_s: float = STALE_AFTER_S) -> int:
    """Remove :func:`stale_temporaries` of ``folder``; returns how many were removed."""
    n = 0
    for p in stale_temporaries(folder, older_than_s=older_than_s):
        try:
            p.unlink()
            n += 1
        except OSError:
            pass
    return n


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_path(path: str | Path, *, suffix: str | None = None) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success it replaces ``path`` atomically.

    For writers that want a file name. On an exception the temporary file is removed and ``path`` is
    left as it was; an OSError becomes :class:`OutputError`. (``suffix`` is accepted for compatibility
    and ignored: the temporary name is always :func:`temp_name`.)
    """
    target = Path(path)
    folder = target.parent
    try:
        if target.is_dir():
            raise IsADirectoryError(errno.EISDIR, "is a folder", str(target))
        folder.mkdir(parents=True, exist_ok=True)
        sweep_stale(folder)
        for attempt in range(100):  # 48 random bits: a clash is already unlikely once
            tmp = folder / temp_name(target.name)
            try:
                fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0), 0o666)
                break
            except FileExistsError:
                if attempt == 99:
                    raise
        os.close(fd)
    except OSError as exc:
        raise _output_error(target, exc) from None
    try:
        yield tmp
        interrupts.check()
        try:
            with open(tmp, "rb+") as fh:
                os.fsync(fh.fileno())
            try:
                old_mode = stat.S_IMODE(os.stat(target).st_mode)
            except FileNotFoundError:
                old_mode = None
            if old_mode is not None:
                os.chmod(tmp, old_mode)
            interrupts.check()
            os.replace(tmp, target)
        except OSError as exc:
            raise _output_error(target, exc) from None
    except OSError as exc:  # from the caller's writing
        raise _output_error(target, exc) from None
    finally:
        with contextlib.suppress(OSError):
            os.unlink(tmp)


@contextlib.contextmanager
def atomic_open(path: str | Path, mode: str = "w", **kwargs: Any) -> Iterator[IO[Any]]:
    """Open a temporary file for writing; it replaces ``path`` only when the block finishes."""
    if "r" in mode or "a" in mode or "+" in mode:
        raise ValueError("atomic_open is for writing a whole new file ('w' or 'wb')")
    with atomic_path(path) as tmp, open(tmp, mode, **kwargs) as fh:
        yield fh
        fh.flush()


def write_text(path: str | Path, text: str) -> None:
    """Write ``text`` (UTF-8) to ``path`` atomically."""
    write_bytes(path, text.encode("utf-8"))


def write_bytes(path: str | Path, data: bytes | bytearray | memoryview) -> None:
    """Write ``data`` to ``path`` atomically."""
    with atomic_open(path, "wb") as fh:
        fh.write(data)


@contextlib.contextmanager
def atomic_hdf5(path: str | Path, **kwargs: Any) -> Iterator[Any]:
    """An h5py.File built in memory, written to ``path`` atomically when the block finishes.

    The HDF5 library only ever writes to memory; the file system sees one plain write of the finished
    image, whose failure is an :class:`OutputError`. ``kwargs`` go to ``h5py.File`` (``track_order``...).
    """
    with hdf5_in_memory(**kwargs) as (f, image):
        yield f
    write_bytes(path, image())


@contextlib.contextmanager
def hdf5_in_memory(**kwargs: Any) -> Iterator[tuple[Any, Any]]:
    """``(h5py.File, image)``: a file that lives in memory; after the block ``image()`` gives its bytes."""
    import io

    import h5py

    buf = io.BytesIO()
    holder: dict[str, bytes] = {}
    with h5py.File(buf, "w", **kwargs) as f:
        yield f, lambda: holder["data"]
    holder["data"] = buf.getvalue()
