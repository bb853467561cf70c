"""Cached analyses: results kept in the result cache (``core/store/cache.py``) and rebuilt on the next request.

:func:`cached_work` wraps any analysis generator (``Work[T]``) of a run: the first request computes and
stores the result (through the codec of ``core/store/codec.py``), a later request with the same key
reads no frames and returns an equal result. Only runs read from files are cached (``run.paths``
non-empty); in-memory runs are always computed.

The key (:func:`analysis_key`) holds:

- the identity of every input file (path, size, modification time, hashes of the first and last
  64 KiB: touching or changing a file makes a new key) and of any extra file the analysis reads (a
  reference structure named in a coordinate specification);
- the analysis name and its settings, every keyword that changes the result (arrays by content hash,
  other runs such as a ``compare`` run by their own fingerprint);
- the run as the analysis sees it: a hash of its time axis and masses (command-line overrides of the
  time step or masses), the atom count, the frame window of a windowed run (offset and length), its
  metadata (time step, ensemble, temperature, constraints overrides) and a fingerprint of its energy
  table (rows, columns, units, edge values);
- the phasewake version, the entry format, and a fingerprint of the installed ``phasewake.core``
  source files (sizes and modification times), so a changed analysis never serves an old answer.

A cache that cannot be read or written (read-only folder, full disk) never fails the analysis: the
result is returned uncached and one notice "cache skipped" is recorded (``core.cache.take_notices``;
the command line prints it as a warning line). A damaged entry is a miss (its checksum is checked on
every read). A result the codec cannot store is simply not cached. A cache folder that is not ours
(files and no mark) raises :class:`~phasewake.core.store.cache.CacheFolderError`.
"""

from __future__ import annotations

import dataclasses
import enum
import functools
import hashlib
import json
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any, TypeVar

import numpy as np

from phasewake.core.progress import Progress, Work
from phasewake.core.store import codec as resultcodec
from phasewake.core.store.atomic import OutputError
from phasewake.core.store.cache import CacheEntry, ResultCache, file_identity, make_key, skipped

if TYPE_CHECKING:
    from phasewake.core.analyses.coordinates import CoordinateSeries
    from phasewake.core.analyses.request import AnalysisRequest
    from phasewake.core.model.run import Run

T = TypeVar("T")

_FORMAT = 2  # bump when the stored layout or the key contents change
_EDGE_ROWS = 4096  # energy-table rows hashed at each end (the files' identity covers the rest)


class _Uncacheable(Exception):
    """A setting that cannot be turned into a stable key: the analysis runs uncached."""


def _digest(a: np.ndarray) -> str:
    arr = np.ascontiguousarray(a)
    if arr.dtype.kind == "O":
        raise _Uncacheable("object array in the settings")
    h = hashlib.sha256(str(arr.dtype).encode() + str(arr.shape).encode())
    h.update(arr.reshape(-1).view(np.uint8).tobytes() if arr.size else b"")
    return h.hexdigest()[:16]


@functools.lru_cache(maxsize=1)
def code_fingerprint() -> str:
    """A hash of the sizes and modification times of the phasewake.core source files (once per process)."""
    root = Path(__file__).resolve().parent.parent  # core/
    h = hashlib.sha256()
    for p in sorted(root.rglob("*.py")):
        try:
            st = p.stat()
        except OSError:
            continue
        h.update(f"{p.relative_to(root)}:{st.st_size}:{st.st_mtime_ns};".encode())
    return h.hexdigest()[:16]


def _canon(x: Any) -> Any:
    """A JSON-ready, stable form of a setting (raises _Uncacheable for what has none)."""
    from phasewake.core.model.run import Run

    if x is None or isinstance(x, (bool, str)):
        return x
    if isinstance(x, enum.Enum):
        return {"enum": f"{type(x).__qualname__}.{x.name}"}
    if isinstance(x, (int, float)):
        return x if not isinstance(x, float) or x == x else "nan"
    if isinstance(x, np.generic):
        return _canon(x.item())
    if isinstance(x, np.ndarray):
        return {"array_sha": _digest(x), "shape": list(x.shape), "dtype": str(x.dtype)}
    if isinstance(x, Path):
        return str(x)
    if isinstance(x, Run):
        return run_fingerprint(x)
    if dataclasses.is_dataclass(x) and not isinstance(x, type):
        return {"class": type(x).__qualname__,
                **{f.name: _canon(getattr(x, f.name)) for f in dataclasses.fields(x)}}
    if isinstance(x, Mapping):
        return {"mapping": sorted(([json.dumps(_canon(k), sort_keys=True), _canon(v)] for k, v in x.items()),
                                  key=lambda kv: kv[0])}
    if isinstance(x, (list, tuple, range)):
        return [_canon(v) for v in x]
    if isinstance(x, (set, frozenset)):
        return sorted((_canon(v) for v in x), key=lambda v: json.dumps(v, sort_keys=True))
    raise _Uncacheable(f"a {type(x).__qualname__} setting")


def _energies_fingerprint(run: Run) -> Any:
    table = run.energies
    if table is None:
        return None
    n = len(table)

    def edges(a: Any) -> str:
        arr = np.asarray(a)
        if arr.shape[0] > 2 * _EDGE_ROWS:
            arr = np.concatenate([arr[:_EDGE_ROWS], arr[-_EDGE_ROWS:]])
        return _digest(arr)

    return {"rows": n, "time": edges(table.time_ps), "sources": list(table.sources),
            "series": [[k, s.name, s.unit, s.role, s.source, edges(s.values)] for k, s in table.series.items()]}


def run_fingerprint(run: Run) -> dict[str, Any]:
    """What identifies a run as an analysis sees it (files, time axis, masses, window, metadata, energies).

    Raises _Uncacheable for a run without files.
    """
    if not run.paths:
        raise _Uncacheable("a run without files")
    frames = run.frames
    window = None
    if frames is not None:
        window = [int(getattr(frames, "offset", 0)), int(frames.n_frames)]
    meta = dataclasses.asdict(run.metadata)
    return {"inputs": [file_identity(p) for p in run.paths],
            "time_sha": _digest(np.asarray(run.time_ps, dtype=np.float64)),
            "masses_sha": _digest(np.asarray(run.masses_amu, dtype=np.float64)),
            "n_atoms": run.n_atoms, "n_frames": run.n_frames, "frame_window": window,
            "has_frames": frames is not None,
            "has_velocities": None if frames is None else bool(frames.has_velocities),
            "velocities_estimated": None if frames is None else bool(frames.velocities_estimated),
            "metadata": _canon(meta), "energies": _energies_fingerprint(run)}


def analysis_key(run: Run, analysis: str, settings: Mapping[str, Any], *,
                 extra_paths: Iterable[str | Path] = ()) -> str:
    """The cache key of ``analysis`` with ``settings`` on ``run`` (see the module docstring).

    Raises _Uncacheable when the run has no files or a setting has no stable form.
    """
    fp = run_fingerprint(run)
    extra = [file_identity(p) for p in extra_paths]
    full = {"format": _FORMAT, "codec": resultcodec.CODEC_VERSION, "code": code_fingerprint(),
            "settings": _canon(dict(settings)), "run": {k: v for k, v in fp.items() if k != "inputs"},
            "extra_inputs": extra}
    return make_key(list(run.paths), analysis, full)


def _hit(entry: CacheEntry, analysis: str) -> tuple[bool, Any]:
    if entry.meta.get("analysis") != analysis or entry.meta.get("format") != _FORMAT:
        return False, None
    try:
        return True, resultcodec.from_entry(entry.arrays)
    except resultcodec.Undecodable:
        return False, None


def store(cache: ResultCache, key: str, analysis: str, result: Any) -> bool:
    """Put ``result`` under ``key``; False when it cannot be encoded or the cache cannot be written."""
    try:
        arrays = resultcodec.to_entry(result)
    except resultcodec.Unencodable:
        return False
    try:
        cache.put(key, arrays, {"analysis": analysis, "format": _FORMAT})
    except (OSError, OutputError) as exc:  # an unwritable cache only costs the next request a recomputation
        skipped(cache, exc)
        return False
    except (ValueError, TypeError):
        return False
    return True


def lookup(cache: ResultCache, key: str, analysis: str) -> tuple[bool, Any]:
    """``(True, result)`` for a usable entry, else ``(False, None)`` (missing, stale, unreadable)."""
    try:
        entry = cache.get(key)
    except (OSError, ValueError):  # an unreadable folder: a miss (CacheFolderError goes up: not our folder)
        return False, None
    if entry is None:
        return False, None
    return _hit(entry, analysis)


def cached_work(run: Run, analysis: str, settings: Mapping[str, Any], work: Work[T], *,
                cache: ResultCache | None = None, extra_paths: Sequence[str | Path] = ()) -> Work[T]:
    """``work`` (an unstarted analysis generator of ``run``) through the result cache.

    Parameters
    ----------
    run : Run
        The run the analysis reads; only runs with files (``run.paths``) are cached.
    analysis : str
        Short name of the analysis (``"audit"``, ``"pca"``, ...), stored in the entry.
    settings : mapping
        Every keyword that changes the result (time window, groups, overrides, method, seeds, ...).
        Values may be numbers, strings, arrays, paths, sequences, mappings, dataclasses or other Runs.
    work : generator
        The analysis itself, not yet started; on a hit it is closed without running.
    cache : ResultCache, optional
        Default ``ResultCache()`` (``PHASEWAKE_CACHE_DIR``, ``PHASEWAKE_NO_CACHE``).
    extra_paths : sequence of paths
        Other files the analysis reads (their identity joins the key).

    Returns
    -------
    Work[T]
        Yields Progress; returns the result (from the cache: one Progress "<analysis> (from the cache)").
    """
    cache = ResultCache() if cache is None else cache
    if not run.paths or not cache.enabled:
        return (yield from work)
    try:
        key = analysis_key(run, analysis, settings, extra_paths=extra_paths)
    except (_Uncacheable, OSError):
        return (yield from work)
    ok, value = lookup(cache, key, analysis)
    if ok:
        work.close()
        yield Progress(1, 1, f"{analysis} (from the cache)")
        return value  # type: ignore[no-any-return]
    result = yield from work
    store(cache, key, analysis, result)
    return result


def requested(run: Run, request: AnalysisRequest, *, cache: ResultCache | None = None) -> Work[Any]:
    """The result of ``request`` for ``run`` through the result cache: the one road of every front end.

    The key comes from ``request.name``, ``request.settings()`` and ``request.reference_paths(run)``; the
    work from ``request.work(run)`` (see :mod:`phasewake.core.analyses.request`).
    """
    return (yield from cached_work(run, request.name, request.settings(), request.work(run), cache=cache,
                                   extra_paths=request.reference_paths(run)))


# ---------------------------------------------------------------------------------------------------
# several requests from one read, each through the cache
# ---------------------------------------------------------------------------------------------------

class _Guarded:
    """A consumer whose failure (a PhasewakeError) stops feeding it, not the pass."""

    def __init__(self, inner: Any) -> None:
        self.inner = inner
        self.atoms = inner.atoms
        self.needs_positions = inner.needs_positions
        self.needs_velocities = inner.needs_velocities
        self.error: BaseException | None = None

    def _guard(self, step: Any, *args: Any, **kwargs: Any) -> Any:
        from phasewake.core.errors import PhasewakeError

        if self.error is None:
            try:
                return step(*args, **kwargs)
            except PhasewakeError as exc:
                self.error = exc
        return None

    def prepare(self, columns: Any, *, start: int, stop: int, chunk_frames: int) -> None:
        self._guard(self.inner.prepare, columns, start=start, stop=stop, chunk_frames=chunk_frames)

    def update(self, chunk: Any) -> None:
        self._guard(self.inner.update, chunk)

    def finish(self) -> Any:
        got = self._guard(self.inner.finish)
        return self.error if self.error is not None else got


class _GuardedMerging(_Guarded):
    """The same for a consumer with ``merge`` (so the pass may still be split over workers)."""

    def merge(self, later: _Guarded) -> None:
        self.error = self.error or later.error
        self._guard(self.inner.merge, later.inner)


def _guarded(inner: Any) -> _Guarded:
    return _GuardedMerging(inner) if callable(getattr(inner, "merge", None)) else _Guarded(inner)


def _pass_key(run: Run, request: AnalysisRequest, cache: ResultCache) -> str | None:
    """The request's cache key (that of :func:`requested`), or None when it is not cached."""
    paths = request.reference_paths(run)  # a bad setting (a coordinate outside the run) raises here
    if not run.paths or not cache.enabled:
        return None
    try:
        return analysis_key(run, request.name, request.settings(), extra_paths=paths)
    except (_Uncacheable, OSError):
        return None


def requested_pass(run: Run, requests: Mapping[str, AnalysisRequest], *, cache: ResultCache | None = None,
                   load_hits: bool = True, alone: bool = False) -> Work[dict[str, Any]]:
    """Several requests of ``run`` from one read of its frames, each looked up in and stored to the cache.

    Requests found in the cache are not computed; the others that offer a consumer (``request.consumer(run)``)
    share one :func:`phasewake.core.model.framepass.run_pass` over every frame, then each its
    ``after_pass`` step (the audit's energy part, the PCA's projection pass, which reads the frames again),
    and each result is stored under the key :func:`requested` uses for that request alone, so a later
    ``requested`` of one of them hits, and the other way round. Returns ``{name: result}``, where a result
    may be the :class:`~phasewake.core.errors.PhasewakeError` that stopped that analysis (the others go on),
    or None for a request that cannot join a shared pass (its consumer is None: part of the frames, a PCA by
    subspace iteration, ...) unless ``alone``, which then runs it on its own through :func:`requested`.

    ``load_hits=False`` only fills the cache for later requests: a request whose entry is already there is
    neither read nor decoded (None in the returned mapping).
    """
    from phasewake.core.errors import PhasewakeError
    from phasewake.core.model.framepass import run_pass

    cache = ResultCache() if cache is None else cache
    out: dict[str, Any] = {}
    keys = {name: _pass_key(run, request, cache) for name, request in requests.items()}
    for name, request in requests.items():
        key = keys[name]
        if key is not None and not load_hits and cache.has(key):
            out[name] = None
        elif key is not None:
            ok, value = lookup(cache, key, request.name)
            if ok:
                out[name] = value
    if out:
        yield Progress(1, 1, ", ".join(out) + " (from the cache)")
    missing = {n: r for n, r in requests.items() if n not in out}
    consumers: dict[str, _Guarded] = {}
    for name, request in missing.items():
        try:
            made = request.consumer(run)
        except PhasewakeError:
            made = None
        if made is not None:
            consumers[name] = _guarded(made)
    if consumers:
        firsts = yield from run_pass(run, consumers, label="one pass: " + ", ".join(r.label or r.name for n, r
                                                                                  in missing.items() if n in consumers))
        for name, first in firsts.items():
            if isinstance(first, PhasewakeError):
                out[name] = first
                continue
            try:
                out[name] = yield from missing[name].after_pass(run, first)
            except PhasewakeError as exc:
                out[name] = exc
        for name in consumers:
            key = keys[name]
            if key is not None and not isinstance(out.get(name), BaseException):
                store(cache, key, missing[name].name, out[name])
    for name, request in missing.items():
        if name not in consumers and alone:
            try:
                out[name] = yield from requested(run, request, cache=cache)
            except PhasewakeError as exc:
                out[name] = exc
    return {name: out.get(name) for name in requests}


# ---------------------------------------------------------------------------------------------------
# the earlier names, thin over the requests (for callers not yet switched to ``requested``)
# ---------------------------------------------------------------------------------------------------

def cached_coordinates(run: Run, specs: Sequence[str], *, cache: ResultCache | None = None, start: int = 0,
                       stop: int | None = None, mass_weighted_pca: bool = True,
                       fit_pca: bool = True) -> Work[list[CoordinateSeries]]:
    """``requested(run, CoordinatesRequest.for_run(run, specs, ...))`` (:mod:`phasewake.core.analyses.coordinates`)."""
    from phasewake.core.analyses.coordinates import CoordinatesRequest

    request = CoordinatesRequest.for_run(run, specs, start=start, stop=stop,
                                         mass_weighted_pca=mass_weighted_pca, fit_pca=fit_pca)
    return (yield from requested(run, request, cache=cache))


def cached_audit(run: Run, *, cache: ResultCache | None = None, **settings: Any) -> Work[Any]:
    """:class:`phasewake.core.analyses.audit.AuditRequest` of ``settings`` through :func:`requested`."""
    from phasewake.core.analyses.audit import AuditRequest

    return (yield from requested(run, AuditRequest(**settings), cache=cache))


def cached_pca(run: Run, *, cache: ResultCache | None = None, **settings: Any) -> Work[Any]:
    """``requested(run, PCARequest(**settings))`` (:mod:`phasewake.core.analyses.projection`)."""
    from phasewake.core.analyses.projection import PCARequest

    return (yield from requested(run, PCARequest(**settings), cache=cache))


def cached_vacf(run: Run, *, cache: ResultCache | None = None, **settings: Any) -> Work[Any]:
    """``requested(run, VACFRequest(**settings))`` (:mod:`phasewake.core.analyses.velocity`)."""
    from phasewake.core.analyses.velocity import VACFRequest

    return (yield from requested(run, VACFRequest(**settings), cache=cache))


def cached_spectrum(run: Run, *, cache: ResultCache | None = None, **settings: Any) -> Work[Any]:
    """``requested(run, SpectrumRequest(**settings))`` (:mod:`phasewake.core.analyses.velocity`)."""
    from phasewake.core.analyses.velocity import SpectrumRequest

    return (yield from requested(run, SpectrumRequest(**settings), cache=cache))
