"""The result cache: analysis results kept in a cache folder of our own, never beside the inputs.

The folder is ours only when it carries our mark: a file ``.phasewake-cache`` written when phasewake
creates the folder (or finds it empty). A folder that holds anything and has no mark is refused with a
:class:`CacheFolderError` (a user pointed ``PHASEWAKE_CACHE_DIR`` at their data, say): nothing in it is
read, written or deleted.

Each entry is one file ``<key>.pwcache``: a fixed header (our magic bytes, the layout version, the
lengths, a SHA-256 of everything after it), a JSON header (the key, the meta mapping, the arrays' dtypes,
shapes and offsets) and the arrays' bytes. Every read checks the SHA-256, so a damaged entry is a miss
(recomputed and replaced, with one notice), never a wrong answer. Entries are written through
:mod:`phasewake.core.store.atomic` (temporary file, then rename): two windows using the cache at once, or a
process killed half-way, never leave a damaged entry. Nothing here goes through the HDF5 library, so a
full disk is an ordinary OSError.

Only verified entries are ever deleted (by age and total size in :meth:`ResultCache.prune`, all of them
in :meth:`ResultCache.clear`): a regular file (not a link, not a folder) with our suffix, a key for a
name and our magic bytes at its start, in a marked folder; plus our own stale temporary files.

The key is a hash of the input files' identity (path, size, modification time, and a hash of their
first and last 64 KiB), the analysis name, its settings and the phasewake version; when an input
changes its key changes and the old entry is never read again (it is pruned later).

A cache that cannot be written (read-only folder, full disk) never fails an analysis: the write is
skipped and :func:`note` records one line that the front ends show (:func:`take_notices`).

Settings: ``PHASEWAKE_CACHE_DIR`` (folder; default ``$XDG_CACHE_HOME/phasewake`` or
``~/.cache/phasewake``), ``PHASEWAKE_NO_CACHE=1`` to turn it off. ``phasewake cache --clear`` empties it.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
import stat
import struct
import threading
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core import __version__
from phasewake.core.errors import PhasewakeError
from phasewake.core.store.atomic import (
    STALE_AFTER_S,
    OutputError,
    atomic_open,
    describe_os_error,
    is_our_temp,
    stale_temporaries,
    sweep_stale,
    write_text,
)

_EDGE = 64 * 1024

ENTRY_SUFFIX = ".pwcache"
MARK_NAME = ".phasewake-cache"
MARK_TEXT = ("phasewake result cache\n"
             "phasewake keeps analysis results here (*.pwcache files) and deletes only those.\n")
MAGIC = b"phasewake-cache\n"
LAYOUT = 1
_FIXED = struct.Struct("<16sII32sQ")  # magic, layout, JSON header length, sha256(header + payload), payload
_ALIGN = 64
_MAX_HEADER = 64 * 1024 * 1024
_KEY = re.compile(r"^[0-9a-f]{16,64}$")
_ENTRY_NAME = re.compile(r"^[0-9a-f]{16,64}" + re.escape(ENTRY_SUFFIX) + r"$")
_STORABLE_KINDS = "biufcSUmM"
# the cache of earlier versions: <key>.h5 HDF5 entries and their mkstemp temporaries
_LEGACY = re.compile(r"^(?:[0-9a-f]{32}\.h5|\.[0-9a-f]{32}\.h5\.[a-z0-9_]{8}\.h5\.part)$")


class CacheFolderError(PhasewakeError):
    """The cache folder holds files phasewake did not write (no mark): it is not used at all."""


# ---------------------------------------------------------------------------------------------------
# notices: one line each for the front ends ("cache skipped", "damaged entry replaced")
# ---------------------------------------------------------------------------------------------------

_notices: list[str] = []
_notices_lock = threading.Lock()


def note(text: str) -> None:
    """Record a notice about the cache for the front end to show (each text once)."""
    with _notices_lock:
        if text not in _notices:
            _notices.append(text)


def take_notices() -> list[str]:
    """The notices recorded since the last call (and forget them)."""
    with _notices_lock:
        out = list(_notices)
        _notices.clear()
    return out


# ---------------------------------------------------------------------------------------------------
# keys
# ---------------------------------------------------------------------------------------------------

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
    temporaries: int = 0  # stale temporary files of ours (left by killed writers), pruned on the next write
    owned: bool = True  # False: the folder holds files of someone else and no mark; it is not used


# ---------------------------------------------------------------------------------------------------
# the entry format
# ---------------------------------------------------------------------------------------------------

class _Damaged(Exception):
    pass


def _pad(n: int) -> int:
    return (-n) % _ALIGN


def _layout(arrays: Mapping[str, np.ndarray]) -> tuple[list[np.ndarray], list[list[Any]], int]:
    items: list[np.ndarray] = []
    table: list[list[Any]] = []
    offset = 0
    for name, value in arrays.items():
        a = np.ascontiguousarray(value)
        if a.dtype.kind not in _STORABLE_KINDS or a.dtype.fields is not None or a.dtype.subdtype is not None:
            raise ValueError(f"the cache stores plain numeric or text arrays, not {a.dtype} ({name!r})")
        items.append(a)
        table.append([str(name), a.dtype.str, list(a.shape), offset, int(a.nbytes)])
        offset += a.nbytes + _pad(a.nbytes)
    return items, table, offset


def _read_fixed(fh: Any) -> tuple[int, bytes, int]:
    raw = fh.read(_FIXED.size)
    if len(raw) != _FIXED.size:
        raise _Damaged("short")
    magic, layout, header_len, digest, payload_len = _FIXED.unpack(raw)
    if magic != MAGIC or layout != LAYOUT or header_len > _MAX_HEADER:
        raise _Damaged("not an entry of this layout")
    return header_len, digest, payload_len


def _read_entry(path: Path, key: str) -> CacheEntry:
    """The verified entry at ``path`` (raises _Damaged for anything short of a perfect entry)."""
    st = os.lstat(path)
    if not stat.S_ISREG(st.st_mode):
        raise FileNotFoundError(path)  # a folder or a link of that name: not an entry, a miss
    with open(path, "rb") as fh:
        header_len, digest, payload_len = _read_fixed(fh)
        if st.st_size != _FIXED.size + header_len + payload_len:
            raise _Damaged("size")
        header = fh.read(header_len)
        payload = np.empty(payload_len, np.uint8)
        got = fh.readinto(payload.data) if payload_len else 0
    if len(header) != header_len or got != payload_len:
        raise _Damaged("short")
    h = hashlib.sha256(header)
    h.update(payload.data)
    if h.digest() != digest:
        raise _Damaged("checksum")
    try:
        head = json.loads(header.decode("utf-8"))
        if not isinstance(head, dict) or head.get("key") != key:
            raise _Damaged("another key")
        meta = head["meta"]
        if not isinstance(meta, dict):
            raise _Damaged("meta")
        arrays: dict[str, np.ndarray] = {}
        for name, dtype_s, shape_l, offset, nbytes in head["arrays"]:
            dt = np.dtype(str(dtype_s))
            shape = tuple(int(s) for s in shape_l)
            offset, nbytes = int(offset), int(nbytes)
            if dt.kind not in _STORABLE_KINDS or min(shape, default=0) < 0 or offset < 0 \
                    or offset + nbytes > payload_len or nbytes != math.prod(shape) * dt.itemsize:
                raise _Damaged("array table")
            if nbytes == 0:
                arrays[str(name)] = np.zeros(shape, dt)
            else:
                arrays[str(name)] = payload[offset:offset + nbytes].view(dt).reshape(shape)
    except (KeyError, TypeError, ValueError, OverflowError, UnicodeDecodeError) as exc:
        raise _Damaged(str(exc)) from None
    return CacheEntry(arrays=arrays, meta=meta)


def _read_meta(path: Path) -> dict[str, Any]:
    """The meta mapping of an entry, from its header only (no checksum: for counting)."""
    with open(path, "rb") as fh:
        header_len, _, _ = _read_fixed(fh)
        head = json.loads(fh.read(header_len).decode("utf-8"))
    meta = head.get("meta") if isinstance(head, dict) else None
    if not isinstance(meta, dict):
        raise _Damaged("meta")
    return meta


# ---------------------------------------------------------------------------------------------------
# the cache
# ---------------------------------------------------------------------------------------------------

class ResultCache:
    """A folder of result entries keyed by :func:`make_key` (see the module docstring)."""

    def __init__(self, folder: str | Path | None = None, *, enabled: bool | None = None,
                 max_bytes: int = 2 * 1024**3, max_age_days: float = 30.0) -> None:
        self.folder = Path(folder) if folder is not None else default_cache_dir()
        self.enabled = (os.environ.get("PHASEWAKE_NO_CACHE", "") not in ("1", "true", "yes")) \
            if enabled is None else enabled
        self.max_bytes = max_bytes
        self.max_age_s = max_age_days * 86400.0

    # -- ownership ----------------------------------------------------------------------------------

    @property
    def mark(self) -> Path:
        return self.folder / MARK_NAME

    def _marked(self) -> bool:
        try:
            st = os.lstat(self.mark)
            if not stat.S_ISREG(st.st_mode):
                return False
            with open(self.mark, "rb") as fh:
                return fh.read(len(MARK_TEXT.splitlines()[0])) == MARK_TEXT.splitlines()[0].encode()
        except OSError:
            return False

    def owned(self) -> bool | None:
        """True: our marked folder; None: no folder yet, or an empty one; False: someone else's files."""
        if not self.folder.exists():
            return None
        if not self.folder.is_dir():
            return False
        if self._marked():
            return True
        try:
            with os.scandir(self.folder) as it:
                # our own temporary files do not count (another process may be writing the mark right now),
                # nor the files of the cache of earlier versions (adopted: marked on the next write)
                return None if all(is_our_temp(e.name) or _LEGACY.match(e.name) for e in it) else False
        except OSError:
            return False

    def refusal(self) -> CacheFolderError:
        if self.folder.exists() and not self.folder.is_dir():
            return CacheFolderError("the cache folder is a file, not a folder; point PHASEWAKE_CACHE_DIR at a "
                                    "new or empty folder, or use --no-cache", path=self.folder)
        return CacheFolderError(
            "this cache folder holds files phasewake did not write and has no .phasewake-cache mark, so it "
            "is not used (nothing in it was changed); point PHASEWAKE_CACHE_DIR at a new or empty folder, "
            "or use --no-cache", path=self.folder)

    def _require_owned(self, *, create: bool) -> bool:
        """True when the folder is ours (marking a new or empty one if ``create``); raises if it is not."""
        state = self.owned()
        if state is True:
            return True
        if state is False:
            raise self.refusal()
        if not create:
            return False
        write_text(self.mark, MARK_TEXT)
        return True

    def _path(self, key: str) -> Path:
        if not isinstance(key, str) or not _KEY.match(key):
            raise ValueError("cache keys are lowercase hexadecimal digests")
        return self.folder / f"{key}{ENTRY_SUFFIX}"

    def _is_entry(self, path: Path, st: os.stat_result | None = None) -> bool:
        """A verified entry of ours: regular file, our name pattern, our magic bytes."""
        if not _ENTRY_NAME.match(path.name):
            return False
        try:
            st = st or os.lstat(path)
            if not stat.S_ISREG(st.st_mode):
                return False
            with open(path, "rb") as fh:
                return fh.read(len(MAGIC)) == MAGIC
        except OSError:
            return False

    def _entries(self) -> list[tuple[Path, os.stat_result]]:
        out: list[tuple[Path, os.stat_result]] = []
        try:
            scan = list(os.scandir(self.folder))
        except OSError:
            return out
        for e in scan:
            if not _ENTRY_NAME.match(e.name):
                continue
            try:
                st = e.stat(follow_symlinks=False)
            except OSError:
                continue
            p = Path(e.path)
            if self._is_entry(p, st):
                out.append((p, st))
        return out

    def _drop_legacy(self) -> int:
        """Remove the entries of earlier versions' cache (``<32 hex>.h5`` HDF5 files) that are verifiably
        ours: a regular file whose root attributes are the ``phasewake_version`` and ``meta`` we wrote.
        They are never read again (their key and layout are gone). Returns how many went."""
        n = 0
        try:
            names = [e.name for e in os.scandir(self.folder) if _LEGACY.match(e.name)]
        except OSError:
            return 0
        for name in names:
            p = self.folder / name
            try:
                if not stat.S_ISREG(os.lstat(p).st_mode):
                    continue
                if name.endswith(".part"):
                    ours = time.time() - os.lstat(p).st_mtime >= STALE_AFTER_S
                else:
                    import h5py

                    with h5py.File(p, "r") as f:
                        ours = "phasewake_version" in f.attrs and "meta" in f.attrs and "arrays" in f
                if ours:
                    p.unlink()
                    n += not name.endswith(".part")
            except (OSError, ValueError, KeyError, RuntimeError):
                continue
        return n

    # -- reading and writing ------------------------------------------------------------------------

    def get(self, key: str) -> CacheEntry | None:
        """The entry for ``key``, or None (missing, disabled, damaged: a damaged entry is removed).

        Raises :class:`CacheFolderError` when the folder is not ours.
        """
        if not self.enabled:
            return None
        path = self._path(key)
        if not self._require_owned(create=False):
            return None
        try:
            entry = _read_entry(path, key)
        except FileNotFoundError:
            return None
        except _Damaged:
            note("a damaged result-cache entry was ignored; the result was computed afresh and stored again")
            if self._is_entry(path):
                try:
                    path.unlink()
                except OSError:
                    pass
            return None
        try:
            os.utime(path)  # recently used: pruned last
        except OSError:
            pass  # a read-only cache is still worth reading
        return entry

    def has(self, key: str) -> bool:
        """Whether an entry for ``key`` is there (without reading it; :meth:`get` still checks it is usable)."""
        if not self.enabled or self.owned() is not True:
            return False
        path = self._path(key)
        try:
            return stat.S_ISREG(os.lstat(path).st_mode)
        except OSError:
            return False

    def put(self, key: str, arrays: Mapping[str, np.ndarray], meta: Mapping[str, Any] | None = None) -> None:
        """Store ``arrays`` and ``meta`` (JSON-able) under ``key``.

        Raises OSError or :class:`~phasewake.core.store.atomic.OutputError` when the folder cannot be written,
        ValueError for arrays it does not store, :class:`CacheFolderError` when the folder is not ours.
        """
        if not self.enabled:
            return
        path = self._path(key)
        items, table, payload_len = _layout(arrays)
        head = {"key": key, "meta": dict(meta or {}), "arrays": table, "phasewake_version": __version__,
                "written_unix": time.time()}
        header = json.dumps(head, default=str, allow_nan=False).encode("utf-8")
        h = hashlib.sha256(header)
        for a in items:
            if a.nbytes:
                h.update(a.reshape(-1).view(np.uint8).data)
            h.update(b"\0" * _pad(a.nbytes))
        self._require_owned(create=True)
        with atomic_open(path, "wb") as fh:
            fh.write(_FIXED.pack(MAGIC, LAYOUT, len(header), h.digest(), payload_len))
            fh.write(header)
            for a in items:
                if a.nbytes:
                    fh.write(a.reshape(-1).view(np.uint8).data)
                fh.write(b"\0" * _pad(a.nbytes))
        self.prune()

    # -- housekeeping -------------------------------------------------------------------------------

    def prune(self) -> None:
        """Drop entries older than max_age_days, then the least recently used beyond max_bytes, and our
        stale temporary files. Only verified entries in a marked folder are touched."""
        if self.owned() is not True:
            return
        self._drop_legacy()
        now = time.time()
        kept = []
        for p, st in self._entries():
            if now - st.st_mtime > self.max_age_s:
                p.unlink(missing_ok=True)
            else:
                kept.append((st.st_mtime, st.st_size, p))
        total = sum(s for _, s, _ in kept)
        for _, size, p in sorted(kept):
            if total <= self.max_bytes:
                break
            p.unlink(missing_ok=True)
            total -= size
        sweep_stale(self.folder)

    def clear(self) -> int:
        """Remove every verified entry (and our stale temporary files). Returns how many entries went.

        Raises :class:`CacheFolderError` when the folder is not ours (nothing is deleted).
        """
        if not self._require_owned(create=self.folder.is_dir()):
            return 0
        n = self._drop_legacy()
        for p, _ in self._entries():
            try:
                p.unlink()
                n += 1
            except FileNotFoundError:
                pass
        sweep_stale(self.folder)
        return n

    def entries_by_analysis(self) -> dict[str, int]:
        """How many entries each analysis has (from the ``analysis`` name in their meta; "other" if none)."""
        counts: dict[str, int] = {}
        if self.owned() is not True:
            return counts
        for p, _ in sorted(self._entries()):
            try:
                name = str(_read_meta(p).get("analysis") or "other")
            except (OSError, _Damaged, ValueError, UnicodeDecodeError):
                name = "other"
            counts[name] = counts.get(name, 0) + 1
        return counts

    def info(self) -> CacheInfo:
        state = self.owned()
        entries = self._entries() if state is True else []
        temps = len(stale_temporaries(self.folder)) if state is True else 0
        return CacheInfo(folder=self.folder, entries=len(entries), size_bytes=sum(st.st_size for _, st in entries),
                         enabled=self.enabled, temporaries=temps, owned=state is not False)


def skipped(cache: ResultCache, exc: BaseException) -> None:
    """Record that a result was not stored because the cache folder cannot be written."""
    reason = describe_os_error(exc) if isinstance(exc, OSError) else getattr(exc, "problem", str(exc))
    if isinstance(exc, OutputError):
        reason = exc.problem.removeprefix("cannot write: ").split(" (the previous")[0]
    note(f"cache skipped: the result was not stored in {cache.folder} ({reason})")
