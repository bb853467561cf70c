"""A pass cut into frame ranges: what a range's work needs wherever it runs (a worker process of this
machine, :mod:`phasewake.core.model.parallel`, or a Dask worker, :mod:`phasewake.core.model.cluster`).

* How a worker gets the run: :func:`travelling` sends a run whose frame source is *portable* (XTC and
  TRR: a path, the frame offsets and the clock; wrappers over them) as it is, without its topology and
  energies; any other run goes as :class:`RunFiles` (its files and ``open_run`` options; nothing open is
  pickled) and is opened in the worker once (:func:`worker_run`).
* The cut: :func:`cut_ranges` at chunk boundaries, so a consumer that works in whole chunks sees the
  serial pass's chunks; :func:`ranges_per_worker`; :func:`before_parts` fixes what a serial pass would
  take from its first frame.
* The work of one range: :func:`read_range` feeds the consumers and returns them with their partial
  state; the parent folds them with :func:`merge_in_order` and calls ``finish()`` once.
* Failures: a phasewake error raised in a worker goes back whole (:func:`carry`, :func:`reraise`).
"""

from __future__ import annotations

import pickle
import weakref
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from phasewake.core.errors import AnalysisError, PhasewakeError

if TYPE_CHECKING:
    from phasewake.core.model.run import Run


# ------------------------------------------------------------------------------------------ the run's files


@dataclass(frozen=True)
class RunFiles:
    """How to open a run again in another process: its files and :func:`open_run` keywords.

    Only plain values (paths as text, numbers, mappings of them): no open file, no parsed topology.
    """

    paths: tuple[str, ...]
    topology: str | None = None
    options: Mapping[str, Any] = field(default_factory=dict)

    def open(self) -> Run:
        from phasewake.core.readers import open_run

        return open_run(list(self.paths), topology=self.topology, **dict(self.options))

    def key(self) -> bytes:
        return pickle.dumps((self.paths, self.topology, sorted(dict(self.options).items())))


_files_of: dict[int, RunFiles] = {}


def remember_files(run: Run, files: RunFiles) -> Run:
    """Note how ``run`` was opened (the command line does, with the options given), for the workers."""
    key = id(run)
    _files_of[key] = files
    weakref.finalize(run, _files_of.pop, key, None)
    return run


def has_files(run: Run) -> bool:
    """Whether ``run`` can be read in another process: it has paths, or a noted :class:`RunFiles`."""
    return bool(run.paths) or id(run) in _files_of


def files_of(run: Run) -> RunFiles:
    """The :class:`RunFiles` noted for ``run``, else its paths (a trajectory with its topology, an H5MD
    file: enough to read the same frames again)."""
    got = _files_of.get(id(run))
    if got is not None:
        return got
    if not run.paths:
        raise AnalysisError("the run has no files to read in another process")
    return RunFiles(paths=tuple(str(p) for p in run.paths))


# ---------------------------------------------------------------------------------------------- the ranges


def cut_ranges(start: int, stop: int, parts: int, *, align: int = 1) -> list[tuple[int, int]]:
    """Cut frames [start, stop) into at most ``parts`` consecutive non-empty ranges of near-equal length,
    each boundary a multiple of ``align`` frames after ``start`` (so blocks of ``align`` frames are the
    serial pass's blocks). Fewer ranges when there are fewer blocks than parts."""
    n = int(stop) - int(start)
    if n <= 0:
        raise AnalysisError(f"empty frame range {start}:{stop}")
    align = max(1, int(align))
    blocks = -(-n // align)
    parts = max(1, min(int(parts), blocks))
    edges = [int(start) + min(n, (blocks * k // parts) * align) for k in range(parts + 1)]
    return [(a, b) for a, b in zip(edges[:-1], edges[1:]) if b > a]


def mergeable(consumers: Mapping[str, Any]) -> bool:
    """Whether every consumer can fold a later consumer's partial state into its own (``merge``)."""
    return all(callable(getattr(c, "merge", None)) for c in consumers.values())


# A partial state larger than this goes back from a worker once, not once per range (a PCA's covariance).
LARGE_STATE_BYTES = 8 << 20


def ranges_per_worker(consumers: Mapping[str, Any]) -> int:
    """Frame ranges per worker: 2, so a worker that finishes early takes another's share, unless the
    consumers' partial states are large (``state_bytes``, the exact PCA's d x d sums): then 1, since
    every range's state is pickled back to the parent and added there (2 x 72 MB per worker for a PCA
    of 1,000 atoms cost more than the balance saves)."""
    size = sum(int(getattr(c, "state_bytes", 0)) for c in consumers.values())
    return 1 if size > LARGE_STATE_BYTES else 2


def before_parts(run: Run, consumers: Mapping[str, Any], start: int) -> None:
    """Fix now what a serial pass takes from its first frame (the PCA's superposition reference), so
    consumers fed different ranges share it and can be merged."""
    for consumer in consumers.values():
        first = getattr(consumer, "use_first_frame_of", None)
        if callable(first):
            first(run, start)


def merge_in_order(parts: Sequence[Mapping[str, Any]]) -> dict[str, Any]:
    """Fold the consumers of consecutive ranges into the first range's, in frame order."""
    merged = dict(parts[0])
    for later in parts[1:]:
        for name, consumer in merged.items():
            consumer.merge(later[name])
    return merged


# ------------------------------------------------------------------------------------ failures from workers


class _Failure(Exception):
    """A phasewake error raised in a worker, carried back whole (its class and attributes): the parent
    raises the same error the serial pass would (``TooShortError(what, have=, need=)`` and the like do
    not survive plain pickling)."""

    def __init__(self, cls: type[BaseException], text: str, state: dict[str, Any]) -> None:
        super().__init__(text)
        self.cls, self.text, self.state = cls, text, state

    def __reduce__(self) -> tuple[Any, ...]:
        return (_Failure, (self.cls, self.text, self.state))

    def rebuild(self) -> BaseException:
        exc = self.cls.__new__(self.cls)
        Exception.__init__(exc, self.text)
        exc.__dict__.update(self.state)
        return exc


def carry(exc: PhasewakeError) -> _Failure:
    return _Failure(type(exc), str(exc), dict(exc.__dict__))


def reraise(exc: BaseException) -> None:
    """Raise what a worker raised: a carried phasewake error as itself, anything else unchanged."""
    if isinstance(exc, _Failure):
        raise exc.rebuild() from None
    raise exc


# ------------------------------------------------------------------------------------------ in the worker

_opened_runs: dict[bytes, Any] = {}  # per process: the run opened last (from its RunFiles)


def opened(files: RunFiles, runs: dict[bytes, Any]) -> Run:
    """The run of ``files``, opened once per worker process."""
    key = files.key()
    if key not in runs:
        runs.clear()  # one run at a time: a replica ensemble moves on from run to run
        runs[key] = files.open()
    return runs[key]


def travelling(run: Run, files: RunFiles) -> Run | RunFiles:
    """What a worker process gets to read ``run``'s frames: the run itself, without its topology, energies
    and warnings (a few bytes per frame and atom), when its frame source is portable; else ``files``, to
    open it again there."""
    import dataclasses

    if run.frames is not None and getattr(run.frames, "portable", False):
        return dataclasses.replace(run, topology=None, energies=None, warnings=[])
    return files


def worker_run(got: Run | RunFiles) -> Run:
    """The run a worker reads: as it travelled (:func:`travelling`), or opened from its files once."""
    if isinstance(got, RunFiles):
        return opened(got, _opened_runs)
    return got


def read_range(run: Run, consumers: Mapping[str, Any], start: int, stop: int, chunks: tuple[int, float],
               tick: Callable[[int], None]) -> dict[str, Any]:
    """Feed frames [start, stop) of ``run`` to ``consumers`` in the parent's chunks (``chunks``: its
    :func:`~phasewake.core.settings.chunk_setting`); ``tick(frames done)`` after every chunk (it raises to
    stop). Returns the consumers with their partial state."""
    from phasewake.core.model.feeding import feed
    from phasewake.core.settings import chunking

    with chunking(frames=chunks[0], mb=chunks[1]):  # the parent's (a pool may outlive a change of it)
        for n in feed(run, consumers, start=start, stop=stop):
            tick(n)
    return dict(consumers)


def frame_count(files: RunFiles) -> int:
    """The number of frames of the run of ``files`` (a small task: for tests and for a first look at an
    ensemble)."""
    return opened(files, {}).n_frames
