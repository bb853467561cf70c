"""The result cache: analysis results kept in HDF5 files in a cache folder, never beside the inputs.

Each entry is one HDF5 file ``<key>.h5`` written atomically (temporary file, then rename), so two
windows using the cache at once, or a process killed half-way, never leave a damaged entry: a reader
sees the old file, the new file, or none. The key is a hash of the input files' identity (path, size,
modification time, and a hash of their first and last 64 KiB), the analysis name, its settings and the
phasewake version; when an input changes its key changes and the old entry is never read again (it is
pruned later by age and total size).

Settings: ``PHASEWAKE_CACHE_DIR`` (folder; default ``$XDG_CACHE_HOME/phasewake`` or
``~/.cache/phasewake``), ``PHASEWAKE_NO_CACHE=1`` to turn it off. ``phasewake cache --clear`` empties it.
"""

from __future__ import annotations

import hashlib
import json
import os
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core import __version__
from phasewake.core.atomic import atomic_path

_EDGE = 64 * 1024


def default_cache_dir() -> Path:
    env = os.environ.get("PHASEWAKE_CACHE_DIR")
    if env:
        return Path(env).expanduser()
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "phasewake"


def file_identity(path: str | Path) -> dict[str, Any]:
    """What identifies an input file's content cheaply: resolved path, size, mtime, edge hashes."""
    p = Path(path).resolve()
    st = p.stat()
    h = hashlib.sha256()
    with open(p, "rb") as fh:
        h.update(fh.read(_EDGE))
        if st.st_size > 2 * _EDGE:
            fh.seek(-_EDGE, os.SEEK_END)
            h.update(fh.read(_EDGE))
    return {"path": str(p), "size": st.st_size, "mtime_ns": st.st_mtime_ns, "edges_sha256": h.hexdigest()}


def make_key(paths: Sequence[str | Path], analysis: str, settings: Mapping[str, Any]) -> str:
    """A stable key for (inputs, analysis, settings, version)."""
    ident = {
        "inputs": [file_identity(p) for p in paths],
        "analysis": analysis,
        "settings": settings,
        "version": __version__,
    }
    text = json.dumps(ident, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:32]


@dataclass(frozen=True)
class CacheEntry:
    arrays: dict[str, np.ndarray]
    meta: dict[str, Any]


@dataclass(frozen=True)
class CacheInfo:
    folder: Path
    entries: int
    size_bytes: int
    enabled: bool


class ResultCache:
    """A folder of HDF5 result files keyed by :func:`make_key`."""

    def __init__(self, folder: str | Path | None = None, *, enabled: bool | None = None,
                 max_bytes: int = 2 * 1024**3, max_age_days: float = 30.0) -> None:
        self.folder = Path(folder) if folder is not None else default_cache_dir()
        self.enabled = (os.environ.get("PHASEWAKE_NO_CACHE", "") not in ("1", "true", "yes")) \
            if enabled is None else enabled
        self.max_bytes = max_bytes
        self.max_age_s = max_age_days * 86400.0

    def _path(self, key: str) -> Path:
        if not key.isalnum():
            raise ValueError("cache keys are hexadecimal digests")
        return self.folder / f"{key}.h5"

    def get(self, key: str) -> CacheEntry | None:
        """The entry for ``key``, or None (missing, disabled, or unreadable: a bad entry is removed)."""
        if not self.enabled:
            return None
        path = self._path(key)
        if not path.exists():
            return None
        import h5py

        try:
            with h5py.File(path, "r") as f:
                arrays = {name: np.asarray(f["arrays"][name][()]) for name in f["arrays"]}
                meta = json.loads(f.attrs["meta"])
        except (OSError, KeyError, ValueError):
            path.unlink(missing_ok=True)
            return None
        try:
            os.utime(path)  # recently used: pruned last
        except OSError:
            pass  # a read-only cache is still worth reading
        return CacheEntry(arrays=arrays, meta=meta)

    def has(self, key: str) -> bool:
        """Whether an entry for ``key`` is there (without reading it; :meth:`get` still checks it is usable)."""
        return self.enabled and self._path(key).is_file()

    def put(self, key: str, arrays: Mapping[str, np.ndarray], meta: Mapping[str, Any] | None = None) -> None:
        if not self.enabled:
            return
        import h5py

        self.folder.mkdir(parents=True, exist_ok=True)
        with atomic_path(self._path(key)) as tmp:
            with h5py.File(tmp, "w", track_order=True) as f:
                g = f.create_group("arrays")
                for name, value in arrays.items():
                    g.create_dataset(name, data=np.asarray(value))
                f.attrs["meta"] = json.dumps(dict(meta or {}), default=str)
                f.attrs["phasewake_version"] = __version__
                f.attrs["written_unix"] = time.time()
        self.prune()

    def prune(self) -> None:
        """Drop entries older than max_age_days, then the least recently used beyond max_bytes."""
        if not self.folder.is_dir():
            return
        now = time.time()
        files = []
        for p in self.folder.glob("*.h5"):
            try:
                st = p.stat()
            except FileNotFoundError:
                continue
            if now - st.st_mtime > self.max_age_s:
                p.unlink(missing_ok=True)
            else:
                files.append((st.st_mtime, st.st_size, p))
        total = sum(s for _, s, _ in files)
        for _, size, p in sorted(files):
            if total <= self.max_bytes:
                break
            p.unlink(missing_ok=True)
            total -= size

    def clear(self) -> int:
        """Remove every entry (and stale temporary files). Returns how many entries were removed."""
        n = 0
        if self.folder.is_dir():
            for p in list(self.folder.glob("*.h5")) + list(self.folder.glob(".*.part")):
                p.unlink(missing_ok=True)
                n += p.suffix == ".h5"
        return n

    def entries_by_analysis(self) -> dict[str, int]:
        """How many entries each analysis has (from the ``analysis`` name in their meta; "other" if none)."""
        import h5py

        counts: dict[str, int] = {}
        if not self.folder.is_dir():
            return counts
        for p in sorted(self.folder.glob("*.h5")):
            try:
                with h5py.File(p, "r") as f:
                    name = str(json.loads(f.attrs["meta"]).get("analysis") or "other")
            except (OSError, KeyError, ValueError, AttributeError):
                name = "other"
            counts[name] = counts.get(name, 0) + 1
        return counts

    def info(self) -> CacheInfo:
        files = list(self.folder.glob("*.h5")) if self.folder.is_dir() else []
        return CacheInfo(folder=self.folder, entries=len(files),
                         size_bytes=sum(p.stat().st_size for p in files if p.exists()), enabled=self.enabled)
