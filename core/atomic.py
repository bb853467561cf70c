"""Atomic writes: a temporary file in the destination folder, flushed and fsynced, then os.replace.

A crash or a killed process leaves either the previous file or the new one, never a half-written one.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import IO, Any


@contextlib.contextmanager
def atomic_path(path: str | Path, *, suffix: str | None = None) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success it replaces ``path`` atomically.

    For writers that want a file name (h5py, matplotlib). On an exception the temporary file is removed
    and ``path`` is left as it was.
    """
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=suffix or target.suffix + ".part",
                               dir=target.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        with open(tmp_path, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp_path, target)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()


@contextlib.contextmanager
def atomic_open(path: str | Path, mode: str = "w", **kwargs: Any) -> Iterator[IO[Any]]:
    """Open a temporary file for writing; it replaces ``path`` only when the block finishes."""
    if "r" in mode or "a" in mode or "+" in mode:
        raise ValueError("atomic_open is for writing a whole new file ('w' or 'wb')")
    with atomic_path(path) as tmp, open(tmp, mode, **kwargs) as fh:
        yield fh
        fh.flush()


def write_text(path: str | Path, text: str) -> None:
    with atomic_open(path, "w", encoding="utf-8") as fh:
        fh.write(text)


def write_bytes(path: str | Path, data: bytes) -> None:
    with atomic_open(path, "wb") as fh:
        fh.write(data)
