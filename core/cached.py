"""Cached analyses: results kept in the result cache (``core/cache.py``) and rebuilt on the next request.

Only runs read from files are cached (``run.paths`` non-empty); in-memory runs are always computed. The
key holds the identity of every input file (path, size, modification time, edge hashes: touching or
changing a file makes a new key), the analysis name, its settings (time window included), a hash of the
run's time axis and masses (so command-line overrides of the time step or masses are part of the key),
the identity of any reference file a specification names, and the phasewake version.

A cache that cannot be written (read-only folder, full disk) never fails the analysis: the result is
returned uncached.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.cache import ResultCache, file_identity, make_key
from phasewake.core.progress import Progress, Work

if TYPE_CHECKING:
    from phasewake.core.coordinates import CoordinateSeries
    from phasewake.core.run import Run

_FORMAT = 1  # bump when the stored layout changes
_OPTIONAL = ("velocity", "m_eff", "momentum")
_SCALARS = ("spec", "label", "unit", "momentum_unit", "velocities_estimated", "velocity_unit", "m_eff_unit",
            "periodic", "start", "stop", "chunk_frames")


def _digest(a: np.ndarray) -> str:
    arr = np.ascontiguousarray(a)
    return hashlib.sha256(arr.tobytes() + str(arr.dtype).encode()).hexdigest()[:16]


def coordinates_key(run: Run, specs: Sequence[str], *, start: int, stop: int | None, chunk_frames: int | None,
                    mass_weighted_pca: bool, fit_pca: bool) -> str:
    """The cache key of :func:`cached_coordinates` (the run must have files)."""
    from phasewake.core.coordinates import resolve_for_run

    refs = []
    for s in specs:
        r = resolve_for_run(s, run)
        if r.reference_path:
            refs.append(file_identity(r.reference_path))
    stop_ = run.n_frames if stop is None else min(int(stop), run.n_frames)
    settings = {"format": _FORMAT, "specs": list(specs), "start": int(start), "stop": stop_,
                "chunk_frames": chunk_frames, "mass_weighted_pca": bool(mass_weighted_pca), "fit_pca": bool(fit_pca),
                "time_sha": _digest(np.asarray(run.time_ps, dtype=np.float64)),
                "masses_sha": _digest(np.asarray(run.masses_amu, dtype=np.float64)),
                "n_atoms": run.n_atoms, "references": refs}
    return make_key(list(run.paths), "coordinates", settings)


def _store(cache: ResultCache, key: str, series: list[CoordinateSeries]) -> None:
    arrays: dict[str, np.ndarray] = {"time_ps": series[0].time_ps}
    meta: list[dict[str, Any]] = []
    for k, s in enumerate(series):
        arrays[f"{k}/values"] = s.values
        for name in _OPTIONAL:
            value = getattr(s, name)
            if value is not None:
                arrays[f"{k}/{name}"] = value
        meta.append({name: getattr(s, name) for name in _SCALARS})
    try:
        cache.put(key, {n.replace("/", "_"): v for n, v in arrays.items()},
                  {"series": meta, "format": _FORMAT})
    except OSError:
        pass  # an unwritable cache only costs the next request a recomputation


def _rebuild(entry: Any) -> list[CoordinateSeries] | None:
    from phasewake.core.coordinates import CoordinateSeries

    meta = entry.meta.get("series")
    if entry.meta.get("format") != _FORMAT or not isinstance(meta, list):
        return None
    arrays = entry.arrays
    time = arrays.get("time_ps")
    if time is None:
        return None
    out = []
    for k, m in enumerate(meta):
        values = arrays.get(f"{k}_values")
        if values is None:
            return None
        opt = {name: arrays.get(f"{k}_{name}") for name in _OPTIONAL}
        out.append(CoordinateSeries(time_ps=time, values=values, **opt, **{n: m[n] for n in _SCALARS}))
    return out


def cached_coordinates(run: Run, specs: Sequence[str], *, cache: ResultCache | None = None, start: int = 0,
                       stop: int | None = None, chunk_frames: int | None = None, mass_weighted_pca: bool = True,
                       fit_pca: bool = True) -> Work[list[CoordinateSeries]]:
    """:func:`phasewake.core.coordinates.compute_coordinates` through the result cache.

    Same settings and result (``list[CoordinateSeries]``); a hit reads no frames. ``cache`` defaults to
    ``ResultCache()`` (``PHASEWAKE_CACHE_DIR``, ``PHASEWAKE_NO_CACHE``); pass ``ResultCache(enabled=False)``
    to bypass it. In-memory runs (no files) are never cached.
    """
    from phasewake.core.coordinates import compute_coordinates

    work = compute_coordinates(run, specs, start=start, stop=stop, chunk_frames=chunk_frames,
                               mass_weighted_pca=mass_weighted_pca, fit_pca=fit_pca)
    cache = ResultCache() if cache is None else cache
    if not run.paths or not cache.enabled or run.frames is None or not specs:
        return (yield from work)
    key = coordinates_key(run, specs, start=start, stop=stop, chunk_frames=chunk_frames,
                          mass_weighted_pca=mass_weighted_pca, fit_pca=fit_pca)
    entry = cache.get(key)
    if entry is not None:
        hit = _rebuild(entry)
        if hit is not None:
            work.close()
            yield Progress(1, 1, "coordinates (from the cache)")
            return hit
    series = yield from work
    _store(cache, key, series)
    return series
